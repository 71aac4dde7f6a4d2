"""Small Dash component builders: notices, chips, tables, summary and provenance.

User text (column names, labels, messages) is always passed as plain text
children, which Dash escapes; nothing here renders raw HTML.
"""

from __future__ import annotations

import flask
from dash import html

from webapp.figures.text import level_percent
from webapp.figures.variance import TABLE_COLUMNS
from webapp.ui.layout import BATCH_REMOVE


def base_url() -> str:
    """This server's address as the browser reached it (for links to copy), or "/" outside a request."""
    try:
        return flask.request.host_url
    except RuntimeError:  # outside a request (tests calling builders directly)
        return "/"


def notice_list(notices, errors) -> list:
    items = [html.Li(text, className="notice notice-error") for text in errors]
    items += [html.Li(text, className="notice") for text in notices]
    return [html.Ul(items, className="notice-list")] if items else []


def not_found_card() -> html.Div:
    return html.Div(className="card not-found-card", children=[
        html.H2("This view link is not known here"),
        html.P(
            "The link may be mistyped or cut short, or the dataset was deleted by its owner. "
            "Ask the colleague who sent it for a fresh link, or load a CSV file of your own."
        ),
        html.A("Open the start page", href="/", className="small-button"),
    ])


def start_card() -> html.Div:
    return html.Div(className="card not-found-card", children=[
        html.H2("Load a CSV file to begin"),
        html.P(
            "Drop a CSV or TSV file of samples (rows) by measured variables (columns) on “Load a CSV” above, "
            "or choose one. Ordinate detects the delimiter, decimal mark, label column and group columns, "
            "and opens the analysis at once; the address bar then holds its view link for your colleagues."
        ),
    ])


def dataset_summary(summary: dict) -> list:
    rows = [
        ("File", summary.get("filename")),
        ("Samples (rows)", summary.get("rows")),
        ("Numeric variables", summary.get("numeric")),
        ("Text columns", summary.get("text")),
        ("Label column", summary.get("id_column") or "none (row numbers)"),
        ("Possible groups", ", ".join(summary.get("groups", ())) or "none found"),
        ("Missing numeric cells", summary.get("missing")),
        ("Read as", summary.get("format")),
    ]
    table = html.Table(className="summary-table", children=[
        html.Tbody([html.Tr([html.Th(name), html.Td(str(value))]) for name, value in rows])
    ])
    warnings = summary.get("warnings", ())
    notes = [html.Ul([html.Li(text) for text in warnings], className="ingest-warnings")] if warnings else []
    return [table, *notes]


def transform_chips(transforms) -> list:
    return [
        html.Li(className="chip", children=[
            html.Span(f"{transform}({variable})"),
            html.Button("×", id={"type": "remove-transform", "index": variable}, n_clicks=0,
                        className="chip-remove", title=f"Remove the {transform} transform of {variable}"),
        ])
        for variable, transform in transforms
    ]


# Each chip is several browser components; beyond this many the list says how many more.
MAX_EXCLUDED_CHIPS = 40


def excluded_chips(labels, dropped_for_gaps=()) -> list:
    """Chips for the samples left out by hand, and a line for those left out for missing values."""
    gaps = [html.Li(f"{len(dropped_for_gaps)} left out for missing values (see “Missing values” above); "
                    "choose mean or iterative filling to keep them.", className="chip-empty")] if dropped_for_gaps else []
    if not labels:
        return [html.Li("None left out by hand." if gaps else "None: every sample is in the model.",
                        className="chip-empty"), *gaps]
    chips = [html.Li(f"{len(labels)} left out by hand:", className="chip-empty")] if gaps else []
    chips += [
        html.Li(className="chip", children=[
            html.Span(label),
            html.Button("↺", id={"type": "restore-sample", "index": label}, n_clicks=0,
                        className="chip-remove", title=f"Put {label} back into the model"),
        ])
        for label in labels[:MAX_EXCLUDED_CHIPS]
    ]
    if len(labels) > MAX_EXCLUDED_CHIPS:
        chips.append(html.Li(f"… and {len(labels) - MAX_EXCLUDED_CHIPS} more ({len(labels)} in all); "
                             "“Restore all” puts every one back.", className="chip-empty"))
    return chips + gaps


def variance_table(rows: list[dict]) -> html.Table:
    head = html.Thead(html.Tr([
        html.Th(VARIANCE_HEADERS[key], title=_RULE_MEANINGS.get(key)) for key, _ in TABLE_COLUMNS if key != "kept"
    ]))
    body = html.Tbody([
        html.Tr(className="kept" if row["kept"] else "", children=[
            html.Td(row["pc"]),
            html.Td(f"{row['eigenvalue']:.4f}", className="num"),
            html.Td(f"{row['percent']:.2f}", className="num"),
            html.Td(f"{row['cumulative']:.2f}", className="num"),
            html.Td(_verdict(row["kaiser"]), className="verdict"),
            html.Td(_verdict(row["broken_stick"]), className="verdict"),
            html.Td(_verdict(row["parallel"]), className="verdict"),
        ])
        for row in rows
    ])
    return html.Table([head, body], className="variance-table", id="variance-table-element")


VARIANCE_HEADERS = dict(TABLE_COLUMNS)
# What a tick in a rule's column means, on hover.
_RULE_MEANINGS = {
    "kaiser": "✓: eigenvalue above the mean eigenvalue",
    "broken_stick": "✓: share of the variance above the broken-stick expectation",
    "parallel": "✓: eigenvalue above the 95th percentile of permuted data",
}


def _verdict(value) -> str:
    if value is None:
        return "–"
    return "✓" if value else ""


# Each row is several browser components; Dash's renderer slows sharply with
# thousands of them (measured: 300 rows took 11 s in headless Chromium).
MAX_FLAGGED_ROWS = 50


#: Pattern-matching id type of the sample buttons in flagged tables (their index is the label).
PICK_ROW = "pick-row"


def flagged_table(rows: list[dict], *, heading: str | None = None,
                  empty_text: str = "No sample is above either limit at this confidence.") -> list:
    if not rows:
        return [html.P(empty_text, className="quiet")]
    shown = rows[:MAX_FLAGGED_ROWS]
    more = (f"The {len(shown)} furthest beyond a limit are listed; the diagnostics CSV (Downloads) has all of them."
            if len(rows) > len(shown) else None)
    return [
        html.H3(heading or f"{len(rows)} sample(s) above a limit"),
        html.P(more, className="quiet") if more else None,
        html.Table(className="flagged-table", children=[
            html.Thead(html.Tr([html.Th("Sample"), html.Th("T²"), html.Th("Q"), html.Th("Above")])),
            html.Tbody([
                html.Tr([
                    # A button, so a row can be picked by mouse and keyboard alike (see ui.picking).
                    html.Td(html.Button(row["label"], id={"type": PICK_ROW, "index": row["label"]}, n_clicks=0,
                                        className="pick-row", title="Show why this sample stands out")),
                    html.Td(f"{row['t2']:.3g}", className="num"),
                    html.Td(f"{row['q']:.3g}", className="num"),
                    html.Td(" ".join(name for name, over in (("T²", row["over_t2"]), ("Q", row["over_q"])) if over)),
                ])
                for row in shown
            ]),
        ]),
    ]


def batch_panel(batch, confidence: float, problem: str | None = None):
    """A new batch scored against the model: counts, cautions, the samples beyond a limit.

    ``problem``: why the batch named in the link could not be scored; the panel
    then says so and still offers to stop scoring it.
    """
    if batch is None:
        if problem is None:
            return None
        return html.Div([
            html.Div(className="batch-head", children=[
                html.H3("New samples"),
                html.Button("Stop scoring these samples", id=BATCH_REMOVE, n_clicks=0, className="small-button"),
            ]),
            html.P(problem, className="notice notice-error"),
        ])
    rows, n = batch.rows(), len(batch.labels)
    level = level_percent(confidence)
    p = batch.projection
    return html.Div([
        html.Div(className="batch-head", children=[
            html.H3(f"New samples: {batch.name}"),
            html.Button("Stop scoring these samples", id=BATCH_REMOVE, n_clicks=0, className="small-button"),
        ]),
        html.P(f"{n} sample(s) scored against this model without refitting it; {len(rows)} beyond a {level} "
               f"limit for new samples (T² {p.t2_limit:.3g}, Q {p.q_limit:.3g}). They are the dark stars on the "
               "scores plot and on T² against Q."),
        html.P(className="caution", children=(
            "The T² limit for new samples is wider than for the model's own samples (Tracy, Young & Mason "
            "1992). No batch is released or rejected on these charts alone: follow your validated "
            "local procedures.")),
        *flagged_table(rows, heading=f"{len(rows)} new sample(s) above a limit",
                       empty_text="No new sample is above either limit for new samples."),
    ])


def provenance_block(provenance: dict) -> html.Dl:
    items = []
    for name, value in provenance.items():
        items += [html.Dt(name), html.Dd(str(value))]
    return html.Dl(items, className="provenance")


def manage_box(link: str) -> html.Div:
    return html.Div([
        html.H3("Private manager link"),
        html.P("You uploaded this dataset from this browser. This link renames or deletes it with all its "
               "saved views; keep it to yourself, do not share it like a view link."),
        html.A("Open the manager page", href=link, className="small-button", target="_blank", rel="noopener"),
    ])


EXPORTS = (
    ("scores.csv", "Scores (CSV)"),
    ("loadings.csv", "Loadings (CSV)"),
    ("variance.csv", "Variance table (CSV)"),
    ("diagnostics.csv", "T² and Q per sample (CSV)"),
    ("model.json", "Reference model (JSON)"),
)


def export_link_list(query: str, saved_view: str | None, *, batch: bool = False) -> list:
    exports = EXPORTS + ((("batch.csv", "New samples: scores, T² and Q (CSV)"),) if batch else ())
    links = [html.A(label, href=f"/export/{name}?{query}", download="", className="small-button")
             for name, label in exports]
    if saved_view:
        links.append(html.A("Report of this saved view (HTML)", href=f"/v/{saved_view}/report.html",
                            download="", className="small-button"))
    else:
        links.append(html.Span("Save the view to download its self-contained HTML report.", className="quiet"))
    return links
