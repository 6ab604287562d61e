"""Headless Chromium for the web view's tests: Debian's chromium and chromedriver, driven by
selenium with an explicit driver path (nothing is downloaded). Skips when they are missing, fails
instead under CI's HOWL_REQUIRE_BROWSER=1 (as conftest.require_or_skip does for audio)."""

from __future__ import annotations

import os
import shutil

import pytest

CHROMIUM = os.environ.get("HOWL_CHROMIUM", "/usr/bin/chromium")
CHROMEDRIVER = os.environ.get("HOWL_CHROMEDRIVER", "/usr/bin/chromedriver")
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--disable-dev-shm-usage", "--window-size=1280,900")


def require_browser_or_skip(ok: bool, reason: str) -> None:
    if ok:
        return
    if os.environ.get("HOWL_REQUIRE_BROWSER"):
        pytest.fail(f"required under CI but unavailable: {reason}")
    pytest.skip(reason)


def chromium(profile_dir):
    """A headless Chromium session (the caller quits it)."""
    try:
        from selenium import webdriver
        from selenium.webdriver.chrome.service import Service
    except ImportError:
        require_browser_or_skip(False, "selenium is not installed (pip install -e '.[test]')")
    for exe, pkg in ((CHROMIUM, "chromium"), (CHROMEDRIVER, "chromium-driver")):
        if not (os.path.exists(exe) or shutil.which(exe)):
            require_browser_or_skip(False, f"{exe} missing (apt-get install {pkg})")
    opts = webdriver.ChromeOptions()
    opts.binary_location = CHROMIUM
    for f in FLAGS:
        opts.add_argument(f)
    opts.add_argument(f"--user-data-dir={profile_dir}")
    return webdriver.Chrome(service=Service(CHROMEDRIVER), options=opts)
