"""Outlier diagnostics for a fitted PCA model: Hotelling's T², Q residuals, limits and contributions.

Conventions shared with the rest of ``webapp.analysis``:

* ``X`` (n x p) is the preprocessed matrix (centred, possibly scaled) that the
  model was fitted on, or new rows preprocessed with the model's centre/scale.
* ``eigenvalues`` are eigenvalues of the covariance matrix of ``X`` with the
  n - 1 denominator, in descending order.
* ``loadings`` P (p x k) have orthonormal columns and ``scores`` T = X P.

Every check of bad input raises :class:`~webapp.analysis.errors.OrdinateError`.

The work is split by job: :mod:`~webapp.analysis.diagnostic_checks` (argument
checks, the zero-eigenvalue rule), :mod:`~webapp.analysis.hotelling` (T² and
its limits), :mod:`~webapp.analysis.q_residual` (Q and its limits) and
:mod:`~webapp.analysis.contributions`. This module gathers their public names
so that ``from webapp.analysis.diagnostics import X`` keeps working.

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

from webapp.analysis.contributions import q_contributions, q_residual_row, t2_contributions
from webapp.analysis.diagnostic_checks import (  # noqa: F401  (ellipses.py uses the checks)
    ZERO_EIGENVALUE_RTOL,
    _as_float_array,
    _check_confidence,
    _check_count,
    _check_eigenvalues,
    _check_finite,
    _check_loadings,
    _nonzero_mask,
)
from webapp.analysis.hotelling import (
    count_nonzero_eigenvalues,
    hotelling_t2,
    model_t2_limit,
    t2_limit,
    t2_limit_beta,
)
from webapp.analysis.q_residual import (
    model_q_limit,
    q_limit,
    q_limit_box,
    q_limit_from_moments,
    q_residuals,
)

__all__ = [
    "ZERO_EIGENVALUE_RTOL",
    "count_nonzero_eigenvalues",
    "hotelling_t2",
    "t2_limit",
    "t2_limit_beta",
    "model_t2_limit",
    "q_residuals",
    "q_limit",
    "q_limit_from_moments",
    "q_limit_box",
    "model_q_limit",
    "t2_contributions",
    "q_residual_row",
    "q_contributions",
]

