"""The stakeholder report of a run: figures, report.html and brief.md, from the run's tables only.

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
from samplewright.results.load import read_run

__all__ = ["write_report", "read_run", "report_folder"]


def _check_overwrite(p: Path, force: bool) -> None:
    from samplewright.report.brief import MARKER as BRIEF_MARKER
    from samplewright.report.html import MARKER as HTML_MARKER

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
        A run's result (from :func:`samplewright.run` or :func:`read_run`).
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
    from samplewright.report.brief import render_brief
    from samplewright.report.figures import DPI, make_figure
    from samplewright.report.html import render_html
    from samplewright.report.story import build_context, figure_plan

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
        except Exception as exc:  # a figure that cannot be drawn must not cost the rest of the report
            failed.append(f"The figure {item['heading']!r} could not be drawn ({type(exc).__name__}: {exc}).")
            say(failed[-1])
            continue
        png = buf.getvalue()
        atomic_write(figdir / f"{item['stem']}.png", lambda t, b=png: t.write_bytes(b))
        if svg:
            atomic_write(figdir / f"{item['stem']}.svg", lambda t, f=fig: f.savefig(t, format="svg"))
        w, h = fig.get_size_inches() * DPI
        drawn.append({**item, "png": png, "width": int(round(w)), "height": int(round(h))})
    ctx = build_context(res, p)
    ctx["notes"] = ctx["notes"] + failed
    say("writing report.html and brief.md")
    page = write_text(render_html(ctx, drawn), p / "report.html")
    write_text(render_brief(ctx), p / "brief.md")
    return page


def report_folder(folder, svg: bool = False, force: bool = False, log=None) -> Path:
    """Rebuild the report of a finished run folder without re-simulating; returns report.html's path."""
    return write_report(read_run(folder), folder, svg=svg, force=force, log=log)
