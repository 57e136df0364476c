"""Tests of ``isoturnover clock`` and its glue (isoturnover/clockrun.py).

The captive fits are those of the invented demo goats (plasma and red-cell δ13C; fitted here
without body masses, which is quick), the field animals those of the invented field scenario
(sample_data/field_samples.csv), whose true times since the diet change the generator wrote
into field_truth.csv (sample_data/make_demo.py, invented data).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

import isoturnover as iso
from isoturnover.cli import main
from isoturnover.clockrun import read_field, resolve_tissues, run_clock
from isoturnover.conventions import CAUTION
from isoturnover.demo import demo_path, load_demo
from isoturnover.errors import DataError

NEW = "plasma=-10.5,red_cells=-11"   # maize -12.5 ‰ + the population separations (truth)
OLD = "plasma=-25.5,red_cells=-26"   # hay -27.5 ‰ + the same


@pytest.fixture(scope="module")
def fits_json(tmp_path_factory):
    """fits.json of the demo goats' δ13C series (no masses: incorporation rates)."""
    d = tmp_path_factory.mktemp("captive")
    s = load_demo("goat_samples")
    s[s["isotope"] == "d13C"].to_csv(d / "goats.csv", index=False)
    a = iso.analyse(d / "goats.csv", diets=demo_path("goat_diets"), ci="asymptotic")
    path = d / "fits.json"
    path.write_text(json.dumps(a.fits_json()), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def truth():
    t = load_demo("field_truth")
    return t.groupby("subject")["time_since_switch"].first()


def _one_error_line(err):
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: "), err
    return lines[0]


def _covered(results, truth):
    r = results.set_index("subject")
    t = truth.loc[r.index]
    return int(((r["lower"] <= t) & (t <= r["upper"])).sum())


def test_clock_on_the_demo_field_goats(tmp_path, fits_json, truth, capsys):
    out = tmp_path / "clock"
    code = main(["clock", str(demo_path("field_samples")), "--fits", str(fits_json),
                 "--new", NEW, "--old", OLD, "--out", str(out)])
    printed = capsys.readouterr().out
    assert code == 0
    assert CAUTION in printed and "statuses:" in printed
    res = pd.read_csv(out / "clock.csv")
    assert len(res) == 12 and set(res["old_diet"]) == {"known"}
    # the invented truth (make_demo.py) inside the 95 % intervals for most animals; the
    # captive rates here are incorporation rates of growing yearlings (about 10 % faster than
    # the field adults' catabolic ones), so a little bias is expected
    assert _covered(res, truth) >= 10
    status = dict(zip(res["subject"], res["status"]))
    assert status["W01"] == "too_early"        # 0.1 day: the change is not yet visible
    assert status["W12"] == "equilibrated"     # 300 days: > 7 red-cell half-lives
    assert sum(s == "ok" for s in status.values()) >= 8
    assert math.isinf(res.set_index("subject").loc["W12", "upper"])
    assert res.set_index("subject").loc["W01", "lower"] == 0.0
    kin = pd.read_csv(out / "clock_kinetics.csv")
    assert set(kin["tissue"]) == {"plasma", "red_cells"}
    assert kin["source"].str.startswith("population estimate over 8").all()
    tissues = pd.read_csv(out / "clock_tissues.csv")
    assert len(tissues) == 24
    figs = sorted(p.name for p in (out / "clock_figures").iterdir())
    assert "overview.png" in figs and "W05_d13C.png" in figs and len(figs) == 13
    assert (out / "CAUTION.txt").read_text(encoding="utf-8").strip() == CAUTION
    assert (out / ".isoturnover-manifest.json").is_file()


def test_old_diet_unknown_uses_two_tissues(fits_json, truth):
    run = run_clock(demo_path("field_samples"), fits_json,
                    new={"plasma": -10.5, "red_cells": -11.0}, max_offset=20.0)
    res = run.results
    assert set(res["old_diet"]) == {"unknown"}
    assert _covered(res, truth) >= 10
    # without the old values the interval is wider than with them (same animal, same data)
    known = run_clock(demo_path("field_samples"), fits_json,
                      new={"plasma": -10.5, "red_cells": -11.0},
                      old={"plasma": -25.5, "red_cells": -26.0}).results
    w_unknown = (res["upper"] - res["lower"]).iloc[2:8].to_numpy()
    w_known = (known["upper"] - known["lower"]).iloc[2:8].to_numpy()
    assert np.all(w_unknown > w_known)
    assert CAUTION in run.summary()


def test_one_captive_animal_and_rate_cv(fits_json):
    base = dict(new={"plasma": -10.5, "red_cells": -11.0},
                old={"plasma": -25.5, "red_cells": -26.0})
    one = run_clock(demo_path("field_samples"), fits_json, subjects=("G01",), **base)
    assert one.kinetics["source"].eq("fit of G01").all()
    assert one.kinetics["note"].str.contains("no between-animal spread").all()
    wide = run_clock(demo_path("field_samples"), fits_json, subjects=("G01",), rate_cv=0.3,
                     **base)
    # the between-animal spread widens every interval of an animal with a finite one
    ok = (one.results["status"] == "ok") & (wide.results["status"] == "ok")
    assert ok.sum() >= 6
    assert np.all((wide.results["upper"] - wide.results["lower"])[ok]
                  > (one.results["upper"] - one.results["lower"])[ok])
    with pytest.raises(DataError, match="'subjects': no captive fit .* for G99"):
        run_clock(demo_path("field_samples"), fits_json, subjects=("G99",), **base)
    with pytest.raises(DataError, match="'rate_cv' applies when one captive series"):
        run_clock(demo_path("field_samples"), fits_json, rate_cv=0.3, **base)


def test_bad_cell_is_one_line_naming_file_row_column(tmp_path, fits_json, capsys):
    lines = demo_path("field_samples").read_text(encoding="utf-8").splitlines()
    lines[4] = lines[4].replace(lines[4].split(",")[3], "abc")   # spreadsheet row 5
    f = tmp_path / "field.csv"
    f.write_text("\n".join(lines) + "\n", encoding="utf-8")
    out = tmp_path / "o"
    code = main(["clock", str(f), "--fits", str(fits_json), "--new", NEW, "--out", str(out)])
    assert code == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "field.csv, row 5, column 'value'" in line and "'abc' is not a number" in line
    assert not out.exists()
    # with --drop-bad-rows the row is dropped with a warning naming it, the rest dated (the
    # old diet given: the animal left with one tissue needs it)
    code = main(["clock", str(f), "--fits", str(fits_json), "--new", NEW, "--old",
                 "plasma=-25.5,red_cells=-26", "--out", str(out), "--no-figures",
                 "--drop-bad-rows"])
    assert code == 0
    assert "dropped 1 of 24 rows" in capsys.readouterr().err
    got = pd.read_csv(out / "clock.csv")
    assert len(got) == len(pd.read_csv(demo_path("field_samples"))["subject"].unique())


def test_missing_fits_file(tmp_path, capsys):
    code = main(["clock", str(demo_path("field_samples")), "--fits",
                 str(tmp_path / "nope.json"), "--new", NEW, "--out", str(tmp_path / "o")])
    assert code == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "nope.json" in line


def test_unknown_tissue_names_row_and_the_fits_tissues(tmp_path, fits_json, capsys):
    f = tmp_path / "field.csv"
    f.write_text("subject,tissue,value,sd\nX1,plasma,-12,0.4\nX1,liver,-14,0.4\n",
                 encoding="utf-8")
    code = main(["clock", str(f), "--fits", str(fits_json), "--new", NEW,
                 "--out", str(tmp_path / "o")])
    assert code == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "field.csv, row 3, column 'tissue'" in line
    assert "'liver' is not a tissue of the captive fits" in line
    assert "plasma d13C, red_cells d13C" in line


def test_rows_without_new_value_sd_or_old(tmp_path, fits_json):
    f = tmp_path / "field.csv"
    f.write_text("subject,tissue,value,sd,old\nX1,plasma,-12,0.4,\n", encoding="utf-8")
    with pytest.raises(DataError, match=r"row 2, column 'new': blank, and --new"):
        run_clock(f, fits_json)
    with pytest.raises(DataError, match=r"row 2, column 'old': blank; one tissue needs"):
        run_clock(f, fits_json, new={"plasma": -10.5})
    # one tissue with its old value: the one-tissue clock
    r = run_clock(f, fits_json, new={"plasma": -10.5}, old={"plasma": -25.5})
    assert r.results["n_tissues"].iat[0] == 1 and r.results["status"].iat[0] == "ok"
    g = tmp_path / "nosd.csv"
    g.write_text("subject,tissue,value\nX1,plasma,-12\n", encoding="utf-8")
    with pytest.raises(DataError, match=r"row 2, column 'sd': blank, and --sd"):
        run_clock(g, fits_json, new={"plasma": -10.5}, old={"plasma": -25.5})


def test_second_run_is_refused_without_force(tmp_path, fits_json, capsys):
    out = tmp_path / "o"
    args = ["clock", str(demo_path("field_samples")), "--fits", str(fits_json), "--new", NEW,
            "--old", OLD, "--out", str(out), "--no-figures"]
    assert main(args) == 0
    (out / "my_notes.txt").write_text("mine", encoding="utf-8")
    before = (out / "clock.csv").read_bytes()
    capsys.readouterr()
    assert main(args) == 2
    assert "not empty" in _one_error_line(capsys.readouterr().err)
    assert (out / "clock.csv").read_bytes() == before
    assert main(args + ["--force"]) == 0
    assert (out / "my_notes.txt").read_text(encoding="utf-8") == "mine"   # the user's file kept


def test_formula_cells_are_neutralised(tmp_path, fits_json):
    f = tmp_path / "field.csv"
    f.write_text('subject,tissue,value,sd\n"=HYPERLINK(1)",plasma,-12,0.4\n'
                 '"=HYPERLINK(1)",red_cells,-20,0.4\n', encoding="utf-8")
    out = tmp_path / "o"
    assert main(["clock", str(f), "--fits", str(fits_json), "--new", NEW, "--out", str(out),
                 "--no-figures"]) == 0
    assert "'=HYPERLINK(1)" in (out / "clock.csv").read_text(encoding="utf-8")


def test_argument_errors_are_one_line(tmp_path, capsys):
    for bad in (["--new", "plasma"], ["--new", "plasma=x"], ["--level", "2"],
                ["--subjects", "G01,,G02"], ["--max-offset", "-1"]):
        with pytest.raises(SystemExit) as e:
            main(["clock", "f.csv", "--fits", "x.json"] + bad)
        assert e.value.code == 2
        _one_error_line(capsys.readouterr().err)
    with pytest.raises(SystemExit) as e:
        main(["clock", "f.csv"])                      # --fits is required
    assert e.value.code == 2
    assert "--fits" in _one_error_line(capsys.readouterr().err)


def test_read_field_checks_and_does_not_mutate():
    frame = pd.DataFrame({"animal": ["a", "a", "b"], "tissue": ["plasma", "red_cells", "plasma"],
                          "value": [-12.0, -20.0, -11.0], "isotope": ["d13C", "d13C", "d13X"]})
    copy = frame.copy()
    with pytest.raises(DataError, match=r"index 2, column 'isotope': unknown isotope code"):
        read_field(frame, columns={"animal": "subject"})
    pd.testing.assert_frame_equal(frame, copy)
    ok = read_field(frame.iloc[:2], columns={"animal": "subject"})
    assert list(ok["subject"]) == ["a", "a"] and ok["sd"].isna().all()
    with pytest.raises(DataError, match=r"subject 'a' has tissue 'plasma' twice"):
        read_field(pd.DataFrame({"subject": ["a", "a"], "tissue": ["plasma", "plasma"],
                                 "value": [1.0, 2.0]}))
    with pytest.raises(DataError, match="missing required column 'value'"):
        read_field(pd.DataFrame({"subject": ["a"], "tissue": ["plasma"]}))


def test_resolve_tissues_asks_for_the_isotope_when_ambiguous():
    class _Fit:  # what resolve_tissues reads of a fit: its data_info
        def __init__(self, tissue, isotope):
            self.data_info = {"tissue": tissue, "isotope": isotope}

    fits = [{"part": "p", "key": {"subject": "a"}, "fit": _Fit("plasma", "d13C")},
            {"part": "p", "key": {"subject": "a"}, "fit": _Fit("plasma", "d15N")}]
    got = resolve_tissues(fits, [("plasma", None), ("plasma", "d15N"), ("plasma", "d34S")])
    assert "several isotopes (d13C, d15N); add an 'isotope' column" in got[("plasma", None)]
    assert got[("plasma", "d15N")] == ("plasma", "d15N")
    assert "not d34S" in got[("plasma", "d34S")]


@pytest.mark.slow
def test_clock_after_isoturnover_demo(tmp_path, truth, capsys):
    """The documented sequence: ``isoturnover demo --out D``, then ``isoturnover clock``."""
    d = tmp_path / "D"
    assert main(["demo", "--out", str(d), "--no-figures"]) == 0
    out = tmp_path / "C"
    assert main(["clock", str(demo_path("field_samples")), "--fits", str(d / "fits.json"),
                 "--new", NEW, "--old", OLD, "--out", str(out), "--no-figures"]) == 0
    res = pd.read_csv(out / "clock.csv")
    assert _covered(res, truth) >= 11   # catabolic rates here: the field adults' own kind
    assert {"ok", "too_early", "equilibrated"} <= set(res["status"])


def test_part_and_isotope_select(fits_json):
    base = dict(new={"plasma": -10.5, "red_cells": -11.0},
                old={"plasma": -25.5, "red_cells": -26.0})
    with pytest.raises(DataError, match="no captive fit of tissue 'plasma' .* in part 'nope'"):
        run_clock(demo_path("field_samples"), fits_json, part="nope", **base)
    with pytest.raises(DataError, match="field_samples.csv: no row of isotope 'd15N'"):
        run_clock(demo_path("field_samples"), fits_json, isotope="d15N", **base)
    parts = {e["part"] for e in iso.load_fits(fits_json)}
    r = run_clock(demo_path("field_samples"), fits_json, part=parts.pop(), isotope="d13C",
                  **base)
    assert len(r.results) == 12


def test_a_tissue_wide_plateau_is_refused_for_a_tissue_in_several_isotopes():
    # a δ13C plateau must not silently stand for δ15N: a tissue-only key is refused when the
    # field rows hold the tissue in two isotopes, a (tissue, isotope) key is taken
    from isoturnover.clockrun import _per_tissue

    with pytest.raises(DataError, match=r"'new' \(--new\) gives one value for tissue "
                                        r"'plasma', but the field rows hold it in d13C, d15N"):
        _per_tissue("new", {"plasma": -10.5}, "plasma", "d15N", ("d13C", "d15N"))
    assert _per_tissue("new", {("plasma", "d15N"): 6.0, "plasma": -10.5}, "plasma", "d15N",
                       ("d13C", "d15N")) == 6.0
    assert _per_tissue("new", {"plasma": -10.5}, "plasma", "d13C", ("d13C",)) == -10.5
    with pytest.raises(DataError, match=r"'old' \(--old\): the value for 'plasma' must be a "
                                        r"number"):
        _per_tissue("old", {"plasma": "abc"}, "plasma", "d13C", ("d13C",))
