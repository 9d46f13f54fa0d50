"""Small hostile files, made here in a few kilobytes (never stored): .xlsx workbooks that unpack or expand far
beyond their size, and a deeply nested TOML. Used by tests/test_hostile_files.py and by the benchmark
(tests/benchmarks), which times their refusal and its peak memory.

Each workbook is a complete, valid .xlsx (content types, relations, workbook, one sheet): with a small size
parameter the same builder gives a workbook the jar-test reader accepts, so the refusal of the large one is the
limit at work, not a malformed file.
"""

from __future__ import annotations

import io
import zipfile

MAIN_NS = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
REL_NS = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
PKG_REL_NS = "http://schemas.openxmlformats.org/package/2006/relationships"
HEADER = ("jar", "reagent", "dose (mg/L)", "ph", "Zn dissolved (mg/L)")
ROWS = (("1", "none", 0, 6.4, 25.0), ("2", "lime", 150, 8.9, 0.4))

_CONTENT_TYPES = (
    '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>'
    '<Types xmlns="http://schemas.openxmlformats.org/package/2006/content-types">'
    '<Default Extension="rels" ContentType="application/vnd.openxmlformats-package.relationships+xml"/>'
    '<Default Extension="xml" ContentType="application/xml"/>'
    '<Override PartName="/xl/workbook.xml" '
    'ContentType="application/vnd.openxmlformats-officedocument.spreadsheetml.sheet.main+xml"/>'
    '<Override PartName="/xl/worksheets/sheet1.xml" '
    'ContentType="application/vnd.openxmlformats-officedocument.spreadsheetml.worksheet+xml"/>'
    '<Override PartName="/xl/sharedStrings.xml" '
    'ContentType="application/vnd.openxmlformats-officedocument.spreadsheetml.sharedStrings+xml"/>'
    "</Types>"
)
_ROOT_RELS = (
    f'<?xml version="1.0" encoding="UTF-8"?><Relationships xmlns="{PKG_REL_NS}">'
    '<Relationship Id="rId1" Type="http://schemas.openxmlformats.org/officeDocument/2006/relationships/'
    'officeDocument" Target="xl/workbook.xml"/></Relationships>'
)
_WORKBOOK = (
    f'<?xml version="1.0" encoding="UTF-8"?><workbook xmlns="{MAIN_NS}" xmlns:r="{REL_NS}">'
    '<sheets><sheet name="jars" sheetId="1" r:id="rId1"/></sheets></workbook>'
)
_WORKBOOK_RELS = (
    f'<?xml version="1.0" encoding="UTF-8"?><Relationships xmlns="{PKG_REL_NS}">'
    '<Relationship Id="rId1" Type="http://schemas.openxmlformats.org/officeDocument/2006/relationships/'
    'worksheet" Target="worksheets/sheet1.xml"/>'
    '<Relationship Id="rId2" Type="http://schemas.openxmlformats.org/officeDocument/2006/relationships/'
    'sharedStrings" Target="sharedStrings.xml"/></Relationships>'
)


def _column(n: int) -> str:
    letters = ""
    while n:
        n, r = divmod(n - 1, 26)
        letters = chr(65 + r) + letters
    return letters


def _sheet_rows() -> str:
    """The jar table as inline-string and number cells."""
    out = []
    for i, row in enumerate((HEADER, *ROWS), start=1):
        cells = []
        for j, v in enumerate(row, start=1):
            ref = f"{_column(j)}{i}"
            if isinstance(v, str):
                cells.append(f'<c r="{ref}" t="inlineStr"><is><t>{v}</t></is></c>')
            else:
                cells.append(f'<c r="{ref}"><v>{v}</v></c>')
        out.append(f'<row r="{i}">{"".join(cells)}</row>')
    return "".join(out)


def _sheet(dimension: str | None = None, extra_rows: str = "", padding: int = 0) -> bytes:
    dim = f'<dimension ref="{dimension}"/>' if dimension else ""
    return (
        f'<?xml version="1.0" encoding="UTF-8"?><worksheet xmlns="{MAIN_NS}">{dim}<sheetData>'
        f"{_sheet_rows()}{extra_rows}</sheetData></worksheet>"
    ).encode()


def _workbook(parts: dict[str, bytes | None], streamed: dict | None = None) -> bytes:
    """A zip of the standard parts, with ``parts`` replacing or adding members; ``streamed`` maps a member name to
    (head, repeated chunk, count, tail), written through a stream so that no large buffer is ever made."""
    members = {
        "[Content_Types].xml": _CONTENT_TYPES.encode(),
        "_rels/.rels": _ROOT_RELS.encode(),
        "xl/workbook.xml": _WORKBOOK.encode(),
        "xl/_rels/workbook.xml.rels": _WORKBOOK_RELS.encode(),
        "xl/worksheets/sheet1.xml": _sheet(),
        "xl/sharedStrings.xml": f'<?xml version="1.0"?><sst xmlns="{MAIN_NS}"/>'.encode(),
    }
    members.update(parts)
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED, compresslevel=9) as z:
        for name, data in members.items():
            if streamed and name in streamed:
                head, chunk, count, tail = streamed[name]
                with z.open(name, "w", force_zip64=True) as fh:
                    fh.write(head)
                    for _ in range(count):
                        fh.write(chunk)
                    fh.write(tail)
            else:
                z.writestr(name, data)
    return buf.getvalue()


def shared_strings_bomb(count: int = 2_000_000) -> bytes:
    """A shared-strings part of ``count`` one-letter strings (2 million: about 80 kB)."""
    head = f'<?xml version="1.0"?><sst xmlns="{MAIN_NS}" count="{count}" uniqueCount="{count}">'.encode()
    repeat = min(10_000, count)
    return _workbook(
        {}, streamed={"xl/sharedStrings.xml": (head, b"<si><t>a</t></si>" * repeat, count // repeat, b"</sst>")}
    )


def dimension_bomb(columns: int = 500, rows: int = 1_048_576) -> bytes:
    """A sheet of five columns and three rows that declares ``columns`` x ``rows`` (about 1.7 kB)."""
    return _workbook({"xl/worksheets/sheet1.xml": _sheet(dimension=f"A1:{_column(columns)}{rows}")})


def far_cell_bomb(row: int = 1_048_576) -> bytes:
    """No declared dimension, but one empty cell far down the sheet: a reader fills every row up to it."""
    return _workbook({"xl/worksheets/sheet1.xml": _sheet(extra_rows=f'<row r="{row}"><c r="A{row}"/></row>')})


def cells_bomb(count: int = 1_000_000) -> bytes:
    """``count`` empty cells in rows of 50 (a few kB per 100,000)."""
    head = f'<?xml version="1.0"?><worksheet xmlns="{MAIN_NS}"><sheetData>{_sheet_rows()}'.encode()
    # rows without numbers follow on from the last one; cells without references likewise
    chunk = ("<row>" + "<c/>" * 50 + "</row>").encode()
    return _workbook(
        {}, streamed={"xl/worksheets/sheet1.xml": (head, chunk, count // 50, b"</sheetData></worksheet>")}
    )


def whitespace_bomb(megabytes: int = 190) -> bytes:
    """A sheet padded with ``megabytes`` MB of spaces (190 MB unpack from about 190 kB)."""
    sheet = _sheet()
    cut = sheet.index(b"<sheetData>")
    spaces = b" " * 1_000_000
    return _workbook(
        {}, streamed={"xl/worksheets/sheet1.xml": (sheet[:cut], spaces, megabytes, sheet[cut:])}
    )


def entity_bomb(levels: int = 9) -> bytes:
    """A shared-strings part whose one string expands to 10**levels copies through nested entities."""
    decl = "".join(
        f'<!ENTITY e{i} "{("&e" + str(i - 1) + ";") * 10 if i else "a"}">' for i in range(levels + 1)
    )
    part = f'<?xml version="1.0"?><!DOCTYPE sst [{decl}]><sst xmlns="{MAIN_NS}"><si><t>&e{levels};</t></si></sst>'
    return _workbook({"xl/sharedStrings.xml": part.encode()})


def deep_toml(depth: int = 100_000) -> str:
    """A scenario file whose name is an array nested ``depth`` deep."""
    return "version = 1\nname = " + "[" * depth + "]" * depth + "\n"
