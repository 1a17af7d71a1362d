"""Stratified simple random sampling with a chosen allocation."""

from __future__ import annotations

import math

import numpy as np

from samplewright.config.methods import METHOD_KEYS
from samplewright.designs.allocation import RULES, allocate
from samplewright.designs.base import Design
from samplewright.designs.block import SampleBlock
from samplewright.designs.draws import distinct_positions
from samplewright.designs.enumeration import all_combinations, product_chunks
from samplewright.errors import InputError


class Stratified(Design):
    """SRS without replacement inside each stratum, ``n`` allocated by ``allocation``.

    ``allocation`` is one of equal, proportional, neyman, optimal (cost-weighted); Neyman
    and optimal use the exact stratum standard deviations of the first study variable
    (or of ``allocation_variable``) and, for optimal, the stratum unit costs.
    """

    method = "stratified"
    keys = METHOD_KEYS["stratified"]

    def __init__(self, label: str, n, allocation: str = "proportional", allocation_variable: str | None = None,
                 stratum_costs=None):
        super().__init__(label, n=n, allocation=allocation, allocation_variable=allocation_variable,
                         stratum_costs=stratum_costs)
        self._cache = {}

    def check(self, frame):
        n = self._positive_int("n", self.n)
        if self.allocation not in RULES:
            raise InputError(f"design {self.label!r}: allocation {self.allocation!r} is not known "
                             f"(use one of: {', '.join(RULES)})")
        if frame.H < 2 and frame.roles.get("stratum") is None:
            raise InputError(f"design {self.label!r} (stratified) needs a stratum column: "
                             f"set stratum = \"column\" in [frame]")
        if self.allocation_variable is not None and self.allocation_variable not in frame.variables:
            raise InputError(f"design {self.label!r}: allocation_variable {self.allocation_variable!r} "
                             f"is not a target ({', '.join(frame.variables)})")
        single = np.flatnonzero(frame.N_h < 2)
        if single.size:
            names = ", ".join(repr(str(frame.stratum_labels[h])) for h in single[:5])
            raise InputError(f"design {self.label!r}: stratum {names} has only one unit, so its variance "
                             f"cannot be estimated; merge it with a neighbouring stratum in column "
                             f"{frame.roles.get('stratum')!r}")
        try:
            n_h = self.n_h(frame)
        except InputError as exc:
            raise InputError(f"design {self.label!r}: {exc}") from None
        if n > frame.N:
            raise InputError(f"design {self.label!r}: n = {n} is more than the {frame.N} units in the frame")
        over = np.flatnonzero(n_h > frame.N_h)
        if over.size:  # allocate() caps at N_h; this guards any rule that does not
            h = over[0]
            raise InputError(f"design {self.label!r}: allocation {self.allocation!r} gives stratum "
                             f"{str(frame.stratum_labels[h])!r} {int(n_h[h])} units but it has only "
                             f"{int(frame.N_h[h])}")
        if int(n_h.sum()) != n:
            raise InputError(f"design {self.label!r}: allocation {self.allocation!r} places {int(n_h.sum())} "
                             f"units, not n = {n}")

    def stratum_unit_costs(self, frame) -> np.ndarray:
        """Mean cost per unit in each stratum, for the cost-optimal allocation."""
        if self.stratum_costs is not None:
            return np.asarray(self.stratum_costs, dtype=float)
        if frame.unit_cost is not None:
            tot = np.bincount(frame.stratum, weights=frame.unit_cost, minlength=frame.H)
            return tot / frame.N_h
        return np.ones(frame.H)

    def n_h(self, frame) -> np.ndarray:
        key = id(frame)
        if key not in self._cache:
            v = 0 if self.allocation_variable is None else frame.variables.index(self.allocation_variable)
            S_h = np.sqrt(frame.stratum_S2()[:, v])
            c_h = self.stratum_unit_costs(frame) if self.allocation == "optimal" else None
            self._cache[key] = allocate(int(self.n), self.allocation, frame.N_h, S_h, c_h,
                                        labels=frame.stratum_labels)
        return self._cache[key]

    def _draw(self, frame, rng, B, keep_units):
        n_h = self.n_h(frame)
        N_h = frame.N_h
        strata = np.flatnonzero(n_h)
        pos = np.empty((B, int(n_h.sum())), dtype=np.int64)  # positions in the stratum-grouped order
        at = 0
        for h in strata:
            k = int(n_h[h])
            pos[:, at:at + k] = distinct_positions(rng, N_h[h], k, (B,))
            pos[:, at:at + k] += frame.strata_offsets[h]
            at += k
        units = np.take(frame.strata_units, pos) if keep_units else None
        psu_stratum = np.repeat(strata, n_h[strata])
        return SampleBlock(
            sums=frame.gather_in_strata(pos),
            weight=(N_h / np.maximum(n_h, 1))[psu_stratum],
            psu_stratum=psu_stratum,
            fpc=1.0 - n_h / N_h,
            clusters=np.zeros(B),
            strata=int((n_h > 0).sum()),
            units=units if keep_units else None,
        )

    # ------------------------------------------------------------ exact mode
    def count_samples(self, frame):
        return math.prod(math.comb(N, k) for N, k in self._sampled_strata(frame))

    def count_formula(self, frame):
        parts = self._sampled_strata(frame)
        shown = " x ".join(f"C({N}, {k})" for N, k in parts[:4]) + (" x ..." if len(parts) > 4 else "")
        return f"prod_h C(N_h, n_h) = {shown}"

    def _sampled_strata(self, frame):
        return [(int(N), int(k)) for N, k in zip(frame.N_h, self.n_h(frame)) if k > 0]

    def enumerate(self, frame, chunk=20_000):
        """Every combination of one n_h-subset per stratum, each equally likely."""
        n_h, N_h = self.n_h(frame), frame.N_h
        strata = np.flatnonzero(n_h)
        lists = [all_combinations(int(N_h[h]), int(n_h[h])) for h in strata]
        psu_stratum = np.repeat(strata, n_h[strata])
        p = 1.0 / float(np.prod([len(x) for x in lists], dtype=float))
        for digits in product_chunks([len(x) for x in lists], chunk):
            units = np.concatenate([frame.strata_units[frame.strata_offsets[h] + lists[j][digits[:, j]]]
                                    for j, h in enumerate(strata)], axis=1)
            yield SampleBlock(sums=frame.gather(units), weight=(N_h / np.maximum(n_h, 1))[psu_stratum],
                              psu_stratum=psu_stratum, fpc=1.0 - n_h / N_h, clusters=np.zeros(len(units)),
                              strata=int(strata.size), units=units, variance=self.variance_name), \
                np.full(len(units), p)

    def inclusion_probabilities(self, frame):
        return (self.n_h(frame) / frame.N_h)[frame.stratum]

    def expected_n(self, frame):
        return float(self.n_h(frame).sum())

    def stratum_allocation(self, frame):
        return frame.N_h, self.n_h(frame)
