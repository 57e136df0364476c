r"""TurnoverFit: the result of one fit — tables, intervals, derived quantities, summary.

Error model (DESIGN §3). The weighted residuals are :math:`r_i = w_i (y_i - \hat y_i)` with
:math:`w_i = 1/\sigma_i` when ``sigma`` is given and 1 otherwise; ``rss`` is
:math:`\sum r_i^2`. Unless ``absolute_sigma`` the residual variance is estimated,
:math:`s^2 = \mathrm{rss}/(n - p)`, and the covariance is :math:`s^2 (J^T J)^{-1}`; with
``absolute_sigma`` it is :math:`(J^T J)^{-1}` and ``rss`` is the χ² statistic.

Information criteria (Gaussian likelihood, constants dropped; ``k`` counts the free
parameters plus the residual variance when it is estimated):

.. math::

    \mathrm{AIC} = n\ln(\mathrm{rss}/n) + 2k, \quad
    \mathrm{AICc} = \mathrm{AIC} + \frac{2k(k+1)}{n-k-1}, \quad
    \mathrm{BIC} = n\ln(\mathrm{rss}/n) + k\ln n

and with known σ :math:`\mathrm{AIC} = \chi^2 + 2k` (same corrections). Only differences
between fits of the same data mean anything.

Profile likelihood intervals: with σ estimated, the set of values c of a parameter for
which :math:`(\mathrm{rss}(c) - \mathrm{rss})/s^2 \le F_{1, n-p}(\text{level})`; with σ known,
:math:`\Delta\chi^2 \le \chi^2_1(\text{level})`. ``rss(c)`` is minimised over all other
parameters. A bound the data do not close is reported as ``open`` (±inf for unbounded
parameters and half-lives, 0 or 1 for fractions, 0 for a rate), never as a search limit.
"""

from __future__ import annotations

import html
import json
import math

import numpy as np
import pandas as pd

from . import quantities
from .conventions import METHODS, STATUSES, check_level, check_method, unit_word
from .diagnostics import TrustNote, trust_notes
from .engine import FitState
from .profiles import find_bound

__all__ = ["TurnoverFit", "TrustNote", "Summary", "METHODS", "STATUSES"]

LN2 = math.log(2.0)




class TurnoverFit:
    """Result of :meth:`TurnoverModel.fit <isoturnover.TurnoverModel.fit>`.

    Attributes
    ----------
    params : lmfit.Parameters
        Natural parameters (``delta0``, ``delta_eq``, ``k1``…, ``f1``…, ``lag``,
        ``discrimination``/``epsilon``, ``plateau_j``, ``k_growth``) with values, standard
        errors and correlations; fixed ones have ``vary=False``.
    nobs, nvarys : int
        Number of time points fitted (replicates averaged) and of free parameters.
    rss : float
        Sum of squared weighted residuals (χ² when ``absolute_sigma``).
    aic, aicc, bic : float
        Information criteria (formulas in the module docstring).
    s2 : float
        Residual variance (1 when σ is known).
    converged : bool
        The optimizer converged *and* the covariance could be computed.
    warnings : list of TrustNote
        Trust signals; each also appears as a numbered note in :meth:`summary`.
    residuals : ndarray
        y − fitted, in ‰ (unweighted).
    time_unit : str
        Unit of time of the data (labels of rates and half-lives).
    rate_kind : {"incorporation", "catabolic"}
        Without a growth model rates lump growth and catabolic turnover (incorporation
        rates); with one they are catabolic rates.
    """

    def __init__(self, model, state: FitState, *, init=None, starts_tried=1, label=None):
        if not isinstance(state, FitState):
            raise TypeError(f"'state' must be a FitState (from the engine); got "
                            f"{type(state).__name__}")
        self.model = model
        self.state = state
        self.kinetics = state.kinetics
        engine = state.engine
        self._engine = engine
        self._sol = state.solution
        self._coords = state.coords
        self.fixed = dict(state.fixed)
        ties = state.coords.ties
        #: Parameters set by expressions of others (name -> expression), from ``params=``.
        self.tied = {nm: ties.exprs[nm] for nm in ties.names} if ties is not None else {}
        #: Bounds on plain parameters given in ``params=`` (name -> (min, max)).
        self.bounds = dict(engine.bounds)
        self.init = dict(init or {})
        self.t = state.t
        self.y = state.y
        self.sigma = state.sigma
        self.absolute_sigma = state.absolute_sigma
        self.loss = state.loss
        self.f_scale = state.f_scale
        self.time_unit = engine.data["time_unit"]
        self.data_info = dict(engine.data["info"])
        self.label = label
        self.starts_tried = starts_tried
        self._theta = state.theta
        self.nfev = self._sol.nfev
        self.message = self._sol.message
        self._optimizer_ok = state.optimizer_ok
        for name in ("joint", "nobs", "nvarys", "rss", "n_mass", "dof", "s2", "block_scale",
                     "covar", "converged", "n_criteria_params", "aic", "aicc", "bic",
                     "redchi", "chisqr_pvalue", "s2_robust"):
            setattr(self, name, getattr(state, name))
        self._cov_ok = state.cov_ok
        self._cov_z = state.cov_z
        self._cov_z0 = state.cov_z0
        self._dead = state.dead
        self._A = state.A
        self.rate_kind = "catabolic" if self.kinetics.growth_kind is not None \
            else "incorporation"
        self._profile_cache = {}
        self._params = None
        self.warnings = trust_notes(self)

    # -- basic quantities ---------------------------------------------------------------
    def _wres(self):
        """Weighted δ residuals (joint fits: including the δ block's scale)."""
        return self.state.weighted_residuals()

    @property
    def values(self) -> dict:
        """Natural parameter values, name → float."""
        return dict(zip(self.kinetics.param_names, self._theta.tolist()))

    @property
    def stderr(self) -> dict:
        d = np.sqrt(np.clip(np.diag(self.covar), 0, None))
        return dict(zip(self.kinetics.param_names, d.tolist()))

    @property
    def residuals(self) -> np.ndarray:
        """y − fitted (‰), in time order."""
        return self.y - self.best_fit

    @property
    def best_fit(self) -> np.ndarray:
        return self.kinetics.evaluate(self.t, self._theta)

    @property
    def data_fingerprint(self) -> str:
        """SHA-1 of the fitted data (times, values, weights): equal for fits of the same data."""
        import hashlib

        h = hashlib.sha1()
        for a in (self.t, self.y, np.ones_like(self.t) if self.sigma is None else self.sigma):
            h.update(np.ascontiguousarray(a, dtype=float).tobytes())
        mb = self._engine.mass_block
        if mb is not None and mb.kind == "prior":
            h.update(b"growth-prior")
            h.update(str(getattr(self.kinetics.growth, "data_fingerprint", "")).encode())
        elif mb is not None:
            h.update(b"masses")
            h.update(np.ascontiguousarray(mb.t, dtype=float).tobytes())
            h.update(np.ascontiguousarray(mb.mass, dtype=float).tobytes())
        return h.hexdigest()

    def predict(self, t) -> np.ndarray:
        """Fitted tissue δ (‰) at times ``t`` (in :attr:`time_unit`)."""
        t = np.atleast_1d(np.asarray(t, dtype=float))
        if not np.all(np.isfinite(t)):
            raise ValueError("'t' must be finite")
        return self.kinetics.evaluate(t.ravel(), self._theta).reshape(t.shape)

    @property
    def params(self):
        """Natural parameters as :class:`lmfit.Parameters` (built on first access)."""
        if self._params is None:
            self._params = self._make_params()
        return self._params

    @property
    def lmfit_result(self):
        """This fit as lmfit's own result object, in natural parameters (built on first access).

        A :class:`lmfit.minimizer.MinimizerResult` with ``params`` (values, ``stderr``,
        ``correl``, expressions), ``var_names``, ``covar`` (of the varying natural
        parameters), ``chisqr`` (= :attr:`rss`), ``redchi``, ``aic``, ``bic``, ``nfev``,
        ``ndata``, ``nvarys``, ``nfree``, ``residual`` (weighted), ``success`` and
        ``errorbars``, so ``lmfit.fit_report(fit.lmfit_result)`` prints lmfit's report. The
        information criteria are this library's (module docstring), not lmfit's. Fits made
        with ``params=`` ran through :class:`lmfit.Minimizer`; its result in the internal
        coordinates is ``fit.lmfit_result.minimizer_result``.
        """
        if getattr(self, "_lmfit_result", None) is None:
            from lmfit.minimizer import MinimizerResult

            ps = self.params
            names = list(self.kinetics.param_names)
            var_names = [n for n in ps if ps[n].vary]
            idx = [names.index(n) for n in var_names]
            covar = self.covar[np.ix_(idx, idx)] if self._cov_ok else None
            raw = self._sol.extra.get("lmfit")
            self._lmfit_result = MinimizerResult(
                params=ps, var_names=var_names, covar=covar,
                init_vals=[ps[n].value for n in var_names], nfev=self.nfev,
                success=self._optimizer_ok, errorbars=bool(self._cov_ok),
                message=self.message,
                method="least_squares (lmfit.Minimizer)" if raw is not None else
                "leastsq (MINPACK, analytic Jacobian)",
                ndata=self.nobs, nvarys=self.nvarys, nfree=self.dof, chisqr=self.rss,
                redchi=self.redchi, aic=self.aic, bic=self.bic, residual=self._wres(),
                minimizer_result=raw)
        return self._lmfit_result

    def _make_params(self):
        import lmfit

        kin = self.kinetics
        ps = lmfit.Parameters()
        se = self.stderr
        names = kin.param_names
        implicit = self._implicit_fixed()
        for j, nm in enumerate(names):
            if nm in self.tied:
                continue
            vary = nm not in self.fixed and nm not in implicit
            mn, mx = self.bounds.get(nm, (-np.inf, np.inf))
            if nm in kin.rate_names:
                mn = 0.0
            elif nm in kin.fraction_names:
                mn, mx = 0.0, 1.0
            elif nm == "lag":
                mn = max(mn, 0.0)
            v = float(self._theta[j])
            ps.add(nm, value=min(max(v, mn), mx), vary=vary, min=mn, max=mx)
            if vary:
                ps[nm].stderr = se[nm] if np.isfinite(se[nm]) else None
        # the last fraction is the rest (as in TurnoverModel.make_params)
        fr = kin.fraction_names
        if len(fr) > 1 and fr[-1] not in self.fixed:
            ps[fr[-1]].set(expr=" - ".join(["1"] + list(fr[:-1])))
            ps[fr[-1]].stderr = se[fr[-1]] if np.isfinite(se[fr[-1]]) else None
        # parameters set by expressions, in dependency order, keep their expressions
        for nm in self.tied:
            ps.add(nm, expr=self.tied[nm])
            ps[nm].stderr = se[nm] if np.isfinite(se[nm]) else None
        expressed = set(self.tied) | ({fr[-1]} if len(fr) > 1 else set())
        if self._cov_ok:
            c = self.covar
            d = np.sqrt(np.diag(c))
            for i, a in enumerate(names):
                if a in self.fixed or a in expressed or not d[i] > 0:
                    continue
                ps[a].correl = {b: float(c[i, j] / (d[i] * d[j])) for j, b in enumerate(names)
                                if j != i and b not in self.fixed and b not in expressed
                                and d[j] > 0}
        return ps

    # -- intervals ------------------------------------------------------------------------
    def _crit(self, level):
        return self.state.critical_value(level)

    def _transform(self, name):
        """(to_coord, from_coord, kind) for a natural parameter."""
        kin = self.kinetics
        if name in kin.rate_names:
            return math.log, math.exp, "rate"
        if name in kin.fraction_names:
            return (lambda f: math.log(f / (1 - f)) if 0 < f < 1 else math.copysign(50, f - .5),
                    lambda c: 1 / (1 + math.exp(-c)), "fraction")
        if name == "lag":
            return (lambda x: x), (lambda x: x), "lag"
        return (lambda x: x), (lambda x: x), "plain"

    def _profile(self, name, level):
        """Profile-likelihood bounds of one natural parameter: (lo, hi, lo_status, hi_status)."""
        key = (name, round(level, 12))
        if key in self._profile_cache:
            return self._profile_cache[key]
        kin = self.kinetics
        names = kin.param_names
        j = names.index(name)
        est = float(self._theta[j])
        to_c, from_c, kind = self._transform(name)
        crit = self._crit(level)
        s2 = self.s2 if not self.absolute_sigma else 1.0
        rss0 = self.rss
        if not (np.isfinite(s2) and s2 > 0):
            out = (math.nan, math.nan, "failed", "failed")
            self._profile_cache[key] = out
            return out
        rate_anchor = fraction_anchor = None
        if kind == "rate":
            rate_anchor = list(kin.rate_names).index(name)
        if kind == "fraction":
            fraction_anchor = list(kin.fraction_names).index(name)
            if len(kin.fraction_names) == 1:
                out = (1.0, 1.0, "fixed", "fixed")
                self._profile_cache[key] = out
                return out
        engine = self._engine
        fixed_names = dict(self.fixed)
        c_hat = to_c(est)
        se = math.sqrt(self.covar[j, j]) if np.isfinite(self.covar[j, j]) else math.nan
        if kind == "rate":
            se_c = se / est if np.isfinite(se) and se > 0 else 0.3
        elif kind == "fraction":
            se_c = se / max(est * (1 - est), 1e-6) if np.isfinite(se) and se > 0 else 1.0
        else:
            scale = max(float(np.ptp(self.y)), 1e-3)
            se_c = se if np.isfinite(se) and se > 0 else 0.1 * scale
        se_c = min(max(se_c, 1e-6), 1e3)

        def fixed_at(c):
            d = dict(fixed_names)
            d[name] = from_c(c)
            return d

        def D(c, theta_start):
            """Scaled ΔRSS of the refit with the parameter fixed at from_c(c), and the refit."""
            fx = fixed_at(c)
            coords = engine.coords(fx, rate_anchor=rate_anchor, fraction_anchor=fraction_anchor)
            z_start = coords.z_from_theta(theta_start)
            sol = engine.problem.solve(coords, z_start, tol=1e-11,
                                       max_nfev=40 * (coords.size + 1))
            d = (sol.cost - rss0) / s2
            if not sol.success and np.isfinite(d) and d > crit:
                # not settled: a larger budget before deciding which side of the cut it is
                sol2 = engine.problem.solve(coords, sol.z, tol=1e-11,
                                            max_nfev=200 * (coords.size + 1))
                if np.isfinite(sol2.cost) and sol2.cost <= sol.cost:
                    sol = sol2
                    d = (sol.cost - rss0) / s2
            if not sol.success and np.isfinite(d) and d > crit:
                # still unsettled above the cut: the automatic starts as well, the lowest wins
                alt = engine.quick_fit(fx, sol.z, multi_start=True, tol=1e-11)
                if np.isfinite(alt.cost) and alt.cost < sol.cost:
                    sol = alt
                    d = (sol.cost - rss0) / s2
            # an unsettled refit's cost bounds the profile from above; it is used when nothing
            # better was found
            return d, sol

        lo_limit, hi_limit = self._search_limits(name, kind, c_hat, se_c)
        # the full coordinates anchored at the profiled parameter: there it is the coordinate
        # c itself, so d rss/dc (envelope theorem) is 2 r . J[:, j] at the constrained optimum
        full = engine.coords(fixed_names, rate_anchor=rate_anchor,
                             fraction_anchor=fraction_anchor)
        label = {"rate": f"log_{name}", "fraction": f"logit_{name}"}.get(kind, name)
        j_full = full.labels.index(label) if label in full.labels else None
        results = []
        for direction in (-1, 1):
            limit = lo_limit if direction < 0 else hi_limit
            warm = {"theta": self._theta}

            def evaluate(c, warm=warm):
                d, sol = D(c, warm["theta"])
                if not np.isfinite(d):
                    return math.nan, math.nan, False, ""
                if d <= crit:
                    # warm starts come from inside the interval only: a refit outside may
                    # sit in another basin, and stepping back from it can stay trapped there
                    warm["theta"] = sol.theta
                slope = math.nan
                if j_full is not None:
                    with np.errstate(all="ignore"):
                        r, J = engine.problem.evaluate(full, full.z_from_theta(sol.theta))
                    slope = 2.0 * float(r @ J[:, j_full]) / s2
                return d, slope, True, ""

            step = math.sqrt(crit) * se_c
            if kind in ("rate", "fraction"):
                step = min(step, 1.0)  # at most a factor e (or one logit unit) at first
            res = find_bound(evaluate, c_hat, direction, step, limit, crit, max_refits=80)
            status = res.status
            bound = from_c(res.u) if status == "ok" else None
            if status == "open" and (kind == "lag" or (
                    name in self.bounds and limit in self.bounds[name])):
                status = "at_bound"
            if status == "open" or status == "at_bound":
                if kind == "rate":
                    bound = 0.0 if direction < 0 else math.inf
                elif kind == "fraction":
                    bound = 0.0 if direction < 0 else 1.0
                elif kind == "lag":
                    bound = 0.0 if direction < 0 else math.inf
                else:
                    bound = -math.inf if direction < 0 else math.inf
                if name in self.bounds:
                    b = self.bounds[name][0 if direction < 0 else 1]
                    if np.isfinite(b):
                        bound = b
            elif status == "failed":
                bound = math.nan
            results.append((bound, status))
        out = (results[0][0], results[1][0], results[0][1], results[1][1])
        self._profile_cache[key] = out
        return out

    def _search_limits(self, name, kind, c_hat, se_c):
        tau = self.t - float(self.kinetics.switch_times[0])
        pos = tau[tau > 0]
        span = float(pos.max()) if pos.size else max(float(np.ptp(self.t)), 1.0)
        first = float(pos.min()) if pos.size else span / 10
        if kind == "rate":
            lo = math.log(1e-3 / span)
            hi = math.log(1e3 / first)
            return min(lo, c_hat - 1), max(hi, c_hat + 1)
        if kind == "fraction":
            # |logit f| = 20 is a pool of 2e-9 of the tissue: beyond it the profile is flat to
            # rounding and only numerical noise is left, so a profile still below the cut
            # there is open
            return min(-20.0, c_hat - 1), max(20.0, c_hat + 1)
        if kind == "lag":
            return 0.0, c_hat + max(50 * se_c, span)
        width = max(200 * se_c, 100 * max(float(np.ptp(self.y)), 1.0))
        lo, hi = c_hat - width, c_hat + width
        if name in self.bounds:  # the user's bounds close the search (status at_bound)
            b_lo, b_hi = self.bounds[name]
            lo, hi = max(lo, b_lo), min(hi, b_hi)
        return lo, hi

    def _asymptotic(self, name, level):
        kin = self.kinetics
        j = kin.param_names.index(name)
        est = float(self._theta[j])
        var = self.covar[j, j]
        if not (np.isfinite(var) and var >= 0):
            return math.nan, math.nan, "failed", "failed"
        se = math.sqrt(var)
        q = self.state.normal_quantile(level)
        if name in kin.rate_names:
            s = se / est
            if q * s > 300:
                return 0.0, math.inf, "open", "open"
            return est * math.exp(-q * s), est * math.exp(q * s), "ok", "ok"
        lo, hi = est - q * se, est + q * se
        ls = hs = "ok"
        if name in kin.fraction_names:
            if lo < 0:
                lo, ls = 0.0, "at_bound"
            if hi > 1:
                hi, hs = 1.0, "at_bound"
        if name == "lag" and lo < 0:
            lo, ls = 0.0, "at_bound"
        return lo, hi, ls, hs

    def _rate_at_zero(self, k) -> bool:
        """A rate run to its lower edge: no change within the sampling span (k·span ≤ 1e-12)."""
        return float(k) * max(float(np.ptp(self.t)), 1.0) <= 1e-12

    def _implicit_fixed(self):
        """Parameters fixed by construction (the fraction of a single pool)."""
        kin = self.kinetics
        return set(kin.fraction_names) if len(kin.fraction_names) == 1 else set()

    def _interval(self, name, level, method):
        if name in self.fixed:
            v = self.fixed[name]
            return v, v, "fixed", "fixed"
        if name in self._implicit_fixed():
            v = float(self.values[name])
            return v, v, "fixed", "fixed"
        if method in ("bootstrap", "mcmc"):
            return self._resampled_interval(name, level, method)
        if method == "profile" and self.loss == "linear":
            if name in self.tied:
                # a parameter set by an expression is a derived quantity: constrained profile
                key = (name, round(level, 12))
                if key not in self._profile_cache:
                    j = self.kinetics.param_names.index(name)
                    pi = self.profile(lambda th, j=j: th[j], level, name=name,
                                      positive=name in self.kinetics.rate_names)
                    self._profile_cache[key] = (pi.lower, pi.upper, pi.lower_status,
                                                pi.upper_status)
                return self._profile_cache[key]
            return self._profile(name, level)
        return self._asymptotic(name, level)

    def _method_used(self, method):
        if method == "profile" and self.loss != "linear":
            return "asymptotic"
        if method == "bootstrap":
            return "bootstrap (percentile)"
        return method

    def _resampled_interval(self, name, level, method):
        """Interval of a parameter or derived quantity from the stored bootstrap / MCMC."""
        if method == "bootstrap":
            if getattr(self, "_boot", None) is None:
                self.bootstrap()
            tab = self._boot.intervals(level, method="percentile")
        else:
            if getattr(self, "_mcmc", None) is None:
                self.sample()
            tab = self._mcmc.intervals(level)
        row = tab[tab["parameter"] == name]
        if not len(row):
            return math.nan, math.nan, "not_available", "not_available"
        r = row.iloc[0]
        return float(r["lower"]), float(r["upper"]), str(r["lower_status"]), \
            str(r["upper_status"])

    # -- resampling and bands (isoturnover.uncertainty) ----------------------------------
    def bootstrap(self, n=999, kind="residual", rng=0, n_jobs=1, progress=None,
                  quantities=None, **kwargs):
        """Bootstrap this fit (see :func:`isoturnover.uncertainty.bootstrap`).

        The result is kept on the fit: ``method="bootstrap"`` in :meth:`conf_int`,
        :meth:`half_lives` and :meth:`time_to` then uses it (percentile intervals). Seeded
        (``rng=0`` by default) and reproducible whatever ``n_jobs``.
        """
        from .uncertainty import bootstrap

        self._boot = bootstrap(self, n=n, kind=kind, rng=rng, n_jobs=n_jobs,
                               progress=progress, quantities=quantities, **kwargs)
        return self._boot

    def sample(self, **kwargs):
        """MCMC draws of this fit's posterior (see :func:`isoturnover.uncertainty.sample`).

        Needs the ``mcmc`` extra (emcee). Kept on the fit for ``method="mcmc"``.
        """
        from .uncertainty import sample

        kwargs.setdefault("rng", 0)
        self._mcmc = sample(self, **kwargs)
        return self._mcmc

    def profile(self, fn, level=0.95, **kwargs):
        """Profile-likelihood interval of a derived quantity ``fn(theta)``.

        See :func:`isoturnover.uncertainty.profile_derived`; ``theta`` is the natural
        parameter vector in the order of ``fit.kinetics.param_names``.
        """
        from .uncertainty import profile_derived

        return profile_derived(self, fn, check_level(level), **kwargs)

    def band(self, t, level=0.95, kind="confidence", method="delta", boot=None, **kwargs):
        """Confidence or prediction band of the fitted curve at times ``t``.

        See :func:`isoturnover.uncertainty.band`; columns time, fitted, lower, upper.
        """
        from .uncertainty import band

        if method == "bootstrap" and boot is None:
            boot = getattr(self, "_boot", None) or self.bootstrap()
        return band(self, t, level=level, kind=kind, method=method, boot=boot, **kwargs)

    def conf_int(self, level=0.95, method="profile", params=None) -> pd.DataFrame:
        """Confidence intervals of every parameter (long table).

        Columns: parameter, estimate, stderr, lower, upper, level, method, lower_status,
        upper_status. ``method="profile"`` (profile likelihood; asymptotic for robust
        losses) or ``"asymptotic"`` (covariance; log scale for rates). ``params`` limits
        the table to some parameters.
        """
        level = check_level(level)
        method = check_method(method)
        names = self.kinetics.param_names
        if params is not None:
            unknown = [p for p in params if p not in names]
            if unknown:
                raise ValueError(f"'params' has unknown parameter(s) {', '.join(unknown)}; "
                                 f"this fit's parameters are {', '.join(names)}")
            names = [n for n in names if n in params]
        rows = []
        se = self.stderr
        for nm in names:
            lo, hi, ls, hs = self._interval(nm, level, method)
            fx = nm in self.fixed or nm in self._implicit_fixed()
            rows.append({"parameter": nm, "estimate": self.values[nm],
                         "stderr": se[nm] if not fx else 0.0,
                         "lower": lo, "upper": hi, "level": level,
                         "method": "fixed" if fx else self._method_used(method),
                         "lower_status": ls, "upper_status": hs})
        return pd.DataFrame(rows)

    def half_lives(self, level=0.95, method="profile") -> pd.DataFrame:
        """Half-life t½ = ln 2 / k of each pool (or chain step), with interval bounds.

        Columns: pool, fraction, rate, half_life, lower, upper, level, method,
        lower_status, upper_status, rate_lower, rate_upper, rate_kind, time_unit.
        Intervals are the transformed bounds of the rate (profile likelihood by default).
        """
        level = check_level(level)
        method = check_method(method)
        kin = self.kinetics
        v = self.values
        rows = []
        for i, nm in enumerate(kin.rate_names):
            k = v[nm]
            lo, hi, ls, hs = self._interval(nm, level, method)
            frac = v.get(f"f{i + 1}", math.nan) if kin.structure == "parallel" else math.nan
            hl_lo = LN2 / hi if hi > 0 else math.inf
            hl_hi = LN2 / lo if lo > 0 else math.inf
            if ls in ("open",) and not lo > 0:
                hl_hi = math.inf
            rows.append({
                "pool": i + 1, "fraction": frac, "rate": k,
                # a rate run to its lower edge (0 within double precision): t½ = ∞
                "half_life": math.inf if self._rate_at_zero(k) else LN2 / k,
                "lower": hl_lo if np.isfinite(hi) or hs != "failed" else math.nan,
                "upper": hl_hi if ls != "failed" else math.nan,
                "level": level, "method": "fixed" if nm in self.fixed else
                self._method_used(method),
                "lower_status": hs, "upper_status": ls,
                "rate_lower": lo, "rate_upper": hi,
                "rate_kind": self.rate_kind, "time_unit": self.time_unit,
            })
        return pd.DataFrame(rows)

    def remaining(self, tau) -> np.ndarray:
        """1 − F: fraction of a step change still to come, ``tau`` after a switch (no lag)."""
        return self.kinetics.remaining(np.asarray(tau, dtype=float), self._theta)

    def _remaining_at(self, tau, theta):
        """1 − F a time tau after the first switch (growth curves included)."""
        return quantities.remaining_after_switch(self.kinetics, tau, theta)

    def _time_to(self, p, theta):
        return quantities.time_to(self.kinetics, p, theta)

    def time_to(self, fraction=0.95, level=0.95, method="profile") -> pd.DataFrame:
        """Time after the switch for the tissue to make ``fraction`` of a step change.

        One pool: :math:`-\\ln(1-p)/k` (4.32 half-lives for p = 0.95); several pools and
        the chain: solved numerically. Includes the lag when there is one. Profile
        intervals (one pool: from the rate's profile; otherwise a constrained profile of
        the derived quantity); with a growth curve, where the time has no closed form, a
        delta-method interval on the log scale (``method`` then reads "asymptotic").

        Columns: fraction, estimate, lower, upper, level, method, lower_status,
        upper_status, time_unit.
        """
        level = check_level(level)
        method = check_method(method)
        fr = np.atleast_1d(np.asarray(fraction, dtype=float))
        if np.any(~((fr > 0) & (fr < 1))):
            raise ValueError(f"'fraction' must be between 0 and 1 (0.95 = 95 %); got {fraction!r}")
        kin = self.kinetics
        rows = []
        simple = kin.structure == "parallel" and kin.pools == 1 and kin.lag_index is None \
            and kin.growth_kind is None
        for p in fr:
            est = self._time_to(p, self._theta)
            if simple and method in ("profile", "asymptotic"):
                lo_k, hi_k, ls, hs = self._interval("k1", level, method)
                c = -math.log(1 - p)
                lo = c / hi_k if hi_k > 0 else 0.0
                hi = c / lo_k if lo_k > 0 else math.inf
                m = "fixed" if "k1" in self.fixed else self._method_used(method)
                rows.append({"fraction": p, "estimate": est, "lower": lo, "upper": hi,
                             "level": level, "method": m, "lower_status": hs,
                             "upper_status": ls, "time_unit": self.time_unit})
                continue
            if method == "bootstrap" and abs(p - 0.95) < 1e-12:
                lo, hi, ls, hs = self._resampled_interval("time_to_95", level, "bootstrap")
                m = "bootstrap (percentile)"
            elif method == "profile" and self.loss == "linear" and \
                    kin.growth_kind not in ("curve", "curve_params"):
                key = ("time_to", float(p), round(level, 12))
                if key not in self._profile_cache:
                    grad = None
                    if kin.structure == "parallel":
                        def grad(th, p=p):
                            return quantities.time_to_grad(kin, p, self._time_to(p, th), th)
                    self._profile_cache[key] = self._derived_interval(
                        lambda th, p=p: self._time_to(p, th), est, level, "profile",
                        scale="log", grad=grad)
                lo, hi, ls, hs, m = self._profile_cache[key]
            else:
                lo, hi, ls, hs = self._delta_log(lambda th, p=p: self._time_to(p, th), est,
                                                 level)
                m = "asymptotic"
            rows.append({"fraction": p, "estimate": est, "lower": lo, "upper": hi,
                         "level": level, "method": m, "lower_status": ls,
                         "upper_status": hs, "time_unit": self.time_unit})
        return pd.DataFrame(rows)

    def _grad_z(self, g):
        """Central-difference gradient of g(theta(z)) in the internal coordinates."""
        z = self._sol.z
        grad = np.zeros(z.size)
        for i in range(z.size):  # over the (few) parameters, not the data
            h = 1e-6 * max(1.0, abs(z[i]))
            zp, zm = z.copy(), z.copy()
            zp[i] += h
            zm[i] -= h
            grad[i] = (g(self._coords.theta(zp)) - g(self._coords.theta(zm))) / (2 * h)
        return grad

    def _delta_log(self, fn, est, level):
        """Delta-method interval of a positive derived quantity on the log scale."""
        if not self._cov_ok or not est > 0:
            return math.nan, math.nan, "failed", "failed"
        grad = self._grad_z(lambda th: math.log(fn(th)))
        var = float(grad @ self._cov_z0 @ grad)
        if not var >= 0:
            return math.nan, math.nan, "failed", "failed"
        q = self.state.normal_quantile(level)
        s = math.sqrt(var)
        if q * s > 300:
            return 0.0, math.inf, "open", "open"
        return est * math.exp(-q * s), est * math.exp(q * s), "ok", "ok"

    def mean_residence_time(self) -> float:
        r"""Mean residence time of the step response, :math:`\int_0^\infty (1-F)\,d\tau`.

        Parallel pools :math:`\sum_i f_i/k_i` (with exponential growth
        :math:`\sum_i f_i/(k_i + k_g)`); chain :math:`1/k_1 + 1/k_2`; with a growth curve
        the integral is taken numerically from the first switch; plus the lag.
        """
        return self._mrt(self._theta)

    def _mrt(self, theta):
        return quantities.mean_residence_time(self.kinetics, theta, float(np.ptp(self.t)))

    # -- growth dilution -------------------------------------------------------------------
    def _require_growth(self, what):
        if self.kinetics.growth_kind is None:
            raise ValueError(f"{what} needs a fit with a growth model (TurnoverModel(growth=...))")

    def _log_mass_ratio(self, t0, t1, theta=None):
        """ln W(t1) − ln W(t0) for this fit's growth model."""
        th = self._theta if theta is None else theta
        return quantities.log_mass_ratio(self.kinetics, t0, t1, th)

    def mean_growth_rate(self) -> float:
        """Mean specific growth rate (d ln W/dt) from the first switch to the last sample."""
        self._require_growth("mean_growth_rate")
        t0 = float(self.kinetics.switch_times[0])
        t1 = float(self.t.max())
        if self.kinetics.growth_kind == "exponential":
            return float(self.values["k_growth"])
        return self._log_mass_ratio(t0, t1) / (t1 - t0) if t1 > t0 else math.nan

    def growth_rate_curve(self, t) -> np.ndarray:
        """Specific growth rate d ln W/dt at times ``t``."""
        self._require_growth("growth_rate_curve")
        return self.kinetics.growth_rate(np.asarray(t, dtype=float), self._theta)

    def _share_at(self, T, theta):
        """Tissue growth share up to T after the first switch (DESIGN §2)."""
        return quantities.growth_share_at(self.kinetics, T, theta)

    def growth_share_curve(self, t) -> np.ndarray:
        """Share of the change up to each time ``t`` that growth alone would have produced."""
        self._require_growth("growth_share_curve")
        t = np.atleast_1d(np.asarray(t, dtype=float))
        return np.array([self._share_at(float(x), self._theta) for x in t])

    def growth_share(self, level=0.95, method="profile", at=None) -> pd.DataFrame:
        r"""Share of the tissue's change that growth alone explains.

        Defined (DESIGN §2) as the part of the change up to time ``at`` (default: the last
        sample) that growth alone would have produced — new tissue laid down with the new
        diet's value, :math:`1 - W(s)/W(t)` — divided by the whole change
        :math:`1 - \sum_i f_i (W(s)/W(t)) e^{-k_i (t-s)}`. The per-pool share for
        exponential growth is :math:`k_g/(k_g + k_{d,i})` (Hesslein et al. 1993), the
        limit of the tissue share at short times for one pool.

        Columns: quantity (``tissue`` then ``pool_i`` for exponential growth), at,
        estimate, lower, upper, level, method, lower_status, upper_status.
        """
        self._require_growth("growth_share")
        level = check_level(level)
        method = check_method(method)
        T = float(self.t.max()) if at is None else float(at)
        rows = []

        def share(th):
            return self._share_at(T, th)

        est = share(self._theta)
        lo, hi, ls, hs, m = self._share_interval(share, est, level, method)
        rows.append({"quantity": "tissue", "at": T, "estimate": est, "lower": lo, "upper": hi,
                     "level": level, "method": m, "lower_status": ls, "upper_status": hs})
        kin = self.kinetics
        if kin.growth_kind == "exponential":
            for i, j in enumerate(kin.rate_index):
                def pool_share(th, j=j):
                    kg = th[kin.growth_rate_index]
                    return kg / (kg + th[j])

                e = pool_share(self._theta)
                lo, hi, ls, hs, m = self._share_interval(pool_share, e, level, method)
                rows.append({"quantity": f"pool_{i + 1}", "at": math.nan, "estimate": e,
                             "lower": lo, "upper": hi, "level": level, "method": m,
                             "lower_status": ls, "upper_status": hs})
        return pd.DataFrame(rows)

    def _share_interval(self, fn, est, level, method):
        """Interval of a growth share; at the edge (catabolic rate run to 0) the share is 1
        and its lower bound comes from the catabolic rate's upper bound (one pool: the share
        falls as the rate grows)."""
        kin = self.kinetics
        if np.isfinite(est) and est > 1 - 1e-9:
            if len(kin.rate_names) == 1 and method in ("profile", "asymptotic"):
                _, k_hi, _, k_hs = self._interval(kin.rate_names[0], level, method)
                if k_hs == "ok" and np.isfinite(k_hi):
                    th = self._theta.copy()
                    th[kin.rate_index[0]] = k_hi
                    return float(fn(th)), 1.0, "ok", "at_bound", self._method_used(method)
            return math.nan, 1.0, "failed", "at_bound", self._method_used(method)
        return self._derived_interval(fn, est, level, method, scale="logit")

    def incorporation_half_lives(self, level=0.95, method="profile") -> pd.DataFrame:
        """Incorporation (growth + catabolic) half-life of each pool, ln 2/(k_d,i + k_g).

        For exponential growth k_g is the fitted ``k_growth``; for a growth curve the mean
        specific growth rate over the sampling period. Same columns as :meth:`half_lives`.
        """
        self._require_growth("incorporation_half_lives")
        level = check_level(level)
        method = check_method(method)
        kin = self.kinetics
        rows = []
        for i, j in enumerate(kin.rate_index):
            if kin.growth_kind == "exponential":
                def hl(th, j=j):
                    return LN2 / (th[j] + th[kin.growth_rate_index])
            else:
                g = self.mean_growth_rate()

                def hl(th, j=j, g=g):
                    return LN2 / (th[j] + g)
            est = hl(self._theta)
            lo, hi, ls, hs, m = self._derived_interval(hl, est, level, method, scale="log")
            rows.append({"pool": i + 1,
                         "fraction": self.values.get(f"f{i + 1}", math.nan),
                         "rate": LN2 / est, "half_life": est, "lower": lo, "upper": hi,
                         "level": level, "method": m, "lower_status": ls, "upper_status": hs,
                         "rate_kind": "incorporation", "time_unit": self.time_unit})
        return pd.DataFrame(rows)

    def fry_arnold_exponent(self, level=0.95, method="profile") -> pd.DataFrame:
        r"""Exponent c of the power form :math:`\delta = \delta_{eq} + (\delta_0 - \delta_{eq})
        (W/W_0)^c` (Fry & Arnold 1982), from an exponential-growth one-pool fit:
        :math:`c = -(k_g + k_d)/k_g`; c = −1 is pure growth dilution.
        """
        kin = self.kinetics
        if kin.growth_kind != "exponential" or len(kin.rate_names) != 1:
            raise ValueError("fry_arnold_exponent needs a one-pool fit with "
                             "growth='exponential'")
        level = check_level(level)
        method = check_method(method)

        def c(th):
            return -(th[kin.growth_rate_index] + th[kin.rate_index[0]]) / th[kin.growth_rate_index]

        est = c(self._theta)
        lo, hi, ls, hs, m = self._derived_interval(lambda th: -c(th), -est, level, method,
                                                   scale="log")
        return pd.DataFrame([{"quantity": "fry_arnold_c", "estimate": est, "lower": -hi,
                              "upper": -lo, "level": level, "method": m,
                              "lower_status": hs, "upper_status": ls}])

    def _derived_interval(self, fn, est, level, method, scale="log", grad=None):
        """Interval of a derived quantity: profile likelihood when available, else delta."""
        if method == "profile" and self.loss == "linear":
            try:
                from .uncertainty import profile_derived
            except ImportError:
                profile_derived = None
            if profile_derived is not None:
                r = profile_derived(self, fn, level, positive=scale in ("log", "logit"),
                                    grad=grad)
                get = r.get if isinstance(r, dict) else (lambda k: getattr(r, k))
                return (get("lower"), get("upper"), get("lower_status"),
                        get("upper_status"), "profile")
        lo, hi, ls, hs = self._delta_scaled(fn, est, level, scale)
        return lo, hi, ls, hs, "asymptotic"

    def _delta_scaled(self, fn, est, level, scale):
        if scale == "log":
            return self._delta_log(fn, est, level)
        if not self._cov_ok or not np.isfinite(est):
            return math.nan, math.nan, "failed", "failed"
        if scale == "logit":
            if not 0 < est < 1:
                return math.nan, math.nan, "failed", "failed"

            def g(th):
                v = fn(th)
                return math.log(v / (1 - v))
        else:
            g = fn
        grad = self._grad_z(g)
        var = float(grad @ self._cov_z0 @ grad)
        q = self.state.normal_quantile(level)
        c = g(self._theta)
        lo, hi = c - q * math.sqrt(max(var, 0)), c + q * math.sqrt(max(var, 0))
        if scale == "logit":
            return 1 / (1 + math.exp(-lo)), 1 / (1 + math.exp(-hi)), "ok", "ok"
        return lo, hi, "ok", "ok"

    # -- diagnostics ------------------------------------------------------------------------
    def influence(self) -> pd.DataFrame:
        """Studentised residuals, leverage and Cook's distance of every point.

        Internally studentised residuals :math:`r_i/(s\\sqrt{1-h_{ii}})` and Cook's
        distance :math:`D_i = r_i^2 h_{ii} / (p s^2 (1-h_{ii})^2)` (Cook 1977), from the
        weighted Jacobian at the solution. ``flagged`` marks |studentised| > 3 or D > 1
        (common practice); flagged points are kept in the fit — look at them.
        """
        J = self._sol.jac_z
        r = self._wres()
        n, p = self.nobs, self.nvarys
        s2 = self.rss / self.dof if self.dof > 0 else math.nan
        if self.joint:
            s2 = 1.0
        if p and J is not None and self._cov_ok:
            q, _ = np.linalg.qr(J)
            h = np.sum(q[:n] ** 2, axis=1)
        else:
            h = np.full(n, math.nan)
        with np.errstate(divide="ignore", invalid="ignore"):
            stud = r / np.sqrt(s2 * (1 - h))
            cook = r**2 * h / (p * s2 * (1 - h) ** 2) if p else np.full(n, math.nan)
        flagged = (np.abs(stud) > 3) | (cook > 1)
        return pd.DataFrame({"time": self.t, "value": self.y, "fitted": self.best_fit,
                             "residual": self.residuals, "studentized": stud, "leverage": h,
                             "cooks_distance": cook, "flagged": flagged})

    # -- tables and summary -------------------------------------------------------------------
    def table(self, level=0.95, method="profile") -> pd.DataFrame:
        """One tidy row per parameter and derived quantity.

        Columns: quantity, kind ("parameter" or "derived"), estimate, stderr, lower, upper,
        level, method, lower_status, upper_status, unit.
        """
        ci = self.conf_int(level, method)
        unit = self.time_unit
        kin = self.kinetics
        units = {}
        for nm in kin.param_names:
            if nm in kin.rate_names or nm == "k_growth":
                units[nm] = f"per {unit_word(unit)[:-1]}"
            elif nm == "lag":
                units[nm] = unit_word(unit)
            elif nm in kin.fraction_names:
                units[nm] = "fraction"
            elif nm.startswith("growth_"):
                units[nm] = "growth-curve parameter"
            else:
                units[nm] = "‰"
        ci = ci.rename(columns={"parameter": "quantity"})
        ci.insert(1, "kind", "parameter")
        ci["unit"] = ci["quantity"].map(units)
        hl = self.half_lives(level, method)
        rows = []
        for _, r in hl.iterrows():
            rows.append({"quantity": f"half_life_{int(r['pool'])}", "kind": "derived",
                         "estimate": r["half_life"], "stderr": math.nan, "lower": r["lower"],
                         "upper": r["upper"], "level": level, "method": r["method"],
                         "lower_status": r["lower_status"], "upper_status": r["upper_status"],
                         "unit": unit_word(unit)})
        tt = self.time_to(0.95, level, method).iloc[0]
        rows.append({"quantity": "time_to_95", "kind": "derived", "estimate": tt["estimate"],
                     "stderr": math.nan, "lower": tt["lower"], "upper": tt["upper"],
                     "level": level, "method": tt["method"], "lower_status": tt["lower_status"],
                     "upper_status": tt["upper_status"], "unit": unit_word(unit)})
        mrt = self.mean_residence_time()
        if method == "bootstrap":
            lo, hi, ls, hs = self._resampled_interval("mean_residence_time", level, method)
            m = "bootstrap (percentile)"
        elif np.isfinite(mrt) and self.kinetics.growth_kind in ("curve", "curve_params"):
            # no closed form (a numerical integral): a profile would nest the integral in
            # every constrained refit; the delta method on the log scale instead
            lo, hi, ls, hs = self._delta_log(self._mrt, mrt, level)
            m = "asymptotic"
        elif np.isfinite(mrt):
            key = ("mean_residence_time", round(level, 12), method)
            if key not in self._profile_cache:
                kin = self.kinetics
                grad = None
                if kin.growth_kind not in ("curve", "curve_params"):
                    def grad(th):
                        return quantities.mean_residence_time_grad(kin, th)
                self._profile_cache[key] = self._derived_interval(
                    self._mrt, mrt, level, method, scale="log", grad=grad)
            lo, hi, ls, hs, m = self._profile_cache[key]
        else:
            lo, hi, ls, hs, m = math.nan, math.inf, "not_available", "open", method
        rows.append({"quantity": "mean_residence_time", "kind": "derived",
                     "estimate": mrt, "stderr": math.nan, "lower": lo, "upper": hi,
                     "level": level, "method": m, "lower_status": ls, "upper_status": hs,
                     "unit": unit_word(unit)})
        return pd.concat([ci, pd.DataFrame(rows)], ignore_index=True)

    def notes(self) -> list[str]:
        """Numbered-note texts: every trust warning, then notes on method and meaning."""
        out = [w.message for w in self.warnings]
        kin = self.kinetics
        if self.rate_kind == "incorporation":
            out.append("rates are incorporation rates: without a growth model they lump "
                       "growth dilution and catabolic turnover")
        else:
            out.append("rates k1… are catabolic rates (growth dilution modelled separately; "
                       "pools assumed to grow in proportion to body mass); a juvenile's "
                       "catabolic rate is that of a non-growing animal of its size and state, "
                       "not of an adult")
        if kin.structure == "parallel" and kin.pools > 1:
            out.append("pool fractions describe the shape of the curve; they need not be "
                       "physical compartments")
        if self.sigma is not None and not self.absolute_sigma:
            out.append("sigma used as relative weights; residual variance estimated from the "
                       "scatter (analytic sd is usually far below the scatter between time "
                       "points of a living animal)")
        if self.loss != "linear":
            out.append(f"robust loss '{self.loss}' (scale {self.f_scale:.3g} from the MAD of a "
                       "first fit); intervals are asymptotic")
        iso_ = self.model.isotope or self.data_info.get("isotope")
        if iso_ in ("d2H", "d18O"):
            out.append("for hydrogen and oxygen the 'diet' input stands for the combined input "
                       "of food, drinking water (and, for oxygen, air)")
        infl = self.influence()
        fl = infl[infl["flagged"]]
        if len(fl):
            out.append("points flagged as outlying or influential (kept in the fit): t = "
                       + ", ".join(f"{x:g}" for x in fl["time"]))
        if self.data_info.get("design") == "destructive":
            out.append("destructive sampling (one animal per sample): the residual variance "
                       "holds the between-animal scatter")
        return out

    def summary(self, level=0.95, method="profile") -> Summary:
        """A printable summary (``str()`` for text, ``_repr_html_`` in notebooks)."""
        return Summary(self, level, method)

    def __repr__(self):
        return (f"<TurnoverFit {self.label or ''} {self.model.describe()}: n={self.nobs}, "
                f"rss={self.rss:.4g}, aicc={self.aicc:.4g}, "
                f"{'converged' if self.converged else 'NOT converged'}, "
                f"{len(self.warnings)} warning(s)>")

    def _repr_html_(self):
        return self.summary()._repr_html_()

    # -- serialisation -----------------------------------------------------------------------
    def to_dict(self) -> dict:
        """A JSON-safe description from which :func:`load_fit` rebuilds this fit."""
        def fl(a):
            return None if a is None else [float(x) for x in np.asarray(a).ravel()]

        return {
            "format": "isoturnover-fit", "version": 1,
            "model": self.model.config(),
            "data": {"t": fl(self.t), "y": fl(self.y), "sigma": fl(self.sigma),
                     "time_unit": self.time_unit, "info": json_safe(self.data_info),
                     "masses": None if getattr(self._engine.mass_block, "kind", None)
                     != "masses" else
                     [fl(self._engine.mass_block.t), fl(self._engine.mass_block.mass)],
                     "block_scale": None if self.block_scale is None else
                     list(self.block_scale)},
            "options": {"absolute_sigma": self.absolute_sigma, "loss": self.loss,
                        "f_scale": self.f_scale, "fixed": self.fixed, "init": self.init,
                        "label": self.label, "tied": self.tied,
                        "bounds": {k: [float(a) if np.isfinite(a) else None,
                                       float(b) if np.isfinite(b) else None]
                                   for k, (a, b) in self.bounds.items()}},
            "solution": {"z": fl(self._sol.z), "theta": fl(self._theta),
                         "jac_z": None if self._sol.jac_z is None else
                         np.asarray(self._sol.jac_z).tolist(),
                         "status": self._sol.status, "nfev": self.nfev,
                         "message": self.message, "success": self._optimizer_ok,
                         "starts_tried": self.starts_tried,
                         "coords": {"rate_anchor": self._coords.rate_anchor,
                                    "fraction_anchor": self._coords.fraction_anchor}},
        }

    def to_json(self, **kwargs) -> str:
        return json.dumps(self.to_dict(), **kwargs)


def json_safe(d):
    out = {}
    for k, v in d.items():
        if isinstance(v, (np.integer,)):
            v = int(v)
        elif isinstance(v, (np.floating,)):
            v = float(v)
        elif isinstance(v, np.ndarray):
            v = v.tolist()
        elif isinstance(v, (list, tuple)):
            v = [x.item() if hasattr(x, "item") else x for x in v]
        out[k] = v
    return out


# ----------------------------------------------------------------------------------------
# Summary
# ----------------------------------------------------------------------------------------
def _fmt(x, digits=4):
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "—"
    if isinstance(x, float) and math.isinf(x):
        return "∞" if x > 0 else "−∞"
    return f"{x:.{digits}g}"


def _bound(x, status):
    if status == "open":
        return "open"
    if status == "failed":
        return "failed"
    s = _fmt(x)
    return s + ("*" if status == "at_bound" else "")


class Summary:
    """Printable fit summary: header, parameters, derived quantities, numbered notes."""

    def __init__(self, fit: TurnoverFit, level=0.95, method="profile"):
        self.fit = fit
        self.level = check_level(level)
        self.method = check_method(method)
        self.header = self._header()
        self.parameters = fit.conf_int(self.level, self.method)
        self.half_lives = fit.half_lives(self.level, self.method)
        self.time_to = fit.time_to(0.95, self.level, self.method)
        self.notes = fit.notes()

    def _header(self):
        f = self.fit
        unit = unit_word(f.time_unit)
        rel = " (σ as relative weights)" if f.sigma is not None else ""
        if f.joint and f._engine.mass_block.kind == "prior":
            weighting = ("δ residual variance estimated" + rel + "; growth-curve parameters "
                         "carried with their uncertainty (Gaussian penalty from the growth "
                         "fit), so profiles run over them too")
        elif f.joint:
            sd_, sm_ = f.block_scale
            permil = "" if f.sigma is not None else " ‰"
            weighting = (f"joint fit of δ and ln(body mass), each block weighted by its own "
                         f"residual sd (s_δ = {sd_:.3g}{permil}{rel}, s_ln W = {sm_:.3g})")
        elif f.sigma is None:
            weighting = "unweighted; residual variance estimated"
        elif f.absolute_sigma:
            weighting = "weights 1/σ² with σ known (absolute); no rescaling"
        else:
            weighting = "weights 1/σ² (relative); residual variance estimated"
        if f.joint:
            raw = f.y - f.best_fit
            p_d = f.nvarys - (f._engine.mass_block.size if f._engine.mass_block.kind == "prior"
                              else 1)
            s_text = (f"{_fmt(math.sqrt(float(raw @ raw) / max(f.nobs - p_d, 1)))} ‰ "
                      "(δ residuals)")
        else:
            s_text = _fmt(math.sqrt(f.s2)) if f.s2 > 0 else "—"
        rows = [
            ("Data", f"{f.label + ': ' if f.label else ''}{f.nobs} time points, "
                     f"t = {f.t.min():g} to {f.t.max():g} {unit}"),
            ("Model", f.model.describe()),
            ("Method", f"least squares ({'robust, ' + f.loss if f.loss != 'linear' else 'linear'}"
                       f" loss), {f.starts_tried} start(s); intervals: "
                       f"{f._method_used(self.method)}, {self.level:.0%}"),
            ("Weighting", weighting),
            ("Fit", f"RSS {_fmt(f.rss)}, s = {s_text}, "
                    f"AICc {_fmt(f.aicc, 5)}, BIC {_fmt(f.bic, 5)}, "
                    f"{'converged' if f.converged else 'NOT converged'}"),
        ]
        if f.absolute_sigma and f.chisqr_pvalue is not None:
            rows.append(("Goodness of fit", f"χ² = {_fmt(f.rss)} on {f.dof} dof "
                                            f"(χ²/dof {_fmt(f.redchi, 3)}), p = "
                                            f"{_fmt(f.chisqr_pvalue, 3)}"))
        rows.append(("Rates", f"{f.rate_kind} rates, per {unit[:-1]}"))
        return rows

    def _note_marks(self):
        return [f"[{i + 1}] {n}" for i, n in enumerate(self.notes)]

    def __str__(self):
        f = self.fit
        lines = ["Turnover fit", "=" * 72]
        w = max(len(k) for k, _ in self.header)
        lines += [f"{k:<{w}}  {v}" for k, v in self.header]
        lines.append("")
        lines.append(f"Parameters ({self.level:.0%} intervals)")
        lines.append(f"  {'name':<16}{'estimate':>12}{'stderr':>12}{'lower':>12}{'upper':>12}")
        for _, r in self.parameters.iterrows():
            if r["method"] == "fixed":
                lines.append(f"  {r['parameter']:<16}{_fmt(r['estimate']):>12}{'(fixed)':>12}")
                continue
            est_text = _fmt(r["estimate"])
            if r["parameter"] in f.kinetics.rate_names and f._rate_at_zero(r["estimate"]):
                est_text = "0 (edge)"  # a rate run to 0 within double precision
            lines.append(f"  {r['parameter']:<16}{est_text:>12}"
                         f"{_fmt(r['stderr']):>12}{_bound(r['lower'], r['lower_status']):>12}"
                         f"{_bound(r['upper'], r['upper_status']):>12}")
        lines.append("")
        unit = unit_word(f.time_unit)
        lines.append(f"Derived quantities ({unit})")
        for _, r in self.half_lives.iterrows():
            what = "step" if f.kinetics.structure == "chain" else "pool"
            frac = "" if math.isnan(r["fraction"]) else f" (fraction {_fmt(r['fraction'], 3)})"
            lines.append(f"  half-life, {what} {int(r['pool'])}{frac}: {_fmt(r['half_life'])} "
                         f"[{_bound(r['lower'], r['lower_status'])}, "
                         f"{_bound(r['upper'], r['upper_status'])}]")
        tt = self.time_to.iloc[0]
        lines.append(f"  time to 95 % of a step change: {_fmt(tt['estimate'])} "
                     f"[{_bound(tt['lower'], tt['lower_status'])}, "
                     f"{_bound(tt['upper'], tt['upper_status'])}] — {tt['method']}")
        lines.append(f"  mean residence time: {_fmt(f.mean_residence_time())}")
        if any(self.parameters["lower_status"].eq("at_bound")
               | self.parameters["upper_status"].eq("at_bound")):
            lines.append("  (* at the bound of the parameter's range)")
        if self.notes:
            lines.append("")
            lines.append("Notes")
            lines += [f"  {m}" for m in self._note_marks()]
        return "\n".join(lines)

    def _repr_html_(self):
        e = html.escape
        f = self.fit
        out = ["<div class='isoturnover-summary'><table>"]
        out += [f"<tr><th style='text-align:left'>{e(k)}</th><td style='text-align:left'>"
                f"{e(v)}</td></tr>" for k, v in self.header]
        out.append("</table><table><tr><th>parameter</th><th>estimate</th><th>stderr</th>"
                   "<th>lower</th><th>upper</th></tr>")
        for _, r in self.parameters.iterrows():
            if r["method"] == "fixed":
                out.append(f"<tr><td>{e(r['parameter'])}</td><td>{_fmt(r['estimate'])}</td>"
                           "<td colspan=3>fixed</td></tr>")
                continue
            out.append(f"<tr><td>{e(r['parameter'])}</td><td>{_fmt(r['estimate'])}</td>"
                       f"<td>{_fmt(r['stderr'])}</td>"
                       f"<td>{e(_bound(r['lower'], r['lower_status']))}</td>"
                       f"<td>{e(_bound(r['upper'], r['upper_status']))}</td></tr>")
        out.append("</table><table><tr><th>pool</th><th>fraction</th><th>half-life "
                   f"({e(unit_word(f.time_unit))})</th><th>lower</th><th>upper</th></tr>")
        for _, r in self.half_lives.iterrows():
            out.append(f"<tr><td>{int(r['pool'])}</td><td>{_fmt(r['fraction'], 3)}</td>"
                       f"<td>{_fmt(r['half_life'])}</td>"
                       f"<td>{e(_bound(r['lower'], r['lower_status']))}</td>"
                       f"<td>{e(_bound(r['upper'], r['upper_status']))}</td></tr>")
        out.append("</table>")
        if self.notes:
            out.append("<ol>" + "".join(f"<li>{e(n)}</li>" for n in self.notes) + "</ol>")
        out.append("</div>")
        return "".join(out)

    def as_text(self):
        return str(self)

    def __repr__(self):
        return str(self)
