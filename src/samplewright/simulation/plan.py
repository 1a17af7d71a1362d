"""The run plan: everything a run needs, built once from the validated scenario and the run options.

:func:`build_plan` binds the frame (the true population and, under ``[frame_error]``, the listed
frame the designs draw from), sets up fieldwork, expands the designs into cells and checks
each design against the frame.  The engine (:func:`~samplewright.simulation.engine.simulate`,
:func:`~samplewright.simulation.engine.simulate_until`) reads only the plan, and exact mode
(:func:`~samplewright.evaluation.exact.evaluate_exact`) only its frame, cells, confidence and cost;
nothing in it is changed once built.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from pathlib import Path

from samplewright.config.validate import closest
from samplewright.errors import InputError, show
from samplewright.estimation.cost import CostModel
from samplewright.population.frame import Frame
from samplewright.simulation.engine import Cell, check_backend, make_cells
from samplewright.simulation.fieldwork import FieldSetup, prepare
from samplewright.simulation.scenario import Scenario


@dataclass(frozen=True)
class RunOptions:
    """What the caller asks of a run, on top of the scenario (``None``: the scenario's value)."""

    replicates: int | None = None
    seed: int | None = None
    jobs: int = 1
    block_size: int | None = None
    exact: bool = False
    until: str | None = None
    max_replicates: int | None = None
    out: Path | str | None = None
    resume: bool = False
    backend: str = "local"
    scheduler: str | None = None


@dataclass(frozen=True, eq=False)
class RunPlan:
    """A run, fixed: the frames, the cells, the random-stream root and how blocks are run.

    ``frame`` is what the designs draw from (the listed frame, with the cost column bound);
    ``truth_frame`` the true population the measures are scored against.  ``stopping`` is a
    stopping rule object (``evaluation.stopping.Rule``) built by the caller, or None for a fixed
    replicate count; ``store`` a :class:`~samplewright.simulation.checkpoint.BlockStore` or None.
    """

    frame: Frame
    cells: tuple[Cell, ...]
    replicates: int
    seed: int
    block_size: int
    confidence: float = 0.95
    cost: CostModel = dataclasses.field(default_factory=CostModel)
    truth_frame: Frame | None = None  # None: ``frame`` is the true population
    jobs: int = 1
    backend: str = "local"
    scheduler: str | None = None
    stopping: object | None = None
    store: object | None = None
    fieldwork: FieldSetup | None = None

    @property
    def truth(self) -> Frame:
        return self.frame if self.truth_frame is None else self.truth_frame

    @property
    def labels(self) -> list[str]:
        return [c.design.label for c in self.cells]


def run_settings(scenario: Scenario, options: RunOptions) -> tuple[int, int, int]:
    """The replicates, seed and block size of a run (options over the scenario), checked."""
    replicates = scenario.replicates if options.replicates is None else int(options.replicates)
    if replicates <= 0:
        raise InputError(f"replicates must be at least 1, got {replicates}")
    seed = scenario.seed if options.seed is None else int(options.seed)
    if seed < 0:
        raise InputError(f"seed must be a whole number of at least 0, got {seed}")
    block_size = scenario.block_size if options.block_size is None else int(options.block_size)
    if options.jobs < 1:
        raise InputError(f"jobs must be at least 1, got {options.jobs}")
    check_backend(options.backend, options.scheduler)
    return replicates, seed, block_size


def build_plan(scenario: Scenario, options: RunOptions, frame: Frame | None = None, stopping=None) -> RunPlan:
    """Bind the scenario to its frame and expand it into cells (see module notes).

    ``frame`` is the true population when already loaded; ``stopping`` the stopping rule
    (built by the caller from ``options.until``).  The block store is attached later
    (:func:`with_store`), once every check has passed.
    """
    replicates, seed, block_size = run_settings(scenario, options)
    if frame is None:
        frame = scenario.load_frame()
    check_goals(scenario.goals, frame)
    # an optimal allocation by cost takes its c_h from the true population's stratum costs
    designs = tuple(scenario.cost.for_design(d, frame) for d in scenario.designs)
    cells = make_cells(designs, scenario.estimators)
    field = prepare(scenario, frame, seed, scenario.confidence)
    listed = frame if field is None else field.frame  # designs draw from the listed frame (frame errors)
    if field is not None:  # the fieldwork block runner for every cell
        cells = [dataclasses.replace(c, fieldwork=field.per_design[c.design.label]) for c in cells]
    listed = bind_and_check(scenario.cost, listed, [c.design for c in cells])
    return RunPlan(frame=listed, cells=tuple(cells), replicates=replicates, seed=seed, block_size=block_size,
                   confidence=scenario.confidence, cost=scenario.cost, truth_frame=frame, jobs=options.jobs,
                   backend=options.backend, scheduler=options.scheduler, stopping=stopping, fieldwork=field)


def check_goals(goals, frame: Frame) -> None:
    """Refuse, once the frame is read, a goal whose ``domain`` is not a reported value of the frame's domain
    column (a [frame] domains list is checked when the scenario is read; without it the values are known only
    from the frame), and a ``relative_moe`` of a variable whose true mean is 0 (no margin is a share of 0)."""
    present = list(frame.layout.domain_labels)
    truth = dict(zip(frame.layout.names, frame.layout.truth))
    for g in goals:
        if g.domain is not None and g.domain not in present:
            raise InputError(f"[goal]: domain {show(g.domain)} is not a value of the domain column "
                             f"{show(frame.layout.domain_column)}{closest(g.domain, present)}")
        if g.relative_moe is None:
            continue
        target = g.variable if g.variable is not None else frame.variables[0]
        name = target if g.domain is None else f"{target}[{frame.layout.domain_column}={g.domain}]"
        if truth.get(name) == 0:
            raise InputError(f"[goal]: relative_moe = {show(g.relative_moe)} is a share of the mean of {show(name)}, "
                             f"which is 0 in the frame; give the margin as moe instead")


def bind_and_check(cost: CostModel, listed: Frame, designs) -> Frame:
    """The frame the designs draw from with the cost model's per-stratum unit rates bound into its
    cost column, each design (at one size) checked against it; refused designs raise InputError."""
    listed = cost.bind(listed)
    for design in designs:
        design.check(listed)
    return listed


def with_store(plan: RunPlan, store) -> RunPlan:
    """The same plan keeping its finished blocks in ``store``."""
    return dataclasses.replace(plan, store=store)
