"""Tests of model choice: :func:`isoturnover.compare` and :func:`isoturnover.lr_test`.

All data are invented: seeded simulations of a one-pool (or two-pool) diet switch from
δ0 = −25 ‰ to δ_eq = −12 ‰ with normal analytic noise, sampled at 16 times.
"""

from __future__ import annotations

import copy
import dataclasses
import math
import time

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

import isoturnover as iso
from isoturnover.errors import DataError

# Sampling design used throughout (days after the switch); invented.
TIMES = np.array([0, 0.5, 1, 2, 3, 4, 6, 8, 10, 14, 18, 24, 32, 45, 60, 90], dtype=float)
D0, DEQ = -25.0, -12.0
LN2 = math.log(2.0)

COLUMNS = ["label", "structure", "pools", "n_params", "nobs", "rss", "aic", "aicc", "bic",
           "delta_aicc", "weight", "best"]


def one_pool(t, half_life=12.0):
    return DEQ + (D0 - DEQ) * np.exp(-LN2 / half_life * t)


def two_pools(t, f1=0.4, hl1=3.0, hl2=30.0):
    return DEQ + (D0 - DEQ) * (f1 * np.exp(-LN2 / hl1 * t)
                               + (1 - f1) * np.exp(-LN2 / hl2 * t))


@pytest.fixture(scope="module")
def data():
    rng = np.random.default_rng(20240611)
    return TIMES.copy(), one_pool(TIMES) + rng.normal(0.0, 0.2, TIMES.size)


@pytest.fixture(scope="module")
def fits(data):
    t, y = data
    f1 = iso.TurnoverModel(1).fit(t, y, warn=False)
    f2 = iso.TurnoverModel(2).fit(t, y, warn=False)
    fc = iso.TurnoverModel(2, structure="chain").fit(t, y, warn=False)
    return f1, f2, fc


def _rss_by_hand(fit, t, y, sigma=None):
    w = 1.0 if sigma is None else 1.0 / np.asarray(sigma)
    return float(np.sum((w * (y - fit.predict(t))) ** 2))


# ----------------------------------------------------------------------------------------
# compare: layout
# ----------------------------------------------------------------------------------------
def test_columns_order_and_one_row_per_fit_in_given_order(fits):
    f1, f2, fc = fits
    given = [f2, fc, f1]
    df = iso.compare(given)
    assert list(df.columns) == COLUMNS
    assert len(df) == 3
    assert df["label"].tolist() == ["2 pools", "chain", "1 pool"]
    assert df["structure"].tolist() == ["parallel", "chain", "parallel"]
    assert df["pools"].iloc[0] == 2 and df["pools"].iloc[2] == 1
    assert math.isnan(df["pools"].iloc[1])          # a chain has steps, not parallel pools
    for i, f in enumerate(given):
        row = df.iloc[i]
        assert row["rss"] == pytest.approx(f.rss, rel=1e-12)
        assert row["aic"] == pytest.approx(f.aic, rel=1e-12)
        assert row["aicc"] == pytest.approx(f.aicc, rel=1e-12)
        assert row["bic"] == pytest.approx(f.bic, rel=1e-12)
        assert row["nobs"] == TIMES.size
        # σ estimated: the residual variance counts as a parameter
        assert row["n_params"] == f.nvarys + 1 == f.n_criteria_params
    assert df["best"].sum() == 1
    assert df.attrs["criterion"] == "aicc"


def test_labels_argument(fits):
    f1, f2, _ = fits
    df = iso.compare([f1, f2], labels=["simple", "complex"])
    assert df["label"].tolist() == ["simple", "complex"]
    with pytest.raises(ValueError, match=r"'labels' has 1 names for 2 fits"):
        iso.compare([f1, f2], labels=["only one"])


# ----------------------------------------------------------------------------------------
# compare: the numbers, by hand
# ----------------------------------------------------------------------------------------
def test_akaike_weights_by_hand(fits):
    # Akaike weights w_i = exp(-Δ_i/2) / Σ_j exp(-Δ_j/2), Δ_i = AICc_i - min AICc
    # (Burnham & Anderson 2002, Model Selection and Multimodel Inference, 2nd ed., the section
    # on Akaike weights; section number not given here: from memory).
    df = iso.compare(list(fits))
    aicc = np.array([f.aicc for f in fits])
    delta = aicc - aicc.min()
    w = np.exp(-delta / 2) / np.exp(-delta / 2).sum()
    np.testing.assert_allclose(df["delta_aicc"], delta, rtol=0, atol=1e-10)
    np.testing.assert_allclose(df["weight"], w, rtol=1e-12)
    assert df["weight"].sum() == pytest.approx(1.0, abs=1e-12)
    assert df["best"].tolist() == (aicc == aicc.min()).tolist()
    assert df.loc[df["best"], "delta_aicc"].iloc[0] == 0.0


@pytest.mark.parametrize("criterion", ["aic", "bic"])
def test_other_criteria_drive_weights(fits, criterion):
    df = iso.compare(list(fits), criterion=criterion)
    crit = np.array([getattr(f, criterion) for f in fits])
    delta = crit - crit.min()
    w = np.exp(-delta / 2) / np.exp(-delta / 2).sum()        # Burnham & Anderson 2002
    np.testing.assert_allclose(df[f"delta_{criterion}"], delta, atol=1e-10)
    np.testing.assert_allclose(df["weight"], w, rtol=1e-12)
    # delta_aicc stays the AICc difference whatever the criterion
    aicc = np.array([f.aicc for f in fits])
    np.testing.assert_allclose(df["delta_aicc"], aicc - aicc.min(), atol=1e-10)
    assert df.attrs["criterion"] == criterion
    assert int(np.argmax(df["best"])) == int(np.argmin(crit))


def test_criteria_formulas_by_hand_sigma_estimated(data, fits):
    # Least squares with σ estimated (Burnham & Anderson 2002, the least-squares case of AIC;
    # Hurvich & Tsai 1989, Biometrika 76:297-307, for AICc; Schwarz 1978, Ann. Stat.
    # 6:461-464, for BIC):
    #   AIC = n ln(RSS/n) + 2K, AICc = AIC + 2K(K+1)/(n-K-1), BIC = n ln(RSS/n) + K ln n,
    # K = free parameters + 1 (the residual variance).
    t, y = data
    n = t.size
    df = iso.compare(list(fits))
    for i, f in enumerate(fits):
        rss = _rss_by_hand(f, t, y)
        k = f.nvarys + 1
        aic = n * math.log(rss / n) + 2 * k
        assert df["rss"].iloc[i] == pytest.approx(rss, rel=1e-10)
        assert df["aic"].iloc[i] == pytest.approx(aic, rel=1e-10)
        assert df["aicc"].iloc[i] == pytest.approx(aic + 2 * k * (k + 1) / (n - k - 1), rel=1e-10)
        assert df["bic"].iloc[i] == pytest.approx(n * math.log(rss / n) + k * math.log(n),
                                                  rel=1e-10)
    # free parameters: 1 pool delta0, delta_eq, k1; 2 pools + k2, f1; chain delta0,
    # delta_eq, k1, k2
    assert df["n_params"].tolist() == [4, 6, 5]


def test_criteria_formulas_by_hand_weighted(data):
    # relative weights 1/σ²: RSS is the weighted sum; formulas as above
    t, y = data
    sigma = np.where(t < 10, 0.1, 0.3)
    f = iso.TurnoverModel(1).fit(t, y, sigma, warn=False)
    n, k = t.size, f.nvarys + 1
    rss = _rss_by_hand(f, t, y, sigma)
    assert f.rss == pytest.approx(rss, rel=1e-10)
    aic = n * math.log(rss / n) + 2 * k
    row = iso.compare([f]).iloc[0]
    assert row["aic"] == pytest.approx(aic, rel=1e-10)
    assert row["aicc"] == pytest.approx(aic + 2 * k * (k + 1) / (n - k - 1), rel=1e-10)
    assert row["weight"] == 1.0 and bool(row["best"])


def test_criteria_formulas_by_hand_sigma_known(data):
    # σ known: -2 ln L = χ² + const, so AIC = χ² + 2k with k = free parameters (no variance
    # parameter) (Burnham & Anderson 2002; AIC is −2 ln L + 2k with the known-σ Gaussian
    # log-likelihood); AICc and BIC with the same k.
    t, y = data
    sigma = np.full(t.size, 0.2)
    fits = [iso.TurnoverModel(p).fit(t, y, sigma, absolute_sigma=True, warn=False)
            for p in (1, 2)]
    df = iso.compare(fits)
    n = t.size
    for i, f in enumerate(fits):
        chi2 = _rss_by_hand(f, t, y, sigma)
        k = f.nvarys
        assert df["n_params"].iloc[i] == k
        assert df["rss"].iloc[i] == pytest.approx(chi2, rel=1e-10)
        assert df["aic"].iloc[i] == pytest.approx(chi2 + 2 * k, rel=1e-10)
        assert df["aicc"].iloc[i] == pytest.approx(chi2 + 2 * k + 2 * k * (k + 1) / (n - k - 1),
                                                   rel=1e-10)
        assert df["bic"].iloc[i] == pytest.approx(chi2 + k * math.log(n), rel=1e-10)


def test_information_criteria_match_statsmodels_on_linear_fits(data):
    # With k1 fixed, one pool is linear in (delta0, delta_eq):
    #   y = delta0·e + delta_eq·(1 − e), e = exp(−k1 t),
    # and fixing delta0 too leaves y + 25·e = delta_eq·(1 − e). Independent check:
    # statsmodels OLS / WLS (llf-based aic = −2 llf + 2 rank, bic = −2 llf + rank ln n).
    # Our criteria count the variance too and drop the 2π constant, so the absolute values
    # differ by a known constant; differences between nested fits must agree exactly.
    t, y = data
    n = t.size
    k = LN2 / 12.0
    e = np.exp(-k * t)
    m = iso.TurnoverModel(1)
    full = m.fit(t, y, fixed={"k1": k}, warn=False)
    nested = m.fit(t, y, fixed={"k1": k, "delta0": D0}, warn=False)
    ols_full = sm.OLS(y, np.column_stack([e, 1 - e])).fit()
    ols_nested = sm.OLS(y - D0 * e, (1 - e)[:, None]).fit()
    assert full.rss == pytest.approx(ols_full.ssr, rel=1e-9)
    assert nested.rss == pytest.approx(ols_nested.ssr, rel=1e-9)
    assert full.values["delta0"] == pytest.approx(ols_full.params[0], abs=1e-8)
    assert full.values["delta_eq"] == pytest.approx(ols_full.params[1], abs=1e-8)
    assert full.aic - nested.aic == pytest.approx(ols_full.aic - ols_nested.aic, abs=1e-8)
    assert full.bic - nested.bic == pytest.approx(ols_full.bic - ols_nested.bic, abs=1e-8)
    # the constant: ours − statsmodels = 2 − n(1 + ln 2π) for AIC, ln n − n(1 + ln 2π) for BIC
    c = n * (1 + math.log(2 * math.pi))
    assert full.aic - ols_full.aic == pytest.approx(2 - c, abs=1e-8)
    assert full.bic - ols_full.bic == pytest.approx(math.log(n) - c, abs=1e-8)
    # compare() reports these same numbers
    df = iso.compare([nested, full])
    assert df["aic"].iloc[1] - df["aic"].iloc[0] == pytest.approx(
        ols_full.aic - ols_nested.aic, abs=1e-8)
    # weighted: statsmodels WLS with weights 1/σ² (its llf adds ½Σ ln w, which cancels in
    # differences between fits of the same data)
    sigma = np.where(t < 10, 0.1, 0.3)
    wfull = m.fit(t, y, sigma, fixed={"k1": k}, warn=False)
    wnested = m.fit(t, y, sigma, fixed={"k1": k, "delta0": D0}, warn=False)
    wls_full = sm.WLS(y, np.column_stack([e, 1 - e]), weights=1 / sigma**2).fit()
    wls_nested = sm.WLS(y - D0 * e, (1 - e)[:, None], weights=1 / sigma**2).fit()
    assert wfull.rss == pytest.approx(wls_full.ssr, rel=1e-9)
    assert wfull.aic - wnested.aic == pytest.approx(wls_full.aic - wls_nested.aic, abs=1e-8)
    assert wfull.bic - wnested.bic == pytest.approx(wls_full.bic - wls_nested.bic, abs=1e-8)


# ----------------------------------------------------------------------------------------
# compare: refusals
# ----------------------------------------------------------------------------------------
def test_refuses_fits_of_different_data(data, fits):
    t, y = data
    other = iso.TurnoverModel(1).fit(t, y + 0.01, warn=False)
    with pytest.raises(DataError, match=r"same data .* 2 different data sets"):
        iso.compare([fits[0], other])
    # the same values with weights are different data too
    weighted = iso.TurnoverModel(1).fit(t, y, np.full(t.size, 0.2), warn=False)
    with pytest.raises(DataError, match=r"same data"):
        iso.compare([fits[0], weighted])
    # DataError is a ValueError (STYLE conventions)
    with pytest.raises(ValueError):
        iso.compare([fits[0], other])


def test_refuses_mixing_known_and_estimated_sigma(data):
    t, y = data
    sigma = np.full(t.size, 0.2)
    known = iso.TurnoverModel(1).fit(t, y, sigma, absolute_sigma=True, warn=False)
    estimated = iso.TurnoverModel(2).fit(t, y, sigma, warn=False)
    with pytest.raises(DataError, match=r"σ known \(absolute_sigma=True\).*σ estimated"):
        iso.compare([known, estimated])


def test_unknown_criterion_and_bad_arguments(fits):
    with pytest.raises(ValueError, match=r"'criterion' must be one of 'aicc', 'aic', 'bic'; "
                                         r"got 'AICc'"):
        iso.compare(list(fits), criterion="AICc")
    with pytest.raises(ValueError, match=r"'fits' is empty"):
        iso.compare([])
    with pytest.raises(iso.DataError, match=r"positions \[1\] are not fits"):
        iso.compare([fits[0], "2 pools"])


# ----------------------------------------------------------------------------------------
# compare: growth curves
# ----------------------------------------------------------------------------------------
def _growth_module():
    growth = pytest.importorskip("isoturnover.growth")
    if not hasattr(growth, "fit_growth"):
        pytest.skip("isoturnover.growth has no fit_growth")
    return growth


@pytest.fixture(scope="module")
def growth_fits():
    growth = _growth_module()
    # invented logistic growth: W∞ = 50 g, k = 0.1 /d, inflection at 20 d, 3 % lognormal noise
    rng = np.random.default_rng(11)
    t = np.linspace(0.0, 60.0, 15)
    w = 50.0 / (1.0 + np.exp(-0.1 * (t - 20.0))) * np.exp(rng.normal(0.0, 0.03, t.size))
    fits = [growth.fit_growth(t, w, c) for c in ("logistic", "gompertz", "exponential")]
    return t, w, fits


def test_compare_growth_fits(growth_fits):
    _, _, fits = growth_fits
    df = iso.compare(fits)
    assert list(df.columns) == COLUMNS
    assert df["structure"].tolist() == ["logistic", "gompertz", "exponential"]
    assert df["pools"].isna().all()
    np.testing.assert_allclose(df["aicc"], [f.aicc for f in fits], rtol=1e-12)
    d = df["aicc"].to_numpy() - df["aicc"].min()
    np.testing.assert_allclose(df["weight"], np.exp(-d / 2) / np.exp(-d / 2).sum(),
                               rtol=1e-12)                    # Burnham & Anderson 2002
    # the simulated curve is logistic: it should win clearly over the exponential
    assert df.loc[df["best"], "structure"].iloc[0] == "logistic"
    assert df["weight"].iloc[2] < 1e-6


def test_compare_refuses_growth_fits_on_other_scales(growth_fits):
    growth = _growth_module()
    t, w, fits = growth_fits
    natural = growth.fit_growth(t, w, "logistic", scale="natural")  # fits W, not ln W
    with pytest.raises(DataError, match=r"same data"):
        iso.compare([fits[0], natural])


def test_growth_fit_criteria_count_the_residual_variance(growth_fits):
    # Burnham & Anderson 2002 (least-squares case): with σ estimated, K = p + 1.
    _, _, fits = growth_fits
    df = iso.compare(fits)
    for i, f in enumerate(fits):
        n, k = f.nobs, f.nvarys + 1
        aic = n * math.log(f.rss / n) + 2 * k
        assert df["n_params"].iloc[i] == k
        assert df["aicc"].iloc[i] == pytest.approx(aic + 2 * k * (k + 1) / (n - k - 1),
                                                   rel=1e-10)


# ----------------------------------------------------------------------------------------
# lr_test
# ----------------------------------------------------------------------------------------
def test_lr_test_statistic_p_value_and_counts(data, fits):
    t, y = data
    f1, f2, _ = fits
    res = iso.lr_test(f1, f2, n_boot=19, rng=3)
    n = t.size
    # T = n ln(RSS0/RSS1) for Gaussian errors with σ estimated (−2 ln Λ)
    assert res.statistic == pytest.approx(n * math.log(f1.rss / f2.rss), rel=1e-12)
    assert res.statistic >= 0
    assert 0 < res.p_value <= 1
    assert res.n_boot == 19
    assert res.n_failed == 0
    assert res.n_used + res.n_failed == res.n_boot
    assert res.null_distribution.shape == (res.n_used,)
    assert np.all(res.null_distribution >= 0)
    # p = (1 + #{T* >= T}) / (1 + B)  (Monte Carlo p-value;
    # Davison & Hinkley 1997, Bootstrap Methods and their Application, ch. 4 — from memory)
    k = int(np.sum(res.null_distribution >= res.statistic * (1 - 1e-12)))
    assert res.p_value == pytest.approx((1 + k) / (1 + res.n_used), rel=1e-12)
    assert "1 pool vs 2 pools" in str(res) and "19 replicates used" in str(res)


def test_lr_test_statistic_is_never_negative(fits):
    # A complex fit that missed its optimum (RSS above the nested simple model's; simulated
    # here on a copy) gives T = 0 and p = 1, as a replicate with the same miss does.
    f1, f2, _ = fits
    missed = copy.copy(f2)
    missed.rss = f1.rss * 1.05
    res = iso.lr_test(f1, missed, n_boot=5, rng=0)
    assert res.statistic == 0.0
    assert res.p_value == 1.0


def test_lr_test_is_reproducible_with_a_seed(fits):
    f1, f2, _ = fits
    a = iso.lr_test(f1, f2, n_boot=9, rng=42)
    b = iso.lr_test(f1, f2, n_boot=9, rng=np.random.default_rng(42))
    c = iso.lr_test(f1, f2, n_boot=9, rng=43)
    np.testing.assert_array_equal(a.null_distribution, b.null_distribution)
    assert a.p_value == b.p_value
    assert not np.array_equal(a.null_distribution, c.null_distribution)


def test_lr_test_sigma_known_uses_chi2_difference(data):
    t, y = data
    sigma = np.full(t.size, 0.2)
    f1 = iso.TurnoverModel(1).fit(t, y, sigma, absolute_sigma=True, warn=False)
    f2 = iso.TurnoverModel(2).fit(t, y, sigma, absolute_sigma=True, warn=False)
    res = iso.lr_test(f1, f2, n_boot=9, rng=1)
    # −2 ln Λ = χ²0 − χ²1 when σ is known
    assert res.statistic == pytest.approx(f1.rss - f2.rss, rel=1e-10)
    assert res.statistic >= 0 and 0 < res.p_value <= 1


def test_lr_test_detects_two_pools():
    # two pools, fractions 0.4/0.6, half-lives 3 and 30 d: no replicate of the one-pool fit
    # comes near the observed statistic, so p is the smallest possible, 1/(B + 1)
    rng = np.random.default_rng(5)
    y = two_pools(TIMES) + rng.normal(0.0, 0.2, TIMES.size)
    f1 = iso.TurnoverModel(1).fit(TIMES, y, warn=False)
    f2 = iso.TurnoverModel(2).fit(TIMES, y, warn=False)
    res = iso.lr_test(f1, f2, n_boot=19, rng=7)
    assert res.p_value == pytest.approx(1 / 20)
    assert res.statistic > res.null_distribution.max()


def test_lr_test_counts_failed_replicates(fits, monkeypatch):
    # Make every third refit of the complex model fail (infinite cost): they are counted in
    # n_failed and left out of the reference distribution.
    from isoturnover import engine as model_mod

    original = model_mod.Engine.quick_fit
    calls = {"n": 0}

    def flaky(self, *args, **kwargs):
        sol = original(self, *args, **kwargs)
        if self.kin.pools == 2:
            calls["n"] += 1
            if calls["n"] % 3 == 0:
                return dataclasses.replace(sol, cost=math.inf)
        return sol

    monkeypatch.setattr(model_mod.Engine, "quick_fit", flaky)
    f1, f2, _ = fits
    res = iso.lr_test(f1, f2, n_boot=12, rng=0)
    assert calls["n"] == 12
    assert res.n_failed == 4
    assert res.n_used == 8
    assert "4 failed" in str(res)


def test_lr_test_refusals(data, fits):
    t, y = data
    f1, f2, _ = fits
    with pytest.raises(ValueError, match=r"'complex' must have more free parameters than "
                                         r"'simple'; got 3 and 5"):
        iso.lr_test(f2, f1, n_boot=5)
    with pytest.raises(ValueError, match=r"more free parameters.*got 3 and 3"):
        iso.lr_test(f1, f1, n_boot=5)
    with pytest.raises(ValueError, match=r"'n_boot' must be a positive integer; got 0"):
        iso.lr_test(f1, f2, n_boot=0)
    with pytest.raises(ValueError, match=r"'n_boot' must be a positive integer; got 9.5"):
        iso.lr_test(f1, f2, n_boot=9.5)
    other = iso.TurnoverModel(2).fit(t, y - 0.05, warn=False)
    with pytest.raises(DataError, match=r"same data"):
        iso.lr_test(f1, other, n_boot=5)


@pytest.mark.slow
def test_lr_test_false_positive_rate_on_one_pool_data():
    # Size of the parametric-bootstrap LRT at the 5 % level: 100 seeded one-pool data sets
    # (half-life 12 d, σ = 0.2 ‰, the 16-sample design). With B = 59 replicates the test
    # rejects when at most 2 replicates reach the observed statistic, an exact 3/60 = 5 %
    # test when the null distribution is continuous (Davison & Hinkley 1997, ch. 4, on
    # Monte Carlo tests — from memory).
    # The band 2–8 % allows about ±1.4 binomial sd (sd = sqrt(.05·.95/100) ≈ 2.2 %).
    rng = np.random.default_rng(1977)
    mu = one_pool(TIMES)
    m1, m2 = iso.TurnoverModel(1), iso.TurnoverModel(2)
    rejections, failed = 0, 0
    start = time.perf_counter()
    for _ in range(100):
        y = mu + rng.normal(0.0, 0.2, TIMES.size)
        f1 = m1.fit(TIMES, y, warn=False)
        f2 = m2.fit(TIMES, y, warn=False)
        res = iso.lr_test(f1, f2, n_boot=59, rng=rng)
        rejections += res.p_value <= 0.05
        failed += res.n_failed
    elapsed = time.perf_counter() - start
    rate = rejections / 100
    print(f"bootstrap LRT false-positive rate {rate:.2f} ({failed} failed replicates, "
          f"{elapsed:.0f} s)")
    assert 0.02 <= rate <= 0.08
    assert failed == 0


def test_compare_returns_a_new_frame_each_time(fits):
    a = iso.compare(list(fits))
    b = iso.compare(list(fits))
    pd.testing.assert_frame_equal(a, b)
    a.loc[0, "weight"] = -1.0
    assert iso.compare(list(fits))["weight"].iloc[0] >= 0
