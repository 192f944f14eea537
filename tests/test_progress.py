"""Tests of printcheck.progress: the trend fit, the projection and the uniformity figure.

The least-squares line (scipy.stats.linregress) is checked against numpy.polyfit and its
covariance (a reference library); projections against scipy.stats.linregress and sums
worked by hand in the comments.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from _hand_results import make_summary
from scipy import stats

from printcheck.builtin_specs import builtin_specs
from printcheck.judge import Verdict
from printcheck.progress import (
    build_progress,
    cells_meeting_percent,
    fit_line,
    progress_text,
    project,
    surface_spec,
    uniformity,
)
from printcheck.records import CellSummary, PassSummary, StoredPass
from printcheck.serde import PROGRESS_FORMAT, progress_to_dict
from printcheck.spec import Spec

PPI20 = Spec("ppi20", "test: 20 points per square inch", 25.4, min_density=20.0)


def _res(
    i: int,
    density: float,
    *,
    unit: str = "in",
    cell: float = 1.0,
    meets: bool | None = None,
) -> PassSummary:
    verdict = None if meets is None else Verdict("ppi20", meets, ())
    return make_summary(i, density, unit=unit, cell=cell, verdict=verdict)


def _cells(densities: list[float], complete: bool = True) -> tuple[CellSummary, ...]:
    return tuple(
        CellSummary(0, col, complete, int(d), d, 10.0, 1.0) for col, d in enumerate(densities)
    )


# ------------------------------------------------------------------ the fit


def test_fit_line_matches_numpy_polyfit_and_its_covariance() -> None:
    # fit_line is scipy.stats.linregress; the reference here is numpy.polyfit, whose
    # covariance (cov=True scales by SSR / (n - 2)) gives the slope's standard error
    rng = np.random.default_rng(7)
    x = np.arange(1, 9, dtype=float)
    y = 3.0 + 2.2 * x + rng.normal(0, 0.8, x.size)
    fit = fit_line(list(x), list(y))
    (slope, intercept), cov = np.polyfit(x, y, 1, cov=True)
    assert (fit.slope, fit.intercept) == pytest.approx((slope, intercept), rel=1e-10)
    assert fit.slope_stderr == pytest.approx(math.sqrt(cov[0, 0]), rel=1e-9)
    # and the textbook form: sqrt(SSR / (n - 2) / Sxx)
    ssr = float(np.sum((y - (slope * x + intercept)) ** 2))
    sxx = float(np.sum((x - x.mean()) ** 2))
    assert fit.slope_stderr == pytest.approx(math.sqrt(ssr / (x.size - 2) / sxx), rel=1e-9)
    # two points: an exact line, no error to estimate
    two = fit_line([1.0, 3.0], [2.0, 8.0])
    assert (two.slope, two.intercept, two.slope_stderr) == pytest.approx((3.0, -1.0, 0.0))


def test_fit_line_refuses_degenerate_input() -> None:
    with pytest.raises(ValueError, match="two or more"):
        fit_line([1.0], [2.0])
    with pytest.raises(ValueError, match="different x"):
        fit_line([1.0, 1.0, 1.0], [1.0, 2.0, 3.0])


# ------------------------------------------------------------------ the projection


def test_exact_linear_sequence() -> None:
    # 5, 9, 13: 4 points a pass; 20 is 7 above 13 -> 1.75 passes -> 2 more, no spread
    p = project([5.0, 9.0, 13.0], 20.0)
    assert p is not None
    assert (p.passes_to_spec, p.low, p.high) == (2, 2, 2)
    assert p.rate == pytest.approx(4.0) and p.rate_stderr == pytest.approx(0.0, abs=1e-12)
    # exactly reaching at a whole pass: 5, 9, 13 -> 21 in 2 passes, not 3
    exact = project([5.0, 9.0, 13.0], 21.0)
    assert exact is not None and exact.passes_to_spec == 2


def test_noisy_sequence_against_linregress_by_hand() -> None:
    d = [6.0, 8.5, 13.0, 14.0, 18.5]
    target = 26.0
    ref = stats.linregress(np.arange(1, 6), d)
    y5 = ref.intercept + ref.slope * 5  # fitted density at pass 5
    gap = target - y5
    expect = (
        math.ceil(gap / ref.slope),
        math.ceil(gap / (ref.slope + ref.stderr)),
        math.ceil(gap / (ref.slope - ref.stderr)),
    )
    p = project(d, target)
    assert p is not None and p.high is not None
    assert (p.passes_to_spec, p.low, p.high) == expect
    assert p.low <= p.passes_to_spec <= p.high
    # by hand: Sxy = 30.5, Sxx = 10 -> slope 3.05, intercept 12 - 9.15 = 2.85,
    # y5 = 18.1, gap 7.9 -> 7.9 / 3.05 = 2.59 -> 3 more passes
    assert p.rate == pytest.approx(3.05) and p.passes_to_spec == 3


def test_fit_uses_only_the_last_passes() -> None:
    d = [1.0, 1.0, 1.0, 1.0, 5.0, 9.0, 13.0, 17.0, 21.0]
    p = project(d, 30.0, fit_passes=5)
    assert p is not None
    slope = np.polyfit(np.arange(5, 10), d[-5:], 1)[0]  # reference: numpy on the last 5
    assert p.rate == pytest.approx(slope) == pytest.approx(4.0)
    assert p.fit_passes == 5 and p.passes_to_spec == 3  # 9 to go at 4 a pass


def test_projection_null_cases_and_zero_when_there() -> None:
    assert project([5.0, 9.0], 20.0) is None  # too few passes
    assert project([5.0, 9.0, 13.0], None) is None  # no target
    assert project([13.0, 9.0, 5.0], 20.0) is None  # moving away
    assert project([9.0, 9.0, 9.0], 20.0) is None  # flat
    done = project([25.0], 20.0)  # already there, even on one pass
    assert done is not None and (done.passes_to_spec, done.low, done.high) == (0, 0, 0)
    assert done.rate is None  # one pass: nothing fitted
    there = project([5.0, 12.0, 21.0], 20.0)
    assert there is not None and there.passes_to_spec == 0


def test_high_is_open_when_the_rate_could_be_zero() -> None:
    # slope 1.0 with a standard error above 1: the upper bound is open
    d = [5.0, 9.0, 4.0, 8.0]
    ref = stats.linregress(np.arange(1, 5), d)
    assert ref.slope - ref.stderr <= 0 < ref.slope
    p = project(d, 20.0)
    assert p is not None and p.high is None and p.passes_to_spec >= p.low >= 1


# ------------------------------------------------------------------ figures


def test_density_target_converts_between_squares() -> None:
    # a count per area scales with the area: 20 per in² (645.16 mm², 1 in = 25.4 mm
    # exactly) is 20 * 625 / 645.16 = 19.375... per 25 mm square
    assert PPI20.density_target(25.0) == pytest.approx(20 * 625 / 645.16)
    assert PPI20.density_target(25.4) == pytest.approx(20.0)
    both = Spec("x", "x", 25.4, min_density=10.0, min_cell_density=8.0)
    assert both.density_target(25.4, per_cell=True) == 8.0
    assert both.density_target(25.4) == 10.0
    assert Spec("b", "b", 25.4, bearing_max=60.0).density_target(25.4) is None


def _with_cells(cells: tuple[CellSummary, ...]) -> PassSummary:
    from dataclasses import replace

    return replace(make_summary(1, 10.0), cells=cells)


def test_uniformity_is_one_minus_cv_of_complete_cells() -> None:
    cells = _cells([10.0, 20.0, 30.0, 40.0]) + _cells([99.0], complete=False)  # left out
    d = np.array([10.0, 20.0, 30.0, 40.0])
    cv = d.std() / d.mean()  # reference: numpy, population std
    assert uniformity(_with_cells(cells)) == pytest.approx(100 * (1 - cv), abs=0.005)
    assert uniformity(_with_cells(_cells([7.0] * 4))) == 100.0
    assert uniformity(_with_cells(cells[:1])) is None
    assert uniformity(_with_cells(_cells([0.0] * 3))) is None
    wild = _cells([0.0, 0.0, 0.0, 40.0])  # CV = 1.73
    assert uniformity(_with_cells(wild)) == 0.0
    assert cells_meeting_percent(_with_cells(cells), 20.0) == 75.0
    assert cells_meeting_percent(_with_cells(cells), None) is None


# ------------------------------------------------------------------ the contract


def test_build_progress_contract() -> None:
    passes = [_res(i + 1, d, meets=d >= 20) for i, d in enumerate([5.0, 9.0, 13.0])]
    out = progress_to_dict(build_progress("bed-front-way", passes, spec=PPI20))
    assert out["format"] == PROGRESS_FORMAT == "printcheck-progress/1"
    assert out["surface"] == "bed-front-way" and out["spec"] == "ppi20"
    assert [p["pass"] for p in out["passes"]] == [1, 2, 3]
    for key in ("pass", "photo", "taken", "density", "bearing_percent", "meets", "uniformity"):
        assert key in out["passes"][0]
    assert out["passes"][0]["meets"] is False and out["passes"][1]["photo"] == "IMG_0002.jpg"
    assert out["passes"][0]["taken"] == "2026-11-11T10:00:00"
    proj = out["projection"]
    assert (proj["passes_to_spec"], proj["low"], proj["high"]) == (2, 2, 2)
    # too few passes
    assert build_progress("s", passes[:2], spec=PPI20).projection is None


def test_build_progress_converts_passes_counted_on_another_cell() -> None:
    # pass 1 counted per 25 mm square, pass 2-3 per inch: pass 1 is shown per inch
    passes = [_res(1, 10.0, unit="mm", cell=25.0), _res(2, 12.0), _res(3, 14.0)]
    out = build_progress("s", passes, spec=PPI20)
    assert out.passes[0].density == pytest.approx(10.0 * 645.16 / 625, abs=0.005)
    assert out.unit == "in" and out.targets.density == pytest.approx(20.0)


def _stored(i: int, density: float, *, name: str | None, spec: Spec | None) -> StoredPass:
    return StoredPass(i, _res(i, density), name, spec, "2026-12-01T00:00:00+00:00")


def test_surface_spec_takes_the_kept_targets_else_a_builtin_of_the_name() -> None:
    kept = [_stored(i + 1, d, name="ppi20", spec=PPI20) for i, d in enumerate([5.0, 9.0, 13.0])]
    assert surface_spec(kept) == PPI20
    out = build_progress("s", [p.summary for p in kept], spec=surface_spec(kept))
    assert out.spec == "ppi20" and out.projection is not None
    assert out.projection.passes_to_spec == 2
    # a built-in spec named in the history, without kept targets
    builtin = builtin_specs()[0]
    named = [_stored(1, 5.0, name=builtin.name, spec=None)]
    assert surface_spec(named) == builtin
    # a name that is no built-in, without targets: no spec (the name is still shown)
    assert surface_spec([_stored(1, 5.0, name="our-own", spec=None)]) is None
    assert surface_spec([]) is None


def test_progress_text_says_the_projection() -> None:
    passes = [_res(i + 1, d, meets=False) for i, d in enumerate([5.0, 9.0, 13.0])]
    text = progress_text(build_progress("bed", passes, spec=PPI20))
    assert "bed: 3 passes" in text and "about 2 more passes to 20" in text
    assert " 13.0 " in text
    short = progress_text(build_progress("bed", passes[:1], spec=PPI20))
    assert "too few passes" in short


def test_projection_words_give_one_value_when_the_range_is_one() -> None:
    import dataclasses

    from printcheck.progress import projection_words

    # an exact rise of 4 per pass has no spread: low == high == 2 ("likely 2", not "2 to 2")
    passes = [_res(i + 1, d, meets=False) for i, d in enumerate([5.0, 9.0, 13.0])]
    progress = build_progress("bed", passes, spec=PPI20)
    assert progress.projection is not None
    assert (progress.projection.low, progress.projection.high) == (2, 2)
    words = projection_words(progress)
    assert "(likely 2;" in words and "2 to 2" not in words
    wide = dataclasses.replace(
        progress, projection=dataclasses.replace(progress.projection, low=1, high=3)
    )
    assert "(likely 1 to 3;" in projection_words(wide)
    open_ended = dataclasses.replace(
        progress, projection=dataclasses.replace(progress.projection, high=None)
    )
    assert "(likely 2 or more;" in projection_words(open_ended)
