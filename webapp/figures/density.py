"""Density figures for long data: one image of counts per cell, with a few points on top.

The counts arrive already binned (computed by the workers over every row); a
figure carries one image-sized array whatever the number of rows, plus a
uniform random sample of points (scores plot) or the rows furthest beyond a
limit (T² against Q) for hover and picking. Colour follows log10 of the count,
so both the dense core and the sparse tails show; empty cells stay white.
"""

from __future__ import annotations

import math

import numpy as np
import plotly.graph_objects as go

from webapp.figures.scores import ellipse_name
from webapp.figures.text import count_text, escape_text, level_percent, template_literal
from webapp.figures.theme import HALF_NOTE_WIDTH, axis_style, new_figure, style_for

DENSITY_COLOURS = [[0.0, "#E3E8EE"], [0.5, "#7D8FA3"], [1.0, "#1F2A36"]]
POINT_COLOUR = "#D55E00"  # Okabe-Ito vermilion
FLAGGED_COLOUR = "#CC79A7"  # Okabe-Ito reddish purple
LIMIT_COLOUR = "#B00020"


def density_image(counts: np.ndarray, x_edges: np.ndarray, y_edges: np.ndarray, *, name: str) -> go.Heatmap:
    """A heatmap of ``counts`` (x along the first axis): z = log10(count) as float32, empty cells blank."""
    counts = np.asarray(counts)
    with np.errstate(divide="ignore"):
        z = np.log10(counts.T.astype(np.float64))
    z[~np.isfinite(z)] = np.nan
    top = max(1.0, float(np.nanmax(z)) if np.isfinite(z).any() else 1.0)
    ticks = list(range(0, int(math.floor(top)) + 1))
    return go.Heatmap(
        x=((x_edges[:-1] + x_edges[1:]) / 2).astype(np.float32),
        y=((y_edges[:-1] + y_edges[1:]) / 2).astype(np.float32),
        z=z.astype(np.float32),
        zmin=0.0, zmax=top,
        colorscale=DENSITY_COLOURS,
        colorbar=dict(title=dict(text="Samples<br>per cell", side="top"), thickness=12, len=0.45,
                      x=1.02, xanchor="left", y=0.0, yanchor="bottom",
                      tickvals=ticks, ticktext=[count_text(10 ** t) for t in ticks]),
        hoverinfo="skip",  # hover and picking belong to the points on top
        name=escape_text(name),
        showlegend=False,
    )


def density_scores_figure(*, counts, x_edges, y_edges, outside: int, rows: int, sample_x, sample_y, sample_labels,
                          ellipses=(), x_title: str, y_title: str, presentation: bool = False) -> go.Figure:
    """Scores of every row as a density image, a random sample of rows as points, sigma ellipses as lines."""
    style = style_for(presentation)
    shown = len(sample_labels)
    notes = [f"Density of all {count_text(rows)} samples; the points are a uniform random sample of "
             f"{count_text(shown)} for hover and picking."]
    if outside:
        notes.append(f"{count_text(outside)} sample(s) lie outside the drawn range.")
    figure = new_figure(style, title="Scores (long data)", notes=notes,
                        xaxis=axis_style(x_title), yaxis={**axis_style(y_title), "scaleanchor": "x"})
    figure.add_trace(density_image(counts, x_edges, y_edges, name="Sample density"))
    labels = _label_columns(sample_labels)
    figure.add_trace(go.Scattergl(
        x=np.asarray(sample_x, dtype=np.float32), y=np.asarray(sample_y, dtype=np.float32), mode="markers",
        marker=dict(size=max(3, style.marker_size - 3), color=POINT_COLOUR, opacity=0.55),
        customdata=labels if shown else None,
        name=f"Random sample ({count_text(shown)})",
        hovertemplate="<b>%{customdata[1]}</b><br>%{x:.4g}, %{y:.4g}<extra></extra>",
    ))
    for ellipse in ellipses:
        figure.add_trace(go.Scatter(
            x=np.asarray(ellipse.x, dtype=np.float32), y=np.asarray(ellipse.y, dtype=np.float32), mode="lines",
            line=dict(color="#333333", width=style.line_width, dash="dash"), hoverinfo="skip",
            name=template_literal(ellipse_name(ellipse)),
        ))
    return figure


def density_diagnostics_figure(*, counts, t2_edges, q_edges, outside: int, rows: int, flagged_t2, flagged_q,
                               flagged_labels, t2_limit: float, q_limit: float, confidence: float, components: int,
                               t2_over: int, q_over: int, presentation: bool = False) -> go.Figure:
    """T² against Q of every row as a density, the limits as lines, the rows furthest beyond them as points."""
    style = style_for(presentation)
    level = level_percent(confidence)
    notes = [f"Density of all {count_text(rows)} samples at K = {components}; {count_text(t2_over)} above the T² "
             f"limit, {count_text(q_over)} above the Q limit; the {count_text(len(flagged_labels))} furthest beyond "
             "a limit are drawn as points."]
    if outside:
        notes.append(f"{count_text(outside)} sample(s) lie beyond the drawn range.")
    figure = new_figure(style, title="T² and Q (long data)", notes=notes, note_width=HALF_NOTE_WIDTH,
                        xaxis=axis_style("Hotelling's T²", zero_line=False),
                        yaxis=axis_style("Q residual", zero_line=False))
    figure.add_trace(density_image(counts, t2_edges, q_edges, name="Sample density"))
    labels = _label_columns(flagged_labels)
    figure.add_trace(go.Scattergl(
        x=np.asarray(flagged_t2, dtype=np.float32), y=np.asarray(flagged_q, dtype=np.float32), mode="markers",
        marker=dict(size=max(4, style.marker_size - 2), color=FLAGGED_COLOUR, symbol="diamond"),
        customdata=labels if len(labels) else None,
        name="Furthest beyond a limit",
        hovertemplate="<b>%{customdata[1]}</b><br>T² %{x:.4g}<br>Q %{y:.4g}<extra></extra>",
    ))
    t2_top, q_top = float(t2_edges[-1]), float(q_edges[-1])
    figure.add_trace(go.Scatter(x=[t2_limit, t2_limit], y=[0.0, q_top], mode="lines", hoverinfo="skip",
                                line=dict(color=LIMIT_COLOUR, dash="dash", width=style.line_width),
                                name=f"T² limit ({level})"))
    figure.add_trace(go.Scatter(x=[0.0, t2_top], y=[q_limit, q_limit], mode="lines", hoverinfo="skip",
                                line=dict(color=LIMIT_COLOUR, dash="dot", width=style.line_width),
                                name=f"Q limit ({level})"))
    return figure


def _label_columns(labels) -> np.ndarray:
    """customdata rows: the label as is (column 0, read when a point is picked) and escaped for hover (column 1)."""
    raw = [str(label) for label in labels]
    return np.array([[label, template_literal(label)] for label in raw], dtype=object).reshape(len(raw), 2)
