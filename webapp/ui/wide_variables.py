"""Choosing among thousands of variables: search, leave out / put back, counts; no Dash here.

A wide table (more than ``view_model.WIDE_VARIABLES`` numeric variables) gets no
checkbox per variable. Its variables are chosen by ranges on the variable axis
(``rng=``) and by a search that leaves out, puts back or keeps only the
variables whose names match. Long lists of left-out variables are kept as a
stored set (``offset=``), as long lists of left-out samples are (``exset=``), so
that a link stays well below the request-line limits of servers and proxies.

Search rule (stated on the page): a pattern with ``*`` or ``?`` matches whole
names, ``*`` standing for any text and ``?`` for one character
(``m/z 30*``); any other text matches names that contain it. Both ignore case.
"""

from __future__ import annotations

import fnmatch

from webapp.figures.text import count_text
from webapp.state import ViewState

#: More left-out variables than this are kept as a stored set (``offset=``) instead of ``off`` entries.
INLINE_VARIABLES_OFF = 60
ACTIONS = ("out", "in", "only")


def matching(names, pattern: str | None) -> list[str]:
    """The names that match ``pattern`` (module rule), in their order; none for an empty pattern."""
    pattern = (pattern or "").strip()
    if not pattern:
        return []
    wanted = pattern.casefold()
    if any(c in pattern for c in "*?"):
        # '[' is literal: variable names such as 'x[1]' are common, character classes are not wanted.
        wanted = wanted.replace("[", "[[]")
        return [n for n in names if fnmatch.fnmatchcase(str(n).casefold(), wanted)]
    return [n for n in names if wanted in str(n).casefold()]


def counts_text(used: int, total: int) -> str:
    """'7 421 of 8 000 variables in use'."""
    return f"{count_text(used)} of {count_text(total)} variables in use"


def variables_off(services, state: ViewState) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """Every variable a state leaves out (its ``off`` names and its stored set), and notices."""
    if state.variables_off_set is None:
        return state.variables_off, ()
    stored = services.store.sample_set(state.dataset, state.variables_off_set) if state.dataset else None
    if stored is None:
        return state.variables_off, ("The list of left-out variables named in this link is not known here, "
                                     "so those variables are in the model.",)
    return tuple(sorted({*state.variables_off, *stored})), ()


def with_variables_off(services, state: ViewState, names) -> ViewState:
    """``state`` leaving out exactly ``names``: in the link when few, else as a stored set."""
    names = tuple(sorted(set(names)))
    if len(names) <= INLINE_VARIABLES_OFF or state.dataset is None:
        return state.replace(variables_off=names, variables_off_set=None)
    return state.replace(variables_off=(), variables_off_set=services.store.save_sample_set(state.dataset, names))


def after_search(services, state: ViewState, names, pattern: str, action: str) -> ViewState:
    """The state after leaving out (``out``), putting back (``in``) or keeping only (``only``) the matches."""
    if action not in ACTIONS:
        raise ValueError(f"action must be one of {ACTIONS}, got {action!r}")
    matches = set(matching(names, pattern))
    off = set(variables_off(services, state)[0])
    if action == "out":
        off |= matches
    elif action == "in":
        off -= matches
    else:
        off = {n for n in names if n not in matches}
    return with_variables_off(services, state, off)
