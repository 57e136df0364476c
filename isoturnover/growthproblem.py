r"""The weighted least-squares problem of one growth curve on one set of body masses.

:func:`growth_response` turns masses (and their standard deviations) into the fitted response
and weights of a scale; :class:`CurveProblem` holds the residuals
:math:`r = w\,(y - f(t;\theta))` of one curve law (:mod:`isoturnover.growthlaws`) with their
analytic Jacobian, and minimises them over any subset of the parameters by
``scipy.optimize.least_squares`` (Levenberg–Marquardt), positive parameters on the log scale.
:mod:`isoturnover.growthfit` builds its fits, covariances and profile-likelihood intervals
on it.

Animal experiments need the approval of the local animal-care authority; this library
supports the analysis of such experiments and does not replace that approval.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize

from .errors import DataError

__all__ = [
    "SOLVE_MAX_NFEV",
    "SOLVE_TOL",
    "STATIONARY",
    "CurveProblem",
    "check_mass_data",
    "check_vector",
    "growth_response",
]

#: Default xtol = ftol = gtol of :meth:`CurveProblem.solve`.
SOLVE_TOL = 1e-15
#: Default evaluation budget of :meth:`CurveProblem.solve`.
SOLVE_MAX_NFEV = 2000
#: Residual–Jacobian cosine below which a point is stationary.
STATIONARY = 1e-6


def check_vector(x, name: str) -> np.ndarray:
    """A one-dimensional array of finite numbers, copied (``name`` in the error).

    Parameters
    ----------
    x : array-like
        The values.
    name : str
        Argument name used in error messages.

    Returns
    -------
    ndarray of shape (n,)

    Raises
    ------
    DataError
        Not numbers, not one-dimensional, or not finite (positions named).
    """
    try:
        a = np.array(x, dtype=float)
    except (TypeError, ValueError):
        raise DataError(f"{name} must be an array of numbers; got {x!r:.80}") from None
    if a.ndim != 1:
        raise DataError(f"{name} must be one-dimensional; got shape {a.shape}")
    bad = np.flatnonzero(~np.isfinite(a))
    if bad.size:
        shown = ", ".join(f"{i} ({float(a[i])!r})" for i in bad[:10])
        more = f" and {bad.size - 10} more" if bad.size > 10 else ""
        raise DataError(
            f"{name} must be finite (no NaN or inf); non-finite at positions {shown}{more}"
        )
    return a


def check_mass_data(t, mass, sigma):
    """Checked times, body masses and their standard deviations of a growth-curve fit.

    Parameters
    ----------
    t : array-like of shape (n,)
        Sampling times (time unit).
    mass : array-like of shape (n,)
        Body masses (> 0, mass unit).
    sigma : float, array-like of shape (n,) or None
        Standard deviation of each mass (> 0, mass unit); a number applies to every mass.

    Returns
    -------
    (ndarray, ndarray, ndarray or None)
        ``t``, ``mass`` and ``sigma`` as float arrays (copies).

    Raises
    ------
    DataError
        Non-finite values, lengths that differ, masses or sd that are not positive.
    """
    t = check_vector(t, "t")
    mass = check_vector(mass, "mass")
    if t.size != mass.size:
        raise DataError(f"t and mass must have the same length; got {t.size} and {mass.size}")
    bad = np.flatnonzero(mass <= 0)
    if bad.size:
        shown = ", ".join(f"{i} ({float(mass[i])!r})" for i in bad[:10])
        raise DataError(f"mass must be > 0 (body masses); got values <= 0 at positions {shown}")
    if sigma is not None:
        if np.ndim(sigma) == 0:
            sigma = [sigma] * t.size
        sigma = check_vector(sigma, "sigma")
        if sigma.size != t.size:
            raise DataError(
                f"sigma must have the same length as mass; got {sigma.size} and {mass.size}"
            )
        if np.any(sigma <= 0):
            i = int(np.flatnonzero(sigma <= 0)[0])
            raise DataError(f"sigma must be > 0; got {float(sigma[i])!r} at position {i}")
    return t, mass, sigma


def growth_response(mass, sigma, scale):
    r"""Fitted response and weights of body masses on a fitting scale.

    On the log scale the response is :math:`y = \ln W` with weights :math:`w = W/\sigma` (the
    sd of :math:`\ln W` is :math:`\sigma/W` by the delta method); on the natural scale
    :math:`y = W` with :math:`w = 1/\sigma`. Without ``sigma`` every weight is 1.

    Parameters
    ----------
    mass : ndarray of shape (n,)
        Body masses (> 0, mass unit).
    sigma : ndarray of shape (n,) or None
        Standard deviation of each mass (mass unit), or None.
    scale : {"log", "natural"}
        Fitting scale.

    Returns
    -------
    y : ndarray of shape (n,)
        The response (ln W or a copy of W).
    w : ndarray of shape (n,)
        The weights.
    """
    if scale == "log":
        y = np.log(mass)
        w = np.ones_like(mass) if sigma is None else mass / sigma
    else:
        y = mass.copy()
        w = np.ones_like(mass) if sigma is None else 1.0 / sigma
    return y, w


class CurveProblem:
    r"""Weighted least squares of one curve on one data set, on an internal vector.

    Positive parameters are optimised as their logarithm (no hard bounds); the others as
    they are. Residuals :math:`r = w\,(y - f(t;\theta))` with :math:`y = \ln W`,
    :math:`f = \ln W(t;\theta)` (log scale) or :math:`y = W`, :math:`f = W(t;\theta)`
    (natural scale).

    Parameters
    ----------
    curve : object
        The family's law (:func:`isoturnover.growthlaws.curve_law`).
    t : ndarray of shape (n,)
        Sampling times (time unit).
    y : ndarray of shape (n,)
        The response, from :func:`growth_response`.
    w : ndarray of shape (n,)
        The weights, from :func:`growth_response`.
    scale : {"log", "natural"}
        Fitting scale.

    Attributes
    ----------
    is_log : ndarray of bool, shape (p,)
        Which parameters are optimised on the log scale (the law's ``positive`` ones).
    """

    def __init__(self, curve, t, y, w, scale):
        self.curve, self.t, self.y, self.w, self.scale = curve, t, y, w, scale
        self.is_log = np.array([p in curve.positive for p in curve.params])
        self.big = 1e10 * (1.0 + float(np.max(np.abs(y))))

    def model(self, v):
        """The fitted function at the sampling times.

        Parameters
        ----------
        v : ndarray of shape (p,)
            Parameter values in the law's order.

        Returns
        -------
        ndarray of shape (n,)
            ln W(t) on the log scale, W(t) (mass unit) on the natural scale.
        """
        if self.scale == "log":
            return np.asarray(self.curve.log_mass(self.t, v), dtype=float)
        return np.asarray(self.curve.mass(self.t, v), dtype=float)

    def model_jac(self, v):
        r"""Analytic Jacobian :math:`\partial f/\partial\theta` of :meth:`model`.

        Parameters
        ----------
        v : ndarray of shape (p,)
            Parameter values in the law's order.

        Returns
        -------
        ndarray of shape (n, p)
            d ln W/dθ (log scale) or dW/dθ (natural scale), natural parameters.
        """
        if self.scale == "log":
            return np.asarray(self.curve.log_jac(self.t, v), dtype=float)
        return np.asarray(self.curve.mass_jac(self.t, v), dtype=float)

    def residuals(self, v):
        r"""Weighted residuals :math:`w\,(y - f(t;\theta))`.

        Parameters
        ----------
        v : ndarray of shape (p,)
            Parameter values in the law's order.

        Returns
        -------
        ndarray of shape (n,)
            The residuals (NaN where the curve is undefined).
        """
        with np.errstate(all="ignore"):
            return self.w * (self.y - self.model(v))

    def rss(self, v) -> float:
        r"""Residual sum of squares.

        Parameters
        ----------
        v : ndarray of shape (p,)
            Parameter values in the law's order.

        Returns
        -------
        float
            :math:`r \cdot r`; inf when a residual is not finite.
        """
        with np.errstate(all="ignore"):
            r = self.residuals(v)
            out = float(r @ r) if np.all(np.isfinite(r)) else math.inf
        return out if math.isfinite(out) else math.inf

    def _full(self, x, free, base):
        v = base.copy()
        xi = np.where(self.is_log[free], np.exp(np.clip(x, -700.0, 700.0)), x)
        v[free] = xi
        return v

    def max_cosine(self, v, free) -> float:
        """Largest |cosine| between the residual vector and a Jacobian column.

        Parameters
        ----------
        v : ndarray of shape (p,)
            Parameter values in the law's order.
        free : ndarray of bool, shape (p,)
            The parameters whose columns count (internal scale: times θ for log-scale
            parameters).

        Returns
        -------
        float
            About 0 at a stationary point; 0 for a perfect fit; inf when not finite.
        """
        r = self.residuals(v)
        rn = float(np.linalg.norm(r))
        if rn <= 1e-10 * max(float(np.linalg.norm(self.w * self.y)), 1e-300):
            return 0.0
        j = self.w[:, None] * self.model_jac(v)[:, free]
        j = np.where(self.is_log[free][None, :], j * v[free][None, :], j)
        with np.errstate(invalid="ignore", divide="ignore"):
            cos = np.abs(j.T @ r) / (np.linalg.norm(j, axis=0) * rn)
        if cos.size == 0:
            return 0.0
        return float(np.max(cos)) if np.all(np.isfinite(cos)) else math.inf

    def rss_derivative(self, v, j: int) -> float:
        r"""Derivative of the RSS in one natural parameter.

        :math:`dRSS/d\theta_j = -2\, r \cdot (w\, \partial f/\partial\theta_j)` at ``v``: the
        envelope-theorem slope of a profile when the other free parameters are at their
        constrained optimum.

        Parameters
        ----------
        v : ndarray of shape (p,)
            Parameter values in the law's order.
        j : int
            Index of the parameter.

        Returns
        -------
        float
            The derivative (RSS per unit of θ_j).
        """
        with np.errstate(all="ignore"):
            col = self.w * self.model_jac(v)[:, j]
            return float(-2.0 * (self.residuals(v) @ col))

    def solve(self, v0, free, tol: float | None = None, max_nfev: int | None = None):
        """Minimise over the parameters where ``free`` is True, from ``v0``.

        Parameters
        ----------
        v0 : array-like of shape (p,)
            Starting values in the law's order (the non-free ones are held there).
        free : ndarray of bool, shape (p,)
            Which parameters vary.
        tol : float, optional
            xtol = ftol = gtol of ``least_squares``; :data:`SOLVE_TOL` by default.
        max_nfev : int, optional
            Evaluation budget; :data:`SOLVE_MAX_NFEV` by default.

        Returns
        -------
        v : ndarray of shape (p,)
            The solution.
        rss : float
            Its residual sum of squares (inf when not finite).
        status : int
            > 0 for a converged solve: scipy's codes 1–4, or 5 for the evaluation limit
            reached at a stationary point (every residual–Jacobian cosine below
            :data:`STATIONARY`); ≤ 0 otherwise.
        """
        tol = SOLVE_TOL if tol is None else tol
        max_nfev = SOLVE_MAX_NFEV if max_nfev is None else max_nfev
        v0 = np.asarray(v0, dtype=float)
        if not free.any():
            return v0.copy(), self.rss(v0), 1
        if not self.curve.valid_params(v0) or not math.isfinite(self.rss(v0)):
            return v0.copy(), math.inf, -1
        logf = self.is_log[free]
        x0 = np.where(logf, np.log(np.where(logf, v0[free], 1.0)), v0[free])

        def fun(x):
            r = self.residuals(self._full(x, free, v0))
            if not np.all(np.isfinite(r)):
                return np.full_like(self.y, self.big)
            return r

        def jac(x):
            v = self._full(x, free, v0)
            j = -self.w[:, None] * self.model_jac(v)[:, free]
            j = np.where(logf[None, :], j * v[free][None, :], j)
            if not np.all(np.isfinite(j)):
                return np.zeros_like(j)
            return j

        m = int(free.sum())
        if self.y.size < m:  # pragma: no cover - guarded by the caller
            return v0.copy(), math.inf, -1
        with np.errstate(all="ignore"):
            res = optimize.least_squares(
                fun, x0, jac=jac, method="lm", xtol=tol, ftol=tol, gtol=tol,
                max_nfev=max_nfev, x_scale="jac",
            )
        v = self._full(res.x, free, v0)
        rss = self.rss(v)
        status = int(res.status) if math.isfinite(rss) else -1
        if status == 0 and self.max_cosine(v, free) <= STATIONARY:
            # evaluation limit reached in a flat valley where the residuals are already
            # orthogonal to the Jacobian: a stationary point (the RSS cannot be lowered),
            # the tolerances of 1e-15 being too tight to be met there
            status = 5
        return v, rss, status
