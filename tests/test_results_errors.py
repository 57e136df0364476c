"""Every error a fit's own methods raise for a bad argument, with its message.

``TurnoverFit`` (results, and its growth-dilution part in growthdilution) and the interval
functions of profiles (``parameter_interval``, ``asymptotic_interval``, ``delta_interval``)
raise :class:`~isoturnover.errors.DataError` naming the argument, what is allowed and what
was given; each is checked with ``pytest.raises(match=...)``, and that the fit is left
unchanged.

All data are invented: a one-pool diet switch from δ0 = −25 ‰ to δ_eq = −12 ‰ with a fixed
small deterministic scatter.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import isoturnover as iso
from isoturnover import profiles
from isoturnover.errors import DataError
from isoturnover.results import TurnoverFit

T = np.array([0, 2, 4, 7, 10, 14, 21, 28, 35, 42, 56, 70.0])


def _series(k=0.05):
    return -12.0 - 13.0 * np.exp(-k * T) + 0.02 * np.sin(3 * T)


@pytest.fixture(scope="module")
def plain():
    """One pool, no growth model."""
    return iso.TurnoverModel(1).fit(T, _series(), warn=False)


@pytest.fixture(scope="module")
def growing_two_pools():
    """Two pools with exponential growth (k_g = 0.02/d) and masses."""
    y = -12.0 - 13.0 * (0.4 * np.exp(-0.32 * T) + 0.6 * np.exp(-0.04 * T))
    w = 10.0 * np.exp(0.02 * T) * np.exp(1e-3 * np.cos(T))
    return iso.TurnoverModel(2, growth="exponential").fit(T, y + 1e-3 * np.sin(T),
                                                          masses=(T, w), warn=False)


@pytest.fixture(scope="module")
def tied():
    """Two pools with k2 tied to k1 by an lmfit expression."""
    y = -12.0 - 13.0 * (0.4 * np.exp(-0.4 * T) + 0.6 * np.exp(-0.08 * T)) \
        + 0.02 * np.sin(3 * T)
    m = iso.TurnoverModel(2)
    p = m.make_params(delta0=-25.0, delta_eq=-12.0)
    p["k2"].set(expr="k1/5")
    return m.fit(T, y, params=p, warn=False)


# -- the fit itself ------------------------------------------------------------------------
def test_state_must_come_from_the_engine(plain):
    with pytest.raises(DataError, match=r"'state' must be a FitState \(from the engine\); "
                                        r"got dict"):
        TurnoverFit(plain.model, {"theta": [0.0]})


@pytest.mark.parametrize("t, message", [
    ([0.0, math.nan, 3.0], r"'t' must be finite; got nan at position 1"),
    (np.array([[1.0, 2.0], [math.inf, 4.0]]), r"'t' must be finite; got inf at position 2"),
    ("soon", r"'t' must be a number or an array of numbers; got 'soon'"),
])
def test_predict_refuses_bad_times(plain, t, message):
    before = np.array(t, dtype=object, copy=True)
    with pytest.raises(DataError, match=message):
        plain.predict(t)
    if isinstance(t, np.ndarray):  # not mutated
        np.testing.assert_array_equal(t, before.astype(float))


def test_conf_int_refuses_unknown_parameters(plain):
    with pytest.raises(DataError, match=r"'params' has unknown parameter\(s\) k9, f3; this "
                                        r"fit's parameters are delta0, delta_eq, k1, f1"):
        plain.conf_int(params=["k9", "k1", "f3"])
    with pytest.raises(DataError, match=r"'params' must be a parameter name or a list of "
                                        r"them; got 5"):
        plain.conf_int(params=5)
    # one name as a string is one parameter, not its letters
    assert plain.conf_int(params="k1", method="asymptotic")["parameter"].tolist() == ["k1"]


@pytest.mark.parametrize("fraction, message", [
    (1.5, r"'fraction' must be between 0 and 1 \(0.95 = 95 %\); got 1.5"),
    ([0.5, 0.0], r"'fraction' must be between 0 and 1 \(0.95 = 95 %\); got \[0.5, 0.0\]"),
    (math.nan, r"'fraction' must be between 0 and 1 \(0.95 = 95 %\); got nan"),
    ("half", r"'fraction' must be a number or an array of numbers between 0 and 1; "
             r"got 'half'"),
])
def test_time_to_refuses_fractions_outside_zero_one(plain, fraction, message):
    with pytest.raises(DataError, match=message):
        plain.time_to(fraction=fraction)


@pytest.mark.parametrize("call", [
    lambda f: f.conf_int(level=95),
    lambda f: f.half_lives(level=0.0),
    lambda f: f.time_to(0.5, level=1.0),
    lambda f: f.mean_residence_time_interval(level=-0.5),
    lambda f: f.table(level=1.5),
    lambda f: f.summary(level=2),
    lambda f: f.profile(lambda th: th[2], level=1.2),
], ids=["conf_int", "half_lives", "time_to", "mrt_interval", "table", "summary", "profile"])
def test_levels_outside_zero_one_are_refused(plain, call):
    with pytest.raises(DataError, match=r"'level' must be between 0 and 1 \(0.95 for 95 %\)"):
        call(plain)


def test_level_that_is_not_a_number_is_refused(plain):
    with pytest.raises(DataError, match=r"'level' must be a number between 0 and 1; "
                                        r"got 'high'"):
        plain.half_lives(level="high")


@pytest.mark.parametrize("call", [
    lambda f: f.conf_int(method="bayes"),
    lambda f: f.half_lives(method="prof"),
    lambda f: f.time_to(0.5, method="Profile"),
    lambda f: f.mean_residence_time_interval(method="delta"),
    lambda f: f.summary(method=None),
], ids=["conf_int", "half_lives", "time_to", "mrt_interval", "summary"])
def test_unknown_interval_methods_are_refused(plain, call):
    with pytest.raises(DataError, match=r"'method' must be one of 'profile', 'asymptotic', "
                                        r"'bootstrap', 'mcmc'; got"):
        call(plain)


def test_mean_residence_time_kinds(plain):
    with pytest.raises(DataError, match=r"'kind' must be one of 'incorporation', "
                                        r"'catabolic'; got 'total'"):
        plain.mean_residence_time("total")
    with pytest.raises(DataError, match=r"kind='catabolic' needs a fit with a growth model "
                                        r"\(TurnoverModel\(growth=...\)\); without one the "
                                        r"rates are incorporation rates"):
        plain.mean_residence_time("catabolic")
    with pytest.raises(DataError, match=r"kind='catabolic' needs a fit with a growth model"):
        plain.mean_residence_time_interval(kind="catabolic")


def test_derived_interval_checks_its_scale(plain):
    with pytest.raises(DataError, match=r"'scale' must be one of 'log', 'logit', 'linear'; "
                                        r"got 'sqrt'"):
        plain.derived_interval(("k",), lambda th: th[2], plain.values["k1"], 0.95,
                               "asymptotic", scale="sqrt")


# -- growth dilution -----------------------------------------------------------------------
@pytest.mark.parametrize("name, call", [
    ("mean_growth_rate", lambda f: f.mean_growth_rate()),
    ("growth_rate_curve", lambda f: f.growth_rate_curve(T)),
    ("growth_share", lambda f: f.growth_share()),
    ("growth_share_curve", lambda f: f.growth_share_curve(T)),
    ("incorporation_half_lives", lambda f: f.incorporation_half_lives()),
])
def test_growth_methods_need_a_growth_model(plain, name, call):
    with pytest.raises(DataError, match=rf"^{name} needs a fit with a growth model "
                                        r"\(TurnoverModel\(growth=...\)\); this fit has none$"):
        call(plain)


def test_fry_arnold_exponent_needs_one_pool_and_exponential_growth(plain, growing_two_pools):
    with pytest.raises(DataError, match=r"fry_arnold_exponent needs a one-pool fit with "
                                        r"growth='exponential'; this fit has 1 pool\(s\) and "
                                        r"growth=None"):
        plain.fry_arnold_exponent()
    with pytest.raises(DataError, match=r"this fit has 2 pool\(s\) and "
                                        r"growth='exponential'"):
        growing_two_pools.fry_arnold_exponent()


def test_growth_share_and_curves_refuse_bad_times(growing_two_pools):
    f = growing_two_pools
    with pytest.raises(DataError, match=r"'at' must be finite; got nan at position 0"):
        f.growth_share(at=math.nan)
    with pytest.raises(DataError, match=r"'at' must be one time; got 2 values"):
        f.growth_share(at=[10.0, 20.0])
    with pytest.raises(DataError, match=r"'at' must be a number or an array of numbers; "
                                        r"got 'end'"):
        f.growth_share(at="end")
    with pytest.raises(DataError, match=r"'t' must be finite; got inf at position 1"):
        f.growth_share_curve([1.0, math.inf])
    with pytest.raises(DataError, match=r"'t' must be a number or an array of numbers"):
        f.growth_rate_curve(["a", "b"])
    with pytest.raises(DataError, match=r"'level' must be between 0 and 1"):
        f.growth_share(level=1.0)
    with pytest.raises(DataError, match=r"'method' must be one of"):
        f.incorporation_half_lives(method="jackknife")


# -- interval functions of profiles ----------------------------------------------------------
def test_parameter_interval_refuses_unknown_names_and_levels(plain):
    with pytest.raises(DataError, match=r"'name' must be one of this fit's parameters "
                                        r"\(delta0, delta_eq, k1, f1\); got 'k2'"):
        profiles.parameter_interval(plain.state, "k2")
    with pytest.raises(DataError, match=r"'level' must be between 0 and 1 \(0.95 for 95 %\); "
                                        r"got 1.5"):
        profiles.parameter_interval(plain.state, "k1", level=1.5)
    with pytest.raises(DataError, match=r"'name' must be one of this fit's parameters"):
        profiles.asymptotic_interval(plain.state, "lag")


def test_parameter_interval_refuses_a_tied_parameter(tied):
    # k2 = k1/5 is a derived quantity: its interval is a constrained profile
    with pytest.raises(DataError, match=r"'name': 'k2' is set by an expression of other "
                                        r"parameters; its interval is that of a derived "
                                        r"quantity \(uncertainty.profile_derived\)"):
        profiles.parameter_interval(tied.state, "k2")
    # the fit itself gives it one (the constrained profile), so its table still works
    row = tied.conf_int(params=["k2"]).iloc[0]
    assert row["lower"] < tied.values["k2"] < row["upper"]


def test_delta_interval_refuses_bad_scale_and_level(plain):
    k = plain.values["k1"]
    with pytest.raises(DataError, match=r"'scale' must be one of 'log', 'logit', 'linear'; "
                                        r"got 'probit'"):
        profiles.delta_interval(plain.state, lambda th: th[2], k, scale="probit")
    with pytest.raises(DataError, match=r"'level' must be a number between 0 and 1; "
                                        r"got 'wide'"):
        profiles.delta_interval(plain.state, lambda th: th[2], k, level="wide")


def test_errors_leave_the_fit_unchanged(plain):
    before = dict(plain.values)
    for call in (lambda: plain.predict([math.nan]), lambda: plain.time_to(2.0),
                 lambda: plain.conf_int(params=["x"]), lambda: plain.growth_share()):
        with pytest.raises(DataError):
            call()
    assert plain.values == before
