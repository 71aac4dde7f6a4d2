"""Iterative PCA imputation of missing values (an EM-style algorithm).

Missing cells start at their column mean; then, until the filled values stop
changing, the data are centred and scaled as the recipe says, a rank-K PCA
model is fitted, and the missing cells are replaced by the model's
reconstruction. This is the alternating least-squares / EM scheme described by
Kiers (1997, Psychometrika 62:251-266) and Walczak & Massart (2001,
Chemometrics Intell. Lab. Syst. 58:15-27); observed cells are never changed.

K is chosen on the mean-filled data as the number of covariance eigenvalues
above their mean, trace / p (Kaiser's rule, as in :mod:`webapp.analysis.selection`),
at least 1 and at most p - 1, so that the model cannot simply reproduce the
filled values.

Convergence is judged without units: each round's change of the filled cells
is measured in standard deviations of their variable (observed values), and
the distance still to go is estimated from the shrinking of successive steps
(for a linearly converging iteration it is about step / (1 - rate)). The data
are first divided by one power of two near their typical spread, which changes
no model. A common change of unit of all variables therefore changes the filled
values only by the factor itself, up to the tolerance; slowly converging data
(no scaling, one variable dominating) may take a different number of rounds.

A filled value outside the range observed for its variable is an
extrapolation of the linear model; the count per variable is returned so that
callers can say so.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

DEFAULT_TOLERANCE = 1e-9
DEFAULT_MAX_ITERATIONS = 1000


@dataclass(frozen=True, eq=False)
class ImputationResult:
    values: np.ndarray
    n_components: int
    iterations: int
    converged: bool
    outside_range: np.ndarray  # per variable: filled cells outside its observed [min, max]


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

    Convergence: the estimated remaining distance to the fixed point, as a
    root-mean-square over the filled cells in standard deviations of their
    variable, is below ``tolerance``.
    """
    missing = np.isnan(values)
    if not missing.any():
        return ImputationResult(values.copy(), 0, 0, True, np.zeros(values.shape[1], dtype=int))
    # One power of two for all variables: an exact division that changes no
    # model (every scaling treats a common factor alike), so that data in other
    # units pass through the same floating-point range.
    spread = _observed_spread(values)
    common = _common_power_of_two(spread)
    result = _impute_in_common_unit(values / common, spread / common, missing, centring, scaling, n_components,
                                    tolerance, max_iterations)
    result.values[...] *= common  # in place: the result is frozen, its array is ours
    return result


def _impute_in_common_unit(values, spread, missing, centring, scaling, n_components, tolerance, max_iterations):
    filled = np.where(missing, np.nanmean(values, axis=0), values)
    k = n_components or _kaiser_components(filled, centring, scaling)
    unit = spread[np.nonzero(missing)[1]]

    def update(guess: np.ndarray) -> np.ndarray:
        filled[missing] = guess
        centre, scale = _centre_scale(filled, centring, scaling)
        return (_rank_k_reconstruction((filled - centre) / scale, k) * scale + centre)[missing]

    guess, rounds, converged = _accelerated_fixed_point(update, filled[missing], unit, tolerance, max_iterations)
    filled[missing] = guess
    return ImputationResult(filled, k, rounds, converged, _outside_observed_range(values, filled, missing))


def _accelerated_fixed_point(update, guess, unit, tolerance, max_rounds):
    """Iterate ``guess = update(guess)`` to its fixed point, with SQUAREM steps.

    Plain EM-style rounds can converge very slowly (a rate near 1 when the
    model is dominated by a variable of large variance). SQUAREM (Varadhan &
    Roland 2008, Scand. J. Statist. 35:335-353, scheme S3) extrapolates along
    two plain rounds and then takes a plain round from the extrapolated point,
    which keeps the fixed point of the plain iteration. The distance still to
    go is estimated from the two plain rounds: |r| / (1 - rate), with
    rate = |second step| / |first step|, in standard deviations of each
    filled cell's variable. Returns (fixed point, rounds used, converged).
    """
    rounds = 0
    while rounds + 3 <= max_rounds:
        once = update(guess)
        twice = update(once)
        rounds += 2
        first, second = (once - guess) / unit, (twice - once) / unit
        if _remaining(_rms(second), _rms(first)) < tolerance:
            return twice, rounds, True
        curvature = second - first
        alpha = -_rms(first) / max(_rms(curvature), np.finfo(float).tiny)
        alpha = min(alpha, -1.0)  # -1 is two plain rounds; never step back
        jumped = guess - 2 * alpha * (once - guess) + alpha**2 * (twice - 2 * once + guess)
        guess = update(jumped)
        rounds += 1
    return guess, rounds, False


def _common_power_of_two(spread: np.ndarray) -> float:
    return float(2.0 ** np.round(np.log2(np.median(spread))))


def _rms(vector: np.ndarray) -> float:
    return float(np.sqrt(np.mean(vector**2)))


def _remaining(step: float, last_step: float) -> float:
    """Estimated distance to the fixed point after ``step``, for linear convergence."""
    if step == 0.0:
        return 0.0
    if step >= last_step:
        return float("inf")  # not shrinking: no estimate
    return step / (1.0 - step / last_step)


def _observed_spread(values: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # a column with one observed value
        spread = np.nanstd(values, axis=0, ddof=1)
    magnitude = np.nanmax(np.abs(values), axis=0)
    usable = np.isfinite(spread) & (spread > 1e-12 * magnitude)
    # A variable with no observed spread: its magnitude, else 1, sets the unit.
    fallback = np.where(magnitude > 0, magnitude, 1.0)
    return np.where(usable, spread, fallback)


def _outside_observed_range(values: np.ndarray, filled: np.ndarray, missing: np.ndarray) -> np.ndarray:
    low, high = np.nanmin(values, axis=0), np.nanmax(values, axis=0)
    outside = missing & ((filled < low) | (filled > high))
    return outside.sum(axis=0)


def _kaiser_components(filled: np.ndarray, centring: str, scaling: str) -> int:
    centre, scale = _centre_scale(filled, centring, scaling)
    squared = np.linalg.svd((filled - centre) / scale, compute_uv=False) ** 2
    # Kaiser: eigenvalues above their mean over all p variables (trace / p),
    # which differs from the mean of the min(n, p) non-trivial ones when n < p.
    count = int(np.sum(squared > squared.sum() / filled.shape[1]))
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
    std = None if scaling == "range" else values.std(axis=0, ddof=1)
    return divisors_from_summary(scaling, values.min(axis=0), values.max(axis=0), std)


def divisors_from_summary(scaling: str, minimum: np.ndarray, maximum: np.ndarray, std: np.ndarray | None):
    """:func:`scale_divisors` from column minima, maxima and standard deviations (ddof = 1).

    Shared with engines that summarise the columns part by part. ``std`` may be
    None for ``range`` and ``none``.
    """
    minimum, maximum = np.asarray(minimum, dtype=float), np.asarray(maximum, dtype=float)
    if scaling == "none":
        return np.ones(minimum.shape[0]), np.zeros(minimum.shape[0], dtype=bool)
    spread = maximum - minimum
    magnitude = np.maximum(np.abs(minimum), np.abs(maximum))
    zero = spread <= 1e-12 * np.maximum(magnitude, np.finfo(float).tiny)
    if scaling == "range":
        scale = spread
    else:
        scale = np.asarray(std, dtype=float)
        if scaling == "pareto":
            scale = np.sqrt(scale)
    return np.where(zero, 1.0, scale), zero


def _rank_k_reconstruction(scaled: np.ndarray, k: int) -> np.ndarray:
    u, s, vt = np.linalg.svd(scaled, full_matrices=False)
    return (u[:, :k] * s[:k]) @ vt[:k]
