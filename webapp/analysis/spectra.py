"""Spectral preprocessing: range selection, row correction and Savitzky–Golay filtering.

These steps act on the *spectral block*: the chosen variables that lie on the
table's variable axis (:mod:`webapp.analysis.variable_axis`), in axis order.
Other numeric columns (a reference value beside the spectrum) pass through
untouched. The recipe applies them first, in this order:

1. **Range selection** keeps the axis variables whose position lies in at
   least one closed range ``lo <= position <= hi``.
2. **Row correction** of each sample (row) ``x`` over the block:

   * SNV, standard normal variate (Barnes, Dhanoa & Lister 1989, Applied
     Spectroscopy 43:772): ``(x - mean(x)) / sd(x)`` with the row's own mean
     and standard deviation (``ddof = 1``, as in the paper);
   * MSC, multiplicative scatter correction (Geladi, MacDougall & Martens 1985,
     Applied Spectroscopy 39:491): the least-squares line ``x ≈ a + b m``
     against the reference spectrum ``m`` (the mean spectrum of the samples
     the model is fitted on), then ``(x - a) / b``. ``m`` is stored with the
     model, so a new batch is corrected against the same reference.

   Missing cells are left out of a row's mean, deviation or line and stay
   missing, for the recipe's missing-value step.
3. **Savitzky–Golay** smoothing or derivative (Savitzky & Golay 1964,
   Analytical Chemistry 36:1627): a least-squares polynomial of the given
   order in a moving window of odd length, evaluated (or differentiated 1 or 2
   times) at the window's centre; computed by ``scipy.signal.savgol_filter``
   along the axis with ``mode="interp"`` (the polynomial fitted to the first or
   last window gives the values at the ends) and ``delta = 1``, so a
   derivative is per variable step, whatever the spacing of the axis. The
   filter never reaches across a gap: each *segment* (a run of adjacent axis
   variables all kept: one per range, split where a variable is turned off)
   is filtered on its own, and the window must fit in every segment.
"""

from __future__ import annotations

import re
import warnings
from dataclasses import dataclass

import numpy as np
import scipy.signal

from webapp.analysis.errors import OrdinateError

ROW_CORRECTIONS = ("none", "snv", "msc")
MAX_SAVGOL_ORDER = 6
MAX_SAVGOL_DERIVATIVE = 2
MIN_SAVGOL_WINDOW = 3
# A row whose standard deviation is below this share of its largest magnitude is flat.
FLAT_TOLERANCE = 1e-12

_ORDINALS = {0: "smoothing", 1: "1st derivative", 2: "2nd derivative"}
_RANGE = re.compile(r"\s*(-?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+))\s*-\s*(-?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+))\s*")


# --- settings: checked and written in one canonical form ---------------------


def canonical_ranges(ranges) -> tuple[tuple[float, float], ...]:
    """Ranges as sorted ``(lo, hi)`` pairs, overlapping ones merged (the union is what counts)."""
    pairs = []
    for pair in ranges:
        try:
            lo, hi = (float(v) for v in pair)
        except (TypeError, ValueError):
            raise OrdinateError(f"A variable range must be two numbers, such as 1100-1700; got {pair!r}.") from None
        if not (np.isfinite(lo) and np.isfinite(hi)):
            raise OrdinateError(f"A variable range must be two finite numbers; got {pair!r}.")
        pairs.append((min(lo, hi), max(lo, hi)))
    merged: list[tuple[float, float]] = []
    for lo, hi in sorted(pairs):
        if merged and lo <= merged[-1][1]:
            merged[-1] = (merged[-1][0], max(hi, merged[-1][1]))
        else:
            merged.append((lo, hi))
    return tuple(merged)


def parse_ranges(text: str) -> tuple[tuple[float, float], ...]:
    """``'1100-1700,2000-2400'`` as range pairs (a minus sign may lead either number)."""
    pairs = []
    for item in str(text).split(","):
        match = _RANGE.fullmatch(item)
        if match is None:
            raise OrdinateError(
                f"Cannot read the variable range '{item.strip()}': write ranges as LOW-HIGH, "
                "separated by commas, such as 1100-1700,2000-2400."
            )
        pairs.append((float(match.group(1)), float(match.group(2))))
    return canonical_ranges(pairs)


def range_text(ranges) -> str:
    """Ranges as users write them: ``1100–1700, 2000–2400``."""
    return ", ".join(f"{_number(lo)}–{_number(hi)}" for lo, hi in ranges)


def check_savgol(settings) -> tuple[int, int, int] | None:
    """``(window, order, derivative)`` checked, or None for no filter."""
    if settings is None:
        return None
    try:
        window, order, derivative = settings
    except (TypeError, ValueError):
        raise OrdinateError(
            f"Savitzky–Golay settings are three whole numbers: window, polynomial order, derivative; got {settings!r}."
        ) from None
    for name, value in (("window", window), ("polynomial order", order), ("derivative", derivative)):
        if isinstance(value, bool) or not float(value).is_integer():
            raise OrdinateError(f"The Savitzky–Golay {name} must be a whole number; got {value!r}.")
    window, order, derivative = int(window), int(order), int(derivative)
    if window < MIN_SAVGOL_WINDOW or window % 2 == 0:
        raise OrdinateError(
            f"The Savitzky–Golay window must be an odd number of points, at least {MIN_SAVGOL_WINDOW}; got {window}."
        )
    if not 0 <= order <= MAX_SAVGOL_ORDER:
        raise OrdinateError(f"The Savitzky–Golay polynomial order must be from 0 to {MAX_SAVGOL_ORDER}; got {order}.")
    if order >= window:
        raise OrdinateError(
            f"The Savitzky–Golay window ({window} points) must be longer than the polynomial order ({order})."
        )
    if not 0 <= derivative <= MAX_SAVGOL_DERIVATIVE:
        raise OrdinateError(f"The Savitzky–Golay derivative must be 0 (smoothing), 1 or 2; got {derivative}.")
    if derivative > order:
        raise OrdinateError(
            f"A derivative of order {derivative} needs a polynomial of at least that order; the order is {order}."
        )
    return window, order, derivative


def savgol_words(settings: tuple[int, int, int]) -> str:
    window, order, derivative = settings
    return f"Savitzky–Golay {_ORDINALS[derivative]} (window {window}, polynomial order {order})"


def row_correction_words(method: str) -> str:
    return {"snv": "standard normal variate (SNV)", "msc": "multiplicative scatter correction (MSC)"}[method]


# --- the maths ---------------------------------------------------------------


def snv(block: np.ndarray) -> tuple[np.ndarray, dict[int, str]]:
    """SNV of each row (Barnes, Dhanoa & Lister 1989); rows that cannot be scaled are returned as reasons."""
    with np.errstate(invalid="ignore", divide="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # a row with no values: refused below
        gaps = np.isnan(block).any()
        centre = np.nanmean(block, axis=1, keepdims=True) if gaps else block.mean(axis=1, keepdims=True)
        spread = (np.nanstd if gaps else np.std)(block, axis=1, ddof=1, keepdims=True)
        corrected = (block - centre) / spread
        size = np.nanmax(np.abs(block), axis=1)
    # A flat row's deviation is rounding noise (about 1e-17 of its level), not a scale.
    bad = ~(np.isfinite(spread[:, 0]) & (spread[:, 0] > FLAT_TOLERANCE * size))
    return corrected, {int(r): "its spectrum is flat over the chosen positions, so SNV cannot scale it" for r in np.flatnonzero(bad)}


def msc(block: np.ndarray, reference: np.ndarray) -> tuple[np.ndarray, dict[int, str]]:
    """MSC of each row against ``reference`` (Geladi, MacDougall & Martens 1985)."""
    present = np.isfinite(block)
    corrected = np.full_like(block, np.nan)
    offsets = np.empty(block.shape[0])
    slopes = np.empty(block.shape[0])
    complete = present.all(axis=1)
    if complete.any():  # the usual case, in one product
        m_centred = reference - reference.mean()
        rows = block[complete]
        slopes[complete] = (rows - rows.mean(1, keepdims=True)) @ m_centred / (m_centred @ m_centred)
        offsets[complete] = rows.mean(1) - slopes[complete] * reference.mean()
    for r in np.flatnonzero(~complete):
        x, m = block[r, present[r]], reference[present[r]]
        if x.size < 2 or np.ptp(m) == 0:
            slopes[r], offsets[r] = np.nan, np.nan
            continue
        slopes[r] = np.dot(x - x.mean(), m - m.mean()) / np.dot(m - m.mean(), m - m.mean())
        offsets[r] = x.mean() - slopes[r] * m.mean()
    good = np.isfinite(slopes) & (slopes > 0)
    corrected[good] = (block[good] - offsets[good, None]) / slopes[good, None]
    reasons = {
        int(r): f"its spectrum does not rise with the reference spectrum (MSC slope {slopes[r]:.3g}), so MSC cannot correct it"
        for r in np.flatnonzero(~good)
    }
    return corrected, reasons


def savgol(block: np.ndarray, settings: tuple[int, int, int], segments) -> tuple[np.ndarray, dict[int, str]]:
    """Savitzky–Golay filter of each segment ``[start, stop)`` of the block's columns, along the axis."""
    window, order, derivative = settings
    complete = np.isfinite(block).all(axis=1)
    out = np.full_like(block, np.nan)
    for start, stop in segments:
        out[complete, start:stop] = scipy.signal.savgol_filter(
            block[complete, start:stop], window, order, deriv=derivative, delta=1.0, axis=1, mode="interp"
        )
    gaps = np.flatnonzero(~complete)
    return out, {int(r): "its spectrum has missing values, which Savitzky–Golay filtering cannot bridge" for r in gaps}


# --- fitted steps ------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class SpectralSteps:
    """Row correction and Savitzky–Golay as fitted: what a new batch goes through.

    ``columns`` are the positions, among the recipe's input variables, of the
    spectral block in axis order; ``segments`` are ``[start, stop)`` runs within
    the block; ``reference`` is MSC's reference spectrum (None otherwise).
    """

    columns: np.ndarray
    segments: tuple[tuple[int, int], ...]
    row_correction: str = "none"
    reference: np.ndarray | None = None
    savgol: tuple[int, int, int] | None = None

    def apply(self, values: np.ndarray) -> tuple[np.ndarray, dict[int, str]]:
        """The input block with its spectral columns corrected and filtered; plus rows that cannot be."""
        block = values[:, self.columns]
        refused: dict[int, str] = {}
        if self.row_correction == "snv":
            block, refused = snv(block)
        elif self.row_correction == "msc":
            block, refused = msc(block, self.reference)
        if self.savgol is not None:
            block, gaps = savgol(block, self.savgol, self.segments)
            for row, reason in gaps.items():
                refused.setdefault(row, reason)
        out = values.copy()
        out[:, self.columns] = block
        return out, refused


def spectral_columns(variables, axis, ranges) -> tuple[tuple[str, ...], np.ndarray, tuple[tuple[int, int], ...]]:
    """The chosen variables after range selection, the block's column positions among them, and its segments.

    Raises when a range selects no variable, naming the range and the axis span.
    """
    index = {name: i for i, name in enumerate(axis.names)}
    positions = dict(zip(axis.names, axis.positions))
    if ranges:
        for lo, hi in ranges:
            if not any(lo <= p <= hi for p in axis.positions):
                low, high = axis.span()
                raise OrdinateError(
                    f"The range {range_text([(lo, hi)])} selects no variable: the variable axis runs from "
                    f"{_number(low)} to {_number(high)}{' ' + axis.unit if axis.unit else ''}."
                )
        variables = tuple(
            v for v in variables if v not in index or any(lo <= positions[v] <= hi for lo, hi in ranges)
        )
    on_axis = [j for j, v in enumerate(variables) if v in index]
    if not on_axis:
        raise OrdinateError(
            "No chosen variable lies on the variable axis, so spectral preprocessing has nothing to work on."
        )
    order = sorted(on_axis, key=lambda j: index[variables[j]])
    axis_index = np.array([index[variables[j]] for j in order])
    breaks = np.flatnonzero(np.diff(axis_index) != 1) + 1
    bounds = [0, *breaks.tolist(), len(order)]
    return variables, np.array(order, dtype=int), tuple(zip(bounds[:-1], bounds[1:]))


def fit_spectral_steps(values, variables, axis, columns, segments, row_correction, savgol_settings, labels,
                       reference_rows=None):
    """Fit the steps on the reference samples and apply them; raises for a sample they cannot take.

    MSC's reference is the mean spectrum of ``reference_rows`` (all rows when None).
    """
    reference = None
    if row_correction == "msc":
        block = values[:, columns] if reference_rows is None else values[reference_rows][:, columns]
        with np.errstate(invalid="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # a position with no values: refused below
            reference = np.nanmean(block, axis=0) if np.isnan(block).any() else block.mean(axis=0)
        if not np.isfinite(reference).all() or np.ptp(reference) == 0:
            raise OrdinateError(
                "MSC needs a reference spectrum that varies along the axis; the mean spectrum of these samples is flat "
                "or has positions with no values."
            )
    if savgol_settings is not None:
        window = savgol_settings[0]
        for start, stop in segments:
            if stop - start < window:
                names = [variables[j] for j in columns[start:stop]]
                raise OrdinateError(
                    f"The Savitzky–Golay window of {window} points is longer than the run of variables "
                    f"{_run_text(names, axis)} ({stop - start} variable(s)). Choose a shorter odd window, "
                    "a wider range, or keep the variables in between."
                )
    steps = SpectralSteps(columns, tuple(segments), row_correction, reference, savgol_settings)
    corrected, refused = steps.apply(values)
    if refused:
        row, reason = next(iter(sorted(refused.items())))
        raise OrdinateError(
            f"Cannot preprocess sample '{labels[row]}': {reason}. "
            + (f"{len(refused) - 1} more sample(s) have the same problem. " if len(refused) > 1 else "")
            + "Leave such samples out, or change the spectral settings."
        )
    return corrected, steps


def _run_text(names, axis) -> str:
    positions = dict(zip(axis.names, axis.positions))
    return f"{_number(positions[names[0]])}–{_number(positions[names[-1]])}"


def _number(value: float) -> str:
    return f"{value:g}" if abs(value) < 1e15 and float(f"{value:g}") == value else repr(float(value))
