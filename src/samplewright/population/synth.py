"""Synthetic population frames with the structure a planner expects.

The model, for unit j of cluster c in stratum h at list position p::

    y = mean_h + a_c + e_j + trend * (p / (N - 1) - 1/2) + amplitude * sin(2 pi p / period)

with a_c ~ Normal(0, icc * sd_h^2) and e_j of variance (1 - icc) * sd_h^2, either normal or
a centred, scaled gamma or lognormal variable with the asked skewness.  So the within-stratum
intra-cluster correlation of y (before trend and cycle) is ``icc`` by construction.  A size
measure, when asked, is lognormal with the chosen correlation to y on the log scale.

All keys are optional except ``units``; see :data:`KEYS`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from samplewright.apportion import largest_remainder
from samplewright.config.synthetic import CLUSTER_KEYS, KEYS, STRATUM_KEYS, SyntheticSpec
from samplewright.errors import InputError, show

__all__ = ["CLUSTER_KEYS", "KEYS", "STRATUM_KEYS", "SyntheticSpec", "generate", "stratum_units"]

def _noise(rng, n, skew, skewness):
    """Zero-mean, unit-variance noise with the asked skewness."""
    if skew == "none":
        return rng.standard_normal(n)
    if skew == "gamma":
        k = 4.0 / skewness**2  # skewness of Gamma(k) is 2 / sqrt(k)
        return (rng.gamma(k, 1.0, n) - k) / np.sqrt(k)
    if skew == "lognormal":
        # skewness of a lognormal: (e^{s^2} + 2) sqrt(e^{s^2} - 1); solve for s^2
        lo, hi = 1e-8, 10.0
        for _ in range(200):
            mid = (lo + hi) / 2
            g = (np.exp(mid) + 2) * np.sqrt(np.exp(mid) - 1)
            lo, hi = (mid, hi) if g < skewness else (lo, mid)
        s2 = (lo + hi) / 2
        x = np.exp(np.sqrt(s2) * rng.standard_normal(n))
        m, v = np.exp(s2 / 2), (np.exp(s2) - 1) * np.exp(s2)
        return (x - m) / np.sqrt(v)
    raise InputError(f"[frame.synthetic] skew = {show(skew)} is not known (use 'none', 'gamma' or 'lognormal')")


def _stratum_table(spec: SyntheticSpec):
    if not spec.has_strata:
        return ["all"], np.array([1.0]), np.array([spec.mean]), np.array([spec.sd])
    names = [str(s.get("name", f"S{i + 1}")) for i, s in enumerate(spec.strata)]
    share = np.array([float(s.get("share", 1.0)) for s in spec.strata])
    means = np.array([float(s.get("mean", spec.mean)) for s in spec.strata])
    sds = np.array([float(s.get("sd", spec.sd)) for s in spec.strata])
    return names, share / share.sum(), means, sds


def stratum_units(spec: SyntheticSpec) -> np.ndarray:
    """Units of each stratum (largest-remainder rounding of ``units x share``); refuse an empty stratum.

    Every stratum must get at least one unit: a stratum that rounds to none would silently
    vanish from the frame (and, with clusters, could not be split into clusters).
    """
    names, share, _, _ = _stratum_table(spec)
    counts = largest_remainder(spec.units, spec.units * share, np.full(len(share), spec.units), None)
    for name, s, c in zip(names, share, counts):
        if c < 1:
            raise InputError(f"[frame.synthetic]: stratum {show(name)} gets 0 of the {spec.units} units "
                             f"(share {s:.3g} of the total); raise its share or units")
    return counts


def generate(spec: SyntheticSpec) -> pd.DataFrame:
    """Build the frame as a DataFrame (columns: unit, [stratum], [cluster], target, [size]).

    Examples
    --------
    >>> df = generate(SyntheticSpec(units=1000, seed=3))
    >>> len(df), list(df.columns)
    (1000, ['unit', 'y'])
    """
    rng = np.random.default_rng(spec.seed)
    names, _, means, sds = _stratum_table(spec)
    N_h = stratum_units(spec)
    stratum = np.repeat(np.arange(len(names)), N_h)
    y = means[stratum].astype(float)
    sd_unit = sds[stratum]
    icc = 0.0
    cluster = None
    if spec.clusters is not None:
        icc = float(spec.clusters.get("icc", 0.0))
        mean_size = float(spec.clusters.get("mean_size", 20))
        size_cv = float(spec.clusters.get("size_cv", 0.0))
        cluster = np.empty(spec.units, dtype=np.int64)
        next_id, start = 0, 0
        for nh in N_h:
            sizes = _cluster_sizes(rng, int(nh), mean_size, size_cv)
            cluster[start:start + nh] = next_id + np.repeat(np.arange(len(sizes)), sizes)
            next_id += len(sizes)
            start += nh
        effect = rng.standard_normal(next_id)
        y += np.sqrt(icc) * sd_unit * effect[cluster]
    y += np.sqrt(1.0 - icc) * sd_unit * _noise(rng, spec.units, spec.skew, spec.skewness)
    # list order: grouped keeps strata and clusters together; random shuffles the units
    perm = np.arange(spec.units) if spec.order == "grouped" else rng.permutation(spec.units)
    stratum, y = stratum[perm], y[perm]
    cluster = None if cluster is None else cluster[perm]
    p = np.arange(spec.units)
    if spec.trend:
        y = y + spec.trend * (p / max(spec.units - 1, 1) - 0.5)
    if spec.period and spec.amplitude:
        y = y + spec.amplitude * np.sin(2 * np.pi * p / spec.period)
    out = {"unit": np.arange(1, spec.units + 1)}
    if spec.has_strata:
        out["stratum"] = np.asarray(names, dtype=object)[stratum]
    if cluster is not None:
        out["cluster"] = cluster + 1
    out[spec.target] = y
    if spec.size_correlation is not None:
        rho = float(spec.size_correlation)
        z = (y - y.mean()) / (y.std() or 1.0)
        logs = rho * z + np.sqrt(max(1.0 - rho**2, 0.0)) * rng.standard_normal(spec.units)
        sig = float(spec.size_cv)
        out["size"] = spec.size_mean * np.exp(sig * logs - sig**2 / 2)
    return pd.DataFrame(out)


def _cluster_sizes(rng, units: int, mean_size: float, size_cv: float) -> np.ndarray:
    """Cluster sizes (at least 1) summing to ``units`` (at least 1): equal, or gamma-spread with CV ``size_cv``.

    There are at most ``units`` clusters, so the rounding loop below always ends.
    """
    k = min(units, max(1, round(units / mean_size)))
    if size_cv < 1e-6:  # equal sizes (a smaller CV would not change the rounded sizes)
        w = np.ones(k)
    else:
        shape = 1.0 / size_cv**2
        w = rng.gamma(shape, 1.0, k)
    sizes = np.maximum(1, np.floor(w / w.sum() * units).astype(np.int64))
    diff = units - sizes.sum()
    order = np.argsort(-w)
    i = 0
    while diff != 0:
        j = order[i % k]
        if diff > 0:
            sizes[j] += 1
            diff -= 1
        elif sizes[j] > 1:
            sizes[j] -= 1
            diff += 1
        i += 1
    return sizes
