"""The Jinja2 environments of the report's templates (package data in ``report/templates``).

report.html is HTML-escaped by Jinja2's autoescaping; brief.md passes every value through
:func:`md` (the environment's ``finalize``), so no title, label or message from a run can
start Markdown or HTML markup there.
"""

from __future__ import annotations

import html
import re
from functools import lru_cache
from importlib.resources import files

import jinja2
from markupsafe import Markup

from samplewright.report.names import estimator_name

#: characters that start Markdown markup anywhere in a line (``|`` ends a table cell, ``$`` starts math)
MD_SPECIALS = frozenset("\\`*_[]#~|$")


def md(text) -> str:
    """``text`` shown literally in Markdown: one line, ``<``, ``>`` and ``&`` HTML-escaped, Markdown
    specials backslash-escaped (``|`` too, so it never splits a table cell), and a leading list or
    heading marker escaped.  A :class:`~markupsafe.Markup` value is already Markdown and is kept.

    Examples
    --------
    >>> md("<script>**x**|y")
    '&lt;script&gt;\\\\*\\\\*x\\\\*\\\\*\\\\|y'
    >>> md("- item"), md("-0.5")
    ('\\\\- item', '-0.5')
    """
    if isinstance(text, Markup):
        return str(text)
    s = " ".join(html.escape(str(text), quote=False).splitlines())
    s = "".join("\\" + c if c in MD_SPECIALS else c for c in s)
    s = re.sub(r"^([+\-=])(?=\s|$)", r"\\\1", s)  # a list item or a heading underline
    return re.sub(r"^(\d+)([.)])(?=\s|$)", r"\1\\\2", s)  # an ordered list item


def code_span(text) -> Markup:
    """``text`` as one Markdown code span, its fence longer than any run of backticks inside."""
    s = " ".join(str(text).splitlines())
    fence = "`" * (max((len(r) for r in re.findall(r"`+", s)), default=0) + 1)
    pad = " " if s.startswith("`") or s.endswith("`") else ""
    return Markup(f"{fence}{pad}{s}{pad}{fence}")


@lru_cache(maxsize=2)
def environment(markup: str) -> jinja2.Environment:
    """The environment for ``"html"`` (autoescaped) or ``"markdown"`` (every value through :func:`md`)."""
    src = files("samplewright.report") / "templates"
    env = jinja2.Environment(
        loader=jinja2.FunctionLoader(lambda name: (src / name).read_text(encoding="utf-8")),
        autoescape=markup == "html",
        finalize=md if markup == "markdown" else None,
        undefined=jinja2.StrictUndefined,
        keep_trailing_newline=True,
        trim_blocks=False,
        lstrip_blocks=False,
    )
    env.filters["code"] = code_span
    env.filters["estimator_name"] = estimator_name
    return env


def render(name: str, context: dict, markup: str) -> str:
    return environment(markup).get_template(name).render(**context)
