"""Equilibration times and integration windows (isoturnover.equilibration).

Sources named beside each check: the one-pool formula −ln(1 − p)/k by hand; "about 4.32
half-lives for 95 %" (ln 20/ln 2, the project's reference notes); the step responses and
weights written out here by hand and solved with scipy.optimize.brentq and integrated with
scipy.integrate.quad; the prediction interval of Higgins, Thompson & Spiegelhalter (2009)
worked by hand with scipy.stats.t; the fit's own TurnoverFit.time_to.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, optimize, stats

import isoturnover as iso
from isoturnover import equilibration as eq
from isoturnover.conventions import INTERVAL_COLUMNS
from isoturnover.errors import DataError

XTOL = 1e-13


# ----------------------------------------------------------------- hand-written responses

def hand_parallel(tau, k, f):
    # 1 − F = Σ f_i e^(−k_i τ) (Cerling et al. 2007), written out
    return sum(fi * math.exp(-ki * tau) for ki, fi in zip(k, f))


def hand_chain(tau, k1, k2):
    # two first-order steps in series: (k1 e^(−k2 τ) − k2 e^(−k1 τ))/(k1 − k2); equal rates
    # e^(−kτ)(1 + kτ) (the limit, by hand)
    if k1 == k2:
        return math.exp(-k1 * tau) * (1 + k1 * tau)
    return (k1 * math.exp(-k2 * tau) - k2 * math.exp(-k1 * tau)) / (k1 - k2)


def hand_weight_parallel(s, k, f):
    # w(s) = Σ f_i k_i e^(−k_i s), written out
    return sum(fi * ki * math.exp(-ki * s) for ki, fi in zip(k, f))


def hand_weight_chain(s, k1, k2):
    # convolution of k1 e^(−k1 s) and k2 e^(−k2 s): k1 k2 (e^(−k2 s) − e^(−k1 s))/(k1 − k2);
    # equal rates: k² s e^(−ks)
    if k1 == k2:
        return k1 * k1 * s * math.exp(-k1 * s)
    return k1 * k2 * (math.exp(-k2 * s) - math.exp(-k1 * s)) / (k1 - k2)


def root(fun, target, k_min):
    hi = 1.0 / k_min
    while fun(hi) > target:
        hi *= 2
    return optimize.brentq(lambda x: fun(x) - target, 0.0, hi, xtol=XTOL, rtol=1e-15)


def window_by_quadrature(weight, share, k_min):
    # s* with ∫_0^s* w = share: scipy.integrate.quad inside scipy.optimize.brentq
    def mass(s):
        return integrate.quad(weight, 0.0, s, epsabs=1e-14, epsrel=1e-13, limit=200)[0]
    hi = 1.0 / k_min
    while mass(hi) < share:
        hi *= 2
    return optimize.brentq(lambda s: mass(s) - share, 0.0, hi, xtol=XTOL, rtol=1e-15)


# ----------------------------------------------------------------- given rates

@pytest.mark.parametrize("p", [0.5, 0.9, 0.95, 0.99])
@pytest.mark.parametrize("k", [0.01, 0.05, 1.3])
def test_one_pool_is_minus_log_one_minus_p_over_k(p, k):
    r = eq.equilibration_time(rates=k, fraction=p)
    # formula by hand: t = −ln(1 − p)/k
    assert r.estimate == pytest.approx(-math.log(1 - p) / k, rel=1e-14)
    assert r.method == "given" and math.isnan(r.lower) and math.isnan(r.upper)
    assert r.lower_status == r.upper_status == "not_available"


def test_95_percent_takes_about_4_32_half_lives():
    t_half = 12.0
    r = eq.equilibration_time(rates=math.log(2) / t_half)
    # reference notes (facts of the trade): ln 20 / ln 2 = 4.32 half-lives to 95 %
    assert r.estimate / t_half == pytest.approx(math.log(20) / math.log(2), rel=1e-13)
    assert round(r.estimate / t_half, 2) == 4.32


@pytest.mark.parametrize("k, f", [([0.3, 0.03], [0.6, 0.4]),
                                  ([0.9, 0.12, 0.01], [0.2, 0.5, 0.3]),
                                  ([0.2, 0.19999], [0.5, 0.5])])
@pytest.mark.parametrize("p", [0.5, 0.95, 0.999])
def test_several_pools_match_brentq_on_the_hand_written_response(k, f, p):
    r = eq.equilibration_time(rates=k, fractions=f, fraction=p)
    # scipy.optimize.brentq on Σ f e^(−kτ) = 1 − p written out above
    expected = root(lambda x: hand_parallel(x, k, f), 1 - p, min(k))
    assert r.estimate == pytest.approx(expected, rel=1e-10)


@pytest.mark.parametrize("k1, k2", [(0.7, 0.2), (0.2, 0.7), (0.3, 0.3), (0.3, 0.3000001)])
@pytest.mark.parametrize("p", [0.5, 0.95])
def test_chain_matches_brentq_on_the_hand_written_response(k1, k2, p):
    r = eq.equilibration_time(rates=[k1, k2], structure="chain", fraction=p)
    # scipy.optimize.brentq on the chain's response written out above (equal rates: limit)
    expected = root(lambda x: hand_chain(x, k1, k2), 1 - p, min(k1, k2))
    assert r.estimate == pytest.approx(expected, rel=1e-9)


def test_growth_adds_the_growth_rate_to_every_pool():
    # one pool: −ln(1 − p)/(k + k_g) by hand (incorporation rate, Hesslein et al. 1993)
    r = eq.equilibration_time(rates=0.04, growth_rate=0.01)
    assert r.estimate == pytest.approx(-math.log(0.05) / 0.05, rel=1e-14)
    assert "growth rate" in r.source
    # two pools: brentq on Σ f e^(−(k + k_g)τ), written out
    k, f, kg = [0.3, 0.02], [0.7, 0.3], 0.015
    r2 = eq.equilibration_time(rates=k, fractions=f, growth_rate=kg, fraction=0.9)
    expected = root(lambda x: hand_parallel(x, [v + kg for v in k], f), 0.1, 0.02 + kg)
    assert r2.estimate == pytest.approx(expected, rel=1e-10)
    # a shrinking animal: a negative growth rate is fine while k + k_g > 0
    r3 = eq.equilibration_time(rates=0.05, growth_rate=-0.01)
    assert r3.estimate == pytest.approx(-math.log(0.05) / 0.04, rel=1e-14)


# ----------------------------------------------------------------- integration windows

@pytest.mark.parametrize("k, f", [([0.08], [1.0]), ([0.3, 0.03], [0.6, 0.4]),
                                  ([0.9, 0.12, 0.01], [0.2, 0.5, 0.3])])
@pytest.mark.parametrize("share", [0.25, 0.5, 0.9])
def test_window_equals_numerical_integration_of_the_parallel_weight(k, f, share):
    r = eq.integration_window(rates=k, fractions=f if len(k) > 1 else None, share=share)
    # scipy.integrate.quad of w(s) = Σ f k e^(−ks) (written out) inside brentq
    expected = window_by_quadrature(lambda s: hand_weight_parallel(s, k, f), share, min(k))
    assert r.estimate == pytest.approx(expected, rel=1e-8)
    assert r.quantity == "integration_window" and r.fraction == share


@pytest.mark.parametrize("k1, k2", [(0.7, 0.2), (0.05, 0.4), (0.25, 0.25)])
@pytest.mark.parametrize("share", [0.1, 0.5, 0.95])
def test_window_equals_numerical_integration_of_the_chain_weight(k1, k2, share):
    r = eq.integration_window(rates=[k1, k2], structure="chain", share=share)
    # quad of the convolution of two exponentials (written out; equal rates: k² s e^(−ks))
    expected = window_by_quadrature(lambda s: hand_weight_chain(s, k1, k2), share,
                                    min(k1, k2))
    assert r.estimate == pytest.approx(expected, rel=1e-8)


def test_window_with_growth_uses_incorporation_rates():
    k, f, kg = [0.2, 0.01], [0.5, 0.5], 0.02
    r = eq.integration_window(rates=k, fractions=f, growth_rate=kg, share=0.5)
    # quad of Σ f (k + k_g) e^(−(k + k_g)s), written out
    kappa = [v + kg for v in k]
    expected = window_by_quadrature(lambda s: hand_weight_parallel(s, kappa, f), 0.5,
                                    min(kappa))
    assert r.estimate == pytest.approx(expected, rel=1e-8)


def test_one_pool_half_window_is_the_half_life():
    # by hand: ∫_0^s k e^(−ks) = 1 − e^(−ks) = 1/2 at s = ln 2/k
    assert eq.integration_window(rates=0.1).estimate == pytest.approx(math.log(2) / 0.1,
                                                                      rel=1e-14)


@pytest.mark.parametrize("kw, hand", [
    (dict(rates=[0.3, 0.03], fractions=[0.6, 0.4]),
     lambda s: hand_weight_parallel(s, [0.3, 0.03], [0.6, 0.4])),
    (dict(rates=[0.7, 0.2], structure="chain"), lambda s: hand_weight_chain(s, 0.7, 0.2)),
    (dict(rates=[0.3, 0.3], structure="chain"), lambda s: hand_weight_chain(s, 0.3, 0.3)),
    (dict(rates=0.05, growth_rate=0.01), lambda s: hand_weight_parallel(s, [0.06], [1.0])),
])
def test_window_weight_matches_the_hand_formula_and_integrates_to_one(kw, hand):
    s = np.array([-1.0, 0.0, 0.5, 3.0, 20.0, 200.0])
    w = eq.window_weight(s, **kw)
    # formulas written out above; zero before sampling's past begins (s < 0)
    expected = np.array([0.0 if x < 0 else hand(x) for x in s])
    np.testing.assert_allclose(w, expected, rtol=1e-12, atol=1e-300)
    # scipy.integrate.quad: a weight integrates to 1 over s ≥ 0
    total = integrate.quad(lambda x: float(eq.window_weight(x, **kw)[0]), 0, np.inf,
                           epsabs=1e-13)[0]
    assert total == pytest.approx(1.0, abs=1e-9)


# ----------------------------------------------------------------- delta method

def test_delta_interval_of_one_pool_by_hand():
    k, se = 0.05, 0.004
    r = eq.equilibration_time(rates=k, stderr={"k1": se}, level=0.9)
    # by hand: t = c/k, d ln t = −d ln k, so t·exp(±z se/k) with z from scipy.stats.norm
    z = stats.norm.ppf(0.95)
    t = -math.log(0.05) / k
    assert r.lower == pytest.approx(t * math.exp(-z * se / k), rel=1e-12)
    assert r.upper == pytest.approx(t * math.exp(z * se / k), rel=1e-12)
    assert r.method == "delta (log scale)" and r.lower_status == r.upper_status == "ok"


@pytest.mark.parametrize("kw, se, hand", [
    (dict(rates=[0.3, 0.03], fractions=[0.6, 0.4]), {"k1": 0.02, "k2": 0.004, "f1": 0.05},
     lambda th: root(lambda x: hand_parallel(x, th[:2], [th[2], 1 - th[2]]), 0.05,
                     min(th[:2]))),
    (dict(rates=[0.7, 0.2], structure="chain"), {"k1": 0.05, "k2": 0.02},
     lambda th: root(lambda x: hand_chain(x, th[0], th[1]), 0.05, min(th[:2]))),
    (dict(rates=[0.3, 0.03], fractions=[0.6, 0.4], growth_rate=0.01),
     {"k2": 0.004, "k_growth": 0.003},
     lambda th: root(lambda x: hand_parallel(x, [th[0] + th[3], th[1] + th[3]],
                                             [th[2], 1 - th[2]]), 0.05, th[1] + th[3])),
])
def test_delta_interval_matches_central_differences_of_the_hand_root(kw, se, hand):
    r = eq.equilibration_time(fraction=0.95, stderr=se, **kw)
    # θ = (k1, k2, f1 or unused, k_g); gradient by central differences of the brentq root
    theta = list(kw["rates"]) + [kw.get("fractions", [0.0])[0], kw.get("growth_rate", 0.0)]
    names = ["k1", "k2", "f1", "k_growth"]
    var = 0.0
    for j, nm in enumerate(names):
        if nm not in se:
            continue
        h = 1e-6 * theta[j]
        up, dn = list(theta), list(theta)
        up[j] += h
        dn[j] -= h
        var += ((hand(up) - hand(dn)) / (2 * h) * se[nm]) ** 2
    t = hand(theta)
    z = stats.norm.ppf(0.975)
    assert r.estimate == pytest.approx(t, rel=1e-10)
    assert r.upper == pytest.approx(t * math.exp(z * math.sqrt(var) / t), rel=1e-6)
    assert r.lower == pytest.approx(t * math.exp(-z * math.sqrt(var) / t), rel=1e-6)


# ----------------------------------------------------------------- from a fit

def _series(seed, pools):
    # an invented, seeded diet-switch series (δ from −25 to −12 ‰)
    rng = np.random.default_rng(seed)
    t = np.array([0, 1, 2, 4, 7, 10, 14, 21, 28, 42, 56, 70.0])
    if pools == 1:
        rem = np.exp(-0.08 * t)
    else:
        rem = 0.6 * np.exp(-0.3 * t) + 0.4 * np.exp(-0.04 * t)
    return t, -12.0 + (-25.0 + 12.0) * rem + rng.normal(0, 0.15, t.size)


@pytest.fixture(scope="module")
def fits():
    out = {}
    for pools in (1, 2):
        t, y = _series(11 + pools, pools)
        out[pools] = iso.TurnoverModel(pools=pools).fit(t, y, label=f"invented {pools}")
    return out


@pytest.mark.parametrize("pools", [1, 2])
@pytest.mark.parametrize("method", ["profile", "asymptotic"])
def test_fit_source_uses_the_fits_own_time_to_interval(fits, pools, method):
    fit = fits[pools]
    r = eq.equilibration_time(fit, 0.95, 0.95, method=method)
    row = fit.time_to(0.95, 0.95, method).iloc[0]
    # the fit's own derived-quantity interval (TurnoverFit.time_to)
    assert (r.estimate, r.lower, r.upper) == (row["estimate"], row["lower"], row["upper"])
    assert r.method == row["method"] and r.lower_status == row["lower_status"]
    assert r.lower < r.estimate < r.upper
    assert r.time_unit == fit.time_unit and "invented" in r.source
    # and the estimate is the hand root at the fitted values (brentq on Σ f e^(−kτ))
    v = fit.values
    k = [v[f"k{i + 1}"] for i in range(pools)]
    f = [v[f"f{i + 1}"] for i in range(pools)] if pools > 1 else [1.0]
    assert r.estimate == pytest.approx(root(lambda x: hand_parallel(x, k, f), 0.05, min(k)),
                                       rel=1e-9)


@pytest.mark.parametrize("pools", [1, 2])
def test_fit_window_integrates_the_fitted_weight(fits, pools):
    fit = fits[pools]
    r = eq.integration_window(fit, share=0.5, method="asymptotic")
    v = fit.values
    k = [v[f"k{i + 1}"] for i in range(pools)]
    f = [v[f"f{i + 1}"] for i in range(pools)] if pools > 1 else [1.0]
    # quad of the fitted weight inside brentq
    expected = window_by_quadrature(lambda s: hand_weight_parallel(s, k, f), 0.5, min(k))
    assert r.estimate == pytest.approx(expected, rel=1e-8)
    assert r.lower < r.estimate < r.upper
    # the interval is the fit's own interval of the time to 50 %
    row = fit.time_to(0.5, 0.95, "asymptotic").iloc[0]
    assert (r.lower, r.upper) == (row["lower"], row["upper"])


def test_fit_with_a_growth_curve_has_an_equilibration_time_but_no_window():
    class Curve:  # an invented growth curve: W = 10 e^(0.01 t)
        def predict(self, t):
            return 10 * np.exp(0.01 * np.asarray(t, dtype=float))

    rng = np.random.default_rng(5)
    t = np.array([0, 2, 4, 7, 10, 14, 21, 28, 42, 56.0])
    y = -12 + (-25 + 12) * np.exp(-0.11 * t) + rng.normal(0, 0.1, t.size)
    fit = iso.TurnoverModel(growth=Curve()).fit(t, y)
    r = eq.equilibration_time(fit, method="asymptotic")
    # with a growth curve 1 − F = e^(−kτ) W(0)/W(τ): −ln(0.05)/(k + 0.01) by hand
    assert r.estimate == pytest.approx(-math.log(0.05) / (fit.values["k1"] + 0.01), rel=1e-9)
    with pytest.raises(DataError, match="growth curve has no single integration window"):
        eq.integration_window(fit)


# ----------------------------------------------------------------- from a population

LOG_HL = np.log([12.0, 15.0, 9.5, 20.0, 14.0, 11.0])
SE = np.array([0.1, 0.2, 0.15, 0.2, 0.1, 0.12])


@pytest.mark.parametrize("p", [0.5, 0.95])
def test_population_prediction_interval_by_hand(p):
    re_ = iso.random_effects(LOG_HL, SE)
    r = eq.equilibration_time(re_, p, 0.9, quantity="log_half_life")
    # Higgins, Thompson & Spiegelhalter (2009): μ ± t_{k−2} √(τ² + SE²) (scipy.stats.t),
    # mapped through t_p = t½ ln(1/(1 − p))/ln 2 (by hand)
    c = -math.log(1 - p) / math.log(2)
    half = stats.t.ppf(0.95, len(LOG_HL) - 2) * math.sqrt(re_.tau2 + re_.stderr ** 2)
    assert r.estimate == pytest.approx(math.exp(re_.estimate) * c, rel=1e-12)
    assert r.lower == pytest.approx(math.exp(re_.estimate - half) * c, rel=1e-12)
    assert r.upper == pytest.approx(math.exp(re_.estimate + half) * c, rel=1e-12)
    assert r.method == "prediction" and "new animal" in r.source


def test_population_interval_widens_with_tau2():
    widths = []
    for tau2 in (0.0, 0.02, 0.1, 0.4):
        re_ = iso.random_effects(LOG_HL, SE, tau2=tau2)
        r = eq.equilibration_time(re_, quantity="log_half_life")
        widths.append(math.log(r.upper / r.lower))
        # the width on the log scale is 2 t_{k−2} √(τ² + SE²) (by hand)
        half = stats.t.ppf(0.975, len(LOG_HL) - 2) * math.sqrt(tau2 + re_.stderr ** 2)
        assert widths[-1] == pytest.approx(2 * half, rel=1e-12)
    assert all(a < b for a, b in zip(widths, widths[1:]))


def test_population_estimate_of_half_lives_and_of_rates():
    hl = np.exp(LOG_HL)
    z = stats.norm.ppf(0.975)
    pe = iso.population_estimate(hl, hl * np.exp(-z * SE), hl * np.exp(z * SE))
    r = eq.equilibration_time(pe)
    c = math.log(20) / math.log(2)
    # the population's own prediction interval of a new animal's half-life, times ln20/ln2
    assert r.estimate == pytest.approx(pe.estimate * c, rel=1e-12)
    assert r.lower == pytest.approx(pe.pi_lower * c, rel=1e-12)
    assert r.upper == pytest.approx(pe.pi_upper * c, rel=1e-12)
    # the same animals given as rates k = ln 2/t½: the bounds swap and agree (by hand)
    k = math.log(2) / hl
    pk = iso.population_estimate(k, k * np.exp(-z * SE), k * np.exp(z * SE), quantity="k1")
    rk = eq.equilibration_time(pk)
    assert (rk.estimate, rk.lower, rk.upper) == pytest.approx(
        (r.estimate, r.lower, r.upper), rel=1e-10)
    # a window from the population: one pool, the half-life at 50 % (by hand)
    w = eq.integration_window(pe, share=0.5)
    assert w.estimate == pytest.approx(pe.estimate, rel=1e-12)


# ----------------------------------------------------------------- result object

def test_table_and_summary_carry_the_columns_and_the_caution():
    r = eq.equilibration_time(rates=0.05, stderr={"k1": 0.005}, time_unit="d")
    t = r.table()
    assert list(t.columns) == ["quantity", "fraction", *INTERVAL_COLUMNS, "time_unit",
                               "source"]
    assert t["estimate"].iloc[0] == r.estimate
    s = r.summary()
    assert eq.CAUTION in s and "days" in s
    assert "animal-care authority" in eq.CAUTION and "ethics board" in eq.CAUTION
    assert "support" in eq.CAUTION and "do not replace" in eq.CAUTION
    assert str(r) == s
    with pytest.raises(dataclasses.FrozenInstanceError):
        r.estimate = 1.0  # frozen


def test_caution_is_the_projects_text():
    from isoturnover.analysis import CAUTION

    # one text of the caution for results and plans (isoturnover.analysis.CAUTION)
    assert eq.CAUTION == CAUTION


# ----------------------------------------------------------------- errors

@pytest.mark.parametrize("kw, match", [
    (dict(rates=0.05, fraction=1.0), "'fraction' must be between 0 and 1"),
    (dict(rates=0.05, fraction="x"), "'fraction' must be a number"),
    (dict(rates=0.05, level=95), "'level' must be between 0 and 1"),
    (dict(rates=[0.05, -1], fractions=[0.5, 0.5]), r"'rates'\[1\] must be a finite number"),
    (dict(rates=[0.05, 0.1]), "'fractions' is needed with 2 parallel pools"),
    (dict(rates=[0.05, 0.1], fractions=[0.5, 0.6]), "'fractions' must sum to 1"),
    (dict(rates=[0.05, 0.1], fractions=[0.5]), "one fraction per rate"),
    (dict(rates=[0.1, 0.2, 0.3], structure="chain"), "2 rates"),
    (dict(rates=[0.1, 0.2], structure="chain", fractions=[0.5, 0.5]),
     "'fractions' does not apply"),
    (dict(rates=[0.1, 0.2], structure="chain", growth_rate=0.01),
     "'growth_rate' applies to structure='parallel' only"),
    (dict(rates=0.05, growth_rate=-0.06), "not positive"),
    (dict(rates=0.05, structure="tree"), "'structure' must be one of"),
    (dict(rates=[0.1] * 5, fractions=[0.2] * 5), "at most 4"),
    (dict(rates=0.05, stderr={"k2": 0.1}), "unknown parameter 'k2'"),
    (dict(rates=[0.1, 0.2], fractions=[0.5, 0.5], stderr={"f2": 0.1}),
     "the last fraction is 1 minus the others"),
    (dict(rates=0.05, stderr={"k1": -1}), r"'stderr\['k1'\]' must be a finite number >= 0"),
    (dict(rates=0.05, stderr=[0.1]), "'stderr' must be a mapping"),
    (dict(), "'source' or 'rates' is needed"),
    (dict(rates=0.05, quantity="rate"), "apply to a population source only"),
])
def test_bad_arguments_raise_data_errors_naming_them(kw, match):
    with pytest.raises(DataError, match=match):
        eq.equilibration_time(**kw)


def test_bad_sources_raise(fits):
    with pytest.raises(DataError, match="'source' must be a TurnoverFit"):
        eq.equilibration_time(pd.DataFrame({"k": [1]}))
    with pytest.raises(DataError, match="'rates' applies to given rates only"):
        eq.equilibration_time(fits[1], rates=0.1)
    with pytest.raises(DataError, match="'structure' applies to given rates only"):
        eq.integration_window(fits[1], structure="chain")
    re_ = iso.random_effects(LOG_HL, SE)
    with pytest.raises(DataError, match="'quantity' is needed with a RandomEffects"):
        eq.equilibration_time(re_)
    with pytest.raises(DataError, match="'quantity' must be one of"):
        eq.equilibration_time(re_, quantity="mrt")
    hl = np.exp(LOG_HL)
    pe = iso.population_estimate(hl, hl * 0.8, hl * 1.25, quantity="d15N")
    with pytest.raises(DataError, match="population estimate is of 'd15N'"):
        eq.equilibration_time(pe)
    small = iso.random_effects(LOG_HL[:2], SE[:2])
    with pytest.raises(DataError, match="needs at least 3"):
        eq.equilibration_time(small, quantity="log_half_life")


def test_inputs_are_not_mutated():
    rates = np.array([0.3, 0.03])
    fr = [0.6, 0.4]
    se = {"k1": 0.01}
    eq.equilibration_time(rates=rates, fractions=fr, stderr=se)
    eq.window_weight([1.0, 2.0], rates, fr)
    assert rates.tolist() == [0.3, 0.03] and fr == [0.6, 0.4] and se == {"k1": 0.01}
