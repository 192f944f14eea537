"""Quantiles of large arrays: ``np.quantile``'s linear method, on one partition each.

NumPy (2.x) finds a quantile between two ranks by partitioning at both at once, which on
half a million float32 values costs about as much as sorting them (some 5 ms, as
``np.median`` does); partitioning at one rank and taking the least value above it costs
a tenth.  Segment reads such quantiles of the whole window a dozen times a photo.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

__all__ = ["median", "quantile", "quantiles"]


def quantiles(values: np.ndarray, qs: Sequence[float]) -> list[float]:
    """``np.quantile(values, qs)`` (method "linear") of finite ``values``, as floats.

    Raises
    ------
    ValueError
        With no values, or a ``q`` outside [0, 1].
    """
    v = np.asarray(values).ravel()
    n = v.size
    if n == 0:
        raise ValueError("quantile of no values")
    out = []
    for q in qs:
        if not 0.0 <= q <= 1.0:
            raise ValueError(f"quantile {q} is outside [0, 1]")
        pos = q * (n - 1)
        i = min(int(math.floor(pos)), n - 1)
        t = pos - i
        part = np.partition(v, i)
        a = float(part[i])
        if t == 0.0 or i + 1 >= n:
            out.append(a)
            continue
        b = float(part[i + 1 :].min())
        # numpy's lerp: from the nearer end, so that t = 1 gives b exactly
        out.append(b - (b - a) * (1.0 - t) if t >= 0.5 else a + (b - a) * t)
    return out


def quantile(values: np.ndarray, q: float) -> float:
    """``np.quantile(values, q)`` of finite ``values`` (see :func:`quantiles`)."""
    return quantiles(values, (q,))[0]


def median(values: np.ndarray) -> float:
    """``np.median(values)`` of finite ``values`` (see :func:`quantiles`)."""
    return quantiles(values, (0.5,))[0]
