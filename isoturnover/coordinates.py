r"""Internal coordinates of a turnover fit and ties between its parameters.

The optimizer works in coordinates ``z`` that keep the model's constraints by construction;
users only ever see the natural parameters ``theta`` (names in
:attr:`~isoturnover.kinetics.TurnoverKinetics.param_names`):

* rates on the log scale with the pools ordered by construction: one anchor pool has
  coordinate :math:`\ln k_a`, the others are reached through positive log-rate gaps
  :math:`\ln k_i - \ln k_{i+1} = e^{w_i}`, so pools cannot swap labels (fastest first);
* fractions by stick-breaking: :math:`f_b = \operatorname{logistic}(v_0)`, the remaining
  fractions share :math:`1 - f_b` by further logistic sticks;
* plateaus, separations, ``delta0``, ``delta_eq``, ``k_growth`` as themselves; ``lag`` as
  itself with the bound ``lag >= 0``.

Profiling a rate or a fraction re-anchors the block at that pool, so the profiled parameter
is a single coordinate and the others stay ordered. :class:`Ties` fills parameters set by
lmfit-style expressions of others.
"""

from __future__ import annotations

import math

import numpy as np

from .errors import DataError, FitError
from .kinetics import TurnoverKinetics

__all__ = ["Coordinates", "Ties"]

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
        self._prepare_fast_paths()

    def set_fixed_values(self, fixed):
        """New values for the same fixed parameters (a profile moving along its grid).

        Parameters
        ----------
        fixed : dict
            Parameter name -> value, the same names as at construction.
        """
        if fixed == self.fixed:
            return  # the same values: nothing to rebuild
        if set(fixed) != set(self.fixed):
            raise FitError("set_fixed_values needs the same fixed names as the map was "
                           "built with")
        names = self.kin.param_names
        self.fixed = dict(fixed)
        self._theta_fixed = np.zeros(self.kin.n_params)
        for nm, v in fixed.items():
            self._theta_fixed[names.index(nm)] = float(v)
        if self.f_idx and self.fractions_fixed:
            self.fixed_fractions = Coordinates(
                self.kin, fixed, None, None, ties=self.ties).fixed_fractions
        self._prepare_fast_paths()

    def _prepare_fast_paths(self):
        """Index arrays, the constant part of dθ/dz and the fixed scalars :meth:`theta`
        uses (rebuilt whenever the fixed values change)."""
        self._id_free_arr = np.array(self.id_free, dtype=int)
        self._k_idx_arr = np.array(self.k_idx, dtype=int)
        self._f_idx_arr = np.array(self.f_idx, dtype=int)
        A0 = np.zeros((self.kin.n_params, self.size))
        for col, j in enumerate(self.id_free):
            A0[j, col] = 1.0
        self._A_template = A0
        self._u_fixed_value = (math.log(self._theta_fixed[self.k_idx[self.rate_anchor]])
                               if (not self.rates_fixed and self.u_fixed) else 0.0)
        self._f0_fixed_value = (float(self._theta_fixed[self.f_idx[self.stick_order[0]]])
                                if (self.f_idx and not self.fractions_fixed and self.v0_fixed)
                                else 0.0)

    # -- forward map --------------------------------------------------------------------
    def theta(self, z, jac=False):
        """Natural parameters at coordinates ``z`` (and dθ/dz when ``jac``).

        Parameters
        ----------
        z : ndarray of shape (size,)
            Internal coordinates (layout in :attr:`labels`).
        jac : bool, optional
            Also return the Jacobian of the map.

        Returns
        -------
        ndarray of shape (n_params,), or (ndarray, ndarray of shape (n_params, size))
            θ, and dθ/dz when ``jac``. Scalar work runs in plain floats: the blocks are a
            handful of numbers, where numpy's per-call cost would dominate.
        """
        th = self._theta_fixed.copy()
        zl = z.tolist() if isinstance(z, np.ndarray) else list(z)
        if jac:
            A = self._A_template.copy()
        c = self._n_id
        if c:
            th[self._id_free_arr] = zl[:c]
        n = self.n_pools
        # rates
        if not self.rates_fixed:
            a = self.rate_anchor
            if self.u_fixed:
                u = self._u_fixed_value
                cu = None
            else:
                u = zl[c]
                cu = c
                c += 1
            # gaps between pool i and i+1; capped (a log-rate gap of e^4 ≈ 55 is a rate
            # ratio of ~1e23: the pools are then separate whatever the data)
            g = [math.exp(min(v, 4.0)) for v in zl[c:c + n - 1]]
            cg = c
            c += n - 1
            lk = [0.0] * n
            lk[a] = u
            for i in range(a - 1, -1, -1):
                lk[i] = lk[i + 1] + g[i]
            for i in range(a + 1, n):
                lk[i] = lk[i - 1] - g[i - 1]
            k = [math.exp(min(max(v, -700.0), 700.0)) for v in lk]
            th[self._k_idx_arr] = k
            if jac:
                for i in range(n):
                    row = self.k_idx[i]
                    ki = k[i]
                    if cu is not None:
                        A[row, cu] = ki
                    for l_ in range(n - 1):
                        if i <= l_ < a:
                            A[row, cg + l_] = ki * g[l_]
                        elif a <= l_ < i:
                            A[row, cg + l_] = -ki * g[l_]
        # fractions
        if self.f_idx:
            if self.fractions_fixed:
                th[self._f_idx_arr] = self.fixed_fractions
            else:
                nf = len(self.f_idx)
                order = self.stick_order
                size = self.size
                rem = 1.0
                drem = [0.0] * size
                fvals = [0.0] * nf
                dF = [None] * nf
                pos0 = 0
                if self.v0_fixed:
                    f0 = self._f0_fixed_value
                    fvals[order[0]] = f0
                    dF[order[0]] = [0.0] * size
                    rem -= f0
                    pos0 = 1
                for pos in range(pos0, nf - 1):
                    col = c
                    c += 1
                    s = _logistic(zl[col])
                    fi = rem * s
                    fvals[order[pos]] = fi
                    if jac:
                        dfi = [d * s for d in drem]
                        dfi[col] += rem * s * (1 - s)
                        dF[order[pos]] = dfi
                        drem = [d - e for d, e in zip(drem, dfi)]
                    rem -= fi
                fvals[order[nf - 1]] = rem
                th[self._f_idx_arr] = fvals
                if jac:
                    dF[order[nf - 1]] = drem
                    A[self._f_idx_arr] = dF
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
