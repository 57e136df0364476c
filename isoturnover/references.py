"""Reference standards of the isotope codes and the mass-dependent law of their minor isotopes.

Each isotope code (``"d13C"``, ``"d15N"``, ``"d34S"``, ``"d2H"``, ``"d18O"``) is an
:class:`IsotopeSystem`: the ratio it reports, the international scale whose zero point defines
δ = 0, that zero point's ratio with its source, and for O and S the further minor isotopes
(17O; 33S and 36S) tied to the main ratio ``R`` by the *mass-dependent law*

.. math::

    R_j = R_{j,\\text{std}} \\left(R / R_\\text{std}\\right)^{\\lambda_j} .

This module holds the tables (:data:`ISOTOPES`), the look-up of a code, the validation of a
reference-ratio override, and the parts of the law that depend on the standard alone (the sum of
the minor ratios, the turning point past which the law stops being usable, and the inversion
of the law from an atom fraction). The conversions
that use them live in :mod:`isoturnover.isotopes`, which re-exports the tables, :data:`LAWS`
and :func:`reference_ratio`.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Mapping
from dataclasses import dataclass
from functools import cache
from types import MappingProxyType

import numpy as np
from scipy.optimize import brentq

from .errors import DataError, ScaleError, UnknownIsotopeError

__all__ = [
    "MinorIsotope",
    "IsotopeSystem",
    "ISOTOPES",
    "LAWS",
    "isotope_system",
    "check_reference",
    "reference_ratio",
    "check_law",
    "minor_ratio_sum",
    "turning_point",
    "solve_log_ratio",
]

_EPS = np.finfo(float).eps
# Largest number of Newton steps in the inversion x -> δ for O and S (convergence is monotone
# and quadratic; natural abundance needs 3-4 steps).
_MAX_NEWTON = 200


# ---------------------------------------------------------------------------------------------
# Reference standards
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class MinorIsotope:
    """A further minor isotope of O or S, tied to the main ratio by the mass-dependent law.

    Parameters
    ----------
    isotope : str
        The isotope, e.g. ``"17O"``.
    ratio : float
        Its ratio to the light isotope in the scale's standard (e.g. 17O/16O of VSMOW).
    exponent : float
        Mass-dependent exponent λ in ``R_j = R_j,std (R/R_std)**λ``, with R the main ratio.
    source : str
        Where ``ratio`` comes from.
    exponent_source : str
        Where ``exponent`` comes from.
    """

    isotope: str
    ratio: float
    exponent: float
    source: str
    exponent_source: str


@dataclass(frozen=True)
class IsotopeSystem:
    """One isotope code: the ratio it reports and the standard that defines its zero.

    Parameters
    ----------
    code : str
        The code used in data tables (``"d13C"``, ...).
    element : str
        Element symbol.
    heavy, light : str
        The isotopes of the ratio ``heavy/light``.
    scale : str
        Name of the international scale whose zero point defines δ = 0 (VPDB, AIR, ...).
    ratio : float
        Heavy/light ratio of the scale's zero point (dimensionless).
    source : str
        Where ``ratio`` comes from ("from memory" marks values recalled, not seen in print).
    minor : tuple of MinorIsotope, default=()
        The element's other minor isotopes (empty for H, C, N, whose atom fraction is exact).
    note : str, default=""
        Other determinations and caveats.
    """

    code: str
    element: str
    heavy: str
    light: str
    scale: str
    ratio: float
    source: str
    minor: tuple[MinorIsotope, ...] = ()
    note: str = ""

    @property
    def ratio_name(self) -> str:
        """The ratio as text, e.g. ``"13C/12C"``."""
        return f"{self.heavy}/{self.light}"

    @property
    def two_isotope(self) -> bool:
        """True when the element has just the two stable isotopes of the ratio (H, C, N)."""
        return not self.minor


ISOTOPES: Mapping[str, IsotopeSystem] = MappingProxyType(
    {
        "d13C": IsotopeSystem(
            code="d13C", element="C", heavy="13C", light="12C", scale="VPDB",
            # Zhang & Li 1990 (Chinese Sci. Bull. 35:290-296), the widely used value: from memory.
            ratio=0.0111802,
            source="Zhang & Li 1990 (widely used; from memory)",
            note=("A 2024 re-determination gives 13C/12C(VPDB) = 0.0111105 (Rapid Commun. Mass "
                  "Spectrom. 38:e9773); pass reference=0.0111105 to use it."),
        ),
        "d15N": IsotopeSystem(
            code="d15N", element="N", heavy="15N", light="14N", scale="AIR",
            # Junk & Svec 1958 (Geochim. Cosmochim. Acta 14:234-243), 14N/15N = 272.0,
            # as recommended by IUPAC/CIAAW.
            ratio=1.0 / 272.0,
            source="Junk & Svec 1958 (14N/15N = 272.0 of atmospheric N2; IUPAC/CIAAW)",
        ),
        "d34S": IsotopeSystem(
            code="d34S", element="S", heavy="34S", light="32S", scale="VCDT",
            # Ding et al. 2001 (Geochim. Cosmochim. Acta 65:2433-2437): from memory.
            ratio=0.0441626,
            source="Ding et al. 2001 (from memory)",
            minor=(
                MinorIsotope(
                    "33S", 0.0078772, 0.515,
                    source="Ding et al. 2001 (from memory)",
                    exponent_source=("conventional mass-dependent exponent for 33S vs 34S "
                                     "(cf. Hulston & Thode 1965; from memory)"),
                ),
                MinorIsotope(
                    "36S", 0.0001533, 1.90,
                    source="Ding et al. 2001 (from memory)",
                    exponent_source=("conventional mass-dependent exponent for 36S vs 34S "
                                     "(cf. Hulston & Thode 1965; from memory)"),
                ),
            ),
            note=("Atom fractions use the mass-dependent law for 33S and 36S; above "
                  "δ34S ≈ 1.09e5 ‰ the law makes the 34S atom fraction fall as δ34S rises "
                  "and conversions there are refused."),
        ),
        "d2H": IsotopeSystem(
            code="d2H", element="H", heavy="2H", light="1H", scale="VSMOW",
            # Hagemann, Nief & Roth 1970 (Tellus 22:712-715): from memory.
            ratio=155.76e-6,
            source="Hagemann et al. 1970 (from memory)",
        ),
        "d18O": IsotopeSystem(
            code="d18O", element="O", heavy="18O", light="16O", scale="VSMOW",
            # Baertschi 1976 (Earth Planet. Sci. Lett. 31:341-344): from memory.
            ratio=2005.20e-6,
            source="Baertschi 1976 (from memory)",
            minor=(
                MinorIsotope(
                    "17O", 379.9e-6, 0.528,
                    source="Li et al. 1988 (from memory)",
                    exponent_source=("mass-dependent exponent of meteoric water (Meijer & Li "
                                     "1998; Barkan & Luz 2005; from memory)"),
                ),
            ),
            note="Atom fractions use the mass-dependent law for 17O.",
        ),
    }
)
"""Read-only mapping from isotope code to :class:`IsotopeSystem` (reference ratios with sources).

=====  ========  =====  ==================  ============================================
code   ratio     scale  value               source
=====  ========  =====  ==================  ============================================
d13C   13C/12C   VPDB   0.0111802           Zhang & Li 1990 (from memory); 2024: 0.0111105
d15N   15N/14N   AIR    1/272.0             Junk & Svec 1958 (IUPAC/CIAAW)
d34S   34S/32S   VCDT   0.0441626           Ding et al. 2001 (from memory)
d2H    2H/1H     VSMOW  155.76e-6           Hagemann et al. 1970 (from memory)
d18O   18O/16O   VSMOW  2005.20e-6          Baertschi 1976 (from memory)
=====  ========  =====  ==================  ============================================

Further minor isotopes: 17O/16O(VSMOW) = 379.9e-6 (Li et al. 1988, from memory);
33S/32S(VCDT) = 0.0078772 and 36S/32S(VCDT) = 0.0001533 (Ding et al. 2001, from memory).
"""

LAWS = ("mass_dependent", "refuse")
"""Allowed ``law=`` values for atom-fraction conversions of O and S."""


# ---------------------------------------------------------------------------------------------
# Look-up and validation
# ---------------------------------------------------------------------------------------------


def isotope_system(isotope) -> IsotopeSystem:
    """The :class:`IsotopeSystem` of an isotope code.

    Parameters
    ----------
    isotope : str or IsotopeSystem
        Isotope code, one of the keys of :data:`ISOTOPES`; an :class:`IsotopeSystem` is
        returned as given.

    Returns
    -------
    IsotopeSystem
        The tabulated system of the code.

    Raises
    ------
    UnknownIsotopeError
        When ``isotope`` is not a string or not a known code; the message suggests the code
        meant when the slip is one of case, the δ prefix, or a close spelling.

    Examples
    --------
    >>> isotope_system("d15N").scale
    'AIR'
    """
    if isinstance(isotope, IsotopeSystem):
        return isotope
    known = ", ".join(ISOTOPES)
    if not isinstance(isotope, str):
        raise UnknownIsotopeError(
            f"isotope must be a code string, one of {known}; got {isotope!r} "
            f"({type(isotope).__name__})"
        )
    if isotope in ISOTOPES:
        return ISOTOPES[isotope]
    # Suggestions: case and the δ prefix are the usual slips ('13C', 'D13C', 'δ13C', 'd13c').
    folded = isotope.strip().lower().replace("δ", "d")
    if not folded.startswith("d"):
        folded = "d" + folded
    lowered = {c.lower(): c for c in ISOTOPES}
    if folded in lowered:
        close = [lowered[folded]]
    else:
        close = [lowered[m] for m in difflib.get_close_matches(folded, lowered, n=2, cutoff=0.6)]
    hint = f"; did you mean {' or '.join(repr(c) for c in close)}?" if close else ""
    raise UnknownIsotopeError(f"unknown isotope code {isotope!r}; known codes are {known}{hint}")


def check_reference(system: IsotopeSystem, reference, name: str = "reference") -> float:
    """The scale's reference ratio, or a validated override of it.

    Parameters
    ----------
    system : IsotopeSystem
        The isotope system whose zero point is meant.
    reference : float or None
        None for the tabulated ratio ``system.ratio``; otherwise a finite ratio > 0
        (dimensionless, heavy/light) to use instead.
    name : str, default="reference"
        The argument's name in error messages.

    Returns
    -------
    float
        The reference ratio R_std (dimensionless).

    Raises
    ------
    DataError
        When ``reference`` is not a number, or not finite and > 0.
    """
    if reference is None:
        return system.ratio
    try:
        value = float(reference)
    except (TypeError, ValueError):
        raise DataError(
            f"{name} must be a positive finite number (the {system.ratio_name} ratio of the "
            f"{system.scale} zero point) or None; got {reference!r}"
        ) from None
    if not (math.isfinite(value) and value > 0.0):
        raise DataError(
            f"{name} must be a positive finite number (the {system.ratio_name} ratio of the "
            f"{system.scale} zero point) or None; got {reference!r}"
        )
    return value


def reference_ratio(isotope: str, ratio: float | None = None) -> float:
    """Heavy/light ratio of the scale's zero point, or a validated override.

    Parameters
    ----------
    isotope : str
        Isotope code: ``"d13C"``, ``"d15N"``, ``"d34S"``, ``"d2H"`` or ``"d18O"``.
    ratio : float, optional
        A ratio to use instead of the tabulated one (must be finite and > 0), e.g. the 2024
        VPDB re-determination 0.0111105.

    Returns
    -------
    float
        The ratio R_std (dimensionless).

    Examples
    --------
    >>> reference_ratio("d15N") == 1 / 272.0
    True
    >>> reference_ratio("d13C", 0.0111105)
    0.0111105
    """
    return check_reference(isotope_system(isotope), ratio, name="ratio")


# ---------------------------------------------------------------------------------------------
# The mass-dependent law
# ---------------------------------------------------------------------------------------------


def check_law(system: IsotopeSystem, law: str) -> None:
    """Check a ``law=`` argument for an atom-fraction conversion of ``system``.

    Parameters
    ----------
    system : IsotopeSystem
        The isotope system to convert.
    law : {"mass_dependent", "refuse"}
        How further minor isotopes are treated (see :data:`LAWS`).

    Raises
    ------
    ScaleError
        When ``law`` is not one of :data:`LAWS`, or is ``"refuse"`` for an element with
        further minor isotopes (O, S), whose atom fraction a δ alone does not fix.
    """
    if law not in LAWS:
        raise ScaleError(f"law must be one of {', '.join(map(repr, LAWS))}; got {law!r}")
    if law == "refuse" and not system.two_isotope:
        others = " and ".join(m.isotope for m in system.minor)
        verb = "enters" if len(system.minor) == 1 else "enter"
        raise ScaleError(
            f"atom fractions of {system.element} are not exact from {system.code} alone: "
            f"{others} also {verb} the denominator and a δ of {system.ratio_name} does not fix "
            "them; law='refuse' was given, so the atom-fraction scale is refused for "
            f"{system.code} (use law='mass_dependent' to assume mass-dependent fractionation, "
            "or work on the δ scale)"
        )


def minor_ratio_sum(system: IsotopeSystem, u: np.ndarray) -> np.ndarray:
    """Sum of the further minor ratios under the mass-dependent law.

    .. math:: \\sum_j R_j = \\sum_j R_{j,\\text{std}}\\, u^{\\lambda_j},\\qquad u = R/R_\\text{std}

    Parameters
    ----------
    system : IsotopeSystem
        The isotope system; H, C and N have no further minor isotopes and give 0.
    u : ndarray
        ``R/R_std = 1 + δ/1000`` of the main ratio (dimensionless, > 0).

    Returns
    -------
    ndarray
        Σ R_j (dimensionless), shaped like ``u``.
    """
    total = np.zeros_like(u)
    for m in system.minor:
        total = total + m.ratio * u**m.exponent
    return total


@cache
def turning_point(code: str) -> float:
    """``u = R/R_std`` above which the mass-dependent law makes x_heavy fall (inf if never).

    ``dx/dR`` has the sign of ``1 + Σ (1 − λ_j) R_j`` (differentiate x = R/(1 + R + Σ R_j)
    with R_j ∝ R**λ_j); with an exponent above 1 (36S) this turns negative at large R. The
    root in ``s = ln u`` is found with :func:`scipy.optimize.brentq`.

    Parameters
    ----------
    code : str
        A code of :data:`ISOTOPES`.

    Returns
    -------
    float
        The turning point ``u`` (dimensionless), or ``inf`` when every exponent is ≤ 1.
    """
    system = ISOTOPES[code]
    if all(m.exponent <= 1.0 for m in system.minor):
        return math.inf

    def slope_sign(s):
        return 1.0 + sum((1.0 - m.exponent) * m.ratio * math.exp(m.exponent * s)
                         for m in system.minor)

    hi = 1.0
    while slope_sign(hi) > 0.0:
        hi *= 2.0
    return math.exp(brentq(slope_sign, 0.0, hi, xtol=1e-15, rtol=4 * _EPS))


def solve_log_ratio(system: IsotopeSystem, target: np.ndarray, name: str = "x") -> np.ndarray:
    """``s = ln(R/R_std)`` from an atom-fraction target under the mass-dependent law.

    Solves, elementwise,

    .. math:: s - \\ln\\Big(1 + \\sum_j R_{j,\\text{std}}\\, e^{\\lambda_j s}\\Big) = t,
              \\qquad t = \\operatorname{logit} x - \\ln R_\\text{std},

    (from ``x = R/(1 + R + Σ R_j)`` with ``R_j = R_j,std u**λ_j``) by Newton's method started
    at ``s_0 = t``. Below the turning point (:func:`turning_point`) the left side is concave
    and increasing and ``s_0`` lies left of the root, so the iterates rise monotonically to it
    (quadratic convergence; 3–4 steps at natural abundance, to ~1e-15 in ``ln R``).

    Parameters
    ----------
    system : IsotopeSystem
        The isotope system (with further minor isotopes: O or S).
    target : ndarray
        Finite values of ``t`` (dimensionless), below the law's peak atom fraction.
    name : str, default="x"
        The argument's name in the error message.

    Returns
    -------
    ndarray
        ``s = ln(R/R_std)`` (dimensionless), shaped like ``target``.

    Raises
    ------
    ScaleError
        When the iteration does not converge (a guard; the monotone iteration converges).
    """
    s = target.copy()
    for _ in range(_MAX_NEWTON):
        terms = [m.ratio * np.exp(m.exponent * s) for m in system.minor]
        total = sum(terms)
        g = s - np.log1p(total) - target
        slope = 1.0 - sum(m.exponent * t for m, t in zip(system.minor, terms)) / (1.0 + total)
        step = g / slope
        s = s - step
        scale = np.maximum(1.0, np.maximum(np.abs(s), np.abs(target)))
        if np.all((np.abs(step) <= 8 * _EPS * scale) | (np.abs(g) <= 4 * _EPS * scale)):
            break
    else:  # pragma: no cover - monotone Newton converges; kept as a guard
        raise ScaleError(f"{name}: the inversion to {system.code} did not converge")
    return s
