r"""Regularised solvers of diet-history reconstruction, and the switch-time rule.

Tikhonov smoothness with generalised cross-validation over all strengths at once
(:func:`tikhonov_gcv`) and batched solves, bounded by BVLS (:func:`tikhonov_batch`); total
variation by vectorised ADMM (:func:`tv_admm`, Boyd et al. 2011 §6.4.1, convergence by
§3.3.1), its degrees of freedom (:func:`tv_df`, the fused lasso's count of free pieces) and
the strength above which its solution is constant (:func:`tv_lambda_max`); switch times of a
reconstructed history (:func:`switch_times`). The formulas are in the docstring of
:mod:`isoturnover.inverse`. numpy and scipy only.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import linalg, optimize

__all__ = ["tikhonov_gcv", "tikhonov_batch", "tv_admm", "tv_df", "tv_lambda_max",
           "differences", "tikhonov_influence", "pieces_influence", "modified_residuals",
           "switch_times", "SWITCH_SHARE", "ADMM_TOL", "ADMM_MAX_ITER"]

#: A switch is a change larger than this share of the largest change.
SWITCH_SHARE = 0.5
#: (absolute, relative) tolerances of the ADMM residuals (Boyd et al. 2011 §3.3.1).
ADMM_TOL = (1e-7, 1e-6)
#: Most ADMM iterations.
ADMM_MAX_ITER = 20000
_POOL_SHARE = 0.1


def differences(p, order):
    """The difference matrix of ``order`` over ``p`` successive values.

    Parameters
    ----------
    p : int
        Number of values.
    order : int
        Order of the differences (1, 2 or 3).

    Returns
    -------
    ndarray of shape (p - order, p)
    """
    return np.diff(np.eye(p), n=order, axis=0)


def tikhonov_gcv(A, b, D, strengths=None):
    r"""Generalised cross-validation of Tikhonov regularisation over many strengths.

    :math:`G(\lambda) = n\,\lVert b - A x_\lambda\rVert^2 / (n - \mathrm{tr}\,H_\lambda)^2`
    with :math:`x_\lambda = (A^TA + \lambda D^TD)^{-1}A^Tb` and
    :math:`H_\lambda = A(A^TA + \lambda D^TD)^{-1}A^T` (Golub, Heath & Wahba 1979), all
    strengths at once from the eigenproblem :math:`D^TD v = \nu (A^TA + D^TD) v` (a ridge of
    :math:`10^{-12}\,\mathrm{tr}(A^TA)/p` keeps it definite).

    Parameters
    ----------
    A : ndarray of shape (n, p)
        The (weighted) operator.
    b : ndarray of shape (n,)
        The (weighted) data.
    D : ndarray of shape (q, p)
        The penalty's difference matrix.
    strengths : array-like, optional
        Strengths :math:`\lambda \ge 0` to evaluate; default 200 values log-spaced over
        :math:`10^{-6}` to :math:`10^{6}` times :math:`\mathrm{tr}(A^TA)/\mathrm{tr}(D^TD)`.

    Returns
    -------
    dict
        ``strengths``, ``scores`` (G), ``df`` (tr H), ``rss``, ``best`` (the minimising
        strength, refined by a bounded scalar minimisation in log λ when the grid is the
        default), ``solutions`` (x for each strength, shape (L, p)).
    """
    A = np.asarray(A, dtype=float)
    b = np.asarray(b, dtype=float)
    n, p = A.shape
    M = A.T @ A
    M = M + 1e-12 * max(np.trace(M), 1e-300) / p * np.eye(p)
    P = D.T @ D
    nu, V = linalg.eigh(P, M + P)
    nu = np.clip(nu, 0.0, 1.0)
    mu = 1.0 - nu
    c = V.T @ (A.T @ b)
    AV = A @ V

    def evaluate(lam):
        lam = np.atleast_1d(np.asarray(lam, dtype=float))
        den = mu[None] + lam[:, None] * nu[None]
        coef = c[None] / den
        x = coef @ V.T
        res = b[None] - coef @ AV.T
        rss = np.sum(res * res, axis=1)
        df = np.sum(mu[None] / den, axis=1)
        return n * rss / np.maximum(n - df, 1e-12) ** 2, df, rss, x

    default = strengths is None
    if default:
        scale = np.trace(M) / max(np.trace(P), 1e-300)
        strengths = scale * np.logspace(-6, 6, 200)
    strengths = np.asarray(strengths, dtype=float)
    scores, df, rss, x = evaluate(strengths)
    i = int(np.argmin(scores))
    best = float(strengths[i])
    if default and 0 < i < strengths.size - 1:
        lo, hi = np.log(strengths[i - 1]), np.log(strengths[i + 1])
        r = optimize.minimize_scalar(lambda u: float(evaluate(np.exp(u))[0][0]),
                                     bounds=(lo, hi), method="bounded",
                                     options={"xatol": 1e-6})
        if r.fun <= scores[i]:
            best = float(np.exp(r.x))
    return {"strengths": strengths, "scores": scores, "df": df, "rss": rss, "best": best,
            "solutions": x}


def tikhonov_batch(Aw, bw, D, lam, lo, hi):
    r"""Tikhonov solutions for each replicate at one strength.

    :math:`x = (A^TA + \lambda D^TD)^{-1}A^Tb` (batched ``numpy.linalg.solve``) without
    bounds; with bounds the stacked system :math:`[A; \sqrt\lambda D]` by BVLS
    (``scipy.optimize.lsq_linear``), one replicate at a time.

    Parameters
    ----------
    Aw : ndarray of shape (B, n, p) or (n, p)
        Weighted operator(s).
    bw : ndarray of shape (B, n)
        Weighted data of each replicate.
    D : ndarray of shape (q, p)
        Difference matrix.
    lam : float
        Strength λ >= 0.
    lo, hi : ndarray of shape (p,)
        Bounds (±inf when open).

    Returns
    -------
    ndarray of shape (B, p)
    """
    P = lam * (D.T @ D)
    if Aw.ndim == 2:
        Aw = np.broadcast_to(Aw, (bw.shape[0],) + Aw.shape)
    if np.all(np.isinf(lo)) and np.all(np.isinf(hi)):
        K = np.einsum("bni,bnj->bij", Aw, Aw) + P[None]
        rhs = np.einsum("bni,bn->bi", Aw, bw)
        try:
            return np.linalg.solve(K, rhs[..., None])[..., 0]
        except np.linalg.LinAlgError:
            return np.stack([np.linalg.lstsq(K[i], rhs[i], rcond=None)[0]
                             for i in range(K.shape[0])])
    root = math.sqrt(lam) * D
    out = np.empty((bw.shape[0], Aw.shape[2]))
    for i in range(bw.shape[0]):  # one bounded solve per replicate
        out[i] = optimize.lsq_linear(np.vstack([Aw[i], root]),
                                     np.r_[bw[i], np.zeros(D.shape[0])],
                                     bounds=(lo, hi), method="bvls").x
    return out


def tv_admm(Aw, bw, D, lam, lo, hi):
    r"""Total-variation solutions by ADMM for each replicate (:mod:`isoturnover.inverse`).

    Minimises :math:`\tfrac12\lVert A x - b\rVert^2 + \lambda\lVert Dx\rVert_1` in the box,
    splitting :math:`z_1 = Dx` (soft thresholding) and :math:`z_2 = x` (projection on the
    box), Boyd et al. 2011 §6.4.1; stopped by the residual test of §3.3.1 (:data:`ADMM_TOL`,
    checked every 10 iterations, at most :data:`ADMM_MAX_ITER`).

    Parameters
    ----------
    Aw : ndarray of shape (B, n, p) or (n, p)
        Weighted operator(s).
    bw : ndarray of shape (B, n)
        Weighted data of each replicate.
    D : ndarray of shape (q, p)
        Difference matrix.
    lam : ndarray of shape (B,)
        Strength of each replicate.
    lo, hi : ndarray of shape (p,)
        Bounds (±inf when open).

    Returns
    -------
    tuple of ndarray
        x (B, p), converged (B,) and the split differences :math:`z_1` (B, q).
    """
    B = bw.shape[0]
    p = D.shape[1]
    shared = Aw.ndim == 2
    if shared:
        AtA = Aw.T @ Aw
        Atb = bw @ Aw
        scale = np.trace(AtA) / p
    else:
        AtA = np.einsum("bni,bnj->bij", Aw, Aw)
        Atb = np.einsum("bni,bn->bi", Aw, bw)
        scale = np.trace(AtA, axis1=1, axis2=2) / p
    # ρ = sqrt(λ · tr(AᵀA)/p): the geometric mean of the data and penalty curvatures,
    # a few hundred iterations across the whole range of λ (measured)
    lam = np.asarray(lam, dtype=float)
    rho = np.maximum(np.sqrt(lam * np.asarray(scale, dtype=float)), 1e-12)
    DtD = D.T @ D
    if shared and np.all(rho == rho[0]):
        # one matrix for every replicate: x-updates are one matrix product (BLAS)
        Kinv1 = np.linalg.inv(AtA + rho[0] * (DtD + np.eye(p)))

        def solve(v):
            return v @ Kinv1.T
    else:
        Kinv = np.linalg.inv((AtA if not shared else AtA[None])
                             + rho[:, None, None] * (DtD + np.eye(p))[None])

        def solve(v):
            return np.matmul(Kinv, v[:, :, None])[:, :, 0]
    thr = (lam / rho)[:, None]
    x = solve(Atb)
    z1 = x @ D.T
    z2 = np.clip(x, lo, hi)
    u1 = np.zeros_like(z1)
    u2 = np.zeros_like(z2)
    eps_abs, eps_rel = ADMM_TOL
    done = np.zeros(B, dtype=bool)
    r_ = rho[:, None]
    for it in range(1, ADMM_MAX_ITER + 1):
        x = solve(Atb + r_ * ((z1 - u1) @ D + z2 - u2))
        Dx = x @ D.T
        z1_old, z2_old = z1, z2
        v = Dx + u1
        z1 = np.sign(v) * np.maximum(np.abs(v) - thr, 0.0)
        z2 = np.clip(x + u2, lo, hi)
        u1 = u1 + Dx - z1
        u2 = u2 + x - z2
        if it % 10 == 0:
            r = np.sqrt(np.sum((Dx - z1) ** 2, axis=1) + np.sum((x - z2) ** 2, axis=1))
            s = rho * np.sqrt(np.sum(((z1 - z1_old) @ D + z2 - z2_old) ** 2, axis=1))
            big = np.maximum(np.sqrt(np.sum(Dx ** 2, axis=1) + np.sum(x ** 2, axis=1)),
                             np.sqrt(np.sum(z1 ** 2, axis=1) + np.sum(z2 ** 2, axis=1)))
            dual = rho * np.sqrt(np.sum((u1 @ D + u2) ** 2, axis=1))
            tol_p = math.sqrt(p + D.shape[0]) * eps_abs + eps_rel * big
            tol_d = math.sqrt(p) * eps_abs + eps_rel * np.maximum(dual, 1e-12)
            done = (r <= tol_p) & (s <= tol_d)
            if done.all():
                break
    return np.clip(x, lo, hi), done, z1


def tv_df(z1, x, order, lo, hi):
    """Degrees of freedom of TV solutions: the number of free pieces.

    The limit of the IRLS linearisation as its floor η → 0: fused differences (the exact
    zeros of the ADMM's :math:`z_1 = Dx`) become constraints, leaving nonzero differences
    + ``order`` free directions (for first differences the constant pieces; Tibshirani &
    Taylor 2011, *Ann. Statist.* 39:1335–1371, the lasso's df for the fused case), less the
    pieces held at a bound (first differences).

    Parameters
    ----------
    z1 : ndarray of shape (B, q)
        The ADMM's split differences.
    x : ndarray of shape (B, p)
        The solutions.
    order : int
        Order of the differences.
    lo, hi : ndarray of shape (p,)
        Bounds (±inf when open).

    Returns
    -------
    ndarray of shape (B,)
    """
    nz = z1 != 0
    df = nz.sum(axis=1) + order
    if order == 1 and (np.isfinite(lo).any() or np.isfinite(hi).any()):
        at = (x <= lo + 1e-7 * (1 + np.abs(lo))) | (x >= hi - 1e-7 * (1 + np.abs(hi)))
        group = np.concatenate([np.zeros((x.shape[0], 1), int), np.cumsum(nz, axis=1)], 1)
        for b in np.flatnonzero(at.any(axis=1)):  # few rows: those touching a bound
            g = group[b]
            stuck = np.bincount(g, weights=~at[b]) == 0   # a piece entirely at a bound
            df[b] -= int(np.sum(stuck & (np.bincount(g) > 0)))
    return df.astype(float)


def tv_lambda_max(Aw, bw, D):
    """The smallest λ at which the TV solution lies in the null space of D.

    Exact for the unconstrained problem: ‖v‖∞ with Dᵀv = Aᵀ(b − A x_0), x_0 the best fit
    in null(D).

    Parameters
    ----------
    Aw : ndarray of shape (n, p)
        Weighted operator.
    bw : ndarray of shape (n,)
        Weighted data.
    D : ndarray of shape (q, p)
        Difference matrix.

    Returns
    -------
    float
    """
    N = linalg.null_space(D)
    AN = Aw @ N
    c = np.linalg.lstsq(AN, bw, rcond=None)[0]
    r = bw - AN @ c
    v = np.linalg.lstsq(D.T, Aw.T @ r, rcond=None)[0]
    return max(float(np.max(np.abs(v))), 1e-12)


def tikhonov_influence(Aw, D, lam):
    r"""The influence (hat) matrix of a Tikhonov solution.

    :math:`H = A(A^TA + \lambda D^TD)^{-1}A^T`, the map from the (weighted) data to the
    fitted values; its trace is the fit's effective degrees of freedom (Golub, Heath &
    Wahba 1979). With bounds it is that of the unbounded problem (an approximation where
    bounds are active).

    Parameters
    ----------
    Aw : ndarray of shape (n, p)
        Weighted operator.
    D : ndarray of shape (q, p)
        Difference matrix.
    lam : float
        Strength λ >= 0.

    Returns
    -------
    ndarray of shape (n, n)
    """
    K = Aw.T @ Aw + lam * (D.T @ D)
    try:
        return Aw @ np.linalg.solve(K, Aw.T)
    except np.linalg.LinAlgError:   # singular (λ = 0 with fewer samples than unknowns)
        return Aw @ np.linalg.lstsq(K, Aw.T, rcond=None)[0]


def pieces_influence(Aw, z1, x, lo, hi):
    r"""The influence matrix of a first-difference total-variation solution, linearised.

    With the fused differences (zeros of the ADMM's :math:`z_1`) as constraints and the
    pieces at a bound fixed (the limit of :func:`tv_df`), the fit is least squares on the
    free pieces: :math:`H = X X^+`, :math:`X = A G`, :math:`G` the indicator of each free
    piece; :math:`\mathrm{tr}\,H` is the number of free pieces.

    Parameters
    ----------
    Aw : ndarray of shape (n, p)
        Weighted operator.
    z1 : ndarray of shape (p - 1,) or (p,)
        The ADMM's split first differences at the solution; of shape (p,) when the value
        before the unknowns is known (its first entry the difference from it: the piece
        fused to the known value is fixed).
    x : ndarray of shape (p,)
        The solution.
    lo, hi : ndarray of shape (p,)
        Bounds (±inf when open).

    Returns
    -------
    ndarray of shape (n, n)
    """
    group = np.r_[0, np.cumsum(z1 != 0)]
    at = np.zeros(x.size, dtype=bool)
    fl, fh = np.isfinite(lo), np.isfinite(hi)
    at[fl] |= x[fl] <= lo[fl] + 1e-7 * (1 + np.abs(lo[fl]))
    at[fh] |= x[fh] >= hi[fh] - 1e-7 * (1 + np.abs(hi[fh]))
    if z1.size == x.size:   # a known value first: its piece is fixed
        at = np.r_[True, at]
        Aw = np.hstack([np.zeros((Aw.shape[0], 1)), Aw])
    free = [g for g in range(group[-1] + 1) if not np.all(at[group == g])]
    if not free:
        return np.zeros((Aw.shape[0], Aw.shape[0]))
    X = Aw @ (group[:, None] == np.array(free)[None]).astype(float)
    return X @ np.linalg.pinv(X)


def modified_residuals(resid, H):
    r"""Residuals rescaled to the variance of the errors, centred, and the residual df.

    For a linear smoother :math:`\hat y = H y` the residual :math:`e_i` has variance
    :math:`\sigma^2 [(I - H)(I - H)^T]_{ii} = \sigma^2(1 - 2h_{ii} + (HH^T)_{ii})`, so
    :math:`r_i = e_i / \sqrt{1 - 2h_{ii} + (HH^T)_{ii}}`, centred, has variance
    :math:`\sigma^2`: the modified residuals of Davison & Hinkley (1997, *Bootstrap Methods
    and their Application*, §6.2), :math:`e_i/\sqrt{1 - h_{ii}}` when :math:`H` is a
    projection. The residual degrees of freedom are
    :math:`\nu = \mathrm{tr}[(I - H)(I - H)^T] = n - 2\,\mathrm{tr}\,H + \mathrm{tr}(HH^T)`
    (:math:`E\,\mathrm{RSS} = \sigma^2\nu` without bias). With ``H`` None (no influence
    matrix) every :math:`h_{ii}` is taken as the mean :math:`\mathrm{df}/n`, the fit as a
    projection: :math:`r_i = e_i\sqrt{n/(n - \mathrm{df})}` (Davison & Hinkley §6.2)
    and :math:`\nu = n - \mathrm{df}`.

    Parameters
    ----------
    resid : ndarray of shape (n,)
        Weighted residuals.
    H : ndarray of shape (n, n) or float
        The influence matrix, or the effective degrees of freedom df when no matrix is
        available.

    Returns
    -------
    tuple
        (modified residuals, residual degrees of freedom ν). Residuals with
        :math:`1 - 2h_{ii} + (HH^T)_{ii} < 0.01` (observations the fit follows almost
        exactly, whose residual says next to nothing of the error) are left out, so the
        array may be shorter than ``resid``.
    """
    n = resid.size
    if np.ndim(H) == 0:
        nu = n - float(H)
        scale = np.full(n, max(nu, 1e-12) / n)
    else:
        R = np.eye(n) - H
        scale = np.sum(R * R, axis=1)          # [(I − H)(I − H)ᵀ]_ii
        nu = float(np.sum(scale))
    keep = scale >= 0.01
    r = resid[keep] / np.sqrt(scale[keep])
    return r - r.mean() if r.size else r, nu


def switch_times(edges, values, share=SWITCH_SHARE):
    """Switch times of a reconstructed history (rule in :mod:`isoturnover.inverse`).

    Parameters
    ----------
    edges : array-like of shape (J + 1,)
        Grid edges (time unit).
    values : array-like of shape (J + 1,)
        The diet before the grid, then one value per interval (‰).
    share : float, default=SWITCH_SHARE
        A switch changes the diet by more than this share of the largest change.

    Returns
    -------
    ndarray
        Switch times (time unit), increasing; empty when the history is constant or NaN.
    """
    e = np.asarray(edges, dtype=float)
    v = np.asarray(values, dtype=float)
    d = np.diff(v)                      # change at edges e_0 … e_{J-1}
    at = e[:d.size]
    if not np.all(np.isfinite(d)) or not np.any(d != 0):
        return np.array([])
    big = np.max(np.abs(d))
    marked = np.abs(d) > _POOL_SHARE * big
    sign = np.sign(d)
    new_run = marked & ~np.r_[False, marked[:-1] & (sign[1:] == sign[:-1])]
    run_id = np.cumsum(new_run) - 1
    idx = np.flatnonzero(marked)
    rid = run_id[idx]
    total = np.bincount(rid, weights=d[idx])
    mass = np.bincount(rid, weights=np.abs(d[idx]))
    centre = np.bincount(rid, weights=np.abs(d[idx]) * at[idx]) / mass
    keep = np.abs(total) > share * np.max(np.abs(total))
    return centre[keep]


