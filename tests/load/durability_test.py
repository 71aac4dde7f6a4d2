"""Durability test, run on demand: ``kill -9`` the server mid-write, restart, lose nothing.

Run as a script::

    python3 tests/load/durability_test.py --rounds 20

or through pytest, only when named::

    python3 -m pytest tests/load -s

Every round uses the same data directory. It starts ``ordinate serve --workers 2``
(start-up must succeed every time), checks what earlier rounds were promised,
then runs a stream of uploads and saves from a few threads and, after a random
short delay, kills every server process at once (``kill -9`` of the process
group: the gunicorn master and its workers), mid-request.

What was promised is what the server answered with success: an upload answered
200 with a token (and opened by ``open_uploaded``), a save answered with a
``/v/<id>`` link. After each restart

* the first view drawn is timed (the slowest over all rounds is reported; a lock
  left by a killed process would show as a stall of many seconds),
* every upload and save acknowledged in the round before the kill is checked in
  full: the dataset's view draws a real scores figure (and the rest of the view)
  within 30 s, the short link redirects to its view, which draws and shows its
  saved-view banner,
* at the end, after the last kill, one more restart checks every upload and save
  of all rounds the same way, and the data directory's SQLite stores pass
  ``PRAGMA integrity_check`` and every stored file matches its content hash.

Uploads are small synthetic CSV files (fixed seeds, see ``load_test.synthetic_csv``).
"""

from __future__ import annotations

import argparse
import hashlib
import json
import random
import sqlite3
import sys
import tempfile
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path

REPOSITORY = Path(__file__).resolve().parents[2]
if str(REPOSITORY) not in sys.path:  # run as a script from anywhere
    sys.path.insert(0, str(REPOSITORY))

from tests.load.load_test import Recorder, Server, User, stop_on_sigterm, synthetic_csv  # noqa: E402
from webapp.state import ViewState, to_query  # noqa: E402

WRITER_THREADS = 3
KILL_AFTER_SECONDS = (0.5, 4.0)  # the random delay before kill -9, from when the writers start
WRITER_PAUSE_SECONDS = (0.1, 0.5)  # between one writer's requests, so a round holds a few dozen writes


@dataclass
class Promised:
    """What the server acknowledged: uploads (token -> view address) and saves (view id -> dataset token)."""
    uploads: dict = field(default_factory=dict)
    saves: dict = field(default_factory=dict)
    lock: threading.Lock = field(default_factory=threading.Lock)


@dataclass
class Check:
    lost: list = field(default_factory=list)           # acknowledged, then gone
    not_drawing: list = field(default_factory=list)    # there, but its view does not draw
    checked_uploads: int = 0
    checked_saves: int = 0
    slowest_callback: float = 0.0  # seconds, over every callback of every check
    slowest_item: float = 0.0      # seconds to open and draw one upload's or saved view's page


def writers(base: str, promised: Promised, round_number: int, stop: threading.Event) -> list[threading.Thread]:
    """Threads that upload and save until ``stop`` (or until the server dies under them)."""
    def work(number: int) -> None:
        user = User(base, Recorder(), number=number, retry_probe=False)
        pause = random.Random(round_number * 100 + number)
        try:
            user.current = user.open_page("/") or ""
            step = 0
            while not stop.is_set():
                seed = 1_000_000 + 10_000 * round_number + 100 * number + step
                step += 1
                user.last_upload_token = None
                search = user.upload(synthetic_csv(seed), f"synthetic-durability-{seed}.csv")
                token = user.last_upload_token
                if token is None:
                    continue
                # Promised as soon as the upload was answered with its token, opened or not.
                with promised.lock:
                    promised.uploads[token] = "?" + to_query(ViewState(dataset=token))
                if search is None:
                    continue
                stop.wait(pause.uniform(*WRITER_PAUSE_SECONDS))
                view_id = user.save(search, f"Durability round {round_number} seed {seed}")
                if view_id is not None:
                    with promised.lock:
                        promised.saves[view_id] = token
                stop.wait(pause.uniform(*WRITER_PAUSE_SECONDS))
        finally:
            user.close()

    return [threading.Thread(target=work, args=(n,), daemon=True) for n in range(WRITER_THREADS)]


def check_promised(base: str, uploads: dict, saves: dict, check: Check) -> None:
    """Every upload's view and every saved view must draw; record what is lost or does not draw."""
    recorder = Recorder()
    user = User(base, recorder, retry_probe=False)
    try:
        for token, search in uploads.items():
            check.checked_uploads += 1
            before, began = len(recorder.samples), time.monotonic()
            page = user.open_page("/" + search)
            if page is None or not user.draw_view(page, follow_parallel=False):
                problems = [s.problem for s in recorder.samples[before:] if s.problem]
                (check.lost if any("not found" in p for p in problems) else check.not_drawing).append(
                    ("upload", token, problems[:3]))
            check.slowest_item = max(check.slowest_item, time.monotonic() - began)
        for view_id, token in saves.items():
            check.checked_saves += 1
            before, began = len(recorder.samples), time.monotonic()
            view_search = user.open_short_link(view_id)
            if view_search is None:
                check.lost.append(("save", view_id, [s.problem for s in recorder.samples[before:] if s.problem][:3]))
                continue
            page = user.open_page("/" + view_search)
            if page is None or not user.draw_view(page, saved_view=view_id, follow_parallel=False):
                check.not_drawing.append(("save", view_id,
                                          [s.problem for s in recorder.samples[before:] if s.problem][:3]))
            check.slowest_item = max(check.slowest_item, time.monotonic() - began)
    finally:
        user.close()
        check.slowest_callback = max([check.slowest_callback] + [s.seconds for s in recorder.samples
                                                                  if s.kind == "callback"])


def first_view_seconds(base: str) -> tuple[float, str | None]:
    """Seconds to open the start page and draw its whole view, right after a restart."""
    recorder = Recorder()
    user = User(base, recorder, retry_probe=False)
    began = time.monotonic()
    try:
        search = user.open_page("/")
        ok = search is not None and user.draw_view(search)
    finally:
        user.close()
    problems = [s.problem for s in recorder.samples if s.problem]
    return time.monotonic() - began, None if ok else "; ".join(problems[:3]) or "no view"


def storage_problems(data_dir: Path) -> list[str]:
    """SQLite integrity of every store in the data directory, and every stored file against its hash."""
    from webapp.store.storage import DataStore

    problems = []
    for database in sorted(data_dir.rglob("*.db")):
        try:
            with sqlite3.connect(f"file:{database}?mode=ro", uri=True, timeout=30) as connection:
                result = connection.execute("PRAGMA integrity_check").fetchone()[0]
            if result != "ok":
                problems.append(f"{database.relative_to(data_dir)}: {result}")
        except sqlite3.Error as error:
            problems.append(f"{database.relative_to(data_dir)}: {error}")
    store = DataStore(data_dir)
    try:
        for record in store.datasets():
            path = store.blob_path(record)
            if not path.exists():
                problems.append(f"dataset {record.token}: its file is missing")
            elif hashlib.sha256(path.read_bytes()).hexdigest() != record.content_hash:
                problems.append(f"dataset {record.token}: its file does not match its hash")
    finally:
        store.index.close()
    return problems


def run_durability(rounds: int = 20, *, seed: int = 13, keep_log: Path | None = None, echo=print) -> dict:
    chooser = random.Random(seed)
    promised = Promised()
    check = Check()
    start_seconds, first_views, first_view_problems, kills = [], [], [], []
    with tempfile.TemporaryDirectory(prefix="ordinate-durability-") as temp:
        data_dir = Path(temp) / "data"
        log_path = Path(temp) / "server.log"
        start_failures = []
        previous = ({}, {})
        try:
            for round_number in range(rounds + 1):
                server = Server(data_dir, log_path=log_path)
                stop, threads, delay = threading.Event(), [], 0.0
                try:
                    start_seconds.append(server.start())
                except RuntimeError as error:
                    start_failures.append(f"round {round_number}: {error}")
                    break
                try:
                    seconds, problem = first_view_seconds(server.base)
                    first_views.append(seconds)
                    if problem:
                        first_view_problems.append(f"round {round_number}: {problem}")
                    final = round_number == rounds
                    with promised.lock:
                        uploads = dict(promised.uploads) if final else previous[0]
                        saves = dict(promised.saves) if final else previous[1]
                    check_promised(server.base, uploads, saves, check)
                    if final:
                        break
                    with promised.lock:
                        known_uploads, known_saves = set(promised.uploads), set(promised.saves)
                    stop = threading.Event()
                    threads = writers(server.base, promised, round_number, stop)
                    for thread in threads:
                        thread.start()
                    delay = chooser.uniform(*KILL_AFTER_SECONDS)
                    time.sleep(delay)
                finally:
                    server.kill()  # kill -9 of master and workers, mid-request
                kills.append(delay)
                stop.set()
                for thread in threads:
                    thread.join(timeout=60)
                with promised.lock:
                    previous = ({t: s for t, s in promised.uploads.items() if t not in known_uploads},
                                {v: t for v, t in promised.saves.items() if v not in known_saves})
                echo(f"round {round_number + 1}/{rounds}: up in {start_seconds[-1]:.1f} s, first view "
                     f"{first_views[-1]:.2f} s, killed after {delay:.2f} s with {len(previous[0])} uploads and "
                     f"{len(previous[1])} saves acknowledged this round")
            storage = storage_problems(data_dir)
        finally:
            log = log_path.read_text("utf-8", "replace") if log_path.exists() else ""
            if keep_log:
                Path(keep_log).write_text(log, "utf-8")
    return {
        "rounds": len(kills),
        "restarts": len(start_seconds),
        "start_failures": start_failures,
        "slowest_start_seconds": round(max(start_seconds, default=0.0), 2),
        "acknowledged_uploads": len(promised.uploads),
        "acknowledged_saves": len(promised.saves),
        "checked_uploads": check.checked_uploads,
        "checked_saves": check.checked_saves,
        "lost": check.lost,
        "not_drawing": check.not_drawing,
        "first_view_problems": first_view_problems,
        "slowest_first_view_seconds": round(max(first_views, default=0.0), 2),
        "median_first_view_seconds": round(sorted(first_views)[len(first_views) // 2], 2) if first_views else 0.0,
        "slowest_check_callback_seconds": round(check.slowest_callback, 2),
        "slowest_check_item_seconds": round(check.slowest_item, 2),
        "storage_problems": storage,
        "server_log_tracebacks": log.count("Traceback"),
        "server_log_tail": log[-3000:],
    }


def report(result: dict) -> str:
    lines = [
        f"{result['rounds']} kill -9 rounds, {result['restarts']} starts (slowest {result['slowest_start_seconds']} s), "
        f"start failures {len(result['start_failures'])}",
        f"acknowledged: {result['acknowledged_uploads']} uploads, {result['acknowledged_saves']} saves; checked "
        f"{result['checked_uploads']} upload views and {result['checked_saves']} saved views",
        f"lost {len(result['lost'])}, not drawing {len(result['not_drawing'])}, first-view problems "
        f"{len(result['first_view_problems'])}, storage problems {len(result['storage_problems'])}",
        f"first view after restart: median {result['median_first_view_seconds']} s, "
        f"slowest {result['slowest_first_view_seconds']} s; slowest check: callback "
        f"{result['slowest_check_callback_seconds']} s, page and view {result['slowest_check_item_seconds']} s; "
        f"server log tracebacks {result['server_log_tracebacks']}",
    ]
    for key in ("start_failures", "lost", "not_drawing", "first_view_problems", "storage_problems"):
        for item in result[key][:5]:
            lines.append(f"  {key}: {item}")
    return "\n".join(lines)


def assert_durable(result: dict) -> None:
    assert not result["start_failures"], report(result)
    assert result["acknowledged_uploads"] > 0 and result["acknowledged_saves"] > 0, report(result)
    assert not result["lost"] and not result["not_drawing"], report(result)
    assert not result["first_view_problems"] and not result["storage_problems"], report(result)
    assert result["slowest_first_view_seconds"] < 30.0, report(result)
    assert result["slowest_check_callback_seconds"] < 30.0, report(result)


def test_twenty_kill_nine_restarts_lose_nothing_acknowledged():
    result = run_durability(20)
    print("\n" + report(result))
    assert_durable(result)


def main(argv: list[str] | None = None) -> int:
    stop_on_sigterm()
    parser = argparse.ArgumentParser(description=__doc__.split("\n", 1)[0])
    parser.add_argument("--rounds", type=int, default=20)
    parser.add_argument("--seed", type=int, default=13, help="seed of the kill delays")
    parser.add_argument("--json", type=Path, help="also write the summary as JSON")
    parser.add_argument("--server-log", type=Path, help="keep the servers' log here")
    args = parser.parse_args(argv)
    result = run_durability(args.rounds, seed=args.seed, keep_log=args.server_log)
    print(report(result))
    if args.json:
        args.json.write_text(json.dumps({k: v for k, v in result.items() if k != "server_log_tail"}, indent=2,
                                        default=str))
    try:
        assert_durable(result)
    except AssertionError:
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
