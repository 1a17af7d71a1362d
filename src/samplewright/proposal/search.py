"""The designs ``propose`` screens, the size each can have under the goal, and the shortlist.

Families of candidates (each a design of the usual methods, so the shortlist is an ordinary scenario):

- ``srs``: simple random sampling, the reference;
- ``bands on COLUMN``: stratified SRS on bands of a numeric auxiliary (the frame's size column unless
  another is named), H = 2..8, boundaries by the cumulative sqrt(f) rule or geometric, and, for H = 3..8,
  a take-all top stratum for the CV the best of the others reaches (or the goal's); proportional, Neyman
  and, when the unit costs differ between strata, cost-optimal allocation (2 units at least per stratum).
  Boundaries are rounded to the fewest digits that keep the strata (``boundaries.tidy``); boundaries that
  leave a stratum with fewer than 2 units are listed, refused, with the reason;
- ``frame strata``: stratified SRS on the frame's own stratum column, the same allocations;
- ``cluster``: whole clusters, and two stages taking m_opt / 1.5, m_opt and 1.5 m_opt units (at least 2)
  per cluster, m_opt Kish's optimum from the frame's
  own intra-cluster correlation (ANOVA estimator) and the cost rates (a cluster's cost c1: per_cluster
  plus the mean cluster_cost; a unit's c2: per_unit, per_attempt, per_complete plus the mean unit_cost);
- ``pps``: probability proportional to size with replacement (Hansen-Hurwitz), when a size column exists.

Each candidate's size is the largest the budget pays for (``budget``) or the smallest whose anticipated
margin z sqrt(V) meets ``moe``.  A candidate's cost is the mean, over a pilot draw of PILOT samples, of
the scenario's own cost model (``CostModel.replicate_cost``), so every cost term counts as in the
rehearsal; its variance is the closed form of :mod:`samplewright.proposal.anticipate`.  Candidates are
ranked by anticipated variance (budget) or expected cost (margin); the best ``max_candidates`` distinct
ones form the shortlist.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from samplewright.decision.planning import optimal_cluster_take
from samplewright.decision.take_all import take_all
from samplewright.designs import DESIGN_CLASSES
from samplewright.designs.boundaries import cum_sqrt_f, geometric, tidy
from samplewright.diagnostics.checks import cost_notes
from samplewright.diagnostics.inspection import anova_icc
from samplewright.errors import InputError
from samplewright.proposal.anticipate import anticipated_variance
from samplewright.simulation.engine import stream_key

#: pilot samples that price a candidate (a mean cost; exact for designs whose cost does not vary)
PILOT = 32
#: numbers of strata searched
STRATA = range(2, 9)
#: the screen's table, one row per candidate
CANDIDATE_COLUMNS = ["design", "family", "method", "size", "strata", "boundary_rule", "allocation", "take_all",
                     "units_per_cluster", "expected_n", "anticipated_variance", "anticipated_se",
                     "anticipated_moe", "expected_cost", "screened_on", "rank", "shortlisted", "note"]
#: the allocation rules screened (of designs.allocation.RULES; equal allocation is left out)
ALLOCATIONS = ("proportional", "neyman", "optimal")


@dataclass
class Template:
    """A candidate without its size: a method and its scenario keys, and the size range to search."""

    label: str
    family: str
    method: str
    params: dict
    lo: int
    hi: int
    detail: dict = field(default_factory=dict)  # strata, boundary_rule, allocation, take_all, units_per_cluster

    def at(self, size: int):
        cls = DESIGN_CLASSES[self.method]
        return cls(self.label, **{**self.params, cls.size_key: int(size)})

    def table(self, size: int) -> dict:
        """The ``[[design]]`` table of this candidate at ``size``."""
        return {"label": self.label, "method": self.method, **self.params,
                DESIGN_CLASSES[self.method].size_key: int(size)}


@dataclass(frozen=True)
class Screen:
    """What the screen found: every candidate's row, the shortlist's ``[[design]]`` tables, and notes."""

    candidates: pd.DataFrame
    shortlist: list
    notes: list
    stratifier: str | None
    stratifier_values: np.ndarray | None
    boundaries: dict  # shortlisted banded design label -> its boundaries (for the report's figure)


def screen(frame, cost, y, screened_on: str, *, budget=None, moe=None, z=1.96, seed=0, max_candidates=6,
           stratify_by=None) -> Screen:
    """Screen every candidate on the (cost-bound) ``frame`` for the variable ``y``; see the module notes.

    Exactly one of ``budget`` (the mean cost a design may have) and ``moe`` (the margin of error of the
    mean of ``y`` at normal quantile ``z``) is given.
    """
    if (budget is None) == (moe is None):
        raise InputError("propose: give exactly one goal: a budget (--budget) or a margin of error "
                         "(--moe or --relative-moe)")
    y = np.asarray(y, dtype=float)
    notes = []
    prices: dict = {}

    def build(t: Template, size: int):
        return cost.for_design(t.at(size), frame)

    def price(t: Template, size: int) -> float:
        key = (t.label, size)
        if key not in prices:
            d = build(t, size)
            rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(*stream_key("propose " + t.label),
                                                                                 size)))
            block = d.draw(frame, rng, PILOT, keep_units=cost.needs_units(d))
            prices[key] = float(np.mean(cost.replicate_cost(block, frame)))
        return prices[key]

    def variance(t: Template, size: int) -> float:
        return anticipated_variance(build(t, size), frame, y)

    col, x = _stratifier(frame, stratify_by)
    templates = [Template("srs", "srs", "srs", {}, 2, frame.N)]
    if x is not None:
        templates += _band_templates(frame, cost, col, x)
    else:
        notes.append("no numeric column to cut into strata (no size column, no auxiliary column): "
                     "no banded stratification was screened")
    templates += _frame_strata_templates(frame, cost) + _cluster_templates(frame, cost, y) + _pps_templates(frame)
    if budget is not None and cost_notes(cost, frame):  # nothing in the scenario costs anything
        raise InputError("propose --budget needs costs: the scenario has no [cost] rates and the frame no "
                         "unit_cost or cluster_cost column, so every design costs 0; give --moe instead")
    rows = [_size_up(t, frame, build, price, variance, budget, moe, z) for t in templates]
    if x is not None:  # take-all top strata for the CV reached so far, or the goal's
        reached = [r["anticipated_variance"] for r in rows if r["size"] is not None]
        if moe is not None:
            cv = moe / z / abs(float(y.mean()))
        else:
            cv = np.sqrt(min(reached)) / abs(float(y.mean())) if reached else None
        if cv and np.isfinite(cv) and cv > 0:
            extra = _take_all_templates(frame, cost, col, x, y, cv)
            templates += extra
            rows += [_size_up(t, frame, build, price, variance, budget, moe, z) for t in extra]
    table = pd.DataFrame(rows)
    for k in ("strata", "boundary_rule", "allocation", "take_all", "units_per_cluster"):
        table[k] = [t.detail.get(k) for t in templates]
    # counts where a family has them (take_all: the units taken whole), blank where it has none (not 8.0)
    table = table.astype({"strata": "Int64", "units_per_cluster": "Int64", "take_all": "Int64"})
    table["family"] = [t.family for t in templates]
    table["method"] = [t.method for t in templates]
    table["screened_on"] = screened_on
    feasible = table["size"].notna()
    key = "anticipated_variance" if budget is not None else "expected_cost"
    order = table[feasible].sort_values([key, "anticipated_variance", "design"], kind="stable")
    seen, picked = set(), []
    for i in order.index:  # the same design reached by two rules (boundaries that coincide) counts once
        sig = _signature(templates[i], int(table.at[i, "size"]), frame)
        if sig in seen:
            table.at[i, "note"] = "the same design as a better-ranked candidate"
            continue
        seen.add(sig)
        picked.append(i)
    table["rank"] = pd.array([pd.NA] * len(table), dtype="Int64")
    table.loc[picked, "rank"] = np.arange(1, len(picked) + 1)
    short = picked[:max_candidates]
    table["shortlisted"] = table.index.isin(short)
    table["size"] = table["size"].astype("Int64")
    shortlist = [templates[i].table(int(table.at[i, "size"])) for i in short]
    bounds = {templates[i].label: list(templates[i].params["boundaries"]) for i in short
              if "boundaries" in templates[i].params}
    table = table.sort_values(["rank", "family", "design"], kind="stable", na_position="last")
    return Screen(candidates=table[CANDIDATE_COLUMNS].reset_index(drop=True), shortlist=shortlist, notes=notes,
                  stratifier=col, stratifier_values=x, boundaries=bounds)


# ------------------------------------------------------------------ sizes
def _signature(t: Template, size: int, frame) -> tuple:
    """What makes two candidates the same design: method, keys and size, with boundaries replaced by the
    strata they cut."""
    params = dict(t.params)
    if "boundaries" in params:
        params["boundaries"] = t.at(size).strata_frame(frame).stratum.tobytes()
    return (t.method, size, tuple(sorted(params.items())))


def _size_up(t: Template, frame, build, price, variance, budget, moe, z) -> dict:
    """The candidate's row: its size under the goal (None when it cannot meet it), variance and cost."""
    row = {"design": t.label, "size": None, "expected_n": np.nan, "anticipated_variance": np.nan,
           "anticipated_se": np.nan, "anticipated_moe": np.nan, "expected_cost": np.nan, "note": ""}
    try:
        build(t, t.lo).check(frame)
    except InputError as exc:
        row["note"] = str(exc)
        return row
    if budget is not None:
        size = _largest_within(lambda s: price(t, s), t.lo, t.hi, budget)
        why = f"the budget does not pay for its least size ({t.lo})"
    else:
        size = _smallest_meeting(lambda s: variance(t, s), t.lo, t.hi, (moe / z) ** 2)
        why = "not even its largest size meets the margin"
    if size is None:
        row["note"] = why
        return row
    v = variance(t, size)
    d = build(t, size)
    row.update(size=int(size), anticipated_variance=v, anticipated_se=float(np.sqrt(v)),
               anticipated_moe=z * float(np.sqrt(v)), expected_cost=price(t, size),
               expected_n=float(d.expected_n(frame)))
    return row


def _largest_within(price, lo: int, hi: int, budget: float) -> int | None:
    """The largest size in [lo, hi] whose cost is within ``budget`` (costs rise with the size).

    The size is doubled from ``lo`` until the cost passes the budget (so the pilot draws stay near the
    answer's size however large the frame), then found by regula falsi (exact in a step or two for a
    cost linear in the size), ending by bisection.
    """
    c_lo = price(lo)
    if c_lo > budget:
        return None
    while True:
        top = min(hi, 2 * lo)
        c_top = price(top)
        if c_top > budget:
            hi, c_hi = top, c_top
            break
        if top == hi:
            return hi
        lo, c_lo = top, c_top
    step = 0
    while hi - lo > 1:
        step += 1
        if step <= 6 and c_hi > c_lo:
            guess = lo + int((budget - c_lo) / (c_hi - c_lo) * (hi - lo))
        else:
            guess = (lo + hi) // 2
        guess = min(max(guess, lo + 1), hi - 1)
        c = price(guess)
        if c <= budget:
            lo, c_lo = guess, c
        else:
            hi, c_hi = guess, c
    return lo


def _smallest_meeting(variance, lo: int, hi: int, target: float) -> int | None:
    """The smallest size in [lo, hi] whose anticipated variance is at most ``target`` (bisection)."""
    if variance(hi) > target:
        return None
    if variance(lo) <= target:
        return lo
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if variance(mid) <= target:
            hi = mid
        else:
            lo = mid
    return hi


# ------------------------------------------------------------------ the candidates
def _stratifier(frame, name):
    """The column the bands cut: ``name`` (the size column or an auxiliary), else the size column, else the
    first auxiliary; (None, None) when there is none."""
    if name is None:
        name = (frame.numeric_names or [None])[0]  # the size column, else the first auxiliary
    if name is None:
        return None, None
    values = frame.numeric_column(name)
    if values is None:
        raise InputError(f"propose: stratify_by {name!r} is neither the frame's size column nor an auxiliary "
                         f"column ({', '.join(frame.numeric_names) or 'none set in [frame]'})")
    return name, values


def _allocations(frame, cost, design) -> list[str]:
    """Proportional and Neyman; cost-optimal too when the strata's unit costs differ."""
    c = cost.stratum_unit_costs(design.strata_frame(frame))
    return list(ALLOCATIONS if np.ptp(c) > 0 else ALLOCATIONS[:2])


def _band_templates(frame, cost, col, x) -> list[Template]:
    out = []
    rules = [("cum_sqrt_f", cum_sqrt_f)] + ([("geometric", geometric)] if x.min() > 0 else [])
    for H in STRATA:
        for rule, fn in rules:
            b = [float(v) for v in fn(x, H)]
            out += _banded(frame, cost, col, x, b, f"{'sqrtf' if rule == 'cum_sqrt_f' else 'geom'}{H}", rule, False)
    return out


def _take_all_templates(frame, cost, col, x, y, cv) -> list[Template]:
    out = []
    for H in STRATA:
        if H < 3:
            continue
        res = take_all(x, H, cv, y=y)
        if res["take_all"] < 2:  # no take-all stratum (or a single unit): the plain bands cover it
            continue
        b = [float(v) for v in res["boundaries"]]
        out += _banded(frame, cost, col, x, b, f"takeall{H}", "take_all", True)
    return out


def _banded(frame, cost, col, x, b, stem, rule, take) -> list[Template]:
    params = {"stratify_by": col, "boundaries": tidy(x, b)} | ({"take_all": True} if take else {})
    probe = DESIGN_CLASSES["stratified"]("probe", n=1, **params)
    try:
        probe.check_cut(frame)
    except InputError:  # listed once, refused with the reason as its note (see _size_up)
        return [Template(f"{stem}-proportional", f"bands on {col}", "stratified", {"allocation": "proportional",
                                                                                 **params}, 2, frame.N,
                         {"strata": len(b) + 1, "boundary_rule": rule, "allocation": "proportional"})]
    cut = probe.strata_frame(frame)
    lo = 2 * cut.H if not take else int(cut.N_h[-1]) + 2 * (cut.H - 1)
    return [Template(f"{stem}-{a}", f"bands on {col}", "stratified", {"allocation": a, **params}, lo, frame.N,
                     {"strata": cut.H, "boundary_rule": rule, "allocation": a,
                      "take_all": int(cut.N_h[-1]) if take else None})
            for a in _allocations(frame, cost, probe)]


def _frame_strata_templates(frame, cost) -> list[Template]:
    if frame.roles.get("stratum") is None or frame.H < 2:
        return []
    probe = DESIGN_CLASSES["stratified"]("probe", n=1)
    return [Template(f"strata-{a}", "frame strata", "stratified", {"allocation": a}, 2 * frame.H, frame.N,
                     {"strata": frame.H, "allocation": a}) for a in _allocations(frame, cost, probe)]


def _cluster_templates(frame, cost, y) -> list[Template]:
    if frame.cluster is None or frame.C < 3:
        return []
    out = [Template("clusters-whole", "cluster", "cluster", {}, 2, frame.C, {})]
    rho = anova_icc(y, frame.cluster)
    c1 = cost.per_cluster + (0.0 if frame.cluster_cost is None else float(np.mean(frame.cluster_cost)))
    c2 = cost.per_unit + cost.per_attempt + cost.per_complete + (
        0.0 if frame.unit_cost is None else float(np.mean(frame.unit_cost)))
    biggest = int(frame.cluster_sizes.max())
    if not (c1 > 0 and c2 > 0 and 0 < rho < 1):
        return out
    m_opt = optimal_cluster_take(c1, c2, rho)["m_opt"]
    for m in sorted({int(round(m_opt / 1.5)), int(round(m_opt)), int(round(m_opt * 1.5))}):
        if 2 <= m < biggest:
            out.append(Template(f"clusters-take{m}", "cluster", "cluster", {"units_per_cluster": m, "cap_units": True},
                                2, frame.C, {"units_per_cluster": m}))
    return out


def _pps_templates(frame) -> list[Template]:
    if frame.size is None or not np.all(frame.size > 0):
        return []
    return [Template("pps", "pps", "pps", {"replace": True}, 2, frame.N, {})]
