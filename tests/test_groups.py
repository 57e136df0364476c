"""Tests of :func:`isoturnover.fit_each` and :class:`isoturnover.FitSet`.

Every data set here is invented (seeded simulations labelled as such): goats sampled
repeatedly after a diet switch, and fish sampled destructively (one fish per sample).
"""

from __future__ import annotations

import itertools
import math
import re
import warnings

import numpy as np
import pandas as pd
import pytest

import isoturnover as iso
from isoturnover import groups, seriesrows
from isoturnover.analysis import analyse, series_seed
from isoturnover.errors import DataError

LN2 = math.log(2.0)

# Invented experiment: 6 goats × plasma/red cells × d13C/d15N, 12 sampling days.
TIMES = np.array([0, 1, 2, 4, 7, 10, 14, 21, 28, 42, 56, 70], dtype=float)
HALF_LIFE = {"plasma": 4.0, "rbc": 25.0}                  # d, invented
PLATEAUS = {"d13C": (-26.0, -13.0), "d15N": (5.0, 9.0)}   # (delta0, delta_eq) ‰, invented
SHORT = ("goat2", "rbc", "d15N")      # only two samples: too few points
FLAT = ("goat5", "plasma", "d15N")    # all values equal: no change
SUBJECTS = [f"goat{i}" for i in range(1, 7)]
TISSUES = ("plasma", "rbc")
ISOTOPES = ("d13C", "d15N")


def true_half_life(subject, tissue):
    s = int(subject[-1])
    return HALF_LIFE[tissue] / (1 + 0.1 * (s - 3))


def invented_samples(seed=7):
    rng = np.random.default_rng(seed)
    rows = []
    for subj, tis, isot in itertools.product(SUBJECTS, TISSUES, ISOTOPES):
        d0, deq = PLATEAUS[isot]
        t = TIMES[:2] if (subj, tis, isot) == SHORT else TIMES
        y = deq + (d0 - deq) * np.exp(-LN2 / true_half_life(subj, tis) * t)
        y = np.round(y + rng.normal(0.0, 0.15, t.size), 2)
        if (subj, tis, isot) == FLAT:
            y = np.full(t.size, 7.0)
        group = "A" if int(subj[-1]) <= 3 else "B"
        rows += [{"subject": subj, "group": group, "tissue": tis, "isotope": isot,
                  "time": a, "value": b} for a, b in zip(t, y)]
    return pd.DataFrame(rows)


@pytest.fixture(scope="module")
def samples():
    return invented_samples()


@pytest.fixture(scope="module")
def fitset(samples):
    return iso.fit_each(samples)


@pytest.fixture(scope="module")
def table(fitset):
    return fitset.table(method="asymptotic")


# ----------------------------------------------------------------------------------------
# the table
# ----------------------------------------------------------------------------------------
def test_table_has_a_row_for_every_series_and_candidate(fitset, table):
    assert len(fitset) == 24
    assert len(table) == 24 * 2
    got = set(zip(table["subject"], table["tissue"], table["isotope"], table["candidate"]))
    want = set(itertools.product(SUBJECTS, TISSUES, ISOTOPES, ["1 pool", "2 pools"]))
    assert got == want
    # the samples' group column is kept beside the keys (issue 15, item 11)
    assert list(table.columns[:5]) == ["subject", "tissue", "isotope", "group", "candidate"]
    for col in ("status", "reason", "nobs", "n_params", "rss", "aicc", "delta_aicc", "weight",
                "chosen", "delta0", "delta_eq", "half_life_1", "lower_1", "upper_1",
                "time_to_95", "rate_kind"):
        assert col in table.columns, col
    assert set(table["status"]) == {"ok", "too_few_points", "no_change", "not_eligible"}
    # not eligible here: only two-pool candidates whose slow rate ran to 0 (a linear drift
    # on one-pool data: flagged, kept in the comparison, never chosen)
    ne = table[table["status"] == "not_eligible"]
    assert len(ne) and (ne["candidate"] == "2 pools").all() and not ne["chosen"].any()
    assert ne["reason"].str.contains("linear drift").all()
    assert (table["interval_method"].dropna() == "asymptotic").all()


def _rows(table, key):
    s, t, i = key
    return table[(table["subject"] == s) & (table["tissue"] == t) & (table["isotope"] == i)]


def test_bad_series_carry_status_and_reason(fitset, table):
    short = _rows(table, SHORT)
    assert (short["status"] == "too_few_points").all()
    assert short["reason"].str.contains(r"only 2 time point\(s\) for \d free parameters").all()
    assert (short["nobs"] == 2).all()
    flat = _rows(table, FLAT)
    assert (flat["status"] == "no_change").all()
    assert flat["reason"].str.contains("all values are equal").all()
    assert not short["chosen"].any() and not flat["chosen"].any()
    # the same on the FitSet
    assert set(fitset.failures) == {SHORT, FLAT}
    assert "only 2 time point(s)" in fitset.failures[SHORT]
    assert fitset[SHORT].status == "too_few_points" and fitset[SHORT].best is None
    assert fitset[FLAT].status == "no_change" and fitset[FLAT].best is None
    # every other series fitted
    ok = table[~table.index.isin(short.index.union(flat.index))]
    # (a two-pool candidate whose slow rate ran to 0 is flagged not eligible: a linear drift)
    drift = ok["reason"].fillna("").str.contains("linear drift")
    assert (ok.loc[~drift, "status"] == "ok").all()
    assert (ok.loc[drift, "status"] == "not_eligible").all()
    assert "22 fitted, 2 not fitted" in repr(fitset)


def test_noisy_series_without_trend_is_no_change():
    # invented: a tissue that does not respond (scatter around −20 ‰ only)
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({"subject": "goat1", "tissue": "hair", "isotope": "d13C",
                          "time": TIMES, "value": -20.0 + rng.normal(0.0, 0.2, TIMES.size)})
    fs = iso.fit_each(frame, pools=(1,))
    r = fs[("goat1", "hair", "d13C")]
    assert r.status == "no_change"
    assert "no detectable change" in r.reason and r.best is None


def test_chosen_flags_exactly_one_per_fitted_series(fitset, table):
    n_chosen = table.groupby(["subject", "tissue", "isotope"])["chosen"].sum()
    for key, n in n_chosen.items():
        assert n == (0 if key in (SHORT, FLAT) else 1), key
    chosen = table[table["chosen"]]
    # the chosen candidate has the lowest AICc of its series (Δ = 0)
    assert (chosen["delta_aicc"] == 0).all()
    assert set(fitset.chosen) == set(fitset) - {SHORT, FLAT}
    for key, f in fitset.chosen.items():
        r = fitset[key]
        assert f is r.best is r.fits[r.chosen]
        assert isinstance(f, iso.TurnoverFit)


def test_one_pool_half_lives_are_recovered(fitset):
    # invented data are one-pool curves: the 1-pool fits recover the simulated half-lives
    for key in fitset.chosen:
        f = fitset[key].fits["1 pool"]
        hl = LN2 / f.values["k1"]
        assert hl == pytest.approx(true_half_life(key[0], key[1]), rel=0.35), key


def test_fitset_mapping_behaviour(fitset):
    keys = list(fitset)
    assert len(keys) == len(fitset) == 24
    assert keys == sorted(itertools.product(SUBJECTS, TISSUES, ISOTOPES))
    assert ("goat1", "plasma", "d13C") in fitset
    r = fitset[("goat1", "plasma", "d13C")]
    assert r.key == ("goat1", "plasma", "d13C")
    assert isinstance(r.best, iso.TurnoverFit)
    assert r.best.data_info["subject"] == "goat1"
    assert r.best.data_info["design"] == "series"
    assert set(r.fits) == {"1 pool", "2 pools"}
    assert list(r.comparison["label"]) == ["1 pool", "2 pools"]
    assert dict(fitset.items())[("goat1", "plasma", "d13C")] is r
    with pytest.raises(KeyError):
        fitset[("goat9", "plasma", "d13C")]


def test_half_lives_long_table_has_keys_as_columns(fitset):
    hl = fitset.half_lives(method="asymptotic")
    assert list(hl.columns[:5]) == ["subject", "tissue", "isotope", "model", "pool"]
    for col in ("half_life", "lower", "upper", "lower_status", "upper_status"):
        assert col in hl.columns
    keys = set(zip(hl["subject"], hl["tissue"], hl["isotope"]))
    assert keys == set(fitset.chosen)
    for key, f in fitset.chosen.items():
        rows = _rows(hl, key)
        own = f.half_lives(method="asymptotic")
        assert len(rows) == len(own)
        np.testing.assert_allclose(rows["half_life"], own["half_life"], rtol=1e-12)
        assert (rows["model"] == fitset[key].chosen).all()


def test_profile_intervals_in_table():
    frame = invented_samples()
    frame = frame[(frame["subject"] == "goat1") & (frame["isotope"] == "d13C")]
    fs = iso.fit_each(frame, pools=(1,))
    tab = fs.table()                                       # default: profile likelihood
    assert (tab["interval_method"] == "profile").all()
    assert (tab["lower_1"] < tab["half_life_1"]).all()
    assert (tab["half_life_1"] < tab["upper_1"]).all()
    assert (tab["lower_status_1"] == "ok").all() and (tab["upper_status_1"] == "ok").all()
    # a well-determined one-pool rate: profile and asymptotic intervals nearly agree
    asy = fs.table(method="asymptotic")
    np.testing.assert_allclose(tab["lower_1"], asy["lower_1"], rtol=0.1)
    np.testing.assert_allclose(tab["upper_1"], asy["upper_1"], rtol=0.1)


# ----------------------------------------------------------------------------------------
# input handling
# ----------------------------------------------------------------------------------------
def test_results_do_not_depend_on_row_order(samples, table):
    shuffled = samples.sample(frac=1.0, random_state=np.random.RandomState(12))
    assert not shuffled.index.equals(samples.index)
    fs2 = iso.fit_each(shuffled)
    t2 = fs2.table(method="asymptotic")
    # a candidate whose two pools merged (rates equal: "too close to separate") has pool
    # fractions the data do not determine; the optimizer may stop anywhere along that flat
    # valley, so its notes (which print the fractions) are compared without the numbers
    merged = table["warnings"].fillna("").str.contains("too close to separate")

    def words(s):
        return s.fillna("").str.replace(r"-?[0-9][0-9.e+-]*", "#", regex=True)

    pd.testing.assert_series_equal(words(t2["warnings"][merged]),
                                   words(table["warnings"][merged]))
    pd.testing.assert_frame_equal(t2[~merged], table[~merged])
    # on the merged rows, everything but the fractions of the merged pools (and the notes)
    loose = ["warnings"] + [c for c in table.columns if c.startswith("fraction_")]
    pd.testing.assert_frame_equal(t2[merged].drop(columns=loose),
                                  table[merged].drop(columns=loose))
    # and with a fresh index too
    fs3 = iso.fit_each(shuffled.reset_index(drop=True), pools=(1,))
    fs4 = iso.fit_each(samples, pools=(1,))
    pd.testing.assert_frame_equal(fs3.half_lives(method="asymptotic"),
                                  fs4.half_lives(method="asymptotic"))


def test_input_frame_is_not_mutated():
    frame = invented_samples()
    frame.attrs["note"] = "invented"
    before = frame.copy(deep=True)
    iso.fit_each(frame, pools=(1,))
    pd.testing.assert_frame_equal(frame, before)
    assert frame.attrs == {"note": "invented"}


def test_argument_errors(samples):
    with pytest.raises(DataError, match=r"'by' names column 'animal', which the samples "
                                        r"table lacks"):
        iso.fit_each(samples, by=("animal", "tissue", "isotope"))
    with pytest.raises(DataError, match=r"'by' must include 'tissue': the table holds "
                                        r"several \(plasma, rbc\)"):
        iso.fit_each(samples, by=("subject", "isotope"))
    with pytest.raises(DataError, match=r"'criterion' must be one of 'aicc', 'aic', 'bic'; "
                                        r"got 'r2'"):
        iso.fit_each(samples, criterion="r2")
    with pytest.raises(DataError, match=r"'structures' entries must be 'parallel' or "
                                        r"'chain'; got 'serial'"):
        iso.fit_each(samples, structures=("serial",))
    # the interval options of the tables are checked before any series is fitted
    with pytest.raises(DataError, match=r"'level' must be between 0 and 1 \(0\.95 for 95 "
                                        r"%\); got 95"):
        iso.fit_each(samples, level=95)
    with pytest.raises(DataError, match=r"'method' must be one of 'profile', 'asymptotic', "
                                        r"'bootstrap', 'mcmc'; got 'prof'"):
        iso.fit_each(samples, method="prof")


# ----------------------------------------------------------------------------------------
# sampling designs
# ----------------------------------------------------------------------------------------
def invented_fish(seed=3):
    """12 fish, each killed once and sampled for muscle and liver (invented)."""
    rng = np.random.default_rng(seed)
    days = np.array([0, 0, 1, 2, 3, 5, 7, 10, 14, 21, 28, 42], dtype=float)
    rows = []
    for i, d in enumerate(days):
        for tissue, hl in (("muscle", 6.0), ("liver", 2.0)):
            v = -12.0 + (-25.0 + 12.0) * math.exp(-LN2 / hl * d) + rng.normal(0.0, 0.3)
            rows.append({"subject": f"fish{i + 1:02d}", "tissue": tissue, "isotope": "d13C",
                         "time": d, "value": v})
    return pd.DataFrame(rows)


def test_destructive_design_one_series_per_tissue_and_isotope():
    fs = iso.fit_each(invented_fish(), by=("tissue", "isotope"), pools=(1,))
    assert list(fs) == [("liver", "d13C"), ("muscle", "d13C")]
    for key in fs:
        f = fs[key].best
        assert f.nobs == 12
        assert f.data_info["design"] == "destructive"
        assert len(f.data_info["subjects"]) == 12
        assert f.data_info["tissue"] == key[0]
    tab = fs.table(method="asymptotic")
    assert list(tab.columns[:3]) == ["tissue", "isotope", "candidate"]
    assert (tab["status"] == "ok").all()
    # the true half-lives used by invented_fish() (muscle 6 d, liver 2 d)
    assert tab.set_index("tissue")["half_life_1"]["muscle"] == pytest.approx(6.0, rel=0.3)
    assert tab.set_index("tissue")["half_life_1"]["liver"] == pytest.approx(2.0, rel=0.3)


def test_repeated_subjects_without_subject_in_by_fail_with_reason(samples):
    plasma = samples[(samples["tissue"] == "plasma") & (samples["isotope"] == "d13C")]
    fs = iso.fit_each(plasma, by=("tissue", "isotope"))
    r = fs[("plasma", "d13C")]
    assert r.status == "failed" and r.best is None
    assert "several subjects sampled repeatedly" in r.reason and "'subject'" in r.reason
    tab = fs.table()
    assert len(tab) == 2 and (tab["status"] == "failed").all()
    assert tab["reason"].str.contains("several subjects sampled repeatedly").all()


# ----------------------------------------------------------------------------------------
# diets
# ----------------------------------------------------------------------------------------
def invented_diet_switch(seed=5):
    """4 goats, group A switched from −26 ‰ to −12 ‰, group B to −20 ‰; Δ = +1 ‰."""
    rng = np.random.default_rng(seed)
    rows = []
    for s in range(4):
        group = "A" if s < 2 else "B"
        new = -12.0 if group == "A" else -20.0
        for d in (0, 1, 2, 4, 7, 10, 14, 21, 28, 42):
            mean = new + 1.0 + (-26.0 - new) * math.exp(-0.15 * d)
            rows.append({"subject": f"goat{s}", "group": group, "tissue": "plasma",
                         "isotope": "d13C", "time": float(d),
                         "value": mean + rng.normal(0.0, 0.2)})
    return pd.DataFrame(rows)


def test_diets_matched_by_group():
    diets = pd.DataFrame({"group": ["A", "A", "B", "B"], "isotope": "d13C",
                          "start": [-100.0, 0.0, -100.0, 0.0],
                          "value": [-26.0, -12.0, -26.0, -20.0]})
    fs = iso.fit_each(invented_diet_switch(), diets=diets, pools=(1,))
    tab = fs.table(method="asymptotic")
    assert (tab["status"] == "ok").all()
    assert "discrimination" in tab.columns
    assert "delta0" not in tab.columns            # with a diet history the plateaus follow
    np.testing.assert_allclose(tab["discrimination"], 1.0, atol=0.3)
    np.testing.assert_allclose(LN2 / tab["half_life_1"], 0.15, rtol=0.2)
    f = fs[("goat2", "plasma", "d13C")].best
    # the table's first row gives the first diet's start (issue 14: the history as read)
    assert f.kinetics.diet == iso.DietHistory(-26.0, [(0.0, -20.0)], start=-100.0)


def test_diets_matched_by_subject_and_missing_diet():
    # goat1's (invented) diet values read 1 ‰ lower: its separation comes out 1 ‰ larger,
    # which shows the rows were matched per subject. goat2 and goat3 have no diet rows.
    diets = pd.DataFrame({"subject": ["goat0", "goat0", "goat1", "goat1"], "isotope": "d13C",
                          "start": [-100.0, 0.0, -100.0, 0.0],
                          "value": [-26.0, -12.0, -27.0, -13.0]})
    fs = iso.fit_each(invented_diet_switch(), diets=diets, pools=(1,))
    tab = fs.table(method="asymptotic").set_index("subject")
    assert tab.loc["goat0", "status"] == "ok" and tab.loc["goat1", "status"] == "ok"
    assert tab.loc["goat0", "discrimination"] == pytest.approx(1.0, abs=0.3)
    assert tab.loc["goat1", "discrimination"] == pytest.approx(2.0, abs=0.3)
    for s in ("goat2", "goat3"):
        assert tab.loc[s, "status"] == "no_diet"
        assert f"no diet rows for subject '{s}'" in tab.loc[s, "reason"]
        assert "isotope d13C" in tab.loc[s, "reason"]
        assert math.isnan(tab.loc[s, "discrimination"])
    assert set(fs.failures) == {("goat2", "plasma", "d13C"), ("goat3", "plasma", "d13C")}


# ----------------------------------------------------------------------------------------
# parallel series (n_jobs), and which errors become failed rows
# ----------------------------------------------------------------------------------------
def demo_subset():
    """Two goats of the shipped (invented) demo experiment, with their pens' diets; goat
    G02's red cells cut to their first two samples, so one series cannot be fitted."""
    samples = iso.read_samples(iso.demo_path("goat_samples"))
    diets = iso.read_diets(iso.demo_path("goat_diets"))
    two = samples[samples["subject"].isin(["G01", "G02"])]
    rbc = two[(two["subject"] == "G02") & (two["tissue"] == "red_cells")]
    short = rbc.sort_values("time").index[2:]
    return two.drop(index=short), diets


def test_parallel_fits_equal_serial_fits():
    samples, diets = demo_subset()
    serial = iso.fit_each(samples, diets=diets, n_jobs=1)
    parallel = iso.fit_each(samples, diets=diets, n_jobs=2, progress=True)
    assert list(parallel) == list(serial)          # same series, same order
    assert len(serial) == 6
    assert serial[("G02", "red_cells", "d13C")].status == "too_few_points"
    for key in serial:
        assert parallel[key].status == serial[key].status
        assert parallel[key].reason == serial[key].reason
        assert parallel[key].chosen == serial[key].chosen
    pd.testing.assert_frame_equal(parallel.table(method="asymptotic"),
                                  serial.table(method="asymptotic"), check_exact=True)
    pd.testing.assert_frame_equal(parallel.half_lives(method="asymptotic"),
                                  serial.half_lives(method="asymptotic"), check_exact=True)


@pytest.mark.parametrize("bad", [0, -2, 1.5, "2", True, None])
def test_bad_n_jobs_is_refused(samples, bad):
    with pytest.raises(DataError, match=r"'n_jobs' must be a positive integer \(number of "
                                        r"parallel workers\) or -1 \(all cores\); got "
                                        + re.escape(repr(bad))):
        iso.fit_each(samples, n_jobs=bad)


def test_without_joblib_a_warning_and_a_serial_run(monkeypatch):
    frame = invented_diet_switch()
    serial = iso.fit_each(frame, pools=(1,))
    monkeypatch.setattr(groups, "_joblib", None)
    with pytest.warns(iso.IsoturnoverWarning, match=r"n_jobs=-1 asks for parallel workers, "
                                                    r"but joblib is not installed; running "
                                                    r"serially"):
        fs = iso.fit_each(frame, pools=(1,), n_jobs=-1)
    pd.testing.assert_frame_equal(fs.table(method="asymptotic"),
                                  serial.table(method="asymptotic"), check_exact=True)


@pytest.mark.parametrize("error", [TypeError, KeyError, AttributeError, ValueError,
                                   RuntimeError])
def test_a_programming_error_in_a_series_surfaces(monkeypatch, error):
    def broken_fit(self, *args, **kwargs):
        raise error("a bug, not a data problem")

    monkeypatch.setattr(iso.TurnoverModel, "fit", broken_fit)
    with pytest.raises(error, match="a bug, not a data problem"):
        iso.fit_each(invented_diet_switch(), pools=(1,))


def test_a_library_error_in_a_series_is_a_failed_row(monkeypatch):
    real_fit = iso.TurnoverModel.fit

    def fit_refusing_goat1(self, *args, **kwargs):
        if kwargs["label"].startswith("goat1 /"):
            raise iso.FitError("no usable starting values (invented failure)")
        if kwargs["label"].startswith("goat2 /"):
            raise np.linalg.LinAlgError("singular matrix (invented failure)")
        return real_fit(self, *args, **kwargs)

    monkeypatch.setattr(iso.TurnoverModel, "fit", fit_refusing_goat1)
    fs = iso.fit_each(invented_diet_switch(), pools=(1,))
    tab = fs.table(method="asymptotic").set_index("subject")
    assert len(tab) == 4                                   # no series dropped
    assert tab.loc["goat1", "status"] == "failed"
    assert tab.loc["goat1", "reason"] == ("fit failed: no usable starting values (invented "
                                          "failure)")
    assert tab.loc["goat2", "status"] == "failed"
    assert tab.loc["goat2", "reason"] == "fit failed: singular matrix (invented failure)"
    assert (tab.loc[["goat0", "goat3"], "status"] == "ok").all()
    assert set(fs.failures) == {("goat1", "plasma", "d13C"), ("goat2", "plasma", "d13C")}


def test_fixed_parameter_unknown_to_one_candidate_fails_that_candidate_only():
    # k2 exists in the two-pool model only: the one-pool candidate is a failed row with the
    # reason, the two-pool candidate is fitted (nothing stops the run)
    frame = invented_diet_switch()
    fs = iso.fit_each(frame[frame["subject"] == "goat0"], fixed={"k2": 0.01})
    r = fs[("goat0", "plasma", "d13C")]
    assert r.fits["1 pool"] is None
    assert r.reasons["1 pool"].startswith("model not valid: 'fixed' has unknown parameter "
                                          "'k2'")
    assert r.chosen == "2 pools" and r.best.values["k2"] == pytest.approx(0.01, rel=1e-12)


def test_chain_candidate_beside_body_masses_fails_that_candidate_only():
    # growth dilution is defined for parallel pools; the chain candidate becomes a failed
    # row (a DataError from the kinetics), the parallel candidate is fitted. Demo data
    # (invented): goat G01's plasma d13C, its pen's diets and its weekly masses.
    samples = iso.read_samples(iso.demo_path("goat_samples"))
    one = samples[(samples["subject"] == "G01") & (samples["tissue"] == "plasma")
                  & (samples["isotope"] == "d13C")]
    fs = iso.fit_each(one, diets=iso.read_diets(iso.demo_path("goat_diets")),
                      masses=iso.read_masses(iso.demo_path("goat_masses")), pools=(1,),
                      structures=("parallel", "chain"))
    tab = fs.table(method="asymptotic").set_index("candidate")
    assert tab.loc["1 pool", "status"] == "ok" and bool(tab.loc["1 pool", "chosen"])
    assert tab.loc["chain", "status"] == "failed"
    assert tab.loc["chain", "reason"] == ("model not valid: growth dilution is available for "
                                          "structure='parallel' only")


def test_bad_model_options_are_refused_before_any_fit(samples):
    with pytest.raises(DataError, match=r"'pools' entries must be integers from 1 to 4; got 5"):
        iso.fit_each(samples, pools=(1, 5))
    with pytest.raises(DataError, match=r"'separation' must be one of 'difference', "
                                        r"'epsilon'; got 'ratio'"):
        iso.fit_each(samples, separation="ratio")
    with pytest.raises(DataError, match=r"'loss' must be one of 'linear', 'soft_l1', "
                                        r"'huber'; got 'cauchy'"):
        iso.fit_each(samples, loss="cauchy")
    with pytest.raises(DataError, match=r"'fixed' must be a dict of parameter name -> value, "
                                        r"or None; got list"):
        iso.fit_each(samples, fixed=[("k1", 0.1)])


def test_bootstrap_interval_of_a_series_does_not_depend_on_the_other_series():
    # each series' bootstrap seed comes from the run's seed and the series' own key: adding
    # goat1 (sorted before goat3) must not change goat3's interval, nor must n_jobs
    frame = invented_samples()
    plasma = frame[(frame["tissue"] == "plasma") & (frame["isotope"] == "d13C")]

    def boot(subjects, seed=5, n_jobs=1):
        a = analyse(plasma[plasma["subject"].isin(subjects)], ci="bootstrap", n_boot=30,
                    seed=seed, n_jobs=n_jobs)
        tab = a.results_table()
        tab = tab[tab["chosen"].astype(bool)].set_index("subject")
        return tab.loc["goat3", ["boot_lower_1", "boot_upper_1"]].astype(float)

    alone = boot(["goat3"])
    assert np.isfinite(alone).all() and alone.iloc[0] < alone.iloc[1]
    pd.testing.assert_series_equal(boot(["goat1", "goat3"]), alone, check_exact=True)
    pd.testing.assert_series_equal(boot(["goat3", "goat4"], n_jobs=2), alone,
                                   check_exact=True)
    assert not boot(["goat3"], seed=6).equals(alone)      # the seed is used at all


def test_series_seed_is_stable_and_refuses_bad_seeds():
    a = series_seed(1, "samples", ("goat3", "plasma", "d13C"))
    b = series_seed(1, "samples", ("goat3", "plasma", "d13C"))
    assert a.entropy == b.entropy
    assert series_seed(1, "samples", ("goat4", "plasma", "d13C")).entropy != a.entropy
    assert series_seed(2, "samples", ("goat3", "plasma", "d13C")).entropy != a.entropy
    assert series_seed(None, "samples", ("goat3",)) is None
    with pytest.raises(DataError, match=r"'seed' must be a non-negative integer or None; "
                                        r"got -1"):
        series_seed(-1, "samples", ("goat3",))


# ----------------------------------------------------------------------------------------
# FitSet.table: a failed interval is recorded, a programming error surfaces
# ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("error", [ValueError, RuntimeError, TypeError])
def test_a_programming_error_in_the_table_intervals_surfaces(monkeypatch, error):
    fs = iso.fit_each(invented_diet_switch(), pools=(1,))

    def broken_half_lives(self, *args, **kwargs):
        raise error("a bug in the half-life table (invented)")

    monkeypatch.setattr(iso.TurnoverFit, "half_lives", broken_half_lives)
    with pytest.raises(error, match=r"a bug in the half-life table \(invented\)"):
        fs.table(method="asymptotic")


def test_a_library_error_in_the_table_intervals_is_recorded(monkeypatch):
    good = iso.fit_each(invented_diet_switch(), pools=(1,)).table(method="asymptotic")
    good = good.set_index("subject")
    assert (good["interval_note"] == "").all()

    def failing_half_lives(self, *args, **kwargs):
        raise iso.FitError("profile could not be computed (invented failure)")

    # a table's rows are computed once and kept on the fits: fits made afresh meet the
    # failure when their table is first made
    monkeypatch.setattr(iso.TurnoverFit, "half_lives", failing_half_lives)
    fs = iso.fit_each(invented_diet_switch(), pools=(1,))
    tab = fs.table(method="asymptotic").set_index("subject")
    assert len(tab) == 4 and (tab["status"] == "ok").all()   # no row dropped or failed
    assert (tab["interval_note"] == "half-life intervals failed: profile could not be "
                                    "computed (invented failure)").all()
    assert (tab["reason"] == "").all()
    for subject, row in tab.iterrows():
        # the estimate stays: t½ = ln 2 / k1 (definition), k1 from the fit itself
        k1 = fs[(subject, "plasma", "d13C")].best.values["k1"]
        assert row["half_life_1"] == pytest.approx(LN2 / k1, rel=1e-12)
        assert row["half_life_1"] == pytest.approx(good.loc[subject, "half_life_1"],
                                                   rel=1e-12)
        assert math.isnan(row["lower_1"]) and math.isnan(row["upper_1"])
        assert row["lower_status_1"] == "failed" and row["upper_status_1"] == "failed"
    # the other interval columns are still computed
    pd.testing.assert_series_equal(tab["time_to_95_upper"], good["time_to_95_upper"])
    pd.testing.assert_series_equal(tab["delta0_lower"], good["delta0_lower"])


# ----------------------------------------------------------------------------------------
# warnings of the series' growth curves, in serial and in parallel runs
# ----------------------------------------------------------------------------------------
def invented_growing_goats(seed=2):
    """Two goats still growing exponentially (1 %/d, invented) over the sampling period:
    a logistic growth curve reaches only a small part of its asymptote there."""
    rng = np.random.default_rng(seed)
    days = np.array([0, 7, 14, 21, 28, 42, 56, 70.0])
    rows, masses = [], []
    for s in ("goat0", "goat1"):
        for d in days:
            rows.append({"subject": s, "tissue": "plasma", "isotope": "d13C", "time": d,
                         "value": -13.0 - 13.0 * math.exp(-0.1 * d) + rng.normal(0, 0.1)})
            masses.append({"subject": s, "time": d,
                           "mass": 20.0 * math.exp(0.01 * d + rng.normal(0, 0.01))})
    return pd.DataFrame(rows), pd.DataFrame(masses)


def _messages(record):
    return sorted({str(w.message) for w in record if issubclass(w.category,
                                                                iso.IsoturnoverWarning)})


def test_growth_curve_warnings_name_the_subject_in_serial_and_parallel_runs():
    frame, masses = invented_growing_goats()
    with pytest.warns(iso.IsoturnoverWarning) as serial:
        fs1 = iso.fit_each(frame, masses=masses, pools=(1,))
    messages = _messages(serial)
    # the logistic fit's design note (data far below the fitted asymptote), per goat
    for s in ("goat0", "goat1"):
        assert any(m.startswith(f"growth curve of subject {s}: ") and "asymptote" in m
                   for m in messages), messages
    # worker processes send their warnings back: the same ones, issued in the caller
    with pytest.warns(iso.IsoturnoverWarning) as parallel:
        fs2 = iso.fit_each(frame, masses=masses, pools=(1,), n_jobs=2)
    assert _messages(parallel) == messages
    pd.testing.assert_frame_equal(fs2.table(method="asymptotic"),
                                  fs1.table(method="asymptotic"), check_exact=True)


def test_a_frame_read_already_is_not_warned_about_twice():
    # the same row twice: read_samples warns once; fit_each, validating the frame it is
    # given again, does not repeat the warning for a frame the reader made
    frame = invented_diet_switch()
    frame = pd.concat([frame, frame.iloc[[3]]], ignore_index=True)
    with pytest.warns(iso.DataWarning, match=r"1 rows are exact duplicates|2 rows are exact "
                                               r"duplicates"):
        validated = iso.read_samples(frame)
    with warnings.catch_warnings():
        warnings.simplefilter("error", iso.DataWarning)
        iso.fit_each(validated, pools=(1,))
    # a frame that did not come from the reader is warned about in fit_each
    with pytest.warns(iso.DataWarning, match=r"exact duplicates"):
        iso.fit_each(frame, pools=(1,))


def test_analyse_refuses_bad_options_before_any_fit(samples):
    with pytest.raises(DataError, match=r"'ci' must be one of 'profile', 'asymptotic', "
                                        r"'bootstrap'; got 'prof'"):
        analyse(samples, ci="prof")
    with pytest.raises(DataError, match=r"'pools' (\(--pools\) )?must be integers from 1 to "
                                        r"4; got \('a',\)"):
        analyse(samples, pools=("a",))
    with pytest.raises(DataError, match=r"'pools' (\(--pools\) )?must be integers from 1 to "
                                        r"4; got '1,5'"):
        analyse(samples, pools="1,5")
    with pytest.raises(DataError, match=r"'pools' \(--pools\) must be a comma-separated list "
                                        r"of integers 1-4, such as 1,2; got '1;2'"):
        analyse(samples, pools="1;2")
    with pytest.raises(DataError, match=r"'n_boot' must be an integer >= 1; got 0"):
        analyse(samples, ci="bootstrap", n_boot=0)
    with pytest.raises(DataError, match=r"'level' must be between 0 and 1"):
        analyse(samples, level=1.5)


# ----------------------------------------------------------------------------------------
# results.csv: the group, incorporation half-lives, growth share, interval statuses
# ----------------------------------------------------------------------------------------
def test_results_table_keeps_the_group_and_gives_every_interval_its_statuses(fitset,
                                                                            samples):
    from isoturnover.analysis import Analysis
    from isoturnover.conventions import STATUSES

    tab = Analysis({"samples": fitset}, ci="asymptotic").results_table()
    assert list(tab.columns[:5]) == ["part", "subject", "tissue", "isotope", "group"]
    # each series' group is the group of its rows in the samples table (invented: goats
    # 1-3 in A, 4-6 in B)
    want = samples.groupby("subject")["group"].first()
    assert (tab["group"] == tab["subject"].map(want)).all()
    fitted = tab["rss"].notna()
    assert fitted.sum() > 0
    for q in ("delta0", "delta_eq", "time_to_95"):
        for side in ("lower", "upper"):
            assert set(tab.loc[fitted, f"{q}_{side}_status"]) <= set(STATUSES), q
    for side in ("lower", "upper"):
        assert set(tab.loc[fitted, f"{side}_status_1"]) <= set(STATUSES)
    # no growth model here: no growth columns
    assert not any(c.startswith(("incorporation", "growth_share")) for c in tab.columns)


def test_table_gives_incorporation_half_lives_and_growth_share_of_growth_fits():
    frame, masses = invented_growing_goats()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fs = iso.fit_each(frame, masses=masses, pools=(1,), growth_curve="exponential")
    from isoturnover.conventions import STATUSES

    for method in ("asymptotic", "profile"):
        tab = fs.table(method=method)
        assert len(tab) == 2 and (tab["status"] == "ok").all()
        for _, row in tab.iterrows():
            f = fs[(row["subject"], "plasma", "d13C")].best
            # k_g: the exponential growth curve's specific growth rate d ln W/dt (its mean
            # over the sampling period is the rate itself)
            kd, kg = f.values["k1"], f.mean_growth_rate()
            # incorporation half-life ln 2 / (k_d + k_g) (Hesslein, Hallard & Ramlal 1993;
            # by hand from the fit's own rates); the catabolic one is ln 2 / k_d
            assert row["incorporation_half_life_1"] == pytest.approx(LN2 / (kd + kg),
                                                                     rel=1e-12)
            assert row["half_life_1"] == pytest.approx(LN2 / kd, rel=1e-12)
            # one pool, exponential growth: growth share k_g / (k_g + k_d) at every time
            # (Hesslein et al. 1993; by hand; the library integrates it by quadrature)
            assert row["growth_share"] == pytest.approx(kg / (kg + kd), rel=1e-8)
            for q, lo, hi in (("incorporation_half_life_1", "incorporation_lower_1",
                               "incorporation_upper_1"),
                              ("growth_share", "growth_share_lower", "growth_share_upper")):
                assert row[lo] < row[q] < row[hi], q
            for col in ("incorporation_lower_status_1", "incorporation_upper_status_1",
                        "growth_share_lower_status", "growth_share_upper_status"):
                assert row[col] in STATUSES and row[col] == "ok", col
            assert row["growth_share_method"] == method
            assert row["rate_kind"] == "catabolic"
        # the same numbers as the fit's own tables (one computation, kept on the fit)
        f = fs[("goat0", "plasma", "d13C")].best
        inc = f.incorporation_half_lives(method=method).iloc[0]
        row = tab.set_index("subject").loc["goat0"]
        assert row["incorporation_lower_1"] == inc["lower"]
        assert row["incorporation_upper_1"] == inc["upper"]


def test_the_table_reuses_the_intervals_kept_on_the_fits(fitset, monkeypatch):
    # a second table (and the rows of a merged FitSet) are assembled from the rows kept on
    # the fits: no interval is computed again
    first = fitset.table(method="asymptotic")

    def no_more(self, *args, **kwargs):
        raise AssertionError("an interval was computed again")

    for name in ("conf_int", "half_lives", "time_to"):
        monkeypatch.setattr(iso.TurnoverFit, name, no_more)
    pd.testing.assert_frame_equal(fitset.table(method="asymptotic"), first,
                                  check_exact=True)


def test_whole_table_averaging_equals_averaging_series_by_series():
    # replicates in shuffled row order (invented): the table averaged at once gives each
    # series exactly what averaging that series alone gives (data.average_replicates)
    rng = np.random.default_rng(5)
    rows = []
    for s in ("a", "b"):
        for t in (0.0, 3.0, 7.0, 14.0, 28.0):
            for _ in range(3):
                rows.append({"subject": s, "tissue": "plasma", "isotope": "d13C", "time": t,
                             "value": -20 + 5 * math.exp(-t / 6) + rng.normal(0, 0.3),
                             "sd": 0.1})
    frame = pd.DataFrame(rows).sample(frac=1.0, random_state=3).reset_index(drop=True)
    s = iso.read_samples(frame)
    keys = s[["subject", "tissue", "isotope"]].astype(str)
    pos = {k: p for k, p in keys.groupby(["subject", "tissue", "isotope"]).indices.items()}
    data = seriesrows.series_data(s, ("subject", "tissue", "isotope"), pos,
                                  iso.average_replicates)
    for d, p in zip(data, pos.values()):
        one = iso.average_replicates(s.iloc[p].sort_values(["subject", "time", "value",
                                                            "sd"], kind="stable"))
        np.testing.assert_array_equal(d.t, one["time"].to_numpy())
        np.testing.assert_array_equal(d.y, one["value"].to_numpy())
        np.testing.assert_array_equal(d.sd, one["sd"].to_numpy())
        assert d.n_rows == len(p)
