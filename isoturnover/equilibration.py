r"""Field planning from turnover estimates: equilibration time and integration window.

Two questions a field study asks of captive kinetics, with their uncertainty:

* **Equilibration time** :func:`equilibration_time` — how long after a diet change the
  tissue has made a fraction :math:`p` of it: the root :math:`\tau_p` of
  :math:`1 - F(\tau) = 1 - p`, with :math:`1 - F` the step response (the reaction progress
  variable, Cerling et al. 2007, *Oecologia* 151:175–189). One pool
  :math:`\tau_p = -\ln(1-p)/\kappa`, about 4.32 half-lives for :math:`p = 0.95`
  (:math:`\ln 20/\ln 2`).
* **Integration window** :func:`integration_window` — the stretch of time before sampling
  that contributes a share :math:`q` of the tissue's value. A tissue sampled at time
  :math:`T` is a weighted average of the diet eaten before, :math:`\delta(T) - \Delta =
  \int_0^\infty w(s)\,\delta_{diet}(T - s)\,ds`, with the weight (the impulse response of
  the linear, time-invariant model)

  .. math::

      w(s) = \sum_i f_i \kappa_i e^{-\kappa_i s}\quad\text{(parallel pools)},\qquad
      w(s) = \frac{k_1 k_2}{k_1 - k_2}\,(e^{-k_2 s} - e^{-k_1 s})\quad\text{(chain)},

  the chain's weight being the convolution of its two exponential steps (at
  :math:`k_1 = k_2` its limit :math:`k^2 s e^{-ks}`). The window :math:`s_q` solves
  :math:`\int_0^{s_q} w(s)\,ds = q`. Since :math:`w = -d(1-F)/ds` (by hand: the derivative
  of the step response is the impulse response), :math:`\int_0^{s} w = F(s)`, so the window
  is the root of :math:`1 - F(s) = 1 - q`: the same computation as the equilibration time
  with :math:`p = q`, and both run through :func:`isoturnover.quantities.time_to`, the one
  implementation :meth:`TurnoverFit.time_to <isoturnover.TurnoverFit.time_to>` uses. A lag
  adds to both (diet eaten during the last ``lag`` contributes nothing).

With exponential growth the rates are incorporation rates :math:`\kappa_i = k_i + k_g`
(Hesslein, Hallard & Ramlal 1993, *Can. J. Fish. Aquat. Sci.* 50:2071–2076, journal details
from memory). A fitted growth curve makes the model time-varying (the weight depends on the
sampling date), so it has an equilibration time measured from the switch but no single
integration window.

Where the estimate and its interval come from (``source``):

* a :class:`~isoturnover.TurnoverFit`: its own derived-quantity interval,
  ``fit.time_to(p, level, method)`` (profile likelihood by default; the interval of the
  fitted animal's parameters);
* a population estimate (:func:`~isoturnover.population_estimate` of half-lives or rates,
  or :func:`~isoturnover.random_effects` of their logs): a **new animal**, through the
  prediction interval :math:`\hat\mu \pm t_{k-p-1}\sqrt{\hat\tau^2 + SE^2}` of the
  one-pool half-life (Higgins, Thompson & Spiegelhalter 2009); :math:`\tau_p =
  t_{1/2}\ln(1/(1-p))/\ln 2` is increasing in the half-life, so the prediction bounds map
  directly;
* given ``rates=`` (and ``fractions=``, ``structure=``, ``growth_rate=``): the estimate,
  and with ``stderr=`` a delta-method interval on the log scale (below); without standard
  errors no interval.

Animal experiments and field sampling need the approval of the local animal-care authority
(for human hair or blood, a human-research ethics board); these plans support that process
and do not replace it (:data:`CAUTION`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from . import quantities
from .conventions import (
    CAUTION,
    INTERVAL_COLUMNS,
    METHODS,
    check_choice,
    check_level,
    check_method,
    unit_word,
)
from .errors import DataError
from .kinetics import MAX_POOLS, TurnoverKinetics
from .lazystats import stats
from .population import PopulationEstimate, RandomEffects
from .responses import chain_terms

__all__ = ["TissueTime", "equilibration_time", "integration_window", "window_weight",
           "CAUTION", "POPULATION_QUANTITIES"]


#: What the values of a :class:`~isoturnover.RandomEffects` source are (``quantity=``).
POPULATION_QUANTITIES = ("log_half_life", "log_rate", "half_life", "rate")

_QUANTITIES = {
    "equilibration_time": ("equilibration time", "fraction",
                           "time after a diet change for the tissue to complete {pct} of its "
                           "isotopic change"),
    "integration_window": ("integration window", "share",
                           "the stretch of time before sampling whose diet contributes {pct} "
                           "of the tissue's value"),
}
_GROWTH_CURVES = ("curve", "curve_params")


@dataclass(frozen=True)
class TissueTime:
    """An equilibration time or integration window with its interval (read-only).

    Made by :func:`equilibration_time` and :func:`integration_window`.

    Parameters
    ----------
    quantity : str
        ``"equilibration_time"`` or ``"integration_window"``.
    fraction : float
        The fraction of the change (equilibration) or share of the value (window), in
        (0, 1).
    estimate : float
        The time, in ``time_unit``.
    lower, upper : float
        Interval bounds at ``level`` (NaN when there is no interval).
    level : float
        Confidence (or, for a new animal, prediction) level.
    method : str
        How the interval was made: the fit's own method (``"profile"``, ``"asymptotic"``,
        ``"bootstrap (percentile)"``…), ``"prediction"`` (a new animal of a population),
        ``"delta (log scale)"`` (given rates with standard errors) or ``"given"`` (given
        rates without standard errors: no interval).
    lower_status, upper_status : str
        Status of each bound (:data:`~isoturnover.conventions.STATUSES`).
    time_unit : str or None
        Unit of time (``"d"``…), None when the rates' unit was not given.
    source : str
        What the estimate comes from, in words.
    """

    quantity: str
    fraction: float
    estimate: float
    lower: float
    upper: float
    level: float
    method: str
    lower_status: str
    upper_status: str
    time_unit: str | None
    source: str

    def table(self) -> pd.DataFrame:
        """The result as a one-row interval table.

        Returns
        -------
        DataFrame
            Columns ``quantity, fraction``, then
            :data:`~isoturnover.conventions.INTERVAL_COLUMNS` (``estimate, lower, upper,
            level, method, lower_status, upper_status``), then ``time_unit, source``.
        """
        row = {"quantity": self.quantity, "fraction": self.fraction}
        row.update({c: getattr(self, c) for c in INTERVAL_COLUMNS})
        row.update(time_unit=self.time_unit, source=self.source)
        return pd.DataFrame([row])

    def summary(self) -> str:
        """A printable account of the result, ending with the animal-care caution.

        Returns
        -------
        str
            The quantity and what it means, the estimate with its interval and method,
            the source, and :data:`CAUTION`.
        """
        name, _, meaning = _QUANTITIES[self.quantity]
        pct = f"{100 * self.fraction:g} %"
        unit = f" {unit_word(self.time_unit)}" if self.time_unit else \
            " (in the time unit of the rates)"
        lines = [f"{name.capitalize()} ({pct}): {self.estimate:.4g}{unit}",
                 "  " + meaning.format(pct=pct)]
        if self.method == "given":
            lines.append("  no interval: the rates were given without standard errors")
        else:
            what = "prediction interval, a new animal" if self.method == "prediction" \
                else f"interval, {self.method}"
            lines.append(f"  {100 * self.level:g} % {what}: {_bound(self.lower)} to "
                         f"{_bound(self.upper)}{unit}")
            opened = [s for s, st in (("lower", self.lower_status),
                                      ("upper", self.upper_status)) if st != "ok"]
            if opened:
                lines.append("  bound status: " + ", ".join(
                    f"{s} {getattr(self, s + '_status')}" for s in opened))
        lines.append(f"  from: {self.source}")
        lines.append("")
        lines.append("Caution. " + CAUTION)
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.summary()


def _bound(x: float) -> str:
    return "∞" if x == math.inf else f"{x:.4g}"


# --------------------------------------------------------------------------- given rates

def _given_kinetics(rates, fractions, structure, growth_rate):
    """A kinetics and θ for given rates (δ levels 0 → 1, which the time does not use)."""
    structure = check_choice("structure", structure, ("parallel", "chain"))
    try:
        k = np.atleast_1d(np.asarray(rates, dtype=float))
    except (TypeError, ValueError):
        raise DataError(f"'rates' must be a number or a list of numbers (per time unit); got "
                        f"{rates!r}") from None
    if k.ndim != 1 or k.size == 0:
        raise DataError(f"'rates' must be a number or a flat list of numbers; got {rates!r}")
    for i, v in enumerate(k):
        if not (np.isfinite(v) and v > 0):
            raise DataError(f"'rates'[{i}] must be a finite number > 0 (per time unit); got "
                            f"{v!r}")
    if structure == "chain":
        if k.size != 2:
            raise DataError(f"'rates': the chain has two steps, so 2 rates; got {k.size}")
        if fractions is not None:
            raise DataError("'fractions' does not apply to structure='chain' (two steps in "
                            "series, no pool fractions)")
        f = np.empty(0)
    else:
        if k.size > MAX_POOLS:
            raise DataError(f"'rates' has {k.size} pools; at most {MAX_POOLS}")
        if fractions is None:
            if k.size > 1:
                raise DataError(f"'fractions' is needed with {k.size} parallel pools (one per "
                                "rate, summing to 1)")
            f = np.ones(1)
        else:
            try:
                f = np.atleast_1d(np.asarray(fractions, dtype=float))
            except (TypeError, ValueError):
                raise DataError(f"'fractions' must be a list of numbers; got "
                                f"{fractions!r}") from None
            if f.shape != k.shape:
                raise DataError(f"'fractions' must give one fraction per rate ({k.size}); got "
                                f"{f.size}")
            for i, v in enumerate(f):
                if not (np.isfinite(v) and 0 <= v <= 1):
                    raise DataError(f"'fractions'[{i}] must be between 0 and 1; got {v!r}")
            if abs(f.sum() - 1.0) > 1e-6:
                raise DataError(f"'fractions' must sum to 1; they sum to {f.sum():.6g}")
    growth = None
    kg = None
    if growth_rate is not None:
        try:
            kg = float(growth_rate)
        except (TypeError, ValueError):
            raise DataError(f"'growth_rate' must be a number (per time unit); got "
                            f"{growth_rate!r}") from None
        if not math.isfinite(kg):
            raise DataError(f"'growth_rate' must be finite; got {growth_rate!r}")
        if structure == "chain":
            raise DataError("'growth_rate' applies to structure='parallel' only (growth "
                            "dilution of a chain is not modelled); give the chain's "
                            "incorporation rates as 'rates' instead")
        for i, v in enumerate(k):
            if not v + kg > 0:
                raise DataError(f"'growth_rate' {kg:g} makes the incorporation rate of pool "
                                f"{i + 1} ({v:g} + {kg:g}) not positive")
        growth = "exponential"
    kin = TurnoverKinetics(int(k.size), structure=structure, growth=growth)
    theta = np.zeros(kin.n_params)
    theta[kin.param_names.index("delta_eq")] = 1.0
    theta[kin.rate_index] = k
    if kin.fraction_index:
        theta[kin.fraction_index] = f
    if kg is not None:
        theta[kin.growth_rate_index] = kg
    return kin, theta


def _free_names(kin):
    """Parameters a standard error can be given for: rates, all fractions but the last
    (it is 1 minus the others), and the growth rate."""
    names = [kin.param_names[i] for i in kin.rate_index]
    names += [kin.param_names[i] for i in kin.fraction_index[:-1]]
    if kin.growth_rate_index is not None:
        names.append("k_growth")
    return names


def _time_grad(kin, p, tau, theta):
    r"""Gradient of the time to ``p`` in the free parameters of :func:`_free_names`.

    Implicit differentiation of :math:`1 - F(\tau; \theta) = 1 - p`:
    :math:`\partial\tau/\partial\theta = -(\partial\Phi/\partial\theta)/(\partial\Phi/
    \partial\tau)`. Parallel pools: :func:`isoturnover.quantities.time_to_grad`, the last
    fraction eliminated (:math:`\partial/\partial f_j - \partial/\partial f_n`); the chain:
    the derivatives of its step response from :func:`isoturnover.responses.chain_terms`.
    """
    if kin.structure == "chain":
        k1, k2 = (float(theta[i]) for i in kin.rate_index)
        _, d1, d2, dt = chain_terms(np.array([tau]), k1, k2)
        return np.array([-d1[0] / dt[0], -d2[0] / dt[0]])
    g = quantities.time_to_grad(kin, p, tau, theta)
    out = [g[i] for i in kin.rate_index]
    fi = kin.fraction_index
    out += [g[i] - g[fi[-1]] for i in fi[:-1]]
    if kin.growth_rate_index is not None:
        out.append(g[kin.growth_rate_index])
    return np.array(out, dtype=float)


def _from_rates(p, level, rates, fractions, structure, growth_rate, stderr):
    kin, theta = _given_kinetics(rates, fractions, structure, growth_rate)
    est = float(quantities.time_to(kin, p, theta))
    desc = _describe_rates(kin, theta)
    if stderr is None:
        return est, (math.nan, math.nan, "not_available", "not_available"), "given", desc
    free = _free_names(kin)
    if not hasattr(stderr, "items"):
        raise DataError(f"'stderr' must be a mapping of parameter name to standard error "
                        f"({', '.join(free)}); got {type(stderr).__name__}")
    se = np.zeros(len(free))
    last_f = f"f{kin.pools}" if kin.fraction_index else None
    for name, v in stderr.items():
        if name == last_f:
            raise DataError(f"'stderr' has {name!r}: the last fraction is 1 minus the others, "
                            f"so give the standard errors of {', '.join(free)}")
        if name not in free:
            raise DataError(f"'stderr' has unknown parameter {name!r}; the parameters of "
                            f"these rates are {', '.join(free)}")
        try:
            s = float(v)
        except (TypeError, ValueError):
            raise DataError(f"'stderr[{name!r}]' must be a number; got {v!r}") from None
        if not (math.isfinite(s) and s >= 0):
            raise DataError(f"'stderr[{name!r}]' must be a finite number >= 0; got {v!r}")
        se[free.index(name)] = s
    g = _time_grad(kin, p, est, theta)
    se_log = float(np.sqrt(np.sum((g * se) ** 2))) / est
    z = float(stats.norm.ppf(0.5 + level / 2))
    bounds = (est * math.exp(-z * se_log), est * math.exp(z * se_log), "ok", "ok")
    return est, bounds, "delta (log scale)", desc


def _describe_rates(kin, theta) -> str:
    k = ", ".join(f"{theta[i]:.4g}" for i in kin.rate_index)
    if kin.structure == "chain":
        s = f"given rates of a two-step chain: {k}"
    elif kin.pools == 1:
        s = f"given rate {k}"
    else:
        f = ", ".join(f"{theta[i]:.4g}" for i in kin.fraction_index)
        s = f"given rates {k} of {kin.pools} parallel pools, fractions {f}"
    if kin.growth_rate_index is not None:
        s += f"; growth rate {theta[kin.growth_rate_index]:.4g} (incorporation rates k + k_g)"
    return s


# --------------------------------------------------------------------------- population

def _population_quantity(source, quantity):
    """(scale of the analysis, kind) with kind "half_life" or "rate"."""
    if isinstance(source, PopulationEstimate):
        if quantity is None:
            q = source.quantity.lower()
            if "half" in q:
                kind = "half_life"
            elif "rate" in q or (q.startswith("k") and q[1:].isdigit()):
                kind = "rate"
            else:
                raise DataError(f"the population estimate is of {source.quantity!r}; an "
                                "equilibration time needs one of half-lives or rates (or say "
                                "which with quantity='half_life' or 'rate')")
        else:
            kind = check_choice("quantity", quantity, ("half_life", "rate"))
        return source.scale, kind
    if quantity is None:
        raise DataError("'quantity' is needed with a RandomEffects source: say what its "
                        f"estimates are, one of {', '.join(POPULATION_QUANTITIES)} (log = "
                        "natural log)")
    q = check_choice("quantity", quantity, POPULATION_QUANTITIES)
    return ("log" if q.startswith("log_") else "identity"), q.removeprefix("log_")


def _from_population(p, level, source, quantity, new_moderators):
    scale, kind = _population_quantity(source, quantity)
    model = source.model if isinstance(source, PopulationEstimate) else source
    pred = model.predict(new_moderators)
    if len(pred) != 1:
        raise DataError(f"'new_moderators' must describe one new animal; got {len(pred)} rows")
    mu, se = float(pred["estimate"].iloc[0]), float(pred["stderr"].iloc[0])
    df = model.k - len(model.beta) - 1
    if df < 1:
        raise DataError(f"the population estimate has {model.k} animals; a new animal's "
                        "prediction interval needs at least 3 (more with moderators)")
    half = float(stats.t.ppf(0.5 + level / 2, df)) * math.sqrt(model.tau2 + se * se)
    back = math.exp if scale == "log" else float
    c = -math.log1p(-p)
    # the time is increasing in the half-life and decreasing in the rate
    if kind == "half_life":
        def time(h):
            return h * c / math.log(2.0)
        est, lo_q, hi_q = back(mu), back(mu - half), back(mu + half)
        lo, ls = (time(lo_q), "ok") if lo_q > 0 else (0.0, "open")
        hi, hs = time(hi_q), "ok"
    else:
        def time(k):
            return c / k
        est, lo_q, hi_q = back(mu), back(mu + half), back(mu - half)
        lo, ls = time(lo_q), "ok"
        hi, hs = (time(hi_q), "ok") if hi_q > 0 else (math.inf, "open")
    if not est > 0:
        raise DataError(f"the population {kind.replace('_', ' ')} is {est:g}; it must be > 0")
    what = "population estimate" if isinstance(source, PopulationEstimate) else \
        "random-effects estimate"
    plural = "half-lives" if kind == "half_life" else "rates"
    desc = (f"a new animal of a {what} of {plural} ({model.k} animals, "
            f"{scale} scale, tau2 {model.tau2:.3g}), one pool")
    return time(est), (lo, hi, ls, hs), "prediction", desc


# --------------------------------------------------------------------------- fits

def _from_fit(p, level, fit, method, quantity):
    kin = fit.kinetics
    if quantity == "integration_window" and kin.growth_kind in _GROWTH_CURVES:
        raise DataError("'source': a fit with a growth curve has no single integration window "
                        "(the weight of past diet depends on the sampling date); refit with "
                        "growth='exponential' or give rates= and growth_rate=")
    row = fit.time_to(p, level, method).iloc[0]
    bounds = (float(row["lower"]), float(row["upper"]), str(row["lower_status"]),
              str(row["upper_status"]))
    label = f" {fit.label!r}" if getattr(fit, "label", None) else ""
    desc = f"fit{label}: {fit.model.describe()}"
    return float(row["estimate"]), bounds, str(row["method"]), desc


# --------------------------------------------------------------------------- entry points

def _tissue_time(quantity, source, p, level, *, method, rates, fractions, structure,
                 growth_rate, stderr, pop_quantity, new_moderators, time_unit):
    argname = _QUANTITIES[quantity][1]
    try:
        p = float(p)
    except (TypeError, ValueError):
        raise DataError(f"'{argname}' must be a number between 0 and 1; got {p!r}") from None
    if not 0 < p < 1:
        raise DataError(f"'{argname}' must be between 0 and 1 (0.95 = 95 %); got {p!r}")
    level = check_level(level)
    method = check_method(method, METHODS)
    if time_unit is not None and not isinstance(time_unit, str):
        raise DataError(f"'time_unit' must be a string such as 'd'; got {time_unit!r}")
    given = {"rates": rates, "fractions": fractions, "growth_rate": growth_rate,
             "stderr": stderr}
    if source is None:
        if rates is None:
            raise DataError("'source' or 'rates' is needed: a TurnoverFit, a population "
                            "estimate, or rates= (per time unit)")
        if pop_quantity is not None or new_moderators is not None:
            raise DataError("'quantity' and 'new_moderators' apply to a population source "
                            "only")
        est, bounds, m, desc = _from_rates(p, level, rates, fractions, structure,
                                           growth_rate, stderr)
        unit = time_unit
    else:
        extra = [k for k, v in given.items() if v is not None]
        if structure != "parallel":
            extra.append("structure")
        if extra:
            raise DataError(f"'{extra[0]}' applies to given rates only (source=None); the "
                            "source brings its own")
        if isinstance(source, (PopulationEstimate, RandomEffects)):
            est, bounds, m, desc = _from_population(p, level, source, pop_quantity,
                                                    new_moderators)
            unit = time_unit
        elif hasattr(source, "time_to") and hasattr(source, "kinetics"):
            if pop_quantity is not None or new_moderators is not None:
                raise DataError("'quantity' and 'new_moderators' apply to a population "
                                "source only")
            est, bounds, m, desc = _from_fit(p, level, source, method, quantity)
            unit = source.time_unit if time_unit is None else time_unit
        else:
            raise DataError("'source' must be a TurnoverFit, a PopulationEstimate or a "
                            f"RandomEffects (or None with rates=); got "
                            f"{type(source).__name__}")
    lo, hi, ls, hs = bounds
    return TissueTime(quantity=quantity, fraction=p, estimate=float(est), lower=float(lo),
                      upper=float(hi), level=level, method=m, lower_status=ls,
                      upper_status=hs, time_unit=unit, source=desc)


def equilibration_time(source=None, fraction=0.95, level=0.95, *, method="profile",
                       rates=None, fractions=None, structure="parallel", growth_rate=None,
                       stderr=None, quantity=None, new_moderators=None,
                       time_unit=None) -> TissueTime:
    r"""Time a tissue takes to make ``fraction`` of a diet change, with its interval.

    The root :math:`\tau_p` of :math:`1 - F(\tau) = 1 - p` (:math:`1-F` the step response:
    :math:`\sum_i f_i e^{-\kappa_i\tau}` for parallel pools, :math:`(k_1 e^{-k_2\tau} - k_2
    e^{-k_1\tau})/(k_1 - k_2)` for the chain), computed by
    :func:`isoturnover.quantities.time_to` (as :meth:`TurnoverFit.time_to
    <isoturnover.TurnoverFit.time_to>` does). One pool :math:`-\ln(1-p)/\kappa`: about 4.32
    half-lives for p = 0.95 (:math:`\ln 20/\ln 2`). With exponential growth
    :math:`\kappa_i = k_i + k_g` (incorporation rates).

    Parameters
    ----------
    source : TurnoverFit, PopulationEstimate, RandomEffects or None
        A fit (estimate and interval from ``fit.time_to(fraction, level, method)``: the
        uncertainty of the fitted animal's parameters); a population estimate of
        half-lives or rates (a new animal: the prediction interval of the half-life, one
        pool); or None with ``rates=``.
    fraction : float, default=0.95
        Fraction p of the change, in (0, 1).
    level : float, default=0.95
        Confidence level (prediction level for a new animal).
    method : {"profile", "asymptotic", "bootstrap", "mcmc"}, default="profile"
        Interval method of a fit source (see ``TurnoverFit.time_to``).
    rates : float or sequence of float, optional
        Rates per time unit (incorporation rates, or catabolic rates with
        ``growth_rate``): one per parallel pool, or the chain's two steps.
    fractions : sequence of float, optional
        Pool fractions summing to 1 (parallel pools; not needed for one pool).
    structure : {"parallel", "chain"}, default="parallel"
        Structure of given rates.
    growth_rate : float, optional
        Specific growth rate :math:`k_g` (per time unit) added to every given rate.
    stderr : mapping, optional
        Standard errors of given rates, ``{"k1": …, "f1": …, "k_growth": …}`` (the last
        fraction is 1 minus the others and takes none), taken as independent. The
        interval is then the delta method on the log scale,
        :math:`\hat\tau\exp(\pm z\,\sigma_\tau/\hat\tau)` with
        :math:`\sigma_\tau^2 = \sum_j (\partial\tau/\partial\theta_j)^2 s_j^2` and the
        gradient by implicit differentiation of the step response (exact, not numerical).
    quantity : {"half_life", "rate", "log_half_life", "log_rate"}, optional
        What a population source holds: read from a PopulationEstimate's ``quantity``
        (half-lives or rates); required for a RandomEffects (``"log_half_life"``: natural
        logs of half-lives).
    new_moderators : DataFrame, optional
        Covariates of the new animal for a population source with moderators.
    time_unit : str, optional
        Unit of time for the table and summary (a fit gives its own).

    Returns
    -------
    TissueTime
        ``estimate, lower, upper, level, method, lower_status, upper_status``, ``table()``
        and ``summary()`` (with the animal-care caution).

    Raises
    ------
    DataError
        A fraction outside (0, 1), a bad level or method, bad rates or fractions, keywords
        that do not apply to the source, or a source of another type.

    Examples
    --------
    >>> import isoturnover as iso
    >>> r = iso.equilibration_time(rates=0.05)  # one pool, k = 0.05 /d
    >>> round(r.estimate, 2)                     # -ln(0.05)/0.05
    59.91
    """
    return _tissue_time("equilibration_time", source, fraction, level, method=method,
                        rates=rates, fractions=fractions, structure=structure,
                        growth_rate=growth_rate, stderr=stderr, pop_quantity=quantity,
                        new_moderators=new_moderators, time_unit=time_unit)


def integration_window(source=None, share=0.5, level=0.95, *, method="profile", rates=None,
                       fractions=None, structure="parallel", growth_rate=None, stderr=None,
                       quantity=None, new_moderators=None, time_unit=None) -> TissueTime:
    r"""Time before sampling whose diet makes ``share`` of the tissue's value, with interval.

    The window :math:`s_q` solves :math:`\int_0^{s_q} w(s)\,ds = q` for the weight of past
    diet in the tissue's value (:func:`window_weight`),
    :math:`w(s) = \sum_i f_i\kappa_i e^{-\kappa_i s}` for parallel pools and
    :math:`k_1 k_2 (e^{-k_2 s} - e^{-k_1 s})/(k_1 - k_2)` for the chain. Because
    :math:`\int_0^s w = F(s)` (the weight is the derivative of the step response), the
    window equals the equilibration time at :math:`p = q`, and is computed by the same
    :func:`isoturnover.quantities.time_to`; one pool :math:`-\ln(1-q)/\kappa` (the
    half-life for q = 0.5). Intervals come from the same sources as
    :func:`equilibration_time`. A fit with a growth curve has no single window (the
    model is time-varying) and raises.

    Parameters
    ----------
    source : TurnoverFit, PopulationEstimate, RandomEffects or None
        As :func:`equilibration_time`.
    share : float, default=0.5
        Share q of the tissue's value, in (0, 1).
    level : float, default=0.95
        Confidence level (prediction level for a new animal).
    method : {"profile", "asymptotic", "bootstrap", "mcmc"}, default="profile"
        Interval method of a fit source.
    rates : float or sequence of float, optional
        Given rates per time unit (as :func:`equilibration_time`).
    fractions : sequence of float, optional
        Pool fractions of given rates, summing to 1.
    structure : {"parallel", "chain"}, default="parallel"
        Structure of given rates.
    growth_rate : float, optional
        Specific growth rate added to every given rate (per time unit).
    stderr : mapping, optional
        Standard errors of given rates (delta method on the log scale, as
        :func:`equilibration_time`).
    quantity : {"half_life", "rate", "log_half_life", "log_rate"}, optional
        What a population source holds.
    new_moderators : DataFrame, optional
        Covariates of the new animal for a population source with moderators.
    time_unit : str, optional
        Unit of time for the table and summary.

    Returns
    -------
    TissueTime
        With ``quantity="integration_window"`` and ``fraction`` = ``share``.

    Raises
    ------
    DataError
        As :func:`equilibration_time`, and for a fit with a growth curve.

    Examples
    --------
    >>> import isoturnover as iso
    >>> round(iso.integration_window(rates=[0.3, 0.03], fractions=[0.5, 0.5]).estimate, 3)
    6.008
    """
    return _tissue_time("integration_window", source, share, level, method=method,
                        rates=rates, fractions=fractions, structure=structure,
                        growth_rate=growth_rate, stderr=stderr, pop_quantity=quantity,
                        new_moderators=new_moderators, time_unit=time_unit)


def window_weight(s, rates, fractions=None, structure="parallel", growth_rate=None):
    r"""Weight of the diet eaten a time ``s`` before sampling in the tissue's value.

    Parallel pools :math:`w(s) = \sum_i f_i\kappa_i e^{-\kappa_i s}`; the chain
    :math:`w(s) = k_1 k_2 (e^{-k_2 s} - e^{-k_1 s})/(k_1 - k_2)`, evaluated in the stable
    form :math:`k_1 k_2\, s\, e^{-bs}\psi((a - b)s)` (:math:`a \ge b` the rates,
    :math:`\psi(x) = (1-e^{-x})/x`; at :math:`k_1 = k_2` the limit :math:`k^2 s e^{-ks}`),
    i.e. :math:`-\partial\Phi_c/\partial\tau` of :func:`isoturnover.responses.chain_terms`.
    It integrates to 1 over :math:`s \ge 0`; 0 for :math:`s < 0`.

    Parameters
    ----------
    s : float or array-like
        Time before sampling (per the rates' time unit).
    rates, fractions, structure, growth_rate
        As :func:`equilibration_time` (given rates).

    Returns
    -------
    ndarray
        :math:`w(s)` (per time unit), shaped like ``s`` (at least 1-d).
    """
    kin, theta = _given_kinetics(rates, fractions, structure, growth_rate)
    try:
        s = np.atleast_1d(np.asarray(s, dtype=float))
    except (TypeError, ValueError):
        raise DataError(f"'s' must be a number or an array of numbers; got {s!r}") from None
    x = np.maximum(s, 0.0)
    k = theta[kin.rate_index]
    if kin.structure == "chain":
        w = -chain_terms(x, float(k[0]), float(k[1]))[3]
    else:
        if kin.growth_rate_index is not None:
            k = k + theta[kin.growth_rate_index]
        f = theta[kin.fraction_index]
        w = np.sum((f * k)[:, None] * np.exp(-np.outer(k, x.ravel())), axis=0).reshape(x.shape)
    return np.where(s >= 0, w, 0.0)
