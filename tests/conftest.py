"""Shared test configuration: headless Chromium for the browser tests."""

import shutil

from selenium.webdriver.chrome.options import Options

CHROME_FLAGS = (
    "--no-sandbox",
    "--disable-dev-shm-usage",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
    "--window-size=1280,900",
)


def pytest_setup_options():
    """Chrome options for dash[testing]'s dash_duo (see plotly/dash#805)."""
    options = Options()
    for flag in CHROME_FLAGS:
        options.add_argument(flag)
    binary = shutil.which("chromium") or shutil.which("chromium-browser")
    if binary:
        options.binary_location = binary
    return options
