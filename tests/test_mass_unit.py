"""The unit of the body masses reaches the growth figures (read_masses → fit_each → plot).

Invented data: one goat-like animal whose mass grows logistically, sampled weekly.
"""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402

import isoturnover as iso  # noqa: E402
from isoturnover import plotting  # noqa: E402


def _tables():
    t = np.arange(0.0, 120.0, 7.0)
    mass = 45.0 / (1 + np.exp(-0.02 * (t - 40.0)))
    masses = pd.DataFrame({"subject": "A1", "time": t, "mass": mass})
    ts = np.array([0.0, 3, 7, 14, 21, 35, 49, 70, 98, 119])
    y = -14 + (-22 + 14) * np.exp(-0.05 * ts) + np.random.default_rng(1).normal(0, 0.2, 10)
    samples = pd.DataFrame({"subject": "A1", "tissue": "plasma", "isotope": "d13C",
                            "time": ts, "value": y})
    return samples, masses


def test_mass_unit_is_kept_and_labels_the_growth_axis():
    samples, masses = _tables()
    m = iso.read_masses(masses, mass_unit="kg")
    assert m.attrs["mass_unit"] == "kg"
    assert iso.read_masses(m).attrs["mass_unit"] == "kg"  # a read frame keeps it
    fs = iso.fit_each(samples, masses=m, pools=(1,), growth_curve="logistic")
    fit = next(iter(fs.chosen.values()))
    ax = plotting.plot_growth(fit.model.growth, time_unit="d")
    assert "(kg)" in ax.get_ylabel()
    with pytest.raises(iso.DataError, match="mass_unit"):
        iso.read_masses(masses, mass_unit="")
