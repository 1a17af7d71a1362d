"""The scenario's ``[[assumption]]`` tables and ``[stress]`` settings: which keys to vary, over which values.

Each ``[[assumption]]`` names a numeric key of the scenario by its dotted path (``set``), e.g.
``frame.synthetic.clusters.icc``, ``response.rate``, ``cost.per_cluster`` or ``design.0.n`` (a
number picks an item of an array of tables, from 0), and the ``values`` to try.  The key must be
written in the scenario (its own value is the base of ``one_at_a_time``) and hold a number.
``[stress] mode`` is ``"one_at_a_time"`` (each assumption over its values, the others at the
scenario's own values; the default) or ``"grid"`` (every combination); ``max_points`` caps the
number of points (default :data:`MAX_POINTS`).

Only the checks that need no built object happen here; every point's scenario is then built
through the normal checks (:mod:`samplewright.simulation.stress`), so a value invalid at its
key is refused before anything runs.
"""

from __future__ import annotations

import copy
import itertools
import math
from dataclasses import dataclass

from samplewright.config.validate import as_int, as_str, check_keys, closest
from samplewright.errors import InputError, show

ASSUMPTION_KEYS = ("name", "set", "values")
STRESS_KEYS = ("mode", "max_points")
MODES = ("one_at_a_time", "grid")
#: default cap on the number of assumption points (each is a full run: a sanity bound, no published source)
MAX_POINTS = 200
#: the most max_points may raise it to (each point is a whole rehearsal; a sanity bound, no published source)
MAX_POINTS_LIMIT = 10_000
#: keys that are run settings, not assumptions: varying them would break the common random numbers
#: or change what is measured rather than the world measured
RUN_SETTINGS = ("seed", "replicates", "block_size", "frame.synthetic.seed")
#: the columns of stress.csv, stress_verdict.csv and break_even.csv besides one per assumption (named by it);
#: ``variance`` follows ``estimator`` when the run has it
STRESS_COLUMNS = ["point", "design", "method", "size", "estimator", "variable", "replicates", "truth",
                  "mean_estimate", "bias", "bias_mcse", "empirical_se", "empirical_se_mcse", "rmse", "moe",
                  "moe_mcse", "coverage", "coverage_mcse", "mean_n", "mean_cost"]
VERDICT_COLUMNS = ["point", "pick", "goal_moe", "goal_budget", "design", "method", "size", "estimator", "variable",
                   "mean_n", "mean_cost", "moe", "moe_mcse", "coverage", "coverage_mcse", "evidence_coverage",
                   "evidence_margin", "evidence_cost", "pick_stability"]
BREAK_EVEN_COLUMNS = ["assumption", "from_value", "to_value", "pick_before", "pick_after", "design_before",
                      "design_after", "criterion",
                      "break_even", "break_even_se", "low", "high", "method"]
#: names an assumption may not take: they would collide with a column of those tables
RESERVED = frozenset(STRESS_COLUMNS + VERDICT_COLUMNS + BREAK_EVEN_COLUMNS
                     + ["variance", "published_moe", "published_moe_mcse"])


@dataclass(frozen=True)
class Assumption:
    """One ``[[assumption]]``: its name, the dotted path of the key it sets, the values to try, the scenario's own."""

    name: str
    path: tuple[str, ...]
    values: tuple[float, ...]
    base: float

    @property
    def key(self) -> str:
        return ".".join(self.path)


@dataclass(frozen=True)
class StressSpec:
    """The assumptions and how their values combine into points."""

    assumptions: tuple[Assumption, ...]
    mode: str = "one_at_a_time"
    max_points: int = MAX_POINTS

    @property
    def names(self) -> list[str]:
        return [a.name for a in self.assumptions]

    def points(self) -> list[dict[str, float]]:
        """Every point as {assumption name: value}, in order (see module notes)."""
        if self.mode == "grid":
            return [dict(zip(self.names, combo)) for combo in itertools.product(*(a.values for a in self.assumptions))]
        base = {a.name: a.base for a in self.assumptions}
        return [{**base, a.name: v} for a in self.assumptions for v in a.values]

    def count(self) -> int:
        if self.mode == "grid":
            return math.prod(len(a.values) for a in self.assumptions)
        return sum(len(a.values) for a in self.assumptions)


def _number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _step(node, part: str):
    """The child ``part`` of a table (a key) or an array (an index from 0); KeyError when absent."""
    if isinstance(node, dict):
        return node[part]
    if isinstance(node, list) and part.isdigit() and int(part) < len(node):
        return node[int(part)]
    raise KeyError(part)


def _lookup(doc: dict, path: tuple[str, ...], ctx: str):
    node = doc
    for i, part in enumerate(path):
        try:
            node = _step(node, part)
        except KeyError:
            where = ".".join(path[:i]) or "the scenario"
            options = list(node) if isinstance(node, dict) else []
            raise InputError(f"{ctx}: set = {show('.'.join(path))}: {show(part)} is not a key of {where}"
                             f"{closest(part, options) if options else ''} (the key must be written in the "
                             f"scenario, with its own value)") from None
    return node


def with_value(doc: dict, path: tuple[str, ...], value) -> dict:
    """A deep copy of the scenario document with the key at ``path`` set to ``value`` (the path exists)."""
    out = copy.deepcopy(doc)
    node = out
    for part in path[:-1]:
        node = _step(node, part)
    if isinstance(node, list):
        node[int(path[-1])] = value
    else:
        node[path[-1]] = value
    return out


def _assumption(table, i: int, doc: dict, synthetic: bool) -> Assumption:
    ctx = f"[[assumption]] #{i + 1}"
    if not isinstance(table, dict):
        raise InputError(f"{ctx} must be a table with name, set and values")
    check_keys(table, ASSUMPTION_KEYS, ctx)
    for req in ASSUMPTION_KEYS:
        if req not in table:
            raise InputError(f"{ctx}: missing required key {show(req)}")
    name = as_str(table["name"], "name", ctx)
    ctx = f"assumption {show(name)}"
    if name in RESERVED:
        raise InputError(f"{ctx}: the name is a column of the stress tables; choose another (e.g. {name}_value)")
    key = as_str(table["set"], "set", ctx)
    path = tuple(key.split("."))
    if not key or any(not p for p in path):
        raise InputError(f"{ctx}: set = {show(key)} is not a dotted path of a scenario key (e.g. response.rate)")
    if path[0] in ("assumption", "stress") or key in RUN_SETTINGS:
        raise InputError(f"{ctx}: set = {show(key)} is a run setting, not an assumption; every point runs with "
                         f"the scenario's own {key}")
    if path[0] == "frame" and not (synthetic and len(path) > 2 and path[1] == "synthetic"):
        raise InputError(f"{ctx}: set = {show(key)} would change the frame's values or columns; only a "
                         f"synthetic frame's parameters (frame.synthetic.*) may be varied, as it is regenerated "
                         f"from its own seed")
    base = _lookup(doc, path, ctx)
    if not _number(base):
        raise InputError(f"{ctx}: set = {show(key)} holds {show(base)}, not a number; only numeric keys may be "
                         f"varied")
    values = table["values"]
    if not isinstance(values, list) or not values:
        raise InputError(f"{ctx}: values must be a non-empty list of numbers, got {show(values)}")
    for v in values:
        if not _number(v) or not math.isfinite(v):
            raise InputError(f"{ctx}: value {show(v)} is not a finite number")
    if len(set(values)) != len(values):
        raise InputError(f"{ctx}: values repeat: {show(values)}")
    return Assumption(name=name, path=path, values=tuple(values), base=base)


def stress_spec(doc: dict, synthetic: bool) -> StressSpec | None:
    """The checked ``[[assumption]]`` and ``[stress]`` tables of a scenario document (None without assumptions).

    ``synthetic``: whether the frame is a ``[frame.synthetic]`` one (its parameters may then be varied).
    """
    tables = doc.get("assumption")
    settings = doc.get("stress", {})
    if tables is None:
        if "stress" in doc:
            raise InputError("[stress] is given but no [[assumption]] table says what to vary")
        return None
    if not isinstance(tables, list) or not tables:
        raise InputError("assumption must be written as [[assumption]] tables (a list)")
    if not isinstance(settings, dict):
        raise InputError("[stress] must be a table (mode, max_points)")
    check_keys(settings, STRESS_KEYS, "[stress]")
    mode = as_str(settings.get("mode", "one_at_a_time"), "mode", "[stress]")
    if mode not in MODES:
        raise InputError(f"[stress]: mode = {show(mode)} is not accepted{closest(mode, MODES)}")
    cap = as_int(settings.get("max_points", MAX_POINTS), "max_points", "[stress]", minimum=1,
                 maximum=MAX_POINTS_LIMIT)
    assumptions = tuple(_assumption(t, i, doc, synthetic) for i, t in enumerate(tables))
    names = [a.name for a in assumptions]
    for what, seen in (("name", names), ("set", [a.key for a in assumptions])):
        dup = {x for x in seen if seen.count(x) > 1}
        if dup:
            raise InputError(f"[[assumption]]: {what} {show(min(dup))} is used twice; each assumption varies "
                             f"one key under one name")
    spec = StressSpec(assumptions=assumptions, mode=mode, max_points=cap)
    if spec.count() > cap:
        raise InputError(f"[stress]: {mode} over the assumptions gives {spec.count():,} points, more than "
                         f"max_points = {cap:,}; drop values or raise max_points")
    return spec


def point_document(doc: dict, spec: StressSpec, point: dict[str, float]) -> dict:
    """The scenario document of one point: the assumptions' keys set, the stress tables dropped."""
    out = {k: v for k, v in doc.items() if k not in ("assumption", "stress")}
    for a in spec.assumptions:
        out = with_value(out, a.path, point[a.name])
    return out


def lines(spec: StressSpec) -> list[tuple[str, list[int]]]:
    """(assumption name, point numbers from 1 in increasing value of it, the other assumptions fixed) of every
    line along which one assumption moves: its own points (one_at_a_time) or each row of the grid along it."""
    pts = spec.points()
    out = []
    for i, a in enumerate(spec.assumptions):
        if spec.mode == "grid":
            groups: dict[tuple, list[int]] = {}
            for k, p in enumerate(pts, start=1):
                groups.setdefault(tuple(p[b.name] for b in spec.assumptions if b.name != a.name), []).append(k)
            members = list(groups.values())
        else:
            start = sum(len(b.values) for b in spec.assumptions[:i]) + 1
            members = [list(range(start, start + len(a.values)))]
        out.extend((a.name, sorted(m, key=lambda k: pts[k - 1][a.name])) for m in members)
    return out
