"""Argument checks and the zero-eigenvalue rule shared by the T², Q and contribution modules.

Every check raises :class:`~webapp.analysis.errors.OrdinateError` in plain words.
"""

from __future__ import annotations

import numbers

import numpy as np

from webapp.analysis.checks import float_array, whole_number
from webapp.analysis.errors import OrdinateError

#: An eigenvalue at or below this fraction of the largest one is treated as zero.
#: Eigensolvers return the eigenvalues of a rank-deficient covariance matrix as
#: roundoff of order p * machine epsilon * lambda_1 (about 1e-13 for p = 1000),
#: so 1e-10 leaves a wide margin while keeping any component whose variance is
#: measurable in double precision.
ZERO_EIGENVALUE_RTOL = 1e-10

# Loadings must be orthonormal for T = X P and E = X - T P^T to mean what the
# formulas assume; this tolerance accepts any solver's roundoff.
_ORTHONORMAL_ATOL = 1e-6


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
