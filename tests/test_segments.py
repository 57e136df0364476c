"""Segments of growing tissues (:mod:`isoturnover.segments`): geometry, exact averages, fits.

Every segment average is checked against ``scipy.integrate.quad`` of the point model
(:class:`~isoturnover.kinetics.TurnoverKinetics`, itself checked against ODE integration in
``test_kinetics.py``) over the formation interval, and every Jacobian against numdifftools.
All parameter values, growth rates and profiles below are invented for the tests.
"""

from __future__ import annotations

import json
import math
import warnings

import numdifftools as nd
import numpy as np
import pandas as pd
import pytest
from scipy.integrate import quad

import isoturnover as iso
from isoturnover.diet import DietHistory
from isoturnover.errors import DataError, DesignWarning
from isoturnover.kinetics import TurnoverKinetics
from isoturnover.segments import (
    SegmentKinetics,
    check_length_unit,
    formation_intervals,
    growth_schedule,
    point_kinetics,
    segment_means,
)

QUAD_TOL = 1e-9  # ‰, agreement demanded between the closed form and quadrature
LN2 = math.log(2.0)

# formation intervals straddling switches, long and short ones (down to 1e-6 time units)
T1 = np.array([-30.0, -5.0, -1.0, 0.5, 3.0, 9.0, 14.0, 40.0, 2.0, 7.0, 25.0, 60.0])
T2 = T1 + np.array([4.0, 2.0, 3.0, 0.5, 4.0, 2.0, 8.0, 10.0, 1e-3, 1e-6, 30.0, 0.2])

DIET = DietHistory(-24.0, [(0.0, -14.0), (20.0, -19.0), (45.0, -12.0)])
DIET_LEAD = DietHistory(-24.0, [(0.0, -14.0), (30.0, -19.0)], start=-40.0, previous=-21.0)

CASES = {
    # name: (kinetics, theta)
    "1 pool": (TurnoverKinetics(1), [-25.0, -12.0, 0.08, 1.0]),
    "2 pools": (TurnoverKinetics(2), [-25.0, -12.0, 0.5, 0.03, 0.35, 0.65]),
    "3 pools": (TurnoverKinetics(3), [-25.0, -12.0, 2.0, 0.2, 0.01, 0.2, 0.3, 0.5]),
    "2 pools, lag": (TurnoverKinetics(2, lag=True),
                     [-25.0, -12.0, 0.5, 0.03, 0.35, 0.65, 1.7]),
    "exponential growth": (TurnoverKinetics(2, growth="exponential"),
                           [-25.0, -12.0, 0.3, 0.02, 0.4, 0.6, 0.01]),
    "chain": (TurnoverKinetics(structure="chain"), [-25.0, -12.0, 0.4, 0.06]),
    "chain, equal rates": (TurnoverKinetics(structure="chain"), [-25.0, -12.0, 0.1, 0.1]),
    "chain, near-equal rates": (TurnoverKinetics(structure="chain"),
                                [-25.0, -12.0, 0.1, 0.1 * (1 + 1e-7)]),
    "chain, far rates": (TurnoverKinetics(structure="chain"), [-25.0, -12.0, 5.0, 0.002]),
    "chain, lag": (TurnoverKinetics(structure="chain", lag=True),
                   [-25.0, -12.0, 0.3, 0.1, 2.5]),
    "piecewise diet, 2 pools": (TurnoverKinetics(2, diet=DIET),
                                [1.5, 0.4, 0.04, 0.3, 0.7]),
    "piecewise diet, chain, lag": (TurnoverKinetics(structure="chain", diet=DIET, lag=True),
                                   [1.5, 0.3, 0.08, 2.0]),
    "piecewise diet from earlier diet, 3 pools": (
        TurnoverKinetics(3, diet=DIET_LEAD), [2.0, 1.0, 0.1, 0.01, 0.2, 0.3, 0.5]),
    "piecewise diet, free initial": (TurnoverKinetics(2, diet=DIET, initial="free"),
                                     [-26.0, 1.5, 0.4, 0.04, 0.3, 0.7]),
}


def quad_means(kin, theta, t1, t2):
    """Mean of the point model over each interval by adaptive quadrature (scipy ``quad``),
    with the step times (switches plus lag) passed as break points."""
    theta = np.asarray(theta, dtype=float)
    lag = theta[kin.lag_index] if kin.lag_index is not None else 0.0
    steps = list(kin.switch_times) + ([kin.lead_in] if kin.lead_in is not None else [])
    out = []
    for a, b in zip(t1, t2):
        pts = [s + lag for s in steps if a < s + lag < b] or None
        v, _ = quad(lambda t: kin.evaluate(np.array([t]), theta)[0], a, b, points=pts,
                    epsabs=1e-13, epsrel=1e-13, limit=200)
        out.append(v / (b - a))
    return np.array(out)


# ----------------------------------------------------------------------------------------
# Exact averages and Jacobians
# ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", list(CASES))
def test_segment_means_equal_quadrature(name):
    kin, theta = CASES[name]
    shift = 5.0 if kin.diet is not None else 0.0
    got = segment_means(kin, theta, T1 + shift, T2 + shift)
    # source: scipy.integrate.quad of the point model over each formation interval
    ref = quad_means(kin, theta, T1 + shift, T2 + shift)
    assert np.max(np.abs(got - ref)) < QUAD_TOL


@pytest.mark.parametrize("name", list(CASES))
def test_segment_jacobian_matches_numdifftools(name):
    kin, theta = CASES[name]
    theta = np.asarray(theta, dtype=float)
    shift = 5.0 if kin.diet is not None else 0.0
    t1, t2 = T1 + shift, T2 + shift
    _, J = segment_means(kin, theta, t1, t2, jacobian=True)
    # source: numdifftools' Richardson-extrapolated central differences (a relative step of
    # 1e-4: Richardson removes the truncation error, a smaller step only adds round-off)
    Jn = nd.Jacobian(lambda th: segment_means(kin, th, t1, t2), step=1e-4 * np.maximum(
        np.abs(theta), 1e-2))(theta)
    scale = np.maximum(np.abs(Jn).max(axis=0), 1e-12)
    assert np.max(np.abs(J - Jn) / scale) < 1e-7


def test_short_segment_tends_to_point_value():
    kin, theta = CASES["chain"]
    t = np.array([0.3, 5.0, 40.0])
    got = segment_means(kin, theta, t - 1e-9, t + 1e-9)
    # source: the mean over a vanishing interval is the point value (continuity of δ)
    assert np.max(np.abs(got - kin.evaluate(t, np.asarray(theta)))) < 1e-9


def test_segment_kinetics_evaluates_means_at_midpoints_and_points_elsewhere():
    kin, theta = CASES["2 pools"]
    theta = np.asarray(theta)
    seg = SegmentKinetics(kin, T1, T2)
    mid = (T1 + T2) / 2
    # source: the exact means above (segment_means) and the point model (kinetics)
    assert np.allclose(seg.evaluate(mid, theta), segment_means(kin, theta, T1, T2),
                       atol=0, rtol=0)
    grid = np.array([-3.3, 11.1])
    y = seg.evaluate(np.r_[mid[:2], grid], theta)
    assert np.array_equal(y[2:], kin.evaluate(grid, theta))
    assert np.array_equal(y[:2], segment_means(kin, theta, T1[:2], T2[:2]))


# ----------------------------------------------------------------------------------------
# Geometry
# ----------------------------------------------------------------------------------------
def test_formation_intervals_constant_rate():
    # by hand: [T − lag − b/g, T − lag − a/g] with T = 100, lag = 3, g = 0.5
    t1, t2 = formation_intervals([0.0, 2.0], [2.0, 5.0], 100.0, 0.5, formation_lag=3.0)
    assert np.allclose(t1, [93.0, 87.0]) and np.allclose(t2, [97.0, 93.0])


def test_formation_intervals_tip_origin():
    # by hand: 30 mm long; [0, 4] from the tip is [26, 30] from the base, g = 2 → [85, 87]
    t1, t2 = formation_intervals([0.0], [4.0], 100.0, 2.0, origin="tip", tissue_length=30.0)
    assert np.allclose([t1[0], t2[0]], [85.0, 87.0])


def test_formation_intervals_piecewise_rate():
    # by hand: g = 1 on [0, 50), 0.5 after; G(100) = 50 + 25 = 75; a segment [10, 30] from the
    # base reaches back to G = 45 (t = 45) and G = 65 (t = 50 + 15/0.5 = 80)
    table = pd.DataFrame({"time": [0.0, 50.0], "rate": [1.0, 0.5]})
    t1, t2 = formation_intervals([10.0], [30.0], 100.0, table)
    assert np.allclose([t1[0], t2[0]], [45.0, 80.0])
    s = growth_schedule([[0.0, 1.0], [50.0, 0.5]])
    # by hand: before the first row the first rate applies: G(-10) = -10
    assert np.allclose(s.cumulative([-10.0, 60.0]), [-10.0, 55.0])
    assert np.allclose(s.inverse(s.cumulative([-10.0, 20.0, 70.0])), [-10.0, 20.0, 70.0])


# ----------------------------------------------------------------------------------------
# Fits
# ----------------------------------------------------------------------------------------
A = np.arange(0.0, 80.0, 2.0)  # 40 segments of 2 mm from the base of an 80 mm whisker
B = A + 2.0
T_SAMPLE, G_RATE = 120.0, 0.5  # sampled 120 d after the switch; 0.5 mm/d (invented)
TRUE2 = np.array([-22.0, -16.0, LN2 / 6.0, LN2 / 45.0, 0.4, 0.6])


def whisker(rng, sd=0.1, theta=TRUE2, pools=2):
    t1, t2 = formation_intervals(A, B, T_SAMPLE, G_RATE)
    mu = segment_means(TurnoverKinetics(pools), theta, t1, t2)
    return mu + rng.normal(0.0, sd, mu.size)


def test_fit_recovers_noise_free_profile_and_profiles_work():
    y = whisker(np.random.default_rng(0), sd=0.0)
    m = iso.TurnoverModel(2, record="segments", growth_rate=G_RATE)
    fit = m.fit(T_SAMPLE, y + 1e-4 * np.sin(A), segment_start=A, segment_end=B, warn=False)
    # source: the invented truth the profile was made from
    assert np.allclose(fit.state.theta, TRUE2, rtol=2e-3, atol=2e-3)
    ci = fit.conf_int(params=["k1", "k2"])
    assert (ci["lower_status"] == "ok").all() and (ci["upper_status"] == "ok").all()
    assert ((ci["lower"] < TRUE2[2:4]) & (TRUE2[2:4] < ci["upper"])).all()
    # the fit's predict_segments equals the exact means at its own parameters
    pred = fit.predict_segments(A, B, sample_time=T_SAMPLE, growth_rate=G_RATE)
    t1, t2 = formation_intervals(A, B, T_SAMPLE, G_RATE)
    assert np.allclose(pred, segment_means(fit.kinetics, fit.state.theta, t1, t2),
                       rtol=0, atol=1e-12)


@pytest.mark.parametrize("opts, theta", [
    ({"structure": "chain", "lag": True}, [-22.0, -16.0, 0.3, 0.05, 2.0]),
    ({"pools": 1, "diet": DietHistory(-24.0, [(0.0, -14.0), (60.0, -19.0)])},
     [1.5, LN2 / 12.0, 1.0]),
])
def test_fit_recovers_chain_and_diet_history(opts, theta):
    t1, t2 = formation_intervals(A, B, T_SAMPLE, G_RATE)
    kin = TurnoverKinetics(**opts)
    y = segment_means(kin, theta, t1, t2) + 1e-4 * np.sin(A)
    fit = iso.TurnoverModel(**opts, record="segments", growth_rate=G_RATE).fit(
        T_SAMPLE, y, segment_start=A, segment_end=B, warn=False)
    # source: the invented truth the profile was made from (noise 1e-4 ‰)
    free = [i for i, n in enumerate(kin.param_names) if not n.startswith("f")]
    assert np.allclose(fit.state.theta[free], np.asarray(theta)[free], rtol=1e-2, atol=1e-2)
    assert json.loads(fit.to_json())["model"]["record"] == "segments"


def test_frame_and_arrays_give_the_same_fit():
    y = whisker(np.random.default_rng(3))
    frame = pd.DataFrame({"subject": "w1", "tissue": "whisker", "isotope": "d13C",
                          "time": T_SAMPLE, "segment_start": A, "segment_end": B,
                          "value": y})
    m = iso.TurnoverModel(1, record="segments", growth_rate=G_RATE)
    f1 = m.fit(frame, warn=False)
    f2 = m.fit(T_SAMPLE, y, segment_start=A, segment_end=B, warn=False)
    assert np.allclose(f1.state.theta, f2.state.theta, rtol=1e-8)


def test_predict_of_a_segment_fit_is_the_point_model_everywhere():
    y = whisker(np.random.default_rng(5))
    fit = iso.TurnoverModel(2, record="segments", growth_rate=G_RATE).fit(
        T_SAMPLE, y, segment_start=A, segment_end=B, warn=False)
    th = fit.state.theta
    assert point_kinetics(fit.kinetics) is fit.kinetics.point_model
    assert point_kinetics(TurnoverKinetics(1)).__class__ is TurnoverKinetics
    grid = np.r_[fit.t[::7], np.linspace(-40.0, 120.0, 9)]   # midpoints among grid times
    # source: the point model itself at the fitted parameters
    np.testing.assert_allclose(fit.predict(grid), TurnoverKinetics(2).evaluate(grid, th),
                               rtol=0, atol=1e-12)
    # the fitted values stay the exact segment means (segment_means, quadrature-checked)
    t1, t2 = formation_intervals(A, B, T_SAMPLE, G_RATE)
    order = np.argsort((t1 + t2) / 2.0)
    means = segment_means(TurnoverKinetics(2), th, t1[order], t2[order])
    np.testing.assert_allclose(fit.best_fit, means, rtol=0, atol=1e-12)
    np.testing.assert_allclose(fit.residuals, fit.y - means, rtol=0, atol=1e-12)
    # a fit on arrays records each point's segment (what plot_segments draws)
    info = fit.data_info
    assert info["sample_time"] == [T_SAMPLE] * A.size
    assert info["segment_start"] == A.tolist() and info["segment_end"] == B.tolist()
    assert fit.model.length_unit == "mm" and "length_unit" in fit.model.config()


def test_check_length_unit():
    assert check_length_unit(" mm ") == "mm"
    for bad in ("", "   ", None, 3, "x" * 21, "m\nm"):
        with pytest.raises(DataError, match="'length_unit'"):
            check_length_unit(bad)


def test_point_fit_predict_segments():
    t = np.array([0.0, 3, 7, 14, 28, 56, 90])
    y = -12.0 - 13.0 * np.exp(-0.05 * t) + 0.01 * np.sin(t)
    fit = iso.TurnoverModel(1).fit(t, y, warn=False)
    pred = fit.predict_segments([0.0], [1.0], sample_time=60.0, growth_rate=0.1)
    # source: quadrature of the fitted point model over [50, 60]
    ref = quad_means(fit.kinetics, fit.state.theta, [50.0], [60.0])
    assert abs(pred[0] - ref[0]) < QUAD_TOL


def _coverage(n_rep, seed):
    """Share of replicates whose pool count (AICc, 1 vs 2 pools), fractions and half-lives
    fall inside their 95 % profile intervals; a seeded invented whisker profile."""
    rng = np.random.default_rng(seed)
    hits = {"pools": 0, "f1": 0, "hl1": 0, "hl2": 0}
    m1 = iso.TurnoverModel(1, record="segments", growth_rate=G_RATE)
    m2 = iso.TurnoverModel(2, record="segments", growth_rate=G_RATE)
    hl_true = LN2 / TRUE2[2:4]
    for _ in range(n_rep):
        y = whisker(rng)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            f1 = m1.fit(T_SAMPLE, y, segment_start=A, segment_end=B, warn=False)
            f2 = m2.fit(T_SAMPLE, y, segment_start=A, segment_end=B, warn=False)
            hits["pools"] += f2.aicc < f1.aicc
            ci = f2.conf_int(params=["f1"]).iloc[0]
            hits["f1"] += ci["lower"] <= TRUE2[4] <= ci["upper"]
            hl = f2.half_lives()
            for i, key in enumerate(("hl1", "hl2")):
                lo, hi = hl["lower"].iloc[i], hl["upper"].iloc[i]
                hits[key] += lo <= hl_true[i] <= hi
    return {k: v / n_rep for k, v in hits.items()}


def test_simulated_whisker_coverage_few_replicates():
    cov = _coverage(5, seed=11)
    # a fast variant of the slow test below: most replicates cover
    assert all(v >= 0.6 for v in cov.values()), cov


@pytest.mark.slow
def test_simulated_whisker_coverage_100_replicates():
    cov = _coverage(100, seed=2026)
    # 95 % intervals (and AICc choosing the 2 true pools): at least 90 % of 100 replicates
    assert all(v >= 0.90 for v in cov.values()), cov


def test_resolution_warning_for_a_pool_faster_than_a_segment():
    theta = np.array([-22.0, -16.0, LN2 / 1.0, LN2 / 45.0, 0.4, 0.6])  # 1-day pool
    y = whisker(np.random.default_rng(5), theta=theta)
    m = iso.TurnoverModel(2, record="segments", growth_rate=G_RATE)  # 4 d per segment
    with pytest.warns(DesignWarning, match="shorter than the time one segment spans"):
        fit = m.fit(T_SAMPLE, y, segment_start=A, segment_end=B)
    assert [w.code for w in fit.warnings].count("segment_resolution") >= 1


def test_no_resolution_warning_on_resolvable_pools():
    y = whisker(np.random.default_rng(6))
    fit = iso.TurnoverModel(2, record="segments", growth_rate=G_RATE).fit(
        T_SAMPLE, y, segment_start=A, segment_end=B, warn=False)
    assert "segment_resolution" not in [w.code for w in fit.warnings]


# ----------------------------------------------------------------------------------------
# Bad arguments
# ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("kwargs, match", [
    ({"growth_rate": 0.0}, "'growth_rate' must be > 0"),
    ({"growth_rate": -1.0}, "'growth_rate' must be > 0"),
    ({"growth_rate": [[0.0, 1.0], [0.0, 2.0]]}, "times of the table must increase"),
    ({"growth_rate": math.inf}, "'growth_rate' must be finite"),
    ({"growth_rate": 0.5, "formation_lag": -1.0}, "'formation_lag' must be one number >= 0"),
    ({"growth_rate": 0.5, "origin": "tip"}, "needs 'tissue_length'"),
    ({"growth_rate": 0.5, "origin": "middle"}, "origin"),
    ({"growth_rate": None}, "'growth_rate' is needed"),
])
def test_bad_growth_arguments(kwargs, match):
    m = iso.TurnoverModel(1, record="segments", **kwargs)
    with pytest.raises(DataError, match=match):
        m.fit(T_SAMPLE, np.zeros(A.size) + np.arange(A.size), segment_start=A, segment_end=B)


def test_bad_segments():
    with pytest.raises(DataError, match="'segment_end' must be greater than 'segment_start'"):
        formation_intervals([0.0, 3.0], [2.0, 3.0], 10.0, 1.0)
    with pytest.raises(DataError, match="'segment_start' must be finite"):
        formation_intervals([-math.inf], [2.0], 10.0, 1.0)
    with pytest.raises(DataError, match="formed after the sampling time"):
        formation_intervals([-1.0], [2.0], 10.0, 1.0)
    with pytest.raises(DataError, match="formed after the sampling time"):
        formation_intervals([0.0], [4.0], 10.0, 1.0, origin="tip", tissue_length=3.0)
    with pytest.raises(DataError, match="'sample_time' must have 2 values"):
        formation_intervals([0.0, 1.0], [1.0, 2.0], [10.0, 11.0, 12.0], 1.0)
    m = iso.TurnoverModel(1, record="segments", growth_rate=1.0)
    with pytest.raises(DataError, match="needs 'segment_start' and 'segment_end'"):
        m.fit(10.0, [1.0, 2.0, 3.0])


def test_bad_model_combinations():
    y = np.arange(A.size, dtype=float)
    with pytest.raises(DataError, match="'segment_start' is used with record='segments'"):
        iso.TurnoverModel(1).fit(A, y, segment_start=A, segment_end=B)
    with pytest.raises(DataError, match="'growth_rate' is used with record='segments'"):
        iso.TurnoverModel(1, growth_rate=0.5).fit(A, y)
    with pytest.raises(DataError, match="'record'"):
        iso.TurnoverModel(1, record="hair").fit(A, y)
    with pytest.raises(DataError, match="needs scale='delta'"):
        iso.TurnoverModel(1, record="segments", growth_rate=0.5, scale="atom_fraction",
                          isotope="d15N").fit(T_SAMPLE, y, segment_start=A, segment_end=B)
    frame = pd.DataFrame({"subject": "w1", "tissue": "whisker", "isotope": "d13C",
                          "time": T_SAMPLE, "value": y})
    with pytest.raises(DataError, match="needs the columns 'segment_start'"):
        iso.TurnoverModel(1, record="segments", growth_rate=0.5).fit(frame)
    t1, t2 = formation_intervals(A, B, T_SAMPLE, G_RATE)
    with pytest.raises(DataError, match="formed around the same time"):
        SegmentKinetics(TurnoverKinetics(1), [0.0, -1.0], [2.0, 3.0])
    with pytest.raises(DataError, match="'t_end' must be greater"):
        segment_means(TurnoverKinetics(1), [-25.0, -12.0, 0.1, 1.0], t2, t1)


# ----------------------------------------------------------------------------------------
# Planning (segmentplan)
# ----------------------------------------------------------------------------------------
PLAN_TRUTH = {"delta0": -22.0, "delta_eq": -16.0, "k1": LN2 / 10.0, "f1": 1.0}


def test_segment_profile_is_planned_by_the_design_tools():
    from isoturnover.segmentplan import SegmentProfile

    prof = SegmentProfile(1, segment_start=A, segment_end=B, sample_time=T_SAMPLE,
                          growth_rate=G_RATE)
    t1, t2 = formation_intervals(A, B, T_SAMPLE, G_RATE)
    theta = [PLAN_TRUTH[n] for n in prof.kinetics.param_names]
    # source: the exact segment means (segment_means) at the formation midpoints
    assert np.allclose(prof.kinetics.evaluate(prof.midpoints, np.array(theta)),
                       segment_means(TurnoverKinetics(1), theta, t1, t2), rtol=0, atol=1e-12)
    y = segment_means(TurnoverKinetics(1), theta, t1, t2) + 1e-4 * np.sin(A)
    fit = prof.fit(prof.midpoints[::-1], y[::-1], warn=False)
    assert abs(fit.values["k1"] - PLAN_TRUTH["k1"]) < 1e-3
    # its predict is the point model at the midpoints too (source: TurnoverKinetics itself)
    assert type(fit.kinetics.point_model) is TurnoverKinetics
    np.testing.assert_allclose(fit.predict(prof.midpoints), TurnoverKinetics(1).evaluate(
        prof.midpoints, fit.state.theta), rtol=0, atol=1e-12)
    with pytest.raises(DataError, match="not a formation midpoint"):
        prof.fit(prof.midpoints + 0.1, y)


def test_plan_segments_longer_segments_resolve_less():
    from isoturnover.segmentplan import plan_segments

    plan = plan_segments(PLAN_TRUTH, segment_lengths=[2.0, 10.0], tissue_length=80.0,
                         sample_time=T_SAMPLE, growth_rate=G_RATE, sd=0.15, n_sim=40, rng=7)
    tab = plan.table()
    # by hand: 80 mm cut into 2 mm and 10 mm pieces; 2/0.5 = 4 d and 10/0.5 = 20 d each
    assert tab["n_segments"].tolist() == [40, 8]
    assert np.allclose(tab["segment_time"], [4.0, 20.0])
    # a 10-d half-life outlasts a 4-d segment but not a 20-d one
    assert tab["resolvable"].tolist() == [True, False]
    # fewer, longer segments: wider intervals (seeded simulation, the same seed for both)
    assert tab["median_rel_half_width"].iloc[0] < tab["median_rel_half_width"].iloc[1]
    # the Fisher-information se agrees with the simulated spread (robust sd, 40 profiles)
    for length in (2.0, 10.0):
        res = plan.results[length]
        assert 0.6 < res.robust_se / res.predicted_se < 1.6
    assert "animal-care authority" in plan.summary()


def test_plan_segments_bad_arguments():
    from isoturnover.segmentplan import plan_segments

    kw = {"tissue_length": 80.0, "sample_time": T_SAMPLE, "growth_rate": G_RATE, "sd": 0.1}
    with pytest.raises(DataError, match="'segment_lengths' must be positive"):
        plan_segments(PLAN_TRUTH, segment_lengths=[0.0], **kw)
    with pytest.raises(DataError, match="longer than the tissue"):
        plan_segments(PLAN_TRUTH, segment_lengths=[100.0], **kw)
    with pytest.raises(DataError, match="'tissue_length' must be > 0"):
        plan_segments(PLAN_TRUTH, segment_lengths=[2.0], **{**kw, "tissue_length": -1.0})
    with pytest.raises(DataError, match="'length_unit' must be a non-empty unit label"):
        plan_segments(PLAN_TRUTH, segment_lengths=[2.0], length_unit="", **kw)
    with pytest.raises(DataError, match="'time_unit' must be a non-empty unit label"):
        plan_segments(PLAN_TRUTH, segment_lengths=[2.0], time_unit=3, **kw)


def test_plan_segments_summary_names_its_units():
    from isoturnover.segmentplan import plan_segments

    plan = plan_segments(PLAN_TRUTH, segment_lengths=[2.0, 5.0], tissue_length=20.0,
                         sample_time=T_SAMPLE, growth_rate=G_RATE, sd=0.15, n_sim=8, rng=3)
    text = plan.summary()
    # by hand: 20 mm in 2 mm and 5 mm pieces, 10 and 4 segments; at 0.5 mm/d a 2 mm segment
    # takes 4 days to grow and a 5 mm one 10 days
    assert "segments of 2 mm (10 segments, 4 days each)" in text
    assert "segments of 5 mm (4 segments, 10 days each)" in text
    assert "time units" not in text and "animal-care authority" in text
    # the same numbers in other units: labels only (a time-unit code printed as its word)
    plan = plan_segments(PLAN_TRUTH, segment_lengths=[2.0], tissue_length=20.0,
                         sample_time=T_SAMPLE, growth_rate=G_RATE, sd=0.15, n_sim=4, rng=3,
                         time_unit="h", length_unit="cm")
    assert "segments of 2 cm (10 segments, 4 hours each)" in plan.summary()
    assert plan.time_unit == "h" and plan.length_unit == "cm"
