r"""Body-mass growth curves: their mathematics, known curves and fit-result containers.

Growth dilutes a tissue's old isotopic signal: new tissue laid down by growth carries the
current diet's value. To separate growth from catabolic turnover the turnover model needs the
body-mass curve :math:`W(t)` and its specific growth rate :math:`d\ln W/dt`. This module holds
:class:`GrowthCurve`, a curve with known parameter values, and the containers of fit results
(:class:`GrowthSummary`, :class:`GrowthFitSet`). The curves' mathematics (each family's ln W,
its Jacobian and its rate, used directly by the turnover model) lives in
:mod:`isoturnover.growthlaws`; :data:`CURVES`, :func:`curve_law` and
:func:`check_curve_values` are re-exported here. Fitting a curve to masses
(:func:`~isoturnover.growthfit.fit_growth`, :class:`~isoturnover.growthfit.GrowthFit`,
profile-likelihood intervals) lives in :mod:`isoturnover.growthfit`.

Curves (parameter names as in ``.params``; time ``t`` in the masses' time unit, masses in the
user's mass unit, rates ``k`` and ``b``/``W0`` in per time and mass per time):

========================  ==========================================================
``"exponential"``         :math:`W = W_0 e^{k t}`
``"linear"``              :math:`W = W_0 + b t`
``"logistic"``            :math:`W = W_\infty / (1 + e^{-k (t - t_i)})`
``"gompertz"``            :math:`W = W_\infty \exp(-e^{-k (t - t_i)})`
``"von_bertalanffy"``     :math:`W = W_\infty (1 - (1 - (W_0/W_\infty)^{1/3}) e^{-k t})^3`
``"richards"``            :math:`W = W_\infty (1 + (d - 1) e^{-k (t - t_i)})^{1/(1-d)}`
========================  ==========================================================

Error model of the fits (:func:`~isoturnover.growthfit.fit_growth`): ``scale="log"`` (the
default) fits :math:`\ln W`, multiplicative error; ``scale="natural"`` fits :math:`W`
(additive error). The curves assume nothing about the sign of the rate: mass loss is
allowed (the turnover model checks :math:`k_d + d\ln W/dt \ge 0` where it uses the curve).

Animal experiments need the approval of the local animal-care authority; this library
supports the analysis of such experiments and does not replace that approval.
"""

from __future__ import annotations

import html
import math
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from .errors import DataError
from .growthlaws import CURVES, check_curve_values, curve_law

if TYPE_CHECKING:  # annotations only; lmfit is imported where it is used
    import lmfit

__all__ = [
    "CURVES",
    "GrowthCurve",
    "GrowthFitFailure",
    "GrowthFitSet",
    "GrowthSummary",
    "check_curve_values",
    "curve_law",
]


def _t_array(t) -> tuple[np.ndarray, bool]:
    scalar = np.ndim(t) == 0
    a = np.atleast_1d(np.asarray(t, dtype=float))
    if a.ndim != 1:
        raise DataError(f"t must be a scalar or one-dimensional; got shape {a.shape}")
    return a, scalar


def _out(a, scalar):
    return float(a[0]) if scalar else a


# ---------------------------------------------------------------------------------------
# known curve
# ---------------------------------------------------------------------------------------
class GrowthCurve:
    """A growth curve with known parameter values (no fit behind it).

    Parameters
    ----------
    curve : str
        One of :data:`CURVES` (see the module docstring for the formulas).
    **params : float
        Every parameter of the curve, e.g. ``GrowthCurve("logistic", Winf=80, k=0.07,
        ti=39)``. Masses in the user's mass unit, times in the time unit.

    Raises
    ------
    DataError
        Unknown curve, unknown or missing parameters, or values that are not finite (or
        not > 0 where the family needs it).

    Examples
    --------
    >>> g = GrowthCurve("exponential", W0=10.0, k=0.02)
    >>> round(g.predict(50.0), 6), g.rate(50.0)
    (27.182818, 0.02)
    """

    def __init__(self, curve: str, **params):
        c = curve_law(curve)
        vals = check_curve_values(c, params, "params")
        missing = [p for p in c.params if p not in vals]
        if missing:
            raise DataError(
                f"curve {c.name!r} needs parameters {', '.join(c.params)}; "
                f"missing: {', '.join(missing)}"
            )
        self._curve = c
        self._values = np.array([vals[p] for p in c.params], dtype=float)

    @property
    def law(self):
        """The curve's mathematics: ``log_mass(t, v)``, ``log_jac(t, v)``, ``rate(t, v)``
        and ``params``, for models that carry the curve's parameters (turnover fits)."""
        return self._curve

    # -- basic attributes ------------------------------------------------------------
    @property
    def curve(self) -> str:
        """Name of the curve family."""
        return self._curve.name

    @property
    def param_names(self) -> list[str]:
        """Parameter names in the order of :attr:`values`."""
        return list(self._curve.params)

    @property
    def values(self) -> np.ndarray:
        """Parameter values (a copy), in the order of :attr:`param_names`."""
        return self._values.copy()

    @property
    def formula(self) -> str:
        """The curve's formula as plain text."""
        return "W(t) = " + self._curve.formula

    @property
    def label(self) -> str:
        """Short description for tables and messages: family and how it was obtained."""
        return f"{self.curve} (known curve)"

    @property
    def params(self) -> lmfit.Parameters:
        """The values as :class:`lmfit.Parameters` (all fixed, no errors)."""
        import lmfit  # on first use: lmfit imports scipy.stats and matplotlib

        p = lmfit.Parameters()
        for name, v in zip(self._curve.params, self._values, strict=True):
            p.add(name, value=float(v), vary=False)
        return p

    @classmethod
    def from_params(cls, curve: str, **params) -> GrowthCurve:
        """Same as ``GrowthCurve(curve, **params)``.

        Parameters
        ----------
        curve : str
            One of :data:`CURVES`.
        **params : float
            Every parameter of the curve.

        Returns
        -------
        GrowthCurve
        """
        return GrowthCurve(curve, **params)

    # -- evaluation ----------------------------------------------------------------------
    def predict(self, t):
        """Body mass W(t) from the curve's formula.

        Parameters
        ----------
        t : float or array-like of shape (n,)
            Times (time unit of the masses).

        Returns
        -------
        float or ndarray
            W(t) in the mass unit (a float for a scalar ``t``).
        """
        a, scalar = _t_array(t)
        return _out(self._curve.mass(a, self._values), scalar)

    def log_mass(self, t):
        """ln W(t); NaN where the curve is not positive (linear, Richards with d < 1).

        Parameters
        ----------
        t : float or array-like of shape (n,)
            Times (time unit of the masses).

        Returns
        -------
        float or ndarray
            ln W(t), W in the mass unit.
        """
        a, scalar = _t_array(t)
        return _out(np.asarray(self._curve.log_mass(a, self._values), dtype=float), scalar)

    def rate(self, t):
        r"""Specific growth rate :math:`d\ln W/dt`, from the analytic derivative.

        Parameters
        ----------
        t : float or array-like of shape (n,)
            Times (time unit of the masses).

        Returns
        -------
        float or ndarray
            :math:`d\ln W/dt` in 1/time (negative while mass is lost).
        """
        a, scalar = _t_array(t)
        return _out(np.asarray(self._curve.rate(a, self._values), dtype=float), scalar)

    def log_mass_jacobian(self, t) -> np.ndarray:
        r"""Analytic :math:`\partial \ln W(t)/\partial\theta`.

        Parameters
        ----------
        t : float or array-like of shape (n_t,)
            Times (time unit of the masses).

        Returns
        -------
        ndarray of shape (n_t, n_params)
            Columns follow :attr:`param_names` (fixed parameters included), for propagating
            parameter uncertainty into quantities built on ln W.
        """
        a, _ = _t_array(t)
        return np.asarray(self._curve.log_jac(a, self._values), dtype=float)

    def mean_rate(self, t_start, t_end) -> float:
        r"""Mean specific growth rate between two times.

        .. math:: \bar r = \frac{\ln W(t_{end}) - \ln W(t_{start})}{t_{end} - t_{start}}

        Parameters
        ----------
        t_start, t_end : float
            The two times (time unit of the masses), different and finite.

        Returns
        -------
        float
            :math:`\bar r` in 1/time.

        Raises
        ------
        DataError
            When the times are equal or not finite.
        """
        t0, t1 = float(t_start), float(t_end)
        if not (math.isfinite(t0) and math.isfinite(t1)) or t1 == t0:
            raise DataError(
                f"mean_rate needs two different finite times; got t_start={t_start!r}, "
                f"t_end={t_end!r}"
            )
        lw = self.log_mass(np.array([t0, t1]))
        return float((lw[1] - lw[0]) / (t1 - t0))

    # -- persistence ---------------------------------------------------------------------
    def to_dict(self) -> dict:
        """JSON-safe description of the curve.

        Returns
        -------
        dict
            ``type``, ``version``, ``curve`` and ``params``;
            :func:`~isoturnover.growthfit.load_growth` rebuilds the curve from it.
        """
        return {
            "type": "GrowthCurve",
            "version": 1,
            "curve": self.curve,
            "params": {n: float(v) for n, v in zip(self.param_names, self._values, strict=True)},
        }

    def __repr__(self) -> str:
        ps = ", ".join(f"{n}={v:.6g}" for n, v in zip(self.param_names, self._values, strict=True))
        return f"GrowthCurve({self.curve!r}, {ps})"


# ---------------------------------------------------------------------------------------
# result containers (filled by isoturnover.growthfit)
# ---------------------------------------------------------------------------------------
@dataclass
class GrowthSummary:
    """Printable summary of a growth fit: header, parameter table, numbered notes.

    Parameters
    ----------
    title : str
        First line.
    header : list of (str, str)
        Label and value of each header line.
    table : DataFrame
        One row per parameter.
    notes : list of str
        The fit's trust notes, numbered when printed.
    """

    title: str
    header: list
    table: pd.DataFrame
    notes: list

    @classmethod
    def of(cls, fit) -> GrowthSummary:
        """The summary of a fitted curve, read from its public attributes.

        Parameters
        ----------
        fit : GrowthFit
            A fit from :func:`~isoturnover.growthfit.fit_growth`.

        Returns
        -------
        GrowthSummary
            Header (curve and formula, scale, weights, counts, RSS, AICc, convergence), a
            table of estimates, standard errors, relative standard errors (%) and whether
            each parameter varied, and the fit's warnings as notes.
        """
        se = fit.stderr
        vals = fit.values
        vary = [fit.params[n].vary for n in fit.param_names]
        header = [
            ("Curve", f"{fit.curve}: {fit.formula}"),
            ("Scale", "ln(mass) fitted (multiplicative error)" if fit.scale == "log"
             else "mass fitted (additive error)"),
            ("Weights", "none" if fit.sigma is None
             else "relative, from sigma (residual variance estimated)"),
            ("Observations", str(fit.nobs)),
            ("Varying parameters", str(fit.nvarys)),
            ("RSS", f"{fit.rss:.6g}"),
            ("AICc", f"{fit.aicc:.6g}"),
            ("Converged", "yes" if fit.converged else "no"),
        ]
        with np.errstate(invalid="ignore", divide="ignore"):
            rel = 100.0 * se / np.abs(vals)
        table = pd.DataFrame({"parameter": fit.param_names, "estimate": vals, "stderr": se,
                              "rel_stderr_%": rel, "vary": vary})
        return cls(title=f"Growth fit: {fit.label}", header=header, table=table,
                   notes=fit.warnings)

    def __str__(self) -> str:
        width = max(len(k) for k, _ in self.header)
        lines = [self.title, "=" * len(self.title)]
        lines += [f"{k:<{width}}  {v}" for k, v in self.header]
        lines += ["", self.table.to_string(index=False, float_format=lambda x: f"{x:.6g}")]
        if self.notes:
            lines += ["", "Notes:"]
            lines += [f"[{i}] {n}" for i, n in enumerate(self.notes, start=1)]
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        esc = html.escape
        head = "".join(f"<tr><th>{esc(k)}</th><td>{esc(v)}</td></tr>" for k, v in self.header)
        parts = [
            f"<h4>{esc(self.title)}</h4>",
            f"<table>{head}</table>",
            self.table.to_html(index=False, float_format=lambda x: f"{x:.6g}"),
        ]
        if self.notes:
            parts.append("<p>Notes:</p><ol>" + "".join(f"<li>{esc(n)}</li>" for n in self.notes)
                         + "</ol>")
        return "".join(parts)

    def __repr__(self) -> str:
        return str(self)


@dataclass(frozen=True)
class GrowthFitFailure:
    """A subject whose growth fit could not be made: ``status`` is "failed", with a reason.

    Parameters
    ----------
    subject : object
        The subject's key in the masses table.
    curve : str
        Curve family that was tried.
    scale : str
        Fitting scale that was tried.
    reason : str
        The error message of the failed fit.
    status : str, default "failed"
        Always ``"failed"`` (the status column of :meth:`GrowthFitSet.table`).
    """

    subject: object
    curve: str
    scale: str
    reason: str
    status: str = "failed"


class GrowthFitSet(Mapping):
    """Growth fits by subject, from :func:`~isoturnover.growthfit.fit_growth_each`.

    ``fits[subject]`` is a :class:`~isoturnover.growthfit.GrowthFit` or a
    :class:`GrowthFitFailure`; :meth:`table` gives one row per subject and parameter.

    Parameters
    ----------
    entries : dict
        Subject → fit or failure, in the order of the masses table.
    curve : str
        Curve family of every fit.
    scale : str
        Fitting scale of every fit.
    by : str
        Name of the subject column (the first column of :meth:`table`).
    """

    def __init__(self, entries: dict, curve: str, scale: str, by):
        self._entries = dict(entries)
        self.curve = curve
        self.scale = scale
        self.by = by

    def __getitem__(self, key):
        return self._entries[key]

    def __iter__(self) -> Iterator:
        return iter(self._entries)

    def __len__(self) -> int:
        return len(self._entries)

    @property
    def failures(self) -> dict:
        """Subjects whose fit failed, with their :class:`GrowthFitFailure`."""
        return {k: v for k, v in self._entries.items() if isinstance(v, GrowthFitFailure)}

    def table(self) -> pd.DataFrame:
        """Tidy table of every subject's parameters.

        Returns
        -------
        DataFrame
            One row per subject and parameter: subject (named as ``by``), curve, scale,
            parameter, estimate, stderr, nobs, rss, aicc, status ("ok", "not converged" or
            "failed") and reason (the failure, or the fit's warnings).
        """
        names = list(curve_law(self.curve).params)
        rows = []
        for subj, e in self._entries.items():
            if isinstance(e, GrowthFitFailure):
                for name in names:
                    rows.append(dict(subject=subj, curve=e.curve, scale=e.scale, parameter=name,
                                     estimate=math.nan, stderr=math.nan, nobs=0, rss=math.nan,
                                     aicc=math.nan, status="failed", reason=e.reason))
                continue
            for name, v, s in zip(e.param_names, e.values, e.stderr, strict=True):
                rows.append(dict(subject=subj, curve=e.curve, scale=e.scale, parameter=name,
                                 estimate=float(v), stderr=float(s), nobs=e.nobs, rss=e.rss,
                                 aicc=e.aicc, status="ok" if e.converged else "not converged",
                                 reason="; ".join(e.warnings)))
        cols = ["subject", "curve", "scale", "parameter", "estimate", "stderr", "nobs", "rss",
                "aicc", "status", "reason"]
        df = pd.DataFrame(rows, columns=cols)
        if isinstance(self.by, str):
            df = df.rename(columns={"subject": self.by})
        return df

    def __repr__(self) -> str:
        return (f"<GrowthFitSet {self.curve} ({self.scale} scale): {len(self)} subjects, "
                f"{len(self.failures)} failed>")
