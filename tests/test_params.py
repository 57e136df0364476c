"""lmfit as the parameter language: make_params, fit(params=), expressions, bounds.

Independent checks: lmfit.Model fitting the same bare curve under the same constraint
(lmfit's own Levenberg–Marquardt with numerical derivatives); a direct fit without
``params`` for the unconstrained case.
"""

from __future__ import annotations

import json
import math
import warnings

import lmfit
import numpy as np
import pytest

import isoturnover as iso
from isoturnover import DataError
from isoturnover.errors import BoundWarning

T = np.array([0, 1, 2, 3, 5, 7, 10, 14, 21, 28, 35, 42, 56, 70, 84, 100.0])


def two_pool_data(seed=3, sd=0.05):
    # simulated truth: delta0 -25, delta_eq -12, k1 0.5, k2 0.1 (= k1/5), f1 0.4
    rng = np.random.default_rng(seed)
    clean = -12 + (-25 + 12) * (0.4 * np.exp(-0.5 * T) + 0.6 * np.exp(-0.1 * T))
    return clean + rng.normal(0, sd, T.size)


def test_make_params_names_bounds_and_fraction_sum():
    p = iso.TurnoverModel(pools=2).make_params(delta0=-25.0, k1=0.3)
    assert list(p) == ["delta0", "delta_eq", "k1", "k2", "f1", "f2"]
    assert p["delta0"].value == -25.0 and p["k1"].value == 0.3
    assert p["k1"].min == 0 and p["k2"].min == 0
    assert (p["f1"].min, p["f1"].max) == (0, 1)
    assert p["f2"].expr == "1 - f1"
    lagged = iso.TurnoverModel(1, lag=True).make_params()
    assert lagged["lag"].min == 0 and not lagged["f1"].expr


def test_make_params_refuses_unknown_names():
    with pytest.raises(DataError, match=r"unknown parameter 'k3'.*k1, f1"):
        iso.TurnoverModel(pools=1).make_params(k3=0.1)
    with pytest.raises(DataError, match=r"did you mean 'delta_eq'"):
        iso.TurnoverModel(pools=1).make_params(delta_e=0.1)


def test_tied_rate_matches_lmfit_model_on_the_same_curve_and_constraint():
    y = two_pool_data()
    m = iso.TurnoverModel(pools=2)
    p = m.make_params(delta0=-25.0, delta_eq=-12.0)
    p["k2"].expr = "k1/5"
    fit = m.fit(T, y, params=p)

    # the curve a user would otherwise write, with lmfit's own constraint machinery
    def curve(t, delta0, delta_eq, k1, k2, f1):
        return delta_eq + (delta0 - delta_eq) * (f1 * np.exp(-k1 * t) + (1 - f1) * np.exp(-k2 * t))

    lm = lmfit.Model(curve)
    lp = lm.make_params(delta0=-25.0, delta_eq=-12.0, k1=0.4, k2=0.08, f1=0.5)
    lp["k2"].set(expr="k1/5")
    lp["f1"].set(min=0, max=1)
    ref = lm.fit(y, lp, t=T, fit_kws={"xtol": 1e-14, "ftol": 1e-14})
    for name in ("delta0", "delta_eq", "k1", "k2", "f1"):
        assert fit.values[name] == pytest.approx(ref.params[name].value, rel=1e-6), name
    assert fit.values["k2"] == pytest.approx(fit.values["k1"] / 5, rel=1e-12)
    assert fit.rss == pytest.approx(ref.chisqr, rel=1e-8)
    assert fit.nvarys == 4 == ref.nvarys
    # standard errors of the free parameters agree with lmfit's (same covariance formula)
    for name in ("delta0", "delta_eq", "k1", "f1"):
        assert fit.params[name].stderr == pytest.approx(ref.params[name].stderr, rel=1e-3)
    # the tied parameter keeps its expression and gets a standard error and an interval
    assert fit.params["k2"].expr == "k1/5"
    assert fit.params["k2"].stderr == pytest.approx(fit.params["k1"].stderr / 5, rel=1e-6)
    row = fit.conf_int().set_index("parameter").loc["k2"]
    k1_row = fit.conf_int().set_index("parameter").loc["k1"]
    assert row["lower_status"] == "ok" and row["upper_status"] == "ok"
    assert row["lower"] == pytest.approx(k1_row["lower"] / 5, rel=1e-4)
    assert row["upper"] == pytest.approx(k1_row["upper"] / 5, rel=1e-4)
    # the trust notes do not call a tie a correlation problem
    assert not [n for n in fit.warnings if n.code == "correlation"]
    # lmfit's report works on the result
    report = lmfit.fit_report(fit.lmfit_result)
    assert "k2:" in report and "== 'k1/5'" in report
    assert fit.lmfit_result.minimizer_result is not None


def test_params_path_runs_through_lmfit_and_agrees_with_the_direct_fit():
    y = two_pool_data(seed=5)
    m = iso.TurnoverModel(pools=2)
    direct = m.fit(T, y)
    via = m.fit(T, y, params=m.make_params(delta0=-25.0, delta_eq=-12.0))
    assert via.lmfit_result.minimizer_result is not None
    assert direct.lmfit_result.minimizer_result is None
    for name, v in direct.values.items():
        assert via.values[name] == pytest.approx(v, rel=1e-6, abs=1e-9), name
    assert via.rss == pytest.approx(direct.rss, rel=1e-9)


def test_vary_false_is_the_same_as_fixed():
    y = two_pool_data(seed=7)
    m = iso.TurnoverModel(pools=2)
    p = m.make_params()
    p["delta0"].set(value=-25.0, vary=False)
    a = m.fit(T, y, params=p)
    b = m.fit(T, y, fixed={"delta0": -25.0})
    assert a.fixed == {"delta0": -25.0}
    for name, v in b.values.items():
        assert a.values[name] == pytest.approx(v, rel=1e-7, abs=1e-10)


def test_bounds_on_a_plain_parameter_are_honoured_and_flagged():
    y = two_pool_data(seed=11)
    m = iso.TurnoverModel(pools=1)
    free = m.fit(T, y, warn=False)
    p = m.make_params()
    cap = free.values["delta_eq"] - 0.3  # below the unconstrained estimate
    p["delta_eq"].set(max=cap)
    with pytest.warns(BoundWarning, match=r"delta_eq .* at its upper bound"):
        fit = m.fit(T, y, params=p)
    assert fit.values["delta_eq"] == pytest.approx(cap, abs=1e-8)
    assert fit.params["delta_eq"].max == cap
    row = fit.conf_int().set_index("parameter").loc["delta_eq"]
    assert row["upper"] == cap and row["upper_status"] == "at_bound"
    assert row["lower"] < cap


@pytest.mark.parametrize("edit, message", [
    (lambda p: p["k2"].set(expr="k1/ratio"), r"uses ratio, which is not a parameter"),
    (lambda p: (p["k1"].set(expr="k2*5"), p["k2"].set(expr="k1/5")), r"in a circle"),
    (lambda p: p["f1"].set(expr="0.3"), r"pool fractions sum to 1 by construction"),
    (lambda p: p["k1"].set(max=1.0), r"rates are fitted on the log scale"),
    (lambda p: p["f1"].set(min=0.2), r"bounds of pool fractions are set by the model"),
    (lambda p: p["delta0"].set(value=np.nan), r"'params\['delta0'\]' has no finite value"),
])
def test_bad_params_are_refused_with_the_reason(edit, message):
    m = iso.TurnoverModel(pools=2)
    p = m.make_params()
    edit(p)
    with pytest.raises(DataError, match=message):
        m.fit(T, two_pool_data(), params=p)


def test_params_must_be_lmfit_parameters_of_this_model():
    m = iso.TurnoverModel(pools=1)
    with pytest.raises(DataError, match=r"'params' must be an lmfit.Parameters"):
        m.fit(T, two_pool_data(), params={"k1": 0.1})
    p = iso.TurnoverModel(pools=2).make_params()
    with pytest.raises(DataError, match=r"'params' has parameter\(s\) 'k2', 'f2'"):
        m.fit(T, two_pool_data(), params=p)


def test_params_are_not_changed_by_the_fit():
    m = iso.TurnoverModel(pools=2)
    p = m.make_params(delta0=-25.0)
    p["k2"].expr = "k1/5"
    before = p.dumps()
    m.fit(T, two_pool_data(), params=p)
    assert p.dumps() == before


def test_fit_with_ties_and_bounds_round_trips_through_json():
    m = iso.TurnoverModel(pools=2)
    p = m.make_params(delta0=-25.0)
    p["k2"].expr = "k1/5"
    p["delta_eq"].set(min=-20.0)
    fit = m.fit(T, two_pool_data(), params=p)
    text = json.dumps(fit.to_dict(), allow_nan=False)
    back = iso.load_fit(text)
    assert back.tied == {"k2": "k1/5"}
    assert back.bounds == {"delta_eq": (-20.0, math.inf)}
    np.testing.assert_allclose(back.predict(T), fit.predict(T), rtol=0, atol=1e-12)
    assert back.conf_int(method="asymptotic").equals(fit.conf_int(method="asymptotic"))


def test_changing_the_model_after_use_rebuilds_its_parameters():
    m = iso.TurnoverModel(pools=1)
    assert m.param_names == ("delta0", "delta_eq", "k1", "f1")
    m.pools = 2
    assert m.param_names == ("delta0", "delta_eq", "k1", "k2", "f1", "f2")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        assert len(m.fit(T, two_pool_data()).values) == 6
