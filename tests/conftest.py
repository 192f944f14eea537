"""Shared test fixtures."""

from __future__ import annotations

import pytest


@pytest.fixture(autouse=True)
def _isolated_history(
    tmp_path_factory: pytest.TempPathFactory, monkeypatch: pytest.MonkeyPatch
) -> None:
    """No test ever writes to the user's real history database."""
    monkeypatch.setenv("PRINTCHECK_DB", str(tmp_path_factory.mktemp("db") / "history.sqlite"))
    monkeypatch.delenv("PRINTCHECK_DEBUG", raising=False)


@pytest.fixture(scope="session")
def small_job(tmp_path_factory: pytest.TempPathFactory):  # type: ignore[no-untyped-def]
    """A rendered 3-pass job (small photos, meaningless shuffled names) and its truth.

    Returns (folder, photos) where photos are :class:`printcheck.synth.job.JobPhoto` in
    pass order.  Tests must not write into the folder (give --out elsewhere).
    """
    from printcheck.synth.job import write_job
    from printcheck.synth.render import Camera

    folder = tmp_path_factory.mktemp("small-job")
    cameras = [
        Camera(tilt_deg=12.0, rotation_deg=8.0, window_fraction=0.36, tilt_axis_deg=30.0),
        Camera(tilt_deg=25.0, rotation_deg=-15.0, window_fraction=0.34, tilt_axis_deg=200.0),
        Camera(tilt_deg=5.0, rotation_deg=95.0, window_fraction=0.38, tilt_axis_deg=120.0),
    ]
    photos = write_job(
        folder,
        seed=11,
        passes=3,
        surface_name="test-way",
        image_size=(1600, 1200),  # ~11 px/mm at the window: a modest phone photo
        shuffle_names=True,
        cameras=cameras,
    )
    return folder, photos
