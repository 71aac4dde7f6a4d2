"""Tests for webapp.figures.diagnostics (T²-Q plot, flagged samples, contributions).

References:
* iris (scikit-learn ``load_iris``) and scikit-learn's PCA for T² = Σ t_a²/λ_a
  and Q = ||x - x̂||²;
* the in-model T² limit k(n-1)/(n-k) F(conf; k, n-k) evaluated with
  scipy.stats.f (Jackson 1991, A User's Guide to Principal Components);
* the flagged-sample ordering as specified for Ordinate: worst ratio to its
  limit first (values below are worked by hand).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from sklearn.datasets import load_iris
from sklearn.decomposition import PCA

from webapp.analysis.errors import OrdinateError
from webapp.figures import (
    CAUTION,
    NOTES_ANNOTATION_NAME,
    WEBGL_THRESHOLD,
    contributions_figure,
    diagnostics_figure,
    flagged_samples,
)
from webapp.figures.palette import NEGATIVE_COLOUR, POSITIVE_COLOUR


@pytest.fixture(scope="module")
def iris_diagnostics():
    data = load_iris()
    Z = (data.data - data.data.mean(axis=0)) / data.data.std(axis=0, ddof=1)
    pca = PCA(n_components=2, svd_solver="full").fit(Z)
    T = pca.transform(Z)
    t2 = np.sum(T**2 / pca.explained_variance_, axis=1)
    q = np.sum((Z - pca.inverse_transform(T)) ** 2, axis=1)
    n, k = Z.shape[0], 2
    t2_lim = k * (n - 1) / (n - k) * stats.f.ppf(0.95, k, n - k)
    q_lim = float(np.quantile(q, 0.95))  # any positive value will do for drawing
    labels = np.array([f"iris-{i:03d}" for i in range(n)])
    groups = np.array(data.target_names)[data.target]
    return dict(t2=t2, q=q, t2_limit=t2_lim, q_limit=q_lim, labels=labels, groups=groups)


def _figure(d, **kwargs):
    args = dict(t2=d["t2"], q=d["q"], labels=d["labels"], groups=d["groups"], t2_limit=d["t2_limit"],
                q_limit=d["q_limit"], confidence=0.95)
    args.update(kwargs)
    return diagnostics_figure(**args)


def _notes(fig) -> str:
    return " ".join(a.text for a in fig.layout.annotations if a.name == NOTES_ANNOTATION_NAME)


def test_limit_lines_at_the_given_values(iris_diagnostics):
    d = iris_diagnostics
    fig = _figure(d)
    t2_line = next(s for s in fig.layout.shapes if s.name == "t2-limit")
    q_line = next(s for s in fig.layout.shapes if s.name == "q-limit")
    assert t2_line.x0 == t2_line.x1 == pytest.approx(d["t2_limit"], rel=1e-15)
    assert (t2_line.yref, t2_line.y0, t2_line.y1) == ("paper", 0, 1)
    assert q_line.y0 == q_line.y1 == pytest.approx(d["q_limit"], rel=1e-15)
    assert t2_line.line.dash == q_line.line.dash == "dash"
    assert t2_line.label.text == "T² limit (95 %)"
    assert q_line.label.text == "Q limit (95 %)"
    assert fig.layout.xaxis.title.text == "Hotelling's T²"
    assert CAUTION.split(":")[0] in _notes(fig).replace("<br>", " ")  # notes wrap to the half-width figure


def test_flagged_points_are_outlined_and_carry_labels(iris_diagnostics):
    d = iris_diagnostics
    fig = _figure(d)
    expected = set(d["labels"][(d["t2"] > d["t2_limit"]) | (d["q"] > d["q_limit"])])
    ring = next(t for t in fig.data if t.legendgroup == "flagged")
    assert set(np.asarray(ring.customdata)[:, 0]) == expected
    assert ring.name == f"Beyond a 95 % limit ({len(expected)})"
    assert ring.marker.symbol == "circle-open" and ring.marker.line.width > 1
    groups = [t for t in fig.data if t.legendgroup and t.legendgroup.startswith("group:")]
    assert [t.name for t in groups] == ["setosa", "versicolor", "virginica"]
    for trace in groups:
        mask = d["groups"] == trace.name
        assert np.asarray(trace.customdata)[:, 0].tolist() == d["labels"][mask].tolist()
        np.testing.assert_array_equal(trace.x, d["t2"][mask].astype(np.float32))
        np.testing.assert_array_equal(trace.y, d["q"][mask].astype(np.float32))


def test_zero_q_limit_is_explained_and_draws_no_q_line(iris_diagnostics):
    d = iris_diagnostics
    fig = _figure(d, q=np.zeros_like(d["q"]), q_limit=0.0, log_axes=True)
    assert [s.name for s in fig.layout.shapes] == ["t2-limit"]
    assert "Q is zero: every component is kept" in _notes(fig)
    assert fig.layout.xaxis.type == "log" and fig.layout.yaxis.type == "linear"
    assert _figure(d, log_axes=True).layout.yaxis.type == "log"


def test_webgl_above_threshold():
    rng = np.random.default_rng(5)
    for n, expected in [(WEBGL_THRESHOLD, "scatter"), (WEBGL_THRESHOLD + 1, "scattergl")]:
        fig = diagnostics_figure(t2=rng.chisquare(2, n), q=rng.chisquare(3, n), labels=np.arange(n), groups=None,
                                 t2_limit=6.0, q_limit=7.8, confidence=0.95)
        assert fig.data[0].type == expected


def test_flagged_samples_worst_first():
    # Worked by hand with limits T² 10 and Q 2:
    #   a: 12/10 = 1.2 (T²)   b: Q 5/2 = 2.5   c: below both   d: 30/10 = 3.0 and 3/2 = 1.5 -> 3.0
    #   e: 4/10 and 2.4/2 = 1.2 (Q; ties a, keeps input order)
    rows = flagged_samples(["a", "b", "c", "d", "e"], [12, 1, 3, 30, 4], [0.1, 5, 1, 3, 2.4], 10, 2)
    assert [r["label"] for r in rows] == ["d", "b", "a", "e"]
    assert rows[0] == {"label": "d", "t2": 30.0, "q": 3.0, "over_t2": True, "over_q": True, "ratio": 3.0}
    assert (rows[1]["over_t2"], rows[1]["over_q"]) == (False, True)
    assert flagged_samples(["a"], [1.0], [5.0], 10, 0.0) == []  # Q limit 0: nothing flagged on Q
    with pytest.raises(OrdinateError):
        flagged_samples(["a"], [1.0], [1.0], 0.0, 1.0)


def test_contributions_panels():
    variables = ["pH", "<b>Na</b>", "K", "Ca", "Mg"]
    c = np.array([0.5, -2.0, 3.0, 0.1, 1.0])
    e = np.array([0.3, -0.2, 0.05, -0.9, 0.4])
    fig = contributions_figure(variables=variables, t2_contributions=c, q_residuals=e, label="lot <7>")
    t2_bars, q_bars = fig.data
    assert (t2_bars.xaxis, q_bars.xaxis) == ("x", "x2")
    np.testing.assert_allclose(t2_bars.x, c, rtol=1e-6)
    np.testing.assert_allclose(q_bars.x, e**2, rtol=1e-6)  # bar length e², sum = Q
    assert list(q_bars.marker.color) == [POSITIVE_COLOUR, NEGATIVE_COLOUR, POSITIVE_COLOUR, NEGATIVE_COLOUR, POSITIVE_COLOUR]
    assert list(t2_bars.marker.color) == [POSITIVE_COLOUR, NEGATIVE_COLOUR, POSITIVE_COLOUR, POSITIVE_COLOUR, POSITIVE_COLOUR]
    # Original order kept; the three largest |values| of each panel outlined.
    assert list(fig.layout.yaxis.ticktext) == ["pH", "&lt;b&gt;Na&lt;/b&gt;", "K", "Ca", "Mg"]
    assert list(np.flatnonzero(np.asarray(t2_bars.marker.line.width) > 0)) == [1, 2, 4]
    assert list(np.flatnonzero(np.asarray(q_bars.marker.line.width) > 0)) == [0, 3, 4]
    np.testing.assert_allclose(np.asarray(q_bars.customdata)[:, 1].astype(float), e)
    assert fig.layout.title.text == "Contributions for sample lot &lt;7&gt;"
    assert fig.layout.yaxis.autorange == "reversed"


def test_presentation_mode(iris_diagnostics):
    normal, big = _figure(iris_diagnostics), _figure(iris_diagnostics, presentation=True)
    assert big.data[0].marker.size > normal.data[0].marker.size
    assert big.layout.font.size > normal.layout.font.size
    kwargs = dict(variables=["a", "b"], t2_contributions=np.ones(2), q_residuals=np.ones(2), label="x")
    assert contributions_figure(**kwargs, presentation=True).layout.font.size > contributions_figure(**kwargs).layout.font.size
