r"""Diet histories from tissue records: the inverse of the forward models.

The forward model (DESIGN §2) is linear in the diet. With the tissue's pools relaxing toward
the diet value plus the diet–tissue separation, a sample taken at time :math:`t` reads

.. math::

    \delta(t) = c + m \int_{-\infty}^{t} h(t - s)\, d(s)\, ds ,

:math:`d(s)` the diet, :math:`h = -dW/d\tau` the impulse response of the tissue,
:math:`W(\tau) = \sum_i f_i e^{-k_i \tau}` the remaining fraction of a step (parallel pools)
or the chain's two-step response (:func:`isoturnover.kinetics.remaining_chain`), with
:math:`W(\tau) = 1` for :math:`\tau \le 0`; a lag shifts :math:`\tau` by the lag and
exponential growth adds :math:`k_g` to every rate. The separation enters as
:math:`c = \Delta, m = 1` (difference form) or :math:`c = \varepsilon, m = 1 +
\varepsilon/1000` (ε form, since :math:`(1000 + d)(1 + \varepsilon/1000) - 1000 = d(1 +
\varepsilon/1000) + \varepsilon`).

**The operator.** For a diet constant on the grid intervals :math:`[e_j, e_{j+1})`,
:math:`j = 0 \dots J-1`, and equal to :math:`d_{-1}` before :math:`e_0` (the tissue at
equilibrium with it: the state before the grid), the integral is exact:

.. math::

    \delta(t) = c + m\Big[d_{-1} W(t - e_0) + \sum_{j} d_j \big(W(t - e_{j+1}) -
    W(t - e_j)\big)\Big] ,

so :math:`\delta = c + m A\,x` with :math:`x = (d_{-1}, d_0, \dots, d_{J-1})` and rows of
:math:`A` summing to 1 (every sample lies before :math:`e_J`). :func:`diet_operator` builds
:math:`A`, vectorised over samples, edges and (for the bands) draws of the kinetics. It takes
**observation windows** ``(start, end)``: a point sample is a zero-width window; a window of
positive width gives the time average of the tissue over it, exact through the integral
:math:`C(\tau) = \int_0^\tau W` (:math:`\tau` for :math:`\tau \le 0`): the weight of edge
:math:`e` is :math:`[C(b - e) - C(a - e)]/(b - a)`. For parallel pools
:math:`C(\tau) = \sum_i f_i (1 - e^{-k_i\tau})/k_i`; for the chain (rates :math:`a \ge b`,
:math:`W = (a e^{-b\tau} - b e^{-a\tau})/(a - b)`)

.. math::

    C(\tau) = \Big(\frac1a + \frac1b\Big)(1 - e^{-b\tau})
              - \frac ba\,\tau\,e^{-b\tau}\,\psi((a - b)\tau),\qquad
    \psi(x) = \frac{1 - e^{-x}}{x},

exact through :math:`a = b` (derivative by hand: :math:`C' = W`; ``scipy.special.exprel``).

**Segment profiles** (hair, whiskers, feathers, claws): a samples frame with
``segment_start``/``segment_end`` is mapped segment by segment to its formation interval by
:func:`isoturnover.segments.formation_intervals` (growth rate, formation lag, origin and
tissue length given, or taken from a segment fit passed as ``kinetics``) and those intervals
are the windows; the result keeps the geometry (:class:`SegmentGeometry`), so positions along
the tissue and times can be read against each other.

**Regularisation.** :math:`A` is badly conditioned (a tissue smooths the diet), so the
weighted least-squares problem is regularised:

* ``penalty="smooth"`` (Tikhonov): minimise :math:`\lVert W_\sigma(Ax - z)\rVert^2 + \lambda
  \lVert D x\rVert^2`, :math:`D` the first or second differences (``order``) of successive
  values of :math:`x` (the value before the grid included), :math:`z = (y - c)/m`. Solved
  in closed form; with ``bounds`` by bounded least squares on the stacked system
  :math:`[W_\sigma A; \sqrt\lambda D]` (``scipy.optimize.lsq_linear``, BVLS).
  **Strength** by generalised cross-validation (Golub, Heath & Wahba 1979,
  *Technometrics* 21:215–223): :math:`G(\lambda) = n\,\mathrm{RSS}(\lambda)/(n -
  \mathrm{tr}\,H(\lambda))^2`, :math:`H = A(A^TA + \lambda D^TD)^{-1}A^T`, evaluated for a
  whole grid of :math:`\lambda` at once through the symmetric-definite eigenproblem
  :math:`D^TD\,v = \nu\,(A^TA + D^TD)\,v` (scipy ``eigh``; then :math:`A^TA + \lambda D^TD`
  is diagonal in :math:`V`, :math:`\mathrm{tr}\,H = \sum_i (1-\nu_i)/(1-\nu_i+\lambda\nu_i)`),
  the grid minimum refined by a bounded scalar minimisation in :math:`\log\lambda`
  (:func:`tikhonov_gcv`). With bounds, the strength is the unconstrained GCV choice.
* ``penalty="total_variation"``: minimise :math:`\tfrac12\lVert W_\sigma(Ax - z)\rVert^2 +
  \lambda \lVert Dx\rVert_1` (``order=1``: piecewise-constant histories, sharp switches)
  under the box ``bounds``, by ADMM (Boyd et al. 2011, *Found. Trends Mach. Learn.*
  3:1–122, §6.4.1 generalised lasso; splitting :math:`z_1 = Dx` with soft thresholding and
  :math:`z_2 = x` with projection on the box), vectorised over replicates.
  **Convergence**: the primal and dual residuals below
  :math:`\sqrt{p}\,\epsilon_{abs} + \epsilon_{rel}\max(\cdot)` (Boyd et al. §3.3.1,
  :data:`ADMM_TOL`), checked every 10 iterations, at most :data:`ADMM_MAX_ITER`
  iterations; a replicate that does not converge is reported (status ``not_converged``).
  **Strength** by GCV of the IRLS-linearised problem: at the solution
  :math:`\lambda\lvert g_i\rvert` is replaced by :math:`\lambda g_i^2/(2\max(\lvert
  g_i\rvert, \eta))`, :math:`g = Dx`; as :math:`\eta \to 0` fused differences become
  constraints and the degrees of freedom are the number of free pieces, counted exactly
  from the zeros of the ADMM's :math:`z_1` (nonzero differences + ``order``, less pieces
  held at a bound; the fused lasso's df, Tibshirani & Taylor 2011, *Ann. Statist.*
  39:1335–1371). :math:`G` is evaluated on 30 values of :math:`\lambda` from
  :math:`10^{-4}\lambda_{max}` to :math:`\lambda_{max}` (above it the solution is a
  constant) and its minimum taken.

With ``strength=0`` the problem is plain weighted least squares: when the condition number
of :math:`W_\sigma A` exceeds :data:`ILL_POSED_CONDITION` (or there are fewer samples than
unknowns) the result is ``ill_posed``, its values NaN, with a warning naming the condition
number: the noise would be amplified up to that factor.

**Bands.** ``n_boot`` replicate data sets are generated from the fitted tissue curve and
solved again at the same strength. Their noise is **parametric** (Gaussian) from the data's
sd when the data carry one (an ``sd`` column, ``sigma=``, or ``analytic_sd=``, the
instrument's analytical sd of every value): ``resample="auto"``, the default. The sd is a
floor: when the residuals have at least :data:`MIN_RESIDUAL_DF` degrees of freedom
:math:`\nu` (below) and scatter more than it (:math:`s^2 = \mathrm{RSS}_w/\nu > 1` in the
weighted scale, e.g. an sd column holding only the analytic error while segments also differ
by the animal's own variation) the noise is widened by :math:`s`, never narrowed. Otherwise it is
taken from the residuals, which a weakly regularised fit leaves nearly zero (with as many
unknowns as samples GCV may choose almost no smoothing), so they are first made honest: the
**modified residuals** :math:`e_i/\sqrt{1 - 2h_{ii} + (HH^T)_{ii}}`, centred, :math:`H` the
influence matrix (Tikhonov: :math:`A(A^TA + \lambda D^TD)^{-1}A^T`, that of the unbounded
problem when bounds are active; total variation of first differences: the projection on the
free pieces; otherwise every :math:`h_{ii} = \mathrm{df}/n`, i.e. the residuals times
:math:`\sqrt{n/(n - \mathrm{df})}`), which have the errors' variance: the leverage
correction of Davison & Hinkley (1997, *Bootstrap Methods and their Application*, §6.2),
:math:`e_i/\sqrt{1 - h_{ii}}`, for a smoother that is not a projection
(:func:`isoturnover.dietsolvers.modified_residuals`). Residuals the fit follows almost
exactly (:math:`1 - 2h_{ii} + (HH^T)_{ii} < 0.01`) are left out of the pool. When the
residual degrees of freedom :math:`\nu = n - 2\,\mathrm{tr}\,H + \mathrm{tr}(HH^T)` are
below :data:`MIN_RESIDUAL_DF` the scatter of the data cannot be estimated and **no band is
given**: ``band_status="too_few_residual_df"``, the band NaN, an
:class:`~isoturnover.errors.IdentifiabilityWarning` (give the sd, a coarser grid or a larger
strength). ``resample="parametric"`` without an sd uses :math:`\sqrt{\mathrm{RSS}/\nu}`
under the same rule; ``resample="residual"`` forces the modified residuals. With
``kinetics_uncertainty`` each replicate also uses its own draw of
the kinetics (a fit's parameter covariance, multivariate normal with invalid draws redrawn;
the replicates of a ``BootstrapResult``; or independent log-normal rates and a normal
separation from given standard errors). The band is the percentile interval of the
replicates at ``level``: it carries the noise and the kinetics' uncertainty, not the bias of
the regularisation (a sharp switch is blurred by the penalty in every replicate alike).

**Switch times.** The changes between successive values (at the edges :math:`e_0 \dots
e_{J-1}`) larger than a tenth of the largest are pooled into runs of one sign (a jump the
grid splits over adjacent edges is one change), each run located at the change-weighted mean
of its edges; the switches are the runs whose total change exceeds half the largest run's
(:data:`SWITCH_SHARE`).

``sources=(a, b)`` (end-member diet values) bound the diet to :math:`[\min, \max]` unless
``bounds`` is given and report the fraction of source B, :math:`(d - a)/(b - a)`.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .conventions import check_choice, check_level, check_positive_int, unit_word
from .dietoperator import (
    as_number,
    as_vector,
    diet_operator,
    read_edges,
    read_kinetics,
    read_windows,
    window_operator,
)
from .dietprofile import GEOMETRY_ARGUMENTS, SegmentGeometry, is_profile, profile_data
from .dietsolvers import (
    ADMM_MAX_ITER,
    ADMM_TOL,
    SWITCH_SHARE,
    differences,
    modified_residuals,
    pieces_influence,
    switch_times,
    tikhonov_batch,
    tikhonov_gcv,
    tikhonov_influence,
    tv_admm,
    tv_df,
    tv_lambda_max,
)
from .errors import ConvergenceWarning, DataError, IdentifiabilityWarning
from .inputs import prepare_data

__all__ = ["reconstruct_diet", "DietReconstruction", "SegmentGeometry", "diet_operator",
           "tikhonov_gcv",
           "switch_times", "PENALTIES", "RECONSTRUCTION_STATUSES", "ILL_POSED_CONDITION",
           "SWITCH_SHARE", "ADMM_TOL", "ADMM_MAX_ITER", "BAND_STATUSES", "MIN_RESIDUAL_DF",
           "RESAMPLE"]

#: Regularisation penalties.
PENALTIES = ("smooth", "total_variation")
#: Status of a reconstruction: ``ok``; ``ill_posed`` (no regularisation and a condition
#: number above :data:`ILL_POSED_CONDITION`: values NaN); ``not_converged`` (ADMM stopped at
#: :data:`ADMM_MAX_ITER` for the estimate).
RECONSTRUCTION_STATUSES = ("ok", "ill_posed", "not_converged")
#: Status of a reconstruction's band: ``ok``; ``none`` (no replicates asked for, or no
#: estimate); ``too_few_residual_df`` (the data carry no sd and the residuals have fewer than
#: :data:`MIN_RESIDUAL_DF` degrees of freedom: their scatter, hence the band, is unknown).
BAND_STATUSES = ("ok", "none", "too_few_residual_df")
#: Fewest residual degrees of freedom from which the band's noise is taken from residuals.
MIN_RESIDUAL_DF = 5.0
#: How the band's replicate data are made: ``auto`` (parametric from the data's sd when
#: they carry one, else the residuals), ``residual``, ``parametric``.
RESAMPLE = ("auto", "residual", "parametric")
#: Condition number of the weighted operator above which an unregularised solve is refused.
ILL_POSED_CONDITION = 10.0
_N_TV_GRID = 30


# --------------------------------------------------------------------------- result

@dataclass(frozen=True, eq=False)
class DietReconstruction:
    r"""A diet history reconstructed from a tissue record (made by :func:`reconstruct_diet`).

    Parameters
    ----------
    edges : ndarray of shape (J + 1,)
        Grid edges (:attr:`time_unit`).
    estimate, lower, upper : ndarray of shape (J + 1,)
        The diet (‰) before the grid (first entry) and on each interval, and its band
        (percentile interval of the replicates at ``level``; NaN without replicates).
    level : float
    penalty : str
        ``"smooth"`` or ``"total_variation"``.
    order : int
        Order of the differences penalised.
    strength : float
        λ used (chosen or given).
    strength_rule : str
        ``"gcv"``, ``"gcv_linearised"`` (TV) or ``"given"``.
    status : str
        One of :data:`RECONSTRUCTION_STATUSES`.
    condition_number : float
        Of the weighted operator without regularisation (inf with fewer samples than
        unknowns).
    df : float
        Effective degrees of freedom of the fit (trace of the influence matrix).
    switch_times : ndarray
        Times where the diet changes (:func:`switch_times`).
    t, y, sigma : ndarray
        The data (sorted by time; sigma NaN when not given).
    windows : tuple of ndarray
        The samples' observation windows (start, end); start == end for point samples.
    fitted : ndarray
        The tissue values the reconstruction implies at the samples (‰).
    residual_sd : float
        sd of the residuals (‰; the given sigma's scale when given).
    initial_given : bool
        The diet before the grid was given (``initial=``).
    sources : tuple or None
        (a, b) end members (‰).
    n_boot : int
        Replicates asked for.
    n_failed : int
        Replicates whose ADMM did not converge (left out of the band).
    kinetics_included : bool
        The replicates drew the kinetics from their uncertainty.
    kinetics_source : str
        Where the kinetics (and their draws) came from.
    gcv : DataFrame
        The strength-choice curve (strength, score, df); empty when the strength was given.
    replicates : ndarray of shape (n_ok, J + 1)
        The replicate histories.
    time_unit : str
    warnings : tuple of str
    bounds : tuple of float
        (lower, upper) diet bounds used (‰; ±inf when open).
    kinetics : object
        The point kinetics used (for :meth:`tissue`).
    profile : SegmentGeometry or None
        The segment profile's geometry (positions along the tissue), None for a series.
    band_status : str
        One of :data:`BAND_STATUSES`: ``too_few_residual_df`` when the band was refused
        (``lower``/``upper`` NaN).
    resample : str
        How the replicate data were made: ``"parametric"`` (from the data's sd, or from the
        residual sd) or ``"residual"`` (modified residuals).
    residual_df : float
        Residual degrees of freedom :math:`\nu = n - 2\,\mathrm{tr}\,H + \mathrm{tr}(HH^T)`
        of the fit (NaN without replicates).
    noise_scale : float
        Factor (>= 1) by which the residuals widened the data's sd in a parametric band
        (module docstring); 1 otherwise.
    """

    edges: np.ndarray
    estimate: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    level: float
    penalty: str
    order: int
    strength: float
    strength_rule: str
    status: str
    condition_number: float
    df: float
    switch_times: np.ndarray
    t: np.ndarray
    y: np.ndarray
    sigma: np.ndarray
    windows: tuple
    fitted: np.ndarray
    residual_sd: float
    initial_given: bool
    sources: tuple | None
    n_boot: int
    n_failed: int
    kinetics_included: bool
    kinetics_source: str
    gcv: pd.DataFrame = field(repr=False)
    replicates: np.ndarray = field(repr=False)
    time_unit: str = "d"
    warnings: tuple = ()
    bounds: tuple = (-math.inf, math.inf)
    kinetics: object = field(repr=False, default=None)
    profile: SegmentGeometry | None = field(repr=False, default=None)
    band_status: str = "ok"
    resample: str = "parametric"
    residual_df: float = math.nan
    noise_scale: float = 1.0

    # -- views ------------------------------------------------------------------------
    def fraction_b(self):
        """Fraction of source B, :math:`(d - a)/(b - a)`, with its band.

        Returns
        -------
        tuple of ndarray
            (estimate, lower, upper), each of shape (J + 1,).

        Raises
        ------
        DataError
            Without ``sources``.
        """
        if self.sources is None:
            raise DataError("'sources' were not given: no fraction of source B")
        a, b = self.sources
        f = [(np.asarray(v) - a) / (b - a) for v in (self.estimate, self.lower, self.upper)]
        return f[0], np.fmin(f[1], f[2]), np.fmax(f[1], f[2])

    def table(self) -> pd.DataFrame:
        """One row per grid interval (the diet before the grid first), per quantity.

        Returns
        -------
        DataFrame
            Columns quantity (``diet``, and ``fraction_b`` with sources), time (start of
            the interval; -inf before the grid), end, then estimate, lower, upper, level,
            method (``"bootstrap"``), lower_status, upper_status (``ok``, ``at_bound`` at a
            bound, ``not_available`` without replicates or with the band refused
            (:attr:`band_status`), ``failed`` when NaN), then
            penalty, strength, status.
        """
        start = np.r_[-np.inf, self.edges[:-1]]
        end = self.edges.copy()
        parts = [("diet", self.estimate, self.lower, self.upper, self.bounds)]
        if self.sources is not None:
            parts.append(("fraction_b", *self.fraction_b(), (0.0, 1.0)))
        frames = []
        for name, est, lo, hi, (blo, bhi) in parts:
            frames.append(pd.DataFrame({
                "quantity": name, "time": start, "end": end, "estimate": est, "lower": lo,
                "upper": hi, "level": self.level, "method": "bootstrap",
                "lower_status": _statuses(lo, blo, bhi, self.replicates.shape[0]),
                "upper_status": _statuses(hi, blo, bhi, self.replicates.shape[0]),
                "penalty": self.penalty, "strength": self.strength, "status": self.status}))
        return pd.concat(frames, ignore_index=True)

    def samples_table(self) -> pd.DataFrame:
        """The data with the values the reconstruction implies, one row per sample.

        Returns
        -------
        DataFrame
            Columns time (the sample time, or a window's midpoint: a segment's formation
            midpoint), window_start, window_end, value, sd (NaN when not given), fitted
            (the tissue value, or the window average, the reconstructed diet implies; ‰),
            residual (value − fitted); for a segment profile first sample_time,
            segment_start and segment_end (length units from the profile's origin).
        """
        cols = {}
        if self.profile is not None:
            cols = {"sample_time": self.profile.sample_time,
                    "segment_start": self.profile.segment_start,
                    "segment_end": self.profile.segment_end}
        cols.update({"time": self.t, "window_start": self.windows[0],
                     "window_end": self.windows[1], "value": self.y, "sd": self.sigma,
                     "fitted": self.fitted, "residual": self.y - self.fitted})
        return pd.DataFrame(cols)

    def tissue(self, t):
        """The tissue values the reconstructed diet implies (point samples).

        Parameters
        ----------
        t : array-like
            Times (:attr:`time_unit`), at most the last grid edge.

        Returns
        -------
        ndarray
            δ (‰).
        """
        t = as_vector("t", t)
        read_edges(self.edges, t)
        kin = self.kinetics
        A = window_operator(t, t, self.edges, *kin.arrays()[:3], kin.chain)[0]
        c, m = kin.affine(kin.separation)
        return c + m * (A @ self.estimate)

    def summary(self) -> str:
        """Printed summary: method, strength, status, switch times, warnings.

        Returns
        -------
        str
        """
        unit = unit_word(self.time_unit)
        lines = [f"Diet history on {self.edges.size - 1} intervals from {self.edges[0]:.4g} "
                 f"to {self.edges[-1]:.4g} {unit} ({self.t.size} samples)",
                 f"penalty: {self.penalty.replace('_', ' ')} (differences of order "
                 f"{self.order}), strength {self.strength:.4g} ({self.strength_rule}), "
                 f"{self.df:.3g} effective parameters",
                 f"status: {self.status}; condition number without regularisation "
                 f"{self.condition_number:.3g}",
                 f"residual sd {self.residual_sd:.3g} ‰"]
        if self.profile is not None:
            lines.insert(1, self.profile.describe(self.time_unit) + "; formed from "
                         f"{np.min(self.windows[0]):.4g} to {np.max(self.windows[1]):.4g} "
                         f"{unit}")
        if self.switch_times.size:
            lines.append("switch times: " + ", ".join(f"{s:.4g}" for s in self.switch_times)
                         + f" {unit}")
        else:
            lines.append("switch times: none found")
        if self.band_status == "ok" and self.n_boot:
            what = "data and kinetics" if self.kinetics_included else "data"
            how = ("modified residuals" if self.resample == "residual" else
                   f"normal errors with the data's sd × {self.noise_scale:.3g}"
                   if np.any(np.isfinite(self.sigma))
                   else "normal errors with the residual sd")
            lines.append(f"{self.level:.0%} band: {self.n_boot - self.n_failed} replicates "
                         f"resampling the {what} ({how}; kinetics: {self.kinetics_source})")
        elif self.band_status == "too_few_residual_df":
            lines.append(f"band: not estimated ({self.residual_df:.3g} residual degrees of "
                         "freedom; give the data's sd for a parametric band)")
        if self.sources is not None:
            lines.append(f"sources: A = {self.sources[0]:g} ‰, B = {self.sources[1]:g} ‰ "
                         "(fraction of B in the table)")
        lines += [f"warning: {w}" for w in self.warnings]
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.summary()


def _statuses(v, lo, hi, n_boot):
    v = np.asarray(v, dtype=float)
    out = np.where(np.isnan(v), "failed", "ok").astype(object)
    tol = 1e-6 * max(1.0, abs(lo) if math.isfinite(lo) else 1.0,
                     abs(hi) if math.isfinite(hi) else 1.0)
    out[(np.abs(v - lo) <= tol) | (np.abs(v - hi) <= tol)] = "at_bound"
    if not n_boot:
        out[:] = "not_available"
    return out




# --------------------------------------------------------------------------- main

def _data(data, sigma, windows):
    if isinstance(data, pd.DataFrame):
        if windows is not None:
            raise DataError("'windows' goes with arrays (t, y); a samples frame's replicates "
                            "are averaged, so windows could not follow its rows")
        d = prepare_data(data, None, None, None)
    elif isinstance(data, (tuple, list)) and len(data) in (2, 3):
        if len(data) == 3:
            if sigma is not None:
                raise DataError("'sigma' given twice: in 'data' and as sigma=")
            sigma = data[2]
        d = prepare_data(data[0], data[1], sigma, None)
    else:
        raise DataError("'data' must be a samples frame or a tuple (t, y) or (t, y, sigma); "
                        f"got {type(data).__name__}")
    t = d["t"]
    if windows is None:
        a, b = t.copy(), t.copy()
    else:
        a, b = read_windows(windows)
        if a.size != t.size:
            raise DataError(f"'windows' must have one window per sample ({t.size}); got "
                            f"{a.size}")
        order = np.asarray(d["order"])
        a, b = a[order], b[order]
    return t, d["y"], d["sigma"], (a, b), d["time_unit"]


def _box(bounds, sources):
    if sources is not None:
        if not isinstance(sources, (tuple, list)) or len(sources) != 2:
            raise DataError(f"'sources' must be two end-member diet values (a, b) in ‰; got "
                            f"{sources!r}")
        sources = (as_number("'sources'[0]", sources[0]), as_number("'sources'[1]", sources[1]))
        if sources[0] == sources[1]:
            raise DataError(f"'sources' must differ; got {sources!r}")
    if bounds is None:
        if sources is None:
            return (-math.inf, math.inf), None
        return (min(sources), max(sources)), sources
    if not isinstance(bounds, (tuple, list)) or len(bounds) != 2:
        raise DataError(f"'bounds' must be (lower, upper) diet values in ‰; got {bounds!r}")
    lo = -math.inf if bounds[0] is None else as_number("'bounds'[0]", bounds[0])
    hi = math.inf if bounds[1] is None else as_number("'bounds'[1]", bounds[1])
    if not lo < hi:
        raise DataError(f"'bounds' must have lower < upper; got {bounds!r}")
    return (lo, hi), sources


def reconstruct_diet(data, kinetics, *, grid, penalty="smooth", strength=None, bounds=None,
                     sources=None, rng=None, sigma=None, windows=None, initial=None,
                     order=None, separation=None, n_boot=200, level=0.95,
                     resample="auto", kinetics_uncertainty=True, growth_rate=None,
                     segment_origin=None, formation_lag=None, tissue_length=None,
                     analytic_sd=None):
    r"""Reconstruct the diet history from a tissue record and known kinetics.

    Regularised least squares on the exact linear operator of the module docstring (the
    formulas, the strength rules, the ADMM and its convergence check, the bands and the
    switch-time rule are given there).

    Parameters
    ----------
    data : DataFrame or tuple
        A samples frame of one series (``time``, ``value``, optional ``sd``) or arrays
        ``(t, y)`` / ``(t, y, sigma)``: times in the kinetics' time unit, δ (‰), sd (‰).
        A samples frame with ``segment_start`` and ``segment_end`` is a **segment
        profile** of one tissue (``time`` its sampling time): each segment is mapped to its
        formation interval (:func:`isoturnover.segments.formation_intervals`) and averaged
        over it exactly; the result's times are the formation midpoints.
    kinetics : TurnoverFit, BootstrapResult or dict
        A fit (rates, fractions, lag, exponential growth, separation and parameter
        covariance), a bootstrap of one (its replicates are the kinetics' draws), or a dict
        with ``rates`` (per time unit), ``fractions``, ``structure``, ``separation`` (‰),
        ``form`` (``"difference"`` or ``"epsilon"``), ``lag``, ``stderr`` (of the rates),
        ``separation_stderr``, ``time_unit``.
    grid : int or array-like
        Grid edges (time unit, strictly increasing, the last at or after the last sample),
        or a number of equal intervals from the first to the last sample.
    penalty : {"smooth", "total_variation"}
        Tikhonov smoothness or total variation (step-like histories).
    strength : float, optional
        λ >= 0; chosen by GCV when None. 0: no regularisation (reported ``ill_posed``
        unless the operator is well conditioned).
    bounds : (float, float), optional
        Lower and upper diet values (‰), e.g. the end members; None for an open side.
    sources : (float, float), optional
        End members (a, b) (‰): the diet is bounded by them (unless ``bounds`` is given) and
        the table reports the fraction of source B.
    rng : int, Generator or None
        Seed of the bands' resampling (None: seed 0, reproducible).
    sigma : array-like or float, optional
        sd of each value (‰) with array data.
    windows : (array-like, array-like), optional
        Observation windows (start, end) of each sample (array data): segment formation
        intervals; default point samples.
    initial : float, optional
        The diet before the grid (‰), when known; estimated (and penalised with the rest)
        otherwise.
    order : int, optional
        Order of the differences: default 2 for ``"smooth"``, 1 for total variation.
    separation : float, optional
        Diet–tissue separation (‰) overriding the kinetics'.
    n_boot : int, default=200
        Replicates for the band (0: none).
    level : float, default=0.95
    resample : {"auto", "residual", "parametric"}
        How the band's replicate data are made (module docstring): ``"auto"`` parametric
        from the data's sd when they carry one, modified residuals otherwise; with the
        noise from the residuals and fewer than :data:`MIN_RESIDUAL_DF` residual degrees
        of freedom no band is given (``band_status``).
    kinetics_uncertainty : bool, default=True
        Also draw the kinetics for each replicate (when they carry an uncertainty).
    growth_rate : float or table of (time, rate), optional
        Segment profiles: the tissue's growth rate (length per time unit, constant or
        piecewise, :func:`isoturnover.segments.growth_schedule`). Taken from ``kinetics``
        when it is a segment fit (``TurnoverModel(record="segments")``) and not given;
        needed otherwise.
    segment_origin : {"base", "tip"}, optional
        Segment profiles: where the distances are measured from (default the segment fit's,
        else ``"base"``).
    formation_lag : float, optional
        Segment profiles: time from formation to emergence at the base (≥ 0; default the
        segment fit's, else 0).
    tissue_length : float, optional
        Segment profiles measured from the tip: the tissue's length at sampling (default
        the segment fit's).
    analytic_sd : float, optional
        The analytical (instrument) sd of every value (‰, > 0) for data that carry no sd:
        used as their sd (weights, and the parametric band).

    Returns
    -------
    DietReconstruction

    Raises
    ------
    DataError
        For bad data or arguments (each named), e.g. a segment profile without a growth
        rate (``'growth_rate'``), or segment arguments with data that are not a profile.
    """
    penalty = check_choice("penalty", penalty, PENALTIES)
    resample = check_choice("resample", resample, RESAMPLE)
    level = check_level(level)
    if isinstance(n_boot, bool) or not isinstance(n_boot, (int, np.integer)) or n_boot < 0:
        raise DataError(f"'n_boot' must be an integer >= 0; got {n_boot!r}")
    order = (2 if penalty == "smooth" else 1) if order is None else check_positive_int(
        "order", order)
    if order > 3:
        raise DataError(f"'order' must be 1, 2 or 3; got {order!r}")
    if strength is not None:
        strength = as_number("'strength'", strength)
        if strength < 0:
            raise DataError(f"'strength' must be >= 0; got {strength!r}")
    kin, notes = read_kinetics(kinetics, separation)
    geometry = {"growth_rate": growth_rate, "segment_origin": segment_origin,
                "formation_lag": formation_lag, "tissue_length": tissue_length}
    profile = None
    if is_profile(data):
        t, y, sig, (wa, wb), unit, profile = profile_data(data, kinetics, sigma, windows,
                                                           geometry)
    else:
        given = [k for k in GEOMETRY_ARGUMENTS if geometry[k] is not None]
        if given:
            raise DataError(f"'{given[0]}' goes with a segment profile (a samples frame with "
                            "'segment_start' and 'segment_end'); 'data' is not one")
        t, y, sig, (wa, wb), unit = _data(data, sigma, windows)
    if kin.time_unit is not None and unit is not None and kin.time_unit != unit \
            and isinstance(data, pd.DataFrame):
        raise DataError(f"'data' is in {unit!r} and 'kinetics' in {kin.time_unit!r}; give "
                        "both in one time unit")
    unit = kin.time_unit or unit or "d"
    if isinstance(grid, (int, np.integer)) and not isinstance(grid, bool):
        nint = check_positive_int("grid", grid, 2)
        grid = np.linspace(float(np.min(wa)), float(np.max(wb)), nint + 1)
    edges = read_edges(grid, wb)
    (lo_b, hi_b), sources = _box(bounds, sources)
    if initial is not None:
        initial = as_number("'initial'", initial)
    if not isinstance(rng, np.random.Generator):
        rng = np.random.default_rng(0 if rng is None else rng)
    n = t.size
    if analytic_sd is not None:
        analytic_sd = as_number("'analytic_sd'", analytic_sd)
        if analytic_sd <= 0:
            raise DataError(f"'analytic_sd' must be > 0 (‰); got {analytic_sd!r}")
        if sig is not None:
            raise DataError("'analytic_sd' is for data without an sd; these data carry one "
                            "(an 'sd' column or sigma=): give one or the other")
        sig = np.full(n, analytic_sd)
    has_sigma = sig is not None
    s_obs = sig if has_sigma else np.ones(n)

    A_full = window_operator(wa, wb, edges, *kin.arrays()[:3], kin.chain)[0]
    c0, m0 = kin.affine(kin.separation)
    z = (y - c0) / m0
    w = np.abs(m0) / s_obs
    p_full = A_full.shape[1]
    D_full = differences(p_full, order)
    if D_full.shape[0] < 1:
        raise DataError(f"'grid' has too few intervals for differences of order {order}")
    shift = 0.0 if initial is None else initial
    A = A_full if initial is None else A_full[:, 1:]
    D = D_full if initial is None else D_full[:, 1:]
    Aw = A * w[:, None]
    bw = (z - shift) * w
    lo = np.full(A.shape[1], lo_b - shift)
    hi = np.full(A.shape[1], hi_b - shift)
    if initial is not None and not lo_b <= initial <= hi_b:
        raise DataError(f"'initial' {initial:g} is outside 'bounds' ({lo_b:g}, {hi_b:g})")
    sv = np.linalg.svd(Aw, compute_uv=False)
    cond = float(sv[0] / sv[-1]) if n >= A.shape[1] and sv[-1] > 0 else math.inf
    warns = list(notes)
    status = "ok"
    gcv = pd.DataFrame({"strength": [], "score": [], "df": []})
    rule = "given"

    def with_initial(x):
        x = np.asarray(x) + shift
        return x if initial is None else np.concatenate(
            [np.full(x.shape[:-1] + (1,), initial), x], axis=-1)

    nan = np.full(p_full, np.nan)
    if strength == 0 and cond > ILL_POSED_CONDITION:
        msg = (f"the problem is ill-posed without regularisation: condition number "
               f"{cond:.3g} (> {ILL_POSED_CONDITION:g}) of the weighted operator"
               + (f", {n} samples for {A.shape[1]} unknowns" if n < A.shape[1] else "")
               + "; noise would be amplified up to that factor. Give strength=None (GCV) "
               "or a coarser grid")
        warnings.warn(msg, IdentifiabilityWarning, stacklevel=2)
        return DietReconstruction(
            edges, nan, nan.copy(), nan.copy(), level, penalty, order, 0.0, "given",
            "ill_posed", cond, math.nan, np.array([]), t, y,
            sig if has_sigma else np.full(n, np.nan), (wa, wb), np.full(n, np.nan),
            math.nan, initial is not None, sources, int(n_boot), 0, False,
            kin.source, gcv, np.empty((0, p_full)), unit, tuple(warns + [msg]),
            (lo_b, hi_b), kin, profile, "none", resample, math.nan)

    use_tv = penalty == "total_variation" and strength != 0
    if use_tv:
        if strength is None:
            lam_max = tv_lambda_max(Aw, bw, D)
            lams = lam_max * np.logspace(-4, 0, _N_TV_GRID)
            xs, conv, z1 = tv_admm(Aw, np.broadcast_to(bw, (lams.size, n)).copy(), D, lams,
                                    lo, hi)
            res = bw[None] - xs @ Aw.T
            rss = np.sum(res * res, axis=1)
            dfs = tv_df(z1, xs, order, lo, hi)
            scores = n * rss / np.maximum(n - dfs, 1e-12) ** 2
            scores[~conv] = np.inf
            i = int(np.argmin(scores))
            strength, x_hat, df, ok = float(lams[i]), xs[i], float(dfs[i]), bool(conv[i])
            z1_hat = z1[i]
            gcv = pd.DataFrame({"strength": lams, "score": scores, "df": dfs})
            rule = "gcv_linearised"
        else:
            xs, conv, z1 = tv_admm(Aw, bw[None], D, np.array([strength]), lo, hi)
            x_hat, ok, z1_hat = xs[0], bool(conv[0]), z1[0]
            df = float(tv_df(z1, xs, order, lo, hi)[0])
        if not ok:
            status = "not_converged"
            warns.append(f"ADMM did not converge in {ADMM_MAX_ITER} iterations")
            warnings.warn(warns[-1], ConvergenceWarning, stacklevel=2)
    else:
        if strength is None:
            g = tikhonov_gcv(Aw, bw, D)
            strength = g["best"]
            gcv = pd.DataFrame({"strength": g["strengths"], "score": g["scores"],
                                "df": g["df"]})
            rule = "gcv"
        x_hat = tikhonov_batch(Aw, bw[None], D, strength, lo, hi)[0]
        K = Aw.T @ Aw + strength * (D.T @ D)
        df = float(np.trace(np.linalg.lstsq(K, Aw.T @ Aw, rcond=None)[0]))
    fitted_w = Aw @ x_hat
    resid_w = bw - fitted_w
    dof = max(n - df, 1.0)
    estimate = with_initial(x_hat)
    fitted = c0 + m0 * (A_full @ estimate)
    residual_sd = float(math.sqrt(np.sum((y - fitted) ** 2) / dof))

    # -- bands --------------------------------------------------------------------------
    reps = np.empty((0, p_full))
    n_failed = 0
    use_kin = bool(kinetics_uncertainty) and kin.draws is not None
    if resample == "auto":
        resample = "parametric" if has_sigma else "residual"
    nu = math.nan
    band_status = "ok" if n_boot else "none"
    if n_boot:
        if use_tv:
            H = pieces_influence(Aw, z1_hat, x_hat, lo, hi) if order == 1 else df
        else:
            H = tikhonov_influence(Aw, D, strength)
        r_mod, nu = modified_residuals(resid_w, H)
        s_hat = float(math.sqrt(np.sum(resid_w ** 2) / max(nu, 1e-12)))
        # the data's sd is a floor: residuals with enough df that scatter more widen it
        s_par = max(1.0, s_hat) if nu >= MIN_RESIDUAL_DF else 1.0
    if n_boot and (resample == "residual" or not has_sigma):
        # the noise comes from the residuals: their variance needs enough residual df
        if nu < MIN_RESIDUAL_DF or r_mod.size < 2:
            band_status = "too_few_residual_df"
            warns.append(
                f"no band: {nu:.3g} residual degrees of freedom (n - effective parameters; "
                f"fewer than {MIN_RESIDUAL_DF:g}) leave the scatter of the data unknown, so "
                "resampling the residuals would give a band of about zero width. Give the "
                "data's sd (an 'sd' column, sigma= or analytic_sd=) for a parametric band, "
                "or a coarser grid or a larger strength")
            warnings.warn(warns[-1], IdentifiabilityWarning, stacklevel=2)
    if band_status == "ok":
        B = int(n_boot)
        if resample == "residual":
            noise = r_mod[rng.integers(0, r_mod.size, (B, n))]
        else:
            noise = (s_par if has_sigma else s_hat) * rng.standard_normal((B, n))
        y_star = fitted[None] + noise * s_obs[None]  # back on the δ scale (w = |m|/sd)
        if use_kin:
            kr, kf, kl, ks = kin.draws(rng, B)
            Ab = window_operator(wa, wb, edges, kr, kf, kl, kin.chain)
            cb, mb = kin.affine(ks)
            Ab = Ab if initial is None else Ab[:, :, 1:]
            wb_ = np.abs(mb)[:, None] / s_obs[None]
            Awb = Ab * wb_[:, :, None]
            bwb = ((y_star - cb[:, None]) / mb[:, None] - shift) * wb_
        else:
            Awb, bwb = Aw, (((y_star - c0) / m0) - shift) * w[None]
        if use_tv:
            xb, conv, _ = tv_admm(Awb, bwb, D, np.full(B, strength), lo, hi)
            n_failed = int(np.sum(~conv))
            xb = xb[conv]
        else:
            xb = tikhonov_batch(Awb, bwb, D, strength, lo, hi)
        reps = with_initial(xb)
    if reps.shape[0]:
        a = (1 - level) / 2
        lower, upper = np.quantile(reps, [a, 1 - a], axis=0)
    else:
        lower = upper = np.full(p_full, np.nan)
    if n_failed:
        warns.append(f"{n_failed} of {n_boot} replicates did not converge (left out)")
    return DietReconstruction(
        edges, estimate, lower, upper, level, penalty, order, float(strength), rule, status,
        cond, float(df), switch_times(edges, estimate), t, y,
        sig if has_sigma else np.full(n, np.nan), (wa, wb), fitted, residual_sd,
        initial is not None, sources, int(n_boot), n_failed, use_kin, kin.source, gcv,
        reps, unit, tuple(warns), (lo_b, hi_b), kin, profile, band_status, resample, nu,
        s_par if band_status == "ok" and resample == "parametric" and has_sigma else 1.0)
