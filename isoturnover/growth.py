r"""Body-mass growth curves and their fits.

Growth dilutes a tissue's old isotopic signal: new tissue laid down by growth carries the
current diet's value. To separate growth from catabolic turnover the turnover model needs the
body-mass curve :math:`W(t)` and its specific growth rate :math:`d\ln W/dt`. This module fits
that curve to repeated masses of an animal (or to destructive-sampling masses of a group) and
hands back a :class:`GrowthFit`, or builds a known curve without fitting (:class:`GrowthCurve`).

Curves (parameter names as in ``.params``; time ``t`` in the masses' time unit, masses in the
user's mass unit, rates ``k`` and ``b``/``W0`` in per time and mass per time):

========================  ==========================================================
``"exponential"``         :math:`W = W_0 e^{k t}`
``"linear"``              :math:`W = W_0 + b t`
``"logistic"``            :math:`W = W_\infty / (1 + e^{-k (t - t_i)})`
``"gompertz"``            :math:`W = W_\infty \exp(-e^{-k (t - t_i)})`
``"von_bertalanffy"``     :math:`W = W_\infty (1 - (1 - (W_0/W_\infty)^{1/3}) e^{-k t})^3`
``"richards"``            :math:`W = W_\infty (1 + (d - 1) e^{-k (t - t_i)})^{1/(1-d)}`
========================  ==========================================================

Error model. ``scale="log"`` (the default) fits :math:`\ln W`: multiplicative error, the
usual choice for body masses, whose scatter grows with size (common practice).
``scale="natural"`` fits :math:`W` itself (additive error). Least squares with the residual
variance estimated; ``sigma`` (sd of each mass, in mass units) gives relative weights.
The growth model assumes nothing about the sign of the rate: mass loss is allowed (the
turnover model checks :math:`k_d + d\ln W/dt \ge 0` where it uses the curve).

Animal experiments need the approval of the local animal-care authority; this library
supports the analysis of such experiments and does not replace that approval.
"""

from __future__ import annotations

import hashlib
import html
import math
import warnings
from collections.abc import Iterator, Mapping
from dataclasses import dataclass

import lmfit
import numpy as np
import pandas as pd
from scipy import optimize, special, stats

from .conventions import check_level
from .errors import (
    ConvergenceWarning,
    DataError,
    DataWarning,
    DesignWarning,
    FitError,
    IdentifiabilityWarning,
)

__all__ = [
    "CURVES",
    "SCALES",
    "GrowthCurve",
    "GrowthFit",
    "GrowthFitSet",
    "GrowthFitFailure",
    "GrowthSummary",
    "fit_growth",
    "fit_growth_each",
    "load_growth",
]

SCALES = ("log", "natural")

# Optimizer settings (module attributes so a test can tighten them to force a failure).
_TOL = 1e-15
_MAX_NFEV = 2000
_PROFILE_MAX_NFEV = 500
_PROFILE_TOL = 1e-12  # inner fits of a profile: RSS to ~1e-12 relative is ample for ΔRSS/s²
_N_RUNS = 4  # multi-start: optimise the best few automatic starts (by starting RSS)
_HUGE = math.exp(690.0)  # a positive parameter near the float limit (exp(709.8))
_STATIONARY = 1e-6  # residual–Jacobian cosine below which a point is stationary
_CORR_LIMIT = 0.99  # |correlation| above this is flagged (common practice)
_ASYMPTOTE_REACHED = 0.5  # data below half the fitted asymptote: Winf extrapolated (common
# practice)


# ---------------------------------------------------------------------------------------
# numerical helpers
# ---------------------------------------------------------------------------------------
_H_SERIES = np.array([1.0 / (n + 1) * (-1) ** n for n in range(10)])  # log1p(a)/a
_DH_SERIES = np.array([(-1) ** n * n / (n + 1) for n in range(1, 11)])  # d/da log1p(a)/a


def _wls_line(x, y):
    """Ordinary least-squares line ``y = a + b x``; returns (a, b)."""
    xm, ym = x.mean(), y.mean()
    sxx = np.sum((x - xm) ** 2)
    if sxx <= 0:
        return ym, 0.0
    b = np.sum((x - xm) * (y - ym)) / sxx
    return ym - b * xm, b


def _asymptote_candidates(mass, given):
    """Deterministic asymptote starts: the largest mass with margins (common practice)."""
    wmax = float(np.max(mass))
    cands = [wmax * f for f in (1.05, 1.3, 2.0, 5.0)]
    if "Winf" in given and given["Winf"] > wmax:
        cands.insert(0, float(given["Winf"]))
    return cands


# ---------------------------------------------------------------------------------------
# curves
# ---------------------------------------------------------------------------------------
class _Curve:
    """One growth-curve family: its formula, derivatives and starting values.

    Subclasses give ``log_mass`` (ln W), ``log_jac`` (d ln W/dθ, shape (n, p)), ``rate``
    (d ln W/dt) and ``starts`` (a list of parameter vectors). ``mass`` and ``mass_jac``
    follow from them except for the linear curve, whose mass can cross zero.
    """

    name: str = ""
    params: tuple[str, ...] = ()
    positive: frozenset = frozenset()
    formula: str = ""
    citation: str = ""

    def log_mass(self, t, v):  # pragma: no cover - abstract
        raise NotImplementedError

    def log_jac(self, t, v):  # pragma: no cover - abstract
        raise NotImplementedError

    def rate(self, t, v):  # pragma: no cover - abstract
        raise NotImplementedError

    def starts(self, t, mass, given):  # pragma: no cover - abstract
        raise NotImplementedError

    def mass(self, t, v):
        with np.errstate(over="ignore", invalid="ignore"):
            return np.exp(self.log_mass(t, v))

    def mass_jac(self, t, v):
        with np.errstate(over="ignore", invalid="ignore"):
            return self.mass(t, v)[:, None] * self.log_jac(t, v)

    def valid_params(self, v):
        return all(v[self.params.index(p)] > 0 for p in self.positive) and np.all(
            np.isfinite(v)
        )


class _Exponential(_Curve):
    r"""Exponential growth, :math:`W(t) = W_0 e^{k t}`.

    .. math:: \ln W = \ln W_0 + k t, \qquad \frac{d\ln W}{dt} = k

    Parameters ``W0`` (mass at t = 0, > 0) and ``k`` (specific growth rate, 1/time; negative
    for mass loss). Starting values: least-squares line of ln W on t (common practice).
    With this curve the growth-dilution model reduces to Hesslein et al. (1993).
    """

    name = "exponential"
    params = ("W0", "k")
    positive = frozenset({"W0"})
    formula = "W0 * exp(k t)"
    citation = "common practice; Hesslein, Hallard & Ramlal 1993 (Can. J. Fish. Aquat. Sci. 50)"

    def log_mass(self, t, v):
        return math.log(v[0]) + v[1] * t

    def log_jac(self, t, v):
        return np.column_stack([np.full_like(t, 1.0 / v[0]), t])

    def rate(self, t, v):
        return np.full_like(t, v[1])

    def starts(self, t, mass, given):
        a, b = _wls_line(t, np.log(mass))
        return [np.array([math.exp(a), b])]


class _Linear(_Curve):
    r"""Linear growth, :math:`W(t) = W_0 + b t`.

    .. math:: \frac{d\ln W}{dt} = \frac{b}{W_0 + b t}

    Parameters ``W0`` (mass at t = 0) and ``b`` (mass per time; negative for loss). ln W and
    the rate are undefined (NaN) where the line is at or below zero. Starting values: the
    least-squares line of W on t (common practice).
    """

    name = "linear"
    params = ("W0", "b")
    positive = frozenset()
    formula = "W0 + b t"
    citation = "common practice"

    def mass(self, t, v):
        return v[0] + v[1] * t

    def mass_jac(self, t, v):
        return np.column_stack([np.ones_like(t), t])

    def log_mass(self, t, v):
        w = self.mass(t, v)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(w > 0, np.log(np.where(w > 0, w, 1.0)), np.nan)

    def log_jac(self, t, v):
        w = self.mass(t, v)
        with np.errstate(invalid="ignore", divide="ignore"):
            inv = np.where(w > 0, 1.0 / np.where(w > 0, w, 1.0), np.nan)
        return np.column_stack([inv, t * inv])

    def rate(self, t, v):
        w = self.mass(t, v)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(w > 0, v[1] / np.where(w > 0, w, 1.0), np.nan)

    def starts(self, t, mass, given):
        a, b = _wls_line(t, mass)
        out = [np.array([a, b])]
        # a flat line at the geometric mean is positive everywhere (needed on the log scale)
        out.append(np.array([float(np.exp(np.mean(np.log(mass)))), 0.0]))
        return out


class _Logistic(_Curve):
    r"""Logistic growth (Verhulst 1838, from memory), inflection at half the asymptote.

    .. math::
        W(t) = \frac{W_\infty}{1 + e^{-k (t - t_i)}}, \qquad
        \frac{d\ln W}{dt} = \frac{k}{1 + e^{k (t - t_i)}}

    Parameters ``Winf`` (asymptotic mass, > 0), ``k`` (1/time) and ``ti`` (inflection time).
    NIST StRD Rat42 writes it ``b1/(1 + exp(b2 - b3 x))``: ``b1 = Winf``, ``b3 = k``,
    ``b2 = k ti``. Starting values: for each asymptote candidate (largest mass times 1.05,
    1.3, 2, 5), the least-squares line of ln(W/(Winf − W)) = k (t − ti) (common practice).
    """

    name = "logistic"
    params = ("Winf", "k", "ti")
    positive = frozenset({"Winf"})
    formula = "Winf / (1 + exp(-k (t - ti)))"
    citation = "Verhulst 1838 (from memory); common practice"

    def log_mass(self, t, v):
        x = v[1] * (t - v[2])
        return math.log(v[0]) - np.logaddexp(0.0, -x)

    def log_jac(self, t, v):
        x = v[1] * (t - v[2])
        s = special.expit(-x)
        return np.column_stack([np.full_like(t, 1.0 / v[0]), s * (t - v[2]), -v[1] * s])

    def rate(self, t, v):
        return v[1] * special.expit(-v[1] * (t - v[2]))

    def starts(self, t, mass, given):
        out = []
        for winf in _asymptote_candidates(mass, given):
            z = np.log(mass / (winf - mass))
            a, k = _wls_line(t, z)
            if k == 0:
                continue
            out.append(np.array([winf, k, -a / k]))
        return out


class _Gompertz(_Curve):
    r"""Gompertz growth (Gompertz 1825, from memory), inflection at :math:`W_\infty/e`.

    .. math::
        W(t) = W_\infty \exp\!\left(-e^{-k (t - t_i)}\right), \qquad
        \frac{d\ln W}{dt} = k e^{-k (t - t_i)}

    Parameters ``Winf`` (> 0), ``k`` (1/time), ``ti`` (inflection time). Starting values: for
    each asymptote candidate, the line −ln(ln(Winf/W)) = k (t − ti) (common practice).
    """

    name = "gompertz"
    params = ("Winf", "k", "ti")
    positive = frozenset({"Winf"})
    formula = "Winf * exp(-exp(-k (t - ti)))"
    citation = "Gompertz 1825 (from memory); common practice"

    def log_mass(self, t, v):
        with np.errstate(over="ignore"):
            return math.log(v[0]) - np.exp(-v[1] * (t - v[2]))

    def log_jac(self, t, v):
        with np.errstate(over="ignore", invalid="ignore"):
            z = np.exp(-v[1] * (t - v[2]))
            return np.column_stack([np.full_like(t, 1.0 / v[0]), z * (t - v[2]), -v[1] * z])

    def rate(self, t, v):
        with np.errstate(over="ignore"):
            return v[1] * np.exp(-v[1] * (t - v[2]))

    def starts(self, t, mass, given):
        out = []
        for winf in _asymptote_candidates(mass, given):
            z = -np.log(np.log(winf / mass))
            a, k = _wls_line(t, z)
            if k == 0:
                continue
            out.append(np.array([winf, k, -a / k]))
        return out


class _VonBertalanffy(_Curve):
    r"""Von Bertalanffy growth in mass (von Bertalanffy 1957, from memory), by W0.

    .. math::
        W(t) = W_\infty \left(1 - b\, e^{-k t}\right)^3, \qquad
        b = 1 - (W_0/W_\infty)^{1/3}

    i.e. :math:`W^{1/3}` relaxes exponentially from :math:`W_0^{1/3}` toward
    :math:`W_\infty^{1/3}`, and

    .. math:: \frac{d\ln W}{dt} = \frac{3 k (W_\infty^{1/3} - W_0^{1/3}) e^{-k t}}
              {W_\infty^{1/3} - (W_\infty^{1/3} - W_0^{1/3}) e^{-k t}}

    Parameters ``Winf`` (> 0), ``k`` (1/time) and ``W0`` (mass at t = 0, > 0; W0 > Winf is a
    shrinking animal). It is the Richards curve with d = 2/3 and
    :math:`t_i = \ln(3 b)/k` (for b > 0). Starting values: for each asymptote candidate, the
    line ln|Winf^{1/3} − W^{1/3}| = ln|Winf^{1/3} − W0^{1/3}| − k t (common practice).
    """

    name = "von_bertalanffy"
    params = ("Winf", "k", "W0")
    positive = frozenset({"Winf", "W0"})
    formula = "Winf * (1 - (1 - (W0/Winf)^(1/3)) exp(-k t))^3"
    citation = "von Bertalanffy 1957, Q. Rev. Biol. 32 (from memory)"

    @staticmethod
    def _parts(t, v):
        linf, l0 = np.cbrt(v[0]), np.cbrt(v[2])
        with np.errstate(over="ignore", invalid="ignore"):
            e = np.exp(-v[1] * t)
            u = linf - (linf - l0) * e
        return linf, l0, e, u

    def log_mass(self, t, v):
        _, _, _, u = self._parts(t, v)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(u > 0, 3.0 * np.log(np.where(u > 0, u, 1.0)), np.nan)

    def log_jac(self, t, v):
        linf, l0, e, u = self._parts(t, v)
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            inv = np.where(u > 0, 1.0 / np.where(u > 0, u, 1.0), np.nan)
            return np.column_stack(
                [
                    (1.0 - e) * linf / v[0] * inv,
                    3.0 * (linf - l0) * t * e * inv,
                    e * l0 / v[2] * inv,
                ]
            )

    def rate(self, t, v):
        linf, l0, e, u = self._parts(t, v)
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            inv = np.where(u > 0, 1.0 / np.where(u > 0, u, 1.0), np.nan)
            return 3.0 * v[1] * (linf - l0) * e * inv

    def starts(self, t, mass, given):
        _, slope = _wls_line(t, np.log(mass))
        if slope >= 0:
            cands = _asymptote_candidates(mass, given)
        else:  # shrinking toward an asymptote below the smallest mass
            wmin = float(np.min(mass))
            cands = [wmin * f for f in (0.95, 0.8, 0.5)]
            if "Winf" in given and 0 < given["Winf"] < wmin:
                cands.insert(0, float(given["Winf"]))
        out = []
        cm = np.cbrt(mass)
        for winf in cands:
            linf = math.cbrt(winf)
            a, s = _wls_line(t, np.log(np.abs(linf - cm)))
            l0 = linf - math.copysign(math.exp(a), linf - cm.mean())
            if l0 <= 0:  # extrapolation below zero mass: start from half the smallest
                l0 = 0.5 * float(cm.min())
            if s == 0:
                continue
            out.append(np.array([winf, -s, l0**3]))
        return out


class _Richards(_Curve):
    r"""Richards growth (Richards 1959, J. Exp. Bot. 10, from memory), ti the inflection.

    .. math::
        W(t) = W_\infty \left(1 + (d - 1)\, e^{-k (t - t_i)}\right)^{1/(1-d)}, \qquad
        \frac{d\ln W}{dt} = \frac{k\, e^{-k (t - t_i)}}{1 + (d - 1) e^{-k (t - t_i)}}

    Parameters ``Winf`` (> 0), ``k`` (1/time), ``ti`` and the shape ``d``. Limits (worked by
    hand from the formula): d = 2 is the logistic; d → 1 the Gompertz (evaluated by a series,
    so d = 1 itself is allowed); d = 2/3 the von Bertalanffy curve with
    :math:`b = e^{k t_i}/3`; d = 0 the monomolecular (Brody) curve. The inflection is at
    t = ti, where :math:`W = W_\infty d^{1/(1-d)}` (for d > 0). With d < 1 the curve is
    defined only where :math:`1 + (d-1) e^{-k (t - t_i)} > 0`; elsewhere ln W is NaN.
    Starting values: shapes d ∈ {2/3, 1, 2, 4} × asymptote candidates, each linearised as
    ln(((W/Winf)^{1−d} − 1)/(d − 1)) = −k (t − ti) (common practice).
    """

    name = "richards"
    params = ("Winf", "k", "ti", "d")
    positive = frozenset({"Winf"})
    formula = "Winf * (1 + (d - 1) exp(-k (t - ti)))^(1/(1 - d))"
    citation = "Richards 1959, J. Exp. Bot. 10 (from memory)"

    @staticmethod
    def _parts(t, v):
        """x = k(t − ti), a = (d − 1) e^{−x}, L = ln(1 + a), small-|a| mask."""
        eps = v[3] - 1.0
        x = v[1] * (t - v[2])
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            if eps > 0:
                la = math.log(eps) - x
                a = np.exp(la)
                big_l = np.logaddexp(0.0, la)
            elif eps < 0:
                a = eps * np.exp(-x)
                big_l = np.where(a > -1, np.log1p(np.maximum(a, -1.0)), np.nan)
            else:
                a = np.zeros_like(x)
                big_l = a
        small = np.abs(a) < 1e-2
        return eps, x, a, big_l, small

    def log_mass(self, t, v):
        eps, x, a, big_l, small = self._parts(t, v)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            z = np.exp(-x)
            h = np.polynomial.polynomial.polyval(a, _H_SERIES)
            lw_small = -z * h
            lw_big = -big_l / eps if eps != 0 else np.full_like(x, np.nan)
        return math.log(v[0]) + np.where(small, lw_small, lw_big)

    def log_jac(self, t, v):
        eps, x, a, big_l, small = self._parts(t, v)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            q = 1.0 / (np.exp(x) + eps)  # e^{-x}/(1 + a), stable for all x
            q = np.where(a > -1, q, np.nan)
            z = np.exp(-x)
            dd_small = -z * z * np.polynomial.polynomial.polyval(a, _DH_SERIES)
            dd_big = (big_l - eps * q) / eps**2 if eps != 0 else np.full_like(x, np.nan)
            dd = np.where(small, dd_small, dd_big)
            return np.column_stack(
                [np.full_like(t, 1.0 / v[0]), q * (t - v[2]), -v[1] * q, dd]
            )

    def rate(self, t, v):
        eps, x, a, _, _ = self._parts(t, v)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            q = 1.0 / (np.exp(x) + eps)
        return np.where(a > -1, v[1] * q, np.nan)

    def starts(self, t, mass, given):
        shapes = [2.0 / 3.0, 1.0, 2.0, 4.0]
        if "d" in given:
            shapes.insert(0, float(given["d"]))
        out = []
        for winf in _asymptote_candidates(mass, given):
            for d in shapes:
                with np.errstate(invalid="ignore", divide="ignore"):
                    if abs(d - 1.0) < 1e-9:
                        z = -np.log(np.log(winf / mass))
                    else:
                        z = -np.log(((mass / winf) ** (1.0 - d) - 1.0) / (d - 1.0))
                if not np.all(np.isfinite(z)):
                    continue
                a, k = _wls_line(t, z)
                if k == 0:
                    continue
                out.append(np.array([winf, k, -a / k, d]))
        return out


_CURVE_OBJECTS: dict[str, _Curve] = {
    c.name: c
    for c in (_Exponential(), _Linear(), _Logistic(), _Gompertz(), _VonBertalanffy(), _Richards())
}
CURVES = tuple(_CURVE_OBJECTS)


def _get_curve(curve) -> _Curve:
    if not isinstance(curve, str) or curve not in _CURVE_OBJECTS:
        allowed = ", ".join(repr(c) for c in CURVES)
        raise DataError(f"curve must be one of {allowed}; got {curve!r}")
    return _CURVE_OBJECTS[curve]


def _check_scale(scale) -> str:
    if not isinstance(scale, str) or scale not in SCALES:
        raise DataError(f"scale must be one of 'log', 'natural'; got {scale!r}")
    return scale


def _param_dict(curve: _Curve, d, what: str) -> dict[str, float]:
    """Validate a mapping of parameter values (init=, fixed=, from_params)."""
    if d is None:
        return {}
    if not isinstance(d, Mapping):
        raise DataError(f"{what} must be a mapping of parameter name to value; got {d!r}")
    out = {}
    for name, val in d.items():
        if name not in curve.params:
            raise DataError(
                f"{what}: unknown parameter {name!r} for curve {curve.name!r}; "
                f"allowed: {', '.join(curve.params)}"
            )
        try:
            x = float(val)
        except (TypeError, ValueError):
            raise DataError(f"{what}[{name!r}] must be a number; got {val!r}") from None
        if not math.isfinite(x):
            raise DataError(f"{what}[{name!r}] must be finite; got {x!r}")
        if name in curve.positive and x <= 0:
            raise DataError(f"{what}[{name!r}] must be > 0 for curve {curve.name!r}; got {x!r}")
        out[name] = x
    return out


def _as_vector(x, name: str) -> np.ndarray:
    try:
        a = np.array(x, dtype=float)
    except (TypeError, ValueError):
        raise DataError(f"{name} must be an array of numbers; got {x!r:.80}") from None
    if a.ndim != 1:
        raise DataError(f"{name} must be one-dimensional; got shape {a.shape}")
    bad = np.flatnonzero(~np.isfinite(a))
    if bad.size:
        shown = ", ".join(f"{i} ({float(a[i])!r})" for i in bad[:10])
        more = f" and {bad.size - 10} more" if bad.size > 10 else ""
        raise DataError(
            f"{name} must be finite (no NaN or inf); non-finite at positions {shown}{more}"
        )
    return a


def _fingerprint(t, y, w) -> str:
    h = hashlib.sha1()
    for a in (t, y, w):
        h.update(np.ascontiguousarray(a, dtype=np.float64).tobytes())
    return h.hexdigest()


def _t_array(t) -> tuple[np.ndarray, bool]:
    scalar = np.ndim(t) == 0
    a = np.atleast_1d(np.asarray(t, dtype=float))
    if a.ndim != 1:
        raise DataError(f"t must be a scalar or one-dimensional; got shape {a.shape}")
    return a, scalar


def _out(a, scalar):
    return float(a[0]) if scalar else a


def _json_float(x):
    x = float(x)
    return x if math.isfinite(x) else None


# ---------------------------------------------------------------------------------------
# known curve
# ---------------------------------------------------------------------------------------
class GrowthCurve:
    """A growth curve with known parameter values (no fit behind it).

    Parameters
    ----------
    curve : str
        One of :data:`CURVES` (see the module docstring for the formulas).
    **params : float
        Every parameter of the curve, e.g. ``GrowthCurve("logistic", Winf=80, k=0.07,
        ti=39)``. Masses in the user's mass unit, times in the time unit.

    Examples
    --------
    >>> g = GrowthCurve("exponential", W0=10.0, k=0.02)
    >>> round(g.predict(50.0), 6), g.rate(50.0)
    (27.182818, 0.02)
    """

    def __init__(self, curve: str, **params):
        c = _get_curve(curve)
        vals = _param_dict(c, params, "params")
        missing = [p for p in c.params if p not in vals]
        if missing:
            raise DataError(
                f"curve {c.name!r} needs parameters {', '.join(c.params)}; "
                f"missing: {', '.join(missing)}"
            )
        self._curve = c
        self._values = np.array([vals[p] for p in c.params], dtype=float)

    @property
    def law(self):
        """The curve's mathematics: ``log_mass(t, v)``, ``log_jac(t, v)``, ``rate(t, v)``
        and ``params``, for models that carry the curve's parameters (turnover fits)."""
        return self._curve

    # -- basic attributes ------------------------------------------------------------
    @property
    def curve(self) -> str:
        """Name of the curve family."""
        return self._curve.name

    @property
    def param_names(self) -> list[str]:
        """Parameter names in the order of :attr:`values`."""
        return list(self._curve.params)

    @property
    def values(self) -> np.ndarray:
        """Parameter values (a copy), in the order of :attr:`param_names`."""
        return self._values.copy()

    @property
    def formula(self) -> str:
        """The curve's formula as plain text."""
        return "W(t) = " + self._curve.formula

    @property
    def label(self) -> str:
        return f"{self.curve} (known curve)"

    @property
    def params(self) -> lmfit.Parameters:
        """The values as :class:`lmfit.Parameters` (all fixed, no errors)."""
        p = lmfit.Parameters()
        for name, v in zip(self._curve.params, self._values, strict=True):
            p.add(name, value=float(v), vary=False)
        return p

    @classmethod
    def from_params(cls, curve: str, **params) -> GrowthCurve:
        """Same as ``GrowthCurve(curve, **params)``."""
        return GrowthCurve(curve, **params)

    # -- evaluation ----------------------------------------------------------------------
    def predict(self, t):
        """Body mass W(t) (mass unit), for a scalar or array of times."""
        a, scalar = _t_array(t)
        return _out(self._curve.mass(a, self._values), scalar)

    def log_mass(self, t):
        """ln W(t); NaN where the curve is not positive (linear, Richards with d < 1)."""
        a, scalar = _t_array(t)
        return _out(np.asarray(self._curve.log_mass(a, self._values), dtype=float), scalar)

    def rate(self, t):
        r"""Specific growth rate :math:`d\ln W/dt` (1/time), from the analytic derivative."""
        a, scalar = _t_array(t)
        return _out(np.asarray(self._curve.rate(a, self._values), dtype=float), scalar)

    def log_mass_jacobian(self, t) -> np.ndarray:
        r"""Analytic :math:`\partial \ln W(t)/\partial\theta`, shape (n_t, n_params).

        Columns follow :attr:`param_names` (fixed parameters included), for propagating
        parameter uncertainty into quantities built on ln W.
        """
        a, _ = _t_array(t)
        return np.asarray(self._curve.log_jac(a, self._values), dtype=float)

    def mean_rate(self, t_start, t_end) -> float:
        r"""Mean specific growth rate between two times (1/time).

        .. math:: \bar r = \frac{\ln W(t_{end}) - \ln W(t_{start})}{t_{end} - t_{start}}
        """
        t0, t1 = float(t_start), float(t_end)
        if not (math.isfinite(t0) and math.isfinite(t1)) or t1 == t0:
            raise DataError(
                f"mean_rate needs two different finite times; got t_start={t_start!r}, "
                f"t_end={t_end!r}"
            )
        lw = self.log_mass(np.array([t0, t1]))
        return float((lw[1] - lw[0]) / (t1 - t0))

    # -- persistence ---------------------------------------------------------------------
    def to_dict(self) -> dict:
        """JSON-safe description; :func:`load_growth` rebuilds it."""
        return {
            "type": "GrowthCurve",
            "version": 1,
            "curve": self.curve,
            "params": {n: float(v) for n, v in zip(self.param_names, self._values, strict=True)},
        }

    def __repr__(self) -> str:
        ps = ", ".join(f"{n}={v:.6g}" for n, v in zip(self.param_names, self._values, strict=True))
        return f"GrowthCurve({self.curve!r}, {ps})"


# ---------------------------------------------------------------------------------------
# the least-squares problem
# ---------------------------------------------------------------------------------------
class _Problem:
    """Weighted least squares of one curve on one data set, on an internal vector.

    Positive parameters are optimised as their logarithm (no hard bounds); the others as
    they are. Residuals r = w (y − f(t; θ)) with y = ln W (log scale) or W (natural scale).
    """

    def __init__(self, curve: _Curve, t, y, w, scale):
        self.curve, self.t, self.y, self.w, self.scale = curve, t, y, w, scale
        self.is_log = np.array([p in curve.positive for p in curve.params])
        self.big = 1e10 * (1.0 + float(np.max(np.abs(y))))

    def model(self, v):
        if self.scale == "log":
            return np.asarray(self.curve.log_mass(self.t, v), dtype=float)
        return np.asarray(self.curve.mass(self.t, v), dtype=float)

    def model_jac(self, v):
        if self.scale == "log":
            return np.asarray(self.curve.log_jac(self.t, v), dtype=float)
        return np.asarray(self.curve.mass_jac(self.t, v), dtype=float)

    def residuals(self, v):
        with np.errstate(all="ignore"):
            return self.w * (self.y - self.model(v))

    def rss(self, v) -> float:
        with np.errstate(all="ignore"):
            r = self.residuals(v)
            out = float(r @ r) if np.all(np.isfinite(r)) else math.inf
        return out if math.isfinite(out) else math.inf

    def _full(self, x, free, base):
        v = base.copy()
        xi = np.where(self.is_log[free], np.exp(np.clip(x, -700.0, 700.0)), x)
        v[free] = xi
        return v

    def max_cosine(self, v, free) -> float:
        """Largest |cosine| between the residual vector and a Jacobian column (internal
        scale) of the free parameters: about 0 at a stationary point; 0 for a perfect fit."""
        r = self.residuals(v)
        rn = float(np.linalg.norm(r))
        if rn <= 1e-10 * max(float(np.linalg.norm(self.w * self.y)), 1e-300):
            return 0.0
        j = self.w[:, None] * self.model_jac(v)[:, free]
        j = np.where(self.is_log[free][None, :], j * v[free][None, :], j)
        with np.errstate(invalid="ignore", divide="ignore"):
            cos = np.abs(j.T @ r) / (np.linalg.norm(j, axis=0) * rn)
        if cos.size == 0:
            return 0.0
        return float(np.max(cos)) if np.all(np.isfinite(cos)) else math.inf

    def stationary(self, v, free, tol: float = 1e-4) -> bool:
        return self.max_cosine(v, free) <= tol

    def solve(self, v0, free, tol: float | None = None, max_nfev: int | None = None):
        """Minimise over the parameters where ``free`` is True, from ``v0``.

        Returns (v, rss, status) with status > 0 for a converged solve: scipy's codes 1–4,
        or 5 for the evaluation limit reached at a stationary point (every residual–Jacobian
        cosine below 1e-6).
        """
        tol = _TOL if tol is None else tol
        max_nfev = _MAX_NFEV if max_nfev is None else max_nfev
        v0 = np.asarray(v0, dtype=float)
        if not free.any():
            return v0.copy(), self.rss(v0), 1
        if not self.curve.valid_params(v0) or not math.isfinite(self.rss(v0)):
            return v0.copy(), math.inf, -1
        logf = self.is_log[free]
        x0 = np.where(logf, np.log(np.where(logf, v0[free], 1.0)), v0[free])

        def fun(x):
            r = self.residuals(self._full(x, free, v0))
            if not np.all(np.isfinite(r)):
                return np.full_like(self.y, self.big)
            return r

        def jac(x):
            v = self._full(x, free, v0)
            j = -self.w[:, None] * self.model_jac(v)[:, free]
            j = np.where(logf[None, :], j * v[free][None, :], j)
            if not np.all(np.isfinite(j)):
                return np.zeros_like(j)
            return j

        m = int(free.sum())
        if self.y.size < m:  # pragma: no cover - guarded by the caller
            return v0.copy(), math.inf, -1
        with np.errstate(all="ignore"):
            res = optimize.least_squares(
                fun, x0, jac=jac, method="lm", xtol=tol, ftol=tol, gtol=tol,
                max_nfev=max_nfev, x_scale="jac",
            )
        v = self._full(res.x, free, v0)
        rss = self.rss(v)
        status = int(res.status) if math.isfinite(rss) else -1
        if status == 0 and self.max_cosine(v, free) <= _STATIONARY:
            # evaluation limit reached in a flat valley where the residuals are already
            # orthogonal to the Jacobian: a stationary point (the RSS cannot be lowered),
            # the tolerances of 1e-15 being too tight to be met there
            status = 5
        return v, rss, status


# ---------------------------------------------------------------------------------------
# fitted curve
# ---------------------------------------------------------------------------------------
class GrowthFit(GrowthCurve):
    r"""A growth curve fitted to masses by least squares.

    Built by :func:`fit_growth`; do not construct directly. Besides the evaluation methods of
    :class:`GrowthCurve` (``predict``, ``log_mass``, ``rate``, ``log_mass_jacobian``):

    Attributes
    ----------
    curve, scale : str
        Curve family and fitting scale (``"log"``: ln W fitted; ``"natural"``: W).
    params : lmfit.Parameters
        Values, stderr from :math:`s^2 (J^T J)^{-1}` with :math:`s^2 = RSS/(n - p)`, and
        correlations; fixed parameters have ``vary=False`` and no stderr.
    values : ndarray, param_names : list of str
    t, mass : ndarray
        Copies of the data (read-only).
    residuals : ndarray
        ``(y − fitted)/σ_y`` on the fitting scale (plain differences without ``sigma``), so
        ``rss = sum(residuals**2)``.
    rss, nobs, nvarys : float, int, int
    aic, aicc, bic : float
        Gaussian log-likelihood forms with K = nvarys + 1 (the residual variance is
        estimated too; Burnham & Anderson 2002, least-squares case), as for turnover fits:
        :math:`AIC = n \ln(RSS/n) + 2K`, :math:`AICc = AIC + 2K(K+1)/(n-K-1)` (NaN with a
        note when :math:`n - K - 1 \le 0`), :math:`BIC = n \ln(RSS/n) + K \ln n`.
    n_criteria_params : int
        K above.
    converged : bool
    warnings : list of str
    data_fingerprint : str
        SHA-1 of the float64 bytes of t, the fitted response and the weights: two fits are
        on the same data when their fingerprints match.
    """

    def __init__(self, *, curve: _Curve, scale: str, values, vary, t, mass, sigma,
                 converged: bool, warn_list, nfev: int = 0):
        self._curve = curve
        self._scale = scale
        self._values = np.asarray(values, dtype=float).copy()
        self._vary = np.asarray(vary, dtype=bool).copy()
        self._t = np.array(t, dtype=float)
        self._mass = np.array(mass, dtype=float)
        self._sigma = None if sigma is None else np.array(sigma, dtype=float)
        for a in (self._t, self._mass) + (() if self._sigma is None else (self._sigma,)):
            a.setflags(write=False)
        self._converged = bool(converged)
        self._warnings = list(warn_list)
        self._nfev = int(nfev)
        self._y, self._w = _response(self._mass, self._sigma, scale)
        self._problem = _Problem(curve, self._t, self._y, self._w, scale)
        self._resid = self._problem.residuals(self._values)
        self._resid.setflags(write=False)
        self._rss = float(self._resid @ self._resid)
        self._cov = self._covariance()

    @property
    def law(self):
        """The curve's mathematics: ``log_mass(t, v)``, ``log_jac(t, v)``, ``rate(t, v)``
        and ``params``, for models that carry the curve's parameters (turnover fits)."""
        return self._curve

    # -- statistics ------------------------------------------------------------------
    def _covariance(self) -> np.ndarray:
        with np.errstate(all="ignore"):
            return self._covariance_raw()

    def _covariance_raw(self) -> np.ndarray:
        free = self._vary
        j = -self._w[:, None] * self._problem.model_jac(self._values)[:, free]
        p = j.shape[1]
        dof = self.nobs - p
        if dof <= 0 or not np.all(np.isfinite(j)):
            return np.full((p, p), np.nan)
        norms = np.linalg.norm(j, axis=0)
        if np.any(norms == 0):
            return np.full((p, p), np.nan)
        js = j / norms
        _, s, vt = np.linalg.svd(js, full_matrices=False)
        if s[-1] <= 1e-12 * s[0]:
            return np.full((p, p), np.nan)
        inv = (vt.T / s**2) @ vt
        return (self._rss / dof) * inv / np.outer(norms, norms)

    @property
    def scale(self) -> str:
        return self._scale

    @property
    def label(self) -> str:
        return f"{self.curve} ({self._scale} scale)"

    @property
    def t(self) -> np.ndarray:
        return self._t

    @property
    def mass(self) -> np.ndarray:
        return self._mass

    @property
    def residuals(self) -> np.ndarray:
        return self._resid

    @property
    def rss(self) -> float:
        return self._rss

    @property
    def nobs(self) -> int:
        return int(self._t.size)

    @property
    def nvarys(self) -> int:
        return int(self._vary.sum())

    @property
    def converged(self) -> bool:
        return self._converged

    @property
    def warnings(self) -> list[str]:
        return list(self._warnings)

    @property
    def data_fingerprint(self) -> str:
        return _fingerprint(self._t, self._y, self._w)

    @property
    def covariance(self) -> pd.DataFrame:
        """Covariance of the varying parameters, :math:`s^2 (J^T J)^{-1}` (NaN if singular)."""
        names = [n for n, f in zip(self.param_names, self._vary, strict=True) if f]
        return pd.DataFrame(self._cov.copy(), index=names, columns=names)

    def _stderr(self) -> np.ndarray:
        se = np.full(self._values.size, np.nan)
        with np.errstate(invalid="ignore"):
            se[self._vary] = np.sqrt(np.diag(self._cov))
        return se

    @property
    def stderr(self) -> np.ndarray:
        """Standard errors in :attr:`param_names` order (NaN for fixed parameters)."""
        return self._stderr()

    @property
    def params(self) -> lmfit.Parameters:
        se = self._stderr()
        p = lmfit.Parameters()
        for name, v, vary, s in zip(self.param_names, self._values, self._vary, se, strict=True):
            p.add(name, value=float(v), vary=bool(vary),
                  min=0.0 if name in self._curve.positive else -np.inf)
            if vary:
                p[name].stderr = float(s)
        free = [n for n, f in zip(self.param_names, self._vary, strict=True) if f]
        with np.errstate(invalid="ignore", divide="ignore"):
            d = np.sqrt(np.diag(self._cov))
            corr = self._cov / np.outer(d, d)
        for i, a in enumerate(free):
            p[a].correl = {b: float(corr[i, j]) for j, b in enumerate(free) if j != i}
        return p

    def _loglik_term(self) -> float:
        n = self.nobs
        if self._rss <= 0:
            return -math.inf
        return n * math.log(self._rss / n)

    @property
    def n_criteria_params(self) -> int:
        """Parameters counted by the information criteria: varying ones + the variance."""
        return self.nvarys + 1

    @property
    def aic(self) -> float:
        return self._loglik_term() + 2 * self.n_criteria_params

    @property
    def aicc(self) -> float:
        n, k = self.nobs, self.n_criteria_params
        if n - k - 1 <= 0:
            return math.nan
        return self.aic + 2 * k * (k + 1) / (n - k - 1)

    @property
    def bic(self) -> float:
        return self._loglik_term() + self.n_criteria_params * math.log(self.nobs)

    def mean_rate(self, t_start=None, t_end=None) -> float:
        r"""Mean specific growth rate over the data's time span (or the given times).

        .. math:: \bar r = \frac{\ln W(t_{end}) - \ln W(t_{start})}{t_{end} - t_{start}}

        with :math:`t_{start}, t_{end}` the first and last sampling times by default.
        """
        t0 = float(np.min(self._t)) if t_start is None else t_start
        t1 = float(np.max(self._t)) if t_end is None else t_end
        return super().mean_rate(t0, t1)

    # -- intervals -------------------------------------------------------------------
    def conf_int(self, level: float = 0.95, method: str = "profile") -> pd.DataFrame:
        r"""Confidence intervals of the varying parameters.

        Parameters
        ----------
        level : float, default 0.95
            Confidence level, in (0, 1).
        method : {"profile", "asymptotic"}, default "profile"
            ``"asymptotic"``: estimate ± :math:`t_{n-p,(1+level)/2}` · stderr.
            ``"profile"``: profile likelihood; at each trial value of a parameter the others
            are re-optimised, and the bound is where
            :math:`(RSS(\theta_j) - RSS_{min})/s^2 = F_{level}(1, n - p)`. The search steps
            outward (doubling steps from half a standard error, on the log scale for
            positive parameters) and the crossing is found by Brent's method. A bound that
            does not close within the search is ``open`` (±inf); for a positive parameter
            whose profile stays below the critical value down to 0 the bound is 0 with status
            ``at_bound``; a failed inner fit gives NaN with status ``failed``.

        Returns
        -------
        DataFrame
            One row per varying parameter: parameter, estimate, lower, upper, level, method,
            lower_status, upper_status.
        """
        level = check_level(level)
        if method not in ("profile", "asymptotic"):
            raise DataError(f"method must be one of 'profile', 'asymptotic'; got {method!r}")
        rows = []
        se = self._stderr()
        dof = self.nobs - self.nvarys
        for j, name in enumerate(self.param_names):
            if not self._vary[j]:
                continue
            est = float(self._values[j])
            if method == "asymptotic":
                if math.isfinite(se[j]):
                    q = stats.t.ppf(0.5 + level / 2, dof)
                    lo, hi, ls, us = est - q * se[j], est + q * se[j], "ok", "ok"
                else:
                    lo, hi, ls, us = math.nan, math.nan, "failed", "failed"
            else:
                lo, ls = self._profile_bound(j, -1.0, level)
                hi, us = self._profile_bound(j, +1.0, level)
            rows.append(
                dict(parameter=name, estimate=est, lower=lo, upper=hi, level=level,
                     method=method, lower_status=ls, upper_status=us)
            )
        return pd.DataFrame(
            rows, columns=["parameter", "estimate", "lower", "upper", "level", "method",
                           "lower_status", "upper_status"],
        )

    def _profile_bound(self, j: int, sign: float, level: float):
        prob = self._problem
        n, p = self.nobs, self.nvarys
        s2 = self._rss / (n - p)
        est = float(self._values[j])
        if s2 <= 0:
            return est, "ok"
        crit = stats.f.ppf(level, 1, n - p)
        is_log = bool(prob.is_log[j])
        se = self._stderr()[j]
        h = se / est if is_log else se
        if not math.isfinite(h) or h <= 0:
            h = 0.1 if is_log else 0.1 * max(abs(est), 1e-8)
        max_off = 25.0 if is_log else 1e3 * h
        free = self._vary.copy()
        free[j] = False
        x_est = math.log(est) if is_log else est
        if is_log:  # stay within floating point: exp(±700)
            max_off = min(max_off, 700.0 - sign * x_est)
            if max_off <= 0.5 * h:
                return (0.0, "at_bound") if sign < 0 else (math.inf, "open")
        solved: dict[float, np.ndarray] = {0.0: self._values.copy()}
        lower_found = [False]

        def value_at(c):
            x = x_est + sign * c
            return math.exp(x) if is_log else x

        memo: dict[float, float] = {}

        def g(c):
            # memoised, so that Brent's method sees the bracket values the search saw even
            # where the re-optimisation from another warm start would land elsewhere
            if c not in memo:
                memo[c] = g_eval(c)
            return memo[c]

        def g_eval(c):
            near = min(solved, key=lambda cc: abs(cc - c))
            v0 = solved[near].copy()
            v0[j] = value_at(c)
            v, rss, status = prob.solve(v0, free, tol=_PROFILE_TOL, max_nfev=_PROFILE_MAX_NFEV)
            if status <= 0 or not math.isfinite(rss):
                raise _ProfileFailure
            solved[c] = v
            stat = (rss - self._rss) / s2
            if stat > crit and np.any(v[prob.is_log] > _HUGE) and not prob.stationary(v, free):
                # another parameter ran into the float limit and the re-optimisation was held
                # back there: the crossing comes from the number format, not from the data,
                # and the profile has not closed anywhere before it
                raise _ProfileOpen
            if stat < -1e-6 * max(1.0, crit):
                lower_found[0] = True
            return stat - crit

        c_prev, c = 0.0, 0.5 * h
        try:
            while True:
                gc = g(c)
                if gc > 0:
                    root = optimize.brentq(g, c_prev, c, xtol=1e-12 * max(1.0, c), rtol=1e-12)
                    out, status = value_at(root), "ok"
                    break
                if c >= max_off:
                    if is_log and sign < 0:
                        out, status = 0.0, "at_bound"
                    else:
                        out, status = sign * math.inf, "open"
                    break
                c_prev, c = c, min(2.0 * c, max_off)
        except _ProfileFailure:
            out, status = math.nan, "failed"
        except _ProfileOpen:
            out, status = sign * math.inf, "open"
        if lower_found[0]:
            warnings.warn(
                f"profile of {self.param_names[j]!r} found a lower RSS than the fit: the fit "
                "may not be at the global minimum",
                ConvergenceWarning,
                stacklevel=3,
            )
        return out, status

    # -- reporting -------------------------------------------------------------------
    def summary(self) -> GrowthSummary:
        """Header, parameter table and numbered notes (``str()`` and ``_repr_html_``)."""
        se = self._stderr()
        header = [
            ("Curve", f"{self.curve}: {self.formula}"),
            ("Scale", "ln(mass) fitted (multiplicative error)" if self._scale == "log"
             else "mass fitted (additive error)"),
            ("Weights", "none" if self._sigma is None
             else "relative, from sigma (residual variance estimated)"),
            ("Observations", str(self.nobs)),
            ("Varying parameters", str(self.nvarys)),
            ("RSS", f"{self._rss:.6g}"),
            ("AICc", f"{self.aicc:.6g}"),
            ("Converged", "yes" if self._converged else "no"),
        ]
        with np.errstate(invalid="ignore", divide="ignore"):
            rel = 100.0 * se / np.abs(self._values)
        table = pd.DataFrame(
            {
                "parameter": self.param_names,
                "estimate": self._values,
                "stderr": se,
                "rel_stderr_%": rel,
                "vary": self._vary,
            }
        )
        return GrowthSummary(title=f"Growth fit: {self.label}", header=header, table=table,
                             notes=self.warnings)

    def to_dict(self) -> dict:
        """JSON-safe record of the fit; :func:`load_growth` or :meth:`from_dict` rebuild it."""
        return {
            "type": "GrowthFit",
            "version": 1,
            "curve": self.curve,
            "scale": self._scale,
            "param_names": self.param_names,
            "values": [float(v) for v in self._values],
            "vary": [bool(f) for f in self._vary],
            "t": [float(v) for v in self._t],
            "mass": [float(v) for v in self._mass],
            "sigma": None if self._sigma is None else [float(v) for v in self._sigma],
            "converged": self._converged,
            "warnings": list(self._warnings),
            "nfev": self._nfev,
            "rss": _json_float(self._rss),
            "stderr": [_json_float(s) for s in self._stderr()],
        }

    @classmethod
    def from_dict(cls, d: Mapping) -> GrowthFit:
        """Rebuild a fit from :meth:`to_dict` output (no refitting)."""
        if not isinstance(d, Mapping) or d.get("type") != "GrowthFit":
            got = d.get("type") if isinstance(d, Mapping) else type(d).__name__
            raise DataError(f"not a GrowthFit record: 'type' must be 'GrowthFit'; got {got!r}")
        try:
            curve = _get_curve(d["curve"])
            names = list(d["param_names"])
            if names != list(curve.params):
                raise DataError(
                    f"GrowthFit record: param_names {names} do not match curve "
                    f"{curve.name!r} ({', '.join(curve.params)})"
                )
            return cls(
                curve=curve,
                scale=_check_scale(d["scale"]),
                values=[float(v) for v in d["values"]],
                vary=[bool(f) for f in d["vary"]],
                t=np.asarray(d["t"], dtype=float),
                mass=np.asarray(d["mass"], dtype=float),
                sigma=None if d.get("sigma") is None else np.asarray(d["sigma"], dtype=float),
                converged=bool(d["converged"]),
                warn_list=list(d.get("warnings", [])),
                nfev=int(d.get("nfev", 0)),
            )
        except KeyError as e:
            raise DataError(f"GrowthFit record is missing the key {e.args[0]!r}") from None

    def __repr__(self) -> str:
        ps = ", ".join(f"{n}={v:.6g}" for n, v in zip(self.param_names, self._values, strict=True))
        return f"<GrowthFit {self.label}: {ps}; n={self.nobs}, RSS={self._rss:.4g}>"


class _ProfileFailure(Exception):
    """An inner fit of a profile did not converge."""


class _ProfileOpen(Exception):
    """A profile reached the float limit of another parameter without closing."""


def _response(mass, sigma, scale):
    """Fitted response and weights: ln W with weights W/σ (delta method), or W with 1/σ."""
    if scale == "log":
        y = np.log(mass)
        w = np.ones_like(mass) if sigma is None else mass / sigma
    else:
        y = mass.copy()
        w = np.ones_like(mass) if sigma is None else 1.0 / sigma
    return y, w


# ---------------------------------------------------------------------------------------
# summary object
# ---------------------------------------------------------------------------------------
@dataclass
class GrowthSummary:
    """Printable summary of a growth fit: header, parameter table, numbered notes."""

    title: str
    header: list
    table: pd.DataFrame
    notes: list

    def __str__(self) -> str:
        width = max(len(k) for k, _ in self.header)
        lines = [self.title, "=" * len(self.title)]
        lines += [f"{k:<{width}}  {v}" for k, v in self.header]
        lines += ["", self.table.to_string(index=False, float_format=lambda x: f"{x:.6g}")]
        if self.notes:
            lines += ["", "Notes:"]
            lines += [f"[{i}] {n}" for i, n in enumerate(self.notes, start=1)]
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        esc = html.escape
        head = "".join(f"<tr><th>{esc(k)}</th><td>{esc(v)}</td></tr>" for k, v in self.header)
        parts = [
            f"<h4>{esc(self.title)}</h4>",
            f"<table>{head}</table>",
            self.table.to_html(index=False, float_format=lambda x: f"{x:.6g}"),
        ]
        if self.notes:
            parts.append("<p>Notes:</p><ol>" + "".join(f"<li>{esc(n)}</li>" for n in self.notes)
                         + "</ol>")
        return "".join(parts)

    def __repr__(self) -> str:
        return str(self)


# ---------------------------------------------------------------------------------------
# fitting
# ---------------------------------------------------------------------------------------
def fit_growth(t, mass, curve: str = "logistic", *, scale: str = "log", sigma=None,
               init=None, fixed=None) -> GrowthFit:
    r"""Fit a body-mass growth curve.

    Parameters
    ----------
    t : array-like of shape (n,)
        Sampling times (time unit of the experiment, e.g. days since the diet switch).
    mass : array-like of shape (n,)
        Body masses (> 0, any mass unit). Decreasing masses (loss) are allowed.
    curve : {"exponential", "linear", "logistic", "gompertz", "von_bertalanffy", "richards"}
        Curve family, default "logistic" (formulas and sources in the module docstring and
        in the curve docstrings):

        .. math::
            \text{exponential: } W_0 e^{kt};\quad
            \text{linear: } W_0 + bt;\quad
            \text{logistic: } \frac{W_\infty}{1 + e^{-k(t - t_i)}};\quad
            \text{gompertz: } W_\infty e^{-e^{-k(t - t_i)}};

        .. math::
            \text{von\_bertalanffy: } W_\infty\left(1 - \left(1 - (W_0/W_\infty)^{1/3}\right)
            e^{-kt}\right)^3;\quad
            \text{richards: } W_\infty\left(1 + (d-1)e^{-k(t - t_i)}\right)^{1/(1-d)}

    scale : {"log", "natural"}, default "log"
        ``"log"`` fits ln W (multiplicative error, usual for masses); ``"natural"`` fits W.
    sigma : array-like of shape (n,), optional
        Standard deviation of each mass (mass unit), used as relative weights (the residual
        variance is still estimated). On the log scale it is carried to ln W as σ/W (delta
        method).
    init : dict, optional
        Starting values for some parameters; the automatic deterministic starts are tried as
        well and the best fit by RSS is kept.
    fixed : dict, optional
        Parameters held at given values (e.g. ``{"W0": 12.0}``).

    Returns
    -------
    GrowthFit

    Raises
    ------
    DataError
        Mismatched lengths, non-finite values, masses ≤ 0, unknown curve or scale, bad
        ``sigma``/``init``/``fixed``, or too few points (the curve needs at least one more
        mass than it has varying parameters, at that many distinct times).
    FitError
        When no starting point leads to a converged least-squares solution.

    Notes
    -----
    Minimisation by ``scipy.optimize.least_squares`` (Levenberg–Marquardt, analytic
    Jacobian, xtol = ftol = gtol = 1e-15), positive parameters on the log scale internally;
    several deterministic starts (see each curve), the lowest RSS kept.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.array([0.0, 10, 20, 30, 40])
    >>> w = 5.0 * np.exp(0.03 * t)   # invented, noise-free masses
    >>> fit = fit_growth(t, w, "exponential")
    >>> round(fit.params["k"].value, 10)
    0.03
    """
    c = _get_curve(curve)
    scale = _check_scale(scale)
    t = _as_vector(t, "t")
    mass = _as_vector(mass, "mass")
    if t.size != mass.size:
        raise DataError(f"t and mass must have the same length; got {t.size} and {mass.size}")
    bad = np.flatnonzero(mass <= 0)
    if bad.size:
        shown = ", ".join(f"{i} ({float(mass[i])!r})" for i in bad[:10])
        raise DataError(f"mass must be > 0 (body masses); got values <= 0 at positions {shown}")
    if sigma is not None:
        if np.ndim(sigma) == 0:
            sigma = [sigma] * t.size
        sigma = _as_vector(sigma, "sigma")
        if sigma.size != t.size:
            raise DataError(
                f"sigma must have the same length as mass; got {sigma.size} and {mass.size}"
            )
        if np.any(sigma <= 0):
            i = int(np.flatnonzero(sigma <= 0)[0])
            raise DataError(f"sigma must be > 0; got {float(sigma[i])!r} at position {i}")
    fixed_d = _param_dict(c, fixed, "fixed")
    init_d = _param_dict(c, init, "init")
    both = sorted(set(fixed_d) & set(init_d))
    if both:
        raise DataError(f"parameters {both} are given in both init and fixed; give each once")
    free = np.array([p not in fixed_d for p in c.params])
    p = int(free.sum())
    if p == 0:
        raise DataError(
            f"fixed holds every parameter of curve {c.name!r} ({', '.join(c.params)}); "
            "at least one must vary (use GrowthCurve for a known curve)"
        )
    if t.size <= p:
        raise DataError(
            f"curve {c.name!r} has {p} varying parameters and needs at least {p + 1} mass "
            f"points; got {t.size}"
        )
    n_times = np.unique(t).size
    if n_times < p:
        raise DataError(
            f"curve {c.name!r} has {p} varying parameters and needs masses at {p} or more "
            f"distinct times; got {n_times}"
        )

    y, w = _response(mass, sigma, scale)
    prob = _Problem(c, t, y, w, scale)
    given = {**init_d, **fixed_d}
    with np.errstate(all="ignore"):
        auto = c.starts(t, mass, given)
    starts = []
    if init_d:
        base = auto[0].copy() if auto else np.ones(len(c.params))
        for name, v in given.items():
            base[c.params.index(name)] = v
        starts.append(base)
    for s in auto:
        s = s.copy()
        for name, v in fixed_d.items():
            s[c.params.index(name)] = v
        starts.append(s)
    scored = []
    for s in starts:
        if c.valid_params(s):
            r = prob.rss(s)
            if math.isfinite(r):
                scored.append((r, len(scored), s))
    if not scored:
        raise FitError(
            f"curve {c.name!r}: no valid starting values could be built from the data "
            f"(masses {float(mass.min()):.4g} to {float(mass.max()):.4g}); give init="
        )
    scored.sort(key=lambda z: (z[0], z[1]))
    chosen = [s for _, _, s in scored[:_N_RUNS]]
    if init_d and not any(s is starts[0] for s in chosen) and scored and any(
        s is starts[0] for _, _, s in scored
    ):
        chosen.insert(0, starts[0])  # the user's start is always tried

    best = None
    last = None
    for s in chosen:
        v, rss, status = prob.solve(s, free)
        if math.isfinite(rss) and (last is None or rss < last[1]):
            last = (v, rss)
        if status > 0 and math.isfinite(rss) and (best is None or rss < best[1]):
            best = (v, rss)
    if best is None:
        tried = ""
        if last is not None:
            tried = " (lowest RSS reached at " + ", ".join(
                f"{n}={x:.4g}" for n, x in zip(c.params, last[0], strict=True)
            ) + "; parameters that run off to huge or tiny values mean the data do not pin " \
                "this curve down)"
        raise FitError(
            f"curve {c.name!r} ({scale} scale) did not converge from any of {len(chosen)} "
            f"starting points within {_MAX_NFEV} evaluations{tried}; try another curve, give "
            "init=, or fix a parameter"
        )
    v, rss = best
    fit = GrowthFit(curve=c, scale=scale, values=v, vary=free, t=t, mass=mass, sigma=sigma,
                    converged=True, warn_list=[])
    notes = _trust_checks(fit, prob)
    fit._warnings = [msg for msg, _ in notes]
    conv_failed = any(cat is ConvergenceWarning for _, cat in notes)
    if conv_failed:
        fit._converged = False
    for msg, cat in notes:
        warnings.warn(f"{fit.label}: {msg}", cat, stacklevel=2)
    return fit


def _trust_checks(fit: GrowthFit, prob: _Problem) -> list[tuple[str, type]]:
    """Trust signals on a fit: (message, warning class) pairs."""
    out: list[tuple[str, type]] = []
    free = fit._vary
    names = [n for n, f in zip(fit.param_names, free, strict=True) if f]
    # stationarity: cosine between residual vector and each Jacobian column
    cosine = prob.max_cosine(fit._values, free)
    if cosine > 1e-4:
        out.append(
            ("the optimizer stopped where the gradient is not small "
             f"(largest residual–Jacobian cosine {cosine:.2g}): not converged",
             ConvergenceWarning)
        )
    cov = fit._cov
    if np.any(~np.isfinite(cov)):
        out.append(
            ("covariance could not be estimated (J^T J singular or too few degrees of freedom):"
             " standard errors are NaN", IdentifiabilityWarning)
        )
    else:
        d = np.sqrt(np.diag(cov))
        with np.errstate(invalid="ignore", divide="ignore"):
            corr = cov / np.outer(d, d)
        for a in range(len(names)):
            for b in range(a + 1, len(names)):
                if abs(corr[a, b]) > _CORR_LIMIT:
                    out.append(
                        (f"parameters {names[a]} and {names[b]} are strongly correlated "
                         f"(r = {corr[a, b]:.4f}): the data hardly separate them",
                         IdentifiabilityWarning)
                    )
    if "Winf" in fit.param_names and fit.curve != "von_bertalanffy" or (
        fit.curve == "von_bertalanffy" and fit._values[0] > fit._values[2]
    ):
        winf = fit._values[fit.param_names.index("Winf")]
        reached = float(np.nanmax(fit.predict(fit._t))) / winf
        if reached < _ASYMPTOTE_REACHED:
            out.append(
                (f"the data reach only {100 * reached:.2g} % of the fitted asymptote Winf = "
                 f"{winf:.4g}: Winf is an extrapolation", DesignWarning)
            )
    if fit.curve == "linear" and np.any(fit.predict(fit._t) <= 0):
        out.append(("the fitted line is at or below zero mass at some sampling times; ln W and "
                    "the rate are undefined there", DataWarning))
    n, p = fit.nobs, fit.nvarys + 1
    if n - p - 1 <= 0:
        out.append(
            (f"AICc is undefined (NaN): n − K − 1 = {n - p - 1} with n = {n} points and "
             f"K = {p} parameters (the residual variance included)", DesignWarning)
        )
    return out


# ---------------------------------------------------------------------------------------
# persistence
# ---------------------------------------------------------------------------------------
def load_growth(d: Mapping) -> GrowthCurve:
    """Rebuild a :class:`GrowthFit` or :class:`GrowthCurve` from its ``to_dict()`` output."""
    if not isinstance(d, Mapping) or "type" not in d:
        raise DataError(
            "load_growth needs a dict made by GrowthFit.to_dict() or GrowthCurve.to_dict(); "
            f"got {type(d).__name__} without a 'type' key"
        )
    if d["type"] == "GrowthFit":
        return GrowthFit.from_dict(d)
    if d["type"] == "GrowthCurve":
        params = d.get("params")
        if not isinstance(params, Mapping):
            raise DataError("GrowthCurve record needs a 'params' mapping")
        return GrowthCurve(d.get("curve"), **params)
    raise DataError(f"'type' must be one of 'GrowthFit', 'GrowthCurve'; got {d['type']!r}")


# ---------------------------------------------------------------------------------------
# many subjects
# ---------------------------------------------------------------------------------------
@dataclass(frozen=True)
class GrowthFitFailure:
    """A subject whose growth fit could not be made: ``status`` is "failed", with a reason."""

    subject: object
    curve: str
    scale: str
    reason: str
    status: str = "failed"


class GrowthFitSet(Mapping):
    """Growth fits by subject: ``fits[subject]`` is a :class:`GrowthFit` or a
    :class:`GrowthFitFailure`; :meth:`table` gives one row per subject and parameter."""

    def __init__(self, entries: dict, curve: str, scale: str, by):
        self._entries = dict(entries)
        self.curve = curve
        self.scale = scale
        self.by = by

    def __getitem__(self, key):
        return self._entries[key]

    def __iter__(self) -> Iterator:
        return iter(self._entries)

    def __len__(self) -> int:
        return len(self._entries)

    @property
    def failures(self) -> dict:
        """Subjects whose fit failed, with their :class:`GrowthFitFailure`."""
        return {k: v for k, v in self._entries.items() if isinstance(v, GrowthFitFailure)}

    def table(self) -> pd.DataFrame:
        """Tidy table: subject, curve, scale, parameter, estimate, stderr, nobs, rss, aicc,
        status ("ok", "not converged" or "failed") and reason."""
        names = list(_get_curve(self.curve).params)
        rows = []
        for subj, e in self._entries.items():
            if isinstance(e, GrowthFitFailure):
                for name in names:
                    rows.append(dict(subject=subj, curve=e.curve, scale=e.scale, parameter=name,
                                     estimate=math.nan, stderr=math.nan, nobs=0, rss=math.nan,
                                     aicc=math.nan, status="failed", reason=e.reason))
                continue
            se = e.stderr
            for name, v, s in zip(e.param_names, e.values, se, strict=True):
                rows.append(dict(subject=subj, curve=e.curve, scale=e.scale, parameter=name,
                                 estimate=float(v), stderr=float(s), nobs=e.nobs, rss=e.rss,
                                 aicc=e.aicc, status="ok" if e.converged else "not converged",
                                 reason="; ".join(e.warnings)))
        cols = ["subject", "curve", "scale", "parameter", "estimate", "stderr", "nobs", "rss",
                "aicc", "status", "reason"]
        df = pd.DataFrame(rows, columns=cols)
        if isinstance(self.by, str):
            df = df.rename(columns={"subject": self.by})
        return df

    def __repr__(self) -> str:
        return (f"<GrowthFitSet {self.curve} ({self.scale} scale): {len(self)} subjects, "
                f"{len(self.failures)} failed>")


def fit_growth_each(masses: pd.DataFrame, *, curve: str = "logistic", scale: str = "log",
                    by="subject") -> GrowthFitSet:
    """Fit one growth curve per subject.

    Parameters
    ----------
    masses : DataFrame
        The masses table: a ``by`` column (default ``subject``), ``time`` and ``mass``. It is
        not modified.
    curve, scale : str
        As in :func:`fit_growth`.
    by : str, default "subject"
        Column identifying the animal.

    Returns
    -------
    GrowthFitSet
        Mapping subject → :class:`GrowthFit`; a subject whose fit fails is a
        :class:`GrowthFitFailure` (status "failed", reason) instead of stopping the others.
        Warnings of each fit are re-issued with the subject named.
    """
    _get_curve(curve)
    _check_scale(scale)
    if not isinstance(masses, pd.DataFrame):
        raise DataError(f"masses must be a pandas DataFrame; got {type(masses).__name__}")
    if not isinstance(by, str):
        raise DataError(f"by must be a column name (str); got {by!r}")
    need = [by, "time", "mass"]
    missing = [col for col in need if col not in masses.columns]
    if missing:
        raise DataError(
            f"masses needs columns {need}; missing {missing} (columns: {list(masses.columns)})"
        )
    keys = masses[by]
    if keys.isna().any():
        rows = masses.index[keys.isna().to_numpy()][:10].tolist()
        raise DataError(f"masses: column {by!r} is empty in rows {rows} (row labels)")
    entries: dict = {}
    for key, grp in masses.groupby(by, sort=False):
        subj = key.item() if isinstance(key, np.generic) else key
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                entries[subj] = fit_growth(grp["time"].to_numpy(), grp["mass"].to_numpy(),
                                           curve, scale=scale)
            except (DataError, FitError) as e:
                entries[subj] = GrowthFitFailure(subject=subj, curve=curve, scale=scale,
                                                 reason=str(e))
        for wmsg in caught:
            warnings.warn(f"{by} {subj!r}: {wmsg.message}", wmsg.category, stacklevel=2)
    return GrowthFitSet(entries, curve, scale, by)
