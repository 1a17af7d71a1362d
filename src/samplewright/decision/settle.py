"""More replicates for the undecided points that could change the pick, until they are decided.

The pick itself is settled too when one of its criteria is met by the evidence rule's 2 MCSEs but not by
:data:`SETTLE_Z` (:func:`fragile_pick`): otherwise a pick just inside a limit would hold in only about
half of the bootstrap's rounds, and more evidence would move it.

After the first decision, every point listed in the recommendation's ``undecided`` (it would beat
the pick were its undecided criteria met) gets more blocks of replicates in its design x size
cell, in block order, with the seeds a longer run would use (the block index continues), until
each of its undecided criteria is decided (:mod:`samplewright.decision.evidence`) or the cell
reaches the replicate cap.  A cell stops once each criterion is :data:`SETTLE_Z` = 3 MCSEs clear
of its limit (decided by the evidence rule's 2 with one to spare): a point stopped the moment it
crossed 2 MCSE would sit on the boundary, and the bootstrap of the pick's stability, which moves
each estimate by about one MCSE, would undo its decision about half the time.

:class:`SettleRule` is the rule object the engine's sequential loop
(:func:`samplewright.simulation.engine.simulate_until`) calls; the engine knows nothing of
evidence.  A cell starts from running sums of the replicates it already has (read from the
replicate table), so nothing already drawn is drawn again and it never keeps fewer replicates
than before.  Whether a cell is decided depends only on its own blocks, in block order, so the
replicates kept never depend on ``--jobs`` or the backend.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from samplewright.decision import evidence as ev
from samplewright.evaluation import measures
from samplewright.evaluation.normal import normal_quantile

#: the replicate cap of this phase, as a multiple of the run's replicates, without --max-replicates
CAP_FACTOR = 10
#: MCSEs a criterion must clear its limit by before a cell stops (see module notes)
SETTLE_Z = 3.0


@dataclass(frozen=True)
class Criterion:
    """One undecided criterion of a cell: ``kind`` coverage, margin or cost, at point ``e`` (an estimator
    under a variance formula) and output variable ``v`` (both positions in the cell's blocks), against
    ``limit``; a margin has the normal quantile ``z`` of its goal and ``scale`` (published margin at the
    goal's level / the run's)."""

    kind: str
    e: int = 0
    v: int = 0
    limit: float = float("nan")
    z: float = 1.0
    scale: float = 1.0


@dataclass
class Sums:
    """Running sums of a cell's replicates, per (estimator, variance formula) point x variable (P, V), and of
    its cost."""

    n: np.ndarray  # replicates with an estimate
    covered: np.ndarray
    sq: np.ndarray  # squared errors (x - T)^2 and their squares
    sq2: np.ndarray
    half: np.ndarray  # CI half-widths and their squares
    half2: np.ndarray
    cost: float = 0.0
    cost2: float = 0.0
    R: int = 0

    def add(self, estimate, lower, upper, cost, truth) -> None:
        """Add replicates: ``estimate``, ``lower``, ``upper`` (P, B, V), ``cost`` (B,), ``truth`` (V,)."""
        ok = np.isfinite(estimate)
        err = np.where(ok, estimate - truth, 0.0) ** 2
        half = np.where(ok, (upper - lower) / 2.0, 0.0)
        self.n = self.n + ok.sum(axis=1)
        self.covered = self.covered + (measures.holds(lower, upper, truth) & ok).sum(axis=1)
        self.sq, self.sq2 = self.sq + err.sum(axis=1), self.sq2 + (err**2).sum(axis=1)
        self.half, self.half2 = self.half + half.sum(axis=1), self.half2 + (half**2).sum(axis=1)
        self.cost, self.cost2 = self.cost + float(cost.sum()), self.cost2 + float((cost**2).sum())
        self.R += len(cost)

    def codes(self, criteria, nominal: float, tolerance: float, budget: float | None) -> np.ndarray:
        """The state code of each criterion at the current sums, decided only :data:`SETTLE_Z` MCSEs clear."""
        out = []
        for c in criteria:
            if c.kind == "cost":
                mean, mcse = measures.mean_and_mcse_from_sums(self.cost, self.cost2, self.R)
                out.append(ev.cost_code(mean, mcse, budget, SETTLE_Z))
                continue
            n = self.n[c.e, c.v]
            if c.kind == "coverage":
                cover = self.covered[c.e, c.v] / n if n > 0 else float("nan")
                out.append(ev.coverage_code(cover, measures.coverage_mcse(cover, n), n, nominal, tolerance,
                                            z=SETTLE_Z))
                continue
            mse, mse_mcse = measures.mean_and_mcse_from_sums(self.sq[c.e, c.v], self.sq2[c.e, c.v], n)
            pub, pub_mcse = measures.mean_and_mcse_from_sums(self.half[c.e, c.v], self.half2[c.e, c.v], n)
            rmse = np.sqrt(mse)
            out.append(ev.margin_code(c.z * rmse, measures.moe_mcse(mse_mcse, rmse, c.z), c.scale * pub,
                                      c.scale * pub_mcse, c.limit, SETTLE_Z))
        return np.array(out, dtype=int)


@dataclass
class SettleState:
    """Where one cell stands: its criteria and sums, blocks used in order (those it had count), whether
    it stopped."""

    criteria: list
    sums: Sums
    used: int
    before: int  # replicates the cell had before this round (a partial last block is drawn again in full)
    stopped: bool = False
    met: bool = False  # every criterion decided
    needed: int = 0


@dataclass
class SettleRule:
    """The engine's rule for this phase: per cell (by position in the phase's plan) its undecided
    criteria, its starting sums and blocks, the replicate cap, and the goal's limits."""

    criteria: dict  # cell position -> list of Criterion
    start: dict  # cell position -> (Sums, blocks already drawn, replicates the run had before this round)
    max_replicates: int
    block_size: int
    nominal: float
    tolerance: float
    budget: float | None = None

    def start_cell(self, ci: int) -> SettleState:
        """Cell ``ci`` as it stands before this phase: its sums and the blocks it has already."""
        sums, blocks, before = self.start[ci]
        state = SettleState(criteria=self.criteria[ci], sums=sums, used=blocks, before=before)
        state.needed = self._needed(state)
        return state

    def advance(self, state: SettleState, results_by_block: dict, truth: np.ndarray,
                min_blocks: int, max_blocks: int) -> None:
        """Consume the cell's new blocks in block order; stop once every criterion is decided, or at the cap."""
        while not state.stopped and state.used in results_by_block:
            r = results_by_block[state.used]
            state.sums.add(r.estimate, r.lower, r.upper, r.cost, truth)
            state.used += 1
            if (self._codes(state) != ev.UNDECIDED).all():
                state.stopped, state.met = True, True
            elif state.used >= max_blocks:
                state.stopped = True
        if not state.stopped:
            state.needed = self._needed(state)

    def _codes(self, state: SettleState) -> np.ndarray:
        return state.sums.codes(state.criteria, self.nominal, self.tolerance, self.budget)

    def _needed(self, state: SettleState) -> int:
        """Replicates the undecided criteria ask for at the current estimates (twice the current count
        where a value sits on its limit)."""
        s, most = state.sums, 0
        for c, code in zip(state.criteria, self._codes(state)):
            if code != ev.UNDECIDED:
                continue
            if c.kind == "cost":
                mean, mcse = measures.mean_and_mcse_from_sums(s.cost, s.cost2, s.R)
                need = ev.replicates_to_decide(float(mean), float(mcse), c.limit, s.R, SETTLE_Z)
            elif c.kind == "coverage":
                n = s.n[c.e, c.v]
                cover = float(s.covered[c.e, c.v] / n)
                need = ev.coverage_replicates_to_decide(cover, float(measures.coverage_mcse(cover, n)), c.limit,
                                                        int(n), SETTLE_Z)
            else:
                n = s.n[c.e, c.v]
                pub, pub_mcse = measures.mean_and_mcse_from_sums(s.half[c.e, c.v], s.half2[c.e, c.v], n)
                mse, mse_mcse = measures.mean_and_mcse_from_sums(s.sq[c.e, c.v], s.sq2[c.e, c.v], n)
                rmse = math.sqrt(mse)
                pairs = [(c.z * rmse, float(measures.moe_mcse(mse_mcse, rmse, c.z))),
                         (c.scale * float(pub), c.scale * float(pub_mcse))]
                counts = [ev.replicates_to_decide(v, m, c.limit, int(n), SETTLE_Z) for v, m in pairs]
                need = None if None in counts else max(counts)
            most = max(most, 2 * s.R if need is None else need)
        return most

    def needed(self, state: SettleState) -> int:
        """The replicates the engine should aim the cell's next wave at."""
        return state.needed

    def report(self, cells, states: dict) -> list[dict]:
        """One entry per cell: replicates before and after, whether every criterion was decided."""
        return [{"design": cell.design.label, "size": int(cell.design.size),
                 "replicates_before": int(states[ci].before), "replicates": int(states[ci].sums.R),
                 "decided": bool(states[ci].met)}
                for ci, cell in enumerate(cells)]


def starting_sums(reps: pd.DataFrame, cell, names, truth: np.ndarray) -> Sums:
    """The running sums of one cell's replicates already in the replicate table."""
    mine = reps[(reps["design"] == cell.design.label) & (reps["size"] == int(cell.design.size))]
    points, V = cell.points, len(names)
    P, R = len(points), int(mine["replicate"].nunique())
    pos_p = {p: i for i, p in enumerate(points)}  # (estimator, variance formula), the blocks' first axis
    pos_v = {v: i for i, v in enumerate(names)}
    point = pd.Series(list(zip(mine["estimator"], mine["variance"])), index=mine.index).map(pos_p)
    order = np.lexsort((mine["replicate"].to_numpy(), mine["variable"].map(pos_v).to_numpy(), point.to_numpy()))
    arrays = {k: mine[k].to_numpy()[order].reshape(P, V, R).transpose(0, 2, 1)  # (P, R, V)
              for k in ("estimate", "lower", "upper")}
    cost = mine["cost"].to_numpy()[order][:R]
    zero = np.zeros((P, V))
    sums = Sums(n=zero, covered=zero, sq=zero, sq2=zero, half=zero, half2=zero)
    sums.add(arrays["estimate"], arrays["lower"], arrays["upper"], cost, truth)
    return sums


def fragile_pick(rec: dict, nominal: float) -> list[dict]:
    """The pick's own criteria that its evidence meets by the rule's 2 MCSEs but not by :data:`SETTLE_Z`, as
    entries like ``undecided``'s: a pick that close to a limit could change with more evidence (a bootstrap
    round moves each estimate by about one MCSE), so its cell is settled like an undecided point's."""
    pick = rec.get(rec.get("pick") or "")
    if not isinstance(pick, dict):
        return []
    base = {k: pick[k] for k in ("design", "size", "estimator", "variance")}
    tolerance = float(rec["coverage_tolerance"])
    out = []
    for g in pick["goals"]:
        c, m, R = g["coverage"], g["coverage_mcse"], int(pick["replicates"])
        if None not in (c, m) and ev.coverage_code(c, m, R, nominal, tolerance, z=SETTLE_Z) == ev.UNDECIDED:
            out.append({**base, "variable": g["output"], "criterion": "coverage", "limit": nominal - tolerance})
        goal, margins = g["moe_goal"], (g["moe"], g["moe_mcse"], g["published_moe"], g["published_moe_mcse"])
        if goal is not None and None not in margins and ev.margin_code(*margins, goal, SETTLE_Z) == ev.UNDECIDED:
            out.append({**base, "variable": g["output"], "criterion": "margin", "limit": goal})
    budget = rec["goals"][0].get("budget") if rec["goals"] else None
    if budget is not None and ev.cost_code(pick["mean_cost"], pick["cost_mcse"], budget, SETTLE_Z) == ev.UNDECIDED:
        out.append({**base, "variable": pick["goals"][0]["output"], "criterion": "cost", "limit": budget})
    return out


def settle_targets(rec: dict, nominal: float) -> list[dict]:
    """What the settling phase works on: the recommendation's undecided points and a fragile pick."""
    return list(rec["undecided"]) + fragile_pick(rec, nominal)


def criteria_of(rec: dict, cell, names, nominal: float) -> list[Criterion]:
    """The criteria :func:`settle_targets` lists for ``cell`` (its design at its size)."""
    out = []
    conf = {g["output"]: g["confidence"] for g in rec["goals"]}
    for u in settle_targets(rec, nominal):
        if u["design"] != cell.design.label or u["size"] != int(cell.design.size):
            continue
        if u["criterion"] == "cost":
            c = Criterion("cost", limit=u["limit"])
        else:
            e = cell.points.index((u["estimator"], u["variance"]))
            v = list(names).index(u["variable"])
            z = normal_quantile(conf[u["variable"]])
            c = Criterion(u["criterion"], e, v, u["limit"], z, z / normal_quantile(nominal))
        if c not in out:
            out.append(c)
    return out


def default_cap(replicates: int) -> int:
    """The replicate cap of this phase without ``--max-replicates``: :data:`CAP_FACTOR` x the replicates."""
    return CAP_FACTOR * int(replicates)
