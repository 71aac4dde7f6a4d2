"""Spectra in the browser: a link with ranges, SNV and a Savitzky–Golay derivative
draws a loading spectrum, and reopens identically in a fresh browser.

Data: the synthetic lentil-flour NIR demo (demo_data/generate_spectra.py). The
numbers behind the figures are checked against numpy, scipy and scikit-learn in
tests/app/test_spectral_view.py; here the page is checked to show them.
"""

import json
import re
from pathlib import Path

import pytest
from selenium import webdriver

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
