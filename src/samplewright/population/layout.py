"""Where the auxiliary, post-stratum and domain columns sit in ``Frame.values``, and their truths.

The frame's value matrix is ``[targets (V) | extra columns | count | unit cost]``; every
design gathers whole rows of it, so whatever sits between the targets and the count column
reaches ``SampleBlock.sums`` in the same gather, summed over each PSU's sampled units.  The
extra columns are built here once, when the frame is built:

- per domain j (when ``[frame] domain`` is set): the indicator d_j and the products
  y_v d_j.  With the targets these form the *extended targets* e (E = V + D (V + 1)
  columns), the variables every estimator estimates totals of;
- the auxiliary variables x_a (``[frame] auxiliary``), their cross-products x_a x_b and the
  products x_a e for every extended target (what a regression fitted within PSU sums needs);
- the post-stratum indicators p_q (``[frame] poststratum``) and the products p_q e.

A :class:`Layout` records the positions and the frame's known totals (auxiliary totals,
post-stratum and domain counts); it is the context the estimators receive.

Domain output variables are named ``"<target>[<domain column>=<value>]"``, for example
``"overpayment[region=north]"``; their truth is the exact domain mean and the reference
variance of their design effect is the SRS variance of a domain mean with the expected
domain sample size, (1 - f) S_d^2 / (n P_d) with P_d = N_d / N (Cochran 1977, sec. 2.13;
from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True, eq=False)
class Layout:
    """Positions of the extra value columns and the frame's known totals.

    Attributes
    ----------
    N, V : int
        Frame units and targets.
    extended : (E,) int array
        Columns of the extended targets: the V targets, then for each domain its
        indicator followed by the V products y d.
    aux : (A,) int array
        Auxiliary columns; ``aux_products`` (A, A) their cross-products, ``aux_target_products``
        (A, E) their products with every extended target.
    post : (P,) int array
        Post-stratum indicator columns; ``post_target_products`` (P, E) their products with the
        extended targets.
    X : (A,) array
        Population totals of the auxiliaries.
    N_p, N_d : arrays
        Population counts of the post-strata and of the domains.
    names : tuple of str
        Output variables: the targets, then ``target[column=value]`` per domain and target.
    proportions : tuple of str
        The output variables whose target takes only the values 0 and 1 (their means are
        proportions).
    truth, S2 : arrays
        Exact mean of every output variable, and its reference S^2 for the SRS design
        effect (for a domain variable S_d^2 / P_d; see module notes).
    """

    N: int
    V: int
    extended: np.ndarray
    aux: np.ndarray
    aux_products: np.ndarray
    aux_target_products: np.ndarray
    post: np.ndarray
    post_target_products: np.ndarray
    X: np.ndarray
    N_p: np.ndarray
    N_d: np.ndarray
    names: tuple
    truth: np.ndarray
    S2: np.ndarray
    proportions: tuple = ()
    aux_names: tuple = ()
    post_labels: tuple = ()
    domain_labels: tuple = ()
    domain_column: str | None = None

    @property
    def A(self) -> int:
        return int(self.aux.shape[0])

    @property
    def P(self) -> int:
        return int(self.post.shape[0])

    @property
    def D(self) -> int:
        return int(self.N_d.shape[0])

    @property
    def E(self) -> int:
        return int(self.extended.shape[0])

    def domain_columns(self, j: int) -> tuple[int, slice]:
        """Position, within the extended targets, of domain j's indicator and of its y d products."""
        c = self.V + j * (self.V + 1)
        return c, slice(c + 1, c + 1 + self.V)


def indicators(codes: np.ndarray, k: int) -> np.ndarray:
    """The (n, k) 0/1 matrix with a 1 at column ``codes[i]`` of row i (codes 0..k-1)."""
    out = np.zeros((codes.shape[0], k))
    out[np.arange(codes.shape[0]), codes] = 1.0
    return out


class _Columns:
    """The extra value columns, laid out after the V targets in the order they are added."""

    def __init__(self, N: int, V: int):
        self.N, self.next, self.blocks = N, V, []

    def add(self, values) -> np.ndarray:
        """Append columns (N, k) and return their positions."""
        values = np.asarray(values, dtype=np.float64).reshape(self.N, -1)
        idx = np.arange(self.next, self.next + values.shape[1])
        self.blocks.append(values)
        self.next += values.shape[1]
        return idx

    def stacked(self) -> np.ndarray:
        return np.column_stack(self.blocks) if self.blocks else np.zeros((self.N, 0))


def _extended_targets(y, columns: _Columns, domain, domain_labels, domain_keep):
    """Positions of the extended targets (targets, then per kept domain its indicator and y d), their
    values (N, E) and the kept domain codes."""
    V = y.shape[1]
    extended = [np.arange(V)]
    extended_values = [y]
    keep = []
    if domain is not None:
        keep = list(range(len(domain_labels))) if domain_keep is None else list(domain_keep)
        d_all = indicators(domain, len(domain_labels))
        for j in keep:
            d = d_all[:, j:j + 1]
            block = np.column_stack([d, y * d])
            extended.append(columns.add(block))
            extended_values.append(block)
    return np.concatenate(extended), np.column_stack(extended_values), keep


def _auxiliary_columns(aux, columns: _Columns, e_vals):
    """The auxiliaries (N, A), their positions, and the positions of their cross-products (A, A) and of
    their products with the extended targets (A, E)."""
    N, E = e_vals.shape
    x = np.asarray(aux, dtype=np.float64).reshape(N, -1) if aux is not None and np.size(aux) else np.zeros((N, 0))
    A = x.shape[1]
    aux_idx = columns.add(x) if A else np.zeros(0, dtype=np.int64)
    aux_products = np.zeros((A, A), dtype=np.int64)
    for a in range(A):
        for b in range(a, A):
            aux_products[a, b] = aux_products[b, a] = columns.add(x[:, a] * x[:, b])[0]
    aux_target_products = np.zeros((A, E), dtype=np.int64)
    for a in range(A):
        aux_target_products[a] = columns.add(x[:, a:a + 1] * e_vals)
    return x, aux_idx, aux_products, aux_target_products


def _poststratum_columns(poststratum, post_labels, columns: _Columns, e_vals):
    """The post-stratum indicators (N, P), their positions and those of their products with the
    extended targets (P, E)."""
    N, E = e_vals.shape
    p = indicators(poststratum, len(post_labels)) if poststratum is not None else np.zeros((N, 0))
    P = p.shape[1]
    post_idx = columns.add(p) if P else np.zeros(0, dtype=np.int64)
    post_target_products = np.zeros((P, E), dtype=np.int64)
    for q in range(P):
        post_target_products[q] = columns.add(p[:, q:q + 1] * e_vals)
    return p, post_idx, post_target_products


def _truths(y, variables, domain, keep, domain_labels, domain_column):
    """Names, exact means and reference S^2 of the output variables, and the kept domains' sizes."""
    N, V = y.shape
    names = list(variables)
    truth = list(y.mean(axis=0))
    # S^2 is exactly 0 for a variable whose units all have one value (not rounding noise)
    S2 = list(np.where(np.ptp(y, axis=0) == 0, 0.0, y.var(axis=0, ddof=1)) if N > 1 else np.zeros(V))
    N_d = []
    for j in keep:
        inside = domain == j
        Nd = int(inside.sum())
        N_d.append(Nd)
        yd = y[inside]
        share = Nd / N
        for v, name in enumerate(variables):
            names.append(f"{name}[{domain_column}={domain_labels[j]}]")
            truth.append(float(yd[:, v].mean()))
            flat_d = Nd < 2 or yd[:, v].min() == yd[:, v].max()
            S2.append(0.0 if flat_d else float(yd[:, v].var(ddof=1)) / share)
    return names, truth, S2, N_d


def build(y: np.ndarray, variables, aux=None, aux_names=(), poststratum=None, post_labels=(),
          domain=None, domain_labels=(), domain_column=None, domain_keep=None):
    """The extra value columns (N, K_extra) and the :class:`Layout` of ``[y | extra | count | cost]``.

    ``domain_keep`` lists the domain codes to report (default: every domain).
    """
    N, V = y.shape
    columns = _Columns(N, V)
    extended, e_vals, keep = _extended_targets(y, columns, domain, domain_labels, domain_keep)
    x, aux_idx, aux_products, aux_target_products = _auxiliary_columns(aux, columns, e_vals)
    p, post_idx, post_target_products = _poststratum_columns(poststratum, post_labels, columns, e_vals)
    names, truth, S2, N_d = _truths(y, variables, domain, keep, domain_labels, domain_column)
    binary = {v for v, name in enumerate(variables) if np.isin(y[:, v], (0.0, 1.0)).all()}
    proportions = tuple(nm for i, nm in enumerate(names) if (i % V if i >= V else i) in binary) if V else ()
    layout = Layout(
        N=N, V=V, extended=extended, aux=aux_idx, aux_products=aux_products,
        aux_target_products=aux_target_products, post=post_idx, post_target_products=post_target_products,
        X=x.sum(axis=0), N_p=p.sum(axis=0), N_d=np.asarray(N_d, dtype=np.float64),
        names=tuple(names), proportions=proportions, truth=np.asarray(truth, dtype=np.float64),
        S2=np.asarray(S2, dtype=np.float64), aux_names=tuple(aux_names), post_labels=tuple(post_labels),
        domain_labels=tuple(domain_labels[j] for j in keep), domain_column=domain_column,
    )
    return columns.stacked(), layout
