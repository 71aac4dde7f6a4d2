"""Tests for webapp.analysis.ellipses.

References checked against:
* the chi-square distribution with 2 degrees of freedom (handbook values of
  1 - exp(-k²/2) and scipy.stats.chi2);
* numpy's covariance and eigen-decomposition, and the closed-form principal
  axis angle of a 2 x 2 covariance matrix, tan 2θ = 2 s_xy / (s_xx - s_yy);
* the Hotelling T² limit k(n-1)/(n-k) F(conf; k, n-k) evaluated with
  scipy.stats.f (Jackson 1991; MacGregor & Kourti 1995);
* scikit-learn's iris data set and PCA.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from sklearn.datasets import load_iris
from sklearn.decomposition import PCA

from webapp.analysis.ellipses import (
    Ellipse,
    hotelling_ellipse,
    sigma_coverage,
    sigma_ellipse,
    sigma_for_coverage,
    try_sigma_ellipse,
)
from webapp.analysis.errors import OrdinateError

# Correlated bivariate normal: sd 2 and 1, correlation 0.5, so cov_xy = 0.5 * 2 * 1.
POPULATION_COV = np.array([[4.0, 1.0], [1.0, 1.0]])


@pytest.fixture(scope="module")
def cloud() -> np.ndarray:
    rng = np.random.default_rng(2024)
    return rng.multivariate_normal([3.0, -1.0], POPULATION_COV, size=2000)


# --------------------------------------------------------------------------
# coverage of sigma ellipses
# --------------------------------------------------------------------------

@pytest.mark.parametrize("k, handbook", [(1, 0.3935), (2, 0.8647), (3, 0.9889)])
def test_sigma_coverage_handbook_values(k, handbook):
    # Chi-square with 2 degrees of freedom at k² (statistics handbook tables,
    # quoted as percentages to two decimals: 39.35 %, 86.47 %, 98.89 %).
    assert sigma_coverage(k) == pytest.approx(handbook, abs=5e-5)
    assert sigma_coverage(k) == pytest.approx(stats.chi2.cdf(k**2, 2), rel=1e-12)


@pytest.mark.parametrize("coverage", [0.5, 0.9, 0.95, 0.99])
def test_sigma_for_coverage_inverts_chi_square(coverage):
    # k = sqrt of the chi-square(2) quantile (scipy.stats.chi2.ppf).
    assert sigma_for_coverage(coverage) == pytest.approx(math.sqrt(stats.chi2.ppf(coverage, 2)), rel=1e-12)
    assert sigma_coverage(sigma_for_coverage(coverage)) == pytest.approx(coverage, rel=1e-12)


def test_sigma_coverage_rejects_non_positive_k():
    with pytest.raises(OrdinateError, match="positive"):
        sigma_coverage(0.0)
    with pytest.raises(OrdinateError, match="positive"):
        sigma_coverage(-1.0)


# --------------------------------------------------------------------------
# sigma ellipse geometry and observed share
# --------------------------------------------------------------------------

@pytest.mark.parametrize("k, tolerance", [(1.0, 0.03), (2.0, 0.02), (3.0, 0.01)])
def test_monte_carlo_share_inside_matches_chi_square(cloud, k, tolerance):
    ellipse = sigma_ellipse(cloud, k)
    assert ellipse.kind == "sigma"
    assert ellipse.level == k
    assert ellipse.n_points == 2000
    assert ellipse.expected_coverage == pytest.approx(1 - math.exp(-k * k / 2), rel=1e-12)
    assert ellipse.observed_fraction == pytest.approx(stats.chi2.cdf(k**2, 2), abs=tolerance)


def test_sigma_ellipse_axes_and_centre_follow_numpy_covariance(cloud):
    k = 2.0
    ellipse = sigma_ellipse(cloud, k)
    eigvals, eigvecs = np.linalg.eigh(np.cov(cloud, rowvar=False))  # ddof = 1
    assert ellipse.semi_axes[0] == pytest.approx(k * math.sqrt(eigvals[1]), rel=1e-12)
    assert ellipse.semi_axes[1] == pytest.approx(k * math.sqrt(eigvals[0]), rel=1e-12)
    np.testing.assert_allclose(ellipse.center, cloud.mean(axis=0), rtol=1e-12)
    # The major axis points along the leading eigenvector (sign does not matter).
    direction = np.array([math.cos(ellipse.angle), math.sin(ellipse.angle)])
    assert abs(direction @ eigvecs[:, 1]) == pytest.approx(1.0, abs=1e-12)
    assert -math.pi / 2 < ellipse.angle <= math.pi / 2


def test_sigma_ellipse_angle_matches_closed_form_of_population():
    # Principal axis of a 2 x 2 covariance: tan 2θ = 2 s_xy / (s_xx - s_yy);
    # for the population matrix above θ = atan(2/3) / 2 = 0.2940 rad.
    rng = np.random.default_rng(99)
    points = rng.multivariate_normal([0.0, 0.0], POPULATION_COV, size=20_000)
    theta = 0.5 * math.atan2(2 * 1.0, 4.0 - 1.0)
    assert sigma_ellipse(points, 1.0).angle == pytest.approx(theta, abs=0.02)
    # And exactly for the sample covariance of the same points.
    s = np.cov(points, rowvar=False)
    exact = 0.5 * math.atan2(2 * s[0, 1], s[0, 0] - s[1, 1])
    assert sigma_ellipse(points, 1.0).angle == pytest.approx(exact, abs=1e-10)


def test_sigma_curve_lies_on_the_ellipse_and_is_closed(cloud):
    k, n_curve = 3.0, 90
    ellipse = sigma_ellipse(cloud, k, n_curve=n_curve)
    assert ellipse.x.shape == ellipse.y.shape == (n_curve + 1,)
    assert ellipse.x[0] == ellipse.x[-1] and ellipse.y[0] == ellipse.y[-1]
    inverse_cov = np.linalg.inv(np.cov(cloud, rowvar=False))
    d = np.column_stack([ellipse.x, ellipse.y]) - cloud.mean(axis=0)
    np.testing.assert_allclose(np.einsum("ij,jk,ik->i", d, inverse_cov, d), k * k, rtol=1e-9)
    # The curve goes round once: its points are all distinct except the closing one.
    assert len({(round(a, 9), round(b, 9)) for a, b in zip(ellipse.x[:-1], ellipse.y[:-1])}) == n_curve


def test_observed_fraction_counts_points_by_mahalanobis_distance(cloud):
    # Independent count with numpy: squared Mahalanobis distance <= k².
    k = 1.5
    inverse_cov = np.linalg.inv(np.cov(cloud, rowvar=False))
    d = cloud - cloud.mean(axis=0)
    expected = np.mean(np.einsum("ij,jk,ik->i", d, inverse_cov, d) <= k * k)
    assert sigma_ellipse(cloud, k).observed_fraction == expected


def test_ellipse_result_is_read_only(cloud):
    ellipse = sigma_ellipse(cloud, 2.0)
    assert isinstance(ellipse, Ellipse)
    with pytest.raises(ValueError):
        ellipse.x[0] = 0.0
    with pytest.raises(AttributeError):
        ellipse.level = 3.0  # frozen dataclass


@pytest.mark.parametrize(
    "points, reason",
    [
        (np.array([[0.0, 0.0], [1.0, 1.0]]), "at least 3"),
        (np.array([[0.0, 0.0], [1.0, 2.0], [2.0, 4.0], [3.0, 6.0]]), "straight line"),
        (np.full((5, 2), 7.0), "straight line"),
    ],
)
def test_degenerate_groups_raise_or_give_none(points, reason):
    with pytest.raises(OrdinateError, match=reason):
        sigma_ellipse(points, 2.0)
    assert try_sigma_ellipse(points, 2.0) is None


def test_invalid_arguments_raise_even_in_try_variant(cloud):
    for call in (sigma_ellipse, try_sigma_ellipse):
        with pytest.raises(OrdinateError, match="positive"):
            call(cloud, 0.0)
        with pytest.raises(OrdinateError, match="two columns"):
            call(np.ones((5, 3)), 2.0)
        bad = cloud.copy()
        bad[7, 1] = np.nan
        with pytest.raises(OrdinateError, match="Point 7"):
            call(bad, 2.0)


# --------------------------------------------------------------------------
# Hotelling T² ellipse
# --------------------------------------------------------------------------

def _hand_limit(n: int, conf: float) -> float:
    # k(n-1)/(n-k) F(conf; k, n-k) with k = 2 (Jackson 1991; MacGregor & Kourti 1995)
    return 2 * (n - 1) / (n - 2) * stats.f.ppf(conf, 2, n - 2)


def test_hotelling_axes_match_hand_evaluation():
    n, conf, lam_x, lam_y = 25, 0.95, 3.2, 0.7
    ellipse = hotelling_ellipse(lam_x, lam_y, n, conf)
    limit = _hand_limit(n, conf)
    assert ellipse.semi_axes == pytest.approx((math.sqrt(lam_x * limit), math.sqrt(lam_y * limit)), rel=1e-12)
    assert ellipse.center == (0.0, 0.0)
    assert ellipse.angle == 0.0
    assert ellipse.kind == "hotelling" and ellipse.level == conf
    assert ellipse.expected_coverage == conf
    assert ellipse.observed_fraction is None and ellipse.n_points == 0
    np.testing.assert_allclose(ellipse.x**2 / lam_x + ellipse.y**2 / lam_y, limit, rtol=1e-12)
    assert ellipse.x[0] == ellipse.x[-1] and ellipse.y[0] == ellipse.y[-1]


def test_hotelling_major_axis_on_y_when_y_component_varies_more():
    n, conf = 40, 0.99
    ellipse = hotelling_ellipse(0.5, 2.0, n, conf)
    limit = _hand_limit(n, conf)
    assert ellipse.angle == pytest.approx(math.pi / 2)
    assert ellipse.semi_axes[0] == pytest.approx(math.sqrt(2.0 * limit), rel=1e-12)
    assert np.max(np.abs(ellipse.y)) == pytest.approx(math.sqrt(2.0 * limit), rel=1e-12)


def test_hotelling_observed_fraction_on_iris_scores():
    # scikit-learn's iris data and PCA (explained_variance_ uses n - 1).
    X = load_iris().data
    pca = PCA(n_components=2).fit(X)
    scores = pca.transform(X)
    lam = pca.explained_variance_
    n = X.shape[0]
    ellipse = hotelling_ellipse(lam[0], lam[1], n, 0.95, scores=scores)
    limit = _hand_limit(n, 0.95)
    expected = np.mean(scores[:, 0] ** 2 / lam[0] + scores[:, 1] ** 2 / lam[1] <= limit)
    assert ellipse.observed_fraction == expected
    assert ellipse.n_points == n
    # Sanity: for 150 samples the share inside a 95 % limit is near 95 %.
    assert 0.9 <= ellipse.observed_fraction <= 1.0


def test_hotelling_rejects_bad_arguments():
    with pytest.raises(OrdinateError, match="positive"):
        hotelling_ellipse(0.0, 1.0, 20, 0.95)
    with pytest.raises(OrdinateError, match="at least 3"):
        hotelling_ellipse(1.0, 1.0, 2, 0.95)
    with pytest.raises(OrdinateError, match="between 0 and 1"):
        hotelling_ellipse(1.0, 1.0, 20, 95)
    with pytest.raises(OrdinateError, match="two columns"):
        hotelling_ellipse(1.0, 1.0, 20, 0.95, scores=np.ones((4, 3)))
