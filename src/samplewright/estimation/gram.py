"""Inverse of a batch of cross-product (Gram) matrices that may be singular.

GREG's model matrix sum w x~ x~' and raking's matrix of margin-indicator cross-products
are inverted once per replicate.  Either can be singular: raking's by construction (each
margin's indicators sum to the intercept, so every margin after the first repeats it), and
either one in a replicate (an auxiliary constant in the sample or listed twice, a raking
category without respondents).  A pseudo-inverse at a cut-off relative to the largest
eigenvalue then fails both ways: it may invert an eigenvalue that is rounding noise around 0
(the fit goes wrong and the residuals no longer sum to 0), and, with columns on very
different scales (an auxiliary in the hundreds of millions next to the intercept), it may
drop a genuine one.

:func:`gram_pinv` finds, per replicate, a maximal set of independent columns, in column
order: after scaling M to unit diagonal, a Cholesky factorisation that keeps column j only
when the part of it not explained by the columns kept before it has a squared norm above
``RANK_TOL`` (its squared sine to their span, in the metric of M); a column with a zero
diagonal (no weight) is never kept.  The inverse is that of the kept columns' block, with
zeros in the rows and columns of the others: the coefficients of the dropped columns are 0
and the fitted values are the exact least-squares fit on the kept ones, which span what all
of them span when the dropped columns are exact combinations of earlier ones (always so for
raking's repeated intercept and a duplicated or constant auxiliary).  This is the reduced
basis of dropping one category per margin after the first, found by the data instead of
assumed (Golub & Van Loan 2013, Matrix Computations, 4th ed., sec. 5.4.2 on rank-revealing
factorisations; from memory).

Replicates whose matrix is well conditioned (every column kept and the eigenvalue ratio
above ``RANK_TOL``) keep the plain pseudo-inverse, so their numbers do not change.
"""

from __future__ import annotations

import numpy as np

#: squared sine below which a column counts as a combination of the columns before it
RANK_TOL = 1e-9


def independent_columns(M: np.ndarray, tol: float = RANK_TOL) -> np.ndarray:
    """Which columns of each symmetric positive semi-definite M (B, p, p) to keep, (B, p) bool.

    Examples
    --------
    >>> X = np.array([[1.0, 1.0, 0.0], [1.0, 0.0, 1.0], [1.0, 1.0, 0.0]])  # x1 + x2 = x0
    >>> independent_columns((X.T @ X)[None]).tolist()
    [[True, True, False]]
    """
    B, p = M.shape[:2]
    d = np.diagonal(M, axis1=1, axis2=2)
    pos = d > 0
    s = np.where(pos, 1.0 / np.sqrt(np.where(pos, d, 1.0)), 0.0)
    S = M * s[:, :, None] * s[:, None, :]  # unit diagonal where d > 0
    L = np.zeros((B, p, p))
    keep = np.zeros((B, p), dtype=bool)
    for j in range(p):
        v = S[:, j, j] - (L[:, j, :j] ** 2).sum(axis=1)
        keep[:, j] = pos[:, j] & (v > tol)
        root = np.sqrt(np.where(keep[:, j], v, 1.0))
        col = (S[:, j + 1:, j] - np.einsum("bik,bk->bi", L[:, j + 1:, :j], L[:, j, :j])) / root[:, None]
        L[:, j, j] = np.where(keep[:, j], root, 0.0)
        L[:, j + 1:, j] = np.where(keep[:, j, None], col, 0.0)
    return keep


def gram_pinv(M: np.ndarray, tol: float = RANK_TOL) -> tuple[np.ndarray, np.ndarray]:
    """Inverse of each M (B, p, p) on its independent columns, zero elsewhere (see module notes).

    Returns (Minv (B, p, p), plain (B,)): ``plain`` marks the well-conditioned replicates,
    whose Minv is the plain pseudo-inverse.

    Examples
    --------
    >>> X = np.array([[1.0, 2.0, 2.0], [1.0, 5.0, 5.0], [1.0, 7.0, 7.0]])  # an auxiliary listed twice
    >>> Minv, plain = gram_pinv((X.T @ X)[None])
    >>> bool(plain[0]), np.allclose(Minv[0, :2, :2], np.linalg.inv(X[:, :2].T @ X[:, :2])), Minv[0, 2].tolist()
    (False, True, [0.0, 0.0, 0.0])
    """
    keep = independent_columns(M, tol)
    ev = np.linalg.eigvalsh(M)
    plain = keep.all(axis=1) & (ev[:, 0] > tol * ev[:, -1])
    if plain.all():
        return np.linalg.pinv(M, hermitian=True), plain
    out = np.empty_like(M)
    if plain.any():  # each matrix is inverted on its own, so only the plain ones need the pseudo-inverse
        out[plain] = np.linalg.pinv(M[plain], hermitian=True)
    bad = ~plain
    Mb, kb = M[bad], keep[bad]
    both = kb[:, :, None] & kb[:, None, :]
    d = np.where(kb, np.diagonal(Mb, axis1=1, axis2=2), 1.0)
    s = 1.0 / np.sqrt(d)
    eye = np.broadcast_to(np.eye(M.shape[1]), Mb.shape)
    S = np.where(both, Mb * s[:, :, None] * s[:, None, :], eye)  # dropped columns: identity, then zeroed
    out[bad] = np.where(both, np.linalg.inv(S), 0.0) * s[:, :, None] * s[:, None, :]
    return out, plain


def gram_solve(M: np.ndarray, C: np.ndarray, Minv: np.ndarray, plain: np.ndarray) -> np.ndarray:
    """Minv C for C (B, p, E), with one step of iterative refinement where M is not well conditioned.

    The refinement (X += Minv (C - M X)) makes the normal equations of the kept columns hold
    to rounding even when they are nearly dependent (a raking cell whose weight tends to 0),
    so the residuals of a fit with an intercept still sum to 0.
    """
    X = Minv @ C
    bad = ~plain
    if bad.any():
        X[bad] += Minv[bad] @ (C[bad] - M[bad] @ X[bad])
    return X


def least_squares(M: np.ndarray, C: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The regression fit shared by GREG and raking: coefficients solving M b = C (B, p, E) on M's
    independent columns (0 for the others), and the inverse of M used (see module notes)."""
    Minv, plain = gram_pinv(M)
    return gram_solve(M, C, Minv, plain), Minv
