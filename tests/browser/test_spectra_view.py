"""Spectra in the browser: a link with ranges, SNV and a Savitzky–Golay derivative
draws a loading spectrum, and reopens identically in a fresh browser.

Data: the synthetic lentil-flour NIR demo (demo_data/generate_spectra.py). The
numbers behind the figures are checked against numpy, scipy and scikit-learn in
tests/app/test_spectral_view.py; here the page is checked to show them.
"""

import json
import os
import re
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from selenium import webdriver
from sklearn.decomposition import PCA

from tests.browser.test_dashboard import TIMEOUT, _headless_options, _text, _upload, _wait_for
from webapp.config import AppConfig
from webapp.web.app import create_app

pytestmark = pytest.mark.browser

SPECTRA = Path(__file__).resolve().parents[2] / "demo_data" / "synthetic_lentil_flour_nir.csv"
LOADINGS_JS = """
const plot = document.querySelector('#loadings-graph .js-plotly-plot');
if (!plot || !plot._fullData || !plot._fullData.length) { return null; }
const t = plot._fullData[0];
return JSON.stringify([t.type || '', t.mode || '', Array.from(t.x || []).map(v => v === null || isNaN(v) ? null : v),
                       Array.from(t.y || []).map(v => v === null || isNaN(v) ? null : v)]);
"""


def _settled(read, pause: float = 1.0):
    """The value read twice, ``pause`` seconds apart, when both reads agree (else None)."""
    first = read()
    if not first:
        return None
    time.sleep(pause)
    return first if read() == first else None


@pytest.fixture
def app(tmp_path):
    return create_app(AppConfig(data_dir=tmp_path / "data", max_upload_mb=5))


def test_spectral_link_draws_a_loading_spectrum_and_reopens_identically(dash_duo, app):
    dash_duo.start_server(app)
    dash_duo.wait_for_element("#scores-graph .js-plotly-plot", timeout=TIMEOUT)
    _upload(dash_duo, SPECTRA)
    _wait_for(lambda: "LF-24" in (dash_duo.driver.execute_script(
        "const p = document.querySelector('#scores-graph .js-plotly-plot');"
        "return p && p.data ? JSON.stringify(p.data.map(t => t.customdata)) : '';") or ""))
    url = dash_duo.driver.current_url
    url = re.sub(r"rng=[^&]*", "rng=1100-1900,2000-2400", url)
    url = re.sub(r"rowc=[^&]*", "rowc=snv", url)
    url = re.sub(r"sg=[^&]*", "sg=15,2,1", url)
    dash_duo.driver.get(url)
    drawn = _wait_for(lambda: (lambda d: d and json.loads(d)[1] == "lines" and d)(
        dash_duo.driver.execute_script(LOADINGS_JS)))
    kind, mode, x, y = json.loads(drawn)
    assert kind == "scatter" and mode == "lines"
    assert x.count(None) == 1 and x[0] == 1100 and x[-1] == 2400  # two ranges, one gap
    recipe = _wait_for(lambda: _text(dash_duo.driver, "#provenance") or _text(dash_duo.driver, "body"))
    assert "SNV" in recipe and "Savitzky–Golay 1st derivative" in recipe

    fresh = webdriver.Chrome(options=_headless_options())
    try:
        fresh.get(url)
        again = _wait_for(lambda: (lambda d: d and json.loads(d)[1] == "lines" and d)(fresh.execute_script(LOADINGS_JS)))
        assert json.loads(again) == json.loads(drawn)
    finally:
        fresh.quit()


SCORES_JS = """
const plot = document.querySelector('#scores-graph .js-plotly-plot');
if (!plot || !plot._fullData) { return null; }
const traces = plot._fullData.map(t => [t.name || '', Array.from(t.x || []), Array.from(t.y || [])]);
return traces.some(t => t[1].length > 0) ? JSON.stringify(traces) : null;
"""
WIDE_TIMEOUT = 180
# Screenshots at 1280 x 800 of what a user sees (looked at by hand; not compared).
SHOTS = Path(os.environ.get("ORDINATE_SHOTS", "/tmp/ordinate-shots"))


def _first_loadings_after_range_and_snv(path: Path, low: float, high: float) -> np.ndarray:
    """PC1 loadings by scikit-learn of the file's columns in [low, high] after SNV
    (Barnes, Dhanoa & Lister 1989: each row centred and scaled by its own mean and SD)
    and the page's default autoscaling (each column to mean 0, SD 1)."""
    frame = pd.read_csv(path)
    columns = [c for c in frame.columns[2:] if low <= float(c) <= high]
    X = frame[columns].to_numpy(float)
    X = (X - X.mean(axis=1, keepdims=True)) / X.std(axis=1, ddof=1, keepdims=True)
    X = (X - X.mean(axis=0)) / X.std(axis=0, ddof=1)
    return PCA(n_components=1, svd_solver="full").fit(X).components_[0]


def _loadings_equal_to(expected: np.ndarray, drawn: str | None) -> str | None:
    """The drawn loadings (JSON of LOADINGS_JS) when PC1 equals ``expected`` up to sign
    and float32 rounding of the payload, else None."""
    if not drawn:
        return None
    y = np.asarray(json.loads(drawn)[3], dtype=float)
    if y.shape != expected.shape or np.isnan(y).any():
        return None
    sign = np.sign(y @ expected) or 1.0
    return drawn if np.allclose(sign * y, expected, atol=1e-5 * np.abs(expected).max() + 1e-7) else None


@pytest.fixture
def wide_app(tmp_path):
    return create_app(AppConfig(data_dir=tmp_path / "data", max_upload_mb=64, demo_dataset=None))


def test_a_500_by_8000_upload_with_a_range_and_snv_chosen_on_the_page_reopens_identically(dash_duo, wide_app,
                                                                                           tmp_path):
    from tests.app.test_wide_screens import wide_frame

    SHOTS.mkdir(parents=True, exist_ok=True)
    path = tmp_path / "wide.csv"
    wide_frame().to_csv(path, index=False, float_format="%.5g")
    dash_duo.driver.set_window_size(1280, 800)
    dash_duo.start_server(wide_app)
    _upload(dash_duo, path)
    wait = lambda condition: _wait_for(condition, timeout=WIDE_TIMEOUT)  # noqa: E731
    wait(lambda: "S0001" in (dash_duo.driver.execute_script(
        "const p = document.querySelector('#scores-graph .js-plotly-plot');"
        "return p && p.data ? JSON.stringify(p.data.map(t => t.customdata)) : '';") or ""))
    wait(lambda: "of 8 000 variables in use" in _text(dash_duo.driver, "#variable-counts"))
    assert dash_duo.driver.find_elements("css selector", "#variables input") == []  # no checkbox per variable
    ranges = wait(lambda: (lambda e: e if e.is_displayed() else None)(dash_duo.find_element("#ranges-input")))
    ranges.send_keys("1200-1800\n")
    wait(lambda: "rng=1200-1800" in dash_duo.driver.current_url)
    # As a person would: the range is seen to apply before the next choice.
    wait(lambda: "3 001 of 8 000 variables in use" in _text(dash_duo.driver, "#variable-counts"))
    snv = dash_duo.find_element("#row-correction input[value='snv']")
    dash_duo.driver.execute_script("arguments[0].scrollIntoView({block: 'center'});", snv)
    snv.click()
    wait(lambda: "rowc=snv" in dash_duo.driver.current_url and "rng=1200-1800" in dash_duo.driver.current_url)
    # The range alone already starts the loadings at 1200: wait for SNV to be applied
    # (the step order says so).
    order = wait(lambda: (lambda text: "SNV" in text and text)(_text(dash_duo.driver, "#step-order")))
    assert order.index("range 1200–1800") < order.index("SNV") < order.index("mean-centring")
    # A figure that stays the same for a second can still be the range-only one while the
    # SNV refit of 500 x 8 000 runs, so wait for the loadings that scikit-learn gives.
    expected = _first_loadings_after_range_and_snv(path, 1200, 1800)
    drawn = wait(lambda: _loadings_equal_to(expected, dash_duo.driver.execute_script(LOADINGS_JS)))
    kind, mode, x, _y = json.loads(drawn)
    assert kind == "scatter" and mode == "lines" and x[-1] == 1800 and None not in x
    scores = wait(lambda: _settled(lambda: dash_duo.driver.execute_script(SCORES_JS)))
    wait(lambda: "spectra shown" in _text(dash_duo.driver, "#spectra-graph"))
    url = dash_duo.driver.current_url
    dash_duo.find_element("#dataset-details summary").click()
    assert dash_duo.find_element("#rows-are input[value='samples']").is_selected()
    dash_duo.driver.save_screenshot(str(SHOTS / "wide-about.png"))
    dash_duo.find_element("#dataset-details summary").click()
    for name, selector in (("wide-rail", ".recipe-rail"), ("wide-loadings", ".loadings-card"),
                           ("wide-spectra", "#spectra-card")):
        dash_duo.driver.execute_script(f"document.querySelector('{selector}').scrollIntoView();")
        dash_duo.driver.save_screenshot(str(SHOTS / f"{name}.png"))

    fresh = webdriver.Chrome(options=_headless_options())
    try:
        fresh.set_window_size(1280, 800)
        fresh.get(url)
        assert "SNV" in wait(lambda: _text(fresh, "#step-order"))
        again = wait(lambda: _loadings_equal_to(expected, fresh.execute_script(LOADINGS_JS)))
        assert json.loads(again) == json.loads(drawn)
        assert json.loads(wait(lambda: _settled(lambda: fresh.execute_script(SCORES_JS)))) == json.loads(scores)
    finally:
        fresh.quit()
