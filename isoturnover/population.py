"""Population estimates: random-effects meta-analysis of per-animal estimates.

Each animal ``i`` gives an estimate :math:`y_i` (for instance a log half-life) with a
standard error :math:`s_i`, :math:`v_i = s_i^2`. The random-effects model is

.. math::

    y_i = x_i^\\top \\beta + u_i + e_i, \\qquad u_i \\sim N(0, \\tau^2), \\quad
    e_i \\sim N(0, v_i),

with :math:`x_i = 1` (one population mean :math:`\\mu`) or a row of covariates with an
intercept (a mixed-effects meta-regression). For a given :math:`\\tau^2` the weights are
:math:`w_i = 1/(v_i + \\tau^2)` and :math:`\\hat\\beta = (X^\\top W X)^{-1} X^\\top W y`
with covariance :math:`(X^\\top W X)^{-1}`; the generalised statistic is
:math:`Q(\\tau^2) = \\sum_i w_i (y_i - x_i^\\top \\hat\\beta)^2`, with :math:`Q_E = Q(0)`
Cochran's heterogeneity statistic on :math:`k - p` degrees of freedom.

The between-animal variance :math:`\\tau^2 \\ge 0` is estimated by

* ``"dl"`` DerSimonian & Laird (1986), the moment estimator
  :math:`\\hat\\tau^2 = \\max\\{0, (Q_E - (k - p)) / \\operatorname{tr} P_0\\}`,
  :math:`P = W - W X (X^\\top W X)^{-1} X^\\top W` at :math:`\\tau^2 = 0` (for the mean
  alone :math:`\\operatorname{tr} P_0 = \\sum w_i - \\sum w_i^2 / \\sum w_i`);
* ``"pm"`` Paule & Mandel (1982): the root of :math:`Q(\\tau^2) = k - p` (0 when
  :math:`Q_E \\le k - p`), found with Brent's method;
* ``"reml"`` restricted maximum likelihood (Viechtbauer 2005), Fisher scoring
  :math:`\\tau^2 \\leftarrow \\tau^2 + (y^\\top P P y - \\operatorname{tr} P) /
  \\operatorname{tr}(P P)`, kept at :math:`\\tau^2 \\ge 0`, with step halving on the restricted
  log-likelihood :math:`-\\tfrac12[\\sum \\log(v_i + \\tau^2) + \\log|X^\\top W X| +
  Q(\\tau^2)]`.

Intervals: the mean (or each coefficient) by the normal approximation, or with
``adjust="hksj"`` the Hartung–Knapp–Sidik–Jonkman adjustment (covariance times
:math:`Q(\\hat\\tau^2)/(k - p)`, t on :math:`k - p` df; Hartung & Knapp 2001, Sidik &
Jonkman 2002); :math:`\\tau^2` by the Q-profile method (Viechtbauer 2007); a new animal's
value by the prediction interval of Higgins, Thompson & Spiegelhalter (2009),
:math:`\\hat\\mu \\pm t_{k-2} \\sqrt{\\hat\\tau^2 + SE(\\hat\\mu)^2}`; heterogeneity by
:math:`I^2 = \\max\\{0, (Q_E - (k - p))/Q_E\\}` (Higgins & Thompson 2002).

References
----------
DerSimonian R, Laird N (1986) Meta-analysis in clinical trials. Controlled Clinical Trials
7:177–188. Paule RC, Mandel J (1982) Consensus values and weighting factors. J Res Natl Bur
Stand 87:377–385. Viechtbauer W (2005) Bias and efficiency of meta-analytic variance
estimators in the random-effects model. J Educ Behav Stat 30:261–293. Viechtbauer W (2007)
Confidence intervals for the amount of heterogeneity in meta-analysis. Stat Med 26:37–52.
Higgins JPT, Thompson SG (2002) Quantifying heterogeneity in a meta-analysis. Stat Med
21:1539–1558. Higgins JPT, Thompson SG, Spiegelhalter DJ (2009) A re-evaluation of
random-effects meta-analysis. J R Stat Soc A 172:137–159. Hartung J, Knapp G (2001) On
tests of the overall treatment effect in meta-analysis with normally distributed responses.
Stat Med 20:1771–1782. Sidik K, Jonkman JN (2002) A simple confidence interval for
meta-analysis. Stat Med 21:3153–3159. Raudenbush SW (2009) Analyzing effect sizes:
random-effects models. In: The Handbook of Research Synthesis and Meta-Analysis, 2nd ed.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import optimize, stats

from .conventions import check_choice, check_level
from .errors import DataError, DataWarning

__all__ = ["TAU2_METHODS", "RandomEffects", "PopulationEstimate", "random_effects",
           "population_estimate"]

#: Estimators of the between-animal variance tau².
TAU2_METHODS = ("reml", "dl", "pm")
#: Bound statuses that make an interval unusable for the standard error.
_UNUSABLE = ("open", "failed", "not_available")


# --------------------------------------------------------------------------- input checks

def _label(names, i) -> str:
    """Position and, when it differs, the animal's name, for messages."""
    if names is None:
        return f"index {i}"
    return f"index {i} ({names[i]!r})"


def _vector(name, values, *, k=None, names=None, positive=False, allow_nonfinite=False):
    """A checked 1-D float copy of ``values``; errors name the argument and the index."""
    if isinstance(values, (str, bytes, Mapping)) or np.ndim(values) != 1:
        raise DataError(f"'{name}' must be a one-dimensional sequence of numbers; got "
                        f"{type(values).__name__}"
                        + (f" with {np.ndim(values)} dimensions" if np.ndim(values) else ""))
    seq = list(values.values) if isinstance(values, pd.Series) else list(values)
    out = np.empty(len(seq))
    for i, v in enumerate(seq):
        number = not isinstance(v, (bool, np.bool_, str, bytes))
        if number:
            try:
                out[i] = float(v) if v is not None else np.nan
            except (TypeError, ValueError):
                number = False
        if not number:
            raise DataError(f"'{name}' at {_label(names, i)} must be a number; got {v!r}")
    if k is not None and out.size != k:
        raise DataError(f"'{name}' has {out.size} values; 'estimates' has {k} (one per "
                        "animal)")
    if not allow_nonfinite:
        bad = np.flatnonzero(~np.isfinite(out))
        if bad.size:
            i = int(bad[0])
            raise DataError(f"'{name}' at {_label(names, i)} is {out[i]}; a finite number is "
                            "needed")
    if positive:
        bad = np.flatnonzero(out <= 0)
        if bad.size:
            i = int(bad[0])
            raise DataError(f"'{name}' at {_label(names, i)} is {out[i]}; a standard error "
                            "must be > 0")
    return out


def _names(names, estimates, k):
    """Animal names: given, the index of a Series, or 0 … k−1."""
    if names is None:
        if isinstance(estimates, pd.Series):
            return tuple(estimates.index)
        return tuple(range(k))
    if isinstance(names, (str, bytes, Mapping)) or not hasattr(names, "__len__") \
            or len(names) != k:
        raise DataError(f"'names' must give one name per animal ({k}); got {names!r}")
    return tuple(names)


@dataclass(frozen=True)
class _Moderator:
    """How one moderator column becomes design columns."""

    column: object
    categorical: bool
    levels: tuple  # all levels, the first the reference (categorical only)


def _frame(name, moderators):
    if isinstance(moderators, pd.Series):
        return moderators.to_frame()
    if isinstance(moderators, Mapping):
        return pd.DataFrame(dict(moderators))
    if isinstance(moderators, pd.DataFrame):
        return moderators
    raise DataError(f"'{name}' must be a DataFrame of covariates (one row per animal); got "
                    f"{type(moderators).__name__}")


def _is_categorical(s: pd.Series) -> bool:
    return pd.api.types.is_bool_dtype(s) or not pd.api.types.is_numeric_dtype(s)


def _encode(moderators, k):
    """Design matrix (intercept first) and the coding of ``moderators``."""
    frame = _frame("moderators", moderators)
    if len(frame) != k:
        raise DataError(f"'moderators' has {len(frame)} rows; there are {k} animals (one row "
                        "each, in the same order)")
    if frame.shape[1] == 0:
        raise DataError("'moderators' has no columns")
    coding = []
    for col in frame.columns:
        s = frame[col]
        miss = np.flatnonzero(pd.isna(s).to_numpy())
        if miss.size:
            i = int(miss[0])
            raise DataError(f"'moderators' column {col!r}, row {i} (index {frame.index[i]!r}) "
                            "is missing; every animal needs every covariate")
        if _is_categorical(s):
            if isinstance(s.dtype, pd.CategoricalDtype):
                levels = tuple(c for c in s.cat.categories if (s == c).any())
            else:
                levels = tuple(sorted(pd.unique(s), key=lambda v: (str(type(v)), str(v))))
            if len(levels) < 2:
                raise DataError(f"'moderators' column {col!r} has one value ({levels[0]!r}) "
                                "for every animal; a moderator must vary")
            coding.append(_Moderator(col, True, levels))
        else:
            vals = s.to_numpy(dtype=float)
            bad = np.flatnonzero(~np.isfinite(vals))
            if bad.size:
                i = int(bad[0])
                raise DataError(f"'moderators' column {col!r}, row {i} (index "
                                f"{frame.index[i]!r}) is {vals[i]}; a finite number is needed")
            coding.append(_Moderator(col, False, ()))
    coding = tuple(coding)
    X, terms = _design(frame, coding, "moderators")
    p = X.shape[1]
    if k - p < 1:
        raise DataError(f"'moderators' give {p} coefficients (with the intercept) for {k} "
                        "animals; a meta-regression needs more animals than coefficients")
    if np.linalg.matrix_rank(X) < p:
        raise DataError(f"'moderators' are collinear (the design of terms {terms} has rank "
                        f"{np.linalg.matrix_rank(X)} < {p}); drop a redundant column")
    return X, terms, coding


def _design(frame, coding, name):
    """Design matrix of ``frame`` under ``coding``: intercept, numbers, treatment dummies."""
    cols, terms = [np.ones(len(frame))], ["intercept"]
    for m in coding:
        if m.column not in frame.columns:
            raise DataError(f"'{name}' has no column {m.column!r} (the fit used "
                            f"{[c.column for c in coding]})")
        s = frame[m.column]
        if m.categorical:
            vals = s.to_numpy(dtype=object)
            for i, v in enumerate(vals):
                if not any(_same(v, lev) for lev in m.levels):
                    raise DataError(f"'{name}' column {m.column!r}, row {i} is {v!r}; the fit "
                                    f"knows the levels {list(m.levels)}")
            for lev in m.levels[1:]:
                cols.append(np.array([1.0 if _same(v, lev) else 0.0 for v in vals]))
                terms.append(f"{m.column}[{lev}]")
        else:
            try:
                vals = s.to_numpy(dtype=float)
            except (TypeError, ValueError):
                raise DataError(f"'{name}' column {m.column!r} must be numeric, as in the "
                                "fit") from None
            bad = np.flatnonzero(~np.isfinite(vals))
            if bad.size:
                raise DataError(f"'{name}' column {m.column!r}, row {int(bad[0])} is "
                                f"{vals[bad[0]]}; a finite number is needed")
            cols.append(vals)
            terms.append(str(m.column))
    return np.column_stack(cols), tuple(terms)


def _same(a, b) -> bool:
    """Whether a covariate value equals a level (False when they cannot be compared)."""
    try:
        return bool(a == b)
    except (TypeError, ValueError):
        return False


# --------------------------------------------------------------------------- the model

def _wls(y, v, X, tau2):
    """Weighted least squares at ``tau2``: beta, covariance, Q(tau2), weights."""
    w = 1.0 / (v + tau2)
    Xw = X * w[:, None]
    cov = np.linalg.inv(X.T @ Xw)
    beta = cov @ (Xw.T @ y)
    r = y - X @ beta
    return beta, cov, float(np.sum(w * r * r)), w


def _q(y, v, X, tau2) -> float:
    """The generalised Q statistic :math:`\\sum w_i(\\tau^2) r_i^2`."""
    return _wls(y, v, X, tau2)[2]


def _p_matrix(v, X, tau2):
    w = 1.0 / (v + tau2)
    Xw = X * w[:, None]
    cov = np.linalg.inv(X.T @ Xw)
    return np.diag(w) - Xw @ cov @ Xw.T


def _reml_loglik(y, v, X, tau2) -> float:
    """Restricted log-likelihood up to a constant."""
    _, cov, q, _ = _wls(y, v, X, tau2)
    logdet_cov = np.linalg.slogdet(cov)[1]
    return float(-0.5 * (np.sum(np.log(v + tau2)) - logdet_cov + q))


def _tau2_dl(y, v, X) -> float:
    w = 1.0 / v
    _, cov, q, _ = _wls(y, v, X, 0.0)
    k, p = X.shape
    trace_p = np.sum(w) - np.trace(cov @ (X.T @ (X * (w * w)[:, None])))
    return max(0.0, (q - (k - p)) / trace_p)


def _solve_q(y, v, X, target) -> float:
    """The :math:`\\tau^2 \\ge 0` with :math:`Q(\\tau^2) = ` target (0 when Q(0) ≤ target).

    Q decreases in :math:`\\tau^2` from :math:`Q_E` towards 0, so the root is bracketed by
    doubling an upper end and then found by Brent's method.
    """
    if _q(y, v, X, 0.0) <= target:
        return 0.0
    hi = max(float(np.var(y)), float(np.median(v)), 1e-12)
    for _ in range(2000):
        if _q(y, v, X, hi) < target:
            break
        hi *= 2.0
    else:  # pragma: no cover - Q tends to 0, so the loop ends
        return np.inf
    return float(optimize.brentq(lambda t: _q(y, v, X, t) - target, 0.0, hi,
                                 xtol=1e-15 * hi, rtol=4.5 * np.finfo(float).eps,
                                 maxiter=500))


def _tau2_reml(y, v, X) -> float:
    """REML by Fisher scoring (Viechtbauer 2005) from the DL value, kept ≥ 0."""
    tau2 = _tau2_dl(y, v, X)
    scale = float(np.median(v))
    ll = _reml_loglik(y, v, X, tau2)
    for _ in range(500):
        P = _p_matrix(v, X, tau2)
        Py = P @ y
        step = (Py @ Py - np.trace(P)) / np.sum(P * P)
        new = max(0.0, tau2 + step)
        ll_new = _reml_loglik(y, v, X, new)
        halvings = 0
        while ll_new < ll - 1e-13 * abs(ll) and halvings < 60:
            step /= 2.0
            new = max(0.0, tau2 + step)
            ll_new = _reml_loglik(y, v, X, new)
            halvings += 1
        done = abs(new - tau2) <= 1e-13 * (tau2 + scale)
        tau2, ll = new, max(ll, ll_new)
        if done:
            return tau2
    # Fisher scoring did not settle: a bounded maximisation of the same function
    hi = max(4.0 * tau2, float(np.var(y)) * 4.0, scale)
    res = optimize.minimize_scalar(lambda t: -_reml_loglik(y, v, X, t), bounds=(0.0, hi),
                                   method="bounded", options={"xatol": 1e-14 * hi})
    return float(res.x) if -res.fun > ll else tau2


def _tau2(y, v, X, method) -> float:
    if method == "dl":
        return _tau2_dl(y, v, X)
    if method == "pm":
        return _solve_q(y, v, X, X.shape[0] - X.shape[1])
    return _tau2_reml(y, v, X)


# --------------------------------------------------------------------------- results

@dataclass(frozen=True)
class RandomEffects:
    """A random-effects meta-analysis (or meta-regression) of per-animal estimates.

    Made by :func:`random_effects`; read-only. All values are on the scale of the
    estimates given (for instance log half-lives).

    Parameters
    ----------
    estimate : float
        Pooled mean :math:`\\hat\\mu = \\sum w_i y_i / \\sum w_i`,
        :math:`w_i = 1/(v_i + \\hat\\tau^2)` (NaN with moderators: see ``coefficients``).
    stderr : float
        Its standard error, :math:`(\\sum w_i)^{-1/2}`, or the HKSJ one.
    lower, upper : float
        Confidence bounds of the mean at ``level``.
    tau2 : float
        Between-animal variance :math:`\\hat\\tau^2` (residual variance with moderators).
    tau2_lower, tau2_upper : float
        Q-profile confidence bounds of :math:`\\tau^2` (Viechtbauer 2007): the
        :math:`\\tau^2` with :math:`Q(\\tau^2)` at the upper and lower
        :math:`\\chi^2_{k-p}` quantiles. They are built on the generalised Q, as the
        Paule-Mandel estimate is, so in unusual data a REML or DL estimate can fall
        outside them.
    i2 : float
        :math:`I^2 = \\max\\{0, (Q - df)/Q\\}`, the share of the total variation due to
        between-animal spread (Higgins & Thompson 2002).
    q : float
        Cochran's :math:`Q_E = \\sum (y_i - x_i^\\top\\hat\\beta_{FE})^2 / v_i`.
    q_df : int
        Its degrees of freedom, :math:`k - p`.
    q_p : float
        Its p-value, :math:`P(\\chi^2_{k-p} > Q_E)` (homogeneity test).
    pi_lower, pi_upper : float
        Prediction interval for a new animal (Higgins, Thompson & Spiegelhalter 2009),
        :math:`\\hat\\mu \\pm t_{k-2}\\sqrt{\\hat\\tau^2 + SE^2}`; NaN when k < 3 or with
        moderators (see :meth:`predict`).
    k : int
        Number of animals.
    method : str
        ``"reml"``, ``"dl"``, ``"pm"``, or ``"fixed"`` when ``tau2`` was given.
    adjust : str or None
        ``"hksj"`` or None (normal intervals).
    level : float
        Confidence level of the intervals.
    names : tuple
        Animal names, in order.
    estimates, stderrs : ndarray
        The per-animal estimates and standard errors used.
    coefficients : DataFrame or None
        With moderators: one row per term (``intercept``, numeric covariates, dummy columns
        ``name[level]`` against the first level), columns ``estimate, stderr, z`` (``t``
        with HKSJ)``, p, lower, upper``.
    coef_cov : ndarray
        Covariance matrix of the coefficients (the intercept alone without moderators).
    r2 : float
        With moderators, the :math:`R^2` analog
        :math:`\\max\\{0, (\\hat\\tau^2_0 - \\hat\\tau^2)/\\hat\\tau^2_0\\}` (Raudenbush 2009),
        share of the between-animal variance the covariates explain; NaN otherwise or when
        :math:`\\hat\\tau^2_0 = 0`.
    tau2_null : float
        :math:`\\hat\\tau^2_0` of the model without moderators (same method); NaN without.
    qm : float
        Wald statistic of all moderator terms together (NaN without moderators).
    qm_df : int
        Its degrees of freedom (terms other than the intercept).
    qm_p : float
        Its p-value: :math:`\\chi^2` on ``qm_df`` df, or F on (``qm_df``, k − p) with HKSJ.
    encoding : tuple
        The moderator coding :meth:`predict` applies to new covariates.
    """

    estimate: float
    stderr: float
    lower: float
    upper: float
    tau2: float
    tau2_lower: float
    tau2_upper: float
    i2: float
    q: float
    q_df: int
    q_p: float
    pi_lower: float
    pi_upper: float
    k: int
    method: str
    adjust: str | None
    level: float
    names: tuple
    estimates: np.ndarray
    stderrs: np.ndarray
    coefficients: pd.DataFrame | None
    coef_cov: np.ndarray
    r2: float
    tau2_null: float
    qm: float
    qm_df: int
    qm_p: float
    encoding: tuple

    @property
    def tau(self) -> float:
        """Between-animal standard deviation :math:`\\hat\\tau`."""
        return float(np.sqrt(self.tau2))

    @property
    def beta(self) -> np.ndarray:
        """Coefficients: the mean alone, or intercept and moderator terms."""
        if self.coefficients is None:
            return np.array([self.estimate])
        return self.coefficients["estimate"].to_numpy()

    @property
    def weights(self) -> np.ndarray:
        """Relative weight of every animal in the pooled mean, in % (sums to 100)."""
        w = 1.0 / (self.stderrs ** 2 + self.tau2)
        return 100.0 * w / w.sum()

    def _crit(self):
        p = len(self.beta)
        if self.adjust == "hksj":
            return float(stats.t.ppf(0.5 + self.level / 2, self.k - p))
        return float(stats.norm.ppf(0.5 + self.level / 2))

    def predict(self, new_moderators=None) -> pd.DataFrame:
        """Mean and prediction interval for new animals.

        Parameters
        ----------
        new_moderators : DataFrame, optional
            Covariates of the new animals, with the columns used in the fit (categorical
            levels among those seen). Without moderators in the fit, leave it None.

        Returns
        -------
        DataFrame
            One row per new animal: ``estimate`` :math:`x_0^\\top\\hat\\beta`, ``stderr``
            :math:`\\sqrt{x_0^\\top V x_0}`, ``lower, upper`` (confidence interval of the
            mean at these covariates), ``pi_lower, pi_upper``
            (:math:`\\pm t_{k-p-1}\\sqrt{\\hat\\tau^2 + SE^2}`, Higgins, Thompson &
            Spiegelhalter 2009), ``level``.
        """
        if not self.encoding:
            if new_moderators is not None:
                raise DataError("'new_moderators' given, but the fit has no moderators")
            X0 = np.ones((1, 1))
            index = pd.RangeIndex(1)
        else:
            if new_moderators is None:
                raise DataError("'new_moderators' is needed: the fit has moderators "
                                f"{[m.column for m in self.encoding]}")
            frame = _frame("new_moderators", new_moderators)
            X0, _ = _design(frame, self.encoding, "new_moderators")
            index = frame.index
        mean = X0 @ self.beta
        se = np.sqrt(np.einsum("ij,jk,ik->i", X0, self.coef_cov, X0))
        crit = self._crit()
        df_pi = self.k - len(self.beta) - 1
        t_pi = float(stats.t.ppf(0.5 + self.level / 2, df_pi)) if df_pi >= 1 else np.nan
        half = t_pi * np.sqrt(self.tau2 + se ** 2)
        return pd.DataFrame({"estimate": mean, "stderr": se, "lower": mean - crit * se,
                             "upper": mean + crit * se, "pi_lower": mean - half,
                             "pi_upper": mean + half, "level": self.level}, index=index)

    def animals(self) -> pd.DataFrame:
        """The per-animal inputs with their normal intervals and weights (a forest plot's rows).

        Returns
        -------
        DataFrame
            ``name, estimate, stderr, lower, upper, weight`` (weight in % of the pooled
            mean, :math:`w_i/\\sum w`, :math:`w_i = 1/(s_i^2 + \\hat\\tau^2)`).
        """
        z = float(stats.norm.ppf(0.5 + self.level / 2))
        return pd.DataFrame({"name": list(self.names), "estimate": self.estimates,
                             "stderr": self.stderrs,
                             "lower": self.estimates - z * self.stderrs,
                             "upper": self.estimates + z * self.stderrs,
                             "weight": self.weights})

    def table(self) -> pd.DataFrame:
        """The results as an interval table.

        Returns
        -------
        DataFrame
            One row per quantity (``mean`` or one per coefficient, ``tau2``, ``tau``,
            ``i2``, ``prediction``), columns ``quantity`` then ``estimate, lower, upper,
            level, method, lower_status, upper_status`` and ``stderr``. ``method`` says how
            the interval was made (``normal``, ``hksj``, ``q-profile``, ``prediction``).
        """
        ci = "hksj" if self.adjust == "hksj" else "normal"
        rows = []
        if self.coefficients is None:
            rows.append(("mean", self.estimate, self.lower, self.upper, ci, "ok", "ok",
                         self.stderr))
        else:
            for term, r in self.coefficients.iterrows():
                rows.append((term, r["estimate"], r["lower"], r["upper"], ci, "ok", "ok",
                             r["stderr"]))
        if self.method == "fixed":
            ts = ("fixed", "fixed")
        else:
            ts = ("at_bound" if self.tau2_lower == 0 else "ok",
                  "at_bound" if self.tau2_upper == 0 else "ok")
        rows.append(("tau2", self.tau2, self.tau2_lower, self.tau2_upper, "q-profile", *ts,
                     np.nan))
        rows.append(("tau", self.tau, np.sqrt(self.tau2_lower), np.sqrt(self.tau2_upper),
                     "q-profile", *ts, np.nan))
        rows.append(("i2", self.i2, np.nan, np.nan, "", "not_available", "not_available",
                     np.nan))
        if self.coefficients is None:
            st = "ok" if np.isfinite(self.pi_lower) else "not_available"
            rows.append(("prediction", self.estimate, self.pi_lower, self.pi_upper,
                         "prediction", st, st, np.nan))
        df = pd.DataFrame(rows, columns=["quantity", "estimate", "lower", "upper", "method",
                                         "lower_status", "upper_status", "stderr"])
        df.insert(4, "level", self.level)
        return df

    def summary(self) -> str:
        """A printable account of the analysis.

        Returns
        -------
        str
            Method, k, the pooled mean or the coefficient table, tau², I², Q and the
            prediction interval, with their levels.
        """
        pct = f"{100 * self.level:g} %"
        how = {"reml": "REML", "dl": "DerSimonian-Laird", "pm": "Paule-Mandel",
               "fixed": "tau2 fixed"}[self.method]
        ci = "Hartung-Knapp-Sidik-Jonkman (t, k - p df)" if self.adjust == "hksj" \
            else "normal"
        lines = [f"Random-effects {'meta-regression' if self.encoding else 'meta-analysis'}"
                 f" of {self.k} animals ({how}; {ci} intervals, {pct})"]
        if self.coefficients is None:
            lines.append(f"  mean      {self.estimate:.6g}  (SE {self.stderr:.4g}; "
                         f"{self.lower:.6g} to {self.upper:.6g})")
        else:
            lines.append(self.coefficients.to_string(float_format=lambda x: f"{x:.5g}"))
            lines.append(f"  test of moderators: {self.qm:.4g} on {self.qm_df} df, "
                         f"p = {self.qm_p:.3g}")
            r2 = "n/a (no spread without moderators)" if np.isnan(self.r2) \
                else f"{100 * self.r2:.1f} %"
            lines.append(f"  spread explained (R2 analog): {r2}")
        resid = "residual " if self.encoding else ""
        lines.append(f"  {resid}tau2 {self.tau2:.4g}  (Q-profile {self.tau2_lower:.4g} to "
                     f"{self.tau2_upper:.4g}); tau {self.tau:.4g}")
        lines.append(f"  I2 {100 * self.i2:.1f} %;  Q = {self.q:.4g} on {self.q_df} df, "
                     f"p = {self.q_p:.3g}")
        if self.coefficients is None:
            if np.isfinite(self.pi_lower):
                lines.append(f"  a new animal ({pct} prediction interval, t on {self.k - 2} "
                             f"df): {self.pi_lower:.6g} to {self.pi_upper:.6g}")
            else:
                lines.append("  a new animal: no prediction interval with fewer than 3 "
                             "animals")
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.summary()


# --------------------------------------------------------------------------- entry point

def random_effects(estimates, stderrs, *, method="reml", moderators=None, level=0.95,
                   names=None, adjust=None, tau2=None) -> RandomEffects:
    """Random-effects meta-analysis of per-animal estimates with their standard errors.

    The model :math:`y_i = x_i^\\top\\beta + u_i + e_i`, :math:`u_i \\sim N(0,\\tau^2)`,
    :math:`e_i \\sim N(0, s_i^2)`; see the module text for the estimators and intervals.

    Parameters
    ----------
    estimates : array_like of float
        One estimate per animal (for instance log half-lives, log of days). A Series'
        index gives the animal names.
    stderrs : array_like of float
        Their standard errors (same scale and units), all > 0.
    method : {"reml", "dl", "pm"}, default="reml"
        Estimator of :math:`\\tau^2`: restricted maximum likelihood (Viechtbauer 2005),
        DerSimonian & Laird (1986), or Paule & Mandel (1982).
    moderators : DataFrame, optional
        Covariates, one row per animal in the order of ``estimates`` (numeric columns as
        they are, other columns dummy coded against their first level; an intercept is
        added): a mixed-effects meta-regression.
    level : float, default=0.95
        Confidence level of all intervals.
    names : sequence, optional
        Animal names (default the Series index of ``estimates``, or 0 … k−1).
    adjust : {None, "hksj"}, default=None
        ``"hksj"`` scales the coefficients' covariance by :math:`Q(\\hat\\tau^2)/(k-p)` and
        uses t on k − p df (Hartung & Knapp 2001; Sidik & Jonkman 2002).
    tau2 : float, optional
        Use this :math:`\\tau^2` instead of estimating it (``method`` is then ``"fixed"``;
        0 gives the fixed-effect model).

    Returns
    -------
    RandomEffects
        Pooled mean and interval, :math:`\\tau^2` with its Q-profile interval, :math:`I^2`,
        Q, the prediction interval for a new animal, and with moderators the coefficient
        table, residual :math:`\\tau^2` and the :math:`R^2` analog.

    Raises
    ------
    DataError
        A non-finite estimate, a standard error ≤ 0 (naming the argument and index),
        fewer than 2 animals, mismatched lengths, bad or collinear moderators, or a bad
        option.

    Examples
    --------
    >>> import numpy as np, isoturnover as iso
    >>> res = iso.random_effects(np.log([12.0, 15.0, 9.5, 20.0]), [0.1, 0.2, 0.15, 0.2])
    >>> round(float(np.exp(res.estimate)), 1)  # population median half-life
    13.2
    """
    method = check_choice("method", method, TAU2_METHODS)
    if adjust is not None:
        check_choice("adjust", adjust, ("hksj",))
    level = check_level(level)
    y = _vector("estimates", estimates)
    k = y.size
    if k < 2:
        raise DataError(f"'estimates' has {k} value(s); a population estimate needs at least "
                        "2 animals")
    names = _names(names, estimates, k)
    s = _vector("stderrs", stderrs, k=k, names=names, positive=True)
    v = s * s
    if moderators is None:
        X, terms, coding = np.ones((k, 1)), ("intercept",), ()
    else:
        X, terms, coding = _encode(moderators, k)
    p = X.shape[1]
    if tau2 is not None:
        try:
            t2 = float(tau2)
        except (TypeError, ValueError):
            raise DataError(f"'tau2' must be a number >= 0; got {tau2!r}") from None
        if not (np.isfinite(t2) and t2 >= 0):
            raise DataError(f"'tau2' must be a finite number >= 0; got {tau2!r}")
        used = "fixed"
    else:
        t2 = _tau2(y, v, X, method)
        used = method
    beta, cov, q_t, w = _wls(y, v, X, t2)
    df = k - p
    if adjust == "hksj":
        cov = cov * (q_t / df)
        crit = float(stats.t.ppf(0.5 + level / 2, df))
        pvals = lambda st: 2 * stats.t.sf(np.abs(st), df)  # noqa: E731
    else:
        crit = float(stats.norm.ppf(0.5 + level / 2))
        pvals = lambda st: 2 * stats.norm.sf(np.abs(st))  # noqa: E731
    se = np.sqrt(np.diag(cov))
    q_e = _q(y, v, X, 0.0)
    if used == "fixed":
        t2_lo = t2_hi = t2
    else:
        t2_lo = _solve_q(y, v, X, float(stats.chi2.ppf(0.5 + level / 2, df)))
        t2_hi = _solve_q(y, v, X, float(stats.chi2.ppf(0.5 - level / 2, df)))
    i2 = max(0.0, (q_e - df) / q_e) if q_e > 0 else 0.0
    df_pi = k - p - 1
    t_pi = float(stats.t.ppf(0.5 + level / 2, df_pi)) if df_pi >= 1 else np.nan
    nan = float("nan")
    if p == 1:
        est, sd = float(beta[0]), float(se[0])
        lo, hi = est - crit * sd, est + crit * sd
        half = t_pi * np.sqrt(t2 + sd * sd)
        pi_lo, pi_hi = est - half, est + half
        coefs, r2, t2_null, qm, qm_p = None, nan, nan, nan, nan
    else:
        est = sd = lo = hi = pi_lo = pi_hi = nan
        stat = beta / se
        coefs = pd.DataFrame({"estimate": beta, "stderr": se,
                              ("t" if adjust == "hksj" else "z"): stat, "p": pvals(stat),
                              "lower": beta - crit * se, "upper": beta + crit * se},
                             index=pd.Index(terms, name="term"))
        b = beta[1:]
        qm = float(b @ np.linalg.solve(cov[1:, 1:], b))
        if adjust == "hksj":
            qm_p = float(stats.f.sf(qm / (p - 1), p - 1, df))
        else:
            qm_p = float(stats.chi2.sf(qm, p - 1))
        if used == "fixed":
            t2_null, r2 = nan, nan
        else:
            t2_null = _tau2(y, v, np.ones((k, 1)), method)
            r2 = max(0.0, (t2_null - t2) / t2_null) if t2_null > 0 else nan
    return RandomEffects(
        estimate=est, stderr=sd, lower=lo, upper=hi, tau2=float(t2), tau2_lower=t2_lo,
        tau2_upper=t2_hi, i2=float(i2), q=float(q_e), q_df=int(df),
        q_p=float(stats.chi2.sf(q_e, df)), pi_lower=float(pi_lo), pi_upper=float(pi_hi),
        k=int(k), method=used, adjust=adjust, level=level, names=names, estimates=y,
        stderrs=s, coefficients=coefs, coef_cov=cov, r2=float(r2), tau2_null=float(t2_null),
        qm=float(qm), qm_df=int(p - 1), qm_p=float(qm_p), encoding=coding)


# --------------------------------------------------------------------------- population

@dataclass(frozen=True)
class PopulationEstimate:
    """A population estimate from per-animal estimates and their interval bounds.

    Made by :func:`population_estimate`; read-only. With ``scale="log"`` the analysis runs
    on log values and the results here are back-transformed: ``estimate`` is
    :math:`\\exp\\hat\\mu`, the population median (geometric mean) of the quantity.

    Parameters
    ----------
    quantity : str
        What is pooled (for instance ``"half_life"``).
    scale : str
        ``"log"`` or ``"identity"``: the scale of the analysis.
    estimate : float
        Population estimate (back-transformed; NaN with moderators, see :meth:`predict`).
    lower, upper : float
        Its confidence bounds at ``level``.
    pi_lower, pi_upper : float
        Prediction interval for a new animal's value (back-transformed).
    level : float
        Confidence level of the pooled intervals.
    model : RandomEffects
        The analysis on the analysis scale (log values with ``scale="log"``).
    given : DataFrame
        Every animal as given: ``name, value, lower, upper, reason`` (reason empty for
        the animals used).
    bias : str
        What leaving them out does to the estimate (empty when none was left out).
    """

    quantity: str
    scale: str
    estimate: float
    lower: float
    upper: float
    pi_lower: float
    pi_upper: float
    level: float
    model: RandomEffects
    given: pd.DataFrame
    bias: str

    def _back(self, x):
        return np.exp(x) if self.scale == "log" else x

    @property
    def excluded(self) -> pd.DataFrame:
        """Animals left out: ``name, value, lower, upper, reason`` (empty when none)."""
        return self.given[self.given["reason"] != ""].reset_index(drop=True)

    @property
    def k(self) -> int:
        """Number of animals in the analysis."""
        return self.model.k

    @property
    def method(self) -> str:
        """Estimator of the between-animal variance."""
        return self.model.method

    @property
    def tau2(self) -> float:
        """Between-animal variance on the analysis scale (of log values with ``"log"``)."""
        return self.model.tau2

    @property
    def tau(self) -> float:
        """Between-animal standard deviation on the analysis scale."""
        return self.model.tau

    @property
    def i2(self) -> float:
        """:math:`I^2` (Higgins & Thompson 2002), a fraction."""
        return self.model.i2

    @property
    def cv(self) -> float:
        """Between-animal coefficient of variation, :math:`\\sqrt{e^{\\tau^2} - 1}` (log scale).

        The coefficient of variation of a lognormal distribution with log-scale variance
        :math:`\\tau^2`; NaN on the identity scale.
        """
        return float(np.sqrt(np.expm1(self.tau2))) if self.scale == "log" else float("nan")

    def predict(self, new_moderators=None) -> pd.DataFrame:
        """Population value and prediction interval for new animals, back-transformed.

        Parameters
        ----------
        new_moderators : DataFrame, optional
            Covariates of the new animals (see :meth:`RandomEffects.predict`).

        Returns
        -------
        DataFrame
            ``estimate, lower, upper, pi_lower, pi_upper, level`` on the quantity's scale
            (with ``"log"``: :math:`\\exp` of the log-scale values; the estimate is the
            median of the population at these covariates).
        """
        df = self.model.predict(new_moderators)
        out = df.drop(columns="stderr")
        for c in ("estimate", "lower", "upper", "pi_lower", "pi_upper"):
            out[c] = self._back(df[c].to_numpy())
        return out

    def coefficients(self) -> pd.DataFrame | None:
        """The meta-regression table, with multiplicative effects on the log scale.

        Returns
        -------
        DataFrame or None
            The model's coefficient table; with ``scale="log"`` also ``factor,
            factor_lower, factor_upper`` = :math:`\\exp` of estimate and bounds (the
            factor by which the quantity changes per unit of a covariate, or against the
            reference level). None without moderators.
        """
        c = self.model.coefficients
        if c is None:
            return None
        c = c.copy()
        if self.scale == "log":
            c["factor"] = np.exp(c["estimate"])
            c["factor_lower"] = np.exp(c["lower"])
            c["factor_upper"] = np.exp(c["upper"])
        return c

    def animals(self) -> pd.DataFrame:
        """Every animal given: used ones with weights, excluded ones with the reason.

        Returns
        -------
        DataFrame
            In the order given: ``name, value, lower, upper`` (as given), ``stderr`` (on
            the analysis scale, from the interval), ``weight`` (% of the pooled mean, 0
            for left-out animals), ``used``, ``reason``.
        """
        out = self.given.copy()
        used = (out["reason"] == "").to_numpy()
        out.insert(4, "stderr", np.nan)
        out.loc[used, "stderr"] = self.model.stderrs
        out["weight"] = 0.0
        out.loc[used, "weight"] = self.model.weights
        out["used"] = used
        return out[["name", "value", "lower", "upper", "stderr", "weight", "used", "reason"]]

    def table(self) -> pd.DataFrame:
        """The population results as an interval table.

        Returns
        -------
        DataFrame
            Rows ``<quantity>`` (the population value; with moderators one row per
            coefficient on the analysis scale instead), ``new animal`` (the prediction
            interval), then the model's ``tau2``, ``tau``, ``i2`` (analysis scale) and with
            ``"log"`` ``cv`` (between-animal coefficient of variation,
            :math:`\\sqrt{e^{\\tau^2}-1}`, with the Q-profile bounds carried through);
            columns ``quantity, estimate, lower, upper, level, method, lower_status,
            upper_status, stderr``.
        """
        t = self.model.table()
        if self.model.coefficients is None:
            t.loc[t["quantity"] == "mean", ["quantity", "estimate", "lower", "upper"]] = \
                [self.quantity, self.estimate, self.lower, self.upper]
            t.loc[t["quantity"] == "prediction", ["quantity", "estimate", "lower",
                                                  "upper"]] = \
                ["new animal", self.estimate, self.pi_lower, self.pi_upper]
            t.loc[t["quantity"] == self.quantity, "stderr"] = np.nan
        if self.scale == "log":
            r = t[t["quantity"] == "tau2"].iloc[0]
            cv = r.copy()
            cv["quantity"] = "cv"
            cv["estimate"], cv["lower"], cv["upper"] = (
                float(np.sqrt(np.expm1(r[c]))) for c in ("estimate", "lower", "upper"))
            t = pd.concat([t, cv.to_frame().T], ignore_index=True)
        return t

    def summary(self) -> str:
        """A printable account: population value, spread, new animals and exclusions.

        Returns
        -------
        str
            The population value with its interval, the between-animal spread, the
            prediction interval for a new animal, the animals left out with their reasons
            and the direction of the bias this causes, then the model's summary.
        """
        pct = f"{100 * self.level:g} %"
        lines = [f"Population {self.quantity.replace('_', '-')} from {self.k} animals "
                 f"({self.scale} scale, {self.method})"]
        if np.isfinite(self.estimate):
            what = " (median, geometric mean)" if self.scale == "log" else " (mean)"
            lines.append(f"  {self.quantity}{what}: {self.estimate:.4g}  ({pct} CI "
                         f"{self.lower:.4g} to {self.upper:.4g})")
            if np.isfinite(self.pi_lower):
                lines.append(f"  a new animal ({pct} prediction interval): "
                             f"{self.pi_lower:.4g} to {self.pi_upper:.4g}")
        else:
            lines.append(f"  the population {self.quantity} depends on the moderators: "
                         "predict(covariates) gives it for given values")
        if self.scale == "log":
            lines.append(f"  between-animal spread: tau {self.tau:.3g} on the log scale "
                         f"(CV {100 * self.cv:.1f} %)")
        if len(self.excluded):
            lines.append(f"  left out ({len(self.excluded)}):")
            for _, r in self.excluded.iterrows():
                lines.append(f"    {r['name']}: {r['reason']}")
            lines.append("  " + self.bias)
        lines.append("")
        lines.append(self.model.summary())
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.summary()


def _statuses(name, statuses, n):
    if statuses is None:
        return [None] * n
    if isinstance(statuses, (str, bytes, Mapping)) or not hasattr(statuses, "__len__") \
            or len(statuses) != n:
        raise DataError(f"'{name}' must give one status per animal ({n}); got {statuses!r}")
    return list(statuses.values) if isinstance(statuses, pd.Series) else list(statuses)


def _bias_text(reasons, quantity) -> str:
    """The direction of the bias that leaving out these animals causes."""
    up = sum(r == "upper bound open" for r in reasons)
    down = sum(r == "lower bound open" for r in reasons)
    other = len(reasons) - up - down
    slow, fast = "slow animals", "fast animals"
    if "rate" in quantity or quantity.startswith("k"):
        slow, fast = fast, slow
    elif not any(w in quantity for w in ("half", "time", "residence", "mrt")):
        slow = fast = "animals at that end"
    parts = []
    if up:
        parts.append(f"{up} animal(s) whose upper bound is open (the data allow a much larger "
                     f"{quantity}: {slow}) are left out; this biases the population "
                     f"{quantity} low and may understate the spread")
    if down:
        parts.append(f"{down} animal(s) whose lower bound is open (the data allow a much "
                     f"smaller {quantity}: {fast}) are left out; this biases the population "
                     f"{quantity} high and may understate the spread")
    if other:
        parts.append(f"{other} animal(s) without a usable interval are left out: the "
                     "direction of the bias this causes is unknown")
    if up and down:
        parts.append("the two directions partly offset")
    return "Bias: " + "; ".join(parts) + "."


def population_estimate(values, lowers, uppers, level=0.95, *, scale="log", method="reml",
                        adjust=None, moderators=None, names=None, lower_status=None,
                        upper_status=None, reasons=None, quantity="half_life",
                        pooled_level=None) -> PopulationEstimate:
    """Pool per-animal estimates given with interval bounds (profile intervals).

    The standard error of each animal comes from its interval on the analysis scale,
    :math:`s_i = (g(U_i) - g(L_i)) / (2 z_{(1+\\text{level})/2})` with :math:`g = \\log`
    (``scale="log"``, where profile intervals of half-lives and rates are near symmetric)
    or the identity; :func:`random_effects` pools :math:`g(\\text{value}_i)` and the results
    are back-transformed (:math:`\\exp` of the mean is the population median).

    Animals whose interval is open (an infinite, missing or, on the log scale, zero bound,
    or a bound whose status is ``open``, ``failed`` or ``not_available``), whose value is
    missing or fixed, or that the caller gives a reason for, are not used; they are
    listed in ``excluded`` with the reason, a :class:`~isoturnover.DataWarning` names
    them, and ``bias`` states the direction of the bias (leaving out slow animals, whose
    upper bound is open, biases a population half-life low).

    Parameters
    ----------
    values : array_like of float
        One estimate per animal (for instance half-lives, in the data's time unit).
    lowers, uppers : array_like of float
        Their interval bounds at ``level`` (NaN, ±inf allowed: such animals are left out).
        The interval may be asymmetric (a profile interval); the standard error uses its
        width only, so the analysis scale should be the one on which it is near symmetric.
    level : float, default=0.95
        Confidence level of the given intervals.
    scale : {"log", "identity"}, default="log"
        Scale of the analysis.
    method : {"reml", "dl", "pm"}, default="reml"
        Estimator of the between-animal variance (see :func:`random_effects`).
    adjust : {None, "hksj"}, default=None
        Interval adjustment of the pooled mean (see :func:`random_effects`).
    moderators : DataFrame, optional
        Covariates, one row per animal given (rows of left-out animals are dropped).
    names : sequence, optional
        Animal names (default the Series index of ``values``, or 0 … k−1).
    lower_status, upper_status : sequence of str, optional
        Bound statuses (the ``lower_status``/``upper_status`` columns of an interval
        table).
    reasons : sequence of str, optional
        A reason per animal to leave it out that the caller knows (for instance why its
        series was not fitted); empty or None for animals to judge by their interval.
    quantity : str, default="half_life"
        Name of the quantity, for tables and text.
    pooled_level : float, optional
        Confidence level of the pooled results (default ``level``).

    Returns
    -------
    PopulationEstimate
        The back-transformed population value, its interval, the prediction interval for
        a new animal, the model on the analysis scale, the excluded animals and the bias
        statement.

    Raises
    ------
    DataError
        Bad values (a value outside its own interval, a value ≤ 0 on the log scale) naming
        the argument and index, mismatched lengths, or fewer than 2 usable animals.
    """
    level = check_level(level)
    pooled_level = level if pooled_level is None else check_level(pooled_level)
    scale = check_choice("scale", scale, ("log", "identity"))
    if not isinstance(quantity, str):
        raise DataError(f"'quantity' must be a string; got {quantity!r}")
    val = _vector("values", values, allow_nonfinite=True)
    n = val.size
    names = _names(names, values, n)
    lo = _vector("lowers", lowers, k=n, names=names, allow_nonfinite=True)
    hi = _vector("uppers", uppers, k=n, names=names, allow_nonfinite=True)
    ls = _statuses("lower_status", lower_status, n)
    us = _statuses("upper_status", upper_status, n)
    known = _statuses("reasons", reasons, n)
    reasons = []
    for i in range(n):
        if known[i] is not None and not (isinstance(known[i], float) and np.isnan(known[i])) \
                and str(known[i]) != "":
            reasons.append(str(known[i]))
            continue
        if not np.isfinite(val[i]):
            reasons.append("no estimate")
            continue
        if scale == "log" and val[i] <= 0:
            raise DataError(f"'values' at {_label(names, i)} is {val[i]}; the log scale needs "
                            "values > 0 (use scale='identity')")
        if ls[i] == "fixed" or us[i] == "fixed":
            reasons.append("fixed (no interval)")
            continue
        lo_open = ls[i] in _UNUSABLE or np.isnan(lo[i]) or lo[i] == -np.inf or \
            (scale == "log" and lo[i] <= 0)
        hi_open = us[i] in _UNUSABLE or not np.isfinite(hi[i])
        if not lo_open and lo[i] > val[i]:
            raise DataError(f"'lowers' at {_label(names, i)} is {lo[i]}, above the value "
                            f"{val[i]}")
        if not hi_open and hi[i] < val[i]:
            raise DataError(f"'uppers' at {_label(names, i)} is {hi[i]}, below the value "
                            f"{val[i]}")
        if lo_open and hi_open:
            reasons.append("both bounds open")
        elif hi_open:
            reasons.append("upper bound open")
        elif lo_open:
            reasons.append("lower bound open")
        elif hi[i] == lo[i]:
            reasons.append("zero-width interval")
        else:
            reasons.append("")
    keep = np.array([r == "" for r in reasons])
    dropped = [i for i in range(n) if not keep[i]]
    given = pd.DataFrame({"name": list(names), "value": val, "lower": lo, "upper": hi,
                          "reason": reasons})
    bias = _bias_text([reasons[i] for i in dropped], quantity) if dropped else ""
    if keep.sum() < 2:
        raise DataError(f"'values': only {int(keep.sum())} of {n} animals have a closed "
                        "interval; a population estimate needs at least 2 (left out: "
                        + ", ".join(f"{names[i]!r} {reasons[i]}" for i in dropped) + ")")
    if dropped:
        warnings.warn(f"population {quantity}: {len(dropped)} animal(s) left out ("
                      + ", ".join(f"{names[i]!r}: {reasons[i]}" for i in dropped)
                      + "). " + bias, DataWarning, stacklevel=2)
    g = np.log if scale == "log" else (lambda x: x)
    z = float(stats.norm.ppf(0.5 + level / 2))
    idx = np.flatnonzero(keep)
    y = g(val[idx])
    se = (g(hi[idx]) - g(lo[idx])) / (2.0 * z)
    mods = None
    if moderators is not None:
        frame = _frame("moderators", moderators)
        if len(frame) != n:
            raise DataError(f"'moderators' has {len(frame)} rows; there are {n} animals (one "
                            "row each, in the same order)")
        mods = frame.iloc[idx]
    model = random_effects(y, se, method=method, moderators=mods, level=pooled_level,
                           names=[names[i] for i in idx], adjust=adjust)
    back = np.exp if scale == "log" else (lambda x: x)
    return PopulationEstimate(
        quantity=quantity, scale=scale, estimate=float(back(model.estimate)),
        lower=float(back(model.lower)), upper=float(back(model.upper)),
        pi_lower=float(back(model.pi_lower)), pi_upper=float(back(model.pi_upper)),
        level=pooled_level, model=model, given=given, bias=bias)
