"""Long-running fits of server-side datasets: run in the background, their state on disk.

A fit of 10^7 rows takes minutes, far longer than a request. The first page
that needs it starts it in a thread of its worker process; its state (phase,
pieces done of the total, or the error) lives in the shared result cache, so
any worker process can report it while the page polls. One fit per key runs at
a time across processes: the runner holds the key's file lock
(:mod:`webapp.store.file_lock`), which dies with its process, so a fit whose
process died is started again by the next page that asks.

Only finished results are cached: a fit that fails leaves its error (shown to
the user) and nothing else; it is tried again after ``RETRY_SECONDS``.

Keys are built by the caller from the parts' fingerprint, the canonical recipe
and ``ENGINE_VERSION`` (see :func:`long_key`), and contain ``/<fingerprint>``,
so :meth:`webapp.store.compute.ComputeLayer.forget` drops them with the dataset.
"""

from __future__ import annotations

import hashlib
import logging
import os
import threading
import time

from webapp.analysis import ENGINE_VERSION
from webapp.analysis.errors import OrdinateError

RETRY_SECONDS = 30.0
STATUS_PREFIX = "longstatus/"
UNEXPECTED = ("The fit of this dataset failed because of a problem on the server. Nothing was kept; "
              "reload the page to try again, or tell the person who runs this server.")

log = logging.getLogger("ordinate")


def long_key(kind: str, fingerprint: str, recipe_json: str, *extra) -> str:
    digest = hashlib.sha256(recipe_json.encode("utf-8")).hexdigest()
    tail = "".join(f"/{part}" for part in extra)
    return f"long{kind}/{ENGINE_VERSION}/{fingerprint}/{digest}{tail}"


class LongFits:
    """Background jobs and their results, over a :class:`~webapp.store.compute.ComputeLayer`'s cache."""

    def __init__(self, compute):
        self.compute = compute
        self._threads: dict[str, threading.Thread] = {}
        self._lock = threading.Lock()

    # --- reading -----------------------------------------------------------------

    def result(self, key: str):
        """The finished result under ``key``, or None."""
        return self.compute._peek(key)

    def status(self, key: str) -> dict:
        """``{"state": "done" | "running" | "failed" | "idle", "phase", "done", "total", "message"}``."""
        if self.result(key) is not None:
            return {"state": "done"}
        status = self.compute.cache.get(STATUS_PREFIX + key)
        if not status:
            return {"state": "idle"}
        if status["state"] == "running" and not self._running_anywhere(key):
            return {"state": "idle"}  # its process ended without finishing
        if status["state"] == "failed" and time.time() - status.get("updated", 0) >= RETRY_SECONDS:
            return {"state": "idle"}  # a page that asks now tries again
        return status

    # --- running -----------------------------------------------------------------

    def start(self, key: str, job) -> str:
        """Run ``job(progress)`` in a thread unless done, running (anywhere) or recently failed; the state now.

        ``job`` returns the result to cache, or raises (OrdinateError: its message
        is shown; anything else: logged, a general message shown).
        ``progress(phase, done, total)`` writes the state for the pages to read.
        """
        status = self.status(key)
        if status["state"] != "idle":
            return status["state"]
        with self._lock:
            thread = self._threads.get(key)
            if thread is not None and thread.is_alive():
                return "running"
            lock = self.compute.result_lock(key)
            if not lock.acquire(timeout=0):
                return "running"  # another process holds it
            self._write(key, "running", phase="starting", done=0, total=0)
            thread = threading.Thread(target=self._run, args=(key, job, lock), daemon=True,
                                      name=f"ordinate-long-fit-{key[-12:]}")
            self._threads[key] = thread
        thread.start()
        return "running"

    def wait(self, key: str, timeout: float | None = None) -> dict:
        """Wait for this process's thread of ``key`` (tests and the command line); the final state."""
        thread = self._threads.get(key)
        if thread is not None:
            thread.join(timeout)
        return self.status(key)

    def _run(self, key: str, job, lock) -> None:
        def progress(phase: str, done: int, total: int) -> None:
            self._write(key, "running", phase=phase, done=int(done), total=int(total))

        try:
            value = job(progress)
            self.compute.cache.set(key, value)
            self.compute.cache.delete(STATUS_PREFIX + key)
        except OrdinateError as error:
            log.info("Long fit %s: %s", key, error)
            self._write(key, "failed", message=str(error))
        except Exception:  # never a traceback on the page
            log.exception("Long fit %s failed", key)
            self._write(key, "failed", message=UNEXPECTED)
        finally:
            lock.release()
            with self._lock:
                self._threads.pop(key, None)

    def _write(self, key: str, state: str, **fields) -> None:
        self.compute.cache.set(STATUS_PREFIX + key, {"state": state, "updated": time.time(), "pid": os.getpid(),
                                                     **fields})

    def _running_anywhere(self, key: str) -> bool:
        thread = self._threads.get(key)
        if thread is not None and thread.is_alive():
            return True
        lock = self.compute.result_lock(key)
        if lock.acquire(timeout=0):
            lock.release()
            return False
        return True
