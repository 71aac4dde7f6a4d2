"""Run charts of a monitored reference model: T², Q and one component's scores over time.

Pure functions from the monitoring table (one row per scored new sample, in
production order; columns ``position``, ``upload``, ``sample``, ``t2``, ``q``,
``t2_limit``, ``q_limit``, ``t2_beyond``, ``q_beyond``, ``PC1``..) and the
model's reference period (its samples' ``labels``, ``scores``, ``t2``, ``q``,
``t2_median``, ``q_median`` and ``score_sd``) to Plotly figures.

The x axis is the position in production order: new samples at 0, 1, 2, ...
(the ``position`` column), the reference period before them at -n .. -1 and
shaded. Uploads are separated by vertical lines. Points beyond a limit carry a
marker of their own; points in a rule hit are ringed.

Trace and shape names are the contract tests read:

* traces "reference", "new samples", "limit", "median", "beyond limit",
  "rule hits", "picked" (T² and Q charts); "reference", "new samples",
  "band upper", "band lower", "centre", "outside band", "picked" (scores chart);
* shapes "reference period" and "upload boundary".

``customdata`` of a new sample's point is ``[sample, upload, position]``; of a
reference point ``[label, "", -1]``. :func:`picked_position` reads a click.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import plotly.graph_objects as go

from webapp.analysis.errors import OrdinateError
from webapp.figures.palette import NEGATIVE_COLOUR
from webapp.figures.text import escape_text, level_percent, template_literal
from webapp.figures.theme import (
    AXIS_LINE_COLOUR,
    HALF_NOTE_WIDTH,
    MUTED_TEXT_COLOUR,
    TEXT_COLOUR,
    axis_style,
    new_figure,
    style_for,
)

__all__ = ["MONITORING_CAUTION", "STATISTICS", "picked_position", "scores_run_chart", "statistic_run_chart"]

#: Beside the run charts (page, report, exports): our wording of the usual caution.
MONITORING_CAUTION = (
    "These charts give statistical signals about new samples, not decisions: a point beyond a limit "
    "or a rule hit is a reason to look closer, never on its own a reason to release or reject material. "
    "Follow your validated local procedures."
)
STATISTICS = {"t2": "Hotelling's T²", "q": "Q residual"}

_X_TITLE = "Position in production order (reference period below 0)"
_LEGEND_BELOW = dict(orientation="h", x=0, xanchor="left", y=-0.34, yanchor="top")
_REFERENCE_COLOUR = "#9AA0A6"
_NEW_COLOUR = "#0072B2"  # Okabe-Ito blue
_LIMIT_COLOUR = "#5B6168"
_SHADE = "rgba(154,160,166,0.16)"
_HIT_COLOUR = "#CC79A7"  # Okabe-Ito reddish purple: apart from the vermillion of "beyond the limit"


def _column(frame, name: str) -> np.ndarray:
    if name not in frame.columns:
        raise OrdinateError(f"The monitoring table has no column '{name}'; score the uploads again.")
    return frame[name].to_numpy()


def _reference_x(reference) -> np.ndarray:
    n = len(reference.labels)
    return np.arange(-n, 0, dtype=np.int64)


def _new_customdata(frame) -> np.ndarray:
    return np.column_stack([
        np.array([escape_text(s) for s in frame["sample"].astype(str)], dtype=object),
        np.array([escape_text(u) for u in frame["upload"].astype(str)], dtype=object),
        frame["position"].to_numpy(dtype=np.int64),
    ]) if len(frame) else np.empty((0, 3), dtype=object)


def _reference_customdata(reference) -> np.ndarray:
    n = len(reference.labels)
    return np.column_stack([
        np.array([escape_text(s) for s in reference.labels], dtype=object),
        np.full(n, "", dtype=object),
        np.full(n, -1, dtype=np.int64),
    ]) if n else np.empty((0, 3), dtype=object)


def _boundaries(frame) -> list[float]:
    """x of the lines between uploads: halfway between an upload's last point and the next one's first."""
    if len(frame) < 2:
        return []
    uploads = frame["upload"].astype(str).to_numpy()
    positions = frame["position"].to_numpy(dtype=np.int64)
    change = np.flatnonzero(uploads[1:] != uploads[:-1]) + 1
    return [float(positions[i]) - 0.5 for i in change]


def _frame_shapes(frame, reference, show_reference: bool, style) -> list[dict]:
    shapes = []
    n_ref = len(reference.labels)
    if show_reference and n_ref:
        shapes.append(dict(
            type="rect", name="reference period", xref="x", yref="paper", x0=-n_ref - 0.5, x1=-0.5, y0=0, y1=1,
            fillcolor=_SHADE, line=dict(width=0), layer="below",
            label=dict(text="Reference period", textposition="top right", padding=4,
                       font=dict(size=style.note_size, color=MUTED_TEXT_COLOUR)),
        ))
    for x in _boundaries(frame):
        shapes.append(dict(type="line", name="upload boundary", xref="x", yref="paper", x0=x, x1=x, y0=0, y1=1,
                           line=dict(color=AXIS_LINE_COLOUR, width=1, dash="dot"), layer="below"))
    return shapes


#: Without a window, a chart opens on the new samples and at most this many (or as many as there are new
#: samples, if more) reference samples before them; the toolbar's autoscale shows the whole reference period.
REFERENCE_SHOWN = 30


def _x_range(frame, reference, show_reference: bool, window: tuple[int | None, int | None]) -> list[float] | None:
    first, last = window
    positions = frame["position"].to_numpy(dtype=np.int64)
    if first is None and last is None:
        n_ref = len(reference.labels)
        shown = max(REFERENCE_SHOWN, positions.size)
        if not show_reference or n_ref <= shown or positions.size == 0:
            return None
        return [-shown - 0.5, float(positions.max()) + 0.5]
    low = -len(reference.labels) if show_reference else 0
    high = int(positions.max()) if positions.size else 0
    low = low if first is None else first
    high = high if last is None else last
    return [low - 0.5, high + 0.5]


def _hover(what: str) -> str:
    return ("%{customdata[0]}<br>upload %{customdata[1]}<br>position %{customdata[2]}<br>"
            + template_literal(what) + " %{y:.4g}<extra></extra>")


def _reference_trace(x, y, reference, style, what: str) -> go.Scatter:
    return go.Scatter(
        x=x, y=np.asarray(y, dtype=np.float64), mode="markers", name="reference",
        legendgroup="reference", showlegend=True,
        marker=dict(color=_REFERENCE_COLOUR, size=style.marker_size - 2, symbol="circle"),
        customdata=_reference_customdata(reference),
        hovertemplate="%{customdata[0]}<br>reference period<br>" + template_literal(what) + " %{y:.4g}<extra></extra>",
    )


def _new_trace(frame, y, style, what: str) -> go.Scatter:
    return go.Scatter(
        x=frame["position"].to_numpy(dtype=np.int64), y=np.asarray(y, dtype=np.float64),
        mode="lines+markers", name="new samples",
        line=dict(color=_NEW_COLOUR, width=1), marker=dict(color=_NEW_COLOUR, size=style.marker_size),
        customdata=_new_customdata(frame), hovertemplate=_hover(what),
    )


def _marker_trace(frame, rows: np.ndarray, y, name: str, style, *, symbol: str, colour: str,
                  what: str, size_factor: float = 1.6, legend: str | None = None) -> go.Scatter:
    sub = frame.iloc[rows]
    return go.Scatter(
        x=sub["position"].to_numpy(dtype=np.int64), y=np.asarray(y, dtype=np.float64)[rows],
        mode="markers", name=name, legendgroup=name,
        marker=dict(symbol=symbol, color=colour, size=style.marker_size * size_factor,
                    line=dict(width=style.line_width, color=colour)),
        customdata=_new_customdata(sub), hovertemplate=_hover(what),
        meta=legend or name,
    )


def _picked_trace(frame, y, pick: int | None, style) -> list[go.Scatter]:
    if pick is None:
        return []
    rows = np.flatnonzero(frame["position"].to_numpy(dtype=np.int64) == pick)
    if rows.size == 0:
        return []
    return [go.Scatter(
        x=[pick], y=[float(np.asarray(y, dtype=np.float64)[rows[0]])], mode="markers", name="picked",
        showlegend=False, hoverinfo="skip",
        marker=dict(symbol="circle-open", size=style.marker_size * 2.6, color=TEXT_COLOUR,
                    line=dict(width=style.line_width + 1.0, color=TEXT_COLOUR)),
    )]


def _hit_rows(frame, hits: Sequence, statistic: str) -> np.ndarray:
    """Rows of the frame inside a run-above-median hit of ``statistic`` (positions first..last)."""
    positions = frame["position"].to_numpy(dtype=np.int64)
    inside = np.zeros(len(frame), dtype=bool)
    for hit in hits:
        if hit.statistic == statistic and hit.rule == "run-above-median":
            inside |= (positions >= hit.first) & (positions <= hit.last)
    return np.flatnonzero(inside)


def statistic_run_chart(frame, reference, statistic: str, *, confidence: float, hits: Sequence = (),
                        show_reference: bool = True, window: tuple[int | None, int | None] = (None, None),
                        pick: int | None = None, presentation: bool = False) -> go.Figure:
    """T² (``statistic="t2"``) or Q (``"q"``) of every monitored sample in production order.

    The limit line follows the frame's ``t2_limit``/``q_limit`` column (the limit
    for new samples); the dashed "median" line is the reference period's median
    that the run rule counts against. ``hits`` are rule hits (objects with
    ``rule``, ``statistic``, ``first``, ``last``); runs above the median are
    ringed. ``window`` (first, last) limits the x range to those positions; without one the
    chart opens on the new samples and the last :data:`REFERENCE_SHOWN` reference samples
    (or as many as there are new samples), all of them drawn.
    """
    if statistic not in STATISTICS:
        raise OrdinateError(f"Unknown statistic '{statistic}'; use one of: {', '.join(STATISTICS)}.")
    style = style_for(presentation)
    what = "T²" if statistic == "t2" else "Q"
    values = _column(frame, statistic).astype(np.float64)
    limits = _column(frame, f"{statistic}_limit").astype(np.float64)
    beyond = np.flatnonzero(_column(frame, f"{statistic}_beyond").astype(bool))
    median = float(reference.t2_median if statistic == "t2" else reference.q_median)
    level = level_percent(confidence)
    traces = []
    x_ref = _reference_x(reference)
    if show_reference and x_ref.size:
        traces.append(_reference_trace(x_ref, reference.t2 if statistic == "t2" else reference.q,
                                       reference, style, what))
    traces.append(_new_trace(frame, values, style, what))
    positions = frame["position"].to_numpy(dtype=np.int64)
    if positions.size:
        # One step per sample: x steps from -0.5 to +0.5 around each point.
        traces.append(go.Scatter(
            x=positions, y=limits, mode="lines", line=dict(color=TEXT_COLOUR, dash="dash", width=style.line_width,
                                                             shape="hvh"),
            name="limit", meta=f"{what} limit for new samples ({level})", hoverinfo="skip",
        ))
    x_low = float(x_ref[0]) if (show_reference and x_ref.size) else (float(positions[0]) if positions.size else 0.0)
    x_high = float(positions[-1]) if positions.size else 0.0
    traces.append(go.Scatter(
        x=[x_low, x_high], y=[median, median], mode="lines", name="median", meta="reference median",
        line=dict(color=MUTED_TEXT_COLOUR, dash="dot", width=1), hoverinfo="skip",
    ))
    if beyond.size:
        traces.append(_marker_trace(frame, beyond, values, "beyond limit", style, symbol="x-thin-open",
                                    colour=NEGATIVE_COLOUR, what=what, size_factor=1.5))
    run_rows = _hit_rows(frame, hits, statistic)
    if run_rows.size:
        traces.append(_marker_trace(frame, run_rows, values, "rule hits", style, symbol="square-open",
                                    colour=_HIT_COLOUR, what=what, size_factor=1.9))
    traces += _picked_trace(frame, values, pick, style)
    for trace in traces:
        trace.name = _legend_name(trace, what, level)
    return _run_figure(style, f"{STATISTICS[statistic]} in production order", what, traces,
                       frame, reference, show_reference, window)


_LEGEND = {
    "reference": "Reference period",
    "new samples": "New samples",
    "median": "Reference median",
    "beyond limit": "Beyond the limit",
    "rule hits": "Run above the median",
    "band upper": "Band (reference)",
    "band lower": "Band (reference)",
    "centre": "Reference mean (0)",
    "outside band": "Outside the band",
}


def _legend_name(trace, what: str, level: str) -> str:
    # Keep the contract name in ``meta`` when the legend text differs; tests read ``meta`` then.
    name = trace.name
    if name == "limit":
        trace.meta = "limit"
        return f"{what} limit, new samples ({level})"
    if name in _LEGEND:
        trace.meta = name
        if name == "picked":
            return name
        return _LEGEND[name]
    trace.meta = name
    return name


def _apply_range(fig, frame, reference, show_reference, window) -> None:
    x_range = _x_range(frame, reference, show_reference, window)
    if x_range is not None:
        fig.update_xaxes(range=x_range)


def scores_run_chart(frame, reference, component: int, *, band: float = 3.0,
                     show_reference: bool = True, window: tuple[int | None, int | None] = (None, None),
                     pick: int | None = None, presentation: bool = False) -> go.Figure:
    """Scores of component ``component`` (1-based) over time with ±``band``·sd lines from the reference.

    The band is centred on 0 (the reference mean of every score) with the
    reference period's standard deviation of that component's scores
    (``reference.score_sd``).
    """
    style = style_for(presentation)
    k = np.asarray(reference.score_sd).shape[0]
    if not 1 <= component <= k:
        raise OrdinateError(f"The model keeps {k} component(s); choose a component from 1 to {k}.")
    name = f"PC{component}"
    values = _column(frame, name).astype(np.float64)
    sd = float(np.asarray(reference.score_sd, dtype=np.float64)[component - 1])
    half = band * sd
    what = f"{name} score"
    traces = []
    x_ref = _reference_x(reference)
    if show_reference and x_ref.size:
        traces.append(_reference_trace(x_ref, np.asarray(reference.scores)[:, component - 1], reference, style, what))
    traces.append(_new_trace(frame, values, style, what))
    positions = frame["position"].to_numpy(dtype=np.int64)
    x_low = float(x_ref[0]) if (show_reference and x_ref.size) else (float(positions[0]) if positions.size else 0.0)
    x_high = float(positions[-1]) if positions.size else 0.0
    k_text = f"{band:g}"
    for trace_name, level in (("band upper", half), ("band lower", -half)):
        traces.append(go.Scatter(
            x=[x_low, x_high], y=[level, level], mode="lines", name=trace_name,
            legendgroup="band", showlegend=trace_name == "band upper",
            line=dict(color=_LIMIT_COLOUR, dash="dash", width=style.line_width), hoverinfo="skip",
        ))
    traces.append(go.Scatter(x=[x_low, x_high], y=[0.0, 0.0], mode="lines", name="centre", showlegend=False,
                             line=dict(color=MUTED_TEXT_COLOUR, dash="dot", width=1), hoverinfo="skip"))
    outside = np.flatnonzero(np.abs(values) > half)
    if outside.size:
        traces.append(_marker_trace(frame, outside, values, "outside band", style, symbol="x-thin-open",
                                    colour=NEGATIVE_COLOUR, what=what, size_factor=1.5))
    traces += _picked_trace(frame, values, pick, style)
    for trace in traces:
        trace.name = _legend_name(trace, what, "")
    for trace in traces:
        if trace.meta == "band upper":
            trace.name = f"±{k_text} sd of the reference"
    return _run_figure(style, f"Scores on {name} in production order", f"{name} score", traces,
                       frame, reference, show_reference, window)


def _run_figure(style, title, y_title, traces, frame, reference, show_reference, window) -> go.Figure:
    """A run chart: production order across, the reference period and upload boundaries as shapes."""
    fig = new_figure(
        style,
        title=title,
        note_width=HALF_NOTE_WIDTH,
        xaxis=axis_style(_X_TITLE, zero_line=False),
        yaxis=axis_style(y_title),
        shapes=_frame_shapes(frame, reference, show_reference, style),
        legend=_LEGEND_BELOW,
        margin=dict(b=104),
    )
    fig.add_traces(traces)
    _apply_range(fig, frame, reference, show_reference, window)
    return fig


def picked_position(click_data) -> int | None:
    """The position of a clicked new sample (``None`` for a reference point, a line or nothing)."""
    try:
        point = click_data["points"][0]
        position = int(point["customdata"][2])
    except (TypeError, KeyError, IndexError, ValueError):
        return None
    return position if position >= 0 else None
