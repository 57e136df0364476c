"""Speed of the residual bootstrap in :mod:`isoturnover.uncertainty`.

Fits an invented two-pool diet-switch series (40 samples over 60 d; half-lives 2 d and 20 d,
40 % in the fast pool, δ from −22 ‰ to −14 ‰, normal errors of 0.2 ‰), then times
``bootstrap(fit, n, kind="residual")`` with ``n_jobs=1`` and ``n_jobs=2`` and prints the wall
time and replicates per second. With ``n_jobs=2`` the first run also pays for starting
joblib's worker processes; it is reported separately from a second, warm run.

Run::

    python benchmarks/bench_bootstrap.py [--n 1000] [--seed 1]
"""

from __future__ import annotations

import argparse
import math
import os
import platform
import time
import warnings

import numpy as np

import isoturnover as iso
from isoturnover import uncertainty as U


def make_fit(seed=2):
    t = np.linspace(0, 60, 40)
    k1, k2 = math.log(2) / 2.0, math.log(2) / 20.0
    rng = np.random.default_rng(seed)
    r = 0.4 * np.exp(-k1 * t) + 0.6 * np.exp(-k2 * t)
    y = -14.0 + (-22.0 + 14.0) * r + rng.normal(0, 0.2, t.size)
    return iso.TurnoverModel(2).fit(t, y, warn=False)


def run(fit, n, n_jobs, seed):
    start = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", iso.ConvergenceWarning)
        b = U.bootstrap(fit, n, kind="residual", rng=seed, n_jobs=n_jobs, progress=False)
    return time.perf_counter() - start, b


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=1000, help="replicates (default 1000)")
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args(argv)
    fit = make_fit()
    print(f"python {platform.python_version()}, numpy {np.__version__}, "
          f"{os.cpu_count()} cores; two-pool fit on {fit.nobs} points, "
          f"{fit.nvarys} free parameters")
    rows = []
    for label, n_jobs in (("n_jobs=1", 1), ("n_jobs=2 (cold)", 2), ("n_jobs=2 (warm)", 2)):
        dt, b = run(fit, args.n, n_jobs, args.seed)
        rows.append((label, dt, b))
        print(f"{label:<16} {args.n} replicates in {dt:6.2f} s = {args.n / dt:7.0f} per s "
              f"({b.n_failed} failed, {b.n_boundary} at the edge of the parameter space)")
    same = all(r[2].replicates.equals(rows[0][2].replicates) for r in rows[1:])
    print(f"identical replicates for every n_jobs: {same}")


if __name__ == "__main__":
    main()
