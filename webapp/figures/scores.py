"""Scores plot (with optional biplot arrows, ellipses and a density view).

Selection scheme: every sample trace carries ``customdata`` rows whose column
0 is the sample's label as given (unescaped). In a Dash callback,
``selectedData["points"][i]["customdata"][0]`` (or ``clickData``) is the label
of each chosen point, for ``Scatter`` and ``Scattergl`` traces alike;
:func:`webapp.figures.point_label` reads it. Further columns hold the
``hover_values`` in the order given. Ellipses, centroids, the density layer
and the ring around a picked sample carry no labels. In the density view
(more than :data:`DENSITY_THRESHOLD` samples) single samples cannot be
picked: the figure shows counts per cell.

Biplots follow Gabriel, K. R. (1971). The biplot graphic display of matrices
with application to principal component analysis. *Biometrika* 58(3),
453-467. Scores are always drawn as they are (T = XP); only the arrows change
with the scaling:

* distance biplot: arrows are the loadings p_j (rows of P). A sample's
  projection on an arrow then follows its value of that variable; distances
  between samples approximate their Euclidean distances.
* correlation biplot: arrows are p_j · sqrt(λ), i.e. loading × sqrt(eigenvalue),
  which for autoscaled data are the correlations between variable j and each
  component. Arrow lengths show how well the two components represent a
  variable; cosines of angles between arrows approximate the correlations
  between variables.

In both, every arrow is multiplied by one common factor s so that the longest
arrow reaches 80 % of the largest absolute score; s is stated on the figure.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Sequence

import numpy as np
import plotly.graph_objects as go

from webapp.analysis.errors import OrdinateError
from webapp.figures._points import (
    WEBGL_THRESHOLD,
    BatchPoints,
    as_float32,
    as_labels,
    batch_trace,
    hover_columns,
    point_trace,
    resolve_groups,
)
from webapp.figures.arrow_labels import placed_text
from webapp.figures.palette import ALL_SAMPLES_GROUP, NEUTRAL_COLOUR, GroupStyle
from webapp.figures.text import count_text, level_percent, percent, template_literal
from webapp.figures.theme import TEXT_COLOUR, Style, axis_style, new_figure, style_for

if TYPE_CHECKING:  # the figures only read the fields of these results
    from webapp.analysis.ellipses import Ellipse

__all__ = [
    "WEBGL_THRESHOLD",
    "DENSITY_THRESHOLD",
    "HOVER_VALUES_LIMIT",
    "LABEL_LIMIT",
    "DENSITY_BINS",
    "ARROW_FILL",
    "LoadingArrows",
    "loading_arrows",
    "ellipse_name",
    "scores_figure",
]

#: Above this many samples the scores plot shows a density view instead of points.
DENSITY_THRESHOLD = 20_000
#: Extra hover values are sent for at most this many points: they cost more
#: bytes than the coordinates, so beyond it only the label travels with each
#: point (see docs/performance.md).
HOVER_VALUES_LIMIT = 5_000
#: Sample labels are written next to points only up to this many samples.
LABEL_LIMIT = 300
#: Number of cells along the longer axis of the density view.
DENSITY_BINS = 80
#: Share of the largest absolute score that the longest biplot arrow reaches.
ARROW_FILL = 0.8

SCALINGS = ("correlation", "distance")
_SIGMA_DASHES = ("solid", "dash", "dot", "dashdot")
_HOTELLING_DASH = "longdash"
_DENSITY_COLOURSCALE = [[0.0, "#EEF0F2"], [1.0, "#2F3338"]]


# --------------------------------------------------------------------------
# biplot arrows
# --------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class LoadingArrows:
    """Arrows of a biplot, already stretched to the scores' scale.

    Attributes
    ----------
    variables : names, one per arrow.
    dx, dy : arrow tips (the arrows start at the origin), float64.
    scaling : "correlation" or "distance".
    factor : the common stretch factor s applied to every arrow.
    """

    variables: tuple[str, ...]
    dx: np.ndarray
    dy: np.ndarray
    scaling: str
    factor: float
    left_out: int = 0  # shorter arrows not drawn (see ``max_arrows``)
    autoscaled: bool = False  # the data were mean-centred and scaled to unit variance

    @property
    def caption(self) -> str:
        """One sentence that states the scaling and the stretch factor (plain text)."""
        s = f"{self.factor:.3g}"
        if self.scaling == "correlation" and self.autoscaled:
            text = (
                f"Correlation biplot: arrows are each variable's correlations with the two components "
                f"(loading × √eigenvalue) × {s}. Compare arrows with each other, not with the sample positions."
            )
        elif self.scaling == "correlation":
            text = (
                f"Correlation biplot: arrows are loading × √eigenvalue × {s}, each variable's covariance "
                f"with the two components (the data are not autoscaled, so these are not correlations). "
                f"Compare arrows with each other, not with the sample positions."
            )
        else:
            text = (
                f"Distance biplot: arrows are loadings × {s}. "
                f"A sample's projection on an arrow follows its value of that variable."
            )
        if self.left_out:
            shown = len(self.variables)
            text += f" Showing the {shown} strongest of {shown + self.left_out} variables (longest arrows)."
        return text


def loading_arrows(
    loadings_xy: np.ndarray,
    variables: Sequence[str],
    eigenvalues_xy: np.ndarray,
    scaling: str,
    score_extent: float,
    *,
    fill: float = ARROW_FILL,
    max_arrows: int | None = None,
    autoscaled: bool = False,
) -> LoadingArrows:
    """Biplot arrows for the two plotted components (Gabriel 1971).

    Parameters
    ----------
    loadings_xy : (p, 2) loadings of the x and y components.
    variables : p variable names.
    eigenvalues_xy : eigenvalues (variances) of the x and y components.
    scaling : "correlation" (arrow = loading × sqrt(eigenvalue)) or
        "distance" (arrow = loading).
    score_extent : the largest absolute score on either plotted component.
    fill : the longest arrow is stretched to ``fill × score_extent``; the
        factor s = fill × score_extent / (longest unstretched arrow) is the
        same for all arrows and is recorded in ``factor``.
    max_arrows : keep only this many of the longest arrows (None keeps all).
    autoscaled : whether the data were mean-centred and scaled to unit variance;
        only then are correlation-biplot arrows correlations (the caption says which).
    """
    if scaling not in SCALINGS:
        raise OrdinateError(f"The biplot scaling must be one of {', '.join(SCALINGS)}; got {scaling!r}.")
    try:
        P = np.asarray(loadings_xy, dtype=np.float64)
        lam = np.asarray(eigenvalues_xy, dtype=np.float64)
    except (TypeError, ValueError):
        raise OrdinateError("The loadings and eigenvalues of a biplot must be numbers.") from None
    if P.ndim != 2 or P.shape[1] != 2:
        raise OrdinateError(f"Give the loadings of exactly two components (p × 2); got shape {P.shape}.")
    names = tuple(str(v) for v in variables)
    if len(names) != P.shape[0]:
        raise OrdinateError(f"There are {P.shape[0]} loading rows but {len(names)} variable names.")
    if lam.shape != (2,) or not np.all(np.isfinite(lam)) or np.any(lam < 0):
        raise OrdinateError(f"Give two non-negative eigenvalues for the two components; got {lam!r}.")
    if not np.all(np.isfinite(P)):
        raise OrdinateError("The loadings contain a missing or infinite value.")
    extent = float(score_extent)
    if not math.isfinite(extent) or extent <= 0.0:
        raise OrdinateError(f"The score extent must be a positive number; got {score_extent!r}.")
    if not (0.0 < fill <= 1.0):
        raise OrdinateError(f"The arrow fill must lie in (0, 1]; got {fill!r}.")

    arrows = P * np.sqrt(lam) if scaling == "correlation" else P.copy()
    lengths = np.hypot(arrows[:, 0], arrows[:, 1])
    total = lengths.size
    if max_arrows is not None and max_arrows < lengths.size:
        keep = np.sort(np.argsort(-lengths, kind="stable")[: max(int(max_arrows), 0)])
        arrows, lengths, names = arrows[keep], lengths[keep], tuple(names[i] for i in keep)
    longest = float(lengths.max()) if lengths.size else 0.0
    # All arrows of zero length: nothing to stretch; keep them as they are.
    factor = fill * extent / longest if longest > 0.0 else 1.0
    dx, dy = arrows[:, 0] * factor, arrows[:, 1] * factor
    dx.setflags(write=False)
    dy.setflags(write=False)
    return LoadingArrows(variables=names, dx=dx, dy=dy, scaling=scaling, factor=factor,
                         left_out=total - len(names), autoscaled=bool(autoscaled))


# --------------------------------------------------------------------------
# ellipses
# --------------------------------------------------------------------------

def ellipse_name(ellipse: "Ellipse") -> str:
    """Legend text of an ellipse, stating its expected and observed coverage.

    Sigma ellipse: '2σ ellipse · expected 86.5 % · observed 84.2 % inside'.
    Hotelling ellipse: 'T² 95 % ellipse of these 2 PCs · observed 96.0 % inside' (the
    diagnostics' T² uses all K components kept; the ellipse only the two plotted).
    """
    observed = ""
    if ellipse.observed_fraction is not None:
        observed = f" · observed {percent(ellipse.observed_fraction)} inside"
    if ellipse.kind == "hotelling":
        return f"T² {level_percent(ellipse.level)} ellipse of these 2 PCs{observed}"
    return f"{ellipse.level:g}σ ellipse · expected {percent(ellipse.expected_coverage)}{observed}"


def _ellipse_traces(
    ellipses: Sequence["Ellipse"],
    ellipse_groups: Sequence[str | None],
    styles: dict[str, GroupStyle],
    style: Style,
) -> list[go.Scatter]:
    if len(ellipse_groups) != len(ellipses):
        raise OrdinateError(
            f"Give one group per ellipse: {len(ellipses)} ellipse(s) but {len(ellipse_groups)} group name(s)."
        )
    sigma_levels = sorted({float(e.level) for e in ellipses if e.kind != "hotelling"})
    traces = []
    for ellipse, group in zip(ellipses, ellipse_groups):
        if group is not None and group not in styles:
            raise OrdinateError(f"An ellipse belongs to group {group!r}, which has no samples in this plot.")
        name = ellipse_name(ellipse)
        if ellipse.kind == "hotelling":
            colour, dash = NEUTRAL_COLOUR, _HOTELLING_DASH
        else:
            colour = NEUTRAL_COLOUR if group is None else styles[group].colour
            dash = _SIGMA_DASHES[sigma_levels.index(float(ellipse.level)) % len(_SIGMA_DASHES)]
        if group is None and ellipse.kind != "hotelling" and not (len(styles) == 1 and ALL_SAMPLES_GROUP in styles):
            name = f"All samples · {name}"
        owner = ALL_SAMPLES_GROUP if group is None else group
        hover = [f"<b>{template_literal(owner)}</b>", template_literal(name)]
        if ellipse.n_points:
            hover.append(f"n = {count_text(ellipse.n_points)}")
        traces.append(go.Scatter(
            x=np.asarray(ellipse.x, dtype=np.float32),
            y=np.asarray(ellipse.y, dtype=np.float32),
            mode="lines",
            line=dict(color=colour, dash=dash, width=style.line_width),
            name=template_literal(name),
            legendgroup=_legend_group(group) if ellipse.kind != "hotelling" else "hotelling",
            showlegend=True,
            hovertemplate="<br>".join(hover) + "<extra></extra>",
            hoveron="points",
        ))
    return traces


def _slide_legend() -> dict:
    return dict(traceorder="grouped", groupclick="toggleitem", orientation="v",
                x=1.02, xanchor="left", y=1.0, yanchor="top", bgcolor="rgba(255,255,255,0)")


def _legend_group(group: str | None) -> str:
    return "group:" + (ALL_SAMPLES_GROUP if group is None else group)


# --------------------------------------------------------------------------
# density view
# --------------------------------------------------------------------------

def _density_trace(x: np.ndarray, y: np.ndarray, style: Style, *, square: bool = True) -> go.Heatmap:
    finite = np.isfinite(x) & np.isfinite(y)
    xs, ys = x[finite].astype(np.float64), y[finite].astype(np.float64)
    x_lo, x_hi = float(xs.min()), float(xs.max())
    y_lo, y_hi = float(ys.min()), float(ys.max())
    if square:
        # Square cells, so the equal-aspect plot shows the true shape of the cloud.
        x_width = y_width = max(x_hi - x_lo, y_hi - y_lo) / DENSITY_BINS or 1.0
    else:
        x_width, y_width = (x_hi - x_lo) / DENSITY_BINS or 1.0, (y_hi - y_lo) / DENSITY_BINS or 1.0
    x_edges = x_lo + x_width * np.arange(int(np.floor((x_hi - x_lo) / x_width)) + 2)
    y_edges = y_lo + y_width * np.arange(int(np.floor((y_hi - y_lo) / y_width)) + 2)
    counts, _, _ = np.histogram2d(xs, ys, bins=[x_edges, y_edges])
    z = counts.T.astype(np.float32)
    z[z == 0] = np.nan  # empty cells stay white
    return go.Heatmap(
        x=((x_edges[:-1] + x_edges[1:]) / 2).astype(np.float32),
        y=((y_edges[:-1] + y_edges[1:]) / 2).astype(np.float32),
        z=z,
        colorscale=_DENSITY_COLOURSCALE,
        showscale=True,
        # Bottom right, below the legend (which starts at the top).
        colorbar=dict(title=dict(text="Samples<br>per cell", side="top"), thickness=12, len=0.4,
                      x=1.02, xanchor="left", y=0.0, yanchor="bottom", xpad=4,
                      tickfont=dict(size=style.note_size)),
        hovertemplate="%{z:.0f} samples in this cell<extra></extra>",
        name="Sample density",
        showlegend=False,
    )


def _centroid_traces(x, y, names, present, styles, style: Style, x_name: str, y_name: str) -> list[go.Scatter]:
    traces = []
    for group in present:
        mask = names == group
        cx, cy = float(np.nanmean(x[mask])), float(np.nanmean(y[mask]))
        traces.append(go.Scatter(
            x=np.array([cx], dtype=np.float32), y=np.array([cy], dtype=np.float32),
            mode="markers",
            marker=dict(color=styles[group].colour, symbol=styles[group].symbol,
                        size=style.marker_size * 2, line=dict(width=1.5, color="#FFFFFF")),
            name=template_literal(group),
            legendgroup=_legend_group(group),
            hovertemplate=(
                f"<b>{template_literal(group)}</b><br>centre of {count_text(int(mask.sum()))} samples<br>"
                f"{template_literal(x_name)}: %{{x:.4g}}<br>{template_literal(y_name)}: %{{y:.4g}}<extra></extra>"
            ),
        ))
    return traces


# --------------------------------------------------------------------------
# the figure
# --------------------------------------------------------------------------

def _short_axis_name(title: str) -> str:
    return title.split(" · ")[0].strip() or title


def scores_figure(
    *,
    x: np.ndarray,
    y: np.ndarray,
    labels: np.ndarray,
    groups: np.ndarray | None,
    x_title: str,
    y_title: str,
    hover_values: dict[str, np.ndarray] | None = None,
    ellipses: Sequence["Ellipse"] = (),
    ellipse_groups: Sequence[str | None] = (),
    arrows: LoadingArrows | None = None,
    show_labels: bool = False,
    highlighted: str | None = None,
    highlight_note: str | None = None,
    excluded_note: str | None = None,
    title: str | None = None,
    density: bool | None = None,
    group_order: Sequence[str] | None = None,
    presentation: bool = False,
    batch: BatchPoints | None = None,
) -> go.Figure:
    """Scores plot of two components with equal axis scales.

    One trace per group (colour and symbol from :mod:`webapp.figures.palette`;
    ``groups`` None puts every sample in "All samples"; missing values form
    "(none)"). Point traces are ``Scattergl`` above :data:`WEBGL_THRESHOLD`
    samples. Above :data:`DENSITY_THRESHOLD` samples (or with ``density``
    True) the points are replaced by counts per square cell, with each group's
    centre and ellipses on top; ``density=False`` forces points.

    ``ellipses`` are drawn as closed lines in their group's colour (group name
    per ellipse in ``ellipse_groups``, None for all samples); their legend
    entries state the expected and observed coverage (:func:`ellipse_name`).
    Sigma levels get solid, dash, dot... lines in ascending order of k; a
    Hotelling ellipse is dark grey and long-dashed.

    All strings are plain text; they are escaped before Plotly sees them.
    ``highlighted`` draws a ring around the sample(s) with that label and
    writes the label beside it, followed by ``highlight_note`` (such as where
    its contributions are shown).
    ``batch``: samples of a new batch scored against the model, drawn as dark
    stars on top (also in the density view).
    ``show_labels`` writes labels next to the points when there are at most
    :data:`LABEL_LIMIT` samples; ``hover_values`` are shown up to
    :data:`HOVER_VALUES_LIMIT` samples. ``group_order`` pins group styles (see
    :func:`webapp.figures.palette.group_styles`).
    """
    style = style_for(presentation)
    xs = as_float32(x, "x scores")
    n = xs.shape[0]
    ys = as_float32(y, "y scores", n)
    label_array = as_labels(labels, n)
    names, present, styles = resolve_groups(groups, n, group_order)
    hover = hover_columns(hover_values, n)
    use_density = (n > DENSITY_THRESHOLD) if density is None else bool(density)
    use_density = use_density and bool(np.any(np.isfinite(xs) & np.isfinite(ys)))
    x_name, y_name = _short_axis_name(x_title), _short_axis_name(y_title)

    notes: list[str] = []
    if arrows is not None:
        notes.append(arrows.caption)
    if use_density:
        notes.append(
            f"Density view of {count_text(n)} samples: shading counts samples per cell; "
            f"marks show each group's centre."
        )
    label_text = show_labels and not use_density
    if label_text and n > LABEL_LIMIT:
        label_text = False
        notes.append(f"Sample labels are hidden above {count_text(LABEL_LIMIT)} samples; hover to read them.")
    if hover and not use_density and n > HOVER_VALUES_LIMIT:
        hover = []
        notes.append(f"Extra hover values are shown up to {count_text(HOVER_VALUES_LIMIT)} samples.")
    if excluded_note:
        notes.append(excluded_note)

    rings = picked_ring(xs, ys, label_array, highlighted, style, batch)
    colours = np.array([styles[g].colour for g in names], dtype=object) if label_text else None
    placed = placed_text(xs, ys, label_array if label_text else None, colours, ellipses, arrows, batch, rings,
                          f"{highlighted}" + (f" · {highlight_note}" if highlight_note else ""), style, presentation)
    if placed.hidden_labels:
        notes.append(f"{count_text(placed.hidden_labels)} of {count_text(n)} sample labels are left out where "
                     "they would overlap; hover to read them.")

    fig = new_figure(
        style,
        title=title,
        notes=notes,
        # Equal aspect ratio. On a slide the axes shrink to fit the data ("domain") rather
        # than stretching the range across a wide screen.
        xaxis={**axis_style(x_title), **({"constrain": "domain"} if presentation else {})},
        yaxis={**axis_style(y_title), "scaleanchor": "x", "scaleratio": 1,
               **({"constrain": "domain"} if presentation else {})},
        # Elsewhere the legend goes below the plot: with an equal aspect ratio, a side
        # legend would take width the scores need. Placed at the bottom of the figure
        # (container coordinates), Plotly reserves its height below the axis title, so
        # the legend never covers tick labels or the title, whatever the plot's height.
        # On a slide the side is free (the axes fit the data) and the legend goes there.
        legend=_slide_legend() if presentation else dict(
            traceorder="grouped", groupclick="toggleitem", orientation="h",
            x=0.0, xanchor="left", y=0.0, yref="container", yanchor="bottom", bgcolor="rgba(255,255,255,0)"),
        dragmode="lasso" if not use_density else "zoom",
    )

    axis_hover = [f"{template_literal(x_name)}: %{{x:.4g}}", f"{template_literal(y_name)}: %{{y:.4g}}"]
    traces: list = []
    if use_density:
        traces.append(_density_trace(xs, ys, style))
        traces.extend(_centroid_traces(xs, ys, names, present, styles, style, x_name, y_name))
    else:
        webgl = n > WEBGL_THRESHOLD
        for group in present:
            index = np.flatnonzero(names == group)
            traces.append(point_trace(
                x=xs[index], y=ys[index], labels=label_array[index],
                hover=[(c, v[index]) for c, v in hover],
                name=group, legend_group=_legend_group(group), style=styles[group],
                marker_size=style.marker_size, hover_lines=axis_hover,
                show_text=False, text_size=style.label_size, webgl=webgl,  # labels: annotations, placed
            ))
    traces.extend(_ellipse_traces(ellipses, ellipse_groups, styles, style))
    if batch is not None:
        traces.append(batch_trace(batch, style.marker_size, axis_hover, style.label_size))
    traces.extend(rings)
    fig.add_traces(traces)

    if placed.x_range is not None:
        fig.update_layout(xaxis_range=list(placed.x_range), yaxis_range=list(placed.y_range),
                          annotations=list(fig.layout.annotations) + placed.annotations,
                          shapes=list(fig.layout.shapes) + placed.shapes)
    return fig


def picked_ring(x, y, labels, highlighted: str | None, style: Style, batch: BatchPoints | None = None) -> list:
    """A ring around the picked sample: one of the plotted samples, or else of the new batch."""
    if highlighted is None:
        return []
    ring = _ring_trace(x, y, labels, str(highlighted), style)
    if ring is None and batch is not None:
        ring = _ring_trace(as_float32(batch.x, "new batch x"), as_float32(batch.y, "new batch y"),
                           as_labels(batch.labels, len(batch.labels)), str(highlighted), style)
    return [] if ring is None else [ring]


def _ring_trace(x, y, labels, highlighted: str, style: Style) -> go.Scatter | None:
    index = np.flatnonzero(labels == highlighted)
    if index.size == 0:
        return None
    return go.Scatter(
        x=x[index], y=y[index],
        mode="markers",
        marker=dict(symbol="circle-open", size=style.marker_size * 2.6, color=TEXT_COLOUR,
                    line=dict(width=style.line_width + 1.0, color=TEXT_COLOUR)),
        name="Picked sample",
        showlegend=False,
        hoverinfo="skip",
    )

