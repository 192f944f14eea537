"""HEIC/HEIF, the format phones save by default, read through pillow-heif."""

from __future__ import annotations

from datetime import datetime
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from printcheck.load import is_photo_name, load_photo, photo_taken

pillow_heif = pytest.importorskip("pillow_heif")


def test_heic_photo_decodes_with_its_exif_time(tmp_path: Path) -> None:
    pillow_heif.register_heif_opener()
    rgb = np.zeros((96, 128, 3), np.uint8)
    rgb[..., 2] = 180  # blue
    rgb[:32, :40] = (220, 30, 30)  # a red block at the top-left
    exif = Image.Exif()
    exif.get_ifd(0x8769)[36867] = "2026:11:30 10:22:31"  # EXIF DateTimeOriginal
    path = tmp_path / "IMG_0042.HEIC"
    Image.fromarray(rgb).save(path, exif=exif.tobytes(), quality=95)
    assert is_photo_name(path)  # the suffix is matched whatever its case
    photo = load_photo(path)
    assert photo.image.shape == (96, 128, 3) and photo.image.dtype == np.uint8
    assert photo.taken == datetime(2026, 11, 30, 10, 22, 31)
    assert photo_taken(path) == photo.taken
    # BGR order, same picture within lossy-coding error
    assert photo.image[10, 10, 2] > 180 and photo.image[10, 10, 0] < 80
    assert photo.image[80, 100, 0] > 140 and photo.image[80, 100, 2] < 60
