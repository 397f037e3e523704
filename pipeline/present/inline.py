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


_ID = re.compile(rb' id="([^"]*)"')
_NO_ROTATION = re.compile(rb' transform="rotate\(-?0 [^")]*\)"')


def _quoted(match: re.Match) -> bytes:
    return b"='" + match.group(1).replace(b"'", b"&apos;") + b"'"


def _tag(tag: bytes, family: bytes | None, used: set) -> bytes:
    """Return one SVG tag compacted as compact_svg says (each step only where the tag has what it
    changes)."""
    if b' id="' in tag:
        tag = _ID.sub(lambda m: m.group(0) if m.group(1) in used else b"", tag)
    tag = _COORDINATES.sub(_coordinates, tag)
    if b"rotate(" in tag:
        tag = _NO_ROTATION.sub(b"", tag)
    if family is not None and b"font-family" in tag:
        tag = _FONT.sub(b"", tag)
    # A '"' in a tag only quotes an attribute: without a "'" in it, each one simply turns into "'".
    return tag.replace(b'"', b"'") if b"'" not in tag else _ATTRIBUTE.sub(_quoted, tag)


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


def _axes_axes(figure) -> list:
    """Return the figure's visible axes' axis objects whose major ticks a locator places."""
    from matplotlib.ticker import FixedLocator, NullLocator
    return [axis for axes in figure.axes for axis in axes._axis_map.values()
            if axes.get_visible() and axes.axison and axis.get_visible()
            and not isinstance(axis.get_major_locator(), (FixedLocator, NullLocator))]


def _in_view(axis, places) -> list[int]:
    """Return the indices of the places in the axis' view (as matplotlib decides which ticks to draw)."""
    from matplotlib.transforms import _interval_contains_close
    transform = axis.get_transform()
    view = transform.transform(sorted(axis.get_view_interval()))
    return [i for i, place in enumerate(places) if _interval_contains_close(view, transform.transform(place))]


def _fix_ticks(figure) -> None:
    """Fix each axis' major ticks at the places its locator gives now, and their labels as its
    formatter writes them there. matplotlib asks the locator (and the formatter) again each
    time it measures or draws an axis, and makes a tick for every place, also for those out of
    view it then leaves out; read once and only those in view, the axis draws the same."""
    from matplotlib.ticker import FixedFormatter, FixedLocator
    for axis in _axes_axes(figure):
        places = axis.get_majorticklocs()
        labels = axis.major.formatter.format_ticks(places)
        offset = axis.major.formatter.get_offset()
        kept = _in_view(axis, places)
        axis.major.locator = FixedLocator([places[i] for i in kept])
        axis.major.formatter = FixedFormatter([labels[i] for i in kept])
        axis.major.formatter.set_offset_string(offset)
        axis.major.locator.set_axis(axis)
        axis.major.formatter.set_axis(axis)
        axis.stale = True


# Where texts are measured (a figure and an Agg renderer per dpi) and what they measured: a text's
# extent around its anchor, in pixels, by its string and everything that shapes it. Kept for the
# process: the same tick labels recur from picture to picture.
_MEASURING: dict = {}
_EXTENTS: dict = {}


def _measuring(dpi: float):
    """Return the text (on a figure of this dpi) and the Agg renderer texts are measured with."""
    if dpi not in _MEASURING:
        import matplotlib.figure
        from matplotlib.backends.backend_agg import RendererAgg
        from matplotlib.transforms import IdentityTransform
        text = matplotlib.figure.Figure(dpi=dpi).text(0, 0, "", transform=IdentityTransform())
        _MEASURING[dpi] = (text, RendererAgg(1, 1, dpi))
    return _MEASURING[dpi]


def _extent(label, string: str, dpi: float) -> tuple[float, float, float, float]:
    """Return the box (x0, y0, x1, y1) ``string`` takes around its anchor when drawn as the text
    ``label`` draws, in pixels: measured by matplotlib once per process (the key holds all that
    shapes it, the font file the font resolves to and the settings the measure reads among it)."""
    import matplotlib
    from matplotlib.font_manager import findfont
    font = label.get_fontproperties()
    shape = {"rotation": label.get_rotation(), "ha": label.get_ha(), "va": label.get_va(),
             "rotation_mode": label.get_rotation_mode(), "linespacing": label.get_linespacing(),
             "usetex": label.get_usetex(), "parse_math": label.get_parse_math()}
    key = (string, dpi, findfont(font), tuple(font.get_family()), font.get_size_in_points(), font.get_style(), font.get_weight(),
           font.get_stretch(), font.get_variant(), font.get_math_fontfamily(), *shape.values(),
           *(matplotlib.rcParams[name] for name in ("text.hinting", "text.hinting_factor", "text.kerning_factor")))
    if key not in _EXTENTS:
        text, renderer = _measuring(dpi)
        text.set(text=string, fontproperties=font, **shape)
        _EXTENTS[key] = tuple(text.get_window_extent(renderer).extents)
    return _EXTENTS[key]


def _tick_label_boxes(axis, dpi: float) -> list[tuple]:
    """Return the boxes (display pixels) of the axis' major tick labels in view, as drawn now."""
    if not axis.get_visible() or not axis.majorTicks[0].label1.get_visible():
        return []
    label = axis.majorTicks[0].label1    # every tick's label is drawn as the first one's
    places = axis.get_majorticklocs()
    texts = axis.major.formatter.format_ticks(places)
    transform = label.get_transform()
    boxes = []
    for i in _in_view(axis, places):
        if texts[i]:
            x, y = transform.transform((places[i], 0) if axis.axis_name == "x" else (0, places[i]))
            x0, y0, x1, y1 = _extent(label, texts[i], dpi)
            boxes.append((x + x0, y + y0, x + x1, y + y1))
    return boxes


def _label_edge(axis, boxes: list[tuple], dpi: float) -> float:
    """Return where an axis' labels begin, away from its axes: past its tick labels' boxes and
    the ticks themselves (the bottom spine's or left spine's extent, with ticks out)."""
    tick = axis.majorTicks[0]
    outside = tick.get_tick_padding() * dpi / 72 if tick.tick1line.get_visible() else 0
    area = axis.axes.bbox
    if axis.axis_name == "x":
        return min([box[1] for box in boxes] + [area.y0 - outside])
    return min([box[0] for box in boxes] + [area.x0 - outside])


def _place_label(axis, edge: float, dpi: float) -> None:
    """Place an axis' label where matplotlib places it, a label pad past ``edge`` (display pixels)."""
    if axis._autolabelpos:
        x, y = axis.label.get_position()
        away = edge - axis.labelpad * dpi / 72
        axis.label.set_position((x, away) if axis.axis_name == "x" else (away, y))


def _axis_boxes(axis, renderer, dpi: float) -> list[tuple]:
    """Return the boxes of an axis' tick labels, offset text and label (its length collapsed, as
    matplotlib's tight layout does), the last two placed where matplotlib places them."""
    boxes = _tick_label_boxes(axis, dpi)
    edge = _label_edge(axis, boxes, dpi)
    area = axis.axes.bbox
    spine = axis.axes.spines.get("bottom" if axis.axis_name == "x" else "left")
    if spine is not None and spine.get_visible() and len(axis.get_majorticklocs()):   # its ticks, out
        boxes.append((area.x0, edge, area.x1, area.y0) if axis.axis_name == "x" else (edge, area.y0, area.x0, area.y1))
    more = []
    offset = axis.major.formatter.get_offset()
    if offset and axis.offsetText.get_visible():
        axis.offsetText.set_text(offset)
        position = edge - 3 * dpi / 72 if axis.axis_name == "x" else area.y1 + 3 * dpi / 72
        axis.offsetText.set_position((axis.offsetText.get_position()[0], position))
        more.append(axis.offsetText)
    if axis.label.get_visible() and axis.label.get_text():
        _place_label(axis, edge, dpi)
        more.append(axis.label)
    for text in more:
        x0, y0, x1, y1 = text.get_window_extent(renderer).extents
        if text is axis.label:   # its length is left out, as tight_layout leaves it out
            x0, x1 = ((x0 + x1) / 2,) * 2 if axis.axis_name == "x" else (x0, x1)
            y0, y1 = ((y0 + y1) / 2,) * 2 if axis.axis_name == "y" else (y0, y1)
        boxes.append((x0, y0, x1, y1))
    return boxes


def _pin_labels(figure) -> None:
    """Pin each axis label and title where matplotlib would place it in the figure as laid out,
    so that drawing does not measure every tick label again to place them: the label a pad past
    its tick labels (in axes coordinates), a title at the top of its axes (where matplotlib puts
    it unless the y axis' offset text is in its way; such an axes keeps placing its titles)."""
    dpi = figure.dpi
    for axes in figure.axes:
        for axis in axes._axis_map.values() if axes.axison else ():
            if axis.label.get_visible() and axis.label.get_text() and axis._autolabelpos:
                _place_label(axis, _label_edge(axis, _tick_label_boxes(axis, dpi), dpi), dpi)
                x, y = axes.transAxes.inverted().transform(axis.label.get_transform().transform(axis.label.get_position()))
                axis.set_label_coords(x, y)
        offset = axes.yaxis.offsetText.get_visible() and axes.yaxis.major.formatter.get_offset()
        if axes._autotitlepos is None and not offset:
            axes._autotitlepos = False
            for title in (axes.title, axes._left_title, axes._right_title):
                title.set_y(1.0)


def _axes_box(axes, renderer, dpi: float) -> tuple[float, float, float, float]:
    """Return the box (display pixels) around an axes and all it draws outside itself: tick
    labels, axis labels, offset texts, titles, legends and texts."""
    boxes = [tuple(axes.bbox.extents)]
    if axes.axison:
        boxes += _axis_boxes(axes.xaxis, renderer, dpi) + _axis_boxes(axes.yaxis, renderer, dpi)
    texts = [axes.title, axes._left_title, axes._right_title, *axes.texts]
    boxes += [tuple(text.get_window_extent(renderer).extents) for text in texts
              if text.get_visible() and text.get_text()]
    if axes.legend_ is not None and axes.legend_.get_visible():
        boxes.append(tuple(axes.legend_.get_window_extent(renderer).extents))
    return (min(b[0] for b in boxes), min(b[1] for b in boxes), max(b[2] for b in boxes), max(b[3] for b in boxes))


def _simple_grid(figure) -> bool:
    """Whether ``lay_out`` can place the figure's axes: one grid of subplots, tick labels and axis
    labels at the bottom and left, nothing on the figure itself but legends at its lower centre."""
    specs = [axes.get_subplotspec() for axes in figure.axes]
    return (bool(specs) and None not in specs and len({spec.get_gridspec() for spec in specs}) == 1
            and all(legend._get_loc() == 8 and legend.get_bbox_to_anchor() is figure.bbox for legend in figure.legends)
            and not (figure.texts or figure._suptitle or figure._supxlabel or figure._supylabel)
            and all(axes.xaxis.label_position == "bottom" and axes.yaxis.label_position == "left"
                    and not axes.xaxis.majorTicks[0].label2.get_visible()
                    and not axes.yaxis.majorTicks[0].label2.get_visible() for axes in figure.axes))


def _grid_parameters(figure, pad: float = 1.08) -> dict | None:
    """Return the subplot parameters that leave room around each axes for what it draws outside
    itself, and ``pad`` font sizes more, as matplotlib's tight_layout computes them; and below
    them room for the figure's legends at its lower centre. None when that leaves the axes no room."""
    import matplotlib
    import numpy as np
    dpi = figure.dpi
    renderer = _measuring(dpi)[1]
    rows, columns = figure.axes[0].get_subplotspec().get_gridspec().get_geometry()
    across, down = np.zeros((rows, columns + 1)), np.zeros((rows + 1, columns))
    width, height = figure.bbox.width, figure.bbox.height
    for axes in figure.axes:
        spec = axes.get_subplotspec()
        place = spec.get_position(figure).transformed(figure.transFigure)
        x0, y0, x1, y1 = _axes_box(axes, renderer, dpi)
        across[spec.rowspan, spec.colspan.start] += (place.x0 - x0) / width
        across[spec.rowspan, spec.colspan.stop] += (x1 - place.x1) / width
        down[spec.rowspan.start, spec.colspan] += (y1 - place.y1) / height
        down[spec.rowspan.stop, spec.colspan] += (place.y0 - y0) / height
    room = pad * matplotlib.rcParams["font.size"] / 72 * dpi
    left, right = max(across[:, 0].max(), 0) + room / width, max(across[:, -1].max(), 0) + room / width
    under = max((legend.get_window_extent(renderer).y1 for legend in figure.legends), default=0)
    top, bottom = max(down[0].max(), 0) + room / height, max(down[-1].max(), 0) + (room + under) / height
    parameters = {"left": left, "right": 1 - right, "bottom": bottom, "top": 1 - top}
    wide = across[:, 1:-1].max(initial=0) + room / width
    high = down[1:-1].max(initial=0) + room / height
    each = ((1 - left - right - wide * (columns - 1)) / columns, (1 - top - bottom - high * (rows - 1)) / rows)
    if min(each) <= 0:   # no room for the axes (as tight_layout, the figure is left as it is)
        return None
    if columns > 1:
        parameters["wspace"] = wide / each[0]
    if rows > 1:
        parameters["hspace"] = high / each[1]
    return parameters


def lay_out(figure) -> None:
    """Lay the figure out once and fix its ticks for drawing. A grid of subplots gets room for what
    each axes draws outside itself (``_grid_parameters``: its tick labels' text measured, no
    tight-bbox pass over every artist), measured again only when the axes' new lengths moved the
    ticks (matplotlib's tight_layout measures once, with the ticks before the layout); another
    figure is laid out by its own layout engine or by tight_layout. No layout engine is left: one
    left on the figure (tight_layout leaves a placeholder) has savefig lay out and draw the whole
    figure once more."""
    engine = figure.get_layout_engine()
    axes_axes = _axes_axes(figure)
    saved = [(axis.major, axis.major.locator, axis.major.formatter) for axis in axes_axes]

    def refix() -> tuple:
        for ticker, locator, formatter in saved:
            ticker.locator, ticker.formatter = locator, formatter
        _fix_ticks(figure)
        return tuple(tuple(axis.major.formatter.seq) for axis in axes_axes)

    labels = refix()
    if engine is not None or not _simple_grid(figure):
        figure.tight_layout() if engine is None else engine.execute(figure)
        refix()   # where the axes' new lengths put them
    else:
        for _ in range(3):
            parameters = _grid_parameters(figure)
            if parameters is None:
                break
            figure.subplots_adjust(**parameters)
            measured, labels = labels, refix()
            if labels == measured:
                break
        _pin_labels(figure)
    figure.set_layout_engine(None)


def inline_picture(figure, alt: str, kind: str | None = None) -> Figure:
    """Return a drawn figure as an inline picture (a data URI) with its text alternative: ``kind``
    'svg' (a line or dot chart: sharp at any size) or 'png' (a scatter of many points is smaller
    so); without one, whichever of the two makes the shorter data URI. The figure is laid out
    once (``lay_out``, or the layout engine it was drawn with) and drawn with its ticks fixed."""
    lay_out(figure)
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
