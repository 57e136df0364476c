"""Shared fits (iso.fit_shared), the comparison of groups and the whole-animal bootstrap.

Every check is against an independent computation written here: the joint model coded by
hand and solved with scipy.optimize (least squares, or the concentrated Gaussian likelihood
minimised with Nelder–Mead), profile bounds found with scipy.optimize.brentq, and the F
quantile from scipy.stats. The data are invented (seeded simulations).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats

import isoturnover as iso
from isoturnover import jointproblem

TIMES = np.array([0.0, 3, 7, 14, 21, 28, 42, 56, 70, 90])


def _study(n=8, k=(0.05, 0.08), sd=(0.3,), seed=3, pools=1, times=TIMES, tissue="blood"):
    """Invented animals: half in group A (rate k[0]), half in B (k[1]); levels vary."""
    rng = np.random.default_rng(seed)
    rows = []
    for a in range(n):
        g = "A" if a < n // 2 else "B"
        kk = k[0] if g == "A" else k[1]
        d0 = -22 + rng.normal(0, 0.5)
        de = -15 + rng.normal(0, 0.5)
        s = sd[a % len(sd)]
        if pools == 1:
            mean = de + (d0 - de) * np.exp(-kk * times)
        else:  # two pools: 0.4 at 0.25/d, 0.6 at kk
            mean = de + (d0 - de) * (0.4 * np.exp(-0.25 * times) + 0.6 * np.exp(-kk * times))
        y = mean + rng.normal(0, s, times.size)
        for ti, yi in zip(times, y):
            rows.append({"subject": f"G{a:02d}", "tissue": tissue, "isotope": "d13C",
                         "time": ti, "value": yi, "group": g})
    return pd.DataFrame(rows)


def _hand_model(p, frame, subjects):
    """One pool, shared log k, per-animal (delta0, delta_eq): residuals per animal."""
    k = math.exp(p[0])
    out = []
    for i, s in enumerate(subjects):
        d = frame[frame["subject"] == s]
        m = p[2 + 2 * i] + (p[1 + 2 * i] - p[2 + 2 * i]) * np.exp(-k * d["time"].to_numpy())
        out.append(d["value"].to_numpy() - m)
    return out


def test_per_animal_variance_is_the_joint_maximum_likelihood():
    # independent: the concentrated Gaussian likelihood sum_b n_b/2 ln RSS_b minimised by
    # scipy (BFGS then Nelder-Mead), coded by hand
    df = _study(n=4, sd=(0.2, 0.5))
    fit = iso.fit_shared(df, shared=("k1",))
    assert fit.variance == "per_block" and fit.converged
    subs = sorted(df["subject"].unique())

    def negll(p):
        return 0.5 * sum(r.size * math.log(r @ r) for r in _hand_model(p, df, subs))

    p0 = [math.log(0.06)] + [v for _ in subs for v in (-22.0, -15.0)]
    res = optimize.minimize(negll, p0, method="BFGS", options={"gtol": 1e-9})
    res = optimize.minimize(negll, res.x, method="Nelder-Mead",
                            options={"xatol": 1e-9, "fatol": 1e-13, "maxfev": 40000,
                                     "maxiter": 40000})
    tab = fit.table()
    assert tab["k1"].iloc[0] == pytest.approx(math.exp(res.x[0]), rel=1e-6)
    assert np.allclose(tab["delta0"], res.x[1::2], atol=1e-5)
    assert np.allclose(tab["delta_eq"], res.x[2::2], atol=1e-5)
    # the likelihood the fit reports is the maximum found independently
    n = len(df)
    assert fit.loglik == pytest.approx(-res.fun - n / 2 * (math.log(2 * math.pi) + 1)
                                       + 0.5 * sum(len(df[df.subject == s]) * math.log(
                                           len(df[df.subject == s])) for s in subs), rel=1e-7)


def _hand_common(df):
    subs = sorted(df["subject"].unique())

    def resid(p):
        return np.concatenate(_hand_model(p, df, subs))

    p0 = [math.log(0.06)] + [v for _ in subs for v in (-22.0, -15.0)]
    return optimize.least_squares(resid, p0, xtol=1e-14, ftol=1e-14, gtol=1e-14), resid


def test_common_variance_equals_scipy_least_squares_and_profile_bounds_equal_brentq():
    df = _study(n=4, seed=11)
    fit = iso.fit_shared(df, shared=("k1",), variance="common")
    res, resid = _hand_common(df)
    assert fit.table()["k1"].iloc[0] == pytest.approx(math.exp(res.x[0]), rel=1e-7)
    assert fit.rss == pytest.approx(res.fun @ res.fun / fit.s2 * fit.s2, rel=1e-9)
    # profile bounds of k1, independently: rss(k) minimised over the levels, the bound where
    # (rss(k) - rss_hat)/s2 reaches F(1, N - P) (scipy.stats.f.ppf), by brentq
    rss_hat = float(res.fun @ res.fun)
    dof = len(df) - len(res.x)
    s2 = rss_hat / dof
    crit = stats.f.ppf(0.95, 1, dof)

    def excess(logk):
        r = optimize.least_squares(lambda q: resid(np.r_[logk, q]), res.x[1:], xtol=1e-14,
                                   ftol=1e-14, gtol=1e-14)
        return (r.fun @ r.fun - rss_hat) / s2 - crit

    lo = math.exp(optimize.brentq(excess, res.x[0] - 1.0, res.x[0], xtol=1e-12))
    hi = math.exp(optimize.brentq(excess, res.x[0], res.x[0] + 1.0, xtol=1e-12))
    row = fit.conf_int().query("parameter == 'k1'").iloc[0]
    assert row["method"] == "profile" and row["lower_status"] == row["upper_status"] == "ok"
    assert row["lower"] == pytest.approx(lo, rel=1e-5)
    assert row["upper"] == pytest.approx(hi, rel=1e-5)
    hl = fit.half_lives().iloc[0]
    assert hl["lower"] == pytest.approx(math.log(2) / hi, rel=1e-5)
    assert hl["upper"] == pytest.approx(math.log(2) / lo, rel=1e-5)


def test_sparse_jacobian_path_gives_the_dense_result(monkeypatch):
    df = _study(n=6, seed=5)
    dense = iso.fit_shared(df, shared=("k1",), variance="common")
    monkeypatch.setattr(jointproblem, "SPARSE_ABOVE", 0)
    sp = iso.fit_shared(df, shared=("k1",), variance="common")
    assert np.allclose(sp.table()["k1"], dense.table()["k1"], rtol=1e-6)
    assert np.allclose(sp.table()["delta_eq"], dense.table()["delta_eq"], atol=1e-5)


def test_destructive_design_equals_the_pooled_single_fit():
    # one animal per time: everything shared is the destructive-sampling fit of
    # TurnoverModel.fit on the same frame (independent code path: the single-series engine)
    rng = np.random.default_rng(2)
    t = np.repeat([0.0, 5, 10, 20, 30, 45, 60, 90], 2)
    y = -15 + (-22 + 15) * np.exp(-0.06 * t) + rng.normal(0, 0.4, t.size)
    df = pd.DataFrame({"subject": [f"A{i:02d}" for i in range(t.size)], "tissue": "muscle",
                       "isotope": "d13C", "time": t, "value": y})
    shared = iso.fit_shared(df, shared=("k1", "delta0", "delta_eq"))
    assert shared.variance == "common"
    single = iso.TurnoverModel(1).fit(df)
    for nm in ("k1", "delta0", "delta_eq"):
        assert shared.params[nm].value == pytest.approx(single.params[nm].value, rel=1e-6)


def test_two_pools_shared_rates_and_fractions_recover_the_truth():
    df = _study(n=6, k=(0.03, 0.03), pools=2, seed=8, sd=(0.1,),
                times=np.array([0.0, 1, 2, 4, 7, 10, 14, 21, 28, 42, 56, 84, 120]))
    fit = iso.fit_shared(df, pools=2, shared=("k1", "k2", "f1"))
    ps = fit.params
    assert ps["k1"].value == pytest.approx(0.25, rel=0.25)
    assert ps["k2"].value == pytest.approx(0.03, rel=0.15)
    assert ps["f1"].value == pytest.approx(0.4, abs=0.1)
    assert ps["f1"].value + ps["f2"].value == pytest.approx(1.0, abs=1e-12)
    assert "delta_eq_G03" in ps and "k1_G03" not in ps
    hl = fit.half_lives()
    assert list(hl["pool"]) == [1, 2] and (hl["method"] == "profile").all()


def test_compare_groups_detects_a_difference_and_its_half_life_ratio():
    df = _study(n=8, k=(0.05, 0.08), seed=3)
    out = iso.compare_groups(df, group="group", parameter="k1")
    test = out["test"].iloc[0]
    assert test["kind"] == "F" and test["p_value"] < 1e-4 and test["lr_p_value"] < 1e-4
    # the likelihood-ratio statistic is 2 (lnL1 - lnL0) of the two fits it returns
    assert test["lr_statistic"] == pytest.approx(
        2 * (out["by_group"].loglik - out["common"].loglik), rel=1e-12)
    # the F test and the ratio's profile interval are one computation: the interval
    # excludes 1 exactly when p < 0.05 (here both), and at the 1 - p level 1 is a bound
    by = out["by_group"]
    i = next(j for j, lab in enumerate(by._L.labels) if lab.startswith("k1@group=B-"))
    iv = by._profile(i, "id", 1 - test["p_value"], float(by.z[i]))
    assert min(abs(iv["lower"]), abs(iv["upper"])) == pytest.approx(0.0, abs=1e-4)
    ratio = out["ratios"].iloc[0]
    true = 0.05 / 0.08  # half-life of B over A = k_A / k_B
    assert ratio["lower"] < true < ratio["upper"]
    assert ratio["lower"] < ratio["estimate"] < ratio["upper"]


def test_compare_groups_with_one_variance_is_the_f_test_of_the_two_fits():
    df = _study(n=8, k=(0.06, 0.06), seed=21)
    out = iso.compare_groups(df, group="group", parameter="k1", variance="common")
    t = out["test"].iloc[0]
    h0, h1 = out["common"], out["by_group"]
    r0 = h0.rss * h0.s2 / h0.s2  # weights are 1 with one variance: rss is the raw RSS
    f_hand = (r0 - h1.rss) / 1 / (h1.rss / h1.dof)
    assert t["kind"] == "F" and t["statistic"] == pytest.approx(f_hand, rel=1e-9)
    assert t["p_value"] == pytest.approx(stats.f.sf(f_hand, 1, h1.dof), rel=1e-9)
    assert t["p_value"] > 0.05  # same rate in both groups (seeded)


def test_sharing_is_preferred_when_the_rate_is_common():
    df = _study(n=8, k=(0.05, 0.05), seed=4)
    fit = iso.fit_shared(df, shared=("k1",))
    cmp = fit.compare_sharing()
    assert cmp.loc["shared", "weight"] > 0.5
    assert cmp.loc["shared", "n_params"] == cmp.loc["separate", "n_params"] - 7


def test_tissues_of_the_same_animals_with_a_rate_per_tissue():
    a = _study(n=4, k=(0.05, 0.05), seed=1, tissue="plasma")
    b = _study(n=4, k=(0.02, 0.02), seed=2, tissue="cells")
    df = pd.concat([a, b], ignore_index=True)
    fit = iso.fit_shared(df, shared={"k1": "tissue"}, by=("subject", "tissue"))
    hl = fit.half_lives().set_index("scope")
    assert hl.loc["tissue=plasma", "rate"] == pytest.approx(0.05, rel=0.2)
    assert hl.loc["tissue=cells", "rate"] == pytest.approx(0.02, rel=0.2)
    y = fit.predict([0.0, 1000.0], subject=("G01", "plasma"))
    tab = fit.table().set_index(["subject", "tissue"])
    assert y[1] == pytest.approx(tab.loc[("G01", "plasma"), "delta_eq"], abs=1e-9)


def test_whole_animal_bootstrap_is_seeded_and_brackets_the_estimate():
    df = _study(n=6, k=(0.05, 0.05), seed=6)
    fit = iso.fit_shared(df, shared=("k1",))
    b1 = fit.bootstrap(n=40, rng=1)
    b2 = fit.bootstrap(n=40, rng=1)
    pd.testing.assert_frame_equal(b1, b2)
    row = b1.iloc[0]
    assert row["method"] == "bootstrap" and row["n_failed"] == 0
    assert row["lower"] < row["estimate"] < row["upper"]


def test_bad_arguments_are_named():
    df = _study(n=4)
    with pytest.raises(iso.DataError, match="'shared'.*k9"):
        iso.fit_shared(df, shared=("k9",))
    with pytest.raises(iso.DataError, match="'by'"):
        iso.fit_shared(df, by="pen")
    with pytest.raises(iso.DataError, match="unknown option"):
        iso.fit_shared(df, colour="red")
    two = pd.concat([df, df.assign(tissue="hair")], ignore_index=True)
    with pytest.raises(iso.DataError, match="several tissues"):
        iso.fit_shared(two)
    with pytest.raises(iso.DataError, match="at least two series"):
        iso.fit_shared(df[df["subject"] == "G00"])
    with pytest.raises(iso.DataError, match="one level"):
        iso.compare_groups(df[df["group"] == "A"], group="group")
    frozen = df.copy()
    iso.fit_shared(df)
    pd.testing.assert_frame_equal(df, frozen)  # the input is not changed


@pytest.mark.slow
def test_profile_interval_of_a_shared_rate_covers_the_truth():
    # seeded simulation (invented animals, per-animal variances differ): the 95 % profile
    # interval of the shared rate covers the true rate in 90-99 % of 120 replicates
    hits = 0
    n = 120
    for rep in range(n):
        df = _study(n=5, k=(0.05, 0.05), sd=(0.2, 0.4), seed=1000 + rep)
        row = iso.fit_shared(df, shared=("k1",)).conf_int().query("parameter == 'k1'").iloc[0]
        hits += row["lower"] <= 0.05 <= row["upper"]
    assert 0.90 <= hits / n <= 0.99


def _chain_product(t, k1, k2, d0, de):
    # product of a two-step chain after a step switch (written by hand):
    # 1 - (k1 e^{-k2 t} - k2 e^{-k1 t}) / (k1 - k2) of the change is done at t
    done = 1 - (k1 * np.exp(-k2 * t) - k2 * np.exp(-k1 * t)) / (k1 - k2)
    return d0 + (de - d0) * done


def test_a_measured_precursor_makes_the_chain_rates_identifiable():
    # invented: plasma (one pool, 0.2 /d) feeds red cells (a chain whose first step is the
    # plasma's own turnover, second step 0.02 /d); both sampled in four animals
    rng = np.random.default_rng(12)
    t = np.array([0.0, 1, 2, 4, 7, 10, 14, 21, 28, 42, 56, 84, 112, 140])
    rows = []
    for a in range(4):
        d0, de = -22 + rng.normal(0, 0.3), -15 + rng.normal(0, 0.3)
        plasma = de + (d0 - de) * np.exp(-0.2 * t) + rng.normal(0, 0.15, t.size)
        cells = _chain_product(t, 0.2, 0.02, d0 - 0.5, de - 0.5) + rng.normal(0, 0.15, t.size)
        for tis, y in (("plasma", plasma), ("red_cells", cells)):
            rows += [{"subject": f"R{a}", "tissue": tis, "isotope": "d13C", "time": ti,
                      "value": yi} for ti, yi in zip(t, y)]
    df = pd.DataFrame(rows)
    fit = iso.fit_shared(df, by=("subject", "tissue"), shared=("k1", "k2"),
                         models={"plasma": {"pools": 1}, "red_cells": {"structure": "chain"}})
    ps = fit.params
    assert ps["k1"].value == pytest.approx(0.2, rel=0.1)
    assert ps["k2"].value == pytest.approx(0.02, rel=0.1)
    ci = fit.conf_int().set_index("parameter").loc[["k1", "k2"]]
    assert (ci["lower"] < [0.2, 0.02]).all() and (ci["upper"] > [0.2, 0.02]).all()
    assert (ci["method"] == "profile").all()
    # the plasma blocks have no k2; the chain blocks have no pool fraction
    tab = fit.table().set_index(["subject", "tissue"])
    assert np.isnan(tab.loc[("R0", "plasma"), "k2"])
    with pytest.raises(iso.DataError, match="'models'"):
        iso.fit_shared(df, by=("subject", "tissue"), models={"bone": {"pools": 1}})


# ----------------------------------------------------------------------------------------
# the bootstrap's refits in parallel workers (n_jobs)
# ----------------------------------------------------------------------------------------
def test_bootstrap_is_identical_for_one_and_two_jobs():
    # each replicate draws from its own child of one SeedSequence, so the table cannot depend
    # on how the replicates are shared out; reference: the same call with n_jobs=1
    pytest.importorskip("joblib")
    df = _study(n=6, k=(0.05, 0.08), seed=6)
    fit = iso.fit_shared(df, shared={"k1": "group"})
    one = fit.bootstrap(n=24, rng=5, n_jobs=1)
    two = fit.bootstrap(n=24, rng=5, n_jobs=2)
    pd.testing.assert_frame_equal(one, two)
    assert set(one["scope"]) == {"group=A", "group=B"}
    # a generator seeds the same way as its integer seed (np.random.default_rng(5))
    pd.testing.assert_frame_equal(fit.bootstrap(n=24, rng=np.random.default_rng(5)), one)
    # and a different seed gives different draws (the test can fail)
    other = fit.bootstrap(n=24, rng=6, n_jobs=2)
    assert not np.allclose(other["lower"], one["lower"])


@pytest.mark.parametrize("bad", [0, -2, 1.5, "2", True])
def test_bootstrap_bad_n_jobs_is_named(bad):
    fit = iso.fit_shared(_study(n=4), shared=("k1",))
    with pytest.raises(iso.DataError, match="'n_jobs'"):
        fit.bootstrap(n=4, n_jobs=bad)


def test_bootstrap_without_joblib_warns_and_runs_serially(monkeypatch):
    # reference: the same call with n_jobs=1 (the serial path the fallback must take)
    from isoturnover import groups

    fit = iso.fit_shared(_study(n=4, k=(0.05, 0.05), seed=6), shared=("k1",))
    serial = fit.bootstrap(n=6, rng=2, n_jobs=1)
    monkeypatch.setattr(groups, "_joblib", None)
    with pytest.warns(iso.IsoturnoverWarning, match="n_jobs=2 asks for parallel workers"):
        out = fit.bootstrap(n=6, rng=2, n_jobs=2)
    pd.testing.assert_frame_equal(out, serial)


def test_a_diets_table_is_matched_to_each_series_like_fit_each():
    # the demo goats' plasma d15N with the demo diets table (invented data): the shared fit
    # takes the table; each block's diet history is the one fit_each matches (by group)
    from isoturnover.demo import demo_path

    s = iso.read_samples(demo_path("goat_samples"))
    s = s[(s["tissue"] == "plasma") & (s["isotope"] == "d15N")
          & s["subject"].isin(["G01", "G02", "G05", "G06"])]
    diets = iso.read_diets(demo_path("goat_diets"))
    fit = iso.fit_shared(s, shared=("k1",), diets=diets, per_diet_separation=True)
    each = iso.fit_each(s, diets=diets, pools=(1,), per_diet_separation=True)
    for key, r in each.items():
        k = fit._block_index(key[0])  # noqa: SLF001 - the block's own kinetics, for the check
        assert fit._p.blocks[k].kin.diet == r.best.model.diet
    assert fit.params["k1"].value > 0
    with pytest.raises(iso.DataError, match="no diet rows"):
        iso.fit_shared(s, diets=diets[diets["isotope"] == "d13C"])
