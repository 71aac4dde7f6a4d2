"""Where to write the names of arrows so that no two names overlap.

A pure, deterministic placement pass for the labels of biplot arrows and of
the correlation circle. Plotly draws annotation text at a fixed size in
pixels, whatever the zoom, so the pass works in pixels of a *nominal* plot
area (:class:`PlotFrame`): a size the drawn plot is expected to reach at
least. A label box that is free of the others at the nominal size stays free
on any larger plot, because each box then shrinks around its centre in data
units while the centres stay put.

Method (a greedy slot search, strongest arrow first):

1. Each label's box is estimated from its text: :func:`text_box` sums
   per-character widths (fractions of the font size, on the generous side
   for common sans-serif faces) and adds the padding of the label background.
2. Candidate centres lie on rings around the arrow tip: ring *k* keeps a gap
   of ``gap + k * step`` pixels between the tip and the nearest edge of the
   box, in 16 directions, starting with the arrow's own direction (the
   natural place, just beyond the tip).
3. A candidate is allowed when its box lies inside the axes and overlaps no
   label placed before it nor any obstacle box. Among allowed candidates the
   cheapest wins: cost = gap in pixels + a penalty per arrow shaft the box
   covers + a small penalty for turning away from the arrow's direction.
4. A label that ends up farther than :data:`LEADER_GAP` pixels from its tip
   gets a leader line from the tip to the nearest point of its box.

If no candidate is free (more text than the plot can hold), the label takes
the allowed candidate that overlaps the fewest placed labels; callers keep
the number of labels small (the view's arrow limit).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from webapp.analysis.errors import OrdinateError

__all__ = ["PlotFrame", "PlacedLabel", "text_box", "place_labels", "LEADER_GAP"]

#: A label whose box is farther than this (pixels) from its tip gets a leader line.
LEADER_GAP = 10.0
_DIRECTIONS = 16
_RINGS = 40
_SHAFT_PENALTY = 14.0  # pixels of extra distance a label may move to avoid covering one arrow
_TURN_PENALTY = 6.0  # pixels per radian of turning away from the arrow's direction

# Character widths as fractions of the font size (generous for DejaVu/Liberation/Arial-like faces).
_NARROW = set("il.,:;|!'`()[]{}fjtrI ")
_WIDE = set("mwMW%@")
_UPPER_WIDTH, _NARROW_WIDTH, _WIDE_WIDTH, _DEFAULT_WIDTH = 0.74, 0.36, 0.98, 0.64
_LINE_HEIGHT = 1.3
_PADDING_PX = 4.0  # the annotation's background adds about 2 px on each side


def text_box(text: str, font_size: float) -> tuple[float, float]:
    """Estimated (width, height) in pixels of one line of ``text`` at ``font_size`` px."""
    size = float(font_size)
    width = 0.0
    for char in str(text):
        if char in _NARROW:
            width += _NARROW_WIDTH
        elif char in _WIDE:
            width += _WIDE_WIDTH
        elif char.isupper() or char.isdigit():
            width += _UPPER_WIDTH if char.isupper() else _DEFAULT_WIDTH
        else:
            width += _DEFAULT_WIDTH
    return width * size + _PADDING_PX, _LINE_HEIGHT * size + _PADDING_PX


@dataclass(frozen=True)
class PlotFrame:
    """The nominal plot area: axis ranges (data units) and its size in pixels.

    With ``equal_aspect`` (``scaleanchor``), Plotly widens one range so both axes
    share one scale, min(width / x span, height / y span) pixels per unit; the
    ranges given here then stay inside the drawn ones.
    """

    x_range: tuple[float, float]
    y_range: tuple[float, float]
    width_px: float
    height_px: float
    equal_aspect: bool = True

    def __post_init__(self) -> None:
        spans = (self.x_range[1] - self.x_range[0], self.y_range[1] - self.y_range[0])
        if not all(math.isfinite(s) and s > 0 for s in spans):
            raise OrdinateError(f"The axis ranges of a plot must be increasing; got {self.x_range}, {self.y_range}.")
        if not (self.width_px > 0 and self.height_px > 0):
            raise OrdinateError("A plot must be wider and taller than 0 pixels.")

    def pixel_box(self, box: tuple[float, float, float, float]) -> tuple[float, float, float, float]:
        """A box (x0, y0, x1, y1) in data units as pixels from the frame's lower-left corner (for obstacles)."""
        sx, sy = self.pixels_per_unit
        return ((box[0] - self.x_range[0]) * sx, (box[1] - self.y_range[0]) * sy,
                (box[2] - self.x_range[0]) * sx, (box[3] - self.y_range[0]) * sy)

    @property
    def pixels_per_unit(self) -> tuple[float, float]:
        """Pixels per data unit along x and along y."""
        sx = self.width_px / (self.x_range[1] - self.x_range[0])
        sy = self.height_px / (self.y_range[1] - self.y_range[0])
        if self.equal_aspect:
            sx = sy = min(sx, sy)
        return sx, sy


@dataclass(frozen=True)
class PlacedLabel:
    """A label's box centre and size in data units, and whether it needs a leader line."""

    text: str
    x: float
    y: float
    width: float
    height: float
    anchor_x: float
    anchor_y: float
    leader: bool
    crowded: bool = False  # no free place was found (only with ``skip_crowded``: leave it out)

    @property
    def box(self) -> tuple[float, float, float, float]:
        """(x0, y0, x1, y1) in data units."""
        return (self.x - self.width / 2, self.y - self.height / 2, self.x + self.width / 2, self.y + self.height / 2)

    def leader_end(self) -> tuple[float, float]:
        """The point of the box nearest the anchor (where a leader line meets the box)."""
        x0, y0, x1, y1 = self.box
        return min(max(self.anchor_x, x0), x1), min(max(self.anchor_y, y0), y1)


def _boundary_distance(ux: np.ndarray, uy: np.ndarray, half_w: float, half_h: float) -> np.ndarray:
    """Distance from a box centre to its edge along unit directions (ux, uy)."""
    with np.errstate(divide="ignore"):
        along_x = np.where(np.abs(ux) > 1e-12, half_w / np.abs(ux), np.inf)
        along_y = np.where(np.abs(uy) > 1e-12, half_h / np.abs(uy), np.inf)
    return np.minimum(along_x, along_y)


def _segments_covered(cx, cy, half_w, half_h, x0, y0, x1, y1) -> np.ndarray:
    """How many of the segments (x0, y0)-(x1, y1) each box (centres cx, cy) covers (Liang–Barsky clipping).

    ``cx``, ``cy``: candidate centres, shape (C,); segment ends: shape (S,). Returns counts, shape (C,).
    """
    if np.size(x0) == 0:
        return np.zeros(cx.shape, dtype=np.int64)
    cx, cy = cx[None, :], cy[None, :]
    x0, y0, x1, y1 = (np.asarray(v, dtype=np.float64)[:, None] for v in (x0, y0, x1, y1))
    t_lo = np.zeros((x0.shape[0], cx.shape[1]))
    t_hi = np.ones_like(t_lo)
    inside = np.ones(t_lo.shape, dtype=bool)
    for p, q in ((-(x1 - x0), x0 - (cx - half_w)), (x1 - x0, (cx + half_w) - x0),
                 (-(y1 - y0), y0 - (cy - half_h)), (y1 - y0, (cy + half_h) - y0)):
        p = np.broadcast_to(p, t_lo.shape)
        q = np.broadcast_to(q, t_lo.shape)
        parallel = np.abs(p) < 1e-12
        inside &= ~parallel | (q >= 0)
        with np.errstate(divide="ignore", invalid="ignore"):
            t = np.where(parallel, 0.0, q / np.where(parallel, 1.0, p))
        t_lo = np.where(~parallel & (p < 0), np.maximum(t_lo, t), t_lo)
        t_hi = np.where(~parallel & (p > 0), np.minimum(t_hi, t), t_hi)
    return (inside & (t_lo <= t_hi)).sum(axis=0)


def place_labels(
    anchor_x: Sequence[float],
    anchor_y: Sequence[float],
    texts: Sequence[str],
    font_size: float,
    frame: PlotFrame,
    *,
    origin: tuple[float, float] = (0.0, 0.0),
    obstacles: Sequence[tuple[float, float, float, float]] = (),
    gap: float = 3.0,
    rings: int = _RINGS,
    shafts: bool = True,
    skip_crowded: bool = False,
) -> list[PlacedLabel]:
    """Place one label per arrow tip (data units), in the order given; see the module docstring.

    ``origin`` is where the arrows start (their shafts are avoided when
    possible); ``obstacles`` are boxes (x0, y0, x1, y1) in pixels measured
    from the frame's lower-left corner that labels must keep clear of.
    Longer arrows are placed first and get the better slots.

    For labels of points rather than arrows: ``shafts=False`` ignores the lines
    from the origin, ``rings`` bounds how far a label may move from its point,
    and ``skip_crowded`` marks a label with no free place as ``crowded`` (its
    box then reserves nothing) instead of letting it overlap others.
    """
    ax_, ay_ = np.asarray(anchor_x, dtype=np.float64), np.asarray(anchor_y, dtype=np.float64)
    names = [str(t) for t in texts]
    if ax_.shape != ay_.shape or ax_.ndim != 1 or len(names) != ax_.size:
        raise OrdinateError("Give one x, one y and one text per label.")
    sx, sy = frame.pixels_per_unit
    # Work in pixels from the frame's lower-left corner.
    px = (ax_ - frame.x_range[0]) * sx
    py = (ay_ - frame.y_range[0]) * sy
    ox, oy = (origin[0] - frame.x_range[0]) * sx, (origin[1] - frame.y_range[0]) * sy
    # Labels stay inside the given ranges, which Plotly shows in full (an equal aspect only widens one).
    x_lo, x_hi = 0.0, (frame.x_range[1] - frame.x_range[0]) * sx
    y_lo, y_hi = 0.0, (frame.y_range[1] - frame.y_range[0]) * sy

    sizes = [text_box(name, font_size) for name in names]
    order = sorted(range(len(names)), key=lambda i: (-math.hypot(px[i] - ox, py[i] - oy), i))
    placed: list[tuple[float, float, float, float]] = [tuple(b) for b in obstacles]
    centres: dict[int, tuple[float, float]] = {}
    ring_gaps = gap + np.arange(max(int(rings), 1), dtype=np.float64) * max(2.0, 0.6 * font_size)
    crowded: set[int] = set()

    for i in order:
        w, h = sizes[i]
        hw, hh = w / 2, h / 2
        heading = math.atan2(py[i] - oy, px[i] - ox) if (px[i], py[i]) != (ox, oy) else math.pi / 2
        steps = np.arange(_DIRECTIONS)
        turns = np.where(steps % 2 == 1, (steps + 1) // 2, -(steps // 2)) * (2 * math.pi / _DIRECTIONS)
        angles = heading + turns
        ux, uy = np.cos(angles), np.sin(angles)
        reach = _boundary_distance(ux, uy, hw, hh)
        r = ring_gaps[:, None] + reach[None, :]
        cx = (px[i] + r * ux[None, :]).ravel()
        cy = (py[i] + r * uy[None, :]).ravel()
        cost = (ring_gaps[:, None] + _TURN_PENALTY * np.abs(turns)[None, :]).ravel()
        inside = (cx - hw >= x_lo) & (cx + hw <= x_hi) & (cy - hh >= y_lo) & (cy + hh <= y_hi)
        if placed:
            b = np.asarray(placed, dtype=np.float64)  # (P, 4)
            clashes = ((cx[None, :] - hw < b[:, 2:3]) & (cx[None, :] + hw > b[:, 0:1])
                       & (cy[None, :] - hh < b[:, 3:4]) & (cy[None, :] + hh > b[:, 1:2])).sum(axis=0)
        else:
            clashes = np.zeros(cx.shape, dtype=np.int64)
        free = inside & (clashes == 0)
        # Shafts are weighed only where a name may go (the costly part with many arrows); with no
        # free slot left (more names than room), the fewest overlaps decide and shafts are ignored.
        # Only slots within three shafts' penalty of the nearest free slot can win by avoiding shafts.
        pool = np.flatnonzero(free)
        if pool.size:
            pool = pool[cost[pool] <= cost[pool].min() + 3 * _SHAFT_PENALTY]
        if shafts:
            others = np.arange(len(names)) != i
            cost[pool] += _SHAFT_PENALTY * _segments_covered(
                cx[pool], cy[pool], hw, hh, np.full(others.sum(), ox), np.full(others.sum(), oy),
                px[others], py[others])
        if not free.any() and skip_crowded:
            crowded.add(i)
            centres[i] = (float(px[i]), float(py[i]))
            continue
        if free.any():
            best = int(np.flatnonzero(free)[np.argmin(cost[free])])
        else:
            pool = np.flatnonzero(inside) if inside.any() else np.arange(cx.size)
            best = int(pool[np.lexsort((cost[pool], clashes[pool]))[0]])
        centres[i] = (float(cx[best]), float(cy[best]))
        placed.append((cx[best] - hw, cy[best] - hh, cx[best] + hw, cy[best] + hh))

    result = []
    for i, name in enumerate(names):
        cx, cy = centres[i]
        w, h = sizes[i]
        nearest_x = min(max(px[i], cx - w / 2), cx + w / 2)
        nearest_y = min(max(py[i], cy - h / 2), cy + h / 2)
        distance = math.hypot(px[i] - nearest_x, py[i] - nearest_y)
        result.append(PlacedLabel(
            text=name,
            x=frame.x_range[0] + cx / sx, y=frame.y_range[0] + cy / sy,
            width=w / sx, height=h / sy,
            anchor_x=float(ax_[i]), anchor_y=float(ay_[i]),
            leader=distance > LEADER_GAP and i not in crowded, crowded=i in crowded,
        ))
    return result
