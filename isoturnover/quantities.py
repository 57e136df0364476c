r"""Derived quantities of a natural parameter vector: time to a fraction of a change, mean
residence time, growth shares, and their gradients.

Pure functions of a :class:`~isoturnover.kinetics.TurnoverKinetics` and a parameter vector
``theta`` (in the order of ``kin.param_names``), so fits, profiles, bootstraps, MCMC and
planning all compute the same thing the same way.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize

__all__ = [
    "remaining_after_switch",
    "time_to",
    "incorporation_rates_positive",
    "time_to_grad",
    "mean_residence_time",
    "mean_residence_time_grad",
    "log_mass_ratio",
    "growth_share_at",
    "growth_share_instant",
]


def remaining_after_switch(kin, tau, theta):
    r"""Fraction of a step change still to come a time ``tau`` after the first switch.

    Parallel pools :math:`1 - F = \sum_i f_i e^{-\kappa_i\tau}` with
    :math:`\kappa_i = k_i (+k_g)`; the chain's two-step response; with a growth curve the
    old material left is further multiplied by :math:`W(s)/W(s+\tau)` (growth dilution,
    Hesslein et al. 1993; DESIGN §2). The lag is not applied.

    Parameters
    ----------
    kin : TurnoverKinetics
        The model (:class:`~isoturnover.kinetics.TurnoverKinetics`).
    tau : float or array-like
        Time since the first switch, in the data's time unit (days by default).
    theta : ndarray of shape (n_params,)
        Natural parameters in the order of ``kin.param_names`` (rates per time unit).

    Returns
    -------
    float or ndarray
        :math:`1 - F` (dimensionless), shaped like ``tau``.
    """
    rem = kin.remaining(tau, theta)
    if kin.growth_kind in ("curve", "curve_params"):
        s0 = float(kin.switch_times[0])
        tau = np.asarray(tau, dtype=float)
        lw = kin.log_mass(np.append(s0 + tau, s0), theta)
        rem = rem * np.exp(lw[-1] - lw[:-1]).reshape(np.shape(rem))
    return rem


def _incorporation_rates(kin, theta):
    ks = np.asarray(theta, dtype=float)[kin.rate_index]
    if kin.growth_rate_index is not None:
        ks = ks + theta[kin.growth_rate_index]
    return ks


def incorporation_rates_positive(kin, theta) -> bool:
    r"""Whether every incorporation rate of θ is positive and finite.

    The incorporation rate of pool (or chain step) i is :math:`\kappa_i = k_i` without
    growth and :math:`k_i + k_g` with exponential growth fitted jointly (Hesslein et al.
    1993: synthesis of new tissue is turnover plus growth, and cannot be negative). With a
    fitted growth curve the rates alone are checked (:math:`k_g(t)` varies in time).

    Parameters
    ----------
    kin : TurnoverKinetics
        The model (``fit.kinetics``).
    theta : array-like
        Natural parameters in the order of ``kin.param_names`` (rates per time unit).

    Returns
    -------
    bool
        True when every :math:`\kappa_i` is finite and > 0.
    """
    # plain floats: a handful of rates, checked in every evaluation of a profile
    g = 0.0 if kin.growth_rate_index is None else float(theta[kin.growth_rate_index])
    for i in kin.rate_index:
        k = float(theta[i]) + g
        if not (k > 0 and k < math.inf):
            return False
    return True


def time_to(kin, p: float, theta) -> float:
    r"""Time after the switch for the tissue to make a fraction ``p`` of a step change.

    One pool :math:`-\ln(1-p)/\kappa` (4.32 half-lives for p = 0.95; DESIGN §2); several
    parallel pools: the root of :math:`\sum_i f_i e^{-\kappa_i\tau} = 1 - p` by Newton's
    method from τ = 0 (monotone for a convex decreasing function); the chain, growth curves
    and any case Newton does not settle: the root of :math:`1 - F(\tau) = 1 - p` by Brent's
    method (``scipy.optimize.brentq``); plus the lag. :math:`\kappa_i = k_i (+k_g)`.

    Parameters
    ----------
    kin : TurnoverKinetics
        The model (:class:`~isoturnover.kinetics.TurnoverKinetics`).
    p : float
        Fraction of the change, in (0, 1) (0.5 gives the half-life of one pool).
    theta : ndarray of shape (n_params,)
        Natural parameters in the order of ``kin.param_names`` (rates per time unit).

    Returns
    -------
    float
        Time from the switch, in the data's time unit (days by default).
    """
    target = 1.0 - p
    lag = theta[kin.lag_index] if kin.lag_index is not None else 0.0
    ks = _incorporation_rates(kin, theta)
    if kin.structure == "parallel" and kin.growth_kind in (None, "exponential"):
        if len(ks) == 1:
            return -math.log(target) / float(ks[0]) + lag
        # profiles ask for τ at the same θ several times (the quantity, then its gradient)
        # and at nearby θ: the last root of this model and p is kept on the kinetics'
        # memo, returned for the same θ and the start of Newton's method otherwise
        th = np.asarray(theta, dtype=float)
        key, raw = ("time_to", float(p)), th.tobytes()
        last = kin.memo.get(key)
        if last is not None and last[0] == raw:
            return last[1]
        tau = _parallel_root(np.asarray(ks, dtype=float), th[kin.fraction_index], target,
                             None if last is None else last[2])
        if tau is not None:
            kin.memo[key] = (raw, tau + lag, tau)
            return tau + lag

    def g(tau):
        return float(remaining_after_switch(kin, np.array([tau]), theta)[0]) - target

    k_min = float(np.min(ks))
    if not k_min > 0:
        return math.inf  # a pool that never turns over: the fraction is never reached
    hi = 1.0 / k_min
    for _ in range(1100):  # 2^1100 beyond 1/k_min overflows: the change never completes
        if not g(hi) > 0:
            # a bracket up to 2^1100/k_min: bisection alone would need about 1,200 steps
            return optimize.brentq(g, 0.0, hi, xtol=1e-12, rtol=1e-12, maxiter=2000) + lag
        hi *= 2
    return math.inf


def _parallel_root(ks, f, target, tau0=None):
    r"""Root of :math:`R(\tau) = \sum_i f_i e^{-k_i \tau} = \text{target}` by Newton's method.

    R is convex and decreasing, so Newton's iterates from any :math:`\tau_0` with
    :math:`R(\tau_0) \ge \text{target}` (:math:`\tau = 0`, where :math:`R = 1`, or a
    nearby model's root ``tau0`` when it lies there) increase monotonically to the root
    (the tangent of a convex function lies below it). Returns None when the iteration does
    not settle (a pool of rate ~0 holding more than ``target``), and the caller falls back
    to bracketing.
    """
    kl = [float(v) for v in ks]
    fl = [float(v) for v in f]
    if any(v < 0 for v in fl) or not 0 < target < 1:
        return None
    # plain floats: a handful of pools, where numpy's per-call cost would dominate
    pairs = list(zip(fl, kl))
    tau = 0.0
    if tau0 is not None and 0.0 < tau0 < math.inf and \
            sum(fi * math.exp(-ki * tau0) for fi, ki in pairs) >= target:
        tau = tau0  # left of the root: the same monotone iteration, a few steps from it
    for _ in range(200):
        R = 0.0
        dR = 0.0
        for fi, ki in pairs:
            e = fi * math.exp(-ki * tau)
            R += e
            dR -= ki * e
        if not (dR < 0 and math.isfinite(R)):
            return None
        step = (R - target) / -dR
        tau += step
        if abs(step) <= 1e-14 * max(tau, 1e-300):
            return tau
    return None


def time_to_grad(kin, p: float, tau_total: float, theta) -> np.ndarray:
    r"""Gradient of :func:`time_to` in natural parameters (parallel pools, no growth curve).

    With :math:`R(\tau) = \sum_i f_i e^{-\kappa_i \tau} = 1 - p`, the implicit function
    theorem gives :math:`\partial\tau/\partial\theta = -(\partial R/\partial\theta)/
    (\partial R/\partial\tau)`; the lag adds 1.

    Parameters
    ----------
    kin : TurnoverKinetics
        The model (:class:`~isoturnover.kinetics.TurnoverKinetics`).
    p : float
        Fraction of the change, in (0, 1).
    tau_total : float
        The value of :func:`time_to` at ``theta`` (lag included), in the data's time unit.
    theta : ndarray of shape (n_params,)
        Natural parameters in the order of ``kin.param_names`` (rates per time unit).

    Returns
    -------
    ndarray of shape (n_params,)
        :math:`\partial\tau/\partial\theta` (time unit per unit of each parameter).
    """
    g = np.zeros(theta.size)
    lag = theta[kin.lag_index] if kin.lag_index is not None else 0.0
    tau = tau_total - lag
    ks = _incorporation_rates(kin, theta).astype(float)
    f = theta[kin.fraction_index]
    e = np.exp(-ks * tau)
    dR_dtau = -float(np.sum(f * ks * e))
    dR_dk = -f * tau * e
    g[kin.rate_index] = -dR_dk / dR_dtau
    g[kin.fraction_index] = -e / dR_dtau
    if kin.growth_rate_index is not None:
        g[kin.growth_rate_index] = -float(np.sum(dR_dk)) / dR_dtau
    if kin.lag_index is not None:
        g[kin.lag_index] = 1.0
    return g


_GL_NODES, _GL_WEIGHTS = np.polynomial.legendre.leggauss(20)


def _integral_of_remaining(kin, v, upper: float) -> float:
    r""":math:`\int_0^{u} (1 - F)\,d\tau` by a fixed composite Gauss–Legendre rule.

    Panels: :math:`[0, 10^{-6}u]` and 36 geometric panels up to :math:`u`, 20 nodes each,
    evaluated in one vectorised call (the response is smooth within each panel; checked
    against adaptive ``scipy.integrate.quad`` in tests/test_growth_dilution.py).
    """
    edges = np.concatenate([[0.0], np.geomspace(max(upper * 1e-6, 1e-12), upper, 37)])
    half = 0.5 * np.diff(edges)
    mid = 0.5 * (edges[1:] + edges[:-1])
    x = (mid[:, None] + half[:, None] * _GL_NODES[None, :]).ravel()
    w = (half[:, None] * _GL_WEIGHTS[None, :]).ravel()
    return float(np.dot(w, remaining_after_switch(kin, x, v)))


def mean_residence_time(kin, theta, span: float = 1.0, catabolic: bool = False) -> float:
    r"""Mean residence time of the step response, :math:`\int_0^\infty (1-F)\,d\tau`.

    Parallel pools :math:`\sum_i f_i/\kappa_i`; chain :math:`1/k_1 + 1/k_2` (the integrals
    of the exponential responses, by hand); with a growth curve the integral is taken
    numerically (a fixed composite Gauss–Legendre rule) from the first switch, and is
    infinite when the old material never leaves; plus the lag.
    :math:`\kappa_i = k_{d,i} + k_g` with growth (the incorporation residence time);
    ``catabolic=True`` leaves growth out (:math:`\kappa_i = k_{d,i}`: the residence time
    against catabolic replacement alone, one pool :math:`1/k_d`).

    Parameters
    ----------
    kin : TurnoverKinetics
        The model (:class:`~isoturnover.kinetics.TurnoverKinetics`).
    theta : ndarray of shape (n_params,)
        Natural parameters in the order of ``kin.param_names`` (rates per time unit).
    span : float, default=1.0
        The sampling span (time unit); with a growth curve the numerical integral looks at
        most :math:`10^6` spans ahead.
    catabolic : bool, default=False
        From the catabolic rates alone (growth left out).

    Returns
    -------
    float
        Mean residence time, in the data's time unit (days by default); ``inf`` when old
        material stays for good.
    """
    v = np.asarray(theta, dtype=float)
    ks = v[kin.rate_index] if catabolic else _incorporation_rates(kin, v)
    if kin.growth_kind in ("curve", "curve_params") and not catabolic:
        def rem(x):
            return float(remaining_after_switch(kin, np.array([x]), v)[0])

        upper = 10.0 / max(float(np.min(ks)), 1e-300)
        span = max(float(span), 1.0)
        upper = min(upper, 1e4 * span)
        while rem(upper) > 1e-10 and upper < 1e6 * span:
            upper *= 4.0
        if rem(upper) > 1e-6:
            m = math.inf
        else:
            m = _integral_of_remaining(kin, v, upper)
    else:
        with np.errstate(divide="ignore", invalid="ignore"):  # a rate of 0: inf
            if kin.structure == "chain":
                m = float(np.sum(1.0 / ks))
            else:
                m = float(np.sum(v[kin.fraction_index] / ks))
    if kin.lag_index is not None:
        m += float(v[kin.lag_index])
    return m


def mean_residence_time_grad(kin, theta, catabolic: bool = False) -> np.ndarray:
    r"""Gradient of :func:`mean_residence_time` in natural parameters (no growth curve).

    :math:`\partial/\partial k_i = -f_i/\kappa_i^2`, :math:`\partial/\partial f_i =
    1/\kappa_i` (chain: :math:`-1/k_i^2`), :math:`\partial/\partial k_g = \sum_i
    \partial/\partial k_i`, :math:`\partial/\partial\,\mathrm{lag} = 1` (by hand).

    Parameters
    ----------
    kin : TurnoverKinetics
        The model (:class:`~isoturnover.kinetics.TurnoverKinetics`).
    theta : ndarray of shape (n_params,)
        Natural parameters in the order of ``kin.param_names`` (rates per time unit).
    catabolic : bool, default=False
        Of the catabolic residence time (growth left out).

    Returns
    -------
    ndarray of shape (n_params,)
        The gradient (time unit per unit of each parameter).
    """
    theta = np.asarray(theta, dtype=float)
    g = np.zeros(theta.size)
    ks = theta[kin.rate_index] if catabolic else _incorporation_rates(kin, theta)
    if kin.structure == "chain":
        dk = -1.0 / ks**2
    else:
        f = theta[kin.fraction_index]
        dk = -f / ks**2
        g[kin.fraction_index] = 1.0 / ks
    g[kin.rate_index] = dk
    if kin.growth_rate_index is not None and not catabolic:
        g[kin.growth_rate_index] = float(np.sum(dk))
    if kin.lag_index is not None:
        g[kin.lag_index] = 1.0
    return g


def log_mass_ratio(kin, t0: float, t1: float, theta) -> float:
    """Log mass ratio :math:`\\ln W(t_1) - \\ln W(t_0)` under the model's growth.

    Parameters
    ----------
    kin : TurnoverKinetics
        The model (:class:`~isoturnover.kinetics.TurnoverKinetics`).
    t0, t1 : float
        The two times, in the data's time unit.
    theta : ndarray of shape (n_params,)
        Natural parameters in the order of ``kin.param_names`` (rates per time unit).

    Returns
    -------
    float
        :math:`\\ln(W(t_1)/W(t_0))` (0 without growth).
    """
    lw = kin.log_mass(np.array([t0, t1], dtype=float), theta)
    return float(lw[1] - lw[0])


# Gauss–Legendre nodes on [0, 1] and panels that halve towards the switch: the integrand
# of the growth share decays like e^{-k τ}, so the panels near τ = 0 are the narrow ones
_GL_X, _GL_W = np.polynomial.legendre.leggauss(24)
_GL_X, _GL_W = 0.5 * (_GL_X + 1.0), 0.5 * _GL_W
_PANEL_EDGES = np.r_[0.0, 2.0 ** -np.arange(12, -1, -1.0)]


def _share_parts(kin, T: float, theta):
    r"""(growth part, whole change) of the tissue's change up to ``T``, both per unit of
    the total change :math:`\delta_{in} - \delta_0`; None at or before the switch."""
    s0 = float(kin.switch_times[0])
    if kin.lag_index is not None:
        s0 += float(theta[kin.lag_index])
    tau = T - s0
    if tau <= 0:
        return None
    k = np.asarray(theta[kin.rate_index], dtype=float)
    f = np.asarray(theta[kin.fraction_index], dtype=float) if kin.fraction_index else \
        np.ones(1)
    D_T = math.exp(-log_mass_ratio(kin, s0, T, theta))  # W(s)/W(T)
    whole = 1.0 - D_T * float(f @ np.exp(-k * tau))
    if kin.growth_rate_index is not None:  # exponential growth: closed form
        kg = float(theta[kin.growth_rate_index])
        kappa = k + kg
        with np.errstate(divide="ignore", invalid="ignore"):
            integral = np.where(np.abs(kappa * tau) > 1e-12,
                                -np.expm1(-kappa * tau) / kappa, tau)
        return kg * float(f @ integral), whole
    # a growth curve: composite Gauss–Legendre on panels [τ 2^-(j+1), τ 2^-j]
    a, b = _PANEL_EDGES[:-1] * tau, _PANEL_EDGES[1:] * tau
    x = (a[:, None] + (b - a)[:, None] * _GL_X[None, :]).ravel()  # times since s
    wq = ((b - a)[:, None] * _GL_W[None, :]).ravel()
    t = s0 + x
    lw = kin.log_mass(np.r_[s0, t], theta)
    D = np.exp(lw[0] - lw[1:])  # W(s)/W(t)
    kg = kin.growth_rate(t, theta)
    integrand = kg * D * (f @ np.exp(-np.outer(k, x)))
    return float(wq @ integrand), whole


def growth_share_at(kin, T: float, theta) -> float:
    r"""Share of the tissue's isotopic change up to ``T`` carried by the growth flux.

    Each pool follows :math:`d\delta_i/dt = (k_i + k_g(t))(\delta_{in} - \delta_i)`
    with :math:`k_g = d\ln W/dt` (Hesslein et al. 1993, *Can. J. Fish. Aquat. Sci.*
    50:2071–2076, journal details from memory: new tissue is laid down at the diet's
    value, old tissue is replaced at the catabolic rate). The share is the part of the
    change due to the growth term,

    .. math::

        \text{share}(T) = \frac{\int_s^T k_g(t) \sum_i f_i (\delta_{in} -
        \delta_i(t))\,dt}{\delta(T) - \delta(s)}
        = \frac{\int_s^T k_g(t) D(t) \sum_i f_i e^{-k_i (t-s)}\,dt}
        {1 - D(T) \sum_i f_i e^{-k_i (T-s)}},

    with :math:`D(t) = W(s)/W(t)` and :math:`s` the first switch (plus the lag). For one
    pool and exponential growth it equals :math:`k_g/(k_g + k_d)` at every T (Hesslein et
    al. 1993); for exponential growth the integral is in closed form, for a growth curve
    it is computed by composite Gauss–Legendre quadrature (24 nodes on 13 panels that
    halve towards the switch; relative error below 1e-10 for rates up to 1e4 per span).

    Parameters
    ----------
    kin : TurnoverKinetics
        The model (:class:`~isoturnover.kinetics.TurnoverKinetics`).
    T : float
        Time up to which the share is taken, in the data's time unit.
    theta : ndarray of shape (n_params,)
        Natural parameters in the order of ``kin.param_names`` (rates per time unit).

    Returns
    -------
    float
        The share (dimensionless, 0–1 while the animal grows); NaN at or before the
        switch, or when there is no change.
    """
    parts = _share_parts(kin, T, theta)
    if parts is None:
        return math.nan
    growth, whole = parts
    return growth / whole if whole != 0 and math.isfinite(whole) else math.nan


def growth_share_instant(kin, t, theta) -> np.ndarray:
    r"""Instantaneous share of the rate of isotopic change carried by the growth flux.

    .. math::

        \frac{k_g(t) \sum_i f_i (\delta_{in} - \delta_i)}{d\delta/dt}
        = \frac{k_g(t) \sum_i f_i e^{-k_i (t-s)}}
        {\sum_i f_i (k_i + k_g(t)) e^{-k_i (t-s)}}

    (the dilution factor :math:`W(s)/W(t)` cancels). For one pool it is
    :math:`k_g(t)/(k_g(t) + k_d)`.

    Parameters
    ----------
    kin : TurnoverKinetics
        The model.
    t : array-like
        Times, in the data's time unit.
    theta : ndarray of shape (n_params,)
        Natural parameters.

    Returns
    -------
    ndarray
        The share at each time; NaN at or before the switch.
    """
    t = np.atleast_1d(np.asarray(t, dtype=float))
    s0 = float(kin.switch_times[0])
    if kin.lag_index is not None:
        s0 += float(theta[kin.lag_index])
    x = t - s0
    k = np.asarray(theta[kin.rate_index], dtype=float)
    f = np.asarray(theta[kin.fraction_index], dtype=float) if kin.fraction_index else \
        np.ones(1)
    kg = kin.growth_rate(t, theta) * np.ones_like(t)
    E = f[:, None] * np.exp(-np.outer(k, np.maximum(x, 0.0)))
    num = kg * E.sum(axis=0)
    den = ((k[:, None] + kg[None, :]) * E).sum(axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = num / den
    return np.where(x > 0, out, np.nan)
