"""Tests for webapp.figures.loadings (loadings bars, correlation circle).

References: iris (scikit-learn ``load_iris``); numpy ``corrcoef`` for the
variable-component correlations of autoscaled data, which must lie inside
the unit circle (a correlation is at most 1 in absolute value, and the two
components are uncorrelated, so r_x² + r_y² <= 1).
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_iris

from webapp.analysis.errors import OrdinateError
from webapp.figures import correlation_circle_figure, loadings_bar_figure
from webapp.figures.palette import NEGATIVE_COLOUR, POSITIVE_COLOUR


@pytest.fixture(scope="module")
def iris():
    data = load_iris()
    Z = (data.data - data.data.mean(axis=0)) / data.data.std(axis=0, ddof=1)
    eigenvalues, vectors = np.linalg.eigh(np.corrcoef(data.data, rowvar=False))
    order = np.argsort(eigenvalues)[::-1]
    vectors = vectors[:, order]
    T = Z @ vectors
    r = np.array([[np.corrcoef(Z[:, j], T[:, a])[0, 1] for a in range(2)] for j in range(4)])
    return dict(loadings=vectors, r=r, variables=list(data.feature_names), eigenvalues=eigenvalues[order])


def test_loadings_bars_sorted_by_size_with_signed_colours():
    variables = ["a", "b<", "c", "d"]
    loadings = np.array([0.1, -0.7, 0.5, -0.2])
    fig = loadings_bar_figure(variables=variables, loadings=loadings, component=2, explained_ratio=0.2285)
    bars = fig.data[0]
    np.testing.assert_allclose(bars.x, [-0.7, 0.5, -0.2, 0.1], rtol=1e-6)
    assert list(fig.layout.yaxis.ticktext) == ["b&lt;", "c", "d", "a"]
    assert list(bars.marker.color) == [NEGATIVE_COLOUR, POSITIVE_COLOUR, NEGATIVE_COLOUR, POSITIVE_COLOUR]
    assert fig.layout.title.text == "Loadings on PC2 · 22.9 %"
    assert bars.x.dtype == np.float32


def test_many_variables_make_the_figure_taller():
    fig = loadings_bar_figure(variables=[f"v{i}" for i in range(50)], loadings=np.linspace(-1, 1, 50),
                              component=1, explained_ratio=0.5)
    assert fig.layout.height == 160 + 20 * 50


def test_correlation_circle(iris):
    r = iris["r"]
    fig = correlation_circle_figure(variables=iris["variables"], correlations_x=r[:, 0], correlations_y=r[:, 1],
                                    x_title="PC1 · 73.0 %", y_title="PC2 · 22.9 %")
    unit, half = fig.data[0], fig.data[1]
    np.testing.assert_allclose(np.hypot(unit.x, unit.y), 1.0, atol=1e-6)
    np.testing.assert_allclose(np.hypot(half.x, half.y), 0.5, atol=1e-6)
    assert unit.x[0] == unit.x[-1] and unit.y[0] == unit.y[-1]
    assert half.line.dash == "dot"
    arrows = [a for a in fig.layout.annotations if a.showarrow]
    assert len(arrows) == len(iris["variables"])
    for a, (rx, ry) in zip(arrows, r):
        assert (a.ax, a.ay, a.axref, a.ayref) == (0, 0, "x", "y")
        assert a.x == pytest.approx(rx, abs=1e-6) and a.y == pytest.approx(ry, abs=1e-6)
    # The same correlations from loading × sqrt(eigenvalue) (Gabriel 1971):
    np.testing.assert_allclose(iris["loadings"][:, :2] * np.sqrt(iris["eigenvalues"][:2]), r, atol=1e-12)
    assert tuple(fig.layout.xaxis.range) == (-1.1, 1.1) and tuple(fig.layout.yaxis.range) == (-1.1, 1.1)
    assert fig.layout.yaxis.scaleanchor == "x" and fig.layout.yaxis.scaleratio == 1
    assert fig.layout.xaxis.title.text == "PC1 · 73.0 %"


def test_correlation_circle_rejects_loadings_outside_the_circle():
    with pytest.raises(OrdinateError, match="unit circle"):
        correlation_circle_figure(variables=["a"], correlations_x=[1.2], correlations_y=[0.1], x_title="x", y_title="y")


def test_presentation_mode(iris):
    kwargs = dict(variables=iris["variables"], correlations_x=iris["r"][:, 0], correlations_y=iris["r"][:, 1],
                  x_title="x", y_title="y")
    normal, big = correlation_circle_figure(**kwargs), correlation_circle_figure(**kwargs, presentation=True)
    assert big.layout.font.size > normal.layout.font.size
    def first_arrow(fig):
        return next(a for a in fig.layout.annotations if a.showarrow)

    assert first_arrow(big).arrowwidth > first_arrow(normal).arrowwidth
    assert big.data[2].marker.size > normal.data[2].marker.size
    bars = dict(variables=["a", "b"], loadings=np.array([0.6, -0.8]), component=1, explained_ratio=0.5)
    assert loadings_bar_figure(**bars, presentation=True).layout.font.size > loadings_bar_figure(**bars).layout.font.size


def test_correlation_circle_leaves_out_variables_without_a_finite_correlation(iris):
    # Values that overflow in preprocessing give NaN or infinite correlations (IEEE 754 arithmetic);
    # the panel must still be drawn, with the other variables, and say which ones are missing.
    r = iris["r"].copy()
    r[1, 0] = np.nan
    r[3, 1] = np.inf
    fig = correlation_circle_figure(variables=iris["variables"], correlations_x=r[:, 0], correlations_y=r[:, 1],
                                    x_title="x", y_title="y")
    arrows = [a for a in fig.layout.annotations if a.showarrow]
    assert len(arrows) == 2 and arrows[1].x == pytest.approx(r[2, 0], abs=1e-6)
    names = [a.text for a in fig.layout.annotations if not a.showarrow and a.x == a.x]
    assert iris["variables"][0] in names and iris["variables"][2] in names
    points = fig.data[2]
    assert np.isnan(points.x[1]) and np.isnan(points.y[3]) and np.isfinite(points.x[0])
    notes = " ".join(a.text.replace("<br>", " ") for a in fig.layout.annotations if "Not drawn" in a.text)
    assert f"'{iris['variables'][1]}'" in notes and f"'{iris['variables'][3]}'" in notes
    fig.to_json()  # serialisable as sent to the page


# --- loading spectra along a variable axis -------------------------------------------


def test_loading_spectrum_is_one_float32_line_broken_between_ranges():
    from webapp.figures import loadings_line_figure

    positions = np.array([1100, 1102, 1104, 2000, 2002, 2004], dtype=float)
    loadings = np.array([0.1, 0.3, -0.2, 0.5, 0.4, -0.1])
    fig = loadings_line_figure(positions=positions, loadings=loadings, breaks_after=[2], component=1,
                               explained_ratio=0.5, axis_label="nm", left_out=["moisture"])
    assert len(fig.data) == 1
    line = fig.data[0]
    assert line.mode == "lines" and line.connectgaps is False
    assert np.asarray(line.y).dtype == np.float32
    np.testing.assert_array_equal(np.asarray(line.x)[:3], positions[:3])
    assert np.isnan(np.asarray(line.x)[3]) and np.isnan(np.asarray(line.y)[3])
    np.testing.assert_allclose(np.asarray(line.y)[4:], loadings[3:], rtol=1e-6)
    notes = " ".join(a.text for a in fig.layout.annotations)
    assert "'moisture'" in notes
    assert fig.layout.xaxis.title.text == "nm" and fig.layout.xaxis.autorange is None
    wavenumbers = loadings_line_figure(positions=positions[::-1], loadings=loadings, component=1,
                                       explained_ratio=0.5, axis_label="(cm-1)", reversed_axis=True)
    assert wavenumbers.layout.xaxis.autorange == "reversed"
