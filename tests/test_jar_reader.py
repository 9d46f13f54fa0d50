"""The jar-test reader on awkward files (each quirk labs really produce) and on bad ones.

Ground truth for every awkward file is the file the test writes itself: the expected values are the numbers
typed into it, converted to mg/L (ug/L values are whole numbers or halves, so their /1000 is exact in binary and
the comparison is exact). For bad files the check is the message: it must name the row (as a text editor or
spreadsheet counts it, header included), the column and the value.
"""

import io
import math

import numpy as np
import openpyxl
import pandas as pd
import pytest

from workbench.errors import InputError
from workbench.treatment import jar_tests
from workbench.treatment.jar_tests import read_jar_tests

COLUMNS = list(jar_tests.OUTPUT_COLUMNS)


def write(tmp_path, text, name="jars.csv", encoding="utf-8"):
    path = tmp_path / name
    path.write_bytes(text.encode(encoding))
    return path


def records(df):
    """Rows as tuples, NaN as None (so exact equality can be asserted)."""
    out = []
    for row in df.itertuples(index=False):
        out.append(tuple(None if isinstance(v, float) and math.isnan(v) else v for v in row))
    return out


# ---------------------------------------------------------------------------------------------- awkward files
def test_bom_comments_blank_lines_and_crlf(tmp_path):
    text = (
        "\ufeff# bench series, invented for this test\r\n"
        "\r\n"
        "jar,reagent,dose_mg_l,ph,Zn dissolved (mg/L)\r\n"
        "\r\n"
        "J-01,lime,120,8.5,0.52\r\n"
        ",,,,\r\n"
        "J-02,lime,180,9.25,0.081\r\n"
        "\r\n"
    )
    df = read_jar_tests(write(tmp_path, text))
    assert list(df.columns) == COLUMNS
    assert records(df) == [
        ("J-01", 8.5, 120.0, "lime", "Zn", "dissolved", 0.52, False, None),
        ("J-02", 9.25, 180.0, "lime", "Zn", "dissolved", 0.081, False, None),
    ]
    # rows as the editor counts them: comment 1, blank 2, header 3, blank 4, J-01 on 5, empty row 6, J-02 on 7
    assert df.attrs["rows"] == {"J-01": 5, "J-02": 7}
    assert df["censored"].dtype == bool


def test_units_in_headers_are_converted_to_mg_l(tmp_path):
    text = (
        "jar,reagent,dose (g/L),pH,Zn dissolved (ug/L),Cu filtered [µg/L],Ni_diss_μg_L,Cd total mg/L,"
        "Pb unfiltered (ng/L)\n"
        "1,caustic,0.25,9.0,35,4,120,0.5,2500\n"
    )
    df = read_jar_tests(write(tmp_path, text))
    assert records(df) == [
        ("1", 9.0, 250.0, "caustic", "Zn", "dissolved", 0.035, False, None),  # 35 ug/L
        ("1", 9.0, 250.0, "caustic", "Cu", "dissolved", 0.004, False, None),  # 4 ug/L (micro sign U+00B5)
        ("1", 9.0, 250.0, "caustic", "Ni", "dissolved", 0.12, False, None),  # 120 ug/L (Greek mu U+03BC)
        ("1", 9.0, 250.0, "caustic", "Cd", "total", 0.5, False, None),
        ("1", 9.0, 250.0, "caustic", "Pb", "total", 0.0025, False, None),  # 2500 ng/L
    ]


def test_below_detection_values_are_censored_not_numbers(tmp_path):
    text = (
        "jar,reagent,dose (mg/L),pH,Zn dissolved (mg/L),Zn total (ug/L),Cu dissolved (mg/L),"
        "Zn dissolved detection limit (mg/L),Cu detection limit (ug/L)\n"
        "A,lime,100,8,<0.02,< 50,ND,0.01,5\n"
        "B,lime,150,9,n.d.,40,<DL,0.004,2\n"
    )
    df = read_jar_tests(write(tmp_path, text))
    assert records(df) == [
        ("A", 8.0, 100.0, "lime", "Zn", "dissolved", None, True, 0.02),  # "<0.02": its own limit wins
        ("A", 8.0, 100.0, "lime", "Zn", "total", None, True, 0.05),  # "< 50" ug/L
        ("A", 8.0, 100.0, "lime", "Cu", "dissolved", None, True, 0.005),  # ND: Cu limit column, 5 ug/L
        ("B", 9.0, 150.0, "lime", "Zn", "dissolved", None, True, 0.004),  # n.d.: the dissolved limit column
        ("B", 9.0, 150.0, "lime", "Zn", "total", 0.04, False, None),
        ("B", 9.0, 150.0, "lime", "Cu", "dissolved", None, True, 0.002),  # <DL: Cu limit column, 2 ug/L
    ]


def test_nd_takes_the_limit_from_the_option_when_no_column(tmp_path):
    text = "jar,reagent,dose (mg/L),pH,Ni dissolved (mg/L)\n1,lime,100,9.5,ND\n2,lime,100,9.6,0.03\n"
    df = read_jar_tests(write(tmp_path, text), detection_limits_mg_l={"Ni": 0.01})
    assert records(df)[0][6:] == (None, True, 0.01)
    assert records(df)[1][6:] == (0.03, False, None)


def test_dissolved_and_total_synonyms_and_empty_cells(tmp_path):
    text = (
        "Jar ID,Reagent,Dose (mg/L),pH final,Zn diss (mg/L),Zn tot (mg/L),Cu filtered (mg/L),Cu unfiltered (mg/L)\n"
        "7,lime,200,9.4,0.05,0.9,,0.31\n"
    )
    df = read_jar_tests(write(tmp_path, text))
    # the empty Cu filtered cell is "not measured": no row, nothing invented
    assert records(df) == [
        ("7", 9.4, 200.0, "lime", "Zn", "dissolved", 0.05, False, None),
        ("7", 9.4, 200.0, "lime", "Zn", "total", 0.9, False, None),
        ("7", 9.4, 200.0, "lime", "Cu", "total", 0.31, False, None),
    ]


def test_decimal_commas_only_when_asked(tmp_path):
    text = "jar;reagent;dose (mg/L);pH;Zn dissolved (mg/L);Zn total (mg/L)\n1;lime;152,5;8,75;0,052;<0,02\n"
    path = write(tmp_path, text)
    df = read_jar_tests(path, decimal=",")
    assert records(df) == [
        ("1", 8.75, 152.5, "lime", "Zn", "dissolved", 0.052, False, None),
        ("1", 8.75, 152.5, "lime", "Zn", "total", None, True, 0.02),
    ]
    with pytest.raises(InputError) as err:  # not asked: "8,75" is text, and the message says what to do
        read_jar_tests(path, sep=";")
    assert "row 2, column 'pH'" in str(err.value) and "'8,75'" in str(err.value)
    assert "decimal=','" in str(err.value)
    with pytest.raises(InputError) as err:  # a decimal point in a decimal-comma file is not guessed either
        read_jar_tests(write(tmp_path, text.replace("8,75", "8.75"), "b.csv"), decimal=",")
    assert "row 2, column 'pH'" in str(err.value) and "'8.75'" in str(err.value)


def test_dose_with_a_unit_column_and_optional_columns(tmp_path):
    text = (
        "jar,reagent,dose,dose_unit,ph,temperature (°C),settle (h),Zn dissolved (mg/L),ORP (mV),notes\n"
        "1,lime,0.3,g/L,9.1,18.5,0.5,0.2,150,cloudy\n"
        "2,caustic,90,mg/L,9.3,,1,0.1,140,\n"
    )
    df = read_jar_tests(write(tmp_path, text))
    assert list(df.columns) == COLUMNS + ["temperature_c", "settling_min"]
    assert records(df) == [
        ("1", 9.1, 300.0, "lime", "Zn", "dissolved", 0.2, False, None, 18.5, 30.0),
        ("2", 9.3, 90.0, "caustic", "Zn", "dissolved", 0.1, False, None, None, 60.0),
    ]
    assert df.attrs["ignored_columns"] == ["ORP (mV)", "notes"]


def test_unmodelled_columns_are_left_out_with_a_note(tmp_path):
    text = (
        "jar,reagent,dose (mg/L),pH,Zn dissolved (mg/L),Cr(VI) total (mg/L),Sn total (mg/L)\n"
        "1,lime,1,9,0.1,<0.01,2\n"
    )
    df = read_jar_tests(write(tmp_path, text))
    assert records(df) == [("1", 9.0, 1.0, "lime", "Zn", "dissolved", 0.1, False, None)]
    assert df.attrs["ignored_columns"] == ["Cr(VI) total (mg/L)", "Sn total (mg/L)"]
    assert any("must be reduced" in n for n in df.attrs["notes"])
    assert any("Sn is not one of the metals compared" in n for n in df.attrs["notes"])


def test_excel_workbook(tmp_path):
    book = openpyxl.Workbook()
    ws = book.active
    ws.title = "notes"
    ws.append(["not the jar sheet"])
    ws = book.create_sheet("jars")
    ws.append(["# invented bench series"])
    ws.append(["jar", "reagent", "dose (mg/L)", "pH", "Zn dissolved (mg/L)", "Zn total (ug/L)"])
    ws.append([1, "lime", 120, 8.5, 0.52, "<20"])
    ws.append([None, None, None, None, None, None])
    ws.append(["2b", "lime", 180.5, 9.25, "0.081", 950])
    path = tmp_path / "jars.xlsx"
    book.save(path)
    df = read_jar_tests(path, sheet="jars")
    assert records(df) == [
        ("1", 8.5, 120.0, "lime", "Zn", "dissolved", 0.52, False, None),
        ("1", 8.5, 120.0, "lime", "Zn", "total", None, True, 0.02),
        ("2b", 9.25, 180.5, "lime", "Zn", "dissolved", 0.081, False, None),
        ("2b", 9.25, 180.5, "lime", "Zn", "total", 0.95, False, None),
    ]
    assert df.attrs["rows"] == {"1": 3, "2b": 5}  # spreadsheet rows
    # the same bytes from an upload buffer (no name): recognised as a workbook by its signature
    assert records(read_jar_tests(io.BytesIO(path.read_bytes()), sheet="jars")) == records(df)
    # a bad cell is named by its spreadsheet row and column
    ws["D5"] = "n/a"
    book.save(path)
    with pytest.raises(InputError) as err:
        read_jar_tests(path, sheet="jars")
    assert "row 5, column 'pH'" in str(err.value) and "'n/a'" in str(err.value)
    with pytest.raises(InputError, match="sheets in jars.xlsx are notes, jars"):
        read_jar_tests(path, sheet="Sheet9")
    # a formula saved without its result (written by a program, never opened) is not read as "not measured"
    ws["D5"] = 9.25
    ws["E5"] = "=E3/10"
    book.save(path)
    with pytest.raises(InputError) as err:
        read_jar_tests(path, sheet="jars")
    assert "jars.xlsx [jars], row 5, column #5" in str(err.value) and "'=E3/10'" in str(err.value)


def test_buffers_text_and_bytes():
    text = "jar,reagent,dose (mg/L),pH,Zn dissolved (mg/L)\n1,lime,100,9,0.2\n"
    expected = [("1", 9.0, 100.0, "lime", "Zn", "dissolved", 0.2, False, None)]
    assert records(read_jar_tests(io.StringIO(text))) == expected
    assert records(read_jar_tests(io.BytesIO(text.encode("utf-8-sig")))) == expected
    assert records(read_jar_tests(text.encode())) == expected
    assert records(read_jar_tests(io.BytesIO(text.encode("utf-16")))) == expected  # by its byte-order mark


def test_named_encoding_is_read(tmp_path):
    text = "jar,reagent,dose (mg/L),pH,Zn dissolved (µg/L)\nJar №1,lime,100,9,30\n".replace("№", "N")
    df = read_jar_tests(write(tmp_path, text, encoding="cp1252"), encoding="cp1252")
    assert records(df) == [("Jar N1", 9.0, 100.0, "lime", "Zn", "dissolved", 0.03, False, None)]


def test_nothing_entered_is_changed(tmp_path):
    # ids keep their text (leading zeros, spaces inside), pH keeps all its digits, reagent its case
    text = (
        "jar,reagent,dose (mg/L),pH,Zn dissolved (mg/L)\n007,Lime Slurry,100.125,9.123456789,0.0123456789\n"
    )
    df = read_jar_tests(write(tmp_path, text))
    assert records(df) == [
        ("007", 9.123456789, 100.125, "Lime Slurry", "Zn", "dissolved", 0.0123456789, False, None)
    ]


# ---------------------------------------------------------------------------------------------- bad files
HEAD = "jar,reagent,dose (mg/L),pH,Zn dissolved (mg/L)\n"


@pytest.mark.parametrize(
    "text, where, fragment",
    [
        ("jar,reagent,dose (mg/L),Zn dissolved (mg/L)\n1,lime,1,0.1\n", "row 1, column 'ph'", "pH"),
        ("jar,reagent,pH,Zn dissolved (mg/L)\n1,lime,9,0.1\n", "row 1, column 'dose_mg_l'", "dose"),
        ("jar,reagent,dose (mg/L),pH\n1,lime,1,9\n", "row 1, column '<metal>", "metal result column"),
        (
            HEAD.replace("(mg/L)\n", "(mmol/L)\n") + "1,lime,1,9,1\n",
            "row 1, column 'Zn dissolved (mmol/L)'",
            "mmol/L",
        ),
        (
            HEAD.replace("(mg/L)\n", "(ppm)\n") + "1,lime,1,9,1\n",
            "row 1, column 'Zn dissolved (ppm)'",
            "mass or volume",
        ),
        (
            HEAD.replace(" (mg/L)\n", "\n") + "1,lime,1,9,1\n",
            "row 1, column 'Zn dissolved'",
            "unit is missing",
        ),
        (
            HEAD.replace("dissolved ", "") + "1,lime,1,9,1\n",
            "row 1, column 'Zn (mg/L)'",
            "fraction is missing",
        ),
        (
            HEAD.replace("dose (mg/L)", "dose") + "1,lime,1,9,1\n",
            "row 1, column 'dose'",
            "dose unit is missing",
        ),
        (
            HEAD.replace("dose (mg/L)", "dose (mL/L)") + "1,lime,1,9,1\n",
            "row 1, column 'dose (mL/L)'",
            "strength",
        ),
        (HEAD.replace("Zn", "Zinc") + "1,lime,1,9,1\n", "row 1, column 'Zinc dissolved (mg/L)'", "key: Zn"),
        (
            HEAD.replace("Zn", "Fe(III)") + "1,lime,1,9,1\n",
            "row 1, column 'Fe(III) dissolved (mg/L)'",
            "as 'Fe'",
        ),
        (HEAD + "1,lime,1,9,abc\n", "row 2, column 'Zn dissolved (mg/L)'", "'abc'"),
        (HEAD + "1,lime,1,nine,0.1\n", "row 2, column 'pH'", "'nine'"),
        (HEAD + "1,lime,1,15,0.1\n", "row 2, column 'pH'", "allowed 0 to 14"),
        (HEAD + "1,lime,-5,9,0.1\n", "row 2, column 'dose (mg/L)'", "'-5'"),
        (HEAD + "1,lime,1,9,0.1 J\n", "row 2, column 'Zn dissolved (mg/L)'", "'0.1 J'"),
        (HEAD + "1,lime,1,9,-0.1\n", "row 2, column 'Zn dissolved (mg/L)'", "'-0.1'"),
        (HEAD + "1,lime,1,9,0\n", "row 2, column 'Zn dissolved (mg/L)'", "not a measurement"),
        (HEAD + "1,lime,1,9,>10\n", "row 2, column 'Zn dissolved (mg/L)'", "above-range"),
        (HEAD + "1,lime,1,9,<\n", "row 2, column 'Zn dissolved (mg/L)'", "'<'"),
        (HEAD + "1,lime,1,9,0.1\n\n1,lime,2,10,0.2\n", "row 4, column 'jar'", "also in row 2"),
        (HEAD + "1,lime,1,9,ND\n", "row 2, column 'Zn dissolved (mg/L)'", "a detection limit for ND"),
        (HEAD + ",lime,1,9,0.1\n", "row 2, column 'jar'", "a value is required"),
        (HEAD + "1,,1,9,0.1\n", "row 2, column 'reagent'", "a value is required"),
        (HEAD + "1,lime,1,,0.1\n", "row 2, column 'pH'", "a value is required"),
        (HEAD + "1,lime,1,9,0.1,7\n", "row 2, column #6", "no header"),
        (HEAD.strip() + ",pH final\n1,lime,1,9,0.1,9\n", "row 1, column 'pH final'", "one ph column"),
        (
            HEAD.strip() + ",Zn filtered (ug/L)\n1,lime,1,9,0.1,9\n",
            "row 1, column 'Zn filtered (ug/L)'",
            "one column per",
        ),
        (HEAD.strip() + ",ph\n1,lime,1,9,0.1,9\n", "row 1, column 'ph'", "unique"),
        ("", "row 1", "empty file"),
        ("\n\n# only a comment\n", "row 1", "empty file"),
        (HEAD, "row 2", "no jar rows"),
        (HEAD + "1,lime,1,9,\n", "rows 2-2", "no results"),
        (HEAD.replace(",", ";") + "1;lime;1;9;1\n", "row 1", "pass sep=';'"),
        ('jar,reagent,dose (mg/L),pH,Zn dissolved (mg/L)\n1,lime,1,9,"0.1\n', "row 2", "CSV text"),
    ],
)
def test_bad_files_name_row_column_and_value(tmp_path, text, where, fragment):
    with pytest.raises(InputError) as err:
        read_jar_tests(write(tmp_path, text))
    message = str(err.value)
    assert isinstance(err.value, ValueError)
    assert f"jars.csv, {where}" in message, message
    assert fragment in message, message


def test_wrong_encoding_names_row_and_column(tmp_path):
    # a cp1252 file read as UTF-8: the byte 0xb5 (micro sign in cp1252) sits in row 3, column 'Zn total ...'
    text = "jar,reagent,dose (mg/L),pH,Zn dissolved (mg/L),Zn total (mg/L)\n1,lime,1,9,0.1,0.2\n2,lime,1,9,0.1,5µ\n"
    with pytest.raises(InputError) as err:
        read_jar_tests(write(tmp_path, text, encoding="cp1252"))
    message = str(err.value)
    assert "jars.csv, row 3, column 'Zn total (mg/L)'" in message and "b'\\xb5'" in message
    assert "UTF-8" in message and "encoding=" in message


def test_too_large_is_refused_before_reading(tmp_path):
    path = tmp_path / "big.csv"
    with open(path, "wb") as fh:
        fh.write(HEAD.encode())
        fh.write(b"#" * (jar_tests.MAX_FILE_BYTES + 1))
    with pytest.raises(InputError) as err:
        read_jar_tests(path)
    assert "big.csv" in str(err.value) and "up to 20 MB" in str(err.value)
    with pytest.raises(InputError, match="up to 20 MB"):  # a buffer is read only up to the cap plus one byte
        read_jar_tests(io.BytesIO(b"x" * (jar_tests.MAX_FILE_BYTES + 10)))


@pytest.mark.parametrize(
    "kwargs, field",
    [
        (dict(decimal=";"), "decimal"),
        (dict(decimal=",", sep=","), "sep"),
        (dict(sep="|"), "sep"),
        (dict(file_format="ods"), "file_format"),
        (dict(detection_limits_mg_l={"Zn": 0}), "detection_limits_mg_l['Zn']"),
        (dict(detection_limits_mg_l={"Hg": 0.1}), "detection_limits_mg_l"),
        (dict(encoding="no-such-codec"), "encoding"),
    ],
)
def test_bad_options(tmp_path, kwargs, field):
    with pytest.raises(InputError) as err:
        read_jar_tests(write(tmp_path, HEAD + "1,lime,1,9,0.1\n"), **kwargs)
    assert err.value.field == field


@pytest.mark.parametrize(
    "name, payload, fragment",
    [
        ("jars.xls", b"\xd0\xcf\x11\xe0", "save the sheet as .xlsx"),
        ("jars.ods", b"PK\x03\x04", "a .csv, .txt, .tsv, .xlsx or .xlsm file"),
        ("jars.xlsx", b"jar,reagent\n", "an Excel .xlsx workbook is expected"),
    ],
)
def test_bad_file_kinds(tmp_path, name, payload, fragment):
    path = tmp_path / name
    path.write_bytes(payload)
    with pytest.raises(InputError, match=fragment.replace(".", r"\.")):
        read_jar_tests(path)


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match="an existing file is required"):
        read_jar_tests(tmp_path / "nowhere.csv")


def test_output_types():
    df = read_jar_tests(io.StringIO(HEAD + "1,lime,1,9,0.1\n2,lime,2,9.5,<0.05\n"))
    assert df["value_mg_l"].dtype == np.float64 and df["detection_limit_mg_l"].dtype == np.float64
    assert df["censored"].tolist() == [False, True]
    assert pd.isna(df["value_mg_l"].iloc[1]) and pd.isna(df["detection_limit_mg_l"].iloc[0])
