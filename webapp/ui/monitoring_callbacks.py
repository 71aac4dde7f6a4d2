"""Thin callbacks of the monitoring page: address -> everything shown; actions -> a new address.

As on the dashboard, the address is the single source of truth: ``show_monitor``
turns ``/m/<code>?...`` into every control and figure; the control, click and
presentation callbacks only write a new query string. Loops are avoided by
comparing states, not strings.

The model's manager (who locked it) holds the manager key in a cookie set by
the manager link (:mod:`webapp.web.monitoring`); only then are uploads removable.
"""

from __future__ import annotations

import logging
from urllib.parse import quote

import flask
from dash import ALL, Input, Output, State, ctx, html, no_update
from dash.exceptions import PreventUpdate

from webapp.analysis.errors import OrdinateError
from webapp.figures.message import message_figure
from webapp.figures.run_charts import picked_position
from webapp.state.monitor_state import (
    MonitorState,
    model_code_from_path,
    monitor_address,
    parse_monitor_query,
    to_monitor_query,
)
from webapp.store.monitor_views import (
    monitor_view,
    monitor_views_for,
    save_monitor_view,
)
from webapp.ui import monitoring_layout as L
from webapp.ui import monitoring_view as mv
from webapp.ui.components import base_url, notice_list

log = logging.getLogger("ordinate")
MANAGER_COOKIE_PREFIX = "ordinate_model_key_"
_HIDDEN = {"display": "none"}
_WORKSPACE_CLASS = "monitor-workspace"


def manager_key(code: str | None) -> str:
    """The manager key this browser holds for model ``code`` (empty when none or outside a request)."""
    if not code:
        return ""
    try:
        return flask.request.cookies.get(MANAGER_COOKIE_PREFIX + code, "")[:128]
    except RuntimeError:
        return ""


def read_address(pathname, search) -> tuple[MonitorState, tuple[str, ...]]:
    code, problems = model_code_from_path(pathname)
    state, notices = parse_monitor_query(search, code)
    return state, (*problems, *notices)


def register_monitoring_callbacks(app, services) -> None:
    _register_show(app, services)
    _register_controls(app)
    _register_pick(app)
    _register_remove(app, services)
    _register_save(app, services)
    _register_presentation(app, services)


# --- address -> page ------------------------------------------------------------------

_SHOW_OUTPUTS = [
    Output(L.TITLE, "children"), Output(L.SUBTITLE, "children"), Output(L.NOTICES, "children"),
    Output(L.NOT_FOUND, "children"), Output(L.NOT_FOUND, "hidden"), Output(L.WORKSPACE, "hidden"),
    Output(L.RULES, "value"), Output(L.RUN_LENGTH, "value"), Output(L.COMPONENT, "options"),
    Output(L.COMPONENT, "value"), Output(L.BAND, "value"), Output(L.WINDOW_FROM, "value"),
    Output(L.WINDOW_TO, "value"), Output(L.REFERENCE, "value"),
    Output(L.T2_GRAPH, "figure"), Output(L.Q_GRAPH, "figure"), Output(L.SCORES_GRAPH, "figure"),
    Output(L.HITS, "children"), Output(L.UPLOADS, "children"), Output(L.PICKED, "children"),
    Output(L.CONTRIBUTIONS_GRAPH, "figure"), Output(L.CONTRIBUTIONS_CARD, "hidden"),
    Output(L.PLACE_GRAPH, "figure"), Output(L.PLACE_GRAPH, "style"),
    Output(L.LINK_TEXT, "value"), Output(L.EXPORTS, "children"), Output(L.SAVED_LIST, "children"),
    Output(L.PRESENT_BAR, "hidden"), Output(L.SLIDE_POSITION, "children"), Output(L.WORKSPACE, "className"),
]


def _register_show(app, services) -> None:
    @app.callback(_SHOW_OUTPUTS, Input(L.URL, "pathname"), Input(L.URL, "search"),
                  Input(L.UPLOAD_RESULT, "data"), Input(L.REMOVED, "data"))
    def show_monitor(pathname, search, upload_result, _removed):
        try:
            return monitor_page(services, pathname, search, upload_result=upload_result)
        except OrdinateError as problem:
            return _problem_page(str(problem))
        except Exception:  # never a traceback on the page
            log.exception("the monitoring page could not be drawn")
            return _problem_page("Something went wrong while drawing this monitoring page. Reload the page; "
                                 "if it happens again, tell the administrator.")

    @app.callback(Output(L.UPLOAD_ZONE, "data-upload-url"), Input(L.URL, "pathname"), Input(L.URL, "search"),
                  Input(L.UPLOAD_BY, "value"))
    def point_uploads_at_the_model(pathname, search, uploaded_by):
        state, _ = read_address(pathname, search)
        locked, _ = mv.locked_model_for(services, state) if state.model else (None, ())
        return upload_url(locked.code, uploaded_by) if locked else ""


def _problem_page(message: str) -> list:
    values = [no_update] * len(_SHOW_OUTPUTS)
    values[2] = notice_list((), (message,))
    return values


def _not_found() -> html.Div:
    return html.Div(className="card not-found-card", children=[
        html.H2("This monitoring link is not known here"),
        html.P("The link may be mistyped or cut short. Ask the colleague who locked the reference model "
               "for its monitoring link, or lock a reference model from a saved view on the dashboard."),
        html.A("Open the start page", href="/", className="small-button"),
    ])


def monitor_page(services, pathname, search, *, upload_result=None) -> list:
    """Every output of ``show_monitor`` for one address (a function so tests can call it without a browser)."""
    state, notices = read_address(pathname, search)
    errors = []
    if isinstance(upload_result, dict) and upload_result.get("error") and ctx.triggered_id == L.UPLOAD_RESULT:
        errors.append(str(upload_result["error"]))
    monitored = mv.load_monitored(services, state) if state.model else None
    if monitored is None:
        empty = message_figure("No monitoring data.")
        return ["Monitoring", "", notice_list(notices, errors), _not_found(), False, True,
                [], 8, [], 1, 3.0, None, None, [], empty, empty, empty, [], [], [], empty, True,
                empty, _HIDDEN, "", [], [], True, "", _WORKSPACE_CLASS]
    state = mv.shown_state(monitored, state)
    notices = (*notices, *monitored.notices)
    locked = monitored.locked
    charts = mv.run_charts(monitored, state, presentation=state.present)
    picked = None
    try:
        picked = mv.picked_sample(services, monitored, state.pick)
    except OrdinateError as problem:
        errors.append(str(problem))
    if state.pick is not None and picked is None and not errors:
        notices = (*notices, f"No new sample has position {state.pick}; nothing is picked.")
    query = to_monitor_query(state)
    link = base_url().rstrip("/") + monitor_address(state)
    title = f"{locked.name} · version {locked.version}"
    subtitle = (f"Reference model locked {locked.locked_at[:16].replace('T', ' ')} UTC · "
                f"{len(locked.reference.labels)} reference samples · {len(monitored.frame)} new samples in "
                f"{len(monitored.uploads)} upload(s)")
    slides = monitor_views_for(services.store, locked.code) if state.present else []
    position = _slide_text(slides, state)
    return [
        title, subtitle, notice_list(notices, errors), [], True, False,
        list(state.rules), state.run_length,
        [{"label": f"PC{i}", "value": i} for i in range(1, monitored.components + 1)], state.component,
        state.band if state.band in L.BAND_CHOICES else 3, state.first, state.last,
        ["on"] if state.reference else [],
        charts["t2"], charts["q"], charts["scores"],
        hits_table(mv.hit_rows(monitored)),
        uploads_table(mv.upload_rows(monitored), removable=bool(manager_key(locked.code))
                      and services.reference_models.check_manager_key(locked.code, manager_key(locked.code))),
        _picked_text(picked),
        picked.contributions if picked else message_figure(""), picked is None,
        picked.place if picked else message_figure(""), {"height": "320px"} if picked else _HIDDEN,
        link, export_links(locked.code, query), saved_list(monitor_views_for(services.store, locked.code)),
        not state.present, position, _WORKSPACE_CLASS + (" is-presenting" if state.present else ""),
    ]


def upload_url(code: str, uploaded_by) -> str:
    by = str(uploaded_by or "").strip()[:100]
    return f"/api/monitor/{quote(code, safe='')}/upload" + (f"?by={quote(by, safe='')}" if by else "")


def export_links(code: str, query: str) -> list:
    return [
        html.A("Monitoring table (CSV)", href=f"/m/{code}/export/monitoring.csv?{query}", download="",
               className="small-button"),
        html.A("Report of this monitoring view (HTML)", href=f"/m/{code}/report.html?{query}", download="",
               className="small-button"),
    ]


def _picked_text(picked) -> list:
    if picked is None:
        return [html.P("Click a new sample on a chart to see its contributions to T² and Q "
                       "and its place on the reference scores plot.", className="quiet")]
    return [html.P([html.Strong(picked.sample), f" · position {picked.position} · upload “{picked.upload_name}” · ",
                    f"T² {picked.t2:.4g} · Q {picked.q:.4g}"])]


def hits_table(rows: list[dict]) -> list:
    if not rows:
        return [html.P("No rule hits among the new samples.", className="quiet")]
    head = html.Tr([html.Th(t) for t in ("Rule", "Statistic", "Positions", "Samples", "Upload")])
    body = [html.Tr([html.Td(r["rule"]), html.Td(r["statistic"]),
                     html.Td(str(r["first"]) if r["first"] == r["last"] else f"{r['first']}–{r['last']}",
                             className="num"),
                     html.Td(r["samples"]), html.Td(r["uploads"], className="wrap")]) for r in rows]
    return [html.Table([html.Thead(head), html.Tbody(body)], className="summary-table monitor-table")]


def uploads_table(rows: list[dict], *, removable: bool) -> list:
    if not rows:
        return [html.P("No uploads yet: add a CSV file of new samples above.", className="quiet")]
    titles = ["File", "Uploaded by", "Time (UTC)", "Samples", "Positions", "Beyond a limit"]
    head = html.Tr([html.Th(t) for t in titles] + ([html.Th("")] if removable else []))
    body = []
    for r in rows:
        cells = [html.Td(r["file_name"], className="wrap"), html.Td(r["uploaded_by"] or "–", className="wrap"),
                 html.Td(r["uploaded_at"][:19].replace("T", " ")), html.Td(str(r["samples"]), className="num"),
                 html.Td(r["positions"], className="num"), html.Td(str(r["flagged"]), className="num")]
        if removable:
            cells.append(html.Td(html.Button("Remove", id={"type": "m-remove", "index": r["upload_id"]},
                                             n_clicks=0, className="small-button",
                                             title=f"Remove the upload “{r['file_name']}” from this model")))
        body.append(html.Tr(cells))
    note = [] if removable else [html.P("Only the model's manager (who locked it, through the manager link) "
                                        "can remove uploads.", className="quiet")]
    return [html.Table([html.Thead(head), html.Tbody(body)], className="summary-table monitor-table"), *note]


def saved_list(views) -> list:
    if not views:
        return [html.P("No saved monitoring views of this model yet.", className="quiet")]
    return [html.Ul(className="saved-items", children=[
        html.Li(className="saved-item", children=[
            html.A(v.title, href=f"/m/{v.model_code}?{v.query}", className="saved-link"),
            html.Span(f" · {v.author}" if v.author else "", className="saved-meta"),
        ]) for v in views
    ])]


def _slide_text(slides, state: MonitorState) -> str:
    ids = [v.view_id for v in slides]
    if state.saved_view in ids:
        return f"Saved view {ids.index(state.saved_view) + 1} of {len(ids)}"
    return f"{len(ids)} saved view(s)" if ids else "No saved views yet: this view is shown."


# --- controls -> address ----------------------------------------------------------------


def state_from_controls(state: MonitorState, rules, run_length, component, band, first, last, reference
                        ) -> MonitorState:
    """The state the controls ask for; a value the state cannot hold keeps the current one."""
    changes = dict(rules=tuple(r for r in (rules or ()) if r in L.RULE_WORDS), reference=bool(reference))
    for field, value in (("run_length", run_length), ("component", component), ("band", band)):
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            changes[field] = int(value) if field != "band" else float(value)
    for field, value in (("first", first), ("last", last)):
        changes[field] = int(value) if isinstance(value, (int, float)) and value >= 0 else None
    try:
        new = state.replace(**changes)
    except ValueError:
        new = state.replace(rules=changes["rules"], reference=changes["reference"])
    # Any change by hand leaves the saved view the page was opened from.
    return new if new == state else new.replace(saved_view=None)


def _register_controls(app) -> None:
    @app.callback(Output(L.URL, "search"), Input(L.RULES, "value"), Input(L.RUN_LENGTH, "value"),
                  Input(L.COMPONENT, "value"), Input(L.BAND, "value"), Input(L.WINDOW_FROM, "value"),
                  Input(L.WINDOW_TO, "value"), Input(L.REFERENCE, "value"), Input(L.WINDOW_ALL, "n_clicks"),
                  State(L.URL, "pathname"), State(L.URL, "search"), prevent_initial_call=True)
    def write_url(rules, run_length, component, band, first, last, reference, _all, pathname, search):
        state, _ = read_address(pathname, search)
        if state.model is None:
            raise PreventUpdate
        if ctx.triggered_id == L.WINDOW_ALL:
            first = last = None
        new = state_from_controls(state, rules, run_length, component, band, first, last, reference)
        if new == state:
            raise PreventUpdate
        return "?" + to_monitor_query(new)


def _register_pick(app) -> None:
    @app.callback(Output(L.URL, "search", allow_duplicate=True), Input(L.T2_GRAPH, "clickData"),
                  Input(L.Q_GRAPH, "clickData"), Input(L.SCORES_GRAPH, "clickData"),
                  State(L.URL, "pathname"), State(L.URL, "search"), prevent_initial_call=True)
    def pick(t2_click, q_click, scores_click, pathname, search):
        click = {L.T2_GRAPH: t2_click, L.Q_GRAPH: q_click, L.SCORES_GRAPH: scores_click}.get(ctx.triggered_id)
        position = picked_position(click)
        state, _ = read_address(pathname, search)
        if position is None or state.model is None or state.pick == position:
            raise PreventUpdate
        return "?" + to_monitor_query(state.replace(pick=position))


def _register_remove(app, services) -> None:
    @app.callback(Output(L.REMOVED, "data"), Output(L.NOTICES, "children", allow_duplicate=True),
                  Input({"type": "m-remove", "index": ALL}, "n_clicks"), State(L.URL, "pathname"),
                  prevent_initial_call=True)
    def remove(clicks, pathname):
        if not ctx.triggered_id or not any(clicks or ()):
            raise PreventUpdate
        code, _ = model_code_from_path(pathname)
        upload_id = ctx.triggered_id["index"]
        key = manager_key(code)
        if not code or not key or not services.reference_models.remove_upload(code, upload_id, key):
            return no_update, notice_list((), ("Nothing was removed: only the model's manager can remove uploads. "
                                               "Open the manager link you received when the model was locked.",))
        return {"removed": upload_id}, notice_list(("The upload was removed from this model.",), ())


def _register_save(app, services) -> None:
    @app.callback(Output(L.SAVE_RESULT, "children"), Output(L.URL, "search", allow_duplicate=True),
                  Input(L.SAVE_CONFIRM, "n_clicks"), State(L.SAVE_TITLE, "value"), State(L.SAVE_NOTE, "value"),
                  State(L.SAVE_AUTHOR, "value"), State(L.URL, "pathname"), State(L.URL, "search"),
                  prevent_initial_call=True)
    def save(_clicks, title, note, author, pathname, search):
        state, _ = read_address(pathname, search)
        if state.model is None or services.reference_models.get(state.model) is None:
            return "Nothing was saved: this monitoring link is not known here.", no_update
        query = to_monitor_query(state.replace(saved_view=None, present=False))
        view = save_monitor_view(services.store, state.model, query, title=title or "", note=note or "",
                                 author=author or "")
        return (f"Saved as “{view.title}”.",
                "?" + to_monitor_query(state.replace(saved_view=view.view_id, present=False)))


def presentation_step(services, state: MonitorState, action: str) -> MonitorState:
    """The state after a presentation button: slides are this model's saved monitoring views, oldest first."""
    if action == L.PRESENT_EXIT:
        return state.replace(present=False)
    views = monitor_views_for(services.store, state.model) if state.model else []
    if not views:
        return state.replace(present=action != L.PRESENT_EXIT)
    ids = [v.view_id for v in views]
    here = ids.index(state.saved_view) if state.saved_view in ids else -1
    if action == L.PRESENT_OPEN:
        target = max(here, 0)
    elif action == L.SLIDE_NEXT:
        target = min(here + 1, len(ids) - 1)
    else:
        target = max(here - 1, 0)
    view = monitor_view(services.store, ids[target])
    slide, _ = parse_monitor_query(view.query, state.model)
    return slide.replace(saved_view=view.view_id, present=True)


def _register_presentation(app, services) -> None:
    @app.callback(Output(L.URL, "search", allow_duplicate=True), Input(L.PRESENT_OPEN, "n_clicks"),
                  Input(L.SLIDE_PREV, "n_clicks"), Input(L.SLIDE_NEXT, "n_clicks"), Input(L.PRESENT_EXIT, "n_clicks"),
                  State(L.URL, "pathname"), State(L.URL, "search"), prevent_initial_call=True)
    def navigate(_open, _prev, _next, _exit, pathname, search):
        state, _ = read_address(pathname, search)
        if state.model is None or not ctx.triggered_id:
            raise PreventUpdate
        new = presentation_step(services, state, ctx.triggered_id)
        if new == state:
            raise PreventUpdate
        return "?" + to_monitor_query(new)
