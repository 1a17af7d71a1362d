"""The Jinja2 environment of the report's templates (package data in ``report/templates``)."""

from __future__ import annotations

from functools import lru_cache
from importlib.resources import files

import jinja2


def _md(text) -> str:
    """Escape what would break a Markdown table cell or start markup."""
    return str(text).replace("\\", "\\\\").replace("|", "\\|").replace("\n", " ")


@lru_cache(maxsize=2)
def environment(autoescape: bool) -> jinja2.Environment:
    src = files("samplewright.report") / "templates"
    env = jinja2.Environment(
        loader=jinja2.FunctionLoader(lambda name: (src / name).read_text(encoding="utf-8")),
        autoescape=autoescape,
        undefined=jinja2.StrictUndefined,
        keep_trailing_newline=True,
        trim_blocks=False,
        lstrip_blocks=False,
    )
    env.filters["md"] = _md
    return env


def render(name: str, context: dict, autoescape: bool) -> str:
    return environment(autoescape).get_template(name).render(**context)
