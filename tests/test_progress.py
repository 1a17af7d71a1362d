"""The stderr progress bar: silent off a terminal and with --quiet, informative on one."""

from __future__ import annotations

import io

import pytest

from samplewright.cli import main as cli
from samplewright.simulation.progress import Progress, clock


class _Tty(io.StringIO):
    def isatty(self):
        return True


def test_silent_when_the_stream_is_not_a_terminal():
    s = io.StringIO()
    bar = Progress({"a": 100}, enabled=None, stream=s)
    bar.update("a", 100)
    bar.close()
    assert s.getvalue() == ""
    assert bar.done == {"a": 100}  # it still counts


def test_on_a_terminal_it_shows_design_counts_and_time_left():
    s = _Tty()
    bar = Progress({"simple": 1000, "by zone": 500}, enabled=None, stream=s)
    bar.update("simple", 1000)
    bar._last = 0.0  # redraw even within 0.1 s
    bar.update("by zone", 250)
    text = s.getvalue()
    assert text.startswith("\r[")
    assert "simple 1,000/1,000" in text and "by zone 250/500" in text
    assert "designs done 1/2" in text and " left" in text
    assert "83%" in text  # 1250 of 1500
    bar.close()
    assert s.getvalue().endswith("1,250 replicates of 2 design(s) done in 0s\n")


def test_more_replicates_than_planned_never_overflow_the_bar():
    # sequential stopping may run past the first plan
    bar = Progress({"a": 100}, enabled=True, stream=_Tty())
    bar.update("a", 250)
    line = bar.line("a")
    assert line.startswith("[" + "#" * 16 + "]") and "100%" in line and "0s left" in line


def test_clock():
    assert [clock(float("nan")), clock(4.2), clock(185), clock(7620)] == ["--", "4s", "3m05s", "2h07m"]


def test_quiet_run_prints_nothing(tmp_path, capsys):
    assert (
        cli.main(["demo", "--out", str(tmp_path / "q"), "--replicates", "50", "--quiet", "--no-report"]) == 0
    )
    out, err = capsys.readouterr()
    assert out == ""
    assert " left | " not in err  # no bar (warnings may still be printed)


@pytest.mark.slow
def test_verbose_logs_each_step_including_the_report(tmp_path, capsys):
    assert cli.main(["demo", "--out", str(tmp_path / "v"), "--replicates", "50", "--verbose"]) == 0
    err = capsys.readouterr().err
    for step in (
        "samplewright: loading the frame",
        "samplewright: drawing figure coverage",
        "samplewright: writing report.html and brief.md",
    ):
        assert step in err, step
