"""samplewright run SCENARIO --out DIR: rehearse a scenario's designs and write the results."""

from __future__ import annotations

from samplewright.cli.common import add_run_options, simulate_and_write

NAME = "run"
HELP = "rehearse the designs of a scenario file and write summary, replicates, allocation and run.json"


def add_arguments(p) -> None:
    p.add_argument("scenario", nargs="?",
                   help="scenario file (TOML); required unless --resume, which defaults to the saved one")
    p.add_argument("--out", help="results folder, required (refused if it holds files, unless --force; default with "
                        "--resume: its DIR)")
    add_run_options(p)
    p.add_argument("--exact", action="store_true",
                   help="enumerate every possible sample (small frames: at most 2 million per design and size) "
                        "and report exact design moments instead of simulating (default: off, simulate)")
    from samplewright.cli.longrun import add_resume_option

    add_resume_option(p)


def main(args) -> int:
    from samplewright.cli.longrun import resume_target
    from samplewright.simulation.scenario import load_scenario

    scenario, args.out = resume_target(args)
    return simulate_and_write(load_scenario(scenario), args, NAME)
