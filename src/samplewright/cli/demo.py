"""samplewright demo [--out DIR]: run the bundled scenario on its embedded synthetic frame."""

from __future__ import annotations

from importlib.resources import as_file, files

from samplewright.cli.common import add_run_options, simulate_and_write

NAME = "demo"
HELP = "run the bundled orchard-survey scenario (synthetic frame) and write its results"
DEFAULT_OUT = "samplewright-demo"


def add_arguments(p) -> None:
    p.add_argument("--out", default=DEFAULT_OUT, help=f"results folder (default: {DEFAULT_OUT})")
    add_run_options(p)


def main(args) -> int:
    from samplewright.simulation.scenario import load_scenario

    with as_file(files("samplewright") / "data" / "demo.toml") as path:
        scenario = load_scenario(path)
    return simulate_and_write(scenario, args, NAME)
