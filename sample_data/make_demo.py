r"""Generate the invented demo experiment shipped with isoturnover.

Everything written by this script is **invented**: no animal was kept, fed or sampled. The
numbers come from the library's own forward model (:class:`isoturnover.kinetics.TurnoverKinetics`)
with a fixed seed, so the true values are known exactly and listed in ``truth.csv``.

Scenario (see ``sample_data/README.md``):

* A university farm moves eight yearling goats (pens ``A`` and ``B``, four goats each) from a
  C3 grass-hay ration to a C4 maize ration on day 0; pen B goes back to hay on day 120.
  Plasma and red cells are sampled for δ13C and plasma for δ15N to day 180, breath CO2 for
  δ13C over the first 72 hours (a file of its own: its time unit is hours), and every goat is
  weighed weekly. Plasma and red cells are one-pool tissues that grow with the goat (growth
  dilution from each goat's logistic growth curve); breath CO2 has two pools and no growth
  dilution (it is not a tissue laid down with body mass).
* A hatchery batch of juvenile fish is switched to a new feed on day 0 and sampled
  destructively (one fish per sample, three fish per sampling day); muscle δ15N and δ13C, and
  the mass of each fish at sampling. The fish grow fast (exponential growth, k_growth about
  0.029 per day) and their muscle turns over slowly (catabolic rate about 0.005 per day), so
  most of the change is growth dilution.

Noise model: per-animal rates drawn log-normally (15 % coefficient of variation about the
population median), a per-animal offset of the diet–tissue separation (sd 0.3 ‰),
biological scatter of each sample (sd 0.2 ‰) and the analytic error of each analysis (the
``sd`` column). About 3 % of the planned samples are removed at random ("missing"), and about
10 % of the remaining samples are analysed twice (``replicate`` 1 and 2: the same sample, so
the same biological value, with a fresh analytic error).

Usage::

    python sample_data/make_demo.py                 # rewrite sample_data/, isoturnover/demo_data/
                                                    # and the generated blocks of the README
    python sample_data/make_demo.py --out DIR       # write the CSV files into DIR only

Every file is written atomically (a temporary name, then :func:`os.replace`).

A real experiment of this kind needs the approval of the local animal-care authority; the
library supports the planning and analysis of such work and does not replace that approval.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
from pathlib import Path

import numpy as np

from isoturnover.diet import DietHistory
from isoturnover.kinetics import TurnoverKinetics

__all__ = [
    "SEED",
    "FILES",
    "build_demo",
    "readme_blocks",
    "update_readme",
    "make_demo",
    "main",
]

#: Seed of every random draw (each component gets its own stream ``[SEED, component]``).
SEED = 20240601

HERE = Path(__file__).resolve().parent
REPO = HERE.parent
DEFAULT_DIRS = (HERE, REPO / "isoturnover" / "demo_data")
DEFAULT_README = HERE / "README.md"

#: The files written, in order.
FILES = (
    "goat_samples.csv",
    "goat_breath.csv",
    "goat_diets.csv",
    "goat_masses.csv",
    "fish_samples.csv",
    "fish_masses.csv",
    "fish_diets.csv",
    "truth.csv",
    "field_samples.csv",
    "field_truth.csv",
    "goat_hair.csv",
    "goat_hair_truth.csv",
)

LN2 = math.log(2.0)

# ---------------------------------------------------------------------------------------
# Design (all values invented; orders of magnitude chosen to be realistic)
# ---------------------------------------------------------------------------------------
#: Sampling days of plasma and red cells (both pens). Samples taken on a switch day
#: (days 0 and 120) are taken before the new ration is offered.
GOAT_DAYS = np.array([0, 1, 2, 4, 7, 10, 14, 21, 28, 42, 56, 70, 90, 120, 121, 123, 126, 130,
                      135, 142, 150, 165, 180], dtype=float)
#: Breath sampling times in hours after the switch (day 0, hour 0).
BREATH_HOURS = np.array([0, 1, 2, 3, 4, 6, 8, 12, 16, 24, 36, 48, 60, 72], dtype=float)
#: Weighing days of the goats (weekly, and at the last sampling).
GOAT_WEIGH_DAYS = np.concatenate([np.arange(0.0, 176.0, 7.0), [180.0]])
#: Fish sampling days, three fish each.
FISH_DAYS = np.array([0, 3, 7, 10, 14, 21, 28, 35, 42, 56, 70], dtype=float)
FISH_PER_DAY = 3

PENS = {"A": ("G01", "G02", "G03", "G04"), "B": ("G05", "G06", "G07", "G08")}
DIET_START = -365.0  # the goats ate hay for a year before the switch (equilibrated tissues)
FISH_DIET_START = -150.0  # the fish ate the starter feed from first feeding, 150 days
SWITCH_BACK = 120.0  # pen B returns to hay

# Diet values (δ, ‰ vs VPDB for δ13C, vs AIR for δ15N). C3 grass hay about -27.5 ‰ and maize
# about -12.5 ‰ δ13C are typical of C3 and C4 plants (common practice); δ15N invented.
GOAT_DIETS = {"hay": {"d13C": -27.5, "d15N": 2.0}, "maize": {"d13C": -12.5, "d15N": 5.5}}
FISH_BATCH = "batch1"
FISH_DIETS = {"starter": {"d13C": -21.0, "d15N": 9.0}, "new feed": {"d13C": -25.5, "d15N": 4.5}}

# Population (median) values of each series. Half-lives in the series' time unit; for the
# growing tissues they are catabolic half-lives (growth dilution comes on top).
GOAT_SERIES = (
    {"tissue": "plasma", "isotope": "d13C", "half_lives": (4.0,), "fractions": (1.0,),
     "discrimination": {"hay": 2.0, "maize": 2.0}, "sd": 0.10},
    {"tissue": "red_cells", "isotope": "d13C", "half_lives": (40.0,), "fractions": (1.0,),
     "discrimination": {"hay": 1.5, "maize": 1.5}, "sd": 0.10},
    {"tissue": "plasma", "isotope": "d15N", "half_lives": (6.0,), "fractions": (1.0,),
     "discrimination": {"hay": 3.8, "maize": 3.2}, "sd": 0.15},
)
BREATH_SERIES = {"tissue": "breath", "isotope": "d13C", "half_lives": (2.0, 15.0),
                 "fractions": (0.5, 0.5), "discrimination": {"hay": 1.0, "maize": 1.0},
                 "sd": 0.15}
FISH_SERIES = (
    {"tissue": "muscle", "isotope": "d15N", "half_lives": (LN2 / 0.005,), "fractions": (1.0,),
     "discrimination": {"starter": 3.5, "new feed": 3.5}, "sd": 0.15},
    {"tissue": "muscle", "isotope": "d13C", "half_lives": (LN2 / 0.007,), "fractions": (1.0,),
     "discrimination": {"starter": 1.5, "new feed": 1.5}, "sd": 0.10},
)

# Growth (population medians). Goats: logistic W = Winf / (1 + exp(-k (t - ti))), kg, days;
# ti follows from the mass at day 0. Fish: exponential W = W0 exp(k_growth t), g, days.
GOAT_W0, GOAT_WINF, GOAT_K = 28.0, 46.0, 0.0085
GOAT_W0_CV, GOAT_WINF_CV, GOAT_K_CV = 0.08, 0.05, 0.10
GOAT_WEIGH_SD = 0.3  # kg: gut fill and scale
FISH_W0, FISH_KG = 2.0, 0.029
FISH_W0_CV, FISH_KG_CV = 0.15, 0.06

# Noise model
RATE_CV = 0.15  # between-animal coefficient of variation of every rate
FRACTION_LOGIT_SD = 0.2  # between-animal sd of logit(f1) for breath
OFFSET_SD = 0.3  # ‰, per-animal offset of the separation (same for both diets)
BIO_SD = 0.2  # ‰, sample-level biological scatter beyond the analytic error
MISSING_FRACTION = 0.03
REPLICATE_FRACTION = 0.10

# Field scenario (an isotopic clock): adult goats of a herd on C3 pasture, each moved to the
# maize ration at its own (invented, recorded) time and sampled once, on one day, for plasma and
# red cells δ13C. Times since the change in days; adults do not grow, so the catabolic rates
# of the captive goats are their turnover rates.
FIELD_TIMES = (0.1, 1.5, 4.0, 8.0, 12.0, 20.0, 30.0, 45.0, 60.0, 90.0, 130.0, 300.0)
FIELD_SD = math.sqrt(0.10 ** 2 + BIO_SD ** 2 + OFFSET_SD ** 2)  # ‰: analytic, sample, animal

# Hair scenario (segment profiles): tail hair of four of the captive goats, cut at the skin on
# the last sampling day and cut into segments of equal length from the base (the skin end).
# The hair's growth rate and its precursor's kinetics are invented: 0.4 mm/d for every goat (of
# the order of the 0.3–0.5 mm/d of tail hair), no formation lag, one pool with a 15-day
# half-life (no growth dilution: hair keratin is laid down from the precursor, not diluted by
# body growth) and a keratin–diet separation of +3.0 ‰ δ13C.
HAIR_GOATS = ("G01", "G02", "G05", "G06")
HAIR_GROWTH = 0.4  # mm per day, invented
HAIR_LAG = 0.0  # days from formation to emergence at the skin
HAIR_SAMPLE_DAY = 180.0
HAIR_SEGMENT = 4.0  # mm
HAIR_LENGTH = 96.0  # mm: 24 segments, formed from day -60 to day 180
HAIR_HALF_LIFE = 15.0  # days (population median)
HAIR_DISCRIMINATION = 3.0  # ‰
HAIR_SD = 0.10  # ‰, analytic

_MARK = "<!-- make_demo:{name}:{end} -->"
_BLOCKS = ("truth", "goats", "files", "missing")


def _lognormal_sd(cv: float) -> float:
    """sd of ln X for a log-normal X with coefficient of variation ``cv``: √ln(1 + cv²)."""
    return math.sqrt(math.log1p(cv * cv))


def _rng(component: int) -> np.random.Generator:
    return np.random.default_rng([SEED, component])


# ---------------------------------------------------------------------------------------
# Growth curves handed to the kinetic model (predict, log_mass, rate)
# ---------------------------------------------------------------------------------------
class _Logistic:
    r"""Logistic body mass :math:`W = W_\infty/(1 + e^{-k(t - t_i)})` (kg, days)."""

    def __init__(self, winf: float, k: float, ti: float):
        self.winf, self.k, self.ti = float(winf), float(k), float(ti)

    @classmethod
    def from_w0(cls, w0: float, winf: float, k: float) -> _Logistic:
        # W(0) = w0  ⇒  1 + e^{k ti} = winf / w0  ⇒  ti = ln(winf/w0 − 1)/k
        return cls(winf, k, math.log(winf / w0 - 1.0) / k)

    def log_mass(self, t):
        t = np.asarray(t, dtype=float)
        return math.log(self.winf) - np.logaddexp(0.0, -self.k * (t - self.ti))

    def predict(self, t):
        return np.exp(self.log_mass(t))

    def rate(self, t):
        # d ln W/dt = k (1 − W/Winf) = k / (1 + e^{k (t − ti)})
        t = np.asarray(t, dtype=float)
        return self.k * np.exp(-np.logaddexp(0.0, self.k * (t - self.ti)))


# ---------------------------------------------------------------------------------------
# Forward model helpers
# ---------------------------------------------------------------------------------------
def _theta(kin: TurnoverKinetics, values: dict) -> np.ndarray:
    return kin.check_theta(np.array([values[n] for n in kin.param_names], dtype=float))


def _separation_values(kin: TurnoverKinetics, disc_by_value: dict) -> dict:
    """Parameter values of the separations, keyed by the model's own names."""
    names = kin.separation_names
    if names == ("discrimination",):
        vals = set(disc_by_value.values())
        if len(vals) != 1:
            raise ValueError("a shared separation needs one value for every diet")
        return {"discrimination": vals.pop()}
    # per-diet separations are numbered in order of first appearance of each diet value
    order: list[float] = []
    for v in kin.diet.values:
        if v not in order:
            order.append(float(v))
    return {f"discrimination_{i}": disc_by_value[v] for i, v in enumerate(order)}


def _series_model(diet: DietHistory, disc_by_value: dict, pools: int, growth=None):
    per_diet = len(set(disc_by_value.values())) > 1
    return TurnoverKinetics(pools, diet=diet, per_diet_separation=per_diet, growth=growth)


# ---------------------------------------------------------------------------------------
# Noise: missing samples and replicates
# ---------------------------------------------------------------------------------------
def _observe(rng, truth_values, sd, keys):
    """Biological scatter, missing samples, replicates and analytic error.

    Parameters
    ----------
    rng : numpy.random.Generator
    truth_values : ndarray of shape (n,)
        Model values of the planned samples (‰).
    sd : ndarray of shape (n,)
        Analytic sd of each sample (‰).
    keys : list of tuples
        Row identity of each planned sample (subject, group, tissue, isotope, time).

    Returns
    -------
    rows : list of tuple
        ``key + (value, sd, replicate)`` for every analysis, sorted.
    missing : list of tuple
        Keys of the planned samples that are missing.
    """
    n = truth_values.size
    bio = truth_values + rng.normal(0.0, BIO_SD, n)
    n_miss = int(round(MISSING_FRACTION * n))
    miss = np.zeros(n, dtype=bool)
    miss[rng.choice(n, size=n_miss, replace=False)] = True
    kept = np.flatnonzero(~miss)
    n_rep = int(round(REPLICATE_FRACTION * kept.size))
    dup = np.zeros(n, dtype=bool)
    dup[rng.choice(kept, size=n_rep, replace=False)] = True
    first = bio + rng.normal(0.0, 1.0, n) * sd
    second = bio + rng.normal(0.0, 1.0, n) * sd
    rows = []
    for i in kept:
        rows.append(keys[i] + (first[i], sd[i], 1))
        if dup[i]:
            rows.append(keys[i] + (second[i], sd[i], 2))
    missing = [keys[i] for i in np.flatnonzero(miss)]
    return rows, missing


# ---------------------------------------------------------------------------------------
# The experiment
# ---------------------------------------------------------------------------------------
def _goat_diet(pen: str, isotope: str) -> DietHistory:
    hay, maize = GOAT_DIETS["hay"][isotope], GOAT_DIETS["maize"][isotope]
    changes = [(0.0, maize)] if pen == "A" else [(0.0, maize), (SWITCH_BACK, hay)]
    return DietHistory(hay, changes=changes, isotope=isotope, label=f"pen {pen}")


def _truth_row(**kw) -> dict:
    row = dict.fromkeys(TRUTH_COLUMNS, "")
    row.update(kw)
    return row


TRUTH_COLUMNS = (
    "level", "subject", "group", "tissue", "isotope", "time_unit", "pools", "pool",
    "fraction", "rate", "half_life", "rate_kind", "growth", "growth_w0", "growth_winf",
    "growth_k", "growth_ti", "growth_rate_mean", "incorporation_rate",
    "incorporation_half_life", "growth_share", "diet_old", "diet_old_value",
    "discrimination_old", "plateau_old", "diet_new", "diet_new_value", "discrimination_new",
    "plateau_new", "rate_cv", "discrimination_sd",
)


def _goats():
    """Goat samples, breath, masses, diets and truth rows."""
    prng = _rng(1)
    goats = [(pen, g) for pen, ids in PENS.items() for g in ids]
    n_goat = len(goats)
    # growth curves
    w0 = GOAT_W0 * np.exp(prng.normal(0, _lognormal_sd(GOAT_W0_CV), n_goat))
    winf = GOAT_WINF * np.exp(prng.normal(0, _lognormal_sd(GOAT_WINF_CV), n_goat))
    kgr = GOAT_K * np.exp(prng.normal(0, _lognormal_sd(GOAT_K_CV), n_goat))
    curves = [_Logistic.from_w0(a, b, c) for a, b, c in zip(w0, winf, kgr)]
    pop_curve = _Logistic.from_w0(GOAT_W0, GOAT_WINF, GOAT_K)
    t_end = float(GOAT_DAYS[-1])

    def mean_growth(c):
        return float((c.log_mass(t_end) - c.log_mass(0.0)) / t_end)

    truth: list[dict] = []
    sample_keys, sample_true, sample_sd = [], [], []
    s_rate = _lognormal_sd(RATE_CV)
    for spec in GOAT_SERIES:
        iso = spec["isotope"]
        k_pop = np.array([LN2 / h for h in spec["half_lives"]])
        rates = k_pop[None, :] * np.exp(prng.normal(0, s_rate, (n_goat, k_pop.size)))
        offsets = prng.normal(0, OFFSET_SD, n_goat)
        hay, maize = GOAT_DIETS["hay"][iso], GOAT_DIETS["maize"][iso]
        d_hay, d_maize = spec["discrimination"]["hay"], spec["discrimination"]["maize"]
        for a, (pen, goat) in enumerate(goats):
            diet = _goat_diet(pen, iso)
            kin = _series_model(diet, {hay: d_hay + offsets[a], maize: d_maize + offsets[a]},
                                1, growth=curves[a])
            vals = {"k1": rates[a, 0], "f1": 1.0}
            vals.update(_separation_values(kin, {hay: d_hay + offsets[a],
                                                 maize: d_maize + offsets[a]}))
            th = _theta(kin, vals)
            y = kin.predict(GOAT_DAYS, th)
            sample_true.append(y)
            sample_sd.append(np.full(GOAT_DAYS.size, spec["sd"]))
            sample_keys += [(goat, pen, spec["tissue"], iso, t) for t in GOAT_DAYS]
            g = mean_growth(curves[a])
            k = float(rates[a, 0])
            truth.append(_truth_row(
                level="animal", subject=goat, group=pen, tissue=spec["tissue"], isotope=iso,
                time_unit="d", pools=1, pool=1, fraction=1.0, rate=k, half_life=LN2 / k,
                rate_kind="catabolic", growth="logistic", growth_w0=w0[a],
                growth_winf=curves[a].winf, growth_k=curves[a].k, growth_ti=curves[a].ti,
                growth_rate_mean=g, incorporation_rate=k + g,
                incorporation_half_life=LN2 / (k + g), growth_share=g / (k + g),
                diet_old="hay", diet_old_value=hay, discrimination_old=d_hay + offsets[a],
                plateau_old=hay + d_hay + offsets[a], diet_new="maize", diet_new_value=maize,
                discrimination_new=d_maize + offsets[a],
                plateau_new=maize + d_maize + offsets[a]))
        g = mean_growth(pop_curve)
        k = float(k_pop[0])
        truth.append(_truth_row(
            level="population", subject="population", group="A;B", tissue=spec["tissue"],
            isotope=iso, time_unit="d", pools=1, pool=1, fraction=1.0, rate=k,
            half_life=LN2 / k, rate_kind="catabolic", growth="logistic", growth_w0=GOAT_W0,
            growth_winf=pop_curve.winf, growth_k=pop_curve.k, growth_ti=pop_curve.ti,
            growth_rate_mean=g, incorporation_rate=k + g,
            incorporation_half_life=LN2 / (k + g), growth_share=g / (k + g), diet_old="hay",
            diet_old_value=hay, discrimination_old=d_hay, plateau_old=hay + d_hay,
            diet_new="maize", diet_new_value=maize, discrimination_new=d_maize,
            plateau_new=maize + d_maize, rate_cv=RATE_CV, discrimination_sd=OFFSET_SD))
    samples, missing = _observe(_rng(2), np.concatenate(sample_true),
                                np.concatenate(sample_sd), sample_keys)

    # breath: two pools, hours, no growth dilution; every goat, one switch at hour 0
    spec = BREATH_SERIES
    brng = _rng(3)
    iso = spec["isotope"]
    hay, maize = GOAT_DIETS["hay"][iso], GOAT_DIETS["maize"][iso]
    d_shared = spec["discrimination"]["hay"]
    k_pop = np.array([LN2 / h for h in spec["half_lives"]])
    rates = k_pop[None, :] * np.exp(brng.normal(0, s_rate, (n_goat, k_pop.size)))
    logit = math.log(spec["fractions"][0] / spec["fractions"][1])
    f1 = 1.0 / (1.0 + np.exp(-(logit + brng.normal(0, FRACTION_LOGIT_SD, n_goat))))
    offsets = brng.normal(0, OFFSET_SD, n_goat)
    b_keys, b_true, b_sd = [], [], []
    for a, (pen, goat) in enumerate(goats):
        kin = TurnoverKinetics(2, diet=DietHistory.step(hay, maize, at=0.0, isotope=iso))
        th = _theta(kin, {"discrimination": d_shared + offsets[a], "k1": rates[a, 0],
                          "k2": rates[a, 1], "f1": f1[a], "f2": 1.0 - f1[a]})
        b_true.append(kin.predict(BREATH_HOURS, th))
        b_sd.append(np.full(BREATH_HOURS.size, spec["sd"]))
        b_keys += [(goat, pen, spec["tissue"], iso, t) for t in BREATH_HOURS]
        for p in range(2):
            fr = f1[a] if p == 0 else 1.0 - f1[a]
            k = float(rates[a, p])
            truth.append(_truth_row(
                level="animal", subject=goat, group=pen, tissue=spec["tissue"], isotope=iso,
                time_unit="h", pools=2, pool=p + 1, fraction=fr, rate=k, half_life=LN2 / k,
                rate_kind="incorporation", growth="none", diet_old="hay",
                diet_old_value=hay, discrimination_old=d_shared + offsets[a],
                plateau_old=hay + d_shared + offsets[a], diet_new="maize",
                diet_new_value=maize, discrimination_new=d_shared + offsets[a],
                plateau_new=maize + d_shared + offsets[a]))
    for p in range(2):
        k = float(k_pop[p])
        truth.append(_truth_row(
            level="population", subject="population", group="A;B", tissue=spec["tissue"],
            isotope=iso, time_unit="h", pools=2, pool=p + 1, fraction=spec["fractions"][p],
            rate=k, half_life=LN2 / k, rate_kind="incorporation", growth="none",
            diet_old="hay", diet_old_value=hay, discrimination_old=d_shared,
            plateau_old=hay + d_shared, diet_new="maize", diet_new_value=maize,
            discrimination_new=d_shared, plateau_new=maize + d_shared, rate_cv=RATE_CV,
            discrimination_sd=OFFSET_SD))
    breath, b_missing = _observe(_rng(4), np.concatenate(b_true), np.concatenate(b_sd),
                                 b_keys)

    # masses: the logistic curve of each goat plus weighing scatter (kg, 0.1 kg)
    mrng = _rng(5)
    masses = []
    for a, (_pen, goat) in enumerate(goats):
        w = curves[a].predict(GOAT_WEIGH_DAYS) + mrng.normal(0, GOAT_WEIGH_SD,
                                                             GOAT_WEIGH_DAYS.size)
        masses += [(goat, t, m) for t, m in zip(GOAT_WEIGH_DAYS, w)]

    diets = []
    for pen in PENS:
        for iso in ("d13C", "d15N"):
            hay, maize = GOAT_DIETS["hay"][iso], GOAT_DIETS["maize"][iso]
            diets += [(pen, iso, DIET_START, hay), (pen, iso, 0.0, maize)]
            if pen == "B":
                diets.append((pen, iso, SWITCH_BACK, hay))
    return {"samples": samples, "missing": missing, "breath": breath,
            "breath_missing": b_missing, "masses": masses, "diets": diets, "truth": truth}


def _fish():
    """Fish samples, masses, diets and truth rows (destructive sampling)."""
    prng = _rng(6)
    times = np.repeat(FISH_DAYS, FISH_PER_DAY)
    n = times.size
    fish = [f"F{i + 1:02d}" for i in range(n)]
    w0 = FISH_W0 * np.exp(prng.normal(0, _lognormal_sd(FISH_W0_CV), n))
    kg = FISH_KG * np.exp(prng.normal(0, _lognormal_sd(FISH_KG_CV), n))
    old, new = FISH_DIETS
    truth: list[dict] = []
    keys, true, sds = [], [], []
    s_rate = _lognormal_sd(RATE_CV)
    for spec in FISH_SERIES:
        iso = spec["isotope"]
        d_old, d_new = spec["discrimination"][old], spec["discrimination"][new]
        if d_old != d_new:
            raise ValueError("the fish series use one separation for both feeds")
        v_old, v_new = FISH_DIETS[old][iso], FISH_DIETS[new][iso]
        kin = TurnoverKinetics(1, diet=DietHistory.step(v_old, v_new, at=0.0, isotope=iso),
                               growth="exponential")
        k_pop = LN2 / spec["half_lives"][0]
        kd = k_pop * np.exp(prng.normal(0, s_rate, n))
        offsets = prng.normal(0, OFFSET_SD, n)
        # one sample per fish: a loop over fish, each with its own parameters
        y = np.array([
            kin.predict(times[i:i + 1], _theta(kin, {"discrimination": d_old + offsets[i],
                                                      "k1": kd[i], "f1": 1.0,
                                                      "k_growth": kg[i]}))[0]
            for i in range(n)
        ])
        true.append(y)
        sds.append(np.full(n, spec["sd"]))
        keys += [(fish[i], FISH_BATCH, spec["tissue"], iso, times[i]) for i in range(n)]
        for i in range(n):
            k, g = float(kd[i]), float(kg[i])
            truth.append(_truth_row(
                level="animal", subject=fish[i], group=FISH_BATCH, tissue=spec["tissue"],
                isotope=iso, time_unit="d", pools=1, pool=1, fraction=1.0, rate=k,
                half_life=LN2 / k, rate_kind="catabolic", growth="exponential",
                growth_w0=w0[i], growth_k=g, growth_rate_mean=g, incorporation_rate=k + g,
                incorporation_half_life=LN2 / (k + g), growth_share=g / (k + g),
                diet_old=old, diet_old_value=v_old, discrimination_old=d_old + offsets[i],
                plateau_old=v_old + d_old + offsets[i], diet_new=new, diet_new_value=v_new,
                discrimination_new=d_new + offsets[i], plateau_new=v_new + d_new + offsets[i]))
        truth.append(_truth_row(
            level="population", subject="population", group=FISH_BATCH,
            tissue=spec["tissue"], isotope=iso, time_unit="d", pools=1, pool=1, fraction=1.0,
            rate=k_pop, half_life=LN2 / k_pop, rate_kind="catabolic", growth="exponential",
            growth_w0=FISH_W0, growth_k=FISH_KG, growth_rate_mean=FISH_KG,
            incorporation_rate=k_pop + FISH_KG,
            incorporation_half_life=LN2 / (k_pop + FISH_KG),
            growth_share=FISH_KG / (k_pop + FISH_KG), diet_old=old, diet_old_value=v_old,
            discrimination_old=d_old, plateau_old=v_old + d_old, diet_new=new,
            diet_new_value=v_new, discrimination_new=d_new, plateau_new=v_new + d_new,
            rate_cv=RATE_CV, discrimination_sd=OFFSET_SD))
    samples, missing = _observe(_rng(7), np.concatenate(true), np.concatenate(sds), keys)
    # mass of each fish when sampled (g, 0.01 g): its own exponential curve; weighing error
    # below the rounding
    masses = [(fish[i], times[i], w0[i] * math.exp(kg[i] * times[i])) for i in range(n)]
    diets = []
    for iso in ("d13C", "d15N"):
        diets += [(FISH_BATCH, iso, FISH_DIET_START, FISH_DIETS[old][iso]),
                  (FISH_BATCH, iso, 0.0, FISH_DIETS[new][iso])]
    return {"samples": samples, "missing": missing, "masses": masses, "diets": diets,
            "truth": truth}


def _field():
    """Field samples (one per goat and tissue) and their truth (an isotopic clock).

    Each field goat's rate is drawn about the captive population median (``RATE_CV``), its
    separation offset per tissue (``OFFSET_SD``), its sample's scatter (``BIO_SD``) and the
    analytic error (0.10 ‰); the stated sd is the total, ``FIELD_SD``.
    """
    rng = _rng(8)
    specs = [s for s in GOAT_SERIES if s["isotope"] == "d13C"]
    hay, maize = GOAT_DIETS["hay"]["d13C"], GOAT_DIETS["maize"]["d13C"]
    s_rate = _lognormal_sd(RATE_CV)
    samples, truth = [], []
    for a, t in enumerate(FIELD_TIMES):
        goat = f"W{a + 1:02d}"
        for spec in specs:
            k = LN2 / spec["half_lives"][0] * math.exp(rng.normal(0, s_rate))
            d = spec["discrimination"]["hay"] + rng.normal(0, OFFSET_SD)
            old, new = hay + d, maize + d
            true = new + (old - new) * math.exp(-k * t)
            value = true + rng.normal(0, BIO_SD) + rng.normal(0, 0.10)
            samples.append((goat, spec["tissue"], "d13C", value, FIELD_SD))
            truth.append((goat, spec["tissue"], "d13C", t, k, LN2 / k, old, new, true,
                          hay + spec["discrimination"]["hay"],
                          maize + spec["discrimination"]["maize"]))
    return samples, truth


def _hair():
    """Tail-hair segment profiles (δ13C) of :data:`HAIR_GOATS` and their truth.

    Each goat's rate is drawn about :data:`HAIR_HALF_LIFE` (``RATE_CV``) and its separation
    offset (``OFFSET_SD``); each segment's value is the exact mean of the goat's one-pool
    response over the segment's formation interval (constant growth :data:`HAIR_GROWTH`,
    distances from the base), plus a scatter (``BIO_SD``) and the analytic error
    (:data:`HAIR_SD`). Every segment is analysed once; none is missing.
    """
    from isoturnover.segments import formation_intervals, segment_means

    rng = _rng(9)
    iso = "d13C"
    hay, maize = GOAT_DIETS["hay"][iso], GOAT_DIETS["maize"][iso]
    pen_of = {g: pen for pen, ids in PENS.items() for g in ids}
    starts = np.arange(0.0, HAIR_LENGTH, HAIR_SEGMENT)
    ends = starts + HAIR_SEGMENT
    t1, t2 = formation_intervals(starts, ends, HAIR_SAMPLE_DAY, HAIR_GROWTH,
                                 formation_lag=HAIR_LAG, origin="base")
    k_pop = LN2 / HAIR_HALF_LIFE
    s_rate = _lognormal_sd(RATE_CV)
    samples, truth = [], []
    common = dict(tissue="hair", isotope=iso, time_unit="d", length_unit="mm",
                  growth_rate=HAIR_GROWTH, formation_lag=HAIR_LAG, origin="base",
                  sample_time=HAIR_SAMPLE_DAY, pools=1, pool=1, fraction=1.0)
    for goat in HAIR_GOATS:
        pen = pen_of[goat]
        k = k_pop * math.exp(rng.normal(0, s_rate))
        d = HAIR_DISCRIMINATION + rng.normal(0, OFFSET_SD)
        kin = TurnoverKinetics(1, diet=_goat_diet(pen, iso))
        y = segment_means(kin, _theta(kin, {"discrimination": d, "k1": k, "f1": 1.0}), t1, t2)
        value = y + rng.normal(0, BIO_SD, y.size) + rng.normal(0, HAIR_SD, y.size)
        samples += [(goat, pen, a, b, v) for a, b, v in zip(starts, ends, value)]
        truth.append(dict(common, level="animal", subject=goat, group=pen, rate=k,
                          half_life=LN2 / k, discrimination=d, plateau_old=hay + d,
                          plateau_new=maize + d))
    truth.append(dict(common, level="population", subject="population", group="A;B",
                      rate=k_pop, half_life=HAIR_HALF_LIFE, discrimination=HAIR_DISCRIMINATION,
                      plateau_old=hay + HAIR_DISCRIMINATION,
                      plateau_new=maize + HAIR_DISCRIMINATION))
    return samples, truth


HAIR_TRUTH_COLUMNS = (
    "level", "subject", "group", "tissue", "isotope", "time_unit", "length_unit",
    "growth_rate", "formation_lag", "origin", "sample_time", "pools", "pool", "fraction",
    "rate", "half_life", "discrimination", "plateau_old", "plateau_new",
)


# ---------------------------------------------------------------------------------------
# Formatting (explicit, so the files are byte-for-byte reproducible)
# ---------------------------------------------------------------------------------------
def _num(x, digits: int) -> str:
    s = f"{float(x):.{digits}f}"
    if s.startswith("-") and float(s) == 0.0:
        s = s[1:]
    return s


def _time(t) -> str:
    t = float(t)
    return str(int(t)) if t.is_integer() else repr(t)


def _csv(header, rows) -> str:
    lines = [",".join(header)] + [",".join(r) for r in rows]
    return "\n".join(lines) + "\n"


def _samples_csv(rows) -> str:
    rows = sorted(rows, key=lambda r: (r[0], r[2], r[3], r[4], r[7]))
    return _csv(("subject", "group", "tissue", "isotope", "time", "value", "sd", "replicate"),
                [(s, g, ti, iso, _time(t), _num(v, 2), _num(sd, 2), str(rep))
                 for s, g, ti, iso, t, v, sd, rep in rows])


def _truth_value(col, v) -> str:
    if v == "" or v is None:
        return ""
    if isinstance(v, str):
        return v
    if col in ("pools", "pool"):
        return str(int(v))
    if col in ("diet_old_value", "diet_new_value"):
        return _num(v, 2)
    return f"{float(v):.10g}"


def build_demo() -> dict:
    """All demo tables as CSV text, plus the design facts the README reports.

    Returns
    -------
    dict
        ``"files"``: file name → CSV text (UTF-8, ``\\n`` line ends); ``"missing"``: file
        name → list of (subject, group, tissue, isotope, time) of the missing samples;
        ``"truth"``: the truth rows as dicts; ``"hair_truth"``: the hair truth rows.
    """
    g = _goats()
    f = _fish()
    files = {
        "goat_samples.csv": _samples_csv(g["samples"]),
        "goat_breath.csv": _samples_csv(g["breath"]),
        "goat_diets.csv": _csv(("group", "isotope", "start", "value"),
                               [(p, i, _time(s), _num(v, 2)) for p, i, s, v in g["diets"]]),
        "goat_masses.csv": _csv(("subject", "time", "mass"),
                                [(s, _time(t), _num(m, 1)) for s, t, m in g["masses"]]),
        "fish_samples.csv": _samples_csv(f["samples"]),
        "fish_masses.csv": _csv(("subject", "time", "mass"),
                                [(s, _time(t), _num(m, 2)) for s, t, m in f["masses"]]),
        "fish_diets.csv": _csv(("group", "isotope", "start", "value"),
                               [(p, i, _time(s), _num(v, 2)) for p, i, s, v in f["diets"]]),
    }
    truth = g["truth"] + f["truth"]
    files["truth.csv"] = _csv(TRUTH_COLUMNS, [tuple(_truth_value(c, r[c]) for c in TRUTH_COLUMNS)
                                              for r in truth])
    fs, ft = _field()
    files["field_samples.csv"] = _csv(("subject", "tissue", "isotope", "value", "sd"),
                                      [(s, ti, iso, _num(v, 2), _num(sd, 2))
                                       for s, ti, iso, v, sd in fs])
    files["field_truth.csv"] = _csv(
        ("subject", "tissue", "isotope", "time_since_switch", "time_unit", "rate", "half_life",
         "plateau_old", "plateau_new", "value_noise_free", "population_old",
         "population_new"),
        [(s, ti, iso, _time(t), "d", f"{k:.6g}", f"{h:.6g}", _num(o, 3), _num(n, 3),
          _num(v, 3), _num(po, 2), _num(pn, 2))
         for s, ti, iso, t, k, h, o, n, v, po, pn in ft])
    hs, ht = _hair()
    files["goat_hair.csv"] = _csv(
        ("subject", "group", "tissue", "isotope", "time", "segment_start", "segment_end",
         "value", "sd"),
        [(s, g, "hair", "d13C", _time(HAIR_SAMPLE_DAY), _time(a), _time(b), _num(v, 2),
          _num(HAIR_SD, 2)) for s, g, a, b, v in hs])
    files["goat_hair_truth.csv"] = _csv(
        HAIR_TRUTH_COLUMNS,
        [tuple(_truth_value(c, r[c]) for c in HAIR_TRUTH_COLUMNS) for r in ht])
    assert tuple(files) == FILES
    missing = {"goat_samples.csv": sorted(g["missing"]),
               "goat_breath.csv": sorted(g["breath_missing"]),
               "fish_samples.csv": sorted(f["missing"])}
    return {"files": files, "missing": missing, "truth": truth, "hair_truth": ht}


# ---------------------------------------------------------------------------------------
# README blocks
# ---------------------------------------------------------------------------------------
def _fmt(x, digits=3) -> str:
    return f"{float(x):.{digits}g}"


def readme_blocks(demo: dict | None = None) -> dict:
    """Markdown of the README's generated blocks (``truth``, ``goats``, ``files``, ``missing``).

    Parameters
    ----------
    demo : dict, optional
        Output of :func:`build_demo` (built when not given).
    """
    demo = build_demo() if demo is None else demo
    truth = demo["truth"]
    pop = [r for r in truth if r["level"] == "population"]
    lines = [
        "| data | tissue | isotope | pool | fraction | half-life | rate kind | "
        "incorporation half-life | growth share | Δ old → new diet (‰) | "
        "plateau old → new diet (‰) |",
        "|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for r in pop:
        data = "fish" if r["group"] == FISH_BATCH else "goats"
        unit = r["time_unit"]
        inc = (f"{_fmt(r['incorporation_half_life'])} {unit}"
               if r["incorporation_half_life"] != "" else "")
        share = _fmt(r["growth_share"], 2) if r["growth_share"] != "" else ""
        lines.append(
            f"| {data} | {r['tissue']} | {r['isotope']} | {r['pool']} of {r['pools']} | "
            f"{_fmt(r['fraction'], 2)} | {_fmt(r['half_life'])} {unit} | {r['rate_kind']} | "
            f"{inc} | {share} | {r['discrimination_old']:+.1f} → "
            f"{r['discrimination_new']:+.1f} | {r['plateau_old']:.2f} → "
            f"{r['plateau_new']:.2f} |")
    blocks = {"truth": "\n".join(lines)}

    goats = sorted({r["subject"] for r in truth if r["level"] == "animal"
                    and r["group"] in PENS})
    series = [(s["tissue"], s["isotope"]) for s in GOAT_SERIES] + [("breath", "d13C")]
    by = {(r["subject"], r["tissue"], r["isotope"], r["pool"]): r for r in truth
          if r["level"] == "animal"}
    head = ["goat", "pen", "body mass day 0 → 180 (kg, curve)"]
    for ti, iso in series:
        if ti == "breath":
            head += ["breath d13C t½ pool 1, 2 (h), f1"]
        else:
            head += [f"{ti} {iso} t½ catabolic / incorporation (d)"]
    g_lines = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    for goat in goats:
        r0 = by[(goat, "plasma", "d13C", 1)]
        c = _Logistic(r0["growth_winf"], r0["growth_k"], r0["growth_ti"])
        cells = [goat, r0["group"],
                 f"{float(c.predict(0.0)):.1f} → {float(c.predict(GOAT_DAYS[-1])):.1f}"]
        for ti, iso in series:
            if ti == "breath":
                p1, p2 = by[(goat, ti, iso, 1)], by[(goat, ti, iso, 2)]
                cells.append(f"{_fmt(p1['half_life'])}, {_fmt(p2['half_life'])}; "
                             f"{p1['fraction']:.2f}")
            else:
                r = by[(goat, ti, iso, 1)]
                cells.append(f"{_fmt(r['half_life'])} / {_fmt(r['incorporation_half_life'])}")
        g_lines.append("| " + " | ".join(cells) + " |")
    blocks["goats"] = "\n".join(g_lines)

    f_lines = ["| file | rows | analyses with replicate 2 | missing samples |",
               "|---|---|---|---|"]
    for name, text in demo["files"].items():
        body = text.splitlines()[1:]
        if name in demo["missing"]:
            reps = sum(1 for line in body if line.endswith(",2"))
            f_lines.append(f"| `{name}` | {len(body)} | {reps} | {len(demo['missing'][name])} |")
        else:
            f_lines.append(f"| `{name}` | {len(body)} | | |")
    blocks["files"] = "\n".join(f_lines)

    m_lines = ["| file | subject | tissue | isotope | time |", "|---|---|---|---|---|"]
    for name, keys in demo["missing"].items():
        for s, _g, ti, iso, t in keys:
            m_lines.append(f"| `{name}` | {s} | {ti} | {iso} | {_time(t)} |")
    blocks["missing"] = "\n".join(m_lines)
    return blocks


def _replace_block(text: str, name: str, content: str, path) -> str:
    start, end = _MARK.format(name=name, end="start"), _MARK.format(name=name, end="end")
    i, j = text.find(start), text.find(end)
    if i < 0 or j < i:
        raise ValueError(f"{path}: markers {start} … {end} not found (in this order)")
    return text[: i + len(start)] + "\n" + content + "\n" + text[j:]


def update_readme(path=DEFAULT_README, demo: dict | None = None) -> str:
    """Rewrite the generated blocks of the README in place (atomically); return the text."""
    path = Path(path)
    text = path.read_text(encoding="utf-8")
    for name, content in readme_blocks(demo).items():
        text = _replace_block(text, name, content, path)
    _write_atomic(path, text)
    return text


def _write_atomic(path: Path, text: str) -> None:
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    try:
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()


def make_demo(out_dirs=DEFAULT_DIRS, *, readme=None) -> dict:
    """Generate the demo files and write them into every directory of ``out_dirs``.

    Parameters
    ----------
    out_dirs : path or sequence of paths, default: ``sample_data/`` and
        ``isoturnover/demo_data/``
        Directories to write into (created when missing).
    readme : path, optional
        README whose generated blocks are rewritten as well.

    Returns
    -------
    dict
        File name → CSV text that was written.
    """
    if isinstance(out_dirs, (str, os.PathLike)):
        out_dirs = [out_dirs]
    demo = build_demo()
    for d in out_dirs:
        d = Path(d)
        d.mkdir(parents=True, exist_ok=True)
        for name, text in demo["files"].items():
            _write_atomic(d / name, text)
    if readme is not None:
        update_readme(readme, demo)
    return dict(demo["files"])


def main(argv=None) -> int:
    p = argparse.ArgumentParser(
        description="Write the invented isoturnover demo experiment (CSV files).")
    p.add_argument("--out", action="append", metavar="DIR",
                   help="directory to write into (repeatable); default: sample_data/ and "
                        "isoturnover/demo_data/, and the README's generated blocks")
    p.add_argument("--readme", metavar="FILE",
                   help="also rewrite the generated blocks of this README")
    a = p.parse_args(argv)
    if a.out:
        files = make_demo(a.out, readme=a.readme)
        where = ", ".join(a.out)
    else:
        files = make_demo(DEFAULT_DIRS, readme=a.readme or DEFAULT_README)
        where = ", ".join(str(d) for d in DEFAULT_DIRS)
    print(f"wrote {len(files)} files into {where}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
