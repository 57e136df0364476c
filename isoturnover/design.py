r"""Optimal sampling schedules for diet-switch experiments: when to sample, and how well.

:func:`design_schedule` chooses the sampling times of an experiment that make a fit of a
given model most informative, for a guess of the parameters (``truth``) and the residual
sd expected of each sample. :func:`evaluate_design` gives the same figures for a schedule
the user already has. Both work on any :class:`~isoturnover.TurnoverModel` (several
pools, the precursor–product chain, a lag, a diet history, growth dilution with a known
growth rate) and on a user model given as a function that returns its values and Jacobian.

The theory (locally optimal designs; Box & Lucas 1959, *Biometrika* 46:77–90). For
independent samples with a common residual sd σ the Fisher information of the free
parameters φ is

.. math::

    M(\xi) = \frac{1}{\sigma^2} J_\phi^\top J_\phi, \qquad
    J_\phi = \frac{\partial \delta(t_j)}{\partial \phi},

with the model's exact analytic Jacobian (no finite differences). Fixed parameters are not
in φ; the pool fractions enter through all but one of the free fractions (they sum to 1,
so ``J_φ = J_θ A`` with the columns :math:`e_{f_i} - e_{f_{last}}`). The criteria are

* ``"D"``: maximise :math:`\log\det M` (the joint confidence region of all parameters is
  smallest);
* ``"half_life"`` and ``"time_to"``: c-optimality, minimise the delta-method variance of
  the target :math:`g^\top M^{-1} g` with :math:`g = \partial(\text{target})/\partial\phi`
  (the half-life :math:`\ln 2/k` of one pool, the slowest by default, or the time to a
  fraction of the change, :func:`isoturnover.quantities.time_to`).

With ``prior_cv`` the criterion is averaged over a log-normal prior on the rates (a
"pseudo-Bayesian" design, robust to a wrong guess of the rates): each rate is
:math:`k\,e^{\sigma z}` with :math:`\sigma^2 = \ln(1 + cv^2)` (the median stays at the
guess), over a Gauss–Hermite product rule with 5 nodes per rate for one or two free rates
(``numpy.polynomial.hermite_e.hermegauss``) and over 64 Monte Carlo draws (seed ``rng``)
for more; D averages :math:`\log\det M`, the c-criteria average the squared relative
standard error :math:`g^\top M^{-1} g/\text{target}^2`.

The search is an exchange algorithm (Fedorov 1972, *Theory of Optimal Experiments*) on a
fine candidate grid (linear and geometric spacing over the sampling span), followed by a
continuous refinement of the free times with ``scipy.optimize.minimize`` (L-BFGS-B) in a
transformed space that keeps the times ordered, inside the span and at least
``min_spacing`` apart (a stick-breaking map of the unit cube onto the ordered gaps).

Every plan carries the animal-care caution (:data:`PLAN_CAUTION`, built on
:data:`isoturnover.conventions.CAUTION`): sampling
animals needs the approval of the local animal-care authority (human hair or blood: a
human-research ethics board); a plan supports that process and does not replace it.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy import optimize

from .conventions import CAUTION, check_choice, check_level, check_positive_int, unit_word
from .designmodel import ModelSpec, model_spec, prior_points
from .errors import DataError
from .lazystats import stats

__all__ = ["design_schedule", "evaluate_design", "Design", "CRITERIA", "SD_GUIDANCE",
           "PLAN_CAUTION", "ModelSpec", "model_spec", "prior_points", "target_variance"]

CRITERIA = ("D", "half_life", "time_to")

#: Guidance on the residual sd, repeated in the docstrings and summaries.
SD_GUIDANCE = (
    "sd is the total residual sd of one sample: analytic precision plus the animal's own "
    "scatter between time points. Common practice: the analytic precision of δ13C and δ15N "
    "by elemental-analyser IRMS is typically 0.1–0.2 ‰ (1σ), and the scatter between time "
    "points of a living animal is usually larger, so the total sd lies above the analytic "
    "one; take it from the residual sd of a pilot or a published series."
)

#: The project's caution (:data:`isoturnover.conventions.CAUTION`) with what it means for a plan.
PLAN_CAUTION = CAUTION + (
    " A sampling plan (times, animals, samples per animal) is a proposal to put before that "
    "authority or board."
)

_SINGULAR = 1e-12  # smallest determinant of the scaled (correlation-form) information
_RIDGE = 1e-6  # regularisation of the averaged criterion, per unit of one sample's information


# ----------------------------------------------------------------------------------------
# Criteria
# ----------------------------------------------------------------------------------------
def _scaled(M):
    """Correlation form of M with its scale; flags singular matrices."""
    d = np.einsum("...ii->...i", M)
    good = np.all(d > 0, axis=-1)
    inv = np.where(d > 0, 1.0 / np.sqrt(np.where(d > 0, d, 1.0)), 1.0)
    C = M * inv[..., :, None] * inv[..., None, :]
    sign, ld = np.linalg.slogdet(C)
    sing = ~good | (sign <= 0) | ~(ld > math.log(_SINGULAR))
    return C, inv, sing


def target_variance(M, g):
    r"""Delta-method variance :math:`g^\top M^{-1} g`, inf where M is singular.

    Computed in the correlation form :math:`C = D M D`, :math:`D = \mathrm{diag}(M)^{-1/2}`
    (scale-free), and inf when :math:`\det C < 10^{-12}`.

    Parameters
    ----------
    M : ndarray of shape (..., q, q)
        Information matrices.
    g : ndarray of shape (..., q)
        Gradients of the target, broadcast against ``M``.

    Returns
    -------
    ndarray of shape (...)
    """
    C, inv, sing = _scaled(M)
    gs = np.broadcast_to(g, inv.shape) * inv
    eye = np.broadcast_to(np.eye(C.shape[-1]), C.shape)
    Cr = np.where(sing[..., None, None], eye, C)
    x = np.linalg.solve(Cr, gs[..., None])[..., 0]
    return np.where(sing, np.inf, np.sum(gs * x, axis=-1))


def _log_det(M):
    sign, ld = np.linalg.slogdet(M)
    _, _, sing = _scaled(M)
    return np.where((sign > 0) & ~sing, ld, -np.inf)


class _Problem:
    r"""The criterion of a design over the prior's points (to be minimised).

    Draw 0 is always the guess itself (weight 0 under a prior): a design must make every
    free parameter estimable there (:func:`_scaled`'s test), or its criterion is inf. The
    averaged criterion uses :math:`M + \epsilon\,\mathrm{diag}(R)`, with R the mean
    information of one sample over the reference times and :math:`\epsilon = 10^{-6}`,
    so that a prior point whose rates nearly coincide (a model that cannot be identified
    there) weighs heavily without making every design infinite.
    """

    def __init__(self, spec, criterion, sd, thetas, weights, pool, fraction, ref_times):
        self.spec, self.criterion, self.sd = spec, criterion, float(sd)
        self.local = weights.size == 1
        if self.local:
            self.thetas, self.weights = thetas, weights
        else:
            self.thetas = np.vstack([spec.theta[None, :], thetas])
            self.weights = np.r_[0.0, weights]
        self.n_points = weights.size
        self.pool, self.fraction = pool, fraction
        Jr = self.jac(ref_times)
        self.ridge = _RIDGE * np.einsum("sni,sni->si", Jr, Jr) / Jr.shape[1]
        if criterion != "D":
            tg = [spec.target(th, criterion, pool, fraction) for th in self.thetas]
            self.tval = np.array([v for v, _ in tg])
            self.g = np.array([g for _, g in tg])
            if not np.all(np.isfinite(self.tval)) or not np.all(self.tval > 0):
                raise DataError(f"the target of criterion={criterion!r} is not finite and "
                                "positive at the guess (or a prior point)")
            if np.any(np.all(self.g == 0, axis=1)):
                raise DataError(f"criterion={criterion!r}: the target does not depend on any "
                                "free parameter (is its rate fixed?)")

    def jac(self, t):
        """(S, n, q) Jacobians divided by sd."""
        t = np.asarray(t, dtype=float)
        return np.stack([self.spec.jacobian(t, th) for th in self.thetas]) / self.sd

    def info(self, t):
        J = self.jac(t)
        return np.einsum("sni,snj->sij", J, J)

    def value(self, M):
        """Criterion of a stack (S, K, q, q) or (S, q, q) of matrices, to minimise."""
        extra = (1,) * (M.ndim - 3)
        ridge = self.ridge.reshape((self.ridge.shape[0],) + extra + (self.ridge.shape[1],))
        Mr = M + ridge[..., :, None] * np.eye(M.shape[-1])
        w = self.weights.reshape((-1,) + extra)
        if self.criterion == "D":
            per = -np.linalg.slogdet(Mr)[1]
        else:
            g = self.g.reshape((self.g.shape[0],) + extra + (self.g.shape[1],))
            tv = self.tval.reshape((-1,) + extra)
            d = 1.0 / np.sqrt(np.einsum("...ii->...i", Mr))
            C = Mr * d[..., :, None] * d[..., None, :]
            gs = g * d
            per = np.sum(gs * np.linalg.solve(C, gs[..., None])[..., 0], axis=-1) / tv**2
        total = np.sum(w * np.where(w > 0, per, 0.0), axis=0)
        _, _, sing = _scaled(M[0])  # the guess itself: every free parameter estimable
        return np.where(sing, np.inf, total)


# ----------------------------------------------------------------------------------------
# Search: exchange on a grid, then continuous refinement
# ----------------------------------------------------------------------------------------
def _grid(lo, hi, n_lin=161, n_geo=120):
    span = hi - lo
    g = np.concatenate([np.linspace(lo, hi, n_lin), lo + np.geomspace(span * 1e-3, span, n_geo)])
    return np.unique(g)


def _feasible(x, others, spacing):
    if spacing <= 0 or others.size == 0:
        return np.ones(np.shape(x), dtype=bool)
    return np.min(np.abs(np.asarray(x)[..., None] - others), axis=-1) >= spacing * (1 - 1e-9)


def _exchange(prob, grid, m, M_fix, fixed_t, spacing, lo, hi):
    """Fedorov-type exchange of the m free points over the grid (one point at a time)."""
    start = np.linspace(lo, hi, m + 2)[1:-1] if m > 1 else np.array([lo + 0.5 * (hi - lo)])
    if m > 1 and spacing > 0:
        start = np.linspace(lo, hi, m)
    grid = np.unique(np.concatenate([grid, start]))
    Jg = prob.jac(grid)  # (S, G, q)
    Og = np.einsum("sgi,sgj->sgij", Jg, Jg)
    idx = np.searchsorted(grid, start)
    cur = M_fix + Og[:, idx].sum(axis=1)
    best = float(prob.value(cur))
    for _ in range(60):
        improved = False
        for i in range(m):
            others = np.concatenate([np.delete(grid[idx], i), fixed_t])
            feas = _feasible(grid, others, spacing)
            base = cur - Og[:, idx[i]]
            vals = prob.value(base[:, None] + Og)
            vals = np.where(feas, vals, np.inf)
            j = int(np.argmin(vals))
            ok_now = bool(_feasible(grid[idx[i]], others, spacing))
            gain = vals[j] < best if not math.isfinite(best) else \
                vals[j] < best - 1e-12 * max(1.0, abs(best))
            if np.isfinite(vals[j]) and (gain or not ok_now):
                idx[i] = j
                cur = base + Og[:, j]
                best = float(vals[j])
                improved = True
        if not improved:
            break
    return np.sort(grid[idx]), best


def _to_times(v, lo, span, spacing):
    keep = np.cumprod(1.0 - np.clip(v, 0.0, 1.0))
    return lo + spacing * np.arange(v.size) + span * (1.0 - keep)


def _from_times(x, lo, span, spacing):
    c = (np.sort(x) - lo - spacing * np.arange(x.size)) / span if span > 0 else np.zeros(x.size)
    c = np.clip(np.maximum.accumulate(c), 0.0, 1.0)
    rest = 1.0 - c
    prev = np.r_[1.0, rest[:-1]]
    with np.errstate(divide="ignore", invalid="ignore"):
        v = np.where(prev > 0, 1.0 - rest / prev, 0.0)
    return np.clip(v, 0.0, 1.0)


def _refine(prob, x0, best, M_fix, fixed_t, spacing, lo, hi):
    """Continuous refinement in the stick-breaking space (order, span and spacing kept)."""
    m = x0.size
    span = (hi - lo) - (m - 1) * spacing
    if m == 0 or span <= 0:
        return x0, best
    penalty = abs(best) * 10 + 1e6

    def crit(v):
        x = _to_times(v, lo, span, spacing)
        if fixed_t.size and spacing > 0 and not np.all(_feasible(x, fixed_t, spacing)):
            return penalty
        val = float(prob.value(M_fix + prob.info(x)))
        return val if math.isfinite(val) else penalty

    res = optimize.minimize(crit, _from_times(x0, lo, span, spacing), method="L-BFGS-B",
                            bounds=[(0.0, 1.0)] * m, options={"maxiter": 300})
    x = np.sort(_to_times(res.x, lo, span, spacing))
    val = crit(res.x)
    if val < best and val < penalty:
        return x, val
    return x0, best


# ----------------------------------------------------------------------------------------
# The result
# ----------------------------------------------------------------------------------------
def _repeats_within_animal(times, animals):
    """Number of samples at a time another sample of the same animal already has."""
    seen, n = set(), 0
    for t, a in zip(np.round(times, 9), animals):
        n += (t, a) in seen
        seen.add((t, a))
    return n


def _animals(times, roles, destructive, max_per_animal):
    """Animal numbers: one per sample (destructive) or in rotation over the sorted times."""
    n = len(times)
    if destructive:
        return np.arange(1, n + 1), n
    if max_per_animal is None or max_per_animal >= n:
        return np.ones(n, dtype=int), 1
    n_anim = math.ceil(n / max_per_animal)
    out = np.empty(n, dtype=int)
    out[np.argsort(times, kind="stable")] = np.arange(n) % n_anim + 1
    return out, n_anim


class Design:
    r"""A sampling schedule with its expected precision (from :func:`design_schedule` or
    :func:`evaluate_design`).

    Parameters
    ----------
    spec : ModelSpec
        The model and its guess (:func:`model_spec`).
    prob : object
        The criterion over the prior's points (its ``thetas`` are read).
    times : array-like
        Sampling times (time unit), in any order.
    roles : sequence of str
        Role of each time (``"baseline"``, ``"fixed"``, ``"optimised"``, ``"given"``).
    sd : float
        Total residual sd of one sample (‰).
    criterion : {"D", "half_life", "time_to"}
        The criterion.
    level : float
        Level of the reported half-width.
    destructive : bool
        One animal per sample.
    max_per_animal : int or None
        Most samples per animal.
    prior_cv : float or None
        Coefficient of variation of the prior on the rates.
    duration : float
        Sampling span after the switch (time unit).
    criterion_value : float
        The minimised criterion.
    pool : int or None
        Position of the target pool among the free rates (None: the slowest).
    fraction : float
        Fraction of the change for ``"time_to"``.
    time_unit : str, default="d"
        Time unit of the times and rates (a label for the tables and summary).

    Attributes
    ----------
    times : ndarray
        Sampling times, sorted, in the model's time unit (days by default).
    roles : list of str
        ``"baseline"`` (before the switch), ``"fixed"`` (required by the user),
        ``"optimised"`` or ``"given"`` for each time.
    animals : ndarray of int
        Animal number of each sample (1 … :attr:`n_animals`).
    n_animals : int
        Number of animals the schedule needs.
    criterion : str
        ``"D"``, ``"half_life"`` or ``"time_to"``.
    target : str
        Name of the reported quantity (the half-life of the slowest pool for ``"D"``).
    target_value : float
        Its value at the guess (time unit).
    se : float
        Expected standard error of the target by the delta method at the guess, in the
        time unit (``sd`` known).
    rel_precision : float
        ``se / target_value``.
    half_width, rel_half_width : float
        Half-width of the ``level`` normal interval, absolute and relative to the target.
    log_det : float
        :math:`\log\det M` of the free parameters at the guess.
    criterion_value : float
        The minimised criterion (averaged over the prior when there is one).
    parameter_se : dict
        Expected standard error of every free parameter (natural units).
    caution : str
        The animal-care caution.
    """

    def __init__(self, spec, prob, times, roles, *, sd, criterion, level, destructive,
                 max_per_animal, prior_cv, duration, criterion_value, pool, fraction,
                 time_unit="d"):
        order = np.argsort(times, kind="stable")
        self.times = np.asarray(times, dtype=float)[order]
        self.roles = [roles[i] for i in order]
        self.animals, self.n_animals = _animals(self.times, self.roles, destructive,
                                                max_per_animal)
        self.destructive = bool(destructive)
        self.max_per_animal = max_per_animal
        self.criterion, self.sd, self.level = criterion, float(sd), float(level)
        self.prior_cv, self.duration = prior_cv, duration
        self.n_prior_points = int(prob.n_points)
        self.criterion_value = float(criterion_value)
        self.spec = spec
        self.pool, self.fraction = pool, fraction
        self.time_unit = time_unit
        self.truth = dict(zip(spec.names, spec.theta))
        J = spec.jacobian(self.times) / self.sd
        M = J.T @ J
        self.log_det = float(_log_det(M))
        _, _, sing = _scaled(M)
        if sing:
            cov = np.full((spec.theta.size,) * 2, np.inf)
        else:
            cov = spec.A @ np.linalg.inv(M) @ spec.A.T
        free_nat = [i for i, n in enumerate(spec.names)
                    if n not in spec.fixed and np.any(spec.A[i] != 0)]
        self.parameter_se = {spec.names[i]: float(math.sqrt(max(cov[i, i], 0.0)))
                             for i in free_nat}
        crit_for_target = "time_to" if criterion == "time_to" else "half_life"
        tv, g = spec.target(spec.theta, crit_for_target, pool, fraction)
        if tv is None:
            self.target = "none"
            self.target_value = self.se = math.nan
        else:
            if crit_for_target == "time_to":
                self.target = f"time to {fraction:g} of the change"
            else:
                i = spec.rate_index[-1 if pool is None else pool]
                self.target = f"half-life ({spec.names[i]})"
            self.target_value = float(tv)
            self.se = float(math.sqrt(target_variance(M, g)))
        self.rel_precision = self.se / self.target_value
        z = float(stats.norm.ppf(0.5 + self.level / 2))
        self.half_width = z * self.se
        self.rel_half_width = z * self.rel_precision
        self.caution = PLAN_CAUTION

    def expected(self, t=None) -> np.ndarray:
        """Expected values of the model at ``t`` (default: the schedule's times).

        Parameters
        ----------
        t : array-like, optional
            Times, in the model's time unit.

        Returns
        -------
        ndarray
            Model values at the guess (‰ for a turnover model).
        """
        return self.spec.values(self.times if t is None else t)

    def table(self) -> pd.DataFrame:
        """The schedule, one row per sample.

        Returns
        -------
        DataFrame
            Columns sample (1…n), time, animal, role, expected (the model's value at the
            guess, ‰ for a turnover model).
        """
        return pd.DataFrame({"sample": np.arange(1, self.times.size + 1), "time": self.times,
                             "animal": self.animals, "role": self.roles,
                             "expected": self.expected()})

    def precision_table(self) -> pd.DataFrame:
        """Expected standard errors of the free parameters and of the target.

        Returns
        -------
        DataFrame
            Columns quantity, value, se, rel_se (se / |value|).
        """
        rows = [{"quantity": n, "value": self.truth[n], "se": s,
                 "rel_se": s / abs(self.truth[n]) if self.truth[n] != 0 else math.nan}
                for n, s in self.parameter_se.items()]
        if self.target != "none":
            rows.append({"quantity": self.target, "value": self.target_value, "se": self.se,
                         "rel_se": self.rel_precision})
        return pd.DataFrame(rows, columns=["quantity", "value", "se", "rel_se"])

    def summary(self) -> str:
        """A printable account of the plan, ending with the animal-care caution.

        Returns
        -------
        str
        """
        crit = {"D": "D-optimal (log det of the information)",
                "half_life": "c-optimal for the half-life",
                "time_to": f"c-optimal for the time to {self.fraction:g} of the change"}
        lines = [f"Sampling plan: {self.spec.description}",
                 f"Criterion: {crit[self.criterion]}"
                 + ("" if self.prior_cv is None else
                    f", averaged over a log-normal prior on the rates (cv {self.prior_cv:g}, "
                    f"{self.n_prior_points} points)"),
                 f"Residual sd per sample: {self.sd:g} ‰ (total: analytic and animal scatter)",
                 f"Samples: {self.times.size} on {self.n_animals} animal"
                 f"{'s' if self.n_animals > 1 else ''}"
                 + (" (destructive: one animal per sample)" if self.destructive else "")]
        unit = unit_word(self.time_unit)
        lines.append(f"Times ({unit}): " + ", ".join(f"{t:.4g}" for t in self.times))
        same = _repeats_within_animal(self.times, self.animals)
        if same:
            lines.append(
                f"{same} sample(s) share a time with another sample of the same animal: they "
                "repeat the analysis, not the animal's scatter between time points, which "
                "the sd assumes independent; set min_spacing to spread them")
        if self.target != "none":
            lines.append(f"Expected {self.target}: {self.target_value:.4g} ± {self.se:.3g} "
                         f"{unit} "
                         f"(relative {100 * self.rel_precision:.1f} %; {100 * self.level:g} % "
                         f"half-width {100 * self.rel_half_width:.1f} %)")
        lines.append(f"log det M: {self.log_det:.4g}")
        lines.append("Precision is local: it holds at the guessed parameters; check it by "
                     "simulation (simulate_design).")
        lines.append(SD_GUIDANCE)
        lines.append("Caution. " + PLAN_CAUTION)
        return "\n".join(lines)

    def __repr__(self):
        t = ", ".join(f"{x:.4g}" for x in self.times)
        return (f"<Design {self.criterion}: {self.times.size} samples [{t}], "
                f"{self.target} se {self.se:.3g}>")


# ----------------------------------------------------------------------------------------
# Public entry points
# ----------------------------------------------------------------------------------------
def _check_sd(sd):
    try:
        s = float(sd)
    except (TypeError, ValueError):
        raise DataError(f"'sd' must be a positive number (‰); got {sd!r}. "
                        + SD_GUIDANCE) from None
    if not (s > 0 and math.isfinite(s)):
        raise DataError(f"'sd' must be a positive number (‰); got {sd!r}. " + SD_GUIDANCE)
    return s


def _check_pool(spec, pool):
    if pool is None:
        return None
    if spec.kin is not None:
        n = len(spec.rate_index)
        if isinstance(pool, bool) or not isinstance(pool, (int, np.integer)) or \
                not 1 <= pool <= n:
            raise DataError(f"'pool' must be a pool number from 1 to {n} (fastest first); "
                            f"got {pool!r}")
        return int(pool) - 1
    names = [spec.names[i] for i in spec.rate_index]
    if pool not in names:
        raise DataError(f"'pool' must name one of the rates {names}; got {pool!r}")
    return names.index(pool)


def _check_options(criterion, spec, prior_cv, fraction, level):
    criterion = check_choice("criterion", criterion, CRITERIA)
    if criterion == "time_to" and spec.kin is None:
        raise DataError("criterion='time_to' needs a TurnoverModel; a user model supports "
                        "'D' and 'half_life'")
    if criterion == "half_life" and not spec.rate_index:
        raise DataError("criterion='half_life' needs a free rate (give rate_names= for a "
                        "user model)")
    if prior_cv is not None:
        try:
            ok = float(prior_cv) > 0 and math.isfinite(float(prior_cv))
        except (TypeError, ValueError):
            ok = False
        if not ok:
            raise DataError(f"'prior_cv' must be a positive number or None; got {prior_cv!r}")
        if not spec.rate_index:
            raise DataError("'prior_cv' needs free rates (give rate_names= for a user model)")
    try:
        fr = float(fraction)
    except (TypeError, ValueError):
        fr = math.nan
    if not 0 < fr < 1:
        raise DataError(f"'fraction' must be in (0, 1); got {fraction!r}")
    return criterion, fr, check_level(level)


def _times_arg(name, values):
    try:
        a = np.atleast_1d(np.asarray(values, dtype=float)).ravel()
    except (TypeError, ValueError):
        raise DataError(f"'{name}' must be numbers (times); got {values!r}") from None
    if not np.all(np.isfinite(a)):
        raise DataError(f"'{name}' must be finite times; got {values!r}")
    return a


def design_schedule(model, truth, *, n_samples, duration, sd, criterion="D", prior_cv=None,
                    baseline=1, min_spacing=0.0, fixed_times=(), max_per_animal=None,
                    destructive=False, fraction=0.95, pool=None, fixed=None,
                    param_names=None, rate_names=None, level=0.95, rng=0,
                    time_unit="d") -> Design:
    r"""Choose sampling times that make the fit of ``model`` most informative.

    Locally optimal design on the Fisher information :math:`M = J^\top J/sd^2` of the free
    parameters from the model's analytic Jacobian at the guess ``truth`` (module docstring):
    ``"D"`` maximises :math:`\log\det M`; ``"half_life"`` and ``"time_to"`` minimise the
    delta-method variance :math:`g^\top M^{-1} g` of the target (c-optimality). With
    ``prior_cv`` the criterion is averaged over a log-normal prior on the rates
    (Gauss–Hermite, 5 nodes per rate, for one or two rates; 64 draws seeded by ``rng`` for
    more). The search: an exchange algorithm on a candidate grid (161 linear and 120
    geometric points over the span), then L-BFGS-B on the free times in a stick-breaking
    space that keeps their order, the span and ``min_spacing``.

    Parameters
    ----------
    model : TurnoverModel or callable
        Any :class:`~isoturnover.TurnoverModel` (pools, chain, lag, diet history, growth
        with ``k_growth`` fixed; a fitted growth curve is taken as known), or a user model
        ``model(t, theta) -> (y, J)`` with ``param_names`` (its time origin is 0).
    truth : dict
        Guessed parameters by name, including the size of the isotopic change (e.g.
        ``{"delta0": -25.0, "delta_eq": -12.0, "k1": 0.08}``, rates per time unit).
    n_samples : int
        Total number of samples, baseline and fixed times included.
    duration : float
        Length of the sampling span after the switch (time unit); free times lie in
        ``[switch, switch + duration]``.
    sd : float
        Total residual sd of one sample (‰): analytic precision plus the animal's scatter
        between time points. Required. Common practice (see the project's reference notes):
        the analytic precision of δ13C and δ15N by elemental-analyser IRMS is typically
        0.1–0.2 ‰ (1σ), and the scatter between time points of a living animal is usually
        larger: take the residual sd of a pilot or published series. The times of a local
        design do not depend on ``sd``; the standard errors scale with it.
    criterion : {"D", "half_life", "time_to"}, default="D"
    prior_cv : float, optional
        Coefficient of variation of a log-normal prior on every free rate (median at the
        guess); None for a local design.
    baseline : int, default=1
        Samples taken before the switch. They are placed at the switch time itself (t = 0
        for a step switch): the tissue is at equilibrium with the old diet there, so any
        time before the switch gives the same information.
    min_spacing : float, default=0
        Smallest gap between the optimised times, and between them and ``fixed_times``
        and the baseline samples at the switch (time unit). With 0, samples may be
        replicated at one time.
    fixed_times : sequence of float, default=()
        Times that must be in the schedule (counted in ``n_samples``).
    max_per_animal : int, optional
        Most samples one animal can give (blood-volume limits). The schedule then spans
        ``ceil(n_samples / max_per_animal)`` animals, assigned in rotation through the
        sorted times so each animal covers the whole span. The information treats every
        sample as independent with the total ``sd`` and the animals as sharing the
        kinetics (a pooled fit); between-animal differences belong in ``sd``.
    destructive : bool, default=False
        One animal per sample (``n_samples`` animals): ``sd`` should then include the
        scatter between animals.
    fraction : float, default=0.95
        Fraction of the change for ``criterion="time_to"``.
    pool : int or str, optional
        Pool number (1 = fastest) whose half-life is the target; default the slowest. For a
        user model, the name of a rate in ``rate_names``.
    fixed : dict or sequence of str, optional
        Parameters held fixed in the fit (not in the information matrix).
    param_names, rate_names : sequence of str, optional
        A user model's parameter names (required) and which of them are rates.
    level : float, default=0.95
        Level of the reported interval half-width.
    rng : int, default=0
        Seed of the prior's Monte Carlo draws (more than two rates).
    time_unit : str, default="d"
        Time unit of ``duration``, the times and the rates (a label for the summary).

    Returns
    -------
    Design
        Times, animals, expected standard error and relative precision of the target, a
        :meth:`~Design.table`, and a :meth:`~Design.summary` with the animal-care caution.

    Raises
    ------
    DataError
        For a bad argument (named in the message): ``sd`` not positive, too few samples
        for the free parameters, spacing that does not fit in the span, an unknown
        criterion or parameter.

    Notes
    -----
    Sampling animals needs the approval of the local animal-care authority (human hair or
    blood: a human-research ethics board); a plan supports that process and does not
    replace it.
    """
    spec = model_spec(model, truth, fixed=fixed, param_names=param_names,
                      rate_names=rate_names)
    sd = _check_sd(sd)
    criterion, fraction, level = _check_options(criterion, spec, prior_cv, fraction, level)
    pool = _check_pool(spec, pool)
    n_samples = check_positive_int("n_samples", n_samples)
    baseline = check_positive_int("baseline", baseline, minimum=0)
    fixed_t = _times_arg("fixed_times", fixed_times)
    if max_per_animal is not None:
        max_per_animal = check_positive_int("max_per_animal", max_per_animal)
        if destructive and max_per_animal != 1:
            raise DataError("'max_per_animal' and destructive=True: a destructive design "
                            "takes one sample per animal; leave max_per_animal out")
    try:
        duration = float(duration)
        spacing = float(min_spacing)
    except (TypeError, ValueError):
        raise DataError(f"'duration' and 'min_spacing' must be numbers; got {duration!r}, "
                        f"{min_spacing!r}") from None
    if not (duration > 0 and math.isfinite(duration)):
        raise DataError(f"'duration' must be a positive time; got {duration!r}")
    if not (spacing >= 0 and math.isfinite(spacing)):
        raise DataError(f"'min_spacing' must be >= 0; got {min_spacing!r}")
    m = n_samples - baseline - fixed_t.size
    if m < 0:
        raise DataError(f"'n_samples' = {n_samples} is fewer than the baseline ({baseline}) "
                        f"and fixed times ({fixed_t.size}) it must hold")
    q = spec.A.shape[1]
    if n_samples < q:
        raise DataError(f"'n_samples' = {n_samples} is fewer than the {q} free parameters "
                        f"({', '.join(spec.free_names)})")
    # the optimised times keep min_spacing from the baseline samples (at the switch) too
    lo, hi = spec.switch + (spacing if baseline else 0.0), spec.switch + duration
    if m and (hi <= lo or (m - 1) * spacing > hi - lo):
        raise DataError(f"'min_spacing' = {spacing:g}: {m} optimised times cannot be "
                        f"{spacing:g} apart (and from the baseline) within duration = "
                        f"{duration:g}")
    thetas, weights = prior_points(spec, prior_cv, rng)
    grid = _grid(lo, hi)
    prob = _Problem(spec, criterion, sd, thetas, weights, pool, fraction, grid)
    base_t = np.concatenate([np.full(baseline, spec.switch), fixed_t])
    q_fix = prob.info(base_t) if base_t.size else np.zeros((prob.thetas.shape[0], q, q))
    if m:
        x, best = _exchange(prob, grid, m, q_fix, fixed_t, spacing, lo, hi)
        if math.isfinite(best):
            x, best = _refine(prob, x, best, q_fix, fixed_t, spacing, lo, hi)
    else:
        x, best = np.empty(0), float(prob.value(q_fix))
    if not math.isfinite(best):
        raise DataError(f"no schedule of {n_samples} samples within duration = {duration:g} "
                        "makes every free parameter estimable; add samples, lengthen the "
                        "span or fix parameters")
    times = np.concatenate([base_t, x])
    roles = ["baseline"] * baseline + ["fixed"] * fixed_t.size + ["optimised"] * m
    return Design(spec, prob, times, roles, sd=sd, criterion=criterion, level=level,
                  destructive=destructive, max_per_animal=max_per_animal, prior_cv=prior_cv,
                  duration=duration, criterion_value=best, pool=pool, fraction=fraction,
                  time_unit=time_unit)


def evaluate_design(model, truth, times, *, sd, criterion="half_life", prior_cv=None,
                    fraction=0.95, pool=None, fixed=None, param_names=None, rate_names=None,
                    level=0.95, destructive=False, max_per_animal=None, rng=0,
                    time_unit="d") -> Design:
    r"""Expected precision of a given schedule (no optimisation).

    The same information matrix and criteria as :func:`design_schedule`, for the user's
    times: to compare a planned schedule with an optimal one, or to see what a design made
    for one guess gives under another (the guess was wrong).

    Parameters
    ----------
    model : TurnoverModel or callable
        As in :func:`design_schedule`.
    truth : dict
        Parameters by name at which the precision is computed.
    times : sequence of float
        Every sampling time (baseline samples at or before the switch included).
    sd : float
        Total residual sd of one sample (‰); see :func:`design_schedule`.
    criterion : {"D", "half_life", "time_to"}, default="half_life"
        Which target is reported (and averaged over the prior for ``criterion_value``).
    prior_cv, fraction, pool, fixed, param_names, rate_names
        As in :func:`design_schedule`.
    level, destructive, max_per_animal, rng, time_unit
        As in :func:`design_schedule`.

    Returns
    -------
    Design
        Every time has role ``"given"``.

    Raises
    ------
    DataError
        For a bad argument (named in the message).
    """
    spec = model_spec(model, truth, fixed=fixed, param_names=param_names,
                      rate_names=rate_names)
    sd = _check_sd(sd)
    criterion, fraction, level = _check_options(criterion, spec, prior_cv, fraction, level)
    pool = _check_pool(spec, pool)
    t = _times_arg("times", times)
    if t.size == 0:
        raise DataError("'times' must hold at least one time")
    if max_per_animal is not None:
        max_per_animal = check_positive_int("max_per_animal", max_per_animal)
    thetas, weights = prior_points(spec, prior_cv, rng)
    ref = _grid(float(t.min()), float(t.max())) if np.ptp(t) > 0 else t
    prob = _Problem(spec, criterion, sd, thetas, weights, pool, fraction, ref)
    value = float(prob.value(prob.info(t)))
    return Design(spec, prob, t, ["given"] * t.size, sd=sd, criterion=criterion, level=level,
                  destructive=destructive, max_per_animal=max_per_animal, prior_cv=prior_cv,
                  duration=float(np.ptp(t)), criterion_value=value, pool=pool,
                  fraction=fraction, time_unit=time_unit)
