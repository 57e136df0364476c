"""Tests of isoturnover.plotpop: the forest plot of a population estimate.

Every number here is invented. Positions are read back from the drawn artists (found by their
``gid``) and compared with the estimate's own numbers.
"""

from __future__ import annotations

import math
import warnings

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402
from scipy import stats  # noqa: E402

import isoturnover as iso  # noqa: E402
from isoturnover.errors import DataError  # noqa: E402
from isoturnover.plotpop import plot_population  # noqa: E402

NAMES = ["G01", "G02", "G03", "G04", "G05", "G06", "G07", "G08"]
# invented half-lives (days) with 95 % intervals; G05's upper bound and G06's lower bound
# are open, G08 has no estimate
VALUES = [4.0, 5.5, 6.1, 3.2, 12.0, 5.0, 7.5, np.nan]
LOWERS = [3.1, 4.2, 5.0, 2.5, 8.0, 0.0, 6.2, np.nan]
UPPERS = [5.2, 7.1, 7.6, 4.1, np.inf, 6.0, 9.4, np.nan]


@pytest.fixture(autouse=True)
def _close_figures():
    yield
    plt.close("all")


def _closed():
    """Five animals, every interval closed."""
    return iso.population_estimate(VALUES[:4] + [VALUES[6]], LOWERS[:4] + [LOWERS[6]],
                                   UPPERS[:4] + [UPPERS[6]],
                                   names=NAMES[:4] + [NAMES[6]])


def _with_left_out():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", iso.DataWarning)
        return iso.population_estimate(VALUES, LOWERS, UPPERS, names=NAMES)


def _artist(ax, gid):
    found = [a for a in ax.get_children() if a.get_gid() == gid]
    assert len(found) == 1, f"expected one artist {gid!r}, found {len(found)}"
    return found[0]


def _rows(ax):
    """Tick label text → y position."""
    return {t.get_text(): y for t, y in zip(ax.get_yticklabels(), ax.get_yticks())}


def test_positions_equal_the_estimates_numbers():
    pop = _closed()
    ax = plot_population(pop, time_unit="d")
    rows = _rows(ax)
    a = pop.animals().set_index("name")
    # animals sorted by estimate, smallest at the top (y = 0): G04 3.2, G01 4.0, G02 5.5, ...
    assert [t.get_text() for t in ax.get_yticklabels()][:5] == ["G04", "G01", "G02", "G03",
                                                                 "G07"]
    pts = _artist(ax, "animals").get_offsets()
    for x, y in np.asarray(pts):
        name = next(n for n, yy in rows.items() if yy == y)
        assert x == pytest.approx(a.loc[name, "value"], rel=1e-12)  # the given value
    # every interval line from the value to the given bound (numbers above, by hand)
    segs = _artist(ax, "intervals").get_segments()
    ends = {(round(float(s[0][1]), 6), round(float(s[1][0]), 9)) for s in segs}
    for name in a.index:
        y = round(float(rows[name]), 6)
        assert (y, round(a.loc[name, "lower"], 9)) in ends
        assert (y, round(a.loc[name, "upper"], 9)) in ends
    # the diamond spans the pooled interval, its tip at the estimate
    xy = _artist(ax, "pooled").get_xy()
    assert xy[:, 0].min() == pytest.approx(pop.lower, rel=1e-12)
    assert xy[:, 0].max() == pytest.approx(pop.upper, rel=1e-12)
    assert xy[1, 0] == pytest.approx(pop.estimate, rel=1e-12)
    # the prediction bar: exp(mu +- t_{k-2} sqrt(tau2 + SE^2)), Higgins et al. (2009), by hand
    m = pop.model
    half = stats.t.ppf(0.975, m.k - 2) * math.sqrt(m.tau2 + m.stderr ** 2)
    bar = _artist(ax, "prediction")
    assert bar.get_x() == pytest.approx(math.exp(m.estimate - half), rel=1e-9)
    assert bar.get_x() + bar.get_width() == pytest.approx(math.exp(m.estimate + half),
                                                          rel=1e-9)
    # the prediction interval is wider than the confidence interval on both sides
    assert bar.get_x() < pop.lower and bar.get_x() + bar.get_width() > pop.upper
    assert bar.get_width() > pop.upper - pop.lower
    assert ax.get_xscale() == "log"
    assert ax.get_xlabel() == "Half-life (days)"
    # tau2 and I2 of the model, formatted as in the corner note
    note = _artist(ax, "note").get_text()
    assert f"τ² = {m.tau2:.3g}" in note and f"I² = {100 * m.i2:.0f} %" in note
    assert "k = 5 animals" in note


def test_open_bounds_are_arrows_and_left_out_animals_are_named():
    pop = _with_left_out()
    ax = plot_population(pop, time_unit="d")
    rows = _rows(ax)
    x_lo, x_hi = ax.get_xlim()
    # G05's open upper bound: an arrowhead at the right edge (axes x = 1) on its row
    up = np.asarray(_artist(ax, "open-upper").get_offsets())
    assert up.tolist() == [[1.0, rows["G05"]]]
    assert _artist(ax, "open-upper").get_transform() != ax.transData
    lo = np.asarray(_artist(ax, "open-lower").get_offsets())
    assert lo.tolist() == [[0.0, rows["G06"]]]
    # their lines run from the value to the axis limits
    segs = [np.asarray(s) for s in _artist(ax, "intervals").get_segments()]
    assert any(s[0, 1] == rows["G05"] and s[0, 0] == 12.0 and s[1, 0] == x_hi for s in segs)
    assert any(s[0, 1] == rows["G06"] and s[0, 0] == 5.0 and s[1, 0] == x_lo for s in segs)
    # the left-out animals drawn hollow at their values; G08 (no value) only in the note
    out = np.asarray(_artist(ax, "left-out").get_offsets())
    assert sorted(map(tuple, out.tolist())) == sorted([(12.0, rows["G05"]),
                                                       (5.0, rows["G06"])])
    assert "G08" not in rows
    note = " ".join(_artist(ax, "left-out-note").get_text().split())
    for name, reason in (("G05", "upper bound open"), ("G06", "lower bound open"),
                         ("G08", "no estimate")):
        assert f"{name} ({reason})" in note
    # only the five closed animals are pooled (weights from population_estimate)
    assert len(_artist(ax, "animals").get_offsets()) == 5 == pop.k
    assert "k = 5 animals" in _artist(ax, "note").get_text()
    ax.figure.canvas.draw()  # the figure lays out and renders


def test_sort_false_keeps_order_and_given_axes_is_used():
    pop = _closed()
    fig, ax0 = plt.subplots()
    ax = plot_population(pop, ax0, sort=False)
    assert ax is ax0
    assert [t.get_text() for t in ax.get_yticklabels()][:5] == ["G01", "G02", "G03", "G04",
                                                                 "G07"]
    assert ax.get_xlabel() == "Half-life"  # no unit given: none named


def test_random_effects_on_a_linear_axis():
    # invented log half-lives and standard errors
    y = np.array([1.2, 1.5, 1.9, 1.4, 1.7, -0.1])
    se = np.array([0.1, 0.2, 0.15, 0.12, 0.25, 0.3])
    re = iso.random_effects(y, se, names=list("abcdef"))
    with pytest.raises(DataError, match="'log'"):
        plot_population(re)
    ax = plot_population(re, log=False)
    assert ax.get_xscale() == "linear"
    rows = _rows(ax)
    # the normal interval y +- z se (z from scipy) of animal "c"
    z = stats.norm.ppf(0.975)
    ends = [float(np.asarray(s)[1, 0]) for s in _artist(ax, "intervals").get_segments()
            if float(np.asarray(s)[0, 1]) == rows["c"]]
    assert sorted(ends) == pytest.approx([1.9 - z * 0.15, 1.9 + z * 0.15], rel=1e-12)
    xy = _artist(ax, "pooled").get_xy()
    assert xy[1, 0] == pytest.approx(re.estimate, rel=1e-12)
    assert ax.get_xlabel() == "Estimate"


def test_fitset_names_drop_the_parts_every_animal_shares():
    pop = iso.population_estimate([4.0, 5.0, 6.0], [3.0, 4.0, 5.0], [5.0, 6.5, 7.0],
                                  names=[("G01", "plasma", "d15N"), ("G02", "plasma", "d15N"),
                                         ("G03", "plasma", "d15N")])
    ax = plot_population(pop)
    assert [t.get_text() for t in ax.get_yticklabels()][:3] == ["G01", "G02", "G03"]


def test_two_animals_have_no_prediction_interval():
    pop = iso.population_estimate([4.0, 5.0], [3.0, 4.0], [5.0, 6.5])
    ax = plot_population(pop)
    assert not [a for a in ax.get_children() if a.get_gid() == "prediction"]
    assert "no PI" in _artist(ax, "note").get_text()


def test_bad_arguments_raise_data_error_and_nothing_is_mutated():
    pop = _with_left_out()
    given = pop.given.copy()
    with pytest.raises(DataError, match="'pop'"):
        plot_population(pd.DataFrame({"a": [1]}))
    with pytest.raises(DataError, match="'sort'"):
        plot_population(pop, sort="yes")
    with pytest.raises(DataError, match="'time_unit'"):
        plot_population(pop, time_unit=1)
    with pytest.raises(DataError, match="'ax'"):
        plot_population(pop, ax="axes")
    mods = pd.DataFrame({"mass": [20.0, 25.0, 30.0, 28.0, 35.0]})
    reg = iso.population_estimate(VALUES[:4] + [VALUES[6]], LOWERS[:4] + [LOWERS[6]],
                                  UPPERS[:4] + [UPPERS[6]], moderators=mods)
    with pytest.raises(DataError, match="meta-regression"):
        plot_population(reg)
    plot_population(pop)
    pd.testing.assert_frame_equal(pop.given, given)
