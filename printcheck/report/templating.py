"""The one Jinja2 environment of printcheck's pages: the offline report and the web app.

Templates live in ``printcheck/templates`` (package data, in the wheel).  Autoescape is
on for every template, so any text from outside (file names, surface and spec names,
reasons) is escaped; the few fragments built in Python (a report section rendered by
another template) are passed as :class:`markupsafe.Markup`.
"""

from __future__ import annotations

from typing import Any
from urllib.parse import urlencode

from jinja2 import Environment, PackageLoader, select_autoescape

__all__ = ["environment", "render"]


def environment() -> Environment:
    """A new environment over ``printcheck/templates`` (autoescape on)."""
    from printcheck.wording import fixed

    env = Environment(
        loader=PackageLoader("printcheck", "templates"),
        autoescape=select_autoescape(default=True, default_for_string=True),
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.filters["fixed"] = fixed
    env.globals["q"] = lambda **kw: urlencode(kw)
    return env


def render(template: str, env: Environment | None = None, **context: Any) -> str:
    """Render ``template`` with ``context`` (in a new environment unless one is given)."""
    return (env or environment()).get_template(template).render(**context)
