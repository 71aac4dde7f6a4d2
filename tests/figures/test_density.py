"""Density figures for long data: one image-sized payload whatever the number of rows.

References: numpy.histogram2d for the counts (numpy), log10 for the colour
(the figure's own documented mapping); the payload bound is this project's
design target (issue 11: "one image-sized payload, not per point").
"""

from __future__ import annotations

import numpy as np
import plotly.io as pio

from webapp.analysis.ellipses import component_ellipse
from webapp.figures.density import density_diagnostics_figure, density_scores_figure


def _counts(rows: int, seed: int = 0):
    rng = np.random.default_rng(seed)
    x, y = rng.standard_normal(rows), 0.5 * rng.standard_normal(rows)
    edges = np.linspace(-6, 6, 161)
    counts, _, _ = np.histogram2d(x, y, bins=[edges, edges])
    return counts.astype(np.int64), edges, rng


def test_the_scores_density_payload_does_not_grow_with_the_rows():
    sizes = []
    for rows in (10_000, 2_000_000):
        counts, edges, rng = _counts(rows)
        figure = density_scores_figure(
            counts=counts, x_edges=edges, y_edges=edges, outside=0, rows=rows,
            sample_x=rng.standard_normal(5000), sample_y=rng.standard_normal(5000),
            sample_labels=[f"row {i}" for i in range(5000)], ellipses=[component_ellipse(1.0, 0.25, 2.0)],
            x_title="PC1", y_title="PC2")
        [image] = [t for t in figure.data if t.type == "heatmap"]
        z = np.asarray(image.z, dtype=np.float64)
        assert z.shape == (160, 160) and z.dtype == np.float64
        # Colour is log10(count); empty cells are blank (NaN), never 0 (which would read as one sample).
        np.testing.assert_allclose(np.nan_to_num(10 ** z).T, counts, rtol=1e-5)
        assert np.isnan(z[counts.T == 0]).all()
        assert image.hoverinfo == "skip"
        assert sum(len(t.x) for t in figure.data if t.type == "scattergl") == 5000
        sizes.append(len(pio.to_json(figure)))
    assert abs(sizes[1] - sizes[0]) < 0.05 * sizes[0]  # 200 times the rows, the same payload
    assert sizes[1] < 400_000


def test_the_two_sigma_ellipse_of_the_components():
    # Scores of two components are uncorrelated with variances = eigenvalues (common practice):
    # the 2σ ellipse has semi-axes 2·sqrt(λ).
    ellipse = component_ellipse(4.0, 1.0, 2.0)
    assert ellipse.semi_axes == (4.0, 2.0)
    np.testing.assert_allclose((ellipse.x / 4.0) ** 2 + (ellipse.y / 2.0) ** 2, 1.0, rtol=1e-12)
    assert ellipse.angle == 0.0 and component_ellipse(1.0, 4.0, 2.0).angle == np.pi / 2
    assert abs(ellipse.expected_coverage - (1 - np.exp(-2.0))) < 1e-12  # 1 - exp(-k²/2)


def test_t2_q_density_draws_limits_and_the_flagged_points_with_raw_labels():
    counts, edges, _ = _counts(50_000)
    edges = np.linspace(0, 30, 161)
    figure = density_diagnostics_figure(
        counts=counts, t2_edges=edges, q_edges=edges, outside=3, rows=50_000, flagged_t2=[25.0, 20.0],
        flagged_q=[1.0, 12.0], flagged_labels=["<b>x</b>", "%{y}"], t2_limit=11.1, q_limit=9.3, confidence=0.95,
        components=3, t2_over=2, q_over=1)
    lines = {t.name: (list(t.x), list(t.y)) for t in figure.data if t.type == "scatter"}
    assert lines["T² limit (95 %)"][0] == [11.1, 11.1] and lines["Q limit (95 %)"][1] == [9.3, 9.3]
    [points] = [t for t in figure.data if t.type == "scattergl"]
    assert [row[0] for row in points.customdata] == ["<b>x</b>", "%{y}"]  # picking reads the label as is
    assert "<b>" not in points.customdata[0][1] and "%{" not in points.customdata[1][1]  # hover shows it as text
