"""How firm the pick is: a bootstrap of the rehearsal.

Each round resamples, with replacement, the replicates of every design x size cell (the same
index vector for every estimator and variable of the cell, since they were computed on the same
samples), recomputes the measures the pick uses (coverage, the achieved and published margins,
mean cost and size, each with its Monte Carlo SE, as :mod:`samplewright.evaluation.measures`
defines them), and reruns the evidence and the pick (:mod:`samplewright.decision.recommend`).
``pick_stability`` is the share of rounds whose headline pick is the same point; ``runner_up`` the
point of another fieldwork plan (another design, or the same design at another size: not the pick's own
sample analysed another way) most often picked instead (when none is ever picked: the next such point by
the pick rule on the rehearsal itself), with ``runner_up_share`` the share of rounds it wins.

A round weighs each replicate by the number of times it was drawn (np.bincount), so every
measure of a cell is one matrix product of the rounds' weights with the replicate values: no
per-round tables.  Each cell is resampled independently (its replicates are independent of every
other cell's), from a stream of its own keyed by :data:`STABILITY_KEY`, the design's label and the
size (the rehearsal's streams are keyed by label, size and block, with a key of a different
length), from the run's root seed: the result does not depend on ``--jobs``, and adding a design
leaves the other cells' resamples as they were.
"""

from __future__ import annotations

import dataclasses
from collections import Counter

import numpy as np
import pandas as pd

from samplewright.decision import recommend as rc
from samplewright.evaluation import measures
from samplewright.evaluation.measures import group_rows
from samplewright.simulation.engine import sha256_words, stream_key

#: spawn-key prefix of the bootstrap's streams (eight words: the SHA-256 of a fixed text)
STABILITY_KEY = sha256_words(b"samplewright: stability of the pick", "big")


def cell_stream(seed: int, label: str, size: int) -> np.random.Generator:
    """The bootstrap stream of one design x size cell (see module notes)."""
    key = (*STABILITY_KEY, *stream_key(label), int(size))
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=key))


def resample_weights(rng: np.random.Generator, R: int, rounds: int) -> np.ndarray:
    """(rounds, R) counts: how often each replicate is drawn in each round of R draws with replacement."""
    idx = rng.integers(0, R, size=(rounds, R), dtype=np.int32 if R < 2**31 else np.int64)
    out = np.empty((rounds, R))
    for r in range(rounds):  # one round at a time: its counts stay in cache
        out[r] = np.bincount(idx[r], minlength=R)
    return out


def boards(front: pd.DataFrame, reps: pd.DataFrame, s: rc.Setting, keys: list, rows: np.ndarray, seed: int,
           rounds: int) -> rc.Board:
    """The :class:`~samplewright.decision.recommend.Board` of every round, arrays with a leading rounds axis."""
    G, P = rows.shape
    out = {f.name: np.full((rounds, G, P), np.nan) for f in dataclasses.fields(rc.Board)}
    for k in ("cost", "cost_mcse", "mean_n"):
        out[k] = np.full((rounds, P), np.nan)
    where = {key: idx for key, idx in group_rows(reps, rc.point_columns(front) + ["variable"])}
    x, lo, hi = (reps[c].to_numpy() for c in ("estimate", "lower", "upper"))
    cost, n = reps["cost"].to_numpy(), reps["n"].to_numpy()
    truth = front["truth"].to_numpy(dtype=float)
    variables = front["variable"].to_numpy()
    rows_of = {}  # design x size -> [(goal, point, row positions in reps)], the rows sharing its replicates
    for p, key in enumerate(keys):
        for g in range(G):
            idx = where.get((*key, variables[rows[g, p]])) if rows[g, p] >= 0 else None
            if idx is not None:
                rows_of.setdefault((key[0], int(key[1])), []).append((g, p, idx))
    for (label, size), found in rows_of.items():
        R = len(found[0][2])
        W = resample_weights(cell_stream(seed, label, size), R, rounds)
        Q = []
        for g, p, idx in found:
            T = truth[rows[g, p]]
            ok = np.isfinite(x[idx])
            sq = np.where(ok, x[idx] - T, 0.0) ** 2
            half = np.where(ok, (hi[idx] - lo[idx]) / 2.0, 0.0)
            Q += [ok, measures.holds(lo[idx], hi[idx], T) & ok, sq, sq**2, half, half**2]
        idx = found[0][2]  # cost and size: a property of the sample, once per cell
        S = W @ np.column_stack(Q + [cost[idx], cost[idx] ** 2, n[idx]]).astype(float)
        c = 6 * len(found)
        cost_mean, cost_mcse = measures.mean_and_mcse_from_sums(S[:, c], S[:, c + 1], R)
        for j, (g, p, _) in enumerate(found):
            m, cov, sq, sq2, h, h2 = (S[:, 6 * j + k] for k in range(6))
            with np.errstate(invalid="ignore", divide="ignore"):
                cover = cov / m
            mse, mse_mcse = measures.mean_and_mcse_from_sums(sq, sq2, m)
            pub, pub_mcse = measures.mean_and_mcse_from_sums(h, h2, m)
            rmse, z = np.sqrt(mse), s.z[g]
            out["replicates"][:, g, p] = m
            out["coverage"][:, g, p] = cover
            out["coverage_mcse"][:, g, p] = measures.coverage_mcse(cover, m)
            out["moe"][:, g, p] = z * rmse
            out["moe_mcse"][:, g, p] = measures.moe_mcse(mse_mcse, rmse, z)
            out["published"][:, g, p] = pub * s.scale[g]
            out["published_mcse"][:, g, p] = pub_mcse * s.scale[g]
            out["cost"][:, p], out["cost_mcse"][:, p], out["mean_n"][:, p] = cost_mean, cost_mcse, S[:, c + 2] / R
    return rc.Board(**out)


def _round(b: rc.Board, r: int) -> rc.Board:
    return rc.Board(**{f.name: getattr(b, f.name)[r] for f in dataclasses.fields(rc.Board)})


def stability(front: pd.DataFrame, reps: pd.DataFrame, goals, nominal: float, seed: int, rounds: int,
              domain_column: str | None = None, exact: bool = False) -> dict:
    """``pick_stability``, ``runner_up`` (a pick dict or None), ``runner_up_share`` and ``stability_rounds``
    (see module notes); the pick is the recommendation's headline pick."""
    out = {"pick_stability": None, "runner_up": None, "runner_up_share": None, "stability_rounds": int(rounds)}
    if rounds <= 0 or exact or len(front) == 0:  # exact mode: no Monte Carlo error to resample
        return out
    s = rc.setting(front, tuple(goals), nominal, domain_column, exact)
    keys, rows = rc.board_rows(front, s.variables)
    base = rc.board(front, rows, s)
    codes = rc.score(base, s)
    pick = rc.choose(base, s, codes)[s.headline]
    every = boards(front, reps, s, keys, rows, seed, rounds)
    all_codes = rc.score(every, s)
    wins = Counter()
    for r in range(rounds):
        got = rc.choose(_round(every, r), s, {k: v[r] for k, v in all_codes.items()})[s.headline]
        wins[got] += 1
    # another fieldwork plan: not the pick's own sample analysed another way (its other estimators and
    # variance formulas share its draws, and often its numbers)
    sample = {i: tuple(k[:2]) for i, k in enumerate(keys)}  # (design, size) of each point
    elsewhere = [i for i in range(len(keys)) if pick is None or sample[i] != sample[pick]]
    others = [(count, -p) for p, count in wins.items() if p is not None and p in elsewhere]
    runner = -max(others)[1] if others else _next_best(base, s, codes, elsewhere)
    out["pick_stability"] = None if pick is None else wins[pick] / rounds
    if runner is not None:
        out["runner_up"] = rc.pick_dict(front, rows, base, s, codes, runner)
        out["runner_up_share"] = wins[runner] / rounds
    return out


def _next_best(b: rc.Board, s: rc.Setting, codes: dict, allowed: list[int]) -> int | None:
    """The point the pick rule would take among ``allowed`` (None when none qualifies)."""
    ok = rc.eligible(codes, s, s.headline)
    order = [int(i) for i in rc.ranking(b, s.headline) if ok[i] and int(i) in allowed]
    return order[0] if order else None
