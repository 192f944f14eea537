"""The printable marker card: the built-in layout made physical.

The card is drawn once, as a short list of shapes in the layout frame (mm, x right,
y down: the window's top-left corner is the origin), and that list is written out three
ways: PDF (vector, through matplotlib's PDF backend), PNG (raster at a stated dpi,
through matplotlib's Agg renderer, the dpi recorded in the file) and SVG (vector, written
here, in mm units).  Every format is at exact physical size; the card's layout TOML is
written beside it.

The sheet holds the card (four markers, ``DICT_4X4_50``, the ids of its size
(:data:`printcheck.layout.CARD_SIZES`; 0 to 3 for the 2 in card), around a square
window outlined for cutting out) and below it a strip with a 100 mm scale bar: printed
at 100 % the bar measures 100 mm, which is the one check no photo can make (a card
printed uniformly too small fits its layout perfectly, only at the wrong size).
"""

from __future__ import annotations

import math
import os
import tempfile
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any
from xml.sax.saxutils import escape

import numpy as np

from printcheck.errors import OptionError, ReportError
from printcheck.layout import CARD_GAP_MM, CARD_MARKER_MM, Layout, card_layout, layout_to_toml
from printcheck.units import MM_PER_IN

if TYPE_CHECKING:
    from matplotlib.figure import Figure

__all__ = ["CardSheet", "card_sheet", "render_card", "write_card", "SCALE_BAR_MM"]

SCALE_BAR_MM = 100.0  # length of the scale-check bar
_PAPER_MM = 6.0  # white paper beyond the markers (their quiet zone: 3 modules)
_STRIP_MM = 24.0  # height of the scale-check strip below the card
_SIDE_MM = 10.0  # paper left and right of the scale bar
_LINE_MM = 0.3  # width of the cut line around the window
_MIN_WINDOW_MM = 10.0
_MAX_WINDOW_MM = 200.0
_PT_MM = MM_PER_IN / 72.0  # one typographic point in mm

Point = tuple[float, float]


@dataclass(frozen=True)
class _Fill:
    """Black-filled polygons, drawn as one path (adjacent ones leave no seam)."""

    polygons: tuple[tuple[Point, ...], ...]


@dataclass(frozen=True)
class _Stroke:
    """A black line through ``points``; ``closed`` joins the last to the first."""

    points: tuple[Point, ...]
    width_mm: float
    closed: bool = False
    dash_mm: tuple[float, float] | None = None


@dataclass(frozen=True)
class _Text:
    """One line of text; ``(x, y)`` is on its baseline; ``anchor`` start/middle/end."""

    x: float
    y: float
    text: str
    size_pt: float
    anchor: str = "middle"
    bold: bool = False


_Item = _Fill | _Stroke | _Text


@dataclass(frozen=True)
class CardSheet:
    """The printed sheet: the card's layout and where the page lies in its frame.

    Attributes
    ----------
    layout : Layout
        The card's layout (window at the origin, in mm).
    origin_mm : (float, float)
        Layout-frame (x, y) in mm of the page's top-left corner.
    size_mm : (float, float)
        Page (width, height) in mm.
    """

    layout: Layout
    origin_mm: tuple[float, float]
    size_mm: tuple[float, float]


def _check_window(window_mm: float) -> float:
    w = float(window_mm)
    if not (math.isfinite(w) and _MIN_WINDOW_MM <= w <= _MAX_WINDOW_MM):
        raise OptionError(
            f"card window must be between {_MIN_WINDOW_MM:g} mm and {_MAX_WINDOW_MM:g} mm, "
            f"got {window_mm!r} mm"
        )
    return w


def card_sheet(window_mm: float = 2 * MM_PER_IN) -> CardSheet:
    """The sheet of a card with a square window of side ``window_mm`` (mm)."""
    w = _check_window(window_mm)
    layout = card_layout(w)
    outer = CARD_GAP_MM + CARD_MARKER_MM + _PAPER_MM
    width = max(w + 2 * outer, SCALE_BAR_MM + 2 * _SIDE_MM)
    height = w + 2 * outer + _STRIP_MM
    return CardSheet(layout, (w / 2 - width / 2, -outer), (width, height))


def _marker_cells(dictionary: str, marker_id: int) -> np.ndarray:
    """(n, n) bool: True where the marker is black, border included (OpenCV's bits)."""
    import cv2

    d = cv2.aruco.getPredefinedDictionary(getattr(cv2.aruco, dictionary))
    n = int(d.markerSize) + 2
    return cv2.aruco.generateImageMarker(d, marker_id, n) == 0


def _fit_size(text: str, width_mm: float, size_pt: float) -> float:
    """A font size (pt) at most ``size_pt`` at which ``text`` fits ``width_mm``."""
    est = 0.58 * size_pt * _PT_MM * max(len(text), 1)  # a sans-serif's average advance
    return size_pt if est <= width_mm else max(size_pt * width_mm / est, 2.5)


def _card_items(sheet: CardSheet, layout_name: str) -> list[_Item]:
    lay = sheet.layout
    w = lay.window.width_mm
    items: list[_Item] = []
    # the markers, cell by cell
    cells: list[tuple[Point, ...]] = []
    for m in lay.markers:
        bits = _marker_cells(lay.dictionary, m.id)
        n = bits.shape[0]
        (x0, y0), (x1, _), _, (_, y3) = m.corners_mm
        sx, sy = (x1 - x0) / n, (y3 - y0) / n
        for r, c in zip(*np.nonzero(bits), strict=True):
            ax, ay = x0 + c * sx, y0 + r * sy
            cells.append(((ax, ay), (ax + sx, ay), (ax + sx, ay + sy), (ax, ay + sy)))
    items.append(_Fill(tuple(cells)))
    # the cut line, just outside the window so cutting on it leaves the window whole
    o = _LINE_MM / 2 + 0.05
    items.append(
        _Stroke(((-o, -o), (w + o, -o), (w + o, w + o), (-o, w + o)), _LINE_MM, closed=True)
    )
    size = _fit_size("cut out", w - 4, 9.0)
    items.append(_Text(w / 2, w / 2, "cut out", size, bold=True))
    label = f"window {w:g} mm" + (
        f" ({w / MM_PER_IN:g} in)" if abs(w / MM_PER_IN - round(w / MM_PER_IN, 3)) < 1e-9 else ""
    )
    items.append(_Text(w / 2, w / 2 + size * _PT_MM * 1.6, label, _fit_size(label, w - 4, 6.0)))
    # labels between the markers
    span = w + 2 * CARD_GAP_MM - 4.0
    top = f"printcheck {lay.name}"
    s_top = _fit_size(top, span, 7.0)
    items.append(
        _Text(
            w / 2, -CARD_GAP_MM - CARD_MARKER_MM / 2 + s_top * _PT_MM * 0.35, top, s_top, bold=True
        )
    )
    ids = "-".join((str(lay.markers[0].id), str(lay.markers[-1].id)))
    bottom = f"{lay.dictionary} ids {ids} - layout {layout_name}"
    s_bot = _fit_size(bottom, span, 5.5)
    items.append(
        _Text(w / 2, w + CARD_GAP_MM + CARD_MARKER_MM / 2 + s_bot * _PT_MM * 0.35, bottom, s_bot)
    )
    for m in lay.markers:  # the id in the paper beyond each marker's outer corner
        cx = sum(p[0] for p in m.corners_mm) / 4
        cy = sum(p[1] for p in m.corners_mm) / 4
        dx = -1 if cx < w / 2 else 1
        dy = -1 if cy < w / 2 else 1
        half = CARD_MARKER_MM / 2 + _PAPER_MM / 2
        items.append(_Text(cx + dx * half, cy + dy * half + 0.6, str(m.id), 5.0))
    # the scale-check strip
    x0, y0 = sheet.origin_mm
    width, height = sheet.size_mm
    y_cut = w + CARD_GAP_MM + CARD_MARKER_MM + _PAPER_MM
    items.append(_Stroke(((x0, y_cut), (x0 + width, y_cut)), 0.2, dash_mm=(2.0, 1.5)))
    bx = w / 2 - SCALE_BAR_MM / 2
    by = y_cut + 5.0
    bar: list[tuple[Point, ...]] = [
        ((bx, by), (bx + SCALE_BAR_MM, by), (bx + SCALE_BAR_MM, by + 1.0), (bx, by + 1.0))
    ]
    for k in range(int(SCALE_BAR_MM) + 1):
        length = 2.2 if k % 10 == 0 else 1.4 if k % 5 == 0 else 0.8
        tx = min(max(bx + k - 0.1, bx), bx + SCALE_BAR_MM - 0.2)
        bar.append(
            (
                (tx, by + 1.0),
                (tx + 0.2, by + 1.0),
                (tx + 0.2, by + 1.0 + length),
                (tx, by + 1.0 + length),
            )
        )
    items.append(_Fill(tuple(bar)))
    for k, text in ((0, "0"), (50, "50"), (100, "100 mm")):
        anchor = "start" if k == 0 else "end" if k == 100 else "middle"
        items.append(_Text(bx + k, by + 5.6, text, 6.0, anchor=anchor))
    items.append(
        _Text(
            w / 2,
            by + 9.8,
            "Print at 100% (actual size, no 'fit to page'): this bar must measure 100 mm.",
            6.5,
            bold=True,
        )
    )
    items.append(
        _Text(
            w / 2,
            by + 13.2,
            "If it does not, reprint; then cut this strip off along the dashed line.",
            6.0,
        )
    )
    del height
    return items


# --------------------------------------------------------------------------- matplotlib


def _figure(
    sheet: CardSheet, items: list[_Item], size_mm: tuple[float, float], dpi: float
) -> Figure:
    from matplotlib.figure import Figure
    from matplotlib.patches import PathPatch
    from matplotlib.path import Path as MplPath

    width, height = size_mm
    fig = Figure(figsize=(width / MM_PER_IN, height / MM_PER_IN), dpi=dpi, facecolor="white")
    ax = fig.add_axes((0.0, 0.0, 1.0, 1.0))
    ax.set_axis_off()
    x0, y0 = sheet.origin_mm
    ax.set_xlim(x0, x0 + width)
    ax.set_ylim(y0 + height, y0)  # y down, as in the layout frame
    pt_per_mm = 72.0 / MM_PER_IN
    for item in items:
        if isinstance(item, _Fill):
            verts: list[Point] = []
            codes: list[Any] = []
            for poly in item.polygons:
                verts += [*poly, poly[0]]
                codes += [MplPath.MOVETO] + [MplPath.LINETO] * (len(poly) - 1) + [MplPath.CLOSEPOLY]
            patch = PathPatch(
                MplPath(verts, codes), facecolor="black", edgecolor="none", linewidth=0
            )
            patch.set_snap(False)
            ax.add_patch(patch)
        elif isinstance(item, _Stroke):
            pts = list(item.points) + ([item.points[0]] if item.closed else [])
            line_codes = [MplPath.MOVETO] + [MplPath.LINETO] * (len(pts) - 1)
            patch = PathPatch(
                MplPath(pts, line_codes),
                fill=False,
                edgecolor="black",
                linewidth=item.width_mm * pt_per_mm,
                joinstyle="miter",
                capstyle="butt",
            )
            if item.dash_mm is not None:
                on, off = item.dash_mm
                patch.set_linestyle((0, (on / item.width_mm, off / item.width_mm)))
            patch.set_snap(False)
            ax.add_patch(patch)
        else:
            ax.text(
                item.x,
                item.y,
                item.text,
                fontsize=item.size_pt,
                ha={"start": "left", "end": "right"}.get(item.anchor, "center"),
                va="baseline",
                fontweight="bold" if item.bold else "normal",
                color="black",
                family="DejaVu Sans",
            )
    return fig


def _png_geometry(sheet: CardSheet, dpi: float) -> tuple[int, int, tuple[float, float]]:
    """(rows, cols, size in mm) of the PNG: whole pixels of exactly 25.4 / dpi mm."""
    s = dpi / MM_PER_IN
    cols = int(math.ceil(sheet.size_mm[0] * s - 1e-6))
    rows = int(math.ceil(sheet.size_mm[1] * s - 1e-6))
    return rows, cols, (cols / s, rows / s)


def _raster(sheet: CardSheet, items: list[_Item], dpi: float) -> np.ndarray:
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    rows, cols, size = _png_geometry(sheet, dpi)
    # a hair over the exact size so the canvas rounds to the intended whole pixels
    fig = _figure(sheet, items, (size[0] * (1 + 1e-9), size[1] * (1 + 1e-9)), dpi)
    ax = fig.axes[0]
    x0, y0 = sheet.origin_mm
    ax.set_xlim(x0, x0 + size[0] * (1 + 1e-9))
    ax.set_ylim(y0 + size[1] * (1 + 1e-9), y0)
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    rgba = np.asarray(canvas.buffer_rgba())
    if rgba.shape[:2] != (rows, cols):
        raise RuntimeError(f"card raster came out {rgba.shape[:2]}, expected {(rows, cols)}")
    grey = 0.299 * rgba[..., 0] + 0.587 * rgba[..., 1] + 0.114 * rgba[..., 2]
    return np.clip(np.rint(grey), 0, 255).astype(np.uint8)


def render_card(
    window_mm: float = 2 * MM_PER_IN, *, dpi: float = 600, layout_name: str | None = None
) -> np.ndarray:
    """The card as a grey raster at ``dpi``.

    Pixel (row, col) covers ``x in [x0 + col * 25.4 / dpi, x0 + (col + 1) * 25.4 / dpi)``
    (and likewise y) where ``(x0, y0) = card_sheet(window_mm).origin_mm``.

    Parameters
    ----------
    window_mm : float
        Side of the square window in mm (10 to 200).
    dpi : float
        Dots per inch.
    layout_name : str, optional
        Name of the layout file printed on the card (default: the layout's name).

    Returns
    -------
    (M, N) uint8 ndarray
        White paper 255, black 0, antialiased edges between.
    """
    if not (math.isfinite(dpi) and 50 <= dpi <= 2400):
        raise OptionError(f"card dpi must be between 50 and 2400, got {dpi!r}")
    sheet = card_sheet(window_mm)
    items = _card_items(sheet, layout_name or sheet.layout.name + ".toml")
    return _raster(sheet, items, dpi)


# --------------------------------------------------------------------------- SVG


def _svg(sheet: CardSheet, items: list[_Item]) -> str:
    x0, y0 = sheet.origin_mm
    width, height = sheet.size_mm

    def n(v: float) -> str:
        return f"{v:.4f}".rstrip("0").rstrip(".")

    out = [
        '<?xml version="1.0" encoding="UTF-8"?>',
        f'<svg xmlns="http://www.w3.org/2000/svg" width="{n(width)}mm" height="{n(height)}mm" '
        f'viewBox="{n(x0)} {n(y0)} {n(width)} {n(height)}">',
        f"<title>printcheck {escape(sheet.layout.name)}: print at 100%</title>",
        f'<rect x="{n(x0)}" y="{n(y0)}" width="{n(width)}" height="{n(height)}" fill="white"/>',
    ]
    for item in items:
        if isinstance(item, _Fill):
            d = " ".join(
                "M " + " L ".join(f"{n(x)} {n(y)}" for x, y in poly) + " Z"
                for poly in item.polygons
            )
            out.append(f'<path d="{d}" fill="black" fill-rule="nonzero"/>')
        elif isinstance(item, _Stroke):
            tag = "polygon" if item.closed else "polyline"
            pts = " ".join(f"{n(x)},{n(y)}" for x, y in item.points)
            dash = (
                f' stroke-dasharray="{n(item.dash_mm[0])} {n(item.dash_mm[1])}"'
                if item.dash_mm
                else ""
            )
            out.append(
                f'<{tag} points="{pts}" fill="none" stroke="black" '
                f'stroke-width="{n(item.width_mm)}" '
                f'stroke-linejoin="miter"{dash}/>'
            )
        else:
            weight = ' font-weight="bold"' if item.bold else ""
            out.append(
                f'<text x="{n(item.x)}" y="{n(item.y)}" '
                'font-family="DejaVu Sans, Arial, Helvetica, sans-serif" '
                f'font-size="{n(item.size_pt * _PT_MM)}" text-anchor="{item.anchor}"{weight}>'
                f"{escape(item.text)}</text>"
            )
    out.append("</svg>")
    return "\n".join(out) + "\n"


# --------------------------------------------------------------------------- writing


def _write_atomic(path: Path, write: Callable[[Path], object]) -> None:
    """Write through a temporary file in the same folder, then rename over ``path``."""
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=path.suffix, dir=path.parent)
    os.close(fd)
    try:
        write(Path(tmp))
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def write_card(
    path: str | Path, *, window_mm: float = 2 * MM_PER_IN, dpi: int = 600
) -> tuple[Path, Path]:
    """Write a printable card and its layout TOML beside it.

    Parameters
    ----------
    path : str or Path
        The card file; its suffix picks the format: ``.pdf`` (also when there is no
        suffix: ``.pdf`` is added), ``.png`` or ``.svg``.
    window_mm : float
        Side of the square window in mm (10 to 200; default 2 in).
    dpi : int
        Resolution of a PNG (recorded in the file); PDF and SVG are vector.

    Returns
    -------
    (Path, Path)
        The card file and the layout file (same folder and stem, ``.toml``).

    Raises
    ------
    OptionError
        For an unknown suffix or a window or dpi out of range.
    ReportError
        When a file cannot be written.
    """
    out = Path(path)
    if out.suffix == "":
        out = out.with_suffix(".pdf")
    fmt = out.suffix.lower()
    if fmt not in (".pdf", ".png", ".svg"):
        raise OptionError(f"card file must end in .pdf, .png or .svg, got {str(path)!r}")
    if not (50 <= dpi <= 2400):
        raise OptionError(f"card dpi must be between 50 and 2400, got {dpi!r}")
    sheet = card_sheet(window_mm)
    layout_path = out.with_suffix(".toml")
    items = _card_items(sheet, layout_path.name)

    def write_pdf(p: Path) -> None:
        fig = _figure(sheet, items, sheet.size_mm, 72.0)
        fig.savefig(
            p,
            format="pdf",
            metadata={
                "Title": f"printcheck {sheet.layout.name}",
                "Creator": "printcheck",
                "CreationDate": None,
            },
        )

    def write_png(p: Path) -> None:
        from PIL import Image

        Image.fromarray(_raster(sheet, items, float(dpi))).save(p, format="PNG", dpi=(dpi, dpi))

    def write_svg(p: Path) -> None:
        p.write_text(_svg(sheet, items), encoding="utf-8")

    writer = {".pdf": write_pdf, ".png": write_png, ".svg": write_svg}[fmt]
    try:
        if not out.parent.is_dir():
            raise ReportError(
                f"card {out}: folder {out.parent} does not exist; create it or choose another --out"
            )
        _write_atomic(out, writer)
        _write_atomic(
            layout_path, lambda p: p.write_text(layout_to_toml(sheet.layout), encoding="utf-8")
        )
    except OSError as exc:
        if isinstance(exc, ReportError):
            raise
        raise ReportError(
            f"card {out}: cannot be written ({exc.strerror or exc}); choose another --out"
        ) from None
    return out, layout_path
