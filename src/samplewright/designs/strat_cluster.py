"""Stratified multistage sampling: clusters within strata, one or two stages, SRS or PPS.

Method ``stratified_cluster``.  ``clusters`` (the size a sweep varies) is the total number of
clusters, allocated to the strata by ``cluster_allocation``: ``equal``, ``proportional``
(to the clusters in each stratum) or ``units`` (to the units in each stratum), at least two
per stratum where it has them and never more than it has (``allocation.real_allocation``
and ``apportion.largest_remainder``).  Within stratum h, m_h clusters are drawn by ``selection``:

- ``srs``: simple random sampling of clusters, pi_c = m_h / C_h;
- ``pps``: Sampford's method with pi_c = m_h s_c / S_h, where the cluster size s_c is its
  unit count (``cluster_size = "units"``) or its summed ``size`` column (``"size"``);
  clusters with pi_c >= 1 are taken with certainty (``pips.pips``).

With ``units_per_cluster`` a second stage draws that many units by SRS in each chosen
cluster (smaller clusters whole, with ``cap_units = true``).

Variance: the shared between-PSU estimator within strata (``estimation.variance.stratified_psu_variance``)
on the estimated cluster totals.  With SRS of clusters the first-stage finite population
correction 1 - m_h / C_h is applied (exact for one stage; Cochran 1977, ch. 9); with PPS no
correction is applied (the with-replacement approximation; Sarndal, Swensson & Wretman 1992,
sec. 4.6).  With two stages ``variance = "two_stage"`` (default) adds each cluster's
within-cluster term, which makes it unbiased under SRS of clusters, and ``"ultimate_cluster"``
leaves it out; under PPS the with-replacement form already holds the second stage and both
options agree (``two_stage_variance``).  A certainty cluster, or every cluster of a take-all
stratum (m_h = C_h), adds no first-stage variance: with one stage none at all, with two its
within-cluster term (its units as PSUs, correction 1 - k / M_c).
"""

from __future__ import annotations

import math

import numpy as np

from samplewright.apportion import largest_remainder
from samplewright.config.methods import METHOD_KEYS, size_key
from samplewright.config.validate import closest
from samplewright.designs.allocation import real_allocation
from samplewright.designs.base import Design
from samplewright.designs.block import SampleBlock
from samplewright.designs.cluster import Cluster, one_unit_note, second_stage_block
from samplewright.designs.draws import distinct_positions
from samplewright.designs.enumeration import (
    all_combinations,
    elementary_symmetric,
    product_chunks,
    subset_positions,
)
from samplewright.designs.pips import SampfordSampler, pips, size_measure
from samplewright.errors import InputError

ALLOCATIONS = ("equal", "proportional", "units")
SELECTIONS = ("srs", "pps")
CLUSTER_SIZES = ("units", "size")


class StratifiedCluster(Design):
    """Clusters within strata, allocated by stratum, one or two stages, SRS or PPS of clusters.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from samplewright import Frame
    >>> df = pd.DataFrame({"y": np.arange(16.0), "zone": np.repeat(["n", "s"], 8),
    ...                    "plot": np.repeat(np.arange(8), 2)})
    >>> f = Frame.from_dataframe(df, target="y", stratum="zone", cluster="plot")
    >>> d = StratifiedCluster("zones", clusters=4, units_per_cluster=1)
    >>> d.check(f)
    >>> d.cluster_allocation_of(f).tolist()
    [2, 2]
    """

    method = "stratified_cluster"
    count_text = "prod over strata of the cluster subsets (and their second-stage subsets)"
    size_key = size_key("stratified_cluster")
    keys = METHOD_KEYS["stratified_cluster"]
    variances = ("two_stage", "ultimate_cluster")

    def __init__(self, label: str, clusters, cluster_allocation: str = "proportional",
                 units_per_cluster: int | None = None, cap_units: bool = False, selection: str = "srs",
                 cluster_size: str = "units", variance: str | None = None):
        super().__init__(label, clusters=clusters, cluster_allocation=cluster_allocation,
                         units_per_cluster=units_per_cluster, cap_units=cap_units, selection=selection,
                         cluster_size=cluster_size, variance=variance)
        self._cache = {}

    # ------------------------------------------------------------------ checks
    def check(self, frame):
        self._need(frame, "cluster")
        if frame.roles.get("stratum") is None:
            raise InputError(f"design {self.label!r} (stratified_cluster) needs a stratum column: "
                             f"set stratum = \"column\" in [frame]")
        m = self._positive_int("clusters", self.clusters)
        for key, value, options in (("cluster_allocation", self.cluster_allocation, ALLOCATIONS),
                                    ("selection", self.selection, SELECTIONS),
                                    ("cluster_size", self.cluster_size, CLUSTER_SIZES)):
            if value not in options:
                raise InputError(f"design {self.label!r}: {key} = {value!r} is not known"
                                 f"{closest(str(value), options)}")
        self._check_variance()
        C_h = self.clusters_per_stratum(frame)
        if m > C_h.sum():
            raise InputError(f"design {self.label!r}: clusters = {m} is more than the {int(C_h.sum())} "
                             f"clusters in the frame")
        floor = np.minimum(2, C_h)
        if m < floor.sum():
            raise InputError(f"design {self.label!r}: clusters = {m} cannot give each of the {int((C_h > 0).sum())} "
                             f"strata 2 clusters (needs clusters >= {int(floor.sum())})")
        self._check_second_stage(frame)
        if self.selection == "pps" and self.cluster_size == "size":
            size_measure(frame, self.label)
        self.setup(frame)

    # ------------------------------------------------------------------ set-up
    @staticmethod
    def clusters_per_stratum(frame) -> np.ndarray:
        return np.bincount(frame.cluster_stratum, minlength=frame.H)

    def cluster_allocation_of(self, frame) -> np.ndarray:
        """Clusters drawn in each stratum, m_h (whole numbers summing to ``clusters``)."""
        return self.setup(frame)["m_h"]

    def _k(self, frame):
        if self.units_per_cluster is None:
            return None
        return min(int(self.units_per_cluster), int(frame.cluster_sizes.max()))

    def setup(self, frame) -> dict:
        key = id(frame)
        if key in self._cache:
            return self._cache[key]
        m = int(self.clusters)
        C_h = self.clusters_per_stratum(frame)
        base = {"equal": np.ones(frame.H), "proportional": C_h.astype(float),
                "units": frame.N_h.astype(float)}[self.cluster_allocation]
        w = np.where(C_h > 0, base, 0.0)
        floor = np.minimum(2, C_h)
        m_h = largest_remainder(m, real_allocation(m, w / w.sum(), C_h, floor), C_h, floor)
        M = frame.cluster_sizes
        if self.selection == "pps":
            s_c = M.astype(float) if self.cluster_size == "units" else np.bincount(
                frame.cluster, weights=size_measure(frame, self.label), minlength=frame.C)
        k = self._k(frame)
        groups, pi_c, certain_all, rounds = [], np.zeros(frame.C), [], 0
        for h in range(frame.H):
            codes = np.flatnonzero(frame.cluster_stratum == h)
            if m_h[h] == 0:
                continue
            if self.selection == "pps":
                p, cert, r = pips(s_c[codes], int(m_h[h]))
                rounds = max(rounds, r)
            else:
                p, cert = np.full(codes.size, m_h[h] / codes.size), np.zeros(codes.size, dtype=bool)
            pi_c[codes] = p
            free = codes[~cert]
            certain_all += codes[cert].tolist()
            groups.append({"h": h, "free": free, "pi": p[~cert], "m": int(m_h[h]) - int(cert.sum()),
                           "fpc": 1.0 - m_h[h] / codes.size if self.selection == "srs" else 1.0})
        # cluster slots: the drawn clusters of each stratum, then each certainty cluster as a
        # stratum of its own with no first-stage variance (with two stages its units are laid
        # out unit by unit, see _assemble and two_stage_variance)
        psu_stratum, fpc = [], []
        for g in groups:
            g["stratum"] = len(fpc)
            psu_stratum += [g["stratum"]] * g["m"]
            fpc.append(g["fpc"])
        cert_layout = []
        for c in certain_all:
            psu_stratum.append(len(fpc))
            fpc.append(0.0)
            cert_layout.append((c, int(M[c]) if k is None else min(int(M[c]), k)))
        self._cache[key] = {"m_h": m_h, "groups": groups, "pi_c": pi_c, "certain": cert_layout, "rounds": rounds,
                            "psu_stratum": np.array(psu_stratum, dtype=np.int64), "fpc": np.array(fpc), "k": k}
        return self._cache[key]

    def notes(self, frame):
        s = self.setup(frame)
        parts = ", ".join(f"{frame.stratum_labels[h]}: {int(s['m_h'][h])} of {int(c)}"
                          for h, c in enumerate(self.clusters_per_stratum(frame)))
        out = [f"design {self.label!r} at clusters = {self.clusters}: clusters per stratum "
               + f"({self.cluster_allocation}) {parts}; about {self.expected_n(frame):.4g} units expected"]
        if s["certain"]:
            out.append(f"design {self.label!r} at clusters = {self.clusters}: {len(s['certain'])} cluster(s) with "
                       f"pi >= 1 are taken with certainty ({s['rounds']} removal round(s))")
        take_all = sum(g["m"] for g in s["groups"] if g["fpc"] == 0.0)  # every cluster of the stratum drawn
        return out + one_unit_note(self, len(s["certain"]) + take_all, s["k"])

    # ------------------------------------------------------------------ drawing
    def _draw(self, frame, rng, B, keep_units):
        s = self.setup(frame)
        k = s["k"]
        M = frame.cluster_sizes
        chosen = []
        for g in s["groups"]:
            if g["m"] == 0:
                continue
            if self.selection == "pps":
                if "sampler" not in g:
                    g["sampler"] = SampfordSampler(g["pi"])
                pos = g["sampler"].draw(rng, B)
            else:
                pos = distinct_positions(rng, g["free"].size, g["m"], (B,))
            chosen.append(g["free"][pos])
        chosen = np.concatenate(chosen, axis=1) if chosen else np.zeros((B, 0), dtype=np.int64)
        units = valid = None
        cert_units = []
        if k is not None:
            units, valid = Cluster._second_stage(frame, rng, chosen, M[chosen], k)
            cert_units = [frame.cluster_units[frame.cluster_offsets[c] + distinct_positions(rng, int(M[c]), take, (B,))]
                          for c, take in s["certain"]]
        return self._assemble(frame, chosen, units, valid, cert_units, keep_units)

    def _assemble(self, frame, chosen, units, valid, cert_units, keep_units):
        """The block from drawn clusters (B, m'), their second-stage units and the certainty units."""
        s = self.setup(frame)
        k = s["k"]
        M = frame.cluster_sizes
        B = chosen.shape[0]
        certain = np.array([c for c, _ in s["certain"]], dtype=np.int64)
        common = {"fpc": s["fpc"], "clusters": np.full(B, chosen.shape[1] + certain.size, dtype=float),
                  "strata": int((s["m_h"] > 0).sum())}
        w1 = 1.0 / s["pi_c"][chosen]
        if k is None:
            every = np.concatenate([chosen, np.broadcast_to(certain, (B, certain.size))], axis=1)
            return SampleBlock(
                sums=frame.cluster_sums[every],
                weight=np.concatenate([w1, np.ones((B, certain.size))], axis=1),
                psu_stratum=s["psu_stratum"],
                units=_whole_clusters(frame, every) if keep_units else None,
                variance=self.variance_name,
                **common,
            )
        # certainty clusters' units padded to k positions, after the drawn clusters' slots
        cu = np.zeros((B, certain.size, k), dtype=np.int64)
        cv = np.zeros((B, certain.size, k), dtype=bool)
        for j, (_, take) in enumerate(s["certain"]):
            cu[:, j, :take] = cert_units[j]
            cv[:, j, :take] = True
        every = np.concatenate([chosen, np.broadcast_to(certain, (B, certain.size))], axis=1)
        return second_stage_block(frame, np.concatenate([units, cu], axis=1), np.concatenate([valid, cv], axis=1),
                                  M[every], np.concatenate([w1, np.ones((B, certain.size))], axis=1),
                                  s["psu_stratum"], srs=self.selection == "srs", keep_units=keep_units,
                                  variances=self.variance_names, **common)

    # ------------------------------------------------------------------ exact mode
    def _first_stage(self, frame):
        """Per stratum group: every subset of its drawn clusters (rows of codes) and its probability."""
        out = []
        for g in self.setup(frame)["groups"]:
            if g["m"] == 0:
                continue
            rows = all_combinations(g["free"].size, g["m"])
            if self.selection == "pps":  # Sampford (1967): p(s) ∝ (m - sum_s pi) prod_s pi / (1 - pi)
                pi = g["pi"]
                logw = (np.log(pi) - np.log1p(-pi))[rows].sum(axis=1) + np.log(g["m"] - pi[rows].sum(axis=1))
                p = np.exp(logw - np.logaddexp.reduce(logw))
            else:
                p = np.full(len(rows), 1.0 / len(rows))
            out.append((g["free"][rows], p))
        return out

    def count_samples(self, frame):
        s = self.setup(frame)
        k = s["k"]
        M = frame.cluster_sizes
        count = 1
        for g in s["groups"]:
            if g["m"] == 0:
                continue
            if k is None:
                count *= math.comb(g["free"].size, g["m"])
            else:
                count *= elementary_symmetric([math.comb(int(M[c]), min(int(M[c]), k)) for c in g["free"]], g["m"])
        for c, take in s["certain"]:
            count *= 1 if k is None else math.comb(int(M[c]), take)
        return count

    def enumerate(self, frame, chunk=20_000):
        """Every sample: the product over strata of cluster subsets, then of second-stage subsets."""
        s = self.setup(frame)
        k = s["k"]
        M = frame.cluster_sizes
        stages = self._first_stage(frame)
        lists = [rows for rows, _ in stages]
        probs = [p for _, p in stages]
        firsts = product_chunks([len(r) for r in lists], chunk if k is None else 1)
        subsets = {}

        def combos(size, take):
            if (size, take) not in subsets:
                subsets[(size, take)] = all_combinations(size, take)
            return subsets[(size, take)]

        for digits in firsts:
            parts = [lists[j][digits[:, j]] for j in range(len(lists))]
            chosen = np.concatenate(parts, axis=1) if parts else np.zeros((len(digits), 0), dtype=np.int64)
            p1 = np.prod([probs[j][digits[:, j]] for j in range(len(lists))], axis=0) if lists else np.ones(1)
            if k is None:
                yield self._assemble(frame, chosen, None, None, [], True), p1
                continue
            row = chosen[0]  # one first-stage sample at a time
            takes = [min(int(M[c]), k) for c in row] + [take for _, take in s["certain"]]
            clusters = list(row) + [c for c, _ in s["certain"]]
            second = [combos(int(M[c]), t) for c, t in zip(clusters, takes)]
            p2 = 1.0 / float(np.prod([len(x) for x in second], dtype=float))
            m = len(row)
            for d2 in product_chunks([len(x) for x in second], chunk):
                R = len(d2)
                pos, valid = subset_positions(second[:m], takes, d2, k)
                ch = np.broadcast_to(row, (R, m))
                units = frame.cluster_units[frame.cluster_offsets[ch][..., None] + pos]
                cert = [frame.cluster_units[frame.cluster_offsets[c] + second[m + j][d2[:, m + j]]]
                        for j, (c, _) in enumerate(s["certain"])]
                yield self._assemble(frame, ch, units, valid, cert, True), np.full(R, p1[0] * p2)

    # ------------------------------------------------------------------ probabilities
    def inclusion_probabilities(self, frame):
        s = self.setup(frame)
        M = frame.cluster_sizes[frame.cluster]
        p1 = s["pi_c"][frame.cluster]
        if s["k"] is None:
            return p1
        return p1 * np.minimum(M, s["k"]) / M


def _whole_clusters(frame, chosen: np.ndarray) -> np.ndarray:
    """Every unit of the chosen clusters (B, m), padded with -1 to (B, m * largest cluster)."""
    M = frame.cluster_sizes
    width = int(M.max())
    j = np.arange(width)
    valid = j < M[chosen][..., None]
    pos = frame.cluster_offsets[chosen][..., None] + np.where(valid, j, 0)
    return np.where(valid, frame.cluster_units[pos], -1).reshape(chosen.shape[0], -1)
