"""Passes made of stations: which photos of a batch form one pass, and at which station.

After a spotting pass the fitter checks the print at several places (stations) along a
long surface.  A batch groups its photos into passes by this rule (docs/guide.md,
"Stations"), first match wins unless ``group`` (job file) or ``--group`` says which:

``folder``
    The batch folder holds no photos of its own but subfolders with photos: each
    subfolder is one pass (its name is the pass's key).
``name``
    Every photo's name carries a station token (``st2``, ``station-tailstock``) and a
    pass token (``p3``, ``pass3``): ``p3-st2.jpg`` is station 2 of pass 3.
``stations``
    The job file lists the stations (``stations = ["headstock", "middle", "tailstock"]``)
    and the folder is flat: the photos, in order, are taken station by station, so each
    run of as many photos as there are stations is one pass.
``photo``
    Otherwise each photo is a pass of its own (as printcheck always did).

Within a pass a photo's station is its station token, else the job file's station
names in the order taken, else its number in the order taken (``1``, ``2`` ...).

Order: by the camera's time (EXIF DateTimeOriginal), then the file time, then the name;
``order = "name"`` (``--order name``) orders by name instead, numbers in names by value
(``p2`` before ``p10``).
"""

from __future__ import annotations

import hashlib
import json
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any

from printcheck.errors import OptionError

__all__ = [
    "GROUPS",
    "ORDERS",
    "Planned",
    "natural_key",
    "pass_token",
    "station_token",
    "plan_passes",
    "settings_dict",
    "settings_key",
    "settings_changes",
]

GROUPS = ("auto", "folder", "name", "stations", "photo")
ORDERS = ("time", "name")

_SEP = r"(?:^|(?<=[-_ .]))"
_STATION = re.compile(_SEP + r"(?:station[-_ ]?([a-z0-9]+)|st[-_ ]?(\d+))(?=$|[-_ .])", re.I)
_PASS = re.compile(_SEP + r"(?:pass|p)[-_ ]?(\d+)(?=$|[-_ .])", re.I)


def natural_key(name: str) -> tuple[Any, ...]:
    """Sort key of a name with its numbers by value: ``p2`` before ``p10``."""
    parts = re.split(r"(\d+)", name.lower())
    return tuple((0, int(p)) if p.isdigit() else (1, p) for p in parts if p)


def station_token(name: str) -> str | None:
    """The station a photo's name gives (``st2`` -> ``"2"``; ``station-tailstock`` ->
    ``"tailstock"``), or None."""
    m = _STATION.search(Path(name).stem)
    return None if m is None else (m.group(1) or m.group(2)).lower()


def pass_token(name: str) -> int | None:
    """The pass number a photo's name gives (``p3``, ``pass3``), or None."""
    m = _PASS.search(Path(name).stem)
    return None if m is None else int(m.group(1))


@dataclass(frozen=True)
class Planned:
    """One photo of a batch as it will be recorded.

    ``pass_key`` groups the photos of one pass (None: a pass of its own); ``station``
    is its station (None: the only one); ``sort_time`` is the time the history orders it
    by (the photos' own times, handed out in the batch's order).
    """

    path: Path
    taken: datetime | None
    file_time: datetime
    pass_key: str | None
    station: str | None
    sort_time: datetime


def _time_key(item: Any) -> tuple[Any, ...]:
    return (item.taken or item.file_time, item.file_time, natural_key(item.path.name))


def _name_key(item: Any) -> tuple[Any, ...]:
    return (natural_key(item.path.name),)


def plan_passes(
    top: Sequence[Any],
    sub: Mapping[str, Sequence[Any]],
    *,
    group: str = "auto",
    order: str = "time",
    stations: Sequence[str] = (),
) -> tuple[str, list[Planned]]:
    """Group a batch's photos into passes and stations (see the module docstring).

    Parameters
    ----------
    top : sequence of BatchItem
        The photos directly in the batch folder.
    sub : mapping of str to sequence of BatchItem
        The photos of each subfolder, by subfolder name.
    group : {"auto", "folder", "name", "stations", "photo"}
    order : {"time", "name"}
    stations : sequence of str
        Station names from the job file, in the order they are photographed.

    Returns
    -------
    (str, list of Planned)
        The rule used and the photos in the batch's order (pass by pass, station by
        station).

    Raises
    ------
    OptionError
        The rule asked for does not fit the folder (one line saying why).
    """
    if group not in GROUPS:
        raise OptionError(f"group must be one of {', '.join(GROUPS)}, got {group!r}")
    if order not in ORDERS:
        raise OptionError(f"order must be one of {', '.join(ORDERS)}, got {order!r}")
    key = _name_key if order == "name" else _time_key
    used = [(n, list(items)) for n, items in sub.items() if items]
    if group == "auto":
        if used and not top:
            group = "folder"
        elif top and all(station_token(i.path.name) for i in top):
            group = "name"
        elif stations and top:
            group = "stations"
        else:
            group = "photo"
    passes: list[tuple[str | None, list[tuple[Any, str | None]]]] = []
    if group == "folder":
        if not used:
            raise OptionError("group folder: the folder has no subfolders with photos")
        if top:
            names = ", ".join(i.path.name for i in top[:3])
            raise OptionError(
                f"group folder: photos beside the pass subfolders ({names}); move them into "
                "a pass's subfolder or give --group photo"
            )
        ordered = sorted(
            used,
            key=lambda kv: (
                natural_key(kv[0]) if order == "name" else min(_time_key(i) for i in kv[1])
            ),
        )
        for name, items in ordered:
            passes.append((name, _stationed(sorted(items, key=key), stations)))
    elif group == "name":
        missing = [i.path.name for i in top if station_token(i.path.name) is None]
        if missing:
            raise OptionError(
                f"group name: photo {missing[0]} names no station; name it like p2-st1.jpg"
            )
        nopass = [i.path.name for i in top if pass_token(i.path.name) is None]
        if nopass:
            raise OptionError(
                f"group name: photo {nopass[0]} names a station but no pass; name it like "
                "p2-st1.jpg, or put each pass in a subfolder of its own"
            )
        numbers = sorted({pass_token(i.path.name) or 0 for i in top})
        for n in numbers:
            members = sorted([i for i in top if pass_token(i.path.name) == n], key=key)
            seen = [station_token(i.path.name) for i in members]
            if len(set(seen)) != len(seen):
                raise OptionError(
                    f"group name: pass {n} has two photos of one station "
                    f"({', '.join(i.path.name for i in members)}); remove one"
                )
            passes.append((f"pass {n}", [(i, station_token(i.path.name)) for i in members]))
    elif group == "stations":
        if not stations:
            raise OptionError(
                "group stations: the job file lists no stations; add "
                'stations = ["headstock", "middle", "tailstock"] to printcheck.toml'
            )
        flat = sorted(top, key=key)
        k = len(stations)
        for start in range(0, len(flat), k):
            chunk = flat[start : start + k]
            passes.append((chunk[0].path.name, _stationed(chunk, stations)))
    else:
        for item in sorted(top, key=key):
            passes.append((None, [(item, None)]))
        for _name, items in used:
            for item in sorted(items, key=key):
                passes.append((None, [(item, None)]))
        if used and top:  # photos of both kinds: one order over all of them
            passes.sort(key=lambda p: key(p[1][0][0]))
    flat_items = [item for _, members in passes for item, _ in members]
    times = sorted(i.taken or i.file_time for i in flat_items)
    planned: list[Planned] = []
    n = 0
    for pass_key, members in passes:
        for item, station in members:
            planned.append(
                Planned(item.path, item.taken, item.file_time, pass_key, station, times[n])
            )
            n += 1
    return group, planned


def _stationed(items: Sequence[Any], stations: Sequence[str]) -> list[tuple[Any, str | None]]:
    """Each photo of one pass with its station: its name's token, else the job file's
    names in order, else its number in order."""
    out: list[tuple[Any, str | None]] = []
    for n, item in enumerate(items):
        token = station_token(item.path.name)
        if token is None:
            token = stations[n] if n < len(stations) else str(n + 1)
        out.append((item, token))
    return out


# ------------------------------------------------------------------ measuring settings


def settings_dict(options: Any) -> dict[str, Any]:
    """What decides a photo's figures, as plain values (the surface's name does not).

    The layout and the spec are given by name and a short digest of their contents, so
    an edited layout or spec file counts as changed.
    """
    from printcheck.layout import layout_to_toml
    from printcheck.serde import spec_to_dict

    def digest(text: str) -> str:
        return hashlib.sha256(text.encode("utf-8")).hexdigest()[:12]

    layout = options.layout
    spec = options.spec
    window = options.scale_window
    return {
        "layout": None if layout is None else f"{layout.name} #{digest(layout_to_toml(layout))}",
        "px_per_mm": options.px_per_mm,
        "scale_window": None if window is None else repr(window),
        "unit": options.unit,
        "cell": options.cell,
        "compound": options.compound,
        "compound_on": options.compound_on,
        "min_spot_mm2": options.min_spot_mm2,
        "partial": options.allow_partial,
        "spec": None
        if spec is None
        else f"{spec.name} #{digest(json.dumps(spec_to_dict(spec), sort_keys=True))}",
    }


def settings_key(options: Any) -> str:
    """:func:`settings_dict` as the text the history keeps (sorted-key JSON)."""
    return json.dumps(settings_dict(options), sort_keys=True, ensure_ascii=False)


def settings_changes(recorded: str | None, now: str) -> list[str]:
    """What differs between two settings texts, one ``name old -> new`` per setting."""
    if recorded is None:
        return []
    try:
        old = json.loads(recorded)
    except ValueError:
        return ["settings unreadable"]
    new = json.loads(now)
    flags = {"min_spot_mm2": "min-spot", "compound_on": "compound-on", "px_per_mm": "px-per-mm"}
    return [
        f"{flags.get(k, k)} {old.get(k)} -> {new.get(k)}"
        for k in sorted(set(old) | set(new))
        if old.get(k) != new.get(k)
    ]
