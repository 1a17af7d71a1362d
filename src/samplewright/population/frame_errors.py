"""Frame errors: the list the designs draw from is not the population.

``[frame_error]`` turns the true population into a *listed* frame:

- ``undercoverage``: a share of the population is absent from the list, chosen at random
  among all units, among one stratum's units (``undercoverage_stratum``) or among the
  units whose column value is one of ``undercoverage_values`` (``undercoverage_column``).
- ``duplicates``: a share of the listed units appears twice (their selection
  probability doubles, while the design weights still count them once per listing).
- ``ineligible``: entries that are not in the population (closed premises, demolished
  homes), as a share of the true population size.  They copy the stratum, cluster, size
  and cost of a random listed unit; a selected one is visited, costs an attempt, is found
  ineligible and is excluded from estimation.

Counts are ``round(share x eligible pool)`` units chosen by simple random sampling from a
Generator seeded by the run's seed, so a scenario always lists the same frame.  The
truth the evaluator and the ``--until`` stopping rule score against stays the true
population's mean (``FieldSetup.truth``), never the listed frame's.

Closed forms (used by the tests): for under-coverage of a set U of the population with
share W_u, a census of the list has mean Ybar_c, and
Ybar_c - Ybar = W_u (Ybar_c - Ybar_u), since Ybar = (1 - W_u) Ybar_c + W_u Ybar_u (the
coverage bias of a census of the list).  With listing multiplicities d_k, the HT mean t / N_list estimates
sum_k d_k y_k / sum_k d_k.
"""

from __future__ import annotations

import zlib
from dataclasses import dataclass

import numpy as np

from samplewright.config.validate import as_float, as_str, check_keys, closest
from samplewright.errors import InputError
from samplewright.population.frame import Frame

KEYS = ("undercoverage", "undercoverage_stratum", "undercoverage_column", "undercoverage_values",
        "duplicates", "ineligible")
SEED_KEY = zlib.crc32(b"frame-errors")


@dataclass(frozen=True)
class FrameErrorSpec:
    """A validated ``[frame_error]`` table (shares of the population, see module notes)."""

    undercoverage: float = 0.0
    undercoverage_stratum: str | None = None
    undercoverage_column: str | None = None
    undercoverage_values: tuple = ()
    duplicates: float = 0.0
    ineligible: float = 0.0

    def columns(self) -> tuple[str, ...]:
        return (self.undercoverage_column,) if self.undercoverage_column else ()

    def describe(self) -> dict:
        return {k: (list(v) if isinstance(v, tuple) else v) for k, v in self.__dict__.items()}


def frame_error_from_dict(table: dict, ctx: str = "[frame_error]") -> FrameErrorSpec:
    """Check a ``[frame_error]`` table; refusals name the key at fault."""
    check_keys(table, KEYS, ctx)
    kw = {}
    for k in ("undercoverage", "duplicates"):
        if k in table:
            kw[k] = as_float(table[k], k, ctx, minimum=0.0, maximum=1.0)
    if "undercoverage" in kw and kw["undercoverage"] >= 1.0 and not (
            "undercoverage_stratum" in table or "undercoverage_column" in table):
        raise InputError(f"{ctx}: undercoverage = 1 would leave nothing on the list")
    if "ineligible" in table:
        kw["ineligible"] = as_float(table["ineligible"], "ineligible", ctx, minimum=0.0, maximum=10.0)
    if "undercoverage_stratum" in table:
        kw["undercoverage_stratum"] = str(table["undercoverage_stratum"])
    if "undercoverage_column" in table:
        kw["undercoverage_column"] = as_str(table["undercoverage_column"], "undercoverage_column", ctx)
        vals = table.get("undercoverage_values")
        if not isinstance(vals, list) or not vals:
            raise InputError(f"{ctx}: undercoverage_column needs undercoverage_values = [value, ...] "
                             f"(the values whose units may be missing from the list)")
        kw["undercoverage_values"] = tuple(vals)
    elif "undercoverage_values" in table:
        raise InputError(f"{ctx}: undercoverage_values needs undercoverage_column = \"column\"")
    if "undercoverage_stratum" in kw and "undercoverage_column" in kw:
        raise InputError(f"{ctx}: give undercoverage_stratum or undercoverage_column, not both")
    if kw.get("undercoverage", 0.0) == 0.0 and ("undercoverage_stratum" in kw or "undercoverage_column" in kw):
        raise InputError(f"{ctx}: undercoverage_stratum / undercoverage_column need undercoverage = a share "
                         f"above 0")
    return FrameErrorSpec(**kw)


@dataclass(frozen=True, eq=False)
class ListedFrame:
    """The listed frame, and for each listing its true unit (-1: ineligible) and eligibility."""

    frame: Frame
    source: np.ndarray  # (N_list,) index of the true unit behind each listing (donor for ineligibles)
    eligible: np.ndarray  # (N_list,) bool
    counts: dict  # units missing, duplicated, ineligible entries


def list_frame(true: Frame, spec: FrameErrorSpec, seed: int, columns: dict | None = None) -> ListedFrame:
    """Build the listed frame from the true population ``true`` under ``spec``.

    ``columns`` maps a column name to an array over the true units (for
    ``undercoverage_column``); ``seed`` is the run's seed.

    Examples
    --------
    >>> import pandas as pd
    >>> f = Frame.from_dataframe(pd.DataFrame({"y": [1.0, 2.0, 3.0, 4.0]}), target="y")
    >>> lf = list_frame(f, FrameErrorSpec(duplicates=0.5), seed=1)
    >>> lf.frame.N, int(lf.eligible.sum())
    (6, 6)
    """
    rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(SEED_KEY,)))
    N = true.N
    pool = np.ones(N, dtype=bool)
    if spec.undercoverage_stratum is not None:
        labels = [str(x) for x in true.stratum_labels]
        if spec.undercoverage_stratum not in labels:
            raise InputError(f"[frame_error] undercoverage_stratum {spec.undercoverage_stratum!r} is not a "
                             f"stratum of the frame{closest(spec.undercoverage_stratum, labels)}")
        pool = true.stratum == labels.index(spec.undercoverage_stratum)
    elif spec.undercoverage_column is not None:
        col = np.asarray(columns[spec.undercoverage_column])
        pool = np.isin(col, np.asarray(spec.undercoverage_values, dtype=col.dtype if col.dtype != object
                                       else object))
        if not pool.any():
            raise InputError(f"[frame_error] undercoverage_values {list(spec.undercoverage_values)!r}: no unit "
                             f"has those values in column {spec.undercoverage_column!r}")
    cand = np.flatnonzero(pool)
    k_miss = round(spec.undercoverage * cand.size)
    covered = np.ones(N, dtype=bool)
    if k_miss:
        covered[cand[rng.choice(cand.size, k_miss, replace=False)]] = False
    kept = np.flatnonzero(covered)
    if kept.size == 0:
        raise InputError("[frame_error]: the under-coverage leaves no unit on the list")
    k_dup = round(spec.duplicates * kept.size)
    dup = kept[np.sort(rng.choice(kept.size, k_dup, replace=False))] if k_dup else np.zeros(0, np.int64)
    k_inel = round(spec.ineligible * N)
    donors = kept[rng.integers(0, kept.size, k_inel)] if k_inel else np.zeros(0, np.int64)
    source = np.concatenate([kept, dup, donors]).astype(np.int64)
    eligible = np.concatenate([np.ones(kept.size + k_dup, bool), np.zeros(k_inel, bool)])
    # list order: the true order of the kept units, extra listings at random places in it
    rank = np.empty(N)
    rank[true.order] = np.arange(N)
    keys = np.concatenate([rank[kept], rng.random(k_dup + k_inel) * N])
    order = np.argsort(keys, kind="stable").astype(np.int64)
    y = true.y[source].copy()
    y[~eligible] = 0.0  # never measured: an ineligible entry has no value in the population
    s_codes, s_uniq = _recode(true.stratum[source])
    cluster, c_labels, extra = None, (), _extra_columns(true, source)
    if true.cluster is not None:
        c_codes, c_uniq = _recode(true.cluster[source])
        cluster, c_labels = c_codes, tuple(true.cluster_labels[i] for i in c_uniq)
        if getattr(true, "cluster_cost", None) is not None:
            extra["cluster_cost"] = true.cluster_cost[c_uniq]
    sort_orders = getattr(true, "sort_orders", None)
    if sort_orders:  # a listing takes its unit's place in every sorted order (duplicates side by side)
        ranks = {}
        for col, so in sort_orders.items():
            r = np.empty(N)
            r[so] = np.arange(N)
            ranks[col] = np.argsort(r[source], kind="stable").astype(np.int64)
        extra["sort_orders"] = ranks
    frame = Frame(
        variables=true.variables, y=y, stratum=s_codes,
        stratum_labels=tuple(true.stratum_labels[i] for i in s_uniq),
        cluster=cluster, cluster_labels=c_labels,
        size=None if true.size is None else true.size[source],
        order=order,
        unit_cost=None if true.unit_cost is None else true.unit_cost[source],
        roles=dict(true.roles),
        **extra,
    )
    counts = {"population_units": N, "listed_units": int(source.size), "missing_units": int(k_miss),
              "duplicated_units": int(k_dup), "ineligible_entries": int(k_inel)}
    return ListedFrame(frame=frame, source=source, eligible=eligible, counts=counts)


def _extra_columns(true: Frame, source: np.ndarray) -> dict:
    """The frame's auxiliary, post-stratum and domain columns, carried to the listings."""
    out = {}
    for name, labels in (("aux", "aux_names"), ("poststratum", "poststratum_labels"), ("domain", "domain_labels")):
        arr = getattr(true, name, None)
        if arr is not None:
            out[name] = arr[source]
            out[labels] = getattr(true, labels)
    if out.get("domain") is not None:
        out["domain_keep"] = getattr(true, "domain_keep", None)
    return out


def _recode(codes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    uniq, inv = np.unique(codes, return_inverse=True)
    return inv.astype(np.int64), uniq
