"""Jar-test files: the workbench's own format for bench results, read into a tidy long table.

The format
----------
One table, one row per jar, as CSV text (UTF-8, with or without a byte-order mark; UTF-16 when it starts with
its byte-order mark; another encoding only when named with ``encoding=``) or as the first sheet of an Excel
``.xlsx`` workbook (another sheet with ``sheet=``). Empty rows are skipped anywhere; rows above the header whose
first cell starts with ``#`` are comments. The first other row is the header; every row after it is a jar.
Column names are matched without regard to case, and spaces and underscores count alike (``Temperature_C`` =
``temperature c``).

Required columns

``jar``
    Jar id as written (text, unique within the file). Also ``jar id``, ``jar no``, ``jar number``.
``reagent``
    The reagent added (free text such as ``lime`` or ``caustic``; ``none`` for an untreated control).
dose
    ``dose_mg_l`` or ``dose (mg/L)`` (also ``reagent dose``), or a ``dose`` column with a ``dose_unit`` column
    giving each row's unit. Units: mg/L, g/L, g/m3, kg/m3. The dose is mg of reagent, as sold, per litre of
    sample. A dose column without a readable unit is an error: nothing is assumed.
``ph``
    The pH measured in the jar after reaction, 0-14 (also ``pH final``, ``final pH``, ``measured pH``).

Optional columns

``temperature_c``
    Jar temperature (also ``temperature (°C)``, ``temp (C)``). [°C]
``settling_min``
    Settling time before the supernatant was drawn (also ``settling time (min)``, ``settle (h)``). [min or h]

Metal results: ``<metal> <fraction> <unit>``

``<metal>``
    A metal key of :data:`workbench.treatment.water.METALS` (Cu, Ni, Zn, Cd, Pb, Co, Mn, Ag, Cr, Fe, Fe(II),
    Al; any case). ``Cr`` is trivalent chromium; ``Fe`` is the iron result as analysed (compared with ferric
    iron). ``Cr(VI)`` and ``CN`` (cyanide) columns are left out with a note (no hydroxide solid); columns of
    other elements written the same way (e.g. ``Sn total (mg/L)``) are left out with a note. A metal written
    out (``Zinc dissolved``) is refused with the key to use.
``<fraction>``
    ``dissolved``, ``diss``, ``filtered``, ``filt`` (0.45 µm filtered) or ``total``, ``tot``, ``unfiltered``,
    ``unfilt`` (unfiltered supernatant).
``<unit>``
    In brackets ``(mg/L)`` ``[ug/L]`` or after a space or underscore (``mg/L``, ``mg_l``): mg/L, µg/L (also
    ``ug/L``, ``μg/L``, ``mcg/L``), ng/L, g/L. ``ppm``/``ppb`` are refused (mass or volume basis is not said).

Examples: ``Zn dissolved (mg/L)``, ``Zn total [µg/L]``, ``Cu diss mg/L``, ``Ni_filtered_ug_l``.

Detection limits: ``<metal> [<fraction>] detection limit <unit>`` (also ``DL``, ``MDL``, ``LOD``,
``reporting limit``), e.g. ``Zn detection limit (mg/L)`` (both fractions) or ``Zn dissolved DL (ug/L)``.

Cells

- A number: ``0.52``, ``5.2e-3``. Decimal point by default; decimal commas (``0,52``) only with
  ``decimal=","``, and then fields are separated by ``;`` (or tab with ``sep="\\t"``).
- Below detection: ``<0.02`` is a result below 0.02 (in the column's unit): censored at 0.02, not the number
  0.02 (its own limit, even where a detection-limit column gives another). ``ND``, ``n.d.``, ``BDL``, ``<DL``,
  ``<MDL``, ``<LOD`` are censored at the row's detection limit (from a detection-limit column, else
  ``detection_limits_mg_l=``); with none, it is an error.
- Excel: a formula cell without a saved result is refused (it is not "not measured"). A workbook is checked
  before it is read, against bounds on its unpacked size, shared strings, cells and declared dimensions
  (:mod:`workbench.treatment.workbook_limits`); one beyond them is refused with the limit named.
- Empty: not measured (no row in the output).
- Refused, each with the row, the column, the value and what is expected: text, negative numbers, a result
  of 0 (write ``<DL``), above-range results such as ``>10``, a qualifier after the number.

Other columns (notes, ORP, turbidity, ...) are not read; their names are listed in ``attrs["ignored_columns"]``.
Rows in messages are counted as a spreadsheet or text editor shows them (the header's row included).

Output
------
:func:`read_jar_tests` returns one row per jar and result: columns ``jar``, ``pH``, ``dose_mg_l``,
``reagent``, ``metal``, ``fraction`` ("dissolved"/"total"), ``value_mg_l`` (NaN when censored),
``censored``, ``detection_limit_mg_l`` (NaN when not censored), then ``temperature_c`` and ``settling_min``
when the file has them. Units are converted to mg/L; nothing else is changed.
"""

from __future__ import annotations

import csv
import io
import math
import numbers
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from workbench._paths import data_dir
from workbench.errors import InputError
from workbench.treatment.water import METALS, REFUSED_METALS
from workbench.treatment.workbook_limits import MAX_UNPACKED_BYTES, check_workbook  # noqa: F401 (re-exported)

MAX_FILE_BYTES = 20_000_000
MAX_ROWS = 10_000
MAX_COLUMNS = 500

OUTPUT_COLUMNS = (
    "jar",
    "pH",
    "dose_mg_l",
    "reagent",
    "metal",
    "fraction",
    "value_mg_l",
    "censored",
    "detection_limit_mg_l",
)
OPTIONAL_COLUMNS = ("temperature_c", "settling_min")

#: Concentration units and their factor to mg/L.
CONCENTRATION_UNITS = {"mg/l": 1.0, "ug/l": 1e-3, "ng/l": 1e-6, "g/l": 1000.0}
#: Dose units and their factor to mg/L.
DOSE_UNITS = {"mg/l": 1.0, "g/l": 1000.0, "g/m3": 1.0, "kg/m3": 1000.0}
UNIT_NAMES = {"mg/l": "mg/L", "ug/l": "µg/L (ug/L)", "ng/l": "ng/L", "g/l": "g/L", "c": "°C"}
#: Units refused with the reason.
REFUSED_UNITS = {
    "ppm": "ppm does not say whether it is by mass or volume: write mg/L",
    "ppb": "ppb does not say whether it is by mass or volume: write ug/L",
    "ml/l": "a volume of slurry or solution needs its strength: convert to mg/L of reagent",
    "%": "a percentage needs its basis: convert to mg/L",
}
FRACTION_WORDS = {
    "dissolved": "dissolved",
    "diss": "dissolved",
    "filtered": "dissolved",
    "filt": "dissolved",
    "total": "total",
    "tot": "total",
    "unfiltered": "total",
    "unfilt": "total",
}
DETECTION_LIMIT_WORDS = (
    ("detection", "limit"),
    ("dl",),
    ("mdl",),
    ("lod",),
    ("reporting", "limit"),
)
#: Refused metal keys whose columns are left out with a note (common lab results, not compared).
NOT_COMPARED = ("Cr(VI)", "CN")
#: Metals written out, refused with the key to use.
METAL_NAMES = {
    "copper": "Cu",
    "nickel": "Ni",
    "zinc": "Zn",
    "cadmium": "Cd",
    "lead": "Pb",
    "cobalt": "Co",
    "manganese": "Mn",
    "silver": "Ag",
    "chromium": "Cr",
    "iron": "Fe",
    "aluminium": "Al",
    "aluminum": "Al",
}
ND_WORDS = {"nd", "n.d.", "n.d", "bdl", "<dl", "<mdl", "<lod", "not detected"}

_NAMES = {
    "jar": {("jar",), ("jar", "id"), ("jar", "no"), ("jar", "number")},
    "reagent": {("reagent",)},
    "dose": {("dose",), ("reagent", "dose")},
    "dose_unit": {("dose", "unit"), ("dose", "units")},
    "ph": {("ph",), ("ph", "final"), ("final", "ph"), ("measured", "ph"), ("ph", "measured")},
    "temperature_c": {("temperature",), ("temp",)},
    "settling_min": {("settling",), ("settling", "time"), ("settle",), ("settle", "time")},
}
REQUIRED = {
    "jar": "'jar'",
    "reagent": "'reagent'",
    "dose": "dose ('dose_mg_l', 'dose (mg/L)', or 'dose' with 'dose_unit')",
    "ph": "pH ('ph', 'pH final' or 'measured pH')",
}
_UNIT_OF = {
    "temperature_c": {"c": 1.0, "°c": 1.0, "degc": 1.0, "℃": 1.0},
    "settling_min": {"min": 1.0, "h": 60.0},
}
_TRAILING_UNITS = {"c", "°c", "degc", "min", "h"}
_MASS = ("g", "mg", "ug", "µg", "μg", "mcg", "ng", "kg")
_FILE_FORMATS = ("csv", "xlsx")


@dataclass
class _Table:
    """Cells as read, with the row number each row has in the file."""

    source: str
    header_row: int
    header: list[str]
    rows: list[tuple[int, list]] = field(default_factory=list)


@dataclass(frozen=True)
class _Result:
    """A metal result (or detection-limit) column."""

    metal: str
    fraction: str | None  # None: a detection limit for both fractions
    factor: float  # to mg/L
    limit: bool  # a detection-limit column


# ---------------------------------------------------------------------------------------------- public reader
def demo_jar_tests_path() -> Path:
    """Path of the bundled demo jar-test series (an invented plant; see its header comment)."""
    return data_dir() / "demo" / "demo_jar_tests.csv"


def read_jar_tests(
    path_or_buffer,
    *,
    decimal: str = ".",
    sep: str | None = None,
    encoding: str | None = None,
    sheet: str | None = None,
    file_format: str | None = None,
    detection_limits_mg_l: Mapping[str, float] | None = None,
) -> pd.DataFrame:
    """Read a jar-test file (CSV or Excel) into a tidy long table; the format is in this module's docstring.

    Parameters
    ----------
    path_or_buffer : str, pathlib.Path, bytes or file-like
        The file, its bytes, or an open binary or text file (e.g. an upload). Files over 20 MB are refused.
    decimal : {".", ","}
        Decimal mark of numbers written as text. With "," the field separator defaults to ";".
    sep : {",", ";", "\\t"}, optional
        Field separator of a CSV file; defaults to "," (";" with decimal commas).
    encoding : str, optional
        Text encoding of a CSV file; by default UTF-8 (a byte-order mark is honoured).
    sheet : str, optional
        Excel sheet name; by default the first sheet.
    file_format : {"csv", "xlsx"}, optional
        By default from the file name's ending (.csv, .txt, .tsv / .xlsx, .xlsm); for a buffer without a name,
        an Excel archive is recognised by its signature, anything else is read as CSV.
    detection_limits_mg_l : mapping, optional
        Detection limit per metal key, for ``ND`` cells in rows without a detection-limit column. [mg/L]

    Returns
    -------
    pandas.DataFrame
        Columns ``jar``, ``pH``, ``dose_mg_l`` [mg/L], ``reagent``, ``metal``, ``fraction``, ``value_mg_l``
        [mg/L], ``censored``, ``detection_limit_mg_l`` [mg/L], plus ``temperature_c`` [°C] and ``settling_min``
        [min] when present. ``attrs``: ``source`` (file name), ``rows`` (jar -> row number in the file),
        ``ignored_columns``, ``notes``.

    Raises
    ------
    InputError
        For anything malformed; the message names the row, the column, the value and what was expected.
    """
    if decimal not in (".", ","):
        raise InputError("decimal", decimal, "allowed '.' or ','")
    if sep is None:
        sep = "," if decimal == "." else ";"
    if sep not in (",", ";", "\t"):
        raise InputError("sep", sep, "allowed ',', ';' or a tab")
    if decimal == "," and sep == ",":
        raise InputError("sep", sep, "with decimal commas the fields must be separated by ';' or a tab")
    limits = _check_limits(detection_limits_mg_l)
    source, payload, kind = _load(path_or_buffer, file_format)
    if kind == "xlsx":
        table = _excel_table(source, payload, sheet)
    else:
        table = _csv_table(source, payload, sep, encoding)
    return _tidy(table, decimal, limits)


# ---------------------------------------------------------------------------------------------- loading
def _load(path_or_buffer, file_format) -> tuple[str, bytes | str, str]:
    """(name for messages, bytes or already-decoded text, "csv" | "xlsx")."""
    if file_format is not None and file_format not in _FILE_FORMATS:
        raise InputError("file_format", file_format, f"allowed {', '.join(_FILE_FORMATS)}")
    if isinstance(path_or_buffer, str | Path):
        path = Path(path_or_buffer)
        if not path.is_file():
            raise InputError("jar-test file", str(path), "an existing file is required")
        size = path.stat().st_size
        _check_size(path.name, size)
        kind = file_format or _kind_from_name(path.name)
        return path.name, path.read_bytes(), kind
    if isinstance(path_or_buffer, bytes | bytearray):
        payload = bytes(path_or_buffer)
        name = "jar-test data"
    elif hasattr(path_or_buffer, "read"):
        payload = path_or_buffer.read(MAX_FILE_BYTES + 1)
        name = Path(str(getattr(path_or_buffer, "name", "jar-test data"))).name
    else:
        raise InputError(
            "path_or_buffer", type(path_or_buffer).__name__, "a file path, bytes or an open file is required"
        )
    size = len(payload.encode("utf-8")) if isinstance(payload, str) else len(payload)
    _check_size(name, size, exact=isinstance(path_or_buffer, bytes | bytearray))
    if file_format:
        kind = file_format
    elif isinstance(payload, str):
        kind = "csv"
    elif Path(name).suffix:
        kind = _kind_from_name(name)
    else:
        kind = "xlsx" if payload[:4] == b"PK\x03\x04" else "csv"
    if kind == "xlsx" and isinstance(payload, str):
        raise InputError(name, "text", "an Excel workbook must be given as bytes or a binary file")
    return name, payload, kind


def _check_size(name: str, size: int, exact: bool = True) -> None:
    """Refuse more than MAX_FILE_BYTES (a buffer is read only up to the cap plus one byte: size not exact)."""
    if size > MAX_FILE_BYTES:
        shown = f"{size} bytes" if exact else f"more than {MAX_FILE_BYTES} bytes"
        raise InputError(name, shown, f"jar-test files up to {MAX_FILE_BYTES // 1_000_000} MB are accepted")


def _kind_from_name(name: str) -> str:
    suffix = Path(name).suffix.lower()
    if suffix in (".csv", ".txt", ".tsv"):
        return "csv"
    if suffix in (".xlsx", ".xlsm"):
        return "xlsx"
    if suffix == ".xls":
        raise InputError(name, suffix, "the old .xls format is not read: save the sheet as .xlsx or CSV")
    raise InputError(
        name, suffix, "a .csv, .txt, .tsv, .xlsx or .xlsm file is required (or give file_format)"
    )


def _decode(source: str, raw: bytes, encoding: str | None, sep: str) -> str:
    """Bytes to text: the given encoding, else UTF-16 by its byte-order mark, else UTF-8 (BOM allowed)."""
    if encoding is None:
        encoding = "utf-16" if raw[:2] in (b"\xff\xfe", b"\xfe\xff") else "utf-8-sig"
    shown = "UTF-8" if encoding == "utf-8-sig" else encoding
    try:
        return raw.decode(encoding)
    except LookupError:
        raise InputError(
            "encoding", encoding, "a text encoding Python knows (e.g. 'utf-8', 'cp1252')"
        ) from None
    except UnicodeDecodeError as exc:
        row = raw[: exc.start].count(b"\n") + 1
        line_start = raw.rfind(b"\n", 0, exc.start) + 1
        line_end = raw.find(b"\n", exc.start)
        line = raw[line_start : line_end if line_end >= 0 else len(raw)]
        k = line[: exc.start - line_start].decode(encoding, errors="replace").count(sep)
        header = raw[: raw.find(b"\n") if b"\n" in raw else len(raw)].decode(encoding, errors="replace")
        names = [h.strip() for h in header.lstrip("\ufeff").split(sep)]
        col = repr(names[k]) if k < len(names) else f"#{k + 1}"
        raise InputError(
            f"{source}, row {row}, column {col}",
            raw[exc.start : exc.end],
            f"text in {shown} is expected ({exc.reason}); save the file as UTF-8, or name its encoding "
            "with encoding= (e.g. 'cp1252')",
        ) from None


def _csv_table(source: str, payload: bytes | str, sep: str, encoding: str | None) -> _Table:
    text = payload if isinstance(payload, str) else _decode(source, payload, encoding, sep)
    text = text.lstrip("\ufeff")
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=sep, strict=True)
    table = None
    last = 0
    try:
        for cells in reader:
            row = last + 1
            last = reader.line_num
            table = _add_row(table, source, row, cells)
    except csv.Error as exc:
        raise InputError(f"{source}, row {last + 1}", "", f"CSV text is expected ({exc})") from None
    return _finish(table, source, last, sep)


def _excel_table(source: str, payload: bytes, sheet: str | None) -> _Table:
    # bounded before any work: unpacked size, shared strings, cells, declared dimensions (workbook_limits)
    check_workbook(source, payload)
    import openpyxl  # a dependency of the package; imported here so the CSV path never needs it

    try:  # values as last saved, and the cells' formulas (to refuse a formula that has no saved value)
        book = openpyxl.load_workbook(io.BytesIO(payload), read_only=True, data_only=True)
        formulas = openpyxl.load_workbook(io.BytesIO(payload), read_only=True, data_only=False)
    except Exception as exc:  # openpyxl raises many kinds for a damaged workbook
        raise InputError(source, type(exc).__name__, "a readable Excel .xlsx workbook is expected") from None
    try:
        if sheet is None:
            name = book.sheetnames[0]
        elif sheet in book.sheetnames:
            name = sheet
        else:
            raise InputError("sheet", sheet, f"sheets in {source} are {', '.join(book.sheetnames)}")
        source = f"{source} [{name}]"
        table = None
        last = 0
        rows = zip(
            book[name].iter_rows(values_only=True), formulas[name].iter_rows(values_only=True), strict=False
        )
        for last, (values, written) in enumerate(rows, start=1):
            for k, (v, f) in enumerate(zip(values, written, strict=False)):
                if v is None and isinstance(f, str) and f.startswith("="):
                    raise InputError(
                        f"{source}, row {last}, column #{k + 1}",
                        f,
                        "a value: this formula has no saved result (save the workbook in a spreadsheet program, "
                        "or paste the values)",
                    )
            table = _add_row(table, source, last, list(values))
    finally:
        book.close()
        formulas.close()
    return _finish(table, source, last, None)


def _add_row(table: _Table | None, source: str, row: int, cells: list) -> _Table | None:
    cells = [("" if c is None else c) for c in cells]
    if all(isinstance(c, str) and not c.strip() for c in cells):
        return table  # an empty row
    if table is None and isinstance(cells[0], str) and cells[0].strip().startswith("#"):
        return table  # a comment row above the header
    if len(cells) > MAX_COLUMNS:
        raise InputError(
            f"{source}, row {row}", f"{len(cells)} cells", f"up to {MAX_COLUMNS} columns are read"
        )
    if table is None:
        header = [str(c).strip() if not isinstance(c, str) else c.strip() for c in cells]
        return _Table(source, row, header)
    if len(table.rows) >= MAX_ROWS:
        raise InputError(f"{source}, row {row}", "more rows", f"up to {MAX_ROWS} jars are read from one file")
    table.rows.append((row, cells))
    return table


def _finish(table: _Table | None, source: str, last: int, sep: str | None) -> _Table:
    if table is None:
        raise InputError(
            f"{source}, row 1",
            "an empty file",
            "a header row (jar, reagent, dose_mg_l, ph, then metal results) and one row per jar are expected",
        )
    if not table.rows:
        raise InputError(
            f"{source}, row {table.header_row + 1}",
            "no jar rows",
            "one row per jar after the header is expected",
        )
    if sep is not None and len(table.header) == 1:
        other = [s for s in (",", ";", "\t") if s != sep and s in table.header[0]]
        if other:
            raise InputError(
                f"{source}, row {table.header_row}",
                table.header[0],
                f"fields separated by {sep!r}; this header seems separated by {other[0]!r}: pass sep={other[0]!r}",
            )
    return table


# ---------------------------------------------------------------------------------------------- header
def _words(text: str) -> list[str]:
    return [w.rstrip(".") for w in re.split(r"[\s_]+", text.strip()) if w.rstrip(".")]


def _split_unit(text: str) -> tuple[list[str], str | None]:
    """Name words and the unit text (in trailing brackets, or a trailing unit word), or None."""
    m = re.search(r"[(\[]([^()\[\]]*)[)\]]\s*$", text)
    if m:
        return _words(text[: m.start()].lower()), m.group(1).strip()
    words = _words(text.lower())
    if len(words) >= 2 and "/" in words[-1]:
        return words[:-1], words[-1]
    if len(words) >= 3 and words[-2] in _MASS and words[-1] in ("l", "m3"):
        return words[:-2], f"{words[-2]}/{words[-1]}"
    if len(words) >= 2 and words[-1] in _TRAILING_UNITS | set(REFUSED_UNITS):
        return words[:-1], words[-1]
    return words, None


def _unit_key(unit: str) -> str:
    u = unit.strip().lower().replace(" ", "").replace("µ", "u").replace("μ", "u").replace("mcg", "ug")
    u = re.sub(r"^([a-z]+)(?:\.|·|\*)?l(?:-1|\^-1|⁻¹)$", r"\1/l", u)  # mg l-1, mg·L-1
    u = re.sub(r"^([a-z]+)_l$", r"\1/l", u)
    u = u.replace("m³", "m3")
    return u


def _read_unit(unit: str | None, allowed: dict, where: str, header: str, what: str) -> float:
    if unit is None:
        raise InputError(where, header, f"the unit is missing: write e.g. '{what} (mg/L)'")
    key = _unit_key(unit)
    if key in allowed:
        return allowed[key]
    reason = REFUSED_UNITS.get(key, f"allowed units: {_shown(allowed)}")
    raise InputError(where, header, f"unit {unit!r} is not read: {reason}")


def _shown(units: dict) -> str:
    return ", ".join(UNIT_NAMES.get(u, u) for u in units)


def _metal_prefix(header: str) -> tuple[str, str] | None:
    """(metal token as written, rest) when the header starts with a metal-like symbol and a separator."""
    m = re.match(r"^\s*([A-Za-z]{1,2}(?:\s*\(\s*[IVivx]+\s*\))?)(?=[\s_(\[]|$)(.*)$", header)
    if not m:
        return None
    return m.group(1).replace(" ", ""), m.group(2)


def _classify(table: _Table) -> tuple[dict, dict, list, list]:
    """Standard columns {name: (index, unit factor or None)}, result columns {index: _Result}, ignored, notes."""
    std: dict[str, tuple[int, float | None]] = {}
    results: dict[int, _Result] = {}
    ignored, notes = [], []
    seen: dict[str, int] = {}
    keys = {k.lower(): k for k in METALS}
    refused = {k.lower(): k for k in REFUSED_METALS}
    for i, header in enumerate(table.header):
        where = f"{table.source}, row {table.header_row}, column {header!r}"
        norm = " ".join(_words(header.lower()))
        if not header:
            continue  # checked row by row: a nameless column must stay empty
        if norm in seen:
            raise InputError(where, header, f"column names must be unique (also column #{seen[norm] + 1})")
        seen[norm] = i
        pre = _metal_prefix(header)
        if pre and (pre[0].lower() in keys or pre[0].lower() in refused):
            token, rest = pre
            if token.lower() in refused:
                key = refused[token.lower()]
                if key not in NOT_COMPARED:
                    raise InputError(where, header, REFUSED_METALS[key])
                notes.append(f"column {header!r} is not read: {REFUSED_METALS[key]}")
                ignored.append(header)
                continue
            results[i] = _result_column(keys[token.lower()], rest, where, header)
            continue
        words, unit = _split_unit(header)
        if pre and len(words) >= 2 and words[1] in FRACTION_WORDS:
            notes.append(f"column {header!r} is not read: {pre[0]} is not one of the metals compared")
            ignored.append(header)
            continue
        if words and words[0] in METAL_NAMES:
            raise InputError(
                where,
                header,
                f"start a metal column with its key: {METAL_NAMES[words[0]]} (e.g. "
                f"'{METAL_NAMES[words[0]]} dissolved (mg/L)')",
            )
        name = next((n for n, forms in _NAMES.items() if tuple(words) in forms), None)
        if name is None:
            ignored.append(header)
            continue
        if name in std:
            other = table.header[std[name][0]]
            raise InputError(where, header, f"one {name} column is expected (also {other!r})")
        factor = None
        if name == "dose" and unit is not None:
            factor = _read_unit(unit, DOSE_UNITS, where, header, "dose")
        elif name in _UNIT_OF:
            factor = _read_unit(unit, _UNIT_OF[name], where, header, header)
        elif unit is not None:
            raise InputError(where, header, f"the {name} column takes no unit")
        std[name] = (i, factor)
    _check_required(table, std, results)
    return std, results, ignored, notes


def _result_column(metal: str, rest: str, where: str, header: str) -> _Result:
    words, unit = _split_unit(rest)
    fraction = None
    if words and words[0] in FRACTION_WORDS:
        fraction = FRACTION_WORDS[words[0]]
        words = words[1:]
    limit = tuple(words) in DETECTION_LIMIT_WORDS
    if words and not limit:
        raise InputError(
            where,
            header,
            "a metal column is '<metal> <dissolved|filtered|total|unfiltered> (<unit>)', or "
            "'<metal> [<fraction>] detection limit (<unit>)'",
        )
    if fraction is None and not limit:
        raise InputError(
            where, header, "the fraction is missing: write dissolved (or filtered) or total (or unfiltered)"
        )
    factor = _read_unit(unit, CONCENTRATION_UNITS, where, header, f"{metal} {fraction or 'dissolved'}")
    return _Result(metal, fraction, factor, limit)


def _check_required(table: _Table, std: dict, results: dict) -> None:
    where = f"{table.source}, row {table.header_row}"
    found = ", ".join(repr(h) for h in table.header if h)
    for name, spelled in REQUIRED.items():
        if name not in std:
            raise InputError(
                f"{where}, column {name if name != 'dose' else 'dose_mg_l'!r}",
                "no such column",
                f"a {spelled} column is required; found {found}",
            )
    if std["dose"][1] is None and "dose_unit" not in std:
        header = table.header[std["dose"][0]]
        raise InputError(
            f"{where}, column {header!r}",
            header,
            "the dose unit is missing: write 'dose (mg/L)' or add dose_unit",
        )
    if not any(not r.limit for r in results.values()):
        raise InputError(
            f"{where}, column '<metal> <fraction> (<unit>)'",
            "missing",
            f"at least one metal result column (e.g. 'Zn dissolved (mg/L)') is required; found {found}",
        )
    pairs: dict[tuple, int] = {}
    for i, r in results.items():
        key = (r.metal, r.fraction, r.limit)
        if key in pairs:
            raise InputError(
                f"{where}, column {table.header[i]!r}",
                table.header[i],
                f"one column per metal and fraction is expected (also {table.header[pairs[key]]!r})",
            )
        pairs[key] = i


# ---------------------------------------------------------------------------------------------- cells
def _number_pattern(decimal: str) -> re.Pattern:
    d = re.escape(decimal)
    return re.compile(rf"^[+-]?(?:\d+(?:{d}\d*)?|{d}\d+)(?:[eE][+-]?\d+)?$")


def _as_number(cell, pattern: re.Pattern, decimal: str) -> float | None:
    """A float, or None when the cell is not a number."""
    if isinstance(cell, bool):
        return None
    if isinstance(cell, numbers.Real):
        return float(cell)
    if isinstance(cell, str):
        s = cell.strip()
        if pattern.match(s):
            return float(s.replace(decimal, ".")) if decimal != "." else float(s)
    return None


def _number_hint(decimal: str) -> str:
    if decimal == ",":
        return "a number with a decimal comma (e.g. 0,52)"
    return "a number with a decimal point (e.g. 0.52; pass decimal=',' for decimal commas)"


@dataclass
class _Cells:
    """Reads one row's cells, naming row and column in every refusal."""

    table: _Table
    row: int
    cells: list
    decimal: str
    pattern: re.Pattern

    def where(self, i: int) -> str:
        return f"{self.table.source}, row {self.row}, column {self.table.header[i]!r}"

    def raw(self, i: int):
        return self.cells[i] if i < len(self.cells) else ""

    def empty(self, i: int) -> bool:
        c = self.raw(i)
        return isinstance(c, str) and not c.strip()

    def text(self, i: int) -> str:
        c = self.raw(i)
        if self.empty(i):
            raise InputError(self.where(i), "", "a value is required")
        if isinstance(c, float) and c.is_integer():
            return str(int(c))
        return c.strip() if isinstance(c, str) else str(c)

    def number(self, i: int, low: float, high: float, unit: str) -> float:
        c = self.raw(i)
        if self.empty(i):
            raise InputError(self.where(i), "", f"a value is required ({_number_hint(self.decimal)})")
        v = _as_number(c, self.pattern, self.decimal)
        if v is None:
            raise InputError(self.where(i), c, f"{_number_hint(self.decimal)} is expected")
        if not (math.isfinite(v) and low <= v <= high):
            raise InputError(self.where(i), c, f"allowed {low:g} to {high:g}{unit}")
        return v

    def result(self, i: int) -> tuple[float, bool] | str | None:
        """(value in the column's unit, censored) / "nd" / None (empty)."""
        c = self.raw(i)
        if self.empty(i):
            return None
        v = _as_number(c, self.pattern, self.decimal)
        if v is not None:
            self._check_positive(i, c, v)
            return v, False
        s = str(c).strip()
        if s.lower() in ND_WORDS or s.lower().replace(" ", "") in ND_WORDS:
            return "nd"
        if s.startswith("<"):
            v = _as_number(s[1:].strip(), self.pattern, self.decimal)
            if v is not None:
                self._check_positive(i, c, v)
                return v, True
        if s.startswith(">"):
            raise InputError(
                self.where(i),
                c,
                "an above-range result is not a number the fit can use: dilute, re-run, enter it",
            )
        raise InputError(
            self.where(i), c, f"{_number_hint(self.decimal)}, '<' and a detection limit (e.g. <0.02), or ND"
        )

    def _check_positive(self, i: int, cell, v: float) -> None:
        if not math.isfinite(v) or v < 0:
            raise InputError(self.where(i), cell, "a result of 0 or more is expected")
        if v == 0:
            raise InputError(
                self.where(i), cell, "a result of 0 is not a measurement: write '<' and the limit"
            )


# ---------------------------------------------------------------------------------------------- tidy table
def _check_limits(limits) -> dict[str, float]:
    if limits is None:
        return {}
    if not isinstance(limits, Mapping):
        raise InputError("detection_limits_mg_l", limits, "a mapping of metal key to mg/L is required")
    out = {}
    for key, v in limits.items():
        if key not in METALS:
            raise InputError("detection_limits_mg_l", key, f"known metals are {', '.join(METALS)}")
        if isinstance(v, bool) or not isinstance(v, numbers.Real) or not (math.isfinite(v) and v > 0):
            raise InputError(f"detection_limits_mg_l[{key!r}]", v, "a positive number of mg/L is required")
        out[key] = float(v)
    return out


def _tidy(table: _Table, decimal: str, limits: dict[str, float]) -> pd.DataFrame:
    std, results, ignored, notes = _classify(table)
    pattern = _number_pattern(decimal)
    value_cols = [(i, r) for i, r in results.items() if not r.limit]
    limit_cols = {(r.metal, r.fraction): (i, r) for i, r in results.items() if r.limit}
    nameless = [i for i, h in enumerate(table.header) if not h]
    records, rows_of = [], {}
    for row, raw_cells in table.rows:
        cells = _Cells(table, row, raw_cells, decimal, pattern)
        extra = [k for k in range(len(table.header), len(raw_cells)) if not cells.empty(k)]
        bad = extra[:1] or [k for k in nameless if not cells.empty(k)][:1]
        if bad:
            raise InputError(
                f"{table.source}, row {row}, column #{bad[0] + 1}",
                raw_cells[bad[0]],
                "a value under a named column is expected (this column has no header)",
            )
        jar = cells.text(std["jar"][0])
        if jar in rows_of:
            raise InputError(
                cells.where(std["jar"][0]), jar, f"jar ids must be unique (also in row {rows_of[jar]})"
            )
        rows_of[jar] = row
        base = {
            "jar": jar,
            "pH": cells.number(std["ph"][0], 0.0, 14.0, ""),
            "dose_mg_l": _dose(cells, std),
            "reagent": cells.text(std["reagent"][0]),
        }
        for name in OPTIONAL_COLUMNS:
            if name in std:
                i, factor = std[name]
                high = 100.0 if name == "temperature_c" else 1e5
                base[name] = np.nan if cells.empty(i) else cells.number(i, 0.0, high, "") * factor
        for i, res in value_cols:
            got = cells.result(i)
            if got is None:
                continue
            if got == "nd":
                value, dl = np.nan, _nd_limit(cells, i, res, limit_cols, limits)
            else:
                v, censored = got
                value, dl = (
                    (np.nan, _to_mg_l(v, res.factor)) if censored else (_to_mg_l(v, res.factor), np.nan)
                )
            records.append(
                {
                    **base,
                    "metal": res.metal,
                    "fraction": res.fraction,
                    "value_mg_l": value,
                    "censored": bool(np.isfinite(dl)),
                    "detection_limit_mg_l": dl,
                }
            )
    columns = list(OUTPUT_COLUMNS) + [c for c in OPTIONAL_COLUMNS if c in std]
    if not records:
        raise InputError(
            f"{table.source}, rows {table.rows[0][0]}-{table.rows[-1][0]}",
            "no results",
            "at least one metal result is expected",
        )
    measured = {r["jar"] for r in records}
    notes += [
        f"jar {jar!r} (row {row}) has no metal result" for jar, row in rows_of.items() if jar not in measured
    ]
    df = pd.DataFrame.from_records(records, columns=columns)
    df["censored"] = df["censored"].astype(bool)
    df.attrs.update(source=table.source, rows=rows_of, ignored_columns=ignored, notes=notes)
    return df


def _dose(cells: _Cells, std: dict) -> float:
    i, factor = std["dose"]
    value = cells.number(i, 0.0, 1e6, " mg/L")
    if factor is None:
        j = std["dose_unit"][0]
        unit = cells.text(j)
        key = _unit_key(unit)
        if key not in DOSE_UNITS:
            reason = REFUSED_UNITS.get(key, f"allowed units: {_shown(DOSE_UNITS)}")
            raise InputError(cells.where(j), unit, f"a dose unit is expected: {reason}")
        factor = DOSE_UNITS[key]
    return _to_mg_l(value, factor)


def _to_mg_l(value: float, factor: float) -> float:
    """value x factor; a factor below 1 is applied as a division (3.5 ug/L gives 0.0035 mg/L exactly as typed)."""
    return value / round(1.0 / factor) if factor < 1.0 else value * factor


def _nd_limit(cells: _Cells, i: int, res: _Result, limit_cols: dict, limits: dict) -> float:
    """Detection limit for an ND cell: the fraction's DL column, the metal's DL column, then the option."""
    for key in ((res.metal, res.fraction), (res.metal, None)):
        if key in limit_cols:
            j, col = limit_cols[key]
            if not cells.empty(j):
                v = cells.number(j, 0.0, 1e6, " (a detection limit)")
                if v <= 0:
                    raise InputError(cells.where(j), cells.raw(j), "a detection limit above 0 is expected")
                return _to_mg_l(v, col.factor)
    if res.metal in limits:
        return limits[res.metal]
    raise InputError(
        cells.where(i),
        cells.raw(i),
        f"a detection limit for ND: write '<' and the limit (e.g. <0.02), add a column "
        f"'{res.metal} detection limit (mg/L)', or pass detection_limits_mg_l={{'{res.metal}': ...}}",
    )
