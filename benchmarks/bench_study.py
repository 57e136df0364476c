"""Where a 200-series study's time goes: ``isoturnover fit --no-figures`` end to end.

The study is the invented one of ``bench_intervals.py`` (50 animals × 2 tissues × 2
isotopes, 12 sampling times, two-pool truth, a diet switch at day 0; fixed seed). Timed:

* the command (``isoturnover.cli.main``, in this process) with ``--jobs 1`` and
  ``--jobs 2``: wall time and this process's CPU time (``time.process_time``; with
  ``--jobs 2`` the workers' CPU is not in it, so a small number means little serial work);
* the same run in its three phases, through the library: fitting (``analyse``, which with
  several workers also computes every interval the outputs show, in the workers),
  ``results.csv`` (``Analysis.results_table``) and the report (``write_report``, no
  figures). After fitting, the last two only assemble what is kept on the fits;
* with ``--profile``, the top entries of a ``cProfile`` of the ``--jobs 1`` run (cumulative
  time), and the share of each module in the profile's own time.

Each configuration is run ``--repeats`` times after one warm-up; the fastest run is shown
(other work on the machine only ever adds time). ``--save DIR`` keeps the ``results.csv`` of
the ``--jobs 2`` run; ``--check FILE`` compares it with an earlier one (a run before a
change): the largest relative difference of each numeric column that differs, and any text
column that differs (estimates should agree to 1e-6 relative, profile bounds to the bound
finder's tolerance).

Run::

    python benchmarks/bench_study.py [--animals 50] [--repeats 2] [--profile]
                                     [--save DIR] [--check OLD/results.csv]
"""

from __future__ import annotations

import argparse
import collections
import contextlib
import cProfile
import io
import pstats
import shutil
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_intervals import make_study  # noqa: E402

import isoturnover as iso  # noqa: E402
from isoturnover.analysis import analyse  # noqa: E402
from isoturnover.cli import main as cli_main  # noqa: E402
from isoturnover.report import write_report  # noqa: E402


def run_cli(samples, diets, jobs, keep=None):
    """(wall s, CPU s of this process) of one ``isoturnover fit --no-figures`` run; its
    ``results.csv`` is copied into the folder ``keep`` when given."""
    with tempfile.TemporaryDirectory() as tmp:
        args = ["fit", str(samples), "--diets", str(diets), "--out", str(Path(tmp) / "out"),
                "--no-figures", "--no-progress", "--jobs", str(jobs)]
        w0, c0 = time.perf_counter(), time.process_time()
        with contextlib.redirect_stdout(io.StringIO()), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            code = cli_main(args)
        w, c = time.perf_counter() - w0, time.process_time() - c0
        if keep is not None and code in (0, None):
            Path(keep).mkdir(parents=True, exist_ok=True)
            shutil.copy(Path(tmp) / "out" / "results.csv", Path(keep) / "results.csv")
    if code not in (0, None):
        raise SystemExit(f"isoturnover fit failed ({code})")
    return w, c


def compare_results(old, new):
    """Print how ``results.csv`` ``new`` differs from ``old`` (same rows and columns)."""
    a, b = pd.read_csv(old), pd.read_csv(new)
    if list(a.columns) != list(b.columns) or len(a) != len(b):
        print(f"results differ in shape: {a.shape} against {b.shape}")
        return
    worst = 0.0
    for c in a.columns:
        x, y = a[c], b[c]
        if pd.api.types.is_numeric_dtype(x) and pd.api.types.is_numeric_dtype(y):
            x, y = x.to_numpy(dtype=float), y.to_numpy(dtype=float)
            same = (x == y) | (np.isnan(x) & np.isnan(y))
            with np.errstate(all="ignore"):
                rel = np.where(same, 0.0, np.abs(x - y) / np.maximum(np.abs(x), 1e-300))
            m = float(np.max(rel)) if rel.size else 0.0
            if m > 0:
                i = int(np.argmax(rel))
                print(f"  {c:<32} max relative difference {m:.2e} (row {i + 2})")
            worst = max(worst, m)
        elif not (x.fillna("").astype(str) == y.fillna("").astype(str)).all():
            print(f"  {c:<32} text differs in "
                  f"{int((x.fillna('').astype(str) != y.fillna('').astype(str)).sum())} rows")
    print(f"largest relative difference of a numeric column: {worst:.2e}")


def run_phases(samples, diets, jobs):
    """[(phase, wall s, CPU s)] of fitting, results.csv and the report (no figures)."""
    out = []
    with warnings.catch_warnings(), tempfile.TemporaryDirectory() as tmp:
        warnings.simplefilter("ignore")
        w0, c0 = time.perf_counter(), time.process_time()
        a = analyse(samples, diets=diets, n_jobs=jobs)
        w1, c1 = time.perf_counter(), time.process_time()
        out.append(("fit (+ intervals in workers)", w1 - w0, c1 - c0))
        a.results_table()
        w2, c2 = time.perf_counter(), time.process_time()
        out.append(("results.csv table", w2 - w1, c2 - c1))
        write_report(a.merged(), Path(tmp) / "report", figures=False, level=a.level,
                     method=a.interval_method)
        w3, c3 = time.perf_counter(), time.process_time()
        out.append(("report (no figures)", w3 - w2, c3 - c2))
    return out


def profile(samples, diets, top=25):
    """Print the top entries of a cProfile of the ``--jobs 1`` run and module shares."""
    pr = cProfile.Profile()
    pr.enable()
    run_cli(samples, diets, 1)
    pr.disable()
    buf = io.StringIO()
    st = pstats.Stats(pr, stream=buf)
    st.sort_stats("cumulative").print_stats(top)
    print(buf.getvalue())
    share = collections.Counter()
    for (path, _, _), (_, _, tt, _, _) in st.stats.items():
        if "isoturnover" in path:
            share[Path(path).name] += tt
        else:
            share[next((lib for lib in ("pandas", "numpy", "scipy") if f"/{lib}/" in path),
                       "other")] += tt
    total = sum(share.values())
    print("share of the profile's own time by module:")
    for name, t in share.most_common(15):
        print(f"  {name:<24}{t:8.2f} s {100 * t / total:6.1f} %")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--animals", type=int, default=50)
    ap.add_argument("--repeats", type=int, default=2)
    ap.add_argument("--profile", action="store_true", help="also profile the --jobs 1 run")
    ap.add_argument("--save", help="folder to keep the --jobs 2 run's results.csv in")
    ap.add_argument("--check", help="an earlier results.csv of the same study to compare with")
    args = ap.parse_args(argv)
    print(f"isoturnover {iso.__version__}")
    with tempfile.TemporaryDirectory() as tmp:
        samples, diets = make_study(Path(tmp), args.animals)
        n = 4 * args.animals
        run_cli(samples, diets, 1)  # warm-up: imports, caches
        print(f"study of {n} series, isoturnover fit --no-figures (fastest of "
              f"{args.repeats}):")
        print(f"{'jobs':>6}{'wall (s)':>11}{'CPU here (s)':>15}")
        for jobs in (1, 2):
            best = min(run_cli(samples, diets, jobs) for _ in range(args.repeats))
            print(f"{jobs:>6}{best[0]:>11.2f}{best[1]:>15.2f}")
        if args.save or args.check:
            keep = Path(args.save) if args.save else Path(tmp) / "kept"
            run_cli(samples, diets, 2, keep=keep)
            if args.check:
                print(f"results.csv against {args.check}:")
                compare_results(args.check, keep / "results.csv")
        for jobs in (1, 2):
            runs = [run_phases(samples, diets, jobs) for _ in range(args.repeats)]
            best = min(runs, key=lambda r: sum(w for _, w, _ in r))
            print(f"phases with {jobs} worker(s):")
            for phase, w, c in best:
                print(f"  {phase:<30}{w:8.2f} s wall {c:8.2f} s CPU here")
        if args.profile:
            profile(samples, diets)


if __name__ == "__main__":
    main()
