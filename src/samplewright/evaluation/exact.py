"""Exact mode: every possible sample of each design, weighted by its probability.

For a small frame, the design moments need no Monte Carlo: each design's possible samples
are enumerated with their selection probabilities, every estimator is applied to each, and
the summary holds the exact expectation, variance, coverage and mean SE in the same columns
as a simulated run (``measures.SUMMARY_COLUMNS``), with ``replicates`` = the number of
possible samples, every MCSE column 0 and ``exact`` = True.

Each design enumerates its own samples (``Design.enumerate`` and ``Design.count_samples``:
srs, stratified, linear systematic with one start, one- and two-stage cluster, the
size-proportional, random-size and stratified multistage designs); a design whose sample
count exceeds :data:`LIMIT` is refused with the count.

Notes
-----
With samples s of probability p(s) and estimates x(s), SEs se(s) and intervals [l(s), u(s)]:
E x = sum p x, Var x = sum p (x - E x)^2, RMSE^2 = sum p (x - T)^2, mean SE (root mean
square, as in ``measures``) = sqrt(sum p se^2), coverage = sum p 1{l <= T <= u}: the
definitions of Morris, White & Crowther (2019, Table 6) with the empirical distribution
over replicates replaced by the design distribution.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from samplewright.errors import InputError
from samplewright.estimation.estimators import sample_units
from samplewright.estimation.registry import estimate_points
from samplewright.evaluation.measures import (
    PUBLISHED_COLUMNS,
    SUMMARY_COLUMNS,
    design_effect,
    measures,
    srs_variance,
)
from samplewright.evaluation.normal import normal_quantile

#: most samples enumerated for one design at one size
LIMIT = 2_000_000


def count_samples(design, frame) -> tuple[int, str]:
    """Number of possible samples of ``design`` and how it is counted (for messages)."""
    return design.count_samples(frame), design.count_formula(frame)


def enumerate_design(design, frame, chunk: int = 20_000):
    """Yield ``(SampleBlock, probabilities)`` over every possible sample of ``design`` (each block able to be
    viewed with every variance formula the design lists, as a drawn block is)."""
    for block, p in design.enumerate(frame, chunk):
        yield design.listed(block), p


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
def evaluate_exact(frame, cells, confidence: float, cost, chunk: int = 20_000, limit: int = LIMIT):
    """Exact summary (one row per design x size x estimator x variance formula x variable) and the
    per-sample table.

    Returns ``(summary, samples, counts)``: ``summary`` has the columns of
    ``measures.SUMMARY_COLUMNS`` plus ``exact``, ``measures.PUBLISHED_COLUMNS`` and ``variance``; ``samples`` has
    the replicate-table columns (one "replicate" per possible sample) plus its ``probability``; ``counts``
    maps "label@size" to the number of samples.
    """
    check_counts(frame, cells, limit)
    z = normal_quantile(confidence)
    names, truth, S2 = frame.layout.names, frame.layout.truth, frame.layout.S2
    rows, tables, by_label = [], [], {}
    for cell in cells:
        d = cell.design
        points = cell.points  # (estimator, variance formula), as engine.run_block scores them
        parts = {point: ([], [], [], []) for point in points}
        probs, ns, costs = [], [], []
        for block, p in enumerate_design(d, frame, chunk):
            with np.errstate(invalid="ignore", divide="ignore"):  # Hajek of an empty sample is NaN
                outs = estimate_points(block, cell.estimators, cell.variances, frame.N, frame.V, confidence,
                                       frame.layout)
            for point, o in zip(points, outs):
                for acc, arr in zip(parts[point], (o.estimate, o.se, o.lower, o.upper)):
                    acc.append(arr)
            probs.append(np.asarray(p, dtype=float))
            ns.append(sample_units(block))
            costs.append(cost.replicate_cost(block, frame, n=ns[-1]))  # as engine.run_block (touched clusters)
        p = np.concatenate(probs)
        n = np.concatenate(ns)
        c = np.concatenate(costs)
        total_p = p.sum()
        if not np.isclose(total_p, 1.0, rtol=0, atol=1e-9):
            raise RuntimeError(f"design {d.label!r}: sample probabilities sum to {total_p!r}, not 1")
        by_label[f"{d.label}@{d.size}"] = len(p)
        for (e, formula), arrays in parts.items():
            est, se, lo, hi = (np.concatenate(a, axis=0) for a in arrays)
            for v, var in enumerate(names):
                # as in measures.summarise: a sample without an estimate (no unit of a domain, Hajek of an
                # empty sample) is not counted; the measures are conditional on the others (probabilities rescaled)
                has = np.isfinite(est[:, v])
                if not has.any():
                    continue
                q = p if has.all() else p[has] / p[has].sum()
                m = measures(est[has, v], se[has, v], lo[has, v], hi[has, v], float(truth[v]), z, q)
                q_n = float(q @ n[has])
                deff = design_effect(m["empirical_se"], srs_variance(q_n, frame.N, S2[v]),
                                     max(abs(m["truth"]), abs(m["mean_estimate"])))
                rows.append({"design": d.label, "method": d.method, "size": int(d.size), "estimator": e,
                             "variable": var, **m, "deff": deff,
                             "mean_n": q_n, "mean_cost": float(q @ c[has]), "exact": True, "variance": formula})
                tables.append(pd.DataFrame({
                    "replicate": np.arange(len(p)), "design": d.label, "size": int(d.size), "estimator": e,
                    "variable": var, "estimate": est[:, v], "se": se[:, v], "lower": lo[:, v], "upper": hi[:, v],
                    "n": n, "cost": c, "variance": formula, "probability": p}))
    summary = pd.DataFrame(rows, columns=SUMMARY_COLUMNS + ["exact"] + PUBLISHED_COLUMNS + ["variance"])
    samples = pd.concat(tables, ignore_index=True) if tables else pd.DataFrame()
    return summary, samples, by_label
