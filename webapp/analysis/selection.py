"""How many principal components to keep: several published rules side by side.

No rule is right for every data set; the advice shows all of them and names
the one behind the recommendation. Parallel analysis is preferred when it can
be computed: in the simulation study of Zwick & Velicer (1986) it was the most
accurate of the rules compared, while Kaiser's rule tended to keep too many.

References
----------
Kaiser, H. F. (1960). The application of electronic computers to factor
    analysis. *Educational and Psychological Measurement* 20, 141-151.
Frontier, S. (1976). Étude de la décroissance des valeurs propres dans une
    analyse en composantes principales: comparaison avec le modèle du bâton
    brisé. *Journal of Experimental Marine Biology and Ecology* 25, 67-75.
Jolliffe, I. T. (2002). *Principal Component Analysis*, 2nd ed., Springer, section 6.1.
Jackson, D. A. (1993). Stopping rules in principal components analysis: a
    comparison of heuristical and statistical approaches. *Ecology* 74(8), 2204-2214.
Horn, J. L. (1965). A rationale and test for the number of factors in factor
    analysis. *Psychometrika* 30, 179-185.
Buja, A. & Eyuboglu, N. (1992). Remarks on parallel analysis. *Multivariate
    Behavioral Research* 27(4), 509-540.
Glorfeld, L. W. (1995). An improvement on Horn's parallel analysis methodology
    for selecting the correct number of factors to retain. *Educational and
    Psychological Measurement* 55, 377-393.
Zwick, W. R. & Velicer, W. F. (1986). Comparison of five rules for
    determining the number of components to retain. *Psychological Bulletin*
    99(3), 432-442.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import scipy.linalg

from webapp.analysis.checks import float_array, whole_number
from webapp.analysis.errors import OrdinateError

__all__ = [
    "ComponentAdvice",
    "kaiser_count",
    "broken_stick_expectation",
    "broken_stick_count",
    "parallel_analysis",
    "cumulative_count",
    "advise_components",
]

EigenFunction = Callable[[np.ndarray, int], np.ndarray]

# Descending order is checked up to roundoff of the eigensolver.
_ORDER_RTOL = 1e-10

# The total variance of X given to advise_components must match X itself.
_TOTAL_VARIANCE_RTOL = 1e-6

# Cumulative sums of ratios such as 0.5 + 0.3 land a hair below 0.8.
_CUMULATIVE_SLACK = 1e-12


@dataclass(frozen=True, eq=False)
class ComponentAdvice:
    """What each rule says about the number of components, and the recommendation.

    ``eq=False`` because the array fields make field-by-field equality meaningless.

    Attributes
    ----------
    recommended : int
        Between 1 and the number of eigenvalues given.
    rule : str
        Human-readable name of the rule behind ``recommended``.
    kaiser : int
        Eigenvalues above the mean eigenvalue (Kaiser 1960).
    broken_stick : int
        Leading components whose explained ratio exceeds the broken-stick
        expectation, counted consecutively from PC1 (Frontier 1976; Jolliffe 2002).
    parallel : int or None
        Leading components whose eigenvalue exceeds the permuted-data threshold
        (Horn 1965; Buja & Eyuboglu 1992); None when no data were given.
    cumulative : int
        Smallest number of components whose explained ratios add up to
        ``cumulative_threshold``; the number of eigenvalues given when they do
        not reach it (see ``cumulative_reached``).
    cumulative_threshold : float
    cumulative_reached : bool
        Whether the given eigenvalues reach the threshold at all.
    broken_stick_expectation : array
        b_k for the components given, as ratios of the total variance.
    parallel_threshold : array or None
        Permuted-data eigenvalue quantile for each component given.
    """

    recommended: int
    rule: str
    kaiser: int
    broken_stick: int
    parallel: int | None
    cumulative: int
    cumulative_threshold: float
    cumulative_reached: bool
    broken_stick_expectation: np.ndarray
    parallel_threshold: np.ndarray | None


# --------------------------------------------------------------------------
# argument checks
# --------------------------------------------------------------------------

_check_int = whole_number


def _check_fraction(value, name: str) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise OrdinateError(f"The {name} must be a number between 0 and 1, not {value!r}.")
    value = float(value)
    if not (0.0 < value < 1.0):
        raise OrdinateError(
            f"The {name} must lie strictly between 0 and 1; {value!r} was given."
        )
    return value


def _check_vector(values, name: str) -> np.ndarray:
    array = float_array(values, name, 1)
    if array.size == 0:
        raise OrdinateError(f"The {name} must be a non-empty list of numbers; got shape {array.shape}.")
    if not np.all(np.isfinite(array)):
        raise OrdinateError(f"The {name} contain a missing or infinite value.")
    return array


def _check_descending(values: np.ndarray, name: str) -> None:
    scale = float(np.max(np.abs(values)))
    if np.any(np.diff(values) > _ORDER_RTOL * scale):
        raise OrdinateError(
            f"The {name} must be in descending order (largest first), as PCA reports them."
        )


def _check_eigenvalues(eigenvalues) -> np.ndarray:
    lam = _check_vector(eigenvalues, "eigenvalues")
    _check_descending(lam, "eigenvalues")
    if lam[-1] < -_ORDER_RTOL * max(float(lam[0]), 0.0) or lam[0] <= 0.0:
        raise OrdinateError(
            "The eigenvalues must be zero or positive with a positive largest one, "
            "as those of a covariance or correlation matrix are."
        )
    return lam


def _check_total_variance(total_variance, eigenvalues: np.ndarray) -> float:
    if isinstance(total_variance, bool) or not isinstance(total_variance, numbers.Real):
        raise OrdinateError(f"The total variance must be a number, not {total_variance!r}.")
    total = float(total_variance)
    if not math.isfinite(total) or total <= 0.0:
        raise OrdinateError(f"The total variance must be positive; {total!r} was given.")
    if float(np.sum(np.clip(eigenvalues, 0.0, None))) > total * (1.0 + _TOTAL_VARIANCE_RTOL):
        raise OrdinateError(
            "The eigenvalues add up to more than the total variance; the total variance "
            "must be the sum of all eigenvalues (the trace of the covariance matrix)."
        )
    return total


def _check_ratios(explained_ratio) -> np.ndarray:
    ratio = _check_vector(explained_ratio, "explained variance ratios")
    _check_descending(ratio, "explained variance ratios")
    if np.any(ratio < -_ORDER_RTOL) or float(np.sum(ratio)) > 1.0 + _TOTAL_VARIANCE_RTOL:
        raise OrdinateError(
            "The explained variance ratios must be between 0 and 1 and add up to at most 1."
        )
    return ratio


def _leading_run(mask: np.ndarray) -> int:
    """Length of the run of True values at the start of ``mask``."""
    failing = np.flatnonzero(~mask)
    return int(failing[0]) if failing.size else int(mask.size)


# --------------------------------------------------------------------------
# the rules
# --------------------------------------------------------------------------

def kaiser_count(eigenvalues, total_variance: float, n_variables: int) -> int:
    """Number of eigenvalues above the mean eigenvalue (Kaiser 1960).

    The mean eigenvalue is ``total_variance / n_variables``, so the rule works
    when only the leading eigenvalues were computed. For PCA on the correlation
    matrix (autoscaled data) the mean is 1, the classic "eigenvalue > 1" rule.
    The rule is known to keep too many components when there are many
    variables (Zwick & Velicer 1986); Jolliffe (2002, section 6.1.2) suggests
    a cut-off of 0.7 times the mean instead.
    """
    lam = _check_eigenvalues(eigenvalues)
    total = _check_total_variance(total_variance, lam)
    p = _check_int(n_variables, "number of variables", 1)
    if lam.size > p:
        raise OrdinateError(
            f"{lam.size} eigenvalues were given for {p} variable(s); there can be at most {p}."
        )
    return int(np.count_nonzero(lam > total / p))


def broken_stick_expectation(n_variables: int) -> np.ndarray:
    """Expected share of variance of the k-th largest piece of a randomly broken stick.

    .. math:: b_k = \\frac{1}{p} \\sum_{i=k}^{p} \\frac{1}{i}, \\qquad k = 1, \\dots, p

    (Frontier 1976; Jolliffe 2002, section 6.1.3). The b_k add up to 1.
    """
    p = _check_int(n_variables, "number of variables", 1)
    reciprocals = 1.0 / np.arange(1, p + 1)
    # Tail sums from the small end: sum_{i=k}^{p} 1/i for every k.
    return np.cumsum(reciprocals[::-1])[::-1] / p


def broken_stick_count(explained_ratio, n_variables: int) -> int:
    """Leading components whose explained ratio exceeds the broken-stick expectation.

    Counted consecutively from PC1 and stopping at the first component that
    does not exceed b_k (Jackson 1993 found this rule among the more reliable
    ones). At most the number of ratios given.
    """
    ratio = _check_ratios(explained_ratio)
    p = _check_int(n_variables, "number of variables", 1)
    if ratio.size > p:
        raise OrdinateError(
            f"{ratio.size} explained variance ratios were given for {p} variable(s); "
            f"there can be at most {p}."
        )
    expectation = broken_stick_expectation(p)[: ratio.size]
    return _leading_run(ratio > expectation)


def cumulative_count(explained_ratio, threshold: float = 0.80) -> int:
    """Smallest K whose first K explained ratios add up to at least ``threshold``.

    A rule of thumb (common practice; Jolliffe 2002, section 6.1.1 discusses
    cut-offs between 70 % and 90 %). When the ratios given do not reach the
    threshold, the number of ratios given is returned.
    """
    ratio = _check_ratios(explained_ratio)
    threshold = _check_fraction(threshold, "cumulative variance threshold")
    reached = np.flatnonzero(np.cumsum(ratio) >= threshold - _CUMULATIVE_SLACK)
    return int(reached[0]) + 1 if reached.size else int(ratio.size)


def _default_eigenvalues(X: np.ndarray, k: int) -> np.ndarray:
    """Top-k covariance eigenvalues (n - 1 denominator) of a centred X, descending."""
    n, p = X.shape
    # Never a p x p matrix when p > n: X Xᵀ has the same non-zero eigenvalues and is smaller.
    cross = X.T @ X if p <= n else X @ X.T
    size = cross.shape[0]
    top = scipy.linalg.eigh(
        cross, eigvals_only=True, subset_by_index=[size - k, size - 1], check_finite=False
    )
    return top[::-1] / (n - 1)


def parallel_analysis(
    X: np.ndarray,
    *,
    n_permutations: int = 100,
    quantile: float = 0.95,
    seed: int = 0,
    n_components: int | None = None,
    eigen_fn: EigenFunction | None = None,
) -> np.ndarray:
    """Permutation thresholds for the leading eigenvalues (parallel analysis).

    Horn (1965) compared each eigenvalue of the data with the eigenvalues of
    random data of the same size. This is the column-permutation variant of
    Buja & Eyuboglu (1992): each column of X is shuffled with its own random
    permutation, which destroys the correlations but keeps every variable's
    values (so its distribution, mean and variance), and so suits covariance
    PCA of variables on different scales as well as correlation PCA. The
    permuted matrix is re-centred (a no-op for centred X, kept as a guard),
    its top eigenvalues are computed, and the ``quantile`` (default 95th
    percentile, Glorfeld 1995) over the permutations is the threshold for each
    component. A component is kept while its eigenvalue exceeds its threshold.

    Cost: each permutation copies X and computes the top eigenvalues of the
    smaller of XᵀX (p x p) and XXᵀ (n x n), so about ``n_permutations`` times
    the cost of one PCA fit (100 x (1e6 x 20) takes tens of seconds on two
    cores). No rows are subsampled: to bound the time, pass fewer
    permutations, or a faster ``eigen_fn`` (e.g. a truncated solver for wide data).

    Parameters
    ----------
    X : array of shape (n_samples, p)
        Preprocessed data (centred, and scaled if the PCA was on scaled data).
    n_permutations : int
        Number of permuted copies, at least 1 (20 or more for a 95th percentile).
    quantile : float
        In (0, 1).
    seed : int
        Seed of ``np.random.default_rng``; equal seeds give equal thresholds.
    n_components : int, optional
        Number of leading thresholds, 1 <= k <= min(n - 1, p); default min(n - 1, p).
    eigen_fn : callable, optional
        ``eigen_fn(X_permuted, k)`` returning the top-k covariance eigenvalues
        (n - 1 denominator) in descending order.

    Returns
    -------
    thresholds : array of shape (n_components,)
    """
    data = _check_data(X)
    n, p = data.shape
    n_permutations = _check_int(n_permutations, "number of permutations", 1)
    quantile = _check_fraction(quantile, "quantile")
    if isinstance(seed, bool) or not isinstance(seed, numbers.Integral):
        raise OrdinateError(f"The random seed must be a whole number, not {seed!r}.")
    largest_k = min(n - 1, p)
    k = largest_k if n_components is None else _check_int(n_components, "number of components", 1)
    if k > largest_k:
        raise OrdinateError(
            f"Parallel analysis can give at most {largest_k} component(s) for data with "
            f"{n} samples and {p} variables; {k} were asked for."
        )
    solve = _default_eigenvalues if eigen_fn is None else eigen_fn

    rng = np.random.default_rng(int(seed))
    permuted = np.empty_like(data)
    eigenvalues = np.empty((n_permutations, k))
    for r in range(n_permutations):
        rng.permuted(data, axis=0, out=permuted)  # each column shuffled independently
        permuted -= permuted.mean(axis=0)
        values = np.asarray(solve(permuted, k), dtype=float)
        if values.shape != (k,) or not np.all(np.isfinite(values)):
            raise OrdinateError(
                f"The eigenvalue function returned {values.shape} values or non-finite "
                f"numbers; it must return the top {k} eigenvalues."
            )
        eigenvalues[r] = values
    return np.quantile(eigenvalues, quantile, axis=0)


def _check_data(X) -> np.ndarray:
    try:
        data = np.asarray(X, dtype=float)
    except (TypeError, ValueError) as exc:
        raise OrdinateError(f"The data must be numbers only ({exc}).") from None
    if data.ndim != 2:
        raise OrdinateError(f"The data must be a table (2-D array); got shape {data.shape}.")
    n, p = data.shape
    if n < 3 or p < 2:
        raise OrdinateError(
            f"Parallel analysis needs at least 3 samples and 2 variables; the data have "
            f"{n} sample(s) and {p} variable(s)."
        )
    if not np.all(np.isfinite(data)):
        row, col = (int(i) for i in np.argwhere(~np.isfinite(data))[0])
        raise OrdinateError(
            f"The data contain a missing or infinite value (row {row}, column {col}); "
            f"fill or remove missing values first."
        )
    return data


def advise_components(
    eigenvalues,
    total_variance: float,
    n_variables: int,
    *,
    X: np.ndarray | None = None,
    n_permutations: int = 100,
    seed: int = 0,
    cumulative_threshold: float = 0.80,
    quantile: float = 0.95,
    sampled_from: int | None = None,
) -> ComponentAdvice:
    """Apply every rule and recommend a number of components.

    The recommendation is parallel analysis when ``X`` is given (the most
    accurate rule in Zwick & Velicer 1986), otherwise the broken-stick model,
    otherwise (when the broken stick keeps nothing) Kaiser's rule; it is always
    at least 1 and at most the number of eigenvalues given. ``rule`` names the
    rule used and says so when the minimum of 1 was applied.

    Parameters
    ----------
    eigenvalues : array of shape (k,)
        Leading covariance eigenvalues (n - 1 denominator), descending.
    total_variance : float
        Sum of all p eigenvalues (trace of the covariance matrix).
    n_variables : int
        p, the number of variables.
    X : array of shape (n_samples, p), optional
        The preprocessed data the eigenvalues came from; enables parallel analysis.
    n_permutations, seed, quantile
        Passed to :func:`parallel_analysis`.
    cumulative_threshold : float
        For :func:`cumulative_count`.
    sampled_from : int, optional
        When ``X`` is a uniform random sample of the rows of longer data, the
        number of rows of those data: the sample's total variance is then only
        an estimate, so it is not checked against ``total_variance``, and the
        rule says that parallel analysis ran on a sample.
    """
    lam = _check_eigenvalues(eigenvalues)
    total = _check_total_variance(total_variance, lam)
    p = _check_int(n_variables, "number of variables", 1)
    ratio = np.clip(lam, 0.0, None) / total
    kaiser = kaiser_count(lam, total, p)
    broken = broken_stick_count(ratio, p)
    cumulative = cumulative_count(ratio, cumulative_threshold)
    reached = bool(np.sum(ratio) >= cumulative_threshold - _CUMULATIVE_SLACK)

    parallel: int | None = None
    thresholds: np.ndarray | None = None
    if X is not None:
        data = _check_data(X)
        if data.shape[1] != p:
            raise OrdinateError(
                f"The data have {data.shape[1]} column(s) but the eigenvalues are for "
                f"{p} variable(s); pass the preprocessed data the PCA was fitted on."
            )
        data_total = float(np.sum(np.var(data, axis=0, ddof=1)))
        sampled = sampled_from is not None and int(sampled_from) > data.shape[0]
        if not sampled and not math.isclose(data_total, total, rel_tol=_TOTAL_VARIANCE_RTOL):
            raise OrdinateError(
                f"The total variance of the data ({data_total:.6g}) differs from the total "
                f"variance given ({total:.6g}); pass the preprocessed (centred/scaled) "
                f"data the eigenvalues were computed from."
            )
        k = min(lam.size, data.shape[0] - 1, p)
        thresholds = parallel_analysis(
            data, n_permutations=n_permutations, quantile=quantile, seed=seed, n_components=k
        )
        parallel = _leading_run(lam[:k] > thresholds)

    percentile = f"{100 * quantile:g}th percentile"
    if parallel is not None:
        chosen, rule = parallel, (
            f"parallel analysis ({percentile}, {n_permutations} permutations)"
        )
        if sampled_from is not None and int(sampled_from) > X.shape[0]:
            rule = (f"parallel analysis ({percentile}, {n_permutations} permutations, "
                    f"on a uniform random sample of {X.shape[0]} of the {int(sampled_from)} samples)")
    elif broken > 0:
        chosen, rule = broken, "broken-stick model"
    else:
        chosen, rule = kaiser, "Kaiser (eigenvalue above the mean eigenvalue)"
    if chosen < 1:
        chosen = 1
        rule += "; no component passed, so the minimum of 1 is shown"
    recommended = min(chosen, lam.size)

    expectation = broken_stick_expectation(p)[: lam.size].copy()
    expectation.setflags(write=False)
    if thresholds is not None:
        thresholds.setflags(write=False)
    return ComponentAdvice(
        recommended=recommended,
        rule=rule,
        kaiser=kaiser,
        broken_stick=broken,
        parallel=parallel,
        cumulative=cumulative,
        cumulative_threshold=float(cumulative_threshold),
        cumulative_reached=reached,
        broken_stick_expectation=expectation,
        parallel_threshold=thresholds,
    )
