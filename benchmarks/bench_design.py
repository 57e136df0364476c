"""Speed of sampling designs and of simulated experiments (:mod:`isoturnover.simulate`).

An invented two-pool diet-switch experiment (δ from −25 ‰ to −12 ‰; rates 0.3 and 0.03 per
day, 40 % in the fast pool; residual sd 0.3 ‰): times ``design_schedule`` (14 samples
over 150 d, local and with a prior) and then ``simulate_design`` of 500 experiments at the
D-optimal schedule with ``n_jobs=1`` and ``n_jobs=2``. The first parallel run also pays for
starting joblib's worker processes; it is reported separately from a second, warm run.
Also prints the ratio of one simulated experiment to one plain fit of the same data (the
overhead of the simulation machinery) and checks that every ``n_jobs`` gives the same draws.

Run::

    python benchmarks/bench_design.py [--n 500] [--seed 1]
"""

from __future__ import annotations

import argparse
import os
import platform
import time
import warnings

import numpy as np

import isoturnover as iso
from isoturnover.design import design_schedule
from isoturnover.simulate import simulate_design

TRUTH = {"delta0": -25.0, "delta_eq": -12.0, "k1": 0.3, "k2": 0.03, "f1": 0.4}
SD = 0.3


def timed(fn):
    start = time.perf_counter()
    out = fn()
    return time.perf_counter() - start, out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=500, help="simulated experiments (default 500)")
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args(argv)
    model = iso.TurnoverModel(2)
    print(f"python {platform.python_version()}, numpy {np.__version__}, "
          f"{os.cpu_count()} cores; two-pool model, 14 samples, sd {SD} ‰")
    for crit, cv in (("D", None), ("half_life", None), ("half_life", 0.5)):
        dt, d = timed(lambda crit=crit, cv=cv: design_schedule(
            model, TRUTH, n_samples=14, duration=150.0, sd=SD, criterion=crit, prior_cv=cv))
        print(f"design_schedule {crit:<9} prior_cv={cv!s:<4} {dt:6.2f} s; times "
              + ", ".join(f"{t:.3g}" for t in d.times))
    d = design_schedule(model, TRUTH, n_samples=14, duration=150.0, sd=SD, criterion="D")
    # one plain fit of the same size, as the reference for one simulated experiment
    rng = np.random.default_rng(args.seed)
    y = model.kinetics.evaluate(d.times, np.array([TRUTH.get(n, 0.6) for n in
                                                   model.param_names]))
    ys = [y + rng.normal(0, SD, y.size) for _ in range(20)]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        t0 = time.perf_counter()
        for yy in ys:
            model.fit(d.times, yy, warn=False).half_lives(method="asymptotic")
        per_fit = (time.perf_counter() - t0) / len(ys)
    rows = []
    for label, n_jobs in (("n_jobs=1", 1), ("n_jobs=2 (cold)", 2), ("n_jobs=2 (warm)", 2)):
        dt, r = timed(lambda n_jobs=n_jobs: simulate_design(
            model, TRUTH, d, sd=SD, n_sim=args.n, rng=args.seed, n_jobs=n_jobs))
        rows.append((label, dt, r))
        print(f"simulate_design {label:<16} {args.n} experiments in {dt:6.2f} s = "
              f"{args.n / dt:6.0f} per s; failures {r.failure_rate:.3f}, coverage "
              f"{r.coverage:.3f}, sd {r.empirical_se:.3g} (predicted {r.predicted_se:.3g})")
    print(f"one simulated experiment / one plain fit: {rows[0][1] / args.n / per_fit:.2f}")
    print(f"speed-up n_jobs=2 (warm) over n_jobs=1: {rows[0][1] / rows[2][1]:.2f}")
    same = all(r[2].draws.equals(rows[0][2].draws) for r in rows[1:])
    print(f"identical draws for every n_jobs: {same}")


if __name__ == "__main__":
    main()
