"""Random-effects meta-analysis of per-animal estimates: :func:`random_effects`.

The science, formulas and sources are in :mod:`isoturnover.population`, the public module
that re-exports this one.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import optimize

from .conventions import check_choice, check_level
from .errors import DataError
from .lazystats import stats
from .popinputs import (
    check_vector,
    design_matrix,
    encode_moderators,
    estimate_names,
    moderator_frame,
)

__all__ = ["TAU2_METHODS", "RandomEffects", "random_effects"]

#: Estimators of the between-animal variance tau².
TAU2_METHODS = ("reml", "dl", "pm")


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
            frame = moderator_frame("new_moderators", new_moderators)
            X0, _ = design_matrix(frame, self.encoding, "new_moderators")
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
    y = check_vector("estimates", estimates)
    k = y.size
    if k < 2:
        raise DataError(f"'estimates' has {k} value(s); a population estimate needs at least "
                        "2 animals")
    names = estimate_names(names, estimates, k)
    s = check_vector("stderrs", stderrs, k=k, names=names, positive=True)
    v = s * s
    if moderators is None:
        X, terms, coding = np.ones((k, 1)), ("intercept",), ()
    else:
        X, terms, coding = encode_moderators(moderators, k)
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
