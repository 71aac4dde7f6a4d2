"""The panels about variables: the correlation circle and the contributions of a picked sample.

Part of :mod:`webapp.ui.view_model`, which puts the panels together; no Dash here.
"""

from __future__ import annotations

import numpy as np
import plotly.graph_objects as go

from webapp.analysis.diagnostics import q_residual_row, t2_contributions
from webapp.figures import (
    axis_title,
    contributions_figure,
    correlation_circle_figure,
    loadings_bar_figure,
    loadings_line_figure,
)
from webapp.state import ViewState
from webapp.figures.spectra import contributions_line_figure
from webapp.ui.scores_panel import BatchScores
from webapp.ui.spectra_panels import axis_variables, mean_spectrum


def contributions_panel(state: ViewState, fitted, diagnostics, batch: BatchScores | None = None, table=None):
    """Why the picked sample stands out: a sample of the model, or else of the new batch.

    Along the variable axis (lines) when ``table`` has one, else one bar per variable.
    """
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
    t2_parts, residuals = t2_contributions(x_row, loadings, fitted.pca.eigenvalues[:k]), q_residual_row(x_row, loadings)
    on_axis = axis_variables(table, fitted) if table is not None else None
    if on_axis is None:
        figure = contributions_figure(variables=fitted.prepared.variables, t2_contributions=t2_parts,
                                      q_residuals=residuals, label=state.picked, presentation=state.present)
    else:
        figure = contributions_line_figure(
            positions=on_axis.positions, t2_contributions=t2_parts[on_axis.columns],
            q_residuals=residuals[on_axis.columns], label=state.picked, axis_label=on_axis.axis.label,
            breaks_after=on_axis.breaks_after, reversed_axis=not on_axis.axis.increasing,
            left_out=len(on_axis.left_out), presentation=state.present)
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


def loadings_panel(table, fitted, component: int, presentation: bool, overlay: tuple[int, ...] = ()) -> go.Figure:
    """Loadings of one component: a line along the variable axis on spectra (``overlay``: more
    components drawn with it; the mean spectrum and the kept ranges behind), bars otherwise."""
    pca, variables = fitted.pca, fitted.prepared.variables
    loadings = pca.loadings[:, component - 1]
    ratio = float(pca.explained_variance_ratio[component - 1])
    on_axis = axis_variables(table, fitted)
    if on_axis is None:
        return loadings_bar_figure(variables=variables, loadings=loadings, component=component,
                                   explained_ratio=ratio, presentation=presentation)
    columns = on_axis.columns
    others = [(c, float(pca.explained_variance_ratio[c - 1]), pca.loadings[columns, c - 1])
              for c in overlay if c != component and c <= pca.n_components]
    return loadings_line_figure(
        positions=on_axis.positions, loadings=loadings[columns], breaks_after=on_axis.breaks_after,
        component=component, explained_ratio=ratio, axis_label=on_axis.axis.label,
        reversed_axis=not on_axis.axis.increasing, left_out=list(on_axis.left_out), presentation=presentation,
        overlays=others, mean_spectrum=mean_spectrum(table, fitted, on_axis.axis),
        shaded_ranges=fitted.prepared.preprocessor.recipe.ranges,
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


