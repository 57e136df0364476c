"""Segment profiles through the whole run: demo hair, fit_each, saving, command line, figure.

The demo's goat tail hair (``goat_hair.csv``, invented; ``sample_data/README.md``) was made
by ``sample_data/make_demo.py`` with a growth rate of 0.4 mm/d, no formation lag and
distances from the base; its true values are in ``goat_hair_truth.csv``. The generator's
segment means are checked here against scipy quadrature of the point model, the fits
against that truth.
"""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy.integrate import quad

import isoturnover as iso
from isoturnover.cli import build_parser, main
from isoturnover.demo import demo_path, load_demo
from isoturnover.diet import DietHistory
from isoturnover.errors import DataError
from isoturnover.kinetics import TurnoverKinetics
from isoturnover.segments import formation_intervals

GROWTH = 0.4  # mm/d, the generator's (invented) hair growth rate (goat_hair_truth.csv)
KEYS = [("G01", "hair", "d13C"), ("G02", "hair", "d13C"), ("G05", "hair", "d13C"),
        ("G06", "hair", "d13C")]


def _quiet(fn, *a, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return fn(*a, **kw)


@pytest.fixture(scope="module")
def hair():
    return iso.read_samples(demo_path("goat_hair"))


@pytest.fixture(scope="module")
def diets():
    return iso.read_diets(demo_path("goat_diets"))


@pytest.fixture(scope="module")
def truth():
    t = load_demo("goat_hair_truth")
    return t[t["level"] == "animal"].set_index("subject")


@pytest.fixture(scope="module")
def fitset(hair, diets):
    return _quiet(iso.fit_each, hair, diets=diets, growth_rate={"hair": GROWTH})


def _diet(diets, pen):
    return DietHistory.from_table(diets[(diets["group"] == pen) & (diets["isotope"] == "d13C")])


# ----------------------------------------------------------------------------------------
# the demo hair
# ----------------------------------------------------------------------------------------
def test_demo_hair_table_as_documented(hair):
    raw = load_demo("goat_hair")
    assert list(raw.columns) == ["subject", "group", "tissue", "isotope", "time",
                                 "segment_start", "segment_end", "value", "sd"]
    assert len(hair) == len(raw) == 4 * 24
    assert sorted(raw["subject"].unique()) == ["G01", "G02", "G05", "G06"]
    assert set(raw["time"]) == {180} and set(raw["tissue"]) == {"hair"}
    # 4 mm segments from the base to 96 mm (README)
    for _, rows in raw.groupby("subject"):
        assert rows["segment_start"].tolist() == list(range(0, 96, 4))
        assert (rows["segment_end"] - rows["segment_start"] == 4).all()
    t = load_demo("goat_hair_truth")
    assert set(t["growth_rate"]) == {GROWTH} and set(t["origin"]) == {"base"}
    assert set(t["formation_lag"]) == {0} and set(t["length_unit"]) == {"mm"}
    # half-life = ln 2 / rate, plateaus = diet + separation (hay -27.5, maize -12.5 ‰)
    np.testing.assert_allclose(t["half_life"], math.log(2) / t["rate"], rtol=1e-8)
    np.testing.assert_allclose(t["plateau_old"], -27.5 + t["discrimination"], atol=1e-8)
    np.testing.assert_allclose(t["plateau_new"], -12.5 + t["discrimination"], atol=1e-8)


def test_formation_interval_of_a_demo_segment_by_hand():
    # constant growth: [T - b/g, T - a/g]; 4-8 mm sampled on day 180 at 0.4 mm/d
    t1, t2 = formation_intervals([4.0, 92.0], [8.0, 96.0], 180.0, GROWTH)
    np.testing.assert_allclose(t1, [160.0, -60.0])
    np.testing.assert_allclose(t2, [170.0, -50.0])


def test_demo_hair_scatters_about_the_quadrature_means(diets, truth):
    """Each value minus the mean of the goat's true one-pool curve over the segment's
    formation interval (scipy quad of TurnoverKinetics.predict): sd √(0.2² + 0.1²) (README)."""
    raw = load_demo("goat_hair")
    z = []
    for goat, rows in raw.groupby("subject"):
        tr = truth.loc[goat]
        kin = TurnoverKinetics(1, diet=_diet(diets, tr["group"]))
        theta = kin.check_theta(np.array([tr["discrimination"], tr["rate"], 1.0]))

        def point(t, kin=kin, theta=theta):
            return float(kin.predict(np.array([t]), theta)[0])

        t1, t2 = formation_intervals(rows["segment_start"], rows["segment_end"], 180.0, GROWTH)
        for a, b, v in zip(t1, t2, rows["value"]):
            m = quad(point, a, b, points=[x for x in (0.0, 120.0) if a < x < b],
                     epsabs=1e-11)[0] / (b - a)
            z.append((v - m) / math.sqrt(0.2**2 + 0.1**2))
    z = np.asarray(z)
    assert abs(z.mean()) < 3.5 / math.sqrt(z.size)
    assert 0.7 < z.std(ddof=1) < 1.35


# ----------------------------------------------------------------------------------------
# fit_each
# ----------------------------------------------------------------------------------------
def test_fit_each_recovers_the_invented_truth(fitset, truth):
    tab = fitset.table()
    assert set(tab["record"]) == {"segments"}
    chosen = tab[tab["chosen"]].set_index("subject")
    assert len(chosen) == 4 and (chosen["status"] == "ok").all()
    assert set(chosen["candidate"]) == {"1 pool"}             # the generator's one pool
    for goat, r in chosen.iterrows():
        tr = truth.loc[goat]
        assert r["lower_1"] <= tr["half_life"] <= r["upper_1"], goat
        assert r["upper_1"] - r["lower_1"] < 0.25 * tr["half_life"]   # a usable estimate
        assert r["discrimination_lower"] <= tr["discrimination"] <= r["discrimination_upper"]
        assert r["rate_kind"] == "incorporation"
    for key in KEYS:
        f = fitset[key].best
        assert fitset[key].record == "segments"
        assert type(f.kinetics).__name__ == "SegmentKinetics"
        assert f.data_info["record"] == "segments" and len(f.data_info["segment_end"]) == 24


def test_growth_rate_as_number_or_column_gives_the_same_fit(hair, diets, fitset):
    one = _quiet(iso.fit_each, hair[hair["subject"] == "G02"], diets=diets, pools=1,
                 growth_rate=GROWTH)
    col = _quiet(iso.fit_each, hair[hair["subject"] == "G02"].assign(growth_rate=GROWTH),
                 diets=diets, pools=1)
    want = fitset[KEYS[1]].fits["1 pool"].values
    for fs in (one, col):
        got = fs[KEYS[1]].best.values
        assert got == pytest.approx(want, rel=1e-9)
    # the column wins over the argument for its series
    wrong = _quiet(iso.fit_each, hair[hair["subject"] == "G02"].assign(growth_rate=GROWTH),
                   diets=diets, pools=1, growth_rate={"hair": 9.0})
    assert wrong[KEYS[1]].best.values == pytest.approx(want, rel=1e-9)


def test_missing_growth_rate_names_the_tissue(hair, diets):
    with pytest.raises(DataError, match=r"tissue 'hair' carry segment_start/segment_end .*"
                                        r"growth_rate=\{'hair': RATE\}"):
        iso.fit_each(hair, diets=diets)
    with pytest.raises(DataError, match=r"tissue 'hair'"):
        iso.fit_each(hair, diets=diets, growth_rate={"whisker": 0.8})
    with pytest.raises(DataError, match=r"growth_rate\['hair'\]' must be > 0"):
        iso.fit_each(hair, diets=diets, growth_rate={"hair": -0.4})
    with pytest.raises(DataError, match=r"'segment_origin' must be one of"):
        iso.fit_each(hair, diets=diets, growth_rate=GROWTH, segment_origin="root")
    with pytest.raises(DataError, match=r"'formation_lag' must be one number >= 0"):
        iso.fit_each(hair, diets=diets, growth_rate=GROWTH, formation_lag=-1)


def test_a_growth_rate_column_with_two_values_fails_its_series(hair, diets):
    s = hair[hair["subject"] == "G01"].copy()
    s["growth_rate"] = np.where(s["segment_start"] < 40, 0.4, 0.5)
    fs = _quiet(iso.fit_each, s, diets=diets, pools=1)
    r = fs[KEYS[0]]
    assert r.status == "failed" and "'growth_rate' must hold one value per series" in r.reason


def test_segments_and_whole_samples_in_one_table(hair, diets):
    """Plasma (whole samples, with the goat's masses: growth dilution) and hair (segments,
    no growth dilution) of one goat fitted in one call; the table marks which is which."""
    gs = iso.read_samples(demo_path("goat_samples"))
    plasma = gs[(gs["subject"] == "G01") & (gs["tissue"] == "plasma")
                & (gs["isotope"] == "d13C")]
    both = pd.concat([plasma, hair[hair["subject"] == "G01"]], ignore_index=True)
    masses = iso.read_masses(demo_path("goat_masses"))
    fs = _quiet(iso.fit_each, both, diets=diets, masses=masses, pools=1,
                growth_rate={"hair": GROWTH})
    tab = fs.table().set_index("tissue")
    assert tab.loc["hair", "record"] == "segments" and tab.loc["plasma", "record"] == "points"
    assert tab.loc["hair", "rate_kind"] == "incorporation"
    assert tab.loc["plasma", "rate_kind"] == "catabolic"
    # tables without segments keep their columns (no 'record')
    assert "record" not in _quiet(iso.fit_each, plasma, diets=diets, pools=1).table().columns


def test_formation_lag_and_tip_origin(hair, diets, fitset):
    g1 = hair[hair["subject"] == "G01"]
    base = fitset[KEYS[0]].fits["1 pool"]
    # a lag of 5 days moves every formation midpoint 5 days earlier: [T - ℓ - b/g, ...]
    lagged = _quiet(iso.fit_each, g1, diets=diets, pools=1, growth_rate=GROWTH,
                    formation_lag=5.0)[KEYS[0]].best
    np.testing.assert_allclose(np.sort(lagged.t), np.sort(base.t) - 5.0, atol=1e-9)
    # the same segments measured from the tip of the 96 mm hair: the same fit
    tip = g1.assign(segment_start=96.0 - g1["segment_end"], segment_end=96.0 - g1["segment_start"])
    from_tip = _quiet(iso.fit_each, tip, diets=diets, pools=1, growth_rate=GROWTH,
                      segment_origin="tip")[KEYS[0]].best
    assert from_tip.values == pytest.approx(base.values, rel=1e-8)
    assert from_tip.model.origin == "tip" and from_tip.model.tissue_length == 96.0
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from isoturnover.plotsegments import plot_segments

    ax = plot_segments(from_tip)
    try:
        assert ax.get_xlabel() == "Distance from the tip (mm)"
        assert ax.get_title(loc="right") == "growth rate 0.4 mm per day; tissue 96 mm long"
    finally:
        plt.close(ax.figure)


# ----------------------------------------------------------------------------------------
# saving and loading
# ----------------------------------------------------------------------------------------
def test_save_load_round_trip(fitset):
    f = fitset[KEYS[2]].best
    d = json.loads(f.to_json())
    assert d["model"]["record"] == "segments" and d["model"]["growth_rate"] == GROWTH
    assert d["model"]["origin"] == "base" and d["model"]["formation_lag"] == 0.0
    assert len(d["data"]["segments"]["segment_end"]) == 24
    g = iso.load_fit(d)
    assert type(g.kinetics).__name__ == "SegmentKinetics"
    assert g.values == pytest.approx(f.values, rel=1e-12)
    np.testing.assert_allclose(g.best_fit, f.best_fit, rtol=1e-12)
    assert g.data_fingerprint == f.data_fingerprint
    pd.testing.assert_frame_equal(g.half_lives(), f.half_lives())
    a, b = np.array([0.0, 10.0]), np.array([4.0, 30.0])
    np.testing.assert_allclose(
        g.predict_segments(a, b, sample_time=180.0, growth_rate=GROWTH),
        f.predict_segments(a, b, sample_time=180.0, growth_rate=GROWTH), rtol=1e-12)


def test_load_refuses_damaged_segment_records(fitset):
    d = json.loads(fitset[KEYS[0]].best.to_json())
    bad = json.loads(json.dumps(d))
    bad["data"]["segments"]["segment_end"][3] = 17.0
    with pytest.raises(DataError, match=r"d\.data\.segments: the segment ends, .* edited"):
        iso.load_fit(bad)
    bad = json.loads(json.dumps(d))
    del bad["data"]["segments"]
    with pytest.raises(DataError, match=r"d\.data.*segments"):
        iso.load_fit(bad)
    bad = json.loads(json.dumps(d))
    bad["model"]["origin"] = "middle"
    with pytest.raises(DataError, match=r"d\.model\.origin: must be one of 'base', 'tip'"):
        iso.load_fit(bad)
    bad = json.loads(json.dumps(d))
    bad["model"]["growth_rate"] = 0.0
    with pytest.raises(DataError, match=r"d\.model\.growth_rate: must be > 0"):
        iso.load_fit(bad)
    bad = json.loads(json.dumps(d))
    bad["data"]["t"][0] += 1.0
    with pytest.raises(DataError, match=r"d\.data\.t\[0\].* not the formation midpoint"):
        iso.load_fit(bad)


def test_a_direct_model_fit_saves_and_loads(hair, diets):
    """A TurnoverModel segment fit: rebuilt from its intervals and its recorded segments."""
    g1 = hair[hair["subject"] == "G05"]
    model = iso.TurnoverModel(1, diet=_diet(diets, "B"), record="segments",
                              growth_rate=GROWTH)
    f = _quiet(model.fit, g1)
    g = iso.load_fit(f.to_json())
    assert g.values == pytest.approx(f.values, rel=1e-12)


# ----------------------------------------------------------------------------------------
# command line
# ----------------------------------------------------------------------------------------
def test_cli_help_lists_the_segment_options():
    text = build_parser().commands["fit"].format_help()
    for opt in ("--growth-rate", "--segment-origin", "--formation-lag"):
        assert opt in text
    p = build_parser()
    assert p.parse_args(["fit", "x.csv", "--growth-rate", "hair=0.4,whisker=0.8"]
                        ).growth_rate == {"hair": 0.4, "whisker": 0.8}
    assert p.parse_args(["fit", "x.csv", "--growth-rate", "0.4"]).growth_rate == 0.4
    a = p.parse_args(["fit", "x.csv"])
    assert (a.growth_rate, a.segment_origin, a.formation_lag) == (None, "base", 0.0)
    assert a.length_unit == "mm" and "--length-unit" in text
    assert p.parse_args(["fit", "x.csv", "--length-unit", " cm "]).length_unit == "cm"


@pytest.mark.parametrize("argv, what", [
    (["--growth-rate", "hair=x"], "--growth-rate"),
    (["--growth-rate", "-0.4"], "--growth-rate"),
    (["--segment-origin", "root"], "--segment-origin"),
    (["--formation-lag", "-2"], "--formation-lag"),
    (["--length-unit", ""], "--length-unit"),
    (["--length-unit", "x" * 21], "--length-unit"),
])
def test_cli_bad_segment_options(argv, what, tmp_path, capsys):
    with pytest.raises(SystemExit) as e:                     # argparse's exit
        main(["fit", str(demo_path("goat_hair")), "--out", str(tmp_path / "o"), *argv])
    err = capsys.readouterr().err
    assert e.value.code == 2 and err.startswith("error: ") and what in err
    assert not (tmp_path / "o").exists()


def test_cli_fits_the_demo_hair(tmp_path, capsys, fitset):
    out = tmp_path / "h"
    argv = ["fit", str(demo_path("goat_hair")), "--diets", str(demo_path("goat_diets")),
            "--per-diet-separation", "no", "--no-figures", "--no-progress"]
    assert main([*argv, "--growth-rate", "hair=0.4", "--out", str(out)]) == 0
    tab = pd.read_csv(out / "results.csv")
    assert set(tab["record"]) == {"segments"}
    chosen = tab[tab["chosen"]].set_index("subject")
    want = fitset.table()
    want = want[want["chosen"]].set_index("subject")
    np.testing.assert_allclose(chosen.loc[want.index, "half_life_1"], want["half_life_1"],
                               rtol=1e-6)
    loaded = iso.load_fits(out / "fits.json")
    assert len(loaded) == 8                                   # 4 goats × 2 candidates
    assert {type(e["fit"].kinetics).__name__ for e in loaded} == {"SegmentKinetics"}
    # one number for every tissue, and a formation lag: what fit_each gives with them
    out2 = tmp_path / "h2"
    assert main([*argv, "--growth-rate", "0.4", "--formation-lag", "3", "--pools", "1",
                 "--out", str(out2)]) == 0
    tab2 = pd.read_csv(out2 / "results.csv").set_index("subject")
    lagged = _quiet(iso.fit_each, demo_path("goat_hair"), diets=demo_path("goat_diets"),
                    pools=1, growth_rate=GROWTH, formation_lag=3.0).table().set_index("subject")
    np.testing.assert_allclose(tab2.loc[lagged.index, "half_life_1"], lagged["half_life_1"],
                               rtol=1e-6)
    # the lag moves the formation times 3 days earlier relative to the diet switches, so
    # the half-lives change (the truth has no lag)
    assert not np.allclose(lagged["half_life_1"], want["half_life_1"], rtol=1e-3)
    capsys.readouterr()


def test_cli_segment_origin_tip(tmp_path, capsys, hair, fitset):
    raw = load_demo("goat_hair")
    raw = raw[raw["subject"] == "G06"]
    tip = raw.assign(segment_start=96 - raw["segment_end"], segment_end=96 - raw["segment_start"])
    path = tmp_path / "tip.csv"
    tip.to_csv(path, index=False)
    out = tmp_path / "t"
    assert main(["fit", str(path), "--diets", str(demo_path("goat_diets")), "--pools", "1",
                 "--per-diet-separation", "no", "--growth-rate", "hair=0.4",
                 "--segment-origin", "tip", "--no-figures", "--no-progress",
                 "--length-unit", "cm", "--out", str(out)]) == 0
    tab = pd.read_csv(out / "results.csv")
    assert tab["half_life_1"].iloc[0] == pytest.approx(
        fitset[KEYS[3]].fits["1 pool"].half_lives()["half_life"].iloc[0], rel=1e-6)
    # the unit is a label: carried into the saved fits and the report's data line
    assert {e["fit"].model.length_unit for e in iso.load_fits(out / "fits.json")} == {"cm"}
    assert "24 segments (0–96 cm), formed over days -60 to 180" in (
        out / "report.md").read_text(encoding="utf-8")
    capsys.readouterr()


def test_cli_missing_growth_rate_names_the_tissue(tmp_path, capsys):
    code = main(["fit", str(demo_path("goat_hair")), "--diets", str(demo_path("goat_diets")),
                 "--out", str(tmp_path / "o"), "--no-progress"])
    err = capsys.readouterr().err
    assert code == 2
    lines = [ln for ln in err.strip().splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: ")
    assert "tissue 'hair'" in err and "--growth-rate hair=RATE" in err
    assert not (tmp_path / "o").exists()


# ----------------------------------------------------------------------------------------
# figure and report
# ----------------------------------------------------------------------------------------
def test_plot_segments_draws_the_profile(fitset):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from isoturnover.plotsegments import plot_segments, segment_geometry

    f = fitset[KEYS[2]].best
    ax = plot_segments(f, length_unit="mm")
    try:
        labels = ax.get_legend_handles_labels()[1]
        assert labels[:2] == ["measured segment", "fitted segment mean"]
        assert "precursor at formation (point model)" in labels
        assert "formed at a diet switch" in labels
        assert ax.get_xlabel() == "Distance from the base (mm)"
        assert ax.get_title(loc="right") == "growth rate 0.4 mm per day"
        # diet switches at days 0 and 120 lie at (180 - s) * 0.4 mm from the base: 72, 24
        xs = sorted(ln.get_xdata()[0] for ln in ax.get_lines() if ln.get_linestyle() == ":")
        np.testing.assert_allclose(xs, [24.0, 72.0])
        tops = [c for c in ax.child_axes if c.get_xlabel().startswith("formation time")]
        assert len(tops) == 1
        g = segment_geometry(f)
        np.testing.assert_allclose(np.sort(g["y"]), np.sort(f.y))
        # the fitted segment means are the fit's values at its formation midpoints
        np.testing.assert_allclose(
            np.sort(f.predict_segments(g["start"], g["end"], sample_time=180.0,
                                       growth_rate=GROWTH)), np.sort(f.best_fit), rtol=1e-12)
    finally:
        plt.close(ax.figure)


def test_plot_segments_refuses_what_it_cannot_draw(hair, diets, fitset):
    from isoturnover.plotsegments import plot_segments

    point = _quiet(iso.TurnoverModel(1).fit, [0, 1, 2, 5, 10, 20], [-25, -22, -20, -17,
                                                                     -15, -14.2])
    with pytest.raises(DataError, match="not a segment fit"):
        plot_segments(point)
    direct = _quiet(iso.TurnoverModel(1, diet=_diet(diets, "A"), record="segments",
                                      growth_rate=GROWTH).fit, hair[hair["subject"] == "G01"])
    with pytest.raises(DataError, match="do not give the fit's"):
        plot_segments(direct, segment_start=[0.0], segment_end=[4.0], sample_time=180.0)


def test_report_has_a_segment_figure(tmp_path, hair, diets):
    fs = _quiet(iso.fit_each, hair[hair["subject"] == "G01"], diets=diets, pools=1,
                growth_rate=GROWTH)
    from isoturnover.analysis import Analysis

    a = Analysis({"hair": fs})
    _quiet(a.write, tmp_path / "r")
    figs = sorted(p.name for p in (tmp_path / "r" / "report_figures").iterdir())
    assert any(n.endswith("_segments.png") for n in figs)
    md = (tmp_path / "r" / "report.md").read_text(encoding="utf-8")
    assert "Segment profile of" in md and "formation time" in md


# ----------------------------------------------------------------------------------------
# length unit, direct fits, predict
# ----------------------------------------------------------------------------------------
def test_length_unit_travels_with_the_fit(hair, diets, fitset):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from isoturnover.plotsegments import plot_segments

    f_mm = fitset[KEYS[0]].best
    assert f_mm.model.length_unit == "mm"                     # the default
    fs = _quiet(iso.fit_each, hair[hair["subject"] == "G01"], diets=diets, pools=1,
                growth_rate=GROWTH, length_unit="cm")
    f = fs[KEYS[0]].best
    assert f.model.length_unit == "cm"
    # source, by hand: cut on day 180 at 0.4 per day, the 96-long profile was formed from
    # day 180 - 96/0.4 = -60 to day 180 (no lag)
    data = dict(f.summary().header)["Data"]
    assert data.endswith("24 segments (0–96 cm), formed over days -60 to 180")
    d = json.loads(f.to_json())
    assert d["model"]["length_unit"] == "cm"
    assert iso.load_fit(d).model.length_unit == "cm"
    old = json.loads(json.dumps(d))
    del old["model"]["length_unit"]                       # a record from before the unit
    assert iso.load_fit(old).model.length_unit == "mm"
    bad = json.loads(json.dumps(d))
    bad["model"]["length_unit"] = ""
    with pytest.raises(DataError, match=r"d\.model\.length_unit"):
        iso.load_fit(bad)
    ax = plot_segments(f)
    try:
        assert ax.get_xlabel() == "Distance from the base (cm)"
        assert ax.get_title(loc="right") == "growth rate 0.4 cm per day"
    finally:
        plt.close(ax.figure)
    with pytest.raises(DataError, match="'length_unit'"):
        iso.fit_each(hair, diets=diets, growth_rate=GROWTH, length_unit="")
    with pytest.raises(DataError, match="'length_unit'"):
        iso.TurnoverModel(1, record="segments", growth_rate=GROWTH, length_unit=5).fit(
            hair[hair["subject"] == "G01"], warn=False)


def test_a_direct_model_fit_records_its_segments(hair, diets):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from isoturnover.plotsegments import plot_segments, segment_geometry

    g1 = hair[hair["subject"] == "G01"]
    f = _quiet(iso.TurnoverModel(1, diet=_diet(diets, "A"), record="segments",
                                 growth_rate=GROWTH).fit, g1)
    info = f.data_info
    assert info["record"] == "segments" and info["sample_time"] == [180.0] * 24
    np.testing.assert_array_equal(np.sort(info["segment_start"]), np.sort(g1["segment_start"]))
    np.testing.assert_array_equal(np.sort(info["segment_end"]), np.sort(g1["segment_end"]))
    d = json.loads(f.to_json())
    assert d["data"]["segments"]["segment_start"] == info["segment_start"]
    g = iso.load_fit(d)
    for fit in (f, g):                                    # drawn without passing segments
        ax = plot_segments(fit)
        plt.close(ax.figure)
        np.testing.assert_array_equal(np.sort(segment_geometry(fit)["y"]), np.sort(fit.y))


def test_predict_is_the_point_response_and_the_fit_keeps_segment_means(fitset):
    from isoturnover.bands import band
    from isoturnover.segments import segment_means

    f = fitset[KEYS[1]].best
    th = f.state.theta
    point = f.model.kinetics                              # the point model (TurnoverKinetics)
    assert type(point).__name__ == "TurnoverKinetics"
    g = f.data_info
    t1, t2 = formation_intervals(g["segment_start"], g["segment_end"], g["sample_time"],
                                 GROWTH)
    order = np.argsort((t1 + t2) / 2.0)
    # source: the exact segment means (segment_means; quadrature-checked in test_segments)
    means = segment_means(point, th, t1[order], t2[order])
    np.testing.assert_allclose(f.t, ((t1 + t2) / 2.0)[order], rtol=0, atol=1e-12)
    # predict at the formation midpoints is the point model there, not the segment mean
    np.testing.assert_allclose(f.predict(f.t), point.evaluate(f.t, th), rtol=0, atol=1e-12)
    assert np.max(np.abs(f.predict(f.t) - means)) > 0.05   # they differ where δ curves
    # fitted values, residuals and the RSS stay those of the segment means
    np.testing.assert_allclose(f.best_fit, means, rtol=0, atol=1e-12)
    np.testing.assert_allclose(f.residuals, f.y - means, rtol=0, atol=1e-12)
    w = 1.0 / np.asarray(f.sigma) ** 2                    # weights 1/sd² (the demo's sd)
    assert f.rss == pytest.approx(float(np.sum(w * (f.y - means) ** 2)), rel=1e-10)
    np.testing.assert_allclose(f.influence()["fitted"].to_numpy(), means, rtol=0, atol=1e-12)
    # the band is the point response's: continuous through a midpoint (no jump to a mean)
    m = float(f.t[12])
    b = band(f, [m - 1e-7, m, m + 1e-7])
    np.testing.assert_allclose(b["fitted"], point.evaluate(b["time"].to_numpy(), th),
                               rtol=0, atol=1e-12)
    assert np.ptp(b["se"]) < 1e-5 and np.ptp(b["fitted"]) < 1e-5
