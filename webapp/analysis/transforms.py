"""Per-variable transforms of the recipe (log10, ln, log1p, sqrt) and the values each can take."""

from __future__ import annotations

import numpy as np

from webapp.analysis.errors import OrdinateError

__all__ = ["TRANSFORM_FUNCTIONS", "apply_transforms", "domain_reasons", "domain_violations", "domain_words"]

TRANSFORM_FUNCTIONS = {"log10": np.log10, "ln": np.log, "log1p": np.log1p, "sqrt": np.sqrt}


def apply_transforms(values: np.ndarray, variables, transforms, labels=None, *, where=None) -> None:
    """Transform the columns of ``values`` in place; raises naming the first value outside a transform's domain.

    ``labels`` name the rows (the first bad sample is named); ``where(row, value)``
    may instead say where that value is, for rows that have no label yet.
    """
    if where is None and labels is not None:
        def where(row, value):
            return f" (first at sample '{labels[row]}': {value:g})"
    for j, (variable, transform) in enumerate(zip(variables, transforms)):
        if transform == "none":
            continue
        column = values[:, j]
        bad = domain_violations(column, transform)
        if bad.any():
            first = int(np.flatnonzero(bad)[0])
            place = where(first, column[first]) if where is not None else ""
            raise OrdinateError(
                f"Cannot apply {transform} to '{variable}': {int(bad.sum())} value(s) are not "
                f"{domain_words(transform)}{place}. "
                "Choose another transform for this variable or fix the values."
            )
        with np.errstate(invalid="ignore", divide="ignore"):
            values[:, j] = TRANSFORM_FUNCTIONS[transform](column)


def domain_reasons(values: np.ndarray, variables, transforms) -> dict[int, str]:
    """For each row with a value its transform cannot take, which values and why."""
    reasons: dict[int, list[str]] = {}
    for j, (variable, transform) in enumerate(zip(variables, transforms)):
        if transform == "none":
            continue
        for row in np.flatnonzero(domain_violations(values[:, j], transform)):
            reasons.setdefault(int(row), []).append(
                f"'{variable}' = {values[row, j]:g} is not {domain_words(transform)} ({transform})")
    return {row: "; ".join(parts) for row, parts in sorted(reasons.items())}


def domain_words(transform: str) -> str:
    """What values ``transform`` can take, in words."""
    return "greater than -1" if transform == "log1p" else ("zero or more" if transform == "sqrt" else "greater than zero")


def domain_violations(column: np.ndarray, transform: str) -> np.ndarray:
    """Finite values of ``column`` that ``transform`` cannot take (missing values are not violations)."""
    finite = np.isfinite(column)
    if transform in ("log10", "ln"):
        return finite & (column <= 0)
    if transform == "log1p":
        return finite & (column <= -1)
    return finite & (column < 0)
