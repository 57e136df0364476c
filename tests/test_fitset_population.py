"""FitSet.population: random-effects pooling of the animals' half-lives from fit_each.

Independent check: the pooled value equals iso.random_effects applied by hand to the log
half-lives with standard errors from the profile intervals ((ln upper - ln lower)/(2 z),
the rule population_estimate documents), and a series that could not be fitted is listed,
not dropped. Data are invented (seeded).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import isoturnover as iso


def _animals(seed=7):
    rng = np.random.default_rng(seed)
    t = np.array([0.0, 2, 5, 9, 14, 21, 30, 45, 60, 80])
    rows = []
    for a in range(6):
        k = 0.06 * math.exp(rng.normal(0, 0.2))  # animals differ around 0.06 /d
        y = -14 + (-22 + 14) * np.exp(-k * t) + rng.normal(0, 0.25, t.size)
        rows += [{"subject": f"F{a}", "tissue": "plasma", "isotope": "d15N", "time": ti,
                  "value": yi} for ti, yi in zip(t, y)]
    # an animal whose series shows no change: it cannot give a half-life
    rows += [{"subject": "F9", "tissue": "plasma", "isotope": "d15N", "time": ti,
              "value": -14 + 0.01 * (i % 2)} for i, ti in enumerate(t)]
    return pd.DataFrame(rows)


def test_population_pools_the_log_half_lives_and_lists_the_unfitted_animal():
    fs = iso.fit_each(_animals(), pools=(1,))
    with pytest.warns(iso.DataWarning, match="left out"):
        pop = fs.population("half_life")
    hl = fs.half_lives()
    z = stats.norm.ppf(0.975)
    y = np.log(hl["half_life"].to_numpy())
    se = (np.log(hl["upper"].to_numpy()) - np.log(hl["lower"].to_numpy())) / (2 * z)
    by_hand = iso.random_effects(y, se, method="reml")
    assert pop.estimate == pytest.approx(math.exp(by_hand.estimate), rel=1e-9)
    assert pop.lower < pop.estimate < pop.upper
    assert pop.estimate == pytest.approx(math.log(2) / 0.06, rel=0.25)
    excluded = {str(k) for k in pop.excluded["name"]} if hasattr(pop.excluded, "columns") \
        else {str(k) for k in pop.excluded}
    assert any("F9" in k for k in excluded)
    assert "F9" in pop.summary()
