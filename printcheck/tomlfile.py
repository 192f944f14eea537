"""Reading the small TOML files a user writes (layouts, specs, job settings).

One place turns every way such a file can fail to be read into one line that names
the kind of file, the path and what to do.
"""

from __future__ import annotations

import tomllib
from collections.abc import Callable
from pathlib import Path
from typing import Any, TypeVar

from printcheck.errors import PrintcheckError

__all__ = ["read_toml", "read_toml_as", "shown_key"]

T = TypeVar("T")


def shown_key(key: object) -> str:
    """A TOML key as it can be shown in a one-line message (quoted when it has odd
    characters: a key may hold a newline or be empty)."""
    text = str(key)
    return text if text.isprintable() and text else repr(text)


def read_toml(
    path: str | Path, *, kind: str, error: type[PrintcheckError], missing_hint: str = ""
) -> dict[str, Any]:
    """Parse the TOML file at ``path``.

    Parameters
    ----------
    path : path
    kind : str
        What the file is, for messages: ``"layout"``, ``"spec"``, ``"job settings"``.
    error : subclass of PrintcheckError
        The error raised, e.g. ``LayoutError``.
    missing_hint : str
        Added to the "file not found" message (what to give instead).

    Raises
    ------
    error
        ``"<kind> <path>: <problem>"`` on one line.
    """
    path = Path(path)
    where = f"{kind} {path}"
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise error(f"{where}: file not found{missing_hint}") from None
    except IsADirectoryError:
        raise error(f"{where}: is a folder, not a {kind} .toml file") from None
    except PermissionError:
        raise error(f"{where}: permission denied; make the file readable") from None
    except UnicodeDecodeError:
        raise error(f"{where}: not a text file; a {kind} file is TOML text") from None
    except OSError as exc:
        raise error(f"{where}: cannot be read ({exc.strerror})") from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise error(f"{where}: not valid TOML ({exc})") from None


def read_toml_as(
    path: str | Path,
    parse: Callable[..., T],
    *,
    kind: str,
    error: type[PrintcheckError],
    missing_hint: str = "",
) -> T:
    """Parse the TOML file at ``path`` (:func:`read_toml`) and validate it with
    ``parse(data, source=str(path))``."""
    data = read_toml(path, kind=kind, error=error, missing_hint=missing_hint)
    return parse(data, source=str(path))
