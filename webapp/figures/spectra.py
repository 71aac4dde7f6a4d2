"""Figures along the variable axis of spectra: the samples' spectra, and a picked sample's contributions.

* :func:`spectra_figure`: the raw spectra of (a sample of) the samples above,
  the same samples after the spectral preprocessing below, coloured by group,
  the picked sample drawn thick and dark on top. One trace per group and
  panel, spectra separated by a NaN (a line drawn through it is broken), so
  the page gets a handful of float32 arrays, not one component per sample.
* :func:`contributions_line_figure`: a sample's contributions to T² and its
  residuals (Q = Σ e²) as two lines against the axis, in place of one bar per
  variable.

Both are pure: the arrays come in already chosen (which samples, which
positions); the notes say how many are drawn.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from webapp.analysis.errors import OrdinateError
from webapp.figures._points import as_float32
from webapp.figures.loadings import range_shapes
from webapp.figures.palette import NEGATIVE_COLOUR, POSITIVE_COLOUR, group_order, group_styles
from webapp.figures.text import count_text, escape_text, template_literal
from webapp.figures.theme import TEXT_COLOUR, axis_style, base_layout, style_for

__all__ = ["SpectraBlock", "spectra_figure", "contributions_line_figure", "PICKED_COLOUR"]

PICKED_COLOUR = TEXT_COLOUR


@dataclass(frozen=True, eq=False)
class SpectraBlock:
    """Spectra of the drawn samples at some positions: ``values`` is samples × positions, in axis order.

    ``breaks_after``: indices after which the line is broken (a gap between ranges).
    """

    positions: np.ndarray
    values: np.ndarray
    title: str
    breaks_after: Sequence[int] = ()


def _lines(block: SpectraBlock) -> tuple[dict, np.ndarray]:
    """The x of every line (as ``x0``/``dx`` when evenly spaced, else float32 with a NaN at each break)
    and one float32 row of y per sample."""
    positions = np.asarray(block.positions, dtype=np.float64)
    values = np.asarray(block.values, dtype=np.float32)
    cuts = np.asarray(sorted(block.breaks_after), dtype=int) + 1
    steps = np.diff(positions)
    if not cuts.size and steps.size and np.allclose(steps, steps[0], rtol=1e-6, atol=0):
        return {"x0": float(positions[0]), "dx": float(steps[0])}, values  # no x array per line
    if cuts.size:
        positions = np.insert(positions, cuts, np.nan)
        values = np.insert(values, cuts, np.float32(np.nan), axis=1)
    return {"x": positions.astype(np.float32)}, values


def spectra_figure(
    *,
    raw: SpectraBlock,
    prepared: SpectraBlock,
    labels: Sequence[str],
    groups: Sequence[str],
    picked: int | None,
    axis_label: str,
    drawn_note: str,
    reversed_axis: bool = False,
    shaded_ranges: Sequence[tuple[float, float]] = (),
    presentation: bool = False,
) -> go.Figure:
    """Raw spectra (top) and preprocessed spectra (bottom) of the drawn samples, one colour per group.

    ``labels`` and ``groups`` have one entry per row of the blocks' ``values``;
    ``picked`` is the row of the picked sample (drawn on top, thick and dark),
    or None. ``drawn_note`` says how many spectra are drawn and how they were
    chosen.
    """
    style = style_for(presentation)
    n = len(labels)
    if n == 0 or raw.values.shape[0] != n or prepared.values.shape[0] != n:
        raise OrdinateError("There are no spectra to show.")
    groups = np.asarray([str(g) for g in groups], dtype=object)
    order = group_order(groups)
    styles = group_styles(order)
    notes = [drawn_note, f"Above: {raw.title}. Below: {prepared.title}.",
             "Colour: group; hover a line for its sample." + (" Dark and thick: the picked sample."
                                                              if picked is not None else "")]
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, vertical_spacing=0.08)
    fig.update_layout(base_layout(style, title="Spectra of the samples", notes=notes))
    # One trace per spectrum: the hover names its sample, the legend its group; the picked
    # sample last, so that it is drawn on top.
    rows = [i for i in range(n) if i != picked] + ([picked] if picked is not None else [])
    for panel, block in ((1, raw), (2, prepared)):
        x, ys = _lines(block)
        in_legend = set()
        for i in rows:
            group, is_picked = groups[i], i == picked
            label = template_literal(labels[i])
            shown = panel == 1 and (is_picked or (len(order) > 1 and group not in in_legend))
            if not is_picked:
                in_legend.add(group)
            fig.add_trace(go.Scatter(
                **x, y=ys[i], mode="lines", connectgaps=False,
                name=f"picked: {escape_text(labels[i])}" if is_picked else escape_text(group),
                legendgroup="picked" if is_picked else group, showlegend=shown,
                opacity=1.0 if is_picked else 0.7,
                line=dict(color=PICKED_COLOUR if is_picked else styles[group].colour,
                          width=style.line_width * (1.6 if is_picked else 0.6)),
                hovertemplate=f"{label}<br>position %{{x}}<br>value %{{y:.4g}}<extra></extra>",
            ), row=panel, col=1)
    x_axis = {**axis_style(zero_line=False), **({"autorange": "reversed"} if reversed_axis else {})}
    fig.update_layout(
        margin={**fig.layout.margin.to_plotly_json(), "b": 96},
        xaxis=x_axis, xaxis2={**x_axis, **axis_style(axis_label, zero_line=False)},
        yaxis=axis_style("Raw value", zero_line=False), yaxis2=axis_style("Preprocessed", zero_line=False),
        height=560, legend=dict(orientation="h", x=0.0, xanchor="left", y=-0.17, yanchor="top"),
    )
    if shaded_ranges:
        fig.update_layout(shapes=list(fig.layout.shapes) + range_shapes(shaded_ranges))
    return fig


def contributions_line_figure(
    *,
    positions: np.ndarray,
    t2_contributions: np.ndarray,
    q_residuals: np.ndarray,
    label: str,
    axis_label: str,
    breaks_after: Sequence[int] = (),
    reversed_axis: bool = False,
    left_out: int = 0,
    presentation: bool = False,
) -> go.Figure:
    """A sample's contributions along the variable axis: T² contributions c_j above, residuals e_j below.

    c_j sum to T²; e_j² sum to Q (the residual e_j is drawn with its sign, so
    that the side of the model the sample lies on can be read; hover gives
    e_j²). Arrays are in axis order; sent as float32.
    """
    style = style_for(presentation)
    x = np.asarray(positions, dtype=np.float64)
    if x.size == 0:
        raise OrdinateError("There are no variables on the axis to show contributions for.")
    c = as_float32(t2_contributions, "T² contributions", x.size)
    e = as_float32(q_residuals, "Q residuals", x.size)
    cuts = np.asarray(sorted(breaks_after), dtype=int) + 1
    if cuts.size:
        x, c, e = (np.insert(v, cuts, v.dtype.type(np.nan)) for v in (x, c, e))
    notes = [f"Along the variable axis ({count_text(np.isfinite(c).sum())} variables): contributions to T² above "
             "(they sum to T²), residuals e below (their squares sum to Q).",
             "Contributions point to regions worth checking; they do not prove a cause."]
    if left_out:
        notes.append(f"{count_text(left_out)} variable(s) not on the axis are not drawn here.")
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, vertical_spacing=0.08)
    fig.update_layout(base_layout(style, title=f"Contributions for sample {label}", notes=notes))
    fig.add_trace(go.Scatter(x=x, y=c, mode="lines", connectgaps=False, name="T² contribution",
                             line=dict(color=POSITIVE_COLOUR, width=style.line_width),
                             hovertemplate="position %{x}<br>contribution to T² %{y:.4g}<extra></extra>"),
                  row=1, col=1)
    fig.add_trace(go.Scatter(x=x, y=e, mode="lines", connectgaps=False, name="residual e",
                             line=dict(color=NEGATIVE_COLOUR, width=style.line_width),
                             customdata=(e.astype(np.float64) ** 2).astype(np.float32),
                             hovertemplate="position %{x}<br>residual e %{y:.4g} (e² %{customdata:.4g})<extra></extra>"),
                  row=2, col=1)
    x_axis = {**axis_style(zero_line=False), **({"autorange": "reversed"} if reversed_axis else {})}
    fig.update_layout(
        xaxis=x_axis, xaxis2={**x_axis, **axis_style(axis_label, zero_line=False)},
        yaxis={**axis_style("T² contribution"), "zeroline": True},
        yaxis2={**axis_style("Residual e"), "zeroline": True}, showlegend=False, height=420,
    )
    return fig
