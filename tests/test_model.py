"""Tests of TurnoverModel.fit on arrays and of the TurnoverFit it returns.

Every series below is invented for the tests (seeded noise). Expected values come from
formulas written out here by hand, from brute-force refits through the public API, or from
independent implementations (scipy.stats quantiles, statsmodels OLS and its influence
measures, numdifftools derivatives); the source is named beside each check.
"""

from __future__ import annotations

import json
import math
import warnings

import numdifftools as nd
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import optimize, stats
from statsmodels.stats.outliers_influence import OLSInfluence

import isoturnover as iso

LN2 = math.log(2.0)
# sampling days of a typical diet-switch experiment (invented design)
T16 = np.array([0, 0.5, 1, 2, 3, 4, 6, 8, 10, 14, 18, 24, 32, 45, 60, 90.0])


def one_pool(t, d0=-25.0, deq=-12.0, half_life=10.0, lag=0.0):
    """δ(t) = δ_eq + (δ0 − δ_eq) exp(−k (t − lag)) for t > lag, δ0 before (by hand)."""
    k = LN2 / half_life
    tau = np.maximum(np.asarray(t, dtype=float) - lag, 0.0)
    return deq + (d0 - deq) * np.exp(-k * tau)


def two_pool(t, d0=-25.0, deq=-12.0, f1=0.4, hl1=3.0, hl2=30.0):
    t = np.asarray(t, dtype=float)
    rem = f1 * np.exp(-LN2 / hl1 * t) + (1 - f1) * np.exp(-LN2 / hl2 * t)
    return deq + (d0 - deq) * rem


def noise(n, sd=0.2, seed=0):
    return sd * np.random.default_rng(seed).normal(size=n)


def quiet_fit(model, *args, **kwargs):
    kwargs.setdefault("warn", False)
    return model.fit(*args, **kwargs)


@pytest.fixture(scope="module")
def series1():
    return T16.copy(), one_pool(T16) + noise(T16.size, seed=1)


@pytest.fixture(scope="module")
def fit1(series1):
    t, y = series1
    return quiet_fit(iso.TurnoverModel(pools=1), t, y)


@pytest.fixture(scope="module")
def fit2():
    y = two_pool(T16) + noise(T16.size, seed=2)
    return quiet_fit(iso.TurnoverModel(pools=2), T16, y)


# ----------------------------------------------------------------------------------------
# Bad input: every one a clear error naming the argument and what was given
# ----------------------------------------------------------------------------------------
def _bad_cases():
    t = T16
    y = one_pool(T16) + noise(T16.size, seed=3)
    M = iso.TurnoverModel
    return {
        "length": (lambda: M(1).fit(t, y[:-1]), r"'y' has 15 values but 't' has 16"),
        "sigma length": (lambda: M(1).fit(t, y, sigma=np.ones(3)),
                         r"'sigma' has 3 values but 't' has 16"),
        "nan in t": (lambda: M(1).fit(np.r_[t[:-1], np.nan], y),
                     r"'t' must be finite; got .*nan.* at position 15"),
        "inf in t": (lambda: M(1).fit(np.r_[np.inf, t[1:]], y),
                     r"'t' must be finite; got .*inf.* at position 0"),
        "nan in y": (lambda: M(1).fit(t, np.r_[y[:3], np.nan, y[4:]]),
                     r"'y' must be finite; got .*nan.* at position 3"),
        "inf in y": (lambda: M(1).fit(t, np.r_[y[:-1], -np.inf]),
                     r"'y' must be finite; got .*inf.* at position 15"),
        "sigma zero": (lambda: M(1).fit(t, y, sigma=np.r_[np.full(15, 0.1), 0.0]),
                       r"'sigma' must be > 0; got .*0\.0.* at position 15"),
        "sigma negative": (lambda: M(1).fit(t, y, sigma=-0.1), r"'sigma' must be > 0"),
        "sigma nan": (lambda: M(1).fit(t, y, sigma=np.r_[np.nan, np.full(15, 0.1)]),
                      r"'sigma' must be finite"),
        "y missing": (lambda: M(1).fit(t), r"'y' is required"),
        "t two-dimensional": (lambda: M(1).fit(np.c_[t, t], y),
                              r"'t' must be one-dimensional; got shape \(16, 2\)"),
        "fixed unknown": (lambda: M(1).fit(t, y, fixed={"delta_0": -24.0}),
                          r"'fixed' has unknown parameter 'delta_0' \(did you mean "
                          r"'delta0'\?\); the parameters of this model are delta0, delta_eq, k1"),
        "init unknown": (lambda: M(2).fit(t, y, init={"kk1": 0.1}),
                         r"'init' has unknown parameter 'kk1' \(did you mean 'k1'\?\)"),
        "fixed not a dict": (lambda: M(1).fit(t, y, fixed=[("k1", 0.1)]),
                             r"'fixed' must be a dict"),
        "fixed rate negative": (lambda: M(1).fit(t, y, fixed={"k1": -0.1}),
                                r"'fixed\['k1'\]' is a rate and must be positive"),
        "fixed not finite": (lambda: M(1).fit(t, y, fixed={"delta0": np.nan}),
                             r"'fixed\['delta0'\]' must be finite"),
        # no prefix matching of option names
        "loss prefix": (lambda: M(1).fit(t, y, loss="soft"),
                        r"'loss' must be one of 'linear', 'soft_l1', 'huber'; got 'soft'"),
        "loss unknown": (lambda: M(1).fit(t, y, loss="cauchy"), r"got 'cauchy'"),
        "too many parameters": (lambda: M(3).fit(t[:5], y[:5]),
                                r"7 free parameters but only 5 time points"),
        "pools 0": (lambda: M(0).fit(t, y), r"'pools' must be an integer from 1 to 4; got 0"),
        "pools 5": (lambda: M(5).fit(t, y), r"'pools' must be an integer from 1 to 4; got 5"),
        "pools float": (lambda: M(1.5).fit(t, y), r"from 1 to 4; got 1\.5"),
        "pools bool": (lambda: M(True).fit(t, y), r"from 1 to 4; got True"),
        "absolute_sigma without sigma": (lambda: M(1).fit(t, y, absolute_sigma=True),
                                         r"absolute_sigma=True needs 'sigma'"),
        "exponential growth without masses": (
            lambda: M(1, growth="exponential").fit(t, y),
            r"growth='exponential' needs body masses \(masses=\(t_mass, mass\)\)"),
        "structure": (lambda: M(1, structure="chian").fit(t, y),
                      r"'structure' must be one of 'parallel', 'chain'; got 'chian'"),
        "separation": (lambda: M(1, diet=iso.DietHistory.step(-26, -12),
                                 separation="diff").fit(t, y), r"'separation'.*got 'diff'"),
    }


BAD = _bad_cases()


@pytest.mark.parametrize("case", list(BAD))
def test_bad_input_raises_clear_error(case):
    fn, match = BAD[case]
    with pytest.raises((ValueError, TypeError), match=match):
        fn()


@pytest.mark.parametrize("call", ["conf_int", "half_lives"])
@pytest.mark.parametrize("method", ["prof", "Profile", "boot"])
def test_unknown_interval_method_is_refused(fit1, call, method):
    # no prefix or case-insensitive matching: "prof" must fail
    with pytest.raises(ValueError, match=rf"'method' must be one of 'profile', "
                                         rf"'asymptotic', 'bootstrap', 'mcmc'; got "
                                         rf"'{method}'"):
        getattr(fit1, call)(method=method)


@pytest.mark.parametrize("level", [95, 0.0, 1.0, -0.5, "high"])
def test_bad_level_is_refused(fit1, level):
    with pytest.raises(ValueError, match=r"'level' must be"):
        fit1.half_lives(level=level)


@pytest.mark.parametrize("p", [0.0, 1.0, 1.5, -0.1])
def test_time_to_fraction_out_of_range(fit1, p):
    with pytest.raises(ValueError, match=r"'fraction' must be between 0 and 1"):
        fit1.time_to(p)


def test_predict_refuses_non_finite_times(fit1):
    with pytest.raises(ValueError, match=r"'t' must be finite"):
        fit1.predict([1.0, np.nan])


# ----------------------------------------------------------------------------------------
# Nothing the caller passes is changed; fit() returns a new object
# ----------------------------------------------------------------------------------------
def test_caller_arrays_and_dicts_not_mutated():
    rng = np.random.default_rng(4)
    order = rng.permutation(T16.size)  # unsorted input: the fit sorts its own copy
    t = T16[order].copy()
    y = (one_pool(T16) + noise(T16.size, seed=4))[order]
    sigma = np.full(T16.size, 0.2)
    sigma[3] = 0.4
    fixed = {"delta0": -25.0}
    init = {"k1": 0.05}
    copies = [a.copy() for a in (t, y, sigma)]
    fixed_copy, init_copy = dict(fixed), dict(init)
    fit = quiet_fit(iso.TurnoverModel(1), t, y, sigma, fixed=fixed, init=init)
    for a, c in zip((t, y, sigma), copies):
        assert np.array_equal(a, c)
    assert fixed == fixed_copy and init == init_copy
    # the fit holds its own (sorted) data, not views of the caller's arrays
    assert not np.shares_memory(fit.t, t) and not np.shares_memory(fit.y, y)
    assert np.array_equal(fit.t, np.sort(t))
    fit.fixed["delta0"] = 0.0  # changing the result's dict leaves the caller's alone
    assert fixed == fixed_copy


def test_fit_returns_new_object_and_leaves_model_unchanged(series1):
    t, y = series1
    model = iso.TurnoverModel(pools=1, lag=False)
    config, rep = model.config(), repr(model)
    a = quiet_fit(model, t, y)
    b = quiet_fit(model, t, y + 1.0)
    assert a is not b
    assert model.config() == config and repr(model) == rep
    assert a.values["delta_eq"] == pytest.approx(b.values["delta_eq"] - 1.0, abs=1e-6)
    # the first result is not changed by the second fit
    c = quiet_fit(model, t, y)
    assert c.values == pytest.approx(a.values, rel=1e-12)
    assert a.model is model


def test_fixed_delta0_is_honoured(series1):
    t, y = series1
    fit = quiet_fit(iso.TurnoverModel(1), t, y, fixed={"delta0": -24.0})
    assert fit.values["delta0"] == -24.0
    assert fit.params["delta0"].value == -24.0
    assert fit.params["delta0"].vary is False
    assert fit.params["delta_eq"].vary is True and fit.params["k1"].vary is True
    assert fit.stderr["delta0"] == 0.0
    assert fit.nvarys == 2
    row = fit.conf_int().set_index("parameter").loc["delta0"]
    assert row["method"] == "fixed" and row["lower"] == row["upper"] == -24.0
    # the prediction at t = 0 is the fixed value (closed form, no lag)
    assert fit.predict(0.0)[0] == pytest.approx(-24.0, abs=1e-12)


def test_init_is_a_start_not_a_constraint(series1):
    t, y = series1
    a = quiet_fit(iso.TurnoverModel(1), t, y)
    b = quiet_fit(iso.TurnoverModel(1), t, y, init={"k1": 0.5, "delta_eq": -5.0})
    assert b.values == pytest.approx(a.values, rel=1e-7)
    assert b.params["k1"].vary


# ----------------------------------------------------------------------------------------
# Tables
# ----------------------------------------------------------------------------------------
HALF_LIFE_COLUMNS = ["pool", "fraction", "rate", "half_life", "lower", "upper", "level",
                     "method", "lower_status", "upper_status"]
CONF_INT_COLUMNS = ["parameter", "estimate", "stderr", "lower", "upper", "level", "method",
                    "lower_status", "upper_status"]


@pytest.mark.parametrize("method", ["profile", "asymptotic"])
def test_half_lives_columns_and_values(fit2, method):
    hl = fit2.half_lives(level=0.9, method=method)
    assert isinstance(hl, pd.DataFrame)
    assert list(hl.columns[: len(HALF_LIFE_COLUMNS)]) == HALF_LIFE_COLUMNS
    assert list(hl["pool"]) == [1, 2]
    v = fit2.values
    np.testing.assert_allclose(hl["rate"], [v["k1"], v["k2"]], rtol=1e-14)
    np.testing.assert_allclose(hl["half_life"], LN2 / hl["rate"], rtol=1e-14)
    np.testing.assert_allclose(hl["fraction"], [v["f1"], v["f2"]], rtol=1e-14)
    assert set(hl["level"]) == {0.9} and set(hl["method"]) == {method}
    assert set(hl["lower_status"]) | set(hl["upper_status"]) <= {"ok", "open", "at_bound",
                                                                 "failed"}
    ok = (hl["lower_status"] == "ok") & (hl["upper_status"] == "ok")
    assert np.all(hl.loc[ok, "lower"] < hl.loc[ok, "half_life"])
    assert np.all(hl.loc[ok, "half_life"] < hl.loc[ok, "upper"])


@pytest.mark.parametrize("method", ["profile", "asymptotic"])
def test_conf_int_columns(fit2, method):
    ci = fit2.conf_int(method=method)
    assert list(ci.columns) == CONF_INT_COLUMNS
    assert list(ci["parameter"]) == list(fit2.kinetics.param_names)
    assert set(ci["level"]) == {0.95}
    np.testing.assert_allclose(ci["estimate"], list(fit2.values.values()), rtol=1e-14)


def test_asymptotic_intervals_by_hand(fit1):
    # Student-t interval est ± t(0.975, n − p)·se; rates on the log scale
    # est·exp(±t·se/est) (t quantile from scipy.stats)
    ci = fit1.conf_int(method="asymptotic").set_index("parameter")
    q = stats.t.ppf(0.975, fit1.nobs - fit1.nvarys)
    for nm in ("delta0", "delta_eq"):
        est, se = fit1.values[nm], fit1.stderr[nm]
        assert ci.loc[nm, "lower"] == pytest.approx(est - q * se, rel=1e-12)
        assert ci.loc[nm, "upper"] == pytest.approx(est + q * se, rel=1e-12)
    k, se = fit1.values["k1"], fit1.stderr["k1"]
    assert ci.loc["k1", "lower"] == pytest.approx(k * math.exp(-q * se / k), rel=1e-12)
    assert ci.loc["k1", "upper"] == pytest.approx(k * math.exp(q * se / k), rel=1e-12)


def test_standard_errors_against_numdifftools(fit1):
    # cov = s² (JᵀJ)⁻¹ with J the Jacobian of the one-pool curve written by hand,
    # differentiated by numdifftools (independent of the library's analytic Jacobian)
    t = fit1.t
    v = fit1.values

    def curve(p):
        d0, deq, k = p
        return deq + (d0 - deq) * np.exp(-k * t)

    J = nd.Jacobian(curve)([v["delta0"], v["delta_eq"], v["k1"]])
    s2 = fit1.rss / (fit1.nobs - 3)
    se = np.sqrt(np.diag(s2 * np.linalg.inv(J.T @ J)))
    np.testing.assert_allclose([fit1.stderr[n] for n in ("delta0", "delta_eq", "k1")], se,
                               rtol=1e-6)
    assert fit1.s2 == pytest.approx(s2, rel=1e-12)


def test_information_criteria_by_hand(fit1):
    # AIC = n ln(RSS/n) + 2k, k = free parameters + residual variance;
    # AICc = AIC + 2k(k+1)/(n−k−1); BIC = n ln(RSS/n) + k ln n (Burnham & Anderson 2002)
    n, k = fit1.nobs, fit1.nvarys + 1
    base = n * math.log(fit1.rss / n)
    assert fit1.aic == pytest.approx(base + 2 * k, rel=1e-12)
    assert fit1.aicc == pytest.approx(base + 2 * k + 2 * k * (k + 1) / (n - k - 1), rel=1e-12)
    assert fit1.bic == pytest.approx(base + k * math.log(n), rel=1e-12)
    np.testing.assert_allclose(fit1.residuals, fit1.y - one_pool(
        fit1.t, fit1.values["delta0"], fit1.values["delta_eq"], LN2 / fit1.values["k1"]),
        atol=1e-12)
    assert fit1.rss == pytest.approx(float(np.sum(fit1.residuals**2)), rel=1e-12)


# ----------------------------------------------------------------------------------------
# Derived quantities
# ----------------------------------------------------------------------------------------
def test_time_to_one_pool_by_hand(fit1):
    # one pool: t_p = −ln(1 − p)/k; for p = 0.95 that is ln 20 / ln 2 = 4.3219 half-lives
    k = fit1.values["k1"]
    tt = fit1.time_to([0.5, 0.95]).set_index("fraction")
    assert tt.loc[0.5, "estimate"] == pytest.approx(LN2 / k, rel=1e-12)
    assert tt.loc[0.95, "estimate"] == pytest.approx(-math.log(0.05) / k, rel=1e-12)
    assert tt.loc[0.95, "estimate"] / (LN2 / k) == pytest.approx(4.321928, rel=1e-6)
    # the interval is the rate's profile interval transformed
    hl = fit1.half_lives().iloc[0]
    assert tt.loc[0.95, "lower"] == pytest.approx(-math.log(0.05) / hl["rate_upper"], rel=1e-12)
    assert tt.loc[0.95, "upper"] == pytest.approx(-math.log(0.05) / hl["rate_lower"], rel=1e-12)
    assert tt.loc[0.95, "lower"] < tt.loc[0.95, "estimate"] < tt.loc[0.95, "upper"]


def test_time_to_one_pool_includes_lag():
    t = T16
    y = one_pool(t, lag=2.0) + noise(t.size, sd=0.05, seed=5)
    fit = quiet_fit(iso.TurnoverModel(1, lag=True), t, y)
    k, lag = fit.values["k1"], fit.values["lag"]
    assert fit.time_to(0.95)["estimate"].iloc[0] == pytest.approx(
        -math.log(0.05) / k + lag, rel=1e-12)


def test_time_to_two_pools_solved_numerically(fit2):
    v = fit2.values
    tt = fit2.time_to([0.5, 0.9, 0.95])
    for p, tau in zip(tt["fraction"], tt["estimate"]):
        # 1 − F written by hand: f1 e^(−k1 τ) + f2 e^(−k2 τ) must equal 1 − p
        rem = v["f1"] * math.exp(-v["k1"] * tau) + v["f2"] * math.exp(-v["k2"] * tau)
        assert rem == pytest.approx(1 - p, abs=1e-10)
    assert np.all(np.diff(tt["estimate"]) > 0)
    # constrained profile likelihood of the derived quantity (isoturnover.uncertainty)
    assert set(tt["method"]) == {"profile"}
    assert np.all(tt["lower"] < tt["estimate"]) and np.all(tt["estimate"] < tt["upper"])
    asy = fit2.time_to([0.5, 0.9, 0.95], method="asymptotic")
    assert set(asy["method"]) == {"asymptotic"}


def test_mean_residence_time_by_hand(fit1, fit2):
    # ∫₀^∞ (1 − F) dτ = Σ f_i / k_i for parallel pools
    v = fit2.values
    assert fit2.mean_residence_time() == pytest.approx(v["f1"] / v["k1"] + v["f2"] / v["k2"],
                                                       rel=1e-12)
    assert fit1.mean_residence_time() == pytest.approx(1 / fit1.values["k1"], rel=1e-12)


# ----------------------------------------------------------------------------------------
# Profile likelihood intervals against a brute-force profile through the public API
# ----------------------------------------------------------------------------------------
def brute_profile(model, t, y, name, est, se, crit_scale, crit, fit_kwargs):
    """Bounds where (rss(c) − rss)/scale crosses crit, from refits with fixed={name: c}.

    A grid of c around the estimate brackets each crossing; brentq then refines it, each
    evaluation a full public fit with the parameter fixed.
    """
    rss0 = quiet_fit(model, t, y, **fit_kwargs).rss

    def D(c):
        g = quiet_fit(model, t, y, fixed={name: c}, **fit_kwargs)
        return (g.rss - rss0) / crit_scale - crit

    grid = est + se * np.linspace(-8, 8, 33)
    if name.startswith("k"):
        grid = est * np.exp(np.linspace(-8, 8, 33) * se / est)
    vals = np.array([D(c) for c in grid])
    mid = len(grid) // 2
    lo_i = np.nonzero(vals[:mid] > 0)[0].max()
    hi_i = mid + np.nonzero(vals[mid:] > 0)[0].min()
    lo = optimize.brentq(D, grid[lo_i], grid[lo_i + 1], xtol=1e-12)
    hi = optimize.brentq(D, grid[hi_i - 1], grid[hi_i], xtol=1e-12)
    return lo, hi


@pytest.mark.parametrize("name", ["k1", "delta_eq"])
def test_profile_interval_estimated_sigma(series1, fit1, name):
    # σ estimated: ΔRSS/s² ≤ F(1, n − p; 0.95) (quantile from scipy.stats)
    t, y = series1
    crit = stats.f.ppf(0.95, 1, fit1.nobs - fit1.nvarys)
    lo, hi = brute_profile(iso.TurnoverModel(1), t, y, name, fit1.values[name],
                           fit1.stderr[name], fit1.s2, crit, {})
    row = fit1.conf_int().set_index("parameter").loc[name]
    assert row["lower_status"] == row["upper_status"] == "ok"
    assert row["lower"] == pytest.approx(lo, rel=1e-3)
    assert row["upper"] == pytest.approx(hi, rel=1e-3)
    if name == "k1":
        hl = fit1.half_lives().iloc[0]
        assert hl["lower"] == pytest.approx(LN2 / hi, rel=1e-3)
        assert hl["upper"] == pytest.approx(LN2 / lo, rel=1e-3)


@pytest.mark.parametrize("name", ["k1", "delta0"])
def test_profile_interval_known_sigma(name):
    # σ known: Δχ² ≤ χ²(1; 0.95) = 3.8415 (quantile from scipy.stats)
    t = T16
    y = one_pool(t) + noise(t.size, seed=11)
    kw = {"sigma": 0.2, "absolute_sigma": True}
    fit = quiet_fit(iso.TurnoverModel(1), t, y, **kw)
    crit = stats.chi2.ppf(0.95, 1)
    lo, hi = brute_profile(iso.TurnoverModel(1), t, y, name, fit.values[name],
                           fit.stderr[name], 1.0, crit, kw)
    row = fit.conf_int().set_index("parameter").loc[name]
    assert row["lower"] == pytest.approx(lo, rel=1e-3)
    assert row["upper"] == pytest.approx(hi, rel=1e-3)
    # σ known: the covariance is not rescaled by the residual variance
    assert fit.s2 == 1.0


def test_profile_bound_open_for_a_slow_pool_never_approached():
    # two pools, half-lives 2 d and 400 d, sampled to 30 d (invented): the slow pool is
    # hardly begun, so the data give its rate no lower limit
    t = np.array([0, 0.5, 1, 2, 3, 4, 6, 8, 10, 12, 14, 17, 20, 24, 27, 30.0])
    y = two_pool(t, f1=0.5, hl1=2.0, hl2=400.0) + noise(t.size, sd=0.1, seed=0)
    fit = quiet_fit(iso.TurnoverModel(2), t, y)
    hl = fit.half_lives().set_index("pool")
    assert hl.loc[2, "upper"] == math.inf
    assert hl.loc[2, "upper_status"] == "open"
    ci = fit.conf_int().set_index("parameter")
    assert ci.loc["k2", "lower"] == 0.0 and ci.loc["k2", "lower_status"] == "open"
    # the summary shows "open", never a search limit
    s = str(fit.summary())
    line = next(ln for ln in s.splitlines() if "half-life, pool 2" in ln)
    assert line.rstrip().endswith("open]")


# A case where the profile search gives up on a bound the data do close: the lower
# profile bound of the fast rate of a two-pool series (replicate 12 of the seeded
# two-pool simulation in test_simulation_recovery.py).
def _two_pool_replicate(index, seed=20240601):
    rng = np.random.default_rng(seed)
    mu = two_pool(T16)
    for _ in range(index + 1):
        y = mu + 0.2 * rng.normal(size=T16.size)
    return y


def test_profile_lower_bound_of_fast_rate_closes():
    y = _two_pool_replicate(12)
    model = iso.TurnoverModel(2)
    fit = quiet_fit(model, T16, y)
    crit = stats.f.ppf(0.95, 1, fit.nobs - fit.nvarys)

    def D(c):
        return (quiet_fit(model, T16, y, fixed={"k1": c}).rss - fit.rss) / fit.s2 - crit

    # brute force: the public refits converge on both sides of the crossing
    lo = optimize.brentq(D, 0.125, 0.15, xtol=1e-10)
    row = fit.conf_int().set_index("parameter").loc["k1"]
    assert row["lower_status"] == "ok"
    assert row["lower"] == pytest.approx(lo, rel=1e-3)


# ----------------------------------------------------------------------------------------
# Robust loss, influence
# ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_soft_l1_resists_one_gross_outlier(seed):
    t = T16
    y = one_pool(t, half_life=10.0) + noise(t.size, seed=seed)
    y[9] += 4.0  # one gross outlier at t = 14 d (20 analytic sd)
    lin = quiet_fit(iso.TurnoverModel(1), t, y)
    rob = quiet_fit(iso.TurnoverModel(1), t, y, loss="soft_l1")
    hl_lin = LN2 / lin.values["k1"]
    hl_rob = LN2 / rob.values["k1"]
    # without the outlier the half-life has a standard error of about 0.45 d here
    assert abs(hl_rob - 10.0) < 1.0
    assert abs(hl_lin - 10.0) > 2 * abs(hl_rob - 10.0)
    # the outlier is flagged and kept
    infl = rob.influence()
    assert rob.nobs == t.size and len(infl) == t.size
    assert infl["flagged"].iloc[9]
    assert infl["flagged"].sum() == 1
    assert infl["time"].iloc[9] == 14.0
    s = str(rob.summary())
    assert "robust loss 'soft_l1'" in s and "t = 14" in s
    # robust fits report asymptotic intervals and say so
    assert set(rob.conf_int()["method"]) <= {"asymptotic", "fixed"}


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_soft_l1_standard_errors_not_inflated_by_the_outlier(seed):
    t = T16
    y = one_pool(t) + noise(t.size, seed=seed)
    y[9] += 4.0
    rob = quiet_fit(iso.TurnoverModel(1), t, y, loss="soft_l1")
    keep = np.arange(t.size) != 9
    clean = quiet_fit(iso.TurnoverModel(1), t[keep], y[keep])
    # a robust (down-weighting) fit should be about as precise as the fit without the
    # outlier; a factor 2 leaves room for the robust scale estimate
    assert rob.stderr["k1"] < 2 * clean.stderr["k1"]


@pytest.mark.parametrize("pools", [1, 2])
def test_influence_matches_statsmodels_on_a_linear_case(pools):
    # With every rate fixed, δ(t) = δ_eq + (δ0 − δ_eq) Σ f_i e^(−k_i t) spans the same
    # column space as the linear regression on [1, e^(−k_1 t), …], so leverage, internally
    # studentised residuals and Cook's distance must equal statsmodels' OLSInfluence of that
    # regression (whitened by 1/σ for the weights).
    t = T16
    rates = [LN2 / 10.0] if pools == 1 else [LN2 / 3.0, LN2 / 30.0]
    y = (one_pool(t) if pools == 1 else two_pool(t)) + noise(t.size, seed=7)
    y[5] += 1.5  # something to be influential
    sigma = 0.1 + 0.1 * np.random.default_rng(8).random(t.size)
    fixed = {f"k{i + 1}": k for i, k in enumerate(rates)}
    fit = quiet_fit(iso.TurnoverModel(pools), t, y, sigma, fixed=fixed)
    X = np.column_stack([np.ones_like(t)] + [np.exp(-k * t) for k in rates])
    w = 1.0 / sigma
    ols = sm.OLS(y * w, X * w[:, None]).fit()
    ref = OLSInfluence(ols)
    infl = fit.influence()
    assert fit.rss == pytest.approx(ols.ssr, rel=1e-9)
    np.testing.assert_allclose(infl["leverage"], ref.hat_matrix_diag, atol=1e-9)
    np.testing.assert_allclose(infl["studentized"], ref.resid_studentized_internal, atol=1e-7)
    np.testing.assert_allclose(infl["cooks_distance"], ref.cooks_distance[0], atol=1e-8)
    assert list(infl.columns) == ["time", "value", "fitted", "residual", "studentized",
                                  "leverage", "cooks_distance", "flagged"]


def test_standard_errors_match_statsmodels_on_a_linear_case():
    # one pool with k fixed is linear in (δ0, δ_eq): y = δ0 e + δ_eq (1 − e)
    t = T16
    y = one_pool(t) + noise(t.size, seed=9)
    k = LN2 / 10.0
    fit = quiet_fit(iso.TurnoverModel(1), t, y, fixed={"k1": k})
    e = np.exp(-k * t)
    ols = sm.OLS(y, np.column_stack([e, 1 - e])).fit()
    np.testing.assert_allclose([fit.values["delta0"], fit.values["delta_eq"]], ols.params,
                               rtol=1e-10)
    np.testing.assert_allclose([fit.stderr["delta0"], fit.stderr["delta_eq"]], ols.bse,
                               rtol=1e-8)
    # AIC differences are what matter. statsmodels: AIC = −2 llf + 2·2 with
    # llf = −n/2 (ln 2π + ln(RSS/n) + 1), residual variance not counted; ours:
    # n ln(RSS/n) + 2·3. The difference is the constant 2 − n(ln 2π + 1).
    n = t.size
    assert fit.aic - ols.aic == pytest.approx(2 - n * (math.log(2 * math.pi) + 1), rel=1e-9)


# ----------------------------------------------------------------------------------------
# Model structures
# ----------------------------------------------------------------------------------------
def chain_curve(t, ka=0.3, kb=0.1, d0=-25.0, deq=-12.0):
    # 1 − F = (k_a e^(−k_b t) − k_b e^(−k_a t)) / (k_a − k_b), two first-order steps
    rem = (ka * np.exp(-kb * t) - kb * np.exp(-ka * t)) / (ka - kb)
    return deq + (d0 - deq) * rem


@pytest.mark.parametrize("seed", [0, 1])
def test_chain_fits_s_shaped_series_and_aicc_prefers_it(seed):
    t = T16
    y = chain_curve(t) + noise(t.size, seed=seed)
    chain = quiet_fit(iso.TurnoverModel(structure="chain"), t, y)
    one = quiet_fit(iso.TurnoverModel(1), t, y)
    two = quiet_fit(iso.TurnoverModel(2), t, y)
    assert chain.aicc < one.aicc - 10
    assert chain.aicc < two.aicc
    k = sorted([chain.values["k1"], chain.values["k2"]], reverse=True)
    assert k[0] == pytest.approx(0.3, rel=0.3) and k[1] == pytest.approx(0.1, rel=0.15)
    assert chain.warnings == []
    # the chain has no pool fractions; its mean residence time is 1/k1 + 1/k2
    assert chain.mean_residence_time() == pytest.approx(1 / k[0] + 1 / k[1], rel=1e-12)


def test_chain_noise_free_recovery():
    t = T16
    fit = quiet_fit(iso.TurnoverModel(structure="chain"), t, chain_curve(t))
    assert fit.values["k1"] == pytest.approx(0.3, rel=1e-6)
    assert fit.values["k2"] == pytest.approx(0.1, rel=1e-6)


# Diet histories: the expected curves are written out by hand for a piecewise-constant input.
def equilibrium(diet, sep, form):
    if form == "difference":
        return diet + sep
    # ε form: (1000 + δ_diet)(1 + ε/1000) − 1000 (Coplen 2011 definitions)
    return (1000.0 + diet) * (1.0 + sep / 1000.0) - 1000.0


def test_epsilon_worked_example():
    # invented worked example: diet −26.0 ‰, ε = 13.5 ‰ → 974 × 1.0135 − 1000 = −12.851 ‰
    # (difference form would give −12.5 ‰)
    assert equilibrium(-26.0, 13.5, "epsilon") == pytest.approx(-12.851, abs=1e-12)
    t = T16
    old, new = equilibrium(-26.0, 13.5, "epsilon"), equilibrium(-12.0, 13.5, "epsilon")
    y = new + (old - new) * np.exp(-LN2 / 10 * t)  # from the old plateau to the new one
    fit = quiet_fit(iso.TurnoverModel(1, diet=iso.DietHistory.step(-26.0, -12.0),
                                      separation="epsilon"), t, y)
    assert fit.values["epsilon"] == pytest.approx(13.5, rel=1e-7)
    assert fit.predict(0.0)[0] == pytest.approx(-12.851, abs=1e-6)


@pytest.mark.parametrize("form, sep", [("difference", 1.5), ("epsilon", 13.5)])
@pytest.mark.parametrize("noisy", [False, True])
def test_step_diet_recovers_separation(form, sep, noisy):
    t = T16
    k = LN2 / 10.0
    old, new = equilibrium(-26.0, sep, form), equilibrium(-12.0, sep, form)
    y = new + (old - new) * np.exp(-k * t)
    if noisy:
        y = y + noise(t.size, sd=0.1, seed=12)
    model = iso.TurnoverModel(1, diet=iso.DietHistory.step(-26.0, -12.0, at=0), separation=form)
    fit = quiet_fit(model, t, y)
    name = "discrimination" if form == "difference" else "epsilon"
    assert fit.kinetics.param_names == (name, "k1", "f1")
    if noisy:
        ci = fit.conf_int().set_index("parameter")
        assert ci.loc[name, "lower"] < sep < ci.loc[name, "upper"]
        assert abs(fit.values[name] - sep) < 4 * fit.stderr[name]
        assert abs(fit.values["k1"] - k) < 4 * fit.stderr["k1"]
    else:
        assert fit.values[name] == pytest.approx(sep, rel=1e-7)
        assert fit.values["k1"] == pytest.approx(k, rel=1e-7)


def test_switch_back_diet():
    # diet −26 → −12 at t = 0 → −26 at t = 40 (invented), Δ = 1.5 ‰, t½ = 10 d
    t = np.r_[T16[T16 <= 40], 41, 42, 44, 47, 50, 55, 60, 70, 80, 90.0]
    k, D = LN2 / 10.0, 1.5
    a, b = -26.0 + D, -12.0 + D
    y40 = b + (a - b) * math.exp(-k * 40)
    y = np.where(t <= 40, b + (a - b) * np.exp(-k * t), a + (y40 - a) * np.exp(-k * (t - 40)))
    model = iso.TurnoverModel(1, diet=iso.DietHistory(-26.0, changes=[(0, -12.0), (40, -26.0)]))
    exact = quiet_fit(model, t, y)
    assert exact.values["discrimination"] == pytest.approx(D, rel=1e-7)
    assert exact.values["k1"] == pytest.approx(k, rel=1e-7)
    noisy = quiet_fit(model, t, y + noise(t.size, sd=0.1, seed=13))
    assert abs(noisy.values["k1"] - k) < 4 * noisy.stderr["k1"]
    assert abs(noisy.values["discrimination"] - D) < 4 * noisy.stderr["discrimination"]


def test_lag_recovery():
    t = T16
    y = one_pool(t, lag=3.0)
    model = iso.TurnoverModel(1, lag=True)
    exact = quiet_fit(model, t, y)
    assert exact.values["lag"] == pytest.approx(3.0, rel=1e-6)
    assert exact.values["k1"] == pytest.approx(LN2 / 10, rel=1e-6)
    noisy = quiet_fit(model, t, y + noise(t.size, sd=0.1, seed=14))
    ci = noisy.conf_int().set_index("parameter")
    assert ci.loc["lag", "lower"] < 3.0 < ci.loc["lag", "upper"]
    assert ci.loc["lag", "lower_status"] == "ok"


def test_initial_free():
    # animals not at equilibrium at the switch: tissue at −20 ‰ while the old diet
    # (−26 ‰, Δ = 1.5 ‰) would put it at −24.5 ‰ (invented)
    t = T16
    k, D = LN2 / 10.0, 1.5
    y = (-12.0 + D) + (-20.0 - (-12.0 + D)) * np.exp(-k * t)
    model = iso.TurnoverModel(1, diet=iso.DietHistory.step(-26.0, -12.0), initial="free")
    fit = quiet_fit(model, t, y)
    assert "delta0" in fit.kinetics.param_names
    assert fit.values["delta0"] == pytest.approx(-20.0, rel=1e-7)
    assert fit.values["discrimination"] == pytest.approx(D, rel=1e-7)
    assert fit.values["k1"] == pytest.approx(k, rel=1e-7)
    # the equilibrium default gets this series wrong: it is tied to −24.5 ‰ at the switch
    eq = quiet_fit(iso.TurnoverModel(1, diet=iso.DietHistory.step(-26.0, -12.0)), t, y)
    assert eq.rss > 100 * max(fit.rss, 1e-12)


# ----------------------------------------------------------------------------------------
# Save / load, summary
# ----------------------------------------------------------------------------------------
ROUND_TRIP = {
    "one pool": (lambda: iso.TurnoverModel(1), {}),
    "two pools, sigma": (lambda: iso.TurnoverModel(2), {"sigma": 0.2}),
    "known sigma": (lambda: iso.TurnoverModel(1), {"sigma": 0.2, "absolute_sigma": True}),
    "fixed": (lambda: iso.TurnoverModel(2), {"fixed": {"delta0": -25.0}}),
    "robust": (lambda: iso.TurnoverModel(1), {"loss": "huber"}),
    "chain": (lambda: iso.TurnoverModel(structure="chain"), {}),
    "diet, lag": (lambda: iso.TurnoverModel(
        1, lag=True, diet=iso.DietHistory(-26.0, changes=[(0, -12.0), (40, -26.0)])), {}),
}


@pytest.mark.parametrize("case", list(ROUND_TRIP))
def test_load_fit_round_trip(case):
    make, kw = ROUND_TRIP[case]
    y = two_pool(T16) + noise(T16.size, seed=15)
    fit = quiet_fit(make(), T16, y, time_unit="d", label="invented series", **kw)
    text = json.dumps(fit.to_dict())
    back = iso.load_fit(json.loads(text))
    again = iso.load_fit(text)  # JSON text is accepted too
    grid = np.linspace(0, 120, 25)
    for g in (back, again):
        assert np.array_equal(g.predict(grid), fit.predict(grid))
        assert str(g.summary()) == str(fit.summary())
        assert g.values == fit.values and g.rss == fit.rss
        pd.testing.assert_frame_equal(g.table(), fit.table())
        assert [w.code for w in g.warnings] == [w.code for w in fit.warnings]
        assert g.label == "invented series" and g.time_unit == "d"


def test_load_fit_refuses_other_dicts():
    with pytest.raises(ValueError, match=r"load_fit needs a dict made by TurnoverFit.to_dict"):
        iso.load_fit({"format": "something-else"})


def test_summary_text_and_html(fit2):
    s = fit2.summary()
    text = str(s)
    for part in ("Turnover fit", "Data", "Model", "Method", "Weighting", "Parameters",
                 "Derived quantities", "half-life, pool 1", "time to 95 %", "Notes", "[1]"):
        assert part in text
    for nm in fit2.kinetics.param_names:
        assert nm in text
    h = s._repr_html_()
    assert h.startswith("<div") and h.endswith("</div>")
    assert "<table>" in h and "<ol>" in h
    assert "delta_eq" in h
    # the fit itself renders in notebooks through the same HTML
    assert fit2._repr_html_() == h
    with pytest.raises(ValueError, match=r"'method' must be one of"):
        fit2.summary(method="prof")


def test_summary_html_escapes_labels():
    y = one_pool(T16) + noise(T16.size, seed=16)
    fit = quiet_fit(iso.TurnoverModel(1), T16, y, label="<b>goat & sheep</b>")
    h = fit.summary()._repr_html_()
    assert "<b>goat" not in h and "&lt;b&gt;goat &amp; sheep" in h


def test_warnings_are_issued_by_default_and_silenced_with_warn_false():
    t = np.linspace(0, 15, 16)  # stops before two half-lives: plateau not reached
    y = one_pool(t) + noise(t.size, sd=0.1, seed=0)
    with pytest.warns(iso.DesignWarning, match=r"before two half-lives"):
        iso.TurnoverModel(1).fit(t, y)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        fit = iso.TurnoverModel(1).fit(t, y, warn=False)
    assert [w.code for w in fit.warnings] == ["plateau_not_reached"]
