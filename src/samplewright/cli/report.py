"""samplewright report DIR: rebuild figures/, report.html and brief.md of a finished run (no simulation)."""

from __future__ import annotations

NAME = "report"
HELP = "rebuild the figures, report.html and brief.md of a finished run folder, without re-simulating"


def add_arguments(p) -> None:
    p.add_argument("folder", metavar="DIR", help="a finished run folder (holds run.json and summary.csv)")
    p.add_argument("--svg", action="store_true",
                   help="also write every figure as SVG in DIR/figures/ (default: off, PNG only)")
    p.add_argument(
        "--force",
        action="store_true",
        help="replace a report.html or brief.md in DIR that samplewright did not write (default: off, refuse)",
    )
    p.add_argument("--quiet", action="store_true", help="print nothing on success (default: off)")
    p.add_argument("--verbose", action="store_true", help="log each step on stderr (default: off)")


def main(args) -> int:
    from samplewright.cli.common import logger
    from samplewright.results.load import report_folder

    page = report_folder(args.folder, svg=args.svg, force=args.force, log=logger(args))
    if not args.quiet:
        print(f"brief: {page.with_name('brief.md').resolve()}")
        print(f"report: {page.resolve()}")
    return 0
