"""Colours and marker symbols for groups, chosen to be told apart without colour.

Colours follow the Okabe–Ito palette order (Okabe, M. & Ito, K. (2008).
*Color Universal Design (CUD): how to make figures and presentations that are
friendly to colorblind people*), with its yellow darkened so that markers stay
legible on white. Every colour is paired with its own marker symbol, so groups
also differ in shape for readers who do not see the colour difference, and in
greyscale prints.

Beyond 8 groups the pairs cycle deterministically: group ``i`` gets colour
``i mod 8`` and symbol ``(i mod 8 + i div 8) mod 8``, so the first 64 groups
all have distinct (colour, symbol) pairs; groups 64-127 repeat them with open
symbols. Samples without a group value form the group ``"(none)"``, drawn in
grey with an open circle and always listed last.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass
from typing import Sequence

import numpy as np
import pandas as pd

__all__ = [
    "OKABE_ITO",
    "MARKER_SYMBOLS",
    "NONE_GROUP",
    "NONE_COLOUR",
    "NEUTRAL_COLOUR",
    "ALL_SAMPLES_GROUP",
    "POSITIVE_COLOUR",
    "NEGATIVE_COLOUR",
    "GroupStyle",
    "group_style",
    "group_names",
    "group_order",
    "group_styles",
]

#: Okabe–Ito order; the yellow (#F0E442 in the original) is darkened to #C9B200.
OKABE_ITO: tuple[str, ...] = (
    "#E69F00",  # orange
    "#56B4E9",  # sky blue
    "#009E73",  # bluish green
    "#C9B200",  # yellow, darkened for markers on white
    "#0072B2",  # blue
    "#D55E00",  # vermillion
    "#CC79A7",  # reddish purple
    "#000000",  # black
)

MARKER_SYMBOLS: tuple[str, ...] = (
    "circle",
    "square",
    "diamond",
    "triangle-up",
    "cross",
    "x",
    "triangle-down",
    "star",
)

NONE_GROUP = "(none)"
NONE_COLOUR = "#8C8C8C"
#: Lines that belong to no group (Hotelling ellipse, all-sample ellipses).
NEUTRAL_COLOUR = "#3A3F44"
#: Name of the single group when no grouping column is chosen.
ALL_SAMPLES_GROUP = "All samples"
#: Signed bars (loadings, contributions): blue for positive, vermillion for negative.
POSITIVE_COLOUR = "#0072B2"
NEGATIVE_COLOUR = "#D55E00"

_PALETTE_SIZE = len(OKABE_ITO)


@dataclass(frozen=True)
class GroupStyle:
    """How one group is drawn."""

    colour: str
    symbol: str


def group_style(index: int) -> GroupStyle:
    """Style of the group at position ``index`` (0-based) in the group order."""
    if isinstance(index, bool) or not isinstance(index, numbers.Integral) or index < 0:
        raise ValueError(f"A group position must be a whole number from 0; got {index!r}.")
    index = int(index)
    colour = index % _PALETTE_SIZE
    symbol = (colour + index // _PALETTE_SIZE) % _PALETTE_SIZE
    open_variant = (index // (_PALETTE_SIZE * _PALETTE_SIZE)) % 2 == 1
    return GroupStyle(
        colour=OKABE_ITO[colour],
        symbol=MARKER_SYMBOLS[symbol] + ("-open" if open_variant else ""),
    )


NONE_STYLE = GroupStyle(colour=NONE_COLOUR, symbol="circle-open")
ALL_SAMPLES_STYLE = GroupStyle(colour=OKABE_ITO[4], symbol="circle")


def _name_of(value) -> str:
    # Whole-number floats (a batch column read as float because of a gap)
    # read better as "3" than "3.0".
    if isinstance(value, (float, np.floating)) and math.isfinite(value) and float(value).is_integer():
        return str(int(value))
    return str(value)


def group_names(groups: Sequence | np.ndarray | None, n: int | None = None) -> np.ndarray:
    """The group of each sample as display text; missing values become ``"(none)"``.

    Missing means None, NaN, pandas NA or a blank string. With ``groups`` None
    every sample is in :data:`ALL_SAMPLES_GROUP` (``n`` gives the count).
    Returns an object array of str, one per sample. Use it to name ellipse
    groups the same way the figures do.
    """
    if groups is None:
        if n is None:
            raise ValueError("Give the number of samples when there is no grouping column.")
        return np.full(int(n), ALL_SAMPLES_GROUP, dtype=object)
    values = np.asarray(groups, dtype=object)
    if values.ndim != 1:
        raise ValueError(f"The group values must be one column; got shape {values.shape}.")
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    names = [_name_of(u) for u in uniques]
    names = [NONE_GROUP if not name.strip() else name for name in names]
    lookup = np.array(names + [NONE_GROUP], dtype=object)
    return lookup[codes]  # code -1 (missing) picks the trailing NONE_GROUP


def _natural_key(name: str):
    try:
        return (0, float(name), "")
    except ValueError:
        return (1, 0.0, name.casefold())


def group_order(names: Sequence[str] | np.ndarray) -> list[str]:
    """Distinct group names in display order: numbers numerically, then text
    case-insensitively, ``"(none)"`` last. The order fixes each group's style."""
    distinct = set(pd.unique(np.asarray(names, dtype=object)).tolist())
    has_none = NONE_GROUP in distinct
    distinct.discard(NONE_GROUP)
    ordered = sorted(distinct, key=_natural_key)
    if has_none:
        ordered.append(NONE_GROUP)
    return ordered


def group_styles(order: Sequence[str]) -> dict[str, GroupStyle]:
    """Style per group name for groups listed in ``order``.

    ``"(none)"`` is grey wherever it stands; :data:`ALL_SAMPLES_GROUP` alone
    is blue. Positions in ``order`` decide all other styles, so passing the
    same order to several figures keeps a group's look the same in each.
    """
    styles: dict[str, GroupStyle] = {}
    position = 0
    for name in order:
        if name == NONE_GROUP:
            styles[name] = NONE_STYLE
        elif name == ALL_SAMPLES_GROUP and len(order) == 1:
            styles[name] = ALL_SAMPLES_STYLE
        else:
            styles[name] = group_style(position)
            position += 1
    return styles
