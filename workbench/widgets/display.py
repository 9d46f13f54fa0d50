"""HTML pieces the panels share: the cautions box, tables, lists and number formatting (presentation only)."""

from __future__ import annotations

import html

import numpy as np

from workbench.treatment.cautions import cautions

PERMIT_GOVERNS = "Example limits are not a permit: the local permit governs."
ERROR_COLOUR = "#B00020"

STYLE = """<style>
.wb-invalid input, .wb-invalid textarea, .wb-invalid select { border-color: #B00020 !important; }
.wb-panel table.wb-table { border-collapse: collapse; font-size: 90%; }
.wb-panel table.wb-table th, .wb-panel table.wb-table td { padding: 2px 8px; border-bottom: 1px solid #ddd;
  text-align: right; }
.wb-panel table.wb-table th:first-child, .wb-panel table.wb-table td:first-child { text-align: left; }
.wb-panel h4 { margin: 10px 0 4px 0; }
</style>"""


def fmt(value, digits: int = 3) -> str:
    """A number for a table: 3 significant figures, '–' for missing."""
    if value is None or (isinstance(value, float) and not np.isfinite(value)):
        return "–"
    return f"{value:.{digits}g}"


def table(header: list[str], rows: list[list[str]], *, text: tuple[int, ...] = ()) -> str:
    """An HTML table; numbers right-aligned, the first column and the columns ``text`` left-aligned."""
    left = {0, *text}

    def cell(tag: str, i: int, content: str) -> str:
        return (
            f'<{tag} style="text-align:left">{content}</{tag}>' if i in left else f"<{tag}>{content}</{tag}>"
        )

    head = "".join(cell("th", i, html.escape(h)) for i, h in enumerate(header))
    body = "".join("<tr>" + "".join(cell("td", i, c) for i, c in enumerate(row)) + "</tr>" for row in rows)
    return f'<table class="wb-table"><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>'


def items(lines, cls: str = "") -> str:
    if not lines:
        return ""
    return (
        f'<ul class="{cls}" style="margin:2px 0">'
        + "".join(f"<li>{html.escape(x)}</li>" for x in lines)
        + "</ul>"
    )


def cautions_html() -> str:
    """The cautions box: always shown, first line the permit statement."""
    return (
        '<div style="border:1px solid #c8a400; background:#fff8dc; padding:4px 10px; font-size:90%">'
        f"<b>Cautions.</b> {html.escape(PERMIT_GOVERNS)}" + items(cautions()) + "</div>"
    )


def error_text(exc: Exception) -> str:
    """An exception as escaped HTML text: its type and message."""
    return f"{html.escape(type(exc).__name__)}: {html.escape(str(exc))}"
