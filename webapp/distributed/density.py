"""The scoring pass for the dashboard: 2-D histograms of every row, computed by the workers.

A plot of 10^7 points is neither drawable nor readable. Each worker scores its
piece (:func:`webapp.distributed.blocks.prepare_piece`, then the model's
centre, scale and loadings) and counts its rows in fixed cells:

* the scores of every pair among the first ``DENSITY_COMPONENTS`` components;
* T² against Q at the model's K;

and keeps the rows furthest beyond a limit (by the larger of T²/T²-limit and
Q/Q-limit, the worst ``model.top``). Counts add up exactly when the pieces are
merged, so the image is the histogram of all rows, whatever the partitioning.
The cell edges come from the random sample of the fit (its range, widened a
little); rows outside that range are counted as outside, never dropped silently.
Counting follows :func:`numpy.histogram2d` (half-open cells, the last one closed).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from webapp.analysis.pipeline import sample_statistics
from webapp.distributed import blocks

DENSITY_COMPONENTS = 4  # histograms for every pair among PC1..PC4
BINS = 160
MARGIN = 0.05  # the sample's range widened by this share on each side


@dataclass(frozen=True, eq=False)
class Grid:
    """Cell edges: one array per component (first ``len(score_edges)``), and for T² and Q."""

    score_edges: tuple[np.ndarray, ...]
    t2_edges: np.ndarray
    q_edges: np.ndarray

    @property
    def pairs(self) -> tuple[tuple[int, int], ...]:
        m = len(self.score_edges)
        return tuple((a, b) for a in range(m) for b in range(a + 1, m))


@dataclass(frozen=True, eq=False)
class Density:
    """Counts per cell (x along the first axis) and rows outside the cells, plus the worst flagged rows."""

    scores: dict  # (a, b) -> int64 (BINS, BINS): component a along x, b along y (0-based)
    scores_outside: dict  # (a, b) -> rows outside the cells
    t2_q: np.ndarray  # int64 (BINS, BINS): T² along x, Q along y
    t2_q_outside: int
    rows: int
    flagged: blocks.Scored  # the worst flagged rows (labels, T², Q, where) and the counts above each limit


def grid_from_sample(sample_scores: np.ndarray, sample_t2: np.ndarray, sample_q: np.ndarray, t2_limit: float,
                     q_limit: float, *, bins: int = BINS, components: int = DENSITY_COMPONENTS) -> Grid:
    """Edges spanning the sample (widened by ``MARGIN``); T² and Q from 0 to past the larger of sample and limit."""
    m = min(components, sample_scores.shape[1])

    def edges(lo: float, hi: float) -> np.ndarray:
        span = hi - lo if hi > lo else max(abs(hi), 1.0)
        return np.linspace(lo - MARGIN * span, hi + MARGIN * span, bins + 1)

    score_edges = tuple(edges(float(sample_scores[:, a].min()), float(sample_scores[:, a].max())) for a in range(m))
    t2_top = max(float(np.max(sample_t2, initial=0.0)), t2_limit) * (1 + 2 * MARGIN)
    q_top = max(float(np.max(sample_q, initial=0.0)), q_limit) * (1 + 2 * MARGIN)
    return Grid(score_edges, np.linspace(0.0, t2_top, bins + 1), np.linspace(0.0, q_top or 1.0, bins + 1))


def density_piece(frame: pd.DataFrame, index: int, path: str, plan: blocks.Plan, model: blocks.Model,
                  grid: Grid) -> Density:
    prepared = blocks.prepare_piece(frame, index, path, plan, need_labels=False)
    X = prepared.values if model.kept.all() else prepared.values[:, model.kept]  # private: changed in place
    X -= model.centre
    X /= model.scale
    scores, t2, q = _statistics(model, X, len(grid.score_edges))
    cells = [_cells(scores[:, a], edges) for a, edges in enumerate(grid.score_edges)]
    hist, outside = {}, {}
    for a, b in grid.pairs:
        hist[(a, b)], outside[(a, b)] = _count(cells[a], cells[b], len(grid.score_edges[a]) - 1)
    t2_q, t2_q_outside = _count(_cells(t2, grid.t2_edges), _cells(q, grid.q_edges), len(grid.t2_edges) - 1)
    flagged = blocks.top_flagged(frame, index, plan, model, prepared, t2, q)
    return Density(hist, outside, t2_q, t2_q_outside, int(t2.size), flagged)


def merge_density(a: Density, b: Density, model: blocks.Model) -> Density:
    return Density(
        {pair: a.scores[pair] + b.scores[pair] for pair in a.scores},
        {pair: a.scores_outside[pair] + b.scores_outside[pair] for pair in a.scores_outside},
        a.t2_q + b.t2_q,
        a.t2_q_outside + b.t2_q_outside,
        a.rows + b.rows,
        blocks.merge_scored(a.flagged, b.flagged, model),
    )


def _statistics(model: blocks.Model, X: np.ndarray, drawn: int):
    """Scores on the first max(K, drawn) components, T² and Q at K.

    Only the components needed are computed (the in-memory engine's Q from the
    discarded scores needs all of them, which costs a full p x p product): here
    Q = ||x||² - ||t_K||², and the rows where that difference is below
    ``Q_GUARD`` of ||x||² (where it could lose more than 6 digits) get the exact
    residual (:func:`webapp.analysis.q_residual.q_residuals`).
    """
    from webapp.analysis.hotelling import hotelling_t2
    from webapp.analysis.q_residual import q_residuals

    pca, k = model.pca, model.components
    m = min(pca.n_components, max(k, drawn))
    scores = X @ pca.loadings[:, :m]
    t2 = hotelling_t2(scores[:, :k], pca.eigenvalues[:k])
    norms = np.einsum("ij,ij->i", X, X)
    q = norms - np.einsum("ij,ij->i", scores[:, :k], scores[:, :k])
    close = q < Q_GUARD * norms
    if close.any():
        q[close] = q_residuals(X[close], scores[close, :k], pca.loadings[:, :k])
    return scores, t2, q


Q_GUARD = 1e-6


def _cells(values: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """The cell of each value as numpy.histogram2d counts it (searchsorted on the edges); -1 outside.

    The edges are equally spaced, so the cell comes from one multiplication and
    is then corrected against the edges themselves, which makes it exact.
    """
    bins = len(edges) - 1
    finite = np.isfinite(values)
    v = np.where(finite, values, edges[0])
    cell = ((v - edges[0]) * (bins / (edges[-1] - edges[0]))).astype(np.intp)
    np.clip(cell, 0, bins - 1, out=cell)
    cell -= (v < edges[cell]).astype(np.intp)
    np.clip(cell, 0, bins - 1, out=cell)
    cell += ((v >= edges[cell + 1]) & (cell < bins - 1)).astype(np.intp)
    cell[(values < edges[0]) | (values > edges[-1]) | ~finite] = -1  # the last cell is closed on the right
    return cell


def _count(x_cells: np.ndarray, y_cells: np.ndarray, bins: int) -> tuple[np.ndarray, int]:
    inside = (x_cells >= 0) & (y_cells >= 0)
    flat = np.bincount(x_cells[inside] * bins + y_cells[inside], minlength=bins * bins)
    return flat.reshape(bins, bins).astype(np.int64), int(inside.size - np.count_nonzero(inside))


# --- the scoring of a fit, for the dashboard ------------------------------------------

SHOWN_POINTS = 5000  # sample points drawn on the scores density
TOP_FLAGGED = 1000  # rows kept furthest beyond a limit (the flagged list pages through them)


@dataclass(frozen=True, eq=False)
class DensityResult:
    components: int
    confidence: float
    limits: tuple[float, float, str]  # T² limit, Q limit, Q method
    grid: Grid
    density: Density
    points_scores: np.ndarray  # (SHOWN_POINTS, PCs) of a uniform random sample of rows
    points_labels: np.ndarray
    seconds: float


def score_density(source, fit, client, components, confidence: float, *, progress=None) -> DensityResult:
    """The scoring pass of a :class:`~webapp.distributed.engine.LongFit` at K (or "auto") and a confidence."""
    import time
    from types import SimpleNamespace

    from webapp.analysis.errors import OrdinateError
    from webapp.analysis.pipeline import control_limits, resolve_components
    from webapp.distributed.engine import run_pass

    if not 0 < confidence < 1:
        raise OrdinateError(f"The confidence level must be between 0 and 1 (for example 0.95); got {confidence}.")
    started = time.perf_counter()
    pca, pre = fit.pca, fit.preprocessor
    k = resolve_components(SimpleNamespace(pca=pca, advice=fit.advice), components)
    limits = control_limits(pca, k, confidence)
    model = blocks.Model(fit.kept, pre.centre, pre.scale, pca, k, limits[0], limits[1], keep_rows=False,
                         top=TOP_FLAGGED)
    sample_scores = fit.sample @ pca.loadings
    sample_t2, sample_q = sample_statistics(pca, fit.sample, sample_scores, k)
    grid = grid_from_sample(sample_scores, sample_t2, sample_q, limits[0], limits[1])
    density = run_pass(client, source, density_piece, merge_density, (fit.plan, model, grid), (model,),
                       progress=None if progress is None else (lambda done, total: progress("scores", done, total)))
    shown = np.sort(np.argsort(fit.sample_keys, kind="stable")[:SHOWN_POINTS])
    return DensityResult(k, float(confidence), limits, grid, density,
                         sample_scores[shown][:, :len(grid.score_edges)], fit.sample_labels[shown],
                         time.perf_counter() - started)
