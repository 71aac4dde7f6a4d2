"""The URL form of a view state: parse, validate, write and version the query string.

This module is the only place that reads or writes view parameters; see
:mod:`webapp.state` for the conventions and the versioning procedure.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any
from urllib.parse import parse_qsl, quote, urlencode

from webapp.state.view_state import (
    BIPLOT_SCALINGS,
    SLIDE_FIGURES,
    CENTRINGS,
    ELLIPSE_MODES,
    MAX_ARROWS,
    MAX_CONFIDENCE,
    MAX_PC,
    MAX_SIGMA,
    MAX_SIGMA_LEVELS,
    MAX_SLIDE,
    MIN_CONFIDENCE,
    MISSING_POLICIES,
    NO_COLOUR,
    MAX_RANGES,
    MAX_SAVGOL_DERIVATIVE,
    MAX_SAVGOL_ORDER,
    MAX_SAVGOL_WINDOW,
    ROW_CORRECTIONS,
    SCALINGS,
    TRANSFORMS,
    _TOKEN_PATTERN,
    ViewState,
    ViewStateError,
)

__all__ = [
    "STATE_VERSION",
    "PARAMETERS",
    "UrlParameter",
    "RECIPE_PARAMETERS",
    "DIAGNOSTIC_PARAMETERS",
    "DRAWING_PARAMETERS",
    "parse_query",
    "to_query",
]

STATE_VERSION = 1

_WHOLE_NUMBER_PATTERN = re.compile(r"[0-9]{1,9}")
_DECIMAL_PATTERN = re.compile(r"(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][-+]?[0-9]{1,3})?")
_ESCAPE = "~"
_MAX_NOTICES = 20
_MAX_SHOWN_VALUE = 60

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
        raise _Unusable("a code of 16 to 64 letters, digits, '-' or '_'")
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


def _read_arrow_limit(text: str) -> int | None:
    if text == "auto":
        return None
    try:
        return _read_whole(1, MAX_ARROWS)(text)
    except _Unusable:
        raise _Unusable(f"'auto' or a whole number from 1 to {MAX_ARROWS}") from None


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


_SIGNED_DECIMAL = rf"-?{_DECIMAL_PATTERN.pattern}"
_RANGE_PATTERN = re.compile(rf"({_SIGNED_DECIMAL})-({_SIGNED_DECIMAL})")


def _read_ranges(text: str) -> tuple[tuple[float, float], ...]:
    expected = (
        f"up to {MAX_RANGES} ranges LOW-HIGH of the variable axis, separated by commas, such as "
        "1100-1700,2000-2400, or nothing for the whole axis"
    )
    if text.strip() == "":
        return ()
    pairs = []
    for item in text.split(","):
        match = _RANGE_PATTERN.fullmatch(item.strip())
        if match is None:
            raise _Unusable(expected)
        pairs.append((float(match.group(1)), float(match.group(2))))
    try:
        return ViewState(ranges=pairs).ranges
    except ViewStateError:
        raise _Unusable(expected) from None


def _write_ranges(ranges: tuple[tuple[float, float], ...]) -> str:
    return ",".join(f"{_write_number(low)}-{_write_number(high)}" for low, high in ranges)


def _read_savgol(text: str) -> tuple[int, int, int] | None:
    expected = (
        f"'off', or WINDOW,ORDER,DERIVATIVE such as 15,2,1: an odd window from 3 to {MAX_SAVGOL_WINDOW} "
        f"above the polynomial order (0 to {MAX_SAVGOL_ORDER}), a derivative from 0 to {MAX_SAVGOL_DERIVATIVE} "
        "and at most the order"
    )
    if text == "off":
        return None
    parts = text.split(",")
    if len(parts) != 3 or not all(_WHOLE_NUMBER_PATTERN.fullmatch(p.strip()) for p in parts):
        raise _Unusable(expected)
    try:
        return ViewState(savgol=tuple(int(p) for p in parts)).savgol
    except ViewStateError:
        raise _Unusable(expected) from None


def _write_savgol(value: tuple[int, int, int] | None) -> str:
    return "off" if value is None else ",".join(map(str, value))


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
    UrlParameter("rng", "ranges", "recipe", _read_ranges, _write_ranges),
    UrlParameter("rowc", "row_correction", "recipe", _read_choice(ROW_CORRECTIONS), str),
    UrlParameter("sg", "savgol", "recipe", _read_savgol, _write_savgol),
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
    UrlParameter("narrows", "arrow_limit", "drawing", _read_arrow_limit, lambda n: "auto" if n is None else str(n)),
    UrlParameter("labels", "labels", "drawing", _read_flag, _write_flag),
    UrlParameter("lpc", "loading_pc", "drawing", _read_whole(1, MAX_PC), str),
    UrlParameter("pick", "picked", "drawing", _read_optional_label, _write_optional),
    UrlParameter("batch", "batch", "drawing", _read_token, _write_optional),
    UrlParameter("view", "saved_view", "drawing", _read_token, _write_optional),
    UrlParameter("present", "present", "drawing", _read_flag, _write_flag),
    UrlParameter("slide", "slide", "drawing", _read_whole(1, MAX_SLIDE), str),
    UrlParameter("show", "slide_figure", "drawing", _read_choice(SLIDE_FIGURES), str),
    UrlParameter("follow", "follow", "drawing", _read_token, _write_optional),
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
