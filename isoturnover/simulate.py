r"""Simulated experiments for a sampling schedule, and the number of animals it needs.

:func:`simulate_design` draws experiments :math:`y = \delta(t; \theta) + N(0, sd^2)` at a
schedule's times, fits each with the model's own structure (fresh automatic starts) and
reports the distribution of the estimates, the widths of their intervals, how often the
intervals cover the truth and how often a fit fails. Simulations are independent: each has
its own seed, spawned from one :class:`numpy.random.SeedSequence`, so the results are the
same whatever ``n_jobs`` (joblib worker processes, loky backend; serial with a warning when
joblib is missing).

:func:`sample_size` finds the smallest number of animals (each sampled at the whole
schedule) that reaches a target relative precision of the half-life (or of the time to a
fraction of the change) by simulation: bisection over n, started from the analytic
prediction of :func:`~isoturnover.design.evaluate_design` (relative half-width
:math:`\propto 1/\sqrt{n}`).

Every output carries the animal-care caution (:data:`isoturnover.design.PLAN_CAUTION`).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
from scipy import optimize

from .conventions import check_choice, check_level, check_positive_int
from .design import PLAN_CAUTION, Design, evaluate_design, model_spec
from .errors import DataError, IsoturnoverError
from .groups import parallel_workers
from .lazystats import stats
from .model import TurnoverModel

try:  # optional (the "fast" extra): parallel simulations
    import joblib
except ImportError:  # pragma: no cover - depends on the environment
    joblib = None

__all__ = ["simulate_design", "SimulationResult", "sample_size", "SampleSize", "QUANTITIES"]

QUANTITIES = ("half_life", "time_to")
LN2 = math.log(2.0)
_FAILURES = (IsoturnoverError, FloatingPointError, np.linalg.LinAlgError, ValueError,
             RuntimeError)


def _seed_sequence(rng):
    if rng is None or isinstance(rng, (int, np.integer)) and not isinstance(rng, bool):
        return np.random.SeedSequence(None if rng is None else int(rng))
    if isinstance(rng, np.random.SeedSequence):
        return rng
    raise DataError(f"'rng' must be None, an integer seed or a numpy SeedSequence; got "
                    f"{type(rng).__name__}")


def _fit_user(spec, t, y, target, known_sd, sd, level):
    """Least squares of a user model from the truth, with a delta-method interval."""
    A, th0 = spec.A, spec.theta

    def theta_of(phi):
        return th0 + A @ (phi - phi0)

    phi0 = np.linalg.lstsq(A, th0, rcond=None)[0]

    def res(phi):
        return spec.values(t, theta_of(phi)) - y

    def jac(phi):
        return spec.jacobian(t, theta_of(phi))

    out = optimize.least_squares(res, phi0, jac=jac, method="lm")
    if not out.success:
        raise RuntimeError(out.message)
    th = theta_of(out.x)
    J = jac(out.x)
    n, q = J.shape
    dof = n - q
    s2 = sd**2 if known_sd else float(out.fun @ out.fun) / max(dof, 1)
    cov = s2 * np.linalg.inv(J.T @ J)
    i = spec.rate_index[-1 if target[1] is None else target[1]]
    k = float(th[i])
    g = np.zeros(th.size)
    g[i] = -LN2 / k**2
    gphi = g @ A
    se = math.sqrt(float(gphi @ cov @ gphi))
    crit = stats.norm.ppf(0.5 + level / 2) if known_sd or dof < 1 else \
        stats.t.ppf(0.5 + level / 2, dof)
    est = LN2 / k
    return th, est, est - crit * se, est + crit * se


def _one(model, spec, t, mu, seed, options):
    """One simulated experiment: (status, reason, estimate, lower, upper, theta)."""
    sd, fixed = options["sd"], options["fixed"]
    y = mu + sd * np.random.default_rng(seed).standard_normal(mu.size)
    quantity, pool, fraction = options["target"]
    level, method = options["level"], options["method"]
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            if isinstance(model, TurnoverModel):
                kw = {"sigma": sd, "absolute_sigma": True} if options["known_sd"] else {}
                fit = model.fit(t, y, fixed=fixed, warn=False, **kw)
                if quantity == "time_to":
                    row = fit.time_to(fraction, level, method=method).iloc[0]
                else:
                    rate = spec.names[spec.rate_index[-1 if pool is None else pool]]
                    hl = fit.half_lives(level, method=method)
                    row = hl.iloc[list(fit.kinetics.rate_names).index(rate)]
                th = np.array([fit.values[n] for n in spec.names])
                est, lo, hi = float(row["estimate"]), float(row["lower"]), float(row["upper"])
            else:
                th, est, lo, hi = _fit_user(spec, t, y, (quantity, pool), options["known_sd"],
                                            sd, level)
    except _FAILURES as exc:
        return "failed", f"{type(exc).__name__}: {exc}"[:200], math.nan, math.nan, \
            math.nan, np.full(len(spec.names), math.nan)
    if not math.isfinite(est):
        return "failed", "estimate not finite", est, lo, hi, th
    return "ok", "", est, lo, hi, th


def _chunk(model, truth, fixed, param_names, rate_names, t, seeds, options):
    spec = model_spec(model, truth, fixed=fixed, param_names=param_names,
                      rate_names=rate_names)
    mu = spec.values(t)
    return [_one(model, spec, t, mu, s, options) for s in seeds]


class SimulationResult:
    r"""Simulated experiments of one schedule (from :func:`simulate_design`).

    Parameters
    ----------
    draws : DataFrame
        One row per simulation (see the attribute).
    quantity : {"half_life", "time_to"}
        The target's kind.
    target_name : str
        The target's name (e.g. ``"half-life (k2)"``).
    truth_value : float
        The target's true value (time unit).
    predicted_se : float
        Delta-method standard error of the target.
    truth : dict
        The true natural parameters by name.
    times : array-like
        The schedule of one subject (time unit).
    n_subjects : int
        Subjects per experiment.
    sd : float
        Residual sd of one sample (‰).
    level : float
        Level of the intervals.
    method : str
        Interval method of the fits.
    known_sd : bool
        Whether the fits took ``sd`` as known.

    Attributes
    ----------
    draws : DataFrame
        One row per simulation: sim, status (``"ok"``/``"failed"``), reason, estimate,
        lower, upper, and the estimate of every parameter.
    truth_value : float
        The target's true value (time unit).
    predicted_se : float
        The delta-method standard error of :func:`~isoturnover.design.evaluate_design`
        for the same times, subjects and sd.
    empirical_se : float
        Standard deviation of the successful estimates.
    coverage : float
        Share of successful simulations whose interval holds the truth.
    failure_rate : float
        Share of simulations whose fit failed.
    median_rel_half_width : float
        Median over all simulations of :math:`(upper - lower)/(2\,estimate)` (a failed
        or open interval counts as infinite).
    caution : str
        The animal-care caution.
    """

    def __init__(self, draws, *, quantity, target_name, truth_value, predicted_se, truth,
                 times, n_subjects, sd, level, method, known_sd):
        self.draws = draws
        self.quantity, self.target_name = quantity, target_name
        self.truth_value, self.predicted_se = float(truth_value), float(predicted_se)
        self.truth = dict(truth)
        self.times = np.asarray(times, dtype=float)
        self.n_subjects, self.sd, self.level, self.method = n_subjects, sd, level, method
        self.known_sd = known_sd
        ok = draws[draws["status"] == "ok"]
        self.n_sim = len(draws)
        self.n_ok = len(ok)
        self.failure_rate = 1.0 - self.n_ok / self.n_sim
        est = ok["estimate"].to_numpy(float)
        lo, hi = ok["lower"].to_numpy(float), ok["upper"].to_numpy(float)
        self.mean = float(np.mean(est)) if est.size else math.nan
        self.median = float(np.median(est)) if est.size else math.nan
        self.empirical_se = float(np.std(est, ddof=1)) if est.size > 1 else math.nan
        mad = float(np.median(np.abs(est - self.median))) if est.size else math.nan
        self.robust_se = 1.482602218505602 * mad  # MAD of a normal sample, scaled to sd
        cover = (lo <= self.truth_value) & (self.truth_value <= hi)
        self.coverage = float(np.mean(cover)) if est.size else math.nan
        with np.errstate(divide="ignore", invalid="ignore"):
            w = (draws["upper"] - draws["lower"]).to_numpy(float)
            rel = w / (2.0 * draws["estimate"].to_numpy(float))
        rel = np.where(np.isfinite(rel) & (draws["status"] == "ok").to_numpy(), rel, np.inf)
        wok = w[np.isfinite(w) & (draws["status"] == "ok").to_numpy()]
        self.median_width = float(np.median(wok)) if wok.size else math.nan
        self.median_rel_half_width = float(np.median(rel))
        self.caution = PLAN_CAUTION

    def table(self) -> pd.DataFrame:
        """Summary of the simulations, one row for the target.

        Returns
        -------
        DataFrame
            Columns quantity, truth, n_sim, n_ok, failure_rate, mean, median, bias,
            rel_bias, empirical_se, robust_se, predicted_se, coverage, level,
            median_width, median_rel_half_width.
        """
        return pd.DataFrame([{
            "quantity": self.target_name, "truth": self.truth_value, "n_sim": self.n_sim,
            "n_ok": self.n_ok, "failure_rate": self.failure_rate, "mean": self.mean,
            "median": self.median, "bias": self.mean - self.truth_value,
            "rel_bias": (self.mean - self.truth_value) / self.truth_value,
            "empirical_se": self.empirical_se, "robust_se": self.robust_se,
            "predicted_se": self.predicted_se, "coverage": self.coverage,
            "level": self.level, "median_width": self.median_width,
            "median_rel_half_width": self.median_rel_half_width}])

    def parameter_table(self) -> pd.DataFrame:
        """Distribution of every parameter's estimate over the successful simulations.

        Returns
        -------
        DataFrame
            Columns parameter, truth, mean, median, sd, bias.
        """
        ok = self.draws[self.draws["status"] == "ok"]
        rows = []
        for n, v in self.truth.items():
            e = ok[n].to_numpy(float)
            rows.append({"parameter": n, "truth": v,
                         "mean": float(np.mean(e)) if e.size else math.nan,
                         "median": float(np.median(e)) if e.size else math.nan,
                         "sd": float(np.std(e, ddof=1)) if e.size > 1 else math.nan,
                         "bias": float(np.mean(e)) - v if e.size else math.nan})
        return pd.DataFrame(rows)

    def summary(self) -> str:
        """A printable account of the simulations, ending with the animal-care caution.

        Returns
        -------
        str
        """
        lines = [
            f"Simulated experiments: {self.n_sim} × {self.n_subjects} animal"
            f"{'s' if self.n_subjects > 1 else ''} sampled at {self.times.size} times, "
            f"residual sd {self.sd:g}",
            f"Target: {self.target_name}, truth {self.truth_value:.4g}",
            f"Fits failed: {self.n_sim - self.n_ok} ({100 * self.failure_rate:.1f} %)",
            f"Estimates: mean {self.mean:.4g}, median {self.median:.4g}; spread: robust sd "
            f"{self.robust_se:.3g} (1.4826 × MAD; predicted se {self.predicted_se:.3g}), "
            f"plain sd {self.empirical_se:.3g} (a few far-off estimates can dominate it)",
            f"{100 * self.level:g} % intervals ({self.method}): coverage "
            f"{100 * self.coverage:.1f} %, median width {self.median_width:.3g}, median "
            f"relative half-width {100 * self.median_rel_half_width:.1f} %",
            "Caution. " + PLAN_CAUTION,
        ]
        return "\n".join(lines)

    def __repr__(self):
        return (f"<SimulationResult {self.target_name}: robust sd {self.robust_se:.3g} "
                f"(predicted {self.predicted_se:.3g}), coverage {self.coverage:.3f}, "
                f"failures {self.failure_rate:.3f}>")


def _schedule(times):
    if isinstance(times, Design):
        return times.times.copy()
    try:
        t = np.atleast_1d(np.asarray(times, dtype=float)).ravel()
    except (TypeError, ValueError):
        raise DataError(f"'times' must be numbers or a Design; got {times!r}") from None
    if t.size == 0 or not np.all(np.isfinite(t)):
        raise DataError(f"'times' must be finite times (at least one); got {times!r}")
    return t


def simulate_design(model, truth, times, *, sd, n_subjects=1, n_sim=500, rng=None,
                    level=0.95, n_jobs=1, quantity="half_life", pool=None, fraction=0.95,
                    fixed=None, method="asymptotic", known_sd=False, param_names=None,
                    rate_names=None) -> SimulationResult:
    r"""Simulate experiments at a schedule, fit each, and report what the fits give.

    Each simulation draws :math:`y = \delta(t; \theta) + \varepsilon`,
    :math:`\varepsilon \sim N(0, sd^2)` independently for every sample of every subject
    (the subjects share the kinetics; their samples are pooled in one fit), and fits the
    model with its own structure and fresh automatic starts (``fit(..., warn=False)``; a
    user model by Levenberg–Marquardt from the truth, ``scipy.optimize.least_squares``).
    Simulation i uses ``default_rng(SeedSequence(rng).spawn(n_sim)[i])``, so the results do
    not depend on ``n_jobs``.

    Parameters
    ----------
    model : TurnoverModel or callable
        As in :func:`~isoturnover.design.design_schedule`.
    truth : dict
        The true parameters by name (the size of the change included).
    times : sequence of float or Design
        Sampling times of one subject (a :class:`~isoturnover.design.Design`'s times).
    sd : float
        Total residual sd of one sample (‰).
    n_subjects : int, default=1
        Animals sampled at the whole schedule, fitted together.
    n_sim : int, default=500
        Number of simulated experiments.
    rng : int or SeedSequence, optional
        Seed of the simulations (None: fresh entropy, not reproducible).
    level : float, default=0.95
        Level of the intervals.
    n_jobs : int, default=1
        Worker processes (joblib; -1: all cores); results identical to ``n_jobs=1``.
    quantity : {"half_life", "time_to"}, default="half_life"
        The target: the half-life of ``pool`` (default the slowest) or the time to
        ``fraction`` of the change.
    pool : int or str, optional
        Pool number (1 = fastest), or a user model's rate name.
    fraction : float, default=0.95
        Fraction of the change for ``quantity="time_to"``.
    fixed : dict or sequence of str, optional
        Parameters held fixed in every fit.
    method : str, default="asymptotic"
        Interval method of the fits (``"profile"`` is slower and closer to nominal).
    known_sd : bool, default=False
        Fit with ``sd`` as the known analytic sd (``absolute_sigma``) instead of estimating
        the residual variance.
    param_names, rate_names : sequence of str, optional
        A user model's parameter names and rates.

    Returns
    -------
    SimulationResult
        Estimates, interval widths, coverage and failure rate, with a table and a summary
        that carries the animal-care caution.

    Raises
    ------
    DataError
        For a bad argument (named in the message).
    """
    quantity = check_choice("quantity", quantity, QUANTITIES)
    n_subjects = check_positive_int("n_subjects", n_subjects)
    n_sim = check_positive_int("n_sim", n_sim, minimum=2)
    level = check_level(level)
    ss = _seed_sequence(rng)
    t1 = _schedule(times)
    t = np.tile(t1, n_subjects)
    pred = evaluate_design(model, truth, t, sd=sd, criterion=quantity, pool=pool,
                           fraction=fraction, fixed=fixed, param_names=param_names,
                           rate_names=rate_names, level=level)
    spec = pred.spec
    if quantity == "time_to" and spec.kin is None:
        raise DataError("quantity='time_to' needs a TurnoverModel")
    fixed_d = dict(spec.fixed)
    truth_d = dict(zip(spec.names, spec.theta))
    options = {"sd": pred.sd, "fixed": fixed_d if spec.kin is not None else None,
               "target": (quantity, pred.pool, pred.fraction), "level": level,
               "method": method, "known_sd": bool(known_sd)}
    seeds = ss.spawn(n_sim)
    workers = parallel_workers(n_jobs)
    args = (model, truth_d, fixed_d, param_names, rate_names, t)
    if workers == 1 or joblib is None:
        out = _chunk(*args, seeds, options)
    else:
        n_w = joblib.effective_n_jobs(workers)
        n_chunks = min(n_sim, 2 * n_w)  # few, large tasks: one fit costs milliseconds
        parts = np.array_split(np.arange(n_sim), n_chunks)
        res = joblib.Parallel(n_jobs=workers)(
            joblib.delayed(_chunk)(*args, [seeds[i] for i in p], options) for p in parts)
        out = [r for part in res for r in part]
    draws = pd.DataFrame({
        "sim": np.arange(n_sim), "status": [o[0] for o in out],
        "reason": [o[1] for o in out], "estimate": [o[2] for o in out],
        "lower": [o[3] for o in out], "upper": [o[4] for o in out]})
    th = np.array([o[5] for o in out])
    for j, n in enumerate(spec.names):
        draws[n] = th[:, j]
    return SimulationResult(draws, quantity=quantity, target_name=pred.target,
                            truth_value=pred.target_value, predicted_se=pred.se,
                            truth=truth_d, times=t1, n_subjects=n_subjects, sd=pred.sd,
                            level=level, method=method, known_sd=bool(known_sd))


class SampleSize:
    """The smallest number of animals that reaches a target precision (:func:`sample_size`).

    Parameters
    ----------
    n : int or None
        The smallest number of animals found (None: not reached).
    reached : bool
        Whether the target was reached.
    predicted_n : int
        The analytic first guess.
    target : float
        The target relative half-width.
    results : dict int -> SimulationResult
        The simulations run, by number of animals.
    quantity : {"half_life", "time_to"}
        The target quantity.
    level : float
        Level of the intervals.
    times : ndarray
        The schedule of one animal (time unit).

    Attributes
    ----------
    n_subjects : int or None
        The smallest number found, or None when ``max_subjects`` does not reach the target.
    reached : bool
        Whether the target was reached within ``max_subjects``.
    predicted_n : int
        The analytic first guess (delta method, relative half-width ∝ 1/√n).
    target_rel_precision : float
        The target relative half-width of the interval.
    results : dict int -> SimulationResult
        The simulations run, by number of animals.
    caution : str
        The animal-care caution.
    """

    def __init__(self, n, reached, predicted_n, target, results, quantity, level, times):
        self.n_subjects, self.reached, self.predicted_n = n, reached, predicted_n
        self.target_rel_precision, self.results = target, results
        self.quantity, self.level = quantity, level
        self.times = times
        self.caution = PLAN_CAUTION

    def table(self) -> pd.DataFrame:
        """Every number of animals simulated, in increasing order.

        Returns
        -------
        DataFrame
            Columns n_subjects, median_rel_half_width, predicted_rel_half_width,
            coverage, failure_rate, empirical_se, predicted_se, meets_target.
        """
        z = stats.norm.ppf(0.5 + self.level / 2)
        rows = []
        for n in sorted(self.results):
            r = self.results[n]
            rows.append({"n_subjects": n, "median_rel_half_width": r.median_rel_half_width,
                         "predicted_rel_half_width": z * r.predicted_se / r.truth_value,
                         "coverage": r.coverage, "failure_rate": r.failure_rate,
                         "empirical_se": r.empirical_se, "predicted_se": r.predicted_se,
                         "meets_target": r.median_rel_half_width <= self.target_rel_precision})
        return pd.DataFrame(rows)

    def summary(self) -> str:
        """A printable account of the search, ending with the animal-care caution.

        Returns
        -------
        str
        """
        what = "half-life" if self.quantity == "half_life" else "time to the fraction"
        head = (f"Smallest number of animals (each sampled at all {self.times.size} times) for "
                f"a median relative half-width of the {100 * self.level:g} % interval of the "
                f"{what} ≤ {100 * self.target_rel_precision:g} %: ")
        head += (f"{self.n_subjects}" if self.reached else
                 f"not reached with {max(self.results)} animals")
        lines = [head, f"Analytic first guess: {self.predicted_n}",
                 self.table().to_string(index=False), "Caution. " + PLAN_CAUTION]
        return "\n".join(lines)

    def __repr__(self):
        return f"<SampleSize n={self.n_subjects} (predicted {self.predicted_n})>"


def sample_size(model, truth, times, *, sd, target_rel_precision=0.1, quantity="half_life",
                max_subjects=50, n_sim=200, rng=0, level=0.95, n_jobs=1, pool=None,
                fraction=0.95, fixed=None, method="asymptotic", param_names=None,
                rate_names=None) -> SampleSize:
    r"""The smallest number of animals that reaches a target relative precision.

    n counts animals, each sampled at every time of ``times`` (for more samples per
    animal, give a denser schedule). The precision of n animals is the median over
    ``n_sim`` simulated experiments (:func:`simulate_design`, seeded by ``rng`` for every
    n) of the interval's relative half-width :math:`(upper - lower)/(2\,estimate)`, a
    failed fit counting as infinite. The search starts at the analytic prediction
    :math:`n_0 = \lceil (z\,se_1/(\text{target}\cdot r))^2 \rceil` from the delta-method
    standard error :math:`se_1` of one animal, brackets the answer by doubling or halving,
    and bisects.

    Parameters
    ----------
    model : TurnoverModel or callable
        As in :func:`~isoturnover.design.design_schedule`.
    truth : dict
        The true parameters by name.
    times : sequence of float or Design
        The schedule of one animal.
    sd : float
        Total residual sd of one sample (‰).
    target_rel_precision : float, default=0.1
        Target relative half-width r of the ``level`` interval (0.1: ± 10 %).
    quantity : {"half_life", "time_to"}, default="half_life"
    max_subjects : int, default=50
        Largest number of animals tried.
    n_sim : int, default=200
        Simulations per number of animals.
    rng : int, default=0
        Seed (the same for every n: common random numbers).
    level, n_jobs, pool, fraction, fixed, method, param_names, rate_names
        As in :func:`simulate_design`.

    Returns
    -------
    SampleSize
        The number found (or None), the analytic guess, a table of every n simulated and
        a summary with the animal-care caution.

    Raises
    ------
    DataError
        For a bad argument (named in the message).
    """
    try:
        r = float(target_rel_precision)
    except (TypeError, ValueError):
        r = math.nan
    if not (r > 0 and math.isfinite(r)):
        raise DataError(f"'target_rel_precision' must be a positive number (0.1 = 10 %); got "
                        f"{target_rel_precision!r}")
    max_subjects = check_positive_int("max_subjects", max_subjects)
    level = check_level(level)
    if isinstance(times, Design) and times.n_animals > 1:
        raise DataError(f"'times': sample_size counts animals each sampled at the whole "
                        f"schedule, but this schedule is spread over {times.n_animals} animals; "
                        "give a one-animal schedule (max_per_animal=None, destructive=False)")
    t1 = _schedule(times)
    quantity = check_choice("quantity", quantity, QUANTITIES)
    one = evaluate_design(model, truth, t1, sd=sd, criterion=quantity, pool=pool,
                          fraction=fraction, fixed=fixed, param_names=param_names,
                          rate_names=rate_names, level=level)
    z = stats.norm.ppf(0.5 + level / 2)
    guess = z * one.se / (one.target_value * r)
    n0 = int(min(max(math.ceil(guess**2), 1), max_subjects)) if math.isfinite(guess) else \
        max_subjects
    results = {}

    def meets(n):
        if n not in results:
            results[n] = simulate_design(model, truth, t1, sd=sd, n_subjects=n, n_sim=n_sim,
                                         rng=rng, level=level, n_jobs=n_jobs,
                                         quantity=quantity, pool=pool, fraction=fraction,
                                         fixed=fixed, method=method, param_names=param_names,
                                         rate_names=rate_names)
        return results[n].median_rel_half_width <= r

    if meets(n0):
        hi, lo = n0, 0
        while hi > 1:
            cand = max(hi // 2, 1)
            if meets(cand):
                hi = cand
            else:
                lo = cand
                break
    else:
        lo, hi = n0, None
        while lo < max_subjects:
            cand = min(2 * lo, max_subjects)
            if meets(cand):
                hi = cand
                break
            lo = cand
        if hi is None:
            return SampleSize(None, False, n0, r, results, quantity, level, t1)
    while hi - lo > 1 and lo >= 1:
        mid = (lo + hi) // 2
        if meets(mid):
            hi = mid
        else:
            lo = mid
    return SampleSize(hi, True, n0, r, results, quantity, level, t1)
