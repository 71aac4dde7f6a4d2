"""The variable axis of spectra-like tables: column names that are positions.

Spectra, chromatograms and mass spectra are exported with one column per
position on a physical axis, named by that position: ``1000.25``,
``4000 cm-1``, ``m/z 301.1``, ``RT 12.5 min``. :func:`variable_axis` reads
such names into an ordered axis so that plots can draw along it and recipes
can select ranges of it.

Rule (stated so that users can predict it):

* a name is a *position* when it is one number, optionally preceded by a
  prefix that ends in a space, ``_``, ``:`` or ``=`` (``m/z 301.1``, ``nm_1100``)
  and optionally followed by a unit after it (``4000 cm-1``, ``1100nm``);
  a name such as ``X1`` (letters glued to a number) is not a position, so
  numbered variables are not mistaken for an axis;
* the table has an axis when at least ``MIN_AXIS_VARIABLES`` of its numeric
  columns, and at least ``MIN_AXIS_SHARE`` (90 %) of them, are positions with
  one common prefix and unit, and those positions run strictly up or strictly
  down in file order (no repeats). Numeric columns that are not positions
  (a reference value such as ``moisture`` beside the spectrum) stay ordinary
  variables outside the axis.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

MIN_AXIS_VARIABLES = 10
MIN_AXIS_SHARE = 0.9

_NUMBER = re.compile(r"[+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?")
_PREFIX_ENDS = (" ", "_", ":", "=", "\t")


@dataclass(frozen=True, eq=False)
class VariableAxis:
    """The numeric columns that form an ordered axis, with their positions.

    Attributes
    ----------
    names : the axis columns, in file order.
    positions : float64 array, one position per name, strictly monotonic.
    unit : the common unit text after the number (``'cm-1'``), else ``''``.
    prefix : the common text before the number (``'m/z'``), else ``''``.
    other : numeric columns that are not on the axis, in file order.
    """

    names: tuple[str, ...]
    positions: np.ndarray
    unit: str
    prefix: str
    other: tuple[str, ...] = ()

    @property
    def label(self) -> str:
        """Axis title for plots: the prefix and unit, or 'variable position'."""
        words = " ".join(part for part in (self.prefix, f"({self.unit})" if self.unit else "") if part)
        return words or "variable position"

    @property
    def increasing(self) -> bool:
        return bool(self.positions[-1] > self.positions[0])

    def span(self) -> tuple[float, float]:
        return float(self.positions.min()), float(self.positions.max())


def parse_position(name: str) -> tuple[str, float, str] | None:
    """``(prefix, number, unit)`` when ``name`` is a position (see module rule), else None."""
    text = str(name).strip()
    match = _NUMBER.search(text)
    if match is None:
        return None
    before, after = text[: match.start()], text[match.end() :].strip()
    if before and (not before.endswith(_PREFIX_ENDS) or any(c.isdigit() for c in before)):
        return None  # 'X1', 'A2B3': labels with numbers in them, not positions
    if after and (after[0].isdigit() or after[0] in "+-."):
        return None  # '12-14', '1.2.3': not one number
    value = float(match.group())
    if not np.isfinite(value):
        return None
    return before.strip().rstrip("_:=").strip(), value, after


def variable_axis(names) -> VariableAxis | None:
    """The ordered variable axis of these numeric column names, or None (module rule)."""
    names = [str(name) for name in names]
    parsed = [(name, parse_position(name)) for name in names]
    found = [(name, p) for name, p in parsed if p is not None]
    if len(found) < MIN_AXIS_VARIABLES:
        return None
    # The most frequent (prefix, unit) pair is the axis; others are not on it.
    kinds: dict[tuple[str, str], int] = {}
    for _, (prefix, _, unit) in found:
        kinds[(prefix, unit)] = kinds.get((prefix, unit), 0) + 1
    (prefix, unit), count = max(kinds.items(), key=lambda item: item[1])
    if count < MIN_AXIS_VARIABLES or count < MIN_AXIS_SHARE * len(names):
        return None
    on_axis = [(name, p[1]) for name, p in found if (p[0], p[2]) == (prefix, unit)]
    positions = np.array([value for _, value in on_axis], dtype=float)
    steps = np.diff(positions)
    if not (np.all(steps > 0) or np.all(steps < 0)):
        return None
    axis_names = {name for name, _ in on_axis}
    return VariableAxis(
        names=tuple(name for name, _ in on_axis),
        positions=positions,
        unit=unit,
        prefix=prefix,
        other=tuple(name for name in names if name not in axis_names),
    )


def table_axis(table, id_column: str | None = None) -> VariableAxis | None:
    """The variable axis of an ingested table's numeric columns (the sample-ID column left out)."""
    id_column = table.id_column if id_column is None else id_column
    return variable_axis([c for c in table.numeric_columns if c != id_column])
