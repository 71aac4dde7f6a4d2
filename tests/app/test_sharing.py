"""Saved views, short links, presentation steps, durability and concurrency."""

import json
import multiprocessing
import os
import signal
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from pathlib import Path

import pytest

from webapp.web.app import create_app
from webapp.config import AppConfig
from webapp.state import ViewState, parse_query, to_query
from webapp.store.storage import DataStore
from webapp.ui import layout as L
from webapp.ui import view_model as vm
from webapp.ui.callbacks import _search_if_changed
from webapp.ui.sharing import presentation_step

REPO = Path(__file__).resolve().parents[2]


def _figure_data(figure):
    return json.loads(figure.to_json())["data"]


def _save(services, token, title, **state):
    return vm.save_view(services, ViewState(dataset=token, **state), title=title, note="", author="", parent=None)


def test_short_link_redirects_to_the_complete_view(app, services, iris_token):
    view = _save(services, iris_token, "Pareto view", scaling="pareto", pc_y=3, sigma_levels=(1.0, 3.0))
    response = app.server.test_client().get(f"/v/{view.view_id}")
    assert response.status_code == 302
    state, notices = parse_query(response.headers["Location"].split("?", 1)[1])
    assert notices == ()
    assert state == ViewState(dataset=iris_token, scaling="pareto", pc_y=3, sigma_levels=(1.0, 3.0),
                              saved_view=view.view_id)


def test_unknown_short_link_is_a_clear_404(app):
    response = app.server.test_client().get("/v/" + "Q" * 24)
    assert response.status_code == 404
    assert b"not known here" in response.data
    # Traversal attempts never reach a file: at most the empty page shell is served.
    for path in ("/v/..%2F..%2Fetc%2Fpasswd", "/v/%2e%2e/%2e%2e/etc/passwd", "/v/AAAA%00AAAA"):
        response = app.server.test_client().get(path)
        assert response.status_code in (200, 404) and b"root:" not in response.data


def test_old_format_link_keeps_opening(app, services, iris_token):
    # A view stored by an early version: no "v" parameter and only the settings
    # that differed from the defaults of that time.
    view = services.store.save_view(iris_token, f"ds={iris_token}&scale=range&x=2&y=3&sigma=1,2",
                                    title="old", content_hash="0" * 64, engine_version="0")
    location = app.server.test_client().get(f"/v/{view.view_id}").headers["Location"]
    state, notices = parse_query(location.split("?", 1)[1])
    assert notices == ()
    assert "v=1" in location
    assert (state.scaling, state.pc_x, state.pc_y, state.sigma_levels) == ("range", 2, 3, (1.0, 2.0))
    shown = vm.build_view(services, state, wait=True)
    fresh = vm.build_view(services, ViewState(dataset=iris_token, scaling="range", pc_x=2, pc_y=3,
                                              sigma_levels=(1.0, 2.0)), wait=True)
    assert shown.variance_rows == fresh.variance_rows
    assert _figure_data(shown.scores_figure) == _figure_data(fresh.scores_figure)
    assert vm.saved_view_info(services, state)["outdated_engine"] is True


def test_any_change_detaches_from_the_saved_view(services, iris_token):
    view = _save(services, iris_token, "Base")
    opened = ViewState(dataset=iris_token, saved_view=view.view_id)
    changed, _ = parse_query(_search_if_changed(opened, opened.replace(pc_y=3)))
    assert changed.saved_view is None and changed.pc_y == 3
    # The stored view itself is untouched.
    assert services.store.view(view.view_id).query == to_query(ViewState(dataset=iris_token))


def test_saved_views_are_listed_in_order_with_previews(services, iris_token):
    first = _save(services, iris_token, "First")
    vm.save_view(services, ViewState(dataset=iris_token, scaling="none"), title="Second",
                 note="A long note " * 30, author="Ana", parent=first.view_id)
    listed = vm.saved_views_list(services, iris_token)
    assert [v["title"] for v in listed] == ["First", "Second"]
    assert listed[1]["author"] == "Ana" and listed[1]["note"].endswith("…") and len(listed[1]["note"]) <= 140
    assert services.store.views_for_dataset(iris_token)[1].parent == first.view_id


def test_presentation_steps_through_saved_views(services, iris_token):
    views = [_save(services, iris_token, f"View {i}", pc_y=i + 2) for i in range(3)]
    state = ViewState(dataset=iris_token, saved_view=views[1].view_id)
    presenting = presentation_step(services, state, L.PRESENT_OPEN)
    assert presenting.present and presenting.slide == 2
    shown, slides, _ = vm.effective_state(services, presenting)
    assert (slides.position, slides.count) == (2, 3) and shown.pc_y == 3 and shown.saved_view == views[1].view_id
    after = presentation_step(services, presentation_step(services, presenting, L.SLIDE_NEXT), L.SLIDE_NEXT)
    assert after.slide == 3  # clamped at the last view
    back = presentation_step(services, after, L.SLIDE_PREV)
    assert back.slide == 2
    left = presentation_step(services, back, L.PRESENT_EXIT)
    assert not left.present and left.pc_y == 3 and left.saved_view == views[1].view_id


def test_presentation_without_saved_views_shows_current_view(services, iris_token):
    shown, slides, notices = vm.effective_state(services, ViewState(dataset=iris_token, present=True))
    assert slides.count == 1 and notices == (vm.NO_SLIDES_NOTICE,)


def test_presentation_enlarges_figures(services, iris_token):
    normal = vm.build_view(services, ViewState(dataset=iris_token), wait=True)
    big = vm.build_view(services, ViewState(dataset=iris_token, present=True), wait=True)
    assert big.scores_figure.layout.font.size > normal.scores_figure.layout.font.size


@pytest.mark.parametrize("note, forbidden", [
    ("[x](javascript:alert(1))", "javascript:"),
    ("[x]( JavaScript:alert(document.cookie))", "avascript:"),
    ("<javascript:alert(1)>", "javascript:"),
    ("[x](data:text/html;base64,PHNjcmlwdD4=)", "data:"),
])
def test_notes_lose_script_links(note, forbidden):
    assert forbidden not in vm.safe_markdown(note).lower()


def test_restart_keeps_views(tmp_path, iris_csv):
    first = create_app(AppConfig(data_dir=tmp_path / "d"))
    services = first.server.config["ordinate.services"]
    token = services.store.add_bytes(iris_csv.read_bytes(), "iris.csv").token
    view = _save(services, token, "Kept", scaling="pareto")
    before = vm.build_view(services, parse_query(
        first.server.test_client().get(f"/v/{view.view_id}").headers["Location"].split("?", 1)[1])[0], wait=True)
    del first, services
    second = create_app(AppConfig(data_dir=tmp_path / "d"))
    location = second.server.test_client().get(f"/v/{view.view_id}").headers["Location"]
    after = vm.build_view(second.server.config["ordinate.services"], parse_query(location.split("?", 1)[1])[0], wait=True)
    assert after.variance_rows == before.variance_rows
    assert _figure_data(after.scores_figure) == _figure_data(before.scores_figure)


def _free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _start_server(data_dir, port):
    process = subprocess.Popen([sys.executable, "-m", "webapp", "serve", "--port", str(port), "--data-dir",
                                str(data_dir), "--workers", "2"], cwd=REPO, stdout=subprocess.DEVNULL,
                               stderr=subprocess.PIPE, start_new_session=True)
    deadline = time.time() + 60
    while time.time() < deadline:
        try:
            urllib.request.urlopen(f"http://127.0.0.1:{port}/_dash-layout", timeout=2)
            return process
        except (urllib.error.URLError, ConnectionError):
            time.sleep(0.3)
    process.kill()
    raise AssertionError(process.stderr.read().decode())


class _NoRedirect(urllib.request.HTTPRedirectHandler):
    def redirect_request(self, *args, **kwargs):
        return None


def _location(port, path):
    opener = urllib.request.build_opener(_NoRedirect)
    try:
        opener.open(f"http://127.0.0.1:{port}{path}", timeout=10)
    except urllib.error.HTTPError as error:
        return error.code, error.headers.get("Location")
    raise AssertionError("expected a redirect")


def test_production_server_restart_keeps_short_links(tmp_path, iris_csv):
    data_dir = tmp_path / "served"
    store = DataStore(data_dir)
    token = store.add_bytes(iris_csv.read_bytes(), "iris.csv").token
    view = store.save_view(token, to_query(ViewState(dataset=token, scaling="range")), title="t",
                           content_hash="0" * 64, engine_version="1")
    port = _free_port()
    server = _start_server(data_dir, port)
    try:
        first = _location(port, f"/v/{view.view_id}")
    finally:
        _stop(server)
    server = _start_server(data_dir, port)
    try:
        assert _location(port, f"/v/{view.view_id}") == first
        assert first[0] == 302 and "scale=range" in first[1]
    finally:
        _stop(server)


def _stop(server) -> None:
    # A graceful stop lets workers finish their requests (gunicorn's graceful_timeout is 30 s);
    # on a busy machine that can take a while, and only the restart is under test here.
    os.killpg(server.pid, signal.SIGTERM)
    try:
        server.wait(timeout=90)
    except subprocess.TimeoutExpired:
        os.killpg(server.pid, signal.SIGKILL)
        server.wait(timeout=30)


def _save_many(data_dir, token, prefix, count):
    store = DataStore(data_dir)
    for i in range(count):
        store.save_view(token, f"v=1&ds={token}", title=f"{prefix}{i}", content_hash="0" * 64, engine_version="1")


def test_concurrent_saves_from_two_processes_lose_nothing(tmp_path):
    store = DataStore(tmp_path)
    token = store.add_bytes(b"a,b,c\n1,2,3\n4,5,6\n7,8,10\n", "x.csv").token
    context = multiprocessing.get_context("spawn")
    workers = [context.Process(target=_save_many, args=(tmp_path, token, p, 40)) for p in ("a", "b")]
    for worker in workers:
        worker.start()
    for worker in workers:
        worker.join(120)
        assert worker.exitcode == 0
    titles = sorted(v.title for v in DataStore(tmp_path).views_for_dataset(token))
    assert titles == sorted([f"a{i}" for i in range(40)] + [f"b{i}" for i in range(40)])


def test_abrupt_kill_during_saves_leaves_no_half_written_view(tmp_path):
    store = DataStore(tmp_path)
    token = store.add_bytes(b"a,b,c\n1,2,3\n4,5,6\n7,8,10\n", "x.csv").token
    context = multiprocessing.get_context("spawn")
    worker = context.Process(target=_save_many, args=(tmp_path, token, "k", 100_000))
    worker.start()
    deadline = time.time() + 60
    while len(DataStore(tmp_path).views_for_dataset(token)) < 20 and time.time() < deadline:
        time.sleep(0.05)
    os.kill(worker.pid, signal.SIGKILL)
    worker.join(30)
    reopened = DataStore(tmp_path)
    listed_ids = reopened.index.get(("views-of", token))
    views = reopened.views_for_dataset(token)
    assert len(views) == len(listed_ids) >= 20  # every listed view is complete and readable
    assert all(v.title.startswith("k") and v.dataset_token == token for v in views)
    stored = [key for key in reopened.index.iterkeys() if key[0] == "view"]
    assert len(stored) == len(listed_ids)  # no view outside the list either


def _texts(component) -> str:
    """All text of a Dash component tree, Markdown sources included."""
    if isinstance(component, str):
        return component
    if isinstance(component, (list, tuple)):
        return " ".join(_texts(c) for c in component)
    children = getattr(component, "children", None)
    return _texts(children) if children is not None else ""


def test_presenter_notes_are_for_the_presenter_only(services, iris_token):
    from webapp.ui.sharing import saved_banner, split_presenter_note

    note = "Species separate on PC1.\n\nPresenter only:\nAsk Bo about the two odd *setosa* samples."
    assert split_presenter_note(note) == ("Species separate on PC1.", "Ask Bo about the two odd *setosa* samples.")
    assert split_presenter_note("No mark here.") == ("No mark here.", "")
    view = vm.save_view(services, ViewState(dataset=iris_token), title="Species", note=note, author="", parent=None)
    state = ViewState(dataset=iris_token, saved_view=view.view_id, present=True)
    info = vm.saved_view_info(services, state)
    presenter = _texts(saved_banner(info, state, "/"))
    attendee = _texts(saved_banner(info, state.replace(follow="F" * 20), "/"))
    assert "Species separate on PC1." in presenter and "Ask Bo" in presenter
    assert "Species separate on PC1." in attendee and "Ask Bo" not in attendee and "Presenter only" not in attendee


def test_first_last_and_the_ends_of_a_presentation(services, iris_token):
    from webapp.ui import layout as L
    from webapp.ui.sharing import presentation_step

    for title in ("one", "two", "three"):
        vm.save_view(services, ViewState(dataset=iris_token), title=title, note="", author="", parent=None)
    middle = ViewState(dataset=iris_token, present=True, slide=2)
    assert presentation_step(services, middle, L.SLIDE_LAST).slide == 3
    assert presentation_step(services, middle, L.SLIDE_FIRST).slide == 1
    assert presentation_step(services, middle.replace(slide=3), L.SLIDE_NEXT).slide == 3  # stays at the end
    left = presentation_step(services, middle.replace(follow="F" * 20), L.PRESENT_EXIT)
    assert not left.present and left.follow is None
