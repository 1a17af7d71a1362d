"""Field cost of a sample: fixed, per unit, per cluster visited, per stratum set up.

Per-unit costs may differ by stratum (``[cost.per_unit_by_stratum]``) and the frame may add
each unit's own cost (its ``unit_cost`` column) and each cluster's own cost (its
``cluster_cost`` column, e.g. travel to a remote site), paid once for every cluster a sample
visits.  Every replicate's cost is computed from its own sample, so designs whose size or
cluster set varies from sample to sample get a cost distribution, not a single number.

To add a new rate (say a cost per attempted unit), add a float field here, its name to
``SCALAR_KEYS`` in config/costs.py (the scenario then accepts and checks it), and its term to
:meth:`CostModel.replicate_cost`.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from samplewright.config.validate import closest
from samplewright.designs.block import SampleBlock
from samplewright.errors import InputError
from samplewright.estimation.estimators import sample_units, sampled_unit_cost

#: marker in ``Frame.roles`` of a frame whose unit-cost column holds the stratum rates
BOUND = "stratum_unit_rates"


@dataclass(frozen=True)
class CostModel:
    """Linear cost model; every replicate's cost is computed from its own sample.

    cost = fixed + sum over sampled units of (rate_h + unit_cost_k)
           + per_cluster * clusters visited + sum over visited clusters of cluster_cost_c
           + per_stratum * strata set up

    where rate_h is ``per_unit_by_stratum[h]`` for a stratum listed there and ``per_unit``
    otherwise.  Designs that select clusters (``cluster``) visit the clusters they select;
    designs that select units directly visit no cluster, unless ``charge_touched_clusters``
    is true: then they pay for every distinct cluster their sample touches (a field team
    must still travel to each).

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from samplewright import Frame
    >>> from samplewright.designs import SRS
    >>> f = Frame.from_dataframe(pd.DataFrame({"y": [1.0, 2, 3, 4], "zone": ["a", "a", "b", "b"]}),
    ...                          target="y", stratum="zone")
    >>> cm = CostModel(fixed=100.0, per_unit=10.0, per_unit_by_stratum=(("b", 25.0),))
    >>> cm.stratum_unit_costs(f).tolist()
    [10.0, 25.0]
    >>> bound = cm.bind(f)
    >>> blk = SRS("all", n=4).draw(bound, np.random.default_rng(0), B=1)
    >>> cm.replicate_cost(blk, bound).tolist()   # 100 + 2 x 10 + 2 x 25
    [170.0]
    """

    fixed: float = 0.0
    per_unit: float = 0.0
    per_cluster: float = 0.0
    per_stratum: float = 0.0
    per_unit_by_stratum: tuple[tuple[str, float], ...] = ()
    charge_touched_clusters: bool = False
    #: fieldwork (fieldwork.py): per selected unit visited, and per unit that completes the interview
    per_attempt: float = 0.0
    per_complete: float = 0.0

    # ------------------------------------------------------------ per-stratum rates
    def check(self, frame) -> None:
        """Refuse stratum labels of ``per_unit_by_stratum`` the frame does not have."""
        if not self.per_unit_by_stratum:
            return
        if frame.roles.get("stratum") is None:
            raise InputError("[cost.per_unit_by_stratum] gives costs by stratum but the frame has no stratum "
                             "column (set stratum = \"column\" in [frame])")
        labels = [str(x) for x in frame.stratum_labels]
        for label, _ in self.per_unit_by_stratum:
            if str(label) not in labels:
                raise InputError(f"[cost.per_unit_by_stratum]: stratum {label!r} is not in the frame's "
                                 f"stratum column {frame.roles.get('stratum')!r}{closest(str(label), labels)}")

    def unit_rates(self, frame) -> np.ndarray:
        """Per-unit rate of each stratum (``per_unit_by_stratum`` or ``per_unit``), shape (H,)."""
        rates = np.full(frame.H, float(self.per_unit))
        given = {str(k): float(v) for k, v in self.per_unit_by_stratum}
        for h, label in enumerate(frame.stratum_labels):
            if str(label) in given:
                rates[h] = given[str(label)]
        return rates

    def stratum_unit_costs(self, frame) -> np.ndarray:
        """Mean cost of one more unit in each stratum: its rate plus the mean of the frame's unit_cost.

        This is c_h of the cost-optimal allocation (Cochran 1977, sec. 5.5).  A bound frame
        (see :meth:`bind`) already holds the stratum rates in its cost column, so they are not
        counted twice.
        """
        col = np.zeros(frame.N) if frame.unit_cost is None else np.asarray(frame.unit_cost, dtype=float)
        mean_col = np.bincount(frame.stratum, weights=col, minlength=frame.H) / np.maximum(frame.N_h, 1)
        if frame.roles.get(BOUND) is not None:
            return float(self.per_unit) + mean_col
        return self.unit_rates(frame) + mean_col

    def bind(self, frame):
        """The frame with each unit's stratum rate (beyond ``per_unit``) added to its cost column.

        Per-replicate costs then come from one gather of the value columns, as for every
        other design quantity.  A frame without stratum rates is returned unchanged.
        """
        self.check(frame)
        if not self.per_unit_by_stratum or frame.roles.get(BOUND) is not None:
            return frame
        rates = self.unit_rates(frame)
        extra = (rates - float(self.per_unit))[frame.stratum]
        base = np.zeros(frame.N) if frame.unit_cost is None else np.asarray(frame.unit_cost, dtype=float)
        roles = {**frame.roles, BOUND: {str(lab): float(r) for lab, r in zip(frame.stratum_labels, rates)}}
        return dataclasses.replace(frame, unit_cost=base + extra, roles=roles)

    def for_design(self, design, frame):
        """The design, given this model's stratum unit costs when it allocates by cost and has none."""
        if getattr(design, "allocation", None) == "optimal" and getattr(design, "stratum_costs", 0) is None:
            # the rates by the frame's own strata, carried unit by unit into the design's strata
            c = self.stratum_unit_costs(design.strata_frame(self.bind(frame)))
            if np.any(c > 0):
                return design.with_params(stratum_costs=tuple(float(x) for x in c))
        return design

    # ------------------------------------------------------------ per-replicate cost
    def needs_units(self, design) -> bool:
        """Whether a block must keep its unit indices (to find the clusters a unit sample touches)."""
        return self.charge_touched_clusters and getattr(design, "size_key", "n") != "clusters"

    def replicate_cost(self, block: SampleBlock, frame=None, completed=None, n=None) -> np.ndarray:
        """Cost of each replicate in the block, shape (B,).

        ``frame`` (bound with :meth:`bind` when the model has stratum rates) is needed for the
        stratum rates and for the clusters a unit sample touches.  ``per_attempt`` is paid for
        every sampled unit and ``per_complete`` for every unit in ``completed`` (B,), the units
        that responded (default: all sampled units, i.e. full response).  ``n`` (B,), when the caller has
        it, is the block's :func:`~samplewright.estimation.estimators.sample_units`, not counted again.
        """
        if self.per_unit_by_stratum and frame is not None and frame.roles.get(BOUND) is None:
            raise ValueError("per_unit_by_stratum needs the frame bound with CostModel.bind")
        n = sample_units(block) if n is None else n
        clusters = np.asarray(block.clusters, dtype=float)
        visited = np.zeros(block.B) if getattr(block, "cluster_cost", None) is None else block.cluster_cost
        if self.charge_touched_clusters and frame is not None and frame.cluster is not None \
                and not np.any(clusters) and isinstance(block.units, np.ndarray):
            clusters, visited = touched_clusters(frame, block.units)
        done = n if completed is None else completed
        return (self.fixed + self.per_unit * n + self.per_cluster * clusters
                + self.per_stratum * block.strata + sampled_unit_cost(block) + visited
                + self.per_attempt * n + self.per_complete * done)


def touched_clusters(frame, units: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distinct clusters among each replicate's sampled units, and the sum of their cluster costs.

    ``units`` is (B, n) with -1 marking empty positions; returns two (B,) arrays.
    """
    units = np.asarray(units).reshape(units.shape[0], -1)
    valid = units >= 0
    codes = np.where(valid, frame.cluster[np.where(valid, units, 0)], -1)
    codes = np.sort(codes, axis=1)
    first = codes >= 0
    first[:, 1:] &= codes[:, 1:] != codes[:, :-1]
    count = first.sum(axis=1).astype(float)
    if frame.cluster_cost is None:
        return count, np.zeros(units.shape[0])
    return count, np.where(first, frame.cluster_cost[np.maximum(codes, 0)], 0.0).sum(axis=1)
