"""The growth share: the part of the isotopic change carried by the growth flux.

Checks: the one-pool, exponential-growth closed form k_g/(k_g + k_d) (Hesslein et al. 1993,
journal details from memory), worked by hand; and, for a logistic growth curve and two
pools, the pools' ODEs dδ_i/dt = (k_i + k_g(t))(δ_in − δ_i) together with the growth-flux
integral ∫ k_g Σ f_i (δ_in − δ_i) dt integrated by scipy.integrate.solve_ivp (an
independent general-purpose solver).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import isoturnover as iso
from isoturnover import quantities


def _theta(kin, **values):
    th = np.zeros(kin.n_params)
    for name, v in values.items():
        th[kin.param_names.index(name)] = v
    return th


@pytest.mark.parametrize("T", [0.5, 10.0, 60.0, 400.0])
def test_one_pool_exponential_growth_is_kg_over_kg_plus_kd_at_every_time(T):
    # juvenile of the issue: k_g = 0.003/d, k_d = 0.022/d -> 0.003/0.025 = 0.12 (by hand)
    kin = iso.TurnoverModel(1, growth="exponential").kinetics
    th = _theta(kin, delta0=-25.0, delta_eq=-12.0, k1=0.022, f1=1.0, k_growth=0.003)
    assert quantities.growth_share_at(kin, T, th) == pytest.approx(0.12, rel=1e-8)
    inst = quantities.growth_share_instant(kin, [T], th)
    assert inst[0] == pytest.approx(0.12, rel=1e-12)


def test_share_does_not_grow_with_time_and_mass_gain():
    """The old counterfactual ratio tended to 1 with time; the flux share does not."""
    kin = iso.TurnoverModel(2, growth="exponential").kinetics
    th = _theta(kin, delta0=-25.0, delta_eq=-12.0, k1=0.3, k2=0.02, f1=0.4, f2=0.6,
                k_growth=0.003)
    shares = [quantities.growth_share_at(kin, T, th) for T in (1.0, 30.0, 300.0, 3000.0)]
    # bounded by the per-pool shares k_g/(k_g + k_i) (by hand: 0.0099 and 0.1304)
    assert all(0.003 / 0.303 <= s <= 0.003 / 0.023 for s in shares)
    assert quantities.growth_share_at(kin, 0.0, th) != quantities.growth_share_at(
        kin, 0.0, th)  # NaN at the switch


def test_logistic_growth_two_pools_against_ode_integration():
    g = iso.GrowthCurve("logistic", Winf=50.0, k=0.08, ti=20.0)
    kin = iso.TurnoverModel(2, growth=g).kinetics
    d_in, d0, k1, k2, f1 = -12.0, -25.0, 0.25, 0.015, 0.35
    th = _theta(kin, delta0=d0, delta_eq=d_in, k1=k1, k2=k2, f1=f1, f2=1 - f1)
    ks, fs = np.array([k1, k2]), np.array([f1, 1 - f1])

    def kg(t):  # d ln W/dt of the logistic, by hand: k (1 − W/Winf)
        return 0.08 / (1.0 + math.exp(0.08 * (t - 20.0)))

    def rhs(t, u):
        d = u[:2]
        dd = (ks + kg(t)) * (d_in - d)
        flux = kg(t) * float(fs @ (d_in - d))
        return np.r_[dd, flux]

    for T in (3.0, 25.0, 90.0):
        sol = solve_ivp(rhs, (0.0, T), [d0, d0, 0.0], method="DOP853", rtol=1e-12,
                        atol=1e-14)
        dT = sol.y[:2, -1]
        reference = sol.y[2, -1] / (float(fs @ dT) - d0)
        assert quantities.growth_share_at(kin, T, th) == pytest.approx(reference, rel=1e-8)
        # the instantaneous share: growth flux over the rate of change, from the same ODE
        flux_now = kg(T) * float(fs @ (d_in - dT))
        change_now = float(fs @ ((ks + kg(T)) * (d_in - dT)))
        inst = quantities.growth_share_instant(kin, [T], th)[0]
        assert inst == pytest.approx(flux_now / change_now, rel=1e-8)


def test_fast_pool_quadrature_stays_accurate():
    """A pool 1e3 times faster than the span: the panels near the switch resolve it."""
    g = iso.GrowthCurve("logistic", Winf=50.0, k=0.08, ti=20.0)
    kin = iso.TurnoverModel(2, growth=g).kinetics
    th = _theta(kin, delta0=-25.0, delta_eq=-12.0, k1=20.0, k2=0.05, f1=0.5, f2=0.5)
    ks, fs = np.array([20.0, 0.05]), np.array([0.5, 0.5])

    def kg(t):
        return 0.08 / (1.0 + math.exp(0.08 * (t - 20.0)))

    def rhs(t, u):
        d = u[:2]
        return np.r_[(ks + kg(t)) * (-12.0 - d), kg(t) * float(fs @ (-12.0 - d))]

    sol = solve_ivp(rhs, (0.0, 50.0), [-25.0, -25.0, 0.0], method="Radau", rtol=1e-12,
                    atol=1e-14)
    reference = sol.y[2, -1] / (float(fs @ sol.y[:2, -1]) + 25.0)
    assert quantities.growth_share_at(kin, 50.0, th) == pytest.approx(reference, rel=1e-7)
