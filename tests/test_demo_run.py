"""The demo end to end: runs in time, writes its outputs, and its reported 95 % intervals
contain the generator's true values (sample_data/make_demo.py, truth.csv) at about the
nominal rate."""

import time
import warnings

import numpy as np
import pandas as pd
import pytest

from isoturnover import load_demo, run_demo
from isoturnover.cli import main


@pytest.fixture(scope="module")
def demo_table():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        a = run_demo(None)
        return a.results_table()


def _truth_rows(truth, part, subject, tissue, isotope):
    if part == "fish":
        sel = (truth["level"] == "population") & (truth["tissue"] == tissue)
    else:
        sel = (truth["level"] == "animal") & (truth["subject"] == subject) & (
            truth["tissue"] == tissue)
    return truth[sel & (truth["isotope"] == isotope)].sort_values("pool")


def _diet_value(diets, group, isotope, which):
    d = diets[(diets["group"] == group) & (diets["isotope"] == isotope)].sort_values("start")
    return float(d["value"].iloc[0 if which == "old" else 1])


def test_demo_intervals_contain_the_truth(demo_table):
    truth = load_demo("truth")
    # the goat hair's truth is goat_hair_truth.csv (tests/test_segments_run.py)
    chosen = demo_table[demo_table["chosen"] & (demo_table["part"] != "goat hair")]
    hits, checks = [], []
    for _, r in chosen.iterrows():
        tr = _truth_rows(truth, r["part"], r["subject"], r["tissue"], r["isotope"])
        assert len(tr), (r["part"], r["subject"], r["tissue"])
        # half-lives, where the chosen model has the true number of pools
        if int(r["pools"]) == int(tr["pools"].iloc[0]):
            for _, p in tr.iterrows():
                i = int(p["pool"])
                ok = r[f"lower_{i}"] <= p["half_life"] <= r[f"upper_{i}"]
                hits.append(ok)
                checks.append(("half_life", r["part"], r["subject"], r["tissue"], i, ok))
        # plateaus (tissue equilibrium with the old and the new diet)
        t0 = tr.iloc[0]
        if "delta0" in r and np.isfinite(r.get("delta0", np.nan)) and r["part"] == "goat breath":
            pairs = [("delta0", t0["plateau_old"]), ("delta_eq", t0["plateau_new"])]
            for nm, true in pairs:
                ok = r[f"{nm}_lower"] <= true <= r[f"{nm}_upper"]
                hits.append(ok)
                checks.append((nm, r["part"], r["subject"], r["tissue"], 0, ok))
            continue
        for which, col in (("old", "discrimination_0"), ("new", "discrimination_1")):
            name = col if np.isfinite(r.get(col, np.nan)) else "discrimination"
            if not np.isfinite(r.get(name, np.nan)):
                continue
            lo, hi = r[f"{name}_lower"], r[f"{name}_upper"]
            true_sep = t0[f"discrimination_{which}"]
            ok = lo <= true_sep <= hi
            hits.append(ok)
            checks.append((f"plateau_{which}", r["part"], r["subject"], r["tissue"], 0, ok))
    rate = float(np.mean(hits))
    misses = [c for c in checks if not c[-1]]
    print(f"demo: {sum(hits)}/{len(hits)} intervals contain the truth ({rate:.1%}); "
          f"misses: {misses}")
    assert len(hits) >= 60
    assert rate >= 0.90, misses


def test_demo_command_runs_and_refuses_a_second_run(tmp_path, capsys):
    out = tmp_path / "demo"
    t0 = time.perf_counter()
    assert main(["demo", "--out", str(out), "--no-progress"]) == 0
    elapsed = time.perf_counter() - t0
    print(f"demo took {elapsed:.1f} s")
    names = {p.name for p in out.iterdir()}
    assert {"results.csv", "fits.json", "report.md", "report.html", "report_figures"} <= names
    report = (out / "report.md").read_text(encoding="utf-8")
    assert "animal-care authority" in report and "invented" in report.lower()
    tab = pd.read_csv(out / "results.csv")
    assert set(tab["part"]) == {"goats d13C", "goats d15N", "goat breath", "goat hair", "fish"}
    # breath is in hours and keeps its unit through fit_each into the tables and report
    assert set(tab.loc[tab["part"] == "goat breath", "time_unit"]) == {"h"}
    assert set(tab.loc[tab["part"] != "goat breath", "time_unit"]) == {"d"}
    assert "hours" in report
    capsys.readouterr()
    before = sorted((p.name, p.stat().st_mtime_ns) for p in out.rglob("*"))
    assert main(["demo", "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and "--force" in err
    assert sorted((p.name, p.stat().st_mtime_ns) for p in out.rglob("*")) == before
