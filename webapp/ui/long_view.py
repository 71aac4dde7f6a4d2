"""The view of a server-side dataset: the Dask engine in the background, density figures on the page.

Same URL scheme as any view (``ds=<dataset code>`` plus the view's settings).
Opening it starts the fit on the dataset's Dask cluster in a background thread
(:class:`webapp.store.long_fits.LongFits`: state and progress on disk, one fit
per key across worker processes); the page polls (the ``parallel-poll``
interval) and shows the partitions done, then draws:

* the scores as a density image (2-D histogram of every row, counted by the
  workers) with a uniform random sample of points for hover and picking, and
  sigma ellipses from the component variances;
* T² against Q as a density with the limits and the rows furthest beyond them;
* the flagged list, paged, from the rows the workers kept;
* the variance table and plot, loadings and correlation circle as usual.

Results are cached under the parts' fingerprint + canonical recipe + engine
version (the fit) and K + confidence (the scoring). Things that need every row
in memory (labels on points, group colours, contributions, new samples) are
not offered, and the page says so.
"""

from __future__ import annotations

import logging

import numpy as np
from dash import ALL, Input, Output, State, ctx, html, no_update
from dash.exceptions import PreventUpdate

from webapp.analysis.ellipses import component_ellipse
from webapp.analysis.errors import OrdinateError
from webapp.analysis.recipe import Recipe
from webapp.figures import (
    axis_title,
    correlation_circle_figure,
    flagged_samples,
    loadings_bar_figure,
    variance_figure,
    variance_table_rows,
    variance_table_tsv,
)
from webapp.figures.density import density_diagnostics_figure, density_scores_figure
from webapp.figures.text import level_percent
from webapp.figures.message import message_figure
from webapp.state import ViewState, parse_query
from webapp.store.long_fits import LongFits, long_key
from webapp.ui import layout as L
from webapp.ui.components import flagged_table
from webapp.ui.view_model import (
    MAX_TABLE_COMPONENTS,
    Controls,
    LazyPanels,
    View,
    effective_state,
)

PAGE_ROWS = 25
PAGE_BUTTON = "long-flagged-page"
PAGE_BODY = "long-flagged-body"
LONG_DATA_NOTE = ("Long data on the server, read by the Dask engine: the plots show the density of every sample "
                  "with a random sample of points on top. Labels on points, group colours, arrows in the scores "
                  "plot, contributions and new samples need every row in memory and are not offered for it.")
SPECTRAL_IGNORED = "Spectral settings (variable ranges, row correction, Savitzky–Golay) are ignored for long data."
log = logging.getLogger("ordinate")

__all__ = ["build_long_view", "is_long", "long_poll", "register_long_view"]


def is_long(services, state: ViewState) -> bool:
    record = services.store.dataset(state.dataset) if state.dataset else None
    return bool(record and record.server_side)


class _Plan:
    """What a state asks of a server-side dataset: its source, recipe and result keys."""

    def __init__(self, services, state: ViewState):
        from webapp.distributed.sources import fingerprint, open_source

        self.record = services.store.dataset(state.dataset)
        self.notices: list[str] = []
        self.source = open_source(self.record.location)
        self.fingerprint, self.size = fingerprint(self.source)
        if self.fingerprint != self.record.content_hash:
            self.notices.append("The parts of this dataset changed since it was registered; "
                                "the analysis uses them as they are now.")
        self.recipe = self._recipe(state)
        recipe_json = self.recipe.canonical_json()
        self.k_choice = "auto" if state.components is None else int(state.components)
        self.fit_key = long_key("fit", self.fingerprint, recipe_json)
        self.key = long_key("density", self.fingerprint, recipe_json, self.k_choice, f"{state.confidence:.6g}")

    def _recipe(self, state: ViewState) -> Recipe:
        numeric = set(self.source.numeric_columns)
        off = set(state.variables_off)
        unknown = sorted(off - numeric)
        if unknown:
            self.notices.append(f"Ignored unknown variable(s) in the link: {', '.join(unknown)}.")
        if state.ranges or state.row_correction != "none" or state.savgol is not None:
            self.notices.append(SPECTRAL_IGNORED)
        id_column = state.id_column if state.id_column in self.source.columns else None
        variables = None if not off else tuple(v for v in self.source.numeric_columns if v not in off
                                               and v != id_column)
        return Recipe(variables=variables, excluded_samples=state.excluded,
                      transforms=tuple((v, t) for v, t in state.transforms if v in numeric),
                      missing=state.missing, centring=state.centring, scaling=state.scaling, id_column=id_column)


def _fits(services) -> LongFits:
    return services.compute.long_fits  # one runner per compute layer (per worker process)


def _job(plan: _Plan, fits: LongFits):
    def job(progress):
        from webapp.distributed.cluster import dask_client
        from webapp.distributed.density import score_density
        from webapp.distributed.engine import fit_long

        with dask_client(plan.record.scheduler or None) as client:
            fit = fits.result(plan.fit_key)
            new_fit = fit is None
            if new_fit:
                fit = fit_long(plan.source, plan.recipe, client, progress=progress)
            result = score_density(plan.source, fit, client, plan.k_choice, _confidence(plan), progress=progress)
        if new_fit:  # kept only once the scoring worked too: a failed fit leaves nothing behind
            fits.compute.cache.set(plan.fit_key, fit)
        return result
    return job


def _confidence(plan: _Plan) -> float:
    return float(plan.key.rsplit("/", 1)[1])


def long_poll(services, state: ViewState) -> tuple[bool, str | None]:
    """Whether the view can be drawn complete (fitted, or failed), starting the fit if nobody runs it;
    and the progress words while it runs."""
    try:
        plan = _Plan(services, state)
    except OrdinateError:
        return True, None  # the view says what is wrong
    fits = _fits(services)
    if fits.start(plan.key, _job(plan, fits)) in ("done", "failed"):
        return True, None
    return False, progress_text(fits.status(plan.key)) or "Starting the Dask cluster."


def progress_text(status: dict) -> str | None:
    if status["state"] != "running":
        return None
    phase = {"moments": "reading the data (moments)", "means": "reading the data (means for filling)",
             "scores": "scoring every sample (densities)",
             "advice": "choosing the number of components (parallel analysis on a random sample)"}.get(status.get("phase"), "starting the Dask cluster")
    done, total = status.get("done", 0), status.get("total", 0)
    counted = f": {done} of {total} partitions done" if total else ""
    return f"Fitting on the Dask cluster, {phase}{counted}. The page updates when it is done."


def build_long_view(services, state: ViewState, parse_notices=()) -> View:
    record = services.store.dataset(state.dataset)
    title = record.display_name
    try:
        plan = _Plan(services, state)
    except OrdinateError as error:
        return View(state=state, title=title, summary={"filename": record.location}, notices=tuple(parse_notices),
                    errors=(str(error),), recipe_words=(), controls=Controls([], [], [], [], [], []))
    fits = _fits(services)
    status = fits.status(plan.key)
    notices = [*parse_notices, LONG_DATA_NOTE, *plan.notices]
    summary = _summary(plan)
    controls = _controls(plan, None)
    if status["state"] != "done":
        words = progress_text(status) or "Waiting for the Dask cluster."
        errors = (status["message"],) if status["state"] == "failed" else ()
        waiting = message_figure(errors[0] if errors else words)
        keys = {name: ("long-waiting", plan.key, status["state"]) for name in
                ("scores", "variance", "diagnostics", "loadings", "circle")}
        return View(state=state, title=title, summary=summary, notices=tuple(notices), errors=errors,
                    recipe_words=tuple(plan.recipe.describe()), controls=controls, complete=bool(errors),
                    figure_keys=keys, panels=LazyPanels({name: (lambda: waiting) for name in keys}))
    fit, result = fits.result(plan.fit_key), fits.result(plan.key)
    if fit is None:  # the scoring is cached but its fit was evicted: fit again
        services.compute.cache.delete(plan.key)
        return build_long_view(services, state, parse_notices)
    notices += list(fit.warnings)
    return _full_long_view(state, plan, fit, result, title, summary, notices)


def _full_long_view(state, plan, fit, result, title, summary, notices) -> View:
    pca, advice = fit.pca, fit.advice
    pcs = len(result.grid.score_edges)
    pc_x, pc_y = state.pc_x, state.pc_y
    if max(pc_x, pc_y) > pcs or pc_x == pc_y:
        notices.append(f"For long data the density is counted for PC1 to PC{pcs}; showing PC1 against PC2.")
        pc_x, pc_y = 1, 2
    loading_pc = min(state.loading_pc, pca.n_components)
    k = result.components
    rows = variance_table_rows(
        pca.eigenvalues[:MAX_TABLE_COMPONENTS], pca.explained_variance_ratio[:MAX_TABLE_COMPONENTS],
        pca.cumulative_explained[:MAX_TABLE_COMPONENTS], kaiser=advice.kaiser, broken_stick=advice.broken_stick,
        parallel=advice.parallel, components=k)
    flagged = flagged_samples(result.density.flagged.labels, result.density.flagged.t2, result.density.flagged.q,
                              result.limits[0], result.limits[1])
    ratios = pca.explained_variance_ratio
    present = state.present
    base = (plan.key,)
    keys = {"scores": ("long-scores", *base, pc_x, pc_y, state.sigma_levels, present),
            "variance": ("long-variance", *base, present), "diagnostics": ("long-diagnostics", *base, present),
            "loadings": ("long-loadings", *base, loading_pc, present),
            "circle": ("long-circle", *base, pc_x, pc_y, present, state.arrows_shown)}
    correlations = pca.loadings * np.sqrt(pca.eigenvalues[:pca.n_components]) / np.where(fit.spread > 0, fit.spread, 1)
    variables = fit.preprocessor.variables
    panels = {
        "scores": lambda: _scores(result, pca, pc_x, pc_y, state),
        "variance": lambda: variance_figure(
            eigenvalues=pca.eigenvalues, explained_ratio=ratios, cumulative=pca.cumulative_explained,
            broken_stick=advice.broken_stick_expectation, parallel_threshold=advice.parallel_threshold,
            mean_eigenvalue=pca.total_variance / pca.n_variables, components=k, total_variance=pca.total_variance,
            presentation=present),
        "diagnostics": lambda: _diagnostics(result, present),
        "flagged": lambda: flagged,
        "flagged_list": lambda: flagged_page(flagged, 0, result.density.flagged.t2_over,
                                             result.density.flagged.q_over),
        "contributions": lambda: html.P("Contributions need a sample's values in memory; they are not offered for "
                                        "long data. The flagged list names the samples to look at.", className="quiet"),
        "batch": lambda: None,
        "batch_problem": lambda: (None if not state.batch else
                                  "New samples are not scored against a server-side dataset on the page."),
        "loadings": lambda: loadings_bar_figure(variables=variables, loadings=pca.loadings[:, loading_pc - 1],
                                                component=loading_pc, explained_ratio=float(ratios[loading_pc - 1]),
                                                presentation=present),
        "circle": lambda: correlation_circle_figure(
            variables=variables, correlations_x=correlations[:, pc_x - 1], correlations_y=correlations[:, pc_y - 1],
            x_title=axis_title(pc_x, float(ratios[pc_x - 1])), y_title=axis_title(pc_y, float(ratios[pc_y - 1])),
            presentation=present, max_arrows=state.arrows_shown),
    }
    summary = {**summary, "rows": pca.n_samples}
    return View(
        state=state, title=title, summary=summary, notices=tuple(notices), errors=(),
        recipe_words=tuple(plan.recipe.describe()), controls=_controls(plan, fit), pc_x=pc_x, pc_y=pc_y,
        loading_pc=loading_pc, variance_rows=rows, variance_tsv=variance_table_tsv(rows),
        advice_text=(f"Recommended K = {advice.recommended} by {advice.rule} (parallel analysis on a random sample "
                     f"of {fit.sample.shape[0]} rows). T² and Q use K = {k}."),
        provenance=_provenance(plan, fit, result),
        complete=True, figure_keys=keys, panels=LazyPanels(panels),
    )


def _scores(result, pca, pc_x: int, pc_y: int, state: ViewState):
    a, b = pc_x - 1, pc_y - 1
    swap = a > b
    pair = (b, a) if swap else (a, b)
    counts = result.density.scores[pair]
    counts = counts.T if swap else counts
    edges = result.grid.score_edges
    ellipses = [component_ellipse(float(pca.eigenvalues[a]), float(pca.eigenvalues[b]), level)
                for level in state.sigma_levels]
    ratios = pca.explained_variance_ratio
    return density_scores_figure(
        counts=counts, x_edges=edges[a], y_edges=edges[b], outside=result.density.scores_outside[pair],
        rows=result.density.rows, sample_x=result.points_scores[:, a], sample_y=result.points_scores[:, b],
        sample_labels=result.points_labels, ellipses=ellipses, x_title=axis_title(pc_x, float(ratios[a])),
        y_title=axis_title(pc_y, float(ratios[b])), presentation=state.present)


def _diagnostics(result, present: bool):
    flagged = result.density.flagged
    return density_diagnostics_figure(
        counts=result.density.t2_q, t2_edges=result.grid.t2_edges, q_edges=result.grid.q_edges,
        outside=result.density.t2_q_outside, rows=result.density.rows, flagged_t2=flagged.t2, flagged_q=flagged.q,
        flagged_labels=flagged.labels, t2_limit=result.limits[0], q_limit=result.limits[1],
        confidence=result.confidence, components=result.components, t2_over=flagged.t2_over, q_over=flagged.q_over,
        presentation=present)


def flagged_page(rows: list, page: int, t2_over: int, q_over: int) -> html.Div:
    """One page of the flagged list, with buttons to the pages before and after."""
    pages = max(1, -(-len(rows) // PAGE_ROWS))
    page = min(max(int(page), 0), pages - 1)
    shown = rows[page * PAGE_ROWS:(page + 1) * PAGE_ROWS]
    first = page * PAGE_ROWS + 1
    heading = (f"Samples {first}–{first + len(shown) - 1} of the {len(rows)} furthest beyond a limit "
               f"({t2_over} above the T² limit, {q_over} above the Q limit in all)") if rows else None
    buttons = html.Div(className="flagged-pages", children=[
        html.Button("Previous", id={"type": PAGE_BUTTON, "page": page - 1}, n_clicks=0, disabled=page == 0),
        html.Span(f" page {page + 1} of {pages} "),
        html.Button("Next", id={"type": PAGE_BUTTON, "page": page + 1}, n_clicks=0, disabled=page >= pages - 1),
    ]) if pages > 1 else None
    return html.Div(id={"type": PAGE_BODY, "index": 0},
                    children=[*flagged_table(shown, heading=heading), buttons])


def _summary(plan: _Plan) -> dict:
    offsets = plan.source.row_offsets()
    rows = None if offsets is None else int(offsets[-1]) + int(plan.source.pieces[-1].rows)
    return {"filename": plan.record.location, "rows": rows if rows is not None else "counted during the fit",
            "numeric": len(plan.source.numeric_columns), "text": len(plan.source.text_columns),
            "id_column": plan.recipe.id_column, "groups": [], "missing": "counted during the fit",
            "format": (f"{plan.source.kind}, {len(plan.source.files)} part(s), {len(plan.source.pieces)} partition(s); "
                       f"server-side, Dask engine" + (f" at {plan.record.scheduler}" if plan.record.scheduler else "")),
            "warnings": []}


def _controls(plan: _Plan, fit) -> Controls:
    columns = plan.source.columns
    numeric = list(plan.source.numeric_columns)
    chosen = set(plan.recipe.variables) if plan.recipe.variables is not None else set(numeric)
    pcs = fit.pca.n_components if fit is not None else 2
    density_pcs = min(pcs, 4)
    return Controls(
        id_options=[{"label": "detected", "value": "auto"}] + [{"label": c, "value": c} for c in columns],
        colour_options=[{"label": "none (long data)", "value": "auto"}],
        variable_options=[{"label": c, "value": c} for c in numeric],
        variables_in=[c for c in numeric if c in chosen],
        pc_options=[{"label": f"PC{a}", "value": a} for a in range(1, density_pcs + 1)],
        component_options=[{"label": "recommended", "value": "auto"}]
        + [{"label": str(a), "value": a} for a in range(1, pcs + 1)],
    )


def _provenance(plan: _Plan, fit, result) -> dict:
    from webapp import __version__
    from webapp.analysis import ENGINE_VERSION

    return {
        "Dataset": plan.record.display_name,
        "Data": f"{plan.record.location} (server-side, {len(plan.source.files)} part(s))",
        "Fingerprint (SHA-256 of paths, sizes, times)": plan.fingerprint,
        "Samples used": str(fit.pca.n_samples),
        "Variables used": f"{fit.pca.n_variables}: {', '.join(fit.preprocessor.variables)}",
        "Preprocessing": " ".join(plan.recipe.describe()),
        "Components for T² and Q": f"{result.components} at {level_percent(result.confidence)} confidence",
        "Q limit": result.limits[2],
        "Engine": f"Ordinate {__version__}, engine {ENGINE_VERSION}, Dask ({fit.pieces} partitions)",
    }


def register_long_view(app, services) -> None:
    """The pages of the flagged list (the progress line is the page poll's: ui.view_poll, sent by ui.callbacks)."""

    @app.callback(Output({"type": PAGE_BODY, "index": ALL}, "children"),
                  Input({"type": PAGE_BUTTON, "page": ALL}, "n_clicks"), State(L.URL, "search"),
                  prevent_initial_call=True)
    def turn_page(_clicks, search):
        if not ctx.triggered or not ctx.triggered[0].get("value"):
            raise PreventUpdate
        page = ctx.triggered_id["page"]
        state, _ = parse_query(search)
        shown, _slides, _notices = effective_state(services, state)
        view = build_long_view(services, shown)
        if not view.complete or view.errors:
            return [no_update]
        flagged = view.panels.get("flagged", list)
        density = _fits(services).result(_Plan(services, shown).key).density.flagged
        return [flagged_page(flagged, page, density.t2_over, density.q_over).children]
