"""Tests for webapp.analysis.diagnostics.

References checked against:
* published formulas (Jackson 1991; MacGregor & Kourti 1995; Tracy, Young &
  Mason 1992; Jackson & Mudholkar 1979; Imhof 1961; Westerhuis, Gurden &
  Smilde 2000), written out again here and evaluated with scipy's own
  distributions (scipy.stats.f / beta / norm / chi2);
* scipy.spatial.distance.mahalanobis and scikit-learn's PCA;
* seeded Monte Carlo with multivariate-normal data of known covariance, where
  a limit at confidence c must be exceeded by about 1 - c of the samples.
"""

from __future__ import annotations

import math
import tracemalloc

import numpy as np
import pytest
from scipy import stats
from scipy.spatial.distance import mahalanobis
from sklearn.datasets import load_iris
from sklearn.decomposition import PCA

from webapp.analysis.diagnostics import (
    count_nonzero_eigenvalues,
    hotelling_t2,
    q_contributions,
    q_limit,
    q_limit_box,
    q_limit_from_moments,
    q_residual_row,
    q_residuals,
    t2_contributions,
    t2_limit,
    t2_limit_beta,
)
from webapp.analysis.errors import OrdinateError


def _fit_pca(X: np.ndarray):
    """Centred X, eigenvalues (n-1, descending) and loadings, via numpy's eigh."""
    Xc = X - X.mean(axis=0)
    eigvals, eigvecs = np.linalg.eigh(np.cov(Xc, rowvar=False))
    order = np.argsort(eigvals)[::-1]
    return Xc, eigvals[order], eigvecs[:, order]


@pytest.fixture(scope="module")
def iris_model():
    X = load_iris().data  # open data set shipped with scikit-learn
    pca = PCA().fit(X)
    Xc = X - pca.mean_
    return Xc, pca.explained_variance_, pca.components_.T


# --------------------------------------------------------------------------
# Hotelling's T²
# --------------------------------------------------------------------------

def test_t2_equals_squared_mahalanobis_in_score_space(iris_model):
    # Reference: scipy.spatial.distance.mahalanobis with VI = inverse of diag(λ).
    Xc, lam, P = iris_model
    k = 2
    T = Xc @ P[:, :k]
    t2 = hotelling_t2(T, lam[:k])
    inverse_cov = np.diag(1.0 / lam[:k])
    expected = np.array([mahalanobis(t, np.zeros(k), inverse_cov) ** 2 for t in T])
    np.testing.assert_allclose(t2, expected, rtol=1e-12)


def test_t2_with_all_components_equals_full_mahalanobis(iris_model):
    # With every component kept, T² is the Mahalanobis distance in the original
    # variables under the sample covariance (np.cov) -- Jackson 1991.
    Xc, lam, P = iris_model
    t2 = hotelling_t2(Xc @ P, lam)
    inverse_cov = np.linalg.inv(np.cov(Xc, rowvar=False))
    expected = np.array([mahalanobis(x, np.zeros(4), inverse_cov) ** 2 for x in Xc])
    np.testing.assert_allclose(t2, expected, rtol=1e-9)
    # In-sample T² over all components averages to p(n-1)/n exactly (trace identity).
    n = Xc.shape[0]
    assert t2.mean() == pytest.approx(4 * (n - 1) / n, rel=1e-10)


def test_t2_zero_eigenvalue_component_is_left_out():
    # An exactly collinear variable gives a zero eigenvalue; T² must stay finite
    # and equal the T² of the components that carry variance.
    rng = np.random.default_rng(11)
    base = rng.standard_normal((50, 2))
    X = np.column_stack([base, base[:, 0] + base[:, 1]])
    Xc, lam, P = _fit_pca(X)
    assert lam[-1] < 1e-12 * lam[0]
    T = Xc @ P
    with np.errstate(all="raise"):
        t2 = hotelling_t2(T, lam)
    assert np.all(np.isfinite(t2))
    np.testing.assert_allclose(t2, hotelling_t2(T[:, :2], lam[:2]), rtol=1e-12)
    assert count_nonzero_eigenvalues(lam) == 2
    # Exactly zero and slightly negative (roundoff) eigenvalues are treated alike.
    lam_zero = lam.copy()
    lam_zero[-1] = 0.0
    np.testing.assert_allclose(hotelling_t2(T, lam_zero), t2, rtol=1e-12)
    lam_neg = lam.copy()
    lam_neg[-1] = -1e-15 * lam[0]
    np.testing.assert_allclose(hotelling_t2(T, lam_neg), t2, rtol=1e-12)


def test_t2_rejects_bad_input():
    with pytest.raises(OrdinateError, match="eigenvalue"):
        hotelling_t2(np.ones((3, 2)), np.array([1.0]))
    with pytest.raises(OrdinateError, match="negative"):
        hotelling_t2(np.ones((3, 2)), np.array([1.0, -0.5]))
    with pytest.raises(OrdinateError, match="missing or infinite"):
        hotelling_t2(np.array([[1.0, np.nan]]), np.array([1.0, 0.5]))
    with pytest.raises(OrdinateError, match="2-D"):
        hotelling_t2(np.ones(2), np.array([1.0, 0.5]))


# --------------------------------------------------------------------------
# T² limits
# --------------------------------------------------------------------------

@pytest.mark.parametrize("n, k, conf", [(10, 2, 0.95), (20, 3, 0.99), (150, 2, 0.95), (30, 1, 0.90)])
def test_t2_limits_match_published_formulas(n, k, conf):
    # In-model F form: k(n-1)/(n-k) F(conf; k, n-k)   (Jackson 1991; MacGregor & Kourti 1995)
    in_model = k * (n - 1) / (n - k) * stats.f.ppf(conf, k, n - k)
    # New samples: k(n+1)(n-1)/(n(n-k)) F(conf; k, n-k)   (Tracy, Young & Mason 1992)
    new = k * (n + 1) * (n - 1) / (n * (n - k)) * stats.f.ppf(conf, k, n - k)
    # Exact in-model: (n-1)²/n Beta(conf; k/2, (n-k-1)/2)   (Tracy, Young & Mason 1992)
    beta = (n - 1) ** 2 / n * stats.beta.ppf(conf, k / 2, (n - k - 1) / 2)
    assert t2_limit(n, k, conf) == pytest.approx(in_model, rel=1e-12)
    assert t2_limit(n, k, conf, new_samples=True) == pytest.approx(new, rel=1e-12)
    assert t2_limit_beta(n, k, conf) == pytest.approx(beta, rel=1e-12)


@pytest.mark.parametrize("n, k", [(10, 2), (20, 3), (50, 5), (200, 3)])
def test_f_and_beta_forms_are_different_but_sensible(n, k):
    conf = 0.95
    f_form = t2_limit(n, k, conf)
    beta_form = t2_limit_beta(n, k, conf)
    # They are different limits, not two spellings of one ...
    assert abs(f_form - beta_form) / beta_form > 1e-3
    # ... the exact in-model limit cannot exceed the largest possible in-sample T².
    assert beta_form <= (n - 1) ** 2 / n
    # The F form is the conservative (larger) one, and new samples get a wider
    # limit by exactly (n+1)/n.
    assert f_form > beta_form
    assert t2_limit(n, k, conf, new_samples=True) / f_form == pytest.approx((n + 1) / n, rel=1e-12)


def test_t2_limits_approach_chi_square_for_large_n():
    # All three forms tend to the chi-square(k) quantile as n grows (common practice).
    chi2 = stats.chi2.ppf(0.95, 3)
    n = 10**6
    assert t2_limit(n, 3, 0.95) == pytest.approx(chi2, rel=1e-4)
    assert t2_limit(n, 3, 0.95, new_samples=True) == pytest.approx(chi2, rel=1e-4)
    assert t2_limit_beta(n, 3, 0.95) == pytest.approx(chi2, rel=1e-4)


def test_monte_carlo_new_sample_t2_exceeds_limit_at_nominal_rate():
    # Multivariate-normal reference sets (n = 20, p = k = 3, known covariance);
    # each model tests 50 new samples. Under Tracy, Young & Mason (1992) the
    # share of new samples above the new-sample limit is 1 - confidence.
    rng = np.random.default_rng(20240611)
    cov = np.array([[4.0, 1.2, 0.0], [1.2, 1.0, 0.3], [0.0, 0.3, 2.0]])
    chol = np.linalg.cholesky(cov)
    n, p, reps, m, conf = 20, 3, 2000, 50, 0.95
    limit_new = t2_limit(n, p, conf, new_samples=True)
    limit_beta = t2_limit_beta(n, p, conf)
    limit_chi2 = stats.chi2.ppf(conf, p)
    above_new = above_in_model = above_chi2 = 0
    for _ in range(reps):
        reference = rng.standard_normal((n, p)) @ chol.T
        centre = reference.mean(axis=0)
        Xc, lam, P = _fit_pca(reference)
        new_scores = (rng.standard_normal((m, p)) @ chol.T - centre) @ P
        t2_new = hotelling_t2(new_scores, lam)
        above_new += np.count_nonzero(t2_new > limit_new)
        above_chi2 += np.count_nonzero(t2_new > limit_chi2)
        above_in_model += np.count_nonzero(hotelling_t2(Xc @ P, lam) > limit_beta)
    share_new = above_new / (reps * m)
    share_in_model = above_in_model / (reps * n)
    assert share_new == pytest.approx(1 - conf, abs=0.015)
    # The exact Beta limit for the model's own samples, same data.
    assert share_in_model == pytest.approx(1 - conf, abs=0.015)
    # The plain chi-square limit ignores estimation error and flags far more
    # new samples, so the checks above can tell the limits apart.
    assert above_chi2 / (reps * m) > 0.09


def test_t2_limit_rejects_bad_arguments():
    with pytest.raises(OrdinateError, match="between 0 and 1"):
        t2_limit(20, 2, 1.0)
    with pytest.raises(OrdinateError, match="between 0 and 1"):
        t2_limit(20, 2, 0.0)
    with pytest.raises(OrdinateError, match="at least 1"):
        t2_limit(20, 0, 0.95)
    with pytest.raises(OrdinateError, match="needs at least"):
        t2_limit(5, 5, 0.95)
    with pytest.raises(OrdinateError, match="needs at least"):
        t2_limit_beta(5, 4, 0.95)  # Beta needs k <= n - 2
    with pytest.raises(OrdinateError, match="whole number"):
        t2_limit(20.5, 2, 0.95)


# --------------------------------------------------------------------------
# Q residuals and Q limit
# --------------------------------------------------------------------------

def test_q_residuals_match_sklearn_reconstruction(iris_model):
    # Reference: scikit-learn's PCA(n_components=2).inverse_transform.
    X = load_iris().data
    pca = PCA(n_components=2).fit(X)
    expected = np.sum((X - pca.inverse_transform(pca.transform(X))) ** 2, axis=1)
    Xc = X - pca.mean_
    P = pca.components_.T
    q = q_residuals(Xc, Xc @ P, P)
    np.testing.assert_allclose(q, expected, rtol=1e-9, atol=1e-12)


def test_q_residuals_block_boundaries_do_not_matter():
    # Rows far beyond one block: each row's Q is independent of its neighbours.
    rng = np.random.default_rng(5)
    X = rng.standard_normal((70_000, 3))
    Xc, lam, P = _fit_pca(X)
    P2 = P[:, :2]
    q = q_residuals(Xc, Xc @ P2, P2)
    direct = (Xc @ P[:, 2]) ** 2  # with orthonormal P, Q is the dropped score squared
    np.testing.assert_allclose(q, direct, rtol=1e-8, atol=1e-12)


def test_q_residuals_memory_stays_far_below_the_data_size():
    # n = 200 000, p = 20 is 32 MB of data; a full residual matrix would be another 32 MB.
    rng = np.random.default_rng(8)
    n, p = 200_000, 20
    X = rng.standard_normal((n, p))
    X -= X.mean(axis=0)
    _, _, P = _fit_pca(X)
    P5 = P[:, :5]
    T = X @ P5
    tracemalloc.start()
    try:
        q_residuals(X, T, P5)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 0.5 * X.nbytes


def test_q_residuals_reports_the_row_with_missing_data():
    X = np.zeros((4, 2))
    X[2, 1] = np.nan
    P = np.array([[1.0], [0.0]])
    with pytest.raises(OrdinateError, match="Row 2"):
        q_residuals(X, X @ P, P)


def test_q_residuals_rejects_non_orthonormal_loadings():
    X = np.ones((4, 2))
    P = np.array([[2.0], [0.0]])
    with pytest.raises(OrdinateError, match="orthonormal"):
        q_residuals(X, X @ P, P)


@pytest.mark.parametrize(
    "residual",
    [np.array([1.0, 0.8, 0.6, 0.5, 0.4, 0.3, 0.2]), 0.5 ** np.arange(12), np.array([3.0, 0.2])],
)
@pytest.mark.parametrize("conf", [0.90, 0.95, 0.99])
def test_q_limit_matches_jackson_mudholkar_formula(residual, conf):
    # Jackson & Mudholkar (1979), Technometrics 21:341-349, written out again.
    t1, t2, t3 = (float(np.sum(residual**i)) for i in (1, 2, 3))
    h0 = 1 - 2 * t1 * t3 / (3 * t2**2)
    assert h0 > 0
    c = stats.norm.ppf(conf)
    expected = t1 * (c * math.sqrt(2 * t2 * h0**2) / t1 + 1 + t2 * h0 * (h0 - 1) / t1**2) ** (1 / h0)
    assert q_limit(residual, conf) == pytest.approx(expected, rel=1e-10)
    assert q_limit_from_moments(t1, t2, t3, conf) == pytest.approx(expected, rel=1e-10)


def test_q_limit_falls_back_to_three_moment_form_when_h0_is_negative():
    # One large and many small residual eigenvalues: h0 < 0, JM does not apply.
    residual = np.r_[1.0, np.full(1000, 1e-3)]
    t1, t2, t3 = (float(np.sum(residual**i)) for i in (1, 2, 3))
    assert 1 - 2 * t1 * t3 / (3 * t2**2) < 0
    # Pearson's three-moment chi-square approximation as given by Imhof (1961).
    h = t2**3 / t3**2
    expected = t1 + math.sqrt(2 * t2) * (stats.chi2.ppf(0.99, h) - h) / math.sqrt(2 * h)
    limit = q_limit(residual, 0.99)
    assert limit == pytest.approx(expected, rel=1e-10)
    # Monte Carlo: Q = Σ λ_j z_j², the exact law of Q for normal data.
    rng = np.random.default_rng(77)
    q = np.zeros(40_000)
    for start in range(0, residual.size, 200):
        part = residual[start : start + 200]
        q += (rng.standard_normal((q.size, part.size)) ** 2) @ part
    assert np.mean(q > limit) == pytest.approx(0.01, abs=0.003)
    assert np.mean(q > q_limit(residual, 0.95)) == pytest.approx(0.05, abs=0.008)


def test_monte_carlo_q_of_normal_data_exceeds_limit_at_nominal_rate():
    # Normal data with known covariance (eigenvalues below, random rotation);
    # PCA with 3 components; Q of the fitted samples against the JM limit of
    # the 7 residual eigenvalues should be exceeded by about 1 - confidence.
    rng = np.random.default_rng(314)
    population = np.array([10, 6, 4, 1.0, 0.8, 0.6, 0.5, 0.4, 0.3, 0.2])
    p, n, k = population.size, 50_000, 3
    rotation, _ = np.linalg.qr(rng.standard_normal((p, p)))
    X = (rng.standard_normal((n, p)) * np.sqrt(population)) @ rotation.T
    Xc, lam, P = _fit_pca(X)
    q = q_residuals(Xc, Xc @ P[:, :k], P[:, :k])
    for conf, tol in ((0.90, 0.01), (0.95, 0.008), (0.99, 0.003)):
        assert np.mean(q > q_limit(lam[k:], conf)) == pytest.approx(1 - conf, abs=tol)


def test_q_limit_box_matches_formula_and_monte_carlo():
    # Box (1954): Q ≈ g χ²(h), g = θ2/θ1, h = θ1²/θ2, written out again.
    population = np.array([1.0, 0.8, 0.6, 0.5, 0.4, 0.3, 0.2])
    t1, t2 = float(population.sum()), float(np.sum(population**2))
    for conf in (0.95, 0.99):
        expected = t2 / t1 * stats.chi2.ppf(conf, t1**2 / t2)
        assert q_limit_box(t1, t2, conf) == pytest.approx(expected, rel=1e-12)
    # Q = Σ λ_j z_j² for normal data with these residual variances.
    rng = np.random.default_rng(2718)
    q = (rng.standard_normal((100_000, population.size)) ** 2) @ population
    assert np.mean(q > q_limit_box(t1, t2, 0.95)) == pytest.approx(0.05, abs=0.005)
    assert np.mean(q > q_limit_box(t1, t2, 0.99)) == pytest.approx(0.01, abs=0.002)
    assert q_limit_box(0.0, 0.0, 0.95) == 0.0
    with pytest.raises(OrdinateError, match="theta2"):
        q_limit_box(1.0, 0.0, 0.95)


def test_q_limit_is_zero_when_model_keeps_the_full_rank():
    # Rank-2 data in 4 variables: with 2 components the residual is roundoff.
    rng = np.random.default_rng(3)
    X = rng.standard_normal((40, 2)) @ rng.standard_normal((2, 4))
    Xc, lam, P = _fit_pca(X)
    total = float(np.trace(np.cov(Xc, rowvar=False)))
    q = q_residuals(Xc, Xc @ P[:, :2], P[:, :2])
    assert np.max(q) < 1e-20 * total * 40
    with np.errstate(all="raise"):
        assert q_limit(lam[2:], 0.95, total_variance=total) == 0.0
        # Without a scale the limit is roundoff-sized, finite and not negative.
        roundoff_limit = q_limit(lam[2:], 0.95)
    assert 0.0 <= roundoff_limit < 1e-12 * total
    assert q_limit(np.array([]), 0.95) == 0.0
    assert q_limit_from_moments(0.0, 0.0, 0.0, 0.95) == 0.0


def test_q_limit_is_proportional_to_the_residual_scale():
    # Q limit of c·λ is c times the limit of λ (all three θ scale consistently).
    residual = np.array([1.0, 0.8, 0.6, 0.5])
    assert q_limit(1e-150 * residual, 0.95) == pytest.approx(1e-150 * q_limit(residual, 0.95), rel=1e-12)


def test_q_limit_rejects_bad_arguments():
    with pytest.raises(OrdinateError, match="between 0 and 1"):
        q_limit(np.array([1.0]), 1.5)
    with pytest.raises(OrdinateError, match="negative"):
        q_limit(np.array([1.0, -0.5]), 0.95, total_variance=4.0)
    with pytest.raises(OrdinateError, match="theta2"):
        q_limit_from_moments(1.0, 0.0, 1.0, 0.95)
    with pytest.raises(OrdinateError, match="theta1"):
        q_limit_from_moments(-1.0, 1.0, 1.0, 0.95)


# --------------------------------------------------------------------------
# contributions (Westerhuis, Gurden & Smilde 2000)
# --------------------------------------------------------------------------

def test_t2_contributions_sum_to_t2(iris_model):
    Xc, lam, P = iris_model
    k = 2
    T = Xc @ P[:, :k]
    t2 = hotelling_t2(T, lam[:k])
    for i in (0, 41, 106, 149):
        c = t2_contributions(Xc[i], P[:, :k], lam[:k])
        assert c.shape == (4,)
        assert c.sum() == pytest.approx(t2[i], rel=1e-12)
        # Written out again: c_j = x_j Σ_a (t_a/λ_a) p_ja
        expected = np.array(
            [Xc[i, j] * sum(T[i, a] / lam[a] * P[j, a] for a in range(k)) for j in range(4)]
        )
        np.testing.assert_allclose(c, expected, rtol=1e-12, atol=1e-15)


def test_q_contributions_sum_to_q_and_keep_signs(iris_model):
    Xc, _, P = iris_model
    k = 2
    q = q_residuals(Xc, Xc @ P[:, :k], P[:, :k])
    for i in (0, 41, 106, 149):
        e = q_residual_row(Xc[i], P[:, :k])
        np.testing.assert_allclose(q_contributions(Xc[i], P[:, :k]), e**2, rtol=1e-12)
        assert np.sum(e**2) == pytest.approx(q[i], rel=1e-10)
        # The residual is orthogonal to the model plane (projection property).
        np.testing.assert_allclose(P[:, :k].T @ e, 0.0, atol=1e-12)
    residuals = np.array([q_residual_row(x, P[:, :k]) for x in Xc])
    assert np.any(residuals < 0) and np.any(residuals > 0)


def test_contributions_reject_mismatched_shapes(iris_model):
    Xc, lam, P = iris_model
    with pytest.raises(OrdinateError, match="variable"):
        q_residual_row(Xc[0, :3], P[:, :2])
    with pytest.raises(OrdinateError, match="eigenvalue"):
        t2_contributions(Xc[0], P[:, :2], lam[:3])
