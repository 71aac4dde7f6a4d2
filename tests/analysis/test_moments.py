"""Pairwise merge of per-block moments (Chan, Golub & LeVeque 1983, The American
Statistician 37(3):242-247), checked against numpy on the concatenated rows.

The reference is the two-pass formula (mean first, then the product of the
centred rows) computed by numpy in extended precision (``np.longdouble``) on all
rows at once; nothing here comes from the project's own code.
"""

import numpy as np
import pytest

from webapp.analysis.errors import OrdinateError
from webapp.analysis.moments import block_moments, empty_moments, merge_all, merge_moments


def _reference(X):
    wide = X.astype(np.longdouble)
    mean = wide.mean(axis=0)
    centred = wide - mean
    return mean, centred.T @ centred


def _blocks(X, sizes):
    edges = np.cumsum([0, *sizes])
    assert edges[-1] == X.shape[0]
    return [X[a:b] for a, b in zip(edges[:-1], edges[1:])]


def _relative(a, b):
    return float(np.max(np.abs(np.asarray(a, float) - np.asarray(b, float))) / np.max(np.abs(np.asarray(b, float))))


def test_merged_moments_equal_numpy_on_all_rows():
    rng = np.random.default_rng(1)
    X = rng.standard_normal((1000, 6)) @ rng.standard_normal((6, 6)) + rng.normal(0, 5, 6)
    merged = merge_all([block_moments(b) for b in _blocks(X, [1, 99, 250, 0, 400, 250])])
    mean, cross = _reference(X)
    assert merged.count == 1000
    assert _relative(merged.mean, mean) < 1e-12
    assert _relative(merged.cross, cross) < 1e-12
    np.testing.assert_array_equal(merged.minimum, X.min(axis=0))
    np.testing.assert_array_equal(merged.maximum, X.max(axis=0))
    # The covariance is numpy's (n - 1 denominator).
    np.testing.assert_allclose(merged.covariance, np.cov(X, rowvar=False), rtol=1e-12)


def test_huge_offsets_keep_their_digits_where_the_raw_sums_lose_them():
    # Values near 1e6 that vary in the third decimal: the trap of XᵀX - n x̄x̄ᵀ.
    rng = np.random.default_rng(2)
    X = 1e6 + np.round(rng.standard_normal((4000, 4)) @ rng.standard_normal((4, 4)) * 1e-3, 6)
    shift = X[0]  # the engine's common shift: the first row (Chan et al. 1983, section 4)
    parts = [block_moments(b, shift) for b in _blocks(X, [1000, 700, 1300, 1000])]
    merged = merge_all(parts)
    mean, cross = _reference(X)
    assert _relative(merged.column_means, mean) < 1e-10
    assert _relative(merged.cross, cross) < 1e-10
    # The check can fail: the textbook one-pass formula is off by orders of magnitude here.
    naive = X.T @ X - X.shape[0] * np.outer(X.mean(axis=0), X.mean(axis=0))
    assert _relative(naive, cross) > 1e-3
    # Merging in another order gives the same result.
    again = merge_moments(merge_moments(parts[3], parts[0]), merge_moments(parts[2], parts[1]))
    assert _relative(again.cross, cross) < 1e-10
    # Without the shift, the differences of means near 1e6 carry float64's ~1e-10 absolute error.
    unshifted = merge_all([block_moments(b) for b in _blocks(X, [1000, 700, 1300, 1000])])
    assert _relative(unshifted.cross, cross) > 1e-10


def test_empty_blocks_change_nothing_and_mismatched_columns_are_refused():
    X = np.arange(12.0).reshape(4, 3) ** 1.5
    one = block_moments(X)
    same = merge_moments(empty_moments(3), merge_moments(one, block_moments(X[:0])))
    np.testing.assert_array_equal(same.cross, one.cross)
    assert same.count == 4
    with pytest.raises(OrdinateError, match="3 and 2 variables"):
        merge_moments(one, block_moments(X[:, :2]))
    with pytest.raises(OrdinateError, match="different shifts"):
        merge_moments(one, block_moments(X, X[0]))
    with pytest.raises(OrdinateError, match="no rows"):
        merge_all([])


@pytest.mark.parametrize("shift_kind", ["near the mean", "far from the mean", "none"])
def test_moments_in_place_match_the_two_pass_formula(shift_kind):
    # Reference: the two-pass formula in extended precision (above). Offsets near 1e6 that vary in the
    # third decimal, one constant column; "far" puts the shift 1e4 standard deviations away (the exact
    # re-centring path), "none" leaves the offsets to the guard.
    from webapp.analysis.moments import block_moments_in_place

    rng = np.random.default_rng(5)
    X = rng.standard_normal((3000, 6)) * np.array([1e-3, 1.0, 5.0, 0.1, 2.0, 1.0]) + 1e6
    X[:, 5] = 7.0
    shift = {"near the mean": X[:50].mean(axis=0), "far from the mean": X[0] + 10.0, "none": None}[shift_kind]
    mean, cross = _reference(X)
    moments = block_moments_in_place(X.copy(), shift)
    assert moments.count == 3000
    np.testing.assert_allclose(moments.column_means, np.asarray(mean, float), rtol=1e-14)
    assert _relative(moments.cross, cross) < 1e-10
    np.testing.assert_allclose(np.diag(moments.cross), np.diag(np.asarray(cross, float)), rtol=1e-8, atol=1e-12)
    np.testing.assert_array_equal(moments.minimum, X.min(axis=0))
    merged = merge_moments(block_moments_in_place(X[:1000].copy(), shift), block_moments_in_place(X[1000:].copy(), shift))
    assert _relative(merged.cross, cross) < 1e-10
