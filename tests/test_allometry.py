"""Allometry of half-lives on body mass (isoturnover.allometry).

Every number is checked against statsmodels OLS (coefficients, ``conf_int``, ``bse``,
``get_prediction().summary_frame()``), on an invented, seeded table.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from isoturnover import allometry as al
from isoturnover.conventions import INTERVAL_COLUMNS
from isoturnover.equilibration import CAUTION
from isoturnover.errors import DataError, DataWarning

TOL = 1e-10


def invented_table(seed=7, n=24):
    # invented species: masses over five decades, ln t½ = 1.2 + 0.22 ln M + noise, two
    # tissues with different intercepts and slightly different slopes
    rng = np.random.default_rng(seed)
    mass = np.exp(rng.uniform(0, 11.5, n))
    tissue = np.where(np.arange(n) % 3 == 0, "liver", "muscle")
    slope = np.where(tissue == "liver", 0.18, 0.24)
    icpt = np.where(tissue == "liver", 0.6, 1.4)
    hl = np.exp(icpt + slope * np.log(mass) + rng.normal(0, 0.3, n))
    return pd.DataFrame({"species": [f"sp{i}" for i in range(n)], "body_g": mass,
                         "t_half_d": hl, "tissue": tissue})


@pytest.fixture
def table():
    return invented_table()


NEW = np.array([3.0, 150.0, 5.0e5])  # the last beyond the table's largest mass


def _check_prediction(pred, sm_res, exog, level):
    # statsmodels get_prediction().summary_frame(alpha), back-transformed with exp
    sf = sm_res.get_prediction(exog).summary_frame(alpha=1 - level)
    np.testing.assert_allclose(pred["estimate"], np.exp(sf["mean"]), rtol=TOL)
    np.testing.assert_allclose(pred["lower"], np.exp(sf["obs_ci_lower"]), rtol=TOL)
    np.testing.assert_allclose(pred["upper"], np.exp(sf["obs_ci_upper"]), rtol=TOL)
    np.testing.assert_allclose(pred["mean_lower"], np.exp(sf["mean_ci_lower"]), rtol=TOL)
    np.testing.assert_allclose(pred["mean_upper"], np.exp(sf["mean_ci_upper"]), rtol=TOL)


@pytest.mark.parametrize("level", [0.95, 0.8])
def test_single_regression_matches_statsmodels_ols(table, level):
    fit = al.fit_allometry(table, mass="body_g", half_life="t_half_d", level=level)
    x = np.log(table["body_g"].to_numpy())
    res = sm.OLS(np.log(table["t_half_d"].to_numpy()), sm.add_constant(x)).fit()
    t = fit.table()
    assert list(t.columns[:2]) == ["group", "term"]
    assert list(t.columns[2:9]) == list(INTERVAL_COLUMNS)
    # statsmodels: params, bse, conf_int(alpha), rsquared, scale
    np.testing.assert_allclose(t["estimate"], res.params, rtol=TOL)
    np.testing.assert_allclose(t["stderr"], res.bse, rtol=TOL)
    ci = res.conf_int(alpha=1 - level)
    np.testing.assert_allclose(t["lower"], ci[:, 0], rtol=TOL)
    np.testing.assert_allclose(t["upper"], ci[:, 1], rtol=TOL)
    assert t["r2"].iloc[0] == pytest.approx(res.rsquared, rel=TOL)
    assert t["residual_sd"].iloc[0] == pytest.approx(math.sqrt(res.scale), rel=TOL)
    assert fit.slope == pytest.approx(res.params[1], rel=TOL)
    with pytest.warns(DataWarning, match="extrapolation"):
        pred = fit.predict(NEW)
    _check_prediction(pred, res, sm.add_constant(np.log(NEW)), level)
    assert pred["extrapolated"].tolist() == [False, False, True]
    assert (pred["method"] == "prediction").all() and (pred["level"] == level).all()


def test_separate_slopes_match_statsmodels_on_each_group(table):
    fit = al.fit_allometry(table, "body_g", "t_half_d", by="tissue")
    t = fit.table()
    for g in ("liver", "muscle"):
        sub = table[table["tissue"] == g]
        res = sm.OLS(np.log(sub["t_half_d"].to_numpy()),
                     sm.add_constant(np.log(sub["body_g"].to_numpy()))).fit()
        rows = t[t["group"] == g]
        # statsmodels OLS of the group's rows alone
        np.testing.assert_allclose(rows["estimate"], res.params, rtol=TOL)
        np.testing.assert_allclose(rows["lower"], res.conf_int()[:, 0], rtol=TOL)
        np.testing.assert_allclose(rows["upper"], res.conf_int()[:, 1], rtol=TOL)
        pred = fit.predict(NEW[:2], group=g)
        _check_prediction(pred, res, sm.add_constant(np.log(NEW[:2])), 0.95)
    with pytest.raises(DataError, match="one slope per group"):
        _ = fit.slope


def test_common_slope_matches_statsmodels_ancova(table):
    fit = al.fit_allometry(table, "body_g", "t_half_d", by="tissue", slopes="common")
    groups = list(pd.unique(table["tissue"]))
    X = np.column_stack([(table["tissue"] == g).to_numpy(float) for g in groups]
                        + [np.log(table["body_g"].to_numpy())])
    y = np.log(table["t_half_d"].to_numpy())
    res = sm.OLS(y, X).fit()
    t = fit.table()
    # statsmodels OLS with one dummy per group and a shared slope
    np.testing.assert_allclose(t["estimate"], res.params, rtol=TOL)
    np.testing.assert_allclose(t["stderr"], res.bse, rtol=TOL)
    np.testing.assert_allclose(t["lower"], res.conf_int()[:, 0], rtol=TOL)
    assert t["group"].iloc[:2].tolist() == groups and pd.isna(t["group"].iloc[2])
    assert fit.slope == pytest.approx(res.params[-1], rel=TOL)
    # centred R² (statsmodels reports the uncentred one without a constant column): by hand
    tss = float(np.sum((y - y.mean()) ** 2))
    assert t["r2"].iloc[0] == pytest.approx(1 - res.ssr / tss, rel=TOL)
    for j, g in enumerate(groups):
        exog = np.zeros((2, len(groups) + 1))
        exog[:, j] = 1.0
        exog[:, -1] = np.log(NEW[:2])
        _check_prediction(fit.predict(NEW[:2], group=g), res, exog, 0.95)


def test_summary_and_no_mutation(table):
    before = table.copy()
    fit = al.fit_allometry(table, "body_g", "t_half_d", by="tissue")
    pd.testing.assert_frame_equal(table, before)
    s = fit.summary()
    assert CAUTION in s and "slope [liver]" in s and str(fit) == s
    common = al.fit_allometry(table, "body_g", "t_half_d", by="tissue", slopes="common")
    assert "slope:" in common.summary() and "[nan]" not in common.summary()


def test_dict_table_is_accepted():
    d = {"mass": [2.0, 20, 200, 2000], "half_life": [5.0, 8.1, 13.6, 22]}
    res = sm.OLS(np.log(d["half_life"]), sm.add_constant(np.log(d["mass"]))).fit()
    # statsmodels slope
    assert al.fit_allometry(d).slope == pytest.approx(res.params[1], rel=TOL)


@pytest.mark.parametrize("change, kw, match", [
    (None, dict(mass="weight"), "'mass': the table has no column 'weight'"),
    (("body_g", 3, "heavy"), {}, r"column 'body_g', row 3: 'heavy' is not a number"),
    (("body_g", 5, 0.0), {}, r"column 'body_g', row 5: 0.0 must be a finite number > 0"),
    (("t_half_d", 2, np.nan), {}, r"column 't_half_d', row 2: nan must be a finite"),
    (("tissue", 4, None), dict(by="tissue"), r"column 'tissue', row 4: the group is missing"),
    (None, dict(by="organ"), "'by': the table has no column 'organ'"),
    (None, dict(level=1.5), "'level' must be between 0 and 1"),
    (None, dict(by="tissue", slopes="shared"), "'slopes' must be one of"),
])
def test_bad_tables_name_the_column_and_row(table, change, kw, match):
    bad = table.astype({"body_g": object, "t_half_d": object}).copy()
    if change is not None:
        col, row, val = change
        bad.loc[row, col] = val
    args = dict(mass="body_g", half_life="t_half_d")
    args.update(kw)
    with pytest.raises(DataError, match=match):
        al.fit_allometry(bad, **args)


def test_too_few_rows_and_bad_predictions(table):
    with pytest.raises(DataError, match="'table' must be a DataFrame"):
        al.fit_allometry([1, 2, 3])
    small = pd.DataFrame({"mass": [1.0, 2.0], "half_life": [3.0, 4.0]})
    with pytest.raises(DataError, match="needs at least 3"):
        al.fit_allometry(small)
    same = pd.DataFrame({"mass": [5.0, 5.0, 5.0], "half_life": [3.0, 4.0, 5.0]})
    with pytest.raises(DataError, match="every mass is the same"):
        al.fit_allometry(same)
    fit = al.fit_allometry(table, "body_g", "t_half_d", by="tissue")
    with pytest.raises(DataError, match="'group' is needed"):
        fit.predict(10.0)
    with pytest.raises(DataError, match="'group' 'bone' is not a group"):
        fit.predict(10.0, group="bone")
    with pytest.raises(DataError, match=r"'mass'\[1\] must be a finite number > 0"):
        fit.predict([10.0, -1.0], group="liver")
    single = al.fit_allometry(table, "body_g", "t_half_d")
    with pytest.raises(DataError, match="'group' given, but the fit has no groups"):
        single.predict(10.0, group="liver")
