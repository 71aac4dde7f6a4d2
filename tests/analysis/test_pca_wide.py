"""PCA of wide spectra-shaped data (p >> n) against scikit-learn, and its memory.

Reference: scikit-learn's PCA with the full LAPACK SVD. Data: seeded
low-rank signals (20 components of clearly separated strength) plus noise,
so the leading loadings are well determined.
"""

import tracemalloc

import numpy as np
import pytest
from sklearn.decomposition import PCA

from webapp.analysis.pca import fit_pca

K = 20


def _wide(n, p, seed):
    rng = np.random.default_rng(seed)
    strengths = np.geomspace(40, 4, K)
    X = (rng.standard_normal((n, K)) * strengths) @ rng.standard_normal((K, p)) / np.sqrt(p)
    X += 0.05 * rng.standard_normal((n, p))
    return X - X.mean(axis=0)


@pytest.fixture(scope="module")
def reference():
    """Data and scikit-learn's fit per shape, computed once."""
    cache = {}

    def get(n, p):
        if (n, p) not in cache:
            X = _wide(n, p, seed=n)
            cache[n, p] = X, PCA(n_components=K, svd_solver="full").fit(X)
        return cache[n, p]

    return get


def _aligned(ours, theirs):
    return theirs * np.sign(np.sum(ours * theirs, axis=0))


@pytest.mark.parametrize("n, p", [(50, 20_000), (500, 8_000)])
@pytest.mark.parametrize("components", [None, K])  # every component (Gram) / leading ones (Lanczos)
def test_wide_pca_matches_scikit_learn(reference, n, p, components):
    X, sk = reference(n, p)
    fit = fit_pca(X, n_components=components)
    assert fit.solver == ("gram" if components is None else "partial")
    np.testing.assert_allclose(fit.eigenvalues[:K], sk.explained_variance_, rtol=1e-8)
    np.testing.assert_allclose(fit.explained_variance_ratio[:K], sk.explained_variance_ratio_, rtol=1e-8)
    loadings = fit.loadings[:, :K]
    np.testing.assert_allclose(loadings, _aligned(loadings, sk.components_.T), atol=1e-8)
    scores = fit.scores[:, :K]
    np.testing.assert_allclose(scores, _aligned(scores, sk.transform(X)), atol=1e-8 * np.abs(scores).max())


@pytest.mark.parametrize("n, p", [(50, 20_000), (500, 8_000)])
def test_wide_pca_never_forms_a_p_by_p_matrix(n, p):
    # A p x p float64 matrix would need 8 p² bytes (3.2 GB at p = 20 000, 512 MB at
    # 8 000); the Gram route needs a few copies of X (n p) and n x n. numpy reports
    # its allocations to tracemalloc.
    X = _wide(n, p, seed=1)
    tracemalloc.start()
    try:
        fit_pca(X)
        fit_pca(X, n_components=K)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 8 * p * p / 4
    assert peak < 6 * X.nbytes + 8 * n * n * 4
