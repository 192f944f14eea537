"""Layouts: where the fiducial markers sit relative to the analysed window.

A layout is read from the TOML format of docs/formats.md ("Layout").  Whatever the
file's ``units``, the :class:`Layout` holds every coordinate in millimetres in the layout
frame (x right, y down).

Keys beyond the contract (all optional, added by printcheck):

``[window] margin``
    How far past the window edge the surface shows in photos, in the layout's units.
    Spots that straddle the window edge are measured whole within this margin.  The
    built-in card hides the surface beyond its cut-out, so its margin is 0; for other
    layouts it defaults to 5 mm.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from printcheck.errors import LayoutError
from printcheck.tomlfile import read_toml_as, shown_key
from printcheck.units import MM_PER_IN

__all__ = [
    "ARUCO_DICTIONARY_SIZES",
    "Marker",
    "Window",
    "Layout",
    "parse_layout",
    "read_layout",
    "card_layout",
    "CardSize",
    "CARD_SIZES",
    "CARD_DICTIONARY",
    "OTHER_CARD_IDS",
    "card_ids",
    "card_shown",
    "card_of_layout",
    "layout_to_toml",
    "CARD_MARKER_MM",
    "CARD_GAP_MM",
    "MAX_COORDINATE_MM",
]

# Number of markers in each of OpenCV's predefined ArUco dictionaries
# (cv2.aruco.getPredefinedDictionary(...).bytesList.shape[0]; checked in the tests).
ARUCO_DICTIONARY_SIZES: dict[str, int] = {
    "DICT_4X4_50": 50,
    "DICT_4X4_100": 100,
    "DICT_4X4_250": 250,
    "DICT_4X4_1000": 1000,
    "DICT_5X5_50": 50,
    "DICT_5X5_100": 100,
    "DICT_5X5_250": 250,
    "DICT_5X5_1000": 1000,
    "DICT_6X6_50": 50,
    "DICT_6X6_100": 100,
    "DICT_6X6_250": 250,
    "DICT_6X6_1000": 1000,
    "DICT_7X7_50": 50,
    "DICT_7X7_100": 100,
    "DICT_7X7_250": 250,
    "DICT_7X7_1000": 1000,
    "DICT_ARUCO_ORIGINAL": 1024,
    "DICT_APRILTAG_16h5": 30,
    "DICT_APRILTAG_25h9": 35,
    "DICT_APRILTAG_36h10": 2320,
    "DICT_APRILTAG_36h11": 587,
    "DICT_ARUCO_MIP_36h12": 250,
}

DEFAULT_MARGIN_MM = 5.0
MAX_COORDINATE_MM = 1e6  # 1 km: any coordinate beyond is a typo, and keeps areas finite
CARD_MARKER_MM = 12.0  # side of each printed card marker
CARD_GAP_MM = 4.0  # clear paper between the window edge and the markers

Point = tuple[float, float]


@dataclass(frozen=True)
class CardSize:
    """A built-in card size and the marker ids (``DICT_4X4_50``) that identify it.

    Attributes
    ----------
    window_mm : float
        Side of the card's square window in mm.
    words : str
        How messages name it ("2 in", "50 mm").
    ids : (int, int, int, int)
        The markers' ids: top-left, top-right, bottom-right, bottom-left.
    option : str
        The ``printcheck card --window`` value that prints it.
    """

    window_mm: float
    words: str
    ids: tuple[int, int, int, int]
    option: str


#: Each built-in card size has its own four marker ids, so that a photo says which card
#: it shows (docs/formats.md, "Card marker ids").  The 2 in card keeps ids 0-3, which the
#: cards printed before and the sample photos carry.
CARD_SIZES: tuple[CardSize, ...] = (
    CardSize(50.8, "2 in", (0, 1, 2, 3), "2in"),
    CardSize(25.4, "1 in", (4, 5, 6, 7), "1in"),
    CardSize(76.2, "3 in", (8, 9, 10, 11), "3in"),
    CardSize(101.6, "4 in", (12, 13, 14, 15), "4in"),
    CardSize(25.0, "25 mm", (16, 17, 18, 19), "25mm"),
    CardSize(50.0, "50 mm", (20, 21, 22, 23), "50mm"),
    CardSize(75.0, "75 mm", (24, 25, 26, 27), "75mm"),
    CardSize(100.0, "100 mm", (28, 29, 30, 31), "100mm"),
)

#: The ids of a card whose window is none of :data:`CARD_SIZES` (they share one set).
OTHER_CARD_IDS: tuple[int, int, int, int] = (32, 33, 34, 35)

CARD_DICTIONARY = "DICT_4X4_50"
_SAME_SIZE_MM = 1e-6


def _card_size(window_mm: float) -> CardSize | None:
    for size in CARD_SIZES:
        if abs(size.window_mm - window_mm) <= _SAME_SIZE_MM:
            return size
    return None


def card_ids(window_mm: float) -> tuple[int, int, int, int]:
    """The marker ids of the built-in card with a ``window_mm`` window.

    Examples
    --------
    >>> card_ids(50.8), card_ids(50.0), card_ids(30.0)
    ((0, 1, 2, 3), (20, 21, 22, 23), (32, 33, 34, 35))
    """
    size = _card_size(float(window_mm))
    return size.ids if size is not None else OTHER_CARD_IDS


def card_shown(ids: Iterable[int]) -> CardSize | None:
    """The built-in card whose markers are ``ids`` (ids found in a photo), or None.

    The card of :data:`OTHER_CARD_IDS` is a :class:`CardSize` with ``window_mm`` 0 and
    ``words`` "a size without ids of its own".  When ids of several cards are found, the
    card with the most of them wins (None on a tie).
    """
    found = set(ids)
    sizes = (*CARD_SIZES, CardSize(0.0, "a size without ids of its own", OTHER_CARD_IDS, ""))
    scored = sorted(((len(found & set(c.ids)), c) for c in sizes), key=lambda t: -t[0])
    if not scored or scored[0][0] == 0 or (len(scored) > 1 and scored[1][0] == scored[0][0]):
        return None
    return scored[0][1]


def card_of_layout(layout: Layout) -> CardSize | None:
    """The built-in card size ``layout`` is (its markers and window exactly), or None."""
    w = layout.window
    size = _card_size(w.width_mm)
    if size is None or layout.dictionary != CARD_DICTIONARY:
        return None
    card = card_layout(size.window_mm)
    if layout.marker_ids != card.marker_ids:
        return None
    mine = [p for m in layout.markers for c in m.corners_mm for p in c]
    theirs = [p for m in card.markers for c in m.corners_mm for p in c]
    here = (w.x_mm, w.y_mm, w.width_mm, w.height_mm, *mine)
    there = (0.0, 0.0, size.window_mm, size.window_mm, *theirs)
    if any(abs(a - b) > 1e-3 for a, b in zip(here, there, strict=True)):
        return None  # a layout file may round to a micrometre
    return size


@dataclass(frozen=True)
class Marker:
    """One fiducial marker: its id and its four corners in mm, in OpenCV's order."""

    id: int
    corners_mm: tuple[Point, Point, Point, Point]


@dataclass(frozen=True)
class Window:
    """The analysed rectangle in the layout frame, in mm."""

    x_mm: float
    y_mm: float
    width_mm: float
    height_mm: float

    @property
    def area_mm2(self) -> float:
        return self.width_mm * self.height_mm


@dataclass(frozen=True)
class Layout:
    """A validated layout, every coordinate in mm.

    Attributes
    ----------
    name : str
    dictionary : str
        Name of one of OpenCV's predefined ArUco dictionaries, e.g. ``"DICT_4X4_50"``.
    units : {"mm", "in"}
        The units the file was written in (kept for writing it back).
    window : Window
    markers : tuple of Marker
    exclusions : tuple of polygons, each a tuple of (x, y) points in mm
    margin_mm : float
        How far past the window the surface shows (see module docstring).
    source : str
        Where the layout came from (a file path or ``"built-in"``), for messages.
    """

    name: str
    dictionary: str
    units: str
    window: Window
    markers: tuple[Marker, ...]
    exclusions: tuple[tuple[Point, ...], ...] = ()
    margin_mm: float = DEFAULT_MARGIN_MM
    source: str = "built-in"

    @property
    def marker_ids(self) -> tuple[int, ...]:
        return tuple(m.id for m in self.markers)

    def marker(self, marker_id: int) -> Marker:
        for m in self.markers:
            if m.id == marker_id:
                return m
        raise KeyError(marker_id)


# --------------------------------------------------------------------------- parsing


def _fail(source: str, key: str, problem: str) -> LayoutError:
    return LayoutError(f"layout {source}: {key}: {problem}")


def _number(value: Any, source: str, key: str, scale: float = 1.0) -> float:
    """``value`` times ``scale`` (mm per file unit), refusing what is not a sane length."""
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise _fail(source, key, f"must be a number, got {value!r}")
    try:
        number = float(value) * scale
    except OverflowError:  # a TOML integer too large for a float
        number = math.inf
    if not math.isfinite(number):
        raise _fail(source, key, f"must be a finite number, got {value!r}")
    if abs(number) > MAX_COORDINATE_MM:
        raise _fail(
            source, key, f"must be within {MAX_COORDINATE_MM:g} mm of the origin, got {value!r}"
        )
    return number


def _point(value: Any, source: str, key: str, scale: float) -> Point:
    if not isinstance(value, list | tuple) or len(value) != 2:
        raise _fail(source, key, f"must be a point [x, y], got {value!r}")
    return (
        _number(value[0], source, key, scale),
        _number(value[1], source, key, scale),
    )


def _polygon_area(points: tuple[Point, ...]) -> float:
    area = 0.0
    for (x0, y0), (x1, y1) in zip(points, points[1:] + points[:1], strict=True):
        area += x0 * y1 - x1 * y0
    return area / 2.0


def _inside(x: float, y: float, polygon: tuple[Point, ...]) -> bool:
    """Even-odd rule: is (x, y) inside ``polygon``."""
    inside = False
    for (x0, y0), (x1, y1) in zip(polygon, polygon[1:] + polygon[:1], strict=True):
        if (y0 > y) != (y1 > y) and x < x0 + (y - y0) * (x1 - x0) / (y1 - y0):
            inside = not inside
    return inside


def _covers(window: Window, polygons: list[tuple[Point, ...]]) -> bool:
    """True when every sample point of ``window`` (0.5 mm apart, at most 200 a side) lies in
    one of ``polygons``.  Stops at the first uncovered point, so it is quick for the usual
    small exclusions."""
    nx = min(200, max(2, math.ceil(window.width_mm / 0.5)))
    ny = min(200, max(2, math.ceil(window.height_mm / 0.5)))
    for i in range(nx):
        x = window.x_mm + (i + 0.5) * window.width_mm / nx
        for j in range(ny):
            y = window.y_mm + (j + 0.5) * window.height_mm / ny
            if not any(_inside(x, y, poly) for poly in polygons):
                return False
    return True


def parse_layout(data: dict[str, Any], *, source: str = "<memory>") -> Layout:
    """Validate a layout read from TOML and convert it to millimetres.

    Parameters
    ----------
    data : dict
        The parsed TOML document (the format is in docs/formats.md, "Layout").
    source : str
        Name used in error messages (usually the file path).

    Raises
    ------
    LayoutError
        Naming the source, the key and the problem, e.g.
        ``layout card.toml: marker 7: corners must be 4 points, got 3``.
    """
    if not isinstance(data, dict):
        raise _fail(source, "(top level)", "must be a TOML table")
    known = {"name", "dictionary", "units", "window", "marker", "exclude"}
    unknown = sorted(set(data) - known)
    if unknown:
        raise _fail(source, shown_key(unknown[0]), f"unknown key; expected one of {sorted(known)}")
    name = _name(data, source)
    dictionary = _dictionary(data, source)
    units = data.get("units", "mm")
    if units not in ("mm", "in"):
        raise _fail(source, "units", f'must be "mm" or "in", got {units!r}')
    scale = MM_PER_IN if units == "in" else 1.0
    window, margin = _window(data.get("window"), source, scale)
    markers = _markers(data.get("marker"), source, dictionary, scale)
    exclusions = _exclusions(data.get("exclude", []), source, window, scale)
    return Layout(
        name=name,
        dictionary=dictionary,
        units=units,
        window=window,
        markers=markers,
        exclusions=exclusions,
        margin_mm=margin,
        source=source,
    )


def _name(data: dict[str, Any], source: str) -> str:
    name = data.get("name", Path(source).stem if source != "<memory>" else "layout")
    if not isinstance(name, str) or not name.strip():
        raise _fail(source, "name", f"must be a non-empty string, got {name!r}")
    if any(ord(ch) < 32 or ord(ch) == 127 for ch in name):
        raise _fail(source, "name", f"must be one line without control characters, got {name!r}")
    return name.strip()


def _dictionary(data: dict[str, Any], source: str) -> str:
    if "dictionary" not in data:
        raise _fail(
            source, "dictionary", "missing; name an OpenCV ArUco dictionary such as DICT_4X4_50"
        )
    dictionary = data["dictionary"]
    if not isinstance(dictionary, str) or dictionary not in ARUCO_DICTIONARY_SIZES:
        raise _fail(
            source,
            "dictionary",
            f"unknown ArUco dictionary {dictionary!r}; use one of OpenCV's predefined "
            f"names, e.g. DICT_4X4_50, DICT_5X5_100, DICT_APRILTAG_36h11",
        )
    return dictionary


def _window(win: Any, source: str, scale: float) -> tuple[Window, float]:
    """The ``[window]`` table: the window in mm and its margin in mm."""
    if not isinstance(win, dict):
        raise _fail(source, "window", "missing or not a table; give x, y, width, height")
    for key in ("x", "y", "width", "height"):
        if key not in win:
            raise _fail(source, f"window.{key}", "missing")
    extra = sorted(set(win) - {"x", "y", "width", "height", "margin"})
    if extra:
        raise _fail(source, f"window.{shown_key(extra[0])}", "unknown key")
    x, y, width, height = (
        _number(win[key], source, f"window.{key}", scale) for key in ("x", "y", "width", "height")
    )
    for key, value in (("width", width), ("height", height)):
        if value <= 0:
            raise _fail(source, f"window.{key}", f"must be greater than zero, got {win[key]!r}")
    margin = DEFAULT_MARGIN_MM
    if "margin" in win:
        margin = _number(win["margin"], source, "window.margin", scale)
        if margin < 0:
            raise _fail(source, "window.margin", f"must be zero or more, got {win['margin']!r}")
    return Window(x, y, width, height), margin


def _markers(raw_markers: Any, source: str, dictionary: str, scale: float) -> tuple[Marker, ...]:
    """The ``[[marker]]`` tables: ids within the dictionary, each once, 4 clockwise corners."""
    if not isinstance(raw_markers, list) or not raw_markers:
        raise _fail(source, "marker", "at least one [[marker]] with id and corners is needed")
    size = ARUCO_DICTIONARY_SIZES[dictionary]
    markers: list[Marker] = []
    for index, raw in enumerate(raw_markers):
        where = f"marker #{index + 1}"
        if not isinstance(raw, dict):
            raise _fail(source, where, "must be a table with id and corners")
        if "id" not in raw:
            raise _fail(source, f"{where}.id", "missing")
        mid = raw["id"]
        if isinstance(mid, bool) or not isinstance(mid, int):
            raise _fail(source, f"{where}.id", f"must be a whole number, got {mid!r}")
        where = f"marker {mid}"
        if not 0 <= mid < size:
            raise _fail(
                source, f"{where}.id", f"out of range: {dictionary} has ids 0 to {size - 1}"
            )
        if any(m.id == mid for m in markers):
            raise _fail(source, f"{where}.id", "duplicate id; each marker id may appear once")
        extra = sorted(set(raw) - {"id", "corners"})
        if extra:
            raise _fail(source, f"{where}.{shown_key(extra[0])}", "unknown key")
        markers.append(Marker(mid, _corners(raw.get("corners"), source, where, scale)))
    return tuple(markers)


def _corners(
    corners: Any, source: str, where: str, scale: float
) -> tuple[Point, Point, Point, Point]:
    """A marker's 4 corners in mm, clockwise on the page (OpenCV's order)."""
    if not isinstance(corners, list):
        raise _fail(source, f"{where}.corners", "missing or not a list of 4 points")
    if len(corners) != 4:
        raise _fail(source, f"{where}.corners", f"must be 4 points, got {len(corners)}")
    a, b, c, d = (_point(p, source, f"{where}.corners", scale) for p in corners)
    area = _polygon_area((a, b, c, d))
    if abs(area) < 1e-6:
        raise _fail(source, f"{where}.corners", "the 4 corners enclose no area")
    if area < 0:
        raise _fail(
            source,
            f"{where}.corners",
            "corners run anticlockwise on the page; give them as top-left, top-right, "
            "bottom-right, bottom-left",
        )
    return (a, b, c, d)


def _exclusions(
    raw_ex: Any, source: str, window: Window, scale: float
) -> tuple[tuple[Point, ...], ...]:
    """The ``[[exclude]]`` polygons in mm: each overlaps the window, together they do not
    cover it."""
    if not isinstance(raw_ex, list):
        raise _fail(source, "exclude", "must be a list of [[exclude]] tables")
    exclusions: list[tuple[Point, ...]] = []
    for index, raw in enumerate(raw_ex):
        where = f"exclude #{index + 1}"
        if not isinstance(raw, dict) or "points" not in raw:
            raise _fail(source, f"{where}.points", "missing; give a polygon of 3 or more points")
        points = raw["points"]
        if not isinstance(points, list) or len(points) < 3:
            raise _fail(source, f"{where}.points", f"must be 3 or more points, got {points!r}")
        pts = tuple(_point(p, source, f"{where}.points", scale) for p in points)
        if abs(_polygon_area(pts)) < 1e-9:
            raise _fail(source, f"{where}.points", "the polygon encloses no area")
        xs = [p[0] for p in pts]
        ys = [p[1] for p in pts]
        w = window
        if (
            max(xs) <= w.x_mm
            or min(xs) >= w.x_mm + w.width_mm
            or max(ys) <= w.y_mm
            or min(ys) >= w.y_mm + w.height_mm
        ):
            raise _fail(source, f"{where}.points", "the polygon lies wholly outside the window")
        exclusions.append(pts)
    if exclusions and _covers(window, exclusions):
        raise _fail(
            source, "exclude", "the exclusions cover the whole window; nothing is left to measure"
        )
    return tuple(exclusions)


def read_layout(path: str | Path) -> Layout:
    """Read and validate a layout TOML file (LayoutError: missing, unreadable, not TOML, or
    not a valid layout)."""
    hint = "; give the path of a layout .toml"
    return read_toml_as(path, parse_layout, kind="layout", error=LayoutError, missing_hint=hint)


# --------------------------------------------------------------------------- the card


def card_layout(window_mm: float = 2 * MM_PER_IN, *, name: str | None = None) -> Layout:
    """The built-in card: a square window with one 12 mm marker off each corner.

    Four ``DICT_4X4_50`` markers sit top-left, top-right, bottom-right and bottom-left of
    the window, ``CARD_GAP_MM`` clear of it; their ids are the card size's own
    (:func:`card_ids`: 0 to 3 for the 2 in card), so a photo says which card it shows.
    The card hides the surface beyond its cut-out, so ``margin_mm`` is 0.

    Parameters
    ----------
    window_mm : float
        Side of the square window in mm (default 2 in = 50.8 mm).
    """
    if not window_mm > 0:
        raise LayoutError(
            f"layout built-in card: window must be greater than zero, got {window_mm!r}"
        )
    w = float(window_mm)
    g, s = CARD_GAP_MM, CARD_MARKER_MM
    lo, hi = -g - s, w + g  # top-left corner of the markers before/after the window

    def square(x: float, y: float) -> tuple[Point, Point, Point, Point]:
        return ((x, y), (x + s, y), (x + s, y + s), (x, y + s))

    tl, tr, br, bl = card_ids(w)
    markers = (
        Marker(tl, square(lo, lo)),
        Marker(tr, square(hi, lo)),
        Marker(br, square(hi, hi)),
        Marker(bl, square(lo, hi)),
    )
    if name is None:
        inches = w / MM_PER_IN
        name = f"card-{inches:g}in" if abs(inches - round(inches, 3)) < 1e-9 else f"card-{w:g}mm"
    return Layout(
        name=name,
        dictionary=CARD_DICTIONARY,
        units="mm",
        window=Window(0.0, 0.0, w, w),
        markers=markers,
        exclusions=(),
        margin_mm=0.0,
        source="built-in",
    )


def layout_to_toml(layout: Layout) -> str:
    """Write ``layout`` as TOML text in its own units (round-trips through read_layout)."""
    k = MM_PER_IN if layout.units == "in" else 1.0

    def f(v: float) -> str:
        return repr(round(v / k, 6))

    def pt(p: Point) -> str:
        return f"[{f(p[0])}, {f(p[1])}]"

    w = layout.window
    lines = [
        f"name = {_toml_str(layout.name)}",
        f"dictionary = {_toml_str(layout.dictionary)}",
        f"units = {_toml_str(layout.units)}",
        "",
        "[window]",
        f"x = {f(w.x_mm)}",
        f"y = {f(w.y_mm)}",
        f"width = {f(w.width_mm)}",
        f"height = {f(w.height_mm)}",
        f"margin = {f(layout.margin_mm)}",
    ]
    for m in layout.markers:
        lines += [
            "",
            "[[marker]]",
            f"id = {m.id}",
            "corners = [" + ", ".join(pt(c) for c in m.corners_mm) + "]",
        ]
    for poly in layout.exclusions:
        lines += ["", "[[exclude]]", "points = [" + ", ".join(pt(p) for p in poly) + "]"]
    return "\n".join(lines) + "\n"


def _toml_str(text: str) -> str:
    out = []
    for ch in text:
        if ch in ('"', "\\"):
            out.append("\\" + ch)
        elif ord(ch) < 32 or ord(ch) == 127:  # TOML 1.0 basic strings forbid control characters
            out.append(f"\\u{ord(ch):04x}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'
