"""Hotelling's T² of PCA scores and its control limits.

References
----------
Jackson, J. E. (1991). *A User's Guide to Principal Components*. Wiley.
MacGregor, J. F. & Kourti, T. (1995). Statistical process control of
    multivariate processes. *Control Engineering Practice* 3(3), 403-414.
Tracy, N. D., Young, J. C. & Mason, R. L. (1992). Multivariate control charts
    for individual observations. *Journal of Quality Technology* 24(2), 88-95.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from webapp.analysis.diagnostic_checks import (
    ZERO_EIGENVALUE_RTOL,
    _as_float_array,
    _check_confidence,
    _check_count,
    _check_eigenvalues,
    _check_finite,
    _nonzero_mask,
)
from webapp.analysis.errors import OrdinateError


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


def model_t2_limit(
    n_samples: int, eigenvalues, confidence: float, *, new_samples: bool = False, rtol: float = ZERO_EIGENVALUE_RTOL
) -> float:
    """T² limit for the components that :func:`hotelling_t2` actually sums over.

    A kept component whose eigenvalue is numerically zero is left out of T²,
    so it must be left out of the limit's k too, or the limit comes out too
    high (:func:`count_nonzero_eigenvalues`). No limit exists when that count
    reaches n (or is zero): infinity is returned, so nothing is flagged.
    """
    k = count_nonzero_eigenvalues(eigenvalues, rtol=rtol)
    if k == 0 or k >= n_samples:
        return float("inf")
    return t2_limit(n_samples, k, confidence, new_samples=new_samples)
