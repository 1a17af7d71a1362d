"""Options and steps shared by several commands."""

from __future__ import annotations

import logging
import shlex
import sys
from contextlib import contextmanager
from pathlib import Path

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


def reproduce_command(program: str, info: dict, out, options: tuple[str, ...] = ()) -> str:
    """run.json ``reproduce``: the shell command (every argument quoted) repeating the run into ``OUT-again``.

    It names every setting that changes a number as the run used it: the seed and replicates (the
    first count under a stopping rule), ``--until`` and its cap, or ``--exact``; a resumed run is
    repeated whole.  ``--jobs``, ``--backend`` and the output options change no number and are left out;
    ``options`` are the command's own arguments that do (``propose``'s goal and search options).

    Examples
    --------
    >>> reproduce_command("run", {"scenario": "a b.toml", "seed": 7, "replicates": 50,
    ...                           "stopping": {"until": "coverage_mcse=0.01", "max_replicates": 900}}, "o/")
    "samplewright run 'a b.toml' --out o-again --seed 7 --replicates 50 --until coverage_mcse=0.01 --max-replicates 900"
    >>> reproduce_command("run", {"scenario": "s.toml", "exact": True, "replicates": None}, "res")
    'samplewright run s.toml --out res-again --exact'
    """
    scenario = [info["scenario"]] if program in ("run", "propose") else []
    argv = ["samplewright", program, *scenario, "--out", f"{Path(out)}-again", *options]
    if info.get("exact"):
        argv.append("--exact")
    else:
        argv += ["--seed", str(info["seed"]), "--replicates", str(info["replicates"])]
        if info.get("stopping"):
            argv += ["--until", info["stopping"]["until"], "--max-replicates", str(info["stopping"]["max_replicates"])]
        elif _settle_cap_given(info):  # the cap on replicates added to undecided points, when not the default
            argv += ["--max-replicates", str(info["evidence"]["max_replicates"])]
    return shlex.join(argv)


def _settle_cap_given(info: dict) -> bool:
    from samplewright.decision.settle import default_cap

    cap = (info.get("evidence") or {}).get("max_replicates")
    return cap is not None and info.get("replicates") is not None and cap != default_cap(info["replicates"])


def simulate_and_write(scenario, args, program: str, runner=None, options: tuple[str, ...] = ()) -> int:
    """Run ``scenario`` with the options of command ``program`` and write its results to ``args.out``.

    ``runner`` is :func:`samplewright.api.run` (default) or a function with its arguments (``propose``, whose
    own arguments that change numbers are ``options``, for the reproduce command)."""
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
        res.info.pop("reproduce_note", None)  # the command line, not the Python call (api.py), repeats it
        res.info["reproduce"] = reproduce_command(program, res.info, args.out, options)
        out = res.write(args.out, force=True)  # the simulated tables and run.json first
    except BaseException as exc:  # the tables are not all written: the blocks stay for --resume
        if not isinstance(exc, (InputError, SystemExit)):
            interrupted_note(args.out)
        raise
    if not exact and not args.keep_blocks:  # every table is written: nothing is left to resume
        checkpoint.remove(out)
        if res.stress is not None:  # each assumption point's blocks too
            from samplewright.simulation.stress import remove_point_blocks

            remove_point_blocks(out)
    failures = list(res.late_failures)
    page = None
    if not getattr(args, "no_report", False):
        from samplewright.report import write_report

        try:
            page = write_report(res, out, force=True, log=logger(args))
        except Exception as exc:  # noqa: BLE001 -- the tables are written: say what failed, keep them
            failures.append(("the report (figures/, report.html, brief.md)", exc))
    if not args.quiet:
        print(format_summary(res))
        if res.info.get("stopping"):
            from samplewright.evaluation.stopping import Rule, format_report

            st = res.info["stopping"]
            print(format_report(st["cells"], Rule(st["targets"], st["max_replicates"], st["until"])))
        if res.recommendation is not None:  # the verdict sentence (report/verdict.py)
            from samplewright.report.verdict import undecided_sentences

            print("\nrecommendation: " + res.recommendation["statement"])
            for line in undecided_sentences(res.recommendation, res.info):
                print(line)
            print()
        if res.stress is not None:  # what would change the pick (report/stress.py)
            from samplewright.report.stress import stress_context

            print("what would change the pick: " + " ".join(stress_context(res)["lead"]) + "\n")
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


def format_summary(res) -> str:
    """The compact table printed after a run: one row per design x size for each variable at each design's
    default analysis, rounded, costs with thousands separators (report/table.py); summary.csv has the rest.
    Without a cost model (every mean_cost 0) the cost column is left out."""
    from samplewright.report.names import estimator_name
    from samplewright.report.table import format_compact
    from samplewright.report.verdict import labels_of

    if res.summary is None or not len(res.summary):
        return "(no rows in the summary)"
    labels = labels_of(res.info, res.recommendation if isinstance(res.recommendation, dict) else None)
    text = format_compact(res.summary, labels, res.frontier)
    first = dict.fromkeys(estimator_name(e) for e in res.summary.groupby("design", sort=False)["estimator"].first())
    return text + f"\n(each design's first estimator: {', '.join(first)}; every row is in summary.csv)"
