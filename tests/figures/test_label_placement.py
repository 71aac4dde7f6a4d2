"""Tests for webapp.figures.label_placement (arrow names that never overlap).

The checks are geometric and computed here independently of the module:
two axis-aligned boxes overlap when their projections on both axes overlap;
a box is inside the axes when its four edges are. Box sizes are the module's
own estimates (``text_box``), which the browser test compares with drawn text.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

from webapp.analysis.errors import OrdinateError
from webapp.figures.label_placement import LEADER_GAP, PlotFrame, place_labels, text_box

DEMO_NAMES = ["Firmness (N)", "Protein (g/100 g)", "Viscosity (mPa s)", "Total sugars (g/100 g)",
              "Fat (g/100 g)", "Dry matter (%)"]


def _overlap(a, b) -> bool:
    return a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3]


def _pixel_boxes(labels, frame):
    sx, sy = frame.pixels_per_unit
    return [((l.box[0] - frame.x_range[0]) * sx, (l.box[1] - frame.y_range[0]) * sy,
             (l.box[2] - frame.x_range[0]) * sx, (l.box[3] - frame.y_range[0]) * sy) for l in labels]


def _assert_clear(labels, frame):
    for a, b in itertools.combinations(labels, 2):
        assert not _overlap(a.box, b.box), f"{a.text!r} overlaps {b.text!r}"
    x0, x1 = frame.x_range
    y0, y1 = frame.y_range
    for label in labels:
        bx0, by0, bx1, by1 = label.box
        assert x0 - 1e-9 <= bx0 and bx1 <= x1 + 1e-9 and y0 - 1e-9 <= by0 and by1 <= y1 + 1e-9, label


def test_arrows_at_nearly_one_angle_get_separate_boxes_inside_the_axes():
    # Like the demo's biplot: six arrows pointing left within 8 degrees of each other.
    angles = np.deg2rad(np.linspace(160.0, 168.0, len(DEMO_NAMES)))
    lengths = np.linspace(5.2, 4.6, len(DEMO_NAMES))
    frame = PlotFrame(x_range=(-8.0, 8.0), y_range=(-6.0, 8.0), width_px=640, height_px=430)
    tips_x, tips_y = lengths * np.cos(angles), lengths * np.sin(angles)
    # The set is hard: boxes written right at the tips (as before placement) overlap.
    sx, sy = frame.pixels_per_unit
    naive = [(x - text_box(t, 11)[0] / sx, y, x, y + text_box(t, 11)[1] / sy)
             for x, y, t in zip(tips_x, tips_y, DEMO_NAMES)]
    assert any(_overlap(a, b) for a, b in itertools.combinations(naive, 2))
    labels = place_labels(tips_x, tips_y, DEMO_NAMES, 11, frame)
    assert [l.text for l in labels] == DEMO_NAMES
    _assert_clear(labels, frame)


def test_twenty_arrows_in_a_narrow_fan_on_a_projector_frame():
    names = [f"Variable number {i} (unit)" for i in range(20)]
    angles = np.deg2rad(np.linspace(20.0, 40.0, 20))
    frame = PlotFrame(x_range=(-10.0, 10.0), y_range=(-6.0, 6.0), width_px=960, height_px=420)
    labels = place_labels(5 * np.cos(angles), 5 * np.sin(angles), names, 16, frame)
    _assert_clear(labels, frame)


def test_correlation_circle_names_stay_inside_when_tips_touch_the_edge():
    # Tips on the unit circle, axes at ±1.1: names must move inwards, not run off the plot.
    angles = np.deg2rad([0.0, 3.0, 6.0, 90.0, 180.0, 184.0])
    names = ["Culture count (log10 CFU/g)", "Titratable acidity (% lactic acid)", "Synereses (mL/100 g)",
             "pH", "Firmness (N)", "Protein (g/100 g)"]
    frame = PlotFrame(x_range=(-1.1, 1.1), y_range=(-1.1, 1.1), width_px=300, height_px=300)
    labels = place_labels(np.cos(angles), np.sin(angles), names, 11, frame)
    _assert_clear(labels, frame)


def test_a_lone_arrow_is_named_just_beyond_its_tip_without_a_leader():
    frame = PlotFrame(x_range=(-5.0, 5.0), y_range=(-5.0, 5.0), width_px=500, height_px=500)
    (label,) = place_labels([2.0], [1.0], ["Fat (g/100 g)"], 11, frame)
    assert not label.leader
    # Beyond the tip along the arrow: the box centre lies farther out than the tip in both x and y.
    assert label.x > 2.0 and label.y > 1.0
    # The nearest box point is within a few pixels of the tip (the gap).
    sx, _ = frame.pixels_per_unit
    nx, ny = label.leader_end()
    assert math.hypot(nx - 2.0, ny - 1.0) * sx <= LEADER_GAP


def test_moved_labels_get_a_leader_and_placement_is_deterministic():
    angles = np.deg2rad(np.linspace(160.0, 161.0, 8))
    names = [f"Long variable name {i}" for i in range(8)]
    frame = PlotFrame(x_range=(-8.0, 8.0), y_range=(-6.0, 6.0), width_px=640, height_px=430)
    first = place_labels(5 * np.cos(angles), 5 * np.sin(angles), names, 11, frame)
    again = place_labels(5 * np.cos(angles), 5 * np.sin(angles), names, 11, frame)
    assert first == again
    assert any(l.leader for l in first)
    _assert_clear(first, frame)


def test_obstacles_are_kept_clear():
    frame = PlotFrame(x_range=(0.0, 10.0), y_range=(0.0, 10.0), width_px=400, height_px=400)
    # An obstacle box (pixels) right where the natural slot beyond the tip would be.
    obstacle = (300.0, 300.0, 400.0, 400.0)
    (label,) = place_labels([7.5], [7.5], ["Colour L*"], 11, frame, origin=(5.0, 5.0), obstacles=[obstacle])
    (box,) = _pixel_boxes([label], frame)
    assert not _overlap(box, obstacle)


def test_text_box_grows_with_text_and_font():
    w1, h1 = text_box("pH", 11)
    w2, h2 = text_box("Total sugars (g/100 g)", 11)
    w3, h3 = text_box("Total sugars (g/100 g)", 16)
    assert w1 < w2 < w3 and h1 == h2 < h3
    # Common practice: sans-serif text averages roughly 0.5-0.6 em per character.
    assert 0.5 * 11 * 22 <= w2 <= 0.75 * 11 * 22 + 4


def test_invalid_input_is_refused():
    with pytest.raises(OrdinateError):
        PlotFrame(x_range=(1.0, 1.0), y_range=(0.0, 1.0), width_px=100, height_px=100)
    frame = PlotFrame(x_range=(0.0, 1.0), y_range=(0.0, 1.0), width_px=100, height_px=100)
    with pytest.raises(OrdinateError):
        place_labels([0.5, 0.2], [0.5], ["a", "b"], 11, frame)


# ---------------------------------------------------------------- in the figures

def _name_boxes(fig, frame, font_size):
    sx, sy = frame.pixels_per_unit
    boxes = []
    for a in fig.layout.annotations:
        if a.name == "arrow-label":
            w, h = text_box(a.text, font_size)
            boxes.append((a.x - w / sx / 2, a.y - h / sy / 2, a.x + w / sx / 2, a.y + h / sy / 2))
    return boxes


def test_correlation_circle_names_are_clear_of_each_other_and_inside_the_axes():
    from webapp.figures import correlation_circle_figure
    from webapp.figures.arrow_labels import NOMINAL_PLOT_PX
    from webapp.figures.loadings import CIRCLE_RANGE
    from webapp.figures.theme import NORMAL

    angles = np.deg2rad(np.linspace(158.0, 170.0, len(DEMO_NAMES)))
    fig = correlation_circle_figure(variables=DEMO_NAMES, correlations_x=0.9 * np.cos(angles),
                                    correlations_y=0.9 * np.sin(angles), x_title="PC1", y_title="PC2")
    frame = PlotFrame(CIRCLE_RANGE, CIRCLE_RANGE, *NOMINAL_PLOT_PX[("circle", False)])
    boxes = _name_boxes(fig, frame, NORMAL.label_size)
    assert len(boxes) == len(DEMO_NAMES)
    for a, b in itertools.combinations(boxes, 2):
        assert not _overlap(a, b)
    assert all(CIRCLE_RANGE[0] <= b[0] and b[2] <= CIRCLE_RANGE[1] and CIRCLE_RANGE[0] <= b[1]
               and b[3] <= CIRCLE_RANGE[1] for b in boxes)
    # Every moved name has a leader line from its tip.
    assert all(s.type == "line" for s in fig.layout.shapes)


def test_scores_axes_cover_points_ellipses_and_arrows():
    from webapp.figures import loading_arrows, scores_figure

    rng = np.random.default_rng(3)
    x, y = rng.normal(size=50) * 3, rng.normal(size=50)
    loadings = np.column_stack([np.cos(np.deg2rad(np.linspace(160, 168, 6))),
                                np.sin(np.deg2rad(np.linspace(160, 168, 6)))])
    arrows = loading_arrows(loadings, DEMO_NAMES, np.array([2.0, 1.0]), "correlation", float(np.abs(x).max()))
    fig = scores_figure(x=x, y=y, labels=np.array([f"s{i}" for i in range(50)]), groups=None,
                        x_title="PC1", y_title="PC2", arrows=arrows)
    x0, x1 = fig.layout.xaxis.range
    y0, y1 = fig.layout.yaxis.range
    assert x0 < min(x.min(), arrows.dx.min()) and x1 > max(x.max(), arrows.dx.max())
    assert y0 < min(y.min(), arrows.dy.min()) and y1 > max(y.max(), arrows.dy.max())
    names = [a.text for a in fig.layout.annotations if a.name == "arrow-label"]
    assert names == DEMO_NAMES


def test_a_picked_sample_is_named_at_its_point():
    from webapp.figures import scores_figure

    x, y = np.array([0.0, 1.5, -2.0]), np.array([0.0, 0.5, 1.0])
    fig = scores_figure(x=x, y=y, labels=np.array(["a", "b<c", "d"]), groups=None, x_title="PC1", y_title="PC2",
                        highlighted="b<c", highlight_note="see below")
    (note,) = [a for a in fig.layout.annotations if a.name == "picked-label"]
    # Named near its point (the nearest edge of the name's box within a leader's reach of it).
    assert abs(note.x - 1.5) < 2.0 and abs(note.y - 0.5) < 1.0
    assert note.text == "<b>b&lt;c · see below</b>"  # user text escaped
    none = scores_figure(x=x, y=y, labels=np.array(["a", "b", "d"]), groups=None, x_title="PC1", y_title="PC2",
                         highlighted="zz")
    assert not [a for a in none.layout.annotations if a.name == "picked-label"]


def test_the_picked_name_and_the_arrow_names_keep_clear_of_each_other():
    from webapp.figures import loading_arrows, scores_figure
    from webapp.figures.arrow_labels import NOMINAL_PLOT_PX
    from webapp.figures.theme import NORMAL

    rng = np.random.default_rng(5)
    x, y = rng.normal(size=60) * 3, rng.normal(size=60)
    angles = np.deg2rad(np.linspace(160, 168, 6))
    arrows = loading_arrows(np.column_stack([np.cos(angles), np.sin(angles)]), DEMO_NAMES, np.array([2.0, 1.0]),
                            "correlation", float(np.abs(x).max()))
    labels = np.array([f"s{i}" for i in range(60)])
    picked = labels[int(np.argmin(np.hypot(x - arrows.dx[0], y - arrows.dy[0])))]  # right by an arrow tip
    fig = scores_figure(x=x, y=y, labels=labels, groups=None, x_title="PC1", y_title="PC2", arrows=arrows,
                        highlighted=picked, highlight_note="see below")
    frame = PlotFrame(tuple(fig.layout.xaxis.range), tuple(fig.layout.yaxis.range), *NOMINAL_PLOT_PX[("scores", False)])
    sx, sy = frame.pixels_per_unit
    boxes = []
    for a in fig.layout.annotations:
        if a.name in ("arrow-label", "picked-label"):
            size = NORMAL.label_size * (1.15 if a.name == "picked-label" else 1.0)
            w, h = text_box(a.text.replace("<b>", "").replace("</b>", "").replace("&lt;", "<"), size)
            boxes.append((a.x - w / sx / 2, a.y - h / sy / 2, a.x + w / sx / 2, a.y + h / sy / 2))
    assert len(boxes) == len(DEMO_NAMES) + 1
    for a, b in itertools.combinations(boxes, 2):
        assert not _overlap(a, b)
