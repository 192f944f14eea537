"""Per-job settings: a ``printcheck.toml`` beside the photos.

A job file sets, once for a job, what would otherwise be typed on every command::

    surface = "bed-front-way"
    layout = "card-2in.toml"      # relative to this file's folder
    spec = "slideway-precision"   # a built-in spec name or a spec file
    unit = "in"
    cell = 1.0

Precedence, highest first: the command-line option; the job file (``--config FILE``,
else ``printcheck.toml`` in the photos' folder); printcheck's default.
:func:`resolve_settings` applies the first two (the command line's values are job
settings too); :func:`printcheck.options.options_from_settings` fills in the defaults.
The format is in docs/formats.md ("Job settings").
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields, replace
from pathlib import Path
from typing import Any

from printcheck.errors import OptionError
from printcheck.tomlfile import read_toml, shown_key

__all__ = ["JOB_FILE", "JobSettings", "read_job_settings", "find_job_file", "resolve_settings"]

JOB_FILE = "printcheck.toml"


@dataclass(frozen=True)
class JobSettings:
    """Settings from a job file; ``None`` means "not set here"."""

    surface: str | None = None
    layout: str | None = None  # absolute path, resolved against the job file's folder
    px_per_mm: float | None = None
    spec: str | None = None  # a built-in name, or an absolute path to a spec file
    target: float | None = None
    unit: str | None = None
    cell: float | None = None
    compound: str | None = None
    compound_on: str | None = None
    min_spot: float | None = None
    source: str | None = None
    # how a batch groups and orders its photos, and where its history is (docs/guide.md)
    machine: str | None = None
    stations: tuple[str, ...] | None = None
    group: str | None = None
    order: str | None = None
    history: str | None = None  # absolute path, resolved against the job file's folder


_TYPES: dict[str, tuple[type, ...]] = {
    "surface": (str,),
    "layout": (str,),
    "px_per_mm": (int, float),
    "spec": (str,),
    "target": (int, float),
    "unit": (str,),
    "cell": (int, float),
    "compound": (str,),
    "compound_on": (str,),
    "min_spot": (int, float),
    "machine": (str,),
    "stations": (list,),
    "group": (str,),
    "order": (str,),
    "history": (str,),
}
_ZERO_OK = {"min_spot"}  # as on the command line: --min-spot 0 keeps every speck
_CHOICES = {
    "unit": ("in", "mm"),
    "compound": ("blue", "red", "auto"),
    "compound_on": ("reference", "work"),
    "group": ("auto", "folder", "name", "stations", "photo"),
    "order": ("time", "name"),
}


def find_job_file(folder: str | Path) -> Path | None:
    """``folder/printcheck.toml`` when it exists."""
    candidate = Path(folder) / JOB_FILE
    return candidate if candidate.is_file() else None


def read_job_settings(path: str | Path) -> JobSettings:
    """Read and validate a job file.

    Raises
    ------
    OptionError
        One line naming the file, the key and the problem.
    """
    path = Path(path)
    data = read_toml(path, kind="job settings", error=OptionError)
    values: dict[str, Any] = {}
    value: Any
    for key, value in data.items():
        if key not in _TYPES:
            raise OptionError(
                f"job settings {path}: {shown_key(key)}: unknown key; "
                f"expected one of {sorted(_TYPES)}"
            )
        if key == "stations":
            values[key] = _station_names(path, value)
            continue
        if isinstance(value, bool) or not isinstance(value, _TYPES[key]):
            kind = "text" if _TYPES[key] == (str,) else "a number"
            raise OptionError(f"job settings {path}: {key}: must be {kind}, got {value!r}")
        if key in _CHOICES and value not in _CHOICES[key]:
            choices = ", ".join(_CHOICES[key])
            raise OptionError(
                f"job settings {path}: {key}: must be one of {choices}, got {value!r}"
            )
        if _TYPES[key] == (int, float):
            try:
                value = float(value)  # type: ignore[arg-type]  # an int or float by the check above
            except OverflowError:  # a TOML integer too large for a float
                value = math.inf
            if not math.isfinite(value):
                raise OptionError(
                    f"job settings {path}: {key}: must be a finite number, got {data[key]!r}"
                )
            if key in _ZERO_OK:
                if value < 0:
                    raise OptionError(
                        f"job settings {path}: {key}: must be zero or more, got {value!r}"
                    )
            elif value <= 0:
                raise OptionError(
                    f"job settings {path}: {key}: must be greater than zero, got {value!r}"
                )
        elif not str(value).strip() or any(ord(ch) < 32 or ord(ch) == 127 for ch in str(value)):
            raise OptionError(
                f"job settings {path}: {key}: must be one line of text that is not blank, "
                f"got {value!r}"
            )
        values[key] = value
    base = path.parent
    if "layout" in values:
        values["layout"] = str((base / values["layout"]).resolve())
    if "history" in values:
        values["history"] = str((base / values["history"]).resolve())
    if "spec" in values and values["spec"].endswith(".toml"):
        values["spec"] = str((base / values["spec"]).resolve())
    names = {f.name for f in fields(JobSettings)}
    return JobSettings(**{k: v for k, v in values.items() if k in names}, source=str(path))


def _station_names(path: Path, value: Any) -> tuple[str, ...]:
    """The ``stations`` list: names on one line each, none twice."""
    if not isinstance(value, list) or not value:
        raise OptionError(
            f"job settings {path}: stations: must be a list of names, "
            f'e.g. ["headstock", "middle", "tailstock"], got {value!r}'
        )
    names: list[str] = []
    for item in value:
        if (
            not isinstance(item, str)
            or not item.strip()
            or any(ord(ch) < 32 or ord(ch) == 127 or ch == "/" for ch in item)
        ):
            raise OptionError(
                f"job settings {path}: stations: each must be a name on one line "
                f"(no '/'), got {item!r}"
            )
        if item.strip() in names:
            raise OptionError(f"job settings {path}: stations: {item.strip()!r} is listed twice")
        names.append(item.strip())
    return tuple(names)


def resolve_settings(given: JobSettings, job: JobSettings) -> JobSettings:
    """Each setting from ``given`` (the command line) when set there, else from ``job``.

    Two settings decide others: an explicit scale (``px_per_mm``) leaves no layout to
    read, and a spec or a quick target given on the command line replaces whichever of the
    two the job file sets (when both end up set, the spec wins and the target is dropped).
    Pure: nothing is read; what neither sets stays None (the default applies later).
    """
    values = {f.name: (getattr(given, f.name), getattr(job, f.name)) for f in fields(JobSettings)}
    merged = JobSettings(**{k: job_v if cli is None else cli for k, (cli, job_v) in values.items()})
    if given.spec is None and given.target is not None:
        merged = replace(merged, spec=None)
    if merged.spec is not None:
        merged = replace(merged, target=None)
    if merged.px_per_mm is not None:
        merged = replace(merged, layout=None)
    return merged
