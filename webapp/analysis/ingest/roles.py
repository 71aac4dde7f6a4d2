"""Roles of columns: which one names the samples, which ones could group them."""

from __future__ import annotations

import re
from collections.abc import Sequence

import numpy as np
import pandas as pd

_MAX_TEXT_GROUPS = 20
_MAX_NUMERIC_GROUPS = 10
_HEAD_ROWS = 64
_NAME_WORDS = re.compile(r"[A-Z]+(?![a-z])|[A-Z]?[a-z]+|\d+|#")
_ID_WORDS = frozenset(
    {"id", "ids", "sample", "samples", "name", "batch", "label", "lot", "code", "run",
     "specimen", "no", "nr", "number", "num", "#", "index", "idx", "identifier", "tag"}
)
_ID_LAST_WORDS = frozenset({"id", "no", "nr", "number", "num", "#", "index", "idx", "identifier"})
_ID_WHOLE_NAMES = frozenset({"sample", "run", "batch", "lot", "specimen", "label", "code"})


def _name_words(name: str) -> list[str]:
    return [word.lower() for word in _NAME_WORDS.findall(name)]


def find_id_column(frame: pd.DataFrame, numeric: Sequence[str], text_columns: Sequence[str]) -> str | None:
    unique_text = [name for name in text_columns if _is_complete_and_unique(frame[name])]
    if unique_text:
        preferred = [name for name in unique_text if _ID_WORDS.intersection(_name_words(name))]
        return (preferred or unique_text)[0]
    for name in numeric:
        words = _name_words(name)
        says_identifier = bool(words) and (words[-1] in _ID_LAST_WORDS or " ".join(words) in _ID_WHOLE_NAMES)
        if says_identifier and _is_integer_valued(frame[name]) and _is_complete_and_unique(frame[name]):
            return name
    return None


def unnamed_leading_label(frame: pd.DataFrame, first_raw_name: str, numeric: Sequence[str]) -> str | None:
    """The first column, when its header cell is blank and it holds one distinct label per row.

    Data-frame exports write row labels that way (pandas' ``to_csv`` writes 0..n-1
    under an empty name); fitted as a variable, such a counter would dominate the
    first component. Numbers must be whole: a nameless column of measurements stays one.
    """
    if first_raw_name.strip() or frame.shape[1] == 0 or frame.columns[0] != "column 1":
        return None  # named, or dropped as empty
    name = frame.columns[0]
    column = frame[name]
    if name in numeric and not _is_integer_valued(column):
        return None
    return name if _is_complete_and_unique(column) else None


def _is_complete_and_unique(series: pd.Series) -> bool:
    return bool(series.notna().all() and series.is_unique)


def _is_integer_valued(series: pd.Series) -> bool:
    values = series.to_numpy(dtype=np.float64)
    head = values[:_HEAD_ROWS]
    if not _all_whole_numbers(head[~np.isnan(head)]):  # most measurement columns fail here, cheaply
        return False
    values = values[~np.isnan(values)]
    return values.size > 0 and _all_whole_numbers(values)


def _all_whole_numbers(values: np.ndarray) -> bool:
    return bool(np.all(values == np.round(values)) and np.all(np.abs(values) < 2**53))


def integers_as_text(series: pd.Series) -> pd.Series:
    return pd.Series(series.to_numpy(dtype=np.int64).astype(str), dtype="str", copy=False)


def find_group_columns(
    frame: pd.DataFrame, numeric: Sequence[str], text_columns: Sequence[str], id_column: str | None
) -> tuple[str, ...]:
    text_set = set(text_columns)
    whole_at_head = set(_whole_numbers_at_head(frame, numeric))
    groups = []
    for name in frame.columns:
        if name == id_column:
            continue
        if name in text_set and _has_few_repeated_values(frame[name], _MAX_TEXT_GROUPS):
            groups.append(name)
        elif (
            name in whole_at_head
            and _is_integer_valued(frame[name])
            and _has_few_repeated_values(frame[name], _MAX_NUMERIC_GROUPS)
        ):
            groups.append(name)
    return tuple(groups)


def _whole_numbers_at_head(frame: pd.DataFrame, numeric: Sequence[str]) -> list[str]:
    """Numeric columns whose first cells are whole numbers: one array pass, not one per column.

    Most measurement columns fail here; wide spectra have tens of thousands of them.
    """
    if not numeric:
        return []
    head = frame.iloc[:_HEAD_ROWS][list(numeric)].to_numpy(dtype=np.float64)
    with np.errstate(invalid="ignore"):
        whole = np.isnan(head) | ((head == np.round(head)) & (np.abs(head) < 2**53))
    return [name for name, ok in zip(numeric, whole.all(axis=0).tolist()) if ok]


def _has_few_repeated_values(series: pd.Series, cap: int) -> bool:
    """Between 2 and min(cap, max(2, n_filled // 2)) distinct values, at least one of them repeated."""
    n_filled = int(series.notna().sum())
    n_distinct = series.nunique()
    return 2 <= n_distinct <= min(cap, max(2, n_filled // 2)) and n_distinct < n_filled
