"""Tests of isoturnover.uncertainty: derived-quantity profiles, bootstrap, MCMC, bands.

All data sets here are invented (seeded simulations of diet-switch series), except BoxBOD
(NIST StRD, tests/reference_data/BoxBOD.dat).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, optimize, stats

import isoturnover as iso
from isoturnover import mcmc as M
from isoturnover import resampling as R
from isoturnover import uncertainty as U

REF = Path(__file__).parent / "reference_data"
LN2 = math.log(2.0)


# ----------------------------------------------------------------------------------------
# invented data
# ----------------------------------------------------------------------------------------
def one_pool(seed=1, t=None, half_life=25.0, d0=-20.0, deq=-15.0, sd=0.1):
    """Invented one-pool diet-switch series (δ in ‰, t in days)."""
    t = np.linspace(0, 100, 20) if t is None else np.asarray(t, dtype=float)
    k = LN2 / half_life
    rng = np.random.default_rng(seed)
    return t, deq + (d0 - deq) * np.exp(-k * t) + rng.normal(0, sd, t.size)


def two_pool(seed=2, t=None, hl=(2.0, 20.0), f1=0.4, d0=-22.0, deq=-14.0, sd=0.2):
    """Invented two-pool diet-switch series (δ in ‰, t in days)."""
    t = np.linspace(0, 60, 40) if t is None else np.asarray(t, dtype=float)
    k1, k2 = LN2 / hl[0], LN2 / hl[1]
    rng = np.random.default_rng(seed)
    r = f1 * np.exp(-k1 * t) + (1 - f1) * np.exp(-k2 * t)
    return t, deq + (d0 - deq) * r + rng.normal(0, sd, t.size)


@pytest.fixture(scope="module")
def fit1():
    t, y = one_pool()
    return iso.TurnoverModel(1).fit(t, y, warn=False)


@pytest.fixture(scope="module")
def fit2():
    t, y = two_pool()
    return iso.TurnoverModel(2).fit(t, y, warn=False)


@pytest.fixture(scope="module")
def boot1(fit1):
    return U.bootstrap(fit1, 600, rng=11)


# ----------------------------------------------------------------------------------------
# profiles of derived quantities
# ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("p", [0.5, 0.95])
def test_time_to_one_pool_equals_rate_profile(fit1, p):
    # one pool: tau_p = -ln(1 - p)/k is monotone in k, so its profile interval is the
    # transform of k's profile bounds (the formula is DESIGN §2's, Cerling et al. 2007)
    r = U.time_to_profile(fit1, p)
    lo_k, hi_k, ls, hs = fit1._profile("k1", 0.95)
    c = -math.log(1 - p)
    assert (ls, hs) == ("ok", "ok")
    assert (r.lower_status, r.upper_status) == ("ok", "ok")
    assert r.lower == pytest.approx(c / hi_k, rel=1e-6)
    assert r.upper == pytest.approx(c / lo_k, rel=1e-6)
    assert r.estimate == pytest.approx(c / fit1.values["k1"], rel=1e-12)


def test_mean_residence_time_one_pool_is_inverse_rate(fit1):
    # one pool: mean residence time = 1/k (integral of e^{-k t}, worked by hand)
    r = U.mean_residence_time_profile(fit1)
    lo_k, hi_k, _, _ = fit1._profile("k1", 0.95)
    assert r.lower == pytest.approx(1 / hi_k, rel=1e-6)
    assert r.upper == pytest.approx(1 / lo_k, rel=1e-6)


def test_profile_of_a_parameter_matches_the_parameter_profile(fit1):
    j = fit1.kinetics.param_names.index("delta_eq")
    r = U.profile_derived(fit1, lambda th: th[j], name="delta_eq", positive=False)
    ci = fit1.conf_int().set_index("parameter").loc["delta_eq"]
    assert r.lower == pytest.approx(ci["lower"], rel=1e-7)
    assert r.upper == pytest.approx(ci["upper"], rel=1e-7)
    df = r.to_frame()
    assert list(df.columns) == list(fit1.conf_int().columns)


def _boxbod():
    d = np.loadtxt(REF / "BoxBOD.dat", skiprows=60)
    return d[:, 1], d[:, 0]  # x (days), y (BOD, mg/l)


def _grid_crossings(c_grid, prof, thr, c_hat):
    """Bounds where a profile computed on a grid crosses thr (linear interpolation, then
    Brent on the independently computed profile)."""
    out = []
    for side in (-1, 1):
        sel = c_grid < c_hat if side < 0 else c_grid > c_hat
        cg, pg = c_grid[sel], prof[sel]
        if side < 0:
            cg, pg = cg[::-1], pg[::-1]
        i = int(np.argmax(pg > thr))
        assert pg[i] > thr >= pg[i - 1]
        out.append((cg[i - 1], cg[i]))
    return out


def test_boxbod_profiles_against_brute_force_grid():
    # NIST StRD BoxBOD: y = b1 (1 - exp(-b2 x)), one pool with delta0 = 0 (delta_eq = b1,
    # k1 = b2). Independent check: for fixed b2 the model is linear in b1 (closed form);
    # for fixed b1, b2 is found by bounded scalar minimisation (scipy), and the interval is
    # where Delta RSS / s^2 <= F(0.95; 1, n - p).
    x, y = _boxbod()
    fit = iso.TurnoverModel(1).fit(x, y, fixed={"delta0": 0.0}, warn=False)
    # certified values (NIST): b1 = 213.80940889, b2 = 0.54723748542, RSS = 1168.0088766
    assert fit.values["delta_eq"] == pytest.approx(213.80940889, rel=1e-7)
    assert fit.values["k1"] == pytest.approx(0.54723748542, rel=1e-7)
    assert fit.rss == pytest.approx(1168.0088766, rel=1e-8)
    n, p = x.size, 2
    s2 = 1168.0088766 / (n - p)
    thr = 1168.0088766 + s2 * stats.f.ppf(0.95, 1, n - p)

    def rss_k(k):
        u = 1 - np.exp(-k * x)
        return float(y @ y - (y @ u) ** 2 / (u @ u))

    ks = np.geomspace(0.01, 50, 400)
    U_k = 1 - np.exp(-ks[:, None] * x[None, :])

    def rss_b1(b1):
        r = np.sum((y[None, :] - b1 * U_k) ** 2, axis=1)
        i = int(np.argmin(r))
        lo, hi = ks[max(i - 1, 0)], ks[min(i + 1, ks.size - 1)]
        res = optimize.minimize_scalar(lambda k: np.sum((y - b1 * (1 - np.exp(-k * x))) ** 2),
                                       bounds=(lo, hi), method="bounded",
                                       options={"xatol": 1e-12})
        return float(res.fun)

    kg = np.linspace(0.05, 3.0, 20001)
    pk = np.array([rss_k(k) for k in kg])
    k_bounds = [optimize.brentq(lambda k: rss_k(k) - thr, a, b, xtol=1e-14)
                for a, b in _grid_crossings(kg, pk, thr, 0.5472)]
    bg = np.linspace(120.0, 400.0, 561)
    pb = np.array([rss_b1(b) for b in bg])
    b_bounds = [optimize.brentq(lambda b: rss_b1(b) - thr, a, c, xtol=1e-10)
                for a, c in _grid_crossings(bg, pb, thr, 213.8)]
    ci = fit.conf_int().set_index("parameter")
    jk = fit.kinetics.param_names.index("k1")
    jb = fit.kinetics.param_names.index("delta_eq")
    rk = U.profile_derived(fit, lambda th: th[jk], name="k1")
    rb = U.profile_derived(fit, lambda th: th[jb], name="delta_eq")
    for got in (ci.loc["k1", ["lower", "upper"]].to_numpy(dtype=float), (rk.lower, rk.upper)):
        np.testing.assert_allclose(got, k_bounds, rtol=1e-3)
    for got in (ci.loc["delta_eq", ["lower", "upper"]].to_numpy(dtype=float),
                (rb.lower, rb.upper)):
        np.testing.assert_allclose(got, b_bounds, rtol=1e-3)
    # and far tighter than 1e-3 in fact
    np.testing.assert_allclose((rk.lower, rk.upper), k_bounds, rtol=1e-6)


def test_half_life_ratio_profile_against_independent_constrained_fit(fit2):
    # at each reported bound c = k1/k2, minimise the RSS independently: for fixed (c, k2)
    # the model a + b1 exp(-c k2 t) + b2 exp(-k2 t) is linear in (a, b1, b2) (numpy
    # lstsq), k2 by a grid and bounded scalar minimisation (scipy); Delta RSS / s^2 there
    # must equal the F(1, n - p) critical value.
    r = U.half_life_ratio_profile(fit2, 2, 1)
    assert (r.lower_status, r.upper_status) == ("ok", "ok")
    assert r.estimate == pytest.approx(fit2.values["k1"] / fit2.values["k2"])
    assert r.lower < r.estimate < r.upper
    t, y = fit2.t, fit2.y

    def rss_at(c):
        def f(lk2):
            k2 = math.exp(lk2)
            X = np.column_stack([np.ones_like(t), np.exp(-c * k2 * t), np.exp(-k2 * t)])
            beta = np.linalg.lstsq(X, y, rcond=None)[0]
            return float(np.sum((y - X @ beta) ** 2))

        grid = np.linspace(math.log(1e-3), math.log(1.0), 300)
        vals = [f(g) for g in grid]
        i = int(np.argmin(vals))
        res = optimize.minimize_scalar(f, bounds=(grid[max(i - 1, 0)], grid[min(i + 1, 299)]),
                                       method="bounded", options={"xatol": 1e-12})
        return float(res.fun)

    crit = stats.f.ppf(0.95, 1, fit2.dof)
    for c in (r.lower, r.upper):
        d = (rss_at(c) - fit2.rss) / fit2.s2
        assert d == pytest.approx(crit, rel=1e-4)
    # the reciprocal ratio is the reciprocal interval
    r2 = U.half_life_ratio_profile(fit2, 1, 2)
    assert r2.lower == pytest.approx(1 / r.upper, rel=1e-6)
    assert r2.upper == pytest.approx(1 / r.lower, rel=1e-6)


@pytest.fixture(scope="module")
def fit_open():
    # invented: half-lives 2 d and 400 d, sampled to 30 d only: the slow pool is never
    # approached
    t = np.array([0, 0.5, 1, 2, 3, 4, 6, 8, 10, 14, 18, 22, 26, 30.0])
    t, y = two_pool(seed=5, t=t, hl=(2.0, 400.0), f1=0.5, d0=-20.0, deq=-15.0, sd=0.1)
    return iso.TurnoverModel(2).fit(t, y, warn=False)


def test_slow_pool_never_approached_gives_open_bounds(fit_open):
    hl = fit_open.half_lives()
    assert hl.loc[1, "upper_status"] == "open"
    assert hl.loc[1, "upper"] == math.inf
    r = U.time_to_profile(fit_open, 0.95)
    assert r.upper_status == "open"
    assert r.upper == math.inf
    assert r.lower_status == "ok" and 0 < r.lower < r.estimate
    m = U.mean_residence_time_profile(fit_open)
    assert m.upper_status == "open" and m.upper == math.inf


def test_profile_derived_statuses_and_fixed():
    # a quantity of fixed parameters only has status "fixed"
    t, y = one_pool()
    fit = iso.TurnoverModel(1).fit(t, y, fixed={"delta0": -20.0}, warn=False)
    j = fit.kinetics.param_names.index("delta0")
    r = U.profile_derived(fit, lambda th: th[j], positive=False)
    assert (r.lower_status, r.upper_status) == ("fixed", "fixed")
    assert r.lower == r.upper == -20.0


def test_profile_errors(fit1):
    with pytest.raises(iso.DataError, match="'fn' must be a function"):
        U.profile_derived(fit1, 3.0)
    with pytest.raises(ValueError, match="'level' must be between 0 and 1"):
        U.profile_derived(fit1, lambda th: th[2], 1.5)
    with pytest.raises(ValueError, match="not finite at the fitted parameters"):
        U.profile_derived(fit1, lambda th: math.nan)
    with pytest.raises(ValueError, match="outside its natural range"):
        U.profile_derived(fit1, lambda th: th[0])  # delta0 < 0 but positive=True
    with pytest.raises(ValueError, match="'natural' must have lo < hi"):
        U.profile_derived(fit1, lambda th: th[2], natural=(1.0, 0.0))
    with pytest.raises(ValueError, match="'limits' must lie inside"):
        U.profile_derived(fit1, lambda th: th[2], limits=(1.0, 2.0))
    with pytest.raises(ValueError, match="'fraction' must be between 0 and 1"):
        U.time_to_profile(fit1, 1.2)
    with pytest.raises(ValueError, match="'i' must be a pool number from 1 to 1"):
        U.half_life_ratio_profile(fit1, 2, 1)
    with pytest.raises(iso.DataError, match="needs a TurnoverFit"):
        U.time_to_profile("fit", 0.95)
    t, y = one_pool()
    rob = iso.TurnoverModel(1).fit(t, y, loss="soft_l1", warn=False)
    with pytest.raises(ValueError, match="loss='linear'"):
        U.time_to_profile(rob)


def test_half_life_ratio_errors(fit2):
    with pytest.raises(ValueError, match="'i' and 'j' must name different pools"):
        U.half_life_ratio_profile(fit2, 1, 1)
    with pytest.raises(ValueError, match="'j' must be a pool number from 1 to 2; got 3"):
        U.half_life_ratio_profile(fit2, 1, 3)


# ----------------------------------------------------------------------------------------
# bootstrap
# ----------------------------------------------------------------------------------------
def test_bootstrap_percentile_agrees_with_profile(fit1, boot1):
    # a well-determined series: bootstrap (residual, percentile) and profile intervals of
    # the half-life and the time to 95 % agree within 10 %
    iv = boot1.intervals().set_index("parameter")
    hl = fit1.half_lives().iloc[0]
    assert iv.loc["half_life_1", "lower"] == pytest.approx(hl["lower"], rel=0.10)
    assert iv.loc["half_life_1", "upper"] == pytest.approx(hl["upper"], rel=0.10)
    tt = U.time_to_profile(fit1, 0.95)
    assert iv.loc["time_to_95", "lower"] == pytest.approx(tt.lower, rel=0.10)
    assert iv.loc["time_to_95", "upper"] == pytest.approx(tt.upper, rel=0.10)
    for nm in ("delta0", "delta_eq"):
        ci = fit1.conf_int().set_index("parameter").loc[nm]
        w_b = iv.loc[nm, "upper"] - iv.loc[nm, "lower"]
        assert w_b == pytest.approx(ci["upper"] - ci["lower"], rel=0.10)


def test_bootstrap_table_shape_and_contents(fit1, boot1):
    df = boot1.replicates
    assert len(df) == 600
    for col in (*fit1.kinetics.param_names, "half_life_1", "time_to_95",
                "mean_residence_time", "rss", "status"):
        assert col in df.columns
    iv = boot1.intervals()
    assert list(iv.columns) == list(fit1.conf_int().columns)
    assert iv.set_index("parameter").loc["f1", "method"] == "fixed"
    np.testing.assert_allclose(df["half_life_1"], LN2 / df["k1"])
    # replicate time to 95 %: -ln(0.05)/k for one pool
    np.testing.assert_allclose(df["time_to_95"], -math.log(0.05) / df["k1"], rtol=1e-10)
    assert boot1.n_failed == int((df["status"] == "failed").sum())
    assert iv.attrs["n_boot"] == 600


def test_bootstrap_bca(fit1, boot1):
    iv = boot1.intervals(method="bca").set_index("parameter")
    pc = boot1.intervals().set_index("parameter")
    assert iv.loc["k1", "method"] == "bootstrap_bca"
    assert (iv.loc["k1", "lower_status"], iv.loc["k1", "upper_status"]) == ("ok", "ok")
    # BCa and percentile differ by a small correction on a well-determined series
    for nm in ("k1", "half_life_1", "delta_eq"):
        assert iv.loc[nm, "lower"] == pytest.approx(pc.loc[nm, "lower"], rel=0.05)
        assert iv.loc[nm, "upper"] == pytest.approx(pc.loc[nm, "upper"], rel=0.05)


def test_bca_formula_matches_scipy():
    # scipy.stats.bootstrap(method="BCa") as an independent implementation of Efron's BCa
    # for the mean; fed scipy's own bootstrap distribution and the mean's jackknife.
    rng = np.random.default_rng(4)
    x = rng.lognormal(size=25)
    res = stats.bootstrap((x,), np.mean, n_resamples=3000, method="BCa",
                          confidence_level=0.9, random_state=np.random.default_rng(8))
    theta_b = res.bootstrap_distribution
    jack = np.array([np.mean(np.delete(x, i)) for i in range(x.size)])
    probs = R._bca_probs(theta_b, float(np.mean(x)), jack, 0.05)
    lo = R._order_quantile(theta_b, probs[0])[0]
    hi = R._order_quantile(theta_b, probs[1])[0]
    assert lo == pytest.approx(res.confidence_interval.low, rel=1e-10)
    assert hi == pytest.approx(res.confidence_interval.high, rel=1e-10)
    # percentile positions follow numpy's default (linear) quantile
    assert R._order_quantile(theta_b, 0.025)[0] == pytest.approx(np.quantile(theta_b, 0.025))


def test_bootstrap_reproducible_and_independent_of_n_jobs(fit2):
    a = U.bootstrap(fit2, 40, rng=7)
    b = U.bootstrap(fit2, 40, rng=7, chunk_size=7)
    c = U.bootstrap(fit2, 40, rng=7, n_jobs=2)
    pd.testing.assert_frame_equal(a.replicates, b.replicates)
    pd.testing.assert_frame_equal(a.replicates, c.replicates)
    d = U.bootstrap(fit2, 40, rng=8)
    assert not np.allclose(a.replicates["k1"], d.replicates["k1"])


def test_bootstrap_parametric_and_user_quantities(fit2):
    kin = fit2.kinetics
    j1, j2 = kin.rate_index

    b = U.bootstrap(fit2, 200, kind="parametric", rng=3,
                    quantities={"ratio": lambda th: th[j1] / th[j2]})
    assert "ratio" in b.replicates.columns
    ok = b.replicates["status"] != "failed"
    np.testing.assert_allclose(b.replicates.loc[ok, "ratio"],
                               b.replicates.loc[ok, "k1"] / b.replicates.loc[ok, "k2"])
    iv = b.intervals().set_index("parameter")
    assert iv.loc["ratio", "lower"] < b.estimates["ratio"] < iv.loc["ratio", "upper"]
    # parametric bootstrap of a well-determined fit: rate intervals near the profile ones
    ci = fit2.conf_int().set_index("parameter")
    assert iv.loc["k1", "lower"] == pytest.approx(ci.loc["k1", "lower"], rel=0.15)
    assert iv.loc["k1", "upper"] == pytest.approx(ci.loc["k1", "upper"], rel=0.15)


def test_failed_replicates_are_counted_and_kept(fit1, monkeypatch):
    orig = R._Refitter.refit
    calls = {"n": 0}

    def flaky(self, t, y, sigma):
        calls["n"] += 1
        if calls["n"] % 3 == 0:
            return None, None, math.inf, R._FAILED
        return orig(self, t, y, sigma)

    monkeypatch.setattr(R._Refitter, "refit", flaky)
    with pytest.warns(iso.ConvergenceWarning, match="10 of 30 bootstrap refits failed"):
        b = U.bootstrap(fit1, 30, rng=1)
    assert b.n_failed == 10
    assert len(b.replicates) == 30
    failed = b.replicates["status"] == "failed"
    assert failed.sum() == 10 and b.replicates.loc[failed, "k1"].isna().all()
    assert b.intervals().attrs["n_used"] == 20


def test_all_failed_gives_failed_intervals(fit1, monkeypatch):
    monkeypatch.setattr(R._Refitter, "refit",
                        lambda self, t, y, s: (None, None, math.inf, R._FAILED))
    with pytest.warns(iso.ConvergenceWarning):
        b = U.bootstrap(fit1, 5, rng=1)
    iv = b.intervals().set_index("parameter")
    assert iv.loc["k1", "lower_status"] == "failed" and math.isnan(iv.loc["k1", "lower"])


def test_bootstrap_boundary_replicates_give_open_bounds():
    # invented series that barely curves (half-life 25 d sampled to 30 d, noisy): many
    # replicates run to k -> 0; the half-life's upper bound is then open, as in the profile
    t = np.array([0, 3, 6, 10, 15, 20, 30.0])
    t, y = one_pool(seed=7, t=t, sd=0.3)
    fit = iso.TurnoverModel(1).fit(t, y, warn=False)
    b = U.bootstrap(fit, 200, rng=2)
    assert b.n_boundary > 10
    iv = b.intervals().set_index("parameter")
    assert iv.loc["half_life_1", "upper_status"] == "open"
    assert iv.loc["half_life_1", "upper"] == math.inf
    assert iv.loc["k1", "lower_status"] == "open" and iv.loc["k1", "lower"] == 0.0
    assert fit.half_lives().loc[0, "upper_status"] == "open"


def _destructive_frame(seed=3, per_time=3):
    """Invented destructive design: `per_time` animals killed at each sampling day."""
    rng = np.random.default_rng(seed)
    times = np.array([0, 2, 5, 10, 20, 35, 60.0])
    rows = []
    k = LN2 / 12.0
    for ti in times:
        for a in range(per_time):
            v = -15 + (-21 + 15) * math.exp(-k * ti) + rng.normal(0, 0.4)
            rows.append({"subject": f"A{ti:g}_{a}", "tissue": "liver", "isotope": "d13C",
                         "time": ti, "value": v})
    return pd.DataFrame(rows)


def test_subjects_bootstrap_resamples_within_sampling_times():
    frame = _destructive_frame()
    fit = iso.TurnoverModel(1).fit(frame, warn=False)
    assert fit.data_info["design"] == "destructive"
    rf = R._Refitter(fit, "subjects")
    for seed in range(5):
        t_s, y_s, _ = rf.draw(np.random.default_rng(seed))
        np.testing.assert_array_equal(t_s, fit.t)
        for ti, yi in zip(t_s, y_s):
            assert yi in set(fit.y[fit.t == ti])
    b = U.bootstrap(fit, 100, kind="subjects", rng=4)
    iv = b.intervals(method="bca").set_index("parameter")
    assert iv.loc["k1", "lower"] < fit.values["k1"] < iv.loc["k1", "upper"]


def test_subjects_strata_with_one_animal_per_time():
    # animals alone at their time are pooled (pairs bootstrap); a lone one stays as it is
    t = np.array([0, 1, 1, 2, 3, 5.0])
    assert [list(s) for s in R._time_strata(t)] == [[1, 2], [0, 3, 4, 5]]
    assert [list(s) for s in R._time_strata(np.array([0, 1, 1.0]))] == [[1, 2]]
    frame = _destructive_frame(per_time=1)
    fit = iso.TurnoverModel(1).fit(frame, warn=False)
    rf = R._Refitter(fit, "subjects")
    t_s, y_s, _ = rf.draw(np.random.default_rng(0))
    pairs = set(zip(fit.t, fit.y))
    assert all((a, b) in pairs for a, b in zip(t_s, y_s))
    assert len(set(t_s)) < fit.t.size  # some animals drawn twice


def test_bootstrap_options_run(fit2, capsys, monkeypatch):
    a = U.bootstrap(fit2, 20, rng=1, multi_start=True, progress=True)
    b = U.bootstrap(fit2, 20, rng=1, multi_start=False, leverage=False)
    assert a.n_failed == 0 and len(b.replicates) == 20
    # light text counter when tqdm is absent
    monkeypatch.setattr(R, "HAS_TQDM", False)
    U.bootstrap(fit2, 10, rng=1, progress=True)
    assert "bootstrap (residual): 10/10" in capsys.readouterr().err
    U.bootstrap(fit2, 10, rng=1, progress=False)
    assert capsys.readouterr().err == ""


def test_bootstrap_robust_fit():
    t, y = one_pool(seed=9)
    y = y.copy()
    y[7] += 2.0  # an invented outlier
    fit = iso.TurnoverModel(1).fit(t, y, loss="soft_l1", warn=False)
    b = U.bootstrap(fit, 50, rng=2)
    assert b.n_failed == 0
    iv = b.intervals().set_index("parameter")
    assert iv.loc["k1", "lower"] < fit.values["k1"] < iv.loc["k1", "upper"]


def _joint_fit():
    # invented growing animal: catabolic rate 0.03 /d, exponential growth 0.01 /d
    rng = np.random.default_rng(3)
    t = np.linspace(0, 60, 15)
    y = -15 + (-21 + 15) * np.exp(-0.04 * t) + rng.normal(0, 0.2, t.size)
    tm = np.linspace(0, 60, 10)
    m = 50 * np.exp(0.01 * tm) * np.exp(rng.normal(0, 0.02, tm.size))
    return iso.TurnoverModel(1, growth="exponential").fit(t, y, masses=(tm, m), warn=False)


def test_joint_fit_profiles_follow_the_joint_rss_and_bootstrap_refuses():
    fit = _joint_fit()
    ci = fit.conf_int().set_index("parameter")
    for nm in ("k1", "k_growth"):
        j = fit.kinetics.param_names.index(nm)
        r = U.profile_derived(fit, lambda th, j=j: th[j], name=nm)
        assert r.lower == pytest.approx(ci.loc[nm, "lower"], rel=1e-5)
        assert r.upper == pytest.approx(ci.loc[nm, "upper"], rel=1e-5)
    # time to 95 % with growth: -ln(0.05)/(k + k_growth)
    tt = U.time_to_profile(fit)
    assert tt.estimate == pytest.approx(-math.log(0.05) / (fit.values["k1"]
                                                          + fit.values["k_growth"]))
    assert tt.lower < tt.estimate < tt.upper
    with pytest.raises(ValueError, match="does not support joint fits"):
        U.bootstrap(fit, 10)
    with pytest.raises(ValueError, match="does not support joint fits"):
        U.sample(fit)


def test_bootstrap_errors(fit1):
    with pytest.raises(ValueError, match="'kind' must be one of 'residual', 'parametric', "
                                         "'subjects'; got 'jackknife'"):
        U.bootstrap(fit1, 10, kind="jackknife")
    with pytest.raises(ValueError, match="'n' must be an integer >= 1; got 0"):
        U.bootstrap(fit1, 0)
    with pytest.raises(ValueError, match="'n_jobs' must be a positive integer or -1"):
        U.bootstrap(fit1, 10, n_jobs=0)
    with pytest.raises(ValueError, match="kind='subjects' resamples whole animals.*fit_each"):
        U.bootstrap(fit1, 10, kind="subjects")
    with pytest.raises(ValueError, match="'multi_start' must be"):
        U.bootstrap(fit1, 10, multi_start="sometimes")
    with pytest.raises(iso.DataError, match="'quantities' must be a dict"):
        U.bootstrap(fit1, 10, quantities=[lambda th: 1.0])
    with pytest.raises(ValueError, match="'quantities' name 'k1' is already"):
        U.bootstrap(fit1, 10, quantities={"k1": lambda th: 1.0})
    with pytest.raises(ValueError, match="fails at the fitted parameters"):
        U.bootstrap(fit1, 10, quantities={"bad": lambda th: 1 / 0})
    b = U.bootstrap(fit1, 5, rng=1)
    with pytest.raises(ValueError, match="'method' must be one of 'percentile', 'bca'"):
        b.intervals(method="student")
    t, y = np.array([0, 10, 30.0]), np.array([-20, -17, -15.5])
    exact = iso.TurnoverModel(1).fit(t, y, warn=False)
    with pytest.raises(ValueError, match="needs residual degrees of freedom"):
        U.bootstrap(exact, 10)


# ----------------------------------------------------------------------------------------
# bands
# ----------------------------------------------------------------------------------------
def test_delta_band_matches_uncertainties_package(fit2):
    # independent propagation: uncertainties.correlated_values of the natural parameters
    # (fit.covar) and the two-pool model written with uncertainties.umath
    from uncertainties import correlated_values, umath

    names = ["delta0", "delta_eq", "k1", "k2", "f1"]
    idx = [fit2.kinetics.param_names.index(n) for n in names]
    cov = fit2.covar[np.ix_(idx, idx)]
    d0, deq, k1, k2, f1 = correlated_values(fit2._theta[idx], cov)
    times = np.array([0.0, 1.0, 3.5, 10.0, 25.0, 60.0, 90.0])
    sd = []
    for ti in times:
        yv = deq + (d0 - deq) * (f1 * umath.exp(-k1 * ti) + (1 - f1) * umath.exp(-k2 * ti))
        sd.append(yv.std_dev)
    bd = U.band(fit2, times)
    np.testing.assert_allclose(bd["se"], sd, rtol=1e-6)
    q = stats.t.ppf(0.975, fit2.dof)
    np.testing.assert_allclose(bd["upper"] - bd["fitted"], q * np.array(sd), rtol=1e-6)
    np.testing.assert_allclose(bd["fitted"], fit2.predict(times))
    pr = U.band(fit2, times, kind="prediction")
    np.testing.assert_allclose(pr["se"] ** 2, np.array(sd) ** 2 + fit2.s2, rtol=1e-6)


def test_delta_band_known_sigma_uses_normal_quantile():
    t, y = one_pool(sd=0.1)
    fit = iso.TurnoverModel(1).fit(t, y, sigma=np.full(t.size, 0.1), absolute_sigma=True,
                                   warn=False)
    bd = U.band(fit, [5.0, 50.0], level=0.9)
    np.testing.assert_allclose(bd["upper"] - bd["fitted"], stats.norm.ppf(0.95) * bd["se"])
    pr = U.band(fit, [5.0, 50.0], kind="prediction", sigma=0.2)
    np.testing.assert_allclose(pr["se"] ** 2, bd["se"] ** 2 + 0.04)


def test_bootstrap_band_close_to_delta_band(fit1, boot1):
    times = np.array([5.0, 20.0, 50.0, 90.0])
    bb = U.band(fit1, times, method="bootstrap", boot=boot1)
    bd = U.band(fit1, times)
    np.testing.assert_allclose(bb["upper"] - bb["lower"], bd["upper"] - bd["lower"], rtol=0.2)
    pb = U.band(fit1, times, kind="prediction", method="bootstrap", boot=boot1, rng=1)
    pdl = U.band(fit1, times, kind="prediction")
    np.testing.assert_allclose(pb["upper"] - pb["lower"], pdl["upper"] - pdl["lower"],
                               rtol=0.2)


def test_band_errors(fit1, fit2, boot1):
    with pytest.raises(ValueError, match="'kind' must be one of 'confidence', 'prediction'"):
        U.band(fit1, [1.0], kind="credible")
    with pytest.raises(ValueError, match="'method' must be one of 'delta', 'bootstrap'"):
        U.band(fit1, [1.0], method="mcmc")
    with pytest.raises(ValueError, match="finite times"):
        U.band(fit1, [1.0, np.nan])
    with pytest.raises(ValueError, match="needs boot="):
        U.band(fit1, [1.0], method="bootstrap")
    with pytest.raises(ValueError, match="different fit"):
        U.band(fit2, [1.0], method="bootstrap", boot=boot1)
    with pytest.raises(ValueError, match="'sigma' must be positive"):
        U.band(fit1, [1.0, 2.0], kind="prediction", sigma=[0.1, -1])


# ----------------------------------------------------------------------------------------
# MCMC
# ----------------------------------------------------------------------------------------
@pytest.mark.skipif(not M.HAS_EMCEE, reason="emcee not installed")
def test_mcmc_known_sigma_close_to_profile():
    t, y = one_pool(seed=3, sd=0.1)
    fit = iso.TurnoverModel(1).fit(t, y, sigma=np.full(t.size, 0.1), absolute_sigma=True,
                                   warn=False)
    m = U.sample(fit, n_steps=2500, rng=5)
    assert m.sigma == "known"
    iv = m.intervals().set_index("parameter")
    ci = fit.conf_int().set_index("parameter")
    for nm in ("k1", "delta_eq"):
        wm = iv.loc[nm, "upper"] - iv.loc[nm, "lower"]
        wp = ci.loc[nm, "upper"] - ci.loc[nm, "lower"]
        assert wm == pytest.approx(wp, rel=0.15)
        mid = 0.5 * (iv.loc[nm, "upper"] + iv.loc[nm, "lower"])
        assert abs(mid - fit.values[nm]) < 0.2 * wp
    assert list(m.draws.columns) == [*fit.kinetics.param_names, "half_life_1"]
    assert list(m.intervals().columns) == list(fit.conf_int().columns)
    assert 0.2 < m.acceptance < 0.9


@pytest.mark.skipif(not M.HAS_EMCEE, reason="emcee not installed")
def test_mcmc_estimated_sigma_and_short_chain_warning(fit1):
    with pytest.warns(iso.ConvergenceWarning, match="autocorrelation time"):
        m = U.sample(fit1, n_steps=60, rng=1)
    assert m.sigma == "estimated" and "s" in m.draws.columns
    # the residual-sd scale is centred near the fit's s
    assert np.median(m.draws["s"]) == pytest.approx(math.sqrt(fit1.s2), rel=0.3)


@pytest.mark.skipif(not M.HAS_EMCEE, reason="emcee not installed")
def test_mcmc_prior_jacobian_integrates_to_one():
    # a normal prior density on k1 given in natural units must integrate to 1 over the
    # internal coordinate log k1 once the Jacobian |dk/dlog k| = k is included (quad)
    t, y = one_pool(seed=3)
    fit = iso.TurnoverModel(1).fit(t, y, fixed={"delta0": -20.0, "delta_eq": -15.0},
                                   warn=False)
    prior = stats.norm(0.03, 0.004)
    lo, hi, _ = M._prior_box(fit)
    lp = M._make_log_prior(fit, {"k1": prior.logpdf}, lo, hi, True)
    val, _ = integrate.quad(lambda u: math.exp(lp(np.array([u]))), math.log(0.005),
                            math.log(0.08), points=[math.log(0.03)], limit=200)
    assert val == pytest.approx(1.0, rel=1e-6)


@pytest.mark.skipif(not M.HAS_EMCEE, reason="emcee not installed")
@pytest.mark.filterwarnings("ignore::isoturnover.errors.ConvergenceWarning")
def test_mcmc_user_prior_pulls_posterior(fit1):
    prior = stats.norm(0.02, 0.0005)  # invented, far from the data's 0.028 and tight
    m = U.sample(fit1, n_steps=600, rng=2, priors={"k1": prior.logpdf})
    assert np.median(m.draws["k1"]) == pytest.approx(0.02, rel=0.1)
    assert any("user log-density" in p for p in m.prior)


def test_mcmc_errors(fit1, monkeypatch):
    with pytest.raises(ValueError, match="sigma='known' needs the fit's analytic sd"):
        U.sample(fit1, sigma="known")
    with pytest.raises(ValueError, match="'sigma' must be one of 'known', 'estimated'"):
        U.sample(fit1, sigma="both")
    with pytest.raises(ValueError, match="'priors' has 'f1', which is not a free parameter"):
        U.sample(fit1, priors={"f1": lambda f: 0.0})
    with pytest.raises(ValueError, match="'n_walkers' must be an integer >= 6"):
        U.sample(fit1, n_walkers=4)
    with pytest.raises(ValueError, match="'burn' must be smaller than n_steps"):
        U.sample(fit1, n_steps=100, burn=100)
    monkeypatch.setattr(M, "HAS_EMCEE", False)
    with pytest.raises(ImportError, match=r"isoturnover\[mcmc\]"):
        U.sample(fit1)


# ----------------------------------------------------------------------------------------
# evaluation budgets of profiles and root searches (issue 14, item 7)
# ----------------------------------------------------------------------------------------
def _three_pools_on_one_pool_data():
    """Invented: 11 samples of a one-pool switch (k = 0.08 /d, sd 0.15 ‰), fitted with three
    pools, so most of the parameters are not identified and the profiles run far out."""
    t = np.array([0, 2, 4, 7, 10, 14, 21, 28, 42, 56, 70], dtype=float)
    rng = np.random.default_rng(4)
    y = -24 + 6 * (1 - np.exp(-0.08 * t)) + rng.normal(0, 0.15, t.size)
    return iso.TurnoverModel(3).fit(t, y, warn=False)


def _joint_growth_fit_with_a_vanishing_pool():
    """Invented: a growing animal (k_g = 0.01 /d) with a second pool of 2 % (k_d = 0.005 /d)
    that the δ data barely see, δ and body masses fitted jointly."""
    rng = np.random.default_rng(0)
    t = np.array([0, 3, 7, 10, 14, 21, 28, 35, 42, 56, 70, 84], dtype=float)
    kg, kd1, kd2, f2 = 0.01, 0.05, 0.005, 0.02
    y = -24 + 8 * (1 - (1 - f2) * np.exp(-(kd1 + kg) * t) - f2 * np.exp(-(kd2 + kg) * t))
    y = y + rng.normal(0, 0.15, t.size)
    tm = np.array([0, 14, 28, 42, 56, 70, 84], dtype=float)
    w = 20 * np.exp(kg * tm) * np.exp(rng.normal(0, 0.02, tm.size))
    return iso.TurnoverModel(2, growth="exponential").fit(t, y, masses=(tm, w), warn=False)


class _Runaway(Exception):
    """Raised by the call counters below: a search that would otherwise run on."""


def _count(monkeypatch, owner, name, counts, cap=None):
    orig = getattr(owner, name)

    def counted(*args, **kwargs):
        counts[name] = counts.get(name, 0) + 1
        if cap is not None and counts[name] > cap:
            raise _Runaway(f"{name} called more than {cap} times")
        return orig(*args, **kwargs)

    monkeypatch.setattr(owner, name, counted)


def test_find_bound_stops_when_its_budget_is_spent():
    from isoturnover.profiles import BudgetExhausted, EvaluationBudget, find_bound

    budget = EvaluationBudget(500)
    calls = []

    def flat(u):  # a profile that never leaves zero: the search would run to its limit
        budget.spend(37)
        calls.append(u)
        return 0.0, 0.0, True, ""

    res = find_bound(flat, 0.0, 1, 1.0, 1e300, 3.84, max_refits=10**6, budget=budget)
    assert (res.status, res.reason) == ("failed", "budget")
    assert math.isnan(res.u)
    # charged before each refit: 14 charges of 37 reach 500, and nothing more is charged
    assert len(calls) == math.ceil(500 / 37) and budget.used == 37 * len(calls)
    # a budget spent inside a refit ends the search the same way
    inner = EvaluationBudget(3)

    def costly(u):
        for _ in range(10):
            inner.spend()
        return 1.0, 1.0, True, ""

    res = find_bound(costly, 0.0, -1, 1.0, -50.0, 3.84, budget=inner)
    assert (res.status, res.reason, res.refits) == ("failed", "budget", 1)
    with pytest.raises(BudgetExhausted):
        inner.spend()
    # without a budget the refit count still bounds the search
    res = find_bound(lambda u: (0.0, 0.0, True, ""), 0.0, 1, 1.0, 1e300, 3.84, max_refits=25)
    assert (res.status, res.reason, res.refits) == ("failed", "max_refits", 25)


def test_three_pool_time_to_profile_keeps_its_budget(monkeypatch):
    from isoturnover import kinetics, profiles, quantities
    from isoturnover.conventions import STATUSES

    fit = _three_pools_on_one_pool_data()
    budget = 3000
    monkeypatch.setattr(profiles, "MAX_EVALUATIONS", budget, raising=False)
    counts = {}
    _count(monkeypatch, quantities, "time_to", counts)
    _count(monkeypatch, kinetics.TurnoverKinetics, "evaluate", counts)
    tt = fit.time_to(0.95)
    assert set(tt[["lower_status", "upper_status"]].iloc[0]) <= set(STATUSES)
    # two sides, each at most `budget` charges; a charge is one evaluation of the model, or
    # of the quantity (plus the one inside its gradient); a few more to set up
    assert counts["time_to"] <= 2 * 2 * budget + 50
    assert counts["evaluate"] <= 2 * budget + 50
    # the profile itself reports what each side spent
    r = U.time_to_profile(fit, 0.95, max_evaluations=budget)
    assert all(e <= budget for e in r.evaluations)
    for status, reason in zip((r.lower_status, r.upper_status), r.reasons):
        assert status in STATUSES and (reason == "" or status == "failed")
    # the whole table: every profile ends with a status from the list
    table = fit.table()
    assert set(table["lower_status"]) | set(table["upper_status"]) <= set(STATUSES)


def test_budget_spent_is_a_failed_bound_with_its_reason():
    fit = _three_pools_on_one_pool_data()
    r = U.time_to_profile(fit, 0.95, max_evaluations=40)
    assert r.lower_status == r.upper_status == "failed"
    assert r.reasons == ("budget", "budget")
    assert math.isnan(r.lower) and math.isnan(r.upper)
    assert r.evaluations == (40, 40)
    from isoturnover import profiles

    iv = profiles.parameter_interval(fit.state, "k3", max_evaluations=30)
    assert (iv.lower_status, iv.upper_status) == ("failed", "failed")
    iv = profiles.parameter_interval(fit.state, "k3")
    assert "failed" not in (iv.lower_status, iv.upper_status)


def test_time_to_profile_of_a_joint_growth_fit_ends(monkeypatch):
    from isoturnover import derived, quantities
    from isoturnover.conventions import STATUSES

    fit = _joint_growth_fit_with_a_vanishing_pool()
    kin = fit.kinetics
    # the profile never hands the quantity a parameter vector outside the model's domain
    # (an incorporation rate k_i + k_g <= 0: the change is never completed there)
    seen = []

    def t95(th):
        kappa = th[kin.rate_index] + th[kin.growth_rate_index]
        seen.append(float(kappa.min()))
        return quantities.time_to(kin, 0.95, th) if kappa.min() > 0 else math.nan

    r = U.profile_derived(fit, t95, name="t95", max_evaluations=20000)
    assert min(seen) > 0
    assert all(e <= 20000 for e in r.evaluations)
    assert {r.lower_status, r.upper_status} <= set(STATUSES)
    # time to 95 % at a growth rate that makes k2 + k_g negative: NaN, not an endless search
    counts = {}
    _count(monkeypatch, quantities, "remaining_after_switch", counts, cap=10**5)
    bad = fit.state.theta.copy()
    bad[kin.growth_rate_index] = -0.1
    assert math.isnan(derived.fit_time_to(fit, 0.95)(bad))
    # and the fit's own time_to ends with statuses (it ran past 10 minutes before)
    tt = fit.time_to(0.95).iloc[0]
    assert tt["lower_status"] in STATUSES and tt["upper_status"] in STATUSES
    assert tt["lower"] < tt["estimate"]
