"""The page: a recipe rail on the left, four analysis cards on the right.

Only structure lives here; values and options are filled by callbacks from the
URL (see :mod:`webapp.ui.callbacks`). Component ids are the module constants
below so callbacks and tests never spell them twice.
"""

from __future__ import annotations

from dash import dcc, html

from webapp.figures import GRAPH_CONFIG
from webapp.figures.text import level_percent
from webapp.state import BIPLOT_SCALINGS, CENTRINGS, MISSING_POLICIES, PAGE_ARROWS, SCALINGS, TRANSFORMS
from webapp.ui import spectral_layout as S

URL = "url"
UPLOAD_RESULT = "upload-result"
# While parallel analysis runs after a view was drawn, the page asks every half second
# whether it has finished, then redraws what depends on the recommended K.
PARALLEL_POLL = "parallel-poll"
PARALLEL_DONE = "parallel-done"
PARALLEL_POLL_MS = 500
# Fingerprints of what the page shows, so a redraw sends only the panels that changed.
SHOWN_FIRST = "shown-first"
SHOWN_REST = "shown-rest"
MANAGE_LINKS = "manage-links"
MANAGE_BOX = "manage-box"
NOTICES = "notices"
FIT_PROGRESS = "fit-progress"  # partitions done while a long-data fit runs (written by the poll)
DATASET_TITLE = "dataset-title"
DATASET_SUMMARY = "dataset-summary"
DATASET_DETAILS = "dataset-details"
NOT_FOUND = "not-found"
WORKSPACE = "workspace"
LINK_TEXT = "link-text"
COPY_LINK = "copy-link"

ID_COLUMN = "id-column"
COLOUR_BY = "colour-by"
VARIABLES = "variables"
VARIABLES_ALL = "variables-all"
TRANSFORM_VARIABLE = "transform-variable"
TRANSFORM_KIND = "transform-kind"
TRANSFORM_LIST = "transform-list"
TRANSFORM_APPLY = "transform-apply"
MISSING = "missing"
CENTRING = "centring"
SCALING = "scaling"
EXCLUDED_LIST = "excluded-list"
RESTORE_ALL = "restore-all"
RECIPE_WORDS = "recipe-words"

PC_X = "pc-x"
PC_Y = "pc-y"
SIGMA_LEVELS = "sigma-levels"
ELLIPSE_BY = "ellipse-by"
ELLIPSE_FIELD = "ellipse-field"  # hidden when the view has no groups: one ellipse set is all there is
OVERLAYS = "overlays"
BIPLOT_SCALING = "biplot-scaling"
ARROW_LIMIT = "arrow-limit"
SCORES_GRAPH = "scores-graph"
SELECTION_BAR = "selection-bar"
EXCLUDE_SELECTED = "exclude-selected"

COMPONENTS = "components"
COMPONENT_ADVICE = "component-advice"
VARIANCE_TABLE = "variance-table"
VARIANCE_GRAPH = "variance-graph"
COPY_TABLE = "copy-table"
DOWNLOAD_TABLE = "download-table"
EXPORT_LINKS = "export-links"

CONFIDENCE = "confidence"
DIAGNOSTICS_GRAPH = "diagnostics-graph"
FLAGGED_LIST = "flagged-list"
CONTRIBUTIONS = "contributions"
BATCH_BUTTON = "batch-button"
BATCH_PANEL = "batch-panel"
BATCH_REMOVE = "batch-remove"

LOADING_PC = "loading-pc"
LOADINGS_GRAPH = "loadings-graph"
CIRCLE_GRAPH = "circle-graph"
PROVENANCE = "provenance"

APP_ROOT = "app-root"
ORIGIN_VIEW = "origin-view"
SAVE_OPEN = "save-open"
SAVE_PANEL = "save-panel"
SAVE_TITLE = "save-title"
SAVE_NOTE = "save-note"
SAVE_AUTHOR = "save-author"
SAVE_FIGURE = "save-figure"
SAVE_CONFIRM = "save-confirm"
SAVE_CANCEL = "save-cancel"
SAVE_RESULT = "save-result"
SAVED_BANNER = "saved-banner"
SAVED_LIST = "saved-list"
PRESENT_OPEN = "present-open"
PRESENT_BAR = "present-bar"
SLIDE_PREV = "slide-prev"
SLIDE_NEXT = "slide-next"
SLIDE_POSITION = "slide-position"
PRESENT_EXIT = "present-exit"
FULL_SCREEN = "full-screen"
SLIDE_FIRST = "slide-first"
SLIDE_LAST = "slide-last"
FOLLOW_START = "follow-start"
FOLLOW_LINK = "follow-link"
FOLLOW_SESSION = "follow-session"  # the presenter's {code, key}: this tab only, never in a URL
FOLLOW_REVISION = "follow-revision"  # the presenter's revision an attendee's page shows
FOLLOW_POLL = "follow-poll"
FOLLOW_POLL_MS = 400
FOLLOW_BANNER = "follow-banner"
LOCK_PANEL = "lock-panel"
LOCK_NAME = "lock-name"
LOCK_CONFIRM = "lock-confirm"
LOCK_RESULT = "lock-result"
LOCKED_LIST = "locked-list"

CONFIDENCE_CHOICES = (0.9, 0.95, 0.99, 0.999)
SLIDE_FIGURE_WORDS = {
    "scores": "Scores plot / biplot",
    "variance": "Variance explained",
    "diagnostics": "T² and Q diagnostics",
    "loadings": "Loadings and correlation circle",
}
ARROW_LIMIT_CHOICES = (3, 5, 10, 15, 20, 30, 50, 100)
_WORDS = {
    "drop": "Skip incomplete samples",
    "mean": "Fill with the mean",
    "iterative": "Fill by iterative PCA",
    "unit": "Unit variance (autoscaling)",
    "none": "None",
    "pareto": "Pareto",
    "range": "Range",
    "mean_centre": "Mean-centre",
    "correlation": "Correlation biplot",
    "distance": "Distance biplot",
}


def build_layout(config) -> html.Div:
    return html.Div(
        id=APP_ROOT,
        className="ordinate",
        children=[
            dcc.Location(id=URL, refresh=False),
            dcc.Store(id=UPLOAD_RESULT),
            dcc.Interval(id=PARALLEL_POLL, interval=PARALLEL_POLL_MS, disabled=True),
            dcc.Store(id=PARALLEL_DONE),
            dcc.Store(id=SHOWN_FIRST),
            dcc.Store(id=SHOWN_REST),
            dcc.Store(id=ORIGIN_VIEW, storage_type="session"),
            dcc.Store(id=FOLLOW_SESSION, storage_type="session"),
            dcc.Store(id=FOLLOW_REVISION),
            dcc.Interval(id=FOLLOW_POLL, interval=FOLLOW_POLL_MS, disabled=True),
            # Manage links of datasets uploaded from this browser: kept locally, never in the URL.
            dcc.Store(id=MANAGE_LINKS, storage_type="local"),
            _top_bar(config),
            _save_panel(),
            _present_bar(),
            html.Div(id=FOLLOW_BANNER, className="follow-banner", role="status", hidden=True),
            html.Div(id=NOTICES, className="notices", role="status", **{"aria-live": "polite"}),
            html.Div(id=FIT_PROGRESS, className="notices fit-progress", role="status"),
            html.Div(id=NOT_FOUND, className="not-found", hidden=True),
            html.Div(id=WORKSPACE, className="workspace", children=[_recipe_rail(), _cards()]),
        ],
    )


def _top_bar(config) -> html.Header:
    limit = f"{config.max_upload_mb:g}"
    return html.Header(
        className="top-bar",
        children=[
            html.A("Ordinate", href="/", className="wordmark", title="Start page"),
            html.Div(className="dataset-heading", children=[
                html.H1(id=DATASET_TITLE, className="dataset-title"),
                html.Details(id=DATASET_DETAILS, className="dataset-summary", children=[
                    html.Summary("About this data"),
                    html.Div(className="summary-popover", children=[
                        html.Div(id=DATASET_SUMMARY),
                        S.layout_choice(),
                        html.Div(id=MANAGE_BOX, className="manage-box"),
                    ]),
                ]),
            ]),
            # assets/upload.js adds the file input and streams the file to /api/upload.
            html.Div(
                id="upload-zone",
                className="upload-zone",
                tabIndex="0",
                role="button",
                title=f"Drop a CSV or TSV file here, or press to choose one (up to {limit} MB)",
                **{"data-limit-mb": limit},
                children=[
                    html.Span("Load a CSV", className="upload-label"),
                    html.Span(f"drop or choose · up to {limit} MB", className="upload-hint"),
                    html.Progress(id="upload-progress", className="upload-progress", max=100, hidden=True),
                ],
            ),
            html.Div(id="upload-status", className="upload-status", role="status", **{"aria-live": "polite"}),
            html.Div(className="view-actions", children=[
                html.Button("Save view", id=SAVE_OPEN, n_clicks=0, className="bar-button"),
                html.Button("Present", id=PRESENT_OPEN, n_clicks=0, className="bar-button",
                            title="Step through this dataset's saved views, full screen"),
            ]),
            *([html.Form(html.Button("Sign out", className="bar-button"), action="/sign-out", method="POST")]
              if config.access_key else []),
            html.Div(className="share", children=[
                html.Label([html.Span("View link", className="visually-hidden"),
                            dcc.Input(id=LINK_TEXT, readOnly=True, className="link-text")]),
                dcc.Clipboard(id=COPY_LINK, target_id=LINK_TEXT, title="Copy the view link",
                              className="copy-button"),
            ]),
        ],
    )


def _save_panel() -> html.Section:
    return html.Section(id=SAVE_PANEL, className="save-panel", hidden=True, **{"aria-label": "Save this view"}, children=[
        html.H2("Save this view"),
        html.P("A saved view never changes: its short link reopens exactly this analysis, for anyone who has the link.",
               className="quiet"),
        _field("Title", dcc.Input(id=SAVE_TITLE, type="text", maxLength=200, className="text-input",
                                  placeholder="e.g. Site comparison, PC1–PC2")),
        _field("Note (Markdown)", dcc.Textarea(id=SAVE_NOTE, maxLength=20000, className="note-input",
                                               placeholder="What the team should see in this view")),
        html.P("Lines after a line reading “Presenter only:” are shown to the presenter, "
               "not to people following the presentation.", className="quiet"),
        _field("Your name (optional)", dcc.Input(id=SAVE_AUTHOR, type="text", maxLength=100, className="text-input")),
        _field("Figure shown when presenting", dcc.Dropdown(id=SAVE_FIGURE, clearable=False, value="scores", options=[
            {"label": words, "value": value} for value, words in SLIDE_FIGURE_WORDS.items()])),
        html.Div(className="save-actions", children=[
            html.Button("Save", id=SAVE_CONFIRM, n_clicks=0, className="primary-button"),
            html.Button("Close", id=SAVE_CANCEL, n_clicks=0, className="small-button"),
        ]),
        html.Div(id=SAVE_RESULT, className="save-result", role="status"),
    ])


def _present_bar() -> html.Nav:
    return html.Nav(id=PRESENT_BAR, className="present-bar", hidden=True, **{"aria-label": "Presentation"}, children=[
        html.Button("First", id=SLIDE_FIRST, n_clicks=0, className="bar-button", title="First view (Home)"),
        html.Button("◀ Previous", id=SLIDE_PREV, n_clicks=0, className="bar-button", title="Previous view (←)"),
        html.Span(id=SLIDE_POSITION, className="slide-position", **{"aria-live": "polite"}),
        html.Button("Next ▶", id=SLIDE_NEXT, n_clicks=0, className="bar-button", title="Next view (→)"),
        html.Button("Last", id=SLIDE_LAST, n_clicks=0, className="bar-button", title="Last view (End)"),
        html.Button("Full screen", id=FULL_SCREEN, n_clicks=0, className="bar-button", title="Full screen (F)"),
        html.Button("Follow link", id=FOLLOW_START, n_clicks=0, className="bar-button",
                    title="A link that lets attendees follow this presentation on their own screens"),
        html.Span(id=FOLLOW_LINK, className="follow-link"),
        html.Button("Leave presentation", id=PRESENT_EXIT, n_clicks=0, className="bar-button"),
    ])


def _recipe_rail() -> html.Aside:
    return html.Aside(
        className="recipe-rail",
        **{"aria-label": "Preprocessing"},
        children=[
            html.H2("Preprocessing"),
            html.P(id=RECIPE_WORDS, className="recipe-words"),
            _field("Label column", dcc.Dropdown(id=ID_COLUMN, clearable=False)),
            _field("Colour by", dcc.Dropdown(id=COLOUR_BY, clearable=False)),
            html.Fieldset(id=S.VARIABLES_FIELD, className="field", children=[
                html.Legend("Variables in the model"),
                html.Button("All", id=VARIABLES_ALL, className="small-button", n_clicks=0),
                dcc.Checklist(id=VARIABLES, className="variable-list", inputClassName="check"),
            ]),
            S.wide_variables_field(),
            S.spectral_field(),
            html.Fieldset(id=S.TRANSFORM_FIELD, className="field", children=[
                html.Legend("Transform a variable"),
                dcc.Dropdown(id=TRANSFORM_VARIABLE, placeholder="variable…"),
                dcc.Dropdown(id=TRANSFORM_KIND, options=[{"label": t, "value": t} for t in TRANSFORMS],
                             value="log10", clearable=False),
                html.Button("Apply", id=TRANSFORM_APPLY, className="small-button", n_clicks=0),
                html.Ul(id=TRANSFORM_LIST, className="chip-list"),
            ]),
            _radio_field("Missing values", MISSING, MISSING_POLICIES),
            _radio_field("Centring", CENTRING, CENTRINGS, words={"mean": "Mean-centre", "none": "None"}),
            _radio_field("Scaling", SCALING, SCALINGS),
            html.Fieldset(className="field", children=[
                html.Legend("Samples left out"),
                html.Ul(id=EXCLUDED_LIST, className="chip-list"),
                html.Button("Restore all", id=RESTORE_ALL, className="small-button", n_clicks=0),
            ]),
        ],
    )


def _lock_panel() -> html.Section:
    """"Lock as reference model" under an opened saved view (callbacks in webapp.ui.locking)."""
    return html.Section(id=LOCK_PANEL, className="card lock-panel", hidden=True, children=[
        html.Details(children=[
            html.Summary("Lock as reference model…"),
            html.P("Freeze this saved view's model (preprocessing, components kept, confidence, limits and the "
                   "fingerprint of its data) so that new samples can be scored against it over time on a "
                   "monitoring page. Later edits of the dataset or of views do not change a locked model; "
                   "locking again under the same name makes the next version.", className="quiet"),
            html.Div(className="inline-field", children=[
                dcc.Input(id=LOCK_NAME, type="text", maxLength=120, className="text-input",
                          placeholder="Name, e.g. Oat dessert release model"),
                html.Button("Lock", id=LOCK_CONFIRM, n_clicks=0, className="primary-button"),
            ]),
            html.Div(id=LOCK_RESULT, role="status"),
        ]),
    ])


def _cards() -> html.Main:
    return html.Main(className="cards", children=[
        html.Section(id=SAVED_BANNER, className="card saved-banner", hidden=True),
        _lock_panel(),
        _scores_card(), _variance_card(), _diagnostics_card(), _loadings_card(), S.spectra_card(),
        html.Section(className="card saved-card", children=[
            html.H2("Saved views of this dataset"), html.Div(id=SAVED_LIST),
            html.H3("Reference models locked from this dataset", className="locked-head"), html.Div(id=LOCKED_LIST),
        ]),
        html.Section(className="card provenance-card", children=[
            html.H2("Provenance"), html.Div(id=PROVENANCE),
            html.H2("Downloads", className="downloads-title"),
            html.P("CSV files open safely in spreadsheet programs (text that could run as a formula is escaped). "
                   "The model file scores new samples with the command ordinate project.", className="quiet"),
            html.Div(id=EXPORT_LINKS, className="export-links"),
        ]),
    ])


def _scores_card() -> html.Section:
    return html.Section(className="card scores-card", children=[
        html.Div(className="card-head", children=[
            html.H2("Scores and biplot"),
            html.Div(className="toolbar", children=[
                _inline("x", dcc.Dropdown(id=PC_X, clearable=False, className="pc-select")),
                _inline("y", dcc.Dropdown(id=PC_Y, clearable=False, className="pc-select")),
                _inline("σ levels", dcc.Input(id=SIGMA_LEVELS, type="text", debounce=True, className="sigma-input",
                                              placeholder="e.g. 1, 2, 3")),
                _inline("ellipses", dcc.RadioItems(id=ELLIPSE_BY, inline=True, options=[
                    {"label": "per group", "value": "group"}, {"label": "all samples", "value": "all"}]),
                        field_id=ELLIPSE_FIELD),
                dcc.Checklist(id=OVERLAYS, inline=True, options=[
                    {"label": "loadings arrows", "value": "arrows"},
                    {"label": "T² ellipse", "value": "hotelling"},
                    {"label": "sample labels", "value": "labels"},
                ]),
                dcc.RadioItems(id=BIPLOT_SCALING, inline=True, options=[
                    {"label": _WORDS[s], "value": s} for s in BIPLOT_SCALINGS]),
                _inline("arrows shown", dcc.Dropdown(
                    id=ARROW_LIMIT, clearable=False, searchable=False, className="arrow-select",
                    options=[{"label": f"auto ({PAGE_ARROWS})", "value": "auto"}]
                    + [{"label": str(n), "value": n} for n in ARROW_LIMIT_CHOICES])),
            ]),
        ]),
        _graph(SCORES_GRAPH, "scores-graph"),
        _svg_button(SCORES_GRAPH),
        html.Div(id=SELECTION_BAR, className="selection-bar", children=[
            html.Span("Click a point to inspect it; draw a lasso or box to select several."),
            html.Button("Leave selected samples out", id=EXCLUDE_SELECTED, n_clicks=0, className="small-button"),
        ]),
    ])


def _variance_card() -> html.Section:
    return html.Section(className="card variance-card", children=[
        html.Div(className="card-head", children=[
            html.H2("Variance explained"),
            html.Div(className="toolbar", children=[
                _inline("components kept (K)", dcc.Dropdown(id=COMPONENTS, clearable=False, className="k-select")),
                dcc.Clipboard(id=COPY_TABLE, title="Copy the table (tab separated)", className="copy-button"),
                html.A("Download CSV", id=DOWNLOAD_TABLE, className="small-button", download=""),
            ]),
        ]),
        html.P(id=COMPONENT_ADVICE, className="advice"),
        html.Div(className="variance-body", children=[
            html.Div(id=VARIANCE_TABLE, className="table-wrap"),
            _graph(VARIANCE_GRAPH, "variance-graph"),
        ]),
        _svg_button(VARIANCE_GRAPH),
    ])


def _diagnostics_card() -> html.Section:
    return html.Section(className="card diagnostics-card", children=[
        html.Div(className="card-head", children=[
            html.H2("Outlier diagnostics"),
            html.Div(className="toolbar", children=[
                _inline("confidence", dcc.Dropdown(id=CONFIDENCE, clearable=False, className="conf-select",
                                                   options=[{"label": level_percent(c), "value": c} for c in CONFIDENCE_CHOICES])),
                # assets/upload.js sends the chosen file as a batch to score against this model.
                html.Button("Score new samples…", id=BATCH_BUTTON, className="small-button", n_clicks=0,
                            title="Choose a CSV file with the same variables: its samples are placed on this "
                                  "model's scores plot and on T² against Q, without refitting the model."),
            ]),
        ]),
        html.P(className="caution", children=(
            "Flags are statistical evidence under the model's assumptions (samples resembling the reference set, "
            "roughly normal scores). They are not a release or rejection decision: follow your validated local "
            "procedures and confirm with the measurements themselves."
        )),
        html.Div(className="diagnostics-body", children=[
            _graph(DIAGNOSTICS_GRAPH, "diagnostics-graph"),
            html.Div(id=FLAGGED_LIST, className="flagged-list"),
        ]),
        _svg_button(DIAGNOSTICS_GRAPH),
        html.Div(id=BATCH_PANEL, className="batch-panel"),
        html.Div(id=CONTRIBUTIONS, className="contributions"),
    ])


def _loadings_card() -> html.Section:
    return html.Section(className="card loadings-card", children=[
        html.Div(className="card-head", children=[
            html.H2("Loadings"),
            html.Div(className="toolbar", children=[
                _inline("component", dcc.Dropdown(id=LOADING_PC, clearable=False, className="pc-select")),
                S.overlay_control(),
            ]),
        ]),
        html.Div(className="loadings-body", children=[
            _graph(LOADINGS_GRAPH, "loadings-graph"),
            _graph(CIRCLE_GRAPH, "circle-graph"),
        ]),
        _svg_button(f"{LOADINGS_GRAPH} {CIRCLE_GRAPH}"),
    ])


# --- small builders ------------------------------------------------------------


def _graph(graph_id: str, class_name: str) -> dcc.Loading:
    return dcc.Loading(
        type="dot",
        delay_show=400,
        children=dcc.Graph(id=graph_id, className=class_name, config=GRAPH_CONFIG),
    )


def _svg_button(graph_ids: str) -> html.Button:
    """Downloads the named plot(s) as SVG in the browser (assets/figure-download.js)."""
    return html.Button("Download SVG", className="small-button svg-button", n_clicks=0,
                       title="Download as a vector image (PNG: camera icon on the plot)",
                       **{"data-svg-graph": graph_ids})


def _field(label: str, control) -> html.Div:
    return html.Div(className="field", children=[html.Label(label, className="field-label"), control])


def _inline(label: str, control, field_id: str | None = None) -> html.Label:
    extra = {"id": field_id} if field_id else {}
    return html.Label(className="inline-field", children=[html.Span(label), control], **extra)


def _radio_field(label: str, control_id: str, choices, words=None) -> html.Fieldset:
    words = {**_WORDS, **(words or {})}
    return html.Fieldset(className="field", children=[
        html.Legend(label),
        dcc.RadioItems(id=control_id, options=[{"label": words.get(c, c), "value": c} for c in choices]),
    ])
