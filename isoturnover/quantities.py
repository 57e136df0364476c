r"""Derived quantities of a natural parameter vector: time to a fraction of a change, mean
residence time, growth shares, and their gradients.

Pure functions of a :class:`~isoturnover.kinetics.TurnoverKinetics` and a parameter vector
``theta`` (in the order of ``kin.param_names``), so fits, profiles, bootstraps, MCMC and
planning all compute the same thing the same way.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import integrate, optimize

__all__ = [
    "remaining_after_switch",
    "time_to",
    "time_to_grad",
    "mean_residence_time",
    "mean_residence_time_grad",
    "log_mass_ratio",
    "growth_share_at",
]


def remaining_after_switch(kin, tau, theta):
    r"""1 − F a time ``tau`` after the first switch (no lag), growth curves included.

    Parallel pools :math:`\sum_i f_i e^{-\kappa_i\tau}` with :math:`\kappa_i = k_i (+k_g)`;
    the chain's two-step response; with a growth curve the old material left is further
    multiplied by :math:`W(s)/W(s+\tau)` (DESIGN §2).
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


def time_to(kin, p: float, theta) -> float:
    r"""Time after the switch for the tissue to make a fraction ``p`` of a step change.

    One pool :math:`-\ln(1-p)/\kappa` (4.32 half-lives for p = 0.95); several pools, the
    chain and growth curves: the root of :math:`1 - F(\tau) = 1 - p` (Brent's method);
    plus the lag.
    """
    target = 1.0 - p
    lag = theta[kin.lag_index] if kin.lag_index is not None else 0.0
    ks = _incorporation_rates(kin, theta)
    if kin.structure == "parallel" and kin.growth_kind in (None, "exponential"):
        if len(ks) == 1:
            return -math.log(target) / float(ks[0]) + lag
        tau = _parallel_root(np.asarray(ks, dtype=float),
                             np.asarray(theta, dtype=float)[kin.fraction_index], target)
        if tau is not None:
            return tau + lag

    def g(tau):
        return float(remaining_after_switch(kin, np.array([tau]), theta)[0]) - target

    hi = 1.0 / float(np.min(ks))
    while g(hi) > 0:
        hi *= 2
    return optimize.brentq(g, 0.0, hi, xtol=1e-12, rtol=1e-12) + lag


def _parallel_root(ks, f, target):
    r"""Root of :math:`R(\tau) = \sum_i f_i e^{-k_i \tau} = \text{target}` by Newton's method.

    R is convex and decreasing, so Newton's iterates from :math:`\tau = 0` (where
    :math:`R = 1 > \text{target}`) increase monotonically to the root (the tangent of a
    convex function lies below it). Returns None when the iteration does not settle (a pool
    of rate ~0 holding more than ``target``), and the caller falls back to bracketing.
    """
    if np.any(f < 0) or not 0 < target < 1:
        return None
    tau = 0.0
    for _ in range(200):
        e = f * np.exp(-ks * tau)
        R = float(e.sum())
        dR = -float((ks * e).sum())
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


def mean_residence_time(kin, theta, span: float = 1.0) -> float:
    r"""Mean residence time of the step response, :math:`\int_0^\infty (1-F)\,d\tau`.

    Parallel pools :math:`\sum_i f_i/\kappa_i`; chain :math:`1/k_1 + 1/k_2`; with a growth
    curve the integral is taken numerically (``scipy.integrate.quad``) from the first
    switch, and is infinite when the old material never leaves; plus the lag. ``span`` (the
    sampling span) sets how far the numerical integral may look.
    """
    v = np.asarray(theta, dtype=float)
    ks = _incorporation_rates(kin, v)
    if kin.growth_kind in ("curve", "curve_params"):
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
            pts = np.geomspace(max(upper * 1e-6, 1e-12), upper, 12)
            m = float(integrate.quad(rem, 0.0, upper, points=pts[:-1], limit=400)[0])
    elif kin.structure == "chain":
        m = float(np.sum(1.0 / ks))
    else:
        m = float(np.sum(v[kin.fraction_index] / ks))
    if kin.lag_index is not None:
        m += float(v[kin.lag_index])
    return m


def mean_residence_time_grad(kin, theta) -> np.ndarray:
    """Gradient of :func:`mean_residence_time` in natural parameters (no growth curve)."""
    g = np.zeros(theta.size)
    ks = _incorporation_rates(kin, theta).astype(float)
    if kin.structure == "chain":
        dk = -1.0 / ks**2
    else:
        f = theta[kin.fraction_index]
        dk = -f / ks**2
        g[kin.fraction_index] = 1.0 / ks
    g[kin.rate_index] = dk
    if kin.growth_rate_index is not None:
        g[kin.growth_rate_index] = float(np.sum(dk))
    if kin.lag_index is not None:
        g[kin.lag_index] = 1.0
    return g


def log_mass_ratio(kin, t0: float, t1: float, theta) -> float:
    """ln W(t1) − ln W(t0) under the model's growth."""
    lw = kin.log_mass(np.array([t0, t1], dtype=float), theta)
    return float(lw[1] - lw[0])


def growth_share_at(kin, T: float, theta) -> float:
    """Tissue growth share up to T after the first switch (DESIGN §2)."""
    s0 = float(kin.switch_times[0])
    if kin.lag_index is not None:
        s0 += float(theta[kin.lag_index])
    tau = T - s0
    if tau <= 0:
        return math.nan
    ratio = math.exp(-log_mass_ratio(kin, s0, T, theta))  # W(s)/W(T)
    k = theta[kin.rate_index]
    f = theta[kin.fraction_index]
    growth_alone = 1.0 - ratio
    whole = 1.0 - ratio * float(np.sum(f * np.exp(-k * tau)))
    return growth_alone / whole if whole > 0 else math.nan
