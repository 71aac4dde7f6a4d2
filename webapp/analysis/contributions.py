"""Contributions of each variable to one sample's T² and Q.

Reference: Westerhuis, J. A., Gurden, S. P. & Smilde, A. K. (2000). Generalized
contribution plots in multivariate statistical process monitoring.
*Chemometrics and Intelligent Laboratory Systems* 51, 95-114.
"""

from __future__ import annotations

import numpy as np

from webapp.analysis.diagnostic_checks import (
    ZERO_EIGENVALUE_RTOL,
    _as_float_array,
    _check_eigenvalues,
    _check_finite,
    _check_loadings,
    _nonzero_mask,
)
from webapp.analysis.errors import OrdinateError


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
