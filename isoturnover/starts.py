"""Starting values of a turnover fit: rates on a grid, the linear parameters solved.

For a grid of rate combinations (log-spaced between what the sampling span and the
shortest sampling interval can resolve), the parameters that enter the model linearly
(plateau, initial value, pool amplitudes) are solved by weighted linear least squares, and
the combinations are ranked by their residual sum of squares. Used by
:class:`~isoturnover.engine.Engine` and by the variable-projection fit
(:mod:`isoturnover.projection`).
"""

from __future__ import annotations

import functools
import itertools
import math

import numpy as np

__all__ = ["rate_grid", "step_linear_starts", "general_starts", "distinct_starts",
           "projected_rate_starts"]


@functools.lru_cache(maxsize=16)
def _combinations(size, n):
    """Every ascending choice of ``n`` of ``range(size)``, one per row (read-only)."""
    out = np.array(list(itertools.combinations(range(size), n)), dtype=int)
    out.setflags(write=False)
    return out


def rate_grid(t, switch0, size=12):
    r"""Log-spaced trial rates (1/time unit) that the sampling can resolve.

    From :math:`0.2/T` (a fifth of a turnover over the span :math:`T` after the switch) to
    :math:`5/\Delta` (five turnovers within the shortest sampling interval
    :math:`\Delta`, or the first sample time if shorter), ``size`` points.

    Parameters
    ----------
    t : ndarray
        Sampling times.
    switch0 : float
        Time of the (first) switch.
    size : int, optional
        Number of grid rates.

    Returns
    -------
    ndarray of shape (size,)
        Increasing rates.
    """
    s0 = float(switch0)
    after = sorted(v for v in np.asarray(t, dtype=float).tolist() if v > s0)
    tau = [v - s0 for v in after]
    if not tau:
        span = max(float(np.ptp(t)), 1.0)
        first = span / 10
    else:
        span = tau[-1]
        # the first time, or the shortest interval between distinct times if shorter
        gaps = [tau[i + 1] - tau[i] for i in range(len(tau) - 1) if after[i + 1] > after[i]]
        first = min(tau[0], min(gaps)) if gaps else tau[0]
        first = max(first, span * 1e-4)
    lo, hi = 0.2 / span, 5.0 / first
    if hi <= lo * 1.5:
        hi = lo * 50
    # equal steps in ln k, the last point exactly ln(hi) (as numpy.linspace places them)
    a, b = math.log(lo), math.log(hi)
    u = np.arange(size) * ((b - a) / (size - 1)) + a if size > 1 else np.array([a])
    u[-1] = b
    return np.exp(u)


def step_linear_starts(t, y, w, kin, fixed, n_keep):
    """Step switch without diet: for rate combinations on a grid, solve the linear part.

    y = a + sum_i b_i exp(-k_i t), with a = delta_eq and b_i = (delta0 - delta_eq) f_i, is
    linear in (a, b) for given rates; the weighted least-squares solution under the
    equality constraints that fixed values impose (a = delta_eq, a + sum b = delta0) is
    computed for every grid combination at once. Returns up to ``n_keep`` natural parameter
    vectors, best first (combinations with all fractions positive ranked first).
    """
    from itertools import combinations

    n = kin.pools
    names = kin.param_names
    grid = rate_grid(t, 0.0, size=12 if n <= 2 else 9)
    combos = np.array(list(combinations(range(grid.size - 1, -1, -1), n)), dtype=int)
    K = np.sort(grid[combos], axis=1)[:, ::-1]  # fastest first
    for i in range(n):
        if f"k{i + 1}" in fixed:
            K[:, i] = fixed[f"k{i + 1}"]
    if n > 1:
        K = K[np.all(np.diff(K, axis=1) < 0, axis=1)]
    K = np.unique(K, axis=0)
    if K.size == 0:
        return []
    tp = np.maximum(t, 0.0)
    E = np.exp(-K[:, :, None] * tp[None, None, :])  # (c, n, nt)
    X = np.concatenate([np.ones((K.shape[0], 1, t.size)), E], axis=1).transpose(0, 2, 1)
    q = n + 1
    rows, rhs = [], []
    if "delta_eq" in fixed:
        rows.append(np.eye(q)[0])
        rhs.append(fixed["delta_eq"])
    if "delta0" in fixed:
        rows.append(np.ones(q))
        rhs.append(fixed["delta0"])
    if rows:
        Cm, d = np.array(rows), np.array(rhs)
        u_p = np.linalg.lstsq(Cm, d, rcond=None)[0]
        _, sv, vt = np.linalg.svd(Cm)
        N = vt[len(rows):].T  # null space (q, r)
    else:
        u_p, N = np.zeros(q), np.eye(q)
    XN = X @ N  # (c, nt, r)
    res0 = y[None, :] - X @ u_p  # (c, nt)
    XNw = XN * w[None, :, None]
    G = np.einsum("cti,ctj->cij", XNw, XNw)
    h = np.einsum("cti,ct->ci", XNw, res0 * w[None, :])
    G = G + np.eye(G.shape[1])[None] * (1e-12 * np.trace(G, axis1=1, axis2=2)[:, None, None]
                                        + 1e-300)
    v = np.linalg.solve(G, h[..., None])[..., 0]
    U = u_p[None, :] + v @ N.T  # (c, q)
    rss = np.sum((w[None, :] * (y[None, :] - np.einsum("ctq,cq->ct", X, U))) ** 2, axis=1)
    a_, b_ = U[:, 0], U[:, 1:]
    tot = b_.sum(axis=1)
    good = np.isfinite(rss) & (tot != 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        F = b_ / tot[:, None]
    valid = np.all(F > 0, axis=1)
    order = np.lexsort((rss, ~valid))
    thetas = []
    for c in order:
        if not good[c]:
            continue
        f = F[c]
        if not valid[c]:
            f = np.clip(f, 0.02, None)
            f = f / f.sum()
        th = np.zeros(kin.n_params)
        th[names.index("delta0")] = a_[c] + tot[c]
        th[names.index("delta_eq")] = a_[c]
        th[kin.rate_index] = K[c]
        th[kin.fraction_index] = f
        thetas.append(th)
        if len(thetas) >= 8 * n_keep:
            break
    return distinct_starts(thetas, kin, n_keep)


def distinct_starts(thetas, kin, n_keep):
    out = []
    for th in thetas:
        lk = np.log(th[kin.rate_index])
        if all(np.max(np.abs(lk - np.log(o[kin.rate_index]))) > 0.3 for o in out):
            out.append(th)
        if len(out) >= n_keep:
            break
    return out


def general_starts(t, y, w, kin, fixed, n_keep):
    """Any diet history: rates on a grid (equal or fixed fractions), levels by linear LS."""
    from itertools import combinations

    n = kin.pools
    names = kin.param_names
    switch0 = float(kin.switch_times[0])
    grid = rate_grid(t, switch0, size=10 if n <= 2 else 8)
    level_idx = list(range(kin.n_level_params))
    free_lv = [j for j in level_idx if names[j] not in fixed]
    th0 = np.zeros(kin.n_params)
    for nm, v in fixed.items():
        th0[names.index(nm)] = v
    if kin.lag_index is not None and "lag" not in fixed:
        th0[kin.lag_index] = 0.0
    if kin.growth_rate_index is not None and "k_growth" not in fixed:
        th0[kin.growth_rate_index] = 0.0
    fixed_k = {i: fixed[names[kin.rate_index[i]]] for i in range(n)
               if names[kin.rate_index[i]] in fixed}
    ffix = [names[j] in fixed for j in kin.fraction_index]
    cands = []
    for combo in combinations(range(grid.size - 1, -1, -1), n):
        ks = np.sort(grid[list(combo)])[::-1]
        for i, v in fixed_k.items():
            ks[i] = v
        if n > 1 and np.any(np.diff(ks) >= 0):
            continue
        th = th0.copy()
        th[kin.rate_index] = ks
        if kin.fraction_index:
            if all(ffix):
                pass
            else:
                th[kin.fraction_index] = 1.0 / n
                for i, j in enumerate(kin.fraction_index):
                    if ffix[i]:
                        th[j] = fixed[names[j]]
                free = [j for i, j in enumerate(kin.fraction_index) if not ffix[i]]
                rest = 1.0 - sum(th[j] for i, j in enumerate(kin.fraction_index) if ffix[i])
                for j in free:
                    th[j] = rest / len(free)
        for j in free_lv:
            th[j] = 0.0
        with np.errstate(all="ignore"):
            y0, J = kin.evaluate(t, th, jacobian=True)
        if free_lv:
            X = J[:, free_lv]
            sol, *_ = np.linalg.lstsq(X * w[:, None], (y - y0) * w, rcond=None)
            th[free_lv] = sol
            with np.errstate(all="ignore"):
                yy = kin.evaluate(t, th)
        else:
            yy = y0
        rss = float(np.sum((w * (y - yy)) ** 2))
        if np.isfinite(rss):
            cands.append((rss, th))
    cands.sort(key=lambda c: c[0])
    return distinct_starts([c[1] for c in cands], kin, n_keep)


def projected_rate_starts(t, y, w, n, n_keep, switch0=0.0):
    r"""Rate combinations from a log grid, ranked by the sum of squares with the linear
    parameters solved (the starts of the variable-projection fit).

    For one step switch the model :math:`a + \sum_i b_i e^{-k_i t^+}` is linear in
    :math:`(a, b)` for given rates. The Gram matrix of the weighted constant, the weighted
    exponentials of every grid rate and the (centred) data is formed once; the normal
    equations of every combination of ``n`` grid rates are sub-matrices of it and are
    solved in one batched call.

    Parameters
    ----------
    t, y, w : ndarray of shape (m,)
        Times (days or the fit's unit), observations and weights :math:`1/\sigma`.
    n : int
        Number of pools.
    n_keep : int
        Number of rate vectors returned.
    switch0 : float, optional
        Time of the switch.

    Returns
    -------
    list of ndarray
        Up to ``n_keep`` rate vectors (fastest first), best first; combinations whose
        amplitudes all share one sign (positive pool fractions) rank first, and vectors
        closer than 0.3 in every log-rate to a better one are skipped.
    """
    t = np.asarray(t, dtype=float)
    tp = np.maximum(t - switch0, 0.0)
    grid = rate_grid(t, switch0, size=12 if n <= 2 else 9)
    G = grid.size
    w2 = w * w
    ybar = float(w2 @ y / w2.sum())
    V = np.empty((G + 2, t.size))
    V[0] = w
    V[1:G + 1] = np.exp(-np.multiply.outer(grid, tp)) * w
    V[G + 1] = w * (y - ybar)
    M = V @ V.T
    if n == 1:
        # the 2 × 2 normal equations of every grid rate, filled from M directly (the same
        # numbers as the general indexing below, without building index arrays)
        combos = np.arange(G)[:, None]
        mii = np.diagonal(M)[1:G + 1]
        ridge = 1e-12 * (M[0, 0] + mii) + 1e-300
        Gc = np.empty((G, 2, 2))
        Gc[:, 0, 0] = M[0, 0] + ridge
        Gc[:, 0, 1] = Gc[:, 1, 0] = M[0, 1:G + 1]
        Gc[:, 1, 1] = mii + ridge
        hc = np.empty((G, 2))
        hc[:, 0] = M[0, G + 1]
        hc[:, 1] = M[1:G + 1, G + 1]
        c = np.linalg.solve(Gc, hc[..., None])[..., 0]
        phi = M[G + 1, G + 1] - (c[:, 0] * hc[:, 0] + c[:, 1] * hc[:, 1])
        valid = (c[:, 1] > 0) | (c[:, 1] < 0)
    else:
        combos = _combinations(G, n)  # ascending rates
        S = np.concatenate([np.zeros((combos.shape[0], 1), dtype=int), combos + 1], axis=1)
        Gc = M[S[:, :, None], S[:, None, :]]
        hc = M[S, G + 1]
        q = n + 1
        Gc = Gc + np.eye(q) * (1e-12 * np.trace(Gc, axis1=1, axis2=2)[:, None, None]
                               + 1e-300)
        c = np.linalg.solve(Gc, hc[..., None])[..., 0]
        phi = M[G + 1, G + 1] - np.sum(c * hc, axis=1)
        b = c[:, 1:]
        valid = np.all(b > 0, axis=1) | np.all(b < 0, axis=1)
    order = np.lexsort((phi, ~valid))
    if n == 1 and 0 < order[0] < G - 1:
        # one pool: the vertex of the parabola through the best grid point and its two
        # neighbours (equal steps in ln k) is a closer start
        i = int(order[0])
        p_lo, p_mid, p_hi = float(phi[i - 1]), float(phi[i]), float(phi[i + 1])
        curv = p_lo - 2.0 * p_mid + p_hi
        if curv > 0:
            step = math.log(grid[1] / grid[0])
            shift = 0.5 * (p_lo - p_hi) / curv  # in grid steps, within (-1/2, 1/2)
            return [np.array([grid[i] * math.exp(shift * step)])]
    out = []
    for ci in order:
        if not np.isfinite(phi[ci]):
            continue
        lk = np.log(grid[combos[ci]][::-1])
        if all(np.max(np.abs(lk - np.log(o))) > 0.3 for o in out):
            out.append(np.exp(lk))
        if len(out) >= n_keep:
            break
    return out
