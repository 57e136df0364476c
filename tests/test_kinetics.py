"""Independent checks of the forward models in :mod:`isoturnover.kinetics`.

Every prediction is compared with a numerical integration of the pool equations written out
here, independently of the library's closed forms:

    parallel pools:  dδ_i/dt = (k_i + g(t)) (δ_in(t) − δ_i),   δ = Σ f_i δ_i
    chain:           dP/dt = k_a (δ_in − P),   dT/dt = k_b (P − T)

integrated with scipy's ``solve_ivp`` (DOP853, rtol 1e-11) piece by piece between the switch
times, so the discontinuities of the diet input are honoured exactly. Every analytic Jacobian
is compared with numdifftools' numerical Jacobian (Richardson-extrapolated central
differences). All parameter values and diet histories below are invented for the tests.
"""

from __future__ import annotations

import decimal
import importlib.util
import math

import numdifftools as nd
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import solve_ivp

from isoturnover.diet import DietHistory
from isoturnover.errors import DataError, ScaleError
from isoturnover.kinetics import TurnoverKinetics, remaining_chain, remaining_parallel

# AIR 15N/14N = 1/272.0 (Junk & Svec 1958, as recommended by IUPAC/CIAAW).
R_AIR = 1.0 / 272.0
ODE_TOL = 1e-7  # ‰, agreement demanded between closed form and ODE integration


# ----------------------------------------------------------------------------------------
# Independent reference: piecewise numerical integration of the pool equations
# ----------------------------------------------------------------------------------------
def integrate_pieces(rhs, y0, switches, t, atol):
    """Integrate ``dy/dt = rhs(t, y, j)`` from the first switch, piece by piece.

    ``j`` is the index of the input in force (1 after the first switch, 2 after the
    second, ...). Before the first switch the state is ``y0``. Every switch time and every
    output time ends an integration interval, so no value is interpolated and no
    discontinuity falls inside a step. Returns the state at each ``t``, shape
    (len(t), len(y0)). Integration: scipy ``solve_ivp``, DOP853, rtol 1e-11.
    """
    t = np.asarray(t, dtype=float)
    switches = np.asarray(switches, dtype=float)
    out = np.tile(np.asarray(y0, dtype=float), (t.size, 1))
    y = np.asarray(y0, dtype=float)
    t_end = float(t.max())
    for j, a in enumerate(switches):
        if a >= t_end:
            break
        b = min(float(switches[j + 1]), t_end) if j + 1 < switches.size else t_end
        sel = (t > a) & (t <= b)
        start = a
        for p in np.unique(np.append(t[sel], b)):
            sol = solve_ivp(rhs, (start, p), y, method="DOP853", rtol=1e-11, atol=atol,
                            args=(j + 1,))
            assert sol.success, sol.message
            y = sol.y[:, -1]
            out[t == p] = y
            start = p
    return out


def ode_parallel(t, switches, inputs, rates, fractions, start=None, g=None, atol=1e-12):
    """Tissue value Σ f_i δ_i of parallel pools dδ_i/dt = (k_i + g(t))(u_j − δ_i).

    ``inputs`` are the input values u_0, u_1, ... on the mixing scale, ``start`` the pools'
    common value at the first switch (default u_0: equilibrium with the first diet).
    """
    k = np.asarray(rates, dtype=float)
    u = np.asarray(inputs, dtype=float)

    def rhs(tt, y, j):
        gg = 0.0 if g is None else float(g(tt))
        return (k + gg) * (u[j] - y)

    y0 = np.full(k.size, u[0] if start is None else start)
    return integrate_pieces(rhs, y0, switches, t, atol) @ np.asarray(fractions, dtype=float)


def ode_chain(t, switches, inputs, ka, kb, start=None, atol=1e-12):
    """Product value T of the chain dP/dt = k_a (u_j − P), dT/dt = k_b (P − T)."""
    u = np.asarray(inputs, dtype=float)

    def rhs(tt, y, j):
        return [ka * (u[j] - y[0]), kb * (y[0] - y[1])]

    y0 = np.full(2, u[0] if start is None else start)
    return integrate_pieces(rhs, y0, switches, t, atol)[:, 1]


# Atom fraction of a two-isotope element, x = R/(1 + R), R = R_std (1 + δ/1000)
# (definitions of Coplen 2011), and back; written out here, not taken from the library.
def delta_to_x(d, r_std=R_AIR):
    r = r_std * (1.0 + np.asarray(d, dtype=float) / 1000.0)
    return r / (1.0 + r)


def x_to_delta(x, r_std=R_AIR):
    x = np.asarray(x, dtype=float)
    return 1000.0 * ((x / (1.0 - x)) / r_std - 1.0)


class LogisticCurve:
    """Invented logistic body-mass curve W(t) = K / (1 + exp(−r (t − t0))).

    d ln W / dt = r / (1 + exp(r (t − t0))) (differentiated by hand); r < 0 gives a
    shrinking animal.
    """

    def __init__(self, K=50.0, r=0.06, t0=20.0):
        self.K, self.r, self.t0 = K, r, t0

    def predict(self, t):
        return self.K / (1.0 + np.exp(-self.r * (np.asarray(t, dtype=float) - self.t0)))

    def log_mass(self, t):
        return math.log(self.K) - np.logaddexp(0.0, -self.r * (np.asarray(t, float) - self.t0))

    def rate(self, t):
        return self.r / (1.0 + np.exp(self.r * (np.asarray(t, dtype=float) - self.t0)))


class MassOnlyCurve:
    """The same invented logistic curve exposing ``predict`` only (no log_mass, no rate)."""

    def __init__(self, **kw):
        self._c = LogisticCurve(**kw)

    def predict(self, t):
        return self._c.predict(t)


# ----------------------------------------------------------------------------------------
# Cases: (model, theta, times, reference) — used for both the ODE and the Jacobian checks
# ----------------------------------------------------------------------------------------
# Times avoid the (lagged) switch times by at least 0.1 so the Jacobian w.r.t. lag is smooth.
T_MAIN = np.linspace(-4.95, 150.05, 33)
SWITCH_BACK = DietHistory(-26.0, changes=[(0.0, -12.0), (60.0, -26.0)])  # invented


def case_two_pools_switch_back():
    m = TurnoverKinetics(2, diet=SWITCH_BACK)
    theta = [2.1, 0.25, 0.03, 0.4, 0.6]  # discrimination, k1, k2, f1, f2
    L = np.array([-26.0, -12.0, -26.0]) + 2.1
    ref = ode_parallel(T_MAIN, [0.0, 60.0], L, [0.25, 0.03], [0.4, 0.6])
    return m, theta, T_MAIN, ref


def case_three_pools_switch_back():
    m = TurnoverKinetics(3, diet=SWITCH_BACK)
    theta = [1.0, 0.9, 0.12, 0.015, 0.2, 0.5, 0.3]
    L = np.array([-26.0, -12.0, -26.0]) + 1.0
    ref = ode_parallel(T_MAIN, [0.0, 60.0], L, [0.9, 0.12, 0.015], [0.2, 0.5, 0.3])
    return m, theta, T_MAIN, ref


def case_one_pool_no_diet():
    m = TurnoverKinetics(1)
    theta = [-24.0, -11.0, 0.07, 1.0]  # delta0, delta_eq, k1, f1
    ref = ode_parallel(T_MAIN, [0.0], [-24.0, -11.0], [0.07], [1.0])
    return m, theta, T_MAIN, ref


def case_chain():
    m = TurnoverKinetics(structure="chain", diet=SWITCH_BACK)
    theta = [2.5, 0.3, 0.05]  # discrimination, k1, k2
    L = np.array([-26.0, -12.0, -26.0]) + 2.5
    ref = ode_chain(T_MAIN, [0.0, 60.0], L, 0.3, 0.05)
    return m, theta, T_MAIN, ref


def case_chain_no_diet():
    m = TurnoverKinetics(structure="chain")
    theta = [-20.0, -8.0, 0.04, 0.2]
    ref = ode_chain(T_MAIN, [0.0], [-20.0, -8.0], 0.04, 0.2)
    return m, theta, T_MAIN, ref


def case_lag_two_pools():
    m = TurnoverKinetics(2, diet=SWITCH_BACK, lag=True)
    lag = 3.5
    theta = [2.1, 0.25, 0.03, 0.4, 0.6, lag]
    L = np.array([-26.0, -12.0, -26.0]) + 2.1
    ref = ode_parallel(T_MAIN, [lag, 60.0 + lag], L, [0.25, 0.03], [0.4, 0.6])
    return m, theta, T_MAIN, ref


def case_lag_chain():
    m = TurnoverKinetics(structure="chain", diet=SWITCH_BACK, lag=True)
    lag = 2.25
    theta = [2.5, 0.3, 0.05, lag]
    L = np.array([-26.0, -12.0, -26.0]) + 2.5
    ref = ode_chain(T_MAIN, [lag, 60.0 + lag], L, 0.3, 0.05)
    return m, theta, T_MAIN, ref


def case_epsilon():
    m = TurnoverKinetics(2, diet=SWITCH_BACK, separation="epsilon")
    eps = 13.5
    theta = [eps, 0.25, 0.03, 0.4, 0.6]
    # ε form by hand: (1000 + diet)(1 + ε/1000) − 1000 (Coplen 2011 definitions)
    L = (1000.0 + np.array([-26.0, -12.0, -26.0])) * (1.0 + eps / 1000.0) - 1000.0
    ref = ode_parallel(T_MAIN, [0.0, 60.0], L, [0.25, 0.03], [0.4, 0.6])
    return m, theta, T_MAIN, ref


def case_per_diet_separation():
    m = TurnoverKinetics(2, diet=SWITCH_BACK, per_diet_separation=True)
    theta = [3.0, 1.2, 0.25, 0.03, 0.4, 0.6]  # discrimination_0 (−26 diet), _1 (−12 diet)
    L = np.array([-26.0 + 3.0, -12.0 + 1.2, -26.0 + 3.0])
    ref = ode_parallel(T_MAIN, [0.0, 60.0], L, [0.25, 0.03], [0.4, 0.6])
    return m, theta, T_MAIN, ref


def case_per_diet_epsilon_chain():
    m = TurnoverKinetics(structure="chain", diet=SWITCH_BACK, per_diet_separation=True,
                         separation="epsilon")
    theta = [14.0, 11.0, 0.3, 0.05]
    L = (1000.0 + np.array([-26.0, -12.0, -26.0])) * (1.0 + np.array([14.0, 11.0, 14.0]) / 1e3)
    L = L - 1000.0
    ref = ode_chain(T_MAIN, [0.0, 60.0], L, 0.3, 0.05)
    return m, theta, T_MAIN, ref


def case_free_initial():
    m = TurnoverKinetics(2, diet=SWITCH_BACK, initial="free")
    theta = [-19.0, 2.1, 0.25, 0.03, 0.4, 0.6]  # delta0, discrimination, k..., f...
    L = np.array([np.nan, -12.0, -26.0]) + 2.1
    ref = ode_parallel(T_MAIN, [0.0, 60.0], L, [0.25, 0.03], [0.4, 0.6], start=-19.0)
    return m, theta, T_MAIN, ref


def case_free_initial_chain():
    m = TurnoverKinetics(structure="chain", diet=SWITCH_BACK, initial="free")
    theta = [-19.0, 2.1, 0.3, 0.05]
    L = np.array([np.nan, -12.0, -26.0]) + 2.1
    ref = ode_chain(T_MAIN, [0.0, 60.0], L, 0.3, 0.05, start=-19.0)
    return m, theta, T_MAIN, ref


TRACER = DietHistory(0.0, changes=[(0.0, 2000.0), (40.0, 0.0)])  # invented 15N tracer pulse


def case_atom_fraction_tracer():
    m = TurnoverKinetics(2, diet=TRACER, scale="atom_fraction", isotope="d15N",
                         reference_ratio=R_AIR)
    theta = [3.0, 0.3, 0.04, 0.35, 0.65]
    xin = delta_to_x(np.array([0.0, 2000.0, 0.0]) + 3.0)
    x = ode_parallel(T_MAIN, [0.0, 40.0], xin, [0.3, 0.04], [0.35, 0.65], atol=1e-17)
    return m, theta, T_MAIN, x_to_delta(x)


def case_atom_fraction_no_diet():
    m = TurnoverKinetics(1, scale="atom_fraction", isotope="d15N", reference_ratio=R_AIR)
    theta = [5.0, 1800.0, 0.09, 1.0]
    xin = delta_to_x([5.0, 1800.0])
    x = ode_parallel(T_MAIN, [0.0], xin, [0.09], [1.0], atol=1e-17)
    return m, theta, T_MAIN, x_to_delta(x)


def case_unknown_plateaus():
    diet = DietHistory(None, changes=[(0.0, None), (60.0, None)])
    m = TurnoverKinetics(2, diet=diet)
    theta = [-23.0, -9.5, -22.0, 0.25, 0.03, 0.4, 0.6]  # plateau_0, _1, _2, k..., f...
    ref = ode_parallel(T_MAIN, [0.0, 60.0], [-23.0, -9.5, -22.0], [0.25, 0.03], [0.4, 0.6])
    return m, theta, T_MAIN, ref


def case_mixed_known_unknown():
    diet = DietHistory(-26.0, changes=[(0.0, None), (60.0, -26.0)])
    m = TurnoverKinetics(1, diet=diet, lag=True)
    theta = [-9.0, 2.0, 0.08, 1.0, 1.5]  # plateau_1, discrimination, k1, f1, lag
    ref = ode_parallel(T_MAIN, [1.5, 61.5], [-24.0, -9.0, -24.0], [0.08], [1.0])
    return m, theta, T_MAIN, ref


def case_exponential_growth():
    m = TurnoverKinetics(2, diet=SWITCH_BACK, growth="exponential", lag=True)
    theta = [2.1, 0.2, 0.01, 0.4, 0.6, 1.25, 0.03]  # ..., lag, k_growth
    L = np.array([-26.0, -12.0, -26.0]) + 2.1
    ref = ode_parallel(T_MAIN, [1.25, 61.25], L, [0.2, 0.01], [0.4, 0.6], g=lambda tt: 0.03)
    return m, theta, T_MAIN, ref


def case_exponential_growth_no_diet():
    m = TurnoverKinetics(1, growth="exponential")
    theta = [-24.0, -11.0, 0.02, 1.0, 0.05]
    ref = ode_parallel(T_MAIN, [0.0], [-24.0, -11.0], [0.02], [1.0], g=lambda tt: 0.05)
    return m, theta, T_MAIN, ref


def case_curve_one_pool():
    curve = LogisticCurve()
    m = TurnoverKinetics(1, diet=SWITCH_BACK, growth=curve)
    theta = [2.1, 0.015, 1.0]
    L = np.array([-26.0, -12.0, -26.0]) + 2.1
    ref = ode_parallel(T_MAIN, [0.0, 60.0], L, [0.015], [1.0], g=curve.rate)
    return m, theta, T_MAIN, ref


def case_curve_two_pools():
    curve = LogisticCurve()
    m = TurnoverKinetics(2, diet=SWITCH_BACK, growth=curve)
    theta = [2.1, 0.2, 0.01, 0.3, 0.7]
    L = np.array([-26.0, -12.0, -26.0]) + 2.1
    ref = ode_parallel(T_MAIN, [0.0, 60.0], L, [0.2, 0.01], [0.3, 0.7], g=curve.rate)
    return m, theta, T_MAIN, ref


def case_curve_two_pools_lag():
    curve = LogisticCurve(K=30.0, r=0.1, t0=5.0)
    m = TurnoverKinetics(2, diet=SWITCH_BACK, growth=curve, lag=True)
    theta = [2.1, 0.2, 0.01, 0.3, 0.7, 2.5]
    L = np.array([-26.0, -12.0, -26.0]) + 2.1
    ref = ode_parallel(T_MAIN, [2.5, 62.5], L, [0.2, 0.01], [0.3, 0.7], g=curve.rate)
    return m, theta, T_MAIN, ref


def case_curve_mass_only():
    curve = MassOnlyCurve(K=30.0, r=0.1, t0=5.0)
    m = TurnoverKinetics(2, diet=SWITCH_BACK, growth=curve)
    theta = [2.1, 0.2, 0.01, 0.3, 0.7]
    L = np.array([-26.0, -12.0, -26.0]) + 2.1
    ref = ode_parallel(T_MAIN, [0.0, 60.0], L, [0.2, 0.01], [0.3, 0.7],
                       g=LogisticCurve(K=30.0, r=0.1, t0=5.0).rate)
    return m, theta, T_MAIN, ref


def case_curve_free_initial():
    curve = LogisticCurve()
    m = TurnoverKinetics(2, diet=SWITCH_BACK, growth=curve, initial="free")
    theta = [-20.0, 2.1, 0.2, 0.01, 0.3, 0.7]
    L = np.array([np.nan, -12.0, -26.0]) + 2.1
    ref = ode_parallel(T_MAIN, [0.0, 60.0], L, [0.2, 0.01], [0.3, 0.7], start=-20.0,
                       g=curve.rate)
    return m, theta, T_MAIN, ref


def case_four_pools_three_switches():
    diet = DietHistory(-26.0, changes=[(0.0, -12.0), (30.0, -19.0), (80.0, -26.0)])
    m = TurnoverKinetics(4, diet=diet)
    theta = [1.5, 2.0, 0.4, 0.06, 0.012, 0.1, 0.2, 0.3, 0.4]
    L = np.array([-26.0, -12.0, -19.0, -26.0]) + 1.5
    ref = ode_parallel(T_MAIN, [0.0, 30.0, 80.0], L, [2.0, 0.4, 0.06, 0.012],
                       [0.1, 0.2, 0.3, 0.4])
    return m, theta, T_MAIN, ref


# The first diet began on a known date (t = −30) and the diet before it is known (−20 ‰):
# the tissue starts at equilibrium with that earlier diet and the whole history is solved
# (invented). Times reach back before −30 so the lead-in is seen from its start. Reference:
# scipy's solve_ivp of the pool equations from −30 on (ode_parallel / ode_chain above).
T_LEAD = np.linspace(-44.95, 150.05, 40)
LEAD_IN = DietHistory(-26.0, changes=[(0.0, -12.0), (60.0, -26.0)], start=-30.0,
                      previous=-20.0)


def case_lead_in_two_pools():
    m = TurnoverKinetics(2, diet=LEAD_IN)
    theta = [2.1, 0.25, 0.03, 0.4, 0.6]
    L = np.array([-20.0, -26.0, -12.0, -26.0]) + 2.1
    ref = ode_parallel(T_LEAD, [-30.0, 0.0, 60.0], L, [0.25, 0.03], [0.4, 0.6])
    return m, theta, T_LEAD, ref


def case_lead_in_per_diet_curve_lag():
    # the earlier diet's value differs from the others: a separation of its own, last
    curve = LogisticCurve(K=30.0, r=0.05, t0=5.0)
    m = TurnoverKinetics(2, diet=LEAD_IN, per_diet_separation=True, growth=curve, lag=True)
    theta = [3.0, 1.2, 2.4, 0.2, 0.02, 0.3, 0.7, 2.5]  # separations of −26, −12, −20
    L = np.array([-20.0 + 2.4, -26.0 + 3.0, -12.0 + 1.2, -26.0 + 3.0])
    ref = ode_parallel(T_LEAD, [-27.5, 2.5, 62.5], L, [0.2, 0.02], [0.3, 0.7], g=curve.rate)
    return m, theta, T_LEAD, ref


def case_lead_in_chain_epsilon_atom_fraction():
    diet = DietHistory(0.0, changes=[(0.0, 2000.0), (40.0, 0.0)], start=-10.0,
                       previous=-8.0)
    m = TurnoverKinetics(structure="chain", diet=diet, separation="epsilon",
                         scale="atom_fraction", isotope="d15N", reference_ratio=R_AIR)
    eps = 3.5
    theta = [eps, 0.3, 0.05]
    # ε form by hand (Coplen 2011), then atom fraction x = R/(1 + R)
    xin = delta_to_x((1000.0 + np.array([-8.0, 0.0, 2000.0, 0.0])) * (1 + eps / 1e3) - 1e3)
    x = ode_chain(T_LEAD, [-10.0, 0.0, 40.0], xin, 0.3, 0.05, atol=1e-17)
    return m, theta, T_LEAD, x_to_delta(x)


CASES = {
    name[len("case_"):]: fn for name, fn in sorted(globals().items()) if name.startswith("case_")
}


# ----------------------------------------------------------------------------------------
# Predictions against the ODE integration
# ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", list(CASES))
def test_prediction_matches_ode_integration(name):
    # Independent source: scipy.integrate.solve_ivp (DOP853) of the pool equations above.
    m, theta, t, ref = CASES[name]()
    got = m.predict(t, theta)
    np.testing.assert_allclose(got, ref, rtol=0, atol=ODE_TOL)
    # the same numbers come back with the Jacobian requested, and from evaluate()
    y, _ = m.predict(t, theta, jacobian=True)
    np.testing.assert_allclose(y, got, rtol=0, atol=1e-12)
    np.testing.assert_allclose(m.evaluate(t, np.asarray(theta)), got, rtol=0, atol=1e-12)


def test_ode_reference_is_not_trivial():
    # The atom-fraction and ε cases must differ from their δ / difference-form counterparts,
    # otherwise the checks above could not tell the scales apart (Coplen 2011 definitions).
    m, theta, t, ref = case_atom_fraction_tracer()
    mixed_in_delta = TurnoverKinetics(2, diet=TRACER).predict(t, theta)
    assert np.max(np.abs(mixed_in_delta - ref)) > 1.0
    m, theta, t, ref = case_epsilon()
    diff_form = TurnoverKinetics(2, diet=SWITCH_BACK).predict(t, theta)
    assert np.max(np.abs(diff_form - ref)) > 0.1


def test_param_names_of_the_cases():
    assert CASES["per_diet_separation"]()[0].param_names == (
        "discrimination_0", "discrimination_1", "k1", "k2", "f1", "f2")
    assert CASES["unknown_plateaus"]()[0].param_names == (
        "plateau_0", "plateau_1", "plateau_2", "k1", "k2", "f1", "f2")
    assert CASES["mixed_known_unknown"]()[0].param_names == (
        "plateau_1", "discrimination", "k1", "f1", "lag")
    assert CASES["exponential_growth"]()[0].param_names == (
        "discrimination", "k1", "k2", "f1", "f2", "lag", "k_growth")
    assert CASES["free_initial"]()[0].param_names == (
        "delta0", "discrimination", "k1", "k2", "f1", "f2")
    assert CASES["epsilon"]()[0].param_names[0] == "epsilon"
    assert CASES["chain"]()[0].param_names == ("discrimination", "k1", "k2")
    assert CASES["lead_in_per_diet_curve_lag"]()[0].param_names == (
        "discrimination_0", "discrimination_1", "discrimination_2", "k1", "k2", "f1", "f2",
        "lag")


def test_levels_worked_by_hand():
    # Worked example (reference README, invented numbers): diet −26.0 ‰, ε = 13.5 ‰ gives
    # 974 × 1.0135 − 1000 = −12.851 ‰; the difference form gives −12.5 ‰.
    diet = DietHistory.step(-26.0, -12.0)
    eps = TurnoverKinetics(1, diet=diet, separation="epsilon").levels([13.5, 0.1, 1.0])
    assert eps[0] == pytest.approx(-12.851, abs=1e-12)
    assert eps[1] == pytest.approx(988.0 * 1.0135 - 1000.0, abs=1e-12)
    dif = TurnoverKinetics(1, diet=diet).levels([13.5, 0.1, 1.0])
    np.testing.assert_allclose(dif, [-12.5, 1.5], atol=1e-12)


def test_free_initial_holds_delta0_before_first_switch():
    m, theta, _, _ = case_free_initial()
    np.testing.assert_allclose(m.predict([-30.0, -1.0, 0.0], theta), -19.0, atol=1e-12)


def test_default_reference_ratio_from_isotopes_module():
    # Runs once isoturnover.isotopes provides reference_ratio; AIR 15N/14N = 1/272.0
    # (Junk & Svec 1958), checked against the ODE integration in atom fraction.
    if importlib.util.find_spec("isoturnover.isotopes") is None:
        pytest.skip("isoturnover.isotopes is not available yet")
    from isoturnover.isotopes import reference_ratio

    rs = float(reference_ratio("d15N"))
    assert rs == pytest.approx(R_AIR, rel=1e-4)
    m = TurnoverKinetics(2, diet=TRACER, scale="atom_fraction", isotope="d15N")
    theta = [3.0, 0.3, 0.04, 0.35, 0.65]
    xin = delta_to_x(np.array([0.0, 2000.0, 0.0]) + 3.0, rs)
    x = ode_parallel(T_MAIN, [0.0, 40.0], xin, [0.3, 0.04], [0.35, 0.65], atol=1e-17)
    np.testing.assert_allclose(m.predict(T_MAIN, theta), x_to_delta(x, rs), atol=ODE_TOL)


# ----------------------------------------------------------------------------------------
# Analytic Jacobian against numdifftools
# ----------------------------------------------------------------------------------------
def assert_jacobian_matches(m, theta, t):
    theta = np.asarray(theta, dtype=float)
    _, J = m.predict(t, theta, jacobian=True)
    # Independent source: numdifftools.Jacobian (central differences, Richardson extrapolation)
    Jn = nd.Jacobian(lambda th: m.evaluate(t, th), method="central")(theta)
    Jn = np.asarray(Jn).reshape(t.size, theta.size)
    assert J.shape == (t.size, m.n_params)
    # relative 1e-6, with an absolute floor of 1e-6 of the largest entry of each column
    floor = 1e-6 * np.maximum(np.max(np.abs(Jn), axis=0), 1e-6)
    bad = np.abs(J - Jn) > 1e-6 * np.abs(Jn) + floor
    assert not bad.any(), (
        f"Jacobian mismatch in {[m.param_names[j] for j in np.unique(np.nonzero(bad)[1])]}: "
        f"max |diff| {np.max(np.abs(J - Jn)):.3g}"
    )


@pytest.mark.parametrize("name", list(CASES))
def test_jacobian_matches_numdifftools(name):
    m, theta, t, _ = CASES[name]()
    assert_jacobian_matches(m, theta, t)


@pytest.mark.parametrize("gap", [0.0, 1e-9, 1e-4, 1e-3, 0.5])
@pytest.mark.parametrize("lag", [False, True])
def test_chain_jacobian_near_equal_rates(gap, lag):
    # k_a = k_b is a removable singularity of (k_a e^{-k_b τ} − k_b e^{-k_a τ})/(k_a − k_b);
    # a gap of 1e-3 over τ up to 150 puts (k_a − k_b)τ on both sides of the series switch.
    m = TurnoverKinetics(structure="chain", diet=SWITCH_BACK, lag=lag)
    theta = [2.0, 0.08 + gap, 0.08] + ([1.75] if lag else [])
    assert_jacobian_matches(m, theta, T_MAIN)
    # and the values still follow the ODE there (solve_ivp reference)
    ref = ode_chain(T_MAIN, np.array([0.0, 60.0]) + (1.75 if lag else 0.0),
                    np.array([-26.0, -12.0, -26.0]) + 2.0, 0.08 + gap, 0.08)
    np.testing.assert_allclose(m.predict(T_MAIN, theta), ref, atol=ODE_TOL)


# ----------------------------------------------------------------------------------------
# Chain: symmetry, limits, removable singularity
# ----------------------------------------------------------------------------------------
def closed_form_chain(tau, ka, kb):
    """(k_a e^{-k_b τ} − k_b e^{-k_a τ})/(k_a − k_b), the textbook form (k_a ≠ k_b)."""
    return (ka * np.exp(-kb * tau) - kb * np.exp(-ka * tau)) / (ka - kb)


@settings(max_examples=150, deadline=None, derandomize=True)
@given(
    ka=st.floats(1e-3, 10.0),
    kb=st.floats(1e-3, 10.0),
    tau=st.lists(st.floats(0.0, 500.0), min_size=1, max_size=8),
)
def test_chain_symmetric_in_its_rates(ka, kb, tau):
    tau = np.asarray(tau)
    a = remaining_chain(tau, ka, kb)
    b = remaining_chain(tau, kb, ka)
    np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-15)
    assert np.all((a >= 0) & (a <= 1 + 1e-15))
    # Against the textbook closed form where it is well conditioned.
    if abs(ka - kb) > 0.05 * max(ka, kb):
        np.testing.assert_allclose(a, closed_form_chain(tau, ka, kb), rtol=1e-9, atol=1e-13)
    # Through the tissue model: swapping k1 and k2 changes neither values nor (swapped)
    # Jacobian columns.
    m = TurnoverKinetics(structure="chain")
    t = tau + 0.0
    y1, J1 = m.predict(t, [-20.0, -8.0, ka, kb], jacobian=True)
    y2, J2 = m.predict(t, [-20.0, -8.0, kb, ka], jacobian=True)
    np.testing.assert_allclose(y1, y2, rtol=0, atol=1e-11)
    np.testing.assert_allclose(J1[:, [0, 1, 3, 2]], J2, rtol=1e-10, atol=1e-12)


def test_chain_with_one_fast_step_is_one_pool():
    # With k_a = 1e4 k_b: Φ − e^{-k_b τ} = k_b (e^{-k_b τ} − e^{-k_a τ})/(k_a − k_b), at most
    # k_b/(k_a − k_b) = 1/9999 (algebra on the closed form above).
    kb = 0.05
    ka = 1e4 * kb
    tau = np.linspace(0.0, 200.0, 401)
    one_pool = np.exp(-kb * tau)
    for rates in [(ka, kb), (kb, ka)]:
        diff = remaining_chain(tau, *rates) - one_pool
        assert np.max(np.abs(diff)) <= 1.0 / 9999.0 + 1e-15
        np.testing.assert_allclose(
            diff, kb * (np.exp(-kb * tau) - np.exp(-ka * tau)) / (ka - kb), atol=1e-14)
    # the tissue models agree to the same order
    chain = TurnoverKinetics(structure="chain", diet=SWITCH_BACK).predict(T_MAIN, [2.0, ka, kb])
    pool = TurnoverKinetics(1, diet=SWITCH_BACK).predict(T_MAIN, [2.0, kb, 1.0])
    assert np.max(np.abs(chain - pool)) < 14.0 * 2 / 9999.0


@pytest.mark.parametrize("k", [1e-3, 0.08, 2.0])
def test_chain_equal_rates_is_gamma_two(k):
    # k_a = k_b = k: 1 − F = e^{-kτ}(1 + kτ), the limit of the closed form (l'Hôpital by hand;
    # the gamma(2) residence-time distribution of two equal first-order steps).
    tau = np.linspace(0.0, 40.0 / k, 201)
    expected = np.exp(-k * tau) * (1.0 + k * tau)
    np.testing.assert_allclose(remaining_chain(tau, k, k), expected, rtol=1e-13, atol=1e-300)
    # k_a = k(1 + h): Taylor of the closed form by hand, e^{-kτ}[1 + kτ(1 − hkτ/2 + O(h²))]
    h = 1e-9
    first_order = np.exp(-k * tau) * (1.0 + k * tau - h * (k * tau) ** 2 / 2.0)
    np.testing.assert_allclose(remaining_chain(tau, k * (1 + h), k), first_order,
                               rtol=1e-12, atol=1e-300)
    m = TurnoverKinetics(structure="chain")
    np.testing.assert_allclose(m.remaining(tau, [0.0, 1.0, k, k]), expected, rtol=1e-13)


def chain_decimal(tau, ka, kb, digits=60):
    """Closed form Φ and its partials (∂/∂k_a, ∂/∂k_b, ∂/∂τ) in `digits`-digit decimals.

    Φ = N/D with N = k_a e^{-k_b τ} − k_b e^{-k_a τ}, D = k_a − k_b (k_a ≠ k_b); partials
    differentiated by hand. Python's ``decimal`` module is the arbitrary-precision arithmetic,
    so the cancellation near k_a = k_b costs digits we can afford.
    """
    with decimal.localcontext() as ctx:
        ctx.prec = digits
        a, b, x = decimal.Decimal(ka), decimal.Decimal(kb), decimal.Decimal(tau)
        ea, eb = (-a * x).exp(), (-b * x).exp()
        d = a - b
        n = a * eb - b * ea
        phi = n / d
        d_a = (eb + b * x * ea) / d - n / d**2
        d_b = (-a * x * eb - ea) / d + n / d**2
        d_tau = a * b * (ea - eb) / d
        return [float(v) for v in (phi, d_a, d_b, d_tau)]


@pytest.mark.parametrize("gap", [1e-9, 3e-6, 6e-5, 1e-4, 2e-3])
def test_chain_near_equal_rates_high_precision(gap):
    # Reference: the textbook closed form in 60-digit decimal arithmetic (Python decimal).
    # With τ up to 150 the products (k_a − k_b)τ straddle the stable form's series cut-over.
    ka, kb = 0.08 + gap, 0.08
    tau = np.linspace(0.5, 150.0, 60)
    ref = np.array([chain_decimal(x, ka, kb) for x in tau])
    np.testing.assert_allclose(remaining_chain(tau, ka, kb), ref[:, 0], rtol=2e-14)
    np.testing.assert_allclose(remaining_chain(tau, kb, ka), ref[:, 0], rtol=2e-14)
    # Through the model: delta0 = 1, delta_eq = 0 makes the tissue value Φ itself, so the
    # Jacobian columns k1, k2 are ∂Φ/∂k_a, ∂Φ/∂k_b and the lag column is −∂Φ/∂τ.
    m = TurnoverKinetics(structure="chain", lag=True)
    y, J = m.predict(tau + 0.25, [1.0, 0.0, ka, kb, 0.25], jacobian=True)
    # (y is formed as 1 − (1 − Φ): an absolute rounding of ~1e-16 is inherent)
    np.testing.assert_allclose(y, ref[:, 0], rtol=2e-14, atol=2e-16)
    np.testing.assert_allclose(J[:, 2], ref[:, 1], rtol=1e-9, atol=1e-15)
    np.testing.assert_allclose(J[:, 3], ref[:, 2], rtol=1e-9, atol=1e-15)
    np.testing.assert_allclose(J[:, 4], -ref[:, 3], rtol=1e-9, atol=1e-15)


def test_chain_remaining_before_switch_is_one():
    np.testing.assert_array_equal(remaining_chain([-5.0, 0.0], 0.3, 0.1), [1.0, 1.0])


# ----------------------------------------------------------------------------------------
# Parallel pools: Cerling et al. 2007 closed form
# ----------------------------------------------------------------------------------------
def test_one_pool_step_is_cerling_form():
    # δ(t) = δ_eq + (δ0 − δ_eq) e^{-kt} (Cerling et al. 2007, Oecologia 151:175–189)
    d0, deq, k = -24.3, -11.7, 0.061
    t = np.linspace(0.0, 120.0, 61)
    m = TurnoverKinetics(1)
    np.testing.assert_allclose(m.predict(t, [d0, deq, k, 1.0]),
                               deq + (d0 - deq) * np.exp(-k * t), rtol=1e-14, atol=1e-13)
    # before the switch the tissue is at its old value
    np.testing.assert_allclose(m.predict([-10.0, -1e-9], [d0, deq, k, 1.0]), d0, atol=0)
    # 1 − F is Σ f_i e^{-k_i τ} (Cerling et al. 2007)
    np.testing.assert_allclose(remaining_parallel(t, [0.3, 0.02], [0.25, 0.75]),
                               0.25 * np.exp(-0.3 * t) + 0.75 * np.exp(-0.02 * t), rtol=1e-14)
    np.testing.assert_allclose(m.remaining(t, [d0, deq, k, 1.0]), np.exp(-k * t), rtol=1e-14)


def test_exponential_growth_adds_to_rate():
    # Hesslein et al. 1993: with W = W0 e^{k_g t} the old material decays as e^{-(k_g+k_d)t}.
    m = TurnoverKinetics(1, growth="exponential")
    t = np.linspace(0.0, 100.0, 21)
    np.testing.assert_allclose(m.predict(t, [-24.0, -11.0, 0.02, 1.0, 0.03]),
                               -11.0 - 13.0 * np.exp(-0.05 * t), rtol=1e-14)
    np.testing.assert_allclose(m.remaining(t, [-24.0, -11.0, 0.02, 1.0, 0.03]),
                               np.exp(-0.05 * t), rtol=1e-14)


def test_pure_growth_dilution_follows_mass_ratio():
    # k_d → 0: the old material left is W(s)/W(t) exactly (Fry & Arnold 1982 power form, c = −1).
    curve = LogisticCurve()
    m = TurnoverKinetics(1, growth=curve)
    t = np.linspace(0.0, 80.0, 17)
    expected = -11.0 + (-24.0 + 11.0) * curve.predict(0.0) / curve.predict(t)
    np.testing.assert_allclose(m.predict(t, [-24.0, -11.0, 1e-300, 1.0]), expected, rtol=1e-12)


def test_scalar_and_list_times_accepted():
    m = TurnoverKinetics(1)
    y = m.predict(10.0, [-24.0, -11.0, 0.1, 1.0])
    assert y.shape == (1,)
    assert y[0] == pytest.approx(-11.0 - 13.0 * math.exp(-1.0), abs=1e-13)


@pytest.mark.parametrize("name", ["two_pools_switch_back", "chain", "curve_two_pools",
                                  "atom_fraction_tracer"])
def test_empty_times_give_empty_result(name):
    m, theta, _, _ = CASES[name]()
    y, J = m.predict([], theta, jacobian=True)
    assert y.shape == (0,) and J.shape == (0, m.n_params)


def test_theta_as_mapping():
    m = TurnoverKinetics(1)
    p = {"delta0": -24.0, "delta_eq": -11.0, "k1": 0.1, "f1": 1.0}
    np.testing.assert_allclose(m.predict([5.0], p), m.predict([5.0], [-24.0, -11.0, 0.1, 1.0]))
    with pytest.raises(ValueError, match="parameters missing: f1"):
        m.predict([5.0], {"delta0": -24.0, "delta_eq": -11.0, "k1": 0.1})


def test_inputs_not_mutated():
    m, theta, t, _ = case_two_pools_switch_back()
    th = np.asarray(theta, dtype=float)
    th0, t0 = th.copy(), t.copy()
    m.predict(t, th, jacobian=True)
    np.testing.assert_array_equal(th, th0)
    np.testing.assert_array_equal(t, t0)


# ----------------------------------------------------------------------------------------
# Bad input
# ----------------------------------------------------------------------------------------
GOOD = [-24.0, -11.0, 0.1, 1.0]


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_times_must_be_finite(bad):
    with pytest.raises(ValueError, match="'t' must be finite; got 1 non-finite"):
        TurnoverKinetics(1).predict([0.0, bad, 5.0], GOOD)


@pytest.mark.parametrize("pools", [0, 5, 2.5, True, -1, "2"])
def test_pools_outside_range(pools):
    with pytest.raises(ValueError, match=r"'pools' must be an integer from 1 to 4; got"):
        TurnoverKinetics(pools)


@pytest.mark.parametrize("fractions", [[0.5, 0.6], [0.5, 0.5 - 1e-10], [1.2, -0.2]])
def test_fractions_must_be_a_partition(fractions):
    m = TurnoverKinetics(2)
    with pytest.raises(ValueError, match="pool fractions must be non-negative and sum to 1"):
        m.predict([1.0], [-24.0, -11.0, 0.3, 0.03, *fractions])


def test_fractions_within_1e12_accepted():
    m = TurnoverKinetics(2)
    m.predict([1.0], [-24.0, -11.0, 0.3, 0.03, 0.4, 0.6 + 5e-13])


@pytest.mark.parametrize("rate", [0.0, -0.1])
def test_rates_must_be_positive(rate):
    with pytest.raises(ValueError, match="rates must be positive"):
        TurnoverKinetics(2).predict([1.0], [-24.0, -11.0, 0.3, rate, 0.5, 0.5])
    with pytest.raises(ValueError, match="rates must be positive"):
        TurnoverKinetics(structure="chain").predict([1.0], [-24.0, -11.0, rate, 0.1])


def test_parameters_must_be_finite():
    with pytest.raises(ValueError, match="parameters must be finite; got non-finite delta_eq"):
        TurnoverKinetics(1).predict([1.0], [-24.0, np.nan, 0.1, 1.0])


@pytest.mark.parametrize("theta", [[-24.0, -11.0, 0.1], [-24.0, -11.0, 0.1, 1.0, 0.0], []])
def test_wrong_theta_length(theta):
    with pytest.raises(ValueError, match=r"'theta' must have 4 values \(delta0, delta_eq, k1, f1"):
        TurnoverKinetics(1).predict([1.0], theta)


@pytest.mark.parametrize(
    "kwargs, arg",
    [
        ({"structure": "serial"}, "structure"),
        ({"separation": "ratio"}, "separation"),
        ({"scale": "ratio"}, "scale"),
        ({"initial": "guess"}, "initial"),
        ({"structure": None}, "structure"),
    ],
)
def test_unknown_choices(kwargs, arg):
    with pytest.raises(ValueError, match=rf"'{arg}' must be one of .*; got"):
        TurnoverKinetics(1, **kwargs)


def test_unsorted_diet_history():
    with pytest.raises(DataError, match="switch times must be strictly increasing"):
        DietHistory(-26.0, changes=[(10.0, -12.0), (5.0, -26.0)])


def test_diet_history_without_change_refused():
    with pytest.raises(DataError, match="the diet history has no change"):
        TurnoverKinetics(1, diet=DietHistory(-26.0))


def test_diet_must_be_a_history():
    with pytest.raises(DataError, match="'diet' must be a DietHistory or None; got list"):
        TurnoverKinetics(1, diet=[(0.0, -12.0)])


def test_switches_outside_the_times_are_fine():
    # Switches at 500 and 900 lie after every sampling time; one before them all.
    diet = DietHistory(-26.0, changes=[(-100.0, -12.0), (500.0, -20.0), (900.0, -26.0)])
    m = TurnoverKinetics(2, diet=diet)
    theta = [2.0, 0.3, 0.04, 0.5, 0.5]
    t = np.linspace(0.0, 50.0, 11)
    y, J = m.predict(t, theta, jacobian=True)
    ref = ode_parallel(t, [-100.0, 500.0, 900.0], np.array([-26.0, -12.0, -20.0, -26.0]) + 2.0,
                       [0.3, 0.04], [0.5, 0.5])
    np.testing.assert_allclose(y, ref, atol=ODE_TOL)
    assert np.all(np.isfinite(J))
    # all times before the first switch: the old equilibrium
    late = TurnoverKinetics(1, diet=DietHistory.step(-26.0, -12.0, at=1000.0))
    np.testing.assert_allclose(late.predict(t, [2.0, 0.1, 1.0]), -24.0, atol=0)


@pytest.mark.parametrize("isotope", ["d18O", "d34S"])
def test_atom_fraction_refused_for_oxygen_and_sulfur(isotope):
    with pytest.raises(ScaleError, match=rf"exact only for the two-isotope elements .*{isotope}"):
        TurnoverKinetics(1, scale="atom_fraction", isotope=isotope, reference_ratio=0.002)


def test_atom_fraction_needs_isotope():
    with pytest.raises(ScaleError, match="needs the isotope"):
        TurnoverKinetics(1, scale="atom_fraction")


def test_growth_with_chain_refused():
    with pytest.raises(ValueError, match="growth dilution is available for structure='parallel'"):
        TurnoverKinetics(structure="chain", growth="exponential")
    with pytest.raises(ValueError, match="growth dilution is available for structure='parallel'"):
        TurnoverKinetics(structure="chain", growth=LogisticCurve())


def test_growth_argument_checked():
    with pytest.raises(ValueError, match="'growth' must be None, 'exponential' or a growth curve"):
        TurnoverKinetics(1, growth="logistic")
    with pytest.raises(DataError, match="'growth' must be None, .* got float"):
        TurnoverKinetics(1, growth=0.1)


def test_shrinking_curve_faster_than_slowest_pool_refused():
    # Invented shrinking animal: d ln W/dt = r/(1 + e^{r(t − t0)}) reaches about −0.04 per day.
    curve = LogisticCurve(K=50.0, r=-0.05, t0=30.0)
    m = TurnoverKinetics(2, diet=SWITCH_BACK, growth=curve)
    with pytest.raises(ValueError, match="loses mass faster than the slowest pool turns over"):
        m.predict(T_MAIN, [2.0, 0.3, 0.01, 0.5, 0.5])
    # a slowest pool faster than the mass loss is fine, and still follows the ODE
    theta = [2.0, 0.3, 0.08, 0.5, 0.5]
    L = np.array([-26.0, -12.0, -26.0]) + 2.0
    ref = ode_parallel(T_MAIN, [0.0, 60.0], L, [0.3, 0.08], [0.5, 0.5], g=curve.rate)
    np.testing.assert_allclose(m.predict(T_MAIN, theta), ref, atol=ODE_TOL)


def test_exponential_mass_loss_faster_than_slowest_pool_refused():
    # DESIGN §2: mass loss is allowed only while k_d + d ln W/dt >= 0; with W = W0 e^{k_g t}
    # d ln W/dt = k_growth.
    m = TurnoverKinetics(2, growth="exponential")
    with pytest.raises(ValueError, match="loses mass faster than the slowest pool"):
        m.predict([1.0], [-24.0, -11.0, 0.3, 0.02, 0.5, 0.5, -0.05])
    # mild mass loss is allowed: old material then decays at k_d + k_g (Hesslein et al. 1993)
    y = m.predict([10.0], [-24.0, -11.0, 0.3, 0.02, 0.5, 0.5, -0.01])
    expected = -11.0 - 13.0 * (0.5 * math.exp(-2.9) + 0.5 * math.exp(-0.1))
    assert y[0] == pytest.approx(expected, abs=1e-12)


@pytest.mark.parametrize("pools", [1, 2, 3])
@pytest.mark.parametrize("lag, growth, separation, initial, known", [
    (False, None, "difference", "equilibrium", True),
    (True, None, "epsilon", "equilibrium", True),
    (False, "exponential", "difference", "free", True),
    (True, "exponential", "epsilon", "equilibrium", False),
])
def test_one_switch_fast_path_equals_the_general_path(pools, lag, growth, separation, initial,
                                                      known):
    # The one-switch closed form (kinetics._evaluate_one_switch) and the general
    # superposition must give the same values and Jacobian; the general path is itself
    # checked against solve_ivp above.
    rng = np.random.default_rng(pools)
    diet = DietHistory(-27.0, changes=[(3.0, -12.0 if known else None)])
    kin = TurnoverKinetics(pools, diet=diet, lag=lag, growth=growth, separation=separation,
                           initial=initial)
    assert kin._one_switch
    t = np.array([-5, 0, 0.5, 1, 2, 3, 3.5, 4, 7, 10, 14, 21, 28, 42, 56, 84.0])
    for _ in range(5):
        theta = rng.normal(size=kin.n_params)
        theta[kin.rate_index] = np.sort(np.exp(rng.normal(-2, 1, pools)))[::-1]
        theta[kin.fraction_index] = rng.dirichlet(np.ones(pools))
        if kin.lag_index is not None:
            theta[kin.lag_index] = 1.3
        if kin.growth_rate_index is not None:
            theta[kin.growth_rate_index] = 0.01
        y1, J1 = kin.evaluate(t, theta, jacobian=True)
        kin._one_switch = False
        try:
            y2, J2 = kin.evaluate(t, theta, jacobian=True)
        finally:
            kin._one_switch = True
        np.testing.assert_allclose(y1, y2, rtol=0, atol=1e-11)
        np.testing.assert_allclose(J1, J2, rtol=0, atol=1e-11)
        np.testing.assert_allclose(kin.evaluate(t, theta), y1, rtol=0, atol=0)
