"""Edge inputs that must end in a correct result or a clear error (issue 14, item 14).

Constant body masses given as a growth curve, standard deviations scaled far from 1 in a
relative-weight fit, and series whose values do not change at all. Every series is invented
for the tests (seeded noise or written out here); the expected values come from formulas
worked by hand, named beside each check.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest

import isoturnover as iso
from isoturnover.errors import DataError, DataWarning, FitError

# sampling days of an invented diet-switch experiment
T11 = np.array([0, 1, 2, 4, 7, 10, 14, 21, 28, 42, 56.0])
RNG = np.random.default_rng(20240514)
NOISE = RNG.normal(0.0, 0.15, T11.size)
# one pool: δ(t) = δ_eq + (δ0 − δ_eq) exp(−k t), δ0 = −20 ‰, δ_eq = −12 ‰, k = 0.1 /d
Y1 = -12.0 + (-20.0 + 12.0) * np.exp(-0.1 * T11) + NOISE
# two pools: f1 = 0.4 at 0.5 /d, f2 = 0.6 at 0.04 /d (invented)
Y2 = -12.0 - 8.0 * (0.4 * np.exp(-0.5 * T11) + 0.6 * np.exp(-0.04 * T11)) + NOISE
SD = np.linspace(0.1, 0.3, T11.size)
T_MASS = np.array([0, 2, 5, 10, 20.0])


def _quiet_fit(model, *args, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", iso.IsoturnoverWarning)
        return model.fit(*args, **kw)


# -- 1. a growth fit to constant masses -----------------------------------------------------
@pytest.mark.parametrize("curve", ["exponential", "linear"])
def test_constant_masses_fit_exactly_without_a_covariance(curve):
    with pytest.warns(iso.IdentifiabilityWarning, match="passes through every mass exactly"):
        g = iso.fit_growth(T_MASS, [5.0] * 5, curve)
    # by hand: ln W (or W) constant ⇒ rate 0 (k or b) and W0 = 5 with zero residuals
    assert g.params["W0"].value == pytest.approx(5.0, rel=1e-12)
    assert abs(g.values[1]) < 1e-12
    assert g.rss == 0.0
    # zero residuals estimate no scatter: the covariance is unavailable, not zero
    assert np.isnan(g.covariance.to_numpy()).all()
    assert np.isnan(g.stderr).all()
    ci = g.conf_int()
    assert set(ci["lower_status"]) == {"failed"} and ci["lower"].isna().all()


def test_constant_masses_as_growth_of_a_turnover_fit():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", iso.IsoturnoverWarning)
        g = iso.fit_growth(T_MASS, [5.0] * 5, "exponential")
    t = np.array([0, 1, 2, 4, 7, 10, 14, 20.0])
    y = Y1[:8]
    with pytest.raises(FitError, match="growth fit has no covariance"):
        iso.TurnoverModel(1, growth=g).fit(t, y)
    # used as known, a curve with rate 0 dilutes nothing: k_g(t) = d ln W/dt = 0, so the
    # estimates are those of the fit without growth (by hand)
    known = _quiet_fit(iso.TurnoverModel(1, growth=g, propagate_growth=False), t, y)
    plain = _quiet_fit(iso.TurnoverModel(1), t, y)
    for nm in ("delta0", "delta_eq", "k1"):
        assert known.params[nm].value == pytest.approx(plain.params[nm].value, rel=1e-7)


@pytest.mark.parametrize("curve", ["logistic", "gompertz", "von_bertalanffy", "richards"])
def test_constant_masses_refused_for_curves_with_an_asymptote(curve):
    with pytest.raises(DataError, match=r"'mass': all 5 masses are equal \(5\)"):
        iso.fit_growth(T_MASS, [5.0] * 5, curve)


# -- 2. σ scaled far from 1 in a relative-weight fit ------------------------------------------
@pytest.mark.parametrize("scale", [1e-300, 1e300])
@pytest.mark.parametrize("case", ["one_pool", "two_pools", "diet"])
def test_sigma_scale_does_not_change_a_relative_weight_fit(scale, case):
    if case == "diet":
        # a diet history sends the fit through the general multi-start path
        kw = {"diet": iso.DietHistory.step(-25.0, -15.0, at=0.0)}
        model, y = iso.TurnoverModel(1, **kw), Y1
    else:
        model = iso.TurnoverModel(1 if case == "one_pool" else 2)
        y = Y1 if case == "one_pool" else Y2
    ref = _quiet_fit(model, T11, y, SD)
    with pytest.warns(DataWarning, match="'sigma'.*divided by their geometric mean"):
        scaled = model.fit(T11, y, SD * scale)
    # by hand: rss(θ; cσ) = rss(θ; σ)/c², so the minimiser is the same for any c > 0, and
    # s²(JᵀJ)⁻¹ does not depend on c either
    for nm, p in ref.params.items():
        assert scaled.params[nm].value == pytest.approx(p.value, rel=1e-9, abs=1e-12)
        if p.stderr is not None and math.isfinite(p.stderr):
            assert scaled.params[nm].stderr == pytest.approx(p.stderr, rel=1e-6)


def test_sigma_scale_keeps_profile_intervals():
    model = iso.TurnoverModel(1)
    ref = _quiet_fit(model, T11, Y1, SD).half_lives()
    scaled = _quiet_fit(model, T11, Y1, SD * 1e-300).half_lives()
    # the profile statistic (rss − rss_min)/s² is invariant to a common factor (by hand)
    for col in ("half_life", "lower", "upper"):
        assert scaled[col].iloc[0] == pytest.approx(ref[col].iloc[0], rel=1e-6)


def test_sigma_scale_compares_candidates_as_before():
    ref = [_quiet_fit(iso.TurnoverModel(p), T11, Y2, SD) for p in (1, 2)]
    big = [_quiet_fit(iso.TurnoverModel(p), T11, Y2, SD * 1e300) for p in (1, 2)]
    # ΔAICc between the candidates is invariant to a common factor in σ (by hand)
    assert big[1].aicc - big[0].aicc == pytest.approx(ref[1].aicc - ref[0].aicc, rel=1e-6)


def test_absolute_sigma_beyond_double_precision_is_refused():
    with pytest.raises(DataError, match="'sigma'.*absolute_sigma=True"):
        iso.TurnoverModel(1).fit(T11, Y1, SD * 1e-300, absolute_sigma=True)


def test_sigma_spread_beyond_double_precision_is_refused():
    sd = SD.copy()
    sd[0] = 1e-200
    sd[-1] = 1e200
    with pytest.raises(DataError, match="'sigma'.*span"):
        iso.TurnoverModel(1).fit(T11, Y1, sd)


def test_subnormal_sigma_is_refused():
    # 1e-310 is below the smallest normal double (2.2e-308): its ratio to the others is not
    # exact, so the relative weights cannot be formed faithfully
    with pytest.raises(DataError, match="'sigma' holds values below .*subnormal"):
        iso.TurnoverModel(1).fit(T11, Y1, SD * 1e-309)


@pytest.mark.parametrize("scale", [1e-300, 1e300])
def test_growth_sigma_scale_does_not_change_the_growth_fit(scale):
    # invented logistic masses: W = 40 / (1 + 3 exp(−0.08 t)), with ±2 % scatter
    t = np.array([0, 5, 10, 15, 20, 30, 40, 50, 60, 80.0])
    wiggle = np.array([.01, -.02, .015, 0, -.01, .02, -.005, .01, -.015, .005])
    m = 40 / (1 + 3 * np.exp(-0.08 * t)) * (1 + wiggle)
    s = 0.1 * m
    ref = iso.fit_growth(t, m, "logistic", sigma=s)
    with pytest.warns(DataWarning, match="'sigma'.*divided by their geometric mean"):
        scaled = iso.fit_growth(t, m, "logistic", sigma=s * scale)
    # weighted least squares with relative weights: a common factor changes nothing (by
    # hand). The solver stops on a relative change of the RSS (1e-15), so the estimates are
    # reproducible to about its square root: a factor 1e-40, which is not rescaled, already
    # moves them by 2e-9 (measured); hence 1e-8
    np.testing.assert_allclose(scaled.values, ref.values, rtol=1e-8)
    np.testing.assert_allclose(scaled.stderr, ref.stderr, rtol=1e-6)


# -- 3. a series whose values do not change -------------------------------------------------
@pytest.mark.parametrize("level", [0.0, -20.0, 7.5])
@pytest.mark.parametrize("kind", ["step", "two_pools", "diet", "lag"])
def test_series_without_change_is_refused_whatever_its_level(level, kind):
    y = np.full(T11.size, level)
    if kind == "diet":
        model = iso.TurnoverModel(1, diet=iso.DietHistory.step(-25.0, -15.0, at=0.0))
    else:
        model = iso.TurnoverModel(2 if kind == "two_pools" else 1, lag=kind == "lag")
    with pytest.raises(FitError, match=rf"values do not change: all 11 equal {level:g}"):
        model.fit(T11, y)


def test_series_without_change_in_a_frame_is_refused():
    frame = pd.DataFrame({"subject": "goat1", "tissue": "plasma", "isotope": "d13C",
                          "time": T11, "value": np.zeros(T11.size)})
    with pytest.raises(FitError, match="values do not change"):
        iso.TurnoverModel(1).fit(frame)


def test_small_change_near_zero_still_fits():
    # a change of 0.05 ‰ around 0 (invented) is a change: it must fit, not be refused
    y = 0.05 * (1 - np.exp(-0.1 * T11)) + NOISE * 0.01
    fit = _quiet_fit(iso.TurnoverModel(1), T11, y)
    # by hand: δ_eq − δ0 ≈ 0.05 ‰ and k ≈ 0.1 /d within the invented noise (sd 0.0015 ‰)
    assert fit.params["delta_eq"].value - fit.params["delta0"].value == pytest.approx(
        0.05, abs=0.01)
    assert fit.params["k1"].value == pytest.approx(0.1, rel=0.3)
