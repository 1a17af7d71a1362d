"""The assumption points of a stress run: each point's scenario built and checked, their folders, their progress.

Common random numbers
---------------------
Every point runs with the run's own seed, and a block's stream is keyed by the design's label,
the size index and the block index only (engine.py), never by the point: replicate r of a design
at one point draws from the same stream as replicate r at every other point.  A synthetic frame
whose parameters are varied is regenerated from its own seed, so its random parts are the same
draws rescaled.  This is the variance-reduction technique of common random numbers (Law and
Kelton, Simulation Modeling and Analysis, the chapter on variance-reduction techniques; Glasserman
2004, Monte Carlo Methods in Financial Engineering, sec. 4.2 -- both from memory): a difference
between two points is then mostly the effect of the assumption, with much less Monte Carlo noise
than independent seeds would leave (checked in tests/test_stress.py).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from pathlib import Path

from samplewright.config.stress import Assumption, StressSpec, point_document, with_value
from samplewright.errors import InputError, show
from samplewright.simulation.checkpoint import FOLDER, MANIFEST, remove
from samplewright.simulation.plan import build_plan
from samplewright.simulation.progress import Progress, clock
from samplewright.simulation.scenario import Scenario, scenario_from_dict

#: the folder of a results folder holding each point's own blocks (for --resume)
STRESS_FOLDER = "stress"


@dataclass(frozen=True)
class StressPoint:
    """One assumption point: its number (from 1), the assumptions' values and the scenario they give."""

    index: int
    values: dict
    scenario: Scenario

    def describe(self) -> str:
        return ", ".join(f"{k} = {v:g}" for k, v in self.values.items())


def _build(scenario: Scenario, doc: dict, what: str) -> Scenario:
    """The scenario of ``doc`` through the normal checks; a refusal names ``what`` (the assumption and value)."""
    base = scenario.source.parent if scenario.source is not None else Path(".")
    try:
        built = scenario_from_dict(doc, base=base, source=scenario.source)
    except InputError as exc:
        raise InputError(f"{what} is refused: {exc}") from None
    if scenario.frame.synthetic is None:  # the user's frame file is the same at every point
        built = dataclasses.replace(built, frame=scenario.frame)
    return built


def _single(scenario: Scenario, a: Assumption, value) -> None:
    doc = {k: v for k, v in scenario.raw.items() if k not in ("assumption", "stress")}
    _build(scenario, with_value(doc, a.path, value), f"assumption {show(a.name)} value {show(value)} at {a.key}")


def stress_points(scenario: Scenario) -> list[StressPoint]:
    """Every point of the scenario's ``[[assumption]]`` tables, each scenario built and checked (none without).

    Each value is first tried alone (the others at the scenario's own values), so a refusal names
    the one assumption and value at fault; a grid's combinations are then built in turn.
    """
    spec: StressSpec | None = scenario.stress
    if spec is None:
        return []
    for a in spec.assumptions:
        for v in a.values:
            _single(scenario, a, v)
    points = []
    for i, values in enumerate(spec.points(), start=1):
        doc = point_document(scenario.raw, spec, values)
        points.append(StressPoint(i, values, _build(scenario, doc, _naming(values))))
    return points


def _naming(values: dict) -> str:
    """How a refusal names a point: ``assumption point 'icc' = 0.2, 'rate' = 0.7``."""
    return "assumption point " + ", ".join(f"{show(k)} = {show(v)}" for k, v in values.items())


def point_folder(out, point: StressPoint) -> Path:
    """Where a point keeps its blocks: ``OUT/stress/point_001/`` (its ``blocks/`` as a plain run's)."""
    return Path(out) / STRESS_FOLDER / f"point_{point.index:03d}"


def has_blocks(folder: Path) -> bool:
    """Whether a point's folder holds the blocks of an earlier, interrupted or kept, run of it."""
    return (folder / FOLDER / MANIFEST).is_file()


def remove_point_blocks(out) -> None:
    """Delete every point's blocks once the tables are written (as :func:`checkpoint.remove` does for the run)."""
    root = Path(out) / STRESS_FOLDER
    if not root.is_dir():
        return
    for folder in sorted(root.glob("point_*")):
        remove(folder)
        try:
            folder.rmdir()
        except OSError:  # it holds a file that is not ours: never deleted
            pass
    try:
        root.rmdir()
    except OSError:
        pass


class PointProgress(Progress):
    """The progress bar of a stress run: assumption points done, and time left."""

    def __init__(self, points: list[StressPoint], enabled: bool | None = None, stream=None, **kw):
        super().__init__({"points": len(points)}, enabled=enabled, stream=stream, **kw)
        self.names = {p.index: p.describe() for p in points}
        self.current = ""

    def point_done(self, point: StressPoint) -> None:
        self.current = self.names[point.index]
        self.update("points", 1)

    def line(self, name: str) -> str:
        total, done = self.totals["points"], self.done["points"]
        width = 16
        fill = min(width, int(width * done / total)) if total else width
        return (f"[{'#' * fill}{'-' * (width - fill)}] assumption points {done}/{total} "
                f"{clock(self.time_left()):>6} left | {self.current[:40]}")

    def close(self) -> None:
        if self.enabled:
            self.stream.write("\r" + " " * self._width + "\r")
            self.stream.write(f"{self.done['points']} assumption point(s) done in "
                              f"{clock(self.timer() - self.start)}\n")
            self.stream.flush()


def check_plans(points: list[StressPoint], options, frame) -> None:
    """Build every point's run plan (the frame bound, each design checked against it) before anything runs.

    ``frame``: the true population shared by every point (a frame file), or None (a synthetic frame,
    regenerated at each point from its own seed).
    """
    for p in points:
        try:
            build_plan(p.scenario, options, frame=frame)
        except InputError as exc:
            raise InputError(f"{_naming(p.values)} is refused: {exc}") from None
