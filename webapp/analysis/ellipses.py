"""Ellipses for scores plots: sigma ellipses of a point cloud and the model's Hotelling T² ellipse.

Plotting libraries have no rotated-ellipse shape, so every ellipse carries its
own closed parametric curve (``x``, ``y``) ready to draw as a line.

Two different questions are answered here:

* :func:`sigma_ellipse` describes a group of points (a batch, a supplier, a
  class): mean and covariance of those points, drawn at k standard deviations.
  For bivariate-normal points the share inside is 1 - exp(-k²/2), so the
  1-sigma ellipse holds about 39 % of the points, not the 68 % a 1-sigma
  interval holds in one dimension.
* :func:`hotelling_ellipse` is the model's T² limit restricted to one pair of
  components, centred at the origin of the scores.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

import numpy as np

from webapp.analysis.diagnostics import _check_confidence, _check_count, t2_limit
from webapp.analysis.checks import float_array
from webapp.analysis.errors import OrdinateError

__all__ = [
    "Ellipse",
    "sigma_coverage",
    "sigma_for_coverage",
    "sigma_ellipse",
    "try_sigma_ellipse",
    "hotelling_ellipse",
    "component_ellipse",
]

# A covariance whose smaller eigenvalue is below this fraction of the larger
# one describes points on a line (up to roundoff): no ellipse has an area there.
_DEGENERATE_RTOL = 1e-10


@dataclass(frozen=True, eq=False)
class Ellipse:
    """An ellipse in a scores plot and how many points it holds.

    ``eq=False`` because the curve arrays make field-by-field equality
    meaningless; the arrays are read-only.

    Attributes
    ----------
    center : (x, y)
    semi_axes : (major, minor) half-lengths, major >= minor.
    angle : float
        Direction of the major axis from the +x axis, radians in (-π/2, π/2].
    x, y : arrays of n_curve + 1 points; the last point repeats the first.
    level : float
        k (number of standard deviations) for ``kind == "sigma"``, the
        confidence for ``kind == "hotelling"``.
    kind : "sigma" or "hotelling".
    expected_coverage : float
        Share of points expected inside under normality: 1 - exp(-k²/2) for a
        sigma ellipse, the confidence for a Hotelling ellipse.
    observed_fraction : float or None
        Share of the given points inside (boundary included); None when no
        points were given.
    n_points : int
        Number of points the observed fraction is based on (0 when none).
    """

    center: tuple[float, float]
    semi_axes: tuple[float, float]
    angle: float
    x: np.ndarray
    y: np.ndarray
    level: float
    kind: str
    expected_coverage: float
    observed_fraction: float | None
    n_points: int


def _check_positive_real(value, name: str) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise OrdinateError(f"The {name} must be a number, not {value!r}.")
    value = float(value)
    if not math.isfinite(value) or value <= 0.0:
        raise OrdinateError(f"The {name} must be a positive number; {value!r} was given.")
    return value


def _check_points(points, name: str) -> np.ndarray:
    xy = float_array(points, name, 2)
    if xy.shape[1] != 2:
        raise OrdinateError(
            f"The {name} must be a table with two columns (x and y); got shape {xy.shape}."
        )
    if not np.all(np.isfinite(xy)):
        row = int(np.flatnonzero(~np.all(np.isfinite(xy), axis=1))[0])
        raise OrdinateError(
            f"Point {row} of the {name} has a missing or infinite coordinate; "
            f"leave such points out of the ellipse."
        )
    return xy


def sigma_coverage(k: float) -> float:
    """Share of a bivariate-normal population inside its k-sigma ellipse: 1 - exp(-k²/2).

    The squared Mahalanobis distance of a bivariate-normal point follows a
    chi-square distribution with 2 degrees of freedom, whose CDF is
    1 - exp(-x/2); at x = k² this gives 39.35 %, 86.47 % and 98.89 % for k = 1, 2, 3.
    """
    k = _check_positive_real(k, "number of standard deviations")
    return -math.expm1(-k * k / 2.0)


def sigma_for_coverage(coverage: float) -> float:
    """The k whose sigma ellipse holds ``coverage`` of a bivariate-normal population: sqrt(-2 ln(1 - coverage))."""
    coverage = _check_confidence(coverage)
    return math.sqrt(-2.0 * math.log1p(-coverage))


def _closed_curve(
    center: tuple[float, float], major: float, minor: float, angle: float, n_curve: int
) -> tuple[np.ndarray, np.ndarray]:
    phi = np.linspace(0.0, 2.0 * np.pi, n_curve + 1)
    u = major * np.cos(phi)
    v = minor * np.sin(phi)
    cos_a, sin_a = math.cos(angle), math.sin(angle)
    x = center[0] + u * cos_a - v * sin_a
    y = center[1] + u * sin_a + v * cos_a
    # linspace's end point differs from the start by roundoff; close exactly.
    x[-1], y[-1] = x[0], y[0]
    x.setflags(write=False)
    y.setflags(write=False)
    return x, y


def _axis_angle(vector: np.ndarray) -> float:
    angle = math.atan2(float(vector[1]), float(vector[0]))
    # An axis has no direction: fold into (-π/2, π/2].
    if angle <= -math.pi / 2:
        angle += math.pi
    elif angle > math.pi / 2:
        angle -= math.pi
    return angle


def sigma_ellipse(points: np.ndarray, k: float, n_curve: int = 120) -> Ellipse:
    """The k-sigma ellipse of a 2-D point cloud.

    Centre = mean of the points, shape = their sample covariance S (ddof = 1);
    semi-axes are k·sqrt(eigenvalues of S) along its eigenvectors. A point is
    inside when its squared Mahalanobis distance (p - mean)ᵀ S⁻¹ (p - mean) is
    at most k². ``expected_coverage`` is :func:`sigma_coverage` (k), which holds
    for known mean and covariance; with both estimated from the same m points
    the in-sample share is slightly different for small m (the squared
    distances then follow (m-1)²/m · Beta(1, (m-3)/2)).

    Raises OrdinateError for fewer than 3 points or when the points lie on a
    line or coincide (no ellipse exists); :func:`try_sigma_ellipse` returns
    None instead.
    """
    xy = _check_points(points, "points")
    k = _check_positive_real(k, "number of standard deviations")
    n_curve = _check_count(n_curve, "number of curve points", 8)
    m = xy.shape[0]
    if m < 3:
        raise OrdinateError(
            f"A sigma ellipse needs at least 3 points; this group has {m}."
        )
    center = xy.mean(axis=0)
    cov = np.cov(xy, rowvar=False, ddof=1)
    eigvals, eigvecs = np.linalg.eigh(cov)  # ascending
    if eigvals[1] <= 0.0 or eigvals[0] <= _DEGENERATE_RTOL * eigvals[1]:
        raise OrdinateError(
            f"The {m} points lie on a straight line or on top of each other, so they "
            f"have no spread in one direction and no sigma ellipse can be drawn."
        )
    major, minor = k * math.sqrt(eigvals[1]), k * math.sqrt(eigvals[0])
    angle = _axis_angle(eigvecs[:, 1])
    center_t = (float(center[0]), float(center[1]))
    x, y = _closed_curve(center_t, major, minor, angle, n_curve)

    d = xy - center
    mahalanobis_sq = np.einsum("ij,ij->i", d @ np.linalg.inv(cov), d)
    inside = float(np.mean(mahalanobis_sq <= k * k))
    return Ellipse(
        center=center_t,
        semi_axes=(major, minor),
        angle=angle,
        x=x,
        y=y,
        level=k,
        kind="sigma",
        expected_coverage=sigma_coverage(k),
        observed_fraction=inside,
        n_points=m,
    )


def try_sigma_ellipse(points: np.ndarray, k: float, n_curve: int = 120) -> Ellipse | None:
    """Like :func:`sigma_ellipse`, but None when the points admit no ellipse.

    "No ellipse" means fewer than 3 points, or points on a line or on top of
    each other: situations a plot meets routinely with small groups. Invalid
    arguments (k <= 0, wrong shape, missing coordinates) still raise.
    """
    xy = _check_points(points, "points")
    _check_positive_real(k, "number of standard deviations")
    _check_count(n_curve, "number of curve points", 8)
    if xy.shape[0] < 3:
        return None
    try:
        return sigma_ellipse(xy, k, n_curve)
    except OrdinateError:
        return None  # only degeneracy remains possible after the checks above


def hotelling_ellipse(
    eigenvalue_x: float,
    eigenvalue_y: float,
    n_samples: int,
    confidence: float,
    n_curve: int = 120,
    *,
    scores: np.ndarray | None = None,
) -> Ellipse:
    """The model's Hotelling T² ellipse on one pair of components, centred at the origin.

    With T²_lim the in-model F-form limit for k = 2 (:func:`t2_limit`,
    Jackson 1991; MacGregor & Kourti 1995),

    .. math:: t_a^2/\\lambda_a + t_b^2/\\lambda_b = T^2_{lim}, \\qquad
              T^2_{lim} = \\frac{2 (n-1)}{n-2} F_{conf}(2, n-2)

    so the semi-axes are sqrt(λ_a T²_lim) along the x axis and sqrt(λ_b T²_lim)
    along the y axis. Scores of a PCA are uncorrelated, so the ellipse is not
    rotated; ``angle`` is 0 when the x component has the larger eigenvalue and
    π/2 otherwise.

    If ``scores`` (m x 2, the two components in the same order) are given,
    ``observed_fraction`` is the share with t_a²/λ_a + t_b²/λ_b <= T²_lim.
    ``expected_coverage`` is the nominal confidence; for the model's own
    samples the F-form limit is conservative (slightly more than that share
    falls inside, see :func:`~webapp.analysis.diagnostics.t2_limit`).
    """
    lam_x = _check_positive_real(eigenvalue_x, "eigenvalue of the x component")
    lam_y = _check_positive_real(eigenvalue_y, "eigenvalue of the y component")
    n_curve = _check_count(n_curve, "number of curve points", 8)
    n = _check_count(n_samples, "number of samples", 3)
    conf = _check_confidence(confidence)
    limit = t2_limit(n, 2, conf)

    semi_x, semi_y = math.sqrt(lam_x * limit), math.sqrt(lam_y * limit)
    if semi_x >= semi_y:
        major, minor, angle = semi_x, semi_y, 0.0
    else:
        major, minor, angle = semi_y, semi_x, math.pi / 2
    phi = np.linspace(0.0, 2.0 * np.pi, n_curve + 1)
    # Drawn axis-aligned directly so that no cos(π/2) roundoff enters the curve.
    x = semi_x * np.cos(phi)
    y = semi_y * np.sin(phi)
    x[-1], y[-1] = x[0], y[0]
    x.setflags(write=False)
    y.setflags(write=False)

    observed: float | None = None
    m = 0
    if scores is not None:
        t = _check_points(scores, "scores")
        m = t.shape[0]
        if m > 0:
            t2 = t[:, 0] ** 2 / lam_x + t[:, 1] ** 2 / lam_y
            observed = float(np.mean(t2 <= limit))
    return Ellipse(
        center=(0.0, 0.0),
        semi_axes=(major, minor),
        angle=angle,
        x=x,
        y=y,
        level=conf,
        kind="hotelling",
        expected_coverage=conf,
        observed_fraction=observed,
        n_points=m,
    )


def component_ellipse(variance_x: float, variance_y: float, k: float, n_curve: int = 120) -> Ellipse:
    """The k-sigma ellipse of the scores of two components: centred at 0, axes k·sqrt(eigenvalue).

    Scores of different components are uncorrelated with variances equal to the
    eigenvalues (common practice), so this is the ellipse of all rows, not of the sample.
    """
    k = _check_positive_real(k, "number of standard deviations")
    sx, sy = k * math.sqrt(variance_x), k * math.sqrt(variance_y)
    major, minor = max(sx, sy), min(sx, sy)
    angle = 0.0 if sx >= sy else math.pi / 2
    x, y = _closed_curve((0.0, 0.0), major, minor, angle, n_curve)
    return Ellipse(center=(0.0, 0.0), semi_axes=(major, minor), angle=angle, x=x, y=y, level=k, kind="sigma",
                   expected_coverage=sigma_coverage(k), observed_fraction=None, n_points=0)
