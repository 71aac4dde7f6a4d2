"""Take the screenshots in docs/screenshots/ from a real Ordinate server.

    python docs/make_screenshots.py

Starts the app on the demo data in a temporary data directory, drives headless
Chromium (Debian packages chromium and chromium-driver) and writes PNG files.
Run it after any visible change and commit the pictures with the change.
"""

from __future__ import annotations

import shutil
import sys
import tempfile
import threading
import time
from pathlib import Path

from selenium import webdriver
from selenium.webdriver.chrome.options import Options
from selenium.webdriver.common.by import By
from selenium.webdriver.support import expected_conditions as EC
from selenium.webdriver.support.ui import WebDriverWait
from werkzeug.serving import make_server

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from webapp.web.app import DEMO_SETTING, create_app  # noqa: E402
from webapp.config import AppConfig  # noqa: E402
from webapp.state import ViewState, to_query  # noqa: E402
from webapp.ui import view_model as vm  # noqa: E402

OUT = ROOT / "docs" / "screenshots"
PORT = 8097
FLAGS = ("--headless=new", "--no-sandbox", "--disable-dev-shm-usage", "--disable-gpu",
         "--disable-background-networking", "--disable-component-update", "--disable-sync", "--no-first-run")


def main() -> None:
    data_dir = Path(tempfile.mkdtemp(prefix="ordinate-shots-"))
    app = create_app(AppConfig(data_dir=data_dir))
    services = app.server.config["ordinate.services"]
    token = services.store.get_setting(DEMO_SETTING)
    server = make_server("127.0.0.1", PORT, app.server, threaded=True)
    threading.Thread(target=server.serve_forever, daemon=True).start()
    OUT.mkdir(parents=True, exist_ok=True)
    browser = _browser()
    try:
        base = f"http://127.0.0.1:{PORT}/?"
        demo = ViewState(dataset=token, missing="iterative", sigma_levels=(1.0, 2.0), hotelling=True)
        _shot(browser, base + to_query(demo), "overview-1280.png", (1280, 800))
        _shot(browser, base + to_query(demo), "overview-1920.png", (1920, 1080))
        _shot(browser, base + to_query(demo), "full-page-1280.png", (1280, 800), full_page=True)
        picked = demo.replace(picked="OD-24-0106")
        _shot(browser, base + to_query(picked), "diagnostics-picked.png", (1280, 1400), element=".diagnostics-card")
        _shot(browser, base + to_query(demo), "variance.png", (1280, 1400), element=".variance-card")
        new_batches = ROOT / "demo_data" / "synthetic_oat_dessert_new_batches.csv"
        batch = services.store.add_bytes(new_batches.read_bytes(), new_batches.name).token
        _shot(browser, base + to_query(demo.replace(batch=batch)), "new-batch.png", (1280, 1400),
              element=".diagnostics-card")
        _shot(browser, base + "v=1&ds=AAAAAAAAAAAAAAAAAAAAAAAA", "not-found.png", (1280, 800))
        first = vm.save_view(services, demo, title="Sites on PC1 and PC2",
                             note="**Ostrava-Nord** separates along PC1; Lindholm and Brackwater overlap.",
                             author="QC lab", parent=None)
        vm.save_view(services, demo.replace(pc_y=3, sigma_levels=(2.0,)), title="PC3: heat treatment",
                     note="Colour b* and particle size drive PC3.", author="QC lab", parent=None)
        _shot(browser, f"http://127.0.0.1:{PORT}/v/{first.view_id}", "saved-view.png", (1280, 800))
        presenting = ViewState(dataset=token, present=True, slide=2)
        _shot(browser, base + to_query(presenting), "presentation.png", (1600, 900))
        labelled = demo.replace(labels=True, arrows=True, hotelling=False)
        _shot(browser, base + to_query(labelled), "sample-labels.png", (1280, 900), element=".scores-card")
        (model,) = services.reference_models.all()
        _shot(browser, f"http://127.0.0.1:{PORT}/m/{model.code}", "monitoring-1280.png", (1280, 800),
              ready=".run-graph .main-svg")
        _shot(browser, f"http://127.0.0.1:{PORT}/m/{model.code}", "monitoring-full.png", (1280, 800),
              ready=".run-graph .main-svg", full_page=True)
        spectra_file = ROOT / "demo_data" / "synthetic_lentil_flour_nir.csv"
        spectra = services.store.add_bytes(spectra_file.read_bytes(), spectra_file.name).token
        wide = f"http://127.0.0.1:{PORT}/?v=1&ds={spectra}&rowc=snv"
        _shot(browser, wide, "spectra-full-1280.png", (1280, 800), full_page=True)
    finally:
        browser.quit()
        server.shutdown()
        shutil.rmtree(data_dir, ignore_errors=True)


def _browser():
    options = Options()
    for flag in FLAGS:
        options.add_argument(flag)
    options.binary_location = shutil.which("chromium") or "/usr/bin/chromium"
    return webdriver.Chrome(options=options)


def _shot(browser, url, name, size, *, element=None, full_page=False, ready=None):
    browser.set_window_size(*size)
    browser.get(url)
    WebDriverWait(browser, 60).until(EC.presence_of_element_located(
        (By.CSS_SELECTOR, ready or "#scores-graph .main-svg, .not-found-card")))
    if ready is None:  # a view is drawn before parallel analysis ends; wait for its verdicts
        WebDriverWait(browser, 120).until(lambda b: b.find_elements(By.CSS_SELECTOR, ".not-found-card")
                                          or "still running" not in b.find_element(By.ID, "component-advice").text)
    time.sleep(2.5)  # let every graph finish drawing
    if element:
        target = browser.find_element(By.CSS_SELECTOR, element)
        browser.execute_script("arguments[0].scrollIntoView({block: 'start'}); window.scrollBy(0, -90);", target)
        time.sleep(0.5)  # the page's bar stays at the top: the card starts below it
        target.screenshot(str(OUT / name))
    elif full_page:
        height = browser.execute_script("return document.documentElement.scrollHeight")
        browser.set_window_size(size[0], height + 100)
        time.sleep(1.5)
        browser.save_screenshot(str(OUT / name))
    else:
        browser.save_screenshot(str(OUT / name))
    print("wrote", OUT / name)


if __name__ == "__main__":
    main()
