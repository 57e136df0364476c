"""The main job end to end: samples in; fits, choices, intervals, figures and a report out.

:func:`analyse` fits every series of a samples table (with diets and masses when given),
chooses each series' model (number of pools, one or per-diet separations) by AICc and
computes intervals; :class:`Analysis` writes
``results.csv`` (one row per series and candidate), ``fits.json`` (reloadable with
:func:`load_fits` or, one fit at a time, :func:`~isoturnover.load_fit`), a Markdown and HTML
report with figures. :func:`run_demo` does all of it on the invented demo experiment.

Writing is all or nothing: every file is made in a temporary folder next to the output
folder and moved into place only when all of them exist.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .conventions import check_choice, check_level, check_positive_int
from .errors import DataError, FitError
from .groups import FitSet, fit_each, parallel_workers

__all__ = ["analyse", "Analysis", "run_demo", "load_fits", "series_seed", "CAUTION",
           "CI_METHODS"]

CI_METHODS = ("profile", "asymptotic", "bootstrap")

CAUTION = (
    "Animal experiments and field sampling need the approval of the local animal-care "
    "authority (human hair or blood: a human-research ethics board). These results and plans "
    "support that process; they do not replace it."
)


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
            and :attr:`interval_method`); with ``ci="bootstrap"`` also ``boot_lower_i``,
            ``boot_upper_i`` (residual-bootstrap percentile interval of half-life i, in the
            data's time unit), ``boot_failed`` and ``boot_n`` on the chosen rows. Empty when
            no part has a series.
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

    def write(self, out_dir, *, force=False, figures=True) -> list[Path]:
        """Write results.csv, fits.json, the report and CAUTION.txt (all or nothing).

        Every file is made in a temporary folder beside ``out_dir`` and moved into place
        only when all of them exist; nothing is written if anything fails.

        Parameters
        ----------
        out_dir : str or path-like
            Output folder (created when missing).
        force : bool, default=False
            Write into a non-empty folder, replacing its files of the same names.
        figures : bool, default=True
            Draw the report's figures.

        Returns
        -------
        list of pathlib.Path
            The files written.

        Raises
        ------
        DataError
            When ``out_dir`` is a file, or a non-empty folder without ``force``.
        """
        from .report import write_report

        out = Path(out_dir)
        check_out_dir(out, force)
        parent = out.parent if str(out.parent) else Path(".")
        parent.mkdir(parents=True, exist_ok=True)
        tmp = Path(tempfile.mkdtemp(prefix=".isoturnover-", dir=parent))
        try:
            table = self.results_table()
            table.to_csv(tmp / "results.csv", index=False)
            with open(tmp / "fits.json", "w", encoding="utf-8") as fh:
                json.dump(self.fits_json(), fh, allow_nan=True)
            write_report(self.merged(), tmp / "report", title=self.title, level=self.level,
                         method=self.interval_method, figures=figures)
            (tmp / "CAUTION.txt").write_text(CAUTION + "\n", encoding="utf-8")
            written = _move_tree(tmp, out)
        except BaseException:
            shutil.rmtree(tmp, ignore_errors=True)
            raise
        shutil.rmtree(tmp, ignore_errors=True)
        return written


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


def check_out_dir(out: Path, force: bool):
    """Refuse a non-empty output folder unless ``force`` (before any work is done).

    Parameters
    ----------
    out : pathlib.Path
        The output folder (it need not exist).
    force : bool
        Accept a non-empty folder.

    Raises
    ------
    DataError
        When ``out`` is a file, or a non-empty folder without ``force``.
    """
    if out.exists() and not out.is_dir():
        raise DataError(f"output path {str(out)!r} exists and is not a folder")
    if out.exists() and any(out.iterdir()) and not force:
        raise DataError(f"output folder {str(out)!r} is not empty; choose another folder or "
                        "pass --force (force=True) to replace its files")


def _move_tree(tmp: Path, out: Path) -> list[Path]:
    if not out.exists():
        os.replace(tmp, out)
        tmp.mkdir()  # so the caller's cleanup finds a folder
        return sorted(p for p in out.rglob("*") if p.is_file())
    written = []
    for src in tmp.iterdir():  # a folder in the output (figures) is replaced as a whole
        dst = out / src.name
        if src.is_dir() and dst.is_dir():
            shutil.rmtree(dst)
        elif src.is_dir() and dst.exists():
            dst.unlink()
    for src in sorted(p for p in tmp.rglob("*") if p.is_file()):
        dst = out / src.relative_to(tmp)
        dst.parent.mkdir(parents=True, exist_ok=True)
        os.replace(src, dst)
        written.append(dst)
    return written


def load_fits(path_or_dict) -> list[dict]:
    """Read a ``fits.json`` written by :meth:`Analysis.write`.

    Parameters
    ----------
    path_or_dict : str, path-like or dict
        The file, or its content already parsed.

    Returns
    -------
    list of dict
        One entry per fitted candidate with ``part``, ``key``, ``candidate``, ``chosen``
        and the rebuilt ``fit`` (:class:`~isoturnover.TurnoverFit`).

    Raises
    ------
    DataError
        When the content is not a fits.json of isoturnover.
    """
    from .serialization import load_fit

    if isinstance(path_or_dict, dict):
        d = path_or_dict
    else:
        with open(path_or_dict, encoding="utf-8") as fh:
            d = json.load(fh)
    if d.get("format") != "isoturnover-fits":
        raise DataError("not a fits.json written by isoturnover (key 'format' missing)")
    out = []
    for e in d["fits"]:
        e = dict(e)
        e["fit"] = load_fit(e["fit"])
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
        raise DataError(f"'pools' must be integers from 1 to 4; got {given!r}")
    return tuple(int(p) for p in pools)


def analyse(samples, *, diets=None, masses=None, pools=(1, 2), structures=("parallel",),
            by=None, ci="profile", level=0.95, time_unit="d", growth_curve="logistic",
            per_diet_separation="auto", lag=False, progress=False, n_boot=499, seed=1,
            title="Turnover analysis", n_jobs=1, date_format=None) -> Analysis:
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
    by : tuple of str, optional
        Series keys; default (subject, tissue, isotope), or (tissue, isotope) when every
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
    from .data import read_diets, read_masses, read_samples

    check_choice("ci", ci, CI_METHODS)
    level = check_level(level)
    n_boot = check_positive_int("n_boot", n_boot)
    n_jobs = parallel_workers(n_jobs)  # 1 (after one warning) when joblib is missing
    _check_seed(seed)
    pools = _parse_pools(pools)
    s = read_samples(samples, time_unit=time_unit, date_format=date_format)
    d = (read_diets(diets, time_unit=time_unit, date_format=date_format)
         if diets is not None else None)
    m = (read_masses(masses, time_unit=time_unit, date_format=date_format)
         if masses is not None else None)
    if by is None:
        per = s.groupby(["subject", "tissue", "isotope"])["time"].nunique()
        by = ("tissue", "isotope") if int(per.max()) == 1 and s["subject"].nunique() > 1 \
            else ("subject", "tissue", "isotope")
    fs = fit_each(s, by=by, pools=pools, structures=structures, diets=d, masses=m,
                  level=level, method="asymptotic" if ci == "asymptotic" else "profile",
                  lag=lag, growth_curve=growth_curve, per_diet_separation=per_diet_separation,
                  progress=progress, n_jobs=n_jobs)
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
        Four parts: "goats d13C", "goats d15N", "goat breath" and "fish".

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
    gm = read_masses(demo_path("goat_masses"))
    breath = read_samples(demo_path("goat_breath"), time_unit="h")
    fsam = read_samples(demo_path("fish_samples"))
    fd = read_diets(demo_path("fish_diets"))
    fm = read_masses(demo_path("fish_masses"))
    parts = {}
    common = dict(per_diet_separation="auto", progress=progress, n_jobs=workers)
    for iso in ("d13C", "d15N"):
        parts[f"goats {iso}"] = fit_each(gs[gs["isotope"] == iso], pools=(1, 2), diets=gd,
                                         masses=gm, growth_curve="logistic", **common)
    parts["goat breath"] = fit_each(breath, pools=(1, 2, 3), progress=progress,
                                    n_jobs=workers)
    parts["fish"] = fit_each(fsam, by=("tissue", "isotope"), pools=(1, 2), diets=fd,
                             masses=fm, growth_curve="exponential", **common)
    a = Analysis(parts, title="Demo analysis (invented data)", n_jobs=workers)
    if a.n_fitted() == 0:  # pragma: no cover - the demo data always fit
        raise FitError("no demo series could be fitted")
    if out_dir is not None:
        a.write(out_dir, force=force, figures=figures)
    return a

