"""The scenario a run rehearses: the checked specs of config/scenario.py built into objects.

:func:`load_scenario` and :func:`scenario_from_dict` check the settings (config/scenario.py),
then build what they describe: each design through the method registry, its estimators and
weighting adjustment, the cost model, the ``[response]`` and ``[frame_error]`` models.  The
checks that need a built object (a design's parameters, estimator names and the frame
columns they need) run here, before anything is simulated, with the same ``error:`` lines.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from samplewright.config.goal import Goal
from samplewright.config.labels import Labels
from samplewright.config.scenario import (
    DEFAULT_BLOCK,
    DesignSpec,
    FrameSpec,
    parse_scenario,
    read_scenario_text,
)
from samplewright.config.stress import StressSpec
from samplewright.config.validate import closest
from samplewright.designs import DESIGN_CLASSES, Design
from samplewright.errors import InputError, show
from samplewright.estimation.auxiliary import check_estimators
from samplewright.estimation.cost import CostModel
from samplewright.estimation.registry import ESTIMATORS
from samplewright.estimation.weighting import AdjustmentSpec, adjustment_from_table
from samplewright.memory import release_freed_memory
from samplewright.population.frame import Frame
from samplewright.population.frame_errors import FrameErrorSpec, frame_error_from_dict
from samplewright.population.reading import input_file, label_columns, read_table, role_columns
from samplewright.population.synth import generate, stratum_units
from samplewright.simulation.response import ResponseModel, response_from_dict


@dataclass(frozen=True)
class FrameSource(FrameSpec):
    """Where the frame comes from (a file or a synthetic generator) and its column roles; loads it."""

    def dataframe(self, columns=None, labels=()) -> pd.DataFrame:
        if self.synthetic is not None:
            return generate(self.synthetic)
        return read_table(self.path, columns=columns, labels=labels, **self.reading)

    def load(self) -> Frame:
        source = "synthetic frame" if self.synthetic is not None else str(self.path)
        df = self.dataframe(columns=role_columns(self.roles), labels=label_columns(self.roles))
        frame = Frame.from_dataframe(df, missing=self.missing, source=source, **self.roles)
        del df  # the file's columns (pyarrow's buffers for a Parquet file) are freed only now:
        release_freed_memory()  # their pages go back to the system instead of staying in the pools
        return frame


@dataclass(frozen=True)
class Scenario:
    """A validated scenario: the frame, the competing designs and the run settings."""

    frame: FrameSource
    designs: tuple[Design, ...]
    estimators: tuple[tuple[str, ...], ...]
    adjustments: tuple[AdjustmentSpec, ...] = ()  # one per design (none: no adjustment)
    title: str = "untitled scenario"
    seed: int = 20261201
    replicates: int = 1000
    confidence: float = 0.95
    block_size: int = DEFAULT_BLOCK
    cost: CostModel = field(default_factory=CostModel)
    goals: tuple[Goal, ...] = ()  # from [goal] or [[goal]]
    labels: Labels = field(default_factory=Labels)  # from [labels]: words for money and units
    response: ResponseModel | None = None  # from [response]
    frame_error: FrameErrorSpec | None = None  # from [frame_error]
    stress: StressSpec | None = None  # from [[assumption]] and [stress] (simulation/stress.py runs the points)
    source: Path | None = None
    raw: dict = field(default_factory=dict, repr=False)

    @property
    def hash(self) -> str:
        """SHA-256 of the scenario's content (keys sorted), for run.json."""
        blob = json.dumps(self.raw, sort_keys=True, default=str).encode()
        return hashlib.sha256(blob).hexdigest()

    @property
    def goal(self) -> Goal | None:
        """The first goal (None without one), for callers that know a single goal."""
        return self.goals[0] if self.goals else None

    def load_frame(self) -> Frame:
        return self.frame.load()


def build_design(spec: DesignSpec) -> tuple[Design, tuple[str, ...], AdjustmentSpec]:
    """The design a ``[[design]]`` spec describes, its estimator names (checked) and its adjustment."""
    ctx = spec.context
    for e in spec.estimators:
        if not isinstance(e, str) or e not in ESTIMATORS:
            raise InputError(f"{ctx}: estimator {show(e)} is not known{closest(str(e), ESTIMATORS)}")
    try:
        design = DESIGN_CLASSES[spec.method](spec.label, **spec.params)
    except TypeError as exc:
        raise InputError(f"{ctx}: {exc}") from None
    return design, tuple(dict.fromkeys(spec.estimators)), adjustment_from_table(spec.adjustment, ctx)


def _frame_source(spec: FrameSpec, designs) -> FrameSource:
    """The frame to load; systematic designs' sort_by columns are resolved when it is loaded."""
    roles = spec.roles
    sort_keys = [d.sort_by for d in designs if isinstance(getattr(d, "sort_by", None), str)]
    if sort_keys:
        roles = {**roles, "sort_keys": list(dict.fromkeys(sort_keys))}
    fields = {f.name: getattr(spec, f.name) for f in dataclasses.fields(FrameSpec)}
    return FrameSource(**{**fields, "roles": roles})


def scenario_from_dict(doc: dict, base: Path | str = ".", source: Path | None = None) -> Scenario:
    """Validate a scenario given as a dict (the parsed TOML) and build it.

    ``base`` is the folder a relative frame path is read from; ``source`` the scenario file the
    dict came from (named in error lines about unknown keys, recorded in run.json), or None.

    Examples
    --------
    >>> sc = scenario_from_dict({
    ...     "frame": {"synthetic": {"units": 500}},
    ...     "design": [{"label": "simple", "method": "srs", "n": 50}],
    ... })
    >>> sc.designs[0].label
    'simple'
    """
    spec = parse_scenario(doc, base=base, source=source)
    if spec.frame.synthetic is not None:  # every stratum gets a unit: refused before any output folder is made
        stratum_units(spec.frame.synthetic)
    built = [build_design(d) for d in spec.designs]
    for design, estimators, _ in built:  # ratio/greg need auxiliary columns, poststrat a poststratum column
        check_estimators(estimators, spec.frame.roles, f"design {show(design.label)}")
    labels = [d.label for d, _, _ in built]
    dup = {x for x in labels if labels.count(x) > 1}
    if dup:
        raise InputError(f"design label {show(min(dup))} is used twice; labels must be unique")
    designs = tuple(d for d, _, _ in built)
    return Scenario(
        frame=_frame_source(spec.frame, designs), designs=designs, estimators=tuple(e for _, e, _ in built),
        adjustments=tuple(a for _, _, a in built), title=spec.title, seed=spec.seed, replicates=spec.replicates,
        confidence=spec.confidence, block_size=spec.block_size, cost=CostModel(**spec.cost), goals=spec.goals,
        labels=spec.labels,
        response=None if spec.response is None else response_from_dict(spec.response),
        frame_error=None if spec.frame_error is None else frame_error_from_dict(spec.frame_error),
        stress=spec.stress, source=spec.source, raw=spec.raw)


def load_scenario(path) -> Scenario:
    """Read and validate a scenario TOML file.

    Examples
    --------
    >>> from importlib.resources import files
    >>> sc = load_scenario(files("samplewright") / "data" / "demo.toml")
    >>> len(sc.designs) >= 3
    True
    """
    p = input_file(path, "scenario file")
    return scenario_from_dict(read_scenario_text(p), base=p.parent, source=p)
