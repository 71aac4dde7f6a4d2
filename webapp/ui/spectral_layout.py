"""The page's parts for wide data and spectra: the variables chooser, the spectral steps, the spectra card.

Structure only (ids and builders), used by :mod:`webapp.ui.layout`; values
come from the URL through :mod:`webapp.ui.spectral_controls`. Every part is
hidden until the data ask for it: the chooser for a wide table (no checkbox
per variable), the spectral steps and the spectra card for a table with a
variable axis.
"""

from __future__ import annotations

from dash import dcc, html

from webapp.figures import GRAPH_CONFIG
from webapp.state import MAX_SAVGOL_DERIVATIVE, MAX_SAVGOL_ORDER

VARIABLES_FIELD = "variables-field"  # the checklist of a narrow table (in layout)
TRANSFORM_FIELD = "transform-field"

WIDE_FIELD = "wide-variables"
VARIABLE_COUNTS = "variable-counts"
VARIABLE_SEARCH = "variable-search"
SEARCH_OUT = "search-out"
SEARCH_IN = "search-in"
SEARCH_ONLY = "search-only"
VARIABLES_EVERY = "variables-every"
VARIABLES_NONE = "variables-none"
SEARCH_STATUS = "search-status"

SPECTRAL_FIELD = "spectral-steps"
RANGES_INPUT = "ranges-input"
AXIS_SPAN = "axis-span"
ROW_CORRECTION = "row-correction"
SAVGOL_ON = "savgol-on"
SAVGOL_WINDOW = "savgol-window"
SAVGOL_ORDER = "savgol-order"
SAVGOL_DERIVATIVE = "savgol-derivative"
SPECTRAL_PROBLEM = "spectral-problem"
STEP_ORDER = "step-order"

OVERLAY_BOX = "overlay-box"
LOADING_OVERLAY = "loading-overlay"
SPECTRA_CARD = "spectra-card"
SPECTRA_GRAPH = "spectra-graph"
SPECTRA_SHOWN = "spectra-shown"

ROWS_ARE = "rows-are"

SAVGOL_WINDOWS = tuple(range(3, 52, 2))
ROW_CORRECTION_WORDS = {"none": "None", "snv": "SNV", "msc": "MSC"}
DERIVATIVE_WORDS = {0: "smoothing", 1: "1st derivative", 2: "2nd derivative"}


def layout_choice() -> html.Fieldset:
    """How the file is read: a sample per row (the usual), or a variable per row (a spectrum per column)."""
    return html.Fieldset(className="layout-choice", children=[
        html.Legend("The file's rows are"),
        dcc.RadioItems(id=ROWS_ARE, value="samples", options=[
            {"label": "samples (a variable per column)", "value": "samples"},
            {"label": "variables (a sample per column, as many spectrometers export)", "value": "variables"},
        ]),
        html.P("Changing this reads the file again and starts from the default preprocessing.", className="quiet"),
    ])


def wide_variables_field() -> html.Fieldset:
    return html.Fieldset(id=WIDE_FIELD, className="field wide-variables", hidden=True, children=[
        html.Legend("Variables in the model"),
        html.P(id=VARIABLE_COUNTS, className="variable-counts", role="status"),
        html.Label(className="field-label", htmlFor=VARIABLE_SEARCH, children="Find variables"),
        dcc.Input(id=VARIABLE_SEARCH, type="text", debounce=0.4, className="text-input",
                  placeholder="e.g. m/z 30* or a part of a name"),
        html.P("With * or ?: whole names (* any text, ? one character); otherwise names containing the text. "
               "Case is ignored.", className="quiet hint"),
        html.Div(className="button-row", children=[
            html.Span("Matches:", className="button-row-lead"),
            html.Button("Leave out", id=SEARCH_OUT, n_clicks=0, className="small-button",
                        title="Leave the matching variables out of the model"),
            html.Button("Put back", id=SEARCH_IN, n_clicks=0, className="small-button",
                        title="Put the matching variables back into the model"),
            html.Button("Keep only", id=SEARCH_ONLY, n_clicks=0, className="small-button",
                        title="Keep the matching variables and leave out all others"),
        ]),
        html.Div(className="button-row", children=[
            html.Span("Every variable:", className="button-row-lead"),
            html.Button("All", id=VARIABLES_EVERY, n_clicks=0, className="small-button",
                        title="Put every variable back into the model"),
            html.Button("None", id=VARIABLES_NONE, n_clicks=0, className="small-button",
                        title="Leave every variable out, then put back the ones you want"),
        ]),
        html.P(id=SEARCH_STATUS, className="quiet search-status", role="status"),
    ])


def spectral_field() -> html.Fieldset:
    return html.Fieldset(id=SPECTRAL_FIELD, className="field spectral-steps", hidden=True, children=[
        html.Legend("Spectral steps"),
        html.Label(className="field-label", htmlFor=RANGES_INPUT, children="Ranges on the variable axis"),
        dcc.Input(id=RANGES_INPUT, type="text", debounce=True, className="text-input",
                  placeholder="e.g. 1100-1700, 2000-2400 (empty: all)"),
        html.P(id=AXIS_SPAN, className="quiet hint"),
        html.Div(className="field-label", children="Row correction"),
        dcc.RadioItems(id=ROW_CORRECTION, inline=True, options=[
            {"label": words, "value": value} for value, words in ROW_CORRECTION_WORDS.items()]),
        dcc.Checklist(id=SAVGOL_ON, options=[{"label": "Savitzky–Golay filter", "value": "on"}]),
        html.Div(className="savgol-row", children=[
            html.Label(["window", dcc.Dropdown(id=SAVGOL_WINDOW, clearable=False, searchable=False,
                                               options=[{"label": str(w), "value": w} for w in SAVGOL_WINDOWS])]),
            html.Label(["order", dcc.Dropdown(id=SAVGOL_ORDER, clearable=False, searchable=False,
                                              options=[{"label": str(o), "value": o}
                                                       for o in range(0, MAX_SAVGOL_ORDER + 1)])]),
            html.Label(["gives", dcc.Dropdown(id=SAVGOL_DERIVATIVE, clearable=False, searchable=False,
                                              options=[{"label": DERIVATIVE_WORDS[d], "value": d}
                                                       for d in range(0, MAX_SAVGOL_DERIVATIVE + 1)])]),
        ]),
        html.P(id=SPECTRAL_PROBLEM, className="panel-problem", role="status"),
        html.P(id=STEP_ORDER, className="step-order"),
    ])


def overlay_control() -> html.Label:
    """Further components drawn on the loading spectrum (shown for a table with a variable axis)."""
    return html.Label(id=OVERLAY_BOX, className="inline-field", hidden=True, children=[
        html.Span("overlay"),
        dcc.Dropdown(id=LOADING_OVERLAY, multi=True, clearable=True, searchable=False, className="overlay-select",
                     placeholder="more components"),
    ])


def spectra_card() -> html.Section:
    return html.Section(id=SPECTRA_CARD, className="card spectra-card", hidden=True, children=[
        dcc.Store(id=SPECTRA_SHOWN),
        html.Div(className="card-head", children=[html.H2("Spectra")]),
        dcc.Loading(type="dot", delay_show=400, children=dcc.Graph(id=SPECTRA_GRAPH, className="spectra-graph",
                                                                     config=GRAPH_CONFIG)),
        html.Button("Download SVG", className="small-button svg-button", n_clicks=0,
                    title="Download as a vector image (PNG: camera icon on the plot)",
                    **{"data-svg-graph": SPECTRA_GRAPH}),
    ])
