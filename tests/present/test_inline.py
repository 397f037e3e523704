"""How pictures go into the page: line charts as compact percent-encoded SVG, scatters of many
points as base64 PNG, each data URI decoding back to a picture the standard library reads.

References: the standard library's XML parser (xml.etree), urllib.parse and base64, the PNG
specification's signature, and HTML's rule for a double-quoted attribute value (no '"', and no
'&' that could start a character reference).
"""

from __future__ import annotations

import base64
import re
import urllib.parse
from html.parser import HTMLParser
from xml.etree import ElementTree

import matplotlib
import pytest
from conftest import DEMO_SPEC

import pipeline
from pipeline.present import plots
from pipeline.present.report import page_environment

SVG = "{http://www.w3.org/2000/svg}"
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


class _Images(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.images: list[tuple[str, str]] = []

    def handle_starttag(self, tag, attrs):
        if tag == "img":
            attrs = dict(attrs)
            self.images.append((attrs["src"], attrs["alt"]))


def _read_back(uri: str) -> tuple[str, bytes]:
    """Return a data URI's kind and bytes, with the standard library alone."""
    head, data = uri.split(",", 1)
    if head == "data:image/svg+xml":
        return "svg", urllib.parse.unquote_to_bytes(data)
    assert head == "data:image/png;base64", head
    return "png", base64.b64decode(data, validate=True)


@pytest.fixture(scope="module")
def demo_page(tmp_path_factory) -> str:
    folder = pipeline.run(DEMO_SPEC, output_folder=tmp_path_factory.mktemp("runs")).folder.path
    return (folder / "report.html").read_text(encoding="utf-8")


def test_the_demo_report_inlines_charts_as_svg_text_and_its_scatters_as_png(demo_page):
    parser = _Images()
    parser.feed(demo_page)
    assert len(parser.images) == demo_page.count("<img ") >= 10
    kinds = {}
    for uri, alt in parser.images:
        kind, data = _read_back(uri)
        if kind == "svg":
            root = ElementTree.fromstring(data)
            assert root.tag == SVG + "svg" and root.find(f".//{SVG}g") is not None
            assert ";base64," not in uri
        else:
            assert data[:8] == PNG_SIGNATURE
        kinds[alt[:30]] = kind
    # The demo's residual scatters hold some 280 points each: PNG. Every other picture: SVG.
    scatters = {a: k for a, k in kinds.items() if a.startswith(("Scatter of residuals", "Normal quantile"))}
    assert set(scatters.values()) == {"png"} and len(scatters) == 2
    others = {a: k for a, k in kinds.items() if a not in scatters}
    assert set(others.values()) == {"svg"} and len(others) >= 8
    # Each src is written as it is: nothing in it the page had to escape, nothing that ends the
    # attribute, starts a character reference or a fragment, no line break.
    for src in re.findall(r'<img src="([^"]*)"', demo_page):
        assert not re.search(r"[&#<>\n\t]", src), src[:80]
    # The size: the demo's page was 549 KB, 497 KB of it base64 pictures.
    assert len(demo_page.encode("utf-8")) < 450_000


def _titled(title: str):
    figure, axis = plots._subplots(figsize=(4, 2))
    axis.plot([0.123456, 1.987654, 2.5], [3.141592, 2.718281, 1.0], marker="o")
    axis.set_title(plots.as_text(title))
    return figure


def test_a_compact_svg_keeps_every_text_exactly_and_rounds_only_coordinates():
    title = "Nord & \"Süd\" #1 of 50% <b> it's"
    with matplotlib.rc_context(plots.STYLE):
        picture = plots.inline_picture(_titled(title), "alt", "svg")
        again = plots.inline_picture(_titled(title), "alt", "svg")
    assert again.uri == picture.uri   # the same figure, the same bytes
    kind, data = _read_back(picture.uri)
    assert kind == "svg" and plots.picture_data(picture.uri) == (kind, data)
    root = ElementTree.fromstring(data)
    texts = ["".join(t.itertext()) for t in root.iter(SVG + "text")]
    assert title in texts
    # Coordinates to a hundredth of a point; the font given once, in the style sheet.
    for element in root.iter():
        for name in ("d", "x", "y", "transform"):
            assert not re.search(r"\d\.\d{3}", element.get(name, "")), (name, element.get(name))
        assert "font-family" not in element.get("style", "")
    assert "font-family:DejaVu Sans" in "".join(root.find(f"{SVG}defs/{SVG}style").itertext())


def test_the_page_writes_a_picture_s_data_uri_as_it_is():
    with matplotlib.rc_context(plots.STYLE):
        picture = plots.inline_picture(_titled("it's <x> & y"), "alt", "svg")
    page = page_environment().from_string('<img src="{{ uri }}" alt="{{ alt }}">').render(uri=picture.uri,
                                                                                         alt="a 'b'")
    assert page == f'<img src="{picture.uri}" alt="a &#39;b&#39;">'
    assert '"' not in picture.uri and "&" not in picture.uri
