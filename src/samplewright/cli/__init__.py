"""One module per command; each has NAME, HELP, add_arguments(parser) and main(args) -> int."""

from samplewright.cli import demo, inspect, plan, report, run, synth

COMMANDS = [run, demo, synth, plan, report, inspect]
