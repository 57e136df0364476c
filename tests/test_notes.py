"""Honest notes and summaries (issue 14 items 2, 7, 10, 11, 12): each on a crafted series.

* plateaus of growing animals judged by the incorporation rates k_d + k_g(t);
* rates too fast for the sampling flagged unidentifiable, their upper bounds open;
* a series with no sample after the switch says so;
* the residual sd and RSS printed with their units, the δ block's own in joint fits;
* pool fractions whose interval spans nearly all of 0–1, and the χ² test of the scatter
  against known σ on the fit's degrees of freedom.

All series are invented (closed forms written out below, seeded or deterministic scatter).
Every number checked names its source beside it.
"""

from __future__ import annotations

import math
import re

import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats

import isoturnover as iso
from isoturnover import diagnostics
from isoturnover.growth import GrowthCurve
from isoturnover.kinetics import TurnoverKinetics
from isoturnover.summary import FRACTION_SPAN, fraction_note, residual_text

# the other trust warnings of a crafted fit are not the subject of these tests
pytestmark = pytest.mark.filterwarnings("ignore::isoturnover.IsoturnoverWarning")

LN2 = math.log(2.0)
T16 = np.linspace(0.0, 90.0, 16)


def one_pool(t, d0=-25.0, deq=-12.0, half_life=10.0):
    return deq + (d0 - deq) * np.exp(-LN2 / half_life * np.asarray(t, dtype=float))


def codes(fit):
    return [w.code for w in fit.warnings]


def header(fit, **kw):
    return dict(fit.summary(**kw).header)


# -- item 2: plateaus of growing animals -------------------------------------------------

# a fast-growing juvenile: logistic growth W = 100/(1 + e^{-0.1 (t - 20)}) (W(0) = 11.9,
# W(60) = 98.2), catabolic rate 0.0005/d; the catabolic rule alone would ask for
# 2 ln 2/0.0005 = 2773 d (by hand), but growth dilution brings the tissue to 88 % of its
# change by day 60: 1 − e^{−0.0005·60}·W(0)/W(60) = 0.88 (by hand)
CURVE = GrowthCurve("logistic", Winf=100.0, k=0.1, ti=20.0)
KD = 0.0005


def logistic_w(t):
    # the curve written out (growth.py's "logistic" family)
    return 100.0 / (1.0 + np.exp(-0.1 * (np.asarray(t, dtype=float) - 20.0)))


def growing_series(t):
    kin = TurnoverKinetics(1, growth=CURVE)
    y = kin.predict(t, np.array([-25.0, -12.0, KD, 1.0]))
    return y + 1e-3 * np.sin(t)  # small deterministic scatter


def two_half_lives_by_hand(kd):
    """Root of e^{−k_d τ} W(0)/W(τ) = 1/4 (the slowest pool's old material, growth
    dilution as in Hesslein et al. 1993), by scipy's brentq on the formula written out."""
    def left(tau):
        return math.exp(-kd * tau) * logistic_w(0.0) / logistic_w(tau) - 0.25
    return optimize.brentq(left, 0.0, 1e4, xtol=1e-12)


def test_plateau_of_growing_animal_near_its_plateau_is_not_flagged():
    t = np.array([0, 2, 4, 7, 10, 14, 18, 22, 26, 30, 35, 40, 45, 50, 55, 60.0])
    fit = iso.TurnoverModel(1, growth=CURVE).fit(t, growing_series(t), warn=False)
    assert "plateau_not_reached" not in codes(fit), [w.message for w in fit.warnings]
    # two half-lives of incorporation, from the fitted k_d (scipy brentq on the formula)
    expected = two_half_lives_by_hand(fit.values["k1"])
    assert diagnostics.plateau_time(fit) == pytest.approx(expected, rel=1e-8)
    assert expected < 60.0 < 2 * LN2 / fit.values["k1"]  # by hand: 22 d against 2773 d


def test_plateau_of_growing_animal_sampled_too_briefly_quotes_incorporation_days():
    t = np.array([0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10.0])  # stops at day 10
    fit = iso.TurnoverModel(1, growth=CURVE).fit(t, growing_series(t), warn=False)
    note = next(w for w in fit.warnings if w.code == "plateau_not_reached")
    expected = two_half_lives_by_hand(fit.values["k1"])  # scipy brentq, about 22 d
    assert f"({expected:.4g} days)" in note.message
    assert "judged by its incorporation rate k_d + k_g(t)" in note.message
    # the catabolic rule's thousands of days are not quoted (2 ln 2/k_d, by hand)
    assert f"{2 * LN2 / fit.values['k1']:.4g}" not in note.message


def test_plateau_with_exponential_growth_uses_kd_plus_kg():
    # one pool, k_d = 0.01, k_g = 0.03: two incorporation half-lives 2 ln 2/0.04 = 34.66 d
    # (by hand; the catabolic 2 ln 2/0.01 = 138.6 d); sampled to 30 d
    t = np.array([0, 1, 2, 4, 6, 8, 10, 13, 16, 20, 25, 30.0])
    y = -12.0 + (-25.0 + 12.0) * np.exp(-0.04 * t) + 1e-4 * np.sin(t)
    w = 10.0 * np.exp(0.03 * t) * np.exp(1e-4 * np.cos(t))
    fit = iso.TurnoverModel(1, growth="exponential").fit(t, y, masses=(t, w), warn=False)
    note = next(w for w in fit.warnings if w.code == "plateau_not_reached")
    kappa = fit.values["k1"] + fit.values["k_growth"]
    assert kappa == pytest.approx(0.04, rel=1e-3)
    assert f"({2 * LN2 / kappa:.4g} days)" in note.message  # 2 ln 2/(k_d + k_g), by hand
    assert "judged by its incorporation rate k_d + k_g," in note.message


# -- item 7: rates beyond what the sampling resolves ----------------------------------------

def fast_series():
    # half-life 0.02 d (k = 34.7/d), first sample one day after the switch: k·t_first ≫ 20
    t = np.r_[0.0, np.linspace(1, 30, 12)]
    return t, one_pool(t, half_life=0.02) + 0.1 * np.random.default_rng(0).normal(size=13)


def test_rate_complete_before_first_sample_is_flagged_unidentifiable():
    t, y = fast_series()
    with pytest.warns(iso.IdentifiabilityWarning, match="k1 = .* is not identifiable"):
        fit = iso.TurnoverModel(1).fit(t, y)
    k1 = fit.values["k1"]
    assert k1 * 1.0 > diagnostics.FAST_LIMIT
    # k·t_first with t_first = 1 d (by hand)
    assert diagnostics.unresolved_rates(fit) == {"k1": pytest.approx(k1 * 1.0, rel=1e-12)}
    note = next(w for w in fit.warnings if w.code == "unidentifiable")
    assert note.category is iso.IdentifiabilityWarning
    assert "open above" in note.message and f"{k1 * 1.0:.3g} > 20" in note.message
    # its bounds: the upper one opened, the lower one kept; other parameters untouched
    assert diagnostics.open_unresolved(fit, "k1", (4.0, 200.0, "ok", "ok")) == (
        4.0, math.inf, "ok", "open")
    assert diagnostics.open_unresolved(fit, "delta0", (-26.0, -24.0, "ok", "ok")) == (
        -26.0, -24.0, "ok", "ok")


def test_resolved_rates_are_not_flagged():
    # half-life 10 d sampled from day 6: k·t_first = 0.42 (by hand)
    fit = iso.TurnoverModel(1).fit(T16, one_pool(T16) + 0.1 * np.random.default_rng(1)
                                   .normal(size=16), warn=False)
    assert diagnostics.unresolved_rates(fit) == {}
    assert "unidentifiable" not in codes(fit)


def _three_pools_on_one_pool_data():
    # half-life 10 d, 16 samples 0–90 d, σ 0.1 ‰ (seed 9): three pools put k1 far beyond
    # what a first sample at day 6 can resolve
    y = one_pool(T16) + 0.1 * np.random.default_rng(9).normal(size=16)
    return iso.TurnoverModel(3).fit(T16, y, warn=False)


def test_unidentifiable_rate_intervals_are_open_above():
    fit = _three_pools_on_one_pool_data()
    fast = diagnostics.unresolved_rates(fit)
    assert fast, fit.values
    for method in ("profile", "asymptotic"):
        ci = fit.conf_int(method=method).set_index("parameter")
        hl = fit.half_lives(method=method).set_index("pool")
        for nm in fast:
            assert ci.loc[nm, "upper"] == math.inf and ci.loc[nm, "upper_status"] == "open"
            # t½ = ln 2/k: an open upper rate bound is an open lower half-life bound of 0
            pool = int(nm[1:])
            assert hl.loc[pool, "lower"] == 0.0 and hl.loc[pool, "lower_status"] == "open"


# -- item 10: no sample after the switch ----------------------------------------------------

BEFORE = np.array([-40, -35, -30, -25, -20, -15, -10, -5, -1.0])


def test_series_before_the_switch_says_no_sample_follows_it():
    y = -25.0 + 0.1 * np.random.default_rng(0).normal(size=BEFORE.size)
    with pytest.warns(iso.DesignWarning, match="no sample follows the switch at t = 0 days"):
        fit = iso.TurnoverModel(1).fit(BEFORE, y)
    assert "no_sample_after_switch" in codes(fit)
    assert "few_points" not in codes(fit)
    note = next(w for w in fit.warnings if w.code == "no_sample_after_switch")
    assert "all 9 sample(s) are at or before it (the last at t = -1 days)" in note.message
    assert f"[{fit.warnings.index(note) + 1}] {note.message}" in str(fit.summary())


def test_after_switch_reason():
    # a sample at the switch itself shows no change yet; one a day later does
    why = diagnostics.after_switch_reason([0.0, 5.0, 10.0], 10.0, "d")
    assert why.startswith("no sample follows the switch at t = 10 days: all 3 sample(s)")
    assert diagnostics.after_switch_reason([0.0, 5.0, 10.0, 11.0], 10.0) is None
    assert "hours" in diagnostics.after_switch_reason([-2.0], 0.0, "h")


def test_fit_each_reports_no_sample_after_the_switch():
    y = -25.0 + 0.1 * np.random.default_rng(0).normal(size=BEFORE.size)
    df = pd.DataFrame({"subject": "A", "tissue": "blood", "isotope": "d13C", "time": BEFORE,
                       "value": y})
    table = iso.fit_each(df).table()
    assert table["reason"].str.startswith("no sample follows the switch at t = 0 days").all()
    assert not table["reason"].str.contains("no detectable change").any()


# -- item 11: units of the residual sd and the δ block's RSS --------------------------------

def test_residual_sd_is_printed_with_its_unit():
    y = one_pool(T16) + 0.1 * np.random.default_rng(0).normal(size=16)
    fit = iso.TurnoverModel(1).fit(T16, y, warn=False)
    r = y - fit.predict(T16)
    rss = float(r @ r)  # by hand
    s = math.sqrt(rss / (16 - 3))  # residual sd on n − p degrees of freedom, by hand
    line = header(fit)["Fit"]
    assert line.startswith(f"RSS {rss:.4g} ‰², s = {s:.4g} ‰, ")


def test_residual_sd_with_relative_sigma_is_a_multiple_of_sigma():
    y = one_pool(T16) + 0.1 * np.random.default_rng(0).normal(size=16)
    sigma = np.full(16, 0.05)
    fit = iso.TurnoverModel(1).fit(T16, y, sigma, warn=False)
    r = (y - fit.predict(T16)) / sigma
    s = math.sqrt(float(r @ r) / 13)  # by hand: about 0.1/0.05 = 2 times σ
    assert f"s = {s:.4g} × σ" in header(fit)["Fit"]
    assert 1.2 < s < 3.0


def test_growth_prior_fit_prints_the_delta_blocks_own_rss():
    # logistic growth fitted to masses first, its uncertainty carried into the turnover fit
    # as a Gaussian penalty: the printed RSS is Σ(y − ŷ)² of the δ data (by hand), not the
    # joint objective (δ block scaled to unit variance plus the penalty)
    rng = np.random.default_rng(1)
    curve = GrowthCurve("logistic", Winf=100.0, k=0.08, ti=25.0)
    tm = np.arange(0, 61, 5.0)
    gfit = iso.fit_growth(tm, curve.predict(tm) * np.exp(0.02 * rng.normal(size=tm.size)),
                          curve="logistic")
    t = np.array([0, 2, 4, 7, 10, 14, 18, 22, 26, 30, 35, 40, 45, 50, 55, 60.0])
    kin = TurnoverKinetics(1, growth=curve)
    y = kin.predict(t, np.array([-25.0, -12.0, 0.03, 1.0])) + 0.2 * rng.normal(size=t.size)
    fit = iso.TurnoverModel(1, growth=gfit).fit(t, y, warn=False)
    assert fit.joint and fit.state.engine.mass_block.kind == "prior"
    r = y - fit.predict(t)
    rss_d = float(r @ r)
    s_d = math.sqrt(rss_d / (16 - 3))  # δ0, δ_eq, k1: the growth parameters are the prior's
    line = header(fit, method="asymptotic")["Fit"]
    assert line.startswith(f"RSS {rss_d:.4g} ‰² (δ block), s = {s_d:.4g} ‰ (δ residuals)")
    assert abs(fit.rss - rss_d) > 1.0  # the joint objective differs (what was printed)


def test_joint_mass_fit_prints_both_blocks():
    # exponential growth fitted jointly with masses: δ block and ln W block RSS (by hand,
    # ln W0 profiled out: centred ln W − k_g × centred t)
    t = np.array([0, 2, 4, 7, 10, 14, 21, 28, 35, 42, 56, 70.0])
    rng = np.random.default_rng(2)
    y = -12.0 + (-25.0 + 12.0) * np.exp(-0.05 * t) + 0.1 * rng.normal(size=t.size)
    w = 10.0 * np.exp(0.02 * t + 0.01 * rng.normal(size=t.size))
    fit = iso.TurnoverModel(1, growth="exponential").fit(t, y, masses=(t, w), warn=False)
    r = y - fit.predict(t)
    lw = np.log(w)
    rm = (lw - lw.mean()) - fit.values["k_growth"] * (t - t.mean())
    text = residual_text(fit)
    assert text.startswith(f"RSS {float(r @ r):.4g} ‰² (δ block), "
                           f"s = {math.sqrt(float(r @ r) / (12 - 3)):.4g} ‰")
    assert text.endswith(f"ln(body mass) block RSS {float(rm @ rm):.4g}")


# -- item 12: undetermined fractions and the χ² test ----------------------------------------

def test_fraction_spanning_zero_to_one_is_not_determined():
    # two pools on one-pool data (half-life 10 d): the split between the pools is free
    y = one_pool(T16) + 0.1 * np.random.default_rng(0).normal(size=16)
    fit = iso.TurnoverModel(2).fit(T16, y, warn=False)
    summ = fit.summary()
    note = next(n for n in summ.notes if n.startswith("fraction not determined"))
    assert "f1 [" in note and "f2 [" in note
    # after every trust warning, numbered in the printed summary
    assert summ.notes.index(note) == len(fit.warnings)
    assert f"[{len(fit.warnings) + 1}] {note}" in str(summ)
    assert f"<li>{note}</li>" in summ._repr_html_()


def test_fraction_note_threshold():
    # interval widths 0.93 and 0.8 (by hand) against FRACTION_SPAN = 0.9
    def ci(lo, hi, ls="ok", hs="ok"):
        return pd.DataFrame({"parameter": ["k1", "f1"], "lower": [0.1, lo],
                             "upper": [1.0, hi], "level": 0.95, "method": "profile",
                             "lower_status": ["ok", ls], "upper_status": ["ok", hs]})
    assert FRACTION_SPAN == 0.9
    assert "f1 [0.03, 0.96]" in fraction_note(ci(0.03, 0.96))
    assert fraction_note(ci(0.1, 0.9)) is None
    assert "f1 [open, 0.95]" in fraction_note(ci(0.2, 0.95, ls="open"))
    assert fraction_note(ci(0.0, math.nan, hs="failed")) is None


def test_clean_two_pool_fit_has_no_fraction_note():
    # half-lives 3 d and 30 d, fractions 0.4/0.6, σ 0.05 ‰ (invented)
    t = np.array([0, 0.5, 1, 2, 3, 4, 6, 8, 10, 14, 18, 24, 32, 45, 60, 90, 120, 150.0])
    y = (-12.0 - 13.0 * (0.4 * np.exp(-LN2 / 3 * t) + 0.6 * np.exp(-LN2 / 30 * t))
         + 0.05 * np.random.default_rng(3).normal(size=t.size))
    fit = iso.TurnoverModel(2).fit(t, y, warn=False)
    assert not any(n.startswith("fraction not determined") for n in fit.summary().notes)


def test_chi2_note_fires_on_many_points_with_moderate_excess():
    # 60 samples, scatter 0.15 ‰, σ = 0.1 ‰ known: χ²/dof ≈ 2.25, below the old fixed
    # ratio 4 but far in the χ² tail on 57 dof (scipy.stats.chi2.sf)
    t = np.linspace(0, 90, 60)
    y = one_pool(t) + 0.15 * np.random.default_rng(4).normal(size=60)
    fit = iso.TurnoverModel(1).fit(t, y, 0.1, absolute_sigma=True, warn=False)
    p = stats.chi2.sf(fit.rss, fit.dof)
    assert fit.dof == 57 and fit.redchi < 4 and p < 1e-3
    note = next(w for w in fit.warnings if w.code == "chi2_high")
    assert note.category is iso.GoodnessOfFitWarning
    assert "on 57 degrees of freedom" in note.message and f"p = {p:.2g}" in note.message


def test_chi2_note_silent_when_few_dof_leave_the_excess_plausible():
    # 5 samples, one pool (3 parameters): 2 dof; σ chosen so that χ² = 10 exactly, i.e.
    # χ²/dof = 5 (above the old ratio 4) but P(χ²_2 ≥ 10) = e^{-5} = 0.0067 (by hand:
    # the χ² survival function with 2 dof is e^{-x/2}), not below 0.001
    t = np.array([0, 3, 7, 14, 30.0])
    y = one_pool(t) + np.array([0.05, -0.08, 0.1, -0.04, 0.02])
    r = y - iso.TurnoverModel(1).fit(t, y, warn=False).predict(t)
    sigma = math.sqrt(float(r @ r) / 10.0)
    fit = iso.TurnoverModel(1).fit(t, y, sigma, absolute_sigma=True, warn=False)
    assert fit.rss == pytest.approx(10.0, rel=1e-6)
    assert stats.chi2.sf(fit.rss, 2) == pytest.approx(math.exp(-5.0), rel=1e-5)
    assert fit.redchi > 4 and "chi2_high" not in codes(fit)
    assert re.search(r"χ² \(RSS weighted by 1/σ²\) 10, s = 1 × σ", header(fit)["Fit"])
