"""layout: the layout parser, its errors, the built-in card and writing layouts back.

References: OpenCV's cv2.aruco (dictionary sizes, marker corner order as detected), the
international inch of exactly 25.4 mm (International Yard and Pound Agreement, 1959),
and the TOML 1.0 grammar as read by Python's tomllib.
"""

from __future__ import annotations

import copy
import math
import tomllib
from pathlib import Path
from typing import Any

import cv2
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from printcheck.errors import LayoutError
from printcheck.layout import (
    ARUCO_DICTIONARY_SIZES,
    CARD_GAP_MM,
    CARD_MARKER_MM,
    Layout,
    card_layout,
    layout_to_toml,
    parse_layout,
    read_layout,
)

SOURCE = "shop/bed-card.toml"


def _valid() -> dict[str, Any]:
    """A small valid layout as tomllib would return it: 2 x 1 in window, two markers."""
    return {
        "name": "bed-ends",
        "dictionary": "DICT_4X4_50",
        "units": "mm",
        "window": {"x": 0.0, "y": 0.0, "width": 50.8, "height": 25.4},
        "marker": [
            {"id": 0, "corners": [[-16.0, -16.0], [-4.0, -16.0], [-4.0, -4.0], [-16.0, -4.0]]},
            {"id": 7, "corners": [[54.8, -16.0], [66.8, -16.0], [66.8, -4.0], [54.8, -4.0]]},
        ],
        "exclude": [{"points": [[10.0, 0.0], [14.0, 0.0], [14.0, 25.4], [10.0, 25.4]]}],
    }


def _set(data: dict[str, Any], path: tuple[Any, ...], value: Any) -> dict[str, Any]:
    """A copy of ``data`` with the item at ``path`` replaced (``...`` deletes it)."""
    out = copy.deepcopy(data)
    target = out
    for step in path[:-1]:
        target = target[step]
    if value is ...:
        del target[path[-1]]
    else:
        target[path[-1]] = value
    return out


# --------------------------------------------------------------------------- valid input


def test_valid_layout_in_mm() -> None:
    layout = parse_layout(_valid(), source=SOURCE)
    assert layout.name == "bed-ends" and layout.dictionary == "DICT_4X4_50"
    assert layout.window.area_mm2 == pytest.approx(50.8 * 25.4)
    assert layout.marker_ids == (0, 7)
    assert layout.marker(7).corners_mm[0] == (54.8, -16.0)
    assert layout.exclusions[0][2] == (14.0, 25.4)
    assert layout.margin_mm == 5.0  # the documented default for layouts other than the card
    assert layout.source == SOURCE
    with pytest.raises(KeyError):
        layout.marker(3)


def test_name_defaults_to_the_file_stem() -> None:
    data = _set(_valid(), ("name",), ...)
    assert parse_layout(data, source=SOURCE).name == "bed-card"


def test_units_in_scale_by_exactly_25_4() -> None:
    # 1 in = 25.4 mm exactly (International Yard and Pound Agreement, 1959).
    data = {
        "dictionary": "DICT_4X4_50",
        "units": "in",
        "window": {"x": 0.5, "y": -0.25, "width": 2, "height": 1.5, "margin": 0.125},
        "marker": [
            {"id": 3, "corners": [[-0.75, -0.75], [-0.25, -0.75], [-0.25, -0.25], [-0.75, -0.25]]}
        ],
        "exclude": [{"points": [[1, 0], [1.25, 0], [1.25, 1]]}],
    }
    layout = parse_layout(data, source=SOURCE)
    w = layout.window
    assert (w.x_mm, w.y_mm, w.width_mm, w.height_mm) == (
        0.5 * 25.4,
        -0.25 * 25.4,
        2 * 25.4,
        1.5 * 25.4,
    )
    assert w.width_mm == 50.8 and layout.margin_mm == 0.125 * 25.4
    a, b = -0.75 * 25.4, -0.25 * 25.4
    assert layout.marker(3).corners_mm == ((a, a), (b, a), (b, b), (a, b))
    assert a == pytest.approx(-19.05, abs=1e-12)
    assert layout.exclusions[0] == ((25.4, 0.0), (1.25 * 25.4, 0.0), (1.25 * 25.4, 25.4))
    assert layout.units == "in"  # kept for writing the file back in its own units


def test_dictionary_sizes_match_opencv() -> None:
    # Reference: OpenCV's own predefined dictionaries.
    for name, size in ARUCO_DICTIONARY_SIZES.items():
        ref = cv2.aruco.getPredefinedDictionary(getattr(cv2.aruco, name))
        assert ref.bytesList.shape[0] == size, name
    # ... and every predefined dictionary OpenCV has is known under one of its spellings.
    known = {getattr(cv2.aruco, name) for name in ARUCO_DICTIONARY_SIZES}
    for name in dir(cv2.aruco):
        if name.startswith("DICT_") and isinstance(getattr(cv2.aruco, name), int):
            assert getattr(cv2.aruco, name) in known, name


@pytest.mark.parametrize(
    ("dictionary", "last"), [("DICT_4X4_50", 49), ("DICT_APRILTAG_36h11", 586)]
)
def test_highest_id_of_a_dictionary_is_accepted(dictionary: str, last: int) -> None:
    data = _set(_set(_valid(), ("dictionary",), dictionary), ("marker", 1, "id"), last)
    assert parse_layout(data).marker_ids == (0, last)


# --------------------------------------------------------------------------- errors

# (change to the valid layout, key the message must name, problem it must state)
BAD: list[tuple[tuple[Any, ...], Any, str, str]] = [
    (("dictionary",), ..., "dictionary", "missing"),
    (("dictionary",), "DICT_9X9_7", "dictionary", "unknown ArUco dictionary 'DICT_9X9_7'"),
    (("dictionary",), 50, "dictionary", "unknown ArUco dictionary 50"),
    (("units",), "cm", "units", 'must be "mm" or "in", got \'cm\''),
    (("units",), ["mm"], "units", 'must be "mm" or "in"'),
    (("name",), "", "name", "must be a non-empty string"),
    (("name",), 12, "name", "must be a non-empty string, got 12"),
    (("name",), "two\nlines", "name", "must be one line"),
    (("colour",), "blue", "colour", "unknown key"),
    (("window",), ..., "window", "missing or not a table"),
    (("window",), 50.8, "window", "missing or not a table"),
    (("window", "width"), ..., "window.width", "missing"),
    (("window", "height"), ..., "window.height", "missing"),
    (("window", "x"), "0", "window.x", "must be a number, got '0'"),
    (("window", "y"), True, "window.y", "must be a number, got True"),
    (("window", "width"), 0, "window.width", "must be greater than zero, got 0"),
    (("window", "width"), -50.8, "window.width", "must be greater than zero, got -50.8"),
    (("window", "height"), 0.0, "window.height", "must be greater than zero, got 0.0"),
    (("window", "height"), math.nan, "window.height", "must be a finite number, got nan"),
    (("window", "width"), math.inf, "window.width", "must be a finite number, got inf"),
    (("window", "width"), 10**400, "window.width", "must be a finite number"),
    (("window", "x"), 1e300, "window.x", "must be within"),
    (("window", "margin"), -1, "window.margin", "must be zero or more, got -1"),
    (("window", "depth"), 3, "window.depth", "unknown key"),
    (("marker",), ..., "marker", "at least one \\[\\[marker\\]\\]"),
    (("marker",), [], "marker", "at least one \\[\\[marker\\]\\]"),
    (("marker",), {"id": 0}, "marker", "at least one \\[\\[marker\\]\\]"),
    (("marker", 0), 3, "marker #1", "must be a table with id and corners"),
    (("marker", 1, "id"), ..., "marker #2.id", "missing"),
    (("marker", 1, "id"), "7", "marker #2.id", "must be a whole number, got '7'"),
    (("marker", 1, "id"), 7.0, "marker #2.id", "must be a whole number, got 7.0"),
    (("marker", 1, "id"), True, "marker #2.id", "must be a whole number, got True"),
    (("marker", 1, "id"), 50, "marker 50.id", "out of range: DICT_4X4_50 has ids 0 to 49"),
    (("marker", 1, "id"), -1, "marker -1.id", "out of range: DICT_4X4_50 has ids 0 to 49"),
    (("marker", 1, "id"), 0, "marker 0.id", "duplicate id"),
    (("marker", 1, "size"), 12, "marker 7.size", "unknown key"),
    (("marker", 1, "corners"), ..., "marker 7.corners", "missing or not a list of 4 points"),
    (
        ("marker", 1, "corners"),
        [[0, 0], [1, 0], [1, 1]],
        "marker 7.corners",
        "must be 4 points, got 3",
    ),
    (
        ("marker", 1, "corners", 2),
        [1.0],
        "marker 7.corners",
        "must be a point \\[x, y\\], got \\[1.0\\]",
    ),
    (("marker", 1, "corners", 2), ["a", 1], "marker 7.corners", "must be a number, got 'a'"),
    (
        ("marker", 1, "corners"),
        [[0, 0], [12, 0], [24, 0], [36, 0]],
        "marker 7.corners",
        "the 4 corners enclose no area",
    ),
    (
        ("marker", 1, "corners"),
        [[0, 0], [0, 12], [12, 12], [12, 0]],
        "marker 7.corners",
        "corners run anticlockwise",
    ),
    (("exclude",), {"points": []}, "exclude", "must be a list of \\[\\[exclude\\]\\] tables"),
    (("exclude", 0), {"pts": []}, "exclude #1.points", "missing; give a polygon"),
    (("exclude", 0, "points"), [[0, 0], [1, 1]], "exclude #1.points", "must be 3 or more points"),
    (("exclude", 0, "points"), [[0, 0], [1, 1], [2, 2]], "exclude #1.points", "encloses no area"),
    (
        ("exclude", 0, "points"),
        [[60, 0], [70, 0], [70, 10], [60, 10]],
        "exclude #1.points",
        "lies wholly outside the window",
    ),
    (
        ("exclude", 0, "points"),
        [[0, -10], [10, -10], [10, 0], [0, 0]],  # touches the window's top edge only
        "exclude #1.points",
        "lies wholly outside the window",
    ),
]


@pytest.mark.parametrize(
    ("path", "value", "key", "problem"), BAD, ids=[f"{b[2]}-{b[3][:24]}" for b in BAD]
)
def test_errors_name_the_file_the_key_and_the_problem(
    path: tuple[Any, ...], value: Any, key: str, problem: str
) -> None:
    data = _set(_valid(), path, value)
    with pytest.raises(LayoutError, match=problem) as info:
        parse_layout(data, source=SOURCE)
    message = str(info.value)
    assert message.startswith(f"layout {SOURCE}: {key}: "), message
    assert "\n" not in message and "\r" not in message
    assert isinstance(info.value, ValueError)  # LayoutError is also the built-in it resembles


def test_exclusions_that_cover_the_whole_window_are_refused() -> None:
    # two halves that together cover the 50.8 x 25.4 mm window, one reaching past it
    halves = [
        {"points": [[-1.0, -1.0], [30.0, -1.0], [30.0, 30.0], [-1.0, 30.0]]},
        {"points": [[30.0, 0.0], [50.8, 0.0], [50.8, 25.4], [30.0, 25.4]]},
    ]
    with pytest.raises(LayoutError, match="cover the whole window") as info:
        parse_layout(_set(_valid(), ("exclude",), halves), source=SOURCE)
    assert str(info.value).startswith(f"layout {SOURCE}: exclude: ")
    # leave a 2 mm strip uncovered and the layout is fine
    halves[1]["points"] = [[32.0, 0.0], [50.8, 0.0], [50.8, 25.4], [32.0, 25.4]]
    assert len(parse_layout(_set(_valid(), ("exclude",), halves)).exclusions) == 2


def test_top_level_must_be_a_table() -> None:
    with pytest.raises(LayoutError, match="must be a TOML table"):
        parse_layout([1, 2], source=SOURCE)  # type: ignore[arg-type]


def test_an_odd_unknown_key_is_quoted_on_one_line() -> None:
    with pytest.raises(LayoutError, match="unknown key") as info:
        parse_layout(_set(_valid(), ("bad\nkey",), 1), source=SOURCE)
    assert "\n" not in str(info.value) and "'bad\\nkey'" in str(info.value)


def _write(path: Path, text: str | bytes) -> Path:
    if isinstance(text, bytes):
        path.write_bytes(text)
    else:
        path.write_text(text, encoding="utf-8")
    return path


def test_read_layout_errors_name_the_path(tmp_path: Path) -> None:
    cases = [
        (tmp_path / "missing.toml", "file not found"),
        (tmp_path / "folder.toml", "is a folder"),
        (_write(tmp_path / "broken.toml", "name = \n[window\n"), "not valid TOML"),
        (_write(tmp_path / "binary.toml", b"\xff\xfe\x00\x01junk"), "not a text file"),
        (_write(tmp_path / "empty.toml", ""), "dictionary: missing"),
    ]
    (tmp_path / "folder.toml").mkdir()
    for path, problem in cases:
        with pytest.raises(LayoutError, match=problem) as info:
            read_layout(path)
        message = str(info.value)
        assert message.startswith(f"layout {path}: ") and "\n" not in message


def test_read_layout_names_the_file_in_key_errors(tmp_path: Path) -> None:
    text = layout_to_toml(parse_layout(_valid())).replace("id = 7", "id = 99")
    path = _write(tmp_path / "my card.toml", text)
    with pytest.raises(LayoutError, match=r"marker 99\.id: out of range") as info:
        read_layout(path)
    assert str(info.value).startswith(f"layout {path}: ")


# --------------------------------------------------------------------------- the card


def test_card_geometry() -> None:
    card = card_layout()
    w = card.window
    assert (w.x_mm, w.y_mm, w.width_mm, w.height_mm) == (0.0, 0.0, 50.8, 50.8)  # 2 in
    assert card.name == "card-2in" and card.dictionary == "DICT_4X4_50" and card.margin_mm == 0.0
    assert card.marker_ids == (0, 1, 2, 3) and CARD_MARKER_MM == 12.0 and CARD_GAP_MM == 4.0
    for marker in card.markers:
        xs = [p[0] for p in marker.corners_mm]
        ys = [p[1] for p in marker.corners_mm]
        assert max(xs) - min(xs) == pytest.approx(12.0) and max(ys) - min(ys) == pytest.approx(12.0)
        # 4 mm of clear paper between the marker and the window, in x and in y
        gap_x = max(w.x_mm - max(xs), min(xs) - (w.x_mm + w.width_mm))
        gap_y = max(w.y_mm - max(ys), min(ys) - (w.y_mm + w.height_mm))
        assert gap_x == pytest.approx(4.0) and gap_y == pytest.approx(4.0)
    # ids 0..3 sit off the top-left, top-right, bottom-right and bottom-left corners
    centres = [np.mean(m.corners_mm, axis=0) for m in card.markers]
    cx, cy = w.width_mm / 2, w.height_mm / 2
    quadrants = [(bool(c[0] > cx), bool(c[1] > cy)) for c in centres]
    assert quadrants == [(False, False), (True, False), (True, True), (False, True)]


def test_card_corner_order_is_what_opencv_detects() -> None:
    """Draw each card marker upright at its layout position; cv2.aruco must find its corners
    where the layout says, in the same order (the reference for "OpenCV's order")."""
    card = card_layout()
    px_per_mm, pad_mm = 5.0, 22.0
    side_mm = card.window.width_mm + 2 * pad_mm
    n = round(side_mm * px_per_mm)
    page = np.full((n, n), 255, np.uint8)
    dictionary = cv2.aruco.getPredefinedDictionary(cv2.aruco.DICT_4X4_50)
    side_px = round(CARD_MARKER_MM * px_per_mm)
    for marker in card.markers:
        x0, y0 = marker.corners_mm[0]
        c, r = round((x0 + pad_mm) * px_per_mm), round((y0 + pad_mm) * px_per_mm)
        page[r : r + side_px, c : c + side_px] = cv2.aruco.generateImageMarker(
            dictionary, marker.id, side_px
        )
    corners, ids, _ = cv2.aruco.ArucoDetector(dictionary).detectMarkers(page)
    assert ids is not None and sorted(ids.ravel().tolist()) == [0, 1, 2, 3]
    for found, marker_id in zip(corners, ids.ravel(), strict=True):
        expected = (np.array(card.marker(int(marker_id)).corners_mm) + pad_mm) * px_per_mm
        # OpenCV puts the outer corner of a corner pixel at -0.5 px; allow a pixel
        np.testing.assert_allclose(found.reshape(4, 2), expected, atol=1.5)
    # and the order is clockwise on the page (y down): positive shoelace area
    for marker in card.markers:
        (x0, y0), (x1, y1), (x2, y2), _ = marker.corners_mm
        assert (x1 - x0) * (y2 - y1) - (y1 - y0) * (x2 - x1) > 0


@pytest.mark.parametrize(
    ("window_mm", "name"), [(25.4, "card-1in"), (50.8, "card-2in"), (50.0, "card-50mm")]
)
def test_card_names(window_mm: float, name: str) -> None:
    assert card_layout(window_mm).name == name
    assert card_layout(window_mm, name="mine").name == "mine"


@pytest.mark.parametrize("bad", [0.0, -25.4, math.nan])
def test_card_refuses_a_window_with_no_area(bad: float) -> None:
    with pytest.raises(LayoutError, match="window must be greater than zero"):
        card_layout(bad)


# --------------------------------------------------------------------------- writing back


def _same(a: Layout, b: Layout, tol: float = 1e-9) -> None:
    assert (a.name, a.dictionary, a.units, a.marker_ids) == (
        b.name,
        b.dictionary,
        b.units,
        b.marker_ids,
    )
    for f in ("x_mm", "y_mm", "width_mm", "height_mm"):
        assert getattr(a.window, f) == pytest.approx(getattr(b.window, f), abs=tol)
    assert a.margin_mm == pytest.approx(b.margin_mm, abs=tol)
    for ma, mb in zip(a.markers, b.markers, strict=True):
        np.testing.assert_allclose(ma.corners_mm, mb.corners_mm, atol=tol, rtol=0)
    assert len(a.exclusions) == len(b.exclusions)
    for pa, pb in zip(a.exclusions, b.exclusions, strict=True):
        np.testing.assert_allclose(pa, pb, atol=tol, rtol=0)


def test_card_round_trips_through_a_file(tmp_path: Path) -> None:
    card = card_layout()
    path = _write(tmp_path / "card-2in.toml", layout_to_toml(card))
    again = read_layout(path)
    _same(card, again)
    assert again.margin_mm == 0.0 and again.source == str(path)


def test_inch_layout_is_written_back_in_inches() -> None:
    data = {
        "name": 'odd "name" \\ with\tescapes',
        "dictionary": "DICT_5X5_100",
        "units": "in",
        "window": {"x": 0.0, "y": 0.0, "width": 3.0, "height": 1.5},
        "marker": [{"id": 42, "corners": [[-1, -1], [-0.5, -1], [-0.5, -0.5], [-1, -0.5]]}],
    }
    with pytest.raises(LayoutError, match="must be one line"):  # a tab is a control character
        parse_layout(data)
    data["name"] = 'odd "name" \\ with escapes'
    layout = parse_layout(data)
    text = layout_to_toml(layout)
    written = tomllib.loads(text)
    assert written["units"] == "in" and written["window"]["width"] == 3.0
    assert written["marker"][0]["corners"][1] == [-0.5, -1.0]
    assert written["name"] == data["name"]
    _same(layout, parse_layout(written), tol=1e-6 * 25.4)  # 6 decimals of an inch


# --------------------------------------------------------------------------- property-based

_scalars = (
    st.none()
    | st.booleans()
    | st.integers()
    | st.integers(min_value=-(10**30), max_value=10**30)
    | st.floats(allow_nan=True, allow_infinity=True)
    | st.text(max_size=12)
    | st.sampled_from(["mm", "in", "DICT_4X4_50", "DICT_ARUCO_ORIGINAL", "window", "marker"])
)
_keys = st.sampled_from(
    [
        "name",
        "dictionary",
        "units",
        "window",
        "marker",
        "exclude",
        "x",
        "y",
        "width",
        "height",
        "margin",
        "id",
        "corners",
        "points",
    ]
) | st.text(max_size=6)
_toml_like = st.recursive(
    _scalars,
    lambda inner: st.lists(inner, max_size=5) | st.dictionaries(_keys, inner, max_size=6),
    max_leaves=30,
)


@st.composite
def _mutated_layouts(draw: st.DrawFn) -> dict[str, Any]:
    """A valid layout with a few random items replaced, deleted or added, to reach deep."""
    data = _valid()
    for _ in range(draw(st.integers(1, 3))):
        target: Any = data
        path: list[Any] = []
        while isinstance(target, dict | list) and target and draw(st.booleans()):
            key = draw(
                st.sampled_from(sorted(target) if isinstance(target, dict) else range(len(target)))
            )
            path.append(key)
            target = target[key]
        if not path:
            path = [draw(_keys)]
        parent: Any = data
        for step in path[:-1]:
            parent = parent[step]
        if isinstance(parent, dict) and draw(st.booleans()) and path[-1] in parent:
            del parent[path[-1]]
        else:
            parent[path[-1]] = draw(_toml_like)
    return data


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.dictionaries(_keys, _toml_like, max_size=7) | _mutated_layouts())
def test_parser_raises_only_one_line_layout_errors(data: dict[str, Any]) -> None:
    try:
        layout = parse_layout(data, source=SOURCE)
    except LayoutError as exc:
        message = str(exc)
        assert (
            message.startswith(f"layout {SOURCE}: ") and "\n" not in message and "\r" not in message
        )
        return
    # whatever it accepts is usable: finite, positive window, markers in range
    w = layout.window
    assert w.width_mm > 0 and w.height_mm > 0 and math.isfinite(w.area_mm2)
    assert layout.markers and all(
        0 <= m.id < ARUCO_DICTIONARY_SIZES[layout.dictionary] for m in layout.markers
    )
    assert len(set(layout.marker_ids)) == len(layout.markers)
    assert tomllib.loads(layout_to_toml(layout))  # and can be written as valid TOML


_coord = st.integers(-50_000, 50_000).map(lambda v: v / 100)  # -500 .. 500, 0.01 steps
_size = st.integers(1, 50_000).map(lambda v: v / 100)  # 0.01 .. 500


@st.composite
def _valid_layouts(draw: st.DrawFn) -> dict[str, Any]:
    dictionary = draw(st.sampled_from(sorted(ARUCO_DICTIONARY_SIZES)))
    x, y, width, height = draw(_coord), draw(_coord), draw(_size), draw(_size)
    ids = draw(
        st.lists(
            st.integers(0, ARUCO_DICTIONARY_SIZES[dictionary] - 1),
            min_size=1,
            max_size=6,
            unique=True,
        )
    )
    markers = []
    for marker_id in ids:
        mx, my, side = (
            draw(_coord),
            draw(_coord),
            draw(st.integers(50, 5000).map(lambda v: v / 100)),
        )
        turn = draw(st.integers(0, 359))
        c, s = math.cos(math.radians(turn)), math.sin(math.radians(turn))
        square = [(0, 0), (side, 0), (side, side), (0, side)]  # clockwise on a y-down page
        markers.append(
            {
                "id": marker_id,
                "corners": [
                    [round(mx + c * u - s * v, 4), round(my + s * u + c * v, 4)] for u, v in square
                ],
            }
        )
    exclusions = []  # from 30 % in: never over the window's top-left corner
    for _ in range(draw(st.integers(0, 2))):
        ex0 = x + draw(st.integers(30, 90)) / 100 * width
        ey0 = y + draw(st.integers(30, 90)) / 100 * height
        ew, eh = draw(_size), draw(_size)
        exclusions.append(
            {"points": [[ex0, ey0], [ex0 + ew, ey0], [ex0 + ew, ey0 + eh], [ex0, ey0 + eh]]}
        )
    data: dict[str, Any] = {
        "name": draw(
            st.text(
                st.characters(blacklist_categories=("Cc", "Cs")), min_size=1, max_size=20
            ).filter(str.strip)
        ),
        "dictionary": dictionary,
        "units": draw(st.sampled_from(["mm", "in"])),
        "window": {"x": x, "y": y, "width": width, "height": height},
        "marker": markers,
    }
    if draw(st.booleans()):
        data["window"]["margin"] = draw(_size)
    if exclusions:
        data["exclude"] = exclusions
    return data


@settings(max_examples=80, deadline=None)
@given(data=_valid_layouts())
def test_valid_layouts_round_trip(data: dict[str, Any]) -> None:
    layout = parse_layout(data, source=SOURCE)
    again = parse_layout(tomllib.loads(layout_to_toml(layout)), source=SOURCE)
    k = 25.4 if layout.units == "in" else 1.0
    _same(layout, again, tol=1e-6 * k)  # written with 6 decimals in the file's units
