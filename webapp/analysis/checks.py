"""Argument checks shared by the analysis modules, each raising OrdinateError in plain words."""

from __future__ import annotations

import numbers

import numpy as np

from webapp.analysis.errors import OrdinateError


def whole_number(value, name: str, minimum: int) -> int:
    """``value`` as an int of at least ``minimum`` (booleans are refused)."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise OrdinateError(f"The {name} must be a whole number, not {value!r}.")
    value = int(value)
    if value < minimum:
        raise OrdinateError(f"The {name} must be at least {minimum}; {value} was given.")
    return value


def float_array(values, name: str, ndim: int) -> np.ndarray:
    """``values`` as a float array with ``ndim`` dimensions."""
    try:
        array = np.asarray(values, dtype=float)
    except (TypeError, ValueError) as exc:
        raise OrdinateError(f"The {name} must be numbers only ({exc}).") from None
    if array.ndim != ndim:
        shape = "a list of numbers" if ndim == 1 else "a table (2-D array)"
        raise OrdinateError(
            f"The {name} must be {shape}; got an array with {array.ndim} dimension(s), shape {array.shape}."
        )
    return array
