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

**Bands.** ``n_boot`` replicate data sets (residual bootstrap of the weighted residuals,
rescaled by :math:`\sqrt{n/(n - \mathrm{df})}`, or parametric: Gaussian with the given sd
or the estimated residual sd) are generated from the fitted tissue curve and solved again at
the same strength; with ``kinetics_uncertainty`` each replicate also uses its own draw of
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
from scipy import linalg, optimize
from scipy.special import exprel

from .conventions import check_choice, check_level, check_positive_int, unit_word
from .errors import ConvergenceWarning, DataError, IdentifiabilityWarning
from .inputs import prepare_data
from .kinetics import TurnoverKinetics
from .resampling import BootstrapResult
from .responses import remaining_chain
from .results import TurnoverFit
from .segments import ORIGINS, formation_intervals, growth_schedule, segment_arrays

__all__ = ["reconstruct_diet", "DietReconstruction", "SegmentGeometry", "diet_operator",
           "tikhonov_gcv",
           "switch_times", "PENALTIES", "RECONSTRUCTION_STATUSES", "ILL_POSED_CONDITION",
           "SWITCH_SHARE", "ADMM_TOL", "ADMM_MAX_ITER"]

#: Regularisation penalties.
PENALTIES = ("smooth", "total_variation")
#: Status of a reconstruction: ``ok``; ``ill_posed`` (no regularisation and a condition
#: number above :data:`ILL_POSED_CONDITION`: values NaN); ``not_converged`` (ADMM stopped at
#: :data:`ADMM_MAX_ITER` for the estimate).
RECONSTRUCTION_STATUSES = ("ok", "ill_posed", "not_converged")
#: Condition number of the weighted operator above which an unregularised solve is refused.
ILL_POSED_CONDITION = 10.0
#: A switch is a change larger than this share of the largest change.
SWITCH_SHARE = 0.5
#: (absolute, relative) tolerances of the ADMM residuals (Boyd et al. 2011 §3.3.1).
ADMM_TOL = (1e-7, 1e-6)
#: Most ADMM iterations.
ADMM_MAX_ITER = 20000
_POOL_SHARE = 0.1
_N_TV_GRID = 30


# --------------------------------------------------------------------------- kinetics

@dataclass(frozen=True)
class _Kinetics:
    """Point kinetics and a way to draw from their uncertainty (arrays over draws)."""

    chain: bool
    rates: np.ndarray          # (P,)
    fractions: np.ndarray      # (P,)
    lag: float
    separation: float
    epsilon: bool
    time_unit: str | None
    source: str
    draws: object = None       # callable(rng, n) -> (rates, fractions, lag, separation)

    def arrays(self):
        return (self.rates[None], self.fractions[None], np.array([self.lag]),
                np.array([self.separation]))

    def affine(self, separation):
        """(c, m) of the separation: y = c + m (A x)."""
        sep = np.asarray(separation, dtype=float)
        if self.epsilon:
            return sep, 1.0 + sep / 1000.0
        return sep, np.ones_like(sep)


def _valid(rates, fractions, lag):
    ok = np.all(rates > 0, axis=1) & np.all(np.isfinite(rates), axis=1)
    ok &= np.all((fractions >= -1e-12) & (fractions <= 1 + 1e-12), axis=1)
    return ok & (lag >= 0)


def _from_fit(fit, separation, boot=None):
    kin = fit.kinetics
    if not isinstance(kin, TurnoverKinetics):
        raise DataError("'kinetics': the fit carries no kinetics")
    if kin.growth_kind in ("curve", "curve_params"):
        raise DataError("'kinetics': a fit with a growth curve is not supported (the dilution "
                        "W(s)/W(t) is not a function of t - s); use exponential growth or none")
    if kin.scale != "delta":
        raise DataError("'kinetics': a fit on the atom-fraction scale is not linear in the diet "
                        "δ; reconstruct from a fit with scale='delta'")
    theta = np.array(fit.state.theta, dtype=float)
    names = kin.separation_names
    notes = []
    if separation is None:
        if len(names) == 1:
            sep_index = kin.param_names.index(names[0])
        elif not names:
            sep_index = None
            notes.append("the fit has no separation parameter (its diets were not given): "
                         "the history is of the tissue-equivalent diet (diet + separation); "
                         "give separation= to correct it")
        else:
            raise DataError(f"'kinetics': the fit has {len(names)} separations "
                            f"({', '.join(names)}); give separation= (one value, ‰)")
    else:
        sep_index = None
    sep0 = theta[sep_index] if sep_index is not None else (
        0.0 if separation is None else separation)
    ri, fi = list(kin.rate_index), list(kin.fraction_index)
    li, gi = kin.lag_index, kin.growth_rate_index

    def pieces(th):
        th = np.atleast_2d(th)
        k = th[:, ri]
        if gi is not None:
            k = k + th[:, [gi]]
        f = th[:, fi] if fi else np.zeros_like(k)
        lag = th[:, li] if li is not None else np.zeros(th.shape[0])
        sep = th[:, sep_index] if sep_index is not None else np.full(th.shape[0], sep0)
        return k, f, lag, sep

    k0, f0, lag0, _ = pieces(theta)
    chain = kin.structure == "chain"
    cov = np.array(fit.covar, dtype=float)
    cov[~np.isfinite(cov)] = 0.0
    draws = None
    if boot is not None:
        rows = boot.usable
        cols = [c for c in kin.param_names]
        if rows.empty or any(c not in rows.columns for c in cols):
            raise DataError("'kinetics': the bootstrap holds no usable replicates of the "
                            "fit's parameters")
        th_all = rows[cols].to_numpy(dtype=float)

        def draws(rng, n):
            k, f, lag, sep = pieces(th_all[rng.integers(0, th_all.shape[0], n)])
            return k, _norm(f, chain), np.maximum(lag, 0.0), sep
        source = "the fit's bootstrap replicates"
    elif np.any(np.diag(cov) > 0):
        def draws(rng, n):
            return _mvn_draws(rng, n, theta, cov, pieces, chain)
        source = "the fit's parameter covariance"
    else:
        source = "the fit (no covariance)"
    return _Kinetics(chain, k0[0], f0[0] if not chain else np.zeros(2), float(lag0[0]),
                     float(sep0), kin.separation == "epsilon", fit.time_unit, source,
                     draws), notes


def _norm(f, chain):
    if chain:
        return f
    f = np.clip(f, 0.0, None)
    return f / f.sum(axis=1, keepdims=True)


def _mvn_draws(rng, n, theta, cov, pieces, chain):
    """Multivariate-normal draws of θ, invalid ones (rate ≤ 0, fraction outside [0, 1],
    negative lag) redrawn up to 50 rounds."""
    out = None
    need = n
    for _ in range(50):
        th = rng.multivariate_normal(theta, cov, size=max(2 * need, 8), method="eigh")
        k, f, lag, sep = pieces(th)
        ok = _valid(k, f if not chain else np.full_like(k, 0.5), lag)
        got = [a[ok][:need] for a in (k, f, lag, sep)]
        out = got if out is None else [np.concatenate([a, b]) for a, b in zip(out, got)]
        need = n - out[0].shape[0]
        if need <= 0:
            break
    if need > 0:
        raise DataError("'kinetics': the covariance puts almost no mass on valid rates and "
                        "fractions; the kinetics are too uncertain to draw from")
    k, f, lag, sep = out
    return k, _norm(f, chain), lag, sep


def _from_dict(spec, separation):
    known = {"rates", "fractions", "structure", "separation", "form", "lag", "stderr",
             "separation_stderr", "time_unit"}
    extra = sorted(set(spec) - known)
    if extra:
        raise DataError(f"'kinetics' has unknown key(s) {', '.join(extra)}; allowed: "
                        f"{', '.join(sorted(known))}")
    if "rates" not in spec:
        raise DataError("'kinetics' needs 'rates' (per time unit)")
    structure = check_choice("kinetics['structure']", spec.get("structure", "parallel"),
                             ("parallel", "chain"))
    form = check_choice("kinetics['form']", spec.get("form", "difference"),
                        ("difference", "epsilon"))
    k = _vector("kinetics['rates']", spec["rates"])
    if not np.all(k > 0):
        raise DataError(f"'kinetics['rates']' must be > 0; got {spec['rates']!r}")
    chain = structure == "chain"
    if chain and k.size != 2:
        raise DataError(f"'kinetics': the chain has 2 rates; got {k.size}")
    if chain and spec.get("fractions") is not None:
        raise DataError("'kinetics': 'fractions' does not apply to the chain")
    f = np.zeros(2)
    if not chain:
        fr = spec.get("fractions", [1.0] if k.size == 1 else None)
        if fr is None:
            raise DataError(f"'kinetics' needs 'fractions' with {k.size} pools")
        f = _vector("kinetics['fractions']", fr)
        if f.shape != k.shape or np.any(f < 0) or abs(f.sum() - 1) > 1e-6:
            raise DataError(f"'kinetics['fractions']' must give one fraction >= 0 per rate, "
                            f"summing to 1; got {fr!r}")
    lag = _number("kinetics['lag']", spec.get("lag", 0.0))
    if lag < 0:
        raise DataError(f"'kinetics['lag']' must be >= 0; got {lag!r}")
    sep = _number("kinetics['separation']", spec.get("separation", 0.0))
    if separation is not None:
        sep = separation
    se = None
    if spec.get("stderr") is not None:
        se = _vector("kinetics['stderr']", spec["stderr"])
        if se.shape != k.shape or np.any(se < 0):
            raise DataError(f"'kinetics['stderr']' must give one standard error >= 0 per rate; "
                            f"got {spec['stderr']!r}")
    sep_se = _number("kinetics['separation_stderr']", spec.get("separation_stderr", 0.0))
    if sep_se < 0:
        raise DataError(f"'kinetics['separation_stderr']' must be >= 0; got {sep_se!r}")
    draws = None
    source = "given rates"
    if (se is not None and np.any(se > 0)) or sep_se > 0:
        sd_log = (se if se is not None else np.zeros_like(k)) / k

        def draws(rng, n):
            kk = k * np.exp(sd_log * rng.standard_normal((n, k.size)))
            ss = sep + sep_se * rng.standard_normal(n)
            return kk, np.broadcast_to(f, (n, f.size)).copy(), np.full(n, lag), ss
        source = "given rates with standard errors (log-normal rates)"
    return _Kinetics(chain, k, f, lag, sep, form == "epsilon", spec.get("time_unit"), source,
                     draws), []


def _kinetics(kinetics, separation):
    if separation is not None:
        separation = _number("'separation'", separation)
    if isinstance(kinetics, BootstrapResult):
        if not isinstance(kinetics.fit, TurnoverFit):
            raise DataError("'kinetics': the bootstrap carries no fit")
        return _from_fit(kinetics.fit, separation, boot=kinetics)
    if isinstance(kinetics, TurnoverFit):
        return _from_fit(kinetics, separation)
    if isinstance(kinetics, dict):
        return _from_dict(kinetics, separation)
    raise DataError("'kinetics' must be a TurnoverFit, a BootstrapResult of one, or a dict "
                    f"with 'rates' (and 'fractions'); got {type(kinetics).__name__}")


def _number(what, v):
    try:
        x = float(v)
    except (TypeError, ValueError):
        raise DataError(f"{what} must be a number; got {v!r:.80}") from None
    if not math.isfinite(x):
        raise DataError(f"{what} must be finite; got {v!r:.80}")
    return x


def _vector(what, v):
    try:
        a = np.atleast_1d(np.asarray(v, dtype=float))
    except (TypeError, ValueError):
        raise DataError(f"'{what}' must be numbers; got {v!r:.80}") from None
    if a.ndim != 1 or a.size == 0 or not np.all(np.isfinite(a)):
        raise DataError(f"'{what}' must be a non-empty list of finite numbers; got {v!r:.80}")
    return a


# --------------------------------------------------------------------------- operator

def _remaining(tau, rates, fractions, chain):
    """W(τ) for draws: tau (B, n, E), rates (B, P) -> (B, n, E); 1 for τ ≤ 0."""
    tp = np.maximum(tau, 0.0)
    if chain:
        return np.stack([remaining_chain(tp[b], rates[b, 0], rates[b, 1])
                         for b in range(rates.shape[0])])
    E = np.exp(-rates[:, :, None, None] * tp[:, None])          # (B, P, n, E)
    return np.sum(fractions[:, :, None, None] * E, axis=1)


def _cumulative(tau, rates, fractions, chain=False):
    """C(τ) = ∫_0^τ W: τ for τ ≤ 0; Σ f_i (1 − e^{−k_i τ})/k_i above (parallel pools), or
    the chain's (1/a + 1/b)(1 − e^{−bτ}) − (b/a) τ e^{−bτ} ψ((a − b)τ), a ≥ b its rates
    (module docstring)."""
    tp = np.maximum(tau, 0.0)
    if chain:
        a = np.max(rates, axis=1)[:, None, None]
        b = np.min(rates, axis=1)[:, None, None]
        pos = ((1.0 / a + 1.0 / b) * -np.expm1(-b * tp)
               - (b / a) * tp * np.exp(-b * tp) * exprel(-(a - b) * tp))
        return np.where(tau > 0, pos, tau)
    k = rates[:, :, None, None]
    pos = np.einsum("bp,bpne->bne", fractions, -np.expm1(-k * tp[:, None]) / k)
    return np.where(tau > 0, pos, tau)


def _operator(starts, ends, edges, rates, fractions, lag, chain):
    """A of shape (B, n, J + 1): columns the diet before edges[0], then each interval."""
    lag = np.asarray(lag, dtype=float)
    width = ends - starts
    point = width <= 1e-12 * max(1.0, float(np.max(np.abs(edges))))
    tau_end = ends[None, :, None] - edges[None, None, :] - lag[:, None, None]
    W = _remaining(tau_end, rates, fractions, chain)
    if not np.all(point):
        tau_start = starts[None, :, None] - edges[None, None, :] - lag[:, None, None]
        wd = np.where(point, 1.0, width)[None, :, None]
        avg = (_cumulative(tau_end, rates, fractions, chain)
               - _cumulative(tau_start, rates, fractions, chain)) / wd
        W = np.where(point[None, :, None], W, avg)
    return np.concatenate([W[:, :, :1], np.diff(W, axis=2)], axis=2)


def diet_operator(windows, edges, rates, fractions=None, *, structure="parallel", lag=0.0):
    r"""The linear map from a piecewise-constant diet to the tissue's values.

    Row :math:`i` holds the weights of the diet before ``edges[0]`` and of each grid
    interval in observation :math:`i` (module docstring): :math:`W(t - e_0)` and
    :math:`W(t - e_{j+1}) - W(t - e_j)` for a point sample, the exact time average over the
    window :math:`[a, b]` for a window of positive width (parallel pools and the chain).
    Rows sum to 1, so the tissue value is :math:`c + m A x` with the separation's ``c`` and
    ``m``.

    Parameters
    ----------
    windows : array-like of shape (n,) or tuple of two such arrays
        Sampling times (point samples), or ``(start, end)`` of each observation window
        (formation interval of a segment; ``start == end`` for a point), in the kinetics'
        time unit.
    edges : array-like of shape (J + 1,)
        Grid edges, strictly increasing; every window must end at or before ``edges[-1]``.
    rates : array-like of shape (P,)
        Incorporation rates :math:`k_i` (per time unit), > 0.
    fractions : array-like of shape (P,), optional
        Pool fractions (sum 1); default one pool. Not used for the chain.
    structure : {"parallel", "chain"}
    lag : float, default=0.0
        Delay between a diet change and the tissue's response (time unit), >= 0.

    Returns
    -------
    ndarray of shape (n, J + 1)
        Dimensionless weights; column 0 the diet before the grid.

    Raises
    ------
    DataError
        For bad windows, edges, rates or fractions, or windows ending after the grid.
    """
    structure = check_choice("structure", structure, ("parallel", "chain"))
    spec = {"rates": rates, "structure": structure, "lag": lag}
    if fractions is not None:
        spec["fractions"] = fractions
    kin, _ = _from_dict(spec, None)
    starts, ends = _windows(windows)
    e = _edges(edges, ends)
    return _operator(starts, ends, e, *kin.arrays()[:3], kin.chain)[0]


def _windows(windows):
    if isinstance(windows, tuple) and len(windows) == 2:
        a = _vector("windows[0]", windows[0])
        b = _vector("windows[1]", windows[1])
        if a.shape != b.shape:
            raise DataError(f"'windows': start and end must have one value per sample; got "
                            f"{a.size} and {b.size}")
        if np.any(b < a):
            raise DataError("'windows': every window must end at or after its start")
        return a, b
    t = _vector("windows", windows)
    return t, t.copy()


def _edges(grid, ends):
    e = _vector("grid", grid)
    if e.size < 2 or np.any(np.diff(e) <= 0):
        raise DataError(f"'grid' must be at least 2 strictly increasing edges (or a number of "
                        f"intervals); got {e.size} edge(s)")
    if np.max(ends) > e[-1] + 1e-9 * max(1.0, abs(e[-1])):
        raise DataError(f"'grid' must reach the last sample: its last edge {e[-1]:g} is "
                        f"before the sample at {np.max(ends):g}")
    return e


# --------------------------------------------------------------------------- solvers

def _differences(p, order):
    return np.diff(np.eye(p), n=order, axis=0)


def tikhonov_gcv(A, b, D, strengths=None):
    r"""Generalised cross-validation of Tikhonov regularisation over many strengths.

    :math:`G(\lambda) = n\,\lVert b - A x_\lambda\rVert^2 / (n - \mathrm{tr}\,H_\lambda)^2`
    with :math:`x_\lambda = (A^TA + \lambda D^TD)^{-1}A^Tb` and
    :math:`H_\lambda = A(A^TA + \lambda D^TD)^{-1}A^T` (Golub, Heath & Wahba 1979), all
    strengths at once from the eigenproblem :math:`D^TD v = \nu (A^TA + D^TD) v` (a ridge of
    :math:`10^{-12}\,\mathrm{tr}(A^TA)/p` keeps it definite).

    Parameters
    ----------
    A : ndarray of shape (n, p)
        The (weighted) operator.
    b : ndarray of shape (n,)
        The (weighted) data.
    D : ndarray of shape (q, p)
        The penalty's difference matrix.
    strengths : array-like, optional
        Strengths :math:`\lambda \ge 0` to evaluate; default 200 values log-spaced over
        :math:`10^{-6}` to :math:`10^{6}` times :math:`\mathrm{tr}(A^TA)/\mathrm{tr}(D^TD)`.

    Returns
    -------
    dict
        ``strengths``, ``scores`` (G), ``df`` (tr H), ``rss``, ``best`` (the minimising
        strength, refined by a bounded scalar minimisation in log λ when the grid is the
        default), ``solutions`` (x for each strength, shape (L, p)).
    """
    A = np.asarray(A, dtype=float)
    b = np.asarray(b, dtype=float)
    n, p = A.shape
    M = A.T @ A
    M = M + 1e-12 * max(np.trace(M), 1e-300) / p * np.eye(p)
    P = D.T @ D
    nu, V = linalg.eigh(P, M + P)
    nu = np.clip(nu, 0.0, 1.0)
    mu = 1.0 - nu
    c = V.T @ (A.T @ b)
    AV = A @ V

    def evaluate(lam):
        lam = np.atleast_1d(np.asarray(lam, dtype=float))
        den = mu[None] + lam[:, None] * nu[None]
        coef = c[None] / den
        x = coef @ V.T
        res = b[None] - coef @ AV.T
        rss = np.sum(res * res, axis=1)
        df = np.sum(mu[None] / den, axis=1)
        return n * rss / np.maximum(n - df, 1e-12) ** 2, df, rss, x

    default = strengths is None
    if default:
        scale = np.trace(M) / max(np.trace(P), 1e-300)
        strengths = scale * np.logspace(-6, 6, 200)
    strengths = np.asarray(strengths, dtype=float)
    scores, df, rss, x = evaluate(strengths)
    i = int(np.argmin(scores))
    best = float(strengths[i])
    if default and 0 < i < strengths.size - 1:
        lo, hi = np.log(strengths[i - 1]), np.log(strengths[i + 1])
        r = optimize.minimize_scalar(lambda u: float(evaluate(np.exp(u))[0][0]),
                                     bounds=(lo, hi), method="bounded",
                                     options={"xatol": 1e-6})
        if r.fun <= scores[i]:
            best = float(np.exp(r.x))
    return {"strengths": strengths, "scores": scores, "df": df, "rss": rss, "best": best,
            "solutions": x}


def _tikhonov_batch(Aw, bw, D, lam, lo, hi):
    """x for each replicate: Aw (B, n, p) or (n, p), bw (B, n); bounded by BVLS."""
    P = lam * (D.T @ D)
    if Aw.ndim == 2:
        Aw = np.broadcast_to(Aw, (bw.shape[0],) + Aw.shape)
    if np.all(np.isinf(lo)) and np.all(np.isinf(hi)):
        K = np.einsum("bni,bnj->bij", Aw, Aw) + P[None]
        rhs = np.einsum("bni,bn->bi", Aw, bw)
        try:
            return np.linalg.solve(K, rhs[..., None])[..., 0]
        except np.linalg.LinAlgError:
            return np.stack([np.linalg.lstsq(K[i], rhs[i], rcond=None)[0]
                             for i in range(K.shape[0])])
    root = math.sqrt(lam) * D
    out = np.empty((bw.shape[0], Aw.shape[2]))
    for i in range(bw.shape[0]):  # one bounded solve per replicate
        out[i] = optimize.lsq_linear(np.vstack([Aw[i], root]),
                                     np.r_[bw[i], np.zeros(D.shape[0])],
                                     bounds=(lo, hi), method="bvls").x
    return out


def _tv_admm(Aw, bw, D, lam, lo, hi):
    """Total-variation solutions by ADMM for each replicate (module docstring).

    Aw (B, n, p) or (n, p); bw (B, n); lam (B,). Returns x (B, p) and converged (B,).
    """
    B = bw.shape[0]
    p = D.shape[1]
    shared = Aw.ndim == 2
    if shared:
        AtA = Aw.T @ Aw
        Atb = bw @ Aw
        scale = np.trace(AtA) / p
    else:
        AtA = np.einsum("bni,bnj->bij", Aw, Aw)
        Atb = np.einsum("bni,bn->bi", Aw, bw)
        scale = np.trace(AtA, axis1=1, axis2=2) / p
    # ρ = sqrt(λ · tr(AᵀA)/p): the geometric mean of the data and penalty curvatures,
    # a few hundred iterations across the whole range of λ (measured)
    lam = np.asarray(lam, dtype=float)
    rho = np.maximum(np.sqrt(lam * np.asarray(scale, dtype=float)), 1e-12)
    DtD = D.T @ D
    if shared and np.all(rho == rho[0]):
        # one matrix for every replicate: x-updates are one matrix product (BLAS)
        Kinv1 = np.linalg.inv(AtA + rho[0] * (DtD + np.eye(p)))

        def solve(v):
            return v @ Kinv1.T
    else:
        Kinv = np.linalg.inv((AtA if not shared else AtA[None])
                             + rho[:, None, None] * (DtD + np.eye(p))[None])

        def solve(v):
            return np.matmul(Kinv, v[:, :, None])[:, :, 0]
    thr = (lam / rho)[:, None]
    x = solve(Atb)
    z1 = x @ D.T
    z2 = np.clip(x, lo, hi)
    u1 = np.zeros_like(z1)
    u2 = np.zeros_like(z2)
    eps_abs, eps_rel = ADMM_TOL
    done = np.zeros(B, dtype=bool)
    r_ = rho[:, None]
    for it in range(1, ADMM_MAX_ITER + 1):
        x = solve(Atb + r_ * ((z1 - u1) @ D + z2 - u2))
        Dx = x @ D.T
        z1_old, z2_old = z1, z2
        v = Dx + u1
        z1 = np.sign(v) * np.maximum(np.abs(v) - thr, 0.0)
        z2 = np.clip(x + u2, lo, hi)
        u1 = u1 + Dx - z1
        u2 = u2 + x - z2
        if it % 10 == 0:
            r = np.sqrt(np.sum((Dx - z1) ** 2, axis=1) + np.sum((x - z2) ** 2, axis=1))
            s = rho * np.sqrt(np.sum(((z1 - z1_old) @ D + z2 - z2_old) ** 2, axis=1))
            big = np.maximum(np.sqrt(np.sum(Dx ** 2, axis=1) + np.sum(x ** 2, axis=1)),
                             np.sqrt(np.sum(z1 ** 2, axis=1) + np.sum(z2 ** 2, axis=1)))
            dual = rho * np.sqrt(np.sum((u1 @ D + u2) ** 2, axis=1))
            tol_p = math.sqrt(p + D.shape[0]) * eps_abs + eps_rel * big
            tol_d = math.sqrt(p) * eps_abs + eps_rel * np.maximum(dual, 1e-12)
            done = (r <= tol_p) & (s <= tol_d)
            if done.all():
                break
    return np.clip(x, lo, hi), done, z1


def _tv_df(z1, x, order, lo, hi):
    """Degrees of freedom of TV solutions: the number of free pieces.

    The limit of the IRLS linearisation as its floor η → 0: fused differences (the exact
    zeros of the ADMM's :math:`z_1 = Dx`) become constraints, leaving nonzero differences
    + ``order`` free directions (for first differences the constant pieces; Tibshirani &
    Taylor 2011, *Ann. Statist.* 39:1335–1371, the lasso's df for the fused case), less the
    pieces held at a bound (first differences). z1, x of shape (B, q), (B, p).
    """
    nz = z1 != 0
    df = nz.sum(axis=1) + order
    if order == 1 and (np.isfinite(lo).any() or np.isfinite(hi).any()):
        at = (x <= lo + 1e-7 * (1 + np.abs(lo))) | (x >= hi - 1e-7 * (1 + np.abs(hi)))
        group = np.concatenate([np.zeros((x.shape[0], 1), int), np.cumsum(nz, axis=1)], 1)
        for b in np.flatnonzero(at.any(axis=1)):  # few rows: those touching a bound
            g = group[b]
            stuck = np.bincount(g, weights=~at[b]) == 0   # a piece entirely at a bound
            df[b] -= int(np.sum(stuck & (np.bincount(g) > 0)))
    return df.astype(float)


def _tv_lambda_max(Aw, bw, D):
    """The smallest λ at which the TV solution lies in the null space of D (exact for
    the unconstrained problem): ‖v‖∞ with Dᵀv = Aᵀ(b − A x_0), x_0 the best fit in
    null(D)."""
    N = linalg.null_space(D)
    AN = Aw @ N
    c = np.linalg.lstsq(AN, bw, rcond=None)[0]
    r = bw - AN @ c
    v = np.linalg.lstsq(D.T, Aw.T @ r, rcond=None)[0]
    return max(float(np.max(np.abs(v))), 1e-12)


# --------------------------------------------------------------------------- switches

def switch_times(edges, values, share=SWITCH_SHARE):
    """Switch times of a reconstructed history (module docstring).

    Parameters
    ----------
    edges : array-like of shape (J + 1,)
        Grid edges (time unit).
    values : array-like of shape (J + 1,)
        The diet before the grid, then one value per interval (‰).
    share : float, default=SWITCH_SHARE
        A switch changes the diet by more than this share of the largest change.

    Returns
    -------
    ndarray
        Switch times (time unit), increasing; empty when the history is constant or NaN.
    """
    e = np.asarray(edges, dtype=float)
    v = np.asarray(values, dtype=float)
    d = np.diff(v)                      # change at edges e_0 … e_{J-1}
    at = e[:d.size]
    if not np.all(np.isfinite(d)) or not np.any(d != 0):
        return np.array([])
    big = np.max(np.abs(d))
    marked = np.abs(d) > _POOL_SHARE * big
    sign = np.sign(d)
    new_run = marked & ~np.r_[False, marked[:-1] & (sign[1:] == sign[:-1])]
    run_id = np.cumsum(new_run) - 1
    idx = np.flatnonzero(marked)
    rid = run_id[idx]
    total = np.bincount(rid, weights=d[idx])
    mass = np.bincount(rid, weights=np.abs(d[idx]))
    centre = np.bincount(rid, weights=np.abs(d[idx]) * at[idx]) / mass
    keep = np.abs(total) > share * np.max(np.abs(total))
    return centre[keep]


# --------------------------------------------------------------------------- result

@dataclass(frozen=True, eq=False)
class DietReconstruction:
    """A diet history reconstructed from a tissue record (made by :func:`reconstruct_diet`).

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
            bound, ``not_available`` without replicates, ``failed`` when NaN), then
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
                "lower_status": _statuses(lo, blo, bhi, self.n_boot),
                "upper_status": _statuses(hi, blo, bhi, self.n_boot),
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
        t = _vector("t", t)
        _edges(self.edges, t)
        kin = self.kinetics
        A = _operator(t, t, self.edges, *kin.arrays()[:3], kin.chain)[0]
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
        if self.n_boot:
            what = "data and kinetics" if self.kinetics_included else "data"
            lines.append(f"{self.level:.0%} band: {self.n_boot - self.n_failed} replicates "
                         f"resampling the {what} (kinetics: {self.kinetics_source})")
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


# --------------------------------------------------------------------------- segments

@dataclass(frozen=True, eq=False)
class SegmentGeometry:
    r"""Where the segments of a profile lie along the tissue, and when they were formed.

    Made by :func:`reconstruct_diet` from a segment profile; the formation intervals are
    :func:`isoturnover.segments.formation_intervals` of these arguments.

    Parameters
    ----------
    segment_start, segment_end : ndarray of shape (n,)
        Distances of each segment's ends from :attr:`origin` (length unit of the growth
        rate), in the order of the reconstruction's samples (by formation time).
    sample_time : ndarray of shape (n,)
        Time the tissue was sampled (time unit).
    growth_rate : float or table of (time, rate)
        Growth rate of the tissue (length per time unit).
    formation_lag : float
        Time from formation to emergence at the base (time unit).
    origin : {"base", "tip"}
        Where the distances are measured from.
    tissue_length : ndarray of shape (n,) or None
        Tissue length at sampling (with ``origin="tip"``).
    """

    segment_start: np.ndarray
    segment_end: np.ndarray
    sample_time: np.ndarray
    growth_rate: object
    formation_lag: float
    origin: str
    tissue_length: np.ndarray | None = None

    @property
    def single_sampling(self) -> bool:
        """True when every segment comes from one tissue sampled once (one sampling time
        and, from the tip, one tissue length): positions and times then map one to one."""
        one = np.ptp(self.sample_time) == 0
        if self.origin == "tip":
            one = one and np.ptp(self.tissue_length) == 0
        return bool(one)

    def _anchor(self):
        if not self.single_sampling:
            raise DataError("the profile's segments were sampled at several times (or "
                            "tissue lengths): a position along the tissue is not one time")
        sched = growth_schedule(self.growth_rate)
        top = float(sched.cumulative(self.sample_time[0] - self.formation_lag))
        length = None if self.tissue_length is None else float(self.tissue_length[0])
        return sched, top, length

    def position(self, t):
        r"""Distance from :attr:`origin` of the tissue formed at time ``t``.

        The geometry of :func:`isoturnover.segments.formation_intervals` read backwards:
        :math:`x = G(T - \ell) - G(t)` from the base, :math:`\Lambda - x` from the tip.

        Parameters
        ----------
        t : array-like
            Formation times (time unit); outside the tissue the growth law is extended.

        Returns
        -------
        ndarray
            Distances (length unit of the growth rate), shaped like ``t``.

        Raises
        ------
        DataError
            When the segments were sampled at several times (no single position axis).
        """
        sched, top, length = self._anchor()
        x = top - sched.cumulative(np.asarray(t, dtype=float))
        return x if self.origin == "base" else length - x

    def time_at(self, x):
        r"""Formation time of the tissue at distance ``x`` from :attr:`origin`.

        :math:`t = G^{-1}(G(T - \ell) - x)` (``x`` from the base; :math:`\Lambda - x` from
        the tip), the inverse of :meth:`position`.

        Parameters
        ----------
        x : array-like
            Distances (length unit of the growth rate).

        Returns
        -------
        ndarray
            Times (time unit), shaped like ``x``.

        Raises
        ------
        DataError
            When the segments were sampled at several times.
        """
        sched, top, length = self._anchor()
        x = np.asarray(x, dtype=float)
        return sched.inverse(top - (x if self.origin == "base" else length - x))

    def describe(self, time_unit="d") -> str:
        """One line: segments, where they lie, the growth rate and the lag.

        Parameters
        ----------
        time_unit : str, default="d"

        Returns
        -------
        str
        """
        g = growth_schedule(self.growth_rate).rates
        rate = (f"{g[0]:g} length units per {time_unit}" if g.size == 1
                else f"piecewise ({g.size} rows of time, rate)")
        times = ", ".join(f"{v:g}" for v in np.unique(self.sample_time))
        return (f"segment profile: {self.segment_start.size} segments from "
                f"{np.min(self.segment_start):g} to {np.max(self.segment_end):g} length units "
                f"from the {self.origin}, sampled at {times} {unit_word(time_unit)}; growth "
                f"rate {rate}, formation lag {self.formation_lag:g} {unit_word(time_unit)}")


_GEOMETRY = ("growth_rate", "segment_origin", "formation_lag", "tissue_length")


def _is_profile(data):
    return (isinstance(data, pd.DataFrame) and "segment_start" in data.columns
            and "segment_end" in data.columns
            and bool(data[["segment_start", "segment_end"]].notna().any().any()))


def _profile_data(data, kinetics, sigma, windows, geometry):
    """(t, y, sigma, windows, time unit, SegmentGeometry) of a segment profile: formation
    midpoints, values and sd sorted by formation time, the formation intervals."""
    if windows is not None:
        raise DataError("'windows' is not used with a segment profile: its windows are the "
                        "segments' formation intervals (from 'growth_rate', "
                        "'formation_lag', 'segment_origin' and 'tissue_length')")
    if sigma is not None:
        raise DataError("'sigma' goes with arrays; a segment profile's sd is its 'sd' column")
    fit = kinetics.fit if isinstance(kinetics, BootstrapResult) else kinetics
    model = fit.model if isinstance(fit, TurnoverFit) else None
    if getattr(model, "record", "points") != "segments":
        model = None
    attrs = {"growth_rate": "growth_rate", "segment_origin": "origin",
             "formation_lag": "formation_lag", "tissue_length": "tissue_length"}
    geo = {k: (getattr(model, attrs[k]) if v is None and model is not None else v)
           for k, v in geometry.items()}
    if geo["growth_rate"] is None:
        raise DataError("'growth_rate' is needed for a segment profile (the tissue's growth "
                        "rate, length per time unit: a number or a table of (time, rate)); "
                        "give growth_rate= or a segment fit (TurnoverModel(record="
                        "'segments')) as 'kinetics'")
    origin = check_choice("segment_origin", geo["segment_origin"] or "base", ORIGINS)
    lag = 0.0 if geo["formation_lag"] is None else geo["formation_lag"]
    arr = segment_arrays(data)
    t1, t2 = formation_intervals(arr["segment_start"], arr["segment_end"],
                                 arr["sample_time"], geo["growth_rate"], formation_lag=lag,
                                 origin=origin, tissue_length=geo["tissue_length"])
    d = prepare_data((t1 + t2) / 2.0, arr["y"], arr["sigma"], arr["time_unit"],
                     warn_repeats=False)
    o = np.asarray(d["order"])
    n = t1.size
    length = geo["tissue_length"]
    length = None if length is None else np.broadcast_to(
        np.asarray(length, dtype=float).ravel(), (n,))[o].copy()
    geom = SegmentGeometry(arr["segment_start"][o], arr["segment_end"][o],
                           arr["sample_time"][o], geo["growth_rate"], float(lag), origin,
                           length)
    return d["t"], d["y"], d["sigma"], (t1[o], t2[o]), d["time_unit"], geom


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
        a, b = _windows(windows)
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
        sources = (_number("'sources'[0]", sources[0]), _number("'sources'[1]", sources[1]))
        if sources[0] == sources[1]:
            raise DataError(f"'sources' must differ; got {sources!r}")
    if bounds is None:
        if sources is None:
            return (-math.inf, math.inf), None
        return (min(sources), max(sources)), sources
    if not isinstance(bounds, (tuple, list)) or len(bounds) != 2:
        raise DataError(f"'bounds' must be (lower, upper) diet values in ‰; got {bounds!r}")
    lo = -math.inf if bounds[0] is None else _number("'bounds'[0]", bounds[0])
    hi = math.inf if bounds[1] is None else _number("'bounds'[1]", bounds[1])
    if not lo < hi:
        raise DataError(f"'bounds' must have lower < upper; got {bounds!r}")
    return (lo, hi), sources


def reconstruct_diet(data, kinetics, *, grid, penalty="smooth", strength=None, bounds=None,
                     sources=None, rng=None, sigma=None, windows=None, initial=None,
                     order=None, separation=None, n_boot=200, level=0.95,
                     resample="residual", kinetics_uncertainty=True, growth_rate=None,
                     segment_origin=None, formation_lag=None, tissue_length=None):
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
    resample : {"residual", "parametric"}
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
    resample = check_choice("resample", resample, ("residual", "parametric"))
    level = check_level(level)
    if isinstance(n_boot, bool) or not isinstance(n_boot, (int, np.integer)) or n_boot < 0:
        raise DataError(f"'n_boot' must be an integer >= 0; got {n_boot!r}")
    order = (2 if penalty == "smooth" else 1) if order is None else check_positive_int(
        "order", order)
    if order > 3:
        raise DataError(f"'order' must be 1, 2 or 3; got {order!r}")
    if strength is not None:
        strength = _number("'strength'", strength)
        if strength < 0:
            raise DataError(f"'strength' must be >= 0; got {strength!r}")
    kin, notes = _kinetics(kinetics, separation)
    geometry = {"growth_rate": growth_rate, "segment_origin": segment_origin,
                "formation_lag": formation_lag, "tissue_length": tissue_length}
    profile = None
    if _is_profile(data):
        t, y, sig, (wa, wb), unit, profile = _profile_data(data, kinetics, sigma, windows,
                                                           geometry)
    else:
        given = [k for k in _GEOMETRY if geometry[k] is not None]
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
    edges = _edges(grid, wb)
    (lo_b, hi_b), sources = _box(bounds, sources)
    if initial is not None:
        initial = _number("'initial'", initial)
    if not isinstance(rng, np.random.Generator):
        rng = np.random.default_rng(0 if rng is None else rng)
    n = t.size
    has_sigma = sig is not None
    s_obs = sig if has_sigma else np.ones(n)

    A_full = _operator(wa, wb, edges, *kin.arrays()[:3], kin.chain)[0]
    c0, m0 = kin.affine(kin.separation)
    z = (y - c0) / m0
    w = np.abs(m0) / s_obs
    p_full = A_full.shape[1]
    D_full = _differences(p_full, order)
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
            (lo_b, hi_b), kin, profile)

    use_tv = penalty == "total_variation" and strength != 0
    if use_tv:
        if strength is None:
            lam_max = _tv_lambda_max(Aw, bw, D)
            lams = lam_max * np.logspace(-4, 0, _N_TV_GRID)
            xs, conv, z1 = _tv_admm(Aw, np.broadcast_to(bw, (lams.size, n)).copy(), D, lams,
                                    lo, hi)
            res = bw[None] - xs @ Aw.T
            rss = np.sum(res * res, axis=1)
            dfs = _tv_df(z1, xs, order, lo, hi)
            scores = n * rss / np.maximum(n - dfs, 1e-12) ** 2
            scores[~conv] = np.inf
            i = int(np.argmin(scores))
            strength, x_hat, df, ok = float(lams[i]), xs[i], float(dfs[i]), bool(conv[i])
            gcv = pd.DataFrame({"strength": lams, "score": scores, "df": dfs})
            rule = "gcv_linearised"
        else:
            xs, conv, z1 = _tv_admm(Aw, bw[None], D, np.array([strength]), lo, hi)
            x_hat, ok = xs[0], bool(conv[0])
            df = float(_tv_df(z1, xs, order, lo, hi)[0])
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
        x_hat = _tikhonov_batch(Aw, bw[None], D, strength, lo, hi)[0]
        K = Aw.T @ Aw + strength * (D.T @ D)
        df = float(np.trace(np.linalg.lstsq(K, Aw.T @ Aw, rcond=None)[0]))
    fitted_w = Aw @ x_hat
    resid_w = bw - fitted_w
    dof = max(n - df, 1.0)
    s_hat = float(math.sqrt(np.sum(resid_w ** 2) / dof))
    estimate = with_initial(x_hat)
    fitted = c0 + m0 * (A_full @ estimate)
    residual_sd = float(math.sqrt(np.sum((y - fitted) ** 2) / dof))

    # -- bands --------------------------------------------------------------------------
    reps = np.empty((0, p_full))
    n_failed = 0
    use_kin = bool(kinetics_uncertainty) and kin.draws is not None
    if n_boot:
        B = int(n_boot)
        if resample == "residual":
            r = (resid_w - resid_w.mean()) * math.sqrt(n / dof)
            noise = r[rng.integers(0, n, (B, n))]
        else:
            noise = (1.0 if has_sigma else s_hat) * rng.standard_normal((B, n))
        y_star = fitted[None] + noise * s_obs[None] / abs(m0)  # back on the δ scale
        if use_kin:
            kr, kf, kl, ks = kin.draws(rng, B)
            Ab = _operator(wa, wb, edges, kr, kf, kl, kin.chain)
            cb, mb = kin.affine(ks)
            Ab = Ab if initial is None else Ab[:, :, 1:]
            wb_ = np.abs(mb)[:, None] / s_obs[None]
            Awb = Ab * wb_[:, :, None]
            bwb = ((y_star - cb[:, None]) / mb[:, None] - shift) * wb_
        else:
            Awb, bwb = Aw, (((y_star - c0) / m0) - shift) * w[None]
        if use_tv:
            xb, conv, _ = _tv_admm(Awb, bwb, D, np.full(B, strength), lo, hi)
            n_failed = int(np.sum(~conv))
            xb = xb[conv]
        else:
            xb = _tikhonov_batch(Awb, bwb, D, strength, lo, hi)
        reps = with_initial(xb)
    if reps.shape[0]:
        a = (1 - level) / 2
        lower, upper = np.quantile(reps, [a, 1 - a], axis=0)
    else:
        lower = upper = np.full(p_full, np.nan)
    if n_boot and n_failed:
        warns.append(f"{n_failed} of {n_boot} replicates did not converge (left out)")
    return DietReconstruction(
        edges, estimate, lower, upper, level, penalty, order, float(strength), rule, status,
        cond, float(df), switch_times(edges, estimate), t, y,
        sig if has_sigma else np.full(n, np.nan), (wa, wb), fitted, residual_sd,
        initial is not None, sources, int(n_boot), n_failed, use_kin, kin.source, gcv,
        reps, unit, tuple(warns), (lo_b, hi_b), kin, profile)
