"""Inputs of a turnover fit: arrays and sample frames to checked series.

:func:`prepare_data` turns what :meth:`~isoturnover.TurnoverModel.fit` is given (arrays,
or a samples frame of one series) into times, values and sds, checked and named in every
error; :func:`as_1d` checks one array argument; :func:`frame_series` reads one series out of
a samples frame; :func:`check_names` checks ``fixed=``/``init=`` mappings;
:func:`check_growth_coverage` checks that a growth curve covers the sampling times.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from .conventions import check_named_values
from .errors import DataError, DataWarning

__all__ = ["prepare_data", "as_1d", "frame_series", "check_names", "check_growth_coverage"]


def check_growth_coverage(kin, t):
    """Refuse growth curves used far outside the masses they were fitted to."""
    g = kin.growth
    gt = getattr(g, "t", None)
    if gt is None or len(gt) == 0:
        return
    lo, hi = float(np.min(gt)), float(np.max(gt))
    span = max(hi - lo, 1e-12)
    t_lo = min(float(np.min(t)), float(kin.switch_times[0]))
    t_hi = float(np.max(t))
    limit = 0.5 * span  # extrapolate at most half the masses' span (stated limit)
    if t_lo < lo - limit or t_hi > hi + limit:
        raise DataError(
            f"the growth curve was fitted to masses from t = {lo:g} to {hi:g}, but the isotope "
            f"series runs from {t_lo:g} to {t_hi:g}: extrapolating more than half the masses' "
            "span is refused; weigh the animals over the sampling period"
        )


def check_names(d, kin, what):
    """``fixed=``/``init=`` values of a turnover model, checked by
    :func:`~isoturnover.conventions.check_named_values` (names of ``kin``, finite numbers,
    rates positive, fractions in [0, 1], lag ≥ 0).

    Parameters
    ----------
    d : dict or None
        Parameter name -> value.
    kin : TurnoverKinetics
        The model whose parameter names are allowed.
    what : str
        The argument's name for messages.

    Returns
    -------
    dict
        A new dict of floats.
    """
    if d is None:
        return {}
    if not isinstance(d, dict):
        raise DataError(f"'{what}' must be a dict of parameter name -> value; got "
                        f"{type(d).__name__}")
    rules = {k: (lambda x: x > 0, "is a rate and must be positive") for k in kin.rate_names}
    rules.update({f: (lambda x: 0 <= x <= 1, "is a pool fraction in [0, 1]")
                  for f in kin.fraction_names})
    rules["lag"] = (lambda x: x >= 0, "must be >= 0")
    return check_named_values(what, d, kin.param_names, owner="this model", rules=rules)


def as_1d(name, a, n=None):
    """A one-dimensional float array of finite values, checked and copied.

    Parameters
    ----------
    name : str
        The argument in messages (``"y"``).
    a : array-like or scalar
        The values. A scalar is repeated ``n`` times when ``n`` is given.
    n : int, optional
        The length required (that of ``t``).

    Returns
    -------
    numpy.ndarray of float, shape (n,)
        A new array; ``a`` is not changed.

    Raises
    ------
    DataError
        Naming ``name``: values that are not numbers, complex numbers (the imaginary part
        would be lost), time spans or dates (they need a unit or a reference date), a
        masked array with masked values (a mask cannot be honoured value by value here),
        more than one dimension, a length other than ``n``, or a value that is not finite.
    """
    if type(a) is np.ndarray and a.dtype == np.float64 and a.ndim == 1 and (
            n is None or a.size == n):
        # the common case (a plain float vector of the right length): only finiteness left
        if np.isfinite(a).all():
            return a.copy()
    if isinstance(a, np.ma.MaskedArray) and np.ma.count_masked(a):
        k = int(np.ma.count_masked(a))
        raise DataError(
            f"'{name}' is a masked array with {k} masked value{'s' if k > 1 else ''}; masked "
            "values cannot be left out here: drop them (a.compressed()) or fill them"
        )
    try:
        raw = np.asarray(np.ma.getdata(a))
    except (TypeError, ValueError):
        raise DataError(f"'{name}' must be numeric; got {a!r:.60}") from None
    kind = raw.dtype.kind
    if kind == "c" or (kind == "O" and any(isinstance(v, complex) for v in raw.ravel())):
        raise DataError(
            f"'{name}' holds complex numbers; give real numbers (np.real(...) when the "
            "imaginary parts are only rounding noise)"
        )
    if kind == "m":
        raise DataError(f"'{name}' holds time spans (timedelta64); give plain numbers in "
                        "the fit's time unit")
    if kind == "M":
        raise DataError(
            f"'{name}' holds dates (datetime64); give times since the diet switch as numbers "
            "(read_samples(..., switch_date=...) turns dates into times)"
        )
    try:
        arr = np.asarray(raw, dtype=float)
    except (TypeError, ValueError):
        raise DataError(f"'{name}' must be numeric; got {a!r:.60}") from None
    if arr.ndim == 0 and n is not None:
        arr = np.full(n, float(arr))
    arr = np.atleast_1d(arr)
    if arr.ndim != 1:
        raise DataError(f"'{name}' must be one-dimensional; got shape {arr.shape}")
    if n is not None and arr.size != n:
        raise DataError(f"'{name}' has {arr.size} values but 't' has {n}; lengths must match")
    bad = ~np.isfinite(arr)
    if np.any(bad):
        i = int(np.argmax(bad))
        raise DataError(
            f"'{name}' must be finite; got {arr[i]!r} at position {i} "
            f"({int(bad.sum())} non-finite value(s))"
        )
    return arr.copy()


def prepare_data(t_or_frame, y, sigma, time_unit, *, warn_repeats=True):
    """Arrays (t, y, sigma) from arrays or a samples frame; never mutates the input.

    Parameters
    ----------
    t_or_frame : array-like of shape (n,) or pandas.DataFrame
        Times since the switch (numbers in ``time_unit``, or numpy/pandas time spans, which
        are converted to ``time_unit``), or a samples frame of one series or one
        destructive-sampling design (its ``sd`` must be given on every row or on none).
    y : array-like of shape (n,) or None
        δ values (‰); None with a frame.
    sigma : array-like of shape (n,), scalar or None
        Analytic 1σ of each value (> 0); None with a frame.
    time_unit : str or None
        Label of the time unit (default ``"d"``, or the frame's ``attrs``); for time spans
        one of ``"d"``, ``"h"``, ``"w"``, ``"min"`` (or ``"days"``, ``"hours"``...).
    warn_repeats : bool, default True
        Warn when the times of arrays repeat (see below); False for data already checked
        (a fit rebuilt from its record).

    Returns
    -------
    dict
        ``t``, ``y``, ``sigma`` (None when not given) sorted by time, ``time_unit``,
        ``info`` (where the data came from), ``order`` (the sorting permutation).

    Raises
    ------
    DataError
        For arguments that cannot be used, naming them (see :func:`as_1d`); time spans with
        a ``time_unit`` that is not a unit of time; a frame whose ``sd`` is blank on some
        rows but not all (naming the rows: a fit cannot weight some points and not
        others); ``sigma`` ≤ 0; fewer than 2 points.

    Warns
    -----
    DataWarning
        Masked values of numpy masked arrays (``t``, ``y``, ``sigma``) are left out, with
        their number and positions. Repeated times in arrays are fitted as independent
        points -- right for different animals sampled at one time (a destructive design),
        not for analytic replicates of one sample -- and named in a warning: arrays carry
        no subject to tell the two apart (a samples frame does, and averages replicates).
    """
    import datetime

    from .tables import missing_cells

    order = None  # the time order, once computed
    info = {"source": "arrays", "n_replicates": None, "design": "series", "subjects": None,
            "tissue": None, "isotope": None}
    if isinstance(t_or_frame, pd.DataFrame):
        if y is not None or sigma is not None:
            raise DataError("with a samples frame, do not pass 'y' or 'sigma' (taken from "
                             "the frame's 'value' and 'sd' columns)")
        if "sd" in t_or_frame.columns and len(t_or_frame):
            blank = missing_cells(t_or_frame["sd"])
            if blank.any() and not blank.all():
                pos = np.flatnonzero(blank)
                src = (t_or_frame.attrs or {}).get("source")
                where = (f"the samples frame (read from {src})"
                         if src and src != "<frame>" else "the samples frame")
                labels = ", ".join(str(v) for v in t_or_frame.index[pos[:10]])
                raise DataError(
                    f"{where}: column 'sd' is blank on {pos.size} of {blank.size} rows (index "
                    f"{labels}{', ...' if pos.size > 10 else ''}) while the others have an "
                    "sd; a fit cannot weight some points and not others: give an sd for "
                    "every row, or drop the 'sd' column for an unweighted fit"
                )
        fs = frame_series(t_or_frame)
        t, yv, sd = fs.pop("t"), fs.pop("y"), fs.pop("sd")
        info.update(fs)
        info["source"] = "frame"
        if time_unit is None:
            time_unit = t_or_frame.attrs.get("time_unit", "d")
    else:
        if y is None:
            raise DataError("'y' is required when 't' is an array")
        given = {"t": t_or_frame, "y": y, "sigma": sigma}
        # masked arrays: the union of their masks is left out of every argument
        n_given = np.size(np.ma.getdata(t_or_frame))
        masks = {k: np.ma.getmaskarray(v) for k, v in given.items()
                 if isinstance(v, np.ma.MaskedArray) and np.ma.count_masked(v)
                 and np.ndim(v) == 1 and np.size(v) == n_given}
        keep_pos = np.arange(n_given)
        if masks:
            drop = np.zeros(n_given, dtype=bool)
            for m in masks.values():
                drop |= m
            keep_pos = np.flatnonzero(~drop)
            for k in masks:
                given[k] = np.ma.getdata(given[k])[keep_pos]
            for k, v in given.items():   # unmasked arrays of the same length lose them too
                if k not in masks and v is not None and np.ndim(v) == 1 \
                        and np.size(v) == n_given:
                    given[k] = np.asarray(np.ma.getdata(v))[keep_pos]
            dropped = np.flatnonzero(drop)
            shown = ", ".join(str(int(i)) for i in dropped[:10])
            warnings.warn(
                f"dropped {dropped.size} masked point(s) of {n_given} (positions {shown}"
                f"{', ...' if dropped.size > 10 else ''}; masked in "
                f"{', '.join(repr(k) for k in masks)}); the fit uses the other "
                f"{n_given - dropped.size}",
                DataWarning, stacklevel=3,
            )
        traw = given["t"]
        try:
            tarr = np.asarray(np.ma.getdata(traw))
        except (TypeError, ValueError):
            tarr = None                       # as_1d names the problem
        if tarr is not None:
            if tarr.dtype.kind == "O" and tarr.ndim == 1 and tarr.size and all(
                    isinstance(v, (datetime.timedelta, np.timedelta64)) for v in tarr):
                tarr = pd.to_timedelta(tarr).to_numpy()
            if tarr.dtype.kind == "m":
                seconds = {"d": 86400.0, "day": 86400.0, "days": 86400.0,
                           "h": 3600.0, "hour": 3600.0, "hours": 3600.0,
                           "w": 604800.0, "week": 604800.0, "weeks": 604800.0,
                           "min": 60.0, "minute": 60.0, "minutes": 60.0}
                unit = "d" if time_unit is None else time_unit
                if not isinstance(unit, str) or unit.strip() not in seconds:
                    raise DataError(
                        f"'t' holds time spans (timedelta); time_unit {unit!r} is not a unit "
                        "of time this conversion knows: use 'd', 'h', 'w' or 'min' (or "
                        "give 't' as plain numbers)"
                    )
                # the spans in seconds over the length of one unit in seconds
                traw = (tarr / np.timedelta64(1, "s")) / seconds[unit.strip()]
        t = as_1d("t", traw)
        yv = as_1d("y", given["y"], t.size)
        sd = None if given["sigma"] is None else as_1d("sigma", given["sigma"], t.size)
        # repeated times (neighbours in time order first: np.unique only when some repeat)
        order = np.argsort(t, kind="stable")
        ts = t[order]
        if warn_repeats and t.size > 1 and bool((ts[1:] == ts[:-1]).any()):
            vals, inverse, counts = np.unique(t, return_inverse=True, return_counts=True)
            rep = np.flatnonzero(counts > 1)
            if rep.size:
                groups = [keep_pos[np.flatnonzero(inverse == j)] for j in rep]
                listing = "; ".join(
                    f"t = {vals[j]:g} at positions {', '.join(str(int(p)) for p in g)}"
                    for j, g in zip(rep[:5], groups[:5])) + ("; ..." if rep.size > 5 else "")
                n_pts = int(counts[rep].sum())
                cols = [t, yv] + ([] if sd is None else [sd])
                n_dup = t.size - np.unique(np.column_stack(cols), axis=0).shape[0]
                dup = (f"; {n_dup} exact duplicate{'s' if n_dup > 1 else ''} of another "
                       "point (same t, y" + ("" if sd is None else " and sigma") + ")"
                       if n_dup else "")
                warnings.warn(
                    f"'t' repeats {rep.size} time{'s' if rep.size > 1 else ''} ({listing}): "
                    f"these {n_pts} points are fitted as {n_pts} independent points{dup}. "
                    "That is right for different animals sampled at one time (a destructive "
                    "design), not for analytic replicates of one sample, which count as one "
                    "point: average those first (iso.average_replicates), or fit the "
                    "samples frame, which averages the replicates of each animal",
                    DataWarning, stacklevel=3,
                )
    if sd is not None and np.any(sd <= 0):
        i = int(np.argmax(sd <= 0))
        raise DataError(f"'sigma' must be > 0; got {sd[i]!r} at position {i}")
    if t.size < 2:
        raise DataError(f"at least 2 time points are needed; got {t.size}")
    if order is None:
        order = np.argsort(t, kind="stable")
    return {"t": t[order], "y": yv[order], "sigma": None if sd is None else sd[order],
            "time_unit": time_unit or "d", "info": info, "order": order}


def frame_series(frame):
    """(t, y, sd) and a description from a samples frame of one series or one
    destructive-sampling design (several subjects, one sampling time each)."""
    from .data import average_replicates, read_samples

    s = read_samples(frame, time_unit=(frame.attrs or {}).get("time_unit", "d"))
    for col in ("tissue", "isotope"):
        vals = sorted(s[col].astype(str).unique())
        if len(vals) > 1:
            raise DataError(
                f"the samples frame holds several {col}s ({', '.join(vals)}); fit one series "
                "at a time (select rows) or use iso.fit_each"
            )
    order_cols = [c for c in ("subject", "time", "value", "sd", "replicate") if c in s.columns]
    s = s.sort_values(order_cols, kind="stable")  # results independent of the row order
    avg = average_replicates(s)
    subjects = sorted(avg["subject"].astype(str).unique())
    design = "series"
    if len(subjects) > 1:
        per = avg.groupby(avg["subject"].astype(str))["time"].nunique()
        if int(per.max()) > 1:
            many = ", ".join(per[per > 1].index[:5])
            raise DataError(
                f"the samples frame holds {len(subjects)} subjects and some were sampled at "
                f"several times ({many}); fit each animal (iso.fit_each) or select one. Several "
                "subjects are fitted together only in a destructive design (one sampling time "
                "per animal)"
            )
        design = "destructive"
    avg = avg.sort_values("time", kind="stable")
    sd = None
    if "sd" in avg.columns and avg["sd"].notna().all():
        sd = avg["sd"].to_numpy(dtype=float)
    n_rep = avg["n_replicates"].to_numpy() if "n_replicates" in avg.columns else None
    return {
        "t": avg["time"].to_numpy(dtype=float), "y": avg["value"].to_numpy(dtype=float),
        "sd": sd, "design": design, "subjects": subjects,
        "tissue": str(s["tissue"].iloc[0]), "isotope": str(s["isotope"].iloc[0]),
        "n_rows": int(len(s)),
        "n_replicates": None if n_rep is None else [int(x) for x in n_rep],
    }
