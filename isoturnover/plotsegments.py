r"""The figure of a segment profile: δ along a growing inert tissue (hair, whisker, feather).

:func:`plot_segments` draws a fit made with ``record="segments"`` against the distance along
the tissue: each measured segment as a horizontal bar over its length (with its sd where the
fit has one), the fitted segment means as thin bars over the same lengths, and the
precursor's point response — the model at the instant each place was formed — as a line, so
what a segment averages can be seen. A top axis reads the formation time of each place,
:math:`t_f(x) = G^{-1}(G(T - \ell) - x)` (:mod:`isoturnover.segments`), when the segments
were cut from tissue sampled at one time; the diet switches are drawn where the tissue
formed at the switch lies.
matplotlib is imported inside the function and no global style is changed; colours are the
Okabe–Ito palette (:mod:`isoturnover.plotkit`).
"""

from __future__ import annotations

import numpy as np

from .dietprofile import SegmentGeometry
from .errors import DataError
from .plotkit import (
    GREY,
    LEGEND_PT,
    OKABE_ITO,
    TICK_PT,
    check_fit,
    new_axes,
    place_legend,
    series_title,
    style_axes,
    time_unit_word,
    tissue_label,
)
from .segments import check_length_unit, formation_intervals, growth_schedule

__all__ = ["plot_segments", "segment_geometry"]

_DATA = OKABE_ITO["orange"]
_FIT = OKABE_ITO["black"]
_POINT = OKABE_ITO["blue"]
_SWITCH = OKABE_ITO["vermillion"]
#: Size of a new figure (in): two journal columns, room for the top axis.
SIZE = (7.0, 3.0)


def segment_geometry(fit, segment_start=None, segment_end=None, sample_time=None):
    """The segments of a segment fit with their observed values, in the order given.

    Parameters
    ----------
    fit : TurnoverFit
        A fit made with ``record="segments"``.
    segment_start, segment_end : array-like of shape (n,), optional
        Distances of each segment's ends from the model's ``origin``; default those the fit
        recorded (``fit.data_info``, written by :func:`~isoturnover.fit_each`).
    sample_time : float or array-like of shape (n,), optional
        Time each tissue was sampled (the fit's time unit); default the recorded ones.

    Returns
    -------
    dict
        ``start``, ``end``, ``sample_time`` (arrays), ``t1``, ``t2`` (formation intervals,
        :func:`~isoturnover.segments.formation_intervals`), ``y`` (observed segment values,
        ‰) and ``sd`` (their sd, ‰, or None), matched to the fit's points through the
        formation midpoints.

    Raises
    ------
    DataError
        When the fit is not a segment fit, the segment ends are neither given nor recorded,
        or they do not give the fit's points.
    """
    fit = check_fit(fit, "plot_segments")
    model = fit.model
    if getattr(model, "record", "points") != "segments":
        raise DataError("plot_segments: 'fit' is not a segment fit (record='segments'); "
                        "plot_overview draws a fit of whole samples")
    info = fit.data_info
    a = info.get("segment_start") if segment_start is None else segment_start
    b = info.get("segment_end") if segment_end is None else segment_end
    ts = info.get("sample_time") if sample_time is None else sample_time
    if a is None or b is None or ts is None:
        raise DataError("plot_segments: the fit does not record its segments; give "
                        "'segment_start', 'segment_end' and 'sample_time' (fit_each records "
                        "them)")
    a = np.atleast_1d(np.asarray(a, dtype=float))
    b = np.atleast_1d(np.asarray(b, dtype=float))
    ts = np.broadcast_to(np.asarray(ts, dtype=float), a.shape).copy()
    t1, t2 = formation_intervals(a, b, ts, model.growth_rate,
                                 formation_lag=model.formation_lag, origin=model.origin,
                                 tissue_length=model.tissue_length)
    mid = (t1 + t2) / 2.0
    t_fit = np.asarray(fit.t, dtype=float)
    mine, theirs = np.argsort(mid, kind="stable"), np.argsort(t_fit, kind="stable")
    if mid.size != t_fit.size or not np.allclose(mid[mine], t_fit[theirs], rtol=1e-10,
                                                   atol=1e-9):
        raise DataError(f"plot_segments: the {a.size} segments given do not give the fit's "
                        f"{t_fit.size} formation midpoints (other segments, growth rate or "
                        "sampling time?)")
    y = np.empty(a.size)
    y[mine] = np.asarray(fit.y, dtype=float)[theirs]
    sd = None
    if fit.sigma is not None:
        sd = np.empty(a.size)
        sd[mine] = np.asarray(fit.sigma, dtype=float)[theirs]
    return {"start": a, "end": b, "sample_time": ts, "t1": t1, "t2": t2, "y": y, "sd": sd}


def plot_segments(fit, ax=None, *, segment_start=None, segment_end=None, sample_time=None,
                  length_unit=None):
    r"""δ of a segment profile against the distance along the tissue, with the fit.

    Parameters
    ----------
    fit : TurnoverFit
        A fit made with ``record="segments"`` (:class:`~isoturnover.TurnoverModel` or
        :func:`~isoturnover.fit_each`).
    ax : matplotlib Axes, optional
        Axes to draw on; a new figure of :data:`SIZE` when None.
    segment_start, segment_end, sample_time : array-like, optional
        The segments (see :func:`segment_geometry`); default those the fit recorded.
    length_unit : str, optional
        Unit of the distances, for the axis label and the growth rate; default the model's
        ``length_unit`` (``"mm"`` unless set).

    Returns
    -------
    matplotlib Axes
        The profile: measured segments (bars over their length; vertical ticks ± sd when the
        fit has an sd), fitted segment means (the exact mean of the model over each
        segment's formation interval), the precursor's point response
        :math:`\delta(t_f(x))` at each place :math:`x`, and the diet switches where the
        tissue then formed lies; a top axis of formation time when every segment was cut
        from tissue sampled at one time.

    Raises
    ------
    DataError
        For a fit that is not a segment fit, missing or inconsistent segments, or a bad
        ``ax``.
    """
    g = segment_geometry(fit, segment_start, segment_end, sample_time)
    model = fit.model
    length_unit = check_length_unit(getattr(model, "length_unit", "mm") if length_unit is None
                                    else length_unit)
    ax = new_axes(ax, size=SIZE)
    a, b, y, sd = g["start"], g["end"], g["y"], g["sd"]
    mid = (a + b) / 2.0
    fitted = fit.predict_segments(a, b, sample_time=g["sample_time"],
                                  growth_rate=model.growth_rate,
                                  formation_lag=model.formation_lag, origin=model.origin,
                                  tissue_length=model.tissue_length)
    ax.hlines(y, a, b, color=_DATA, lw=3.0, alpha=0.75, label="measured segment")
    if sd is not None:
        ax.errorbar(mid, y, yerr=sd, fmt="none", ecolor=_DATA, elinewidth=0.7, capsize=0)
    ax.hlines(fitted, a, b, color=_FIT, lw=1.1, label="fitted segment mean")

    where = "base" if model.origin == "base" else "tip"
    length = (None if model.origin == "base" else
              float(np.max(np.broadcast_to(model.tissue_length, a.shape))))
    geo = SegmentGeometry(a, b, np.broadcast_to(g["sample_time"], a.shape),
                          model.growth_rate, float(model.formation_lag), model.origin,
                          None if length is None else np.full(a.shape, length))
    if geo.single_sampling:
        sched = growth_schedule(model.growth_rate)
        time_at, place_of = geo.time_at, geo.position

        lo, hi = float(min(a.min(), b.min())), float(max(a.max(), b.max()))
        x = np.linspace(lo, hi, 600)
        switches = np.asarray(fit.kinetics.switch_times, dtype=float)
        at = place_of(switches) if switches.size else np.array([])
        x = np.union1d(x, at[(at > lo) & (at < hi)])
        # fit.predict is the point model at every time (never a segment mean)
        ax.plot(x, fit.predict(time_at(x)), color=_POINT, lw=0.9, ls="--",
                label="precursor at formation (point model)")
        first = True
        for xs in at:
            if lo < xs < hi:
                ax.axvline(xs, color=_SWITCH, ls=":", lw=0.9,
                           label="formed at a diet switch" if first else None)
                first = False
        top = ax.secondary_xaxis("top", functions=(time_at, place_of))
        top.set_xlabel(f"formation time ({time_unit_word(fit)})", fontsize=TICK_PT + 1)
        top.tick_params(labelsize=TICK_PT)
        ax.set_xlim(lo, hi)
        rate = np.unique(sched.rates)
        per = f"{length_unit} per {time_unit_word(fit).rstrip('s')}"
        note = (f"growth rate {rate[0]:.3g} {per}" if rate.size == 1
                else f"piecewise growth rate ({per})")
        if length is not None:
            note += f"; tissue {length:g} {length_unit} long"
        ax.set_title(note, fontsize=LEGEND_PT, loc="right", pad=18, color=GREY)
    style_axes(ax, f"Distance from the {where} ({length_unit})", tissue_label(fit))
    if fit.label:
        ax.set_title(series_title(fit.label), fontsize=TICK_PT + 1, loc="left", pad=18)
    ax.spines[["right", "top"]].set_visible(False)
    place_legend(ax, first=("measured", "fitted", "precursor", "formed"))
    return ax
