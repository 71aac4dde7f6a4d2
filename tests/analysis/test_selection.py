"""Tests for webapp.analysis.selection.

References checked against:
* iris (scikit-learn's ``load_iris``): the correlation-matrix eigenvalues
  2.9185, 0.9140, 0.1468, 0.0207 are widely published (quoted here from
  memory) and recomputed with numpy in the test;
* the closed form of the broken-stick expectation (Frontier 1976; Jolliffe
  2002), evaluated by hand for p = 4;
* scikit-learn's PCA ``explained_variance_`` (n - 1 denominator) as an
  independent eigenvalue solver for the permuted matrices;
* data built with a known number of latent factors (truth by construction).
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_iris
from sklearn.decomposition import PCA

from webapp.analysis.errors import OrdinateError
from webapp.analysis.selection import (
    ComponentAdvice,
    advise_components,
    broken_stick_count,
    broken_stick_expectation,
    cumulative_count,
    kaiser_count,
    parallel_analysis,
)


@pytest.fixture(scope="module")
def iris_correlation():
    X = load_iris().data
    eigenvalues = np.linalg.eigvalsh(np.corrcoef(X, rowvar=False))[::-1]
    return eigenvalues, eigenvalues / eigenvalues.sum()


def _autoscale(X: np.ndarray) -> np.ndarray:
    return (X - X.mean(axis=0)) / X.std(axis=0, ddof=1)


def _covariance_eigenvalues(X: np.ndarray) -> np.ndarray:
    return np.linalg.eigvalsh(np.cov(X, rowvar=False))[::-1]


@pytest.fixture(scope="module")
def three_factor_data() -> np.ndarray:
    # Truth by construction: 3 strong latent factors plus unit noise in 12 variables.
    rng = np.random.default_rng(1965)
    n, p = 300, 12
    factors = rng.standard_normal((n, 3))
    weights = np.zeros((3, p))
    weights[0, 0:5] = 1.5
    weights[1, 4:9] = 1.3
    weights[2, 8:12] = 1.2
    X = factors @ weights + rng.standard_normal((n, p))
    return _autoscale(X)


def test_iris_correlation_eigenvalues_match_published_values(iris_correlation):
    eigenvalues, _ = iris_correlation
    # Widely published values (from memory) for PCA of the iris correlation matrix.
    np.testing.assert_allclose(eigenvalues, [2.9185, 0.9140, 0.1468, 0.0207], atol=3e-4)


# --------------------------------------------------------------------------
# Kaiser
# --------------------------------------------------------------------------

def test_kaiser_on_iris_correlation_keeps_one(iris_correlation):
    eigenvalues, _ = iris_correlation
    assert kaiser_count(eigenvalues, total_variance=4.0, n_variables=4) == 1
    # Works when only the leading eigenvalues were computed: the mean is total / p.
    assert kaiser_count(eigenvalues[:2], total_variance=4.0, n_variables=4) == 1


def test_kaiser_on_iris_covariance_uses_mean_eigenvalue():
    # scikit-learn's PCA explained_variance_ on raw iris: 4.228, 0.243, 0.078, 0.024;
    # mean 1.143, so only the first is above it.
    pca = PCA().fit(load_iris().data)
    lam = pca.explained_variance_
    assert kaiser_count(lam, total_variance=float(lam.sum()), n_variables=4) == 1


def test_kaiser_threshold_is_total_over_p():
    # Only the leading eigenvalues are given; the mean eigenvalue is total / p.
    lam = np.array([3.0, 1.2, 0.5, 0.3])
    assert kaiser_count(lam, total_variance=5.0, n_variables=4) == 1  # mean 1.25
    assert kaiser_count(lam, total_variance=5.0, n_variables=5) == 2  # mean 1.0
    assert kaiser_count(lam, total_variance=5.0, n_variables=10) == 2  # mean 0.5, strictly above
    assert kaiser_count(lam, total_variance=5.0, n_variables=20) == 4  # mean 0.25


def test_kaiser_rejects_bad_input():
    with pytest.raises(OrdinateError, match="descending"):
        kaiser_count([1.0, 2.0], total_variance=3.0, n_variables=2)
    with pytest.raises(OrdinateError, match="more than the total"):
        kaiser_count([3.0, 2.0], total_variance=3.0, n_variables=2)
    with pytest.raises(OrdinateError, match="at most 2"):
        kaiser_count([1.0, 0.5, 0.2], total_variance=2.0, n_variables=2)


# --------------------------------------------------------------------------
# broken stick
# --------------------------------------------------------------------------

def test_broken_stick_expectation_for_four_variables():
    # b_k = (1/p) Σ_{i=k}^{p} 1/i, by hand for p = 4 (Frontier 1976; Jolliffe 2002):
    by_hand = [
        (1 + 1 / 2 + 1 / 3 + 1 / 4) / 4,
        (1 / 2 + 1 / 3 + 1 / 4) / 4,
        (1 / 3 + 1 / 4) / 4,
        (1 / 4) / 4,
    ]
    b = broken_stick_expectation(4)
    np.testing.assert_allclose(b, by_hand, rtol=1e-14)
    np.testing.assert_allclose(b, [0.5208, 0.2708, 0.1458, 0.0625], atol=5e-5)


@pytest.mark.parametrize("p", [1, 2, 7, 50])
def test_broken_stick_pieces_add_up_to_the_whole_stick(p):
    b = broken_stick_expectation(p)
    assert b.shape == (p,)
    assert b.sum() == pytest.approx(1.0, rel=1e-12)
    assert np.all(np.diff(b) < 0)


def test_broken_stick_count_on_iris(iris_correlation):
    _, ratio = iris_correlation
    # 0.7296 > 0.5208 but 0.2285 < 0.2708: one component.
    assert ratio[0] == pytest.approx(0.7296, abs=1e-4)
    assert ratio[1] == pytest.approx(0.2285, abs=1e-4)
    assert broken_stick_count(ratio, 4) == 1


def test_broken_stick_count_stops_at_first_failure():
    # b for p = 4 is [0.5208, 0.2708, 0.1458, 0.0625]; PC3 passes but PC2 fails.
    assert broken_stick_count([0.55, 0.20, 0.16, 0.09], 4) == 1
    assert broken_stick_count([0.55, 0.30, 0.15], 4) == 3


# --------------------------------------------------------------------------
# cumulative threshold
# --------------------------------------------------------------------------

def test_cumulative_count_on_iris(iris_correlation):
    _, ratio = iris_correlation
    # cumulative ratios 0.7296, 0.9581, 0.9948, 1.0
    assert cumulative_count(ratio) == 2
    assert cumulative_count(ratio, 0.70) == 1
    assert cumulative_count(ratio, 0.99) == 3
    assert cumulative_count(ratio, 0.999) == 4


def test_cumulative_count_at_exact_threshold_and_when_not_reached():
    assert cumulative_count([0.5, 0.3, 0.2], 0.8) == 2  # 0.5 + 0.3 is a hair below 0.8 in binary
    assert cumulative_count([0.5, 0.2], 0.8) == 2  # not reached: number given
    with pytest.raises(OrdinateError, match="between 0 and 1"):
        cumulative_count([0.5, 0.2], 80)


# --------------------------------------------------------------------------
# parallel analysis
# --------------------------------------------------------------------------

def test_parallel_analysis_is_reproducible_with_a_seed(three_factor_data):
    first = parallel_analysis(three_factor_data, n_permutations=40, seed=7)
    again = parallel_analysis(three_factor_data, n_permutations=40, seed=7)
    other = parallel_analysis(three_factor_data, n_permutations=40, seed=8)
    np.testing.assert_array_equal(first, again)
    assert not np.array_equal(first, other)
    np.testing.assert_allclose(first, other, rtol=0.05)
    assert first.shape == (12,)


def test_parallel_analysis_permutes_columns_and_matches_sklearn_eigenvalues(three_factor_data):
    # Same seed, same permutations: thresholds from the default solver must equal
    # those computed with scikit-learn's PCA on the very same permuted matrices.
    X = three_factor_data
    recorded: list[np.ndarray] = []

    def sklearn_eigenvalues(permuted: np.ndarray, k: int) -> np.ndarray:
        recorded.append(permuted.copy())
        return PCA(n_components=k, svd_solver="full").fit(permuted).explained_variance_

    default = parallel_analysis(X, n_permutations=15, seed=3, n_components=5)
    via_sklearn = parallel_analysis(X, n_permutations=15, seed=3, n_components=5, eigen_fn=sklearn_eigenvalues)
    np.testing.assert_allclose(default, via_sklearn, rtol=1e-10)
    assert len(recorded) == 15
    for permuted in recorded:
        # Each column keeps its values (so mean and variance) ...
        np.testing.assert_allclose(np.sort(permuted, axis=0), np.sort(X, axis=0), atol=1e-12)
        # ... but the rows are shuffled column by column, destroying correlation.
        assert not np.allclose(permuted, X)
        off_diagonal = np.corrcoef(permuted, rowvar=False)[~np.eye(12, dtype=bool)]
        assert np.max(np.abs(off_diagonal)) < 0.3


def test_parallel_analysis_wide_data_uses_gram_matrix_correctly():
    # p > n and p > 500: the default solver takes the n x n Gram matrix; the
    # eigenvalues must still equal scikit-learn's covariance eigenvalues.
    rng = np.random.default_rng(12)
    X = rng.standard_normal((30, 600))
    X -= X.mean(axis=0)

    def sklearn_eigenvalues(permuted: np.ndarray, k: int) -> np.ndarray:
        return PCA(n_components=k, svd_solver="full").fit(permuted).explained_variance_

    default = parallel_analysis(X, n_permutations=5, seed=1, n_components=4)
    via_sklearn = parallel_analysis(X, n_permutations=5, seed=1, n_components=4, eigen_fn=sklearn_eigenvalues)
    np.testing.assert_allclose(default, via_sklearn, rtol=1e-9)


def test_parallel_analysis_recovers_three_latent_factors(three_factor_data):
    X = three_factor_data
    lam = _covariance_eigenvalues(X)
    advice = advise_components(lam, float(lam.sum()), 12, X=X, n_permutations=100, seed=0)
    assert isinstance(advice, ComponentAdvice)
    assert advice.parallel == 3
    assert advice.recommended == 3
    assert advice.rule == "parallel analysis (95th percentile, 100 permutations)"
    assert advice.parallel_threshold.shape == (12,)
    assert np.all(lam[:3] > advice.parallel_threshold[:3])
    assert lam[3] <= advice.parallel_threshold[3]


def test_parallel_analysis_on_pure_noise_keeps_at_most_one():
    rng = np.random.default_rng(42)
    X = _autoscale(rng.standard_normal((200, 10)))
    lam = _covariance_eigenvalues(X)
    advice = advise_components(lam, float(lam.sum()), 10, X=X, n_permutations=100, seed=0)
    assert advice.parallel is not None and advice.parallel <= 1
    assert advice.recommended == 1
    if advice.parallel == 0:
        assert "minimum of 1" in advice.rule


def test_parallel_analysis_rejects_bad_arguments(three_factor_data):
    X = three_factor_data
    with pytest.raises(OrdinateError, match="between 0 and 1"):
        parallel_analysis(X, quantile=1.0)
    with pytest.raises(OrdinateError, match="at most 12"):
        parallel_analysis(X, n_components=13)
    with pytest.raises(OrdinateError, match="at least 1"):
        parallel_analysis(X, n_permutations=0)
    bad = X.copy()
    bad[4, 2] = np.nan
    with pytest.raises(OrdinateError, match="row 4, column 2"):
        parallel_analysis(bad)


# --------------------------------------------------------------------------
# the combined advice
# --------------------------------------------------------------------------

def test_advice_without_data_uses_broken_stick(iris_correlation):
    eigenvalues, _ = iris_correlation
    advice = advise_components(eigenvalues, 4.0, 4)
    assert advice.parallel is None and advice.parallel_threshold is None
    assert advice.rule == "broken-stick model"
    assert advice.recommended == advice.broken_stick == 1
    assert advice.kaiser == 1
    assert advice.cumulative == 2 and advice.cumulative_reached
    np.testing.assert_allclose(advice.broken_stick_expectation, broken_stick_expectation(4), rtol=1e-14)


def test_advice_falls_back_to_kaiser_then_to_one():
    # Broken stick keeps nothing when PC1 is below b_1 = 0.5208 (p = 4) ...
    lam = np.array([2.0, 1.1, 0.6, 0.3])  # ratios 0.5, 0.275, 0.15, 0.075; mean 1.0
    advice = advise_components(lam, 4.0, 4)
    assert advice.broken_stick == 0
    assert advice.kaiser == 2
    assert advice.recommended == 2 and advice.rule.startswith("Kaiser")
    # ... and with equal eigenvalues no rule keeps anything: the minimum of 1.
    flat = advise_components(np.ones(4), 4.0, 4)
    assert flat.kaiser == 0 and flat.broken_stick == 0
    assert flat.recommended == 1 and "minimum of 1" in flat.rule


def test_advice_is_capped_at_the_number_of_eigenvalues_given(three_factor_data):
    X = three_factor_data
    lam = _covariance_eigenvalues(X)
    advice = advise_components(lam[:2], float(lam.sum()), 12, X=X, n_permutations=30)
    assert advice.parallel == 2 and advice.recommended == 2
    assert advice.parallel_threshold.shape == (2,)
    assert advice.broken_stick_expectation.shape == (2,)
    first_two = float(lam[:2].sum() / lam.sum())
    assert first_two < 0.80  # three factors of similar size: two do not reach 80 %
    assert not advice.cumulative_reached and advice.cumulative == 2


def test_advice_rejects_data_that_do_not_match_the_eigenvalues(iris_correlation):
    eigenvalues, _ = iris_correlation
    raw = load_iris().data  # not autoscaled: total variance 4.57, not 4
    with pytest.raises(OrdinateError, match="total variance of the data"):
        advise_components(eigenvalues, 4.0, 4, X=raw - raw.mean(axis=0))
    with pytest.raises(OrdinateError, match="column"):
        advise_components(eigenvalues, 4.0, 4, X=_autoscale(raw)[:, :3])
    # The autoscaled data are accepted.
    advice = advise_components(eigenvalues, 4.0, 4, X=_autoscale(raw), n_permutations=50)
    assert advice.parallel is not None and 1 <= advice.recommended <= 4


def test_parallel_analysis_eigenvalues_of_a_wide_matrix_come_from_the_small_gram_matrix():
    # Same non-zero eigenvalues of XᵀX and XXᵀ (common practice; any linear-algebra text); checked
    # against numpy's eigvalsh of the covariance, and no p x p product is formed when p > n.
    import numpy as np

    from webapp.analysis import selection

    rng = np.random.default_rng(3)
    X = rng.normal(size=(30, 400))
    X -= X.mean(axis=0)
    expected = np.sort(np.linalg.eigvalsh(X.T @ X / 29))[::-1][:5]
    shapes = []
    real_eigh = selection.scipy.linalg.eigh

    def spy(matrix, **kwargs):
        shapes.append(matrix.shape)
        return real_eigh(matrix, **kwargs)

    selection.scipy.linalg.eigh, saved = spy, real_eigh
    try:
        values = selection._default_eigenvalues(X, 5)
    finally:
        selection.scipy.linalg.eigh = saved
    np.testing.assert_allclose(values, expected, rtol=1e-10)
    assert shapes == [(30, 30)]
