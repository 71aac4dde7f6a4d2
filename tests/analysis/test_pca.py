"""PCA engine checked against outside references.

References used here:
* scikit-learn's PCA and numpy/scipy linear algebra (general-purpose libraries);
* Fisher's iris data as shipped with scikit-learn (published eigenvalues quoted
  from memory, then confirmed against scikit-learn in the same test);
* closed forms computed by hand (2 x 2 covariance eigenvalues; the
  total-least-squares line).
"""

import numpy as np
import pytest
from sklearn.datasets import load_iris
from sklearn.decomposition import PCA

from webapp.analysis.errors import OrdinateError
from webapp.analysis.pca import apply_sign_rule, fit_pca, project


def _sign_aligned(reference, candidate):
    """Flip candidate columns to match the reference's signs (signs are arbitrary)."""
    signs = np.sign(np.sum(reference * candidate, axis=0))
    return candidate * signs


def _autoscale(X):
    return (X - X.mean(axis=0)) / X.std(axis=0, ddof=1)


# --- Fisher's iris (shipped with scikit-learn) -------------------------------------


def test_iris_correlation_eigenvalues_match_published_values():
    # Widely published correlation-matrix eigenvalues of iris: 2.9185, 0.9140,
    # 0.1468, 0.0207 (72.96 %, 22.85 %, 3.67 %, 0.52 %). Quoted from memory;
    # scikit-learn's PCA is the second, independent check.
    X = _autoscale(load_iris().data)
    fit = fit_pca(X)
    np.testing.assert_allclose(fit.eigenvalues, [2.9185, 0.9140, 0.1468, 0.0207], atol=2e-4)
    np.testing.assert_allclose(fit.explained_variance_ratio * 100, [72.96, 22.85, 3.67, 0.52], atol=0.01)
    sk = PCA().fit(X)
    np.testing.assert_allclose(fit.eigenvalues, sk.explained_variance_, rtol=1e-10)


def test_iris_covariance_pc1_share():
    # Covariance-matrix PCA of iris: PC1 explains 92.46 % (widely published, from memory).
    fit = fit_pca(load_iris().data, centre=True)
    assert fit.explained_variance_ratio[0] * 100 == pytest.approx(92.46, abs=0.01)
    assert fit.total_variance == pytest.approx(np.trace(np.cov(load_iris().data.T)), rel=1e-12)


# --- agreement with scikit-learn on random tall, wide and rank-deficient data ------------


def _random_data(kind, rng):
    if kind == "tall":
        return rng.standard_normal((500, 12)) @ rng.standard_normal((12, 12))
    if kind == "wide":
        return rng.standard_normal((40, 300))
    if kind == "rank_deficient":
        return rng.standard_normal((200, 4)) @ rng.standard_normal((4, 15))
    raise AssertionError(kind)


@pytest.mark.parametrize("kind", ["tall", "wide", "rank_deficient"])
@pytest.mark.parametrize("solver", ["auto", "covariance", "gram"])
def test_agrees_with_scikit_learn(kind, solver):
    rng = np.random.default_rng(7)
    X = _random_data(kind, rng)
    X = X - X.mean(axis=0)
    fit = fit_pca(X, solver=solver)
    sk = PCA(svd_solver="full").fit(X)
    k = fit.rank
    assert k == np.linalg.matrix_rank(X)
    np.testing.assert_allclose(fit.eigenvalues[:k], sk.explained_variance_[:k], rtol=1e-10)
    np.testing.assert_allclose(fit.total_variance, np.var(X, axis=0, ddof=1).sum(), rtol=1e-12)
    loadings = _sign_aligned(fit.loadings[:, :k], sk.components_[:k].T)
    np.testing.assert_allclose(fit.loadings[:, :k], loadings, atol=1e-8)
    scores = _sign_aligned(fit.scores[:, :k], sk.transform(X)[:, :k])
    np.testing.assert_allclose(fit.scores[:, :k], scores, atol=1e-8 * np.abs(scores).max())
    np.testing.assert_allclose(fit.singular_values[:k], sk.singular_values_[:k], rtol=1e-10)


def test_partial_solver_agrees_with_full_eigendecomposition():
    rng = np.random.default_rng(3)
    X = rng.standard_normal((120, 900)) * np.linspace(3, 0.5, 900)
    X -= X.mean(axis=0)
    full = fit_pca(X, solver="gram")
    partial = fit_pca(X, n_components=10, solver="partial")
    assert partial.solver == "partial" and not partial.complete_spectrum
    np.testing.assert_allclose(partial.eigenvalues[:10], full.eigenvalues[:10], rtol=1e-10)
    np.testing.assert_allclose(partial.loadings, full.loadings[:, :10], atol=1e-8)
    # Explained ratios use the trace, so they are exact without every eigenvalue.
    np.testing.assert_allclose(partial.explained_variance_ratio[:10], full.explained_variance_ratio[:10], rtol=1e-10)
    np.testing.assert_allclose(partial.sum_squared_eigenvalues, np.sum(full.eigenvalues**2), rtol=1e-10)


def test_solver_is_chosen_by_shape_and_recorded():
    rng = np.random.default_rng(0)
    assert fit_pca(rng.standard_normal((50, 5))).solver == "covariance"
    assert fit_pca(rng.standard_normal((5, 50))).solver == "gram"


def test_identities_unit_loadings_and_reconstruction():
    rng = np.random.default_rng(11)
    X = rng.standard_normal((60, 8))
    X -= X.mean(axis=0)
    fit = fit_pca(X)
    np.testing.assert_allclose(fit.loadings.T @ fit.loadings, np.eye(8), atol=1e-12)
    np.testing.assert_allclose(fit.scores @ fit.loadings.T, X, atol=1e-12)
    assert fit.explained_variance_ratio.sum() == pytest.approx(1.0, abs=1e-12)
    # Score variances are the eigenvalues (n - 1 denominator).
    np.testing.assert_allclose(fit.scores.var(axis=0, ddof=1), fit.eigenvalues, rtol=1e-10)


# --- sign convention ---------------------------------------------------------------


def test_sign_rule_makes_largest_loading_positive_on_every_solver():
    rng = np.random.default_rng(5)
    X = rng.standard_normal((30, 6))
    X -= X.mean(axis=0)
    for solver in ("covariance", "gram"):
        fit = fit_pca(X, solver=solver)
        largest = fit.loadings[np.argmax(np.abs(fit.loadings), axis=0), np.arange(fit.n_components)]
        assert (largest > 0).all()
    # Same data with columns negated: loadings flip with the data, picture stays consistent.
    flipped = fit_pca(-X)
    np.testing.assert_allclose(np.abs(flipped.loadings), np.abs(fit_pca(X).loadings), atol=1e-10)


def test_apply_sign_rule_flips_scores_with_loadings():
    loadings = np.array([[0.6, -0.8], [-0.8, -0.6]])
    scores = np.array([[1.0, 2.0]])
    signs = apply_sign_rule(loadings, scores)
    np.testing.assert_array_equal(signs, [-1, -1])
    np.testing.assert_array_equal(loadings, [[-0.6, 0.8], [0.8, 0.6]])
    np.testing.assert_array_equal(scores, [[-1.0, -2.0]])


# --- hand-computed closed forms ---------------------------------------------------------


def test_two_correlated_gaussians_pc1_share():
    # sd 2 and 1, correlation 0.5: covariance [[4, 1], [1, 1]]; eigenvalues
    # (5 ± sqrt(13)) / 2, so PC1 explains (5 + sqrt(13)) / 10 = 86.06 % (by hand).
    exact = (5 + np.sqrt(13)) / 10
    assert exact * 100 == pytest.approx(86.06, abs=0.005)
    cov = np.array([[4.0, 1.0], [1.0, 1.0]])
    X = np.random.default_rng(2026).multivariate_normal([0, 0], cov, size=2000)
    fit = fit_pca(X, centre=True)
    assert fit.explained_variance_ratio[0] == pytest.approx(exact, abs=0.015)


def test_first_axis_turns_towards_larger_variance_as_correlation_drops():
    angles = []
    for rho in (0.9, 0.5, 0.2, 0.0):
        cov = np.array([[4.0, 2 * rho], [2 * rho, 1.0]])
        _, vectors = np.linalg.eigh(cov)
        exact_angle = np.degrees(np.arctan2(abs(vectors[1, -1]), abs(vectors[0, -1])))
        X = np.random.default_rng(1).multivariate_normal([0, 0], cov, size=2000)
        p1 = fit_pca(X, centre=True).loadings[:, 0]
        angle = np.degrees(np.arctan2(abs(p1[1]), abs(p1[0])))
        assert angle == pytest.approx(exact_angle, abs=4)
        angles.append(angle)
    assert angles == sorted(angles, reverse=True)
    assert angles[-1] < 4  # with no correlation PC1 lies along the variable with sd 2


def test_pc1_is_total_least_squares_line_not_ordinary_least_squares():
    rng = np.random.default_rng(9)
    x = rng.normal(0, 2, 400)
    y = 0.7 * x + rng.normal(0, 1, 400)
    fit = fit_pca(np.column_stack([x, y]), centre=True)
    slope_pc1 = fit.loadings[1, 0] / fit.loadings[0, 0]
    # Total least squares (orthogonal regression) closed form:
    # slope = (syy - sxx + sqrt((syy - sxx)^2 + 4 sxy^2)) / (2 sxy).
    sxx, syy, sxy = np.var(x, ddof=1), np.var(y, ddof=1), np.cov(x, y)[0, 1]
    slope_tls = (syy - sxx + np.sqrt((syy - sxx) ** 2 + 4 * sxy**2)) / (2 * sxy)
    slope_ols = sxy / sxx
    assert slope_pc1 == pytest.approx(slope_tls, rel=1e-10)
    assert abs(slope_pc1 - slope_ols) > 0.05


def test_large_offsets_keep_accurate_eigenvalues():
    # Values near 1e6 varying in the third decimal: X^T X - n·mean·meanᵀ would
    # lose every significant digit; the engine centres first.
    rng = np.random.default_rng(4)
    small = rng.standard_normal((5000, 3)) @ np.array([[1e-3, 0, 0], [5e-4, 2e-4, 0], [0, 0, 1e-4]])
    X = 1e6 + small
    fit = fit_pca(X, centre=True)
    reference = np.linalg.eigvalsh(np.cov(small.T))[::-1]
    np.testing.assert_allclose(fit.eigenvalues, reference, rtol=1e-6)


def test_project_uses_loadings():
    rng = np.random.default_rng(8)
    X = rng.standard_normal((40, 5))
    X -= X.mean(axis=0)
    fit = fit_pca(X)
    np.testing.assert_allclose(project(X[:3], fit.loadings), fit.scores[:3], atol=1e-12)


def test_rejects_missing_values_and_bad_component_counts():
    X = np.ones((5, 3))
    X[0, 0] = np.nan
    with pytest.raises(OrdinateError, match="missing"):
        fit_pca(X)
    with pytest.raises(OrdinateError, match="between 1 and 3"):
        fit_pca(np.random.default_rng(0).standard_normal((5, 3)), n_components=4)
