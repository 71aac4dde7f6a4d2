"""The monitoring page without a browser: page callbacks as functions, and its routes through Flask's test client.

Inputs are a real fit of the wine recognition data (UCI, as shipped by scikit-learn;
tests/monitoring/wine_monitoring.py) locked through the reference-model store.
"""

from __future__ import annotations

import hashlib
import io

import numpy as np
import pandas as pd
import pytest

from tests.monitoring.wine_monitoring import K, _csv, wine_parts
from webapp.analysis.ingest import read_table
from webapp.analysis.model_io import model_from_analysis, project_table
from webapp.analysis.monitoring import reference_period
from webapp.analysis.pipeline import analyse
from webapp.analysis.recipe import Recipe
from webapp.config import AppConfig
from webapp.figures.run_charts import MONITORING_CAUTION
from webapp.state.monitor_state import MonitorState, to_monitor_query
from webapp.store.monitor_views import save_monitor_view
from webapp.ui import monitoring_layout as L
from webapp.ui.monitoring_callbacks import (
    _SHOW_OUTPUTS,
    MANAGER_COOKIE_PREFIX,
    monitor_page,
    presentation_step,
    state_from_controls,
)
from webapp.web.app import create_app

UPLOAD_HEADERS = {"X-Requested-With": "ordinate-upload", "Content-Type": "application/octet-stream"}


@pytest.fixture
def app(tmp_path):
    return create_app(AppConfig(data_dir=tmp_path / "data", demo_dataset=None))


@pytest.fixture
def services(app):
    return app.server.config["ordinate.services"]


@pytest.fixture
def locked(services):
    reference_rows, uploads = wine_parts()
    data = _csv(reference_rows)
    analysis = analyse(read_table(data, filename="reference.csv"), Recipe(), components=K)
    model = model_from_analysis(analysis)
    projection = project_table(model, read_table(data, filename="reference.csv"))
    reference = reference_period(model, projection.sample_labels, projection.scores,
                                 analysis.diagnostics.t2, analysis.diagnostics.q)
    lock, key = services.reference_models.lock(model, name="Wine release model", reference=reference,
                                               data_fingerprint=hashlib.sha256(data).hexdigest())
    for number, part in enumerate(uploads[:2], start=1):
        services.reference_models.add_upload(lock.code, _csv(part), f"later-{number}.csv", uploaded_by="lab A")
    return lock, key, uploads


def _outputs(values) -> dict:
    return {f"{o.component_id}.{o.component_property}": v for o, v in zip(_SHOW_OUTPUTS, values)}


def _trace(figure, name):
    return next(t for t in figure.data if t.meta == name)


def test_the_page_shows_every_new_sample_on_both_charts(services, locked):
    lock, _, _ = locked
    frame = services.reference_models.frame(lock.code)
    out = _outputs(monitor_page(services, f"/m/{lock.code}", ""))
    assert out[f"{L.TITLE}.children"] == "Wine release model · version 1"
    assert out[f"{L.WORKSPACE}.hidden"] is False
    for graph, statistic in ((L.T2_GRAPH, "t2"), (L.Q_GRAPH, "q")):
        new = _trace(out[f"{graph}.figure"], "new samples")
        np.testing.assert_allclose(np.asarray(new.y), frame[statistic].to_numpy())
    assert len(frame) == 21 + 20
    scores = out[f"{L.SCORES_GRAPH}.figure"]
    np.testing.assert_allclose(np.asarray(_trace(scores, "new samples").y), frame["PC1"].to_numpy())


def test_rule_hits_are_listed_with_samples_and_upload(services, locked):
    lock, _, _ = locked
    frame = services.reference_models.frame(lock.code)
    query = to_monitor_query(MonitorState(model=lock.code, rules=("beyond-limit",)))
    out = _outputs(monitor_page(services, f"/m/{lock.code}", query))
    table = out[f"{L.HITS}.children"][0]
    rows = table.children[1].children
    # One "beyond the limit" hit per point beyond either limit (contract of run_rule_hits).
    assert len(rows) == int(frame["t2_beyond"].sum() + frame["q_beyond"].sum())
    first = rows[0].children
    assert first[0].children == "Beyond the limit" and first[4].children in ("later-1.csv", "later-2.csv")


def test_a_pick_shows_contributions_and_place(services, locked):
    lock, _, _ = locked
    query = to_monitor_query(MonitorState(model=lock.code, pick=30))
    out = _outputs(monitor_page(services, f"/m/{lock.code}", query))
    assert out[f"{L.CONTRIBUTIONS_CARD}.hidden"] is False
    contributions = out[f"{L.CONTRIBUTIONS_GRAPH}.figure"]
    frame = services.reference_models.frame(lock.code)
    sample = frame.loc[frame["position"] == 30, "sample"].item()
    t2 = frame.loc[frame["position"] == 30, "t2"].item()
    # T² contributions sum to T² (Westerhuis, Gurden & Smilde 2000).
    bars = next(t for t in contributions.data if t.name == "T² contribution")
    assert float(np.sum(np.asarray(bars.x, dtype=np.float64))) == pytest.approx(t2, rel=1e-4)
    place = out[f"{L.PLACE_GRAPH}.figure"]
    assert any(sample in str(t.name) for t in place.data)


def test_unknown_code_and_bad_settings(services, locked):
    out = _outputs(monitor_page(services, "/m/" + "x" * 20, ""))
    assert out[f"{L.NOT_FOUND}.hidden"] is False and out[f"{L.WORKSPACE}.hidden"] is True
    lock, _, _ = locked
    out = _outputs(monitor_page(services, f"/m/{lock.code}", "pc=9&run=1&colour=red"))
    texts = [li.children for li in out[f"{L.NOTICES}.children"][0].children]
    assert any("'run=1'" in t for t in texts) and any("keeps 3 component" in t for t in texts)
    assert any("'colour'" in t for t in texts)
    assert out[f"{L.COMPONENT}.value"] == 1


def test_controls_write_a_new_state_and_leave_the_saved_view():
    state = MonitorState(model="a" * 20, saved_view="b" * 20)
    new = state_from_controls(state, ["run-above-median"], 10, 2, 2.5, 5, None, ["on"])
    assert new == MonitorState(model="a" * 20, rules=("run-above-median",), run_length=10, component=2,
                               band=2.5, first=5)
    assert state_from_controls(state, list(state.rules), 8, 1, 3, None, None, ["on"]) == state
    # A window start after its end keeps the old window.
    assert state_from_controls(state, list(state.rules), 8, 1, 3, 9, 2, ["on"]).first is None


def test_upload_route_appends_and_refuses_bad_files(app, services, locked):
    lock, _, uploads = locked
    client = app.server.test_client()
    before = len(services.reference_models.frame(lock.code))
    answer = client.post(f"/api/monitor/{lock.code}/upload?by=night%20shift", data=_csv(uploads[2]),
                         headers={**UPLOAD_HEADERS, "X-Filename": "later-3.csv"})
    assert answer.status_code == 200, answer.get_json()
    info = services.reference_models.uploads(lock.code)[-1]
    assert (info.file_name, info.uploaded_by) == ("later-3.csv", "night shift")
    assert len(services.reference_models.frame(lock.code)) == before + len(uploads[2])
    bad = client.post(f"/api/monitor/{lock.code}/upload", data=b"a,b\nx,y\n",
                      headers={**UPLOAD_HEADERS, "X-Filename": "bad.csv"})
    assert bad.status_code == 422 and "not added" in bad.get_json()["error"]
    assert client.post(f"/api/monitor/{'z' * 20}/upload", data=b"a", headers=UPLOAD_HEADERS).status_code == 404
    assert client.post(f"/api/monitor/{lock.code}/upload", data=b"a").status_code == 403
    assert len(services.reference_models.uploads(lock.code)) == 3


def test_manager_link_sets_the_cookie_only_with_the_right_key(app, locked):
    lock, key, _ = locked
    client = app.server.test_client()
    assert client.get(f"/m/{lock.code}/manage?key=wrong-key").status_code == 404
    answer = client.get(f"/m/{lock.code}/manage?key={key}")
    assert answer.status_code == 303 and answer.headers["Location"].endswith(f"/m/{lock.code}")
    cookie = answer.headers["Set-Cookie"]
    assert cookie.startswith(MANAGER_COOKIE_PREFIX + lock.code + "=") and "HttpOnly" in cookie
    assert "Path=/m/" in cookie and key not in answer.headers["Location"]


def test_uploads_are_removable_only_by_the_manager(app, services, locked):
    lock, key, _ = locked
    with app.server.test_request_context(f"/m/{lock.code}"):
        out = _outputs(monitor_page(services, f"/m/{lock.code}", ""))
    table = out[f"{L.UPLOADS}.children"][0]
    assert "Remove" not in str(table)
    headers = {"Cookie": f"{MANAGER_COOKIE_PREFIX}{lock.code}={key}"}
    with app.server.test_request_context(f"/m/{lock.code}", headers=headers):
        out = _outputs(monitor_page(services, f"/m/{lock.code}", ""))
    assert "Remove" in str(out[f"{L.UPLOADS}.children"][0])


def test_csv_export_is_the_windowed_table_and_formula_safe(app, services, locked):
    lock, _, uploads = locked
    services.reference_models.add_upload(lock.code, _csv(uploads[2]), "=cmd.csv", uploaded_by="@SUM(1)")
    client = app.server.test_client()
    query = to_monitor_query(MonitorState(model=lock.code, first=5, last=60))
    answer = client.get(f"/m/{lock.code}/export/monitoring.csv?{query}")
    assert answer.status_code == 200 and answer.headers["Content-Type"].startswith("text/csv")
    table = pd.read_csv(io.StringIO(answer.data.decode("utf-8-sig")))
    frame = services.reference_models.frame(lock.code)
    window = frame[(frame["position"] >= 5) & (frame["position"] <= 60)]
    assert table["position"].tolist() == window["position"].tolist()
    np.testing.assert_allclose(table["t2"].to_numpy(), window["t2"].to_numpy())
    assert set(table.loc[table["position"] > 40, "file_name"]) == {"'=cmd.csv"}
    assert set(table.loc[table["position"] > 40, "uploaded_by"]) == {"'@SUM(1)"}
    assert client.get(f"/m/{'z' * 20}/export/monitoring.csv").status_code == 404


def test_report_of_a_monitoring_view(app, services, locked):
    lock, _, _ = locked
    view = save_monitor_view(services.store, lock.code, to_monitor_query(MonitorState(model=lock.code, component=2)),
                             title="Week 14 review", note="Drift in **hue**?")
    client = app.server.test_client()
    query = to_monitor_query(MonitorState(model=lock.code, component=2, saved_view=view.view_id))
    answer = client.get(f"/m/{lock.code}/report.html?{query}")
    assert answer.status_code == 200 and answer.headers["Content-Security-Policy"] == "sandbox"
    text = answer.data.decode("utf-8")
    assert "Week 14 review" in text and MONITORING_CAUTION in text and "<strong>hue</strong>" in text
    assert text.count('class="figure"') == 3 and lock.data_fingerprint in text


def test_presentation_steps_through_saved_monitoring_views(services, locked):
    lock, _, _ = locked
    first = save_monitor_view(services.store, lock.code, to_monitor_query(MonitorState(model=lock.code, component=2)),
                              title="one")
    second = save_monitor_view(services.store, lock.code,
                               to_monitor_query(MonitorState(model=lock.code, run_length=5)), title="two")
    state = presentation_step(services, MonitorState(model=lock.code), L.PRESENT_OPEN)
    assert (state.saved_view, state.component, state.present) == (first.view_id, 2, True)
    state = presentation_step(services, state, L.SLIDE_NEXT)
    assert (state.saved_view, state.run_length) == (second.view_id, 5)
    assert presentation_step(services, state, L.SLIDE_NEXT).saved_view == second.view_id
    assert presentation_step(services, state, L.PRESENT_EXIT).present is False


def test_lock_a_saved_view_and_lock_a_newer_version(services):
    # The saved view's model is frozen: its limits are those of the view's fit (iris, scikit-learn's copy).
    from tests.app.conftest import iris_frame
    from webapp.state import ViewState
    from webapp.ui import view_model as vm
    from webapp.ui.locking import lock_result, lock_saved_view, locked_list

    token = services.store.add_bytes(iris_frame().to_csv(index=False).encode(), "iris.csv").token
    saved = vm.save_view(services, ViewState(dataset=token, components=2), title="Iris K=2", note="", author="",
                         parent=None)
    first, key = lock_saved_view(services, saved.view_id, "Iris release model")
    resolved = vm.resolve(services, ViewState(dataset=token, components=2))
    diagnostics = vm.view_diagnostics(resolved, ViewState(dataset=token, components=2))
    assert first.version == 1 and first.model.loadings.shape[1] == 2
    assert first.model.q_limit == pytest.approx(diagnostics.q_limit)
    np.testing.assert_allclose(first.reference.t2, diagnostics.t2)
    assert first.data_fingerprint == hashlib.sha256(services.store.read_bytes(resolved.record)).hexdigest()
    assert services.reference_models.check_manager_key(first.code, key)
    second, _ = lock_saved_view(services, saved.view_id, "iris RELEASE model")
    assert second.version == 2 and services.reference_models.get(first.code).version == 1
    shown = str(lock_result(second, "k-e-y", "http://host/"))
    assert f"http://host/m/{second.code}" in shown and "version 2" in shown and "manage?key=k-e-y" in shown
    assert "version 1" in str(locked_list(services, token)) and "version 2" in str(locked_list(services, token))
    # The version asked for in the address (ver=) is found by name.
    out = _outputs(monitor_page(services, f"/m/{second.code}", "ver=1"))
    assert out[f"{L.TITLE}.children"].endswith("version 1")
