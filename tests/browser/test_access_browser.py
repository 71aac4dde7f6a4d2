"""Signing in with the team access key, and an ended session, in headless Chromium."""

import threading

import pytest
from selenium import webdriver
from selenium.webdriver.common.by import By
from werkzeug.serving import make_server

from tests.browser.test_dashboard import (
    FIRST_EIGENVALUE,
    _headless_options,
    _text,
    _wait_for,
    _wait_for_parallel_analysis,
)
from webapp.web.app import create_app
from webapp.config import AppConfig

pytestmark = pytest.mark.browser
KEY = "team-key-" + "x" * 20


def _sign_in(driver):
    field = _wait_for(lambda: driver.find_elements(By.CSS_SELECTOR, "input[name='key']"))[0]
    field.send_keys(KEY)
    field.submit()


@pytest.fixture
def served(tmp_path):
    app = create_app(AppConfig(data_dir=tmp_path / "data", access_key=KEY, require_access_key=True))
    server = make_server("127.0.0.1", 0, app.server, threaded=True)
    threading.Thread(target=server.serve_forever, daemon=True).start()
    driver = webdriver.Chrome(options=_headless_options())
    yield f"http://127.0.0.1:{server.server_port}", driver
    driver.quit()
    server.shutdown()


def test_sign_in_then_an_ended_session_returns_to_the_same_view(served):
    base, driver = served
    driver.get(base + "/")
    assert "/sign-in" in driver.current_url
    _sign_in(driver)
    _wait_for(lambda: _text(driver, FIRST_EIGENVALUE))
    # Until then the page polls for parallel analysis, and a poll would find the
    # session ended before the click below does.
    _wait_for_parallel_analysis(driver)
    view_url = driver.current_url
    assert "ds=" in view_url

    driver.delete_all_cookies()  # the session ends (expired, or the key was rotated)
    driver.find_element(By.CSS_SELECTOR, "#scaling input[value='none']").click()
    _wait_for(lambda: "/sign-in?next=" in driver.current_url)
    _sign_in(driver)
    _wait_for(lambda: _text(driver, FIRST_EIGENVALUE))
    assert driver.current_url == view_url  # back where the session ended
