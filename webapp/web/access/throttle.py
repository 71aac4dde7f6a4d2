"""A budget of wrong sign-in keys per client address, shared by every worker process.

Guessing is refused by answering, not by waiting: a wrong key costs nothing
but a count, and an address that spends its budget gets ``429 Too Many
Requests`` with ``Retry-After`` until its block ends. No request ever sleeps, so
guessers cannot tie up the threads that serve signed-in people.

Rules (see docs/deployment.md):

* :data:`FAILURE_BUDGET` wrong keys within :data:`WINDOW_SECONDS` block the
  address; the first block lasts :data:`FIRST_BLOCK_SECONDS` and each further
  one twice as long as the one before, up to :data:`MAX_BLOCK_SECONDS`
  (exponential back-off, common practice).
* An address with no wrong key for :data:`FORGET_AFTER_SECONDS` starts afresh;
  so does one that signs in with the right key.
* IPv6 clients are counted per /64 network: one host usually holds a whole
  /64 and could otherwise step through its addresses (common practice).
* Behind a reverse proxy every request comes from the proxy, so one guesser
  would block the whole team. When the peer is a proxy gunicorn trusts
  (``FORWARDED_ALLOW_IPS``, default ``127.0.0.1,::1``), the client is the last
  address in ``X-Forwarded-For``, the one that proxy added
  (:func:`client_address`); a client cannot forge it, since the proxy appends
  the address it saw to whatever the client sent.

The counts live in a diskcache store in the data directory, so the budget
holds across gunicorn workers; each update is one SQLite transaction. If that
store cannot be used, sign-in still works (the key is still required) and the
problem is logged.
"""

from __future__ import annotations

import ipaddress
import logging
import math
import os
import sqlite3
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import diskcache

__all__ = [
    "FAILURE_BUDGET",
    "WINDOW_SECONDS",
    "FIRST_BLOCK_SECONDS",
    "MAX_BLOCK_SECONDS",
    "FORGET_AFTER_SECONDS",
    "THROTTLE_DIR_NAME",
    "SignInThrottle",
    "client_address",
    "client_bucket",
]

FAILURE_BUDGET = 5
WINDOW_SECONDS = 60.0
FIRST_BLOCK_SECONDS = 60.0
MAX_BLOCK_SECONDS = 3600.0
FORGET_AFTER_SECONDS = 6 * 3600.0
THROTTLE_DIR_NAME = "sign-in-throttle"
_STORE_BYTES = 16 * 2**20  # plenty for the counts; old addresses are culled beyond it
_STORE_TIMEOUT_SECONDS = 2.0

log = logging.getLogger("ordinate.access")
Clock = Callable[[], float]


@dataclass(frozen=True)
class _Record:
    """One address's state: wrong keys in its current window, how often it was blocked."""

    failures: int = 0
    window_start: float = 0.0
    blocks: int = 0
    blocked_until: float = 0.0
    last_failure: float = 0.0


def client_address(remote_addr: str | None, forwarded_for: str | None,
                   trusted_proxies: str | None = None) -> str | None:
    """The address to count a sign-in under: the peer, or the client a trusted proxy saw."""
    if trusted_proxies is None:
        trusted_proxies = os.environ.get("FORWARDED_ALLOW_IPS", "127.0.0.1,::1")
    trusted = {entry.strip() for entry in trusted_proxies.split(",")}
    if forwarded_for and ("*" in trusted or (remote_addr or "") in trusted):
        last = forwarded_for.split(",")[-1].strip()
        if last:
            return last
    return remote_addr


def client_bucket(address: str | None) -> str:
    """The key an address is counted under: the IPv4 address, or the IPv6 /64 network."""
    try:
        parsed = ipaddress.ip_address(str(address or "").strip())
    except ValueError:
        return f"other:{str(address or '')[:100]}"
    mapped = getattr(parsed, "ipv4_mapped", None)
    if mapped is not None:
        parsed = mapped
    if parsed.version == 6:
        return f"v6:{ipaddress.ip_network(f'{parsed}/64', strict=False)}"
    return f"v4:{parsed}"


class SignInThrottle:
    """Counts wrong keys per address in ``directory`` (a diskcache store); ``clock`` is injectable."""

    def __init__(self, directory: str | Path, clock: Clock = time.time):
        self._store = diskcache.Cache(str(directory), size_limit=_STORE_BYTES, timeout=_STORE_TIMEOUT_SECONDS,
                                      eviction_policy="least-recently-stored")
        self._clock = clock

    def retry_after(self, address: str | None) -> int:
        """Seconds (rounded up) until ``address`` may try a key again; 0 when it may now."""
        try:
            record = self._current(self._store.get(client_bucket(address)), self._clock())
        except (sqlite3.Error, OSError, diskcache.Timeout):
            log.warning("the sign-in throttle store cannot be read; sign-in continues without it", exc_info=True)
            return 0
        return _seconds_left(record, self._clock())

    def record_failure(self, address: str | None) -> int:
        """Count one wrong key; return the seconds of the block it started (0: none started)."""
        bucket = client_bucket(address)
        try:
            with self._store.transact():
                now = self._clock()
                record = _after_failure(self._current(self._store.get(bucket), now), now)
                self._store.set(bucket, _as_tuple(record), expire=FORGET_AFTER_SECONDS + MAX_BLOCK_SECONDS)
        except (sqlite3.Error, OSError, diskcache.Timeout):
            log.warning("the sign-in throttle store cannot be written; wrong keys are not counted", exc_info=True)
            return 0
        return _seconds_left(record, now)

    def forget(self, address: str | None) -> None:
        """Clear an address after it signed in with the right key."""
        try:
            self._store.delete(client_bucket(address))
        except (sqlite3.Error, OSError, diskcache.Timeout):
            log.warning("the sign-in throttle store cannot be written", exc_info=True)

    def close(self) -> None:
        self._store.close()

    @staticmethod
    def _current(stored: object, now: float) -> _Record:
        if not isinstance(stored, tuple) or len(stored) != 5:
            return _Record()
        record = _Record(*stored)
        if now - record.last_failure > FORGET_AFTER_SECONDS and now >= record.blocked_until:
            return _Record()
        return record


def _after_failure(record: _Record, now: float) -> _Record:
    failures, window_start = record.failures, record.window_start
    if now - window_start > WINDOW_SECONDS:
        failures, window_start = 0, now
    failures += 1
    if failures < FAILURE_BUDGET:
        return _Record(failures, window_start, record.blocks, record.blocked_until, now)
    block = min(MAX_BLOCK_SECONDS, FIRST_BLOCK_SECONDS * 2 ** min(record.blocks, 32))
    return _Record(0, now, record.blocks + 1, now + block, now)


def _seconds_left(record: _Record, now: float) -> int:
    return max(0, math.ceil(record.blocked_until - now))


def _as_tuple(record: _Record) -> tuple:
    return (record.failures, record.window_start, record.blocks, record.blocked_until, record.last_failure)
