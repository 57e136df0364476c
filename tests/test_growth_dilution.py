"""Growth dilution separated from catabolic turnover (Hesslein, Hallard & Ramlal 1993;
Fry & Arnold 1982): hand-worked values, an independent ODE solution for non-exponential
growth, and seeded recovery of catabolic rates and growth shares."""

import math
import warnings

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import isoturnover as iso
from isoturnover.growth import GrowthCurve
from isoturnover.kinetics import TurnoverKinetics

LN2 = math.log(2.0)
T = np.array([0, 2, 4, 7, 10, 14, 21, 28, 35, 42, 56, 70.0])
TM = np.arange(0, 71, 7.0)


def _exp_series(kg, kd, t=T, d0=-25.0, deq=-12.0):
    # Hesslein et al. (1993): δ(t) = δ_eq + (δ0 − δ_eq) exp(−(k_g + k_d) t)
    return deq + (d0 - deq) * np.exp(-(kg + kd) * t)


def test_hesslein_hand_worked_example():
    # k_g = 0.02/d, k_d = 0.03/d: incorporation half-life ln 2/0.05 = 13.86 d, growth share
    # k_g/(k_g + k_d) = 0.40, Fry-Arnold exponent c = −(k_g + k_d)/k_g = −2.5 (by hand)
    kg, kd = 0.02, 0.03
    y = _exp_series(kg, kd) + 1e-4 * np.sin(T)  # tiny deterministic scatter
    w = 10.0 * np.exp(kg * TM) * np.exp(1e-4 * np.cos(TM))
    f = iso.TurnoverModel(1, growth="exponential").fit(T, y, masses=(TM, w), warn=False)
    assert f.values["k1"] == pytest.approx(kd, rel=1e-3)
    assert f.values["k_growth"] == pytest.approx(kg, rel=1e-3)
    inc = f.incorporation_half_lives(method="asymptotic")
    assert inc["half_life"].iloc[0] == pytest.approx(13.8629, rel=1e-3)
    share = f.growth_share(method="asymptotic").set_index("quantity")
    assert share.loc["pool_1", "estimate"] == pytest.approx(0.40, rel=1e-3)
    c = f.fry_arnold_exponent(method="asymptotic")["estimate"].iloc[0]
    assert c == pytest.approx(-2.5, rel=1e-3)
    # the tissue-level share up to t (DESIGN §2): the part of the change carried by the
    # growth flux, k_g/(k_g + k_d) = 0.40 at every t for one pool and exponential growth
    # (Hesslein et al. 1993, by hand)
    assert share.loc["tissue", "estimate"] == pytest.approx(0.40, rel=1e-3)
    # catabolic half-life ln 2/k_d, and the summary names the rates catabolic
    assert f.half_lives(method="asymptotic")["half_life"].iloc[0] == pytest.approx(
        LN2 / kd, rel=1e-3)
    assert "catabolic rates" in str(f.summary(method="asymptotic"))


def test_fry_arnold_power_form_matches_exponential_fit():
    # δ = δ_eq + (δ0 − δ_eq)(W/W0)^c with W = W0 e^{k_g t} is the same curve as the
    # Hesslein form with c = −(k_g + k_d)/k_g (Fry & Arnold 1982; algebra by hand)
    kg, kd = 0.03, 0.01
    c = -(kg + kd) / kg
    w = 2.0 * np.exp(kg * T)
    power = -12.0 + (-25.0 + 12.0) * (w / w[0]) ** c
    np.testing.assert_allclose(power, _exp_series(kg, kd), rtol=1e-12)
    f = iso.TurnoverModel(1, growth="exponential").fit(T, power + 1e-4 * np.sin(T),
                                                       masses=(T, w * np.exp(1e-4 * np.cos(T))),
                                                       warn=False)
    assert f.fry_arnold_exponent(method="asymptotic")["estimate"].iloc[0] == pytest.approx(
        c, rel=2e-3)


def _ode_reference(curve, k, f, L, switches, t):
    """dδ_i/dt = (k_i + d ln W/dt)(δ_in − δ_i), integrated between switches (scipy)."""
    k = np.asarray(k, dtype=float)
    f = np.asarray(f, dtype=float)
    # from equilibrium with the first diet at the first switch, switch by switch
    knots = [switches[0]] + [s for s in switches[1:] if s < t.max()] + [t.max()]
    state = np.full(k.size, L[0])
    out = np.empty(t.size)

    def level_at(x):
        return L[int(np.searchsorted(switches, x, side="right"))]

    for a, b in zip(knots[:-1], knots[1:]):
        inside = (t > a) & (t <= b)
        lev = level_at(0.5 * (a + b))

        def rhs(x, d, lev=lev):
            return (k + curve.rate(x)) * (lev - d)

        sol = solve_ivp(rhs, (a, b), state, method="DOP853", rtol=1e-11, atol=1e-12,
                        t_eval=np.sort(t[inside]) if inside.any() else None, dense_output=False)
        if inside.any():
            out[np.flatnonzero(inside)[np.argsort(t[inside])]] = (f @ sol.y)
        state = solve_ivp(rhs, (a, b), state, method="DOP853", rtol=1e-11,
                          atol=1e-12).y[:, -1]
    return out


@pytest.mark.parametrize("curve", [
    GrowthCurve("logistic", Winf=40.0, k=0.06, ti=30.0),
    GrowthCurve("von_bertalanffy", Winf=60.0, k=0.02, W0=8.0),
], ids=["logistic", "von_bertalanffy"])
@pytest.mark.parametrize("pools", [1, 2])
def test_growth_curve_predictions_equal_ode(curve, pools):
    # independent check: scipy's solve_ivp of the pool equations with g(t) = d ln W/dt
    diet = iso.DietHistory(-26.0, changes=[(0.0, -12.0), (40.0, -26.0)])
    kin = TurnoverKinetics(pools, diet=diet, growth=curve)
    k = [0.08] if pools == 1 else [0.3, 0.02]
    f = [1.0] if pools == 1 else [0.4, 0.6]
    theta = np.r_[2.0, k, f]  # discrimination, rates, fractions
    t = np.array([1.0, 3, 7, 15, 25, 39, 41, 45, 55, 70, 90])
    y = kin.predict(t, theta)
    L = [-26.0 + 2.0, -12.0 + 2.0, -26.0 + 2.0]
    ref = _ode_reference(curve, k, f, L, [0.0, 40.0], t)
    np.testing.assert_allclose(y, ref, atol=1e-7)


def test_mass_coverage_warning_and_mass_loss_refused():
    kg, kd = 0.02, 0.03
    y = _exp_series(kg, kd) + 1e-3 * np.sin(T)
    tm = np.array([0, 7, 14, 21.0])  # masses stop at day 21, the samples run to day 70
    w = 10.0 * np.exp(kg * tm)
    w = w * (1 + 1e-3 * np.cos(tm))
    f = iso.TurnoverModel(1, growth="exponential").fit(T, y, masses=(tm, w), warn=False)
    assert "mass_coverage" in [n.code for n in f.warnings]
    with pytest.raises(ValueError, match="loses mass faster than the slowest pool"):
        TurnoverKinetics(1, growth=GrowthCurve("exponential", W0=10.0, k=-0.5)).predict(
            T, np.array([-25.0, -12.0, 0.03, 1.0]))
    with pytest.raises(ValueError, match="needs body masses"):
        iso.TurnoverModel(1, growth="exponential").fit(T, y)


@pytest.mark.slow
def test_seeded_recovery_of_catabolic_rate_and_growth_share():
    # 200 growing animals (σ 0.2 ‰ on δ, 3 % on mass): catabolic rate and growth share
    # inside their 95 % profile intervals in ≥ 90 %; without masses the incorporation rate
    # k_g + k_d is what is recovered, and the summary calls it an incorporation rate
    kg, kd = 0.02, 0.03
    rng = np.random.default_rng(1)
    hit_kd = hit_share = hit_inc = 0
    n = 200  # binomial sd of the coverage ≈ 1.7 %
    share_true = kg / (kg + kd)
    for _ in range(n):
        y = _exp_series(kg, kd) + rng.normal(0, 0.2, T.size)
        w = 10.0 * np.exp(kg * TM) * np.exp(rng.normal(0, 0.03, TM.size))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            f = iso.TurnoverModel(1, growth="exponential").fit(T, y, masses=(TM, w), warn=False)
            lo, hi = f.conf_int(params=["k1"]).iloc[0][["lower", "upper"]]
            hit_kd += lo <= kd <= hi
            s = f.growth_share().set_index("quantity").loc["pool_1"]
            hit_share += s["lower"] <= share_true <= s["upper"]
            g = iso.TurnoverModel(1).fit(T, y, warn=False)
            lo, hi = g.conf_int(params=["k1"]).iloc[0][["lower", "upper"]]
            hit_inc += lo <= kg + kd <= hi
    print(f"coverage: k_d {hit_kd / n:.2f}, growth share {hit_share / n:.2f}, "
          f"incorporation rate without masses {hit_inc / n:.2f}")
    assert hit_kd / n >= 0.90
    assert hit_share / n >= 0.90
    assert hit_inc / n >= 0.90
    assert "incorporation rates" in str(g.summary(method="asymptotic"))


def test_fit_power_dilution_recovers_the_exponent_per_sample_mass():
    # destructive design: every fish its own mass; δ = δ_eq + (δ0 − δ_eq)(W/W0)^c
    rng = np.random.default_rng(3)
    kg, kd = 0.03, 0.01
    t = np.repeat(np.array([0, 7, 14, 21, 28, 42, 56, 70.0]), 3)
    w = 2.0 * np.exp(kg * t) * np.exp(rng.normal(0, 0.05, t.size))
    c_true = -(kg + kd) / kg
    w0 = w.min()
    y = -12.0 + (-25.0 + 12.0) * (w / w0) ** c_true + rng.normal(0, 0.15, t.size)
    fit, tab = iso.fit_power_dilution(w, y)  # W0: the smallest fish
    assert fit.time_unit == "ln(W/W0)"
    r = tab.iloc[0]
    assert r["lower"] < c_true < r["upper"]
    assert r["estimate"] == pytest.approx(-fit.values["k1"])
    with pytest.raises(iso.DataError, match="'mass' must be > 0"):
        iso.fit_power_dilution(np.r_[w[:-1], 0.0], y)
    with pytest.raises(iso.DataError, match="at or above mass0"):
        iso.fit_power_dilution(w, y, mass0=10.0)


@pytest.fixture(scope="module")
def hesslein_fit():
    # the hand-worked example above: k_g = 0.02/d, k_d = 0.03/d, tiny deterministic scatter
    kg, kd = 0.02, 0.03
    y = _exp_series(kg, kd) + 1e-4 * np.sin(T)
    w = 10.0 * np.exp(kg * TM) * np.exp(1e-4 * np.cos(TM))
    return iso.TurnoverModel(1, growth="exponential").fit(T, y, masses=(TM, w), warn=False)


def test_mean_residence_times_catabolic_and_incorporation_by_hand(hesslein_fit):
    # one pool: MRT = ∫ e^{-k τ} dτ = 1/k (by hand), so 1/k_d = 33.3 d (catabolic) and
    # 1/(k_d + k_g) = 20 d (incorporation, growth and catabolic replacement together)
    f = hesslein_fit
    kd, kg = f.values["k1"], f.values["k_growth"]
    assert f.mean_residence_time("catabolic") == pytest.approx(1 / kd, rel=1e-12)
    assert f.mean_residence_time("incorporation") == pytest.approx(1 / (kd + kg), rel=1e-12)
    assert f.mean_residence_time() == f.mean_residence_time("incorporation")  # default
    assert f.mean_residence_time("catabolic") == pytest.approx(1 / 0.03, rel=2e-3)
    assert f.mean_residence_time("incorporation") == pytest.approx(20.0, rel=2e-3)


def test_mean_residence_times_in_table_summary_and_to_dict(hesslein_fit):
    f = hesslein_fit
    kd, kg = f.values["k1"], f.values["k_growth"]
    tab = f.table(method="profile").set_index("quantity")
    assert "mean_residence_time" not in tab.index  # each named for what it is
    cat = tab.loc["mean_residence_time_catabolic"]
    inc = tab.loc["mean_residence_time_incorporation"]
    assert cat["estimate"] == pytest.approx(1 / kd, rel=1e-12)
    assert inc["estimate"] == pytest.approx(1 / (kd + kg), rel=1e-12)
    assert cat["unit"] == inc["unit"] == "days"
    # the profile likelihood is invariant under the monotone map k_d -> 1/k_d, so the
    # catabolic MRT's profile bounds are the rate's bounds inverted (by hand)
    k = tab.loc["k1"]
    assert cat["method"] == "profile"
    assert cat["lower"] == pytest.approx(1 / k["upper"], rel=1e-4)
    assert cat["upper"] == pytest.approx(1 / k["lower"], rel=1e-4)
    row = f.mean_residence_time_interval(method="asymptotic", kind="catabolic").iloc[0]
    assert row["kind"] == "catabolic" and row["lower"] < 1 / kd < row["upper"]
    text = str(f.summary())
    assert f"mean residence time, catabolic (from k_d alone): {1 / kd:.4g}" in text
    assert f"mean residence time, incorporation (from k_d + k_g): {1 / (kd + kg):.4g}" in text
    d = f.to_dict()
    assert d["derived"] == {
        "mean_residence_time_incorporation": pytest.approx(1 / (kd + kg), rel=1e-12),
        "mean_residence_time_catabolic": pytest.approx(1 / kd, rel=1e-12)}
    assert iso.load_fit(f.to_json()).to_dict()["derived"] == d["derived"]


def test_mean_residence_time_without_growth_keeps_its_one_name():
    # no growth model: incorporation rates, one MRT = 1/k (by hand), named as before
    y = _exp_series(0.0, 0.05) + 1e-3 * np.sin(T)
    f = iso.TurnoverModel(1).fit(T, y, warn=False)
    tab = f.table(method="asymptotic").set_index("quantity")
    assert tab.loc["mean_residence_time", "estimate"] == pytest.approx(1 / f.values["k1"],
                                                                       rel=1e-12)
    assert not any(q.startswith("mean_residence_time_") for q in tab.index)
    assert f.to_dict()["derived"] == {"mean_residence_time": pytest.approx(1 / f.values["k1"],
                                                                           rel=1e-12)}
    assert f"mean residence time: {1 / f.values['k1']:.4g}" in str(f.summary(method="asymptotic"))


def test_growth_share_outputs_are_the_flux_share(hesslein_fit):
    f = hesslein_fit
    kd, kg = f.values["k1"], f.values["k_growth"]
    # one pool, exponential growth: the instantaneous share k_g/(k_g + k_d) at every time
    # after the switch (Hesslein et al. 1993, by hand), NaN at the switch
    curve = f.growth_share_curve(T)
    assert math.isnan(curve[0])
    np.testing.assert_allclose(curve[1:], kg / (kg + kd), rtol=1e-12)
    tab = f.growth_share(method="asymptotic").set_index("quantity")
    est = tab.loc["tissue", "estimate"]
    assert est == pytest.approx(kg / (kg + kd), rel=1e-10)
    # the summary's note says what the share is, with the same number
    assert (f"growth share: the growth flux carries {100 * est:.3g} % of the isotopic change "
            f"up to t = 70") in str(f.summary(method="asymptotic"))


def test_growth_share_curve_is_instantaneous_for_two_pools():
    # two pools: k_g Σ f_i e_i / Σ f_i (k_i + k_g) e_i with e_i = e^{-k_i t} (the growth
    # flux over dδ/dt of the pool equations, written out by hand)
    kg = 0.02
    y = -12.0 - 13.0 * (0.4 * np.exp(-(0.3 + kg) * T) + 0.6 * np.exp(-(0.01 + kg) * T))
    y = y + 1e-3 * np.sin(T)
    w = 10.0 * np.exp(kg * TM) * np.exp(1e-3 * np.cos(TM))
    f = iso.TurnoverModel(2, growth="exponential").fit(T, y, masses=(TM, w), warn=False)
    v = f.values
    k = np.array([v["k1"], v["k2"]])
    fr = np.array([v["f1"], v["f2"]])
    g = v["k_growth"]
    tt = np.array([1.0, 10.0, 40.0])
    e = fr[:, None] * np.exp(-np.outer(k, tt))
    expected = g * e.sum(axis=0) / ((k[:, None] + g) * e).sum(axis=0)
    np.testing.assert_allclose(f.growth_share_curve(tt), expected, rtol=1e-12)
    # the per-pool rows stay k_g/(k_g + k_d,i) (by hand)
    tab = f.growth_share(method="asymptotic").set_index("quantity")
    assert tab.loc["pool_2", "estimate"] == pytest.approx(g / (g + v["k2"]), rel=1e-12)


@pytest.mark.parametrize("curve", [
    GrowthCurve("logistic", Winf=40.0, k=0.06, ti=30.0),
    GrowthCurve("von_bertalanffy", Winf=60.0, k=0.02, W0=8.0),
], ids=["logistic", "von_bertalanffy"])
@pytest.mark.parametrize("pools", [1, 2])
def test_mean_residence_time_with_a_growth_curve_equals_adaptive_quadrature(curve, pools):
    # independent check: scipy.integrate.quad (adaptive) of 1 − F against the library's
    # fixed composite Gauss–Legendre rule
    from scipy.integrate import quad

    from isoturnover.quantities import mean_residence_time, remaining_after_switch

    diet = iso.DietHistory(-26.0, changes=[(0.0, -12.0)])
    kin = TurnoverKinetics(pools, diet=diet, growth=curve)
    k = [0.08] if pools == 1 else [0.3, 0.005]
    f = [1.0] if pools == 1 else [0.4, 0.6]
    theta = np.r_[2.0, k, f]
    m = mean_residence_time(kin, theta, span=90.0)

    def rem(x):
        return float(remaining_after_switch(kin, np.array([x]), theta)[0])

    pts = np.geomspace(1e-3, 1e4, 30)
    ref = quad(rem, 0.0, 1e5, points=pts, limit=800, epsabs=1e-12, epsrel=1e-12)[0]
    assert m == pytest.approx(ref, rel=1e-8)
