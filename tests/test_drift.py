"""A slowest rate that runs to 0 (a linear drift): stopped early, flagged, never chosen.

The rule (``projection.DRIFT_LIMIT``, ``DRIFT_STOP``; ``diagnostics.drift_reason``): a
variable-projection fit whose slowest rate heads to 0 with k·τ_max below the limit stops
there, unconverged, with the trust note ``linear_drift``; ``fit_each`` keeps it in the
comparison but does not choose it. The data are invented (seeded).
"""

import numpy as np
import pandas as pd
import pytest
from scipy.optimize import least_squares

import isoturnover as iso
from isoturnover import kinetics
from isoturnover.diagnostics import drift_reason, trust_notes
from isoturnover.diet import DietHistory
from isoturnover.projection import DRIFT_LIMIT, project_exponentials

TIMES = np.array([0, 1, 2, 4, 7, 10, 14, 21, 28, 42, 56, 84.0])
DIET = DietHistory(4.0, changes=[(0.0, 9.0)], start=-200.0)  # invented: old 4 ‰, new 9 ‰


def drift_series(seed=0):
    """One pool (k = 0.08/d, 7 → 12 ‰) plus a rising drift of 0.01 ‰/d and noise 0.05 ‰."""
    rng = np.random.default_rng(seed)
    y = 12.0 - 5.0 * np.exp(-0.08 * TIMES) + 0.01 * TIMES
    return y + rng.normal(0.0, 0.05, TIMES.size)


def two_pool_series(seed=4):
    """Two pools (half-lives 1.5 and 9 d, f1 = 0.6), 7 → 12 ‰, noise 0.05 ‰."""
    rng = np.random.default_rng(seed)
    k = np.log(2) / np.array([1.5, 9.0])
    y = 12.0 - 5.0 * (0.6 * np.exp(-k[0] * TIMES) + 0.4 * np.exp(-k[1] * TIMES))
    return y + rng.normal(0.0, 0.05, TIMES.size)


def test_projection_stops_at_the_drift():
    y = drift_series()
    pf = project_exponentials(TIMES, y, np.ones_like(y), [0.1, 0.01])
    assert pf.drift and not pf.converged
    # the slowest rate is below the limit over the sampling: k·τ_max < DRIFT_LIMIT
    assert min(pf.rates) * TIMES.max() < DRIFT_LIMIT
    assert pf.n_eval < 40  # stopped early, not at the budget (40 + 20·2 = 80)


def test_drift_fit_is_flagged_fast_and_at_the_limit(monkeypatch):
    y = drift_series()
    calls = []
    real = kinetics.TurnoverKinetics.evaluate

    def counting(self, *a, **k):
        calls.append(1)
        return real(self, *a, **k)

    monkeypatch.setattr(kinetics.TurnoverKinetics, "evaluate", counting)
    model = iso.TurnoverModel(2, diet=DIET, per_diet_separation=True)
    fit = model.fit(TIMES, y, warn=False)
    # the long search in the coordinates took about 2,000 evaluations here
    assert len(calls) < 20
    assert not fit.converged
    codes = [n.code for n in trust_notes(fit)]
    assert "linear_drift" in codes and "not_converged" in codes
    assert "linear drift" in drift_reason(fit)
    # the RSS at the stop lies within a relative 1e-3 above the limit k2 = 0, the model
    # y = a + b1 e^{-k1 t} + c t, solved here by scipy least_squares (the linear drift
    # written out: the limit of b2 e^{-k2 t} as k2 → 0 with b2 k2 fixed)
    def lim(p):
        return p[0] + p[1] * np.exp(-p[2] * TIMES) + p[3] * TIMES - y

    ref = least_squares(lim, [12.0, -5.0, 0.08, 0.0], xtol=1e-15, ftol=1e-15, gtol=1e-15)
    rss_lim = float(ref.fun @ ref.fun)
    assert rss_lim * (1 - 1e-9) <= fit.rss <= rss_lim * (1 + 1e-3)


def test_fit_each_does_not_choose_the_drift():
    y = drift_series()
    samples = pd.DataFrame({"subject": "a1", "group": "all", "tissue": "plasma",
                            "isotope": "d15N", "time": TIMES, "value": y})
    diets = pd.DataFrame({"group": "all", "isotope": ["d15N", "d15N"],
                          "start": [-200.0, 0.0], "value": [4.0, 9.0]})
    fs = iso.fit_each(samples, diets=diets, pools=(1, 2), per_diet_separation=True,
                      method="asymptotic")
    res = fs[("a1", "plasma", "d15N")]
    assert res.status == "ok" and res.chosen == "1 pool"
    tab = fs.table()
    row = tab[tab["candidate"] == "2 pools"].iloc[0]
    assert row["status"] == "not_eligible" and "linear drift" in row["reason"]
    assert not row["chosen"] and np.isfinite(row["aicc"])
    # the drift had the smallest AICc: kept in the comparison, passed over in the choice
    assert res.comparison.loc[res.comparison["label"] == "2 pools", "delta_aicc"].iloc[0] == 0


def test_normal_two_pool_fit_unchanged():
    y = two_pool_series()
    fit = iso.TurnoverModel(2).fit(TIMES, y, warn=False)
    assert fit.converged and not drift_reason(fit)
    assert "linear_drift" not in [n.code for n in trust_notes(fit)]
    v = fit.values
    # the rule does not touch a normal fit's path: the same projection without it gives
    # the same rates and amplitudes to 1e-9 (here to the last bit)
    k0 = [v["k1"], v["k2"]]
    on = project_exponentials(TIMES, y, np.ones_like(y), k0)
    off = project_exponentials(TIMES, y, np.ones_like(y), k0, detect_drift=False)
    assert on.converged and not on.drift
    np.testing.assert_allclose(on.rates, off.rates, rtol=1e-9)
    np.testing.assert_allclose(on.linear, off.linear, rtol=1e-9)
    np.testing.assert_allclose([v["k1"], v["k2"]], on.rates, rtol=1e-9)

    # and the fit is the least-squares minimum: scipy least_squares on the same curve in
    # natural parameters from the fit's estimates, tightest tolerances (scipy stops within
    # about 1e-8 of the estimates; the RSS agrees to 1e-12)
    def res(p):
        d0, deq, k1, k2, f1 = p
        return deq + (d0 - deq) * (f1 * np.exp(-k1 * TIMES) + (1 - f1) * np.exp(-k2 * TIMES)) - y

    p0 = [v["delta0"], v["delta_eq"], v["k1"], v["k2"], v["f1"]]
    ref = least_squares(res, p0, xtol=1e-15, ftol=1e-15, gtol=1e-15, x_scale="jac")
    np.testing.assert_allclose(p0, ref.x, rtol=1e-7)
    assert fit.rss == pytest.approx(float(ref.fun @ ref.fun), rel=1e-12)


@pytest.mark.parametrize("pools", [1, (1, 2)])
def test_a_straight_line_is_never_reported_as_a_pool(pools):
    # a straight line (no curvature over the sampling): the one-pool candidate drifts in the
    # projection and a two-pool one stalls in the general search with both rates near 0; no
    # candidate is chosen and the series says why (status failed, not too_few_points)
    rng = np.random.default_rng(3)
    t = np.array([0, 2, 5, 10, 15, 20, 30, 40, 50.0])
    y = -25 + 0.03 * t + rng.normal(0, 0.05, t.size)
    df = pd.DataFrame({"subject": "A", "tissue": "x", "isotope": "d13C", "time": t,
                       "value": y})
    fs = iso.fit_each(df, pools=pools)
    res = next(iter(fs.values()))
    assert res.chosen is None and res.status == "failed"
    assert "runs to 0" in res.reason
    tab = fs.table()
    assert not tab["chosen"].any()
    assert tab["reason"].str.contains("runs to 0").all()
