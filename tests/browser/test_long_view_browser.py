"""A server-side dataset in the browser: the page shows the fit's progress, then density plots and a paged list.

Real LocalCluster of 2 worker processes (the dataset is registered with its
scheduler). Data: scikit-learn's bundled breast-cancer table (Wolberg et al.,
UCI) in 3 Parquet parts. The numbers behind the figures are checked against the
in-memory engine and numpy.histogram2d in tests/app/test_long_view.py; here the
page is checked to show them.
"""

from __future__ import annotations

import pytest

from tests.browser.test_dashboard import _text, _wait_for
from tests.long_parts import register_cancer_parts
from webapp.config import AppConfig
from webapp.distributed.cluster import dask_client
from webapp.web.app import create_app

pytestmark = pytest.mark.browser

PLOT_TYPES_JS = """
const plot = document.querySelector('#%s .js-plotly-plot');
if (!plot || !plot._fullData || !plot._fullData.length) { return null; }
return plot._fullData.map(t => t.type + ':' + (t.type === 'heatmap' ? t.z.length : (t.x || []).length)).join(' ');
"""


@pytest.fixture(scope="module")
def cluster():
    with dask_client(workers=2, processes=True) as client:
        yield client


def test_a_server_side_dataset_shows_progress_then_densities(dash_duo, tmp_path, cluster):
    app = create_app(AppConfig(data_dir=tmp_path / "data", demo_dataset=None))
    services = app.server.config["ordinate.services"]
    record, _ = register_cancer_parts(services, tmp_path / "parts", cluster.scheduler.address)
    dash_duo.start_server(app)
    dash_duo.driver.get(f"{dash_duo.server_url}/?ds={record.token}&conf=0.8")
    seen = _wait_for(lambda: (lambda t: ("Dask cluster" in t or "Long data" in t) and t)(_text(dash_duo.driver, "body")))
    assert "Long data on the server" in seen
    drawn = _wait_for(lambda: dash_duo.driver.execute_script(PLOT_TYPES_JS % "scores-graph")
                      if "heatmap" in (dash_duo.driver.execute_script(PLOT_TYPES_JS % "scores-graph") or "") else None,
                      timeout=120)
    assert drawn.startswith("heatmap:160 scattergl:569")
    assert "heatmap:160" in _wait_for(lambda: dash_duo.driver.execute_script(PLOT_TYPES_JS % "diagnostics-graph"))
    # The fit's progress line goes once the view is drawn (it used to stay, saying "4 of 4 partitions done").
    dash_duo.driver.find_element("id", "fit-progress")
    _wait_for(lambda: _text(dash_duo.driver, "#fit-progress") == "", timeout=5)
    assert "Fitting on the Dask cluster" not in _text(dash_duo.driver, "body")
    listing = _wait_for(lambda: (lambda t: "furthest beyond a limit" in t and t)(_text(dash_duo.driver, "#flagged-list")))
    assert "page 1 of" in listing
    first_page = listing
    dash_duo.driver.find_element("xpath", "//div[@id='flagged-list']//button[text()='Next']").click()
    second = _wait_for(lambda: (lambda t: "page 2 of" in t and t)(_text(dash_duo.driver, "#flagged-list")))
    assert "Samples 26–" in second and second != first_page
    dash_duo.driver.save_screenshot(str(tmp_path / "long-view-diagnostics.png"))
    dash_duo.driver.execute_script("document.getElementById('scores-graph').scrollIntoView();")
    dash_duo.driver.save_screenshot(str(tmp_path / "long-view-scores.png"))
