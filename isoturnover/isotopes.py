"""Isotope arithmetic: δ ↔ ratio ↔ atom fraction ↔ atom %, α, ε, Δ and mass balance.

Definitions follow the IUPAC recommendations (Coplen 2011, Rapid Commun. Mass Spectrom.
25:2538–2560):

.. math::

    \\delta = R_\\text{sample} / R_\\text{std} - 1 \\quad (\\text{reported in ‰}),\\qquad
    \\alpha_{A/B} = R_A / R_B = \\frac{1000 + \\delta_A}{1000 + \\delta_B},\\qquad
    \\varepsilon = \\alpha - 1 .

so ``R = R_std (1 + δ/1000)`` with δ in ‰. The atom fraction of the heavy isotope is exact as
``x = R/(1 + R)`` for the two-isotope elements H, C and N. Oxygen and sulfur have further minor
isotopes (17O; 33S and 36S) that enter the denominator, ``x = R/(1 + R + Σ R_j)``. A δ value of
one ratio does not fix the others, so this module links them by the *mass-dependent law*

.. math::

    R_j = R_{j,\\text{std}} \\left(R / R_\\text{std}\\right)^{\\lambda_j}

with λ = 0.528 for 17O (versus 18O) and λ = 0.515 (33S) and 1.90 (36S) versus 34S (exponents
from memory; see :data:`ISOTOPES`). The law assumes mass-dependent fractionation: it is wrong
for mass-independent signals (atmospheric sulfate, ozone-derived oxygen) and for tracers
enriched in more than one minor isotope; give ``law="refuse"`` to have every atom-fraction
conversion for O and S refused with :class:`~isoturnover.errors.ScaleError` instead.

All functions are vectorised: Python or numpy scalars give a ``float``, arrays give arrays and
a pandas Series (or DataFrame) gives a Series (DataFrame) with the same index. NaN passes
through as NaN (a missing value); infinite values, ratios ≤ 0 (δ ≤ −1000 ‰) and atom
fractions outside (0, 1) raise :class:`~isoturnover.errors.DataError` naming the argument.
Every function that needs a reference ratio accepts ``reference=`` to override the tabulated
value of the scale (for instance the 2024 VPDB re-determination).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from .errors import DataError, ScaleError
from .references import (
    ISOTOPES,
    LAWS,
    IsotopeSystem,
    MinorIsotope,
    check_law,
    check_reference,
    isotope_system,
    minor_ratio_sum,
    reference_ratio,
    solve_log_ratio,
    turning_point,
)

__all__ = [
    "MinorIsotope",
    "IsotopeSystem",
    "ISOTOPES",
    "LAWS",
    "SCALES",
    "reference_ratio",
    "delta_to_ratio",
    "ratio_to_delta",
    "delta_to_atom_fraction",
    "atom_fraction_to_delta",
    "delta_to_atom_percent",
    "atom_percent_to_delta",
    "delta_to_atom_percent_excess",
    "atom_percent_excess_to_delta",
    "alpha",
    "epsilon",
    "apply_epsilon",
    "difference_form_error",
    "big_delta",
    "mix",
    "source_fraction",
]


SCALES = ("atom_fraction", "delta")
"""Allowed ``scale=`` values of :func:`mix` and :func:`source_fraction`."""

# Tolerance on Σ fractions = 1 (common practice; catches typed fractions that do not add up).
_SUM_TOL = 1e-9


# ---------------------------------------------------------------------------------------------
# Argument handling
# ---------------------------------------------------------------------------------------------


def _check_scale(scale: str) -> None:
    if scale not in SCALES:
        raise ScaleError(f"scale must be one of {', '.join(map(repr, SCALES))}; got {scale!r}")


def _as_array(obj, name: str) -> np.ndarray:
    """A float array view of a scalar, sequence, array, Series or DataFrame."""
    try:
        if isinstance(obj, (pd.Series, pd.DataFrame)):
            return obj.to_numpy(dtype=float, na_value=np.nan)
        return np.asarray(obj, dtype=float)
    except (TypeError, ValueError):
        what = (f"a {type(obj).__name__} of dtype {getattr(obj, 'dtype', 'mixed')}"
                if isinstance(obj, (pd.Series, pd.DataFrame)) else repr(obj)[:80])
        raise DataError(f"{name} must be numeric (a number or an array of numbers); got {what}")\
            from None


def _location(obj, arr: np.ndarray, mask: np.ndarray) -> tuple[float, str, int]:
    """First flagged value, where it is (index label for pandas), and how many are flagged."""
    pos = tuple(int(i) for i in np.argwhere(mask)[0]) if arr.ndim else ()
    value = float(arr[pos])
    n = int(np.count_nonzero(mask))
    if not pos:
        where = ""
    elif isinstance(obj, pd.Series) and arr.shape == obj.shape:
        where = f" at index {obj.index[pos[0]]!r}"
    elif isinstance(obj, pd.DataFrame) and arr.shape == obj.shape:
        where = f" at row {obj.index[pos[0]]!r}, column {obj.columns[pos[1]]!r}"
    else:
        where = f" at position {pos[0] if len(pos) == 1 else pos}"
    if arr.size > 1:
        where += f" ({n} of {arr.size} values)"
    return value, where, n


def _check_values(arr, obj, name: str, allowed: str, bad) -> None:
    """Raise DataError when any non-NaN value is infinite or ``bad(arr)`` is True there."""
    flagged = np.isinf(arr) | (bad(arr) & ~np.isnan(arr))
    if np.any(flagged):
        value, where, _ = _location(obj, arr, flagged)
        raise DataError(
            f"{name} must be {allowed} (NaN is passed through as missing); got {value!r}{where}"
        )


def _delta_array(obj, name: str) -> np.ndarray:
    arr = _as_array(obj, name)
    _check_values(arr, obj, name, "finite and greater than -1000 ‰ (a positive ratio)",
                  lambda a: a <= -1000.0)
    return arr


def _fraction_array(obj, name: str, scale: float = 1.0, unit: str = "") -> np.ndarray:
    arr = _as_array(obj, name)
    _check_values(arr, obj, name, f"strictly between 0 and {scale:g}{unit}",
                  lambda a: (a <= 0.0) | (a >= scale))
    return arr


def _pandas_inputs(named) -> list[tuple[str, object]]:
    """The pandas objects among named inputs (sequences are searched one level deep)."""
    found = []
    for name, obj in named:
        if isinstance(obj, (pd.Series, pd.DataFrame)):
            found.append((name, obj))
        elif isinstance(obj, (list, tuple)):
            found += [(f"{name}[{i}]", o) for i, o in enumerate(obj)
                      if isinstance(o, (pd.Series, pd.DataFrame))]
    # pandas would align on the index; we compute on positions, so indexes must agree.
    for kind in (pd.Series, pd.DataFrame):
        same = [(n, o) for n, o in found if isinstance(o, kind)]
        for n, o in same[1:]:
            n0, o0 = same[0]
            if len(o) == len(o0) and not o.index.equals(o0.index):
                raise DataError(
                    f"{n0} and {n} have different indexes; values are combined by position, "
                    "so align them first (e.g. other.reindex(first.index))"
                )
            if kind is pd.DataFrame and o.shape == o0.shape and not o.columns.equals(o0.columns):
                raise DataError(f"{n0} and {n} have different columns; align them first")
    return found


def _wrap(result: np.ndarray, named, *, keep_name: bool = True):
    """Return ``result`` as float, array, or pandas object shaped like the pandas input."""
    result = np.asarray(result, dtype=float)
    if result.ndim == 0:
        return float(result)
    for _, obj in _pandas_inputs(named):
        if result.shape == obj.shape:
            if isinstance(obj, pd.Series):
                return pd.Series(result, index=obj.index, name=obj.name if keep_name else None)
            return pd.DataFrame(result, index=obj.index, columns=obj.columns)
        if isinstance(obj, pd.DataFrame) and result.shape == (obj.shape[0],):
            return pd.Series(result, index=obj.index)
    return result


def _broadcast(named_arrays) -> list[np.ndarray]:
    try:
        return list(np.broadcast_arrays(*[a for _, a in named_arrays]))
    except ValueError:
        shapes = ", ".join(f"{n} {a.shape}" for n, a in named_arrays)
        raise DataError(f"shapes cannot be broadcast together: {shapes}") from None


# ---------------------------------------------------------------------------------------------
# Core conversions (private, on validated arrays)
# ---------------------------------------------------------------------------------------------


def _check_turning(system, u, obj, name, reference) -> None:
    u_max = turning_point(system.code)
    if math.isinf(u_max):
        return
    flagged = u >= u_max
    if np.any(flagged):
        value, where, _ = _location(obj, np.asarray(u), flagged)
        d_max = (u_max - 1.0) * 1000.0
        raise ScaleError(
            f"{name} = {(value - 1.0) * 1000.0!r} ‰{where} lies beyond the turning point of the "
            f"mass-dependent law for {system.code} ({system.code} ≈ {d_max:.6g} ‰, "
            f"{system.ratio_name} ≈ {u_max * reference:.4g}): above it the law makes "
            f"{system.minor[-1].isotope} grow faster than {system.heavy}, so the "
            f"{system.heavy} atom fraction would fall as {system.code} rises. The law holds for "
            "natural-abundance and moderately enriched material only; convert such tracers "
            "with their measured abundances of every isotope"
        )


def _fractions_from_u(system, u, reference, law, obj, name):
    """Heavy and light atom fractions for ``u = R/R_std = 1 + δ/1000`` (validated > 0)."""
    check_law(system, law)
    if system.minor:
        _check_turning(system, u, obj, name, reference)
    r = reference * u
    denom = 1.0 + r + minor_ratio_sum(system, u)
    return r / denom, 1.0 / denom


def _delta_from_fraction(system, x, reference, law, obj, name, factor=1.0) -> np.ndarray:
    """δ (‰) from the heavy-isotope atom fraction x (validated in (0, 1)).

    Two-isotope elements: ``δ = expm1(logit x − ln R_std)·1000`` in closed form. O and S:
    solve ``s − ln(1 + Σ R_j,std e^{λ_j s}) = logit x − ln R_std`` for ``s = ln(R/R_std)`` by
    Newton's method (:func:`~isoturnover.references.solve_log_ratio`). The left side is concave
    and increasing below the turning point, and the start ``s_0 = logit x − ln R_std`` lies left
    of the root, so the iterates rise monotonically to it (quadratic convergence; 3–4 steps at
    natural abundance, to ~1e-15 in ``ln R``).
    """
    check_law(system, law)
    target = np.log(x) - np.log1p(-x) - math.log(reference)
    if not system.minor:
        return np.expm1(target) * 1000.0
    u_max = turning_point(system.code)
    if not math.isinf(u_max):
        s_max = math.log(u_max)
        g_max = s_max - math.log1p(sum(m.ratio * u_max**m.exponent for m in system.minor))
        x_max = 1.0 / (1.0 + math.exp(-(g_max + math.log(reference))))
        flagged = x >= x_max
        if np.any(flagged):
            value, where, _ = _location(obj, np.asarray(x), flagged)
            raise ScaleError(
                f"{name} = {value * factor!r}{where} cannot be reached under the mass-dependent "
                f"law for {system.code}: the {system.heavy} atom fraction it allows peaks at "
                f"{x_max * factor:.6g}{' %' if factor == 100.0 else ''} (at {system.code} ≈ "
                f"{(u_max - 1.0) * 1000.0:.6g} ‰). The law holds for natural-abundance and "
                "moderately enriched material only; convert such tracers with their measured "
                "abundances of every isotope"
            )
    finite = np.isfinite(target)
    out = np.full(target.shape, np.nan)
    out[finite] = np.expm1(solve_log_ratio(system, target[finite], name)) * 1000.0
    return out


# ---------------------------------------------------------------------------------------------
# Public conversions
# ---------------------------------------------------------------------------------------------


def delta_to_ratio(delta, isotope: str, *, reference: float | None = None):
    """Isotope ratio from δ: ``R = R_std (1 + δ/1000)`` (Coplen 2011).

    Parameters
    ----------
    delta : float, array-like or pandas Series/DataFrame
        δ in ‰ against the isotope's scale; must be > −1000 ‰ (NaN passes through).
    isotope : str
        Isotope code (see :data:`ISOTOPES`).
    reference : float, optional
        Override of the reference ratio R_std.

    Returns
    -------
    float, ndarray or Series
        The ratio heavy/light (dimensionless), shaped like ``delta``.

    Examples
    --------
    >>> round(delta_to_ratio(0.0, "d15N") * 272.0, 12)
    1.0
    """
    system = isotope_system(isotope)
    ref = check_reference(system, reference)
    d = _delta_array(delta, "delta")
    return _wrap(ref * (1.0 + d / 1000.0), [("delta", delta)])


def ratio_to_delta(ratio, isotope: str, *, reference: float | None = None):
    """δ (‰) from an isotope ratio: ``δ = (R/R_std − 1)·1000`` (Coplen 2011).

    Parameters
    ----------
    ratio : float, array-like or pandas Series/DataFrame
        Heavy/light ratio, > 0 (NaN passes through).
    isotope : str
        Isotope code (see :data:`ISOTOPES`).
    reference : float, optional
        Override of the reference ratio R_std.

    Returns
    -------
    float, ndarray or Series
        δ in ‰, shaped like ``ratio``.
    """
    system = isotope_system(isotope)
    ref = check_reference(system, reference)
    r = _as_array(ratio, "ratio")
    _check_values(r, ratio, "ratio", "finite and greater than 0", lambda a: a <= 0.0)
    return _wrap((r / ref - 1.0) * 1000.0, [("ratio", ratio)])


def delta_to_atom_fraction(delta, isotope: str, *, reference: float | None = None,
                           law: str = "mass_dependent"):
    """Atom fraction of the heavy isotope from δ.

    .. math::

        x = \\frac{R}{1 + R + \\sum_j R_j},\\qquad R = R_\\text{std}(1 + \\delta/1000),\\qquad
        R_j = R_{j,\\text{std}}\\,(R/R_\\text{std})^{\\lambda_j}

    exact with no ``R_j`` for H, C, N; for O (17O) and S (33S, 36S) through the mass-dependent
    law (see the module notes). For S the law turns over at δ34S ≈ 1.09e5 ‰ (the 34S
    fraction would fall as δ34S rises); values beyond raise :class:`ScaleError`.

    Parameters
    ----------
    delta : float, array-like or pandas Series/DataFrame
        δ in ‰, > −1000 (NaN passes through).
    isotope : str
        Isotope code.
    reference : float, optional
        Override of the reference ratio of the main isotope pair. The further minor isotopes
        keep their tabulated standard ratios and follow ``(1 + δ/1000)**λ``.
    law : {"mass_dependent", "refuse"}
        How O and S treat their further minor isotopes; ``"refuse"`` raises ScaleError.

    Returns
    -------
    float, ndarray or Series
        Atom fraction in (0, 1), shaped like ``delta``.

    Examples
    --------
    >>> x = delta_to_atom_fraction(0.0, "d15N")
    >>> round(x * 273.0, 12)   # x = R/(1 + R) with R = 1/272
    1.0
    """
    system = isotope_system(isotope)
    ref = check_reference(system, reference)
    d = _delta_array(delta, "delta")
    heavy, _ = _fractions_from_u(system, 1.0 + d / 1000.0, ref, law, delta, "delta")
    return _wrap(heavy, [("delta", delta)])


def atom_fraction_to_delta(x, isotope: str, *, reference: float | None = None,
                           law: str = "mass_dependent"):
    """δ (‰) from the heavy-isotope atom fraction; the inverse of :func:`delta_to_atom_fraction`.

    Closed form ``R = x/(1 − x)`` for H, C, N; for O and S the mass-dependent relation is
    solved by a vectorised Newton iteration (relative precision of R about 1e-15).

    Parameters
    ----------
    x : float, array-like or pandas Series/DataFrame
        Atom fraction of the heavy isotope, strictly between 0 and 1 (NaN passes through).
    isotope : str
        Isotope code.
    reference : float, optional
        Override of the reference ratio R_std.
    law : {"mass_dependent", "refuse"}
        See :func:`delta_to_atom_fraction`.

    Returns
    -------
    float, ndarray or Series
        δ in ‰, shaped like ``x``.
    """
    system = isotope_system(isotope)
    ref = check_reference(system, reference)
    arr = _fraction_array(x, "x")
    return _wrap(_delta_from_fraction(system, arr, ref, law, x, "x"), [("x", x)])


def delta_to_atom_percent(delta, isotope: str, *, reference: float | None = None,
                          law: str = "mass_dependent"):
    """Atom % of the heavy isotope from δ: ``100·x`` (see :func:`delta_to_atom_fraction`).

    Parameters
    ----------
    delta : float, array-like or pandas Series/DataFrame
        δ in ‰, > −1000 (NaN passes through).
    isotope : str
        Isotope code (see :data:`ISOTOPES`).
    reference : float, optional
        Override of the reference ratio R_std of the main isotope pair.
    law : {"mass_dependent", "refuse"}, default="mass_dependent"
        How O and S treat their further minor isotopes (see :func:`delta_to_atom_fraction`).

    Returns
    -------
    float, ndarray or Series
        Atom % in (0, 100), shaped like ``delta``.
    """
    system = isotope_system(isotope)
    ref = check_reference(system, reference)
    d = _delta_array(delta, "delta")
    heavy, _ = _fractions_from_u(system, 1.0 + d / 1000.0, ref, law, delta, "delta")
    return _wrap(100.0 * heavy, [("delta", delta)])


def atom_percent_to_delta(atom_percent, isotope: str, *, reference: float | None = None,
                          law: str = "mass_dependent"):
    """δ (‰) from atom % of the heavy isotope; the inverse of :func:`delta_to_atom_percent`.

    Parameters
    ----------
    atom_percent : float, array-like or pandas Series/DataFrame
        Atom % of the heavy isotope, strictly between 0 and 100 (NaN passes through).
    isotope : str
        Isotope code (see :data:`ISOTOPES`).
    reference : float, optional
        Override of the reference ratio R_std of the main isotope pair.
    law : {"mass_dependent", "refuse"}, default="mass_dependent"
        How O and S treat their further minor isotopes (see :func:`delta_to_atom_fraction`).

    Returns
    -------
    float, ndarray or Series
        δ in ‰, shaped like ``atom_percent``.
    """
    system = isotope_system(isotope)
    ref = check_reference(system, reference)
    ap = _fraction_array(atom_percent, "atom_percent", 100.0, " %")
    out = _delta_from_fraction(system, ap / 100.0, ref, law, atom_percent, "atom_percent",
                               factor=100.0)
    return _wrap(out, [("atom_percent", atom_percent)])


def delta_to_atom_percent_excess(delta, isotope: str, baseline_delta, *,
                                 reference: float | None = None, law: str = "mass_dependent"):
    """Atom % excess over an unenriched baseline: ``APE = AP(δ) − AP(δ_baseline)``.

    Parameters
    ----------
    delta : float, array-like or pandas Series
        δ (‰) of the (enriched) sample.
    isotope : str
        Isotope code.
    baseline_delta : float, array-like or pandas Series
        δ (‰) of the same material without the tracer (broadcast against ``delta``).
    reference : float, optional
        Override of the reference ratio R_std of the main isotope pair.
    law : {"mass_dependent", "refuse"}, default="mass_dependent"
        How O and S treat their further minor isotopes (see :func:`delta_to_atom_fraction`).

    Returns
    -------
    float, ndarray or Series
        Atom % excess (percentage points; negative when the sample is below the baseline).
    """
    system = isotope_system(isotope)
    ref = check_reference(system, reference)
    named = [("delta", delta), ("baseline_delta", baseline_delta)]
    d = _delta_array(delta, "delta")
    b = _delta_array(baseline_delta, "baseline_delta")
    d, b = _broadcast([("delta", d), ("baseline_delta", b)])
    xs, _ = _fractions_from_u(system, 1.0 + d / 1000.0, ref, law, delta, "delta")
    xb, _ = _fractions_from_u(system, 1.0 + b / 1000.0, ref, law, baseline_delta,
                              "baseline_delta")
    return _wrap(100.0 * (xs - xb), named)


def atom_percent_excess_to_delta(ape, isotope: str, baseline_delta, *,
                                 reference: float | None = None, law: str = "mass_dependent"):
    """δ (‰) of a sample from its atom % excess over a baseline of known δ.

    ``AP = AP(δ_baseline) + APE``, then δ from atom % (:func:`atom_percent_to_delta`).

    Parameters
    ----------
    ape : float, array-like or pandas Series
        Atom % excess (percentage points); the resulting atom % must lie in (0, 100).
    isotope : str
        Isotope code.
    baseline_delta : float, array-like or pandas Series
        δ (‰) of the unenriched material.
    reference : float, optional
        Override of the reference ratio R_std of the main isotope pair.
    law : {"mass_dependent", "refuse"}, default="mass_dependent"
        How O and S treat their further minor isotopes (see :func:`delta_to_atom_fraction`).

    Returns
    -------
    float, ndarray or Series
        δ in ‰.
    """
    system = isotope_system(isotope)
    ref = check_reference(system, reference)
    named = [("ape", ape), ("baseline_delta", baseline_delta)]
    e = _as_array(ape, "ape")
    _check_values(e, ape, "ape", "finite", lambda a: np.zeros(a.shape, dtype=bool))
    b = _delta_array(baseline_delta, "baseline_delta")
    e, b = _broadcast([("ape", e), ("baseline_delta", b)])
    xb, _ = _fractions_from_u(system, 1.0 + b / 1000.0, ref, law, baseline_delta,
                              "baseline_delta")
    ap = 100.0 * xb + e
    bad = ((ap <= 0.0) | (ap >= 100.0)) & ~np.isnan(ap)
    if np.any(bad):
        value, where, _ = _location(ape, e, bad)
        total, _, _ = _location(None, ap, bad)
        raise DataError(
            f"ape + baseline atom % must lie strictly between 0 and 100 %; ape = {value!r}"
            f"{where} gives {total:.6g} %"
        )
    out = _delta_from_fraction(system, ap / 100.0, ref, law, ape, "atom_percent",
                               factor=100.0)
    return _wrap(out, named)


# ---------------------------------------------------------------------------------------------
# Fractionation: α, ε, Δ
# ---------------------------------------------------------------------------------------------


def alpha(delta_a, delta_b):
    """Fractionation factor ``α_A/B = R_A/R_B = (1000 + δ_A)/(1000 + δ_B)`` (Coplen 2011).

    Parameters
    ----------
    delta_a, delta_b : float, array-like or pandas Series
        δ (‰) of phases A and B on the same scale, each > −1000.

    Returns
    -------
    float, ndarray or Series
        α (dimensionless).
    """
    named = [("delta_a", delta_a), ("delta_b", delta_b)]
    a = _delta_array(delta_a, "delta_a")
    b = _delta_array(delta_b, "delta_b")
    a, b = _broadcast([("delta_a", a), ("delta_b", b)])
    return _wrap((1000.0 + a) / (1000.0 + b), named, keep_name=False)


def epsilon(delta_a, delta_b):
    """Isotope separation ``ε_A/B = (α_A/B − 1)·1000`` in ‰ (Coplen 2011).

    .. math:: \\varepsilon = \\frac{\\delta_A - \\delta_B}{1 + \\delta_B/1000}

    Parameters
    ----------
    delta_a, delta_b : float, array-like or pandas Series
        δ (‰) of phases A (e.g. tissue) and B (e.g. diet), each > −1000.

    Returns
    -------
    float, ndarray or Series
        ε in ‰.

    Examples
    --------
    >>> round(epsilon(-12.851, -26.0), 3)
    13.5
    """
    named = [("delta_a", delta_a), ("delta_b", delta_b)]
    a = _delta_array(delta_a, "delta_a")
    b = _delta_array(delta_b, "delta_b")
    a, b = _broadcast([("delta_a", a), ("delta_b", b)])
    # (α − 1)·1000 written without the cancellation of α − 1.
    return _wrap((a - b) / (1.0 + b / 1000.0), named, keep_name=False)


def apply_epsilon(delta, epsilon):
    """δ of a phase separated by ε from a phase of value δ: ``(1000 + δ)(1 + ε/1000) − 1000``.

    Parameters
    ----------
    delta : float, array-like or pandas Series
        δ (‰) of the starting phase (e.g. diet), > −1000.
    epsilon : float, array-like or pandas Series
        ε (‰) of the new phase relative to it, > −1000.

    Returns
    -------
    float, ndarray or Series
        δ (‰) of the new phase.

    Examples
    --------
    Invented numbers: a diet of −26.0 ‰ and a tissue separated by ε = 13.5 ‰.

    >>> round(apply_epsilon(-26.0, 13.5), 3)
    -12.851
    """
    named = [("delta", delta), ("epsilon", epsilon)]
    d = _delta_array(delta, "delta")
    e = _as_array(epsilon, "epsilon")
    _check_values(e, epsilon, "epsilon", "finite and greater than -1000 ‰ (α > 0)",
                  lambda a: a <= -1000.0)
    d, e = _broadcast([("delta", d), ("epsilon", e)])
    # (1000 + δ)(1 + ε/1000) − 1000 = δ + ε + δε/1000, written without cancellation.
    return _wrap(d + e + d * e / 1000.0, named, keep_name=False)


def difference_form_error(delta_b, separation):
    """How far the difference form ``δ_B + Δ`` lies from the ε form for the same separation.

    .. math::

        (\\delta_B + \\Delta) - [(1000 + \\delta_B)(1 + \\Delta/1000) - 1000]
        = -\\frac{\\Delta\\,\\delta_B}{1000}

    (algebra from Coplen 2011's definitions). Small near the standard's value and for small
    separations; for δ far from 0 or large Δ the difference form is wrong by this much.

    Parameters
    ----------
    delta_b : float, array-like or pandas Series
        δ (‰) of the starting phase (e.g. diet), > −1000.
    separation : float, array-like or pandas Series
        The separation (‰), read as Δ in the difference form and as ε in the ε form.

    Returns
    -------
    float, ndarray or Series
        Difference form minus ε form, in ‰.

    Examples
    --------
    Invented numbers: diet −26.0 ‰, separation 13.5 ‰: −12.5 ‰ against −12.851 ‰.

    >>> round(difference_form_error(-26.0, 13.5), 3)
    0.351
    """
    named = [("delta_b", delta_b), ("separation", separation)]
    b = _delta_array(delta_b, "delta_b")
    s = _as_array(separation, "separation")
    _check_values(s, separation, "separation", "finite and greater than -1000 ‰",
                  lambda a: a <= -1000.0)
    b, s = _broadcast([("delta_b", b), ("separation", s)])
    return _wrap(-s * b / 1000.0, named, keep_name=False)


def big_delta(delta_a, delta_b):
    """Difference-form separation ``Δ_A−B = δ_A − δ_B`` in ‰ (e.g. tissue minus diet).

    Parameters
    ----------
    delta_a, delta_b : float, array-like or pandas Series
        δ (‰) of phases A (e.g. tissue) and B (e.g. diet), each > −1000.

    Returns
    -------
    float, ndarray or Series
        Δ in ‰.
    """
    named = [("delta_a", delta_a), ("delta_b", delta_b)]
    a = _delta_array(delta_a, "delta_a")
    b = _delta_array(delta_b, "delta_b")
    a, b = _broadcast([("delta_a", a), ("delta_b", b)])
    return _wrap(a - b, named, keep_name=False)


# ---------------------------------------------------------------------------------------------
# Mass balance
# ---------------------------------------------------------------------------------------------


def _sources(obj, name: str) -> np.ndarray:
    """Per-source values with the sources along the last axis.

    A list or tuple that holds numpy arrays or pandas Series is read as one entry per source
    (scalars among them broadcast); anything else (nested lists, arrays, a DataFrame with one
    column per source, a Series over sources) goes through numpy with the sources along its
    last axis.
    """
    if isinstance(obj, (list, tuple)) and len(obj) == 0:
        raise DataError(f"{name} must hold at least one source; got an empty sequence")
    if isinstance(obj, (list, tuple)) and any(
            isinstance(o, (np.ndarray, pd.Series, pd.DataFrame)) for o in obj):
        parts = [(f"{name}[{i}]", _as_array(o, f"{name}[{i}]")) for i, o in enumerate(obj)]
        return np.stack(_broadcast(parts), axis=-1)
    arr = _as_array(obj, name)
    if arr.ndim == 0:
        raise DataError(
            f"{name} must hold one entry per source along the last axis (e.g. a pair); "
            f"got the scalar {float(arr)!r}"
        )
    return arr


def _element_weights(fractions, concentrations, shape):
    """Validated element fractions, broadcast to ``shape`` (sources along the last axis)."""
    f = _sources(fractions, "fractions")
    _check_values(f, fractions, "fractions", "within [0, 1]", lambda a: (a < 0.0) | (a > 1.0))
    kind = "mass fractions of the sources" if concentrations is not None else \
        "fractions of the element"
    try:
        f = np.broadcast_to(f, shape)
    except ValueError:
        raise DataError(
            f"fractions (shape {f.shape}) do not match values (shape {shape}); both need one "
            "entry per source along the last axis"
        ) from None
    sums = f.sum(axis=-1)
    off = (np.abs(sums - 1.0) > _SUM_TOL) & ~np.isnan(sums)
    if np.any(off):
        value, where, _ = _location(None, sums, off)
        raise DataError(
            f"fractions ({kind}) must sum to 1 over the sources (last axis); got a sum of "
            f"{value!r}{where}"
        )
    if concentrations is None:
        return f
    c = _sources(concentrations, "concentrations")
    _check_values(c, concentrations, "concentrations",
                  "finite and greater than 0 (a source without the element has no δ for it; "
                  "leave it out)", lambda a: a <= 0.0)
    try:
        c = np.broadcast_to(c, shape)
    except ValueError:
        raise DataError(
            f"concentrations (shape {c.shape}) do not match values (shape {shape}); both need "
            "one entry per source along the last axis"
        ) from None
    fc = f * c
    return fc / fc.sum(axis=-1, keepdims=True)


def mix(values, fractions, isotope: str, scale: str = "atom_fraction", concentrations=None, *,
        reference: float | None = None, law: str = "mass_dependent"):
    """δ of a mixture of sources by mass balance.

    ``fractions`` are fractions **of the element** (of the C, N, ... atoms in the mixture that
    come from each source), unless ``concentrations`` are given: then ``fractions`` are mass
    fractions of the sources and are converted to element fractions

    .. math:: w_i = \\frac{f_i c_i}{\\sum_j f_j c_j}

    with ``c_i`` the element concentration of source i (e.g. % C, any common unit).

    On the ``"atom_fraction"`` scale each isotope's atoms are balanced exactly; the mixture's
    ratio ``R = Σ w_i x_heavy,i / Σ w_i x_light,i`` gives

    .. math:: \\delta_\\text{mix} = \\frac{\\sum_i w_i\\, x_{\\text{light},i}\\, \\delta_i}
              {\\sum_i w_i\\, x_{\\text{light},i}}

    (identical to mixing ``x = R/(1 + R)`` for H, C, N; for O and S the sources' light-isotope
    fractions come from the mass-dependent law, and the mixture's δ needs no law). On the
    ``"delta"`` scale mixing is linear, ``δ_mix = Σ w_i δ_i``: fine at natural abundance, where
    the light fractions barely differ, and wrong for enriched tracers.

    Parameters
    ----------
    values : sequence or array-like, shape (..., n_sources)
        δ (‰) of each source, the sources along the last axis: an array, a nested list, or a
        DataFrame with one column per source. A list/tuple of arrays or Series (a pair
        ``(delta_a, delta_b)``, say) is read as one entry per source instead.
    fractions : sequence or array-like, shape (..., n_sources)
        Element fractions (or mass fractions, with ``concentrations``), each in [0, 1] and
        summing to 1 over the sources; broadcast against ``values``.
    isotope : str
        Isotope code.
    scale : {"atom_fraction", "delta"}
        Where the balance is done.
    concentrations : sequence or array-like, optional
        Element concentration of each source (> 0), laid out like ``fractions``.
    reference : float, optional
        Override of the reference ratio R_std of the main isotope pair.
    law : {"mass_dependent", "refuse"}, default="mass_dependent"
        How O and S treat their further minor isotopes (see
        :func:`delta_to_atom_fraction`); used on the ``"atom_fraction"`` scale only.

    Returns
    -------
    float, ndarray or Series
        δ (‰) of the mixture, with the source axis removed (a Series with the DataFrame's or
        Series' index when the sources came as such).

    Examples
    --------
    Invented numbers: a 15N tracer at +2000 ‰ and a natural source at 0 ‰, half and half.

    >>> round(mix((2000.0, 0.0), (0.5, 0.5), "d15N"), 4)     # atom-fraction balance
    996.3504
    >>> mix((2000.0, 0.0), (0.5, 0.5), "d15N", scale="delta")
    1000.0
    """
    system = isotope_system(isotope)
    ref = check_reference(system, reference)
    _check_scale(scale)
    named = [("values", values), ("fractions", fractions), ("concentrations", concentrations)]
    _pandas_inputs(named)  # index agreement
    v = _sources(values, "values")
    _check_values(v, values, "values", "finite and greater than -1000 ‰ (a positive ratio)",
                  lambda a: a <= -1000.0)
    f_arr = _sources(fractions, "fractions")
    c_arr = None if concentrations is None else _sources(concentrations, "concentrations")
    try:
        shape = np.broadcast_shapes(v.shape, f_arr.shape,
                                    *(() if c_arr is None else (c_arr.shape,)))
    except ValueError:
        shapes = f"values {v.shape}, fractions {f_arr.shape}" + (
            "" if c_arr is None else f", concentrations {c_arr.shape}")
        raise DataError(
            f"shapes cannot be broadcast together: {shapes}; each needs one entry per source "
            "along the last axis"
        ) from None
    w = _element_weights(fractions, concentrations, shape)
    v = np.broadcast_to(v, shape)
    if scale == "delta":
        out = np.sum(w * v, axis=-1)
    else:
        _, light = _fractions_from_u(system, 1.0 + v / 1000.0, ref, law, values, "values")
        wl = w * light
        out = np.sum(wl * v, axis=-1) / np.sum(wl, axis=-1)
    return _wrap(out, named, keep_name=False)


def source_fraction(value, source_a, source_b, isotope: str, scale: str = "atom_fraction", *,
                    reference: float | None = None, law: str = "mass_dependent"):
    """Fraction of the element in a mixture that comes from source B (two-source inverse).

    On the ``"delta"`` scale ``f_B = (δ − δ_A)/(δ_B − δ_A)``. On the ``"atom_fraction"`` scale
    the exact inverse of :func:`mix`:

    .. math:: f_B = \\frac{x_{\\text{light},A}(\\delta - \\delta_A)}
              {x_{\\text{light},A}(\\delta - \\delta_A) - x_{\\text{light},B}(\\delta - \\delta_B)}

    The result is not clipped: below 0 or above 1 means the mixture lies outside the range of
    the two sources (measurement noise, or a missing source).

    Parameters
    ----------
    value : float, array-like or pandas Series
        δ (‰) of the mixture.
    source_a, source_b : float, array-like or pandas Series
        δ (‰) of the two sources (broadcast against ``value``); they must differ.
    isotope : str
        Isotope code.
    scale : {"atom_fraction", "delta"}
        Where the balance is done (see :func:`mix`).
    reference : float, optional
        Override of the reference ratio R_std of the main isotope pair.
    law : {"mass_dependent", "refuse"}, default="mass_dependent"
        How O and S treat their further minor isotopes (see :func:`delta_to_atom_fraction`).

    Returns
    -------
    float, ndarray or Series
        Element fraction of source B (dimensionless).

    Examples
    --------
    >>> round(source_fraction(996.3503649635036, 0.0, 2000.0, "d15N"), 12)
    0.5
    """
    system = isotope_system(isotope)
    ref = check_reference(system, reference)
    _check_scale(scale)
    named = [("value", value), ("source_a", source_a), ("source_b", source_b)]
    d = _delta_array(value, "value")
    a = _delta_array(source_a, "source_a")
    b = _delta_array(source_b, "source_b")
    d, a, b = _broadcast([("value", d), ("source_a", a), ("source_b", b)])
    same = a == b
    if np.any(same):
        equal, where, _ = _location(None, a, same)
        raise DataError(
            f"source_a and source_b are equal ({equal!r} ‰{where}); the fraction of source B "
            f"is undefined when the sources have the same {system.code}"
        )
    if scale == "delta":
        out = (d - a) / (b - a)
    else:
        _, la = _fractions_from_u(system, 1.0 + a / 1000.0, ref, law, source_a, "source_a")
        _, lb = _fractions_from_u(system, 1.0 + b / 1000.0, ref, law, source_b, "source_b")
        num = la * (d - a)
        out = num / (num - lb * (d - b))
    return _wrap(out, named, keep_name=False)
