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
        the recipe; the recipe normally centres).
    solver : ``auto`` (by shape), ``covariance``, ``gram`` or ``partial``.
    """
    X = _validated_matrix(X)
    if centre:
        X = X - X.mean(axis=0)
    n, p = X.shape
    resolved = _resolve_solver(solver, n, p, n_components)
    limit = min(n, p)
    if n_components is not None:
        if not 1 <= int(n_components) <= limit:
            raise OrdinateError(
                f"The number of components must be between 1 and {limit} for "
                f"{n} samples and {p} variables; got {n_components}."
            )
        n_components = int(n_components)
    if resolved == "covariance":
        values, vectors = _covariance_eigh(X)
    elif resolved == "gram":
        values, vectors = _gram_eigh(X)
    else:
        k = n_components or min(DEFAULT_PARTIAL_COMPONENTS, limit - 1)
        values, vectors = _partial_eigh(X, k)
    return _assemble(X, values, vectors, resolved, n_components)


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


def _covariance_eigh(X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    cross = X.T @ X  # numpy dispatches XᵀX to the symmetric BLAS kernel
    values, vectors = scipy.linalg.eigh(cross, overwrite_a=True, check_finite=False, driver="evd")
    return values[::-1] / (X.shape[0] - 1), vectors[:, ::-1]


def _gram_eigh(X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    gram = X @ X.T
    values, left = scipy.linalg.eigh(gram, overwrite_a=True, check_finite=False, driver="evd")
    values, left = values[::-1], left[:, ::-1]
    return values / (X.shape[0] - 1), _loadings_from_left(X, values, left)


def _partial_eigh(X: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    n, p = X.shape
    small = X.T @ X if p <= n else X @ X.T
    k = min(k, small.shape[0] - 1)
    rng = np.random.default_rng(0)  # ARPACK's start vector: fixed for reproducibility
    start = rng.standard_normal(small.shape[0])
    values, vectors = scipy.sparse.linalg.eigsh(small, k=k, which="LA", v0=start, tol=0)
    order = np.argsort(values)[::-1]
    values, vectors = np.clip(values[order], 0, None), vectors[:, order]
    _check_eigenpairs(small, values, vectors)
    if p > n:
        vectors = _loadings_from_left(X, values, vectors)
    return values / (n - 1), vectors


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


def _assemble(X, values, vectors, solver, n_components) -> PCAFit:
    n, p = X.shape
    values = np.clip(values, 0.0, None)
    total = float(np.einsum("ij,ij->", X, X)) / (n - 1)
    tolerance = max(n, p) * np.finfo(float).eps * (values[0] if values.size else 0.0)
    values[values <= tolerance] = 0.0
    rank = int(np.count_nonzero(values))
    complete = values.size == min(n, p)
    squared = float(np.sum(values**2)) if complete else _trace_of_square(X)
    # Directions beyond the rank carry no variance and are arbitrary: not kept.
    k = min(vectors.shape[1], n_components or vectors.shape[1], max(rank, 1))
    loadings = np.ascontiguousarray(vectors[:, :k])
    scores = X @ loadings
    apply_sign_rule(loadings, scores)
    for array in (values, loadings, scores):
        array.setflags(write=False)
    singular = np.sqrt(values * (n - 1))
    singular.setflags(write=False)
    return PCAFit(
        eigenvalues=values,
        total_variance=total,
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


def _trace_of_square(X: np.ndarray) -> float:
    """trace(C²) = ||XᵀX||²_F / (n-1)² computed on the smaller side."""
    n, p = X.shape
    small = X.T @ X if p <= n else X @ X.T
    return float(np.einsum("ij,ij->", small, small)) / (n - 1) ** 2


def _validated_matrix(X, *, allow_few: bool = False) -> np.ndarray:
    X = np.asarray(X, dtype=float)
    if X.ndim != 2:
        raise OrdinateError("The data must be a table of samples (rows) by variables (columns).")
    n, p = X.shape
    if not allow_few and (n < 2 or p < 1):
        raise OrdinateError(
            f"PCA needs at least 2 samples and 1 variable; the data has {n} samples and {p} variables."
        )
    if not np.isfinite(X).all():
        raise OrdinateError(
            "The data still contains missing or infinite values after preprocessing; "
            "choose a missing-value strategy (drop, mean or iterative)."
        )
    return X
