"""Judge: hand-built measurements with exact answers against specs.

Measurements are built by hand (plain dataclasses), so every value is known exactly;
unit conversions are checked against the definition 1 in = 25.4 mm exactly
(International Yard and Pound Agreement, 1959), i.e. 1 in² = 645.16 mm².
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from printcheck.errors import OptionError
from printcheck.judge import describe_cells, judge
from printcheck.measure import BarePatch, Cell, Guidance, Measurement, Spots
from printcheck.spec import Spec, find_spec, target_spec

IN = 25.4


def _cells(densities, *, cell_mm, complete=None, bearing=30.0):
    """Cells of a grid from a (rows, cols) list of densities (points per cell_mm²)."""
    out = []
    for r, row in enumerate(densities):
        for c, d in enumerate(row):
            full = True if complete is None else complete[r][c]
            area = cell_mm**2 if full else cell_mm**2 / 2
            out.append(
                Cell(
                    row=r,
                    col=c,
                    x_mm=c * cell_mm,
                    y_mm=r * cell_mm,
                    width_mm=cell_mm,
                    height_mm=cell_mm if full else cell_mm / 2,
                    area_mm2=area,
                    complete=full,
                    spot_count=int(round(d * area / cell_mm**2)),
                    density=float(d),
                    bearing_percent=bearing,
                )
            )
    return tuple(out)


def make(
    *,
    cell_mm=IN,
    density=20.0,
    bearing=30.0,
    bare_mm=5.0,
    cells=None,
    area_mm2=None,
    rows=None,
    cols=None,
):
    cells = () if cells is None else cells
    rows = rows if rows is not None else (max((c.row for c in cells), default=-1) + 1)
    cols = cols if cols is not None else (max((c.col for c in cells), default=-1) + 1)
    if area_mm2 is None:
        area_mm2 = sum(c.area_mm2 for c in cells) if cells else cell_mm**2
    empty = np.zeros(0)
    spots = Spots(
        empty, empty, empty, empty, empty.astype(bool), empty.astype(int), empty.astype(int)
    )
    return Measurement(
        spots=spots,
        labels=np.zeros((2, 2), np.int32),
        area_mm2=area_mm2,
        spot_count=0 if not math.isfinite(density) else int(round(density * area_mm2 / cell_mm**2)),
        density=density,
        bearing_percent=bearing,
        largest_bare=BarePatch(bare_mm, 12.0, 30.0),
        cells=cells,
        rows=rows,
        cols=cols,
        cell_mm=cell_mm,
        confidence=None,
        guidance=Guidance(),
        size_stats={},
    )


def spec(**kw):
    base = {"name": "t", "title": "test", "basis_mm": IN}
    base.update(kw)
    return Spec(**base)


def by_name(verdict):
    return {c.name: c for c in verdict.checks}


# --------------------------------------------------------------------------- the example


def test_two_of_eight_cells_below_20_ppi():
    # the reason's form: '2 of 8 cells below 20 points per square inch: C1-D1'
    # (rows and cols counted from 1 at the window's top-left)
    grid = [[22, 25, 15, 12], [21, 20, 30, 24]]
    m = make(cells=_cells(grid, cell_mm=IN), density=21.125)
    v = judge(m, spec(min_cell_density=20.0), unit="in")
    (check,) = v.checks
    assert check.name == "cell_density"
    assert check.reason == "2 of 8 cells below 20 points per square inch: C1-D1"
    assert check.target == ">= 20"
    assert check.value == 12.0  # the lowest complete cell
    assert not check.ok and not v.meets
    assert v.name == "t"


def test_all_cells_reach():
    grid = [[22, 25], [21, 20]]  # 20 exactly reaches 20
    v = judge(make(cells=_cells(grid, cell_mm=IN)), spec(min_cell_density=20.0))
    (check,) = v.checks
    assert check.ok and v.meets
    assert (
        check.reason
        == "all 4 cells reach 20 points per square inch (lowest 20 points per square inch)"
    )


# --------------------------------------------------------------------------- units


def test_ppi_spec_judged_on_25_mm_cells():
    # 20 points per square inch = 20 * 625 / 645.16 = 19.3750... per 25 mm square
    target = float(Fraction(20) * 625 / Fraction("645.16"))
    s = spec(min_density=20.0, basis_mm=IN)
    ok = judge(make(cell_mm=25.0, density=19.38), s, unit="mm")
    low = judge(make(cell_mm=25.0, density=19.37), s, unit="mm")
    assert ok.meets and not low.meets
    check = by_name(low)["density"]
    assert check.target == ">= 19.4"
    assert check.reason == (
        "19.37 points per 25 mm square over the window, below the 19.38 points per 25 mm square "
        "needed (20 points per square inch)"
    )
    assert 19.37 < target < 19.38


def test_per_25_mm_spec_judged_on_inch_cells():
    # 16 per 25 mm square = 16 * 645.16 / 625 = 16.516 points per square inch
    s = find_spec("slideway-precision")  # 16 per 25 mm square, from memory (see test_spec)
    target = 16 * 645.16 / 625
    cells = _cells([[16.6, 17.0], [16.5, 30.0]], cell_mm=IN, bearing=30.0)
    v = judge(make(cells=cells, density=20.0, bearing=30.0, bare_mm=5.0), s, unit="in")
    checks = by_name(v)
    assert checks["density"].target == f">= {target:.1f}"  # ">= 16.5"
    assert checks["cell_density"].reason.startswith(
        "1 of 4 cells below 16.5 points per square inch (16 points per 25 mm square): A2"
    )
    assert not v.meets


def test_exact_target_passes_despite_float_noise():
    # 20 ppi measured on 25 mm cells is exactly the converted target: it must pass
    value = 20.0 * 25.0**2 / 25.4**2
    v = judge(make(cell_mm=25.0, density=value), spec(min_density=20.0), unit="mm")
    assert v.meets


def test_other_cell_sizes_are_named():
    v = judge(make(cell_mm=20.0, density=3.0), target_spec(5, basis_mm=IN), unit="mm")
    assert "points per 20 mm square" in v.checks[0].reason
    # 5 ppi on a 20 mm cell: 5 * 400 / 645.16 = 3.1 points per 20 mm square
    assert v.checks[0].target == ">= 3.1"
    assert not v.meets


def test_bad_unit():
    with pytest.raises(OptionError, match="unit"):
        judge(make(), spec(min_density=5.0), unit="cm")


# --------------------------------------------------------------------------- bearing


@pytest.mark.parametrize(
    ("bearing", "ok", "words"),
    [
        (12.0, False, "bearing 12% is below 20%: too little contact"),
        (20.0, True, "bearing 20% is within 20-60%"),
        (38.2, True, "bearing 38.2% is within 20-60%"),
        (60.0, True, "bearing 60% is within 20-60%"),
        (72.5, False, "bearing 72.5% is above 60%: too much contact leaves no oil pockets"),
    ],
)
def test_bearing_range(bearing, ok, words):
    # heavy bearing is a fault too: no oil pockets, the parts wring (ISO 8512-1 clause 9
    # gives the principle; the 60% figure is common practice)
    v = judge(make(bearing=bearing), spec(bearing_min=20.0, bearing_max=60.0))
    (check,) = v.checks
    assert check.name == "bearing" and check.target == "20-60%"
    assert check.ok is ok and v.meets is ok
    assert check.value == bearing
    assert check.reason.startswith(words)


def test_bearing_one_sided():
    lo = judge(make(bearing=9.99), spec(bearing_min=10.0)).checks[0]
    assert lo.target == ">= 10%" and not lo.ok
    assert lo.reason.startswith("bearing 9.99% is below 10%")  # not "10% is below 10%"
    hi = judge(make(bearing=59.0), spec(bearing_max=60.0)).checks[0]
    assert hi.target == "<= 60%" and hi.ok


# --------------------------------------------------------------------------- bare patch


def test_bare_patch_in_mm_and_inches():
    s = spec(max_bare_mm=17.0)
    mm = judge(make(bare_mm=20.0), s, unit="mm").checks[0]
    assert (mm.name, mm.target, mm.value, mm.ok) == ("bare_patch", "<= 17", 20.0, False)
    assert mm.reason.startswith("largest bare patch 20 mm across (centre x 12 mm, y 30 mm)")
    inch = judge(make(bare_mm=20.0), s, unit="in").checks[0]
    assert inch.value == pytest.approx(20.0 / 25.4)  # 0.787 in
    assert inch.target == "<= 0.669"  # 17 / 25.4
    assert "0.79 in across" in inch.reason  # to the hundredth, as the figures beside it
    fine = judge(make(bare_mm=16.9), s, unit="mm").checks[0]
    assert fine.ok


# --------------------------------------------------------------------------- cells


def test_incomplete_cells_are_not_judged():
    grid = [[25, 25, 0]]
    complete = [[True, True, False]]
    cells = _cells(grid, cell_mm=IN, complete=complete)
    check = judge(make(cells=cells), spec(min_cell_density=20.0)).checks[0]
    assert check.ok
    assert check.reason == (
        "all 2 cells reach 20 points per square inch (lowest 25 points per square inch); "
        "1 part cell at the edge not judged"
    )


def test_no_complete_cell_the_window_stands_in():
    # a 20 mm x 20 mm window is smaller than one 1 in cell: its average is the cell
    cells = _cells([[30]], cell_mm=IN, complete=[[False]])
    m = make(cells=cells, density=18.0, area_mm2=400.0)
    check = judge(m, spec(min_cell_density=20.0)).checks[0]
    assert not check.ok and check.value == 18.0
    assert check.reason == (
        "no complete cell in the window, so the window stands in for one: "
        "18 points per square inch is below 20"
    )
    good = judge(make(cells=cells, density=21.0, area_mm2=400.0), spec(min_cell_density=20.0))
    assert good.meets


def test_cell_share():
    # 8 cells, 75% must reach 20: 6 of 8
    grid = [[10, 12, 25, 25], [25, 25, 25, 25]]
    s = spec(min_cell_density=20.0, cell_share=0.75)
    check = judge(make(cells=_cells(grid, cell_mm=IN)), s).checks[0]
    assert check.ok
    assert check.target == ">= 20 in 75% of cells"
    assert check.value == 25.0  # the 6th highest cell density
    assert check.reason == (
        "2 of 8 cells below 20 points per square inch: A1-B1; 6 reach it, 6 must (75%)"
    )
    grid[1][3] = 5
    check = judge(make(cells=_cells(grid, cell_mm=IN)), s).checks[0]
    assert not check.ok
    assert check.value == 12.0
    assert check.reason.startswith("3 of 8 cells below 20 points per square inch: A1-B1; D2")


def test_empty_window():
    m = make(density=math.nan, bearing=math.nan, area_mm2=0.0, bare_mm=math.nan)
    v = judge(m, spec(min_density=5, min_cell_density=5, bearing_min=10, max_bare_mm=10))
    assert not v.meets
    assert all(c.value is None and not c.ok for c in v.checks)
    assert "no analysed area" in v.checks[0].reason


@pytest.mark.parametrize(
    ("cells", "text"),
    [
        ([(0, 2), (0, 3)], "C1-D1"),
        ([(1, 0)], "A2"),
        ([(0, 0), (0, 2), (0, 3), (0, 4), (2, 7)], "A1, C1-E1; H3"),
        (
            [(r, 0) for r in range(8)],
            "A1; A2; A3; A4; A5; A6; and 2 more cells",
        ),
    ],
)
def test_describe_cells(cells, text):
    assert describe_cells(cells) == text


# --------------------------------------------------------------------------- the whole


def test_check_order_and_conjunction():
    s = find_spec("plate-grade-0")  # 25/25 per 25 mm, 20-60%, 15 mm (see test_spec)
    cells = _cells([[26, 27], [25, 30]], cell_mm=25.0)
    m = make(cell_mm=25.0, cells=cells, density=27.0, bearing=35.0, bare_mm=9.0)
    v = judge(m, s, unit="mm")
    assert [c.name for c in v.checks] == ["density", "cell_density", "bearing", "bare_patch"]
    assert v.meets
    m = make(cell_mm=25.0, cells=cells, density=27.0, bearing=35.0, bare_mm=15.5)
    v = judge(m, s, unit="mm")
    assert not v.meets
    assert [c.ok for c in v.checks] == [True, True, True, False]


@settings(max_examples=200, deadline=None)
@given(
    density=st.floats(0, 60),
    bearing=st.floats(0, 100),
    bare=st.floats(0.1, 50),
    cell_mm=st.sampled_from([25.0, 25.4, 20.0]),
    grid=st.lists(st.floats(0, 60), min_size=1, max_size=6),
    target=st.floats(1, 40),
    bmin=st.floats(0, 50),
    bspan=st.floats(1, 50),
    max_bare=st.floats(1, 40),
    basis=st.sampled_from([25.0, 25.4]),
)
def test_meets_is_the_conjunction_of_independent_comparisons(
    density, bearing, bare, cell_mm, grid, target, bmin, bspan, max_bare, basis
):
    s = spec(
        basis_mm=basis,
        min_density=target,
        min_cell_density=target,
        bearing_min=bmin,
        bearing_max=bmin + bspan,
        max_bare_mm=max_bare,
    )
    m = make(
        cell_mm=cell_mm,
        cells=_cells([grid], cell_mm=cell_mm),
        density=density,
        bearing=bearing,
        bare_mm=bare,
    )
    v = judge(m, s, unit="mm")
    # independent: the target per the measurement's cell, scaled by area
    t = target * cell_mm**2 / basis**2
    tol = 1e-9 * max(t, 1.0)
    expect = {
        "density": density >= t - tol,
        "cell_density": all(d >= t - tol for d in grid),
        "bearing": bmin - 1e-9 <= bearing <= bmin + bspan + 1e-9 * max(bmin + bspan, 1),
        "bare_patch": bare <= max_bare + 1e-9 * max(max_bare, 1),
    }
    got = {c.name: c.ok for c in v.checks}
    assert got == expect
    assert v.meets == all(expect.values())
    for c in v.checks:
        assert c.reason and "\n" not in c.reason


def test_how_sure_each_target_is_is_said_beside_the_verdict():
    # the plate's bearing minimum is published (ISO 8512-1:1990 clause 9), its maximum
    # is common practice; its density is from memory
    s = find_spec("plate-grade-0")
    v = judge(make(bearing=30.0), s, unit="mm")
    reasons = {c.name: c.reason for c in v.checks}
    assert reasons["density"].endswith("(target: from memory)")
    assert reasons["bearing"].endswith("(maximum: common practice)")
    assert reasons["bare_patch"].endswith("(target: printcheck's rule)")
    # a spec file without sources says nothing of the kind
    plain = judge(make(bearing=30.0), spec(bearing_min=20.0, bearing_max=60.0))
    assert "(target" not in plain.checks[0].reason
