"""Follow links: attendees of a presentation see the presenter's current view.

A follow session belongs to one presenter and one dataset. It has two secrets:

* ``code``, public to the meeting: ``/follow/<code>`` opens the presenter's
  current view and keeps following it;
* ``presenter_key``, kept only in the presenter's browser tab (session
  storage): every update and the end need it, so attendees can look but never
  move the presenter.

Sessions live in the dataset store's index (diskcache/SQLite in the data
directory), so every worker process sees the same current view; nothing is kept
in one process's memory. Each update bumps a ``revision`` number, which is what
followers compare. A session ends when the presenter leaves the presentation,
when its dataset is deleted, or after :data:`IDLE_HOURS` without an update.
"""

from __future__ import annotations

import hmac
import time
from dataclasses import dataclass

from webapp.store.storage import DataStore, is_token, new_token

__all__ = ["IDLE_HOURS", "FollowSession", "FollowSessions"]

#: A session nobody updated for this long counts as ended (a presenter who closed the tab).
IDLE_HOURS = 12
_MAX_QUERY_CHARS = 16_000


@dataclass(frozen=True)
class FollowSession:
    code: str
    dataset_token: str
    query: str  # the presenter's current view, as its URL query (without "?")
    revision: int
    active: bool
    updated: float


class FollowSessions:
    """Start, update, read and end follow sessions in ``store``'s index."""

    def __init__(self, store: DataStore, clock=time.time):
        self._index = store.index
        self._store = store
        self._clock = clock

    def start(self, dataset_token: str, query: str) -> tuple[FollowSession, str]:
        """A new session showing ``query``; returns it with the presenter's key."""
        code, key = new_token(), new_token()
        data = {"code": code, "dataset_token": dataset_token, "query": query[:_MAX_QUERY_CHARS],
                "revision": 1, "active": True, "updated": self._clock(), "key": key}
        self._index.set(("follow", code), data)
        return _session(data), key

    def update(self, code: str, presenter_key: str, query: str) -> FollowSession | None:
        """Show ``query`` to the followers; None if the key is wrong or the session ended."""
        with self._index.transact():
            data = self._owned(code, presenter_key)
            if data is None or not data["active"]:
                return None
            if data["query"] != query[:_MAX_QUERY_CHARS]:
                data = {**data, "query": query[:_MAX_QUERY_CHARS], "revision": data["revision"] + 1}
            data = {**data, "updated": self._clock()}
            self._index.set(("follow", code), data)
        return _session(data)

    def end(self, code: str, presenter_key: str) -> bool:
        with self._index.transact():
            data = self._owned(code, presenter_key)
            if data is None:
                return False
            self._index.set(("follow", code), {**data, "active": False, "revision": data["revision"] + 1})
        return True

    def get(self, code: object) -> FollowSession | None:
        """The session as followers see it (ended once idle or once its dataset is gone)."""
        if not is_token(code):
            return None
        data = self._index.get(("follow", code))
        if data is None:
            return None
        session = _session(data)
        idle = self._clock() - session.updated > IDLE_HOURS * 3600
        if session.active and (idle or self._store.dataset(session.dataset_token) is None):
            session = FollowSession(**{**session.__dict__, "active": False})
        return session

    def _owned(self, code: object, presenter_key: object) -> dict | None:
        if not is_token(code) or not isinstance(presenter_key, str):
            return None
        data = self._index.get(("follow", code))
        if data is None or not hmac.compare_digest(data["key"].encode(), presenter_key.encode()):
            return None
        return data


def _session(data: dict) -> FollowSession:
    return FollowSession(**{name: data[name] for name in FollowSession.__dataclass_fields__})
