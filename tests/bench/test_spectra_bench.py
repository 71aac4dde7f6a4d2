"""Wide spectra benchmarks: top-20 fit of 500 x 8 000 and 50 x 20 000 beside scikit-learn,
the cost of the spectral steps (SNV + Savitzky–Golay) beside the fit, and upload to first view
in the browser for a 500 x 8 000 file (beside reading the same file with pandas).

Run on demand:  python3 -m pytest tests/bench -s -k spectra
Results are printed and appended to tests/bench/results.jsonl; docs/performance.md
("Engine") records the numbers of a quiet run. Only correctness is asserted.
"""

import time

import numpy as np
import pytest
import scipy.signal

from tests.bench.test_engine_bench import _median_seconds, _record, compare_top_20_with_scikit_learn
from webapp.analysis.pca import fit_pca
from webapp.analysis.spectra import SpectralSteps


def _spectra(n, p, seed):
    rng = np.random.default_rng(seed)
    axis = np.linspace(0, 1, p)
    bands = np.exp(-0.5 * ((axis[None, :] - rng.uniform(0, 1, (30, 1))) / 0.02) ** 2)
    X = rng.standard_normal((n, 30)) @ bands * rng.normal(1, 0.1, (n, 1)) + rng.normal(0, 0.05, (n, 1))
    return X + 0.01 * rng.standard_normal((n, p))


@pytest.mark.parametrize("shape", [(500, 8_000), (50, 20_000)])
def test_wide_spectra_top_20_vs_fastest_scikit_learn_solver(shape):
    X = _spectra(*shape, seed=shape[1])
    compare_top_20_with_scikit_learn(X, f"wide spectra {shape[0]}x{shape[1]} top 20", ("randomized", "arpack", "full"))


def test_snv_and_savitzky_golay_cost_beside_the_fit():
    X = _spectra(500, 8_000, seed=3)
    steps = SpectralSteps(np.arange(8_000), ((0, 8_000),), "snv", None, (15, 2, 1))
    corrected, refused = steps.apply(X)
    snv = (X - X.mean(1, keepdims=True)) / X.std(1, ddof=1, keepdims=True)
    np.testing.assert_allclose(corrected, scipy.signal.savgol_filter(snv, 15, 2, deriv=1, axis=1), atol=1e-10)
    assert refused == {}
    t_steps = _median_seconds(lambda: steps.apply(X), 3)
    t_fit = _median_seconds(lambda: fit_pca(corrected - corrected.mean(0), 20), 3)
    _record("spectral steps 500x8000 (SNV + SG 15,2,1)", steps_s=t_steps, fit_top20_s=t_fit,
            ratio=t_steps / t_fit)


# When the file was chosen, the first view (scores and variance table), the loading spectrum and
# the spectra card were first seen in the page (performance.now, ms; checked every 10 ms).
_WIDE_STAGES_JS = """
window.__stages = {};
const seen = (name) => { if (!(name in window.__stages)) { window.__stages[name] = performance.now(); } };
document.addEventListener('change', (e) => { if (e.target.id === 'upload-input') { seen('chosen'); } }, true);
const lines = (id) => { const p = document.querySelector('#' + id + ' .js-plotly-plot');
                        return p && p._fullData && p._fullData.some(t => t.mode === 'lines'); };
setInterval(() => {
  if (!('chosen' in window.__stages) || location.search.indexOf('ds=AAAA') >= 0) { return; }
  const scores = document.querySelector('#scores-graph .js-plotly-plot');
  if (scores && scores.data && scores.data.length && document.querySelector('#variance-table-element')) { seen('first'); }
  const diagnostics = document.querySelector('#diagnostics-graph .js-plotly-plot');
  if ('first' in window.__stages && diagnostics && diagnostics.data && diagnostics.data.length) { seen('rest'); }
  if ('first' in window.__stages && lines('loadings-graph')) { seen('loadings'); }
  if ('first' in window.__stages && lines('spectra-graph')) { seen('spectra'); }
}, 10);
"""


def test_upload_to_first_view_in_the_browser_500_by_8000(tmp_path):
    import threading

    from selenium import webdriver
    from selenium.webdriver.common.by import By
    from werkzeug.serving import make_server

    import pandas as pd
    from tests.app.test_wide_screens import wide_frame
    from tests.bench.test_dashboard_bench import _wait
    from tests.conftest import pytest_setup_options
    from webapp.config import AppConfig
    from webapp.web.app import create_app

    path = tmp_path / "wide.csv"
    wide_frame().to_csv(path, index=False, float_format="%.6g")
    size_mb = path.stat().st_size / 2**20
    read_csv = _median_seconds(lambda: pd.read_csv(path), 3)
    app = create_app(AppConfig(data_dir=tmp_path / "d", demo_dataset=None, max_upload_mb=200))
    server = make_server("127.0.0.1", 0, app.server, threaded=True)
    threading.Thread(target=server.serve_forever, daemon=True).start()
    options = pytest_setup_options()
    options.add_argument("--headless=new")
    options.add_argument("--window-size=1280,800")
    browser = webdriver.Chrome(options=options)
    try:
        browser.get(f"http://127.0.0.1:{server.server_port}/?v=1&ds=" + "A" * 24)
        upload = _wait(lambda: browser.find_elements(By.ID, "upload-input"))[0]
        _wait(lambda: "not known here" in browser.find_element(By.ID, "not-found").text)
        time.sleep(1)  # the page has finished starting, as when a person picks a file
        browser.execute_script(_WIDE_STAGES_JS)
        upload.send_keys(str(path))
        stages = _wait(lambda: (lambda s: s if s and {"spectra", "loadings", "rest"} <= set(s) else None)(
            browser.execute_script("return window.__stages;")), 300)
    finally:
        browser.quit()
        server.shutdown()
    first, rest, loadings, spectra = ((stages[name] - stages["chosen"]) / 1000
                                      for name in ("first", "rest", "loadings", "spectra"))
    _record("upload to first view in the browser, 500 x 8000", size_mb=size_mb, read_csv_s=read_csv,
            first_view_s=first, ratio=first / read_csv, diagnostics_drawn_s=rest, loading_spectrum_s=loadings,
            spectra_card_s=spectra)
    assert 0 < first <= max(loadings, spectra)
