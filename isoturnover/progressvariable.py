r"""The reaction progress variable of one step diet switch: transform, end values, table.

For a step switch at :math:`t = 0` from a tissue value :math:`\delta_0` (equilibrium with the
old diet) to the equilibrium value :math:`\delta_{eq}` of the new diet, the reaction progress
variable :math:`F` (Cerling et al. 2007, Oecologia 151:175-189) is

.. math::

    1 - F(t) = \frac{\delta(t) - \delta_{eq}}{\delta_0 - \delta_{eq}}.

This module computes :math:`F` and :math:`\ln(1 - F)` point by point with flags and a
propagated standard deviation (:func:`progress_variable`), crude values of :math:`\delta_0`
and :math:`\delta_{eq}` read from the data (:func:`end_values`), and the table form of both
(:func:`reaction_progress`). It also holds the input checks of a series (:func:`check_pair`,
:func:`check_ends`, :func:`check_sd`, :func:`as_scalar`, :func:`show_value`) that the
estimates built on the transform share. Those estimates (the log-linear rate, curve peeling,
starting rates) live in :mod:`isoturnover.progress`, which re-exports every public name here;
see its docstring for what the transform is and is not for.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

import numpy as np

from .errors import DataError

__all__ = [
    "FLAGS",
    "ProgressVariable",
    "EndValues",
    "progress_variable",
    "end_values",
    "reaction_progress",
    "check_pair",
    "check_ends",
    "check_sd",
    "as_scalar",
    "show_value",
]

#: Point flags of :func:`progress_variable`, in order of precedence.
FLAGS = ("ok", "F>=1", "F<=0", "nonfinite")

_OK, _PAST, _BEFORE, _NONFINITE = FLAGS


# --------------------------------------------------------------------------------------------
# input checks (shared with the estimates in progress.py)
# --------------------------------------------------------------------------------------------


def _as_1d(x, name: str) -> np.ndarray:
    """A one-dimensional float array from array-like ``x`` (pandas NA becomes NaN)."""
    if x is None:
        raise DataError(f"{name} is required: give an array of numbers, got None")
    try:
        if hasattr(x, "to_numpy"):
            a = x.to_numpy(dtype=float, na_value=np.nan)
        else:
            a = np.asarray(x, dtype=float)
    except (TypeError, ValueError):
        raise DataError(
            f"{name} must be an array of numbers, got values that are not numbers "
            f"({type(x).__name__})"
        ) from None
    if a.ndim != 1:
        raise DataError(f"{name} must be one-dimensional, got an array of shape {a.shape}")
    return a


def show_value(v) -> str:
    """Show a user's value in an error message, numpy scalars as plain Python numbers.

    Parameters
    ----------
    v : object
        The value as the user gave it.

    Returns
    -------
    str
        ``repr(v)``, with a numpy scalar first converted to the Python number it holds
        (``np.float64(0.5)`` shows as ``0.5``).
    """
    if isinstance(v, np.generic):
        v = v.item()
    return repr(v)


def as_scalar(v, name: str, *, nonnegative: bool = False) -> float:
    """Check a scalar argument: a finite real number (a bool is refused), optionally >= 0.

    Parameters
    ----------
    v : object
        The value given.
    name : str
        Name of the argument, for the error message.
    nonnegative : bool, default False
        Refuse negative values as well.

    Returns
    -------
    float
        ``float(v)``.

    Raises
    ------
    DataError
        ``v`` is not a real number, is a bool, is not finite, or is negative when
        ``nonnegative`` is set.
    """
    if isinstance(v, (bool, np.bool_)) or not isinstance(v, (numbers.Real, np.generic)):
        raise DataError(f"{name} must be a finite number, got {show_value(v)}")
    x = float(v)
    if not math.isfinite(x):
        raise DataError(f"{name} must be a finite number, got {show_value(v)}")
    if nonnegative and x < 0:
        raise DataError(f"{name} must be >= 0, got {show_value(v)}")
    return x


def check_pair(t, y) -> tuple[np.ndarray, np.ndarray]:
    """Check the times and values of one series: numeric, one-dimensional, same length.

    Parameters
    ----------
    t : array-like of shape (n,)
        Times since the switch (user's time unit). pandas NA becomes NaN.
    y : array-like of shape (n,)
        Tissue values (δ in ‰, or the user's scale). pandas NA becomes NaN.

    Returns
    -------
    t, y : ndarray of shape (n,)
        Float arrays (new arrays, or views of the inputs when these already are float
        arrays: callers that keep them copy first).

    Raises
    ------
    DataError
        Missing, non-numeric or multi-dimensional input, or lengths that differ.
    """
    ta = _as_1d(t, "t")
    ya = _as_1d(y, "y")
    if ta.shape != ya.shape:
        raise DataError(
            f"t and y must have the same length, got {ta.size} times and {ya.size} values"
        )
    return ta, ya


def check_ends(delta0, delta_eq) -> tuple[float, float]:
    """Check the start and equilibrium values: finite numbers that differ.

    Parameters
    ----------
    delta0 : float
        Tissue value at equilibrium with the old diet.
    delta_eq : float
        Tissue value at equilibrium with the new diet.

    Returns
    -------
    delta0, delta_eq : float
        The two values as floats.

    Raises
    ------
    DataError
        Either is not a finite number, or they are equal (to 1e-12 relative), since the
        reaction progress variable divides by ``delta0 - delta_eq``.
    """
    d0 = as_scalar(delta0, "delta0")
    deq = as_scalar(delta_eq, "delta_eq")
    if d0 == deq or abs(d0 - deq) <= 1e-12 * max(1.0, abs(d0), abs(deq)):
        raise DataError(
            f"delta0 ({d0!r}) and delta_eq ({deq!r}) must differ: the reaction progress "
            "variable divides by delta0 - delta_eq"
        )
    return d0, deq


def check_sd(sd, n: int) -> np.ndarray | None:
    """Check the standard deviations of the values of a series.

    Parameters
    ----------
    sd : float or array-like of shape (n,) or None
        1σ of each value (a number applies to every point); None means unknown.
    n : int
        Number of points of the series.

    Returns
    -------
    ndarray of shape (n,) or None
        The standard deviations as floats, or None when ``sd`` is None.

    Raises
    ------
    DataError
        ``sd`` is not a number or an array of ``n`` numbers, or a value is negative or not
        finite (the message gives the first bad position).
    """
    if sd is None:
        return None
    if np.ndim(sd) == 0:
        s = np.full(n, as_scalar(sd, "sd", nonnegative=True))
        return s
    s = _as_1d(sd, "sd")
    if s.size != n:
        raise DataError(f"sd must be a number or have one value per point ({n}), got {s.size}")
    bad = ~(np.isfinite(s) & (s >= 0))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise DataError(
            f"sd must be finite and >= 0 for every point, got {show_value(s[i])} at position "
            f"{i} ({int(bad.sum())} bad value(s))"
        )
    return s


# --------------------------------------------------------------------------------------------
# the transform
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ProgressVariable:
    r"""Reaction progress variable of a series, point by point (input order kept).

    Parameters
    ----------
    time : ndarray of shape (n,)
        Time since the switch, in the user's time unit.
    value : ndarray of shape (n,)
        Tissue value δ (‰ or the user's scale).
    F : ndarray of shape (n,)
        Reaction progress :math:`F = 1 - (\delta - \delta_{eq})/(\delta_0 - \delta_{eq})`
        (dimensionless; NaN where the value is not finite).
    one_minus_F : ndarray of shape (n,)
        :math:`1 - F` (NaN where the value is not finite).
    log_one_minus_F : ndarray of shape (n,)
        :math:`\ln(1 - F)`; NaN wherever the flag is not ``"ok"``.
    sd_log : ndarray of shape (n,)
        First-order propagated standard deviation of :math:`\ln(1 - F)` (see
        :func:`progress_variable`); NaN where the log is NaN or no ``sd`` was given.
    flag : ndarray of str, shape (n,)
        ``"ok"``; ``"F>=1"`` (at or past the new equilibrium, log undefined);
        ``"F<=0"`` (not yet moved, or beyond the start value); ``"nonfinite"`` (time or value
        NaN or infinite).
    delta0, delta_eq : float
        The start and equilibrium values used.
    """

    time: np.ndarray
    value: np.ndarray
    F: np.ndarray
    one_minus_F: np.ndarray
    log_one_minus_F: np.ndarray
    sd_log: np.ndarray
    flag: np.ndarray
    delta0: float
    delta_eq: float

    @property
    def ok(self) -> np.ndarray:
        """Boolean mask of the points whose flag is ``"ok"``."""
        return self.flag == _OK

    def __len__(self) -> int:
        return int(self.time.size)


def _transform(t, y, d0, deq, sd, sd0, sdeq) -> ProgressVariable:
    """Core of :func:`progress_variable` on checked inputs."""
    span = d0 - deq
    finite = np.isfinite(t) & np.isfinite(y)
    yfin = np.isfinite(y)
    u = np.full(y.shape, np.nan)
    u[yfin] = (y[yfin] - deq) / span
    past = finite & (u <= 0.0)
    before = finite & (u >= 1.0)
    ok = finite & ~past & ~before
    logu = np.full(y.shape, np.nan)
    logu[ok] = np.log(u[ok])
    flag = np.full(y.shape, _OK, dtype="<U9")
    flag[before] = _BEFORE
    flag[past] = _PAST
    flag[~finite] = _NONFINITE
    sd_log = np.full(y.shape, np.nan)
    if sd is not None:
        dy = y[ok] - deq
        # d ln(1-F)/dy = 1/(y - deq); d/d delta0 = -1/(delta0 - deq);
        # d/d delta_eq = -1/(y - deq) + 1/(delta0 - deq)
        var = (sd[ok] / dy) ** 2 + (sd0 / span) ** 2 + (sdeq * (1.0 / span - 1.0 / dy)) ** 2
        sd_log[ok] = np.sqrt(var)
    return ProgressVariable(
        time=t, value=y, F=1.0 - u, one_minus_F=u, log_one_minus_F=logu, sd_log=sd_log,
        flag=flag, delta0=d0, delta_eq=deq,
    )


def progress_variable(
    t, y, delta0, delta_eq, sd=None, sd_delta0=0.0, sd_delta_eq=0.0
) -> ProgressVariable:
    r"""Reaction progress variable :math:`F` and :math:`\ln(1 - F)` with flags and sd.

    .. math::

        1 - F = \frac{y - \delta_{eq}}{\delta_0 - \delta_{eq}}, \qquad
        \ln(1 - F) = \ln(y - \delta_{eq}) - \ln(\delta_0 - \delta_{eq})

    (Cerling et al. 2007). The standard deviation of :math:`\ln(1 - F)` is propagated to first
    order from independent errors of :math:`y`, :math:`\delta_0` and :math:`\delta_{eq}`, with
    the partial derivatives :math:`1/(y - \delta_{eq})`, :math:`-1/(\delta_0 - \delta_{eq})` and
    :math:`-1/(y - \delta_{eq}) + 1/(\delta_0 - \delta_{eq})`:

    .. math::

        s_{\ln}^2 = \left(\frac{s_y}{y - \delta_{eq}}\right)^2
                  + \left(\frac{s_{\delta_0}}{\delta_0 - \delta_{eq}}\right)^2
                  + s_{\delta_{eq}}^2 \left(\frac{1}{\delta_0 - \delta_{eq}}
                                          - \frac{1}{y - \delta_{eq}}\right)^2

    The errors of :math:`\delta_0` and :math:`\delta_{eq}` are shared by all points, so the
    propagated values of different points are correlated; ``sd_log`` gives each point's
    marginal sd only. First-order propagation fails near :math:`F = 1`, where the log diverges.

    This transform is a diagnostic and a source of starting values; the fitted model
    (:class:`isoturnover.TurnoverModel`) is the main estimator.

    Parameters
    ----------
    t : array-like of shape (n,)
        Time since the switch (user's time unit).
    y : array-like of shape (n,)
        Tissue values (δ in ‰, or the user's scale).
    delta0 : float
        Tissue value at equilibrium with the old diet (the start value).
    delta_eq : float
        Tissue value at equilibrium with the new diet. Must differ from ``delta0``.
    sd : float or array-like of shape (n,), optional
        Standard deviation (1σ) of each ``y``, finite and >= 0. ``None`` (default) means
        unknown: ``sd_log`` is then NaN. Pass ``sd=0`` to propagate the uncertainty of
        ``delta0`` and ``delta_eq`` alone.
    sd_delta0, sd_delta_eq : float, default 0.0
        Standard deviations (1σ) of ``delta0`` and ``delta_eq``.

    Returns
    -------
    ProgressVariable
        Arrays ``F``, ``one_minus_F``, ``log_one_minus_F``, ``sd_log`` and ``flag`` in input
        order. Points flagged ``"F>=1"``, ``"F<=0"`` or ``"nonfinite"`` keep their ``F`` (where
        finite) but have NaN log and sd; the flag says why.

    Raises
    ------
    DataError
        Mismatched lengths, non-numeric input, ``delta0 == delta_eq``, negative or non-finite
        sd.

    Examples
    --------
    >>> pv = progress_variable([0, 10, 20, 90], [-24.0, -18.0, -15.0, -11.9], -24.0, -12.0)
    >>> pv.F.round(3).tolist()
    [0.0, 0.5, 0.75, 1.008]
    >>> pv.flag.tolist()
    ['F<=0', 'ok', 'ok', 'F>=1']
    """
    ta, ya = check_pair(t, y)
    d0, deq = check_ends(delta0, delta_eq)
    s = check_sd(sd, ta.size)
    s0 = as_scalar(sd_delta0, "sd_delta0", nonnegative=True)
    seq = as_scalar(sd_delta_eq, "sd_delta_eq", nonnegative=True)
    return _transform(ta.copy(), ya.copy(), d0, deq, s, s0, seq)


# --------------------------------------------------------------------------------------------
# start and equilibrium values from the data
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class EndValues:
    """Start and equilibrium values estimated from a series (see :func:`end_values`).

    Parameters
    ----------
    delta0, delta_eq : float
        Estimated start value and equilibrium value.
    delta0_source, delta_eq_source : str
        How each was obtained, in words.
    n_delta0, n_delta_eq : int
        Number of points averaged for each.
    """

    delta0: float
    delta_eq: float
    delta0_source: str
    delta_eq_source: str
    n_delta0: int
    n_delta_eq: int


def _end_values(t, y, eq_fraction: float, min_eq_points: int) -> EndValues:
    fin = np.isfinite(t) & np.isfinite(y)
    if fin.sum() < 2:
        raise DataError(
            "cannot estimate delta0 and delta_eq: need at least 2 points with finite time and "
            f"value, got {int(fin.sum())}; give delta0 and delta_eq explicitly"
        )
    tf, yf = t[fin], y[fin]
    pre = tf <= 0
    if pre.any():
        d0 = float(np.mean(yf[pre]))
        n0 = int(pre.sum())
        src0 = f"mean of {n0} point(s) at t <= 0"
        used0 = pre
    else:
        first = tf == tf.min()
        d0 = float(np.mean(yf[first]))
        n0 = int(first.sum())
        src0 = (
            f"mean of the {n0} earliest point(s) (t = {tf.min():g}); no point at t <= 0, so "
            "this is biased toward delta_eq"
        )
        used0 = first
    cand = ~used0 & (tf > 0)
    nc = int(cand.sum())
    if nc == 0:
        raise DataError(
            "cannot estimate delta_eq: no point with finite value after the switch (t > 0) "
            "besides those used for delta0; give delta_eq explicitly"
        )
    tc, yc = tf[cand], yf[cand]
    order = np.argsort(tc, kind="stable")
    n_eq = min(nc, max(int(min_eq_points), math.ceil(eq_fraction * nc)))
    deq = float(np.mean(yc[order[-n_eq:]]))
    srceq = (
        f"mean of the last {n_eq} of {nc} point(s) after the switch (t >= {tc[order[-n_eq]]:g}); "
        "biased toward delta0 if the plateau was not reached"
    )
    return EndValues(d0, deq, src0, srceq, n0, n_eq)


def end_values(t, y, *, eq_fraction=0.2, min_eq_points=2) -> EndValues:
    """Deterministic estimates of the start value δ0 and the equilibrium value δ_eq.

    Rules (common practice):

    - δ0 is the mean of the finite points at ``t <= 0`` (samples taken before or at the
      switch); without such points, the mean of the earliest point(s), which is biased toward
      δ_eq because the tissue has already moved.
    - δ_eq is the mean of the last ``max(min_eq_points, ceil(eq_fraction * m))`` of the ``m``
      finite points at ``t > 0`` not used for δ0 (all of them if fewer). It is biased toward
      δ0 when the last samples have not reached the plateau; about half of these points then
      lie past the estimate and get the flag ``"F>=1"``.

    These are crude values for a look at the data and for starting values. The fitted model
    estimates both properly.

    Parameters
    ----------
    t, y : array-like of shape (n,)
        Times and values.
    eq_fraction : float, default 0.2
        Fraction (0 < eq_fraction <= 1) of the post-switch points averaged for δ_eq.
    min_eq_points : int, default 2
        Minimum number of points averaged for δ_eq (>= 1).

    Returns
    -------
    EndValues
        The two values (‰, or the values' scale), how each was obtained and how many points
        each averages.

    Raises
    ------
    DataError
        Fewer than 2 finite points, or no finite point at ``t > 0`` left for δ_eq.

    Examples
    --------
    >>> ev = end_values([-1, 0, 5, 20, 60, 90], [-24.1, -23.9, -20.0, -14.0, -12.1, -11.9])
    >>> round(ev.delta0, 6), round(ev.delta_eq, 6)
    (-24.0, -12.0)
    """
    ta, ya = check_pair(t, y)
    frac = as_scalar(eq_fraction, "eq_fraction")
    if not 0 < frac <= 1:
        raise DataError(f"eq_fraction must be in (0, 1], got {show_value(eq_fraction)}")
    if (
        isinstance(min_eq_points, (bool, np.bool_))
        or not isinstance(min_eq_points, numbers.Integral)
        or min_eq_points < 1
    ):
        raise DataError(f"min_eq_points must be an integer >= 1, got {show_value(min_eq_points)}")
    return _end_values(ta, ya, frac, int(min_eq_points))


# --------------------------------------------------------------------------------------------
# the table wrapper
# --------------------------------------------------------------------------------------------

_SERIES_KEYS = ("subject", "tissue", "isotope")


def reaction_progress(
    t,
    y=None,
    delta0=None,
    delta_eq=None,
    sd=None,
    *,
    sd_delta0=0.0,
    sd_delta_eq=0.0,
    eq_fraction=0.2,
    min_eq_points=2,
):
    r"""Reaction progress table of one series, estimating δ0 and δ_eq if not given.

    A table form of :func:`progress_variable` for notebooks and plots of :math:`\ln(1 - F)`
    against time (Cerling et al. 2007). A diagnostic and a quick look; the fitted model is the
    main estimator.

    Parameters
    ----------
    t : array-like of shape (n,) or DataFrame
        Times since the switch; or a samples frame of **one** series with columns ``time``,
        ``value`` and optionally ``sd`` (then ``y`` must be None). If the frame has
        ``subject``, ``tissue`` or ``isotope`` columns, each must hold a single value.
    y : array-like of shape (n,), optional
        Values (required unless ``t`` is a frame).
    delta0, delta_eq : float, optional
        Start and equilibrium values. Either one left as None is estimated by
        :func:`end_values` (rules documented there).
    sd : float or array-like of shape (n,), optional
        1σ of each value (default: the frame's ``sd`` column if present, else unknown).
    sd_delta0, sd_delta_eq : float, default 0.0
        1σ of ``delta0`` and ``delta_eq`` for the propagated ``sd_log``.
    eq_fraction : float, default 0.2
        Passed to :func:`end_values`: fraction of the post-switch points averaged for δ_eq.
    min_eq_points : int, default 2
        Passed to :func:`end_values`: minimum number of points averaged for δ_eq.

    Returns
    -------
    pandas.DataFrame
        Columns ``time``, ``value``, ``F``, ``one_minus_F``, ``log_one_minus_F``, ``sd_log``,
        ``flag``, one row per input point in input order (the frame's index is kept). The
        values used are in ``.attrs``: ``delta0``, ``delta_eq``, ``delta0_source``,
        ``delta_eq_source`` (``"given"`` or how it was estimated), ``sd_delta0``,
        ``sd_delta_eq``.

    Raises
    ------
    DataError
        As :func:`progress_variable`; a frame without ``time``/``value`` columns or with
        several series; estimated δ0 equal to estimated δ_eq.

    Examples
    --------
    Invented numbers:

    >>> tab = reaction_progress([0, 10, 20, 80, 90], [-24.0, -18.0, -15.0, -12.1, -11.9])
    >>> tab.attrs["delta_eq"]
    -12.0
    >>> tab["flag"].tolist()
    ['F<=0', 'ok', 'ok', 'ok', 'F>=1']
    """
    import pandas as pd

    index = None
    if isinstance(t, pd.DataFrame):
        frame = t
        if y is not None:
            raise DataError("y must be None when t is a DataFrame (values come from 'value')")
        missing = [c for c in ("time", "value") if c not in frame.columns]
        if missing:
            raise DataError(
                f"frame is missing column(s) {missing}; needs 'time' and 'value' "
                f"(has {list(frame.columns)})"
            )
        for key in _SERIES_KEYS:
            if key in frame.columns and frame[key].nunique(dropna=False) > 1:
                vals = list(pd.unique(frame[key]))[:5]
                raise DataError(
                    f"frame holds several series: column '{key}' has values {vals}; "
                    "pass one series at a time"
                )
        ta, ya = check_pair(frame["time"], frame["value"])
        if sd is None and "sd" in frame.columns:
            sd = frame["sd"]
        index = frame.index
    else:
        if y is None:
            raise DataError("y is required when t is not a DataFrame")
        ta, ya = check_pair(t, y)

    s = check_sd(sd, ta.size)
    s0 = as_scalar(sd_delta0, "sd_delta0", nonnegative=True)
    seq = as_scalar(sd_delta_eq, "sd_delta_eq", nonnegative=True)
    src0 = srceq = "given"
    if delta0 is None or delta_eq is None:
        ev = end_values(ta, ya, eq_fraction=eq_fraction, min_eq_points=min_eq_points)
        if delta0 is None:
            delta0, src0 = ev.delta0, ev.delta0_source
        if delta_eq is None:
            delta_eq, srceq = ev.delta_eq, ev.delta_eq_source
        d0f, deqf = float(delta0), float(delta_eq)
        if d0f == deqf:
            raise DataError(
                f"delta0 ({d0f!r}; {src0}) equals delta_eq ({deqf!r}; {srceq}): the series "
                "shows no change; give delta0 and delta_eq explicitly"
            )
    d0, deq = check_ends(delta0, delta_eq)
    pv = _transform(ta.copy(), ya.copy(), d0, deq, s, s0, seq)
    out = pd.DataFrame(
        {
            "time": pv.time,
            "value": pv.value,
            "F": pv.F,
            "one_minus_F": pv.one_minus_F,
            "log_one_minus_F": pv.log_one_minus_F,
            "sd_log": pv.sd_log,
            "flag": pv.flag.astype(object),
        },
        index=index,
    )
    out["flag"] = out["flag"].astype(str)
    out.attrs.update(
        delta0=d0,
        delta_eq=deq,
        delta0_source=src0,
        delta_eq_source=srceq,
        sd_delta0=s0,
        sd_delta_eq=seq,
    )
    return out

