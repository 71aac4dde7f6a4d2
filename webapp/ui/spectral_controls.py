"""Callbacks for wide data and spectra: the variables chooser, the spectral steps, overlays, the spectra card.

Same rule as :mod:`webapp.ui.callbacks`: the URL is the single source of
truth. ``show_spectral_controls`` turns the URL into these controls; the
others turn a user's action into a new URL, and do nothing when the state they
describe equals the URL's (so setting a control from the URL never loops).
"""

from __future__ import annotations

import hashlib
import logging

from dash import Input, Output, State, ctx, html, no_update
from dash.exceptions import PreventUpdate

from webapp.analysis.errors import OrdinateError
from webapp.analysis.spectra import parse_ranges, range_text
from webapp.figures.message import message_figure
from webapp.figures.text import count_text
from webapp.state import MAX_OVERLAID, ViewState, ViewStateError, parse_query, to_query
from webapp.ui import layout as L
from webapp.ui import spectral_layout as S
from webapp.ui import view_model as vm
from webapp.ui.wide_variables import after_search, counts_text, matching, with_variables_off

log = logging.getLogger("ordinate")
_DEFAULT_SAVGOL = (15, 2, 1)
_SHOWN_MATCHES = 5
MAX_OVERLAY_CHOICES = 10  # components offered for overlaying on the loading spectrum

_CONTROL_OUTPUTS = [
    Output(S.VARIABLES_FIELD, "hidden"),
    Output(S.WIDE_FIELD, "hidden"),
    Output(S.TRANSFORM_FIELD, "hidden"),
    Output(S.VARIABLE_COUNTS, "children"),
    Output(S.SPECTRAL_FIELD, "hidden"),
    Output(S.RANGES_INPUT, "value"),
    Output(S.AXIS_SPAN, "children"),
    Output(S.ROW_CORRECTION, "value"),
    Output(S.SAVGOL_ON, "value"),
    Output(S.SAVGOL_WINDOW, "value"),
    Output(S.SAVGOL_ORDER, "value"),
    Output(S.SAVGOL_DERIVATIVE, "value"),
    Output(S.STEP_ORDER, "children"),
    Output(S.OVERLAY_BOX, "hidden"),
    Output(S.LOADING_OVERLAY, "options"),
    Output(S.LOADING_OVERLAY, "value"),
    Output(S.SPECTRA_CARD, "hidden"),
    Output(S.ROWS_ARE, "value"),
]


def register_spectral_controls(app, services) -> None:
    url_out = Output(L.URL, "search", allow_duplicate=True)

    @app.callback(_CONTROL_OUTPUTS, Input(L.URL, "search"))
    def show_spectral_controls(search):
        state, _ = parse_query(search)
        view = _view(services, state)
        if view is None:
            return [False, True, False, "", True, "", "", "none", [], 15, 2, 1, "", True, [], [], True, state.rows_are]
        return control_values(view)

    @app.callback(url_out, Output(S.SPECTRAL_PROBLEM, "children"),
                  Input(S.RANGES_INPUT, "value"), Input(S.ROW_CORRECTION, "value"), Input(S.SAVGOL_ON, "value"),
                  Input(S.SAVGOL_WINDOW, "value"), Input(S.SAVGOL_ORDER, "value"), Input(S.SAVGOL_DERIVATIVE, "value"),
                  State(L.URL, "search"), prevent_initial_call=True)
    def write_spectral_steps(ranges, row_correction, savgol_on, window, order, derivative, search):
        current, _ = parse_query(search)
        if current.dataset is None or current.present:
            raise PreventUpdate
        try:
            new = spectral_state(current, ranges, row_correction, savgol_on, window, order, derivative)
        except (OrdinateError, ViewStateError) as problem:
            return no_update, str(problem)
        if new == current:
            return no_update, ""
        return "?" + to_query(new.unsaved()), ""

    @app.callback(url_out, Output(S.SEARCH_STATUS, "children", allow_duplicate=True),
                  Input(S.SEARCH_OUT, "n_clicks"), Input(S.SEARCH_IN, "n_clicks"), Input(S.SEARCH_ONLY, "n_clicks"),
                  Input(S.VARIABLES_EVERY, "n_clicks"), Input(S.VARIABLES_NONE, "n_clicks"),
                  State(S.VARIABLE_SEARCH, "value"), State(L.URL, "search"), prevent_initial_call=True)
    def choose_variables(_out, _in, _only, _every, _none, pattern, search):
        current, _ = parse_query(search)
        if current.dataset is None or current.present or not ctx.triggered or not ctx.triggered[0].get("value"):
            raise PreventUpdate
        names = _variable_names(services, current)
        action = {S.SEARCH_OUT: "out", S.SEARCH_IN: "in", S.SEARCH_ONLY: "only"}.get(ctx.triggered_id)
        if action is None:
            new = with_variables_off(services, current, () if ctx.triggered_id == S.VARIABLES_EVERY else names)
        elif not matching(names, pattern):
            return no_update, "No variable matches; nothing changed."
        else:
            new = after_search(services, current, names, pattern, action)
        if new == current:
            return no_update, "Nothing to change."
        return "?" + to_query(new.unsaved()), ""

    @app.callback(Output(S.SEARCH_STATUS, "children"), Input(S.VARIABLE_SEARCH, "value"), State(L.URL, "search"),
                  prevent_initial_call=True)
    def count_matches(pattern, search):
        current, _ = parse_query(search)
        if current.dataset is None:
            raise PreventUpdate
        return matches_text(matching(_variable_names(services, current), pattern), pattern)

    @app.callback(url_out, Input(S.ROWS_ARE, "value"), State(L.URL, "search"), prevent_initial_call=True)
    def write_layout(rows_are, search):
        current, _ = parse_query(search)
        if current.dataset is None or current.present or rows_are in (None, current.rows_are):
            raise PreventUpdate
        # Other names and shapes: start from the default view of the file read the other way.
        return "?" + to_query(ViewState(dataset=current.dataset, rows_are=rows_are))

    @app.callback(url_out, Input(S.LOADING_OVERLAY, "value"), State(L.URL, "search"), prevent_initial_call=True)
    def write_overlay(chosen, search):
        current, _ = parse_query(search)
        if current.dataset is None or current.present:
            raise PreventUpdate
        new = current.replace(loading_overlay=tuple(int(c) for c in (chosen or ()))[:MAX_OVERLAID])
        if new == current:
            raise PreventUpdate
        return "?" + to_query(new.unsaved())

    @app.callback(Output(S.SPECTRA_GRAPH, "figure"), Output(S.SPECTRA_SHOWN, "data"),
                  Input(L.SHOWN_FIRST, "data"), State(L.URL, "search"), State(S.SPECTRA_SHOWN, "data"),
                  prevent_initial_call=True)
    def show_spectra(_first, search, shown):
        state, _ = parse_query(search)
        view = _view(services, state)
        if view is None or view.controls.axis_span is None:
            raise PreventUpdate
        key = hashlib.sha256(repr(view.figure_keys.get("spectra")).encode()).hexdigest()[:24]
        if key == shown:
            raise PreventUpdate
        try:
            figure = view.spectra_figure
        except OrdinateError as error:
            return message_figure(f"This panel could not be drawn: {error}"), None
        except Exception:  # never a traceback in the page
            log.exception("Drawing the spectra for %s failed", search)
            return message_figure("The spectra could not be drawn because of a problem on the server."), None
        return (figure if figure is not None else message_figure("This data has no variable axis.")), key


def _view(services, state: ViewState):
    """The view of ``state`` as drawn (None when there is none to draw controls for)."""
    if state.dataset is None:
        return None
    shown, _slides, _notices = vm.effective_state(services, state)
    try:
        view = vm.build_view(services, shown)
    except vm.DatasetNotFound:
        return None
    except Exception:  # the main view reports problems
        log.exception("Reading the spectral controls of %s failed", state.dataset)
        return None
    return view


def control_values(view) -> list:
    """The values of ``_CONTROL_OUTPUTS`` for a view."""
    s, controls = view.state, view.controls
    has_axis = controls.axis_span is not None
    sg = s.savgol or _DEFAULT_SAVGOL
    pcs = [option["value"] for option in controls.pc_options][:MAX_OVERLAY_CHOICES]
    span = "" if not has_axis else (
        f"The axis ({controls.axis_label}) runs from {controls.axis_span[0]:g} to {controls.axis_span[1]:g}.")
    return [
        controls.wide,
        not controls.wide,
        controls.wide,
        counts_text(controls.variables_used, controls.variables_total) if controls.variables_total else "",
        not has_axis,
        range_text(s.ranges).replace("–", "-") if s.ranges else "",
        span,
        s.row_correction,
        ["on"] if s.savgol is not None else [],
        sg[0], sg[1], sg[2],
        step_order_text(view.steps) if view.steps else "",
        not has_axis,
        [{"label": f"PC{a}", "value": a} for a in pcs],
        [a for a in s.loading_overlay if a in pcs],
        not has_axis,
        s.rows_are,
    ]


def step_order_text(steps) -> list:
    """'Preprocessing, in this order: range 1100–1700 → SNV → … → mean-centring.' as page components."""
    return [html.Span("Preprocessing, in this order: ", className="step-order-lead"), " → ".join(steps) + "."]


def spectral_state(current: ViewState, ranges_text, row_correction, savgol_on, window, order, derivative) -> ViewState:
    """The state the spectral controls describe; raises ``OrdinateError``/``ViewStateError`` with a readable message."""
    ranges = parse_ranges(ranges_text) if (ranges_text or "").strip() else ()
    savgol = None
    if savgol_on:
        try:
            settings = (int(window), int(order), int(derivative))
        except (TypeError, ValueError):
            raise OrdinateError("Choose a Savitzky–Golay window, order and derivative.") from None
        try:
            savgol = ViewState(savgol=settings).savgol
        except ViewStateError:
            raise OrdinateError(f"A Savitzky–Golay filter needs a window longer than its order ({order}) and a "
                                f"derivative no higher than the order; choose a higher order or a lower "
                                "derivative.") from None
    return current.replace(ranges=ranges, row_correction=row_correction or "none", savgol=savgol)


def matches_text(matches, pattern) -> str:
    if not (pattern or "").strip():
        return ""
    if not matches:
        return "No variable matches."
    shown = ", ".join(str(m) for m in matches[:_SHOWN_MATCHES]) + (", …" if len(matches) > _SHOWN_MATCHES else "")
    return f"{count_text(len(matches))} variable(s) match: {shown}"


def _variable_names(services, state: ViewState) -> list[str]:
    record = services.store.dataset(state.dataset)
    if record is None:
        raise PreventUpdate
    table = services.compute.table(record, state.rows_are)
    label_column = state.id_column if state.id_column in table.frame.columns else table.id_column
    return [c for c in table.numeric_columns if c != label_column]
