"""What a user sees on the terminal: the progress bar and Ctrl-C, notes against warnings, the
no-cost note, the skewness rule's wording, exact-mode texts and every option's help line.

Frames are made in the tests.  Sources beside the checks: Cochran (1977), Sampling Techniques,
sec. 2.15 (n > 25 G1^2, common practice for the normal approximation; G1 computed by
scipy.stats.skew with bias=False); exact enumeration of every sample (itertools) for exact mode.
"""

from __future__ import annotations

import argparse
import io
import itertools
import json
import math
import os
import pty
import select
import signal
import subprocess
import sys
import time
from importlib.metadata import version
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from samplewright import Frame
from samplewright.cli import main as cli
from samplewright.simulation.progress import HALF_LIFE, Progress

SRC = str(Path(__file__).resolve().parents[1] / "src")

SYNTH = """
seed = 3
replicates = {replicates}
[frame.synthetic]
units = {units}
seed = 4
[[frame.synthetic.strata]]
name = "a"
share = 0.5
mean = 10
sd = 3
[[frame.synthetic.strata]]
name = "b"
share = 0.5
mean = 20
sd = 6
[frame.synthetic.clusters]
mean_size = 10
icc = 0.1
"""


class _Tty(io.StringIO):
    def isatty(self):
        return True


def _scenario(tmp_path: Path, designs: str, replicates: int = 200, units: int = 600, extra: str = "") -> Path:
    p = tmp_path / "scenario.toml"
    p.write_text(SYNTH.format(replicates=replicates, units=units) + extra + designs)
    return p


# ------------------------------------------------------------------ the bar and Ctrl-C
def _read_until(fd: int, needle: bytes, seconds: float) -> bytes:
    got, end = b"", time.monotonic() + seconds
    while needle not in got and time.monotonic() < end:
        ready, _, _ = select.select([fd], [], [], 0.2)
        if ready:
            try:
                chunk = os.read(fd, 4096)
            except OSError:  # the child closed the terminal
                break
            if not chunk:
                break
            got += chunk
    return got


def test_ctrl_c_message_starts_on_its_own_line_under_a_terminal(tmp_path):
    # stderr is a pseudo-terminal, so the bar is drawn; Ctrl-C (SIGINT) arrives mid-run
    sc = _scenario(tmp_path, '[[design]]\nlabel = "s"\nmethod = "srs"\nn = 30\n', replicates=20_000_000)
    master, slave = pty.openpty()
    env = {**os.environ, "PYTHONPATH": SRC}
    proc = subprocess.Popen([sys.executable, "-m", "samplewright", "run", str(sc), "--out", str(tmp_path / "o"),
                             "--no-report"], stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=slave,
                            env=env)
    os.close(slave)
    try:
        seen = _read_until(master, b" left | ", 120)
        assert b" left | " in seen, seen  # the bar is showing
        proc.send_signal(signal.SIGINT)
        seen += _read_until(master, b"error: interrupted", 60)
        seen += _read_until(master, b"\n\n", 2)  # whatever follows
        assert proc.wait(timeout=60) == 130
    finally:
        if proc.poll() is None:
            proc.kill()
        os.close(master)
    text = seen.decode()
    lines = text.replace("\r\n", "\n").split("\n")
    err = [ln for ln in lines if "error: interrupted" in ln]
    assert len(err) == 1, text
    assert err[0].startswith("error: interrupted"), repr(err[0])  # not after the bar on its line
    bar_lines = [ln for ln in lines if " left | " in ln]
    assert bar_lines and all("error:" not in ln and "samplewright:" not in ln for ln in bar_lines)


def test_break_line_ends_a_shown_bar_only():
    s = _Tty()
    bar = Progress({"a": 100}, enabled=None, stream=s)
    bar.break_line()
    assert s.getvalue() == ""  # nothing drawn yet: nothing to end
    bar.update("a", 10)
    bar.break_line()
    assert s.getvalue().startswith("\r[") and s.getvalue().endswith("\n")
    before = s.getvalue()
    bar.break_line()  # the line is already ended
    assert s.getvalue() == before
    quiet = io.StringIO()
    off = Progress({"a": 100}, enabled=False, stream=quiet)
    off.update("a", 10)
    off.break_line()
    assert quiet.getvalue() == ""


# ------------------------------------------------------------------ time left
def _eta_errors(bar_factory, startup: float, after: float):
    """Relative error of the time left against the true one on a bursty, jittered run.

    Workers start after ``startup`` seconds, then two blocks of 100 replicates finish together
    every 2 s on average (2.6, 1.7, 1.7 s in turn): the true rate is exactly 100 replicates a
    second, so the true time left is (total - done) / 100 seconds.
    """
    now = [0.0]
    total = 60_000
    bar, eta = bar_factory(total, lambda: now[0])
    now[0] = startup
    done, k, errors = 0, 0, []
    while done < total:
        now[0] += (2.6, 1.7, 1.7)[k % 3]
        for _ in range(2):
            bar.update("a", 100)
            done += 100
        k += 1
        if now[0] > after and done < total:
            truth = (total - done) / 100.0
            errors.append(eta(bar, now[0]) / truth - 1.0)
    return np.array(errors)


def _smoothed(total, timer):
    return Progress({"a": total}, enabled=False, timer=timer), lambda bar, _now: bar.time_left()


def _whole_run_average(total, timer):  # the former estimate: elapsed x left / done
    bar = Progress({"a": total}, enabled=False, timer=timer)
    return bar, lambda b, now: now * (total - sum(b.done.values())) / sum(b.done.values())


def test_time_left_is_smoothed_and_forgets_a_slow_start():
    assert HALF_LIFE == 30.0  # the half-life stated in the docstring and the README
    # a 20 s start-up, then bursts of two blocks with +-30% jitter in their spacing
    err = _eta_errors(_smoothed, startup=20.0, after=120.0)
    # after four half-lives the start-up weighs 0.5^(100/30) = 0.1 of a 2 s block's time at most
    # in the rate: the estimate stays within 8% of the truth for the rest of the run
    assert np.max(np.abs(err)) < 0.08, np.max(np.abs(err))
    # the whole-run average keeps the start-up in the rate and runs more than 8% slow here
    old = _eta_errors(_whole_run_average, startup=20.0, after=120.0)
    assert np.max(np.abs(old)) > 0.08
    # jitter alone (no start-up): the estimate never wanders by more than 6%
    calm = _eta_errors(_smoothed, startup=0.0, after=30.0)
    assert np.max(np.abs(calm)) < 0.06, np.max(np.abs(calm))


def test_time_left_unknown_before_the_first_replicate_and_zero_at_the_end():
    now = [5.0]
    bar = Progress({"a": 10}, enabled=False, timer=lambda: now[0])
    assert math.isnan(bar.time_left())
    now[0] = 6.0
    bar.update("a", 10)
    assert bar.time_left() == 0.0


# ------------------------------------------------------------------ notes and warnings
STRAT_CLUSTER = '[[design]]\nlabel = "sc"\nmethod = "stratified_cluster"\nclusters = 10\n'
SRS = '[[design]]\nlabel = "s"\nmethod = "srs"\nn = 50\n'


def _run(tmp_path, sc, *extra):
    argv = [sys.executable, "-m", "samplewright", "run", str(sc), "--out", str(tmp_path / "o"), "--no-report", *extra]
    proc = subprocess.run(argv, capture_output=True, text=True, env={**os.environ, "PYTHONPATH": SRC}, check=False)
    assert proc.returncode == 0, proc.stderr
    return proc.stdout, proc.stderr, json.loads((tmp_path / "o" / "run.json").read_text())


def test_allocation_of_clusters_is_a_note_not_a_warning(tmp_path):
    sc = _scenario(tmp_path, STRAT_CLUSTER, replicates=600, extra="[cost]\nper_unit = 1.0\n")
    _, err, info = _run(tmp_path, sc)
    lines = err.splitlines()
    said = [ln for ln in lines if "clusters per stratum" in ln]
    assert len(said) == 1 and said[0].startswith("note: design 'sc'"), err
    assert not any(ln.startswith("warning:") and "clusters per stratum" in ln for ln in lines)
    assert any("clusters per stratum" in n for n in info["notes"])
    assert not any("clusters per stratum" in w for w in info["warnings"])
    assert not any("costs are not modelled" in n for n in info["notes"])  # a [cost] table is given


def test_no_cost_model_is_said_once_and_the_cost_column_is_left_out(tmp_path):
    sc = _scenario(tmp_path, SRS, replicates=600)
    out, err, info = _run(tmp_path, sc)
    assert sum(ln.startswith("note: costs are not modelled") for ln in err.splitlines()) == 1, err
    assert sum("costs are not modelled" in n for n in info["notes"]) == 1
    header = next(ln for ln in out.splitlines() if ln.strip().startswith("Design"))
    assert "Expected cost" not in header and "Coverage" in header
    summary = pd.read_csv(tmp_path / "o" / "summary.csv")
    assert (summary["mean_cost"] == 0).all()  # the contract column stays, at 0


def test_with_a_cost_model_the_cost_column_is_printed(tmp_path):
    sc = _scenario(tmp_path, SRS, replicates=600, extra="[cost]\nfixed = 100.0\nper_unit = 2.0\n")
    out, err, _ = _run(tmp_path, sc)
    header = next(ln for ln in out.splitlines() if ln.strip().startswith("Design"))
    assert "Expected cost" in header
    # SRS of n = 50: cost = 100 + 50 x 2 = 200 in every replicate (the linear cost model)
    assert " 200" in out and "note: costs are not modelled" not in err


# ------------------------------------------------------------------ the skewness rule
def _srs_cells(n):
    from samplewright.designs import SRS as SRSDesign
    from samplewright.simulation.engine import make_cells

    return make_cells([SRSDesign("simple", n=n)], [("ht",)])


def test_skewness_rule_never_asks_for_more_units_than_the_frame_holds():
    from samplewright.diagnostics.checks import design_warnings

    y = np.concatenate([np.ones(39), [200.0]])  # one huge unit among 40
    f = Frame.from_dataframe(pd.DataFrame({"y": y}), target="y")
    g1 = stats.skew(y, bias=False)  # Cochran (1977), sec. 2.15: the rule is n > 25 G1^2
    bound = 25 * g1**2
    assert bound > len(y)  # G1 = 6.3: the rule asks for about 1000 units of a 40-unit frame
    said = [w for w in design_warnings(f, _srs_cells(10), 1000) if "Cochran" in w]
    assert len(said) == 1
    w = said[0]
    assert f"25 G1^2 = {bound:.0f}" in w and "than the 40 in the frame" in w
    assert "cannot be reached by sampling more" in w and "under-cover" in w and "coverage column" in w
    assert "is not met by" not in w  # no sample size to ask for


def test_skewness_rule_on_a_constant_target_raises_no_numpy_warning():
    # pytest turns warnings into errors here: scipy's precision-loss warning would fail the test
    from samplewright.diagnostics.checks import design_warnings

    f = Frame.from_dataframe(pd.DataFrame({"y": np.full(50, 7.0)}), target="y")
    said = design_warnings(f, _srs_cells(5), 1000)
    assert not any("Cochran" in w for w in said)


# ------------------------------------------------------------------ exact mode texts
MC_WORDS = ("monte carlo", "simulation error", "simulated", "cannot be trusted", "mcse", "replicates")


def test_exact_mode_texts_say_the_exact_thing():
    from samplewright import run, scenario_from_dict
    from samplewright.report.story import build_context

    y = [1.0, 1.0, 2.0, 1.0, 1.0, 3.0, 1.0, 40.0]  # one large unit: small samples under-cover
    df = pd.DataFrame({"y": y})
    sc = scenario_from_dict({"replicates": 100, "frame": {"synthetic": {"units": 8}},  # replaced by frame=
                             "design": [{"label": "simple", "method": "srs", "n": [2, 3]}]})
    frame = Frame.from_dataframe(df, target="y")
    res = run(sc, frame=frame, exact=True)
    ctx = build_context(res)
    texts = ([*ctx["findings"], *ctx["warnings"], *ctx["cautions"], ctx["reproduce"]]
             + [f"{k} {v}" for k, v in ctx["metadata"]]
             + [str(r[k]) for r in ctx["summary_rows"] for k in ("bias", "empirical_se", "coverage")]
             + [str(r[k]) for r in ctx["compact_rows"] for k in ("bias", "coverage")]
             + [str(r[k]) for r in ctx["comparison"] for k in ("moe", "coverage")] + [ctx["verdict"]["sentence"]])
    for t in texts:
        assert not any(word in t.lower() for word in MC_WORDS), t
    assert not any("(" in str(r["coverage"]) for r in ctx["summary_rows"])  # no bracketed error
    # exact coverage by enumeration (itertools): the share of all C(8, n) samples whose
    # t interval (n - 1 degrees of freedom, common practice) holds the mean; every sample of an
    # SRS has the same probability
    N, mean = len(y), float(np.mean(y))
    for n, row in zip((2, 3), (r for r in ctx["summary_rows"] if r["estimator"] == "HT")):
        z = stats.t.ppf(0.975, n - 1)
        held = 0
        combos = list(itertools.combinations(y, n))
        for s in combos:
            se = math.sqrt((1 - n / N) * np.var(s, ddof=1) / n)  # Cochran (1977), eq. 2.12
            held += abs(np.mean(s) - mean) <= z * se
        cover = held / len(combos)
        assert cover < 0.95
        assert row["coverage"] == f"{100 * cover:.4g}", (row["coverage"], cover)
        assert row["coverage_flag"] == "low"
    low = [t for t in ctx["findings"] if "Intervals too narrow" in t]
    assert len(low) == 1 and "possible samples" in low[0] and "exact coverage" in low[0]
    assert "exact=True" in ctx["reproduce"] and "seed" not in ctx["reproduce"]
    # no cost model: the report's tables show a dash, not a cost of 0 everywhere
    assert {r["mean_cost"] for r in ctx["summary_rows"] + ctx["compact_rows"] + ctx["comparison"]} == {"\u2014"}


# ------------------------------------------------------------------ help and version
def _subparsers(parser):
    for a in parser._actions:
        if isinstance(a, argparse._SubParsersAction):
            return a.choices
    return {}


def test_every_option_of_every_command_states_its_default():
    subs = _subparsers(cli.build_parser())
    assert {"run", "demo", "plan", "inspect", "report", "synth"} <= set(subs)
    checked = 0
    for name, p in subs.items():
        for a in p._actions:
            if isinstance(a, argparse._HelpAction):
                continue
            where = f"{name} {'/'.join(a.option_strings) or a.dest}"
            assert a.help and a.help.strip(), where
            if not a.option_strings:  # a positional: required, or says what happens without it
                continue
            text = a.help.lower()
            if a.required:
                assert "required" in text, where
                continue
            assert "default" in text, where
            if isinstance(a, argparse._StoreTrueAction):
                assert "default: off" in text, where
            elif a.default is not None:
                assert f"default: {a.default}" in text, (where, a.default, a.help)
            checked += 1
    assert checked > 40


def test_version_prints_the_installed_version(capsys):
    assert cli.main(["--version"]) == 0
    out = capsys.readouterr().out.strip()
    assert out == f"samplewright {version('samplewright')}"


@pytest.mark.parametrize("command", ["run", "demo", "plan", "inspect", "report", "synth"])
def test_help_of_each_command_prints_and_exits_zero(command, capsys):
    assert cli.main([command, "--help"]) == 0
    assert "default" in capsys.readouterr().out
