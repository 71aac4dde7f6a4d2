"""The monitoring page in headless Chromium (dash[testing]): upload new samples, see them on both run charts,
open the address in a fresh browser and get the same figure data.

Data: the wine recognition data (UCI, as shipped by scikit-learn), locked as a reference model from a real fit
(tests/monitoring/wine_monitoring.py).
"""

import json

import pytest
from selenium import webdriver

from tests.browser.test_dashboard import _headless_options, _text, _wait_for
from tests.monitoring.test_monitoring_page import locked, services  # noqa: F401  (fixtures)
from webapp.config import AppConfig
from webapp.web.app import create_app

pytestmark = pytest.mark.browser

# The points of every trace of one run chart as drawn (decoded arrays, see FIGURE_DATA_JS in test_dashboard).
CHART_DATA_JS = """
const plot = document.querySelector('#' + arguments[0] + ' .js-plotly-plot');
if (!plot || !plot._fullData) { return null; }
return JSON.stringify(plot._fullData.map(t => [t.meta || '', Array.from(t.x || []), Array.from(t.y || [])]));
"""


def _new_sample_count(driver, graph_id):
    text = driver.execute_script(CHART_DATA_JS, graph_id)
    if not text:
        return None
    traces = {meta: x for meta, x, _ in json.loads(text)}
    return len(traces.get("new samples", []))


@pytest.fixture
def app(tmp_path):
    return create_app(AppConfig(data_dir=tmp_path / "data", demo_dataset=None))


def test_upload_appends_to_both_charts_and_the_address_reproduces_the_view(dash_duo, app, locked, tmp_path):  # noqa: F811
    lock, _, uploads = locked
    before = 21 + 20
    dash_duo.start_server(app)
    dash_duo.driver.set_window_size(1280, 800)
    dash_duo.driver.get(f"{dash_duo.server_url}/m/{lock.code}?pc=2&band=2")
    for graph in ("m-t2-graph", "m-q-graph"):
        _wait_for(lambda graph=graph: _new_sample_count(dash_duo.driver, graph) == before)

    path = tmp_path / "later-3.csv"
    uploads[2].drop(columns="cultivar").to_csv(path, index=False)
    dash_duo.wait_for_element("#m-upload-by").send_keys("night shift\n")
    _wait_for(lambda: "by=night" in (dash_duo.find_element("#upload-zone").get_attribute("data-upload-url") or ""))
    dash_duo.wait_for_element("#upload-input").send_keys(str(path))
    after = before + len(uploads[2])
    for graph in ("m-t2-graph", "m-q-graph", "m-scores-graph"):
        _wait_for(lambda graph=graph: _new_sample_count(dash_duo.driver, graph) == after)
    _wait_for(lambda: "later-3.csv" in _text(dash_duo.driver, "#m-uploads"))
    assert "night shift" in _text(dash_duo.driver, "#m-uploads")
    dash_duo.driver.save_screenshot(str(tmp_path / "monitoring.png"))

    address = dash_duo.driver.current_url
    assert "pc=2" in address and "band=2" in address
    shown = {g: dash_duo.driver.execute_script(CHART_DATA_JS, g) for g in ("m-t2-graph", "m-q-graph", "m-scores-graph")}

    fresh = webdriver.Chrome(options=_headless_options())
    try:
        fresh.set_window_size(1280, 800)
        fresh.get(address)
        for graph, data in shown.items():
            _wait_for(lambda graph=graph: _new_sample_count(fresh, graph) == after)
            assert json.loads(fresh.execute_script(CHART_DATA_JS, graph)) == json.loads(data)
    finally:
        fresh.quit()
