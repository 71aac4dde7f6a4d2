"""Monitoring over time: new samples scored against a locked reference model, in production order.

A *reference period* is the set of samples the model was fitted on; each later
*upload* is one file of new samples. :func:`monitoring_frame` scores every
upload against the model (:func:`webapp.analysis.model_io.project_table`: the
T² limit for new samples of Tracy, Young & Mason 1992 and the Q limit of
Jackson & Mudholkar 1979) and puts the samples in production order.
:func:`run_rule_hits` applies two run rules of control charts to a statistic
in that order:

* ``beyond-limit``: one point above the control limit (Shewhart 1931; rule 1
  of the Western Electric *Statistical Quality Control Handbook*, 1956);
* ``run-above-median``: a run of N or more consecutive points above the
  centre line, here the median of the reference period (the handbook's run of
  eight on one side of the centre line, N = 8 by default; Montgomery,
  *Introduction to Statistical Quality Control*, ch. 5). T² and Q are never
  negative and have skewed distributions, so only runs *above* the centre
  count: a run below means samples closer to the model than usual.

The rules are statistical signals, not release or rejection decisions.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Sequence

import numpy as np
import pandas as pd

from webapp.analysis.errors import OrdinateError
from webapp.analysis.model_io import ReferenceModel, project_table

__all__ = [
    "RUN_RULES",
    "DEFAULT_RUN_LENGTH",
    "MIN_RUN_LENGTH",
    "MAX_RUN_LENGTH",
    "RuleHit",
    "run_rule_hits",
    "ReferencePeriod",
    "reference_period",
    "UploadInfo",
    "monitoring_frame",
    "with_label_column",
    "FRAME_COLUMNS",
]

RUN_RULES: tuple[str, ...] = ("beyond-limit", "run-above-median")
DEFAULT_RUN_LENGTH = 8
MIN_RUN_LENGTH, MAX_RUN_LENGTH = 2, 50

#: Columns of :func:`monitoring_frame` before the scores ``PC1`` .. ``PCK``.
FRAME_COLUMNS: tuple[str, ...] = (
    "position", "upload", "sample", "order", "t2", "q", "t2_limit", "q_limit", "t2_beyond", "q_beyond",
)


@dataclass(frozen=True)
class RuleHit:
    """One firing of a run rule: positions ``first`` .. ``last`` (inclusive) in production order."""

    rule: str
    statistic: str  # "t2" or "q"
    first: int
    last: int


def run_rule_hits(values, *, limit: float, median: float, run_length: int = DEFAULT_RUN_LENGTH,
                  statistic: str) -> list[RuleHit]:
    """Hits of both run rules on ``values`` (one statistic in production order).

    ``beyond-limit``: one hit per point with value > ``limit``.
    ``run-above-median``: one hit per maximal run of at least ``run_length``
    consecutive points with value > ``median`` (the hit spans the whole run).
    Missing values (NaN) break a run and never hit. Hits are ordered by rule,
    then position.
    """
    if isinstance(run_length, bool) or not isinstance(run_length, (int, np.integer)) \
            or not MIN_RUN_LENGTH <= run_length <= MAX_RUN_LENGTH:
        raise OrdinateError(f"The run length must be a whole number from {MIN_RUN_LENGTH} to {MAX_RUN_LENGTH}; "
                            f"got {run_length!r}.")
    if statistic not in ("t2", "q"):
        raise OrdinateError(f"The statistic must be 't2' or 'q'; got {statistic!r}.")
    x = np.asarray(values, dtype=np.float64).ravel()
    with np.errstate(invalid="ignore"):
        beyond = np.flatnonzero(x > float(limit))
        above = x > float(median)
    hits = [RuleHit("beyond-limit", statistic, int(i), int(i)) for i in beyond]
    # Run boundaries from the changes of a padded indicator: starts where it rises, ends where it falls.
    edges = np.diff(np.concatenate([[0], above.astype(np.int8), [0]]))
    starts, ends = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
    hits += [RuleHit("run-above-median", statistic, int(s), int(e - 1))
             for s, e in zip(starts, ends) if e - s >= run_length]
    return hits


@dataclass(frozen=True, eq=False)
class ReferencePeriod:
    """The samples the reference model was fitted on: their scores, T² and Q, and the run charts' centres."""

    labels: tuple[str, ...]
    scores: np.ndarray  # n x K
    t2: np.ndarray
    q: np.ndarray
    t2_median: float
    q_median: float
    score_sd: np.ndarray  # K: standard deviation of each component's scores (n - 1 denominator)


def reference_period(model: ReferenceModel, labels: Sequence[str], scores, t2, q) -> ReferencePeriod:
    """The reference period of ``model`` from the fit's own scores, T² and Q (n samples)."""
    scores = np.asarray(scores, dtype=np.float64)
    t2, q = np.asarray(t2, dtype=np.float64).ravel(), np.asarray(q, dtype=np.float64).ravel()
    labels = tuple(str(v) for v in labels)
    n, k = len(labels), model.components
    if scores.ndim != 2 or scores.shape[0] != n or scores.shape[1] < k or t2.shape != (n,) or q.shape != (n,):
        raise OrdinateError("The reference period needs one row of scores, one T² and one Q per reference sample.")
    if n < 2:
        raise OrdinateError("A reference period needs at least two samples.")
    scores = np.array(scores[:, :k])
    for array in (scores, t2, q):
        array.setflags(write=False)
    sd = np.std(scores, axis=0, ddof=1)
    sd.setflags(write=False)
    return ReferencePeriod(labels, scores, t2, q, float(np.median(t2)), float(np.median(q)), sd)


@dataclass(frozen=True)
class UploadInfo:
    """One file of new samples added to a locked reference model."""

    upload_id: str
    file_name: str
    uploaded_by: str
    uploaded_at: str  # ISO 8601, UTC
    sample_count: int
    order_column: str | None = None


def with_label_column(table, label_column: str | None):
    """``table`` with the reference data's label column, when the file has it.

    An upload is read on its own, so its label column is detected again; an
    order column of unique dates could win that detection. The reference
    model's label column decides instead.
    """
    if label_column is None or label_column == table.id_column or label_column not in table.frame.columns:
        return table
    labels = table.frame[label_column]
    if labels.isna().any() or labels.astype(str).duplicated().any():
        return table
    return dataclasses.replace(table, id_column=label_column)


def monitoring_frame(model: ReferenceModel, uploads: Sequence[tuple[UploadInfo, object]],
                     order_column: str | None = None, label_column: str | None = None) -> pd.DataFrame:
    """Every new sample of ``uploads`` scored against ``model``, in production order.

    ``uploads``: (info, ingested table) pairs in upload order. Production order
    is the ``order_column`` of the files (numbers, or dates and times in ISO 8601
    form) when every upload has it, else the upload order; within an upload, rows
    keep their order (a stable sort). ``label_column``: the reference data's
    label column (:func:`with_label_column`). Columns: :data:`FRAME_COLUMNS` then the
    scores ``PC1`` .. ``PCK``; ``order`` is the order column's value (as text) or
    the upload's number (1, 2, ...).
    """
    names = [f"PC{a + 1}" for a in range(model.components)]
    parts = []
    for number, (info, table) in enumerate(uploads, start=1):
        table = with_label_column(table, label_column)
        projection = project_table(model, table)
        part = pd.DataFrame({
            "upload": info.upload_id,
            "sample": list(projection.sample_labels),
            "t2": projection.t2,
            "q": projection.q,
            "t2_limit": projection.t2_limit,
            "q_limit": projection.q_limit,
        })
        part["t2_beyond"] = part["t2"] > part["t2_limit"]
        part["q_beyond"] = part["q"] > part["q_limit"]
        for a, name in enumerate(names):
            part[name] = projection.scores[:, a]
        part["_sort"] = _order_values(table, projection, order_column, number, info.file_name)
        parts.append(part)
    if not parts:
        empty = pd.DataFrame({c: pd.Series(dtype=t) for c, t in zip(FRAME_COLUMNS, _EMPTY_TYPES)})
        for name in names:
            empty[name] = pd.Series(dtype=np.float64)
        return empty
    frame = pd.concat(parts, ignore_index=True)
    frame = frame.iloc[_production_order(frame["_sort"])].reset_index(drop=True)
    frame.insert(0, "position", np.arange(len(frame), dtype=np.int64))
    frame.insert(3, "order", frame.pop("_sort").map(_order_text))
    return frame[[*FRAME_COLUMNS, *names]]


_EMPTY_TYPES = (np.int64, object, object, object, np.float64, np.float64, np.float64, np.float64, bool, bool)


def _order_values(table, projection, column: str | None, number: int, file_name: str) -> list:
    if column is None:
        return [number] * len(projection.sample_labels)
    frame = table.frame
    if column not in frame.columns:
        raise OrdinateError(f"The order column '{column}' is not in “{file_name}”. Choose a column that every "
                            "upload has, or none to keep the upload order.")
    labels = list(table.sample_labels())
    position = {label: i for i, label in enumerate(labels)}
    raw = frame[column].to_numpy(dtype=object)
    values = [raw[position[label]] for label in projection.sample_labels]
    return [_order_value(v, column, file_name) for v in values]


def _order_value(value, column: str, file_name: str):
    if value is None or (isinstance(value, float) and np.isnan(value)) or value is pd.NA:
        raise OrdinateError(f"A sample in “{file_name}” has no value in the order column '{column}'; "
                            "fill it in or monitor in upload order.")
    if isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool):
        return float(value)
    text = str(value).strip()
    try:
        return float(text)
    except ValueError:
        pass
    stamp = pd.to_datetime(text, errors="coerce", utc=True)
    if pd.isna(stamp):
        raise OrdinateError(f"The order column '{column}' of “{file_name}” holds '{text}', which is neither a number "
                            "nor a date (use numbers, or dates like 2026-03-14 or 2026-03-14T08:30).")
    return stamp


def _production_order(keys: pd.Series) -> np.ndarray:
    kinds = {type(v) for v in keys}
    if len(kinds) > 1:
        raise OrdinateError("The order column mixes numbers and dates across uploads; use one kind in every file.")
    sortable = keys.map(lambda v: v.value if isinstance(v, pd.Timestamp) else v)
    return np.argsort(sortable.to_numpy(dtype=np.float64), kind="stable")


def _order_text(value) -> str:
    if isinstance(value, pd.Timestamp):
        return value.isoformat()
    number = float(value)
    return str(int(number)) if number.is_integer() else repr(number)
