r"""The ``isoturnover clock`` job: field samples and a previous run's fits to diet-change times.

**The field table** has one row per animal and tissue (CSV or Excel, read through
:mod:`isoturnover.tables`, so a bad cell is one error naming file, row and column):

==========  ========  ===========================================================
column      needed    content
==========  ========  ===========================================================
subject     yes       the field animal
tissue      yes       a tissue of the captive fits (``plasma``, ``red_cells``…)
isotope     several   the isotope code (``d13C``…); needed when the fits hold a
            isotopes  tissue for more than one isotope
value       yes       measured δ (‰)
sd          or --sd   sd (‰) of the value about what the model predicts: the
                      analytic error *and* the animal's own scatter about the
                      population's equilibrium value
new         or --new  the tissue's equilibrium δ (‰) on the new diet
old         optional  the tissue's equilibrium δ (‰) on the old diet
==========  ========  ===========================================================

Other columns are ignored. Each animal and isotope is one clock (:func:`time_since_switch`):
with ``old`` known for every tissue of the animal, the old values are used (one tissue is
enough); without it (two or more tissues) the old values are ``new + Δ`` with Δ unknown and
profiled out. A cell of ``new``/``old`` overrides the ``new=``/``old=`` arguments (command
line ``--new``/``--old``), which give one value per tissue.

**Which captive fits stand for a tissue** (:func:`clock_kinetics`). For each tissue and
isotope of the field table, the entries of ``fits.json`` with that tissue and isotope are
taken (one ``part`` of the run with ``part=``; some animals with ``subjects=``):

* **Several captive animals** (the default: every animal fitted). The model structure chosen
  for most of them (structure and number of pools; ties: fewer pools) is used for all; an
  animal whose chosen model differs contributes its best fit of that structure (fits.json
  keeps every candidate), or is left out when it has none. Each pool's half-life is pooled
  over the animals on the log scale (:func:`~isoturnover.population_estimate`, random
  effects, REML; the animals' profile intervals give their standard errors): the rates are
  :math:`\ln 2` over the population medians, the fractions the animals' mean. The
  between-animal spread enters the clock as ``population=`` (:math:`\tau^2` + SE² of the
  pooled log half-life: the uncertainty of a new animal's log rate; with several pools, the
  largest of the pools').
* **One series** (``subjects=`` naming one animal, or a run with one series for the tissue,
  e.g. destructive sampling pooled over animals): that fit itself, with its covariance. A
  single animal says nothing of the spread between animals: ``rate_cv=`` adds one
  (:math:`\tau^2 = \ln(1 + cv^2)`), else a note says it is missing and the interval is too
  narrow for a new animal.

The clock reads the fits' turnover rates without growth: for a growth-curve fit the
catabolic rates (right for field animals that no longer grow), for exponential growth the
incorporation rates :math:`k + k_g` (:meth:`~isoturnover.kinetics.TurnoverKinetics.remaining`).

Outputs (:meth:`ClockRun.write`, through :func:`~isoturnover.outputdir.write_output`: one
move, a lock, a manifest, formula-safe cells): ``clock.csv`` (one row per animal and
isotope), ``clock_tissues.csv`` (one row per tissue: measured and predicted),
``clock_kinetics.csv`` (the kinetics used), ``CAUTION.txt`` and, unless left out,
``clock_figures/<subject>_<isotope>.png`` (the likelihood over t with the interval) and
``clock_figures/overview.png`` (every animal's estimate and interval).

Field sampling of animals needs the approval of the local animal-care authority (human hair
or blood: a human-research ethics board); these estimates support that process and do not
replace it (:data:`~isoturnover.conventions.CAUTION`).
"""

from __future__ import annotations

import math
import re
import warnings
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .analysis import load_fits
from .clocks import plot_clock, time_since_switch
from .conventions import CAUTION, check_level, unit_word
from .data import ISOTOPE_CODES
from .errors import DataError, DataWarning
from .outputdir import neutralise_formulas, write_output
from .population import population_estimate
from .tables import (
    Issues,
    apply_columns,
    load_table,
    missing_column,
    number_column,
    text_column,
)

__all__ = ["FIELD_COLUMNS", "read_field", "resolve_tissues", "clock_kinetics", "run_clock",
           "ClockRun", "plot_overview"]

#: Canonical column names of the field table.
FIELD_COLUMNS = ("subject", "tissue", "isotope", "value", "sd", "new", "old")
_LN2 = math.log(2.0)


# --------------------------------------------------------------------------- field table

def read_field(path_or_frame, *, columns=None, on_bad_rows="raise", sheet=None):
    """Read and check a table of field samples (layout: module docstring).

    Parameters
    ----------
    path_or_frame : str, path-like or DataFrame
        CSV file, Excel workbook or frame (not changed).
    columns : mapping, optional
        Your column name → canonical name (targets among :data:`FIELD_COLUMNS`).
    on_bad_rows : {"raise", "drop"}, default="raise"
        A bad cell stops with one error naming file, row and column, or its row is dropped
        with one warning.
    sheet : str or int, optional
        Excel sheet.

    Returns
    -------
    DataFrame
        Columns subject, tissue, isotope (NaN when the table has none), value, sd, new, old
        (NaN where blank or absent) and ``where`` (``"field.csv, row 5"``); ``attrs["source"]``
        names the table.

    Raises
    ------
    DataError
        A missing required column, a bad cell (blank subject, tissue or value, a word where a
        number belongs, an sd ≤ 0, an unknown isotope code), or one animal with the same
        tissue and isotope twice (both rows named).
    """
    table = load_table(path_or_frame, sheet)
    apply_columns(table, columns, FIELD_COLUMNS, "field")
    for c in ("subject", "tissue", "value"):
        if c not in table.frame.columns:
            raise missing_column(table, c, "field")
    issues = Issues(table)
    out = {"subject": text_column(table, issues, "subject", required=True),
           "tissue": text_column(table, issues, "tissue", required=True)}
    if "isotope" in table.frame.columns:
        codes = text_column(table, issues, "isotope", required=True)
        unknown = codes.notna().to_numpy() & ~codes.isin(ISOTOPE_CODES).to_numpy()
        issues.add(unknown, "isotope", lambda i: f"unknown isotope code {codes.iat[i]!r} "
                                                 f"(allowed: {', '.join(ISOTOPE_CODES)})")
        out["isotope"] = codes
    else:
        out["isotope"] = pd.Series(np.nan, index=table.frame.index, dtype=object)
    out["value"] = number_column(table, issues, "value", required=True)
    for c in ("sd", "new", "old"):
        if c in table.frame.columns:
            out[c] = number_column(table, issues, c, required=False, positive=(c == "sd"))
        else:
            out[c] = np.full(len(table), np.nan)
    keep = issues.resolve(on_bad_rows)
    pos = np.flatnonzero(keep)
    frame = pd.DataFrame({k: (v.iloc[pos].to_numpy() if isinstance(v, pd.Series) else v[pos])
                          for k, v in out.items()})
    frame["where"] = [f"{table.label}, {table.row_name(int(p))}" for p in pos]
    keys = list(zip(frame["subject"], frame["tissue"], frame["isotope"].astype(str)))
    seen = {}
    for j, k in enumerate(keys):
        if k in seen:
            raise DataError(f"{frame['where'].iat[j]}: subject {k[0]!r} has tissue {k[1]!r} "
                            f"twice (also {table.row_name(int(pos[seen[k]]))}); give one value "
                            "per animal and tissue (average analytic replicates first)")
        seen[k] = j
    frame.attrs["source"] = table.label
    return frame


# --------------------------------------------------------------------------- kinetics

def _series_of(entries):
    """fits.json entries grouped by series: (part, key items) -> list of entries."""
    out = {}
    for e in entries:
        out.setdefault((e["part"], tuple(sorted(e["key"].items()))), []).append(e)
    return out


def _tissue_isotope(e):
    info = e["fit"].data_info or {}
    return (str(e["key"].get("tissue", info.get("tissue"))),
            str(e["key"].get("isotope", info.get("isotope"))))


def _subject_of(e):
    info = e["fit"].data_info or {}
    s = e["key"].get("subject", info.get("subject"))
    return None if s is None else str(s)


def _shape(fit):
    return (fit.kinetics.structure, len(fit.kinetics.rate_names))


def _shape_text(shape):
    s, n = shape
    return "two-step chain" if s == "chain" else f"{n} pool{'s' * (n > 1)}"


def _available(fits):
    pairs = sorted({_tissue_isotope(e) for e in fits})
    return ", ".join(f"{t} {i}" for t, i in pairs) or "nothing"


def resolve_tissues(fits, wanted):
    """The fits' (tissue, isotope) for each wanted (tissue, isotope or None).

    Parameters
    ----------
    fits : list of dict
        From :func:`~isoturnover.load_fits`.
    wanted : iterable of tuple
        (tissue, isotope) pairs; isotope None matches the tissue's only isotope.

    Returns
    -------
    dict
        Wanted pair -> (tissue, isotope) of the fits; a wanted pair not in the fits maps to
        a str: why (unknown tissue, or several isotopes).
    """
    have = {}
    for e in fits:
        t, i = _tissue_isotope(e)
        have.setdefault(t, set()).add(i)
    out = {}
    for t, i in wanted:
        if t not in have:
            out[(t, i)] = (f"{t!r} is not a tissue of the captive fits (they hold "
                           f"{_available(fits)})")
        elif i is None:
            if len(have[t]) > 1:
                out[(t, i)] = (f"the captive fits hold tissue {t!r} for several isotopes "
                               f"({', '.join(sorted(have[t]))}); add an 'isotope' column")
            else:
                out[(t, i)] = (t, next(iter(have[t])))
        elif i not in have[t]:
            out[(t, i)] = (f"the captive fits hold tissue {t!r} for {', '.join(sorted(have[t]))}"
                           f", not {i}")
        else:
            out[(t, i)] = (t, i)
    return out


def _pick(series_entries, shape):
    """The series' fit of ``shape``: the chosen one if it has it, else the best by AICc."""
    chosen = [e for e in series_entries if e["chosen"]]
    if chosen and _shape(chosen[0]["fit"]) == shape:
        return chosen[0]
    same = [e for e in series_entries if _shape(e["fit"]) == shape]
    return min(same, key=lambda e: e["fit"].aicc) if same else None


def _half_life_table(fit, level, method):
    if fit.kinetics.growth_rate_index is not None:  # exponential growth: incorporation
        return fit.incorporation_half_lives(level, method)
    return fit.half_lives(level, method)


def clock_kinetics(fits, tissue, isotope, *, subjects=None, part=None, rate_cv=None,
                   level=0.95, method="profile"):
    """The kinetics and between-animal spread that stand for one tissue (module docstring).

    Parameters
    ----------
    fits : list of dict
        From :func:`~isoturnover.load_fits`.
    tissue, isotope : str
        The tissue and isotope as the fits name them.
    subjects : sequence of str, optional
        Captive animals to use (default every animal fitted); one name: that animal's fit.
    part : str, optional
        Only the fits of this part of the run (e.g. ``"goats d13C"``).
    rate_cv : float, optional
        Between-animal coefficient of variation of the rates, added when one series stands
        for the tissue (:math:`\\tau^2 = \\ln(1 + cv^2)`).
    level : float, default=0.95
        Level of the captive animals' half-life intervals.
    method : str, default="profile"
        Their interval method.

    Returns
    -------
    kinetics : TurnoverFit or dict
        For :func:`~isoturnover.time_since_switch`.
    population : PopulationEstimate, float or None
        Its ``population=``.
    row : dict
        What was used (for ``clock_kinetics.csv``): source, structure, rates, half-lives,
        fractions, animals used and left out, τ, note.
    """
    sel = [e for e in fits if _tissue_isotope(e) == (tissue, isotope)
           and (part is None or e["part"] == part)]
    if subjects is not None:
        sel = [e for e in sel if _subject_of(e) in subjects]
        missing = sorted(set(subjects) - {_subject_of(e) for e in sel})
        if missing:
            raise DataError(f"'subjects': no captive fit of tissue {tissue!r} ({isotope}) for "
                            f"{', '.join(missing)}")
    if not sel:
        raise DataError(f"no captive fit of tissue {tissue!r} ({isotope})"
                        + (f" in part {part!r}" if part is not None else ""))
    series = _series_of(sel)
    shapes = Counter(_shape(e["fit"]) for es in series.values() for e in es if e["chosen"])
    if not shapes:
        raise DataError(f"no chosen captive fit of tissue {tissue!r} ({isotope})")
    order = sorted(shapes.items(), key=lambda kv: (-kv[1], kv[0][1], kv[0][0] != "parallel"))
    shape = order[0][0]
    used, left = [], []
    for (prt, _key), es in series.items():
        name = _subject_of(es[0]) or prt
        e = _pick(es, shape)
        if e is None:
            left.append(f"{name} (no {_shape_text(shape)} fit)")
        else:
            used.append((name, e["fit"]))
    row = {"tissue": tissue, "isotope": isotope, "structure": _shape_text(shape),
           "time_unit": used[0][1].time_unit if used else ""}
    if len(used) == 1:
        name, fit = used[0]
        tau2 = 0.0 if rate_cv is None else math.log1p(rate_cv ** 2)
        k = fit.state.theta[list(fit.kinetics.rate_index)]
        if fit.kinetics.growth_rate_index is not None:
            k = k + fit.state.theta[fit.kinetics.growth_rate_index]
        fr = (fit.state.theta[list(fit.kinetics.fraction_index)]
              if fit.kinetics.fraction_index else [])
        note = ("one captive series: its fit and covariance; "
                + (f"between-animal cv {rate_cv:g} given" if rate_cv is not None else
                   "no between-animal spread (give a rate cv), so the interval is too narrow "
                   "for a new animal"))
        row.update(source=f"fit of {name}", rates=_join(k), half_lives=_join(_LN2 / k),
                   fractions=_join(fr), animals_used=name, animals_left_out="; ".join(left),
                   tau=math.sqrt(tau2), note=note)
        return fit, (tau2 if tau2 > 0 else None), row
    if rate_cv is not None:
        raise DataError(f"'rate_cv' applies when one captive series stands for a tissue; "
                        f"{tissue!r} ({isotope}) has {len(used)}: their spread is estimated")
    n = shape[1]
    rates, ests = [], []
    for pool in range(1, n + 1):
        vals, lo, hi, ls, us, names = [], [], [], [], [], []
        for name, fit in used:
            hl = _half_life_table(fit, level, method)
            r = hl[hl["pool"] == pool].iloc[0]
            vals.append(r["half_life"])
            lo.append(r["lower"])
            hi.append(r["upper"])
            ls.append(r["lower_status"])
            us.append(r["upper_status"])
            names.append(name)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", DataWarning)  # left-out animals: in the row
                pe = population_estimate(vals, lo, hi, level, names=names, lower_status=ls,
                                         upper_status=us)
        except DataError as e:
            raise DataError(f"tissue {tissue!r} ({isotope}), pool {pool}: {e}; name one "
                            "captive animal instead (--subjects)") from None
        left += [f"{r.name} (pool {pool}: {r.reason})" for r in pe.excluded.itertuples()]
        rates.append(_LN2 / pe.estimate)
        ests.append(pe)
    spread = [p.tau2 + float(p.model.predict(None)["stderr"].iloc[0]) ** 2 for p in ests]
    best = int(np.argmax(spread))
    spec = {"rates": rates, "structure": shape[0], "time_unit": row["time_unit"]}
    fr = []
    if shape[0] == "parallel" and n > 1:
        fr = np.mean([f.state.theta[list(f.kinetics.fraction_index)] for _, f in used], axis=0)
        spec["fractions"] = list(fr / fr.sum())
    row.update(source=f"population estimate over {ests[0].k} captive animals",
               rates=_join(rates), half_lives=_join([p.estimate for p in ests]),
               fractions=_join(fr), animals_used=", ".join(n for n, _ in used),
               animals_left_out="; ".join(left), tau=math.sqrt(spread[best]),
               note=f"between-animal sd of ln k {ests[best].tau:.3g} (cv {ests[best].cv:.2g})")
    return spec, ests[best], row


def _join(xs):
    return ", ".join(f"{float(x):.4g}" for x in xs)


# --------------------------------------------------------------------------- the run

@dataclass
class ClockRun:
    """The clock of every field animal (made by :func:`run_clock`).

    Parameters
    ----------
    results : DataFrame
        One row per animal and isotope: subject, isotope, tissues, n_tissues, old_diet
        (``known`` or ``unknown``), estimate, lower, upper, level, status, reason, offset,
        chi2, dof, p_value, time_unit, warnings.
    tissues : DataFrame
        One row per animal and tissue (:meth:`ClockResult.table` with subject and isotope).
    kinetics : DataFrame
        The kinetics used per tissue (:func:`clock_kinetics`).
    clocks : dict
        (subject, isotope) -> :class:`~isoturnover.ClockResult`.
    source : str
        The field table.
    caution : str
        :data:`~isoturnover.conventions.CAUTION`.
    """

    results: pd.DataFrame
    tissues: pd.DataFrame
    kinetics: pd.DataFrame
    clocks: dict = field(repr=False)
    source: str = ""
    caution: str = CAUTION

    def summary(self) -> str:
        """The printed summary: one line per animal, the statuses counted, the caution.

        Returns
        -------
        str
        """
        r = self.results
        unit = unit_word(r["time_unit"].iat[0]) if len(r) else ""
        lines = [f"Time since the diet change of {len(r)} field animal"
                 f"{'s' * (len(r) != 1)} ({self.source}; {unit}, "
                 f"{r['level'].iat[0]:.0%} profile-likelihood intervals):"]
        for x in r.itertuples():
            if x.status in ("equilibrated", "uninformative"):
                est = (f"more than {_fmt(x.lower)}" if x.lower > 0 else "cannot be dated")
            else:
                est = f"{_fmt(x.estimate)} [{_fmt(x.lower)}, {_fmt(x.upper)}]"
            lines.append(f"  {x.subject} {x.isotope} ({x.tissues}; old diet {x.old_diet}): "
                         f"{est} {x.status}")
        counts = r["status"].value_counts()
        lines.append("statuses: " + ", ".join(f"{k} {v}" for k, v in counts.items()))
        for x in self.kinetics.itertuples():
            lines.append(f"kinetics {x.tissue} {x.isotope}: {x.source}, {x.structure}, "
                         f"half-lives {x.half_lives} {unit}; {x.note}")
        lines.append(CAUTION)
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.summary()

    def files(self, figures=True):
        """``build(tmp)`` for :func:`~isoturnover.outputdir.write_output` (files: module
        docstring).

        Parameters
        ----------
        figures : bool, default=True
            Draw the figures.

        Returns
        -------
        callable
        """
        def build(tmp):
            neutralise_formulas(self.results).to_csv(tmp / "clock.csv", index=False)
            neutralise_formulas(self.tissues).to_csv(tmp / "clock_tissues.csv", index=False)
            neutralise_formulas(self.kinetics).to_csv(tmp / "clock_kinetics.csv", index=False)
            (tmp / "CAUTION.txt").write_text(CAUTION + "\n", encoding="utf-8")
            if figures and self.clocks:
                self._figures(tmp / "clock_figures")

        return build

    def _figures(self, folder: Path):
        from matplotlib.figure import Figure  # no pyplot: no backend or global state touched

        folder.mkdir()
        taken = set()
        for (subject, isotope), res in self.clocks.items():
            stem = re.sub(r"[^A-Za-z0-9_.-]+", "_", f"{subject}_{isotope}").strip("._") or "x"
            name, i = stem, 1
            while name.lower() in taken:
                i += 1
                name = f"{stem}_{i}"
            taken.add(name.lower())
            fig = Figure(figsize=(5.5, 3.6), layout="constrained")
            ax = fig.subplots()
            plot_clock(res, ax=ax)
            ax.set_title(f"{subject}, {isotope}: " + ax.get_title(), fontsize=9)
            fig.savefig(folder / f"{name}.png", dpi=150)
        fig = Figure(figsize=(6.0, 1.2 + 0.32 * len(self.results)), layout="constrained")
        plot_overview(self.results, fig.subplots())
        fig.savefig(folder / "overview.png", dpi=150)

    def write(self, out, *, force=False, figures=True):
        """Write the files into ``out`` in one move (:func:`~isoturnover.outputdir.write_output`).

        Parameters
        ----------
        out : str or path-like
            Output folder.
        force : bool, default=False
            Replace the files of a non-empty folder this package wrote.
        figures : bool, default=True
            Draw the figures.

        Returns
        -------
        list of pathlib.Path
            The files written.
        """
        return write_output(out, self.files(figures), force=force)


def plot_overview(results, ax):
    """Every animal's estimate and interval on a log time axis (open bounds as arrows).

    Parameters
    ----------
    results : DataFrame
        :attr:`ClockRun.results`.
    ax : matplotlib Axes

    Returns
    -------
    matplotlib Axes
    """
    colours = {"ok": "tab:blue", "too_early": "tab:orange", "equilibrated": "tab:green",
               "uninformative": "0.5", "inconsistent": "tab:red"}
    fin = results[["estimate", "lower", "upper"]].to_numpy(float)
    pos = fin[np.isfinite(fin) & (fin > 0)]
    lo_ax = pos.min() / 3 if pos.size else 0.1
    hi_ax = pos.max() * 3 if pos.size else 10.0
    n = len(results)
    seen = set()
    for i, x in enumerate(results.itertuples()):
        y = n - 1 - i
        c = colours.get(x.status, "k")
        lo = x.lower if x.lower > 0 else lo_ax
        hi = x.upper if math.isfinite(x.upper) else hi_ax
        lab = x.status.replace("_", " ") if x.status not in seen else None
        seen.add(x.status)
        ax.plot([lo, hi], [y, y], color=c, lw=2, label=lab, solid_capstyle="butt")
        if x.lower <= 0:
            ax.plot([lo], [y], marker="<", color=c, ms=6)
        if not math.isfinite(x.upper):
            ax.plot([hi], [y], marker=">", color=c, ms=6)
        if x.status == "ok":
            ax.plot([x.estimate], [y], marker="o", color=c, ms=5)
        elif x.status in ("too_early", "inconsistent") and x.estimate > 0:
            ax.plot([x.estimate], [y], marker="o", color=c, mfc="white", ms=5)
    ax.set_xscale("log")
    ax.set_xlim(lo_ax / 1.2, hi_ax * 1.2)
    ax.set_yticks(range(n))
    ax.set_yticklabels([f"{s} {i}" for s, i in zip(results["subject"][::-1],
                                                    results["isotope"][::-1])], fontsize=8)
    ax.set_ylim(-0.7, n - 0.3)
    unit = unit_word(results["time_unit"].iat[0]) if n else ""
    ax.set_xlabel(f"time since the diet change ({unit}; log scale)")
    ax.legend(fontsize=7, frameon=False, loc="upper left", bbox_to_anchor=(1.0, 1.0))
    level = results["level"].iat[0] if n else 0.95
    ax.set_title(f"estimate (dot; open: status not ok) and {level:.0%} interval; arrows: "
                 "open bounds", fontsize=8)
    return ax


def _fmt(x: float) -> str:
    return "inf" if math.isinf(x) else f"{x:.3g}"


def _per_tissue(name, mapping, tissue, isotope, isotopes=()):
    """A value of ``mapping`` for (tissue, isotope): key (tissue, isotope), else tissue —
    refused when the field rows hold the tissue in several ``isotopes`` (a δ13C plateau
    must not be used for δ15N)."""
    if mapping is None:
        return math.nan
    if not isinstance(mapping, dict):
        raise DataError(f"'{name}' must map tissue (or (tissue, isotope)) -> δ (‰); got "
                        f"{type(mapping).__name__}")
    for key in ((tissue, isotope), tissue):
        if key in mapping:
            if key == tissue and len(set(isotopes)) > 1:
                raise DataError(
                    f"'{name}' (--{name}) gives one value for tissue {tissue!r}, but the field "
                    f"rows hold it in {', '.join(sorted(map(str, set(isotopes))))}: give one "
                    f"per isotope ({tissue}:{isotope}=…) or choose the rows with --isotope")
            try:
                return float(mapping[key])
            except (TypeError, ValueError):
                raise DataError(f"'{name}' (--{name}): the value for {key!r} must be a number "
                                f"(δ, ‰); got {mapping[key]!r}") from None
    return math.nan


def run_clock(field_table, fits, *, new=None, old=None, sd=None, subjects=None, part=None,
              isotope=None, rate_cv=None, level=0.95, max_offset=None, columns=None,
              ci="profile", on_bad_rows="raise") -> ClockRun:
    """Date the diet change of every animal of a field table with a previous run's fits.

    Parameters
    ----------
    field_table : str, path-like or DataFrame
        The field samples (layout: module docstring); read with :func:`read_field`.
    fits : str, path-like or list of dict
        A ``fits.json`` of ``isoturnover fit``/``demo`` (read with
        :func:`~isoturnover.load_fits`), or what it returned.
    new, old : dict, optional
        Tissue (or (tissue, isotope)) → equilibrium δ (‰) on the new / old diet, for the
        rows whose ``new`` / ``old`` cell is blank or absent.
    sd : float, optional
        sd (‰) of the rows whose ``sd`` cell is blank or absent.
    subjects, part, rate_cv
        Which captive fits stand for a tissue (:func:`clock_kinetics`).
    isotope : str, optional
        Only the rows of this isotope.
    level : float, default=0.95
        Level of the clock intervals (and of the captive half-life intervals pooled).
    max_offset : float, optional
        Largest plausible ``|old − new|`` (‰) with the old diet unknown
        (:func:`~isoturnover.time_since_switch`).
    columns : mapping, optional
        Column mapping of the field table.
    ci : str, default="profile"
        Interval method of the captive half-lives pooled.
    on_bad_rows : {"raise", "drop"}, default="raise"
        A bad field row is an error naming file, row and column, or is dropped with a
        warning listing it (:func:`read_field`).

    Returns
    -------
    ClockRun

    Raises
    ------
    DataError
        A bad field table (file, row and column named), a tissue the fits do not hold, a
        row without sd or new value, an animal with one tissue and no old value.
    """
    level = check_level(level)
    frame = read_field(field_table, columns=columns, on_bad_rows=on_bad_rows)
    where = frame.attrs["source"]
    if isotope is not None:
        frame = frame[frame["isotope"].isna() | (frame["isotope"] == isotope)]
        if not len(frame):
            raise DataError(f"{where}: no row of isotope {isotope!r}")
    if not isinstance(fits, list):
        fits = load_fits(fits)
    wanted = {(t, None if pd.isna(i) else i) for t, i in zip(frame["tissue"], frame["isotope"])}
    resolved = resolve_tissues(fits, sorted(wanted, key=str))
    iso_col = []
    for r in frame.itertuples():
        got = resolved[(r.tissue, None if pd.isna(r.isotope) else r.isotope)]
        if isinstance(got, str):
            raise DataError(f"{r.where}, column 'tissue': {got}")
        iso_col.append(got[1])
    frame = frame.assign(isotope=iso_col)
    isotopes_of = frame.groupby("tissue")["isotope"].agg(lambda x: tuple(x.unique())).to_dict()
    for c, given, what in (("sd", sd, "--sd (sd=)"), ("new", new, "--new (new=)")):
        vals = frame[c].to_numpy(float).copy()
        for j, r in enumerate(frame.itertuples()):
            if not np.isfinite(vals[j]):
                v = (float(given) if c == "sd" and given is not None else
                     _per_tissue(c, given, r.tissue, r.isotope, isotopes_of[r.tissue])
                     if c == "new" else math.nan)
                if not np.isfinite(v):
                    raise DataError(f"{r.where}, column {c!r}: blank, and {what} gives no "
                                    f"value for tissue {r.tissue!r}")
                vals[j] = v
        frame[c] = vals
    olds = frame["old"].to_numpy(float).copy()
    for j, r in enumerate(frame.itertuples()):
        if not np.isfinite(olds[j]):
            olds[j] = _per_tissue("old", old, r.tissue, r.isotope, isotopes_of[r.tissue])
    frame["old"] = olds
    kin, pop, krows = {}, {}, []
    for key in sorted(set(zip(frame["tissue"], frame["isotope"]))):
        kin[key], pop[key], row = clock_kinetics(fits, *key, subjects=subjects, part=part,
                                                 rate_cv=rate_cv, level=level, method=ci)
        krows.append(row)
    rows, trows, clocks = [], [], {}
    for (subject, iso), g in frame.groupby(["subject", "isotope"], sort=False):
        have_old = np.isfinite(g["old"].to_numpy(float))
        if have_old.any() and not have_old.all():
            bad = g[~have_old].iloc[0]
            raise DataError(f"{bad['where']}, column 'old': blank while other tissues of "
                            f"{subject!r} ({iso}) have one; give every tissue's old value or "
                            "none")
        if not have_old.any() and len(g) < 2:
            raise DataError(f"{g['where'].iat[0]}, column 'old': blank; one tissue needs the "
                            "old diet's equilibrium value (--old), or sample two or more "
                            "tissues of different turnover")
        tissues = list(g["tissue"])
        vals = {t: (v, s) for t, v, s in zip(tissues, g["value"], g["sd"])}
        try:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always", DataWarning)
                res = time_since_switch(
                    vals, {t: kin[(t, iso)] for t in tissues},
                    new=dict(zip(tissues, g["new"])),
                    old=dict(zip(tissues, g["old"])) if have_old.all() else None,
                    population={t: pop[(t, iso)] for t in tissues}, level=level,
                    max_offset=None if have_old.all() else max_offset)
        except DataError as e:
            raise DataError(f"{g['where'].iat[0]} (subject {subject!r}, {iso}): {e}") from None
        notes = list(res.warnings) + [str(w.message) for w in caught
                                      if str(w.message) not in res.warnings]
        clocks[(subject, iso)] = res
        rows.append({"subject": subject, "isotope": iso, "tissues": ", ".join(tissues),
                     "n_tissues": len(tissues),
                     "old_diet": "known" if have_old.all() else "unknown",
                     "estimate": res.estimate, "lower": res.lower, "upper": res.upper,
                     "level": res.level, "status": res.status, "reason": res.reason,
                     "offset": res.offset, "chi2": res.chi2, "dof": res.dof,
                     "p_value": res.p_value, "time_unit": res.time_unit,
                     "warnings": "; ".join(notes)})
        t = res.table()
        t.insert(0, "isotope", iso)
        t.insert(0, "subject", subject)
        trows.append(t)
    return ClockRun(results=pd.DataFrame(rows), tissues=pd.concat(trows, ignore_index=True),
                    kinetics=pd.DataFrame(krows), clocks=clocks, source=where)

