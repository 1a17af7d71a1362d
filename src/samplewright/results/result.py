"""The result of a run: tidy tables plus the metadata needed to reproduce it."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from samplewright.files import prepare_dir, write_csv, write_json, write_parquet, write_text
from samplewright.results.replicate_file import ReplicateFile

ALLOCATION_COLUMNS = ["design", "size", "stratum", "population_units", "sample_units"]
#: the files of a stress run, in the order of RunResult.stress, .stress_verdict, .break_even
STRESS_FILES = ("stress.csv", "stress_verdict.csv", "break_even.csv")


class _Replicates:
    """``RunResult.replicates``: a DataFrame, or a streamed run's :class:`ReplicateFile` read on first use."""

    def __get__(self, obj, owner=None):
        if obj is None:
            raise AttributeError("replicates")  # a required field of the dataclass
        value = obj.__dict__["replicates"]
        return value.read() if isinstance(value, ReplicateFile) else value

    def __set__(self, obj, value) -> None:
        obj.__dict__["replicates"] = value


@dataclass
class RunResult:
    """Everything a run produced.

    Attributes
    ----------
    summary : DataFrame
        One row per design x size x estimator x variance formula x variable (see
        ``evaluation.measures.SUMMARY_COLUMNS``; the formula is the last column, ``variance``).
    replicates : DataFrame
        Every replicate's estimate, SE, interval, sample size and cost, under each variance formula.  A
        run streamed to its results folder (no ``[goal]``) keeps it on disk and reads it on first use
        (:class:`~samplewright.results.replicate_file.ReplicateFile`); a pickled result carries it.
    allocation : DataFrame
        Units per stratum for designs with an allocation.
    info : dict
        Run metadata written to run.json (seed, replicates, jobs, versions, timing, warnings).
    """

    summary: pd.DataFrame
    replicates: pd.DataFrame = _Replicates()
    allocation: pd.DataFrame
    info: dict
    frontier: pd.DataFrame | None = None
    recommendation: dict | None = None
    warnings: list[str] = field(default_factory=list)
    #: the target along a systematic design's walk order, when a cycle was found (frame_order.csv)
    frame_order: pd.DataFrame | None = None
    #: (what, exception) of each step after the simulation that failed (the tables are still complete)
    late_failures: list = field(default_factory=list)
    #: with [[assumption]] tables: every point's measures (stress.csv), its pick (stress_verdict.csv) and
    #: the assumption values where the pick changes (break_even.csv); see decision/stress.py
    stress: pd.DataFrame | None = None
    stress_verdict: pd.DataFrame | None = None
    break_even: pd.DataFrame | None = None
    #: ``propose`` only: every screened design (candidates.csv) and the shortlist's scenario document
    candidates: pd.DataFrame | None = None
    proposal: dict | None = None

    def write(self, out, force: bool = False, report: bool = False, svg: bool = False) -> Path:
        """Write the contract files into folder ``out`` (refusing a non-empty one unless ``force``).

        With ``report=True`` also the figures (``figures/``, PNG, and SVG with ``svg=True``),
        ``report.html`` and ``brief.md`` (see :func:`samplewright.report.write_report`).
        """
        p = prepare_dir(out, force=force)
        # an older run.json marks older files complete: remove it first, so an interrupted
        # overwrite never leaves new and old files under one complete-looking run.json; older
        # derived files go too, so a run without them never shows another run's
        for name in ("run.json", "frontier.csv", "recommendation.json", "frame_order.csv", "candidates.csv",
                     "proposal.toml") + STRESS_FILES:
            (p / name).unlink(missing_ok=True)
        # the simulated tables first, run.json marking them complete; then what is derived from them,
        # so that a failure there never loses the simulation
        held = self.__dict__["replicates"]
        if isinstance(held, ReplicateFile):  # streamed: its file renamed (or copied) into place
            held.place(p / "replicates.parquet")
        else:
            write_parquet(held, p / "replicates.parquet")
        write_csv(self.summary, p / "summary.csv")
        write_csv(self.allocation, p / "allocation.csv")
        if self.frame_order is not None:
            write_csv(self.frame_order, p / "frame_order.csv")
        write_json(self.info, p / "run.json")
        if self.frontier is not None:
            write_csv(self.frontier, p / "frontier.csv")
        if self.recommendation is not None:
            write_json(self.recommendation, p / "recommendation.json")
        for name, table in zip(STRESS_FILES, (self.stress, self.stress_verdict, self.break_even)):
            if table is not None:
                write_csv(table, p / name)
        if self.candidates is not None:
            write_csv(self.candidates, p / "candidates.csv")
        if self.proposal is not None:
            from samplewright.proposal.build import proposal_text  # only a proposal needs it

            write_text(proposal_text(self.proposal, self.candidates, p), p / "proposal.toml")
        if report:
            # the report loads matplotlib and jinja2: deliberately lazy, so a run without a report starts fast
            from samplewright.report import write_report

            write_report(self, p, svg=svg, force=True)
        return p

    def __getstate__(self) -> dict:
        """Pickled with its replicate table (a streamed run's file is read into it)."""
        return {**self.__dict__, "replicates": self.replicates}

    def figure(self, name: str, variable: str | None = None):
        """Draw one of the report's figures as a matplotlib Figure (names: :meth:`figure_names`).

        Examples
        --------
        >>> from samplewright import scenario_from_dict, run
        >>> res = run(scenario_from_dict({"frame": {"synthetic": {"units": 300}},
        ...                               "design": [{"label": "simple", "method": "srs", "n": 30}]}),
        ...           replicates=100, seed=1)
        >>> fig = res.figure("coverage")
        >>> float(fig.get_size_inches()[0])
        6.5
        """
        from samplewright.report.figures import make_figure  # lazy: matplotlib only when a figure is drawn

        return make_figure(self, name, variable)

    def figure_names(self) -> list[str]:
        """The figures this run has data for, in report order."""
        from samplewright.report.figures import (
            figure_names,  # lazy: matplotlib only when figures are asked for
        )

        return figure_names(self)
