"""Iterative PCA imputation of missing values (an EM-style algorithm).

Missing cells start at their column mean; then, until the filled values stop
changing, the data are centred and scaled as the recipe says, a rank-K PCA
model is fitted, and the missing cells are replaced by the model's
reconstruction. This is the alternating least-squares / EM scheme described by
Kiers (1997, Psychometrika 62:251-266) and Walczak & Massart (2001,
Chemometrics Intell. Lab. Syst. 58:15-27); observed cells are never changed.

K is chosen on the mean-filled data as the number of eigenvalues above the
mean eigenvalue (Kaiser's rule), at least 1 and at most p - 1, so that the
model cannot simply reproduce the filled values.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

DEFAULT_TOLERANCE = 1e-7
DEFAULT_MAX_ITERATIONS = 1000


@dataclass(frozen=True, eq=False)
class ImputationResult:
    values: np.ndarray
    n_components: int
    iterations: int
    converged: bool


def iterative_pca_impute(
    values: np.ndarray,
    *,
    centring: str = "mean",
    scaling: str = "unit",
    n_components: int | None = None,
    tolerance: float = DEFAULT_TOLERANCE,
    max_iterations: int = DEFAULT_MAX_ITERATIONS,
) -> ImputationResult:
    """Fill NaN cells of ``values`` (n x p). Returns a new array.

    Convergence: the root-mean-square change of the filled cells between two
    rounds, relative to the overall standard deviation of the scaled data, is
    below ``tolerance``.
    """
    missing = np.isnan(values)
    filled = np.where(missing, np.nanmean(values, axis=0), values)
    if not missing.any():
        return ImputationResult(filled, 0, 0, True)
    k = n_components or _kaiser_components(filled, centring, scaling)
    previous = filled[missing]
    missing_columns = np.nonzero(missing)[1]
    for iteration in range(1, max_iterations + 1):
        centre, scale = _centre_scale(filled, centring, scaling)
        reconstructed = _rank_k_reconstruction((filled - centre) / scale, k) * scale + centre
        filled[missing] = reconstructed[missing]
        change = np.sqrt(np.mean(((filled[missing] - previous) / scale[missing_columns]) ** 2))
        previous = filled[missing]
        if change < tolerance:
            return ImputationResult(filled, k, iteration, True)
    return ImputationResult(filled, k, max_iterations, False)


def _kaiser_components(filled: np.ndarray, centring: str, scaling: str) -> int:
    centre, scale = _centre_scale(filled, centring, scaling)
    eigenvalues = np.linalg.svd((filled - centre) / scale, compute_uv=False) ** 2
    count = int(np.sum(eigenvalues > eigenvalues.mean()))
    return int(np.clip(count, 1, max(filled.shape[1] - 1, 1)))


def _centre_scale(values: np.ndarray, centring: str, scaling: str) -> tuple[np.ndarray, np.ndarray]:
    centre = values.mean(axis=0) if centring == "mean" else np.zeros(values.shape[1])
    return centre, scale_divisors(values, scaling)[0]


def scale_divisors(values: np.ndarray, scaling: str) -> tuple[np.ndarray, np.ndarray]:
    """Per-variable divisors of a scaling, and the mask of variables with no variation.

    unit: standard deviation (ddof = 1); pareto: its square root; range:
    max − min; none: 1. Variables with no variation get divisor 1.
    """
    p = values.shape[1]
    if scaling == "none":
        return np.ones(p), np.zeros(p, dtype=bool)
    spread = np.ptp(values, axis=0)
    magnitude = np.max(np.abs(values), axis=0)
    zero = spread <= 1e-12 * np.maximum(magnitude, np.finfo(float).tiny)
    if scaling == "range":
        scale = spread
    else:
        scale = values.std(axis=0, ddof=1)
        if scaling == "pareto":
            scale = np.sqrt(scale)
    return np.where(zero, 1.0, scale), zero


def _rank_k_reconstruction(scaled: np.ndarray, k: int) -> np.ndarray:
    u, s, vt = np.linalg.svd(scaled, full_matrices=False)
    return (u[:, :k] * s[:k]) @ vt[:k]
