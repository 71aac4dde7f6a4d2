"""Outlier diagnostics: T² against Q with their limits, the list of flagged
samples, and one sample's contributions.

Hotelling's T² measures how far a sample lies from the model centre inside
the model plane; Q (squared prediction error, SPE) how far it lies from the
plane. The limits come from :mod:`webapp.analysis.diagnostics` (Jackson &
Mudholkar 1979 for Q; F-form for T²). Contributions follow Westerhuis,
Gurden & Smilde (2000), *Chemometrics and Intelligent Laboratory Systems* 51,
95-114.

Points use the selection scheme of :mod:`webapp.figures.scores`:
``customdata[0]`` of each point is the sample's label.
"""

from __future__ import annotations

import math
from typing import Sequence

import numpy as np
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from webapp.analysis.errors import OrdinateError
from webapp.figures._points import (
    WEBGL_THRESHOLD,
    BatchPoints,
    as_float32,
    as_labels,
    batch_trace,
    point_trace,
    resolve_groups,
)
from webapp.figures.palette import NEGATIVE_COLOUR, POSITIVE_COLOUR, GroupStyle
from webapp.figures.scores import DENSITY_THRESHOLD, _density_trace, picked_ring
from webapp.figures.text import count_text, escape_text, level_percent
from webapp.figures.theme import (
    HALF_NOTE_WIDTH,
    MUTED_TEXT_COLOUR,
    TEXT_COLOUR,
    axis_style,
    base_layout,
    new_figure,
    style_for,
)

__all__ = [
    "CAUTION",
    "TOP_CONTRIBUTIONS",
    "diagnostics_figure",
    "flagged_samples",
    "contributions_figure",
]

#: Shown on the diagnostics figures (and for the UI to reuse).
CAUTION = (
    "A point beyond a limit is a sample to investigate, not a verdict: "
    "follow your validated local procedures before releasing or rejecting material."
)
#: Bars outlined as the largest in each contributions panel.
TOP_CONTRIBUTIONS = 3

_LIMIT_COLOUR = "#5B6168"


def _positive_limit(value, name: str, allow_zero: bool) -> float:
    try:
        value = float(value)
    except (TypeError, ValueError):
        raise OrdinateError(f"The {name} must be a number; got {value!r}.") from None
    if not math.isfinite(value) or value < 0 or (value == 0 and not allow_zero):
        raise OrdinateError(f"The {name} must be a positive number; got {value!r}.")
    return value


def _check_confidence(confidence) -> float:
    confidence = float(confidence)
    if not (0.0 < confidence < 1.0):
        raise OrdinateError(f"The confidence level must lie between 0 and 1; got {confidence!r}.")
    return confidence


def _float64(values, name: str, n: int | None = None) -> np.ndarray:
    # Full precision for the table; the figure sends float32.
    as_float32(values, name, n)  # same checks and messages as the figure
    return np.asarray(values, dtype=np.float64)


def _checked(t2, q, labels, t2_limit, q_limit, as_array) -> tuple:
    """T², Q (as ``as_array`` makes them), labels and both limits, checked alike for the table and the figure."""
    t2_values = as_array(t2, "T² values")
    n = t2_values.shape[0]
    return (t2_values, as_array(q, "Q values", n), as_labels(labels, n),
            _positive_limit(t2_limit, "T² limit", allow_zero=False), _positive_limit(q_limit, "Q limit", allow_zero=True))


def _flags(t2: np.ndarray, q: np.ndarray, t2_limit: float, q_limit: float) -> tuple[np.ndarray, np.ndarray]:
    over_t2 = t2 > t2_limit
    # q_limit 0 means every component is kept and Q is zero: nothing to flag.
    over_q = q > q_limit if q_limit > 0 else np.zeros_like(over_t2)
    return over_t2, over_q


def flagged_samples(labels, t2, q, t2_limit: float, q_limit: float) -> list[dict]:
    """Samples above the T² or the Q limit, the worst first.

    Rows ``{label, t2, q, over_t2, over_q, ratio}``; ``ratio`` is
    max(T²/T²-limit, Q/Q-limit) (the Q term is left out when the Q limit is
    0), and rows are sorted by it, descending; ties keep the input order.
    """
    t2_values, q_values, label_array, t2_limit, q_limit = _checked(t2, q, labels, t2_limit, q_limit, _float64)
    over_t2, over_q = _flags(t2_values, q_values, t2_limit, q_limit)
    ratio = t2_values / t2_limit
    if q_limit > 0:
        ratio = np.maximum(ratio, q_values / q_limit)
    flagged = np.flatnonzero(over_t2 | over_q)
    order = flagged[np.argsort(-ratio[flagged], kind="stable")]
    return [
        {
            "label": str(label_array[i]),
            "t2": float(t2_values[i]),
            "q": float(q_values[i]),
            "over_t2": bool(over_t2[i]),
            "over_q": bool(over_q[i]),
            "ratio": float(ratio[i]),
        }
        for i in order
    ]


def diagnostics_figure(
    *,
    t2: np.ndarray,
    q: np.ndarray,
    labels,
    groups,
    t2_limit: float,
    q_limit: float,
    confidence: float,
    highlighted: str | None = None,
    log_axes: bool = False,
    group_order: Sequence[str] | None = None,
    presentation: bool = False,
    batch: BatchPoints | None = None,
    batch_t2_limit: float | None = None,
) -> go.Figure:
    """T² (x) against Q (y), with dashed limit lines and flagged samples outlined.

    Limit lines are layout shapes named "t2-limit" and "q-limit" at exactly
    ``t2_limit`` and ``q_limit``, labelled "T² limit (95 %)" and
    "Q limit (95 %)". Samples above either limit get a dark ring (its own
    legend entry, which also carries the labels in ``customdata[0]``). With
    ``q_limit`` 0 (every component kept) there is no Q line and a note says
    why. ``log_axes`` uses logarithmic axes (Q stays linear when it is zero).

    ``batch``: a new batch's samples (x T², y Q) as dark stars, with the T²
    limit for new samples, ``batch_t2_limit``, as a dotted line named
    "t2-limit-new" (wider than the limit for the model's own samples; Tracy,
    Young & Mason 1992). The Q limit is the same for both.
    """
    style = style_for(presentation)
    t2_values, q_values, label_array, t2_limit, q_limit = _checked(t2, q, labels, t2_limit, q_limit, as_float32)
    n = t2_values.shape[0]
    level = level_percent(_check_confidence(confidence))
    names, present, styles = resolve_groups(groups, n, group_order)
    over_t2, over_q = _flags(t2_values.astype(np.float64), q_values.astype(np.float64), t2_limit, q_limit)
    flagged = over_t2 | over_q
    webgl = n > WEBGL_THRESHOLD

    notes = []
    if q_limit == 0:
        notes.append("Q is zero: every component is kept, so no sample lies off the model plane.")
    notes.append(CAUTION)

    x_type = "log" if log_axes else "linear"
    y_type = "log" if (log_axes and q_limit > 0) else "linear"
    shapes = [dict(
        type="line", name="t2-limit", xref="x", yref="paper", x0=t2_limit, x1=t2_limit, y0=0, y1=1,
        line=dict(color=_LIMIT_COLOUR, dash="dash", width=style.line_width),
        label=dict(text=f"T² limit ({level})", textposition="end", textangle=0, xanchor="left",
                   yanchor="top", padding=4, font=dict(size=style.note_size, color=MUTED_TEXT_COLOUR)),
    )]
    if batch is not None and batch_t2_limit is not None:
        new_limit = _positive_limit(batch_t2_limit, "T² limit for new samples", allow_zero=False)
        shapes.append(dict(
            type="line", name="t2-limit-new", xref="x", yref="paper", x0=new_limit, x1=new_limit, y0=0, y1=1,
            line=dict(color=_LIMIT_COLOUR, dash="dot", width=style.line_width),
            # Labelled at the foot of the line, clear of the other T² limit's label at the top.
            label=dict(text=f"T² limit, new samples ({level})", textposition="start", textangle=0,
                       xanchor="left", yanchor="bottom", padding=4, font=dict(size=style.note_size, color=MUTED_TEXT_COLOUR)),
        ))
    if q_limit > 0:
        shapes.append(dict(
            type="line", name="q-limit", xref="paper", yref="y", x0=0, x1=1, y0=q_limit, y1=q_limit,
            line=dict(color=_LIMIT_COLOUR, dash="dash", width=style.line_width),
            label=dict(text=f"Q limit ({level})", textposition="end", xanchor="right", yanchor="bottom",
                       padding=4, font=dict(size=style.note_size, color=MUTED_TEXT_COLOUR)),
        ))
    fig = new_figure(
        style,
        notes=notes,
        note_width=HALF_NOTE_WIDTH,
        xaxis={**axis_style("Hotelling's T²"), "type": x_type, "rangemode": "tozero"},
        yaxis={**axis_style("Q residual (SPE)"), "type": y_type, "rangemode": "tozero"},
        shapes=shapes,
        dragmode="lasso",
        legend=dict(groupclick="toggleitem"),
    )

    hover_lines = ["T²: %{x:.4g}", "Q: %{y:.4g}"]
    traces: list = []
    if n > DENSITY_THRESHOLD:
        # Many samples: a density of all of them, and markers only where a
        # decision is needed (flagged samples stay clickable).
        traces.append(_density_trace(t2_values, q_values, style, square=False))
        fig.layout.annotations += (dict(
            text=f"Density view of {count_text(n)} samples; only samples beyond a limit are drawn as points.",
            xref="paper", yref="paper", x=1, y=1, xanchor="right", yanchor="bottom", showarrow=False,
            font=dict(size=style.note_size, color=MUTED_TEXT_COLOUR)),)
        present = ()
    for group in present:
        index = np.flatnonzero(names == group)
        traces.append(point_trace(
            x=t2_values[index], y=q_values[index], labels=label_array[index], hover=[],
            name=group, legend_group="group:" + group, style=styles[group], marker_size=style.marker_size,
            hover_lines=hover_lines, show_text=False, text_size=style.label_size, webgl=webgl,
        ))
    index = np.flatnonzero(flagged)
    if index.size:
        traces.append(point_trace(
            x=t2_values[index], y=q_values[index], labels=label_array[index], hover=[],
            name=f"Beyond a {level} limit ({count_text(index.size)})", legend_group="flagged",
            style=GroupStyle(colour=TEXT_COLOUR, symbol="circle-open"),
            marker_size=style.marker_size * 2.0, hover_lines=hover_lines, show_text=False,
            # In the density view these are the only points: WebGL only if they are many.
            text_size=style.label_size, webgl=webgl if present else index.size > WEBGL_THRESHOLD,
            outline=dict(width=style.line_width + 0.6, color=TEXT_COLOUR),
        ))
    if batch is not None:
        traces.append(batch_trace(batch, style.marker_size, hover_lines, style.label_size))
    traces.extend(picked_ring(t2_values, q_values, label_array, highlighted, style, batch))
    fig.add_traces(traces)
    return fig


def contributions_figure(
    *,
    variables: Sequence[str],
    t2_contributions: np.ndarray,
    q_residuals: np.ndarray,
    label: str,
    presentation: bool = False,
) -> go.Figure:
    """Why one sample stands out: its contributions to T² and to Q, side by side.

    Variables keep their original order (top to bottom) in both panels, so a
    variable sits on the same row in each; the :data:`TOP_CONTRIBUTIONS`
    largest bars of each panel (by absolute value) are outlined and the others
    drawn lighter.

    * T² panel: signed contributions c_j (they sum to T²; a negative one pulls
      the sample towards the centre).
    * Q panel: bar length e_j² (the contributions summing to Q), coloured by
      the sign of the residual e_j: blue where the sample is above what the
      model reconstructs, vermillion where it is below. The hover gives e_j.
    """
    style = style_for(presentation)
    names = [str(v) for v in variables]
    p = len(names)
    c = as_float32(t2_contributions, "T² contributions", p).astype(np.float64)
    e = as_float32(q_residuals, "Q residuals", p).astype(np.float64)
    if p == 0:
        raise OrdinateError("There are no variables to show contributions for.")
    shown = np.array([escape_text(v) for v in names], dtype=object)
    rows = np.arange(p, dtype=np.int32)

    fig = make_subplots(rows=1, cols=2, shared_yaxes=True, horizontal_spacing=0.05)
    notes = [
        "Blue: positive, vermillion: negative. Q bars are e² coloured by the sign of the residual e "
        f"(blue: above the model, vermillion: below). Outlined: the {TOP_CONTRIBUTIONS} largest in each panel.",
        "Contributions point to variables worth checking; they do not prove a cause.",
    ]
    fig.update_layout(base_layout(style, title=f"Contributions for sample {label}", notes=notes))
    q_sign = np.where(e >= 0, "above", "below").astype(object)
    fig.add_trace(go.Bar(
        x=c.astype(np.float32), y=rows, orientation="h", name="T² contribution",
        marker=_bar_marker(c, np.abs(c)), customdata=shown,
        hovertemplate="<b>%{customdata}</b><br>contribution to T²: %{x:.4g}<extra></extra>",
        showlegend=False,
    ), row=1, col=1)
    custom_q = np.empty((p, 3), dtype=object)
    custom_q[:, 0], custom_q[:, 1], custom_q[:, 2] = shown, e.tolist(), q_sign
    fig.add_trace(go.Bar(
        x=(e * e).astype(np.float32), y=rows, orientation="h", name="Q contribution",
        marker=_bar_marker(e, e * e), customdata=custom_q,
        hovertemplate=("<b>%{customdata[0]}</b><br>e² = %{x:.4g} (contribution to Q)<br>"
                       "residual e = %{customdata[1]:.4g}: %{customdata[2]} the model<extra></extra>"),
        showlegend=False,
    ), row=1, col=2)
    y_axis = dict(tickmode="array", tickvals=rows.tolist(), ticktext=shown.tolist(),
                  autorange="reversed", showgrid=False, zeroline=False, automargin=True)
    fig.update_layout(
        yaxis={**axis_style(zero_line=False), **y_axis},
        yaxis2={**axis_style(zero_line=False), **y_axis, "showticklabels": False},
        xaxis={**axis_style("Contribution to T² (c_j)"), "zeroline": True},
        xaxis2={**axis_style("Contribution to Q (e_j²)"), "zeroline": True, "rangemode": "tozero"},
        bargap=0.2,
    )
    if p > 20:
        fig.update_layout(height=int(min(160 + 20 * p, 4000)))
    return fig


def _bar_marker(signed: np.ndarray, size: np.ndarray) -> dict:
    top = np.zeros(signed.size, dtype=bool)
    top[np.argsort(-np.abs(size), kind="stable")[:TOP_CONTRIBUTIONS]] = True
    colours = np.where(signed >= 0, POSITIVE_COLOUR, NEGATIVE_COLOUR).tolist()
    return dict(
        color=colours,
        opacity=np.where(top, 1.0, 0.55).astype(np.float32),
        line=dict(color=TEXT_COLOUR, width=np.where(top, 1.5, 0.0).astype(np.float32)),
    )
