"""The dashboard in headless Chromium, driven as a user would (dash[testing]).

Reference values: Fisher's iris as shipped with scikit-learn. Correlation-matrix
eigenvalues 2.9185 / 0.9140 (72.96 % / 22.85 %) and covariance-matrix PC1 share
92.46 % are widely published (quoted from memory; the engine's agreement with
scikit-learn is tested in tests/analysis). Sigma-ellipse coverage 1 - exp(-k²/2):
39.3 % for k = 1, 98.9 % for k = 3 (chi-square with 2 degrees of freedom).
"""

import json
import time

import pytest
from selenium import webdriver
from selenium.webdriver.common.by import By
from selenium.webdriver.common.keys import Keys

from tests.app.conftest import iris_frame
from tests.conftest import pytest_setup_options
from webapp.web.app import create_app
from webapp.config import AppConfig

pytestmark = pytest.mark.browser

FIRST_EIGENVALUE = "#variance-table-element tbody tr:nth-child(1) td:nth-child(2)"
FIRST_PERCENT = "#variance-table-element tbody tr:nth-child(1) td:nth-child(3)"
PARALLEL_VERDICT = "#variance-table-element tbody tr:nth-child({row}) td:nth-child(7)"
TIMEOUT = 40

# The points as drawn: _fullData holds decoded arrays (the figure's own data may hold
# float32 typed arrays as {dtype, bdata} objects, which would compare as empty). Null until
# some trace has points, so a comparison never passes on two empty plots.
FIGURE_DATA_JS = """
const plot = document.querySelector('#scores-graph .js-plotly-plot');
if (!plot || !plot._fullData) { return null; }
const traces = plot._fullData.map(t => [t.name || '', Array.from(t.x || []), Array.from(t.y || [])]);
if (!traces.some(t => t[1].length > 0)) { return null; }
return JSON.stringify(traces);
"""


@pytest.fixture
def app(tmp_path):
    return create_app(AppConfig(data_dir=tmp_path / "data", max_upload_mb=5))


@pytest.fixture
def iris_csv(tmp_path):
    path = tmp_path / "iris.csv"
    iris_frame().to_csv(path, index=False)
    return path


def _upload(dash_duo, path):
    dash_duo.wait_for_element("#upload-input", timeout=TIMEOUT).send_keys(str(path))


def _open_with_iris(dash_duo, app, iris_csv):
    dash_duo.start_server(app)
    dash_duo.wait_for_element("#scores-graph .js-plotly-plot", timeout=TIMEOUT)
    _upload(dash_duo, iris_csv)
    dash_duo.wait_for_text_to_equal(FIRST_EIGENVALUE, "2.9185", timeout=TIMEOUT)
    _wait_for_parallel_analysis(dash_duo.driver)


def _wait_for_parallel_analysis(driver):
    """A view is first drawn from the PCA alone; wait for the parallel-analysis verdicts."""
    _wait_for(lambda: (lambda advice: advice and "still running" not in advice)(_text(driver, "#component-advice")))


def _legend_text(dash_duo) -> str:
    return " ".join(e.text for e in dash_duo.find_elements("#scores-graph .legendtext"))


def _wait_for(condition, timeout=TIMEOUT):
    end = time.time() + timeout
    while time.time() < end:
        value = condition()
        if value:
            return value
        time.sleep(0.25)
    raise AssertionError("condition not met in time")


def test_upload_shows_variance_table_and_scaling_change_and_back(dash_duo, app, iris_csv):
    _open_with_iris(dash_duo, app, iris_csv)
    dash_duo.wait_for_text_to_equal(FIRST_PERCENT, "72.96", timeout=TIMEOUT)
    # Parallel analysis arrives after the first drawing and keeps one component
    # (autoscaled iris: eigenvalue 2.92, then 0.91 below its permutation threshold).
    dash_duo.wait_for_text_to_equal(PARALLEL_VERDICT.format(row=1), "✓", timeout=TIMEOUT)
    assert dash_duo.find_element(PARALLEL_VERDICT.format(row=2)).text == ""
    assert "Recommended K = 1 by parallel analysis" in dash_duo.find_element("#component-advice").text
    assert "iris.csv" in dash_duo.find_element("#dataset-title").text
    download = _wait_for(lambda: dash_duo.find_element("#download-table").get_attribute("href"))
    assert "/export/variance.csv?v=1&ds=" in download
    manage = _wait_for(lambda: dash_duo.driver.find_elements(By.CSS_SELECTOR, "#manage-box a"))
    assert "/manage/" in manage[0].get_attribute("href") and "key=" in manage[0].get_attribute("href")
    with_unit_scaling = dash_duo.driver.current_url
    assert "scale=unit" in with_unit_scaling

    dash_duo.find_element("#scaling input[value='none']").click()
    dash_duo.wait_for_text_to_equal(FIRST_PERCENT, "92.46", timeout=TIMEOUT)
    assert "scale=none" in dash_duo.driver.current_url

    dash_duo.driver.back()
    dash_duo.wait_for_text_to_equal(FIRST_PERCENT, "72.96", timeout=TIMEOUT)
    assert dash_duo.driver.current_url == with_unit_scaling
    assert dash_duo.get_logs() == [] or all("favicon" in entry["message"] for entry in dash_duo.get_logs())


COUNT_REDRAWS_JS = """
window.__redraws = {};
for (const plot of document.querySelectorAll('.js-plotly-plot')) {
  const id = plot.closest('[id]').id;
  window.__redraws[id] = 0;
  plot.on('plotly_afterplot', () => { window.__redraws[id] += 1; });
}
"""


def test_sigma_levels_draw_labelled_ellipses(dash_duo, app, iris_csv):
    _open_with_iris(dash_duo, app, iris_csv)
    time.sleep(1)  # let the last panels settle before counting redraws
    dash_duo.driver.execute_script(COUNT_REDRAWS_JS)
    sigma = dash_duo.find_element("#sigma-levels")
    sigma.send_keys(Keys.CONTROL, "a")
    sigma.send_keys("1, 3", Keys.ENTER)
    legend = _wait_for(lambda: "98.9 %" in _legend_text(dash_duo) and _legend_text(dash_duo))
    assert "1σ ellipse · expected 39.3 %" in legend
    assert "3σ ellipse · expected 98.9 %" in legend
    assert "sigma=1,3" in dash_duo.driver.current_url
    # Only the scores plot depends on the sigma levels, so only it is sent and drawn again.
    time.sleep(1)
    redraws = dash_duo.driver.execute_script("return window.__redraws;")
    assert redraws["scores-graph"] >= 1
    assert {graph: count for graph, count in redraws.items() if graph != "scores-graph"} == {
        "variance-graph": 0, "diagnostics-graph": 0, "loadings-graph": 0, "circle-graph": 0}


def test_link_reopens_identical_view_in_a_fresh_browser(dash_duo, app, iris_csv):
    _open_with_iris(dash_duo, app, iris_csv)
    dash_duo.find_element("#scaling input[value='pareto']").click()
    _wait_for(lambda: "scale=pareto" in dash_duo.driver.current_url)
    _wait_for_parallel_analysis(dash_duo.driver)
    table = _wait_for(lambda: dash_duo.find_element(FIRST_EIGENVALUE).text != "2.9185"
                      and dash_duo.find_element("#variance-table-element").text)
    link = dash_duo.find_element("#link-text").get_attribute("value")
    assert link == dash_duo.driver.current_url
    figure = _wait_for(lambda: dash_duo.driver.execute_script(FIGURE_DATA_JS))

    fresh = webdriver.Chrome(options=_headless_options())
    try:
        fresh.get(link)
        _wait_for(lambda: _text(fresh, "#variance-table-element") == table)
        fresh_figure = _wait_for(lambda: fresh.execute_script(FIGURE_DATA_JS))
        assert json.loads(fresh_figure) == json.loads(figure)
    finally:
        fresh.quit()


def test_bad_file_shows_a_message_and_the_server_keeps_serving(dash_duo, app, iris_csv, tmp_path):
    dash_duo.start_server(app)
    dash_duo.wait_for_element("#scores-graph .js-plotly-plot", timeout=TIMEOUT)
    _wait_for_parallel_analysis(dash_duo.driver)  # the demo view is complete, as a person would see it
    bad = tmp_path / "photo.csv"
    bad.write_bytes(b"\x89PNG\r\n\x1a\n" + bytes(range(256)) * 4)
    _upload(dash_duo, bad)
    status = _wait_for(lambda: "is-error" in dash_duo.find_element("#upload-status").get_attribute("class")
                       and dash_duo.find_element("#upload-status").text)
    notices = _wait_for(lambda: dash_duo.find_element("#notices").text)
    assert "Traceback" not in notices and len(notices) > 20
    # The reason is shown once (in the messages); the header's status names the file and points there.
    assert "photo.csv" in status and "below" in status and notices.split(".")[0] not in status
    _upload(dash_duo, iris_csv)  # still serving
    dash_duo.wait_for_text_to_equal(FIRST_EIGENVALUE, "2.9185", timeout=TIMEOUT)


def test_tampered_and_unknown_links(dash_duo, app, iris_csv):
    _open_with_iris(dash_duo, app, iris_csv)
    url = dash_duo.driver.current_url.replace("scale=unit", "scale=banana")
    dash_duo.driver.get(url)
    notices = _wait_for(lambda: dash_duo.find_element("#notices").text)
    assert "scale=banana" in notices
    dash_duo.wait_for_text_to_equal(FIRST_EIGENVALUE, "2.9185", timeout=TIMEOUT)
    dash_duo.driver.get(dash_duo.server_url + "/?v=1&ds=" + "Z" * 24)
    dash_duo.wait_for_contains_text("#not-found", "not known here", timeout=TIMEOUT)


def _text(driver, selector):
    try:
        return driver.find_element(By.CSS_SELECTOR, selector).text
    except Exception:
        return ""


def _headless_options():
    options = pytest_setup_options()
    options.add_argument("--headless=new")
    return options


def _emit(dash_duo, graph_id, event, labels):
    # dcc.Graph reads each point's data back from the figure by curve and point
    # number; iris flowers F000-F049 (setosa) are trace 0, in file order.
    points = ", ".join("{curveNumber: 0, pointNumber: %d}" % int(label[1:]) for label in labels)
    dash_duo.driver.execute_script(
        f"document.querySelector('#{graph_id} .js-plotly-plot').emit('{event}', {{points: [{points}]}});")


def test_click_inspects_a_sample_and_lasso_leaves_samples_out(dash_duo, app, iris_csv):
    _open_with_iris(dash_duo, app, iris_csv)
    dash_duo.driver.execute_script("window.scrollTo(0, 0)")
    _emit(dash_duo, "scores-graph", "plotly_click", ["F041"])
    dash_duo.wait_for_contains_text("#contributions", "What drives sample F041", timeout=TIMEOUT)
    assert "pick=F041" in dash_duo.driver.current_url
    # The click leads somewhere visible: the contributions are scrolled into view.
    _wait_for(lambda: dash_duo.driver.execute_script(
        "const b = document.getElementById('contributions').getBoundingClientRect();"
        "return b.top >= 0 && b.top < window.innerHeight;"))
    dash_duo.driver.execute_script("window.scrollTo(0, 0)")  # back up to the scores plot

    _emit(dash_duo, "scores-graph", "plotly_selected", ["F000", "F001", "F002"])
    dash_duo.find_element("#exclude-selected").click()
    dash_duo.wait_for_contains_text("#excluded-list", "F002", timeout=TIMEOUT)
    assert "ex=F000&ex=F001&ex=F002" in dash_duo.driver.current_url
    dash_duo.wait_for_contains_text("#provenance", "147 of 150", timeout=TIMEOUT)

    dash_duo.find_element("#excluded-list button[title='Put F001 back into the model']").click()
    dash_duo.wait_for_contains_text("#provenance", "148 of 150", timeout=TIMEOUT)
    dash_duo.find_element("#restore-all").click()
    dash_duo.wait_for_contains_text("#provenance", "150 of 150", timeout=TIMEOUT)


def test_file_over_the_size_limit_is_refused_with_a_message(dash_duo, app, tmp_path):
    dash_duo.start_server(app)  # this app accepts up to 5 MB
    dash_duo.wait_for_element("#scores-graph .js-plotly-plot", timeout=TIMEOUT)
    big = tmp_path / "big.csv"
    row = b"1.0,2.0,3.0,4.0\n"
    big.write_bytes(b"a,b,c,d\n" + row * (6 * 1024 * 1024 // len(row)))
    _upload(dash_duo, big)
    _wait_for(lambda: "is-error" in dash_duo.find_element("#upload-status").get_attribute("class"))
    notices = _wait_for(lambda: dash_duo.find_element("#notices").text)
    assert "6.0 MB" in notices and "5 MB" in notices


def test_svg_buttons_download_vector_images_in_the_browser(dash_duo, app, iris_csv):
    _open_with_iris(dash_duo, app, iris_csv)
    # Record what Plotly is asked to download instead of writing files.
    dash_duo.driver.execute_script(
        "window.__downloads = []; window.Plotly.downloadImage = function (gd, options) {"
        " window.__downloads.push([gd.closest('.dash-graph').id, options.format]); return Promise.resolve(); };")
    dash_duo.find_element(".scores-card .svg-button").click()
    dash_duo.find_element(".loadings-card .svg-button").click()
    downloads = _wait_for(lambda: len(dash_duo.driver.execute_script("return window.__downloads")) == 3
                          and dash_duo.driver.execute_script("return window.__downloads"))
    assert downloads == [["scores-graph", "svg"], ["loadings-graph", "svg"], ["circle-graph", "svg"]]


def test_a_new_batch_is_scored_against_the_open_model(dash_duo, app, iris_csv, tmp_path):
    _open_with_iris(dash_duo, app, iris_csv)
    batch = iris_frame().iloc[100:106].copy()
    batch["flower"] = [f"N{i}" for i in range(6)]
    batch["petal length (cm)"] += 3.0  # far off the model
    path = tmp_path / "new-batch.csv"
    batch.to_csv(path, index=False)
    dash_duo.find_element("#batch-button").click()  # the next chosen file is a batch
    _upload(dash_duo, path)
    dash_duo.wait_for_contains_text("#batch-panel", "New samples: new-batch.csv", timeout=TIMEOUT)
    assert "batch=" in dash_duo.driver.current_url and "ds=" in dash_duo.driver.current_url
    assert "iris.csv" in dash_duo.find_element("#dataset-title").text  # still the reference analysis
    _wait_for(lambda: "New samples (6)" in _legend_text(dash_duo))
    panel = dash_duo.find_element("#batch-panel").text
    assert "6 sample(s) scored against this model" in panel and "N0" in panel

    dash_duo.find_element("#batch-remove").click()
    _wait_for(lambda: "batch=&" in dash_duo.driver.current_url)
    _wait_for(lambda: "New samples" not in _legend_text(dash_duo))
    assert dash_duo.find_element("#batch-panel").text == ""


def test_leaving_out_many_samples_keeps_the_link_short(dash_duo, app, iris_csv):
    _open_with_iris(dash_duo, app, iris_csv)
    _emit(dash_duo, "scores-graph", "plotly_selected", [f"F{i:03d}" for i in range(45)])
    dash_duo.find_element("#exclude-selected").click()
    dash_duo.wait_for_contains_text("#provenance", "105 of 150", timeout=TIMEOUT)
    url = dash_duo.driver.current_url
    assert "exset=" in url and "ex=&" in url and len(url) < 600  # 45 labels, not spelled out
    dash_duo.wait_for_contains_text("#excluded-list", "45 in all", timeout=TIMEOUT)

    dash_duo.find_element("#excluded-list button[title='Put F001 back into the model']").click()
    dash_duo.wait_for_contains_text("#provenance", "106 of 150", timeout=TIMEOUT)
    dash_duo.find_element("#restore-all").click()
    dash_duo.wait_for_contains_text("#provenance", "150 of 150", timeout=TIMEOUT)
    assert "exset=&" in dash_duo.driver.current_url


def _summary_open(driver) -> bool:
    return driver.execute_script("return document.querySelector('#dataset-details').open")


def test_data_summary_stays_closed_after_upload_and_closes_on_outside_click_and_escape(dash_duo, app, iris_csv):
    _open_with_iris(dash_duo, app, iris_csv)
    assert "About this data" in dash_duo.find_element("#upload-status").text
    assert not _summary_open(dash_duo.driver)  # an upload does not open it by itself
    summary = dash_duo.find_element("#dataset-details summary")
    summary.click()
    _wait_for(lambda: _summary_open(dash_duo.driver))
    dash_duo.find_element("#variance-table-element").click()  # anywhere outside the popover
    _wait_for(lambda: not _summary_open(dash_duo.driver))
    summary.click()
    _wait_for(lambda: _summary_open(dash_duo.driver))
    dash_duo.find_element("#dataset-details summary").send_keys(Keys.ESCAPE)
    _wait_for(lambda: not _summary_open(dash_duo.driver))
    summary.click()  # a click inside it leaves it open
    dash_duo.find_element("#dataset-details .summary-table").click()
    time.sleep(0.3)
    assert _summary_open(dash_duo.driver)


def test_the_dashboard_works_under_its_content_security_policy(dash_duo, app, iris_csv):
    # The policy forbids inline scripts other than Dash's own (allowed by hash) and any
    # outside origin; a violation would leave plots or clientside callbacks dead and
    # log "Refused to ..." in the console.
    import requests

    dash_duo.start_server(app)
    policy = requests.get(dash_duo.server_url, timeout=30).headers["Content-Security-Policy"]
    assert "script-src 'self'" in policy and "'sha256-" in policy and "frame-ancestors 'none'" in policy
    dash_duo.wait_for_element("#scores-graph .js-plotly-plot", timeout=TIMEOUT)
    _upload(dash_duo, iris_csv)
    dash_duo.wait_for_text_to_equal(FIRST_EIGENVALUE, "2.9185", timeout=TIMEOUT)
    drawn_points = _wait_for(lambda: dash_duo.driver.execute_script(
        "const plot = document.querySelector('#scores-graph .js-plotly-plot');"
        "return plot && plot._fullData && plot._fullData.filter(t => (t.mode || '').includes('markers'))"
        ".reduce((n, t) => n + (t.x ? t.x.length : 0), 0);"))
    assert drawn_points >= 150  # every iris sample drawn (plus any picked-sample ring)
    dash_duo.find_element("#dataset-details summary").click()  # asset script and clientside code run
    _wait_for(lambda: _summary_open(dash_duo.driver))
    dash_duo.find_element("#dataset-details summary").send_keys(Keys.ESCAPE)
    _wait_for(lambda: not _summary_open(dash_duo.driver))
    refused = [entry["message"] for entry in dash_duo.driver.get_log("browser")
               if "Content Security Policy" in entry["message"] or "Refused to" in entry["message"]]
    assert refused == []


GRAPH_IDS = ("scores-graph", "variance-graph", "diagnostics-graph", "loadings-graph", "circle-graph")
TRACE_COUNT_JS = """
const plot = document.querySelector('#' + arguments[0] + ' .js-plotly-plot');
return plot && plot.data ? plot.data.length : 0;
"""


def test_a_file_that_cannot_be_drawn_never_leaves_the_demo_numbers_under_its_name(dash_duo, app, tmp_path):
    # The ±1e308 file of the hardening report showed the demo's variance, diagnostics and
    # loadings under the new file's name. Refused (its values overflow) or drawn: the
    # numbers on screen always belong to the dataset named above them.
    dash_duo.start_server(app)
    dash_duo.wait_for_element("#scores-graph .js-plotly-plot", timeout=TIMEOUT)
    _wait_for_parallel_analysis(dash_duo.driver)
    demo_title = dash_duo.find_element("#dataset-title").text
    demo_eigenvalue = dash_duo.find_element(FIRST_EIGENVALUE).text
    demo_address = dash_duo.driver.current_url
    huge = tmp_path / "huge.csv"
    huge.write_text("a,b\n1,2\n-1e308,5\n2,1\n1e308,4\n")
    _upload(dash_duo, huge)
    _wait_for(lambda: "huge.csv" in dash_duo.find_element("#upload-status").text)
    time.sleep(1.0)  # let any redraw the upload started arrive
    title = dash_duo.find_element("#dataset-title").text
    if "huge.csv" in title:
        for graph in GRAPH_IDS:
            assert dash_duo.driver.execute_script(TRACE_COUNT_JS, graph) == 0, graph
        assert demo_eigenvalue not in _text(dash_duo.driver, "#variance-table-element")
    else:  # refused: the page stays on the demo, named as the demo, and says why
        notices = dash_duo.find_element("#notices").text
        assert "overflow" in notices or "too large" in notices, notices
        assert title == demo_title and dash_duo.driver.current_url == demo_address
        assert dash_duo.find_element(FIRST_EIGENVALUE).text == demo_eigenvalue
