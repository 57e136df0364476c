r"""The fitting engine: internal coordinates, the least-squares problem, starting values,
extra data blocks and the finished fit's state.

Everything that fits — :class:`~isoturnover.TurnoverModel`, profiles, bootstraps,
simulations, shared fits — runs through this module; it knows nothing of files, tables or
lmfit (the model layer above wraps the parameters in :class:`lmfit.Parameters`).

Internal parametrisation (the optimizer's coordinates; users only see natural names):

* rates on the log scale with the pools ordered by construction: one anchor pool has
  coordinate :math:`\ln k_a`, the others are reached through positive log-rate gaps
  :math:`\ln k_i - \ln k_{i+1} = e^{w_i}`, so pools cannot swap labels (fastest first);
* fractions by stick-breaking: :math:`f_b = \operatorname{logistic}(v_0)`, the remaining
  fractions share :math:`1 - f_b` by further logistic sticks;
* plateaus, separations, ``delta0``, ``delta_eq``, ``k_growth`` as themselves; ``lag`` as
  itself with the bound ``lag >= 0``.

Profiling a rate or a fraction re-anchors the block at that pool, so the profiled
parameter is a single coordinate and the others stay ordered.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import special, stats
from scipy.optimize import least_squares, leastsq

from .errors import DataError, FitError
from .kinetics import TurnoverKinetics

__all__ = [
    "LOSSES",
    "Coordinates",
    "Solution",
    "Problem",
    "Engine",
    "FitState",
    "MassBlock",
    "GrowthPriorBlock",
    "prepare_data",
    "check_names",
    "check_growth_coverage",
    "as_1d",
]

LOSSES = ("linear", "soft_l1", "huber")
_LOGIT_LIMIT = 30.0  # |logit f| beyond this is a fraction at 0 or 1 (f < 1e-13)


def _logistic(v):
    return 1.0 / (1.0 + math.exp(-v)) if v >= 0 else math.exp(v) / (1.0 + math.exp(v))


def _logit(f):
    f = min(max(f, 1e-12), 1 - 1e-12)
    return math.log(f / (1 - f))


# ----------------------------------------------------------------------------------------
# Parameters tied to others by expressions
# ----------------------------------------------------------------------------------------
class Ties:
    """Natural parameters defined by expressions of other parameters (lmfit's ``expr``).

    Expressions are parsed once and evaluated with asteval, the interpreter lmfit uses for
    its own constraints, so they mean exactly what they mean in :class:`lmfit.Parameters`.
    They may use the model's parameter names and asteval's functions (``exp``, ``log``,
    ``sqrt`` …); ties of ties are evaluated in dependency order.

    Parameters
    ----------
    kin : TurnoverKinetics
    exprs : dict of str
        Parameter name → expression.
    """

    def __init__(self, kin: TurnoverKinetics, exprs: dict):
        import ast

        from asteval import Interpreter

        names = list(kin.param_names)
        self.kin = kin
        self.exprs = dict(exprs)
        self._interp = Interpreter()
        deps = {}
        parsed = {}
        for nm, ex in self.exprs.items():
            if nm not in names:
                raise DataError(f"'params' ties unknown parameter {nm!r}; this model's "
                                f"parameters are {', '.join(names)}")
            try:
                tree = ast.parse(str(ex), mode="eval")
            except SyntaxError:
                raise DataError(f"'params[{nm!r}].expr' is not a valid expression: {ex!r}") \
                    from None
            used = {n.id for n in ast.walk(tree) if isinstance(n, ast.Name)}
            unknown = sorted(u for u in used if u not in names and u not in self._interp.symtable)
            if unknown:
                raise DataError(
                    f"'params[{nm!r}].expr' = {ex!r} uses {', '.join(unknown)}, which is not a "
                    f"parameter of this model ({', '.join(names)})")
            deps[nm] = sorted(u for u in used if u in names)
            parsed[nm] = self._interp.parse(str(ex))
        order, done, visiting = [], set(), set()

        def visit(nm):
            if nm in done:
                return
            if nm in visiting:
                raise DataError(f"'params' expressions refer to each other in a circle "
                                f"(through {nm!r})")
            visiting.add(nm)
            for d in deps[nm]:
                if d in self.exprs:
                    visit(d)
            visiting.discard(nm)
            done.add(nm)
            order.append(nm)

        for nm in self.exprs:
            visit(nm)
        self.order = [(names.index(nm), parsed[nm], [names.index(d) for d in deps[nm]])
                      for nm in order]
        self.names = tuple(order)
        self.index = [j for j, _, _ in self.order]

    def _eval(self, code, theta):
        sym = self._interp.symtable
        for nm, v in zip(self.kin.param_names, theta):
            sym[nm] = float(v)
        val = self._interp.run(code, with_raise=False)
        if self._interp.error:
            msg = self._interp.error[0].get_error()[1]
            self._interp.error = []
            raise DataError(f"a 'params' expression could not be evaluated: {msg}")
        return float(val)

    def apply(self, theta) -> np.ndarray:
        """θ with every tied slot set from its expression."""
        th = np.array(theta, dtype=float)
        for j, code, _ in self.order:
            th[j] = self._eval(code, th)
        return th

    def apply_with_jacobian(self, theta):
        r"""(:meth:`apply` of θ, dθ_out/dθ_in) — tied columns of the Jacobian are zero.

        The expressions' partial derivatives are central differences (step
        :math:`10^{-6}\max(1, |\theta_i|)`, exact to rounding for the linear ties that are
        usual); the chain through ties of ties is applied row by row in dependency order.
        """
        th = self.apply(theta)
        n = th.size
        T = np.eye(n)
        for j, _, _ in self.order:
            T[j, j] = 0.0
        for j, code, dep in self.order:
            row = np.zeros(n)
            for i in dep:
                h = 1e-6 * max(1.0, abs(th[i]))
                tp, tm = th.copy(), th.copy()
                tp[i] += h
                tm[i] -= h
                d = (self._eval(code, tp) - self._eval(code, tm)) / (2 * h)
                row += d * T[i]
            T[j] = row
        return th, T


# ----------------------------------------------------------------------------------------
# Internal coordinates
# ----------------------------------------------------------------------------------------
class Coordinates:
    """Map between the optimizer's coordinates z and the natural parameters theta.

    Parameters
    ----------
    kin : TurnoverKinetics
    fixed : dict name -> value (natural)
    rate_anchor, fraction_anchor : int or None
        Pool index (0 = fastest) whose rate / fraction is a coordinate of its own.
    ties : Ties, optional
        Parameters set by expressions of others: not coordinates; their θ slots are filled
        from the expressions and dθ/dz carries the expressions' derivatives.
    bounds : dict name -> (lower, upper), optional
        Bounds on plain (identity-mapped) parameters, e.g. a separation between limits.
    """

    def __init__(self, kin: TurnoverKinetics, fixed: dict, rate_anchor=None,
                 fraction_anchor=None, ties=None, bounds=None):
        self.kin = kin
        names = kin.param_names
        self.fixed = dict(fixed)
        self.ties = ties
        tied = set(ties.names) if ties is not None else set()
        k_idx = [j for j in kin.rate_index if names[j] not in tied]
        f_idx = list(kin.fraction_index)
        if rate_anchor is not None:
            j_anchor = kin.rate_index[rate_anchor]
            if j_anchor not in k_idx:
                raise FitError(f"{names[j_anchor]} is set by an expression; it cannot be "
                               "profiled as a coordinate")
            rate_anchor = k_idx.index(j_anchor)
        n = len(k_idx)
        self.n_pools = n
        fixed_k = [i for i, j in enumerate(k_idx) if names[j] in fixed]
        fixed_f = [i for i, j in enumerate(f_idx) if names[j] in fixed]
        if len(fixed_k) not in (0, 1, n):
            raise FitError(
                f"fix one rate or all of them; got fixed rates "
                f"{', '.join(names[k_idx[i]] for i in fixed_k)}"
            )
        if f_idx and len(fixed_f) not in (0, 1, n - 1, n):
            raise FitError(
                f"fix one pool fraction or all of them; got fixed fractions "
                f"{', '.join(names[f_idx[i]] for i in fixed_f)}"
            )
        if fixed_k and len(fixed_k) < n:
            rate_anchor = fixed_k[0]
        if rate_anchor is None:
            rate_anchor = n - 1
        self.rate_anchor = rate_anchor
        self.rates_fixed = len(fixed_k) == n
        self.u_fixed = len(fixed_k) >= 1
        if f_idx:
            nf = len(f_idx)
            if len(fixed_f) >= nf - 1:
                self.fractions_fixed = True
                fvals = np.zeros(nf)
                given = {i: float(fixed[names[f_idx[i]]]) for i in fixed_f}
                for i, v in given.items():
                    fvals[i] = v
                if len(given) == nf - 1:
                    missing = next(i for i in range(nf) if i not in given)
                    fvals[missing] = 1.0 - sum(given.values())
                if np.any(fvals < 0) or abs(fvals.sum() - 1) > 1e-9:
                    raise FitError(
                        f"fixed pool fractions must be non-negative and sum to 1; got "
                        f"{fvals.tolist()}"
                    )
                self.fixed_fractions = fvals
                self.fraction_anchor = 0
                self.v0_fixed = True
            else:
                self.fractions_fixed = False
                if fixed_f:
                    fraction_anchor = fixed_f[0]
                if fraction_anchor is None:
                    fraction_anchor = 0
                self.fraction_anchor = fraction_anchor
                self.v0_fixed = len(fixed_f) == 1
        else:
            self.fractions_fixed = True
            self.fixed_fractions = np.zeros(0)
            self.fraction_anchor = 0
            self.v0_fixed = True
        self.k_idx, self.f_idx = k_idx, f_idx
        # identity coordinates
        other = [j for j in range(kin.n_params) if j not in k_idx and j not in f_idx
                 and names[j] not in tied]
        self.id_free = [j for j in other if names[j] not in fixed]
        self.id_fixed = [j for j in other if names[j] in fixed]
        # order of stick-breaking: anchor first, the others in pool order
        nf = len(f_idx)
        self.stick_order = [self.fraction_anchor] + [
            i for i in range(nf) if i != self.fraction_anchor
        ]
        # coordinate layout
        labels = [names[j] for j in self.id_free]
        if not self.rates_fixed:
            if not self.u_fixed:
                labels.append(f"log_{names[k_idx[rate_anchor]]}")
            labels += [f"log_gap_{i + 1}_{i + 2}" for i in range(n - 1)]
        if not self.fractions_fixed:
            if not self.v0_fixed:
                labels.append(f"logit_{names[f_idx[self.fraction_anchor]]}")
            labels += [f"stick_{i}" for i in range(1, nf - 1)]
        self.labels = labels
        self.size = len(labels)
        self._n_id = len(self.id_free)
        self._n_rate = 0 if self.rates_fixed else (n - 1 + (0 if self.u_fixed else 1))
        self._n_frac = 0 if self.fractions_fixed else (nf - 2 + (0 if self.v0_fixed else 1))
        # bounds: lag >= 0, and the user's bounds on plain parameters
        lo = np.full(self.size, -np.inf)
        hi = np.full(self.size, np.inf)
        bounds = bounds or {}
        for c, j in enumerate(self.id_free):
            b_lo, b_hi = bounds.get(names[j], (-np.inf, np.inf))
            lo[c], hi[c] = b_lo, b_hi
            if names[j] == "lag":
                lo[c] = max(lo[c], 0.0)
        self.lower = lo
        self.upper = hi
        self.has_bounds = bool(np.any(np.isfinite(lo)) or np.any(np.isfinite(hi)))
        # fixed natural values
        self._theta_fixed = np.zeros(kin.n_params)
        for nm, v in fixed.items():
            self._theta_fixed[names.index(nm)] = float(v)

    # -- forward map --------------------------------------------------------------------
    def theta(self, z, jac=False):
        kin = self.kin
        th = self._theta_fixed.copy()
        A = np.zeros((kin.n_params, self.size)) if jac else None
        c = 0
        for j in self.id_free:
            th[j] = z[c]
            if jac:
                A[j, c] = 1.0
            c += 1
        n = self.n_pools
        # rates
        if not self.rates_fixed:
            a = self.rate_anchor
            if self.u_fixed:
                u = math.log(self._theta_fixed[self.k_idx[a]])
                cu = None
            else:
                u = z[c]
                cu = c
                c += 1
            # gaps between pool i and i+1; capped (a log-rate gap of e^4 ≈ 55 is a rate
            # ratio of ~1e23: the pools are then separate whatever the data)
            g = np.exp(np.minimum(z[c:c + n - 1], 4.0))
            cg = c
            c += n - 1
            lk = np.empty(n)
            lk[a] = u
            for i in range(a - 1, -1, -1):
                lk[i] = lk[i + 1] + g[i]
            for i in range(a + 1, n):
                lk[i] = lk[i - 1] - g[i - 1]
            lk = np.clip(lk, -700.0, 700.0)
            k = np.exp(lk)
            th[self.k_idx] = k
            if jac:
                for i in range(n):
                    row = self.k_idx[i]
                    if cu is not None:
                        A[row, cu] = k[i]
                    for l_ in range(n - 1):
                        if i <= l_ < a:
                            A[row, cg + l_] = k[i] * g[l_]
                        elif a <= l_ < i:
                            A[row, cg + l_] = -k[i] * g[l_]
        # fractions
        if self.f_idx:
            if self.fractions_fixed:
                th[self.f_idx] = self.fixed_fractions
            else:
                nf = len(self.f_idx)
                order = self.stick_order
                vs = []
                if self.v0_fixed:
                    f0 = self._theta_fixed[self.f_idx[order[0]]]
                    vs.append(("fixed", f0))
                else:
                    vs.append(("coord", c))
                    c += 1
                for _ in range(nf - 2):
                    vs.append(("coord", c))
                    c += 1
                rem = 1.0
                drem = np.zeros(self.size)
                fvals = np.empty(nf)
                dF = np.zeros((nf, self.size)) if jac else None
                for pos in range(nf - 1):
                    kind, val = vs[pos]
                    if kind == "fixed":
                        # first stick fixed: f = val directly
                        s = val / rem if rem > 0 else 0.0
                        fvals[order[pos]] = val
                        if jac:
                            dF[order[pos]] = 0.0
                        rem_new = rem - val
                        if jac:
                            drem = drem.copy()
                        rem = rem_new
                        continue
                    s = _logistic(z[val])
                    fi = rem * s
                    fvals[order[pos]] = fi
                    if jac:
                        dfi = drem * s
                        dfi[val] += rem * s * (1 - s)
                        dF[order[pos]] = dfi
                        drem = drem - dfi
                    rem = rem - fi
                fvals[order[nf - 1]] = rem
                if jac:
                    dF[order[nf - 1]] = drem
                th[self.f_idx] = fvals
                if jac:
                    A[self.f_idx] = dF
        if self.ties is not None:
            if jac:
                th, T = self.ties.apply_with_jacobian(th)
                A = T @ A
            else:
                th = self.ties.apply(th)
        return (th, A) if jac else th

    def clamp(self, z):
        """Pull coordinates that ran off to absurd values back to where the map saturates.

        A rate driven to 0 (log-rate → −∞), pools merging (log-gap → −∞) or a fraction at 0
        or 1 (logit → ±∞) leave θ unchanged within double precision after clamping, but keep
        z finite and sensible for derivatives, profiles and covariances.
        """
        z = np.array(z, dtype=float)
        for i, lab in enumerate(self.labels):
            if lab.startswith("log_gap"):
                z[i] = min(max(z[i], -60.0), 4.0)
            elif lab.startswith("log_"):
                z[i] = min(max(z[i], -700.0), 700.0)
            elif lab.startswith(("logit_", "stick_")):
                z[i] = min(max(z[i], -40.0), 40.0)
        return z

    # -- inverse map (starting values) ----------------------------------------------------
    def z_from_theta(self, th):
        th = np.asarray(th, dtype=float)
        z = []
        for j in self.id_free:
            z.append(th[j])
        n = self.n_pools
        if not self.rates_fixed:
            k = np.maximum(th[self.k_idx], 1e-300)
            lk = np.log(k)
            if not self.u_fixed:
                z.append(lk[self.rate_anchor])
            for i in range(n - 1):
                gap = lk[i] - lk[i + 1]
                z.append(math.log(max(gap, 1e-8)))
        if self.f_idx and not self.fractions_fixed:
            f = np.clip(th[self.f_idx], 1e-12, 1.0)
            f = f / f.sum()
            order = self.stick_order
            rem = 1.0
            for pos in range(len(order) - 1):
                fi = f[order[pos]]
                if pos == 0 and self.v0_fixed:
                    rem -= self._theta_fixed[self.f_idx[order[0]]]
                    continue
                s = fi / rem if rem > 1e-300 else 0.5
                z.append(_logit(min(max(s, 1e-12), 1 - 1e-12)))
                rem -= fi
        z = np.asarray(z, dtype=float)
        if self.has_bounds:
            z = np.clip(z, self.lower, self.upper)
        return z


# ----------------------------------------------------------------------------------------
# The least-squares problem
# ----------------------------------------------------------------------------------------
@dataclass
class _LMResult:
    """The parts of a MINPACK result the engine uses (status as in least_squares)."""

    x: np.ndarray
    ier: int
    nfev: int
    message: str

    @property
    def status(self) -> int:
        # leastsq: 1-4 converged; 5 = maxfev reached; 6-8 tolerances too small
        return self.ier if self.ier in (1, 2, 3, 4) else (0 if self.ier == 5 else -1)


@dataclass
class Solution:
    z: np.ndarray
    theta: np.ndarray
    cost: float  # sum of squared weighted residuals (linear loss) at the solution
    status: int
    nfev: int
    message: str
    success: bool
    jac_z: np.ndarray | None = None
    extra: dict = field(default_factory=dict)


class Problem:
    """Residuals r = w (y − model) of one data series for a given coordinate map."""

    def __init__(self, kin: TurnoverKinetics, t, y, w, loss="linear", f_scale=1.0,
                 extra=None):
        self.kin = kin
        self.t = np.asarray(t, dtype=float)
        self.y = np.asarray(y, dtype=float)
        self.w = np.asarray(w, dtype=float)
        self.loss = loss
        self.f_scale = f_scale
        # extra residual block: callable theta -> (r, dr/dtheta), e.g. body masses
        self.extra = extra

    def evaluate(self, coords: Coordinates, z):
        """Weighted residuals r(z) and their Jacobian dr/dz in internal coordinates."""
        th, A = coords.theta(z, jac=True)
        yy, J = self.kin.evaluate(self.t, th, jacobian=True)
        r = self.w * (self.y - yy)
        Jz = -(self.w[:, None] * (J @ A))
        if self.extra is not None:
            r2, J2 = self.extra(th)
            r = np.concatenate([r, r2])
            Jz = np.vstack([Jz, J2 @ A])
        return r, Jz

    def cached_evaluate(self, coords: Coordinates):
        """``f(z) -> {"r": residuals, "J": Jacobian}``, evaluated once per distinct z (solvers
        ask for the residuals and the Jacobian at the same point separately)."""
        cache = {}

        def f(z):
            key = z.tobytes()
            if cache.get("key") != key:
                cache["r"], cache["J"] = self.evaluate(coords, z)
                cache["key"] = key
            return cache

        return f

    def solve(self, coords: Coordinates, z0, *, tol=1e-14, max_nfev=None) -> Solution:
        """Least-squares solution from ``z0``: MINPACK ``lmder`` without bounds, scipy's
        trust-region reflective method with bounds or a robust loss."""
        t = self.t
        extra = self.extra
        _eval = self.cached_evaluate(coords)

        def fun(z):
            return _eval(z)["r"]

        def jac(z):
            return _eval(z)["J"]

        z0 = np.asarray(z0, dtype=float)
        if coords.size == 0:
            r = fun(z0)
            th = coords.theta(z0)
            return Solution(z0, th, float(r @ r), 1, 1, "nothing to fit", True,
                             np.zeros((t.size, 0)))
        n_res = t.size + (0 if extra is None else extra.size)
        use_lm = (not coords.has_bounds) and self.loss == "linear" and n_res >= coords.size
        if max_nfev is None:
            max_nfev = 100 * (coords.size + 1)
        with np.errstate(over="ignore", under="ignore", invalid="ignore", divide="ignore"):
            try:
                if use_lm:
                    # MINPACK lmder directly (what least_squares(method="lm") calls, without
                    # its per-call overhead); diag scaling from the Jacobian's columns
                    x, _, info, msg, ier = leastsq(fun, z0, Dfun=jac, full_output=True,
                                                   xtol=tol, ftol=tol, gtol=tol,
                                                   maxfev=max_nfev)
                    res = _LMResult(x, ier, info["nfev"], msg)
                else:
                    bounds = (coords.lower, coords.upper)
                    z0b = np.clip(z0, coords.lower + 1e-12 * np.isfinite(coords.lower),
                                  coords.upper - 1e-12 * np.isfinite(coords.upper))
                    res = least_squares(fun, z0b, jac=jac, method="trf", bounds=bounds,
                                        xtol=max(tol, 1e-15), ftol=max(tol, 1e-15),
                                        gtol=max(tol, 1e-15), max_nfev=max_nfev,
                                        loss=self.loss, f_scale=self.f_scale, x_scale="jac")
            except (ValueError, FloatingPointError, np.linalg.LinAlgError) as e:
                return Solution(z0, coords.theta(z0), math.inf, -1, 0, f"solver error: {e}",
                                 False)
        z = coords.clamp(np.asarray(res.x, dtype=float))
        r = fun(z)
        cost = float(r @ r)
        ok = bool(res.status > 0) and np.isfinite(cost)
        return Solution(z, coords.theta(z), cost, int(res.status), int(res.nfev),
                         str(res.message), ok, jac(z).copy())

    def solve_lmfit(self, coords: Coordinates, z0, *, tol=1e-12, max_nfev=None) -> Solution:
        """The same problem solved by :class:`lmfit.Minimizer` in the internal coordinates.

        ``least_squares`` with this problem's analytic Jacobian passed as ``jac=`` (lmfit
        hands it the current :class:`lmfit.Parameters`), bounds passed to scipy as they are
        (no lmfit bound transform), the problem's loss. The lmfit result is kept in
        ``solution.extra["lmfit"]``.
        """
        import lmfit

        labels = list(coords.labels)
        z0 = np.asarray(z0, dtype=float)
        if coords.size == 0:
            return self.solve(coords, z0)
        pars = lmfit.Parameters()
        for c, lab in enumerate(labels):
            lo, hi = float(coords.lower[c]), float(coords.upper[c])
            pars.add(lab, value=float(min(max(z0[c], lo), hi)), min=lo, max=hi)
        _eval = self.cached_evaluate(coords)

        def ev(p):
            return _eval(np.array([p[lab].value for lab in labels], dtype=float))

        def resid(p):
            return ev(p)["r"]

        def jac(p, *args, **kwargs):
            return ev(p)["J"]

        if max_nfev is None:
            max_nfev = 100 * (coords.size + 1)
        mini = lmfit.Minimizer(resid, pars, nan_policy="raise")
        try:
            with np.errstate(over="ignore", under="ignore", invalid="ignore",
                             divide="ignore"):
                res = mini.minimize(method="least_squares", jac=jac, xtol=max(tol, 1e-15),
                                    ftol=max(tol, 1e-15), gtol=max(tol, 1e-15),
                                    max_nfev=max_nfev, loss=self.loss, f_scale=self.f_scale,
                                    x_scale="jac")
        except (ValueError, FloatingPointError, np.linalg.LinAlgError) as e:
            return Solution(z0, coords.theta(z0), math.inf, -1, 0, f"solver error: {e}",
                            False)
        z = coords.clamp(np.array([res.params[lab].value for lab in labels], dtype=float))
        r, J = self.evaluate(coords, z)
        cost = float(r @ r)
        ok = bool(res.success) and np.isfinite(cost)
        sol = Solution(z, coords.theta(z), cost, 1 if res.success else 0, int(res.nfev),
                       str(res.message), ok, J.copy())
        sol.extra["lmfit"] = res
        return sol


# ----------------------------------------------------------------------------------------
# Starting values
# ----------------------------------------------------------------------------------------
def _rate_grid(t, switch0, size=12):
    tau = t - switch0
    pos = np.sort(tau[tau > 0])
    if pos.size == 0:
        span, first = max(np.ptp(t), 1.0), max(np.ptp(t), 1.0) / 10
    else:
        span = float(pos[-1])
        first = float(pos[0]) if pos.size == 1 else float(min(pos[0], np.min(np.diff(pos))
                                                              if np.any(np.diff(pos) > 0)
                                                              else pos[0]))
        first = max(first, span * 1e-4)
    lo, hi = 0.2 / span, 5.0 / first
    if hi <= lo * 1.5:
        hi = lo * 50
    return np.geomspace(lo, hi, size)


def _step_linear_starts(t, y, w, kin, fixed, n_keep):
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
    grid = _rate_grid(t, 0.0, size=12 if n <= 2 else 9)
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
    return _distinct(thetas, kin, n_keep)


def _distinct(thetas, kin, n_keep):
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
    grid = _rate_grid(t, switch0, size=10 if n <= 2 else 8)
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
    return _distinct([c[1] for c in cands], kin, n_keep)


def check_growth_coverage(kin, t):
    """Refuse growth curves used far outside the masses they were fitted to."""
    g = kin.growth
    gt = getattr(g, "t", None)
    if gt is None or len(gt) == 0:
        return
    lo, hi = float(np.min(gt)), float(np.max(gt))
    span = max(hi - lo, 1e-12)
    t_lo = min(float(np.min(t)), float(kin.switch_times[0]))
    t_hi = float(np.max(t))
    limit = 0.5 * span  # extrapolate at most half the masses' span (stated limit)
    if t_lo < lo - limit or t_hi > hi + limit:
        raise DataError(
            f"the growth curve was fitted to masses from t = {lo:g} to {hi:g}, but the isotope "
            f"series runs from {t_lo:g} to {t_hi:g}: extrapolating more than half the masses' "
            "span is refused; weigh the animals over the sampling period"
        )


def check_names(d, kin, what):
    if d is None:
        return {}
    if not isinstance(d, dict):
        raise DataError(f"'{what}' must be a dict of parameter name -> value; got "
                        f"{type(d).__name__}")
    out = {}
    for k, v in d.items():
        if k not in kin.param_names:
            import difflib

            near = difflib.get_close_matches(str(k), kin.param_names, n=1)
            hint = f" (did you mean {near[0]!r}?)" if near else ""
            raise DataError(
                f"'{what}' has unknown parameter {k!r}{hint}; this model's parameters are "
                f"{', '.join(kin.param_names)}"
            )
        try:
            fv = float(v)
        except (TypeError, ValueError):
            raise DataError(f"'{what}[{k!r}]' must be a number; got {v!r}") from None
        if not math.isfinite(fv):
            raise DataError(f"'{what}[{k!r}]' must be finite; got {v!r}")
        if k in kin.rate_names and fv <= 0:
            raise DataError(f"'{what}[{k!r}]' is a rate and must be positive; got {v!r}")
        if k in kin.fraction_names and not 0 <= fv <= 1:
            raise DataError(f"'{what}[{k!r}]' is a pool fraction in [0, 1]; got {v!r}")
        if k == "lag" and fv < 0:
            raise DataError(f"'{what}['lag']' must be >= 0; got {v!r}")
        out[k] = fv
    return out


def as_1d(name, a, n=None):
    try:
        arr = np.asarray(a, dtype=float)
    except (TypeError, ValueError):
        raise ValueError(f"'{name}' must be numeric; got {a!r:.60}") from None
    if arr.ndim == 0 and n is not None:
        arr = np.full(n, float(arr))
    arr = np.atleast_1d(arr)
    if arr.ndim != 1:
        raise ValueError(f"'{name}' must be one-dimensional; got shape {arr.shape}")
    if n is not None and arr.size != n:
        raise ValueError(f"'{name}' has {arr.size} values but 't' has {n}; lengths must match")
    bad = ~np.isfinite(arr)
    if np.any(bad):
        i = int(np.argmax(bad))
        raise ValueError(
            f"'{name}' must be finite; got {arr[i]!r} at position {i} "
            f"({int(bad.sum())} non-finite value(s))"
        )
    return arr.copy()


def prepare_data(t_or_frame, y, sigma, time_unit):
    """Arrays (t, y, sigma) from arrays or a samples frame; never mutates the input."""
    import pandas as pd

    info = {"source": "arrays", "n_replicates": None, "design": "series", "subjects": None,
            "tissue": None, "isotope": None}
    if isinstance(t_or_frame, pd.DataFrame):
        if y is not None or sigma is not None:
            raise ValueError("with a samples frame, do not pass 'y' or 'sigma' (taken from "
                             "the frame's 'value' and 'sd' columns)")
        fs = frame_series(t_or_frame)
        t, yv, sd = fs.pop("t"), fs.pop("y"), fs.pop("sd")
        info.update(fs)
        info["source"] = "frame"
        if time_unit is None:
            time_unit = t_or_frame.attrs.get("time_unit", "d")
    else:
        if y is None:
            raise ValueError("'y' is required when 't' is an array")
        t = as_1d("t", t_or_frame)
        yv = as_1d("y", y, t.size)
        sd = None if sigma is None else as_1d("sigma", sigma, t.size)
    if sd is not None and np.any(sd <= 0):
        i = int(np.argmax(sd <= 0))
        raise ValueError(f"'sigma' must be > 0; got {sd[i]!r} at position {i}")
    if t.size < 2:
        raise ValueError(f"at least 2 time points are needed; got {t.size}")
    order = np.argsort(t, kind="stable")
    return {"t": t[order], "y": yv[order], "sigma": None if sd is None else sd[order],
            "time_unit": time_unit or "d", "info": info, "order": order}


class MassBlock:
    r"""Body masses in a joint fit with ``growth="exponential"``.

    :math:`\ln W = \ln W_0 + k_g t`; the intercept :math:`\ln W_0` enters linearly and is
    profiled out exactly (centred data), so the block's residuals are
    :math:`(c(\ln W) - k_g\, c(t))/s_m` with :math:`c` the centring and :math:`s_m` the
    block's residual sd.
    """

    def __init__(self, kin, masses):
        try:
            tm, wm = masses
        except (TypeError, ValueError):
            raise ValueError("'masses' must be a pair (t_mass, mass) of arrays") from None
        tm = as_1d("masses time", tm)
        wm = as_1d("masses mass", wm, tm.size)
        if np.any(wm <= 0):
            i = int(np.argmax(wm <= 0))
            raise DataError(f"body masses must be > 0; got {wm[i]!r} at position {i}")
        if tm.size < 3:
            raise DataError(f"a joint growth fit needs at least 3 body masses; got {tm.size}")
        self.kin = kin
        self.t = tm
        self.mass = wm
        self.lnw = np.log(wm)
        self.ct = tm - tm.mean()
        self.cy = self.lnw - self.lnw.mean()
        self.size = tm.size
        self.scale = 1.0
        self.j = kin.growth_rate_index
        self.coverage = (float(tm.min()), float(tm.max()))
        self.kind = "masses"

    def n_free_params(self, coords):
        return 1  # k_growth (ln W0 is profiled out analytically)

    def raw_residuals(self, theta):
        return self.cy - theta[self.j] * self.ct

    def log_mass0(self, theta):
        return float(self.lnw.mean() - theta[self.j] * self.t.mean())

    def __call__(self, theta):
        r = self.raw_residuals(theta) / self.scale
        J = np.zeros((self.size, theta.size))
        J[:, self.j] = -self.ct / self.scale
        return r, J


class GrowthPriorBlock:
    r"""The growth fit's information about its parameters, as extra residuals.

    Two-stage growth dilution: the growth curve is fitted first; its parameters then enter
    the turnover fit as parameters with the Gaussian penalty
    :math:`(v - \hat v)^T C^{-1} (v - \hat v)` from the growth fit's estimate and
    covariance, written as the whitened residuals :math:`L^{-1}(v - \hat v)` with
    :math:`C = L L^T`. Profiles then run over the growth parameters as well, so the growth
    curve's uncertainty reaches the catabolic rates (a quadratic approximation of the
    masses' likelihood).
    """

    def __init__(self, kin):
        g = kin.growth
        cov = g.covariance
        names = list(cov.index)
        self.kin = kin
        self.kind = "prior"
        allnames = list(g.param_names)
        self.free_idx = [kin.growth_param_index[allnames.index(n)] for n in names]
        self.fixed_names = {f"growth_{n}": float(v) for n, v in zip(allnames, g.values)
                            if n not in names}
        self.vhat = np.array([float(g.values[allnames.index(n)]) for n in names])
        C = cov.to_numpy(dtype=float)
        if not np.all(np.isfinite(C)):
            raise FitError("the growth fit has no covariance (see its warnings); refit the "
                           "growth curve, or pass propagate_growth=False to use it as known")
        Lc = np.linalg.cholesky(C)
        self.Linv = np.linalg.inv(Lc)
        self.size = len(names)
        self.coverage = (float(np.min(g.t)), float(np.max(g.t)))
        self.scale = 1.0

    def n_free_params(self, coords):
        return self.size

    def raw_residuals(self, theta):
        return self.Linv @ (theta[self.free_idx] - self.vhat)

    def __call__(self, theta):
        r = self.raw_residuals(theta)
        J = np.zeros((self.size, theta.size))
        J[:, self.free_idx] = self.Linv
        return r, J


def frame_series(frame):
    """(t, y, sd) and a description from a samples frame of one series or one
    destructive-sampling design (several subjects, one sampling time each)."""
    from .data import average_replicates, read_samples

    s = read_samples(frame, time_unit=(frame.attrs or {}).get("time_unit", "d"))
    for col in ("tissue", "isotope"):
        vals = sorted(s[col].astype(str).unique())
        if len(vals) > 1:
            raise DataError(
                f"the samples frame holds several {col}s ({', '.join(vals)}); fit one series "
                "at a time (select rows) or use iso.fit_each"
            )
    order_cols = [c for c in ("subject", "time", "value", "sd", "replicate") if c in s.columns]
    s = s.sort_values(order_cols, kind="stable")  # results independent of the row order
    avg = average_replicates(s)
    subjects = sorted(avg["subject"].astype(str).unique())
    design = "series"
    if len(subjects) > 1:
        per = avg.groupby(avg["subject"].astype(str))["time"].nunique()
        if int(per.max()) > 1:
            many = ", ".join(per[per > 1].index[:5])
            raise DataError(
                f"the samples frame holds {len(subjects)} subjects and some were sampled at "
                f"several times ({many}); fit each animal (iso.fit_each) or select one. Several "
                "subjects are fitted together only in a destructive design (one sampling time "
                "per animal)"
            )
        design = "destructive"
    avg = avg.sort_values("time", kind="stable")
    sd = None
    if "sd" in avg.columns and avg["sd"].notna().all():
        sd = avg["sd"].to_numpy(dtype=float)
    n_rep = avg["n_replicates"].to_numpy() if "n_replicates" in avg.columns else None
    return {
        "t": avg["time"].to_numpy(dtype=float), "y": avg["value"].to_numpy(dtype=float),
        "sd": sd, "design": design, "subjects": subjects,
        "tissue": str(s["tissue"].iloc[0]), "isotope": str(s["isotope"].iloc[0]),
        "n_rows": int(len(s)),
        "n_replicates": None if n_rep is None else [int(x) for x in n_rep],
    }


class Engine:
    """Fits one data series; also used by profiles, bootstraps and simulations."""

    def __init__(self, kin, data, *, absolute_sigma=False, loss="linear", masses=None,
                 ties=None, bounds=None):
        self.kin = kin
        self.data = data
        self.ties = ties
        self.bounds = dict(bounds or {})
        self.t, self.y, self.sigma = data["t"], data["y"], data["sigma"]
        self.w = np.ones_like(self.t) if self.sigma is None else 1.0 / self.sigma
        self.absolute_sigma = bool(absolute_sigma)
        self.loss = loss
        self.f_scale = 1.0
        self.masses = masses
        self._coords_cache = {}
        self.mass_block = None
        if masses is not None:
            self.mass_block = MassBlock(kin, masses)
        elif kin.growth_kind == "curve_params":
            self.mass_block = GrowthPriorBlock(kin)
        self.problem = Problem(kin, self.t, self.y, self.w, loss="linear",
                                extra=self.mass_block)
        self.block_scale = None  # (s_delta, s_mass) of the joint fit

    def coords(self, fixed, rate_anchor=None, fraction_anchor=None):
        key = (tuple(sorted(fixed)), rate_anchor, fraction_anchor)
        c = self._coords_cache.get(key)
        if c is None:
            c = Coordinates(self.kin, fixed, rate_anchor, fraction_anchor, ties=self.ties,
                            bounds=self.bounds)
            self._coords_cache[key] = c
        else:
            c._theta_fixed = np.zeros(self.kin.n_params)
            for nm, v in fixed.items():
                c._theta_fixed[self.kin.param_names.index(nm)] = float(v)
            c.fixed = dict(fixed)
            if c.f_idx and c.fractions_fixed:
                c2 = Coordinates(self.kin, fixed, rate_anchor, fraction_anchor,
                                 ties=self.ties, bounds=self.bounds)
                c.fixed_fractions = c2.fixed_fractions
        return c

    def start_thetas(self, fixed, init, n_keep):
        kin = self.kin
        if kin.diet is None and kin.structure == "parallel" and kin.growth_kind is None \
                and not kin.lag and kin.scale == "delta" and not any(
                    kin.param_names[j] in fixed for j in kin.fraction_index):
            starts = _step_linear_starts(self.t, self.y, self.w, kin, fixed, n_keep)
        else:
            fx = dict(fixed)
            if kin.growth_kind == "curve_params":
                for j, v in zip(kin.growth_param_index, kin.growth.values):
                    fx.setdefault(kin.param_names[j], float(v))
            if isinstance(self.mass_block, MassBlock) and "k_growth" not in fx:
                mb = self.mass_block
                fx["k_growth"] = float(mb.ct @ mb.cy / (mb.ct @ mb.ct)) if np.any(mb.ct) else 0.0
            starts = general_starts(self.t, self.y, self.w, kin, fx, n_keep)
            if kin.growth_rate_index is not None and "k_growth" in fx:
                kg = fx["k_growth"]
                for th in starts:  # keep every start inside k_d + k_growth > 0
                    k = th[kin.rate_index]
                    if np.min(k) + kg <= 0:
                        th[kin.rate_index] = k + (abs(kg) - np.min(k)) + 1e-3
        if kin.lag_index is not None and "lag" not in fixed:
            for th in starts:
                th[kin.lag_index] = 0.0
        if init:
            base = starts[0].copy() if starts else np.zeros(kin.n_params)
            for nm, v in init.items():
                base[kin.param_names.index(nm)] = v
            if kin.fraction_index:
                f = base[kin.fraction_index]
                if np.all(f > 0) and abs(f.sum() - 1) > 1e-9:
                    base[kin.fraction_index] = f / f.sum()
            starts = [base] + starts
        return starts

    def fit_best(self, fixed, init, use_lmfit=False):
        """Best fit from the automatic starts (and ``init``): every start on a modest budget,
        the best polished to tight tolerances — by :meth:`Problem.solve_lmfit` (lmfit's
        Minimizer) when ``use_lmfit``. Returns (solution, number of starts tried)."""
        kin = self.kin
        coords = self.coords(fixed)
        n_keep = 1 if kin.pools == 1 else 4
        if kin.structure == "chain":
            n_keep = 4
        starts = self.start_thetas(fixed, init, n_keep)
        if not starts:
            raise FitError("no usable starting values could be found for this series")
        best = None
        tried = 0
        # every start on a modest budget, then the best polished to tight tolerances
        budget = None if len(starts) == 1 else 60 * (coords.size + 1)
        for th in starts:
            z0 = coords.z_from_theta(th)
            sol = self.problem.solve(coords, z0, tol=1e-10 if budget else 1e-14,
                                     max_nfev=budget)
            tried += 1
            if best is None or (np.isfinite(sol.cost) and not sol.cost >= best.cost):
                best = sol
        if budget is not None and coords.size:
            pol = self.problem.solve(coords, best.z)
            if np.isfinite(pol.cost) and pol.cost <= best.cost * (1 + 1e-12) + 1e-300:
                best = pol
        if self.loss != "linear" and coords.size:
            # robust refit, scale from the linear fit's residuals (MAD)
            r = self.problem.w * (self.y - kin.evaluate(self.t, best.theta))
            mad = 1.4826 * float(np.median(np.abs(r - np.median(r))))
            self.f_scale = mad if mad > 0 else 1.0
            rob = Problem(kin, self.t, self.y, self.w, loss=self.loss, f_scale=self.f_scale)
            sol = rob.solve(coords, best.z)
            # the cost reported is the plain weighted RSS at the robust solution
            sol.extra["robust"] = True
            best = sol
        if self.mass_block is not None:
            best, more = self._joint_block_weights(coords, best)
            tried += more
        if use_lmfit and coords.size:
            prob = self.problem if self.loss == "linear" else Problem(
                kin, self.t, self.y, self.w, loss=self.loss, f_scale=self.f_scale)
            lm = prob.solve_lmfit(coords, best.z)
            if np.isfinite(lm.cost) and (lm.success or not best.success) and \
                    lm.cost <= best.cost * (1 + 1e-9) + 1e-300:
                lm.extra.update({k: v for k, v in best.extra.items() if k != "lmfit"})
                best = lm
            else:
                best.extra["lmfit"] = lm.extra.get("lmfit")
        best.extra["coords"] = coords
        return best, tried

    def _joint_block_weights(self, coords, sol):
        """Iterate the block weights of a joint δ + mass fit to their residual variances.

        Each block is weighted by its own residual sd (δ in ‰, ln mass dimensionless), so
        neither unit dominates; the weights are re-estimated from the joint fit's residuals
        until they settle (at most 8 rounds).
        """
        mb = self.mass_block
        base = np.ones_like(self.t) if self.sigma is None else 1.0 / self.sigma
        n_d, n_m = self.t.size, mb.size
        p_total = coords.size
        p_m = mb.n_free_params(coords)
        p_d = max(p_total - p_m, 1)
        if mb.kind == "prior":
            # the growth-prior block is already in units of its own sd
            s_d = 1.0
            for _ in range(4):
                rd = base * (self.y - self.kin.evaluate(self.t, sol.theta))
                new_d = math.sqrt(max(float(rd @ rd), 1e-300) / max(n_d - p_d, 1))
                done = abs(new_d / s_d - 1) < 1e-6
                s_d = new_d
                self.set_block_scale(s_d, 1.0)
                if done:
                    break
                sol = self.problem.solve(coords, sol.z)
            return sol, 1
        s_d, s_m = 1.0, 1.0
        rounds = 0
        for _ in range(8):
            rd = base * (self.y - self.kin.evaluate(self.t, sol.theta))
            rm = mb.raw_residuals(sol.theta)
            new_d = math.sqrt(max(float(rd @ rd), 1e-300) / max(n_d - p_d, 1))
            new_m = math.sqrt(max(float(rm @ rm), 1e-300) / max(n_m - 1 - p_m, 1))
            done = abs(new_d / s_d - 1) < 1e-6 and abs(new_m / s_m - 1) < 1e-6
            s_d, s_m = new_d, new_m
            self.set_block_scale(s_d, s_m)
            if done and rounds:
                break
            sol = self.problem.solve(coords, sol.z)
            rounds += 1
        return sol, rounds

    def with_y(self, y):
        """The same problem with new observations (bootstrap and simulation replicates)."""
        data = dict(self.data)
        data["y"] = np.asarray(y, dtype=float)
        new = Engine(self.kin, data, absolute_sigma=self.absolute_sigma, loss=self.loss,
                     masses=self.masses, ties=self.ties, bounds=self.bounds)
        if self.mass_block is not None and new.mass_block is not None:
            new.mass_block = self.mass_block
        new._coords_cache = self._coords_cache
        if self.block_scale is not None:
            new.set_block_scale(*self.block_scale)
        return new

    def with_data(self, t, y, sigma):
        """The same model on other data (whole-animal resampling, jackknife); the coordinate
        maps already built are shared."""
        data = dict(self.data)
        data["t"] = np.asarray(t, dtype=float)
        data["y"] = np.asarray(y, dtype=float)
        data["sigma"] = None if sigma is None else np.asarray(sigma, dtype=float)
        new = Engine(self.kin, data, absolute_sigma=self.absolute_sigma, loss=self.loss,
                     masses=self.masses, ties=self.ties, bounds=self.bounds)
        new._coords_cache = self._coords_cache
        return new

    def set_block_scale(self, s_delta, s_mass):
        """Weight the δ and mass blocks of a joint fit by their own residual sd."""
        self.block_scale = (float(s_delta), float(s_mass))
        base = np.ones_like(self.t) if self.sigma is None else 1.0 / self.sigma
        self.w = base / s_delta
        self.mass_block.scale = s_mass
        self.problem = Problem(self.kin, self.t, self.y, self.w, loss="linear",
                                extra=self.mass_block)

    def quick_fit(self, fixed, z_warm=None, multi_start=True, tol=1e-10):
        """Best solution from a warm start and (optionally) the automatic starts.

        Candidates run on a small evaluation budget; the best is then polished. A solution
        counts as failed only when its cost is not finite (the optimizer's own status is in
        ``success``).
        """
        coords = self.coords(fixed)
        cands = []
        budget = 40 * (coords.size + 1)
        if z_warm is not None:
            cands.append(self.problem.solve(coords, z_warm, tol=tol, max_nfev=budget))
        if multi_start or not cands or not cands[0].success:
            n_keep = 1 if self.kin.pools == 1 else 3
            for th in self.start_thetas(fixed, None, n_keep):
                cands.append(self.problem.solve(coords, coords.z_from_theta(th), tol=tol,
                                                max_nfev=budget))
        finite = [c for c in cands if np.isfinite(c.cost)]
        if not finite:
            best = cands[0]
        else:
            best = min(finite, key=lambda c: c.cost)
            if not best.success:
                pol = self.problem.solve(coords, best.z, tol=tol)
                if np.isfinite(pol.cost) and pol.cost <= best.cost:
                    best = pol
        best.extra["coords"] = coords
        return best

    def refit(self, fixed, z0, coords=None, tol=1e-12):
        """A warm-started fit with some parameters fixed (profiles, bootstraps)."""
        if coords is None:
            coords = self.coords(fixed)
        return self.problem.solve(coords, z0, tol=tol)



# ----------------------------------------------------------------------------------------
# The finished fit
# ----------------------------------------------------------------------------------------
class FitState:
    r"""What one finished fit holds: data, solution, covariance and information criteria.

    Built once from an :class:`Engine` and its :class:`Solution`; every later step
    (intervals, resampling, diagnostics, tables) reads it and none changes it (its arrays
    are read-only).

    Error model (DESIGN §3). The weighted residuals are :math:`r_i = w_i (y_i - \hat y_i)`
    with :math:`w_i = 1/\sigma_i` when ``sigma`` is given and 1 otherwise; ``rss`` is
    :math:`\sum r_i^2`. Unless ``absolute_sigma`` the residual variance is estimated,
    :math:`s^2 = \mathrm{rss}/(n - p)`, and the covariance is :math:`s^2 (J^T J)^{-1}`; with
    ``absolute_sigma`` it is :math:`(J^T J)^{-1}`.

    Information criteria (Gaussian likelihood, constants dropped; ``k`` counts the free
    parameters plus the residual variance when it is estimated):
    :math:`\mathrm{AIC} = n\ln(\mathrm{rss}/n) + 2k`,
    :math:`\mathrm{AICc} = \mathrm{AIC} + 2k(k+1)/(n-k-1)`,
    :math:`\mathrm{BIC} = n\ln(\mathrm{rss}/n) + k\ln n`; with known σ
    :math:`\mathrm{AIC} = \chi^2 + 2k`.

    Attributes
    ----------
    kinetics : TurnoverKinetics
    engine : Engine
    coords : Coordinates
        The coordinate map the solution lives in.
    z, theta : ndarray
        Solution in internal coordinates and in natural parameters.
    jac_z : ndarray of shape (n_residuals, n_coordinates) or None
        Jacobian of the weighted residuals in internal coordinates at the solution.
    cov_z : ndarray
        Covariance in internal coordinates (NaN for coordinates the data do not touch);
        ``cov_z0`` is the same with those set to 0 (no first-order effect).
    covar : ndarray
        Covariance of the natural parameters.
    cov_ok : bool
        The covariance could be computed.
    dead : ndarray of bool
        Coordinates whose Jacobian column vanishes (a rate run to 0, a fraction at 0).
    rss, s2, dof, redchi : float
    aic, aicc, bic : float
    n_criteria_params : int
    converged, optimizer_ok : bool
    """

    def __init__(self, engine, sol, fixed):
        kin = engine.kin
        self.kinetics = kin
        self.engine = engine
        self.solution = sol
        self.coords = sol.extra["coords"]
        self.fixed = dict(fixed)
        self.z = np.array(sol.z, dtype=float)
        self.theta = np.array(sol.theta, dtype=float)
        self.jac_z = None if sol.jac_z is None else np.array(sol.jac_z, dtype=float)
        self.t, self.y = engine.t.copy(), engine.y.copy()
        self.sigma = None if engine.sigma is None else engine.sigma.copy()
        self.w = engine.w.copy()
        self.absolute_sigma = engine.absolute_sigma
        self.loss = engine.loss
        self.f_scale = engine.f_scale
        self.optimizer_ok = bool(sol.success)
        n = self.t.size
        p = self.coords.size
        jac_z = self.jac_z
        self.joint = engine.mass_block is not None
        self.nobs = n
        self.nvarys = p
        self.s2_robust = None
        if self.joint:
            mb = engine.mass_block
            rd = self.weighted_residuals()
            rm = mb(self.theta)[0]
            self.rss = float(rd @ rd + rm @ rm)
            self.n_mass = mb.size if mb.kind == "masses" else 0
            # masses: the intercept ln W0 is profiled out of the mass block
            self.dof = n + mb.size - (1 if mb.kind == "masses" else 0) - p
            self.s2 = 1.0  # each block scaled by its own residual sd
            self.block_scale = engine.block_scale
        else:
            self.n_mass = 0
            self.block_scale = None
            r = self.weighted_residuals()
            self.rss = float(r @ r)
            self.dof = n - p
            self.s2 = (self.rss / self.dof if self.dof > 0 else math.nan)
            if self.absolute_sigma:
                self.s2 = 1.0
        # covariance in internal coordinates, then natural
        cov_ok = False
        cov_z = np.full((p, p), np.nan)
        # coordinates the data do not touch at all (a rate run to 0, a fraction at 0): their
        # Jacobian column vanishes; the covariance is computed for the others and the
        # parameters that depend on them get NaN
        dead = np.zeros(p, dtype=bool)
        if p and jac_z is not None and np.all(np.isfinite(jac_z)) and self.dof > 0:
            norms = np.linalg.norm(jac_z, axis=0)
            dead = norms <= 1e-12 * max(float(norms.max()), 1e-300)
            alive = ~dead
            if alive.any():
                u, sv, vt = np.linalg.svd(jac_z[:, alive], full_matrices=False)
                if sv.size and sv[-1] > sv[0] * 1e-10:
                    sub = (vt.T / sv**2) @ vt * self.s2
                    cov_z[np.ix_(alive, alive)] = sub
                    cov_ok = bool(np.all(np.isfinite(sub)))
        if cov_ok and self.loss != "linear" and not self.joint:
            alive = ~dead
            sub = self._robust_cov(jac_z[:, alive], int(alive.sum()))
            cov_z = np.full((p, p), np.nan)
            cov_z[np.ix_(alive, alive)] = sub
            cov_ok = bool(np.all(np.isfinite(sub)))
        self.cov_ok = cov_ok
        self.dead = dead
        self.cov_z = cov_z
        self.cov_z0 = np.nan_to_num(cov_z, nan=0.0)  # dead coordinates: no first-order effect
        _, A = self.coords.theta(self.z, jac=True)
        self.A = A
        if p:
            alive = ~dead
            Aa = A[:, alive]
            covar = Aa @ cov_z[np.ix_(alive, alive)] @ Aa.T
            touched = np.any(np.abs(A[:, dead]) > 0, axis=1) if dead.any() \
                else np.zeros(kin.n_params, dtype=bool)
            covar[touched, :] = np.nan
            covar[:, touched] = np.nan
        else:
            covar = np.zeros((kin.n_params, kin.n_params))
        if p and not cov_ok:
            covar = np.full((kin.n_params, kin.n_params), np.nan)
        for j, nm in enumerate(kin.param_names):
            if nm in self.fixed:
                covar[j, :] = 0.0
                covar[:, j] = 0.0
        self.covar = covar
        self.converged = bool(self.optimizer_ok and (cov_ok or p == 0))
        k = p + (0 if self.absolute_sigma else 1)
        n_ic = n
        if self.joint and engine.mass_block.kind == "prior":
            # information criteria from the isotope data alone; the growth parameters are
            # constrained by the growth fit, not by these data
            sd_ = self.block_scale[0]
            rd_raw = self.weighted_residuals() * sd_
            base = n * math.log(max(float(rd_raw @ rd_raw), 1e-300) / n)
            k = p - engine.mass_block.size + 1
        elif self.joint:
            # Gaussian likelihood of both blocks, each with its own variance; k counts the
            # free parameters, ln W0 and the two variances
            sd_, sm_ = self.block_scale
            rd_raw = self.weighted_residuals() * sd_
            rm_raw = engine.mass_block.raw_residuals(self.theta)
            nm = engine.mass_block.size
            base = (n * math.log(max(float(rd_raw @ rd_raw), 1e-300) / n)
                    + nm * math.log(max(float(rm_raw @ rm_raw), 1e-300) / nm))
            k = p + 3
            n_ic = n + nm
        elif self.absolute_sigma:
            base = self.rss
        else:
            base = n * math.log(self.rss / n) if self.rss > 0 else -math.inf
        self.n_criteria_params = k
        self.aic = base + 2 * k
        self.aicc = self.aic + (2 * k * (k + 1) / (n_ic - k - 1) if n_ic - k - 1 > 0
                                else math.nan)
        self.bic = base + k * math.log(n_ic)
        self.redchi = self.rss / self.dof if self.dof > 0 else math.nan
        self.chisqr_pvalue = (float(stats.chi2.sf(self.rss, self.dof))
                              if self.absolute_sigma and self.dof > 0 else None)
        for a in (self.z, self.theta, self.jac_z, self.t, self.y, self.sigma, self.w,
                  self.cov_z, self.cov_z0, self.A, self.covar, self.dead):
            if a is not None:
                a.setflags(write=False)
        self._frozen = True

    def __setattr__(self, name, value):
        if getattr(self, "_frozen", False):
            raise AttributeError(f"a FitState is read-only; cannot set {name!r}")
        object.__setattr__(self, name, value)

    def _robust_cov(self, J, p):
        r"""Covariance of an M-estimate (robust loss), from the loss weights.

        With :math:`z_i = (r_i/c)^2` and loss weights :math:`w_i = \rho'(z_i)`
        (soft_l1: :math:`1/\sqrt{1+z}`; huber: 1 inside, :math:`1/\sqrt z` outside), the
        covariance is :math:`s_r^2 (J^T W J)^{-1}` (the iteratively reweighted
        least-squares form, in which an outlier carries the weight the fit gave it; Huber
        1981, *Robust Statistics*, ch. 7) with the robust scale
        :math:`s_r = 1.4826\,\mathrm{MAD}(r)\sqrt{n/(n-p)}` (common practice), which the
        outliers do not inflate.
        """
        r = self.weighted_residuals()
        z = (r / self.f_scale) ** 2
        if self.loss == "soft_l1":
            wl = 1.0 / np.sqrt(1.0 + z)
        else:  # huber
            wl = np.where(z <= 1.0, 1.0, 1.0 / np.sqrt(np.maximum(z, 1e-300)))
        Jw = J * np.sqrt(wl)[:, None]
        mad = 1.4826 * float(np.median(np.abs(r - np.median(r))))
        s2w = mad**2 * self.nobs / max(self.dof, 1)
        if self.absolute_sigma:
            s2w = 1.0
        u, sv, vt = np.linalg.svd(Jw, full_matrices=False)
        if not (sv.size and sv[-1] > sv[0] * 1e-10):
            return np.full((p, p), np.nan)
        self.s2_robust = s2w
        return (vt.T / sv**2) @ vt * s2w

    # -- what later steps read ------------------------------------------------------------
    def weighted_residuals(self, theta=None) -> np.ndarray:
        """Weighted δ residuals w (y − ŷ) (joint fits: including the δ block's scale)."""
        th = self.theta if theta is None else theta
        return self.w * (self.y - self.kinetics.evaluate(self.t, th))

    def profile_dof(self) -> int:
        """Degrees of freedom of the residual variance that profile statistics divide by.

        Joint fits: the δ block's variance is estimated from its own residuals, so its
        degrees of freedom (not the blocks' total) set the reference distribution.
        """
        if self.joint:
            mb = self.engine.mass_block
            p_other = mb.size if mb.kind == "prior" else 1
            return self.nobs - (self.nvarys - p_other)
        return self.dof

    def critical_value(self, level: float) -> float:
        r"""Cut-off of the profile statistic at ``level``.

        :math:`\chi^2_1(\text{level})` with σ known; :math:`F_{1,\nu}(\text{level})` with
        the residual variance estimated (ν = :meth:`profile_dof`). ``scipy.special``'s
        ``chdtri``/``fdtri`` are the inverse survival functions of these laws.
        """
        if self.absolute_sigma and not self.joint:
            return float(special.chdtri(1, 1.0 - level))
        return float(special.fdtri(1, max(self.profile_dof(), 1), level))

    def normal_quantile(self, level: float) -> float:
        """Two-sided quantile of asymptotic intervals: normal with σ known, else Student t."""
        if self.absolute_sigma:
            return float(special.ndtri(0.5 + level / 2))
        return float(special.stdtrit(max(self.dof, 1), 0.5 + level / 2))

    def design_span(self) -> tuple[float, float]:
        """(first, last) sampling time after the first switch (a tenth of the span and the
        span when no sample follows the switch)."""
        tau = self.t - float(self.kinetics.switch_times[0])
        pos = np.sort(tau[tau > 0])
        if pos.size == 0:
            span = max(float(np.ptp(self.t)), 1.0)
            return span / 10, span
        return float(pos[0]), float(pos[-1])
