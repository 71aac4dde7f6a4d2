"""Cost of placing arrow names (webapp.figures.label_placement) against the rest of a scores figure.

Run on demand:  python -m pytest tests/bench/test_label_placement_bench.py -s
The redraw after a visual change is near its target (docs/performance.md), so the placement
pass must stay a small part of building the scores figure it belongs to.
"""

import numpy as np
import pytest

from tests.bench.test_engine_bench import _median_seconds, _record
from webapp.figures import loading_arrows, scores_figure
from webapp.figures.label_placement import PlotFrame, place_labels


@pytest.mark.parametrize("n", [10, 20, 50, 100, 200])
def test_placement_time_against_a_scores_figure(n):
    rng = np.random.default_rng(0)
    angles = rng.uniform(0, 2 * np.pi, n)
    names = [f"Variable {i} (unit/100 g)" for i in range(n)]
    frame = PlotFrame((-8.0, 8.0), (-6.0, 8.0), 640, 430)
    placement = _median_seconds(lambda: place_labels(5 * np.cos(angles), 5 * np.sin(angles), names, 11, frame))
    x, y = rng.normal(size=5000), rng.normal(size=5000)
    labels = np.array([f"S{i:05d}" for i in range(5000)], dtype=object)
    loadings = np.column_stack([np.cos(angles), np.sin(angles)])
    arrows = loading_arrows(loadings, names, np.array([2.0, 1.0]), "correlation", 3.0)
    figure = _median_seconds(lambda: scores_figure(x=x, y=y, labels=labels, groups=None, x_title="PC1",
                                                   y_title="PC2", arrows=arrows))
    _record("label_placement", names=n, placement_s=placement, scores_figure_with_arrows_s=figure,
            share=placement / figure)
