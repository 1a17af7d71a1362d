"""Estimators that use auxiliary data (ratio, GREG, post-stratification) and domain means.

Every estimator here works on any :class:`~samplewright.designs.block.SampleBlock`, whatever design
drew it: it needs only the PSU sums of the frame's value columns (see
:mod:`samplewright.population.layout`) and the frame's known totals, passed as the ``layout`` argument
(the frame's :class:`~samplewright.population.layout.Layout`).  Each one is a *core* that returns, for
every extended target e (the targets and, per domain, its indicator and the products y d),
the estimated total T_e and the linearised PSU totals u_ie whose design variance estimates
the variance of T_e; one finishing step turns them into means of the targets and of the
domains, standard errors (through the design's variance formula, handed in as ``variance``
by :mod:`samplewright.estimation.registry`) and t intervals.

Notes
-----
With design weights w_k (inverse inclusion probabilities), PSU i, HT totals t^ = sum w y:

- **HT**: T = t^_y, u_i = z_i (the PSU's expanded total).
- **Hajek**: T = N t^_y / N^, u_i = (N / N^) sum_{k in i} w_k (y_k - ybar_w)
  (Sarndal, Swensson & Wretman 1992, sec. 5.7).
- **ratio** (first auxiliary x, known total X): T = X t^_y / t^_x, u_i = sum_{k in i}
  w_k (y_k - R^ x_k), R^ = t^_y / t^_x: the simple-residual form, for SRS
  v = N^2 (1 - f) / n * s_d^2 with d = y - R^ x (Cochran 1977, sec. 6.3-6.4).
- **GREG** (intercept and every auxiliary, known totals (N, X)): with x~ = (1, x),
  M = sum_s w x~ x~', B^ = M^-1 sum_s w x~ y, T = t^_y + (X~ - X~^)' B^ and the g-weights
  g_k = 1 + (X~ - X~^)' M^-1 x~_k; u_i = sum_{k in i} w_k g_k e_k with e_k = y_k - x~_k' B^,
  the g-weighted residual form (SSW 1992, eq. 6.6.9 and sec. 7.10; from memory).  With the
  intercept alone (no auxiliary) it is exactly the Hajek estimator, SE included.  M is
  inverted on its independent columns (:mod:`samplewright.estimation.gram`): an auxiliary that is
  constant or repeats another (in the frame, or only in a replicate's sample) gets
  coefficient 0 and lam 0, so it is the GREG on the other auxiliaries; where the dropped
  auxiliary's known total disagrees with what the sample implies (constant in the sample,
  not in the frame), no calibration can meet it and that replicate ignores it.
- **post-stratification** (post-strata q with known counts N_q): T = sum_q N_q t^_yq / N^_q,
  u_i = sum_q (N_q / N^_q) sum_{k in i, q} w_k (y_k - ybar_q), the g-weighted residuals
  from the post-stratum means (SSW 1992, sec. 7.6).  A post-stratum with no sampled unit
  in a replicate takes the sample's Hajek mean (common practice: it is collapsed with the
  whole sample), and its share of the linearisation follows.

Domain means (SSW 1992, sec. 10.3) come from the same core applied to the domain columns:
mean_d = T_yd / T_d (the estimator's own estimate of the domain size; for HT, whose means
divide by known sizes, T_yd / N_d) with linearised PSU totals (u_yd - mean_d u_d) / T_d.
For HT weights this is the Hajek-type domain mean sum w y d / sum w d (Hajek estimator) and
its usual linearised variance; for GREG and post-stratification it is the domain mean with
the calibrated weights w g.  A replicate with no sampled unit of the domain has no estimate
(NaN).  The degrees of freedom are the design's (PSUs minus strata) for every variable.
"""

from __future__ import annotations

import numpy as np

from samplewright.designs.block import SampleBlock
from samplewright.errors import InputError
from samplewright.estimation.gram import least_squares
from samplewright.estimation.intervals import Estimates, finish
from samplewright.estimation.poststratify import cell_factors, cell_means
from samplewright.population.frame import COUNT
from samplewright.population.layout import Layout


# ------------------------------------------------------------------ cores
def _ht(z, Z, N, L: Layout):
    return Z[:, L.extended], z[..., L.extended]


def _hajek(z, Z, N, L: Layout):
    nhat = Z[:, COUNT]
    ybar = Z[:, L.extended] / nhat[:, None]
    lin = (z[..., L.extended] - ybar[:, None, :] * z[..., COUNT][..., None]) * (N / nhat)[:, None, None]
    return N * ybar, lin


def _ratio(z, Z, N, L: Layout):
    x = L.aux[0]
    R = Z[:, L.extended] / Z[:, x][:, None]
    return R * L.X[0], z[..., L.extended] - R[:, None, :] * z[..., x][..., None]


def _model_index(L: Layout):
    """Column indices of x~ x~' (k, k), the model's Gram matrix, and of x~ e (k, E), its moments with
    the extended targets e, for x~ = (1, x_1..x_A)."""
    cnt = np.int64(COUNT)
    gram_cols = np.empty((L.A + 1, L.A + 1), dtype=np.int64)
    gram_cols[0, 0] = cnt
    gram_cols[0, 1:] = gram_cols[1:, 0] = L.aux
    gram_cols[1:, 1:] = L.aux_products
    moment_cols = np.vstack([L.extended[None, :], L.aux_target_products])
    return gram_cols, moment_cols


def _greg(z, Z, N, L: Layout):
    gram_cols, moment_cols = _model_index(L)
    M = Z[:, gram_cols]  # (B, k, k)
    C = Z[:, moment_cols]  # (B, k, E)
    Bhat, Minv = least_squares(M, C)  # (B, k, E); a constant or repeated auxiliary gets coefficient 0
    total = np.concatenate([[float(N)], L.X])  # (k,)
    diff = total[None, :] - M[:, 0, :]  # known minus estimated totals of x~
    T = Z[:, L.extended] + np.einsum("bk,bke->be", diff, Bhat)
    T[M[:, 0, 0] <= 0] = np.nan  # an empty sample has no estimate (N^ = 0), as for the Hajek mean
    lam = np.einsum("bkj,bj->bk", Minv, diff)  # g_k = 1 + lam' x~_k
    # u_i = sum_{k in i} w_k g_k e_k = s_e - s_x' B + lam' (s_xe - s_xx B), with s_. the PSU's
    # weighted sums; a loop over the k (few) model terms keeps every temporary (B, m, E)
    u = z[..., L.extended].copy()
    for a in range(gram_cols.shape[0]):
        s_xB = sum(z[..., gram_cols[a, j]][..., None] * Bhat[:, None, j, :] for j in range(gram_cols.shape[0]))
        u -= z[..., gram_cols[0, a]][..., None] * Bhat[:, None, a, :]
        u += lam[:, None, a, None] * (z[..., moment_cols[a]] - s_xB)
    return T, u


def _poststrat(z, Z, N, L: Layout):
    nhat_q = Z[:, L.post]  # (B, P)
    empty = nhat_q <= 0
    nhat = Z[:, COUNT]
    ybar = Z[:, L.extended] / nhat[:, None]  # Hajek mean, for empty post-strata
    mean_q = cell_means(Z[:, L.post_target_products], nhat_q, ybar)  # (B, P, E)
    g = cell_factors(L.N_p[None, :], nhat_q)  # (B, P)
    T = np.einsum("q,bqe->be", L.N_p, mean_q)
    u = (np.einsum("bq,bmqe->bme", g, z[..., L.post_target_products])
         - np.einsum("bq,bqe,bmq->bme", g, mean_q, z[..., L.post]))
    n_empty = (empty * L.N_p[None, :]).sum(axis=1)  # units of the empty post-strata
    if np.any(n_empty):
        u = u + (n_empty / nhat)[:, None, None] * (z[..., L.extended] - ybar[:, None, :] * z[..., COUNT][..., None])
    return T, u


CORES = {"ht": _ht, "hajek": _hajek, "ratio": _ratio, "greg": _greg, "poststrat": _poststrat}

#: what each estimator needs from the frame beyond the targets (scenario checks)
NEEDS = {"ratio": "auxiliary", "greg": "auxiliary", "poststrat": "poststratum"}


# ------------------------------------------------------------------ finishing step
def estimate(name: str, block: SampleBlock, N: int, confidence: float, layout: Layout, *, variance) -> Estimates:
    """Means of every output variable of ``layout`` (targets, then domains) by estimator ``name``.

    ``variance`` (z (B, m, V), block) -> (B, V) is the design's variance formula of a total.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from samplewright import Frame
    >>> from samplewright.designs import SRS
    >>> from samplewright.estimation.variance import stratified_psu_variance
    >>> df = pd.DataFrame({"y": np.arange(1.0, 41.0), "x": np.arange(1.0, 41.0) + 0.5})
    >>> f = Frame.from_dataframe(df, target="y", auxiliary=["x"])
    >>> blk = SRS("s", n=10).draw(f, np.random.default_rng(3), B=2)
    >>> out = estimate("greg", blk, f.N, 0.95, f.layout, variance=stratified_psu_variance)
    >>> np.allclose(out.estimate, 20.5)   # y is exactly linear in x: GREG has no error
    True
    """
    if layout is None:
        raise InputError(f"estimator {name!r} needs the frame's known totals (its Layout)")
    V = layout.V
    z = block.weighted()
    Z = z.sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        T, u = CORES[name](z, Z, N, layout)
        means = [T[:, :V] / N]
        lins = [u[..., :V] / N]
        for j in range(layout.D):
            c, yd = layout.domain_columns(j)
            if name == "ht":
                size = np.full(T.shape[0], layout.N_d[j])
                m = T[:, yd] / size[:, None]
                lin = u[..., yd]
            else:
                size = T[:, c]
                m = T[:, yd] / size[:, None]
                lin = u[..., yd] - m[:, None, :] * u[..., c][..., None]
            means.append(m)
            lins.append(lin / size[:, None, None])
        est = np.concatenate(means, axis=1)
        lin = np.concatenate(lins, axis=2)
        if block.mask is not None:
            lin = np.where(block.mask[..., None], lin, 0.0)
        var = variance(lin, block)
        se = np.sqrt(np.maximum(var, 0.0))
        se = np.where(np.isfinite(est), se, np.nan)
    return finish(est, se, block, confidence)


def ratio(block: SampleBlock, N: int, V: int, confidence: float, layout: Layout | None = None, *,
          variance) -> Estimates:
    """Ratio estimator of the mean on the first auxiliary, with its linearised SE (see module notes)."""
    _need("ratio", layout is not None and layout.A > 0, "an auxiliary column")
    return estimate("ratio", block, N, confidence, layout, variance=variance)


def greg(block: SampleBlock, N: int, V: int, confidence: float, layout: Layout | None = None, *,
         variance) -> Estimates:
    """GREG estimator of the mean (intercept and every auxiliary), g-weighted SE (see module notes)."""
    _need("greg", layout is not None, "the frame's known totals")
    return estimate("greg", block, N, confidence, layout, variance=variance)


def poststrat(block: SampleBlock, N: int, V: int, confidence: float, layout: Layout | None = None, *,
              variance) -> Estimates:
    """Post-stratified estimator of the mean with its linearised SE (see module notes)."""
    _need("poststrat", layout is not None and layout.P > 0, "a poststratum column")
    return estimate("poststrat", block, N, confidence, layout, variance=variance)


def _need(name, ok, what):
    if not ok:
        raise InputError(f"estimator {name!r} needs {what}: set it in [frame]")


def check_estimators(estimators, roles: dict, where: str) -> None:
    """Refuse an estimator whose frame lacks what it needs (called once per design by the scenario)."""
    for e in estimators:
        need = NEEDS.get(e)
        if need and not roles.get(need):
            key = "auxiliary = [\"column\", ...]" if need == "auxiliary" else "poststratum = \"column\""
            raise InputError(f"{where}: estimator {e!r} needs {need} data: set {key} in [frame]")

