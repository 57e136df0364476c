r"""TurnoverFit: the result of one fit — it caches and tabulates.

A :class:`TurnoverFit` wraps a finished :class:`~isoturnover.engine.FitState` (error model,
covariance, information criteria: see its docstring). Fitting computes no interval: each is
computed on its first request and cached on the fit. Here: parameters, their intervals
(:mod:`isoturnover.profiles`), half-lives, time to a fraction of a change, mean residence
times, tables and the summary. ``TurnoverFit`` inherits four mixins: lmfit's views
(:class:`~isoturnover.summary.LmfitViews`), growth dilution
(:class:`~isoturnover.growthdilution.GrowthDilution`), the interval cache with derived
intervals, bootstrap, MCMC and bands (:class:`~isoturnover.intervalcache.IntervalCache`),
and the fit's record, ``to_dict`` (:class:`~isoturnover.records.FitRecord`).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from . import profiles, quantities
from .conventions import METHODS, STATUSES, check_choice, check_level, check_method
from .diagnostics import TrustNote, open_unresolved, trust_notes
from .engine import FitState
from .errors import DataError, DesignWarning
from .growthdilution import (
    GrowthDilution,
    finite_array,
    half_life_frame,
    interval_row,
)
from .intervalcache import IntervalCache
from .records import FitRecord
from .segments import SegmentPredictions, point_kinetics, resolution_notes
from .summary import (
    LmfitViews,
    Summary,
    fit_notes,
    fit_table,
    fixed_by_construction,
    influence_table,
    mean_residence_time_names,
)

__all__ = ["TurnoverFit", "TrustNote", "Summary", "METHODS", "STATUSES"]

LN2 = math.log(2.0)
_GROWTH_CURVES = ("curve", "curve_params")
#: Kinds of mean residence time: from k_d + k_g (the step response's own) or k_d alone.
MRT_KINDS = ("incorporation", "catabolic")


class TurnoverFit(LmfitViews, GrowthDilution, IntervalCache, FitRecord, SegmentPredictions):
    """Result of :meth:`TurnoverModel.fit <isoturnover.TurnoverModel.fit>`.

    Parameters
    ----------
    model : TurnoverModel
        The model that was fitted.
    state : FitState
        The finished fit (read-only): data, solution, covariance, criteria.
    init : dict, optional
        Starting values that were given (kept for :meth:`to_dict`).
    starts_tried : int, default=1
        Number of starting points the optimizer ran from.
    label : str, optional
        Name of the series (shown in the summary).

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
        Information criteria (formulas in :class:`~isoturnover.engine.FitState`).
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
            raise DataError(f"'state' must be a FitState (from the engine); got "
                            f"{type(state).__name__}")
        self.model = model
        self.state = state
        self.kinetics = state.kinetics
        engine = state.engine
        self.fixed = dict(state.fixed)
        ties = state.coords.ties
        #: Parameters set by expressions of others (name -> expression), from ``params=``.
        self.tied = {nm: ties.exprs[nm] for nm in ties.names} if ties is not None else {}
        #: Bounds on plain parameters given in ``params=`` (name -> (min, max)).
        self.bounds = dict(engine.bounds)
        self.init = dict(init or {})
        self.time_unit = engine.data["time_unit"]
        self.data_info = dict(engine.data["info"])
        self.label = label
        self.starts_tried = starts_tried
        self._theta = state.theta
        self.nfev = state.solution.nfev
        self.message = state.solution.message
        for name in ("t", "y", "sigma", "absolute_sigma", "loss", "f_scale", "joint", "nobs",
                     "nvarys", "rss", "n_mass", "dof", "s2", "block_scale", "covar",
                     "converged", "n_criteria_params", "aic", "aicc", "bic", "redchi",
                     "chisqr_pvalue", "s2_robust"):
            setattr(self, name, getattr(state, name))
        self.rate_kind = "catabolic" if self.kinetics.growth_kind is not None \
            else "incorporation"
        self.warnings = trust_notes(self) + [  # segments: pools faster than one segment
            TrustNote(c, DesignWarning, m) for c, m in resolution_notes(self.kinetics, self._theta)]

    # -- predictions ---------------------------------------------------------------------
    def predict(self, t) -> np.ndarray:
        """Fitted tissue δ at given times: the point model δ(t) at every ``t``.

        A segment fit gives the precursor's response, also at a formation midpoint (segment
        means: :meth:`predict_segments`; :attr:`best_fit`, :attr:`residuals` stay those).

        Parameters
        ----------
        t : float or array-like
            Times, in :attr:`time_unit` from the experiment's origin.

        Returns
        -------
        ndarray
            δ (‰), of the shape of ``t`` (at least 1-d).
        """
        t = finite_array("t", t)
        return point_kinetics(self.kinetics).evaluate(t.ravel(), self._theta).reshape(t.shape)

    # -- interval machinery (cached) ----------------------------------------------------
    def _implicit_fixed(self):
        """Parameters fixed by construction (the fraction of a single pool)."""
        return fixed_by_construction(self.kinetics)

    def _profile(self, name, level):
        """Profile-likelihood bounds of a free natural parameter (cached)."""
        return self.cached((name, round(level, 12)),
                           lambda: profiles.parameter_interval(self.state, name, level).bounds)

    def _interval(self, name, level, method):
        """(lower, upper, lower_status, upper_status) of a natural parameter; the upper
        bound of a rate the sampling cannot resolve is open (diagnostics.open_unresolved)."""
        return open_unresolved(self, name, self._raw_interval(name, level, method))

    def _raw_interval(self, name, level, method):
        """(lower, upper, lower_status, upper_status) as the interval method gives them."""
        if name in self.fixed or name in self._implicit_fixed():
            v = self.fixed[name] if name in self.fixed else float(self.values[name])
            return v, v, "fixed", "fixed"
        if method in ("bootstrap", "mcmc"):
            return self.resampled_interval(name, level, method)
        if method == "profile" and self.loss == "linear":
            if name in self.tied:
                # a parameter set by an expression is a derived quantity: constrained profile
                j = self.kinetics.param_names.index(name)

                def make():
                    r = self.profile(lambda th: th[j], level, name=name,
                                     positive=name in self.kinetics.rate_names)
                    return r.lower, r.upper, r.lower_status, r.upper_status
                return self.cached((name, round(level, 12)), make)
            return self._profile(name, level)
        return profiles.asymptotic_interval(self.state, name, level).bounds

    # -- interval tables ------------------------------------------------------------------
    def conf_int(self, level=0.95, method="profile", params=None) -> pd.DataFrame:
        """Confidence intervals of every parameter (long table).

        Parameters
        ----------
        level : float, default=0.95
        method : {"profile", "asymptotic", "bootstrap", "mcmc"}, default="profile"
            Profile likelihood (asymptotic for robust losses); covariance (log scale for
            rates); percentiles of the stored bootstrap or MCMC draws (run when missing).
        params : str or list of str, optional
            Only these parameters.

        Returns
        -------
        DataFrame
            Columns parameter, estimate, stderr, lower, upper, level, method, lower_status,
            upper_status (``method`` is ``"fixed"`` for fixed parameters).
        """
        level = check_level(level)
        method = check_method(method)
        names = self.kinetics.param_names
        if params is not None:
            try:
                params = [params] if isinstance(params, str) else list(params)
            except TypeError:
                raise DataError("'params' must be a parameter name or a list of them; got "
                                f"{params!r}") from None
            unknown = [str(p) for p in params if p not in names]
            if unknown:
                raise DataError(f"'params' has unknown parameter(s) {', '.join(unknown)}; "
                                f"this fit's parameters are {', '.join(names)}")
            names = [n for n in names if n in params]
        rows = []
        se = self.stderr
        for nm in names:
            fx = nm in self.fixed or nm in self._implicit_fixed()
            rows.append({"parameter": nm, "estimate": self.values[nm],
                         "stderr": se[nm] if not fx else 0.0,
                         **dict(zip(("lower", "upper", "lower_status", "upper_status"),
                                    self._interval(nm, level, method))),
                         "level": level, "method": "fixed" if fx else self.method_used(method)})
        cols = ["parameter", "estimate", "stderr", "lower", "upper", "level", "method",
                "lower_status", "upper_status"]
        return pd.DataFrame(rows, columns=cols)

    def half_lives(self, level=0.95, method="profile") -> pd.DataFrame:
        """Half-life t½ = ln 2 / k of each pool (or chain step), with interval bounds.

        The bounds are the rate's bounds transformed (profile likelihood by default), so
        the half-life's lower bound comes from the rate's upper bound.

        Parameters
        ----------
        level : float, default=0.95
        method : {"profile", "asymptotic", "bootstrap", "mcmc"}, default="profile"

        Returns
        -------
        DataFrame
            Columns pool, fraction, rate, half_life, lower, upper, level, method,
            lower_status, upper_status, estimate (= half_life), rate_lower, rate_upper,
            rate_kind, time_unit; half-lives in :attr:`time_unit`.
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
            hl_hi = LN2 / lo if lo > 0 else math.inf  # an open lower rate bound: ∞
            # a rate run to its lower edge (0 within double precision): t½ = ∞
            hl = math.inf if nm in self.rates_at_zero else LN2 / k
            bounds = (hl_lo if np.isfinite(hi) or hs != "failed" else math.nan,
                      hl_hi if ls != "failed" else math.nan, hs, ls)
            m = "fixed" if nm in self.fixed else self.method_used(method)
            rows.append(interval_row({"pool": i + 1, "fraction": frac, "rate": k, "half_life": hl},
                             hl, bounds, level, m, rate_lower=lo, rate_upper=hi,
                             rate_kind=self.rate_kind, time_unit=self.time_unit))
        return half_life_frame(rows)

    def remaining(self, tau) -> np.ndarray:
        """Fraction of a step change still to come, 1 − F(τ), a time τ after a switch.

        Parameters
        ----------
        tau : float or array-like
            Time since the switch (in :attr:`time_unit`); no lag is added.

        Returns
        -------
        ndarray
        """
        return self.kinetics.remaining(np.asarray(tau, dtype=float), self._theta)

    def time_to(self, fraction=0.95, level=0.95, method="profile") -> pd.DataFrame:
        r"""Time after the switch for the tissue to make ``fraction`` of a step change.

        One pool: :math:`-\ln(1-p)/k` (4.32 half-lives for p = 0.95), its interval from the
        rate's; several pools and the chain: solved numerically, a constrained profile of
        the derived quantity. Includes the lag when there is one. With a growth curve (no
        closed form) a delta-method interval on the log scale (``method`` "asymptotic").

        Parameters
        ----------
        fraction : float or array-like, default=0.95
            Fractions p of the change, each in (0, 1).
        level : float, default=0.95
        method : {"profile", "asymptotic", "bootstrap", "mcmc"}, default="profile"
            Bootstrap intervals exist for p = 0.95 only (others: delta method).

        Returns
        -------
        DataFrame
            Columns fraction, estimate, lower, upper, level, method, lower_status,
            upper_status, time_unit.
        """
        level = check_level(level)
        method = check_method(method)
        try:
            fr = np.atleast_1d(np.asarray(fraction, dtype=float))
        except (TypeError, ValueError):
            raise DataError(f"'fraction' must be a number or an array of numbers between 0 "
                            f"and 1; got {fraction!r}") from None
        if np.any(~((fr > 0) & (fr < 1))):
            raise DataError(f"'fraction' must be between 0 and 1 (0.95 = 95 %); got {fraction!r}")
        kin = self.kinetics
        rows = []
        simple = kin.structure == "parallel" and kin.pools == 1 and kin.lag_index is None \
            and kin.growth_kind is None
        for p in fr:
            def tt(th, p=p):
                return quantities.time_to(kin, p, th)

            est = tt(self._theta)
            if simple and method in ("profile", "asymptotic"):
                lo_k, hi_k, ls, hs = self._interval("k1", level, method)
                c = -math.log(1 - p)
                bounds = (c / hi_k if hi_k > 0 else 0.0, c / lo_k if lo_k > 0 else math.inf,
                          hs, ls)
                m = "fixed" if "k1" in self.fixed else self.method_used(method)
            elif method == "bootstrap" and abs(p - 0.95) < 1e-12:
                bounds = self.resampled_interval("time_to_95", level, "bootstrap")
                m = "bootstrap (percentile)"
            else:
                grad = None
                if kin.structure == "parallel":
                    def grad(th, p=p):
                        return quantities.time_to_grad(kin, p, quantities.time_to(kin, p, th),
                                                       th)
                # a profile would nest a growth curve's numerical solve in every refit
                m = "profile" if method == "profile" and kin.growth_kind not in \
                    _GROWTH_CURVES else "asymptotic"
                *bounds, m = self.derived_interval(("time_to", float(p)), tt, est, level,
                                                    m, scale="log", grad=grad)
            rows.append(interval_row({"fraction": p}, est, bounds, level, m,
                             time_unit=self.time_unit))
        return pd.DataFrame(rows)

    def mean_residence_time(self, kind="incorporation") -> float:
        r"""Mean residence time of the tissue's turnover, incorporation or catabolic.

        ``"incorporation"``: the step response's own, :math:`\int_0^\infty (1-F)\,d\tau`
        — parallel pools :math:`\sum_i f_i/k_i`, with exponential growth
        :math:`\sum_i f_i/(k_{d,i} + k_g)` (growth and catabolic turnover together); chain
        :math:`1/k_1 + 1/k_2`; with a growth curve the integral is taken numerically from
        the first switch. ``"catabolic"`` (fits with a growth model only): growth left out,
        :math:`\sum_i f_i/k_{d,i}` (chain :math:`1/k_1 + 1/k_2`,
        :func:`~isoturnover.quantities.mean_residence_time` with ``catabolic=True``). Both include
        the lag. For one pool with exponential growth they are :math:`1/(k_d + k_g)` and
        :math:`1/k_d` (by hand). Without a growth model the rates are incorporation rates
        and only the incorporation kind exists.

        Parameters
        ----------
        kind : {"incorporation", "catabolic"}, default="incorporation"
            Which mean residence time.

        Returns
        -------
        float
            In :attr:`time_unit`; ``inf`` when old material stays for good.
        """
        return self._mrt_function(kind)(self._theta)

    def _mrt(self, theta):
        return quantities.mean_residence_time(self.kinetics, theta, float(np.ptp(self.t)))

    def _mrt_function(self, kind):
        """``fn(theta)`` of the mean residence time of ``kind``."""
        check_choice("kind", kind, MRT_KINDS)
        if kind == "incorporation":
            return self._mrt
        kin = self.kinetics
        if kin.growth_kind is None:
            raise DataError("kind='catabolic' needs a fit with a growth model "
                            "(TurnoverModel(growth=...)); without one the rates are "
                            "incorporation rates and so is the mean residence time")
        return lambda th: quantities.mean_residence_time(kin, th, catabolic=True)

    def mean_residence_time_interval(self, level=0.95, method="profile",
                                     kind="incorporation") -> pd.DataFrame:
        """Interval of :meth:`mean_residence_time` (cached).

        Parameters
        ----------
        level : float, default=0.95
            Confidence level.
        method : {"profile", "asymptotic", "bootstrap", "mcmc"}, default="profile"
            With a growth curve the incorporation kind (a numerical integral, which a
            profile would nest in every constrained refit) gets the delta method on the log
            scale, as for MCMC and robust fits; the catabolic kind has no stored bootstrap
            draws and gets the delta method for ``"bootstrap"``.
        kind : {"incorporation", "catabolic"}, default="incorporation"
            As :meth:`mean_residence_time`.

        Returns
        -------
        DataFrame
            One row: estimate, lower, upper, level, method, lower_status, upper_status,
            time_unit, kind.
        """
        level = check_level(level)
        method = check_method(method)
        fn = self._mrt_function(kind)
        mrt = fn(self._theta)
        if kind == "incorporation" and method == "bootstrap":
            *bounds, m = (*self.resampled_interval("mean_residence_time", level, method),
                          "bootstrap (percentile)")
        elif not np.isfinite(mrt):
            *bounds, m = math.nan, math.inf, "not_available", "open", method
        elif kind == "catabolic":
            def grad_c(th):
                return quantities.mean_residence_time_grad(self.kinetics, th, catabolic=True)
            *bounds, m = self.derived_interval(
                ("mean_residence_time_catabolic",), fn, mrt, level,
                "profile" if method == "profile" else "asymptotic", scale="log", grad=grad_c)
        elif self.kinetics.growth_kind in _GROWTH_CURVES:
            *bounds, m = (*profiles.delta_interval(self.state, self._mrt, mrt, level).bounds,
                          "asymptotic")
        else:
            def grad(th):
                return quantities.mean_residence_time_grad(self.kinetics, th)
            *bounds, m = self.derived_interval(("mean_residence_time",), self._mrt, mrt,
                                               level, method, scale="log", grad=grad)
        return pd.DataFrame([interval_row({}, mrt, bounds, level, m, time_unit=self.time_unit,
                                          kind=kind)])

    def mean_residence_times(self) -> dict:
        """Every mean residence time this fit reports, named as in :meth:`table`.

        Returns
        -------
        dict
            ``mean_residence_time`` or, with a growth model,
            ``mean_residence_time_incorporation`` and ``mean_residence_time_catabolic``
            (:func:`~isoturnover.summary.mean_residence_time_names`) → the value of
            :meth:`mean_residence_time` of that kind, in :attr:`time_unit`.
        """
        return {q: self.mean_residence_time(kind)
                for q, kind in mean_residence_time_names(self)}

    # -- tables, notes and summary ----------------------------------------------------------
    def influence(self) -> pd.DataFrame:
        """Studentised residuals, leverage and Cook's distance of every point.

        See :func:`isoturnover.summary.influence_table` (Cook 1977); flagged points are
        kept in the fit.

        Returns
        -------
        DataFrame
            Columns time, value, fitted, residual, studentized, leverage, cooks_distance,
            flagged.
        """
        return self.cached(("influence",), lambda: influence_table(self)).copy()

    def table(self, level=0.95, method="profile") -> pd.DataFrame:
        """One tidy row per parameter and derived quantity (see :func:`.summary.fit_table`).

        Parameters
        ----------
        level : float, default=0.95
        method : {"profile", "asymptotic", "bootstrap", "mcmc"}, default="profile"

        Returns
        -------
        DataFrame
            Columns quantity, kind ("parameter" or "derived"), estimate, stderr, lower,
            upper, level, method, lower_status, upper_status, unit.
        """
        return fit_table(self, level, method)

    def notes(self) -> list[str]:
        """Numbered-note texts of the summary.

        Returns
        -------
        list of str
            Every trust warning, then notes on method and meaning
            (:func:`isoturnover.summary.fit_notes`).
        """
        return fit_notes(self)

    def summary(self, level=0.95, method="profile") -> Summary:
        """A printable summary (cached per level and method).

        Parameters
        ----------
        level : float, default=0.95
            Confidence level of the intervals shown.
        method : {"profile", "asymptotic", "bootstrap", "mcmc"}, default="profile"

        Returns
        -------
        Summary
            ``str()`` for text, ``_repr_html_`` in notebooks.
        """
        level, method = check_level(level), check_method(method)
        return self.cached(("summary", round(level, 12), method),
                            lambda: Summary(self, level, method))

    def __repr__(self):
        return (f"<TurnoverFit {self.label or ''} {self.model.describe()}: n={self.nobs}, "
                f"rss={self.rss:.4g}, aicc={self.aicc:.4g}, "
                f"{'converged' if self.converged else 'NOT converged'}, "
                f"{len(self.warnings)} warning(s)>")

    def _repr_html_(self):
        return self.summary()._repr_html_()
