"""Fits over many series: every subject, tissue and isotope of an experiment at once.

:func:`fit_each` splits a samples table into series (by subject, tissue and isotope by
default; by tissue and isotope for destructive sampling, one animal per sample), fits every
candidate model to each, and picks one per series by an information criterion. A series
that cannot be fitted becomes a row with a status and a reason; it never stops the others.

What counts as "cannot be fitted" is the library's own errors (:class:`~isoturnover.DataError`,
:class:`~isoturnover.FitError`, ...) and numerical breakdowns (``FloatingPointError``,
``numpy.linalg.LinAlgError``); any other exception is a programming error and propagates.

Series are independent: ``n_jobs`` fits them in parallel worker processes (joblib, loky
backend) with results identical to a serial run, in the same order.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from .conventions import check_choice, check_n_jobs
from .diet import DietHistory
from .engine import Coordinates, check_names
from .errors import DataError, IsoturnoverError, IsoturnoverWarning
from .kinetics import MAX_POOLS
from .model import LOSSES, TurnoverModel
from .selection import CRITERIA, compare

try:  # optional (the "fast" extra): parallel series
    import joblib as _joblib
except ImportError:  # pragma: no cover - depends on the environment
    _joblib = None

__all__ = ["fit_each", "FitSet", "SeriesResult", "STATUS", "SERIES_ERRORS",
           "parallel_workers"]

STATUS = ("ok", "failed", "too_few_points", "no_change", "no_diet")
_KEYS = ("subject", "tissue", "isotope")
#: Exceptions that make one series (or one candidate model of it) a failed row with its
#: reason: the library's own errors and numerical breakdowns. Anything else propagates.
SERIES_ERRORS = (IsoturnoverError, FloatingPointError, np.linalg.LinAlgError)


def parallel_workers(n_jobs, name: str = "n_jobs") -> int:
    """The number of workers for ``n_jobs`` (joblib's convention: -1 is all cores).

    Refuses anything but a positive integer or -1 (:class:`~isoturnover.DataError`). When
    joblib is not installed and more than one worker is asked for, warns once
    (:class:`~isoturnover.IsoturnoverWarning`) and returns 1: the work runs serially.
    """
    n = check_n_jobs(n_jobs, name)
    if n != 1 and _joblib is None:
        warnings.warn(f"{name}={n} asks for parallel workers, but joblib is not installed; "
                      "running serially (pip install joblib, or isoturnover[fast])",
                      IsoturnoverWarning, stacklevel=3)
        return 1
    return n


@dataclass
class SeriesResult:
    """The candidate fits of one series and the one chosen.

    Attributes
    ----------
    key : tuple
        Values of the ``by`` columns.
    fits : dict label -> TurnoverFit or None
    reasons : dict label -> str
        Why a candidate has no fit ("" when it has one).
    status : str
        ``"ok"`` when at least one candidate fitted, else the reason's code.
    reason : str
    chosen : str or None
        Label of the chosen candidate.
    comparison : DataFrame or None
        :func:`~isoturnover.compare` of the fitted candidates.
    """

    key: tuple
    fits: dict = field(default_factory=dict)
    reasons: dict = field(default_factory=dict)
    status: str = "ok"
    reason: str = ""
    chosen: str | None = None
    comparison: pd.DataFrame | None = None
    nobs: int = 0

    @property
    def best(self):
        """The chosen fit (None when nothing could be fitted)."""
        return None if self.chosen is None else self.fits[self.chosen]


class FitSet(Mapping):
    """Fits of many series: a mapping from key to :class:`SeriesResult`.

    ``fitset[key].best`` is the chosen fit of a series; :meth:`table` gives one tidy row per
    series and candidate.
    """

    def __init__(self, by, results: dict, *, criterion="aicc", level=0.95, method="profile",
                 time_unit="d"):
        self.by = tuple(by)
        self._results = results
        self.criterion = criterion
        self.level = level
        self.method = method
        self.time_unit = time_unit

    def __getitem__(self, key):
        if not isinstance(key, tuple):
            key = (key,)
        return self._results[key]

    def __iter__(self):
        return iter(self._results)

    def __len__(self):
        return len(self._results)

    def __repr__(self):
        ok = sum(r.status == "ok" for r in self._results.values())
        return (f"<FitSet by {', '.join(self.by)}: {len(self)} series, {ok} fitted, "
                f"{len(self) - ok} not fitted>")

    @property
    def chosen(self) -> dict:
        """Key → chosen TurnoverFit, for the series that were fitted."""
        return {k: r.best for k, r in self._results.items() if r.best is not None}

    @property
    def failures(self) -> dict:
        """Key → reason, for the series that could not be fitted."""
        return {k: r.reason for k, r in self._results.items() if r.status != "ok"}

    def table(self, level=None, method=None) -> pd.DataFrame:
        """One tidy row per series and candidate.

        Columns: the ``by`` keys; candidate, structure, pools, status, reason, nobs,
        n_params, rss, aicc, delta_aicc, weight, chosen, converged, n_warnings, warnings;
        delta0/delta_eq (or the first plateau and separation) estimates; then per pool
        ``fraction_i, half_life_i, lower_i, upper_i, lower_status_i, upper_status_i``;
        ``time_to_95`` and ``rate_kind``.
        """
        level = self.level if level is None else level
        method = self.method if method is None else method
        rows = []
        max_pools = 1
        for r in self._results.values():
            for f in r.fits.values():
                if f is not None:
                    max_pools = max(max_pools, len(f.kinetics.rate_names))
        for key, r in self._results.items():
            base = dict(zip(self.by, key))
            cmp = r.comparison
            for label in r.reasons:
                f = r.fits.get(label)
                row = dict(base)
                row["candidate"] = label
                if f is None:
                    row.update({"status": r.status if r.status != "ok" else "failed",
                                "reason": r.reasons[label], "nobs": r.nobs, "chosen": False})
                    rows.append(row)
                    continue
                crow = cmp[cmp["label"] == label].iloc[0]
                row.update({
                    "structure": f.kinetics.structure,
                    "pools": len(f.kinetics.rate_names),
                    "status": "ok", "reason": "", "nobs": f.nobs,
                    "n_params": int(crow["n_params"]), "rss": f.rss, "aicc": f.aicc,
                    "delta_aicc": float(crow["delta_aicc"]), "weight": float(crow["weight"]),
                    "chosen": label == r.chosen, "converged": f.converged,
                    "n_warnings": len(f.warnings),
                    "warnings": "; ".join(w.message for w in f.warnings),
                })
                vals = f.values
                level_names = [nm for nm in f.kinetics.param_names
                               if nm in ("delta0", "delta_eq", "lag", "k_growth")
                               or nm.startswith(("discrimination", "epsilon", "plateau"))]
                # profile intervals for the chosen model, asymptotic for the others (the
                # column interval_method says which)
                m_used = method if label == r.chosen else "asymptotic"
                ci = f.conf_int(level, m_used, params=level_names).set_index("parameter")
                for nm in level_names:
                    row[nm] = vals[nm]
                    row[f"{nm}_lower"] = ci.loc[nm, "lower"]
                    row[f"{nm}_upper"] = ci.loc[nm, "upper"]
                    row[f"{nm}_lower_status"] = ci.loc[nm, "lower_status"]
                    row[f"{nm}_upper_status"] = ci.loc[nm, "upper_status"]
                try:
                    hl = f.half_lives(level, m_used)
                except (IsoturnoverError, ValueError, RuntimeError) as e:  # pragma: no cover
                    row["reason"] = f"intervals failed: {e}"
                    hl = None
                if hl is not None:
                    for _, h in hl.iterrows():
                        i = int(h["pool"])
                        row[f"fraction_{i}"] = h["fraction"]
                        row[f"half_life_{i}"] = h["half_life"]
                        row[f"lower_{i}"] = h["lower"]
                        row[f"upper_{i}"] = h["upper"]
                        row[f"lower_status_{i}"] = h["lower_status"]
                        row[f"upper_status_{i}"] = h["upper_status"]
                    row["interval_method"] = hl["method"].iloc[0]
                tt = f.time_to(0.95, level, m_used).iloc[0]
                row["time_to_95"] = tt["estimate"]
                row["time_to_95_lower"] = tt["lower"]
                row["time_to_95_upper"] = tt["upper"]
                row["rate_kind"] = f.rate_kind
                row["time_unit"] = f.time_unit
                rows.append(row)
        df = pd.DataFrame(rows)
        df.attrs["time_unit"] = self.time_unit
        df.attrs["criterion"] = self.criterion
        return df

    def half_lives(self, level=None, method=None) -> pd.DataFrame:
        """Half-lives of the chosen fit of every series (long table, keys as columns)."""
        level = self.level if level is None else level
        method = self.method if method is None else method
        parts = []
        for key, r in self._results.items():
            if r.best is None:
                continue
            hl = r.best.half_lives(level, method)
            for col, v in zip(self.by, key):
                if col not in hl.columns:
                    hl[col] = v
            hl["model"] = r.chosen
            parts.append(hl)
        if not parts:
            return pd.DataFrame()
        df = pd.concat(parts, ignore_index=True)
        front = list(self.by) + ["model"]
        return df[front + [c for c in df.columns if c not in front]]


def _candidates(pools, structures):
    out = []
    for s in structures:
        if s == "parallel":
            for p in pools:
                if isinstance(p, bool) or not isinstance(p, (int, np.integer)) \
                        or not 1 <= p <= MAX_POOLS:
                    raise DataError(f"'pools' entries must be integers from 1 to {MAX_POOLS}; "
                                    f"got {p!r}")
                out.append((f"{p} pool{'s' if p > 1 else ''}", "parallel", p))
        elif s == "chain":
            out.append(("chain", "chain", 2))
        else:
            raise DataError(f"'structures' entries must be 'parallel' or 'chain'; got {s!r}")
    return out


def _diet_for(diets, key_map, subject_group, isotope):
    """The DietHistory of a series from a diets table: by subject, else by group."""
    d = diets[diets["isotope"].astype(str) == str(isotope)]
    if "subject" in d.columns and key_map.get("subject") is not None:
        rows = d[d["subject"].astype(str) == str(key_map["subject"])]
        if len(rows):
            return DietHistory.from_table(rows.sort_values("start"), isotope=isotope), None
    if "group" in d.columns and subject_group is not None:
        rows = d[d["group"].astype(str) == str(subject_group)]
        if len(rows):
            return DietHistory.from_table(rows.sort_values("start"), isotope=isotope), None
    if "group" not in d.columns and "subject" not in d.columns and len(d):
        return DietHistory.from_table(d.sort_values("start"), isotope=isotope), None
    what = f"subject {key_map.get('subject')!r}" if key_map.get("subject") is not None else ""
    if subject_group is not None:
        what += f"{' / ' if what else ''}group {subject_group!r}"
    return None, f"no diet rows for {what or 'this series'} and isotope {isotope}"


def fit_each(samples, *, by=_KEYS, pools=(1, 2), structures=("parallel",), diets=None,
             masses=None, criterion="aicc", level=0.95, method="profile", lag=False,
             separation="difference", initial="equilibrium", fixed=None, absolute_sigma=False,
             loss="linear", growth_curve="logistic", progress=False,
             per_diet_separation=False, n_jobs=1) -> FitSet:
    """Fit every series of a samples table with every candidate model; choose one each.

    Parameters
    ----------
    samples : DataFrame or path
        A samples table (validated with :func:`~isoturnover.read_samples`; never changed).
    by : tuple of str, default=("subject", "tissue", "isotope")
        Columns that define a series. Use ``("tissue", "isotope")`` for destructive
        sampling (one sample per animal): the animals of a tissue and isotope form one
        series.
    pools : sequence of int, default=(1, 2)
        Numbers of parallel pools to try.
    structures : sequence of {"parallel", "chain"}, default=("parallel",)
    diets : DataFrame, optional
        A diets table (:func:`~isoturnover.read_diets`), matched to each series by
        subject, else by group, and isotope. Without it each series is a step switch at
        t = 0 with ``delta0`` and ``delta_eq`` fitted.
    masses : DataFrame, optional
        A masses table (:func:`~isoturnover.read_masses`): a growth curve
        (``growth_curve``) is fitted per subject (across subjects for a destructive
        series) and the rates become catabolic rates.
    criterion : {"aicc", "aic", "bic"}, default="aicc"
    level, method
        Interval level and method used by :meth:`FitSet.table`.
    lag, separation, initial, fixed, absolute_sigma, loss, per_diet_separation
        Passed to every :class:`~isoturnover.TurnoverModel` and fit.
    growth_curve : str, default="logistic"
        Curve fitted to the masses (see :func:`~isoturnover.fit_growth`).
    progress : bool, default=False
        Show a progress bar (tqdm when installed); with several workers it advances as the
        series come back, in order.
    n_jobs : int, default=1
        Series fitted in parallel worker processes (joblib, loky backend); ``-1`` uses all
        cores. The results, and their order, are those of ``n_jobs=1``. Each worker also
        computes the chosen fit's intervals (``level``, ``method``), which come back cached
        on the fit. Without joblib a warning is given and the series are fitted serially.

    Returns
    -------
    FitSet

    Notes
    -----
    A series, or one candidate model of it, that raises one of :data:`SERIES_ERRORS`
    becomes a row with status ``"failed"`` (or a more specific code) and the error as its
    reason. Other exceptions (TypeError, KeyError, ...) are programming errors: they stop
    the run.
    """
    from .data import average_replicates, read_samples

    check_choice("criterion", criterion, CRITERIA)
    check_choice("loss", loss, LOSSES)
    workers = parallel_workers(n_jobs)
    if fixed is not None and not isinstance(fixed, dict):
        raise DataError(f"'fixed' must be a dict of parameter name -> value, or None; got "
                        f"{type(fixed).__name__}")
    by = tuple([by] if isinstance(by, str) else by)
    s = read_samples(samples, time_unit=_unit_of(samples))
    for col in by:
        if col not in s.columns:
            raise DataError(f"'by' names column {col!r}, which the samples table lacks; "
                            f"columns: {', '.join(map(str, s.columns))}")
    for col in ("tissue", "isotope"):
        if col not in by and s[col].nunique() > 1:
            raise DataError(f"'by' must include {col!r}: the table holds several "
                            f"({', '.join(sorted(s[col].astype(str).unique()))})")
    pools = tuple([pools] if isinstance(pools, (int, np.integer)) else pools)
    cands = _candidates(pools, tuple([structures] if isinstance(structures, str)
                                     else structures))
    _check_candidates(cands, lag=lag, separation=separation, initial=initial)
    time_unit = s.attrs.get("time_unit", "d")
    if diets is not None:
        from .data import read_diets

        diets = read_diets(diets, time_unit=_unit_of(diets, s.attrs.get("time_unit", "d")))
    if masses is not None:
        from .data import read_masses

        masses = read_masses(masses, time_unit=_unit_of(masses, s.attrs.get("time_unit", "d")))
    keys_df = s[list(by)].astype(str)
    groups = {}
    for key, idx in keys_df.groupby(list(by), sort=True).groups.items():
        key = key if isinstance(key, tuple) else (key,)
        groups[key] = idx
    options = dict(diets=diets, masses=masses, criterion=criterion, lag=lag,
                   separation=separation, initial=initial, fixed=fixed,
                   absolute_sigma=absolute_sigma, loss=loss, growth_curve=growth_curve,
                   average=average_replicates, per_diet_separation=per_diet_separation,
                   time_unit=time_unit)
    tasks = [(s.loc[idx], key, dict(zip(by, key))) for key, idx in groups.items()]
    if workers == 1 or len(tasks) < 2:
        done = [_fit_one(sub, key, key_map, cands, options)
                for sub, key, key_map in _progress(tasks, progress, "fitting series")]
    else:
        # every series is fitted by the same function on the same inputs as in the serial
        # branch; the generator hands the results back in submission order
        par = _joblib.Parallel(n_jobs=workers, backend="loky", return_as="generator")
        jobs = par(_joblib.delayed(_fit_one)(sub, key, key_map, cands, options,
                                             warm=(level, method))
                   for sub, key, key_map in tasks)
        done = list(_progress(jobs, progress, "fitting series", total=len(tasks)))
    results = {key: r for (_, key, _), r in zip(tasks, done)}
    return FitSet(by, results, criterion=criterion, level=level, method=method,
                  time_unit=time_unit)


def _check_candidates(cands, *, lag, separation, initial):
    """Refuse bad model options once, before any series is fitted (not as a failed row in
    every series)."""
    for _, structure, p in cands:
        try:
            _ = TurnoverModel(p, structure=structure, lag=lag, separation=separation,
                              initial=initial).kinetics  # built here only to check options
        except IsoturnoverError:
            raise
        except ValueError as e:  # the kinetics' own argument checks ('pools', 'separation')
            raise DataError(str(e)) from None


def _fit_one(sub, key, key_map, cands, options, warm=None):
    """One series: its SeriesResult, with a library error anywhere in it a failed row.

    ``warm=(level, method)`` (parallel runs): the chosen fit's intervals are computed here,
    in the worker that fitted it, and travel back cached on the fit, so the tables and the
    report made afterwards in the main process find them ready.
    """
    try:
        res = _fit_series(sub, key, key_map, cands, **options)
    except SERIES_ERRORS as e:
        return _all_failed(SeriesResult(key=key, nobs=0), cands, "failed",
                           f"series failed: {e}")
    if warm is not None and res.best is not None:
        try:
            res.best.table(*warm)
        except SERIES_ERRORS:
            pass  # the main process meets the same error where the table is made
    return res


def _unit_of(table, default="d"):
    """The time unit a validated frame already carries (re-reading keeps it)."""
    attrs = getattr(table, "attrs", None) or {}
    return attrs.get("time_unit", default)


def _progress(items, progress, desc, total=None):
    if not progress:
        return items
    try:
        from tqdm.auto import tqdm
    except ImportError:  # pragma: no cover - light fallback
        return items
    return tqdm(items, desc=desc, total=total)


def _fit_series(sub, key, key_map, cands, *, diets, masses, criterion, lag, separation,
                initial, fixed, absolute_sigma, loss, growth_curve, average, time_unit,
                per_diet_separation=False):
    res = SeriesResult(key=key)
    # a canonical row order first, so that averaging (floating-point sums) and everything
    # after it do not depend on the order of the input rows
    order_cols = [c for c in ("subject", "time", "value", "sd", "replicate") if c in sub.columns]
    sub = sub.sort_values(order_cols, kind="stable")
    avg = average(sub).sort_values("time", kind="stable")
    n = len(avg)
    res.nobs = n
    subjects = sorted(avg["subject"].astype(str).unique())
    per_subject = avg.groupby(avg["subject"].astype(str))["time"].nunique()
    if "subject" not in key_map and int(per_subject.max()) > 1 and avg["subject"].nunique() > 1:
        msg = ("several subjects sampled repeatedly in one series: add 'subject' to 'by' "
               "(destructive designs have one sampling time per animal)")
        return _all_failed(res, cands, "failed", msg)
    diet = None
    if diets is not None:
        grp = None
        if "group" in sub.columns:
            g = sub["group"].dropna().astype(str).unique()
            grp = g[0] if len(g) == 1 else None
        try:
            diet, why = _diet_for(diets, key_map, grp, str(sub["isotope"].iloc[0]))
        except SERIES_ERRORS as e:
            return _all_failed(res, cands, "failed", f"diet history could not be built: {e}")
        if diet is None:
            return _all_failed(res, cands, "no_diet", why)
    growth = None
    if masses is not None:
        growth, why = _growth_for(masses, avg, growth_curve)
        if growth is None:
            return _all_failed(res, cands, "failed", why)
    t = avg["time"].to_numpy(dtype=float)
    y = avg["value"].to_numpy(dtype=float)
    sd = None
    if "sd" in avg.columns and avg["sd"].notna().all():
        sd = avg["sd"].to_numpy(dtype=float)
    # is there a change at all?
    if np.ptp(y) == 0:
        return _all_failed(res, cands, "no_change", "all values are equal: nothing to fit")
    ok_any = False
    for label, structure, p in cands:
        model = TurnoverModel(p, structure=structure, lag=lag, diet=diet,
                              separation=separation, initial=initial, growth=growth,
                              per_diet_separation=per_diet_separation and diet is not None)
        try:
            n_free = _n_free(model, fixed)
        except SERIES_ERRORS as e:
            res.fits[label] = None
            res.reasons[label] = f"model not valid: {e}"
            continue
        needed = max(n_free + 1, 2)
        if n < needed:
            res.fits[label] = None
            res.reasons[label] = (f"only {n} time point(s) for {n_free} free parameters "
                                  f"(at least {needed} needed)")
            continue
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                f = model.fit(t, y, sd, absolute_sigma=absolute_sigma and sd is not None,
                              fixed=fixed, loss=loss, time_unit=time_unit,
                              label=f"{' / '.join(key)}: {label}", warn=False)
        except SERIES_ERRORS as e:
            res.fits[label] = None
            res.reasons[label] = f"fit failed: {e}"
            continue
        # the fit was made on arrays: record where they came from (as a frame fit does)
        f.data_info.update({
            "source": "frame", "design": "destructive" if len(subjects) > 1 else "series",
            "subjects": subjects, "tissue": str(sub["tissue"].iloc[0]),
            "isotope": str(sub["isotope"].iloc[0]), "n_rows": int(len(sub)),
        })
        f.data_info.update({k: key_map.get(k) for k in _KEYS if k in key_map})
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
    cmp = compare(list(fitted.values()), criterion=criterion, labels=list(fitted))
    res.comparison = cmp
    res.chosen = str(cmp.loc[cmp["best"], "label"].iloc[0])
    res.status = "ok"
    return res


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
    return bool(stats.f.sf(F, p1 - 1, dof) < 0.05)


def _n_free(model, fixed):
    kin = model.kinetics
    try:
        names = check_names(fixed, kin, "fixed")
    except ValueError as e:
        # 'fixed' names or values that do not suit this candidate (k2 for one pool, say):
        # a reason for this candidate's row, reported as the data error it is
        raise DataError(str(e)) from None
    return Coordinates(kin, names).size


def _all_failed(res, cands, status, reason):
    res.status = status
    res.reason = reason
    for label, _, _ in cands:
        res.fits[label] = None
        res.reasons[label] = reason
    return res


def _growth_for(masses, avg, curve):
    """Growth curve for a series: the subject's masses, or all subjects' for a destructive
    series."""
    from .growth import fit_growth

    subj = avg["subject"].astype(str).unique()
    m = masses[masses["subject"].astype(str).isin(subj)]
    if len(m) == 0:
        return None, f"no masses for subject(s) {', '.join(subj[:5])}"
    try:
        g = fit_growth(m["time"].to_numpy(dtype=float), m["mass"].to_numpy(dtype=float),
                       curve=curve)
    except SERIES_ERRORS as e:
        return None, f"growth curve '{curve}' could not be fitted: {e}"
    return g, None

