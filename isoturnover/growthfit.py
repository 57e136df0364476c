r"""Fitting growth curves to body masses, with profile-likelihood intervals.

:func:`fit_growth` fits one curve family of :mod:`isoturnover.growth` to repeated masses of
an animal (or to the destructive-sampling masses of a group) by least squares and hands back
a :class:`GrowthFit`; :func:`fit_growth_each` fits one curve per subject of a masses table;
:func:`load_growth` rebuilds a fit or a known curve from its ``to_dict()`` record.

Error model. ``scale="log"`` (the default) fits :math:`\ln W`: multiplicative error, the
usual choice for body masses, whose scatter grows with size (common practice).
``scale="natural"`` fits :math:`W` itself (additive error). Least squares with the residual
variance estimated; ``sigma`` (sd of each mass, in mass units) gives relative weights.

Intervals. :meth:`GrowthFit.conf_int` profiles the likelihood: each bound is found by
:func:`isoturnover.profiles.find_bound`, the root finder of every profile bound of the
package (Newton on the profile-t statistic of Bates & Watts 1988, with the envelope-theorem
derivative of the residual sum of squares), so growth curves and turnover fits report their
bounds with the same statuses. The least-squares problem itself (residuals, analytic
Jacobian, the Levenberg–Marquardt solve) is :class:`isoturnover.growthproblem.CurveProblem`.

Animal experiments need the approval of the local animal-care authority; this library
supports the analysis of such experiments and does not replace that approval.
"""

from __future__ import annotations

import hashlib
import math
import warnings
from collections.abc import Mapping
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from .conventions import INTERVAL_COLUMNS, check_level
from .engine import relative_sigma, sigma_scale_message
from .errors import (
    ConvergenceWarning,
    DataError,
    DataWarning,
    DesignWarning,
    FitError,
    IdentifiabilityWarning,
)
from .growth import (
    GrowthCurve,
    GrowthFitFailure,
    GrowthFitSet,
    GrowthSummary,
    check_curve_values,
    curve_law,
)
from .growthproblem import SOLVE_MAX_NFEV, CurveProblem, check_mass_data, growth_response
from .lazystats import stats
from .profiles import find_bound

if TYPE_CHECKING:  # annotations only; lmfit is imported where it is used
    import lmfit

__all__ = [
    "SCALES",
    "GrowthFit",
    "fit_growth",
    "fit_growth_each",
    "load_growth",
]

#: Fitting scales: ``"log"`` fits ln W (multiplicative error), ``"natural"`` fits W.
SCALES = ("log", "natural")

# Optimizer settings (module attributes so a test can tighten them to force a failure).
_MAX_NFEV = SOLVE_MAX_NFEV  # evaluation budget of the fits of fit_growth
_PROFILE_MAX_NFEV = 500
_PROFILE_TOL = 1e-12  # inner fits of a profile: RSS to ~1e-12 relative is ample for ΔRSS/s²
_PROFILE_D_TOL = 1e-9  # find_bound: |ΔRSS/s² − crit| ≤ 1e-9 crit (refits here are cheap)
_N_RUNS = 4  # multi-start: optimise the best few automatic starts (by starting RSS)
_HUGE = math.exp(690.0)  # a positive parameter near the float limit (exp(709.8))
_CORR_LIMIT = 0.99  # |correlation| above this is flagged (common practice)
_ASYMPTOTE_REACHED = 0.5  # data below half the fitted asymptote: Winf extrapolated (common
# practice)


# ---------------------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------------------
def _check_scale(scale) -> str:
    if not isinstance(scale, str) or scale not in SCALES:
        raise DataError(f"scale must be one of 'log', 'natural'; got {scale!r}")
    return scale


def _fingerprint(t, y, w) -> str:
    h = hashlib.sha1()
    for a in (t, y, w):
        h.update(np.ascontiguousarray(a, dtype=np.float64).tobytes())
    return h.hexdigest()


def _json_float(x):
    x = float(x)
    return x if math.isfinite(x) else None


# ---------------------------------------------------------------------------------------
# fitted curve
# ---------------------------------------------------------------------------------------
class GrowthFit(GrowthCurve):
    r"""A growth curve fitted to masses by least squares.

    Built by :func:`fit_growth` (or :meth:`from_dict`); the keyword arguments below are the
    record of a finished fit, not fitting options. Besides the evaluation methods of
    :class:`GrowthCurve` (``predict``, ``log_mass``, ``rate``, ``log_mass_jacobian``) it
    carries the data, the least-squares statistics (:attr:`rss`, :attr:`covariance`,
    :attr:`stderr`, :attr:`aicc`…), intervals (:meth:`conf_int`) and a :meth:`summary`.

    Parameters
    ----------
    curve : object
        The family's law (:func:`isoturnover.growth.curve_law`).
    scale : {"log", "natural"}
        Fitting scale: ln W or W.
    values : array-like of shape (p,)
        Parameter values in the law's order.
    vary : array-like of bool, shape (p,)
        Which parameters were fitted (False: fixed).
    t, mass : array-like of shape (n,)
        The data (time unit, mass unit); copied and made read-only.
    sigma : array-like of shape (n,) or None
        Standard deviation of each mass (mass unit), or None.
    converged : bool
        Whether the optimizer converged.
    warn_list : list of str
        The fit's trust notes.
    nfev : int, default 0
        Function evaluations spent.
    """

    def __init__(self, *, curve, scale: str, values, vary, t, mass, sigma,
                 converged: bool, warn_list, nfev: int = 0):
        self._curve = curve
        self._scale = scale
        self._values = np.asarray(values, dtype=float).copy()
        self._vary = np.asarray(vary, dtype=bool).copy()
        self._t = np.array(t, dtype=float)
        self._mass = np.array(mass, dtype=float)
        self._sigma = None if sigma is None else np.array(sigma, dtype=float)
        for a in (self._t, self._mass) + (() if self._sigma is None else (self._sigma,)):
            a.setflags(write=False)
        self._converged = bool(converged)
        self._warnings = list(warn_list)
        self._nfev = int(nfev)
        self._y, self._w = growth_response(self._mass, self._sigma, scale)
        self._problem = CurveProblem(curve, self._t, self._y, self._w, scale)
        self._resid = self._problem.residuals(self._values)
        self._resid.setflags(write=False)
        self._rss = float(self._resid @ self._resid)
        with np.errstate(all="ignore"):
            self._cov = self._covariance()

    # -- statistics ------------------------------------------------------------------
    def _covariance(self) -> np.ndarray:
        """s² (JᵀJ)⁻¹ of the varying parameters, by SVD of the column-scaled Jacobian."""
        free = self._vary
        j = -self._w[:, None] * self._problem.model_jac(self._values)[:, free]
        p = j.shape[1]
        dof = self.nobs - p
        if dof <= 0 or not np.all(np.isfinite(j)) or not self._rss > 0:
            # no residual scatter (the curve through every mass): s² = 0 is no uncertainty
            return np.full((p, p), np.nan)
        norms = np.linalg.norm(j, axis=0)
        if np.any(norms == 0):
            return np.full((p, p), np.nan)
        js = j / norms
        _, s, vt = np.linalg.svd(js, full_matrices=False)
        if s[-1] <= 1e-12 * s[0]:
            return np.full((p, p), np.nan)
        inv = (vt.T / s**2) @ vt
        return (self._rss / dof) * inv / np.outer(norms, norms)

    @property
    def scale(self) -> str:
        """Fitting scale: ``"log"`` (ln W fitted) or ``"natural"`` (W fitted)."""
        return self._scale

    @property
    def label(self) -> str:
        """Short description for tables and messages: family and fitting scale."""
        return f"{self.curve} ({self._scale} scale)"

    @property
    def t(self) -> np.ndarray:
        """Sampling times (a read-only copy of the data)."""
        return self._t

    @property
    def mass(self) -> np.ndarray:
        """Body masses (a read-only copy of the data)."""
        return self._mass

    @property
    def sigma(self) -> np.ndarray | None:
        """Standard deviation of each mass (read-only copy), or None without weights."""
        return self._sigma

    @property
    def residuals(self) -> np.ndarray:
        """Weighted residuals w·(y − fitted) on the fitting scale, ``sum(residuals**2) ==
        rss`` (plain differences without ``sigma``)."""
        return self._resid

    @property
    def rss(self) -> float:
        """Residual sum of squares of the weighted residuals."""
        return self._rss

    @property
    def nobs(self) -> int:
        """Number of masses fitted."""
        return int(self._t.size)

    @property
    def nvarys(self) -> int:
        """Number of varying (fitted) parameters."""
        return int(self._vary.sum())

    @property
    def converged(self) -> bool:
        """Whether the optimizer converged at a stationary point."""
        return self._converged

    @property
    def warnings(self) -> list[str]:
        """The fit's trust notes (a copy), also issued as warnings when it was made."""
        return list(self._warnings)

    @property
    def data_fingerprint(self) -> str:
        """SHA-1 of the float64 bytes of t, the fitted response and the weights: two fits
        are on the same data when their fingerprints match."""
        return _fingerprint(self._t, self._y, self._w)

    @property
    def covariance(self) -> pd.DataFrame:
        """Covariance of the varying parameters, :math:`s^2 (J^T J)^{-1}` (NaN if singular)."""
        names = [n for n, f in zip(self.param_names, self._vary, strict=True) if f]
        return pd.DataFrame(self._cov.copy(), index=names, columns=names)

    @property
    def stderr(self) -> np.ndarray:
        """Standard errors in :attr:`param_names` order (NaN for fixed parameters)."""
        se = np.full(self._values.size, np.nan)
        with np.errstate(invalid="ignore"):
            se[self._vary] = np.sqrt(np.diag(self._cov))
        return se

    def _correlation(self) -> np.ndarray:
        with np.errstate(invalid="ignore", divide="ignore"):
            d = np.sqrt(np.diag(self._cov))
            return self._cov / np.outer(d, d)

    @property
    def params(self) -> lmfit.Parameters:
        """Values, stderr from :math:`s^2 (J^T J)^{-1}` with :math:`s^2 = RSS/(n - p)`, and
        correlations, as :class:`lmfit.Parameters`; fixed parameters have ``vary=False``."""
        import lmfit  # on first use: lmfit imports scipy.stats and matplotlib

        se = self.stderr
        p = lmfit.Parameters()
        for name, v, vary, s in zip(self.param_names, self._values, self._vary, se, strict=True):
            p.add(name, value=float(v), vary=bool(vary),
                  min=0.0 if name in self._curve.positive else -np.inf)
            if vary:
                p[name].stderr = float(s)
        free = [n for n, f in zip(self.param_names, self._vary, strict=True) if f]
        corr = self._correlation()
        for i, a in enumerate(free):
            p[a].correl = {b: float(corr[i, j]) for j, b in enumerate(free) if j != i}
        return p

    def _loglik_term(self) -> float:
        n = self.nobs
        if self._rss <= 0:
            return -math.inf
        return n * math.log(self._rss / n)

    @property
    def n_criteria_params(self) -> int:
        """Parameters counted by the information criteria: varying ones + the variance."""
        return self.nvarys + 1

    @property
    def aic(self) -> float:
        r"""Akaike's criterion, :math:`AIC = n \ln(RSS/n) + 2K` with K = nvarys + 1 (the
        residual variance estimated too; Burnham & Anderson 2002, least-squares case)."""
        return self._loglik_term() + 2 * self.n_criteria_params

    @property
    def aicc(self) -> float:
        r"""Small-sample AIC, :math:`AIC + 2K(K+1)/(n-K-1)`; NaN (with a note) when
        :math:`n - K - 1 \le 0` (Burnham & Anderson 2002)."""
        n, k = self.nobs, self.n_criteria_params
        if n - k - 1 <= 0:
            return math.nan
        return self.aic + 2 * k * (k + 1) / (n - k - 1)

    @property
    def bic(self) -> float:
        r"""Schwarz's criterion, :math:`BIC = n \ln(RSS/n) + K \ln n` with K as for :attr:`aic`."""
        return self._loglik_term() + self.n_criteria_params * math.log(self.nobs)

    def mean_rate(self, t_start=None, t_end=None) -> float:
        r"""Mean specific growth rate over the data's time span (or the given times).

        .. math:: \bar r = \frac{\ln W(t_{end}) - \ln W(t_{start})}{t_{end} - t_{start}}

        Parameters
        ----------
        t_start, t_end : float, optional
            The two times (time unit); the first and last sampling times by default.

        Returns
        -------
        float
            :math:`\bar r` in 1/time.
        """
        t0 = float(np.min(self._t)) if t_start is None else t_start
        t1 = float(np.max(self._t)) if t_end is None else t_end
        return super().mean_rate(t0, t1)

    # -- intervals -------------------------------------------------------------------
    def conf_int(self, level: float = 0.95, method: str = "profile") -> pd.DataFrame:
        r"""Confidence intervals of the varying parameters.

        Parameters
        ----------
        level : float, default 0.95
            Confidence level, in (0, 1).
        method : {"profile", "asymptotic"}, default "profile"
            ``"asymptotic"``: estimate ± :math:`t_{n-p,(1+level)/2}` · stderr.
            ``"profile"``: profile likelihood; at each trial value of a parameter the others
            are re-optimised, and the bound is where
            :math:`D = (RSS(\theta_j) - RSS_{min})/s^2 = F_{level}(1, n - p)`,
            :math:`s^2 = RSS_{min}/(n - p)`. The root is found by
            :func:`isoturnover.profiles.find_bound` (safeguarded Newton on the profile-t
            statistic :math:`\pm\sqrt{D}`, Bates & Watts 1988; on the log scale for
            positive parameters), as for turnover fits. A bound that does not close within
            the search is ``open`` (±inf); for a positive parameter whose profile stays
            below the critical value down to 0 the bound is 0 with status ``at_bound``; a
            search whose refits fail gives NaN with status ``failed``.

        Returns
        -------
        DataFrame
            One row per varying parameter: parameter, estimate, lower, upper, level, method,
            lower_status, upper_status.
        """
        level = check_level(level)
        if method not in ("profile", "asymptotic"):
            raise DataError(f"method must be one of 'profile', 'asymptotic'; got {method!r}")
        rows = []
        se = self.stderr
        dof = self.nobs - self.nvarys
        for j, name in enumerate(self.param_names):
            if not self._vary[j]:
                continue
            est = float(self._values[j])
            if method == "asymptotic":
                if math.isfinite(se[j]):
                    q = stats.t.ppf(0.5 + level / 2, dof)
                    lo, hi, ls, us = est - q * se[j], est + q * se[j], "ok", "ok"
                else:
                    lo, hi, ls, us = math.nan, math.nan, "failed", "failed"
            else:
                lo, ls = self._profile_bound(j, -1, level)
                hi, us = self._profile_bound(j, +1, level)
            rows.append(
                dict(parameter=name, estimate=est, lower=lo, upper=hi, level=level,
                     method=method, lower_status=ls, upper_status=us)
            )
        return pd.DataFrame(rows, columns=["parameter", *INTERVAL_COLUMNS])

    def _profile_bound(self, j: int, direction: int, level: float):
        """One profile-likelihood bound of parameter ``j``: (value, status).

        The search runs on u = ln θ_j for a positive parameter, u = θ_j otherwise, and is
        :func:`isoturnover.profiles.find_bound` on D(u) = (RSS(u) − RSS_min)/s², the other
        varying parameters refitted at each trial u (warm-started from the nearest refit
        inside the interval). dD/du comes from the envelope theorem:
        dRSS/dθ_j = −2 r·(w ∂f/∂θ_j) at the constrained optimum, times θ_j on the log scale.
        """
        prob = self._problem
        n, p = self.nobs, self.nvarys
        s2 = self._rss / (n - p)
        est = float(self._values[j])
        if not s2 > 0:  # no residual scatter: the profile statistic is undefined
            return math.nan, "failed"
        crit = float(stats.f.ppf(level, 1, n - p))
        is_log = bool(prob.is_log[j])
        se = self.stderr[j]
        h = se / est if is_log else se  # standard error on the search scale u
        if not math.isfinite(h) or h <= 0:
            h = 0.1 if is_log else 0.1 * max(abs(est), 1e-8)
        u_hat = math.log(est) if is_log else est
        reach = 25.0 if is_log else 1e3 * h
        if is_log:  # stay within floating point: exp(±700)
            reach = min(reach, 700.0 - direction * u_hat)
            if reach <= 0.5 * h:
                return (0.0, "at_bound") if direction < 0 else (math.inf, "open")
        free = self._vary.copy()
        free[j] = False
        inside = {u_hat: self._values.copy()}  # refits inside the interval: the warm starts
        seen = {"lower_rss": False, "float_limit": False}

        def evaluate(u):
            v0 = inside[min(inside, key=lambda c: abs(c - u))].copy()
            v0[j] = math.exp(u) if is_log else u
            v, rss, status = prob.solve(v0, free, tol=_PROFILE_TOL, max_nfev=_PROFILE_MAX_NFEV)
            if status <= 0 or not math.isfinite(rss):
                return math.nan, math.nan, False, ""
            d = (rss - self._rss) / s2
            pos = v[prob.is_log]
            cosine = prob.max_cosine(v, free) if d > crit else 0.0
            if cosine > 1e-4 and (np.any((pos > _HUGE) | (pos < 1.0 / _HUGE))
                                  or not math.isfinite(cosine)):
                # the refit stopped short where another parameter is at the float limit
                # (huge or tiny) or its gradient overflows: a crossing made by the number
                # format, not by the data
                seen["float_limit"] = True
                return math.nan, math.nan, False, "unreachable"
            if d < -1e-6 * max(1.0, crit):
                seen["lower_rss"] = True
            if d <= crit:
                inside[u] = v
            dd = prob.rss_derivative(v, j) * (v[j] if is_log else 1.0) / s2
            return d, dd, True, ""

        step = math.sqrt(crit) * h
        if is_log:
            step = min(step, 1.0)  # at most a factor e at first
        res = find_bound(evaluate, u_hat, direction, step, u_hat + direction * reach, crit,
                         tol=_PROFILE_D_TOL)
        edge = 0.0 if is_log and direction < 0 else direction * math.inf
        if res.status == "ok":
            out = (math.exp(res.u) if is_log else res.u), "ok"
        elif res.status == "open":
            # below the cut-off up to the search limit: a positive parameter's profile stays
            # open down to 0, the edge of its domain
            out = edge, "at_bound" if is_log and direction < 0 else "open"
        elif res.status == "at_bound" or seen["float_limit"]:
            out = edge, "open"  # not closed before the float limit of another parameter
        else:
            out = math.nan, "failed"
        if seen["lower_rss"]:
            warnings.warn(
                f"profile of {self.param_names[j]!r} found a lower RSS than the fit: the fit "
                "may not be at the global minimum",
                ConvergenceWarning,
                stacklevel=3,
            )
        return out

    # -- reporting -------------------------------------------------------------------
    def summary(self) -> GrowthSummary:
        """Header, parameter table and numbered notes.

        Returns
        -------
        GrowthSummary
            Printable (``str()``) and shown as HTML in notebooks (``_repr_html_``).
        """
        return GrowthSummary.of(self)

    def to_dict(self) -> dict:
        """JSON-safe record of the fit (data, values, statuses; no refit needed to rebuild).

        Returns
        -------
        dict
            ``type = "GrowthFit"``; :func:`load_growth` or :meth:`from_dict` rebuild the fit.
        """
        return {
            "type": "GrowthFit",
            "version": 1,
            "curve": self.curve,
            "scale": self._scale,
            "param_names": self.param_names,
            "values": [float(v) for v in self._values],
            "vary": [bool(f) for f in self._vary],
            "t": [float(v) for v in self._t],
            "mass": [float(v) for v in self._mass],
            "sigma": None if self._sigma is None else [float(v) for v in self._sigma],
            "converged": self._converged,
            "warnings": list(self._warnings),
            "nfev": self._nfev,
            "rss": _json_float(self._rss),
            "stderr": [_json_float(s) for s in self.stderr],
        }

    @classmethod
    def from_dict(cls, d: Mapping) -> GrowthFit:
        """Rebuild a fit from :meth:`to_dict` output (no refitting).

        Parameters
        ----------
        d : Mapping
            The record (``type = "GrowthFit"``). Not modified.

        Returns
        -------
        GrowthFit

        Raises
        ------
        DataError
            When ``d`` is not a GrowthFit record or lacks a key.
        """
        if not isinstance(d, Mapping) or d.get("type") != "GrowthFit":
            got = d.get("type") if isinstance(d, Mapping) else type(d).__name__
            raise DataError(f"not a GrowthFit record: 'type' must be 'GrowthFit'; got {got!r}")
        try:
            curve = curve_law(d["curve"])
            names = list(d["param_names"])
            if names != list(curve.params):
                raise DataError(
                    f"GrowthFit record: param_names {names} do not match curve "
                    f"{curve.name!r} ({', '.join(curve.params)})"
                )
            return cls(
                curve=curve,
                scale=_check_scale(d["scale"]),
                values=[float(v) for v in d["values"]],
                vary=[bool(f) for f in d["vary"]],
                t=np.asarray(d["t"], dtype=float),
                mass=np.asarray(d["mass"], dtype=float),
                sigma=None if d.get("sigma") is None else np.asarray(d["sigma"], dtype=float),
                converged=bool(d["converged"]),
                warn_list=list(d.get("warnings", [])),
                nfev=int(d.get("nfev", 0)),
            )
        except KeyError as e:
            raise DataError(f"GrowthFit record is missing the key {e.args[0]!r}") from None

    def __repr__(self) -> str:
        ps = ", ".join(f"{n}={v:.6g}" for n, v in zip(self.param_names, self._values, strict=True))
        return f"<GrowthFit {self.label}: {ps}; n={self.nobs}, RSS={self._rss:.4g}>"


# ---------------------------------------------------------------------------------------
# fitting
# ---------------------------------------------------------------------------------------
def fit_growth(t, mass, curve: str = "logistic", *, scale: str = "log", sigma=None,
               init=None, fixed=None) -> GrowthFit:
    r"""Fit a body-mass growth curve.

    Parameters
    ----------
    t : array-like of shape (n,)
        Sampling times (time unit of the experiment, e.g. days since the diet switch).
    mass : array-like of shape (n,)
        Body masses (> 0, any mass unit). Decreasing masses (loss) are allowed.
    curve : {"exponential", "linear", "logistic", "gompertz", "von_bertalanffy", "richards"}
        Curve family, default "logistic"; formulas in :mod:`isoturnover.growth` (module
        docstring), sources in :mod:`isoturnover.growthlaws` (curve docstrings).
    scale : {"log", "natural"}, default "log"
        ``"log"`` fits ln W (multiplicative error, usual for masses); ``"natural"`` fits W.
    sigma : array-like of shape (n,), optional
        Standard deviation of each mass (mass unit), used as relative weights (the residual
        variance is still estimated). On the log scale it is carried to ln W as σ/W (delta
        method). Only the ratios matter: sd outside 1e-50 to 1e50 are divided by their
        geometric mean, with a :class:`DataWarning` (see
        :func:`isoturnover.engine.relative_sigma`).
    init : dict, optional
        Starting values for some parameters; the automatic deterministic starts are tried as
        well and the best fit by RSS is kept.
    fixed : dict, optional
        Parameters held at given values (e.g. ``{"W0": 12.0}``).

    Returns
    -------
    GrowthFit

    Raises
    ------
    DataError
        Mismatched lengths, non-finite values, masses ≤ 0, unknown curve or scale, bad
        ``sigma``/``init``/``fixed``, or too few points (the curve needs at least one more
        mass than it has varying parameters, at that many distinct times). Masses that are
        all equal for a curve with an asymptote (its rate would not be determined; the
        exponential and linear curves fit them with rate 0, without a covariance).
    FitError
        When no starting point leads to a converged least-squares solution.

    Notes
    -----
    Minimisation by ``scipy.optimize.least_squares`` (Levenberg–Marquardt, analytic
    Jacobian, xtol = ftol = gtol = 1e-15), positive parameters on the log scale internally;
    several deterministic starts (see each curve), the lowest RSS kept.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.array([0.0, 10, 20, 30, 40])
    >>> w = 5.0 * np.exp(0.03 * t)   # invented, noise-free masses
    >>> fit = fit_growth(t, w, "exponential")
    >>> round(fit.params["k"].value, 10)
    0.03
    """
    c = curve_law(curve)
    scale = _check_scale(scale)
    t, mass, sigma = check_mass_data(t, mass, sigma)
    if sigma is not None:
        sigma, g = relative_sigma(sigma, False)  # only the ratios matter (relative weights)
        if g != 1.0:
            warnings.warn(sigma_scale_message("sigma", g), DataWarning, stacklevel=2)
    if "Winf" in c.params and t.size > 1 and np.ptp(mass) == 0:
        raise DataError(
            f"'mass': all {t.size} masses are equal ({float(mass[0]):g}): curve {c.name!r} "
            "cannot be fitted to masses that do not change (its rate is then not "
            "determined); use curve='exponential' or 'linear', whose rate is then 0")
    fixed_d = check_curve_values(c, fixed, "fixed")
    init_d = check_curve_values(c, init, "init")
    both = sorted(set(fixed_d) & set(init_d))
    if both:
        raise DataError(f"parameters {both} are given in both init and fixed; give each once")
    free = np.array([p not in fixed_d for p in c.params])
    p = int(free.sum())
    if p == 0:
        raise DataError(
            f"fixed holds every parameter of curve {c.name!r} ({', '.join(c.params)}); "
            "at least one must vary (use GrowthCurve for a known curve)"
        )
    if t.size <= p:
        raise DataError(
            f"curve {c.name!r} has {p} varying parameters and needs at least {p + 1} mass "
            f"points; got {t.size}"
        )
    n_times = np.unique(t).size
    if n_times < p:
        raise DataError(
            f"curve {c.name!r} has {p} varying parameters and needs masses at {p} or more "
            f"distinct times; got {n_times}"
        )

    y, w = growth_response(mass, sigma, scale)
    prob = CurveProblem(c, t, y, w, scale)
    given = {**init_d, **fixed_d}
    with np.errstate(all="ignore"):
        auto = c.starts(t, mass, given)
    starts = []
    if init_d:
        base = auto[0].copy() if auto else np.ones(len(c.params))
        for name, v in given.items():
            base[c.params.index(name)] = v
        starts.append(base)
    for s in auto:
        s = s.copy()
        for name, v in fixed_d.items():
            s[c.params.index(name)] = v
        starts.append(s)
    scored = []
    for s in starts:
        if c.valid_params(s):
            r = prob.rss(s)
            if math.isfinite(r):
                scored.append((r, len(scored), s))
    if not scored:
        raise FitError(
            f"curve {c.name!r}: no valid starting values could be built from the data "
            f"(masses {float(mass.min()):.4g} to {float(mass.max()):.4g}); give init="
        )
    scored.sort(key=lambda z: (z[0], z[1]))
    chosen = [s for _, _, s in scored[:_N_RUNS]]
    if init_d and not any(s is starts[0] for s in chosen) and scored and any(
        s is starts[0] for _, _, s in scored
    ):
        chosen.insert(0, starts[0])  # the user's start is always tried

    best = None
    last = None
    for s in chosen:
        v, rss, status = prob.solve(s, free, max_nfev=_MAX_NFEV)
        if math.isfinite(rss) and (last is None or rss < last[1]):
            last = (v, rss)
        if status > 0 and math.isfinite(rss) and (best is None or rss < best[1]):
            best = (v, rss)
    if best is None:
        tried = ""
        if last is not None:
            tried = " (lowest RSS reached at " + ", ".join(
                f"{n}={x:.4g}" for n, x in zip(c.params, last[0], strict=True)
            ) + "; parameters that run off to huge or tiny values mean the data do not pin " \
                "this curve down)"
        raise FitError(
            f"curve {c.name!r} ({scale} scale) did not converge from any of {len(chosen)} "
            f"starting points within {_MAX_NFEV} evaluations{tried}; try another curve, give "
            "init=, or fix a parameter"
        )
    v, rss = best
    fit = GrowthFit(curve=c, scale=scale, values=v, vary=free, t=t, mass=mass, sigma=sigma,
                    converged=True, warn_list=[])
    notes = _trust_checks(fit, prob)
    fit._warnings = [msg for msg, _ in notes]
    conv_failed = any(cat is ConvergenceWarning for _, cat in notes)
    if conv_failed:
        fit._converged = False
    for msg, cat in notes:
        warnings.warn(f"{fit.label}: {msg}", cat, stacklevel=2)
    return fit


def _trust_checks(fit: GrowthFit, prob: CurveProblem) -> list[tuple[str, type]]:
    """Trust signals on a fit: (message, warning class) pairs."""
    out: list[tuple[str, type]] = []
    free = fit._vary
    names = [n for n, f in zip(fit.param_names, free, strict=True) if f]
    # stationarity: cosine between residual vector and each Jacobian column
    cosine = prob.max_cosine(fit._values, free)
    if cosine > 1e-4:
        out.append(
            ("the optimizer stopped where the gradient is not small "
             f"(largest residual–Jacobian cosine {cosine:.2g}): not converged",
             ConvergenceWarning)
        )
    if not fit._rss > 0:
        out.append(
            ("the curve passes through every mass exactly (RSS = 0, e.g. constant masses): the "
             "scatter cannot be estimated, so standard errors and intervals are NaN (pass it "
             "with propagate_growth=False to use it as known)", IdentifiabilityWarning))
    elif np.any(~np.isfinite(fit._cov)):
        out.append(
            ("covariance could not be estimated (J^T J singular or too few degrees of freedom):"
             " standard errors are NaN", IdentifiabilityWarning)
        )
    else:
        corr = fit._correlation()
        for a in range(len(names)):
            for b in range(a + 1, len(names)):
                if abs(corr[a, b]) > _CORR_LIMIT:
                    out.append(
                        (f"parameters {names[a]} and {names[b]} are strongly correlated "
                         f"(r = {corr[a, b]:.4f}): the data hardly separate them",
                         IdentifiabilityWarning)
                    )
    if "Winf" in fit.param_names and fit.curve != "von_bertalanffy" or (
        fit.curve == "von_bertalanffy" and fit._values[0] > fit._values[2]
    ):
        winf = fit._values[fit.param_names.index("Winf")]
        reached = float(np.nanmax(fit.predict(fit._t))) / winf
        if reached < _ASYMPTOTE_REACHED:
            out.append(
                (f"the data reach only {100 * reached:.2g} % of the fitted asymptote Winf = "
                 f"{winf:.4g}: Winf is an extrapolation", DesignWarning)
            )
    if fit.curve == "linear" and np.any(fit.predict(fit._t) <= 0):
        out.append(("the fitted line is at or below zero mass at some sampling times; ln W and "
                    "the rate are undefined there", DataWarning))
    n, p = fit.nobs, fit.nvarys + 1
    if n - p - 1 <= 0:
        out.append(
            (f"AICc is undefined (NaN): n − K − 1 = {n - p - 1} with n = {n} points and "
             f"K = {p} parameters (the residual variance included)", DesignWarning)
        )
    return out


# ---------------------------------------------------------------------------------------
# persistence
# ---------------------------------------------------------------------------------------
def load_growth(d: Mapping) -> GrowthCurve:
    """Rebuild a :class:`GrowthFit` or :class:`GrowthCurve` from its ``to_dict()`` output.

    Parameters
    ----------
    d : Mapping
        A record with ``type`` ``"GrowthFit"`` or ``"GrowthCurve"`` (JSON-loaded is fine).
        Not modified.

    Returns
    -------
    GrowthCurve
        A :class:`GrowthFit` (no refit: values, statistics and warnings as stored) or a
        :class:`~isoturnover.growth.GrowthCurve`.

    Raises
    ------
    DataError
        When ``d`` is not such a record or lacks a key.
    """
    if not isinstance(d, Mapping) or "type" not in d:
        raise DataError(
            "load_growth needs a dict made by GrowthFit.to_dict() or GrowthCurve.to_dict(); "
            f"got {type(d).__name__} without a 'type' key"
        )
    if d["type"] == "GrowthFit":
        return GrowthFit.from_dict(d)
    if d["type"] == "GrowthCurve":
        params = d.get("params")
        if not isinstance(params, Mapping):
            raise DataError("GrowthCurve record needs a 'params' mapping")
        return GrowthCurve(d.get("curve"), **params)
    raise DataError(f"'type' must be one of 'GrowthFit', 'GrowthCurve'; got {d['type']!r}")


def fit_growth_each(masses: pd.DataFrame, *, curve: str = "logistic", scale: str = "log",
                    by="subject") -> GrowthFitSet:
    """Fit one growth curve per subject.

    Parameters
    ----------
    masses : DataFrame
        The masses table: a ``by`` column (default ``subject``), ``time`` and ``mass``. It is
        not modified.
    curve, scale : str
        As in :func:`fit_growth`.
    by : str, default "subject"
        Column identifying the animal.

    Returns
    -------
    GrowthFitSet
        Mapping subject → :class:`GrowthFit`; a subject whose fit fails is a
        :class:`GrowthFitFailure` (status "failed", reason) instead of stopping the others.
        Warnings of each fit are re-issued with the subject named.
    """
    curve_law(curve)
    _check_scale(scale)
    if not isinstance(masses, pd.DataFrame):
        raise DataError(f"masses must be a pandas DataFrame; got {type(masses).__name__}")
    if not isinstance(by, str):
        raise DataError(f"by must be a column name (str); got {by!r}")
    need = [by, "time", "mass"]
    missing = [col for col in need if col not in masses.columns]
    if missing:
        raise DataError(
            f"masses needs columns {need}; missing {missing} (columns: {list(masses.columns)})"
        )
    keys = masses[by]
    if keys.isna().any():
        rows = masses.index[keys.isna().to_numpy()][:10].tolist()
        raise DataError(f"masses: column {by!r} is empty in rows {rows} (row labels)")
    entries: dict = {}
    for key, grp in masses.groupby(by, sort=False):
        subj = key.item() if isinstance(key, np.generic) else key
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                entries[subj] = fit_growth(grp["time"].to_numpy(), grp["mass"].to_numpy(),
                                           curve, scale=scale)
            except (DataError, FitError) as e:
                entries[subj] = GrowthFitFailure(subject=subj, curve=curve, scale=scale,
                                                 reason=str(e))
        for wmsg in caught:
            warnings.warn(f"{by} {subj!r}: {wmsg.message}", wmsg.category, stacklevel=2)
    return GrowthFitSet(entries, curve, scale, by)
