"""The command line: a thin shell over the Python API that turns errors into exit codes.

Exit codes: 0 ok; 2 bad input (one line on stderr starting ``error:``); 1 unexpected; 130 interrupted.
When a run's simulation finished but a later step (frontier, recommendation, figures, report) failed,
the result tables and run.json are already written, each failure is an ``error:`` line, and the
status is 1 (2 when the cause is refused input, such as a file that cannot be written).
"""

from __future__ import annotations

import argparse
import sys

from samplewright import __version__
from samplewright.cli import COMMANDS
from samplewright.errors import INTERRUPTED, InputError


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # argparse's own usage errors: one line, exit 2
        self.exit(2, f"error: {message} (see '{self.prog} --help')\n")


#: longest error line printed (messages cut echoed values to 60 characters; this bounds the rest)
MAX_ERROR = 500


def one_line(message: str) -> str:
    """``message`` on one line (line breaks shown as spaces) of at most :data:`MAX_ERROR` characters."""
    text = " ".join(message.split("\n")).replace("\r", " ")
    return text if len(text) <= MAX_ERROR else text[:MAX_ERROR - 3] + "..."


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="samplewright",
                     description="Rehearse competing sampling designs on a population frame and score them.")
    parser.add_argument("--version", action="version", version=f"samplewright {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for mod in COMMANDS:
        p = sub.add_parser(mod.NAME, help=mod.HELP, description=mod.HELP)
        mod.add_arguments(p)
        p.add_argument("--debug", action="store_true",
                       help="on an unexpected failure, show the full Python traceback instead of a one-line "
                            "message (default: off)")
        p.set_defaults(_main=mod.main)
    return parser


def main(argv=None) -> int:
    try:
        return _main(argv)
    except KeyboardInterrupt:  # also during start-up: parsing, and the imports each command makes
        print(INTERRUPTED, file=sys.stderr)
        return 130


def _main(argv) -> int:
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # usage errors (exit 2), --help and --version (0): a code, not an exception
        return exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 2)
    if not getattr(args, "_main", None):
        parser.print_help(sys.stderr)
        return 2
    try:
        return int(args._main(args) or 0)
    except InputError as exc:
        print(f"error: {one_line(str(exc))}", file=sys.stderr)
        return 2
    except BrokenPipeError:
        return 0
    except Exception as exc:  # unexpected: say so in one line, keep the detail for --debug
        if getattr(args, "debug", False):
            raise
        print(f"samplewright: unexpected failure: {type(exc).__name__}: {exc} "
              f"(run again with --debug for the traceback)", file=sys.stderr)
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
