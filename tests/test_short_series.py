"""Short series in fit_each, compare and the command line; fit_each's argument checks.

Every series with few points ends either fitted or as a listed failure with its reason, and
a candidate whose AICc is undefined (n − k − 1 ≤ 0) takes no part in the choice and says so.

All data are invented: a one-pool diet switch from δ0 = −24 ‰ to δ_eq = −18 ‰ with
k = 0.08 /d and a fixed deterministic scatter of ±0.15 ‰ (so no fit is exact).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

import isoturnover as iso
from isoturnover.cli import main
from isoturnover.errors import DataError, IsoturnoverWarning

FULL = np.array([0.0, 1, 2, 4, 7, 10, 14, 21, 28, 42, 56, 70])


def values(t):
    """The invented one-pool series at times t (‰), with its deterministic scatter."""
    t = np.asarray(t, dtype=float)
    return -24.0 + 6.0 * (1.0 - np.exp(-0.08 * t)) + 0.15 * np.sin(2.7 * t + 1.0)


def frame(subject, t):
    t = np.asarray(t, dtype=float)
    return pd.DataFrame({"subject": subject, "tissue": "plasma", "isotope": "d13C",
                         "time": t, "value": np.round(values(t), 3)})


def study(short_times, *, ignore_index=True):
    """A full series (goat A) and a short one (goat B)."""
    return pd.concat([frame("A", FULL), frame("B", short_times)], ignore_index=ignore_index)


def rows(table, subject):
    return table[table["subject"] == subject].set_index("candidate")


# ----------------------------------------------------------------------------------------
# item 6: short series end as listed failures, never stopping the run
# ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("n", [1, 2, 3, 4, 5])
def test_short_series_is_a_listed_failure_and_the_others_are_fitted(n):
    fs = iso.fit_each(study(FULL[[0, 3, 5, 7, 10][:n]]))
    a, b = fs[("A", "plasma", "d13C")], fs[("B", "plasma", "d13C")]
    assert a.status == "ok" and a.best is not None
    assert b.status == "too_few_points" and b.best is None
    assert b.nobs == n
    assert b.reason  # never empty
    # one pool has k = 4 criteria parameters (δ0, δ_eq, k1 and the residual variance):
    # fitted from 4 points on, but AICc needs n − k − 1 > 0, i.e. at least 6 points
    if n >= 4:
        assert f"AICc undefined: n − k − 1 = {n} − 4 − 1 = {n - 5} ≤ 0" in b.reason
        assert b.fits["1 pool"] is not None and b.reasons["1 pool"].startswith("AICc undef")
    elif n == 1:  # the one point is at the switch: that reason comes first
        assert "no sample follows the switch" in b.reason
    else:
        assert f"only {n} time point(s) for 3 free parameters" in b.reason
    assert ("B", "plasma", "d13C") in fs.failures
    tab = fs.table(method="asymptotic")
    rb = rows(tab, "B")
    assert not rb["chosen"].any()
    assert (rb["reason"] != "").all()
    assert rb.loc["2 pools", "status"] == "too_few_points"
    assert rb.loc["1 pool", "status"] == ("not_eligible" if n >= 4 else "too_few_points")
    assert rows(tab, "A")["chosen"].sum() == 1


def test_candidate_with_undefined_aicc_is_not_eligible_and_says_so():
    # 7 points: one pool k = 4, n − k − 1 = 2 (eligible); two pools k = 6 (δ0, δ_eq, k1,
    # k2, f1 and the residual variance), n − k − 1 = 0: AICc undefined, not eligible
    fs = iso.fit_each(frame("B", FULL[[0, 2, 3, 5, 7, 9, 11]]))
    r = fs[("B", "plasma", "d13C")]
    assert r.status == "ok" and r.chosen == "1 pool"
    assert r.fits["2 pools"] is not None
    assert r.reasons["2 pools"] == (
        "AICc undefined: n − k − 1 = 7 − 6 − 1 = 0 ≤ 0 (7 points, k = 6 parameters counting "
        "the residual variance; at least 8 points are needed): not eligible for selection")
    tab = fs.table(method="asymptotic").set_index("candidate")
    assert tab.loc["2 pools", "status"] == "not_eligible"
    assert tab.loc["2 pools", "reason"] == r.reasons["2 pools"]
    assert not bool(tab.loc["2 pools", "chosen"]) and math.isnan(tab.loc["2 pools", "weight"])
    assert tab.loc["1 pool", "status"] == "ok" and bool(tab.loc["1 pool", "chosen"])
    assert tab.loc["1 pool", "weight"] == 1.0


def test_compare_marks_undefined_aicc_and_warns():
    t = FULL[[0, 2, 3, 5, 7, 9, 11]]
    y = values(t)
    f1 = iso.TurnoverModel(1).fit(t, y, warn=False)
    f2 = iso.TurnoverModel(2).fit(t, y, warn=False)
    with pytest.warns(IsoturnoverWarning, match=r"'2 pools': AICc undefined: n − k − 1 = "
                                                r"7 − 6 − 1 = 0 ≤ 0"):
        df = iso.compare([f1, f2])
    assert list(df.attrs["not_eligible"]) == ["2 pools"]
    assert df["best"].tolist() == [True, False]
    assert df.loc[0, "weight"] == 1.0 and math.isnan(df.loc[1, "weight"])
    assert math.isnan(df.loc[1, "delta_aicc"])
    # AICc of the eligible fit by hand: n ln(RSS/n) + 2k + 2k(k+1)/(n−k−1), k = 4
    # (Burnham & Anderson 2002, Model Selection and Multimodel Inference)
    n, k = 7, 4
    rss = float(np.sum((y - f1.predict(t)) ** 2))
    want = n * math.log(rss / n) + 2 * k + 2 * k * (k + 1) / (n - k - 1)
    assert df.loc[0, "aicc"] == pytest.approx(want, rel=1e-9)
    # no fit eligible: nothing is best
    t5 = FULL[[0, 3, 5, 7, 10]]
    g1 = iso.TurnoverModel(1).fit(t5, values(t5), warn=False)
    with pytest.warns(IsoturnoverWarning, match=r"5 − 4 − 1 = 0 ≤ 0"):
        assert not iso.compare([g1])["best"].any()


def test_a_single_candidate_is_kept_without_a_choice():
    # pools=(1,): nothing to choose between, so the 5-point fit is kept, its row saying
    # that AICc is undefined
    fs = iso.fit_each(study(FULL[[0, 3, 5, 7, 10]]), pools=(1,))
    r = fs[("B", "plasma", "d13C")]
    assert r.status == "ok" and r.chosen == "1 pool"
    row = rows(fs.table(method="asymptotic"), "B").loc["1 pool"]
    assert row["status"] == "ok" and bool(row["chosen"])
    assert row["reason"].startswith("AICc undefined: n − k − 1 = 5 − 4 − 1 = 0")


def test_aic_chooses_where_aicc_is_undefined():
    # AIC = n ln(RSS/n) + 2k is defined for 5 points and one pool
    fs = iso.fit_each(study(FULL[[0, 3, 5, 7, 10]]), criterion="aic")
    r = fs[("B", "plasma", "d13C")]
    assert r.status == "ok" and r.chosen == "1 pool"


def test_rows_of_a_series_stay_with_it_when_the_index_repeats():
    # two frames joined without ignore_index: the index labels 0..3 appear twice
    samples = study(FULL[[0, 3, 5, 7]], ignore_index=False)
    assert not samples.index.is_unique
    fs = iso.fit_each(samples, pools=(1,))
    assert fs[("A", "plasma", "d13C")].nobs == FULL.size
    assert fs[("B", "plasma", "d13C")].nobs == 4
    a = fs[("A", "plasma", "d13C")].best
    np.testing.assert_array_equal(a.t, FULL)


def test_command_line_lists_the_short_series_and_finishes(tmp_path, capsys):
    f = tmp_path / "samples.csv"
    study(FULL[[0, 3, 5, 7]]).to_csv(f, index=False)
    out = tmp_path / "out"
    assert main(["fit", str(f), "--out", str(out), "--no-figures", "--pools", "1,2"]) == 0
    res = pd.read_csv(out / "results.csv")
    b = res[res["subject"] == "B"]
    assert set(b["status"]) == {"not_eligible", "too_few_points"}
    assert b["reason"].str.len().min() > 0
    assert (res[res["subject"] == "A"]["chosen"].astype(bool)).sum() == 1
    assert "B" in capsys.readouterr().out


# ----------------------------------------------------------------------------------------
# item 14: fit_each's arguments are refused up front, naming what is wrong
# ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("kwargs, pattern", [
    ({"pools": ()}, r"'pools' is empty, so no parallel model would be fitted"),
    ({"pools": []}, r"'pools' is empty"),
    ({"pools": "2"}, r"'pools' must be a number of pools or a sequence of them \(integers "
                     r"from 1 to 4, e.g. pools=2 or pools=\(1, 2\)\); got '2' \(str\)"),
    ({"pools": None}, r"'pools' must be a number of pools .*; got None \(NoneType\)"),
    ({"pools": 2.0}, r"'pools' must be a number of pools .*; got 2.0 \(float\)"),
    ({"pools": {1: 2}}, r"'pools' must be a number of pools .*\(dict\)"),
    ({"pools": (1, "2")}, r"'pools' entries must be integers from 1 to 4; got '2' \(str\)"),
    ({"pools": (True,)}, r"'pools' entries must be integers from 1 to 4; got True \(bool\)"),
    ({"pools": (1, 1)}, r"'pools' names 1 more than once"),
    ({"structures": ()}, r"'structures' is empty"),
    ({"structures": None}, r"'structures' must be a string or a sequence of strings"),
    ({"structures": ("chain", "chain")}, r"'structures' names 'chain' more than once"),
    ({"by": ()}, r"'by' is empty"),
    ({"by": ("subject", 3)}, r"'by' entries must be strings .*; got 3 \(int\)"),
    ({"level": 1.5}, r"'level' must be between 0 and 1"),
    ({"method": "bogus"}, r"'method' must be one of 'profile', 'asymptotic'"),
])
def test_bad_fit_each_arguments_are_refused_before_reading(kwargs, pattern):
    # the samples argument is not even a table: the options are checked first
    with pytest.raises(DataError, match=pattern):
        iso.fit_each(object(), **kwargs)


def test_empty_pools_with_the_chain_alone_is_fine():
    fs = iso.fit_each(frame("A", FULL), pools=(), structures=("chain",))
    r = fs[("A", "plasma", "d13C")]
    assert list(r.fits) == ["chain"] and r.status == "ok"


def test_a_bare_pool_number_is_one_candidate():
    fs = iso.fit_each(frame("A", FULL), pools=np.int64(1))
    assert list(fs[("A", "plasma", "d13C")].fits) == ["1 pool"]


def test_bad_arguments_do_not_mutate_the_input():
    samples = study(FULL[[0, 3, 5, 7]])
    before = samples.copy()
    with pytest.raises(DataError):
        iso.fit_each(samples, pools="2")
    iso.fit_each(samples, pools=(1,))
    pd.testing.assert_frame_equal(samples, before)


@pytest.mark.parametrize("bad", [0, -5, 1.5, "10", True])
def test_max_evaluations_is_checked(bad):
    from isoturnover import profiles

    fit = iso.TurnoverModel(1).fit(FULL, values(FULL), warn=False)
    with pytest.raises(DataError, match=r"'max_evaluations' must be a positive integer; got"):
        profiles.parameter_interval(fit.state, "k1", max_evaluations=bad)
    with pytest.raises(DataError, match=r"'max_evaluations' must be a positive integer; got"):
        iso.uncertainty.time_to_profile(fit, 0.95, max_evaluations=bad)
