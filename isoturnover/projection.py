r"""Variable projection for a sum of exponentials after one diet switch.

After a single step switch at :math:`t = 0` with no diet table, growth or lag, the model is

.. math:: y(t) = a + \sum_{i=1}^n b_i e^{-k_i t^+},\qquad t^+ = \max(t, 0),

with :math:`a = \delta_{eq}` and :math:`b_i = (\delta_0 - \delta_{eq}) f_i`. For given rates
the model is linear in :math:`c = (a, b_1, \dots, b_n)`, so :math:`c` is solved by weighted
linear least squares and only the log-rates :math:`u_i = \ln k_i` are iterated (variable
projection; Golub & Pereyra 1973, *SIAM J. Numer. Anal.* 10:413–432).

The iteration is Newton's method on the reduced sum of squares
:math:`\phi(u) = \min_c \lVert W(y - X(u)c)\rVert^2` with its exact Hessian, the Schur
complement of the full Hessian of :math:`F(u, c)` in the linear block,

.. math:: \nabla^2\phi = F_{uu} - F_{uc} F_{cc}^{-1} F_{cu}

(evaluated at :math:`c^*(u)`, where :math:`\partial F/\partial c = 0`, so the gradient of
:math:`\phi` is :math:`F_u`), with Levenberg damping when the Hessian is not positive
definite or a step does not lower :math:`\phi`. Gauss–Newton alone (the Kaufman 1975
Jacobian) converges only linearly when the residuals are dominated by noise; the exact
Hessian converges quadratically.

With :math:`r = W(y - Xc)`, :math:`x_j` the weighted columns of :math:`X` (``x_0`` the
constant), :math:`d_i = \partial x_i/\partial u_i = -W k_i t^+ e^{-k_i t^+}` and
:math:`e_i = \partial d_i/\partial u_i = d_i + W k_i^2 (t^+)^2 e^{-k_i t^+}`, half the
derivatives of :math:`F = \lVert r\rVert^2` are

.. math::
   g_i = -b_i\, r\cdot d_i,\quad
   (F_{uu})_{il} = b_i b_l\, d_i\cdot d_l - \delta_{il} b_i\, r\cdot e_i,\quad
   (F_{uc})_{ij} = b_i\, d_i\cdot x_j - \delta_{j,i} r\cdot d_i,\quad
   F_{cc} = X^T W^2 X.

Only the pure step-switch model uses this path; every other model (diets, growth, lags,
fixed or tied parameters, bounds, robust losses) is fitted in the engine's coordinates.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["ProjectedFit", "project_exponentials", "level_constraints", "DRIFT_LIMIT",
           "DRIFT_STOP", "DRIFT_FLAT"]

#: :math:`k_{min}\,\tau_{max}` (slowest rate times the last time after the switch) below
#: which the slowest exponential barely bends over the data (the trust notes' "barely
#: moves", :math:`k \cdot span < 0.01`): :math:`e^{-k\tau} = 1 - k\tau + O((k\tau)^2)`,
#: its curvature a relative :math:`k\tau/2 < 0.5\,\%` of its own change. An iteration of
#: :func:`project_exponentials` that ends unconverged (evaluation budget spent, or no step
#: lowers φ beyond rounding) with the slowest rate below it is a *drift*: with free levels
#: the pool's amplitude grows without bound as its rate falls (:math:`b\,e^{-k\tau} \to
#: b - bk\tau`, a linear drift); with a fixed total change the pool becomes a constant
#: offset. The sum of squares only creeps towards its limit at :math:`k = 0` (relative
#: :math:`O(k\tau_{max})` above it), which no search reaches. (A rule of the project, not
#: a published cut-off.)
DRIFT_LIMIT = 1e-2

#: A step that lowers the slowest rate to :math:`k_{min}\tau_{max} <` ``DRIFT_STOP`` ends the
#: iteration at once as a drift (a half-life above about 6,900 sampling spans): the sum of
#: squares is then within a relative :math:`O(10^{-4})` of its limit, and further steps
#: only trade digits lost to cancellation (the amplitudes grow as :math:`1/k`).
DRIFT_STOP = 1e-4

#: A step that lowers the slowest rate, already below :data:`DRIFT_LIMIT`, while φ falls by
#: less than this relative amount also ends the iteration as a drift: the sum of squares is
#: flat along the way to :math:`k = 0` (what is left is rounding of the large amplitudes).
DRIFT_FLAT = 1e-8


class ProjectedFit:
    """Outcome of :func:`project_exponentials`.

    Attributes
    ----------
    rates : ndarray of shape (n,)
        Rates :math:`k_i` in 1/time unit, in the order of the starting rates (pools may
        have changed places: callers check).
    linear : ndarray of shape (n + 1,)
        :math:`(a, b_1, \\dots, b_n)` in the order of ``rates``: the plateau
        :math:`\\delta_{eq}` and the pool amplitudes :math:`(\\delta_0-\\delta_{eq}) f_i`.
    rss : float
        Weighted residual sum of squares.
    n_eval : int
        Number of evaluations of the reduced problem.
    converged : bool
        Newton's iteration met its tolerance within the iteration budget.
    drift : bool
        The slowest rate ran to 0 (:data:`DRIFT_LIMIT`, :data:`DRIFT_STOP`; ``converged``
        is then False): the fit is where the iteration stopped, its sum of squares within a
        relative :math:`O(k_{min}\tau_{max})` of the drift's limit.
    """

    __slots__ = ("rates", "linear", "rss", "n_eval", "converged", "drift")

    def __init__(self, rates, linear, rss, n_eval, converged, drift=False):
        self.rates = rates
        self.linear = linear
        self.rss = rss
        self.n_eval = n_eval
        self.converged = converged
        self.drift = drift


# -- small dense algebra in plain floats (matrices of order ≤ 4: cheaper than LAPACK calls)
def _cholesky(A):
    """Lower Cholesky factor of a symmetric list-of-lists matrix, or None if not SPD."""
    n = len(A)
    L = [[0.0] * n for _ in range(n)]
    for i in range(n):
        Li = L[i]
        for j in range(i + 1):
            Lj = L[j]
            s = A[i][j]
            for k in range(j):
                s -= Li[k] * Lj[k]
            if i == j:
                if not s > 0.0:
                    return None
                Li[i] = math.sqrt(s)
            else:
                Li[j] = s / Lj[j]
    return L


def _cho_solve(L, b):
    """Solve (L Lᵀ) x = b for a list ``b``."""
    n = len(b)
    y = [0.0] * n
    for i in range(n):
        s = b[i]
        Li = L[i]
        for k in range(i):
            s -= Li[k] * y[k]
        y[i] = s / Li[i]
    x = [0.0] * n
    for i in range(n - 1, -1, -1):
        s = y[i]
        for k in range(i + 1, n):
            s -= L[k][i] * x[k]
        x[i] = s / L[i][i]
    return x


class _Reduced:
    r"""The reduced problem on fixed data: Gram matrices of the basis and its derivatives.

    Rows of the basis matrix ``V``: the weighted constant, the weighted exponentials
    :math:`x_i`, :math:`p_i = -d_i` and :math:`e_i` (module docstring), and the weighted
    data centred on their weighted mean (the constant absorbs the shift; centring keeps
    :math:`\phi = y\cdot y - 2c\cdot h + c^T G c` clear of cancellation).

    Linear constraints ``C c = d`` on :math:`c = (a, b_1, \dots, b_n)` (a diet table fixes
    :math:`\sum_i b_i`, the total change, when one separation serves both diets) are
    honoured by :math:`c = c_p + N v` with :math:`N` a basis of the null space of ``C``:
    only :math:`v` is solved, and the Schur complement uses :math:`N^T G N`.
    """

    def __init__(self, t, y, w, n, C=None, d=None):
        self.tp = np.maximum(np.asarray(t, dtype=float), 0.0)
        self.w = np.asarray(w, dtype=float)
        y = np.asarray(y, dtype=float)
        w2 = self.w * self.w
        self.ybar = float(w2 @ y / w2.sum())
        self.n = n
        m = self.tp.size
        self.V = np.empty((3 * n + 2, m))
        self.V[0] = self.w
        self.V[3 * n + 1] = self.w * (y - self.ybar)
        self.yy = float(self.V[3 * n + 1] @ self.V[3 * n + 1])
        self.N = None
        if C is not None and len(C):
            C = np.atleast_2d(np.asarray(C, dtype=float))
            # the centred data shift the constant: C (c - ybar e_0) = d - ybar C e_0
            d = np.asarray(d, dtype=float) - self.ybar * C[:, 0]
            u_, sv, vt = np.linalg.svd(C)
            rank = int(np.sum(sv > 1e-12 * max(float(sv[0]), 1e-300)))
            # minimum-norm particular solution and null space from the one decomposition
            cp = vt[:rank].T @ ((u_[:, :rank].T @ d) / sv[:rank])
            self.cp = cp.tolist()
            self.N = vt[rank:].T.tolist()  # (q, q - rank)

    def at(self, k):
        """(c, φ, M, factor) at rates ``k`` (a list); None when the linear block is
        singular. ``c`` is centred (its constant lacks ``ybar``)."""
        n = self.n
        V = self.V
        A = np.multiply.outer(k, self.tp)  # k_i t
        x = V[1:n + 1]
        np.exp(-A, out=x)
        x *= self.w
        P = V[n + 1:2 * n + 1]
        np.multiply(A, x, out=P)  # p_i = k_i t x_i = -d_i
        A -= 1.0
        np.multiply(P, A, out=V[2 * n + 1:3 * n + 1])  # e_i = p_i (k_i t - 1)
        M = (V @ V.T).tolist()
        q = n + 1
        iy = 3 * n + 1
        G = [row[:q] for row in M[:q]]
        h = [M[j][iy] for j in range(q)]
        N = self.N
        if N is None:
            L = _cholesky(G)
            if L is None:
                return None
            c = _cho_solve(L, h)
            phi = self.yy - sum(ci * hi for ci, hi in zip(c, h))
            return c, max(phi, 0.0), M, L
        cp = self.cp
        r = len(N[0])
        Gcp = [sum(G[i][j] * cp[j] for j in range(q)) for i in range(q)]
        GN = [[sum(G[i][j] * N[j][a] for j in range(q)) for a in range(r)] for i in range(q)]
        GNN = [[sum(N[i][a] * GN[i][b_] for i in range(q)) for b_ in range(r)]
               for a in range(r)]
        hN = [sum(N[i][a] * (h[i] - Gcp[i]) for i in range(q)) for a in range(r)]
        L = _cholesky(GNN) if r else []
        if L is None:
            return None
        v = _cho_solve(L, hN) if r else []
        c = [cp[i] + sum(N[i][a] * v[a] for a in range(r)) for i in range(q)]
        Gc = [sum(G[i][j] * c[j] for j in range(q)) for i in range(q)]
        phi = self.yy - 2.0 * sum(ci * hi for ci, hi in zip(c, h)) + sum(
            ci * gi for ci, gi in zip(c, Gc))
        return c, max(phi, 0.0), M, L

    def newton_parts(self, c, M, L):
        """Gradient and exact Hessian of φ/2 in the log-rates (module docstring)."""
        n = self.n
        q = n + 1
        iy = 3 * n + 1
        b = c[1:]
        # r·v = M[v][y] - Σ_j c_j M[v][x_j] for a basis row v
        rP = [M[q + i][iy] - sum(c[j] * M[q + i][j] for j in range(q)) for i in range(n)]
        rE = [M[q + n + i][iy] - sum(c[j] * M[q + n + i][j] for j in range(q))
              for i in range(n)]
        # with d = -p: g_i = -b_i r·d_i = b_i r·p_i
        g = [b[i] * rP[i] for i in range(n)]
        Fuu = [[b[i] * b[l] * M[q + i][q + l] for l in range(n)] for i in range(n)]
        for i in range(n):
            Fuu[i][i] -= b[i] * rE[i]
        # (F_uc)_ij = b_i d_i·x_j - δ_{j,i+1} r·d_i = -b_i p_i·x_j + δ r·p_i
        Fuc = [[-b[i] * M[q + i][j] for j in range(q)] for i in range(n)]
        for i in range(n):
            Fuc[i][i + 1] += rP[i]
        N = self.N
        if N is not None:  # the linear block is v: F_uv = F_uc N
            r = len(N[0])
            Fuc = [[sum(row[j] * N[j][a] for j in range(q)) for a in range(r)]
                   for row in Fuc]
            if not r:
                return g, Fuu
        Z = [_cho_solve(L, row) for row in Fuc]  # (linear Hessian)⁻¹ F_cu, per pool
        m = len(Z[0])
        H = [[Fuu[i][l] - sum(Fuc[i][j] * Z[l][j] for j in range(m)) for l in range(n)]
             for i in range(n)]
        return g, H


def level_constraints(c0, M, cols, n):
    r"""Linear constraints that a model's two levels put on the projection's linear part.

    After one switch the levels are affine in the level parameters ψ (the ``cols`` of θ):
    :math:`(L_1, L_0) = (c_1, c_0) + P\psi`. The projection fits
    :math:`c = (a, b_1, \dots, b_n)` with :math:`(L_1, L_0) = (a, a + \sum_i b_i)`, which
    must lie in the image of :math:`P`: with :math:`\nu` spanning the left null space of
    :math:`P`, :math:`\nu \cdot ((a, a + \sum_i b_i) - (c_1, c_0)) = 0` (e.g. a
    separation shared by both diets fixes the total change :math:`\sum_i b_i`).

    Parameters
    ----------
    c0, M : ndarray
        The levels' map :math:`L = c_0 + M\theta` (first level first).
    cols : list of int
        Positions in θ of the parameters the levels use.
    n : int
        Number of pools.

    Returns
    -------
    tuple or None
        ``(c0, P, cols, C, d)`` with ``C c = d`` the constraints (``C`` and ``d`` None when
        there are none); None when ψ is not determined by the two levels (dependent
        columns of :math:`P`, or more than two level parameters).
    """
    P = np.stack([M[1, cols], M[0, cols]])  # (L1, L0) = c + P ψ
    m = P.shape[1]
    if m == 1:
        p1, p0 = float(P[0, 0]), float(P[1, 0])
        norm = math.hypot(p1, p0)
        if norm == 0:
            return None
        nu = np.array([[p0 / norm, -p1 / norm]])
    elif m == 2:
        det = float(P[0, 0] * P[1, 1] - P[0, 1] * P[1, 0])
        scale = float(np.max(np.abs(P)))
        if not abs(det) > 1e-12 * scale * scale:
            return None
        nu = np.zeros((0, 2))
    elif m == 0:
        nu = np.eye(2)
    else:
        return None  # more level parameters than the two levels can determine
    C = d = None
    if nu.size:  # ν·((a, a + Σ b) − (c1, c0)) = 0
        T = np.zeros((2, n + 1))
        T[0, 0] = 1.0
        T[1, :] = 1.0
        C, d = nu @ T, nu @ np.array([c0[1], c0[0]])
    return c0, P, cols, C, d


def project_exponentials(t, y, w, rates0, *, C=None, d=None, max_eval=None, xtol=1e-6,
                         detect_drift=True):
    r"""Least-squares fit of :math:`a + \sum_i b_i e^{-k_i t^+}` by variable projection.

    Parameters
    ----------
    t : ndarray of shape (m,)
        Times since the switch (days or the fit's unit); times before it count as 0.
    y : ndarray of shape (m,)
        Observations (‰ or the scale in use).
    w : ndarray of shape (m,)
        Weights :math:`1/\sigma_i` (ones for an unweighted fit).
    rates0 : sequence of float
        Starting rates, one per pool (1/time unit), all positive and distinct.
    C, d : array-like, optional
        Linear equality constraints ``C @ (a, b_1, …, b_n) = d`` on the linear parameters
        (for example a fixed total change :math:`\sum_i b_i`).
    max_eval : int, optional
        Evaluations of the reduced problem allowed (default ``40 + 20 n``); the fit is
        then returned unconverged.
    xtol : float, optional
        Converged when an undamped Newton step changes no log-rate by more than ``xtol``
        (Newton converges quadratically, so the log-rates are then within about
        ``xtol**2`` of the minimum).
    detect_drift : bool, default=True
        Stop at a drift (Notes); False iterates to the budget as without the rule.

    Notes
    -----
    The iteration ends as a drift (``drift=True``, unconverged) when the slowest rate heads
    to 0: an accepted step lowers its log-rate to :math:`k_{min} \max_i t_i^+ <`
    :data:`DRIFT_STOP`, or below :data:`DRIFT_LIMIT` with φ flat to a relative
    :data:`DRIFT_FLAT`; a step is refused below :data:`DRIFT_LIMIT` (φ no longer falls
    beyond the rounding of the large amplitudes); or the budget runs out below
    :data:`DRIFT_LIMIT` (see there). The minimum is then
    at the boundary :math:`k = 0`, which the iteration can only approach.

    Returns
    -------
    ProjectedFit or None
        None when the linear block is singular at the start (two rates equal, a rate run
        to 0 or to infinity): the caller then fits in the engine's coordinates.
    """
    n = len(rates0)
    red = _Reduced(t, y, w, n, C, d)
    if max_eval is None:
        max_eval = 40 + 20 * n
    # log-rates below which the drift rules apply (-inf: never)
    span = max(float(red.tp.max()), 1e-300)
    u_stop, u_drift = ((math.log(DRIFT_STOP / span), math.log(DRIFT_LIMIT / span))
                       if detect_drift else (-math.inf, -math.inf))
    if n == 1 and red.N is None:
        return _project_one(red, float(rates0[0]), max_eval, xtol, u_stop, u_drift)
    return _project_general(red, rates0, max_eval, xtol, u_stop, u_drift)


def _project_general(red, rates0, max_eval, xtol, u_stop=-math.inf, u_drift=-math.inf):
    """The Newton iteration of :func:`project_exponentials` on the reduced problem ``red``
    for any number of pools and constraints (lists of floats: matrices of order ≤ 4);
    ``u_stop``, ``u_drift``: the log-rates of :data:`DRIFT_STOP` and :data:`DRIFT_LIMIT`
    (−inf: no drift rule)."""
    n = red.n
    u = [math.log(float(k)) for k in rates0]
    cur = red.at([math.exp(v) for v in u])
    n_eval = 1
    if cur is None:
        return None
    c, phi, M, L = cur
    lam = 0.0
    converged = drift = False
    big = 0.0
    while n_eval < max_eval and not converged:
        g, H = red.newton_parts(c, M, L)
        scale = max(max(abs(H[i][i]) for i in range(n)), 1e-300)
        accepted = False
        while n_eval < max_eval:
            Hd = [[H[i][j] + (lam * scale if i == j else 0.0) for j in range(n)]
                  for i in range(n)]
            LH = _cholesky(Hd)
            if LH is None:
                lam = max(lam * 10.0, 1e-3)
                continue
            step = [-s for s in _cho_solve(LH, g)]
            big = max(abs(s) for s in step)
            if big > 2.0:  # at most a factor e^2 in any rate per step
                step = [s * 2.0 / big for s in step]
            u_new = [ui + si for ui, si in zip(u, step)]
            if max(abs(v) for v in u_new) > 700.0:
                lam = max(lam * 10.0, 1e-3)
                continue
            new = red.at([math.exp(v) for v in u_new])
            n_eval += 1
            # φ = y·y − c·h carries rounding of ~1e-16 y·y: near the minimum a step is
            # accepted when φ does not rise beyond that
            if new is not None and new[1] <= phi + 1e-13 * red.yy:
                accepted = True
                low_before, phi_before = min(u), phi
                u, (c, phi, M, L) = u_new, new
                if lam == 0.0 and big <= xtol:
                    converged = True
                elif min(u) < low_before and (min(u) < u_stop or (
                        min(u) < u_drift and phi_before - phi <= DRIFT_FLAT * phi_before)):
                    drift = True  # the slowest rate heads to 0 (DRIFT_STOP, DRIFT_FLAT)
                lam = 0.0 if lam <= 1e-6 else lam / 10.0
                break
            if min(u) < u_drift:
                break  # a drift: below DRIFT_LIMIT a refused step is rounding, not a minimum
            lam = max(lam * 10.0, 1e-3)
        if not accepted:
            # nothing lowers φ within rounding: a minimum if the Newton step was tiny, a
            # drift when the slowest rate has run below DRIFT_LIMIT (stalled by rounding)
            converged = big <= 1e-6 and not min(u) < u_drift
            break
        if converged or drift:
            break
    drift = drift or (not converged and min(u) < u_drift)
    lin = np.array(c, dtype=float)
    lin[0] += red.ybar
    return ProjectedFit(np.exp(u), lin, float(phi), n_eval, converged, drift)


def _project_one(red, k0, max_eval, xtol, u_stop=-math.inf, u_drift=-math.inf):
    """:func:`project_exponentials` for one pool and no constraint, in plain floats.

    The general loop written out for the scalar log-rate and the 2 × 2 linear block
    :math:`(a, b)`: the same operations in the same order (Cholesky factor of the block,
    Newton step on φ with the exact reduced Hessian, Levenberg damping, steps capped at 2
    in ln k, the same acceptance and convergence rules), so the result is the same to the
    last bit, without the list machinery of the general case.
    """
    V = red.V
    tp, w, yy = red.tp, red.w, red.yy

    def at(k):
        # rows of V: w, x = w e^{-k t}, p = k t x, e = p (k t − 1), centred data (module
        # docstring); (c0, c1, φ, Gram entries, Cholesky factor) or None when singular
        A = tp * k
        x = V[1]
        np.exp(-A, out=x)
        x *= w
        np.multiply(A, x, out=V[2])
        A -= 1.0
        np.multiply(V[2], A, out=V[3])
        M = (V @ V.T).tolist()
        g00 = M[0][0]
        if not g00 > 0.0:
            return None
        l00 = math.sqrt(g00)
        l10 = M[1][0] / l00
        s = M[1][1] - l10 * l10
        if not s > 0.0:
            return None
        l11 = math.sqrt(s)
        h0, h1 = M[0][4], M[1][4]
        y0 = h0 / l00
        c1 = ((h1 - l10 * y0) / l11) / l11
        c0 = (y0 - l10 * c1) / l00
        phi = yy - (c0 * h0 + c1 * h1)
        return c0, c1, max(phi, 0.0), M, (l00, l10, l11)

    u = math.log(k0)
    cur = at(math.exp(u))
    n_eval = 1
    if cur is None:
        return None
    c0, c1, phi, M, L = cur
    lam = 0.0
    converged = drift = False
    big = 0.0
    while n_eval < max_eval and not converged and not drift:
        # gradient and exact Hessian of φ/2 in ln k (module docstring, n = 1)
        P, E = M[2], M[3]
        rP = P[4] - (c0 * P[0] + c1 * P[1])
        rE = E[4] - (c0 * E[0] + c1 * E[1])
        g = c1 * rP
        fuu = c1 * c1 * P[2] - c1 * rE
        f0, f1 = -c1 * P[0], -c1 * P[1] + rP  # F_uc
        l00, l10, l11 = L
        y0 = f0 / l00
        z1 = ((f1 - l10 * y0) / l11) / l11
        z0 = (y0 - l10 * z1) / l00
        H = fuu - (f0 * z0 + f1 * z1)
        scale = max(abs(H), 1e-300)
        accepted = False
        while n_eval < max_eval:
            Hd = H + lam * scale
            if not Hd > 0.0:
                lam = max(lam * 10.0, 1e-3)
                continue
            lh = math.sqrt(Hd)
            step = -((g / lh) / lh)
            big = abs(step)
            if big > 2.0:  # at most a factor e^2 in the rate per step
                step = step * 2.0 / big
            u_new = u + step
            if abs(u_new) > 700.0:
                lam = max(lam * 10.0, 1e-3)
                continue
            new = at(math.exp(u_new))
            n_eval += 1
            # φ = y·y − c·h carries rounding of ~1e-16 y·y: near the minimum a step is
            # accepted when φ does not rise beyond that
            if new is not None and new[2] <= phi + 1e-13 * yy:
                accepted = True
                low_before, phi_before = u, phi
                u = u_new
                c0, c1, phi, M, L = new
                if lam == 0.0 and big <= xtol:
                    converged = True
                elif u < low_before and (u < u_stop or (
                        u < u_drift and phi_before - new[2] <= DRIFT_FLAT * phi_before)):
                    drift = True  # the rate heads to 0 (DRIFT_STOP, DRIFT_FLAT)
                lam = 0.0 if lam <= 1e-6 else lam / 10.0
                break
            if u < u_drift:
                break  # a drift: below DRIFT_LIMIT a refused step is rounding, not a minimum
            lam = max(lam * 10.0, 1e-3)
        if not accepted:
            # nothing lowers φ within rounding: a minimum if the Newton step was tiny, a
            # drift when the rate has run below DRIFT_LIMIT (stalled by rounding)
            converged = big <= 1e-6 and not u < u_drift
            break
    drift = drift or (not converged and u < u_drift)
    lin = np.array([c0, c1], dtype=float)
    lin[0] += red.ybar
    return ProjectedFit(np.exp([u]), lin, float(phi), n_eval, converged, drift)
