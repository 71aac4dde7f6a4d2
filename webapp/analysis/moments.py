"""Column moments of a long table, accumulated part by part and merged pairwise.

For one block of rows X_b (n_b x p) :func:`block_moments` gives the count
n_b, the column means m_b, the centred cross-product
M_b = (X_b - 1m_bᵀ)ᵀ(X_b - 1m_bᵀ) (the rows are centred block by block before
the product, so large offsets cost no digits), and the column minima and
maxima. Two blocks merge exactly (:func:`merge_moments`) by the update of
Chan, Golub & LeVeque (1983)::

    n = n_a + n_b,      δ = m_b - m_a,
    m = m_a + δ n_b / n,
    M = M_a + M_b + δδᵀ n_a n_b / n.

Only differences of means enter the update, never the raw sums of squares, so
data near 1e6 that vary in the third decimal keep their digits, where
``XᵀX - n x̄x̄ᵀ`` loses all of them. :func:`merge_all` merges a list of blocks
as a balanced binary tree, so rounding grows with the logarithm of the number
of blocks rather than with it.

The differences of means δ are the weak point when the means are large
(values near 1e6 vary in the third decimal): a float64 mean near 1e6 carries
an absolute error near 1e-10, which δ then carries relative to its own small
size. So every block first subtracts one common shift ``s`` (the first row of
the data, known before the pass: Chan, Golub & LeVeque 1983, section 4,
"shifted data"); the moments are those of X - s and the mean of X is s + m.

The covariance of the whole table is ``M / (n - 1)``; its diagonal gives the
standard deviations for scaling, the minima and maxima the ranges.

Reference: Chan, T. F., Golub, G. H. & LeVeque, R. J. (1983). Algorithms for
computing the sample variance: analysis and recommendations. *The American
Statistician* 37(3), 242-247.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from webapp.analysis.errors import OrdinateError
from webapp.analysis.pca import centred_cross_product


@dataclass(frozen=True, eq=False)
class Moments:
    """Count, means, centred cross-product, minima and maxima of a block of rows."""

    count: int
    mean: np.ndarray  # (p,) of the shifted values X - shift
    cross: np.ndarray  # (p, p): sum over rows of (x - mean)(x - mean)ᵀ
    minimum: np.ndarray  # (p,), +inf for an empty block
    maximum: np.ndarray  # (p,), -inf for an empty block
    shift: np.ndarray | None = None  # (p,) subtracted before the means; None: zero

    @property
    def column_means(self) -> np.ndarray:
        """Means of the original values: shift + mean of the shifted values."""
        return self.mean if self.shift is None else self.shift + self.mean

    @property
    def n_variables(self) -> int:
        return self.mean.shape[0]

    @property
    def covariance(self) -> np.ndarray:
        """``cross / (n - 1)``, the sample covariance (n - 1 denominator)."""
        if self.count < 2:
            raise OrdinateError(f"A covariance needs at least 2 samples; there are {self.count}.")
        return self.cross / (self.count - 1)

    @property
    def std(self) -> np.ndarray:
        """Column standard deviations, ddof = 1."""
        return np.sqrt(np.clip(np.diagonal(self.covariance), 0.0, None))


def empty_moments(n_variables: int, shift: np.ndarray | None = None) -> Moments:
    p = int(n_variables)
    return Moments(0, np.zeros(p), np.zeros((p, p)), np.full(p, np.inf), np.full(p, -np.inf), shift)


def block_moments(X: np.ndarray, shift: np.ndarray | None = None) -> Moments:
    """Moments of one block of rows (n_b x p, finite values; n_b may be 0).

    ``shift`` (p,) is subtracted from every row first; blocks to be merged
    must share it (see the module's note on shifted data).
    """
    X = np.asarray(X, dtype=float)
    if X.ndim != 2:
        raise OrdinateError("Moments need a table of samples (rows) by variables (columns).")
    n, p = X.shape
    if shift is not None:
        shift = np.asarray(shift, dtype=float)
    if n == 0:
        return empty_moments(p, shift)
    shifted = X if shift is None else X - shift
    mean = shifted.mean(axis=0)
    return Moments(n, mean, centred_cross_product(shifted, mean), X.min(axis=0), X.max(axis=0), shift)


#: A block whose mean lies within this many standard deviations of the shift gets its
#: cross-product from the shifted rows directly (see :func:`block_moments_in_place`).
SHIFTED_PRODUCT_LIMIT = 4.0


def column_extremes(X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Minimum and maximum of each column (NaN where a column holds a NaN).

    Column by column: the second reduction reads a column that the first just
    brought into the cache, so a column-ordered block is read from memory once.
    """
    p = X.shape[1]
    minimum, maximum = np.empty(p), np.empty(p)
    for j in range(p):
        column = X[:, j]
        minimum[j], maximum[j] = np.minimum.reduce(column), np.maximum.reduce(column)
    return minimum, maximum


def block_moments_in_place(X: np.ndarray, shift: np.ndarray | None = None,
                           extremes: tuple[np.ndarray, np.ndarray] | None = None) -> Moments:
    """:func:`block_moments` of a private float64 block, which it overwrites (for speed).

    With y = x - s (s the common shift, subtracted in place) and m the block's
    mean of y, the centred cross-product is Σ yyᵀ - n·mmᵀ: one symmetric BLAS
    product (``syrk``) of the block, with no centred copy. Its rounding error
    relative to the result grows like 1 + m_j²/σ_j² (σ_j the block's standard
    deviation): with the shift within ``SHIFTED_PRODUCT_LIMIT`` standard
    deviations of every column's mean that is at most 17 units in the last
    place; otherwise (a shift far from this block's mean, a constant column)
    the block is centred exactly and the product taken again (Chan, Golub &
    LeVeque 1983, section 4, on shifted data).

    ``extremes`` (the columns' minima and maxima, when the caller already has
    them) saves two reductions. The minima, maxima, shift and sums are taken
    column by column, each column once from memory (a column-ordered block
    makes each column contiguous); only the product reads the whole block again.
    """
    if X.ndim != 2 or X.dtype != np.float64:
        raise OrdinateError("Moments need a float64 table of samples (rows) by variables (columns).")
    n, p = X.shape
    if shift is not None:
        shift = np.asarray(shift, dtype=float)
    if n == 0:
        return empty_moments(p, shift)
    minimum, maximum = (np.empty(p), np.empty(p)) if extremes is None else (extremes[0].copy(), extremes[1].copy())
    sums = np.empty(p)
    for j in range(p):
        column = X[:, j]
        if extremes is None:
            minimum[j], maximum[j] = np.minimum.reduce(column), np.maximum.reduce(column)
        if shift is not None:
            np.subtract(column, shift[j], out=column)
        sums[j] = np.add.reduce(column)
    mean = sums / n
    cross = X.T @ X
    cross -= n * np.outer(mean, mean)
    variance = np.diag(cross) / n
    if not np.all(mean * mean <= SHIFTED_PRODUCT_LIMIT ** 2 * variance):
        X -= mean
        cross = X.T @ X
    return Moments(n, mean, cross, minimum, maximum, shift)


def merge_moments(a: Moments, b: Moments) -> Moments:
    """The moments of the rows of ``a`` and ``b`` together (Chan, Golub & LeVeque 1983)."""
    if a.n_variables != b.n_variables:
        raise OrdinateError(
            f"Cannot merge moments of {a.n_variables} and {b.n_variables} variables; the parts differ in columns."
        )
    if not _same_shift(a.shift, b.shift):
        raise OrdinateError("Cannot merge moments computed with different shifts.")
    if b.count == 0:
        return a
    if a.count == 0:
        return b
    n = a.count + b.count
    delta = b.mean - a.mean
    mean = a.mean + delta * (b.count / n)
    cross = a.cross + b.cross
    cross += np.outer(delta, delta) * (a.count * b.count / n)
    return Moments(n, mean, cross, np.minimum(a.minimum, b.minimum), np.maximum(a.maximum, b.maximum), a.shift)


def merge_all(parts: Sequence[Moments]) -> Moments:
    """Merge blocks pairwise, as a balanced tree (the order of rows does not matter)."""
    level = list(parts)
    if not level:
        raise OrdinateError("There are no rows to compute moments from.")
    while len(level) > 1:
        pairs = [merge_moments(level[i], level[i + 1]) for i in range(0, len(level) - 1, 2)]
        level = pairs + ([level[-1]] if len(level) % 2 else [])
    return level[0]


def _same_shift(a: np.ndarray | None, b: np.ndarray | None) -> bool:
    if a is None or b is None:
        return a is None and b is None
    return a.shape == b.shape and bool(np.array_equal(a, b))
