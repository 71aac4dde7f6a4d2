"""The panels about variables: the correlation circle and the contributions of a picked sample.

Part of :mod:`webapp.ui.view_model`, which puts the panels together; no Dash here.
"""

from __future__ import annotations

import numpy as np
import plotly.graph_objects as go

from webapp.analysis.diagnostics import q_residual_row, t2_contributions
from webapp.analysis.variable_axis import MIN_AXIS_VARIABLES, table_axis
from webapp.figures import (
    axis_title,
    contributions_figure,
    correlation_circle_figure,
    loadings_bar_figure,
    loadings_line_figure,
)
from webapp.state import ViewState
from webapp.ui.scores_panel import BatchScores


def contributions_panel(state: ViewState, fitted, diagnostics, batch: BatchScores | None = None):
    """Why the picked sample stands out: a sample of the model, or else of the new batch."""
    if state.picked is None:
        return None
    labels = fitted.prepared.sample_labels
    k = diagnostics.components
    if state.picked in labels:
        row = labels.index(state.picked)
        x_row, t2, q = fitted.prepared.matrix[row], diagnostics.t2[row], diagnostics.q[row]
        t2_limit, q_limit, whose = diagnostics.t2_limit, diagnostics.q_limit, "sample"
    elif batch is not None and state.picked in batch.labels:
        row, p = batch.labels.index(state.picked), batch.projection
        x_row, t2, q = batch.matrix[row], p.t2[row], p.q[row]
        t2_limit, q_limit, whose = p.t2_limit, p.q_limit, "new-batch sample"
    else:
        return None
    from dash import (  # components only, no callbacks: keeps this module importable in tests
        dcc,
        html,
    )

    from webapp.figures import GRAPH_CONFIG

    loadings = fitted.pca.loadings[:, :k]
    figure = contributions_figure(
        variables=fitted.prepared.variables,
        t2_contributions=t2_contributions(x_row, loadings, fitted.pca.eigenvalues[:k]),
        q_residuals=q_residual_row(x_row, loadings),
        label=state.picked, presentation=state.present,
    )
    leave_out = [] if whose != "sample" else [html.Button(
        "Leave this sample out", id={"type": "exclude-picked", "index": 0}, n_clicks=0, className="small-button")]
    return html.Div([
        html.Div(className="contributions-head", children=[
            html.H3(f"What drives {whose} {state.picked}"),
            html.Span(f"T² {t2:.3g} (limit {t2_limit:.3g}) · Q {q:.3g} (limit {q_limit:.3g})"),
            *leave_out,
        ]),
        dcc.Graph(figure=figure, config=GRAPH_CONFIG, className="contributions-graph"),
    ])


def loadings_panel(table, fitted, component: int, presentation: bool) -> go.Figure:
    """Loadings of one component: a line along the variable axis on spectra, bars otherwise."""
    pca, variables = fitted.pca, fitted.prepared.variables
    loadings = pca.loadings[:, component - 1]
    ratio = float(pca.explained_variance_ratio[component - 1])
    axis = table_axis(table, fitted.prepared.preprocessor.recipe.id_column)
    index = {} if axis is None else {name: i for i, name in enumerate(axis.names)}
    on_axis = [j for j, v in enumerate(variables) if v in index]
    if len(on_axis) < MIN_AXIS_VARIABLES:
        return loadings_bar_figure(variables=variables, loadings=loadings, component=component,
                                   explained_ratio=ratio, presentation=presentation)
    on_axis.sort(key=lambda j: index[variables[j]])
    axis_index = np.array([index[variables[j]] for j in on_axis])
    return loadings_line_figure(
        positions=axis.positions[axis_index], loadings=loadings[on_axis],
        breaks_after=np.flatnonzero(np.diff(axis_index) != 1).tolist(),
        component=component, explained_ratio=ratio, axis_label=axis.label,
        reversed_axis=not axis.increasing,
        left_out=[v for v in variables if v not in index], presentation=presentation,
    )


def circle_panel(fitted, pc_x: int, pc_y: int, presentation: bool, max_arrows: int) -> go.Figure:
    correlations = variable_correlations(fitted)
    ratios = fitted.pca.explained_variance_ratio
    return correlation_circle_figure(
        variables=fitted.prepared.variables,
        correlations_x=correlations[:, pc_x - 1], correlations_y=correlations[:, pc_y - 1],
        x_title=axis_title(pc_x, float(ratios[pc_x - 1])), y_title=axis_title(pc_y, float(ratios[pc_y - 1])),
        presentation=presentation, max_arrows=max_arrows,
    )


def variable_correlations(fitted) -> np.ndarray:
    """Correlation of each preprocessed variable with each component's scores.

    r_ja = p_ja · sqrt(λ_a) / s_j, with s_j the variable's standard deviation
    after preprocessing (1 under autoscaling).
    """
    pca = fitted.pca
    spread = fitted.prepared.matrix.std(axis=0, ddof=1)
    spread = np.where(spread > 0, spread, 1.0)
    k = pca.n_components
    return pca.loadings * np.sqrt(pca.eigenvalues[:k]) / spread[:, None]


