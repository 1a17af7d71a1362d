"""brief.md: the report's story on one page of Markdown, for pasting into a memo."""

from __future__ import annotations

from samplewright.report.templating import render

MARKER = "samplewright"


def render_brief(context: dict, figures: list[dict] | None = None) -> str:
    """The brief from :func:`~samplewright.report.story.build_context` and the drawn figures (by ``name``
    and ``stem``: the verdict chart is linked from ``figures/``)."""
    text = render("brief.md", {**context, "figures": figures or []}, markup="markdown")
    lines = [ln.rstrip() for ln in text.splitlines()]
    out, blank = [], 0
    for ln in lines:  # at most one blank line in a row
        blank = blank + 1 if not ln else 0
        if blank <= 1:
            out.append(ln)
    return "\n".join(out).strip() + "\n"
