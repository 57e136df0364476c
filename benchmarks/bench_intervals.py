"""Cost of the default (profile-likelihood) intervals in the end-to-end run.

Times ``isoturnover fit --no-figures`` (called in this process through
``isoturnover.cli.main``) with ``--ci profile`` (the default) and with ``--ci asymptotic`` on
the same data, and prints the ratio: the profile intervals should not dominate the run.

Studies:

* the shipped invented demo (goat plasma and red cells, δ13C and δ15N: 24 series);
* an invented study made here with a fixed seed: 50 animals × 2 tissues × 2 isotopes,
  12 sampling times each (200 series), two-pool truth with between-animal spread of the
  rates (log-normal, CV 20 %), a diet switch at day 0; run with ``--jobs 1`` and
  ``--jobs 2``.

Each configuration is run once after one warm-up of the library (wall time,
``time.perf_counter``); numbers are ratios within this process.

Run::

    python benchmarks/bench_intervals.py [--animals 50] [--skip-study]
"""

from __future__ import annotations

import argparse
import contextlib
import io
import math
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

import isoturnover as iso
from isoturnover.cli import main as cli_main

LN2 = math.log(2.0)


def make_study(folder: Path, animals: int, seed: int = 2026):
    """An invented study: samples and diets CSV files in ``folder``."""
    rng = np.random.default_rng(seed)
    times = np.array([0, 1, 2, 4, 7, 10, 14, 21, 28, 42, 56, 84.0])
    truth = {  # tissue -> (half-lives of the two pools, fraction of the fast pool)
        "plasma": ((1.5, 9.0), 0.6),
        "red_cells": ((6.0, 40.0), 0.4),
    }
    diets = {"d13C": (-27.0, -12.0, 1.5), "d15N": (4.0, 9.0, 3.0)}  # old, new, Δ
    rows = []
    for a in range(animals):
        subject = f"A{a + 1:03d}"
        for tissue, ((h1, h2), f1) in truth.items():
            k = LN2 / np.array([h1, h2]) * np.exp(rng.normal(0.0, 0.2, 2))
            k = np.sort(k)[::-1]
            for isotope, (old, new, sep) in diets.items():
                d0, deq = old + sep, new + sep
                y = deq + (d0 - deq) * (f1 * np.exp(-k[0] * times)
                                        + (1 - f1) * np.exp(-k[1] * times))
                y = y + rng.normal(0.0, 0.15, times.size)
                rows += [{"subject": subject, "group": "all", "tissue": tissue,
                          "isotope": isotope, "time": t, "value": round(v, 3), "sd": 0.1}
                         for t, v in zip(times, y)]
    samples = folder / "study_samples.csv"
    pd.DataFrame(rows).to_csv(samples, index=False)
    drows = []
    for isotope, (old, new, _) in diets.items():
        drows += [{"group": "all", "isotope": isotope, "start": -200, "value": old},
                  {"group": "all", "isotope": isotope, "start": 0, "value": new}]
    diet_file = folder / "study_diets.csv"
    pd.DataFrame(drows).to_csv(diet_file, index=False)
    return samples, diet_file


def run(samples, diets, ci, jobs=1):
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / "out"
        args = ["fit", str(samples), "--diets", str(diets), "--out", str(out),
                "--no-figures", "--no-progress", "--ci", ci, "--jobs", str(jobs)]
        t0 = time.perf_counter()
        with contextlib.redirect_stdout(io.StringIO()), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            code = cli_main(args)
        dt = time.perf_counter() - t0
        if code not in (0, None):
            raise SystemExit(f"isoturnover fit failed ({code}) on {samples}")
        n = len(pd.read_csv(out / "results.csv"))
    return dt, n


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--animals", type=int, default=50)
    ap.add_argument("--skip-study", action="store_true", help="only the demo")
    args = ap.parse_args(argv)
    print(f"isoturnover {iso.__version__}")
    demo = (iso.demo_path("goat_samples"), iso.demo_path("goat_diets"))
    run(*demo, "asymptotic")  # warm-up: imports, caches
    rows = []
    a, n = run(*demo, "asymptotic")
    p, _ = run(*demo, "profile")
    rows.append(("demo goats (24 series)", 1, a, p, n))
    if not args.skip_study:
        with tempfile.TemporaryDirectory() as tmp:
            files = make_study(Path(tmp), args.animals)
            for jobs in (1, 2):
                a, n = run(*files, "asymptotic", jobs)
                p, _ = run(*files, "profile", jobs)
                rows.append((f"study ({4 * args.animals} series)", jobs, a, p, n))
    print(f"{'data':<26}{'jobs':>5}{'asymptotic (s)':>16}{'profile (s)':>13}{'ratio':>8}"
          f"{'rows':>7}")
    for label, jobs, a, p, n in rows:
        print(f"{label:<26}{jobs:>5}{a:>16.2f}{p:>13.2f}{p / a:>8.2f}{n:>7}")


if __name__ == "__main__":
    main()
