"""The one thing every design hands to the estimators: a block of replicate samples.

Whatever the selection rule, a sample is expressed as primary sampling units (PSUs) within
strata: for SRS each unit is a PSU in a single stratum; for a stratified design units are
PSUs within strata; for cluster designs the clusters are the PSUs.  A block holds, for B
replicates at once, the unweighted sums over each PSU's sampled units of the frame's value
columns (study variables, a count, the unit cost) and the expansion weight that turns a
PSU sum into an estimated PSU total.  One variance routine then serves every design.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np


@dataclass
class SampleBlock:
    """B replicate samples of one design, as dense arrays.

    Attributes
    ----------
    sums : (B, m, K) array
        Unweighted sums over each PSU's sampled units of ``Frame.values`` columns.
    weight : (B, m) or (m,) array
        Expansion weight of each PSU sum (inverse inclusion probability of its units, for
        designs where all sampled units of a PSU share one weight).
    psu_stratum : (m,) int array
        Design stratum of each PSU position (the same for every replicate).
    fpc : (H,) array
        First-stage finite population correction ``1 - f_h`` per design stratum
        (1 for with-replacement selection).
    clusters : (B,) array
        Clusters visited per replicate (0 for designs that select units directly).
    strata : int
        Strata set up in the field (for the per-stratum cost); 0 for a design that does
        not stratify.
    mask : (B, m) bool array or None
        True where a PSU position holds a real PSU (designs with a random sample size).
    units : (B, n) int array or None
        The sampled unit indices, kept only when asked for (tests, exact mode).
    variance : str
        Name of the variance estimator this view of the block is scored with (see
        ``estimation.registry.VARIANCE_FORMULAS``); a design draws its block viewed with the first
        formula it lists.
    variants : dict or None
        Every formula the design lists (in its order), each with the fields its view sets
        (``{name: {field: value}}``; every name sets the same fields): see :meth:`with_variance`.
        None: the block has the one formula ``variance`` and no per-formula fields.
    design_info : dict or None
        Design constants a variance routine needs beyond the block (for example the
        population sum of squared inclusion probabilities, or exact joint probabilities).
    cluster_cost : (B,) array or None
        Sum of the frame's ``cluster_cost`` over the clusters each replicate visits (designs
        that select clusters, on a frame with that column; see ``designs.cluster``).
    psu : (m,) int array or None
        Two-stage designs, whose positions are the sampled second-stage units: the cluster slot
        (0, 1, ..., in order) of each position; ``psu_stratum`` and ``fpc`` then describe the
        first stage (see ``two_stage_variance``).  Also a systematic block seen by the
        between-start formula: the random start of each unit.
    within_fpc : (B, S) array or None
        With ``psu``: each slot's factor for its within-cluster variance term.
    list_order : (B, m) int array or None
        Where the positions are not in list order and a listed formula needs neighbours along the
        list (successive differences): each replicate's positions in list order.

    Constant columns may be left unwritten by the design (:meth:`deferring`, for a frame column
    that holds one value throughout, such as the count column): ``sums`` writes them on first
    read, so every reader sees the same numbers as a full gather, while :meth:`column_total` and
    :meth:`weighted` of other columns never write them.
    """

    sums: np.ndarray
    weight: np.ndarray
    psu_stratum: np.ndarray
    fpc: np.ndarray
    clusters: np.ndarray
    strata: int = 0
    mask: np.ndarray | None = None
    units: np.ndarray | None = None
    variance: str = "psu"
    design_info: dict | None = None
    cluster_cost: np.ndarray | None = None
    psu: np.ndarray | None = None
    within_fpc: np.ndarray | None = None
    variants: dict | None = None
    list_order: np.ndarray | None = None

    @property
    def B(self) -> int:
        return int(self._raw.shape[0])

    @property
    def _raw(self) -> np.ndarray:
        """``sums`` as held, pending columns unwritten."""
        return self.__dict__["_sums"]

    def deferring(self, pending: dict) -> SampleBlock:
        """This block, told that the columns ``pending`` (column -> its one value) of ``sums`` are not written
        yet (see ``Frame.gather(..., fill=False)``); returns the block itself."""
        self.__dict__["_pending"] = dict(pending) or None
        return self

    def replaced(self, **changes) -> SampleBlock:
        """``dataclasses.replace(self, **changes)``, keeping pending columns unwritten when ``sums`` is kept."""
        pending = self.__dict__.get("_pending")
        if not pending or "sums" in changes:
            return dataclasses.replace(self, **changes)
        return dataclasses.replace(self, sums=self._raw, **changes).deferring(pending)

    def column_total(self, column: int) -> np.ndarray:
        """Unweighted sum of the value column ``column`` (counted from the end when negative) over each
        replicate's real PSU positions, shape (B,).

        A pending column whose one value is a whole number (so every partial sum is exact) is totalled
        from the count of positions, without writing or reading it: the same numbers as the sum.
        """
        raw = self._raw
        j = column % raw.shape[-1]
        c = (self.__dict__.get("_pending") or {}).get(j)
        if c is not None and _whole(c, raw.shape[1]):
            if self.mask is None:
                return np.full(raw.shape[0], float(raw.shape[1]) * c)
            return self.mask.sum(axis=1) * c
        col = self.sums[..., column]
        if self.mask is not None:
            col = np.where(self.mask, col, 0.0)
        return col.sum(axis=1)

    @property
    def H(self) -> int:
        return int(self.fpc.shape[-1])

    @property
    def variances(self) -> tuple[str, ...]:
        """The variance formulas this block can be scored with, the design's default first."""
        return (self.variance,) if self.variants is None else tuple(self.variants)

    def with_variance(self, name: str) -> SampleBlock:
        """The same draw viewed with variance formula ``name`` (one the design listed).

        Only the fields a formula reads beyond the draw change (``variants[name]``: the
        first-stage correction, within-cluster factors, the PSU grouping); the sums, weights and
        mask are shared, so every formula's point estimates are the same numbers.
        """
        if name == self.variance:
            return self
        if name not in self.variances:
            raise ValueError(f"variance formula {name!r} is not one of this block's {self.variances}")
        return self.replaced(variance=name, **self.variants[name])

    def replicates(self, rows: slice, sums: np.ndarray | None = None) -> SampleBlock:
        """The block of replicates ``rows`` only (every per-replicate field sliced, each listed variance
        formula's too), with ``sums`` in place of its own when given; the design constants are shared.

        Examples
        --------
        >>> b = SampleBlock(sums=np.arange(12.0).reshape(3, 2, 2), weight=np.ones(2), psu_stratum=np.zeros(2, int),
        ...                 fpc=np.ones(1), clusters=np.array([0.0, 1.0, 2.0]))
        >>> part = b.replicates(slice(1, 3))
        >>> part.B, part.clusters.tolist()
        (2, [1.0, 2.0])
        """
        def cut(a):
            return None if a is None else a[rows]

        variants = None if self.variants is None else {
            name: {k: cut(v) if k == "within_fpc" else v for k, v in fields.items()}
            for name, fields in self.variants.items()}
        return dataclasses.replace(
            self, sums=self.sums[rows] if sums is None else sums,
            weight=self.weight[rows] if np.ndim(self.weight) == 2 else self.weight,
            clusters=self.clusters[rows], mask=cut(self.mask),
            units=self.units[rows] if isinstance(self.units, np.ndarray) else cut(self.units),
            cluster_cost=cut(self.cluster_cost), within_fpc=cut(self.within_fpc), list_order=cut(self.list_order),
            variants=variants)

    def weighted(self, columns: slice | None = None) -> np.ndarray:
        """Estimated PSU totals of every value column (or of ``columns`` only), shape (B, m, K)."""
        pending = self.__dict__.get("_pending")
        if columns is None or (pending and any(j in pending for j in range(self._raw.shape[-1])[columns])):
            sums = self.sums if columns is None else self.sums[..., columns]
        else:  # columns already written: read as held
            sums = self._raw[..., columns]
        w = self.weight
        z = sums * w[..., None]  # (m,) or (B, m) weights broadcast over replicates and columns
        if self.mask is not None:
            z = np.where(self.mask[..., None], z, 0.0)
        return z


def _sums(self) -> np.ndarray:
    pending = self.__dict__.get("_pending")
    raw = self.__dict__["_sums"]
    if pending:
        for j, c in pending.items():
            raw[..., j].fill(c)
        self.__dict__["_pending"] = None
    return raw


def _set_sums(self, value: np.ndarray) -> None:
    self.__dict__["_sums"] = value
    self.__dict__["_pending"] = None


#: ``SampleBlock.sums`` as a property (set after the dataclass is made, so ``sums`` stays its first
#: field): reading it writes any pending constant columns first (see ``SampleBlock.deferring``)
SampleBlock.sums = property(_sums, _set_sums, doc="(B, m, K) unweighted sums of the value columns over each PSU")


def _whole(c: float, m: int) -> bool:
    """Whether m copies of ``c`` add up exactly in any order: a whole number (not -0.0) with m |c| < 2^53."""
    return float(c).is_integer() and abs(c) * m < 2.0**53 and not (c == 0 and np.signbit(c))
