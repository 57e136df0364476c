r"""Profile-likelihood intervals of derived quantities, and the helpers that the other
interval modules share (DESIGN §3 "Intervals").

The interval machinery is split by method:

* this module — profiles of derived quantities (:func:`profile_derived`,
  :func:`time_to_profile`, :func:`mean_residence_time_profile`,
  :func:`half_life_ratio_profile`), and the argument checks and quantity functions that
  :mod:`isoturnover.resampling`, :mod:`isoturnover.mcmc` and :mod:`isoturnover.bands` use;
* :mod:`isoturnover.resampling` — bootstrap (:func:`~isoturnover.resampling.bootstrap`,
  :class:`~isoturnover.resampling.BootstrapResult`), percentile and BCa intervals, jackknife;
* :mod:`isoturnover.mcmc` — posterior sampling (:func:`~isoturnover.mcmc.sample`);
* :mod:`isoturnover.bands` — confidence and prediction bands (:func:`~isoturnover.bands.band`).

Users reach all four through the public namespace :mod:`isoturnover.uncertainty`
(``iso.uncertainty.bootstrap``, ``iso.uncertainty.sample``, ``iso.uncertainty.band``,
``iso.uncertainty.profile_derived`` ...), which re-exports them.

Every function takes a :class:`~isoturnover.results.TurnoverFit` and leaves it unchanged.

Profile likelihood of a derived quantity
    For a smooth function :math:`q = g(\theta)` of the natural parameters (time to a
    fraction of the change, mean residence time, a ratio of half-lives, ...), the profile is

    .. math::

        \mathrm{rss}_q(c) = \min_{z:\ g(\theta(z)) = c} \sum_i w_i^2 (y_i - \hat y_i(z))^2 ,

    minimised over the optimizer's internal coordinates ``z`` (log-rates with ordered gaps,
    stick-breaking logits, levels). A value ``c`` is inside the interval when
    :math:`(\mathrm{rss}_q(c) - \mathrm{rss})/s^2 \le F_{1,n-p}(\text{level})` with the
    residual variance estimated, or :math:`\mathrm{rss}_q(c) - \mathrm{rss} \le
    \chi^2_1(\text{level})` with σ known (Venzon & Moolgavkar 1988, Appl. Stat. 37:87–94;
    Bates & Watts 1988, *Nonlinear Regression Analysis and Its Applications*, ch. 6 — from
    memory for the journal pages and chapter).
    The constraint is met exactly by eliminating one internal coordinate :math:`z_j`: for the
    others :math:`z_{-j}` a one-dimensional root solve gives :math:`z_j(z_{-j})`, and the
    implicit function theorem gives the reduced Jacobian

    .. math::

        \frac{\partial r}{\partial z_{-j}} + \frac{\partial r}{\partial z_j}
        \frac{\partial z_j}{\partial z_{-j}}, \qquad
        \frac{\partial z_j}{\partial z_{-j}} = -\frac{\partial g/\partial z_{-j}}
        {\partial g/\partial z_j},

    so scipy's trust-region least squares runs on the remaining coordinates.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from . import quantities
from .constrained import ConstrainedProblem, QuantityScale
from .conventions import check_level as _check_level
from .engine import FitState
from .errors import DataError
from .profiles import EvaluationBudget, check_budget, find_bound, numerical_gradient

__all__ = [
    "ProfileInterval",
    "profile_derived",
    "time_to_profile",
    "mean_residence_time_profile",
    "half_life_ratio_profile",
]

#: ln 2: half-life = LN2 / rate.
LN2 = math.log(2.0)
#: Columns of every interval table made here and in the resampling and MCMC modules (the
#: table shape of ``TurnoverFit.conf_int``).
INTERVAL_COLUMNS = ["parameter", "estimate", "stderr", "lower", "upper", "level", "method",
                    "lower_status", "upper_status"]


# ----------------------------------------------------------------------------------------
# Helpers shared with the resampling, MCMC and band modules
# ----------------------------------------------------------------------------------------
def check_fit(fit, what, joint=False):
    """Check that ``fit`` is a finished turnover fit that the method ``what`` can use.

    Parameters
    ----------
    fit : TurnoverFit
        The fit to check: it must carry a :class:`~isoturnover.engine.FitState`.
    what : str
        Name of the calling function, used in the error message.
    joint : bool, default=False
        Whether the method supports joint fits (δ with body masses, or with a fitted
        growth curve whose uncertainty is propagated). Resampling methods do not: their
        second data block would not be resampled.

    Raises
    ------
    TypeError
        ``fit`` is not a TurnoverFit.
    DataError
        ``fit`` is a joint fit and ``joint`` is False.
    """
    state = getattr(fit, "state", None)
    if not isinstance(state, FitState):
        raise DataError(f"{what} needs a TurnoverFit (the result of TurnoverModel.fit); got "
                        f"{type(fit).__name__}")
    if not joint and state.engine.mass_block is not None:
        raise DataError(
            f"'fit': {what} does not support joint fits yet (δ fitted with body masses, or "
            "with a fitted growth curve whose uncertainty is propagated): the second data "
            "block would not be resampled. Use profile intervals (profile_derived, "
            "fit.conf_int()), or refit with propagate_growth=False / without masses="
        )


def design_span(fit):
    """First and last sampling time after the first diet switch.

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit.

    Returns
    -------
    first, last : float
        In the fit's time unit; when no sample follows the switch, a tenth of the sampling
        span and the span (:meth:`isoturnover.engine.FitState.design_span`).
    """
    return fit.state.design_span()


def fit_time_to(fit, p):
    r"""Time to a fraction ``p`` of a step change, as a function of θ, for this fit.

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit.
    p : float
        Fraction of the change, in (0, 1).

    Returns
    -------
    callable
        ``fn(theta) -> float``: :func:`isoturnover.quantities.time_to` with the fit's
        kinetics (one pool: :math:`-\ln(1-p)/k` + lag), in the fit's time unit; NaN for
        a θ outside the model's domain (an incorporation rate :math:`k_i (+k_g)` that is
        not positive and finite: the change is then never completed, and the root search
        would not end), see :func:`~isoturnover.quantities.incorporation_rates_positive`.
    """
    kin = fit.kinetics

    def fn(th):
        if not quantities.incorporation_rates_positive(kin, th):
            return math.nan
        return quantities.time_to(kin, p, th)

    return fn


def fit_mrt(fit):
    r"""Mean residence time as a function of θ, for this fit.

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit.

    Returns
    -------
    callable
        ``fn(theta) -> float``: :func:`isoturnover.quantities.mean_residence_time`
        (:math:`\sum_i f_i/k_i` + lag for parallel pools) with the fit's kinetics and
        sampling span, in the fit's time unit.
    """
    kin = fit.kinetics
    span = float(np.ptp(fit.t))
    return lambda th: quantities.mean_residence_time(kin, th, span)


def natural_range(kin, name):
    """Natural range of a reported quantity: where an ``open`` interval bound is put.

    Parameters
    ----------
    kin : TurnoverKinetics
        The fit's kinetics (``fit.kinetics``), for its rate and fraction names.
    name : str
        Quantity: a natural parameter, ``half_life_i``, ``time_to_…`` or
        ``mean_residence_time``.

    Returns
    -------
    lo, hi : float
        (0, inf) for rates, half-lives, times, the mean residence time and the lag; (0, 1)
        for pool fractions; (-inf, inf) otherwise.
    """
    if name in kin.rate_names or name.startswith(("half_life", "time_to")) \
            or name == "mean_residence_time":
        return 0.0, math.inf
    if name in kin.fraction_names:
        return 0.0, 1.0
    if name == "lag":
        return 0.0, math.inf
    return -math.inf, math.inf


# ----------------------------------------------------------------------------------------
# Profile likelihood of a derived quantity
# ----------------------------------------------------------------------------------------
@dataclass(frozen=True)
class ProfileInterval:
    """Profile-likelihood interval of one derived quantity (made by :func:`profile_derived`).

    Parameters
    ----------
    quantity : str
        Label of the quantity (``name`` of :func:`profile_derived`).
    estimate, lower, upper : float
        Point estimate :math:`g(\\hat\\theta)` and the bounds. An ``open`` bound is the
        end of the quantity's natural range (0 or ±inf, or the range given).
    lower_status, upper_status : {"ok", "open", "at_bound", "failed", "fixed"}
        ``ok``: the profile crossed the critical value; ``open``: the data do not close
        the interval on that side (searched to the limit without crossing); ``at_bound``:
        the quantity cannot be moved further inside the model's parameter space while the
        data still accept it (the bound is the last value reached); ``failed``: the
        constrained fits failed; ``fixed``: the quantity does not depend on any free
        parameter.
    level : float
        Confidence level, in (0, 1).
    method : str
        ``"profile"``.
    crit : float
        Critical value: :math:`F_{1,n-p}` quantile (σ estimated) or :math:`\\chi^2_1`
        quantile (σ known).
    evaluations : tuple of int, default=()
        Evaluations each side spent (lower, upper): evaluations of the quantity and of the
        model's residuals and Jacobian, each counted once; at most the side's budget
        (``max_evaluations``).
    reasons : tuple of str, default=()
        Why each side (lower, upper) ended ``failed`` (``"budget"``: the evaluation budget
        was spent; see :class:`~isoturnover.profiles.BoundSearch`); "" otherwise.
    """

    quantity: str
    estimate: float
    lower: float
    upper: float
    lower_status: str
    upper_status: str
    level: float
    method: str = "profile"
    crit: float = math.nan
    evaluations: tuple = ()
    reasons: tuple = ()

    def as_dict(self) -> dict:
        """The interval as one row of an interval table.

        Returns
        -------
        dict
            Keys parameter, estimate, stderr (NaN: a profile has none), lower, upper,
            level, method, lower_status, upper_status.
        """
        return {"parameter": self.quantity, "estimate": self.estimate, "stderr": math.nan,
                "lower": self.lower, "upper": self.upper, "level": self.level,
                "method": self.method, "lower_status": self.lower_status,
                "upper_status": self.upper_status}

    def to_frame(self) -> pd.DataFrame:
        """The interval as a table.

        Returns
        -------
        DataFrame
            One row with the columns of :meth:`TurnoverFit.conf_int`
            (:data:`INTERVAL_COLUMNS`).
        """
        return pd.DataFrame([self.as_dict()], columns=INTERVAL_COLUMNS)


def profile_derived(fit, fn, level=0.95, *, name="", positive=True, grad=None, natural=None,
                    limits=None, max_evaluations=None) -> ProfileInterval:
    r"""Profile-likelihood interval of a derived quantity :math:`q = g(\theta)`.

    For trial values c the weighted RSS is minimised subject to :math:`g(\theta(z)) = c`
    (constraint met exactly: one internal coordinate is eliminated by a root solve and the
    implicit function theorem gives the reduced Jacobian; see the module docstring). c is
    inside the interval when

    .. math::

        \frac{\mathrm{rss}_q(c) - \mathrm{rss}}{s^2} \le F_{1,\,n-p}(\text{level})
        \quad\text{(σ estimated)}, \qquad
        \mathrm{rss}_q(c) - \mathrm{rss} \le \chi^2_1(\text{level}) \quad\text{(σ known)},

    the same rule as the parameters' profiles (``fit.state.critical_value(level)``). Each
    bound is found by :func:`isoturnover.profiles.find_bound` (safeguarded Newton on the
    profile-t statistic, its derivative from the constraint's multiplier) on the log scale
    for positive quantities (logit for a quantity with two finite ends).

    Parameters
    ----------
    fit : TurnoverFit
        A least-squares fit (``loss="linear"``; robust fits have no RSS profile).
    fn : callable
        ``fn(theta) -> float``, a smooth function of the natural parameter vector (in the
        order of ``fit.kinetics.param_names``), e.g.
        ``lambda th: iso.quantities.time_to(fit.kinetics, 0.95, th)``.
    level : float, default=0.95
        Confidence level, in (0, 1).
    name : str, default=""
        Label of the quantity in the result.
    positive : bool, default=True
        The quantity is positive (natural range (0, inf)): searched on the log scale and an
        open lower bound is reported as 0.
    grad : callable, optional
        ``grad(theta) -> ndarray`` of :math:`\partial g/\partial\theta`; central differences
        in the internal coordinates otherwise.
    natural : tuple (lo, hi), optional
        The quantity's natural range (overrides ``positive``); open bounds are reported as
        these ends.
    limits : tuple (lo, hi), optional
        Search limits in the quantity's units (default: a factor 1e4 either side of the
        estimate on the log scale; for unbounded quantities ±max(200 se, 100 max(|q|, 1))).
        Reaching a limit without crossing gives an ``open`` bound, reported as the natural
        end — never as the limit.
    max_evaluations : int, optional
        Evaluation budget of each side: evaluations of ``fn`` and of the model's residuals
        and Jacobian, each counted once, over every constrained refit and root search of
        that side; default :data:`isoturnover.profiles.MAX_EVALUATIONS`. A side that spends
        it ends ``failed`` (NaN) with the reason ``"budget"``.

    Returns
    -------
    ProfileInterval
        Estimate, bounds (in the quantity's units), each bound's status, the evaluations
        each side spent and why a side failed.

    Raises
    ------
    DataError
        For a bad ``fit``, ``fn``, ``level``, ``natural``, ``limits`` or
        ``max_evaluations``, or an estimate outside the natural range.

    Notes
    -----
    Trial parameter vectors whose incorporation rates (:math:`k_i`, plus :math:`k_g` with
    exponential growth) are not all positive lie outside the model's domain and are not
    used (when the estimate lies inside it).
    """
    check_fit(fit, "profile_derived", joint=True)
    level = _check_level(level)
    limit_evals = check_budget(max_evaluations)
    if not callable(fn):
        raise DataError(f"'fn' must be a function of the parameter vector; got "
                        f"{type(fn).__name__}")
    if fit.loss != "linear":
        raise DataError(f"'fit': profile intervals need a least-squares fit (loss='linear'); "
                        f"this fit used loss={fit.loss!r}: use bootstrap() instead")
    if natural is None:
        natural = (0.0, math.inf) if positive else (-math.inf, math.inf)
    try:
        lo_nat, hi_nat = (float(natural[0]), float(natural[1]))
    except (TypeError, ValueError, IndexError):
        raise DataError(f"'natural' must be a pair (lo, hi); got {natural!r}") from None
    if not lo_nat < hi_nat:
        raise DataError(f"'natural' must have lo < hi; got {natural!r}")
    theta = fit.state.theta
    with np.errstate(all="ignore"):
        est = float(fn(theta))
    if not math.isfinite(est):
        raise DataError(f"'fn' is not finite at the fitted parameters (got {est!r})")
    if not lo_nat < est < hi_nat:
        raise DataError(f"'fn': the quantity's estimate {est!r} is outside its natural range "
                        f"({lo_nat:g}, {hi_nat:g}); pass positive=False or natural=(lo, hi)")
    scale = QuantityScale(lo_nat, hi_nat)
    crit = fit.state.critical_value(level)

    def result(lo, hi, ls, hs, evaluations=(0, 0), reasons=("", "")):
        return ProfileInterval(name, est, lo, hi, ls, hs, level, "profile", crit,
                               tuple(evaluations), tuple(reasons))

    coords = fit.state.coords
    p = coords.size
    if p == 0:
        return result(est, est, "fixed", "fixed")
    s2 = 1.0 if fit.absolute_sigma else fit.s2
    if not (math.isfinite(s2) and s2 > 0):
        return result(math.nan, math.nan, "failed", "failed")
    rss0 = fit.rss
    z_hat = np.array(fit.state.z, dtype=float)

    # sensitivity of u = scale(g) to each coordinate, at the estimate
    def h0(z):
        with np.errstate(all="ignore"):
            v = float(fn(coords.theta(z)))
        return scale.to_u(v)

    if grad is not None:
        th, A = coords.theta(z_hat, jac=True)
        gz = scale.du_dc(est) * (np.asarray(grad(th), dtype=float) @ A)
    else:
        gz = numerical_gradient(h0, z_hat)
    if not np.all(np.isfinite(gz)):
        return result(math.nan, math.nan, "failed", "failed")
    if np.max(np.abs(gz)) == 0:
        return result(est, est, "fixed", "fixed")
    cov = fit.state.cov_z0  # coordinates the data ignore: zero
    sd = np.sqrt(np.diag(cov)) if fit.state.cov_ok else np.ones(p)
    sens = np.abs(gz) * np.where(np.isfinite(sd) & (sd > 0), sd, 1.0)
    sens[np.isfinite(coords.lower)] *= 1e-6  # avoid eliminating a bounded coordinate (lag)
    # nor a coordinate run off to its far end (a log-rate of ~-700: a rate of ~0 can move
    # the quantity one way only)
    sens[np.abs(z_hat) > 300] *= 1e-12
    j = int(np.argmax(sens))
    prob = ConstrainedProblem(fit, fn, grad, scale, j)

    u_hat = scale.to_u(est)
    se_u = math.sqrt(float(gz @ cov @ gz)) if fit.state.cov_ok else math.nan
    if not (math.isfinite(se_u) and se_u > 0):
        se_u = 0.1 if scale.kind != "plain" else 0.1 * max(abs(est), 1.0)
    se_u = min(max(se_u, 1e-6 * max(1.0, abs(u_hat))), 1e3)
    # search limits in u
    if limits is not None:
        try:
            ul = (scale.to_u(float(limits[0])), scale.to_u(float(limits[1])))
        except (TypeError, ValueError, IndexError):
            raise DataError(f"'limits' must be a pair (lo, hi); got {limits!r}") from None
        if not (math.isfinite(ul[0]) and math.isfinite(ul[1]) and ul[0] < u_hat < ul[1]):
            raise DataError(f"'limits' must lie inside the natural range and around the "
                            f"estimate {est:g}; got {limits!r}")
    elif scale.kind == "plain":
        width = max(200 * se_u, 100 * max(abs(est), 1.0))
        ul = (u_hat - width, u_hat + width)
    elif scale.kind == "logit":
        ul = (min(-35.0, u_hat - 5), max(35.0, u_hat + 5))
    else:
        ul = (u_hat - math.log(1e4), u_hat + math.log(1e4))

    # predictor direction dz/du at the estimate: the constrained minimum of the quadratic
    # approximation moves along C g / (g^T C g)
    if fit.state.cov_ok and float(gz @ cov @ gz) > 0:
        dz_du0 = (cov @ gz) / float(gz @ cov @ gz)
    else:
        dz_du0 = np.zeros(p)
    def D(u, z_from, dz_du, u_from):
        """Scaled ΔRSS at u; starts from the predictor and, when that fails, from the plain
        previous point (a refit above the cut that sits in another basin is re-verified by
        the bound finder from a nearby inside point)."""
        c = scale.from_u(u)
        z_pred = z_from + dz_du * (u - u_from)
        cost, z, ok, reason = prob.solve(c, z_pred)
        if not ok:
            cost2, z2, ok2, reason2 = prob.solve(c, z_from)
            if ok2 and (not ok or cost2 < cost):
                cost, z, ok, reason = cost2, z2, ok2, reason2
        return (cost - rss0) / s2, z, ok, reason

    engine_problem = fit.state.engine.problem
    bounds, spent, why = [], [], []
    for direction in (-1, 1):
        limit = ul[0] if direction < 0 else ul[1]
        warm = {"u": u_hat, "z": z_hat, "dz": dz_du0}
        budget = EvaluationBudget(limit_evals)
        prob.budget = budget

        def evaluate(u, warm=warm, budget=budget):
            d, z, ok, reason = D(u, warm["z"], warm["dz"], warm["u"])
            if not ok or not math.isfinite(d):
                return math.nan, math.nan, False, reason
            if d <= crit:
                # warm starts (and the predictor) from inside the interval only: a refit
                # outside may sit in another basin
                if u != warm["u"]:
                    warm["dz"] = (z - warm["z"]) / (u - warm["u"])
                warm["u"], warm["z"] = u, z
            # envelope theorem: d rss/du is the constraint's multiplier, the component of
            # the rss gradient 2 J^T r along the constraint's gradient
            slope = math.nan
            budget.spend()
            with np.errstate(all="ignore"):
                r, J = engine_problem.evaluate(coords, z)
                gh = prob.grad_h(z)
            gg = float(gh @ gh)
            if gg > 0 and np.all(np.isfinite(gh)):
                slope = 2.0 * float((J.T @ r) @ gh) / gg / s2
            return d, slope, True, reason

        step = math.sqrt(crit) * se_u
        if scale.kind != "plain":
            step = min(step, 1.0)  # at most a factor e (or one logit unit) at first
        res = find_bound(evaluate, u_hat, direction, step, limit, crit, max_refits=80,
                         budget=budget)
        status = res.status
        bound = scale.from_u(res.u) if status in ("ok", "at_bound") else math.nan
        if status == "open":
            bound = lo_nat if direction < 0 else hi_nat
        bounds.append((bound, status))
        spent.append(budget.used)
        why.append(res.reason if status == "failed" else "")
    prob.budget = None
    return result(bounds[0][0], bounds[1][0], bounds[0][1], bounds[1][1], spent, why)


def time_to_profile(fit, fraction=0.95, level=0.95, *, max_evaluations=None) -> ProfileInterval:
    r"""Profile interval of the time to a ``fraction`` p of a step change.

    One pool: :math:`\tau_p = -\ln(1-p)/k` (+ lag); several pools and the chain: the root of
    :math:`1 - F(\tau) = 1 - p` (:func:`isoturnover.quantities.time_to`). Search limits: a
    factor 1e4 either side of the estimate and of the sampling span.

    Parameters
    ----------
    fit : TurnoverFit
        A least-squares fit (``loss="linear"``).
    fraction : float, default=0.95
        Fraction p of the change, in (0, 1) (0.95 = 95 %).
    level : float, default=0.95
        Confidence level.
    max_evaluations : int, optional
        Evaluation budget of each side (see :func:`profile_derived`).

    Returns
    -------
    ProfileInterval
        Named ``time_to_95`` (for p = 0.95), in the fit's time unit.
    """
    check_fit(fit, "time_to_profile", joint=True)
    try:
        p = float(fraction)
    except (TypeError, ValueError):
        raise DataError(f"'fraction' must be between 0 and 1 (0.95 = 95 %); got "
                        f"{fraction!r}") from None
    if not 0 < p < 1:
        raise DataError(f"'fraction' must be between 0 and 1 (0.95 = 95 %); got {fraction!r}")
    kin = fit.kinetics
    ttp = fit_time_to(fit, p)
    est = ttp(fit.state.theta)
    first, span = design_span(fit)
    grad = None
    if kin.structure == "parallel":
        def grad(th):
            return quantities.time_to_grad(kin, p, ttp(th), th)
    limits = (min(est, first) * 1e-4, max(est, span) * 1e4)
    return profile_derived(fit, ttp, level,
                           name=f"time_to_{round(100 * p):d}" if abs(100 * p - round(100 * p))
                           < 1e-9 else f"time_to_{p:g}", positive=True, grad=grad,
                           limits=limits, max_evaluations=max_evaluations)


def mean_residence_time_profile(fit, level=0.95, *, max_evaluations=None) -> ProfileInterval:
    r"""Profile interval of the mean residence time :math:`\sum_i f_i/k_i` (+ lag).

    The quantity is :func:`isoturnover.quantities.mean_residence_time` (parallel pools:
    :math:`\sum_i f_i/k_i` + lag); its gradient is the closed form of
    :func:`isoturnover.quantities.mean_residence_time_grad` except with a fitted growth
    curve (central differences then).

    Parameters
    ----------
    fit : TurnoverFit
        A least-squares fit (``loss="linear"``).
    level : float, default=0.95
        Confidence level.
    max_evaluations : int, optional
        Evaluation budget of each side (see :func:`profile_derived`).

    Returns
    -------
    ProfileInterval
        Named ``mean_residence_time``, in the fit's time unit.
    """
    check_fit(fit, "mean_residence_time_profile", joint=True)
    kin = fit.kinetics
    mrt = fit_mrt(fit)
    est = mrt(fit.state.theta)
    first, span = design_span(fit)
    closed_form = kin.growth_kind not in ("curve", "curve_params")
    return profile_derived(fit, mrt, level, name="mean_residence_time", positive=True,
                           grad=((lambda th: quantities.mean_residence_time_grad(kin, th))
                                 if closed_form else None),
                           limits=(min(est, first) * 1e-4, max(est, span) * 1e4),
                           max_evaluations=max_evaluations)


def half_life_ratio_profile(fit, i, j, level=0.95, *,
                            max_evaluations=None) -> ProfileInterval:
    r"""Profile interval of the ratio of two half-lives :math:`t_{1/2,i}/t_{1/2,j} = k_j/k_i`.

    Pools (or chain steps) are numbered from 1, fastest first, so for ``i > j`` the ratio
    exceeds 1 (natural range (1, inf), an open lower bound is reported as 1) and for
    ``i < j`` it lies in (0, 1).

    Parameters
    ----------
    fit : TurnoverFit
        A least-squares fit (``loss="linear"``) with at least two pools (or chain steps).
    i, j : int
        Pool numbers, from 1 (fastest) to the number of pools; different.
    level : float, default=0.95
        Confidence level.
    max_evaluations : int, optional
        Evaluation budget of each side (see :func:`profile_derived`).

    Returns
    -------
    ProfileInterval
        Named ``half_life_ratio_i_j`` (dimensionless); gradient
        :math:`\partial(k_j/k_i)/\partial k_j = 1/k_i`,
        :math:`\partial(k_j/k_i)/\partial k_i = -k_j/k_i^2`.
    """
    check_fit(fit, "half_life_ratio_profile", joint=True)
    kin = fit.kinetics
    n = len(kin.rate_index)
    for nm, v in (("i", i), ("j", j)):
        if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or not 1 <= v <= n:
            raise DataError(f"'{nm}' must be a pool number from 1 to {n}; got {v!r}")
    if i == j:
        raise DataError(f"'i' and 'j' must name different pools; got {i} and {j}")
    ki, kj = kin.rate_index[i - 1], kin.rate_index[j - 1]

    def fn(th):
        return th[kj] / th[ki]

    def grad(th):
        g = np.zeros(th.size)
        g[kj] = 1.0 / th[ki]
        g[ki] = -th[kj] / th[ki] ** 2
        return g

    natural = (1.0, math.inf) if i > j else (0.0, 1.0)  # rates ordered by construction
    return profile_derived(fit, fn, level, name=f"half_life_ratio_{i}_{j}", grad=grad,
                           natural=natural, max_evaluations=max_evaluations)


