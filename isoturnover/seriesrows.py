"""The series of a study as arrays, and the rows of the study's table.

:func:`series_data` splits a validated samples table into its series once, column-wise:
the whole table is put in a canonical order and its analytic replicates averaged in one
pass, and each series travels to its fit as a few arrays (:class:`SeriesData`), not as a
frame of its own. :func:`candidate_row` computes the estimate and interval columns of one
fitted candidate's row of :meth:`FitSet.table <isoturnover.FitSet.table>` once per level
and method, and keeps them on the fit's interval cache: the results table, the report and
the summaries made afterwards (in the main process, after parallel workers fitted the
series) read the same computation.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .conventions import check_level, check_method
from .errors import IsoturnoverError, IsoturnoverWarning
from .summary import table_records

__all__ = ["SERIES_ERRORS", "SeriesData", "series_data", "candidate_row", "population_inputs",
           "growth_for_series"]

#: Exceptions that make one series (or one candidate model of it) a failed row with its
#: reason: the library's own errors and numerical breakdowns. Anything else propagates.
SERIES_ERRORS = (IsoturnoverError, FloatingPointError, np.linalg.LinAlgError)


@dataclass
class SeriesData:
    """One series as arrays: what its fit needs from the samples and diets tables.

    ``t``, ``y``, ``sd`` and ``subject`` are the averaged points in time order (``sd`` None
    unless every point has one); ``n_rows``, ``tissue``, ``isotope`` and ``group`` describe
    the raw rows. ``error`` is why the series could not be prepared (its averaging failed).
    With a diets table: the series' ``diet`` history, or ``diet_status`` and ``diet_reason``
    why it has none, and ``per_diet`` (one separation per diet value adds parameters).

    Parameters
    ----------
    t, y : ndarray
        Times (in the table's time unit) and mean δ (‰) of the averaged points.
    sd : ndarray or None
        Their sd (‰), when every point has one.
    subject : ndarray of str
        The subject of each point.
    n_rows : int
        Rows of the samples table in the series.
    tissue, isotope : str
        The series' tissue and isotope.
    group : str or None
        The group of its rows (None: no group column, or several groups).
    error : str or None
        Why the series could not be prepared.
    diet : DietHistory or None
        Its diet history (with a diets table).
    diet_status, diet_reason : str
        Status code and reason when a diets table gives it no history ("" otherwise).
    per_diet : bool
        Whether one separation per diet value adds parameters to its model.
    segment_start, segment_end : ndarray or None
        Distances of each point's segment ends from the origin (a segment series: samples
        of a growing inert tissue, hair or whisker); None for a series of whole samples.
    growth_rate : float or None
        The tissue's growth rate from a ``growth_rate`` column of the samples (one value
        per series), else None.
    """

    t: np.ndarray = None
    y: np.ndarray = None
    sd: np.ndarray | None = None
    subject: np.ndarray = None
    n_rows: int = 0
    tissue: str = ""
    isotope: str = ""
    group: str | None = None
    error: str | None = None
    diet: object = None
    diet_status: str = ""
    diet_reason: str = ""
    per_diet: bool = False
    segment_start: np.ndarray | None = None
    segment_end: np.ndarray | None = None
    growth_rate: float | None = None

    @property
    def is_segments(self) -> bool:
        """Whether the series is a segment profile (its points carry segment ends)."""
        return self.segment_start is not None


#: Name of the helper column that carries a row's series number through the averaging.
_SERIES_CODE = "__isoturnover_series__"


def series_data(s, by, groups, average):
    """Every series of the validated samples table ``s`` as a :class:`SeriesData`.

    The rows are put in one canonical order (series, then subject, time, value, sd and
    replicate), so that averaging (floating-point sums) and everything after it do not
    depend on the order of the input rows, and averaged once for the whole table. Each
    replicate set lies within one series whenever the ``by`` columns are among the set's
    own key (subject, tissue, isotope, time, segment): the series number then survives the
    averaging as a constant column, and the result is that of averaging series by series.
    Otherwise (``by`` names another column that varies within a replicate set), or when the
    whole-table averaging raises, each series is averaged on its own.

    Parameters
    ----------
    s : DataFrame
        A samples table validated by :func:`~isoturnover.read_samples`; not changed.
    by : tuple of str
        The key columns of a series.
    groups : dict tuple -> ndarray of int
        Row positions of each series, in series order.
    average : callable
        :func:`~isoturnover.data.average_replicates` (given, so this layer reads no data
        module).

    Returns
    -------
    list of SeriesData
        One per series, in the order of ``groups``; a series whose averaging failed has
        ``error`` set ("series failed: ...").
    """
    code = np.empty(len(s), dtype=np.int64)
    for i, pos in enumerate(groups.values()):
        code[pos] = i
    order_cols = [c for c in ("subject", "time", "value", "sd", "replicate") if c in s.columns]
    srt = s.assign(**{_SERIES_CODE: code}).sort_values([_SERIES_CODE, *order_cols],
                                                        kind="stable")
    raw_code = srt[_SERIES_CODE].to_numpy()
    starts = np.searchsorted(raw_code, np.arange(len(groups) + 1))
    tissue = srt["tissue"].to_numpy()
    isotope = srt["isotope"].to_numpy()
    group = srt["group"].to_numpy() if "group" in srt.columns else None
    out = []
    for i in range(len(groups)):
        a, b = int(starts[i]), int(starts[i + 1])
        d = SeriesData(n_rows=b - a, tissue=str(tissue[a]), isotope=str(isotope[a]))
        if group is not None:
            g = pd.unique(np.asarray([str(v) for v in group[a:b] if not pd.isna(v)]))
            d.group = str(g[0]) if len(g) == 1 else None
        out.append(d)
    avg = None
    try:
        avg = average(srt)
    except SERIES_ERRORS:
        pass  # each series is averaged on its own below: the error becomes its reason
    if avg is not None and _SERIES_CODE in avg.columns:
        acode = avg[_SERIES_CODE].to_numpy()
        order = np.argsort(acode, kind="stable")  # series by series, each in avg's order
        bounds = np.searchsorted(acode[order], np.arange(len(groups) + 1))
        cols = _point_columns(avg)
        for i, d in enumerate(out):
            rows = order[bounds[i]:bounds[i + 1]]
            _set_points(d, {c: None if v is None else v[rows] for c, v in cols.items()})
        return out
    for i, d in enumerate(out):
        sub = srt.iloc[int(starts[i]):int(starts[i + 1])].drop(columns=_SERIES_CODE)
        try:
            one = average(sub)
        except SERIES_ERRORS as e:
            d.error = f"series failed: {e}"
            continue
        _set_points(d, _point_columns(one))
    return out


def _point_columns(avg):
    """time, value, sd (or None) and subject (as text) of an averaged table, as arrays."""
    cols = {"time": avg["time"].to_numpy(dtype=float),
            "value": avg["value"].to_numpy(dtype=float),
            "sd": avg["sd"].to_numpy(dtype=float) if "sd" in avg.columns else None,
            "subject": avg["subject"].astype(str).to_numpy()}
    for c in ("segment_start", "segment_end", "growth_rate"):
        if c in avg.columns:
            cols[c] = pd.to_numeric(avg[c], errors="coerce").to_numpy(dtype=float)
    return cols


def _set_points(d, cols):
    """Put one series' averaged points (``cols``, in the averaging's order) on ``d`` in
    time order (a stable sort: points of equal time keep the averaging's order; segments of
    one sample by their start). Segment ends on every point make a segment series; on some
    points only, the series fails with its reason (as does more than one growth rate)."""
    a = cols.get("segment_start")
    has_seg = a is not None and np.isfinite(a).any()
    order = (np.lexsort((a, cols["time"])) if has_seg
             else np.argsort(cols["time"], kind="stable"))
    d.t = cols["time"][order]
    d.y = cols["value"][order]
    sd = cols["sd"]
    d.sd = sd[order] if sd is not None and not np.isnan(sd[order]).any() else None
    d.subject = cols["subject"][order]
    if has_seg:
        a, b = a[order], cols["segment_end"][order]
        if not (np.isfinite(a).all() and np.isfinite(b).all()):
            d.error = ("series failed: some samples carry segment_start/segment_end and "
                       "others do not; a series is either a segment profile or whole samples "
                       "(split it by tissue)")
            return
        d.segment_start, d.segment_end = a, b
    g = cols.get("growth_rate")
    if g is not None and np.isfinite(g).any():
        vals = np.unique(g[np.isfinite(g)])
        if vals.size > 1 or not np.isfinite(g).all():
            d.error = (f"series failed: column 'growth_rate' must hold one value per series; "
                       f"got {', '.join(f'{v:g}' for v in vals[:5])}"
                       + (" and empty cells" if not np.isfinite(g).all() else ""))
            return
        d.growth_rate = float(vals[0])


def candidate_row(f, level, method) -> dict:
    """The estimate and interval columns of one fitted candidate's row of a study's table.

    The row is that of :meth:`FitSet.table <isoturnover.FitSet.table>`, computed once per
    ``level`` and ``method`` and kept on the fit (its interval cache), so every table,
    report and summary made from the fit reuses it; a new dict is returned each time.

    Parameters
    ----------
    f : TurnoverFit
        A fitted candidate.
    level : float
        Confidence level in (0, 1).
    method : str
        Interval method (see :meth:`~isoturnover.TurnoverFit.conf_int`).

    Returns
    -------
    dict
        Column → value: the level parameters (``delta0``/``delta_eq``, or the plateaus and
        separations; ``lag``, ``k_growth``) with ``_lower``, ``_upper``, ``_lower_status``,
        ``_upper_status``; per pool ``fraction_i, half_life_i, lower_i, upper_i,
        lower_status_i, upper_status_i`` (:math:`\\ln 2/k_i`, in the data's time unit);
        ``interval_method``; ``time_to_95`` with ``_lower``, ``_upper``, ``_lower_status``,
        ``_upper_status`` and ``_method``; with a growth model (``rate_kind``
        "catabolic") also per pool ``incorporation_half_life_i`` (:math:`\\ln 2/(k_{d,i} +
        k_g)`, :meth:`~isoturnover.TurnoverFit.incorporation_half_lives`) with
        ``incorporation_lower_i``, ``incorporation_upper_i`` and their statuses, and
        ``growth_share`` (the share of the isotopic change up to the last sample carried
        by the growth flux, :meth:`~isoturnover.TurnoverFit.growth_share`) with its bounds,
        statuses and ``growth_share_method``; ``interval_note`` ("" when every interval was
        computed, else which computation failed and why: its bounds are NaN with status
        ``"failed"``); rate_kind and time_unit.

    Notes
    -----
    An interval computation that raises one of :data:`SERIES_ERRORS` (a library error or
    a numerical breakdown) leaves its bounds NaN with status ``"failed"`` and its reason in
    ``interval_note``; the estimates stay. Any other exception propagates.
    """
    level, method = check_level(level), check_method(method)
    row = f.cached(("fitset_row", round(level, 12), method),
                   lambda: _interval_columns(f, level, method))
    return dict(row)


def _interval_columns(f, level, method) -> dict:
    """The columns of :func:`candidate_row`, computed (see there)."""
    vals = f.values
    kin = f.kinetics
    level_names = [nm for nm in kin.param_names
                   if nm in ("delta0", "delta_eq", "lag", "k_growth")
                   or nm.startswith(("discrimination", "epsilon", "plateau"))]
    row, notes = {}, []
    try:
        ci = {r["parameter"]: r for r in table_records(f.conf_int(level, method,
                                                             params=level_names))}
    except SERIES_ERRORS as e:
        notes.append(f"parameter intervals failed: {e}")
        ci = None
    for nm in level_names:
        row[nm] = vals[nm]
        for side in ("lower", "upper"):
            row[f"{nm}_{side}"] = np.nan if ci is None else ci[nm][side]
            row[f"{nm}_{side}_status"] = "failed" if ci is None else ci[nm][f"{side}_status"]
    try:
        hl = table_records(f.cached_frame("half_lives", level, method, copy=False))
    except SERIES_ERRORS as e:
        notes.append(f"half-life intervals failed: {e}")
        hl = None
    if hl is not None:
        for h in hl:
            i = int(h["pool"])
            row[f"fraction_{i}"] = h["fraction"]
            row[f"half_life_{i}"] = h["half_life"]
            row[f"lower_{i}"] = h["lower"]
            row[f"upper_{i}"] = h["upper"]
            row[f"lower_status_{i}"] = h["lower_status"]
            row[f"upper_status_{i}"] = h["upper_status"]
        row["interval_method"] = hl[0]["method"]
    else:
        # the estimates without intervals: t½ = ln 2 / k of each pool (or chain step)
        for i, nm in enumerate(kin.rate_names, start=1):
            k = float(vals[nm])
            row[f"fraction_{i}"] = (vals.get(f"f{i}", np.nan) if kin.structure == "parallel"
                                    else np.nan)
            row[f"half_life_{i}"] = np.log(2.0) / k if k > 0 else np.inf
            row[f"lower_{i}"] = row[f"upper_{i}"] = np.nan
            row[f"lower_status_{i}"] = row[f"upper_status_{i}"] = "failed"
        row["interval_method"] = method
    try:
        tt = table_records(f.cached_frame("time_to", 0.95, level, method,
                                                copy=False))[0]
    except SERIES_ERRORS as e:
        notes.append(f"time to 95 % failed: {e}")
        tt = None
    _put_interval(row, "time_to_95", tt, method)
    if kin.growth_kind is not None:
        try:
            inc = table_records(f.incorporation_half_lives(level, method))
        except SERIES_ERRORS as e:
            notes.append(f"incorporation half-life intervals failed: {e}")
            inc = [{"pool": i} for i in range(1, len(kin.rate_names) + 1)]
        for h in inc:
            i = int(h["pool"])
            row[f"incorporation_half_life_{i}"] = h.get("half_life", np.nan)
            for side in ("lower", "upper"):
                row[f"incorporation_{side}_{i}"] = h.get(side, np.nan)
                row[f"incorporation_{side}_status_{i}"] = h.get(f"{side}_status", "failed")
        row["incorporation_method"] = inc[0].get("method", method)
        try:
            share = table_records(f.growth_share(level, method))[0]
        except SERIES_ERRORS as e:
            notes.append(f"growth share failed: {e}")
            share = None
        _put_interval(row, "growth_share", share, method)
    row["interval_note"] = "; ".join(notes)
    row["rate_kind"] = f.rate_kind
    row["time_unit"] = f.time_unit
    return row


def _put_interval(row, name, rec, method):
    """``name``, ``name_lower``, ``name_upper``, their statuses and ``name_method`` from one
    interval-table record (None: the computation failed, bounds NaN with status failed)."""
    if rec is None:
        rec = {"estimate": np.nan, "lower": np.nan, "upper": np.nan,
               "lower_status": "failed", "upper_status": "failed", "method": method}
    row[name] = rec["estimate"]
    row[f"{name}_lower"] = rec["lower"]
    row[f"{name}_upper"] = rec["upper"]
    row[f"{name}_lower_status"] = rec["lower_status"]
    row[f"{name}_upper_status"] = rec["upper_status"]
    row[f"{name}_method"] = rec["method"]


def population_inputs(fitset, pool, level, method):
    """Per-series half-lives of one pool for :meth:`FitSet.population` (every series kept).

    Parameters
    ----------
    fitset : FitSet
        The fitted series.
    pool : int
        Pool number (1 the fastest).
    level : float
        Level of the per-series intervals.
    method : str or None
        Their interval method (None: the FitSet's).

    Returns
    -------
    dict
        ``names`` (series keys; a bare value for one key column), ``values``, ``lowers``,
        ``uppers``, ``lower_status``, ``upper_status`` and ``reasons`` ("" for a usable
        series, else why it has no half-life of that pool), one entry per series in order.
    """
    hl = fitset.half_lives(level, method)
    out = {k: [] for k in ("names", "values", "lowers", "uppers", "lower_status",
                           "upper_status", "reasons")}
    for key, r in fitset.items():
        out["names"].append(key if len(key) > 1 else key[0])
        sel = hl
        if len(sel):
            for col, v in zip(fitset.by, key):
                sel = sel[sel[col] == v]
            sel = sel[sel["pool"] == pool]
        row, why = None, ""
        if r.best is None:
            why = f"not fitted: {r.reason}"
        elif not len(sel):
            why = f"the chosen model ({r.chosen}) has no pool {pool}"
        else:
            row = sel.iloc[0]
        out["reasons"].append(why)
        for name, col, fill in (("values", "half_life", np.nan), ("lowers", "lower", np.nan),
                                ("uppers", "upper", np.nan),
                                ("lower_status", "lower_status", None),
                                ("upper_status", "upper_status", None)):
            out[name].append(fill if row is None else row[col])
    return out


def growth_for_series(masses, subject, curve):
    """Growth curve for a series: the subject's masses, or all subjects' for a destructive
    series.

    The curve's trust notes are issued again naming whose curve it is, and the masses'
    unit (``attrs["mass_unit"]``) is kept on the curve as ``mass_unit``.

    Parameters
    ----------
    masses : DataFrame
        A masses table (:func:`~isoturnover.read_masses`).
    subject : array-like of str
        The series' points' subjects, in time order.
    curve : str
        Growth curve (:func:`~isoturnover.fit_growth`).

    Returns
    -------
    tuple
        ``(GrowthFit, None)`` or ``(None, reason)``.
    """
    from .growthfit import fit_growth

    subj = pd.unique(subject)
    m = masses[masses["subject"].astype(str).isin(subj)]
    if len(m) == 0:
        return None, f"no masses for subject(s) {', '.join(subj[:5])}"
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            g = fit_growth(m["time"].to_numpy(dtype=float), m["mass"].to_numpy(dtype=float),
                           curve=curve)
        except SERIES_ERRORS as e:
            g, error = None, f"growth curve '{curve}' could not be fitted: {e}"
    # the curve's trust notes, naming whose curve it is (the series' tables do not show them)
    who = f"subject {subj[0]}" if len(subj) == 1 else f"subjects {', '.join(subj[:5])}"
    for w in caught:
        text = str(w.message)
        if issubclass(w.category, IsoturnoverWarning):
            text = f"growth curve of {who}: {text}"
        warnings.warn(text, w.category, stacklevel=2)
    if g is not None:
        g.mass_unit = masses.attrs.get("mass_unit")  # a label for figures and tables
    return (None, error) if g is None else (g, None)
