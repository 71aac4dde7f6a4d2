"""Thin callbacks: read the URL, call the view model, return what is drawn.

The address bar is the single source of truth. One callback (``show_view``)
turns the URL into every control value and every figure; the others turn a
user's action into a new URL (``write_url`` and friends), never touching
figures directly. A control change therefore always goes URL → view, which is
what makes every view a shareable link and lets Back/Forward work.

Loops are avoided by comparing *states*, not strings: when ``show_view`` sets
the controls, ``write_url`` sees a state equal to the URL's and does nothing.
"""

from __future__ import annotations

import hashlib
import logging
import time

from dash import ALL, Input, Output, State, ctx, html, no_update
from dash.exceptions import PreventUpdate
from plotly.io.json import to_json_plotly

from webapp.analysis.errors import OrdinateError
from webapp.figures.message import message_figure
from webapp.state import NO_COLOUR, ViewState, parse_query, to_query
from webapp.ui import layout as L
from webapp.ui import long_view
from webapp.ui import view_model as vm
from webapp.ui.picking import register_picking
from webapp.ui.view_poll import poll_view
from webapp.ui.components import (
    batch_panel,
    dataset_summary,
    excluded_chips,
    export_link_list,
    flagged_table,
    manage_box,
    notice_list,
    not_found_card,
    start_card,
    provenance_block,
    transform_chips,
    variance_table,
)

log = logging.getLogger("ordinate")
AUTO = "auto"
NO_COLOUR_VALUE = "__none__"


def register_callbacks(app, services) -> None:
    from webapp.ui.sharing import register_sharing_callbacks
    from webapp.ui.spectral_controls import register_spectral_controls

    _register_show_view(app, services)
    register_sharing_callbacks(app, services)
    _register_write_url(app)
    _register_actions(app, services)
    _register_clientside(app)
    register_picking(app)
    register_spectral_controls(app, services)


# --- URL -> everything shown ---------------------------------------------------------
#
# Drawn in two steps so the first screen appears sooner: ``show_view`` sets the
# controls, the scores plot and the variance table; its answer starts
# ``show_view_rest`` for the panels further down. Both send only the panels that
# differ from what the page already shows (fingerprints kept in the page), because
# the browser's work per panel, not the server's, dominates a redraw.

_FIRST_OUTPUTS = [
    Output(L.DATASET_TITLE, "children"),
    Output(L.DATASET_SUMMARY, "children"),
    Output(L.NOTICES, "children"),
    Output(L.NOT_FOUND, "children"),
    Output(L.NOT_FOUND, "hidden"),
    Output(L.WORKSPACE, "hidden"),
    Output(L.RECIPE_WORDS, "children"),
    Output(L.ID_COLUMN, "options"),
    Output(L.ID_COLUMN, "value"),
    Output(L.COLOUR_BY, "options"),
    Output(L.COLOUR_BY, "value"),
    Output(L.VARIABLES, "options"),
    Output(L.VARIABLES, "value"),
    Output(L.TRANSFORM_VARIABLE, "options"),
    Output(L.TRANSFORM_LIST, "children"),
    Output(L.MISSING, "value"),
    Output(L.CENTRING, "value"),
    Output(L.SCALING, "value"),
    Output(L.EXCLUDED_LIST, "children"),
    Output(L.PC_X, "options"),
    Output(L.PC_X, "value"),
    Output(L.PC_Y, "options"),
    Output(L.PC_Y, "value"),
    Output(L.SIGMA_LEVELS, "value"),
    Output(L.ELLIPSE_BY, "value"),
    Output(L.ELLIPSE_FIELD, "hidden"),
    Output(L.OVERLAYS, "value"),
    Output(L.BIPLOT_SCALING, "value"),
    Output(L.ARROW_LIMIT, "value"),
    Output(L.COMPONENTS, "options"),
    Output(L.COMPONENTS, "value"),
    Output(L.CONFIDENCE, "value"),
    Output(L.LOADING_PC, "options"),
    Output(L.LOADING_PC, "value"),
    Output(L.SCORES_GRAPH, "figure"),
    Output(L.VARIANCE_TABLE, "children"),
    Output(L.COMPONENT_ADVICE, "children"),
    Output(L.COPY_TABLE, "content"),
]
_REST_OUTPUTS = [
    Output(L.VARIANCE_GRAPH, "figure"),
    Output(L.DIAGNOSTICS_GRAPH, "figure"),
    Output(L.FLAGGED_LIST, "children"),
    Output(L.CONTRIBUTIONS, "children"),
    Output(L.BATCH_PANEL, "children"),
    Output(L.LOADINGS_GRAPH, "figure"),
    Output(L.CIRCLE_GRAPH, "figure"),
    Output(L.PROVENANCE, "children"),
]
_VIEW_OUTPUTS = _FIRST_OUTPUTS + _REST_OUTPUTS
# Also written by other callbacks (an upload's error), so what the page shows may differ from
# what was sent last: a new address always replaces it; a redraw of the same address (parallel
# analysis finished) sends it only when it changed, so it does not wipe out such a message.
_ALWAYS_SENT_ON_NEW_ADDRESS = frozenset({(L.NOTICES, "children")})
_FIGURE_KEYS = {L.SCORES_GRAPH: "scores", L.VARIANCE_GRAPH: "variance", L.DIAGNOSTICS_GRAPH: "diagnostics",
                L.LOADINGS_GRAPH: "loadings", L.CIRCLE_GRAPH: "circle"}


def _register_show_view(app, services) -> None:
    @app.callback(_FIRST_OUTPUTS + [Output(L.SHOWN_FIRST, "data"), Output(L.PARALLEL_POLL, "disabled"),
                                    Output(L.FIT_PROGRESS, "children")],
                  Input(L.URL, "search"), Input(L.PARALLEL_DONE, "data"), State(L.SHOWN_FIRST, "data"))
    def show_view(search, _parallel_done, shown):
        outputs, fingerprints, complete = _draw(services, search, first=True)
        always = _ALWAYS_SENT_ON_NEW_ADDRESS if ctx.triggered_id != L.PARALLEL_DONE else frozenset()
        sent, shown = _only_changed(_FIRST_OUTPUTS, outputs, fingerprints, shown, always=always)
        # A new value every time, so the rest of the view always follows.
        # The progress line is the poll's alone: a new view (or the finished one) starts without it.
        return sent + [{**shown, "#search": search, "#drawn": time.time()}, complete, []]

    @app.callback(_REST_OUTPUTS + [Output(L.SHOWN_REST, "data")],
                  Input(L.SHOWN_FIRST, "data"), State(L.URL, "search"), State(L.SHOWN_REST, "data"),
                  prevent_initial_call=True)
    def show_view_rest(_first, search, shown):
        outputs, fingerprints, complete = _draw(services, search, first=False)
        sent, shown = _only_changed(_REST_OUTPUTS, outputs, fingerprints, shown)
        if not complete:
            # The whole view is drawn: now parallel analysis may have the cores.
            poll_view(services, search)
        return sent + [shown]

    @app.callback(Output(L.PARALLEL_DONE, "data"), Output(L.PARALLEL_POLL, "disabled", allow_duplicate=True),
                  Output(L.FIT_PROGRESS, "children", allow_duplicate=True),
                  Input(L.PARALLEL_POLL, "n_intervals"), State(L.URL, "search"), prevent_initial_call=True)
    def wait_for_parallel_analysis(ticks, search):
        # One reading of the state per tick gives both answers, so the line never outlives the fit.
        done, progress = poll_view(services, search)
        line = no_update if progress is None else notice_list((progress,), ())
        if done:
            return {"search": search, "tick": ticks}, True, []
        return no_update, no_update, line


def _draw(services, search, *, first: bool) -> tuple[list, list, bool]:
    """The first or the rest of the view's outputs at ``search``, their fingerprints, and whether it is complete.

    A fingerprint of None means the value is always sent (unless ``no_update``).
    """
    specs = _FIRST_OUTPUTS if first else _REST_OUTPUTS
    state, notices = parse_query(search)
    shown, _slides, slide_notices = vm.effective_state(services, state)
    try:
        build = long_view.build_long_view if long_view.is_long(services, shown) else vm.build_view
        view = build(services, shown, notices + slide_notices)
        outputs = _first_outputs(view) if first else _rest_outputs(view)
    except vm.DatasetNotFound:
        outputs = _not_found_outputs(notices, start_page=state.dataset is None)
        return _part(outputs, first), [None] * len(specs), True
    except Exception:  # never a traceback in the page: log it, say what to do
        log.exception("Drawing the view %s failed", search)
        return _part(_failure_outputs(notices), first), [None] * len(specs), True
    fingerprints = [_fingerprint(spec, value, view.figure_keys) for spec, value in zip(specs, outputs)]
    return outputs, fingerprints, view.complete


def _part(outputs: list, first: bool) -> list:
    return outputs[:len(_FIRST_OUTPUTS)] if first else outputs[len(_FIRST_OUTPUTS):]


def _fingerprint(spec, value, figure_keys: dict) -> str:
    figure_key = figure_keys.get(_FIGURE_KEYS.get(spec.component_id))
    text = repr(figure_key) if figure_key is not None else to_json_plotly(value)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:24]


def _only_changed(specs, values, fingerprints, shown, *, always=frozenset()) -> tuple[list, dict]:
    """``values`` with ``no_update`` where the page already shows the same thing; the new fingerprints.

    Outputs named in ``always`` (as ``(component id, property)``) are sent regardless.
    """
    shown = {k: v for k, v in (shown or {}).items() if not k.startswith("#")}
    sent = []
    for spec, value, fingerprint in zip(specs, values, fingerprints):
        name = f"{spec.component_id}.{spec.component_property}"
        if value is no_update:
            sent.append(no_update)
            continue
        if fingerprint is not None and shown.get(name) == fingerprint \
                and (spec.component_id, spec.component_property) not in always:
            sent.append(no_update)
            continue
        sent.append(value)
        if fingerprint is None:
            shown.pop(name, None)
        else:
            shown[name] = fingerprint
    return sent, shown


UNEXPECTED_FAILURE = (
    "Ordinate could not draw this view because of a problem on the server. The link and the data are "
    "unchanged; try another setting, reload the page, or tell the person who runs this server."
)


PANEL_FAILED = "This panel could not be drawn:"
UNEXPECTED_PANEL_FAILURE = ("This panel could not be drawn because of a problem on the server; the other panels "
                            "are unaffected. Try another setting, or tell the person who runs this server.")
_FIGURE_OUTPUTS = frozenset(_FIGURE_KEYS)
_EMPTIED_ON_FAILURE = {  # what a panel shows when the whole view fails: never the previous view's numbers
    (L.VARIANCE_TABLE, "children"): None, (L.COMPONENT_ADVICE, "children"): "", (L.COPY_TABLE, "content"): "",
    (L.FLAGGED_LIST, "children"): None, (L.CONTRIBUTIONS, "children"): None, (L.BATCH_PANEL, "children"): None,
    (L.PROVENANCE, "children"): None,
}


def _failure_outputs(notices) -> list:
    outputs = [no_update] * len(_VIEW_OUTPUTS)
    outputs[2] = notice_list(notices, (UNEXPECTED_FAILURE,))
    for index, spec in enumerate(_VIEW_OUTPUTS):
        if spec.component_id in _FIGURE_OUTPUTS and spec.component_property == "figure":
            outputs[index] = message_figure(UNEXPECTED_FAILURE)
        elif (spec.component_id, spec.component_property) in _EMPTIED_ON_FAILURE:
            outputs[index] = _EMPTIED_ON_FAILURE[(spec.component_id, spec.component_property)]
    return outputs


def _drawn(read, *, figure: bool):
    """A panel's value, or a message in its place when it cannot be drawn (never a stale panel)."""
    try:
        return read()
    except OrdinateError as error:
        message = f"{PANEL_FAILED} {error}"
    except Exception:  # never a traceback in the page: log it, say what to do
        log.exception("Drawing a panel failed")
        message = UNEXPECTED_PANEL_FAILURE
    return message_figure(message) if figure else html.P(message, className="panel-problem")


def _not_found_outputs(notices, *, start_page: bool) -> list:
    outputs = [no_update] * len(_VIEW_OUTPUTS)
    outputs[0] = "Load a CSV file to begin" if start_page else "Dataset not found"
    outputs[2] = notice_list(notices, ())
    outputs[3] = start_card() if start_page else not_found_card()
    outputs[4] = False
    outputs[5] = True
    return outputs


def _first_outputs(view: "vm.View") -> list:
    s, controls = view.state, view.controls
    colour_value = AUTO if s.colour_by is None else (NO_COLOUR_VALUE if s.colour_by == NO_COLOUR else s.colour_by)
    overlays = [name for name, on in (("arrows", s.arrows), ("hotelling", s.hotelling), ("labels", s.labels)) if on]
    return [
        view.title,
        dataset_summary(view.summary),
        notice_list(view.notices, view.errors),
        None,
        True,
        False,
        " ".join(view.recipe_words),
        controls.id_options,
        AUTO if s.id_column is None else s.id_column,
        controls.colour_options,
        colour_value,
        controls.variable_options,
        controls.variables_in,
        controls.variable_options,
        transform_chips(s.transforms),
        s.missing,
        s.centring,
        s.scaling,
        excluded_chips(s.excluded, view.dropped_for_gaps),
        controls.pc_options,
        view.pc_x,
        controls.pc_options,
        view.pc_y,
        ", ".join(f"{level:g}" for level in s.sigma_levels),
        s.ellipse_by,
        not view.grouped,
        overlays,
        s.biplot_scaling,
        AUTO if s.arrow_limit is None else s.arrow_limit,
        controls.component_options,
        AUTO if s.components is None else s.components,
        s.confidence,
        controls.pc_options,
        view.loading_pc,
        _drawn(lambda: view.scores_figure, figure=True),
        variance_table(view.variance_rows),
        view.advice_text,
        view.variance_tsv,
    ]


def _rest_outputs(view: "vm.View") -> list:
    return [
        _drawn(lambda: view.variance_figure, figure=True),
        _drawn(lambda: view.diagnostics_figure, figure=True),
        _drawn(lambda: view.panels.get("flagged_list", lambda: None) or flagged_table(view.flagged), figure=False),
        _drawn(lambda: view.contributions, figure=False),
        _drawn(lambda: batch_panel(view.batch, view.state.confidence, view.batch_problem), figure=False),
        _drawn(lambda: view.loadings_figure, figure=True),
        _drawn(lambda: view.circle_figure, figure=True),
        _drawn(lambda: provenance_block(view.provenance), figure=False),
    ]


# --- controls -> URL ------------------------------------------------------------------


def _register_write_url(app) -> None:
    @app.callback(
        Output(L.URL, "search", allow_duplicate=True),
        Input(L.ID_COLUMN, "value"),
        Input(L.COLOUR_BY, "value"),
        Input(L.VARIABLES, "value"),
        Input(L.MISSING, "value"),
        Input(L.CENTRING, "value"),
        Input(L.SCALING, "value"),
        Input(L.PC_X, "value"),
        Input(L.PC_Y, "value"),
        Input(L.SIGMA_LEVELS, "value"),
        Input(L.ELLIPSE_BY, "value"),
        Input(L.OVERLAYS, "value"),
        Input(L.BIPLOT_SCALING, "value"),
        Input(L.ARROW_LIMIT, "value"),
        Input(L.COMPONENTS, "value"),
        Input(L.CONFIDENCE, "value"),
        Input(L.LOADING_PC, "value"),
        State(L.VARIABLES, "options"),
        State(L.URL, "search"),
        prevent_initial_call=True,
    )
    def write_url(id_column, colour, variables_in, missing, centring, scaling, pc_x, pc_y, sigma, ellipse_by,
                  overlays, biplot, arrow_limit, components, confidence, loading_pc, variable_options, search):
        current, _ = parse_query(search)
        if current.dataset is None or current.present:
            raise PreventUpdate  # in presentation mode the controls show the slide, not the URL
        controls = dict(id_column=id_column, colour=colour, variables_in=variables_in, missing=missing,
                        centring=centring, scaling=scaling, pc_x=pc_x, pc_y=pc_y, sigma=sigma, ellipse_by=ellipse_by,
                        overlays=overlays, biplot=biplot, arrow_limit=arrow_limit, components=components,
                        confidence=confidence, loading_pc=loading_pc)
        all_variables = [option["value"] for option in variable_options or ()]
        return _search_if_changed(current, state_from_controls(current, all_variables, **controls))


def state_from_controls(current: ViewState, all_variables, *, id_column, colour, variables_in, missing, centring,
                        scaling, pc_x, pc_y, sigma, ellipse_by, overlays, biplot, components, confidence,
                        loading_pc, arrow_limit=AUTO) -> ViewState:
    """The view state the controls describe; fields without a control (a wide table lists no variables) keep theirs."""
    overlays = overlays or ()
    chosen = set(variables_in or ())
    return current.replace(
        id_column=None if id_column in (None, AUTO) else id_column,
        colour_by=None if colour in (None, AUTO) else (NO_COLOUR if colour == NO_COLOUR_VALUE else colour),
        variables_off=tuple(v for v in all_variables if v not in chosen) if all_variables else current.variables_off,
        missing=missing or current.missing,
        centring=centring or current.centring,
        scaling=scaling or current.scaling,
        pc_x=int(pc_x or current.pc_x),
        pc_y=int(pc_y or current.pc_y),
        sigma_levels=vm.parse_sigma_levels(sigma, current.sigma_levels),
        ellipse_by=ellipse_by or current.ellipse_by,
        arrows="arrows" in overlays,
        hotelling="hotelling" in overlays,
        labels="labels" in overlays,
        biplot_scaling=biplot or current.biplot_scaling,
        arrow_limit=None if arrow_limit in (None, AUTO) else int(arrow_limit),
        components=None if components in (None, AUTO) else int(components),
        confidence=float(confidence or current.confidence),
        loading_pc=int(loading_pc or current.loading_pc),
    )


def _search_if_changed(current: ViewState, new: ViewState):
    """The new URL, or no update. Any change detaches the view from the saved view it came from."""
    if new == current or current.present:
        raise PreventUpdate
    return "?" + to_query(new.unsaved())


# --- actions: exclusions, transforms, picking, upload ------------------------------------------


def _register_actions(app, services) -> None:
    url_out = Output(L.URL, "search", allow_duplicate=True)

    @app.callback(url_out, Input(L.EXCLUDE_SELECTED, "n_clicks"), State(L.SCORES_GRAPH, "selectedData"),
                  State(L.URL, "search"), prevent_initial_call=True)
    def exclude_selected(_clicks, selected, search):
        current, _ = parse_query(search)
        labels = vm.labels_from_event(selected)
        if not labels:
            raise PreventUpdate
        picked = None if current.picked in labels else current.picked
        left_out = (*vm.excluded_labels(services, current)[0], *labels)
        return _search_if_changed(current, vm.with_exclusions(services, current, left_out).replace(picked=picked))

    @app.callback(url_out, Input({"type": "restore-sample", "index": ALL}, "n_clicks"),
                  Input(L.RESTORE_ALL, "n_clicks"), State(L.URL, "search"), prevent_initial_call=True)
    def restore_samples(_chips, _all, search):
        current, _ = parse_query(search)
        trigger = ctx.triggered_id
        if not ctx.triggered or not ctx.triggered[0].get("value"):
            raise PreventUpdate
        if trigger == L.RESTORE_ALL:
            return _search_if_changed(current, current.replace(excluded=(), excluded_set=None))
        remaining = [label for label in vm.excluded_labels(services, current)[0] if label != trigger["index"]]
        return _search_if_changed(current, vm.with_exclusions(services, current, remaining))

    @app.callback(url_out, Input({"type": "exclude-picked", "index": ALL}, "n_clicks"), State(L.URL, "search"),
                  prevent_initial_call=True)
    def exclude_picked(clicks, search):
        current, _ = parse_query(search)
        if not any(clicks or ()) or current.picked is None:
            raise PreventUpdate
        left_out = (*vm.excluded_labels(services, current)[0], current.picked)
        return _search_if_changed(current, vm.with_exclusions(services, current, left_out).replace(picked=None))

    @app.callback(url_out, Input(L.TRANSFORM_APPLY, "n_clicks"), State(L.TRANSFORM_KIND, "value"),
                  State(L.TRANSFORM_VARIABLE, "value"), State(L.URL, "search"), prevent_initial_call=True)
    def set_transform(_clicks, kind, variable, search):
        current, _ = parse_query(search)
        if not variable or not kind:
            raise PreventUpdate
        pairs = dict(current.transforms)
        pairs[variable] = kind
        return _search_if_changed(current, current.replace(transforms=tuple((v, t) for v, t in pairs.items() if t != "none")))

    @app.callback(url_out, Input({"type": "remove-transform", "index": ALL}, "n_clicks"), State(L.URL, "search"),
                  prevent_initial_call=True)
    def remove_transform(_clicks, search):
        current, _ = parse_query(search)
        if not ctx.triggered or not ctx.triggered[0].get("value"):
            raise PreventUpdate
        variable = ctx.triggered_id["index"]
        return _search_if_changed(current, current.replace(transforms=tuple(p for p in current.transforms if p[0] != variable)))

    @app.callback(url_out, Output(L.NOTICES, "children", allow_duplicate=True),
                  Output(L.MANAGE_LINKS, "data"),
                  Input(L.UPLOAD_RESULT, "data"), State(L.MANAGE_LINKS, "data"), State(L.URL, "search"),
                  prevent_initial_call=True)
    def open_uploaded(result, links, search):
        if not result:
            raise PreventUpdate
        if result.get("error"):
            return no_update, notice_list((), (result["error"],)), no_update
        manage = (result.get("summary") or {}).get("manage")
        links = {**(links or {}), result["token"]: manage} if manage else no_update
        current, _ = parse_query(search)
        if result.get("purpose") == "batch" and current.dataset is not None:
            # Scored against the open view's model; the batch stays a dataset of its own too.
            return _search_if_changed(current, current.replace(batch=result["token"])), no_update, links
        # "About this data" stays closed (it would cover the controls); the upload status points to it.
        return "?" + to_query(ViewState(dataset=result["token"])), no_update, links

    @app.callback(url_out, Input(L.BATCH_REMOVE, "n_clicks"), State(L.URL, "search"), prevent_initial_call=True)
    def stop_scoring_batch(clicks, search):
        if not clicks:
            raise PreventUpdate
        current, _ = parse_query(search)
        return _search_if_changed(current, current.replace(batch=None))

    @app.callback(Output(L.MANAGE_BOX, "children"), Input(L.URL, "search"), Input(L.MANAGE_LINKS, "data"))
    def show_manage_link(search, links):
        state, _ = parse_query(search)
        link = (links or {}).get(state.dataset or "")
        return manage_box(link) if link else None

    @app.callback(Output(L.VARIABLES, "value", allow_duplicate=True), Input(L.VARIABLES_ALL, "n_clicks"),
                  State(L.VARIABLES, "options"), prevent_initial_call=True)
    def include_all_variables(_clicks, options):
        return [option["value"] for option in options or ()]

    @app.callback(Output(L.DOWNLOAD_TABLE, "href"), Output(L.EXPORT_LINKS, "children"), Input(L.URL, "search"))
    def export_links(search):
        state, _ = parse_query(search)
        if state.dataset is None:
            raise PreventUpdate
        query = to_query(state)
        return f"/export/variance.csv?{query}", export_link_list(query, state.saved_view, batch=state.batch is not None)


def _register_clientside(app) -> None:
    app.clientside_callback(
        # From `search`, not `href`: a callback that sets `search` leaves `href` stale.
        "function(search) { return window.location.origin + window.location.pathname + (search || ''); }",
        Output(L.LINK_TEXT, "value"),
        Input(L.URL, "search"),
    )

