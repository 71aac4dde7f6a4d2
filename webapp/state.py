"""The one definition of a view's state and of its URL form.

Every view of Ordinate is a URL. The query string holds the complete view - the
dataset's link code and every setting - in readable, versioned parameters, so
that pasting a link into a fresh browser reproduces the identical view. This
module is the only place that parses, validates, writes and versions that
query string; nobody else builds or reads view parameters by hand.

Conventions (the full table of parameters is in ``docs/url-state.md``):

* ``to_query`` writes *every* parameter, in one fixed order, so that a link keeps
  its meaning even if a default changes in a later release. Empty lists are
  written explicitly as an empty value (``ex=``), optional values that are unset
  as an empty value (``ds=``, ``pick=``) or as the keyword ``auto`` (``k``,
  ``id``, ``colour``).
* String lists (``off``, ``ex``, ``tf``) are repeated parameters
  (``ex=B-001&ex=B-007``), so labels containing commas survive; numeric lists
  (``sigma``) are comma separated (``sigma=1,2,3``).
* ``parse_query`` never raises. Anything it cannot use - an unknown parameter, a
  value it cannot read or that is out of range, a repeated single-valued
  parameter, a link from a newer version - falls back to the default for that
  setting and produces one readable notice (a complete sentence) for the user.
* Round trip: ``parse_query(to_query(s)) == (s, ())`` for every valid state,
  and ``to_query(parse_query(q)[0])`` is a fixed point for any text ``q``.

Column names and sample labels are free text. Where a parameter also has
keywords (``id=auto``, ``colour=auto``, ``colour=none``), a column whose name is
one of those keywords, or starts with ``~``, is written with one extra leading
``~`` (a column called ``auto`` is ``colour=~auto``).

Versioning: ``STATE_VERSION`` is the format that ``to_query`` writes (parameter
``v``). A link without ``v`` is read as format 1. To introduce format N+1:

1. set ``STATE_VERSION = N + 1`` and change the parameter table below;
2. add ``_UPGRADES[N] = _upgrade_N_to_N_plus_1``: a function taking the list of
   ``(name, value)`` pairs of a format-N link and returning the pairs as format
   N+1 would have written them, plus any notices for the user (for example when
   a setting no longer exists);
3. keep every older step: a format-1 link then passes through steps 1, 2, ...
   N in turn. ``tests/test_state.py`` checks that the chain has no gaps.
"""

from __future__ import annotations

import dataclasses
import numbers
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any
from urllib.parse import parse_qsl, quote, urlencode

__all__ = [
    "STATE_VERSION",
    "ViewState",
    "ViewStateError",
    "NO_COLOUR",
    "MISSING_POLICIES",
    "CENTRINGS",
    "SCALINGS",
    "TRANSFORMS",
    "ELLIPSE_MODES",
    "BIPLOT_SCALINGS",
    "PARAMETERS",
    "UrlParameter",
    "RECIPE_PARAMETERS",
    "DIAGNOSTIC_PARAMETERS",
    "DRAWING_PARAMETERS",
    "parse_query",
    "to_query",
]

STATE_VERSION = 1

# Allowed choices; the first one listed is not necessarily the default.
MISSING_POLICIES: tuple[str, ...] = ("drop", "mean", "iterative")
CENTRINGS: tuple[str, ...] = ("mean", "none")
SCALINGS: tuple[str, ...] = ("unit", "none", "pareto", "range")
TRANSFORMS: tuple[str, ...] = ("none", "log10", "ln", "log1p", "sqrt")
ELLIPSE_MODES: tuple[str, ...] = ("group", "all")
BIPLOT_SCALINGS: tuple[str, ...] = ("correlation", "distance")

#: ``ViewState.colour_by`` value meaning "do not colour the points" (URL: ``colour=none``).
NO_COLOUR = ""

MAX_PC = 100  # highest component number a link may ask for; the engine clamps to what the data allow
MAX_SIGMA_LEVELS = 6
MAX_SIGMA = 10.0
MIN_CONFIDENCE = 0.5  # exclusive
MAX_CONFIDENCE = 0.9999  # inclusive
MAX_SLIDE = 1000

_TOKEN_PATTERN = re.compile(r"[A-Za-z0-9_-]{16,64}")
_WHOLE_NUMBER_PATTERN = re.compile(r"[0-9]{1,9}")
_DECIMAL_PATTERN = re.compile(r"(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][-+]?[0-9]{1,3})?")
_ESCAPE = "~"
_MAX_NOTICES = 20
_MAX_SHOWN_VALUE = 60


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
    variables_off: tuple[str, ...] = ()
    excluded: tuple[str, ...] = ()
    excluded_set: str | None = None  # code of a stored list of excluded samples (long lists stay out of links)
    transforms: tuple[tuple[str, str], ...] = ()
    missing: str = "drop"
    centring: str = "mean"
    scaling: str = "unit"
    id_column: str | None = None
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
    labels: bool = False
    loading_pc: int = 1
    picked: str | None = None
    batch: str | None = None  # dataset code of a new batch scored against this view's model
    saved_view: str | None = None
    present: bool = False
    slide: int = 1

    def __post_init__(self) -> None:
        for name in ("dataset", "batch", "excluded_set"):
            code = getattr(self, name)
            if code is not None and not (isinstance(code, str) and _TOKEN_PATTERN.fullmatch(code)):
                raise ViewStateError(
                    f"{name} must be None or a link code of 16 to 64 letters, digits, '-' or '_'; got {code!r}."
                )
        colour_by = self.colour_by
        if colour_by is not None and colour_by != NO_COLOUR:
            colour_by = _check_text(colour_by, "colour_by")
        canonical = {
            "variables_off": _check_text_tuple(self.variables_off, "variables_off"),
            "excluded": _check_text_tuple(self.excluded, "excluded"),
            "transforms": _check_transforms(self.transforms),
            "missing": _check_choice(self.missing, MISSING_POLICIES, "missing"),
            "centring": _check_choice(self.centring, CENTRINGS, "centring"),
            "scaling": _check_choice(self.scaling, SCALINGS, "scaling"),
            "id_column": _check_optional_text(self.id_column, "id_column"),
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
            "labels": _check_bool(self.labels, "labels"),
            "loading_pc": _check_int(self.loading_pc, 1, MAX_PC, "loading_pc"),
            "picked": _check_optional_text(self.picked, "picked"),
            "saved_view": _check_view_id(self.saved_view),
            "present": _check_bool(self.present, "present"),
            "slide": _check_int(self.slide, 1, MAX_SLIDE, "slide"),
        }
        for name, value in canonical.items():
            object.__setattr__(self, name, value)

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
            self.excluded,
            self.excluded_set,
            self.transforms,
            self.missing,
            self.centring,
            self.scaling,
            self.id_column,
        )

    def diagnostics_key(self) -> tuple:
        """``recipe_key`` plus the settings that change T², Q and their limits (``components``, ``confidence``)."""
        return (*self.recipe_key(), self.components, self.confidence)


# --------------------------------------------------------------------------------------
# The URL form: one entry per parameter, in the order ``to_query`` writes them
# --------------------------------------------------------------------------------------


class _Unusable(Exception):
    """Raised by a value reader: the text cannot be used. Carries what was expected."""

    def __init__(self, expected: str):
        super().__init__(expected)
        self.expected = expected


@dataclass(frozen=True)
class UrlParameter:
    """One query-string parameter: its name, the ``ViewState`` field it holds, and how it is read and written."""

    name: str  # the URL parameter
    field: str  # the ViewState field
    effect: str  # "data" | "recipe" | "diagnostics" | "drawing" (documented in docs/url-state.md)
    read: Callable[[str], Any]  # URL text -> field value; raises _Unusable
    write: Callable[[Any], str]  # field value -> URL text
    repeated: bool = False  # a list written as repeated parameters


def _read_whole(low: int, high: int) -> Callable[[str], int]:
    def read(text: str) -> int:
        if not _WHOLE_NUMBER_PATTERN.fullmatch(text) or not low <= int(text) <= high:
            raise _Unusable(f"a whole number from {low} to {high}")
        return int(text)

    return read


def _read_choice(choices: tuple[str, ...]) -> Callable[[str], str]:
    def read(text: str) -> str:
        if text not in choices:
            raise _Unusable(f"one of: {', '.join(choices)}")
        return text

    return read


def _read_flag(text: str) -> bool:
    if text not in ("0", "1"):
        raise _Unusable("0 (off) or 1 (on)")
    return text == "1"


def _write_flag(value: bool) -> str:
    return "1" if value else "0"


def _write_number(value: float) -> str:
    """Shortest text that reads back as exactly ``value`` ("2" rather than "2.0")."""
    return str(int(value)) if value.is_integer() else repr(value)


def _read_token(text: str) -> str | None:
    if text == "":
        return None
    if not _TOKEN_PATTERN.fullmatch(text):
        raise _Unusable("a link code of 16 to 64 letters, digits, '-' or '_'")
    return text


def _read_optional_label(text: str) -> str | None:
    return None if text == "" else text


def _write_optional(value: str | None) -> str:
    return "" if value is None else value


def _escape_name(name: str, keywords: tuple[str, ...]) -> str:
    return _ESCAPE + name if name in keywords or name.startswith(_ESCAPE) else name


def _unescape_name(text: str) -> str:
    return text[len(_ESCAPE):] if text.startswith(_ESCAPE) else text


def _read_id_column(text: str) -> str | None:
    if text == "auto":
        return None
    name = _unescape_name(text)
    if name == "":
        raise _Unusable("'auto' or a column name")
    return name


def _write_id_column(value: str | None) -> str:
    return "auto" if value is None else _escape_name(value, ("auto",))


def _read_colour(text: str) -> str | None:
    if text == "auto":
        return None
    if text == "none":
        return NO_COLOUR
    name = _unescape_name(text)
    if name == "":
        raise _Unusable("'auto', 'none' or a column name")
    return name


def _write_colour(value: str | None) -> str:
    if value is None:
        return "auto"
    if value == NO_COLOUR:
        return "none"
    return _escape_name(value, ("auto", "none"))


def _read_components(text: str) -> int | None:
    if text == "auto":
        return None
    try:
        return _read_whole(1, MAX_PC)(text)
    except _Unusable:
        raise _Unusable(f"'auto' or a whole number from 1 to {MAX_PC}") from None


def _read_confidence(text: str) -> float:
    expected = f"a number above {MIN_CONFIDENCE} and at most {MAX_CONFIDENCE}, such as 0.95"
    if not _DECIMAL_PATTERN.fullmatch(text):
        raise _Unusable(expected)
    value = float(text)
    if not MIN_CONFIDENCE < value <= MAX_CONFIDENCE:
        raise _Unusable(expected)
    return value


def _read_sigma(text: str) -> tuple[float, ...]:
    expected = (
        f"up to {MAX_SIGMA_LEVELS} numbers above 0 and at most {MAX_SIGMA:g}, "
        "separated by commas, such as 1,2,3, or nothing for no ellipses"
    )
    if text.strip() == "":
        return ()
    levels = set()
    for item in text.split(","):
        item = item.strip()
        if not _DECIMAL_PATTERN.fullmatch(item):
            raise _Unusable(expected)
        value = float(item)
        if not 0.0 < value <= MAX_SIGMA:
            raise _Unusable(expected)
        levels.add(value)
    if len(levels) > MAX_SIGMA_LEVELS:
        raise _Unusable(expected)
    return tuple(sorted(levels))


def _write_sigma(levels: tuple[float, ...]) -> str:
    return ",".join(_write_number(level) for level in levels)


def _read_label(text: str) -> str:
    return text  # empty values are dropped before reading (they mark an empty list)


def _read_transform_pair(text: str) -> tuple[str, str]:
    variable, colon, transform = text.rpartition(":")  # the last colon: variable names may contain colons
    if not colon or variable == "" or transform not in TRANSFORMS:
        raise _Unusable(f"variable:transform, with the transform one of: {', '.join(TRANSFORMS)}")
    return variable, transform


def _write_transform_pair(pair: tuple[str, str]) -> str:
    return f"{pair[0]}:{pair[1]}"


PARAMETERS: tuple[UrlParameter, ...] = (
    UrlParameter("ds", "dataset", "data", _read_token, _write_optional),
    UrlParameter("off", "variables_off", "recipe", _read_label, str, repeated=True),
    UrlParameter("ex", "excluded", "recipe", _read_label, str, repeated=True),
    UrlParameter("exset", "excluded_set", "recipe", _read_token, _write_optional),
    UrlParameter("tf", "transforms", "recipe", _read_transform_pair, _write_transform_pair, repeated=True),
    UrlParameter("missing", "missing", "recipe", _read_choice(MISSING_POLICIES), str),
    UrlParameter("centre", "centring", "recipe", _read_choice(CENTRINGS), str),
    UrlParameter("scale", "scaling", "recipe", _read_choice(SCALINGS), str),
    UrlParameter("id", "id_column", "recipe", _read_id_column, _write_id_column),
    UrlParameter("k", "components", "diagnostics", _read_components, lambda k: "auto" if k is None else str(k)),
    UrlParameter("conf", "confidence", "diagnostics", _read_confidence, _write_number),
    UrlParameter("x", "pc_x", "drawing", _read_whole(1, MAX_PC), str),
    UrlParameter("y", "pc_y", "drawing", _read_whole(1, MAX_PC), str),
    UrlParameter("sigma", "sigma_levels", "drawing", _read_sigma, _write_sigma),
    UrlParameter("ellipse", "ellipse_by", "drawing", _read_choice(ELLIPSE_MODES), str),
    UrlParameter("t2ellipse", "hotelling", "drawing", _read_flag, _write_flag),
    UrlParameter("colour", "colour_by", "drawing", _read_colour, _write_colour),
    UrlParameter("arrows", "arrows", "drawing", _read_flag, _write_flag),
    UrlParameter("biplot", "biplot_scaling", "drawing", _read_choice(BIPLOT_SCALINGS), str),
    UrlParameter("labels", "labels", "drawing", _read_flag, _write_flag),
    UrlParameter("lpc", "loading_pc", "drawing", _read_whole(1, MAX_PC), str),
    UrlParameter("pick", "picked", "drawing", _read_optional_label, _write_optional),
    UrlParameter("batch", "batch", "drawing", _read_token, _write_optional),
    UrlParameter("view", "saved_view", "drawing", _read_token, _write_optional),
    UrlParameter("present", "present", "drawing", _read_flag, _write_flag),
    UrlParameter("slide", "slide", "drawing", _read_whole(1, MAX_SLIDE), str),
)
"""Every view parameter in the order ``to_query`` writes it (after ``v``)."""

RECIPE_PARAMETERS = tuple(p.name for p in PARAMETERS if p.effect == "recipe")
DIAGNOSTIC_PARAMETERS = tuple(p.name for p in PARAMETERS if p.effect == "diagnostics")
DRAWING_PARAMETERS = tuple(p.name for p in PARAMETERS if p.effect == "drawing")

_BY_NAME = {p.name: p for p in PARAMETERS}
_DEFAULTS = ViewState()
_URL_SAFE = ",:()"  # legal in a query string (RFC 3986) and kept readable; everything else is %-encoded


def to_query(state: ViewState) -> str:
    """The canonical query string (without ``?``) for ``state``.

    Writes ``v`` and then every parameter in the order of ``PARAMETERS``; an
    empty list is written once with an empty value (``ex=``) so that the link
    states it explicitly.
    """
    pairs: list[tuple[str, str]] = [("v", str(STATE_VERSION))]
    for parameter in PARAMETERS:
        value = getattr(state, parameter.field)
        if parameter.repeated:
            pairs.extend((parameter.name, parameter.write(item)) for item in value)
            if not value:
                pairs.append((parameter.name, ""))
        else:
            pairs.append((parameter.name, parameter.write(value)))
    return urlencode(pairs, safe=_URL_SAFE, quote_via=quote)


# --------------------------------------------------------------------------------------
# Reading a link
# --------------------------------------------------------------------------------------

UpgradeStep = Callable[[list[tuple[str, str]]], tuple[list[tuple[str, str]], list[str]]]

_UPGRADES: dict[int, UpgradeStep] = {}
"""``_UPGRADES[n]`` turns the (name, value) pairs of a format-``n`` link into format ``n + 1``.

Format 1 is the current and only format, so there is nothing to upgrade yet;
see the module docstring for how to add a step.
"""


def _shown(text: str) -> str:
    """A value as quoted in a notice: shortened if long, never a repr with escapes."""
    return text if len(text) <= _MAX_SHOWN_VALUE else text[: _MAX_SHOWN_VALUE - 1] + "…"


def _ignored(name: str, text: str, expected: str, fallback: str) -> str:
    return (
        f"Ignored the setting '{_shown(name)}={_shown(text)}' (expected {expected}); "
        f"using {fallback}."
    )


def _fallback_text(parameter: UrlParameter) -> str:
    written = parameter.write(getattr(_DEFAULTS, parameter.field))
    return "no value" if written == "" else f"'{written}'"


def _read_version(pairs: list[tuple[str, str]], notices: list[str]) -> int:
    texts = [value for name, value in pairs if name == "v"]
    if not texts:
        return 1
    text = texts[0]
    if len(texts) > 1:
        notices.append(
            f"The setting 'v' appeared {len(texts)} times; used the first one ('{_shown(text)}') and ignored the rest."
        )
    if not _WHOLE_NUMBER_PATTERN.fullmatch(text) or int(text) < 1:
        notices.append(
            f"Ignored the setting 'v={_shown(text)}' (expected a link format number such as "
            f"{STATE_VERSION}); reading the link as format {STATE_VERSION}."
        )
        return STATE_VERSION
    version = int(text)
    if version > STATE_VERSION:
        notices.append(
            f"This link was made by a newer version of Ordinate (link format {version}); this version "
            f"reads format {STATE_VERSION}, so some settings may be ignored or shown differently."
        )
        return STATE_VERSION
    return version


def _upgrade(pairs: list[tuple[str, str]], version: int, notices: list[str]) -> list[tuple[str, str]]:
    for step_from in range(version, STATE_VERSION):
        pairs, step_notices = _UPGRADES[step_from](pairs)
        notices.extend(step_notices)
    return pairs


def _read_repeated(parameter: UrlParameter, texts: list[str], notices: list[str]) -> tuple:
    items = []
    seen_variables: dict[str, str] = {}
    for text in texts:
        if text == "":
            continue  # the explicit "empty list" marker
        try:
            item = parameter.read(text)
        except _Unusable as problem:
            notices.append(
                f"Ignored the setting '{parameter.name}={_shown(text)}' (expected {problem.expected}); left it out."
            )
            continue
        if parameter.name == "tf":
            variable, transform = item
            if variable in seen_variables and seen_variables[variable] != transform:
                notices.append(
                    f"Ignored the setting 'tf={_shown(text)}' because '{_shown(variable)}' was already "
                    f"given the transform '{seen_variables[variable]}'."
                )
                continue
            seen_variables[variable] = transform
        items.append(item)
    return tuple(items)


def _read_single(parameter: UrlParameter, texts: list[str], notices: list[str]) -> Any:
    text = texts[0]
    if len(texts) > 1:
        notices.append(
            f"The setting '{parameter.name}' appeared {len(texts)} times; used the first one "
            f"('{_shown(text)}') and ignored the rest."
        )
    try:
        return parameter.read(text)
    except _Unusable as problem:
        if parameter.name == "ds":
            notices.append(
                f"Ignored the dataset code 'ds={_shown(text)}' (expected {problem.expected}); "
                "no dataset is opened."
            )
        else:
            notices.append(_ignored(parameter.name, text, problem.expected, _fallback_text(parameter)))
        return getattr(_DEFAULTS, parameter.field)


def _cap(notices: list[str]) -> tuple[str, ...]:
    if len(notices) <= _MAX_NOTICES:
        return tuple(notices)
    hidden = len(notices) - (_MAX_NOTICES - 1)
    return (*notices[: _MAX_NOTICES - 1], f"{hidden} further problems with this link were ignored as well.")


def parse_query(query: str | None) -> tuple[ViewState, tuple[str, ...]]:
    """Read a view from a query string (with or without the leading ``?``). Never raises.

    Returns the state and a tuple of notices: one complete sentence per
    setting that could not be used (it then takes its default). Parameters
    may come in any order; a missing parameter takes its default; a missing
    ``v`` means format 1.
    """
    if query is None:  # dcc.Location reports no query string as None
        return _DEFAULTS, ()
    if not isinstance(query, str):
        return _DEFAULTS, ("The link could not be read, so the default view is shown.",)
    notices: list[str] = []
    query = query.encode("utf-8", "replace").decode("utf-8")  # lone surrogates cannot be labels
    pairs = parse_qsl(query.removeprefix("?"), keep_blank_values=True, errors="replace")
    version = _read_version(pairs, notices)
    pairs = _upgrade([(n, v) for n, v in pairs if n != "v"], version, notices)

    texts_by_name: dict[str, list[str]] = {}
    for name, text in pairs:
        if name in _BY_NAME:
            texts_by_name.setdefault(name, []).append(text)
        elif name == "":
            notices.append(f"Ignored '={_shown(text)}', which names no setting.")
        else:
            notices.append(
                f"Ignored the unknown setting '{_shown(name)}={_shown(text)}'; this version of Ordinate "
                f"does not use '{_shown(name)}'."
            )

    values: dict[str, Any] = {}
    for parameter in PARAMETERS:
        texts = texts_by_name.get(parameter.name)
        if texts is None:
            continue
        if parameter.repeated:
            values[parameter.field] = _read_repeated(parameter, texts, notices)
        else:
            values[parameter.field] = _read_single(parameter, texts, notices)
    try:
        state = ViewState(**values)
    except ViewStateError:  # every reader validates, so this is a safety net, not a path
        return _DEFAULTS, (*_cap(notices), "Part of the link could not be read, so the default view is shown.")
    return state, _cap(notices)
