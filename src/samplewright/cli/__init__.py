"""One module per command; each has NAME, HELP, add_arguments(parser) and main(args) -> int."""

from samplewright.cli import demo, draw, inspect, plan, propose, report, run, synth

COMMANDS = [run, draw, demo, synth, plan, report, inspect, propose]
