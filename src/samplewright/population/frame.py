"""The population frame: numpy arrays per role and the exact population truths.

A `Frame` is built once at the boundary (from a file or a DataFrame), checked there, and
then trusted by every design and estimator.  Nothing in the replicate loop touches pandas.

Value columns
-------------
Designs gather rows of ``Frame.values``, an ``(N, V + 2)`` array whose columns are the V
study variables, a column of ones (so a gathered sum counts units) and the unit cost (zero
where the frame has none).  One gather then yields estimated totals, sample sizes and the
variable part of the field cost together.  Auxiliary, post-stratum and domain columns, when
the frame has them, sit between the study variables and the count column (``layout.py``
records where), so COUNT and COST are always indexed from the end.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field, fields
from functools import cached_property

import numpy as np
import pandas as pd

from samplewright.errors import InputError
from samplewright.population.layout import Layout
from samplewright.population.layout import build as build_layout
from samplewright.population.reading import label_columns, read_table

#: index of the "ones" column and of the unit-cost column, counted from the end of ``values``
COUNT = -2
COST = -1


def _constant_columns(values: np.ndarray) -> dict[int, float]:
    """Columns of ``values`` that hold one value throughout (the ones column; a cost column of zeros)."""
    if values.shape[0] == 0:
        return {}
    first = values[0]
    return {j: float(first[j]) for j in range(values.shape[1]) if np.all(values[:, j] == first[j])}


def _padded_rows(values: np.ndarray) -> np.ndarray:
    """``values`` with zero columns appended up to 2, 4 or 8 columns (unchanged if wider), row by row in
    memory (np.take along rows copies a table stored otherwise before every gather)."""
    k = values.shape[1]
    width = next((w for w in (2, 4, 8) if w >= k), k)
    if width == k:
        return np.ascontiguousarray(values)
    out = np.zeros((values.shape[0], width))
    out[:, :k] = values
    return out


def _group_index(codes: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """Units sorted by group (stable) and the offsets of each group's run (length k + 1)."""
    if codes.size < 2 or np.all(codes[1:] >= codes[:-1]):  # already grouped: the stable order is the list order
        idx = np.arange(codes.size, dtype=np.int64)
    else:  # codes that fit 8 or 16 bits are sorted by radix, in linear time (fewer passes for 8 bits)
        small = np.uint8 if k <= 1 << 8 else np.uint16 if k <= 1 << 16 else None
        idx = np.argsort(codes if small is None else codes.astype(small), kind="stable").astype(np.int64, copy=False)
    counts = np.bincount(codes, minlength=k)
    offsets = np.zeros(k + 1, dtype=np.int64)
    np.cumsum(counts, out=offsets[1:])
    return idx, offsets


def _group_sums(codes: np.ndarray, values: np.ndarray, k: int) -> np.ndarray:
    """``(k, K)`` sums of the columns of ``values`` by group code, each group's units added in list order."""
    out = np.empty((k, values.shape[1]))
    for j in range(values.shape[1]):
        out[:, j] = np.bincount(codes, weights=values[:, j], minlength=k)
    return out


def srs_variance_of_mean(n: float, N: int, S2):
    """Exact variance of the SRS-without-replacement mean at sample size n, (1 - n / N) S^2 / n
    (Cochran 1977, eq. 2.8): the reference of the design effect."""
    return (1.0 - n / N) * S2 / n


@dataclass(frozen=True, eq=False)
class Frame:
    """A population frame held as arrays, with its structure precomputed.

    Build it with :meth:`Frame.from_dataframe` or :meth:`Frame.load`.

    Examples
    --------
    >>> import pandas as pd
    >>> df = pd.DataFrame({"y": [1.0, 2.0, 3.0, 4.0], "band": ["a", "a", "b", "b"]})
    >>> f = Frame.from_dataframe(df, target="y", stratum="band")
    >>> f.N, f.H, float(f.mean[0])
    (4, 2, 2.5)
    """

    variables: tuple[str, ...]
    y: np.ndarray  # (N, V) study variables
    stratum: np.ndarray  # (N,) codes 0..H-1 (all zero when the frame has no strata)
    stratum_labels: tuple
    cluster: np.ndarray | None = None  # (N,) codes 0..C-1
    cluster_labels: tuple = ()
    size: np.ndarray | None = None  # (N,) size measure
    order: np.ndarray | None = None  # (N,) unit indices in list order
    unit_cost: np.ndarray | None = None  # (N,)
    roles: dict = field(default_factory=dict)  # role -> column name, for reports
    sort_orders: dict = field(default_factory=dict)  # sort key column -> (N,) unit indices sorted by it
    # auxiliary data for the ratio, GREG and post-stratified estimators, and domains (see layout.py)
    aux: np.ndarray | None = None  # (N, A) auxiliary variables, population totals known
    aux_names: tuple = ()
    poststratum: np.ndarray | None = None  # (N,) codes 0..P-1
    poststratum_labels: tuple = ()
    domain: np.ndarray | None = None  # (N,) codes 0..D-1
    domain_labels: tuple = ()
    domain_keep: tuple | None = None  # codes of the domains to report (default: all)
    cluster_cost: np.ndarray | None = None  # (C,) cost of visiting each cluster (cost.py)
    # derived, filled in __post_init__
    values: np.ndarray = field(init=False, repr=False)
    layout: Layout = field(init=False, repr=False)  # positions of the extra value columns
    rows: np.ndarray | None = field(init=False, repr=False)  # values padded to a fast row width (see gather)
    column: np.ndarray | None = field(init=False, repr=False)  # the one varying column, contiguous (see gather)
    constants: dict = field(init=False, repr=False)  # column -> its single value
    strata_units: np.ndarray = field(init=False, repr=False)
    strata_offsets: np.ndarray = field(init=False, repr=False)
    cluster_units: np.ndarray | None = field(init=False, repr=False, default=None)
    cluster_offsets: np.ndarray | None = field(init=False, repr=False, default=None)
    cluster_sums: np.ndarray | None = field(init=False, repr=False, default=None)
    cluster_stratum: np.ndarray | None = field(init=False, repr=False, default=None)

    def __post_init__(self):
        y = np.ascontiguousarray(self.y, dtype=np.float64)
        if y.ndim == 1:
            y = y[:, None]
        n, v = y.shape
        extra, layout = build_layout(
            y, self.variables, self.aux, self.aux_names, self.poststratum, self.poststratum_labels,
            self.domain, self.domain_labels, self.roles.get("domain"), self.domain_keep)
        object.__setattr__(self, "layout", layout)
        # column-major, so each column (the one gathered, y of one variable) is a view, not a copy
        values = np.empty((n, v + extra.shape[1] + 2), order="F")
        values[:, :v] = y
        values[:, v:COUNT] = extra
        values[:, COUNT] = 1.0
        values[:, COST] = 0.0 if self.unit_cost is None else np.asarray(self.unit_cost, dtype=np.float64)
        object.__setattr__(self, "values", values)
        # one variable: y is the first column of values (an (N, 1) column is C-contiguous as well);
        # several: y keeps its own row-major copy, so sums over it add in the same order as ever
        object.__setattr__(self, "y", values[:, :1] if v == 1 else y)
        del y
        constants = _constant_columns(values)
        varying = [j for j in range(values.shape[1]) if j not in constants]
        object.__setattr__(self, "constants", constants)
        if len(varying) == 1:  # one study variable, no unit cost: gather one column, fill the rest
            object.__setattr__(self, "column", values[:, varying[0]])  # contiguous: values is column-major
            object.__setattr__(self, "rows", None)
        else:
            object.__setattr__(self, "column", None)
            object.__setattr__(self, "rows", _padded_rows(values))
        if self.order is None:
            object.__setattr__(self, "order", np.arange(n, dtype=np.int64))
        su, so = _group_index(self.stratum, self.H)
        object.__setattr__(self, "strata_units", su)
        object.__setattr__(self, "strata_offsets", so)
        if self.cluster is not None:
            c = len(self.cluster_labels)
            cu, co = _group_index(self.cluster, c)
            object.__setattr__(self, "cluster_units", cu)
            object.__setattr__(self, "cluster_offsets", co)
            object.__setattr__(self, "cluster_sums", _group_sums(self.cluster, values, c))
            cs = np.zeros(c, dtype=np.int64)
            cs[self.cluster] = self.stratum
            object.__setattr__(self, "cluster_stratum", cs)

    def numeric_column(self, name: str | None) -> np.ndarray | None:
        """The values of the size column or of the auxiliary column called ``name`` (None when it is neither):
        the numeric columns a design may cut into bands."""
        if name is not None and name == self.roles.get("size"):
            return self.size
        if name in self.aux_names:
            return self.aux[:, self.aux_names.index(name)]
        return None

    @property
    def numeric_names(self) -> list[str]:
        """The names :meth:`numeric_column` knows: the size column, then the auxiliary columns."""
        return [c for c in (self.roles.get("size"), *self.aux_names) if c]

    def gather(self, units: np.ndarray, fill: bool = True) -> np.ndarray:
        """Rows of ``values`` for an integer array of unit indices, shape ``units.shape + (K,)``.

        The same numbers as ``values[units]``, several times faster.  When all columns but
        one are constant (a single study variable and no unit cost), only that column is
        gathered and the constant columns are filled in, each as one contiguous run: the
        result is then a view, column by column in memory, of shape ``units.shape + (K,)``.
        Otherwise the rows are copied from a table padded to 16, 32 or 64 bytes, a width
        numpy copies without a per-row memmove (the result may be a strided view of it).

        ``fill=False`` leaves the columns of :meth:`unfilled` unwritten (their memory holds
        anything), for a caller that records them as pending (``SampleBlock.deferring``).
        """
        return self._take(self.column if self.column is not None else self.rows, units, fill)

    def gather_in_strata(self, pos: np.ndarray, fill: bool = True) -> np.ndarray:
        """``gather(strata_units[pos])`` for positions in the stratum-grouped unit order."""
        return self.gather_through(self.strata_units, pos, fill)

    def gather_through(self, index: np.ndarray, pos: np.ndarray, fill: bool = True) -> np.ndarray:
        """``gather(index[pos])``, for ``index`` one of the frame's own unit orders.

        The rows are read from a copy of the table permuted by ``index`` (built on first use
        and kept), so positions that increase along that order (within strata, along the
        list) read memory in increasing order instead of at random.
        """
        cache = self.__dict__.get("_permuted")
        if cache is None:
            cache = {}
            object.__setattr__(self, "_permuted", cache)
        table = cache.get(id(index))
        if table is None:
            source = self.column if self.column is not None else self.rows
            table = cache[id(index)] = np.take(source, index, axis=0)
        return self._take(table, pos, fill)

    @property
    def unfilled(self) -> dict:
        """The constant columns (column -> value) that ``gather(..., fill=False)`` leaves unwritten:
        every constant column when only one column is gathered, else none."""
        return dict(self.constants) if self.column is not None else {}

    def _take(self, source: np.ndarray, positions: np.ndarray, fill: bool = True) -> np.ndarray:
        """Rows ``positions`` of ``source`` (the one varying column, or the padded rows, in some
        unit order) as rows of ``values``: the constant columns filled in (unless ``fill`` is
        false), the padding cut off.  Each gather writes straight into the result
        (``np.take(..., out=)``; mode "wrap" reads every index in [-len, len) as plain indexing
        does, without the buffered copy of mode "raise")."""
        k = self.values.shape[1]
        positions = np.asarray(positions)
        if self.column is not None:
            out = np.empty((k,) + positions.shape)
            for j in range(k):
                if j not in self.constants:
                    np.take(source, positions, out=out[j], mode="wrap")
                elif fill:
                    out[j].fill(self.constants[j])
            return np.moveaxis(out, 0, -1)
        out = np.empty(positions.shape + source.shape[1:])
        np.take(source, positions, axis=0, out=out, mode="wrap")
        return out if out.shape[-1] == k else out[..., :k]

    @cached_property
    def content_hash(self) -> str:
        """SHA-256 of what the frame holds: every unit's values and codes, the labels and the
        column roles (not the file's name), computed once.  A resumed run refuses a frame whose
        hash differs from the one its blocks were drawn from (see :mod:`samplewright.simulation.checkpoint`)."""
        h = hashlib.sha256()
        for f in fields(self):
            if f.init:
                value = getattr(self, f.name)
                if f.name == "roles":
                    value = {k: v for k, v in value.items() if k != "source"}
                _digest(h, f.name, value)
        return h.hexdigest()

    # ----------------------------------------------------------------- sizes
    @property
    def N(self) -> int:
        return int(self.y.shape[0])

    @property
    def V(self) -> int:
        return int(self.y.shape[1])

    @property
    def H(self) -> int:
        return len(self.stratum_labels)

    @property
    def C(self) -> int:
        return len(self.cluster_labels)

    @property
    def N_h(self) -> np.ndarray:
        return np.diff(self.strata_offsets)

    @property
    def cluster_sizes(self) -> np.ndarray:
        if self.cluster_offsets is None:
            raise InputError("the frame has no cluster column")
        return np.diff(self.cluster_offsets)

    # ---------------------------------------------------------------- truths
    @property
    def total(self) -> np.ndarray:
        """Exact population total of each study variable, shape (V,)."""
        return self.y.sum(axis=0)

    @property
    def mean(self) -> np.ndarray:
        """Exact population mean of each study variable, shape (V,)."""
        return self.y.mean(axis=0)

    @property
    def S2(self) -> np.ndarray:
        """Population variance with divisor N - 1 (Cochran's S^2), shape (V,)."""
        return self.y.var(axis=0, ddof=1) if self.N > 1 else np.zeros(self.V)

    def stratum_means(self) -> np.ndarray:
        """Exact stratum means, shape (H, V)."""
        return _group_sums(self.stratum, self.y, self.H) / self.N_h[:, None]

    def stratum_S2(self) -> np.ndarray:
        """Stratum variances S_h^2 (divisor N_h - 1; zero for a one-unit stratum), shape (H, V)."""
        dev = self.y - self.stratum_means()[self.stratum]
        ss = _group_sums(self.stratum, dev**2, self.H)
        denom = np.maximum(self.N_h - 1, 1)[:, None]
        return ss / denom

    def srs_variance_of_mean(self, n: float) -> np.ndarray:
        """Exact variance of the SRS-without-replacement mean at sample size n, shape (V,)."""
        return srs_variance_of_mean(float(n), self.N, self.S2)

    # --------------------------------------------------------------- builders
    @classmethod
    def from_dataframe(
        cls,
        df: pd.DataFrame,
        target,
        stratum: str | None = None,
        cluster: str | None = None,
        size: str | None = None,
        order: str | None = None,
        unit_cost: str | None = None,
        id: str | None = None,
        sort_keys=None,
        missing: str = "refuse",
        source: str = "frame",
        auxiliary=None,
        poststratum: str | None = None,
        domain: str | None = None,
        domains=None,
        cluster_cost: str | None = None,
    ) -> Frame:
        """Bind the columns of ``df`` to roles, check them, and build a Frame.

        ``target`` is a column name or a list of names.  ``missing="drop"`` drops rows whose
        target values are missing or not finite (and says how many in ``Frame.roles``);
        the default refuses them.  ``auxiliary`` (a column or a list), ``poststratum``,
        ``domain`` and ``domains`` (the domain values to report) feed the estimators that use
        auxiliary data and the domain estimates (see :mod:`samplewright.population.layout`).
        """
        from samplewright.config.validate import auxiliary_columns, frame_columns, label_codes

        df, roles, codes = frame_columns(
            df, target=target, stratum=stratum, cluster=cluster, size=size, order=order,
            unit_cost=unit_cost, id=id, missing=missing, source=source,
        )
        aux_names, aux_roles = auxiliary_columns(df, auxiliary=auxiliary, poststratum=poststratum,
                                                 domain=domain, domains=domains, source=source)
        roles.update(aux_roles)
        if cluster_cost is not None:  # one cost per cluster, checked constant within each
            from samplewright.config.validate import cluster_cost_column

            per_unit_cc = cluster_cost_column(df, cluster_cost, cluster, source, codes.get("cluster"))
            roles["cluster_cost"] = cluster_cost
        targets = roles["target"]
        y = df[list(targets)].to_numpy(dtype=np.float64)
        extra = {}
        if aux_names:
            extra["aux"] = df[list(aux_names)].apply(pd.to_numeric).to_numpy(dtype=np.float64)
            extra["aux_names"] = aux_names
        if poststratum is not None:
            extra["poststratum"], extra["poststratum_labels"] = label_codes(df[poststratum].astype(str))
        if domain is not None:
            extra["domain"], extra["domain_labels"] = label_codes(df[domain].astype(str))
            if domains is not None:
                extra["domain_keep"] = tuple(extra["domain_labels"].index(str(v)) for v in domains)
        s_codes, s_labels = codes.get("stratum", (np.zeros(len(df), dtype=np.int64), ("all",)))
        c_codes, c_labels = codes.get("cluster", (None, ()))
        if cluster_cost is not None:
            extra["cluster_cost"] = np.zeros(len(c_labels))
            extra["cluster_cost"][c_codes] = per_unit_cc
        order_idx = None
        if order is not None:
            order_idx = np.argsort(df[order].to_numpy(), kind="stable").astype(np.int64)
        sort_orders = {}
        if sort_keys:  # systematic designs' sort_by columns: stable sort, ties keep the list order
            from samplewright.config.validate import sort_key_codes

            base = np.arange(len(df), dtype=np.int64) if order_idx is None else order_idx
            for col, key in sort_key_codes(df, sort_keys, source).items():
                sort_orders[col] = base[np.argsort(key[base], kind="stable")]
            roles["sort_keys"] = tuple(sort_orders)
        return cls(
            variables=tuple(targets),
            y=y,
            stratum=s_codes,
            stratum_labels=s_labels,
            cluster=c_codes,
            cluster_labels=c_labels,
            size=None if size is None else df[size].to_numpy(dtype=np.float64),
            order=order_idx,
            sort_orders=sort_orders,
            unit_cost=None if unit_cost is None else df[unit_cost].to_numpy(dtype=np.float64),
            roles=roles,
            **extra,
        )

    @classmethod
    def load(cls, path, **roles) -> Frame:
        """Read a frame file (see :func:`~samplewright.population.reading.read_table`) and bind its columns
        (see :meth:`from_dataframe`)."""
        return cls.from_dataframe(read_table(path, labels=label_columns(roles)), source=str(path), **roles)


def _digest(h, name: str, value) -> None:
    """Feed ``value`` (an array, a dict of them, or a plain value) to the hash ``h``, tagged with its name."""
    if isinstance(value, np.ndarray):
        a = np.ascontiguousarray(value)
        h.update(f"{name}:{a.dtype.str}{a.shape}:".encode())
        h.update(a)
    elif isinstance(value, dict):
        for k in sorted(value, key=str):
            _digest(h, f"{name}.{k}", value[k])
    else:
        h.update(f"{name}={value!r};".encode())
