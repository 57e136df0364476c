"""The main job end to end: samples in; fits, choices, intervals, figures and a report out.

:func:`analyse` fits every series of a samples table (with diets and masses when given),
chooses each series' model (number of pools, one or per-diet separations) by AICc and
computes intervals; :class:`Analysis` writes
``results.csv`` (one row per series and candidate), ``fits.json`` (reloadable with
:func:`load_fits` or, one fit at a time, :func:`~isoturnover.load_fit`), a Markdown and HTML
report with figures. :func:`run_demo` does all of it on the invented demo experiment.

Writing is all or nothing (:mod:`isoturnover.outputdir`): every file is made in a temporary
folder next to the output folder, which takes the output's place in one move, under a lock
on the folder, with a manifest of the files written (the user's own files are kept).
"""

from __future__ import annotations

import hashlib
import json
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .conventions import CAUTION, check_choice, check_level, check_positive_int
from .errors import DataError, FitError
from .groups import FitSet, fit_each, parallel_workers
from .outputdir import check_out_dir, neutralise_formulas, write_output

__all__ = ["analyse", "Analysis", "run_demo", "load_fits", "series_seed", "CAUTION",
           "CI_METHODS"]

CI_METHODS = ("profile", "asymptotic", "bootstrap")



@dataclass
class Analysis:
    """Fits of one or more parts of a study, ready to be written out.

    Parameters
    ----------
    parts : dict name -> FitSet
        The parts of the study (one FitSet each), in the order they are written.
    level : float, default=0.95
        Confidence level in (0, 1) of every interval.
    ci : str, default="profile"
        Interval method of the tables ("profile", "asymptotic" or "bootstrap").
    n_boot : int, default=499
        Bootstrap replicates per chosen fit when ``ci="bootstrap"``.
    seed : int or None, default=1
        Seed of the run. Each series' bootstrap draws from its own seed, derived from this
        one and the series' part and key (:func:`series_seed`), so a series' interval does
        not depend on which other series are in the run, on their order, or on ``n_jobs``.
    bootstrap : dict, optional
        (part, key) -> bootstrap interval table of the chosen fit, when ``ci="bootstrap"``;
        filled by :meth:`results_table`.
    title : str, default="Turnover analysis"
        Title of the report.
    n_jobs : int, default=1
        Parallel workers of the bootstrap refits (results do not depend on it).
    """

    parts: dict
    level: float = 0.95
    ci: str = "profile"
    n_boot: int = 499
    seed: int | None = 1
    bootstrap: dict = field(default_factory=dict)
    title: str = "Turnover analysis"
    n_jobs: int = 1

    @property
    def interval_method(self) -> str:
        """Interval method of the fits' own tables.

        Returns
        -------
        str
            ``"asymptotic"`` when ``ci="asymptotic"``, else ``"profile"`` (bootstrap
            intervals are added beside the profile ones).
        """
        return "asymptotic" if self.ci == "asymptotic" else "profile"

    def n_fitted(self) -> int:
        """Number of series with a chosen fit, over all parts.

        Returns
        -------
        int
            Series whose status is ``"ok"``.
        """
        return sum(len(fs.chosen) for fs in self.parts.values())

    def failures(self) -> dict:
        """Why each series that could not be fitted was not, over all parts.

        Returns
        -------
        dict tuple -> str
            ``(part, *key)`` → reason.
        """
        out = {}
        for name, fs in self.parts.items():
            for k, why in fs.failures.items():
                out[(name, *k)] = why
        return out

    def results_table(self) -> pd.DataFrame:
        """One row per series and candidate across all parts (the ``results.csv`` table).

        Returns
        -------
        DataFrame
            Column ``part`` first, then the columns of :meth:`FitSet.table` (at ``level``
            and :attr:`interval_method`): the series' keys and its ``group`` (from the
            samples table, when it has one), the estimates, and every interval with its
            ``lower_status`` and ``upper_status``; with a growth model also the
            incorporation half-lives :math:`\\ln 2/(k_{d,i} + k_g)` and the growth share.
            With ``ci="bootstrap"`` also ``boot_lower_i``, ``boot_upper_i`` (residual-
            bootstrap percentile interval of half-life i, in the data's time unit),
            ``boot_lower_status_i``, ``boot_upper_status_i``, ``boot_failed`` and ``boot_n``
            on the chosen rows. Empty when no part has a series.

        Notes
        -----
        Each row is computed once and kept on its fit
        (:func:`~isoturnover.groups.candidate_row`; in parallel runs by the worker that
        fitted the series), so this table, the report and the summaries share one
        computation of every interval.
        """
        frames = []
        for name, fs in self.parts.items():
            tab = fs.table(self.level, self.interval_method)
            if tab.empty:
                continue
            tab.insert(0, "part", name)
            if self.ci == "bootstrap":
                tab = self._add_bootstrap(name, fs, tab)
            frames.append(tab)
        if not frames:
            return pd.DataFrame()
        return pd.concat(frames, ignore_index=True, sort=False)

    def _add_bootstrap(self, name, fs, tab):
        from .resampling import bootstrap

        rows = []
        workers = parallel_workers(self.n_jobs)
        for key, r in fs.items():
            if r.best is None:
                continue
            b = self.bootstrap.get((name, key))
            if b is None:
                res = bootstrap(r.best, n=self.n_boot, kind="residual",
                                rng=series_seed(self.seed, name, key), n_jobs=workers,
                                progress=False)
                b = res.intervals(self.level, method="percentile")
                b.attrs["n_failed"] = res.n_failed
                self.bootstrap[(name, key)] = b
            row = dict(zip(fs.by, key))
            row["candidate"] = r.chosen
            bi = b.set_index("parameter")
            for j in range(1, 5):
                q = f"half_life_{j}"
                if q in bi.index:
                    row[f"boot_lower_{j}"] = bi.loc[q, "lower"]
                    row[f"boot_upper_{j}"] = bi.loc[q, "upper"]
                    row[f"boot_lower_status_{j}"] = bi.loc[q, "lower_status"]
                    row[f"boot_upper_status_{j}"] = bi.loc[q, "upper_status"]
            row["boot_failed"] = b.attrs.get("n_failed", 0)
            row["boot_n"] = self.n_boot
            rows.append(row)
        if not rows:
            return tab
        extra = pd.DataFrame(rows)
        keys = list(fs.by) + ["candidate"]
        tab[keys] = tab[keys].astype(str)
        extra[keys] = extra[keys].astype(str)
        return tab.merge(extra, on=keys, how="left")

    def fits_json(self) -> dict:
        """Every fitted candidate as :meth:`TurnoverFit.to_dict`, with its keys.

        Returns
        -------
        dict
            ``{"format": "isoturnover-fits", "version": 1, "level", "ci", "fits": [...]}``,
            each entry with ``part``, ``key`` (column → value), ``candidate``, ``chosen``
            and ``fit``; JSON-safe (read back with :func:`load_fits`).
        """
        entries = []
        for name, fs in self.parts.items():
            for key, r in fs.items():
                for label, f in r.fits.items():
                    if f is None:
                        continue
                    entries.append({"part": name, "key": dict(zip(fs.by, key)),
                                    "candidate": label, "chosen": label == r.chosen,
                                    "fit": f.to_dict()})
        return {"format": "isoturnover-fits", "version": 1, "level": self.level,
                "ci": self.ci, "fits": entries}

    def merged(self) -> FitSet:
        """All parts as one FitSet keyed (part, subject, tissue, isotope).

        Returns
        -------
        FitSet
            The same series results; a destructive series (no subject key) has the
            subject ``"all animals"``.
        """
        results = {}
        for name, fs in self.parts.items():
            for key, r in fs.items():
                km = dict(zip(fs.by, key))
                subject = km.get("subject")
                if subject is None:
                    subject = "all animals"
                nk = (name, str(subject), str(km.get("tissue", "")), str(km.get("isotope", "")))
                results[nk] = r
        first = next(iter(self.parts.values()), None)
        unit = first.time_unit if first is not None else "d"
        return FitSet(("part", "subject", "tissue", "isotope"), results, level=self.level,
                      method=self.interval_method, time_unit=unit)

    def write(self, out_dir, *, force=False, figures=True, figure_jobs=None) -> list[Path]:
        """Write results.csv, fits.json, the report and CAUTION.txt, in one move.

        Written through :func:`~isoturnover.outputdir.write_output`: every file is made in
        a temporary folder beside ``out_dir``, which then takes the place of ``out_dir`` in
        one move, under a lock on the folder. Nothing is written if anything fails; a run
        killed at any moment leaves the previous output whole (what it left beside the
        folder is tidied by the next run); a second run into the same folder at the same
        time is refused. ``.isoturnover-manifest.json`` in the folder lists the files
        written. Text cells of ``results.csv`` that a spreadsheet would read as a formula
        (starting with ``=``, ``+``, ``-``, ``@``, tab or carriage return, e.g. a subject
        named ``=HYPERLINK(...)``) get a single quote in front
        (:func:`~isoturnover.outputdir.neutralise_formulas`); numeric columns are written
        as they are.

        Parameters
        ----------
        out_dir : str or path-like
            Output folder (created, with its parents, when missing).
        force : bool, default=False
            Replace a non-empty folder: the files this package wrote there (listed in its
            manifest) are replaced, every other file the user put there (anywhere, the
            figures folder included) is kept, copied into the new output at the same
            place. A non-empty folder without a manifest is replaced only when it holds
            nothing but files this package names (results.csv, fits.json, report.md,
            report.html, CAUTION.txt, report_figures/*.png).
        figures : bool, default=True
            Draw the report's figures.
        figure_jobs : FigureJobs, optional
            Figure workers already drawing figures of these fits (see
            :func:`~isoturnover.report.write_report`); shut down when the report is done.

        Returns
        -------
        list of pathlib.Path
            The files written (the manifest last).

        Raises
        ------
        DataError
            When ``out_dir`` is a file or a dangling link, cannot be made or written, is a
            non-empty folder without ``force`` (or, even with it, holds files of the user
            and no manifest), holds a file of the user where this run writes one, or is
            being written by another run (see :func:`check_out_dir`).
        """
        from .report import write_report

        def build(tmp: Path) -> None:
            table = neutralise_formulas(self.results_table())
            table.to_csv(tmp / "results.csv", index=False)
            with open(tmp / "fits.json", "w", encoding="utf-8") as fh:
                # one string from the C encoder (json.dump streams through the
                # pure-Python one): the same text, several times faster
                fh.write(json.dumps(self.fits_json(), allow_nan=True))
            boot = None
            if self.ci == "bootstrap":  # results_table above filled self.bootstrap
                boot = {}
                for (name, key), b in self.bootstrap.items():
                    km = dict(zip(self.parts[name].by, key))
                    subject = km.get("subject")
                    boot[(name, "all animals" if subject is None else str(subject),
                          str(km.get("tissue", "")), str(km.get("isotope", "")))] = b
            write_report(self.merged(), tmp / "report", title=self.title, level=self.level,
                         method=self.interval_method if boot is None else "bootstrap",
                         figures=figures, bootstrap=boot, n_boot=self.n_boot,
                         seed=self.seed, n_jobs=None if self.n_jobs == 1 else self.n_jobs,
                         figure_jobs=figure_jobs)
            (tmp / "CAUTION.txt").write_text(CAUTION + "\n", encoding="utf-8")

        return write_output(out_dir, build, force=force)


def series_seed(seed, part, key):
    """The random seed of one series: from the run's ``seed`` and the series' name.

    A :class:`numpy.random.SeedSequence` of ``seed`` and four 32-bit words of the SHA-256
    digest of the part's name and the key's values (as text), so it depends on what the
    series is, not on where it stands in the run or how many workers run it.

    Parameters
    ----------
    seed : int or None
        The run's seed (a non-negative integer).
    part : str
        Name of the part of the study.
    key : tuple or scalar
        Values of the series' key columns.

    Returns
    -------
    numpy.random.SeedSequence or None
        None when ``seed`` is None (fresh randomness).

    Raises
    ------
    DataError
        When ``seed`` is not a non-negative integer or None.
    """
    if _check_seed(seed) is None:
        return None
    if not isinstance(key, tuple):
        key = (key,)
    text = json.dumps([str(part), *(str(k) for k in key)], ensure_ascii=False)
    digest = hashlib.sha256(text.encode("utf-8")).digest()
    words = [int.from_bytes(digest[i:i + 4], "little") for i in range(0, 16, 4)]
    return np.random.SeedSequence([int(seed), *words])


def _check_seed(seed):
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, (int, np.integer))
                             or seed < 0):
        raise DataError(f"'seed' must be a non-negative integer or None; got {seed!r}")
    return seed


def load_fits(path_or_dict) -> list[dict]:
    """Read a ``fits.json`` written by :meth:`Analysis.write`.

    The file is checked before any fit is rebuilt (see :func:`~isoturnover.load_fit`):
    its nesting depth before it is parsed, then every entry against what
    :meth:`Analysis.fits_json` writes, so a truncated, edited or damaged file raises
    :class:`~isoturnover.errors.DataError` naming the file and the key path
    (``fits[3].fit.solution.theta[1] (k1): not a finite number (got nan)``), or the line
    and column of a JSON error.

    Parameters
    ----------
    path_or_dict : str, path-like or dict
        The file, or its content already parsed (not modified).

    Returns
    -------
    list of dict
        One entry per fitted candidate with ``part``, ``key``, ``candidate``, ``chosen``
        and the rebuilt ``fit`` (:class:`~isoturnover.TurnoverFit`).

    Raises
    ------
    DataError
        When the file cannot be read, is not valid JSON, or its content is not a complete
        and valid fits.json of isoturnover.
    """
    from .serialization import FORMAT_VERSION, load_fit, read_json

    if isinstance(path_or_dict, dict):
        d, source = path_or_dict, None
        head = "'path_or_dict' is not a valid fits.json record"
    else:
        try:
            source = os.fspath(path_or_dict)
        except TypeError:
            raise DataError("'path_or_dict' must be the path of a fits.json or its parsed "
                            f"content (a dict); got {type(path_or_dict).__name__}") from None
        d = read_json(source)
        head = source

    def fail(path, problem):
        raise DataError(f"{head}: {path}: {problem}")

    def scalar(v):
        return v is None or isinstance(v, (str, bool, int, float))

    if not isinstance(d, dict) or d.get("format") != "isoturnover-fits":
        got = (f"key 'format' is {d.get('format')!r}" if isinstance(d, dict) else
               f"the content is a JSON {type(d).__name__}, not an object")
        raise DataError(f"{head}: not a fits.json written by isoturnover ({got}; "
                        "'isoturnover-fits' expected)")
    v = d.get("version")
    if not isinstance(v, int) or isinstance(v, bool) or v != FORMAT_VERSION:
        fail("version", f"format version {v!r} is not read by this isoturnover (it reads "
                        f"version {FORMAT_VERSION})")
    if "level" in d and not (isinstance(d["level"], (int, float))
                             and not isinstance(d["level"], bool) and 0 < d["level"] < 1):
        fail("level", f"not a confidence level between 0 and 1 (got {d['level']!r})")
    if "ci" in d and not isinstance(d["ci"], str):
        fail("ci", f"not a string (got {d['ci']!r:.40})")
    if not isinstance(d.get("fits"), list):
        fail("fits", f"missing or not an array (got {type(d.get('fits')).__name__})")
    out = []
    for i, e in enumerate(d["fits"]):
        p = f"fits[{i}]"
        if not isinstance(e, dict):
            fail(p, f"not an object (got {type(e).__name__})")
        for k, kind in (("part", str), ("key", dict), ("candidate", str), ("chosen", bool),
                        ("fit", dict)):
            if k not in e:
                fail(f"{p}.{k}", f"missing (section {p!r} lacks {k!r})")
            if not isinstance(e[k], kind):
                fail(f"{p}.{k}", f"not {'an object' if kind is dict else 'a ' + kind.__name__}"
                                 f" (got {e[k]!r:.40} ({type(e[k]).__name__}))")
        for k, kv in e["key"].items():
            if not scalar(kv):
                fail(f"{p}.key.{k}", f"not a text or number (got {type(kv).__name__})")
        e = dict(e)
        e["fit"] = load_fit(e["fit"], name=f"{p}.fit", source=source)
        out.append(e)
    return out


def _parse_pools(pools):
    """``pools`` as a tuple of integers 1-4 (from ``"1,2"``, an integer or a sequence)."""
    given = pools
    if isinstance(pools, str):
        try:
            pools = tuple(int(p) for p in pools.split(",") if p.strip())
        except ValueError:
            raise DataError(f"'pools' (--pools) must be a comma-separated list of integers "
                            f"1-4, such as 1,2; got {given!r}") from None
    elif isinstance(pools, (int, np.integer)) and not isinstance(pools, bool):
        pools = (pools,)
    try:
        pools = tuple(pools)
    except TypeError:
        pools = None
    if not pools or any(isinstance(p, bool) or not isinstance(p, (int, np.integer))
                        or not 1 <= p <= 4 for p in pools):
        raise DataError(f"'pools' (--pools) must be integers from 1 to 4; got {given!r}")
    return tuple(int(p) for p in pools)


def _parse_by(by, columns):
    """``by`` as a tuple of column names of the samples table (from ``"subject,tissue"`` or
    a sequence), or None (the default keys); a DataError naming the table's columns."""
    if by is None:
        return None
    given = by
    if isinstance(by, str):
        by = [x.strip() for x in by.split(",")]
    try:
        by = tuple(by)
    except TypeError:
        by = ()
    known = ", ".join(map(str, columns))
    if not by or any(not isinstance(x, str) or not x for x in by):
        raise DataError(f"'by' (--by) must name one or more columns of the samples table, "
                        f"such as subject,tissue,isotope; got {given!r}; its columns: {known}")
    unknown = [x for x in by if x not in columns]
    if unknown:
        raise DataError(f"'by' (--by) names {unknown[0]!r}, which is not a column of the "
                        f"samples table; its columns: {known}")
    if len(set(by)) < len(by):
        raise DataError(f"'by' (--by) names a column twice: {given!r}")
    return by


def _dated_starts(diets, diet_columns) -> bool:
    """Whether a diets table's ``start`` column holds dates (some non-blank cell that is
    not a number) rather than times since the switch."""
    from .data import DIET_COLUMNS
    from .tables import apply_columns, cell_text, load_table

    table = load_table(diets, None)
    apply_columns(table, diet_columns, DIET_COLUMNS, "diets")
    if "start" not in table.frame.columns:
        return False                       # read_diets names the missing column
    text, blank = cell_text(table.frame["start"])
    text = text[~blank].str.replace(",", ".", regex=False)
    return bool(pd.to_numeric(text, errors="coerce").isna().any())


def _switch_dates_of_diets(diets, diet_columns, date_format) -> pd.DataFrame:
    """One switch date per group (or subject) from a diets table whose ``start`` column
    holds dates: the earliest diet change of the group, i.e. the earliest start after the
    group's first start of any isotope."""
    from .data import DIET_COLUMNS
    from .sampletimes import parse_date
    from .tables import apply_columns, cell_text, load_table

    if not _dated_starts(diets, diet_columns):
        raise DataError("switch_dates='diets' (--switch-dates diets) needs dates in the "
                        "start column of the diets table (--diets); it holds times")
    table = load_table(diets, None)
    apply_columns(table, diet_columns, DIET_COLUMNS, "diets")
    f = table.frame
    keys = [c for c in ("group", "subject") if c in f.columns]
    if not keys or "isotope" not in f.columns:
        return None                        # read_diets names the missing column
    rows = pd.DataFrame({c: cell_text(f[c])[0].to_numpy() for c in keys + ["isotope"]})
    rows["start"] = [parse_date(v, f"{table.label}, start of row {i + 1}", date_format)
                     for i, v in enumerate(f["start"])]
    out = []
    for key, g in rows.groupby(keys, sort=True):
        key = key if isinstance(key, tuple) else (key,)
        changes = [sorted(set(h["start"]))[1:] for _, h in g.groupby("isotope")]
        changes = [c[0] for c in changes if c]
        if not changes:
            raise DataError(f"{table.label}: {', '.join(f'{k}={v!r}' for k, v in zip(keys, key))}"
                            f" has a single start date, so no diet switch to take the switch "
                            f"date from (--switch-dates diets)")
        out.append(dict(zip(keys, key), switch_date=min(changes)))
    return pd.DataFrame(out)


def _switch_dates_of_samples(s, keys) -> pd.DataFrame:
    """The switch date of each row of a read samples table (date minus time since the
    switch, to the second), one row per distinct value of ``keys``."""
    unit = {"d": "D", "h": "h", "w": "W"}[s.attrs.get("time_unit", "d")]
    sw = (pd.to_datetime(s["date"]) - pd.to_timedelta(s["time"].to_numpy(), unit=unit))
    frame = s[list(keys)].astype(str).assign(switch_date=sw.dt.round("s").to_numpy())
    return frame.drop_duplicates().reset_index(drop=True)


def _read_tables(samples, diets, masses, *, time_unit, date_format, columns, diet_columns,
                 mass_columns, switch_date, switch_dates, unit, baseline, mass_unit=None,
                 on_bad_rows="raise"):
    """The three tables read and checked, dates turned into times since the switch.

    The samples' switch date (one, or one per group or subject: a frame, a column name, or
    ``"diets"`` for each group's first diet change in the diets table) also converts a
    diets table whose ``start`` holds dates and a masses table with a ``date`` column: each
    subject's (or group's) switch date is the one its samples were converted with."""
    from os import PathLike

    from .data import read_diets, read_masses, read_samples

    if switch_date is not None and switch_dates is not None:
        raise DataError("give one switch date for all (--switch-date) or one per group or "
                        "subject (--switch-dates), not both")
    if isinstance(switch_dates, str) and switch_dates == "diets":
        if diets is None:
            raise DataError("switch_dates='diets' (--switch-dates diets) needs a diets "
                            "table (--diets)")
        switch_dates = _switch_dates_of_diets(diets, diet_columns, date_format)
    elif isinstance(switch_dates, (str, PathLike)) and (
            Path(switch_dates).is_file() or not isinstance(switch_dates, str)
            or Path(switch_dates).suffix.lower() in (".csv", ".tsv", ".txt", ".xlsx", ".xlsm",
                                                     ".xls")):
        from .tables import load_table

        switch_dates = load_table(switch_dates, None).frame  # names a missing file
    common = dict(time_unit=time_unit, date_format=date_format, on_bad_rows=on_bad_rows)
    s = read_samples(samples, columns=columns, switch_date=switch_date,
                     switch_dates=switch_dates, unit=unit, baseline=baseline, **common)
    dated = "date" in s.columns and (switch_date is not None or switch_dates is not None)

    def switch_for(table_keys):
        if switch_date is not None:
            return {"switch_date": switch_date}
        keys = [k for k in table_keys if k in s.columns]
        if not dated or not keys:
            return {}
        return {"switch_dates": _switch_dates_of_samples(s, keys)}

    d = m = None
    if diets is not None:
        sw = {}
        if dated and _dated_starts(diets, diet_columns):
            from .tables import load_table

            have = load_table(diets, None).frame.columns
            mapped = set((diet_columns or {}).values()) | set(have)
            sw = switch_for([k for k in ("group", "subject") if k in mapped])
        d = read_diets(diets, columns=diet_columns, **sw, **common)
    if masses is not None:
        sw = {}
        if dated:
            from .tables import load_table

            have = set(load_table(masses, None).frame.columns)
            have |= set((mass_columns or {}).values())
            if "date" in have and "time" not in have:
                sw = switch_for(["subject"])
        m = read_masses(masses, columns=mass_columns, mass_unit=mass_unit, **sw, **common)
    return s, d, m


def analyse(samples, *, diets=None, masses=None, pools=(1, 2), structures=("parallel",),
            by=None, ci="profile", level=0.95, time_unit="d", growth_curve="logistic",
            per_diet_separation="auto", lag=False, progress=False, n_boot=499, seed=1,
            title="Turnover analysis", n_jobs=1, date_format=None, criterion="aicc",
            separation="difference", initial="equilibrium", fixed=None, absolute_sigma=False,
            loss="linear", columns=None, diet_columns=None, mass_columns=None,
            switch_date=None, switch_dates=None, unit="delta", baseline=None,
            mass_unit=None, on_bad_rows="raise", scale="delta", growth_rate=None,
            segment_origin="base", formation_lag=0.0, length_unit="mm") -> Analysis:
    """Fit every series of a samples table and choose its model (pools, separation) by AICc.

    Parameters
    ----------
    samples : path or DataFrame
        The samples table (:func:`~isoturnover.read_samples`).
    diets, masses : path or DataFrame, optional
        The diets and body-masses tables (:func:`~isoturnover.read_diets`,
        :func:`~isoturnover.read_masses`).
    pools : str or sequence of int, default=(1, 2)
        Numbers of parallel pools to try (1-4); ``"1,2,3"`` as on the command line.
    structures : sequence of {"parallel", "chain"}, default=("parallel",)
        Model structures to try.
    by : tuple of str or str, optional
        Series keys, columns of the samples table (``"subject,tissue,isotope"`` as on the
        command line); default (subject, tissue, isotope), or (tissue, isotope) when every
        subject has a single sampling time (destructive design).
    ci : {"profile", "asymptotic", "bootstrap"}, default="profile"
        Interval method; "bootstrap" adds residual-bootstrap percentile intervals for the
        chosen fits' half-lives (``n_boot`` replicates; each series seeded from ``seed``
        and its own key, see :func:`series_seed`).
    level : float, default=0.95
        Confidence level in (0, 1).
    time_unit : str, default="d"
        Time unit of the tables.
    growth_curve : str, default="logistic"
        Growth curve fitted to the masses (:func:`~isoturnover.fit_growth`).
    per_diet_separation : bool or "auto", default="auto"
        One diet-tissue separation per diet value (True), one shared by all diets
        (False), or both as candidates (``"auto"``, see Notes).
    lag : bool, default=False
        Fit a pure delay after each switch.
    progress : bool, default=False
        Show a progress bar.
    n_boot : int, default=499
        Bootstrap replicates per chosen fit (``ci="bootstrap"``).
    seed : int or None, default=1
        Seed of the bootstrap draws (None: fresh randomness).
    title : str, default="Turnover analysis"
        Title of the report.
    n_jobs : int, default=1
        Parallel workers (joblib; -1: all cores) for the series' fits and the bootstrap
        refits. The results are those of ``n_jobs=1``; without joblib a warning is given
        and the work runs serially.
    date_format : str, optional
        How text dates that are not ISO 8601 are written in the tables (``"%d/%m/%Y"``),
        passed to the readers (:func:`~isoturnover.read_samples`).
    criterion : {"aicc", "aic", "bic"}, default="aicc"
        Information criterion that chooses each series' model.
    separation : {"difference", "epsilon"}, default="difference"
        Form of the diet-tissue separation (:class:`~isoturnover.TurnoverModel`).
    initial : {"equilibrium", "free"}, default="equilibrium"
        Tissue at equilibrium with the first diet, or its starting value fitted.
    fixed : dict of str to float, optional
        Parameters held at given values in every fit (``{"delta0": -25.0}``).
    absolute_sigma : bool, default=False
        Treat the samples' ``sd`` as known analytic standard deviations (no rescaling by
        the residual variance).
    loss : {"linear", "soft_l1", "huber"}, default="linear"
        Loss of every fit; the last two are robust to outlying points.
    columns, diet_columns, mass_columns : dict of str to str, optional
        Your column names to the canonical ones, per table (``{"animal": "subject"}``).
    mass_unit : str, optional
        Unit of the body masses (``"kg"``), shown on the growth figures and in the report.
    scale : {"delta", "atom_fraction"}, default="delta"
        Mixing scale of the pools (see :func:`~isoturnover.fit_each`).
    growth_rate : float, table or dict of str → float, optional
        Growth rate (length per time unit) of the tissues sampled as segments (samples with
        ``segment_start``/``segment_end``): one for all or by tissue, ``{"hair": 0.4}``
        (see :func:`~isoturnover.fit_each`).
    segment_origin : {"base", "tip"}, default="base"
        Where segment distances are measured from.
    formation_lag : float, default=0.0
        Time (≥ 0) from a segment's formation to its emergence at the base.
    length_unit : str, default="mm"
        Unit of the segment distances (see :func:`~isoturnover.fit_each`).
    on_bad_rows : {"raise", "drop"}, default="raise"
        A bad row of any table: an error naming file, row and column, or (``"drop"``) a
        warning listing every dropped row (see :func:`~isoturnover.read_samples`).
    switch_date : date-like, optional
        One diet-switch date for every row: the tables' dates become times since it (the
        samples' ``date`` column; a diets table whose ``start`` holds dates; a masses
        table with a ``date`` column).
    switch_dates : str, path or DataFrame, optional
        One switch date per group or subject: a table (file or frame) with a
        ``switch_date`` column and a ``group`` and/or ``subject`` column; ``"diets"``, each
        group's (or subject's) earliest diet change in the diets table, whose ``start``
        then holds dates; or the name of a samples column holding each row's switch date.
        Dated diets and masses tables are converted with their subjects' switch dates.
    unit : {"delta", "atom_percent", "atom_percent_excess"}, default="delta"
        Unit of the samples' ``value``; atom % and atom % excess are converted to δ (‰)
        by :func:`~isoturnover.read_samples` before any fit.
    baseline : float or dict, optional
        δ (‰) of the unenriched material for ``unit="atom_percent_excess"``: one number, or
        one per isotope code.

    Returns
    -------
    Analysis
        One part, ``"samples"``, holding the :class:`~isoturnover.FitSet`; write it with
        :meth:`Analysis.write`.

    Raises
    ------
    DataError
        For a bad table or option, before any series is fitted.

    Notes
    -----
    The diet-tissue separation can depend on the diet (Δ15N on its protein quality:
    Robbins et al. 2005, Oecologia 144:534–540). Forcing one shared separation on such
    data fixes the size of each step to the change in the diet's value, and the misfit
    goes into the rates or into a spurious extra pool. With ``"auto"`` every candidate
    (each number of pools, each structure) is fitted twice where the series' diets table
    holds two or more distinct known diet values: with one shared separation and with one
    per diet value (one parameter more per extra value; candidate label ending in
    ``", separation per diet"``). All candidates of a series are ranked by the same
    criterion, AICc (Hurvich & Tsai 1989), so the per-diet variant is chosen only when its
    drop in residual sum of squares pays for its extra parameters: when the data ask for
    it. A series with a single diet, or without a diets table (a step switch, whose
    plateaus are free anyway), gets no per-diet variant; nor does one too short for the
    variant's AICc to be defined.
    """
    check_choice("ci", ci, CI_METHODS)
    level = check_level(level)
    n_boot = check_positive_int("n_boot", n_boot)
    n_jobs = parallel_workers(n_jobs)  # 1 (after one warning) when joblib is missing
    _check_seed(seed)
    pools = _parse_pools(pools)
    s, d, m = _read_tables(samples, diets, masses, time_unit=time_unit,
                           date_format=date_format, columns=columns,
                           diet_columns=diet_columns, mass_columns=mass_columns,
                           switch_date=switch_date, switch_dates=switch_dates, unit=unit,
                           baseline=baseline, mass_unit=mass_unit,
                           on_bad_rows=on_bad_rows)
    by = _parse_by(by, [c for c in s.columns if c != "is_replicate_group"])
    if by is None:
        # a point is a sampling time (and a segment: the segments of one hair are points)
        pt = s["time"].astype(str)
        if "segment_start" in s.columns:
            pt = pt + "|" + s["segment_start"].astype(str)
        per = pt.groupby([s["subject"], s["tissue"], s["isotope"]]).nunique()
        by = ("tissue", "isotope") if int(per.max()) == 1 and s["subject"].nunique() > 1 \
            else ("subject", "tissue", "isotope")
    fs = fit_each(s, by=by, pools=pools, structures=structures, diets=d, masses=m,
                  level=level, method="asymptotic" if ci == "asymptotic" else "profile",
                  lag=lag, growth_curve=growth_curve, per_diet_separation=per_diet_separation,
                  progress=progress, n_jobs=n_jobs, criterion=criterion,
                  separation=separation, initial=initial, fixed=fixed,
                  absolute_sigma=absolute_sigma, loss=loss, scale=scale,
                  growth_rate=growth_rate, segment_origin=segment_origin,
                  formation_lag=formation_lag, length_unit=length_unit)
    return Analysis({"samples": fs}, level=level, ci=ci, n_boot=n_boot, seed=seed,
                    title=title, n_jobs=n_jobs)


def run_demo(out_dir=None, *, force=False, progress=False, figures=True,
             n_jobs=1) -> Analysis:
    """Analyse the invented demo experiment (goats, breath in hours, fish) end to end.

    Goats: plasma and red-cell δ13C and plasma δ15N under the pens' diet histories (pen B
    back to hay on day 120), growth dilution from each goat's fitted logistic growth curve
    (its uncertainty propagated). Breath CO2: a step switch in hours, one to three pools.
    Fish: a destructive design (one fish per sample) with exponential growth fitted across
    fish. Goats and fish are fitted as :func:`analyse` fits them: every candidate with one
    shared diet-tissue separation and with one per ration, chosen by AICc (the demo's
    plasma δ15N separation differs between hay and maize; see :func:`analyse`, Notes).
    Goat tail hair: δ13C segment profiles cut on day 180, fitted as segments with the
    invented growth rate of 0.4 mm/d (``sample_data/README.md``).

    Parameters
    ----------
    out_dir : str or path-like, optional
        Write results, report and figures here (see :meth:`Analysis.write`); without it
        nothing is written.
    force : bool, default=False
        Write into a non-empty folder.
    progress : bool, default=False
        Show progress bars.
    figures : bool, default=True
        Draw the report's figures.
    n_jobs : int, default=1
        Parallel workers (joblib; -1: all cores) for the series' fits; the results are
        those of ``n_jobs=1``. Without joblib a warning is given and the work runs
        serially.

    Returns
    -------
    Analysis
        Five parts: "goats d13C", "goats d15N", "goat breath", "goat hair" and "fish".

    Raises
    ------
    DataError
        For a bad ``n_jobs``, or an ``out_dir`` that is a file or a non-empty folder
        without ``force`` (checked before any fit).
    """
    from .data import read_diets, read_masses, read_samples
    from .demo import demo_path

    workers = parallel_workers(n_jobs)  # 1 (after one warning) when joblib is missing
    if out_dir is not None:
        check_out_dir(Path(out_dir), force)
    gs = read_samples(demo_path("goat_samples"))
    gd = read_diets(demo_path("goat_diets"))
    gm = read_masses(demo_path("goat_masses"), mass_unit="kg")
    breath = read_samples(demo_path("goat_breath"), time_unit="h")
    fsam = read_samples(demo_path("fish_samples"))
    fd = read_diets(demo_path("fish_diets"))
    fm = read_masses(demo_path("fish_masses"), mass_unit="g")
    parts = {}
    common = dict(per_diet_separation="auto", progress=progress, n_jobs=workers)
    # the report's figures of each part are drawn by worker processes while the next parts
    # are fitted (the same figures, drawn the same way, as the report would draw them)
    ahead = _figures_ahead(out_dir is not None and figures, workers)
    try:
        for iso in ("d13C", "d15N"):
            parts[f"goats {iso}"] = fit_each(gs[gs["isotope"] == iso], pools=(1, 2),
                                             diets=gd, masses=gm, growth_curve="logistic",
                                             **common)
            _draw_ahead(ahead, parts[f"goats {iso}"])
        parts["goat breath"] = fit_each(breath, pools=(1, 2, 3), progress=progress,
                                        n_jobs=workers)
        _draw_ahead(ahead, parts["goat breath"])
        parts["goat hair"] = fit_each(read_samples(demo_path("goat_hair")), pools=(1, 2),
                                      diets=gd, growth_rate={"hair": DEMO_HAIR_GROWTH},
                                      **common)
        _draw_ahead(ahead, parts["goat hair"])
        parts["fish"] = fit_each(fsam, by=("tissue", "isotope"), pools=(1, 2), diets=fd,
                                 masses=fm, growth_curve="exponential", **common)
        a = Analysis(parts, title="Demo analysis (invented data)", n_jobs=workers,
                     level=_DEMO_LEVEL)
        if a.n_fitted() == 0:  # pragma: no cover - the demo data always fit
            raise FitError("no demo series could be fitted")
    except BaseException:
        if ahead is not None:
            ahead.cancel()
        raise
    if out_dir is not None:
        a.write(out_dir, force=force, figures=figures, figure_jobs=ahead)
    return a


_DEMO_LEVEL = 0.95  # confidence level of the demo's intervals, bands and figures
#: Growth rate of the demo goats' tail hair (mm/d; invented, sample_data/README.md).
DEMO_HAIR_GROWTH = 0.4


def _figures_ahead(wanted, workers):
    """Figure workers for the report of a run that fits its study in parts, or None."""
    if not wanted:
        return None
    from .reportfigures import FigureJobs, figure_workers

    n = figure_workers(None if workers == 1 else workers, 8)
    return FigureJobs(n, _DEMO_LEVEL) if n > 1 else None


def _draw_ahead(ahead, fs):
    """Start the report's figures of one fitted part (as :func:`write_report` adds them)."""
    if ahead is None:
        return
    for r in fs.values():
        f = r.best
        if f is None:
            continue
        ahead.draw_ahead("overview", f)
        if getattr(f.model, "record", "points") == "segments":
            ahead.draw_ahead("segments", f)
        g = getattr(f.model, "growth", None)
        if g is not None and hasattr(g, "t") and hasattr(g, "mass"):
            ahead.draw_ahead("growth", (g, f.time_unit,
                                        f if hasattr(f, "growth_share_curve") else None))

