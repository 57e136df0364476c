"""How the cost of a shared fit (``iso.fit_shared``) grows with the number of animals.

Invented study: animals of one tissue and isotope, 12 samples each over 120 d, one pool with
a rate of 0.05/d common to all (shared), levels per animal, normal errors of 0.3 ‰. For
20, 80 and 320 animals the script times ``fit_shared`` (the fit alone: starting fits of
each animal, the joint fit) with one common variance and with a variance per animal, and
prints the seconds per animal as a ratio to the 20-animal run; a block-sparse Jacobian keeps
the ratio near 1 (linear growth). Above 40 joint coordinates the Jacobian is sparse.

Run::

    python benchmarks/bench_shared.py [--sizes 20,80,320]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import pandas as pd

import isoturnover as iso
from isoturnover import jointproblem

TIMES = np.array([0.0, 2, 5, 9, 14, 21, 28, 42, 56, 70, 90, 120])


def study(n, seed=1):
    rng = np.random.default_rng(seed)
    rows = []
    for a in range(n):
        d0, de = -22 + rng.normal(0, 0.5), -15 + rng.normal(0, 0.5)
        y = de + (d0 - de) * np.exp(-0.05 * TIMES) + rng.normal(0, 0.3, TIMES.size)
        rows += [{"subject": f"A{a:04d}", "tissue": "blood", "isotope": "d13C", "time": t,
                  "value": v} for t, v in zip(TIMES, y)]
    return pd.DataFrame(rows)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="20,80,320")
    args = ap.parse_args()
    sizes = [int(s) for s in args.sizes.split(",")]
    for variance in ("common", "per_block"):
        base = None
        print(f"variance {variance}")
        print(f"{'animals':>8} {'seconds':>9} {'s/animal':>9} {'ratio':>6}  sparse")
        for n in sizes:
            df = study(n)
            best = np.inf
            for _ in range(2):  # fastest of two: other load only adds time
                t0 = time.perf_counter()
                fit = iso.fit_shared(df, shared=("k1",), variance=variance)
                best = min(best, time.perf_counter() - t0)
            per = best / n
            base = base or per
            print(f"{n:>8} {best:>9.3f} {per:>9.4f} {per / base:>6.2f}  "
                  f"{fit.nvarys > jointproblem.SPARSE_ABOVE}")


if __name__ == "__main__":
    main()
