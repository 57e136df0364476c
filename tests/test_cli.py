"""The command line: every malformed file gives exit status 2, one `error:` line, and nothing
written; the demo and fit commands write their outputs; a non-empty folder is refused."""

import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from isoturnover.cli import main

GOOD = (
    "subject,tissue,isotope,time,value,sd\n"
    + "".join(
        f"a,plasma,d13C,{t},{-12 + (-25 + 12) * np.exp(-np.log(2) / 8 * t) + e:.3f},0.1\n"
        for t, e in zip([0, 1, 2, 4, 7, 10, 14, 21, 28, 42, 56, 70],
                        np.random.default_rng(4).normal(0, 0.1, 12))
    )
)

BAD_SAMPLES = {
    "empty": ("", r"empty"),
    "header_only": ("subject,tissue,isotope,time,value\n", r"no data|empty"),
    "missing_column": (GOOD.replace("time", "Tme", 1), r"time"),
    "duplicate_columns": (GOOD.replace("sd\n", "value\n", 1), r"[Dd]uplicate"),
    "non_numeric": (GOOD.replace("-25.000", "abc").replace(",0,", ",abc,", 1), r"abc"),
    "decimal_comma": (GOOD.replace(",7,", ',"7,5",', 1), r"decimal comma|7,5"),
    "blank_value": (GOOD.replace("a,plasma,d13C,4,", "a,plasma,d13C,,", 1), r"blank|time"),
    "unknown_isotope": (GOOD.replace("d13C", "13C", 1), r"13C"),
    "sd_not_positive": (GOOD.replace(",0.1\n", ",0\n", 1), r"sd"),
}


def run(argv, capsys):
    code = main(argv)
    out = capsys.readouterr()
    return code, out.out, out.err


def assert_one_error_line(err):
    lines = [ln for ln in err.strip().splitlines() if ln.strip()]
    assert len(lines) == 1, err
    assert lines[0].startswith("error: "), err
    assert "Traceback" not in err


@pytest.mark.parametrize("case", sorted(BAD_SAMPLES))
def test_malformed_samples_exit_2_one_line_nothing_written(case, tmp_path, capsys):
    text, pattern = BAD_SAMPLES[case]
    f = tmp_path / "samples.csv"
    f.write_text(text, encoding="utf-8")
    out = tmp_path / "out"
    code, _, err = run(["fit", str(f), "--out", str(out), "--no-figures"], capsys)
    assert code == 2
    assert_one_error_line(err)
    import re

    assert re.search(pattern, err), err
    assert not out.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["samples.csv"]


def test_missing_file(tmp_path, capsys):
    code, _, err = run(["fit", str(tmp_path / "nope.csv"), "--out", str(tmp_path / "o")],
                       capsys)
    assert code == 2
    assert_one_error_line(err)
    assert "nope.csv" in err
    assert not (tmp_path / "o").exists()


def test_binary_file(tmp_path, capsys):
    f = tmp_path / "samples.csv"
    f.write_bytes(b"subject,tissue\x00\xff\xfe,isotope\n\x89PNG\x00\x00")
    code, _, err = run(["fit", str(f), "--out", str(tmp_path / "o")], capsys)
    assert code == 2
    assert_one_error_line(err)
    assert "UTF-8" in err or "text" in err


def test_bad_dates_in_samples(tmp_path, capsys):
    f = tmp_path / "samples.csv"
    f.write_text("subject,tissue,isotope,date,value\na,plasma,d13C,2024-13-45,-20\n"
                 "a,plasma,d13C,2024-01-03,-19\n", encoding="utf-8")
    code, _, err = run(["fit", str(f), "--out", str(tmp_path / "o")], capsys)
    assert code == 2
    assert_one_error_line(err)


def test_bad_diets_and_masses(tmp_path, capsys):
    s = tmp_path / "samples.csv"
    s.write_text(GOOD, encoding="utf-8")
    d = tmp_path / "diets.csv"
    d.write_text("subject,isotope,start,value\na,d13C,0,-12\na,d13C,0,-26\n", encoding="utf-8")
    code, _, err = run(["fit", str(s), "--diets", str(d), "--out", str(tmp_path / "o")], capsys)
    assert code == 2
    assert_one_error_line(err)
    assert "start" in err
    m = tmp_path / "masses.csv"
    m.write_text("subject,time,mass\na,0,10\na,7,-1\na,14,12\n", encoding="utf-8")
    code, _, err = run(["fit", str(s), "--masses", str(m), "--out", str(tmp_path / "o")], capsys)
    assert code == 2
    assert_one_error_line(err)
    assert "mass" in err
    assert not (tmp_path / "o").exists()


def test_no_series_fitted_exit_2(tmp_path, capsys):
    f = tmp_path / "samples.csv"
    f.write_text("subject,tissue,isotope,time,value\na,plasma,d13C,0,-20\na,plasma,d13C,1,-19\n",
                 encoding="utf-8")
    code, _, err = run(["fit", str(f), "--out", str(tmp_path / "o")], capsys)
    assert code == 2
    assert_one_error_line(err)
    assert "no series could be fitted" in err
    assert not (tmp_path / "o").exists()


def test_fit_writes_results_and_refuses_non_empty_folder(tmp_path, capsys):
    from isoturnover import load_fits

    f = tmp_path / "samples.csv"
    f.write_text(GOOD, encoding="utf-8")
    out = tmp_path / "out"
    code, stdout, err = run(["fit", str(f), "--out", str(out), "--pools", "1,2"], capsys)
    assert code == 0, err
    names = {p.name for p in out.iterdir()}
    assert {"results.csv", "fits.json", "report.md", "report.html"} <= names
    tab = pd.read_csv(out / "results.csv")
    assert set(tab["candidate"]) == {"1 pool", "2 pools"}
    assert tab["chosen"].sum() == 1
    assert {"half_life_1", "lower_1", "upper_1", "lower_status_1"} <= set(tab.columns)
    fits = load_fits(out / "fits.json")
    chosen = [e for e in fits if e["chosen"]][0]
    # GOOD was generated above with a half-life of 8 d
    assert abs(chosen["fit"].half_lives()["half_life"].iloc[0] - 8.0) < 1.0
    assert "animal-care" in stdout
    # a second run into the same folder is refused without --force
    before = sorted((p.name, p.stat().st_mtime_ns) for p in out.rglob("*"))
    code, _, err = run(["fit", str(f), "--out", str(out)], capsys)
    assert code == 2
    assert_one_error_line(err)
    assert "--force" in err
    assert sorted((p.name, p.stat().st_mtime_ns) for p in out.rglob("*")) == before
    code, _, err = run(["fit", str(f), "--out", str(out), "--force", "--no-figures"], capsys)
    assert code == 0, err
    json.loads((out / "fits.json").read_text(encoding="utf-8"))


def test_debug_shows_traceback(tmp_path):
    # through the installed console script's module, in a subprocess
    r = subprocess.run([sys.executable, "-m", "isoturnover", "fit", str(tmp_path / "x.csv"),
                        "--debug"], capture_output=True, text=True)
    assert r.returncode != 0
    assert "Traceback" in r.stderr
    r = subprocess.run([sys.executable, "-m", "isoturnover", "fit", str(tmp_path / "x.csv")],
                       capture_output=True, text=True)
    assert r.returncode == 2
    assert r.stderr.startswith("error: ") and "Traceback" not in r.stderr


def test_help_and_version(capsys):
    assert main([]) == 0
    assert "isoturnover" in capsys.readouterr().out
    with pytest.raises(SystemExit) as e:
        main(["--version"])
    assert e.value.code == 0


def test_fit_with_jobs_gives_the_results_of_one_process(tmp_path, capsys):
    # three invented animals (half-lives 6, 8 and 10 d), so two workers share the series
    rng = np.random.default_rng(11)
    rows = ["subject,tissue,isotope,time,value,sd"]
    for subject, half_life in (("a", 6.0), ("b", 8.0), ("c", 10.0)):
        for t in (0, 1, 2, 4, 7, 10, 14, 21, 28, 42, 56, 70):
            v = -12 + (-25 + 12) * np.exp(-np.log(2) / half_life * t) + rng.normal(0, 0.1)
            rows.append(f"{subject},plasma,d13C,{t},{v:.3f},0.1")
    f = tmp_path / "samples.csv"
    f.write_text("\n".join(rows) + "\n", encoding="utf-8")
    tables = {}
    for jobs in ("1", "2"):
        out = tmp_path / f"out{jobs}"
        code, stdout, err = run(["fit", str(f), "--out", str(out), "--no-figures",
                                 "--no-progress", "--jobs", jobs], capsys)
        assert code == 0, err
        assert "fitted 3 series; 0 could not be fitted" in stdout
        tables[jobs] = pd.read_csv(out / "results.csv")
    assert len(tables["1"]) == 6
    pd.testing.assert_frame_equal(tables["2"], tables["1"], check_exact=True)


@pytest.mark.parametrize("argv, pattern", [
    (["--jobs", "0"], r"argument --jobs: must be a positive integer \(number of parallel "
                      r"workers\) or -1 \(all cores\); got '0'"),
    (["--jobs", "-3"], r"argument --jobs: .*got '-3'"),
    (["--jobs", "two"], r"argument --jobs: .*got 'two'"),
    (["--n-boot", "many"], r"argument --n-boot: must be a whole number >= 1; got 'many'"),
])
def test_bad_arguments_one_error_line_exit_2(argv, pattern, tmp_path, capsys):
    import re

    f = tmp_path / "samples.csv"
    f.write_text(GOOD, encoding="utf-8")
    out = tmp_path / "out"
    with pytest.raises(SystemExit) as e:
        main(["fit", str(f), "--out", str(out), *argv])
    assert e.value.code == 2
    err = capsys.readouterr().err
    assert_one_error_line(err)
    assert re.search(pattern, err), err
    assert not out.exists()


def test_bad_jobs_through_the_installed_command(tmp_path):
    f = tmp_path / "samples.csv"
    f.write_text(GOOD, encoding="utf-8")
    r = subprocess.run([sys.executable, "-m", "isoturnover", "fit", str(f), "--jobs", "0",
                        "--out", str(tmp_path / "o")], capture_output=True, text=True)
    assert r.returncode == 2
    assert_one_error_line(r.stderr)
    assert "--jobs" in r.stderr
    assert not (tmp_path / "o").exists()


# ----------------------------------------------------------------------------------------
# warnings reach the terminal, one line each
# ----------------------------------------------------------------------------------------
def test_jobs_without_joblib_prints_one_warning_line_and_runs_serially(tmp_path, capsys,
                                                                       monkeypatch):
    from isoturnover import groups

    monkeypatch.setattr(groups, "_joblib", None)
    f = tmp_path / "samples.csv"
    f.write_text(GOOD, encoding="utf-8")
    out = tmp_path / "out"
    code, stdout, err = run(["fit", str(f), "--out", str(out), "--no-figures",
                             "--no-progress", "--jobs", "2"], capsys)
    assert code == 0, err
    assert err.splitlines() == ["warning: --jobs=2 asks for parallel workers, but joblib is "
                                "not installed; running serially (pip install joblib, or "
                                "isoturnover[fast])"]
    assert "fitted 1 series; 0 could not be fitted" in stdout


def test_table_warnings_are_printed_once_each_on_one_line(tmp_path, capsys):
    # the same row twice: the samples reader warns (a DataWarning), the fit goes on
    f = tmp_path / "samples.csv"
    lines = GOOD.splitlines(keepends=True)
    f.write_text("".join(lines + [lines[3]]), encoding="utf-8")
    code, _, err = run(["fit", str(f), "--out", str(tmp_path / "out"), "--no-figures",
                        "--no-progress"], capsys)
    assert code == 0, err
    warned = err.splitlines()
    assert len(warned) == 1, err
    assert warned[0].startswith("warning: ") and "exact duplicates" in warned[0], err


def test_warnings_before_an_error_are_printed_too(tmp_path, capsys, monkeypatch):
    from isoturnover import groups

    monkeypatch.setattr(groups, "_joblib", None)
    f = tmp_path / "samples.csv"
    f.write_text("subject,tissue,isotope,time,value\na,plasma,d13C,0,-20\n"
                 "a,plasma,d13C,1,-19\n", encoding="utf-8")
    code, _, err = run(["fit", str(f), "--out", str(tmp_path / "o"), "--jobs", "2"], capsys)
    assert code == 2
    lines = err.splitlines()
    assert len(lines) == 2, err
    assert lines[0].startswith("warning: --jobs=2 asks for parallel workers")
    assert lines[1].startswith("error: no series could be fitted")


# ----------------------------------------------------------------------------------------
# demo --jobs
# ----------------------------------------------------------------------------------------
def test_demo_accepts_jobs_and_passes_it_on(tmp_path, capsys, monkeypatch):
    from isoturnover import analysis
    from isoturnover.cli import build_parser

    assert build_parser().parse_args(["demo", "--jobs", "-1"]).jobs == -1
    assert build_parser().parse_args(["demo"]).jobs is None  # two workers on two cores
    seen = []

    def stop_at_the_first_part(samples, **kwargs):
        seen.append(kwargs["n_jobs"])
        raise iso_data_error("stopped after the first part (test)")

    monkeypatch.setattr(analysis, "fit_each", stop_at_the_first_part)
    code, _, err = run(["demo", "--out", str(tmp_path / "o"), "--jobs", "2"], capsys)
    assert code == 2 and seen == [2], err
    assert err.splitlines() == ["error: stopped after the first part (test)"]
    assert not (tmp_path / "o").exists()
    # without --jobs: two workers where two cores are available, else one
    monkeypatch.setattr("os.sched_getaffinity", lambda pid: {0, 1, 2, 3}, raising=False)
    run(["demo", "--out", str(tmp_path / "o2")], capsys)
    monkeypatch.setattr("os.sched_getaffinity", lambda pid: {0}, raising=False)
    run(["demo", "--out", str(tmp_path / "o3")], capsys)
    assert seen[1:] == [2, 1]


def iso_data_error(message):
    from isoturnover import DataError

    return DataError(message)


@pytest.mark.parametrize("bad", ["0", "-2", "two"])
def test_demo_bad_jobs_one_error_line_exit_2(bad, tmp_path, capsys):
    with pytest.raises(SystemExit) as e:
        main(["demo", "--out", str(tmp_path / "o"), "--jobs", bad])
    assert e.value.code == 2
    err = capsys.readouterr().err
    assert_one_error_line(err)
    assert f"argument --jobs: must be a positive integer (number of parallel workers) or -1 " \
           f"(all cores); got '{bad}'" in err
    assert not (tmp_path / "o").exists()


@pytest.mark.slow
def test_demo_with_jobs_gives_the_results_of_one_process(tmp_path, capsys):
    tables = {}
    for jobs in ("1", "2"):
        out = tmp_path / f"out{jobs}"
        code, stdout, err = run(["demo", "--out", str(out), "--no-figures", "--no-progress",
                                 "--jobs", jobs], capsys)
        assert code == 0, err
        assert "could not be fitted" in stdout
        tables[jobs] = pd.read_csv(out / "results.csv")
    one, two = tables["1"], tables["2"]
    keys = ["part", "subject", "tissue", "isotope", "candidate", "status", "chosen"]
    pd.testing.assert_frame_equal(two[keys], one[keys], check_exact=True)
    # the chosen fits agree; a candidate the optimizer gives up on (a two-pool fit of one
    # goat's red cells with k2 ~ 1e-9 per day stops at maxfev) ends where the last bits of
    # the arithmetic in each process take it, and its AICc moves the weights by ~1e-13
    chosen = one["chosen"].astype(bool)
    pd.testing.assert_frame_equal(two[chosen], one[chosen], check_exact=False, rtol=1e-9)


# ----------------------------------------------------------------------------------------
# --date-format
# ----------------------------------------------------------------------------------------
def test_date_format_reaches_the_readers(tmp_path, capsys, monkeypatch):
    from isoturnover import data

    f = tmp_path / "samples.csv"
    f.write_text(GOOD, encoding="utf-8")
    # not a format: refused with the other argument errors, one line, nothing written
    with pytest.raises(SystemExit) as e:
        main(["fit", str(f), "--out", str(tmp_path / "o"), "--date-format", "dd/mm/yyyy"])
    assert e.value.code == 2
    err = capsys.readouterr().err
    assert_one_error_line(err)
    assert "argument --date-format: must be a format such as %d/%m/%Y" in err, err
    assert not (tmp_path / "o").exists()
    # a format: handed to the samples reader as given
    seen = []
    real = data.read_samples

    def spy(*args, **kwargs):
        seen.append(kwargs.get("date_format"))
        return real(*args, **kwargs)

    monkeypatch.setattr(data, "read_samples", spy)
    code, _, err = run(["fit", str(f), "--out", str(tmp_path / "o2"), "--no-figures",
                        "--no-progress", "--ci", "asymptotic", "--pools", "1",
                        "--date-format", "%d/%m/%Y"], capsys)
    assert code == 0, err
    assert seen[0] == "%d/%m/%Y"


def test_date_format_in_help(capsys):
    with pytest.raises(SystemExit):
        main(["fit", "--help"])
    assert "--date-format" in capsys.readouterr().out
