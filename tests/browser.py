"""Open a page of castline's in Debian's headless Chromium, driven by Selenium, and record what
it showed and what it asked for.

Tests import it as conftest is imported (``from browser import CHROMIUM, CHROMEDRIVER, open_page``)
and mark their browser tests ``@pytest.mark.skipif(not (CHROMIUM and CHROMEDRIVER), ...)``:
.ci/run installs chromium and chromium-driver when absent.
"""

from __future__ import annotations

import json
import shutil
from dataclasses import dataclass
from pathlib import Path

CHROMIUM, CHROMEDRIVER = shutil.which("chromium"), shutil.which("chromedriver")
NEEDS_A_BROWSER = "needs Debian's chromium and chromium-driver"
# The browser's own pages (its start page) are chrome:// and chrome-untrusted://, not the network.
NOT_NETWORK = ("file://", "data:", "chrome://", "chrome-untrusted://")
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--disable-dev-shm-usage")


@dataclass(frozen=True)
class PageLoad:
    """What one page showed in the browser and what loading it asked for."""

    sections: list[str]                     # the id of every <section>, in page order
    headings: list[tuple[int, str]]         # every h1, h2 and h3: (level, text), in page order
    images: list[tuple[bool, int, int]]     # every image: (complete, naturalWidth, length of its alt)
    requested: list[str]                    # every URL the page load asked for (the browser's log)
    fetched: list[str]                      # the page's own record of the resources it fetched,
    #                                         less file: and data: ones (data: URIs are not fetched)

    @property
    def network(self) -> list[str]:
        """The URLs requested that are not file:, data:, chrome: or chrome-untrusted:."""
        return [url for url in self.requested if not url.startswith(NOT_NETWORK)]


def open_page(path: Path, profile: Path) -> PageLoad:
    """Open a local HTML file in headless Chromium (its user profile in `profile`, a fresh
    folder) and return what the page showed and asked for once loaded."""
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for flag in (*FLAGS, f"--user-data-dir={profile}"):
        options.add_argument(flag)
    options.set_capability("goog:loggingPrefs", {"performance": "ALL"})
    driver = webdriver.Chrome(service=Service(CHROMEDRIVER), options=options)
    try:
        driver.get_log("performance")   # drop what the browser's start page asked for
        driver.get(Path(path).resolve().as_uri())
        sections = driver.execute_script(
            "return Array.from(document.querySelectorAll('section')).map(s => s.id);")
        headings = driver.execute_script(
            "return Array.from(document.querySelectorAll('h1, h2, h3'))"
            ".map(h => [Number(h.tagName.slice(1)), h.textContent.trim()]);")
        images = driver.execute_script(
            "return Array.from(document.images).map(i => [i.complete, i.naturalWidth, i.alt.length]);")
        messages = [json.loads(entry["message"])["message"] for entry in driver.get_log("performance")]
        requested = [m["params"]["request"]["url"] for m in messages
                     if m["method"] == "Network.requestWillBeSent"]
        fetched = driver.execute_script("return performance.getEntriesByType('resource').map(e => e.name);")
    finally:
        driver.quit()
    return PageLoad(sections=list(sections), headings=[(int(level), text) for level, text in headings],
                    images=[(bool(done), int(width), int(alt)) for done, width, alt in images],
                    requested=list(requested),
                    fetched=[name for name in fetched if not name.startswith(("file:", "data:"))])
