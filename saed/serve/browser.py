"""A headless Chromium for the page's browser tests and ``saed bench`` (Selenium; Debian's chromium).

Started with a fresh profile folder and with everything that would reach the network by itself
switched off (the machines that run the checks may have no outside network).
"""

from __future__ import annotations

import shutil

__all__ = ["find_browser", "headless_chromium", "CHROMIUM_FLAGS"]

CHROMIUM_FLAGS = ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-dev-shm-usage")


def find_browser() -> tuple[str | None, str | None]:
    """(chromium, chromedriver) paths, or None for what is missing (also when selenium is not installed)."""
    try:
        import selenium  # noqa: F401  (test extra)
    except ImportError:
        return None, None
    return shutil.which("chromium") or shutil.which("chromium-browser"), shutil.which("chromedriver")


def headless_chromium(profile_dir: str, *, window: str = "1500,1000"):
    """A Selenium driver of headless Chromium using `profile_dir` (a fresh, empty folder) as its profile."""
    from selenium import webdriver
    from selenium.webdriver.chrome.options import Options
    from selenium.webdriver.chrome.service import Service

    chromium, driver = find_browser()
    if chromium is None or driver is None:
        raise RuntimeError("no chromium/chromedriver: apt-get install chromium chromium-driver")
    opts = Options()
    opts.binary_location = chromium
    for a in (*CHROMIUM_FLAGS, f"--window-size={window}", f"--user-data-dir={profile_dir}"):
        opts.add_argument(a)
    return webdriver.Chrome(options=opts, service=Service(driver))
