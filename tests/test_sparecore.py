"""printcheck.sparecore: work on a second core reads as if it had been done in place."""

from __future__ import annotations

import os
import pickle
import threading

import cv2
import numpy as np
import pytest

from printcheck.sparecore import Later, on_spare_core


def test_later_reads_as_the_tuple_of_its_results() -> None:
    gate = threading.Event()

    def slow(x: int) -> int:
        gate.wait(5.0)
        return x * x

    later = Later([on_spare_core(1, slow, i + 1) for i in range(3)])
    gate.set()
    assert len(later) == 3
    assert list(later) == [1, 4, 9]
    assert later[-1] == 9 and later[1:] == (4, 9)
    first, *rest = later
    assert (first, rest) == (1, [4, 9])
    assert pickle.loads(pickle.dumps(later)) == (1, 4, 9)
    with pytest.raises(IndexError):
        later[3]


def test_an_error_on_the_spare_core_is_raised_where_the_result_is_read() -> None:
    def fails() -> int:
        raise ValueError("no")

    later = Later([on_spare_core(1, fails)])
    with pytest.raises(ValueError, match="no"):
        later[0]


@pytest.mark.skipif(
    (os.cpu_count() or 1) < 2, reason="one core: the alternates are decided in place either way"
)
def test_segment_decides_the_same_on_one_thread_as_on_two() -> None:
    """The alternates decided on a spare core are those decided in place (a batch's
    workers hold OpenCV to one thread, and decide everything in place)."""
    from printcheck.layout import card_layout
    from printcheck.locate import locate
    from printcheck.segment import SegmentConfig, segment
    from printcheck.synth.render import Camera, Scene, render_photo

    shot = render_photo(
        Scene(
            image_size=(1400, 1050),
            camera=Camera(tilt_deg=12.0, rotation_deg=20.0, window_fraction=0.45),
            density=14.0,
        ),
        seed=3,
    )
    rect = locate(shot.image, layout=card_layout())
    config = SegmentConfig(compound="blue", px_per_mm=rect.frame.px_per_mm)
    before = cv2.getNumThreads()
    try:
        got = []
        for threads in (1, 2):
            cv2.setNumThreads(threads)
            seg = segment(rect.image, visible=rect.visible, analysed=rect.analysed, config=config)
            got.append([seg.mask, *seg.alternates])
    finally:
        cv2.setNumThreads(before)
    assert all(np.array_equal(a, b) for a, b in zip(*got, strict=True))
    assert got[0][0].any() and not np.array_equal(got[0][1], got[0][2])
