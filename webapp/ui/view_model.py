"""From a view state to everything the page shows, with no Dash involved.

``build_view(services, state)`` resolves the dataset, asks the cached compute
layer for the fit (never fitting twice for the same data and recipe), derives
the cheap diagnostics, and calls the pure figure builders. Callbacks only
unpack the result, so this module is where the app's behaviour is tested.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass, field

import numpy as np
import plotly.graph_objects as go

from webapp.analysis.errors import OrdinateError
from webapp.analysis.pipeline import diagnose
from webapp.analysis.recipe import Recipe
from webapp.analysis.variable_axis import table_axis
from webapp.figures import (
    BatchPoints,
    diagnostics_figure,
    flagged_samples,
    variance_figure,
    variance_table_rows,
    variance_table_tsv,
)
from webapp.state import MAX_PC, ViewState
from webapp.store.compute import fit_key
from webapp.ui.resolution import DatasetNotFound, Resolved  # noqa: F401  (part of this module's interface)
from webapp.ui.saved_views import (  # noqa: F401  (part of this module's interface)
    NO_SLIDES_NOTICE,
    Slides,
    effective_state,
    safe_markdown,
    save_view,
    saved_view_info,
    saved_views_list,
)
from webapp.ui.scores_panel import (  # noqa: F401  (part of this module's interface)
    HOVER_VARIABLES,
    BatchScores,
    batch_legend,
    group_labels,
    groups_for,
    labels_from_event,
    parse_sigma_levels,
    score_batch,
    scores_panel,
    sigma_ellipses,
)
from webapp.ui.spectra_panels import spectra_panel
from webapp.ui.wide_variables import variables_off
from webapp.ui.summary_panels import (  # noqa: F401  (part of this module's interface)
    advice_text,
    provenance,
    table_summary,
)
from webapp.ui.variable_panels import (  # noqa: F401  (part of this module's interface)
    circle_panel,
    loadings_panel,
    contributions_panel,
    variable_correlations,
)

MAX_TABLE_COMPONENTS = 20
WIDE_VARIABLES = 60  # above this many numeric variables the page lists none of them one by one
UNKNOWN_BATCH = "The new samples named in this link are not known here (their file may have been deleted); they are not shown."


@dataclass(frozen=True)
class Controls:
    id_options: list
    colour_options: list
    variable_options: list
    variables_in: list
    pc_options: list
    component_options: list
    # Wide tables (more than WIDE_VARIABLES numeric variables) get no option per variable: the page
    # chooses them by ranges and search instead (webapp.ui.wide_variables).
    wide: bool = False
    variables_total: int = 0
    variables_used: int = 0
    axis_span: tuple[float, float] | None = None  # (low, high) of the variable axis; None without one
    axis_label: str = ""


@dataclass(frozen=True, eq=False)
class View:
    state: ViewState
    title: str
    summary: dict
    notices: tuple[str, ...]
    errors: tuple[str, ...]
    recipe_words: tuple[str, ...]
    controls: Controls
    steps: tuple[str, ...] = ()  # the preprocessing steps that act, in the order applied
    pc_x: int = 1
    pc_y: int = 2
    loading_pc: int = 1
    variance_rows: list = field(default_factory=list)
    variance_tsv: str = ""
    advice_text: str = ""
    provenance: dict = field(default_factory=dict)
    complete: bool = True  # False: drawn before parallel analysis finished; ask again
    grouped: bool = False  # the samples are coloured by groups (so ellipses can be drawn per group)
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
    # Spectra of the samples along the variable axis; None for a table without one.
    spectra_figure = property(lambda self: self.panels.get("spectra", lambda: None))


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


def resolve(services, state: ViewState) -> Resolved:
    """The complete analysis a state points at (waits for parallel analysis)."""
    record = services.store.dataset(state.dataset)
    if record is None:
        raise DatasetNotFound(state.dataset)
    state, _ = _expanded(services, state)
    return _resolve_table(services, record, services.compute.table(record, state.rows_are), state, wait=True)


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
    """The state with its stored sample and variable sets spelled out in ``excluded`` and ``variables_off``."""
    labels, notices = excluded_labels(services, state)
    off, off_notices = variables_off(services, state)
    if state.excluded_set is None and state.variables_off_set is None:
        return state, notices
    return (state.replace(excluded=labels, excluded_set=None, variables_off=off, variables_off_set=None),
            (*notices, *off_notices))


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
        recipe, _ = recipe_for(state, services.compute.table(record, state.rows_are))
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
    ranges, row_correction, savgol = state.ranges, state.row_correction, state.savgol
    if (ranges or row_correction != "none" or savgol is not None) and table_axis(table, label_column) is None:
        notices.append(
            "Ignored the spectral settings of the link (variable ranges, row correction, Savitzky–Golay): "
            "this data has no variable axis (numeric column names that are positions, such as 1100, 1102, …)."
        )
        ranges, row_correction, savgol = (), "none", None
    recipe = Recipe(
        variables=variables,
        excluded_samples=state.excluded,
        transforms=transforms,
        missing=state.missing,
        centring=state.centring,
        scaling=state.scaling,
        id_column=id_column,
        ranges=ranges,
        row_correction=row_correction,
        savgol=savgol,
        rows_are=state.rows_are,
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
        table = services.compute.table(record, state.rows_are)
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
    groups, colour_column = groups_for(state, table, fitted)
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
        steps=tuple(resolved.recipe.steps()),
        controls=_controls(table, fitted, resolved.recipe),
        pc_x=pc_x,
        pc_y=pc_y,
        loading_pc=loading_pc,
        variance_rows=rows,
        variance_tsv=variance_table_tsv(rows),
        advice_text=advice_text(fitted.advice, diagnostics.components, state.components is None,
                                pending=not resolved.complete),
        panels=LazyPanels({
            "scores": lambda: draw(keys["scores"], lambda: scores_panel(state, fitted, table, groups, pc_x, pc_y,
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
            "contributions": lambda: contributions_panel(state, fitted, diagnostics, batch, table),
            "loadings": lambda: draw(keys["loadings"], lambda: loadings_panel(
                table, fitted, loading_pc, state.present, state.loading_overlay)),
            "spectra": lambda: draw(keys["spectra"], lambda: spectra_panel(state, table, fitted, groups)),
            "circle": lambda: draw(keys["circle"], lambda: circle_panel(fitted, pc_x, pc_y, state.present,
                                                                            state.arrows_shown)),
        }),
        provenance=provenance(resolved, diagnostics, colour_column),
        complete=resolved.complete,
        grouped=groups is not None,
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
                   state.biplot_scaling, state.arrows_shown, state.labels, state.picked, colour_column, state.present,
                   state.hotelling and confidence, batch_id),
        "variance": ("variance", fit, k, state.present),
        "diagnostics": ("diagnostics", fit[0], k, confidence, state.picked, colour_column, state.present, batch_id),
        "batch": ("batch", fit[0], k, confidence, batch_id),
        "flagged": ("flagged", fit[0], k, confidence),
        "loadings": ("loadings", fit[0], loading_pc, state.present, state.loading_overlay),
        "spectra": ("spectra", fit[0], state.picked, colour_column, state.present),
        "circle": ("circle", fit[0], pc_x, pc_y, state.present, state.arrows_shown),
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


def _controls(table, fitted, recipe) -> Controls:
    label_column = (recipe.id_column if recipe else None) or table.id_column
    numeric = [c for c in table.numeric_columns if c != label_column]
    chosen = set(recipe.variables) if recipe and recipe.variables is not None else set(numeric)
    pcs = min(fitted.pca.n_components if fitted else 0, MAX_PC)
    wide = len(numeric) > WIDE_VARIABLES
    axis = table_axis(table, label_column)
    # A wide table offers its text columns (and numeric ones off the axis) as labels and groups, not every column.
    columns = list(table.frame.columns) if not wide else [
        c for c in table.frame.columns if c in table.text_columns or (axis is not None and c in axis.other)
        or c == label_column][:WIDE_VARIABLES]
    id_options = [{"label": "detected" + (f" ({table.id_column})" if table.id_column else " (row numbers)"),
                   "value": "auto"}]
    id_options += [{"label": c, "value": c} for c in columns]
    colour_options = [{"label": "detected group", "value": "auto"}, {"label": "no colouring", "value": "__none__"}]
    colour_options += [{"label": c, "value": c} for c in columns]
    return Controls(
        id_options=id_options,
        colour_options=colour_options,
        variable_options=[] if wide else [{"label": c, "value": c} for c in numeric],
        variables_in=[] if wide else [c for c in numeric if c in chosen],
        wide=wide,
        variables_total=len(numeric),
        variables_used=fitted.pca.n_variables if fitted else 0,
        axis_span=None if axis is None else axis.span(),
        axis_label="" if axis is None else axis.label,
        pc_options=[{"label": f"PC{a}", "value": a} for a in range(1, pcs + 1)],
        component_options=[{"label": "recommended", "value": "auto"}]
        + [{"label": str(a), "value": a} for a in range(1, pcs + 1)],
    )


def _clamp_pc(value: int, available: int, where: str, notices: list) -> int:
    if value <= available:
        return value
    notices.append(f"This data has {available} components; the {where} shows PC{available} instead of PC{value}.")
    return available


def view_diagnostics(resolved, state: ViewState):
    """T², Q and limits at the view's K (clamped to what the fit has) and confidence."""
    return diagnose(resolved.fitted, components_choice(state, resolved.fitted), state.confidence)


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


