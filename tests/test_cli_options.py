"""Every option of `isoturnover fit` on the demo data: each one reaches the library and changes
what is fitted as it should (dates, units, column names and time units give the numbers of
the plain table; model options show in the fitted parameters); every bad value is one line
`error: ...` naming the option, exit status 2, nothing written."""

import re

import numpy as np
import pandas as pd
import pytest

from isoturnover import analysis, load_fits
from isoturnover.cli import build_parser, main
from isoturnover.demo import demo_path

SWITCH = {"A": pd.Timestamp("2024-03-01"), "B": pd.Timestamp("2024-04-15")}
FAST = ["--no-figures", "--no-progress", "--ci", "asymptotic", "--pools", "1",
        "--per-diet-separation", "no"]


def goats(subjects=("G01",), tissue="plasma", isotope="d13C"):
    """Demo goat samples of a few animals, one tissue and isotope (a fast subset)."""
    s = pd.read_csv(demo_path("goat_samples"))
    return s[s["subject"].isin(subjects) & (s["tissue"] == tissue)
             & (s["isotope"] == isotope)].reset_index(drop=True)


def diets():
    return pd.read_csv(demo_path("goat_diets"))


def masses(subjects=("G01",)):
    m = pd.read_csv(demo_path("goat_masses"))
    return m[m["subject"].isin(subjects)].reset_index(drop=True)


def as_dates(frame, time_col, by_group, date_col="date", groups=None):
    """Times (days since each group's switch) written as ISO dates, the time column
    replaced; ``groups`` maps subject -> group for a table without a group column."""
    out = frame.copy()
    g = out["group"] if "group" in out.columns else out["subject"].map(groups)
    base = g.map(SWITCH) if by_group else pd.Series(SWITCH["A"], index=out.index)
    when = base + pd.to_timedelta(out[time_col], unit="D")
    out = out.drop(columns=[time_col])
    out[date_col] = when.dt.strftime("%Y-%m-%d")
    return out


def fit(tmp_path, name, samples, *args, capsys=None):
    """Run `isoturnover fit` on a frame written to CSV; (results.csv, chosen fits)."""
    f = tmp_path / f"{name}.csv"
    samples.to_csv(f, index=False, float_format="%.15g")
    out = tmp_path / f"out_{name}"
    code = main(["fit", str(f), "--out", str(out), *FAST, *map(str, args)])
    err = capsys.readouterr().err if capsys is not None else ""
    assert code == 0, err
    entries = load_fits(out / "fits.json")
    return pd.read_csv(out / "results.csv"), [e["fit"] for e in entries if e["chosen"]]


def write(tmp_path, name, frame):
    f = tmp_path / f"{name}.csv"
    frame.to_csv(f, index=False, float_format="%.15g")
    return f


def same_half_lives(a, b, rtol=1e-9):
    cols = ["subject", "tissue", "isotope", "candidate", "half_life_1", "lower_1", "upper_1"]
    pd.testing.assert_frame_equal(a[cols], b[cols], check_exact=False, rtol=rtol)


# ----------------------------------------------------------------------------------------
# dates: one switch date, one per group (a table, a column, the diets table), date formats
# ----------------------------------------------------------------------------------------
def test_switch_date_turns_dates_of_samples_diets_and_masses_into_times(tmp_path, capsys):
    d, m = write(tmp_path, "diets", diets()), write(tmp_path, "masses", masses())
    ref, ref_fits = fit(tmp_path, "times", goats(), "--diets", d, "--masses", m,
                        capsys=capsys)
    dd = write(tmp_path, "diets_dated", as_dates(diets(), "start", False, date_col="start"))
    md = write(tmp_path, "masses_dated", as_dates(masses(), "time", False,
                                                  groups={"G01": "A"}))
    got, got_fits = fit(tmp_path, "dates", as_dates(goats(), "time", False), "--diets", dd,
                        "--masses", md, "--switch-date", "2024-03-01", capsys=capsys)
    # the same times, hence the same fit (the dates were made from the times above)
    same_half_lives(got, ref)
    assert got_fits[0].model.config()["growth"] is not None  # the masses were used
    # a diets table in times is kept as times beside dated samples
    got2, _ = fit(tmp_path, "dates2", as_dates(goats(), "time", False), "--diets", d,
                  "--masses", md, "--switch-date", "2024-03-01", capsys=capsys)
    same_half_lives(got2, ref)


def test_date_format_reads_day_first_dates_and_switch_date(tmp_path, capsys):
    ref, _ = fit(tmp_path, "times", goats(), capsys=capsys)
    dated = as_dates(goats(), "time", False)
    dated["date"] = pd.to_datetime(dated["date"]).dt.strftime("%d/%m/%Y")
    got, _ = fit(tmp_path, "dmy", dated, "--switch-date", "01/03/2024", "--date-format",
                 "%d/%m/%Y", capsys=capsys)
    same_half_lives(got, ref)  # 01/03/2024 read day first is 2024-03-01, the switch above


def test_switch_dates_per_group_from_table_column_and_diets(tmp_path, capsys):
    two = goats(("G01", "G05"))          # G01 in pen A, G05 in pen B (demo data)
    d = write(tmp_path, "diets", diets())
    ref, _ = fit(tmp_path, "times", two, "--diets", d, capsys=capsys)
    dated = as_dates(two, "time", True)  # pen B switched 45 days after pen A
    # a table of switch dates, one per group
    table = write(tmp_path, "switches", pd.DataFrame(
        {"group": list(SWITCH), "switch_date": [v.date().isoformat() for v in SWITCH.values()]}))
    got, _ = fit(tmp_path, "table", dated, "--diets", d, "--switch-dates", table,
                 capsys=capsys)
    same_half_lives(got, ref)
    # a column of the samples holding each row's switch date
    with_col = dated.assign(switched=dated["group"].map(lambda g: SWITCH[g].date().isoformat()))
    got, _ = fit(tmp_path, "column", with_col, "--diets", d, "--switch-dates", "switched",
                 capsys=capsys)
    same_half_lives(got, ref)
    # the diets table in dates: each pen's first diet change is its switch date
    dd = write(tmp_path, "diets_dated", as_dates(diets(), "start", True, date_col="start"))
    got, fits = fit(tmp_path, "diets", dated, "--diets", dd, "--switch-dates", "diets",
                    capsys=capsys)
    same_half_lives(got, ref)
    # pen B's return to hay on day 120 (demo diets) is kept, in days since its own switch
    b = [f for f in fits if f.model.config()["diet"]["changes"][-1][0] > 100][0]
    assert b.model.config()["diet"]["changes"] == [[0.0, -12.5], [120.0, -27.5]]


def test_one_switch_date_per_group_cannot_mix_with_one_for_all(tmp_path, capsys):
    f = write(tmp_path, "s", as_dates(goats(), "time", False))
    with pytest.raises(SystemExit) as e:
        main(["fit", str(f), "--out", str(tmp_path / "o"), "--switch-date", "2024-03-01",
              "--switch-dates", "diets"])
    assert e.value.code == 2
    err = capsys.readouterr().err
    assert_one_error_line(err)
    assert "argument --switch-dates" in err and "--switch-date" in err
    code = main(["fit", str(f), "--out", str(tmp_path / "o"), "--switch-dates", "diets"])
    assert code == 2
    err = capsys.readouterr().err
    assert_one_error_line(err)
    assert "--switch-dates diets" in err and "--diets" in err
    assert not (tmp_path / "o").exists()


# ----------------------------------------------------------------------------------------
# units of value, column names, time unit, series keys
# ----------------------------------------------------------------------------------------
def test_atom_percent_and_atom_percent_excess_are_converted_not_fitted_as_delta(tmp_path,
                                                                                capsys):
    from isoturnover.isotopes import delta_to_atom_percent, delta_to_atom_percent_excess

    plain = goats()
    ref, (rf,) = fit(tmp_path, "delta", plain, capsys=capsys)

    def converted(to_atoms):
        """values and sd in atom units: x(δ), and s_x = |dx/dδ| s_δ (first order, as
        read_samples propagates it back; dx/dδ by a central difference, x is smooth)."""
        d = plain["value"].to_numpy()
        slope = (to_atoms(d + 1e-3) - to_atoms(d - 1e-3)) / 2e-3
        return plain.assign(value=to_atoms(d), sd=np.abs(slope) * plain["sd"].to_numpy())

    # δ -> atom % by the library's own conversion (VPDB ratio); read back to δ it is the
    # same series, so the same fit (to ~1e-6), plateau in ‰ included
    ap = converted(lambda d: delta_to_atom_percent(d, "d13C"))
    got, (f,) = fit(tmp_path, "ap", ap, "--unit", "atom_percent", capsys=capsys)
    same_half_lives(got, ref, rtol=1e-6)
    assert np.isclose(f.params["delta_eq"].value, rf.params["delta_eq"].value, rtol=1e-6)
    assert f.params["delta_eq"].value < -5  # δ13C ‰, not atom % (~1.08 %)
    ape = converted(lambda d: delta_to_atom_percent_excess(d, "d13C", -30.0))
    got, (f,) = fit(tmp_path, "ape", ape, "--unit", "atom_percent_excess", "--baseline",
                    "d13C=-30", capsys=capsys)
    same_half_lives(got, ref, rtol=1e-6)
    assert np.isclose(f.params["delta_eq"].value, rf.params["delta_eq"].value, rtol=1e-6)


def test_column_names_of_the_three_tables(tmp_path, capsys):
    d, m = write(tmp_path, "diets", diets()), write(tmp_path, "masses", masses())
    ref, _ = fit(tmp_path, "plain", goats(), "--diets", d, "--masses", m, capsys=capsys)
    s = goats().rename(columns={"subject": "animal", "time": "day", "value": "d13C_permil"})
    dr = write(tmp_path, "diets_r", diets().rename(columns={"group": "pen", "start": "from"}))
    mr = write(tmp_path, "masses_r", masses().rename(columns={"subject": "animal",
                                                              "mass": "kg"}))
    got, _ = fit(tmp_path, "renamed", s, "--columns", "subject=animal,time=day,"
                 "value=d13C_permil", "--diets", dr, "--diet-columns", "group=pen,start=from",
                 "--masses", mr, "--mass-columns", "subject=animal,mass=kg", capsys=capsys)
    same_half_lives(got, ref)


def test_time_unit_hours(tmp_path, capsys):
    b = pd.read_csv(demo_path("goat_breath"))
    b = b[b["subject"] == "G01"]
    hours, _ = fit(tmp_path, "h", b, "--time-unit", "h", capsys=capsys)
    days, _ = fit(tmp_path, "d", b, capsys=capsys)
    # the same numbers in another unit: the same half-life, labelled with its unit
    same_half_lives(hours, days)
    assert set(hours["time_unit"]) == {"h"} and set(days["time_unit"]) == {"d"}


def test_by_columns_of_a_destructive_design(tmp_path, capsys):
    fish = pd.read_csv(demo_path("fish_samples"))
    fish = fish[fish["isotope"] == "d13C"]
    got, _ = fit(tmp_path, "fish", fish, "--by", "tissue,isotope", capsys=capsys)
    # one series: every fish's muscle (one fish per sampling time in the demo)
    assert list(got["tissue"]) == ["muscle"] and got["nobs"].iloc[0] > 10
    for bad in (",", "tissue,,isotope", "fish"):
        code = main(["fit", str(tmp_path / "fish.csv"), "--out", str(tmp_path / "o"),
                     "--by", bad])
        assert code == 2
        err = capsys.readouterr().err
        assert_one_error_line(err)
        # names the option and the known columns of the table
        assert "--by" in err and "subject, tissue, isotope, group, time, value" in err, err
    assert not (tmp_path / "o").exists()


# ----------------------------------------------------------------------------------------
# model options: each reaches fit_each and shows in the fit
# ----------------------------------------------------------------------------------------
def test_model_options_reach_the_fits(tmp_path, capsys, monkeypatch):
    seen = {}
    real = analysis.fit_each

    def spy(samples, **kwargs):
        seen.update(kwargs)
        return real(samples, **kwargs)

    monkeypatch.setattr(analysis, "fit_each", spy)
    d = write(tmp_path, "diets", diets())
    plain, (pf,) = fit(tmp_path, "plain", goats(), "--diets", d, capsys=capsys)
    assert (pf.loss, pf.absolute_sigma) == ("linear", False)
    got, (f,) = fit(tmp_path, "opts", goats(), "--diets", d, "--lag", "--separation",
                    "epsilon", "--initial-state", "free", "--loss", "soft_l1", "--known-sd",
                    "--criterion", "bic", "--fix", "delta0=-25.47", capsys=capsys)
    assert {k: seen[k] for k in ("lag", "separation", "initial", "loss", "absolute_sigma",
                                 "criterion", "fixed")} == {
        "lag": True, "separation": "epsilon", "initial": "free", "loss": "soft_l1",
        "absolute_sigma": True, "criterion": "bic", "fixed": {"delta0": -25.47}}
    config = f.model.config()
    assert (config["lag"], config["separation"], config["initial"]) == (True, "epsilon",
                                                                       "free")
    assert {"delta0", "epsilon", "lag"} <= set(f.params) and "discrimination" not in f.params
    assert f.params["delta0"].value == -25.47 and not f.params["delta0"].vary
    assert (f.loss, f.absolute_sigma) == ("soft_l1", True)
    # a fit of the same series with more freedom moves the half-life (not the same run)
    assert got["half_life_1"].iloc[0] != plain["half_life_1"].iloc[0]


def test_chain_and_pools(tmp_path, capsys):
    s = goats()
    f = write(tmp_path, "s", s)
    out = tmp_path / "o"
    code = main(["fit", str(f), "--out", str(out), "--no-figures", "--no-progress", "--ci",
                 "asymptotic", "--pools", "1,2", "--chain"])
    assert code == 0, capsys.readouterr().err
    tab = pd.read_csv(out / "results.csv")
    assert list(tab["candidate"]) == ["1 pool", "2 pools", "chain"]


# ----------------------------------------------------------------------------------------
# bad values: one line naming the option, exit status 2, nothing written
# ----------------------------------------------------------------------------------------
def assert_one_error_line(err):
    lines = [ln for ln in err.strip().splitlines() if ln.strip()]
    assert len(lines) == 1, err
    assert lines[0].startswith("error: "), err
    assert "Traceback" not in err and "usage:" not in err


BAD = [
    (["--pools", "0"], "--pools"), (["--pools", "1,1"], "--pools"), (["--pools", "x"], "--pools"),
    (["--level", "1.5"], "--level"), (["--level", "x"], "--level"),
    (["--n-boot", "0"], "--n-boot"), (["--time-unit", "yr"], "--time-unit"),
    (["--date-format", "dd/mm/yyyy"], "--date-format"),
    (["--growth-curve", "cubic"], "--growth-curve"),
    (["--columns", "subject"], "--columns"), (["--columns", "animal=subject"], "--columns"),
    (["--columns", "subject=a,tissue=a"], "--columns"),
    (["--diet-columns", "time=day"], "--diet-columns"),
    (["--mass-columns", "weight=kg"], "--mass-columns"),
    (["--switch-date", "2024-02-30"], "--switch-date"),
    (["--switch-date", "03/04/2024"], "--switch-date"),
    (["--unit", "permil"], "--unit"), (["--unit", "atom_percent_excess"], "--unit"),
    (["--baseline", "-25"], "--baseline"),
    (["--unit", "atom_percent_excess", "--baseline", "x"], "--baseline"),
    (["--separation", "ratio"], "--separation"), (["--initial-state", "zero"], "--initial-state"),
    (["--per-diet-separation", "maybe"], "--per-diet-separation"),
    (["--fix", "delta0"], "--fix"), (["--fix", "delta0=abc"], "--fix"),
    (["--fix", "k1=inf"], "--fix"), (["--loss", "cauchy"], "--loss"),
    (["--criterion", "r2"], "--criterion"), (["--ci", "bayes"], "--ci"),
    (["--jobs", "0"], "--jobs"), (["--by"], "--by"), (["--bogus"], "--bogus"),
]


@pytest.mark.parametrize("argv, option", BAD, ids=[" ".join(a) for a, _ in BAD])
def test_bad_value_one_error_line_naming_the_option(argv, option, tmp_path, capsys):
    f = write(tmp_path, "s", goats())
    out = tmp_path / "o"
    with pytest.raises(SystemExit) as e:
        main(["fit", str(f), "--out", str(out), *argv])
    assert e.value.code == 2
    err = capsys.readouterr().err
    assert_one_error_line(err)
    assert option in err, err
    assert not out.exists()


@pytest.mark.parametrize("argv", [["demo", "--jobs", "x"], ["demo", "--bogus"],
                                  ["demo", "extra"], ["fit"], ["nocommand"], ["--bogus"]])
def test_every_sub_command_gives_one_error_line(argv, capsys):
    with pytest.raises(SystemExit) as e:
        main(argv)
    assert e.value.code == 2
    assert_one_error_line(capsys.readouterr().err)


def test_help_has_one_line_per_option(capsys):
    parser = build_parser()
    for name, sub in parser.commands.items():
        text = sub.format_help()
        options = text[text.index("options:"):].splitlines()[1:]
        assert options, name
        for line in options:
            # every line starts with an option and holds its help: no continuation lines
            assert re.match(r"  -", line), (name, line)
            assert len(line) <= 100, (name, line)
        wanted = [a.option_strings[-1] for a in sub._actions if a.option_strings]
        assert len(options) == len(wanted), name


def test_switch_dates_file_not_found_is_named(tmp_path, capsys):
    f = write(tmp_path, "s", as_dates(goats(), "time", False))
    code = main(["fit", str(f), "--out", str(tmp_path / "o"), "--switch-dates",
                 str(tmp_path / "nope.csv")])
    assert code == 2
    err = capsys.readouterr().err
    assert_one_error_line(err)
    assert "nope.csv" in err and "not found" in err, err


def test_readme_lists_every_option_of_fit():
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    section = readme[readme.index("### Command-line options"):]
    fit = build_parser().commands["fit"]
    for action in fit._actions:
        for name in action.option_strings:
            if name.startswith("--") and name != "--help":
                assert re.search(rf"(?<![\w-]){re.escape(name)}(?![\w-])", section), name


def test_drop_bad_rows_drops_and_lists_them_and_the_fit_is_the_clean_one(tmp_path, capsys):
    clean = goats()
    dirty = clean.copy().astype({"value": object})
    dirty = pd.concat([dirty, dirty.iloc[[3]].assign(value="n/a")], ignore_index=True)
    f = write(tmp_path, "dirty", dirty)
    # without the option: one line naming the file, row and column, and the option
    assert main(["fit", str(f), "--out", str(tmp_path / "o1"), *FAST]) == 2
    err = capsys.readouterr().err
    assert re.search(r"row \d+, column 'value'", err) and "--drop-bad-rows" in err
    a, _ = fit(tmp_path, "clean", clean, capsys=capsys)
    b, _ = fit(tmp_path, "dirty2", dirty, "--drop-bad-rows", capsys=None)
    same_half_lives(a, b)


def test_scale_atom_fraction_reaches_each_series_model(tmp_path, capsys):
    # near natural abundance the atom-fraction and δ mixing scales give almost the same
    # half-lives (the mixing is nearly linear in δ there); the fits are on the asked scale
    a, _ = fit(tmp_path, "delta", goats(), capsys=capsys)
    b, fits = fit(tmp_path, "atom", goats(), "--scale", "atom_fraction", capsys=capsys)
    assert all(f.model.scale == "atom_fraction" and f.model.isotope == "d13C" for f in fits)
    assert np.allclose(a["half_life_1"], b["half_life_1"], rtol=0.02)
    with pytest.raises(SystemExit) as e:  # argparse's choices: one line, exit 2
        main(["fit", str(write(tmp_path, "x", goats())), "--scale", "ppm"])
    assert e.value.code == 2 and "--scale" in capsys.readouterr().err


@pytest.mark.parametrize("command, heading", [("plan", "### `isoturnover plan`"),
                                              ("clock", "### `isoturnover clock`")])
def test_readme_lists_every_option_of_plan_and_clock(command, heading):
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    start = readme.index(heading)
    end = readme.find("\n##", start + len(heading))  # the next heading of any level
    section = readme[start:end]
    parser = build_parser().commands[command]
    for action in parser._actions:
        for name in action.option_strings:
            if name.startswith("--") and name != "--help":
                assert re.search(rf"(?<![\w-]){re.escape(name)}(?![\w-])", section), name
