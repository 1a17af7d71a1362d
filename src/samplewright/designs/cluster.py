"""Cluster sampling: one stage (every unit of each chosen cluster) or two stages."""

from __future__ import annotations

import numpy as np

from ..block import SampleBlock
from ..cost import cluster_costs
from ..draws import distinct_positions
from ..errors import InputError
from .base import Design


class Cluster(Design):
    """SRS of ``clusters`` clusters; all their units, or an SRS of ``units_per_cluster`` in each.

    In a two-stage sample a cluster smaller than ``units_per_cluster`` is taken whole when
    ``cap_units = true`` (otherwise the design is refused).  The variance estimate is the
    between-cluster ("ultimate cluster") estimator with the first-stage finite population
    correction: exact for one stage, the usual approximation for two (Cochran 1977, ch. 10-11).
    """

    method = "cluster"
    size_key = "clusters"
    keys = ("clusters", "units_per_cluster", "cap_units")

    def __init__(self, label: str, clusters, units_per_cluster: int | None = None, cap_units: bool = False):
        super().__init__(label, clusters=clusters, units_per_cluster=units_per_cluster, cap_units=cap_units)

    def check(self, frame):
        self._need(frame, "cluster")
        m = self._positive_int("clusters", self.clusters)
        if m > frame.C:
            raise InputError(f"design {self.label!r}: clusters = {m} is more than the {frame.C} clusters "
                             f"in the frame")
        self._check_second_stage(frame)

    def _draw(self, frame, rng, B, keep_units):
        m, C = int(self.clusters), frame.C
        chosen = distinct_positions(rng, C, m, (B,))  # (B, m) cluster codes
        fpc = np.array([1.0 - m / C])
        if self.units_per_cluster is None:
            units = None
            if keep_units:
                units = [np.concatenate([frame.cluster_units[frame.cluster_offsets[c]:frame.cluster_offsets[c + 1]]
                                         for c in row]) for row in chosen]
            return SampleBlock(
                sums=frame.cluster_sums[chosen],
                weight=np.full(m, C / m),
                psu_stratum=np.zeros(m, dtype=np.int64),
                fpc=fpc,
                clusters=np.full(B, m, dtype=float),
                strata=0,
                units=units,
                cluster_cost=cluster_costs(frame, chosen),
            )
        sizes = frame.cluster_sizes[chosen]  # (B, m)
        k = min(int(self.units_per_cluster), int(frame.cluster_sizes.max()))  # a larger cap takes all
        take = np.minimum(sizes, k)
        units, valid = self._second_stage(frame, rng, chosen, sizes, k)
        gathered = frame.gather(units) * valid[..., None]
        return SampleBlock(
            sums=gathered.sum(axis=2),
            weight=(C / m) * sizes / take,
            psu_stratum=np.zeros(m, dtype=np.int64),
            fpc=fpc,
            clusters=np.full(B, m, dtype=float),
            strata=0,
            units=np.where(valid, units, -1).reshape(B, -1) if keep_units else None,
            cluster_cost=cluster_costs(frame, chosen),
        )

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

    def inclusion_probabilities(self, frame):
        p1 = int(self.clusters) / frame.C
        if self.units_per_cluster is None:
            return np.full(frame.N, p1)
        sizes = frame.cluster_sizes[frame.cluster]
        return p1 * np.minimum(sizes, int(self.units_per_cluster)) / sizes

    def expected_n(self, frame):
        return float(self.inclusion_probabilities(frame).sum())
