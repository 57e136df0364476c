r"""Planning segment profiles: segment length and count needed to resolve a pool.

A segment averages the precursor over the time it took to grow (:mod:`isoturnover.segments`),
so short segments resolve fast pools and more segments shrink the intervals, at the cost of
more analyses of less material. :class:`SegmentProfile` is a
:class:`~isoturnover.TurnoverModel` with a fixed segment geometry: the planning tools of
:mod:`isoturnover.design` and :mod:`isoturnover.simulate` see its formation midpoints as the
"times" and its exact segment means as the model, so :func:`~isoturnover.simulate_design`
simulates and fits segment profiles unchanged. :func:`plan_segments` runs it for several
segment lengths and tabulates what each gives. Every output carries the animal-care caution
(:data:`isoturnover.design.PLAN_CAUTION`).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from .conventions import unit_word
from .design import PLAN_CAUTION
from .errors import DataError
from .model import TurnoverModel
from .segments import SegmentKinetics, formation_intervals
from .simulate import simulate_design

__all__ = ["SegmentProfile", "SegmentPlan", "plan_segments"]


class SegmentProfile(TurnoverModel):
    r"""A segment model with a fixed geometry, as the planning tools see it.

    Parameters
    ----------
    pools : int, default=1
        Number of parallel pools (see :class:`~isoturnover.TurnoverModel`).
    segment_start, segment_end : array-like of shape (n,)
        Distances of each segment's ends from the ``origin`` (length unit of
        ``growth_rate``).
    sample_time : float or array-like of shape (n,)
        Time the tissue is sampled (time unit of the model).
    growth_rate : float or table of (time, rate)
        Growth rate of the tissue (length per time unit).
    formation_lag : float, default=0.0
        Time between formation and emergence at the base (≥ 0).
    origin : {"base", "tip"}, default="base"
        Where the distances are measured from.
    tissue_length : float, optional
        Tissue length at sampling (with ``origin="tip"``).
    **options
        Other options of :class:`~isoturnover.TurnoverModel` (``structure``, ``lag``,
        ``diet``, ``separation``, ``initial``...).

    Attributes
    ----------
    midpoints : ndarray of shape (n,)
        Formation midpoints of the segments, in the order given: the "times" to pass to
        :func:`~isoturnover.simulate_design` or :func:`~isoturnover.evaluate_design`.
    formation_start, formation_end : ndarray of shape (n,)
        The segments' formation intervals.

    Raises
    ------
    DataError
        For bad segments, growth rates or options (named), or two segments formed over
        different intervals around the same midpoint.
    """

    def __init__(self, pools=1, *, segment_start, segment_end, sample_time, growth_rate,
                 formation_lag=0.0, origin="base", tissue_length=None, **options):
        options.pop("record", None)
        super().__init__(pools, record="segments", growth_rate=growth_rate,
                         formation_lag=formation_lag, origin=origin,
                         tissue_length=tissue_length, **options)
        t1, t2 = formation_intervals(segment_start, segment_end, sample_time, growth_rate,
                                     formation_lag=formation_lag, origin=origin,
                                     tissue_length=tissue_length)
        n = t1.size
        self.segment_start = np.atleast_1d(np.asarray(segment_start, dtype=float))
        self.segment_end = np.atleast_1d(np.asarray(segment_end, dtype=float))
        self.sample_time = np.broadcast_to(np.asarray(sample_time, dtype=float), (n,)).copy()
        self.formation_start, self.formation_end = t1, t2
        self.midpoints = (t1 + t2) / 2.0
        self.profile_kinetics = None

    @property
    def kinetics(self) -> SegmentKinetics:
        """The segment kinetics of this geometry (segment means at :attr:`midpoints`).

        Returns
        -------
        SegmentKinetics
        """
        base = TurnoverModel.kinetics.fget(self)
        if self.profile_kinetics is None or self.profile_kinetics.param_names != \
                base.param_names or self.profile_kinetics.structure != base.structure:
            self.profile_kinetics = SegmentKinetics(base, self.formation_start,
                                                    self.formation_end)
        return self.profile_kinetics

    def fit(self, t_or_frame, y=None, sigma=None, **kwargs):
        """Fit values observed at (some of) this profile's segments.

        Parameters
        ----------
        t_or_frame : array-like of shape (m,)
            Formation midpoints (:attr:`midpoints`, repeated for several animals) naming
            the segment of each value.
        y : array-like of shape (m,)
            Segment δ values (‰).
        sigma : array-like or float, optional
            Analytic 1σ (‰).
        **kwargs
            Options of :meth:`TurnoverModel.fit <isoturnover.TurnoverModel.fit>`.

        Returns
        -------
        TurnoverFit

        Raises
        ------
        DataError
            When a time is not a formation midpoint of this profile.
        """
        t = np.atleast_1d(np.asarray(t_or_frame, dtype=float))
        order = np.argsort(self.midpoints, kind="stable")
        pos = np.minimum(np.searchsorted(self.midpoints[order], t), order.size - 1)
        idx = order[pos]
        bad = np.flatnonzero(self.midpoints[idx] != t)
        if bad.size:
            raise DataError(f"'t': {t[bad[0]]:g} is not a formation midpoint of this segment "
                            "profile (pass SegmentProfile.midpoints)")
        return super().fit(self.sample_time[idx], y, sigma,
                           segment_start=self.segment_start[idx],
                           segment_end=self.segment_end[idx], **kwargs)


class SegmentPlan:
    """What each candidate segment length gives (:func:`plan_segments`).

    Parameters
    ----------
    rows : list of dict
        One row per segment length (see :meth:`table`).
    results : dict
        :class:`~isoturnover.SimulationResult` by segment length.
    target : str
        The target quantity's name.
    time_unit : str, default="d"
        Time unit of the formation times (a code such as ``"d"``, or any label).
    length_unit : str, default="mm"
        Length unit of the segments (that of the growth rate).

    Attributes
    ----------
    caution : str
        The animal-care caution every plan carries.
    """

    def __init__(self, rows, results, target, time_unit="d", length_unit="mm"):
        self.rows = rows
        self.results = results
        self.target = target
        self.time_unit = _unit("time_unit", time_unit)
        self.length_unit = _unit("length_unit", length_unit)
        self.caution = PLAN_CAUTION

    def table(self) -> pd.DataFrame:
        """One row per segment length.

        Returns
        -------
        DataFrame
            Columns segment_length, n_segments, segment_time (median formation time one
            segment spans, time unit), resolvable (the target pool's half-life at the
            truth is at least one segment's time), predicted_se, coverage, median_width,
            median_rel_half_width, failure_rate.
        """
        return pd.DataFrame(self.rows)

    def summary(self) -> str:
        """A printable account of the plan, ending with the animal-care caution.

        One line per segment length, with its units: ``segments of 2 mm (40 segments, 4 days
        each)``, then the relative half-width, coverage and failures of the simulated fits.

        Returns
        -------
        str
        """
        days = unit_word(self.time_unit)
        lines = [f"Segment plan for {self.target} (lengths in {self.length_unit}, formation "
                 f"times in {days}):"]
        for r in self.rows:
            lines.append(
                f"  segments of {r['segment_length']:g} {self.length_unit} "
                f"({r['n_segments']} segments, {r['segment_time']:.3g} {days} each): "
                "relative half-width "
                f"{100 * r['median_rel_half_width']:.1f} %, coverage "
                f"{100 * r['coverage']:.1f} %, failures {100 * r['failure_rate']:.1f} %"
                + ("" if r["resolvable"] else " — pool faster than one segment"))
        lines.append("Caution. " + PLAN_CAUTION)
        return "\n".join(lines)

    def __repr__(self):
        return f"<SegmentPlan {self.target}: {len(self.rows)} segment lengths>"


def plan_segments(truth, *, segment_lengths, tissue_length, sample_time, growth_rate, sd,
                  pools=1, formation_lag=0.0, n_sim=200, rng=None, level=0.95, n_jobs=1,
                  quantity="half_life", pool=None, method="asymptotic", time_unit="d",
                  length_unit="mm", **model_options) -> SegmentPlan:
    r"""Simulate segment profiles cut at several lengths and tabulate what each resolves.

    For each length :math:`L` the tissue (``tissue_length`` long at ``sample_time``) is cut
    from the base into :math:`\lfloor \Lambda / L \rfloor` whole segments; each profile is
    a :class:`SegmentProfile`, simulated and fitted by :func:`~isoturnover.simulate_design`
    (seeded; the same seed for every length).

    Parameters
    ----------
    truth : dict
        The true parameters by name (as :func:`~isoturnover.simulate_design`).
    segment_lengths : sequence of float
        Candidate segment lengths (length unit of ``growth_rate``), > 0.
    tissue_length : float
        Length of the tissue at sampling (> 0).
    sample_time : float
        Time the tissue is sampled (time unit).
    growth_rate : float or table of (time, rate)
        Tissue growth rate (length per time unit).
    sd : float
        Residual sd of one segment value (‰).
    pools : int, default=1
        Number of pools of the model.
    formation_lag : float, default=0.0
        Time from formation to emergence (≥ 0).
    n_sim : int, default=200
        Simulated profiles per segment length.
    rng : int or SeedSequence, optional
        Seed (None: fresh entropy, not reproducible).
    level : float, default=0.95
        Level of the intervals.
    n_jobs : int, default=1
        Worker processes of each simulation.
    quantity : {"half_life", "time_to"}, default="half_life"
        The target (see :func:`~isoturnover.simulate_design`).
    pool : int, optional
        Pool of the half-life (1 = fastest; default the slowest).
    method : str, default="asymptotic"
        Interval method of the fits.
    time_unit : str, default="d"
        Time unit of ``sample_time``, the rates and the growth rate (printed by the
        summary).
    length_unit : str, default="mm"
        Length unit of the segments, the tissue and the growth rate (printed by the
        summary).
    **model_options
        Other options of :class:`~isoturnover.TurnoverModel` (``structure``, ``diet``...).

    Returns
    -------
    SegmentPlan
        One row per segment length, the simulations and the animal-care caution.

    Raises
    ------
    DataError
        For a length that is not positive or longer than the tissue, a bad tissue length,
        or any bad argument of :func:`~isoturnover.simulate_design` (named).
    """
    try:
        lengths = np.atleast_1d(np.asarray(segment_lengths, dtype=float))
        total = float(tissue_length)
    except (TypeError, ValueError):
        raise DataError("'segment_lengths' must be numbers and 'tissue_length' a number; got "
                        f"{segment_lengths!r:.60}, {tissue_length!r:.30}") from None
    if not (math.isfinite(total) and total > 0):
        raise DataError(f"'tissue_length' must be > 0; got {tissue_length!r}")
    if lengths.size == 0 or not np.all(np.isfinite(lengths)) or np.any(lengths <= 0):
        raise DataError(f"'segment_lengths' must be positive numbers; got {lengths.tolist()}")
    if np.any(lengths > total):
        raise DataError(f"'segment_lengths': {float(lengths.max()):g} is longer than the "
                        f"tissue ('tissue_length' = {total:g})")
    time_unit = _unit("time_unit", time_unit)
    length_unit = _unit("length_unit", length_unit)
    rows, results, target = [], {}, quantity
    for length in lengths.tolist():
        n = int(math.floor(total / length + 1e-9))
        a = np.arange(n) * length
        prof = SegmentProfile(pools, segment_start=a, segment_end=a + length,
                              sample_time=sample_time, growth_rate=growth_rate,
                              formation_lag=formation_lag, length_unit=length_unit,
                              **model_options)
        res = simulate_design(prof, truth, prof.midpoints, sd=sd, n_sim=n_sim, rng=rng,
                              level=level, n_jobs=n_jobs, quantity=quantity, pool=pool,
                              method=method)
        kin = prof.kinetics
        k = np.array([float(truth[nm]) for nm in kin.rate_names])
        seg_time = float(np.median(prof.formation_end - prof.formation_start))
        k_target = float(k.min()) if pool is None else float(k[int(pool) - 1])
        target = res.target_name
        rows.append({"segment_length": length, "n_segments": n, "segment_time": seg_time,
                     "resolvable": math.log(2.0) / k_target >= seg_time,
                     "predicted_se": res.predicted_se, "coverage": res.coverage,
                     "median_width": res.median_width,
                     "median_rel_half_width": res.median_rel_half_width,
                     "failure_rate": res.failure_rate})
        results[length] = res
    return SegmentPlan(rows, results, target, time_unit, length_unit)


def _unit(name, value):
    if not isinstance(value, str) or not value.strip():
        example = "'d'" if name == "time_unit" else "'mm'"
        raise DataError(f"'{name}' must be a non-empty unit label such as {example}; got "
                        f"{value!r:.40}")
    return value.strip()
