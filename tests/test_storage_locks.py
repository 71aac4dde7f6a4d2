"""Result locks between worker processes: a killed holder's lock is taken over at once,
a live holder's lock is waited for.

The behaviour relied on is flock(2) (Linux man-pages): a lock belongs to an open
file description and is released when its last descriptor closes, which the
kernel does when a process dies; descriptors from separate open() calls lock
independently, even within one process.
"""

from __future__ import annotations

import logging
import os
import signal
import subprocess
import sys
import textwrap
import threading
import time
from pathlib import Path

import pytest

from webapp.analysis.recipe import Recipe
from webapp.store.compute import ComputeLayer, fit_key
from webapp.store.file_lock import FileLock
from webapp.store.storage import DataStore

ROOT = Path(__file__).resolve().parents[1]
CSV = "sample,a,b,c\n" + "".join(f"S{i},{i % 7}.5,{(i * 3) % 11}.25,{(i * 5) % 13}.0\n" for i in range(40))

# Runs in another process: take the fit lock of the dataset, say so, then wait for
# one line on stdin. "write" means: compute the fit, store it, release the lock.
HOLDER = textwrap.dedent("""
    import sys
    from webapp.analysis.pipeline import fit_recipe
    from webapp.analysis.recipe import Recipe
    from webapp.store.compute import ComputeLayer, fit_key
    from webapp.store.storage import DataStore

    data_dir, token = sys.argv[1], sys.argv[2]
    store = DataStore(data_dir)
    compute = ComputeLayer(store, data_dir + "/results")
    record = store.dataset(token)
    key = fit_key(record.content_hash, Recipe())
    lock = compute.result_lock(key)
    lock.acquire()
    print("held", flush=True)
    if sys.stdin.readline().strip() == "write":
        compute.cache.set(key, fit_recipe(compute.table(record), Recipe(), parallel=False))
        lock.release()
        print("released", flush=True)
""")


@pytest.fixture
def data_dir(tmp_path) -> Path:
    return tmp_path / "data"


@pytest.fixture
def compute(data_dir) -> ComputeLayer:
    return ComputeLayer(DataStore(data_dir), data_dir / "results")


@pytest.fixture
def record(compute):
    return compute.store.add_bytes(CSV.encode(), "locks.csv")


def start_holder(data_dir: Path, token: str) -> subprocess.Popen:
    holder = subprocess.Popen([sys.executable, "-c", HOLDER, str(data_dir), token], cwd=ROOT,
                              stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    assert holder.stdout.readline().strip() == "held"
    return holder


def fit_in_thread(compute: ComputeLayer, record) -> tuple[threading.Thread, dict]:
    outcome: dict = {}

    def fit():
        outcome["fit"] = compute.pca_fit(record, Recipe())

    thread = threading.Thread(target=fit, daemon=True)
    thread.start()
    return thread, outcome


def test_the_lock_of_a_killed_holder_is_taken_over(compute, record, data_dir, caplog):
    holder = start_holder(data_dir, record.token)
    lock_file = compute.result_lock(fit_key(record.content_hash, Recipe())).path
    assert lock_file.read_text().split()[0] == str(holder.pid)  # the holder's note

    holder.send_signal(signal.SIGKILL)
    assert holder.wait(timeout=60) == -signal.SIGKILL
    with caplog.at_level(logging.INFO, logger="ordinate"):
        thread, outcome = fit_in_thread(compute, record)
        thread.join(timeout=60)

    assert not thread.is_alive(), "the fit still waits for the killed process's lock"
    assert outcome["fit"].pca.n_components >= 1
    assert compute.stats()["fits"] == 1  # computed here, since the holder never stored it
    assert f"from process {holder.pid} " in caplog.text  # taken over from the killed holder
    # The result is written, and the lock released, by a background thread after the fit returns.
    deadline = time.monotonic() + 30
    while lock_file.exists() and time.monotonic() < deadline:
        time.sleep(0.01)
    assert not lock_file.exists()  # released after the write, and removed


def test_a_live_holder_is_waited_for_not_robbed(compute, record, data_dir):
    holder = start_holder(data_dir, record.token)
    thread, outcome = fit_in_thread(compute, record)
    thread.join(timeout=1.0)
    assert thread.is_alive(), "the fit went ahead while another live process held its lock"

    holder.stdin.write("write\n")
    holder.stdin.flush()
    assert holder.stdout.readline().strip() == "released"
    thread.join(timeout=60)
    holder.wait(timeout=60)

    assert not thread.is_alive()
    assert "fit" in outcome
    # It waited and used the holder's result; a stolen lock would have meant a fit here.
    assert compute.stats()["fits"] == 0


def test_threads_of_one_process_exclude_each_other(tmp_path):
    # flock(2): separate open() calls lock independently, so one process's threads are covered too.
    first, second = FileLock(tmp_path / "k.lock"), FileLock(tmp_path / "k.lock")
    assert first.acquire(timeout=0)
    assert not second.acquire(timeout=0.05)
    first.release()
    assert second.acquire(timeout=0)
    assert second.taken_over_from is None  # released properly, so nothing was taken over
    second.release()
    assert not (tmp_path / "k.lock").exists()


def test_a_waiter_on_a_file_removed_at_release_locks_the_new_one(tmp_path):
    # The holder removes the file as it lets go; a waiter that had opened the old
    # file must not count the lock on it as the lock, or two could hold the key.
    path = tmp_path / "k.lock"
    holder = FileLock(path)
    holder.acquire()
    stale_fd = os.open(path, os.O_RDWR)
    holder.release()
    newcomer = FileLock(path)
    assert newcomer.acquire(timeout=0)
    late = FileLock(path)
    assert not late.acquire(timeout=0.05)  # the newcomer holds the file now at the path
    newcomer.release()
    os.close(stale_fd)


def test_forget_takes_over_a_dead_holders_lock_and_removes_it(compute, record, data_dir):
    compute.table(record)
    holder = start_holder(data_dir, record.token)
    holder.send_signal(signal.SIGKILL)
    holder.wait(timeout=60)

    done = threading.Thread(target=compute.forget, args=(record.content_hash,), daemon=True)
    done.start()
    done.join(timeout=60)

    assert not done.is_alive()
    assert list(compute.lock_dir.iterdir()) == []
    assert not [k for k in compute.cache.iterkeys() if isinstance(k, str) and record.content_hash in k]


def test_deleting_the_same_bytes_while_they_are_being_added_keeps_the_new_copy(tmp_path, monkeypatch):
    # The blob is placed and registered in one index transaction, and an unused blob
    # is removed in another, so a deletion cannot slip in between (here it is started
    # exactly there; before, it removed the file the new dataset was about to name).
    store = DataStore(tmp_path / "data")
    old = store.add_bytes(CSV.encode(), "old.csv")
    register = store._register
    deleting = []

    def register_after_a_deletion_starts(*args):
        worker = threading.Thread(target=store.delete_dataset, args=(old.token,), daemon=True)
        worker.start()
        worker.join(timeout=0.5)  # it finishes here only if nothing holds it back
        deleting.append(worker)
        return register(*args)

    monkeypatch.setattr(store, "_register", register_after_a_deletion_starts)
    new = store.add_bytes(CSV.encode(), "new.csv")
    deleting[0].join(timeout=60)

    assert not deleting[0].is_alive()
    assert store.dataset(old.token) is None
    assert store.read_bytes(store.dataset(new.token)) == CSV.encode()
