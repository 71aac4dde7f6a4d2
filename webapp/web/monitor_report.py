"""Exports of a monitoring view: its table (for formula-safe CSV) and a self-contained HTML report.

Both use :mod:`webapp.ui.monitoring_view`, so they hold the numbers the page
shows. The report reuses the page frame of the saved-view report
(:mod:`webapp.web.report`): inline Plotly, its Content-Security-Policy, cautions first.
"""

from __future__ import annotations

import html
from datetime import UTC, datetime

import pandas as pd

from webapp.analysis.errors import OrdinateError
from webapp.figures.run_charts import MONITORING_CAUTION
from webapp.figures.text import level_percent
from webapp.state.monitor_state import MonitorState, monitor_address
from webapp.store.monitor_views import monitor_view
from webapp.ui import monitoring_view as mv
from webapp.web.report import _document, _figure_html, _list, _section

__all__ = ["TABLE_COLUMNS", "build_monitor_report", "monitoring_table"]

TABLE_COLUMNS = ("position", "upload", "file_name", "uploaded_by", "uploaded_at", "sample", "order",
                 "t2", "t2_limit", "t2_beyond", "q", "q_limit", "q_beyond", "rule_hits")


def _load(services, state: MonitorState) -> mv.Monitored:
    monitored = mv.load_monitored(services, state)
    if monitored is None:
        raise OrdinateError("This monitoring link is not known here.")
    return monitored


def _in_window(frame: pd.DataFrame, state: MonitorState) -> pd.DataFrame:
    keep = pd.Series(True, index=frame.index)
    if state.first is not None:
        keep &= frame["position"] >= state.first
    if state.last is not None:
        keep &= frame["position"] <= state.last
    return frame[keep]


def monitoring_table(services, state: MonitorState, monitored: mv.Monitored | None = None) -> pd.DataFrame:
    """The monitoring table of the view's window: one row per new sample, with its upload and rule hits.

    ``rule_hits`` names the rules (switched on in the view) whose hits include the
    sample, as "statistic: rule" joined by "; ". Scores follow as PC1..PCK.
    """
    monitored = monitored or _load(services, state)
    frame = monitored.frame
    uploads = {u.upload_id: u for u in monitored.uploads}
    hits_at: dict[int, list[str]] = {}
    for hit in monitored.hits:
        for position in range(hit.first, hit.last + 1):
            hits_at.setdefault(position, []).append(
                f"{mv.STATISTIC_NAMES[hit.statistic]}: {mv.RULE_NAMES.get(hit.rule, hit.rule)}")
    table = frame.copy()
    table["file_name"] = [uploads[str(u)].file_name if str(u) in uploads else "" for u in table["upload"]]
    table["uploaded_by"] = [uploads[str(u)].uploaded_by if str(u) in uploads else "" for u in table["upload"]]
    table["uploaded_at"] = [uploads[str(u)].uploaded_at if str(u) in uploads else "" for u in table["upload"]]
    table["rule_hits"] = ["; ".join(hits_at.get(int(p), ())) for p in table["position"]]
    scores = [c for c in frame.columns if c.startswith("PC") and c[2:].isdigit()]
    table = table[[*TABLE_COLUMNS, *scores]]
    return _in_window(table, state).reset_index(drop=True)


def _e(text) -> str:
    return html.escape(str(text), quote=True)


def _rows_html(headers, rows) -> str:
    head = "".join(f'<th scope="col">{_e(h)}</th>' for h in headers)
    body = "\n".join("<tr>" + "".join(f"<td>{_e(cell)}</td>" for cell in row) + "</tr>" for row in rows)
    return f"<table>\n<thead><tr>{head}</tr></thead>\n<tbody>\n{body}\n</tbody>\n</table>"


def build_monitor_report(services, state: MonitorState, *, base_url: str = "") -> str:
    """The report of a monitoring view as one HTML document (figures, rule hits, uploads, provenance)."""
    monitored = _load(services, state)
    state = mv.shown_state(monitored, state)
    locked = monitored.locked
    charts = mv.run_charts(monitored, state)
    for figure in charts.values():
        figure.update_layout(height=420)
    saved = monitor_view(services.store, state.saved_view) if state.saved_view else None
    title = saved.title if saved else f"Monitoring of {locked.name} v{locked.version}"
    now = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
    header = (
        '<header class="report-head">\n<p class="kicker">Ordinate monitoring report</p>\n'
        f"<h1>{_e(title)}</h1>\n"
        f'<p class="meta">Reference model: <strong>{_e(locked.name)}</strong>, version {locked.version}, '
        f"locked {_e(locked.locked_at)} · report made {now}</p>\n</header>"
    )
    cautions = ('<section id="cautions" class="cautions" role="note">\n<h2>Before you act on this report</h2>\n'
                + _list([MONITORING_CAUTION]) + "\n</section>")
    hits = mv.hit_rows(monitored)
    hit_html = (_rows_html(["Rule", "Statistic", "First", "Last", "Samples", "Upload"],
                           [[h["rule"], h["statistic"], h["first"], h["last"], h["samples"], h["uploads"]]
                            for h in hits]) if hits else "<p>No rule hits among the new samples.</p>")
    uploads = mv.upload_rows(monitored)
    upload_html = (_rows_html(["File", "Uploaded by", "Time (UTC)", "Samples", "Positions", "Beyond a limit"],
                              [[u["file_name"], u["uploaded_by"] or "–", u["uploaded_at"], u["samples"],
                                u["positions"], u["flagged"]] for u in uploads]) if uploads
                   else "<p>No uploads yet.</p>")
    window = ("every sample" if state.first is None and state.last is None else
              f"positions {state.first if state.first is not None else 'first'} to "
              f"{state.last if state.last is not None else 'last'}")
    provenance = [
        ("Monitoring view link", base_url.rstrip("/") + monitor_address(state.replace(present=False))),
        ("Reference data fingerprint (SHA-256)", locked.data_fingerprint),
        ("Components kept", str(monitored.components)),
        ("Confidence of the limits", level_percent(locked.model.confidence)),
        ("Reference samples", str(len(locked.reference.labels))),
        ("Run rules switched on", ", ".join(mv.RULE_NAMES[r] for r in state.rules) or "none"),
        ("Run length", str(state.run_length)),
        ("Window", window),
    ]
    prov = "\n".join(f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in provenance)
    sections = [header, cautions]
    if saved and saved.note.strip():
        from webapp.web.report import render_note

        sections.append(_section("note", "Note", f'<div class="note">{render_note(saved.note)}</div>'))
    sections += [
        _section("t2", "Hotelling's T² in production order", _figure_html("t2", charts["t2"])),
        _section("q", "Q residual in production order", _figure_html("q", charts["q"])),
        _section("scores", f"Scores on PC{state.component} (±{state.band:g} sd of the reference)",
                 _figure_html("scores", charts["scores"])),
        _section("hits", "Rule hits", hit_html),
        _section("uploads", "Uploads", upload_html),
        _section("provenance", "Provenance", f'<dl class="provenance">\n{prov}\n</dl>'),
    ]
    return _document(title, "\n".join(sections))
