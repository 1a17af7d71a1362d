"""Writing a run's report: the figures into ``figures/``, then report.html and brief.md.

Examples
--------
>>> import tempfile
>>> from samplewright import scenario_from_dict, run
>>> res = run(scenario_from_dict({"frame": {"synthetic": {"units": 300}},
...                               "design": [{"label": "simple", "method": "srs", "n": 30}]}),
...           replicates=100, seed=1)
>>> page = write_report(res, res.write(tempfile.mkdtemp()))
>>> page.name
'report.html'
"""

from __future__ import annotations

import io
from pathlib import Path

from samplewright.errors import InputError
from samplewright.files import atomic_write, write_text
from samplewright.report.brief import MARKER as BRIEF_MARKER
from samplewright.report.brief import render_brief
from samplewright.report.figures import DPI, make_figure
from samplewright.report.html import MARKER as HTML_MARKER
from samplewright.report.html import render_html
from samplewright.report.proposal import proposal_context
from samplewright.report.story import build_context, figure_plan
from samplewright.report.stress import stress_context

__all__ = ["write_report"]


def _check_overwrite(p: Path, force: bool) -> None:
    if force:
        return
    for name, marker in (("report.html", HTML_MARKER), ("brief.md", BRIEF_MARKER)):
        f = p / name
        if f.exists():
            try:
                head = f.read_text(encoding="utf-8", errors="replace")[:4000]
            except OSError:
                head = ""
            if marker not in head:
                raise InputError(f"{f} exists and was not written by samplewright; use --force to replace it")


def write_report(res, out, svg: bool = False, force: bool = False, log=None) -> Path:
    """Draw the figures into ``out/figures/`` and write ``out/report.html`` and ``out/brief.md``.

    Parameters
    ----------
    res : RunResult
        A run's result (from :func:`samplewright.run` or :func:`samplewright.read_run`), or any object
        with its tables (summary, replicates, allocation, info, frontier, recommendation, frame_order).
    out : path
        The run folder (it must exist).
    svg : bool
        Also write every figure as SVG.
    force : bool
        Replace a report.html or brief.md that samplewright did not write.
    log : callable, optional
        Called with one line of text per step.

    Returns
    -------
    Path of report.html.
    """
    say = log or (lambda _msg: None)
    p = Path(out)
    if not p.is_dir():
        raise InputError(f"run folder {str(p)!r} does not exist or is not a folder")
    _check_overwrite(p, force)
    figdir = p / "figures"
    try:
        figdir.mkdir(exist_ok=True)
    except OSError as exc:
        raise InputError(f"{figdir}: cannot be created: {exc.strerror or exc}") from None
    drawn, failed = [], []
    for item in figure_plan(res):
        say(f"drawing figure {item['stem']}")
        try:
            fig = make_figure(res, item["name"], item["variable"])
            buf = io.BytesIO()
            fig.savefig(buf, format="png", dpi=DPI)  # text is laid out here: it can fail too
        except Exception as exc:  # noqa: BLE001 -- a figure that cannot be drawn must not cost the rest of the report
            failed.append(f"The figure {item['heading']!r} could not be drawn ({type(exc).__name__}: {exc}).")
            say(failed[-1])
            continue
        png = buf.getvalue()
        atomic_write(figdir / f"{item['stem']}.png", lambda t, b=png: t.write_bytes(b))
        if svg:
            atomic_write(figdir / f"{item['stem']}.svg", lambda t, f=fig: f.savefig(t, format="svg"))
        w, h = fig.get_size_inches() * DPI
        drawn.append({**item, "png": png, "width": round(float(w)), "height": round(float(h))})
    ctx = build_context(res, p)
    ctx["notes"] = ctx["notes"] + failed
    ctx["stress"] = stress_context(res)  # the "What would change the pick" section (report/stress.py)
    ctx["proposal"] = proposal_context(res)  # "How the proposal was found" (report/proposal.py), None otherwise
    say("writing report.html and brief.md")
    page = write_text(render_html(ctx, drawn), p / "report.html")
    write_text(render_brief(ctx, drawn), p / "brief.md")
    return page

