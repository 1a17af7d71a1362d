"""Stratified simple random sampling with a chosen allocation."""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from samplewright.config.methods import METHOD_KEYS
from samplewright.designs.allocation import RULES, allocate
from samplewright.designs.base import Design
from samplewright.designs.block import SampleBlock
from samplewright.designs.boundaries import stratum_codes
from samplewright.designs.draws import distinct_positions
from samplewright.designs.enumeration import all_combinations, product_chunks
from samplewright.errors import InputError


class Stratified(Design):
    """SRS without replacement inside each stratum, ``n`` allocated by ``allocation``.

    ``allocation`` is one of equal, proportional, neyman, optimal (cost-weighted); Neyman
    and optimal use the exact stratum standard deviations of the first study variable
    (or of ``allocation_variable``) and, for optimal, the stratum unit costs.

    The strata are the frame's stratum column, or, with ``boundaries`` (H - 1 increasing
    numbers), the H bands they cut on the numeric column ``stratify_by`` (the frame's size
    column by default, or one of its auxiliary columns): stratum h holds the units with
    b_h < x <= b_{h+1}.  With ``take_all`` the top band is taken whole (a take-all stratum)
    and the rest of ``n`` is allocated over the other bands.
    """

    method = "stratified"
    keys = METHOD_KEYS["stratified"]

    def __init__(self, label: str, n, allocation: str = "proportional", allocation_variable: str | None = None,
                 stratum_costs=None, stratify_by: str | None = None, boundaries=None, take_all: bool = False):
        super().__init__(label, n=n, allocation=allocation, allocation_variable=allocation_variable,
                         stratum_costs=stratum_costs, stratify_by=stratify_by, boundaries=boundaries,
                         take_all=take_all)
        self._cache = {}

    def __getstate__(self):  # the per-frame memo (it may hold a frame) is not shipped to workers
        return {**vars(self), "_cache": {}}

    # ------------------------------------------------------------ strata cut on a numeric column
    def check_cut(self, frame) -> None:
        """Refuse ``boundaries``, ``stratify_by`` and ``take_all`` the frame cannot support."""
        ctx = f"design {self.label!r}"
        if self.boundaries is None:
            for key in ("stratify_by", "take_all"):
                if getattr(self, key):
                    raise InputError(f"{ctx}: {key} is given but boundaries (the cut points of the strata) is not")
            return
        b = self.boundaries
        if not isinstance(b, (list, tuple)) or not b or any(
                isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) for v in b):
            raise InputError(f"{ctx}: boundaries must be a non-empty list of finite numbers, got {b!r}")
        if any(b2 <= b1 for b1, b2 in zip(b, b[1:])):
            raise InputError(f"{ctx}: boundaries must increase, got {b!r}")
        self._cut_column(frame)
        N_h = self.strata_frame(frame).N_h
        few = np.flatnonzero(N_h < 2)
        if few.size:
            h = int(few[0])
            raise InputError(f"{ctx}: boundaries {b!r} leave stratum {h + 1} of {len(N_h)} with {int(N_h[h])} "
                             f"unit(s); every stratum needs at least 2 (move or drop a boundary)")

    def _cut_column(self, frame) -> tuple[str, np.ndarray]:
        """The name and values of the column the boundaries cut."""
        col = self.stratify_by or frame.roles.get("size")
        if col is None:
            raise InputError(f"design {self.label!r}: boundaries need a numeric column to cut: set size = "
                             f"\"column\" in [frame], or stratify_by = one of the frame's auxiliary columns")
        values = frame.numeric_column(col)
        if values is None:
            raise InputError(f"design {self.label!r}: stratify_by = {col!r} is neither the frame's size column "
                             f"nor an auxiliary column ({', '.join(frame.numeric_names) or 'none set in [frame]'})")
        return col, values

    def strata_frame(self, frame):
        """The frame itself, or, with ``boundaries``, a copy whose strata are the bands they cut."""
        if self.boundaries is None:
            return frame
        key = ("strata", id(frame))
        held = self._cache.get(key)
        if held is None or held[0] is not frame:  # the entry holds its frame, so the id is not reused
            col, x = self._cut_column(frame)
            b = [float(v) for v in self.boundaries]
            labels = [f"{col} <= {b[0]:g}"] + [f"{col} in ({lo:g}, {hi:g}]" for lo, hi in zip(b, b[1:])] \
                + [f"{col} > {b[-1]:g}" + (" (take-all)" if self.take_all else "")]
            cut = dataclasses.replace(frame, stratum=stratum_codes(x, b), stratum_labels=tuple(labels),
                                      roles={**frame.roles, "stratum": f"{col} bands"})
            held = self._cache[key] = (frame, cut)
        return held[1]

    def check(self, frame):
        n = self._positive_int("n", self.n)
        self.check_cut(frame)
        cut = self.strata_frame(frame)
        if self.take_all and n < int(cut.N_h[-1]) + 2 * (cut.H - 1):
            raise InputError(f"design {self.label!r}: n = {n} cannot take the {int(cut.N_h[-1])} units of the "
                             f"take-all stratum whole and give each of the other {cut.H - 1} strata 2 units "
                             f"(needs n >= {int(cut.N_h[-1]) + 2 * (cut.H - 1)})")
        if self.allocation not in RULES:
            raise InputError(f"design {self.label!r}: allocation {self.allocation!r} is not known "
                             f"(use one of: {', '.join(RULES)})")
        if cut.H < 2 and cut.roles.get("stratum") is None:
            raise InputError(f"design {self.label!r} (stratified) needs a stratum column: "
                             f"set stratum = \"column\" in [frame], or boundaries on a numeric column")
        if self.allocation_variable is not None and self.allocation_variable not in frame.variables:
            raise InputError(f"design {self.label!r}: allocation_variable {self.allocation_variable!r} "
                             f"is not a target ({', '.join(frame.variables)})")
        single = np.flatnonzero(cut.N_h < 2)
        if single.size:
            names = ", ".join(repr(str(cut.stratum_labels[h])) for h in single[:5])
            raise InputError(f"design {self.label!r}: stratum {names} has only one unit, so its variance "
                             f"cannot be estimated; merge it with a neighbouring stratum in column "
                             f"{cut.roles.get('stratum')!r}")
        try:
            n_h = self.n_h(frame)
        except InputError as exc:
            raise InputError(f"design {self.label!r}: {exc}") from None
        if n > frame.N:
            raise InputError(f"design {self.label!r}: n = {n} is more than the {frame.N} units in the frame")
        over = np.flatnonzero(n_h > cut.N_h)
        if over.size:  # allocate() caps at N_h; this guards any rule that does not
            h = over[0]
            raise InputError(f"design {self.label!r}: allocation {self.allocation!r} gives stratum "
                             f"{str(cut.stratum_labels[h])!r} {int(n_h[h])} units but it has only "
                             f"{int(cut.N_h[h])}")
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
        """Units drawn in each stratum (of :meth:`strata_frame`)."""
        key = id(frame)
        if key not in self._cache:
            frame = self.strata_frame(frame)
            v = 0 if self.allocation_variable is None else frame.variables.index(self.allocation_variable)
            S_h = np.sqrt(frame.stratum_S2()[:, v])
            c_h = self.stratum_unit_costs(frame) if self.allocation == "optimal" else None
            if self.take_all:  # the top stratum whole, the rest of n over the others
                top = int(frame.N_h[-1])
                rest = allocate(int(self.n) - top, self.allocation, frame.N_h[:-1], S_h[:-1],
                                None if c_h is None else c_h[:-1], labels=frame.stratum_labels[:-1])
                self._cache[key] = np.append(rest, top)
            else:
                self._cache[key] = allocate(int(self.n), self.allocation, frame.N_h, S_h, c_h,
                                            labels=frame.stratum_labels)
        return self._cache[key]

    def _draw(self, frame, rng, B, keep_units):
        n_h = self.n_h(frame)
        frame = self.strata_frame(frame)
        N_h = frame.N_h
        strata = np.flatnonzero(n_h)
        pos = np.empty((B, int(n_h.sum())), dtype=np.int64)  # positions in the stratum-grouped order
        at = 0
        for h in strata:
            k = int(n_h[h])
            np.add(distinct_positions(rng, N_h[h], k, (B,), narrow=True), frame.strata_offsets[h],
                   out=pos[:, at:at + k])
            at += k
        units = np.take(frame.strata_units, pos) if keep_units else None
        psu_stratum = np.repeat(strata, n_h[strata])
        return SampleBlock(
            sums=frame.gather_in_strata(pos, fill=False),
            weight=(N_h / np.maximum(n_h, 1))[psu_stratum],
            psu_stratum=psu_stratum,
            fpc=1.0 - n_h / N_h,
            clusters=np.zeros(B),
            strata=int((n_h > 0).sum()),
            units=units if keep_units else None,
        ).deferring(frame.unfilled)

    # ------------------------------------------------------------ exact mode
    def count_samples(self, frame):
        return math.prod(math.comb(N, k) for N, k in self._sampled_strata(frame))

    def count_formula(self, frame):
        parts = self._sampled_strata(frame)
        shown = " x ".join(f"C({N}, {k})" for N, k in parts[:4]) + (" x ..." if len(parts) > 4 else "")
        return f"prod_h C(N_h, n_h) = {shown}"

    def _sampled_strata(self, frame):
        return [(int(N), int(k)) for N, k in zip(self.strata_frame(frame).N_h, self.n_h(frame)) if k > 0]

    def enumerate(self, frame, chunk=20_000):
        """Every combination of one n_h-subset per stratum, each equally likely."""
        n_h = self.n_h(frame)
        frame = self.strata_frame(frame)
        N_h = frame.N_h
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
        cut = self.strata_frame(frame)
        return (self.n_h(frame) / cut.N_h)[cut.stratum]

    def expected_n(self, frame):
        return float(self.n_h(frame).sum())

    def stratum_allocation(self, frame):
        return self.strata_frame(frame).N_h, self.n_h(frame)
