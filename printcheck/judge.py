"""Judge: a spec's targets against a measurement, one check per target.

(Interface fixed here; the implementation is being built.)
"""

from __future__ import annotations

from dataclasses import dataclass

from printcheck.measure import Measurement
from printcheck.spec import Spec

__all__ = ["Check", "Verdict", "judge"]


@dataclass(frozen=True)
class Check:
    """One target of a spec, checked.

    ``target`` is a short text such as ``">= 20"``; ``value`` the measured figure in the
    same terms (densities in points per the result's cell, percentages, lengths in the
    result's unit); ``reason`` a plain sentence a fitter can act on.
    """

    name: str
    target: str
    value: float | None
    ok: bool
    reason: str


@dataclass(frozen=True)
class Verdict:
    """The spec's verdict: ``meets`` is the conjunction of every check."""

    name: str
    meets: bool
    checks: tuple[Check, ...]


def judge(measurement: Measurement, spec: Spec, *, unit: str = "in") -> Verdict:
    """Check ``measurement`` against ``spec``, reporting values in ``unit``."""
    raise NotImplementedError
