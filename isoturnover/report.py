"""Markdown and HTML report of a set of turnover fits, with figures.

:func:`write_report` writes ``<stem>.md`` and ``<stem>.html`` side by side, and the figures
as PNG files in a folder ``<stem>_figures/`` next to them. Both documents *reference* the same
PNG files by relative path (they are not embedded), so the two stay small, show the same
images, and the figures can go into a manuscript as they are; move the folder together with
the documents.

Writing is all or nothing: the text and the figures are built in memory first, then written
to temporary names in the destination folder and moved into place with :func:`os.replace`.
If anything fails, the temporary files are removed and files that were being replaced are
restored, so no partial report is left behind. Existing files are never replaced unless
``overwrite=True``.
"""

from __future__ import annotations

import datetime
import html
import io
import math
import os
import re
import shutil
import tempfile
from collections.abc import Mapping
from pathlib import Path
from urllib.parse import quote

from .errors import DataError

__all__ = ["write_report", "CAUTION", "POOL_STATEMENT"]

#: Caution printed in every report.
CAUTION = (
    "Animal experiments and field sampling need the approval of the local animal-care "
    "authority (for human samples: a human-research ethics board). These results support "
    "that process and do not replace it."
)

#: Statement on the meaning of pool fractions printed in every report.
POOL_STATEMENT = (
    "Pool fractions describe the shape of the curve; they need not be physical compartments "
    "of the tissue."
)

_DPI = 200
_CRIT = {"aicc": "AICc", "aic": "AIC", "bic": "BIC"}


# ----------------------------------------------------------------------------------------
# a tiny document model rendered to Markdown and to HTML
# ----------------------------------------------------------------------------------------
class _Doc:
    """Blocks: ("h", level, text), ("p", segments), ("table", header, rows),
    ("ol", items), ("ul", items), ("img", url, alt, caption).

    Text is plain (escaped on rendering); a paragraph is a list of segments, each a plain
    string or a tuple ("em" | "strong", text).
    """

    def __init__(self):
        self.blocks = []

    def h(self, level, text):
        self.blocks.append(("h", level, str(text)))

    def p(self, *segments):
        self.blocks.append(("p", list(segments)))

    def table(self, header, rows):
        self.blocks.append(("table", [str(h) for h in header],
                            [[str(c) for c in r] for r in rows]))

    def ol(self, items):
        self.blocks.append(("ol", [str(i) for i in items]))

    def ul(self, items):
        self.blocks.append(("ul", items))

    def img(self, url, alt, caption):
        self.blocks.append(("img", url, str(alt), str(caption)))


_MD_SPECIAL = re.compile(r"([\\`*_\[\]<>|#])")


def _md(text):
    """Escape Markdown's active characters (CommonMark backslash escapes) in plain text."""
    return _MD_SPECIAL.sub(r"\\\1", str(text)).replace("\n", " ")


def _md_segments(segs):
    out = []
    for s in segs:
        if isinstance(s, tuple):
            kind, txt = s
            mark = "*" if kind == "em" else "**"
            out.append(f"{mark}{_md(txt)}{mark}")
        else:
            out.append(_md(s))
    return "".join(out)


def _html_segments(segs):
    out = []
    for s in segs:
        if isinstance(s, tuple):
            kind, txt = s
            out.append(f"<{kind}>{html.escape(txt)}</{kind}>")
        else:
            out.append(html.escape(s))
    return "".join(out)


def _item_segments(item):
    return item if isinstance(item, list) else [item]


def _render_md(doc):
    out = []
    for b in doc.blocks:
        kind = b[0]
        if kind == "h":
            out.append("#" * b[1] + " " + _md(b[2]))
        elif kind == "p":
            out.append(_md_segments(b[1]))
        elif kind == "table":
            header, rows = b[1], b[2]
            lines = ["| " + " | ".join(_md(h) for h in header) + " |",
                     "|" + "|".join("---" for _ in header) + "|"]
            lines += ["| " + " | ".join(_md(c) for c in r) + " |" for r in rows]
            out.append("\n".join(lines))
        elif kind == "ol":
            out.append("\n".join(f"{i + 1}. {_md(t)}" for i, t in enumerate(b[1])))
        elif kind == "ul":
            out.append("\n".join(f"- {_md_segments(_item_segments(t))}" for t in b[1]))
        elif kind == "img":
            out.append(f"![{_md(b[2])}]({b[1]})\n\n{_md(b[3])}")
    return "\n\n".join(out) + "\n"


_CSS = (
    "body{font-family:Helvetica,Arial,sans-serif;max-width:60em;margin:2em auto;"
    "padding:0 1em;line-height:1.45;color:#111}"
    "table{border-collapse:collapse;margin:0.6em 0 1.2em 0;font-size:0.9em}"
    "th,td{border:1px solid #bbb;padding:0.25em 0.5em;text-align:left;vertical-align:top}"
    "th{background:#f0f0f0}figure{margin:1em 0}img{max-width:100%}"
    "figcaption{font-size:0.9em;color:#333}.caution{border-left:4px solid #D55E00;"
    "padding:0.4em 0.8em;background:#fff6ef}"
)


def _render_html(doc, title):
    e = html.escape
    out = ["<!DOCTYPE html>", "<html lang=\"en\">", "<head>", "<meta charset=\"utf-8\">",
           f"<title>{e(title)}</title>", f"<style>{_CSS}</style>", "</head>", "<body>"]
    for b in doc.blocks:
        kind = b[0]
        if kind == "h":
            lv = min(max(int(b[1]), 1), 6)
            out.append(f"<h{lv}>{e(b[2])}</h{lv}>")
        elif kind == "p":
            segs = b[1]
            cls = " class=\"caution\"" if segs and segs[0] == ("strong", "Caution.") else ""
            out.append(f"<p{cls}>{_html_segments(segs)}</p>")
        elif kind == "table":
            header, rows = b[1], b[2]
            out.append("<table><thead><tr>" + "".join(f"<th>{e(h)}</th>" for h in header)
                       + "</tr></thead><tbody>")
            out += ["<tr>" + "".join(f"<td>{e(c)}</td>" for c in r) + "</tr>" for r in rows]
            out.append("</tbody></table>")
        elif kind == "ol":
            out.append("<ol>" + "".join(f"<li>{e(t)}</li>" for t in b[1]) + "</ol>")
        elif kind == "ul":
            out.append("<ul>" + "".join(f"<li>{_html_segments(_item_segments(t))}</li>"
                                        for t in b[1]) + "</ul>")
        elif kind == "img":
            out.append(f"<figure><img src=\"{e(b[1])}\" alt=\"{e(b[2])}\">"
                       f"<figcaption>{e(b[3])}</figcaption></figure>")
    out += ["</body>", "</html>"]
    return "\n".join(out) + "\n"


# ----------------------------------------------------------------------------------------
# formatting of numbers and interval bounds
# ----------------------------------------------------------------------------------------
def _fmt(x, digits=4):
    try:
        x = float(x)
    except (TypeError, ValueError):
        return "—"
    if not math.isfinite(x):
        return "—"
    return f"{x:.{digits}g}"


def _bound(x, status):
    """An interval bound as text: a number only when its status is 'ok' (or 'at_bound')."""
    status = str(status)
    if status == "open":
        return "open"
    if status == "failed":
        return "failed"
    if status == "fixed":
        return "fixed"
    if status == "not_available":
        return "n/a"
    if status == "at_bound":
        return f"{_fmt(x)} (at bound)"
    if status == "ok":
        return _fmt(x)
    return status


def _text(x):
    """A table cell from a possibly missing value (NaN or None become an empty cell)."""
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return ""
    return str(x)


def _interval(lo, hi, ls, hs):
    return f"[{_bound(lo, ls)}, {_bound(hi, hs)}]"


def _pct(level):
    return f"{level * 100:g} %"


# ----------------------------------------------------------------------------------------
# input normalisation
# ----------------------------------------------------------------------------------------
class _Series:
    """One row of the report: a fitted series or one that could not be fitted."""

    def __init__(self, name, key=None, fit=None, result=None, status="ok", reason=""):
        self.name = name
        self.key = key
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
                               status=r.status, reason=r.reason))
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
        out.append(_Series(name, fit=f))
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
        items.append(f"Candidate models: {', '.join(cands)}; one chosen per series by {crit}")
    doc.h(2, "Experiment")
    doc.ul(items)


def _weight_of(s, crit_col="weight"):
    r = s.result
    if r is None or r.comparison is None or r.chosen is None:
        return None
    row = r.comparison[r.comparison["label"].astype(str) == str(r.chosen)]
    return float(row[crit_col].iloc[0]) if len(row) else None


def _half_life_text(hl, structure="parallel"):
    what = "step" if structure == "chain" else "pool"
    parts = []
    for _, h in hl.iterrows():
        txt = (f"{_fmt(h['half_life'])} "
               f"{_interval(h['lower'], h['upper'], h['lower_status'], h['upper_status'])}")
        if len(hl) > 1:
            frac = h["fraction"]
            ftxt = f" (f = {_fmt(frac, 3)})" if isinstance(frac, float) and math.isfinite(
                frac) else ""
            txt = f"{what} {int(h['pool'])}{ftxt}: {txt}"
        parts.append(txt)
    return "; ".join(parts)


def _summary_table(doc, series, fitset, level, unit_word, summaries):
    crit = "AICc" if fitset is None else {"aicc": "AICc", "aic": "AIC", "bic": "BIC"}.get(
        fitset.criterion, fitset.criterion)
    from .conventions import unit_word as _unit_word

    mixed = "," in unit_word  # several time units: each cell names its own
    hl_head = (f"Half-life [{_pct(level)} interval]" if mixed
               else f"Half-life ({unit_word}) [{_pct(level)} interval]")
    header = ["Series", "Chosen model", "n", hl_head, f"{crit} weight", "Notes"]
    rows = []
    for s in series:
        if s.fit is None:
            rows.append([s.name, f"not fitted ({s.status})", "—", "—", "—", "—"])
            continue
        sm = summaries[s.name]
        w = _weight_of(s)
        model = s.fit.model.describe()
        hl = _half_life_text(sm.half_lives, s.fit.kinetics.structure)
        if mixed:
            hl += f" {_unit_word(s.fit.time_unit)}"
        rows.append([s.name, model, str(s.fit.nobs), hl,
                     "—" if w is None else f"{w:.3f}", str(len(sm.notes))])
    doc.h(2, "Summary")
    doc.table(header, rows)
    doc.p("Interval bounds the data do not close are shown as “open” (the profile never "
          "rises to the critical value within the parameter's range); “failed” means the "
          "interval could not be computed; “(at bound)” marks a bound at the edge of the "
          "parameter's range. With several pools the fraction f of each pool is given. "
          + ("The weight is the chosen candidate's weight among the series' candidates."
             if fitset is not None else
             "Each fit was given on its own, so there is no weight (—); use "
             "isoturnover.fit_each to compare candidate models."))


def _series_section(doc, idx, s, sm, level, method, figure_entries, crit):
    f = s.fit
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
                rows.append([lab, str(int(c["n_params"])), _fmt(c["rss"]), _fmt(c["aicc"], 5),
                             _fmt(c["delta_aicc"], 3), f"{float(c['weight']):.3f}",
                             "chosen" if lab == r.chosen else "fitted"])
            else:
                rows.append([lab, "—", "—", "—", "—", "—", f"not fitted: {r.reasons[lab]}"])
        doc.table(["Candidate", "k", "RSS", "AICc", f"Δ{crit}", "Weight", "Status"], rows)
        doc.p("k counts the free parameters and the residual variance when it is estimated "
              f"(the k of AICc); Δ{crit} is the difference from the lowest {crit}; weights "
              "w = exp(−Δ/2) / Σ exp(−Δ/2) (Burnham & Anderson 2002).")
    else:
        doc.p("One model was given for this series; no candidates were compared.")
    # parameters and derived quantities
    tab = f.table(level, method)
    par = tab[tab["kind"] == "parameter"]
    der = tab[tab["kind"] == "derived"]
    doc.h(3, f"Parameters ({_pct(level)} intervals)")
    rows = []
    for _, q in par.iterrows():
        if q["method"] == "fixed":
            rows.append([q["quantity"], _fmt(q["estimate"]), "fixed", "fixed", "fixed",
                         "fixed", _text(q["unit"])])
            continue
        rows.append([q["quantity"], _fmt(q["estimate"]), _fmt(q["stderr"]),
                     _bound(q["lower"], q["lower_status"]), _bound(q["upper"], q["upper_status"]),
                     q["method"], _text(q["unit"])])
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
            rows.append([label, _fmt(q["estimate"]), "no interval", "no interval", "—",
                         _text(q["unit"])])
            continue
        rows.append([label, _fmt(q["estimate"]), _bound(q["lower"], q["lower_status"]),
                     _bound(q["upper"], q["upper_status"]), q["method"], _text(q["unit"])])
    doc.table(["Quantity", "Estimate", "Lower", "Upper", "Method", "Unit"], rows)
    doc.h(3, "Notes")
    if sm.notes:
        doc.ol(sm.notes)
    else:
        doc.p("No notes.")
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


def _methods(doc, level, method, any_growth, any_per_diet=False):
    doc.h(2, "Methods")
    doc.p("Each series was fitted by least squares with the analytic Jacobian of the model "
          "(rates on the log scale with the pools ordered by construction, pool fractions by "
          "stick-breaking; deterministic multi-start). Without analytic sd the residual "
          "variance was estimated; given sd were used as relative weights unless stated as "
          "known. Studentized residuals and Cook's distance (Cook 1977, Technometrics "
          "19:15–18) flag suspect points, which are kept in the fit and marked in the "
          "figures.")
    used = ("profile likelihood (asymptotic for robust fits)" if method == "profile"
            else "asymptotic: from the covariance matrix, on the log scale for rates")
    doc.p(f"Intervals ({_pct(level)}) here: {used}. Profile likelihood intervals (Venzon & "
          "Moolgavkar 1988, Appl. Stat. 37:87–94) hold the values of a parameter whose "
          "residual sum of squares, minimised over all other parameters, stays within the "
          "F(1, n − p) critical value (Δχ² against χ²(1) when σ is known). Half-life bounds "
          "are the transformed rate bounds. A bound the data do not close is reported as "
          "open, never replaced by a search limit. The time to 95 % of a step change is "
          "−ln(0.05)/k for one pool (profile interval) and solved numerically otherwise "
          "(delta-method interval on the log scale).")
    doc.p("Candidate models were compared by the small-sample Akaike information criterion "
          "AICc (Hurvich & Tsai 1989, Biometrika 76:297–307) and Akaike weights (Burnham & "
          "Anderson 2002, Model Selection and Multimodel Inference, 2nd ed., Springer).")
    if any_per_diet:
        doc.p("Where a series' diets held two or more distinct values, every candidate was "
              "fitted with one diet–tissue separation shared by all diets and with one per "
              "diet value (candidates marked “separation per diet”), and all were ranked by "
              "the same criterion: the separation per diet is kept only when its lower "
              "residual sum of squares pays for its extra parameters. The separation can "
              "depend on the diet (for Δ15N its protein quality: Robbins et al. 2005, "
              "Oecologia 144:534–540); one shared separation forced on such data bends the "
              "rates or adds a spurious pool.")
    doc.p("Reaction-progress plots show ln(1 − F), 1 − F = (δ(t) − δ_eq)/(δ_0 − δ_eq) "
          "(Cerling et al. 2007, Oecologia 151:175–189), with δ_0 and δ_eq from the fit; "
          "points with F ≥ 1 or F ≤ 0 have no logarithm and are drawn at the plot edge.")
    doc.p("Growth dilution (Hesslein et al. 1993, Can. J. Fish. Aquat. Sci. 50:2071–2076; Fry "
          "& Arnold 1982, Oecologia 54:200–204): "
          + ("where body masses were modelled, the rates are catabolic rates and growth "
             "dilution is modelled separately, assuming each pool grows in proportion to body "
             "mass; elsewhere the rates"
             if any_growth else "no growth was modelled here, so the rates")
          + " are incorporation rates that lump growth dilution and catabolic turnover.")
    doc.p("Isotope values are in δ notation, δ = R_sample/R_standard − 1, in ‰ against the "
          "international scale of each isotope (Coplen 2011, Rapid Commun. Mass Spectrom. "
          "25:2538–2560). Figures use the Okabe–Ito colour-blind-safe palette (Okabe & Ito "
          "2008, Color Universal Design).")
    doc.p(POOL_STATEMENT)


# ----------------------------------------------------------------------------------------
# files: atomic, all-or-nothing
# ----------------------------------------------------------------------------------------
def _move(src, dst):
    """Rename ``src`` to ``dst`` in the same folder (atomic on POSIX and Windows)."""
    os.replace(src, dst)


def _remove(p):
    p = Path(p)
    if p.is_dir() and not p.is_symlink():
        shutil.rmtree(p, ignore_errors=True)
    else:
        try:
            p.unlink()
        except FileNotFoundError:
            pass


def _tmp_file(folder, name, data):
    fd, tmp = tempfile.mkstemp(dir=folder, prefix=f".{name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        os.chmod(tmp, 0o644)
    except BaseException:
        _remove(tmp)
        raise
    return Path(tmp)


def _commit(plan, folder, overwrite):
    """Move temporaries into place. ``plan``: list of (tmp or None, target).

    An existing target is first renamed to a backup; on any failure every target placed so
    far is removed, backups are restored and temporaries deleted, then the error re-raised.
    (A backup that cannot be moved back is left in its hidden ``.bak`` folder rather than
    deleted: the user's old file is never lost.)
    """
    placed, backups = [], []  # backups: [backup folder, item in it, target, moved?]
    try:
        for tmp, target in plan:
            if target.exists() or target.is_symlink():
                if not overwrite:  # appeared while the report was being built
                    raise FileExistsError(f"write_report: {str(target)!r} appeared while the "
                                          "report was written; nothing was replaced")
                bak = Path(tempfile.mkdtemp(dir=folder, prefix=f".{target.name}.", suffix=".bak"))
                entry = [bak, bak / target.name, target, False]
                backups.append(entry)
                _move(target, entry[1])
                entry[3] = True
            if tmp is not None:
                _move(tmp, target)
                placed.append(target)
    except BaseException:
        for target in reversed(placed):
            _remove(target)
        for bak, item, target, moved in reversed(backups):
            try:
                if moved:
                    _move(item, target)
            except OSError:  # pragma: no cover - keep the old file where it is, never lose it
                continue
            _remove(bak)
        for tmp, _ in plan:
            if tmp is not None:
                _remove(tmp)
        raise
    for bak, _, _, _ in backups:
        _remove(bak)


def _slug(text):
    s = re.sub(r"[^A-Za-z0-9._-]+", "_", str(text)).strip("._")
    return (s or "series")[:60]


def _render_figure(fig):
    import matplotlib.pyplot as plt

    try:
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=_DPI)
        return buf.getvalue()
    finally:
        plt.close(fig)


# ----------------------------------------------------------------------------------------
# entry point
# ----------------------------------------------------------------------------------------
def write_report(fits, path, *, title="Turnover analysis", level=0.95, method="profile",
                 figures=True, overwrite=False):
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
    method : {"profile", "asymptotic"}, default="profile"
        Interval method (profile likelihood; robust fits always use asymptotic intervals).
    figures : bool, default=True
        Draw one overview figure per fitted series (fit with confidence band, studentized
        residuals, reaction progress), the growth curve where one was fitted, and the
        candidates' weights of a FitSet. The HTML references the same PNG files as the
        Markdown (no embedding).
    overwrite : bool, default=False
        Replace an existing report at this path (the ``.md``, the ``.html`` and the whole
        ``<stem>_figures/`` folder, which must then hold only ``.png`` files).

    Returns
    -------
    list of pathlib.Path
        The Markdown file, the HTML file, then every figure written.

    Raises
    ------
    DataError
        For ``fits``, ``path``, ``title``, ``level``, ``method``, ``figures`` or
        ``overwrite`` of the wrong kind or value, and when the folder of ``path`` does not
        exist. Nothing is written.
    FileExistsError
        When a report file or the figures folder exists and ``overwrite`` is False (or
        appears while the report is written); nothing is replaced.

    Notes
    -----
    The report holds the title and date; the experiment (series, tissues, isotopes,
    subjects, time unit, design); a summary table (chosen model, half-lives with intervals
    and their statuses — a bound the data do not close reads "open", never a number —, the
    chosen model's weight); one section per series (model, candidate comparison, parameter
    table, derived quantities, numbered notes, figure); the series that could not be fitted
    with their reasons; methods with citations; the meaning of pool fractions; and the
    caution that animal experiments and field sampling need the approval of the local
    animal-care authority (human samples: a human-research ethics board), which the results
    support and do not replace.
    """
    from . import __version__
    from . import plotting as _plotting
    from .conventions import check_level as _check_level
    from .conventions import check_method as _check_method
    from .conventions import unit_word as _unit_word

    series, fitset = _collect(fits)
    if not series:
        raise DataError("'fits' is empty: give at least one fit or a FitSet with series")
    if not isinstance(title, str) or not title.strip():
        raise DataError(f"'title' must be a non-empty string; got {title!r}")
    level = _check_level(level)
    method = _check_method(method, ("profile", "asymptotic"))
    if not isinstance(figures, bool):
        raise DataError(f"'figures' must be True or False; got {figures!r}")
    if not isinstance(overwrite, bool):
        raise DataError(f"'overwrite' must be True or False; got {overwrite!r}")
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

    # -- build everything in memory ------------------------------------------------------
    units = sorted({s.fit.time_unit for s in series if s.fit is not None}
                   or {getattr(fitset, "time_unit", "d")})
    unit_word = ", ".join(_unit_word(u) for u in units)
    summaries = {s.name: s.fit.summary(level, method) for s in series if s.fit is not None}
    images = []  # (file name, png bytes)
    fig_entries = {}
    n_fig = 0
    rel = quote(f"{stem}_figures")
    weights_entry = None
    if figures:
        if fitset is not None and any(s.result.comparison is not None for s in series):
            ax = _plotting.plot_weights(fitset)
            name = "00_weights.png"
            images.append((name, _render_figure(ax.figure)))
            n_fig += 1
            weights_entry = (f"{rel}/{quote(name)}", "Model weights of every series",
                             f"Figure {n_fig}. Weights of the candidate models of each series "
                             "(empty bars: series not fitted, with their status).")
        for i, s in enumerate(series, start=1):
            if s.fit is None:
                continue
            entries = []
            fig = _plotting.plot_overview(s.fit, level=level)
            name = f"{i:02d}_{_slug(s.name)}.png"
            images.append((name, _render_figure(fig)))
            n_fig += 1
            entries.append((f"{rel}/{quote(name)}", f"Fit of {s.name}",
                            f"Figure {n_fig}. {s.name}: (a) data, fitted curve and "
                            f"{_pct(level)} confidence band (dashed lines: diet switches; "
                            "squares: flagged points, kept in the fit); (b) studentized "
                            "residuals with ±2 and ±3 guides; (c) reaction progress "
                            "ln(1 − F) with the fitted curve."))
            g = getattr(s.fit.model, "growth", None)
            if g is not None and hasattr(g, "t") and hasattr(g, "mass"):
                kw = {"turnover_fit": s.fit} if hasattr(s.fit, "growth_share_curve") else {}
                ax = _plotting.plot_growth(g, time_unit=s.fit.time_unit, **kw)
                gname = f"{i:02d}_{_slug(s.name)}_growth.png"
                images.append((gname, _render_figure(ax.figure)))
                n_fig += 1
                entries.append((f"{rel}/{quote(gname)}", f"Growth of {s.name}",
                                 f"Figure {n_fig}. {s.name}: body masses and the fitted "
                                 "growth curve."))
            fig_entries[s.name] = entries

    doc = _Doc()
    doc.h(1, title)
    doc.p(f"Date: {datetime.date.today().isoformat()}. Made with isoturnover {__version__}.")
    doc.p(("strong", "Caution."), " " + CAUTION)
    crit = "AICc" if fitset is None else _CRIT.get(fitset.criterion, str(fitset.criterion))
    _experiment(doc, series, fitset, unit_word)
    _summary_table(doc, series, fitset, level, unit_word, summaries)
    if weights_entry is not None:
        doc.img(*weights_entry)
    idx = 0
    for s in series:
        if s.fit is None:
            continue
        idx += 1
        _series_section(doc, idx, s, summaries[s.name], level, method,
                        fig_entries.get(s.name, []), crit)
    _not_fitted(doc, series)
    any_growth = any(s.fit is not None and s.fit.rate_kind == "catabolic" for s in series)
    from .groups import PER_DIET_LABEL

    any_per_diet = any(str(lab).endswith(PER_DIET_LABEL) for s in series
                       if s.result is not None for lab in s.result.reasons)
    _methods(doc, level, method, any_growth, any_per_diet)
    doc.h(2, "Caution")
    doc.p(("strong", "Caution."), " " + CAUTION)
    md_text = _render_md(doc)
    html_text = _render_html(doc, title)

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
        plan.append((_tmp_file(folder, md_path.name, md_text.encode("utf-8")), md_path))
        plan.append((_tmp_file(folder, html_path.name, html_text.encode("utf-8")), html_path))
    except BaseException:
        for tmp, _ in plan:
            if tmp is not None:
                _remove(tmp)
        raise
    _commit(plan, folder, overwrite)
    return [md_path, html_path] + [fig_dir / name for name, _ in images]
