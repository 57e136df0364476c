"""Population estimates from per-animal estimates with interval bounds:
:func:`population_estimate` (random effects on the log scale, back-transformed; animals
without a usable interval listed with the reason and the direction of the bias).

The science, formulas and sources are in :mod:`isoturnover.population`, the public module
that re-exports this one.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .conventions import check_choice, check_level
from .errors import DataError, DataWarning
from .lazystats import stats
from .popinputs import (
    arg_label,
    check_vector,
    estimate_names,
    moderator_frame,
)
from .randomeffects import RandomEffects, random_effects

__all__ = ["PopulationEstimate", "population_estimate"]

#: Bound statuses that make an interval unusable for the standard error.
_UNUSABLE = ("open", "failed", "not_available")


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
    val = check_vector("values", values, allow_nonfinite=True)
    n = val.size
    names = estimate_names(names, values, n)
    lo = check_vector("lowers", lowers, k=n, names=names, allow_nonfinite=True)
    hi = check_vector("uppers", uppers, k=n, names=names, allow_nonfinite=True)
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
            raise DataError(f"'values' at {arg_label(names, i)} is {val[i]}; the log scale needs "
                            "values > 0 (use scale='identity')")
        if ls[i] == "fixed" or us[i] == "fixed":
            reasons.append("fixed (no interval)")
            continue
        lo_open = ls[i] in _UNUSABLE or np.isnan(lo[i]) or lo[i] == -np.inf or \
            (scale == "log" and lo[i] <= 0)
        hi_open = us[i] in _UNUSABLE or not np.isfinite(hi[i])
        if not lo_open and lo[i] > val[i]:
            raise DataError(f"'lowers' at {arg_label(names, i)} is {lo[i]}, above the value "
                            f"{val[i]}")
        if not hi_open and hi[i] < val[i]:
            raise DataError(f"'uppers' at {arg_label(names, i)} is {hi[i]}, below the value "
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
        frame = moderator_frame("moderators", moderators)
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
