"""One series of a study: its candidate fits and the one chosen.

The per-series half of :func:`~isoturnover.fit_each`: the candidate models
(:func:`candidates`), the growth rates and diet histories attached to every series before
any fit (:func:`attach_growth_rates`, :func:`attach_diets`), the fit of one series with all
its candidates and the choice among them (:func:`fit_series`, :func:`fit_one`, in a worker
:func:`fit_one_in_worker`), and what a parallel run computes ahead in the worker
(:func:`warm_series`). :class:`SeriesResult` holds the outcome.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import special

from .diagnostics import after_switch_reason, drift_reason
from .diet import diet_for_series
from .engine import Coordinates, check_names
from .errors import DataError, IsoturnoverWarning
from .model import TurnoverModel
from .segments import formation_intervals, growth_schedule
from .selection import compare
from .seriesrows import SERIES_ERRORS, candidate_row, growth_for_series

__all__ = ["SeriesResult", "STATUS", "SERIES_KEYS", "PER_DIET_LABEL", "candidates",
           "check_formation_lag", "attach_growth_rates", "attach_diets", "fit_one",
           "fit_one_in_worker", "warm_series", "fit_series"]

#: Status of a series (:attr:`SeriesResult.status`) and of a row of
#: :meth:`~isoturnover.groups.FitSet.table`: ``"not_eligible"`` marks a fitted candidate
#: whose criterion is undefined (AICc with n − k − 1 ≤ 0), which takes no part in the
#: choice; a series none of whose candidates is eligible is ``"too_few_points"`` (or
#: ``"failed"``), with the reasons.
STATUS = ("ok", "failed", "too_few_points", "no_change", "no_diet", "not_eligible")

#: The columns that define a series by default.
SERIES_KEYS = ("subject", "tissue", "isotope")


@dataclass
class SeriesResult:
    """The candidate fits of one series and the one chosen.

    Parameters
    ----------
    key : tuple
        Values of the ``by`` columns.
    fits : dict label -> TurnoverFit or None
        Every candidate model by its label (``"1 pool"``, ``"2 pools"``, ``"chain"``);
        None for a candidate that could not be fitted.
    reasons : dict label -> str
        Why a candidate has no fit, or why its fit is not eligible for the choice (its
        criterion undefined, :func:`~isoturnover.selection.not_eligible_reason`); "" for
        an eligible fit.
    status : str
        ``"ok"`` when a candidate was chosen, else the reason's code (one of
        :data:`STATUS`).
    reason : str
        Why the series was not fitted ("" when it was).
    chosen : str or None
        Label of the chosen candidate.
    comparison : DataFrame or None
        :func:`~isoturnover.compare` of the fitted candidates.
    nobs : int
        Number of time points of the series after averaging analytic replicates.
    group : str or None
        The ``group`` of the series' rows in the samples table (None when the table has no
        group column, or the rows name several groups).
    record : {"points", "segments"}
        What its samples record: the tissue at the sampling time, or segments of a growing
        inert tissue (fitted with ``record="segments"``, :mod:`isoturnover.segments`).
    """

    key: tuple
    fits: dict = field(default_factory=dict)
    reasons: dict = field(default_factory=dict)
    status: str = "ok"
    reason: str = ""
    chosen: str | None = None
    comparison: pd.DataFrame | None = None
    nobs: int = 0
    group: str | None = None
    record: str = "points"

    @property
    def best(self):
        """The chosen fit.

        Returns
        -------
        TurnoverFit or None
            The fit of the :attr:`chosen` candidate; None when nothing could be fitted.
        """
        return None if self.chosen is None else self.fits[self.chosen]

#: Label suffix of a candidate's variant with one separation per diet value.
PER_DIET_LABEL = ", separation per diet"


def candidates(pools, structures, per_diet, **options):
    """(label, structure, pools, per_diet, optional) of every candidate; ``per_diet="auto"``
    adds after each its optional variant with one separation per diet value. Each model's
    options are checked here, once (a DataError before any series, not a failed row each).

    Parameters
    ----------
    pools : sequence of int
        Numbers of parallel pools to try.
    structures : sequence of {"parallel", "chain"}
        Model structures to try.
    per_diet : bool or "auto"
        One separation per diet value: never, always, or as an optional variant.
    **options
        Model options (``lag``, ``separation``, ``initial``) checked once here.

    Returns
    -------
    list of tuple
        ``(label, structure, pools, per_diet, optional)`` of every candidate.
    """
    auto = isinstance(per_diet, str) and per_diet == "auto"
    if not (auto or isinstance(per_diet, (bool, np.bool_))):
        raise DataError(f"'per_diet_separation' must be True, False or 'auto'; got "
                        f"{per_diet!r} ({type(per_diet).__name__})")
    out = []
    for s in structures:
        if s not in ("parallel", "chain"):
            raise DataError(f"'structures' entries must be 'parallel' or 'chain'; got {s!r}")
        for lab, p in ([(f"{p} pool{'s' if p > 1 else ''}", p) for p in pools]
                       if s == "parallel" else [("chain", 2)]):
            _ = TurnoverModel(p, structure=s, **options).kinetics  # its argument checks
            out += ([(lab, s, p, False, False), (lab + PER_DIET_LABEL, s, p, True, True)]
                    if auto else [(lab, s, p, bool(per_diet), False)])
    return out


def _per_diet_applies(diet, initial, separation):
    """Whether one separation per diet value adds parameters to this diet history's model:
    two or more distinct known values among the diets it uses. Never without diets."""
    try:
        n = [TurnoverModel(1, diet=diet, initial=initial, separation=separation,
                           per_diet_separation=v).kinetics.n_level_params for v in (False, True)]
    except SERIES_ERRORS:
        return False
    return diet is not None and n[1] > n[0]

def check_formation_lag(lag):
    """``formation_lag`` as a float ≥ 0, else a DataError naming it.

    Parameters
    ----------
    lag : float
        The formation lag (time unit), ``>= 0``.

    Returns
    -------
    float
    """
    try:
        v = float(lag)
    except (TypeError, ValueError):
        v = float("nan")
    if not np.isfinite(v) or v < 0 or isinstance(lag, bool):
        raise DataError(f"'formation_lag' must be one number >= 0 (time units); got {lag!r}")
    return v


def attach_growth_rates(data, growth_rate):
    """The growth rate of every segment series (its ``growth_rate`` column, else the
    argument's entry for its tissue, else the argument's one value), checked before any
    fit; a DataError names the tissues that have segments and no growth rate.

    Parameters
    ----------
    data : list
        The series' arrays (:func:`~isoturnover.seriesrows.series_data`), changed in place
        (``growth_rate``).
    growth_rate : float, mapping or table, optional
        One rate, a rate per tissue, or a (time, rate) table (length per time unit).

    Raises
    ------
    DataError
        A bad rate, or segment series with no rate (naming the tissues).
    """
    per_tissue = isinstance(growth_rate, Mapping) and set(growth_rate) != {"time", "rate"}
    if per_tissue:
        for tissue, v in growth_rate.items():
            growth_schedule(v, f"growth_rate[{tissue!r}]")
    elif growth_rate is not None:
        growth_schedule(growth_rate)
    missing = []
    for d in data:
        if not d.is_segments or d.error is not None:
            continue
        if d.growth_rate is not None:
            growth_schedule(d.growth_rate, f"growth_rate column (tissue {d.tissue!r})")
            continue
        if per_tissue:
            d.growth_rate = growth_rate.get(d.tissue)
        else:
            d.growth_rate = growth_rate
        if d.growth_rate is None and d.tissue not in missing:
            missing.append(d.tissue)
    if missing:
        names = ", ".join(repr(t) for t in missing)
        raise DataError(
            f"samples of tissue {names} carry segment_start/segment_end (segments of a "
            f"growing tissue) but 'growth_rate' gives no growth rate for it: give one, in "
            f"length per time unit (growth_rate={{{missing[0]!r}: RATE}}, or one number for "
            "every tissue, or a 'growth_rate' column in the samples; on the command line "
            f"--growth-rate {missing[0]}=RATE)")


def attach_diets(data, groups, by, diets, initial, separation):
    """The diet history of every series (by subject, else by group, and isotope), built
    once for each distinct match, with whether a separation per diet value applies.

    Parameters
    ----------
    data : list
        The series' arrays, changed in place (``diet``, ``per_diet``, diet status).
    groups : dict
        Key → row positions of every series.
    by : tuple of str
        The columns that define a series.
    diets : DataFrame
        A checked diets table (:func:`~isoturnover.read_diets`).
    initial, separation : str
        Model options, for whether a separation per diet value applies.
    """
    subject_col = "subject" in diets.columns
    memo, applies = {}, {}
    for d, key in zip(data, groups):
        if d.error is not None:
            continue
        key_map = dict(zip(by, key))
        mk = (key_map.get("subject") if subject_col else None, d.group, d.isotope)
        if mk not in memo:
            try:
                memo[mk] = diet_for_series(diets, key_map.get("subject"), d.group, d.isotope)
            except SERIES_ERRORS as e:
                memo[mk] = (None, f"diet history could not be built: {e}", "failed")
        diet, why, *code = memo[mk]
        if diet is None:
            d.diet_status = code[0] if code else "no_diet"
            d.diet_reason = why
            continue
        d.diet = diet
        if id(diet) not in applies:
            applies[id(diet)] = _per_diet_applies(diet, initial, separation)
        d.per_diet = applies[id(diet)]


def fit_one(data, key, key_map, cands, options, warm=None):
    """One series: its SeriesResult, with a library error anywhere in it a failed row.

    ``warm=(level, method)`` (parallel runs): everything the tables and the report will ask
    of this series is computed here, in the worker that fitted it — every candidate's row of
    :meth:`FitSet.table` (the chosen one with ``method``'s intervals, the others with
    asymptotic ones), the chosen fit's :meth:`~isoturnover.TurnoverFit.table` and summary —
    and travels back cached on the fits, so the main process only assembles them.

    Parameters
    ----------
    data : object
        The series' arrays.
    key : tuple
        Its key (values of the ``by`` columns).
    key_map : dict
        Column → value of the key.
    cands : list
        The candidates (:func:`candidates`).
    options : dict
        Keyword arguments of :func:`fit_series`.
    warm : tuple (level, method), optional
        Compute ahead what the outputs show (:func:`warm_series`).

    Returns
    -------
    SeriesResult
    """
    if data.error is not None:
        return _all_failed(SeriesResult(key=key, nobs=0, group=data.group), cands,
                           "failed", data.error)
    try:
        res = fit_series(data, key, key_map, cands, **options)
    except SERIES_ERRORS as e:
        return _all_failed(SeriesResult(key=key, nobs=0, group=data.group), cands,
                           "failed", f"series failed: {e}")
    if warm is not None and res.best is not None:
        warm_series(res, *warm)
    return res


def warm_series(res, level, method):
    """Compute and cache on the fits of one series what the tables and the report show.

    Every fitted candidate's row of :meth:`FitSet.table` (``method``'s intervals for the
    chosen candidate, asymptotic ones for the others), and the chosen fit's
    :meth:`~isoturnover.TurnoverFit.table` and :meth:`~isoturnover.TurnoverFit.summary`
    at ``level`` and ``method``. A computation that raises one of :data:`SERIES_ERRORS` is
    left for the caller, which meets the same error where it asks.

    Parameters
    ----------
    res : SeriesResult
        A series with its fits.
    level : float
        Confidence level in (0, 1).
    method : str
        Interval method of the chosen fit.
    """
    for label, f in res.fits.items():
        if f is not None:
            candidate_row(f, level, method if label == res.chosen else "asymptotic")
    if res.best is not None:
        for make in (res.best.table, res.best.summary):
            try:
                make(level, method)
            except SERIES_ERRORS:
                pass  # the main process meets the same error where it asks


def fit_one_in_worker(data, key, key_map, cands, options, warm=None):
    """:func:`fit_one` in a worker process, with the warnings it issued as (message,
    category) pairs: a worker knows nothing of the caller's warning filters, so they are
    issued again in the main process.

    Parameters
    ----------
    data, key, key_map, cands, options, warm
        As for :func:`fit_one`.

    Returns
    -------
    tuple (SeriesResult, list of (str, type))
        The result and the warnings issued.
    """
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("default")
        res = fit_one(data, key, key_map, cands, options, warm=warm)
    return res, [(str(w.message), w.category) for w in caught]

def fit_series(data, key, key_map, cands, *, masses, criterion, lag, separation,
                initial, fixed, absolute_sigma, loss, growth_curve, time_unit, scale="delta",
                segment_origin="base", formation_lag=0.0, length_unit="mm"):
    """Fit every candidate model to one series and choose one by the criterion.

    Series that cannot be fitted (no sample after the switch, no change, a failed diet or
    growth curve, several subjects sampled repeatedly) are returned with a status and a
    reason; candidates with too few points or undefined criteria are listed, not chosen;
    a fit whose slowest rate runs to 0 (:func:`~isoturnover.diagnostics.drift_reason`) is
    compared but never chosen.

    Parameters
    ----------
    data : object
        The series' arrays (times, values, sd, diet, segments).
    key : tuple
        Its key.
    key_map : dict
        Column → value of the key.
    cands : list
        The candidates (:func:`candidates`).
    **options
        ``masses``, ``criterion``, ``lag``, ``separation``, ``initial``, ``fixed``,
        ``absolute_sigma``, ``loss``, ``growth_curve``, ``time_unit``, ``scale``,
        ``segment_origin``, ``formation_lag``, ``length_unit``: as for
        :func:`~isoturnover.fit_each`.

    Returns
    -------
    SeriesResult
    """
    res = SeriesResult(key=key, group=data.group)
    t, y, sd = data.t, data.y, data.sd
    n = len(t)
    res.nobs = n
    # a segment profile: its model averages over each segment's formation interval, and
    # its points lie at the formation midpoints (t stays the sampling time of each segment)
    seg, t_formed = {}, t
    if data.is_segments:
        res.record = "segments"
        seg = {"record": "segments", "growth_rate": data.growth_rate,
               "formation_lag": formation_lag, "origin": segment_origin,
               "length_unit": length_unit,
               "tissue_length": (float(np.max(data.segment_end))
                                 if segment_origin == "tip" else None)}
        try:
            t1, t2 = formation_intervals(data.segment_start, data.segment_end, t,
                                         data.growth_rate, formation_lag=formation_lag,
                                         origin=segment_origin,
                                         tissue_length=seg["tissue_length"])
        except SERIES_ERRORS as e:
            return _all_failed(res, cands, "failed", f"segments could not be placed: {e}")
        t_formed = (t1 + t2) / 2.0
    subjects = sorted(set(data.subject.tolist()))
    if "subject" not in key_map and len(subjects) > 1 and _repeated(data.subject, t):
        msg = ("several subjects sampled repeatedly in one series: add 'subject' to 'by' "
               "(destructive designs have one sampling time per animal)")
        return _all_failed(res, cands, "failed", msg)
    diet = data.diet
    if data.diet_status:
        return _all_failed(res, cands, data.diet_status, data.diet_reason)
    growth = None
    if masses is not None and not seg:
        growth, why = growth_for_series(masses, data.subject, growth_curve)
        if growth is None:
            return _all_failed(res, cands, "failed", why)
    # does any sample follow the switch? (before "no change": that is why there is none)
    # (a single diet has no switch: every candidate says so as "model not valid")
    switch = float(diet.switch_times[0]) if diet is not None and diet.n_diets > 1 else 0.0
    why = after_switch_reason(t_formed, switch, time_unit)
    if why is not None:
        return _all_failed(res, cands, "too_few_points", why)
    # is there a change at all? (one point alone is too few points, said per candidate)
    if n > 1 and np.ptp(y) == 0:
        return _all_failed(res, cands, "no_change", "all values are equal: nothing to fit")
    ok_any = False
    # an optional (per-diet) variant only where the diets give it more separations, and
    # only where it can be chosen: valid with 'fixed', its criterion defined
    if not data.per_diet:
        cands = [c for c in cands if not c[4]]
    for label, structure, p, per_diet, optional in cands:
        model = TurnoverModel(p, structure=structure, lag=lag, diet=diet,
                              separation=separation, initial=initial, growth=growth,
                              per_diet_separation=per_diet and diet is not None,
                              scale=scale,
                              isotope=data.isotope if scale == "atom_fraction" else None,
                              **seg)
        try:
            n_free = _free_count(model, fixed)
        except SERIES_ERRORS as e:
            if optional:
                continue
            res.fits[label] = None
            res.reasons[label] = f"model not valid: {e}"
            continue
        needed = max(n_free + 1, 2)
        if n < needed + 2 * optional:
            if optional:
                continue
            res.fits[label] = None
            res.reasons[label] = (f"only {n} time point(s) for {n_free} free parameters "
                                  f"(at least {needed} needed)")
            continue
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                f = model.fit(t, y, sd, absolute_sigma=absolute_sigma and sd is not None,
                              fixed=fixed, loss=loss, time_unit=time_unit,
                              label=f"{' / '.join(key)}: {label}", warn=False,
                              **({"segment_start": data.segment_start,
                                  "segment_end": data.segment_end} if seg else {}))
        except SERIES_ERRORS as e:
            res.fits[label] = None
            res.reasons[label] = f"fit failed: {e}"
            continue
        if optional and _too_few(f, criterion):
            continue
        # the fit was made on arrays: record where they came from (as a frame fit does)
        f.data_info.update({
            "source": "frame", "design": "destructive" if len(subjects) > 1 else "series",
            "subjects": subjects, "tissue": data.tissue, "isotope": data.isotope,
            "n_rows": int(data.n_rows),
        })
        f.data_info.update({k: key_map.get(k) for k in SERIES_KEYS if k in key_map})
        if seg:
            f.data_info.update({"record": "segments", "sample_time": t.tolist(),
                                "segment_start": data.segment_start.tolist(),
                                "segment_end": data.segment_end.tolist()})
        res.fits[label] = f
        res.reasons[label] = ""
        ok_any = True
    if not ok_any:
        reasons = {r for r in res.reasons.values() if r}
        code = "too_few_points" if all("time point" in r for r in reasons) else "failed"
        res.status = code
        res.reason = "; ".join(sorted(reasons))
        return res
    fitted = {k: f for k, f in res.fits.items() if f is not None}
    # a change test: does the simplest fit explain more than a constant?
    simplest = min(fitted.values(), key=lambda f: f.nvarys)
    if not _has_change(simplest):
        res.status = "no_change"
        res.reason = ("no detectable change over the sampling period (F-test of the fitted "
                      "curve against a constant, p > 0.05)")
        res.fits = {k: None for k in res.fits}
        res.reasons = {k: res.reason for k in res.reasons}
        return res
    with warnings.catch_warnings():
        # a candidate that is not eligible says so in its row (status and reason)
        warnings.simplefilter("ignore", IsoturnoverWarning)
        cmp = compare(list(fitted.values()), criterion=criterion, labels=list(fitted))
    res.comparison = cmp
    not_eligible = cmp.attrs.get("not_eligible", {})
    res.reasons.update(not_eligible)
    # a fit stopped where its slowest rate runs to 0 (a linear drift) keeps its place in
    # the comparison (criterion at the stopping point) but is never chosen
    drift = {lab: why for lab, f in fitted.items() if (why := drift_reason(f))}
    res.reasons.update(drift)
    if drift and cmp["best"].any():
        crit = cmp[criterion].to_numpy(dtype=float)
        ok = np.isfinite(crit) & ~cmp["label"].isin(list(drift)).to_numpy()
        best = np.zeros(crit.size, dtype=bool)
        if ok.any():
            best[int(np.argmin(np.where(ok, crit, np.inf)))] = True
        cmp["best"] = best
    if len(res.reasons) == 1 and len(fitted) == 1 and not drift:
        # one candidate asked for: no choice is made, so it is kept even when its
        # criterion is undefined (its row's reason says so)
        res.chosen = next(iter(fitted))
        res.status = "ok"
        return res
    if not cmp["best"].any():
        # nothing can be chosen: a listed failure with every candidate's reason
        short = not drift and all(_too_few(fitted[lab], criterion) for lab in not_eligible) and all(
            "time point" in why for lab, why in res.reasons.items() if lab not in fitted)
        res.status = "too_few_points" if short else "failed"
        name = {"aicc": "AICc", "aic": "AIC", "bic": "BIC"}[criterion]
        res.reason = (f"no candidate can be chosen by {name} with {n} time "
                      "point(s): " + "; ".join(f"{lab}: {why}"
                                               for lab, why in res.reasons.items()))
        res.chosen = None
        return res
    res.chosen = str(cmp.loc[cmp["best"], "label"].iloc[0])
    res.status = "ok"
    return res


def _too_few(fit, criterion):
    """Whether a fit's criterion is undefined for want of points (AICc, n − k − 1 ≤ 0)."""
    k = int(getattr(fit, "n_criteria_params", fit.nvarys))
    return criterion == "aicc" and int(fit.nobs) - k - 1 <= 0


def _has_change(fit):
    """F-test: fitted curve vs a constant (weighted mean)."""
    w = 1.0 / fit.sigma if fit.sigma is not None else np.ones(fit.nobs)
    ybar = np.sum(w**2 * fit.y) / np.sum(w**2)
    rss0 = float(np.sum((w * (fit.y - ybar)) ** 2))
    p1 = fit.nvarys
    dof = fit.nobs - p1
    if dof <= 0 or p1 <= 1:
        return True
    if fit.rss <= 0:
        return True
    F = ((rss0 - fit.rss) / (p1 - 1)) / (fit.rss / dof)
    # P(F_{p1-1, dof} ≥ F): scipy.special.fdtrc, the function scipy.stats.f.sf calls
    return bool(special.fdtrc(p1 - 1, dof, F) < 0.05)


def _free_count(model, fixed):
    # 'fixed' names or values that do not suit this candidate (k2 for one pool, say) raise
    # a DataError: a reason for this candidate's row
    kin = model.kinetics
    return Coordinates(kin, check_names(fixed, kin, "fixed")).size


def _all_failed(res, cands, status, reason):
    res.status = status
    res.reason = reason
    for label, *_, optional in cands:  # an optional variant was never tried: not listed
        if optional:
            continue
        res.fits[label] = None
        res.reasons[label] = reason
    return res


def _repeated(subject, t) -> bool:
    """Whether some subject of a series was sampled at two or more distinct times."""
    seen = {}
    for s, ti in zip(subject.tolist(), t.tolist()):
        first = seen.setdefault(s, ti)
        if first != ti:
            return True
    return False
