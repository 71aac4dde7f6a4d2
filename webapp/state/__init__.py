"""The one definition of a view's state and of its URL form.

Every view of Ordinate is a URL. The query string holds the complete view - the
dataset code and every setting - in readable, versioned parameters, so
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

# The package's interface is its two modules' interfaces, re-exported.
from webapp.state import url_codec, view_state
from webapp.state.url_codec import *  # noqa: F403
from webapp.state.view_state import *  # noqa: F403

__all__ = [*view_state.__all__, *url_codec.__all__]
