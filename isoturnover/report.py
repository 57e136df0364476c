"""Markdown and HTML report of a set of turnover fits, with figures.

:func:`write_report` writes ``<stem>.md`` and ``<stem>.html`` side by side, and the figures
as PNG files in a folder ``<stem>_figures/`` next to them. Both documents *reference* the same
PNG files by relative path (they are not embedded), so the two stay small, show the same
images, and the figures can go into a manuscript as they are; move the folder together with
the documents.

Each figure is drawn once. With many figures (eight or more) they are drawn in up to two
worker processes (joblib's loky executor; ``n_jobs`` sets the number) while this process
builds the text; each worker gets the fit pickled and draws it exactly as this process would
(same code, the caller's changed ``rcParams``), so the PNG files do not depend on the number
of workers. The study's overview figure (:func:`isoturnover.plotstudy.plot_study`) opens the
report; notes that hold word for word for every series are shown once at the top.

Writing is all or nothing: the text and the figures are built in memory first, then written
to temporary names in the destination folder and moved into place with :func:`os.replace`.
If anything fails, the temporary files are removed and files that were being replaced are
restored, so no partial report is left behind. Existing files are never replaced unless
``overwrite=True``.
"""

from __future__ import annotations

import datetime
import math
import os
import re
import tempfile
from collections.abc import Mapping
from pathlib import Path
from urllib.parse import quote

from .conventions import CAUTION
from .errors import DataError
from .reportdoc import (
    Doc,
    commit_files,
    fmt_bound,
    fmt_interval,
    fmt_number,
    fmt_text,
    pct_text,
    remove_path,
    render_html,
    render_markdown,
    slug,
    temp_file,
)
from .reportfigures import FigureJobs, figure_workers, render_figures
from .reportmethods import (
    POOL_STATEMENT,
    boot_count,
    boot_half_lives,
    bootstrap_section,
    bootstrap_tables,
    methods_section,
)

__all__ = ["write_report", "CAUTION", "POOL_STATEMENT"]



_CRIT = {"aicc": "AICc", "aic": "AIC", "bic": "BIC"}


# ----------------------------------------------------------------------------------------
# input normalisation
# ----------------------------------------------------------------------------------------
class _Series:
    """One row of the report: a fitted series or one that could not be fitted."""

    def __init__(self, name, key=None, fit=None, result=None, status="ok", reason="",
                 raw=None):
        self.name = name
        self.key = key
        self.raw = name if raw is None else raw  # the series' key as the caller gave it
        self.fit = fit
        self.result = result  # groups.SeriesResult or None
        self.status = status
        self.reason = reason


def _collect(fits):
    from .groups import FitSet
    from .results import TurnoverFit

    if isinstance(fits, FitSet):
        out = []
        for key, r in fits.items():
            name = " / ".join(map(str, key))
            out.append(_Series(name, key=dict(zip(fits.by, key)), fit=r.best, result=r,
                               status=r.status, reason=r.reason, raw=key))
        return out, fits
    if isinstance(fits, TurnoverFit):
        fits = [fits]
    if isinstance(fits, Mapping):
        items = list(fits.items())
        where = "key"
    elif isinstance(fits, (list, tuple)):
        items = [(None, f) for f in fits]
        where = "position"
    else:
        raise DataError("'fits' must be a FitSet (from fit_each), a dict label -> TurnoverFit "
                        f"or a list of TurnoverFit; got {type(fits).__name__}")
    out = []
    seen = set()
    for i, (k, f) in enumerate(items):
        if not isinstance(f, TurnoverFit):
            at = repr(k) if where == "key" else str(i)
            raise DataError(f"'fits' {where} {at}: expected a TurnoverFit; got "
                            f"{type(f).__name__}")
        name = str(k) if k is not None else (str(f.label) if f.label else f"series {i + 1}")
        if name in seen:
            name = f"{name} ({i + 1})"
        seen.add(name)
        out.append(_Series(name, fit=f, raw=k))
    return out, None


# ----------------------------------------------------------------------------------------
# content
# ----------------------------------------------------------------------------------------
def _isotope_text(code):
    from .isotopes import ISOTOPES
    from .plotting import delta_label

    if code in ISOTOPES:
        return delta_label(code).replace(" (‰, ", " (").replace("(‰)", "")
    return str(code)


def _experiment(doc, series, fitset, unit_word):
    fitted = [s for s in series if s.fit is not None]
    vals = {"tissue": set(), "isotope": set(), "subject": set(), "design": set()}
    for s in series:
        if s.key:
            for k in ("tissue", "isotope", "subject"):
                # a fitted series names its animals in data_info (a destructive series is
                # keyed by a label, not by an animal)
                if k in s.key and not (k == "subject" and s.fit is not None):
                    vals[k].add(str(s.key[k]))
        if s.fit is not None:
            info = s.fit.data_info
            for k in ("tissue", "isotope"):
                v = info.get(k) or (s.fit.model.isotope if k == "isotope" else None)
                if v:
                    vals[k].add(str(v))
            if info.get("subject"):
                vals["subject"].add(str(info["subject"]))
            for sub in info.get("subjects") or []:
                vals["subject"].add(str(sub))
            vals["design"].add(str(info.get("design") or "series"))

    def listing(v, fmt=str):
        return ", ".join(fmt(x) for x in sorted(v)) if v else "not recorded"

    designs = {"series": "repeated samples of each animal",
               "destructive": "destructive (one animal per sample)"}
    n_points = sum(s.fit.nobs for s in fitted)
    items = [
        f"Series: {len(series)} ({len(fitted)} fitted, {len(series) - len(fitted)} not fitted)",
        f"Tissues: {listing(vals['tissue'])}",
        f"Isotopes: {listing(vals['isotope'], _isotope_text)}",
        f"Subjects: {listing(vals['subject'])}"
        + (f" ({len(vals['subject'])})" if vals["subject"] else ""),
        f"Time unit: {unit_word}",
        f"Design: {listing(vals['design'], lambda d: designs.get(d, d))}",
        f"Time points fitted (analytic replicates averaged): {n_points}",
    ]
    if fitset is not None:
        cands = []
        for s in series:
            for lab in s.result.reasons:
                if lab not in cands:
                    cands.append(lab)
        crit = {"aicc": "AICc", "aic": "AIC", "bic": "BIC"}.get(fitset.criterion,
                                                               fitset.criterion)
        items.append("Candidate models: " + ", ".join(f"“{c}”" for c in cands)
                     + f"; one chosen per series by {crit}")
    doc.h(2, "Experiment")
    doc.ul(items)


def _weight_of(s, crit_col="weight"):
    r = s.result
    if r is None or r.comparison is None or r.chosen is None:
        return None
    row = r.comparison[r.comparison["label"].astype(str) == str(r.chosen)]
    return float(row[crit_col].iloc[0]) if len(row) else None


def _half_life_text(hl, structure="parallel", mark_profile=False):
    what = "step" if structure == "chain" else "pool"
    parts = []
    for _, h in hl.iterrows():
        txt = (f"{fmt_number(h['half_life'])} "
               f"{fmt_interval(h['lower'], h['upper'], h['lower_status'], h['upper_status'])}")
        if mark_profile and h.get("source") != "bootstrap":
            txt += " (profile: no bootstrap interval)"
        if len(hl) > 1:
            frac = h["fraction"]
            ftxt = f" (f = {fmt_number(frac, 3)})" if isinstance(frac, float) and math.isfinite(
                frac) else ""
            txt = f"{what} {int(h['pool'])}{ftxt}: {txt}"
        parts.append(txt)
    return "; ".join(parts)


def _units_in_order(series):
    units = []
    for s in series:
        if s.fit is not None and s.fit.time_unit not in units:
            units.append(s.fit.time_unit)
    return units


def _summary_table(doc, series, fitset, level, summaries, half_lives, notes, interval_word):
    """The summary: one table per time unit (a column never mixes days with hours)."""
    from .conventions import unit_word as _unit_word

    crit = "AICc" if fitset is None else _CRIT.get(fitset.criterion, str(fitset.criterion))
    units = _units_in_order(series)
    doc.h(2, "Summary")
    if len(units) > 1:
        doc.p("The series were timed in different units ("
              + ", ".join(_unit_word(u) for u in units) + "): each unit has its own table "
              "below, and no time was converted.")
    for u in units:
        word = _unit_word(u)
        if len(units) > 1:
            doc.h(3, f"Series timed in {word}")
        header = ["Series", "Chosen model", "n (time points)",
                  f"Half-life ({word}) [{pct_text(level)} {interval_word} interval]",
                  f"{crit} weight (0–1)", "Notes (own + shared)"]
        rows = []
        for s in series:
            if s.fit is None or s.fit.time_unit != u:
                continue
            w = _weight_of(s)
            hl = _half_life_text(half_lives[s.name], s.fit.kinetics.structure,
                                 mark_profile=interval_word == "bootstrap")
            rows.append([s.name, s.fit.model.describe(), str(s.fit.nobs), hl,
                         "—" if w is None else f"{w:.3f}", _note_count(*notes[s.name])])
        doc.table(header, rows)
    bad = [s for s in series if s.fit is None]
    if bad:
        doc.h(3, "Not fitted")
        doc.table(["Series", "Status"], [[s.name, f"not fitted ({s.status})"] for s in bad])
    doc.p("Interval bounds the data do not close are shown as “open” (the profile never "
          "rises to the critical value within the parameter's range); “failed” means the "
          "interval could not be computed; “(at bound)” marks a bound at the edge of the "
          "parameter's range. With several pools the fraction f of each pool is given. "
          "n counts the time points fitted. "
          + ("The weight is the chosen candidate's weight among the series' candidates."
             if fitset is not None else
             "Each fit was given on its own, so there is no weight (—); use "
             "isoturnover.fit_each to compare candidate models."))


def _note_count(own, shared):
    return str(own) if not shared else f"{own} + {shared}"


def _common_notes(series, notes):
    """Notes word for word the same in every fitted series (at least two), in order."""
    fitted = [s for s in series if s.fit is not None]
    if len(fitted) < 2:
        return []
    first = notes[fitted[0].name]
    return [n for n in first if all(n in notes[s.name] for s in fitted[1:])]


def _shared_notes(series, notes, common):
    """Notes word for word the same in two or more fitted series but not in all: note ->
    numbers of the series (as numbered in the report), in order of first appearance."""
    shared = {}
    idx = 0
    for s in series:
        if s.fit is None:
            continue
        idx += 1
        for n in notes[s.name]:
            if n not in common:
                shared.setdefault(n, []).append(idx)
    return {n: i for n, i in shared.items() if len(i) >= 2}


def _ranges(numbers):
    """``[1, 2, 3, 5]`` → ``"1–3, 5"``."""
    out, start, prev = [], None, None
    for k in list(numbers) + [None]:
        if start is not None and (k is None or k != prev + 1):
            out.append(str(start) if start == prev else f"{start}–{prev}")
            start = None
        if k is not None and start is None:
            start = k
        prev = k
    return ", ".join(out)


def _y_unit(tab):
    """The unit of the isotope values of a fit's table (that of its first level)."""
    for name in ("delta0", "delta_eq", "plateau_1", "discrimination"):
        row = tab[tab["quantity"].astype(str) == name]
        if len(row) and isinstance(row["unit"].iloc[0], str) and row["unit"].iloc[0]:
            return row["unit"].iloc[0]
    return "‰"


def _rss_header(fit, y_unit):
    """The unit of a fit's residual sum of squares (the objective the candidates minimised)."""
    if getattr(fit, "joint", False):
        return "RSS (all blocks, weighted; no unit)"
    if getattr(fit, "sigma", None) is None:
        return f"RSS ({y_unit}²)"
    return "RSS (weighted by 1/σ²; no unit)"


def _series_section(doc, idx, s, sm, level, method, figure_entries, crit, notes=None,
                    boot=None, shared=()):
    f = s.fit
    tab = f.table(level, "asymptotic" if method == "asymptotic" else "profile")
    y_unit = _y_unit(tab)
    doc.h(2, f"Series {idx}: {s.name}")
    r = s.result
    chosen = r.chosen if r is not None else None
    doc.p(("strong", "Model:"), f" {f.model.describe()}; {f.rate_kind} rates"
          + (f" (candidate “{chosen}”)." if chosen else "."))
    doc.table(["Item", "Value"], [[k, v] for k, v in sm.header])
    # candidate comparison
    doc.h(3, "Candidate models")
    if r is not None and r.comparison is not None:
        cmp = r.comparison
        rows = []
        for lab in r.reasons:
            row = cmp[cmp["label"].astype(str) == str(lab)]
            if len(row):
                c = row.iloc[0]
                rows.append([lab, str(int(c["n_params"])), fmt_number(c["rss"]),
                             fmt_number(c["aicc"], 5),
                             fmt_number(c["delta_aicc"], 3), f"{float(c['weight']):.3f}",
                             "chosen" if lab == r.chosen else "fitted"])
            else:
                rows.append([lab, "—", "—", "—", "—", "—", f"not fitted: {r.reasons[lab]}"])
        doc.table(["Candidate", "k (parameters)", _rss_header(f, y_unit), "AICc", f"Δ{crit}",
                   "Weight (0–1)", "Status"], rows)
        doc.p("k counts the free parameters and the residual variance when it is estimated "
              f"(the k of AICc); Δ{crit} is the difference from the lowest {crit}; weights "
              "w = exp(−Δ/2) / Σ exp(−Δ/2) (Burnham & Anderson 2002).")
    else:
        doc.p("One model was given for this series; no candidates were compared.")
    # parameters and derived quantities
    par = tab[tab["kind"] == "parameter"]
    der = tab[tab["kind"] == "derived"]
    doc.h(3, f"Parameters ({pct_text(level)} intervals)")
    rows = []
    for _, q in par.iterrows():
        if q["method"] == "fixed":
            rows.append([q["quantity"], fmt_number(q["estimate"]), "fixed", "fixed", "fixed",
                         "fixed", fmt_text(q["unit"])])
            continue
        rows.append([q["quantity"], fmt_number(q["estimate"]), fmt_number(q["stderr"]),
                     fmt_bound(q["lower"], q["lower_status"]),
                     fmt_bound(q["upper"], q["upper_status"]),
                     q["method"], fmt_text(q["unit"])])
    doc.table(["Parameter", "Estimate", "SE", "Lower", "Upper", "Method", "Unit"], rows)
    doc.h(3, "Derived quantities")
    names = {"time_to_95": "time to 95 % of a step change",
             "mean_residence_time": "mean residence time",
             "mean_residence_time_incorporation":
                 "mean residence time, incorporation (from k_d + k_g)",
             "mean_residence_time_catabolic": "mean residence time, catabolic (from k_d)"}
    rows = []
    for _, q in der.iterrows():
        nm = str(q["quantity"])
        if nm.startswith("half_life_"):
            label = f"half-life, {'step' if f.kinetics.structure == 'chain' else 'pool'} " \
                    f"{nm.rsplit('_', 1)[1]}"
        else:
            label = names.get(nm, nm)
        if q["method"] == "not_available":
            rows.append([label, fmt_number(q["estimate"]), "no interval", "no interval", "—",
                         fmt_text(q["unit"])])
            continue
        rows.append([label, fmt_number(q["estimate"]), fmt_bound(q["lower"], q["lower_status"]),
                     fmt_bound(q["upper"], q["upper_status"]), q["method"], fmt_text(q["unit"])])
    doc.table(["Quantity", "Estimate", "Lower", "Upper", "Method", "Unit"], rows)
    if method == "bootstrap":
        bootstrap_section(doc, boot, tab, level)
    doc.h(3, "Notes")
    own = sm.notes if notes is None else notes
    if own:
        doc.ol(own)
    elif notes is not None and len(notes) < len(sm.notes):
        doc.p("No notes of this series' own; see the notes at the top.")
    else:
        doc.p("No notes.")
    if shared:
        doc.p(f"Also the shared note{'s' if len(shared) > 1 else ''} "
              f"{', '.join(shared)} (under “Notes shared by several series” at the top).")
    for url, alt, caption in figure_entries:
        doc.img(url, alt, caption)


def _not_fitted(doc, series):
    doc.h(2, "Series not fitted")
    bad = [s for s in series if s.fit is None]
    if not bad:
        doc.p("Every series was fitted.")
        return
    doc.table(["Series", "Status", "Reason"], [[s.name, s.status, s.reason or "—"]
                                               for s in bad])


# ----------------------------------------------------------------------------------------
# the overview figure's table
# ----------------------------------------------------------------------------------------
def _group_and_label(s):
    """(group, row label) of a series in the overview figure."""
    if s.key:
        parts = [(k, str(v)) for k, v in s.key.items()]
    else:
        info = s.fit.data_info if s.fit is not None else {}
        parts = [(k, str(info[k])) for k in ("tissue", "isotope") if info.get(k)]
    subject = next((v for k, v in parts if k == "subject"), None)
    rest = [v for k, v in parts if k != "subject"]
    if s.key and subject is None and rest:  # no subject key: the last key names the row
        label, rest = rest[-1], rest[:-1]
    else:
        label = subject if subject is not None else s.name
    # a component written out in another (the isotope in a part named "goats d13C") goes
    kept = [v for i, v in enumerate(rest)
            if not any(i != j and v != w and re.search(rf"(?<!\w){re.escape(v)}(?!\w)", w)
                       for j, w in enumerate(rest))]
    return (" / ".join(dict.fromkeys(kept)) or "all series"), label


def _study_table(series, half_lives):
    import pandas as pd

    rows = []
    for s in series:
        if s.fit is None:
            continue
        group, label = _group_and_label(s)
        for _, h in half_lives[s.name].iterrows():
            rows.append({"group": group, "label": label, "pool": int(h["pool"]),
                         "half_life": h["half_life"], "lower": h["lower"],
                         "upper": h["upper"], "lower_status": h["lower_status"],
                         "upper_status": h["upper_status"], "time_unit": s.fit.time_unit})
    tab = pd.DataFrame(rows)
    if tab.empty:
        return tab
    # groups together, in the order they first appear
    order = {g: i for i, g in enumerate(dict.fromkeys(tab["group"]))}
    return tab.sort_values("group", key=lambda c: c.map(order), kind="stable")


# ----------------------------------------------------------------------------------------
# entry point
# ----------------------------------------------------------------------------------------
def write_report(fits, path, *, title="Turnover analysis", level=0.95, method="profile",
                 figures=True, overwrite=False, bootstrap=None, n_boot=499, seed=1,
                 n_jobs=None, figure_jobs=None):
    """Write a Markdown and an HTML report of a set of fits, with PNG figures.

    Parameters
    ----------
    fits : FitSet, dict label -> TurnoverFit, list of TurnoverFit, or one TurnoverFit
        A :class:`~isoturnover.FitSet` from :func:`~isoturnover.fit_each` (candidate
        comparisons and series that could not be fitted are reported), or fits given one
        per series (a dict's keys or the fits' labels name the series; unnamed fits are
        "series 1", "series 2", ...).
    path : str or path-like
        Report path; its suffix is replaced: ``<stem>.md`` and ``<stem>.html`` are written,
        and the figures go to ``<stem>_figures/`` in the same folder, which must exist.
        Allowed suffixes: none, ``.md`` or ``.html``.
    title : str, default="Turnover analysis"
        Title of both documents (non-empty).
    level : float, default=0.95
        Confidence level in (0, 1) of every interval and band.
    method : {"profile", "asymptotic", "bootstrap"}, default="profile"
        Interval method. "profile": profile likelihood (robust fits always use asymptotic
        intervals); "asymptotic": from the covariance matrix; "bootstrap": the half-lives in
        the summary and the overview figure carry residual-bootstrap percentile intervals
        (``bootstrap`` tables, or computed here), each series gets a table of its bootstrap
        intervals, and the parameter tables keep their profile intervals.
    figures : bool, default=True
        Draw the overview of the study (half-lives with intervals of every series), one
        figure per fitted series (fit with confidence band, studentized residuals, reaction
        progress), the growth curve where one was fitted, and the candidates' weights of a
        FitSet. The HTML references the same PNG files as the Markdown (no embedding).
    overwrite : bool, default=False
        Replace an existing report at this path (the ``.md``, the ``.html`` and the whole
        ``<stem>_figures/`` folder, which must then hold only ``.png`` files).
    bootstrap : dict, optional
        With ``method="bootstrap"``: series -> its bootstrap interval table (the DataFrame
        of :meth:`BootstrapResult.intervals <isoturnover.uncertainty.BootstrapResult.intervals>`,
        columns parameter, lower, upper, lower_status, upper_status; half-lives as
        ``half_life_<i>``, in the series' time unit). A series is named by its key in
        ``fits`` (the key tuple of a FitSet, a dict's key) or by its name in the report.
        Series without a table are bootstrapped here.
    n_boot : int, default=499
        Residual-bootstrap replicates of a series bootstrapped here.
    seed : int or None, default=1
        Seed of those replicates; each series draws from a seed made of this one and the
        series' name, so its interval does not depend on the other series.
    n_jobs : int or None, default=None
        Worker processes drawing the figures (joblib, loky backend) and running bootstrap
        refits: None for up to two when there are eight figures or more, 1 for none, -1 for
        every core. The files written are the same whatever the number.
    figure_jobs : FigureJobs, optional
        Worker processes that may already be drawing figures of these fits
        (:meth:`FigureJobs.draw_ahead <isoturnover.reportfigures.FigureJobs.draw_ahead>`,
        e.g. while the rest of a study was fitted); they draw this report's figures, and
        a figure drawn ahead is taken as it is. Used only at the same ``level``; the
        report shuts them down when it is done (or fails). The files are the same as
        without it.

    Returns
    -------
    list of pathlib.Path
        The Markdown file, the HTML file, then every figure written.

    Raises
    ------
    DataError
        For ``fits``, ``path``, ``title``, ``level``, ``method``, ``figures``,
        ``overwrite``, ``bootstrap``, ``n_boot``, ``seed`` or ``n_jobs`` of the wrong kind
        or value, and when the folder of ``path`` does not exist. Nothing is written.
    FileExistsError
        When a report file or the figures folder exists and ``overwrite`` is False (or
        appears while the report is written); nothing is replaced.

    Notes
    -----
    The report holds the title and date; the experiment (series, tissues, isotopes,
    subjects, time unit, design); the overview figure of the study; a summary table per
    time unit (a column never mixes days with hours: chosen model, half-lives with
    intervals and their statuses — a bound the data do not close reads "open", never a
    number —, the chosen model's weight); the notes that hold for every fitted series, once;
    one section per series (model, candidate comparison, parameter table, derived
    quantities, its own numbered notes, figures); the series that could not be fitted with
    their reasons; methods with citations; the meaning of pool fractions; and the caution
    that animal experiments and field sampling need the approval of the local animal-care
    authority (human samples: a human-research ethics board), which the results support
    and do not replace. Every number carries its unit in its column header or cell.
    """
    from . import __version__
    from .conventions import check_level as _check_level
    from .conventions import check_method as _check_method
    from .conventions import check_positive_int as _check_positive_int
    from .conventions import unit_word as _unit_word

    series, fitset = _collect(fits)
    if not series:
        raise DataError("'fits' is empty: give at least one fit or a FitSet with series")
    if not isinstance(title, str) or not title.strip():
        raise DataError(f"'title' must be a non-empty string; got {title!r}")
    level = _check_level(level)
    method = _check_method(method, ("profile", "asymptotic", "bootstrap"))
    if not isinstance(figures, bool):
        raise DataError(f"'figures' must be True or False; got {figures!r}")
    if not isinstance(overwrite, bool):
        raise DataError(f"'overwrite' must be True or False; got {overwrite!r}")
    n_boot = _check_positive_int("n_boot", n_boot)
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, int) or seed < 0):
        raise DataError(f"'seed' must be a non-negative integer or None; got {seed!r}")
    fitted = [s for s in series if s.fit is not None]
    n_figures = 0
    if figures and fitted:
        n_figures = (len(fitted) >= 2) + len(fitted) + sum(
            getattr(s.fit.model, "growth", None) is not None for s in fitted) + (
            fitset is not None and any(s.result.comparison is not None for s in series))
    workers = figure_workers(n_jobs, max(n_figures, 1))
    try:
        p = Path(os.fspath(path))
    except TypeError:
        raise DataError(f"'path' must be a str or path-like; got {type(path).__name__}") from None
    if p.suffix.lower() not in ("", ".md", ".html"):
        raise DataError(f"'path' must end in .md, .html or have no suffix; got {str(p)!r}")
    if not p.name or p.stem in ("", ".", ".."):
        raise DataError(f"'path' must name a file; got {str(p)!r}")
    folder = p.parent if str(p.parent) else Path(".")
    if not folder.is_dir():
        raise DataError(f"'path': the folder {str(folder)!r} does not exist")
    stem = p.stem if p.suffix.lower() in (".md", ".html") else p.name
    md_path = folder / f"{stem}.md"
    html_path = folder / f"{stem}.html"
    fig_dir = folder / f"{stem}_figures"
    existing = [q for q in (md_path, html_path, fig_dir) if q.exists() or q.is_symlink()]
    if existing and not overwrite:
        raise FileExistsError(
            f"write_report: {', '.join(repr(str(q)) for q in existing)} already exist(s); "
            "pass overwrite=True to replace the report")
    if fig_dir.exists():
        if not fig_dir.is_dir() or fig_dir.is_symlink():
            raise FileExistsError(f"write_report: {str(fig_dir)!r} exists and is not a folder; "
                                  "it will not be replaced")
        other = [q.name for q in fig_dir.iterdir() if not (q.is_file() and q.suffix == ".png")]
        if other:
            raise FileExistsError(
                f"write_report: {str(fig_dir)!r} holds files that are not report figures "
                f"({', '.join(sorted(other)[:5])}); it will not be replaced")

    # -- figures of the series first: drawn by the workers while the text is built --------
    if figure_jobs is not None and not isinstance(figure_jobs, FigureJobs):
        raise DataError("'figure_jobs' must be a FigureJobs (isoturnover.reportfigures) or "
                        f"None; got {type(figure_jobs).__name__}")
    if figure_jobs is not None and n_figures and figure_jobs.level == level:
        jobs = figure_jobs
    else:
        if figure_jobs is not None:
            figure_jobs.close()
        jobs = FigureJobs(workers if n_figures else 1, level)
    try:
        return _write(series, fitset, jobs, title=title, level=level, method=method,
                      figures=figures and bool(fitted), overwrite=overwrite,
                      bootstrap=bootstrap, n_boot=n_boot, seed=seed, workers=workers,
                      folder=folder, stem=stem, md_path=md_path, html_path=html_path,
                      fig_dir=fig_dir, version=__version__, unit_word=_unit_word)
    except BaseException:
        jobs.cancel()
        raise


def _write(series, fitset, jobs, *, title, level, method, figures, overwrite, bootstrap,
           n_boot, seed, workers, folder, stem, md_path, html_path, fig_dir, version,
           unit_word):
    rel = quote(f"{stem}_figures")
    fig_entries = {}
    if figures:
        for i, s in enumerate(series, start=1):
            if s.fit is None:
                continue
            entries = []
            name = f"{i:02d}_{slug(s.name)}.png"
            jobs.add(name, "overview", s.fit)
            is_seg = getattr(s.fit.model, "record", "points") == "segments"
            entries.append((name, f"Fit of {s.name}",
                            f"{s.name}: (a) data, fitted curve and {pct_text(level)} confidence "
                            "band (dashed lines: diet switches; squares: flagged points, kept "
                            "in the fit); (b) studentized residuals with ±2 and ±3 guides; "
                            "(c) reaction progress ln(1 − F) with the fitted curve."
                            + (" Segments are points at their formation midpoints; the curve "
                               "and band are the precursor's point response (the fitted "
                               "segment means, which the residuals use, are in the segment "
                               "profile below)." if is_seg else "")))
            if is_seg and s.fit.data_info.get("segment_start") is not None:
                sname = f"{i:02d}_{slug(s.name)}_segments.png"
                jobs.add(sname, "segments", s.fit)
                lu = getattr(s.fit.model, "length_unit", "mm")
                entries.append((sname, f"Segment profile of {s.name}",
                                f"{s.name}: δ along the tissue (distance from the "
                                f"{s.fit.model.origin} in {lu}, growth rate in {lu} per "
                                f"{unit_word(s.fit.time_unit)[:-1]}; top axis: formation "
                                "time). Thick bars: measured segments over their length; "
                                "thin black bars: fitted segment means (the model averaged "
                                "over each segment's formation interval); dashed line: the "
                                "precursor's point response at the instant each place "
                                "formed; dotted lines: tissue formed at a diet switch."))
            g = getattr(s.fit.model, "growth", None)
            if g is not None and hasattr(g, "t") and hasattr(g, "mass"):
                tf = s.fit if hasattr(s.fit, "growth_share_curve") else None
                gname = f"{i:02d}_{slug(s.name)}_growth.png"
                jobs.add(gname, "growth", (g, s.fit.time_unit, tf))
                entries.append((gname, f"Growth of {s.name}",
                                f"{s.name}: body masses and the fitted growth curve."))
            fig_entries[s.name] = entries
        if fitset is not None and any(s.result.comparison is not None for s in series):
            jobs.add("00_weights.png", "weights", fitset)

    # -- the text, built in memory while the figures are drawn ---------------------------
    units = _units_in_order(series) or [getattr(fitset, "time_unit", "d")]
    unit_text = ", ".join(unit_word(u) for u in sorted(units))
    base = "asymptotic" if method == "asymptotic" else "profile"
    summaries = {s.name: s.fit.summary(level, base) for s in series if s.fit is not None}
    boots = bootstrap_tables(series, bootstrap, method, level, n_boot, seed, workers)
    half_lives = {name: boot_half_lives(sm.half_lives, boots.get(name))
                  for name, sm in summaries.items()}
    all_notes = {name: list(sm.notes) for name, sm in summaries.items()}
    common = _common_notes(series, all_notes)
    shared = _shared_notes(series, all_notes, common)
    shared_ids = {n: f"S{i}" for i, n in enumerate(shared, start=1)}
    own_notes = {name: [n for n in ns if n not in common and n not in shared]
                 for name, ns in all_notes.items()}
    shared_of = {name: sorted((shared_ids[n] for n in ns if n in shared),
                              key=lambda i: int(i[1:]))
                 for name, ns in all_notes.items()}
    # the study at a glance: from two fitted series on (one series has its own figure)
    study = (_study_table(series, half_lives)
             if figures and sum(s.fit is not None for s in series) >= 2 else None)
    if study is not None and not study.empty:
        jobs.add("00_study.png", "study", study)

    interval_word = method  # the interval of the half-lives in the summary and figure
    doc = Doc()
    doc.h(1, title)
    doc.p(f"Date: {datetime.date.today().isoformat()}. Made with isoturnover {version}.")
    doc.p(("strong", "Caution."), " " + CAUTION)
    crit = "AICc" if fitset is None else _CRIT.get(fitset.criterion, str(fitset.criterion))
    _experiment(doc, series, fitset, unit_text)
    n_fig = 0
    if study is not None and not study.empty:
        n_fig += 1
        doc.h(2, "The study at a glance")
        doc.img(f"{rel}/00_study.png", "Half-lives of every series",
                f"Figure {n_fig}. Half-life of each pool of every fitted series with its "
                f"{pct_text(level)} {interval_word} interval (log time axis; markers: pools; "
                "an arrow to the edge: a bound the data do not close; no line on a side: "
                "the bound could not be computed). Series timed in different units are in "
                "separate panels.")
    _summary_table(doc, series, fitset, level, summaries, half_lives,
                   {k: (len(v), len(shared_of[k])) for k, v in own_notes.items()},
                   interval_word)
    if common:
        doc.h(2, "Notes on every series")
        doc.p("These notes hold word for word for every fitted series; they are not "
              "repeated under each series.")
        doc.ol(common)
    if shared:
        doc.h(2, "Notes shared by several series")
        doc.p("Each of these notes holds word for word for the series named after it; the "
              "series' sections refer to them by their label.")
        doc.ul([f"{shared_ids[n]}. {n} (series {_ranges(idx)})" for n, idx in shared.items()])
    if figures and any(name == "00_weights.png" for name, _ in jobs.jobs):
        n_fig += 1
        doc.img(f"{rel}/00_weights.png", "Model weights of every series",
                f"Figure {n_fig}. Weights of the candidate models of each series "
                "(empty bars: series not fitted, with their status).")
    idx = 0
    for s in series:
        if s.fit is None:
            continue
        idx += 1
        entries = []
        for name, alt, caption in fig_entries.get(s.name, []):
            n_fig += 1
            entries.append((f"{rel}/{quote(name)}", alt, f"Figure {n_fig}. {caption}"))
        _series_section(doc, idx, s, summaries[s.name], level, method, entries, crit,
                        notes=own_notes[s.name] if (common or shared) else None,
                        boot=boots.get(s.name), shared=shared_of.get(s.name, []))
    _not_fitted(doc, series)
    any_growth = any(s.fit is not None and s.fit.rate_kind == "catabolic" for s in series)
    from .groups import PER_DIET_LABEL

    any_per_diet = any(str(lab).endswith(PER_DIET_LABEL) for s in series
                       if s.result is not None for lab in s.result.reasons)
    methods_section(doc, level, method, any_growth, any_per_diet, n_boot=boot_count(boots, n_boot))
    doc.h(2, "Caution")
    doc.p(("strong", "Caution."), " " + CAUTION)
    md_text = render_markdown(doc)
    html_text = render_html(doc, title)
    images = sorted(render_figures(jobs)) if figures else []

    # -- write: temporaries first, then move into place -----------------------------------
    plan = []
    try:
        if images:
            tmp_dir = Path(tempfile.mkdtemp(dir=folder, prefix=f".{stem}_figures.",
                                            suffix=".tmp"))
            plan.append((tmp_dir, fig_dir))
            os.chmod(tmp_dir, 0o755)
            for name, data in images:
                with open(tmp_dir / name, "wb") as fh:
                    fh.write(data)
                os.chmod(tmp_dir / name, 0o644)
        elif fig_dir.exists():
            plan.append((None, fig_dir))  # overwrite without figures: the old ones go
        plan.append((temp_file(folder, md_path.name, md_text.encode("utf-8")), md_path))
        plan.append((temp_file(folder, html_path.name, html_text.encode("utf-8")), html_path))
    except BaseException:
        for tmp, _ in plan:
            if tmp is not None:
                remove_path(tmp)
        raise
    commit_files(plan, folder, overwrite)
    return [md_path, html_path] + [fig_dir / name for name, _ in images]
