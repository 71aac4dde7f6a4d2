"""The scores plot of a view: groups, sigma ellipses, picked samples and a new batch scored against the model.

Part of :mod:`webapp.ui.view_model`, which puts the panels together; no Dash here.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from webapp.analysis.ellipses import hotelling_ellipse, try_sigma_ellipse
from webapp.analysis.errors import OrdinateError
from webapp.analysis.model_io import Projection, model_from_analysis, project_table
from webapp.analysis.pipeline import Analysis
from webapp.figures import (
    BatchPoints,
    axis_title,
    flagged_samples,
    loading_arrows,
    scores_figure,
)
from webapp.state import MAX_SIGMA, MAX_SIGMA_LEVELS, NO_COLOUR, ViewState

HOVER_VARIABLES = 6
@dataclass(frozen=True, eq=False)
class BatchScores:
    """A new batch scored against the view's model (at the view's K and confidence)."""

    name: str
    projection: Projection

    @property
    def matrix(self) -> np.ndarray:
        """The batch after the model's own preprocessing (scores on any component are ``matrix @ loadings``)."""
        return self.projection.matrix

    @property
    def labels(self) -> tuple[str, ...]:
        return self.projection.sample_labels

    def rows(self) -> list[dict]:
        """Batch samples beyond a limit for new samples, furthest first (as ``flagged_samples``)."""
        p = self.projection
        return flagged_samples(p.sample_labels, p.t2, p.q, p.t2_limit, p.q_limit)


def groups_for(state: ViewState, table, fitted):
    column = state.colour_by
    if column is None:
        column = table.group_columns[0] if table.group_columns else None
    if not column or column == NO_COLOUR or column not in table.frame.columns:
        return None, None
    return group_labels(table.frame[column], fitted.prepared.row_positions), column


def group_labels(column, rows: np.ndarray) -> np.ndarray:
    """Group names as text for the given rows; missing values become None."""
    values = column.iloc[rows]
    missing = values.isna().to_numpy()
    if pd.api.types.is_float_dtype(values) and np.all(np.mod(values.to_numpy()[~missing], 1) == 0):
        values = values.fillna(0).astype(np.int64)  # 3.0 -> "3"
    text = values.astype(str).to_numpy(dtype=object, copy=True)
    text[missing] = None
    return text


def scores_panel(state: ViewState, fitted, table, groups, pc_x: int, pc_y: int, batch=None) -> go.Figure:
    pca, prepared = fitted.pca, fitted.prepared
    x, y = pca.scores[:, pc_x - 1], pca.scores[:, pc_y - 1]
    ratios = pca.explained_variance_ratio
    ellipses, owners = sigma_ellipses(state, x, y, groups)
    if state.hotelling:
        ellipse = hotelling_ellipse(float(pca.eigenvalues[pc_x - 1]), float(pca.eigenvalues[pc_y - 1]),
                                    pca.n_samples, state.confidence, scores=np.column_stack([x, y]))
        ellipses.append(ellipse)
        owners.append(None)
    arrows = None
    if state.arrows:
        arrows = loading_arrows(
            pca.loadings[:, [pc_x - 1, pc_y - 1]], prepared.variables,
            pca.eigenvalues[[pc_x - 1, pc_y - 1]], state.biplot_scaling,
            float(np.max(np.abs(np.concatenate([x, y])))) if x.size else 1.0,
            max_arrows=state.arrows_shown,  # the strongest N; the caption says so
            autoscaled=state.centring == "mean" and state.scaling == "unit",
        )
    hover = {v: table.frame[v].to_numpy()[prepared.row_positions] for v in prepared.variables[:HOVER_VARIABLES]}
    return scores_figure(
        x=x, y=y, labels=np.asarray(prepared.sample_labels, dtype=object), groups=groups,
        x_title=axis_title(pc_x, float(ratios[pc_x - 1])), y_title=axis_title(pc_y, float(ratios[pc_y - 1])),
        hover_values=hover, ellipses=ellipses, ellipse_groups=owners, arrows=arrows,
        show_labels=state.labels, highlighted=state.picked, presentation=state.present,
        highlight_note=None if state.present else "see Outlier diagnostics",
        batch=None if batch is None else BatchPoints(
            x=batch.matrix @ pca.loadings[:, pc_x - 1], y=batch.matrix @ pca.loadings[:, pc_y - 1],
            labels=np.asarray(batch.labels, dtype=object), name=batch_legend(batch)),
    )


def score_batch(services, record, fitted, diagnostics) -> tuple[BatchScores | None, tuple[str, ...]]:
    """A new batch scored against the model at the view's K: the scores, and notices for the page."""
    name = record.display_name
    try:
        table = services.compute.table(record)
        model = model_from_analysis(Analysis(fitted, diagnostics))
        projection = project_table(model, table, diagnostics.confidence)
    except OrdinateError as error:
        return None, (f"The new samples of “{name}” cannot be scored against this model: {error}",)
    notices = tuple(f"New samples “{name}”: {warning}" for warning in (*table.warnings, *projection.warnings))
    return BatchScores(name, projection), notices


def batch_legend(batch: BatchScores) -> str:
    # Short, so the legend beside T² against Q leaves the plot its width; the panel names the file.
    return f"New samples ({len(batch.labels)})"


def sigma_ellipses(state: ViewState, x, y, groups) -> tuple[list, list]:
    points = np.column_stack([x, y])
    sets = [(None, points)]
    if state.ellipse_by == "group" and groups is not None:
        names = [g for g in dict.fromkeys(groups.tolist()) if g is not None]
        sets = [(name, points[groups == name]) for name in names]
    ellipses, owners = [], []
    for owner, subset in sets:
        for level in state.sigma_levels:
            ellipse = try_sigma_ellipse(subset, level)
            if ellipse is not None:
                ellipses.append(ellipse)
                owners.append(owner)
    return ellipses, owners


def parse_sigma_levels(text, fallback: tuple[float, ...]) -> tuple[float, ...]:
    """Sigma levels typed by a user ("1, 2, 3"); the fallback when unreadable."""
    if text is None:
        return fallback
    try:
        levels = sorted({float(part) for part in str(text).replace(";", ",").split(",") if part.strip()})
    except ValueError:
        return fallback
    if any(not 0 < level <= MAX_SIGMA for level in levels) or len(levels) > MAX_SIGMA_LEVELS:
        return fallback
    return tuple(levels)


def labels_from_event(event) -> list[str]:
    """Sample labels of clicked or selected points (label is customdata[0])."""
    labels = []
    for point in (event or {}).get("points", ()):
        data = point.get("customdata")
        if isinstance(data, list) and data:
            data = data[0]
        if isinstance(data, str):
            labels.append(data)
    return list(dict.fromkeys(labels))


# --- saved views and presentation ------------------------------------------------------------

