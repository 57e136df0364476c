r"""One root finder for every profile-likelihood bound.

A profile bound is a one-dimensional root: the value :math:`u` (a parameter or a derived
quantity, on a scale where it is unbounded — log for rates and positive quantities, logit
for fractions) where the scaled profile deviance

.. math::

    D(u) = \frac{\mathrm{rss}(u) - \mathrm{rss}(\hat u)}{s^2}

reaches the critical value (:math:`F_{1,\nu}` or :math:`\chi^2_1` quantile). The driver
works on the signed root :math:`\tau(u) = \operatorname{sign}(u - \hat u)\sqrt{D(u)}`, the
profile-t statistic of Bates & Watts (1988, *Nonlinear Regression Analysis and Its
Applications*, §6.1 — from memory for the section), which is close to linear in a
well-chosen scale, so Newton's method on :math:`\tau(u) = \pm\sqrt{\text{crit}}` converges
in two or three constrained refits. Its derivative costs nothing extra: by the envelope
theorem, :math:`d\,\mathrm{rss}/du` at the constrained optimum is the partial derivative of
the residual sum of squares with respect to the constrained coordinate (or the Lagrange
multiplier of the constraint), which the caller computes from the refit's residuals and
Jacobian. Newton steps are safeguarded: they are kept inside the bracket once the root is
bracketed (bisection otherwise), outward steps grow at most fourfold, a failed refit halves
the step back toward the last good point, and a profile that stays below the critical value
up to the search limit gives an ``open`` bound.

The functions below the root finder take a finished fit's
:class:`~isoturnover.engine.FitState` and compute, without changing it, the intervals a
:class:`~isoturnover.TurnoverFit` tabulates (and caches): the profile-likelihood interval of
one natural parameter (:func:`parameter_interval`), its asymptotic interval
(:func:`asymptotic_interval`) and delta-method intervals of derived quantities
(:func:`delta_interval`). The profile-likelihood intervals of derived quantities, which
constrain a function of all parameters, are :func:`isoturnover.uncertainty.profile_derived`.

Profile rule: with σ estimated, c is inside the interval of a parameter when
:math:`(\mathrm{rss}(c) - \mathrm{rss})/s^2 \le F_{1,\nu}(\text{level})`; with σ known,
:math:`\Delta\chi^2 \le \chi^2_1(\text{level})` (``state.critical_value``). ``rss(c)`` is
minimised over all other parameters. A bound the data do not close is reported as ``open``
(±inf for unbounded parameters, 0 or 1 for fractions, 0 for a rate), never as a search limit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .conventions import check_choice, check_level
from .errors import DataError

__all__ = ["numerical_gradient", "BoundSearch", "find_bound", "Interval", "parameter_scale",
           "search_limits", "parameter_interval", "asymptotic_interval", "grad_z", "delta_interval",
           "share_at_edge", "EvaluationBudget", "BudgetExhausted", "MAX_EVALUATIONS",
           "check_budget"]

#: Default evaluation budget of one side of one profile (model evaluations, residual and
#: Jacobian evaluations, and evaluations of a derived quantity all count one each). A
#: well-determined bound costs a few hundred; a side that spends the budget ends
#: ``failed`` with the reason ``"budget"`` instead of running on.
MAX_EVALUATIONS = 100000


class BudgetExhausted(Exception):
    """Raised by :meth:`EvaluationBudget.spend` when the budget is spent.

    Control flow only: the profile code that owns the budget catches it and ends the search
    with status ``failed`` (reason ``"budget"``); it never reaches the user.
    """


class EvaluationBudget:
    """A limit on the evaluations one profile search may spend.

    Work charged before it is done (:meth:`spend`) is refused once the budget is spent;
    an optimizer's run is charged after it (:meth:`record`), and :meth:`check` refuses the
    next one.

    Parameters
    ----------
    limit : int
        Number of evaluations allowed (model evaluations, residual or Jacobian evaluations,
        evaluations of a derived quantity: each counts one).

    Attributes
    ----------
    used : int
        Evaluations spent so far: at most ``limit`` when every evaluation is charged
        before it is made (:meth:`spend`); a charge after the fact (:meth:`record`) may
        take it past ``limit`` by that charge.
    """

    def __init__(self, limit: int):
        self.limit = int(limit)
        self.used = 0

    @property
    def exhausted(self) -> bool:
        """Whether the budget is spent (``used >= limit``)."""
        return self.used >= self.limit

    def check(self) -> None:
        """Refuse further work once the budget is spent.

        Raises
        ------
        BudgetExhausted
            When ``used >= limit``.
        """
        if self.used >= self.limit:
            raise BudgetExhausted(f"evaluation budget of {self.limit} spent")

    def spend(self, n: int = 1) -> None:
        """Charge ``n`` evaluations about to be made.

        Parameters
        ----------
        n : int, default=1
            Evaluations about to be made.

        Raises
        ------
        BudgetExhausted
            When the budget is already spent (nothing is charged: the evaluations are not
            to be made).
        """
        self.check()
        self.used += int(n)

    def record(self, n: int) -> None:
        """Count ``n`` evaluations already made (an optimizer's run, charged after it).

        Parameters
        ----------
        n : int
            Evaluations made.
        """
        self.used += int(n)

    def __repr__(self):
        return f"EvaluationBudget(used={self.used}, limit={self.limit})"


@dataclass
class BoundSearch:
    """Outcome of one side's search.

    Parameters
    ----------
    u : float
        The bound on the search scale (NaN when ``status`` is ``failed``; the last value
        reached for ``at_bound``; the limit for ``open``).
    status : {"ok", "open", "at_bound", "failed"}
    refits : int
        Number of constrained refits spent.
    reason : str, default=""
        Why a search ended ``failed``: ``"budget"`` (the evaluation budget was spent),
        ``"max_refits"`` (the refit budget was spent), ``"refits failed"`` (six refits in a
        row failed) or ``"jump"`` (the profile jumps across a vanishing bracket); "" otherwise.
    """

    u: float
    status: str
    refits: int
    reason: str = ""


def find_bound(evaluate, u_hat, direction, step, limit, crit, *, tol=1e-6, newton_tol=1e-4,
               max_refits=40, stop_on_unreachable=True, budget=None):
    r"""Find the profile bound on one side of the estimate.

    Parameters
    ----------
    evaluate : callable
        ``evaluate(u) -> (D, dD_du, ok, reason)``: the scaled deviance at ``u``, its
        derivative (envelope theorem; NaN if unknown), whether the constrained refit
        succeeded, and a reason (``"unreachable"`` when the model cannot reach ``u``). The
        callable keeps its own warm starts.
    u_hat : float
        The estimate (D = 0).
    direction : {-1, +1}
    step : float
        First step (> 0), normally :math:`\sqrt{\text{crit}}` standard errors.
    limit : float
        Search limit on this side.
    crit : float
        Critical value of D.
    tol : float
        Relative tolerance on D at the bound (|D − crit| ≤ tol·crit), or (times 10) on the
        bracket width relative to the distance from the estimate.
    newton_tol : float
        Stop when the next Newton correction is below this fraction of the distance from
        the estimate; the corrected value is returned.
    max_refits : int
        Budget of constrained refits; a search that exhausts it is ``failed``.
    stop_on_unreachable : bool
        When every one of six failed refits in a row was ``"unreachable"``, report the last
        good value as ``at_bound`` instead of ``failed``.
    budget : EvaluationBudget, optional
        The evaluation budget that ``evaluate`` charges. The search ends ``failed`` with
        reason ``"budget"`` once it is spent (checked before each refit), when
        ``evaluate`` raises :class:`BudgetExhausted`, or when it reports the reason
        ``"budget"``.

    Returns
    -------
    BoundSearch
    """
    target = math.sqrt(crit)
    u_in, tau_in = u_hat, 0.0  # inside the interval
    u_out, tau_out = None, None  # outside (once bracketed)
    u_last_good = u_hat
    u = u_hat + direction * step
    refits = fails = unreachable = stalled = 0
    err_prev = math.inf
    verified = None
    while refits < max_refits:
        if budget is not None and budget.exhausted:
            return BoundSearch(math.nan, "failed", refits, "budget")
        at_limit = (u - limit) * direction >= 0
        if at_limit:
            u = limit
        try:
            D, dD, ok, reason = evaluate(u)
        except BudgetExhausted:
            return BoundSearch(math.nan, "failed", refits + 1, "budget")
        refits += 1
        if reason == "budget":
            return BoundSearch(math.nan, "failed", refits, "budget")
        if not ok or not math.isfinite(D):
            fails += 1
            unreachable += reason == "unreachable"
            if fails >= 6:
                if stop_on_unreachable and unreachable == fails:
                    return BoundSearch(u_last_good, "at_bound", refits)
                return BoundSearch(math.nan, "failed", refits, "refits failed")
            # back toward the last good point
            u = u_in + 0.5 * (u - u_in) if u_out is None else 0.5 * (u_in + u_out)
            continue
        fails = unreachable = 0
        u_last_good = u
        D = max(D, 0.0)
        tau = math.sqrt(D)
        err = abs(D - crit)
        if err <= tol * crit:
            return BoundSearch(u, "ok", refits)
        # Newton should at least halve the error each step once bracketed (as in rtsafe)
        stalled = stalled + 1 if (u_out is not None and err > 0.5 * err_prev) else 0
        err_prev = err
        # dtau/du from the envelope derivative (oriented outward)
        slope = dD * direction / (2.0 * tau) if tau > 0 and math.isfinite(dD) else math.nan
        if math.isfinite(slope) and slope > 0:
            du = (target - tau) / slope
            # close to the cut and the next Newton correction negligible: quadratic
            # convergence makes the corrected value exact to far below the reported digits
            if abs(D - crit) <= 0.01 * crit and \
                    abs(du) <= newton_tol * max(abs(u - u_hat), step) and \
                    (u + direction * du - limit) * direction < 0:
                return BoundSearch(u + direction * du, "ok", refits)
        if D < crit:
            u_in, tau_in = u, tau
            if at_limit:
                return BoundSearch(limit, "open", refits)
        else:
            u_out, tau_out = u, tau
        dist = abs(u - u_hat)
        if u_out is not None:
            width = abs(u_out - u_in)
            if tau_out - tau_in > 0.5 * target and width < 0.1 * max(abs(u_out - u_hat), step) \
                    and u_out != verified:
                # a big jump across a narrow bracket: the outside refit may sit in another
                # basin; redo it warm-started from the nearby inside point before trusting it
                verified = u_out
                u = u_out
                u_out, tau_out = None, None
                continue
            if width <= 10 * tol * max(abs(u_out - u_hat), 1e-300):
                if tau_out - tau_in > 0.1 * target:
                    # the profile jumps across a vanishing bracket: the refits on the two
                    # sides found different minima; no trustworthy crossing
                    return BoundSearch(math.nan, "failed", refits, "jump")
                # bracket closed: interpolate tau linearly
                w = (target - tau_in) / (tau_out - tau_in) if tau_out > tau_in else 0.5
                return BoundSearch(u_in + w * (u_out - u_in), "ok", refits)
            cand = math.nan
            if math.isfinite(slope) and slope > 0:
                cand = u + direction * (target - tau) / slope
            lo, hi = sorted((u_in, u_out))
            if not (math.isfinite(cand) and lo < cand < hi) or stalled >= 2:
                # secant on tau between the bracket ends; bisection when Newton stalls
                w = (target - tau_in) / (tau_out - tau_in) if tau_out > tau_in else 0.5
                if stalled >= 2:
                    w, stalled = 0.5, 0
                cand = u_in + min(max(w, 0.01), 0.99) * (u_out - u_in)
            u = cand
        else:
            # still inside: Newton outward, at most doubling the distance from the estimate
            # (a continuation: each refit starts near the last inside solution)
            if math.isfinite(slope) and slope > 0:
                d = (target - tau) / slope
                d = min(max(d, 0.1 * max(dist, step)), max(dist, step))
            else:
                d = max(dist, step)  # flat profile: double the distance
            u = u + direction * d
    return BoundSearch(math.nan, "failed", refits, "max_refits")


# ----------------------------------------------------------------------------------------
# Intervals of a finished fit (functions of a FitState; nothing is changed or cached here)
# ----------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Interval:
    """An estimate with its interval bounds and the status of each bound.

    Parameters
    ----------
    estimate, lower, upper : float
        In the quantity's own units (a rate per time unit, a fraction, ‰ …).
    lower_status, upper_status : str
        One of :data:`isoturnover.conventions.STATUSES`.
    """

    estimate: float
    lower: float
    upper: float
    lower_status: str
    upper_status: str

    @property
    def bounds(self) -> tuple:
        """``(lower, upper, lower_status, upper_status)``."""
        return self.lower, self.upper, self.lower_status, self.upper_status


def _check_name(state, name):
    names = state.kinetics.param_names
    if name not in names:
        raise DataError(f"'name' must be one of this fit's parameters ({', '.join(names)}); "
                        f"got {name!r}")
    return names.index(name)


def parameter_scale(state, name):
    """Scale on which a natural parameter is profiled.

    Parameters
    ----------
    state : FitState
        A finished fit.
    name : str
        A natural parameter of the fit.

    Returns
    -------
    to_scale, from_scale : callable
        Map a value to the search scale and back: log for rates, logit for fractions
        (``logit f = ln(f/(1-f))``; ±50 at the ends), the identity otherwise.
    kind : {"rate", "fraction", "lag", "plain"}
    """
    kin = state.kinetics
    if name in kin.rate_names:
        return math.log, math.exp, "rate"
    if name in kin.fraction_names:
        return (lambda f: math.log(f / (1 - f)) if 0 < f < 1 else math.copysign(50, f - .5),
                lambda c: 1 / (1 + math.exp(-c)), "fraction")
    if name == "lag":
        return (lambda x: x), (lambda x: x), "lag"
    return (lambda x: x), (lambda x: x), "plain"


def search_limits(state, name, kind, c_hat, se_c):
    """Limits of a parameter's profile search, on its search scale.

    Rates: from 1e-3/span to 1e3/(first sample after the switch); fractions: |logit f| ≤ 20
    (a pool of 2e-9 of the tissue: beyond it the profile is flat to rounding); the lag: from
    0 to max(50 se, span) past the estimate; plain parameters ±max(200 se, 100·range(y)),
    cut by the user's bounds (a bound reached there has status ``at_bound``).

    Parameters
    ----------
    state : FitState
        A finished fit.
    name : str
        The natural parameter.
    kind : {"rate", "fraction", "lag", "plain"}
        From :func:`parameter_scale`.
    c_hat, se_c : float
        The estimate and its standard error on the search scale.

    Returns
    -------
    (float, float)
        Lower and upper search limits on the search scale.
    """
    tau = state.t - float(state.kinetics.switch_times[0])
    pos = tau[tau > 0]
    span = float(pos.max()) if pos.size else max(float(np.ptp(state.t)), 1.0)
    first = float(pos.min()) if pos.size else span / 10
    if kind == "rate":
        lo = math.log(1e-3 / span)
        hi = math.log(1e3 / first)
        return min(lo, c_hat - 1), max(hi, c_hat + 1)
    if kind == "fraction":
        return min(-20.0, c_hat - 1), max(20.0, c_hat + 1)
    if kind == "lag":
        return 0.0, c_hat + max(50 * se_c, span)
    width = max(200 * se_c, 100 * max(float(np.ptp(state.y)), 1.0))
    lo, hi = c_hat - width, c_hat + width
    bounds = state.engine.bounds
    if name in bounds:  # the user's bounds close the search (status at_bound)
        b_lo, b_hi = bounds[name]
        lo, hi = max(lo, b_lo), min(hi, b_hi)
    return lo, hi


def _open_end(state, name, kind, direction):
    """The value reported for an open bound: the parameter's natural end (or user bound)."""
    if kind in ("rate", "lag"):
        bound = 0.0 if direction < 0 else math.inf
    elif kind == "fraction":
        bound = 0.0 if direction < 0 else 1.0
    else:
        bound = -math.inf if direction < 0 else math.inf
    bounds = state.engine.bounds
    if name in bounds:
        b = bounds[name][0 if direction < 0 else 1]
        if np.isfinite(b):
            bound = b
    return bound


def _fixed_interval(state, name):
    """Interval of a parameter that is not free (fixed, or the fraction of a single pool);
    None for a free one. Expression-tied parameters are derived quantities."""
    if name in state.fixed:
        v = float(state.fixed[name])
        return Interval(v, v, v, "fixed", "fixed")
    ties = state.coords.ties
    if ties is not None and name in ties.names:
        raise DataError(f"'name': {name!r} is set by an expression of other parameters; its "
                        "interval is that of a derived quantity (uncertainty.profile_derived)")
    if name in state.kinetics.fraction_names and len(state.kinetics.fraction_names) == 1:
        return Interval(1.0, 1.0, 1.0, "fixed", "fixed")
    return None


def parameter_interval(state, name, level=0.95, *, max_evaluations=None) -> Interval:
    r"""Profile-likelihood interval of one natural parameter.

    For trial values c the parameter is fixed and the weighted RSS minimised over all the
    others (warm-started refits of ``state.engine``; rates and fractions re-anchor their block
    so the profiled one is a single coordinate); c is inside the interval when
    :math:`(\mathrm{rss}(c) - \mathrm{rss})/s^2 \le` ``state.critical_value(level)``. Each
    side's bound is found by :func:`find_bound` on the scale of :func:`parameter_scale`, with
    the envelope-theorem slope :math:`2\,r\cdot J_{:,c}/s^2` at each constrained optimum.

    Parameters
    ----------
    state : FitState
        A finished least-squares fit (``loss="linear"``).
    name : str
        A natural parameter of the fit (not one set by an expression).
    level : float, default=0.95
        Confidence level.
    max_evaluations : int, optional
        Evaluation budget of each side (function evaluations of the constrained refits,
        as their optimizers count them); default :data:`MAX_EVALUATIONS`. A side that
        spends it ends ``failed`` (NaN) instead of running on.

    Returns
    -------
    Interval
        A bound the data do not close is ``open`` and reported as the parameter's natural
        end (0 or inf for a rate, 0 or 1 for a fraction, ±inf, or the user's bound with
        status ``at_bound``); the lag's lower end is ``at_bound`` at 0. Fixed parameters
        (and the fraction of a single pool) have status ``fixed``; NaN with ``failed``
        when the residual variance is not positive, a search fails or spends its budget.

    Raises
    ------
    DataError
        ``name`` is not a parameter of the fit, is set by an expression, or ``level`` is
        not in (0, 1).
    """
    j = _check_name(state, name)
    level = check_level(level)
    limit_evals = check_budget(max_evaluations)
    done = _fixed_interval(state, name)
    if done is not None:
        return done
    # each interval once per fit state (tables, summaries and reports all ask for them)
    memo = getattr(state, "memo", None)
    key = ("parameter_interval", name, round(level, 12), limit_evals)
    if memo is not None and key in memo:
        return memo[key]
    mirror = _mirrored_fraction(state, name)
    if mirror is not None:
        # two pools: f2 = 1 − f1, so fixing f2 at c is fixing f1 at 1 − c — the same
        # constrained refits; f2's profile is f1's mirrored (bounds and statuses swap)
        other = parameter_interval(state, mirror, level, max_evaluations=max_evaluations)
        iv = Interval(float(state.theta[j]), 1.0 - other.upper, 1.0 - other.lower,
                      other.upper_status, other.lower_status)
    else:
        iv = _parameter_interval(state, name, j, level, limit_evals)
    if memo is not None:
        memo[key] = iv
    return iv


def _mirrored_fraction(state, name):
    """The other fraction when ``name`` is the second of exactly two free, unbounded,
    untied pool fractions (f2 = 1 − f1); None otherwise."""
    fr = list(state.kinetics.fraction_names)
    if len(fr) != 2 or name != fr[1]:
        return None
    ties = state.coords.ties
    tied = set(ties.names) if ties is not None else set()
    if any(nm in state.fixed or nm in state.engine.bounds or nm in tied for nm in fr):
        return None
    return fr[0]


def _parameter_interval(state, name, j, level, limit_evals):
    """:func:`parameter_interval` computed (checks, fixed parameters and the memo there)."""
    kin = state.kinetics
    est = float(state.theta[j])
    to_c, from_c, kind = parameter_scale(state, name)
    crit = state.critical_value(level)
    s2 = state.s2 if not state.absolute_sigma else 1.0
    rss0 = state.rss
    if not (np.isfinite(s2) and s2 > 0):
        return Interval(est, math.nan, math.nan, "failed", "failed")
    rate_anchor = list(kin.rate_names).index(name) if kind == "rate" else None
    fraction_anchor = list(kin.fraction_names).index(name) if kind == "fraction" else None
    engine = state.engine
    c_hat = to_c(est)
    var = state.covar[j, j]
    se = math.sqrt(var) if np.isfinite(var) else math.nan
    if kind == "rate":
        se_c = se / est if np.isfinite(se) and se > 0 else 0.3
    elif kind == "fraction":
        se_c = se / max(est * (1 - est), 1e-6) if np.isfinite(se) and se > 0 else 1.0
    else:
        scale = max(float(np.ptp(state.y)), 1e-3)
        se_c = se if np.isfinite(se) and se > 0 else 0.1 * scale
    se_c = min(max(se_c, 1e-6), 1e3)

    def deviance(c, theta_start, budget):
        """Scaled ΔRSS of the refit with the parameter fixed at from_c(c), and the refit.
        Every refit's evaluations are charged to ``budget`` (BudgetExhausted when spent)."""
        fx = dict(state.fixed)
        fx[name] = from_c(c)
        coords = engine.coords(fx, rate_anchor=rate_anchor, fraction_anchor=fraction_anchor)
        z_start = coords.z_from_theta(theta_start)
        budget.check()
        sol = engine.problem.solve(coords, z_start, tol=1e-11, max_nfev=40 * (coords.size + 1))
        budget.record(max(sol.nfev, 1))
        d = (sol.cost - rss0) / s2
        if not sol.success and np.isfinite(d) and d > crit:
            # not settled: a larger budget before deciding which side of the cut it is
            budget.check()
            sol2 = engine.problem.solve(coords, sol.z, tol=1e-11,
                                        max_nfev=200 * (coords.size + 1))
            budget.record(max(sol2.nfev, 1))
            if np.isfinite(sol2.cost) and sol2.cost <= sol.cost:
                sol = sol2
                d = (sol.cost - rss0) / s2
        if not sol.success and np.isfinite(d) and d > crit:
            # still unsettled above the cut: the automatic starts as well, the lowest wins
            # (charged by what its best run reports; started only with budget to spare)
            budget.check()
            alt = engine.quick_fit(fx, sol.z, multi_start=True, tol=1e-11)
            budget.record(max(alt.nfev, 1))
            if np.isfinite(alt.cost) and alt.cost < sol.cost:
                sol = alt
                d = (sol.cost - rss0) / s2
        # an unsettled refit's cost bounds the profile from above; it is used when nothing
        # better was found
        return d, sol

    lo_limit, hi_limit = search_limits(state, name, kind, c_hat, se_c)
    # the full coordinates anchored at the profiled parameter: there it is the coordinate
    # c itself, so d rss/dc (envelope theorem) is 2 r . J[:, j] at the constrained optimum
    full = engine.coords(dict(state.fixed), rate_anchor=rate_anchor,
                         fraction_anchor=fraction_anchor)
    label = {"rate": f"log_{name}", "fraction": f"logit_{name}"}.get(kind, name)
    j_full = full.labels.index(label) if label in full.labels else None
    bounds = state.engine.bounds
    dz_dc0 = _profile_direction(engine, full, j_full, state.theta)
    results = []
    for direction in (-1, 1):
        limit = lo_limit if direction < 0 else hi_limit
        warm = {"theta": state.theta, "c": c_hat, "dz": dz_dc0}
        budget = EvaluationBudget(limit_evals)

        def evaluate(c, warm=warm, budget=budget):
            theta_start = warm["theta"]
            if warm["dz"] is not None:
                # predictor along the profile trace (Bates & Watts 1988): the free
                # coordinates moved by dz/dc from the last inside point; the plain warm
                # start when the predicted point leaves the model's domain
                with np.errstate(all="ignore"):
                    z_pred = full.z_from_theta(theta_start) + warm["dz"] * (c - warm["c"])
                    th_pred = full.theta(z_pred)
                if np.all(np.isfinite(th_pred)):
                    theta_start = th_pred
            d, sol = deviance(c, theta_start, budget)
            if not np.isfinite(d):
                return math.nan, math.nan, False, ""
            if d <= crit:
                # warm starts come from inside the interval only: a refit outside may sit
                # in another basin, and stepping back from it can stay trapped there
                if warm["dz"] is not None and c != warm["c"]:
                    with np.errstate(all="ignore"):
                        dz = (full.z_from_theta(sol.theta) - full.z_from_theta(warm["theta"])) \
                            / (c - warm["c"])
                    warm["dz"] = dz if np.all(np.isfinite(dz)) else None
                warm["theta"], warm["c"] = sol.theta, c
            slope = math.nan
            if j_full is not None:
                with np.errstate(all="ignore"):
                    r, J = engine.problem.evaluate(full, full.z_from_theta(sol.theta))
                slope = 2.0 * float(r @ J[:, j_full]) / s2
            return d, slope, True, ""

        step = math.sqrt(crit) * se_c
        if kind in ("rate", "fraction"):
            step = min(step, 1.0)  # at most a factor e (or one logit unit) at first
        res = find_bound(evaluate, c_hat, direction, step, limit, crit, max_refits=80,
                         budget=budget)
        status = res.status
        bound = from_c(res.u) if status == "ok" else None
        if status == "open" and (kind == "lag" or (name in bounds and limit in bounds[name])):
            status = "at_bound"
        if status in ("open", "at_bound"):
            bound = _open_end(state, name, kind, direction)
        elif status == "failed":
            bound = math.nan
        results.append((bound, status))
    return Interval(est, results[0][0], results[1][0], results[0][1], results[1][1])


def _profile_direction(engine, full, j_full, theta):
    r"""dz/dc of the constrained optimum at the estimate, in the anchored coordinates.

    Of the quadratic approximation :math:`\tfrac12 \Delta z^T H \Delta z` with
    :math:`H = J^T J`: fixing coordinate :math:`c = z_j` moves the others along
    :math:`H^{-1} e_j / (H^{-1})_{jj}` (the column of the covariance, up to :math:`s^2`).
    None when it cannot be computed (then the profile warm-starts without a predictor).
    """
    if j_full is None:
        return None
    with np.errstate(all="ignore"):
        try:
            _, J = engine.problem.evaluate(full, full.z_from_theta(theta))
            col = np.linalg.solve(J.T @ J, np.eye(J.shape[1])[:, j_full])
        except (np.linalg.LinAlgError, ValueError, FloatingPointError):
            return None
    if not (np.all(np.isfinite(col)) and col[j_full] > 0):
        return None
    return col / col[j_full]


def check_budget(max_evaluations):
    """Check an evaluation budget argument (``max_evaluations``) of a profile.

    Parameters
    ----------
    max_evaluations : int or None
        Evaluations allowed per profile side; None for :data:`MAX_EVALUATIONS` (read at
        call time, so a change of the module constant applies).

    Returns
    -------
    int
        The budget.

    Raises
    ------
    DataError
        When ``max_evaluations`` is not a positive integer (a bool, 0, 1.5, "10" ...).
    """
    if max_evaluations is None:
        return int(MAX_EVALUATIONS)
    if isinstance(max_evaluations, bool) or not isinstance(max_evaluations, (int, np.integer)) \
            or max_evaluations < 1:
        raise DataError(f"'max_evaluations' must be a positive integer; got "
                        f"{max_evaluations!r}")
    return int(max_evaluations)


def asymptotic_interval(state, name, level=0.95) -> Interval:
    r"""Asymptotic (covariance) interval of one natural parameter.

    :math:`\hat\theta \pm q\,\mathrm{se}` with q the normal (σ known) or Student-t quantile
    (``state.normal_quantile``); rates on the log scale,
    :math:`\hat k\,e^{\pm q\,\mathrm{se}/\hat k}` (open when :math:`q\,\mathrm{se}/\hat k >
    300`); fractions cut to [0, 1] and the lag to ≥ 0 (status ``at_bound``).

    Parameters
    ----------
    state : FitState
        A finished fit.
    name : str
        A natural parameter of the fit.
    level : float, default=0.95
        Confidence level.

    Returns
    -------
    Interval
        ``failed`` bounds (NaN) when the variance is not available.
    """
    j = _check_name(state, name)
    level = check_level(level)
    kin = state.kinetics
    est = float(state.theta[j])
    var = state.covar[j, j]
    if not (np.isfinite(var) and var >= 0):
        return Interval(est, math.nan, math.nan, "failed", "failed")
    se = math.sqrt(var)
    q = state.normal_quantile(level)
    if name in kin.rate_names:
        s = se / est
        if q * s > 300:
            return Interval(est, 0.0, math.inf, "open", "open")
        return Interval(est, est * math.exp(-q * s), est * math.exp(q * s), "ok", "ok")
    lo, hi = est - q * se, est + q * se
    ls = hs = "ok"
    if name in kin.fraction_names:
        if lo < 0:
            lo, ls = 0.0, "at_bound"
        if hi > 1:
            hi, hs = 1.0, "at_bound"
    if name == "lag" and lo < 0:
        lo, ls = 0.0, "at_bound"
    return Interval(est, lo, hi, ls, hs)


def grad_z(state, g) -> np.ndarray:
    r"""Gradient of a derived quantity in the fit's internal coordinates.

    Central differences :math:`(g(\theta(z + h e_i)) - g(\theta(z - h e_i)))/2h` with
    :math:`h = 10^{-6}\max(1, |z_i|)`, over the (few) coordinates, not the data.

    Parameters
    ----------
    state : FitState
        A finished fit.
    g : callable
        ``g(theta) -> float`` of the natural parameter vector.

    Returns
    -------
    ndarray of shape (n_coordinates,)
    """
    return numerical_gradient(lambda zz: g(state.coords.theta(zz)), state.z)


def numerical_gradient(fun, z):
    r"""Central differences of a scalar function of the coordinates.

    Step :math:`10^{-6}\max(1, |z_i|)` in each coordinate (error of order the step squared
    times the third derivative; common practice for smooth functions in double precision).

    Parameters
    ----------
    fun : callable
        ``fun(z) -> float``.
    z : ndarray of shape (p,)
        Where the gradient is taken.

    Returns
    -------
    ndarray of shape (p,)
    """
    z = np.asarray(z, dtype=float)
    grad = np.empty(z.size)
    for i in range(z.size):
        h = 1e-6 * max(1.0, abs(z[i]))
        zp, zm = z.copy(), z.copy()
        zp[i] += h
        zm[i] -= h
        grad[i] = (fun(zp) - fun(zm)) / (2 * h)
    return grad


def delta_interval(state, fn, estimate, level=0.95, scale="log") -> Interval:
    r"""Delta-method interval of a derived quantity ``fn(theta)``.

    On the chosen scale :math:`g` (log, logit or linear) the variance is
    :math:`\nabla_z g^T\,\Sigma_z\,\nabla_z g` (:func:`grad_z`; ``state.cov_z0``, in which
    coordinates the data do not touch carry no first-order effect), the interval
    :math:`g(\hat\theta) \pm q\sqrt{\mathrm{var}}` (``state.normal_quantile``), mapped back.
    On the log scale an interval wider than :math:`e^{\pm 300}` is open (0, inf).

    Parameters
    ----------
    state : FitState
        A finished fit.
    fn : callable
        ``fn(theta) -> float`` of the natural parameter vector.
    estimate : float
        ``fn(state.theta)``.
    level : float, default=0.95
        Confidence level.
    scale : {"log", "logit", "linear"}, default="log"
        Log for a positive quantity, logit for one in (0, 1).

    Returns
    -------
    Interval
        ``failed`` bounds (NaN) without a covariance or when the estimate is outside the
        scale's range.
    """
    level = check_level(level)
    check_choice("scale", scale, ("log", "logit", "linear"))
    est = estimate
    failed = Interval(est, math.nan, math.nan, "failed", "failed")
    if scale == "log":
        if not state.cov_ok or not est > 0:
            return failed
        grad = grad_z(state, lambda th: math.log(fn(th)))
        var = float(grad @ state.cov_z0 @ grad)
        if not var >= 0:
            return failed
        q = state.normal_quantile(level)
        s = math.sqrt(var)
        if q * s > 300:
            return Interval(est, 0.0, math.inf, "open", "open")
        return Interval(est, est * math.exp(-q * s), est * math.exp(q * s), "ok", "ok")
    if not state.cov_ok or not np.isfinite(est):
        return failed
    if scale == "logit":
        if not 0 < est < 1:
            return failed

        def g(th):
            v = fn(th)
            return math.log(v / (1 - v))
    else:
        g = fn
    grad = grad_z(state, g)
    var = float(grad @ state.cov_z0 @ grad)
    q = state.normal_quantile(level)
    c = g(state.theta)
    lo, hi = c - q * math.sqrt(max(var, 0)), c + q * math.sqrt(max(var, 0))
    if scale == "logit":
        return Interval(est, 1 / (1 + math.exp(-lo)), 1 / (1 + math.exp(-hi)), "ok", "ok")
    return Interval(est, lo, hi, "ok", "ok")


def share_at_edge(state, fn, rate_upper=None) -> Interval:
    """Interval of a one-pool growth share whose estimate is 1 (catabolic rate run to 0).

    The share falls as the catabolic rate grows, so its lower bound is the share at the
    rate's upper bound; the upper bound is 1 (status ``at_bound``).

    Parameters
    ----------
    state : FitState
        A finished fit with a growth model.
    fn : callable
        The share, ``fn(theta) -> float``.
    rate_upper : float, optional
        Upper bound of the catabolic rate (per time unit) when it is known (status ``ok``);
        without it the lower bound is ``failed`` (NaN).

    Returns
    -------
    Interval
    """
    est = float(fn(state.theta))
    if rate_upper is None or not np.isfinite(rate_upper):
        return Interval(est, math.nan, 1.0, "failed", "at_bound")
    th = state.theta.copy()
    th[state.kinetics.rate_index[0]] = rate_upper
    return Interval(est, float(fn(th)), 1.0, "ok", "at_bound")
