"""The monitoring page (``/m/<code>``): structure and component ids.

Values are filled by :mod:`webapp.ui.monitoring_callbacks` from the address.
The page is its own small Dash app mounted under ``/m/`` on the same server
(see :mod:`webapp.web.monitoring`), so none of these ids meet the dashboard's.
"""

from __future__ import annotations

from dash import dcc, html

from webapp.figures import GRAPH_CONFIG
from webapp.figures.run_charts import MONITORING_CAUTION
from webapp.state.monitor_state import MAX_RUN_LENGTH, MIN_RUN_LENGTH, MONITOR_RULES

URL = "m-url"
UPLOAD_RESULT = "upload-result"  # the store assets/upload.js writes to
UPLOAD_ZONE = "upload-zone"  # the zone assets/upload.js sends from
UPLOAD_BY = "m-upload-by"
NOTICES = "m-notices"
TITLE = "m-title"
SUBTITLE = "m-subtitle"
NOT_FOUND = "m-not-found"
WORKSPACE = "m-workspace"
LINK_TEXT = "m-link-text"
EXPORTS = "m-exports"

RULES = "m-rules"
RUN_LENGTH = "m-run-length"
COMPONENT = "m-component"
BAND = "m-band"
REFERENCE = "m-reference"
WINDOW_FROM = "m-from"
WINDOW_TO = "m-to"
WINDOW_ALL = "m-window-all"

T2_GRAPH = "m-t2-graph"
Q_GRAPH = "m-q-graph"
SCORES_GRAPH = "m-scores-graph"
HITS = "m-hits"
UPLOADS = "m-uploads"
PICKED = "m-picked"
CONTRIBUTIONS_GRAPH = "m-contributions-graph"
CONTRIBUTIONS_CARD = "m-contributions-card"
PLACE_GRAPH = "m-place-graph"
REMOVED = "m-removed"

SAVE_TITLE = "m-save-title"
SAVE_NOTE = "m-save-note"
SAVE_AUTHOR = "m-save-author"
SAVE_CONFIRM = "m-save-confirm"
SAVE_RESULT = "m-save-result"
SAVED_LIST = "m-saved-list"
PRESENT_OPEN = "m-present-open"
PRESENT_BAR = "m-present-bar"
SLIDE_PREV = "m-slide-prev"
SLIDE_NEXT = "m-slide-next"
PRESENT_EXIT = "m-present-exit"
SLIDE_POSITION = "m-slide-position"

RULE_WORDS = {
    "beyond-limit": "A point beyond its limit",
    "run-above-median": "A run of points above the reference median",
}
assert set(RULE_WORDS) == set(MONITOR_RULES)
BAND_CHOICES = (1, 2, 2.5, 3)


def _graph(graph_id: str, height: int, class_name: str = "run-graph") -> dcc.Graph:
    return dcc.Graph(id=graph_id, config=GRAPH_CONFIG, className=class_name, style={"height": f"{height}px"})


def build_monitor_layout(config) -> html.Div:
    limit = f"{config.max_upload_mb:g}"
    return html.Div(className="ordinate monitoring", children=[
        dcc.Location(id=URL, refresh=False),
        dcc.Store(id=UPLOAD_RESULT),
        dcc.Store(id=REMOVED),
        html.Header(className="top-bar", children=[
            html.A("Ordinate", href="/", className="wordmark", title="Start page"),
            html.Div(className="dataset-heading", children=[
                html.H1(id=TITLE, className="dataset-title"),
                html.Span(id=SUBTITLE, className="monitor-subtitle"),
            ]),
            html.Div(className="view-actions", children=[
                html.Button("Present", id=PRESENT_OPEN, n_clicks=0, className="bar-button",
                            title="Step through the saved monitoring views of this model, full screen"),
            ]),
        ]),
        html.Div(id=PRESENT_BAR, className="present-bar", hidden=True, children=[
            html.Button("‹ Previous", id=SLIDE_PREV, n_clicks=0, className="small-button"),
            html.Span(id=SLIDE_POSITION, className="slide-position"),
            html.Button("Next ›", id=SLIDE_NEXT, n_clicks=0, className="small-button"),
            html.Button("End presentation", id=PRESENT_EXIT, n_clicks=0, className="small-button"),
        ]),
        html.Div(id=NOTICES, className="notices", role="status", **{"aria-live": "polite"}),
        html.Div(id=NOT_FOUND, className="not-found", hidden=True),
        html.Div(id=WORKSPACE, className="monitor-workspace", children=[
            _controls(),
            html.Div(className="monitor-grid", children=[
                html.Section(className="card monitor-charts", children=[
                    _graph(T2_GRAPH, 340),
                    _graph(Q_GRAPH, 340),
                    _graph(SCORES_GRAPH, 340),
                ]),
                html.Aside(className="monitor-side", children=[
                    html.P(MONITORING_CAUTION, className="caution monitor-caution", role="note"),
                    html.Section(className="card", children=[
                        html.H2("Picked sample", className="card-head"),
                        html.Div(id=PICKED, children=html.P(
                            "Click a new sample on a chart to see its contributions to T² and Q "
                            "and its place on the reference scores plot.", className="quiet")),
                        _graph(PLACE_GRAPH, 320, "place-graph"),
                    ]),
                    html.Section(className="card", children=[
                        html.H2("Rule hits", className="card-head"),
                        html.Div(id=HITS, className="table-wrap"),
                    ]),
                ]),
            ]),
            html.Section(id=CONTRIBUTIONS_CARD, className="card", hidden=True, children=[
                html.H2("Contributions of the picked sample to T² and Q", className="card-head"),
                _graph(CONTRIBUTIONS_GRAPH, 360, "contributions-graph"),
            ]),
            html.Div(className="monitor-grid monitor-lower", children=[
                html.Section(className="card", children=[
                    html.H2("Uploads", className="card-head"),
                    html.Div(className="monitor-upload", children=[
                        html.Label(["Uploaded by (free text) ",
                                    dcc.Input(id=UPLOAD_BY, type="text", maxLength=100, debounce=True,
                                              className="text-input", placeholder="name or instrument")]),
                        # assets/upload.js adds the file input and streams the file to data-upload-url.
                        html.Div(
                            id=UPLOAD_ZONE, className="upload-zone monitor-upload-zone", tabIndex="0", role="button",
                            title=f"Drop a CSV or TSV file of new samples here, or press to choose one "
                                  f"(up to {limit} MB)",
                            **{"data-limit-mb": limit, "data-upload-url": "",
                               "data-received-note": "Its samples are appended to the charts."},
                            children=[
                                html.Span("Add new samples", className="upload-label"),
                                html.Span(f"CSV · drop or choose · up to {limit} MB", className="upload-hint"),
                                html.Progress(id="upload-progress", className="upload-progress", max=100,
                                              hidden=True),
                            ]),
                        html.Div(id="upload-status", className="upload-status", role="status",
                                 **{"aria-live": "polite"}),
                    ]),
                    html.Div(id=UPLOADS, className="table-wrap"),
                ]),
                html.Section(className="card", children=[
                    html.H2("Share and save", className="card-head"),
                    html.Div(className="share", children=[
                        html.Span("Monitoring view link", className="field"),
                        dcc.Input(id=LINK_TEXT, type="text", readOnly=True, className="link-text"),
                        dcc.Clipboard(target_id=LINK_TEXT, className="copy-button",
                                      title="Copy the monitoring view link"),
                    ]),
                    html.Div(id=EXPORTS, className="monitor-exports"),
                    html.Div(className="monitor-save", children=[
                        dcc.Input(id=SAVE_TITLE, type="text", maxLength=200, placeholder="Title of the saved view",
                                  className="text-input"),
                        dcc.Textarea(id=SAVE_NOTE, placeholder="Note (optional)", className="note-input"),
                        dcc.Input(id=SAVE_AUTHOR, type="text", maxLength=100, placeholder="Your name (optional)",
                                  className="text-input"),
                        html.Button("Save this monitoring view", id=SAVE_CONFIRM, n_clicks=0,
                                    className="primary-button"),
                        html.Div(id=SAVE_RESULT, role="status"),
                    ]),
                    html.Div(id=SAVED_LIST),
                ]),
            ]),
        ]),
    ])


def _controls() -> html.Div:
    return html.Div(className="toolbar monitor-controls", children=[
        html.Fieldset(className="inline-field", children=[
            html.Legend("Run rules"),
            dcc.Checklist(id=RULES, options=[{"label": RULE_WORDS[r], "value": r} for r in MONITOR_RULES],
                          value=list(MONITOR_RULES), inline=True, className="check"),
        ]),
        html.Label(className="inline-field", children=[
            "Run length ",
            dcc.Input(id=RUN_LENGTH, type="number", min=MIN_RUN_LENGTH, max=MAX_RUN_LENGTH, step=1, value=8,
                      debounce=True, className="k-select"),
        ]),
        html.Label(className="inline-field", children=[
            "Component ", dcc.Dropdown(id=COMPONENT, clearable=False, searchable=False, className="pc-select"),
        ]),
        html.Label(className="inline-field", children=[
            "Band ±k sd ", dcc.Dropdown(id=BAND, options=[{"label": f"{b:g}", "value": b} for b in BAND_CHOICES],
                                        clearable=False, searchable=False, className="pc-select"),
        ]),
        html.Label(className="inline-field", children=[
            "Window: positions ",
            dcc.Input(id=WINDOW_FROM, type="number", min=0, step=1, debounce=True, placeholder="first",
                      className="k-select"),
            " to ",
            dcc.Input(id=WINDOW_TO, type="number", min=0, step=1, debounce=True, placeholder="last",
                      className="k-select"),
            html.Button("All", id=WINDOW_ALL, n_clicks=0, className="small-button"),
        ]),
        dcc.Checklist(id=REFERENCE, options=[{"label": "Show the reference period", "value": "on"}],
                      value=["on"], className="check"),
    ])
