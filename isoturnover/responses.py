r"""Step responses of the pool models and the atom-fraction scale they may mix on.

Pure numpy: no lmfit, no pandas. These are the building blocks that
:class:`isoturnover.kinetics.TurnoverKinetics` superposes over the diet switches.

For a unit step at :math:`\tau = 0` the fraction of the old value still present is, for
parallel pools,

.. math:: 1 - F(\tau) = \sum_i f_i e^{-k_i \tau},

and for the precursor–product chain (two first-order steps in series, DESIGN §2)

.. math::

    \Phi_c(\tau) = \frac{k_1 e^{-k_2\tau} - k_2 e^{-k_1\tau}}{k_1 - k_2}
                 = e^{-k_2\tau}\,\big(1 + k_2\tau\,\psi((k_1-k_2)\tau)\big),
    \qquad \psi(x) = \frac{1 - e^{-x}}{x},

the second form exact through the removable singularity at :math:`k_1 = k_2` (where it is
:math:`e^{-k\tau}(1 + k\tau)`). On the atom-fraction scale the pools mix in atom fraction
:math:`x = R/(1+R)`, :math:`R = R_s(1 + \delta/1000)` (Coplen 2011 definitions).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import ScaleError

__all__ = [
    "remaining_parallel",
    "remaining_chain",
    "chain_terms",
    "AtomScale",
    "atom_scale",
]

# Elements with two stable isotopes: x = R/(1+R) is exact (Coplen 2011 definitions).
_TWO_ISOTOPE_CODES = ("d13C", "d15N", "d2H")


# ----------------------------------------------------------------------------------------
# Step responses (fraction of the old value remaining after a unit step at time 0)
# ----------------------------------------------------------------------------------------
def _psi(x):
    """psi(x) = (1 - exp(-x)) / x for x >= 0, exact near 0 (series)."""
    x = np.asarray(x, dtype=float)
    small = np.abs(x) < 1e-2
    xs = np.where(small, 1.0, x)
    out = np.where(small, 0.0, -np.expm1(-xs) / xs)
    if np.any(small):
        z = x[small] if x.ndim else x
        # psi = sum_n (-x)^n / (n+1)!
        ser = 1 - z / 2 + z**2 / 6 - z**3 / 24 + z**4 / 120 - z**5 / 720 + z**6 / 5040
        if x.ndim:
            out = out.copy()
            out[small] = ser
        else:
            out = np.asarray(ser)
    return out


def _dpsi(x):
    """psi'(x) = (e^{-x}(1 + x) - 1)/x^2, exact near 0 (series)."""
    x = np.asarray(x, dtype=float)
    small = np.abs(x) < 1e-2
    xs = np.where(small, 1.0, x)
    out = np.where(small, 0.0, (np.exp(-xs) * (1 + xs) - 1) / xs**2)
    if np.any(small):
        z = x[small] if x.ndim else x
        # psi' = sum_{n>=1} n (-1)^n x^{n-1} / (n+1)!
        ser = -1 / 2 + z / 3 - z**2 / 8 + z**3 / 30 - z**4 / 144 + z**5 / 840 - z**6 / 5760
        if x.ndim:
            out = out.copy()
            out[small] = ser
        else:
            out = np.asarray(ser)
    return out


def chain_terms(tau, ka, kb):
    r"""Chain step response and its partial derivatives, exact through :math:`k_a = k_b`.

    With :math:`a = \max(k_a, k_b)`, :math:`b = \min(k_a, k_b)`, :math:`x = (a - b)\tau` and
    :math:`\psi(x) = (1 - e^{-x})/x` (a series for :math:`|x| < 10^{-2}`),

    .. math::

        \Phi_c &= e^{-b\tau}\,(1 + b\tau\,\psi(x)), \\
        \partial\Phi_c/\partial a &= e^{-b\tau}\, b\tau^2\,\psi'(x), \\
        \partial\Phi_c/\partial b &= e^{-b\tau}\,\tau\,(-1 - b\tau\psi(x) + \psi(x)
                                     - b\tau\,\psi'(x)), \\
        \partial\Phi_c/\partial\tau &= -a b \tau\, e^{-b\tau}\,\psi(x),

    the stable form of :math:`(k_1 e^{-k_2\tau} - k_2 e^{-k_1\tau})/(k_1 - k_2)` (two
    first-order steps in series, DESIGN §2; the derivatives by hand from it). Symmetric in
    :math:`(k_a, k_b)`; computed with the larger rate first so it never overflows.

    Parameters
    ----------
    tau : ndarray
        Time since the step, in the data's time unit (days by default), ≥ 0.
    ka, kb : float
        Rates of the two steps (per time unit, /d for days), > 0.

    Returns
    -------
    phi : ndarray
        :math:`\Phi_c` (dimensionless), shaped like ``tau``.
    d_ka, d_kb : ndarray
        :math:`\partial\Phi_c/\partial k_a` and :math:`\partial\Phi_c/\partial k_b` (time
        unit).
    d_tau : ndarray
        :math:`\partial\Phi_c/\partial\tau` (per time unit).
    """
    swap = kb > ka
    a, b = (kb, ka) if swap else (ka, kb)
    x = (a - b) * tau
    eb = np.exp(-b * tau)
    ps = _psi(x)
    dps = _dpsi(x)
    phi = eb * (1 + b * tau * ps)
    d_a = eb * b * tau * tau * dps
    d_b = eb * tau * (-1 - b * tau * ps + ps - b * tau * dps)
    d_tau = -a * b * tau * eb * ps
    if swap:
        d_a, d_b = d_b, d_a
    return phi, d_a, d_b, d_tau


def remaining_parallel(tau, rates, fractions):
    r"""Fraction of a step change still to come for parallel pools.

    .. math:: 1 - F(\tau) = \sum_i f_i e^{-k_i \tau}

    the reaction progress variable of one step switch (Cerling et al. 2007, Oecologia
    151:175-189), vectorised over ``tau``.

    Parameters
    ----------
    tau : float or array-like
        Time since a single step switch, in the data's time unit (days by default); values
        at or before the switch (τ ≤ 0) give 1.
    rates : array-like of shape (n_pools,)
        Turnover rates :math:`k_i` (per time unit, /d for days), > 0.
    fractions : array-like of shape (n_pools,)
        Pool fractions :math:`f_i`, summing to 1.

    Returns
    -------
    float or ndarray
        :math:`1 - F` (dimensionless), shaped like ``tau``.
    """
    tau = np.maximum(np.asarray(tau, dtype=float), 0.0)
    k = np.asarray(rates, dtype=float).reshape(-1, *([1] * tau.ndim))
    f = np.asarray(fractions, dtype=float).reshape(-1, *([1] * tau.ndim))
    return np.sum(f * np.exp(-k * tau), axis=0)


def remaining_chain(tau, k1, k2):
    r"""Fraction of a step change still to come for a precursor–product chain.

    .. math:: 1 - F(\tau) = \frac{k_1 e^{-k_2\tau} - k_2 e^{-k_1\tau}}{k_1 - k_2}

    the response of two first-order steps in series (DESIGN §2), evaluated in the stable form
    :math:`e^{-k_2\tau}(1 + k_2\tau\,\psi((k_1-k_2)\tau))`, :math:`\psi(x) = (1-e^{-x})/x`,
    which is exact through :math:`k_1 = k_2` (there :math:`e^{-k\tau}(1 + k\tau)`).

    Parameters
    ----------
    tau : float or array-like
        Time since a single step switch, in the data's time unit (days by default); values
        at or before the switch give 1.
    k1, k2 : float
        Rates of the two steps (per time unit, /d for days), > 0; the curve is symmetric in
        them.

    Returns
    -------
    ndarray
        :math:`1 - F` (dimensionless), shaped like ``tau``.
    """
    tau = np.maximum(np.asarray(tau, dtype=float), 0.0)
    return chain_terms(tau, float(k1), float(k2))[0]


# ----------------------------------------------------------------------------------------
# Atom-fraction scale
# ----------------------------------------------------------------------------------------
@dataclass(frozen=True)
class AtomScale:
    r"""Exact δ ↔ atom fraction for a two-isotope element.

    .. math:: x = \frac{R}{1 + R}, \qquad R = R_s\,(1 + \delta/1000)

    (Coplen 2011 definitions of δ, ratio and atom fraction).

    Parameters
    ----------
    rs : float
        Reference ratio :math:`R_s` of the δ scale (heavy/light, dimensionless), > 0.
    """

    rs: float

    def to_x(self, d):
        r"""Atom fraction of δ values, :math:`x = R/(1+R)`, :math:`R = R_s(1 + \delta/1000)`.

        Parameters
        ----------
        d : float or array-like
            δ values (‰).

        Returns
        -------
        ndarray
            Atom fraction :math:`x` (dimensionless), shaped like ``d``.
        """
        r = self.rs * (1.0 + np.asarray(d, dtype=float) / 1000.0)
        return r / (1.0 + r)

    def dx_dd(self, d):
        r"""Derivative :math:`dx/d\delta = (R_s/1000)/(1 + R)^2` of :meth:`to_x`.

        Parameters
        ----------
        d : float or array-like
            δ values (‰).

        Returns
        -------
        ndarray
            :math:`dx/d\delta` (per ‰), shaped like ``d``.
        """
        r = self.rs * (1.0 + np.asarray(d, dtype=float) / 1000.0)
        return (self.rs / 1000.0) / (1.0 + r) ** 2

    def to_delta(self, x):
        r"""δ of atom fractions, :math:`\delta = 1000\,(x/((1 - x) R_s) - 1)`.

        Parameters
        ----------
        x : float or array-like
            Atom fractions (dimensionless), in (0, 1).

        Returns
        -------
        ndarray
            δ (‰), shaped like ``x``.
        """
        x = np.asarray(x, dtype=float)
        return 1000.0 * (x / (1.0 - x) / self.rs - 1.0)

    def dd_dx(self, x):
        r"""Derivative :math:`d\delta/dx = 1000/(R_s (1 - x)^2)` of :meth:`to_delta`.

        Parameters
        ----------
        x : float or array-like
            Atom fractions (dimensionless), in (0, 1).

        Returns
        -------
        ndarray
            :math:`d\delta/dx` (‰ per unit atom fraction), shaped like ``x``.
        """
        x = np.asarray(x, dtype=float)
        return 1000.0 / (self.rs * (1.0 - x) ** 2)


def atom_scale(isotope, reference_ratio=None) -> AtomScale:
    """The atom-fraction scale of a two-isotope element.

    Parameters
    ----------
    isotope : str or None
        Isotope code, one of the two-isotope codes (``"d13C"``, ``"d15N"``, ``"d2H"``).
    reference_ratio : float, optional
        Reference ratio :math:`R_s` of the δ scale; by default the isotope's from
        :func:`isoturnover.isotopes.reference_ratio`.

    Returns
    -------
    AtomScale
        The exact δ ↔ atom-fraction conversion, :math:`x = R/(1+R)`.

    Raises
    ------
    ScaleError
        When ``isotope`` is None or not a two-isotope element (oxygen and sulfur have further
        minor isotopes, so :math:`x = R/(1+R)` is not exact for them).
    """
    if isotope is None:
        raise ScaleError("scale='atom_fraction' needs the isotope (isotope='d15N', say); got None")
    if isotope not in _TWO_ISOTOPE_CODES:
        raise ScaleError(
            f"scale='atom_fraction' is exact only for the two-isotope elements "
            f"({', '.join(_TWO_ISOTOPE_CODES)}); got isotope={isotope!r}. Oxygen and sulfur have "
            "further minor isotopes whose abundances a tracer need not follow; use "
            "scale='delta' for natural-abundance work with these elements"
        )
    if reference_ratio is None:
        from .isotopes import reference_ratio as _ref

        reference_ratio = _ref(isotope)
    return AtomScale(float(reference_ratio))
