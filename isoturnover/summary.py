r"""What a reader sees of one fit: the printable summary, its numbered notes, the influence
table, and lmfit's views of it (:class:`LmfitViews`: ``fit.params`` and
``fit.lmfit_result``, so ``lmfit.fit_report`` works).

Everything here reads a :class:`~isoturnover.TurnoverFit` through its public attributes
and methods (and ``fit.state``); nothing computes an interval of its own. The summary
follows one layout: a header (data, model, method, weighting, fit statistics), the
parameters with their intervals, the derived quantities (half-lives, time to 95 % of a step
change, mean residence time) and numbered notes — every trust warning first.

This module sits beside :mod:`isoturnover.results` (which imports it, one way): a
``TurnoverFit`` returns a :class:`Summary` without this module knowing the class.
"""

from __future__ import annotations

import functools
import html
import math

import numpy as np
import pandas as pd

from . import quantities
from .conventions import INTERVAL_COLUMNS, check_level, check_method, unit_word
from .segments import segment_data_text

__all__ = ["Summary", "fit_table", "fit_notes", "influence_table", "LmfitViews",
           "fixed_by_construction", "mean_residence_time_names", "growth_share_note",
           "table_records",
           "residual_text", "fraction_note", "VALUE_UNIT", "FRACTION_SPAN"]

#: Unit of the observations and residuals: δ in ‰ on every scale (a model that mixes in
#: atom fraction converts its prediction back to δ before it meets the data).
VALUE_UNIT = "‰"

#: Width of a pool fraction's interval (of 0–1) from which the fraction is "not determined".
FRACTION_SPAN = 0.9

#: How the summary names each kind of mean residence time of a fit with a growth model.
_MRT_LABELS = {"incorporation": "mean residence time, incorporation (from k_d + k_g)",
               "catabolic": "mean residence time, catabolic (from k_d alone)"}


def _fmt(x, digits=4):
    """A number for the summary: ``—`` for missing, ``∞`` for infinite, else ``digits``
    significant digits."""
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "—"
    if isinstance(x, float) and math.isinf(x):
        return "∞" if x > 0 else "−∞"
    return f"{x:.{digits}g}"


def _bound(x, status):
    """An interval bound as text: ``open``/``failed`` by status, ``*`` at a hard limit."""
    if status == "open":
        return "open"
    if status == "failed":
        return "failed"
    s = _fmt(x)
    return s + ("*" if status == "at_bound" else "")


def influence_table(fit) -> pd.DataFrame:
    r"""Studentised residuals, leverage and Cook's distance of every point of a fit.

    Internally studentised residuals :math:`r_i/(s\sqrt{1-h_{ii}})` and Cook's distance
    :math:`D_i = r_i^2 h_{ii} / (p s^2 (1-h_{ii})^2)` (Cook 1977), with :math:`h_{ii}` the
    diagonal of the hat matrix of the weighted Jacobian at the solution (from its QR
    factors) and :math:`s^2 = \mathrm{rss}/(n-p)` (1 for joint fits, whose blocks are
    scaled). ``flagged`` marks |studentised| > 3 or D > 1 (common practice).

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit.

    Returns
    -------
    DataFrame
        Columns time, value, fitted, residual, studentized, leverage, cooks_distance,
        flagged; one row per time point.
    """
    st = fit.state
    J = st.jac_z
    r = st.weighted_residuals()
    n, p = fit.nobs, fit.nvarys
    s2 = fit.rss / fit.dof if fit.dof > 0 else math.nan
    if fit.joint:
        s2 = 1.0
    if p and J is not None and st.cov_ok:
        q, _ = np.linalg.qr(J)
        h = np.sum(q[:n] ** 2, axis=1)
    else:
        h = np.full(n, math.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        stud = r / np.sqrt(s2 * (1 - h))
        cook = r**2 * h / (p * s2 * (1 - h) ** 2) if p else np.full(n, math.nan)
    flagged = (np.abs(stud) > 3) | (cook > 1)
    return pd.DataFrame({"time": fit.t, "value": fit.y, "fitted": fit.best_fit,
                         "residual": fit.residuals, "studentized": stud, "leverage": h,
                         "cooks_distance": cook, "flagged": flagged})


def mean_residence_time_names(fit) -> list:
    """Names and kinds of the mean residence times a fit reports.

    Without a growth model the rates are incorporation rates and there is one,
    ``mean_residence_time``; with one, ``mean_residence_time_incorporation`` (from
    :math:`k_{d,i} + k_g`) and ``mean_residence_time_catabolic`` (from :math:`k_{d,i}`
    alone), each named for what it is.

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit.

    Returns
    -------
    list of (str, str)
        ``(quantity, kind)`` pairs, kind being ``"incorporation"`` or ``"catabolic"``
        (the ``kind`` of :meth:`TurnoverFit.mean_residence_time
        <isoturnover.TurnoverFit.mean_residence_time>`).
    """
    if fit.kinetics.growth_kind is None:
        return [("mean_residence_time", "incorporation")]
    return [("mean_residence_time_incorporation", "incorporation"),
            ("mean_residence_time_catabolic", "catabolic")]


def growth_share_note(fit):
    r"""The summary's note on the growth share of a fit with a growth model.

    The share of the isotopic change up to the last sample T carried by the growth flux,
    :math:`\int k_g \sum_i f_i (\delta_{in} - \delta_i)\,dt / (\delta(T) - \delta(0))`
    (:func:`isoturnover.quantities.growth_share_at`); :math:`k_g/(k_g + k_d)` for one pool
    with exponential growth (Hesslein et al. 1993). A point estimate: its interval is
    :meth:`TurnoverFit.growth_share <isoturnover.TurnoverFit.growth_share>`.

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit.

    Returns
    -------
    str or None
        The note; None without a growth model or when the share is not defined.
    """
    if fit.kinetics.growth_kind is None:
        return None
    T = float(fit.t.max())
    try:
        share = quantities.growth_share_at(fit.kinetics, T, fit.state.theta)
    except (ArithmeticError, ValueError):
        share = math.nan
    if not np.isfinite(share):
        return None
    return (f"growth share: the growth flux carries {100 * share:.3g} % of the isotopic change up "
            f"to t = {T:g} (∫ k_g Σ f_i (δ_in − δ_i) dt / (δ(T) − δ(0)); k_g/(k_g + k_d) "
            "for one pool with exponential growth, Hesslein et al. 1993); the rest is "
            "catabolic replacement")


def residual_text(fit) -> str:
    r"""The residual sum of squares and residual sd of a fit, each with its unit.

    Without σ: :math:`RSS = \sum r_i^2` in ‰² and :math:`s = \sqrt{RSS/(n-p)}` in ‰.
    With σ as relative weights: the weighted RSS :math:`\sum (r_i/\sigma_i)^2` and
    :math:`s` as a multiple of σ (each point's residual sd is :math:`s\,\sigma_i`). With σ
    known: the weighted RSS is the χ² statistic and :math:`s = 1` by construction. Joint
    fits with body masses or a growth prior: the δ block's own RSS and sd, from the δ
    residuals alone with :math:`p_\delta` = free parameters less those of the other block
    (the growth rate, or the growth-curve parameters), not the blocks' combined objective.

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit.

    Returns
    -------
    str
        E.g. ``"RSS 0.4312 ‰², s = 0.1821 ‰"``.
    """
    u = VALUE_UNIT
    if fit.joint:
        mb = fit.state.engine.mass_block
        w = 1.0 / fit.sigma if fit.sigma is not None else np.ones(fit.nobs)
        r = w * (fit.y - fit.best_fit)
        rss_d = float(r @ r)
        p_d = fit.nvarys - (mb.size if mb.kind == "prior" else 1)
        dof_d = fit.nobs - p_d
        s_d = math.sqrt(rss_d / dof_d) if dof_d > 0 else math.nan
        if fit.sigma is None:
            text = f"RSS {_fmt(rss_d)} {u}² (δ block), s = {_fmt(s_d)} {u} (δ residuals)"
        else:
            text = (f"RSS {_fmt(rss_d)} (δ block, weighted by 1/σ²), s = {_fmt(s_d)} × σ "
                    "(δ residuals)")
        if mb.kind == "masses":
            rm = mb.raw_residuals(fit.state.theta)
            text += f"; ln(body mass) block RSS {_fmt(float(rm @ rm))}"
        return text
    s = math.sqrt(fit.s2) if fit.s2 > 0 else math.nan
    if fit.sigma is None:
        return f"RSS {_fmt(fit.rss)} {u}², s = {_fmt(s)} {u}"
    if fit.absolute_sigma:
        return f"χ² (RSS weighted by 1/σ²) {_fmt(fit.rss)}, s = 1 × σ (σ known, not rescaled)"
    return f"RSS {_fmt(fit.rss)} (weighted by 1/σ²), s = {_fmt(s)} × σ"


def fraction_note(parameters):
    """The note on pool fractions whose interval spans nearly all of 0–1.

    A fraction whose interval is at least :data:`FRACTION_SPAN` wide (an ``open`` bound
    counts as reaching its end of 0–1; a ``failed`` bound as unknown) is not determined by
    the data: any split of the change between the pools fits about as well.

    Parameters
    ----------
    parameters : DataFrame
        A fit's ``conf_int`` (columns parameter, lower, upper, level, method,
        lower_status, upper_status).

    Returns
    -------
    str or None
        The note naming the fractions and their intervals; None when every fraction is
        narrower (or fixed, or of a single pool).
    """
    hits = []
    for _, r in parameters.iterrows():
        nm = str(r["parameter"])
        if not (nm.startswith("f") and nm[1:].isdigit()) or r["method"] == "fixed":
            continue
        if "failed" in (r["lower_status"], r["upper_status"]):
            continue
        lo = 0.0 if r["lower_status"] == "open" else float(r["lower"])
        hi = 1.0 if r["upper_status"] == "open" else float(r["upper"])
        if np.isfinite(lo) and np.isfinite(hi) and hi - lo >= FRACTION_SPAN:
            hits.append(f"{nm} [{_bound(r['lower'], r['lower_status'])}, "
                        f"{_bound(r['upper'], r['upper_status'])}]")
    if not hits:
        return None
    level = float(parameters["level"].iloc[0])
    return (f"fraction not determined: the {level:.0%} interval of "
            + ", ".join(hits) + " spans nearly all of 0–1 (at least "
            f"{FRACTION_SPAN:g} wide); these data do not fix how the change splits between "
            "the pools — fewer pools, or samples where the pools differ, would")


def fit_table(fit, level=0.95, method="profile") -> pd.DataFrame:
    """One tidy row per parameter and derived quantity of a fit.

    The parameter rows are ``fit.conf_int``; the derived rows ``half_life_i``
    (``fit.half_lives``), ``time_to_95`` (``fit.time_to(0.95)``) and the mean residence
    times of :func:`mean_residence_time_names` (``fit.mean_residence_time_interval``;
    with a growth model ``mean_residence_time_incorporation`` and
    ``mean_residence_time_catabolic``), all at ``level``.

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit.
    level : float, default=0.95
        Confidence level.
    method : {"profile", "asymptotic", "bootstrap", "mcmc"}, default="profile"
        Interval method.

    Returns
    -------
    DataFrame
        Columns quantity, kind ("parameter" or "derived"), estimate, stderr, lower, upper,
        level, method, lower_status, upper_status, unit.
    """
    level, method = check_level(level), check_method(method)
    return fit.cached(("fit_table", round(level, 12), method),
                      lambda: _fit_table(fit, level, method)).copy()


def _fit_table(fit, level, method):
    """:func:`fit_table`, computed (the public function keeps it on the fit)."""
    ci = fit.cached_frame("conf_int", level, method)
    kin = fit.kinetics
    unit = unit_word(fit.time_unit)
    units = {}
    for nm in kin.param_names:
        if nm in kin.rate_names or nm == "k_growth":
            units[nm] = f"per {unit[:-1]}"
        elif nm == "lag":
            units[nm] = unit
        elif nm in kin.fraction_names:
            units[nm] = "fraction"
        elif nm.startswith("growth_"):
            units[nm] = "growth-curve parameter"
        else:
            units[nm] = "‰"
    cols = ["quantity", "kind", "estimate", "stderr", "lower", "upper", "level", "method",
            "lower_status", "upper_status", "unit"]
    rows = [{**r, "quantity": r["parameter"], "kind": "parameter",
             "unit": units.get(r["parameter"], math.nan)} for r in table_records(ci)]
    derived = [(f"half_life_{int(r['pool'])}", r)
               for r in table_records(fit.cached_frame("half_lives", level, method))]
    derived.append(("time_to_95",
                    table_records(fit.cached_frame("time_to", 0.95, level, method))[0]))
    derived += [(q, table_records(fit.mean_residence_time_interval(level, method,
                                                                   kind=kind))[0])
                for q, kind in mean_residence_time_names(fit)]
    rows += [{"quantity": q, "kind": "derived", "stderr": math.nan,
              **{c: r[c] for c in INTERVAL_COLUMNS}, "level": level, "unit": unit}
             for q, r in derived]
    return pd.DataFrame([[r[c] for c in cols] for r in rows], columns=cols)


def table_records(frame) -> list:
    """The rows of a small table as dicts of plain Python values (column → value).

    One conversion of the whole table (``to_numpy(dtype=object)``) instead of a lookup per
    cell: the interval tables of a fit are read this way wherever they are taken apart.

    Parameters
    ----------
    frame : DataFrame
        A table (an interval table of a fit, say).

    Returns
    -------
    list of dict
        One dict per row, in row order, keys in column order.
    """
    cols = list(frame.columns)
    return [dict(zip(cols, vals)) for vals in frame.to_numpy(dtype=object).tolist()]


def fit_notes(fit) -> list[str]:
    """Numbered-note texts of a fit's summary.

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit.

    Returns
    -------
    list of str
        Every trust warning (``fit.warnings``), then notes on the method and on what the
        numbers mean (rate kind, growth share, pool fractions, weighting, robust loss,
        hydrogen and oxygen inputs, flagged points, destructive sampling).
    """
    out = [w.message for w in fit.warnings]
    kin = fit.kinetics
    if fit.rate_kind == "incorporation":
        out.append("rates are incorporation rates: without a growth model they lump "
                   "growth dilution and catabolic turnover")
    else:
        out.append("rates k1… are catabolic rates (growth dilution modelled separately; "
                   "pools assumed to grow in proportion to body mass); a juvenile's "
                   "catabolic rate is that of a non-growing animal of its size and state, "
                   "not of an adult")
        share = growth_share_note(fit)
        if share is not None:
            out.append(share)
    if kin.structure == "parallel" and kin.pools > 1:
        out.append("pool fractions describe the shape of the curve; they need not be "
                   "physical compartments")
    if fit.sigma is not None and not fit.absolute_sigma:
        out.append("sigma used as relative weights; residual variance estimated from the "
                   "scatter (analytic sd is usually far below the scatter between time "
                   "points of a living animal)")
    if fit.loss != "linear":
        out.append(f"robust loss '{fit.loss}' (scale {fit.f_scale:.3g} from the MAD of a "
                   "first fit); intervals are asymptotic")
    iso_ = fit.model.isotope or fit.data_info.get("isotope")
    if iso_ in ("d2H", "d18O"):
        out.append("for hydrogen and oxygen the 'diet' input stands for the combined input "
                   "of food, drinking water (and, for oxygen, air)")
    infl = fit.influence()
    fl = infl[infl["flagged"]]
    if len(fl):
        out.append("points flagged as outlying or influential (kept in the fit): t = "
                   + ", ".join(f"{x:g}" for x in fl["time"]))
    if fit.data_info.get("design") == "destructive":
        out.append("destructive sampling (one animal per sample): the residual variance "
                   "holds the between-animal scatter")
    return out


class Summary:
    """Printable fit summary: header, parameters, derived quantities, numbered notes.

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit.
    level : float, default=0.95
        Confidence level of the intervals shown.
    method : {"profile", "asymptotic", "bootstrap", "mcmc"}, default="profile"
        Interval method.

    Attributes
    ----------
    header : list of (str, str)
        Data, model, method, weighting, fit statistics, rate kind.
    parameters, half_lives, time_to : DataFrame
        ``fit.conf_int``, ``fit.half_lives`` and ``fit.time_to(0.95)`` at ``level``.
    notes : list of str
        :func:`fit_notes`, with :func:`fraction_note` (which needs the intervals) after the
        trust warnings.
    """

    def __init__(self, fit, level=0.95, method="profile"):
        self.fit = fit
        self.level = check_level(level)
        self.method = check_method(method)
        self.header = self._header()
        self.parameters = fit.cached_frame("conf_int", self.level, self.method)
        self.half_lives = fit.cached_frame("half_lives", self.level, self.method)
        self.time_to = fit.cached_frame("time_to", 0.95, self.level, self.method)
        notes = list(fit.notes())
        frac = fraction_note(self.parameters)
        if frac is not None:  # a trust signal: after the fit's warnings, before the rest
            notes.insert(len(fit.warnings), frac)
        self.notes = notes

    def _header(self):
        f = self.fit
        mb = f.state.engine.mass_block
        unit = unit_word(f.time_unit)
        rel = " (σ as relative weights)" if f.sigma is not None else ""
        if f.joint and mb.kind == "prior":
            weighting = ("δ residual variance estimated" + rel + "; growth-curve parameters "
                         "carried with their uncertainty (Gaussian penalty from the growth "
                         "fit), so profiles run over them too")
        elif f.joint:
            sd_, sm_ = f.block_scale
            permil = "" if f.sigma is not None else " ‰"
            weighting = (f"joint fit of δ and ln(body mass), each block weighted by its own "
                         f"residual sd (s_δ = {sd_:.3g}{permil}{rel}, s_ln W = {sm_:.3g})")
        elif f.sigma is None:
            weighting = "unweighted; residual variance estimated"
        elif f.absolute_sigma:
            weighting = "weights 1/σ² with σ known (absolute); no rescaling"
        else:
            weighting = "weights 1/σ² (relative); residual variance estimated"
        rows = [
            ("Data", f"{f.label + ': ' if f.label else ''}" + (segment_data_text(f) or (
                f"{f.nobs} time points, t = {f.t.min():g} to {f.t.max():g} {unit}"))),
            ("Model", f.model.describe()),
            ("Method", f"least squares ({'robust, ' + f.loss if f.loss != 'linear' else 'linear'}"
                       f" loss), {f.starts_tried} start(s); intervals: "
                       f"{f.method_used(self.method)}, {self.level:.0%}"),
            ("Weighting", weighting),
            ("Fit", f"{residual_text(f)}, "
                    f"AICc {_fmt(f.aicc, 5)}, BIC {_fmt(f.bic, 5)}, "
                    f"{'converged' if f.converged else 'NOT converged'}"),
        ]
        if f.absolute_sigma and f.chisqr_pvalue is not None:
            rows.append(("Goodness of fit", f"χ² = {_fmt(f.rss)} on {f.dof} dof "
                                            f"(χ²/dof {_fmt(f.redchi, 3)}), p = "
                                            f"{_fmt(f.chisqr_pvalue, 3)}"))
        rows.append(("Rates", f"{f.rate_kind} rates, per {unit[:-1]}"))
        return rows

    def _note_marks(self):
        return [f"[{i + 1}] {n}" for i, n in enumerate(self.notes)]

    def __str__(self):
        f = self.fit
        lines = ["Turnover fit", "=" * 72]
        w = max(len(k) for k, _ in self.header)
        lines += [f"{k:<{w}}  {v}" for k, v in self.header]
        lines.append("")
        lines.append(f"Parameters ({self.level:.0%} intervals)")
        lines.append(f"  {'name':<16}{'estimate':>12}{'stderr':>12}{'lower':>12}{'upper':>12}")
        at_zero = f.rates_at_zero
        for _, r in self.parameters.iterrows():
            if r["method"] == "fixed":
                lines.append(f"  {r['parameter']:<16}{_fmt(r['estimate']):>12}{'(fixed)':>12}")
                continue
            est_text = _fmt(r["estimate"])
            if r["parameter"] in at_zero:
                est_text = "0 (edge)"  # a rate run to 0 within double precision
            lines.append(f"  {r['parameter']:<16}{est_text:>12}"
                         f"{_fmt(r['stderr']):>12}{_bound(r['lower'], r['lower_status']):>12}"
                         f"{_bound(r['upper'], r['upper_status']):>12}")
        lines.append("")
        unit = unit_word(f.time_unit)
        lines.append(f"Derived quantities ({unit})")
        for _, r in self.half_lives.iterrows():
            what = "step" if f.kinetics.structure == "chain" else "pool"
            frac = "" if math.isnan(r["fraction"]) else f" (fraction {_fmt(r['fraction'], 3)})"
            lines.append(f"  half-life, {what} {int(r['pool'])}{frac}: {_fmt(r['half_life'])} "
                         f"[{_bound(r['lower'], r['lower_status'])}, "
                         f"{_bound(r['upper'], r['upper_status'])}]")
        tt = self.time_to.iloc[0]
        lines.append(f"  time to 95 % of a step change: {_fmt(tt['estimate'])} "
                     f"[{_bound(tt['lower'], tt['lower_status'])}, "
                     f"{_bound(tt['upper'], tt['upper_status'])}] — {tt['method']}")
        for q, kind in mean_residence_time_names(f):
            label = _MRT_LABELS[kind] if q != "mean_residence_time" else "mean residence time"
            lines.append(f"  {label}: {_fmt(f.mean_residence_time(kind))}")
        if any(self.parameters["lower_status"].eq("at_bound")
               | self.parameters["upper_status"].eq("at_bound")):
            lines.append("  (* at the bound of the parameter's range)")
        if self.notes:
            lines.append("")
            lines.append("Notes")
            lines += [f"  {m}" for m in self._note_marks()]
        return "\n".join(lines)

    def _repr_html_(self):
        e = html.escape
        f = self.fit
        out = ["<div class='isoturnover-summary'><table>"]
        out += [f"<tr><th style='text-align:left'>{e(k)}</th><td style='text-align:left'>"
                f"{e(v)}</td></tr>" for k, v in self.header]
        out.append("</table><table><tr><th>parameter</th><th>estimate</th><th>stderr</th>"
                   "<th>lower</th><th>upper</th></tr>")
        for _, r in self.parameters.iterrows():
            if r["method"] == "fixed":
                out.append(f"<tr><td>{e(r['parameter'])}</td><td>{_fmt(r['estimate'])}</td>"
                           "<td colspan=3>fixed</td></tr>")
                continue
            out.append(f"<tr><td>{e(r['parameter'])}</td><td>{_fmt(r['estimate'])}</td>"
                       f"<td>{_fmt(r['stderr'])}</td>"
                       f"<td>{e(_bound(r['lower'], r['lower_status']))}</td>"
                       f"<td>{e(_bound(r['upper'], r['upper_status']))}</td></tr>")
        out.append("</table><table><tr><th>pool</th><th>fraction</th><th>half-life "
                   f"({e(unit_word(f.time_unit))})</th><th>lower</th><th>upper</th></tr>")
        for _, r in self.half_lives.iterrows():
            out.append(f"<tr><td>{int(r['pool'])}</td><td>{_fmt(r['fraction'], 3)}</td>"
                       f"<td>{_fmt(r['half_life'])}</td>"
                       f"<td>{e(_bound(r['lower'], r['lower_status']))}</td>"
                       f"<td>{e(_bound(r['upper'], r['upper_status']))}</td></tr>")
        out.append("</table>")
        if self.notes:
            out.append("<ol>" + "".join(f"<li>{e(n)}</li>" for n in self.notes) + "</ol>")
        out.append("</div>")
        return "".join(out)

    def as_text(self) -> str:
        """The summary as plain text (``str(summary)``).

        Returns
        -------
        str
        """
        return str(self)

    def __repr__(self):
        return str(self)


def fixed_by_construction(kinetics) -> set:
    """Parameters that are fixed by the model's construction, not by the user.

    Parameters
    ----------
    kinetics : TurnoverKinetics
        The model (:class:`~isoturnover.kinetics.TurnoverKinetics`).

    Returns
    -------
    set of str
        The fraction of a single pool (``{"f1"}``, always 1), else empty.
    """
    fr = kinetics.fraction_names
    return set(fr) if len(fr) == 1 else set()


class LmfitViews:
    """lmfit's views of a fit (a mixin; :class:`~isoturnover.TurnoverFit` has them).

    Both are built on first access from the fit's public attributes (``kinetics``,
    ``state``, ``stderr``, ``covar``, ``fixed``, ``tied``, ``bounds`` and the criteria) and
    kept on the fit.
    """

    @functools.cached_property
    def params(self):
        """Natural parameters as :class:`lmfit.Parameters` (built on first access).

        Values, bounds (rates ≥ 0, fractions in [0, 1], the lag ≥ 0, bounds given in
        ``params=``), ``stderr`` and ``correl`` from the fit's covariance; fixed parameters
        have ``vary=False``, the last fraction and tied parameters keep their expressions.
        """
        return self._make_params()

    @functools.cached_property
    def lmfit_result(self):
        """This fit as lmfit's own result object, in natural parameters (built on first access).

        A :class:`lmfit.minimizer.MinimizerResult` with ``params`` (values, ``stderr``,
        ``correl``, expressions), ``var_names``, ``covar`` (of the varying natural
        parameters), ``chisqr`` (= :attr:`rss`), ``redchi``, ``aic``, ``bic``, ``nfev``,
        ``ndata``, ``nvarys``, ``nfree``, ``residual`` (weighted), ``success`` and
        ``errorbars``, so ``lmfit.fit_report(fit.lmfit_result)`` prints lmfit's report. The
        information criteria are this library's, not lmfit's. Fits made with ``params=`` ran
        through :class:`lmfit.Minimizer`; its result in the internal coordinates is
        ``fit.lmfit_result.minimizer_result``.
        """
        from lmfit.minimizer import MinimizerResult

        ps, st = self.params, self.state
        var_names = [n for n in ps if ps[n].vary]
        idx = [list(self.kinetics.param_names).index(n) for n in var_names]
        raw = st.solution.extra.get("lmfit")
        return MinimizerResult(
            params=ps, var_names=var_names,
            covar=self.covar[np.ix_(idx, idx)] if st.cov_ok else None,
            init_vals=[ps[n].value for n in var_names], nfev=self.nfev,
            success=st.optimizer_ok, errorbars=bool(st.cov_ok), message=self.message,
            method="least_squares (lmfit.Minimizer)" if raw is not None else
            "leastsq (MINPACK, analytic Jacobian)",
            ndata=self.nobs, nvarys=self.nvarys, nfree=self.dof, chisqr=self.rss,
            redchi=self.redchi, aic=self.aic, bic=self.bic,
            residual=st.weighted_residuals(), minimizer_result=raw)

    def _make_params(self):
        """The :class:`lmfit.Parameters` of :attr:`params`."""
        import lmfit

        kin = self.kinetics
        theta = self.state.theta
        ps = lmfit.Parameters()
        se = self.stderr
        names = kin.param_names
        implicit = fixed_by_construction(kin)
        for j, nm in enumerate(names):
            if nm in self.tied:
                continue
            mn, mx = self.bounds.get(nm, (-np.inf, np.inf))
            if nm in kin.rate_names:
                mn = 0.0
            elif nm in kin.fraction_names:
                mn, mx = 0.0, 1.0
            elif nm == "lag":
                mn = max(mn, 0.0)
            v = float(theta[j])
            vary = nm not in self.fixed and nm not in implicit
            ps.add(nm, value=min(max(v, mn), mx), vary=vary, min=mn, max=mx)
            if vary:
                ps[nm].stderr = se[nm] if np.isfinite(se[nm]) else None
        # the last fraction is the rest (as in TurnoverModel.make_params)
        fr = kin.fraction_names
        if len(fr) > 1 and fr[-1] not in self.fixed:
            ps[fr[-1]].set(expr=" - ".join(["1"] + list(fr[:-1])))
            ps[fr[-1]].stderr = se[fr[-1]] if np.isfinite(se[fr[-1]]) else None
        # parameters set by expressions, in dependency order, keep their expressions
        for nm in self.tied:
            ps.add(nm, expr=self.tied[nm])
            ps[nm].stderr = se[nm] if np.isfinite(se[nm]) else None
        expressed = set(self.tied) | ({fr[-1]} if len(fr) > 1 else set())
        if self.state.cov_ok:
            c = self.covar
            d = np.sqrt(np.diag(c))
            for i, a in enumerate(names):
                if a in self.fixed or a in expressed or not d[i] > 0:
                    continue
                ps[a].correl = {b: float(c[i, j] / (d[i] * d[j])) for j, b in enumerate(names)
                                if j != i and b not in self.fixed and b not in expressed
                                and d[j] > 0}
        return ps
