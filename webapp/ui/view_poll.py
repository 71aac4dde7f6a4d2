"""One reading of what a view still waits for: parallel analysis, or a long-data fit.

The page's poll asks this every tick; the answer says whether the view can now be
drawn complete and, for long data, the progress words to show meanwhile.
"""

from __future__ import annotations

import logging

from webapp.state import parse_query
from webapp.ui import long_view
from webapp.ui import view_model as vm

log = logging.getLogger("ordinate")

__all__ = ["poll_view"]


def poll_view(services, search: str) -> tuple[bool, str | None]:
    """Whether the view at ``search`` can be drawn complete (starting what it waits for if not),
    and the words for a long-data fit's progress (None for other views)."""
    state, _ = parse_query(search)
    shown, _slides, _notices = vm.effective_state(services, state)
    try:
        if long_view.is_long(services, shown):
            return long_view.long_poll(services, shown)
        return vm.parallel_analysis_done(services, shown), None
    except Exception:  # the view itself reports problems; stop asking
        log.exception("Checking parallel analysis for %s failed", search)
        return True, None
