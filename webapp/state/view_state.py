"""The view state: every setting of one view, validated, and nothing else.

A :class:`ViewState` is immutable and always valid (its constructor checks every
field and raises :class:`ViewStateError`); its URL form lives in
:mod:`webapp.state.url_codec`. See :mod:`webapp.state` for the conventions.
"""

from __future__ import annotations

import dataclasses
import math
import numbers
import re
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

__all__ = [
    "ViewState",
    "ViewStateError",
    "NO_COLOUR",
    "MISSING_POLICIES",
    "CENTRINGS",
    "SCALINGS",
    "TRANSFORMS",
    "ROW_CORRECTIONS",
    "ROWS_ARE",
    "MAX_RANGES",
    "MAX_SAVGOL_WINDOW",
    "MAX_SAVGOL_ORDER",
    "MAX_SAVGOL_DERIVATIVE",
    "ELLIPSE_MODES",
    "BIPLOT_SCALINGS",
    "SLIDE_FIGURES",
    "MAX_PC",
    "MAX_SIGMA_LEVELS",
    "MAX_SIGMA",
    "MIN_CONFIDENCE",
    "MAX_CONFIDENCE",
    "MAX_SLIDE",
    "MAX_ARROWS",
    "MAX_OVERLAID",
    "PAGE_ARROWS",
    "SLIDE_ARROWS",
]


# Allowed choices; the first one listed is not necessarily the default.
MISSING_POLICIES: tuple[str, ...] = ("drop", "mean", "iterative")
CENTRINGS: tuple[str, ...] = ("mean", "none")
SCALINGS: tuple[str, ...] = ("unit", "none", "pareto", "range")
TRANSFORMS: tuple[str, ...] = ("none", "log10", "ln", "log1p", "sqrt")
ELLIPSE_MODES: tuple[str, ...] = ("group", "all")
BIPLOT_SCALINGS: tuple[str, ...] = ("correlation", "distance")
# The figure a saved view shows as a slide, filling the screen.
SLIDE_FIGURES: tuple[str, ...] = ("scores", "variance", "diagnostics", "loadings")
ROW_CORRECTIONS: tuple[str, ...] = ("none", "snv", "msc")
ROWS_ARE: tuple[str, ...] = ("samples", "variables")  # how the file is read: a sample per row, or per column

#: ``ViewState.colour_by`` value meaning "do not colour the points" (URL: ``colour=none``).
NO_COLOUR = ""

MAX_PC = 100  # highest component number a link may ask for; the engine clamps to what the data allow
MAX_SIGMA_LEVELS = 6
MAX_SIGMA = 10.0
MIN_CONFIDENCE = 0.5  # exclusive
MAX_CONFIDENCE = 0.9999  # inclusive
MAX_SLIDE = 1000
MAX_ARROWS = 200  # most arrows (and correlation-circle names) a link may ask for
PAGE_ARROWS = 20  # arrows drawn by default on the dashboard ...
SLIDE_ARROWS = 10  # ... and on a slide, read from the back of a room
MAX_RANGES = 20  # variable ranges a link may hold
MAX_OVERLAID = 5  # further components a loading spectrum may overlay
MAX_SAVGOL_WINDOW = 999  # the engine also checks the window against the data
MAX_SAVGOL_ORDER = 6
MAX_SAVGOL_DERIVATIVE = 2

_TOKEN_PATTERN = re.compile(r"[A-Za-z0-9_-]{16,64}")


class ViewStateError(ValueError):
    """A ``ViewState`` was built with an invalid value: a programming error.

    User input (a pasted link) never raises; it goes through ``parse_query``,
    which turns every problem into a notice instead.
    """


# --------------------------------------------------------------------------------------
# Validation of single values (shared by the constructor and the parser)
# --------------------------------------------------------------------------------------


def _check_text(value: Any, what: str) -> str:
    if not isinstance(value, str) or value == "":
        raise ViewStateError(f"{what} must be a non-empty string, got {value!r}.")
    try:
        value.encode("utf-8")
    except UnicodeEncodeError:
        raise ViewStateError(f"{what} must be valid Unicode text, got {value!r}.") from None
    return value


def _check_optional_text(value: Any, what: str) -> str | None:
    return None if value is None else _check_text(value, what)


def _check_text_tuple(values: Any, what: str) -> tuple[str, ...]:
    if isinstance(values, str):
        raise ViewStateError(f"{what} must be a sequence of strings, not one string ({values!r}).")
    return tuple(sorted({_check_text(v, what) for v in values}))


def _check_choice(value: Any, choices: tuple[str, ...], what: str) -> str:
    if value not in choices:
        raise ViewStateError(f"{what} must be one of {', '.join(choices)}; got {value!r}.")
    return value


def _check_int(value: Any, low: int, high: int, what: str) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise ViewStateError(f"{what} must be a whole number, got {value!r}.")
    value = int(value)
    if not low <= value <= high:
        raise ViewStateError(f"{what} must be between {low} and {high}, got {value}.")
    return value


def _check_bool(value: Any, what: str) -> bool:
    if not isinstance(value, bool):
        raise ViewStateError(f"{what} must be True or False, got {value!r}.")
    return value


def _check_confidence(value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise ViewStateError(f"confidence must be a number, got {value!r}.")
    value = float(value)
    if not (MIN_CONFIDENCE < value <= MAX_CONFIDENCE):
        raise ViewStateError(
            f"confidence must be above {MIN_CONFIDENCE} and at most {MAX_CONFIDENCE}, got {value!r}."
        )
    return value


def _check_view_id(value: Any) -> str | None:
    if value is None or (isinstance(value, str) and _TOKEN_PATTERN.fullmatch(value)):
        return value
    raise ViewStateError(f"saved_view must be None or a link code; got {value!r}.")


def _check_sigma_levels(values: Any) -> tuple[float, ...]:
    levels: set[float] = set()
    for value in values:
        if isinstance(value, bool) or not isinstance(value, numbers.Real):
            raise ViewStateError(f"sigma_levels must hold numbers, got {value!r}.")
        value = float(value)
        if not (0.0 < value <= MAX_SIGMA):  # also rejects NaN
            raise ViewStateError(f"sigma levels must be above 0 and at most {MAX_SIGMA:g}, got {value!r}.")
        levels.add(value)
    if len(levels) > MAX_SIGMA_LEVELS:
        raise ViewStateError(f"at most {MAX_SIGMA_LEVELS} sigma levels are allowed, got {len(levels)}.")
    return tuple(sorted(levels))


def _check_transforms(values: Any) -> tuple[tuple[str, str], ...]:
    pairs = values.items() if isinstance(values, Mapping) else values
    chosen: dict[str, str] = {}
    for pair in pairs:
        try:
            variable, transform = pair
        except (TypeError, ValueError):
            raise ViewStateError(f"transforms must hold (variable, transform) pairs, got {pair!r}.") from None
        variable = _check_text(variable, "a transformed variable's name")
        transform = _check_choice(transform, TRANSFORMS, f"the transform of {variable!r}")
        if variable in chosen and chosen[variable] != transform:
            raise ViewStateError(
                f"variable {variable!r} is given two transforms: {chosen[variable]!r} and {transform!r}."
            )
        chosen[variable] = transform
    return tuple(sorted((v, t) for v, t in chosen.items() if t != "none"))


def _check_ranges(values: Any) -> tuple[tuple[float, float], ...]:
    """Sorted (low, high) pairs with overlapping ones merged: the union is what selects."""
    pairs = []
    for pair in values:
        try:
            low, high = pair
        except (TypeError, ValueError):
            raise ViewStateError(f"ranges must hold (low, high) pairs, got {pair!r}.") from None
        for value in (low, high):
            if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value):
                raise ViewStateError(f"a range must be two finite numbers, got {pair!r}.")
        pairs.append((float(min(low, high)), float(max(low, high))))
    merged: list[tuple[float, float]] = []
    for low, high in sorted(pairs):
        if merged and low <= merged[-1][1]:
            merged[-1] = (merged[-1][0], max(high, merged[-1][1]))
        else:
            merged.append((low, high))
    if len(merged) > MAX_RANGES:
        raise ViewStateError(f"at most {MAX_RANGES} variable ranges are allowed, got {len(merged)}.")
    return tuple(merged)


def _check_savgol(value: Any) -> tuple[int, int, int] | None:
    """(window, order, derivative): window odd, 3 to MAX_SAVGOL_WINDOW, above the order; derivative at most the order."""
    if value is None:
        return None
    try:
        window, order, derivative = value
    except (TypeError, ValueError):
        raise ViewStateError(f"savgol must be None or (window, order, derivative), got {value!r}.") from None
    window = _check_int(window, 3, MAX_SAVGOL_WINDOW, "the Savitzky–Golay window")
    order = _check_int(order, 0, MAX_SAVGOL_ORDER, "the Savitzky–Golay order")
    derivative = _check_int(derivative, 0, MAX_SAVGOL_DERIVATIVE, "the Savitzky–Golay derivative")
    if window % 2 == 0 or order >= window or derivative > order:
        raise ViewStateError(
            f"savgol needs an odd window above the order and a derivative at most the order, got {value!r}."
        )
    return window, order, derivative


def _check_overlay(values: Any) -> tuple[int, ...]:
    if isinstance(values, (str, bytes)):
        raise ViewStateError(f"loading_overlay must be a sequence of component numbers, got {values!r}.")
    numbers_ = tuple(sorted({_check_int(v, 1, MAX_PC, "an overlaid component") for v in values}))
    if len(numbers_) > MAX_OVERLAID:
        raise ViewStateError(f"at most {MAX_OVERLAID} components can be overlaid, got {len(numbers_)}.")
    return numbers_


# --------------------------------------------------------------------------------------
# The state
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ViewState:
    """Everything that defines one view: which data, what is fitted, what is drawn.

    Instances are immutable, validated and canonical: building one with an
    invalid value raises ``ViewStateError``; lists are stored as sorted,
    de-duplicated tuples so that two states describing the same view compare
    (and hash) equal. Use ``replace`` to derive a changed copy.

    Fields fall in three groups, by how much work a change causes:

    * the *recipe* (``recipe_key``) - changing it refits the model;
    * the *diagnostics* settings ``components`` and ``confidence`` - changing them
      recomputes Hotelling's T², Q residuals and their limits, not the fit;
    * everything else - changing it only redraws.

    ``colour_by`` has three meanings: ``None`` colours by the detected group
    column (URL ``colour=auto``), ``NO_COLOUR`` (the empty string) draws every
    point alike (URL ``colour=none``), any other string names the column.
    """

    dataset: str | None = None
    # the recipe: changing any of these refits
    rows_are: str = "samples"  # "variables": the file has one variable per row (read transposed)
    variables_off: tuple[str, ...] = ()
    variables_off_set: str | None = None  # code of a stored list of variables left out (long lists stay out of links)
    excluded: tuple[str, ...] = ()
    excluded_set: str | None = None  # code of a stored list of excluded samples (long lists stay out of links)
    transforms: tuple[tuple[str, str], ...] = ()
    missing: str = "drop"
    centring: str = "mean"
    scaling: str = "unit"
    id_column: str | None = None
    ranges: tuple[tuple[float, float], ...] = ()  # kept ranges of the variable axis (spectra)
    row_correction: str = "none"
    savgol: tuple[int, int, int] | None = None  # Savitzky–Golay window, polynomial order, derivative
    # diagnostics: recomputed cheaply, no refit
    components: int | None = None
    confidence: float = 0.95
    # drawing only
    pc_x: int = 1
    pc_y: int = 2
    sigma_levels: tuple[float, ...] = (2.0,)
    ellipse_by: str = "group"
    hotelling: bool = False
    colour_by: str | None = None
    arrows: bool = True
    biplot_scaling: str = "correlation"
    arrow_limit: int | None = None  # the N strongest arrows are drawn; None: PAGE_ARROWS, or SLIDE_ARROWS on slides
    labels: bool = False
    loading_pc: int = 1
    loading_overlay: tuple[int, ...] = ()  # further components drawn on the loading spectrum (spectra)
    picked: str | None = None
    batch: str | None = None  # dataset code of a new batch scored against this view's model
    saved_view: str | None = None
    present: bool = False
    slide: int = 1
    slide_figure: str = "scores"
    follow: str | None = None  # code of a presenter's follow session this page follows (read-only)

    def __post_init__(self) -> None:
        for name in ("dataset", "batch", "excluded_set", "variables_off_set", "follow"):
            code = getattr(self, name)
            if code is not None and not (isinstance(code, str) and _TOKEN_PATTERN.fullmatch(code)):
                raise ViewStateError(
                    f"{name} must be None or a link code of 16 to 64 letters, digits, '-' or '_'; got {code!r}."
                )
        colour_by = self.colour_by
        if colour_by is not None and colour_by != NO_COLOUR:
            colour_by = _check_text(colour_by, "colour_by")
        canonical = {
            "rows_are": _check_choice(self.rows_are, ROWS_ARE, "rows_are"),
            "variables_off": _check_text_tuple(self.variables_off, "variables_off"),
            "excluded": _check_text_tuple(self.excluded, "excluded"),
            "transforms": _check_transforms(self.transforms),
            "missing": _check_choice(self.missing, MISSING_POLICIES, "missing"),
            "centring": _check_choice(self.centring, CENTRINGS, "centring"),
            "scaling": _check_choice(self.scaling, SCALINGS, "scaling"),
            "id_column": _check_optional_text(self.id_column, "id_column"),
            "ranges": _check_ranges(self.ranges),
            "row_correction": _check_choice(self.row_correction, ROW_CORRECTIONS, "row_correction"),
            "savgol": _check_savgol(self.savgol),
            "components": None if self.components is None else _check_int(self.components, 1, MAX_PC, "components"),
            "confidence": _check_confidence(self.confidence),
            "pc_x": _check_int(self.pc_x, 1, MAX_PC, "pc_x"),
            "pc_y": _check_int(self.pc_y, 1, MAX_PC, "pc_y"),
            "sigma_levels": _check_sigma_levels(self.sigma_levels),
            "ellipse_by": _check_choice(self.ellipse_by, ELLIPSE_MODES, "ellipse_by"),
            "hotelling": _check_bool(self.hotelling, "hotelling"),
            "colour_by": colour_by,
            "arrows": _check_bool(self.arrows, "arrows"),
            "biplot_scaling": _check_choice(self.biplot_scaling, BIPLOT_SCALINGS, "biplot_scaling"),
            "arrow_limit": None if self.arrow_limit is None else _check_int(self.arrow_limit, 1, MAX_ARROWS,
                                                                            "arrow_limit"),
            "labels": _check_bool(self.labels, "labels"),
            "loading_pc": _check_int(self.loading_pc, 1, MAX_PC, "loading_pc"),
            "loading_overlay": _check_overlay(self.loading_overlay),
            "picked": _check_optional_text(self.picked, "picked"),
            "saved_view": _check_view_id(self.saved_view),
            "present": _check_bool(self.present, "present"),
            "slide": _check_int(self.slide, 1, MAX_SLIDE, "slide"),
            "slide_figure": _check_choice(self.slide_figure, SLIDE_FIGURES, "slide_figure"),
        }
        for name, value in canonical.items():
            object.__setattr__(self, name, value)

    @property
    def arrows_shown(self) -> int:
        """How many of the strongest arrows to draw: ``arrow_limit``, or the default of the mode."""
        if self.arrow_limit is not None:
            return self.arrow_limit
        return SLIDE_ARROWS if self.present else PAGE_ARROWS

    def unsaved(self) -> ViewState:
        """This view detached from the saved view it was opened from (after any change)."""
        return dataclasses.replace(self, saved_view=None)

    def replace(self, **changes: Any) -> ViewState:
        """A validated copy with ``changes`` applied; raises ``ViewStateError`` for invalid values."""
        return dataclasses.replace(self, **changes)

    def recipe_key(self) -> tuple:
        """The fields that change the fitted model, for cache keys (with the dataset's own key)."""
        return (
            self.variables_off,
            self.variables_off_set,
            self.excluded,
            self.excluded_set,
            self.transforms,
            self.missing,
            self.centring,
            self.scaling,
            self.id_column,
            self.ranges,
            self.row_correction,
            self.savgol,
            self.rows_are,
        )

    def diagnostics_key(self) -> tuple:
        """``recipe_key`` plus the settings that change T², Q and their limits (``components``, ``confidence``)."""
        return (*self.recipe_key(), self.components, self.confidence)
