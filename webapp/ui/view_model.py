"""From a view state to everything the page shows, with no Dash involved.

``build_view(services, state)`` resolves the dataset, asks the cached compute
layer for the fit (never fitting twice for the same data and recipe), derives
the cheap diagnostics, and calls the pure figure builders. Callbacks only
unpack the result, so this module is where the app's behaviour is tested.
"""

from __future__ import annotations

import re
import threading
import time
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from webapp import __version__
from webapp.analysis import ENGINE_VERSION
from webapp.analysis.diagnostics import q_residual_row, t2_contributions
from webapp.analysis.ellipses import hotelling_ellipse, try_sigma_ellipse
from webapp.analysis.errors import OrdinateError
from webapp.analysis.model_io import Projection, model_from_analysis, project_table
from webapp.analysis.pipeline import Analysis, diagnose
from webapp.analysis.recipe import Recipe
from webapp.compute import fit_key
from webapp.figures import (
    BatchPoints,
    axis_title,
    contributions_figure,
    correlation_circle_figure,
    diagnostics_figure,
    flagged_samples,
    loading_arrows,
    loadings_bar_figure,
    scores_figure,
    variance_figure,
    variance_table_rows,
    variance_table_tsv,
)
from webapp.state import MAX_SIGMA, MAX_SIGMA_LEVELS, NO_COLOUR, ViewState, parse_query, to_query

HOVER_VARIABLES = 6
# More arrows than this are unreadable on a biplot and slow to draw; the caption says so.
MAX_BIPLOT_ARROWS = 20
MAX_CIRCLE_ARROWS = 30
MAX_TABLE_COMPONENTS = 20
UNKNOWN_BATCH = "The new batch named in this link is not known here (it may have been deleted); it is not shown."


class DatasetNotFound(Exception):
    """The URL names no dataset this server knows."""


@dataclass(frozen=True)
class Controls:
    id_options: list
    colour_options: list
    variable_options: list
    variables_in: list
    pc_options: list
    component_options: list


@dataclass(frozen=True, eq=False)
class View:
    state: ViewState
    title: str
    summary: dict
    notices: tuple[str, ...]
    errors: tuple[str, ...]
    recipe_words: tuple[str, ...]
    controls: Controls
    pc_x: int = 1
    pc_y: int = 2
    loading_pc: int = 1
    variance_rows: list = field(default_factory=list)
    variance_tsv: str = ""
    advice_text: str = ""
    provenance: dict = field(default_factory=dict)
    complete: bool = True  # False: drawn before parallel analysis finished; ask again
    dropped_for_gaps: tuple[str, ...] = ()  # samples the missing-value rule left out (not by hand)
    figure_keys: dict = field(default_factory=dict)  # panel name -> what it depends on (see _panel_keys)
    # Panels are built on first use, so a callback that sends some of them builds only those.
    panels: "LazyPanels" = field(default_factory=lambda: LazyPanels({}))

    scores_figure = property(lambda self: self.panels.get("scores", go.Figure))
    variance_figure = property(lambda self: self.panels.get("variance", go.Figure))
    diagnostics_figure = property(lambda self: self.panels.get("diagnostics", go.Figure))
    flagged = property(lambda self: self.panels.get("flagged", list))
    contributions = property(lambda self: self.panels.get("contributions", lambda: None))
    batch = property(lambda self: self.panels.get("batch", lambda: None))
    # Why the batch named in the link could not be scored (None when it was, or when there is none).
    batch_problem = property(lambda self: self.panels.get("batch_problem", lambda: None))
    loadings_figure = property(lambda self: self.panels.get("loadings", go.Figure))
    circle_figure = property(lambda self: self.panels.get("circle", go.Figure))


class LazyPanels:
    """Named values built once, on first use, from zero-argument builders."""

    def __init__(self, builders: dict):
        self._builders = dict(builders)
        self._values: dict = {}
        self._lock = threading.Lock()

    def get(self, name: str, default_factory):
        if name not in self._builders:
            return default_factory()
        with self._lock:
            if name not in self._values:
                self._values[name] = self._builders[name]()
            return self._values[name]


@dataclass(frozen=True, eq=False)
class Resolved:
    """The dataset, its parsed table and the fitted recipe a state points at."""

    record: object
    table: object
    recipe: Recipe
    fitted: object
    notices: tuple[str, ...]
    complete: bool = True  # False while parallel analysis is still running


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


def resolve(services, state: ViewState) -> Resolved:
    """The complete analysis a state points at (waits for parallel analysis)."""
    record = services.store.dataset(state.dataset)
    if record is None:
        raise DatasetNotFound(state.dataset)
    state, _ = _expanded(services, state)
    return _resolve_table(services, record, services.compute.table(record), state, wait=True)


def _resolve_table(services, record, table, state: ViewState, *, wait: bool) -> Resolved:
    recipe, notices = recipe_for(state, table)
    if wait:
        return Resolved(record, table, recipe, services.compute.fitted(record, recipe), notices)
    fitted, complete = services.compute.first_fit(record, recipe)
    return Resolved(record, table, recipe, fitted, notices, complete)


# More left-out samples than this are kept as a stored sample set (``exset``) instead of
# ``ex`` entries, so a link stays well below the request-line limits of servers and proxies.
INLINE_EXCLUSIONS = 40


def excluded_labels(services, state: ViewState) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """Every sample a state leaves out (its ``ex`` labels and its stored set), and notices."""
    if state.excluded_set is None:
        return state.excluded, ()
    stored = services.store.sample_set(state.dataset, state.excluded_set) if state.dataset else None
    if stored is None:
        return state.excluded, ("The list of left-out samples named in this link is not known here, "
                                "so those samples are in the model.",)
    return tuple(dict.fromkeys((*state.excluded, *stored))), ()


def with_exclusions(services, state: ViewState, labels) -> ViewState:
    """``state`` leaving out exactly ``labels``: in the link when few, else as a stored sample set."""
    labels = tuple(dict.fromkeys(labels))
    if len(labels) <= INLINE_EXCLUSIONS or state.dataset is None:
        return state.replace(excluded=labels, excluded_set=None)
    return state.replace(excluded=(), excluded_set=services.store.save_sample_set(state.dataset, labels))


def _expanded(services, state: ViewState) -> tuple[ViewState, tuple[str, ...]]:
    """The state with its stored sample set spelled out in ``excluded`` (for the recipe and the page)."""
    labels, notices = excluded_labels(services, state)
    if state.excluded_set is None:
        return state, notices
    return state.replace(excluded=labels, excluded_set=None), notices


def parallel_analysis_done(services, state: ViewState) -> bool:
    """Whether the view of ``state`` can now be drawn complete.

    When it cannot, parallel analysis is started in this process unless it is
    running here already (the worker that began it may have been restarted
    meanwhile; across processes one fit per key still holds). True as well when
    there is nothing to wait for (an unknown dataset, a file or recipe that
    cannot be used): the view itself says what is wrong.
    """
    record = services.store.dataset(state.dataset)
    if record is None:
        return True
    state, _ = _expanded(services, state)
    try:
        recipe, _ = recipe_for(state, services.compute.table(record))
    except OrdinateError:
        return True
    if services.compute.is_complete(record, recipe):
        return True
    services.compute.fit_in_background(record, recipe)
    return False


def recipe_for(state: ViewState, table) -> tuple[Recipe, tuple[str, ...]]:
    """The engine's recipe for a view state, ignoring names the data lack."""
    notices = []
    columns = set(table.frame.columns)
    id_column = state.id_column
    if id_column is not None and id_column not in columns:
        notices.append(f"The link names a label column '{id_column}' that this data lacks; using the detected one.")
        id_column = None
    label_column = id_column or table.id_column
    numeric = [c for c in table.numeric_columns if c != label_column]
    unknown = [v for v in state.variables_off if v not in numeric]
    if unknown:
        notices.append(f"Ignored unknown variable(s) in the link: {', '.join(unknown)}.")
    off = set(state.variables_off)
    variables = None if not off else tuple(v for v in numeric if v not in off)
    transforms = tuple((v, t) for v, t in state.transforms if v in numeric)
    lacking = [v for v, _ in state.transforms if v not in numeric]
    if lacking:
        notices.append(f"Ignored the transforms of variable(s) this data lacks: {', '.join(lacking)}.")
    recipe = Recipe(
        variables=variables,
        excluded_samples=state.excluded,
        transforms=transforms,
        missing=state.missing,
        centring=state.centring,
        scaling=state.scaling,
        id_column=id_column,
    )
    return recipe, tuple(notices)


def build_view(services, state: ViewState, parse_notices=(), *, wait: bool = False) -> View:
    """Everything the page shows for ``state``.

    Unless ``wait``, the view is drawn as soon as the PCA is fitted: while
    parallel analysis is still running, ``view.complete`` is False, K follows
    the broken-stick model and the advice says the recommendation may change
    (see :func:`parallel_analysis_done`).
    """
    record = services.store.dataset(state.dataset)
    if record is None:
        raise DatasetNotFound(state.dataset)
    state, exclusion_notices = _expanded(services, state)
    parse_notices = (*parse_notices, *exclusion_notices)
    try:
        table = services.compute.table(record)
    except OrdinateError as error:
        return _failed_view(state, record, None, parse_notices, error)
    summary = table_summary(record, table)
    try:
        # Drawn at once from the PCA; parallel analysis may still be running.
        resolved = _resolve_table(services, record, table, state, wait=wait)
    except OrdinateError as error:
        return _failed_view(state, record, table, parse_notices, error, summary)
    return _full_view(services, state, resolved, summary, tuple(parse_notices))


def _full_view(services, state: ViewState, resolved: Resolved, summary: dict, parse_notices) -> View:
    fitted, table = resolved.fitted, resolved.table
    pca = fitted.pca
    notices = list(parse_notices) + list(table.warnings) + list(resolved.notices) + list(fitted.warnings)
    k_max = pca.n_components
    pc_x, pc_y, loading_pc = (_clamp_pc(v, k_max, name, notices) for v, name in (
        (state.pc_x, "x axis"), (state.pc_y, "y axis"), (state.loading_pc, "loadings")))
    components = components_choice(state, fitted, notices)
    # Both view callbacks build the view: T² and Q at K are computed once per worker.
    fit = fit_key(resolved.record.content_hash, resolved.recipe)
    diagnostics = services.compute.drawing(("diagnose", fit, resolved.complete, components, state.confidence),
                                           lambda: diagnose(fitted, components, state.confidence))
    groups, colour_column = _groups(state, table, fitted)
    batch_record = services.store.dataset(state.batch) if state.batch else None
    if state.batch and batch_record is None:
        notices.append(UNKNOWN_BATCH)
    keys = _panel_keys(state, resolved, diagnostics, colour_column, pc_x, pc_y, loading_pc,
                       (batch_record.content_hash, batch_record.display_name) if batch_record else None)
    batch, batch_notices = (None, ()) if batch_record is None else services.compute.drawing(
        keys["batch"], lambda: score_batch(services, batch_record, fitted, diagnostics))
    notices.extend(batch_notices)
    rows = variance_table_rows(
        pca.eigenvalues[:MAX_TABLE_COMPONENTS], pca.explained_variance_ratio[:MAX_TABLE_COMPONENTS],
        pca.cumulative_explained[:MAX_TABLE_COMPONENTS], kaiser=fitted.advice.kaiser,
        broken_stick=fitted.advice.broken_stick, parallel=fitted.advice.parallel, components=diagnostics.components,
    )
    draw = services.compute.drawing
    return View(
        state=state,
        title=resolved.record.display_name,
        summary=summary,
        notices=tuple(notices),
        errors=(),
        recipe_words=tuple(resolved.recipe.describe()),
        controls=_controls(table, fitted, resolved.recipe),
        pc_x=pc_x,
        pc_y=pc_y,
        loading_pc=loading_pc,
        variance_rows=rows,
        variance_tsv=variance_table_tsv(rows),
        advice_text=advice_text(fitted.advice, diagnostics.components, state.components is None,
                                pending=not resolved.complete),
        panels=LazyPanels({
            "scores": lambda: draw(keys["scores"], lambda: _scores_panel(state, fitted, table, groups, pc_x, pc_y,
                                                                         batch)),
            "variance": lambda: draw(keys["variance"], lambda: variance_figure(
                eigenvalues=pca.eigenvalues, explained_ratio=pca.explained_variance_ratio,
                cumulative=pca.cumulative_explained, broken_stick=fitted.advice.broken_stick_expectation,
                parallel_threshold=fitted.advice.parallel_threshold,
                mean_eigenvalue=pca.total_variance / pca.n_variables, components=diagnostics.components,
                total_variance=pca.total_variance, presentation=state.present,
            )),
            "diagnostics": lambda: draw(keys["diagnostics"], lambda: diagnostics_figure(
                t2=diagnostics.t2, q=diagnostics.q, labels=np.asarray(fitted.prepared.sample_labels, dtype=object),
                groups=groups, t2_limit=diagnostics.t2_limit, q_limit=diagnostics.q_limit,
                confidence=diagnostics.confidence, highlighted=state.picked, presentation=state.present,
                batch=None if batch is None else BatchPoints(
                    x=batch.projection.t2, y=batch.projection.q, labels=np.asarray(batch.labels, dtype=object),
                    name=batch_legend(batch)),
                batch_t2_limit=None if batch is None else batch.projection.t2_limit,
            )),
            "batch": lambda: batch,
            "batch_problem": lambda: (None if batch is not None or not state.batch
                                      else UNKNOWN_BATCH if batch_record is None else batch_notices[0]),
            "flagged": lambda: draw(keys["flagged"], lambda: flagged_samples(
                fitted.prepared.sample_labels, diagnostics.t2, diagnostics.q, diagnostics.t2_limit,
                diagnostics.q_limit)),
            "contributions": lambda: _contributions(state, fitted, diagnostics, batch),
            "loadings": lambda: draw(keys["loadings"], lambda: loadings_bar_figure(
                variables=fitted.prepared.variables, loadings=pca.loadings[:, loading_pc - 1], component=loading_pc,
                explained_ratio=float(pca.explained_variance_ratio[loading_pc - 1]), presentation=state.present,
            )),
            "circle": lambda: draw(keys["circle"], lambda: _circle(fitted, pc_x, pc_y, state.present)),
        }),
        provenance=provenance(resolved, diagnostics, colour_column),
        complete=resolved.complete,
        dropped_for_gaps=tuple(fitted.prepared.dropped_samples),
        figure_keys=keys,
    )


def _panel_keys(state: ViewState, resolved: Resolved, diagnostics, colour_column, pc_x, pc_y, loading_pc,
                batch_id: tuple | None) -> dict:
    """What each drawn panel depends on, beginning with the fit.

    Equal keys mean equal panels: the compute layer keeps recently drawn panels
    by key, and the page skips sending a panel whose key it already shows.
    """
    fit = (fit_key(resolved.record.content_hash, resolved.recipe), resolved.complete)
    k, confidence = diagnostics.components, diagnostics.confidence
    return {
        "scores": ("scores", fit[0], pc_x, pc_y, state.sigma_levels, state.ellipse_by, state.arrows,
                   state.biplot_scaling, state.labels, state.picked, colour_column, state.present,
                   state.hotelling and confidence, batch_id),
        "variance": ("variance", fit, k, state.present),
        "diagnostics": ("diagnostics", fit[0], k, confidence, state.picked, colour_column, state.present, batch_id),
        "batch": ("batch", fit[0], k, confidence, batch_id),
        "flagged": ("flagged", fit[0], k, confidence),
        "loadings": ("loadings", fit[0], loading_pc, state.present),
        "circle": ("circle", fit[0], pc_x, pc_y, state.present),
    }


def _failed_view(state, record, table, notices, error, summary=None) -> View:
    controls = _controls(table, None, None) if table is not None else Controls([], [], [], [], [], [])
    return View(
        state=state,
        title=record.display_name,
        summary=summary or {"filename": record.filename},
        notices=tuple(notices),
        errors=(str(error),),
        recipe_words=(),
        controls=controls,
    )


# --- pieces -----------------------------------------------------------------------


def table_summary(record, table) -> dict:
    return {
        "filename": record.filename,
        "rows": table.n_rows,
        "numeric": len(table.numeric_columns),
        "text": len(table.text_columns),
        "id_column": table.id_column,
        "groups": list(table.group_columns),
        "missing": int(sum(dict(table.missing_counts).values())),
        "format": f"delimiter {_delimiter_name(table.delimiter)}, decimal '{table.decimal}', {table.encoding}",
        "warnings": list(table.warnings),
    }


def _delimiter_name(delimiter: str) -> str:
    return {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe"}.get(delimiter, repr(delimiter))


def _controls(table, fitted, recipe) -> Controls:
    id_options = [{"label": "detected" + (f" ({table.id_column})" if table.id_column else " (row numbers)"),
                   "value": "auto"}]
    id_options += [{"label": c, "value": c} for c in table.frame.columns]
    colour_options = [{"label": "detected group", "value": "auto"}, {"label": "no colouring", "value": "__none__"}]
    colour_options += [{"label": c, "value": c} for c in table.frame.columns]
    label_column = (recipe.id_column if recipe else None) or table.id_column
    numeric = [c for c in table.numeric_columns if c != label_column]
    chosen = set(recipe.variables) if recipe and recipe.variables is not None else set(numeric)
    pcs = fitted.pca.n_components if fitted else 0
    return Controls(
        id_options=id_options,
        colour_options=colour_options,
        variable_options=[{"label": c, "value": c} for c in numeric],
        variables_in=[c for c in numeric if c in chosen],
        pc_options=[{"label": f"PC{a}", "value": a} for a in range(1, pcs + 1)],
        component_options=[{"label": "recommended", "value": "auto"}]
        + [{"label": str(a), "value": a} for a in range(1, pcs + 1)],
    )


def _clamp_pc(value: int, available: int, where: str, notices: list) -> int:
    if value <= available:
        return value
    notices.append(f"This data has {available} components; the {where} shows PC{available} instead of PC{value}.")
    return available


def components_choice(state: ViewState, fitted, notices: list | None = None):
    """K for the diagnostics: "auto", or the state's K clamped to the fit (with a notice)."""
    notices = [] if notices is None else notices
    if state.components is None:
        return "auto"
    available = fitted.pca.n_components
    if state.components > available:
        notices.append(f"K = {state.components} is more than the {available} components available; using {available}.")
        return available
    return state.components


def _groups(state: ViewState, table, fitted):
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


def _scores_panel(state: ViewState, fitted, table, groups, pc_x: int, pc_y: int, batch=None) -> go.Figure:
    pca, prepared = fitted.pca, fitted.prepared
    x, y = pca.scores[:, pc_x - 1], pca.scores[:, pc_y - 1]
    ratios = pca.explained_variance_ratio
    ellipses, owners = _sigma_ellipses(state, x, y, groups)
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
            max_arrows=MAX_BIPLOT_ARROWS,
        )
    hover = {v: table.frame[v].to_numpy()[prepared.row_positions] for v in prepared.variables[:HOVER_VARIABLES]}
    return scores_figure(
        x=x, y=y, labels=np.asarray(prepared.sample_labels, dtype=object), groups=groups,
        x_title=axis_title(pc_x, float(ratios[pc_x - 1])), y_title=axis_title(pc_y, float(ratios[pc_y - 1])),
        hover_values=hover, ellipses=ellipses, ellipse_groups=owners, arrows=arrows,
        show_labels=state.labels, highlighted=state.picked, presentation=state.present,
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
        return None, (f"The new batch “{name}” cannot be scored against this model: {error}",)
    notices = tuple(f"New batch “{name}”: {warning}" for warning in (*table.warnings, *projection.warnings))
    return BatchScores(name, projection), notices


def batch_legend(batch: BatchScores) -> str:
    # Short, so the legend beside T² against Q leaves the plot its width; the panel names the file.
    return f"New batch ({len(batch.labels)})"


def _sigma_ellipses(state: ViewState, x, y, groups) -> tuple[list, list]:
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


def _contributions(state: ViewState, fitted, diagnostics, batch: BatchScores | None = None):
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
    from dash import dcc, html  # components only, no callbacks: keeps this module importable in tests

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


def _circle(fitted, pc_x: int, pc_y: int, presentation: bool) -> go.Figure:
    correlations = variable_correlations(fitted)
    ratios = fitted.pca.explained_variance_ratio
    return correlation_circle_figure(
        variables=fitted.prepared.variables,
        correlations_x=correlations[:, pc_x - 1], correlations_y=correlations[:, pc_y - 1],
        x_title=axis_title(pc_x, float(ratios[pc_x - 1])), y_title=axis_title(pc_y, float(ratios[pc_y - 1])),
        presentation=presentation, max_arrows=MAX_CIRCLE_ARROWS,
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


def advice_text(advice, components: int, automatic: bool, *, pending: bool = False) -> str:
    """The recommendation in words; ``pending`` while parallel analysis is still running."""
    parallel = ("still running" if pending else "not run") if advice.parallel is None else str(advice.parallel)
    chosen = "the recommendation" if automatic else "your choice"
    text = (
        f"Recommended K = {advice.recommended} by {advice.rule}. Other rules: Kaiser {advice.kaiser}, "
        f"broken stick {advice.broken_stick}, parallel analysis {parallel}, "
        f"{advice.cumulative_threshold:.0%} cumulative {advice.cumulative}. "
        f"T² and Q use K = {components} ({chosen})."
    )
    if pending and automatic:
        text += " The recommendation will follow parallel analysis when it finishes, in a moment."
    return text


def provenance(resolved: Resolved, diagnostics, colour_column) -> dict:
    record, fitted = resolved.record, resolved.fitted
    return {
        "Dataset": record.display_name,
        "Fingerprint (SHA-256)": record.content_hash,
        "Samples used": f"{fitted.pca.n_samples} of {resolved.table.n_rows}",
        "Variables used": f"{fitted.pca.n_variables}: {', '.join(fitted.prepared.variables)}",
        "Recipe": " ".join(resolved.recipe.describe()),
        "Solver": fitted.pca.solver,
        "Components for T² and Q": f"{diagnostics.components} at {diagnostics.confidence:.1%} confidence",
        "Q limit": diagnostics.q_limit_method,
        "Coloured by": colour_column or "nothing",
        "Engine": f"Ordinate {__version__}, engine {ENGINE_VERSION}",
    }


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

NO_SLIDES_NOTICE = "This dataset has no saved views yet, so the current view is shown. Save views to step through them."


@dataclass(frozen=True)
class Slides:
    position: int
    count: int


def effective_state(services, state: ViewState) -> tuple[ViewState, Slides | None, tuple[str, ...]]:
    """The state to draw: in presentation mode, the saved view at the slide position."""
    if not state.present:
        return state, None, ()
    views = services.store.views_for_dataset(state.dataset) if state.dataset else []
    if not views:
        return state, Slides(1, 1), (NO_SLIDES_NOTICE,)
    position = min(max(state.slide, 1), len(views))
    view = views[position - 1]
    saved, notices = parse_query(view.query)
    shown = saved.replace(dataset=state.dataset, present=True, slide=position, saved_view=view.view_id)
    return shown, Slides(position, len(views)), notices


def saved_view_info(services, state: ViewState) -> dict | None:
    """Title, note and provenance of the saved view a state was opened from."""
    if state.saved_view is None:
        return None
    view = services.store.view(state.saved_view)
    if view is None or view.dataset_token != state.dataset:
        return None
    return {
        "view_id": view.view_id,
        "title": view.title,
        "note": safe_markdown(view.note),
        "author": view.author,
        "saved": _utc(view.created),
        "engine_version": view.engine_version,
        "content_hash": view.content_hash,
        "outdated_engine": view.engine_version != ENGINE_VERSION,
        "parent": view.parent,
    }


def saved_views_list(services, dataset_token: str | None) -> list[dict]:
    if not dataset_token:
        return []
    return [
        {"view_id": v.view_id, "title": v.title, "note": _preview(v.note), "author": v.author,
         "saved": _utc(v.created), "position": i + 1}
        for i, v in enumerate(services.store.views_for_dataset(dataset_token))
    ]


def save_view(services, state: ViewState, *, title: str, note: str, author: str, parent: str | None):
    """Store the current view as a new immutable saved view."""
    record = services.store.dataset(state.dataset)
    if record is None:
        raise DatasetNotFound(state.dataset)
    snapshot = state.replace(saved_view=None, present=False, slide=1)
    return services.store.save_view(
        record.token, to_query(snapshot), title=title, note=note, author=author,
        content_hash=record.content_hash, engine_version=ENGINE_VERSION, parent=parent,
    )


_UNSAFE_LINK = re.compile(
    r"\]\(\s*<?\s*(?:javascript|vbscript|data|file)\s*:(?:[^()]|\([^()]*\))*\)", re.IGNORECASE
)
_UNSAFE_AUTOLINK = re.compile(r"<\s*(?:javascript|vbscript|data|file)\s*:[^>]*>", re.IGNORECASE)


def safe_markdown(text: str) -> str:
    """Markdown source with script-capable link targets removed.

    Rendered by dcc.Markdown without raw HTML (dangerously_allow_html stays
    False), so tags show as text; this removes the remaining route, links
    whose target is javascript:, vbscript:, data: or file:.
    """
    text = _UNSAFE_LINK.sub("](#removed-link)", text or "")
    return _UNSAFE_AUTOLINK.sub("(removed link)", text)


def _preview(note: str, limit: int = 140) -> str:
    flat = " ".join((note or "").split())
    return flat if len(flat) <= limit else flat[: limit - 1] + "…"


def _utc(timestamp: float) -> str:
    return time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime(timestamp))
