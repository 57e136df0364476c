r"""The growth rate of a segmented tissue, fitted from a profile that holds a known switch.

A segment of hair, whisker, feather or claw lying at :math:`[a, b]` from the base of a tissue
sampled at :math:`T` was formed during :math:`[T - \ell - b/g,\; T - \ell - a/g]` for a
constant growth rate :math:`g` (length per time unit; :mod:`isoturnover.segments`). The rate
enters the model only through these formation intervals, so it is profiled: for each
:math:`g` the segment model (:class:`~isoturnover.TurnoverModel` with ``record="segments"``)
is fitted with that rate, giving the profile :math:`\mathrm{RSS}(g)` (weighted when the
samples carry an ``sd``). :math:`\hat g` minimises it (a coarse scan of :math:`\ln g` over the
``bounds``, then bounded Brent minimisation, ``scipy.optimize.minimize_scalar``, around the
best grid point), and the interval at level :math:`1 - \alpha` is the set of rates whose
profile F statistic stays under the F quantile (Bates & Watts 1988, §6.1; Venzon & Moolgavkar
1988 for profiling one parameter):

.. math::

    F(g) = \frac{\mathrm{RSS}(g) - \mathrm{RSS}(\hat g)}{\mathrm{RSS}(\hat g)/(n - p - 1)}
    \le F_{1,\,n-p-1}(1 - \alpha),

with :math:`n` segments and :math:`p` free parameters of the model (the rate is the
:math:`(p+1)`-th). Each bound is found by Brent's root search (``scipy.optimize.brentq``) on
:math:`\ln g` between the last grid point under the cut and the first one over it; when the
profile never reaches the cut inside ``bounds`` on one side that bound is open (0 or
:math:`\infty`, status ``"open"``, :data:`~isoturnover.conventions.STATUSES`).

Identifiability. Without a change of the diet inside the time the profile spans, every rate
maps the segments onto a constant precursor and fits equally well: the rate is then not
identifiable and :func:`fit_growth_rate` refuses. The diet's switch times must be known
(a :class:`~isoturnover.DietHistory` on the model, or the model's step at t = 0).
"""

from __future__ import annotations

import inspect
import math
import warnings
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize, special

from .conventions import check_level, unit_word
from .errors import DataError, FitError
from .model import TurnoverModel
from .segments import check_length_unit, formation_intervals, segment_arrays

__all__ = ["fit_growth_rate", "GrowthRateFit", "GRID_POINTS"]

#: Points of the coarse scan of ln g over the bounds (before the bounded minimisation).
GRID_POINTS = 17


@dataclass(frozen=True)
class GrowthRateFit:
    """The fitted growth rate of a segmented tissue and its profile interval.

    Built by :func:`fit_growth_rate`; the fields are read-only.

    Parameters
    ----------
    growth_rate : float
        :math:`\\hat g`, the rate minimising the profile RSS (length unit per time unit).
    lower, upper : float
        Bounds of the profile F interval (length unit per time unit); an open lower bound
        is 0 and an open upper bound is ``inf``.
    level : float
        Confidence level of the interval.
    lower_status, upper_status : str
        ``"ok"``, ``"open"`` (the profile does not reach the cut inside ``bounds``) or
        ``"failed"`` (a fit along the profile failed), from
        :data:`~isoturnover.conventions.STATUSES`.
    fit : TurnoverFit
        The segment fit at :math:`\\hat g`.
    profile_rate, profile_rss : ndarray
        Every rate at which the model was fitted (sorted) and its RSS.
    rss : float
        :math:`\\mathrm{RSS}(\\hat g)`.
    cut : float
        The RSS at the interval's bounds,
        :math:`\\mathrm{RSS}(\\hat g)\\,(1 + F_{1,n-p-1}(level)/(n-p-1))`.
    f_quantile : float
        :math:`F_{1,n-p-1}(level)` (``scipy.special.fdtri``).
    dof : int
        :math:`n - p - 1`: segments minus the model's free parameters minus the rate.
    bounds : tuple of float
        The range searched.
    time_unit, length_unit : str
        Units of the rate (``length_unit`` per ``time_unit``).
    """

    growth_rate: float
    lower: float
    upper: float
    level: float
    lower_status: str
    upper_status: str
    fit: object = field(repr=False)
    profile_rate: np.ndarray = field(repr=False)
    profile_rss: np.ndarray = field(repr=False)
    rss: float
    cut: float
    f_quantile: float
    dof: int
    bounds: tuple
    time_unit: str
    length_unit: str

    @property
    def status(self) -> str:
        """The interval's status: ``"ok"`` when both bounds are ``"ok"``, else ``"failed"``
        when a bound failed, else ``"open"``."""
        sts = (self.lower_status, self.upper_status)
        if all(s == "ok" for s in sts):
            return "ok"
        return "failed" if "failed" in sts else "open"

    def f_statistic(self, rss) -> np.ndarray:
        """Profile F statistic of given RSS values.

        Parameters
        ----------
        rss : float or array-like
            Profile RSS values.

        Returns
        -------
        ndarray
            :math:`(\\mathrm{RSS} - \\mathrm{RSS}(\\hat g)) / (\\mathrm{RSS}(\\hat g)/(n-p-1))`.
        """
        return (np.asarray(rss, dtype=float) - self.rss) / (self.rss / self.dof)

    def table(self):
        """The estimate and interval as a one-row table.

        Returns
        -------
        DataFrame
            Columns ``parameter`` (``"growth_rate"``), ``unit`` and the interval columns
            :data:`~isoturnover.conventions.INTERVAL_COLUMNS` (method ``"profile"``).
        """
        import pandas as pd

        return pd.DataFrame([{
            "parameter": "growth_rate", "unit": f"{self.length_unit}/{self.time_unit}",
            "estimate": self.growth_rate, "lower": self.lower, "upper": self.upper,
            "level": self.level, "method": "profile", "lower_status": self.lower_status,
            "upper_status": self.upper_status}])

    def summary(self) -> str:
        """A short text: the rate, its interval with the statuses, and the profile's basis.

        Returns
        -------
        str
            Several lines of plain text.
        """
        unit = f"{self.length_unit}/{self.time_unit}"

        def bound(v, st):
            return f"{v:.4g}" if st == "ok" else f"{v:.4g} ({st})"

        lines = [
            f"Tissue growth rate: {self.growth_rate:.4g} {unit} (length per time unit, "
            f"time in {unit_word(self.time_unit)})",
            f"  {100 * self.level:g} % profile interval: "
            f"[{bound(self.lower, self.lower_status)}, {bound(self.upper, self.upper_status)}]"
            f" {unit}",
            f"  profile F cut F(1, {self.dof}; {self.level:g}) = {self.f_quantile:.4g}; "
            f"RSS at the estimate {self.rss:.6g}; searched [{self.bounds[0]:g}, "
            f"{self.bounds[1]:g}] {unit}; {self.profile_rate.size} fits",
        ]
        if self.status != "ok":
            lines.append("  an open bound: the profile does not reach the cut inside the "
                         "searched range on that side (widen 'bounds', or the profile does "
                         "not hold enough of the switch to close it)")
        return "\n".join(lines)

    def __repr__(self):
        return (f"GrowthRateFit(growth_rate={self.growth_rate:.4g}, lower={self.lower:.4g}, "
                f"upper={self.upper:.4g}, level={self.level:g}, status={self.status!r})")


def _check_bounds(bounds):
    try:
        lo, hi = (float(v) for v in bounds)
    except (TypeError, ValueError):
        raise DataError(f"'bounds' must be two numbers (lowest, highest growth rate, length "
                        f"per time unit); got {bounds!r}") from None
    if not (math.isfinite(lo) and math.isfinite(hi) and 0 < lo < hi):
        raise DataError(f"'bounds' must be finite with 0 < lowest < highest; got {bounds!r}")
    return lo, hi


def _segment_data(segments):
    """Sampling times, segment ends, values and sd of one profile frame."""
    if not hasattr(segments, "columns"):
        raise DataError(f"'segments' must be a samples frame of one profile (columns time, "
                        f"segment_start, segment_end, value and optionally sd); got "
                        f"{type(segments).__name__}")
    if all(c in segments.columns for c in ("subject", "tissue", "isotope")):
        return segment_arrays(segments)  # read and checked, replicates averaged
    need = ("time", "segment_start", "segment_end", "value")
    missing = [c for c in need if c not in segments.columns]
    if missing:
        raise DataError(f"'segments' needs the columns {list(need)} (and optionally 'sd'); "
                        f"missing {missing}")
    return segment_arrays(segments["time"].to_numpy(dtype=float),
                          segments["value"].to_numpy(dtype=float),
                          None if "sd" not in segments.columns
                          else segments["sd"].to_numpy(dtype=float),
                          segments["segment_start"].to_numpy(dtype=float),
                          segments["segment_end"].to_numpy(dtype=float))


def _check_model(model):
    if not isinstance(model, TurnoverModel):
        raise DataError(f"'model' must be a TurnoverModel with record='segments'; got "
                        f"{type(model).__name__}")
    if model.record != "segments":
        raise DataError(f"'model' must have record='segments' (a growth rate maps segments "
                        f"to formation times); got record={model.record!r}")
    g = model.growth_rate
    if g is not None and np.ndim(g) != 0:
        raise DataError("'model' has a growth-rate table (piecewise rates); fit_growth_rate "
                        "fits one constant rate: give growth_rate= one number (any start "
                        "value)")
    check_length_unit(model.length_unit)


def _with_rate(model, g):
    """A new TurnoverModel with every option of ``model`` and ``growth_rate=g``."""
    names = [n for n in inspect.signature(TurnoverModel.__init__).parameters if n != "self"]
    opts = {n: getattr(model, n) for n in names}
    opts["growth_rate"] = float(g)
    return TurnoverModel(**opts)


def _switch_times(model):
    return np.asarray([0.0]) if model.diet is None else model.diet.switch_times


def fit_growth_rate(segments, model, *, bounds, level=0.95, time_unit="d",
                    grid_points=GRID_POINTS) -> GrowthRateFit:
    r"""Fit a tissue's constant growth rate from a segment profile holding a known switch.

    The rate :math:`g` enters only through the segments' formation intervals, so the model
    is fitted at each trial rate and the profile :math:`\mathrm{RSS}(g)` is minimised
    (formulas in the module docstring: coarse scan of :math:`\ln g`, bounded Brent
    minimisation, profile F interval with Brent's root search on each side).

    Parameters
    ----------
    segments : DataFrame
        One profile: columns ``time`` (sampling time), ``segment_start``, ``segment_end``
        (distances from the model's ``origin``, its ``length_unit``), ``value`` (‰) and
        optionally ``sd`` (weights); with ``subject``, ``tissue`` and ``isotope`` it is read
        as a samples table (one series; analytic replicates averaged).
    model : TurnoverModel
        ``record="segments"`` with the known diet history (``diet=``; without one the
        model's step at t = 0), ``formation_lag``, ``origin``, ``tissue_length``; its
        ``growth_rate`` (one number or None) is only a start value and is not used.
    bounds : tuple of float
        Lowest and highest rate searched (length unit per time unit), ``0 < low < high``.
    level : float, default=0.95
        Confidence level of the interval.
    time_unit : str, default="d"
        Time unit of the data (the rate is in ``length_unit`` per ``time_unit``).
    grid_points : int, default=GRID_POINTS
        Points of the coarse scan (≥ 5): local minima narrower than its spacing may be
        missed.

    Returns
    -------
    GrowthRateFit
        The rate, its interval and statuses, the fit at the rate, the profile.

    Raises
    ------
    DataError
        Naming the argument: ``segments`` not a usable profile, ``model`` not a segment
        model (or with a piecewise rate), bad ``bounds`` or ``level``, no diet switch inside
        the profile's formation span for any rate in ``bounds`` (the rate is then not
        identifiable: every rate fits a constant precursor equally well), too few segments
        for the model's free parameters and the rate.
    FitError
        When the model cannot be fitted at any rate of the scan.

    Examples
    --------
    >>> import isoturnover as iso
    >>> hair = iso.read_samples(iso.demo_path("goat_hair"))
    >>> diets = iso.read_diets(iso.demo_path("goat_diets"))
    >>> d = iso.DietHistory.from_table(diets[(diets.group == "B") & (diets.isotope == "d13C")])
    >>> m = iso.TurnoverModel(1, diet=d, record="segments", growth_rate=0.3)
    >>> r = iso.fit_growth_rate(hair[hair.subject == "G05"], m, bounds=(0.1, 2.0))
    >>> 0.35 < r.growth_rate < 0.45
    True
    """
    _check_model(model)
    lo, hi = _check_bounds(bounds)
    level = check_level(level)
    if isinstance(grid_points, bool) or not isinstance(grid_points, int | np.integer) \
            or grid_points < 5:
        raise DataError(f"'grid_points' must be an integer >= 5; got {grid_points!r}")
    arr = _segment_data(segments)
    span = [formation_intervals(arr["segment_start"], arr["segment_end"], arr["sample_time"],
                                g, formation_lag=model.formation_lag, origin=model.origin,
                                tissue_length=model.tissue_length) for g in (lo, hi)]
    first, last = float(np.min(span[0][0])), float(np.max(span[1][1]))
    sw = _switch_times(model)
    if not np.any((sw > first) & (sw < last)):
        raise DataError(
            f"'model' has no diet switch inside the profile's formation span "
            f"[{first:g}, {last:g}] ({time_unit}) for any rate in 'bounds' (switches at "
            f"{', '.join(f'{s:g}' for s in sw) or 'none'}): without a change of the diet "
            "while the segments formed, every rate maps them onto a constant precursor and "
            "fits equally well, so the growth rate is not identifiable; give the diet "
            "history with a known switch the profile spans, or the growth rate itself")

    cache = {}
    best = {"rss": math.inf, "fit": None, "g": math.nan}

    def rss(g):
        g = float(g)
        if g not in cache:
            try:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    f = _with_rate(model, g).fit(
                        arr["sample_time"], arr["y"], arr["sigma"], time_unit=time_unit,
                        segment_start=arr["segment_start"], segment_end=arr["segment_end"],
                        warn=False)
                # a fit the optimizer did not finish has no profile value: counted failed
                ok = math.isfinite(f.rss) and bool(f.state.optimizer_ok)
                val = float(f.rss) if ok else math.inf
            except FitError:
                f, val = None, math.inf
            except DataError as e:  # the data cannot be fitted by this model at all
                raise DataError(f"'segments' cannot be fitted with this model (growth rate "
                                f"{g:g}): {e}") from e
            cache[g] = val
            if val < best["rss"]:
                best.update(rss=val, fit=f, g=g)
        return cache[g]

    grid = np.geomspace(lo, hi, grid_points)
    vals = np.array([rss(g) for g in grid])
    if not np.isfinite(vals).any():
        raise FitError(f"the segment model could not be fitted at any growth rate in "
                       f"[{lo:g}, {hi:g}]")
    i = int(np.argmin(vals))
    a, b = grid[max(i - 1, 0)], grid[min(i + 1, grid.size - 1)]
    optimize.minimize_scalar(lambda u: rss(math.exp(u)), bounds=(math.log(a), math.log(b)),
                             method="bounded", options={"xatol": 1e-9})
    g_hat, rss_min, fit = best["g"], best["rss"], best["fit"]
    dof = int(arr["y"].size - fit.nvarys - 1)
    if dof < 1:
        raise DataError(f"'segments' has {arr['y'].size} segments: too few for the model's "
                        f"{fit.nvarys} free parameters and the growth rate (needs at least "
                        f"{fit.nvarys + 2})")
    fq = float(special.fdtri(1, dof, level))
    cut = rss_min * (1.0 + fq / dof)

    def side(outer):
        """The bound beyond ĝ on one side: (value, status)."""
        prev = g_hat
        for g in outer:
            r = rss(g)
            if not math.isfinite(r):  # a failed fit is not "above the cut": no bound here
                return math.nan, "failed"
            if r > cut:
                try:
                    u = optimize.brentq(
                        lambda u: min(rss(math.exp(u)), 1e300) - cut, math.log(prev),
                        math.log(g), xtol=1e-13, rtol=4 * np.finfo(float).eps)
                except (ValueError, RuntimeError):
                    return math.nan, "failed"
                inside = [v for h, v in cache.items() if min(prev, g) < h < max(prev, g)]
                if not all(math.isfinite(v) for v in inside):
                    return math.nan, "failed"  # a fit failed within the bracket
                return math.exp(u), "ok"
            prev = g
        return None, "open"

    upper, ust = side(grid[grid > g_hat])
    lower, lst = side(grid[grid < g_hat][::-1])
    upper = math.inf if ust == "open" else upper
    lower = 0.0 if lst == "open" else lower
    g_all = np.array(sorted(cache))
    return GrowthRateFit(
        growth_rate=g_hat, lower=lower, upper=upper, level=level, lower_status=lst,
        upper_status=ust, fit=fit, profile_rate=g_all,
        profile_rss=np.array([cache[g] for g in g_all]), rss=rss_min, cut=cut,
        f_quantile=fq, dof=dof, bounds=(lo, hi), time_unit=time_unit,
        length_unit=str(model.length_unit))
