"""The demo's true half-lives lie inside the intervals the main job reports for them.

The demo is invented: ``sample_data/make_demo.py`` simulates it from known values, listed in
``sample_data/truth.csv`` (columns described in ``sample_data/README.md``). The demo's fits
are run as the main job runs them (:func:`isoturnover.run_demo`, one worker, the default
profile intervals of its results table), and every series is checked:

* where the chosen model has the true number of pools, each true half-life (catabolic where
  the truth's ``rate_kind`` says so, as the fits with body masses report it) lies inside
  the reported interval of its pool;
* where it has another number of pools (a spurious extra pool), the pools do not
  correspond, and the quantity both models share is checked instead: the time to half of
  the first switch's change, true value solved from the truth's rates and growth curve,
  against the chosen fit's interval for it (:meth:`TurnoverFit.time_to`).

A miss is explained when the series carries a note that says why (the parameter is not
identifiable, the plateau is not reached...). A correct 95 % interval also misses one true
value in twenty by chance, so unexplained misses are allowed up to the binomial count such
intervals would make (and the slow test checks the interval's coverage on the demo's own
design by simulation); every miss is printed as a table.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats
from scipy.integrate import solve_ivp

from isoturnover import load_demo, run_demo

# words of the trust notes that explain why an interval may miss the truth
EXPLAINS = ("identifiable", "plateau", "extrapolated", "poorly bounded", "not determined",
            "singular", "too close to separate", "correlated")


@pytest.fixture(scope="module")
def demo():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        a = run_demo(None, n_jobs=1)
        return a, a.results_table()


def _truth_rows(truth, part, row):
    if part == "fish":  # destructive: the batch, described by its population values
        sel = (truth["level"] == "population") & (truth["tissue"] == row["tissue"])
    else:
        sel = (truth["level"] == "animal") & (truth["subject"] == row["subject"]) & (
            truth["tissue"] == row["tissue"])
    return truth[sel & (truth["isotope"] == row["isotope"])].sort_values("pool")


def _true_time_to_half(tr):
    """Time after the first switch for the tissue to make half of its change.

    Parallel pools, each with rate k_i + d ln W/dt (Hesslein et al. 1993, Can. J. Fish.
    Aquat. Sci. 50:2071-2076): the part of the change still to come is
    W(0)/W(t) · Σ f_i exp(−k_i t), with the truth's growth curve W (logistic:
    W∞ / (1 + exp(−k (t − t_i))); exponential: W0 exp(k t); none: constant). Solved with
    scipy's brentq.
    """
    g = tr.iloc[0]
    if g["growth"] == "logistic":
        def log_w(t):
            return -math.log1p(math.exp(-g["growth_k"] * (t - g["growth_ti"])))
    elif g["growth"] == "exponential":
        def log_w(t):
            return g["growth_k"] * t
    else:
        def log_w(t):
            return 0.0
    f, k = tr["fraction"].to_numpy(float), tr["rate"].to_numpy(float)

    def left(t):
        return math.exp(log_w(0.0) - log_w(t)) * float(np.sum(f * np.exp(-k * t))) - 0.5

    return optimize.brentq(left, 0.0, 50.0 / float(k.min()), xtol=1e-10)


def _checks(a, tab, truth):
    out = []
    # the goat hair's truth is goat_hair_truth.csv (tests/test_segments_run.py)
    chosen = tab[tab["chosen"] & (tab["part"] != "goat hair")]
    for _, r in chosen.iterrows():
        part = r["part"]
        tr = _truth_rows(truth, part, r)
        assert len(tr), (part, r["subject"], r["tissue"], r["isotope"])
        # like compared with like: catabolic rates where masses were fitted, else incorporation
        assert r["rate_kind"] == tr["rate_kind"].iloc[0], (part, r["subject"], r["tissue"])
        name = f"{part} {r['subject'] if isinstance(r['subject'], str) else ''} " \
               f"{r['tissue']} {r['isotope']}"
        notes = r["warnings"] if isinstance(r["warnings"], str) else ""
        base = {"series": name.replace("  ", " "), "model": r["candidate"], "notes": notes}
        if int(r["pools"]) == len(tr):
            for _, p in tr.iterrows():
                i = int(p["pool"])
                out.append({**base, "quantity": f"half-life {i}", "true": p["half_life"],
                            "estimate": r[f"half_life_{i}"], "lower": r[f"lower_{i}"],
                            "upper": r[f"upper_{i}"]})
        else:
            fs = a.parts[part]
            key = tuple(str(r[c]) for c in fs.by)
            tt = fs[key].best.time_to(0.5, 0.95).iloc[0]
            out.append({**base, "quantity": "time to half the change",
                        "true": _true_time_to_half(tr), "estimate": tt["estimate"],
                        "lower": tt["lower"], "upper": tt["upper"]})
    df = pd.DataFrame(out)
    df["inside"] = (df["lower"] <= df["true"]) & (df["true"] <= df["upper"])
    df["explained"] = df["notes"].map(lambda s: any(w in s for w in EXPLAINS))
    return df


def test_every_demo_series_is_fitted(demo):
    a, tab = demo
    # 8 goats × (plasma d13C, red cells d13C, plasma d15N, breath d13C) + 4 goats' hair
    # + 2 fish series
    assert a.n_fitted() == 38 and not a.failures()
    assert tab["chosen"].sum() == 38


def test_true_half_lives_inside_the_reported_intervals(demo):
    a, tab = demo
    truth = load_demo("truth")
    df = _checks(a, tab, truth)
    bad = df[~df["inside"] & ~df["explained"]]
    excused = df[~df["inside"] & df["explained"]]
    cols = ["series", "model", "quantity", "true", "estimate", "lower", "upper"]
    # A correct 95 % interval misses the truth 5 % of the time, so among n checks a few
    # misses come by chance alone; more than the binomial(n, 0.05) 99th percentile
    # (scipy.stats.binom) would say the intervals are too narrow. Each miss is shown.
    allowed = int(stats.binom.ppf(0.99, len(df), 0.05))
    with pd.option_context("display.width", 200, "display.max_colwidth", 60):
        print(f"\n{int(df['inside'].sum())}/{len(df)} true values inside their intervals; "
              f"{len(excused)} outside with a note, {len(bad)} without (allowed {allowed})")
        if len(excused):
            print("outside, explained by a note:\n" + excused[cols + ["notes"]].to_string())
        if len(bad):
            print("outside, without a note:\n" + bad[cols].to_string())
    assert len(df) >= 42  # 34 series; breath has two pools
    assert len(bad) <= allowed, "too many true values outside their intervals:\n" + bad[
        cols].to_string()


@pytest.mark.slow
def test_plasma_d15n_interval_coverage_on_the_demo_design():
    """The demo's unexplained misses are chance: on goat G05's own design (pen B, plasma
    δ15N, one pool with per-diet separations and its logistic growth, truth.csv) the
    reported profile interval of the half-life covers the truth at the nominal rate.

    Truth: dδ/dt = (k + d ln W/dt)(E(t) − δ) (Hesslein et al. 1993), E = diet + Δ of the
    ration eaten, integrated with scipy's solve_ivp; noise as in sample_data/README.md
    (biological sd 0.2 ‰, analytic sd 0.15 ‰, weighing sd 0.3 kg).
    """
    from isoturnover import DietHistory, TurnoverModel, fit_growth

    truth = load_demo("truth")
    x = truth[(truth["level"] == "animal") & (truth["subject"] == "G05")
              & (truth["tissue"] == "plasma") & (truth["isotope"] == "d15N")].iloc[0]
    days = np.array([0, 1, 2, 4, 7, 10, 14, 21, 28, 42, 56, 70, 90, 120, 121, 123, 126,
                     130, 135, 142, 150, 165, 180], dtype=float)
    weighed = np.r_[np.arange(0.0, 176.0, 7.0), 180.0]
    diet = DietHistory(2.0, [(0.0, 5.5), (120.0, 2.0)])
    e_hay, e_maize = 2.0 + x["discrimination_old"], 5.5 + x["discrimination_new"]

    def mass(t):
        return x["growth_winf"] / (1.0 + np.exp(-x["growth_k"] * (t - x["growth_ti"])))

    def rhs(t, y):
        kg = x["growth_k"] * (1.0 - mass(t) / x["growth_winf"])  # d ln W/dt, logistic
        return [(x["rate"] + kg) * ((e_maize if t < 120.0 else e_hay) - y[0])]

    first = solve_ivp(rhs, (0.0, 120.0), [e_hay], dense_output=True, rtol=1e-10, atol=1e-12)
    second = solve_ivp(rhs, (120.0, 180.0), [float(first.sol(120.0)[0])], dense_output=True,
                       rtol=1e-10, atol=1e-12)
    exact = np.where(days <= 120.0, first.sol(np.minimum(days, 120.0))[0],
                     second.sol(np.maximum(days, 120.0))[0])
    rng = np.random.default_rng(20261203)
    n_rep, hits = 200, 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for _ in range(n_rep):
            y = exact + rng.normal(0.0, 0.2, days.size) + rng.normal(0.0, 0.15, days.size)
            g = fit_growth(weighed, mass(weighed) + rng.normal(0.0, 0.3, weighed.size),
                           curve="logistic")
            f = TurnoverModel(1, diet=diet, growth=g, per_diet_separation=True).fit(
                days, y, np.full(days.size, 0.15), warn=False)
            h = f.half_lives(0.95, "profile").iloc[0]
            hits += bool(h["lower"] <= x["half_life"] <= h["upper"])
    lo, hi = stats.binom.interval(0.999, n_rep, 0.95)  # scipy: 99.9 % range at 95 %
    print(f"coverage {hits}/{n_rep}")
    assert lo <= hits <= hi


def test_plasma_d15n_chooses_a_separation_per_diet(demo):
    """The demo's plasma δ15N separation differs between hay and maize (+3.8 and +3.2 ‰,
    truth.csv): the per-diet variant is compared everywhere and chosen for most goats."""
    _, tab = demo
    d15 = tab[tab["part"] == "goats d15N"]
    assert d15["candidate"].str.endswith(", separation per diet").sum() == 16  # 8 × 2 pools
    chosen = d15[d15["chosen"]]
    assert chosen["candidate"].str.endswith(", separation per diet").sum() >= 6
    # breath has no diets table: no per-diet variant
    assert not tab.loc[tab["part"] == "goat breath", "candidate"].str.contains("diet").any()
