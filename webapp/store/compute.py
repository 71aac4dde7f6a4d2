"""The cached computation layer between the dashboard and the engine.

Two kinds of result are kept on disk in a diskcache shared by every worker
process (and by background jobs):

* the parsed table of a dataset, keyed by content hash + engine version;
* the fitted recipe (preprocessing, PCA, component advice without parallel
  analysis), keyed by content hash + canonical recipe JSON + engine version;
* the component advice with parallel analysis, under the same key with its own
  prefix. Parallel analysis repeats the eigendecomposition for every
  permutation (about a second for 55 000 x 50), so a new view is drawn from
  the PCA alone (:meth:`ComputeLayer.first_fit`), parallel analysis runs in
  the background once the view is on screen, and the page asks again
  (:meth:`ComputeLayer.is_complete`).

Everything that only changes what is drawn (axes, sigma levels, colours,
labels, arrows) and everything derived cheaply from a fit (T², Q and their
limits for a given K and confidence) is computed from the cached fit, so it
never refits. A small in-process memo of recently used fits avoids reading a
large pickle from disk on every redraw; it is keyed by the same content key,
so it can never disagree with the disk cache.

``stats()`` reports how many parses, PCA fits and parallel analyses this cache
has performed, which tests use to prove that a redraw did not refit.
"""

from __future__ import annotations

import hashlib
import logging
import re
import threading
from collections import OrderedDict
from pathlib import Path

import diskcache

from webapp.analysis import ENGINE_VERSION
from webapp.analysis.errors import OrdinateError
from webapp.analysis.ingest import Table, read_table, transpose_table
from webapp.analysis.pipeline import (
    FittedRecipe,
    fit_recipe,
    parallel_advice,
    with_parallel_analysis,
)
from webapp.analysis.recipe import Recipe
from webapp.store.file_lock import FileLock
from webapp.store.long_fits import LongFits
from webapp.store.storage import DataStore, DatasetRecord

DEFAULT_CACHE_BYTES = 8 * 2**30
MEMO_ENTRIES = 6  # a table, its fit and advice, and those of the view before
DRAWING_MEMO_ENTRIES = 32
# A live holder still computing after this long is presumed stuck: the waiter computes
# the result itself. A holder that died releases its lock at once (see webapp.store.file_lock).
LOCK_SECONDS = 900
LOCK_DIR = "locks"

log = logging.getLogger("ordinate")


class ComputeLayer:
    def __init__(self, store: DataStore, cache_dir: str | Path, *, size_limit: int = DEFAULT_CACHE_BYTES):
        self.store = store
        self.cache = diskcache.Cache(str(cache_dir), size_limit=size_limit, eviction_policy="least-recently-used")
        self.lock_dir = Path(cache_dir) / LOCK_DIR
        self.lock_dir.mkdir(parents=True, exist_ok=True)
        self._memo: OrderedDict[str, object] = OrderedDict()
        self._memo_lock = threading.Lock()
        self._drawings: OrderedDict[tuple, object] = OrderedDict()
        self._completing: dict[str, threading.Thread] = {}
        self._failed: set[str] = set()  # complete fits that failed in this process: not retried
        self.long_fits = LongFits(self)  # fits of server-side datasets (webapp.store.long_fits)

    # --- public --------------------------------------------------------------

    def table(self, record: DatasetRecord, rows_are: str = "samples") -> Table:
        """The parsed file; ``rows_are="variables"``: read with one variable per row (each column a sample)."""
        if record.server_side:
            raise OrdinateError("This dataset stays on the server and is read by the Dask engine part by part, so "
                                "per-sample tables and downloads are not available for it; use `ordinate analyze "
                                "PATH --engine dask` on the server for the complete report.")
        if rows_are == "variables":
            return self._cached(f"table-transposed/{ENGINE_VERSION}/{record.content_hash}",
                                lambda: transpose_table(self.table(record), f"'{record.filename}'"), "parses")
        key = f"table/{ENGINE_VERSION}/{record.content_hash}"
        return self._cached(key, lambda: read_table(self.store.blob_path(record), filename=record.filename), "parses")

    def fit_in_background(self, record: DatasetRecord, recipe: Recipe, *,
                          parallel: bool = True) -> threading.Thread | None:
        """Start fitting now, unless this process is already at it; returns the thread doing the work.

        None when this fit already failed in this process (it is not retried).

        ``parallel=False`` stops at the PCA (:meth:`pca_fit`): an upload starts
        that while the browser is still on its way to the new view. The complete
        fit (parallel analysis) is started once the view is on screen, so that it
        does not compete with drawing the view for the server's cores.
        """
        key = advice_key(record.content_hash, recipe) if parallel else fit_key(record.content_hash, recipe)
        with self._memo_lock:
            running = self._completing.get(key)
            if running is not None and running.is_alive():
                return running
            if key in self._failed:
                return None  # the failure was logged when it happened
            thread = threading.Thread(target=self._quiet_fit, args=(record, recipe, key, parallel), daemon=True)
            self._completing[key] = thread
        thread.start()
        return thread

    def _quiet_fit(self, record, recipe, key, parallel) -> None:
        # A request that needs the fit reports any error itself; a view drawn from
        # the PCA alone stops waiting (first_fit reports it complete).
        try:
            self.fitted(record, recipe) if parallel else self.pca_fit(record, recipe)
        except OrdinateError as error:  # the data or recipe, not the program
            log.info("Fitting dataset %s in the background: %s", record.token, error)
            self._mark_failed(key)
        except Exception:
            log.exception("Fitting dataset %s in the background failed", record.token)
            self._mark_failed(key)
        finally:
            with self._memo_lock:
                self._completing.pop(key, None)

    def _mark_failed(self, key: str) -> None:
        with self._memo_lock:
            self._failed.add(key)

    def fitted(self, record: DatasetRecord, recipe: Recipe) -> FittedRecipe:
        """The complete fit, parallel analysis included (computed now if nobody has)."""
        pca_fit = self.pca_fit(record, recipe)
        advice = self._cached(advice_key(record.content_hash, recipe), lambda: parallel_advice(pca_fit), "parallel")
        return with_parallel_analysis(pca_fit, advice=advice)

    def pca_fit(self, record: DatasetRecord, recipe: Recipe) -> FittedRecipe:
        """The fit without parallel analysis: its advice recommends K by the broken-stick model."""
        key = fit_key(record.content_hash, recipe)
        return self._cached(key, lambda: fit_recipe(self.table(record, recipe.rows_are), recipe, parallel=False), "fits")

    def first_fit(self, record: DatasetRecord, recipe: Recipe) -> tuple[FittedRecipe, bool]:
        """The complete fit when it is ready, else the PCA-only fit at once.

        Returns ``(fit, complete)``. When ``complete`` is False, parallel
        analysis is still to come: start it with :meth:`fit_in_background`;
        :meth:`is_complete` tells when asking again gives the complete fit.
        A complete fit that failed in this process counts as complete, so a
        page does not wait for it forever.
        """
        pca_fit = self.pca_fit(record, recipe)
        key = advice_key(record.content_hash, recipe)
        advice = self._peek(key)
        if advice is not None:
            return with_parallel_analysis(pca_fit, advice=advice), True
        return pca_fit, key in self._failed

    def is_complete(self, record: DatasetRecord, recipe: Recipe) -> bool:
        """Whether parallel analysis is done (in any process), or failed in this one."""
        key = advice_key(record.content_hash, recipe)
        return key in self._failed or self._peek(key) is not None

    def drawing(self, key: tuple, build):
        """A figure (or other derived, immutable value) built once per process for ``key``.

        The key must hold everything the value depends on, starting with the fit
        key; it saves rebuilding the panels a visual change did not touch.
        """
        with self._memo_lock:
            if key in self._drawings:
                self._drawings.move_to_end(key)
                return self._drawings[key]
        value = build()
        with self._memo_lock:
            self._drawings[key] = value
            while len(self._drawings) > DRAWING_MEMO_ENTRIES:
                self._drawings.popitem(last=False)
        return value

    def forget(self, content_hash: str) -> None:
        """Drop every cached result of a dataset's bytes (after its deletion).

        A result being computed or written (in any process) holds its key's lock
        until it is on disk; waiting for those locks first keeps such a result
        from landing after the deletion.
        """
        marker = f"/{content_hash}"
        for path in self.lock_dir.glob(f"*{content_hash}*.lock"):
            lock = FileLock(path)
            if lock.acquire(timeout=LOCK_SECONDS):
                lock.release()
        # Also drops "lock/..." rows that versions before file locks left in the cache.
        for key in list(self.cache.iterkeys()):
            if isinstance(key, str) and marker in key:
                self.cache.delete(key)
        with self._memo_lock:
            for key in [k for k in self._memo if marker in k]:
                del self._memo[key]

    def result_lock(self, key: str) -> FileLock:
        """The lock that lets one thread in one process compute the result under ``key``."""
        return FileLock(self.lock_dir / f"{_LOCK_NAME_UNSAFE.sub('_', key)}.lock")

    def stats(self) -> dict[str, int]:
        return {name: int(self.cache.get(f"stats/{name}", 0)) for name in ("fits", "parses", "parallel")}

    # --- internals -----------------------------------------------------------

    def _peek(self, key: str):
        """A cached value, or None; never computes."""
        with self._memo_lock:
            if key in self._memo:
                return self._memo[key]
        return self.cache.get(key)

    def _cached(self, key: str, compute, counter: str):
        with self._memo_lock:
            if key in self._memo:
                self._memo.move_to_end(key)
                return self._memo[key]
        value = self.cache.get(key)
        if value is None:
            # One computation per key across threads and worker processes: the
            # others wait for it (a dead holder's lock is free at once).
            lock = self._wait_for_lock(key)
            try:
                value = self.cache.get(key)
                if value is None:
                    # Errors (OrdinateError) propagate and are not cached: the user may
                    # fix the recipe, and a transient failure must not stick.
                    value = compute()
                    self.cache.incr(f"stats/{counter}")
                    self._remember(key, value)
                    # Writing a large result to disk takes a tenth of a second or more:
                    # the caller goes on with it meanwhile, and the lock, released after
                    # the write, keeps other processes waiting for it instead of refitting.
                    threading.Thread(target=self._write_and_release, args=(key, value, lock)).start()
                    lock = None
                    return value
            finally:
                if lock is not None:
                    lock.release()
        self._remember(key, value)
        return value

    def _wait_for_lock(self, key: str) -> FileLock | None:
        lock = self.result_lock(key)
        if not lock.acquire(timeout=LOCK_SECONDS):
            log.warning("Computing %s without its lock: the holder has been at it for %d s", key, LOCK_SECONDS)
            return None
        if lock.taken_over_from:
            log.info("Took over the lock of %s from process %s, which ended while holding it",
                     key, lock.taken_over_from)
        return lock

    def _remember(self, key: str, value) -> None:
        with self._memo_lock:
            self._memo[key] = value
            self._memo.move_to_end(key)
            while len(self._memo) > MEMO_ENTRIES:
                self._memo.popitem(last=False)

    def _write_and_release(self, key: str, value, lock: FileLock | None) -> None:
        # Not a daemon thread: a worker that is shutting down finishes the write first.
        try:
            self.cache.set(key, value)
        except Exception:  # e.g. a full disk: other processes will compute it again
            log.exception("Could not store %s in the result cache", key)
        finally:
            if lock is not None:
                lock.release()


def fit_key(content_hash: str, recipe: Recipe) -> str:
    return f"fit/{ENGINE_VERSION}/{content_hash}/{_recipe_digest(recipe)}"


def advice_key(content_hash: str, recipe: Recipe) -> str:
    return f"advice/{ENGINE_VERSION}/{content_hash}/{_recipe_digest(recipe)}"


_LOCK_NAME_UNSAFE = re.compile(r"[^A-Za-z0-9._-]")


def _recipe_digest(recipe: Recipe) -> str:
    return hashlib.sha256(recipe.canonical_json().encode("utf-8")).hexdigest()
