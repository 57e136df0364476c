r"""Accretionary tissues: segments of hair, whiskers, feathers and claws.

Pure numpy (and ``scipy.special.exprel``): no lmfit, no pandas import. A growing inert
tissue records its precursor at formation time; a segment cut from it holds the precursor's
value averaged over the time the segment took to grow.

Geometry. A segment lies at distances :math:`[a, b]` (``segment_start`` < ``segment_end``,
in any length unit) from the **base** (root, follicle, the growing end) of a tissue sampled
at time :math:`T`. Tissue leaves the formation zone ``formation_lag`` (:math:`\ell \ge 0`,
time units) after it was formed from the precursor, and the emerged tissue grows at
:math:`g(t) > 0` length per time unit. With the cumulative growth
:math:`G(t) = \int_{t_0}^{t} g(u)\,du`, the material at distance :math:`x` from the base was
formed at :math:`t_f(x) = G^{-1}(G(T - \ell) - x)`, so the segment was formed during

.. math:: [\,G^{-1}(G(T-\ell) - b),\; G^{-1}(G(T-\ell) - a)\,],

which for a constant rate is :math:`[T - \ell - b/g,\; T - \ell - a/g]`. Distances from the
**tip** (``origin="tip"``) are turned into distances from the base with the tissue's length
:math:`\Lambda` at sampling: :math:`[a, b] \to [\Lambda - b, \Lambda - a]`. A piecewise rate is
a table of rows (time, rate): rate :math:`r_i` applies from :math:`\tau_i` until
:math:`\tau_{i+1}`, the first rate also before :math:`\tau_0` and the last after the last
row.

Forward model. The segment value is the exact time average of the point model
(:class:`~isoturnover.kinetics.TurnoverKinetics`) over the formation interval
:math:`[t_1, t_2]`, :math:`\Delta = t_2 - t_1`. The point model is a superposition of step
responses :math:`R_j(t) = H(t - s_j)(1 - \Phi(t - s_j))` at the step times :math:`s_j`
(switches plus the lag), so the average is
:math:`\bar\delta = L_0 + \sum_j (L_j - L_{j-1})\,\bar R_j` with, for
:math:`u_{1,2} = \max(t_{1,2} - s_j, 0)` and :math:`w = u_2 - u_1`,

.. math::

    \bar R_j = \frac{w}{\Delta} - \frac{1}{\Delta}\int_{u_1}^{u_2} \Phi(u)\,du .

Parallel pools, :math:`\Phi = \sum_i f_i e^{-\kappa_i u}` (:math:`\kappa_i = k_i + k_g`):
:math:`\int_{u_1}^{u_2} e^{-\kappa u}du = w\,e^{-\kappa u_1}\psi(\kappa w)` with
:math:`\psi(x) = (1 - e^{-x})/x` (``exprel(-x)``, exact for small :math:`\kappa w`). The
precursor–product chain, :math:`\Phi_c = (a e^{-b u} - b e^{-a u})/(a - b)` (:math:`a \ge b`
its rates), has the antiderivative

.. math:: A(u) = -e^{-b u}\Big(\frac1b + \frac1a + \frac ba\,u\,\psi((a-b)u)\Big),

exact through :math:`a = b`; it is used when :math:`b w \ge 10^{-2}`. For shorter intervals
the two-exponential form :math:`(a I_b - b I_a)/(a - b)` is used when :math:`a w \ge 0.05`
(then :math:`a > 5b`, no cancellation), and otherwise 8-point Gauss–Legendre quadrature of
the stable :math:`\Phi_c` (exact to rounding: the integrand is entire and :math:`aw < 0.05`).
The Jacobian holds the partial derivatives of the same formulas; the lag's is
:math:`\partial\bar R_j/\partial s_j = -(R_j(t_2) - R_j(t_1))/\Delta`.
The atom-fraction scale and growth curves have no closed-form average and are refused.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import exprel

from .conventions import check_choice, unit_word
from .errors import DataError
from .kinetics import TurnoverKinetics
from .responses import chain_terms

__all__ = [
    "ORIGINS",
    "GrowthSchedule",
    "growth_schedule",
    "formation_intervals",
    "segment_means",
    "check_segment_kinetics",
    "SegmentKinetics",
    "point_kinetics",
    "check_length_unit",
    "segment_data_text",
    "segment_arrays",
    "resolution_notes",
    "SegmentPredictions",
]

#: Where segment distances are measured from.
ORIGINS = ("base", "tip")

_GL_X, _GL_W = np.polynomial.legendre.leggauss(8)
# psi'(x) = sum_{n>=1} (-1)^n n x^{n-1}/(n+1)!, highest power first, n <= 12
_DPSI_SERIES = [(-1) ** n * n / math.factorial(n + 1) for n in range(12, 0, -1)]


# ----------------------------------------------------------------------------------------
# Numerically careful pieces
# ----------------------------------------------------------------------------------------
def _psi(x):
    """psi(x) = (1 - exp(-x))/x, exact near 0 (``scipy.special.exprel(-x)``)."""
    return exprel(-np.asarray(x, dtype=float))


def _dpsi(x):
    """psi'(x) = (e^{-x}(1 + x) - 1)/x^2; a series for |x| < 0.1 (no cancellation).

    At |x| >= 0.1 the direct form loses at most a factor 1/(x^2/2) = 200 to cancellation
    (relative error < 1e-13); the series' remainder below 0.1 is < 0.1^12/14! < 1e-22."""
    x = np.asarray(x, dtype=float)
    small = np.abs(x) < 0.1
    xs = np.where(small, 1.0, x)
    out = (np.exp(-xs) * (1.0 + xs) - 1.0) / (xs * xs)
    if small.any():
        z = x[small]
        acc = np.full_like(z, _DPSI_SERIES[0])
        for c in _DPSI_SERIES[1:]:
            acc *= z
            acc += c
        out[small] = acc
    return out


# ----------------------------------------------------------------------------------------
# Geometry: segments to formation intervals
# ----------------------------------------------------------------------------------------
class GrowthSchedule:
    r"""A tissue's growth rate in time: constant or piecewise constant.

    Parameters
    ----------
    times : ndarray of shape (m,)
        Times (data's time unit) from which each rate applies, increasing.
    rates : ndarray of shape (m,)
        Growth rates (length per time unit), > 0. The first also applies before
        ``times[0]``, the last after ``times[-1]``.

    Notes
    -----
    Cumulative growth :math:`G(t) = C_i + r_i (t - \tau_i)` on :math:`[\tau_i, \tau_{i+1})`,
    :math:`C_i = \sum_{j<i} r_j(\tau_{j+1} - \tau_j)`; :math:`G^{-1}` is piecewise linear too.
    """

    def __init__(self, times, rates):
        self.times = np.asarray(times, dtype=float)
        self.rates = np.asarray(rates, dtype=float)
        self.cumulative_at = np.r_[0.0, np.cumsum(self.rates[:-1] * np.diff(self.times))]

    def cumulative(self, t):
        """Cumulative growth :math:`G(t)` (length), 0 at the first row's time.

        Parameters
        ----------
        t : array-like
            Times (data's time unit).

        Returns
        -------
        ndarray
            :math:`G(t)`, shaped like ``t``.
        """
        t = np.asarray(t, dtype=float)
        i = np.clip(np.searchsorted(self.times, t, side="right") - 1, 0, self.times.size - 1)
        return self.cumulative_at[i] + self.rates[i] * (t - self.times[i])

    def inverse(self, g):
        """The time :math:`G^{-1}(g)` at which the cumulative growth reached ``g``.

        Parameters
        ----------
        g : array-like
            Cumulative growth (length).

        Returns
        -------
        ndarray
            Times (data's time unit), shaped like ``g``.
        """
        g = np.asarray(g, dtype=float)
        i = np.clip(np.searchsorted(self.cumulative_at, g, side="right") - 1, 0,
                    self.times.size - 1)
        return self.times[i] + (g - self.cumulative_at[i]) / self.rates[i]


def growth_schedule(growth_rate, name: str = "growth_rate") -> GrowthSchedule:
    """A :class:`GrowthSchedule` from a number or a table of (time, rate).

    Parameters
    ----------
    growth_rate : float, array-like of shape (m, 2), mapping or DataFrame
        A constant rate (length per time unit, > 0), or rows (time, rate): a 2-column array,
        a list of pairs, or a table with columns ``time`` and ``rate``.
    name : str, default="growth_rate"
        Name of the argument, for messages.

    Returns
    -------
    GrowthSchedule

    Raises
    ------
    DataError
        For a missing, non-finite or non-positive rate, a table that is not (time, rate)
        rows, or times that do not increase.
    """
    if growth_rate is None:
        raise DataError(f"'{name}' is needed for segments: the tissue's growth rate (length "
                        "per time unit), a number or a table of (time, rate)")
    if hasattr(growth_rate, "columns") or isinstance(growth_rate, dict):
        try:
            times, rates = growth_rate["time"], growth_rate["rate"]
        except KeyError:
            raise DataError(f"'{name}' as a table needs columns 'time' and 'rate'") from None
        arr = np.column_stack([np.asarray(times, dtype=float), np.asarray(rates, dtype=float)])
    else:
        try:
            arr = np.asarray(growth_rate, dtype=float)
        except (TypeError, ValueError):
            raise DataError(f"'{name}' must be a number or rows (time, rate); got "
                            f"{growth_rate!r:.80}") from None
    if arr.ndim == 0:
        arr = np.array([[0.0, float(arr)]])
    if arr.ndim != 2 or arr.shape[1] != 2 or arr.shape[0] < 1:
        raise DataError(f"'{name}' must be a number or rows (time, rate); got an array of "
                        f"shape {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise DataError(f"'{name}' must be finite; a rate or time is not (an infinite time "
                        "or rate would place segments at -inf or +inf)")
    if np.any(arr[:, 1] <= 0):
        raise DataError(f"'{name}' must be > 0 (length per time unit); got "
                        f"{float(arr[np.argmax(arr[:, 1] <= 0), 1]):g}")
    if np.any(np.diff(arr[:, 0]) <= 0):
        raise DataError(f"'{name}': the times of the table must increase; got "
                        f"{arr[:, 0].tolist()}")
    return GrowthSchedule(arr[:, 0], arr[:, 1])


def _finite(name, v, n=None):
    try:
        a = np.asarray(v, dtype=float)
    except (TypeError, ValueError):
        raise DataError(f"'{name}' must be numbers; got {v!r:.80}") from None
    if n is not None and a.ndim == 0:
        a = np.full(n, float(a))
    a = np.atleast_1d(a).ravel() if a.ndim else a
    if n is not None and a.size != n:
        raise DataError(f"'{name}' must have {n} values (one per segment); got {a.size}")
    if not np.all(np.isfinite(a)):
        raise DataError(f"'{name}' must be finite; got {int((~np.isfinite(a)).sum())} "
                        "non-finite value(s) (a segment cannot be formed at -inf or +inf)")
    return a


def formation_intervals(segment_start, segment_end, sample_time, growth_rate, *,
                        formation_lag=0.0, origin="base", tissue_length=None):
    r"""Formation interval of each segment (see the module docstring for the geometry).

    Parameters
    ----------
    segment_start, segment_end : array-like of shape (n,)
        Distances of each segment's ends from the ``origin`` (any length unit, the unit of
        ``growth_rate``); ``segment_end > segment_start``.
    sample_time : float or array-like of shape (n,)
        Time the tissue was sampled (data's time unit, from the experiment's origin).
    growth_rate : float or table of (time, rate)
        Growth rate of the tissue (length per time unit), see :func:`growth_schedule`.
    formation_lag : float, default=0.0
        Time (≥ 0) between formation from the precursor and emergence at the base.
    origin : {"base", "tip"}, default="base"
        Distances measured from the base (growing end) or from the tip (oldest end).
    tissue_length : float or array-like, optional
        Length of the tissue at sampling (needed with ``origin="tip"``).

    Returns
    -------
    (ndarray, ndarray)
        Start and end of each formation interval (data's time unit):
        :math:`t_1 = G^{-1}(G(T-\ell) - b)`, :math:`t_2 = G^{-1}(G(T-\ell) - a)`; for a
        constant rate :math:`T - \ell - b/g` and :math:`T - \ell - a/g`.

    Raises
    ------
    DataError
        Naming the argument: ``segment_end <= segment_start``, non-finite values, a rate
        ≤ 0, a negative ``formation_lag``, ``origin="tip"`` without ``tissue_length``, or a
        segment lying beyond the base (a negative distance from it: formed after the
        sampling time).
    """
    origin = check_choice("origin", origin, ORIGINS)
    a = _finite("segment_start", segment_start)
    a = np.atleast_1d(a)
    b = _finite("segment_end", segment_end, a.size)
    T = _finite("sample_time", sample_time, a.size)
    lag = _finite("formation_lag", formation_lag)
    if lag.ndim or lag < 0:
        raise DataError(f"'formation_lag' must be one number >= 0 (time units); got "
                        f"{formation_lag!r}")
    bad = np.flatnonzero(b <= a)
    if bad.size:
        i = int(bad[0])
        raise DataError(f"'segment_end' must be greater than 'segment_start'; got "
                        f"{b[i]:g} <= {a[i]:g} at position {i}")
    if origin == "tip":
        if tissue_length is None:
            raise DataError("origin='tip' needs 'tissue_length' (the tissue's length at "
                            "sampling) to place the segments from the base")
        length = _finite("tissue_length", tissue_length, a.size)
        a, b = length - b, length - a
        what = "'tissue_length' - 'segment_end'"
    else:
        what = "'segment_start'"
    bad = np.flatnonzero(a < 0)
    if bad.size:
        i = int(bad[0])
        raise DataError(f"segment at position {i} lies beyond the base ({what} = {a[i]:g} "
                        "< 0): it would have formed after the sampling time")
    sched = growth_schedule(growth_rate)
    g_end = sched.cumulative(T - float(lag))
    return sched.inverse(g_end - b), sched.inverse(g_end - a)


# ----------------------------------------------------------------------------------------
# The exact segment averages
# ----------------------------------------------------------------------------------------
def check_segment_kinetics(kin) -> None:
    """Refuse a kinetic model whose segment average has no closed form.

    Parameters
    ----------
    kin : TurnoverKinetics
        The point model.

    Raises
    ------
    DataError
        For ``scale="atom_fraction"`` (δ is not linear in the pools' atom fractions) or a
        growth curve (``growth`` other than None or ``"exponential"``).
    """
    if not isinstance(kin, TurnoverKinetics):
        raise DataError(f"segments need a TurnoverKinetics; got {type(kin).__name__}")
    if kin.scale != "delta":
        raise DataError("record='segments' needs scale='delta': on the atom-fraction scale the "
                        "segment average has no closed form")
    if kin.growth_kind not in (None, "exponential"):
        raise DataError("record='segments' needs growth=None or 'exponential': with a growth "
                        "curve the segment average has no closed form")


def _chain_integral(u1, w, ka, kb):
    """∫_{u1}^{u1+w} Φ_c du and its derivatives in (ka, kb), elementwise (flat arrays)."""
    swap = kb > ka
    a, b = (kb, ka) if swap else (ka, kb)
    u2 = u1 + w
    P = np.empty_like(w)
    Pa = np.empty_like(w)
    Pb = np.empty_like(w)
    r2 = b * w >= 1e-2
    r1 = ~r2 & (a * w >= 0.05)
    r3 = ~(r1 | r2)
    x = a - b
    if np.any(r2):  # antiderivative, stable through a = b
        parts = []
        for tau in (u2[r2], u1[r2]):
            eb = np.exp(-b * tau)
            h = tau * _psi(x * tau)
            dh = tau * tau * _dpsi(x * tau)
            Q = 1.0 / b + 1.0 / a + (b / a) * h
            A = -eb * Q
            A_a = -eb * (-1.0 / a**2 - (b / a**2) * h + (b / a) * dh)
            A_b = tau * eb * Q - eb * (-1.0 / b**2 + h / a - (b / a) * dh)
            parts.append((A, A_a, A_b))
        (A2, A2a, A2b), (A1, A1a, A1b) = parts
        P[r2], Pa[r2], Pb[r2] = A2 - A1, A2a - A1a, A2b - A1b
    if np.any(r1):  # two exponentials, a > 5 b
        uu, ww = u1[r1], w[r1]
        ea, eb = np.exp(-a * uu), np.exp(-b * uu)
        Ia, Ib = ww * ea * _psi(a * ww), ww * eb * _psi(b * ww)
        dIa = ww * ea * (-uu * _psi(a * ww) + ww * _dpsi(a * ww))
        dIb = ww * eb * (-uu * _psi(b * ww) + ww * _dpsi(b * ww))
        P[r1] = (a * Ib - b * Ia) / x
        Pa[r1] = b * ((Ia - Ib) / x - dIa) / x
        Pb[r1] = a * (dIb + (Ib - Ia) / x) / x
    if np.any(r3):  # short interval: Gauss-Legendre on the stable form (exact to rounding)
        uu, ww = u1[r3], w[r3]
        tau = uu[:, None] + ww[:, None] * (1.0 + _GL_X[None, :]) / 2.0
        phi, d_a, d_b, _ = chain_terms(tau, a, b)
        half = ww / 2.0
        P[r3] = half * (phi @ _GL_W)
        Pa[r3] = half * (d_a @ _GL_W)
        Pb[r3] = half * (d_b @ _GL_W)
    if swap:
        Pa, Pb = Pb, Pa
    return P, Pa, Pb


def segment_means(kin, theta, t_start, t_end, jacobian: bool = False):
    r"""Exact mean of the point model over each formation interval (and its Jacobian).

    :math:`\bar\delta_n = \frac{1}{t_{2,n} - t_{1,n}}\int_{t_{1,n}}^{t_{2,n}}\delta(t)\,dt`,
    in closed form (module docstring), vectorised over segments, steps and pools.

    Parameters
    ----------
    kin : TurnoverKinetics
        The point model (δ scale; no growth curve).
    theta : array-like of shape (n_params,)
        Natural parameters in the order of ``kin.param_names``.
    t_start, t_end : array-like of shape (n,)
        Formation intervals (data's time unit), ``t_end > t_start``.
    jacobian : bool, default=False
        Also return :math:`d\bar\delta/d\theta`.

    Returns
    -------
    y : ndarray of shape (n,)
        Segment means, δ (‰).
    J : ndarray of shape (n, n_params)
        :math:`d\bar\delta/d\theta`; returned (as ``(y, J)``) only with ``jacobian=True``.

    Raises
    ------
    DataError
        For a model without a closed-form average (:func:`check_segment_kinetics`) or an
        interval with ``t_end <= t_start``.
    """
    check_segment_kinetics(kin)
    theta = np.asarray(theta, dtype=float)
    t1 = np.atleast_1d(np.asarray(t_start, dtype=float))
    t2 = np.atleast_1d(np.asarray(t_end, dtype=float))
    dur = t2 - t1
    if np.any(~(dur > 0)):
        raise DataError("'t_end' must be greater than 't_start' for every segment")
    c, M = kin.level_map
    L = c + M @ theta
    step = np.diff(L)
    lag = theta[kin.lag_index] if kin.lag_index is not None else 0.0
    steps = kin.switch_times if kin.lead_in is None else np.r_[kin.lead_in, kin.switch_times]
    s = steps + lag
    u1 = np.maximum(t1[None, :] - s[:, None], 0.0)  # (m, n)
    # the part of the interval after the step, t2 - max(t1, s): exactly Δ when s <= t1
    w = np.maximum(t2[None, :] - np.maximum(t1[None, :], s[:, None]), 0.0)
    u2 = u1 + w
    frac = w / dur
    k = theta[kin.rate_index]
    n_par = kin.n_params
    if kin.structure == "chain":
        P, Pa, Pb = (v.reshape(w.shape) for v in _chain_integral(
            u1.ravel(), w.ravel(), float(k[0]), float(k[1])))
        Rb = frac - P / dur
        y = L[0] + step @ Rb
        if not jacobian:
            return y
        J = np.zeros((t1.size, n_par))
        J[:, kin.rate_index[0]] = -(step @ Pa) / dur
        J[:, kin.rate_index[1]] = -(step @ Pb) / dur
        if kin.lag_index is not None:
            # dR̄/ds = -(R(τ2) - R(τ1))/Δ = -(Φ(u1) - Φ(u2))/Δ  (Φ(0) = 1)
            ph1 = chain_terms(u1, float(k[0]), float(k[1]))[0]
            ph2 = chain_terms(u2, float(k[0]), float(k[1]))[0]
            J[:, kin.lag_index] = step @ (-(ph1 - ph2) / dur)
    else:
        kk = k + theta[kin.growth_rate_index] if kin.growth_rate_index is not None else k
        f = theta[kin.fraction_index]
        x = kk[:, None, None] * w[None]  # (p, m, n)
        e1 = np.exp(-kk[:, None, None] * u1[None])
        ps = _psi(x)
        Eb = frac[None] * e1 * ps  # mean of e^{-κ(t - s)} H over the interval
        Rb = frac - np.einsum("i,ijn->jn", f, Eb)
        y = L[0] + step @ Rb
        if not jacobian:
            return y
        J = np.zeros((t1.size, n_par))
        J[:, kin.fraction_index] = -np.einsum("j,ijn->ni", step, Eb)
        dEb = frac[None] * e1 * (-u1[None] * ps + w[None] * _dpsi(x))
        dk = -np.einsum("j,ijn->ni", step, dEb) * f[None, :]
        J[:, kin.rate_index] = dk
        if kin.growth_rate_index is not None:
            J[:, kin.growth_rate_index] = dk.sum(axis=1)
        if kin.lag_index is not None:
            inside = (t1[None, :] <= s[:, None]) & (s[:, None] < t2[None, :])
            jump = (1.0 - f.sum()) * inside + np.einsum(
                "i,ijn->jn", f, e1 * -np.expm1(-x))
            J[:, kin.lag_index] = step @ (-jump / dur)
    m = step.size
    coef = np.empty((m + 1, t1.size))
    coef[0] = 1.0 - Rb[0]
    if m > 1:
        coef[1:m] = Rb[: m - 1] - Rb[1:m]
    coef[m] = Rb[m - 1]
    J += coef.T @ M
    return y, J


# ----------------------------------------------------------------------------------------
# The kinetics the engine sees
# ----------------------------------------------------------------------------------------
class SegmentKinetics(TurnoverKinetics):
    r"""A point model whose values at the segments' formation midpoints are segment means.

    The engine fits one array of times; for a segment series that array holds each
    segment's formation midpoint :math:`(t_1 + t_2)/2`, and :meth:`evaluate` returns the
    exact mean over :math:`[t_1, t_2]` (:func:`segment_means`) at those times and the point
    model anywhere else. That is for the engine (residuals, Jacobian, fitted values at the
    fit's own times) only: a curve at other times, :meth:`TurnoverFit.predict
    <isoturnover.TurnoverFit.predict>` and the bands, use :attr:`point_model` (through
    :func:`point_kinetics`), so a grid time that happens to equal a midpoint gives no
    segment mean. Everything else (parameters, rates, levels) is the point model's.

    Parameters
    ----------
    base : TurnoverKinetics
        The point model (δ scale, no growth curve).
    formation_start, formation_end : array-like of shape (n,)
        Formation intervals of the segments (data's time unit).

    Attributes
    ----------
    point_model : TurnoverKinetics
        ``base`` (or, if it is a segment model, its point model): the precursor's point
        response, with the same parameters.
    midpoints : ndarray
        Distinct formation midpoints, increasing (the times the engine fits).
    formation_start, formation_end : ndarray
        The intervals of :attr:`midpoints`.
    durations : ndarray
        ``formation_end - formation_start`` (time one segment spans).

    Raises
    ------
    DataError
        For a point model without a closed-form average, an empty or reversed interval, or
        two different intervals with the same midpoint.
    """

    def __init__(self, base, formation_start, formation_end):
        check_segment_kinetics(base)
        super().__init__(base.pools, structure=base.structure, diet=base.diet,
                         separation=base.separation,
                         per_diet_separation=base.per_diet_separation, lag=base.lag,
                         initial=base.initial, scale=base.scale, isotope=base.isotope,
                         growth=base.growth)
        t1 = np.atleast_1d(np.asarray(formation_start, dtype=float))
        t2 = np.atleast_1d(np.asarray(formation_end, dtype=float))
        if t1.size == 0 or t1.shape != t2.shape or np.any(~(t2 > t1)):
            raise DataError("'formation_start'/'formation_end': every segment needs an "
                            "interval with end > start")
        mid = (t1 + t2) / 2.0
        order = np.lexsort((t2, t1, mid))
        mid, t1, t2 = mid[order], t1[order], t2[order]
        keep = np.r_[True, (np.diff(mid) != 0) | (np.diff(t1) != 0)]
        mid, t1, t2 = mid[keep], t1[keep], t2[keep]
        clash = np.flatnonzero(np.diff(mid) == 0)
        if clash.size:
            i = int(clash[0])
            raise DataError(
                f"two segments were formed around the same time ({mid[i]:g}) over different "
                f"intervals ([{t1[i]:g}, {t2[i]:g}] and [{t1[i + 1]:g}, {t2[i + 1]:g}]); fit "
                "them as separate series")
        self.midpoints, self.formation_start, self.formation_end = mid, t1, t2
        self.durations = t2 - t1
        self.point_model = point_kinetics(base)  # a segment model's own point model

    def evaluate(self, t, theta, jacobian: bool = False):
        """Segment means at the formation midpoints, the point model elsewhere.

        Parameters
        ----------
        t : ndarray of shape (n,)
            Times (data's time unit).
        theta : ndarray of shape (n_params,)
            Natural parameters in the order of :attr:`param_names`.
        jacobian : bool, default=False
            Also return d δ / d theta.

        Returns
        -------
        y : ndarray of shape (n,)
            δ (‰): a segment mean where ``t`` is a formation midpoint.
        J : ndarray of shape (n, n_params)
            Returned (as ``(y, J)``) only with ``jacobian=True``.
        """
        t = np.asarray(t, dtype=float)
        idx = np.minimum(np.searchsorted(self.midpoints, t), self.midpoints.size - 1)
        hit = self.midpoints[idx] == t
        if hit.all():
            return segment_means(self, theta, self.formation_start[idx],
                                 self.formation_end[idx], jacobian)
        if not hit.any():
            return super().evaluate(t, theta, jacobian)
        seg = segment_means(self, theta, self.formation_start[idx[hit]],
                            self.formation_end[idx[hit]], jacobian)
        pt = super().evaluate(t[~hit], theta, jacobian)
        if not jacobian:
            y = np.empty(t.size)
            y[hit], y[~hit] = seg, pt
            return y
        y = np.empty(t.size)
        J = np.empty((t.size, self.n_params))
        y[hit], J[hit] = seg
        y[~hit], J[~hit] = pt
        return y, J


def point_kinetics(kin):
    """The point model of a kinetic model: a segment model's :attr:`~SegmentKinetics.
    point_model`, any other model itself.

    Parameters
    ----------
    kin : TurnoverKinetics
        A fit's kinetics.

    Returns
    -------
    TurnoverKinetics
        A model whose ``evaluate(t, theta)`` is the point response δ(t) at every ``t``
        (never a segment mean), with the same parameters as ``kin``.
    """
    return kin.point_model if isinstance(kin, SegmentKinetics) else kin


# ----------------------------------------------------------------------------------------
# Data and notes
# ----------------------------------------------------------------------------------------
def check_length_unit(length_unit, name: str = "length_unit") -> str:
    """A segment length unit: a short non-empty label such as ``"mm"``.

    Parameters
    ----------
    length_unit : str
        Unit of the segment distances (labels of axes, growth rates and reports).
    name : str, default="length_unit"
        Name of the argument, for messages.

    Returns
    -------
    str
        The unit, stripped of surrounding blanks.

    Raises
    ------
    DataError
        When it is not a string of 1–20 characters on one line.
    """
    u = length_unit.strip() if isinstance(length_unit, str) else None
    if not u or len(u) > 20 or "\n" in u:
        raise DataError(f"'{name}' must be a short unit label such as 'mm' or 'cm'; got "
                        f"{length_unit!r:.60}")
    return u


def segment_data_text(fit) -> str | None:
    """The data line of a segment fit's summary, or None for other fits.

    Parameters
    ----------
    fit : TurnoverFit
        A fit; a segment fit (``record="segments"``) gives a line.

    Returns
    -------
    str or None
        For example ``"24 segments (0–96 mm), formed over days -60 to 180"``: the number
        of points fitted, the span of the segment ends (when the fit recorded them) in the
        model's length unit, and the span of the formation intervals.
    """
    kin = fit.kinetics
    if not isinstance(kin, SegmentKinetics):
        return None
    info = fit.data_info
    span = ""
    if info.get("segment_start") is not None and info.get("segment_end") is not None:
        lo = float(np.min(np.asarray(info["segment_start"], dtype=float)))
        hi = float(np.max(np.asarray(info["segment_end"], dtype=float)))
        unit = getattr(fit.model, "length_unit", "mm")
        span = f" ({lo:g}–{hi:g} {unit})"
    n = int(fit.nobs)
    return (f"{n} segment{'s' if n != 1 else ''}{span}, formed over "
            f"{unit_word(fit.time_unit)} {float(np.min(kin.formation_start)):g} to "
            f"{float(np.max(kin.formation_end)):g}")


def segment_arrays(t_or_frame, y=None, sigma=None, segment_start=None, segment_end=None):
    """Sampling times, segment ends, values and sd of one segment series.

    Parameters
    ----------
    t_or_frame : float, array-like or DataFrame
        Sampling time(s) (data's time unit), or a samples table of one subject, tissue and
        isotope with columns ``time``, ``segment_start``, ``segment_end``, ``value`` (and
        ``sd``); analytic replicates of a segment are averaged
        (:func:`~isoturnover.average_replicates`).
    y : array-like of shape (n,), optional
        Segment δ values (‰); not with a frame.
    sigma : array-like or float, optional
        Analytic 1σ (‰); not with a frame.
    segment_start, segment_end : array-like of shape (n,), optional
        Segment ends (length units); not with a frame.

    Returns
    -------
    dict
        ``sample_time``, ``segment_start``, ``segment_end``, ``y``, ``sigma`` (or None),
        ``time_unit`` (a frame's ``attrs`` or None).

    Raises
    ------
    DataError
        Naming the argument or column that is missing or cannot be used.
    """
    if hasattr(t_or_frame, "columns"):
        from .data import average_replicates, read_samples

        if any(v is not None for v in (y, sigma, segment_start, segment_end)):
            raise DataError("with a samples frame, do not pass 'y', 'sigma', 'segment_start' "
                            "or 'segment_end' (taken from the frame's columns)")
        missing = [c for c in ("segment_start", "segment_end") if c not in t_or_frame.columns]
        if missing:
            raise DataError(f"record='segments' needs the columns 'segment_start' and "
                            f"'segment_end' in the samples frame; missing {missing}")
        unit = (t_or_frame.attrs or {}).get("time_unit", "d")
        s = read_samples(t_or_frame, time_unit=unit)
        for col in ("subject", "tissue", "isotope"):
            vals = sorted(s[col].astype(str).unique())
            if len(vals) > 1:
                raise DataError(f"the samples frame holds several {col}s ({', '.join(vals)}); "
                                "fit one segment series at a time")
        avg = average_replicates(s)
        sd = avg["sd"].to_numpy(dtype=float) if "sd" in avg.columns else None
        return {"sample_time": avg["time"].to_numpy(dtype=float),
                "segment_start": avg["segment_start"].to_numpy(dtype=float),
                "segment_end": avg["segment_end"].to_numpy(dtype=float),
                "y": avg["value"].to_numpy(dtype=float), "sigma": sd, "time_unit": unit}
    if y is None:
        raise DataError("'y' is required when 't' is an array of sampling times")
    if segment_start is None or segment_end is None:
        raise DataError("record='segments' with arrays needs 'segment_start' and "
                        "'segment_end' (distances of each segment's ends)")
    yv = _finite("y", y)
    yv = np.atleast_1d(yv)
    return {"sample_time": _finite("t", t_or_frame, yv.size),
            "segment_start": _finite("segment_start", segment_start, yv.size),
            "segment_end": _finite("segment_end", segment_end, yv.size),
            "y": yv, "sigma": None if sigma is None else _finite("sigma", sigma, yv.size),
            "time_unit": None}


def resolution_notes(kin, theta) -> list:
    """Pools whose half-life is shorter than the time one segment spans.

    A pool with :math:`\\ln 2/\\kappa_i` below the shortest formation interval changes within
    every segment: the segments average it out and cannot resolve its rate.

    Parameters
    ----------
    kin : TurnoverKinetics
        The fitted model (only a :class:`SegmentKinetics` has segments; others give []).
    theta : array-like of shape (n_params,)
        Natural parameters.

    Returns
    -------
    list of (str, str)
        ``("segment_resolution", message)`` pairs, one per unresolvable pool.
    """
    if not isinstance(kin, SegmentKinetics):
        return []
    theta = np.asarray(theta, dtype=float)
    k = theta[kin.rate_index]
    if kin.growth_rate_index is not None:
        k = k + theta[kin.growth_rate_index]
    span = float(np.min(kin.durations))
    out = []
    for name, kv in zip(kin.rate_names, k.tolist()):
        hl = math.log(2.0) / kv if kv > 0 else math.inf
        if hl < span:
            out.append(("segment_resolution",
                        f"pool {name}: half-life {hl:.3g} is shorter than the time one segment "
                        f"spans (shortest {span:.3g}); the segments average this pool out, so "
                        "its rate is not resolved: cut shorter segments or fit fewer pools"))
    return out


class SegmentPredictions:
    """Mixin of a fit: segment means predicted from its parameters."""

    def predict_segments(self, start, end, *, sample_time, growth_rate, formation_lag=0.0,
                         origin="base", tissue_length=None):
        """Segment means for segments of a growing tissue, from this fit's parameters.

        Each segment is mapped to its formation interval (:func:`formation_intervals`) and
        the point model is averaged over it exactly (:func:`segment_means`).

        Parameters
        ----------
        start, end : array-like of shape (n,)
            Distances of each segment's ends from the ``origin`` (length unit of
            ``growth_rate``).
        sample_time : float or array-like
            Time the tissue was sampled (the fit's time unit).
        growth_rate : float or table of (time, rate)
            Tissue growth rate (length per time unit).
        formation_lag : float, default=0.0
            Time between formation and emergence at the base (≥ 0).
        origin : {"base", "tip"}, default="base"
            Where distances are measured from.
        tissue_length : float, optional
            Tissue length at sampling (with ``origin="tip"``).

        Returns
        -------
        ndarray of shape (n,)
            Segment means, δ (‰).

        Raises
        ------
        DataError
            For bad segments or growth rates (named), or a model without a closed-form
            average (atom-fraction scale, growth curve).
        """
        t1, t2 = formation_intervals(start, end, sample_time, growth_rate,
                                     formation_lag=formation_lag, origin=origin,
                                     tissue_length=tissue_length)
        return segment_means(self.kinetics, self.state.theta, t1, t2)
