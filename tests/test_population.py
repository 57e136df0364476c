"""Population estimates: random-effects meta-analysis and meta-regression.

Checked against independent implementations (statsmodels' ``combine_effects`` and ``WLS``),
a restricted likelihood written here from its definition and maximised with scipy, values
worked by hand, and seeded simulations.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import linalg, optimize, stats

from isoturnover.errors import DataError, DataWarning
from isoturnover.population import (
    PopulationEstimate,
    RandomEffects,
    population_estimate,
    random_effects,
)

sm = pytest.importorskip("statsmodels.api")
meta = pytest.importorskip("statsmodels.stats.meta_analysis")


def _heterogeneous(seed, k=10, tau=0.5):
    """Seeded per-animal estimates with clear spread between animals (Q > k − 1)."""
    rng = np.random.default_rng(seed)
    s = rng.uniform(0.1, 0.4, k)
    y = 2.5 + rng.normal(0, tau, k) + rng.normal(0, s)
    return y, s


# ------------------------------------------------------------------ statsmodels: DL and PM

@pytest.mark.parametrize("seed", [1, 2, 3])
@pytest.mark.parametrize("method", ["dl", "pm"])
def test_matches_statsmodels_combine_effects(method, seed):
    # Source: statsmodels.stats.meta_analysis.combine_effects (an independent implementation;
    # method_re="dl" is DerSimonian-Laird, "pm" Paule-Mandel iterated to a tight tolerance).
    y, s = _heterogeneous(seed)
    kw = {"atol": 1e-13, "maxiter": 1000} if method == "pm" else {}
    ref = meta.combine_effects(y, s ** 2, method_re=method, use_t=False, **kw)
    assert ref.q > len(y) - 1  # statsmodels' DL is not truncated at 0: stay where it is > 0
    ours = random_effects(y, s, method=method)
    hk = random_effects(y, s, method=method, adjust="hksj")
    assert ours.tau2 == pytest.approx(ref.tau2, abs=1e-8)
    assert ours.estimate == pytest.approx(ref.mean_effect_re, abs=1e-8)
    assert ours.stderr == pytest.approx(ref.sd_eff_w_re, abs=1e-8)
    _, ci_re, _, ci_hksj = ref.conf_int(alpha=0.05, use_t=False)
    assert (ours.lower, ours.upper) == pytest.approx(tuple(ci_re), abs=1e-8)
    # HKSJ: statsmodels' "WLS scale" interval of the random-effects mean, t on k-1 df
    _, _, _, ci_hksj = ref.conf_int(alpha=0.05, use_t=True)
    assert hk.stderr == pytest.approx(ref.sd_eff_w_re_hksj, abs=1e-8)
    assert (hk.lower, hk.upper) == pytest.approx(tuple(ci_hksj), abs=1e-8)
    assert ours.q == pytest.approx(ref.q, abs=1e-8)
    assert ours.i2 == pytest.approx(ref.i2, abs=1e-8)
    assert ours.q_p == pytest.approx(ref.test_homogeneity().pvalue, abs=1e-10)


# ------------------------------------------------------------------ REML: direct maximum

def _restricted_loglik(tau2, y, v, X):
    """REML log-likelihood from its definition (Harville 1974): the log density of the
    error contrasts A'y, A an orthonormal basis of the null space of X', under
    A'y ~ N(0, A'(V + tau2 I)A). Written here independently of the library."""
    A = linalg.null_space(X.T)
    cov = A.T @ np.diag(v + tau2) @ A
    return stats.multivariate_normal(mean=np.zeros(A.shape[1]), cov=cov).logpdf(A.T @ y)


def _direct_reml(y, v, X):
    hi = 10.0 * (np.var(y) + np.max(v))
    res = optimize.minimize_scalar(lambda t: -_restricted_loglik(t, y, v, X),
                                   bounds=(0.0, hi), method="bounded",
                                   options={"xatol": 1e-12})
    return res.x


@pytest.mark.parametrize("seed", [4, 5, 6])
def test_reml_equals_direct_maximisation(seed):
    # Source: scipy.optimize.minimize_scalar on the restricted likelihood written above.
    y, s = _heterogeneous(seed, k=9)
    X = np.ones((y.size, 1))
    tau2 = _direct_reml(y, s ** 2, X)
    res = random_effects(y, s, method="reml")
    assert res.tau2 == pytest.approx(tau2, abs=1e-6)
    w = 1 / (s ** 2 + tau2)  # the pooled mean at that tau2, weighted mean by hand
    assert res.estimate == pytest.approx(np.sum(w * y) / np.sum(w), abs=1e-6)


def test_reml_meta_regression_equals_direct_maximisation():
    # Source: scipy.optimize.minimize_scalar on the restricted likelihood written above,
    # with a covariate in X.
    rng = np.random.default_rng(7)
    k = 14
    mass = rng.uniform(10, 40, k)
    s = rng.uniform(0.1, 0.3, k)
    y = 2.0 + 0.03 * mass + rng.normal(0, 0.3, k) + rng.normal(0, s)
    X = np.column_stack([np.ones(k), mass])
    tau2 = _direct_reml(y, s ** 2, X)
    res = random_effects(y, s, moderators=pd.DataFrame({"mass": mass}))
    assert tau2 > 1e-3
    assert res.tau2 == pytest.approx(tau2, abs=1e-6)


def test_reml_at_zero_when_direct_maximum_is_at_zero():
    # Source: the restricted likelihood above, maximised on [0, hi] by scipy.
    y = np.array([1.0, 1.05, 0.98, 1.02, 0.99])
    s = np.full(5, 0.2)
    assert _direct_reml(y, s ** 2, np.ones((5, 1))) < 1e-6
    assert random_effects(y, s, method="reml").tau2 == 0.0


# ------------------------------------------------------------------ meta-regression vs WLS

def _moderators(k, rng):
    return pd.DataFrame({"temperature": rng.uniform(5, 20, k),
                         "sex": rng.choice(["F", "M"], k),
                         "site": np.array(["a", "b", "c"] * k)[:k]})


def _manual_design(mods):
    # treatment coding against the first (sorted) level, written by hand
    return np.column_stack([np.ones(len(mods)), mods["temperature"],
                            (mods["sex"] == "M").astype(float),
                            (mods["site"] == "b").astype(float),
                            (mods["site"] == "c").astype(float)])


@pytest.mark.parametrize("adjust", [None, "hksj"])
def test_meta_regression_with_fixed_tau2_equals_wls(adjust):
    # Source: statsmodels WLS with weights 1/(v_i + tau2): "fixed scale" (scale 1) gives the
    # normal standard errors, the default (estimated scale = Q(tau2)/(k-p)) the HKSJ ones.
    rng = np.random.default_rng(11)
    k = 15
    mods = _moderators(k, rng)
    s = rng.uniform(0.1, 0.3, k)
    y = 1.0 + 0.05 * mods["temperature"].to_numpy() + rng.normal(0, 0.2, k)
    X = _manual_design(mods)
    tau2 = 0.037
    res = random_effects(y, s, moderators=mods, tau2=tau2, adjust=adjust)
    wls = sm.WLS(y, X, weights=1 / (s ** 2 + tau2))
    fit = wls.fit() if adjust == "hksj" else wls.fit(cov_type="fixed scale")
    c = res.coefficients
    assert list(c.index) == ["intercept", "temperature", "sex[M]", "site[b]", "site[c]"]
    np.testing.assert_allclose(c["estimate"], fit.params, rtol=0, atol=1e-10)
    np.testing.assert_allclose(c["stderr"], fit.bse, rtol=0, atol=1e-10)
    stat = "t" if adjust == "hksj" else "z"
    np.testing.assert_allclose(c[stat], fit.tvalues, rtol=0, atol=1e-8)
    np.testing.assert_allclose(c["p"], fit.pvalues, rtol=0, atol=1e-10)
    lo, hi = np.asarray(fit.conf_int(0.05)).T
    np.testing.assert_allclose(c["lower"], lo, rtol=0, atol=1e-10)
    np.testing.assert_allclose(c["upper"], hi, rtol=0, atol=1e-10)
    assert res.method == "fixed"


@pytest.mark.parametrize("method", ["reml", "dl", "pm"])
def test_meta_regression_equals_wls_at_estimated_tau2(method):
    # Source: statsmodels WLS with weights 1/(v_i + tau2_hat), tau2_hat the library's own.
    rng = np.random.default_rng(12)
    k = 18
    mods = _moderators(k, rng)
    s = rng.uniform(0.1, 0.3, k)
    y = 1.0 + 0.05 * mods["temperature"].to_numpy() + rng.normal(0, 0.3, k)
    res = random_effects(y, s, moderators=mods, method=method)
    fit = sm.WLS(y, _manual_design(mods), weights=1 / (s ** 2 + res.tau2)).fit(
        cov_type="fixed scale")
    np.testing.assert_allclose(res.coefficients["estimate"], fit.params, atol=1e-10)
    np.testing.assert_allclose(res.coefficients["stderr"], fit.bse, atol=1e-10)
    # predictions at the animals' own covariates: WLS's fitted mean and its standard error
    pred = res.predict(mods)
    frame = fit.get_prediction(_manual_design(mods)).summary_frame()
    np.testing.assert_allclose(pred["estimate"], frame["mean"], atol=1e-10)
    np.testing.assert_allclose(pred["stderr"], frame["mean_se"], atol=1e-10)
    # R2 analog (Raudenbush 2009): (tau2_0 - tau2) / tau2_0 from the intercept-only model
    tau2_0 = random_effects(y, s, method=method).tau2
    assert res.tau2_null == pytest.approx(tau2_0, rel=1e-12)
    if tau2_0 > 0:
        assert res.r2 == pytest.approx(max(0.0, (tau2_0 - res.tau2) / tau2_0), abs=1e-12)
    # omnibus Wald test of the moderators, by hand from the coefficients and covariance
    b = fit.params[1:]
    qm = b @ np.linalg.solve(fit.cov_params()[1:, 1:], b)
    assert res.qm == pytest.approx(qm, rel=1e-9)
    assert res.qm_p == pytest.approx(stats.chi2.sf(qm, 4), rel=1e-9)


def test_prediction_interval_for_new_animal_with_moderators():
    # Source: Higgins, Thompson & Spiegelhalter (2009), generalised: x0'b +- t_{k-p-1}
    # sqrt(tau2 + x0' V x0), computed here by hand from the fit's coefficients.
    rng = np.random.default_rng(13)
    k = 12
    mods = pd.DataFrame({"mass": rng.uniform(10, 30, k)})
    s = rng.uniform(0.1, 0.2, k)
    y = 3 + 0.02 * mods["mass"].to_numpy() + rng.normal(0, 0.2, k)
    res = random_effects(y, s, moderators=mods)
    x0 = np.array([1.0, 25.0])
    se = np.sqrt(x0 @ res.coef_cov @ x0)
    m = x0 @ res.beta
    t = stats.t.ppf(0.975, k - 3)
    p = res.predict(pd.DataFrame({"mass": [25.0]})).iloc[0]
    assert p["estimate"] == pytest.approx(m, abs=1e-12)
    assert p["pi_lower"] == pytest.approx(m - t * np.sqrt(res.tau2 + se ** 2), abs=1e-12)
    assert p["upper"] == pytest.approx(m + stats.norm.ppf(0.975) * se, abs=1e-12)


# ------------------------------------------------------------------ worked by hand

def test_worked_example_by_hand():
    # Source: by hand. y = (0, 2, 5), s = (1, 1, 2): w = (1, 1, 1/4), sum w = 9/4,
    # mu_FE = (0 + 2 + 5/4)/(9/4) = 13/9; Q = (169 + 25 + 1024/4)/81 = 50/9 on 2 df;
    # I2 = (Q - 2)/Q = 16/25; p = exp(-Q/2) (chi2 with 2 df); DL: c = 9/4 - (33/16)/(9/4)
    # = 4/3, tau2 = (50/9 - 2)/(4/3) = 8/3; weights 3/11, 3/11, 3/20 give mu = 95/51.
    res = random_effects([0.0, 2.0, 5.0], [1.0, 1.0, 2.0], method="dl")
    assert res.q == pytest.approx(50 / 9, rel=1e-14)
    assert res.q_df == 2
    assert res.i2 == pytest.approx(16 / 25, rel=1e-14)
    assert res.q_p == pytest.approx(np.exp(-25 / 9), rel=1e-12)
    assert res.tau2 == pytest.approx(8 / 3, rel=1e-14)
    assert res.estimate == pytest.approx(95 / 51, rel=1e-14)
    assert res.stderr == pytest.approx(np.sqrt(1 / (6 / 11 + 3 / 20)), rel=1e-14)
    # prediction interval (Higgins, Thompson & Spiegelhalter 2009): t on k - 2 = 1 df
    half = stats.t.ppf(0.975, 1) * np.sqrt(8 / 3 + 1 / (6 / 11 + 3 / 20))
    assert (res.pi_lower, res.pi_upper) == pytest.approx((95 / 51 - half, 95 / 51 + half))


def test_q_profile_interval_solves_its_equations():
    # Source: Viechtbauer (2007): the bounds solve Q(tau2) = chi2 quantiles on k-1 df, with
    # the generalised Q computed here by hand.
    y, s = _heterogeneous(21, k=12)
    res = random_effects(y, s)

    def q(t2):
        w = 1 / (s ** 2 + t2)
        m = np.sum(w * y) / np.sum(w)
        return np.sum(w * (y - m) ** 2)

    assert 0 < res.tau2_lower < res.tau2 < res.tau2_upper
    assert q(res.tau2_lower) == pytest.approx(stats.chi2.ppf(0.975, 11), rel=1e-10)
    assert q(res.tau2_upper) == pytest.approx(stats.chi2.ppf(0.025, 11), rel=1e-10)
    # Paule-Mandel solves Q(tau2) = k - 1 (Paule & Mandel 1982)
    assert q(random_effects(y, s, method="pm").tau2) == pytest.approx(11, rel=1e-10)


@pytest.mark.parametrize("method", ["reml", "dl", "pm"])
def test_tau2_zero_when_spread_smaller_than_errors(method):
    # Source: by hand: Q = sum (y - ybar)^2 / 0.04 = 0.0042/0.04 ~ 0.1 < k - 1 = 4, so every
    # estimator is truncated at 0, I2 = 0, and Q < chi2_{0.025, 4} = 0.48 closes the
    # Q-profile interval at 0 too.
    y = np.array([1.0, 1.05, 0.98, 1.02, 0.99])
    s = np.full(5, 0.2)
    res = random_effects(y, s, method=method)
    assert res.tau2 == 0.0
    assert res.i2 == 0.0
    assert res.tau2_lower == 0.0 and res.tau2_upper == 0.0
    assert res.estimate == pytest.approx(np.mean(y), rel=1e-14)  # equal weights at tau2 = 0
    tab = res.table().set_index("quantity")
    assert tab.loc["tau2", "lower_status"] == "at_bound"


# ------------------------------------------------------------------ simulations

def test_reml_interval_coverage_simulation():
    # Source: seeded simulation of the model itself: 300 replicates of 12 animals, true mean
    # log(20 d), tau = 0.3, within-animal errors 0.1-0.4. The 95 % REML interval should
    # cover the true mean in 91-98 % of replicates. With 12 animals the normal (Wald)
    # interval runs a little short: 3000 replicates of this design give 91.3 % normal and
    # 93.5 % with the HKSJ adjustment, so both are checked.
    rng = np.random.default_rng(2026)
    mu, tau, k, n = np.log(20.0), 0.3, 12, 300
    hits = hits_hksj = 0
    for _ in range(n):
        s = rng.uniform(0.1, 0.4, k)
        y = mu + rng.normal(0, tau, k) + rng.normal(0, s)
        res = random_effects(y, s)
        hits += res.lower <= mu <= res.upper
        hk = random_effects(y, s, adjust="hksj")
        hits_hksj += hk.lower <= mu <= hk.upper
    assert 0.91 <= hits / n <= 0.98
    assert 0.91 <= hits_hksj / n <= 0.98


def test_population_half_life_simulation_40_animals():
    # Source: seeded simulation (issue 16): 100 replicates of 40 animals whose log half-lives
    # spread with tau = 0.25 around log(15 d), each with a symmetric-on-log 95 % interval.
    # The population half-life and tau fall inside their intervals in >= 90 % of
    # replicates, and the prediction interval covers 93-97 % of new simulated animals.
    rng = np.random.default_rng(16)
    mu, tau, k, n, n_new = np.log(15.0), 0.25, 40, 100, 200
    z = stats.norm.ppf(0.975)
    hit_mu = hit_tau = covered = 0
    for _ in range(n):
        s = rng.uniform(0.05, 0.3, k)
        est = mu + rng.normal(0, tau, k) + rng.normal(0, s)
        pop = population_estimate(np.exp(est), np.exp(est - z * s), np.exp(est + z * s))
        hit_mu += pop.lower <= np.exp(mu) <= pop.upper
        hit_tau += pop.model.tau2_lower <= tau ** 2 <= pop.model.tau2_upper
        new = np.exp(mu + rng.normal(0, tau, n_new))
        covered += np.sum((pop.pi_lower <= new) & (new <= pop.pi_upper))
    assert hit_mu / n >= 0.90
    assert hit_tau / n >= 0.90
    assert 0.93 <= covered / (n * n_new) <= 0.97


# ------------------------------------------------------------------ population_estimate

def test_population_estimate_back_transforms_log_analysis():
    # Source: the formula s_i = (log U - log L)/(2 z_0.975); the pooled log value is the
    # random-effects mean of log values, and exp of it is the population median.
    hl = np.array([10.0, 12.0, 15.0, 9.0, 20.0])
    lo = np.array([8.0, 9.5, 11.0, 7.5, 14.0])
    hi = np.array([13.0, 15.0, 21.0, 11.0, 30.0])
    pop = population_estimate(hl, lo, hi, 0.95, names=list("ABCDE"))
    se = (np.log(hi) - np.log(lo)) / (2 * stats.norm.ppf(0.975))
    ref = random_effects(np.log(hl), se)
    assert isinstance(pop, PopulationEstimate) and isinstance(pop.model, RandomEffects)
    assert pop.estimate == pytest.approx(np.exp(ref.estimate), rel=1e-12)
    assert (pop.lower, pop.upper) == pytest.approx((np.exp(ref.lower), np.exp(ref.upper)))
    assert pop.pi_upper == pytest.approx(np.exp(ref.pi_upper), rel=1e-12)
    assert pop.cv == pytest.approx(np.sqrt(np.exp(ref.tau2) - 1), rel=1e-12)
    assert pop.excluded.empty and pop.bias == ""
    tab = pop.table().set_index("quantity")
    assert tab.loc["half_life", "estimate"] == pytest.approx(pop.estimate)
    assert tab.loc["new animal", "upper"] == pytest.approx(pop.pi_upper)
    assert pop.predict().iloc[0]["estimate"] == pytest.approx(pop.estimate)
    a = pop.animals()
    assert a["weight"].sum() == pytest.approx(100.0)
    np.testing.assert_allclose(a["stderr"], se, rtol=1e-14)


def test_open_bounds_are_listed_with_reason_and_bias():
    # Source: the rule of issue 16 item 3: animals with open intervals are listed, not
    # silently dropped, and the direction of the bias is stated.
    hl = [10.0, 12.0, 15.0, 40.0, 9.0, 2.0, 11.0]
    lo = [8.0, 9.5, 11.0, 25.0, 7.5, 0.0, 9.0]
    hi = [13.0, 15.0, 21.0, np.inf, 11.0, 3.0, 14.0]
    names = ["G01", "G02", "G03", "G04", "G05", "G06", "G07"]
    with pytest.warns(DataWarning, match="G04"):
        pop = population_estimate(hl, lo, hi, names=names)
    ex = pop.excluded.set_index("name")
    assert ex.loc["G04", "reason"] == "upper bound open"
    assert ex.loc["G06", "reason"] == "lower bound open"  # 0 is open on the log scale
    assert pop.k == 5
    assert "biases the population half_life low" in pop.summary()
    assert "biases the population half_life high" in pop.summary()
    assert "slow animals" in pop.bias
    # statuses from an interval table close or open bounds as they say
    with pytest.warns(DataWarning, match="G02"):
        pop2 = population_estimate(hl[:3] + [20.0], lo[:3] + [15.0], hi[:3] + [30.0],
                                   names=names[:4],
                                   upper_status=["ok", "open", "ok", "ok"])
    assert list(pop2.excluded["name"]) == ["G02"]
    assert "low" in pop2.bias


def test_reasons_given_by_the_caller_exclude_with_that_reason():
    # Source: the rule of issue 16 item 3 (a series that was not fitted is listed, with its
    # reason, and the bias of leaving it out is called unknown).
    with pytest.warns(DataWarning, match="not fitted: too few samples"):
        pop = population_estimate([10.0, np.nan, 12.0, 15.0], [8.0, np.nan, 9.0, 12.0],
                                  [12.0, np.nan, 16.0, 19.0], names=["a", "b", "c", "d"],
                                  reasons=["", "not fitted: too few samples", None, ""])
    assert list(pop.excluded["reason"]) == ["not fitted: too few samples"]
    assert "unknown" in pop.bias
    assert pop.k == 3
    assert list(pop.animals()["used"]) == [True, False, True, True]


def test_too_few_closed_intervals_raise():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataWarning)
        with pytest.raises(DataError, match="only 1 of 3"):
            population_estimate([10.0, 20.0, 30.0], [8.0, 15.0, 20.0],
                                [12.0, np.inf, np.nan])


def test_population_with_moderators_drops_rows_of_excluded_animals():
    # Source: the meta-regression of the used animals alone (random_effects on their log
    # values, with their rows of the covariate frame).
    rng = np.random.default_rng(31)
    k = 10
    temp = rng.uniform(5, 20, k)
    est = np.log(30.0) - 0.04 * temp + rng.normal(0, 0.1, k)
    s = np.full(k, 0.1)
    z = stats.norm.ppf(0.975)
    lo, hi = np.exp(est - z * s), np.exp(est + z * s)
    hi[3] = np.inf
    mods = pd.DataFrame({"temperature": temp})
    with pytest.warns(DataWarning):
        pop = population_estimate(np.exp(est), lo, hi, moderators=mods)
    keep = np.arange(k) != 3
    ref = random_effects(est[keep], s[keep], moderators=mods[keep])
    np.testing.assert_allclose(pop.model.coefficients["estimate"],
                               ref.coefficients["estimate"], rtol=1e-10)
    c = pop.coefficients()
    assert c.loc["temperature", "factor"] == pytest.approx(
        np.exp(ref.coefficients.loc["temperature", "estimate"]))
    new = pop.predict(pd.DataFrame({"temperature": [10.0]})).iloc[0]
    assert new["estimate"] == pytest.approx(np.exp(ref.beta @ [1.0, 10.0]))
    assert np.isnan(pop.estimate)  # with moderators the population value depends on them


# ------------------------------------------------------------------ errors and inputs

@pytest.mark.parametrize("kwargs, match", [
    ({"estimates": [1.0, np.nan, 2.0]}, r"'estimates' at index 1"),
    ({"stderrs": [0.1, 0.2, 0.0]}, r"'stderrs' at index 2"),
    ({"stderrs": [0.1, -0.2, 0.1]}, r"'stderrs' at index 1"),
    ({"stderrs": [0.1, 0.2]}, r"'stderrs' has 2 values"),
    ({"estimates": [1.0], "stderrs": [0.1]}, r"at least 2"),
    ({"estimates": [1.0, "x", 2.0]}, r"'estimates' at index 1 must be a number"),
    ({"method": "ml"}, r"'method'"),
    ({"adjust": "kr"}, r"'adjust'"),
    ({"level": 95}, r"'level'"),
    ({"tau2": -1.0}, r"'tau2'"),
    ({"moderators": pd.DataFrame({"m": [1.0, None, 2.0]})}, r"column 'm', row 1"),
    ({"moderators": pd.DataFrame({"m": [1.0, 2.0]})}, r"'moderators' has 2 rows"),
    ({"moderators": pd.DataFrame({"m": ["a", "a", "a"]})}, r"one value"),
    ({"moderators": pd.DataFrame({"m": [1.0, 2.0, 3.0]}),
      "estimates": [1.0, 2.0, 3.0]}, None),
])
def test_bad_input_raises_data_error(kwargs, match):
    args = {"estimates": [1.0, 1.5, 2.0], "stderrs": [0.1, 0.2, 0.1]}
    args.update(kwargs)
    est, se = args.pop("estimates"), args.pop("stderrs")
    if match is None:  # a valid call with as many coefficients as k - 1 still works
        assert random_effects(est, se, **args).q_df == 1
        return
    with pytest.raises(DataError, match=match):
        random_effects(est, se, **args)


def test_collinear_and_unknown_levels_raise():
    mods = pd.DataFrame({"a": [1.0, 2.0, 3.0, 4.0, 5.0], "b": [2.0, 4.0, 6.0, 8.0, 10.0]})
    with pytest.raises(DataError, match="collinear"):
        random_effects([1, 2, 3, 4, 5.0], [0.1] * 5, moderators=mods)
    sex = pd.DataFrame({"sex": ["F", "M", "F", "M", "F"]})
    res = random_effects([1, 2, 3, 4, 5.0], [0.1] * 5, moderators=sex)
    with pytest.raises(DataError, match="'new_moderators' column 'sex', row 0"):
        res.predict(pd.DataFrame({"sex": ["X"]}))
    with pytest.raises(DataError, match="no column 'sex'"):
        res.predict(pd.DataFrame({"mass": [1.0]}))


def test_population_estimate_bad_values_raise():
    with pytest.raises(DataError, match="'lowers' at index 1"):
        population_estimate([10.0, 12.0], [8.0, 13.0], [12.0, 15.0])
    with pytest.raises(DataError, match="'values' at index 0"):
        population_estimate([-1.0, 12.0], [-2.0, 10.0], [1.0, 15.0])
    with pytest.raises(DataError, match="'scale'"):
        population_estimate([10.0, 12.0], [8.0, 10.0], [12.0, 15.0], scale="ln")


def test_inputs_not_mutated_and_series_names_used():
    y = pd.Series([1.0, 1.4, 2.2, 1.9], index=["G01", "G02", "G03", "G04"])
    s = np.array([0.1, 0.2, 0.15, 0.1])
    mods = pd.DataFrame({"sex": ["F", "M", "F", "M"]}, index=y.index)
    y0, s0, m0 = y.copy(), s.copy(), mods.copy()
    res = random_effects(y, s, moderators=mods, adjust="hksj")
    pd.testing.assert_series_equal(y, y0)
    np.testing.assert_array_equal(s, s0)
    pd.testing.assert_frame_equal(mods, m0)
    assert res.names == ("G01", "G02", "G03", "G04")
    assert "t" in res.coefficients.columns
    text = res.summary()
    assert "meta-regression of 4 animals" in text and "Hartung-Knapp" in text
