"""report.html: one self-contained page (figures embedded as base64 data URIs, CSS inline, no scripts)."""

from __future__ import annotations

import base64

from samplewright.report.templating import render

#: the marker by which a report.html written by samplewright is recognised (and may be rebuilt)
MARKER = 'name="generator" content="samplewright'


def data_uri(png: bytes) -> str:
    """A PNG as a ``data:`` URI for an ``<img src>``."""
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


def render_html(context: dict, figures: list[dict]) -> str:
    """The report page from :func:`~samplewright.report.story.build_context` and the drawn figures.

    ``figures``: dicts with ``stem``, ``heading``, ``caption``, ``png`` (bytes), ``width`` and
    ``height`` (pixels).
    """
    figs = [{**f, "src": data_uri(f["png"])} for f in figures]
    return render("report.html", {**context, "figures": figs}, markup="html")
