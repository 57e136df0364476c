"""Sampling designs (isoturnover.design) and their simulation (isoturnover.simulate).

Sources of the checks are named beside each: the D-optimal design of a·e^(−bt) (Dette &
Neugebauer 1997, as cited in the design literature, and derived by hand), Box & Lucas 1959
(Biometrika 46:77–90), the delta method worked by hand, Gauss–Hermite quadrature against
the log-normal mean, and simulation.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import isoturnover as iso
from isoturnover.design import (
    PLAN_CAUTION,
    design_schedule,
    evaluate_design,
    model_spec,
    prior_points,
)
from isoturnover.errors import DataError
from isoturnover.report import CAUTION
from isoturnover.simulate import sample_size, simulate_design

ONE = {"delta0": -25.0, "delta_eq": -12.0, "k1": 0.1}


def box_lucas(t, theta):
    """y = θ1/(θ1 − θ2)(e^(−θ2 t) − e^(−θ1 t)) and its Jacobian (derivatives by hand)."""
    a, b = theta
    e1, e2 = np.exp(-a * t), np.exp(-b * t)
    y = a / (a - b) * (e2 - e1)
    dya = -b / (a - b) ** 2 * (e2 - e1) + a / (a - b) * t * e1
    dyb = a / (a - b) ** 2 * (e2 - e1) - a / (a - b) * t * e2
    return y, np.column_stack([dya, dyb])


# ----------------------------------------------------------------------------------------
# Known optimal designs
# ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("b", [0.05, 0.2, 1.3])
@pytest.mark.parametrize("baseline", [0, 1])
def test_one_pool_d_optimal_two_points_are_zero_and_one_over_b(b, baseline):
    # y = a e^(−bt) (one pool, delta_eq fixed at 0): D-optimal support {0, 1/b} (Dette &
    # Neugebauer 1997, as cited in the design literature). By hand: with t1 = 0,
    # det J = −a t2 e^(−b t2), largest at t2 = 1/b, so log det M = 2 ln(a/(b e)) − 4 ln sd.
    a, sd = -20.0, 0.2
    d = design_schedule(iso.TurnoverModel(1), {"delta0": a, "delta_eq": 0.0, "k1": b},
                        fixed={"delta_eq": 0.0}, n_samples=2, duration=10.0 / b, sd=sd,
                        baseline=baseline)
    assert d.times[0] == pytest.approx(0.0, abs=1e-6 / b)
    assert d.times[1] == pytest.approx(1.0 / b, rel=1e-4)
    assert d.log_det == pytest.approx(2 * math.log(abs(a) / (b * math.e)) - 4 * math.log(sd),
                                      abs=1e-6)
    assert "k1" in d.parameter_se and "delta_eq" not in d.parameter_se


def test_box_lucas_1959_through_a_user_model():
    # Box & Lucas (1959), θ = (0.7, 0.2): D-optimal times 1.229 and 6.858 (published 1.23
    # and 6.86; the reference notes of the project)
    d = design_schedule(box_lucas, {"theta1": 0.7, "theta2": 0.2},
                        param_names=["theta1", "theta2"], rate_names=["theta1", "theta2"],
                        n_samples=2, duration=20.0, sd=1.0, baseline=0)
    assert d.times == pytest.approx([1.229, 6.858], abs=1e-3)
    # the slowest rate is the reported half-life: ln 2 / 0.2 (by hand)
    assert d.target_value == pytest.approx(math.log(2) / 0.2)


def test_predicted_standard_error_is_the_delta_method_by_hand():
    # one pool: y = δeq + (δ0 − δeq) e^(−kt), J = [e^(−kt), 1 − e^(−kt), −(δ0 − δeq) t e^(−kt)]
    # (by hand); se(t½) = ln2/k² · sqrt((M⁻¹)_kk), se(t_p) = −ln(1 − p)/k² · sqrt((M⁻¹)_kk)
    t = np.array([0.0, 0.0, 3.0, 7.0, 12.0, 20.0, 35.0, 60.0])
    sd, k, change = 0.3, 0.1, -13.0
    e = np.exp(-k * t)
    J = np.column_stack([e, 1 - e, -change * t * e])
    cov = np.linalg.inv(J.T @ J / sd**2)
    d = evaluate_design(iso.TurnoverModel(1), ONE, t, sd=sd, criterion="half_life")
    assert d.se == pytest.approx(math.log(2) / k**2 * math.sqrt(cov[2, 2]), rel=1e-9)
    assert d.parameter_se["delta_eq"] == pytest.approx(math.sqrt(cov[1, 1]), rel=1e-9)
    d = evaluate_design(iso.TurnoverModel(1), ONE, t, sd=sd, criterion="time_to",
                        fraction=0.9)
    assert d.se == pytest.approx(-math.log(0.1) / k**2 * math.sqrt(cov[2, 2]), rel=1e-6)


def test_c_optimal_design_beats_its_alternatives():
    # c-optimality: the half-life criterion's schedule has a smaller variance of the
    # half-life than the D-optimal one and an evenly spaced one (definition of the optimum)
    m = iso.TurnoverModel(2)
    truth = {"delta0": -25.0, "delta_eq": -12.0, "k1": 0.3, "k2": 0.03, "f1": 0.4}
    kw = {"n_samples": 12, "duration": 150.0, "sd": 0.3}
    c = design_schedule(m, truth, criterion="half_life", **kw)
    dd = design_schedule(m, truth, criterion="D", **kw)
    even = evaluate_design(m, truth, np.linspace(0, 150, 12), sd=0.3)
    assert c.se < evaluate_design(m, truth, dd.times, sd=0.3).se
    assert c.se < even.se
    assert dd.log_det > evaluate_design(m, truth, c.times, sd=0.3).log_det
    assert dd.log_det > even.log_det
    assert c.target == "half-life (k2)"  # the slowest pool by default


def test_time_to_criterion_on_the_chain_uses_the_chain_quantity():
    # the chain's time to 95 %: numerical gradient of quantities.time_to; the reported
    # value is that function's (one implementation)
    from isoturnover.quantities import time_to

    m = iso.TurnoverModel(structure="chain")
    truth = {"delta0": -25.0, "delta_eq": -12.0, "k1": 0.5, "k2": 0.05}
    d = design_schedule(m, truth, n_samples=10, duration=100.0, sd=0.3, criterion="time_to")
    theta = np.array([truth[n] for n in m.param_names])
    assert d.target_value == pytest.approx(time_to(m.kinetics, 0.95, theta))
    assert np.isfinite(d.se) and d.se > 0


# ----------------------------------------------------------------------------------------
# Constraints
# ----------------------------------------------------------------------------------------
def test_constraints_spacing_fixed_times_baseline_and_animals():
    m = iso.TurnoverModel(1, lag=True)
    truth = {"delta0": -25.0, "delta_eq": -12.0, "k1": 0.1, "lag": 3.0}
    d = design_schedule(m, truth, n_samples=11, duration=60.0, sd=0.3, criterion="time_to",
                        baseline=2, fixed_times=[30.0], min_spacing=3.0, max_per_animal=4)
    tab = d.table()
    assert list(tab["role"]).count("baseline") == 2
    assert np.all(tab.loc[tab["role"] == "baseline", "time"] == 0.0)
    assert 30.0 in list(tab.loc[tab["role"] == "fixed", "time"])
    free = np.sort(tab.loc[tab["role"] != "baseline", "time"].to_numpy())
    assert np.all(np.diff(free) >= 3.0 * (1 - 1e-9))
    assert np.all((free >= 0) & (free <= 60.0))
    opt = tab.loc[tab["role"] == "optimised", "time"].to_numpy()
    assert opt.min() >= 3.0 * (1 - 1e-9)  # min_spacing kept from the baseline at t = 0 too
    assert d.n_animals == 3  # ceil(11 / 4)
    assert tab.groupby("animal").size().max() <= 4
    dd = design_schedule(m, truth, n_samples=9, duration=60.0, sd=0.3, destructive=True)
    assert dd.n_animals == 9 and sorted(dd.animals) == list(range(1, 10))


def test_diet_history_and_fixed_growth_rate_models():
    diet = iso.DietHistory(-26.0, changes=[(10.0, -12.0), (70.0, -26.0)])
    m = iso.TurnoverModel(2, diet=diet)
    truth = {"discrimination": 2.0, "k1": 0.3, "k2": 0.05, "f1": 0.5}
    d = design_schedule(m, truth, n_samples=12, duration=120.0, sd=0.3,
                        criterion="half_life")
    assert d.times.min() == pytest.approx(10.0)  # the baseline sits at the first switch
    assert d.times.max() <= 130.0 + 1e-9
    # the free fraction's se equals the dependent one's (f2 = 1 − f1, by hand)
    assert d.parameter_se["f1"] == pytest.approx(d.parameter_se["f2"])
    g = iso.TurnoverModel(1, growth="exponential")
    d = design_schedule(g, {"delta0": -25.0, "delta_eq": -12.0, "k1": 0.05,
                            "k_growth": 0.02}, fixed=["k_growth"], n_samples=8,
                        duration=60.0, sd=0.3)
    assert "k_growth" not in d.parameter_se


# ----------------------------------------------------------------------------------------
# The prior
# ----------------------------------------------------------------------------------------
def test_prior_points_reproduce_the_log_normal_mean():
    # E[k e^(σz)] = k e^(σ²/2) = k sqrt(1 + cv²) for σ² = ln(1 + cv²) (log-normal mean);
    # 5-node Gauss–Hermite is accurate to about 1e-4 here
    spec = model_spec(iso.TurnoverModel(2), {"delta0": -25.0, "delta_eq": -12.0, "k1": 0.3,
                                             "k2": 0.03, "f1": 0.4})
    th, w = prior_points(spec, 0.3)
    assert th.shape[0] == 25 and w.sum() == pytest.approx(1.0)
    k_all = np.sort(th[:, 2:4], axis=1)  # pools re-ordered: undo to check the marginals
    assert np.all(th[:, 2] >= th[:, 3])
    assert np.sum(w * k_all.sum(axis=1)) == pytest.approx(0.33 * math.sqrt(1.09), rel=1e-4)
    spec3 = model_spec(iso.TurnoverModel(3), {"delta0": -25.0, "delta_eq": -12.0, "k1": 1.0,
                                              "k2": 0.1, "k3": 0.01, "f1": 0.3, "f2": 0.3})
    a, _ = prior_points(spec3, 0.5, rng=4)
    b, _ = prior_points(spec3, 0.5, rng=4)
    assert a.shape[0] == 64 and np.array_equal(a, b)  # fixed-seed Monte Carlo


def test_prior_averaged_design_loses_less_when_the_guess_is_wrong():
    # a design for k = 0.1 judged at k = 0.05 and 0.2 (the guess wrong by ×0.5 and ×2): the
    # prior-averaged design (cv 0.5) gives the smaller standard error of the half-life in
    # both cases (delta method, evaluate_design)
    m = iso.TurnoverModel(1)
    kw = {"n_samples": 8, "duration": 60.0, "sd": 0.3, "criterion": "half_life"}
    local = design_schedule(m, ONE, **kw)
    robust = design_schedule(m, ONE, prior_cv=0.5, **kw)
    for factor in (0.5, 2.0):
        truth = dict(ONE, k1=0.1 * factor)
        se_local = evaluate_design(m, truth, local.times, sd=0.3).se
        se_robust = evaluate_design(m, truth, robust.times, sd=0.3).se
        assert se_robust < se_local, factor
    # at the guess itself the local design is the better one (it is optimal there)
    assert local.se <= evaluate_design(m, ONE, robust.times, sd=0.3).se


# ----------------------------------------------------------------------------------------
# Simulation and sample size
# ----------------------------------------------------------------------------------------
def test_predicted_se_agrees_with_simulation():
    # well-determined case: the delta-method se of the half-life within 15 % of the sd of
    # 200 simulated fits (seeded), intervals near their nominal coverage
    m = iso.TurnoverModel(1)
    d = design_schedule(m, ONE, n_samples=10, duration=60.0, sd=0.3, criterion="half_life")
    r = simulate_design(m, ONE, d, sd=0.3, n_sim=200, rng=1)
    assert r.failure_rate == 0.0
    assert r.empirical_se == pytest.approx(d.se, rel=0.15)
    assert r.predicted_se == pytest.approx(d.se)
    assert 0.9 <= r.coverage <= 0.99
    assert abs(r.mean - d.target_value) < 3 * d.se / math.sqrt(200) + 0.02 * d.target_value
    tab = r.table()
    assert tab.loc[0, "n_ok"] == 200 and "median_rel_half_width" in tab
    assert set(r.parameter_table()["parameter"]) == {"delta0", "delta_eq", "k1", "f1"}


def test_simulation_of_a_user_model_and_two_subjects():
    r = simulate_design(box_lucas, {"theta1": 0.7, "theta2": 0.2},
                        [0.5, 1.2, 1.2, 2.5, 4.0, 6.9, 6.9, 10.0, 15.0], sd=0.01,
                        param_names=["theta1", "theta2"], rate_names=["theta1", "theta2"],
                        n_subjects=2, n_sim=60, rng=3)
    assert r.failure_rate == 0.0
    assert r.empirical_se == pytest.approx(r.predicted_se, rel=0.3)
    assert r.target_name == "half-life (theta2)"


def test_simulation_results_do_not_depend_on_n_jobs():
    # one seed per simulation from a SeedSequence: the same draws in any worker
    m = iso.TurnoverModel(2)
    truth = {"delta0": -25.0, "delta_eq": -12.0, "k1": 0.3, "k2": 0.03, "f1": 0.4}
    t = [0, 1, 2, 4, 7, 10, 15, 20, 30, 45, 60, 90, 120]
    a = simulate_design(m, truth, t, sd=0.2, n_sim=12, rng=5, n_jobs=1)
    b = simulate_design(m, truth, t, sd=0.2, n_sim=12, rng=5, n_jobs=2)
    assert a.draws.equals(b.draws)


def test_without_joblib_the_simulations_run_serially_with_a_warning(monkeypatch):
    import isoturnover.groups as groups
    import isoturnover.simulate as simulate

    m = iso.TurnoverModel(1)
    a = simulate_design(m, ONE, [0, 5, 10, 20, 40, 60], sd=0.3, n_sim=4, rng=2)
    monkeypatch.setattr(groups, "_joblib", None)
    monkeypatch.setattr(simulate, "joblib", None)
    with pytest.warns(iso.IsoturnoverWarning, match="joblib is not installed"):
        b = simulate_design(m, ONE, [0, 5, 10, 20, 40, 60], sd=0.3, n_sim=4, rng=2,
                            n_jobs=2)
    assert a.draws.equals(b.draws)


def test_time_to_simulation_of_two_pools():
    # the time to 95 % of the change: the fits' own time_to (delta method), against the
    # design's prediction at the same schedule (within the sampling error of 40 draws)
    m = iso.TurnoverModel(2)
    truth = {"delta0": -25.0, "delta_eq": -12.0, "k1": 0.3, "k2": 0.03, "f1": 0.4}
    t = np.repeat([0.0, 2.0, 5.0, 10.0, 20.0, 40.0, 60.0, 90.0, 120.0, 150.0], 2)
    r = simulate_design(m, truth, t, sd=0.1, quantity="time_to", n_sim=40, rng=7)
    d = evaluate_design(m, truth, t, sd=0.1, criterion="time_to")
    assert r.truth_value == pytest.approx(d.target_value)
    assert r.failure_rate == 0.0
    assert r.empirical_se == pytest.approx(d.se, rel=0.35)


def test_sample_size_is_the_smallest_that_meets_the_target():
    m = iso.TurnoverModel(1)
    t = [0, 5, 10, 20, 40, 60]
    ss = sample_size(m, ONE, t, sd=0.5, target_rel_precision=0.1, n_sim=100, rng=0)
    assert ss.reached
    tab = ss.table().set_index("n_subjects")
    n = ss.n_subjects
    assert tab.loc[n, "median_rel_half_width"] <= 0.1
    assert n == 1 or not tab.loc[n - 1, "meets_target"]  # the one below fails
    # the analytic guess: (z se1 / (t½ r))², se1 from the delta method of one animal
    one = evaluate_design(m, ONE, t, sd=0.5)
    assert ss.predicted_n == math.ceil((1.959963985 * one.se / (one.target_value * 0.1)) ** 2)
    assert abs(n - ss.predicted_n) <= 2
    few = sample_size(m, ONE, t, sd=0.5, target_rel_precision=0.01, max_subjects=3,
                      n_sim=30, rng=0)
    assert not few.reached and few.n_subjects is None


# ----------------------------------------------------------------------------------------
# Outputs and errors
# ----------------------------------------------------------------------------------------
def test_every_output_carries_the_animal_care_caution():
    m = iso.TurnoverModel(1)
    d = design_schedule(m, ONE, n_samples=6, duration=60.0, sd=0.3)
    r = simulate_design(m, ONE, d, sd=0.3, n_sim=5, rng=0)
    ss = sample_size(m, ONE, d, sd=0.3, target_rel_precision=0.5, n_sim=5, rng=0)
    for out in (d, r, ss):
        # the project's caution (report.CAUTION), with its meaning for a plan
        assert CAUTION in out.summary() and PLAN_CAUTION in out.summary()
        assert out.caution == PLAN_CAUTION
    assert "human hair or blood: a human-research ethics board" in PLAN_CAUTION
    assert "do not replace it" in PLAN_CAUTION
    assert "0.1–0.2 ‰" in d.summary()  # the guidance on sd


def test_inputs_are_not_mutated():
    truth = dict(ONE)
    fixed_t = [30.0]
    design_schedule(iso.TurnoverModel(1), truth, n_samples=6, duration=60.0, sd=0.3,
                    fixed_times=fixed_t)
    assert truth == ONE and fixed_t == [30.0]


@pytest.mark.parametrize("kwargs, match", [
    ({"sd": 0.0}, "'sd' must be a positive"),
    ({"sd": None}, "'sd' must be a positive"),
    ({"criterion": "A"}, "criterion"),
    ({"n_samples": 2}, "'n_samples' = 2 is fewer than the 3 free"),
    ({"n_samples": 6, "baseline": 4, "fixed_times": [1, 2, 3]}, "fewer than the baseline"),
    ({"min_spacing": 20.0}, "'min_spacing' = 20"),
    ({"n_samples": 4, "baseline": 3}, "makes every free parameter estimable"),
    ({"duration": -1}, "'duration' must be a positive"),
    ({"prior_cv": -0.5}, "'prior_cv' must be a positive"),
    ({"pool": 2}, "'pool' must be a pool number from 1 to 1"),
    ({"fraction": 1.5}, "'fraction' must be in"),
    ({"destructive": True, "max_per_animal": 3}, "'max_per_animal' and destructive"),
])
def test_bad_arguments_raise_data_error(kwargs, match):
    args = {"n_samples": 8, "duration": 60.0, "sd": 0.3, **kwargs}
    with pytest.raises(DataError, match=match):
        design_schedule(iso.TurnoverModel(1), ONE, **args)


@pytest.mark.parametrize("model, truth, kwargs, match", [
    (iso.TurnoverModel(1), {"delta0": -25.0, "k1": 0.1}, {}, "missing delta_eq"),
    (iso.TurnoverModel(1), {**ONE, "k9": 1.0}, {}, "'truth' names 'k9'"),
    (iso.TurnoverModel(2), {**ONE, "k2": 0.01, "f1": 0.5, "f2": 0.6}, {}, "sum to 1"),
    (iso.TurnoverModel(1), {**ONE, "k1": -0.1}, {}, "positive rate"),
    (box_lucas, {"theta1": 0.7, "theta2": 0.2}, {}, "'param_names' is required"),
    (box_lucas, {"theta1": 0.7, "theta2": 0.2},
     {"param_names": ["theta1", "theta2"], "criterion": "time_to"}, "needs a TurnoverModel"),
    (iso.TurnoverModel(1, growth="exponential"), {**ONE, "k_growth": 0.01}, {},
     "fix 'k_growth'"),
    ("not a model", ONE, {}, "'model' must be"),
])
def test_bad_models_and_truths_raise_data_error(model, truth, kwargs, match):
    with pytest.raises(DataError, match=match):
        design_schedule(model, truth, n_samples=8, duration=60.0, sd=0.3, **kwargs)


def test_simulation_arguments_are_checked():
    m = iso.TurnoverModel(1)
    with pytest.raises(DataError, match="'n_sim'"):
        simulate_design(m, ONE, [0, 10, 20, 40], sd=0.3, n_sim=1)
    with pytest.raises(DataError, match="'rng' must be"):
        simulate_design(m, ONE, [0, 10, 20, 40], sd=0.3, rng="seed")
    with pytest.raises(DataError, match="'times' must be finite"):
        simulate_design(m, ONE, [0, np.nan], sd=0.3)
    with pytest.raises(DataError, match="'target_rel_precision'"):
        sample_size(m, ONE, [0, 10, 20, 40], sd=0.3, target_rel_precision=0)


def test_sample_size_refuses_a_schedule_spread_over_animals():
    model = iso.TurnoverModel(1)
    guess = {"delta0": -22.0, "delta_eq": -14.0, "k1": 0.07, "f1": 1.0}
    plan = iso.design_schedule(model, guess, n_samples=8, duration=60, sd=0.3,
                               max_per_animal=4, min_spacing=2)
    assert plan.n_animals == 2
    with pytest.raises(iso.DataError, match="spread over 2 animals"):
        iso.sample_size(model, guess, plan, sd=0.3, n_sim=10)
