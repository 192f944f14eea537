"""Homography: the photo-to-layout map fitted to marker corners, and its local scale.

The homography is fitted to every corner of every marker found (least squares after a
normalised DLT, as ``cv2.findHomography`` with method 0 does, which minimises the
reprojection error in the layout frame, in mm).  With three or more markers, a marker
that does not fit the others is dropped (:func:`robust_fit`).
"""

from __future__ import annotations

import cv2
import numpy as np

from printcheck.errors import LocateError

__all__ = ["Candidate", "fit_homography", "local_px_per_mm", "robust_fit", "rms"]

_SEED_TOLERANCE_MM = 5.0  # how far one marker's homography may miss another that agrees

#: One marker seen: (id, photo (4, 2) px, layout (4, 2) mm).
Candidate = tuple[int, np.ndarray, np.ndarray]


def fit_homography(photo_px: np.ndarray, layout_mm: np.ndarray) -> np.ndarray:
    """Least-squares homography from photo pixels to layout mm.

    A normalised DLT followed by Levenberg-Marquardt refinement of the reprojection error
    in the layout frame (``cv2.findHomography`` with method 0).

    Parameters
    ----------
    photo_px : (K, 2) float ndarray
        Photo (x, y) pixel coordinates, K >= 4.
    layout_mm : (K, 2) float ndarray
        The same points' layout (x, y) in mm.

    Returns
    -------
    (3, 3) float ndarray
        ``H`` with ``H[2, 2] == 1`` mapping homogeneous photo (x, y, 1) to layout mm.

    Raises
    ------
    LocateError
        When the points are degenerate (fewer than 4, or collinear).
    """
    src = np.asarray(photo_px, dtype=np.float64).reshape(-1, 2)
    dst = np.asarray(layout_mm, dtype=np.float64).reshape(-1, 2)
    if len(src) < 4 or len(src) != len(dst):
        raise LocateError(
            f"a homography needs 4 or more point pairs, got {len(src)} and {len(dst)}"
        )
    h, _ = cv2.findHomography(src, dst, 0)
    if h is None or not np.all(np.isfinite(h)) or abs(h[2, 2]) < 1e-12:
        raise LocateError("the marker corners are degenerate (collinear); no homography fits them")
    return np.asarray(h / h[2, 2], dtype=np.float64)


def _apply(h: np.ndarray, pts: np.ndarray) -> np.ndarray:
    p = np.c_[pts, np.ones(len(pts))] @ h.T
    return np.asarray(p[:, :2] / p[:, 2:3], dtype=np.float64)


def local_px_per_mm(h_layout_to_photo: np.ndarray, x_mm: float, y_mm: float) -> tuple[float, float]:
    """Local scale of the layout-to-photo map at layout point (x, y).

    Returns
    -------
    (float, float)
        The smaller and larger singular values of the map's Jacobian there: the photo's
        px/mm along its least and best resolved directions.
    """
    h = h_layout_to_photo
    p = h @ np.array([x_mm, y_mm, 1.0])
    u, v, w = p[0] / p[2], p[1] / p[2], p[2]
    jac = np.array(
        [
            [(h[0, 0] - u * h[2, 0]) / w, (h[0, 1] - u * h[2, 1]) / w],
            [(h[1, 0] - v * h[2, 0]) / w, (h[1, 1] - v * h[2, 1]) / w],
        ]
    )
    s = np.linalg.svd(jac, compute_uv=False)
    return float(s[-1]), float(s[0])


def rms(h: np.ndarray, photo: np.ndarray, layout: np.ndarray) -> float:
    d = _apply(h, photo) - layout
    return float(np.sqrt(np.mean(np.sum(d * d, axis=1))))


def _fits_all(cands: list[Candidate], tolerance_mm: float) -> np.ndarray | None:
    """The homography of all candidates when every one is within ``tolerance_mm`` (RMS)."""
    try:
        h = fit_homography(
            np.concatenate([c[1] for c in cands]), np.concatenate([c[2] for c in cands])
        )
    except LocateError:
        return None
    return h if all(rms(h, c[1], c[2]) <= tolerance_mm for c in cands) else None


def robust_fit(
    cands: list[Candidate], drop_above_mm: float
) -> tuple[np.ndarray, list[Candidate], list[tuple[int, float]]]:
    """Fit to the candidates (id, photo (4, 2), layout (4, 2)) that agree, dropping misfits.

    When the fit to all candidates (each id once) has every candidate within
    ``drop_above_mm``, all are kept.  Otherwise, with three or more candidates: first a
    consensus, seeded by each candidate in turn (its 4 corners fix a homography exactly)
    and by each pair of candidates (whose seed counts only with a third marker agreeing);
    candidates whose corners land within ``_SEED_TOLERANCE_MM`` of their layout places
    agree with it, and the largest consensus wins.  Then, leaving one out at a time, the
    worst is dropped while its corners miss by more than ``drop_above_mm`` (RMS) and by
    more than 4 times the others' own RMS, until the fit of all that are left has every
    one within ``drop_above_mm``.  (On a long layout -- markers at both ends of a
    slideway -- one marker's homography, or one end's, extrapolated to the other end
    misses it by far more than the fit of all does: pairs across the ends seed well.)
    Returns the homography, the kept candidates and the dropped (id, miss in mm).
    """
    kept = list(cands)
    dropped: list[tuple[int, float]] = []
    unique = len({c[0] for c in kept}) == len(kept)
    if len(kept) >= 3 and unique:
        h_all = _fits_all(kept, drop_above_mm)
        if h_all is not None:
            return h_all, kept, dropped
    if len(kept) >= 3:
        kept, dropped = _consensus(kept)
    kept, more = _drop_misfits(kept, drop_above_mm)
    return _fit_all_of(kept), kept, dropped + more


def _fit_all_of(cands: list[Candidate]) -> np.ndarray:
    return fit_homography(
        np.concatenate([c[1] for c in cands]), np.concatenate([c[2] for c in cands])
    )


def _consensus(kept: list[Candidate]) -> tuple[list[Candidate], list[tuple[int, float]]]:
    """The largest set of candidates that agree with one seed (one marker, or a pair)."""
    best: tuple[int, float] = (0, 0.0)
    best_set = list(range(len(kept)))
    seeds: list[tuple[int, ...]] = [(j,) for j in range(len(kept))]
    seeds += [
        (i, j)
        for i in range(len(kept))
        for j in range(i + 1, len(kept))
        if kept[i][0] != kept[j][0]
    ]
    for seed in seeds:
        try:
            h = _fit_all_of([kept[j] for j in seed])
        except LocateError:
            continue
        miss = [rms(h, c[1], c[2]) for c in kept]
        agree = [i for i, m in enumerate(miss) if m <= _SEED_TOLERANCE_MM]
        n_ids = len({kept[i][0] for i in agree})
        if len(seed) == 2 and n_ids < 3:
            continue  # a pair's own fit is no evidence: a third marker must agree
        score = (n_ids, -sum(miss[i] for i in agree))
        if score > best:
            best, best_set = score, agree
    if best[0] < 2 or len(best_set) == len(kept):  # two or more markers must agree
        return kept, []
    h = _fit_all_of([kept[i] for i in best_set])
    dropped = [(c[0], rms(h, c[1], c[2])) for i, c in enumerate(kept) if i not in best_set]
    return [kept[i] for i in best_set], dropped


def _drop_misfits(
    kept: list[Candidate], drop_above_mm: float
) -> tuple[list[Candidate], list[tuple[int, float]]]:
    """Leaving one out at a time, drop the worst while it clearly misfits the rest."""
    kept = list(kept)
    dropped: list[tuple[int, float]] = []
    while len(kept) >= 3:
        if len({c[0] for c in kept}) == len(kept) and _fits_all(kept, drop_above_mm) is not None:
            break
        worst, worst_miss, worst_rest = -1, -1.0, 0.0
        for j in range(len(kept)):
            rest = kept[:j] + kept[j + 1 :]
            try:
                h = _fit_all_of(rest)
            except LocateError:
                continue
            miss_j = rms(h, kept[j][1], kept[j][2])
            if miss_j > worst_miss:
                ph = np.concatenate([c[1] for c in rest])
                la = np.concatenate([c[2] for c in rest])
                worst, worst_miss, worst_rest = j, miss_j, rms(h, ph, la)
        if worst < 0 or worst_miss <= max(drop_above_mm, 4.0 * worst_rest):
            break
        dropped.append((kept[worst][0], worst_miss))
        del kept[worst]
    return kept, dropped
