"""Diet-history reconstruction (isoturnover.inverse): operator, strength choice, recovery."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, optimize

import isoturnover as iso
from isoturnover.conventions import INTERVAL_COLUMNS
from isoturnover.errors import DataError, IdentifiabilityWarning
from isoturnover.inverse import diet_operator, reconstruct_diet, switch_times, tikhonov_gcv
from isoturnover.kinetics import TurnoverKinetics

# The invented scenario: an animal on a C3-like diet (-22 ‰) switches to a C4-rich diet
# (-12 ‰) at day 60 and to a mixed diet (-19 ‰) at day 140; a tissue with one pool,
# k = 0.06 /d (half-life 11.6 d), separation +1 ‰, sampled every 4 days, sd 0.3 ‰.
EDGES = np.arange(0.0, 221.0, 5.0)
T = np.arange(2.0, 221.0, 4.0)
SWITCHES = (60.0, 140.0)
SD = 0.3
KIN = {"rates": [0.06], "separation": 1.0}


def _truth(t):
    return np.where(t < 60, -22.0, np.where(t < 140, -12.0, -19.0))


XTRUE = _truth(np.r_[-1.0, EDGES[:-1]])   # the diet before the grid, then each interval


def _series(seed):
    A = diet_operator(T, EDGES, [0.06])
    return A @ XTRUE + 1.0 + np.random.default_rng(seed).normal(0.0, SD, T.size)


def _captive_fit(seed=5):
    """A captive diet-switch fit of the same tissue (invented): k and the separation."""
    tc = np.linspace(0.0, 120.0, 16)
    yc = -15.0 + 1.0 - 10.0 * np.exp(-0.06 * tc) + \
        np.random.default_rng(seed).normal(0.0, SD, tc.size)
    model = iso.TurnoverModel(1, diet=iso.DietHistory.step(-25.0, -15.0))
    return model.fit(tc, yc, SD)


# --------------------------------------------------------------------------- operator

def _diet_function(edges, values):
    def d(s):
        if s < edges[0]:
            return values[0]
        j = min(int(np.searchsorted(edges, s, side="right")) - 1, edges.size - 2)
        return values[1 + j]
    return d


def test_operator_matches_ode_parallel_pools():
    # source: scipy.integrate.solve_ivp of dδ_i/dt = k_i (d(t) + Δ - δ_i), δ = Σ f_i δ_i,
    # started at equilibrium with the diet before the grid, delayed by the lag
    rng = np.random.default_rng(3)
    edges = np.linspace(0.0, 100.0, 21)
    vals = rng.normal(-20.0, 3.0, 21)
    k, f, sep, lag = np.array([0.15, 0.03]), np.array([0.35, 0.65]), 2.0, 1.5
    t = np.sort(rng.uniform(-5.0, 100.0, 25))
    d = _diet_function(edges, vals)

    def rhs(s, u):
        return k * (d(s - lag) + sep - u)

    sol = integrate.solve_ivp(rhs, (-20.0, 100.0), [vals[0] + sep] * 2, t_eval=t,
                              rtol=1e-11, atol=1e-12, max_step=0.25)
    A = diet_operator(t, edges, k, f, lag=lag)
    assert np.allclose(A.sum(axis=1), 1.0, atol=1e-12)   # by hand: weights sum to one
    assert np.max(np.abs(f @ sol.y - (sep + A @ vals))) < 1e-6


def test_operator_matches_ode_chain():
    # source: scipy.integrate.solve_ivp of the precursor-product chain
    # dP/dt = k1 (d + Δ - P), dT/dt = k2 (P - T)
    rng = np.random.default_rng(4)
    edges = np.linspace(0.0, 80.0, 17)
    vals = rng.normal(-18.0, 2.0, 17)
    k1, k2 = 0.2, 0.05
    t = np.sort(rng.uniform(0.0, 80.0, 20))
    d = _diet_function(edges, vals)

    def rhs(s, u):
        return [k1 * (d(s) - u[0]), k2 * (u[0] - u[1])]

    sol = integrate.solve_ivp(rhs, (-10.0, 80.0), [vals[0], vals[0]], t_eval=t, rtol=1e-11,
                              atol=1e-12, max_step=0.25)
    A = diet_operator(t, edges, [k1, k2], structure="chain")
    assert np.max(np.abs(sol.y[1] - A @ vals)) < 1e-6


@pytest.mark.parametrize("separation", ["difference", "epsilon"])
def test_operator_matches_library_forward_model(separation):
    # source: the library's own forward model, TurnoverKinetics with a DietHistory of the
    # same piecewise-constant diet (superposition of step responses)
    rng = np.random.default_rng(5)
    edges = np.linspace(0.0, 150.0, 31)
    vals = rng.normal(-20.0, 3.0, 31)
    dh = iso.DietHistory(vals[0], changes=list(zip(edges[:-1], vals[1:])))
    kin = TurnoverKinetics(2, diet=dh, separation=separation)
    theta = np.array([1.7, 0.09, 0.02, 0.3, 0.7])      # separation, k1, k2, f1, f2
    t = np.sort(rng.uniform(-10.0, 150.0, 40))
    A = diet_operator(t, edges, theta[1:3], theta[3:])
    s = theta[0]
    c, m = (s, 1.0) if separation == "difference" else (s, 1.0 + s / 1000.0)
    assert np.max(np.abs(kin.evaluate(t, theta) - (c + m * (A @ vals)))) < 1e-10


def test_window_average_matches_quadrature():
    # source: scipy.integrate.quad of the point operator over each observation window
    edges = np.linspace(0.0, 60.0, 13)
    vals = np.random.default_rng(6).normal(-20.0, 3.0, 13)
    k, f = [0.2, 0.04], [0.5, 0.5]
    a = np.array([3.0, 10.5, 22.0, 40.0])
    b = a + np.array([4.0, 9.0, 0.5, 20.0])
    Aw = diet_operator((a, b), edges, k, f)
    for i in range(a.size):
        val = integrate.quad(lambda s: diet_operator(np.array([s]), edges, k, f)[0] @ vals,
                             a[i], b[i], points=edges[(edges > a[i]) & (edges < b[i])],
                             epsabs=1e-12, epsrel=1e-12, limit=200)[0] / (b[i] - a[i])
        assert abs(val - Aw[i] @ vals) < 1e-9
    # a zero-width window is the point sample
    assert np.allclose(diet_operator((a, a), edges, k, f), diet_operator(a, edges, k, f))
    # the chain's window average (its C(τ) in closed form), also through k1 = k2
    for kc in ([0.2, 0.05], [0.05, 0.2], [0.07, 0.07 * (1 + 1e-9)]):
        Ac = diet_operator((a, b), edges, kc, structure="chain")
        for i in range(a.size):
            val = integrate.quad(
                lambda s, kc=kc: diet_operator(np.array([s]), edges, kc,
                                               structure="chain")[0] @ vals,
                a[i], b[i], points=edges[(edges > a[i]) & (edges < b[i])], epsabs=1e-12,
                epsrel=1e-12, limit=200)[0] / (b[i] - a[i])
            assert abs(val - Ac[i] @ vals) < 1e-9


# --------------------------------------------------------------------------- strength

def test_gcv_matches_brute_force_scan():
    # source: the GCV function of Golub, Heath & Wahba (1979) computed by brute force,
    # G = n ||(I - H) b||² / tr(I - H)², H = A (AᵀA + λ DᵀD)⁻¹ Aᵀ formed explicitly
    y = _series(0)
    A = diet_operator(T, EDGES, [0.06]) / SD
    b = (y - 1.0) / SD
    D = np.diff(np.eye(A.shape[1]), n=2, axis=0)
    n = b.size

    def brute(lam):
        H = A @ np.linalg.solve(A.T @ A + lam * D.T @ D, A.T)
        r = b - H @ b
        return n * (r @ r) / np.trace(np.eye(n) - H) ** 2

    lams = np.logspace(-3, 2, 400)
    scan = np.array([brute(v) for v in lams])
    g = tikhonov_gcv(A, b, D, lams)
    assert np.allclose(g["scores"], scan, rtol=1e-7)
    best = tikhonov_gcv(A, b, D)["best"]
    i = int(np.argmin(scan))
    assert lams[max(i - 1, 0)] <= best <= lams[min(i + 1, lams.size - 1)]
    assert brute(best) <= scan[i] * (1 + 1e-9)
    r = reconstruct_diet((T, y, SD), KIN, grid=EDGES, n_boot=0)
    assert r.strength_rule == "gcv"
    assert r.strength == pytest.approx(best, rel=1e-9)


def test_total_variation_solution_is_the_optimum():
    # source: scipy.optimize.minimize (SLSQP) on the TV objective written with the split
    # diff(x) = d⁺ - d⁻, d± >= 0: a smooth quadratic programme with the same optimum
    edges = np.linspace(0.0, 60.0, 13)
    t = np.arange(1.0, 60.0, 3.0)
    A = diet_operator(t, edges, [0.1])
    x0 = np.where(np.r_[-1, edges[:-1]] < 30, -20.0, -14.0)
    y = A @ x0 + np.random.default_rng(7).normal(0.0, 0.3, t.size)
    lam = 2.0
    r = reconstruct_diet((t, y, 0.3), {"rates": [0.1]}, grid=edges,
                         penalty="total_variation", strength=lam, n_boot=0)
    Aw, bw = A / 0.3, y / 0.3
    p = A.shape[1]
    Dm = np.diff(np.eye(p), axis=0)
    q = p - 1

    def obj(v):
        x = v[:p]
        return 0.5 * np.sum((Aw @ x - bw) ** 2) + lam * np.sum(v[p:])

    def jac(v):
        return np.r_[Aw.T @ (Aw @ v[:p] - bw), np.full(2 * q, lam)]

    cons = {"type": "eq", "fun": lambda v: Dm @ v[:p] - v[p:p + q] + v[p + q:],
            "jac": lambda v: np.hstack([Dm, -np.eye(q), np.eye(q)])}
    v0 = np.r_[np.full(p, y.mean()), np.zeros(2 * q)]
    ref = optimize.minimize(obj, v0, jac=jac, constraints=[cons], method="SLSQP",
                            bounds=[(None, None)] * p + [(0, None)] * (2 * q),
                            options={"maxiter": 2000, "ftol": 1e-14})
    assert ref.success

    def tv(x):
        return 0.5 * np.sum((Aw @ x - bw) ** 2) + lam * np.sum(np.abs(np.diff(x)))

    assert tv(r.estimate) <= tv(ref.x[:p]) + 1e-4
    assert np.max(np.abs(r.estimate - ref.x[:p])) < 1e-3


def test_bounded_tikhonov_is_the_optimum():
    # source: scipy.optimize.minimize (L-BFGS-B) on the penalised objective with the box
    y = _series(1)
    r = reconstruct_diet((T, y, SD), KIN, grid=EDGES, strength=0.5, bounds=(-21.0, -13.0),
                         n_boot=0)
    A = diet_operator(T, EDGES, [0.06]) / SD
    b = (y - 1.0) / SD
    D = np.diff(np.eye(A.shape[1]), n=2, axis=0)

    def f(x):
        return np.sum((A @ x - b) ** 2) + 0.5 * np.sum((D @ x) ** 2)

    def g(x):
        return 2 * A.T @ (A @ x - b) + 2 * 0.5 * D.T @ (D @ x)

    ref = optimize.minimize(f, np.full(A.shape[1], -17.0), jac=g, method="L-BFGS-B",
                            bounds=[(-21.0, -13.0)] * A.shape[1],
                            options={"ftol": 1e-15, "gtol": 1e-10, "maxiter": 20000})
    assert np.all(r.estimate >= -21.0 - 1e-9) and np.all(r.estimate <= -13.0 + 1e-9)
    assert f(r.estimate) <= ref.fun * (1 + 1e-7)
    assert np.max(np.abs(r.estimate - ref.x)) < 1e-3


# --------------------------------------------------------------------------- recovery

def _switch_hits(seeds):
    hits = 0
    for seed in seeds:
        r = reconstruct_diet((T, _series(seed), SD), KIN, grid=EDGES,
                             penalty="total_variation", n_boot=0)
        s = r.switch_times
        step = EDGES[1] - EDGES[0]
        hits += bool(s.size == 2 and abs(s[0] - SWITCHES[0]) <= step
                     and abs(s[1] - SWITCHES[1]) <= step)
    return hits


def test_two_switches_recovered_fast():
    # the invented two-switch history: switch times within one grid step (10 replicates)
    assert _switch_hits(range(10)) >= 9


@pytest.mark.slow
def test_two_switches_recovered_in_90_percent_of_50_replicates():
    assert _switch_hits(range(50)) >= 45


def test_band_widens_with_the_kinetics_uncertainty():
    fit = _captive_fit()
    y = _series(0)
    narrow = reconstruct_diet((T, y, SD), fit, grid=EDGES, penalty="total_variation", rng=1,
                              kinetics_uncertainty=False)
    wide = reconstruct_diet((T, y, SD), fit, grid=EDGES, penalty="total_variation", rng=1)
    assert wide.kinetics_included and not narrow.kinetics_included
    assert "covariance" in wide.kinetics_source
    # the kinetics' uncertainty adds to the data's: a wider band
    assert np.mean(wide.upper - wide.lower) > 1.2 * np.mean(narrow.upper - narrow.lower)


def _near_switch():
    starts, ends = np.r_[-np.inf, EDGES[:-1]], EDGES
    near = np.zeros(XTRUE.size, bool)
    for s in SWITCHES:
        near |= (ends >= s - 5.0) & (starts <= s + 5.0)
    return near


def test_truth_within_the_band():
    # 6 seeded series, kinetics from a captive fit with its covariance: the 95 % band holds
    # the invented truth on at least 90 % of the intervals away from the switches (where
    # the penalty's bias, a blurred or shrunk step, is not in a resampling band: module
    # docstring), and on at least 85 % of all intervals
    fit = _captive_fit()
    near = _near_switch()
    away, every = [], []
    for seed in range(6):
        r = reconstruct_diet((T, _series(seed), SD), fit, grid=EDGES,
                             penalty="total_variation", rng=seed, n_boot=100)
        inside = (XTRUE >= r.lower) & (XTRUE <= r.upper)
        away.append(inside[~near].mean())
        every.append(inside.mean())
    assert np.mean(away) >= 0.9
    assert np.mean(every) >= 0.85


def test_band_widens_with_given_standard_errors():
    y = _series(2)
    base = reconstruct_diet((T, y, SD), KIN, grid=EDGES, rng=3)
    more = reconstruct_diet((T, y, SD), dict(KIN, stderr=[0.01], separation_stderr=0.3),
                            grid=EDGES, rng=3)
    assert not base.kinetics_included and more.kinetics_included
    assert np.mean(more.upper - more.lower) > 1.2 * np.mean(base.upper - base.lower)
    # the same seed gives the same band
    again = reconstruct_diet((T, y, SD), KIN, grid=EDGES, rng=3)
    assert np.array_equal(again.lower, base.lower)


def test_bootstrap_result_as_kinetics():
    fit = _captive_fit()
    boot = fit.bootstrap(n=40, rng=0)
    r = reconstruct_diet((T, _series(0), SD), boot, grid=EDGES, penalty="total_variation",
                         n_boot=50, rng=0)
    assert r.kinetics_included and "bootstrap" in r.kinetics_source
    assert np.all(r.lower <= r.estimate + 1e-9) and np.all(r.estimate <= r.upper + 1e-9)


def test_no_regularisation_is_reported_ill_posed():
    y = _series(0)
    with pytest.warns(IdentifiabilityWarning, match="condition number"):
        r = reconstruct_diet((T, y, SD), KIN, grid=EDGES, strength=0)
    assert r.status == "ill_posed" and r.condition_number > 10
    assert np.all(np.isnan(r.estimate))
    assert "ill-posed" in r.summary()
    # more unknowns than samples: infinite condition number
    with pytest.warns(IdentifiabilityWarning, match="samples for"):
        r = reconstruct_diet((T, y, SD), KIN, grid=np.arange(0.0, 221.0, 2.0), strength=0)
    assert r.condition_number == np.inf
    # a coarse grid is well conditioned: plain least squares, status ok
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        r = reconstruct_diet((T, y, SD), KIN, grid=[0.0, 60.0, 140.0, 220.0], strength=0,
                             initial=-22.0, n_boot=20)
    assert r.status == "ok" and r.condition_number < 10
    # by hand: the piecewise-constant truth is on this grid, so least squares recovers it
    assert np.allclose(r.estimate, [-22.0, -22.0, -12.0, -19.0], atol=0.5)


# --------------------------------------------------------------------------- options

def test_sources_bounds_table_and_initial():
    y = _series(4)
    r = reconstruct_diet((T, y, SD), KIN, grid=EDGES, penalty="total_variation",
                         sources=(-24.0, -10.0), initial=-22.0, n_boot=30, rng=0)
    assert r.estimate[0] == -22.0
    assert np.all(r.estimate >= -24.0 - 1e-9) and np.all(r.estimate <= -10.0 + 1e-9)
    tab = r.table()
    assert list(tab.columns[3:3 + len(INTERVAL_COLUMNS)]) == list(INTERVAL_COLUMNS)
    assert set(tab["quantity"]) == {"diet", "fraction_b"}
    fb = tab[tab["quantity"] == "fraction_b"]
    # by hand: fraction of B = (d - a)/(b - a); -12 ‰ between -24 and -10 is 12/14
    mid = fb[(fb["time"] >= 80) & (fb["end"] <= 120)]
    assert np.allclose(mid["estimate"], 12 / 14, atol=0.05)
    assert fb["lower"].between(0, 1).all() and fb["upper"].between(0, 1).all()
    assert (tab["method"] == "bootstrap").all()
    assert "sources" in r.summary()


def test_frame_input_and_no_mutation():
    y = _series(0)
    frame = pd.DataFrame({"subject": "a1", "tissue": "blood", "isotope": "d13C",
                          "time": T, "value": y, "sd": SD})
    before = frame.copy()
    t_in = T.copy()
    r = reconstruct_diet(frame, KIN, grid=EDGES, penalty="total_variation", n_boot=0)
    pd.testing.assert_frame_equal(frame, before)
    r2 = reconstruct_diet((T, y, SD), KIN, grid=EDGES, penalty="total_variation", n_boot=0)
    assert np.array_equal(T, t_in)
    assert np.allclose(r.estimate, r2.estimate)
    assert r.time_unit == "d"
    assert np.allclose(r.fitted, r.tissue(r.t), atol=1e-9)


def test_grid_as_number_and_switch_rule_by_hand():
    r = reconstruct_diet((T, _series(0), SD), KIN, grid=20, n_boot=0)
    assert r.edges.size == 21 and r.edges[0] == T[0] and r.edges[-1] == T[-1]
    # by hand: a jump of 10 split 4 + 6 over edges 10 and 20 is one switch at
    # (4·10 + 6·20)/10 = 16; a change of 2 (< half of 10) is not a switch
    edges = np.array([0.0, 10.0, 20.0, 30.0, 40.0, 50.0])
    vals = np.array([0.0, 0.0, 4.0, 10.0, 10.0, 8.0])
    assert np.allclose(switch_times(edges, vals), [16.0])
    assert switch_times(edges, np.zeros(6)).size == 0


def test_plot_reconstruction(tmp_path):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    r = reconstruct_diet((T, _series(0), SD), KIN, grid=EDGES, penalty="total_variation",
                         sources=(-24.0, -10.0), n_boot=30)
    ax_d, ax_t = iso.plot_reconstruction(r)
    assert len(ax_d.lines) >= 2 and len(ax_t.lines) >= 1
    ax_d.figure.savefig(tmp_path / "r.png", dpi=80)
    assert (tmp_path / "r.png").stat().st_size > 1000
    with pytest.warns(IdentifiabilityWarning):
        bad = reconstruct_diet((T, _series(0), SD), KIN, grid=EDGES, strength=0)
    fig, axes = plt.subplots(2, 1)
    iso.plot_reconstruction(bad, axes)          # the ill-posed result is drawn as a note
    assert any("ill-posed" in tx.get_text() for tx in axes[0].texts)
    plt.close("all")
    with pytest.raises(DataError, match="'axes' must be two matplotlib Axes"):
        iso.plot_reconstruction(r, axes[:1])
    with pytest.raises(DataError, match="'result' must be a DietReconstruction"):
        iso.plot_reconstruction("no")


@pytest.mark.parametrize("kwargs, match", [
    ({"penalty": "ridge"}, "'penalty' must be one of"),
    ({"strength": -1.0}, "'strength' must be >= 0"),
    ({"grid": [0.0, 100.0]}, "'grid' must reach the last sample"),
    ({"grid": [0.0, 50.0, 40.0, 300.0]}, "'grid' must be at least 2 strictly increasing"),
    ({"grid": 1}, "'grid' must be an integer >= 2"),
    ({"bounds": (-10.0, -20.0)}, "'bounds' must have lower < upper"),
    ({"bounds": 5.0}, "'bounds' must be"),
    ({"sources": (-20.0, -20.0)}, "'sources' must differ"),
    ({"n_boot": -1}, "'n_boot' must be an integer >= 0"),
    ({"level": 95}, "'level' must be between 0 and 1"),
    ({"order": 0}, "'order' must be an integer >= 1"),
    ({"order": 4}, "'order' must be 1, 2 or 3"),
    ({"resample": "wild"}, "'resample' must be one of"),
    ({"initial": -30.0, "bounds": (-25.0, -10.0)}, "'initial' -30 is outside 'bounds'"),
    ({"windows": ([1.0], [2.0])}, "'windows' must have one window per sample"),
    ({"separation": "x"}, "'separation' must be a number"),
])
def test_bad_arguments(kwargs, match):
    kw = {"grid": EDGES, "n_boot": 0}
    kw.update(kwargs)
    with pytest.raises(DataError, match=match):
        reconstruct_diet((T, _series(0), SD), KIN, **kw)


@pytest.mark.parametrize("kinetics, match", [
    ("fast", "'kinetics' must be a TurnoverFit"),
    ({"rates": [-0.1]}, "must be > 0"),
    ({"rates": [0.1, 0.02]}, "needs 'fractions'"),
    ({"rates": [0.1], "speed": 1}, "unknown key"),
    ({"rates": [0.1, 0.02], "structure": "chain", "fractions": [0.5, 0.5]},
     "does not apply to the chain"),
])
def test_bad_kinetics(kinetics, match):
    with pytest.raises(DataError, match=match):
        reconstruct_diet((T, _series(0), SD), kinetics, grid=EDGES, n_boot=0)


def test_bad_data():
    with pytest.raises(DataError, match="'data' must be a samples frame or a tuple"):
        reconstruct_diet(np.ones(5), KIN, grid=EDGES)
    frame = pd.DataFrame({"time": T, "value": _series(0)})
    with pytest.raises(DataError, match="'windows' goes with arrays"):
        reconstruct_diet(frame, KIN, grid=EDGES, windows=(T, T))


# --------------------------------------------------------------------------- segment profiles

# The invented hair scenario: a goat moves from a C3 ration (-26 ‰) to a C4-rich one (-13 ‰)
# at day 0; its tail hair grows 0.5 mm/d and is cut on day 153 into 5 mm segments from the
# base (10 days each, 30 segments reaching back to day -147); the hair's precursor has two
# pools (k = 0.3 and 0.03 /d, fractions 0.6 and 0.4), separation +2 ‰, scatter 0.25 ‰.
HAIR_G, HAIR_T = 0.5, 153.0
HAIR_START = np.arange(0.0, 150.0, 5.0)
HAIR_KIN = {"rates": [0.3, 0.03], "fractions": [0.6, 0.4], "separation": 2.0}
HAIR_EDGES = np.arange(-150.0, 161.0, 10.0)


def _hair_profile(seed, sd=0.25):
    from isoturnover.segments import formation_intervals

    t1, t2 = formation_intervals(HAIR_START, HAIR_START + 5.0, HAIR_T, HAIR_G)
    x = np.where(np.r_[-1.0, HAIR_EDGES[:-1]] < 0, -26.0, -13.0)
    A = diet_operator((t1, t2), HAIR_EDGES, [0.3, 0.03], [0.6, 0.4])
    y = 2.0 + A @ x + np.random.default_rng(seed).normal(0.0, sd, t1.size)
    return pd.DataFrame({"subject": "h1", "tissue": "hair", "isotope": "d13C",
                         "time": HAIR_T, "segment_start": HAIR_START,
                         "segment_end": HAIR_START + 5.0, "value": y, "sd": sd})


@pytest.mark.parametrize("structure, pools, lag", [
    ("parallel", 1, 0.0), ("parallel", 2, 3.0), ("parallel", 3, 0.0), ("chain", 2, 1.5),
    ("chain_equal", 2, 0.0)])
def test_window_operator_matches_segment_means(structure, pools, lag):
    # source: isoturnover.segments.segment_means, the exact segment average of the forward
    # model, itself checked against scipy.integrate.quad to 1e-9 ‰ in tests/test_segments.py
    from isoturnover.segments import formation_intervals, segment_means

    rng = np.random.default_rng(8)
    edges = np.linspace(-100.0, 160.0, 27)
    vals = rng.normal(-20.0, 3.0, edges.size)
    dh = iso.DietHistory(vals[0], changes=list(zip(edges[:-1], vals[1:])))
    chain = structure != "parallel"
    k = {1: [0.05], 2: [0.25, 0.02], 3: [0.5, 0.08, 0.01]}[pools]
    if structure == "chain_equal":
        k = [0.06, 0.06 * (1 + 1e-10)]
    f = {1: [1.0], 2: [0.3, 0.7], 3: [0.2, 0.3, 0.5]}[pools]
    kin = TurnoverKinetics(pools, structure="chain" if chain else "parallel", diet=dh,
                           lag=lag > 0)
    value = {"discrimination": 1.7, "lag": lag}
    value.update({f"k{i + 1}": v for i, v in enumerate(k)})
    value.update({f"f{i + 1}": v for i, v in enumerate(f)})
    theta = np.array([value[n] for n in kin.param_names])
    t1, t2 = formation_intervals(HAIR_START, HAIR_START + 5.0, HAIR_T, HAIR_G)
    A = diet_operator((t1, t2), edges, k, None if chain else f,
                      structure="chain" if chain else "parallel", lag=lag)
    assert np.max(np.abs(segment_means(kin, theta, t1, t2) - (1.7 + A @ vals))) < 1e-9


def _profile_hits(seeds):
    hits = 0
    for seed in seeds:
        r = reconstruct_diet(_hair_profile(seed), HAIR_KIN, grid=HAIR_EDGES,
                             penalty="total_variation", growth_rate=HAIR_G, n_boot=0)
        s = r.switch_times
        hits += bool(s.size == 1 and abs(s[0] - 0.0) <= HAIR_EDGES[1] - HAIR_EDGES[0])
    return hits


def test_segment_profile_switch_found():
    # the invented step diet read back from the hair: the switch within one grid step
    # (10 days) of day 0 in at least 9 of 10 seeded profiles
    assert _profile_hits(range(10)) >= 9


def test_segment_profile_windows_geometry_and_table():
    from isoturnover.segments import formation_intervals

    frame = _hair_profile(0)
    before = frame.copy()
    r = reconstruct_diet(frame, HAIR_KIN, grid=HAIR_EDGES, penalty="total_variation",
                         growth_rate=HAIR_G, n_boot=0)
    pd.testing.assert_frame_equal(frame, before)
    t1, t2 = formation_intervals(HAIR_START, HAIR_START + 5.0, HAIR_T, HAIR_G)
    order = np.argsort((t1 + t2) / 2)
    # the windows are the formation intervals; by hand: a constant rate gives
    # [T - b/g, T - a/g], so the base segment (0-5 mm) was formed on days 143-153
    assert np.allclose(r.windows[0], t1[order]) and np.allclose(r.windows[1], t2[order])
    assert np.allclose((r.windows[0][-1], r.windows[1][-1]), (143.0, 153.0))
    assert np.allclose(r.t, (t1[order] + t2[order]) / 2)
    # the same as the array call with windows= (nothing else changes)
    r2 = reconstruct_diet((r.t, r.y, 0.25), HAIR_KIN, grid=HAIR_EDGES,
                          penalty="total_variation", windows=r.windows, n_boot=0)
    assert np.allclose(r.estimate, r2.estimate, atol=1e-8)
    # geometry read backwards (by hand): x = g (T - t) from the base
    g = r.profile
    assert g.single_sampling and g.origin == "base"
    assert np.allclose(g.position(r.windows[0]), g.segment_end)
    assert np.allclose(g.position([153.0, 53.0]), [0.0, 50.0])
    assert np.allclose(g.time_at(g.position([-20.0, 7.5])), [-20.0, 7.5])
    tab = r.samples_table()
    assert list(tab.columns[:4]) == ["sample_time", "segment_start", "segment_end", "time"]
    assert np.allclose(tab["residual"], tab["value"] - tab["fitted"])
    assert "segment profile: 30 segments from 0 to 150" in r.summary()
    # from the tip: the same segments measured from the hair's far end (length 150 mm)
    tip = frame.assign(segment_start=150.0 - frame["segment_end"],
                       segment_end=150.0 - frame["segment_start"])
    rt = reconstruct_diet(tip, HAIR_KIN, grid=HAIR_EDGES, penalty="total_variation",
                          growth_rate=HAIR_G, segment_origin="tip", tissue_length=150.0,
                          n_boot=0)
    assert np.allclose(rt.estimate, r.estimate, atol=1e-8)
    assert np.allclose(rt.profile.position([153.0]), [150.0])     # the base, from the tip


def test_segment_profile_geometry_from_a_segment_fit():
    # a segment fit carries its growth rate, origin and lag: no need to repeat them
    frame = _hair_profile(1)
    model = iso.TurnoverModel(1, diet=iso.DietHistory.step(-26.0, -13.0), record="segments",
                              growth_rate=HAIR_G)
    with warnings.catch_warnings():   # one pool for two: the fast one is averaged out
        warnings.simplefilter("ignore", iso.DesignWarning)
        fit = model.fit(frame)
    r = reconstruct_diet(frame, fit, grid=HAIR_EDGES, penalty="total_variation", n_boot=0)
    direct = reconstruct_diet(frame, fit, grid=HAIR_EDGES, penalty="total_variation",
                              growth_rate=HAIR_G, segment_origin="base", formation_lag=0.0,
                              n_boot=0)
    assert np.allclose(r.estimate, direct.estimate)
    assert r.profile.growth_rate == HAIR_G
    # an argument given wins over the fit's: a faster growth rate, shorter windows
    fast = reconstruct_diet(frame, fit, grid=HAIR_EDGES, penalty="total_variation",
                            growth_rate=1.0, n_boot=0)
    assert np.allclose(fast.windows[1] - fast.windows[0], 5.0)
    boot = fit.bootstrap(n=20, rng=0)
    rb = reconstruct_diet(frame, boot, grid=HAIR_EDGES, penalty="total_variation",
                          n_boot=20)
    assert rb.profile is not None and "bootstrap" in rb.kinetics_source


@pytest.mark.parametrize("kwargs, match", [
    ({}, "'growth_rate' is needed for a segment profile"),
    ({"growth_rate": 0.5, "segment_origin": "middle"}, "'segment_origin' must be one of"),
    ({"growth_rate": 0.5, "windows": ([1.0], [2.0])}, "'windows' is not used with a segment"),
    ({"growth_rate": 0.5, "sigma": 0.2}, "'sigma' goes with arrays"),
    ({"growth_rate": -0.5}, "'growth_rate' must be > 0"),
    ({"growth_rate": 0.5, "formation_lag": -1.0}, "'formation_lag' must be one number >= 0"),
    ({"growth_rate": 0.5, "segment_origin": "tip"}, "needs 'tissue_length'"),
])
def test_segment_profile_bad_arguments(kwargs, match):
    with pytest.raises(DataError, match=match):
        reconstruct_diet(_hair_profile(0), HAIR_KIN, grid=HAIR_EDGES, n_boot=0, **kwargs)


def test_segment_arguments_need_a_profile():
    with pytest.raises(DataError, match="'growth_rate' goes with a segment profile"):
        reconstruct_diet((T, _series(0), SD), KIN, grid=EDGES, growth_rate=0.5, n_boot=0)
    with pytest.raises(DataError, match="'tissue_length' goes with a segment profile"):
        reconstruct_diet((T, _series(0), SD), KIN, grid=EDGES, tissue_length=9.0, n_boot=0)


def test_plot_reconstruction_of_a_profile(tmp_path):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    r = reconstruct_diet(_hair_profile(2), HAIR_KIN, grid=HAIR_EDGES,
                         penalty="total_variation", growth_rate=HAIR_G,
                         sources=(-27.0, -12.0), n_boot=30)
    ax_d, ax_t = iso.plot_reconstruction(r, length_unit="mm")
    tops = [c for c in ax_d.child_axes if "distance" in c.get_xlabel()]
    assert len(tops) == 1 and tops[0].get_xlabel() == "distance from the base of the tissue (mm)"
    # the segments drawn over their formation intervals, and the implied segment means
    labels = ax_t.get_legend_handles_labels()[1]
    assert "segments over their formation time" in labels
    assert "segment means implied by the diet" in labels
    ax_d.figure.savefig(tmp_path / "p.png", dpi=80)
    assert (tmp_path / "p.png").stat().st_size > 1000
    plt.close("all")


# --------------------------------------------------------------------------- honest bands

# The invented seasonal scenario: the goat of the hair profile above eats a diet that swings
# around -20 ‰ (amplitude 4 ‰, period 120 days) from the first formation time on, -20 ‰
# before; the grid has as many unknowns as segments (29 intervals + the value before them),
# where GCV chooses little smoothing and the residuals are nearly zero.
SEASON_W = 2.0 * np.pi / 120.0


def _season_profile(seed, sd=True):
    from isoturnover.segments import formation_intervals

    t1, t2 = formation_intervals(HAIR_START, HAIR_START + 5.0, HAIR_T, HAIR_G)
    edges = np.linspace(t1.min(), t2.max(), 30)
    a, b = edges[:-1] - edges[0], edges[1:] - edges[0]
    # exact interval means of -20 + 4 sin(w (s - e0)), by hand: 4 (cos wa - cos wb)/(w (b - a))
    x = np.r_[-20.0, -20.0 + 4.0 * (np.cos(SEASON_W * a) - np.cos(SEASON_W * b))
              / (SEASON_W * (b - a))]
    A = diet_operator((t1, t2), edges, [0.3, 0.03], [0.6, 0.4])
    y = 2.0 + A @ x + np.random.default_rng(seed).normal(0.0, 0.25, t1.size)
    frame = pd.DataFrame({"subject": "h1", "tissue": "hair", "isotope": "d13C",
                          "time": HAIR_T, "segment_start": HAIR_START,
                          "segment_end": HAIR_START + 5.0, "value": y})
    if sd:
        frame["sd"] = 0.25
    return frame, edges, x


def test_band_from_the_data_sd_with_as_many_unknowns_as_segments():
    # 10 seeded profiles carrying their sd: the band is parametric from it and holds the
    # invented truth on at least 85 % of the intervals on average (nominal 95 %, less the
    # penalty's bias, which no resampling band carries: module docstring). Measured before
    # this rule, resampling the nearly-zero residuals: 70 % on average, 20 % at worst.
    cover, dfs = [], []
    for seed in range(10):
        frame, edges, x = _season_profile(seed)
        r = reconstruct_diet(frame, HAIR_KIN, grid=edges, growth_rate=HAIR_G, rng=seed)
        assert r.resample == "parametric" and r.band_status == "ok"
        dfs.append(r.df)
        cover.append(np.mean((x >= r.lower) & (x <= r.upper)))
    assert max(dfs) > 25          # GCV chose almost no smoothing: 30 unknowns, 30 segments
    assert np.mean(cover) >= 0.85 and np.min(cover) >= 0.75


def test_band_refused_with_too_few_residual_df_and_back_with_the_analytic_sd():
    from isoturnover.inverse import MIN_RESIDUAL_DF

    # without an sd the noise must come from the residuals; seed 1 leaves under 5 residual
    # degrees of freedom (n - 2 tr H + tr HH^T), so the band is refused with a status
    frame, edges, x = _season_profile(1, sd=False)
    with pytest.warns(IdentifiabilityWarning, match="residual degrees of freedom"):
        r = reconstruct_diet(frame, HAIR_KIN, grid=edges, growth_rate=HAIR_G, rng=1)
    assert r.band_status == "too_few_residual_df" and r.residual_df < MIN_RESIDUAL_DF
    assert np.all(np.isnan(r.lower)) and np.all(np.isnan(r.upper)) and r.status == "ok"
    assert set(r.table()["lower_status"]) == {"not_available"}
    assert "band: not estimated" in r.summary()
    # the instrument's analytical sd makes the band parametric again, and honest
    r = reconstruct_diet(frame, HAIR_KIN, grid=edges, growth_rate=HAIR_G, rng=1,
                         analytic_sd=0.25)
    assert r.band_status == "ok" and r.resample == "parametric"
    assert np.mean((x >= r.lower) & (x <= r.upper)) >= 0.8
    assert np.allclose(r.samples_table()["sd"], 0.25)
    # where the residuals keep enough df, the modified residuals give a band that holds the
    # truth on at least 80 % of the intervals on average (20 seeds; the refused ones aside)
    cover, refused = [], 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", IdentifiabilityWarning)
        for seed in range(20):
            frame, edges, x = _season_profile(seed, sd=False)
            r = reconstruct_diet(frame, HAIR_KIN, grid=edges, growth_rate=HAIR_G, rng=seed)
            if r.band_status != "ok":
                refused += 1
                continue
            assert r.resample == "residual" and r.residual_df >= MIN_RESIDUAL_DF
            cover.append(np.mean((x >= r.lower) & (x <= r.upper)))
    assert 0 < refused < 20 and np.mean(cover) >= 0.8


def test_modified_residuals_by_hand():
    from isoturnover.dietsolvers import modified_residuals

    # source: Davison & Hinkley (1997) §6.2, modified residuals of least squares
    # e_i / sqrt(1 - h_ii), centred; residual df n - p for a projection H (by hand)
    rng = np.random.default_rng(3)
    X = np.c_[np.ones(8), np.arange(8.0)]
    H = X @ np.linalg.pinv(X)
    e = (np.eye(8) - H) @ rng.normal(size=8)
    r, nu = modified_residuals(e, H)
    want = e / np.sqrt(1.0 - np.diag(H))
    assert np.allclose(r, want - want.mean()) and np.isclose(nu, 6.0)
    # no influence matrix: the average leverage df/n, r = e sqrt(n/(n - df)) centred
    r, nu = modified_residuals(e, 2.0)
    assert np.allclose(r, (e - e.mean()) * np.sqrt(8 / 6)) and nu == 6.0


def test_analytic_sd_bad_arguments():
    with pytest.raises(DataError, match="'analytic_sd' must be > 0"):
        reconstruct_diet((T, _series(0)), KIN, grid=EDGES, analytic_sd=0.0, n_boot=0)
    with pytest.raises(DataError, match="'analytic_sd' must be a number"):
        reconstruct_diet((T, _series(0)), KIN, grid=EDGES, analytic_sd="x", n_boot=0)
    with pytest.raises(DataError, match="'analytic_sd' is for data without an sd"):
        reconstruct_diet((T, _series(0), SD), KIN, grid=EDGES, analytic_sd=0.3, n_boot=0)
