"""Variable projection for sums of exponentials (isoturnover.projection).

Checks against independent tools: scipy.optimize.least_squares on the full natural
parametrisation (plateau, amplitudes and rates together, finite-difference Jacobian), and
numdifftools' numerical Hessian of the reduced sum of squares for the exact Hessian.
"""

from __future__ import annotations

import numdifftools as nd
import numpy as np
import pytest
from scipy.optimize import least_squares

import isoturnover as iso
from isoturnover.projection import _Reduced, project_exponentials
from isoturnover.starts import projected_rate_starts


def _series(n, seed, m=40, sigma=0.1, weighted=False):
    rng = np.random.default_rng(seed)
    t = np.r_[-2.0, 0.0, np.geomspace(0.2, 150.0, m - 2)]
    k = np.array([1.2, 0.11, 0.012][:n]) if n < 3 else np.array([1.2, 0.11, 0.012])
    f = np.array([1.0]) if n == 1 else (np.array([0.4, 0.6]) if n == 2
                                        else np.array([0.2, 0.3, 0.5]))
    a, d0 = -12.0, -25.0
    tp = np.maximum(t, 0.0)
    y = a + (d0 - a) * (f @ np.exp(-np.outer(k, tp)))
    sd = sigma * (1 + rng.uniform(0, 2, t.size)) if weighted else np.full(t.size, sigma)
    y = y + sd * rng.normal(size=t.size)
    return t, y, 1.0 / sd if weighted else np.ones_like(t), k


def _full_lsq(t, y, w, k0, lin0):
    """Reference: all parameters together by scipy's trust-region least squares."""
    n = len(k0)
    tp = np.maximum(t, 0.0)

    def res(p):
        a, b, lk = p[0], p[1:n + 1], p[n + 1:]
        return w * (y - a - b @ np.exp(-np.outer(np.exp(lk), tp)))

    p0 = np.r_[lin0, np.log(k0)]
    out = least_squares(res, p0, xtol=1e-15, ftol=1e-15, gtol=1e-15, max_nfev=20000)
    return float(out.fun @ out.fun), np.exp(out.x[n + 1:])


@pytest.mark.parametrize("n, weighted", [(1, False), (2, False), (2, True), (3, False)])
def test_projected_minimum_matches_full_least_squares(n, weighted):
    t, y, w, k_true = _series(n, seed=11 + n, weighted=weighted)
    starts = projected_rate_starts(t, y, w, n, 2)
    fits = [project_exponentials(t, y, w, k0) for k0 in starts]
    best = min((f for f in fits if f is not None and f.converged), key=lambda f: f.rss)
    # the reference starts from the projected solution itself, perturbed, and must agree
    rss_ref, k_ref = _full_lsq(t, y, w, best.rates * 1.05, best.linear)
    assert best.rss == pytest.approx(rss_ref, rel=1e-9)
    np.testing.assert_allclose(best.rates, np.sort(k_ref)[::-1], rtol=1e-6)
    # and it is near the simulated truth (a sanity check on the data, not the method)
    np.testing.assert_allclose(best.rates, k_true, rtol=0.5)


@pytest.mark.parametrize("n", [1, 2, 3])
def test_exact_hessian_matches_numerical_hessian(n):
    t, y, w, k_true = _series(n, seed=3, weighted=True)
    red = _Reduced(t, y, w, n)
    u = np.log(k_true * np.exp(np.linspace(0.2, -0.1, n)))

    def half_phi(uu):
        return 0.5 * red.at(list(np.exp(uu)))[1]

    c, phi, M, L = red.at(list(np.exp(u)))
    g, H = red.newton_parts(c, M, L)
    # numdifftools (Richardson-extrapolated differences) as the independent reference
    np.testing.assert_allclose(g, nd.Gradient(half_phi)(u), rtol=1e-6, atol=1e-8)
    np.testing.assert_allclose(H, nd.Hessian(half_phi)(u), rtol=1e-5, atol=1e-6)


def test_singular_start_is_refused():
    t, y, w, _ = _series(2, seed=5)
    assert project_exponentials(t, y, w, [0.1, 0.1]) is None


@pytest.mark.parametrize("n", [1, 2, 3])
def test_public_fit_uses_projection_and_agrees_with_coordinates(n):
    """The model's fit (projection path) and the same fit forced through the internal
    coordinates (given starting values turn the projection off) reach the same minimum."""
    t, y, w, k_true = _series(n, seed=21 + n)
    fit = iso.TurnoverModel(n).fit(t, y, warn=False)
    assert "variable projection" in fit.state.solution.message
    ref = iso.TurnoverModel(n).fit(
        t, y, warn=False, init={f"k{i + 1}": float(k) for i, k in enumerate(k_true)})
    assert "variable projection" not in ref.state.solution.message
    assert fit.rss == pytest.approx(ref.rss, rel=1e-9)
    for name, v in ref.values.items():
        assert fit.values[name] == pytest.approx(v, rel=1e-5, abs=1e-8), name


DIET = iso.DietHistory(-27.0, [(0.0, -12.0)])


@pytest.mark.parametrize("kw", [
    {"diet": DIET},                                  # one separation: total change fixed
    {"diet": DIET, "separation": "epsilon"},         # ε form: a sloped constraint
    {"diet": DIET, "per_diet_separation": True},     # two separations: no constraint
    {"diet": DIET, "initial": "free"},               # delta0 free
], ids=["shared", "epsilon", "per-diet", "initial-free"])
@pytest.mark.parametrize("n", [1, 2])
def test_diet_models_projected_with_level_constraints(kw, n):
    """Diet-table models after one switch: the projected fit (with the linear constraints
    the levels impose) and the fit in internal coordinates reach the same minimum, and the
    separation recovered from the linear parameters reproduces the data's level."""
    rng = np.random.default_rng(40 + n)
    t = np.array([-3, 0, 1, 2, 4, 7, 10, 14, 21, 28, 42, 56, 84.0])
    tp = np.maximum(t, 0.0)
    y = -10.5 - 15.0 * (0.6 * np.exp(-0.4 * tp) + 0.4 * np.exp(-0.03 * tp))
    y = y + 0.15 * rng.normal(size=t.size)
    model = iso.TurnoverModel(n, **kw)
    fit = model.fit(t, y, warn=False)
    assert "variable projection" in fit.state.solution.message
    ref = model.fit(t, y, warn=False, init={"k1": 0.3})
    assert "variable projection" not in ref.state.solution.message
    assert fit.rss == pytest.approx(ref.rss, rel=1e-9)
    for name, v in ref.values.items():
        assert fit.values[name] == pytest.approx(v, rel=1e-5, abs=1e-7), name


@pytest.mark.parametrize("seed, sigma, scale", [
    (1, 0.1, 1.0), (2, 0.01, 3.0), (3, 1.0, 0.3), (4, 0.1, 30.0), (5, 2.0, 0.03)])
def test_one_pool_scalar_path_is_the_general_iteration(seed, sigma, scale):
    """One pool without constraints runs a scalar copy of the Newton iteration; it must be
    the general iteration to the last bit (same operations in the same order), from good
    and from poor starting rates. Source: the general list-based loop of the module."""
    from isoturnover.projection import _project_general, _project_one

    t, y, w, k_true = _series(1, seed=seed, sigma=sigma, weighted=seed % 2 == 0)
    for k0 in (float(k_true[0]) * scale, float(k_true[0]) / scale):
        one = _project_one(_Reduced(t, y, w, 1), k0, 60, 1e-6)
        gen = _project_general(_Reduced(t, y, w, 1), [k0], 60, 1e-6)
        assert (one is None) == (gen is None)
        if one is None:
            continue
        assert one.rates.tolist() == gen.rates.tolist()
        assert one.linear.tolist() == gen.linear.tolist()
        assert (one.rss, one.n_eval, one.converged) == (gen.rss, gen.n_eval, gen.converged)


def test_fresh_fits_share_the_plain_coordinate_map_and_stay_independent():
    """Fresh fits of one model reuse the model's plain coordinate map (built once per
    kinetics); each fit keeps its own values, and refitting the first series reproduces
    it exactly (by hand: same data, same code path)."""
    t, y, _, _ = _series(1, seed=8)
    model = iso.TurnoverModel(1)
    first = model.fit(t, y, warn=False)
    other = model.fit(t, y + 0.5, warn=False)
    again = model.fit(t, y, warn=False)
    assert first.state.coords is other.state.coords is again.state.coords
    assert first.state.theta.tolist() == again.state.theta.tolist()
    assert first.values["delta_eq"] == pytest.approx(other.values["delta_eq"] - 0.5,
                                                     rel=1e-9)


@pytest.mark.parametrize("n", [1, 2])
def test_state_reuses_the_solvers_last_evaluation_exactly(n):
    """The fit's state takes the residuals and dθ/dz the projected fit computed at its
    solution instead of computing them again; they must be what it would compute (by
    hand: the weighted residuals w (y − ŷ) and the coordinate map's Jacobian)."""
    t, y, w, _ = _series(n, seed=30 + n, weighted=True)
    fit = iso.TurnoverModel(n).fit(t, y, 1.0 / w, warn=False)
    st = fit.state
    assert "variable projection" in st.solution.message
    r = st.weighted_residuals()
    assert st.rss == pytest.approx(float(r @ r), rel=1e-13)
    np.testing.assert_allclose(st.A, st.coords.theta(st.z, jac=True)[1], rtol=1e-14)
