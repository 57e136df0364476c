"""Model choice on seeded simulations: how often AICc picks the right number of pools.

Invented data: a diet switch from δ0 = −25 ‰ to δ_eq = −12 ‰ sampled 16 times over 90 d
with normal analytic noise σ = 0.2 ‰, 200 replicates per scenario. Each replicate is fitted
with one and two parallel pools and the two fits are compared by AICc
(:func:`isoturnover.compare`).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import isoturnover as iso

TIMES = np.array([0, 0.5, 1, 2, 3, 4, 6, 8, 10, 14, 18, 24, 32, 45, 60, 90], dtype=float)
D0, DEQ, SIGMA = -25.0, -12.0, 0.2
LN2 = math.log(2.0)
N_REPLICATES = 200


def _progress(fractions, half_lives):
    """1 − F = Σ f_i exp(−k_i t), k_i = ln 2 / t½_i (Cerling et al. 2007)."""
    k = LN2 / np.asarray(half_lives, dtype=float)
    return np.exp(-np.outer(TIMES, k)) @ np.asarray(fractions, dtype=float)


def _choice_rates(mean, seed):
    """Share of replicates in which AICc chooses two pools; also the chosen fits."""
    rng = np.random.default_rng(seed)
    noise = rng.normal(0.0, SIGMA, (N_REPLICATES, TIMES.size))
    m1, m2 = iso.TurnoverModel(1), iso.TurnoverModel(2)
    two, worse = 0, 0
    for y in mean + noise:
        fits = [m1.fit(TIMES, y, warn=False), m2.fit(TIMES, y, warn=False)]
        cmp = iso.compare(fits)                      # criterion AICc by default
        assert cmp["weight"].sum() == pytest.approx(1.0)
        two += int(cmp["best"].iloc[1])
        # two pools contain one pool (f1 -> 0 or 1): the larger model never fits worse
        worse += fits[1].rss > fits[0].rss * (1 + 1e-8)
    assert worse == 0, f"two-pool fit worse than one-pool fit in {worse} replicates"
    return two / N_REPLICATES


def test_aicc_chooses_two_pools_for_two_pool_data():
    # fractions 0.4 / 0.6, half-lives 3 d and 30 d (invented)
    mean = DEQ + (D0 - DEQ) * _progress([0.4, 0.6], [3.0, 30.0])
    rate = _choice_rates(mean, seed=101)
    print(f"AICc chose two pools in {rate:.1%} of two-pool replicates")
    assert rate >= 0.80


def test_aicc_rarely_chooses_two_pools_for_one_pool_data():
    # one pool, half-life 12 d (invented)
    mean = DEQ + (D0 - DEQ) * _progress([1.0], [12.0])
    rate = _choice_rates(mean, seed=202)
    print(f"AICc chose two pools in {rate:.1%} of one-pool replicates")
    assert rate <= 0.15
