"""The first diet's start: a diets table whose first diet began on a known date.

Animals moved onto the first diet shortly before the switch need not be at equilibrium with
it. With the value of the diet eaten before it (``previous=``) the model starts the tissue at
equilibrium with that earlier diet and follows the whole history; without it the model
assumes equilibrium with the first diet and a trust note says how many half-lives of the
slowest pool the first diet had been fed. Also the argument checks of the diet history and
of the atom-fraction scale (δ ≤ −1000 ‰ is a negative ratio).

The reference series are integrated here with scipy's ``solve_ivp`` (DOP853, rtol 1e-11) from
the pool equation dδ/dt = k (δ_in(t) − δ), piece by piece between the diet changes; all
numbers are invented.
"""

from __future__ import annotations

import math
import re
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy.integrate import solve_ivp

import isoturnover as iso
from isoturnover.diet import DietHistory
from isoturnover.errors import DataError
from isoturnover.kinetics import TurnoverKinetics

LN2 = math.log(2.0)
K_TRUE, SEP_TRUE = 0.05, 2.0  # one pool: half-life ln 2/0.05 = 13.9 d; separation 2 ‰
T = np.array([-20.0, -10.0, -1.0, 2, 4, 7, 10, 14, 21, 28, 42, 56, 70, 90])
TABLE = pd.DataFrame({"group": ["A", "A"], "isotope": ["d13C", "d13C"],
                      "start": [-30.0, 0.0], "value": [-26.0, -12.0]})


def ode_one_pool(t, changes, inputs, k, y0):
    """δ of one pool, dδ/dt = k (u_j − δ), from y0 at the first change (solve_ivp, DOP853)."""
    out = np.full(t.size, float(y0))
    y, edges = float(y0), list(changes) + [float(t.max())]
    for j in range(len(changes)):
        a, b = edges[j], edges[j + 1]
        for p in np.unique(np.append(t[(t > a) & (t <= b)], b)):
            if p <= a:
                continue
            sol = solve_ivp(lambda _t, d, u: k * (u - d), (a, p), [y], args=(inputs[j + 1],),
                            method="DOP853", rtol=1e-11, atol=1e-12)
            y, a = float(sol.y[0, -1]), p
            out[t == p] = y
    return out


def truth():
    # tissue at equilibrium with the earlier diet (−20 ‰) until t = −30, then −26, then −12
    levels = np.array([-20.0, -26.0, -12.0]) + SEP_TRUE
    return ode_one_pool(T, [-30.0, 0.0], levels, K_TRUE, levels[0])


def quiet(model, *args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", iso.IsoturnoverWarning)
        return model.fit(*args, **kwargs)


# ----------------------------------------------------------------------------------------
# The history keeps the first diet's start
# ----------------------------------------------------------------------------------------
def test_table_keeps_the_first_diets_start():
    d = DietHistory.from_table(TABLE)
    assert d.start == -30.0 and math.isnan(d.previous)
    assert d.switch_times.tolist() == [0.0] and d.initial == -26.0
    p = DietHistory.from_table(TABLE, previous=-20.0)
    assert p.start == -30.0 and p.previous == -20.0
    assert p != d and p == DietHistory.from_dict(p.to_dict())
    assert "from t=-30" in repr(p) and "previous=-20" in repr(p)
    # the table is not modified
    pd.testing.assert_frame_equal(TABLE, pd.DataFrame({
        "group": ["A", "A"], "isotope": ["d13C", "d13C"], "start": [-30.0, 0.0],
        "value": [-26.0, -12.0]}))


def test_previous_diet_solved_from_there():
    diet = DietHistory.from_table(TABLE, previous=-20.0)
    kin = TurnoverKinetics(1, diet=diet)
    # Independent source: scipy.integrate.solve_ivp of the pool equation (module docstring)
    np.testing.assert_allclose(kin.predict(T, [SEP_TRUE, K_TRUE, 1.0]), truth(), atol=1e-7)
    fit = quiet(iso.TurnoverModel(1, diet=diet), T, truth())
    assert fit.values["k1"] == pytest.approx(K_TRUE, rel=1e-6)
    assert fit.values["discrimination"] == pytest.approx(SEP_TRUE, abs=1e-6)
    assert "first_diet_start" not in [w.code for w in fit.warnings]
    # assuming equilibrium with the first diet cannot describe the same samples
    eq = quiet(iso.TurnoverModel(1, diet=DietHistory.from_table(TABLE)), T, truth())
    assert eq.rss > 1.0
    # the history survives the fit's record
    back = iso.load_fit(fit.to_dict())
    np.testing.assert_allclose(back.predict(T), fit.predict(T), atol=1e-12)
    assert back.model.diet == diet


def test_note_counts_half_lives_and_offers_free_start():
    model = iso.TurnoverModel(1, diet=DietHistory.from_table(TABLE))
    with pytest.warns(iso.DesignWarning, match="half-lives of the slowest pool"):
        fit = model.fit(T, truth())
    note = next(w for w in fit.warnings if w.code == "first_diet_start")
    assert note.category is iso.DesignWarning
    # fed from −30 to the switch at 0: 30 k / ln 2 half-lives (by hand)
    n = 30.0 * fit.values["k1"] / LN2
    assert n < 5
    assert f"fed for {n:.3g} half-lives of the slowest pool" in note.message
    assert "common practice: 5 half-lives ≈ 97 % equilibrated" in note.message
    assert 'initial="free"' in note.message and "previous=" in note.message
    assert note.message in str(fit.summary())


def test_note_after_many_half_lives_offers_no_free_start():
    table = TABLE.assign(start=[-400.0, 0.0])
    levels = np.array([-26.0, -12.0]) + SEP_TRUE
    y = ode_one_pool(T, [0.0], levels, K_TRUE, levels[0])  # at equilibrium (solve_ivp)
    fit = quiet(iso.TurnoverModel(1, diet=DietHistory.from_table(table)), T, y)
    note = next(w for w in fit.warnings if w.code == "first_diet_start")
    n = 400.0 * fit.values["k1"] / LN2  # by hand: 28.9 half-lives
    assert n == pytest.approx(400 * K_TRUE / LN2, rel=1e-6)
    assert f"fed for {n:.3g} half-lives" in note.message
    assert "initial=" not in note.message


def test_note_judges_by_the_incorporation_rate_with_growth():
    # exponential growth: the tissue approaches the first diet at k_d + k_g (Hesslein et al.
    # 1993), so the first diet was fed for 30 (k_d + k_g)/ln 2 half-lives (by hand)
    model = iso.TurnoverModel(1, diet=DietHistory.from_table(TABLE), growth="exponential")
    fit = quiet(model, T, truth(), fixed={"k_growth": 0.01})
    note = next(w for w in fit.warnings if w.code == "first_diet_start")
    n = 30.0 * (fit.values["k1"] + 0.01) / LN2
    assert f"fed for {n:.3g} half-lives" in note.message
    assert "k_d + k_g" in note.message


@pytest.mark.parametrize("diet, initial", [
    (DietHistory.from_table(TABLE, previous=-20.0), "equilibrium"),
    (DietHistory.from_table(TABLE), "free"),
    (DietHistory(-26.0, changes=[(0.0, -12.0)]), "equilibrium"),
])
def test_note_silent_when_the_start_is_modelled_or_unknown(diet, initial):
    fit = quiet(iso.TurnoverModel(1, diet=diet, initial=initial), T, truth())
    assert "first_diet_start" not in [w.code for w in fit.warnings]


def test_unknown_previous_is_the_equilibrium_model():
    # start known, earlier diet unknown: the same predictions as a history without a start
    a = TurnoverKinetics(2, diet=DietHistory.from_table(TABLE))
    b = TurnoverKinetics(2, diet=DietHistory(-26.0, changes=[(0.0, -12.0)]))
    theta = [2.0, 0.3, 0.03, 0.4, 0.6]
    assert a.param_names == b.param_names
    np.testing.assert_array_equal(a.predict(T, theta), b.predict(T, theta))


def test_fit_each_reads_the_start_from_the_diets_table():
    samples = pd.DataFrame({"subject": "G1", "group": "A", "tissue": "plasma",
                            "isotope": "d13C", "time": T, "value": truth()})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", iso.IsoturnoverWarning)
        fs = iso.fit_each(samples, diets=TABLE, pools=(1,))
    (fit,) = fs.chosen.values()
    assert "first_diet_start" in [w.code for w in fit.warnings]


# ----------------------------------------------------------------------------------------
# Argument checks
# ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("changes, got", [(None, "None"), (5, "int")])
def test_changes_must_be_a_sequence_of_pairs(changes, got):
    with pytest.raises(DataError, match=rf"'changes' must be a sequence of \(time, value\) "
                                        rf"pairs.*got {got}"):
        DietHistory(-27, changes)


@pytest.mark.parametrize("kwargs, match", [
    ({"start": 0.0}, r"'start' .* must come before the first change \(t = 0\); got 0"),
    ({"start": 5.0}, r"'start' .* must come before the first change"),
    ({"start": float("nan")}, r"'start' must be a finite number or None; got nan"),
    ({"start": "day -30"}, r"'start' must be a finite number or None; got 'day -30'"),
    ({"previous": -20.0}, r"'previous' \(the diet before the first\) needs 'start'"),
    ({"start": -30.0, "previous": "x"}, r"previous: diet value must be a number or None"),
])
def test_start_and_previous_checked(kwargs, match):
    with pytest.raises(DataError, match=match):
        DietHistory(-26.0, changes=[(0.0, -12.0)], **kwargs)


@pytest.mark.parametrize("diet, arg, value", [
    (DietHistory.step(-1500.0, 2000.0), "initial", "-1500"),
    (DietHistory(0.0, changes=[(0.0, 2000.0), (9.0, -1000.0)]), r"changes\[1\]", "-1000"),
    (DietHistory(0.0, changes=[(0.0, 2000.0)], start=-5.0, previous=-1200.0), "previous",
     "-1200"),
])
def test_atom_fraction_refuses_diets_with_a_negative_ratio(diet, arg, value):
    # R = R_std (1 + δ/1000) ≤ 0 for δ ≤ −1000 ‰ (Coplen 2011 definition of δ)
    with pytest.raises(DataError, match=rf"'diet' {arg}: .*{value}.* > -1000 ‰"):
        TurnoverKinetics(1, diet=diet, scale="atom_fraction", isotope="d15N")
    TurnoverKinetics(1, diet=diet)  # the δ scale has no such limit


def test_atom_fraction_refuses_values_and_levels_with_a_negative_ratio():
    kin = TurnoverKinetics(1, scale="atom_fraction", isotope="d15N")
    with pytest.raises(DataError, match=r"'y' must be > -1000 ‰ .* got -1200 at position 1"):
        kin.check_values(np.array([5.0, -1200.0, 30.0]), "y")
    kin.check_values(np.array([5.0, -999.0, np.nan]), "y")  # NaN is left to the data checks
    TurnoverKinetics(1).check_values(np.array([-1200.0]), "y")  # δ scale: no limit
    with pytest.raises(DataError, match=re.escape("'theta': on scale='atom_fraction' the "
                                                  "tissue level of diet period 0")):
        kin.predict([1.0], [-1500.0, 2000.0, 0.1, 1.0])


def test_atom_fraction_refuses_observed_values_with_a_negative_ratio():
    # an observed δ of −1000 ‰ or below implies R = R_std (1 + δ/1000) ≤ 0 (Coplen 2011)
    t = np.array([0.0, 1.0, 2.0, 4.0, 8.0, 16.0])
    y = np.array([-20.0, -18.0, -1000.0, -14.0, -13.0, -12.5])
    model = iso.TurnoverModel(1, scale="atom_fraction", isotope="d13C")
    with pytest.raises(DataError, match=r"'y'.*-1000"):
        model.fit(t, y)
