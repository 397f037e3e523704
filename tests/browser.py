"""Open a page of castline's in Debian's headless Chromium, driven by Selenium, and record what
it showed and what it asked for; and read a page's tables without a browser (read_page).

Tests import it as conftest is imported (``from browser import CHROMIUM, CHROMEDRIVER, open_page``)
and mark their browser tests ``@pytest.mark.skipif(not (CHROMIUM and CHROMEDRIVER), ...)``:
.ci/run installs chromium and chromium-driver when absent.
"""

from __future__ import annotations

import json
import shutil
import time
from dataclasses import dataclass
from html.parser import HTMLParser
from pathlib import Path

import pandas as pd

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


# Elements wider than the window, or reaching past its edges, outside a table's own scrolling box
# (.scroll), and where the first screen's parts end.
_LAYOUT = """
const width = document.documentElement.clientWidth;
const inScrollBox = e => e.parentElement && e.parentElement.closest('.scroll');
const outside = Array.from(document.querySelectorAll('body *')).filter(e => {
  if (inScrollBox(e)) return false;
  const box = e.getBoundingClientRect();
  return box.width > 0 && (box.right > width + 1 || box.left < -1);
}).map(e => e.tagName.toLowerCase() + (e.id ? '#' + e.id : '') + (e.className ? '.' + e.className : ''));
const bottom = selector => {
  const e = document.querySelector(selector);
  return e ? e.getBoundingClientRect().bottom : null;
};
const scrolling = Array.from(document.querySelectorAll('.scroll')).filter(e => e.scrollWidth > e.clientWidth + 1)
  .map(e => { const t = e.querySelector('table'); return t && t.id ? t.id : (e.closest('section') || {}).id; });
return {width: width, height: document.documentElement.clientHeight, scrolling: scrolling,
        scroll_width: document.documentElement.scrollWidth, outside: outside,
        answer: bottom('.answer'), picture: bottom('#forecast-glance img'),
        numbers: bottom('#next-months'), caution: bottom('#caution-line')};
"""


@dataclass(frozen=True)
class Layout:
    """How a page lays out in a window of a given size, as the browser measured it (pixels)."""

    width: int                  # the window's inner width
    height: int
    scroll_width: int           # the page's full width: more than `width` means a sideways scroll
    outside: list[str]          # elements past the window's edges, outside a table's scrolling box
    scrolling: list[str]        # tables wider than their box, which scroll inside it (by table id,
    #                             else the id of their section)
    bottoms: dict               # where the answer, the forecast picture, the numbers and the
    #                             caution line end (None when the page has none)


def _inner_size(driver, width: int, height: int, tries: int = 50) -> None:
    """Set the window's inner size to width × height exactly and wait until the page has it: the
    outer size may include a frame, and a resize reaches the page's layout a moment later."""
    for _ in range(tries):
        inner = driver.execute_script("return [window.innerWidth, window.innerHeight];")
        if inner == [width, height]:
            return
        outer = driver.get_window_rect()
        driver.set_window_rect(width=outer["width"] + width - inner[0],
                               height=outer["height"] + height - inner[1])
        time.sleep(0.1)
    raise AssertionError(f"the browser window would not take an inner size of {width} × {height}")


def measure_layout(path: Path, profile: Path, width: int, height: int) -> Layout:
    """Open a local HTML file in headless Chromium in a window of width × height and return how
    it lays out."""
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for flag in (*FLAGS, f"--user-data-dir={profile}", "--hide-scrollbars"):
        options.add_argument(flag)
    driver = webdriver.Chrome(service=Service(CHROMEDRIVER), options=options)
    try:
        driver.set_window_rect(width=width, height=height)
        driver.get(Path(path).resolve().as_uri())
        _inner_size(driver, width, height)
        found = driver.execute_script(_LAYOUT)
    finally:
        driver.quit()
    return Layout(width=int(found["width"]), height=int(found["height"]),
                  scroll_width=int(found["scroll_width"]), outside=list(found["outside"]),
                  scrolling=list(found["scrolling"]),
                  bottoms={key: found[key] for key in ("answer", "picture", "numbers", "caution")})


class PageTables(HTMLParser):
    """Collect, per table id, its header and rows of (data-value or None, text) cells; and the
    ids of the sections and the headings, in order."""

    def __init__(self) -> None:
        super().__init__()
        self.tables: dict[str, dict] = {}
        self.sections: list[str] = []
        self.headings: list[tuple[str, str]] = []
        self._table = self._row = self._cell = self._heading = None

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "section":
            self.sections.append(attrs.get("id"))
        elif tag in ("h1", "h2", "h3"):
            self._heading = [tag, ""]
        elif tag == "table":
            self._table = attrs.get("id")
            self.tables[self._table] = {"header": [], "rows": []}
        elif tag == "tr" and self._table:
            self._row = []
        elif tag in ("td", "th") and self._row is not None:
            self._cell = [attrs.get("data-value"), "", tag]

    def handle_data(self, data):
        if self._cell is not None:
            self._cell[1] += data
        if self._heading is not None:
            self._heading[1] += data

    def handle_endtag(self, tag):
        if tag in ("h1", "h2", "h3") and self._heading is not None:
            self.headings.append(tuple(self._heading))
            self._heading = None
        elif tag in ("td", "th") and self._cell is not None:
            self._row.append(tuple(self._cell))
            self._cell = None
        elif tag == "tr" and self._row is not None:
            table = self.tables[self._table]
            if self._row and self._row[0][2] == "th":
                table["header"] = [text for _, text, _ in self._row]
            elif self._row:
                table["rows"].append([(value, text) for value, text, _ in self._row])
            self._row = None
        elif tag == "table":
            self._table = None

    def frame(self, table_id: str) -> pd.DataFrame:
        """Return a table as a frame: numbers from data-value (NaN when empty), else the text."""
        table = self.tables[table_id]

        def cell(value, text):
            if value is None:
                return text
            return float(value) if value not in ("", "nan") else float("nan")

        return pd.DataFrame([[cell(*c) for c in row] for row in table["rows"]], columns=table["header"])


def read_page(path: Path) -> PageTables:
    page = PageTables()
    page.feed(path.read_text(encoding="utf-8"))
    return page
