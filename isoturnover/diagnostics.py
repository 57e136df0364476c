"""Trust signals: the reasons to be careful with a fit (DESIGN §3 "Trust signals").

:func:`trust_notes` reads a finished fit (its public attributes and its
:class:`~isoturnover.engine.FitState`) and returns :class:`TrustNote` objects: parameter at a
bound, a rate too fast for the sampling to resolve, pools too close to separate, tiny pool,
|correlation| near 1, no or too few samples after the switch, plateau not reached (judged by
the incorporation rates when growth is modelled), the first diet's start (equilibrium with
a first diet fed for a known time assumed), optimizer not converged, a χ² test against known
σ, and the growth-dilution signals. Each becomes a warning of the fit and a numbered
note of its summary. :func:`after_switch_reason` and :func:`open_unresolved` are the checks
that series tables and interval tables share with these notes.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize, special

from . import quantities
from .conventions import unit_word
from .errors import (
    BoundWarning,
    ConvergenceWarning,
    DesignWarning,
    GoodnessOfFitWarning,
    IdentifiabilityWarning,
)
from .projection import DRIFT_LIMIT

__all__ = ["TrustNote", "trust_notes", "drift_reason", "slowest_rate", "plateau_time",
           "unresolved_rates", "open_unresolved", "after_switch_reason",
           "first_diet_half_lives", "FAST_LIMIT", "CHI2_ALPHA", "EQUILIBRIUM_HALF_LIVES"]

LN2 = math.log(2.0)

#: :math:`k\,t_{first}` above which a pool is complete before the first sample after the
#: switch (:math:`e^{-20} \approx 2\times10^{-9}` of its change left): its rate is not
#: resolved by the sampling (rule of thumb, not a published cut-off).
FAST_LIMIT = 20.0

#: Level of the χ² test of the scatter against σ treated as known (``chi2_high``).
CHI2_ALPHA = 1e-3

#: Half-lives of feeding after which a tissue is taken to be at equilibrium with a diet
#: (:math:`2^{-5} \approx 3\,\%` of the change left; common practice, not a published rule).
EQUILIBRIUM_HALF_LIVES = 5.0


@dataclass(frozen=True)
class TrustNote:
    """A reason to be careful with a fit: a short code, a warning category, a message.

    Parameters
    ----------
    code : str
        Short name of the signal (``"at_bound"``, ``"unidentifiable"``, ``"pools_close"``,
        ``"tiny_pool"``, ``"correlation"``, ``"no_sample_after_switch"``, ``"few_points"``,
        ``"plateau_not_reached"``, ``"first_diet_start"``, ``"not_converged"``,
        ``"linear_drift"`` (:func:`drift_reason`), ``"singular"``,
        ``"growth_dominates"``, ``"mass_coverage"``, ``"chi2_high"``).
    category : type
        The warning class it is issued as (a subclass of
        :class:`~isoturnover.errors.IsoturnoverWarning`).
    message : str
        What the user reads, with the numbers that triggered it.
    """

    code: str
    category: type
    message: str

    def to_dict(self):
        """Describe the note as JSON-safe data.

        Returns
        -------
        dict
            Keys ``code``, ``category`` (the warning class's name) and ``message``.
        """
        return {"code": self.code, "category": self.category.__name__, "message": self.message}


def trust_notes(fit) -> list:
    """List the trust signals of a fit (DESIGN §3 "Trust signals").

    The fit's warnings and the numbered notes of its summary. Reads only the fit's public
    attributes and its state. The thresholds are rules of thumb (the design card's list,
    not published cut-offs): a rate with :math:`k t_{first} >` :data:`FAST_LIMIT` (the pool
    complete before the first sample: the rate is unidentifiable, only a lower limit; see
    :func:`unresolved_rates`) or :math:`k \\cdot span < 0.01` (barely moving), rates within a
    factor 1.5, a fraction below 0.02, |correlation| above 0.99, no sample after the switch
    (:func:`after_switch_reason`) or fewer than ``nvarys + 2``, a last sample before two
    half-lives of the slowest pool (:func:`plateau_time`: judged by the incorporation rates
    :math:`k_{d,i} + k_g(t)` when growth is modelled), a growth share above 0.9 (the share
    of the isotopic change up to the last sample carried by the growth flux,
    :func:`isoturnover.quantities.growth_share_at`; :math:`k_g/(k_g + k_d)` for one pool
    with exponential growth; common practice), masses covering less than the samples' span
    minus 10 % at either end, a first diet whose start is known but not the diet before it
    (equilibrium with it assumed; the note gives :func:`first_diet_half_lives` and offers
    ``initial="free"`` below :data:`EQUILIBRIUM_HALF_LIVES`), and, with σ known, the χ² test
    of the weighted residual sum of squares on the fit's degrees of freedom,
    :math:`P(\\chi^2_{dof} \\ge RSS) <` :data:`CHI2_ALPHA` (``scipy.special.chdtrc``, the
    function behind ``scipy.stats.chi2.sf``).

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit (:meth:`TurnoverModel.fit <isoturnover.TurnoverModel.fit>`).

    Returns
    -------
    list of TrustNote
        The signals that fire, in a fixed order (convergence and covariance first); empty
        for a clean fit.
    """
    kin = fit.kinetics
    notes = []
    v = fit.values
    names = kin.param_names
    n_pools = len(kin.rate_names)
    tau = fit.t - float(kin.switch_times[0])
    pos = tau[tau > 0]
    span = float(pos.max()) if pos.size else 0.0
    first = float(pos.min()) if pos.size else math.nan
    if not fit.state.optimizer_ok:
        notes.append(TrustNote("not_converged", ConvergenceWarning,
                               f"the optimizer did not converge ({fit.message})"))
    drift = drift_reason(fit)
    if drift:
        notes.append(TrustNote("linear_drift", IdentifiabilityWarning, drift))
    elif fit.nvarys and fit.state.cov_ok and fit.state.dead.any():
        def plain(lab):
            if lab.startswith("log_gap_"):
                a, b = lab[len("log_gap_"):].split("_")
                return f"the ratio k{a}/k{b}"
            if lab.startswith("log_"):
                return lab[4:]
            if lab.startswith("logit_"):
                return lab[6:]
            if lab.startswith("stick_"):
                return "the split of the pool fractions"
            return lab

        names_dead = [plain(fit.state.coords.labels[i]) for i in np.flatnonzero(fit.state.dead)]
        notes.append(TrustNote(
            "singular", IdentifiabilityWarning,
            "the covariance matrix is singular: the data do not determine "
            + ", ".join(names_dead) + " (run to the edge of the range, e.g. a rate or a "
            "pool fraction to 0); standard errors that depend on it are not available"))
    elif fit.nvarys and not fit.state.cov_ok:
        notes.append(TrustNote(
            "singular", IdentifiabilityWarning,
            "the covariance matrix is singular: some parameters are not determined by "
            "these data (standard errors not available)"))
    # at bounds
    if "lag" in v and "lag" not in fit.fixed and v["lag"] <= 1e-9 * max(span, 1.0):
        notes.append(TrustNote("at_bound", BoundWarning,
                               "lag is at its lower bound 0: the data show no delay; "
                               "consider a model without lag"))
    for nm, (b_lo, b_hi) in fit.bounds.items():
        if nm in fit.fixed:
            continue
        scale = max(abs(v[nm]), abs(b_lo) if np.isfinite(b_lo) else 0.0,
                    abs(b_hi) if np.isfinite(b_hi) else 0.0, 1.0)
        for b, side in ((b_lo, "lower"), (b_hi, "upper")):
            if np.isfinite(b) and abs(v[nm] - b) <= 1e-7 * scale:
                notes.append(TrustNote(
                    "at_bound", BoundWarning,
                    f"{nm} = {v[nm]:.6g} is at its {side} bound ({b:g}, set in params): "
                    "the data would put it beyond; its interval stops at the bound"))
    unit = unit_word(fit.time_unit)
    fast = unresolved_rates(fit, first=first, values=v)
    for nm in kin.rate_names:
        if nm in fit.fixed:
            continue
        k = v[nm]
        if nm in fast:
            notes.append(TrustNote(
                "unidentifiable", IdentifiabilityWarning,
                f"{nm} = {k:.4g} per {unit[:-1]} is not identifiable: the pool is complete "
                f"before the first sample after the switch (t = {first:g} {unit}, "
                f"{nm}·t = {fast[nm]:.3g} > {FAST_LIMIT:g}); the data give only a lower "
                "limit, so its interval is open above (its half-life's open below)"))
        if span > 0 and k * span < 0.01:
            notes.append(TrustNote(
                "at_bound", BoundWarning,
                f"{nm} = {k:.4g} per {fit.time_unit}: the pool barely moves within the "
                "sampling period; its rate is not determined"))
    if kin.structure == "parallel" and n_pools > 1:
        k = np.array([v[nm] for nm in kin.rate_names])
        for i in range(n_pools - 1):
            if k[i] / k[i + 1] < 1.5:
                notes.append(TrustNote(
                    "pools_close", IdentifiabilityWarning,
                    f"pools {i + 1} and {i + 2} have rates within a factor 1.5 "
                    f"({k[i]:.4g} and {k[i + 1]:.4g}): too close to separate; fewer pools "
                    "describe these data as well"))
        for nm in kin.fraction_names:
            if v[nm] < 0.02 and nm not in fit.fixed:
                notes.append(TrustNote(
                    "tiny_pool", IdentifiabilityWarning,
                    f"{nm} = {v[nm]:.3g} (< 0.02): a pool this small is not supported by "
                    "the data; fewer pools describe them as well"))
    if fit.state.cov_ok and fit.nvarys > 1:
        c = fit.covar.tolist()  # plain floats: a handful of numbers
        d = np.sqrt(np.diag(fit.covar)).tolist()
        free = [j for j, nm in enumerate(names) if nm not in fit.fixed and d[j] > 0]
        # the last fraction is determined by the others; its correlation is by construction
        skip = set()
        if kin.fraction_index and n_pools > 1:
            skip.add(kin.fraction_index[-1])
        # parameters set by an expression are correlated with their sources by design
        skip.update(names.index(nm) for nm in fit.tied)
        worst = None
        for a in free:
            for b in free:
                if b <= a or a in skip or b in skip:
                    continue
                den = d[a] * d[b]
                r = c[a][b] / den if den else math.nan
                if abs(r) > 0.99 and (worst is None or abs(r) > abs(worst[2])):
                    worst = (names[a], names[b], r)
        if worst:
            notes.append(TrustNote(
                "correlation", IdentifiabilityWarning,
                f"{worst[0]} and {worst[1]} are correlated at {worst[2]:+.3f}: the data "
                "hardly separate them"))
    n_after = pos.size
    # t − s > 0 exactly when t > s: the reason is needed only when no time is positive
    none_after = None if n_after else after_switch_reason(
        fit.t, float(kin.switch_times[0]), fit.time_unit)
    if none_after is not None:
        notes.append(TrustNote("no_sample_after_switch", DesignWarning, none_after))
    elif n_after < fit.nvarys + 2:
        notes.append(TrustNote(
            "few_points", DesignWarning,
            f"only {n_after} sample(s) after the switch for {fit.nvarys} free parameters "
            f"(at least {fit.nvarys + 2} advised)"))
    if span > 0:
        t_two = plateau_time(fit)
        if span < t_two:  # NaN (no rate to judge by) never fires
            growing = kin.growth_kind is not None
            judged = ""
            if growing:
                kg = "k_g(t)" if kin.growth_kind in ("curve", "curve_params") else "k_g"
                judged = f", judged by its incorporation rate k_d + {kg},"
            when = (f"({t_two:.4g} {unit})" if math.isfinite(t_two) else
                    "(never, under the fitted rates and growth curve)")
            notes.append(TrustNote(
                "plateau_not_reached", DesignWarning,
                f"the last sample ({span:.4g} {unit} after the first switch) comes before "
                f"two half-lives of the slowest pool{judged} {when}: the new plateau is "
                "extrapolated and the slow half-life is poorly bounded"))
    note = _first_diet_note(fit)
    if note is not None:
        notes.append(note)
    if kin.growth_kind is not None and span > 0:
        t_end = float(fit.t.max())
        try:
            share_end = quantities.growth_share_at(kin, t_end, fit.state.theta)
        except (ValueError, ZeroDivisionError, OverflowError):
            share_end = math.nan
        # the growth flux's share of the isotopic change (Hesslein et al. 1993 for one
        # pool: k_g/(k_g + k_d)); above 0.9 the catabolic part is a small difference of
        # two large ones (threshold: common practice, no published cut-off)
        if np.isfinite(share_end) and share_end > 0.9:
            notes.append(TrustNote(
                "growth_dominates", IdentifiabilityWarning,
                f"growth explains nearly all of the change: the growth flux carries "
                f"{100 * share_end:.3g} % of the isotopic change up to t = {t_end:g} (above 90 %); "
                "the catabolic rate is poorly identified (its interval may be open "
                "towards 0)"))
        mb = fit.state.engine.mass_block
        cov = mb.coverage if mb is not None else None
        if cov is None and hasattr(kin.growth, "t"):
            gt = np.asarray(kin.growth.t, dtype=float)
            cov = (float(gt.min()), float(gt.max())) if gt.size else None
        if cov is not None:
            t_lo = min(float(fit.t.min()), float(kin.switch_times[0]))
            t_hi = float(fit.t.max())
            margin = 0.1 * (t_hi - t_lo)
            if cov[0] > t_lo + margin or cov[1] < t_hi - margin:
                notes.append(TrustNote(
                    "mass_coverage", DesignWarning,
                    f"body masses cover t = {cov[0]:g} to {cov[1]:g} but the isotope "
                    f"samples run from {t_lo:g} to {t_hi:g}: growth is extrapolated"))
    if fit.absolute_sigma and fit.dof > 0:
        # χ² test of the weighted RSS on the fit's degrees of freedom (scipy)
        p_chi2 = float(special.chdtrc(fit.dof, fit.rss))
        if p_chi2 < CHI2_ALPHA:
            notes.append(TrustNote(
                "chi2_high", GoodnessOfFitWarning,
                f"χ² = {fit.rss:.4g} on {fit.dof} degrees of freedom (χ²/dof = "
                f"{fit.redchi:.3g}, p = {p_chi2:.2g} < {CHI2_ALPHA:g}) with σ treated as "
                "known: the scatter between time points is far above the analytic sd "
                "(usual for living animals); the intervals are too narrow — refit with "
                "absolute_sigma=False"))
    return notes


def drift_reason(fit) -> str:
    r"""Why a fit's slowest pool is not reported as a pool: its rate ran to 0 ("" if not).

    The variable-projection fit (:meth:`isoturnover.engine.Engine.fit_projected`) stops
    when the slowest rate heads to its lower bound 0, with
    :math:`k_{min}\tau_{max}` below :data:`~isoturnover.projection.DRIFT_LIMIT` (0.01;
    :math:`\tau_{max}` the last time after the switch): the pool's exponential is then a
    straight line over the sampling (:math:`b e^{-k\tau} \approx b - bk\tau`), a linear
    drift when the levels are free (its amplitude and the plateau run off together), a
    constant offset when the total change is fixed. Such a fit is returned unconverged and
    flagged rather than searched further (the search only creeps towards :math:`k = 0` until
    its evaluation limit); its sum of squares and information criteria are those of the
    point where it stopped, within a relative :math:`O(k_{min}\tau_{max})` of the limit.
    :func:`~isoturnover.fit_each` keeps it in the comparison but never chooses it.

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit.

    Returns
    -------
    str
        The reason, naming the rate and :math:`k\tau_{max}`; "" for any other fit.
    """
    info = fit.state.solution.extra.get("drift") or _stalled_drift(fit)
    if not info:
        return ""
    unit = unit_word(fit.time_unit)
    return (f"the slowest rate runs to 0: {info['rate']}·τ_max = {info['k_tau']:.2g} "
            f"(< {DRIFT_LIMIT:g}; τ_max the last sample, in {unit} after the switch); over the "
            "sampling this pool is a linear drift (or a constant offset), not a pool: its "
            "rate, half-life and fraction are not determined, and fit_each does not choose "
            "this model; the fit stopped there (not converged), its RSS within a relative "
            "O(k·τ_max) of the drift's limit")


def _stalled_drift(fit):
    """The drift of a fit that stopped unconverged outside the projection (the general
    search at its evaluation limit) with its slowest rate below the drift limit: the same
    reading as the projection's own stop. Not for growth models, whose incorporation rate
    stays positive when the catabolic one runs to 0."""
    kin = fit.kinetics
    if fit.state.optimizer_ok or not kin.rate_names or kin.growth_kind is not None:
        return None
    v = fit.values
    name = min(kin.rate_names, key=lambda nm: v[nm])
    tau = float(np.max(fit.t)) - float(kin.switch_times[0])
    k_tau = float(v[name]) * tau
    if not (tau > 0 and np.isfinite(k_tau) and k_tau < DRIFT_LIMIT):
        return None
    return {"rate": name, "k_tau": k_tau}


def first_diet_half_lives(fit):
    r"""How many half-lives of the slowest pool the first diet had been fed by the first switch.

    Applies when the diet history says when the first diet began (``diet.start``) but not
    what was eaten before it, so the model assumes the tissue was at equilibrium with the
    first diet. The slowest pool's old material left at the switch :math:`s_1` is
    :math:`e^{-k(s_1 - s_0)}\,W(s_0)/W(s_1)` (growth dilution, Hesslein et al. 1993), so the
    number of half-lives is :math:`[k(s_1 - s_0) + \ln W(s_1) - \ln W(s_0)]/\ln 2` with
    :math:`k` the smallest catabolic rate (by hand; :math:`(k + k_g)(s_1 - s_0)/\ln 2` for
    exponential growth, :math:`k (s_1 - s_0)/\ln 2` without growth); for the chain
    :math:`k` is :func:`slowest_rate`.

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit.

    Returns
    -------
    float or None
        The number of half-lives (dimensionless); None when it does not apply (no diet
        history, no ``start``, the diet before it known and modelled, or
        ``initial="free"``).
    """
    kin = fit.kinetics
    diet = kin.diet
    if (diet is None or diet.start is None or kin.lead_in is not None
            or kin.initial != "equilibrium"):
        return None
    s0, s1 = float(diet.start), float(kin.switch_times[0])
    theta = np.asarray(fit.state.theta, dtype=float)
    if kin.structure == "chain":
        return slowest_rate(fit) * (s1 - s0) / LN2
    k = float(np.min(theta[list(kin.rate_index)]))
    lw = kin.log_mass(np.array([s0, s1]), theta)
    return (k * (s1 - s0) + float(lw[1] - lw[0])) / LN2


def _first_diet_note(fit):
    """The ``first_diet_start`` note, or None (see :func:`first_diet_half_lives`)."""
    n = first_diet_half_lives(fit)
    if n is None or not math.isfinite(n):
        return None
    kin = fit.kinetics
    diet = kin.diet
    unit = unit_word(fit.time_unit)
    first = "unknown" if not math.isfinite(diet.initial) else f"{diet.initial:g} ‰"
    judged = ""
    if kin.growth_kind is not None:
        kg = "k_g(t)" if kin.growth_kind in ("curve", "curve_params") else "k_g"
        judged = f" (judged by its incorporation rate k_d + {kg})"
    msg = (f"the model assumes the tissue was at equilibrium with the first diet ({first}, "
           f"fed from t = {diet.start:g} {unit}); by the first switch (t = "
           f"{float(kin.switch_times[0]):g} {unit}) it had been fed for {n:.3g} half-lives "
           f"of the slowest pool{judged} (common practice: 5 half-lives ≈ 97 % "
           "equilibrated)")
    if n < EQUILIBRIUM_HALF_LIVES:
        msg += (": the tissue may not have reached it. Give the diet eaten before it "
                "(DietHistory(..., previous=δ) or from_table(..., previous=δ)) to solve the "
                'whole history, or fit the starting state with initial="free"')
    else:
        msg += ": the assumption holds"
    return TrustNote("first_diet_start", DesignWarning, msg)


def slowest_rate(fit) -> float:
    """Give the rate that sets how long the tissue takes to settle after a switch.

    The smallest pool rate (incorporation rates :math:`k_i + k_g` with exponential growth;
    with a growth curve the catabolic rate alone, as :math:`k_g(t)` varies: judge plateaus
    by :func:`plateau_time`, which includes it); for the chain :math:`1/(1/k_1 + 1/k_2)`,
    since it needs about as long as its two half-lives together (0 when a step has rate 0).

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit.

    Returns
    -------
    float
        The rate, per time unit of the fit (/d for days).
    """
    v = fit.values
    kin = fit.kinetics
    ks = [v[nm] for nm in kin.rate_names]
    if kin.structure == "chain":
        # the chain needs about as long as its two half-lives together
        return 1.0 / (1.0 / ks[0] + 1.0 / ks[1]) if min(ks) > 0 else 0.0
    if kin.growth_rate_index is not None:
        ks = [k + v["k_growth"] for k in ks]
    return float(min(ks))


def plateau_time(fit) -> float:
    r"""Time after the first switch for the slowest pool to be two half-lives along.

    The slowest pool is the one of smallest incorporation rate
    :math:`\kappa_i = k_{d,i} + k_g` (exponential growth) or :math:`k_i` (no growth model:
    the rates are incorporation rates already). Two half-lives leave a quarter of its
    change to come, :math:`2\ln 2/\kappa_i` (by hand). With a growth curve the pool's old
    material left is :math:`e^{-k_i\tau}\,W(s)/W(s+\tau)` (growth dilution, Hesslein et
    al. 1993), so the time is the root of that being 1/4, found by
    :func:`isoturnover.quantities.time_to` with the pool's fraction set to 1 (Brent's
    method). The chain uses :func:`slowest_rate`, :math:`2\ln 2\,(1/k_1 + 1/k_2)`.

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit.

    Returns
    -------
    float
        The time, in the fit's time unit (days by default); ``inf`` when the slowest pool
        never gets that far under the fitted rates and growth curve (a rate at 0 and growth
        that stops); NaN when there is no positive rate to judge by (no growth curve).
    """
    kin = fit.kinetics
    if kin.structure == "chain":
        slow = slowest_rate(fit)
        return 2 * LN2 / slow if slow > 0 else math.nan
    theta = np.array(fit.state.theta, dtype=float)
    ks = theta[list(kin.rate_index)]
    if kin.growth_rate_index is not None:
        ks = ks + theta[kin.growth_rate_index]
    i = int(np.argmin(ks))
    k = float(ks[i])
    if kin.growth_kind not in ("curve", "curve_params"):
        return 2 * LN2 / k if k > 0 else math.nan
    th = theta.copy()
    if kin.fraction_index:
        th[list(kin.fraction_index)] = 0.0
        th[kin.fraction_index[i]] = 1.0

    def left(tau):  # the pool's share of its change still to come, growth included
        return float(quantities.remaining_after_switch(kin, np.array([tau]), th)[0]) - 0.25

    t = fit.t - float(kin.switch_times[0])
    scale = max(float(t.max()), 1.0)
    horizon = 1e6 * scale
    if k > 0:
        horizon = min(horizon, max(50.0 / k, scale))
    try:
        if not left(horizon) < 0:
            return math.inf
        if k > 0:
            lag = float(th[kin.lag_index]) if kin.lag_index is not None else 0.0
            return float(quantities.time_to(kin, 0.75, th)) - lag
        return float(optimize.brentq(left, 0.0, horizon, xtol=1e-12, rtol=1e-12))
    except (ArithmeticError, ValueError):
        return math.nan


def unresolved_rates(fit, *, first=None, values=None) -> dict:
    r"""Rates too fast for the sampling to resolve: each pool complete before the first sample.

    A free rate with :math:`k\,t_{first} >` :data:`FAST_LIMIT` (:math:`t_{first}` the first
    sample after the first switch) leaves :math:`e^{-k t_{first}} < 2\times10^{-9}` of its
    pool's change for the data to see: any larger rate fits as well, so the rate is not
    identifiable and the data give only a lower limit. Rates fixed by the user are not
    listed.

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit.
    first : float, optional
        The first sample time after the first switch (time unit of the fit), when the
        caller has it already (NaN: no sample follows the switch).
    values : dict, optional
        The fit's parameter values (``fit.values``), when the caller has them already.

    Returns
    -------
    dict of str to float
        Rate name → :math:`k\,t_{first}` (dimensionless), in the order of the rates; empty
        when every rate is resolved or no sample follows the switch.
    """
    kin = fit.kinetics
    if first is None:
        tau = np.asarray(fit.t, dtype=float) - float(kin.switch_times[0])
        pos = tau[tau > 0]
        first = float(pos.min()) if pos.size else math.nan
    if not first > 0:
        return {}
    v = fit.values if values is None else values
    return {nm: float(v[nm]) * first for nm in kin.rate_names
            if nm not in fit.fixed and float(v[nm]) * first > FAST_LIMIT}


def open_unresolved(fit, name, bounds) -> tuple:
    """Interval bounds of a parameter with the upper bound of an unresolved rate opened.

    A rate of :func:`unresolved_rates` is only a lower limit: whatever finite upper bound a
    profile or a covariance gives for it is an artefact of where the search stopped, so the
    upper bound becomes ``inf`` with status ``"open"``; the lower bound is kept. Any other
    parameter's bounds are returned unchanged.

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit.
    name : str
        The parameter (``"k1"``, …).
    bounds : tuple
        ``(lower, upper, lower_status, upper_status)`` as the interval code gives them.

    Returns
    -------
    tuple
        ``(lower, upper, lower_status, upper_status)``.
    """
    lo, hi, ls, hs = bounds
    if name in unresolved_rates(fit):
        return lo, math.inf, ls, "open"
    return lo, hi, ls, hs


def after_switch_reason(t, switch: float, time_unit: str = "d"):
    """Why a series cannot show a switch's effect, when no sample follows the switch.

    Parameters
    ----------
    t : array-like
        Sampling times, in ``time_unit`` from the experiment's origin.
    switch : float
        Time of the (first) diet switch, same unit.
    time_unit : str, default="d"
        Code of the time unit (for the message).

    Returns
    -------
    str or None
        The reason (every sample at or before the switch: the change cannot be seen, so
        the new plateau and the rates are not determined); None when at least one sample
        follows the switch.
    """
    t = np.asarray(t, dtype=float).ravel()
    if t.size and np.any(t > switch):
        return None
    unit = unit_word(time_unit)
    last = f" (the last at t = {float(t.max()):g} {unit})" if t.size else ""
    return (f"no sample follows the switch at t = {switch:g} {unit}: all {t.size} "
            f"sample(s) are at or before it{last}, so the data cannot show the change; "
            "the new plateau and the rates are not determined")
