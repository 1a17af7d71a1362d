"""Fuzz test of the commands that take their input from options (plan, inspect, report):
random option sets with random values must give exit 0 or 2 (one ``error:`` line), never 1
or a traceback.  The options are read from the command-line parser itself, so an option
added later is fuzzed too.  Settings are modest and derandomised.
"""

from __future__ import annotations

import argparse
import contextlib
import functools
import io
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from samplewright.cli.main import build_parser, main

FUZZ = settings(max_examples=40, deadline=None, derandomize=True, database=None,
                suppress_health_check=[HealthCheck.too_slow])
COMMANDS = ("plan", "inspect", "report")
SKIP = {"-h", "--help", "--debug"}


def _subparsers() -> dict:
    parser = build_parser()
    for action in parser._actions:  # the one documented way to reach subparsers is through _actions
        if isinstance(action, argparse._SubParsersAction):
            return dict(action.choices)
    raise AssertionError("no subcommands")


def _options(command: str) -> list[tuple[str, bool]]:
    """(option string, takes a value) for every optional argument of a command."""
    sub = _subparsers()[command]
    out = []
    for a in sub._actions:
        if not a.option_strings or set(a.option_strings) & SKIP:
            continue
        out.append((a.option_strings[-1], a.nargs != 0))
    return out


numbers = st.sampled_from(["0", "1", "-1", "0.5", "1.5", "2", "10", "400", "1e9", "1e400", "nan", "inf", "-inf",
                           "0.0", "1,2", "3,4,5", "0,0", "10,-2", "x", "", "neyman", "equal", "0.95", "100000000000"])
texts = st.text(alphabet="abc,.-0123456789 ", max_size=8)


def frame_csv(folder: Path) -> Path:
    rng = np.random.default_rng(5)
    p = folder / "frame.csv"
    pd.DataFrame({"y": rng.normal(50, 10, 60).round(1), "band": np.repeat(["a", "b", "c"], 20),
                  "hour": np.arange(60) % 24, "plot": np.arange(60) // 5}).to_csv(p, index=False)
    return p


#: valid starting points, so part of the fuzz runs through to the computations
BASES = {
    "plan": [["--sd", "10", "--moe", "2"], ["--proportion", "0.3", "--moe", "0.05", "--population", "800"],
             ["--stratum-units", "100,50", "--stratum-sd", "5,9", "--allocation", "neyman", "--n", "20"],
             ["--strata", "STRATA", "--allocation", "optimal", "--budget", "300"],
             ["--icc", "0.1", "--cluster-cost", "50", "--unit-cost", "5"]],
    "inspect": [["--target", "y"], ["--target", "y", "--order", "hour"], ["--target", "y", "--stratum", "band"]],
    "report": [[]],
}


@functools.lru_cache(maxsize=1)
def finished_run() -> str:
    """A small finished run folder (made once per session) for the report command."""
    folder = Path(tempfile.mkdtemp(prefix="sw-fuzz-run-"))
    sc = folder / "s.toml"
    sc.write_text('[frame.synthetic]\nunits = 200\n[[design]]\nlabel = "simple"\nmethod = "srs"\nn = 20\n')
    with contextlib.redirect_stderr(io.StringIO()), contextlib.redirect_stdout(io.StringIO()):
        assert main(["run", str(sc), "--out", str(folder / "run"), "--replicates", "30", "--quiet",
                     "--no-report"]) == 0
    return str(folder / "run")


@st.composite
def argvs(draw, command: str):
    opts = _options(command)
    chosen = draw(st.lists(st.sampled_from(opts), max_size=6, unique=True))
    argv = list(draw(st.sampled_from(BASES.get(command, [[]])))) if draw(st.booleans()) else []
    if argv and draw(st.booleans()):  # change one value of the valid base
        i = draw(st.integers(0, len(argv) - 1))
        if not argv[i].startswith("--"):
            argv[i] = draw(numbers | texts)
    if draw(st.booleans()):
        chosen = [] if argv else chosen[:1]
    for name, takes in chosen:
        argv.append(name)
        if takes:
            if "strata" in name and draw(st.booleans()):
                argv.append("STRATA")
            elif any(w in name for w in ("target", "order", "stratum", "cluster")) and draw(st.booleans()):
                argv.append(draw(st.sampled_from(["y", "band", "hour", "plot", "nope"])))
            else:
                argv.append(draw(numbers | texts))
    return argv


def _run(argv: list[str]) -> None:
    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
        code = main(argv)
    msg = err.getvalue()
    event(f"exit {code}")
    assert "Traceback" not in msg, msg
    assert code in (0, 2), (code, argv, msg)
    if code == 2:
        lines = [ln for ln in msg.strip().splitlines() if not ln.startswith(("warning: ", "note: "))]
        assert len(lines) == 1 and lines[0].startswith("error: "), (argv, msg)


@pytest.mark.slow
@pytest.mark.parametrize("command", COMMANDS)
@FUZZ
@given(data=st.data())
def test_random_options(command, data):
    if command not in _subparsers():
        pytest.skip(f"no {command} command")
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        frame = frame_csv(tmp)
        (tmp / "strata.csv").write_text("stratum,units,sd,cost\na,100,5,1\nb,50,9,2\n")
        argv = [a.replace("STRATA", str(tmp / "strata.csv")) for a in data.draw(argvs(command))]
        if command == "inspect":
            target = data.draw(st.sampled_from([str(frame)] * 3 + [str(tmp / "missing.csv"), str(tmp)]))
            argv = [target] + argv
        elif command == "report":
            (tmp / "empty").mkdir()
            folders = [finished_run(), str(tmp / "empty"), str(tmp / "missing"), str(frame)]
            argv = [data.draw(st.sampled_from(folders))] + argv
        _run([command] + argv)
