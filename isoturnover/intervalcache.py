r"""The interval cache of a fit and the resampled draws kept on it.

:class:`IntervalCache` is a mixin that :class:`~isoturnover.TurnoverFit` inherits. It owns
the fit's cache (every interval, table and summary computed on request and kept: fitting
computes none), the stored bootstrap and MCMC draws, and the methods that fill them:
:meth:`~IntervalCache.derived_interval` (profile likelihood or the delta method for any
``fn(theta)``), :meth:`~IntervalCache.bootstrap`, :meth:`~IntervalCache.sample`,
:meth:`~IntervalCache.profile`, :meth:`~IntervalCache.band` and the percentile intervals
of the stored draws (:meth:`~IntervalCache.resampled_interval`). New draws drop the cached
results made from the previous ones.

The numerics live below: :func:`isoturnover.derived.profile_derived`,
:func:`isoturnover.profiles.delta_interval`, :func:`isoturnover.resampling.bootstrap`,
:func:`isoturnover.mcmc.sample` and :func:`isoturnover.bands.band`. The mixin reads only
public attributes of the fit that inherits it: ``state`` and ``loss``.
"""

from __future__ import annotations

import functools
import math

from . import profiles
from .bands import band as band_of
from .conventions import check_choice, check_level, check_method
from .derived import profile_derived
from .mcmc import sample as sample_of
from .resampling import bootstrap as bootstrap_of

__all__ = ["IntervalCache"]


def _bounds(iv):
    """(lower, upper, lower_status, upper_status) of an interval object."""
    return iv.lower, iv.upper, iv.lower_status, iv.upper_status


class IntervalCache:
    """The cache of a fit's intervals and its stored draws (a mixin of ``TurnoverFit``).

    Nothing is computed until it is asked for; each result is kept under a key and
    returned from the cache afterwards. ``method="bootstrap"`` and ``method="mcmc"``
    requests use the draws stored by :meth:`bootstrap` and :meth:`sample` (run with their
    defaults when missing).
    """

    #: The stored bootstrap (a ``BootstrapResult``), set by :meth:`bootstrap`.
    _boot = None
    #: The stored posterior draws (an ``MCMCResult``), set by :meth:`sample`.
    _mcmc = None

    @functools.cached_property
    def _cache(self):
        """key → cached result (created on first use, so fitting computes nothing)."""
        return {}

    def cached(self, key, make):
        """The result kept on this fit under ``key``, computed by ``make()`` on first request.

        Parameters
        ----------
        key : tuple
            Hashable name of the result, e.g. ``("summary", 0.95, "profile")``; the same
            key must always mean the same result. Results whose key holds ``"bootstrap"``
            or ``"mcmc"`` are dropped when new draws of that kind are made.
        make : callable
            ``make()`` computes the result (called at most once per key).

        Returns
        -------
        object
            The cached result (the same object on every call).
        """
        if key not in self._cache:
            self._cache[key] = make()
        return self._cache[key]

    def cached_frame(self, name, *args, copy=True):
        """A copy of the table ``getattr(self, name)(*args)``, computed once and kept.

        For the interval tables that several views of one fit show (``conf_int``,
        ``half_lives``, ``time_to``…): the first request builds the table, later ones copy
        it (so a caller may change its copy).

        Parameters
        ----------
        name : str
            Name of a public method of the fit that returns a DataFrame.
        *args
            Its arguments (hashable: level, method…); the same arguments must always give
            the same table.
        copy : bool, default=True
            Return a copy; ``False`` returns the kept table itself, for a caller that only
            reads it (it must not be changed).

        Returns
        -------
        DataFrame
            A copy of the kept table (the kept table with ``copy=False``).
        """
        frame = self.cached(("frame", name, *args), lambda: getattr(self, name)(*args))
        return frame.copy() if copy else frame

    def __getstate__(self):
        """The fit's attributes for pickling, without the kept copies of interval tables.

        A fit travels back from a parallel worker pickled; pandas frames are slow to
        unpickle, and every ``("frame", …)`` entry of the cache (:meth:`cached_frame`) is
        rebuilt on request from the interval bounds that stay cached beside it, so those
        entries are left out. Nothing computed is lost: no interval is computed again.

        Returns
        -------
        dict
            A shallow copy of the instance's ``__dict__``, its cache without frame entries.
        """
        state = self.__dict__.copy()
        cache = state.get("_cache")
        if cache:
            state["_cache"] = {k: v for k, v in cache.items()
                               if not (isinstance(k, tuple) and k and k[0] == "frame")}
        return state

    def _forget(self, method):
        """Drop cached results made from the previous draws of ``method`` (new draws)."""
        self._cache = {k: v for k, v in self._cache.items() if method not in k}

    def derived_interval(self, key, fn, estimate, level=0.95, method="profile", scale="log",
                         grad=None) -> tuple:
        """Interval of a derived quantity ``fn(theta)``, cached on the fit under ``key``.

        Profile likelihood (:func:`isoturnover.derived.profile_derived`, constrained refits)
        for least-squares fits and ``method="profile"``; otherwise the delta method on
        ``scale`` (:func:`isoturnover.profiles.delta_interval`).

        Parameters
        ----------
        key : tuple
            Name of the quantity in the fit's cache (e.g. ``("time_to", 0.95)``); the same
            key must always mean the same ``fn``.
        fn : callable
            ``fn(theta) -> float`` of the natural parameter vector.
        estimate : float
            ``fn`` at the fitted parameters.
        level : float, default=0.95
            Confidence level.
        method : {"profile", "asymptotic", "bootstrap", "mcmc"}, default="profile"
            Anything but ``"profile"`` on a least-squares fit gives the delta method.
        scale : {"log", "logit", "linear"}, default="log"
            Scale of the delta method; log and logit also keep a profile positive.
        grad : callable, optional
            ``grad(theta)``, the gradient of ``fn`` in natural parameters (else central
            differences).

        Returns
        -------
        tuple
            ``(lower, upper, lower_status, upper_status, method)``, method being
            ``"profile"`` or ``"asymptotic"``.
        """
        level, method = check_level(level), check_method(method)
        check_choice("scale", scale, ("log", "logit", "linear"))
        key = tuple(key) if isinstance(key, (tuple, list)) else (key,)

        def make():
            if method == "profile" and self.loss == "linear":
                r = profile_derived(self, fn, level, positive=scale in ("log", "logit"),
                                    grad=grad)
                return (*_bounds(r), "profile")
            iv = profiles.delta_interval(self.state, fn, estimate, level, scale)
            return (*iv.bounds, "asymptotic")
        return self.cached((*key, round(level, 12), method), make)

    def method_used(self, method) -> str:
        """Name of the interval method that a request for ``method`` actually uses.

        Parameters
        ----------
        method : {"profile", "asymptotic", "bootstrap", "mcmc"}
            The method asked for.

        Returns
        -------
        str
            ``"asymptotic"`` for ``"profile"`` on a robust-loss fit (no RSS profile),
            ``"bootstrap (percentile)"`` for ``"bootstrap"``, otherwise ``method``.
        """
        if method == "profile" and self.loss != "linear":
            return "asymptotic"
        if method == "bootstrap":
            return "bootstrap (percentile)"
        return method

    def resampled_interval(self, name, level, method) -> tuple:
        """Interval of a parameter or derived quantity from the stored bootstrap / MCMC.

        Percentiles of the draws kept by :meth:`bootstrap` (percentile method) or
        :meth:`sample`; when none are stored they are made with the defaults first.

        Parameters
        ----------
        name : str
            A column of the draws: a parameter (``"k1"``…) or a derived quantity the
            bootstrap records (``"time_to_95"``, ``"mean_residence_time"``…).
        level : float
            Confidence level, in (0, 1).
        method : {"bootstrap", "mcmc"}
            Which stored draws.

        Returns
        -------
        tuple
            ``(lower, upper, lower_status, upper_status)``; NaN bounds with status
            ``"not_available"`` when the draws do not hold ``name``.
        """
        if method == "bootstrap":
            boot = self._boot if self._boot is not None else self.bootstrap()
            tab = boot.intervals(level, method="percentile")
        else:
            tab = (self._mcmc if self._mcmc is not None else self.sample()).intervals(level)
        row = tab[tab["parameter"] == name]
        if not len(row):
            return math.nan, math.nan, "not_available", "not_available"
        r = row.iloc[0]
        return float(r["lower"]), float(r["upper"]), str(r["lower_status"]), \
            str(r["upper_status"])

    def bootstrap(self, n=999, kind="residual", rng=0, n_jobs=1, progress=None,
                  quantities=None, **kwargs):
        """Bootstrap this fit and keep the result on it.

        ``method="bootstrap"`` in :meth:`conf_int`, :meth:`half_lives`, :meth:`time_to` and
        :meth:`table` then uses it (percentile intervals).

        Parameters
        ----------
        n, kind, rng, n_jobs, progress, quantities, **kwargs
            As :func:`isoturnover.resampling.bootstrap`; seeded (``rng=0``) by default and
            reproducible whatever ``n_jobs``.

        Returns
        -------
        BootstrapResult
        """
        self._boot = bootstrap_of(self, n=n, kind=kind, rng=rng, n_jobs=n_jobs,
                                  progress=progress, quantities=quantities, **kwargs)
        self._forget("bootstrap")
        return self._boot

    def sample(self, **kwargs):
        """MCMC draws of this fit's posterior, kept on the fit for ``method="mcmc"``.

        Parameters
        ----------
        **kwargs
            As :func:`isoturnover.mcmc.sample` (``rng=0`` by default). Needs the ``mcmc``
            extra (emcee).

        Returns
        -------
        MCMCResult
        """
        kwargs.setdefault("rng", 0)
        self._mcmc = sample_of(self, **kwargs)
        self._forget("mcmc")
        return self._mcmc

    def profile(self, fn, level=0.95, **kwargs):
        """Profile-likelihood interval of a derived quantity ``fn(theta)``.

        Parameters
        ----------
        fn : callable
            ``fn(theta) -> float`` of the natural parameter vector (in the order of
            ``fit.kinetics.param_names``).
        level : float, default=0.95
        **kwargs
            As :func:`isoturnover.derived.profile_derived` (``name``, ``positive``, ``grad``,
            ``natural``, ``limits``).

        Returns
        -------
        ProfileInterval
        """
        return profile_derived(self, fn, check_level(level), **kwargs)

    def band(self, t, level=0.95, kind="confidence", method="delta", boot=None, **kwargs):
        """Confidence or prediction band of the fitted curve.

        Parameters
        ----------
        t : array-like
            Times (in :attr:`time_unit`).
        level : float, default=0.95
        kind : {"confidence", "prediction"}, default="confidence"
        method : str, default="delta"
            As :func:`isoturnover.bands.band`; ``"bootstrap"`` uses (or runs) this fit's
            bootstrap.
        boot : BootstrapResult, optional
        **kwargs
            Passed to :func:`isoturnover.bands.band`.

        Returns
        -------
        DataFrame
            Columns time, fitted, lower, upper (‰).
        """
        if method == "bootstrap" and boot is None:
            boot = self._boot if self._boot is not None else self.bootstrap()
        return band_of(self, t, level=level, kind=kind, method=method, boot=boot, **kwargs)
