"""Cluster sampling: one stage (every unit of each chosen cluster) or two stages."""

from __future__ import annotations

import math

import numpy as np

from samplewright.config.methods import METHOD_KEYS, size_key
from samplewright.designs.base import Design
from samplewright.designs.block import SampleBlock
from samplewright.designs.draws import distinct_positions
from samplewright.designs.enumeration import (
    all_combinations,
    combination_chunks,
    elementary_symmetric,
    product_chunks,
    subset_positions,
)
from samplewright.errors import InputError


class Cluster(Design):
    """SRS of ``clusters`` clusters; all their units, or an SRS of ``units_per_cluster`` in each.

    In a two-stage sample a cluster smaller than ``units_per_cluster`` is taken whole when
    ``cap_units = true`` (otherwise the design is refused).  Variance (``variance =``): with
    one stage the between-cluster estimator with the first-stage finite population
    correction (exact; Cochran 1977, ch. 9); with two, ``two_stage`` (default, unbiased) or
    ``ultimate_cluster`` (see :mod:`samplewright.estimation.two_stage_variance`, also for the take-all
    rule when clusters = every cluster).
    """

    method = "cluster"
    size_key = size_key("cluster")
    keys = METHOD_KEYS["cluster"]
    variances = ("two_stage", "ultimate_cluster")

    def __init__(self, label: str, clusters, units_per_cluster: int | None = None, cap_units: bool = False,
                 variance: str | None = None):
        super().__init__(label, clusters=clusters, units_per_cluster=units_per_cluster, cap_units=cap_units,
                         variance=variance)

    def check(self, frame):
        self._need(frame, "cluster")
        self._check_variance()
        m = self._positive_int("clusters", self.clusters)
        if m > frame.C:
            raise InputError(f"design {self.label!r}: clusters = {m} is more than the {frame.C} clusters "
                             f"in the frame")
        self._check_second_stage(frame)

    def _draw(self, frame, rng, B, keep_units):
        chosen = distinct_positions(rng, frame.C, int(self.clusters), (B,))  # (B, m) cluster codes
        units = valid = None
        if self.units_per_cluster is not None:
            units, valid = self._second_stage(frame, rng, chosen, frame.cluster_sizes[chosen], self.take(frame))
        return self.block(frame, chosen, units, valid, keep_units)

    def notes(self, frame):
        return one_unit_note(self, frame.C if int(self.clusters) == frame.C else 0, self.take(frame))

    def take(self, frame) -> int | None:
        """Units drawn per cluster (a cap above the largest cluster takes all), None for one stage."""
        if self.units_per_cluster is None:
            return None
        return min(int(self.units_per_cluster), int(frame.cluster_sizes.max()))

    def block(self, frame, chosen, units=None, valid=None, keep_units=False) -> SampleBlock:
        """The block of chosen clusters (B, m) and, for two stages, their units (B, m, k) and mask."""
        m, C = int(self.clusters), frame.C
        B = chosen.shape[0]
        fpc = np.array([1.0 - m / C])
        common = {"fpc": fpc, "clusters": np.full(B, m, dtype=float), "strata": 0,
                  "cluster_cost": _cluster_costs(frame, chosen)}
        if units is None:  # np.take: cluster_sums[chosen], several times faster for rows this narrow
            kept = None
            if keep_units:
                kept = [np.concatenate([frame.cluster_units[frame.cluster_offsets[c]:frame.cluster_offsets[c + 1]]
                                        for c in row]) for row in chosen]
            return SampleBlock(sums=np.take(frame.cluster_sums, chosen, axis=0), weight=np.full(m, C / m),
                               psu_stratum=np.zeros(m, dtype=np.int64), units=kept, variance=self.variance_name,
                               **common)
        return second_stage_block(frame, units, valid, frame.cluster_sizes[chosen], np.full(m, C / m),
                                  np.zeros(m, dtype=np.int64), srs=True, keep_units=keep_units,
                                  variances=self.variance_names, **common)

    @staticmethod
    def _second_stage(frame, rng, chosen, sizes, k):
        """Units (B, m, k) drawn by SRS inside each chosen cluster and a mask of real positions."""
        whole = sizes <= k
        pos = np.broadcast_to(np.arange(k), sizes.shape + (k,)).copy()
        part = ~whole
        if part.any():
            pos[part] = distinct_positions(rng, sizes[part], k, (int(part.sum()),))
        valid = pos < sizes[..., None]
        pos = np.where(valid, pos, 0)
        units = frame.cluster_units[frame.cluster_offsets[chosen][..., None] + pos]
        return units, valid

    # ------------------------------------------------------------ exact mode
    def count_samples(self, frame):
        m, C = int(self.clusters), frame.C
        k = self.take(frame)
        if k is None:
            return math.comb(C, m)
        return elementary_symmetric([math.comb(int(M), min(int(M), k)) for M in frame.cluster_sizes], m)

    def count_formula(self, frame):
        m, C = int(self.clusters), frame.C
        k = self.take(frame)
        if k is None:
            return f"C(clusters, m) = C({C}, {m})"
        return f"sum over the C({C}, {m}) cluster sets of prod_c C(M_c, {k})"

    def enumerate(self, frame, chunk=20_000):
        """Every cluster subset (and, with two stages, every second-stage subset of its clusters)."""
        m, C = int(self.clusters), frame.C
        k = self.take(frame)
        p1 = 1.0 / math.comb(C, m)
        if k is None:
            for chosen in combination_chunks(C, m, chunk):
                yield self.block(frame, chosen), np.full(len(chosen), p1)
            return
        sizes_all = frame.cluster_sizes
        subsets = {}
        for first in combination_chunks(C, m, 1):
            chosen = first[0]
            take = np.minimum(sizes_all[chosen], k)
            lists = []
            for M, t in zip(sizes_all[chosen], take):
                if (int(M), int(t)) not in subsets:
                    subsets[(int(M), int(t))] = all_combinations(int(M), int(t))
                lists.append(subsets[(int(M), int(t))])
            p = p1 / float(np.prod([len(x) for x in lists], dtype=float))
            offsets = frame.cluster_offsets[chosen]
            for digits in product_chunks([len(x) for x in lists], chunk):
                R = len(digits)
                pos, valid = subset_positions(lists, take, digits, k)
                units = frame.cluster_units[offsets[None, :, None] + pos]
                yield self.block(frame, np.broadcast_to(chosen, (R, m)), units, valid), np.full(R, p)

    def inclusion_probabilities(self, frame):
        p1 = int(self.clusters) / frame.C
        if self.units_per_cluster is None:
            return np.full(frame.N, p1)
        sizes = frame.cluster_sizes[frame.cluster]
        return p1 * np.minimum(sizes, int(self.units_per_cluster)) / sizes

    def expected_n(self, frame):
        return float(self.inclusion_probabilities(frame).sum())


def within_factor(variance: str, pi1, take: np.ndarray, sizes: np.ndarray, srs: bool) -> np.ndarray:
    """Each slot's factor for its within-cluster variance term, shape of ``take``: the take-all rule and the
    ``two_stage`` / ``ultimate_cluster`` options of :mod:`samplewright.estimation.two_stage_variance`.

    ``pi1`` is the first-stage inclusion probability of each slot (scalar or array), ``take``
    the units drawn in it, ``sizes`` its cluster size M_i, ``srs`` whether the first stage
    is SRS with its finite population correction (else the with-replacement approximation).
    """
    pi1 = np.broadcast_to(np.asarray(pi1, dtype=float), take.shape)
    own = pi1 if (variance == "two_stage" and srs) else np.zeros(take.shape)
    return np.where(pi1 >= 1.0, 1.0, own) * (1.0 - take / sizes)


def one_unit_note(design, certain: int, k) -> list[str]:
    """A note when ``certain`` clusters are taken with certainty and only one unit is drawn in each:
    their within-cluster variance, all the variance they have, cannot be estimated."""
    if k != 1 or certain == 0:
        return []
    return [(f"design {design.label!r} at clusters = {design.clusters}: {certain} cluster(s) are taken with "
             f"certainty and one unit is drawn in each, so their within-cluster variance cannot be estimated "
             f"and is left out of the standard errors (draw 2 or more units per cluster)")]


def second_stage_block(frame, units, valid, sizes, w1, slot_stratum, *, srs, keep_units, variances,
                       **fields) -> SampleBlock:
    """A two-stage block laid out unit by unit (see :mod:`samplewright.estimation.two_stage_variance`).

    ``units`` (B, S, k) are the second-stage units of S cluster slots (``valid`` marks the
    real ones), ``sizes`` (B, S) the cluster sizes, ``w1`` (S,) or (B, S) the first-stage
    weights (1 for a certainty cluster), ``slot_stratum`` (S,) each slot's design stratum;
    ``srs``: SRS of clusters (else the with-replacement approximation for the first stage).
    ``variances`` are the design's listed formulas, each with its within-cluster factors (the
    block is viewed with the first; see ``SampleBlock.with_variance``); ``fields`` are the
    block's other fields, among them ``fpc`` (the first-stage correction per stratum).
    """
    B, S, k = units.shape
    take = valid.sum(axis=2)
    w1 = np.broadcast_to(w1, (B, S))
    views = {name: {"within_fpc": within_factor(name, 1.0 / w1, take, sizes, srs)} for name in variances}
    return SampleBlock(
        sums=(frame.gather(units) * valid[..., None]).reshape(B, S * k, -1),
        weight=np.repeat(w1 * sizes / take, k, axis=1),
        psu_stratum=np.repeat(slot_stratum, k),
        mask=None if valid.all() else valid.reshape(B, S * k),
        units=np.where(valid, units, -1).reshape(B, -1) if keep_units else None,
        psu=np.repeat(np.arange(S), k),
        variance=variances[0],
        variants=views if len(variances) > 1 else None,
        **views[variances[0]],
        **fields,
    )


def _cluster_costs(frame, chosen: np.ndarray) -> np.ndarray | None:
    """Summed cluster_cost of the chosen clusters, (B, m) codes -> (B,); None without that column."""
    if getattr(frame, "cluster_cost", None) is None:
        return None
    return frame.cluster_cost[chosen].sum(axis=1)
