"""Names written inside a plot, clear of each other: arrow names (biplot, correlation circle) and sample labels.

The names are placed by :func:`webapp.figures.label_placement.place_labels`
in a nominal plot area (:data:`NOMINAL_PLOT_PX`), a size the drawn plot
reaches at least on a 1280 px wide screen (a larger plot only adds room
between the names); a name moved away from its tip is
joined to it by a thin leader line (a layout shape).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

from webapp.figures.label_placement import PlacedLabel, PlotFrame, place_labels
from webapp.figures.text import escape_text
from webapp.figures.theme import MUTED_TEXT_COLOUR, TEXT_COLOUR, Style

__all__ = ["ARROW_COLOUR", "NOMINAL_PLOT_PX", "arrow_annotations", "data_range", "leader_line",
           "point_label_annotations", "placed_text", "PlacedText"]

#: A sample label stays within this many rings (about 1.2 label heights) of its point, or is left out.
POINT_LABEL_RINGS = 3

ARROW_COLOUR = "#4A4F55"

#: Smallest expected plot area (width, height in pixels) per figure kind and
#: presentation mode. Measured on the dashboard at 1280 x 800: the scores plot
#: area is about 800 x 480 px, the correlation circle about 270 x 270 px.
NOMINAL_PLOT_PX = {
    ("scores", False): (640.0, 430.0),
    ("scores", True): (900.0, 280.0),  # slides: plot area measured 297 px tall at 1366 x 768, 327 at 1280 x 800
    ("circle", False): (250.0, 250.0),
    ("circle", True): (340.0, 340.0),
}


def data_range(values: Sequence[np.ndarray], pad: float = 0.06) -> tuple[float, float] | None:
    """The span of the finite values of several arrays, widened by ``pad`` of the span on each side."""
    finite = [np.asarray(v, dtype=np.float64).ravel() for v in values]
    finite = [v[np.isfinite(v)] for v in finite]
    finite = [v for v in finite if v.size]
    if not finite:
        return None
    lo = min(float(v.min()) for v in finite)
    hi = max(float(v.max()) for v in finite)
    span = hi - lo if hi > lo else max(abs(hi), 1.0)
    return lo - pad * span, hi + pad * span


def arrow_annotations(
    variables: Sequence[str],
    dx: np.ndarray,
    dy: np.ndarray,
    style: Style,
    frame: PlotFrame,
    colour: str = ARROW_COLOUR,
    *,
    obstacles: Sequence[tuple[float, float, float, float]] = (),
) -> tuple[list[dict], list[dict], list[tuple[float, float, float, float]]]:
    """Annotations (an arrow from the origin to (dx, dy), then the name), leader-line shapes, name boxes.

    Names are centred on the places found by ``place_labels`` in ``frame``;
    the arrows come first, then the names, in the order of ``variables``.
    ``obstacles``: boxes in the frame's pixels that names keep clear of; the
    names' own boxes (same units) are returned for labels placed after them.
    """
    tips_x, tips_y = np.asarray(dx, dtype=np.float64), np.asarray(dy, dtype=np.float64)
    names = [str(v) for v in variables]
    arrows = [dict(
        x=float(x), y=float(y), ax=0.0, ay=0.0,
        xref="x", yref="y", axref="x", ayref="y",
        text="", showarrow=True,
        arrowhead=2, arrowsize=1.0, arrowwidth=style.arrow_width, arrowcolor=colour,
        standoff=0, startstandoff=0,
    ) for x, y in zip(tips_x.tolist(), tips_y.tolist())]
    placed = place_labels(tips_x, tips_y, names, style.label_size, frame, obstacles=obstacles)
    labels = []
    leaders = [leader_line(label) for label in placed if label.leader]
    for label in placed:
        labels.append(dict(
            name="arrow-label", x=label.x, y=label.y, xref="x", yref="y",
            xanchor="center", yanchor="middle",
            text=escape_text(label.text), showarrow=False,
            font=dict(size=style.label_size, color=TEXT_COLOUR),
            bgcolor="rgba(255,255,255,0.78)", borderpad=1,
        ))
    return arrows + labels, leaders, [frame.pixel_box(label.box) for label in placed]


def point_label_annotations(
    x: np.ndarray,
    y: np.ndarray,
    labels: Sequence[str],
    colours: Sequence[str],
    style: Style,
    frame: PlotFrame,
    *,
    obstacles: Sequence[tuple[float, float, float, float]] = (),
) -> tuple[list[dict], int]:
    """Sample labels beside their points, clear of each other, of every point and of ``obstacles``.

    A label with no free place near its point is left out rather than drawn over
    another (the count is returned, so the figure can say so); outer points are
    placed first. Points with a missing coordinate get no label.
    """
    xs, ys = np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)
    finite = np.flatnonzero(np.isfinite(xs) & np.isfinite(ys))
    sx, sy = frame.pixels_per_unit
    half = style.marker_size / 2 + 1.0
    px, py = (xs[finite] - frame.x_range[0]) * sx, (ys[finite] - frame.y_range[0]) * sy
    points = [(a - half, b - half, a + half, b + half) for a, b in zip(px.tolist(), py.tolist())]
    placed = place_labels(xs[finite], ys[finite], [str(labels[i]) for i in finite], style.label_size, frame,
                          obstacles=[*obstacles, *points], gap=1.0 + half, rings=POINT_LABEL_RINGS,
                          shafts=False, skip_crowded=True,
                          origin=(float(np.mean(xs[finite])), float(np.mean(ys[finite]))) if finite.size else (0, 0))
    notes = [dict(
        name="sample-label", x=label.x, y=label.y, xref="x", yref="y", xanchor="center", yanchor="middle",
        text=escape_text(label.text), showarrow=False, font=dict(size=style.label_size, color=str(colours[i])),
    ) for i, label in zip(finite.tolist(), placed) if not label.crowded]
    return notes, len(xs) - len(notes)


def leader_line(label: PlacedLabel) -> dict:
    """A thin line (layout shape) from a label's anchor to the nearest point of its box."""
    end_x, end_y = label.leader_end()
    return dict(type="line", xref="x", yref="y", layer="above",
                x0=label.anchor_x, y0=label.anchor_y, x1=end_x, y1=end_y,
                line=dict(color=MUTED_TEXT_COLOUR, width=0.8))


@dataclass(frozen=True)
class PlacedText:
    """Axis ranges fitted to what is drawn, and the names written inside them."""

    x_range: tuple[float, float] | None
    y_range: tuple[float, float] | None
    annotations: list
    shapes: list
    hidden_labels: int = 0


def placed_text(xs, ys, labels, colours, ellipses, arrows, batch, rings, picked_text, style, presentation):
    """Names placed clear of each other: the picked sample first, then arrow names, then sample labels.

    Axes are fitted to points, ellipses, arrows and new samples, so every name can be
    placed inside them; an equal aspect ratio then widens one of the two ranges.
    """
    x_range = data_range([xs, *(e.x for e in ellipses), *([arrows.dx] if arrows else []),
                          *([batch.x] if batch is not None else [])])
    y_range = data_range([ys, *(e.y for e in ellipses), *([arrows.dy] if arrows else []),
                          *([batch.y] if batch is not None else [])])
    if x_range is None or y_range is None:
        return PlacedText(None, None, [], [])
    width, height = NOMINAL_PLOT_PX[("scores", presentation)]
    frame = PlotFrame(x_range=x_range, y_range=y_range, width_px=width, height_px=height)
    annotations, shapes, taken = [], [], []
    if rings:  # the picked sample named at its point: the click's feedback where the eye is
        x_at, y_at = float(rings[0].x[0]), float(rings[0].y[0])
        # Bold and framed: estimated a little larger than plain text; kept just outside the ring.
        (label,) = place_labels([x_at], [y_at], [picked_text], style.label_size * 1.15, frame, origin=(x_at, y_at),
                                gap=style.marker_size * 1.5)
        annotations.append(dict(
            name="picked-label", x=label.x, y=label.y, xref="x", yref="y", xanchor="center", yanchor="middle",
            text=f"<b>{escape_text(picked_text)}</b>", showarrow=False,
            font=dict(size=style.label_size, color=TEXT_COLOUR),
            bgcolor="rgba(255,255,255,0.92)", bordercolor=TEXT_COLOUR, borderwidth=1, borderpad=2))
        shapes += [leader_line(label)] if label.leader else []
        taken.append(frame.pixel_box(label.box))
    if arrows is not None:
        arrow_notes, leaders, boxes = arrow_annotations(arrows.variables, arrows.dx, arrows.dy, style, frame,
                                                        obstacles=taken)
        annotations, shapes, taken = annotations + arrow_notes, shapes + leaders, taken + boxes
    hidden = 0
    if labels is not None:
        point_notes, hidden = point_label_annotations(xs, ys, labels, colours, style, frame, obstacles=taken)
        annotations += point_notes
    return PlacedText(x_range, y_range, annotations, shapes, hidden)
