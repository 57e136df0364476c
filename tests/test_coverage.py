"""Coverage of half-life intervals in a seeded simulation (slow).

Design (invented, a typical short captive study): one pool, 7 samples at 0, 3, 6, 10, 15,
20 and 30 d, true half-life 25 d, a 5 ‰ change (δ0 = −20 ‰, δ_eq = −15 ‰), normal errors of
0.3 ‰. The study stops at 1.2 half-lives, so many data sets barely curve and the upper
bound of the half-life is often open.

Profile-likelihood intervals (ΔRSS/s² ≤ F(1, n − p); Venzon & Moolgavkar 1988) should hold
their nominal 95 % here; covariance (asymptotic, Wald on the log-rate scale) intervals are
known to undercover for few points and strong curvature (Bates & Watts 1988, ch. 6 — from
memory), and the residual bootstrap's percentile intervals sit between them with so few
residuals to resample. Fits that fail count as misses.
"""

from __future__ import annotations

import math
import time
import warnings

import numpy as np
import pytest

import isoturnover as iso
from isoturnover import uncertainty as U

T = np.array([0, 3, 6, 10, 15, 20, 30.0])
HALF_LIFE = 25.0
D0, DEQ, SD = -20.0, -15.0, 0.3
MEAN = DEQ + (D0 - DEQ) * np.exp(-math.log(2) / HALF_LIFE * T)


def _fit(y):
    try:
        return iso.TurnoverModel(1).fit(T, y, warn=False)
    except iso.IsoturnoverError:
        return None


def _covers(lo, hi):
    """NaN bounds (failed) never cover."""
    return bool(lo <= HALF_LIFE <= hi)


@pytest.mark.slow
def test_half_life_interval_coverage():
    start = time.perf_counter()
    rng = np.random.default_rng(20240611)
    n_sets = 2000
    hit_profile = hit_asym = 0
    open_upper = 0
    for _ in range(n_sets):
        fit = _fit(MEAN + rng.normal(0, SD, T.size))
        if fit is None:
            continue
        p = fit.half_lives().iloc[0]
        hit_profile += _covers(p["lower"], p["upper"])
        open_upper += p["upper_status"] == "open"
        a = fit.half_lives(method="asymptotic").iloc[0]
        hit_asym += _covers(a["lower"], a["upper"])
    t_profile = time.perf_counter() - start

    n_boot_sets, n_resamples = 200, 199
    hit_boot = 0
    failed = 0
    for i in range(n_boot_sets):
        fit = _fit(MEAN + rng.normal(0, SD, T.size))
        if fit is None:
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", iso.ConvergenceWarning)
            b = U.bootstrap(fit, n_resamples, rng=i, n_jobs=2, progress=False)
        failed += b.n_failed
        r = b.intervals().set_index("parameter").loc["half_life_1"]
        hit_boot += _covers(r["lower"], r["upper"])
    elapsed = time.perf_counter() - start

    cov_p, cov_a, cov_b = hit_profile / n_sets, hit_asym / n_sets, hit_boot / n_boot_sets
    print(f"\nhalf-life 95 % interval coverage, one pool, 7 samples to 30 d, t1/2 = 25 d, "
          f"sd 0.3 per mil: profile {cov_p:.3f} ({n_sets} data sets; upper bound open in "
          f"{open_upper}), asymptotic {cov_a:.3f}, residual bootstrap percentile {cov_b:.3f} "
          f"({n_boot_sets} x {n_resamples}, {failed} failed refits); "
          f"{t_profile:.1f} s for profile + asymptotic, {elapsed:.1f} s in all")
    assert 0.93 <= cov_p <= 0.97
    assert cov_a < cov_p
    # safe statements about the bootstrap: it is not wildly off and its refits work
    assert 0.75 <= cov_b <= 1.0
    assert failed <= 0.02 * n_boot_sets * n_resamples
