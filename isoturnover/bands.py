r"""Confidence and prediction bands of a fitted turnover curve (DESIGN §3 "Intervals").

Delta method from the fit's internal covariance, or percentiles of the replicate curves of
a bootstrap (:func:`band`). The fit is left unchanged.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd

from .conventions import check_choice as _choice
from .conventions import check_level as _check_level
from .derived import check_fit
from .errors import ConvergenceWarning, DataError
from .lazystats import stats
from .resampling import BootstrapResult
from .segments import point_kinetics

__all__ = ["band", "BAND_KINDS", "BAND_METHODS"]

#: Kinds of band: of the fitted curve, or of new observations.
BAND_KINDS = ("confidence", "prediction")
#: Methods of :func:`band`.
BAND_METHODS = ("delta", "bootstrap")


def _new_sigma(fit, sigma, nt):
    """Analytic sd of new observations at ``nt`` times, in the unit of the fit's σ."""
    if sigma is None:
        if fit.sigma is None:
            return np.ones(nt)
        return np.full(nt, math.sqrt(float(np.mean(fit.sigma**2))))
    try:
        s = np.asarray(sigma, dtype=float)
    except (TypeError, ValueError):
        raise DataError(f"'sigma' must be a number or an array of the times' length; got "
                        f"{sigma!r:.60}") from None
    if s.ndim == 0:
        s = np.full(nt, float(s))
    if s.shape != (nt,) or not np.all(np.isfinite(s)) or np.any(s <= 0):
        raise DataError(f"'sigma' must be positive and finite, one value or one per time "
                        f"({nt}); got {sigma!r:.60}")
    return s


def band(fit, t, level=0.95, kind="confidence", method="delta", boot=None, *, sigma=None,
         rng=None) -> pd.DataFrame:
    r"""Confidence or prediction band of the fitted curve at times ``t``.

    ``method="delta"``: with :math:`J(t) = \partial\hat y/\partial\theta \cdot
    \partial\theta/\partial z` (``kinetics.evaluate(..., jacobian=True)`` and the coordinate
    map) and the internal covariance :math:`C_z`,

    .. math::

        \mathrm{se}^2_{\text{conf}}(t) = J(t)\,C_z\,J(t)^T, \qquad
        \mathrm{se}^2_{\text{pred}}(t) = \mathrm{se}^2_{\text{conf}}(t) + s^2\sigma_*^2

    (:math:`\sigma_*^2` alone with σ known), and the band is
    :math:`\hat y \pm q\,\mathrm{se}` with q the Student t quantile on n − p degrees of
    freedom (σ estimated) or the normal quantile (σ known). For new points without an
    analytic sd, :math:`\sigma_*` is 1 for an unweighted fit and the root-mean-square of the
    fit's σ otherwise (pass ``sigma=`` to set it).

    ``method="bootstrap"``: percentiles of the replicate curves of ``boot`` (a
    :class:`BootstrapResult` of this fit; failed replicates left out); for a prediction
    band each replicate curve gets a normal error :math:`N(0, s^{*2}_b\sigma_*^2)` with the
    replicate's own residual variance (:math:`\sigma_*^2` with σ known).

    Parameters
    ----------
    fit : TurnoverFit
        The fit (joint fits allowed: the band is of the δ curve); left unchanged.
    t : array-like of shape (m,)
        Times, in the fit's time unit.
    level : float, default=0.95
        Confidence level, in (0, 1).
    kind : {"confidence", "prediction"}, default="confidence"
        Band of the fitted curve, or of a new observation at each time.
    method : {"delta", "bootstrap"}, default="delta"
        Delta method, or percentiles of the replicate curves of ``boot``.
    boot : BootstrapResult, optional
        A bootstrap of this fit (:func:`isoturnover.resampling.bootstrap`); needed by
        ``method="bootstrap"`` and refused otherwise.
    sigma : float or array-like of shape (m,), optional
        Analytic sd :math:`\sigma_*` of new observations (prediction band), in the unit of
        the data; default as above.
    rng : int or numpy.random.Generator, optional
        Seed of the normal errors of a bootstrap prediction band.

    Returns
    -------
    DataFrame
        Columns time, fitted, se (delta method; NaN for bootstrap), lower, upper, level,
        kind, method. For a segment fit, the band of the precursor's point response
        (:meth:`~isoturnover.TurnoverFit.predict`), not of segment means.
    """
    check_fit(fit, "band", joint=True)
    level = _check_level(level)
    kind = _choice("kind", kind, BAND_KINDS)
    method = _choice("method", method, BAND_METHODS)
    try:
        tt = np.atleast_1d(np.asarray(t, dtype=float))
    except (TypeError, ValueError):
        raise DataError(f"'t' must be numeric; got {t!r:.60}") from None
    if tt.ndim != 1 or tt.size == 0 or not np.all(np.isfinite(tt)):
        raise DataError("'t' must be a non-empty one-dimensional array of finite times")
    kin = point_kinetics(fit.kinetics)  # a segment fit: the band of the point response
    fitted = fit.predict(tt)
    s_new = _new_sigma(fit, sigma, tt.size)
    s2 = 1.0 if fit.absolute_sigma else fit.s2
    if getattr(fit, "block_scale", None) is not None:
        s2 = float(fit.block_scale[0]) ** 2  # joint fit: the δ block's residual variance
    se = np.full(tt.size, np.nan)
    if method == "delta":
        if boot is not None:
            raise DataError("'boot' is used with method='bootstrap' only")
        if fit.state.cov_ok:
            th, A = fit.state.coords.theta(fit.state.z, jac=True)
            _, Jm = kin.evaluate(tt, th, jacobian=True)
            J = Jm @ A
            var = np.einsum("ij,jk,ik->i", J, fit.state.cov_z0, J)
            if kind == "prediction":
                var = var + s2 * s_new**2
            se = np.sqrt(np.clip(var, 0, None))
            q = (float(stats.norm.ppf(0.5 + level / 2)) if fit.absolute_sigma
                 else float(stats.t.ppf(0.5 + level / 2, max(fit.dof, 1))))
            lower, upper = fitted - q * se, fitted + q * se
        else:
            warnings.warn("the fit's covariance is not available (singular): delta-method "
                          "band is NaN; use method='bootstrap'", ConvergenceWarning,
                          stacklevel=2)
            lower = upper = np.full(tt.size, np.nan)
    else:
        if not isinstance(boot, BootstrapResult):
            raise DataError("method='bootstrap' needs boot=, a BootstrapResult of this fit "
                            "(iso.uncertainty.bootstrap(fit, ...))")
        source = boot.fit
        if source is not fit and (source is None
                                  or source.data_fingerprint != fit.data_fingerprint):
            raise DataError("'boot' was made from a different fit (other data); bootstrap "
                            "this fit")
        use = boot.usable
        thetas = use[list(kin.param_names)].to_numpy(dtype=float)
        if thetas.shape[0] < 2:
            raise DataError(f"'boot' has {thetas.shape[0]} usable replicates; at least 2 are "
                            "needed")
        curves = np.empty((thetas.shape[0], tt.size))
        with np.errstate(all="ignore"):
            for b in range(thetas.shape[0]):
                curves[b] = kin.evaluate(tt, thetas[b])
        if kind == "prediction":
            g = np.random.default_rng(rng)
            s2b = (np.ones(thetas.shape[0]) if fit.absolute_sigma
                   else use["rss"].to_numpy(dtype=float) / max(fit.dof, 1))
            curves = curves + g.standard_normal(curves.shape) * np.sqrt(s2b)[:, None] \
                * s_new[None, :]
        alpha = (1 - level) / 2
        lower, upper = np.quantile(curves, [alpha, 1 - alpha], axis=0)
    return pd.DataFrame({"time": tt, "fitted": fitted, "se": se, "lower": lower,
                         "upper": upper, "level": level, "kind": kind, "method": method})
