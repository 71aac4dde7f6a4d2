"""Loadings of one component as bars or, on a variable axis, as a line; and the correlation circle.

On spectra (a variable axis, :mod:`webapp.analysis.variable_axis`) the loadings
of a component are a *loading spectrum*: one line against the axis positions,
broken where the chosen variables leave a gap (between ranges), so that bands
can be read as in the spectra themselves.

The correlation circle draws, for each variable, the arrow (r_x, r_y) of its
correlations with the two components. Every arrow lies inside the unit
circle; an arrow reaching the circle means the two components describe that
variable completely, a short one that they describe it poorly. The squared
length r_x² + r_y² is the share of the (preprocessed) variable's variance that
the two components describe, so the dotted inner circle of radius 0.5 marks a
share of 25 %; a note on the figure says so.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import plotly.graph_objects as go

from webapp.analysis.errors import OrdinateError
from webapp.figures._points import as_float32
from webapp.figures.palette import NEGATIVE_COLOUR, POSITIVE_COLOUR
from webapp.figures.arrow_labels import ARROW_COLOUR, NOMINAL_PLOT_PX, arrow_annotations
from webapp.figures.label_placement import PlotFrame
from webapp.figures.text import escape_text, percent
from webapp.figures.theme import (
    AXIS_LINE_COLOUR,
    HALF_NOTE_WIDTH,
    MUTED_TEXT_COLOUR,
    axis_style,
    new_figure,
    style_for,
)

__all__ = ["loadings_bar_figure", "loadings_line_figure", "correlation_circle_figure", "CIRCLE_RANGE"]

#: Both axes of the correlation circle span this range.
CIRCLE_RANGE = (-1.1, 1.1)
_CIRCLE_POINTS = 241


def _names(variables: Sequence[str], p: int | None = None) -> list[str]:
    names = [str(v) for v in variables]
    if not names:
        raise OrdinateError("There are no variables to show.")
    if p is not None and len(names) != p:
        raise OrdinateError(f"There are {len(names)} variable names for {p} values.")
    return names


def loadings_bar_figure(
    *,
    variables: Sequence[str],
    loadings: np.ndarray,
    component: int,
    explained_ratio: float,
    presentation: bool = False,
) -> go.Figure:
    """Horizontal bars of the loadings on one component, largest |loading| at the top.

    Positive loadings are blue, negative vermillion, and they point to
    opposite sides of zero, so the sign is readable without colour.
    ``component`` is 1-based. Above 20 variables the figure grows in height
    (20 px per bar) so that every name stays readable.
    """
    style = style_for(presentation)
    names = _names(variables)
    values = as_float32(loadings, "loadings", len(names))
    order = np.argsort(-np.abs(values), kind="stable")
    shown = [escape_text(names[i]) for i in order]
    rows = np.arange(len(names), dtype=np.int32)
    sorted_values = values[order]
    fig = new_figure(
        style,
        title=f"Loadings on PC{int(component)} · {percent(explained_ratio)}",
        notes=["Sorted by size; blue: positive, vermillion: negative."],
        note_width=HALF_NOTE_WIDTH,
        xaxis={**axis_style("Loading"), "zeroline": True},
        yaxis={**axis_style(zero_line=False), "tickmode": "array", "tickvals": rows.tolist(),
               "ticktext": shown, "autorange": "reversed", "showgrid": False},
        bargap=0.2,
        showlegend=False,
    )
    fig.add_trace(go.Bar(
        x=sorted_values, y=rows, orientation="h",
        marker=dict(color=np.where(sorted_values >= 0, POSITIVE_COLOUR, NEGATIVE_COLOUR).tolist(),
                    line=dict(width=0)),
        customdata=np.array(shown, dtype=object),
        hovertemplate="<b>%{customdata}</b><br>loading %{x:.4f}<extra></extra>",
        name=f"PC{int(component)}",
    ))
    # Long names push the plot to the right: the note ends at the plot's right edge instead of
    # starting at its left edge, so it runs into the names' margin rather than off the figure.
    fig.layout.annotations[0].update(x=1.0, xanchor="right", align="right")
    if len(names) > 20:
        fig.update_layout(height=int(min(160 + 20 * len(names), 4000)))
    return fig


def loadings_line_figure(
    *,
    positions: np.ndarray,
    loadings: np.ndarray,
    breaks_after: Sequence[int] = (),
    component: int,
    explained_ratio: float,
    axis_label: str,
    reversed_axis: bool = False,
    left_out: Sequence[str] = (),
    presentation: bool = False,
) -> go.Figure:
    """The loadings of one component along the variable axis, as one line.

    ``positions`` and ``loadings`` are in axis order; the line is broken after
    each index in ``breaks_after`` (a gap between kept ranges). ``left_out``
    names variables that are not on the axis (not drawn; a note says so).
    Loadings are sent as float32 (half the payload), positions as float64 so
    that hover shows them exactly.
    """
    style = style_for(presentation)
    x = np.asarray(positions, dtype=np.float64)
    y = as_float32(loadings, "loadings", x.size)
    if x.size == 0:
        raise OrdinateError("There are no variables on the axis to show.")
    cuts = np.asarray(sorted(breaks_after), dtype=int) + 1
    if cuts.size:  # a NaN between segments breaks the line (no line across a gap)
        x = np.insert(x, cuts, np.nan)
        y = np.insert(y, cuts, np.float32(np.nan))
    notes = ["Loading spectrum: one point per variable on the axis."]
    if left_out:
        shown = ", ".join(f"'{escape_text(v)}'" for v in left_out[:5]) + (" and others" if len(left_out) > 5 else "")
        notes.append(f"Not on the axis, so not drawn here: {shown}.")
    fig = new_figure(
        style,
        title=f"Loadings on PC{int(component)} · {percent(explained_ratio)}",
        notes=notes,
        xaxis={**axis_style(axis_label, zero_line=False), **({"autorange": "reversed"} if reversed_axis else {})},
        yaxis={**axis_style("Loading"), "zeroline": True},
        showlegend=False,
    )
    fig.add_trace(go.Scatter(
        x=x, y=y, mode="lines", connectgaps=False, name=f"PC{int(component)}",
        line=dict(color=POSITIVE_COLOUR, width=style.line_width),
        hovertemplate="position %{x}<br>loading %{y:.4f}<extra></extra>",
    ))
    return fig


def correlation_circle_figure(
    *,
    variables: Sequence[str],
    correlations_x: np.ndarray,
    correlations_y: np.ndarray,
    x_title: str,
    y_title: str,
    presentation: bool = False,
    max_arrows: int | None = None,
) -> go.Figure:
    """Correlations of each variable with two components, as arrows inside the unit circle.

    With more than ``max_arrows`` variables, only the ones farthest from the
    origin get an arrow and a name; every variable stays a point with hover text,
    and a note says how many are named.

    Equal axis scales, both axes fixed to :data:`CIRCLE_RANGE`; the unit
    circle is solid, the radius-0.5 circle dotted. Arrows are annotations in
    data coordinates from the origin, the variable's name at the tip.
    """
    style = style_for(presentation)
    names = _names(variables)
    rx = as_float32(correlations_x, "x correlations", len(names))
    ry = as_float32(correlations_y, "y correlations", len(names))
    # A variable whose values overflowed in preprocessing has no finite correlation: it is left
    # off the circle with a note rather than failing the whole panel.
    placed = np.isfinite(rx) & np.isfinite(ry)
    radius_of = np.where(placed, np.hypot(np.nan_to_num(rx), np.nan_to_num(ry)), -1.0)
    if np.any(radius_of > 1.0 + 1e-3):
        raise OrdinateError("A correlation pair lies outside the unit circle; pass correlations, not loadings.")
    phi = np.linspace(0.0, 2.0 * np.pi, _CIRCLE_POINTS)
    circle_x, circle_y = np.cos(phi), np.sin(phi)
    circle_x[-1], circle_y[-1] = circle_x[0], circle_y[0]
    named = np.flatnonzero(placed)
    notes = ["Dotted circle: under 25 % of a variable's variance shown."]
    if max_arrows is not None and named.size > max_arrows:
        named = np.sort(np.argsort(-radius_of, kind="stable")[:max_arrows])
        notes.append(f"Showing the {max_arrows} strongest of {len(names)} variables (farthest from the centre); "
                     f"the others are dots (hover to read them).")
    if not placed.all():
        rx, ry = np.where(placed, rx, np.nan), np.where(placed, ry, np.nan)
        notes.append(_unplaced_note([names[i] for i in np.flatnonzero(~placed)]))
    fig = new_figure(
        style,
        notes=notes,
        note_width=HALF_NOTE_WIDTH,
        xaxis={**axis_style(x_title), "range": list(CIRCLE_RANGE), "constrain": "domain"},
        yaxis={**axis_style(y_title), "range": list(CIRCLE_RANGE), "scaleanchor": "x", "scaleratio": 1,
               "constrain": "domain"},
        showlegend=False,
    )
    for radius, dash, colour in ((1.0, "solid", MUTED_TEXT_COLOUR), (0.5, "dot", AXIS_LINE_COLOUR)):
        fig.add_trace(go.Scatter(
            x=(radius * circle_x).astype(np.float32), y=(radius * circle_y).astype(np.float32),
            mode="lines", line=dict(color=colour, dash=dash, width=style.line_width * 0.75),
            name=f"radius {radius:g}", hoverinfo="skip",
        ))
    # Invisible points at the tips carry the hover text (annotations have none).
    fig.add_trace(go.Scatter(
        x=rx, y=ry, mode="markers",
        marker=dict(size=style.marker_size * 0.6, color=ARROW_COLOUR, opacity=0.45 if len(named) < len(names) else 0.0),
        customdata=np.array([escape_text(v) for v in names], dtype=object), name="variables",
        hovertemplate="<b>%{customdata}</b><br>r with x: %{x:.3f}<br>r with y: %{y:.3f}<extra></extra>",
    ))
    width, height = NOMINAL_PLOT_PX[("circle", presentation)]
    annotations, leaders, _ = arrow_annotations(
        [names[i] for i in named], rx[named], ry[named], style,
        PlotFrame(x_range=CIRCLE_RANGE, y_range=CIRCLE_RANGE, width_px=width, height_px=height))
    fig.update_layout(annotations=list(fig.layout.annotations) + annotations,
                      shapes=list(fig.layout.shapes) + leaders)
    return fig


def _unplaced_note(unplaced: Sequence[str]) -> str:
    shown = ", ".join(f"'{name}'" for name in unplaced[:5]) + (" and others" if len(unplaced) > 5 else "")
    return (f"Not drawn: {shown}, whose correlation with these components is not a finite number "
            "(values too large for the calculation); rescale those variables to see them.")
