"""User text in figures, made plain: plotly reads every title, axis title, annotation and hover text as a subset
of HTML (links, styled spans, line breaks), so text from a scenario or a file is escaped before it goes in."""

from __future__ import annotations

import html


def plain(text) -> str:
    """``text`` with ``&``, ``<`` and ``>`` escaped: plotly shows it as written, with no link or style."""
    return html.escape(str(text), quote=False)


def title_text(title: str | None, subtitle: str | None = None) -> str | None:
    """A figure title from plain text, with an optional plain-text subtitle in small type below it."""
    if title is None and subtitle is None:
        return None
    main = plain(title) if title is not None else ""
    return main if subtitle is None else f"{main}<br><sup>{plain(subtitle)}</sup>"
