"""What each worker does with one piece of the data: pure functions of a data frame.

Each piece is prepared the way :func:`webapp.analysis.recipe.prepare` prepares
a whole table (choose variables, leave out excluded samples, transform,
handle missing values), then summarised:

* :func:`observed_sums` (only for mean filling): per column, the count and sum of
  the observed values, so that the means are known before the moments;
* :func:`summarise` : the moments (:mod:`webapp.analysis.moments`), the counts of
  dropped and filled values, and a uniform random sample of rows for parallel
  analysis (each row gets a random key; the rows with the smallest keys are
  kept, so merging pieces keeps a uniform sample without replacement of
  exactly ``sample_rows`` rows, or every row when there are fewer);
* :func:`score` : scores, T² and Q of every row, or only the counts and the
  most extreme flagged rows when the data are long.

The merge functions combine two summaries; the engine merges them pairwise.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from webapp.analysis.errors import OrdinateError
from webapp.analysis.moments import Moments, block_moments_in_place, column_extremes, merge_moments
from webapp.analysis.pca import PCAFit
from webapp.analysis.pipeline import sample_statistics
from webapp.analysis.transforms import TRANSFORM_FUNCTIONS, apply_transforms

SHOWN_LABELS = 6


@dataclass(frozen=True, eq=False)
class Plan:
    """Everything a worker needs to prepare a piece; small and picklable."""

    variables: tuple[str, ...]
    transforms: tuple[str, ...]
    id_column: str | None
    excluded: frozenset[str]
    missing: str
    row_offsets: np.ndarray | None = None  # rows before each piece, when known
    fill: np.ndarray | None = None  # column means of the observed values (mean filling)
    shift: np.ndarray | None = None
    sample_rows: int = 20_000
    seed: int = 0
    # Rows whose key is at or above this cannot be among the sample_rows smallest
    # keys (with overwhelming probability, see the engine); 1 keeps every candidate.
    sample_threshold: float = 1.0


@dataclass(frozen=True, eq=False)
class Prepared:
    values: np.ndarray  # rows kept, transformed, filled
    labels: np.ndarray | None  # object array, or None when not needed
    rows: np.ndarray  # position of each kept row within the piece
    read_rows: int
    dropped: int
    first_dropped: tuple[tuple[int, int, str | None], ...]
    filled: int
    excluded_found: frozenset[str] = frozenset()
    # Minima and maxima of ``values`` when known without another pass (no row dropped or filled).
    extremes: tuple[np.ndarray, np.ndarray] | None = None


def prepare_piece(frame: pd.DataFrame, index: int, path: str, plan: Plan, *, need_labels: bool) -> Prepared:
    n = len(frame)
    # Labels cost a Python string per row: made only where they are used.
    labels = _labels(frame, index, plan) if (need_labels or plan.excluded) else None
    values = _numbers(frame, plan.variables, path)
    keep = np.ones(n, dtype=bool)
    found = frozenset()
    if plan.excluded and labels is not None:
        keep &= ~np.isin(labels, list(plan.excluded))
        found = frozenset(str(label) for label in labels[~keep])
    rows = np.flatnonzero(keep)
    if not keep.all():
        values, labels = values[keep], labels[keep]
    _transform(values, plan, path, rows)
    extremes = column_extremes(values)
    # A NaN makes its column's minimum NaN: the extremes tell whether anything is missing.
    missing = np.isnan(values) if np.isnan(extremes[0]).any() else None
    dropped, first, filled = 0, (), 0
    if missing is not None and missing.any():
        if plan.missing == "drop":
            bad = missing.any(axis=1)
            dropped = int(bad.sum())
            shown = rows[bad][:SHOWN_LABELS]
            named = (labels[bad][:SHOWN_LABELS] if labels is not None
                     else _labels(frame, index, plan, shown) if plan.id_column else [None] * shown.size)
            first = tuple((index, int(r), None if label is None else str(label)) for r, label in zip(shown, named))
            values, rows = values[~bad], rows[~bad]
            labels = None if labels is None else labels[~bad]
        elif plan.fill is not None:
            filled = int(missing.sum())
            np.copyto(values, np.broadcast_to(plan.fill, values.shape), where=missing)  # in place: stays column-ordered
    unchanged = dropped == 0 and filled == 0
    return Prepared(values, labels, rows, n, dropped, first, filled, found, extremes if unchanged else None)


def shift_from_head(frame: pd.DataFrame, plan: Plan) -> np.ndarray:
    """A common shift near the column means (of the first rows), so the moments merge without cancellation."""
    values = _numbers(frame, plan.variables, "")
    with np.errstate(invalid="ignore", divide="ignore"):
        for j, transform in enumerate(plan.transforms):
            if transform != "none":
                values[:, j] = TRANSFORM_FUNCTIONS[transform](values[:, j])
    values[~np.isfinite(values)] = np.nan
    with np.errstate(invalid="ignore"):
        shift = np.nanmean(values, axis=0) if len(values) else np.zeros(values.shape[1])
    return np.where(np.isfinite(shift), shift, 0.0)


# --- mean filling: the first pass ----------------------------------------------


def observed_sums(frame: pd.DataFrame, index: int, path: str, plan: Plan) -> tuple[np.ndarray, np.ndarray]:
    """Count and sum of the observed (transformed) values of each column."""
    prepared = prepare_piece(frame, index, path, replace(plan, missing="keep"), need_labels=False)
    observed = ~np.isnan(prepared.values)
    return observed.sum(axis=0), np.where(observed, prepared.values, 0.0).sum(axis=0)


def add_sums(a, b):
    return a[0] + b[0], a[1] + b[1]


# --- the moments pass ----------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Summary:
    moments: Moments
    read_rows: dict[int, int]  # piece -> rows read (before exclusions)
    dropped: int
    first_dropped: tuple[tuple[int, int, str | None], ...]
    filled: int
    sample_keys: np.ndarray
    sample_where: np.ndarray  # (m, 2): piece, row within the piece
    sample_values: np.ndarray
    excluded_found: frozenset[str] = field(default=frozenset())
    sample_labels: np.ndarray | None = None  # label column values of the sampled rows (None: numbered)


def summarise(frame: pd.DataFrame, index: int, path: str, plan: Plan) -> Summary:
    prepared = prepare_piece(frame, index, path, plan, need_labels=False)
    keys = np.random.default_rng([plan.seed, index]).random(prepared.values.shape[0])
    candidates = np.flatnonzero(keys < plan.sample_threshold)
    chosen = np.sort(candidates[np.argsort(keys[candidates], kind="stable")[: plan.sample_rows]])
    where = np.column_stack([np.full(chosen.size, index), prepared.rows[chosen]]).astype(np.int64)
    labels = (_labels(frame, index, plan, prepared.rows[chosen]) if plan.id_column
              else np.full(chosen.size, None, dtype=object))
    sample = prepared.values[chosen]  # a copy, taken before the moments overwrite the piece
    return Summary(
        moments=block_moments_in_place(prepared.values, plan.shift, prepared.extremes),
        read_rows={index: prepared.read_rows},
        dropped=prepared.dropped,
        first_dropped=prepared.first_dropped,
        filled=prepared.filled,
        sample_keys=keys[chosen],
        sample_where=where,
        sample_values=sample,
        excluded_found=prepared.excluded_found,
        sample_labels=labels,
    )


def merge_summaries(a: Summary, b: Summary, sample_rows: int) -> Summary:
    keys = np.concatenate([a.sample_keys, b.sample_keys])
    chosen = np.argsort(keys, kind="stable")[:sample_rows]
    return Summary(
        moments=merge_moments(a.moments, b.moments),
        read_rows={**a.read_rows, **b.read_rows},
        dropped=a.dropped + b.dropped,
        first_dropped=tuple(sorted(a.first_dropped + b.first_dropped))[:SHOWN_LABELS],
        filled=a.filled + b.filled,
        sample_keys=keys[chosen],
        sample_where=np.concatenate([a.sample_where, b.sample_where])[chosen],
        sample_values=np.concatenate([a.sample_values, b.sample_values])[chosen],
        excluded_found=a.excluded_found | b.excluded_found,
        sample_labels=np.concatenate([a.sample_labels, b.sample_labels])[chosen],
    )


# --- the scores pass -----------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Model:
    """The fitted model as the workers need it."""

    kept: np.ndarray  # bool mask of the variables kept (zero-variance ones left out)
    centre: np.ndarray
    scale: np.ndarray
    pca: PCAFit
    components: int
    t2_limit: float
    q_limit: float
    keep_rows: bool  # return every row's scores, T² and Q (short data)
    top: int = 1000


@dataclass(frozen=True, eq=False)
class Scored:
    labels: np.ndarray
    scores: np.ndarray | None
    t2: np.ndarray
    q: np.ndarray
    t2_over: int
    q_over: int
    order: np.ndarray  # (m, 2) piece and row, to keep the file order


def score(frame: pd.DataFrame, index: int, path: str, plan: Plan, model: Model) -> Scored:
    prepared = prepare_piece(frame, index, path, plan, need_labels=model.keep_rows)
    X = prepared.values if model.kept.all() else prepared.values[:, model.kept]  # private: changed in place
    X -= model.centre
    X /= model.scale
    scores = X @ model.pca.loadings
    t2, q = sample_statistics(model.pca, X, scores, model.components)
    t2_over, q_over = int(np.sum(t2 > model.t2_limit)), int(np.sum(q > model.q_limit))
    order = np.column_stack([np.full(t2.size, index), prepared.rows]).astype(np.int64)
    if model.keep_rows:
        return Scored(prepared.labels, scores, t2, q, t2_over, q_over, order)
    return top_flagged(frame, index, plan, model, prepared, t2, q)


def top_flagged(frame: pd.DataFrame, index: int, plan: Plan, model: Model, prepared: Prepared,
                t2: np.ndarray, q: np.ndarray) -> Scored:
    """The piece's ``model.top`` rows furthest beyond a limit (by the larger ratio to its limit), and the counts."""
    t2_over, q_over = int(np.sum(t2 > model.t2_limit)), int(np.sum(q > model.q_limit))
    ratio = t2 / model.t2_limit
    if model.q_limit > 0:
        ratio = np.maximum(ratio, q / model.q_limit)
    top = np.flatnonzero((t2 > model.t2_limit) | (q > model.q_limit))
    top = top[np.argsort(-ratio[top], kind="stable")[: model.top]]
    labels = prepared.labels[top] if prepared.labels is not None else _labels(frame, index, plan, prepared.rows[top])
    order = np.column_stack([np.full(top.size, index), prepared.rows[top]]).astype(np.int64)
    return Scored(labels, None, t2[top], q[top], t2_over, q_over, order)


def merge_scored(a: Scored, b: Scored, model: Model) -> Scored:
    labels = np.concatenate([a.labels, b.labels])
    t2, q = np.concatenate([a.t2, b.t2]), np.concatenate([a.q, b.q])
    order = np.concatenate([a.order, b.order])
    scores = None if a.scores is None else np.concatenate([a.scores, b.scores])
    if not model.keep_rows:
        ratio = t2 / model.t2_limit
        if model.q_limit > 0:
            ratio = np.maximum(ratio, q / model.q_limit)
        top = np.argsort(-ratio, kind="stable")[: model.top]
        labels, t2, q, order = labels[top], t2[top], q[top], order[top]
    return Scored(labels, scores, t2, q, a.t2_over + b.t2_over, a.q_over + b.q_over, order)


# --- steps ---------------------------------------------------------------------


def _labels(frame: pd.DataFrame, index: int, plan: Plan, rows: np.ndarray | None = None) -> np.ndarray:
    """Labels of the piece's rows (or of the rows at ``rows``): the ID column's values, else ``row N``.

    N counts the rows over the pieces in order (1 = the first row of the first
    part) when the rows before this piece are known, else within the part.
    """
    positions = np.arange(len(frame)) if rows is None else np.asarray(rows, dtype=np.int64)
    offset = None if plan.row_offsets is None else int(plan.row_offsets[index])

    def numbered(where):
        if offset is None:
            return [f"row {int(i) + 1} of part {index + 1}" for i in where]
        return [f"row {int(i) + 1 + offset}" for i in where]

    if plan.id_column is None:
        return np.array(numbered(positions), dtype=object)
    column = frame[plan.id_column].iloc[positions]
    if pd.api.types.is_numeric_dtype(column):
        values = column.to_numpy(dtype=float, na_value=np.nan)
        labels = np.array([str(int(v)) if float(v).is_integer() else str(v) for v in values], dtype=object)
    else:
        labels = column.astype(object).to_numpy().copy()
    blank = pd.isna(column).to_numpy()
    if blank.any():
        labels[blank] = numbered(positions[blank])
    return labels.astype(object)


def _numbers(frame: pd.DataFrame, variables, path: str) -> np.ndarray:
    """The chosen columns as one float64 matrix, a private copy (transforms write into it).

    A Parquet piece arrives as one consolidated pandas block, so this is one
    copy in column order (Fortran), whose column reductions are the fast ones.
    """
    take = getattr(frame, "take_numbers", None)  # a piece read by sources.read_piece
    if take is not None:
        values = take(variables)
        if values is not None:
            return values
    else:
        try:
            return np.array(frame[list(variables)].to_numpy(dtype=np.float64, na_value=np.nan), order="F", copy=True)
        except (TypeError, ValueError):
            pass
    for variable in variables:  # find the column that holds text, to name it
        try:
            frame[variable].to_numpy(dtype=np.float64, na_value=np.nan)
        except (TypeError, ValueError):
            raise OrdinateError(
                f"The column '{variable}' holds text in the part '{path}' but numbers in the others."
            ) from None
    raise OrdinateError(f"The part '{path}' holds values that are not numbers in the chosen columns.")


def _transform(values: np.ndarray, plan: Plan, path: str, rows: np.ndarray) -> None:
    def where(row, value):
        return f" (in the part '{path}', first at row {int(rows[row]) + 1} of that part: {value:g})"

    apply_transforms(values, plan.variables, plan.transforms, where=where)
