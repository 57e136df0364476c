"""The model choice of the main job compares one diet-tissue separation per diet with one
shared by all diets (``per_diet_separation="auto"``): crafted, invented series.

The series are one-pool tissues after a switch to a new diet and back (no growth), written
out by hand: between switches dδ/dt = k (E_j − δ), so δ relaxes exponentially toward the
equilibrium E_j = diet_j + Δ_j of the diet eaten (first-order kinetics, Tieszen et al.
1983, Oecologia 57:32–37), plus seeded normal noise.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

import isoturnover as iso
from isoturnover.analysis import analyse
from isoturnover.errors import DataError

PER_DIET = ", separation per diet"
K = 0.12                      # per day, invented
DIETS = (2.0, 5.5)            # ‰: old diet, new diet from day 0, old again from day 60
TIMES = np.array([0, 1, 2, 4, 7, 10, 14, 21, 28, 42, 56, 60, 61, 63, 66, 70, 74, 81, 88,
                  100, 120], dtype=float)


def one_pool(t, sep_old, sep_new, k=K, back_at=60.0):
    """δ(t) of one pool, by hand: E_old before 0, toward E_new from 0, back from back_at."""
    e_old, e_new = DIETS[0] + sep_old, DIETS[1] + sep_new
    y = e_new + (e_old - e_new) * np.exp(-k * t)
    if back_at is None:
        return y
    at_back = e_new + (e_old - e_new) * math.exp(-k * back_at)
    return np.where(t < back_at, y, e_old + (at_back - e_old) * np.exp(-k * (t - back_at)))


def tables(sep_old, sep_new, *, seed, times=TIMES, back=True, sd=0.12):
    rng = np.random.default_rng(seed)
    y = one_pool(times, sep_old, sep_new, back_at=60.0 if back else None)
    samples = pd.DataFrame({"subject": "a1", "group": "G", "tissue": "plasma",
                            "isotope": "d15N", "time": times,
                            "value": np.round(y + rng.normal(0, sd, times.size), 3)})
    rows = [(-90.0, DIETS[0]), (0.0, DIETS[1])] + ([(60.0, DIETS[0])] if back else [])
    diets = pd.DataFrame({"group": "G", "isotope": "d15N", "start": [r[0] for r in rows],
                          "value": [r[1] for r in rows]})
    return samples, diets


def labels(fs):
    (res,) = fs.values()
    return list(res.reasons)


def test_auto_chooses_a_separation_per_diet_when_the_diets_differ():
    # separations +3.8 ‰ on the old diet and +3.2 ‰ on the new one (invented)
    s, d = tables(3.8, 3.2, seed=3)
    fs = iso.fit_each(s, diets=d, pools=(1, 2), per_diet_separation="auto",
                      method="asymptotic")
    assert labels(fs) == ["1 pool", "1 pool" + PER_DIET, "2 pools", "2 pools" + PER_DIET]
    (res,) = fs.values()
    assert res.chosen == "1 pool" + PER_DIET
    f = res.best
    assert f.model.per_diet_separation
    ci = f.conf_int(0.95, "asymptotic").set_index("parameter")
    # the generating values (above) inside their intervals
    for name, true in (("discrimination_0", 3.8), ("discrimination_1", 3.2), ("k1", K)):
        assert ci.loc[name, "lower"] <= true <= ci.loc[name, "upper"], name
    # the shared separation alone cannot fit the step sizes: its best fit is far worse
    cmp = res.comparison.set_index("label")
    assert cmp.loc["1 pool", "aicc"] - cmp.loc["1 pool" + PER_DIET, "aicc"] > 10


def test_auto_keeps_one_shared_separation_when_the_diets_share_it():
    s, d = tables(3.5, 3.5, seed=4)
    fs = iso.fit_each(s, diets=d, pools=1, per_diet_separation="auto", method="asymptotic")
    assert labels(fs) == ["1 pool", "1 pool" + PER_DIET]
    (res,) = fs.values()
    assert res.chosen == "1 pool"
    assert res.comparison.set_index("label").loc["1 pool" + PER_DIET, "delta_aicc"] > 0
    tab = fs.table()
    assert list(tab["status"]) == ["ok", "ok"]
    assert tab["chosen"].tolist() == [True, False]


def test_no_per_diet_variant_where_it_adds_nothing():
    s, d = tables(3.8, 3.2, seed=5)
    # no diets table: a step switch, whose plateaus are free anyway
    fs = iso.fit_each(s, pools=1, per_diet_separation="auto", method="asymptotic")
    assert labels(fs) == ["1 pool"]
    # a diets table with a single diet: no change to fit, and no variant
    fs = iso.fit_each(s, diets=d.iloc[:1], pools=1, per_diet_separation="auto")
    assert labels(fs) == ["1 pool"] and fs[("a1", "plasma", "d15N")].status == "failed"
    assert "the diet history has no change" in fs[("a1", "plasma", "d15N")].reason
    # two diets of the same value: one separation either way
    same = d.assign(value=DIETS[0]).iloc[:2]
    s1, _ = tables(3.8, 3.8 + DIETS[0] - DIETS[1], seed=5, back=False)
    fs = iso.fit_each(s1, diets=same, pools=1, per_diet_separation="auto")
    assert labels(fs) == ["1 pool"]
    # initial="free" with one switch: only the new diet's separation is a parameter
    s2, d2 = tables(3.8, 3.2, seed=5, back=False)
    fs = iso.fit_each(s2, diets=d2, pools=1, initial="free", per_diet_separation="auto")
    assert labels(fs) == ["1 pool"]


def test_no_per_diet_variant_where_its_criterion_is_undefined():
    # five points: the shared one-pool model has k = 3 (Δ, k1, σ) and AICc defined
    # (n − k − 1 = 1); the per-diet one k = 4, AICc undefined: not tried, not listed
    s, d = tables(3.8, 3.2, seed=6, times=np.array([0.0, 3.0, 7.0, 14.0, 28.0]), back=False)
    fs = iso.fit_each(s, diets=d.iloc[:2], pools=(1, 2), per_diet_separation="auto",
                      method="asymptotic")
    assert labels(fs) == ["1 pool", "2 pools"]
    assert fs[("a1", "plasma", "d15N")].chosen == "1 pool"


def test_fixed_shared_separation_leaves_the_variant_out():
    s, d = tables(3.5, 3.5, seed=4)
    fs = iso.fit_each(s, diets=d, pools=1, per_diet_separation="auto",
                      fixed={"discrimination": 3.5}, method="asymptotic")
    assert labels(fs) == ["1 pool"]
    assert fs[("a1", "plasma", "d15N")].status == "ok"


def test_true_and_false_keep_their_meaning_and_labels():
    s, d = tables(3.8, 3.2, seed=3)
    on = iso.fit_each(s, diets=d, pools=1, per_diet_separation=True, method="asymptotic")
    off = iso.fit_each(s, diets=d, pools=1, per_diet_separation=False, method="asymptotic")
    assert labels(on) == labels(off) == ["1 pool"]
    assert "discrimination_1" in on[("a1", "plasma", "d15N")].best.values
    assert "discrimination" in off[("a1", "plasma", "d15N")].best.values


@pytest.mark.parametrize("bad", ["yes", "auto ", 1.0, None, "True"])
def test_bad_per_diet_separation_is_refused(bad):
    s, d = tables(3.8, 3.2, seed=3)
    with pytest.raises(DataError, match="'per_diet_separation' must be True, False or 'auto'"):
        iso.fit_each(s, diets=d, per_diet_separation=bad)
    with pytest.raises(DataError, match="'per_diet_separation' must be True, False or 'auto'"):
        analyse(s, diets=d, per_diet_separation=bad)


def test_analyse_compares_by_default_and_the_report_says_how(tmp_path):
    s, d = tables(3.8, 3.2, seed=3)
    a = analyse(s, diets=d, pools=1, ci="asymptotic")
    tab = a.results_table()
    assert tab["candidate"].tolist() == ["1 pool", "1 pool" + PER_DIET]
    assert tab.loc[tab["chosen"], "candidate"].tolist() == ["1 pool" + PER_DIET]
    a.write(tmp_path / "out", figures=False)
    report = (tmp_path / "out" / "report.md").read_text(encoding="utf-8")
    assert "separation per diet" in report and "ranked by the same criterion" in report
    # no per-diet candidate anywhere: the methods text does not mention it
    b = analyse(s, diets=d, pools=1, ci="asymptotic", per_diet_separation=False)
    b.write(tmp_path / "shared", figures=False)
    assert "separation per diet" not in (tmp_path / "shared" / "report.md").read_text(
        encoding="utf-8")
