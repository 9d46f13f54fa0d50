"""Errors raised by the workbench.

Every error a person can cause by what they type or load is an :class:`InputError` (a ``ValueError``) whose
message names the field, the value given and what is allowed. A calculation that cannot be completed raises
:class:`ConvergenceError`; the workbench never returns NaN or a silently wrong number instead.
"""

from __future__ import annotations

import reprlib

MAX_SHOWN = 300  # characters of a value shown in a message; longer or deeply nested values are abbreviated
_SHORT = reprlib.Repr()  # keyword arguments to Repr() arrived in Python 3.12
_SHORT.maxlevel, _SHORT.maxdict, _SHORT.maxlist, _SHORT.maxtuple = 3, 6, 12, 12
_SHORT.maxstring, _SHORT.maxother, _SHORT.maxlong = 120, 120, 60


def shown(value: object) -> str:
    """The value's repr for a message: as is when short, else abbreviated (a value nested thousands deep, as a
    hostile file can hold, never raises here)."""
    try:
        text = repr(value)
    except RecursionError:
        text = None
    if text is None or len(text) > MAX_SHOWN:
        text = _SHORT.repr(value)
    return text


class InputError(ValueError):
    """Bad input: names the field, the value and what is allowed."""

    def __init__(self, field: str, value: object, allowed: str):
        self.field = field
        self.value = value
        self.allowed = allowed
        super().__init__(f"{field}: got {shown(value)}; {allowed}")


class DataError(ValueError):
    """A data file in data/ is malformed (names the file, row and column)."""


class ConvergenceError(ArithmeticError):
    """The equilibrium solver did not reach a verified solution (names the points that failed)."""


class ModelRangeError(InputError):
    """The water lies outside the range where the chemistry model holds (e.g. ionic strength beyond the
    activity model's limit); names the quantity, its value and the allowed range.

    ``ph`` holds the pH values of the points found beyond the range (fixed-pH solves; empty otherwise), so that a
    curve can stop where the model stops instead of being refused whole."""

    def __init__(self, field: str, value: object, allowed: str, *, ph: tuple[float, ...] = ()):
        super().__init__(field, value, allowed)
        self.ph = tuple(float(v) for v in ph)
