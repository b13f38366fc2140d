"""Headless Chromium for the page tests and the README's screenshot.

Debian's packages (chromium, chromium-driver; ``.ci/run`` installs them), driven by
selenium; nothing is downloaded. The flags keep Chromium from its background network
traffic, which a closed network refuses.
"""

from __future__ import annotations

import shutil
from pathlib import Path
from typing import Any

FLAGS = ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-quic",
         "--no-first-run", "--disable-background-networking", "--disable-component-update",
         "--disable-sync")


def chromium(width: int = 1500, height: int = 1000) -> Any:
    """A selenium driver of headless Chromium at the given window size."""
    from selenium import webdriver
    from selenium.webdriver.chrome.options import Options
    from selenium.webdriver.chrome.service import Service

    binary = shutil.which("chromium") or "/usr/bin/chromium"
    driver = shutil.which("chromedriver") or "/usr/bin/chromedriver"
    if not (Path(binary).exists() and Path(driver).exists()):
        raise RuntimeError("Debian's chromium and chromium-driver are needed: apt-get install "
                           "chromium chromium-driver")
    opts = Options()
    opts.binary_location = binary
    for arg in (*FLAGS, f"--window-size={width},{height}"):
        opts.add_argument(arg)
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    return webdriver.Chrome(service=Service(driver), options=opts)
