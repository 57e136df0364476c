"""Tests of isoturnover.progress (reaction progress variable, log-linear rate, peeling).

All series here are invented (simulated from the model with fixed seeds).
"""

from __future__ import annotations

import math

import numdifftools as nd
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st
from uncertainties import ufloat, umath

from isoturnover.errors import DataError
from isoturnover.progress import (
    FLAGS,
    end_values,
    peel,
    progress_rate,
    progress_variable,
    reaction_progress,
    starting_rates,
)

D0, DEQ = -24.0, -12.0
# invented sampling schedule, days 0-90
T = np.array([0, 0.5, 1, 2, 3, 4, 6, 8, 10, 14, 18, 22, 28, 35, 42, 50, 60, 70, 80, 90.0])


def one_pool(t, k, d0=D0, deq=DEQ):
    return deq + (d0 - deq) * np.exp(-k * np.asarray(t))


def two_pool(t, half_lives=(3.0, 30.0), fractions=(0.4, 0.6), d0=D0, deq=DEQ):
    k = np.log(2) / np.asarray(half_lives)
    f = np.asarray(fractions)
    return deq + (d0 - deq) * (f @ np.exp(-k[:, None] * np.asarray(t)[None, :]))


# ------------------------------------------------------------------ progress_variable


def test_progress_variable_hand_values():
    # worked by hand from 1 - F = (y - deq)/(d0 - deq) (Cerling et al. 2007):
    # y = -18 -> (-18 + 12)/(-24 + 12) = 0.5 ; y = -15 -> 0.25
    pv = progress_variable([10.0, 20.0], [-18.0, -15.0], D0, DEQ)
    np.testing.assert_allclose(pv.one_minus_F, [0.5, 0.25], rtol=0, atol=1e-15)
    np.testing.assert_allclose(pv.F, [0.5, 0.75], rtol=0, atol=1e-15)
    np.testing.assert_allclose(pv.log_one_minus_F, [math.log(0.5), math.log(0.25)], rtol=1e-15)
    assert pv.flag.tolist() == ["ok", "ok"]
    assert np.all(np.isnan(pv.sd_log))  # sd unknown
    assert pv.delta0 == D0 and pv.delta_eq == DEQ


def test_increasing_and_decreasing_series_agree():
    k = 0.07
    up = progress_variable(T, one_pool(T, k, -24.0, -12.0), -24.0, -12.0)
    down = progress_variable(T, one_pool(T, k, -12.0, -24.0), -12.0, -24.0)
    np.testing.assert_allclose(up.one_minus_F, down.one_minus_F, rtol=1e-12)
    assert up.flag.tolist() == down.flag.tolist()


def test_flags_fire_on_crafted_points():
    t = np.array([5.0, 10.0, 20.0, 30.0, np.nan, 40.0, 50.0, 60.0, 70.0])
    y = np.array([-18.0, -24.0, -25.0, -12.0, -15.0, np.nan, np.inf, -11.5, -13.0])
    # -18: ok; -24: F = 0 (not moved); -25: F < 0 (beyond start); -12: F = 1; NaN time;
    # NaN value; inf value; -11.5: F > 1 (past equilibrium); -13: ok
    pv = progress_variable(t, y, D0, DEQ, sd=0.1)
    assert pv.flag.tolist() == [
        "ok", "F<=0", "F<=0", "F>=1", "nonfinite", "nonfinite", "nonfinite", "F>=1", "ok",
    ]
    assert set(pv.flag.tolist()) <= set(FLAGS)
    bad = pv.flag != "ok"
    assert np.all(np.isnan(pv.log_one_minus_F[bad]))
    assert np.all(np.isnan(pv.sd_log[bad]))
    assert np.all(np.isfinite(pv.log_one_minus_F[~bad]))
    # F is kept where the value is finite, even when flagged
    np.testing.assert_allclose(pv.F[[1, 2, 3, 7]], [0.0, -1.0 / 12, 1.0, 1.0 + 0.5 / 12])
    assert np.isnan(pv.F[5]) and np.isnan(pv.F[6])  # no infinities passed through
    np.testing.assert_array_equal(pv.ok, ~bad)


def test_inputs_not_mutated_and_order_kept():
    t = np.array([20.0, 5.0, 10.0])
    y = np.array([-15.0, -20.0, -18.0])
    t0, y0 = t.copy(), y.copy()
    pv = progress_variable(t, y, D0, DEQ)
    np.testing.assert_array_equal(t, t0)
    np.testing.assert_array_equal(y, y0)
    np.testing.assert_array_equal(pv.time, t0)
    pv.time[0] = 99.0
    assert t[0] == 20.0


def _log1mF(p):
    y, d0, deq = p
    return np.log((y - deq) / (d0 - deq))


def test_sd_log_matches_numdifftools_gradient():
    # independent check: numerical gradient of ln(1 - F) in (y, delta0, delta_eq) by
    # numdifftools, combined as sqrt(sum (g_i s_i)^2) for independent errors
    y = np.array([-22.0, -18.5, -14.0, -12.4])
    sd, s0, seq = np.array([0.1, 0.2, 0.15, 0.3]), 0.25, 0.4
    pv = progress_variable(np.arange(1.0, 5.0), y, D0, DEQ, sd=sd, sd_delta0=s0, sd_delta_eq=seq)
    grad = nd.Gradient(_log1mF)
    expect = []
    for yi, si in zip(y, sd, strict=True):
        g = grad([yi, D0, DEQ])
        expect.append(math.sqrt((g[0] * si) ** 2 + (g[1] * s0) ** 2 + (g[2] * seq) ** 2))
    np.testing.assert_allclose(pv.sd_log, expect, rtol=1e-8)


def test_sd_log_matches_uncertainties_package():
    # independent check: linear error propagation by the `uncertainties` package
    y = np.array([-23.0, -19.0, -13.5])
    sd, s0, seq = 0.2, 0.1, 0.3
    pv = progress_variable([1.0, 2.0, 3.0], y, D0, DEQ, sd=sd, sd_delta0=s0, sd_delta_eq=seq)
    d0u, dequ = ufloat(D0, s0), ufloat(DEQ, seq)
    for i, yi in enumerate(y):
        z = umath.log((ufloat(yi, sd) - dequ) / (d0u - dequ))
        assert pv.log_one_minus_F[i] == pytest.approx(z.nominal_value, rel=1e-14)
        assert pv.sd_log[i] == pytest.approx(z.std_dev, rel=1e-12)


def test_sd_zero_propagates_end_values_only():
    pv = progress_variable([5.0], [-18.0], D0, DEQ, sd=0.0, sd_delta0=0.3)
    # only the delta0 term: 0.3 / |delta0 - delta_eq| = 0.3 / 12 (worked by hand)
    assert pv.sd_log[0] == pytest.approx(0.025, rel=1e-14)


# ------------------------------------------------------------------ progress_rate


@pytest.mark.parametrize("k", [0.001, 0.05, 2.0])
def test_progress_rate_exact_on_noise_free_one_pool(k):
    t = np.linspace(0, 3.0 / k, 16)
    y = one_pool(t, k)
    r = progress_rate(t, y, D0, DEQ)
    assert abs(r.rate - k) <= 1e-10 * k
    assert r.half_life == pytest.approx(math.log(2) / k, rel=1e-10)
    assert r.n_used == 15 and r.n_before == 1 and r.n_flagged == 0
    assert r.intercept is None and r.status == "ok" and not r.weighted
    rw = progress_rate(t, y, D0, DEQ, sd=0.1)
    assert rw.weighted and abs(rw.rate - k) <= 1e-10 * k
    ri = progress_rate(t, y, D0, DEQ, through_origin=False)
    assert abs(ri.rate - k) <= 1e-10 * k
    assert abs(ri.intercept) < 1e-10


def _noisy_one_pool(seed, k=0.06, sd=0.15):
    rng = np.random.default_rng(seed)
    t = np.sort(rng.uniform(0.5, 40.0, 25))
    sds = rng.uniform(0.05, 0.3, t.size)
    y = one_pool(t, k) + rng.normal(0.0, sds)
    return t, y, sds


def test_progress_rate_matches_statsmodels_wls_through_origin():
    # independent implementation: statsmodels WLS without a constant
    t, y, sds = _noisy_one_pool(3)
    r = progress_rate(t, y, D0, DEQ, sd=sds, sd_delta_eq=0.05)
    pv = progress_variable(t, y, D0, DEQ, sd=sds, sd_delta_eq=0.05)
    use = pv.ok & (t > 0)
    res = sm.WLS(pv.log_one_minus_F[use], t[use][:, None], weights=pv.sd_log[use] ** -2).fit()
    assert r.weighted
    assert r.rate == pytest.approx(-res.params[0], rel=1e-12)
    assert r.stderr == pytest.approx(res.bse[0], rel=1e-10)
    assert r.dof == int(res.df_resid)
    # known sigma: statsmodels with the scale fixed at 1
    ra = progress_rate(t, y, D0, DEQ, sd=sds, sd_delta_eq=0.05, absolute_sigma=True)
    resa = sm.WLS(pv.log_one_minus_F[use], t[use][:, None], weights=pv.sd_log[use] ** -2).fit(
        cov_type="fixed scale"
    )
    assert ra.stderr == pytest.approx(resa.bse[0], rel=1e-10)


def test_progress_rate_matches_statsmodels_wls_with_intercept():
    # independent implementation: statsmodels WLS with a constant
    t, y, sds = _noisy_one_pool(4)
    r = progress_rate(t, y, D0, DEQ, sd=sds, through_origin=False)
    pv = progress_variable(t, y, D0, DEQ, sd=sds)
    use = pv.ok & (t > 0)
    x = sm.add_constant(t[use])
    res = sm.WLS(pv.log_one_minus_F[use], x, weights=pv.sd_log[use] ** -2).fit()
    assert r.intercept == pytest.approx(res.params[0], rel=1e-10)
    assert r.rate == pytest.approx(-res.params[1], rel=1e-10)
    assert r.intercept_stderr == pytest.approx(res.bse[0], rel=1e-9)
    assert r.stderr == pytest.approx(res.bse[1], rel=1e-9)


def test_progress_rate_unweighted_matches_statsmodels_ols():
    t, y, _ = _noisy_one_pool(5)
    r = progress_rate(t, y, D0, DEQ)
    pv = progress_variable(t, y, D0, DEQ)
    use = pv.ok & (t > 0)
    res = sm.OLS(pv.log_one_minus_F[use], t[use][:, None]).fit()  # statsmodels OLS
    assert r.rate == pytest.approx(-res.params[0], rel=1e-12)
    assert r.stderr == pytest.approx(res.bse[0], rel=1e-10)


def test_progress_rate_counts_and_degenerate_cases():
    t = np.array([-2.0, 0.0, 5.0, 10.0, 60.0, np.nan])
    y = np.array([-24.0, -24.0, -20.0, -17.0, -11.0, -15.0])
    r = progress_rate(t, y, D0, DEQ)
    assert (r.n_used, r.n_before, r.n_flagged) == (2, 2, 2)  # 60 d past eq, NaN time
    # nothing usable: NaN with a status, no exception
    r0 = progress_rate([0.0, 50.0], [-24.0, -11.0], D0, DEQ)
    assert math.isnan(r0.rate) and math.isnan(r0.half_life) and r0.n_used == 0
    assert "no usable points" in r0.status
    r1 = progress_rate([0.0, 10.0], [-24.0, -18.0], D0, DEQ)
    assert r1.rate == pytest.approx(math.log(2) / 10) and math.isnan(r1.stderr)
    # a rising ln(1 - F) gives a negative rate and no half-life
    rn = progress_rate([5.0, 10.0], [-14.0, -16.0], D0, DEQ, through_origin=False)
    assert rn.rate < 0 and math.isnan(rn.half_life) and "not positive" in rn.status
    # sd = 0 gives zero sd_log: falls back to unweighted and says so
    rz = progress_rate([5.0, 10.0, 20.0], [-20.0, -17.0, -14.0], D0, DEQ, sd=0.0)
    assert not rz.weighted and "unweighted" in rz.status


# ------------------------------------------------------------------ peel


def test_peel_recovers_two_well_separated_pools():
    y = two_pool(T)
    p = peel(T, y, D0, DEQ, pools=2)
    k = np.log(2) / np.array([3.0, 30.0])
    assert p.reliable and p.status == "ok"
    np.testing.assert_allclose(p.rates, k, rtol=0.2)
    np.testing.assert_allclose(p.fractions, [0.4, 0.6], rtol=0.2)
    assert p.fractions.sum() == pytest.approx(1.0, abs=1e-12)
    assert p.rates[0] > p.rates[1]
    assert len(p.split_times) == 1 and T[1] < p.split_times[0] < T[-1]
    # noise-free: the curve of the peel fits 1 - F closely
    assert p.sse < 1e-3


def test_peel_with_noise_still_close():
    rng = np.random.default_rng(11)
    y = two_pool(T) + rng.normal(0.0, 0.1, T.size)
    p = peel(T, y, D0, DEQ, pools=2)
    np.testing.assert_allclose(p.half_lives, [3.0, 30.0], rtol=0.3)


def test_peel_three_pools_noise_free():
    t = np.geomspace(0.1, 200.0, 40)
    hl = np.array([0.5, 5.0, 50.0])
    y = two_pool(t, half_lives=hl, fractions=(0.3, 0.3, 0.4))
    p = peel(t, y, D0, DEQ, pools=3)
    np.testing.assert_allclose(p.half_lives, hl, rtol=0.2)
    np.testing.assert_allclose(p.fractions, [0.3, 0.3, 0.4], rtol=0.2)


def test_peel_one_pool_is_loglinear_with_intercept():
    k = 0.04
    y = one_pool(T, k)
    p = peel(T, y, D0, DEQ, pools=1)
    assert p.rates[0] == pytest.approx(k, rel=1e-10)
    assert p.fractions.tolist() == [1.0]
    assert p.raw_fractions[0] == pytest.approx(1.0, rel=1e-10)


def test_peel_is_deterministic():
    rng = np.random.default_rng(2)
    y = two_pool(T) + rng.normal(0.0, 0.3, T.size)
    a = peel(T, y, D0, DEQ, pools=3)
    b = peel(T, y, D0, DEQ, pools=3)
    np.testing.assert_array_equal(a.rates, b.rates)
    np.testing.assert_array_equal(a.fractions, b.fractions)
    assert a.split_times == b.split_times and a.status == b.status


def test_peel_fallback_on_too_few_points():
    p = peel([0.0, 2.0, 10.0], [-24.0, -19.0, -14.0], D0, DEQ, pools=2)
    assert not p.reliable and "fallback" in p.status
    # log-spaced from 10/t_min to 1/t_max (t_min = 2, t_max = 10)
    np.testing.assert_allclose(p.rates, [5.0, 0.1], rtol=1e-12)
    np.testing.assert_allclose(p.fractions, [0.5, 0.5])


def test_peel_fallback_without_positive_times():
    p = peel([-1.0, 0.0], [-24.0, -24.0], D0, DEQ, pools=3)
    assert not p.reliable and p.n_used == 0 and math.isnan(p.sse)
    assert np.all(np.isfinite(p.rates)) and np.all(p.rates > 0)
    assert np.all(np.diff(p.rates) < 0)


def test_peel_flags_close_pools_unreliable():
    # one-pool data peeled as two pools: any admissible split gives nearly equal rates
    # or a clipped fraction
    y = one_pool(T, 0.05)
    p = peel(T, y, D0, DEQ, pools=2)
    assert not p.reliable
    assert np.all(np.isfinite(p.rates)) and p.rates[0] > p.rates[1] > 0


# ------------------------------------------------------------------ starting_rates


def _check_starts(starts, pools):
    assert isinstance(starts, tuple) and len(starts) >= 1
    for s in starts:
        assert s.shape == (pools,)
        assert np.all(np.isfinite(s)) and np.all(s > 0)
        assert np.all(np.diff(s) < 0), s  # strictly fastest first


@pytest.mark.parametrize("pools", [1, 2, 3, 4])
def test_starting_rates_on_pure_noise(pools):
    for seed in range(25):
        rng = np.random.default_rng(seed)
        t = np.sort(rng.uniform(0.0, 100.0, 15))
        y = rng.normal(0.0, 1.0, t.size)
        _check_starts(starting_rates(t, y, 0.5, -0.5, pools), pools)


@settings(max_examples=60, deadline=None)
@given(
    seed=st.integers(0, 2**32 - 1),
    n=st.integers(0, 30),
    pools=st.integers(1, 4),
)
def test_starting_rates_property(seed, n, pools):
    rng = np.random.default_rng(seed)
    t = rng.uniform(-5.0, 200.0, n)
    y = rng.normal(-18.0, 6.0, n)
    y[rng.uniform(size=n) < 0.1] = np.nan
    _check_starts(starting_rates(t, y, D0, DEQ, pools), pools)


def test_starting_rates_content():
    k = 0.05
    y = one_pool(T, k)
    s1 = starting_rates(T, y, D0, DEQ, 1)
    assert s1[0][0] == pytest.approx(k, rel=1e-10)  # the log-linear estimate comes first
    assert len(s1) == 6
    # grid: 5 rates from 3/t_min = 6 down to 0.3/t_max = 1/300
    grid = np.array([s[0] for s in s1[1:]])
    np.testing.assert_allclose(grid, np.geomspace(6.0, 0.3 / 90.0, 5), rtol=1e-12)
    s2 = starting_rates(T, two_pool(T), D0, DEQ, 2)
    assert len(s2) == 11  # peel + comb(5, 2)
    np.testing.assert_array_equal(s2[0], peel(T, two_pool(T), D0, DEQ, 2).rates)
    assert len(starting_rates(T, two_pool(T), D0, DEQ, 4)) == 6  # peel + comb(5, 4)


# ------------------------------------------------------------------ end values and table


def test_end_values_rules():
    t = np.array([-3.0, 0.0, 2.0, 5.0, 10.0, 20.0, 40.0, 60.0, 80.0, 90.0, 100.0, 110.0, 120.0])
    y = np.array([-24.2, -23.8, -22, -20, -18, -15, -13, -12.5, -12.2, -12.1, -11.9, -12.0, -11.8])
    ev = end_values(t, y)
    assert ev.delta0 == pytest.approx(-24.0) and ev.n_delta0 == 2
    # 11 post-switch points: ceil(0.2 * 11) = 3 last points
    assert ev.n_delta_eq == 3 and ev.delta_eq == pytest.approx(np.mean([-11.9, -12.0, -11.8]))
    # no pre-switch point: earliest point, and it is excluded from the equilibrium points
    ev2 = end_values([1.0, 5.0, 9.0], [-23.0, -15.0, -13.0])
    assert ev2.delta0 == -23.0 and "biased" in ev2.delta0_source
    assert ev2.n_delta_eq == 2 and ev2.delta_eq == pytest.approx(-14.0)
    ev3 = end_values([0.0, 5.0], [-24.0, -13.0])
    assert ev3.n_delta_eq == 1 and ev3.delta_eq == -13.0


def test_reaction_progress_table_estimates_and_attrs():
    y = two_pool(T)
    tab = reaction_progress(T, y)
    assert list(tab.columns) == [
        "time", "value", "F", "one_minus_F", "log_one_minus_F", "sd_log", "flag",
    ]
    assert len(tab) == T.size
    assert tab.attrs["delta0"] == pytest.approx(D0)  # the t = 0 point
    assert tab.attrs["delta0_source"].startswith("mean of 1 point(s) at t <= 0")
    # last ceil(0.2 * 19) = 4 points
    assert tab.attrs["delta_eq"] == pytest.approx(np.mean(y[-4:]))
    given = reaction_progress(T, y, D0, DEQ, sd=0.1)
    assert given.attrs["delta0_source"] == "given" and given.attrs["delta_eq"] == DEQ
    pv = progress_variable(T, y, D0, DEQ, sd=0.1)
    np.testing.assert_allclose(given["log_one_minus_F"], pv.log_one_minus_F)
    assert given["flag"].tolist() == pv.flag.tolist()


def test_reaction_progress_frame_input_not_mutated():
    df = pd.DataFrame(
        {"subject": "A", "time": [0.0, 10.0, 20.0], "value": [-24.0, -18.0, -15.0],
         "sd": [0.1, 0.1, 0.2]},
        index=[7, 8, 9],
    )
    before = df.copy()
    tab = reaction_progress(df, delta0=D0, delta_eq=DEQ)
    pd.testing.assert_frame_equal(df, before)
    assert tab.index.tolist() == [7, 8, 9]
    assert tab["sd_log"].iloc[1] == pytest.approx(0.1 / 6.0)  # sd / (y - delta_eq), by hand


def test_reaction_progress_errors():
    df = pd.DataFrame({"subject": ["A", "B"], "time": [0.0, 5.0], "value": [-24.0, -20.0]})
    with pytest.raises(DataError, match="several series: column 'subject'"):
        reaction_progress(df, delta0=D0, delta_eq=DEQ)
    with pytest.raises(DataError, match=r"missing column\(s\) \['value'\]"):
        reaction_progress(pd.DataFrame({"time": [1.0]}))
    with pytest.raises(DataError, match="y must be None"):
        reaction_progress(df.iloc[:1], [1.0])
    with pytest.raises(DataError, match="y is required"):
        reaction_progress([1.0, 2.0])
    with pytest.raises(DataError, match=r"delta0 \(-20.0; .*\) equals delta_eq \(-20.0"):
        reaction_progress([0.0, 5.0, 10.0], [-20.0, -20.0, -20.0])
    with pytest.raises(DataError, match="need at least 2 points"):
        reaction_progress([0.0, np.nan], [-24.0, -20.0])
    with pytest.raises(DataError, match="no point with finite value after the switch"):
        end_values([-1.0, 0.0], [-24.0, -24.0])
    with pytest.raises(DataError, match=r"eq_fraction must be in \(0, 1\], got 0"):
        end_values([0.0, 1.0], [1.0, 2.0], eq_fraction=0)
    with pytest.raises(DataError, match="min_eq_points must be an integer >= 1, got 0"):
        end_values([0.0, 1.0], [1.0, 2.0], min_eq_points=0)


# ------------------------------------------------------------------ bad input


def test_bad_input_errors():
    with pytest.raises(DataError, match="t and y must have the same length, got 3 times and 2"):
        progress_variable([1, 2, 3], [1, 2], D0, DEQ)
    with pytest.raises(DataError, match=r"delta0 \(-12.0\) and delta_eq \(-12.0\) must differ"):
        progress_rate([1, 2], [1, 2], -12.0, -12.0)
    with pytest.raises(DataError, match=r"delta0 \(3.0\) and delta_eq \(3.0\) must differ"):
        peel([1, 2], [1, 2], 3, 3.0)
    with pytest.raises(DataError, match="delta_eq must be a finite number, got nan"):
        progress_variable([1], [1], D0, float("nan"))
    with pytest.raises(DataError, match="delta0 must be a finite number, got 'a'"):
        progress_variable([1], [1], "a", DEQ)
    with pytest.raises(DataError, match="t must be an array of numbers"):
        progress_variable(["x", "y"], [1, 2], D0, DEQ)
    with pytest.raises(DataError, match=r"y must be one-dimensional, got .* shape \(2, 1\)"):
        progress_variable([1, 2], [[1], [2]], D0, DEQ)
    with pytest.raises(DataError, match="sd must be finite and >= 0 for every point, got -0.1 at"):
        progress_variable([1, 2], [1, 2], D0, DEQ, sd=[0.1, -0.1])
    with pytest.raises(DataError, match="sd must be a number or have one value per point"):
        progress_variable([1, 2], [1, 2], D0, DEQ, sd=[0.1, 0.1, 0.1])
    with pytest.raises(DataError, match="sd must be >= 0, got -1"):
        progress_variable([1, 2], [1, 2], D0, DEQ, sd=-1)
    with pytest.raises(DataError, match="sd_delta_eq must be >= 0, got -0.2"):
        progress_variable([1, 2], [1, 2], D0, DEQ, sd_delta_eq=-0.2)
    with pytest.raises(DataError, match="absolute_sigma=True needs sd"):
        progress_rate([1, 2], [-20, -18], D0, DEQ, absolute_sigma=True)
    with pytest.raises(DataError, match="through_origin must be True or False, got 'yes'"):
        progress_rate([1, 2], [-20, -18], D0, DEQ, through_origin="yes")


@pytest.mark.parametrize("pools", [0, 5, -1, 2.5, True, "2"])
def test_pools_outside_range(pools):
    with pytest.raises(DataError, match=f"pools must be an integer from 1 to 4, got {pools!r}"):
        peel(T, two_pool(T), D0, DEQ, pools=pools)
    with pytest.raises(DataError, match="pools must be an integer from 1 to 4"):
        starting_rates(T, two_pool(T), D0, DEQ, pools)


def test_peel_and_starts_option_errors():
    with pytest.raises(DataError, match="min_points must be an integer >= 2, got 1"):
        peel(T, two_pool(T), D0, DEQ, min_points=1)
    with pytest.raises(DataError, match=r"min_fraction must be > 0 and < 1/pools = 0.5, got 0.6"):
        peel(T, two_pool(T), D0, DEQ, min_fraction=0.6)
    with pytest.raises(DataError, match="n_grid must be an integer >= 2, got 1"):
        starting_rates(T, two_pool(T), D0, DEQ, 2, n_grid=1)


def test_pandas_nullable_input_becomes_nan_flag():
    t = pd.Series([1.0, 2.0, None], dtype="Float64")
    y = pd.Series([-20.0, None, -15.0], dtype="Float64")
    pv = progress_variable(t, y, D0, DEQ)
    assert pv.flag.tolist() == ["ok", "nonfinite", "nonfinite"]
