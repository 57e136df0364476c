"""Intervals computed once and reused: the state's memo, the mirrored fraction of two
pools, the time-to root kept on the kinetics, and fits pickled without their kept frames."""

import math
import pickle

import numpy as np
import pytest

import isoturnover as iso
from isoturnover import profiles, quantities


@pytest.fixture(scope="module")
def two_pool_fit():
    # invented two-pool step switch (seeded noise)
    rng = np.random.default_rng(7)
    t = np.array([0, 1, 2, 4, 7, 10, 14, 21, 28, 42, 56, 84.0])
    y = -12 + (-27 + 12) * (0.6 * np.exp(-0.4 * t) + 0.4 * np.exp(-0.05 * t))
    y = y + rng.normal(0, 0.15, t.size)
    return iso.TurnoverModel(2).fit(t, y, warn=False)


def test_memo_returns_the_same_interval(two_pool_fit):
    st = two_pool_fit.state
    a = profiles.parameter_interval(st, "k1", 0.95)
    b = profiles.parameter_interval(st, "k1", 0.95)
    assert a is b  # kept on the state's memo, not computed again
    c = profiles.parameter_interval(st, "k1", 0.9)
    assert c is not a and c.upper < a.upper  # another level is another interval


def test_second_fraction_mirrors_the_first(two_pool_fit):
    st = two_pool_fit.state
    f1 = profiles.parameter_interval(st, "f1", 0.95)
    f2 = profiles.parameter_interval(st, "f2", 0.95)
    # f2 = 1 − f1 (two pools), so its bounds are f1's mirrored, statuses swapped
    assert f2.lower == pytest.approx(1 - f1.upper, abs=1e-15)
    assert f2.upper == pytest.approx(1 - f1.lower, abs=1e-15)
    assert (f2.lower_status, f2.upper_status) == (f1.upper_status, f1.lower_status)
    # the same bounds by profiling f2 itself (its own re-anchored refits, no memo): equal
    # to the bound finder's tolerance (1e-5 of the distance from the estimate, by hand from
    # find_bound's bracket rule)
    j = st.kinetics.param_names.index("f2")
    direct = profiles._parameter_interval(st, "f2", j, 0.95, profiles.MAX_EVALUATIONS)
    est = float(st.theta[j])
    for got, want in ((f2.lower, direct.lower), (f2.upper, direct.upper)):
        assert abs(got - want) <= 1e-5 * abs(want - est)


def test_time_to_kept_root_matches_a_cold_start(two_pool_fit):
    kin = two_pool_fit.kinetics
    th = np.array(two_pool_fit.state.theta, dtype=float)
    tau = quantities.time_to(kin, 0.95, th)
    assert quantities.time_to(kin, 0.95, th) == tau  # the same θ: the kept value
    # a nearby θ starts Newton from the kept root; a cold start (a fresh copy of the
    # kinetics, empty memo) must give the same root to rounding (R convex, decreasing)
    th2 = th.copy()
    th2[kin.rate_index[1]] *= 1.01
    warm = quantities.time_to(kin, 0.95, th2)
    cold_kin = pickle.loads(pickle.dumps(kin))
    cold_kin.memo.clear()
    cold = quantities.time_to(cold_kin, 0.95, th2)
    assert warm == pytest.approx(cold, rel=1e-13)
    # and it is the root: Σ f_i exp(-k_i τ) = 0.05 (the defining equation, by hand)
    f = th2[kin.fraction_index]
    k = th2[kin.rate_index]
    assert float(np.sum(f * np.exp(-k * warm))) == pytest.approx(0.05, rel=1e-12)


def test_pickled_fit_drops_kept_frames_not_intervals(two_pool_fit):
    f = two_pool_fit
    hl = f.cached_frame("half_lives", 0.95, "profile")
    row = iso.groups.candidate_row(f, 0.95, "profile")
    g = pickle.loads(pickle.dumps(f))
    kinds = {k[0] for k in g._cache if isinstance(k, tuple)}
    assert "frame" not in kinds and "fitset_row" in kinds
    # the tables come back equal, rebuilt from the cached bounds
    assert g.cached_frame("half_lives", 0.95, "profile").equals(hl)
    back = iso.groups.candidate_row(g, 0.95, "profile")
    assert back.keys() == row.keys()
    for k, v in row.items():
        assert back[k] == v or (isinstance(v, float) and math.isnan(v) and math.isnan(back[k]))
