"""The report of a saved view: one self-contained HTML file that opens offline.

The file carries everything it needs: plotly.js inline, the view's figures
(interactive: zoom, hover, PNG download), the explained-variance table, the
recipe in plain words, provenance (dataset fingerprint, rows and variables
used, engine version, when and by whom the view was saved), the view's note and
the usual cautions. It loads nothing from the network, and its
Content-Security-Policy forbids it to (no fetches, no remote images or fonts),
so opening it neither needs a connection nor tells anybody it was opened.

User text (titles, author, labels, column names) is escaped. The note is
Markdown rendered by markdown-it-py in CommonMark mode with raw HTML off
(``<script>`` and ``<img onerror=...>`` come out as visible text), images off
(a remote image would be a request made on opening), and links allowed only to
``http:``, ``https:`` and ``mailto:`` addresses or ``#`` anchors; anything else
(``javascript:``, ``data:``, ``vbscript:``, ``file:``, relative paths, ``//host``)
stays as plain text.
"""

from __future__ import annotations

import html
import os
import re
import tempfile
from datetime import datetime, timezone
from pathlib import Path

import plotly.io as pio
import plotly.offline
from markdown_it import MarkdownIt

from webapp import __version__
from webapp.analysis import ENGINE_VERSION
from webapp.analysis.errors import OrdinateError
from webapp.web.filenames import dataset_stem, safe_filename
from webapp.figures import GRAPH_CONFIG, variance_table_tsv
from webapp.figures.diagnostics import CAUTION
from webapp.figures.text import level_percent
from webapp.figures.theme import FONT_FAMILY, MUTED_TEXT_COLOUR, TEXT_COLOUR
from webapp.state import parse_query
from webapp.store.storage import SavedView

__all__ = [
    "CAUTIONS",
    "REPORT_FIGURES",
    "SAFE_LINK_SCHEMES",
    "build_report_html",
    "render_note",
    "report_filename",
    "write_report",
    "report_main",
]

#: (key, View attribute) of the figures in the report, in order.
REPORT_FIGURES: tuple[tuple[str, str], ...] = (
    ("scores", "scores_figure"),
    ("variance", "variance_figure"),
    ("diagnostics", "diagnostics_figure"),
    ("loadings", "loadings_figure"),
    ("circle", "circle_figure"),
)
_FIGURE_HEIGHTS = {"scores": 580, "variance": 440, "diagnostics": 500, "loadings": 440, "circle": 560}
MAX_FLAGGED_ROWS = 50

CAUTIONS: tuple[str, ...] = (
    "Points beyond a limit are statistical evidence under the model's assumptions (a representative "
    "reference set, roughly normal scores), not proof that anything is wrong, and points inside the "
    "limits are not proof that all is well.",
    CAUTION,
    "This report is not a release or rejection decision and does not replace your validated local "
    "procedures or the judgement of the people responsible for them.",
    "The data may be sensitive: this file contains sample labels and some measured values. Share it "
    "only with people who are allowed to see the data.",
)

SAFE_LINK_SCHEMES = frozenset({"http", "https", "mailto"})
_SCHEME = re.compile(r"^([a-zA-Z][a-zA-Z0-9+.-]*):")

# No network at all: inline scripts and styles only (plotly.js needs eval for its WebGL
# shaders), images only from data:/blob: URLs (plotly's own icons and PNG download).
CONTENT_SECURITY_POLICY = (
    "default-src 'none'; script-src 'unsafe-inline' 'unsafe-eval'; style-src 'unsafe-inline'; "
    "img-src data: blob:; font-src data:; connect-src 'none'; base-uri 'none'; form-action 'none'"
)


# --------------------------------------------------------------------------------------
# The note: Markdown, safely
# --------------------------------------------------------------------------------------


def _is_safe_link(url: str) -> bool:
    """Allow-list for link targets (markdown-it-py passes them decoded and normalised).

    markdown-it-py's own check (``validateLink``) refuses ``javascript:``,
    ``vbscript:``, ``file:`` and ``data:`` except ``data:image/...``; this one is
    stricter: only http(s) and mailto addresses, and anchors within the report.
    """
    url = url.strip()
    match = _SCHEME.match(url)
    if match:
        return match.group(1).lower() in SAFE_LINK_SCHEMES
    return url.startswith("#")


def _markdown() -> MarkdownIt:
    md = MarkdownIt("commonmark", {"html": False, "linkify": False, "typographer": False})
    md.disable("image")
    md.validateLink = _is_safe_link

    def link_open(self, tokens, idx, options, env):
        tokens[idx].attrSet("rel", "noopener noreferrer")
        return self.renderToken(tokens, idx, options, env)

    md.add_render_rule("link_open", link_open)
    return md


def render_note(markdown_text: str) -> str:
    """HTML for a view's note: CommonMark without raw HTML, images or unsafe links."""
    return _markdown().render(str(markdown_text or ""))


# --------------------------------------------------------------------------------------
# The report
# --------------------------------------------------------------------------------------


def _e(text: object) -> str:
    return html.escape(str(text), quote=True)


def _utc(timestamp: float) -> str:
    return datetime.fromtimestamp(timestamp, tz=timezone.utc).isoformat(timespec="seconds")


def report_filename(services, saved_view: SavedView) -> str:
    """ASCII file name of a view's report: dataset stem, view title, ``-report.html``."""
    record = services.store.dataset(saved_view.dataset_token)
    stem = dataset_stem(record.filename) if record else "ordinate"
    return safe_filename(f"{stem}-{saved_view.title}", "-report.html")


def _state_of(saved_view: SavedView):
    state, notices = parse_query(saved_view.query)
    if state.dataset != saved_view.dataset_token:
        state = state.replace(dataset=saved_view.dataset_token)
    return state.replace(saved_view=saved_view.view_id), notices


def build_report_html(services, saved_view: SavedView) -> str:
    """The complete report of ``saved_view`` as one HTML document.

    Raises ``webapp.ui.view_model.DatasetNotFound`` when the view's dataset is
    no longer stored. A recipe that cannot be applied gives a report that says
    so, without figures.
    """
    from webapp.ui.view_model import build_view, resolve, view_diagnostics

    state, notices = _state_of(saved_view)
    view = build_view(services, state, notices, wait=True)
    record = services.store.dataset(saved_view.dataset_token)
    diagnostics = resolved = None
    if not view.errors:
        resolved = resolve(services, state)
        diagnostics = view_diagnostics(resolved, state)

    warnings = list(view.notices)
    if record.content_hash != saved_view.content_hash:
        warnings.append("The dataset's fingerprint differs from the one recorded when this view was saved.")
    if saved_view.engine_version != ENGINE_VERSION:
        warnings.append(
            f"This view was saved with engine {saved_view.engine_version}; the numbers here were computed "
            f"with engine {ENGINE_VERSION} and may differ slightly from what was seen then."
        )

    sections = [_header(saved_view, view, record), _cautions_section()]
    if saved_view.note.strip():
        sections.append(_section("note", "Note", f'<div class="note">{render_note(saved_view.note)}</div>'))
    if warnings:
        sections.append(_section("notices", "Notices", _list(warnings)))
    if view.errors:
        sections.append(_section("errors", "This view cannot be computed", _list(view.errors)))
    else:
        sections.append(_figures_and_tables(state, view, diagnostics))
    sections.append(_section("recipe", "How the data were prepared", _list(view.recipe_words)))
    sections.append(_provenance_section(saved_view, view, record, resolved))
    return _document(saved_view.title, "\n".join(sections))


def _header(saved_view: SavedView, view, record) -> str:
    saved_by = f"saved by {_e(saved_view.author)} on" if saved_view.author else "saved on"
    dataset = _e(view.title) if view.title == record.filename else f"{_e(view.title)} ({_e(record.filename)})"
    return (
        '<header class="report-head">\n'
        '<p class="kicker">Ordinate report</p>\n'
        f"<h1>{_e(saved_view.title)}</h1>\n"
        f'<p class="meta">Dataset: <strong>{dataset}</strong> · '
        f"{saved_by} {_e(_utc(saved_view.created))}</p>\n"
        "</header>"
    )


def _cautions_section() -> str:
    return ('<section id="cautions" class="cautions" role="note">\n<h2>Before you act on this report</h2>\n'
            + _list(CAUTIONS) + "\n</section>")


def _figures_and_tables(state, view, diagnostics) -> str:
    figures = {key: _figure_html(key, getattr(view, attribute)) for key, attribute in REPORT_FIGURES}
    scores_title = "Scores and loadings (biplot)" if state.arrows else "Scores"
    parts = [
        _section("scores", f"{scores_title}: PC{view.pc_x} and PC{view.pc_y}", figures["scores"]),
        _section("variance", "Explained variance",
                 figures["variance"] + _variance_table(view.variance_rows) + f"<p>{_e(view.advice_text)}</p>"),
        _section("diagnostics", "Hotelling's T² and Q residuals",
                 figures["diagnostics"] + _diagnostics_summary(view, diagnostics)),
        _section("loadings", f"Loadings on PC{view.loading_pc}", figures["loadings"]),
        _section("circle", f"Correlation circle: PC{view.pc_x} and PC{view.pc_y}", figures["circle"]),
    ]
    return "\n".join(parts)


def _figure_html(key: str, figure) -> str:
    height = figure.layout.height or _FIGURE_HEIGHTS[key]
    config = {**GRAPH_CONFIG, "responsive": True,
              "toImageButtonOptions": {**GRAPH_CONFIG.get("toImageButtonOptions", {}), "filename": f"ordinate-{key}"}}
    div = pio.to_html(figure, full_html=False, include_plotlyjs=False, config=config,
                      div_id=f"figure-{key}", default_width="100%", default_height=f"{int(height)}px",
                      validate=False)
    return f'<div class="figure" data-figure="{key}">{div}</div>'


def _variance_table(rows) -> str:
    lines = [line.split("\t") for line in variance_table_tsv(rows).splitlines()]
    if not lines:
        return ""
    header, body = lines[0], lines[1:]
    kept_column = header.index("Kept") if "Kept" in header else None
    head = "".join(f'<th scope="col">{_e(cell)}</th>' for cell in header)
    out = []
    for cells in body:
        kept = kept_column is not None and cells[kept_column] == "yes"
        row = f'<th scope="row">{_e(cells[0])}</th>' + "".join(f"<td>{_e(c)}</td>" for c in cells[1:])
        row_class = ' class="kept"' if kept else ""
        out.append(f"<tr{row_class}>{row}</tr>")
    return (
        '<table class="variance-table">\n<caption>Eigenvalues of the covariance of the preprocessed data '
        "(n − 1 denominator); rule columns say whether each rule keeps the component.</caption>\n"
        f"<thead><tr>{head}</tr></thead>\n<tbody>\n" + "\n".join(out) + "\n</tbody>\n</table>"
    )


def _diagnostics_summary(view, diagnostics) -> str:
    n = diagnostics.t2.size
    text = (
        f"<p>K = {diagnostics.components} at {level_percent(diagnostics.confidence)} confidence: "
        f"T² limit {diagnostics.t2_limit:.4g}, Q limit {diagnostics.q_limit:.4g} by {_e(diagnostics.q_limit_method)}. "
        f"{len(view.flagged)} of {n} samples are above a limit.</p>"
    )
    text += _flag_table(view.flagged, "Samples above a limit, furthest first", "diagnostics")
    batch = view.batch
    if batch is not None:
        rows, p = batch.rows(), batch.projection
        text += (
            f"<p>New samples “{_e(batch.name)}” (the stars): {len(batch.labels)} samples scored against this model "
            f"without refitting it; {len(rows)} above a limit for new samples (T² {p.t2_limit:.4g}, the wider "
            f"limit for new samples of Tracy, Young &amp; Mason 1992; Q {p.q_limit:.4g}).</p>"
            + _flag_table(rows, "New samples above a limit, furthest first", "new samples")
        )
    return text


def _flag_table(flagged: list, caption: str, download: str) -> str:
    if not flagged:
        return ""
    shown = flagged[:MAX_FLAGGED_ROWS]
    rows = "\n".join(
        f'<tr><th scope="row">{_e(row["label"])}</th><td>{row["t2"]:.3f}</td><td>{row["q"]:.3f}</td>'
        f"<td>{_e(_limits_exceeded(row))}</td></tr>"
        for row in shown
    )
    more = (f"<p>The {len(flagged) - len(shown)} further flagged samples are in the dashboard's "
            f"{download} download.</p>") if len(flagged) > len(shown) else ""
    return (
        f'<table class="flagged-table">\n<caption>{_e(caption)}</caption>\n'
        '<thead><tr><th scope="col">Sample</th><th scope="col">T²</th><th scope="col">Q</th>'
        '<th scope="col">Above</th></tr></thead>\n<tbody>\n' + rows + "\n</tbody>\n</table>" + more
    )


def _limits_exceeded(row: dict) -> str:
    return ", ".join(name for name, over in (("T²", row["over_t2"]), ("Q", row["over_q"])) if over)


def _provenance_section(saved_view: SavedView, view, record, resolved) -> str:
    items = [
        ("View title", saved_view.title),
        ("Author", saved_view.author or "not given"),
        ("Saved (UTC)", _utc(saved_view.created)),
        ("Dataset", view.title),
        ("File name", record.filename),
        ("Dataset fingerprint (SHA-256 of the file)", record.content_hash),
        ("Fingerprint when saved", "the same" if saved_view.content_hash == record.content_hash
         else saved_view.content_hash),
    ]
    if resolved is not None:
        pca, prepared = resolved.fitted.pca, resolved.fitted.prepared
        items += [
            ("Rows used", f"{pca.n_samples} of {resolved.table.n_rows}"),
            ("Variables used", f"{pca.n_variables}: {', '.join(prepared.variables)}"),
        ]
    shown = {key for key, _ in items} | {"Dataset", "Samples used", "Variables used", "Engine"}
    items += [(key, value) for key, value in view.provenance.items() if key not in shown
              and not key.startswith("Fingerprint")]
    items += [
        ("Engine when saved", saved_view.engine_version),
        ("Report made by", f"Ordinate {__version__}, engine {ENGINE_VERSION}"),
        ("Report made (UTC)", _utc(datetime.now(timezone.utc).timestamp())),
    ]
    body = "\n".join(f"<dt>{_e(key)}</dt><dd>{_e(value)}</dd>" for key, value in items)
    return _section("provenance", "Provenance", f'<dl class="provenance">\n{body}\n</dl>')


def _section(section_id: str, title: str, body: str) -> str:
    return f'<section id="{section_id}">\n<h2>{_e(title)}</h2>\n{body}\n</section>'


def _list(items) -> str:
    return "<ul>\n" + "\n".join(f"<li>{_e(item)}</li>" for item in items) + "\n</ul>"


def _plotly_bundle() -> str:
    js = plotly.offline.get_plotlyjs()
    # A literal "</script" would end the inline script early; inside JS strings "<\/" is the same text.
    return re.sub(r"</(script)", r"<\\/\1", js, flags=re.IGNORECASE)


_CSS = f"""
:root {{ color-scheme: light; }}
* {{ box-sizing: border-box; }}
body {{ margin: 0; font-family: {FONT_FAMILY}; color: {TEXT_COLOUR}; background: #fff; line-height: 1.5; }}
main {{ max-width: 1000px; margin: 0 auto; padding: 24px 28px 48px; }}
.kicker {{ margin: 0; color: {MUTED_TEXT_COLOUR}; font-size: 0.85rem; letter-spacing: 0.06em;
  text-transform: uppercase; }}
h1 {{ margin: 4px 0 6px; font-size: 1.7rem; line-height: 1.25; }}
h2 {{ margin: 0 0 10px; font-size: 1.2rem; border-bottom: 1px solid #E8EAED; padding-bottom: 4px; }}
.meta {{ margin: 0; color: {MUTED_TEXT_COLOUR}; }}
section {{ margin-top: 28px; }}
.cautions {{ background: #FFF8E6; border-left: 4px solid #E69F00; padding: 12px 16px; }}
.cautions h2 {{ border: 0; font-size: 1.05rem; margin-bottom: 4px; }}
.cautions ul {{ margin: 0; padding-left: 20px; }}
.note {{ background: #F6F8FA; padding: 4px 16px; border-radius: 4px; overflow-wrap: anywhere; }}
.note h1, .note h2, .note h3 {{ font-size: 1.05rem; border: 0; }}
.figure {{ border: 1px solid #E8EAED; border-radius: 4px; padding: 4px; }}
table {{ border-collapse: collapse; margin: 12px 0; font-variant-numeric: tabular-nums; }}
caption {{ caption-side: bottom; text-align: left; color: {MUTED_TEXT_COLOUR}; font-size: 0.85rem; padding-top: 4px; }}
th, td {{ padding: 4px 10px; border-bottom: 1px solid #E8EAED; text-align: right; }}
thead th {{ border-bottom: 2px solid #C4C8CE; }}
tbody th {{ text-align: left; font-weight: 600; }}
tr.kept {{ background: #EEF5FB; }}
.provenance {{ display: grid; grid-template-columns: max-content 1fr; gap: 4px 16px; margin: 0; }}
.provenance dt {{ color: {MUTED_TEXT_COLOUR}; }}
.provenance dd {{ margin: 0; overflow-wrap: anywhere; }}
footer {{ margin-top: 36px; color: {MUTED_TEXT_COLOUR}; font-size: 0.85rem; }}
@media print {{
  main {{ max-width: none; padding: 0; }}
  section, .figure, table {{ break-inside: avoid; }}
  .modebar-container {{ display: none !important; }}
  a {{ color: inherit; }}
}}
@page {{ margin: 14mm; }}
"""


def _document(title: str, body: str) -> str:
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        f'<meta http-equiv="Content-Security-Policy" content="{CONTENT_SECURITY_POLICY}">\n'
        '<meta name="referrer" content="no-referrer">\n'
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        f'<meta name="generator" content="Ordinate {_e(__version__)}">\n'
        f"<title>{_e(title)} · Ordinate report</title>\n"
        f"<style>{_CSS}</style>\n"
        f'<script id="plotly-bundle">{_plotly_bundle()}</script>\n'
        "</head>\n<body>\n<main>\n"
        f"{body}\n"
        f'<footer>Made with Ordinate {_e(__version__)} (engine {_e(ENGINE_VERSION)}). '
        "Figures are interactive: hover for values, drag to zoom, double-click to reset.</footer>\n"
        "</main>\n</body>\n</html>\n"
    )


# --------------------------------------------------------------------------------------
# Files and the command line
# --------------------------------------------------------------------------------------


def write_report(services, view_id: str, out_path: str | os.PathLike) -> Path:
    """Write the report of saved view ``view_id`` to ``out_path`` (replaced atomically); return the path.

    Raises :class:`OrdinateError` when the view or its dataset is not stored.
    """
    from webapp.ui.view_model import DatasetNotFound

    saved = services.store.view(view_id)
    if saved is None:
        raise OrdinateError(f"No saved view with the code '{view_id}' is in this data directory.")
    try:
        text = build_report_html(services, saved)
    except DatasetNotFound:
        raise OrdinateError(f"The dataset of the view '{saved.title}' is no longer in this data directory.") from None
    out = Path(out_path)
    fd, temp = tempfile.mkstemp(dir=out.parent if str(out.parent) else ".", prefix=".report-", suffix=".part")
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as handle:
            handle.write(text)
        os.replace(temp, out)
    except BaseException:
        if os.path.exists(temp):
            os.unlink(temp)
        raise
    return out


def report_main(data_dir: Path, view_id: str, out: Path) -> int:
    """``ordinate report VIEW_ID --data-dir DIR --out FILE``: write one report; 0 on success.

    Raises :class:`OrdinateError` (one sentence for the CLI to print) for a
    missing data directory, an unknown view or a missing output folder.
    """
    from webapp.store.services import create_services
    from webapp.config import AppConfig

    data_dir, out = Path(data_dir), Path(out)
    # Check first: opening the store would create an empty data directory at a mistyped path.
    if not (data_dir / "index").is_dir():
        raise OrdinateError(f"'{data_dir}' is not an Ordinate data directory (it has no 'index' folder).")
    if not out.parent.is_dir():
        raise OrdinateError(f"The folder '{out.parent}' for the report does not exist.")
    services = create_services(AppConfig(data_dir=data_dir, demo_dataset=None))
    path = write_report(services, view_id, out)
    print(f"Wrote the report to {path}")
    return 0
