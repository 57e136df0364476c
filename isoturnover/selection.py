r"""Model choice: information criteria, Akaike weights and a bootstrap likelihood-ratio test.

:func:`compare` tabulates fits **of the same data** (same times, values and weights; it
refuses others) by AIC, AICc and BIC, with Akaike weights
:math:`w_i = e^{-\Delta_i/2} / \sum_j e^{-\Delta_j/2}` over :math:`\Delta_i` = AICc_i −
min AICc (Burnham & Anderson 2002, *Model Selection and Multimodel Inference*). AICc is
the default criterion: small samples are the rule in diet-switch experiments.

Why a *bootstrap* likelihood-ratio test. Between one and two pools the two-pool model
reduces to one pool when the second fraction is 0 — and then its rate is not defined at
all. A parameter that exists only under the alternative (and a fraction on the edge of its
range) breaks the regularity conditions behind Wilks' χ² reference (Davies 1977,
Biometrika 64:247–254; Self & Liang 1987, JASA 82:605–610), so the χ² p-value is wrong.
:func:`lr_test` instead simulates the statistic's distribution under the fitted simpler
model (parametric bootstrap; McLachlan 1987, Appl. Stat. 36:318–324, for the analogous
problem of the number of mixture components).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .conventions import check_choice
from .errors import DataError, IsoturnoverWarning

__all__ = ["compare", "lr_test", "LRTestResult", "CRITERIA", "not_eligible_reason"]

CRITERIA = ("aicc", "aic", "bic")


def _describe(fit):
    kin = getattr(fit, "kinetics", None)
    if kin is not None:
        return kin.structure, (kin.pools if kin.structure == "parallel" else math.nan)
    return getattr(fit, "curve", type(fit).__name__), math.nan


def _label(fit, i):
    lab = getattr(fit, "label", None)
    if lab:
        return str(lab)
    kin = getattr(fit, "kinetics", None)
    if kin is not None:
        if kin.structure == "chain":
            return "chain"
        return f"{kin.pools} pool{'s' if kin.pools > 1 else ''}"
    return f"fit {i + 1}"


_NAMES = {"aicc": "AICc", "aic": "AIC", "bic": "BIC"}


def not_eligible_reason(fit, criterion: str = "aicc") -> str:
    r"""Why a fit cannot take part in a choice by ``criterion`` ("" when it can).

    A fit is eligible when its criterion is finite. AICc = AIC + 2k(k+1)/(n−k−1) is
    undefined when :math:`n - k - 1 \le 0` (Burnham & Anderson 2002, *Model Selection and
    Multimodel Inference*, §2.4 — from memory for the section), with n the points and k
    the parameters of the criterion (the free parameters and the residual variance when it
    is estimated: ``fit.n_criteria_params``); every criterion is :math:`-\infty` for a fit
    that passes through every point (RSS = 0, σ estimated).

    Parameters
    ----------
    fit : TurnoverFit or GrowthFit
        A finished fit.
    criterion : {"aicc", "aic", "bic"}, default="aicc"
        The information criterion of the choice.

    Returns
    -------
    str
        "" for an eligible fit, else the reason, naming n and k.

    Raises
    ------
    DataError
        For a bad ``criterion``.
    """
    check_choice("criterion", criterion, CRITERIA)
    value = float(getattr(fit, criterion))
    if math.isfinite(value):
        return ""
    n = int(fit.nobs)
    k = int(getattr(fit, "n_criteria_params", fit.nvarys))
    name = _NAMES[criterion]
    if criterion == "aicc" and n - k - 1 <= 0:
        return (f"AICc undefined: n − k − 1 = {n} − {k} − 1 = {n - k - 1} ≤ 0 ({n} points, "
                f"k = {k} parameters counting the residual variance; at least {k + 2} points "
                "are needed): not eligible for selection")
    if float(fit.rss) <= 0:
        return (f"{name} is {value} (the fit passes through every one of the {n} points, "
                "RSS = 0): not eligible for selection")
    return f"{name} is not finite ({value}): not eligible for selection"


def compare(fits, *, criterion: str = "aicc", labels=None) -> pd.DataFrame:
    r"""Compare fits of the same data by information criteria.

    Parameters
    ----------
    fits : sequence of TurnoverFit or GrowthFit
        Fits of the same data (same times, values and weights).
    criterion : {"aicc", "aic", "bic"}, default="aicc"
        Criterion for ``delta``, ``weight`` and ``best``.
    labels : sequence of str, optional
        Names of the fits (default: their labels or structure).

    Returns
    -------
    DataFrame
        One row per fit, in the given order: label, structure, pools, n_params, nobs, rss,
        aic, aicc, bic, delta_aicc (Δ of the chosen criterion), weight (Akaike weight),
        best. A fit whose criterion is not finite (AICc with n − k − 1 ≤ 0, say) is not
        eligible: its Δ and weight are NaN and ``best`` False; ``attrs["not_eligible"]``
        maps its label to the reason (:func:`not_eligible_reason`), and an
        :class:`~isoturnover.IsoturnoverWarning` says so. When no fit is eligible, no row
        is ``best``.

    Raises
    ------
    DataError
        When ``fits`` is empty or holds something that is not a fit, ``criterion`` or
        ``labels`` is bad, the fits were made on different data, or they mix known and
        estimated σ.

    Notes
    -----
    With :math:`k` parameters, :math:`n` points and residual sum of squares RSS (χ² when σ
    is known), the criteria are those of the fits (``fit.aic``, ``fit.aicc``, ``fit.bic``;
    AICc = AIC + 2k(k+1)/(n−k−1), Burnham & Anderson 2002), and the Akaike weights
    :math:`w_i = e^{-\Delta_i/2} / \sum_j e^{-\Delta_j/2}` over the fits with a finite
    criterion (same source).
    """
    try:
        fits = list(fits)
    except TypeError:
        raise DataError(f"'fits' must be a sequence of fits (TurnoverFit or GrowthFit); got "
                        f"{type(fits).__name__}") from None
    if not fits:
        raise DataError("'fits' is empty: give at least one fit")
    check_choice("criterion", criterion, CRITERIA)
    if labels is not None and len(labels) != len(fits):
        raise DataError(f"'labels' has {len(labels)} names for {len(fits)} fits")
    fp = [getattr(f, "data_fingerprint", None) for f in fits]
    if any(x is None for x in fp):
        bad = [i for i, x in enumerate(fp) if x is None]
        raise DataError(f"'fits': the entries at positions {bad} are not fits (no data "
                        "fingerprint); expected TurnoverFit or GrowthFit objects")
    if len(set(fp)) > 1:
        groups = {}
        for i, x in enumerate(fp):
            groups.setdefault(x, []).append(i)
        desc = "; ".join(f"positions {v}" for v in groups.values())
        raise DataError(
            "compare() needs fits of the same data (same times, values and weights); these "
            f"were made on {len(groups)} different data sets ({desc})"
        )
    absolute = {bool(getattr(f, "absolute_sigma", False)) for f in fits}
    if len(absolute) > 1:
        raise DataError("compare() got fits with σ known (absolute_sigma=True) and fits with σ "
                        "estimated: their likelihoods are not comparable")
    rows = []
    for i, f in enumerate(fits):
        structure, pools = _describe(f)
        rows.append({
            "label": labels[i] if labels is not None else _label(f, i),
            "structure": structure, "pools": pools,
            "n_params": int(getattr(f, "n_criteria_params", f.nvarys)),
            "nobs": int(f.nobs), "rss": float(f.rss), "aic": float(f.aic),
            "aicc": float(f.aicc), "bic": float(f.bic),
        })
    df = pd.DataFrame(rows)
    crit = df[criterion].to_numpy(dtype=float)
    finite = np.isfinite(crit)
    not_eligible = {str(df.loc[i, "label"]): not_eligible_reason(f, criterion)
                    for i, f in enumerate(fits) if not finite[i]}
    if not_eligible:
        warnings.warn("compare(): " + "; ".join(f"{lab!r}: {why}" for lab, why
                                                 in not_eligible.items()),
                      IsoturnoverWarning, stacklevel=2)
    delta = np.full(crit.size, math.nan)
    weight = np.full(crit.size, math.nan)
    if finite.any():
        delta[finite] = crit[finite] - crit[finite].min()
        e = np.exp(-0.5 * delta[finite])
        weight[finite] = e / e.sum()
    df["delta_aicc" if criterion == "aicc" else f"delta_{criterion}"] = delta
    if criterion != "aicc":
        a = df["aicc"].to_numpy(dtype=float)
        df["delta_aicc"] = a - np.nanmin(a) if np.isfinite(a).any() else math.nan
    df["weight"] = weight
    best = np.zeros(crit.size, dtype=bool)
    if finite.any():
        best[int(np.nanargmin(np.where(finite, crit, np.inf)))] = True
    df["best"] = best
    df.attrs["criterion"] = criterion
    df.attrs["not_eligible"] = not_eligible
    return df


@dataclass
class LRTestResult:
    """Result of :func:`lr_test`.

    Parameters
    ----------
    statistic : float
        Observed likelihood-ratio statistic: :math:`n\\ln(\\mathrm{rss}_0/\\mathrm{rss}_1)`
        with σ estimated, :math:`\\chi^2_0 - \\chi^2_1` with σ known, where
        :math:`\\mathrm{rss}_1` is at most :math:`\\mathrm{rss}_0` (the complex model
        contains the simple one, so a larger value is an optimizer miss): never negative,
        and computed as in the replicates.
    p_value : float
        :math:`(1 + \\#\\{T^* \\ge T\\})/(1 + B)` over the B replicates that fitted.
    n_boot, n_failed : int
        Replicates asked for, and those in which a fit failed (not counted in B; reported).
    null_distribution : ndarray
        The replicate statistics.
    simple, complex : str
        Labels of the two fits.
    """

    statistic: float
    p_value: float
    n_boot: int
    n_failed: int
    null_distribution: np.ndarray = field(repr=False)
    simple: str = ""
    complex: str = ""

    @property
    def n_used(self) -> int:
        """Number of replicates that fitted (B, the size of ``null_distribution``)."""
        return int(self.null_distribution.size)

    def __str__(self):
        return (f"Bootstrap likelihood-ratio test, {self.simple} vs {self.complex}: "
                f"T = {self.statistic:.4g}, p = {self.p_value:.4g} "
                f"({self.n_used} replicates used, {self.n_failed} failed)")


def _stat(rss0, rss1, n, absolute):
    if absolute:
        return rss0 - rss1
    return n * math.log(rss0 / rss1) if rss1 > 0 else math.inf


def lr_test(simple, complex, *, n_boot: int = 199, rng=None) -> LRTestResult:
    r"""Parametric-bootstrap likelihood-ratio test of ``simple`` against ``complex``.

    Replicate data sets are drawn from the fitted simpler model with normal errors of its
    residual sd (scaled by the weights; the given σ when known), both models are refitted
    to each (automatic multi-start for the complex one), and the p-value is the share of
    replicate statistics at least as large as the observed one. See the module docstring
    for why the χ² reference does not apply between numbers of pools.

    Parameters
    ----------
    simple, complex : TurnoverFit
        Fits of the same data; ``complex`` must have more free parameters.
    n_boot : int, default=199
        Number of bootstrap replicates B (199 makes :math:`(1 + \#)/(1 + B)` a multiple of
        0.005).
    rng : int or numpy.random.Generator, optional
        Seed or generator (results are reproducible with a seed).

    Returns
    -------
    LRTestResult
        The observed statistic, the bootstrap p-value, the replicate statistics and the
        count of replicates in which a fit failed.

    Raises
    ------
    DataError
        When the fits are not of the same data (see :func:`compare`), ``complex`` does not
        have more free parameters than ``simple``, or ``n_boot`` is not a positive integer.

    Notes
    -----
    The statistic is :math:`T = n\ln(\mathrm{rss}_0/\mathrm{rss}_1)` with σ estimated and
    :math:`\chi^2_0 - \chi^2_1` with σ known (−2 log likelihood ratio of normal errors);
    the p-value :math:`(1 + \#\{T^*_b \ge T\})/(1 + B)` (Davison & Hinkley 1997,
    *Bootstrap Methods and their Application*, from memory).
    """
    with warnings.catch_warnings():
        # only the checks matter here (same data, same error model), not the criteria
        warnings.simplefilter("ignore", IsoturnoverWarning)
        compare([simple, complex])
    if complex.nvarys <= simple.nvarys:
        raise DataError(
            f"'complex' must have more free parameters than 'simple'; got {complex.nvarys} and "
            f"{simple.nvarys}"
        )
    if isinstance(n_boot, bool) or not isinstance(n_boot, (int, np.integer)) or n_boot < 1:
        raise DataError(f"'n_boot' must be a positive integer; got {n_boot!r}")
    rng = np.random.default_rng(rng)
    n = simple.nobs
    absolute = simple.absolute_sigma
    # as in the replicates: the complex model contains the simple one, so its RSS is at
    # most the simple model's (a larger value is an optimizer miss, not a negative statistic)
    t_obs = _stat(simple.rss, min(complex.rss, simple.rss), n, absolute)
    mean0 = simple.best_fit
    sd_unit = 1.0 if absolute else math.sqrt(simple.s2)
    scale = simple.sigma if simple.sigma is not None else np.ones(n)
    e0, e1 = simple.state.engine, complex.state.engine
    stats_, failed = [], 0
    for _ in range(int(n_boot)):
        ystar = mean0 + rng.normal(0.0, 1.0, n) * sd_unit * scale
        s0 = e0.with_y(ystar).quick_fit(simple.fixed, simple.state.z, multi_start=False)
        s1 = e1.with_y(ystar).quick_fit(complex.fixed, complex.state.z, multi_start=True)
        if not (np.isfinite(s0.cost) and np.isfinite(s1.cost)):
            failed += 1
            continue
        stats_.append(_stat(s0.cost, min(s1.cost, s0.cost), n, absolute))
    arr = np.asarray(stats_, dtype=float)
    p = (1 + int(np.sum(arr >= t_obs - 1e-12 * abs(t_obs)))) / (1 + arr.size)
    return LRTestResult(float(t_obs), float(p), int(n_boot), failed, arr,
                        simple=_label(simple, 0), complex=_label(complex, 1))
