"""Isotopic clocks (isoturnover.clocks): time since a diet change from field tissues."""

from __future__ import annotations

import copy
import math
import warnings

import numpy as np
import pandas as pd
import pytest

import isoturnover as iso
from isoturnover.clocks import (
    CLOCK_STATUSES,
    ClockResult,
    plot_clock,
    time_since_switch,
    time_since_switch_table,
)
from isoturnover.conventions import CAUTION
from isoturnover.errors import DataError, DataWarning
from isoturnover.kinetics import TurnoverKinetics

NEW = {"blood": -15.0, "muscle": -13.0}
OLD = {"blood": -25.0, "muscle": -23.0}


def _one(k):
    return {"rates": [k]}


# --------------------------------------------------------------------------- closed forms

@pytest.mark.parametrize("t_true", [3.0, 20.0, 55.0])
def test_one_tissue_equals_closed_form(t_true):
    # by hand: δ = δeq + (δ0 − δeq) e^(−kt)  ⇒  t = −ln[(δ − δeq)/(δ0 − δeq)]/k
    k, d0, deq = 0.05, -25.0, -15.0
    y = deq + (d0 - deq) * math.exp(-k * t_true) - 0.3  # off the model: not t_true back
    r = time_since_switch({"blood": (y, 0.2)}, {"blood": _one(k)}, new={"blood": deq},
                          old={"blood": d0})
    expected = -math.log((y - deq) / (d0 - deq)) / k
    assert r.estimate == pytest.approx(expected, rel=1e-7)
    assert r.predicted["blood"] == pytest.approx(y, abs=1e-8)  # exact fit, one unknown
    assert r.lower < r.estimate < r.upper
    assert r.status == "ok"


def test_two_tissues_shared_old_equals_closed_form():
    # by hand (sign convention of this module: δ_j = δnew_j + Δ e^(−k_j t), Δ = old − new
    # shared): (δ_B − δnew_B)/(δ_A − δnew_A) = e^((k_A − k_B) t), so
    # t = ln[(δ_B − δnew_B)/(δ_A − δnew_A)]/(k_A − k_B); A the faster tissue gives a ratio > 1
    # and t > 0, and swapping the labels changes both signs (Phillips & Eldridge 2006;
    # Klaassen et al. 2010, both from memory)
    kA, kB = 0.10, 0.012
    yA, yB = -15.0 - 8.0 * math.exp(-kA * 17.0) + 0.05, -13.0 - 8.0 * math.exp(-kB * 17.0)
    kin = {"blood": _one(kA), "muscle": _one(kB)}
    r = time_since_switch({"blood": (yA, 0.2), "muscle": (yB, 0.2)}, kin, new=NEW)
    expected = math.log((yB - NEW["muscle"]) / (yA - NEW["blood"])) / (kA - kB)
    assert r.estimate == pytest.approx(expected, rel=1e-7)
    # Δ from either tissue: (δ_A − δnew_A) e^(k_A t) (by hand)
    assert r.offset == pytest.approx((yA - NEW["blood"]) * math.exp(kA * expected), rel=1e-6)
    assert r.dof == 0 and math.isnan(r.p_value)
    # labels swapped: same time (the formula is symmetric)
    r2 = time_since_switch({"muscle": (yB, 0.2), "blood": (yA, 0.2)}, kin, new=NEW)
    assert r2.estimate == pytest.approx(expected, rel=1e-7)


def test_chain_and_two_pools_invert_the_step_response():
    # by hand: δ at t from the kinetics' own remaining fraction, then estimated back
    for spec in ({"rates": [0.2, 0.05], "structure": "chain"},
                 {"rates": [0.3, 0.02], "fractions": [0.4, 0.6]}):
        kin = TurnoverKinetics(2, structure=spec.get("structure", "parallel"))
        theta = np.zeros(kin.n_params)
        theta[kin.rate_index] = spec["rates"]
        if kin.fraction_index:
            theta[kin.fraction_index] = spec["fractions"]
        y = -15.0 - 10.0 * float(kin.remaining(np.array([30.0]), theta)[0])
        r = time_since_switch({"hair": (y, 0.1)}, {"hair": spec}, new={"hair": -15.0},
                              old={"hair": -25.0})
        assert r.estimate == pytest.approx(30.0, rel=1e-6)


# --------------------------------------------------------------------------- statuses

def test_too_early_and_equilibrated_where_they_should():
    k = 0.05  # half-life 13.9 d
    kin = {"blood": _one(k)}
    args = dict(new={"blood": -15.0}, old={"blood": -25.0})
    early = time_since_switch({"blood": (-25.0 + 0.05, 0.2)}, kin, **args)  # t ≈ 0
    assert early.status == "too_early" and early.lower == 0.0 and math.isfinite(early.upper)
    late_t = 20 * math.log(2) / k  # twenty half-lives: 1e-6 of the change left
    y = -15.0 - 10.0 * math.exp(-k * late_t)
    late = time_since_switch({"blood": (y, 0.2)}, kin, **args)
    assert late.status == "equilibrated" and math.isinf(late.upper) and late.lower > 0
    # the clock's horizon (by hand): δ within 1.96·σ of δnew ⇔ t > ln(10/(1.96·0.2))/k
    assert late.lower < math.log(10 / (1.96 * 0.2)) / k
    flat = time_since_switch({"blood": (-20.0, 5.0)}, kin, **args)
    assert flat.status == "uninformative"
    for r in (early, late, flat):
        assert r.status in CLOCK_STATUSES and r.reason


def test_inconsistent_tissues_and_close_rates_warning():
    kin = {"blood": _one(0.1), "muscle": _one(0.01)}
    # known old values, two tissues, one unknown: 1 df. Blood says ~days, muscle says
    # ~centuries (by hand: 4 ‰ off with sd 0.1 is far beyond the errors)
    r = time_since_switch({"blood": (-16.0, 0.1), "muscle": (-23.0 + 4.0, 0.1)}, kin,
                          new=NEW, old=OLD)
    assert r.status == "inconsistent" and r.dof == 1 and r.p_value < 0.01
    close = {"blood": _one(0.1), "muscle": _one(0.08)}
    with pytest.warns(DataWarning, match="too close"):
        rc = time_since_switch({"blood": (-18.0, 0.1), "muscle": (-17.0, 0.1)}, close,
                               new=NEW)
    assert rc.warnings and "too close" in rc.warnings[0]


def test_max_offset_bounds_the_old_values():
    # by hand: at the upper bound without a cap the slow tissue's offset Δ·e^(−k t) needs
    # |Δ| ≫ 20 ‰; capping |Δ| at 20 ‰ can only lower the likelihood there, so the upper
    # bound shrinks, and the estimate (|Δ| ≈ 1 ‰) is unchanged
    kin = {"blood": _one(0.1), "muscle": _one(0.01)}
    vals = {"blood": (-15.1, 0.2), "muscle": (-13.9, 0.2)}
    free = time_since_switch(vals, kin, new=NEW, population=0.04)
    capped = time_since_switch(vals, kin, new=NEW, population=0.04, max_offset=20)
    assert abs(free.offset) < 20
    assert capped.estimate == pytest.approx(free.estimate, rel=1e-9)
    assert capped.upper < free.upper
    with pytest.raises(DataError, match="'max_offset'"):
        time_since_switch(vals, kin, new=NEW, old=OLD, max_offset=20)


# --------------------------------------------------------------------------- uncertainty

def test_uncertainty_widens_the_interval():
    y = -15.0 - 10.0 * math.exp(-0.05 * 20.0)
    base = dict(new={"blood": -15.0}, old={"blood": -25.0})
    r0 = time_since_switch({"blood": (y, 0.2)}, {"blood": _one(0.05)}, **base)
    r1 = time_since_switch({"blood": (y, 0.2)},
                           {"blood": {"rates": [0.05], "stderr": [0.005]}}, **base)
    r2 = time_since_switch({"blood": (y, 0.2)}, {"blood": _one(0.05)}, population=0.04,
                           **base)
    w0, w1, w2 = (r.upper - r.lower for r in (r0, r1, r2))
    assert w0 < w1 and w0 < w2
    # delta method by hand with rates known exactly, near the optimum:
    # sd_t ≈ σ/|dδ/dt| = 0.2/(10 k e^(−kt)), half-width ≈ 1.96·sd_t
    sd_t = 0.2 / (10 * 0.05 * math.exp(-0.05 * 20.0))
    assert w0 / 2 == pytest.approx(1.959964 * sd_t, rel=0.05)
    # population spread given as a random-effects estimate of log half-lives (τ² + SE²)
    hl = np.log(np.log(2) / np.array([0.04, 0.05, 0.06, 0.055, 0.045]))
    re = iso.random_effects(hl, np.full(5, 0.05))
    r3 = time_since_switch({"blood": (y, 0.2)}, {"blood": _one(0.05)}, population=re,
                           **base)
    se = float(re.predict(None)["stderr"].iloc[0])
    r4 = time_since_switch({"blood": (y, 0.2)}, {"blood": _one(0.05)},
                           population=re.tau2 + se * se, **base)
    assert r3.upper == pytest.approx(r4.upper, rel=1e-9)


def test_turnover_fit_as_kinetics():
    rng = np.random.default_rng(3)
    t = np.array([0, 2, 5, 10, 20, 35, 50, 80, 120.0])
    y = -15.0 - 10.0 * np.exp(-0.05 * t) + rng.normal(0, 0.15, t.size)
    fit = iso.TurnoverModel().fit(t, y)
    k = float(fit.values["k1"])
    yf = -15.0 - 10.0 * math.exp(-k * 25.0)
    r = time_since_switch({"blood": (yf, 0.1)}, {"blood": fit}, new={"blood": -15.0},
                          old={"blood": -25.0})
    # the fitted rate given without a standard error: the closed form exactly (by hand);
    # with the fit's covariance the variance depends on t, and its log term in the
    # likelihood moves the maximum slightly; the interval widens
    r0 = time_since_switch({"blood": (yf, 0.1)}, {"blood": _one(k)}, new={"blood": -15.0},
                           old={"blood": -25.0})
    assert r0.estimate == pytest.approx(25.0, rel=1e-6)
    assert r.estimate == pytest.approx(25.0, rel=0.01)
    assert r.upper - r.lower > r0.upper - r0.lower
    assert r.time_unit == fit.time_unit


# --------------------------------------------------------------------------- coverage

def _simulate(rng, n, *, tissues, known_old, tau2, kin_se=0.0):
    """Seeded field animals: true age, each animal's rates e^u times the population's."""
    k = {"blood": 0.1, "muscle": 0.01}
    k = {j: k[j] for j in tissues}
    hits, statuses = 0, {}
    for _ in range(n):
        t_true = rng.uniform(3.0, 60.0) if len(tissues) == 1 else rng.uniform(5.0, 150.0)
        d = -10.0 if known_old else rng.normal(-8.0, 2.0)
        vals, kin = {}, {}
        for j in tissues:
            kj = k[j] * math.exp(rng.normal(0.0, math.sqrt(tau2)))
            kh = k[j] * math.exp(rng.normal(0.0, kin_se)) if kin_se else k[j]
            vals[j] = (NEW[j] + d * math.exp(-kj * t_true) + rng.normal(0, 0.2), 0.2)
            kin[j] = {"rates": [kh], "stderr": [k[j] * kin_se]} if kin_se else _one(kh)
        old = {j: NEW[j] + d for j in tissues} if known_old else None
        r = time_since_switch(vals, kin, new=NEW, old=old, population=tau2)
        hits += r.lower <= t_true <= r.upper
        statuses[r.status] = statuses.get(r.status, 0) + 1
    return hits / n, statuses


@pytest.mark.parametrize("tissues, known_old, kin_se", [
    (("blood",), True, 0.05),
    (("blood", "muscle"), False, 0.0),
    (("blood", "muscle"), True, 0.0),
])
def test_coverage_of_field_animals(tissues, known_old, kin_se):
    # seeded simulation (this test): a 95 % interval covers the true age of 93–97 % of
    # 500 animals with between-animal spread τ² = 0.04 of ln k (sd of the coverage ≈ 1 %)
    rng = np.random.default_rng(18)
    cover, statuses = _simulate(rng, 500, tissues=tissues, known_old=known_old, tau2=0.04,
                                kin_se=kin_se)
    assert 0.93 <= cover <= 0.97, (cover, statuses)


@pytest.mark.parametrize("tissues, known_old", [(("blood",), True),
                                                (("blood", "muscle"), False)])
def test_statuses_of_simulated_animals_at_zero_and_long_after(tissues, known_old):
    # seeded simulation (this test): at t = 0 the true age is inside ~95 % of intervals, so
    # t = 0 is, and the status is too_early; 15 half-lives of the slowest tissue later
    # (3e-5 of the change left, far below σ = 0.2 ‰) the tissues sit at their new values
    # and the status is equilibrated
    rng = np.random.default_rng(5)
    slow = 0.01 if len(tissues) == 2 else 0.1
    for t_true, want in ((0.0, "too_early"), (15 * math.log(2) / slow, "equilibrated")):
        got = []
        for _ in range(100):
            d = -10.0 if known_old else rng.normal(-8.0, 2.0)
            rate = {"blood": 0.1, "muscle": 0.01}
            vals = {j: (NEW[j] + d * math.exp(-rate[j] * t_true) + rng.normal(0, 0.2), 0.2)
                    for j in tissues}
            old = {j: NEW[j] + d for j in tissues} if known_old else None
            r = time_since_switch(vals, {j: _one(rate[j]) for j in tissues}, new=NEW,
                                  old=old, population=0.04)
            got.append(r.status)
        assert got.count(want) >= 88, (t_true, {g: got.count(g) for g in set(got)})


# --------------------------------------------------------------------------- batch, figure

def test_table_of_field_animals_matches_single_calls():
    frame = pd.DataFrame({"subject": ["a", "a", "b", "b"],
                          "tissue": ["blood", "muscle", "blood", "muscle"],
                          "value": [-16.0, -19.0, -24.9, -22.9], "sd": [0.2] * 4})
    before = frame.copy()
    kin = {"blood": _one(0.1), "muscle": _one(0.01)}
    out = time_since_switch_table(frame, kin, new=NEW)
    pd.testing.assert_frame_equal(frame, before)  # not mutated
    assert list(out["subject"]) == ["a", "b"]
    one = time_since_switch({"blood": (-16.0, 0.2), "muscle": (-19.0, 0.2)}, kin, new=NEW)
    assert out.loc[0, "estimate"] == one.estimate and out.loc[0, "status"] == one.status
    assert out.loc[1, "status"] == "too_early"  # both at the old values (by hand: t = 0)
    with pytest.raises(DataError, match="'frame'.*subject 'a'"):
        time_since_switch_table(frame.drop(columns="sd"), kin, new=NEW)


def test_summary_carries_the_caution_and_plot(tmp_path):
    r = time_since_switch({"blood": (-18.0, 0.2)}, {"blood": _one(0.05)},
                          new={"blood": -15.0}, old={"blood": -25.0})
    assert isinstance(r, ClockResult) and CAUTION in r.summary() and CAUTION in str(r)
    assert list(r.table()["tissue"]) == ["blood"]
    import matplotlib
    matplotlib.use("Agg")
    ax = plot_clock(r)
    assert "days" in ax.get_xlabel()
    ax.figure.savefig(tmp_path / "clock.png")
    assert (tmp_path / "clock.png").stat().st_size > 1000
    late = time_since_switch({"blood": (-15.0, 0.2)}, {"blood": _one(0.05)},
                             new={"blood": -15.0}, old={"blood": -25.0})
    plot_clock(late)  # open upper bound drawn


# --------------------------------------------------------------------------- errors

def test_bad_arguments_name_the_argument():
    kin = {"blood": _one(0.05)}
    good = dict(new={"blood": -15.0}, old={"blood": -25.0})
    with pytest.raises(DataError, match="'old' is needed"):
        time_since_switch({"blood": (-18.0, 0.2)}, kin, new={"blood": -15.0})
    with pytest.raises(DataError, match="no sd"):
        time_since_switch({"blood": -18.0}, kin, **good)
    with pytest.raises(DataError, match="'new' has no value"):
        time_since_switch({"blood": (-18.0, 0.2)}, kin, new={}, old={"blood": -25.0})
    with pytest.raises(DataError, match="'kinetics' has no entry"):
        time_since_switch({"blood": (-18.0, 0.2)}, {}, **good)
    with pytest.raises(DataError, match="rates"):
        time_since_switch({"blood": (-18.0, 0.2)}, {"blood": {"rates": [-1]}}, **good)
    with pytest.raises(DataError, match="fractions"):
        time_since_switch({"blood": (-18.0, 0.2)},
                          {"blood": {"rates": [0.1, 0.01], "fractions": [0.5, 0.6]}}, **good)
    with pytest.raises(DataError, match="'population'"):
        time_since_switch({"blood": (-18.0, 0.2)}, kin, population=-1, **good)
    with pytest.raises(DataError, match="sd of tissue"):
        time_since_switch({"blood": (-18.0, 0.0)}, kin, **good)
    with pytest.raises(DataError, match="time units"):
        time_since_switch({"blood": (-18.0, 0.2), "hair": (-20.0, 0.2)},
                          {"blood": {"rates": [0.1], "time_unit": "d"},
                           "hair": {"rates": [0.01], "time_unit": "w"}},
                          new={"blood": -15.0, "hair": -15.0})
    # nothing mutated
    vals, kin2 = {"blood": [-18.0, 0.2]}, {"blood": {"rates": [0.05], "stderr": [0.01]}}
    snap = copy.deepcopy((vals, kin2, good))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        time_since_switch(vals, kin2, **good)
    assert (vals, kin2, good) == snap
