"""Exact mode: every possible sample of each design, weighted by its probability.

For a small frame, the design moments need no Monte Carlo: each design's possible samples
are enumerated with their selection probabilities, every estimator is applied to each, and
the summary holds the exact expectation, variance, coverage and mean SE in the same columns
as a simulated run (``evaluate.SUMMARY_COLUMNS``), with ``replicates`` = the number of
possible samples, every MCSE column 0 and ``exact`` = True.

Enumeration is available for srs, stratified, systematic, one- and two-stage cluster
(here, from the designs' own parameters; cluster blocks are built by ``Cluster.block``, as
in a simulated run) and for the size-proportional, random-size and
stratified multistage designs through their ``enumerate`` method; a design whose sample count exceeds
:data:`LIMIT` is refused with the count.

Notes
-----
With samples s of probability p(s) and estimates x(s), SEs se(s) and intervals [l(s), u(s)]:
E x = sum p x, Var x = sum p (x - E x)^2, RMSE^2 = sum p (x - T)^2, mean SE (root mean
square, as in ``evaluate``) = sqrt(sum p se^2), coverage = sum p 1{l <= T <= u}: the
definitions of Morris, White & Crowther (2019, Table 6) with the empirical distribution
over replicates replaced by the design distribution.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy import stats

from samplewright.designs.block import SampleBlock
from samplewright.designs.enumeration import combination_chunks, elementary_symmetric, product_chunks
from samplewright.errors import InputError
from samplewright.estimation.estimators import ESTIMATORS, sample_units
from samplewright.evaluation.measures import SUMMARY_COLUMNS, design_effect, holds, se_ratio, srs_variance

#: most samples enumerated for one design at one size
LIMIT = 2_000_000

MCSE_COLUMNS = ("bias_mcse", "empirical_se_mcse", "coverage_mcse")


# ------------------------------------------------------------------ core designs
def _srs(d, frame, chunk):
    n, N = int(d.n), frame.N
    rows = product_chunks([N] * n, chunk) if d.replace else combination_chunks(N, n, chunk)
    p = (1.0 / N) ** n if d.replace else 1.0 / math.comb(N, n)
    for pos in rows:
        yield SampleBlock(sums=frame.gather(pos), weight=np.full(n, N / n), psu_stratum=np.zeros(n, dtype=np.int64),
                          fpc=np.array([1.0 if d.replace else 1.0 - n / N]), clusters=np.zeros(len(pos)), strata=0,
                          units=pos, variance=d.variance_name), np.full(len(pos), p)


def _stratified(d, frame, chunk):
    n_h, N_h = d.n_h(frame), frame.N_h
    strata = np.flatnonzero(n_h)
    lists = [np.concatenate(list(combination_chunks(int(N_h[h]), int(n_h[h]), 100_000))) for h in strata]
    psu_stratum = np.repeat(strata, n_h[strata])
    p = 1.0 / float(np.prod([len(x) for x in lists], dtype=float))
    for digits in product_chunks([len(x) for x in lists], chunk):
        units = np.concatenate([frame.strata_units[frame.strata_offsets[h] + lists[j][digits[:, j]]]
                                for j, h in enumerate(strata)], axis=1)
        yield SampleBlock(sums=frame.gather(units), weight=(N_h / np.maximum(n_h, 1))[psu_stratum],
                          psu_stratum=psu_stratum, fpc=1.0 - n_h / N_h, clusters=np.zeros(len(units)),
                          strata=int(strata.size), units=units, variance=d.variance_name), np.full(len(units), p)


def _systematic_starts(d, frame):
    """Midpoints and lengths of the start intervals in [0, k) that give distinct samples."""
    n, N = int(d.n), frame.N
    k = N / n
    j = np.arange(n)
    # the sample changes where u + j k crosses an integer: u = c - j k for whole c
    cuts = [np.arange(math.ceil(jj * k), math.floor(jj * k + k) + 1) - jj * k for jj in j]
    br = np.unique(np.concatenate([[0.0, k], *cuts]))
    br = br[(br >= 0) & (br <= k)]
    lo, hi = br[:-1], br[1:]
    keep = hi - lo > 1e-12 * k
    return (lo[keep] + hi[keep]) / 2.0, (hi[keep] - lo[keep]) / k


def _systematic(d, frame, chunk):
    """Linear systematic sampling with one random start (the geometry in ``Systematic``'s notes)."""
    if getattr(d, "kind", "linear") != "linear" or int(getattr(d, "starts", 1)) != 1:
        raise InputError(f"design {d.label!r}: exact mode covers linear systematic sampling with one start "
                         f"(kind = \"linear\", starts = 1)")
    n, N = int(d.n), frame.N
    k = N / n
    order = d.list_order(frame) if hasattr(d, "list_order") else frame.order
    mid, prob = _systematic_starts(d, frame)
    for a in range(0, mid.size, chunk):
        u = mid[a:a + chunk]
        pos = np.minimum(np.floor(u[:, None] + np.arange(n)[None, :] * k).astype(np.int64), N - 1)
        units = order[pos]
        yield SampleBlock(sums=frame.gather(units), weight=np.full(n, N / n), psu_stratum=np.zeros(n, dtype=np.int64),
                          fpc=np.array([1.0 - n / N]), clusters=np.zeros(len(u)), strata=0, units=units,
                          variance=d.variance_name), prob[a:a + chunk]


def _cluster(d, frame, chunk):
    """One- or two-stage cluster sampling; blocks built by the design itself (``Cluster.block``)."""
    m, C = int(d.clusters), frame.C
    k = d.take(frame)
    p1 = 1.0 / math.comb(C, m)
    if k is None:
        for chosen in combination_chunks(C, m, chunk):
            yield d.block(frame, chosen), np.full(len(chosen), p1)
        return
    sizes_all = frame.cluster_sizes
    subsets = {}
    for first in combination_chunks(C, m, 1):
        chosen = first[0]
        take = np.minimum(sizes_all[chosen], k)
        lists = []
        for M, t in zip(sizes_all[chosen], take):
            if (int(M), int(t)) not in subsets:
                subsets[(int(M), int(t))] = np.concatenate(list(combination_chunks(int(M), int(t), 100_000)))
            lists.append(subsets[(int(M), int(t))])
        p = p1 / float(np.prod([len(x) for x in lists], dtype=float))
        off = frame.cluster_offsets[chosen]
        for digits in product_chunks([len(x) for x in lists], chunk):
            R = len(digits)
            pos = np.zeros((R, m, k), dtype=np.int64)
            valid = np.zeros((R, m, k), dtype=bool)
            for j in range(m):
                t = int(take[j])
                pos[:, j, :t] = lists[j][digits[:, j]]
                valid[:, j, :t] = True
            units = frame.cluster_units[off[None, :, None] + pos]
            yield d.block(frame, np.broadcast_to(chosen, (R, m)), units, valid), np.full(R, p)


def _count_srs(design, frame):
    n, N = int(design.n), frame.N
    if design.replace:
        return N ** n, f"N^n = {N}^{n}"
    return math.comb(N, n), f"C(N, n) = C({N}, {n})"


def _count_stratified(design, frame):
    n_h = design.n_h(frame)
    parts = [(int(N), int(k)) for N, k in zip(frame.N_h, n_h) if k > 0]
    count = math.prod(math.comb(N, k) for N, k in parts)
    shown = " x ".join(f"C({N}, {k})" for N, k in parts[:4]) + (" x ..." if len(parts) > 4 else "")
    return count, f"prod_h C(N_h, n_h) = {shown}"


def _count_systematic(design, frame):
    return len(_systematic_starts(design, frame)[0]), "distinct random starts"


def _count_cluster(design, frame):
    m, C = int(design.clusters), frame.C
    k = design.take(frame)
    if k is None:
        return math.comb(C, m), f"C(clusters, m) = C({C}, {m})"
    a = [math.comb(int(M), min(int(M), k)) for M in frame.cluster_sizes]
    return elementary_symmetric(a, m), f"sum over the C({C}, {m}) cluster sets of prod_c C(M_c, {k})"


#: the four classic designs are enumerated here (their classes reach these through Design.enumerate)
CORE_ENUMERATORS = {"srs": _srs, "stratified": _stratified, "systematic": _systematic, "cluster": _cluster}
CORE_COUNTS = {"srs": _count_srs, "stratified": _count_stratified, "systematic": _count_systematic,
               "cluster": _count_cluster}

#: how each other method's count is described in a refusal
_COUNT_TEXT = {"poisson": "2^(units with pi < 1)", "bernoulli": "2^N", "pps": "N^n",
               "sampford": "C(units without certainty, n without certainty)", "pps_systematic": "distinct random starts",
               "stratified_cluster": "prod over strata of the cluster subsets (and their second-stage subsets)"}


def count_samples(design, frame) -> tuple[int, str]:
    """Number of possible samples of ``design`` and how it is counted (for messages)."""
    if design.method in CORE_COUNTS:
        return CORE_COUNTS[design.method](design, frame)
    return design.count_samples(frame), _COUNT_TEXT.get(design.method, "possible samples")


def enumerate_design(design, frame, chunk: int = 20_000):
    """Yield ``(SampleBlock, probabilities)`` over every possible sample of ``design``."""
    return design.enumerate(frame, chunk)


def _big(count: int) -> str:
    """A count with thousands separators, or as about d.dd x 10^k when it has more than 15 digits."""
    text = str(count)
    if len(text) <= 15:
        return f"{count:,}"
    return f"about {text[0]}.{text[1:3]} x 10^{len(text) - 1}"


def check_counts(frame, cells, limit: int = LIMIT) -> dict:
    """Refuse (InputError) any cell with more than ``limit`` samples; return the counts by cell index."""
    counts = {}
    for ci, cell in enumerate(cells):
        d = cell.design
        count, how = count_samples(d, frame)
        if count > limit:
            raise InputError(f"--exact: design {d.label!r} at size {d.size} has {how} = {_big(count)} possible "
                             f"samples, more than the limit of {limit:,}; run without --exact (Monte Carlo) "
                             f"or use a smaller frame or sample")
        counts[ci] = count
    return counts


# ------------------------------------------------------------------ evaluation
def _moments(p, x, se, lo, hi, truth, z):
    mean = float(p @ x)
    var = float(p @ (x - mean) ** 2)
    emp = float(np.sqrt(var))
    cover = float(p @ holds(lo, hi, truth))
    rmse = float(np.sqrt(p @ (x - truth) ** 2))
    mod = float(np.sqrt(p @ se**2))
    return {"truth": truth, "mean_estimate": mean, "bias": mean - truth, "bias_mcse": 0.0,
            "relative_bias": (mean - truth) / truth if truth != 0 else float("nan"),
            "empirical_se": emp, "empirical_se_mcse": 0.0, "rmse": rmse, "mean_se": mod,
            "se_ratio": se_ratio(mod, emp, max(abs(truth), abs(mean))), "coverage": cover, "coverage_mcse": 0.0,
            "mean_ci_width": float(p @ (hi - lo)), "moe": z * rmse}


def evaluate_exact(frame, cells, confidence: float, cost, chunk: int = 20_000, limit: int = LIMIT):
    """Exact summary (one row per design x size x estimator x variable) and the per-sample table.

    Returns ``(summary, samples, counts)``: ``summary`` has the columns of
    ``evaluate.SUMMARY_COLUMNS`` plus ``exact``; ``samples`` has the replicate-table
    columns (one "replicate" per possible sample) plus its ``probability``; ``counts``
    maps "label@size" to the number of samples.
    """
    check_counts(frame, cells, limit)
    z = float(stats.norm.ppf(0.5 + confidence / 2.0))
    names, truth, S2 = frame.layout.names, frame.layout.truth, frame.layout.S2  # as evaluate.summarise
    rows, tables, by_label = [], [], {}
    for ci, cell in enumerate(cells):
        d = cell.design
        parts = {e: ([], [], [], []) for e in cell.estimators}
        probs, ns, costs = [], [], []
        for block, p in enumerate_design(d, frame, chunk):
            for e in cell.estimators:
                with np.errstate(invalid="ignore", divide="ignore"):  # Hajek of an empty sample is NaN
                    o = ESTIMATORS[e](block, frame.N, frame.V, confidence, frame.layout)  # as engine.run_block
                for acc, arr in zip(parts[e], (o.estimate, o.se, o.lower, o.upper)):
                    acc.append(arr)
            probs.append(np.asarray(p, dtype=float))
            ns.append(sample_units(block))
            costs.append(cost.replicate_cost(block, frame))  # as engine.run_block (touched clusters)
        p = np.concatenate(probs)
        n = np.concatenate(ns)
        c = np.concatenate(costs)
        total_p = p.sum()
        if not np.isclose(total_p, 1.0, rtol=0, atol=1e-9):
            raise RuntimeError(f"design {d.label!r}: sample probabilities sum to {total_p!r}, not 1")
        by_label[f"{d.label}@{d.size}"] = len(p)
        mean_n = float(p @ n)
        for e in cell.estimators:
            est, se, lo, hi = (np.concatenate(a, axis=0) for a in parts[e])
            for v, var in enumerate(names):
                m = _moments(p, est[:, v], se[:, v], lo[:, v], hi[:, v], float(truth[v]), z)
                deff = design_effect(m["empirical_se"], srs_variance(mean_n, frame.N, S2[v]),
                                     max(abs(m["truth"]), abs(m["mean_estimate"])))
                rows.append({"design": d.label, "method": d.method, "size": int(d.size), "estimator": e,
                             "variable": var, "replicates": len(p), **m, "deff": deff,
                             "mean_n": mean_n, "mean_cost": float(p @ c), "exact": True})
                tables.append(pd.DataFrame({
                    "replicate": np.arange(len(p)), "design": d.label, "size": int(d.size), "estimator": e,
                    "variable": var, "estimate": est[:, v], "se": se[:, v], "lower": lo[:, v], "upper": hi[:, v],
                    "n": n, "cost": c, "probability": p}))
    summary = pd.DataFrame(rows, columns=SUMMARY_COLUMNS + ["exact"])
    samples = pd.concat(tables, ignore_index=True) if tables else pd.DataFrame()
    return summary, samples, by_label
