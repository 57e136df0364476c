"""Tests of the invented demo experiment: generator, shipped copies, loader, truth.

The demo data are invented (sample_data/README.md); these tests check that the generator
reproduces the shipped files, that the files are valid tables, that they hold what the README
says, and that the truth table agrees with the growth-dilution formula worked by hand.
"""

from __future__ import annotations

import importlib.util
import math
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import isoturnover as iso
from isoturnover.demo import DEMO_TABLES, demo_names, demo_path, load_demo
from isoturnover.errors import DataError

ROOT = Path(__file__).resolve().parents[1]
SAMPLE_DIR = ROOT / "sample_data"
PACKAGE_DIR = ROOT / "isoturnover" / "demo_data"
README = SAMPLE_DIR / "README.md"
LN2 = math.log(2.0)


def _load_generator():
    spec = importlib.util.spec_from_file_location("_isoturnover_make_demo",
                                                  SAMPLE_DIR / "make_demo.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


gen = _load_generator()


@pytest.fixture(scope="module")
def demo():
    return gen.build_demo()


@pytest.fixture(scope="module")
def truth():
    return load_demo("truth")


# ----------------------------------------------------------------------------------------
# generator and shipped copies
# ----------------------------------------------------------------------------------------
def test_generator_reproduces_both_shipped_copies(tmp_path):
    assert gen.main(["--out", str(tmp_path)]) == 0
    written = sorted(p.name for p in tmp_path.iterdir())
    assert written == sorted(gen.FILES)            # no temporary files left behind
    for name in gen.FILES:
        new = (tmp_path / name).read_bytes()
        assert new == (SAMPLE_DIR / name).read_bytes(), f"sample_data/{name} is stale"
        assert new == (PACKAGE_DIR / name).read_bytes(), f"isoturnover/demo_data/{name} is stale"
        new.decode("utf-8")                        # UTF-8 text
        assert b"\r" not in new


def test_make_demo_function_writes_every_directory(tmp_path, demo):
    dirs = [tmp_path / "a", tmp_path / "b" / "c"]
    files = gen.make_demo(dirs)
    assert files == demo["files"]
    for d in dirs:
        for name, text in files.items():
            assert (d / name).read_text(encoding="utf-8") == text


def test_readme_generated_blocks_are_current(demo):
    text = README.read_text(encoding="utf-8")
    for name, content in gen.readme_blocks(demo).items():
        m = re.search(rf"<!-- make_demo:{name}:start -->\n(.*?)\n<!-- make_demo:{name}:end -->",
                      text, re.S)
        assert m, f"README block {name!r} missing"
        assert m.group(1) == content, f"README block {name!r} is stale: run make_demo.py"


def test_update_readme_refuses_a_readme_without_markers(tmp_path, demo):
    p = tmp_path / "README.md"
    p.write_text("# no markers here\n", encoding="utf-8")
    with pytest.raises(ValueError, match=r"markers <!-- make_demo:truth:start -->"):
        gen.update_readme(p, demo)
    assert p.read_text(encoding="utf-8") == "# no markers here\n"


def test_readme_says_invented_and_animal_care():
    text = README.read_text(encoding="utf-8")
    assert "invented" in text.lower()
    assert "animal-care authority" in text
    import isoturnover.demo as demo_module

    assert "data are invented" in demo_module.__doc__


# ----------------------------------------------------------------------------------------
# loader
# ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", list(DEMO_TABLES))
def test_load_demo_every_table(name):
    a = load_demo(name)
    b = load_demo(f"{name}.csv")
    pd.testing.assert_frame_equal(a, b)
    pd.testing.assert_frame_equal(a, pd.read_csv(demo_path(name)))
    assert demo_path(name) == PACKAGE_DIR / f"{name}.csv"
    assert a.attrs["invented"] is True
    assert len(a) > 0
    kind, unit, _ = DEMO_TABLES[name]
    assert a.attrs["table"] == kind
    if unit is not None:
        assert a.attrs["time_unit"] == unit


def test_load_demo_all_returns_new_frames():
    every = load_demo()
    assert list(every) == demo_names() == list(DEMO_TABLES)
    every["goat_samples"].loc[0, "value"] = 999.0
    assert load_demo("goat_samples").loc[0, "value"] != 999.0


def test_load_demo_validate_uses_the_readers_with_the_right_unit():
    b = load_demo("goat_breath", validate=True)
    assert b.attrs["time_unit"] == "h" and b.attrs["table"] == "samples"
    assert "is_replicate_group" in b.columns
    assert load_demo("goat_masses", validate=True).attrs["table"] == "masses"
    every = load_demo(validate=True)
    assert every["fish_diets"].attrs["table"] == "diets"
    assert "is_replicate_group" not in every["truth"].columns


def test_load_demo_unknown_name():
    with pytest.raises(DataError, match=r"unknown demo table 'goats'; available: goat_samples, "
                                        r"goat_breath, .*truth"):
        load_demo("goats")
    with pytest.raises(DataError, match=r"unknown demo table 'fish\.txt'"):
        demo_path("fish.txt")
    with pytest.raises(DataError, match=r"'name' must be the name of a demo table .* got int 3"):
        load_demo(3)


# ----------------------------------------------------------------------------------------
# the files are valid tables
# ----------------------------------------------------------------------------------------
SAMPLE_FILES = {"goat_samples": "d", "goat_breath": "h", "fish_samples": "d"}


@pytest.mark.parametrize("name", list(SAMPLE_FILES))
def test_samples_pass_read_samples(name):
    raw = load_demo(name)
    s = iso.read_samples(demo_path(name), time_unit=SAMPLE_FILES[name])
    assert len(s) == len(raw)                              # nothing dropped
    assert s.attrs["time_unit"] == SAMPLE_FILES[name]
    assert list(raw.columns) == ["subject", "group", "tissue", "isotope", "time", "value",
                                 "sd", "replicate"]
    assert set(s["isotope"]) <= set(iso.data.ISOTOPE_CODES)
    assert (s["sd"] > 0).all()


@pytest.mark.parametrize("name", ["goat_diets", "fish_diets"])
def test_diets_pass_read_diets(name):
    d = iso.read_diets(demo_path(name))
    assert len(d) == len(load_demo(name))
    for (_group, _isotope), rows in d.groupby(["group", "isotope"]):
        hist = iso.DietHistory.from_table(rows)
        assert hist.switch_times[0] == 0.0
        assert rows["start"].iloc[0] < 0


@pytest.mark.parametrize("name", ["goat_masses", "fish_masses"])
def test_masses_pass_read_masses(name):
    m = iso.read_masses(demo_path(name))
    assert len(m) == len(load_demo(name))
    assert (m["mass"] > 0).all()


def test_goat_diets_content():
    d = load_demo("goat_diets")
    b = d[(d["group"] == "B") & (d["isotope"] == "d13C")]
    assert b["start"].tolist() == [-365, 0, 120]
    assert b["value"].tolist() == [-27.5, -12.5, -27.5]
    a = d[(d["group"] == "A") & (d["isotope"] == "d15N")]
    assert a["start"].tolist() == [-365, 0]


# ----------------------------------------------------------------------------------------
# design, missing samples and replicates as documented
# ----------------------------------------------------------------------------------------
def _readme_table(block: str) -> list[list[str]]:
    text = README.read_text(encoding="utf-8")
    m = re.search(rf"<!-- make_demo:{block}:start -->\n(.*?)\n<!-- make_demo:{block}:end -->",
                  text, re.S)
    lines = m.group(1).splitlines()[2:]
    return [[c.strip() for c in line.strip("|").split("|")] for line in lines]


def _planned(name):
    if name == "goat_samples":
        goats = [(f"G0{i}", "A" if i <= 4 else "B") for i in range(1, 9)]
        series = [("plasma", "d13C"), ("red_cells", "d13C"), ("plasma", "d15N")]
        days = [0, 1, 2, 4, 7, 10, 14, 21, 28, 42, 56, 70, 90, 120, 121, 123, 126, 130, 135,
                142, 150, 165, 180]
        return {(g, ti, i, float(t)) for g, _ in goats for ti, i in series for t in days}
    if name == "goat_breath":
        hours = [0, 1, 2, 3, 4, 6, 8, 12, 16, 24, 36, 48, 60, 72]
        return {(f"G0{i}", "breath", "d13C", float(t)) for i in range(1, 9) for t in hours}
    days = np.repeat([0, 3, 7, 10, 14, 21, 28, 35, 42, 56, 70], 3)
    return {(f"F{j + 1:02d}", "muscle", iso_, float(t)) for j, t in enumerate(days)
            for iso_ in ("d15N", "d13C")}


@pytest.mark.parametrize("name", list(SAMPLE_FILES))
def test_missing_samples_and_replicates_as_documented(name):
    raw = load_demo(name)
    keys = ["subject", "tissue", "isotope", "time"]
    present = {(r.subject, r.tissue, r.isotope, float(r.time))
               for r in raw[keys].itertuples(index=False)}
    missing = {(s, ti, i, float(t)) for f, s, ti, i, t in _readme_table("missing")
               if f == f"`{name}.csv`"}
    planned = _planned(name)
    assert present | missing == planned
    assert not present & missing
    # 3 % of the planned samples missing, 10 % of the rest replicated (both rounded)
    assert len(missing) == round(0.03 * len(planned)) > 0
    n_rep = int((raw["replicate"] == 2).sum())
    assert n_rep == round(0.10 * len(present)) > 0
    assert set(raw["replicate"]) == {1, 2}
    counts = raw.groupby(keys)["replicate"].agg(["count", "min", "max"])
    assert counts["count"].max() == 2
    assert ((counts["count"] == 2) == (counts["max"] == 2)).all()
    assert (counts["min"] == 1).all()
    row = {r[0]: r for r in _readme_table("files")}[f"`{name}.csv`"]
    assert row[1:] == [str(len(raw)), str(n_rep), str(len(missing))]
    s = iso.read_samples(demo_path(name), time_unit=SAMPLE_FILES[name])
    assert int(s["is_replicate_group"].sum()) == 2 * n_rep
    assert len(iso.average_replicates(s)) == len(present)


def test_fish_are_sampled_destructively():
    f = load_demo("fish_samples")
    assert f.groupby("subject")["time"].nunique().max() == 1
    m = load_demo("fish_masses")
    assert m["subject"].is_unique and len(m) == 33
    merged = f.merge(m, on="subject", suffixes=("", "_mass"))
    assert (merged["time"] == merged["time_mass"]).all()


# ----------------------------------------------------------------------------------------
# truth
# ----------------------------------------------------------------------------------------
def _num(col):
    return pd.to_numeric(col, errors="coerce").to_numpy(dtype=float)


def test_truth_internal_consistency(truth):
    t = truth
    rate = _num(t["rate"])
    # 6 significant digits in the file
    np.testing.assert_allclose(_num(t["half_life"]), LN2 / rate, rtol=1e-8)
    grown = t["growth"] != "none"
    assert set(t.loc[grown, "rate_kind"]) == {"catabolic"}
    assert set(t.loc[~grown, "rate_kind"]) == {"incorporation"}
    inc = _num(t.loc[grown, "incorporation_rate"])
    g = _num(t.loc[grown, "growth_rate_mean"])
    np.testing.assert_allclose(inc, rate[grown] + g, rtol=1e-8)
    np.testing.assert_allclose(_num(t.loc[grown, "incorporation_half_life"]), LN2 / inc,
                               rtol=1e-8)
    np.testing.assert_allclose(_num(t.loc[grown, "growth_share"]), g / inc, rtol=1e-8)
    for side in ("old", "new"):
        np.testing.assert_allclose(_num(t[f"plateau_{side}"]),
                                   _num(t[f"diet_{side}_value"])
                                   + _num(t[f"discrimination_{side}"]), atol=1e-8)
    frac = t.groupby(["level", "subject", "tissue", "isotope"])["fraction"].sum()
    np.testing.assert_allclose(frac.to_numpy(), 1.0, atol=1e-8)
    # fish: exponential growth, growth_k is k_growth; the fish share is mostly growth
    fish = t[t["group"] == "batch1"]
    np.testing.assert_allclose(_num(fish["growth_k"]), _num(fish["growth_rate_mean"]))
    pop = fish[fish["level"] == "population"]
    assert (_num(pop["growth_share"]) > 0.8).all()
    assert set(t.loc[t["tissue"] == "breath", "time_unit"]) == {"h"}


def test_truth_diet_values_match_the_diet_files(truth):
    for diets, groups in (("goat_diets", ("A", "B")), ("fish_diets", ("batch1",))):
        d = load_demo(diets)
        for isotope, rows in d[d["group"] == groups[0]].groupby("isotope"):
            old, new = rows["value"].iloc[0], rows["value"].iloc[1]
            sel = truth[(truth["isotope"] == isotope) & truth["group"].str.contains(groups[0])]
            assert np.allclose(sel["diet_old_value"], old)
            assert np.allclose(sel["diet_new_value"], new)


def test_truth_growth_curves_match_the_masses(truth):
    # logistic W = Winf/(1 + exp(-k (t - ti))) worked by hand against growth_w0 = W(0)
    goats = truth[(truth["level"] == "animal") & (truth["tissue"] == "red_cells")]
    m = load_demo("goat_masses")
    resid = []
    for r in goats.itertuples(index=False):
        w0 = r.growth_winf / (1 + math.exp(r.growth_k * r.growth_ti))
        assert w0 == pytest.approx(r.growth_w0, rel=1e-8)
        w = lambda tt, r=r: r.growth_winf / (1 + np.exp(-r.growth_k * (tt - r.growth_ti)))  # noqa: E731
        assert r.growth_rate_mean == pytest.approx(math.log(w(180.0) / w(0.0)) / 180, rel=1e-8)
        sub = m[m["subject"] == r.subject]
        resid.append(sub["mass"].to_numpy() - w(sub["time"].to_numpy(dtype=float)))
    resid = np.concatenate(resid)
    # weighing scatter sd 0.3 kg (README), rounding to 0.1 kg adds 0.1/sqrt(12)
    assert abs(resid.mean()) < 3 * 0.3 / math.sqrt(resid.size)
    assert 0.8 * 0.3 < resid.std(ddof=1) < 1.25 * 0.3
    # fish: each fish's own exponential curve, rounded to 0.01 g
    fish = truth[(truth["level"] == "animal") & (truth["isotope"] == "d15N")
                 & (truth["group"] == "batch1")].set_index("subject")
    fm = load_demo("fish_masses").set_index("subject")
    want = fish["growth_w0"] * np.exp(fish["growth_k"] * fm["time"])
    np.testing.assert_allclose(fm["mass"], want.loc[fm.index], atol=0.0051)
    assert 1.5 < fm.loc[fm["time"] == 0, "mass"].mean() < 2.5
    assert 10 < fm.loc[fm["time"] == 70, "mass"].mean() < 22


def _closed_form(r, t, switches):
    """Tissue δ by hand: growth-dilution step responses (Hesslein et al. 1993; DESIGN §2).

    After a switch at s the old material left is (W(s)/W(t)) exp(-k (t - s)) per pool;
    diet values alternate old, new, old, ... at the switch times.
    """
    k = np.atleast_1d(r["rate"])
    f = np.atleast_1d(r["fraction"])
    levels = [r["plateau_old"], r["plateau_new"]]
    if r["growth"] == "logistic":
        def logw(x):
            return -np.log1p(np.exp(-r["growth_k"] * (x - r["growth_ti"])))
    elif r["growth"] == "exponential":
        def logw(x):
            return r["growth_k"] * x
    else:
        def logw(x):
            return 0.0 * x
    y = np.full(t.shape, levels[0])
    for j, s in enumerate(switches):
        before, after = levels[j % 2], levels[(j + 1) % 2]
        tau = t - s
        left = np.exp(logw(s) - logw(t))[None, :] * np.exp(-np.outer(k, np.maximum(tau, 0)))
        step = (after - before) * (1 - f @ left)
        y = y + np.where(tau > 0, step, 0.0)
    return y


@pytest.mark.parametrize("name", list(SAMPLE_FILES))
def test_samples_scatter_about_the_true_curves_as_the_noise_model_says(name, truth):
    """Residuals about the hand-computed truth: mean 0, sd √(0.2² + sd²) (README)."""
    raw = load_demo(name)
    first = raw[raw["replicate"] == 1]
    animal = truth[truth["level"] == "animal"]
    z = []
    for (subject, tissue, isotope), rows in first.groupby(["subject", "tissue", "isotope"]):
        tr = animal[(animal["subject"] == subject) & (animal["tissue"] == tissue)
                    & (animal["isotope"] == isotope)].sort_values("pool")
        r = tr.iloc[0].to_dict()
        r["rate"], r["fraction"] = tr["rate"].to_numpy(), tr["fraction"].to_numpy()
        switches = [0.0, 120.0] if tr["group"].iloc[0] == "B" and name == "goat_samples" \
            else [0.0]
        t = rows["time"].to_numpy(dtype=float)
        y = _closed_form(r, t, switches)
        total = np.sqrt(0.2**2 + rows["sd"].to_numpy() ** 2)
        z.append((rows["value"].to_numpy() - y) / total)
    z = np.concatenate(z)
    assert abs(z.mean()) < 3.5 / math.sqrt(z.size)
    assert 0.8 < z.std(ddof=1) < 1.25
    # replicate pairs differ by the analytic error only: sd of the difference √2 · sd
    pairs = raw.pivot_table(index=["subject", "tissue", "isotope", "time"],
                            columns="replicate", values=["value", "sd"]).dropna()
    d = (pairs[("value", 2)] - pairs[("value", 1)]) / (math.sqrt(2) * pairs[("sd", 1)])
    assert 0.6 < d.std(ddof=1) < 1.45


class _KnownLogistic:
    """The goat's true growth curve from truth.csv (logistic; only predict is needed)."""

    def __init__(self, winf, k, ti):
        self.winf, self.k, self.ti = winf, k, ti

    def predict(self, t):
        return self.winf / (1 + np.exp(-self.k * (np.asarray(t, dtype=float) - self.ti)))


@pytest.mark.parametrize("goat", ["G02", "G05"])
def test_one_pool_fit_recovers_red_cell_half_life(goat, truth):
    r = truth[(truth["subject"] == goat) & (truth["tissue"] == "red_cells")].iloc[0]
    d = load_demo("goat_diets")
    rows = d[(d["group"] == r["group"]) & (d["isotope"] == "d13C")]
    diet = iso.DietHistory.from_table(rows)
    s = load_demo("goat_samples")
    sub = s[(s["subject"] == goat) & (s["tissue"] == "red_cells")]
    curve = _KnownLogistic(r["growth_winf"], r["growth_k"], r["growth_ti"])
    fit = iso.TurnoverModel(1, diet=diet, growth=curve).fit(sub, warn=False)
    hl = fit.half_lives().iloc[0]
    assert hl["lower"] <= r["half_life"] <= hl["upper"]
    assert hl["upper"] - hl["lower"] < 0.3 * r["half_life"]          # a usable estimate
    assert fit.values["discrimination"] == pytest.approx(r["discrimination_old"], abs=0.3)
