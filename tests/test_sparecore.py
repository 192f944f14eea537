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


def test_work_on_the_spare_core_that_hands_on_work_does_not_wait_for_ever() -> None:
    """Both pool threads busy, each handing on work and waiting for it: the handed-on
    work runs in place (a decision with compound on the work cuts its own watershed)."""
    both = threading.Barrier(2, timeout=5.0)

    def outer(x: int) -> int:
        both.wait()  # both pool threads are taken
        return on_spare_core(1, lambda: x + 1).result(timeout=5.0)

    if (os.cpu_count() or 1) < 2 or cv2.getNumThreads() <= 1:
        pytest.skip("one core or OpenCV on one thread: all work is done in place")
    later = Later([on_spare_core(1, outer, i) for i in range(2)])
    assert tuple(later) == (1, 2)


@pytest.mark.skipif(
    (os.cpu_count() or 1) < 2, reason="one core: the watershed floods in one piece either way"
)
def test_the_watershed_flooded_in_two_bands_is_the_watershed_in_one(monkeypatch) -> None:  # type: ignore[no-untyped-def]
    """Regions of touching discs flooded in two bands at once (two threads) are labelled
    exactly as by one skimage watershed over all (one thread)."""
    import skimage.segmentation

    from printcheck.contacts import watershed_regions

    floods = []
    flood = skimage.segmentation.watershed

    def counted(*args, **kwargs):  # type: ignore[no-untyped-def]
        floods.append(threading.current_thread().name)
        return flood(*args, **kwargs)

    monkeypatch.setattr(skimage.segmentation, "watershed", counted)

    rng = np.random.default_rng(5)
    yy, xx = np.mgrid[0:400, 0:300]
    height = np.zeros((400, 300), np.float32)
    for _ in range(120):  # clusters of overlapping blurred discs
        cy, cx, r = rng.uniform(0, 400), rng.uniform(0, 300), rng.uniform(3, 9)
        height += np.exp(-((yy - cy) ** 2 + (xx - cx) ** 2) / (2 * r * r)).astype(np.float32)
    height += rng.normal(0, 0.01, height.shape).astype(np.float32)
    region = height > 0.3
    before = cv2.getNumThreads()
    try:
        got = []
        for threads in (1, 2):
            cv2.setNumThreads(threads)
            floods.clear()
            got.append(watershed_regions(region, height, px_per_mm=16.0))
            assert len(floods) == threads  # one flood over all; then two bands
    finally:
        cv2.setNumThreads(before)
    assert any(name.startswith("spare-core") for name in floods)  # the second band beside
    (one, n_one), (two, n_two) = got
    assert n_one == n_two and np.array_equal(one, two)
    assert n_one > 60  # discs were cut apart, not only labelled
