"""Trust signals: each fires on a series crafted for it and stays silent on clean data.

For every signal (the codes of ``TurnoverFit.warnings``) the test checks three things: the
code is on the result, its message is a numbered note ``[i] …`` of ``str(fit.summary())``,
and ``fit()`` issues a warning of the right category with that message. The thresholds
(k·t_first 20, rate ratio 1.5, fraction 0.02, |r| 0.99, two half-lives of the slowest pool)
are common practice, not published rules; the χ² test against known σ is scipy's
``chi2.sf`` on the fit's degrees of freedom at p < 0.001.

All series are invented (closed forms written out below, seeded Gaussian noise).
"""

from __future__ import annotations

import html
import math
import re
import warnings

import numpy as np
import pytest

import isoturnover as iso

LN2 = math.log(2.0)
T16 = np.linspace(0.0, 90.0, 16)


def one_pool(t, d0=-25.0, deq=-12.0, half_life=10.0):
    return deq + (d0 - deq) * np.exp(-LN2 / half_life * np.asarray(t, dtype=float))


def two_pool(t, f1, hl1, hl2, d0=-25.0, deq=-12.0):
    t = np.asarray(t, dtype=float)
    return deq + (d0 - deq) * (f1 * np.exp(-LN2 / hl1 * t) + (1 - f1) * np.exp(-LN2 / hl2 * t))


def noise(n, sd, seed=0):
    return sd * np.random.default_rng(seed).normal(size=n)


def _case_not_converged():
    # constant values: the step has no size, δ_eq runs off while k -> 0
    return iso.TurnoverModel(1), (T16, -25.0 + noise(16, 0.1)), {}


def _case_singular():
    # two pools fitted to a one-pool series: the second pool is not determined
    return iso.TurnoverModel(2), (T16, one_pool(T16) + noise(16, 0.1)), {}


def _case_lag_at_zero():
    # a fast pool makes the early response run ahead of one exponential: the lag wants to be
    # negative and stops at its bound 0
    t = np.array([0, 0.5, 1, 2, 3, 4, 6, 8, 10, 14, 18, 24, 32, 45, 60, 90.0])
    y = two_pool(t, 0.2, 0.5, 10.0) + noise(16, 0.05)
    return iso.TurnoverModel(1, lag=True), (t, y), {}


def _case_rate_complete_before_first_sample():
    # half-life 0.02 d, first sample one day after the switch
    t = np.r_[0.0, np.linspace(1, 30, 12)]
    return iso.TurnoverModel(1), (t, one_pool(t, half_life=0.02) + noise(13, 0.1)), {}


def _case_rate_barely_moving():
    # half-life 10 000 d sampled for 30 d, new plateau known
    t = np.linspace(0, 30, 16)
    y = one_pool(t, half_life=1e4) + noise(16, 0.01)
    return iso.TurnoverModel(1), (t, y), {"fixed": {"delta_eq": -12.0}}


def _case_pools_close():
    # half-lives 7.7 d and 10 d (rate ratio 1.3), almost noise-free
    y = two_pool(T16, 0.5, 10 / 1.3, 10.0) + noise(16, 0.001)
    return iso.TurnoverModel(2), (T16, y), {}


def _case_tiny_pool():
    # a real but tiny fast pool (1.5 %)
    y = two_pool(T16, 0.015, 1.0, 10.0) + noise(16, 0.001)
    return iso.TurnoverModel(2), (T16, y), {}


def _case_correlation():
    # half-lives 8 d and 11 d: separable, but the parameters trade off almost perfectly
    y = two_pool(T16, 0.5, 8.0, 11.0) + noise(16, 0.02)
    return iso.TurnoverModel(2), (T16, y), {}


def _case_few_points():
    t = np.array([0, 1, 2, 4, 8.0])  # 4 samples after the switch for 3 parameters
    return iso.TurnoverModel(1), (t, one_pool(t, half_life=3.0) + noise(5, 0.1)), {}


def _case_no_sample_after_switch():
    t = np.array([-40, -30, -20, -15, -10, -5, -1.0])  # every sample before the switch at 0
    return iso.TurnoverModel(1), (t, -25.0 + noise(7, 0.1)), {}


def _case_plateau_not_reached():
    t = np.linspace(0, 15, 16)  # stops at 1.5 half-lives
    return iso.TurnoverModel(1), (t, one_pool(t) + noise(16, 0.1)), {}


def _case_chi2_high():
    # scatter 0.5 ‰ between time points, analytic sd 0.1 ‰ treated as known
    y = one_pool(T16) + noise(16, 0.5)
    return iso.TurnoverModel(1), (T16, y), {"sigma": 0.1, "absolute_sigma": True}


def growth_series(kg, kd, t):
    """One pool with exponential growth (Hesslein et al. 1993): δ = δ_eq + (δ0 − δ_eq)
    e^{−(k_g + k_d) t} and W = 10 e^{k_g t}, with a fixed 1e-4 scatter only (an exactly
    noise-free series leaves the δ block of the joint fit a residual sd of 0)."""
    t = np.asarray(t, dtype=float)
    y = -12.0 + (-25.0 + 12.0) * np.exp(-(kg + kd) * t) + 1e-4 * np.sin(t)
    w = 10.0 * np.exp(kg * t) * np.exp(1e-4 * np.cos(t))
    return y, w


def _case_growth_dominates():
    # k_g = 0.2/d, k_d = 0.01/d: the growth flux carries k_g/(k_g + k_d) = 0.952 of the
    # change (one pool, Hesslein et al. 1993; by hand), above the 0.9 of common practice
    t = np.array([0, 1, 2, 3, 5, 7, 10, 14, 18, 24, 30.0])
    y, w = growth_series(0.2, 0.01, t)
    return iso.TurnoverModel(1, growth="exponential"), (t, y), {"masses": (t, w)}


# code, crafted series, warning category, a phrase of the message
CASES = {
    "not_converged": ("not_converged", _case_not_converged, iso.ConvergenceWarning,
                      "the optimizer did not converge"),
    "singular": ("singular", _case_singular, iso.IdentifiabilityWarning,
                 "the covariance matrix is singular"),
    "at_bound lag": ("at_bound", _case_lag_at_zero, iso.BoundWarning,
                     "lag is at its lower bound 0"),
    "unidentifiable fast rate": ("unidentifiable", _case_rate_complete_before_first_sample,
                                 iso.IdentifiabilityWarning,
                                 "is not identifiable: the pool is complete before the first "
                                 "sample"),
    "at_bound slow rate": ("at_bound", _case_rate_barely_moving, iso.BoundWarning,
                           "barely moves within the sampling period"),
    "pools_close": ("pools_close", _case_pools_close, iso.IdentifiabilityWarning,
                    "within a factor 1.5"),
    "tiny_pool": ("tiny_pool", _case_tiny_pool, iso.IdentifiabilityWarning,
                  "a pool this small is not supported"),
    "correlation": ("correlation", _case_correlation, iso.IdentifiabilityWarning,
                    "the data hardly separate them"),
    "few_points": ("few_points", _case_few_points, iso.DesignWarning,
                   "sample(s) after the switch for 3 free parameters"),
    "no_sample_after_switch": ("no_sample_after_switch", _case_no_sample_after_switch,
                               iso.DesignWarning, "no sample follows the switch"),
    "plateau_not_reached": ("plateau_not_reached", _case_plateau_not_reached,
                            iso.DesignWarning, "before two half-lives of the slowest pool"),
    "chi2_high": ("chi2_high", _case_chi2_high, iso.GoodnessOfFitWarning,
                  "with σ treated as known"),
    "growth_dominates": ("growth_dominates", _case_growth_dominates,
                         iso.IdentifiabilityWarning, "growth explains nearly all of the change"),
}


# pytest.warns re-issues the other trust warnings of a crafted fit; they are not the subject
@pytest.mark.filterwarnings("ignore::isoturnover.IsoturnoverWarning")
@pytest.mark.parametrize("case", list(CASES))
def test_signal_fires(case):
    code, make, category, phrase = CASES[case]
    model, args, kwargs = make()
    with pytest.warns(category, match=re.escape(phrase)):
        fit = model.fit(*args, **kwargs)
    notes = [w for w in fit.warnings if code == w.code and phrase in w.message]
    assert len(notes) == 1, [(w.code, w.message) for w in fit.warnings]
    note = notes[0]
    assert note.category is category and issubclass(category, iso.IsoturnoverWarning)
    # the same message is a numbered note of the summary
    text = str(fit.summary())
    marks = re.findall(r"^\s+\[(\d+)\] (.*)$", text, flags=re.MULTILINE)
    numbered = {msg: int(i) for i, msg in marks}
    assert note.message in numbered, text
    # numbered 1, 2, 3 … in the order of fit.warnings
    assert [int(i) for i, _ in marks] == list(range(1, len(marks) + 1))
    assert numbered[note.message] == fit.warnings.index(note) + 1
    # and in the notebook view
    assert f"<li>{html.escape(note.message)}</li>" in fit.summary()._repr_html_()


def test_not_converged_fit_says_so():
    model, args, kwargs = _case_not_converged()
    fit = model.fit(*args, warn=False, **kwargs)
    assert fit.converged is False
    assert "NOT converged" in str(fit.summary()) and "NOT converged" in repr(fit)


def test_singular_fit_has_no_standard_errors_where_undetermined():
    # the second pool collapses (fraction and rate gap at the edge of their range): those
    # parameters get no standard error, the plateaus, which the data do determine, keep one
    model, args, kwargs = _case_singular()
    fit = model.fit(*args, warn=False, **kwargs)
    undetermined = [n for n in ("k1", "f1", "f2") if fit.params[n].stderr is None]
    assert undetermined, {n: fit.params[n].stderr for n in fit.params}
    assert fit.params["delta0"].stderr is not None and fit.params["delta0"].stderr > 0
    assert fit.params["delta_eq"].stderr is not None and fit.params["delta_eq"].stderr > 0


def test_chi2_high_silent_when_sigma_estimated():
    # same data, σ as relative weights: the residual variance absorbs the scatter
    model, args, kwargs = _case_chi2_high()
    fit = model.fit(*args, sigma=0.1, warn=False)
    assert "chi2_high" not in [w.code for w in fit.warnings]
    fit_known = model.fit(*args, warn=False, **kwargs)
    # χ²/dof far above 1 and a tiny goodness-of-fit p-value (scipy.stats.chi2.sf)
    assert fit_known.redchi > 4 and fit_known.chisqr_pvalue < 1e-6
    assert "chi2_high" in [w.code for w in fit_known.warnings]


@pytest.mark.parametrize("absolute_sigma", [False, True])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_clean_one_pool_series_is_silent(absolute_sigma, seed):
    # one pool, 16 samples 0–90 d, half-life 10 d, σ 0.1 ‰
    y = one_pool(T16) + noise(16, 0.1, seed=seed)
    with warnings.catch_warnings():
        warnings.simplefilter("error", iso.IsoturnoverWarning)
        fit = iso.TurnoverModel(1).fit(T16, y, sigma=0.1, absolute_sigma=absolute_sigma)
        unweighted = iso.TurnoverModel(1).fit(T16, y)
    assert fit.warnings == [] and unweighted.warnings == []
    assert fit.converged
    text = str(fit.summary())
    # the summary's notes are only the standing notes on method and meaning
    assert "incorporation rates" in text
    for _, _, _, phrase in CASES.values():
        assert phrase not in text


def test_clean_two_pool_series_is_silent():
    # half-lives 3 d and 30 d, fractions 0.4/0.6, σ 0.05 ‰ (invented)
    t = np.array([0, 0.5, 1, 2, 3, 4, 6, 8, 10, 14, 18, 24, 32, 45, 60, 90, 120, 150.0])
    y = two_pool(t, 0.4, 3.0, 30.0) + noise(t.size, 0.05, seed=3)
    with warnings.catch_warnings():
        warnings.simplefilter("error", iso.IsoturnoverWarning)
        fit = iso.TurnoverModel(2).fit(t, y)
    assert fit.warnings == []


def test_growth_dominates_names_the_flux_share():
    # k_g/(k_g + k_d) = 0.2/0.21 = 95.2 % (by hand): the share the message reports
    model, args, kwargs = _case_growth_dominates()
    fit = model.fit(*args, warn=False, **kwargs)
    note = next(w for w in fit.warnings if w.code == "growth_dominates")
    assert "the growth flux carries 95.2 % of the isotopic change up to t = 30" in note.message


def test_growth_dominates_silent_for_a_modest_growth_share():
    # a juvenile: k_g = 0.003/d, k_d = 0.022/d -> share 0.003/0.025 = 0.12 (by hand), far
    # below 0.9; sampled to 200 d, past two incorporation half-lives (2 ln 2/0.025 = 55 d)
    t = np.array([0, 2, 4, 7, 10, 14, 21, 28, 35, 42, 56, 70, 90, 120, 150, 200.0])
    y, w = growth_series(0.003, 0.022, t)
    with warnings.catch_warnings():
        warnings.simplefilter("error", iso.IsoturnoverWarning)
        fit = iso.TurnoverModel(1, growth="exponential").fit(t, y, masses=(t, w))
    assert fit.warnings == []
    share = fit.growth_share(method="asymptotic").set_index("quantity")
    assert share.loc["tissue", "estimate"] == pytest.approx(0.12, rel=1e-3)
    # the summary states the share as the growth flux's part of the change
    text = str(fit.summary(method="asymptotic"))
    assert "growth flux carries 12 % of the isotopic change up to t = 200" in text
    assert "growth explains nearly all" not in text
