"""How a drawn picture goes into an HTML page: its data URI (SVG as compact percent-encoded
UTF-8, PNG as base64) with its text alternative, the same bytes from the same figure."""

from __future__ import annotations

import base64
import io
import re
import urllib.parse
from dataclasses import dataclass

from markupsafe import Markup


@dataclass(frozen=True)
class Figure:
    """A picture for the report and its text alternative."""

    uri: str
    alt: str


def picture_bytes(figure, kind: str) -> bytes:
    """Return a drawn figure saved as 'png' or 'svg', without a timestamp or software tag, so
    the same run draws the same bytes (the SVG's ids come from svg.hashsalt: the style's, or
    castline's when the style sets none, as the history page's pictures'); the SVG compacted
    (``compact_svg``)."""
    import matplotlib
    buffer = io.BytesIO()
    metadata = {"Software": None} if kind == "png" else {"Date": None, "Creator": None}
    salt = matplotlib.rcParams["svg.hashsalt"] or "castline"
    with matplotlib.rc_context({"svg.hashsalt": salt}):
        figure.savefig(buffer, format=kind, metadata=metadata)
    return buffer.getvalue() if kind == "png" else compact_svg(buffer.getvalue())


# Attributes holding coordinates, written by matplotlib with six decimals (of a point).
_COORDINATES = re.compile(rb'(\s(?:d|x|y|x1|x2|y1|y2|width|height|points|transform)=)"([^"]*)"')
_DECIMALS = re.compile(rb"-?\d+\.\d{3,}")
_FONT = re.compile(rb"font-family: ([^;\"]*)(; )?")
_ATTRIBUTE = re.compile(rb'="([^"]*)"')


def _rounded(match: re.Match) -> bytes:
    """Return a number with at most two decimals (a hundredth of a point, far below a pixel)."""
    text = f"{float(match.group(0)):.2f}".rstrip("0").rstrip(".")
    return b"0" if text == "-0" else text.encode()


def _coordinates(match: re.Match) -> bytes:
    value = b" ".join(match.group(2).split())   # a path's line breaks are spaces
    return match.group(1) + b'"' + _DECIMALS.sub(_rounded, value) + b'"'


def _tag(tag: bytes, family: bytes | None, used: set) -> bytes:
    """Return one SVG tag compacted as compact_svg says."""
    tag = re.sub(rb' id="([^"]*)"', lambda m: m.group(0) if m.group(1) in used else b"", tag)
    tag = _COORDINATES.sub(_coordinates, tag)
    tag = re.sub(rb' transform="rotate\(-?0 [^")]*\)"', b"", tag)
    if family is not None:
        tag = _FONT.sub(b"", tag)
    return _ATTRIBUTE.sub(lambda m: b"='" + m.group(1).replace(b"'", b"&apos;") + b"'", tag)


def compact_svg(svg: bytes) -> bytes:
    """Return matplotlib's SVG in fewer bytes that draw the same picture: no indentation, metadata
    block, DOCTYPE or ids nothing refers to, coordinates to a hundredth of a point, no no-op
    rotation, the font given once in the style sheet rather than on every text, attributes in single quotes (in a data URI they
    need no escaping in an HTML attribute) and no line break between elements. Deterministic.
    Only tags change: a text's content (between tags, never holding a '<') is kept as it is."""
    svg = re.sub(rb"\n[ \t]+", b"\n", svg)
    svg = re.sub(rb"<!DOCTYPE[^>]*>\n?", b"", svg)
    svg = re.sub(rb"<metadata>.*?</metadata>\n?", b"", svg, flags=re.S)
    tags = re.findall(rb"<[^>]*>", svg)
    families = {family for tag in tags for family, _ in _FONT.findall(tag)}
    family = next(iter(families)).replace(b"'", b"") if len(families) == 1 else None
    used = {name for tag in tags for name in re.findall(rb'(?:url\(|href=")#([^)"]*)', tag)}
    svg = re.sub(rb"<[^>]*>", lambda m: _tag(m.group(0), family, used), svg)
    if family is not None:   # one family throughout: said once
        svg = svg.replace(b"<style type='text/css'>", b"<style type='text/css'>text{font-family:" + family + b"}", 1)
    return re.sub(rb">\n+<", b"><", svg)


# Characters a data URI keeps as they are in a double-quoted HTML attribute: all printable ASCII
# but the attribute's quote, '&' (a character reference), '%' (an escape), '#' (a fragment) and
# '<' '>' (a page read by a pattern rather than a parser would take them for a tag's edges).
_URI_SAFE = "".join(chr(c) for c in range(0x20, 0x7F) if chr(c) not in "\"&%#<>")


def data_uri(kind: str, data: bytes) -> Markup:
    """Return a picture as a data URI: SVG as percent-encoded UTF-8 with only the characters that
    must be escaped (base64 would add a third), PNG as base64. Markup: it is written in a double-quoted
    HTML attribute as it is (the page's escaping would turn each ' of the SVG into five bytes)."""
    if kind == "svg":
        return Markup("data:image/svg+xml," + urllib.parse.quote(data, safe=_URI_SAFE))
    return Markup("data:image/png;base64," + base64.b64encode(data).decode("ascii"))


def picture_data(uri: str) -> tuple[str, bytes]:
    """Return the kind ('svg' or 'png') and bytes of a data URI data_uri wrote."""
    head, data = uri.split(",", 1)
    if head == "data:image/svg+xml":
        return "svg", urllib.parse.unquote_to_bytes(data)
    if head == "data:image/png;base64":
        return "png", base64.b64decode(data, validate=True)
    raise ValueError(f"not a picture's data URI: {head}")


def inline_picture(figure, alt: str, kind: str | None = None) -> Figure:
    """Return a drawn figure as an inline picture (a data URI) with its text alternative: ``kind``
    'svg' (a line or dot chart: sharp at any size) or 'png' (a scatter of many points is smaller
    so); without one, whichever of the two makes the shorter data URI."""
    if figure.get_layout_engine() is None:   # a figure drawn with a layout of its own keeps it
        figure.tight_layout()
        # tight_layout leaves a placeholder engine, for which savefig lays out and draws the whole
        # figure once more before drawing it (a third of a picture's time): none is left.
        figure.set_layout_engine(None)
    if kind is not None:
        return Figure(data_uri(kind, picture_bytes(figure, kind)), alt)
    return Figure(min((data_uri(kind, picture_bytes(figure, kind)) for kind in ("svg", "png")), key=len), alt)


# A drawn point (a marker) costs SVG some 100 bytes, and a PNG of the report's sizes holds 20 to
# 120 KB however many: past these counts a picture is drawn as PNG (its SVG would be larger).
SVG_MARKERS = 800     # in a line chart with markers
SVG_DOTS = 150        # in a scatter of translucent dots


def picture_kind(points: int, most: int = SVG_MARKERS) -> str:
    """Return the kind a picture of this many drawn points is inlined as: 'svg' up to ``most``."""
    return "svg" if points <= most else "png"
