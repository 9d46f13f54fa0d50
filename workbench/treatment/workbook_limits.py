"""Bounds on what an Excel .xlsx workbook may hold, checked before a spreadsheet library reads it.

An .xlsx file is a zip archive of XML parts. A few kilobytes can unpack to hundreds of megabytes, declare a sheet
of a million rows (which a reader pads out row by row) or list millions of shared strings (which a reader loads
whole, one Python object each). :func:`check_workbook` looks at the archive's directory first, then
stream-parses every XML part in chunks of 64 KiB (a part is never inflated whole; the zip reader stops at the
size the directory declares), counting what a reader would have to build, and refuses the file at the first
limit it passes. The message names the limit.

Limits (a jar-test sheet holds a few hundred cells; these leave room for a hundred times more):

======================  =====================================================================================
unpacked size           at most :data:`MAX_UNPACKED_BYTES` in all, as the archive's directory declares
archive members         at most :data:`MAX_MEMBERS`, stored or deflated, not encrypted
XML elements            at most :data:`MAX_XML_ELEMENTS` in all parts together, nested at most
                        :data:`MAX_XML_DEPTH` deep; no document type declarations (entity expansion)
shared strings          at most :data:`MAX_SHARED_STRINGS`
declared dimensions     each sheet's ``<dimension>`` within :data:`MAX_SHEET_ROWS` rows,
                        :data:`MAX_SHEET_COLUMNS` columns and :data:`MAX_CELLS` cells (rows x columns)
cells                   each sheet at most :data:`MAX_CELLS` cells, none beyond row :data:`MAX_SHEET_ROWS` or
                        column :data:`MAX_SHEET_COLUMNS`, and the rectangle they span within :data:`MAX_CELLS`
======================  =====================================================================================

Every sheet of the workbook is checked, not only the one read.
"""

from __future__ import annotations

import io
import re
import zipfile
from xml.parsers import expat

from workbench.errors import InputError

MAX_UNPACKED_BYTES = 50_000_000
MAX_MEMBERS = 500
MAX_XML_ELEMENTS = 1_000_000
MAX_XML_DEPTH = 64
MAX_SHARED_STRINGS = 100_000
MAX_CELLS = 100_000
MAX_SHEET_ROWS = 20_000
MAX_SHEET_COLUMNS = 500
CHUNK_BYTES = 65_536
_METHODS = (zipfile.ZIP_STORED, zipfile.ZIP_DEFLATED)
_CELL_REF = re.compile(r"^\$?([A-Za-z]{1,3})\$?([0-9]{1,7})$")
_SAVE_HINT = "save the jar-test sheet alone in a new workbook, or as CSV"


class _Refused(Exception):
    """Raised inside the XML handlers; carries the InputError (expat wraps handler exceptions otherwise)."""

    def __init__(self, error: InputError):
        self.error = error


def check_workbook(source: str, payload: bytes) -> None:
    """Refuse an .xlsx archive that passes any limit of this module's table (the message names the limit).

    Parameters
    ----------
    source : str
        The file's name, for messages.
    payload : bytes
        The whole file (already within the reader's cap on file size).

    Raises
    ------
    InputError
        Not a zip archive, or a limit passed.
    """
    try:
        archive = zipfile.ZipFile(io.BytesIO(payload))
    except zipfile.BadZipFile:
        raise InputError(source, "not an .xlsx archive", "an Excel .xlsx workbook is expected") from None
    with archive:
        members = archive.infolist()
        _check_directory(source, members)
        counter = _Counter(source)
        for info in members:
            _scan_member(archive, info, counter)


def _check_directory(source: str, members: list[zipfile.ZipInfo]) -> None:
    if len(members) > MAX_MEMBERS:
        raise InputError(
            source,
            f"{len(members)} archive members",
            f"workbooks of up to {MAX_MEMBERS} archive members are read (limit: archive members); {_SAVE_HINT}",
        )
    unpacked = sum(info.file_size for info in members)
    if unpacked > MAX_UNPACKED_BYTES:
        raise InputError(
            source,
            f"{unpacked} bytes unpacked",
            f"workbooks up to {MAX_UNPACKED_BYTES // 1_000_000} MB unpacked are read (limit: unpacked size); "
            f"{_SAVE_HINT}",
        )
    for info in members:
        if info.flag_bits & 0x1 or info.compress_type not in _METHODS:
            raise InputError(
                f"{source}: {info.filename}",
                "encrypted" if info.flag_bits & 0x1 else f"compression method {info.compress_type}",
                "an .xlsx workbook as a spreadsheet program saves it (stored or deflated parts, no password)",
            )


def _scan_member(archive: zipfile.ZipFile, info: zipfile.ZipInfo, counter: _Counter) -> None:
    """Stream one member through the XML counter, in bounded chunks, if it is XML (judged by its first bytes,
    not its name: a reader finds parts through the workbook's relations, whatever they are called)."""
    try:
        with archive.open(info) as fh:
            first = fh.read(CHUNK_BYTES)
            if not _looks_like_xml(first):
                return
            parser = counter.parser(info.filename)
            chunk = first
            while chunk:
                parser.Parse(chunk, False)
                chunk = fh.read(CHUNK_BYTES)
            parser.Parse(b"", True)
    except _Refused as refused:
        raise refused.error from None
    except expat.ExpatError as exc:
        raise InputError(
            f"{counter.source}: {info.filename}",
            f"malformed XML ({expat.errors.messages[exc.code]}, line {exc.lineno})",
            "a readable Excel .xlsx workbook is expected",
        ) from None
    except (zipfile.BadZipFile, OSError, EOFError, RuntimeError, ValueError) as exc:
        raise InputError(
            f"{counter.source}: {info.filename}", type(exc).__name__, "a readable Excel .xlsx workbook is expected"
        ) from None


def _looks_like_xml(first: bytes) -> bool:
    if first[:2] in (b"\xff\xfe", b"\xfe\xff"):
        return True
    return first.lstrip(b"\xef\xbb\xbf").lstrip()[:1] == b"<"


def _column_number(letters: str) -> int:
    n = 0
    for ch in letters.upper():
        n = n * 26 + ord(ch) - 64
    return n


class _Counter:
    """Counts across every part of one workbook; hands out one expat parser per part."""

    def __init__(self, source: str):
        self.source = source
        self.elements = 0

    def parser(self, part: str):
        state = _Part(self, part)
        p = expat.ParserCreate(namespace_separator=" ")
        p.StartElementHandler = state.start
        p.EndElementHandler = state.end
        p.StartDoctypeDeclHandler = state.doctype
        p.EntityDeclHandler = state.entity
        return p

    def refuse(self, part: str, value: str, allowed: str, limit: str):
        raise _Refused(
            InputError(f"{self.source}: {part}", value, f"{allowed} (limit: {limit}); {_SAVE_HINT}")
        )


class _Part:
    """Handlers for one XML part: shared strings (root ``sst``) and worksheets (root ``worksheet``)."""

    def __init__(self, counter: _Counter, part: str):
        self.counter = counter
        self.part = part
        self.depth = 0  # of the element being opened (the root is at 0)
        self.root = ""
        self.strings = 0
        self.cells = 0
        self.row = 0  # current row number (1-based)
        self.col = 0  # current column number in that row
        self.max_row = 0
        self.max_col = 0

    def doctype(self, *args) -> None:
        self.counter.refuse(
            self.part, "a document type declaration", "workbook parts without one are read", "XML elements"
        )

    def entity(self, *args) -> None:
        self.doctype()

    def start(self, name: str, attrs: dict) -> None:
        c = self.counter
        c.elements += 1
        depth = self.depth
        self.depth = depth + 1
        if c.elements > MAX_XML_ELEMENTS:
            c.refuse(self.part, f"more than {MAX_XML_ELEMENTS} XML elements", "fewer are read", "XML elements")
        if depth >= MAX_XML_DEPTH:
            c.refuse(
                self.part, f"elements nested more than {MAX_XML_DEPTH} deep", "shallower ones", "XML elements"
            )
        local = name.rpartition(" ")[2]
        if depth == 0:
            self.root = local
        elif self.root == "sst":
            if depth == 1 and local == "si":  # sst/si
                self.strings += 1
                if self.strings > MAX_SHARED_STRINGS:
                    c.refuse(
                        self.part,
                        f"more than {MAX_SHARED_STRINGS} shared strings",
                        f"workbooks of up to {MAX_SHARED_STRINGS} shared strings are read",
                        "shared strings",
                    )
        elif self.root == "worksheet":
            if depth == 3 and local == "c":  # worksheet/sheetData/row/c
                self._cell(attrs.get("r"))
            elif depth == 2 and local == "row":  # worksheet/sheetData/row
                self.row = _int(attrs.get("r"), self.row + 1)
                self.col = 0
                self._bound(self.row, 1)
            elif depth == 1 and local == "dimension":
                self._dimension(attrs.get("ref", ""))

    def end(self, name: str) -> None:
        self.depth -= 1

    def _dimension(self, ref: str) -> None:
        ends = [_CELL_REF.match(part.strip()) for part in ref.split(":")]
        if not ends or not all(ends):
            return  # a reader that cannot parse it does not pad to it either
        rows = max(int(m.group(2)) for m in ends)
        cols = max(_column_number(m.group(1)) for m in ends)
        if rows > MAX_SHEET_ROWS or cols > MAX_SHEET_COLUMNS or rows * cols > MAX_CELLS:
            self.counter.refuse(
                self.part,
                f"a sheet declared as {ref} ({rows} rows x {cols} columns)",
                f"sheets of up to {MAX_SHEET_ROWS} rows, {MAX_SHEET_COLUMNS} columns and {MAX_CELLS} cells are read",
                "declared dimensions",
            )

    def _cell(self, ref) -> None:
        m = _CELL_REF.match(ref.strip()) if isinstance(ref, str) else None
        if m:
            self.col = _column_number(m.group(1))
            self.row = max(self.row, int(m.group(2)))
        else:
            self.col += 1
        self.cells += 1
        if self.cells > MAX_CELLS:
            self.counter.refuse(
                self.part,
                f"more than {MAX_CELLS} cells",
                f"sheets of up to {MAX_CELLS} cells are read",
                "cells",
            )
        self._bound(self.row, self.col)

    def _bound(self, row: int, col: int) -> None:
        """A cell (or row) at (row, col): within the sheet limits, and the rectangle from A1 to the farthest
        cell within MAX_CELLS (a reader pads every row to the widest)."""
        self.max_row, self.max_col = max(self.max_row, row), max(self.max_col, col)
        if row > MAX_SHEET_ROWS or col > MAX_SHEET_COLUMNS or self.max_row * self.max_col > MAX_CELLS:
            self.counter.refuse(
                self.part,
                f"a cell in row {row}, column {col} (the cells span {self.max_row} rows x {self.max_col} columns)",
                f"sheets of up to {MAX_SHEET_ROWS} rows, {MAX_SHEET_COLUMNS} columns and {MAX_CELLS} cells are read",
                "cells",
            )


def _int(text, default: int) -> int:
    try:
        return int(text)
    except (TypeError, ValueError):
        return default
