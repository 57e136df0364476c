"""The report's methods text and its bootstrap intervals.

:func:`methods_section` writes the report's methods (fitting, intervals, model choice,
growth dilution, sources); :func:`bootstrap_tables` computes (or checks the given) bootstrap
interval tables of every series, each seeded from the run's seed and the series' name
(:func:`series_seed`), and :func:`bootstrap_section` / :func:`boot_half_lives` show them.
"""

from __future__ import annotations

from collections.abc import Mapping

from .errors import DataError
from .reportdoc import fmt_bound, fmt_number, fmt_text, pct_text

__all__ = ["POOL_STATEMENT", "methods_section", "bootstrap_section", "boot_half_lives",
           "series_seed", "bootstrap_tables", "boot_count"]

#: Statement on the meaning of pool fractions printed in every report.
POOL_STATEMENT = (
    "Pool fractions describe the shape of the curve; they need not be physical compartments "
    "of the tissue."
)


def methods_section(doc, level, method, any_growth, any_per_diet=False, n_boot=None):
    """Write the report's methods section (fitting, intervals, model choice, sources).

    Parameters
    ----------
    doc : reportdoc.Doc
        The document being built.
    level : float
        Confidence level of the intervals, in (0, 1).
    method : {"profile", "asymptotic", "bootstrap"}
        The interval method shown.
    any_growth : bool
        Whether some series modelled body mass (catabolic rates).
    any_per_diet : bool, default=False
        Whether candidates with one separation per diet value were fitted.
    n_boot : int, optional
        Bootstrap replicates per series.
    """
    doc.h(2, "Methods")
    doc.p("Each series was fitted by least squares with the analytic Jacobian of the model "
          "(rates on the log scale with the pools ordered by construction, pool fractions by "
          "stick-breaking; deterministic multi-start). Without analytic sd the residual "
          "variance was estimated; given sd were used as relative weights unless stated as "
          "known. Studentized residuals and Cook's distance (Cook 1977, Technometrics "
          "19:15–18) flag suspect points, which are kept in the fit and marked in the "
          "figures.")
    used = {"profile": "profile likelihood (asymptotic for robust fits)",
            "asymptotic": "asymptotic: from the covariance matrix, on the log scale for rates",
            "bootstrap": "residual bootstrap percentile intervals for the half-lives in the "
                         "summary, the overview figure and each series' bootstrap table; the "
                         "parameter and derived-quantity tables keep their profile "
                         "likelihood intervals"}[method]
    if method == "bootstrap":
        doc.p("Bootstrap: each series' fitted curve plus its residuals drawn with replacement "
              f"gave {n_boot if n_boot else 'the stated number of'} replicate data sets, each "
              "refitted; the interval holds the central "
              f"{pct_text(level)} of the replicates' values (percentile interval; Efron & "
              "Tibshirani 1993, An Introduction to the Bootstrap, Chapman & Hall, §13.3). "
              "A bound that falls on replicates that ran to the edge of the parameter space "
              "is reported as open.")
    doc.p(f"Intervals ({pct_text(level)}) here: {used}. Profile likelihood intervals (Venzon & "
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

def bootstrap_section(doc, boot, tab, level):
    """Write one series' bootstrap interval table (or say it has none).

    Parameters
    ----------
    doc : reportdoc.Doc
        The document being built.
    boot : DataFrame or None
        The series' bootstrap intervals (:meth:`~isoturnover.resampling.BootstrapResult.
        intervals`).
    tab : DataFrame
        The fit's parameter table (for the units).
    level : float
        Confidence level, in (0, 1).
    """
    doc.h(3, f"Bootstrap intervals ({pct_text(level)}, residual bootstrap, percentile)")
    if boot is None:
        doc.p("No bootstrap intervals for this series; the profile intervals above stand.")
        return
    units = dict(zip(tab["quantity"].astype(str), tab["unit"]))
    rows = []
    for _, q in boot.iterrows():
        nm = str(q["parameter"])
        if str(q.get("method", "")) == "fixed":
            continue
        rows.append([nm, fmt_number(q["estimate"]), fmt_number(q.get("stderr")),
                     fmt_bound(q["lower"], q["lower_status"]),
                     fmt_bound(q["upper"], q["upper_status"]), fmt_text(units.get(nm))])
    doc.table(["Quantity", "Estimate", "Bootstrap SE", "Lower", "Upper", "Unit"], rows)
    a = boot.attrs
    used, failed = a.get("n_used"), a.get("n_failed")
    doc.p(f"Replicates: {a.get('n_boot', '—')} drawn"
          + (f", {used} used" if used is not None else "")
          + (f", {failed} failed (left out)" if failed is not None else "")
          + ". The bootstrap SE is the standard deviation of the replicates' values, in the "
          "quantity's unit.")

def boot_half_lives(hl, boot):
    """The half-life rows with the bootstrap bounds of ``boot`` (pools without one keep
    theirs and are marked)."""
    hl = hl.copy()
    hl["source"] = "profile/asymptotic"
    if boot is None:
        return hl
    bi = boot.set_index(boot["parameter"].astype(str))
    for i, h in hl.iterrows():
        q = f"half_life_{int(h['pool'])}"
        if q in bi.index:
            b = bi.loc[q]
            hl.loc[i, ["lower", "upper"]] = [float(b["lower"]), float(b["upper"])]
            hl.loc[i, ["lower_status", "upper_status"]] = [str(b["lower_status"]),
                                                           str(b["upper_status"])]
            hl.loc[i, "source"] = "bootstrap"
    return hl

# ----------------------------------------------------------------------------------------
# bootstrap intervals
# ----------------------------------------------------------------------------------------
def series_seed(seed, name):
    """Seed of one series' bootstrap: the run's seed and the series' name (SHA-256)."""
    import hashlib

    import numpy as np

    if seed is None:
        return None
    digest = hashlib.sha256(str(name).encode("utf-8")).digest()
    words = [int.from_bytes(digest[i:i + 4], "little") for i in range(0, 16, 4)]
    return np.random.SeedSequence([int(seed), *words])


def bootstrap_tables(series, bootstrap, method, level, n_boot, seed, workers):
    """Series name -> bootstrap interval table (given, or computed here)."""
    import pandas as pd

    if bootstrap is None:
        given = {}
    elif not isinstance(bootstrap, Mapping):
        raise DataError("'bootstrap' must be a dict series key -> bootstrap interval table "
                        f"(DataFrame); got {type(bootstrap).__name__}")
    else:
        given = dict(bootstrap)
    if given and method != "bootstrap":
        raise DataError(f"'bootstrap' tables are shown only with method='bootstrap'; got "
                        f"method={method!r}")
    if method != "bootstrap":
        return {}
    need = ("parameter", "lower", "upper", "lower_status", "upper_status")
    by_key = {}
    for s in series:
        by_key[s.raw] = s
        by_key.setdefault(s.name, s)
    out = {}
    for k, tab in given.items():
        s = by_key.get(k)
        if s is None:
            raise DataError(f"'bootstrap' key {k!r} names no series of 'fits'")
        if not isinstance(tab, pd.DataFrame) or any(c not in tab.columns for c in need):
            raise DataError(f"'bootstrap' key {k!r}: expected a DataFrame with columns "
                            f"{', '.join(need)} (BootstrapResult.intervals); got "
                            f"{type(tab).__name__}")
        out[s.name] = tab
    from .resampling import bootstrap as _bootstrap

    for s in series:
        if s.fit is None or s.name in out:
            continue
        res = _bootstrap(s.fit, n=n_boot, kind="residual", rng=series_seed(seed, s.name),
                         n_jobs=workers, progress=False)
        out[s.name] = res.intervals(level, method="percentile")
    return out

def boot_count(boots, n_boot):
    """Replicates per series as stated in the methods (the tables' own count if one)."""
    counts = {b.attrs.get("n_boot") for b in boots.values() if b.attrs.get("n_boot")}
    return counts.pop() if len(counts) == 1 else n_boot
