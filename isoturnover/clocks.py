r"""Isotopic clocks: how long ago did a field animal change diet?

One animal's tissues, sampled once, and the tissues' turnover kinetics (from captive work)
date a diet change. Each tissue follows

.. math::

    \delta_j(t) = \delta_{new,j} + (\delta_{old,j} - \delta_{new,j})\,R_j(t),

with :math:`R_j` the tissue's remaining fraction of a step change,
:math:`\sum_i f_i e^{-k_i t}` for parallel pools and the two-step response of the chain
(:meth:`isoturnover.kinetics.TurnoverKinetics.remaining`; a lag is not applied).

* **One tissue**, old and new equilibrium values known: :math:`t = -\ln[(\delta -
  \delta_{new})/(\delta_{old} - \delta_{new})]/k` for one pool (by hand: invert the model).
* **Two or more tissues**, old diet unknown: the tissues' offsets on the old diet are
  assumed equal to those on the new (Phillips & Eldridge 2006, *Oecologia* 147:195–203,
  journal details from memory), so :math:`\delta_{old,j} = \delta_{new,j} + \Delta` with
  one unknown :math:`\Delta`. For two one-pool tissues A, B the data fix
  :math:`(\delta_B - \delta_{new,B})/(\delta_A - \delta_{new,A}) = e^{(k_A - k_B)t}`, so
  :math:`t = \ln[(\delta_B - \delta_{new,B})/(\delta_A - \delta_{new,A})]/(k_A - k_B)`
  (by hand; symmetric in the labels A, B; the idea of dating by two tissues of different
  turnover: Klaassen et al. 2010, *J. Avian Biol.* 41:339–346, from memory).

Estimation is by likelihood over :math:`t \ge 0`. Each tissue's value is Gaussian with
variance

.. math::

    s_j^2(t) = \sigma_j^2 + \Delta_j^2\,[g_j(t)^T C_j\, g_j(t) + (\partial R_j/\partial u)^2
    \tau_j^2],

:math:`\sigma_j` the measurement sd, :math:`g_j = \partial R_j/\partial\theta` (central
differences) with :math:`C_j` the kinetics' covariance (a fit's, or independent standard
errors of given rates), and the **between-animal spread** of a new animal's rates: all rates
of tissue j scaled by :math:`e^{u_j}`, :math:`u_j \sim N(0, \tau_j^2)` independent between
tissues, added by the **delta method** (:math:`\partial R/\partial u = \sum_i k_i\,\partial
R/\partial k_i`). With :math:`\Delta` unknown it is profiled out for each t by iteratively
reweighted least squares (for fixed weights the model is linear in :math:`\Delta`: closed
form). The interval is :math:`\{t : \ell(t) \ge \hat\ell - \chi^2_{1,level}/2\}` (profile
likelihood), its ends by a bracketed root (Brent) between grid points; the outermost
crossings are taken, so a likelihood with two humps gives the hull. The limit t → ∞ is
taken with every tissue at its new value (:math:`\Delta` bounded): with the old diet unknown
the profile at large finite t lets :math:`\Delta` grow like :math:`e^{kt}` (implausible old
values) to keep the slowest tissue off its new value, so the grid's curve need not approach
that limit; the status ``equilibrated`` reads the limit. The log-variance term
of the Gaussian likelihood is kept; where the kinetics' uncertainty makes the variance
depend on t, the estimate moves slightly from the closed forms above (exact without it).

Statuses: ``ok``; ``too_early`` (the likelihood at t = 0 is inside the interval: the change
is not yet detectable, lower = 0); ``equilibrated`` (the likelihood as t → ∞ is inside: older
than the clock can tell, upper = inf; with the old diet unknown also when t = 0 is inside,
since tissues at their new values then fit "no change" as well); ``uninformative`` (both
ends inside with the old values known: old and new within the errors); ``inconsistent`` (the
tissues disagree beyond their errors: goodness-of-fit :math:`\chi^2` at the optimum with
p < 0.01, when there are more tissues than unknowns). Rates of two tissues within a factor
1.5 (mean residence times) give a warning: too close for two-tissue dating.

Field sampling of animals needs the approval of the local animal-care authority (human hair
or blood: a human-research ethics board); these estimates support that process and do not
replace it (:data:`isoturnover.conventions.CAUTION`).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import optimize

from .conventions import CAUTION, check_choice, check_level, unit_word
from .errors import DataError, DataWarning
from .kinetics import MAX_POOLS, TurnoverKinetics
from .lazystats import stats
from .population import PopulationEstimate, RandomEffects
from .results import TurnoverFit

__all__ = ["ClockResult", "time_since_switch", "time_since_switch_table", "plot_clock",
           "CLOCK_STATUSES"]

#: Status of a clock estimate (module docstring).
CLOCK_STATUSES = ("ok", "too_early", "equilibrated", "uninformative", "inconsistent")
#: Rates (inverse mean residence times) of two tissues closer than this factor: a warning.
CLOSE_RATES = 1.5
#: p-value of the goodness-of-fit χ² below which the tissues are called inconsistent.
INCONSISTENT_P = 0.01
_GRID = 800
_H = 1e-5


@dataclass(frozen=True)
class _Tissue:
    """One tissue's kinetics: kinetics object, θ, covariance of θ, spread τ² of ln k."""

    name: str
    kin: TurnoverKinetics
    theta: np.ndarray
    cov: np.ndarray
    tau2: float
    time_unit: str | None

    def remaining(self, t):
        return np.asarray(self.kin.remaining(t, self.theta), dtype=float)

    def mean_residence_time(self) -> float:
        k = self.theta[self.kin.rate_index]
        if self.kin.structure == "chain":
            return float(np.sum(1.0 / k))
        if self.kin.growth_rate_index is not None:
            k = k + self.theta[self.kin.growth_rate_index]
        return float(np.sum(self.theta[self.kin.fraction_index] / k))

    def variance_of_r(self, t):
        """Var R(t) from the kinetics' covariance (delta method) and the spread τ²."""
        var = np.zeros_like(t)
        idx = [i for i in range(self.theta.size) if self.cov[i, i] > 0]
        if idx:
            g = np.empty((len(idx), t.size))
            for a, i in enumerate(idx):
                h = _H * max(abs(self.theta[i]), 1e-8)
                up, dn = self.theta.copy(), self.theta.copy()
                up[i] += h
                dn[i] -= h
                g[a] = (self.kin.remaining(t, up) - self.kin.remaining(t, dn)) / (2 * h)
            c = self.cov[np.ix_(idx, idx)]
            var += np.einsum("an,ab,bn->n", g, c, g)
        if self.tau2 > 0:
            up, dn = self.theta.copy(), self.theta.copy()
            ri = list(self.kin.rate_index)
            up[ri] *= math.exp(_H)
            dn[ri] *= math.exp(-_H)
            du = (self.kin.remaining(t, up) - self.kin.remaining(t, dn)) / (2 * _H)
            var += du * du * self.tau2
        return var


@dataclass(frozen=True)
class ClockResult:
    """Time since one animal's diet change (made by :func:`time_since_switch`); read-only.

    Parameters
    ----------
    estimate, lower, upper : float
        Maximum-likelihood time since the change and the profile-likelihood interval, in
        :attr:`time_unit` (``lower`` 0 when ``too_early``, ``upper`` inf when
        ``equilibrated``; ``estimate`` inf when the likelihood is highest as t → ∞).
    level : float
    status : str
        One of :data:`CLOCK_STATUSES`.
    reason : str
        Why the status (empty for ``ok``).
    tissues : tuple of str
    measured, sd, new, old : dict
        Per tissue: measured δ (‰), measurement sd (‰), new-diet equilibrium, old-diet
        equilibrium (known, or ``new + offset`` with the fitted offset).
    predicted : dict
        Per tissue: δ predicted at the estimate (‰).
    offset : float
        The old − new offset Δ at the estimate (NaN when the old values are known).
    chi2, dof, p_value : float
        Goodness of fit at the optimum (dof = tissues − unknowns; NaN p-value when dof 0).
    t, loglik : ndarray
        The log-likelihood profile over a grid of t (for plotting).
    threshold : float
        :math:`\\chi^2_{1,level}/2`: the drop that bounds the interval.
    loglik_max : float
        The maximum of the log-likelihood (at the estimate).
    loglik_inf : float
        Its limit as t → ∞ with every tissue at its new-diet value.
    time_unit : str
    warnings : tuple of str
    caution : str
        :data:`isoturnover.conventions.CAUTION`.
    """

    estimate: float
    lower: float
    upper: float
    level: float
    status: str
    reason: str
    tissues: tuple
    measured: dict
    sd: dict
    new: dict
    old: dict
    predicted: dict
    offset: float
    chi2: float
    dof: int
    p_value: float
    t: np.ndarray = field(repr=False)
    loglik: np.ndarray = field(repr=False)
    threshold: float = 0.0
    loglik_max: float = math.nan
    loglik_inf: float = math.nan
    time_unit: str = "d"
    warnings: tuple = ()
    caution: str = CAUTION

    def table(self) -> pd.DataFrame:
        """One row per tissue with the animal's estimate.

        Returns
        -------
        DataFrame
            Columns tissue, measured, sd, new, old, predicted, estimate, lower, upper,
            level, status, time_unit.
        """
        rows = [{"tissue": j, "measured": self.measured[j], "sd": self.sd[j],
                 "new": self.new[j], "old": self.old[j], "predicted": self.predicted[j],
                 "estimate": self.estimate, "lower": self.lower, "upper": self.upper,
                 "level": self.level, "status": self.status, "time_unit": self.time_unit}
                for j in self.tissues]
        return pd.DataFrame(rows)

    def summary(self) -> str:
        """Printed summary: estimate, interval, status and reason, warnings, the caution.

        Returns
        -------
        str
        """
        unit = unit_word(self.time_unit)
        lines = [f"Time since the diet change ({', '.join(self.tissues)}): "
                 f"{_fmt(self.estimate)} {unit}, {self.level:.0%} profile-likelihood "
                 f"interval {_fmt(self.lower)} to {_fmt(self.upper)} {unit}",
                 f"status: {self.status}" + (f" ({self.reason})" if self.reason else "")]
        if self.dof > 0:
            lines.append(f"goodness of fit: chi2 {self.chi2:.3g} on {self.dof} df, "
                         f"p = {self.p_value:.3g}")
        lines += [f"warning: {w}" for w in self.warnings]
        lines.append(self.caution)
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.summary()


def _fmt(x: float) -> str:
    return "inf" if math.isinf(x) else f"{x:.4g}"


# --------------------------------------------------------------------------- inputs

def _number(what, v):
    try:
        x = float(v)
    except (TypeError, ValueError):
        raise DataError(f"{what} must be a number; got {v!r}") from None
    if not math.isfinite(x):
        raise DataError(f"{what} must be finite; got {v!r}")
    return x


def _mapping(name, m, tissues):
    if not isinstance(m, dict):
        raise DataError(f"'{name}' must map tissue -> value; got {type(m).__name__}")
    missing = [str(j) for j in tissues if j not in m]
    if missing:
        raise DataError(f"'{name}' has no value for tissue(s) {', '.join(missing)}")
    return {j: _number(f"'{name}'[{j!r}]", m[j]) for j in tissues}


def _given(name, spec):
    """A _Tissue's pieces from a dict with rates, fractions, structure, stderr, time_unit."""
    known = {"rates", "fractions", "structure", "stderr", "time_unit"}
    extra = sorted(set(spec) - known)
    if extra:
        raise DataError(f"'kinetics'[{name!r}] has unknown key(s) {', '.join(extra)}; "
                        f"allowed: {', '.join(sorted(known))}")
    if "rates" not in spec:
        raise DataError(f"'kinetics'[{name!r}] needs 'rates' (per time unit)")
    structure = check_choice(f"'kinetics'[{name!r}]['structure']",
                             spec.get("structure", "parallel"), ("parallel", "chain"))
    try:
        k = np.atleast_1d(np.asarray(spec["rates"], dtype=float))
    except (TypeError, ValueError):
        raise DataError(f"'kinetics'[{name!r}]['rates'] must be numbers; got "
                        f"{spec['rates']!r}") from None
    if k.ndim != 1 or k.size == 0 or not np.all(np.isfinite(k) & (k > 0)):
        raise DataError(f"'kinetics'[{name!r}]['rates'] must be finite numbers > 0; got "
                        f"{spec['rates']!r}")
    if structure == "chain" and k.size != 2:
        raise DataError(f"'kinetics'[{name!r}]: the chain has 2 rates; got {k.size}")
    if k.size > MAX_POOLS:
        raise DataError(f"'kinetics'[{name!r}] has {k.size} pools; at most {MAX_POOLS}")
    kin = TurnoverKinetics(int(k.size), structure=structure)
    theta = np.zeros(kin.n_params)
    theta[kin.param_names.index("delta_eq")] = 1.0
    theta[kin.rate_index] = k
    if kin.fraction_index:
        fr = spec.get("fractions", [1.0] if k.size == 1 else None)
        if fr is None:
            raise DataError(f"'kinetics'[{name!r}] needs 'fractions' with {k.size} pools")
        f = np.atleast_1d(np.asarray(fr, dtype=float))
        if f.shape != k.shape or not np.all((f >= 0) & (f <= 1)) or abs(f.sum() - 1) > 1e-6:
            raise DataError(f"'kinetics'[{name!r}]['fractions'] must give one fraction in "
                            f"[0, 1] per rate, summing to 1; got {fr!r}")
        theta[kin.fraction_index] = f
    elif spec.get("fractions") is not None:
        raise DataError(f"'kinetics'[{name!r}]: 'fractions' does not apply to the chain")
    cov = np.zeros((kin.n_params, kin.n_params))
    if spec.get("stderr") is not None:
        se = np.atleast_1d(np.asarray(spec["stderr"], dtype=float))
        if se.shape != k.shape or not np.all(np.isfinite(se) & (se >= 0)):
            raise DataError(f"'kinetics'[{name!r}]['stderr'] must give one standard error "
                            f">= 0 per rate; got {spec['stderr']!r}")
        cov[kin.rate_index, kin.rate_index] = se ** 2
    return kin, theta, cov, spec.get("time_unit")


def _tau2(name, pop):
    """Variance of a new animal's ln rate from a population argument."""
    if pop is None:
        return 0.0
    if isinstance(pop, PopulationEstimate):
        if pop.scale != "log":
            raise DataError(f"'population' for {name!r}: the estimate must be on the log scale "
                            "(population_estimate(..., scale='log'))")
        pop = pop.model
    if isinstance(pop, RandomEffects):
        se = float(pop.predict(None)["stderr"].iloc[0])
        return float(pop.tau2) + se * se
    x = _number(f"'population' for {name!r} (variance of a new animal's ln rate)", pop)
    if x < 0:
        raise DataError(f"'population' for {name!r} must be >= 0; got {x!r}")
    return x


def _tissues(kinetics, names, population):
    if not isinstance(kinetics, dict):
        raise DataError(f"'kinetics' must map tissue -> TurnoverFit or dict of rates; got "
                        f"{type(kinetics).__name__}")
    out = []
    for j in names:
        if j not in kinetics:
            raise DataError(f"'kinetics' has no entry for tissue {j!r}")
        src = kinetics[j]
        if isinstance(src, TurnoverFit):
            kin, theta = src.kinetics, np.array(src.state.theta, dtype=float)
            cov = np.array(src.covar, dtype=float)
            cov[~np.isfinite(cov)] = 0.0
            unit = src.time_unit
        elif isinstance(src, dict):
            kin, theta, cov, unit = _given(j, src)
        else:
            raise DataError(f"'kinetics'[{j!r}] must be a TurnoverFit or a dict with 'rates'; "
                            f"got {type(src).__name__}")
        pop = population.get(j) if isinstance(population, dict) else population
        out.append(_Tissue(j, kin, theta, cov, _tau2(j, pop), unit))
    units = {t.time_unit for t in out if t.time_unit is not None}
    if len(units) > 1:
        raise DataError(f"'kinetics' mixes time units {', '.join(sorted(units))}; give all "
                        "tissues' kinetics in one unit")
    return out, (units.pop() if units else "d")


def _values(values, sd):
    if not isinstance(values, dict) or not values:
        raise DataError("'values' must map tissue -> measured δ (or (value, sd)); got "
                        f"{values!r}")
    y, s = {}, {}
    for j, v in values.items():
        if isinstance(v, (tuple, list)):
            if len(v) != 2:
                raise DataError(f"'values'[{j!r}] must be a number or (value, sd); got {v!r}")
            y[j] = _number(f"'values'[{j!r}]", v[0])
            s[j] = _number(f"the sd of 'values'[{j!r}]", v[1])
        else:
            y[j] = _number(f"'values'[{j!r}]", v)
            if sd is None:
                raise DataError(f"no sd for tissue {j!r}: give 'values' as (value, sd) or 'sd'")
            sj = sd.get(j) if isinstance(sd, dict) else sd
            if sj is None:
                raise DataError(f"'sd' has no value for tissue {j!r}")
            s[j] = _number(f"'sd' for {j!r}", sj)
        if not s[j] > 0:
            raise DataError(f"the sd of tissue {j!r} must be > 0 (‰); got {s[j]!r}")
    return y, s


# --------------------------------------------------------------------------- likelihood

def _loglik(t, tissues, y, s, new, old, max_offset=math.inf):
    """ℓ(t) (profiled over the offset when ``old`` is None), its offset and χ² terms."""
    t = np.atleast_1d(np.asarray(t, dtype=float))
    r = np.array([tk.remaining(t) for tk in tissues])          # (tissues, t)
    vr = np.array([tk.variance_of_r(t) for tk in tissues])
    yy = np.array([y[tk.name] - new[tk.name] for tk in tissues])[:, None]
    s2 = np.array([s[tk.name] ** 2 for tk in tissues])[:, None]
    if old is not None:
        d = np.array([old[tk.name] - new[tk.name] for tk in tissues])[:, None]
        off = np.full(t.shape, np.nan)
    else:
        w = np.broadcast_to(1.0 / s2, r.shape)
        off = np.zeros(t.shape)
        for _ in range(30):  # iteratively reweighted least squares in Δ
            den = np.sum(w * r * r, axis=0)
            new_off = np.where(den > 0, np.sum(w * r * yy, axis=0) / np.where(den > 0, den, 1),
                               0.0)
            new_off = np.clip(new_off, -max_offset, max_offset)
            done = np.allclose(new_off, off, rtol=1e-10, atol=1e-12)
            off = new_off
            w = 1.0 / (s2 + off ** 2 * vr)
            if done:
                break
        d = off[None, :]
    var = s2 + d ** 2 * vr
    z2 = (yy - d * r) ** 2 / var
    ll = -0.5 * np.sum(z2 + np.log(var), axis=0)
    return ll, off, np.sum(z2, axis=0)


def _loglik_inf(tissues, y, s, new):
    """ℓ as t → ∞: every tissue at its new-diet value."""
    return float(-0.5 * sum((y[tk.name] - new[tk.name]) ** 2 / s[tk.name] ** 2
                            + math.log(s[tk.name] ** 2) for tk in tissues))


def _grid_end(tissues):
    """A time by which every tissue's remaining fraction is below about 1e-7."""
    end = 0.0
    for tk in tissues:
        k = tk.theta[tk.kin.rate_index]
        kmin = float(k.min()) * math.exp(-3.0 * math.sqrt(tk.tau2))
        end = max(end, 2.0 * math.log(1e7) / kmin)
    return end


def time_since_switch(values, kinetics, *, new, old=None, sd=None, population=None,
                      level=0.95, max_offset=None) -> ClockResult:
    r"""Time since one animal's diet changed, from its tissues' δ values.

    Model, likelihood and statuses: see the module :mod:`isoturnover.clocks`.

    Parameters
    ----------
    values : dict
        Tissue → measured δ (‰), a number or ``(value, sd)``.
    kinetics : dict
        Tissue → :class:`~isoturnover.TurnoverFit` (its rates, fractions and covariance), or
        a dict with ``rates`` (per time unit), ``fractions`` (parallel pools), optional
        ``structure`` (``"parallel"`` or ``"chain"``), ``stderr`` (of the rates,
        independent) and ``time_unit``.
    new : dict
        Tissue → equilibrium δ on the new diet (‰).
    old : dict, optional
        Tissue → equilibrium δ on the old diet (‰). Without it (two or more tissues) the old
        values are ``new + Δ`` with one unknown Δ, profiled out.
    sd : float or dict, optional
        Measurement sd (‰) of the values given as numbers.
    population : float, RandomEffects, PopulationEstimate or dict, optional
        Between-animal spread of a new animal's rates: the variance τ² of ln k (a number), or
        a random-effects / log-scale population estimate of log half-lives or log rates
        (τ² + SE² of its mean); a dict gives one per tissue. Added by the delta method.
    level : float, default=0.95
    max_offset : float, optional
        With ``old`` unknown: the largest plausible ``|old - new|`` (‰). The profiled offset
        is kept within it (for fixed weights the likelihood is quadratic in Δ, so the
        constrained optimum is the clipped one); without it old values far beyond any diet
        can keep a slow tissue off its new value at large t and widen the upper bound.

    Returns
    -------
    ClockResult
    """
    level = check_level(level)
    y, s = _values(values, sd)
    names = list(y)
    new = _mapping("new", new, names)
    if old is not None:
        old = _mapping("old", old, names)
    elif len(names) < 2:
        raise DataError("'old' is needed with one tissue (the old diet's equilibrium value); "
                        "without it give two or more tissues of different turnover")
    tissues, unit = _tissues(kinetics, names, population)
    if max_offset is None:
        max_offset = math.inf
    else:
        max_offset = _number("'max_offset' (‰)", max_offset)
        if not max_offset > 0 or old is not None:
            raise DataError(f"'max_offset' must be > 0 (‰) and applies with 'old' unknown; got "
                            f"{max_offset!r}" + (" with 'old' given" if old is not None else ""))
    notes = []
    mrt = {tk.name: tk.mean_residence_time() for tk in tissues}
    for a in range(len(names)):
        for b in range(a + 1, len(names)):
            ra = max(mrt[names[a]], mrt[names[b]]) / min(mrt[names[a]], mrt[names[b]])
            if ra < CLOSE_RATES:
                notes.append(f"tissues {names[a]!r} and {names[b]!r} turn over within a "
                             f"factor {ra:.2f} (< {CLOSE_RATES}) of each other: too close for "
                             "two-tissue dating")
    for n in notes:
        warnings.warn(n, DataWarning, stacklevel=2)

    end = _grid_end(tissues)
    tg = np.concatenate([[0.0], np.geomspace(end * 1e-6, end, _GRID)])
    ll, _, _ = _loglik(tg, tissues, y, s, new, old, max_offset)
    ll_inf = _loglik_inf(tissues, y, s, new)

    def f(t):
        return -float(_loglik(t, tissues, y, s, new, old, max_offset)[0][0])

    i = int(np.argmax(ll))
    lo_t, hi_t = tg[max(i - 1, 0)], tg[min(i + 1, tg.size - 1)]
    res = optimize.minimize_scalar(f, bounds=(lo_t, hi_t), method="bounded",
                                   options={"xatol": 1e-10 * hi_t})
    est, llmax = (float(res.x), -float(res.fun)) if -res.fun >= ll[i] else (tg[i], ll[i])
    if ll_inf > llmax + 1e-9:
        est, llmax = math.inf, ll_inf
    thr = float(stats.chi2.ppf(level, 1)) / 2.0
    cut = llmax - thr

    def g(t):
        return -f(t) - cut

    inside = ll >= cut
    first, last = int(np.argmax(inside)), int(tg.size - 1 - np.argmax(inside[::-1]))
    early = bool(ll[0] >= cut)
    late = bool(ll_inf >= cut)
    lower = 0.0 if early else float(optimize.brentq(g, tg[first - 1], tg[first], xtol=1e-12))
    if late or last == tg.size - 1:  # the grid's end is at ℓ∞ within rounding
        late, upper = True, math.inf
    else:
        upper = float(optimize.brentq(g, tg[last], tg[last + 1], xtol=1e-12))

    t_at = est if math.isfinite(est) else float(tg[-1])
    _, off, chi2 = _loglik(t_at, tissues, y, s, new, old, max_offset)
    off, chi2 = float(off[0]), float(chi2[0])
    dof = len(names) - 1 - (0 if old is not None else 1)
    p = float(stats.chi2.sf(chi2, dof)) if dof > 0 else math.nan
    old_out = old if old is not None else {j: new[j] + (off if math.isfinite(est) else math.nan)
                                           for j in names}
    pred = {}
    for tk in tissues:
        dj = (old[tk.name] - new[tk.name]) if old is not None else off
        pred[tk.name] = float(new[tk.name] + dj * tk.remaining(np.array([t_at]))[0])

    if dof > 0 and p < INCONSISTENT_P:
        status, reason = "inconsistent", (f"the tissues disagree beyond their errors (chi2 "
                                          f"{chi2:.3g} on {dof} df, p = {p:.2g})")
    elif early and late and old is None:
        status, reason = "equilibrated", ("the tissues are at their new-diet values: the change "
                                          "is older than the clock can tell, or (the old diet "
                                          "being unknown) too small to see")
    elif early and late:
        status, reason = "uninformative", ("the likelihood is flat from t = 0 to t -> inf: the "
                                           "old and new values are within the errors")
    elif early:
        status, reason = "too_early", ("t = 0 is inside the interval: the change is not yet "
                                       "detectable given the errors")
    elif late:
        status, reason = "equilibrated", ("the likelihood as t -> inf is inside the interval: "
                                          "the tissues are at (or near) their new-diet values")
    else:
        status, reason = "ok", ""
    return ClockResult(estimate=float(est), lower=lower, upper=upper, level=level,
                       status=status, reason=reason, tissues=tuple(names), measured=y, sd=s,
                       new=new, old=dict(old_out), predicted=pred,
                       offset=off if old is None else math.nan, chi2=chi2, dof=dof,
                       p_value=p, t=tg, loglik=ll, threshold=thr, loglik_max=llmax,
                       loglik_inf=ll_inf, time_unit=unit,
                       warnings=tuple(notes))


# --------------------------------------------------------------------------- batch

def time_since_switch_table(frame, kinetics, *, new, old=None, sd=None, population=None,
                            level=0.95, max_offset=None) -> pd.DataFrame:
    """:func:`time_since_switch` for every animal of a table of field samples.

    Parameters
    ----------
    frame : DataFrame
        One row per animal and tissue: columns ``subject``, ``tissue``, ``value`` (‰) and
        optionally ``sd`` (‰; else ``sd=``). Not modified.
    kinetics, new, old, sd, population, level, max_offset
        As :func:`time_since_switch` (one set for all animals).

    Returns
    -------
    DataFrame
        One row per animal (in order of first appearance): subject, n_tissues, estimate,
        lower, upper, level, status, reason, time_unit.
    """
    if not isinstance(frame, pd.DataFrame):
        raise DataError(f"'frame' must be a DataFrame; got {type(frame).__name__}")
    missing = [c for c in ("subject", "tissue", "value") if c not in frame.columns]
    if missing:
        raise DataError(f"'frame' has no column(s) {', '.join(missing)} (needs subject, "
                        "tissue, value[, sd])")
    rows = []
    for subject, grp in frame.groupby("subject", sort=False):
        if grp["tissue"].duplicated().any():
            raise DataError(f"'frame': subject {subject!r} has a tissue twice "
                            f"(rows {', '.join(str(i) for i in grp.index)})")
        if "sd" in frame.columns:
            vals = {t: (v, e) for t, v, e in zip(grp["tissue"], grp["value"], grp["sd"])}
        else:
            vals = dict(zip(grp["tissue"], grp["value"]))
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", DataWarning)
                r = time_since_switch(vals, kinetics, new=new, old=old, sd=sd,
                                      population=population, level=level,
                                      max_offset=max_offset)
        except DataError as e:
            raise DataError(f"'frame', subject {subject!r}: {e}") from None
        rows.append({"subject": subject, "n_tissues": len(vals), "estimate": r.estimate,
                     "lower": r.lower, "upper": r.upper, "level": r.level,
                     "status": r.status, "reason": r.reason, "time_unit": r.time_unit})
    return pd.DataFrame(rows, columns=["subject", "n_tissues", "estimate", "lower", "upper",
                                       "level", "status", "reason", "time_unit"])


# --------------------------------------------------------------------------- figure

def plot_clock(result, ax=None):
    """The log-likelihood over t with the interval and the estimate.

    The estimate is not drawn for the statuses ``equilibrated`` and ``uninformative`` (the
    likelihood is flat towards t → ∞, so where its maximum falls carries no information);
    an open upper bound is marked, and the limit t → ∞ when it is within reach.

    Parameters
    ----------
    result : ClockResult
    ax : matplotlib Axes, optional

    Returns
    -------
    matplotlib Axes
    """
    if not isinstance(result, ClockResult):
        raise DataError(f"'result' must be a ClockResult; got {type(result).__name__}")
    import matplotlib.pyplot as plt

    if ax is None:
        _, ax = plt.subplots(figsize=(5.5, 3.5), layout="constrained")
    rel = result.loglik - result.loglik_max
    near = np.flatnonzero(rel >= -4 * result.threshold)  # the region around the interval
    keep = slice(max(int(near[0]) - 20, 0), int(near[-1]) + 40) if near.size else slice(None)
    ax.plot(result.t[keep], rel[keep], color="0.2", lw=1.5, label="log-likelihood")
    ax.axhline(-result.threshold, color="0.5", ls=":", lw=1,
               label=f"{result.level:.0%} cut-off")
    xmax = float(result.t[keep].max())
    hi = result.upper if math.isfinite(result.upper) else xmax
    ax.axvspan(result.lower, hi, color="tab:blue", alpha=0.15, label="interval")
    # with the likelihood flat towards t -> inf the maximum's place says nothing: not drawn
    if math.isfinite(result.estimate) and result.status not in ("equilibrated",
                                                                 "uninformative"):
        ax.axvline(result.estimate, color="tab:blue", lw=1.5, label="estimate")
    if not math.isfinite(result.upper):
        ax.annotate("upper bound open →", (xmax, -result.threshold), ha="right", va="bottom",
                    fontsize=8)
    rel_inf = result.loglik_inf - result.loglik_max
    if rel_inf >= -4 * result.threshold:
        ax.plot([xmax], [rel_inf], marker=">", color="tab:red", ls="none",
                label="t → ∞ (tissues at new values)")
    # the view: the interval with a margin (a long flat tail would squash it), and the
    # likelihood down to a little below the cut-off
    if math.isfinite(result.upper) and math.isfinite(result.lower):
        right = min(xmax, result.upper + 1.5 * (result.upper - result.lower))
        ax.set_xlim(max(0.0, result.lower - 0.5 * (result.upper - result.lower)), right)
    ax.set_ylim(-3 * result.threshold, 0.15 * result.threshold)
    ax.set_xlabel(f"time since the diet change ({unit_word(result.time_unit)})")
    ax.set_ylabel("log-likelihood − maximum")
    tissues = ", ".join(str(t).replace("_", " ") for t in result.tissues)
    ax.set_title(f"{tissues}: {result.status.replace('_', ' ')}", fontsize=9)
    ax.legend(fontsize=7, frameon=False)
    return ax
