r"""The constrained refit behind a derived quantity's profile.

:class:`ConstrainedProblem` minimises the weighted sum of squares subject to
:math:`u(g(\theta(z))) = u_c` by eliminating one internal coordinate with a 1-D root solve,
so scipy's least squares runs on the others with the implicit-function Jacobian (see
:mod:`isoturnover.derived` for the profile it serves); :class:`QuantityScale` maps the
quantity to the search coordinate.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize

from . import quantities
from .profiles import BudgetExhausted, numerical_gradient

__all__ = ["QuantityScale", "ConstrainedProblem"]


class QuantityScale:
    """Monotone increasing map between a quantity c and the search coordinate u.

    ``plain`` (u = c) on the whole line, ``log_lo`` (u = ln(c − lo)) above a lower limit,
    ``log_hi`` (u = −ln(hi − c)) below an upper one, ``logit`` between two limits.

    Parameters
    ----------
    lo, hi : float
        The quantity's natural range (±inf where open).
    """

    def __init__(self, lo, hi):
        self.lo, self.hi = float(lo), float(hi)
        if math.isfinite(self.lo) and math.isfinite(self.hi):
            self.kind = "logit"
        elif math.isfinite(self.lo):
            self.kind = "log_lo"
        elif math.isfinite(self.hi):
            self.kind = "log_hi"
        else:
            self.kind = "plain"

    def to_u(self, c):
        """The search coordinate of quantity value ``c`` (NaN outside the range).

        Parameters
        ----------
        c : float
            Quantity value.

        Returns
        -------
        float
        """
        with np.errstate(all="ignore"):
            if self.kind == "plain":
                return c
            if self.kind == "log_lo":
                return math.log(c - self.lo) if c > self.lo else math.nan
            if self.kind == "log_hi":
                return -math.log(self.hi - c) if c < self.hi else math.nan
            s = (c - self.lo) / (self.hi - self.lo)
            return math.log(s / (1 - s)) if 0 < s < 1 else math.nan

    def du_dc(self, c):
        """Derivative du/dc at ``c``.

        Parameters
        ----------
        c : float
            Quantity value.

        Returns
        -------
        float
        """
        if self.kind == "plain":
            return 1.0
        if self.kind == "log_lo":
            return 1.0 / (c - self.lo)
        if self.kind == "log_hi":
            return 1.0 / (self.hi - c)
        w = self.hi - self.lo
        s = (c - self.lo) / w
        return 1.0 / (w * s * (1 - s))

    def from_u(self, u):
        """The quantity value at search coordinate ``u``.

        Parameters
        ----------
        u : float
            Search coordinate.

        Returns
        -------
        float
        """
        if self.kind == "plain":
            return u
        if self.kind == "log_lo":
            return self.lo + math.exp(u)
        if self.kind == "log_hi":
            return self.hi - math.exp(-u)
        return self.lo + (self.hi - self.lo) / (1 + math.exp(-u))


class ConstrainedProblem:
    """min ||r(z)||^2 subject to u(g(theta(z))) = u_c, by elimination of coordinate j.

    ``budget`` (an :class:`~isoturnover.profiles.EvaluationBudget`, set per profile side) is
    charged one per evaluation of the quantity and per residual or Jacobian evaluation;
    :meth:`solve` ends with the reason ``"budget"`` once it is spent. Trial points whose
    incorporation rates are not all positive are outside the model's domain (the quantity is
    NaN there) when the estimate is inside it."""

    def __init__(self, fit, fn, grad, scale, j, budget=None):
        self.fit = fit
        self.budget = budget
        self.kin = fit.kinetics
        self.guard = quantities.incorporation_rates_positive(self.kin, fit.state.theta)
        self.coords = fit.state.coords
        self.fn = fn
        self.grad = grad
        self.scale = scale
        self.j = j
        p = self.coords.size
        self.rest = np.array([i for i in range(p) if i != j], dtype=int)
        # the engine's residuals: weights (with a joint fit's block scale) and any extra
        # block (body masses, growth-curve prior) exactly as the fit minimised them
        prob = fit.state.engine.problem
        self.t = prob.t
        self.y = prob.y
        self.w = prob.w
        self.extra = prob.extra
        # box for the reduced problem: the coordinate map is flat beyond a log-gap of 4 and
        # logits beyond ±40 are fractions of 0 or 1 to machine precision
        lo = np.array(self.coords.lower, dtype=float)
        hi = np.full(p, np.inf)
        for c, lab in enumerate(self.coords.labels):
            if lab.startswith("log_gap"):
                lo[c], hi[c] = max(lo[c], -30.0), 4.0
            elif lab.startswith(("logit_", "stick_")):
                lo[c], hi[c] = max(lo[c], -40.0), 40.0
        self.lower, self.upper = lo, hi

    # the constraint function h(z) = u(g(theta(z))) - u_c and its gradient in z
    def _spend(self):
        if self.budget is not None:
            self.budget.spend()

    def _h(self, z, u_c):
        self._spend()
        try:
            with np.errstate(all="ignore"):
                th = self.coords.theta(z)
                if self.guard and not quantities.incorporation_rates_positive(self.kin, th):
                    return math.nan
                v = float(self.fn(th))
        except (ValueError, ArithmeticError, RuntimeError):
            return math.nan
        return self.scale.to_u(v) - u_c if math.isfinite(v) else math.nan

    def grad_h(self, z, parts=None):
        """Gradient of the constraint function in the coordinates.

        Parameters
        ----------
        z : ndarray
            Internal coordinates.
        parts : tuple of (ndarray, ndarray), optional
            ``coords.theta(z, jac=True)`` when the caller has it already (θ and dθ/dz).

        Returns
        -------
        ndarray
            d u(g(theta(z))) / dz (NaN outside the model's domain).
        """
        self._spend()
        if self.grad is not None:
            th, A = self.coords.theta(z, jac=True) if parts is None else parts
            if self.guard and not quantities.incorporation_rates_positive(self.kin, th):
                return np.full(z.size, np.nan)
            with np.errstate(all="ignore"):
                v = float(self.fn(th))
                gt = np.asarray(self.grad(th), dtype=float)
                return self.scale.du_dc(v) * (gt @ A)
        return numerical_gradient(lambda zz: self._h(zz, 0.0), z)

    def _dh_dzj(self, z):
        j = self.j
        if self.grad is not None:
            return float(self.grad_h(z)[j])
        hstep = 1e-6 * max(1.0, abs(z[j]))
        zp, zm = z.copy(), z.copy()
        zp[j] += hstep
        zm[j] -= hstep
        return (self._h(zp, 0.0) - self._h(zm, 0.0)) / (2 * hstep)

    def root(self, z, u_c):
        """z with z_j moved so that the constraint holds, or None."""
        j = self.j
        z = np.array(z, dtype=float)
        tol = 1e-12 * max(1.0, abs(u_c))
        hx = self._h(z, u_c)
        # Newton with step control
        if math.isfinite(hx):
            for _ in range(40):
                if abs(hx) <= tol:
                    return z
                d = self._dh_dzj(z)
                if not (math.isfinite(d) and d != 0):
                    break
                step = -hx / d
                step = max(min(step, 5.0), -5.0)
                for _ in range(30):
                    zn = z.copy()
                    zn[j] += step
                    if zn[j] < self.lower[j]:
                        zn[j] = self.lower[j]
                    hn = self._h(zn, u_c)
                    if math.isfinite(hn) and abs(hn) < abs(hx):
                        break
                    step *= 0.5
                else:
                    break
                z, hx = zn, hn
            if abs(hx) <= tol:
                return z
        # bracket and bisect
        x0 = z[j]
        base = self._h(z, u_c)

        def hj(x):
            zz = z.copy()
            zz[j] = x
            return self._h(zz, u_c)

        if not math.isfinite(base):
            return None
        for direction in (1.0, -1.0):
            step = 0.1 * max(1.0, abs(x0))
            a, ha = x0, base
            for _ in range(60):
                b = a + direction * step
                if b < self.lower[j]:
                    break
                hb = hj(b)
                if not math.isfinite(hb):
                    break
                if ha * hb <= 0:
                    lo_, hi_ = (a, b) if a < b else (b, a)
                    try:
                        x = optimize.brentq(hj, lo_, hi_, xtol=1e-15, rtol=4.5e-16,
                                            maxiter=200)
                    except (ValueError, RuntimeError):
                        return None
                    zz = z.copy()
                    zz[j] = x
                    return zz
                a, ha = b, hb
                step *= 2.0
        return None

    def solve(self, c, z_start):
        """Constrained minimum at quantity value c: (cost, z, ok, reason); the reason is
        ``"budget"`` when the evaluation budget ran out on the way."""
        try:
            return self._solve(c, z_start)
        except BudgetExhausted:
            return math.inf, None, False, "budget"

    def _solve(self, c, z_start):
        u_c = self.scale.to_u(c)
        z0 = self.root(z_start, u_c)
        if z0 is None:
            return math.inf, None, False, "unreachable"
        kin, t, y, w, coords, extra = self.kin, self.t, self.y, self.w, self.coords, self.extra
        n_res = t.size + (0 if extra is None else extra.size)

        def resid(zf):
            self._spend()
            with np.errstate(all="ignore"):
                th = coords.theta(zf)
                r = w * (y - kin.evaluate(t, th))
                if extra is not None:
                    r = np.concatenate([r, extra(th)[0]])
            return r

        if self.rest.size == 0:
            r = resid(z0)
            cost = float(r @ r)
            return cost, z0, math.isfinite(cost), ""
        cache = {"z": z0.copy()}
        rest, j = self.rest, self.j

        def full(zr):
            key = zr.tobytes()
            if cache.get("key") == key:
                return cache.get("zfull")
            guess = cache["z"].copy()
            guess[rest] = zr
            zf = self.root(guess, u_c)
            cache["key"] = key
            cache["zfull"] = zf
            if zf is not None:
                cache["z"] = zf
            return zf

        def fun(zr):
            zf = full(zr)
            if zf is None:
                return np.full(n_res, np.nan)
            return resid(zf)

        def jac(zr):
            zf = full(zr)
            if zf is None:
                return np.full((n_res, rest.size), np.nan)
            self._spend()
            with np.errstate(all="ignore"):
                th, A = coords.theta(zf, jac=True)
                _, Jm = kin.evaluate(t, th, jacobian=True)
                Jz = -(w[:, None] * (Jm @ A))
                if extra is not None:
                    Jz = np.vstack([Jz, extra(th)[1] @ A])
                gh = self.grad_h(zf, (th, A))
            dzj = -gh[rest] / gh[j]
            return Jz[:, rest] + Jz[:, [j]] * dzj[None, :]

        lo, hi = self.lower[rest], self.upper[rest]
        zr0 = np.clip(z0[rest], lo, hi)
        hard = bool(np.any(np.isfinite(self.coords.lower[rest])))  # a real bound (lag >= 0)
        for _ in range(2):  # a second, polishing run when the budget ran out
            try:
                with np.errstate(all="ignore"):
                    if hard or n_res < rest.size:
                        res = optimize.least_squares(
                            fun, zr0, jac=jac, method="trf", bounds=(lo, hi), xtol=1e-12,
                            ftol=1e-12, gtol=1e-12, x_scale="jac",
                            max_nfev=100 * (rest.size + 1))
                        x, status = res.x, res.status
                    else:
                        # no real bound: MINPACK's Levenberg–Marquardt (the caps on log-gaps
                        # and logits are where the coordinate map is flat anyway)
                        x, _, _, _, ier = optimize.leastsq(
                            fun, zr0, Dfun=jac, full_output=True, xtol=1e-12, ftol=1e-12,
                            gtol=1e-12, maxfev=100 * (rest.size + 1))
                        x = np.clip(x, lo, hi)
                        status = ier if ier in (1, 2, 3, 4) else (0 if ier == 5 else -1)
            except (ValueError, np.linalg.LinAlgError, FloatingPointError):
                return math.inf, None, False, "solver"
            if status != 0:
                break
            zr0 = x
        zf = full(x)
        if zf is None:
            return math.inf, None, False, "unreachable"
        r = fun(x)
        cost = float(r @ r)
        ok = bool(status > 0) and math.isfinite(cost)
        return cost, zf, ok, "" if ok else "solver"
