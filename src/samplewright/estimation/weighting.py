"""Weighting adjustments for non-response, each with its linearised variance.

Every adjustment works on the units behind a block's PSU positions, as arrays of shape
(B, m, k): base (design) weights ``w``, study values ``y`` (B, m, k, V), the eligible
selected units ``e`` and the respondents ``r`` (a subset of ``e``).  It returns, per PSU
position, the sum of a linearised variable u_k whose total is the adjusted estimate of the
population total, and a count column whose total is the adjusted estimate of N.  The
block's estimators (HT: total / N; Hajek: total / N-hat, with z - est x count as its
linearised variable) then give the adjusted estimate and its variance from the one
between-PSU variance routine (the with-replacement, "ultimate cluster" form with the
first-stage finite population correction), so the response phase enters the variance
through the linearised variable only.

Adjustments (``adjustment`` in a ``[[design]]`` table)
-------------------------------------------------------
``none``
    respondents keep their design weights: Hajek gives the weighted respondent mean,
    u_k = r_k w_k y_k, count r_k w_k (respondents analysed as a domain).
``class``
    weighting-class adjustment within classes c (the design strata, or
    ``adjustment_classes = "column"``): respondents' weights times
    a_c = N-hat_c / N-hat_rc, where N-hat_c sums the design weights of the eligible
    sampled units of c and N-hat_rc those of its respondents.  Linearised variable
    u_k = e_k w_k ybar_rc + r_k w_k a_c (y_k - ybar_rc), count e_k w_k.
``poststrat``
    post-stratification of the respondents to the true population counts N_c of a
    column: t = sum_c N_c ybar_rc, u_k = r_k w_k (N_c / N-hat_rc)(y_k - ybar_rc) plus a
    constant per PSU position that carries t (it adds no variance).
``raking``
    iterative proportional fitting of the respondents' weights to the true population
    margins of several columns (Deming & Stephan 1940), stopped when every margin is met
    within a relative tolerance; u_k = g_k e_k with e_k the residual of y_k from the
    g-weighted regression on all margin indicators, plus the constant that carries the
    total (raking has the regression estimator's asymptotic variance: Deville & Sarndal
    1992, JASA 87:376-382).  The indicators of every margin after the first repeat the
    intercept, so their cross-product matrix is singular by construction; it is solved on
    the independent indicators of each replicate (:mod:`samplewright.estimation.gram`: all categories
    of the first margin, all but one of each later one, minus any category without
    respondents), so the residuals are exactly orthogonal to every indicator and the
    linearised variable adds nothing to the raked total.

A class with eligible units but no respondents in a replicate cannot be adjusted; it is
given the replicate's overall respondent mean (collapsed into the whole sample) and the
replicate is counted in ``adjustment_failures``.  Raking that has not converged after
``MAX_ITER`` cycles (margins that no positive weights on the respondents can meet, e.g. a
category of one margin whose respondents all fall in a smaller category of another) is
counted there too; when a raking category has no respondents, the
raked weights are scaled up to the population total (the same collapse).  With few PSUs
per class the linearised variance runs low (residuals from class means estimated on few
PSUs), so check ``se_ratio``.  Sources for the linearisations: Sarndal,
Swensson & Wretman (1992), secs. 7.6 (post-stratified estimator) and 15.6-15.7
(weighting-class estimators under a response model).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from samplewright.config.validate import as_str, closest
from samplewright.errors import InputError
from samplewright.estimation.gram import least_squares
from samplewright.estimation.poststratify import cell_factors, cell_means

ADJUSTMENT_METHODS = ("none", "class", "poststrat", "raking")
#: relative tolerance on every raking margin (a tenth of the 1e-9 promised, so that rounding in
#: the estimate cannot take a met margin past it), and the cycle cap
TOLERANCE = 1e-10
MAX_ITER = 1000

#: the variance estimator each adjustment's results carry, as named in run.json
VARIANCE_NAMES = {
    "none": "linearised respondent (domain) estimator, between-PSU variance with first-stage fpc",
    "class": "linearised weighting-class estimator (Sarndal, Swensson & Wretman 1992, sec. 15.6), "
             "between-PSU variance with first-stage fpc",
    "poststrat": "linearised post-stratified estimator, residuals from cell means "
                 "(Sarndal, Swensson & Wretman 1992, sec. 7.6), between-PSU variance with first-stage fpc",
    "raking": "linearised raking estimator, residuals from the regression on the margin indicators "
              "(Deville & Sarndal 1992), between-PSU variance with first-stage fpc",
}


@dataclass(frozen=True)
class AdjustmentSpec:
    """A design's weighting adjustment as written in its ``[[design]]`` table."""

    method: str = "none"
    classes: str | None = None  # a frame column; None: the design strata
    margins: tuple[str, ...] = ()

    def columns(self) -> tuple[str, ...]:
        if self.method == "raking":
            return self.margins
        if self.method in ("class", "poststrat") and self.classes is not None:
            return (self.classes,)
        return ()

    def describe(self) -> dict:
        out = {"adjustment": self.method, "variance": VARIANCE_NAMES[self.method]}
        if self.method in ("class", "poststrat"):
            out["classes"] = self.classes or "the frame's strata"
        if self.method == "raking":
            out["margins"] = list(self.margins)
        return out


def adjustment_from_table(table: dict, ctx: str) -> AdjustmentSpec:
    """Read the adjustment keys of a ``[[design]]`` table (already key-checked)."""
    method = as_str(table.get("adjustment", "none"), "adjustment", ctx)
    if method not in ADJUSTMENT_METHODS:
        raise InputError(f"{ctx}: adjustment {method!r} is not known{closest(method, ADJUSTMENT_METHODS)}")
    classes = table.get("adjustment_classes")
    if classes is not None:
        classes = as_str(classes, "adjustment_classes", ctx)
        if method not in ("class", "poststrat"):
            raise InputError(f"{ctx}: adjustment_classes applies to adjustment = 'class' or 'poststrat', "
                             f"not {method!r}")
    if method == "poststrat" and classes is None:
        raise InputError(f"{ctx}: adjustment = 'poststrat' needs adjustment_classes = \"column\" "
                         f"(the column whose population counts are known)")
    margins = table.get("raking_margins")
    if margins is not None:
        if method != "raking":
            raise InputError(f"{ctx}: raking_margins applies to adjustment = 'raking', not {method!r}")
        if isinstance(margins, str):
            margins = [margins]
        if not isinstance(margins, list) or not margins:
            raise InputError(f"{ctx}: raking_margins must be a non-empty list of column names")
        margins = tuple(as_str(x, "raking_margins", ctx) for x in margins)
        if len(set(margins)) != len(margins):
            raise InputError(f"{ctx}: raking_margins lists a column twice: {list(margins)}")
    elif method == "raking":
        raise InputError(f"{ctx}: adjustment = 'raking' needs raking_margins = [\"column\", ...]")
    return AdjustmentSpec(method, classes, margins or ())


# ------------------------------------------------------------------ arithmetic
def group_sums(codes: np.ndarray, values: np.ndarray, G: int) -> np.ndarray:
    """Per replicate sums of ``values`` by group: codes (B, ...) in 0..G-1 -> (B, G)."""
    B = codes.shape[0]
    idx = (np.arange(B, dtype=np.int64).reshape((B,) + (1,) * (codes.ndim - 1)) * G + codes).ravel()
    return np.bincount(idx, weights=np.broadcast_to(values, codes.shape).ravel(), minlength=B * G).reshape(B, G)


def _by_group(codes, values, G):
    """Like :func:`group_sums` for values with a trailing variable axis: (B, ..., V) -> (B, G, V)."""
    return np.stack([group_sums(codes, values[..., v], G) for v in range(values.shape[-1])], axis=-1)


def _pick(table: np.ndarray, codes: np.ndarray) -> np.ndarray:
    """table (B, G[, V]) looked up at codes (B, ...) -> (B, ...[, V])."""
    B = codes.shape[0]
    b = np.arange(B).reshape((B,) + (1,) * (codes.ndim - 1))
    return table[b, codes]


def _unit_sums(a: np.ndarray) -> np.ndarray:
    """Sums over the units axis of ``a`` (B, m, k, V) -> (B, m, V), adding the k units one after
    another: the order of ``a.sum(axis=2)``, without its cost of one reduction loop per position."""
    out = a[:, :, 0].copy()
    for j in range(1, a.shape[2]):
        out += a[:, :, j]
    return out


def rake(weights: np.ndarray, codes, controls, tol: float = TOLERANCE, max_iter: int = MAX_ITER):
    """Iterative proportional fitting of weights (B, L) to margins, every replicate at once.

    Parameters
    ----------
    weights : (B, L) array
        Starting weights (zero for units that take no part).
    codes : list of (B, L) int arrays
        Category of every unit on each margin.
    controls : list of (G_j,) arrays
        Known totals of each margin's categories.

    Returns
    -------
    g : (B, L) array of raked weights; iterations : (B,) cycles used; converged : (B,) bool.

    Notes
    -----
    Deming & Stephan (1940), Ann. Math. Statist. 11:427-444: scale the weights to each
    margin in turn and cycle until every margin holds; the fitted table keeps the seed's
    interactions (its cross-product ratios).  Here a replicate is converged when every
    category total is within ``tol`` of its control, relative to the control; a converged
    replicate is left as it is while the others go on cycling.

    Examples
    --------
    >>> g, it, ok = rake(np.ones((1, 4)), [np.array([[0, 0, 1, 1]]), np.array([[0, 1, 0, 1]])],
    ...                  [np.array([6.0, 4.0]), np.array([5.0, 5.0])])
    >>> np.round(g, 6).tolist(), bool(ok[0])
    ([[3.0, 3.0, 2.0, 2.0]], True)
    """
    g = np.array(weights, dtype=float)
    B = g.shape[0]
    iterations = np.zeros(B, dtype=np.int64)
    controls = [np.asarray(c, dtype=float) for c in controls]
    # a category with a control but no weight can never be met: the others are raked, and the
    # replicate is reported as not converged
    feasible = [(group_sums(c, g, len(N)) > 0) | (N == 0) for c, N in zip(codes, controls)]
    stuck = np.zeros(B, dtype=bool)
    for ok in feasible:
        stuck |= ~ok.all(axis=1)
    met = np.zeros(B, dtype=bool)
    rows = np.arange(B)  # the replicates still being raked: a met one is left as it is
    for it in range(1, max_iter + 1):
        sub = g[rows]
        cs = [c[rows] for c in codes]
        for c, N in zip(cs, controls):
            tot = group_sums(c, sub, len(N))
            sub *= _pick(np.where(tot > 0, N / np.where(tot > 0, tot, 1.0), 1.0), c)
        g[rows] = sub
        iterations[rows] = it
        worst = np.zeros(rows.size)
        for c, N, ok in zip(cs, controls, feasible):
            tot = group_sums(c, sub, len(N))
            gap = np.where(ok[rows], np.abs(tot - N) / np.where(N > 0, N, 1.0), 0.0)
            worst = np.maximum(worst, gap.max(axis=1))
        done = worst < tol
        met[rows[done]] = True
        rows = rows[~done]
        if rows.size == 0:
            break
    converged = met & ~stuck
    return g, iterations, converged


# ------------------------------------------------------------------ adjustments
@dataclass(frozen=True, eq=False)
class ResolvedAdjustment:
    """An adjustment bound to the listed frame: class codes per listed unit and population controls."""

    method: str
    codes: tuple = ()  # tuple of (N_list,) int arrays: one for class/poststrat, one per margin for raking
    sizes: tuple = ()  # number of categories of each
    controls: tuple = ()  # true population counts per category (poststrat, raking)

    def apply(self, units, w, y, e, r, positions, keep: int | None = None):
        """Adjusted PSU sums for one block: (u (B, m, V), count (B, m), failed (B,)).

        ``units`` (B, m, k) listed-unit indices (0 where not a unit), ``w`` base weights,
        ``y`` values (B, m, k, V), ``e``/``r`` eligible and responding units,
        ``positions`` (B, m) the PSU positions the estimators count (for a two-stage block, each
        unit's share of its cluster: ``two_stage_variance.slot_shares``).  ``keep``: raking
        returns u of the first ``keep`` variables only (the ones the estimators read), with the
        same numbers as in the full u (its fit keeps the width of all V, the others zero); the other
        adjustments return every variable.
        """
        we, wr = w * e, w * r
        B = w.shape[0]
        if self.method == "none":
            return (wr[..., None] * y).sum(axis=2), wr.sum(axis=2), np.zeros(B, dtype=bool)
        n_pos = np.maximum(positions.sum(axis=1), 1)[:, None]
        share = positions / n_pos  # spreads a replicate constant evenly over its positions
        if self.method == "raking":
            u, ok = self._raked(units, wr, y, share, y.shape[-1] if keep is None else keep)
            return u, float(self.controls[0].sum()) * share, ~ok
        G = self.sizes[0]
        c = self.codes[0][units]
        Nc = group_sums(c, we, G)
        Nrc = group_sums(c, wr, G)
        trc = _by_group(c, wr[..., None] * y, G)
        ok = Nrc > 0
        tot_r = wr.sum(axis=(1, 2))
        ybar_r = (wr[..., None] * y).sum(axis=(1, 2)) / np.where(tot_r > 0, tot_r, np.nan)[:, None]
        ybar_c = cell_means(trc, Nrc, ybar_r)
        yb = _pick(ybar_c, c)
        if self.method == "class":
            failed = ((Nc > 0) & ~ok).any(axis=1)
            a = cell_factors(Nc, Nrc)
            u = we[..., None] * yb + (wr * _pick(a, c))[..., None] * (y - yb)
            return u.sum(axis=2), we.sum(axis=2), failed
        N = self.controls[0]
        failed = ((N[None, :] > 0) & ~ok).any(axis=1)
        t = (N[None, :, None] * ybar_c).sum(axis=1)  # (B, V)
        a = cell_factors(N[None, :], Nrc)
        u = ((wr * _pick(a, c))[..., None] * (y - yb)).sum(axis=2) + t[:, None, :] * share[..., None]
        return u, float(N.sum()) * share, failed

    def _raked(self, units, wr, y, share, keep):
        """Raking on the cells of the margins' cross-classification: (u (B, m, keep), converged (B,)).

        Every raking step multiplies a unit's weight by factors that depend on its cell only, so
        the raked weight is wr_k f_c(k): the respondents are collapsed once to cell sums of wr and
        wr y, the small (B, cells) table is raked and regressed on, and the cell factors and
        fitted values are gathered back to the units for the per-PSU sums.
        """
        B = wr.shape[0]
        strides = np.cumprod((1,) + tuple(self.sizes[:-1])).astype(np.int64)
        n_cells = int(np.prod(self.sizes))
        cell = sum(c * s for c, s in zip(self.codes, strides))[units]  # (B, m, k): one gather
        cell_codes = [np.broadcast_to((np.arange(n_cells) // s) % G, (B, n_cells))
                      for s, G in zip(strides, self.sizes)]
        flat = (np.arange(B) * n_cells).reshape(B, 1, 1) + cell  # each unit's row of the (B * cells) tables
        V = y.shape[-1]
        w_cell = np.bincount(flat.ravel(), weights=wr.ravel(), minlength=B * n_cells).reshape(B, n_cells)
        # the cell tables and the fit keep every variable's column, zero past the kept ones, so the kept
        # columns' numbers do not depend on how many are kept (a BLAS product may add in another order
        # at another width); a cell's sum adds its units in their order, whatever the number of variables
        wy_cell = np.zeros((B, n_cells, V))
        for v in range(keep):
            wy_cell[..., v] = np.bincount(flat.ravel(), weights=(wr * y[..., v]).ravel(),
                                          minlength=B * n_cells).reshape(B, n_cells)
        g_cell, _, ok = rake(w_cell, cell_codes, self.controls)
        total = float(self.controls[0].sum())
        empty = np.zeros(B, dtype=bool)
        for c, N in zip(cell_codes, self.controls):
            empty |= ((group_sums(c, w_cell, len(N)) <= 0) & (N > 0)).any(axis=1)
        if empty.any():  # a category without respondents: its count is spread over all of them
            g_cell[empty] *= total / np.maximum(g_cell[empty].sum(axis=1, keepdims=True), 1e-300)
        factor = np.where(w_cell > 0, g_cell / np.where(w_cell > 0, w_cell, 1.0), 0.0)
        gy_cell = factor[..., None] * wy_cell
        t = gy_cell.sum(axis=1)  # (B, V)
        fit = self._fitted(g_cell, gy_cell, cell_codes)  # (B, cells, V)
        g_unit = wr * np.take(factor.ravel(), flat)
        residual = np.take(np.ascontiguousarray(fit[..., :keep]).reshape(B * n_cells, keep), flat, axis=0)
        np.subtract(y[..., :keep], residual, out=residual)
        residual *= g_unit[..., None]
        u = _unit_sums(residual)
        u += t[:, None, :keep] * share[..., None]
        return u, ok

    def _fitted(self, g, gy, codes):
        """Fitted values of y from the g-weighted regression on every margin's indicators.

        ``g`` (B, L) weights, ``gy`` (B, L, V) weights times y, ``codes`` each margin's category per column.
        """
        offsets = np.concatenate([[0], np.cumsum(self.sizes)]).astype(np.int64)
        p = int(offsets[-1])
        B = g.shape[0]
        xtx = np.zeros((B, p, p))
        for i, ci in enumerate(codes):
            for j, cj in enumerate(codes):
                Gi, Gj = self.sizes[i], self.sizes[j]
                block = group_sums(ci * Gj + cj, g, Gi * Gj).reshape(B, Gi, Gj)
                xtx[:, offsets[i]:offsets[i + 1], offsets[j]:offsets[j + 1]] = block
        xty = np.concatenate([_by_group(c, gy, G) for c, G in zip(codes, self.sizes)], axis=1)
        beta, _ = least_squares(xtx, xty)  # (B, p, V); later margins repeat the intercept
        return sum(_pick(beta[:, offsets[i]:offsets[i + 1], :], c) for i, c in enumerate(codes))
