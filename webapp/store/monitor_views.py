"""Saved monitoring views: immutable (model code, query) pairs with a title, kept in the data store's index.

A saved monitoring view is opened at ``/m/<code>?...&view=<id>``; its query
string is the monitoring view's URL form (:mod:`webapp.state.monitor_state`).
Stored under keys of their own (``("monitor-view", id)`` and
``("monitor-views-of", code)``) in :attr:`DataStore.index`, one SQLite
transaction per save, so every worker sees a view as soon as it is saved.
"""

from __future__ import annotations

import time
from dataclasses import asdict, dataclass

from webapp.store.storage import DataStore, _clean_text, is_token, new_token

__all__ = ["SavedMonitorView", "monitor_view", "monitor_views_for", "save_monitor_view"]


@dataclass(frozen=True)
class SavedMonitorView:
    view_id: str
    model_code: str
    query: str
    title: str
    note: str
    author: str
    created: float


def save_monitor_view(store: DataStore, model_code: str, query: str, *, title: str, note: str = "",
                      author: str = "") -> SavedMonitorView:
    if not is_token(model_code):
        raise KeyError(model_code)
    view = SavedMonitorView(new_token(), model_code, str(query)[:4000],
                            _clean_text(title, 200) or "Untitled monitoring view",
                            _clean_text(note, 20_000, keep_newlines=True), _clean_text(author, 100), time.time())
    with store.index.transact():
        store.index.set(("monitor-view", view.view_id), asdict(view))
        order = store.index.get(("monitor-views-of", model_code), ())
        store.index.set(("monitor-views-of", model_code), (*order, view.view_id))
    return view


def monitor_view(store: DataStore, view_id: object) -> SavedMonitorView | None:
    if not is_token(view_id):
        return None
    data = store.index.get(("monitor-view", view_id))
    return SavedMonitorView(**data) if data else None


def monitor_views_for(store: DataStore, model_code: str) -> list[SavedMonitorView]:
    """Saved monitoring views of one locked model, oldest first."""
    ids = store.index.get(("monitor-views-of", model_code), ()) if is_token(model_code) else ()
    views = [monitor_view(store, view_id) for view_id in ids]
    return [v for v in views if v is not None]
