r"""Reaction-progress transform and diagnostics for one step diet switch.

For a step switch at :math:`t = 0` from a tissue value :math:`\delta_0` (equilibrium with the
old diet) to the equilibrium value :math:`\delta_{eq}` of the new diet, the reaction progress
variable :math:`F` (Cerling et al. 2007, Oecologia 151:175-189) is

.. math::

    1 - F(t) = \frac{\delta(t) - \delta_{eq}}{\delta_0 - \delta_{eq}}
             = \sum_{i=1}^{n} f_i \, e^{-k_i t},

with pool fractions :math:`f_i` (:math:`\sum f_i = 1`) and turnover rates :math:`k_i` (per time
unit of ``t``). On a plot of :math:`\ln(1 - F)` against :math:`t` one pool is a straight line
through the origin with slope :math:`-k`; several pools give a curve that can be peeled into
straight segments (method of residuals, common practice in compartmental analysis and
pharmacokinetics).

What this module is for
-----------------------
:math:`\ln(1 - F)` is undefined once measurement noise puts a point at or past the new
equilibrium (:math:`F \ge 1`), and it is very sensitive to the value taken for
:math:`\delta_{eq}`: a small error in :math:`\delta_{eq}` bends the late part of the line. The
functions here are therefore a **diagnostic**, the **quick published log-linear estimate** and a
**source of starting values**. The main estimator is the nonlinear fit of the model to the
untransformed δ values (:class:`isoturnover.TurnoverModel`), which fits :math:`\delta_0` and
:math:`\delta_{eq}` together with the rates and gives honest intervals.

Pool fractions describe the shape of the curve; they need not be physical compartments.

The core functions (:func:`progress_variable`, :func:`progress_rate`, :func:`peel`,
:func:`starting_rates`, :func:`end_values`) take and return numpy arrays only, are
deterministic, and do not raise on noisy but valid data: where a quantity cannot be computed
they return NaN together with a flag or status that says why. :func:`reaction_progress` wraps
them into a pandas table.

The transform itself (:func:`progress_variable`, :func:`end_values`,
:func:`reaction_progress`, :data:`FLAGS`) lives in :mod:`isoturnover.progressvariable` and is
re-exported here; this module holds the estimates built on it: the log-linear rate, curve
peeling and the starting rates.
"""

from __future__ import annotations

import itertools
import math
import numbers
from dataclasses import dataclass, field

import numpy as np

from .errors import DataError
from .progressvariable import (
    FLAGS,
    EndValues,
    ProgressVariable,
    as_scalar,
    check_ends,
    check_pair,
    check_sd,
    end_values,
    progress_variable,
    reaction_progress,
    show_value,
)

__all__ = [
    "FLAGS",
    "ProgressVariable",
    "ProgressRate",
    "PeelResult",
    "EndValues",
    "progress_variable",
    "reaction_progress",
    "end_values",
    "progress_rate",
    "peel",
    "starting_rates",
]

_LN2 = math.log(2.0)
_MAX_POOLS = 4
# Cap on (number of candidate splits) x (number of points) in one vectorised peel.
_PEEL_WORK = 200_000


# --------------------------------------------------------------------------------------------
# input checks of the estimates (those of a series are in progressvariable.py)
# --------------------------------------------------------------------------------------------


def _check_pools(pools) -> int:
    if (
        isinstance(pools, (bool, np.bool_))
        or not isinstance(pools, numbers.Integral)
        or not 1 <= int(pools) <= _MAX_POOLS
    ):
        raise DataError(
            f"pools must be an integer from 1 to {_MAX_POOLS}, got {show_value(pools)}"
        )
    return int(pools)


# --------------------------------------------------------------------------------------------
# the log-linear rate
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ProgressRate:
    r"""Log-linear (reaction progress) estimate of a one-pool turnover rate.

    Parameters
    ----------
    rate : float
        :math:`k = -b`, the negative slope of :math:`\ln(1 - F)` on :math:`t` (per time unit).
        NaN when it cannot be computed (see ``status``).
    stderr : float
        Standard error of ``rate`` (NaN without residual degrees of freedom).
    half_life : float
        :math:`\ln 2 / k` (time unit); NaN unless ``rate > 0``.
    n_used : int
        Points used: flag ``"ok"`` and ``t > 0``.
    n_flagged : int
        Points not at ``t <= 0`` that were left out by their flag (``"F>=1"``, ``"F<=0"``,
        ``"nonfinite"``).
    n_before : int
        Points at ``t <= 0`` (never used: the line is anchored at the origin by the model).
    intercept, intercept_stderr : float or None
        Intercept :math:`a` of the line and its standard error when ``through_origin=False``;
        None when the line goes through the origin.
    weighted : bool
        True if weights :math:`1/s_{\ln}^2` were used.
    dof : int
        Residual degrees of freedom.
    status : str, default="ok"
        ``"ok"`` or the reason a value is NaN or weights were not used.
    """

    rate: float
    stderr: float
    half_life: float
    n_used: int
    n_flagged: int
    n_before: int
    intercept: float | None
    intercept_stderr: float | None
    weighted: bool
    dof: int
    status: str = field(default="ok")


def _wls_line(x, z, w, through_origin: bool, absolute: bool):
    """Weighted least-squares line on small arrays -> (slope, se, icpt, icpt_se, dof, status)."""
    n = x.size
    nan = math.nan
    if n == 0:
        return nan, nan, nan, nan, 0, "no usable points (flag 'ok' and t > 0)"
    if through_origin:
        sxx = float(np.sum(w * x * x))
        b = float(np.sum(w * x * z)) / sxx
        dof = n - 1
        if absolute:
            return b, math.sqrt(1.0 / sxx), nan, nan, dof, "ok"
        if dof < 1:
            return b, nan, nan, nan, dof, "one usable point: no standard error"
        s2 = float(np.sum(w * (z - b * x) ** 2)) / dof
        return b, math.sqrt(s2 / sxx), nan, nan, dof, "ok"
    sw = float(np.sum(w))
    xm = float(np.sum(w * x)) / sw
    zm = float(np.sum(w * z)) / sw
    dx = x - xm
    sxx = float(np.sum(w * dx * dx))
    if n < 2 or not sxx > 0:
        return nan, nan, nan, nan, max(n - 2, 0), "fewer than 2 distinct usable times"
    b = float(np.sum(w * dx * (z - zm))) / sxx
    a = zm - b * xm
    dof = n - 2
    if absolute:
        s2 = 1.0
    elif dof < 1:
        return b, nan, a, nan, dof, "two usable points: no standard errors"
    else:
        s2 = float(np.sum(w * (z - a - b * x) ** 2)) / dof
    return b, math.sqrt(s2 / sxx), a, math.sqrt(s2 * (1.0 / sw + xm * xm / sxx)), dof, "ok"


def _rate(pv: ProgressVariable, through_origin: bool, absolute_sigma: bool) -> ProgressRate:
    t = pv.time
    ok = pv.ok
    before = np.isfinite(t) & (t <= 0)
    use = ok & (t > 0)
    n_flagged = int(np.sum(~ok & ~before))
    x = t[use]
    z = pv.log_one_minus_F[use]
    s = pv.sd_log[use]
    note = ""
    weighted = bool(x.size) and bool(np.all(np.isfinite(s) & (s > 0)))
    if weighted:
        w = 1.0 / s**2
    else:
        w = np.ones_like(x)
        if x.size and np.any(np.isfinite(pv.sd_log)):
            note = "; unweighted: some sd_log are zero"
    absolute = absolute_sigma and weighted
    if absolute_sigma and not weighted:
        note += "; absolute_sigma ignored without usable weights"
    b, se, a, ase, dof, status = _wls_line(x, z, w, through_origin, absolute)
    rate = -b
    if math.isfinite(rate) and rate > 0:
        half_life = _LN2 / rate
    else:
        half_life = math.nan
        if math.isfinite(rate):
            status = "rate not positive: no half-life" + (
                "" if status == "ok" else "; " + status
            )
    return ProgressRate(
        rate=rate,
        stderr=se,
        half_life=half_life,
        n_used=int(x.size),
        n_flagged=n_flagged,
        n_before=int(before.sum()),
        intercept=None if through_origin else a,
        intercept_stderr=None if through_origin else ase,
        weighted=weighted,
        dof=int(dof),
        status=status + note,
    )


def progress_rate(
    t,
    y,
    delta0,
    delta_eq,
    sd=None,
    through_origin=True,
    *,
    sd_delta0=0.0,
    sd_delta_eq=0.0,
    absolute_sigma=False,
) -> ProgressRate:
    r"""Published log-linear estimate of a one-pool turnover rate (reaction progress).

    Weighted least-squares regression of :math:`z = \ln(1 - F)` on :math:`t` (Cerling et al.
    2007), by default through the origin as the one-pool model demands:

    .. math::

        \hat b = \frac{\sum w_j t_j z_j}{\sum w_j t_j^2}, \quad k = -\hat b, \quad
        \mathrm{se}(k) = \sqrt{\frac{s^2}{\sum w_j t_j^2}}, \quad
        s^2 = \frac{\sum w_j (z_j - \hat b t_j)^2}{n - 1},

    with :math:`w_j = 1/s_{\ln,j}^2` when ``sd`` is given (see :func:`progress_variable`) and
    :math:`w_j = 1` otherwise. Weights are relative and :math:`s^2` is estimated, unless
    ``absolute_sigma=True`` (then :math:`s^2 = 1`). With ``through_origin=False`` an intercept
    is fitted as well (:math:`n - 2` degrees of freedom). Only points flagged ``"ok"`` with
    :math:`t > 0` are used; the others are counted in the result.

    This is the quick published estimate and a source of starting values; it depends strongly
    on ``delta_eq`` and drops the points past equilibrium, so it is biased when the late points
    scatter around the plateau. The fitted model (:class:`isoturnover.TurnoverModel`) is the
    main estimator.

    Parameters
    ----------
    t, y : array-like of shape (n,)
        Times since the switch and tissue values.
    delta0, delta_eq : float
        Start and equilibrium values (must differ).
    sd : float or array-like of shape (n,), optional
        1σ of each value; enables weights.
    through_origin : bool, default True
        Fit :math:`z = b t` (True) or :math:`z = a + b t` (False).
    sd_delta0, sd_delta_eq : float, default 0.0
        1σ of ``delta0`` and ``delta_eq``, added to each point's variance of :math:`z` (these
        errors are in fact shared by all points; the weights ignore that correlation).
    absolute_sigma : bool, default False
        Treat the propagated sd as known (no rescaling by the residual variance).

    Returns
    -------
    ProgressRate
        ``rate``, ``stderr``, ``half_life``, ``n_used``, ``n_flagged``, ``n_before``,
        ``intercept`` (None through the origin), ``weighted``, ``dof``, ``status``. Never
        raises on valid data: NaN values with a ``status`` when there are too few points.

    Examples
    --------
    Invented noise-free one-pool series, k = 0.05 per day:

    >>> import numpy as np
    >>> t = np.array([0.0, 5, 10, 20, 40])
    >>> y = -12.0 + (-24.0 + 12.0) * np.exp(-0.05 * t)
    >>> r = progress_rate(t, y, -24.0, -12.0)
    >>> round(r.rate, 12), round(r.half_life, 4), r.n_used
    (0.05, 13.8629, 4)
    """
    ta, ya = check_pair(t, y)
    d0, deq = check_ends(delta0, delta_eq)
    s = check_sd(sd, ta.size)
    s0 = as_scalar(sd_delta0, "sd_delta0", nonnegative=True)
    seq = as_scalar(sd_delta_eq, "sd_delta_eq", nonnegative=True)
    if not isinstance(through_origin, (bool, np.bool_)):
        raise DataError(
            f"through_origin must be True or False, got {show_value(through_origin)}"
        )
    if not isinstance(absolute_sigma, (bool, np.bool_)):
        raise DataError(
            f"absolute_sigma must be True or False, got {show_value(absolute_sigma)}"
        )
    if absolute_sigma and s is None:
        raise DataError("absolute_sigma=True needs sd (the known 1-sigma of the values)")
    pv = progress_variable(ta, ya, d0, deq, s, s0, seq)
    return _rate(pv, bool(through_origin), bool(absolute_sigma))


# --------------------------------------------------------------------------------------------
# curve peeling
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class PeelResult:
    """Rates and fractions of several pools by curve peeling (see :func:`peel`).

    Parameters
    ----------
    rates : ndarray of shape (pools,)
        Turnover rates (per time unit), fastest first, strictly decreasing, finite, > 0.
    fractions : ndarray of shape (pools,)
        Pool fractions in the same order, each >= about ``min_fraction``, summing to 1.
    reliable : bool
        False when the fallback set was returned, when a fraction had to be clipped, when the
        raw fractions sum far from 1 (outside 0.5-1.5), when successive rates differ by less
        than a factor 1.5, or when a rate lies outside ``[0.01/t_max, 100/t_min]`` (``t_min``
        the earliest positive sample time).
    status : str
        ``"ok"`` or the reasons for ``reliable=False``.
    split_times : tuple of float
        Boundaries between segments (midpoints between the neighbouring sample times),
        earliest first; empty for one pool or for the fallback.
    sse : float
        Sum of squared residuals of :math:`1 - F` of the returned curve over the points used.
    n_used : int
        Number of points with finite :math:`1 - F` at ``t > 0``.
    raw_fractions : ndarray of shape (pools,)
        Fractions :math:`e^{a_i}` from the segment intercepts before clipping and
        normalisation (NaN for the fallback).
    """

    rates: np.ndarray
    fractions: np.ndarray
    reliable: bool
    status: str
    split_times: tuple
    sse: float
    n_used: int
    raw_fractions: np.ndarray

    @property
    def half_lives(self) -> np.ndarray:
        """Half-lives ln 2 / k of the pools (time unit), fastest first."""
        return _LN2 / self.rates


def _time_span(t: np.ndarray) -> tuple[float, float]:
    """(earliest, latest) finite positive time; (1, 1) if there is none."""
    tp = t[np.isfinite(t) & (t > 0)]
    if tp.size == 0:
        return 1.0, 1.0
    return float(tp.min()), float(tp.max())


def _fallback_rates(t: np.ndarray, n: int) -> np.ndarray:
    """Log-spaced rates from 10/t_min down to 1/t_max (fastest first)."""
    tmin, tmax = _time_span(t)
    if n == 1:
        return np.array([math.sqrt(10.0 / tmin / tmax)])
    return np.geomspace(10.0 / tmin, 1.0 / tmax, n)


def _split_candidates(m: int, n: int, min_points: int) -> np.ndarray:
    """Segment boundaries (C, n + 1): 0 = b_0 < b_1 < ... < b_n = m, segments >= min_points."""
    if m < n * min_points:
        return np.empty((0, n + 1), dtype=int)
    if n == 1:
        return np.array([[0, m]])
    positions = np.arange(min_points, m - min_points + 1)
    cap = max(50, _PEEL_WORK // max(m, 1))
    p = positions.size
    while p > n - 1 and math.comb(p, n - 1) > cap:
        p -= 1
    if p < positions.size:
        positions = np.unique(np.round(np.linspace(positions[0], positions[-1], p)).astype(int))
    combos = np.array(list(itertools.combinations(positions.tolist(), n - 1)), dtype=int)
    if combos.size == 0:
        return np.empty((0, n + 1), dtype=int)
    c = combos.shape[0]
    bounds = np.hstack([np.zeros((c, 1), int), combos, np.full((c, 1), m)])
    keep = np.all(np.diff(bounds, axis=1) >= min_points, axis=1)
    return bounds[keep]


def _peel_all(x, u, bounds):
    """Peel every candidate at once. Returns rates, log-fractions (C, n) and a valid mask."""
    c, n = bounds.shape[0], bounds.shape[1] - 1
    idx = np.arange(x.size)
    rem = np.broadcast_to(u, (c, x.size)).copy()
    rates = np.full((c, n), np.nan)
    logf = np.full((c, n), np.nan)
    valid = np.ones(c, dtype=bool)
    prev = np.zeros(c)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore", under="ignore"):
        for j in range(n - 1, -1, -1):  # slowest pool (latest segment) first; loop over pools
            seg = (idx >= bounds[:, j, None]) & (idx < bounds[:, j + 1, None])
            use = seg & (rem > 0)
            w = use.astype(float)
            z = np.where(use, np.log(np.where(use, rem, 1.0)), 0.0)
            cnt = w.sum(axis=1)
            xm = (w * x).sum(axis=1) / cnt
            zm = z.sum(axis=1) / cnt
            dx = np.where(use, x - xm[:, None], 0.0)
            sxx = (dx * dx).sum(axis=1)
            slope = (dx * (z - zm[:, None])).sum(axis=1) / sxx
            icpt = zm - slope * xm
            k = -slope
            good = (
                (cnt >= 2) & (sxx > 0) & np.isfinite(k) & np.isfinite(icpt)
                & (k > 0) & (k > prev * (1.0 + 1e-9)) & (icpt < 700.0)
            )
            valid &= good
            rates[:, j] = k
            logf[:, j] = icpt
            k_safe = np.where(valid, k, 0.0)
            amp = np.where(valid, np.exp(np.where(valid, icpt, 0.0)), 0.0)
            rem = rem - amp[:, None] * np.exp(-k_safe[:, None] * x)
            prev = np.where(valid, k, prev)
    return rates, logf, valid


def _normalise(raw: np.ndarray, min_fraction: float) -> np.ndarray:
    g = np.maximum(raw, min_fraction)
    return g / g.sum(axis=-1, keepdims=True)


def _peel(t, u, n: int, min_points: int, min_fraction: float) -> PeelResult:
    fin = np.isfinite(t) & np.isfinite(u) & (t > 0)
    order = np.argsort(t[fin], kind="stable")
    x = t[fin][order]
    v = u[fin][order]
    m = x.size
    tmin, tmax = _time_span(t)
    bounds = _split_candidates(m, n, min_points)
    if bounds.shape[0]:
        rates, logf, valid = _peel_all(x, v, bounds)
    else:
        valid = np.zeros(0, dtype=bool)
    if valid.any():
        rv, lv, bv = rates[valid], logf[valid], bounds[valid]
        raw = np.exp(lv)
        frac = _normalise(raw, min_fraction)
        pred = np.einsum("cn,cnm->cm", frac, np.exp(-rv[:, :, None] * x[None, None, :]))
        sse = np.sum((v[None, :] - pred) ** 2, axis=1)
        best = int(np.argmin(sse))
        k = rv[best]
        f = frac[best]
        r = raw[best]
        reasons = []
        if np.any(r < min_fraction):
            reasons.append(f"a raw fraction was below min_fraction={min_fraction:g} and clipped")
        if not 0.5 <= r.sum() <= 1.5:
            reasons.append(f"raw fractions sum to {r.sum():.3g}, far from 1 (check delta0)")
        if n > 1 and np.any(k[:-1] / k[1:] < 1.5):
            reasons.append("successive rates differ by less than a factor 1.5")
        if np.any(k < 0.01 / tmax) or np.any(k > 100.0 / tmin):
            reasons.append("a rate lies far outside the sampled time span")
        b = bv[best][1:-1]
        splits = tuple(float(0.5 * (x[i - 1] + x[i])) for i in b)
        return PeelResult(
            rates=k.copy(),
            fractions=f.copy(),
            reliable=not reasons,
            status="ok" if not reasons else "; ".join(reasons),
            split_times=splits,
            sse=float(sse[best]),
            n_used=int(m),
            raw_fractions=r.copy(),
        )
    # fallback: log-spaced rates over the sampling span, equal fractions
    k = _fallback_rates(t, n)
    f = np.full(n, 1.0 / n)
    if m:
        pred = f @ np.exp(-k[:, None] * x[None, :])
        sse = float(np.sum((v - pred) ** 2))
    else:
        sse = math.nan
    if m < n * min_points:
        why = f"only {m} usable point(s) at t > 0; {n} pools need at least {n * min_points}"
    else:
        why = "no split gave positive rates that increase from the late to the early segment"
    return PeelResult(
        rates=k,
        fractions=f,
        reliable=False,
        status=f"fallback (log-spaced rates over the sampling span): {why}",
        split_times=(),
        sse=sse,
        n_used=int(m),
        raw_fractions=np.full(n, np.nan),
    )


def peel(t, y, delta0, delta_eq, pools=2, *, min_points=2, min_fraction=1e-3) -> PeelResult:
    r"""Rates and fractions of several pools by curve peeling of :math:`1 - F`.

    The method of residuals (curve peeling; common practice in compartmental analysis and
    described in standard pharmacokinetics texts) applied to the reaction progress variable
    :math:`1 - F = \sum f_i e^{-k_i t}` (Cerling et al. 2007). The points at :math:`t > 0`
    with finite :math:`1 - F` are sorted by time and cut into ``pools`` consecutive segments:

    1. a straight line :math:`\ln(1 - F) = a_n - k_n t` (ordinary least squares) fitted to the
       latest segment gives the slowest pool, :math:`f_n = e^{a_n}`;
    2. its contribution :math:`f_n e^{-k_n t}` is subtracted from :math:`1 - F`, and a line
       fitted to the log of the positive remainder in the previous segment gives the next pool;
    3. and so on to the fastest pool in the earliest segment.

    Each line uses the points of its segment where the remainder is positive. A split is
    admissible when every segment has at least ``min_points`` such points and the rates are
    positive and increase from the late to the early segment. All admissible splits are peeled
    at once (vectorised; for many points and pools the split positions are thinned to an even
    grid) and the one with the smallest sum of squared residuals of :math:`1 - F` of the
    normalised curve is returned (first one on ties). Fractions are clipped to at least
    ``min_fraction`` and normalised to sum to 1.

    If no split is admissible (noisy or too few points) the result is a fallback: rates
    log-spaced from :math:`10/t_{min}` to :math:`1/t_{max}` over the positive sample times,
    equal fractions, ``reliable=False``. Rates are always finite, positive and strictly
    decreasing (fastest first).

    Peeling is a source of **starting values** and a diagnostic; the fitted model
    (:class:`isoturnover.TurnoverModel`) is the main estimator.

    Parameters
    ----------
    t, y : array-like of shape (n,)
        Times since the switch and tissue values.
    delta0, delta_eq : float
        Start and equilibrium values (must differ).
    pools : int, default 2
        Number of pools, 1 to 4. One pool is a log-linear line with a free intercept.
    min_points : int, default 2
        Minimum number of points per segment (>= 2).
    min_fraction : float, default 1e-3
        Smallest fraction returned before normalisation (0 < min_fraction < 1/pools).

    Returns
    -------
    PeelResult
        Rates (per time unit), fractions, the split times, the residual sum of squares, and
        whether the result is reliable (with the reasons when not).

    Raises
    ------
    DataError
        Bad inputs as for :func:`progress_variable`; ``pools``, ``min_points`` or
        ``min_fraction`` out of range.

    Examples
    --------
    Invented noise-free two-pool series (half-lives 3 and 30 days, fractions 0.4 and 0.6):

    >>> import numpy as np
    >>> t = np.array([0, 0.5, 1, 2, 3, 4, 6, 8, 10, 14, 18, 22, 28, 35, 42, 50, 60, 70, 80, 90])
    >>> k = np.log(2) / np.array([3.0, 30.0])
    >>> y = -12.0 - 12.0 * (0.4 * np.exp(-k[0] * t) + 0.6 * np.exp(-k[1] * t))
    >>> p = peel(t, y, -24.0, -12.0, pools=2)
    >>> p.reliable, np.round(p.half_lives, 1).tolist()
    (True, [3.0, 30.0])
    """
    ta, ya = check_pair(t, y)
    d0, deq = check_ends(delta0, delta_eq)
    n = _check_pools(pools)
    mp = _check_min_points(min_points)
    mf = _check_min_fraction(min_fraction, n)
    u = progress_variable(ta, ya, d0, deq).one_minus_F
    return _peel(ta, u, n, mp, mf)


def _check_min_points(min_points) -> int:
    if (
        isinstance(min_points, (bool, np.bool_))
        or not isinstance(min_points, numbers.Integral)
        or min_points < 2
    ):
        raise DataError(f"min_points must be an integer >= 2, got {show_value(min_points)}")
    return int(min_points)


def _check_min_fraction(min_fraction, n: int) -> float:
    mf = as_scalar(min_fraction, "min_fraction")
    if not 0 < mf < 1.0 / n:
        raise DataError(
            f"min_fraction must be > 0 and < 1/pools = {1.0 / n:g}, "
            f"got {show_value(min_fraction)}"
        )
    return mf


# --------------------------------------------------------------------------------------------
# starting values for the fitter
# --------------------------------------------------------------------------------------------


def starting_rates(t, y, delta0, delta_eq, pools, *, sd=None, n_grid=5) -> tuple:
    r"""Candidate starting rate vectors (fastest first) for a multi-start fit of ``pools``.

    Deterministic and fast (only small linear regressions). The candidates, in order:

    - one pool: the log-linear estimate of :func:`progress_rate` (if finite and > 0), then the
      ``n_grid`` grid rates one by one;
    - several pools: the :func:`peel` estimate (always present, possibly its fallback), then
      every strictly decreasing choice of ``pools`` rates from the grid
      (``comb(n_grid, pools)`` vectors, e.g. 10 pairs for 2 pools and 5 grid points).

    The grid is ``max(n_grid, pools)`` rates log-spaced from :math:`3/t_{min}` down to
    :math:`0.3/t_{max}` (:math:`t_{min}, t_{max}` the earliest and latest positive sample
    times; both 1 when there is none), so it spans rates from too fast to be seen after the
    first sample to too slow to be seen by the last one. Duplicates are dropped.

    These are starting values only; the fitted model is the estimator.

    Parameters
    ----------
    t, y : array-like of shape (n,)
        Times since the switch and tissue values.
    delta0, delta_eq : float
        Start and equilibrium values (must differ), e.g. from :func:`end_values`.
    pools : int
        Number of pools, 1 to 4.
    sd : float or array-like of shape (n,), optional
        1σ of each value (weights of the one-pool log-linear estimate).
    n_grid : int, default 5
        Number of grid rates (>= 2).

    Returns
    -------
    tuple of ndarray
        Each of shape (pools,), finite, > 0, strictly decreasing. At least one.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.array([0.0, 5, 10, 20, 40, 80])
    >>> y = -12.0 - 12.0 * np.exp(-0.05 * t)
    >>> starts = starting_rates(t, y, -24.0, -12.0, pools=2)
    >>> len(starts), all(s.shape == (2,) and s[0] > s[1] > 0 for s in starts)
    (11, True)
    """
    ta, ya = check_pair(t, y)
    d0, deq = check_ends(delta0, delta_eq)
    n = _check_pools(pools)
    s = check_sd(sd, ta.size)
    if (
        isinstance(n_grid, (bool, np.bool_))
        or not isinstance(n_grid, numbers.Integral)
        or n_grid < 2
    ):
        raise DataError(f"n_grid must be an integer >= 2, got {show_value(n_grid)}")
    tmin, tmax = _time_span(ta)
    grid = np.geomspace(3.0 / tmin, 0.3 / tmax, max(int(n_grid), n))
    pv = progress_variable(ta, ya, d0, deq, s)
    starts: list[np.ndarray] = []
    if n == 1:
        r = _rate(pv, True, False).rate
        if math.isfinite(r) and r > 0:
            starts.append(np.array([r]))
        starts.extend(np.array([g]) for g in grid)
    else:
        starts.append(_peel(ta, pv.one_minus_F, n, 2, 1e-3).rates)
        starts.extend(
            grid[list(c)] for c in itertools.combinations(range(grid.size), n)
        )
    arr = np.array(starts)
    same = np.all(np.abs(arr[:, None, :] - arr[None, :, :]) <= 1e-9 * arr[None, :, :], axis=2)
    first = ~np.any(np.tril(same, k=-1), axis=1)  # drop a candidate equal to an earlier one
    return tuple(arr[i].copy() for i in np.flatnonzero(first))
