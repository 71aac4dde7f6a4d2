"""Load test, run on demand: simulated users against a real ``ordinate serve --workers 2``.

Run as a script::

    python3 tests/load/load_test.py --users 20 --seconds 60

or through pytest, only when named (the default suite skips ``tests/load``)::

    python3 -m pytest tests/load -s

The script starts a fresh server on a free loopback port with a temporary data
directory (so the synthetic demo dataset is registered), then runs N users for
S seconds. Each user does what a person at the page does, with a short pause
between steps (``--think`` seconds on average):

1. opens the start page (following its redirect to the demo view), loads the
   page's scripts the first time, then Dash's layout and callback list, and
   replays the callbacks the page fires on load: ``show_view`` (controls,
   scores plot), ``show_view_rest`` (the other panels), the sharing, manage and
   export callbacks, the controls' ``write_url`` and, while parallel analysis
   runs, its poll;
2. uploads a small synthetic CSV (generated here with a fixed seed per user and
   round) through ``/api/upload`` and replays ``open_uploaded`` and the new view;
3. saves that view (``save_current_view``) and
4. opens its short link ``/v/<id>`` and draws the view it redirects to.

Every answer is checked for what it should contain, not only for its status:
an upload must return a token, a view must carry a scores figure with points
(not a message figure), a save must return a ``/v/`` link, a short link must
redirect to its view. Errors are counted in two classes: server failures (5xx,
connection errors, time-outs at 30 s) and wrong answers (anything else that is
not what a working server sends).

The POST bodies for ``/_dash-update-component`` are built from the server's
own ``/_dash-dependencies``, as the Dash renderer builds them.
"""

from __future__ import annotations

import argparse
import io
import json
import os
import random
import re
import signal
import socket
import subprocess
import sys
import tempfile
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from urllib.parse import parse_qs, urlsplit

REPOSITORY = Path(__file__).resolve().parents[2]
if str(REPOSITORY) not in sys.path:  # run as a script from anywhere
    sys.path.insert(0, str(REPOSITORY))

import numpy as np  # noqa: E402
import requests  # noqa: E402

REQUEST_TIMEOUT_SECONDS = 30.0
START_TIMEOUT_SECONDS = 90.0
POLL_INTERVAL_SECONDS = 0.5  # the page's parallel-analysis poll (layout.PARALLEL_POLL_MS)
MESSAGE_ANNOTATION_NAME = "ordinate-message"  # webapp.figures.message
SCRIPT_SRC = re.compile(r'<script[^>]*\ssrc="([^"]+)"')
CALLBACK_HEADERS = {"Content-Type": "application/json", "Accept": "application/json"}
WRITE_URL_INPUTS = tuple(f"{c}.value" for c in (
    "id-column", "colour-by", "variables", "missing", "centring", "scaling", "pc-x", "pc-y", "sigma-levels",
    "ellipse-by", "overlays", "biplot-scaling", "components", "confidence", "loading-pc"))
HTML_HEADERS = {"Accept": "text/html,application/xhtml+xml,*/*"}


# --- the server -----------------------------------------------------------------------


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


class Server:
    """``python3 -m webapp serve`` in its own process group (gunicorn master and workers)."""

    def __init__(self, data_dir: Path, *, port: int | None = None, workers: int = 2, log_path: Path | None = None,
                 env: dict | None = None):
        self.extra_env = env or {}
        self.data_dir = Path(data_dir)
        self.port = port or free_port()
        self.workers = workers
        self.base = f"http://127.0.0.1:{self.port}"
        self.log_path = Path(log_path) if log_path else self.data_dir.parent / f"server-{self.port}.log"
        self.process: subprocess.Popen | None = None
        self.started_seconds: float | None = None

    def start(self) -> float:
        """Start and wait until Dash answers; returns the seconds it took. Raises if it never does."""
        env = {**os.environ, "PYTHONUNBUFFERED": "1", **self.extra_env}
        env.pop("ORDINATE_ACCESS_KEY", None)
        self._log = open(self.log_path, "ab")
        began = time.monotonic()
        self.process = subprocess.Popen(
            [sys.executable, "-m", "webapp", "serve", "--host", "127.0.0.1", "--port", str(self.port),
             "--data-dir", str(self.data_dir), "--workers", str(self.workers), "--no-access-key"],
            cwd=REPOSITORY, env=env, stdout=self._log, stderr=self._log, start_new_session=True,
        )
        deadline = began + START_TIMEOUT_SECONDS
        while time.monotonic() < deadline:
            if self.process.poll() is not None:
                raise RuntimeError(f"the server exited during start-up with code {self.process.returncode}:\n"
                                   + self.log_tail())
            try:
                if requests.get(self.base + "/_dash-layout", timeout=2).status_code == 200:
                    self.started_seconds = time.monotonic() - began
                    return self.started_seconds
            except requests.RequestException:
                pass
            time.sleep(0.1)
        self.kill()
        raise RuntimeError(f"the server did not answer within {START_TIMEOUT_SECONDS} s:\n" + self.log_tail())

    def kill(self) -> None:
        """``kill -9`` the whole process group (master and workers) and wait until all are gone."""
        if self.process is None:
            return
        try:
            os.killpg(self.process.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        self.process.wait(timeout=30)
        deadline = time.monotonic() + 30
        while time.monotonic() < deadline:  # the workers may outlive the master by a moment
            try:
                os.killpg(self.process.pid, 0)
            except ProcessLookupError:
                break
            time.sleep(0.05)
        else:
            raise RuntimeError("server processes survived kill -9 of their group")
        self._log.close()

    def stop(self) -> None:
        """A normal stop (SIGTERM to the group), falling back to kill -9."""
        if self.process is None or self.process.poll() is not None:
            return
        os.killpg(self.process.pid, signal.SIGTERM)
        try:
            self.process.wait(timeout=30)
        except subprocess.TimeoutExpired:
            pass
        self.kill()

    def log_tail(self, chars: int = 4000) -> str:
        try:
            return self.log_path.read_text("utf-8", "replace")[-chars:]
        except OSError:
            return ""

    def log_text(self) -> str:
        return self.log_tail(10**9)


# --- results --------------------------------------------------------------------------


@dataclass
class Sample:
    kind: str        # page, script, layout, dependencies, callback, upload, short-link
    name: str        # the callback's function or the path
    seconds: float
    problem: str | None = None  # None: a correct answer
    server_failure: bool = False  # 5xx, connection error or time-out


@dataclass
class Recorder:
    samples: list = field(default_factory=list)
    lock: threading.Lock = field(default_factory=threading.Lock)
    problems: list = field(default_factory=list)  # (kind, name, problem), first few kept in full

    def add(self, sample: Sample) -> None:
        with self.lock:
            self.samples.append(sample)
            if sample.problem and len(self.problems) < 50:
                self.problems.append((sample.kind, sample.name, sample.problem))


def percentile(values, fraction: float) -> float:
    """The nearest-rank percentile (0 for no values)."""
    if not values:
        return 0.0
    ordered = sorted(values)
    rank = max(1, int(np.ceil(fraction * len(ordered))))
    return ordered[rank - 1]


def _answered_again(problem: str) -> bool:
    """Whether a request that failed on its connection got a non-5xx answer when sent once more."""
    match = re.search(r"sent again at once: (\d+)", problem)
    return bool(match) and int(match.group(1)) < 500


def summary(recorder: Recorder, seconds: float) -> dict:
    samples = list(recorder.samples)
    callbacks = [s.seconds for s in samples if s.kind == "callback"]
    by_callback = {}
    for s in samples:
        if s.kind == "callback":
            by_callback.setdefault(s.name, []).append(s.seconds)
    return {
        "requests": len(samples),
        "requests_per_second": len(samples) / seconds if seconds else 0.0,
        "server_failures": sum(s.server_failure for s in samples),
        "wrong_answers": sum(bool(s.problem) and not s.server_failure for s in samples),
        "errors": sum(bool(s.problem) for s in samples),
        "p50": percentile([s.seconds for s in samples], 0.50),
        "p95": percentile([s.seconds for s in samples], 0.95),
        "callbacks": len(callbacks),
        "callback_p50": percentile(callbacks, 0.50),
        "callback_p95": percentile(callbacks, 0.95),
        "callback_max": max(callbacks, default=0.0),
        "per_callback_p95": {name: round(percentile(v, 0.95), 3) for name, v in sorted(by_callback.items())},
        "uploads": sum(s.kind == "upload" and not s.problem for s in samples),
        "saves": sum(s.name == "save_current_view" and not s.problem for s in samples),
        "short_links": sum(s.kind == "short-link" and not s.problem for s in samples),
        "connection_errors": sum(bool(s.problem) and s.problem.startswith("connection error") for s in samples),
        "connection_errors_answered_when_sent_again": sum(
            bool(s.problem) and s.problem.startswith("connection error") and _answered_again(s.problem)
            for s in samples),
        "first_problems": recorder.problems[:10],
    }


# --- Dash callbacks, built from the server's own dependency list ----------------------


def _split_output(output: str) -> list[tuple[str, str]]:
    parts = output[2:-2].split("...") if output.startswith("..") else [output]
    pairs = []
    for part in parts:
        component, prop = part.rsplit(".", 1)
        pairs.append((component, prop.split("@", 1)[0]))
    return pairs


class Callbacks:
    """The server's callbacks by the first output each writes ("component.property")."""

    def __init__(self, dependencies: list[dict]):
        self.by_first_output = {}
        for spec in dependencies:
            if spec.get("clientside_function"):
                continue
            pairs = _split_output(spec["output"])
            spec = {**spec, "outputs_pairs": pairs}
            self.by_first_output.setdefault(f"{pairs[0][0]}.{pairs[0][1]}", []).append(spec)

    def find(self, first_output: str, trigger: str) -> dict:
        """The callback whose first output is ``first_output`` and that has the input ``trigger``."""
        for spec in self.by_first_output.get(first_output, ()):
            if any(f"{i['id']}.{i['property']}" == trigger for i in spec["inputs"]):
                return spec
        raise KeyError(f"no callback writes {first_output} on {trigger}")

    @staticmethod
    def body(spec: dict, values: dict, changed: list[str]) -> dict:
        """The POST body the renderer sends; ``values`` maps "id.prop" to the value (missing: None).

        A pattern-matching (ALL) input matches no component here and is sent as an empty list.
        """
        def entry(item):
            if item["id"].startswith("{"):
                return []
            key = f"{item['id']}.{item['property']}"
            return {"id": item["id"], "property": item["property"], "value": values.get(key)}

        outputs = [{"id": c, "property": p} for c, p in spec["outputs_pairs"]]
        return {
            "output": spec["output"],
            "outputs": outputs if spec["output"].startswith("..") else outputs[0],
            "inputs": [entry(i) for i in spec["inputs"]],
            "state": [entry(s) for s in spec.get("state", ())],
            "changedPropIds": changed,
        }


def figure_problem(figure) -> str | None:
    """Why ``figure`` is not a real plot (None when it is one)."""
    if not isinstance(figure, dict):
        return f"no figure ({type(figure).__name__})"
    layout = figure.get("layout") or {}
    for note in layout.get("annotations") or ():
        if note.get("name") == MESSAGE_ANNOTATION_NAME:
            return "message figure: " + str(note.get("text"))[:200]
    traces = figure.get("data") or ()
    if not traces:
        return "a figure without data"
    points = 0
    for trace in traces:
        for axis in ("x", "y"):
            values = trace.get(axis)
            if isinstance(values, dict) and "bdata" in values:  # plotly's typed arrays
                points += 1
            elif isinstance(values, (list, tuple)):
                points += len(values)
    return None if points else "a figure whose traces hold no points"


# --- a simulated user -----------------------------------------------------------------


def synthetic_csv(seed: int, rows: int = 36) -> bytes:
    """A small synthetic table: labels, a group and six correlated measurements (fixed seed)."""
    rng = np.random.default_rng(seed)
    latent = rng.normal(size=(rows, 2))
    mixing = rng.normal(size=(2, 6))
    values = latent @ mixing + 0.3 * rng.normal(size=(rows, 6)) + 10.0
    groups = rng.choice(["A", "B", "C"], size=rows)
    out = io.StringIO()
    out.write("sample,group," + ",".join(f"m{j + 1}" for j in range(6)) + "\n")
    for i in range(rows):
        out.write(f"SYN-{seed}-{i:03d},{groups[i]}," + ",".join(f"{v:.4f}" for v in values[i]) + "\n")
    return out.getvalue().encode("utf-8")


class User:
    """One person's browser: a session, the scripts it already loaded, the page's stores."""

    def __init__(self, base: str, recorder: Recorder, *, number: int = 0, think: float = 0.0,
                 deadline: float | None = None, retry_probe: bool = True):
        self.base = base
        self.recorder = recorder
        self.number = number
        self.think = think
        self.deadline = deadline
        self.session = requests.Session()
        self.scripts_loaded = False
        self.callbacks: Callbacks | None = None
        self.manage_links: dict = {}
        self.parallel = ThreadPoolExecutor(max_workers=4)  # the renderer sends independent callbacks at once
        self.random = random.Random(number)
        self.current = ""
        self.last_upload_token: str | None = None
        self.retry_probe = retry_probe
        self._controls: dict = {}
        self._shown_first = None
        self._shown_rest = None

    def close(self) -> None:
        self.parallel.shutdown(wait=True)
        self.session.close()

    # -- HTTP with timing and classification --

    def _request(self, kind: str, name: str, method: str, path: str, check, **kwargs):
        """Send one request, record it; ``check(response)`` returns a problem or None. Returns the response."""
        kwargs.setdefault("timeout", REQUEST_TIMEOUT_SECONDS)
        began = time.monotonic()
        try:
            response = self.session.request(method, self.base + path, **kwargs)
            _ = response.content
        except requests.Timeout:
            self.recorder.add(Sample(kind, name, time.monotonic() - began,
                                     f"no answer within {REQUEST_TIMEOUT_SECONDS:g} s", True))
            return None
        except requests.RequestException as error:
            # Counted as an error all the same; a browser resends a request that failed this way on a
            # reused connection, so say whether that would have worked (sent once more, on a new connection).
            retry = ""
            if isinstance(error, requests.ConnectionError) and self.retry_probe:
                try:
                    with requests.Session() as fresh:
                        again = fresh.request(method, self.base + path, **kwargs)
                    retry = f" [sent again at once: {again.status_code}]"
                except requests.RequestException as second:
                    retry = f" [sent again at once: {type(second).__name__}]"
            self.recorder.add(Sample(kind, name, time.monotonic() - began,
                                     f"connection error: {type(error).__name__}: {error}"[:300] + retry, True))
            return None
        seconds = time.monotonic() - began
        if response.status_code >= 500:
            self.recorder.add(Sample(kind, name, seconds, f"{response.status_code}: {response.text[:300]}", True))
            return None
        try:
            problem = check(response)
        except Exception as error:  # a malformed answer is a wrong answer, not a crash of the test
            problem = f"unreadable answer ({type(error).__name__}: {error}): {response.text[:200]}"
        self.recorder.add(Sample(kind, name, seconds, problem))
        return None if problem else response

    def get(self, kind: str, path: str, *, expect=200, **kwargs):
        def check(response):
            return None if response.status_code == expect else f"{response.status_code} for {path}"
        return self._request(kind, path.split("?", 1)[0], "GET", path, check, **kwargs)

    def callback(self, first_output: str, trigger: str, values: dict, *, expect_update: bool = True,
                 check=None) -> dict | None:
        """Fire one server callback; returns its ``response`` dict ({} for no update) or None on failure."""
        spec = self.callbacks.find(first_output, trigger)
        body = Callbacks.body(spec, values, [trigger])
        name = _callback_name(first_output, trigger)

        def verify(response):
            if response.status_code == 204:
                return "no update where one was expected" if expect_update else None
            if response.status_code != 200:
                return f"{response.status_code}: {response.text[:200]}"
            answer = response.json().get("response")
            if not isinstance(answer, dict):
                return f"no response in {response.text[:200]}"
            return check(answer) if check else None

        response = self._request("callback", name, "POST", "/_dash-update-component", verify,
                                 data=json.dumps(body), headers=CALLBACK_HEADERS)
        if response is None:
            return None
        return {} if response.status_code == 204 else response.json()["response"]

    def pause(self) -> None:
        if self.think > 0:
            time.sleep(self.random.uniform(0, 2 * self.think))

    def out_of_time(self) -> bool:
        return self.deadline is not None and time.monotonic() > self.deadline

    # -- what a person does --

    def open_page(self, path: str) -> str | None:
        """Load a page as the browser does; returns its address's query ("?...") or None."""
        response = self.get("page", path, headers=HTML_HEADERS)
        if response is None:
            return None
        if not self.scripts_loaded:
            for src in SCRIPT_SRC.findall(response.text):
                if src.startswith("/"):
                    self.get("script", src)
            self.scripts_loaded = True
        layout = self.get("layout", "/_dash-layout", headers={"Accept": "application/json"})
        dependencies = self.get("dependencies", "/_dash-dependencies", headers={"Accept": "application/json"})
        if layout is None or dependencies is None:
            return None
        self.callbacks = Callbacks(dependencies.json())
        self._controls, self._shown_first, self._shown_rest = {}, None, None  # a new page: fresh stores
        query = urlsplit(response.url).query
        return "?" + query if query else ""

    def draw_view(self, search: str, *, saved_view: str | None = None, follow_parallel: bool = True) -> bool:
        """Replay the callbacks a page fires for the address ``search``; True if all drew a real view.

        With ``follow_parallel`` it also polls until parallel analysis has finished and redraws, as the page does.
        """
        values = {"url.search": search, "manage-links.data": self.manage_links or None}

        def scores_ok(answer):
            first = answer.get("scores-graph", {}).get("figure")
            if answer.get("workspace", {}).get("hidden") is True:
                return "the view says: " + json.dumps(answer.get("dataset-title", {}))[:200]
            return figure_problem(first)

        def sharing_ok(answer):
            if saved_view is not None and answer.get("saved-banner", {}).get("hidden") is not False:
                return f"the saved view {saved_view} shows no saved-view banner"
            return None

        first = self.parallel.submit(self.callback, "dataset-title.children", "url.search", values, check=scores_ok)
        others = [self.parallel.submit(self.callback, "app-root.className", "url.search", values, check=sharing_ok),
                  self.parallel.submit(self.callback, "manage-box.children", "url.search", values),
                  self.parallel.submit(self.callback, "download-table.href", "url.search", values)]
        answer = first.result()
        ok = all(f.result() is not None for f in others)
        if answer is None:
            return False
        ok = self._after_first(answer, search) and ok
        # Parallel analysis may still be running: the page polls, then redraws.
        polls = 0
        while follow_parallel and answer.get("parallel-poll", {}).get("disabled") is False:
            if polls * POLL_INTERVAL_SECONDS > REQUEST_TIMEOUT_SECONDS:
                self.recorder.add(Sample("callback", "wait_for_parallel_analysis", 0.0,
                                         f"parallel analysis not done after {REQUEST_TIMEOUT_SECONDS:g} s"))
                return False
            time.sleep(POLL_INTERVAL_SECONDS)
            polls += 1
            done = self.callback("parallel-done.data", "parallel-poll.n_intervals",
                                 {"parallel-poll.n_intervals": polls, "url.search": search}, expect_update=False)
            if done is None:
                return False
            if done:
                redraw = self.callback("dataset-title.children", "parallel-done.data",
                                       {**values, "parallel-done.data": done["parallel-done"]["data"],
                                        "shown-first.data": self._shown_first}, check=None)
                if redraw is None:
                    return False
                answer = {"parallel-poll": redraw.get("parallel-poll", {})}
                ok = self._after_first(redraw, search) and ok
        return ok

    def _after_first(self, answer: dict, search: str) -> bool:
        """The callbacks that follow ``show_view``'s answer: the rest of the view and the controls' URL check."""
        self._shown_first = answer.get("shown-first", {}).get("data")

        def rest_ok(rest):
            for graph in ("variance-graph", "loadings-graph"):
                if graph in rest:
                    problem = figure_problem(rest[graph].get("figure"))
                    if problem:
                        return f"{graph}: {problem}"
            return None

        rest = self.parallel.submit(self.callback, "variance-graph.figure", "shown-first.data",
                                    {"shown-first.data": self._shown_first, "url.search": search,
                                     "shown-rest.data": self._shown_rest}, check=rest_ok)
        # The controls keep what they were last set to; write_url fires only when show_view set one.
        written = {f"{c}.{p}": v for c, props in answer.items() for p, v in props.items()}
        self._controls.update(written)
        url_check = None
        if any(key in written for key in WRITE_URL_INPUTS):
            url_check = self.parallel.submit(self.callback, "url.search", "id-column.value",
                                             {**self._controls, "url.search": search},
                                             expect_update=False, check=lambda a: (
                                                 f"the drawn controls changed the address to {a}"[:300]
                                                 if a.get("url", {}).get("search") else None))
        rest_answer = rest.result()
        if rest_answer is not None:
            self._shown_rest = rest_answer.get("shown-rest", {}).get("data")
        return rest_answer is not None and (url_check is None or url_check.result() is not None)

    def upload(self, content: bytes, filename: str) -> str | None:
        """Upload through /api/upload and open it as the page does; returns the new address's query."""
        def check(response):
            if response.status_code != 200:
                return f"upload answered {response.status_code}: {response.text[:300]}"
            body = response.json()
            if not isinstance(body.get("token"), str) or not isinstance(body.get("summary"), dict):
                return f"upload answer without a token and summary: {response.text[:300]}"
            return None

        response = self._request("upload", "/api/upload", "POST", "/api/upload", check, data=content, headers={
            "Content-Type": "application/octet-stream", "X-Requested-With": "ordinate-upload",
            "X-Filename": filename, "X-Ordinate-Purpose": "analysis"})
        if response is None:
            return None
        body = response.json()
        self.last_upload_token = body["token"]
        result = {"token": body["token"], "summary": body["summary"], "purpose": "analysis", "at": time.time()}

        def opened(answer):
            search = answer.get("url", {}).get("search") or ""
            return None if body["token"] in search else f"open_uploaded did not open {body['token']}: {answer}"[:300]

        answer = self.callback("url.search", "upload-result.data",
                               {"upload-result.data": result, "manage-links.data": self.manage_links or None,
                                "url.search": self.current}, check=opened)
        if answer is None:
            return None
        links = answer.get("manage-links", {}).get("data")
        if links:
            self.manage_links = links
        return answer["url"]["search"]

    def save(self, search: str, title: str) -> str | None:
        """Open the save panel and save the view at ``search``; returns the saved view's id."""
        opened = self.callback("save-panel.hidden", "save-open.n_clicks",
                               {"save-open.n_clicks": 1, "save-panel.hidden": True, "url.search": search},
                               check=lambda a: None if a.get("save-panel", {}).get("hidden") is False
                               else f"the save panel did not open: {a}"[:300])
        if opened is None:
            return None

        def saved(answer):
            new_search = answer.get("url", {}).get("search") or ""
            view = parse_qs(new_search.lstrip("?")).get("view", [""])[0]
            message = json.dumps(answer.get("save-result", {}))
            if not view or f"/v/{view}" not in message:
                return f"no saved view in the answer: {message[:300]}"
            return None

        answer = self.callback("url.search", "save-confirm.n_clicks",
                               {"save-confirm.n_clicks": 1, "save-title.value": title,
                                "save-note.value": "Saved by the load test (synthetic data).",
                                "save-author.value": f"load-user-{self.number}", "url.search": search,
                                "origin-view.data": None}, check=saved)
        if answer is None:
            return None
        return parse_qs(answer["url"]["search"].lstrip("?"))["view"][0]

    def open_short_link(self, view_id: str) -> str | None:
        """GET /v/<id>: it must redirect to its view; returns that view's query."""
        def check(response):
            location = response.headers.get("Location", "")
            if response.status_code != 302 or f"view={view_id}" not in location:
                return f"/v/{view_id} answered {response.status_code} -> {location!r}"
            return None

        response = self._request("short-link", "/v/<id>", "GET", f"/v/{view_id}", check, allow_redirects=False,
                                 headers=HTML_HEADERS)
        if response is None:
            return None
        return "?" + urlsplit(response.headers["Location"]).query

    def round(self, iteration: int) -> None:
        """One loop of the load test's user."""
        self.current = self.open_page("/")
        if self.current is None or not self.draw_view(self.current):
            return
        self.pause()
        if self.out_of_time():
            return
        seed = 100_000 * (self.number + 1) + iteration
        search = self.upload(synthetic_csv(seed), f"synthetic-load-u{self.number:02d}-r{iteration:03d}.csv")
        if search is None:
            return
        self.current = search
        if not self.draw_view(search):
            return
        self.pause()
        if self.out_of_time():
            return
        view_id = self.save(search, f"Load test view u{self.number} r{iteration}")
        if view_id is None:
            return
        self.pause()
        if self.out_of_time():
            return
        view_search = self.open_short_link(view_id)
        if view_search is None:
            return
        page = self.open_page(view_search and "/" + view_search)
        if page is not None:
            self.draw_view(page, saved_view=view_id)
        self.pause()


def run_load(users: int, seconds: float, *, think: float = 1.0, workers: int = 2, keep_log: Path | None = None,
             server_env: dict | None = None, echo=print) -> dict:
    """Start a fresh server, run ``users`` for ``seconds``, stop it; returns the summary (and the server log)."""
    with tempfile.TemporaryDirectory(prefix="ordinate-load-") as temp:
        server = Server(Path(temp) / "data", workers=workers, log_path=Path(temp) / "server.log", env=server_env)
        started = server.start()
        echo(f"server up in {started:.1f} s on port {server.port}; {users} users for {seconds:g} s "
             f"(think time {think:g} s on average)")
        recorder = Recorder()
        began = time.monotonic()
        deadline = began + seconds

        def run_user(number: int) -> int:
            user = User(server.base, recorder, number=number, think=think, deadline=deadline)
            time.sleep(user.random.uniform(0, min(2.0, seconds / 10)))  # users arrive over a moment
            iteration = 0
            try:
                while time.monotonic() < deadline:
                    user.round(iteration)
                    iteration += 1
            finally:
                user.close()
            return iteration

        try:
            with ThreadPoolExecutor(max_workers=users) as pool:
                rounds = sum(pool.map(run_user, range(users)))
            elapsed = time.monotonic() - began
        finally:
            server.stop()
            log = server.log_text()
            if keep_log:
                Path(keep_log).write_text(log, "utf-8")
        result = summary(recorder, elapsed)
        result.update(users=users, seconds=round(elapsed, 1), user_rounds=rounds, think=think,
                      server_start_seconds=round(started, 2),
                      server_log_tracebacks=log.count("Traceback"), server_log_tail=log[-3000:])
        return result


def report(result: dict) -> str:
    lines = [
        f"{result['users']} users x {result['seconds']} s (think {result['think']:g} s): "
        f"{result['requests']} requests ({result['requests_per_second']:.1f}/s), {result['user_rounds']} user rounds, "
        f"{result['uploads']} uploads, {result['saves']} saves, {result['short_links']} short links",
        f"errors {result['errors']} (server failures {result['server_failures']}, "
        f"wrong answers {result['wrong_answers']}); server log tracebacks {result['server_log_tracebacks']}",
        f"connection errors {result['connection_errors']}, of which answered when sent again at once "
        f"{result['connection_errors_answered_when_sent_again']}",
        f"all requests: p50 {result['p50']:.3f} s, p95 {result['p95']:.3f} s",
        f"callbacks ({result['callbacks']}): p50 {result['callback_p50']:.3f} s, p95 {result['callback_p95']:.3f} s, "
        f"max {result['callback_max']:.3f} s",
        f"p95 per callback: {result['per_callback_p95']}",
    ]
    for kind, name, problem in result["first_problems"]:
        lines.append(f"  problem: {kind} {name}: {problem}")
    if result["server_log_tracebacks"]:
        lines.append("server log (end):\n" + result["server_log_tail"])
    return "\n".join(lines)


def _callback_name(first_output: str, trigger: str) -> str:
    if first_output == "url.search":
        return {"id-column.value": "write_url", "upload-result.data": "open_uploaded",
                "save-confirm.n_clicks": "save_current_view"}.get(trigger, f"url.search on {trigger}")
    return {
        "dataset-title.children": "show_view",
        "variance-graph.figure": "show_view_rest",
        "parallel-done.data": "wait_for_parallel_analysis",
        "app-root.className": "show_sharing",
        "manage-box.children": "show_manage_link",
        "download-table.href": "export_links",
        "save-panel.hidden": "toggle_save_panel",
    }.get(first_output, first_output)


# --- on demand through pytest: python3 -m pytest tests/load -s ------------------------


def test_twenty_users_for_a_minute_get_no_errors():
    result = run_load(20, 60.0)
    print("\n" + report(result))
    assert result["callbacks"] > 0 and result["uploads"] > 0 and result["saves"] > 0
    assert result["errors"] == 0, report(result)


def stop_on_sigterm() -> None:
    """A terminated script still stops the servers it started (its ``finally`` blocks run)."""
    def handler(signum, frame):
        raise SystemExit(128 + signum)
    signal.signal(signal.SIGTERM, handler)


def main(argv: list[str] | None = None) -> int:
    stop_on_sigterm()
    parser = argparse.ArgumentParser(description=__doc__.split("\n", 1)[0])
    parser.add_argument("--users", type=int, default=20)
    parser.add_argument("--seconds", type=float, default=60.0)
    parser.add_argument("--think", type=float, default=1.0, help="mean pause between a user's steps (s)")
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--json", type=Path, help="also write the summary as JSON")
    parser.add_argument("--server-log", type=Path, help="keep the server's log here")
    args = parser.parse_args(argv)
    result = run_load(args.users, args.seconds, think=args.think, workers=args.workers, keep_log=args.server_log)
    print(report(result))
    if args.json:
        args.json.write_text(json.dumps({k: v for k, v in result.items() if k != "server_log_tail"}, indent=2))
    return 0 if result["errors"] == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
