"""Scenario files (TOML) turned into checked, frozen spec dataclasses (:class:`ScenarioSpec`).

The checks of a scenario's keys, value types and ranges happen here; a refusal is an
:class:`~samplewright.errors.InputError` naming the file and key at fault (and, for a
misspelt key, the closest valid one).  The objects the specs describe (designs, cost model,
response and frame-error models, adjustments) are built, with the checks that need them, by
:mod:`samplewright.simulation.scenario`.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from samplewright.config.costs import KEYS as COST_KEYS
from samplewright.config.costs import SCALAR_KEYS as COST_SCALARS
from samplewright.config.goal import DESIGN_WIDE, MAX_STABILITY_ROUNDS, Goal
from samplewright.config.labels import Labels, labels_spec
from samplewright.config.methods import METHOD_KEYS, RENAMED_METHODS, size_key
from samplewright.config.stress import StressSpec, stress_spec
from samplewright.config.synthetic import CLUSTER_KEYS, STRATUM_KEYS, SyntheticSpec
from samplewright.config.synthetic import KEYS as SYNTH_KEYS
from samplewright.config.validate import (
    READ_KEYS,
    as_bool,
    as_float,
    as_int,
    as_sizes,
    as_str,
    check_keys,
    closest,
    reading_options,
)
from samplewright.errors import InputError, show

TOP_KEYS = ("title", "seed", "replicates", "confidence", "block_size", "frame", "design", "cost",
            "response", "frame_error", "goal", "assumption", "stress", "labels")
FRAME_KEYS = ("path", "synthetic", "target", "stratum", "cluster", "size", "order", "unit_cost", "id", "missing",
              "auxiliary", "poststratum", "domain", "domains", "cluster_cost") + READ_KEYS
GOAL_KEYS = ("moe", "relative_moe", "budget", "confidence", "variable", "domain", "coverage_tolerance",
             "stability_rounds")
DESIGN_COMMON = ("label", "method", "estimators", "adjustment", "adjustment_classes", "raking_margins")
DEFAULT_BLOCK = 500
#: largest synthetic frame accepted, so an absurd value is refused before any array is allocated
#: (a sanity bound, no published source; a frame file is limited only by the machine)
MAX_SYNTHETIC_UNITS = 50_000_000
#: largest scenario file read (a settings file; 1 MiB is some 30,000 lines of settings: a sanity bound)
MAX_SCENARIO_BYTES = 1 << 20


# ------------------------------------------------------------------ frame spec
@dataclass(frozen=True)
class FrameSpec:
    """Where the frame comes from (a file or a synthetic generator) and its column roles."""

    path: Path | None = None
    synthetic: SyntheticSpec | None = None
    roles: dict = field(default_factory=dict)  # target, stratum, cluster, size, order, unit_cost, id
    missing: str = "refuse"
    reading: dict = field(default_factory=dict)  # how to read the file: separator, decimal, sheet...


def _synthetic(table: dict, ctx: str) -> SyntheticSpec:
    check_keys(table, SYNTH_KEYS, ctx)
    if "units" not in table:
        raise InputError(f"{ctx}: missing required key 'units' (number of units to generate)")
    kw = {"units": as_int(table["units"], "units", ctx, minimum=2, maximum=MAX_SYNTHETIC_UNITS)}
    for k in ("seed",):
        if k in table:
            kw[k] = as_int(table[k], k, ctx, minimum=0)
    for k in ("target",):
        if k in table:
            kw[k] = as_str(table[k], k, ctx)
    for k in ("mean", "trend", "amplitude"):
        if k in table:
            kw[k] = as_float(table[k], k, ctx)
    for k in ("sd", "size_mean", "size_cv"):
        if k in table:
            kw[k] = as_float(table[k], k, ctx, minimum=0.0)
    if "skewness" in table:
        kw["skewness"] = as_float(table["skewness"], "skewness", ctx, minimum=1e-6)
    if "period" in table:
        kw["period"] = as_float(table["period"], "period", ctx, minimum=1.0)
    if "size_correlation" in table:
        kw["size_correlation"] = as_float(table["size_correlation"], "size_correlation", ctx, -1.0, 1.0)
    for k, options in (("skew", ("none", "gamma", "lognormal")), ("order", ("random", "grouped"))):
        if k in table:
            v = as_str(table[k], k, ctx)
            if v not in options:
                raise InputError(f"{ctx}: {k} = {show(v)} is not accepted{closest(v, options)}")
            kw[k] = v
    if "strata" in table:
        strata = table["strata"]
        if not isinstance(strata, list) or not strata:
            raise InputError(f"{ctx}: strata must be a non-empty list of tables {{name, share, mean, sd}}")
        for i, s in enumerate(strata):
            sctx = f"{ctx}.strata[{i}]"
            check_keys(s, STRATUM_KEYS, sctx)
            if "share" in s:
                as_float(s["share"], "share", sctx, minimum=1e-12)
            if "sd" in s:
                as_float(s["sd"], "sd", sctx, minimum=0.0)
            if "mean" in s:
                as_float(s["mean"], "mean", sctx)
        names = [str(s.get("name", i)) for i, s in enumerate(strata)]
        if len(set(names)) != len(names):
            raise InputError(f"{ctx}: strata names repeat: {names}")
        kw["strata"] = tuple(dict(s) for s in strata)
    if "clusters" in table:
        c = table["clusters"]
        cctx = f"{ctx}.clusters"
        check_keys(c, CLUSTER_KEYS, cctx)
        if "mean_size" in c:
            as_float(c["mean_size"], "mean_size", cctx, minimum=1.0)
        if "icc" in c:
            as_float(c["icc"], "icc", cctx, minimum=0.0, maximum=1.0)
        if "size_cv" in c:
            as_float(c["size_cv"], "size_cv", cctx, minimum=0.0)
        kw["clusters"] = dict(c)
    return SyntheticSpec(**kw)


def _frame_spec(table: dict, base: Path, ctx: str = "[frame]") -> FrameSpec:
    check_keys(table, FRAME_KEYS, ctx)
    has_path, has_synth = "path" in table, "synthetic" in table
    if has_path == has_synth:
        raise InputError(f"{ctx}: give either path = \"file.csv\" or a [frame.synthetic] table (exactly one)")
    synthetic = _synthetic(table["synthetic"], "[frame.synthetic]") if has_synth else None
    path = None
    if has_path:
        name = as_str(table["path"], "path", ctx)
        if "\0" in name:
            raise InputError(f"{ctx}: path {show(name)} contains a NUL byte; no file can have that name")
        path = base / name
    roles = {}
    if "target" in table:
        t = table["target"]
        if isinstance(t, list):
            if not t:
                raise InputError(f"{ctx}: target is an empty list")
            roles["target"] = [as_str(v, "target", ctx) for v in t]
        else:
            roles["target"] = as_str(t, "target", ctx)
    elif synthetic is not None:
        roles["target"] = synthetic.target
    else:
        raise InputError(f"{ctx}: missing required key 'target' (the study-variable column)")
    for k in ("stratum", "cluster", "size", "order", "unit_cost", "id", "poststratum", "domain", "cluster_cost"):
        if k in table:
            roles[k] = as_str(table[k], k, ctx)
    if "auxiliary" in table:  # columns whose population totals the frame gives (ratio, greg)
        a = table["auxiliary"]
        a = [a] if isinstance(a, str) else a
        if not isinstance(a, list) or not a:
            raise InputError(f"{ctx}: auxiliary must be a column name or a non-empty list of them, got {show(a)}")
        roles["auxiliary"] = [as_str(v, "auxiliary", ctx) for v in a]
    if "domains" in table:  # which values of the domain column to report
        d = table["domains"]
        if not isinstance(d, list) or not d or any(isinstance(v, (bool, dict, list)) for v in d):
            raise InputError(f"{ctx}: domains must be a non-empty list of domain values, got {show(d)}")
        if "domain" not in table:
            raise InputError(f"{ctx}: domains is given but domain (the column defining them) is not")
        roles["domains"] = list(d)
    if synthetic is not None:  # the generator's columns are bound unless named otherwise
        if synthetic.has_strata:
            roles.setdefault("stratum", "stratum")
        if synthetic.clusters is not None:
            roles.setdefault("cluster", "cluster")
        if synthetic.size_correlation is not None:
            roles.setdefault("size", "size")
    missing = table.get("missing", "refuse")
    if missing not in ("refuse", "drop"):
        raise InputError(f"{ctx}: missing = {show(missing)} is not accepted (use 'refuse' or 'drop')")
    reading = reading_options(table, ctx)
    if reading and synthetic is not None:
        raise InputError(f"{ctx}: {', '.join(reading)} say(s) how to read a frame file; a [frame.synthetic] "
                         f"frame has none")
    return FrameSpec(path=path, synthetic=synthetic, roles=roles, missing=missing, reading=reading)


# ------------------------------------------------------------------ designs
@dataclass(frozen=True)
class DesignSpec:
    """One ``[[design]]`` table, checked: its method's keys and their types (the design is built later)."""

    label: str
    method: str
    params: dict  # the method's keys (config/methods.py), sizes checked
    estimators: tuple[str, ...]  # names, checked against the registry when built
    adjustment: dict  # the adjustment keys as written (estimation/weighting.py reads them)

    @property
    def context(self) -> str:
        """How error messages name the design."""
        return f"design {show(self.label)}"


def design_spec(table: dict, ctx: str) -> DesignSpec:
    """Check one ``[[design]]`` table's keys and value types."""
    if not isinstance(table, dict):
        raise InputError(f"{ctx} must be a table")
    for req in ("label", "method"):
        if req not in table:
            raise InputError(f"{ctx}: missing required key {show(req)}")
    label = as_str(table["label"], "label", ctx)
    ctx = f"design {show(label)}"
    method = as_str(table["method"], "method", ctx)
    if method in RENAMED_METHODS:
        raise InputError(f"{ctx}: method {method!r} is no longer accepted: use {RENAMED_METHODS[method]}")
    if method not in METHOD_KEYS:
        raise InputError(f"{ctx}: method {show(method)} is not known{closest(method, METHOD_KEYS)}")
    keys, sized_by = METHOD_KEYS[method], size_key(method)
    check_keys(table, DESIGN_COMMON + keys, ctx)
    params = {}
    for k in keys:
        if k not in table:
            continue
        v = table[k]
        if k == sized_by:
            params[k] = as_sizes(v, k, ctx)
        elif k in ("replace", "cap_units", "take_all"):
            params[k] = as_bool(v, k, ctx)
        elif k in ("units_per_cluster",):
            params[k] = as_int(v, k, ctx, minimum=1)
        elif isinstance(v, str):
            params[k] = as_str(v, k, ctx)
        else:
            params[k] = v
    if sized_by not in params:
        raise InputError(f"{ctx}: missing required key {show(sized_by)} (the sample size)")
    est = table.get("estimators", ["ht", "hajek"])
    if isinstance(est, str):
        est = [est]
    if not isinstance(est, list) or not est:
        raise InputError(f"{ctx}: estimators must be a non-empty list, got {show(est)}")
    adjustment = {k: table[k] for k in ("adjustment", "adjustment_classes", "raking_margins") if k in table}
    return DesignSpec(label=label, method=method, params=params, estimators=tuple(est), adjustment=adjustment)


# ------------------------------------------------------------------ scenario
@dataclass(frozen=True)
class ScenarioSpec:
    """A scenario's settings, checked key by key; simulation/scenario.py builds the objects they describe."""

    frame: FrameSpec
    designs: tuple[DesignSpec, ...]
    title: str = "untitled scenario"
    seed: int = 20261201
    replicates: int = 1000
    confidence: float = 0.95
    block_size: int = DEFAULT_BLOCK
    cost: dict = field(default_factory=dict)  # the cost model's rates, checked
    goals: tuple[Goal, ...] = ()
    labels: Labels = field(default_factory=Labels)  # [labels]: currency, unit words (config/labels.py)
    response: dict | None = None  # the [response] table (simulation/response.py checks it)
    frame_error: dict | None = None  # the [frame_error] table (population/frame_errors.py checks it)
    stress: StressSpec | None = None  # the [[assumption]] and [stress] tables (config/stress.py)
    source: Path | None = None
    raw: dict = field(default_factory=dict, repr=False)

    @property
    def goal(self) -> Goal | None:
        """The first goal (None without one), for callers that know a single goal."""
        return self.goals[0] if self.goals else None


def parse_scenario(doc: dict, base: Path | str = ".", source: Path | None = None) -> ScenarioSpec:
    """Check a scenario given as a dict (the parsed TOML): its keys, value types and ranges."""
    base = Path(base)
    check_keys(doc, TOP_KEYS, str(source) if source else "scenario")
    kw = {}
    if "title" in doc:
        kw["title"] = as_str(doc["title"], "title")
    if "seed" in doc:
        kw["seed"] = as_int(doc["seed"], "seed", minimum=0)
    if "replicates" in doc:
        kw["replicates"] = as_int(doc["replicates"], "replicates", minimum=1)
    if "confidence" in doc:
        kw["confidence"] = as_float(doc["confidence"], "confidence", minimum=0.0, maximum=1.0, open_interval=True)
    if "block_size" in doc:
        kw["block_size"] = as_int(doc["block_size"], "block_size", minimum=1)
    if "frame" not in doc:
        raise InputError("missing required table [frame] (a path or a [frame.synthetic] table)")
    frame = _frame_spec(doc["frame"], base)
    designs = doc.get("design")
    if not designs:
        raise InputError("missing required [[design]] tables: name at least one design to rehearse")
    if not isinstance(designs, list):
        raise InputError("design must be written as [[design]] tables (a list)")
    specs = tuple(design_spec(t, f"[[design]] #{i + 1}") for i, t in enumerate(designs))
    if "cost" in doc:
        kw["cost"] = _cost_rates(doc["cost"])
    if "goal" in doc:
        kw["goals"] = goals(doc["goal"], frame.roles)
    if "labels" in doc:
        kw["labels"] = labels_spec(doc["labels"], frame.roles.get("target"))
    for table in ("response", "frame_error"):
        if table in doc:
            kw[table] = doc[table]
    kw["stress"] = stress_spec(doc, synthetic=frame.synthetic is not None)
    return ScenarioSpec(frame=frame, designs=specs, source=source, raw=doc, **kw)


def _cost_rates(c: dict) -> dict:
    """[cost]: scalar rates (numbers >= 0), [cost.per_unit_by_stratum] and charge_touched_clusters."""
    check_keys(c, COST_KEYS, "[cost]")
    kw = {k: as_float(c[k], k, "[cost]", minimum=0.0) for k in c if k in COST_SCALARS}
    if "per_unit_by_stratum" in c:
        t, ctx = c["per_unit_by_stratum"], "[cost.per_unit_by_stratum]"
        if not isinstance(t, dict) or not t:
            raise InputError(f"{ctx} must be a table of stratum label = cost per unit, e.g. "
                             f"[cost.per_unit_by_stratum] with a line north = 18.0")
        kw["per_unit_by_stratum"] = tuple((str(k), as_float(v, str(k), ctx, minimum=0.0)) for k, v in t.items())
    if "charge_touched_clusters" in c:
        kw["charge_touched_clusters"] = as_bool(c["charge_touched_clusters"], "charge_touched_clusters", "[cost]")
    return kw


def goals(doc, roles: dict) -> tuple[Goal, ...]:
    """``[goal]`` or ``[[goal]]``: one goal per table; the design-wide keys (``budget``,
    ``coverage_tolerance``, ``stability_rounds``) are given once, or with the same value, and apply to
    every goal."""
    tables = doc if isinstance(doc, list) else [doc]
    if not tables or not all(isinstance(t, dict) for t in tables):
        raise InputError("goal must be a [goal] table or [[goal]] tables, e.g. [goal] with a line moe = 2.0")
    ctxs = ["[goal]"] if len(tables) == 1 else [f"[[goal]] #{i + 1}" for i in range(len(tables))]
    parsed = [_goal(t, roles, ctx) for t, ctx in zip(tables, ctxs)]
    shared = {}
    for kw, ctx in zip(parsed, ctxs):
        for k in DESIGN_WIDE:
            if k in kw:
                if k in shared and shared[k][0] != kw[k]:
                    raise InputError(f"{ctx}: {k} = {show(kw[k])} differs from {show(shared[k][0])} in "
                                     f"{shared[k][1]}; {k} applies to the whole design: give it once")
                shared.setdefault(k, (kw[k], ctx))
    seen = {}
    targets = roles.get("target")
    first = targets if isinstance(targets, str) else (list(targets)[0] if targets else None)
    for kw, ctx in zip(parsed, ctxs):
        key = (kw.get("variable", first), kw.get("domain"))  # a goal without variable is about the first target
        if key in seen:
            raise InputError(f"{ctx}: a second goal for the same variable and domain as {seen[key]}; "
                             f"give one [[goal]] per variable or domain")
        seen[key] = ctx
    return tuple(Goal(**{**kw, **{k: v for k, (v, _) in shared.items()}}) for kw in parsed)


def _goal(g: dict, roles: dict, ctx: str) -> dict:
    """One goal table's checked keys: a margin (moe or relative_moe) and/or a budget, and the rest."""
    check_keys(g, GOAL_KEYS, ctx)
    if "moe" not in g and "relative_moe" not in g and "budget" not in g:
        raise InputError(f"{ctx} needs moe (the margin of error to reach), relative_moe (the margin as a "
                         f"fraction of the true mean) and/or budget (the money available)")
    if "moe" in g and "relative_moe" in g:
        raise InputError(f"{ctx}: relative_moe and moe both give the margin; keep one of them")
    kw = {}
    for k in ("moe", "relative_moe", "budget"):
        if k in g:
            kw[k] = as_float(g[k], k, ctx, minimum=0.0)
            if kw[k] <= 0:
                raise InputError(f"{ctx}: {k} must be above 0, got {show(g[k])}")
    if "confidence" in g:
        kw["confidence"] = as_float(g["confidence"], "confidence", ctx, 0.0, 1.0, open_interval=True)
    if "coverage_tolerance" in g:
        kw["coverage_tolerance"] = as_float(g["coverage_tolerance"], "coverage_tolerance", ctx, minimum=0.0)
        if kw["coverage_tolerance"] >= 0.5:
            raise InputError(f"{ctx}: coverage_tolerance must be at least 0 and below 0.5 (a share of "
                             f"intervals, e.g. 0.01 for one percentage point), got {show(g['coverage_tolerance'])}")
    if "stability_rounds" in g:
        kw["stability_rounds"] = as_int(g["stability_rounds"], "stability_rounds", ctx, minimum=0,
                                          maximum=MAX_STABILITY_ROUNDS)
    targets = roles.get("target")
    if "variable" in g:
        v = as_str(g["variable"], "variable", ctx)
        names = [targets] if isinstance(targets, str) else list(targets or [])
        if names and v not in names:
            raise InputError(f"{ctx}: variable {show(v)} is not a target of [frame]{closest(v, names)}")
        kw["variable"] = v
    if "domain" in g:
        d = g["domain"]
        if isinstance(d, bool) or not isinstance(d, (str, int)):
            raise InputError(f"{ctx}: domain must be a value of the [frame] domain column, got {show(d)}")
        if roles.get("domain") is None:
            raise InputError(f"{ctx}: domain {show(d)} is given but [frame] names no domain column")
        listed = [str(x) for x in roles.get("domains") or []]
        if listed and str(d) not in listed:
            raise InputError(f"{ctx}: domain {show(d)} is not among [frame] domains{closest(str(d), listed)}")
        kw["domain"] = str(d)
    return kw


def read_scenario_text(p: Path) -> dict:
    """The TOML document of the scenario file ``p`` (an existing regular file), refused when too big or malformed."""
    size = p.stat().st_size
    if size > MAX_SCENARIO_BYTES:
        raise InputError(f"scenario file {str(p)!r} is {size:,} bytes, more than the {MAX_SCENARIO_BYTES:,} "
                         f"a scenario may have (it holds settings, not data: put data in the frame file)")
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"scenario file {str(p)!r} could not be read: {exc}") from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{p}: malformed TOML: {exc}") from None
    except RecursionError:  # tomllib parses nested arrays and tables recursively
        raise InputError(f"{p}: malformed TOML: arrays or tables nested too deeply to read") from None
