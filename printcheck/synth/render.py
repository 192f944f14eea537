"""Photos of prints: a scraped, spotted surface under a marker card, seen by a phone camera.

Rendering works in two spaces.  The surface's appearance (bare metal with its stroke
facets, compound spots with thickness shading, haze, grooves) is computed on the height
field's grid in the layout frame and warped into the photo by the camera homography
(beyond the grid the surface is mirrored, so the photo shows surface everywhere).  The
card, its cut-out window and the ArUco markers are drawn straight into the photo as
polygons projected through the same homography, so marker corners land exactly where the
homography puts them.  Light, glare, white balance, blur, noise and JPEG act on the photo.

Photo pixel coordinates follow OpenCV: x = column, y = row, integer values at pixel
centres.  ``Rendered.homography`` maps layout (x, y, 1) in mm to photo (x, y, 1).
"""

from __future__ import annotations

import io
import math
from collections.abc import Callable
from dataclasses import dataclass, replace
from typing import Literal

import cv2
import numpy as np
from numpy.typing import ArrayLike
from scipy import ndimage

from printcheck.errors import OptionError
from printcheck.layout import Layout, card_layout
from printcheck.synth.surface import HeightField, contact_mask
from printcheck.synth.truth import Truth, layout_masks, truth_stats

__all__ = [
    "Camera",
    "Lighting",
    "Scene",
    "Rendered",
    "render_photo",
    "camera_homography",
    "square_homography",
    "truth_for",
    "CARD_BORDER_MM",
]

Compound = Literal["blue", "red"]
CompoundOn = Literal["reference", "work"]

#: Paper beyond the markers' outer edges on the printed card, mm.
CARD_BORDER_MM = 6.0

# Compound optics (a paste over metal): per-channel absorption of the film (B, G, R)
# per unit thickness, and the paste's own body colour (BGR, 0-1).
_COMPOUND = {
    # Prussian blue: absorbs red and green strongly, a dark saturated blue.
    "blue": (np.array([0.22, 0.95, 1.5]), np.array([0.30, 0.08, 0.03])),
    # Red lead / red marking paste: a red-orange.
    "red": (np.array([1.4, 0.9, 0.12]), np.array([0.08, 0.20, 0.78])),
}
_METAL_BGR = np.array([0.53, 0.535, 0.54])  # bare steel, a neutral grey
_PAPER_BGR = np.array([0.93, 0.94, 0.95])
_INK_BGR = np.array([0.07, 0.07, 0.08])


@dataclass(frozen=True)
class Camera:
    """A phone camera over the window.

    Attributes
    ----------
    tilt_deg : float
        Angle between the optical axis and the surface normal (0 is square-on, up to 40).
    rotation_deg : float
        Rotation of the layout in the photo about the optical axis (any angle).
    window_fraction : float
        Width of the window in the photo as a fraction of the photo width, at zero tilt
        (0.2 to 0.6); sets the camera distance.
    tilt_axis_deg : float
        Direction in the layout (from x toward y) of the axis the camera tilts about.
    offset : (float, float)
        Shift of the window centre from the photo centre, fractions of (width, height).
    focal_fraction : float
        Focal length as a fraction of the photo width (0.78 is a typical phone main
        camera, about 65 degrees horizontal field).
    """

    tilt_deg: float = 0.0
    rotation_deg: float = 0.0
    window_fraction: float = 0.4
    tilt_axis_deg: float = 0.0
    offset: tuple[float, float] = (0.0, 0.0)
    focal_fraction: float = 0.78


@dataclass(frozen=True)
class Lighting:
    """Light, optics and sensor.

    Attributes
    ----------
    exposure : float
        Overall brightness factor.
    gradient : float
        Uneven light: brightness changes by this fraction across the photo.
    gradient_deg : float
        Direction of the light gradient in the photo (0 brighter to the right).
    vignetting : float
        Fractional darkening at the photo corners.
    light_deg : float
        Direction of the light in the layout frame; stroke facets whose tool marks run
        across it look brighter.
    shadow : float
        Depth (0 to 1) of a shadow across the photo, the photographer's arm or the phone
        between the light and the surface: beyond a line through the photo's middle the
        light falls by this share (0.55: to 0.45), on paper and metal alike.
    shadow_deg : float
        Direction of the shadow in the photo (0: the shadow to the left of a vertical
        edge, 90: above a horizontal one).
    shadow_soft_px : float
        Softness of the shadow's edge (the half-shadow), in photo pixels: the light
        goes from a tenth to nine tenths of the way up over 2.2 times this.
    glare : float
        Strength (0 to 1) of a broad specular highlight.
    glare_at : (float, float)
        Glare centre as fractions of (width, height).
    glare_radius : float
        Glare radius as a fraction of the photo width.
    haze : float
        Strength (0 to 1) of the faint compound haze over bare metal.
    haze_wide : float
        Strength (0 to 1) of a thin smear of compound wiped over broad areas of bare
        metal, patches 10-30 mm across (wider than any local level is read over).
    facet_gloss : float
        Extra brightness (0 to 1.5) of the glossiest scrape facets: broad bright facets
        of bare metal, up to burnt out, that are not glare.
    rim_film : float
        Thickness of the compound at the rim of a contact, where it is 1.5 at the
        contact's top (0.4: a film with a distinct edge; 0.05: a film that thins to
        nothing at the rim, pale rims).
    ring : float
        Compound on the work: strength (0 to 1) of the ring of compound the reference
        pushes up round each worn-through contact.
    compound_strength : float
        Compound thickness factor: 1 a normal film, 0.4 a thin pale one.
    pale_patches : float
        Share (0 to 1) of the surface, in broad patches 5-15 mm across, where the
        compound on the reference was wiped on thin: there its film is down to a fifth
        as thick, shading off at the patches' edges, pale contacts side by side with dark
        ones and every shade between (0: an even film).
    white_balance : (float, float, float)
        Gains of (B, G, R).
    blur_sigma_px : float
        Gaussian blur (focus and lens), in photo pixels.
    colour_blur_px : float
        Gaussian blur of the colour alone (the chroma of YCrCb), in photo pixels, after
        the sensor noise: a phone's colour noise reduction, which smooths colour far
        more than brightness (0: none; phones smooth it over 1-3 px).
    noise_sigma : float
        Sensor noise at mid grey, in 8-bit levels.
    jpeg_quality : int or None
        JPEG quality (1-100); None leaves the photo uncompressed.
    tone : {"linear", "srgb"}
        How the sensor's light is stored: "linear", in proportion; "srgb", through the
        sRGB transfer curve (IEC 61966-2-1), as a phone stores its photos: the darks
        lifted, a blurred edge's half-way point moved toward the darker side.
    """

    exposure: float = 1.0
    gradient: float = 0.2
    gradient_deg: float = 30.0
    vignetting: float = 0.25
    light_deg: float = 20.0
    shadow: float = 0.0
    shadow_deg: float = 0.0
    shadow_soft_px: float = 3.0
    glare: float = 0.0
    glare_at: tuple[float, float] = (0.62, 0.35)
    glare_radius: float = 0.18
    haze: float = 0.3
    compound_strength: float = 1.0
    pale_patches: float = 0.0
    haze_wide: float = 0.0
    facet_gloss: float = 0.0
    rim_film: float = 0.4
    ring: float = 0.0
    white_balance: tuple[float, float, float] = (1.0, 1.0, 1.0)
    blur_sigma_px: float = 0.7
    colour_blur_px: float = 0.0
    noise_sigma: float = 2.0
    jpeg_quality: int | None = 90
    tone: Literal["linear", "srgb"] = "linear"


@dataclass(frozen=True, eq=False)
class Scene:
    """What to photograph.

    Attributes
    ----------
    layout : Layout
        The marker layout (default the built-in 2 in card).  A layout with
        ``margin_mm == 0`` is drawn as a paper card with a cut-out window; otherwise each
        marker is a small printed label stuck on the surface.
    compound : {"blue", "red"}
    compound_on : {"reference", "work"}
        "reference": the spots carry compound on bare metal; "work": the surface is
        coated and the spots are bright metal where the reference rubbed through.
    density : float
        Target points per square inch when ``field`` is None (the surface is scraped
        pass by pass until it reaches about this density).
    field : HeightField or None
        An explicit surface; it must cover the layout (see ``field_for_layout``).
    film_um : float or None
        Compound film thickness in µm (default 1.5).
    seed_surface : int or None
        Seed of the surface made for ``density`` (default: the render seed).
    image_size : (int, int)
        (width, height) of the photo in pixels.
    camera : Camera or None
        None: a square-on image of the layout frame at ``px_per_mm``, covering the
        window plus ``border_mm`` (no perspective; ``image_size`` is ignored).
    px_per_mm : float
        Resolution of the square-on image when ``camera`` is None.
    border_mm : float
        Border around the window in the square-on image.
    lighting : Lighting
    truth_px_per_mm : float
        Resolution of the surface grid (and of the truth mask) for a made surface.
    card : bool or None
        Draw a paper card with a cut-out window (True) or stick each marker on the
        surface (False); None: a card when the layout's margin is 0.  A card with a
        margin in its layout is what a user's own layout for the printed card gives.
    """

    layout: Layout = card_layout()
    compound: Compound = "blue"
    compound_on: CompoundOn = "reference"
    density: float = 12.0
    field: HeightField | None = None
    film_um: float | None = None
    seed_surface: int | None = None
    image_size: tuple[int, int] = (1200, 900)
    camera: Camera | None = Camera()
    px_per_mm: float = 10.0
    border_mm: float = 0.0
    lighting: Lighting = Lighting()
    truth_px_per_mm: float = 20.0
    card: bool | None = None


@dataclass(frozen=True, eq=False)
class Rendered:
    """A rendered photo and its truth.

    Attributes
    ----------
    image : (H, W, 3) uint8 ndarray, BGR
        The photo (decoded from ``jpeg`` when JPEG is on).
    jpeg : bytes or None
        The JPEG file's bytes (no EXIF), or None.
    homography : (3, 3) float ndarray
        Layout (x, y) mm to photo (x, y) pixels (OpenCV convention, centres at integers).
    truth : Truth
        The exact contact in the layout frame and its counts.
    field : HeightField
        The surface photographed.
    film_um : float
    marker_corners_px : dict of int to (4, 2) float ndarray
        Each marker's corners in the photo (x, y), OpenCV order TL, TR, BR, BL.
    """

    image: np.ndarray
    jpeg: bytes | None
    homography: np.ndarray
    truth: Truth
    field: HeightField
    film_um: float
    marker_corners_px: dict[int, np.ndarray]


# --------------------------------------------------------------------------- geometry


def camera_homography(camera: Camera, layout: Layout, image_size: tuple[int, int]) -> np.ndarray:
    """The pinhole homography, layout mm to photo pixels, of ``camera`` over the window.

    The camera looks at the window centre from a distance that makes the window
    ``window_fraction`` of the photo width, tilted by ``tilt_deg`` about an axis in the
    surface at ``tilt_axis_deg``, the image turned by ``rotation_deg``.
    """
    width, height = image_size
    if not 0 <= camera.tilt_deg < 80:
        raise OptionError(f"camera tilt_deg must be from 0 to 80, got {camera.tilt_deg!r}")
    if not 0 < camera.window_fraction <= 1.5:
        raise OptionError(
            f"camera window_fraction must be in (0, 1.5], got {camera.window_fraction!r}"
        )
    w = layout.window
    cx, cy = w.x_mm + w.width_mm / 2, w.y_mm + w.height_mm / 2
    f = camera.focal_fraction * width
    distance = w.width_mm * f / (camera.window_fraction * width)
    a = math.radians(camera.tilt_axis_deg)
    t = math.radians(camera.tilt_deg)
    r = math.radians(camera.rotation_deg)
    # Rotation of the surface in camera coordinates: turn the tilt axis onto x, tilt
    # about x, turn back, then rotate the image about the optical axis.
    rz_a = _rot_z(a)
    rx = np.array([[1, 0, 0], [0, math.cos(t), -math.sin(t)], [0, math.sin(t), math.cos(t)]])
    rot = _rot_z(r) @ rz_a @ rx @ rz_a.T
    k = np.array(
        [
            [f, 0, (width - 1) / 2 + camera.offset[0] * width],
            [0, f, (height - 1) / 2 + camera.offset[1] * height],
            [0, 0, 1],
        ]
    )
    rt = np.column_stack([rot[:, 0], rot[:, 1], np.array([0.0, 0.0, distance])])
    centre = np.array([[1, 0, -cx], [0, 1, -cy], [0, 0, 1]], dtype=float)
    hom = k @ rt @ centre
    return hom / hom[2, 2]


def _rot_z(a: float) -> np.ndarray:
    return np.array([[math.cos(a), -math.sin(a), 0], [math.sin(a), math.cos(a), 0], [0, 0, 1]])


def square_homography(
    layout: Layout, *, px_per_mm: float, border_mm: float = 0.0
) -> tuple[np.ndarray, tuple[int, int]]:
    """Square-on view of the window plus ``border_mm``: (homography, (width, height)).

    Photo pixel (col, row) covers layout mm ``x0 + [col, col + 1) / px_per_mm`` with
    ``x0 = window.x - border_mm`` (the :class:`printcheck.frame.Frame` convention).
    """
    if not px_per_mm > 0:
        raise OptionError(f"px_per_mm must be greater than zero, got {px_per_mm!r}")
    w = layout.window
    x0, y0 = w.x_mm - border_mm, w.y_mm - border_mm
    cols = int(round((w.width_mm + 2 * border_mm) * px_per_mm))
    rows = int(round((w.height_mm + 2 * border_mm) * px_per_mm))
    s = px_per_mm
    hom = np.array([[s, 0, -x0 * s - 0.5], [0, s, -y0 * s - 0.5], [0, 0, 1.0]])
    return hom, (cols, rows)


def _project(hom: np.ndarray, pts: ArrayLike) -> np.ndarray:
    pts = np.asarray(pts, dtype=float).reshape(-1, 2)
    ph = np.column_stack([pts, np.ones(len(pts))]) @ hom.T
    return ph[:, :2] / ph[:, 2:3]


# --------------------------------------------------------------------------- surface


def truth_for(
    field: HeightField, layout: Layout, film_um: float, *, cell_mm: float = 25.4
) -> Truth:
    """The truth of ``field`` printed with ``film_um`` under ``layout``."""
    frame = field.frame(layout.window)
    visible, analysed = layout_masks(layout, frame)
    return truth_stats(
        contact_mask(field, film_um),
        frame=frame,
        analysed=analysed,
        visible=visible,
        exclusions=layout.exclusions,
        cell_mm=cell_mm,
        film_um=film_um,
    )


def _appearance(
    field: HeightField,
    film_um: float,
    compound: str,
    compound_on: str,
    lighting: Lighting,
    rng: np.random.Generator,
) -> np.ndarray:
    """(M, N, 3) float32 BGR reflectance of the surface on its own grid."""
    h = field.height_um
    s = field.px_per_mm
    top = float(h.max())
    gap = top - h  # distance below the reference plane, µm
    # Bare metal: grey with stroke facets.  A facet's tool marks scatter light across
    # their lay, so facets whose lay runs across the light look brighter.
    light = math.radians(lighting.light_deg)
    lay = field.lay_rad
    scraped = np.isfinite(lay)
    direction = np.where(scraped, np.cos(2 * (np.nan_to_num(lay) - light)), 0.0)
    shade = 1.0 + 0.08 * field.facet + 0.07 * direction
    if lighting.facet_gloss > 0:
        # the glossiest facets catch the light broadly: bright bare metal, not glare
        shade = shade * (1.0 + lighting.facet_gloss * np.clip(3.0 * field.facet, 0.0, 1.0))
    # The scoops' slopes read faintly as shading.
    hs = _blur(h.astype(np.float32), 0.08 * s)
    gx = cv2.Sobel(hs, cv2.CV_32F, 1, 0, ksize=1) * (s / 2.0)
    gy = cv2.Sobel(hs, cv2.CV_32F, 0, 1, ksize=1) * (s / 2.0)
    shade += 0.02 * np.clip(gx * math.cos(light) + gy * math.sin(light), -3, 3)
    metal = (shade[..., None] * _METAL_BGR).astype(np.float32)

    absorb, body = _COMPOUND[compound]
    strength = max(lighting.compound_strength, 0.0)
    contact = gap <= film_um
    q = np.clip(1.0 - gap / film_um, 0.0, 1.0)  # 1 at the top of a spot, 0 at its rim
    smooth = _smooth_noise(rng, h.shape, 2.0 * s)
    if compound_on == "reference":
        # Spots carry compound, thickest where the surface stood highest (dark centres,
        # pale rims); a faint haze of compound smeared over the bare metal around them.
        rim = float(np.clip(lighting.rim_film, 0.0, 1.5))
        thick = np.where(contact, rim + (1.5 - rim) * q**0.8, 0.0)
        near = _blur(contact.astype(np.float32), 0.8 * s)
        haze = lighting.haze * (0.02 + 0.015 * smooth + 0.12 * near)
        if lighting.haze_wide > 0:
            broad = _smooth_noise(rng, h.shape, 8.0 * s)
            haze = haze + 0.12 * lighting.haze_wide * np.clip(broad - 0.3, 0.0, None)
        thick = strength * (thick + np.clip(haze, 0.0, None))
        if lighting.pale_patches > 0:
            # the share of the surface above the patches' cut of smooth noise (its
            # quantile), shading off over the noise's own spread: every shade between
            # the pale film and the dark one
            broad = _smooth_noise(rng, h.shape, 4.0 * s)
            cut = float(np.quantile(broad, 1.0 - min(lighting.pale_patches, 1.0)))
            pale = np.clip(broad - cut + 0.5, 0.0, 1.0)
            thick = thick * (1.0 - 0.8 * pale)
        brighten = np.ones_like(q)
    else:
        # The work is coated; where the reference rubbed, the film is worn through to
        # burnished, brighter metal, thinning toward the rim of each spot.
        coat = 0.85 + 0.12 * smooth
        worn = np.clip(1.0 - q / 0.25, 0.0, 1.0) ** 1.5
        thick = strength * np.clip(np.where(contact, coat * 0.6 * worn, coat), 0.0, None)
        if lighting.ring > 0:
            # compound pushed up round each contact: a thicker ring just outside it
            band = _blur(contact.astype(np.float32), 0.12 * s) * (~contact)
            thick = thick * (1.0 + lighting.ring * np.clip(2.0 * band, 0.0, 1.0))
        brighten = np.where(contact, 1.0 + 0.15 * np.clip(q / 0.25, 0.0, 1.0), 1.0)
    thick = thick.astype(np.float32)
    trans = np.exp(-2.0 * thick[..., None] * absorb[None, None, :])  # down and back up
    cover = 1.0 - np.exp(-1.2 * thick[..., None])
    colour = metal * brighten[..., None] * trans + (body * cover * (1.0 - trans) * 1.0)
    if field.excluded is not None and field.excluded.any():
        # An oil groove: a darker machined channel with its own tool marks.
        ex = field.excluded
        dist = ndimage.distance_transform_edt(ex) / s
        groove = (
            0.38 + 0.05 * np.sin(2 * np.pi * dist / 0.35) + 0.08 * np.clip(1 - dist / 0.6, 0, 1)
        )
        groove_col = (groove[..., None] * _METAL_BGR * 0.9).astype(np.float32)
        if compound_on == "work":
            groove_col = groove_col * np.exp(-1.0 * strength * absorb)[None, None, :]
        colour = np.where(ex[..., None], groove_col, colour)
    return colour.astype(np.float32)


def shadow_light(shape: tuple[int, int], depth: float, deg: float, soft_px: float) -> np.ndarray:
    """The light (M, N) float32 under a shadow across a photo of ``shape``: 1 - ``depth``
    beyond a line through its middle, 1 before it, shading between over ``soft_px``
    (the tanh's scale, photo pixels); ``deg`` as :attr:`Lighting.shadow_deg`."""
    f32 = np.float32
    height, width = shape
    a = math.radians(deg)
    px = (np.arange(width, dtype=f32) - f32((width - 1) / 2)) * f32(math.cos(a))
    py = (np.arange(height, dtype=f32) - f32((height - 1) / 2)) * f32(math.sin(a))
    # a soft step: lit where the distance past the edge is positive
    soft = f32(max(soft_px, 0.1))
    lit = f32(0.5) * (f32(1.0) + np.tanh((px[None, :] + py[:, None]) / soft))
    return np.asarray(f32(1.0 - depth) + f32(depth) * lit, dtype=f32)


def _blur(a: np.ndarray, sigma_px: float) -> np.ndarray:
    """Gaussian blur of a float32 image (reflecting edges)."""
    if sigma_px <= 0.3:
        return a
    return cv2.GaussianBlur(a, (0, 0), sigma_px, borderType=cv2.BORDER_REFLECT)


def _smooth_noise(rng: np.random.Generator, shape: tuple[int, int], sigma_px: float) -> np.ndarray:
    """Unit-variance Gaussian noise smoothed at ``sigma_px`` (made coarse, then enlarged)."""
    rows, cols = shape
    k = max(int(sigma_px // 4), 1)
    small = rng.standard_normal((rows // k + 2, cols // k + 2)).astype(np.float32)
    small = _blur(small, sigma_px / k)
    big = cv2.resize(
        small, ((cols // k + 2) * k, (rows // k + 2) * k), interpolation=cv2.INTER_LINEAR
    )
    big = big[:rows, :cols]
    return big / max(float(big.std()), 1e-9)


# --------------------------------------------------------------------------- card


def _aruco_bits(dictionary: str, marker_id: int) -> np.ndarray:
    """(n, n) bool, True where the printed marker is black (border included)."""
    d = cv2.aruco.getPredefinedDictionary(getattr(cv2.aruco, dictionary))
    n = int(d.markerSize) + 2
    img = cv2.aruco.generateImageMarker(d, int(marker_id), n, borderBits=1)
    return img < 128


def _unit_square_homography(corners_mm: np.ndarray) -> np.ndarray:
    src = np.array([[0, 0], [1, 0], [1, 1], [0, 1]], dtype=np.float32)
    return cv2.getPerspectiveTransform(src, np.asarray(corners_mm, dtype=np.float32)).astype(float)


def _coverage(
    photo_to_unit: np.ndarray,
    corners_px: np.ndarray,
    size: tuple[int, int],
    inside: Callable[[np.ndarray, np.ndarray], np.ndarray],
    *,
    ss: int = 8,
) -> tuple[tuple[slice, slice], np.ndarray] | None:
    """Area coverage (0-1) of a shape, sampled exactly through a homography.

    Each photo pixel centre (x, y) in the bounding box of ``corners_px`` is mapped by
    ``photo_to_unit`` to the shape's own coordinates (u, v) and tested with
    ``inside(u, v)``; pixels on an edge (a 3 x 3 neighbourhood that disagrees) are
    resampled at ``ss`` x ``ss`` points.  Point sampling has no rasteriser bias, so
    edges land where the homography puts them.  Returns (row, col) slices and the
    coverage there, or None when the shape is outside the photo.
    """
    width, height = size
    pts = corners_px[np.all(np.isfinite(corners_px), axis=1)]
    if pts.size == 0:
        return None
    x0 = max(int(math.floor(pts[:, 0].min())) - 2, 0)
    y0 = max(int(math.floor(pts[:, 1].min())) - 2, 0)
    x1 = min(int(math.ceil(pts[:, 0].max())) + 3, width)
    y1 = min(int(math.ceil(pts[:, 1].max())) + 3, height)
    if x1 <= x0 or y1 <= y0:
        return None

    def test(x: np.ndarray, y: np.ndarray) -> np.ndarray:
        hh = photo_to_unit
        wz = hh[2, 0] * x + hh[2, 1] * y + hh[2, 2]
        u = (hh[0, 0] * x + hh[0, 1] * y + hh[0, 2]) / wz
        v = (hh[1, 0] * x + hh[1, 1] * y + hh[1, 2]) / wz
        return inside(u, v) & (wz > 0)

    xs = np.arange(x0, x1, dtype=float)
    ys = np.arange(y0, y1, dtype=float)
    centre = test(xs[None, :], ys[:, None])
    c8 = centre.astype(np.uint8)
    kernel = np.ones((3, 3), np.uint8)
    edge = cv2.dilate(c8, kernel) != cv2.erode(c8, kernel)
    cover = centre.astype(np.float32)
    er, ec = np.nonzero(edge)
    if er.size:
        off = (np.arange(ss) + 0.5) / ss - 0.5
        ox = np.tile(off, ss)
        oy = np.repeat(off, ss)
        hit = test(xs[ec][:, None] + ox[None, :], ys[er][:, None] + oy[None, :])
        cover[er, ec] = hit.mean(axis=1)
    return (slice(y0, y1), slice(x0, x1)), cover


def _paint(
    canvas: np.ndarray, piece: tuple[tuple[slice, slice], np.ndarray] | None, value: float
) -> None:
    """Blend ``value`` into ``canvas`` by the coverage of ``piece`` (from _coverage)."""
    if piece is None:
        return
    (rs, cs), cover = piece
    region = canvas[rs, cs]
    region *= 1.0 - cover
    region += value * cover


def _rect_inside(
    x0: float, y0: float, x1: float, y1: float
) -> Callable[[np.ndarray, np.ndarray], np.ndarray]:
    def inside(u: np.ndarray, v: np.ndarray) -> np.ndarray:
        return (u >= x0) & (u < x1) & (v >= y0) & (v < y1)

    return inside


def _bits_inside(bits: np.ndarray) -> Callable[[np.ndarray, np.ndarray], np.ndarray]:
    n = bits.shape[0]

    def inside(u: np.ndarray, v: np.ndarray) -> np.ndarray:
        ok = (u >= 0) & (u < 1) & (v >= 0) & (v < 1)
        j = np.clip((np.nan_to_num(u) * n).astype(np.int64), 0, n - 1)
        i = np.clip((np.nan_to_num(v) * n).astype(np.int64), 0, n - 1)
        return ok & bits[i, j]

    return inside


def _paper_and_ink(
    layout: Layout, hom: np.ndarray, size: tuple[int, int], *, card: bool
) -> tuple[np.ndarray, np.ndarray, dict[int, np.ndarray]]:
    """Coverage of paper and of ink in the photo, and the markers' corners in the photo."""
    width, height = size
    paper = np.zeros((height, width), dtype=np.float32)
    ink = np.zeros((height, width), dtype=np.float32)
    corners_px: dict[int, np.ndarray] = {}
    photo_to_mm = np.linalg.inv(hom)
    if card:
        pts = np.array([c for m in layout.markers for c in m.corners_mm])
        w = layout.window
        x0 = min(pts[:, 0].min(), w.x_mm) - CARD_BORDER_MM
        y0 = min(pts[:, 1].min(), w.y_mm) - CARD_BORDER_MM
        x1 = max(pts[:, 0].max(), w.x_mm + w.width_mm) + CARD_BORDER_MM
        y1 = max(pts[:, 1].max(), w.y_mm + w.height_mm) + CARD_BORDER_MM
        wx0, wy0 = w.x_mm, w.y_mm
        wx1, wy1 = w.x_mm + w.width_mm, w.y_mm + w.height_mm
        outer = _project(hom, [[x0, y0], [x1, y0], [x1, y1], [x0, y1]])
        card_inside = _rect_inside(x0, y0, x1, y1)
        hole_inside = _rect_inside(wx0, wy0, wx1, wy1)

        def paper_inside(u: np.ndarray, v: np.ndarray) -> np.ndarray:
            return card_inside(u, v) & ~hole_inside(u, v)

        _paint(paper, _coverage(photo_to_mm, outer, size, paper_inside, ss=4), 1.0)
    for m in layout.markers:
        corners = np.array(m.corners_mm, dtype=float)
        to_mm = _unit_square_homography(corners)
        photo_to_unit = np.linalg.inv(hom @ to_mm)
        corners_px[m.id] = _project(hom, corners)
        bits = _aruco_bits(layout.dictionary, m.id)
        n = bits.shape[0]
        if not card:
            # A printed label: the marker plus a one-cell white quiet zone.
            pad = 1.0 / n + 0.02
            label = [[-pad, -pad], [1 + pad, -pad], [1 + pad, 1 + pad], [-pad, 1 + pad]]
            piece = _coverage(
                photo_to_unit,
                _project(hom @ to_mm, label),
                size,
                _rect_inside(-pad, -pad, 1 + pad, 1 + pad),
            )
            _paint(paper, piece, 1.0)
        _paint(ink, _coverage(photo_to_unit, corners_px[m.id], size, _bits_inside(bits)), 1.0)
    return paper, ink, corners_px


# --------------------------------------------------------------------------- photo


def render_photo(scene: Scene, *, seed: int = 0) -> Rendered:
    """Render a photo of a print and return it with its truth.

    Parameters
    ----------
    scene : Scene
    seed : int
        Seed of every random choice (surface when made, haze, noise).

    Returns
    -------
    Rendered
    """
    layout = scene.layout
    light = scene.lighting
    if scene.compound not in _COMPOUND:
        raise OptionError(f"compound must be 'blue' or 'red', got {scene.compound!r}")
    if scene.compound_on not in ("reference", "work"):
        raise OptionError(f"compound_on must be 'reference' or 'work', got {scene.compound_on!r}")
    if scene.lighting.tone not in ("linear", "srgb"):
        raise OptionError(f"tone must be 'linear' or 'srgb', got {scene.lighting.tone!r}")
    film = 1.5 if scene.film_um is None else float(scene.film_um)
    if not film > 0:
        raise OptionError(f"film_um must be greater than zero, got {scene.film_um!r}")
    if scene.field is None:
        surf_seed = seed if scene.seed_surface is None else scene.seed_surface
        from printcheck.synth.job import surface_at_density

        fld = surface_at_density(
            layout, scene.density, seed=surf_seed, px_per_mm=scene.truth_px_per_mm, film_um=film
        )
    else:
        fld = scene.field
    card = layout.margin_mm == 0 if scene.card is None else bool(scene.card)
    # under a card the paper hides the surface past the window: the truth counts the
    # pieces the photo shows, whatever margin the layout states
    truth = truth_for(fld, replace(layout, margin_mm=0.0) if card else layout, film)
    rng = np.random.default_rng(seed + 7919)

    if scene.camera is None:
        hom, size = square_homography(layout, px_per_mm=scene.px_per_mm, border_mm=scene.border_mm)
    else:
        size = (int(scene.image_size[0]), int(scene.image_size[1]))
        if size[0] < 16 or size[1] < 16:
            raise OptionError(
                f"image_size must be at least 16 x 16 pixels, got {scene.image_size!r}"
            )
        hom = camera_homography(scene.camera, layout, size)
    width, height = size

    # Surface appearance on its grid, warped into the photo (mirrored beyond the grid).
    colour = _appearance(fld, film, scene.compound, scene.compound_on, light, rng)
    s = fld.px_per_mm
    grid_from_mm = np.array(
        [[s, 0, -fld.origin_mm[0] * s - 0.5], [0, s, -fld.origin_mm[1] * s - 0.5], [0, 0, 1.0]]
    )
    photo_from_grid = hom @ np.linalg.inv(grid_from_mm)
    # Resolution of the photo at the window centre, to prefilter against aliasing.
    w = layout.window
    c = np.array([[w.x_mm + w.width_mm / 2, w.y_mm + w.height_mm / 2]])
    p0 = _project(hom, c)
    p1 = _project(hom, c + [[1.0, 0.0]])
    p2 = _project(hom, c + [[0.0, 1.0]])
    d1, d2 = p1[0] - p0[0], p2[0] - p0[0]
    photo_px_per_mm = math.sqrt(abs(d1[0] * d2[1] - d1[1] * d2[0]))
    ratio = s / max(photo_px_per_mm, 1e-6)
    if ratio > 1.3:
        colour = cv2.GaussianBlur(colour, (0, 0), 0.45 * ratio)
    img = cv2.warpPerspective(
        colour,
        photo_from_grid,
        (width, height),
        flags=cv2.INTER_LINEAR,
        borderMode=cv2.BORDER_REFLECT,
    )

    # Card or labels, and ink, drawn straight in the photo.
    paper, ink, corners_px = _paper_and_ink(layout, hom, size, card=card)
    f32 = np.float32
    paper_bgr = _PAPER_BGR.astype(f32)
    ink_delta = (_INK_BGR - _PAPER_BGR).astype(f32)
    paper3 = paper[..., None]
    img = img * (f32(1.0) - paper3) + (paper_bgr + ink[..., None] * ink_delta) * paper3

    # Light: gradient, vignetting, glare (per pixel, one channel); then white balance.
    xs = (np.arange(width, dtype=f32) - f32((width - 1) / 2)) / f32(width / 2)
    ys = (np.arange(height, dtype=f32) - f32((height - 1) / 2)) / f32(width / 2)
    g = math.radians(light.gradient_deg)
    ramp = (
        f32(0.5 * light.gradient * math.cos(g)) * xs[None, :]
        + f32(0.5 * light.gradient * math.sin(g)) * ys[:, None]
    )
    radius2 = xs[None, :] ** 2 + ys[:, None] ** 2
    vignette = f32(1.0) - f32(light.vignetting) * np.minimum(radius2 / f32(1.5625), f32(1.0))
    illum = f32(light.exposure) * (f32(1.0) + ramp) * vignette
    if light.shadow > 0:
        illum = illum * shadow_light(
            (height, width), light.shadow, light.shadow_deg, light.shadow_soft_px
        )
    gain = np.asarray(light.white_balance, dtype=f32) * f32(255.0)
    if light.glare > 0:
        gx, gy = light.glare_at[0] * width, light.glare_at[1] * height
        sig = max(light.glare_radius * width, 1.0)
        ex = np.exp(-(((np.arange(width, dtype=f32) - f32(gx)) / f32(sig)) ** 2) / f32(2))
        ey = np.exp(-(((np.arange(height, dtype=f32) - f32(gy)) / f32(sig)) ** 2) / f32(2))
        # Specular glare is strongest on the metal, weaker on matte paper.
        blob = f32(light.glare) * (ey[:, None] * ex[None, :]) * (f32(1.0) - f32(0.6) * paper)
        img = img * (illum * (f32(1.0) - f32(0.5) * blob))[..., None] + f32(1.05) * blob[..., None]
    else:
        img = img * illum[..., None]
    img *= gain[None, None, :]

    # Optics and sensor (noise grows with the signal, as shot noise does).
    if light.blur_sigma_px > 0:
        img = cv2.GaussianBlur(img, (0, 0), light.blur_sigma_px)
    if light.noise_sigma > 0:
        sigma = np.sqrt(np.maximum(img, f32(1.0)) * f32(light.noise_sigma**2 / 128.0))
        img += sigma * rng.standard_normal(img.shape, dtype=f32)
    if light.tone == "srgb":
        img = srgb_encoded(img)
    if light.colour_blur_px > 0:
        ycc = cv2.cvtColor(np.clip(img, 0, 255).astype(f32) / f32(255.0), cv2.COLOR_BGR2YCrCb)
        for k in (1, 2):
            ycc[..., k] = cv2.GaussianBlur(ycc[..., k], (0, 0), light.colour_blur_px)
        img = cv2.cvtColor(ycc, cv2.COLOR_YCrCb2BGR) * f32(255.0)
    out = np.clip(np.rint(img), 0, 255).astype(np.uint8)

    jpeg: bytes | None = None
    if light.jpeg_quality is not None:
        q = int(light.jpeg_quality)
        if not 1 <= q <= 100:
            raise OptionError(
                f"jpeg_quality must be from 1 to 100 or None, got {light.jpeg_quality!r}"
            )
        jpeg = _encode_jpeg(out, q)
        out = cv2.imdecode(np.frombuffer(jpeg, dtype=np.uint8), cv2.IMREAD_COLOR)
    return Rendered(
        image=out,
        jpeg=jpeg,
        homography=hom,
        truth=truth,
        field=fld,
        film_um=film,
        marker_corners_px=corners_px,
    )


def srgb_encoded(img: np.ndarray) -> np.ndarray:
    """Linear light in 8-bit units (0-255, float32) through the sRGB transfer curve
    (IEC 61966-2-1: 12.92 x below 0.0031308, else 1.055 x^(1/2.4) - 0.055), 0-255."""
    f32 = np.float32
    x = np.clip(img, 0, 255) / f32(255.0)
    curve = np.where(
        x <= f32(0.0031308),
        f32(12.92) * x,
        f32(1.055) * np.power(np.maximum(x, f32(0.0031308)), f32(1.0 / 2.4)) - f32(0.055),
    )
    return (curve * f32(255.0)).astype(f32)


def _encode_jpeg(image_bgr: np.ndarray, quality: int) -> bytes:
    from PIL import Image

    buf = io.BytesIO()
    Image.fromarray(image_bgr[..., ::-1].copy()).save(
        buf, format="JPEG", quality=quality, subsampling=0 if quality >= 90 else 2
    )
    return buf.getvalue()
