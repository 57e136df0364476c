r"""Allometry of turnover: log–log regression of half-lives on body mass.

For planning a study of a species nobody has measured, a table the user compiles from the
literature (one row per species or study: body mass and tissue half-life) gives, by
ordinary least squares,

.. math::

    \ln t_{1/2} = a + b \ln M + e, \qquad e \sim N(0, \sigma^2),

with natural logs (the slope :math:`b` does not depend on the base; :math:`a` does, and is
in units of ln time at unit mass, so mass and half-life units must be the same in every
row). A new species of mass :math:`M_0` gets the prediction interval
:math:`\hat y_0 \pm t_{n-p}\sqrt{s^2 + x_0^\top V x_0}` on the log scale, back-transformed
with :math:`\exp` (so the estimate is the median half-life at that mass, not the mean).

With ``by`` (a grouping column such as tissue or taxon):

* ``slopes="separate"`` (default): an independent regression in each group (its own slope,
  intercept and residual variance), the same as fitting each group's rows alone;
* ``slopes="common"``: one slope, an intercept per group and one pooled residual variance
  (an analysis of covariance without interaction), :math:`\ln t_{1/2} = a_g + b\ln M + e`.

Published slopes, as context only (none is built in; fit your own table): for ectotherm
tissues :math:`\ln t_{1/2} = 0.22 \ln M + a` (Vander Zanden et al. 2015, *PLoS ONE*
10:e0116182); turnover rates scaling about as :math:`M^{-0.19}`, modified by temperature
(Thomas & Crowther 2015, *J. Anim. Ecol.*), i.e. a half-life slope near 0.19; a rate
exponent of −1/4 is the general metabolic-scaling expectation discussed for bird blood
(Carleton & Martínez del Rio 2005, *Oecologia* 144:226–232; the exponent from memory, not
verified). Half-lives from different tissues, temperatures and diets are not comparable
without care; ``by`` or separate tables keep them apart.

Animal experiments and field sampling need the approval of the local animal-care authority
(human hair or blood: a human-research ethics board); a predicted half-life supports the
planning of that process and does not replace it.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .conventions import INTERVAL_COLUMNS, check_choice, check_level
from .equilibration import CAUTION
from .errors import DataError, DataWarning
from .lazystats import stats

__all__ = ["AllometryFit", "fit_allometry", "SLOPES"]

#: How groups share the slope: each its own regression, or one slope for all.
SLOPES = ("separate", "common")


@dataclass(frozen=True)
class _Part:
    """One least-squares regression: the groups it covers and its estimates."""

    groups: tuple
    beta: np.ndarray
    cov: np.ndarray
    s2: float
    df: int
    n: int
    r2: float

    def design(self, x, g):
        """Design rows of log masses ``x`` in group ``g``."""
        X = np.zeros((x.size, len(self.beta)))
        if len(self.groups) == 1:
            X[:, 0] = 1.0
        else:
            X[:, self.groups.index(g)] = 1.0
        X[:, -1] = x
        return X


def _ols(X, y, groups):
    XtX_inv = np.linalg.inv(X.T @ X)
    beta = XtX_inv @ (X.T @ y)
    resid = y - X @ beta
    n, p = X.shape
    df = n - p
    s2 = float(resid @ resid) / df
    # centred R² (about the grand mean): the group intercepts span the constant
    tss = float(np.sum((y - y.mean()) ** 2))
    r2 = 1.0 - float(resid @ resid) / tss if tss > 0 else math.nan
    return _Part(groups=tuple(groups), beta=beta, cov=s2 * XtX_inv, s2=s2, df=int(df),
                 n=int(n), r2=r2)


@dataclass(frozen=True)
class AllometryFit:
    r"""A log–log regression of half-life on body mass (read-only).

    Made by :func:`fit_allometry`.

    Parameters
    ----------
    level : float
        Confidence level of the coefficient intervals and default level of
        :meth:`predict`.
    slopes : str
        ``"single"`` (no groups), ``"separate"`` or ``"common"``.
    by : str or None
        The grouping column.
    groups : tuple
        Group values in order of first appearance (``(None,)`` without ``by``).
    mass_range : dict
        Group → (smallest, largest) mass in the table (the range a prediction stays in).
    parts : tuple
        The fitted regressions (one, or one per group with separate slopes).
    mass, half_life : str
        The column names used.
    """

    level: float
    slopes: str
    by: str | None
    groups: tuple
    mass_range: dict
    parts: tuple
    mass: str
    half_life: str

    def _part(self, g):
        for part in self.parts:
            if g in part.groups:
                return part
        raise DataError(f"'group' {g!r} is not a group of the fit; the groups of "
                        f"{self.by!r} are {', '.join(map(repr, self.groups))}")

    def table(self) -> pd.DataFrame:
        r"""Coefficients with confidence intervals: intercepts and slopes.

        Intervals :math:`\hat\beta_j \pm t_{df}\,SE_j`, :math:`SE_j = \sqrt{V_{jj}}`,
        :math:`V = s^2 (X^\top X)^{-1}` (ordinary least squares).

        Returns
        -------
        DataFrame
            Columns ``group, term`` (``"intercept"``, ``"slope"``), then
            :data:`~isoturnover.conventions.INTERVAL_COLUMNS` (method ``"t (OLS)"``), then
            ``stderr, df, n, residual_sd, r2``. The intercept is ln half-life at unit mass
            (natural logs); ``group`` is missing (NaN) without groups and in the row of a
            common slope.
        """
        crit_rows = []
        for part in self.parts:
            crit = float(stats.t.ppf(0.5 + self.level / 2, part.df))
            se = np.sqrt(np.diag(part.cov))
            terms = []
            if len(part.groups) == 1:
                terms.append((part.groups[0], "intercept", 0))
                terms.append((part.groups[0], "slope", 1))
            else:
                terms += [(g, "intercept", i) for i, g in enumerate(part.groups)]
                terms.append((None, "slope", len(part.beta) - 1))
            for g, term, j in terms:
                b = float(part.beta[j])
                crit_rows.append({"group": g, "term": term, "estimate": b,
                                  "lower": b - crit * se[j], "upper": b + crit * se[j],
                                  "level": self.level, "method": "t (OLS)",
                                  "lower_status": "ok", "upper_status": "ok",
                                  "stderr": float(se[j]), "df": part.df, "n": part.n,
                                  "residual_sd": math.sqrt(part.s2), "r2": part.r2})
        cols = ["group", "term", *INTERVAL_COLUMNS, "stderr", "df", "n", "residual_sd", "r2"]
        return pd.DataFrame(crit_rows, columns=cols)

    @property
    def slope(self) -> float:
        """The slope b of ln half-life on ln mass (no groups, or a common slope).

        With separate slopes, see :meth:`table`.
        """
        if self.slopes == "separate":
            raise DataError("the fit has one slope per group (slopes='separate'); read them "
                            "from table()")
        return float(self.parts[0].beta[-1])

    def predict(self, mass, group=None, level=None) -> pd.DataFrame:
        r"""Median half-life of a new species of given mass, with its prediction interval.

        On the log scale :math:`\hat y_0 = x_0^\top\hat\beta`, the interval of the line
        :math:`\hat y_0 \pm t_{df}\sqrt{x_0^\top V x_0}` and of a new species
        :math:`\hat y_0 \pm t_{df}\sqrt{s^2 + x_0^\top V x_0}`; all back-transformed with
        :math:`\exp`. A mass outside the table's range (of the group) is an extrapolation:
        flagged in ``extrapolated`` and warned about (a DataWarning).

        Parameters
        ----------
        mass : float or array-like
            Body masses, > 0, in the table's mass unit.
        group : optional
            The group of the new species (required with ``by``).
        level : float, optional
            Prediction level (default the fit's ``level``).

        Returns
        -------
        DataFrame
            Columns ``mass, group``, then ``estimate, lower, upper, level, method,
            lower_status, upper_status`` (``estimate`` the median half-life, ``lower``
            and ``upper`` the prediction interval for a new species, method
            ``"prediction"``), ``mean_lower, mean_upper`` (confidence interval of the
            median half-life at that mass), ``extrapolated``; half-lives in the table's
            time unit.

        Raises
        ------
        DataError
            A mass that is not a finite number > 0 (naming its position), an unknown
            group, or a missing group with ``by``.
        """
        level = self.level if level is None else check_level(level)
        try:
            m = np.atleast_1d(np.asarray(mass, dtype=float)).ravel()
        except (TypeError, ValueError):
            raise DataError(f"'mass' must be a number or an array of numbers; got "
                            f"{mass!r}") from None
        for i, v in enumerate(m):
            if not (np.isfinite(v) and v > 0):
                raise DataError(f"'mass'[{i}] must be a finite number > 0; got {v!r}")
        if self.by is None:
            if group is not None:
                raise DataError("'group' given, but the fit has no groups (by=None)")
        elif group is None:
            raise DataError(f"'group' is needed: the fit is by {self.by!r}, groups "
                            f"{', '.join(map(repr, self.groups))}")
        part = self._part(group)
        x = np.log(m)
        X = part.design(x, group)
        y = X @ part.beta
        se_mean = np.sqrt(np.einsum("ij,jk,ik->i", X, part.cov, X))
        se_pred = np.sqrt(part.s2 + se_mean ** 2)
        crit = float(stats.t.ppf(0.5 + level / 2, part.df))
        lo_m, hi_m = self.mass_range[group]
        extra = (m < lo_m) | (m > hi_m)
        if extra.any():
            warnings.warn(f"allometry: mass(es) {', '.join(f'{v:g}' for v in m[extra])} "
                          f"outside the table's range {lo_m:g} to {hi_m:g}"
                          + (f" for group {group!r}" if self.by else "")
                          + ": an extrapolation", DataWarning, stacklevel=2)
        return pd.DataFrame({
            "mass": m, "group": group, "estimate": np.exp(y),
            "lower": np.exp(y - crit * se_pred), "upper": np.exp(y + crit * se_pred),
            "level": level, "method": "prediction", "lower_status": "ok",
            "upper_status": "ok", "mean_lower": np.exp(y - crit * se_mean),
            "mean_upper": np.exp(y + crit * se_mean), "extrapolated": extra})

    def summary(self) -> str:
        """A printable account: the fitted lines, their spread, and the caution.

        Returns
        -------
        str
            One line per slope and intercept with its interval, the residual sd on the
            ln scale, R², and :data:`~isoturnover.equilibration.CAUTION`.
        """
        pct = f"{100 * self.level:g} %"
        head = {"single": "one regression", "separate": f"one regression per {self.by!r}",
                "common": f"a common slope, one intercept per {self.by!r}"}[self.slopes]
        lines = [f"Allometry: ln {self.half_life} = a + b ln {self.mass} ({head})"]
        t = self.table()
        for _, r in t.iterrows():
            g = "" if pd.isna(r["group"]) else f" [{r['group']}]"
            lines.append(f"  {r['term']}{g}: {r['estimate']:.4g} ({pct} CI {r['lower']:.4g} "
                         f"to {r['upper']:.4g}; n {r['n']}, df {r['df']})")
        for part in self.parts:
            g = "" if len(part.groups) > 1 or part.groups[0] is None else \
                f" [{part.groups[0]}]"
            lines.append(f"  residual sd{g}: {math.sqrt(part.s2):.3g} on the ln scale "
                         f"(a factor of {math.exp(math.sqrt(part.s2)):.3g}); R² {part.r2:.3g}")
        lines.append("  predict(mass) gives a new species' median half-life and prediction "
                     "interval.")
        lines.append("")
        lines.append("Caution. " + CAUTION)
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.summary()


def _column(table, name, what):
    if not isinstance(name, str):
        raise DataError(f"'{what}' must be a column name; got {name!r}")
    if name not in table.columns:
        raise DataError(f"'{what}': the table has no column {name!r}; its columns are "
                        f"{', '.join(map(str, table.columns))}")
    col = table[name]
    if isinstance(col, pd.DataFrame):
        raise DataError(f"'{what}': the table has more than one column {name!r}")
    out = np.empty(len(col))
    for i, (idx, v) in enumerate(col.items()):
        try:
            x = float(v)
        except (TypeError, ValueError):
            raise DataError(f"column {name!r}, row {idx!r}: {v!r} is not a number") from None
        if not (math.isfinite(x) and x > 0):
            raise DataError(f"column {name!r}, row {idx!r}: {v!r} must be a finite number "
                            "> 0 (it is log-transformed)")
        out[i] = x
    return out


def fit_allometry(table, mass="mass", half_life="half_life", by=None, level=0.95, *,
                  slopes="separate") -> AllometryFit:
    r"""Log–log regression of tissue half-life on body mass over a compiled table.

    Ordinary least squares of :math:`\ln t_{1/2}` on :math:`\ln M` (natural logs), as in
    the module text: with ``by``, one regression per group (``slopes="separate"``) or a
    common slope with one intercept per group (``slopes="common"``). No published slope
    is built in.

    Parameters
    ----------
    table : DataFrame
        One row per species (or study): body mass and half-life, both > 0, in the same
        units in every row. Not modified.
    mass : str, default="mass"
        Column of body masses.
    half_life : str, default="half_life"
        Column of half-lives (a time unit).
    by : str, optional
        Column of groups (tissue, taxon, …).
    level : float, default=0.95
        Confidence level of the coefficient intervals and of :meth:`AllometryFit.predict`.
    slopes : {"separate", "common"}, default="separate"
        With ``by``: each group its own regression, or one slope for all groups.

    Returns
    -------
    AllometryFit
        ``table()`` of coefficients with intervals, ``slope``, ``predict(mass, group)``
        and ``summary()``.

    Raises
    ------
    DataError
        A table that is not a DataFrame, a missing column, a cell that is not a finite
        number > 0 (naming the column and row), a missing group, or too few rows or
        masses (a regression needs 3 rows and 2 distinct masses per slope; a common slope
        needs more rows than groups + 1 and masses that vary within a group).

    Examples
    --------
    >>> import pandas as pd, isoturnover as iso
    >>> t = pd.DataFrame({"mass": [2.0, 20, 200, 2000], "half_life": [5.0, 8.1, 13.6, 22]})
    >>> round(iso.fit_allometry(t).slope, 2)
    0.22
    """
    if isinstance(table, pd.DataFrame):
        frame = table
    elif isinstance(table, dict):
        frame = pd.DataFrame(table)
    else:
        raise DataError(f"'table' must be a DataFrame (one row per species); got "
                        f"{type(table).__name__}")
    level = check_level(level)
    slopes = check_choice("slopes", slopes, SLOPES)
    m = _column(frame, mass, "mass")
    t = _column(frame, half_life, "half_life")
    x, y = np.log(m), np.log(t)
    if by is None:
        g = np.array([None] * len(frame), dtype=object)
        groups: tuple = (None,)
        mode = "single"
    else:
        if not isinstance(by, str) or by not in frame.columns:
            raise DataError(f"'by': the table has no column {by!r}; its columns are "
                            f"{', '.join(map(str, frame.columns))}")
        col = frame[by]
        for idx, v in col.items():
            if v is None or (isinstance(v, float) and math.isnan(v)):
                raise DataError(f"column {by!r}, row {idx!r}: the group is missing")
        g = col.to_numpy(dtype=object)
        groups = tuple(pd.unique(col))
        mode = slopes
    rng = {gr: (float(m[g == gr].min()), float(m[g == gr].max())) for gr in groups}
    if mode in ("single", "separate"):
        parts = []
        for gr in groups:
            sel = g == gr
            where = "" if gr is None else f" in group {gr!r} of {by!r}"
            if sel.sum() < 3:
                raise DataError(f"'table' has {int(sel.sum())} row(s){where}; a regression "
                                "needs at least 3")
            if np.unique(x[sel]).size < 2:
                raise DataError(f"column {mass!r}: every mass{where} is the same; a slope "
                                "needs at least 2 different masses")
            X = np.column_stack([np.ones(int(sel.sum())), x[sel]])
            parts.append(_ols(X, y[sel], (gr,)))
    else:
        k = len(groups)
        if len(frame) < k + 2:
            raise DataError(f"'table' has {len(frame)} rows for {k} groups; a common slope "
                            f"needs at least {k + 2}")
        X = np.zeros((len(frame), k + 1))
        for j, gr in enumerate(groups):
            X[g == gr, j] = 1.0
        X[:, -1] = x
        xc = x - (X[:, :k] @ np.array([x[g == gr].mean() for gr in groups]))
        if not np.any(np.abs(xc) > 0):
            raise DataError(f"column {mass!r}: the masses do not vary within any group of "
                            f"{by!r}; a common slope needs variation within groups")
        parts = [_ols(X, y, groups)]
    return AllometryFit(level=level, slopes=mode, by=by, groups=groups, mass_range=rng,
                        parts=tuple(parts), mass=mass, half_life=half_life)
