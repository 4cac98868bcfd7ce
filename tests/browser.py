"""Open a page figkit wrote in a real headless browser (Debian's ``chromium`` and
``chromium-driver``; ``.ci/run`` installs them when missing) and report what a reader's browser
saw: console messages, every image's natural size, chosen texts and a screenshot.

Driven through Selenium WebDriver (W3C WebDriver, https://www.w3.org/TR/webdriver2/) with the
system's chromedriver, so nothing is downloaded at test time.
"""
from __future__ import annotations

import shutil
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import pytest

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
CHROMEDRIVER = shutil.which("chromedriver")


@dataclass
class PageVisit:
    url: str
    console: list[dict]                      # every console entry: {level, message}
    images: list[dict]                       # {src, complete, natural_width, natural_height}
    texts: dict = field(default_factory=dict)  # CSS selector -> [textContent of each match]
    hooks: dict = field(default_factory=dict)  # window property -> its value after load
    screenshot: Path | None = None
    script_result: object = None             # what ``script`` passed to its callback

    @property
    def errors(self) -> list[dict]:
        return [e for e in self.console if e.get("level") == "SEVERE"]


def require_browser() -> None:
    """Skip on a machine without the browser; CI installs it, so there the tests run."""
    if not (CHROMIUM and CHROMEDRIVER):
        pytest.skip("headless Chromium not installed (apt-get install chromium chromium-driver)")
    pytest.importorskip("selenium")


def visit(page: Path, *, screenshot: Path | None = None, selectors: tuple[str, ...] = (),
          hooks: tuple[str, ...] = (), width: int = 1400, height: int = 1000,
          full_page: bool = True, script: str | None = None) -> PageVisit:
    """Load ``page`` from ``file://``, wait until the document and its images are loaded, and
    collect what the browser saw.  ``hooks`` names ``window`` properties to read back (a test
    plants e.g. ``window.__pwned`` in hostile text and checks that it stays unset).  ``script``,
    run after load and before anything is read back, is asynchronous JavaScript (WebDriver's
    Execute Async Script): it walks the page as a reader would and passes what it saw to its
    last argument, the callback; that value is ``script_result``."""
    require_browser()
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service
    from selenium.webdriver.support.ui import WebDriverWait

    profile = tempfile.mkdtemp(prefix="figkit-chromium-")
    opts = webdriver.ChromeOptions()
    opts.binary_location = CHROMIUM
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-quic",
                "--no-first-run", "--disable-background-networking",
                "--disable-component-update", "--disable-sync", "--disable-dev-shm-usage",
                f"--user-data-dir={profile}", f"--window-size={width},{height}",
                "--hide-scrollbars", "--force-device-scale-factor=1"):
        opts.add_argument(arg)
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = webdriver.Chrome(service=Service(CHROMEDRIVER), options=opts)
    try:
        url = Path(page).resolve().as_uri()
        driver.get(url)
        WebDriverWait(driver, 30).until(lambda d: d.execute_script(
            "return document.readyState === 'complete' && "
            "Array.from(document.images).every(i => i.complete)"))
        images = driver.execute_script(
            "return Array.from(document.images).map(i => ({src: i.getAttribute('src'), "
            "complete: i.complete, natural_width: i.naturalWidth, "
            "natural_height: i.naturalHeight}))")
        walked = None
        if script is not None:
            driver.set_script_timeout(60)
            walked = driver.execute_async_script(script)
        texts = {sel: driver.execute_script(
            "return Array.from(document.querySelectorAll(arguments[0]))"
            ".map(e => e.textContent)", sel) for sel in selectors}
        got = {name: driver.execute_script("return window[arguments[0]] === undefined ? null "
                                           ": String(window[arguments[0]])", name)
               for name in hooks}
        shot = None
        if screenshot is not None:
            if full_page:
                h = driver.execute_script("return document.documentElement.scrollHeight")
                driver.set_window_size(width, min(max(int(h), height), 12000))
            screenshot.parent.mkdir(parents=True, exist_ok=True)
            driver.save_screenshot(str(screenshot))
            shot = screenshot
        console = [{"level": e.get("level"), "message": e.get("message")}
                   for e in driver.get_log("browser")]
        return PageVisit(url, console, images, texts, got, shot, walked)
    finally:
        driver.quit()
        shutil.rmtree(profile, ignore_errors=True)
