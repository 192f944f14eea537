"""Inspect options: checked where they are defined, and resolved command line > job file > default.

The rules are the ones docs/formats.md ("Job settings") and the guide state; lengths use
the international inch of exactly 25.4 mm (International Yard and Pound Agreement, 1959).
"""

from __future__ import annotations

import math

import pytest

from printcheck.errors import OptionError
from printcheck.jobconfig import JobSettings, resolve_settings
from printcheck.layout import card_layout
from printcheck.options import InspectOptions, options_from_settings


@pytest.mark.parametrize(
    ("kwargs", "parameter", "pattern"),
    [
        ({"px_per_mm": 0.0}, "px_per_mm", r"^px_per_mm must be greater than zero, got 0; "),
        ({"px_per_mm": 700.0}, "px_per_mm", r"^px_per_mm must be between 1 and 500 .*got 700"),
        ({"px_per_mm": math.nan}, "px_per_mm", r"^px_per_mm must be"),
        ({"cell": 0.0}, "cell", r"^cell must be greater than zero, got 0; the customary"),
        # 5 mm is 0.19685 in: a tenth of an inch is too small a cell
        ({"cell": 0.1}, "cell", r"^cell must be at least 5 mm \(0\.19685 in\).*got 0\.1 in"),
        ({"cell": math.inf}, "cell", r"^cell must be at least 5 mm"),
        # the built-in card's window is 2 in square: a 3 in cell does not fit it
        ({"cell": 3.0}, "cell", r"^cell 3 in is larger than the window \(2 x 2 in\)"),
        ({"cell": 60.0, "unit": "mm"}, "cell", r"^cell 60 mm is larger than the window"),
        ({"min_spot_mm2": -1.0}, "min_spot_mm2", r"^min_spot_mm2 must be between 0 and 100"),
        ({"surface": "  "}, "surface", r"^surface must be a name on one line"),
        ({"surface": "bed\nway"}, "surface", r"^surface must be a name on one line"),
        ({"unit": "furlong"}, "unit", r"^unit must be one of in, mm, got 'furlong'"),
        ({"compound": "green"}, "compound", r"^compound must be one of blue, red, auto"),
        ({"compound_on": "both"}, "compound_on", r"^compound_on must be one of reference"),
    ],
)
def test_options_are_checked_where_they_are_defined(
    kwargs: dict[str, object], parameter: str, pattern: str
) -> None:
    with pytest.raises(OptionError, match=pattern) as info:
        InspectOptions(**kwargs)  # type: ignore[arg-type]
    assert info.value.parameter == parameter
    assert "\n" not in str(info.value)


def test_good_options_pass_and_keep_their_values() -> None:
    options = InspectOptions(cell=25.0, unit="mm", min_spot_mm2=0.0, surface="bed-front-way")
    assert options.cell_mm == 25.0 and options.min_spot_mm2 == 0.0
    assert InspectOptions(cell=1.0).cell_mm == 25.4  # 1 in, exactly
    # with an explicit scale there is no layout window to hold the cell to
    assert InspectOptions(px_per_mm=10.0, cell=3.0).cell_in_unit == 3.0
    assert InspectOptions().layout_in_use == card_layout()


def test_command_line_wins_over_the_job_file() -> None:
    job = JobSettings(surface="way", unit="mm", cell=25.0, compound="red", min_spot=0.2)
    given = JobSettings(unit="in", cell=1.0)
    merged = resolve_settings(given, job)
    assert (merged.unit, merged.cell) == ("in", 1.0)  # typed: the command line's
    assert (merged.surface, merged.compound, merged.min_spot) == ("way", "red", 0.2)  # the file's
    assert resolve_settings(JobSettings(), JobSettings()) == JobSettings()  # nothing set


def test_a_spec_or_target_given_replaces_the_job_files() -> None:
    job = JobSettings(spec="slideway-precision")
    assert resolve_settings(JobSettings(target=12.0), job).spec is None  # --target wins
    assert resolve_settings(JobSettings(target=12.0), job).target == 12.0
    job_target = JobSettings(target=12.0)
    merged = resolve_settings(JobSettings(spec="roughing"), job_target)
    assert (merged.spec, merged.target) == ("roughing", None)  # --spec wins
    both = resolve_settings(JobSettings(), JobSettings(spec="roughing", target=3.0))
    assert (both.spec, both.target) == ("roughing", None)  # in one file, the spec wins


def test_an_explicit_scale_leaves_no_layout_to_read() -> None:
    merged = resolve_settings(JobSettings(px_per_mm=8.0), JobSettings(layout="/no/such.toml"))
    assert merged.layout is None and merged.px_per_mm == 8.0
    options = options_from_settings(merged)  # the missing file is never read
    assert options.px_per_mm == 8.0 and options.layout is None


def test_options_from_settings_fill_the_defaults_and_make_the_target_spec() -> None:
    options = options_from_settings(JobSettings(target=20.0, unit="mm"), allow_partial=True)
    assert options == InspectOptions(unit="mm", spec=options.spec, allow_partial=True)
    assert options.spec is not None and options.spec.basis_mm == 25.0  # per 25 mm square
    ppi = options_from_settings(JobSettings(target=20.0))
    assert ppi.spec is not None and ppi.spec.basis_mm == 25.4  # points per square inch
    with pytest.raises(OptionError, match=r"^target must be greater than zero, got 0") as info:
        options_from_settings(JobSettings(target=0.0))
    assert info.value.parameter == "target"
    spaced = options_from_settings(JobSettings(surface="  bed-front-way "))
    assert spaced.surface == "bed-front-way"
