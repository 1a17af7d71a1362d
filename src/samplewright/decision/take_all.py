"""A take-all top stratum for a target coefficient of variation (after Lavallee and Hidiroglou 1988).

Notes
-----
The k largest units (on the stratifying auxiliary x) form a stratum taken whole; the other units
are cut by the cumulative sqrt(f) rule (Dalenius and Hodges 1959) into H - 1 take-some strata,
Neyman-allocated.  k is the count that needs the fewest units in all, k + n_ts(k), to reach a
target coefficient of variation cv of the estimated total.  n_ts is the Neyman size of the take-some
strata for the variance of their mean that gives the whole mean a variance (cv Ybar)^2, with strata
whose share exceeds their size taken whole (Cochran 1977, sec. 5.5 and 5.8, through
``planning.allocate_strata``).  Lavallee and Hidiroglou also search the take-some boundaries (an
iteration); here they are the cumulative sqrt(f) boundaries of the rest, a documented simplification.
"""

from __future__ import annotations

import numpy as np

from samplewright.decision.planning import allocate_strata
from samplewright.designs.boundaries import cum_sqrt_f, strata_count, stratum_codes
from samplewright.errors import InputError


def take_all(x, H: int, cv: float, y=None, max_share: float = 0.2, steps: int = 40) -> dict:
    """The take-all count and the H - 1 boundaries (the last one the take-all cutoff) for a target ``cv``.

    ``y`` is the variable whose variance is screened (default ``x`` itself: planning on the
    auxiliary only).  k runs over 0 and ``steps`` values spread geometrically up to ``max_share``
    of the units.  Returns ``take_all`` (k), ``boundaries`` (an array; with k = 0 there is no
    take-all cutoff, so it has H - 2 values) and ``n`` (k plus the whole-number take-some size).
    """
    x = np.asarray(x, dtype=float)
    yv = x if y is None else np.asarray(y, dtype=float)
    H = strata_count(H, least=2)
    if not cv > 0:
        raise InputError(f"take-all stratum: the target coefficient of variation must be above 0, got {cv!r}")
    order = np.argsort(x, kind="stable")
    xs, ys = x[order], yv[order]
    N = x.size
    v_mean = (cv * float(yv.mean())) ** 2
    kmax = int(max_share * N)
    grid = np.unique(np.round(np.geomspace(1, kmax, steps)).astype(np.int64)).tolist() if kmax >= 1 else []
    best = None
    for k in [0, *grid]:
        rest_x, rest_y = xs[:N - k], ys[:N - k]
        if k and xs[N - k] <= rest_x[-1]:  # tied values at the cutoff cannot be separated
            continue
        inner = cum_sqrt_f(rest_x, H - 1) if H > 2 else np.array([])
        codes = stratum_codes(rest_x, inner)
        N_h = np.bincount(codes)
        S_h = np.array([rest_y[codes == h].std(ddof=1) if N_h[h] > 1 else 0.0 for h in range(N_h.size)])
        # the take-some mean's variance that gives the whole mean the variance v_mean: W_ts^2 V_ts = v_mean
        plan = allocate_strata(N_h, S_h, rule="neyman", variance=v_mean * (N / (N - k)) ** 2)
        n = k + plan["n"]
        if best is None or n < best["n"]:
            cut = [] if k == 0 else [float(rest_x[-1])]
            best = {"take_all": int(k), "n": int(n), "boundaries": np.concatenate([inner, cut])}
    return best
