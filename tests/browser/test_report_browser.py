"""The saved-view report opened from a file:// URL in headless Chromium, with no network.

Reference: Fisher's iris as shipped with scikit-learn; correlation-matrix
eigenvalue 2.9185 (72.96 %) of PC1 is widely published (quoted from memory).
"""

from __future__ import annotations

import shutil
import time

import pytest
from selenium import webdriver
from selenium.webdriver.chrome.service import Service

from tests.app.conftest import iris_frame
from tests.conftest import pytest_setup_options
from webapp.analysis import ENGINE_VERSION
from webapp.web.app import create_app
from webapp.config import AppConfig
from webapp.web.report import REPORT_FIGURES, write_report
from webapp.state import ViewState, to_query

pytestmark = pytest.mark.browser

TIMEOUT = 60

PLOTS_JS = "return document.querySelectorAll('.js-plotly-plot').length;"
TABLE_JS = "const t = document.querySelector('#variance table'); return t ? t.innerText : '';"
# Each drawn plot holds its traces in .data once plotly.js has rendered it.
TRACES_JS = "return Array.from(document.querySelectorAll('.js-plotly-plot')).map(p => (p.data || []).length);"


@pytest.fixture
def report_path(tmp_path):
    app = create_app(AppConfig(data_dir=tmp_path / "data", demo_dataset=None))
    services = app.server.config["ordinate.services"]
    record = services.store.add_bytes(iris_frame().to_csv(index=False).encode("utf-8"), "iris.csv")
    saved = services.store.save_view(
        record.token, to_query(ViewState(dataset=record.token)), title="Iris check",
        note="Reference set; see [the SOP](https://example.org/sop).\n\n<script>alert(1)</script>",
        author="QC", content_hash=record.content_hash, engine_version=ENGINE_VERSION,
    )
    return write_report(services, saved.view_id, tmp_path / "iris-report.html")


@pytest.fixture
def browser():
    options = pytest_setup_options()
    options.add_argument("--headless=new")
    options.add_argument("--disable-background-networking")
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver_path = shutil.which("chromedriver")
    service = Service(executable_path=driver_path) if driver_path else Service()
    driver = webdriver.Chrome(options=options, service=service)
    yield driver
    driver.quit()


def _wait_for(browser, script: str, done, timeout: float = TIMEOUT):
    deadline = time.monotonic() + timeout
    value = None
    while time.monotonic() < deadline:
        value = browser.execute_script(script)
        if done(value):
            return value
        time.sleep(0.25)
    raise AssertionError(f"timed out; last value {value!r}")


def test_report_opens_offline_with_every_figure_and_the_table(browser, report_path):
    browser.get(report_path.as_uri())
    _wait_for(browser, PLOTS_JS, lambda n: n == len(REPORT_FIGURES))
    traces = _wait_for(browser, TRACES_JS, lambda counts: len(counts) == len(REPORT_FIGURES) and min(counts) > 0)
    assert len(traces) == 5

    table = _wait_for(browser, TABLE_JS, lambda text: "2.9185" in text)
    assert "72.96" in table  # published iris correlation-matrix PCA, from memory
    assert browser.title == "Iris check · Ordinate report"

    # The note's script is text, not code: no alert is open and the text is visible.
    assert "<script>alert(1)</script>" in browser.find_element("id", "note").text
    assert browser.execute_script("return typeof Plotly") == "object"

    # Nothing was blocked or failed: a network request or a policy violation would be logged as SEVERE.
    severe = [entry for entry in browser.get_log("browser") if entry.get("level") == "SEVERE"]
    assert severe == []
