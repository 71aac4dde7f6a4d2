"""The state of a monitoring view and its URL form (``/m/<code>?...``).

A monitoring view shows the new samples scored against one locked reference
model, in production order. Its address holds the whole view, like the main
dashboard's (:mod:`webapp.state.url_codec`), with the same conventions:

* the model's monitoring link code is the path (``/m/<code>``); everything else
  is in the query string;
* :func:`to_monitor_query` writes *every* parameter in one fixed order, so a
  link keeps its meaning if a default changes later;
* :func:`parse_monitor_query` never raises: an unknown parameter, a value it
  cannot read, a repeated single-valued parameter or a link from a newer
  format falls back to the default and adds one readable notice;
* round trip: ``parse_monitor_query(to_monitor_query(s)) == (s, ())`` for every
  valid state.

The parameters are listed in ``docs/url-state.md`` ("Monitoring links").
``MONITOR_STATE_VERSION`` is the format written as ``v``; a link without ``v``
is read as format 1. Add upgrade steps as in :mod:`webapp.state.url_codec`.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass, fields, replace
from typing import Any
from urllib.parse import parse_qsl, quote, urlencode

from webapp.state.view_state import _TOKEN_PATTERN, MAX_PC

__all__ = [
    "MONITOR_PARAMETERS",
    "MONITOR_RULES",
    "MONITOR_STATE_VERSION",
    "MonitorState",
    "MonitorStateError",
    "monitor_address",
    "parse_monitor_query",
    "to_monitor_query",
]

MONITOR_STATE_VERSION = 1
MONITOR_PATH_PREFIX = "/m/"

# The run rules a view can switch on (same names as webapp.analysis.monitoring.RUN_RULES).
MONITOR_RULES = ("beyond-limit", "run-above-median")
MIN_RUN_LENGTH = 2
MAX_RUN_LENGTH = 50
DEFAULT_RUN_LENGTH = 8
MAX_BAND = 10.0
MAX_VERSION = 100_000
MAX_POSITION = 10_000_000
_MAX_NOTICES = 12
_MAX_SHOWN = 60

_WHOLE = re.compile(r"[0-9]{1,9}")
_DECIMAL = re.compile(r"(?:[0-9]+\.?[0-9]*|\.[0-9]+)")


class MonitorStateError(ValueError):
    """A monitoring state was built with a value it cannot hold."""


def _check_int(value: Any, low: int, high: int, what: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high:
        raise MonitorStateError(f"{what} must be a whole number from {low} to {high}, not {value!r}.")
    return value


def _check_optional_int(value: Any, low: int, high: int, what: str) -> int | None:
    return None if value is None else _check_int(value, low, high, what)


@dataclass(frozen=True)
class MonitorState:
    """Everything a monitoring page shows, apart from the data itself.

    ``first``/``last`` are a window of positions (the ``position`` column of the
    monitoring table, counting from 0, inclusive); ``None`` leaves that end open.
    ``pick`` is the position of the new sample whose contributions are shown.
    ``version`` asks for another locked version of the same model name (``None``:
    the version the code belongs to).
    """

    model: str | None = None
    version: int | None = None
    first: int | None = None
    last: int | None = None
    rules: tuple[str, ...] = MONITOR_RULES
    run_length: int = DEFAULT_RUN_LENGTH
    component: int = 1
    band: float = 3.0
    reference: bool = True
    pick: int | None = None
    saved_view: str | None = None
    present: bool = False

    def __post_init__(self):
        if self.model is not None and not (isinstance(self.model, str) and _TOKEN_PATTERN.fullmatch(self.model)):
            raise MonitorStateError("The model code must be a link code of 16 to 64 letters, digits, '-' or '_'.")
        _check_optional_int(self.version, 1, MAX_VERSION, "The version")
        _check_optional_int(self.first, 0, MAX_POSITION, "The window start")
        _check_optional_int(self.last, 0, MAX_POSITION, "The window end")
        if self.first is not None and self.last is not None and self.first > self.last:
            raise MonitorStateError("The window start must not come after its end.")
        rules = tuple(self.rules)
        if any(rule not in MONITOR_RULES for rule in rules) or len(set(rules)) != len(rules):
            raise MonitorStateError(f"The run rules must be distinct names from: {', '.join(MONITOR_RULES)}.")
        object.__setattr__(self, "rules", tuple(r for r in MONITOR_RULES if r in rules))  # one canonical order
        _check_int(self.run_length, MIN_RUN_LENGTH, MAX_RUN_LENGTH, "The run length")
        _check_int(self.component, 1, MAX_PC, "The component")
        if isinstance(self.band, bool) or not isinstance(self.band, (int, float)) or not 0 < self.band <= MAX_BAND:
            raise MonitorStateError(f"The band width k must be above 0 and at most {MAX_BAND:g}.")
        object.__setattr__(self, "band", float(self.band))
        if not isinstance(self.reference, bool) or not isinstance(self.present, bool):
            raise MonitorStateError("The on/off settings must be True or False.")
        _check_optional_int(self.pick, 0, MAX_POSITION, "The picked position")
        if self.saved_view is not None and not (
                isinstance(self.saved_view, str) and _TOKEN_PATTERN.fullmatch(self.saved_view)):
            raise MonitorStateError("The saved view id must be a link code.")

    def replace(self, **changes) -> MonitorState:
        return replace(self, **changes)


# --- the URL form -------------------------------------------------------------------


class _Unusable(Exception):
    def __init__(self, expected: str):
        super().__init__(expected)
        self.expected = expected


@dataclass(frozen=True)
class MonitorParameter:
    name: str
    field: str
    read: Callable[[str], Any]
    write: Callable[[Any], str]


def _read_whole(low: int, high: int, *, optional: bool = False) -> Callable[[str], int | None]:
    expected = f"a whole number from {low} to {high}" + (", or nothing" if optional else "")

    def read(text: str) -> int | None:
        if optional and text == "":
            return None
        if not _WHOLE.fullmatch(text) or not low <= int(text) <= high:
            raise _Unusable(expected)
        return int(text)

    return read


def _write_optional_int(value: int | None) -> str:
    return "" if value is None else str(value)


def _read_rules(text: str) -> tuple[str, ...]:
    if text in ("", "none"):
        return ()
    names = [name.strip() for name in text.split(",")]
    if any(name not in MONITOR_RULES for name in names):
        raise _Unusable(f"'none' or names from: {', '.join(MONITOR_RULES)}, separated by commas")
    return tuple(dict.fromkeys(names))


def _write_rules(rules: tuple[str, ...]) -> str:
    return ",".join(rules) if rules else "none"


def _read_band(text: str) -> float:
    if not _DECIMAL.fullmatch(text) or not 0 < float(text) <= MAX_BAND:
        raise _Unusable(f"a number above 0 and at most {MAX_BAND:g}, such as 3")
    return float(text)


def _write_band(value: float) -> str:
    return str(int(value)) if value.is_integer() else repr(value)


def _read_flag(text: str) -> bool:
    if text not in ("0", "1"):
        raise _Unusable("0 (off) or 1 (on)")
    return text == "1"


def _read_token(text: str) -> str | None:
    if text == "":
        return None
    if not _TOKEN_PATTERN.fullmatch(text):
        raise _Unusable("a link code of 16 to 64 letters, digits, '-' or '_'")
    return text


MONITOR_PARAMETERS: tuple[MonitorParameter, ...] = (
    MonitorParameter("ver", "version", _read_whole(1, MAX_VERSION, optional=True), _write_optional_int),
    MonitorParameter("from", "first", _read_whole(0, MAX_POSITION, optional=True), _write_optional_int),
    MonitorParameter("to", "last", _read_whole(0, MAX_POSITION, optional=True), _write_optional_int),
    MonitorParameter("rules", "rules", _read_rules, _write_rules),
    MonitorParameter("run", "run_length", _read_whole(MIN_RUN_LENGTH, MAX_RUN_LENGTH), str),
    MonitorParameter("pc", "component", _read_whole(1, MAX_PC), str),
    MonitorParameter("band", "band", _read_band, _write_band),
    MonitorParameter("ref", "reference", _read_flag, lambda value: "1" if value else "0"),
    MonitorParameter("pick", "pick", _read_whole(0, MAX_POSITION, optional=True), _write_optional_int),
    MonitorParameter("view", "saved_view", _read_token, lambda value: value or ""),
    MonitorParameter("present", "present", _read_flag, lambda value: "1" if value else "0"),
)
"""Every query parameter of a monitoring link, in the order they are written (after ``v``)."""

_BY_NAME = {p.name: p for p in MONITOR_PARAMETERS}
_DEFAULTS = MonitorState()
assert {p.field for p in MONITOR_PARAMETERS} | {"model"} == {f.name for f in fields(MonitorState)}


def to_monitor_query(state: MonitorState) -> str:
    """The canonical query string (without ``?``) of ``state``; the model code goes in the path."""
    pairs = [("v", str(MONITOR_STATE_VERSION))]
    pairs += [(p.name, p.write(getattr(state, p.field))) for p in MONITOR_PARAMETERS]
    return urlencode(pairs, safe=",", quote_via=quote)


def monitor_address(state: MonitorState) -> str:
    """The complete relative address of a monitoring view: ``/m/<code>?<query>``."""
    return f"{MONITOR_PATH_PREFIX}{state.model or ''}?{to_monitor_query(state)}"


def model_code_from_path(pathname: str | None) -> tuple[str | None, tuple[str, ...]]:
    """The model code in ``/m/<code>`` (trailing slash allowed), with a notice when it is unusable."""
    if not isinstance(pathname, str) or not pathname.startswith(MONITOR_PATH_PREFIX):
        return None, ("This address is not a monitoring link (it should look like /m/<code>).",)
    code = pathname[len(MONITOR_PATH_PREFIX):].strip("/")
    if not _TOKEN_PATTERN.fullmatch(code):
        return None, ("The monitoring link code in this address is mistyped or cut short; "
                      "use the complete monitoring link.",)
    return code, ()


def _shown(text: str) -> str:
    return text if len(text) <= _MAX_SHOWN else text[: _MAX_SHOWN - 1] + "…"


def parse_monitor_query(query: str | None, model: str | None = None) -> tuple[MonitorState, tuple[str, ...]]:
    """Read a monitoring view from its query string (leading ``?`` allowed). Never raises.

    ``model`` is the code from the path (see :func:`model_code_from_path`).
    Returns the state and one notice (a complete sentence) per setting that
    could not be used and took its default instead.
    """
    notices: list[str] = []
    try:
        base = _DEFAULTS.replace(model=model)
    except MonitorStateError:
        base = _DEFAULTS
        notices.append("The monitoring link code is mistyped or cut short; use the complete monitoring link.")
    if query is None:
        return base, tuple(notices)
    if not isinstance(query, str):
        return base, (*notices, "The address could not be read, so the default monitoring view is shown.")
    query = query.encode("utf-8", "replace").decode("utf-8")
    pairs = parse_qsl(query.removeprefix("?"), keep_blank_values=True, errors="replace")
    texts: dict[str, list[str]] = {}
    for name, text in pairs:
        texts.setdefault(name, []).append(text)
    for name in texts:
        if name != "v" and name not in _BY_NAME:
            notices.append(f"Ignored the unknown setting '{_shown(name)}' (monitoring links do not use it).")
    version_texts = texts.get("v", [])
    if version_texts and (not _WHOLE.fullmatch(version_texts[0]) or int(version_texts[0]) < 1):
        notices.append(f"Ignored the setting 'v={_shown(version_texts[0])}' (expected a link format number "
                       f"such as {MONITOR_STATE_VERSION}).")
    elif version_texts and int(version_texts[0]) > MONITOR_STATE_VERSION:
        notices.append(f"This link was made by a newer version of Ordinate (link format {version_texts[0]}); "
                       "some settings may be ignored or shown differently.")
    values: dict[str, Any] = {}
    for parameter in MONITOR_PARAMETERS:
        given = texts.get(parameter.name)
        if not given:
            continue
        if len(given) > 1:
            notices.append(f"The setting '{parameter.name}' appeared {len(given)} times; used the first one "
                           f"('{_shown(given[0])}') and ignored the rest.")
        try:
            values[parameter.field] = parameter.read(given[0])
        except _Unusable as problem:
            default = parameter.write(getattr(_DEFAULTS, parameter.field))
            fallback = "no value" if default == "" else f"'{default}'"
            notices.append(f"Ignored the setting '{parameter.name}={_shown(given[0])}' "
                           f"(expected {problem.expected}); using {fallback}.")
    if values.get("first") is not None and values.get("last") is not None and values["first"] > values["last"]:
        notices.append(f"Ignored the window from={values['first']}&to={values['last']} (its start comes after "
                       "its end); showing every sample.")
        values.pop("first")
        values.pop("last")
    try:
        state = base.replace(**values)
    except MonitorStateError:  # every reader validates; a safety net, not a path
        return base, (*notices, "Part of the address could not be read, so the default monitoring view is shown.")
    if len(notices) > _MAX_NOTICES:
        hidden = len(notices) - (_MAX_NOTICES - 1)
        notices = [*notices[: _MAX_NOTICES - 1], f"{hidden} further problems with this address were ignored."]
    return state, tuple(notices)
