"""Options for long runs shared by the simulating commands: stopping rule, resume, backend."""

from __future__ import annotations

import sys
from pathlib import Path

from samplewright.cli.arguments import whole_number
from samplewright.errors import InputError


def add_scale_options(p) -> None:
    """--until, --max-replicates, --backend, --scheduler."""
    p.add_argument("--until", metavar="NAME=VALUE[,...]",
                   help="add blocks of replicates until every design meets these Monte Carlo errors: "
                        "coverage_mcse, bias_mcse, empirical_se_rel_mcse (e.g. coverage_mcse=0.002); "
                        "--replicates is then the minimum (default: none, run exactly --replicates)")
    p.add_argument("--max-replicates", type=whole_number(2),
                   help="replicate cap per design and size for --until (default: 100 x --replicates, "
                        "at least 100000) and for the replicates added to undecided points that could change "
                        "the pick (default without --until: 10 x --replicates)")
    p.add_argument("--backend", choices=("local", "dask"), default="local",
                   help="where blocks run: local processes (--jobs) or a dask cluster (--scheduler) "
                        "(default: local)")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="address of a running dask.distributed scheduler, e.g. tcp://scheduler-host:8786; "
                        "required with --backend dask (default: none)")


def add_resume_option(p) -> None:
    """--resume DIR (``run`` only)."""
    p.add_argument("--resume", metavar="DIR",
                   help="continue the interrupted run whose results folder is DIR (or a finished run that "
                        "kept its blocks/ with --keep-blocks); only missing blocks are drawn "
                        "(default: none, a new run)")


def run_kwargs(args) -> dict:
    """Keyword arguments of :func:`samplewright.api.run` for these options."""
    if getattr(args, "scheduler", None) and getattr(args, "backend", "local") != "dask":
        raise InputError("--scheduler is for --backend dask; add --backend dask or drop --scheduler")
    out = Path(args.out)
    unfinished = (out / "blocks" / "manifest.json").exists() and not (out / "run.json").exists()
    if unfinished and not getattr(args, "resume", None) and not getattr(args, "force", False):
        raise InputError(f"output folder {str(out)!r} holds the finished blocks of an interrupted run; "
                         f"continue it with: samplewright run --resume {out} (or use --force to start again)")
    return {"until": getattr(args, "until", None), "max_replicates": getattr(args, "max_replicates", None),
            "backend": getattr(args, "backend", "local"), "scheduler": getattr(args, "scheduler", None),
            "out": args.out, "resume": bool(getattr(args, "resume", None))}


def resume_target(args) -> tuple[str | None, str]:
    """(scenario path, results folder) of ``run``, filling them in from ``--resume DIR``."""
    res = getattr(args, "resume", None)
    if res is None:
        if args.out is None:
            raise InputError("run needs --out DIR (the results folder), or --resume DIR to continue a run")
        if args.scenario is None:
            raise InputError("run needs a SCENARIO file (or --resume DIR to continue a run)")
        return args.scenario, args.out
    if args.out is not None and Path(args.out).resolve() != Path(res).resolve():
        raise InputError(f"--resume {res!r} and --out {args.out!r} name different folders; give one of them")
    scenario = args.scenario
    if scenario is None:
        from samplewright.simulation.checkpoint import BlockStore

        scenario = BlockStore.open(res).manifest.get("scenario")
        if not scenario:
            raise InputError(f"--resume {res!r}: the saved run does not name its scenario file; "
                             f"give it: samplewright run SCENARIO --resume {res}")
    return scenario, res


def interrupted_note(out) -> None:
    """Tell how to continue after Ctrl-C or a crash (the finished blocks are on disk)."""
    blocks = Path(out) / "blocks"
    if blocks.is_dir():
        kept = sum(1 for p in blocks.iterdir() if p.suffix == ".npz")
        print(f"samplewright: {kept} finished blocks kept in {blocks}; continue with: "
              f"samplewright run --resume {out}", file=sys.stderr)
