"""Saved views and presentation: the slides of a dataset, saving a view, notes rendered safely.

Part of :mod:`webapp.ui.view_model`, which puts the panels together; no Dash here.
"""

from __future__ import annotations

import re
import time
from dataclasses import dataclass

from webapp.analysis import ENGINE_VERSION
from webapp.state import ViewState, parse_query, to_query

NO_SLIDES_NOTICE = "This dataset has no saved views yet, so the current view is shown. Save views to step through them."


@dataclass(frozen=True)
class Slides:
    position: int
    count: int


def effective_state(services, state: ViewState) -> tuple[ViewState, Slides | None, tuple[str, ...]]:
    """The state to draw: in presentation mode, the saved view at the slide position."""
    if not state.present:
        return state, None, ()
    views = services.store.views_for_dataset(state.dataset) if state.dataset else []
    if not views:
        return state, Slides(1, 1), (NO_SLIDES_NOTICE,)
    position = min(max(state.slide, 1), len(views))
    view = views[position - 1]
    saved, notices = parse_query(view.query)
    shown = saved.replace(dataset=state.dataset, present=True, slide=position, saved_view=view.view_id)
    return shown, Slides(position, len(views)), notices


def saved_view_info(services, state: ViewState) -> dict | None:
    """Title, note and provenance of the saved view a state was opened from."""
    if state.saved_view is None:
        return None
    view = services.store.view(state.saved_view)
    if view is None or view.dataset_token != state.dataset:
        return None
    return {
        "view_id": view.view_id,
        "title": view.title,
        "note": safe_markdown(view.note),
        "author": view.author,
        "saved": _utc(view.created),
        "engine_version": view.engine_version,
        "content_hash": view.content_hash,
        "outdated_engine": view.engine_version != ENGINE_VERSION,
        "parent": view.parent,
    }


def saved_views_list(services, dataset_token: str | None) -> list[dict]:
    if not dataset_token:
        return []
    return [
        {"view_id": v.view_id, "title": v.title, "note": _preview(v.note), "author": v.author,
         "saved": _utc(v.created), "position": i + 1}
        for i, v in enumerate(services.store.views_for_dataset(dataset_token))
    ]


def save_view(services, state: ViewState, *, title: str, note: str, author: str, parent: str | None):
    """Store the current view as a new immutable saved view."""
    record = services.store.dataset(state.dataset)
    if record is None:
        raise DatasetNotFound(state.dataset)
    snapshot = state.replace(saved_view=None, present=False, slide=1)
    return services.store.save_view(
        record.token, to_query(snapshot), title=title, note=note, author=author,
        content_hash=record.content_hash, engine_version=ENGINE_VERSION, parent=parent,
    )


_UNSAFE_LINK = re.compile(
    r"\]\(\s*<?\s*(?:javascript|vbscript|data|file)\s*:(?:[^()]|\([^()]*\))*\)", re.IGNORECASE
)
from webapp.ui.resolution import DatasetNotFound

_UNSAFE_AUTOLINK = re.compile(r"<\s*(?:javascript|vbscript|data|file)\s*:[^>]*>", re.IGNORECASE)


def safe_markdown(text: str) -> str:
    """Markdown source with script-capable link targets removed.

    Rendered by dcc.Markdown without raw HTML (dangerously_allow_html stays
    False), so tags show as text; this removes the remaining route, links
    whose target is javascript:, vbscript:, data: or file:.
    """
    text = _UNSAFE_LINK.sub("](#removed-link)", text or "")
    return _UNSAFE_AUTOLINK.sub("(removed link)", text)


def _preview(note: str, limit: int = 140) -> str:
    flat = " ".join((note or "").split())
    return flat if len(flat) <= limit else flat[: limit - 1] + "…"


def _utc(timestamp: float) -> str:
    return time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime(timestamp))
