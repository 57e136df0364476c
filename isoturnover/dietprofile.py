r"""Segment profiles read as diet records: formation intervals and the profile's geometry.

A samples frame with ``segment_start``/``segment_end`` (hair, whiskers, feathers, claws) is
mapped segment by segment to its formation interval by
:func:`isoturnover.segments.formation_intervals` (growth rate, formation lag, origin and
tissue length given, or taken from a segment fit) by :func:`profile_data`; those intervals
are the observation windows of :func:`isoturnover.inverse.reconstruct_diet`, and
:class:`SegmentGeometry` keeps the geometry so positions along the tissue and formation
times can be read against each other.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .conventions import check_choice, unit_word
from .errors import DataError
from .inputs import prepare_data
from .resampling import BootstrapResult
from .results import TurnoverFit
from .segments import ORIGINS, formation_intervals, growth_schedule, segment_arrays

__all__ = ["SegmentGeometry", "profile_data", "is_profile", "GEOMETRY_ARGUMENTS"]


@dataclass(frozen=True, eq=False)
class SegmentGeometry:
    r"""Where the segments of a profile lie along the tissue, and when they were formed.

    Made by :func:`reconstruct_diet` from a segment profile; the formation intervals are
    :func:`isoturnover.segments.formation_intervals` of these arguments.

    Parameters
    ----------
    segment_start, segment_end : ndarray of shape (n,)
        Distances of each segment's ends from :attr:`origin` (length unit of the growth
        rate), in the order of the reconstruction's samples (by formation time).
    sample_time : ndarray of shape (n,)
        Time the tissue was sampled (time unit).
    growth_rate : float or table of (time, rate)
        Growth rate of the tissue (length per time unit).
    formation_lag : float
        Time from formation to emergence at the base (time unit).
    origin : {"base", "tip"}
        Where the distances are measured from.
    tissue_length : ndarray of shape (n,) or None
        Tissue length at sampling (with ``origin="tip"``).
    """

    segment_start: np.ndarray
    segment_end: np.ndarray
    sample_time: np.ndarray
    growth_rate: object
    formation_lag: float
    origin: str
    tissue_length: np.ndarray | None = None

    @property
    def single_sampling(self) -> bool:
        """True when every segment comes from one tissue sampled once (one sampling time
        and, from the tip, one tissue length): positions and times then map one to one."""
        one = np.ptp(self.sample_time) == 0
        if self.origin == "tip":
            one = one and np.ptp(self.tissue_length) == 0
        return bool(one)

    def _anchor(self):
        if not self.single_sampling:
            raise DataError("the profile's segments were sampled at several times (or "
                            "tissue lengths): a position along the tissue is not one time")
        sched = growth_schedule(self.growth_rate)
        top = float(sched.cumulative(self.sample_time[0] - self.formation_lag))
        length = None if self.tissue_length is None else float(self.tissue_length[0])
        return sched, top, length

    def position(self, t):
        r"""Distance from :attr:`origin` of the tissue formed at time ``t``.

        The geometry of :func:`isoturnover.segments.formation_intervals` read backwards:
        :math:`x = G(T - \ell) - G(t)` from the base, :math:`\Lambda - x` from the tip.

        Parameters
        ----------
        t : array-like
            Formation times (time unit); outside the tissue the growth law is extended.

        Returns
        -------
        ndarray
            Distances (length unit of the growth rate), shaped like ``t``.

        Raises
        ------
        DataError
            When the segments were sampled at several times (no single position axis).
        """
        sched, top, length = self._anchor()
        x = top - sched.cumulative(np.asarray(t, dtype=float))
        return x if self.origin == "base" else length - x

    def time_at(self, x):
        r"""Formation time of the tissue at distance ``x`` from :attr:`origin`.

        :math:`t = G^{-1}(G(T - \ell) - x)` (``x`` from the base; :math:`\Lambda - x` from
        the tip), the inverse of :meth:`position`.

        Parameters
        ----------
        x : array-like
            Distances (length unit of the growth rate).

        Returns
        -------
        ndarray
            Times (time unit), shaped like ``x``.

        Raises
        ------
        DataError
            When the segments were sampled at several times.
        """
        sched, top, length = self._anchor()
        x = np.asarray(x, dtype=float)
        return sched.inverse(top - (x if self.origin == "base" else length - x))

    def describe(self, time_unit="d") -> str:
        """One line: segments, where they lie, the growth rate and the lag.

        Parameters
        ----------
        time_unit : str, default="d"

        Returns
        -------
        str
        """
        g = growth_schedule(self.growth_rate).rates
        rate = (f"{g[0]:g} length units per {time_unit}" if g.size == 1
                else f"piecewise ({g.size} rows of time, rate)")
        times = ", ".join(f"{v:g}" for v in np.unique(self.sample_time))
        return (f"segment profile: {self.segment_start.size} segments from "
                f"{np.min(self.segment_start):g} to {np.max(self.segment_end):g} length units "
                f"from the {self.origin}, sampled at {times} {unit_word(time_unit)}; growth "
                f"rate {rate}, formation lag {self.formation_lag:g} {unit_word(time_unit)}")


#: The arguments of :func:`isoturnover.inverse.reconstruct_diet` that go with a profile.
GEOMETRY_ARGUMENTS = ("growth_rate", "segment_origin", "formation_lag", "tissue_length")


def is_profile(data):
    """True for a samples frame with ``segment_start`` and ``segment_end`` values.

    Parameters
    ----------
    data : object
        The data given to :func:`isoturnover.inverse.reconstruct_diet`.

    Returns
    -------
    bool
    """
    return (isinstance(data, pd.DataFrame) and "segment_start" in data.columns
            and "segment_end" in data.columns
            and bool(data[["segment_start", "segment_end"]].notna().any().any()))


def profile_data(data, kinetics, sigma, windows, geometry):
    """The observations of a segment profile, sorted by formation time.

    Parameters
    ----------
    data : DataFrame
        Samples of one tissue with ``segment_start``, ``segment_end`` and ``time`` (the
        sampling time).
    kinetics : object
        The kinetics given; a segment fit (or a bootstrap of one) supplies the geometry not
        given.
    sigma, windows : None
        Must be None (they go with arrays): named in the error otherwise.
    geometry : dict
        ``growth_rate``, ``segment_origin``, ``formation_lag``, ``tissue_length`` as given
        (None: from the segment fit, else the defaults).

    Returns
    -------
    tuple
        (t, y, sigma, (start, end), time unit, :class:`SegmentGeometry`): formation
        midpoints, values and sd, the formation intervals.

    Raises
    ------
    DataError
        Without a growth rate, or with ``sigma``/``windows``.
    """
    if windows is not None:
        raise DataError("'windows' is not used with a segment profile: its windows are the "
                        "segments' formation intervals (from 'growth_rate', "
                        "'formation_lag', 'segment_origin' and 'tissue_length')")
    if sigma is not None:
        raise DataError("'sigma' goes with arrays; a segment profile's sd is its 'sd' column")
    fit = kinetics.fit if isinstance(kinetics, BootstrapResult) else kinetics
    model = fit.model if isinstance(fit, TurnoverFit) else None
    if getattr(model, "record", "points") != "segments":
        model = None
    attrs = {"growth_rate": "growth_rate", "segment_origin": "origin",
             "formation_lag": "formation_lag", "tissue_length": "tissue_length"}
    geo = {k: (getattr(model, attrs[k]) if v is None and model is not None else v)
           for k, v in geometry.items()}
    if geo["growth_rate"] is None:
        raise DataError("'growth_rate' is needed for a segment profile (the tissue's growth "
                        "rate, length per time unit: a number or a table of (time, rate)); "
                        "give growth_rate= or a segment fit (TurnoverModel(record="
                        "'segments')) as 'kinetics'")
    origin = check_choice("segment_origin", geo["segment_origin"] or "base", ORIGINS)
    lag = 0.0 if geo["formation_lag"] is None else geo["formation_lag"]
    arr = segment_arrays(data)
    t1, t2 = formation_intervals(arr["segment_start"], arr["segment_end"],
                                 arr["sample_time"], geo["growth_rate"], formation_lag=lag,
                                 origin=origin, tissue_length=geo["tissue_length"])
    d = prepare_data((t1 + t2) / 2.0, arr["y"], arr["sigma"], arr["time_unit"],
                     warn_repeats=False)
    o = np.asarray(d["order"])
    n = t1.size
    length = geo["tissue_length"]
    length = None if length is None else np.broadcast_to(
        np.asarray(length, dtype=float).ravel(), (n,))[o].copy()
    geom = SegmentGeometry(arr["segment_start"][o], arr["segment_end"][o],
                           arr["sample_time"][o], geo["growth_rate"], float(lag), origin,
                           length)
    return d["t"], d["y"], d["sigma"], (t1[o], t2[o]), d["time_unit"], geom


