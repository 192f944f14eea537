"""printcheck.ranks and the block quantiles against NumPy's own quantiles (the reference:
``np.quantile``, method "linear", and ``np.median``)."""

from __future__ import annotations

import numpy as np
import pytest

from printcheck.evidence import block_quantiles
from printcheck.ranks import median, quantile, quantiles


@pytest.mark.parametrize("n", [1, 2, 3, 10, 1001, 20_000])
def test_quantiles_equal_numpy(n: int) -> None:
    rng = np.random.default_rng(n)
    values = rng.normal(size=n).astype(np.float32)
    values[::3] = np.round(values[::3])  # ties, as a smooth map's upsampled values have
    qs = (0.0, 0.005, 0.02, 0.2, 0.5, 0.9, 0.98, 0.995, 1.0)
    got = quantiles(values, qs)
    assert got == pytest.approx([float(np.quantile(values, q)) for q in qs], abs=1e-6)
    assert quantile(values, 0.9) == pytest.approx(float(np.quantile(values, 0.9)), abs=1e-6)
    assert median(values) == pytest.approx(float(np.median(values)), abs=1e-6)


def test_quantiles_leave_their_input_alone_and_refuse_nonsense() -> None:
    values = np.arange(10.0)[::-1].copy()
    before = values.copy()
    assert median(values) == 4.5
    assert np.array_equal(values, before)
    with pytest.raises(ValueError):
        median(np.array([]))
    with pytest.raises(ValueError):
        quantile(values, 1.5)


@pytest.mark.parametrize("block", [50, 75])
def test_large_blocks_are_read_on_every_kth_row_and_column(block: int) -> None:
    """A block over 24 px is read on every k-th row and column of it (k = block // 24),
    counted from the block's own first row and column; blocks cut by the image's edge
    read what lies inside."""
    rng = np.random.default_rng(block)
    values = rng.normal(size=(2 * block + 17, 3 * block - 9)).astype(np.float32)
    valid = rng.random(values.shape) > 0.3
    qs = (0.05, 0.5, 0.98)
    grids, count = block_quantiles(values, valid, block, qs)
    k = block // 24
    for r in range(grids.shape[1]):
        for c in range(grids.shape[2]):
            sl = (slice(r * block, (r + 1) * block, k), slice(c * block, (c + 1) * block, k))
            read = values[sl][valid[sl]]
            assert count[r, c] == read.size
            for i, q in enumerate(qs):
                assert grids[i, r, c] == pytest.approx(np.quantile(read, q), abs=1e-5)
