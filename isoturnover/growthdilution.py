r"""Growth dilution of a fit: the part of :class:`~isoturnover.TurnoverFit` that separates
growth from catabolic turnover.

With a growth model the tissue follows :math:`d\delta_i/dt = (k_i + k_g(t))(\delta_{in} -
\delta_i)` (Hesslein, Hallard & Ramlal 1993): new tissue is laid down at the diet's value
(growth, :math:`k_g = d\ln W/dt`) and old tissue is replaced at the catabolic rate
:math:`k_i`. :class:`GrowthDilution` is a mixin that ``TurnoverFit`` inherits: mean growth
rate, growth shares (tissue and per pool), incorporation half-lives, the power-form
exponent of Fry & Arnold (1982). The numerics live below, in :mod:`isoturnover.quantities`
(the flux-based growth share) and :mod:`isoturnover.profiles` (intervals at the edge).

The mixin reads only public attributes and methods of the fit that inherits it:
``kinetics``, ``t``, ``state``, ``values``, ``time_unit``, ``method_used``, ``conf_int`` and
``derived_interval`` (the cached interval of a derived quantity). The small helpers that
``results`` shares with it (interval rows, the half-life frame, the catabolic mean residence
time) live here under public names.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from . import profiles, quantities
from .conventions import INTERVAL_COLUMNS, check_level, check_method
from .errors import DataError

__all__ = [
    "GrowthDilution",
    "finite_array",
    "interval_row",
    "half_life_frame",
]

LN2 = math.log(2.0)


def finite_array(name, value) -> np.ndarray:
    """An argument as a float array (at least 1-d) whose entries are all finite.

    Parameters
    ----------
    name : str
        The argument's name, used in the message.
    value : float or array-like
        The value given (times in the fit's time unit, fractions…).

    Returns
    -------
    ndarray
        ``value`` as floats, at least 1-d (a new array; ``value`` is not changed).

    Raises
    ------
    DataError
        When ``value`` is not numeric, or an entry is NaN or infinite (the message gives
        the first such entry and its position).
    """
    try:
        a = np.atleast_1d(np.array(value, dtype=float))
    except (TypeError, ValueError):
        text = repr(value)
        text = text if len(text) <= 60 else text[:57] + "..."
        raise DataError(f"'{name}' must be a number or an array of numbers; got "
                        f"{text}") from None
    bad = ~np.isfinite(a.ravel())
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise DataError(f"'{name}' must be finite; got {float(a.ravel()[i])!r} at position "
                        f"{i}")
    return a


def interval_row(keys, estimate, bounds, level, method, **extra) -> dict:
    """One row of an interval table: its key columns, then ``INTERVAL_COLUMNS``, then the rest.

    Parameters
    ----------
    keys : dict
        The key columns (``pool``, ``quantity``, …), first in the row.
    estimate : float
        The point estimate.
    bounds : tuple of (float, float, str, str)
        Lower, upper, lower status, upper status.
    level : float
        Confidence level.
    method : str
        Interval method used.
    **extra
        Further columns, last in the row.

    Returns
    -------
    dict
        Column name → value.
    """
    lo, hi, ls, hs = bounds
    return {**keys, **dict(zip(INTERVAL_COLUMNS, (estimate, lo, hi, level, method, ls, hs))),
            **extra}


def half_life_frame(rows) -> pd.DataFrame:
    """A half-life table from :func:`interval_row` rows, in DESIGN §6's column order.

    Parameters
    ----------
    rows : list of dict
        Rows with at least ``pool``, ``fraction``, ``rate``, ``half_life`` and the interval
        columns.

    Returns
    -------
    DataFrame
        Columns pool … upper_status first, then ``estimate`` (= half_life), then the rest.
    """
    df = pd.DataFrame(rows)
    cols = [c for c in df.columns if c != "estimate"]
    i = cols.index("upper_status") + 1
    return df[cols[:i] + ["estimate"] + cols[i:]]


class GrowthDilution:
    """Growth-dilution views of a fit (a mixin; :class:`~isoturnover.TurnoverFit` has them).

    Every method needs a fit with a growth model (``TurnoverModel(growth=...)``) and raises
    :class:`~isoturnover.errors.DataError` on one without.
    """

    def _require_growth(self, what):
        """Raise DataError unless this fit has a growth model."""
        if self.kinetics.growth_kind is None:
            raise DataError(f"{what} needs a fit with a growth model "
                            "(TurnoverModel(growth=...)); this fit has none")

    def mean_growth_rate(self) -> float:
        r"""Mean specific growth rate (d ln W/dt) from the first switch to the last sample.

        :math:`\ln(W(t_1)/W(t_0))/(t_1 - t_0)` with :math:`t_0` the first switch and
        :math:`t_1` the last sample.

        Returns
        -------
        float
            Per :attr:`time_unit`; the fitted ``k_growth`` for exponential growth.
        """
        self._require_growth("mean_growth_rate")
        t0 = float(self.kinetics.switch_times[0])
        t1 = float(self.t.max())
        if self.kinetics.growth_kind == "exponential":
            return float(self.values["k_growth"])
        return quantities.log_mass_ratio(self.kinetics, t0, t1, self.state.theta) / (t1 - t0) \
            if t1 > t0 else math.nan

    def growth_rate_curve(self, t) -> np.ndarray:
        """Specific growth rate d ln W/dt of the fitted growth model.

        Parameters
        ----------
        t : array-like
            Times (in :attr:`time_unit`).

        Returns
        -------
        ndarray
            Per :attr:`time_unit`.
        """
        self._require_growth("growth_rate_curve")
        t = finite_array("t", t).reshape(np.shape(t))
        return self.kinetics.growth_rate(t, self.state.theta)

    def growth_share_curve(self, t) -> np.ndarray:
        r"""Instantaneous share of the rate of isotopic change carried by the growth flux.

        .. math::

            \frac{k_g(t) \sum_i f_i e_i}{\sum_i f_i (k_i + k_g(t)) e_i},
            \qquad e_i = e^{-k_i (t - s)},

        with :math:`s` the first switch (plus the lag): growth's part of
        :math:`d\delta/dt` at time t (:func:`isoturnover.quantities.growth_share_instant`).
        For one pool it is :math:`k_g(t)/(k_g(t) + k_d)` (Hesslein et al. 1993). The share
        of the change accumulated up to a time is :meth:`growth_share`.

        Parameters
        ----------
        t : float or array-like
            Times (in :attr:`time_unit`).

        Returns
        -------
        ndarray
            Shares in [0, 1], one per time (flattened); NaN at or before the switch.
        """
        self._require_growth("growth_share_curve")
        return quantities.growth_share_instant(self.kinetics, finite_array("t", t).ravel(),
                                               self.state.theta)

    def growth_share(self, level=0.95, method="profile", at=None) -> pd.DataFrame:
        r"""Share of the tissue's isotopic change carried by the growth flux (intervals cached).

        The ``tissue`` row is the part of the change up to time ``at`` due to the growth
        term of :math:`d\delta_i/dt = (k_i + k_g)(\delta_{in} - \delta_i)`,

        .. math::

            \frac{\int_s^T k_g(t) \sum_i f_i (\delta_{in} - \delta_i(t))\,dt}
            {\delta(T) - \delta(s)}

        (:func:`isoturnover.quantities.growth_share_at`; :math:`s` the first switch plus
        the lag). It is the fraction of the isotopic change brought by new tissue laid down
        at the diet's value; the rest is catabolic replacement. For one pool with
        exponential growth it equals :math:`k_g/(k_g + k_d)` at every T (Hesslein,
        Hallard & Ramlal 1993). With exponential growth the ``pool_i`` rows give each
        pool's share :math:`k_g/(k_g + k_{d,i})`, which does not depend on time.

        Parameters
        ----------
        level : float, default=0.95
            Confidence level.
        method : {"profile", "asymptotic", "bootstrap", "mcmc"}, default="profile"
            Profile likelihood (logit scale), else the delta method.
        at : float, optional
            Time T (in :attr:`time_unit`); default the last sample.

        Returns
        -------
        DataFrame
            Columns quantity (``tissue``, then ``pool_i`` for exponential growth), at,
            estimate, lower, upper, level, method, lower_status, upper_status; shares are
            dimensionless, in [0, 1].
        """
        self._require_growth("growth_share")
        level = check_level(level)
        method = check_method(method)
        kin = self.kinetics
        if at is None:
            T = float(self.t.max())
        else:
            a = finite_array("at", at)
            if a.size != 1:
                raise DataError(f"'at' must be one time; got {a.size} values")
            T = float(a[0])

        def share(th):
            return quantities.growth_share_at(kin, T, th)

        items = [("tissue", T, share)]
        if kin.growth_kind == "exponential":
            for i, j in enumerate(kin.rate_index):
                def pool_share(th, j=j):
                    kg = th[kin.growth_rate_index]
                    return kg / (kg + th[j])
                items.append((f"pool_{i + 1}", math.nan, pool_share))
        rows = []
        for q, at_q, fn in items:
            est = fn(self.state.theta)
            *bounds, m = self._share_interval((q, T), fn, est, level, method)
            rows.append(interval_row({"quantity": q, "at": at_q}, est, bounds, level, m))
        return pd.DataFrame(rows)

    def _share_interval(self, key, fn, est, level, method):
        """Interval of a growth share (cached); at the edge (the catabolic rate run to 0)
        the share is 1 and its lower bound comes from the rate's upper bound."""
        kin = self.kinetics
        if np.isfinite(est) and est > 1 - 1e-9:
            k_hi = None
            if len(kin.rate_names) == 1 and method in ("profile", "asymptotic"):
                r = self.conf_int(level, method, params=[kin.rate_names[0]]).iloc[0]
                k_hi = float(r["upper"]) if r["upper_status"] == "ok" else None
            iv = profiles.share_at_edge(self.state, fn, k_hi)
            return (*iv.bounds, self.method_used(method))
        return self.derived_interval(("growth_share", *key), fn, est, level, method,
                                     scale="logit")

    def incorporation_half_lives(self, level=0.95, method="profile") -> pd.DataFrame:
        """Incorporation (growth + catabolic) half-life of each pool, ln 2/(k_d,i + k_g).

        For exponential growth k_g is the fitted ``k_growth``; for a growth curve the mean
        specific growth rate over the sampling period (:meth:`mean_growth_rate`).

        Parameters
        ----------
        level : float, default=0.95
            Confidence level.
        method : {"profile", "asymptotic", "bootstrap", "mcmc"}, default="profile"
            Profile likelihood of the derived quantity, else the delta method (log scale).

        Returns
        -------
        DataFrame
            Columns pool, fraction, rate, half_life, lower, upper, level, method,
            lower_status, upper_status, estimate (= half_life), rate_kind, time_unit.
        """
        self._require_growth("incorporation_half_lives")
        level = check_level(level)
        method = check_method(method)
        kin = self.kinetics
        g = self.mean_growth_rate() if kin.growth_kind != "exponential" else None
        rows = []
        for i, j in enumerate(kin.rate_index):
            def hl(th, j=j):
                return LN2 / (th[j] + (th[kin.growth_rate_index] if g is None else g))
            est = hl(self.state.theta)
            *bounds, m = self.derived_interval(("incorporation_half_life", i), hl, est,
                                               level, method, scale="log")
            rows.append(interval_row(
                {"pool": i + 1, "fraction": self.values.get(f"f{i + 1}", math.nan),
                 "rate": LN2 / est, "half_life": est}, est, bounds, level, m,
                rate_kind="incorporation", time_unit=self.time_unit))
        return half_life_frame(rows)

    def fry_arnold_exponent(self, level=0.95, method="profile") -> pd.DataFrame:
        r"""Exponent c of the power form of growth dilution.

        :math:`\delta = \delta_{eq} + (\delta_0 - \delta_{eq}) (W/W_0)^c` (Fry & Arnold
        1982), from an exponential-growth one-pool fit: :math:`c = -(k_g + k_d)/k_g`;
        c = −1 is pure growth dilution.

        Parameters
        ----------
        level : float, default=0.95
            Confidence level.
        method : {"profile", "asymptotic", "bootstrap", "mcmc"}, default="profile"
            Profile likelihood of −c (log scale), else the delta method.

        Returns
        -------
        DataFrame
            One row: quantity ``fry_arnold_c``, estimate, lower, upper, level, method,
            lower_status, upper_status.
        """
        kin = self.kinetics
        if kin.growth_kind != "exponential" or len(kin.rate_names) != 1:
            raise DataError("fry_arnold_exponent needs a one-pool fit with "
                            f"growth='exponential'; this fit has {kin.pools} pool(s) and "
                            f"growth={kin.growth_kind!r}")
        level = check_level(level)
        method = check_method(method)

        def minus_c(th):
            kg = th[kin.growth_rate_index]
            return (kg + th[kin.rate_index[0]]) / kg

        est = -minus_c(self.state.theta)
        lo, hi, ls, hs, m = self.derived_interval(("fry_arnold_c",), minus_c, -est, level,
                                                  method, scale="log")
        return pd.DataFrame([interval_row({"quantity": "fry_arnold_c"}, est,
                                          (-hi, -lo, hs, ls), level, m)])
