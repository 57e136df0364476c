"""The growth rate of a segmented tissue fitted from a profile with a known switch.

The demo goat tail hair (``goat_hair.csv``, invented; ``sample_data/README.md``) was made by
the demo generator with a hair growth rate of 0.4 mm/d (``goat_hair_truth.csv``); goat G05
(pen B) saw two diet switches (hay → maize on day 0, back to hay on day 120).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, special

import isoturnover as iso
from isoturnover.demo import demo_path
from isoturnover.diet import DietHistory
from isoturnover.errors import DataError
from isoturnover.growthrate import GrowthRateFit, fit_growth_rate

GROWTH = 0.4  # mm/d, the demo generator's (invented) hair growth rate (goat_hair_truth.csv)


@pytest.fixture(scope="module")
def g05():
    hair = iso.read_samples(demo_path("goat_hair"))
    diets = iso.read_diets(demo_path("goat_diets"))
    diet = DietHistory.from_table(diets[(diets["group"] == "B")
                                        & (diets["isotope"] == "d13C")])
    return hair[hair["subject"] == "G05"], diet


@pytest.fixture(scope="module")
def g05_fit(g05):
    prof, diet = g05
    model = iso.TurnoverModel(1, diet=diet, record="segments", growth_rate=0.25)
    return fit_growth_rate(prof, model, bounds=(0.1, 2.0))


def _rss_at(prof, diet, g):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return iso.TurnoverModel(1, diet=diet, record="segments", growth_rate=g).fit(
            prof, warn=False).rss


# ----------------------------------------------------------------------------------------
# the demo goat
# ----------------------------------------------------------------------------------------
def test_demo_goat_rate_inside_its_interval(g05_fit):
    r = g05_fit
    assert isinstance(r, GrowthRateFit) and iso.fit_growth_rate is fit_growth_rate
    assert (r.lower_status, r.upper_status, r.status) == ("ok", "ok", "ok")
    assert math.isfinite(r.lower) and math.isfinite(r.upper)
    assert r.lower < r.growth_rate < r.upper
    assert r.lower <= GROWTH <= r.upper  # the generator's rate (goat_hair_truth.csv)
    assert r.fit.model.growth_rate == r.growth_rate
    assert r.level == 0.95 and r.dof == 24 - r.fit.nvarys - 1  # 24 segments of G05
    text = r.summary()
    assert "mm/d" in text and "95 % profile interval" in text
    tab = r.table()
    assert list(tab.columns[2:]) == list(iso.conventions.INTERVAL_COLUMNS)
    assert tab["estimate"].iloc[0] == r.growth_rate


def test_profile_rss_at_the_estimate_is_the_fit_rss(g05, g05_fit):
    """Consistency: the profile's minimum is the RSS of the returned fit and of a fresh fit
    of the same model at that rate (the fits are deterministic)."""
    prof, diet = g05
    r = g05_fit
    k = int(np.argmin(r.profile_rss))
    assert r.profile_rate[k] == r.growth_rate
    assert r.profile_rss[k] == r.rss == r.fit.rss
    assert _rss_at(prof, diet, r.growth_rate) == pytest.approx(r.rss, rel=1e-9)
    assert np.all(np.diff(r.profile_rate) > 0)
    assert np.all(r.profile_rss >= r.rss)


def test_bounds_satisfy_the_f_cut(g05, g05_fit):
    """F(bound) = F(1, n-p-1; level) to 1e-6; the quantile from scipy.special.fdtri, the
    RSS at each bound from a fresh fit at that rate."""
    prof, diet = g05
    r = g05_fit
    fq = special.fdtri(1, r.dof, 0.95)  # source: scipy.special.fdtri
    assert r.f_quantile == pytest.approx(fq, rel=1e-12)
    assert r.cut == pytest.approx(r.rss * (1 + fq / r.dof), rel=1e-12)  # by hand
    for g in (r.lower, r.upper):
        f_stat = (_rss_at(prof, diet, g) - r.rss) / (r.rss / r.dof)
        assert f_stat == pytest.approx(fq, abs=1e-6)


def test_level_widens_the_interval(g05, g05_fit):
    prof, diet = g05
    model = iso.TurnoverModel(1, diet=diet, record="segments", growth_rate=0.5)
    r99 = fit_growth_rate(prof, model, bounds=(0.1, 2.0), level=0.99)
    assert r99.growth_rate == pytest.approx(g05_fit.growth_rate, rel=1e-6)
    assert r99.lower < g05_fit.lower and r99.upper > g05_fit.upper


# ----------------------------------------------------------------------------------------
# a simulated profile (invented whisker)
# ----------------------------------------------------------------------------------------
T_SAMPLE, SWITCH, G_TRUE, HALF_LIFE = 90.0, 40.0, 0.8, 12.0  # d, d, mm/d, d (invented)
DIET_BEFORE, DIET_AFTER, DISC = -27.0, -14.0, 2.0  # ‰ (invented)


def _true_segment_means(start, end):
    """The one-pool tissue after a diet step, δ(t) = diet + disc with exponential approach,
    averaged over each formation interval [T - b/g, T - a/g] by scipy quadrature (source:
    scipy.integrate.quad of the point model written out here)."""
    k = math.log(2) / HALF_LIFE

    def point(t):
        if t <= SWITCH:
            return DIET_BEFORE + DISC
        return DIET_AFTER + DISC + (DIET_BEFORE - DIET_AFTER) * math.exp(-k * (t - SWITCH))

    out = []
    for a, b in zip(start, end):
        t1, t2 = T_SAMPLE - b / G_TRUE, T_SAMPLE - a / G_TRUE
        val, _ = integrate.quad(point, t1, t2, points=[SWITCH], epsabs=1e-12, epsrel=1e-12)
        out.append(val / (t2 - t1))
    return np.array(out)


def test_simulated_profile_recovers_the_rate():
    """Seeded replicates of an invented whisker (24 segments of 3 mm, sd 0.15 ‰): the rate
    recovered within 5 % and inside its 95 % interval in at least 4 of 5 (a coverage-style
    check kept fast; P(≥ 4 of 5 | 95 %) ≈ 0.98 by the binomial)."""
    start = np.arange(0.0, 72.0, 3.0)
    end = start + 3.0
    mean = _true_segment_means(start, end)
    model = iso.TurnoverModel(1, diet=DietHistory.step(DIET_BEFORE, DIET_AFTER, at=SWITCH),
                              record="segments", growth_rate=1.5)
    covered = 0
    for seed in range(5):
        y = mean + np.random.default_rng(seed).normal(0.0, 0.15, mean.size)
        frame = pd.DataFrame({"time": T_SAMPLE, "segment_start": start,
                              "segment_end": end, "value": y})
        r = fit_growth_rate(frame, model, bounds=(0.2, 3.0))
        assert r.growth_rate == pytest.approx(G_TRUE, rel=0.05)
        assert r.status == "ok"
        covered += r.lower <= G_TRUE <= r.upper
    assert covered >= 4


def test_open_bound_when_the_profile_never_reaches_the_cut():
    """A noisy whisker (sd 2 ‰) searched from 0.75 mm/d up: the profile's lower side stays
    under the cut inside the bounds (open, reported as 0), the upper side closes."""
    start = np.arange(0.0, 72.0, 3.0)
    end = start + 3.0
    y = _true_segment_means(start, end) + np.random.default_rng(3).normal(0.0, 2.0, 24)
    frame = pd.DataFrame({"time": T_SAMPLE, "segment_start": start, "segment_end": end,
                          "value": y})
    model = iso.TurnoverModel(1, diet=DietHistory.step(DIET_BEFORE, DIET_AFTER, at=SWITCH),
                              record="segments", growth_rate=1.0)
    r = fit_growth_rate(frame, model, bounds=(0.75, 1.5), grid_points=9)
    assert (r.lower_status, r.upper_status, r.status) == ("open", "ok", "open")
    assert r.lower == 0.0 and r.growth_rate < r.upper < 1.5
    assert np.all(r.f_statistic(r.profile_rss[r.profile_rate < r.growth_rate])
                  <= r.f_quantile)  # never reaches the cut below the estimate
    assert "open" in r.summary()


# ----------------------------------------------------------------------------------------
# refusals
# ----------------------------------------------------------------------------------------
def test_refusals(g05):
    prof, diet = g05
    seg = iso.TurnoverModel(1, diet=diet, record="segments", growth_rate=0.4)
    with pytest.raises(DataError, match="'model' must have record='segments'"):
        fit_growth_rate(prof, iso.TurnoverModel(1, diet=diet), bounds=(0.1, 2.0))
    with pytest.raises(DataError, match="'model' must be a TurnoverModel"):
        fit_growth_rate(prof, "model", bounds=(0.1, 2.0))
    table = pd.DataFrame({"time": [0.0, 50.0], "rate": [0.3, 0.5]})
    with pytest.raises(DataError, match="'model' has a growth-rate table"):
        fit_growth_rate(prof, iso.TurnoverModel(1, diet=diet, record="segments",
                                                growth_rate=table), bounds=(0.1, 2.0))
    for bad in [(0.0, 1.0), (2.0, 1.0), (0.1, math.inf), "x", (0.1,)]:
        with pytest.raises(DataError, match="'bounds'"):
            fit_growth_rate(prof, seg, bounds=bad)
    with pytest.raises(DataError, match="'level'"):
        fit_growth_rate(prof, seg, bounds=(0.1, 2.0), level=95)
    with pytest.raises(DataError, match="'grid_points'"):
        fit_growth_rate(prof, seg, bounds=(0.1, 2.0), grid_points=2)
    with pytest.raises(DataError, match="'segments' must be a samples frame"):
        fit_growth_rate(prof.to_numpy(), seg, bounds=(0.1, 2.0))
    with pytest.raises(DataError, match=r"'segments' needs the columns .* missing \['value'\]"):
        fit_growth_rate(pd.DataFrame({"time": [1.0], "segment_start": [0.0],
                                      "segment_end": [1.0]}), seg, bounds=(0.1, 2.0))
    # the hair spans days 180 - 96/g ... 180: a switch on day 185 is never inside it
    late = iso.TurnoverModel(1, diet=DietHistory.step(-27.5, -12.5, at=185.0),
                             record="segments", growth_rate=0.4)
    before = prof.copy()
    with pytest.raises(DataError, match="no diet switch inside the profile's formation span"
                                        ".*not identifiable"):
        fit_growth_rate(prof, late, bounds=(0.1, 2.0))
    pd.testing.assert_frame_equal(prof, before)  # input not mutated
    few = prof.iloc[:3]  # segments formed on days 170-180 (at 0.4 mm/d): the switch of
    # day 120 lies in their span for rates below 0.1 mm/d
    with pytest.raises(DataError, match="'segments' has 3 segments: too few for the model's "
                                        "2 free parameters"):
        fit_growth_rate(few, seg, bounds=(0.05, 2.0))
    with pytest.raises(DataError, match="'segments' cannot be fitted with this model .*4 free "
                                        "parameters but only 3"):
        fit_growth_rate(few, iso.TurnoverModel(2, diet=diet, record="segments",
                                               growth_rate=0.4), bounds=(0.05, 2.0))


def test_a_fit_failing_along_the_profile_makes_that_bound_failed(g05, monkeypatch):
    # a fit that fails beyond ĝ is not "above the cut": the bound on that side is failed,
    # never ok (the other side unchanged)
    import isoturnover.growthrate as gr
    from isoturnover.errors import FitError

    prof, diet = g05
    real = gr._with_rate

    class Failing:
        def __init__(self, model):
            self.model = model

        def fit(self, *a, **k):
            raise FitError("failed on purpose (test)")

    def with_rate(model, g):
        m = real(model, g)
        return Failing(m) if g > 0.4015 else m

    monkeypatch.setattr(gr, "_with_rate", with_rate)
    model = iso.TurnoverModel(1, diet=diet, record="segments", growth_rate=0.25)
    r = fit_growth_rate(prof, model, bounds=(0.1, 2.0))
    assert r.upper_status == "failed" and r.status == "failed"
    assert r.lower_status == "ok" and r.lower < GROWTH
