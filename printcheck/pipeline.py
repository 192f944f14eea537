"""The pipeline: one photo through locate, segment, measure and judge.

This module only chains the stages; each stage is pure and lives in its own module.
"""

from __future__ import annotations

from datetime import datetime
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from printcheck.errors import NoCompoundError, PrintcheckError
from printcheck.options import InspectOptions
from printcheck.result import Result

if TYPE_CHECKING:
    from printcheck.frame import Frame
    from printcheck.load import PhotoFile
    from printcheck.locate import Rectified
    from printcheck.markers import Coarse
    from printcheck.measure import MeasureConfig, Measurement
    from printcheck.segment import Segmentation

__all__ = [
    "InspectOptions",
    "frame_blur_px",
    "inspect_image",
    "inspect_photo",
    "measure_segmented",
]


def inspect_image(
    image: np.ndarray,
    *,
    options: InspectOptions,
    photo: str = "",
    path: str | None = None,
    sha256: str | None = None,
    taken: datetime | None = None,
) -> Result:
    """Inspect one decoded photo ``image`` (M, N, 3) uint8 BGR.

    Raises
    ------
    LocateError, OptionError
        When the photo cannot be measured with these options.
    """
    return _measure_rectified(
        _rectify(image, options),
        options=options,
        photo=photo,
        path=path,
        sha256=sha256,
        taken=taken,
    )


def cores_available() -> int:
    """CPU cores this process may run on (its affinity mask; os.cpu_count where unknown)."""
    import os

    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not on Linux
        return os.cpu_count() or 1


def _rectify(image: np.ndarray, options: InspectOptions, coarse: Coarse | None = None) -> Rectified:
    """The locate stage: markers (or the explicit scale) to the rectified window;
    ``coarse``: the markers already found on a reduced copy (see :func:`inspect_photo`)."""
    from printcheck.locate import LocateConfig, locate, rectify_scale

    loc_config = LocateConfig(allow_partial=options.allow_partial)
    if options.px_per_mm is not None:
        return rectify_scale(
            image, px_per_mm=options.px_per_mm, window=options.scale_window, config=loc_config
        )
    layout = options.layout_in_use
    return locate(image, layout=layout, config=loc_config, coarse=coarse)


def _measure_rectified(
    rect: Rectified,
    *,
    options: InspectOptions,
    photo: str,
    path: str | None,
    sha256: str | None,
    taken: datetime | None,
) -> Result:
    """Segment, measure and judge the rectified window; the photo itself is not needed."""
    from printcheck.judge import judge
    from printcheck.measure import MeasureConfig
    from printcheck.segment import SegmentConfig, segment

    seg = segment(
        rect.image,
        visible=rect.visible,
        analysed=rect.analysed,
        config=SegmentConfig(
            compound=options.compound,  # type: ignore[arg-type]
            compound_on=options.compound_on,  # type: ignore[arg-type]
            px_per_mm=rect.frame.px_per_mm,
            paper_bgr=rect.paper_bgr,
            blur_px=frame_blur_px(rect),
        ),
    )
    spec = options.spec
    meas = measure_segmented(
        seg,
        frame=rect.frame,
        analysed=rect.analysed,
        config=MeasureConfig(
            cell_mm=options.cell_mm,
            min_spot_mm2=options.min_spot_mm2,
            max_bare_mm=None if spec is None else spec.max_bare_mm,
        ),
        photo_px_per_mm=rect.calibration.photo_px_per_mm,
        photo_blur_px=rect.calibration.photo_blur_px,
    )
    if meas.spot_count == 0:
        raise NoCompoundError(_no_compound(options, seg.compound))
    verdict = None if spec is None else judge(meas, spec, unit=options.unit)
    warnings = tuple(rect.warnings) + tuple(seg.warnings)
    if meas.confidence is not None and meas.confidence.doubtful:
        warnings += (f"doubtful photo: {meas.confidence.reason}; consider retaking it",)
    return Result(
        photo=photo,
        path=path,
        sha256=sha256,
        surface=options.surface,
        taken=taken,
        unit=options.unit,
        cell=options.cell_in_unit,
        rectified=rect,
        segmentation=seg,
        measurement=meas,
        verdict=verdict,
        warnings=warnings,
    )


def measure_segmented(
    seg: Segmentation,
    *,
    frame: Frame,
    analysed: np.ndarray,
    config: MeasureConfig | None = None,
    photo_px_per_mm: float | None = None,
    photo_blur_px: float | None = None,
) -> Measurement:
    """The measure stage on what the segment stage found: its mask, with the alternates
    for the range, the surface it could not see, where its colour stands clear of the
    noise, and the bare pixels its contacts need between them to be told apart and where
    it drew their outlines (``config``'s ``part_px`` and ``outline_share`` are the
    segmentation's).
    The one place the two stages are joined (inspect, and the benchmarks and tests that
    rectify a photo themselves)."""
    from dataclasses import replace

    from printcheck.measure import MeasureConfig, measure

    return measure(
        seg.mask,
        frame=frame,
        analysed=analysed,
        config=replace(
            config or MeasureConfig(), part_px=seg.part_px, outline_share=seg.outline_share
        ),
        alternates=seg.alternates,
        photo_px_per_mm=photo_px_per_mm,
        photo_blur_px=photo_blur_px,
        unseen=seg.unseen,
        clear=seg.clear,
    )


def frame_blur_px(rect: Rectified) -> float | None:
    """The photo's blur (Gaussian sigma, where its card's edges tell it) in pixels of the
    rectified frame; None where unknown."""
    cal = rect.calibration
    if cal.photo_blur_px is None or not cal.photo_px_per_mm:
        return None
    return float(cal.photo_blur_px * rect.frame.px_per_mm / cal.photo_px_per_mm)


def _no_compound(options: InspectOptions, chosen: str) -> str:
    what = "blue or red" if options.compound == "auto" else chosen
    if options.compound_on == "work":
        where = "no contact rubbed through a coat of"
    else:
        where = "no spot of"
    return (
        f"{where} {what} marking compound found in the window: this is not a measurement of "
        "zero; check that the print was spotted, the photo shows it in focus, and the "
        "compound settings match (compound on the reference or on the work)"
    )


def _coarse_markers(file: PhotoFile, dictionary: str) -> Coarse | None:
    """The markers on a reduced grey copy of the photo file, or None where libjpeg cannot
    make one (not a plain JPEG, or too small to reduce): then locate reduces the photo."""
    from printcheck.load import reduced_grey
    from printcheck.markers import coarse_markers, reduction

    by = reduction((file.height, file.width))
    copy = reduced_grey(file, by) if by >= 2 else None
    if copy is None:
        return None
    return coarse_markers(*copy, dictionary=dictionary)


def inspect_photo(path: str | Path, *, options: InspectOptions, name: str | None = None) -> Result:
    """Load the photo at ``path`` and inspect it (see :func:`inspect_image`); ``name``:
    the photo's name in the result (default: its file name)."""
    from printcheck.load import decode_photo, read_photo
    from printcheck.sparecore import on_spare_core, spare_core_helps

    file = read_photo(path)
    # the markers are first looked for on a copy a few times smaller; where a spare core
    # helps, libjpeg decodes that copy there (scaled as it decodes) and the markers are
    # found on it while the photo decodes here (the copy is small: any photo may)
    early = None
    if options.px_per_mm is None and spare_core_helps(0):
        early = on_spare_core(0, _coarse_markers, file, options.layout_in_use.dictionary)
    photo = decode_photo(file)
    del file
    where, sha256 = photo.path, photo.sha256
    name = name or photo.name
    taken = photo.taken if photo.taken is not None else photo.file_time
    try:
        rect = _rectify(photo.image, options, None if early is None else early.result())
        # the decoded photo is not needed past locate: let it go before segment and measure
        # (36 MB for 12 MP, 72 MB for 24 MP off the peak memory)
        del photo
        return _measure_rectified(
            rect, options=options, photo=name, path=where, sha256=sha256, taken=taken
        )
    except PrintcheckError as exc:
        # the stages are pure and do not know the file: say which photo it was
        raise type(exc)(f"photo {path}: {exc}") from None
