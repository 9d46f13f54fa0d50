"""Errors raised by the workbench.

Every error a person can cause by what they type or load is an :class:`InputError` (a ``ValueError``) whose
message names the field, the value given and what is allowed. A calculation that cannot be completed raises
:class:`ConvergenceError`; the workbench never returns NaN or a silently wrong number instead.
"""

from __future__ import annotations


class InputError(ValueError):
    """Bad input: names the field, the value and what is allowed."""

    def __init__(self, field: str, value: object, allowed: str):
        self.field = field
        self.value = value
        self.allowed = allowed
        super().__init__(f"{field}: got {value!r}; {allowed}")


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
