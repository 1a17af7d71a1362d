"""samplewright propose SCENARIO --out DIR: search designs for a goal, screen them, rehearse the best."""

from __future__ import annotations

import functools

from samplewright.cli.arguments import whole_number
from samplewright.cli.common import add_run_options, simulate_and_write

NAME = "propose"
HELP = ("search stratum boundaries, allocations, cluster takes and size-proportional designs for a budget or a "
        "margin of error, screen them by anticipated variance and rehearse the best in one run")


def add_arguments(p) -> None:
    p.add_argument("scenario", help="scenario file (TOML): its frame, roles, cost model and goal; its designs are "
                                    "not used")
    p.add_argument("--out", required=True, help="results folder, required (refused if it holds files, unless --force); "
                                                "it gets proposal.toml and candidates.csv beside the usual results")
    goal = p.add_mutually_exclusive_group()
    goal.add_argument("--budget", type=float, help="the mean cost a design may have (default: the scenario's [goal])")
    goal.add_argument("--moe", type=float, help="the margin of error of the mean to reach (default: the scenario's "
                                                "[goal])")
    goal.add_argument("--relative-moe", type=float, metavar="R",
                      help="the margin as a fraction of the mean, e.g. 0.05 (default: none)")
    p.add_argument("--max-candidates", type=whole_number(1), default=6,
                   help="designs rehearsed in full, the best of the screen (default: 6)")
    p.add_argument("--screen-on", metavar="COLUMN",
                   help="screen on this auxiliary column (the size column or an auxiliary) instead of the target, "
                        "as real planning must (default: none, the target, known in a rehearsal)")
    p.add_argument("--stratify-by", metavar="COLUMN",
                   help="numeric column the banded designs cut (default: the size column, else the first "
                        "auxiliary column)")
    add_run_options(p)


def main(args) -> int:
    from samplewright.api import propose
    from samplewright.simulation.scenario import load_scenario

    runner = functools.partial(propose, budget=args.budget, moe=args.moe, relative_moe=args.relative_moe,
                               max_candidates=args.max_candidates, screen_on=args.screen_on,
                               stratify_by=args.stratify_by)
    return simulate_and_write(load_scenario(args.scenario), args, NAME, runner=runner, options=_options(args))


def _options(args) -> tuple[str, ...]:
    """The arguments given that change what is proposed, as the reproduce command repeats them."""
    out = []
    for flag, value in (("--budget", args.budget), ("--moe", args.moe), ("--relative-moe", args.relative_moe),
                        ("--screen-on", args.screen_on), ("--stratify-by", args.stratify_by)):
        if value is not None:
            out += [flag, repr(value) if isinstance(value, float) else str(value)]
    return (*out, "--max-candidates", str(args.max_candidates))
