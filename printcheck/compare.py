"""Compare: where contacts appeared and disappeared between two prints of one place.

Every measurement rectifies its window into the layout frame (millimetres, see
:class:`printcheck.frame.Frame`), so two prints photographed with the same card (or
layout) at the same station share that frame: their contact maps can be laid one on the
other pixel for pixel, whatever the camera did.

A **contact map** is what a measurement keeps of its print for this: the window at the
rectified resolution, each pixel one of three states (not analysed, bare, contact).
``batch`` keeps one per photo in the output folder, as a small 2-bit PNG named by the
photo's sha256 in the folder ``.contacts`` (:data:`CONTACTS_FOLDER`), the frame's
geometry in the PNG's text chunks (docs/formats.md, "Contact maps").  Photos are never
touched.

:func:`compare_contacts` puts the earlier map on the later one's window at the coarser of
the two resolutions and gives the appeared, disappeared and kept contact area, in mm² and
as a share of the area both prints show, over the window and per counting cell;
:func:`draw_change` draws it (appeared dark blue, disappeared vermillion, kept light
grey: two hues a colour-blind reader tells apart, Okabe and Ito's "Color Universal
Design" pair, at grey levels far apart so the image also prints in grey; the key is
text beside the image, never in it).  :func:`change_view` is what the report calls.

Arrays are indexed (row, col); physical points are (x, y) mm in the layout frame.
"""

from __future__ import annotations

import dataclasses
import io
import math
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from printcheck.cells import Grid, cell_sums, in_window
from printcheck.errors import ReportError
from printcheck.frame import Frame
from printcheck.guidance import cell_label
from printcheck.layout import Window

if TYPE_CHECKING:
    from printcheck.records import PassSummary
    from printcheck.result import Result

__all__ = [
    "APPEARED_RGB",
    "CONTACTS_FOLDER",
    "DISAPPEARED_RGB",
    "KEPT_RGB",
    "CellChange",
    "Change",
    "LaidChange",
    "ContactMap",
    "change_view",
    "compare_contacts",
    "contact_map",
    "contact_map_of",
    "contacts_name",
    "decode_contacts",
    "draw_change",
    "encode_contacts",
    "place_contacts",
    "read_contacts",
    "same_place",
]

#: The folder of the output folder that holds the contact maps (hidden: a later batch
#: with ``--out`` in the photo folder must not take it for a pass's subfolder).
CONTACTS_FOLDER = ".contacts"

#: Pixel states of a contact map.
UNSEEN, BARE, CONTACT = 0, 1, 2

#: Colours of the change image (RGB).  Blue and vermillion are a pair of Okabe and Ito's
#: colour-universal-design palette (blue darkened); grey levels (ITU-R BT.601 luma)
#: 53, 119 and 200 on white 255, so the image reads printed in grey too.
APPEARED_RGB = (0, 66, 122)
DISAPPEARED_RGB = (213, 94, 0)
KEPT_RGB = (200, 200, 200)
_BACKGROUND_RGB = (255, 255, 255)
_UNSEEN_RGB = (238, 238, 238)
_HATCH_RGB = (170, 170, 170)
_GRID_RGB = (90, 90, 90)

_FORMAT = "printcheck-contacts/1"
_MAX_IMAGE_SIDE = 1400  # px: the change image is reduced past this
_SAME_WINDOW_MM = 0.5  # two windows further apart than this are not one place
_MIN_TOLERANCE_PX = 1.5  # a contact's edge may fall a pixel either way in either photo


@dataclass(frozen=True, eq=False)
class ContactMap:
    """The contacts of one print over its window, in the layout frame.

    Attributes
    ----------
    state : (M, N) uint8 ndarray
        0 not analysed (outside the window, excluded or unseen), 1 bare, 2 contact.
    px_per_mm : float
        Pixels per mm of ``state``.
    origin_mm : (float, float)
        Layout (x, y) in mm of the top-left corner of pixel (0, 0).
    window : Window
        The analysed window (mm, layout frame).
    cell_mm : float
        Side of the counting cell the print was measured with, in mm.
    station, pass_key : str or None
        Where batch placed the photo: its station within its pass and what groups the
        photos of its pass (None: the pass's only photo; a pass of its own).
    """

    state: np.ndarray
    px_per_mm: float
    origin_mm: tuple[float, float]
    window: Window
    cell_mm: float
    station: str | None = None
    pass_key: str | None = None

    @property
    def frame(self) -> Frame:
        """The map's geometry as a :class:`~printcheck.frame.Frame`."""
        return Frame(self.px_per_mm, self.origin_mm, self.state.shape[:2], self.window)


class _Shares:
    """The areas of a change as percentages of the area both prints show (0 when none)."""

    compared_mm2: float
    appeared_mm2: float
    disappeared_mm2: float
    kept_mm2: float

    @property
    def appeared_percent(self) -> float:
        """Appeared area as a percentage of the compared area."""
        return _percent(self.appeared_mm2, self.compared_mm2)

    @property
    def disappeared_percent(self) -> float:
        """Disappeared area as a percentage of the compared area."""
        return _percent(self.disappeared_mm2, self.compared_mm2)

    @property
    def kept_percent(self) -> float:
        """Kept contact area as a percentage of the compared area."""
        return _percent(self.kept_mm2, self.compared_mm2)


@dataclass(frozen=True)
class CellChange(_Shares):
    """The change in one counting cell; areas in mm² of what both prints show there."""

    row: int
    col: int
    label: str
    compared_mm2: float
    appeared_mm2: float
    disappeared_mm2: float
    kept_mm2: float


@dataclass(frozen=True, eq=False)
class Change(_Shares):
    """Where contacts appeared and disappeared between an earlier and a later print.

    Attributes
    ----------
    frame : Frame
        Geometry of the arrays below (the later print's window at the coarser of the two
        resolutions).
    compared : (M, N) bool ndarray
        Pixels both prints show inside the window.
    appeared, disappeared, kept : (M, N) bool ndarray
        Contact of the later print with none of the earlier one near it, of the earlier
        with none of the later near it, and every other contact of either (within
        ``compared``; see :func:`compare_contacts`).
    compared_mm2, appeared_mm2, disappeared_mm2, kept_mm2 : float
        Their areas in mm².
    appeared_centroid_mm, disappeared_centroid_mm : (float, float) or None
        Layout (x, y) mm of the area's centroid; None when there is none.
    cells : tuple of CellChange, row-major
        The same per counting cell (the measurement's grid).
    cell_mm : float
        Side of the counting cell in mm.
    """

    frame: Frame
    compared: np.ndarray
    appeared: np.ndarray
    disappeared: np.ndarray
    kept: np.ndarray
    compared_mm2: float
    appeared_mm2: float
    disappeared_mm2: float
    kept_mm2: float
    appeared_centroid_mm: tuple[float, float] | None
    disappeared_centroid_mm: tuple[float, float] | None
    cells: tuple[CellChange, ...]
    cell_mm: float


def _percent(part: float, whole: float) -> float:
    return 100.0 * part / whole if whole > 0 else 0.0


# --------------------------------------------------------------------------- the map


def contact_map(
    contact: np.ndarray, analysed: np.ndarray, frame: Frame, *, cell_mm: float
) -> ContactMap:
    """The contact map of a measured print, cropped to its window.

    Parameters
    ----------
    contact : (M, N) bool ndarray
        The counted contacts (``Measurement.labels > 0``), in ``frame``.
    analysed : (M, N) bool ndarray
        The analysed area (``Rectified.analysed``), in ``frame``.
    frame : Frame
        Geometry of both arrays.
    cell_mm : float
        Side of the counting cell in mm.

    Returns
    -------
    ContactMap
        Not analysed 0, bare 1, contact 2, over the pixels whose centres lie in the
        window.  The inputs are not modified.
    """
    contact = np.asarray(contact, dtype=bool)
    analysed = np.asarray(analysed, dtype=bool)
    if contact.shape != analysed.shape or contact.shape != tuple(frame.shape):
        raise ValueError(
            f"contact {contact.shape} and analysed {analysed.shape} must both have the "
            f"frame's shape {tuple(frame.shape)}"
        )
    seen = in_window(frame, analysed)
    state = np.where(seen, np.where(contact, CONTACT, BARE), UNSEEN).astype(np.uint8)
    rs, cs = frame.window_slices()
    s = float(frame.px_per_mm)
    origin = (
        frame.origin_mm[0] + (cs.start or 0) / s,
        frame.origin_mm[1] + (rs.start or 0) / s,
    )
    return ContactMap(state[rs, cs].copy(), s, origin, frame.window, float(cell_mm))


def contact_map_of(result: Result) -> ContactMap:
    """The contact map of a pipeline :class:`~printcheck.result.Result`."""
    meas = result.measurement
    return contact_map(
        meas.labels > 0, result.rectified.analysed, result.rectified.frame, cell_mm=meas.cell_mm
    )


def contacts_name(sha256: str) -> str:
    """The file name of a photo's contact map in :data:`CONTACTS_FOLDER`."""
    clean = "".join(ch for ch in str(sha256).lower() if ch in "0123456789abcdef")
    if not clean:
        raise ValueError(f"a photo's sha256 must be hexadecimal, got {sha256!r}")
    return f"{clean}.png"


def encode_contacts(cmap: ContactMap, *, photo: str = "", sha256: str = "") -> bytes:
    """The contact map as a 2-bit palette PNG, its geometry in text chunks.

    Text chunks (all mm): ``format`` (``printcheck-contacts/1``), ``px_per_mm``,
    ``origin_mm`` ("x y"), ``window_mm`` ("x y width height"), ``cell_mm``, the
    ``photo`` name and ``sha256`` it was measured from, and where batch placed it:
    ``station`` and ``pass_key`` (only when set).  Palette: 0 not analysed (white),
    1 bare (light grey), 2 contact (black), so the file also reads as a picture.
    """
    from PIL import Image, PngImagePlugin

    state = np.asarray(cmap.state, dtype=np.uint8)
    image = Image.frombytes("P", (state.shape[1], state.shape[0]), state.tobytes())
    image.putpalette([255, 255, 255, 200, 200, 200, 0, 0, 0, 255, 0, 0])
    info = PngImagePlugin.PngInfo()
    w = cmap.window
    info.add_text("format", _FORMAT)
    info.add_text("px_per_mm", repr(float(cmap.px_per_mm)))
    info.add_text("origin_mm", f"{cmap.origin_mm[0]!r} {cmap.origin_mm[1]!r}")
    info.add_text("window_mm", f"{w.x_mm!r} {w.y_mm!r} {w.width_mm!r} {w.height_mm!r}")
    info.add_text("cell_mm", repr(float(cmap.cell_mm)))
    info.add_text("photo", photo)
    info.add_text("sha256", sha256)
    if cmap.station is not None:
        info.add_text("station", cmap.station)
    if cmap.pass_key is not None:
        info.add_text("pass_key", cmap.pass_key)
    buf = io.BytesIO()
    image.save(buf, format="PNG", bits=2, optimize=True, pnginfo=info)
    return buf.getvalue()


def decode_contacts(data: bytes, *, name: str = "contact map") -> ContactMap:
    """Read a contact map written by :func:`encode_contacts`.

    Raises
    ------
    ReportError
        When ``data`` is not such a map (``name`` says which in the message).
    """
    from PIL import Image, UnidentifiedImageError

    def bad(why: str) -> ReportError:
        return ReportError(f"{name}: {why}; run batch again to measure the photo afresh")

    try:
        with Image.open(io.BytesIO(data)) as image:
            image.load()
            text = dict(getattr(image, "text", {}) or image.info)
            state = np.asarray(image, dtype=np.uint8)
            mode = image.mode
    except (UnidentifiedImageError, OSError, ValueError) as exc:
        raise bad(f"not a PNG image ({exc})") from None
    if text.get("format") != _FORMAT or mode != "P":
        raise bad(f"not a printcheck contact map (format {text.get('format')!r})")
    try:
        s = float(text["px_per_mm"])
        ox, oy = (float(v) for v in text["origin_mm"].split())
        wx, wy, ww, wh = (float(v) for v in text["window_mm"].split())
        cell = float(text["cell_mm"])
    except (KeyError, ValueError) as exc:
        raise bad(f"its geometry cannot be read ({exc})") from None
    numbers = (s, ox, oy, wx, wy, ww, wh, cell)
    if not all(math.isfinite(v) for v in numbers) or s <= 0 or ww <= 0 or wh <= 0 or cell <= 0:
        raise bad(f"its geometry is not sane: {numbers}")
    if state.ndim != 2 or state.size == 0 or int(state.max()) > CONTACT:
        raise bad("its pixels are not contact states")
    return ContactMap(
        state,
        s,
        (ox, oy),
        Window(wx, wy, ww, wh),
        cell,
        station=text.get("station"),
        pass_key=text.get("pass_key"),
    )


def read_contacts(path: str | Path) -> ContactMap:
    """Read the contact map file at ``path`` (see :func:`decode_contacts`)."""
    p = Path(path)
    try:
        data = p.read_bytes()
    except OSError as exc:
        raise ReportError(f"contact map {p}: cannot be read ({exc.strerror or exc})") from None
    return decode_contacts(data, name=f"contact map {p}")


def place_contacts(
    folder: str | Path, sha256: str, *, station: str | None, pass_key: str | None
) -> None:
    """Record in a kept contact map where batch placed its photo (station, pass).

    Best effort: a missing or unreadable map, or a folder that cannot be written, is left
    as it is (the report then shows no change image for it).
    """
    from printcheck.report.files import write_bytes

    where = Path(folder) / CONTACTS_FOLDER
    try:
        name = contacts_name(sha256)
        data = (where / name).read_bytes()
        cmap = decode_contacts(data)
        if (cmap.station, cmap.pass_key) == (station, pass_key):
            return
        with_place = dataclasses.replace(cmap, station=station, pass_key=pass_key)
        from PIL import Image

        with Image.open(io.BytesIO(data)) as image:
            photo = str(getattr(image, "text", {}).get("photo", ""))
        write_bytes(where, name, encode_contacts(with_place, photo=photo, sha256=sha256))
    except (OSError, ValueError):  # ReportError is an OSError
        return


def same_place(before: ContactMap, after: ContactMap) -> bool:
    """Whether two maps are of one station in two different passes, as far as known.

    Maps that batch placed in passes of stations must name the same station and
    different passes; maps with no place recorded (a pass of one photo) are taken as
    one place, as the surface's passes are.
    """
    if before.station != after.station:
        return False
    placed = before.pass_key is not None or after.pass_key is not None
    return not (placed and before.pass_key == after.pass_key)


# --------------------------------------------------------------------------- comparing


def _sample(cmap: ContactMap, frame: Frame) -> np.ndarray:
    """``cmap``'s states at the pixel centres of ``frame`` (nearest; 0 off the map)."""
    rows, cols = frame.shape
    x, _ = frame.to_mm(np.zeros(1), np.arange(cols))
    _, y = frame.to_mm(np.arange(rows), np.zeros(1))
    s = cmap.px_per_mm
    c = np.floor((x - cmap.origin_mm[0]) * s + 1e-9).astype(np.int64)
    r = np.floor((y - cmap.origin_mm[1]) * s + 1e-9).astype(np.int64)
    m_rows, m_cols = cmap.state.shape
    c_ok = (c >= 0) & (c < m_cols)
    r_ok = (r >= 0) & (r < m_rows)
    out = cmap.state[np.clip(r, 0, m_rows - 1)[:, None], np.clip(c, 0, m_cols - 1)[None, :]]
    return np.where(r_ok[:, None] & c_ok[None, :], out, UNSEEN).astype(np.uint8)


def _centroid(mask: np.ndarray, frame: Frame) -> tuple[float, float] | None:
    rr, cc = np.nonzero(mask)
    if rr.size == 0:
        return None
    x, y = frame.to_mm(rr.mean(), cc.mean())
    return float(x), float(y)


def _distance_px(mask: np.ndarray) -> np.ndarray:
    """Distance (px) from each pixel to the nearest pixel of ``mask`` (inf: none)."""
    from scipy import ndimage

    if not mask.any():
        return np.full(mask.shape, np.inf)
    return np.asarray(ndimage.distance_transform_edt(~mask), dtype=float)


def compare_contacts(
    before: ContactMap,
    after: ContactMap,
    *,
    cell_mm: float | None = None,
    tolerance_mm: float = 0.3,
) -> Change:
    """Where contacts appeared and disappeared from ``before`` to ``after``.

    Both maps are sampled (nearest pixel) at the pixel centres of ``after``'s window at
    the coarser of the two resolutions; only what both prints show is compared.  A
    contact pixel of the later print has **appeared** when no contact of the earlier one
    lies within ``tolerance_mm`` of it (and at least 1.5 px), and one of the earlier print
    has **disappeared** when no contact of the later one does; every other contact pixel
    of either print is **kept**.  The tolerance absorbs what is not a change of the
    surface: the two calibrations' residuals and a contact's edge drawn a pixel wider or
    narrower in one photo than in the other.

    Parameters
    ----------
    before, after : ContactMap
        The earlier and the later print of one place (same card or layout, same
        station).
    cell_mm : float, optional
        Side of the counting cell in mm (default: ``after``'s).
    tolerance_mm : float
        How far a contact may lie from its counterpart in the other print and still be
        the same contact, in mm.

    Returns
    -------
    Change

    Raises
    ------
    ValueError
        When the two windows are not the same place (their corners further apart than
        0.5 mm: another card or layout).
    """
    wa, wb = after.window, before.window
    gap = max(
        abs(wa.x_mm - wb.x_mm),
        abs(wa.y_mm - wb.y_mm),
        abs(wa.x_mm + wa.width_mm - wb.x_mm - wb.width_mm),
        abs(wa.y_mm + wa.height_mm - wb.y_mm - wb.height_mm),
    )
    if gap > _SAME_WINDOW_MM:
        raise ValueError(
            f"the two prints have different windows ({wb.width_mm:g} x {wb.height_mm:g} mm "
            f"and {wa.width_mm:g} x {wa.height_mm:g} mm, {gap:.1f} mm apart): "
            "compare prints taken with the same card or layout"
        )
    s = min(before.px_per_mm, after.px_per_mm)
    cell = float(after.cell_mm if cell_mm is None else cell_mm)
    if not (math.isfinite(cell) and cell > 0):
        raise ValueError(f"cell_mm must be a positive number of mm, got {cell_mm!r}")
    shape = (
        max(1, int(math.floor(wa.height_mm * s + 1e-6))),
        max(1, int(math.floor(wa.width_mm * s + 1e-6))),
    )
    frame = Frame(s, (wa.x_mm, wa.y_mm), shape, wa)
    a = _sample(after, frame)
    b = _sample(before, frame)
    compared = (a != UNSEEN) & (b != UNSEEN)
    tol_px = max(tolerance_mm * s, _MIN_TOLERANCE_PX)
    in_a = compared & (a == CONTACT)
    in_b = compared & (b == CONTACT)
    appeared = in_a & (_distance_px(in_b) > tol_px)
    disappeared = in_b & (_distance_px(in_a) > tol_px)
    kept = (in_a | in_b) & ~appeared & ~disappeared
    px_mm2 = 1.0 / (s * s)
    grid = Grid.of(frame, shape, cell)
    sums = [
        cell_sums(m, grid.row_idx, grid.col_idx, grid.rows, grid.cols)
        for m in (compared, appeared, disappeared, kept)
    ]
    cells = tuple(
        CellChange(
            row=r,
            col=c,
            label=cell_label(r, c),
            compared_mm2=float(sums[0][k]) * px_mm2,
            appeared_mm2=float(sums[1][k]) * px_mm2,
            disappeared_mm2=float(sums[2][k]) * px_mm2,
            kept_mm2=float(sums[3][k]) * px_mm2,
        )
        for r in range(grid.rows)
        for c in range(grid.cols)
        for k in (r * grid.cols + c,)
    )
    return Change(
        frame=frame,
        compared=compared,
        appeared=appeared,
        disappeared=disappeared,
        kept=kept,
        compared_mm2=float(compared.sum()) * px_mm2,
        appeared_mm2=float(appeared.sum()) * px_mm2,
        disappeared_mm2=float(disappeared.sum()) * px_mm2,
        kept_mm2=float(kept.sum()) * px_mm2,
        appeared_centroid_mm=_centroid(appeared, frame),
        disappeared_centroid_mm=_centroid(disappeared, frame),
        cells=cells,
        cell_mm=cell,
    )


# --------------------------------------------------------------------------- drawing


def draw_change(change: Change) -> np.ndarray:
    """The change as an RGB image: appeared, disappeared, kept, unseen hatched, cells.

    Returns
    -------
    (M, N, 3) uint8 ndarray, RGB
        One pixel per pixel of ``change.frame`` (reduced by a whole factor when its
        longer side passes 1400 px), with the counting cells' edges drawn in dark grey.
    """
    rows, cols = change.compared.shape
    image = np.empty((rows, cols, 3), dtype=np.uint8)
    image[...] = _BACKGROUND_RGB
    rr, cc = np.mgrid[0:rows, 0:cols]
    hatch = ((rr + cc) // 3) % 4 == 0
    unseen = ~change.compared
    image[unseen] = _UNSEEN_RGB
    image[unseen & hatch] = _HATCH_RGB
    image[change.kept] = KEPT_RGB
    image[change.disappeared] = DISAPPEARED_RGB
    image[change.appeared] = APPEARED_RGB
    grid = Grid.of(change.frame, (rows, cols), change.cell_mm)
    edge_r = np.flatnonzero(np.diff(grid.row_idx) != 0) + 1
    edge_c = np.flatnonzero(np.diff(grid.col_idx) != 0) + 1
    image[edge_r[(edge_r > 0) & (edge_r < rows)], :] = _GRID_RGB
    image[:, edge_c[(edge_c > 0) & (edge_c < cols)]] = _GRID_RGB
    image[[0, -1], :] = _GRID_RGB
    image[:, [0, -1]] = _GRID_RGB
    factor = math.ceil(max(rows, cols) / _MAX_IMAGE_SIDE)
    if factor > 1:
        image = image[::factor, ::factor]
    return image


def change_png(change: Change) -> bytes:
    """:func:`draw_change` as PNG bytes."""
    from PIL import Image

    buf = io.BytesIO()
    Image.fromarray(draw_change(change), mode="RGB").save(buf, format="PNG", optimize=True)
    return buf.getvalue()


# --------------------------------------------------------------------------- the report


@dataclass(frozen=True, eq=False)
class LaidChange:
    """The print laid on the pass before, as the report shows it.

    Attributes
    ----------
    png : bytes
        The change image (:func:`draw_change`).
    change : Change
        Its figures (:func:`change_words` words them).
    """

    png: bytes
    change: Change


def change_view(
    folder: str | Path | None, summary: PassSummary, previous: PassSummary | None
) -> LaidChange | None:
    """The change from ``previous`` to ``summary``, from the contact maps in ``folder``.

    None when there is no pass before, no output folder, or a map is missing, unreadable
    or of another window (a pass measured before maps were kept, another card), or when
    the two photos are not of one station in two passes (:func:`same_place`).
    """
    if folder is None or previous is None or not summary.sha256 or not previous.sha256:
        return None
    where = Path(folder) / CONTACTS_FOLDER
    try:
        before = read_contacts(where / contacts_name(previous.sha256))
        after = read_contacts(where / contacts_name(summary.sha256))
        if not same_place(before, after):
            return None
        change = compare_contacts(before, after)
    except (ReportError, ValueError):
        return None
    return LaidChange(change_png(change), change)


def change_words(change: Change, summary: PassSummary, previous: PassSummary) -> tuple[str, str]:
    """The change image's key in words and its alternative text."""

    def pct(v: float) -> str:
        return f"{v:.1f} %"

    most = max(change.cells, key=lambda c: c.appeared_mm2, default=None)
    least = max(change.cells, key=lambda c: c.disappeared_mm2, default=None)
    words = [
        f"Contact appeared on {pct(change.appeared_percent)} of the window (dark blue), "
        f"disappeared from {pct(change.disappeared_percent)} (orange) and stayed on "
        f"{pct(change.kept_percent)} (light grey)",
    ]
    if most is not None and most.appeared_mm2 > 0:
        words.append(f"most appeared in cell {most.label} ({pct(most.appeared_percent)} of it)")
    if least is not None and least.disappeared_mm2 > 0:
        words.append(
            f"most disappeared from cell {least.label} ({pct(least.disappeared_percent)} of it)"
        )
    key = "; ".join(words) + (
        ". Hatched: not seen in one of the two photos (glare, out of view). The prints "
        "are laid one on the other through the markers."
    )
    return key, f"contacts of {summary.photo} laid on those of {previous.photo}"
