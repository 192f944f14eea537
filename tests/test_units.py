"""Units: lengths, areas and densities against their definitions.

The international inch is exactly 25.4 mm (International Yard and Pound Agreement,
1959), so 1 in² = 645.16 mm² exactly.  A density is a count per area, so it converts
with the square of the length ratio.
"""

from __future__ import annotations

import math
from fractions import Fraction

import pytest
from hypothesis import given
from hypothesis import strategies as st

from printcheck.errors import OptionError
from printcheck.units import (
    MM_PER_IN,
    convert_density,
    default_cell,
    from_mm,
    parse_length,
    to_mm,
)
from printcheck.wording import density_words

lengths = st.floats(min_value=1e-6, max_value=1e6, allow_nan=False, allow_infinity=False)


def test_inch_is_exactly_25_4_mm():
    # International Yard and Pound Agreement (1959): 1 in = 25.4 mm exactly.
    assert Fraction(str(MM_PER_IN)) == Fraction(254, 10)
    # hence 1 in² = 645.16 mm² exactly (decimal arithmetic, no rounding)
    assert Fraction(str(MM_PER_IN)) ** 2 == Fraction("645.16")
    assert to_mm(1.0, "in") ** 2 == pytest.approx(645.16, rel=1e-15)


def test_20_ppi_is_19_4_per_25_mm_square():
    # 20 points / 645.16 mm² * 625 mm² = 19.3750... (exact by the 1959 inch)
    exact = Fraction(20) * 625 / Fraction("645.16")
    got = convert_density(20.0, from_cell_mm=25.4, to_cell_mm=25.0)
    assert got == pytest.approx(float(exact), rel=1e-12)
    assert round(got, 1) == 19.4
    # and back: 19.4 per 25 mm square is 20.02 points per square inch
    assert convert_density(19.4, from_cell_mm=25.0, to_cell_mm=25.4) == pytest.approx(
        float(Fraction("19.4") * Fraction("645.16") / 625), rel=1e-12
    )


def test_density_from_a_count_agrees_in_both_units():
    # A 2 in x 2 in window (50.8 mm square) with 80 spots: 80 / 4 in² = 20 per in²;
    # the same window in mm: 80 * 625 / 2580.64 mm² per 25 mm square.
    count = 80
    area_in2 = 2.0 * 2.0
    area_mm2 = to_mm(2.0, "in") ** 2
    assert area_mm2 == pytest.approx(4 * 645.16, rel=1e-14)
    ppi = count / area_in2
    per_25 = count * 25.0**2 / area_mm2
    assert convert_density(ppi, from_cell_mm=25.4, to_cell_mm=25.0) == pytest.approx(per_25)
    assert per_25 == pytest.approx(80 * 625 / 2580.64, rel=1e-14)


@given(lengths)
def test_lengths_round_trip(value):
    assert from_mm(to_mm(value, "in"), "in") == pytest.approx(value, rel=1e-14)
    assert from_mm(to_mm(value, "mm"), "mm") == value


@given(
    st.floats(min_value=1e-3, max_value=1e4),
    st.floats(min_value=0.5, max_value=200.0),
    st.floats(min_value=0.5, max_value=200.0),
)
def test_densities_round_trip(density, a_mm, b_mm):
    there = convert_density(density, from_cell_mm=a_mm, to_cell_mm=b_mm)
    back = convert_density(there, from_cell_mm=b_mm, to_cell_mm=a_mm)
    assert back == pytest.approx(density, rel=1e-12)
    # the count in a fixed area is the same whichever square it is stated per
    assert density / a_mm**2 == pytest.approx(there / b_mm**2, rel=1e-12)


def test_cells_and_windows_round_trip():
    # the customary cells: 1 in and 25 mm (common practice)
    assert default_cell("in") == 1.0
    assert default_cell("mm") == 25.0
    assert to_mm(default_cell("in"), "in") == 25.4
    assert parse_length("1in") == 25.4
    assert from_mm(parse_length("25mm"), "in") == pytest.approx(25 / 25.4)
    # a 2 in window is 50.8 mm, 4 in², 2580.64 mm²
    w = parse_length("2in")
    assert w == pytest.approx(50.8)
    assert from_mm(w, "in") == pytest.approx(2.0)
    assert from_mm(from_mm(w * w, "in"), "in") == pytest.approx(4.0)


@pytest.mark.parametrize(
    ("text", "mm"),
    [
        ("2in", 50.8),
        ("2 in", 50.8),
        ("2IN", 50.8),
        ("2 inches", 50.8),
        ('2"', 50.8),
        ("50mm", 50.0),
        ("50", 50.0),
        ("0.5in", 12.7),
        (".5in", 12.7),
        ("3.", 3.0),
    ],
)
def test_parse_length(text, mm):
    assert parse_length(text) == pytest.approx(mm)


def test_parse_length_default_unit():
    assert parse_length("2", default_unit="in") == pytest.approx(50.8)


@pytest.mark.parametrize("text", ["0", "0mm", "-2in", "abc", "", "2cm", "9" * 400])
def test_parse_length_rejects(text):
    with pytest.raises(OptionError, match="cell"):
        parse_length(text, what="cell")


def test_bad_unit():
    with pytest.raises(OptionError, match="unit must be 'in' or 'mm', got 'cm'"):
        to_mm(1.0, "cm")
    with pytest.raises(OptionError, match="unit"):
        from_mm(1.0, "feet")


@pytest.mark.parametrize(
    ("cell_mm", "unit", "words"),
    [
        (25.4, "in", "points per square inch"),
        (25.4, "mm", "points per square inch"),
        (25.0, "mm", "points per 25 mm square"),
        (20.0, "mm", "points per 20 mm square"),
        (12.5, "mm", "points per 12.5 mm square"),
        (50.8, "in", "points per 2 in square"),
    ],
)
def test_density_words(cell_mm, unit, words):
    assert density_words(cell_mm, unit) == words


def test_density_words_tolerates_float_noise():
    assert density_words(to_mm(1.0, "in") * (1 + 1e-12), "mm") == "points per square inch"


def test_the_two_customary_cells_differ_by_3_2_percent_in_area():
    # 645.16 / 625 = 1.032256 exactly: a count per square inch is 3.2% above the same
    # surface's count per 25 mm square.
    ratio = convert_density(1.0, from_cell_mm=25.0, to_cell_mm=25.4)
    assert ratio == pytest.approx(1.032256, rel=1e-12)
    assert math.isclose(ratio, float(Fraction("645.16") / 625), rel_tol=1e-12)
