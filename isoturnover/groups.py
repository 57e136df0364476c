"""Fits over many series: every subject, tissue and isotope of an experiment at once.

:func:`fit_each` splits a samples table into series (by subject, tissue and isotope by
default; by tissue and isotope for destructive sampling, one animal per sample), fits every
candidate model to each, and picks one per series by an information criterion. A series
that cannot be fitted becomes a row with a status and a reason; it never stops the others.

What counts as "cannot be fitted" is the library's own errors (:class:`~isoturnover.DataError`,
:class:`~isoturnover.FitError`, ...) and numerical breakdowns (``FloatingPointError``,
``numpy.linalg.LinAlgError``); any other exception is a programming error and propagates.

Series are independent: ``n_jobs`` fits them in parallel worker processes (joblib, loky
backend) with results identical to a serial run, in the same order. Warnings issued while
a worker fits a series (a growth curve's trust notes, say) are issued again in the calling
process, under its warning filters, in series order.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping

import pandas as pd

from .conventions import (
    check_choice,
    check_level,
    check_method,
    check_n_jobs,
    check_name_tuple,
    check_pool_numbers,
)
from .errors import DataError, DataWarning, IsoturnoverWarning
from .kinetics import MAX_POOLS
from .model import LOSSES
from .population import population_estimate
from .segments import ORIGINS, check_length_unit
from .selection import CRITERIA
from .seriesfit import (
    PER_DIET_LABEL,
    STATUS,
    SeriesResult,
    attach_diets,
    attach_growth_rates,
    candidates,
    check_formation_lag,
    fit_one,
    fit_one_in_worker,
    warm_series,
)
from .seriesfit import SERIES_KEYS as _KEYS
from .seriesrows import (
    SERIES_ERRORS,
    candidate_row,
    population_inputs,
    series_data,
)

try:  # optional (the "fast" extra): parallel series
    import joblib as _joblib
except ImportError:  # pragma: no cover - depends on the environment
    _joblib = None

__all__ = ["fit_each", "FitSet", "SeriesResult", "STATUS", "SERIES_ERRORS",
           "parallel_workers", "candidate_row", "warm_series", "PER_DIET_LABEL"]



def parallel_workers(n_jobs, name: str = "n_jobs") -> int:
    """The number of parallel workers to use for ``n_jobs`` (joblib's convention).

    When joblib is not installed and more than one worker is asked for, warns once
    (:class:`~isoturnover.IsoturnoverWarning`) and returns 1: the work runs serially.

    Parameters
    ----------
    n_jobs : int
        A positive number of workers, or -1 for all cores.
    name : str, default="n_jobs"
        Name of the argument in messages (``"--jobs"`` on the command line).

    Returns
    -------
    int
        ``n_jobs`` itself (-1 stays -1: joblib counts the cores), or 1 without joblib.

    Raises
    ------
    DataError
        When ``n_jobs`` is not a positive integer or -1 (a bool, 0, -2, 1.5, "2" ...).
    """
    n = check_n_jobs(n_jobs, name)
    if n != 1 and _joblib is None:
        warnings.warn(f"{name}={n} asks for parallel workers, but joblib is not installed; "
                      "running serially (pip install joblib, or isoturnover[fast])",
                      IsoturnoverWarning, stacklevel=3)
        return 1
    return n


class FitSet(Mapping):
    """Fits of many series: a mapping from key to :class:`SeriesResult`.

    ``fitset[key].best`` is the chosen fit of a series; :meth:`table` gives one tidy row per
    series and candidate. Made by :func:`fit_each`; a one-column key may be given bare
    (``fitset["goat1"]`` for ``by=("subject",)``).

    Parameters
    ----------
    by : sequence of str
        Names of the key columns, in key order.
    results : dict tuple -> SeriesResult
        The series, in the order the tables list them.
    criterion : {"aicc", "aic", "bic"}, default="aicc"
        Information criterion the candidates were chosen by.
    level : float, default=0.95
        Default confidence level of :meth:`table` and :meth:`half_lives`.
    method : str, default="profile"
        Default interval method of :meth:`table` and :meth:`half_lives`.
    time_unit : str, default="d"
        Time unit of the samples table.
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
        """The chosen fits of the series that were fitted.

        Returns
        -------
        dict tuple -> TurnoverFit
        """
        return {k: r.best for k, r in self._results.items() if r.best is not None}

    @property
    def failures(self) -> dict:
        """Why each series that could not be fitted was not.

        Returns
        -------
        dict tuple -> str
            Key → reason, for the series whose status is not ``"ok"``.
        """
        return {k: r.reason for k, r in self._results.items() if r.status != "ok"}

    def table(self, level=None, method=None) -> pd.DataFrame:
        """One tidy row per series and candidate, with estimates and intervals.

        The chosen candidate of each series gets intervals of ``method``, the others
        asymptotic intervals (column ``interval_method``). Half-lives are
        :math:`t_{1/2} = \\ln 2 / k_i` of each pool, in the time unit of the data. Each
        candidate's row is computed once per level and method and kept on its fit
        (:func:`candidate_row`), so the table, the report and the summaries share one
        computation of every interval.

        Parameters
        ----------
        level : float, optional
            Confidence level in (0, 1); default the FitSet's.
        method : str, optional
            Interval method of the chosen fits (see
            :meth:`~isoturnover.TurnoverFit.conf_int`); default the FitSet's.

        Returns
        -------
        DataFrame
            Columns: the ``by`` keys; ``group`` (the samples table's group of the series,
            when the table has one and ``by`` does not name it); ``record`` (``"points"``
            or ``"segments"``, when some series is a segment profile); candidate, structure,
            pools, status, reason, nobs, n_params, rss, aicc, delta_aicc, weight, chosen,
            converged, n_warnings, warnings; then the columns of :func:`candidate_row`
            (level parameters, half-lives, time to 95 %, with a growth model the
            incorporation half-lives and the growth share, each interval with its
            ``lower_status`` and ``upper_status``; interval_note, rate_kind, time_unit).
            A candidate or series that was not fitted keeps its row with its status and
            reason.

        Raises
        ------
        DataError
            For a bad ``level`` or ``method``.

        Notes
        -----
        A fitted candidate whose criterion is undefined (AICc with n − k − 1 ≤ 0) keeps its
        estimates with status ``"not_eligible"`` and the reason; it is never chosen.
        """
        level = check_level(self.level if level is None else level)
        method = check_method(self.method if method is None else method)
        with_group = "group" not in self.by and any(
            r.group is not None for r in self._results.values())
        with_record = any(r.record == "segments" for r in self._results.values())
        rows = []
        for key, r in self._results.items():
            base = dict(zip(self.by, key))
            if with_group:
                base["group"] = r.group
            if with_record:
                base["record"] = r.record
            cmp = r.comparison
            cmp_rows = ({} if cmp is None else
                        {lab: (int(k), float(d), float(w)) for lab, k, d, w in zip(
                            cmp["label"], cmp["n_params"], cmp["delta_aicc"], cmp["weight"])})
            for label in r.reasons:
                f = r.fits.get(label)
                row = dict(base)
                row["candidate"] = label
                if f is None:
                    row.update({"status": r.status if r.status != "ok" else "failed",
                                "reason": r.reasons[label], "nobs": r.nobs, "chosen": False})
                    rows.append(row)
                    continue
                n_params, delta, weight = cmp_rows[label]
                why = r.reasons.get(label, "")
                row.update({
                    "structure": f.kinetics.structure,
                    "pools": len(f.kinetics.rate_names),
                    "status": "not_eligible" if why and label != r.chosen else "ok",
                    "reason": why, "nobs": f.nobs,
                    "n_params": n_params, "rss": f.rss, "aicc": f.aicc,
                    "delta_aicc": delta, "weight": weight,
                    "chosen": label == r.chosen, "converged": f.converged,
                    "n_warnings": len(f.warnings),
                    "warnings": "; ".join(w.message for w in f.warnings),
                })
                # the method's intervals for the chosen model, asymptotic for the others
                # (the column interval_method says which)
                row.update(candidate_row(f, level, method if label == r.chosen
                                         else "asymptotic"))
                rows.append(row)
        df = pd.DataFrame(rows)
        df.attrs["time_unit"] = self.time_unit
        df.attrs["criterion"] = self.criterion
        return df

    def half_lives(self, level=None, method=None) -> pd.DataFrame:
        """Half-lives :math:`\\ln 2 / k_i` of the chosen fit of every series (long table).

        Parameters
        ----------
        level : float, optional
            Confidence level in (0, 1); default the FitSet's.
        method : str, optional
            Interval method (see :meth:`~isoturnover.TurnoverFit.half_lives`); default the
            FitSet's.

        Returns
        -------
        DataFrame
            The ``by`` keys and ``model`` (the chosen candidate) first, then the columns
            of :meth:`~isoturnover.TurnoverFit.half_lives` (half-lives in the data's time
            unit). Empty when no series was fitted.
        """
        level = check_level(self.level if level is None else level)
        method = check_method(self.method if method is None else method)
        parts = []
        for key, r in self._results.items():
            if r.best is None:
                continue
            hl = r.best.cached_frame("half_lives", level, method)  # a copy of the kept one
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

    def population(self, quantity="half_life", *, pool=1, moderators=None, level=None,
                   interval_method=None, method="reml", adjust=None, pooled_level=None):
        """Population estimate of the series' half-lives (random effects on the log scale).

        Parameters
        ----------
        quantity : {"half_life"}, default="half_life"
            The per-series quantity pooled.
        pool : int, default=1
            Whose half-life (1: the fastest pool of each chosen model).
        moderators : DataFrame, optional
            Covariates indexed by the series key (a bare value for one key column), one
            row per series: a mixed-effects meta-regression.
        level, interval_method : optional
            Level and method of the per-series intervals (default the FitSet's).
        method : {"reml", "dl", "pm"}, default="reml"
            Estimator of the between-animal variance.
        adjust : {None, "hksj"}, default=None
            Hartung–Knapp–Sidik–Jonkman adjustment of the pooled interval.
        pooled_level : float, optional
            Level of the pooled intervals (default ``level``).

        Returns
        -------
        PopulationEstimate
            From :func:`~isoturnover.population_estimate`: every series appears, those
            without a usable half-life listed as excluded with the reason and the
            direction of the bias their absence causes.
        """
        if quantity != "half_life":
            raise DataError(f"'quantity' must be 'half_life'; got {quantity!r}")
        level = check_level(self.level if level is None else level)
        d = population_inputs(self, pool, level, interval_method)
        mods = None
        if moderators is not None:
            if not isinstance(moderators, pd.DataFrame):
                raise DataError("'moderators' must be a DataFrame indexed by the series key")
            missing = [k for k in d["names"] if k not in moderators.index]
            if missing:
                raise DataError(f"'moderators' has no row for the series {missing[:5]}")
            mods = moderators.loc[d["names"]]
        return population_estimate(
            d["values"], d["lowers"], d["uppers"], level, method=method, adjust=adjust,
            moderators=mods, names=d["names"], lower_status=d["lower_status"],
            upper_status=d["upper_status"], reasons=d["reasons"], quantity="half_life",
            pooled_level=pooled_level)


def fit_each(samples, *, by=_KEYS, pools=(1, 2), structures=("parallel",), diets=None,
             masses=None, criterion="aicc", level=0.95, method="profile", lag=False,
             separation="difference", initial="equilibrium", fixed=None, absolute_sigma=False,
             loss="linear", growth_curve="logistic", progress=False,
             per_diet_separation=False, n_jobs=1, scale="delta", growth_rate=None,
             segment_origin="base", formation_lag=0.0, length_unit="mm") -> FitSet:
    """Fit every series of a samples table with every candidate model; choose one each.

    Parameters
    ----------
    samples : DataFrame or path
        A samples table (validated with :func:`~isoturnover.read_samples`; never changed).
    by : tuple of str, default=("subject", "tissue", "isotope")
        Columns that define a series. Use ``("tissue", "isotope")`` for destructive
        sampling (one sample per animal): the animals of a tissue and isotope form one
        series.
    pools : int or sequence of int, default=(1, 2)
        Numbers of parallel pools to try (distinct, each from 1 to
        :data:`~isoturnover.kinetics.MAX_POOLS`); empty only when ``structures`` holds no
        ``"parallel"``.
    structures : sequence of {"parallel", "chain"}, default=("parallel",)
        Model structures to try: parallel pools (``pools``) and/or the two-step
        precursor–product chain.
    diets : DataFrame, optional
        A diets table (:func:`~isoturnover.read_diets`), matched to each series by
        subject, else by group, and isotope. Without it each series is a step switch at
        t = 0 with ``delta0`` and ``delta_eq`` fitted.
    masses : DataFrame, optional
        A masses table (:func:`~isoturnover.read_masses`): a growth curve
        (``growth_curve``) is fitted per subject (across subjects for a destructive
        series) and the rates become catabolic rates.
    criterion : {"aicc", "aic", "bic"}, default="aicc"
        Information criterion that chooses one candidate per series
        (:func:`~isoturnover.compare`).
    level : float, default=0.95
        Confidence level in (0, 1) of the intervals of :meth:`FitSet.table`.
    method : {"profile", "asymptotic", "bootstrap", "mcmc"}, default="profile"
        Interval method of the chosen fits in :meth:`FitSet.table`.
    lag : bool, default=False
        Fit a pure delay after each switch (:class:`~isoturnover.TurnoverModel`).
    separation : {"difference", "epsilon"}, default="difference"
        Form of the diet-tissue separation (:class:`~isoturnover.TurnoverModel`).
    initial : {"equilibrium", "free"}, default="equilibrium"
        Initial state of the tissue (:class:`~isoturnover.TurnoverModel`).
    fixed : dict, optional
        Parameters held at given values in every fit (``{"delta0": -25.0}``); a name a
        candidate lacks makes that candidate a failed row.
    absolute_sigma : bool, default=False
        Treat the samples' ``sd`` as known (used only where every row has one).
    loss : {"linear", "soft_l1", "huber"}, default="linear"
        Loss of every fit (:meth:`~isoturnover.TurnoverModel.fit`).
    growth_curve : str, default="logistic"
        Curve fitted to the masses (see :func:`~isoturnover.fit_growth`).
    progress : bool, default=False
        Show a progress bar (tqdm when installed); with several workers it advances as the
        series come back, in order.
    scale : {"delta", "atom_fraction"}, default="delta"
        Mixing scale of the pools (:class:`~isoturnover.TurnoverModel`); with
        ``"atom_fraction"`` each series' model takes the series' isotope.
    per_diet_separation : bool or "auto", default=False
        One separation per diet value (only with ``diets``). ``"auto"`` fits every
        candidate both ways, with one shared separation and (label suffix
        :data:`PER_DIET_LABEL`) one per diet value, and lets ``criterion`` choose among
        all of them; the per-diet variant of a series is tried only where its diets hold
        two or more distinct known values (so it adds parameters; never with one diet or
        without ``diets``) and listed only where its criterion is defined.
    n_jobs : int, default=1
        Series fitted in parallel worker processes (joblib, loky backend); ``-1`` uses all
        cores. The results, and their order, are those of ``n_jobs=1``. Each worker also
        computes the chosen fit's intervals (``level``, ``method``), which come back cached
        on the fit. Without joblib a warning is given and the series are fitted serially.
    growth_rate : float, table or dict of str → (float or table), optional
        Growth rate of the tissues whose samples carry ``segment_start``/``segment_end``,
        in the segments' length unit per the samples' time unit: one number (or a table of
        (time, rate) rows, :func:`~isoturnover.segments.growth_schedule`) for every such
        tissue, or a dict by tissue (``{"hair": 0.4}``). A ``growth_rate`` column of the
        samples (one value per series) takes precedence for its series. Those series are fitted with
        ``record="segments"`` (each segment the exact mean of the model over its formation
        interval), without growth dilution (an inert tissue is not diluted by body growth;
        ``masses`` serve the other series).
    segment_origin : {"base", "tip"}, default="base"
        Where the segment distances are measured from. With ``"tip"`` the tissue's length
        at sampling is taken as the series' largest ``segment_end`` (the segments cover the
        whole tissue).
    formation_lag : float, default=0.0
        Time (≥ 0, the samples' time unit) from formation to emergence at the base, for
        every segment series.
    length_unit : str, default="mm"
        Unit of ``segment_start``/``segment_end`` (and of ``growth_rate``'s length), carried
        by the segment fits into their summaries, figures and saved records.

    Returns
    -------
    FitSet
        One :class:`SeriesResult` per series, keyed by the values of ``by`` (sorted).

    Raises
    ------
    DataError
        For a bad table or option (``by``, ``pools``, ``structures``, ``criterion``,
        ``loss``, ``level``, ``method``, ``fixed``, ``n_jobs``, model options), before any
        series is fitted: an empty, repeated or wrong-typed ``pools``, ``by`` or
        ``structures`` too; samples with segments whose tissue has no growth rate (the
        message names the tissue), a bad ``growth_rate``, ``segment_origin``,
        ``formation_lag`` or ``length_unit``.

    Notes
    -----
    A series, or one candidate model of it, that raises one of :data:`SERIES_ERRORS`
    becomes a row with status ``"failed"`` (or a more specific code) and the error as its
    reason. Other exceptions (TypeError, KeyError, ...) are programming errors: they stop
    the run.

    A candidate needs more time points than free parameters to be fitted, and its
    criterion must be defined to be chosen: AICc = AIC + 2k(k+1)/(n−k−1) needs
    n − k − 1 > 0, with k counting the residual variance (Burnham & Anderson 2002). A
    fitted candidate without it has status ``"not_eligible"``; a series with no eligible
    candidate is ``"too_few_points"`` with every candidate's reason. With a single
    candidate no choice is made: its fit is kept (status ``"ok"``) and its row's reason
    says that its criterion is undefined.

    A candidate whose slowest rate ran to 0 (a linear drift over the sampling:
    :func:`~isoturnover.diagnostics.drift_reason`, trust note ``"linear_drift"``) is
    flagged, not reported: it keeps its row and its place in the comparison (its criterion
    from where the fit stopped, so the Akaike weights are those of every fitted
    candidate), but it is never chosen; its row has status ``"not_eligible"`` with the
    reason, and the best of the other candidates is chosen.
    """
    from .data import average_replicates, read_samples

    check_choice("criterion", criterion, CRITERIA)
    check_choice("loss", loss, LOSSES)
    level = check_level(level)
    method = check_method(method)
    workers = parallel_workers(n_jobs)
    if fixed is not None and not isinstance(fixed, dict):
        raise DataError(f"'fixed' must be a dict of parameter name -> value, or None; got "
                        f"{type(fixed).__name__}")
    by = check_name_tuple("by", by, "column names, e.g. by=('subject', 'tissue', 'isotope')")
    structures = check_name_tuple("structures", structures,
                        "model structures, e.g. structures=('parallel', 'chain')")
    pools = check_pool_numbers(pools, structures, MAX_POOLS)
    scale = check_choice("scale", scale, ("delta", "atom_fraction"))
    cands = candidates(pools, structures, per_diet_separation, lag=lag,
                        separation=separation, initial=initial)
    segment_origin = check_choice("segment_origin", segment_origin, ORIGINS)
    formation_lag = check_formation_lag(formation_lag)
    length_unit = check_length_unit(length_unit)
    s = _validated(read_samples, samples, "samples", time_unit=_unit_of(samples))
    for col in by:
        if col not in s.columns:
            raise DataError(f"'by' names column {col!r}, which the samples table lacks; "
                            f"columns: {', '.join(map(str, s.columns))}")
    for col in ("tissue", "isotope"):
        if col not in by and s[col].nunique() > 1:
            raise DataError(f"'by' must include {col!r}: the table holds several "
                            f"({', '.join(sorted(s[col].astype(str).unique()))})")
    time_unit = s.attrs.get("time_unit", "d")
    if diets is not None:
        from .data import read_diets

        diets = _validated(read_diets, diets, "diets",
                           time_unit=_unit_of(diets, s.attrs.get("time_unit", "d")))
    if masses is not None:
        from .data import read_masses

        masses = _validated(read_masses, masses, "masses",
                            time_unit=_unit_of(masses, s.attrs.get("time_unit", "d")))
    keys_df = s[list(by)].astype(str)
    groups = {}
    # row positions, not index labels: a table with repeated index labels (frames joined
    # without ignore_index) would otherwise pull rows of other series into each series
    for key, pos in keys_df.groupby(list(by), sort=True).indices.items():
        key = key if isinstance(key, tuple) else (key,)
        groups[key] = pos
    # the whole table is split, averaged and matched to its diets here, once and column-wise;
    # each series travels to its fit as a few arrays (no per-series frames)
    data = series_data(s, by, groups, average_replicates)
    attach_growth_rates(data, growth_rate)
    if diets is not None:
        attach_diets(data, groups, by, diets, initial, separation)
    options = dict(masses=masses, criterion=criterion, lag=lag, separation=separation,
                   initial=initial, fixed=fixed, absolute_sigma=absolute_sigma, loss=loss,
                   growth_curve=growth_curve, time_unit=time_unit, scale=scale,
                   segment_origin=segment_origin, formation_lag=formation_lag,
                   length_unit=length_unit)
    tasks = [(d, key, dict(zip(by, key))) for d, key in zip(data, groups)]
    if workers == 1 or len(tasks) < 2:
        done = [fit_one(d, key, key_map, cands, options)
                for d, key, key_map in _progress(tasks, progress, "fitting series")]
    else:
        # every series is fitted by the same function on the same inputs as in the serial
        # branch; the generator hands the results back in submission order
        par = _joblib.Parallel(n_jobs=workers, return_as="generator")
        jobs = par(_joblib.delayed(fit_one_in_worker)(d, key, key_map, cands, options,
                                                       warm=(level, method))
                   for d, key, key_map in tasks)
        done = []
        for res, caught in _progress(jobs, progress, "fitting series", total=len(tasks)):
            # a worker's warnings, issued here as a serial run issues them (under the
            # caller's filters, in series order)
            for message, category in caught:
                warnings.warn(message, category, stacklevel=2)
            done.append(res)
    results = {key: r for (_, key, _), r in zip(tasks, done)}
    return FitSet(by, results, criterion=criterion, level=level, method=method,
                  time_unit=time_unit)


def _validated(reader, table, what, **kwargs):
    """``reader(table, **kwargs)``. A frame this reader made already (``attrs["table"]``
    is ``what``) is checked again without its data warnings (duplicate rows...): they were
    given when it was read, and would only come again under the name ``<frame>``."""
    if isinstance(table, pd.DataFrame) and table.attrs.get("table") == what:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DataWarning)
            return reader(table, **kwargs)
    return reader(table, **kwargs)


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
