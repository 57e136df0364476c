"""Tests of isoturnover.plotting.

Every series here is invented: simulated from the model with fixed seeds.
"""

from __future__ import annotations

import math

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402
from matplotlib.axes import Axes  # noqa: E402
from matplotlib.collections import PolyCollection  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402

import isoturnover as iso  # noqa: E402
from isoturnover import fit_growth  # noqa: E402
from isoturnover import plotting as P  # noqa: E402
from isoturnover.uncertainty import band as unc_band  # noqa: E402

LN2 = math.log(2.0)
D0, DEQ = -24.0, -12.0
T = np.array([0, 1, 2, 4, 7, 10, 14, 21, 28, 35, 42, 56.0])


def one_pool_data(seed=1, k=0.1, outlier=True):
    rng = np.random.default_rng(seed)
    y = DEQ + (D0 - DEQ) * np.exp(-k * T) + rng.normal(0, 0.2, T.size)
    if outlier:
        y[5] += 1.5  # invented outlier at t = 10 d
    return T.copy(), y


@pytest.fixture(scope="module")
def fit1():
    t, y = one_pool_data()
    return iso.TurnoverModel(1, isotope="d13C").fit(t, y, warn=False)


@pytest.fixture(scope="module")
def fit2():
    # two pools, half-lives 3 and 30 d, fractions 0.4 / 0.6, analytic sd 0.15 per point
    rng = np.random.default_rng(3)
    t = np.array([0, 0.5, 1, 2, 3, 4, 6, 8, 10, 14, 18, 22, 28, 35, 42, 50, 60, 70, 80, 90.0])
    u = 0.4 * np.exp(-LN2 / 3 * t) + 0.6 * np.exp(-LN2 / 30 * t)
    y = DEQ + (D0 - DEQ) * u + rng.normal(0, 0.15, t.size)
    return iso.TurnoverModel(2, isotope="d15N").fit(t, y, np.full(t.size, 0.15), warn=False)


@pytest.fixture(scope="module")
def fit_diet():
    # switch at 0 to a C4 diet, back at 60 d; one sample before the first switch
    d = iso.DietHistory(-26.0, changes=[(0.0, -12.0), (60.0, -26.0)], isotope="d13C")
    m = iso.TurnoverModel(1, diet=d)
    t = np.array([-5, 0, 2, 5, 10, 15, 20, 30, 40, 50, 60, 62, 65, 70, 80, 90, 100, 120.0])
    rng = np.random.default_rng(5)
    y = m.kinetics.evaluate(t, np.array([1.5, 0.08, 1.0])) + rng.normal(0, 0.2, t.size)
    return m.fit(t, y, warn=False)


@pytest.fixture(scope="module")
def growth_pair():
    rng = np.random.default_rng(7)
    tm = np.linspace(0, 90, 12)
    mass = 80 / (1 + np.exp(-0.07 * (tm - 39))) * np.exp(rng.normal(0, 0.03, tm.size))
    g = fit_growth(tm, mass, curve="logistic")
    m = iso.TurnoverModel(1, growth=g)
    t = np.array([0, 1, 2, 4, 7, 10, 14, 21, 28, 35, 42, 56, 70, 90.0])
    theta = np.concatenate([[D0, DEQ, 0.02, 1.0], g.values])
    y = m.kinetics.evaluate(t, theta) + rng.normal(0, 0.15, t.size)
    return g, m.fit(t, y, warn=False)


@pytest.fixture(scope="module")
def fitset():
    rng = np.random.default_rng(11)
    rows = []
    for subj, k in (("A", 0.1), ("B", 0.05)):
        y = DEQ + (D0 - DEQ) * np.exp(-k * T) + rng.normal(0, 0.2, T.size)
        rows += [{"subject": subj, "tissue": "plasma", "isotope": "d13C", "time": a,
                  "value": b} for a, b in zip(T, y)]
    rows += [{"subject": "C", "tissue": "plasma", "isotope": "d13C", "time": a, "value": b}
             for a, b in zip([0.0, 5.0], [-24.0, -20.0])]
    return iso.fit_each(pd.DataFrame(rows), pools=(1, 2))


@pytest.fixture(autouse=True)
def _rc_unchanged():
    """Every test: matplotlib's global style is the same before and after; figures closed."""
    before = dict(matplotlib.rcParams)
    yield
    after = dict(matplotlib.rcParams)
    changed = sorted(k for k in before if before[k] != after.get(k))
    plt.close("all")
    assert changed == []


def _label_of(ax, prefix):
    handles, labels = ax.get_legend_handles_labels()
    return [h for h, lab in zip(handles, labels) if lab.startswith(prefix)]


# ----------------------------------------------------------------------------------------
# labels
# ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("code, expected", [
    # scales of the international standards: δ13C VPDB, δ15N AIR, δ34S VCDT, δ2H and δ18O
    # VSMOW (Coplen 2011, Rapid Commun. Mass Spectrom. 25:2538-2560)
    ("d13C", "δ¹³C (‰, VPDB)"),
    ("d15N", "δ¹⁵N (‰, AIR)"),
    ("d34S", "δ³⁴S (‰, VCDT)"),
    ("d2H", "δ²H (‰, VSMOW)"),
    ("d18O", "δ¹⁸O (‰, VSMOW)"),
])
def test_delta_label_names_scale(code, expected):
    assert P.delta_label(code) == expected


def test_delta_label_generic_and_unknown():
    assert P.delta_label(None) == "δ (‰)"
    with pytest.raises(iso.DataError, match=r"'isotope' must be one of .*got 'd99X'"):
        P.delta_label("d99X")


def test_okabe_ito_palette_values():
    # Okabe & Ito 2008, Color Universal Design: the eight colours as published in hex
    assert P.OKABE_ITO == {
        "black": "#000000", "orange": "#E69F00", "sky_blue": "#56B4E9",
        "bluish_green": "#009E73", "yellow": "#F0E442", "blue": "#0072B2",
        "vermillion": "#D55E00", "reddish_purple": "#CC79A7"}


# ----------------------------------------------------------------------------------------
# every function: returns an Axes, draws on a given one, labels with units
# ----------------------------------------------------------------------------------------
def _calls(fit1, fit2, growth_pair, fitset):
    g, fg = growth_pair
    return {
        "fit": lambda ax=None: P.plot_fit(fit1, ax),
        "residuals": lambda ax=None: P.plot_residuals(fit1, ax),
        "residuals_raw": lambda ax=None: P.plot_residuals(fit1, ax, studentized=False),
        "progress": lambda ax=None: P.plot_progress(fit2, ax),
        "pools": lambda ax=None: P.plot_pools(fit2, ax),
        "growth": lambda ax=None: P.plot_growth(g, ax, turnover_fit=fg, mass_unit="g"),
        "weights": lambda ax=None: P.plot_weights(fitset, ax),
    }


@pytest.mark.parametrize("name", ["fit", "residuals", "residuals_raw", "progress", "pools",
                                  "growth", "weights"])
def test_returns_axes_and_uses_given_ax(name, fit1, fit2, growth_pair, fitset):
    calls = _calls(fit1, fit2, growth_pair, fitset)
    ax = calls[name]()
    assert isinstance(ax, Axes)
    w, h = ax.figure.get_size_inches()
    assert w == pytest.approx(3.5) and 1.0 < h < 4.0  # print size: one journal column
    n_figs = len(plt.get_fignums())
    fig = Figure(figsize=(4, 3))  # an Axes not made through pyplot
    given = fig.add_subplot()
    out = calls[name](given)
    assert out is given
    assert len(plt.get_fignums()) == n_figs  # no new figure when an Axes is given
    assert given.lines or given.patches or given.collections


def test_fit_labels_units_and_permil(fit1, fit2):
    ax = P.plot_fit(fit1)
    assert ax.get_ylabel() == "Tissue δ¹³C (‰, VPDB)"
    assert ax.get_xlabel() == "Time since diet switch (days)"
    ax = P.plot_fit(fit2)
    assert "δ¹⁵N (‰, AIR)" in ax.get_ylabel()
    raw = P.plot_residuals(fit1, studentized=False)
    assert "‰" in raw.get_ylabel() and "days" in raw.get_xlabel()
    assert "days" in P.plot_residuals(fit1).get_xlabel()
    assert "days" in P.plot_progress(fit1).get_xlabel()
    assert "days" in P.plot_pools(fit2).get_xlabel()


def test_time_unit_hours_reaches_labels():
    # breath CO2 sampled in hours (invented)
    t = np.array([0, 0.5, 1, 2, 3, 4, 6, 8, 12, 16, 24.0])
    y = DEQ + (D0 - DEQ) * np.exp(-0.3 * t) + np.random.default_rng(2).normal(0, 0.1, t.size)
    f = iso.TurnoverModel(1).fit(t, y, time_unit="h", warn=False)
    for ax in (P.plot_fit(f), P.plot_residuals(f), P.plot_progress(f), P.plot_pools(f)):
        assert "(hours)" in ax.get_xlabel()
    assert P.plot_fit(f).get_ylabel() == "Tissue δ (‰)"  # no isotope given: generic δ


def test_tissue_from_frame_in_label(fitset):
    f = fitset[("A", "plasma", "d13C")].best
    assert P.plot_fit(f).get_ylabel() == "Plasma δ¹³C (‰, VPDB)"


# ----------------------------------------------------------------------------------------
# plot_fit
# ----------------------------------------------------------------------------------------
def test_fit_draws_data_curve_band_switch(fit2):
    ax = P.plot_fit(fit2, level=0.9)
    # data with error bars = the fit's sigma
    (eb,) = [c for c in ax.containers if c.get_label() == "data"]
    x, y = eb.lines[0].get_data()
    np.testing.assert_allclose(x, fit2.t)
    np.testing.assert_allclose(y, fit2.y)
    seg = eb.lines[2][0].get_segments()
    np.testing.assert_allclose([s[1, 1] - s[0, 1] for s in seg], 2 * fit2.sigma)
    # curve equals predict on its grid
    (curve,) = _label_of(ax, "fitted")
    gx, gy = curve.get_data()
    assert gx.size >= 400
    np.testing.assert_allclose(gy, fit2.predict(gx))
    # band: the polygon spans exactly the band of isoturnover.uncertainty at level 0.9
    (poly,) = [c for c in ax.collections if isinstance(c, PolyCollection)]
    assert poly.get_label() == "90 % confidence band"
    b = unc_band(fit2, gx, level=0.9, kind="confidence")
    verts = poly.get_paths()[0].vertices
    assert verts[:, 1].min() == pytest.approx(float(b["lower"].min()))
    assert verts[:, 1].max() == pytest.approx(float(b["upper"].max()))
    # diet switch at t = 0
    (sw,) = _label_of(ax, "diet switch")
    assert list(sw.get_xdata()) == [0.0, 0.0]


def test_fit_marks_flagged_points(fit1):
    infl = fit1.influence()
    assert infl["flagged"].sum() >= 1  # the invented outlier at t = 10 is flagged
    ax = P.plot_fit(fit1)
    (fl,) = _label_of(ax, "flagged")
    pts = fl.get_offsets()
    sel = infl[infl["flagged"]]
    np.testing.assert_allclose(pts[:, 0], sel["time"])
    np.testing.assert_allclose(pts[:, 1], sel["value"])
    assert not _label_of(P.plot_fit(fit1, show_flagged=False), "flagged")
    # the flagged points stay among the data, too
    (eb,) = [c for c in ax.containers if c.get_label() == "data"]
    assert eb.lines[0].get_xdata().size == fit1.nobs


def test_fit_legend_does_not_cover_data(fit1, fit2, fit_diet):
    for f in (fit1, fit2, fit_diet):
        ax = P.plot_fit(f)
        ax.figure.draw_without_rendering()
        bb = ax.get_legend().get_window_extent()
        pts = ax.transData.transform(np.column_stack([f.t, f.y]))
        inside = ((pts[:, 0] > bb.x0) & (pts[:, 0] < bb.x1) & (pts[:, 1] > bb.y0)
                  & (pts[:, 1] < bb.y1))
        assert not inside.any()


def test_fit_options_and_overlay(fit1, fit2):
    fig, ax = plt.subplots()
    P.plot_fit(fit1, ax, band=False, show_switches=False, color="#D55E00", label="goat 1")
    P.plot_fit(fit2, ax, band=False, color="#009E73", label="goat 2")
    labels = ax.get_legend_handles_labels()[1]
    assert "goat 1" in labels and "goat 1: fitted" in labels and "goat 2: fitted" in labels
    assert not [c for c in ax.collections if isinstance(c, PolyCollection)]


def test_fit_diet_history_switch_lines(fit_diet):
    ax = P.plot_fit(fit_diet)
    xs = sorted(ln.get_xdata()[0] for ln in ax.get_lines() if ln.get_linestyle() == "--")
    assert xs == [0.0, 60.0]
    assert ax.get_xlabel() == "Time since first diet switch (days)"


def test_fit_bad_input(fit1):
    with pytest.raises(iso.DataError, match="'fit' must be a TurnoverFit"):
        P.plot_fit({"k1": 0.1})
    with pytest.raises(iso.DataError, match="'level' must be between 0 and 1"):
        P.plot_fit(fit1, level=95)
    with pytest.raises(iso.DataError, match="'ax' must be a matplotlib Axes"):
        P.plot_fit(fit1, ax="left")


# ----------------------------------------------------------------------------------------
# plot_residuals
# ----------------------------------------------------------------------------------------
def test_residuals_studentized_and_guides(fit1):
    ax = P.plot_residuals(fit1)
    (pts,) = _label_of(ax, "residual")
    np.testing.assert_allclose(pts.get_ydata(), fit1.influence()["studentized"])
    hlines = sorted(ln.get_ydata()[0] for ln in ax.get_lines()
                    if np.ptp(ln.get_ydata()) == 0 and ln.get_xdata()[0] == 0)
    assert hlines == [-3, -2, 0, 2, 3]
    assert _label_of(ax, "flagged")


def test_residuals_raw_guides_scale_with_sigma(fit2):
    ax = P.plot_residuals(fit2, studentized=False)
    (pts,) = _label_of(ax, "residual")
    np.testing.assert_allclose(pts.get_ydata(), fit2.y - fit2.predict(fit2.t))
    (g2,) = _label_of(ax, "±2")
    s = math.sqrt(fit2.s2)
    np.testing.assert_allclose(g2.get_ydata(), 2 * s * fit2.sigma)
    with pytest.raises(iso.DataError, match="'studentized' must be True or False"):
        P.plot_residuals(fit2, studentized="yes")


# ----------------------------------------------------------------------------------------
# plot_progress
# ----------------------------------------------------------------------------------------
def test_progress_one_pool_is_a_straight_line(fit1):
    ax = P.plot_progress(fit1)
    (curve,) = _label_of(ax, "fit")
    x, y = curve.get_data()
    # one pool: ln(1 - F) = -k t exactly (Cerling et al. 2007, eq. for a single pool)
    np.testing.assert_allclose(y, -fit1.values["k1"] * x, atol=1e-10)
    assert ax.get_ylabel() == "ln(1 − F)"


def test_progress_two_pools_curve_by_hand(fit2):
    ax = P.plot_progress(fit2)
    (curve,) = _label_of(ax, "fit")
    x, y = curve.get_data()
    v = fit2.values
    by_hand = np.log(v["f1"] * np.exp(-v["k1"] * x) + v["f2"] * np.exp(-v["k2"] * x))
    np.testing.assert_allclose(y, by_hand, atol=1e-10)
    # data: ln((y - deq)/(d0 - deq)) with the fitted end values, worked here by hand
    (eb,) = [c for c in ax.containers if c.get_label() == "data"]
    px, py = eb.lines[0].get_data()
    u = (fit2.y - v["delta_eq"]) / (v["delta0"] - v["delta_eq"])
    ok = (u > 0) & (u < 1)
    np.testing.assert_allclose(px, fit2.t[ok])
    np.testing.assert_allclose(py, np.log(u[ok]))


def test_progress_axis_follows_the_data_and_line_stays_inside():
    # Invented series: half-life 3 d, sampled to 98 d, so the plateau is reached early and
    # the fitted ln(1 - F) = -k t runs to about -23 while the noisy points stop near -5.
    rng = np.random.default_rng(11)
    t = np.array([0, 0.5, 1, 2, 3, 4, 6, 8, 12, 20, 30, 45, 60, 80, 98.0])
    k = math.log(2) / 3.0
    y = -12.0 - 13.0 * np.exp(-k * t) + rng.normal(0, 0.05, t.size)
    f = iso.TurnoverModel(1).fit(t, y, warn=False)
    ax = P.plot_progress(f)
    ax.figure.draw_without_rendering()
    (eb,) = [c for c in ax.containers if c.get_label() == "data"]
    lowest = float(np.min(eb.lines[0].get_data()[1]))
    # the axis is set by the points, not by the curve's far end
    curve_end = -f.values["k1"] * t.max()
    assert 2 * lowest > curve_end  # the crafted case: the curve ends far below the points
    bottom, top = ax.get_ylim()
    assert curve_end < 2 * lowest < bottom < lowest
    # the fitted line stays inside the axis: it stops where it reaches the lower edge
    (curve,) = _label_of(ax, "fit")
    cy = curve.get_ydata()
    assert np.nanmin(cy) >= bottom - 0.02 * (top - bottom)
    # ... and it is still the straight line -k t there (one pool)
    np.testing.assert_allclose(cy, -f.values["k1"] * curve.get_xdata(), atol=1e-10)
    # the end values are written above the panel, never over the data
    assert "δ$_0$ = −24.96 ‰" in ax.get_title(loc="right")  # the fitted delta0, 2 decimals
    assert f"{f.values['delta0']:.2f}".replace("-", "−") == "−24.96"
    assert not [c for c in ax.texts if "δ" in c.get_text()]
    plt.close(ax.figure)


def test_progress_points_below_the_axis_marked_with_a_count():
    # Invented one-pool series (half-life 5 d, sd 0.1 ‰) sampled well into the plateau: the
    # late points are closer to δ_eq than their sd, so ln(1 - F) is noise (sd_log > 1).
    rng = np.random.default_rng(23)
    t = np.array([0, 1, 2, 3, 5, 7, 10, 14, 20, 28, 40, 55, 70, 85, 100, 120.0])
    k = math.log(2) / 5.0
    y = -12.0 - 10.0 * np.exp(-k * t) + rng.normal(0, 0.1, t.size)
    f = iso.TurnoverModel(1).fit(t, y, np.full(t.size, 0.1), warn=False)
    ax = P.plot_progress(f)
    ax.figure.draw_without_rendering()
    bottom, top = ax.get_ylim()
    v = f.values
    # ln(1 - F) of every point by hand, with the fitted end values (Cerling et al. 2007)
    u = (f.y - v["delta_eq"]) / (v["delta0"] - v["delta_eq"])
    with np.errstate(divide="ignore", invalid="ignore"):
        lv = np.where(u > 0, np.log(np.where(u > 0, u, 1.0)), np.nan)
    fin = (u > 0) & (u < 1)
    below = fin & (lv < bottom)
    assert below.sum() >= 1  # the crafted case has finite points below the axis
    (mark,) = _label_of(ax, "below the axis")
    assert mark.get_label() == f"below the axis (n = {int(below.sum())})"
    np.testing.assert_allclose(np.sort(mark.get_xdata()), np.sort(f.t[below]))
    disp = mark.get_transform().transform(np.column_stack([mark.get_xdata(),
                                                           mark.get_ydata()]))
    np.testing.assert_allclose(ax.transAxes.inverted().transform(disp)[:, 1], 0.03)
    # the points drawn as data are the finite ones inside the axis; none is clipped
    (eb,) = [c for c in ax.containers if c.get_label() == "data"]
    px, py = eb.lines[0].get_data()
    np.testing.assert_allclose(px, f.t[fin & ~below])
    assert np.all((py >= bottom) & (py <= top))
    (past,) = _label_of(ax, "F ≥ 1")
    assert past.get_xdata().size == np.sum(u <= 0)
    assert not _label_of(ax, "F ≤ 0") and not np.any(u >= 1)
    assert px.size + below.sum() + np.sum(u <= 0) == f.nobs  # nothing dropped
    # the points below the axis are those whose change to come is within their sd (0.1 ‰)
    assert np.all(np.abs(f.y[below] - v["delta_eq"]) <= 0.1)
    (curve,) = _label_of(ax, "fit")
    assert np.nanmin(curve.get_ydata()) >= bottom - 1e-9
    plt.close(ax.figure)


def test_progress_flagged_points_at_edge_not_dropped():
    # late samples scatter around the plateau: some lie past it (F >= 1)
    rng = np.random.default_rng(4)
    t = np.array([0, 1, 2, 4, 7, 10, 14, 21, 28, 35, 42, 56, 70, 84, 98.0])
    y = DEQ + (D0 - DEQ) * np.exp(-0.15 * t) + rng.normal(0, 0.25, t.size)
    f = iso.TurnoverModel(1).fit(t, y, warn=False)
    v = f.values
    u = (f.y - v["delta_eq"]) / (v["delta0"] - v["delta_eq"])
    past, before = u <= 0, u >= 1
    assert past.sum() >= 2
    ax = P.plot_progress(f)
    (mark,) = _label_of(ax, "F ≥ 1")
    np.testing.assert_allclose(mark.get_xdata(), f.t[past])
    # drawn at the lower edge, in axes coordinates
    disp = mark.get_transform().transform(np.column_stack([mark.get_xdata(),
                                                           mark.get_ydata()]))
    ax_y = ax.transAxes.inverted().transform(disp)[:, 1]
    np.testing.assert_allclose(ax_y, 0.03)
    assert f"(n = {int(past.sum())})" in mark.get_label()
    (eb,) = [c for c in ax.containers if c.get_label() == "data"]
    shown = eb.lines[0].get_xdata().size + past.sum() + before.sum()
    below = _label_of(ax, "below the axis")
    shown += below[0].get_xdata().size if below else 0
    assert shown == f.nobs  # nothing dropped
    assert "no ln(1 − F)" in mark.get_label()


def test_progress_diet_history_window(fit_diet):
    ax = P.plot_progress(fit_diet)
    L = fit_diet.kinetics.levels(np.array(list(fit_diet.values.values())))
    (eb,) = [c for c in ax.containers if c.get_label() == "data"]
    px, py = eb.lines[0].get_data()
    # a sample taken on the day of the second switch still reflects the first diet
    inside = (fit_diet.t >= 0) & (fit_diet.t <= 60)
    u = (fit_diet.y[inside] - L[1]) / (L[0] - L[1])
    ok = (u > 0) & (u < 1)
    below = _label_of(ax, "below the axis")
    bx = below[0].get_xdata() if below else np.array([])
    # every sample of the window with a ln(1 - F) is drawn: as a point or as an edge mark
    np.testing.assert_allclose(np.sort(np.concatenate([px, bx])), fit_diet.t[inside][ok])
    drawn = np.isin(fit_diet.t[inside][ok], px)
    np.testing.assert_allclose(py, np.log(u[ok][drawn]))
    title = ax.get_title(loc="right")
    assert "1 point before the switch" in title
    assert "7 points after the 2nd switch" in title
    assert "‰" in title


def test_progress_without_samples_after_switch():
    d = iso.DietHistory(-26.0, changes=[(50.0, -12.0)])
    m = iso.TurnoverModel(1, diet=d)
    t = np.array([0, 10, 20, 30, 40, 45.0, 60, 70, 80])
    y = m.kinetics.evaluate(t, np.array([1.5, 0.1, 1.0])) + np.linspace(0, 0.1, t.size)
    f = m.fit(t, y, warn=False)
    sub = iso.TurnoverModel(1, diet=d).fit(t[:6], y[:6] + np.arange(6) * 0.01, warn=False,
                                           fixed={"k1": 0.1})
    assert P.plot_progress(f)  # has samples after t = 50
    with pytest.raises(iso.DataError, match="no sample between the first switch"):
        P.plot_progress(sub)


# ----------------------------------------------------------------------------------------
# plot_pools
# ----------------------------------------------------------------------------------------
def test_pools_parts_and_sum_by_hand(fit2):
    ax = P.plot_pools(fit2)
    v = fit2.values
    p1, p2 = _label_of(ax, "pool 1")[0], _label_of(ax, "pool 2")[0]
    x = p1.get_xdata()
    np.testing.assert_allclose(p1.get_ydata(), v["f1"] * np.exp(-v["k1"] * x))
    np.testing.assert_allclose(p2.get_ydata(), v["f2"] * np.exp(-v["k2"] * x))
    (tot,) = _label_of(ax, "sum")
    np.testing.assert_allclose(tot.get_ydata(), p1.get_ydata() + p2.get_ydata())
    hl = LN2 / v["k1"]
    assert f"t½ = {hl:.3g} days" in p1.get_label()
    assert x.max() == pytest.approx(fit2.t.max())
    assert P.plot_pools(fit2, t_max=200).get_lines()[0].get_xdata().max() == 200
    with pytest.raises(iso.DataError, match="'t_max' must be a positive number; got -1"):
        P.plot_pools(fit2, t_max=-1)


def test_pools_with_growth_curve_sum_is_model(growth_pair):
    _, fg = growth_pair
    ax = P.plot_pools(fg)
    (p1,) = _label_of(ax, "pool 1")
    x = p1.get_xdata()
    v = fg.values
    # one pool: 1 - F = (delta(t) - delta_eq)/(delta0 - delta_eq) of the fitted model
    np.testing.assert_allclose(p1.get_ydata(),
                               (fg.predict(x) - v["delta_eq"]) / (v["delta0"] - v["delta_eq"]),
                               atol=1e-10)
    assert ax.get_legend().get_title().get_text() == "catabolic half-lives"


def test_pools_chain():
    t = np.array([0, 1, 2, 3, 4, 6, 8, 10, 14, 18, 22, 28, 35, 42, 50, 60, 70, 80, 90.0])
    u = iso.kinetics.remaining_chain(t, 0.3, 0.05)
    y = DEQ + (D0 - DEQ) * u + np.random.default_rng(8).normal(0, 0.1, t.size)
    f = iso.TurnoverModel(structure="chain").fit(t, y, warn=False)
    ax = P.plot_pools(f)
    (c,) = _label_of(ax, "chain")
    k1, k2 = f.values["k1"], f.values["k2"]
    x = c.get_xdata()
    # chain response written out (DESIGN: (ka e^-kb t - kb e^-ka t)/(ka - kb))
    np.testing.assert_allclose(c.get_ydata(),
                               (k1 * np.exp(-k2 * x) - k2 * np.exp(-k1 * x)) / (k1 - k2),
                               atol=1e-10)


# ----------------------------------------------------------------------------------------
# plot_growth
# ----------------------------------------------------------------------------------------
def test_growth_masses_curve_and_share(growth_pair):
    g, fg = growth_pair
    ax = P.plot_growth(g, turnover_fit=fg, mass_unit="g")
    (pts,) = _label_of(ax, "mass")
    np.testing.assert_allclose(pts.get_xdata(), g.t)
    np.testing.assert_allclose(pts.get_ydata(), g.mass)
    (curve,) = _label_of(ax, "fitted logistic")
    np.testing.assert_allclose(curve.get_ydata(), g.predict(curve.get_xdata()))
    assert ax.get_ylabel() == "Body mass (g)"
    assert ax.get_xlabel() == "Time since diet switch (days)"
    share = ax.right_ax.get_lines()[0]
    np.testing.assert_allclose(share.get_ydata(), fg.growth_share_curve(share.get_xdata()))
    assert ax.right_ax.get_ylim() == (0.0, 1.05)  # a share of 1 stays visible


def test_growth_without_turnover_fit_and_errors(growth_pair, fit1):
    g, _ = growth_pair
    ax = P.plot_growth(g, time_unit="w")
    assert ax.get_xlabel() == "Time (weeks)"
    assert ax.get_ylabel() == "Body mass (unit not given)"
    assert not hasattr(ax, "right_ax")
    with pytest.raises(iso.DataError, match="'growth_fit' must be a GrowthFit.*lacks 'mass'"):
        P.plot_growth(type("G", (), {"t": [1.0]})())
    with pytest.raises(iso.DataError, match="'turnover_fit' has no growth model"):
        P.plot_growth(g, turnover_fit=fit1)


def test_growth_share_curve_of_the_wrong_form_is_refused(growth_pair, monkeypatch):
    g, fg = growth_pair
    monkeypatch.setattr(fg, "growth_share_curve", lambda t: pd.DataFrame({"time": t}))
    with pytest.raises(iso.DataError, match=r"plot_growth: 'turnover_fit'\.growth_share_curve"
                                            r"\(t\) returned a table without a 'growth_share' "
                                            r"or 'share' column \(columns: time\)"):
        P.plot_growth(g, turnover_fit=fg)
    monkeypatch.setattr(fg, "growth_share_curve", lambda t: np.zeros(3))
    with pytest.raises(iso.DataError, match=r"returned 3 values for 300 times"):
        P.plot_growth(g, turnover_fit=fg)
    plt.close("all")


# ----------------------------------------------------------------------------------------
# plot_weights
# ----------------------------------------------------------------------------------------
def test_weights_bars_and_unfitted_series(fitset):
    ax = P.plot_weights(fitset)
    labels = [t.get_text() for t in ax.get_yticklabels()]
    assert labels == ["A", "B", "C"]  # the shared "plasma / d13C" goes in the y label
    filled = [p for p in ax.patches if p.get_fill()]
    for yi, key in enumerate([("A", "plasma", "d13C"), ("B", "plasma", "d13C")]):
        bars = [p for p in filled if abs(p.get_y() + p.get_height() / 2 - yi) < 1e-9]
        assert sum(p.get_width() for p in bars) == pytest.approx(1.0)
        w = fitset[key].comparison.set_index("label")["weight"]
        assert sorted(p.get_width() for p in bars) == pytest.approx(
            sorted(x for x in w if x > 0))
    empty = [p for p in ax.patches if not p.get_fill()]
    assert len(empty) == 1 and empty[0].get_y() + empty[0].get_height() / 2 == pytest.approx(2)
    assert any("not fitted: too few points" in t.get_text() for t in ax.texts)
    assert ax.get_xlabel() == "Akaike weight (AICc)"
    leg = [t.get_text() for t in ax.get_legend().get_texts()]
    assert leg == ["1 pool", "2 pools"]


def test_weights_bad_input(fit1):
    with pytest.raises(iso.DataError, match="'fitset' must be a FitSet"):
        P.plot_weights({"a": fit1})
    with pytest.raises(iso.DataError, match="plot_weights: 'fitset' holds no series"):
        P.plot_weights(iso.FitSet(("subject",), {}))


# ----------------------------------------------------------------------------------------
# plot_overview
# ----------------------------------------------------------------------------------------
def test_overview_three_panels(fit_diet):
    fig = P.plot_overview(fit_diet)
    assert isinstance(fig, Figure)
    assert len(fig.axes) == 3
    assert [a.get_title(loc="left") for a in fig.axes] == ["a", "b", "c"]
    assert tuple(fig.get_size_inches()) == pytest.approx((7.0, 5.0))
    assert "‰" in fig.axes[0].get_ylabel()
    with pytest.raises(iso.DataError, match="plot_overview: 'fit' must be a TurnoverFit"):
        P.plot_overview(None)


def test_overview_closes_its_figure_on_failure(fit1, monkeypatch):
    def boom(*a, **k):
        raise RuntimeError("invented failure")

    monkeypatch.setattr(P, "plot_progress", boom)
    n = len(plt.get_fignums())
    with pytest.raises(RuntimeError, match="invented failure"):
        P.plot_overview(fit1)
    assert len(plt.get_fignums()) == n


# ----------------------------------------------------------------------------------------
# issue 15: mass unit, one δ notation, no repeated labels, one draw per saved figure
# ----------------------------------------------------------------------------------------
def test_growth_mass_unit_in_the_label(growth_pair):
    g, _ = growth_pair
    assert P.plot_growth(g, mass_unit="kg").get_ylabel() == "Body mass (kg)"

    class Carrying:  # a growth fit that carries the unit of its masses
        t, mass, mass_unit = g.t, g.mass, "g"

        def predict(self, t):
            return g.predict(t)

    assert P.plot_growth(Carrying()).get_ylabel() == "Body mass (g)"
    # the argument wins over what the fit carries
    assert P.plot_growth(Carrying(), mass_unit="mg").get_ylabel() == "Body mass (mg)"
    with pytest.raises(iso.DataError, match="plot_growth: 'mass_unit' must be a non-empty "
                                            "string such as 'kg'; got 3"):
        P.plot_growth(g, mass_unit=3)
    plt.close("all")


def test_titles_and_axes_use_one_delta_notation(fit1):
    from isoturnover.plotkit import delta_name, series_title

    # δ notation as in delta_label (Coplen 2011): the same name in titles and on axes
    assert delta_name("d13C") == "δ¹³C" and delta_name("d2H") == "δ²H"
    assert series_title("G01 / red_cells / d13C: 1 pool") == "G01 / red cells / δ¹³C: 1 pool"
    assert series_title("d99X / cod13C") == "d99X / cod13C"  # not isotope codes
    t, y = one_pool_data()
    f = iso.TurnoverModel(1, isotope="d13C").fit(t, y, warn=False, label="G01 / d13C: 1 pool")
    fig = P.plot_overview(f)
    title = fig.get_suptitle()
    assert title == "G01 / δ¹³C: 1 pool"
    assert "d13C" not in title and delta_name("d13C") in fig.axes[0].get_ylabel()
    # the title names the model: the legends do not say it again
    fig.draw_without_rendering()
    for a in (fig.axes[0], fig.axes[2]):
        texts = [x.get_text() for x in a.get_legend().get_texts()]
        assert not any("1 pool" in x for x in texts)
    # without a title the legend names the model
    ax = P.plot_fit(fit1)
    assert any("(1 pool)" in x for x in ax.get_legend_handles_labels()[1])
    plt.close("all")


def test_weights_labels_do_not_repeat_the_shared_key_parts(fitset):
    ax = P.plot_weights(fitset)
    # every series is plasma / d13C: said once, in the y label, in δ notation
    assert [t.get_text() for t in ax.get_yticklabels()] == ["A", "B", "C"]
    assert ax.get_ylabel() == "Subject (plasma, δ¹³C)"
    plt.close(ax.figure)


def test_saved_overview_is_drawn_once_and_legends_stay_off_the_data(fit2, monkeypatch):
    import io

    calls = []
    real = Figure.draw

    def counting(self, renderer):
        calls.append(renderer)
        return real(self, renderer)

    monkeypatch.setattr(Figure, "draw", counting)
    fig = P.plot_overview(fit2)
    assert calls == []  # placing the legends drew nothing
    fig.savefig(io.BytesIO(), format="png", dpi=72)
    # savefig itself walks a laid-out figure twice (once to lay it out, once to render);
    # nothing more
    assert len(calls) == 2
    ax = fig.axes[0]
    bb = ax.get_legend().get_window_extent()
    pts = ax.transData.transform(np.column_stack([fit2.t, fit2.y]))
    assert not np.any((pts[:, 0] > bb.x0) & (pts[:, 0] < bb.x1) & (pts[:, 1] > bb.y0)
                      & (pts[:, 1] < bb.y1))
    plt.close(fig)


def test_figure_with_pending_placement_pickles(fit1):
    import io
    import pickle

    fig = P.plot_overview(fit1)
    # the placement is still to be done; it travels with the figure and is done on saving
    assert len(fig.get_layout_engine().pending) == 3
    again = pickle.loads(pickle.dumps(fig))
    again.savefig(io.BytesIO(), format="png", dpi=50)
    assert again.get_layout_engine().pending == []
    assert type(again.get_layout_engine()).__name__ == "PlacingLayoutEngine"
    plt.close(fig)
    plt.close(again)


def _inside_and_apart(fig):
    """Every axes' text (tick labels, labels, titles, legend) inside the figure, and no two
    axes' text boxes overlapping (checked on the drawn figure, matplotlib's own extents)."""
    fig.canvas.draw()
    r = fig.canvas.get_renderer()
    fb = fig.bbox
    boxes = []
    for ax in fig.axes:
        bb = ax.get_tightbbox(r)
        assert bb.x0 >= fb.x0 - 1 and bb.y0 >= fb.y0 - 1, ax
        assert bb.x1 <= fb.x1 + 1 and bb.y1 <= fb.y1 + 1, ax
        boxes.append(bb)
    return boxes


def test_measured_margins_keep_the_text_inside_and_apart(fit2, growth_pair):
    from isoturnover.plotkit import measured_margins

    fig = P.plot_overview(fit2)
    assert fig.get_layout_engine().measured
    boxes = _inside_and_apart(fig)
    a, b, c = boxes
    assert a.y0 > max(b.y1, c.y1) - 1  # the top panel's text above the lower panels'
    assert b.x1 < c.x0 + 1  # panel b's text left of panel c's
    # a title: above every panel's text
    t, y = one_pool_data()
    f = iso.TurnoverModel(1, isotope="d13C").fit(t, y, warn=False, label="G01 / d13C: 1 pool")
    fig = P.plot_overview(f)
    top = _inside_and_apart(fig)[0]
    assert fig.texts[0].get_window_extent().y0 >= top.y1 - 1
    g, tf = growth_pair
    ax = P.plot_growth(g, turnover_fit=tf, mass_unit="kg")
    _inside_and_apart(ax.figure)  # the share axis on the right included
    # axes that are not all on one grid: left to the constrained layout
    fig2 = Figure()
    fig2.add_axes((0.1, 0.1, 0.8, 0.8))
    assert measured_margins(fig2) is False
    plt.close("all")
