"""Tests of isoturnover.growth and isoturnover.growthfit: growth curves, their fits,
intervals and persistence.

External checks: NIST/ITL StRD nonlinear regression dataset Rat42 (certified values),
numdifftools (independent numerical derivatives), statsmodels (independent least squares).
All other masses below are invented test data.
"""

from __future__ import annotations

import json
import math
import re
import warnings
from pathlib import Path

import lmfit
import numdifftools as nd
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from isoturnover import growthfit as GF
from isoturnover import growthlaws as G
from isoturnover.errors import (
    ConvergenceWarning,
    DataError,
    DesignWarning,
    FitError,
    IdentifiabilityWarning,
)
from isoturnover.growth import CURVES, GrowthCurve, GrowthFitFailure
from isoturnover.growthfit import (
    GrowthFit,
    fit_growth,
    fit_growth_each,
    load_growth,
)

REF = Path(__file__).parent / "reference_data"

# invented "true" curves used throughout (times in days, masses in g)
TRUE = {
    "exponential": dict(W0=5.0, k=0.03),
    "linear": dict(W0=5.0, b=0.3),
    "logistic": dict(Winf=100.0, k=0.1, ti=40.0),
    "gompertz": dict(Winf=100.0, k=0.06, ti=30.0),
    "von_bertalanffy": dict(Winf=100.0, k=0.04, W0=5.0),
    "richards": dict(Winf=100.0, k=0.08, ti=35.0, d=1.5),
}
T = np.linspace(0.0, 100.0, 30)


def lre(x, ref):
    """Log relative error, as NIST StRD reports agreement (digits)."""
    return -math.log10(abs(x - ref) / abs(ref)) if x != ref else 16.0


def read_strd(path):
    """Parse a NIST StRD nonlinear-regression file: certified values, RSS and data."""
    lines = path.read_text().splitlines()
    cert = {}
    for ln in lines:
        m = re.match(r"\s*(b\d+)\s*=\s*(\S+)\s+(\S+)\s+(\S+)\s+(\S+)", ln)
        if m:
            cert[m.group(1)] = (float(m.group(4)), float(m.group(5)))
    rss = float(next(ln for ln in lines if "Residual Sum of Squares" in ln).split()[-1])
    start = next(i for i, ln in enumerate(lines) if ln.strip().startswith("Data:   y"))
    data = np.array([[float(v) for v in ln.split()] for ln in lines[start + 1:] if ln.strip()])
    return cert, rss, data[:, 1], data[:, 0]


# ---------------------------------------------------------------------------------------
# NIST Rat42
# ---------------------------------------------------------------------------------------
@pytest.mark.parametrize("init", [None, dict(Winf=100.0, k=0.1, ti=10.0),
                                  dict(Winf=75.0, k=0.07, ti=2.5 / 0.07)])
def test_rat42_certified_values(init):
    # NIST/ITL StRD, Rat42 (Ratkowsky 1983): y = b1/(1 + exp(b2 − b3 x)) is our logistic with
    # b1 = Winf, b3 = k, b2 = k·ti; starts 1 and 2 of the file given as init
    cert, rss_cert, x, y = read_strd(REF / "Rat42.dat")
    fit = fit_growth(x, y, "logistic", scale="natural", init=init)
    winf, k, ti = fit.values
    b = {"b1": winf, "b2": k * ti, "b3": k}
    for name, (val, _sd) in cert.items():
        assert lre(b[name], val) >= 6, (name, b[name], val)
    assert lre(fit.rss, rss_cert) >= 6
    # certified standard deviations: covariance scaled by the residual variance
    cov = fit.covariance.to_numpy()
    assert lre(fit.stderr[0], cert["b1"][1]) >= 4
    assert lre(fit.stderr[1], cert["b3"][1]) >= 4
    # b2 = k·ti by the delta method: gradient (ti, k) on (k, ti)
    g = np.array([ti, k])
    sd_b2 = math.sqrt(g @ cov[1:, 1:] @ g)
    assert lre(sd_b2, cert["b2"][1]) >= 4
    assert fit.converged and fit.label == "logistic (natural scale)"


# ---------------------------------------------------------------------------------------
# recovery of known curves
# ---------------------------------------------------------------------------------------
def test_exponential_exact_recovery_and_statsmodels():
    w = 5.0 * np.exp(0.03 * T)
    fit = fit_growth(T, w, "exponential")
    np.testing.assert_allclose(fit.values, [5.0, 0.03], rtol=1e-13)
    assert fit.rss < 1e-25
    # noisy: ln W on t is ordinary least squares; statsmodels OLS is the independent check
    rng = np.random.default_rng(7)
    wn = w * np.exp(rng.normal(0.0, 0.05, T.size))
    fit = fit_growth(T, wn, "exponential")
    ols = sm.OLS(np.log(wn), sm.add_constant(T)).fit()
    np.testing.assert_allclose([math.log(fit.values[0]), fit.values[1]], ols.params, rtol=1e-10)
    # stderr of W0 = W0·se(ln W0) (delta method), of k directly
    np.testing.assert_allclose(fit.stderr, [fit.values[0] * ols.bse[0], ols.bse[1]], rtol=1e-8)
    np.testing.assert_allclose(fit.rss, ols.ssr, rtol=1e-12)
    # statsmodels AIC/BIC use the full Gaussian log-likelihood and count the regressors
    # only; ours drop n(1 + ln 2π) and count the residual variance as well (K = p + 1,
    # Burnham & Anderson 2002, least-squares case)
    n = T.size
    np.testing.assert_allclose(fit.aic, ols.aic - n * (1 + math.log(2 * math.pi)) + 2,
                               rtol=1e-12)
    np.testing.assert_allclose(fit.bic, ols.bic - n * (1 + math.log(2 * math.pi))
                               + math.log(n), rtol=1e-12)
    k = 3
    assert fit.aicc == pytest.approx(fit.aic + 2 * k * (k + 1) / (n - k - 1), rel=1e-14)


def test_mass_loss_allowed():
    w = 50.0 * np.exp(-0.01 * T)  # invented: an animal losing mass
    fit = fit_growth(T, w, "exponential")
    np.testing.assert_allclose(fit.values, [50.0, -0.01], rtol=1e-12)
    assert np.all(fit.rate(T) < 0)


@pytest.mark.parametrize("curve", CURVES)
@pytest.mark.parametrize("scale", ["log", "natural"])
def test_noise_free_recovery(curve, scale):
    g = GrowthCurve(curve, **TRUE[curve])
    fit = fit_growth(T, g.predict(T), curve, scale=scale)
    np.testing.assert_allclose(fit.values, g.values, rtol=1e-8, atol=1e-10)
    assert fit.converged


@pytest.mark.parametrize("curve", CURVES)
@pytest.mark.parametrize("scale", ["log", "natural"])
def test_noisy_recovery_within_few_stderr(curve, scale):
    g = GrowthCurve(curve, **TRUE[curve])
    rng = np.random.default_rng(2024)
    w = g.predict(T) * np.exp(rng.normal(0.0, 0.03, T.size))
    fit = fit_growth(T, w, curve, scale=scale)
    z = (fit.values - g.values) / fit.stderr
    assert np.all(np.abs(z) < 4), z


def test_richards_below_one_recovery():
    g = GrowthCurve("richards", Winf=100.0, k=0.08, ti=10.0, d=0.8)
    fit = fit_growth(T, g.predict(T), "richards")
    np.testing.assert_allclose(fit.values, g.values, rtol=1e-7)


def test_fixed_parameter_matches_closed_form():
    # ln W − ln W0 = k t with W0 known: k = Σ t (ln W − ln W0) / Σ t² (least squares through
    # the origin, worked by hand)
    rng = np.random.default_rng(3)
    w = 5.0 * np.exp(0.03 * T + rng.normal(0, 0.05, T.size))
    fit = fit_growth(T, w, "exponential", fixed={"W0": 5.0})
    k = np.sum(T * (np.log(w) - math.log(5.0))) / np.sum(T**2)
    assert fit.values[1] == pytest.approx(k, rel=1e-12)
    assert fit.nvarys == 1 and not fit.params["W0"].vary and fit.params["W0"].value == 5.0
    ci = fit.conf_int()
    assert list(ci["parameter"]) == ["k"]


def test_sigma_weights_match_statsmodels_wls():
    rng = np.random.default_rng(11)
    sd = 0.5 + 0.05 * T
    w = 5.0 + 0.3 * T + rng.normal(0, 1, T.size) * sd
    fit = fit_growth(T, w, "linear", scale="natural", sigma=sd)
    wls = sm.WLS(w, sm.add_constant(T), weights=1 / sd**2).fit()
    np.testing.assert_allclose(fit.values, wls.params, rtol=1e-10)
    np.testing.assert_allclose(fit.stderr, wls.bse, rtol=1e-8)
    assert "relative" in str(fit.summary())


# ---------------------------------------------------------------------------------------
# derivatives
# ---------------------------------------------------------------------------------------
DERIV_CASES = [
    ("exponential", dict(W0=5.0, k=0.03)),
    ("exponential", dict(W0=5.0, k=-0.02)),
    ("linear", dict(W0=5.0, b=0.3)),
    ("logistic", dict(Winf=100.0, k=0.1, ti=40.0)),
    ("logistic", dict(Winf=100.0, k=-0.05, ti=50.0)),
    ("gompertz", dict(Winf=100.0, k=0.06, ti=30.0)),
    ("von_bertalanffy", dict(Winf=100.0, k=0.04, W0=5.0)),
    ("von_bertalanffy", dict(Winf=20.0, k=0.04, W0=50.0)),
    ("richards", dict(Winf=100.0, k=0.08, ti=35.0, d=1.5)),
    ("richards", dict(Winf=100.0, k=0.08, ti=35.0, d=1.0)),
    ("richards", dict(Winf=100.0, k=0.08, ti=35.0, d=1.0 + 1e-5)),
    ("richards", dict(Winf=100.0, k=0.08, ti=35.0, d=4.0)),
    ("richards", dict(Winf=100.0, k=0.08, ti=10.0, d=0.8)),
]
TD = np.array([0.0, 7.0, 20.0, 33.0, 50.0, 80.0])


@pytest.mark.parametrize(("curve", "par"), DERIV_CASES)
def test_rate_is_derivative_of_log_mass(curve, par):
    # numdifftools (independent numerical differentiation) of ln W(t)
    g = GrowthCurve(curve, **par)
    num = nd.Derivative(lambda tt: g.log_mass(tt), n=1)(TD)
    np.testing.assert_allclose(g.rate(TD), num, rtol=1e-6, atol=1e-12)


@pytest.mark.parametrize(("curve", "par"), DERIV_CASES)
def test_log_mass_jacobian_against_numdifftools(curve, par):
    g = GrowthCurve(curve, **par)
    names = g.param_names

    def f(theta):
        return GrowthCurve(curve, **dict(zip(names, theta, strict=True))).log_mass(TD)

    num = nd.Jacobian(f)(g.values)
    ana = g.log_mass_jacobian(TD)
    assert ana.shape == (TD.size, len(names))
    np.testing.assert_allclose(ana, num, rtol=1e-6, atol=1e-9)


@pytest.mark.parametrize(("curve", "par"), DERIV_CASES)
def test_mass_jacobian_against_numdifftools(curve, par):
    # the natural-scale Jacobian the optimizer uses (curve objects are internal)
    obj = G._CURVE_OBJECTS[curve]
    v = GrowthCurve(curve, **par).values
    num = nd.Jacobian(lambda th: obj.mass(TD, th))(v)
    np.testing.assert_allclose(obj.mass_jac(TD, v), num, rtol=1e-6, atol=1e-8)


def test_richards_limits():
    # limits worked by hand from the Richards formula
    t = np.linspace(-20, 120, 15)
    lo = GrowthCurve("logistic", Winf=90.0, k=0.07, ti=40.0)
    np.testing.assert_allclose(
        GrowthCurve("richards", Winf=90.0, k=0.07, ti=40.0, d=2.0).predict(t), lo.predict(t),
        rtol=1e-13,
    )
    go = GrowthCurve("gompertz", Winf=90.0, k=0.07, ti=40.0)
    np.testing.assert_allclose(
        GrowthCurve("richards", Winf=90.0, k=0.07, ti=40.0, d=1.0).predict(t), go.predict(t),
        rtol=1e-13,
    )
    # near d = 1: ln W = ln Winf − z ln(1 + εz)/(εz) ≈ gompertz + ε z²/2, z = e^{−k(t−ti)}
    z = np.exp(-0.07 * (t - 40.0))
    for eps in (-1e-7, 1e-7):
        diff = GrowthCurve("richards", Winf=90.0, k=0.07, ti=40.0, d=1 + eps).log_mass(t)
        np.testing.assert_allclose(diff - go.log_mass(t), eps * z**2 / 2, rtol=1e-3, atol=1e-15)
    # d = 2/3: von Bertalanffy with b = 1 − (W0/Winf)^(1/3) and ti = ln(3b)/k
    vb = GrowthCurve("von_bertalanffy", Winf=90.0, k=0.05, W0=4.0)
    b = 1 - (4.0 / 90.0) ** (1 / 3)
    ri = GrowthCurve("richards", Winf=90.0, k=0.05, ti=math.log(3 * b) / 0.05, d=2 / 3)
    tt = np.linspace(0, 120, 13)
    np.testing.assert_allclose(ri.predict(tt), vb.predict(tt), rtol=1e-12)
    np.testing.assert_allclose(ri.rate(tt), vb.rate(tt), rtol=1e-10)
    # d = 0: monomolecular Winf (1 − e^{−k(t − ti)})
    mono = GrowthCurve("richards", Winf=90.0, k=0.05, ti=-10.0, d=0.0)
    np.testing.assert_allclose(mono.predict(tt), 90.0 * (1 - np.exp(-0.05 * (tt + 10))),
                               rtol=1e-12)
    # inflection of the Richards curve at ti, where W = Winf d^(1/(1−d))
    r = GrowthCurve("richards", Winf=90.0, k=0.05, ti=30.0, d=3.0)
    assert r.predict(30.0) == pytest.approx(90.0 * 3.0 ** (1 / (1 - 3.0)), rel=1e-13)
    d2 = nd.Derivative(lambda s: r.predict(s), n=2)(30.0)
    assert abs(d2) < 1e-7


def test_richards_invalid_region_is_nan():
    r = GrowthCurve("richards", Winf=100.0, k=0.08, ti=35.0, d=0.7)
    assert math.isnan(r.log_mass(0.0)) and math.isnan(r.rate(0.0))
    assert np.isfinite(r.log_mass(60.0))


# ---------------------------------------------------------------------------------------
# intervals
# ---------------------------------------------------------------------------------------
def test_profile_agrees_with_asymptotic_when_well_determined():
    g = GrowthCurve("logistic", **TRUE["logistic"])
    rng = np.random.default_rng(5)
    fit = fit_growth(T, g.predict(T) * np.exp(rng.normal(0, 0.02, T.size)), "logistic")
    pr = fit.conf_int(level=0.95, method="profile")
    asy = fit.conf_int(level=0.95, method="asymptotic")
    assert list(pr.columns) == ["parameter", "estimate", "lower", "upper", "level", "method",
                                "lower_status", "upper_status"]
    assert (pr["lower_status"] == "ok").all() and (pr["upper_status"] == "ok").all()
    for side in ("lower", "upper"):
        hp = (pr[side] - pr["estimate"]).abs().to_numpy()
        ha = (asy[side] - asy["estimate"]).abs().to_numpy()
        np.testing.assert_allclose(hp, ha, rtol=0.10)
    # the asymptotic interval is estimate ± t(n − p) · stderr (scipy's t quantile)
    from scipy import stats

    q = stats.t.ppf(0.975, T.size - 3)
    np.testing.assert_allclose(asy["upper"] - asy["estimate"], q * fit.stderr, rtol=1e-12)
    # at a profile bound the ΔRSS/s² statistic equals the F(1, n − p) quantile
    j = 0
    v0 = fit.values.copy()
    v0[j] = pr["upper"][j]
    free = np.array([False, True, True])
    _, rss, _ = fit._problem.solve(v0, free)
    s2 = fit.rss / (T.size - 3)
    assert (rss - fit.rss) / s2 == pytest.approx(stats.f.ppf(0.95, 1, T.size - 3), rel=1e-6)


def early_phase_data():
    # invented: masses that stop in the exponential phase of a logistic curve
    g = GrowthCurve("logistic", Winf=100.0, k=0.1, ti=60.0)
    t = np.linspace(0.0, 30.0, 12)
    rng = np.random.default_rng(1)
    return t, g.predict(t) * np.exp(rng.normal(0, 0.02, t.size))


def test_open_profile_bound_is_inf_with_status():
    t, w = early_phase_data()
    with pytest.warns(DesignWarning, match="asymptote Winf"), \
            pytest.warns(IdentifiabilityWarning, match="Winf and ti are strongly correlated"):
        fit = fit_growth(t, w, "logistic")
    ci = fit.conf_int().set_index("parameter")
    assert ci.loc["Winf", "upper"] == math.inf
    assert ci.loc["Winf", "upper_status"] == "open"
    assert ci.loc["Winf", "lower_status"] == "ok"
    assert 0 < ci.loc["Winf", "lower"] < fit.values[0]
    # the growth rate is still pinned by the exponential phase
    assert ci.loc["k", "lower_status"] == "ok" and ci.loc["k", "upper_status"] == "ok"
    assert any("asymptote" in w for w in fit.warnings)
    assert any("correlated" in w for w in fit.warnings)


def test_positive_parameter_lower_bound_at_zero():
    # invented, wildly scattered masses: on the natural scale an exponential with W0 → 0 (and
    # k large) that meets only the last point is still inside the 95 % profile region, so the
    # lower bound of W0 is the edge of its domain, 0, with status "at_bound"
    from scipy import stats

    t = np.array([0.0, 1.0, 2.0, 3.0, 4.0])
    w = np.array([10.0, 0.5, 12.0, 0.3, 11.0])
    fit = fit_growth(t, w, "exponential", scale="natural")
    ci = fit.conf_int().set_index("parameter")
    assert ci.loc["W0", "lower"] == 0.0 and ci.loc["W0", "lower_status"] == "at_bound"
    assert ci.loc["W0", "upper_status"] == "ok"
    # check by hand: at W0 = 1e-8 the re-optimised RSS is below the F(1, n − p) threshold
    v0 = np.array([1e-8, math.log(11.0 / 1e-8) / 4.0])
    _, rss, status = fit._problem.solve(v0, np.array([False, True]))
    s2 = fit.rss / 3
    assert status > 0 and (rss - fit.rss) / s2 < stats.f.ppf(0.95, 1, 3)


def test_profile_open_up_to_the_float_limit():
    # the same invented scattered masses: as k grows, W0 → 0 and the curve meets only the
    # last point, so the profile of k levels off below the F(1, n − p) cut-off; the search
    # reaches k where W0·e^{k t} leaves the floating-point range before any crossing, and the
    # upper bound is +inf, "open" (not a failure)
    from scipy import stats

    t = np.array([0.0, 1.0, 2.0, 3.0, 4.0])
    w = np.array([10.0, 0.5, 12.0, 0.3, 11.0])
    fit = fit_growth(t, w, "exponential", scale="natural")
    ci = fit.conf_int().set_index("parameter")
    assert ci.loc["k", "upper"] == math.inf and ci.loc["k", "upper_status"] == "open"
    # check by hand: at k = 50 the refit puts W0 = 11 e^{−200} on the last point and the
    # RSS is that of the first four masses, Σ w_i² = 244.34 (worked by hand), below the cut
    v, rss, status = fit._problem.solve(np.array([1e-80, 50.0]), np.array([True, False]))
    assert status > 0 and rss == pytest.approx(10.0**2 + 0.5**2 + 12.0**2 + 0.3**2, rel=1e-9)
    assert (rss - fit.rss) / (fit.rss / 3) < stats.f.ppf(0.95, 1, 3)


def _logistic_log_mass(t, theta):
    # ln W of the logistic W = Winf/(1 + exp(−k (t − ti))), written out here independently
    winf, k, ti = theta
    return math.log(winf) - np.logaddexp(0.0, -k * (t - ti))


def _brute_force_profile_bound(t, y, theta_hat, j, direction, step, level):
    """Profile bound of parameter j by brute force (Bates & Watts 1988, §6.1, from memory
    for the section: the profile-t interval is where ΔRSS/s² reaches F(1, n − p; level),
    s² = RSS_min/(n − p)): scan θ_j outward on a grid, refit the other parameters at each
    grid value with scipy.optimize.least_squares (warm-started along the scan), and
    interpolate linearly where ΔRSS/s² crosses the cut-off on a fine grid inside the
    bracketing cell."""
    from scipy import optimize, stats

    free = [i for i in range(3) if i != j]
    tight = dict(method="lm", xtol=1e-13, ftol=1e-13, gtol=1e-13, max_nfev=20000)

    def rss_full(theta):
        r = y - _logistic_log_mass(t, theta)
        return float(r @ r)

    full = optimize.least_squares(lambda th: y - _logistic_log_mass(t, th), theta_hat, **tight)
    rss_min = rss_full(full.x)
    n, p = t.size, 3
    s2 = rss_min / (n - p)
    crit = stats.f.ppf(level, 1, n - p)

    def refit(value, start):
        def res(x):
            th = np.empty(3)
            th[j], th[free] = value, x
            return y - _logistic_log_mass(t, th)

        sol = optimize.least_squares(res, start, **tight)
        return (2.0 * sol.cost - rss_min) / s2, sol.x

    # coarse scan outward in steps of `step` until the cut-off is passed
    start, inside = full.x[free], full.x[j]
    for i in range(1, 101):
        value = full.x[j] + direction * step * i
        d, x = refit(value, start)
        if d > crit:
            break
        start, inside = x, value
    else:
        raise AssertionError("the coarse scan did not bracket the bound")
    # fine scan of the bracketing cell, then linear interpolation of ΔRSS/s²
    fine = np.linspace(inside, value, 101)
    d_fine = []
    for v in fine:
        d, start = refit(v, start)
        d_fine.append(d)
    d_fine = np.array(d_fine)
    k = int(np.argmax(d_fine > crit))
    w = (crit - d_fine[k - 1]) / (d_fine[k] - d_fine[k - 1])
    return fine[k - 1] + w * (fine[k] - fine[k - 1])


@pytest.fixture(scope="module")
def logistic_profile():
    # invented logistic masses with 3 % multiplicative scatter, fitted on the log scale
    t, w = noisy_logistic(seed=21)
    fit = fit_growth(t, w, "logistic")
    return t, w, fit, fit.conf_int(level=0.95).set_index("parameter")


@pytest.mark.parametrize("name", ["Winf", "k", "ti"])
@pytest.mark.parametrize("direction", [-1, 1])
def test_profile_bound_matches_brute_force_profile(logistic_profile, name, direction):
    # the bound from the shared root finder (isoturnover.profiles.find_bound) against the
    # brute-force profile scan above, to 1e-6 relative
    t, w, fit, ci = logistic_profile
    side = "lower" if direction < 0 else "upper"
    assert ci.loc[name, f"{side}_status"] == "ok"
    j = fit.param_names.index(name)
    ref = _brute_force_profile_bound(t, np.log(w), fit.values, j, direction,
                                     0.1 * fit.stderr[j], 0.95)
    assert ci.loc[name, side] == pytest.approx(ref, rel=1e-6)


def test_conf_int_bad_arguments():
    fit = fit_growth(T, 5.0 * np.exp(0.03 * T) * (1 + 0.01 * np.sin(T)), "exponential")
    with pytest.raises(DataError, match=r"method must be one of 'profile', 'asymptotic'; "
                                        r"got 'bootstrap'"):
        fit.conf_int(method="bootstrap")
    with pytest.raises(DataError, match=r"'level' must be between 0 and 1.*got 95"):
        fit.conf_int(level=95)


# ---------------------------------------------------------------------------------------
# result object
# ---------------------------------------------------------------------------------------
def noisy_logistic(seed=9):
    g = GrowthCurve("logistic", **TRUE["logistic"])
    rng = np.random.default_rng(seed)
    return T, g.predict(T) * np.exp(rng.normal(0, 0.03, T.size))


def test_fit_attributes():
    t, w = noisy_logistic()
    fit = fit_growth(t, w, "logistic")
    assert fit.curve == "logistic" and fit.scale == "log"
    assert fit.label == "logistic (log scale)"
    assert isinstance(fit.params, lmfit.Parameters)
    assert fit.param_names == ["Winf", "k", "ti"]
    np.testing.assert_array_equal(fit.values, [fit.params[n].value for n in fit.param_names])
    assert fit.params["Winf"].stderr == pytest.approx(fit.stderr[0])
    c = fit.params["Winf"].correl["k"]
    cov = fit.covariance
    assert c == pytest.approx(cov.loc["Winf", "k"] / math.sqrt(cov.loc["Winf", "Winf"]
                                                               * cov.loc["k", "k"]))
    np.testing.assert_allclose(fit.residuals, np.log(w) - fit.log_mass(t), rtol=1e-12)
    assert fit.rss == pytest.approx(np.sum(fit.residuals**2), rel=1e-14)
    assert fit.nobs == 30 and fit.nvarys == 3
    np.testing.assert_allclose(fit.predict(t), np.exp(fit.log_mass(t)), rtol=1e-14)
    assert fit.log_mass_jacobian(t).shape == (30, 3)
    # mean specific growth rate over the data span
    mr = (fit.log_mass(t[-1]) - fit.log_mass(t[0])) / (t[-1] - t[0])
    assert fit.mean_rate() == pytest.approx(mr, rel=1e-14)
    # copies: changing the caller's arrays leaves the fit alone; the fit's are read-only
    w0 = w.copy()
    w[0] = 1e6
    np.testing.assert_array_equal(fit.mass, w0)
    with pytest.raises(ValueError):
        fit.t[0] = 5.0
    assert isinstance(fit, GrowthCurve)
    assert isinstance(fit.predict(3.0), float)


def test_exponential_mean_rate_equals_k():
    fit = fit_growth(T, 5.0 * np.exp(0.03 * T), "exponential")
    assert fit.mean_rate() == pytest.approx(0.03, rel=1e-12)
    assert fit.mean_rate(10.0, 20.0) == pytest.approx(0.03, rel=1e-12)


def test_data_fingerprint():
    t, w = noisy_logistic()
    a = fit_growth(t, w, "logistic")
    b = fit_growth(t, w, "gompertz")
    c = fit_growth(t, w, "logistic", scale="natural")
    d = fit_growth(t, w * 1.001, "logistic")
    e = fit_growth(t, w, "logistic", sigma=np.full(t.size, 2.0))
    assert re.fullmatch(r"[0-9a-f]{40}", a.data_fingerprint)
    assert a.data_fingerprint == b.data_fingerprint
    assert a.data_fingerprint != c.data_fingerprint  # another response (W, not ln W)
    assert a.data_fingerprint != d.data_fingerprint
    assert a.data_fingerprint != e.data_fingerprint  # other weights


def test_aicc_nan_with_note_when_too_few_dof():
    t = np.array([0.0, 10.0, 20.0, 30.0])
    w = np.array([5.0, 9.0, 14.0, 16.0])
    with pytest.warns(DesignWarning, match="AICc is undefined"):
        fit = fit_growth(t, w, "logistic")
    assert math.isnan(fit.aicc)
    assert any("AICc is undefined" in s for s in fit.warnings)
    assert "[" in str(fit.summary()) and "AICc is undefined" in str(fit.summary())


def test_summary_text_and_html():
    t, w = early_phase_data()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fit = fit_growth(t, w, "logistic")
    s = fit.summary()
    text = str(s)
    for part in ("logistic", "ln(mass) fitted", "Observations", "12", "RSS", "AICc", "Winf",
                 "Notes:", "[1]", "[2]"):
        assert part in text, part
    h = s._repr_html_()
    assert "<table>" in h and "<ol>" in h and "Winf" in h


def test_clean_fit_is_silent():
    t, w = noisy_logistic()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        fit = fit_growth(t, w, "logistic")
    assert fit.warnings == [] and fit.converged
    assert "Notes" not in str(fit.summary())


def test_to_dict_round_trip():
    t, w = noisy_logistic()
    fit = fit_growth(t, w, "logistic", sigma=np.full(t.size, 1.5))
    d = json.loads(json.dumps(fit.to_dict()))
    for back in (load_growth(d), GrowthFit.from_dict(d)):
        assert isinstance(back, GrowthFit)
        tt = np.linspace(-10, 150, 50)
        np.testing.assert_array_equal(back.predict(tt), fit.predict(tt))
        np.testing.assert_array_equal(back.rate(tt), fit.rate(tt))
        np.testing.assert_array_equal(back.stderr, fit.stderr)
        assert back.rss == fit.rss and back.aicc == fit.aicc
        assert back.data_fingerprint == fit.data_fingerprint
        assert back.label == fit.label and back.warnings == fit.warnings
    g = GrowthCurve("gompertz", **TRUE["gompertz"])
    g2 = load_growth(json.loads(json.dumps(g.to_dict())))
    np.testing.assert_array_equal(g2.predict(T), g.predict(T))


def test_load_growth_errors():
    with pytest.raises(DataError, match="load_growth needs a dict .* without a 'type' key"):
        load_growth([1, 2])
    with pytest.raises(DataError, match="'type' must be one of 'GrowthFit', 'GrowthCurve'"):
        load_growth({"type": "Other"})
    t, w = noisy_logistic()
    d = fit_growth(t, w, "logistic").to_dict()
    del d["values"]
    with pytest.raises(DataError, match="missing the key 'values'"):
        load_growth(d)


def test_known_curve():
    g = GrowthCurve("logistic", Winf=80.0, k=0.07, ti=39.0)
    assert GrowthCurve.from_params("logistic", Winf=80.0, k=0.07, ti=39.0).values.tolist() == [
        80.0, 0.07, 39.0]
    # logistic at the inflection: W = Winf/2, rate = k/2 (from the formula)
    assert g.predict(39.0) == pytest.approx(40.0, rel=1e-15)
    assert g.rate(39.0) == pytest.approx(0.035, rel=1e-15)
    assert g.label == "logistic (known curve)"
    assert not g.params["Winf"].vary
    with pytest.raises(DataError, match=r"curve 'logistic' needs parameters Winf, k, ti; "
                                        r"missing: ti"):
        GrowthCurve("logistic", Winf=80.0, k=0.07)
    with pytest.raises(DataError, match=r"'params' has unknown parameter 'W0'.*the "
                                        r"parameters of curve 'logistic'"):
        GrowthCurve("logistic", Winf=80.0, k=0.07, ti=3.0, W0=1.0)
    with pytest.raises(DataError, match=r"params\['Winf'\]' must be > 0 .* got -1.0"):
        GrowthCurve("logistic", Winf=-1.0, k=0.07, ti=3.0)
    with pytest.raises(DataError, match="mean_rate needs two different finite times"):
        g.mean_rate(5.0, 5.0)


# ---------------------------------------------------------------------------------------
# many subjects
# ---------------------------------------------------------------------------------------
def test_fit_growth_each_keeps_failures():
    rows = []
    for subj, k in (("A", 0.03), ("B", 0.02)):
        for ti in T[::3]:
            rows.append(dict(subject=subj, time=ti, mass=5.0 * math.exp(k * ti)))
    rows += [dict(subject="C", time=0.0, mass=5.0), dict(subject="C", time=1.0, mass=5.1)]
    frame = pd.DataFrame(rows)
    before = frame.copy()
    fits = fit_growth_each(frame, curve="exponential")
    pd.testing.assert_frame_equal(frame, before)
    assert list(fits) == ["A", "B", "C"]
    assert fits["A"].values[1] == pytest.approx(0.03, rel=1e-10)
    assert isinstance(fits["C"], GrowthFitFailure) and fits["C"].status == "failed"
    assert "needs at least 3 mass points" in fits["C"].reason
    tab = fits.table()
    assert list(tab.columns[:4]) == ["subject", "curve", "scale", "parameter"]
    assert len(tab) == 6
    assert (tab.loc[tab.subject == "C", "status"] == "failed").all()
    assert tab.loc[tab.subject == "C", "estimate"].isna().all()
    assert set(fits.failures) == {"C"}


def test_fit_growth_each_names_subject_in_warnings():
    t, w = early_phase_data()
    frame = pd.DataFrame({"animal": ["x"] * t.size, "time": t, "mass": w})
    with pytest.warns(DesignWarning, match="animal 'x': logistic"), \
            pytest.warns(IdentifiabilityWarning, match="animal 'x': logistic"):
        fits = fit_growth_each(frame, by="animal")
    assert "animal" in fits.table().columns


def test_fit_growth_each_errors():
    with pytest.raises(DataError, match=r"masses needs columns \['subject', 'time', 'mass'\]; "
                                        r"missing \['mass'\]"):
        fit_growth_each(pd.DataFrame({"subject": [1], "time": [0.0]}))
    with pytest.raises(DataError, match="masses must be a pandas DataFrame; got dict"):
        fit_growth_each({"subject": [1]})
    with pytest.raises(DataError, match=r"column 'subject' is empty in rows \[1\]"):
        fit_growth_each(pd.DataFrame({"subject": ["a", None], "time": [0.0, 1.0],
                                      "mass": [1.0, 2.0]}))
    with pytest.raises(DataError, match="curve must be one of"):
        fit_growth_each(pd.DataFrame({"subject": [1], "time": [0.0], "mass": [1.0]}),
                        curve="logit")


# ---------------------------------------------------------------------------------------
# bad input
# ---------------------------------------------------------------------------------------
def test_bad_input_messages():
    t = np.array([0.0, 10.0, 20.0, 30.0, 40.0])
    w = np.array([5.0, 7.0, 10.0, 14.0, 18.0])
    with pytest.raises(DataError, match="t and mass must have the same length; got 5 and 4"):
        fit_growth(t, w[:4])
    with pytest.raises(DataError, match=r"mass must be finite \(no NaN or inf\); non-finite at "
                                        r"positions 2 \(.*nan"):
        fit_growth(t, np.array([5.0, 7.0, np.nan, 14.0, 18.0]))
    with pytest.raises(DataError, match=r"t must be finite .* positions 4 \(.*inf"):
        fit_growth(np.array([0.0, 10.0, 20.0, 30.0, np.inf]), w)
    with pytest.raises(DataError, match=r"mass must be > 0 \(body masses\); got values <= 0 at "
                                        r"positions 1 \(.*0\.0\), 3 \(.*-2\.0\)"):
        fit_growth(t, np.array([5.0, 0.0, 10.0, -2.0, 18.0]))
    with pytest.raises(DataError, match=r"curve must be one of 'exponential', 'linear', "
                                        r"'logistic', 'gompertz', 'von_bertalanffy', "
                                        r"'richards'; got 'logis'"):
        fit_growth(t, w, "logis")  # no prefix matching
    with pytest.raises(DataError, match=r"scale must be one of 'log', 'natural'; got 'ln'"):
        fit_growth(t, w, scale="ln")
    with pytest.raises(DataError, match=r"curve 'richards' has 4 varying parameters and needs "
                                        r"at least 5 mass points; got 4"):
        fit_growth(t[:4], w[:4], "richards")
    with pytest.raises(DataError, match=r"needs masses at 3 or more distinct times; got 2"):
        fit_growth(np.array([0.0, 0.0, 0.0, 5.0, 5.0]), w, "logistic")
    with pytest.raises(DataError, match=r"t must be one-dimensional; got shape \(5, 1\)"):
        fit_growth(t[:, None], w)
    with pytest.raises(DataError, match="mass must be an array of numbers"):
        fit_growth(t, ["a", "b", "c", "d", "e"])
    with pytest.raises(DataError, match=r"sigma must be > 0; got -1.0 at position 0"):
        fit_growth(t, w, sigma=-1.0)
    with pytest.raises(DataError, match="sigma must have the same length as mass; got 2 and 5"):
        fit_growth(t, w, sigma=[1.0, 2.0])
    with pytest.raises(DataError, match=r"'fixed' has unknown parameter 'Wmax'; the parameters of "
                                        r"curve 'logistic' are Winf, k, ti"):
        fit_growth(t, w, fixed={"Wmax": 3.0})
    with pytest.raises(DataError, match=r"'init\['k'\]' must be finite; got nan"):
        fit_growth(t, w, init={"k": float("nan")})
    with pytest.raises(DataError, match=r"'fixed\['W0'\]' must be > 0 for curve 'exponential'"):
        fit_growth(t, w, "exponential", fixed={"W0": 0.0})
    with pytest.raises(DataError, match=r"given in both init and fixed"):
        fit_growth(t, w, "exponential", fixed={"W0": 5.0}, init={"W0": 4.0})
    with pytest.raises(DataError, match="fixed holds every parameter of curve 'exponential'"):
        fit_growth(t, w, "exponential", fixed={"W0": 5.0, "k": 0.1})
    with pytest.raises(DataError, match="'init' must be a mapping"):
        fit_growth(t, w, init=[1.0, 2.0])


def test_parameter_values_checked_by_the_shared_checker():
    # growth parameter values go through conventions.check_named_values: a near miss gets a
    # hint, a non-number names the entry, and the caller's dict is left as it was
    t = np.array([0.0, 10.0, 20.0, 30.0, 40.0])
    w = np.array([5.0, 7.0, 10.0, 14.0, 18.0])
    with pytest.raises(DataError, match=r"'fixed' has unknown parameter 'Wnf' \(did you mean "
                                        r"'Winf'\?\); the parameters of curve 'logistic' "
                                        r"are Winf, k, ti"):
        fit_growth(t, w, fixed={"Wnf": 30.0})
    with pytest.raises(DataError, match=r"'init\['k'\]' must be a number; got 'fast'"):
        fit_growth(t, w, init={"k": "fast"})
    init = {"Winf": 30.0}
    fit = fit_growth(t, w, init=init, fixed={"k": 0.06})
    assert init == {"Winf": 30.0} and fit.values[1] == 0.06


def test_no_convergence_is_fit_error(monkeypatch):
    # an evaluation budget far too small for the optimizer to converge from any start
    monkeypatch.setattr(GF, "_MAX_NFEV", 1)
    t, w = noisy_logistic()
    with pytest.raises(FitError, match=r"curve 'logistic' \(log scale\) did not converge from "
                                       r"any of \d+ starting points within 1 evaluations "
                                       r"\(lowest RSS reached at Winf=.*, k=.*, ti=.*\)"):
        fit_growth(t, w, "logistic")


def test_correlation_warning_fires_and_is_silent_on_clean_data():
    t, w = early_phase_data()
    with pytest.warns(IdentifiabilityWarning, match="strongly correlated"), \
            pytest.warns(DesignWarning, match=r"reach only 2\.9 % of the fitted asymptote "
                                              r"Winf = 167\.1"):
        fit_growth(t, w, "logistic")
    t2, w2 = noisy_logistic()
    with warnings.catch_warnings():
        warnings.simplefilter("error", IdentifiabilityWarning)
        warnings.simplefilter("error", ConvergenceWarning)
        fit_growth(t2, w2, "logistic")
