"""Labelled inputs with their unit and an error line beside each: the building blocks of the panels.

A :class:`Field` holds one control (a FloatText, Text, Dropdown, ...), its label, its unit and an error line
right under the control. A panel reports a bad value with :meth:`Field.show_error`; the control's value is
never touched, so nothing the user typed is lost. Numbers typed as text (optional values such as a measured
pH, where blank means "not given") are read by :meth:`Field.number`, which raises :class:`FieldError` naming
the field when the text is not a number.
"""

from __future__ import annotations

import functools
import html
import math
import re

import ipywidgets as widgets
from ipywidgets.widgets.widget_description import DescriptionStyle
from ipywidgets.widgets.widget_string import HTMLStyle

LABEL_WIDTH = "12em"
CONTROL_WIDTH = "9em"
TEXT_NUMBER_WIDTH = "11em"  # room for a placeholder that says what a blank means
ERROR_COLOUR = "#B00020"


@functools.cache
def shared_layout(**style: str) -> widgets.Layout:
    """One Layout per style, shared by every widget that uses it (ipywidgets lets widgets share a Layout): a
    panel's forty fields then open a few layout models instead of some two hundred, which is a third of the
    time it takes to build a panel. Never change a shared layout's attributes; give the widget its own."""
    return widgets.Layout(**style)


@functools.cache
def shared_style(kind: type) -> widgets.Widget:
    """One default style widget of this kind (HTMLStyle, DescriptionStyle, TextStyle) shared by the fields, for
    the same reason as :func:`shared_layout`."""
    return kind()


class FieldError(ValueError):
    """A value that could not be read from one field (the message says what is expected)."""

    def __init__(self, field: Field, message: str):
        self.field = field
        self.message = message
        super().__init__(f"{field.name}: {message}")


class Field:
    """A labelled control with its unit and an error line beside it.

    Parameters
    ----------
    name : str
        Key of the field in its panel (used in tests and logs).
    label : str
        Plain words shown before the control.
    control : ipywidgets.ValueWidget
        The input.
    unit : str, optional
        Unit shown after the control (e.g. "mg/L as the element").
    hint : str, optional
        Tooltip of the label.
    """

    def __init__(
        self,
        name: str,
        label: str,
        control: widgets.ValueWidget,
        unit: str = "",
        *,
        hint: str = "",
        label_width: str = LABEL_WIDTH,
    ):
        self.name = name
        self.control = control
        control.add_class("wb-field-" + re.sub(r"[^A-Za-z0-9_-]+", "-", name))  # a stable hook for page tests
        self.label = widgets.HTML(
            f'<span title="{html.escape(hint)}">{html.escape(label)}</span>',
            layout=shared_layout(width=label_width, min_width=label_width),
            style=shared_style(HTMLStyle),
        )
        self.unit = widgets.HTML(
            f'<span style="color:#555">{html.escape(unit)}</span>',
            layout=shared_layout(margin="0 0 0 4px"),
            style=shared_style(HTMLStyle),
        )
        self.error = widgets.HTML(
            "", layout=shared_layout(margin=f"0 0 0 {label_width}"), style=shared_style(HTMLStyle)
        )
        self.error.add_class("wb-field-error")
        self.box = widgets.VBox(
            [
                widgets.HBox([self.label, control, self.unit], layout=shared_layout(align_items="center")),
                self.error,
            ],
            layout=shared_layout(margin="0 0 2px 0"),
        )

    # ------------------------------------------------------------------ value
    @property
    def value(self):
        return self.control.value

    @value.setter
    def value(self, new) -> None:
        self.control.value = new

    def number(self, *, optional: bool = False, blank: str = "") -> float | None:
        """The control's value as a float; for a text control, the typed text read as a number.

        Parameters
        ----------
        optional : bool
            Blank text means "not given" and returns None.
        blank : str
            What a blank means, for the message (e.g. "blank = not measured").

        Raises
        ------
        FieldError
            When the text is not a finite number (a decimal comma is refused, not guessed).
        """
        raw = self.control.value
        if not isinstance(raw, str):
            return None if raw is None else float(raw)
        text = raw.strip()
        if not text:
            if optional:
                return None
            raise FieldError(self, "a number is required")
        try:
            value = float(text)
        except ValueError:
            hint = "; use a decimal point" if "," in text else ""
            extra = f" ({blank})" if blank else ""
            raise FieldError(self, f"got {raw!r}: a number is required{extra}{hint}") from None
        if not math.isfinite(value):
            raise FieldError(self, f"got {raw!r}: a finite number is required")
        return value

    # ------------------------------------------------------------------ errors
    def show_error(self, message: str) -> None:
        """Show ``message`` beside the control (the control's value is left as it is)."""
        self.error.value = (
            f'<span style="color:{ERROR_COLOUR}; font-size:90%">&#9888; {html.escape(message)}</span>'
        )
        self.control.add_class("wb-invalid")

    def clear_error(self) -> None:
        if self.error.value:
            self.error.value = ""
        self.control.remove_class("wb-invalid")

    @property
    def error_text(self) -> str:
        """The error shown beside the field, as plain text ("" when none)."""
        return html.unescape(_strip_tags(self.error.value)).replace("\u26a0", "").strip()


def _strip_tags(text: str) -> str:
    out, inside = [], False
    for ch in text:
        if ch == "<":
            inside = True
        elif ch == ">":
            inside = False
        elif not inside:
            out.append(ch)
    return "".join(out)


# ---------------------------------------------------------------------------------------------------- makers
def float_field(name: str, label: str, value: float, unit: str = "", *, hint: str = "", **kw) -> Field:
    """A FloatText field (the value changes on Enter or on leaving the box, never on each key)."""
    control = widgets.FloatText(
        value=value,
        continuous_update=False,
        layout=shared_layout(width=CONTROL_WIDTH),
        style=shared_style(DescriptionStyle),
    )
    return Field(name, label, control, unit, hint=hint, **kw)


def int_field(name: str, label: str, value: int, unit: str = "", *, hint: str = "", **kw) -> Field:
    control = widgets.IntText(value=value, continuous_update=False, layout=shared_layout(width=CONTROL_WIDTH))
    return Field(name, label, control, unit, hint=hint, **kw)


def text_number_field(
    name: str, label: str, value: float | None, unit: str = "", *, placeholder: str = "", hint: str = "", **kw
) -> Field:
    """A number typed as text, for optional values: blank means "not given" (see :meth:`Field.number`)."""
    control = widgets.Text(
        value="" if value is None else _shown(value),
        placeholder=placeholder,
        continuous_update=False,
        layout=shared_layout(width=TEXT_NUMBER_WIDTH),
    )
    return Field(name, label, control, unit, hint=hint, **kw)


def text_field(
    name: str, label: str, value: str, *, width: str = "22em", placeholder: str = "", **kw
) -> Field:
    control = widgets.Text(
        value=value, placeholder=placeholder, continuous_update=False, layout=shared_layout(width=width)
    )
    return Field(name, label, control, **kw)


def choice_field(
    name: str, label: str, options, value, unit: str = "", *, width: str = "18em", **kw
) -> Field:
    """A Dropdown; ``options`` as for ipywidgets (values, or (label, value) pairs)."""
    control = widgets.Dropdown(options=options, value=value, layout=shared_layout(width=width))
    return Field(name, label, control, unit, **kw)


def set_text_number(field: Field, value: float | None) -> None:
    """Show a number (or blank for None) in a text-number field."""
    field.control.value = "" if value is None else _shown(value)


def _shown(value: float) -> str:
    """A number as text that reads back as the same float, without a trailing '.0'."""
    text = repr(float(value))
    return text[:-2] if text.endswith(".0") else text
