"""Tests of isoturnover.isotopes: definitions, reference ratios, round trips, mass balance.

Definitions: Coplen 2011 (Rapid Commun. Mass Spectrom. 25:2538–2560, IUPAC recommendations):
δ = R/R_std − 1, α_A/B = R_A/R_B, ε = α − 1. Checks below are worked by hand or with exact
rational arithmetic (``fractions.Fraction``) and scipy's scalar root finder as independent
implementations. Provenance of the reference ratios: tests/reference_data/isotope_reference.md.
"""

from __future__ import annotations

import dataclasses
import math
from fractions import Fraction

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq

from isoturnover import isotopes as iso
from isoturnover.errors import DataError, ScaleError, UnknownIsotopeError

CODES = ("d13C", "d15N", "d34S", "d2H", "d18O")
TWO_ISOTOPE = ("d13C", "d15N", "d2H")
FAST = settings(max_examples=150, deadline=None, derandomize=True)

# δ range for round trips: up to 1e5 ‰ (strongly enriched tracers) for every code; for d34S this
# stays below the turning point of the mass-dependent law (≈ 1.09e5 ‰).
deltas = st.floats(min_value=-999.0, max_value=1e5, allow_nan=False)


def close_delta(a, b):
    """δ agreement: 1e-9 ‰ absolute plus 1e-11 relative to 1000 + δ (i.e. to the ratio)."""
    return abs(a - b) <= 1e-9 + 1e-11 * abs(1000.0 + b)


# ---------------------------------------------------------------------------------------------
# Reference standards
# ---------------------------------------------------------------------------------------------


def test_reference_ratios_and_sources():
    # Values as listed in tests/reference_data/isotope_reference.md with their sources.
    expected = {
        "d13C": (0.0111802, "VPDB", "13C", "12C", "Zhang & Li 1990"),  # from memory
        "d15N": (1 / 272.0, "AIR", "15N", "14N", "Junk & Svec 1958"),  # IUPAC/CIAAW
        "d34S": (0.0441626, "VCDT", "34S", "32S", "Ding et al. 2001"),  # from memory
        "d2H": (155.76e-6, "VSMOW", "2H", "1H", "Hagemann et al. 1970"),  # from memory
        "d18O": (2005.20e-6, "VSMOW", "18O", "16O", "Baertschi 1976"),  # from memory
    }
    assert tuple(iso.ISOTOPES) == CODES
    for code, (ratio, scale, heavy, light, source) in expected.items():
        system = iso.ISOTOPES[code]
        assert system.code == code
        assert system.ratio == ratio
        assert iso.reference_ratio(code) == ratio
        assert (system.scale, system.heavy, system.light) == (scale, heavy, light)
        assert source in system.source
        assert system.ratio_name == f"{heavy}/{light}"
    for code in ("d13C", "d34S", "d2H", "d18O"):
        assert "from memory" in iso.ISOTOPES[code].source
    assert "0.0111105" in iso.ISOTOPES["d13C"].note  # 2024 re-determination noted


def test_minor_isotopes_of_o_and_s():
    (o17,) = iso.ISOTOPES["d18O"].minor
    assert (o17.isotope, o17.ratio, o17.exponent) == ("17O", 379.9e-6, 0.528)
    assert "Li et al. 1988" in o17.source and "from memory" in o17.source
    s33, s36 = iso.ISOTOPES["d34S"].minor
    assert (s33.isotope, s33.ratio, s33.exponent) == ("33S", 0.0078772, 0.515)
    assert (s36.isotope, s36.ratio, s36.exponent) == ("36S", 0.0001533, 1.90)
    for m in (o17, s33, s36):
        assert "from memory" in m.source and "from memory" in m.exponent_source
    for code in TWO_ISOTOPE:
        assert iso.ISOTOPES[code].two_isotope and not iso.ISOTOPES[code].minor


def test_isotopes_mapping_is_read_only():
    with pytest.raises(TypeError):
        iso.ISOTOPES["d13C"] = None  # type: ignore[index]
    with pytest.raises(dataclasses.FrozenInstanceError):
        iso.ISOTOPES["d13C"].ratio = 0.0111105  # type: ignore[misc]


def test_reference_override():
    # 2024 VPDB re-determination (Rapid Commun. Mass Spectrom. 38:e9773).
    assert iso.reference_ratio("d13C", 0.0111105) == 0.0111105
    assert iso.delta_to_ratio(0.0, "d13C", reference=0.0111105) == 0.0111105
    assert iso.ratio_to_delta(0.0111105, "d13C", reference=0.0111105) == 0.0
    x_old = iso.delta_to_atom_fraction(-26.0, "d13C")
    x_new = iso.delta_to_atom_fraction(-26.0, "d13C", reference=0.0111105)
    r = 0.0111105 * 0.974
    assert x_new == pytest.approx(r / (1 + r), rel=1e-15)
    assert x_new < x_old
    # δ mixing does not depend on the reference; atom-fraction mixing does, slightly.
    assert iso.mix((-26, -12), (0.5, 0.5), "d13C", scale="delta", reference=0.0111105) == -19.0


@pytest.mark.parametrize("bad", [0.0, -0.01, math.inf, math.nan, "abc", [0.01, 0.02]])
def test_reference_override_rejected(bad):
    with pytest.raises(DataError, match=r"ratio must be a positive finite number .*13C/12C"):
        iso.reference_ratio("d13C", bad)
    with pytest.raises(DataError, match=r"reference must be a positive finite number .*VPDB"):
        iso.delta_to_ratio(0.0, "d13C", reference=bad)


# ---------------------------------------------------------------------------------------------
# Definitions worked by hand (Coplen 2011)
# ---------------------------------------------------------------------------------------------


def test_delta_ratio_by_hand():
    # R = R_std (1 + δ/1000): 0.0111802 × 0.974 = 0.0111802 − 0.0002906852 = 0.0108895148
    assert iso.delta_to_ratio(-26.0, "d13C") == pytest.approx(0.0108895148, rel=1e-14)
    # AIR: R = (1/272)(1 + 1000/1000) = 1/136
    assert iso.delta_to_ratio(1000.0, "d15N") == pytest.approx(1 / 136, rel=1e-15)
    # δ = (R/R_std − 1)·1000: 2005.20e-6 × 1.0105 → +10.5 ‰
    assert iso.ratio_to_delta(2005.20e-6 * 1.0105, "d18O") == pytest.approx(10.5, rel=1e-12)
    assert iso.ratio_to_delta(155.76e-6 / 2, "d2H") == pytest.approx(-500.0, rel=1e-14)


def test_atom_fraction_two_isotopes_exact():
    # x = R/(1 + R): δ15N = 0 gives 1/273, δ15N = +1000 ‰ gives (1/136)/(137/136) = 1/137
    assert iso.delta_to_atom_fraction(0.0, "d15N") == pytest.approx(1 / 273, rel=1e-15)
    assert iso.delta_to_atom_fraction(1000.0, "d15N") == pytest.approx(1 / 137, rel=1e-15)
    assert iso.delta_to_atom_percent(1000.0, "d15N") == pytest.approx(100 / 137, rel=1e-15)
    # exact rational arithmetic as the independent check
    for code, delta in (("d13C", "-26.0"), ("d2H", "-150.5"), ("d15N", "7.25")):
        ref = Fraction(repr(iso.ISOTOPES[code].ratio))
        r = ref * (1 + Fraction(delta) / 1000)
        x = r / (1 + r)
        assert iso.delta_to_atom_fraction(float(delta), code) == pytest.approx(float(x), rel=1e-15)
        assert iso.atom_fraction_to_delta(float(x), code) == pytest.approx(float(delta), abs=1e-11)


def test_atom_fraction_o_and_s_at_standard_exact():
    # At δ = 0 every ratio is the standard's: x = R/(1 + Σ R), worked with exact fractions.
    o = Fraction("2005.20e-6") / (1 + Fraction("379.9e-6") + Fraction("2005.20e-6"))
    assert iso.delta_to_atom_fraction(0.0, "d18O") == pytest.approx(float(o), rel=1e-15)
    s = Fraction("0.0441626") / (1 + Fraction("0.0078772") + Fraction("0.0441626")
                                 + Fraction("0.0001533"))
    assert iso.delta_to_atom_fraction(0.0, "d34S") == pytest.approx(float(s), rel=1e-15)
    # ≈ 0.0020004 (18O of VSMOW) and ≈ 0.041972 (34S of VCDT), hand arithmetic:
    # 0.0020052/1.0023851 and 0.0441626/1.0521931
    assert float(o) == pytest.approx(0.0020004, abs=1e-7)
    assert float(s) == pytest.approx(0.041972, abs=1e-6)


def test_mass_dependent_law_by_hand():
    # δ18O = +25 ‰: R17 = 379.9e-6 × 1.025**0.528, x18 = R18/(1 + R17 + R18)
    r18 = 2005.20e-6 * 1.025
    r17 = 379.9e-6 * math.pow(1.025, 0.528)
    assert iso.delta_to_atom_fraction(25.0, "d18O") == pytest.approx(
        r18 / (1 + r17 + r18), rel=1e-15)
    # δ34S = +800 ‰: R33 = 0.0078772 × 1.8**0.515, R36 = 0.0001533 × 1.8**1.90
    r34 = 0.0441626 * 1.8
    r33 = 0.0078772 * math.pow(1.8, 0.515)
    r36 = 0.0001533 * math.pow(1.8, 1.90)
    assert iso.delta_to_atom_fraction(800.0, "d34S") == pytest.approx(
        r34 / (1 + r33 + r34 + r36), rel=1e-15)


@pytest.mark.parametrize("code", ["d18O", "d34S"])
@pytest.mark.parametrize("x", [1e-6, 0.0015, 0.002, 0.0419, 0.12, 0.5, 0.68])
def test_inverse_matches_scipy_root_finder(code, x):
    # scipy.optimize.brentq on the scalar forward relation as an independent inversion.
    def resid(log_u):
        return iso.delta_to_atom_fraction(math.expm1(log_u) * 1000.0, code) - x

    hi = math.log(105.0) if code == "d34S" else 30.0  # below the S turning point (u ≈ 110)
    log_u = brentq(resid, -25.0, hi, xtol=1e-15, rtol=1e-15, maxiter=500)
    got = iso.atom_fraction_to_delta(x, code)
    assert math.log1p(got / 1000.0) == pytest.approx(log_u, rel=1e-12, abs=1e-13)


def test_inverse_vectorised_and_converged_to_1e15():
    # From δ = −500 ‰ up: nearer −1000 ‰ the float δ itself cannot hold R to 1e-15
    # (1 + δ/1000 cancels), whatever the solver does.
    for code in ("d18O", "d34S"):
        x = np.linspace(iso.delta_to_atom_fraction(-500.0, code), 0.6, 20001)
        d = iso.atom_fraction_to_delta(x, code)
        back = iso.delta_to_atom_fraction(d, code)
        assert np.max(np.abs(back / x - 1.0)) < 4e-15


def test_sulfur_turning_point():
    # Independent brute-force location of the maximum of x34 on a fine grid (plain numpy).
    u = np.exp(np.linspace(math.log(50.0), math.log(200.0), 200001))
    r34 = 0.0441626 * u
    x = r34 / (1 + r34 + 0.0078772 * u**0.515 + 0.0001533 * u**1.90)
    u_peak = u[np.argmax(x)]
    d_peak = (u_peak - 1.0) * 1000.0
    assert d_peak == pytest.approx(108980.0, rel=1e-3)
    # Below it the forward map is increasing, and both directions work.
    d = np.linspace(-990.0, 0.995 * d_peak, 2001)
    xs = iso.delta_to_atom_fraction(d, "d34S")
    assert np.all(np.diff(xs) > 0)
    with pytest.raises(ScaleError, match=r"delta = 200000\.0 ‰ lies beyond the turning point"):
        iso.delta_to_atom_fraction(200000.0, "d34S")
    with pytest.raises(ScaleError, match=r"x = 0\.7 cannot be reached .* peaks at 0\.6836"):
        iso.atom_fraction_to_delta(0.7, "d34S")
    with pytest.raises(ScaleError, match=r"atom_percent = 70\.0 at index 'b'.* peaks at 68\.36"):
        iso.atom_percent_to_delta(pd.Series([4.2, 70.0], index=["a", "b"]), "d34S")
    # Oxygen's law (λ < 1) has no turning point: x18 → 1 as δ18O grows.
    assert iso.delta_to_atom_fraction(1e9, "d18O") > 0.99


def test_law_refuse():
    for code in ("d18O", "d34S"):
        with pytest.raises(ScaleError, match=rf"law='refuse' was given.*refused for {code}"):
            iso.delta_to_atom_fraction(1.0, code, law="refuse")
        with pytest.raises(ScaleError, match=r"not exact from"):
            iso.atom_fraction_to_delta(0.01, code, law="refuse")
        with pytest.raises(ScaleError, match=r"refused"):
            iso.mix((0.0, 10.0), (0.5, 0.5), code, law="refuse")
        # the δ scale does not need atom fractions
        assert iso.mix((0.0, 10.0), (0.5, 0.5), code, scale="delta", law="refuse") == 5.0
    with pytest.raises(ScaleError, match=r"17O also enters the denominator"):
        iso.delta_to_atom_percent(1.0, "d18O", law="refuse")
    with pytest.raises(ScaleError, match=r"33S and 36S also enter the denominator"):
        iso.delta_to_atom_percent(1.0, "d34S", law="refuse")
    # exact elements are unaffected
    assert iso.delta_to_atom_fraction(0.0, "d15N", law="refuse") == pytest.approx(1 / 273)
    with pytest.raises(ScaleError, match=r"law must be one of 'mass_dependent', 'refuse'; "
                                         r"got 'linear'"):
        iso.delta_to_atom_fraction(0.0, "d15N", law="linear")


# ---------------------------------------------------------------------------------------------
# Round trips (hypothesis)
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("code", CODES)
@FAST
@given(delta=deltas)
def test_round_trip_delta_ratio_fraction_percent(code, delta):
    r = iso.delta_to_ratio(delta, code)
    assert close_delta(iso.ratio_to_delta(r, code), delta)
    x = iso.delta_to_atom_fraction(delta, code)
    assert 0.0 < x < 1.0
    assert close_delta(iso.atom_fraction_to_delta(x, code), delta)
    ap = iso.delta_to_atom_percent(delta, code)
    assert ap == pytest.approx(100.0 * x, rel=1e-15)
    assert close_delta(iso.atom_percent_to_delta(ap, code), delta)


@pytest.mark.parametrize("code", CODES)
@FAST
@given(x=st.floats(min_value=1e-6, max_value=0.6))
def test_round_trip_fraction_delta(code, x):
    d = iso.atom_fraction_to_delta(x, code)
    assert iso.delta_to_atom_fraction(d, code) == pytest.approx(x, rel=1e-13)


@pytest.mark.parametrize("code", CODES)
@FAST
@given(delta=deltas, baseline=st.floats(min_value=-100.0, max_value=100.0))
def test_round_trip_atom_percent_excess(code, delta, baseline):
    ape = iso.delta_to_atom_percent_excess(delta, code, baseline)
    expected = iso.delta_to_atom_percent(delta, code) - iso.delta_to_atom_percent(baseline, code)
    assert ape == pytest.approx(expected, rel=1e-12, abs=1e-15)
    back = iso.atom_percent_excess_to_delta(ape, code, baseline)
    # APE is a small difference of atom % values: precision is limited by the subtraction.
    assert abs(back - delta) <= 1e-7 * (1000.0 + abs(delta))


@FAST
@given(d=st.floats(-900, 5000), e=st.floats(-500, 500))
def test_epsilon_apply_epsilon_inverse(d, e):
    target = iso.apply_epsilon(d, e)
    if target > -1000.0:
        assert iso.epsilon(target, d) == pytest.approx(e, rel=1e-9, abs=1e-9)
        assert iso.alpha(target, d) == pytest.approx(1 + e / 1000, rel=1e-12)
    # the difference form departs from the ε form by −Δ·δ_B/1000 (algebra, Coplen 2011 defs)
    assert iso.difference_form_error(d, e) == pytest.approx(
        (d + e) - ((1000 + d) * (1 + e / 1000) - 1000), rel=1e-9, abs=1e-9)


# ---------------------------------------------------------------------------------------------
# α, ε, Δ: the worked example (invented numbers, shared reference README)
# ---------------------------------------------------------------------------------------------


def test_worked_example_diet_tissue():
    # Invented numbers: diet −26.0 ‰, tissue separated by ε = 13.5 ‰.
    # ε form: 974 × 1.0135 − 1000 = 987.149 − 1000 = −12.851 ‰
    assert iso.apply_epsilon(-26.0, 13.5) == pytest.approx(-12.851, abs=1e-12)
    # difference form: −26.0 + 13.5 = −12.5 ‰; the gap is −Δ·δ/1000 = 0.351 ‰
    assert -26.0 + 13.5 == -12.5
    assert iso.difference_form_error(-26.0, 13.5) == pytest.approx(0.351, abs=1e-12)
    assert iso.epsilon(-12.851, -26.0) == pytest.approx(13.5, abs=1e-10)
    # α = 987.149/974 = 1.0135 exactly
    assert iso.alpha(-12.851, -26.0) == pytest.approx(1.0135, rel=1e-14)
    assert iso.big_delta(-12.851, -26.0) == pytest.approx(13.149, abs=1e-12)


def test_alpha_epsilon_by_hand():
    # α = (1000 + 30)/(1000 − 10) = 1030/990; ε = (1030/990 − 1)·1000 = 40000/990 ‰
    assert iso.alpha(30.0, -10.0) == pytest.approx(1030 / 990, rel=1e-15)
    assert iso.epsilon(30.0, -10.0) == pytest.approx(40000 / 990, rel=1e-14)
    with pytest.raises(DataError, match=r"epsilon must be finite and greater than -1000"):
        iso.apply_epsilon(0.0, -1000.0)
    with pytest.raises(DataError, match=r"delta_b must be finite and greater than -1000 ‰"):
        iso.epsilon(0.0, -1000.0)
    with pytest.raises(DataError, match=r"separation must be finite"):
        iso.difference_form_error(0.0, math.inf)


# ---------------------------------------------------------------------------------------------
# Mass balance
# ---------------------------------------------------------------------------------------------


def test_tracer_mix_atom_fraction_vs_delta():
    # Invented numbers: a +2000 ‰ δ15N tracer mixed 50:50 (N atoms) with a 0 ‰ source.
    # Hand formula with exact fractions: R = (1/272)(1 + δ/1000), x = R/(1 + R),
    # x_mix = (x_t + x_0)/2, R_mix = x_mix/(1 − x_mix), δ_mix = (R_mix·272 − 1)·1000.
    ref = Fraction(1, 272)
    xt = (3 * ref) / (1 + 3 * ref)  # = 3/275
    x0 = ref / (1 + ref)  # = 1/273
    xm = (xt + x0) / 2
    dm = (xm / (1 - xm) / ref - 1) * 1000
    assert dm == Fraction(546000, 548)  # = 996.35036... ‰
    by_atoms = iso.mix((2000.0, 0.0), (0.5, 0.5), "d15N")
    by_delta = iso.mix((2000.0, 0.0), (0.5, 0.5), "d15N", scale="delta")
    assert by_atoms == pytest.approx(float(dm), rel=1e-14)
    assert by_delta == 1000.0
    assert by_delta - by_atoms == pytest.approx(3.6496, abs=1e-4)
    # mixing in atom fraction: the mixture's atom fraction is the average of the sources'
    assert iso.delta_to_atom_fraction(by_atoms, "d15N") == pytest.approx(float(xm), rel=1e-14)


@pytest.mark.parametrize("code", ["d18O", "d34S"])
def test_mix_o_s_is_isotope_by_isotope_balance(code):
    # Each isotope's atoms balanced separately (light from the law per source), R = heavy/light.
    system = iso.ISOTOPES[code]
    values = np.array([-20.0, 3000.0, 150.0])
    w = np.array([0.2, 0.3, 0.5])
    u = 1 + values / 1000
    heavy = system.ratio * u
    minors = sum(m.ratio * u**m.exponent for m in system.minor)
    x_heavy = heavy / (1 + heavy + minors)
    x_light = 1 / (1 + heavy + minors)
    r_mix = np.sum(w * x_heavy) / np.sum(w * x_light)
    expected = (r_mix / system.ratio - 1) * 1000
    assert iso.mix(values, w, code) == pytest.approx(expected, rel=1e-13)


def test_mix_with_concentrations():
    # Invented numbers: equal masses of a C3 plant (−27 ‰, 40 % C) and a meal (−19 ‰, 10 % C):
    # element fractions 0.5·40/(0.5·40 + 0.5·10) = 0.8 and 0.2.
    by_mass = iso.mix((-27.0, -19.0), (0.5, 0.5), "d13C", scale="delta",
                      concentrations=(40.0, 10.0))
    assert by_mass == pytest.approx(0.8 * -27.0 + 0.2 * -19.0, abs=1e-12)
    assert iso.mix((-27.0, -19.0), (0.5, 0.5), "d13C", concentrations=(40.0, 10.0)) == \
        pytest.approx(iso.mix((-27.0, -19.0), (0.8, 0.2), "d13C"), rel=1e-14)
    with pytest.raises(DataError, match=r"concentrations must be finite and greater than 0"):
        iso.mix((-27.0, -19.0), (0.5, 0.5), "d13C", concentrations=(40.0, 0.0))
    with pytest.raises(DataError, match=r"fractions \(mass fractions of the sources\) must sum"):
        iso.mix((-27.0, -19.0), (0.5, 0.6), "d13C", concentrations=(40.0, 10.0))
    with pytest.raises(DataError, match=r"shapes cannot be broadcast together: values \(2,\), "
                                        r"fractions \(2,\), concentrations \(3,\)"):
        iso.mix((-27.0, -19.0), (0.5, 0.5), "d13C", concentrations=(40.0, 10.0, 5.0))


def test_mix_n_sources_along_last_axis():
    rng = np.random.default_rng(7)
    values = rng.uniform(-30, 10, size=(5, 3))
    w = np.array([0.2, 0.5, 0.3])
    got = iso.mix(values, w, "d13C", scale="delta")
    assert got.shape == (5,)
    assert np.allclose(got, values @ w, rtol=0, atol=1e-12)
    # per-row fractions, and a pair of arrays as two sources
    wf = rng.dirichlet([1, 1, 1], size=5)
    assert np.allclose(iso.mix(values, wf, "d13C", scale="delta"),
                       np.sum(values * wf, axis=1), atol=1e-12)
    # nested lists follow numpy: rows are mixtures, the last axis the sources
    assert iso.mix([[-26.0, -12.0], [0.0, 10.0]], [[0.5, 0.5], [0.25, 0.75]], "d13C",
                   scale="delta").tolist() == [-19.0, 7.5]
    pair = iso.mix((values[:, 0], values[:, 1]), (0.25, 0.75), "d13C")
    assert pair.shape == (5,)
    assert np.allclose(pair, [iso.mix((a, b), (0.25, 0.75), "d13C")
                              for a, b in values[:, :2]], rtol=1e-15)


@pytest.mark.parametrize("code", CODES)
@pytest.mark.parametrize("scale", ["atom_fraction", "delta"])
@FAST
@given(a=st.floats(-500, 5000), b=st.floats(-500, 5000), f=st.floats(0.0, 1.0))
def test_source_fraction_inverts_mix(code, scale, a, b, f):
    if abs(a - b) < 1e-3:
        return
    d = iso.mix((a, b), (1 - f, f), code, scale=scale)
    assert iso.source_fraction(d, a, b, code, scale=scale) == pytest.approx(f, abs=1e-9)


def test_source_fraction_by_hand_and_errors():
    # δ scale: (−20 − (−26))/(−12 − (−26)) = 6/14
    assert iso.source_fraction(-20.0, -26.0, -12.0, "d13C", scale="delta") == \
        pytest.approx(6 / 14, rel=1e-15)
    # outside the sources' range: not clipped
    assert iso.source_fraction(-10.0, -26.0, -12.0, "d13C", scale="delta") > 1.0
    with pytest.raises(DataError, match=r"source_a and source_b are equal \(-26\.0 ‰\)"):
        iso.source_fraction(-20.0, -26.0, -26.0, "d13C")
    with pytest.raises(DataError, match=r"equal \(5\.0 ‰ at position 1 \(1 of 2 values\)\)"):
        iso.source_fraction(-20.0, [1.0, 5.0], [2.0, 5.0], "d13C")
    with pytest.raises(ScaleError, match=r"scale must be one of 'atom_fraction', 'delta'; "
                                         r"got 'ratio'"):
        iso.source_fraction(-20.0, -26.0, -12.0, "d13C", scale="ratio")


def test_mix_errors():
    with pytest.raises(DataError, match=r"fractions \(fractions of the element\) must sum to 1 "
                                        r"over the sources \(last axis\); got a sum of 0\.99"):
        iso.mix((-26.0, -12.0, 0.0), (0.33, 0.33, 0.33), "d13C")
    with pytest.raises(DataError, match=r"fractions must be within \[0, 1\] .*got 1\.2 "
                                        r"at position 0 \(2 of 2 values\)"):
        iso.mix((-26.0, -12.0), (1.2, -0.2), "d13C")
    with pytest.raises(DataError, match=r"got a sum of 0\.5 at position 1"):
        iso.mix(np.zeros((2, 2)), [[0.5, 0.5], [0.25, 0.25]], "d13C")
    with pytest.raises(DataError, match=r"values must be finite and greater than -1000 ‰"):
        iso.mix((-1000.0, 0.0), (0.5, 0.5), "d13C")
    with pytest.raises(DataError, match=r"values must hold one entry per source.*scalar"):
        iso.mix(-26.0, (0.5, 0.5), "d13C")
    with pytest.raises(DataError, match=r"values must hold at least one source"):
        iso.mix([], [], "d13C")
    with pytest.raises(DataError, match=r"shapes cannot be broadcast together: values \(3, 2\), "
                                        r"fractions \(3,\)"):
        iso.mix(np.zeros((3, 2)), [0.5, 0.5, 0.0], "d13C")
    with pytest.raises(ScaleError, match=r"scale must be one of .*got 'atom_percent'"):
        iso.mix((-26.0, -12.0), (0.5, 0.5), "d13C", scale="atom_percent")
    with pytest.raises(UnknownIsotopeError, match=r"unknown isotope code 'C13'"):
        iso.mix((-26.0, -12.0), (0.5, 0.5), "C13")


# ---------------------------------------------------------------------------------------------
# Types, pandas, NaN, no mutation
# ---------------------------------------------------------------------------------------------


def test_scalar_array_types():
    assert type(iso.delta_to_ratio(1, "d13C")) is float
    assert type(iso.delta_to_ratio(np.float32(1.0), "d13C")) is float
    assert type(iso.atom_fraction_to_delta(0.002, "d18O")) is float
    assert type(iso.mix((1.0, 2.0), (0.5, 0.5), "d13C")) is float
    out = iso.delta_to_ratio([1.0, 2.0], "d13C")
    assert isinstance(out, np.ndarray) and out.shape == (2,)
    out2 = iso.delta_to_atom_fraction(np.zeros((2, 3)), "d34S")
    assert out2.shape == (2, 3)


def test_series_in_series_out():
    idx = pd.Index(["rat1", "rat2", "rat3"], name="subject")
    s = pd.Series([-26.0, np.nan, 500.0], index=idx, name="d13C")
    before = s.copy()
    for f in (iso.delta_to_ratio, iso.delta_to_atom_fraction, iso.delta_to_atom_percent):
        out = f(s, "d13C")
        assert isinstance(out, pd.Series) and out.index.equals(idx) and out.name == "d13C"
        assert np.isnan(out["rat2"]) and not out.drop("rat2").isna().any()
    x = iso.delta_to_atom_fraction(s, "d18O")
    back = iso.atom_fraction_to_delta(x, "d18O")
    assert isinstance(back, pd.Series) and back.index.equals(idx)
    assert np.allclose(back.to_numpy(), s.to_numpy(), equal_nan=True, atol=1e-10)
    ape = iso.delta_to_atom_percent_excess(s, "d15N", -1.0)
    assert isinstance(ape, pd.Series) and ape.index.equals(idx)
    assert isinstance(iso.atom_percent_excess_to_delta(ape, "d15N", -1.0), pd.Series)
    assert isinstance(iso.apply_epsilon(s, 3.4), pd.Series)
    assert iso.epsilon(s, -26.0).index.equals(idx)
    assert iso.source_fraction(s, -30.0, 600.0, "d13C").index.equals(idx)
    pd.testing.assert_series_equal(s, before)


def test_dataframe_and_series_sources_in_mix():
    frame = pd.DataFrame({"plant": [-27.0, -26.0], "meal": [-19.0, -18.0]}, index=["a", "b"])
    before = frame.copy()
    out = iso.mix(frame, (0.5, 0.5), "d13C", scale="delta")
    assert isinstance(out, pd.Series) and list(out.index) == ["a", "b"]
    assert out.tolist() == [-23.0, -22.0]
    pd.testing.assert_frame_equal(frame, before)
    out2 = iso.mix([frame["plant"], -12.0], (0.5, 0.5), "d13C", scale="delta")
    assert isinstance(out2, pd.Series) and list(out2.index) == ["a", "b"]
    # a DataFrame in an element-wise function gives a DataFrame back
    df_out = iso.delta_to_ratio(frame, "d13C")
    assert isinstance(df_out, pd.DataFrame) and df_out.columns.equals(frame.columns)


def test_misaligned_indexes_refused():
    a = pd.Series([1.0, 2.0], index=["x", "y"])
    b = pd.Series([1.0, 2.0], index=["y", "x"])
    with pytest.raises(DataError, match=r"delta_a and delta_b have different indexes"):
        iso.alpha(a, b)
    with pytest.raises(DataError, match=r"values\[0\] and values\[1\] have different indexes"):
        iso.mix([a, b], (0.5, 0.5), "d13C")


def test_nullable_and_nan_pass_through():
    s = pd.Series([1.0, None], dtype="Float64")
    out = iso.delta_to_ratio(s, "d15N")
    assert np.isnan(out.iloc[1]) and out.iloc[0] == pytest.approx((1 / 272) * 1.001)
    assert math.isnan(iso.atom_fraction_to_delta(math.nan, "d34S"))
    assert math.isnan(iso.mix((math.nan, 1.0), (0.5, 0.5), "d13C"))
    arr = np.array([0.002, np.nan, 0.0021])
    got = iso.atom_fraction_to_delta(arr, "d18O")
    assert np.isnan(got[1]) and np.all(np.isfinite(got[[0, 2]]))


def test_inputs_not_mutated():
    arr = np.array([0.002, 0.003])
    keep = arr.copy()
    iso.atom_fraction_to_delta(arr, "d18O")
    iso.delta_to_atom_fraction(arr, "d34S")
    assert np.array_equal(arr, keep)


# ---------------------------------------------------------------------------------------------
# Error messages
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "code, hint",
    [("13C", "d13C"), ("D13C", "d13C"), ("d13c", "d13C"), ("δ15N", "d15N"), ("d18", "d18O"),
     ("d34s", "d34S"), ("2H", "d2H")],
)
def test_unknown_isotope_suggests(code, hint):
    with pytest.raises(UnknownIsotopeError,
                       match=rf"unknown isotope code '{code}'; known codes are d13C, d15N, d34S, "
                             rf"d2H, d18O; did you mean '{hint}'\?"):
        iso.delta_to_ratio(0.0, code)
    assert issubclass(UnknownIsotopeError, ValueError)


def test_unknown_isotope_without_suggestion_and_non_string():
    with pytest.raises(UnknownIsotopeError, match=r"known codes are d13C.*d18O$"):
        iso.reference_ratio("carbon")
    with pytest.raises(UnknownIsotopeError, match=r"isotope must be a code string.*got 13 \(int\)"):
        iso.reference_ratio(13)  # type: ignore[arg-type]


def test_data_errors_name_argument_and_location():
    with pytest.raises(DataError, match=r"ratio must be finite and greater than 0 .*got 0\.0"):
        iso.ratio_to_delta(0.0, "d13C")
    with pytest.raises(DataError, match=r"ratio .*got -1\.0 at position 1 \(1 of 3 values\)"):
        iso.ratio_to_delta([0.01, -1.0, 0.02], "d13C")
    with pytest.raises(DataError, match=r"delta must be finite and greater than -1000 ‰ .*"
                                        r"got -1200\.0 at index 'y' \(2 of 3 values\)"):
        iso.delta_to_ratio(pd.Series([1.0, -1200.0, np.inf], index=list("xyz")), "d13C")
    with pytest.raises(DataError, match=r"delta must be finite .*got inf"):
        iso.delta_to_atom_fraction(math.inf, "d13C")
    with pytest.raises(DataError, match=r"x must be strictly between 0 and 1 .*got 1\.0"):
        iso.atom_fraction_to_delta(1.0, "d15N")
    with pytest.raises(DataError, match=r"x must be strictly between 0 and 1 .*got 0\.0"):
        iso.atom_fraction_to_delta(0.0, "d18O")
    with pytest.raises(DataError, match=r"atom_percent must be strictly between 0 and 100 % "
                                        r".*got 101\.0 at row 'r', column 'c'"):
        iso.atom_percent_to_delta(pd.DataFrame({"c": [101.0]}, index=["r"]), "d13C")
    with pytest.raises(DataError, match=r"ape \+ baseline atom % must lie strictly between 0 and "
                                        r"100 %; ape = 120\.0 gives 120\.366 %"):
        iso.atom_percent_excess_to_delta(120.0, "d15N", 0.0)
    with pytest.raises(DataError, match=r"baseline_delta must be finite"):
        iso.delta_to_atom_percent_excess(10.0, "d15N", -1001.0)
    with pytest.raises(DataError, match=r"delta must be numeric .*got 'abc'"):
        iso.delta_to_ratio("abc", "d13C")
    with pytest.raises(DataError, match=r"delta must be numeric .*Series of dtype"):
        iso.delta_to_ratio(pd.Series(["a", "b"]), "d13C")
    with pytest.raises(DataError, match=r"shapes cannot be broadcast together: delta_a \(2,\), "
                                        r"delta_b \(3,\)"):
        iso.alpha([1.0, 2.0], [1.0, 2.0, 3.0])


def test_public_names():
    for name in iso.__all__:
        assert hasattr(iso, name), name
