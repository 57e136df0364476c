"""A shared fit equals the same model written by hand as one lmfit problem.

Independent implementation: the joint model (one pool; the rate common to every animal,
delta0 and delta_eq per animal) coded here with lmfit.Parameters and lmfit.minimize
(Levenberg–Marquardt on the plain residuals), one common residual variance. Invented,
seeded data.
"""

from __future__ import annotations

import lmfit
import numpy as np
import pandas as pd
import pytest

import isoturnover as iso


def test_shared_fit_equals_one_lmfit_problem_by_hand():
    rng = np.random.default_rng(41)
    t = np.array([0.0, 2, 5, 9, 14, 21, 30, 42, 56, 75, 95, 120])
    rows, subjects = [], [f"B{i}" for i in range(5)]
    for s in subjects:
        d0, de = -23 + rng.normal(0, 0.4), -16 + rng.normal(0, 0.4)
        y = de + (d0 - de) * np.exp(-0.04 * t) + rng.normal(0, 0.25, t.size)
        rows += [{"subject": s, "tissue": "liver", "isotope": "d15N", "time": ti,
                  "value": yi} for ti, yi in zip(t, y)]
    df = pd.DataFrame(rows)
    fit = iso.fit_shared(df, shared=("k1",), variance="common")

    params = lmfit.Parameters()
    params.add("k1", value=0.05, min=0)
    for s in subjects:
        params.add(f"d0_{s}", value=-22.0)
        params.add(f"de_{s}", value=-15.0)

    def residual(p):
        out = []
        for s in subjects:
            d = df[df["subject"] == s]
            m = p[f"de_{s}"] + (p[f"d0_{s}"] - p[f"de_{s}"]) * np.exp(
                -p["k1"] * d["time"].to_numpy())
            out.append(d["value"].to_numpy() - m)
        return np.concatenate(out)

    res = lmfit.minimize(residual, params, method="leastsq", xtol=1e-14, ftol=1e-14)
    ours = fit.params
    assert ours["k1"].value == pytest.approx(res.params["k1"].value, rel=1e-6)
    for s in subjects:
        assert ours[f"delta0_{s}"].value == pytest.approx(res.params[f"d0_{s}"].value,
                                                          rel=1e-6)
        assert ours[f"delta_eq_{s}"].value == pytest.approx(res.params[f"de_{s}"].value,
                                                            rel=1e-6)
    # standard errors: the covariance s²(JᵀJ)⁻¹ both ways (delta method to k1 from log k1)
    assert ours["k1"].stderr == pytest.approx(res.params["k1"].stderr, rel=1e-4)
