"""Shared test configuration: headless Chromium for the browser tests; no time limits on property tests."""

import shutil

from hypothesis import settings
from selenium.webdriver.chrome.options import Options

# Property tests check values, not speed: on a busy two-core machine one example can
# exceed Hypothesis's default 200 ms deadline and fail a run for no reason.
settings.register_profile("ordinate", deadline=None)
settings.load_profile("ordinate")

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
