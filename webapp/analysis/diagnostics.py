"""Outlier diagnostics for a fitted PCA model: Hotelling's T², Q residuals, limits and contributions.

Conventions shared with the rest of ``webapp.analysis``:

* ``X`` (n x p) is the preprocessed matrix (centred, possibly scaled) that the
  model was fitted on, or new rows preprocessed with the model's centre/scale.
* ``eigenvalues`` are eigenvalues of the covariance matrix of ``X`` with the
  n - 1 denominator, in descending order.
* ``loadings`` P (p x k) have orthonormal columns and ``scores`` T = X P.

Every check of bad input raises :class:`~webapp.analysis.errors.OrdinateError`.

References
----------
Jackson, J. E. (1991). *A User's Guide to Principal Components*. Wiley.
Jackson, J. E. & Mudholkar, G. S. (1979). Control procedures for residuals
    associated with principal component analysis. *Technometrics* 21(3), 341-349.
Imhof, J. P. (1961). Computing the distribution of quadratic forms in normal
    variables. *Biometrika* 48(3/4), 419-426.
Box, G. E. P. (1954). Some theorems on quadratic forms applied in the study of
    analysis of variance problems, I. *Annals of Mathematical Statistics* 25(2), 290-302.
MacGregor, J. F. & Kourti, T. (1995). Statistical process control of
    multivariate processes. *Control Engineering Practice* 3(3), 403-414.
Tracy, N. D., Young, J. C. & Mason, R. L. (1992). Multivariate control charts
    for individual observations. *Journal of Quality Technology* 24(2), 88-95.
Westerhuis, J. A., Gurden, S. P. & Smilde, A. K. (2000). Generalized
    contribution plots in multivariate statistical process monitoring.
    *Chemometrics and Intelligent Laboratory Systems* 51, 95-114.
"""

from __future__ import annotations

import math
import numbers

import numpy as np
from scipy import stats

from webapp.analysis.checks import float_array, whole_number
from webapp.analysis.errors import OrdinateError

__all__ = [
    "ZERO_EIGENVALUE_RTOL",
    "count_nonzero_eigenvalues",
    "hotelling_t2",
    "t2_limit",
    "t2_limit_beta",
    "q_residuals",
    "q_limit",
    "q_limit_from_moments",
    "q_limit_box",
    "t2_contributions",
    "q_residual_row",
    "q_contributions",
]

#: An eigenvalue at or below this fraction of the largest one is treated as zero.
#: Eigensolvers return the eigenvalues of a rank-deficient covariance matrix as
#: roundoff of order p * machine epsilon * lambda_1 (about 1e-13 for p = 1000),
#: so 1e-10 leaves a wide margin while keeping any component whose variance is
#: measurable in double precision.
ZERO_EIGENVALUE_RTOL = 1e-10

# Loadings must be orthonormal for T = X P and E = X - T P^T to mean what the
# formulas assume; this tolerance accepts any solver's roundoff.
_ORTHONORMAL_ATOL = 1e-6

# Rows per block in q_residuals: about 4 MB of float64 per temporary block.
_BLOCK_ELEMENTS = 1 << 19


# --------------------------------------------------------------------------
# argument checks shared by the public functions (also used by ellipses.py)
# --------------------------------------------------------------------------

def _check_confidence(confidence: float) -> float:
    if isinstance(confidence, bool) or not isinstance(confidence, numbers.Real):
        raise OrdinateError(
            f"The confidence level must be a number between 0 and 1 (for example 0.95), "
            f"not {confidence!r}."
        )
    value = float(confidence)
    if not (0.0 < value < 1.0):
        raise OrdinateError(
            f"The confidence level must lie strictly between 0 and 1 (for example 0.95 "
            f"for 95 %); {value!r} was given."
        )
    return value


_check_count = whole_number
_as_float_array = float_array


def _check_finite(array: np.ndarray, name: str) -> None:
    if not np.all(np.isfinite(array)):
        bad = np.argwhere(~np.isfinite(array))[0]
        where = ", ".join(str(int(i)) for i in bad)
        raise OrdinateError(
            f"The {name} contain a missing or infinite value (first at position {where}); "
            f"remove or fill missing values before computing diagnostics."
        )


def _check_eigenvalues(eigenvalues, rtol: float) -> np.ndarray:
    lam = _as_float_array(eigenvalues, "eigenvalues", 1)
    if lam.size == 0:
        raise OrdinateError("At least one eigenvalue is needed; none was given.")
    _check_finite(lam, "eigenvalues")
    largest = float(np.max(np.abs(lam)))
    if np.any(lam < -rtol * largest):
        raise OrdinateError(
            "An eigenvalue is clearly negative, which a covariance matrix cannot have; "
            "the eigenvalues passed in do not come from a covariance matrix."
        )
    return lam


def _nonzero_mask(lam: np.ndarray, rtol: float) -> np.ndarray:
    largest = float(np.max(lam)) if lam.size else 0.0
    if largest <= 0.0:
        return np.zeros(lam.shape, dtype=bool)
    return lam > rtol * largest


def _check_loadings(loadings) -> np.ndarray:
    P = _as_float_array(loadings, "loadings", 2)
    if P.shape[1] == 0:
        raise OrdinateError("The loadings have no component columns; at least one is needed.")
    _check_finite(P, "loadings")
    gram = P.T @ P
    if not np.allclose(gram, np.eye(P.shape[1]), rtol=0.0, atol=_ORTHONORMAL_ATOL):
        raise OrdinateError(
            "The loading vectors are not orthonormal (unit length and mutually "
            "perpendicular), so scores and residuals would be wrong; pass the loadings "
            "of the fitted PCA model unchanged."
        )
    return P


# --------------------------------------------------------------------------
# Hotelling's T²
# --------------------------------------------------------------------------

def count_nonzero_eigenvalues(eigenvalues, *, rtol: float = ZERO_EIGENVALUE_RTOL) -> int:
    """Number of eigenvalues that carry variance (greater than ``rtol`` x the largest).

    This is the number of components that :func:`hotelling_t2` actually sums
    over, and so the ``n_components`` to pass to :func:`t2_limit` when some
    retained components have (numerically) zero variance.
    """
    lam = _check_eigenvalues(eigenvalues, rtol)
    return int(np.count_nonzero(_nonzero_mask(lam, rtol)))


def hotelling_t2(
    scores: np.ndarray, eigenvalues: np.ndarray, *, rtol: float = ZERO_EIGENVALUE_RTOL
) -> np.ndarray:
    """Hotelling's T² of each sample in the space of the k retained components.

    .. math:: T^2_i = \\sum_{a=1}^{k} t_{ia}^2 / \\lambda_a

    which is the squared Mahalanobis distance of the score vector from the
    origin under the diagonal score covariance diag(λ) (Jackson 1991, ch. 1-2).

    Components whose eigenvalue is at most ``rtol`` times the largest one are
    left out of the sum. Such a component has no variance: its scores are
    floating-point roundoff, and dividing roundoff by roundoff gives arbitrary
    or infinite values. Leaving it out is the same as using the Moore-Penrose
    pseudo-inverse of the score covariance, the usual treatment of a singular
    covariance matrix. The T² limit must then use the number of components kept
    (:func:`count_nonzero_eigenvalues`). If no component carries variance, every
    T² is 0.

    Parameters
    ----------
    scores : array of shape (n_samples, k)
    eigenvalues : array of shape (k,)
        Covariance eigenvalues (n - 1 denominator) of the same k components.
    rtol : float
        Relative threshold below which an eigenvalue counts as zero.

    Returns
    -------
    t2 : array of shape (n_samples,)
    """
    T = _as_float_array(scores, "scores", 2)
    lam = _check_eigenvalues(eigenvalues, rtol)
    if T.shape[1] != lam.size:
        raise OrdinateError(
            f"The scores have {T.shape[1]} component column(s) but {lam.size} eigenvalue(s) "
            f"were given; they must describe the same components."
        )
    _check_finite(T, "scores")
    keep = _nonzero_mask(lam, rtol)
    if not np.any(keep):
        return np.zeros(T.shape[0])
    return np.sum(T[:, keep] ** 2 / lam[keep], axis=1)


def t2_limit(
    n_samples: int, n_components: int, confidence: float, *, new_samples: bool = False
) -> float:
    """Upper control limit for Hotelling's T² with k components from n samples.

    Samples that were used to fit the model (``new_samples=False``), the form
    used throughout the MSPC literature (Jackson 1991; MacGregor & Kourti 1995):

    .. math:: T^2_{lim} = \\frac{k (n-1)}{n-k} F_{conf}(k, n-k)

    Strictly, this is the distribution of Hotelling's one-sample statistic; for
    an individual sample that is part of the fit the exact limit is the Beta
    form of :func:`t2_limit_beta`, which is smaller. The F form is therefore a
    conservative limit for in-model samples (it flags fewer of them); the two
    agree as n grows.

    New samples, independent of the data the model was fitted on
    (Tracy, Young & Mason 1992):

    .. math:: T^2_{lim} = \\frac{k (n+1)(n-1)}{n (n-k)} F_{conf}(k, n-k)

    Both assume multivariate-normal scores. ``F_conf`` is the ``confidence``
    quantile of the F distribution.

    Parameters
    ----------
    n_samples : int
        Number of samples the model was fitted on, n.
    n_components : int
        Number of components k in the T² (1 <= k < n).
    confidence : float
        In (0, 1), e.g. 0.95.
    new_samples : bool
        Limit for samples that were not part of the fit.
    """
    n, k, conf = _check_t2_arguments(n_samples, n_components, confidence, beta_form=False)
    f_quantile = float(stats.f.ppf(conf, k, n - k))
    if new_samples:
        return k * (n + 1) * (n - 1) / (n * (n - k)) * f_quantile
    return k * (n - 1) / (n - k) * f_quantile


def t2_limit_beta(n_samples: int, n_components: int, confidence: float) -> float:
    """Exact T² limit for samples that are part of the fitted model (Tracy, Young & Mason 1992).

    When mean and covariance are estimated from the same n samples that are
    tested, T² of each of them follows a scaled Beta distribution:

    .. math:: T^2_{lim} = \\frac{(n-1)^2}{n} B_{conf}(k/2, (n-k-1)/2)

    It can never exceed (n-1)²/n, the largest T² any sample in the fit can
    reach. Requires k <= n - 2.
    """
    n, k, conf = _check_t2_arguments(n_samples, n_components, confidence, beta_form=True)
    return (n - 1) ** 2 / n * float(stats.beta.ppf(conf, k / 2.0, (n - k - 1) / 2.0))


def _check_t2_arguments(
    n_samples: int, n_components: int, confidence: float, *, beta_form: bool
) -> tuple[int, int, float]:
    n = _check_count(n_samples, "number of samples", 2)
    k = _check_count(n_components, "number of components", 1)
    conf = _check_confidence(confidence)
    largest_k = n - 2 if beta_form else n - 1
    if k > largest_k:
        raise OrdinateError(
            f"A T² limit with {k} component(s) needs at least {k + (2 if beta_form else 1)} "
            f"samples; the model has {n}. Use fewer components or more samples."
        )
    return n, k, conf


# --------------------------------------------------------------------------
# Q residual (SPE)
# --------------------------------------------------------------------------

def q_residuals(X: np.ndarray, scores: np.ndarray, loadings: np.ndarray) -> np.ndarray:
    """Q residual (squared prediction error, SPE) of each row of X.

    .. math:: Q_i = \\sum_j e_{ij}^2, \\qquad E = X - T P^T

    Computed block by block over rows, so the only temporaries are a few MB
    whatever n is (n = 1e6, p = 20 needs no copy of X). The shortcut
    Q = ||x||² - ||t||² is not used: it subtracts two nearly equal numbers when
    the model explains most of the variance and loses all precision.

    Parameters
    ----------
    X : array of shape (n_samples, p), preprocessed.
    scores : array of shape (n_samples, k), T = X P.
    loadings : array of shape (p, k), orthonormal columns.
    """
    X = _as_float_array(X, "data matrix", 2)
    T = _as_float_array(scores, "scores", 2)
    P = _check_loadings(loadings)
    n, p = X.shape
    if P.shape[0] != p:
        raise OrdinateError(
            f"The loadings describe {P.shape[0]} variable(s) but the data have {p} column(s)."
        )
    if T.shape != (n, P.shape[1]):
        raise OrdinateError(
            f"The scores have shape {T.shape}; expected {(n, P.shape[1])} "
            f"(one row per sample, one column per component)."
        )
    q = np.empty(n)
    block = max(1, _BLOCK_ELEMENTS // max(p, 1))
    for start in range(0, n, block):
        stop = min(start + block, n)
        residual = X[start:stop] - T[start:stop] @ P.T
        q[start:stop] = np.einsum("ij,ij->i", residual, residual)
    # A NaN/inf anywhere in a row of X or T propagates to that row's Q, so one
    # check of the result replaces a full-size isfinite pass over X.
    if not np.all(np.isfinite(q)):
        row = int(np.flatnonzero(~np.isfinite(q))[0])
        raise OrdinateError(
            f"Row {row} of the data or scores contains a missing or infinite value; "
            f"remove or fill missing values before computing Q residuals."
        )
    return q


def q_limit(
    residual_eigenvalues: np.ndarray,
    confidence: float,
    *,
    total_variance: float | None = None,
    rtol: float = ZERO_EIGENVALUE_RTOL,
) -> float:
    """Upper limit for Q from the eigenvalues of the components left out of the model.

    Jackson & Mudholkar (1979), with θ_i = Σ_{j>k} λ_j^i; see
    :func:`q_limit_from_moments` for the formula and its fall-back.

    When the model keeps as many components as the data have rank, the
    residual eigenvalues are zero up to roundoff, Q is zero and 0.0 is returned.
    Negative residual eigenvalues can only be roundoff from the eigensolver and
    are treated as zero. If ``total_variance`` (the trace of the covariance
    matrix, = sum of all eigenvalues) is given, residual eigenvalues at most
    ``rtol * total_variance`` count as zero, so a full-rank model gives exactly
    0.0; an eigenvalue below ``-1e-6 * total_variance`` is then reported as an
    error, since roundoff cannot explain it.

    Parameters
    ----------
    residual_eigenvalues : array of shape (p_rest,)
        Covariance eigenvalues λ_{k+1}, ..., λ_rank (n - 1 denominator). May be empty.
    confidence : float
        In (0, 1).
    total_variance : float, optional
        Scale for deciding which eigenvalues are numerically zero.
    rtol : float
        Relative threshold (to ``total_variance``) for a zero eigenvalue.
    """
    conf = _check_confidence(confidence)
    lam = _as_float_array(residual_eigenvalues, "residual eigenvalues", 1)
    _check_finite(lam, "residual eigenvalues")
    if total_variance is not None:
        total = float(total_variance)
        if not math.isfinite(total) or total <= 0.0:
            raise OrdinateError(
                f"The total variance must be a positive number; {total_variance!r} was given."
            )
        if np.any(lam < -1e-6 * total):
            raise OrdinateError(
                "A residual eigenvalue is clearly negative, which a covariance matrix "
                "cannot have; the eigenvalues passed in do not come from a covariance matrix."
            )
        lam = np.where(lam > rtol * total, lam, 0.0)
    else:
        lam = np.clip(lam, 0.0, None)
    scale = float(np.max(lam)) if lam.size else 0.0
    if scale == 0.0:
        return 0.0
    # The limit scales with the eigenvalues; working with λ/max(λ) keeps λ³
    # from underflowing for tiny residual variances.
    unit = lam / scale
    return scale * q_limit_from_moments(
        float(np.sum(unit)), float(np.sum(unit**2)), float(np.sum(unit**3)), conf
    )


def q_limit_from_moments(theta1: float, theta2: float, theta3: float, confidence: float) -> float:
    """Jackson-Mudholkar Q limit from θ1, θ2, θ3 (sums of residual eigenvalues to powers 1, 2, 3).

    Jackson & Mudholkar (1979):

    .. math::

        h_0 = 1 - \\frac{2 \\theta_1 \\theta_3}{3 \\theta_2^2}, \\qquad
        Q_{lim} = \\theta_1 \\left[ \\frac{c \\sqrt{2 \\theta_2 h_0^2}}{\\theta_1}
                  + 1 + \\frac{\\theta_2 h_0 (h_0 - 1)}{\\theta_1^2} \\right]^{1/h_0}

    with c the standard-normal quantile at ``confidence``. θ_i may be computed
    from traces (θ1 = tr(Σ_E), θ2 = tr(Σ_E²), θ3 = tr(Σ_E³) of the residual
    covariance) when not every eigenvalue is known.

    The formula rests on (Q/θ1)^h0 being approximately normal, which needs
    h0 > 0. When the residual eigenvalues are very uneven (one large and many
    small ones) h0 can be zero or negative, and for confidence < 0.5 the
    bracket can become non-positive. In those cases Pearson's three-moment
    chi-square approximation, as given by Imhof (1961, Biometrika 48:419-426),
    is used instead:

    .. math:: Q_{lim} = \\theta_1 + \\sqrt{2\\theta_2}\\,
              \\frac{\\chi^2_{conf}(h^*) - h^*}{\\sqrt{2 h^*}}, \\qquad
              h^* = \\theta_2^3 / \\theta_3^2

    (clipped at 0). It matches the mean, variance and skewness of Q. Box's
    (1954) two-moment approximation g χ²(h), g = θ2/θ1, h = θ1²/θ2, was the
    other candidate; in simulations of such uneven spectra it put the 99 %
    limit too low (about 1.8 % of samples above it), while the three-moment
    form stayed close to 1 %. Box's form stays available as
    :func:`q_limit_box` for callers that know only θ1 and θ2. All θ zero gives 0.0.
    """
    conf = _check_confidence(confidence)
    t1, t2, t3 = (
        _check_theta(name, value)
        for name, value in (("theta1", theta1), ("theta2", theta2), ("theta3", theta3))
    )
    if t1 == 0.0:
        return 0.0
    if t2 == 0.0 or t3 == 0.0:
        raise OrdinateError(
            "theta2 and theta3 must be positive whenever theta1 is: they are sums of "
            "powers of the same residual eigenvalues."
        )
    h0 = 1.0 - 2.0 * t1 * t3 / (3.0 * t2**2)
    c = float(stats.norm.ppf(conf))
    if h0 > 0.0:
        # [1 + h0*u]^(1/h0) written as exp(log1p(h0*u)/h0) stays accurate when h0 is small.
        u = c * math.sqrt(2.0 * t2) / t1 + t2 * (h0 - 1.0) / t1**2
        if h0 * u > -1.0:
            return t1 * math.exp(math.log1p(h0 * u) / h0)
    return _q_limit_three_moment(t1, t2, t3, conf)


def q_limit_box(theta1: float, theta2: float, confidence: float) -> float:
    """Q limit from θ1 and θ2 alone: Box's (1954) approximation Q ≈ g χ²(h).

    .. math:: g = \\theta_2/\\theta_1, \\quad h = \\theta_1^2/\\theta_2, \\quad
              Q_{lim} = g\\, \\chi^2_{conf}(h)

    It matches the mean θ1 and variance 2θ2 of Q. Meant for callers that know
    only tr(Σ_E) and tr(Σ_E²) of the residual covariance (for example when a
    truncated solver computed only the leading eigenvalues and θ3 is unknown).
    Prefer :func:`q_limit` or :func:`q_limit_from_moments` when θ3 is available:
    Box's form puts high-confidence limits too low when the residual
    eigenvalues are very uneven. θ1 = 0 gives 0.0.
    """
    conf = _check_confidence(confidence)
    t1, t2 = (_check_theta(name, value) for name, value in (("theta1", theta1), ("theta2", theta2)))
    if t1 == 0.0:
        return 0.0
    if t2 == 0.0:
        raise OrdinateError(
            "theta2 must be positive whenever theta1 is: both are sums of powers of "
            "the same residual eigenvalues."
        )
    return t2 / t1 * float(stats.chi2.ppf(conf, t1**2 / t2))


def _check_theta(name: str, value) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise OrdinateError(f"{name} must be a number, not {value!r}.")
    value = float(value)
    if not math.isfinite(value) or value < 0.0:
        raise OrdinateError(
            f"{name} must be a finite number that is zero or positive (it is a sum "
            f"of powers of variances); {value!r} was given."
        )
    return value


def _q_limit_three_moment(theta1: float, theta2: float, theta3: float, confidence: float) -> float:
    """Pearson's three-moment chi-square approximation of Q (Imhof 1961)."""
    h = theta2**3 / theta3**2
    standardized = (float(stats.chi2.ppf(confidence, h)) - h) / math.sqrt(2.0 * h)
    return max(0.0, theta1 + math.sqrt(2.0 * theta2) * standardized)


# --------------------------------------------------------------------------
# contributions of each variable
# --------------------------------------------------------------------------

def _check_row_and_loadings(x_row, loadings) -> tuple[np.ndarray, np.ndarray]:
    x = _as_float_array(x_row, "sample values", 1)
    P = _check_loadings(loadings)
    if x.size != P.shape[0]:
        raise OrdinateError(
            f"The sample has {x.size} value(s) but the loadings describe {P.shape[0]} "
            f"variable(s); pass one preprocessed row of the data."
        )
    _check_finite(x, "sample values")
    return x, P


def t2_contributions(
    x_row: np.ndarray,
    loadings: np.ndarray,
    eigenvalues: np.ndarray,
    *,
    rtol: float = ZERO_EIGENVALUE_RTOL,
) -> np.ndarray:
    """Contribution of each variable to one sample's T² (Westerhuis, Gurden & Smilde 2000).

    .. math:: c_j = x_j \\sum_a \\frac{t_a}{\\lambda_a} p_{ja}, \\qquad t = P^T x

    Summed over the variables, c_j gives exactly T² = Σ_a t_a²/λ_a. A
    contribution can be negative: the variable then pulls the sample towards
    the model centre. Components with (numerically) zero eigenvalue are left
    out, as in :func:`hotelling_t2`.

    Parameters
    ----------
    x_row : array of shape (p,), one preprocessed sample.
    loadings : array of shape (p, k), orthonormal columns.
    eigenvalues : array of shape (k,).
    """
    x, P = _check_row_and_loadings(x_row, loadings)
    lam = _check_eigenvalues(eigenvalues, rtol)
    if lam.size != P.shape[1]:
        raise OrdinateError(
            f"The loadings have {P.shape[1]} component(s) but {lam.size} eigenvalue(s) "
            f"were given; they must describe the same components."
        )
    keep = _nonzero_mask(lam, rtol)
    t = x @ P[:, keep]
    return x * (P[:, keep] @ (t / lam[keep]))


def q_residual_row(x_row: np.ndarray, loadings: np.ndarray) -> np.ndarray:
    """Signed residual e = x - P Pᵀ x of one preprocessed sample.

    The sign says whether the sample is above (+) or below (-) what the model
    reconstructs for that variable, in preprocessed units.
    """
    x, P = _check_row_and_loadings(x_row, loadings)
    return x - P @ (P.T @ x)


def q_contributions(x_row: np.ndarray, loadings: np.ndarray) -> np.ndarray:
    """Contribution e_j² of each variable to one sample's Q; they sum to Q.

    Squares lose the sign; use :func:`q_residual_row` to show signed residuals.
    """
    e = q_residual_row(x_row, loadings)
    return e * e
