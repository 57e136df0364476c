"""Uncertainty of a turnover fit: the public namespace of the interval methods.

``iso.uncertainty`` gathers what four modules implement (DESIGN §3 "Intervals"):

* :mod:`isoturnover.derived` — profile-likelihood intervals of derived quantities
  (:func:`profile_derived`, :func:`time_to_profile`, :func:`mean_residence_time_profile`,
  :func:`half_life_ratio_profile`, :class:`ProfileInterval`);
* :mod:`isoturnover.resampling` — the bootstrap (:func:`bootstrap`,
  :class:`BootstrapResult`: residual, wild, case and whole-animal resampling; percentile and
  BCa intervals);
* :mod:`isoturnover.mcmc` — posterior draws (:func:`sample`, :class:`MCMCResult`);
* :mod:`isoturnover.bands` — confidence and prediction bands (:func:`band`).

Every function takes a :class:`~isoturnover.results.TurnoverFit` and leaves it unchanged.
The same methods are reachable from the fit itself (``fit.bootstrap()``, ``fit.sample()``,
``fit.profile()``, ``fit.band()``).
"""

from __future__ import annotations

from .bands import BAND_KINDS, BAND_METHODS, band
from .derived import (
    ProfileInterval,
    half_life_ratio_profile,
    mean_residence_time_profile,
    profile_derived,
    time_to_profile,
)
from .mcmc import HAS_EMCEE, MCMCResult, sample
from .resampling import BOOTSTRAP_KINDS, BootstrapResult, bootstrap

__all__ = [
    "ProfileInterval",
    "profile_derived",
    "time_to_profile",
    "mean_residence_time_profile",
    "half_life_ratio_profile",
    "BootstrapResult",
    "bootstrap",
    "BOOTSTRAP_KINDS",
    "MCMCResult",
    "sample",
    "HAS_EMCEE",
    "band",
    "BAND_KINDS",
    "BAND_METHODS",
]
