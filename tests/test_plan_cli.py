"""`isoturnover plan`: a sampling schedule from the command line.

Every option reaches the design (the plan equals `iso.design_schedule` called with the same
arguments); the one-pool D-optimal plan agrees with the determinant maximised by hand; the
plan carries the animal-care caution; `--out` writes plan.csv, plan.md and plan.png through
the output-folder writer and refuses a non-empty folder without `--force`; every bad value is
one line `error: ...` naming the option, exit status 2, nothing written.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import optimize

import isoturnover as iso
from isoturnover.cli import build_parser, main
from isoturnover.design import PLAN_CAUTION, SD_GUIDANCE

LN2 = math.log(2.0)
BASE = ["--from", "-22", "--to", "-14", "--sd", "0.3"]


def run(argv, capsys):
    code = main([str(a) for a in argv])
    out = capsys.readouterr()
    return code, out.out, out.err


def assert_one_error_line(err):
    lines = [ln for ln in err.strip().splitlines() if ln.strip()]
    assert len(lines) == 1, err
    assert lines[0].startswith("error: "), err
    assert "Traceback" not in err


def plan_times(tmp_path, name, argv, capsys):
    """Run `plan --out` and read its plan.csv."""
    out = tmp_path / name
    code, stdout, err = run(["plan", *argv, "--out", out], capsys)
    assert code == 0, err
    return pd.read_csv(out / "plan.csv"), stdout


def same_plan(table, design):
    # the reference is the library's own design_schedule with the same arguments
    np.testing.assert_allclose(table["time"], design.times, rtol=1e-9, atol=1e-9)
    assert list(table["animal"]) == list(design.animals)
    assert list(table["role"]) == list(design.roles)
    np.testing.assert_allclose(table["expected"], design.expected(), rtol=1e-9)


# ----------------------------------------------------------------------------------------
# what the plan is
# ----------------------------------------------------------------------------------------
def test_one_pool_d_optimal_plan_matches_the_determinant_by_hand(capsys):
    code, out, err = run(["plan", "--half-lives", "10", *BASE[:4], "--sd", "0.2",
                          "--samples", "3", "--duration", "60"], capsys)
    assert code == 0, err
    # By hand: δ(t) = b + (a − b)e^{−kt}; with the baseline at 0 the Jacobian rows are
    # [1, 0, 0], [e_i, 1 − e_i, −(a − b) t_i e_i] (e_i = e^{−k t_i}), so det J ∝
    # (1 − e1) t2 e2 − (1 − e2) t1 e1, maximised over 0 < t1 < t2 ≤ 60 with scipy.
    k = LN2 / 10

    def neg(x):
        e1, e2 = np.exp(-k * x[0]), np.exp(-k * x[1])
        return -abs((1 - e1) * x[1] * e2 - (1 - e2) * x[0] * e1)

    grid = np.linspace(0.1, 60, 200)
    start = min((neg((a, b)), a, b) for a in grid for b in grid if b > a)[1:]
    best = optimize.minimize(neg, start, method="Nelder-Mead", bounds=[(0, 60), (0, 60)],
                             options={"xatol": 1e-10, "fatol": 1e-15}).x
    times = re.search(r"Times \(days\): (.*)", out).group(1).split(", ")
    assert float(times[0]) == 0.0
    np.testing.assert_allclose([float(t) for t in times[1:]], best, rtol=2e-3)
    # expected se of the half-life: delta method ln2/k² · se(k), se(k) from (JᵀJ/sd²)⁻¹
    # computed here with numpy from the Jacobian above (a − b = −8 ‰)
    t = np.r_[0.0, best]
    e = np.exp(-k * t)
    J = np.column_stack([e, 1 - e, 8.0 * t * e]) / 0.2
    se = LN2 / k**2 * math.sqrt(np.linalg.inv(J.T @ J)[2, 2])
    got = float(re.search(r"Expected half-life \(k1\): 10 ± ([\d.]+) days", out).group(1))
    assert got == pytest.approx(se, rel=2e-3)
    # the caution, once, at the end; the sd guidance; nothing written without --out
    assert out.count(PLAN_CAUTION) == 1
    assert out.rstrip().endswith(PLAN_CAUTION)
    assert SD_GUIDANCE in out
    assert "plan written" not in out


def test_every_design_option_reaches_the_schedule(tmp_path, capsys):
    argv = ["--pools", "2", "--half-lives", "30,3", "--fractions", "0.6,0.4", *BASE,
            "--samples", "12", "--duration", "20", "--time-unit", "w", "--criterion",
            "half_life", "--pool", "1", "--prior-cv", "0.5", "--baseline", "2",
            "--fixed-times", "10", "--min-spacing", "0.5", "--max-per-animal", "4",
            "--level", "0.9"]
    table, out = plan_times(tmp_path, "o", argv, capsys)
    # pools are ordered fastest first: half-life 3 (fraction 0.4) is pool 1
    truth = {"delta0": -22.0, "delta_eq": -14.0, "k1": LN2 / 3, "k2": LN2 / 30,
             "f1": 0.4, "f2": 0.6}
    ref = iso.design_schedule(iso.TurnoverModel(2), truth, n_samples=12, duration=20, sd=0.3,
                              criterion="half_life", pool=1, prior_cv=0.5, baseline=2,
                              fixed_times=[10], min_spacing=0.5, max_per_animal=4,
                              level=0.9, time_unit="w")
    same_plan(table, ref)
    assert table["role"].value_counts().to_dict() == {"baseline": 2, "fixed": 1,
                                                      "optimised": 9}
    assert set(table["animal"]) == {1, 2, 3}  # 12 samples, at most 4 per animal
    assert "half-life (k1)" in out and "Times (weeks)" in out
    assert "averaged over a log-normal prior on the rates (cv 0.5" in out
    assert "90 % half-width" in out
    # the same guess as rates gives the same plan
    rates = ",".join(repr(LN2 / h) for h in (30, 3))
    table2, _ = plan_times(tmp_path, "o2", ["--rates", rates, *without(argv, "--half-lives")],
                           capsys)
    same_plan(table2, ref)


def test_chain_lag_time_to_and_destructive(tmp_path, capsys):
    argv = ["--chain", "--lag", "1", "--half-lives", "2,12", *BASE, "--samples", "9",
            "--duration", "60", "--time-unit", "h", "--criterion", "time_to", "--fraction",
            "0.9", "--destructive"]
    table, out = plan_times(tmp_path, "o", argv, capsys)
    truth = {"delta0": -22.0, "delta_eq": -14.0, "k1": LN2 / 2, "k2": LN2 / 12, "lag": 1.0}
    ref = iso.design_schedule(iso.TurnoverModel(structure="chain", lag=True), truth,
                              n_samples=9, duration=60, sd=0.3, criterion="time_to",
                              fraction=0.9, destructive=True, time_unit="h")
    same_plan(table, ref)
    assert list(table["animal"]) == list(range(1, 10))  # one animal per sample
    assert "time to 0.9 of the change" in out and "destructive" in out
    assert "lag 1 hours" in out and "precursor" in out


def test_simulate_seed_and_jobs(tmp_path, capsys):
    argv = ["plan", "--half-lives", "10", *BASE, "--samples", "6", "--duration", "50",
            "--simulate", "20", "--seed", "3", "--jobs", "1"]
    code, out, err = run(argv, capsys)
    assert code == 0, err
    assert "Simulated experiments: 20 × 1 animal sampled at 6 times" in out
    assert out.count(PLAN_CAUTION) == 1
    # the same seed gives the same simulations; the reference is simulate_design itself
    code, again, _ = run(argv, capsys)
    assert again == out
    design = iso.design_schedule(iso.TurnoverModel(1), {"delta0": -22, "delta_eq": -14,
                                                        "k1": LN2 / 10, "f1": 1.0},
                                 n_samples=6, duration=50, sd=0.3)
    sim = iso.simulate_design(iso.TurnoverModel(1), {"delta0": -22, "delta_eq": -14,
                                                     "k1": LN2 / 10, "f1": 1.0},
                              design, sd=0.3, n_sim=20, rng=3)
    assert f"robust sd {sim.robust_se:.3g} (1.4826 × MAD; predicted se " \
           f"{sim.predicted_se:.3g})" in out
    code, other, _ = run(argv[:-4] + ["--seed", "4"], capsys)
    assert code == 0 and other != out


# ----------------------------------------------------------------------------------------
# files
# ----------------------------------------------------------------------------------------
def test_out_writes_csv_markdown_and_figure_and_refuses_a_non_empty_folder(tmp_path, capsys):
    out = tmp_path / "plan"
    argv = ["plan", "--half-lives", "3,30", "--fractions", "0.4,0.6", *BASE, "--samples",
            "10", "--duration", "120", "--min-spacing", "3", "--max-per-animal", "4",
            "--simulate", "5", "--out", out]
    code, stdout, err = run(argv, capsys)
    assert code == 0, err
    names = {p.name for p in out.iterdir()}
    assert {"plan.csv", "plan.md", "plan.png"} <= names
    assert ".isoturnover-manifest.json" in names  # written through write_output
    tab = pd.read_csv(out / "plan.csv")
    assert list(tab.columns) == ["sample", "time", "animal", "role", "expected"]
    assert len(tab) == 10
    md = (out / "plan.md").read_text(encoding="utf-8")
    assert PLAN_CAUTION in md and "## Schedule" in md and "## Simulation check" in md
    assert "![" in md and "(plan.png)" in md
    png = (out / "plan.png").read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n" and len(png) > 10_000
    assert f"plan written to {out}/" in stdout
    before = sorted((p.name, p.stat().st_mtime_ns) for p in out.rglob("*"))
    code, _, err = run(argv, capsys)
    assert code == 2
    assert_one_error_line(err)
    assert "--force" in err
    assert sorted((p.name, p.stat().st_mtime_ns) for p in out.rglob("*")) == before
    code, _, err = run([*argv, "--force"], capsys)
    assert code == 0, err
    assert (out / "plan.png").stat().st_mtime_ns != dict(before)["plan.png"]


# ----------------------------------------------------------------------------------------
# bad values
# ----------------------------------------------------------------------------------------
GOOD = ["--half-lives", "3,30", "--fractions", "0.4,0.6", *BASE, "--samples", "10",
        "--duration", "100"]


def without(argv, *names):
    """``argv`` without the options ``names`` and their values."""
    out, skip = [], False
    for a in argv:
        if skip:
            skip = False
        elif a in names:
            skip = True
        else:
            out.append(a)
    return out


# (options added, options of GOOD left out, the option the error must name)
BAD = [
    (["--pools", "0"], [], "--pools"), (["--pools", "x"], [], "--pools"),
    (["--pools", "3"], [], "--half-lives"), (["--chain"], [], "--fractions"),
    (["--chain", "--pools", "2"], ["--fractions"], "--pools"),
    (["--chain", "--half-lives", "3"], ["--fractions", "--half-lives"], "--half-lives"),
    (["--lag", "0"], [], "--lag"), (["--lag", "x"], [], "--lag"),
    (["--half-lives", "3,-30"], ["--half-lives"], "--half-lives"),
    (["--half-lives", "3,,30"], ["--half-lives"], "--half-lives"),
    (["--rates", "0.2,0.02"], [], "--half-lives"), ([], ["--half-lives"], "--half-lives"),
    (["--fractions", "0.4,0.7"], ["--fractions"], "--fractions"),
    (["--fractions", "0.4,1.6"], ["--fractions"], "--fractions"),
    (["--fractions", "0.2,0.3,0.5"], ["--fractions"], "--fractions"),
    ([], ["--fractions"], "--fractions"),
    (["--half-lives", "3"], ["--half-lives"], "--fractions"),
    (["--from", "x"], ["--from"], "--from"), (["--to", "nan"], ["--to"], "--to"),
    (["--to", "-22"], ["--to"], "--to"),
    (["--samples", "0"], ["--samples"], "--samples"),
    (["--samples", "2"], ["--samples"], "--samples"),
    (["--duration", "-5"], ["--duration"], "--duration"),
    (["--time-unit", "yr"], [], "--time-unit"),
    (["--sd", "0"], ["--sd"], "--sd"), (["--sd", "abc"], ["--sd"], "--sd"),
    (["--criterion", "A"], [], "--criterion"), (["--pool", "3"], [], "--pool"),
    (["--pool", "0"], [], "--pool"), (["--fraction", "0.9"], [], "--fraction"),
    (["--criterion", "time_to", "--fraction", "1"], [], "--fraction"),
    (["--criterion", "time_to", "--pool", "1"], [], "--pool"),
    (["--prior-cv", "-1"], [], "--prior-cv"), (["--baseline", "-1"], [], "--baseline"),
    (["--baseline", "11"], [], "--samples"), (["--fixed-times", "1,x"], [], "--fixed-times"),
    (["--min-spacing", "-1"], [], "--min-spacing"),
    (["--min-spacing", "50"], [], "--min-spacing"),
    (["--max-per-animal", "0"], [], "--max-per-animal"),
    (["--destructive", "--max-per-animal", "2"], [], "--max-per-animal"),
    (["--level", "95"], [], "--level"), (["--simulate", "1"], [], "--simulate"),
    (["--seed", "1"], [], "--seed"), (["--simulate", "5", "--seed", "-1"], [], "--seed"),
    (["--jobs", "2"], [], "--jobs"), (["--simulate", "5", "--jobs", "0"], [], "--jobs"),
    (["--bogus"], [], "--bogus"),
]


@pytest.mark.parametrize("extra, drop, option", BAD,
                         ids=[" ".join(a) + "".join(f" -{d}" for d in b) for a, b, _ in BAD])
def test_bad_value_one_error_line_naming_the_option(extra, drop, option, tmp_path, capsys):
    out = tmp_path / "o"
    argv = ["plan", *without(GOOD, *drop), *extra, "--out", out]
    try:
        code = main([str(a) for a in argv])
    except SystemExit as e:  # argparse's checks
        code = e.code
    assert code == 2
    err = capsys.readouterr().err
    assert_one_error_line(err)
    assert option in err, err
    assert not out.exists()


def test_force_without_out(capsys):
    with pytest.raises(SystemExit) as e:
        main(["plan", *GOOD, "--force"])
    assert e.value.code == 2
    err = capsys.readouterr().err
    assert_one_error_line(err)
    assert "--force" in err and "--out" in err


@pytest.mark.parametrize("missing", ["--from", "--to", "--samples", "--duration", "--sd",
                                     "--half-lives"])
def test_required_options(missing, capsys):
    argv = without(GOOD, missing)
    with pytest.raises(SystemExit) as e:
        main(["plan", *argv])
    assert e.value.code == 2
    err = capsys.readouterr().err
    assert_one_error_line(err)
    assert missing in err, err


def test_help_carries_the_sd_guidance_and_the_caution():
    text = " ".join(build_parser().commands["plan"].format_help().split())
    assert " ".join(SD_GUIDANCE.split()) in text
    assert "animal-care authority" in text and "does not replace it" in text


def test_readme_lists_every_option_of_plan():
    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    section = readme[readme.index("### `isoturnover plan`"):]
    section = section[:section.index("\n## ")] if "\n## " in section else section
    plan = build_parser().commands["plan"]
    for action in plan._actions:
        for name in action.option_strings:
            if name.startswith("--") and name != "--help":
                assert re.search(rf"(?<![\w-]){re.escape(name)}(?![\w-])", section), name
