r"""Growth laws: the mathematics of each body-mass growth-curve family.

Each family is an object with ``log_mass`` (:math:`\ln W(t)`), ``log_jac``
(:math:`\partial \ln W/\partial\theta`), ``rate`` (:math:`d\ln W/dt`), ``mass``, ``mass_jac``
and deterministic starting values, each with its formula and source in its docstring.
:func:`curve_law` looks a family up by name (:data:`CURVES`); :func:`check_curve_values`
checks parameter values given for one. The turnover model uses a law directly (through
:attr:`isoturnover.growth.GrowthCurve.law`); :class:`~isoturnover.growth.GrowthCurve` is the
curve with known values, :func:`~isoturnover.growthfit.fit_growth` fits one to masses.

Adding a family: subclass ``_Curve`` here with ``log_mass``, ``log_jac``, ``rate``,
``starts``, the formula in a ``.. math::`` docstring and its source, and register it in
``_CURVE_OBJECTS`` (hence :data:`CURVES`).

The formulas are listed in the docstring of :mod:`isoturnover.growth`; time ``t`` is in the
masses' time unit, masses in the user's mass unit.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special

from .conventions import check_named_values
from .errors import DataError

__all__ = [
    "CURVES",
    "check_curve_values",
    "curve_law",
]

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
        """W(t) = exp(ln W(t)) for the parameter vector ``v`` (order of ``params``)."""
        with np.errstate(over="ignore", invalid="ignore"):
            return np.exp(self.log_mass(t, v))

    def mass_jac(self, t, v):
        """dW/dθ = W · d ln W/dθ, shape (n, p) (chain rule)."""
        with np.errstate(over="ignore", invalid="ignore"):
            return self.mass(t, v)[:, None] * self.log_jac(t, v)

    def valid_params(self, v):
        """True when ``v`` is finite and every parameter in ``positive`` is > 0."""
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
#: Names of the growth-curve families, in the order the documentation lists them.
CURVES = tuple(_CURVE_OBJECTS)


def curve_law(curve):
    """The mathematics of a named growth-curve family.

    Parameters
    ----------
    curve : str
        One of :data:`CURVES` (exact spelling, no prefix matching).

    Returns
    -------
    object
        The family's law: ``name``, ``params`` (parameter names), ``positive`` (names that
        must be > 0), ``log_mass(t, v)``, ``log_jac(t, v)``, ``rate(t, v)``, ``mass(t, v)``,
        ``mass_jac(t, v)``, ``starts(t, mass, given)`` and ``valid_params(v)``; the same
        object as :attr:`GrowthCurve.law`.

    Raises
    ------
    DataError
        When ``curve`` is not one of :data:`CURVES`.
    """
    if not isinstance(curve, str) or curve not in _CURVE_OBJECTS:
        allowed = ", ".join(repr(c) for c in CURVES)
        raise DataError(f"curve must be one of {allowed}; got {curve!r}")
    return _CURVE_OBJECTS[curve]


def check_curve_values(law, values, what: str) -> dict[str, float]:
    """Parameter values of one curve family, checked (``init=``, ``fixed=``, known curves).

    Parameters
    ----------
    law : object
        The family's law, from :func:`curve_law`.
    values : Mapping of str to float or None
        Parameter name → value (mass unit for masses, 1/time for ``k``, time for ``ti``).
    what : str
        The argument's name for the messages.

    Returns
    -------
    dict of str to float
        A new dict of the given values (``{}`` for ``None``).

    Raises
    ------
    DataError
        Unknown names, values that are not finite numbers, or a value ≤ 0 of a parameter
        that must be positive (``W0``, ``Winf``; see each family's ``positive``).
    """
    rules = {p: ((lambda x: x > 0), f"must be > 0 for curve {law.name!r}")
             for p in law.positive}
    return check_named_values(what, values, law.params, owner=f"curve {law.name!r}",
                              rules=rules)
