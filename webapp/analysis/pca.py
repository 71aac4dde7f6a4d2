"""Principal component analysis of an already preprocessed matrix.

The matrix ``X`` (n samples x p variables) arrives centred and scaled by the
preprocessing recipe (:mod:`webapp.analysis.recipe`); this module does no
centring unless asked (``centre=True``), so that "no centring" in a recipe
really means an uncentred analysis.

Conventions, stated once and applied on every solver path:

* Eigenvalues are those of the covariance matrix ``C = XᵀX / (n - 1)``: the
  ``n - 1`` denominator that statistics packages and scikit-learn's
  ``explained_variance_`` use. ``total_variance`` is ``trace(C)``, so explained
  ratios are exact even when a solver computes only the leading eigenvalues.
* Loadings ``P`` (p x k) have unit-length columns; scores are ``T = X P``;
  singular values are ``s_a = sqrt((n - 1) λ_a)``.
* Sign rule: each component is flipped so that its loading of largest
  magnitude is positive (the first such variable wins a tie). Signs of
  eigenvectors are arbitrary and differ between solvers and library versions;
  one rule applied after every solver makes the same data and recipe give the
  same picture on every machine.

Solvers, chosen by shape (the resolved choice is recorded in the result):

``covariance``
    eigendecomposition of the p x p covariance; one pass over the data. Used
    when p <= n and p is at most a few thousand.
``gram``
    eigendecomposition of the n x n Gram matrix ``XXᵀ`` (wide data: n < p);
    loadings follow as ``P = XᵀU / s``.
``partial``
    as ``covariance`` or ``gram`` but only the leading components, found with
    the implicitly restarted Lanczos method (ARPACK, Lehoucq, Sorensen & Yang
    1998) when the smaller side is too large for a full eigendecomposition.
    The residual of every returned eigenpair is checked.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg
import scipy.sparse.linalg

from webapp.analysis.errors import OrdinateError

SOLVERS = ("auto", "covariance", "gram", "partial")
# Above this size of the smaller side, a full dense eigendecomposition costs
# tens of seconds on a 2-core machine (measured: 5 000 x 5 000 took ~20 s).
FULL_EIGH_LIMIT = 2_000
# Components kept with scores and loadings when only the leading ones are computed.
DEFAULT_PARTIAL_COMPONENTS = 100
# Means within this many standard deviations are removed after the products
# (one pass fewer); larger offsets are removed block by block before them.
SMALL_OFFSET = 10.0
# Rows are centred in blocks of about this size, small enough to stay in cache.
BLOCK_BYTES = 2 * 2**20


@dataclass(frozen=True, eq=False)
class PCAFit:
    """Result of :func:`fit_pca`. Arrays are read-only.

    Attributes
    ----------
    eigenvalues : (m,) covariance eigenvalues, descending, n - 1 denominator.
        All of them when ``complete_spectrum`` is true, else the leading m.
    total_variance : trace of the covariance matrix (sum of all eigenvalues).
    sum_squared_eigenvalues : trace of C², needed for residual statistics when
        the spectrum is incomplete.
    loadings : (p, k) unit-length columns, sign rule applied.
    scores : (n, k) ``X @ loadings``.
    singular_values : (m,) ``sqrt((n - 1) * eigenvalues)``.
    rank : numerical rank of X.
    solver : the solver actually used.
    """

    eigenvalues: np.ndarray
    total_variance: float
    sum_squared_eigenvalues: float
    loadings: np.ndarray
    scores: np.ndarray
    singular_values: np.ndarray
    n_samples: int
    n_variables: int
    rank: int
    solver: str
    complete_spectrum: bool

    @property
    def n_components(self) -> int:
        """Number of components with loadings and scores."""
        return self.loadings.shape[1]

    @property
    def explained_variance_ratio(self) -> np.ndarray:
        if self.total_variance <= 0:
            return np.zeros_like(self.eigenvalues)
        return self.eigenvalues / self.total_variance

    @property
    def cumulative_explained(self) -> np.ndarray:
        return np.cumsum(self.explained_variance_ratio)


def fit_pca(
    X: np.ndarray,
    n_components: int | None = None,
    *,
    centre: bool = False,
    solver: str = "auto",
) -> PCAFit:
    """Fit PCA to ``X`` (n x p, float) and return eigenvalues, loadings and scores.

    Parameters
    ----------
    X : preprocessed data; not modified. NaN or inf are rejected.
    n_components : components to keep with loadings and scores. ``None`` keeps
        all of them for the full solvers and the leading
        ``DEFAULT_PARTIAL_COMPONENTS`` for the partial solver.
    centre : subtract column means first (a convenience for callers that skip
        the recipe; the recipe normally centres). Centring is done block by
        block, before any cross-product, so large offsets cost no accuracy.
    solver : ``auto`` (by shape), ``covariance``, ``gram`` or ``partial``.
    """
    X = _validated_matrix(X)
    n, p = X.shape
    offset = X.mean(axis=0) if centre else None
    if offset is not None and not np.isfinite(offset).all():
        raise _not_finite_error()
    resolved = _resolve_solver(solver, n, p, n_components)
    limit = min(n, p)
    if n_components is not None:
        if not 1 <= int(n_components) <= limit:
            raise OrdinateError(
                f"The number of components must be between 1 and {limit} for "
                f"{n} samples and {p} variables; got {n_components}."
            )
        n_components = int(n_components)
    small_offset = offset is not None and _offsets_are_small(X, offset)
    if resolved == "covariance":
        spectrum = _covariance_eigh(X, offset, small_offset)
    else:
        # Wide data: the Gram matrix needs every row pair, so centre once.
        X = X - offset if offset is not None else X
        offset = None
        if resolved == "gram":
            spectrum = _gram_eigh(X)
        else:
            spectrum = _partial_eigh(X, n_components or min(DEFAULT_PARTIAL_COMPONENTS, limit - 1))
    return _assemble(X, offset, small_offset, spectrum, resolved, n_components)


def fit_pca_from_cross_product(cross: np.ndarray, n_samples: int, n_components: int | None = None) -> PCAFit:
    """PCA from the p x p cross-product ``XᵀX`` of the preprocessed data (n rows).

    For engines that never hold X as one matrix (the Dask engine accumulates
    ``XᵀX`` part by part, see :mod:`webapp.analysis.moments`). The same
    eigendecomposition, rank rule and sign rule as the ``covariance`` solver
    of :func:`fit_pca`; eigenvalues are those of ``XᵀX / (n - 1)``. The
    returned ``scores`` are empty (0 x k): compute them as ``X @ loadings``
    where the rows are.
    """
    cross = np.array(cross, dtype=float)  # a copy: eigh overwrites it
    p = cross.shape[0] if cross.ndim == 2 else 0
    if cross.ndim != 2 or cross.shape != (p, p) or p < 1:
        raise OrdinateError("The cross-product must be a square matrix of the variables.")
    n = int(n_samples)
    if n < 2:
        raise OrdinateError(f"PCA needs at least 2 samples; the data has {n}.")
    if p > FULL_EIGH_LIMIT:
        raise OrdinateError(
            f"This engine handles up to {FULL_EIGH_LIMIT} variables; the data has {p}. Leave out variables."
        )
    if n_components is not None and not 1 <= int(n_components) <= min(n, p):
        raise OrdinateError(f"The number of components must be between 1 and {min(n, p)}; got {n_components}.")
    spectrum = _cross_product_eigh(cross, n)
    values, loadings, rank, complete, squared = _components(n, p, spectrum, n_components)
    scores = np.empty((0, loadings.shape[1]))
    return _fit(values, loadings, scores, spectrum, (n, p), rank, "covariance", complete, squared)


def project(X_new: np.ndarray, loadings: np.ndarray) -> np.ndarray:
    """Scores of new, already preprocessed samples: ``X_new @ loadings``."""
    return _validated_matrix(X_new, allow_few=True) @ loadings


def apply_sign_rule(loadings: np.ndarray, scores: np.ndarray | None = None) -> np.ndarray:
    """Flip columns so each column's largest-magnitude loading is positive.

    Returns the vector of signs (+1/-1) applied; ``loadings`` and ``scores``
    are modified in place.
    """
    if loadings.size == 0:
        return np.ones(0)
    largest = np.argmax(np.abs(loadings), axis=0)
    signs = np.sign(loadings[largest, np.arange(loadings.shape[1])])
    signs[signs == 0] = 1.0
    loadings *= signs
    if scores is not None:
        scores *= signs
    return signs


# --- solvers -----------------------------------------------------------------


def _resolve_solver(solver: str, n: int, p: int, n_components: int | None) -> str:
    if solver not in SOLVERS:
        raise OrdinateError(f"Unknown PCA solver '{solver}'; choose one of {', '.join(SOLVERS)}.")
    if solver != "auto":
        return solver
    if min(n, p) > FULL_EIGH_LIMIT:
        return "partial"
    if p > FULL_EIGH_LIMIT // 2 and n_components is not None and n_components <= 50 and p > 2 * n:
        # Wide data where only a few components are wanted: Lanczos on the
        # Gram matrix avoids an n x n full eigendecomposition.
        return "partial"
    return "covariance" if p <= n else "gram"


@dataclass(frozen=True, eq=False)
class _Spectrum:
    """What a solver found: eigenvalues of C, eigenvectors (loadings), traces of C and C²."""

    values: np.ndarray
    vectors: np.ndarray
    trace: float
    trace_of_square: float | None  # None: compute from the eigenvalues (complete spectrum)


def _covariance_eigh(X: np.ndarray, offset: np.ndarray | None, small_offset: bool) -> _Spectrum:
    if small_offset:
        # XᵀX − n·x̄x̄ᵀ loses about 2·log10(|x̄|/s) digits; with offsets under
        # SMALL_OFFSET standard deviations that is at most 2 of 16, and it saves a pass.
        cross = X.T @ X
        cross -= X.shape[0] * np.outer(offset, offset)
    else:
        cross = centred_cross_product(X, offset)
    return _cross_product_eigh(cross, X.shape[0])


def _cross_product_eigh(cross: np.ndarray, n: int) -> _Spectrum:
    _check_finite_product(cross)
    trace = float(np.trace(cross)) / (n - 1)
    values, vectors = scipy.linalg.eigh(cross, overwrite_a=True, check_finite=False, driver="evd")
    return _Spectrum(values[::-1] / (n - 1), vectors[:, ::-1], trace, None)


def centred_cross_product(X: np.ndarray, offset: np.ndarray | None) -> np.ndarray:
    """XᵀX of the centred data, centring one cache-sized block of rows at a time.

    Avoids materialising a centred copy of X (one write and one read of the
    whole array fewer than centring first), without the cancellation of
    XᵀX − n·x̄x̄ᵀ.
    """
    if offset is None:
        return X.T @ X  # numpy dispatches XᵀX to the symmetric BLAS kernel
    n, p = X.shape
    cross = np.zeros((p, p))
    for rows in _row_blocks(n, p):
        block = X[rows] - offset
        cross += block.T @ block
    return cross


def _offsets_are_small(X: np.ndarray, offset: np.ndarray) -> bool:
    """True when every column's mean is within SMALL_OFFSET of its spread (from a row sample)."""
    sample = X[:: max(1, X.shape[0] // 2048)]
    spread = sample.std(axis=0)
    return bool(np.all(spread > 0) and np.all(np.abs(offset) <= SMALL_OFFSET * spread))


def _row_blocks(n: int, p: int):
    step = max(256, BLOCK_BYTES // (8 * max(p, 1)))
    return (slice(start, min(start + step, n)) for start in range(0, n, step))


def _gram_eigh(X: np.ndarray) -> _Spectrum:
    gram = X @ X.T
    _check_finite_product(gram)
    trace = float(np.trace(gram)) / (X.shape[0] - 1)
    values, left = scipy.linalg.eigh(gram, overwrite_a=True, check_finite=False, driver="evd")
    values, left = values[::-1], left[:, ::-1]
    return _Spectrum(values / (X.shape[0] - 1), _loadings_from_left(X, values, left), trace, None)


def _partial_eigh(X: np.ndarray, k: int) -> _Spectrum:
    n, p = X.shape
    small = X.T @ X if p <= n else X @ X.T
    _check_finite_product(small)
    trace = float(np.trace(small)) / (n - 1)
    trace_of_square = float(np.einsum("ij,ij->", small, small)) / (n - 1) ** 2
    k = min(k, small.shape[0] - 1)
    start = np.random.default_rng(0).standard_normal(small.shape[0])  # fixed: reproducible runs
    values, vectors = scipy.sparse.linalg.eigsh(small, k=k, which="LA", v0=start, tol=0)
    order = np.argsort(values)[::-1]
    values, vectors = np.clip(values[order], 0, None), vectors[:, order]
    _check_eigenpairs(small, values, vectors)
    if p > n:
        vectors = _loadings_from_left(X, values, vectors)
    return _Spectrum(values / (n - 1), vectors, trace, trace_of_square)


def _loadings_from_left(X: np.ndarray, gram_values: np.ndarray, left: np.ndarray) -> np.ndarray:
    """Right singular vectors from the Gram matrix's eigenvectors: P = XᵀU / s.

    Only directions with non-zero variance are returned; :func:`_assemble`
    keeps no more components than the rank on any solver path.
    """
    singular = np.sqrt(np.clip(gram_values, 0, None))
    if not singular.size:
        return np.zeros((X.shape[1], 0))
    usable = singular > singular[0] * max(X.shape) * np.finfo(float).eps
    loadings = X.T @ left[:, usable]
    loadings /= singular[usable]
    return loadings


def _check_eigenpairs(matrix: np.ndarray, values: np.ndarray, vectors: np.ndarray) -> None:
    residual = np.linalg.norm(matrix @ vectors - vectors * values, axis=0)
    scale = max(float(values[0]), np.finfo(float).tiny) if values.size else 1.0
    if residual.size and residual.max() > 1e-8 * scale * np.sqrt(matrix.shape[0]):
        raise OrdinateError(
            "The partial eigen-solver did not converge to the required accuracy. "
            "Ask for fewer components or leave out variables."
        )


# --- assembly ----------------------------------------------------------------


def _assemble(X, offset, small_offset: bool, spectrum: _Spectrum, solver, n_components) -> PCAFit:
    values, loadings, rank, complete, squared = _components(*X.shape, spectrum, n_components)
    scores = _scores(X, offset, small_offset, loadings)
    return _fit(values, loadings, scores, spectrum, X.shape, rank, solver, complete, squared)


def _components(n: int, p: int, spectrum: _Spectrum, n_components):
    """Eigenvalues cleaned of roundoff, loadings up to the rank with the sign rule, rank."""
    values = np.clip(spectrum.values, 0.0, None)
    tolerance = max(n, p) * np.finfo(float).eps * (values[0] if values.size else 0.0)
    values[values <= tolerance] = 0.0
    rank = int(np.count_nonzero(values))
    complete = values.size == min(n, p)
    squared = float(np.sum(values**2)) if spectrum.trace_of_square is None else spectrum.trace_of_square
    # Directions beyond the rank carry no variance and are arbitrary: not kept.
    vectors = spectrum.vectors
    k = min(vectors.shape[1], n_components or vectors.shape[1], max(rank, 1))
    loadings = np.ascontiguousarray(vectors[:, :k])
    apply_sign_rule(loadings)  # before the scores, so they need no second pass
    return values, loadings, rank, complete, squared


def _fit(values, loadings, scores, spectrum, shape, rank, solver, complete, squared) -> PCAFit:
    n, p = shape
    singular = np.sqrt(values * (n - 1))
    for array in (values, loadings, scores, singular):
        array.setflags(write=False)
    return PCAFit(
        eigenvalues=values,
        total_variance=spectrum.trace,
        sum_squared_eigenvalues=squared,
        loadings=loadings,
        scores=scores,
        singular_values=singular,
        n_samples=n,
        n_variables=p,
        rank=rank,
        solver=solver,
        complete_spectrum=complete,
    )


def _scores(X: np.ndarray, offset: np.ndarray | None, small_offset: bool, loadings: np.ndarray) -> np.ndarray:
    if offset is None:
        return X @ loadings
    if small_offset:
        scores = X @ loadings
        scores -= offset @ loadings  # same digit budget as the cross-product shortcut
        return scores
    scores = np.empty((X.shape[0], loadings.shape[1]))
    for rows in _row_blocks(*X.shape):
        np.matmul(X[rows] - offset, loadings, out=scores[rows])
    return scores


def _check_finite_product(product: np.ndarray) -> None:
    # A NaN or inf anywhere in X makes its column's sum of squares (the
    # diagonal) non-finite, so this replaces a full pass over X.
    if not np.isfinite(np.diagonal(product)).all():
        raise _not_finite_error()


def _not_finite_error() -> OrdinateError:
    return OrdinateError(
        "The data still contains missing or infinite values after preprocessing; "
        "choose a missing-value strategy (drop, mean or iterative)."
    )


def _validated_matrix(X, *, allow_few: bool = False) -> np.ndarray:
    X = np.asarray(X, dtype=float)
    if X.ndim != 2:
        raise OrdinateError("The data must be a table of samples (rows) by variables (columns).")
    n, p = X.shape
    if not allow_few and (n < 2 or p < 1):
        raise OrdinateError(
            f"PCA needs at least 2 samples and 1 variable; the data has {n} samples and {p} variables."
        )
    return X
