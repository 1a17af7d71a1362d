"""Options and steps shared by several commands."""

from __future__ import annotations

import logging
import sys
from contextlib import contextmanager

from samplewright.cli.arguments import whole_number
from samplewright.cli.longrun import add_scale_options, interrupted_note, run_kwargs
from samplewright.errors import InputError


def add_run_options(p) -> None:
    """Options of every command that simulates (run, demo)."""
    p.add_argument("--replicates", type=whole_number(1),
                   help="replicates per design and size (default: the scenario's replicates)")
    p.add_argument("--seed", type=whole_number(0), help="root seed of the run (default: the scenario's seed)")
    p.add_argument("--jobs", type=whole_number(1), default=1,
                   help="parallel workers; results do not depend on it (default: 1)")
    p.add_argument("--force", action="store_true", help="overwrite results already in --out (default: off, refuse)")
    p.add_argument("--quiet", action="store_true", help="no progress bar and no summary on stdout (default: off)")
    p.add_argument("--verbose", action="store_true", help="log each step on stderr (default: off)")
    p.add_argument("--no-report", action="store_true",
                   help="write only the result tables, not figures/, report.html and brief.md "
                        "(build them later with `samplewright report DIR`; default: off, the report is written)")
    p.add_argument("--keep-blocks", action="store_true",
                   help="keep DIR/blocks/ (the per-block checkpoint files) after the run finishes, so that "
                        "--resume DIR can rebuild its tables (default: off, removed once every table is written; "
                        "an interrupted or failed run always keeps them)")
    add_scale_options(p)


class StderrLines(logging.Handler):
    """The run's log on stderr: ``warning: ...``, ``note: ...`` and, with --verbose, ``samplewright: ...`` steps."""

    def emit(self, record: logging.LogRecord) -> None:
        # notes sit between INFO and WARNING (api.NOTE); the level is compared, not imported, so that
        # this module stays light for the commands that never run a simulation
        prefix = "warning" if record.levelno >= logging.WARNING else "note" if record.levelno > logging.INFO \
            else "samplewright"
        print(f"{prefix}: {record.getMessage()}", file=sys.stderr)


@contextmanager
def stderr_log(args):
    """While a command runs, the ``samplewright`` log is printed on stderr (steps only with --verbose)."""
    log, handler = logging.getLogger("samplewright"), StderrLines()
    level = log.level
    log.addHandler(handler)
    log.setLevel(logging.INFO if getattr(args, "verbose", False) else logging.INFO + 1)
    try:
        yield
    finally:
        log.removeHandler(handler)
        log.setLevel(level)


def logger(args):
    if getattr(args, "verbose", False):
        return lambda msg: print(f"samplewright: {msg}", file=sys.stderr)
    return None


def simulate_and_write(scenario, args, runner=None) -> int:
    """Run ``scenario`` with the command's options and write its results to ``args.out``.

    ``runner`` is :func:`samplewright.api.run` (default) or a function with its arguments (``propose``)."""
    from samplewright.api import run
    from samplewright.files import prepare_dir
    from samplewright.simulation import checkpoint

    runner = run if runner is None else runner
    inputs = (scenario.source, scenario.frame.path)
    extra = run_kwargs(args)

    def ready():  # once every check passed, before simulating: a refused run leaves no folder behind
        # (a resumed run continues in its own folder)
        prepare_dir(args.out, force=args.force or extra["resume"], inputs=inputs)

    exact = getattr(args, "exact", False)  # an enumeration keeps no blocks
    try:
        with stderr_log(args):
            res = runner(scenario, replicates=args.replicates, seed=args.seed, jobs=args.jobs,
                      progress=None if not args.quiet else False, exact=exact, ready=ready, **extra)
        if not exact:
            res.info[checkpoint.KEPT] = args.keep_blocks
        out = res.write(args.out, force=True)  # the simulated tables and run.json first
    except BaseException as exc:  # the tables are not all written: the blocks stay for --resume
        if not isinstance(exc, (InputError, SystemExit)):
            interrupted_note(args.out)
        raise
    if not exact and not args.keep_blocks:  # every table is written: nothing is left to resume
        checkpoint.remove(out)
    failures = list(res.late_failures)
    page = None
    if not getattr(args, "no_report", False):
        from samplewright.report import write_report

        try:
            page = write_report(res, out, force=True, log=logger(args))
        except Exception as exc:  # noqa: BLE001 -- the tables are written: say what failed, keep them
            failures.append(("the report (figures/, report.html, brief.md)", exc))
    if not args.quiet:
        print(format_summary(res.summary))
        if res.info.get("stopping"):
            from samplewright.evaluation.stopping import Rule, format_report

            st = res.info["stopping"]
            print(format_report(st["cells"], Rule(st["targets"], st["max_replicates"], st["until"])))
        if res.recommendation is not None:  # the plain-language pick (recommend.py)
            print("\nrecommendation: " + res.recommendation["statement"] + "\n")
        print(f"results written to {out}")
        if page is not None:
            print(f"report: {page.resolve()}")
    return late_failure_status(failures, out, args)


def late_failure_status(failures, out, args) -> int:
    """Report the steps that failed after the tables were written; the exit status (module notes of cli/main.py).

    Each failure is one ``error:`` line; the status is 0 with none, 2 when every cause is refused
    input (an unwritable file...), else 1.  With ``--debug`` the first failure's traceback is shown.
    """
    if failures and getattr(args, "debug", False):
        raise failures[0][1]
    for what, exc in failures:
        print(f"error: {what} failed ({type(exc).__name__}: {exc}); the result tables in {out} are complete "
              f"(summary.csv, replicates.parquet, run.json); rebuild the report with `samplewright report {out}`",
              file=sys.stderr)
    if not failures:
        return 0
    return 2 if all(isinstance(exc, InputError) for _, exc in failures) else 1


def format_summary(summary) -> str:
    """The summary printed after a run; without a cost model (every mean_cost 0) the cost column is left out."""
    cols = ["design", "size", "estimator", "variable", "bias", "empirical_se", "mean_se", "coverage", "deff",
            "mean_n"] + (["mean_cost"] if (summary["mean_cost"] != 0).any() else [])
    s = summary[cols].copy()
    return s.to_string(index=False, float_format=lambda v: f"{v:.4g}")
