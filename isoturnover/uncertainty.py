r"""Intervals for everything a fit reports: profiles of derived quantities, bootstrap,
MCMC and prediction bands (DESIGN §3 "Intervals").

Every function takes a :class:`~isoturnover.results.TurnoverFit` and leaves it unchanged.

Profile likelihood of a derived quantity
    For a smooth function :math:`q = g(\theta)` of the natural parameters (time to a
    fraction of the change, mean residence time, a ratio of half-lives, ...), the profile is

    .. math::

        \mathrm{rss}_q(c) = \min_{z:\ g(\theta(z)) = c} \sum_i w_i^2 (y_i - \hat y_i(z))^2 ,

    minimised over the optimizer's internal coordinates ``z`` (log-rates with ordered gaps,
    stick-breaking logits, levels). A value ``c`` is inside the interval when
    :math:`(\mathrm{rss}_q(c) - \mathrm{rss})/s^2 \le F_{1,n-p}(\text{level})` with the
    residual variance estimated, or :math:`\mathrm{rss}_q(c) - \mathrm{rss} \le
    \chi^2_1(\text{level})` with σ known (Venzon & Moolgavkar 1988, Appl. Stat. 37:87–94;
    Bates & Watts 1988, *Nonlinear Regression Analysis and Its Applications*, ch. 6 — from
    memory for the journal pages and chapter).
    The constraint is met exactly by eliminating one internal coordinate :math:`z_j`: for the
    others :math:`z_{-j}` a one-dimensional root solve gives :math:`z_j(z_{-j})`, and the
    implicit function theorem gives the reduced Jacobian

    .. math::

        \frac{\partial r}{\partial z_{-j}} + \frac{\partial r}{\partial z_j}
        \frac{\partial z_j}{\partial z_{-j}}, \qquad
        \frac{\partial z_j}{\partial z_{-j}} = -\frac{\partial g/\partial z_{-j}}
        {\partial g/\partial z_j},

    so scipy's trust-region least squares runs on the remaining coordinates.

Bootstrap
    Residual (modified residuals :math:`r_i/\sqrt{1-h_{ii}}`, centred; Davison & Hinkley
    1997, *Bootstrap Methods and their Application*, §6.2.3 — from memory for the section),
    parametric (normal errors) and whole-animal resampling for destructive designs;
    percentile and BCa intervals (Efron 1987, J. Am. Stat. Assoc. 82:171–185; Efron &
    Tibshirani 1993, *An Introduction to the Bootstrap*, ch. 14).

MCMC
    emcee's affine-invariant ensemble sampler (Foreman-Mackey et al. 2013, PASP
    125:306–312; Goodman & Weare 2010, Commun. Appl. Math. Comput. Sci. 5:65–80 — from
    memory for the pages) started from the converged fit.

Bands
    Delta method from the internal covariance, or percentiles of bootstrap curves.

Parallel runs use joblib. To carry a large bootstrap to a cluster, wrap the call in
joblib's Dask backend (needs ``dask.distributed``)::

    from dask.distributed import Client
    import joblib
    client = Client("scheduler-address:8786")
    with joblib.parallel_backend("dask"):
        boot = iso.uncertainty.bootstrap(fit, n=100_000, n_jobs=-1)

Results do not depend on ``n_jobs`` or the backend: every replicate has its own seed,
spawned from one :class:`numpy.random.SeedSequence`.
"""

from __future__ import annotations

import math
import sys
import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import optimize, stats

from . import quantities
from .conventions import check_choice as _choice
from .conventions import check_level as _check_level
from .conventions import check_positive_int as _positive_int
from .engine import FitState, Problem
from .errors import ConvergenceWarning, DataError
from .profiles import find_bound

try:  # optional: MCMC
    import emcee as _emcee

    HAS_EMCEE = True
except ImportError:  # pragma: no cover - depends on the environment
    _emcee = None
    HAS_EMCEE = False

try:  # optional: parallel bootstrap
    import joblib as _joblib

    HAS_JOBLIB = True
except ImportError:  # pragma: no cover - depends on the environment
    _joblib = None
    HAS_JOBLIB = False

try:  # optional: progress bars
    from tqdm.std import tqdm as _tqdm  # text bar: no ipywidgets needed in notebooks

    HAS_TQDM = True
except ImportError:  # pragma: no cover - depends on the environment
    _tqdm = None
    HAS_TQDM = False

__all__ = [
    "ProfileInterval",
    "profile_derived",
    "time_to_profile",
    "mean_residence_time_profile",
    "half_life_ratio_profile",
    "BootstrapResult",
    "bootstrap",
    "BOOTSTRAP_KINDS",
    "MCMCResult",
    "sample",
    "band",
    "HAS_EMCEE",
    "HAS_JOBLIB",
    "HAS_TQDM",
]

LN2 = math.log(2.0)
BOOTSTRAP_KINDS = ("residual", "parametric", "subjects")
INTERVAL_METHODS = ("percentile", "bca")
BAND_KINDS = ("confidence", "prediction")
BAND_METHODS = ("delta", "bootstrap")
INTERVAL_COLUMNS = ["parameter", "estimate", "stderr", "lower", "upper", "level", "method",
                    "lower_status", "upper_status"]

# A replicate whose fit runs to the edge of the parameter space (a rate to 0 or infinity, a
# pool fraction to 0, two pools' gap to the cap of the coordinate map) is a least-squares
# estimate at the boundary, not a failure. Thresholds (library rule):
_EDGE_SLOW = 1e-3      # k * (last sampling time after the switch) below this: rate -> 0
_EDGE_FAST = 30.0      # k * (first sampling time after the switch) above this: rate -> inf
_EDGE_FRACTION = 1e-6  # pool fraction below this: the pool has vanished
_EDGE_GAP = 3.99       # log-gap coordinate at the cap (4) of the coordinate map


# ----------------------------------------------------------------------------------------
# Argument checks
# ----------------------------------------------------------------------------------------
def _check_fit(fit, what, joint=False):
    state = getattr(fit, "state", None)
    if not isinstance(state, FitState):
        raise TypeError(f"{what} needs a TurnoverFit (the result of TurnoverModel.fit); got "
                        f"{type(fit).__name__}")
    if not joint and state.engine.mass_block is not None:
        raise DataError(
            f"{what} does not support joint fits yet (δ fitted with body masses, or with a "
            "fitted growth curve whose uncertainty is propagated): the second data block "
            "would not be resampled. Use profile intervals (profile_derived, "
            "fit.conf_int()), or refit with propagate_growth=False / without masses="
        )


def _design_span(fit):
    return fit.state.design_span()


def _fit_time_to(fit, p):
    """Time to a fraction p of a step change, as a function of theta, for this fit."""
    kin = fit.kinetics
    return lambda th: quantities.time_to(kin, p, th)


def _fit_mrt(fit):
    """Mean residence time as a function of theta, for this fit."""
    kin = fit.kinetics
    span = float(np.ptp(fit.t))
    return lambda th: quantities.mean_residence_time(kin, th, span)


# ----------------------------------------------------------------------------------------
# Derived quantities of a natural parameter vector
# ----------------------------------------------------------------------------------------
def _standard_quantities(fit):
    """name -> function of theta of the quantities every method reports."""
    kin = fit.kinetics
    out = {}
    for i, j in enumerate(kin.rate_index):
        out[f"half_life_{i + 1}"] = (lambda th, j=j: LN2 / th[j])
    out["time_to_95"] = _fit_time_to(fit, 0.95)
    out["mean_residence_time"] = _fit_mrt(fit)
    return out


def _natural_range(kin, name):
    if name in kin.rate_names or name.startswith(("half_life", "time_to")) \
            or name == "mean_residence_time":
        return 0.0, math.inf
    if name in kin.fraction_names:
        return 0.0, 1.0
    if name == "lag":
        return 0.0, math.inf
    return -math.inf, math.inf


# ----------------------------------------------------------------------------------------
# Profile likelihood of a derived quantity
# ----------------------------------------------------------------------------------------
@dataclass(frozen=True)
class ProfileInterval:
    """Profile-likelihood interval of one derived quantity.

    Attributes
    ----------
    quantity : str
    estimate, lower, upper : float
        Point estimate :math:`g(\\hat\\theta)` and the bounds. An ``open`` bound is the
        end of the quantity's natural range (0 or ±inf, or the range given).
    lower_status, upper_status : {"ok", "open", "at_bound", "failed", "fixed"}
        ``ok``: the profile crossed the critical value; ``open``: the data do not close
        the interval on that side (searched to the limit without crossing); ``at_bound``:
        the quantity cannot be moved further inside the model's parameter space while the
        data still accept it (the bound is the last value reached); ``failed``: the
        constrained fits failed; ``fixed``: the quantity does not depend on any free
        parameter.
    level : float
    method : str
        ``"profile"``.
    crit : float
        Critical value: :math:`F_{1,n-p}` quantile (σ estimated) or :math:`\\chi^2_1`
        quantile (σ known).
    """

    quantity: str
    estimate: float
    lower: float
    upper: float
    lower_status: str
    upper_status: str
    level: float
    method: str = "profile"
    crit: float = math.nan

    def as_dict(self) -> dict:
        return {"parameter": self.quantity, "estimate": self.estimate, "stderr": math.nan,
                "lower": self.lower, "upper": self.upper, "level": self.level,
                "method": self.method, "lower_status": self.lower_status,
                "upper_status": self.upper_status}

    def to_frame(self) -> pd.DataFrame:
        """One row with the columns of :meth:`TurnoverFit.conf_int`."""
        return pd.DataFrame([self.as_dict()], columns=INTERVAL_COLUMNS)


class _Scale:
    """Monotone increasing map between a quantity c and the search coordinate u."""

    def __init__(self, lo, hi):
        self.lo, self.hi = float(lo), float(hi)
        if math.isfinite(self.lo) and math.isfinite(self.hi):
            self.kind = "logit"
        elif math.isfinite(self.lo):
            self.kind = "log_lo"
        elif math.isfinite(self.hi):
            self.kind = "log_hi"
        else:
            self.kind = "plain"

    def to_u(self, c):
        with np.errstate(all="ignore"):
            if self.kind == "plain":
                return c
            if self.kind == "log_lo":
                return math.log(c - self.lo) if c > self.lo else math.nan
            if self.kind == "log_hi":
                return -math.log(self.hi - c) if c < self.hi else math.nan
            s = (c - self.lo) / (self.hi - self.lo)
            return math.log(s / (1 - s)) if 0 < s < 1 else math.nan

    def du_dc(self, c):
        if self.kind == "plain":
            return 1.0
        if self.kind == "log_lo":
            return 1.0 / (c - self.lo)
        if self.kind == "log_hi":
            return 1.0 / (self.hi - c)
        w = self.hi - self.lo
        s = (c - self.lo) / w
        return 1.0 / (w * s * (1 - s))

    def from_u(self, u):
        if self.kind == "plain":
            return u
        if self.kind == "log_lo":
            return self.lo + math.exp(u)
        if self.kind == "log_hi":
            return self.hi - math.exp(-u)
        return self.lo + (self.hi - self.lo) / (1 + math.exp(-u))


def _num_grad(fun, z):
    """Central differences of a scalar function of z (step 1e-6 max(1, |z_i|))."""
    g = np.empty(z.size)
    for i in range(z.size):
        h = 1e-6 * max(1.0, abs(z[i]))
        zp, zm = z.copy(), z.copy()
        zp[i] += h
        zm[i] -= h
        g[i] = (fun(zp) - fun(zm)) / (2 * h)
    return g


class _ConstrainedProblem:
    """min ||r(z)||^2 subject to u(g(theta(z))) = u_c, by elimination of coordinate j."""

    def __init__(self, fit, fn, grad, scale, j):
        self.fit = fit
        self.kin = fit.kinetics
        self.coords = fit.state.coords
        self.fn = fn
        self.grad = grad
        self.scale = scale
        self.j = j
        p = self.coords.size
        self.rest = np.array([i for i in range(p) if i != j], dtype=int)
        # the engine's residuals: weights (with a joint fit's block scale) and any extra
        # block (body masses, growth-curve prior) exactly as the fit minimised them
        prob = fit.state.engine.problem
        self.t = prob.t
        self.y = prob.y
        self.w = prob.w
        self.extra = prob.extra
        # box for the reduced problem: the coordinate map is flat beyond a log-gap of 4 and
        # logits beyond ±40 are fractions of 0 or 1 to machine precision
        lo = np.array(self.coords.lower, dtype=float)
        hi = np.full(p, np.inf)
        for c, lab in enumerate(self.coords.labels):
            if lab.startswith("log_gap"):
                lo[c], hi[c] = max(lo[c], -30.0), 4.0
            elif lab.startswith(("logit_", "stick_")):
                lo[c], hi[c] = max(lo[c], -40.0), 40.0
        self.lower, self.upper = lo, hi

    # the constraint function h(z) = u(g(theta(z))) - u_c and its gradient in z
    def _h(self, z, u_c):
        try:
            with np.errstate(all="ignore"):
                v = float(self.fn(self.coords.theta(z)))
        except (ValueError, ArithmeticError, RuntimeError):
            return math.nan
        return self.scale.to_u(v) - u_c if math.isfinite(v) else math.nan

    def _grad_h(self, z):
        if self.grad is not None:
            th, A = self.coords.theta(z, jac=True)
            with np.errstate(all="ignore"):
                v = float(self.fn(th))
                gt = np.asarray(self.grad(th), dtype=float)
                return self.scale.du_dc(v) * (gt @ A)
        return _num_grad(lambda zz: self._h(zz, 0.0), z)

    def _dh_dzj(self, z):
        j = self.j
        if self.grad is not None:
            return float(self._grad_h(z)[j])
        hstep = 1e-6 * max(1.0, abs(z[j]))
        zp, zm = z.copy(), z.copy()
        zp[j] += hstep
        zm[j] -= hstep
        return (self._h(zp, 0.0) - self._h(zm, 0.0)) / (2 * hstep)

    def root(self, z, u_c):
        """z with z_j moved so that the constraint holds, or None."""
        j = self.j
        z = np.array(z, dtype=float)
        tol = 1e-12 * max(1.0, abs(u_c))
        hx = self._h(z, u_c)
        # Newton with step control
        if math.isfinite(hx):
            for _ in range(40):
                if abs(hx) <= tol:
                    return z
                d = self._dh_dzj(z)
                if not (math.isfinite(d) and d != 0):
                    break
                step = -hx / d
                step = max(min(step, 5.0), -5.0)
                for _ in range(30):
                    zn = z.copy()
                    zn[j] += step
                    if zn[j] < self.lower[j]:
                        zn[j] = self.lower[j]
                    hn = self._h(zn, u_c)
                    if math.isfinite(hn) and abs(hn) < abs(hx):
                        break
                    step *= 0.5
                else:
                    break
                z, hx = zn, hn
            if abs(hx) <= tol:
                return z
        # bracket and bisect
        x0 = z[j]
        base = self._h(z, u_c)

        def hj(x):
            zz = z.copy()
            zz[j] = x
            return self._h(zz, u_c)

        if not math.isfinite(base):
            return None
        for direction in (1.0, -1.0):
            step = 0.1 * max(1.0, abs(x0))
            a, ha = x0, base
            for _ in range(60):
                b = a + direction * step
                if b < self.lower[j]:
                    break
                hb = hj(b)
                if not math.isfinite(hb):
                    break
                if ha * hb <= 0:
                    lo_, hi_ = (a, b) if a < b else (b, a)
                    try:
                        x = optimize.brentq(hj, lo_, hi_, xtol=1e-15, rtol=4.5e-16,
                                            maxiter=200)
                    except (ValueError, RuntimeError):
                        return None
                    zz = z.copy()
                    zz[j] = x
                    return zz
                a, ha = b, hb
                step *= 2.0
        return None

    def solve(self, c, z_start):
        """Constrained minimum at quantity value c: (cost, z, ok, reason)."""
        u_c = self.scale.to_u(c)
        z0 = self.root(z_start, u_c)
        if z0 is None:
            return math.inf, None, False, "unreachable"
        kin, t, y, w, coords, extra = self.kin, self.t, self.y, self.w, self.coords, self.extra
        n_res = t.size + (0 if extra is None else extra.size)

        def resid(zf):
            with np.errstate(all="ignore"):
                th = coords.theta(zf)
                r = w * (y - kin.evaluate(t, th))
                if extra is not None:
                    r = np.concatenate([r, extra(th)[0]])
            return r

        if self.rest.size == 0:
            r = resid(z0)
            cost = float(r @ r)
            return cost, z0, math.isfinite(cost), ""
        cache = {"z": z0.copy()}
        rest, j = self.rest, self.j

        def full(zr):
            key = zr.tobytes()
            if cache.get("key") == key:
                return cache.get("zfull")
            guess = cache["z"].copy()
            guess[rest] = zr
            zf = self.root(guess, u_c)
            cache["key"] = key
            cache["zfull"] = zf
            if zf is not None:
                cache["z"] = zf
            return zf

        def fun(zr):
            zf = full(zr)
            if zf is None:
                return np.full(n_res, np.nan)
            return resid(zf)

        def jac(zr):
            zf = full(zr)
            if zf is None:
                return np.full((n_res, rest.size), np.nan)
            with np.errstate(all="ignore"):
                th, A = coords.theta(zf, jac=True)
                _, Jm = kin.evaluate(t, th, jacobian=True)
                Jz = -(w[:, None] * (Jm @ A))
                if extra is not None:
                    Jz = np.vstack([Jz, extra(th)[1] @ A])
                gh = self._grad_h(zf)
            dzj = -gh[rest] / gh[j]
            return Jz[:, rest] + Jz[:, [j]] * dzj[None, :]

        lo, hi = self.lower[rest], self.upper[rest]
        zr0 = np.clip(z0[rest], lo, hi)
        hard = bool(np.any(np.isfinite(self.coords.lower[rest])))  # a real bound (lag >= 0)
        for _ in range(2):  # a second, polishing run when the budget ran out
            try:
                with np.errstate(all="ignore"):
                    if hard or n_res < rest.size:
                        res = optimize.least_squares(
                            fun, zr0, jac=jac, method="trf", bounds=(lo, hi), xtol=1e-12,
                            ftol=1e-12, gtol=1e-12, x_scale="jac",
                            max_nfev=100 * (rest.size + 1))
                        x, status = res.x, res.status
                    else:
                        # no real bound: MINPACK's Levenberg–Marquardt (the caps on log-gaps
                        # and logits are where the coordinate map is flat anyway)
                        x, _, _, _, ier = optimize.leastsq(
                            fun, zr0, Dfun=jac, full_output=True, xtol=1e-12, ftol=1e-12,
                            gtol=1e-12, maxfev=100 * (rest.size + 1))
                        x = np.clip(x, lo, hi)
                        status = ier if ier in (1, 2, 3, 4) else (0 if ier == 5 else -1)
            except (ValueError, np.linalg.LinAlgError, FloatingPointError):
                return math.inf, None, False, "solver"
            if status != 0:
                break
            zr0 = x
        zf = full(x)
        if zf is None:
            return math.inf, None, False, "unreachable"
        r = fun(x)
        cost = float(r @ r)
        ok = bool(status > 0) and math.isfinite(cost)
        return cost, zf, ok, "" if ok else "solver"


def profile_derived(fit, fn, level=0.95, *, name="", positive=True, grad=None, natural=None,
                    limits=None) -> ProfileInterval:
    r"""Profile-likelihood interval of a derived quantity :math:`q = g(\theta)`.

    For trial values c the weighted RSS is minimised subject to :math:`g(\theta(z)) = c`
    (constraint met exactly: one internal coordinate is eliminated by a root solve and the
    implicit function theorem gives the reduced Jacobian; see the module docstring). c is
    inside the interval when

    .. math::

        \frac{\mathrm{rss}_q(c) - \mathrm{rss}}{s^2} \le F_{1,\,n-p}(\text{level})
        \quad\text{(σ estimated)}, \qquad
        \mathrm{rss}_q(c) - \mathrm{rss} \le \chi^2_1(\text{level}) \quad\text{(σ known)},

    the same rule as the parameters' profiles (``fit.state.critical_value(level)``). Each
    bound is found by :func:`isoturnover.profiles.find_bound` (safeguarded Newton on the
    profile-t statistic, its derivative from the constraint's multiplier) on the log scale
    for positive quantities (logit for a quantity with two finite ends).

    Parameters
    ----------
    fit : TurnoverFit
        A least-squares fit (``loss="linear"``; robust fits have no RSS profile).
    fn : callable
        ``fn(theta) -> float``, a smooth function of the natural parameter vector (in the
        order of ``fit.kinetics.param_names``), e.g.
        ``lambda th: iso.quantities.time_to(fit.kinetics, 0.95, th)``.
    level : float, default=0.95
    name : str, default=""
        Label of the quantity in the result.
    positive : bool, default=True
        The quantity is positive (natural range (0, inf)): searched on the log scale and an
        open lower bound is reported as 0.
    grad : callable, optional
        ``grad(theta) -> ndarray`` of :math:`\partial g/\partial\theta`; central differences
        in the internal coordinates otherwise.
    natural : tuple (lo, hi), optional
        The quantity's natural range (overrides ``positive``); open bounds are reported as
        these ends.
    limits : tuple (lo, hi), optional
        Search limits in the quantity's units (default: a factor 1e4 either side of the
        estimate on the log scale; for unbounded quantities ±max(200 se, 100 max(|q|, 1))).
        Reaching a limit without crossing gives an ``open`` bound, reported as the natural
        end — never as the limit.

    Returns
    -------
    ProfileInterval
    """
    _check_fit(fit, "profile_derived", joint=True)
    level = _check_level(level)
    if not callable(fn):
        raise TypeError(f"'fn' must be a function of the parameter vector; got "
                        f"{type(fn).__name__}")
    if fit.loss != "linear":
        raise ValueError(f"profile intervals need a least-squares fit (loss='linear'); this fit "
                         f"used loss={fit.loss!r}: use bootstrap() instead")
    if natural is None:
        natural = (0.0, math.inf) if positive else (-math.inf, math.inf)
    try:
        lo_nat, hi_nat = (float(natural[0]), float(natural[1]))
    except (TypeError, ValueError, IndexError):
        raise ValueError(f"'natural' must be a pair (lo, hi); got {natural!r}") from None
    if not lo_nat < hi_nat:
        raise ValueError(f"'natural' must have lo < hi; got {natural!r}")
    theta = fit.state.theta
    with np.errstate(all="ignore"):
        est = float(fn(theta))
    if not math.isfinite(est):
        raise ValueError(f"'fn' is not finite at the fitted parameters (got {est!r})")
    if not lo_nat < est < hi_nat:
        raise ValueError(f"the quantity's estimate {est!r} is outside its natural range "
                         f"({lo_nat:g}, {hi_nat:g}); pass positive=False or natural=(lo, hi)")
    scale = _Scale(lo_nat, hi_nat)
    crit = fit.state.critical_value(level)

    def result(lo, hi, ls, hs):
        return ProfileInterval(name, est, lo, hi, ls, hs, level, "profile", crit)

    coords = fit.state.coords
    p = coords.size
    if p == 0:
        return result(est, est, "fixed", "fixed")
    s2 = 1.0 if fit.absolute_sigma else fit.s2
    if not (math.isfinite(s2) and s2 > 0):
        return result(math.nan, math.nan, "failed", "failed")
    rss0 = fit.rss
    z_hat = np.array(fit.state.z, dtype=float)

    # sensitivity of u = scale(g) to each coordinate, at the estimate
    def h0(z):
        with np.errstate(all="ignore"):
            v = float(fn(coords.theta(z)))
        return scale.to_u(v)

    if grad is not None:
        th, A = coords.theta(z_hat, jac=True)
        gz = scale.du_dc(est) * (np.asarray(grad(th), dtype=float) @ A)
    else:
        gz = _num_grad(h0, z_hat)
    if not np.all(np.isfinite(gz)):
        return result(math.nan, math.nan, "failed", "failed")
    if np.max(np.abs(gz)) == 0:
        return result(est, est, "fixed", "fixed")
    cov = fit.state.cov_z0  # coordinates the data ignore: zero
    sd = np.sqrt(np.diag(cov)) if fit.state.cov_ok else np.ones(p)
    sens = np.abs(gz) * np.where(np.isfinite(sd) & (sd > 0), sd, 1.0)
    sens[np.isfinite(coords.lower)] *= 1e-6  # avoid eliminating a bounded coordinate (lag)
    # nor a coordinate run off to its far end (a log-rate of ~-700: a rate of ~0 can move
    # the quantity one way only)
    sens[np.abs(z_hat) > 300] *= 1e-12
    j = int(np.argmax(sens))
    prob = _ConstrainedProblem(fit, fn, grad, scale, j)

    u_hat = scale.to_u(est)
    se_u = math.sqrt(float(gz @ cov @ gz)) if fit.state.cov_ok else math.nan
    if not (math.isfinite(se_u) and se_u > 0):
        se_u = 0.1 if scale.kind != "plain" else 0.1 * max(abs(est), 1.0)
    se_u = min(max(se_u, 1e-6 * max(1.0, abs(u_hat))), 1e3)
    # search limits in u
    if limits is not None:
        try:
            ul = (scale.to_u(float(limits[0])), scale.to_u(float(limits[1])))
        except (TypeError, ValueError, IndexError):
            raise ValueError(f"'limits' must be a pair (lo, hi); got {limits!r}") from None
        if not (math.isfinite(ul[0]) and math.isfinite(ul[1]) and ul[0] < u_hat < ul[1]):
            raise ValueError(f"'limits' must lie inside the natural range and around the "
                             f"estimate {est:g}; got {limits!r}")
    elif scale.kind == "plain":
        width = max(200 * se_u, 100 * max(abs(est), 1.0))
        ul = (u_hat - width, u_hat + width)
    elif scale.kind == "logit":
        ul = (min(-35.0, u_hat - 5), max(35.0, u_hat + 5))
    else:
        ul = (u_hat - math.log(1e4), u_hat + math.log(1e4))

    # predictor direction dz/du at the estimate: the constrained minimum of the quadratic
    # approximation moves along C g / (g^T C g)
    if fit.state.cov_ok and float(gz @ cov @ gz) > 0:
        dz_du0 = (cov @ gz) / float(gz @ cov @ gz)
    else:
        dz_du0 = np.zeros(p)
    def D(u, z_from, dz_du, u_from):
        """Scaled ΔRSS at u; starts from the predictor and, when that fails, from the plain
        previous point (a refit above the cut that sits in another basin is re-verified by
        the bound finder from a nearby inside point)."""
        c = scale.from_u(u)
        z_pred = z_from + dz_du * (u - u_from)
        cost, z, ok, reason = prob.solve(c, z_pred)
        if not ok:
            cost2, z2, ok2, reason2 = prob.solve(c, z_from)
            if ok2 and (not ok or cost2 < cost):
                cost, z, ok, reason = cost2, z2, ok2, reason2
        return (cost - rss0) / s2, z, ok, reason

    engine_problem = fit.state.engine.problem
    bounds = []
    for direction in (-1, 1):
        limit = ul[0] if direction < 0 else ul[1]
        warm = {"u": u_hat, "z": z_hat, "dz": dz_du0}

        def evaluate(u, warm=warm):
            d, z, ok, reason = D(u, warm["z"], warm["dz"], warm["u"])
            if not ok or not math.isfinite(d):
                return math.nan, math.nan, False, reason
            if d <= crit:
                # warm starts (and the predictor) from inside the interval only: a refit
                # outside may sit in another basin
                if u != warm["u"]:
                    warm["dz"] = (z - warm["z"]) / (u - warm["u"])
                warm["u"], warm["z"] = u, z
            # envelope theorem: d rss/du is the constraint's multiplier, the component of
            # the rss gradient 2 J^T r along the constraint's gradient
            slope = math.nan
            with np.errstate(all="ignore"):
                r, J = engine_problem.evaluate(coords, z)
                gh = prob._grad_h(z)
            gg = float(gh @ gh)
            if gg > 0 and np.all(np.isfinite(gh)):
                slope = 2.0 * float((J.T @ r) @ gh) / gg / s2
            return d, slope, True, reason

        step = math.sqrt(crit) * se_u
        if scale.kind != "plain":
            step = min(step, 1.0)  # at most a factor e (or one logit unit) at first
        res = find_bound(evaluate, u_hat, direction, step, limit, crit, max_refits=80)
        status = res.status
        bound = scale.from_u(res.u) if status in ("ok", "at_bound") else math.nan
        if status == "open":
            bound = lo_nat if direction < 0 else hi_nat
        bounds.append((bound, status))
    return result(bounds[0][0], bounds[1][0], bounds[0][1], bounds[1][1])


def time_to_profile(fit, fraction=0.95, level=0.95) -> ProfileInterval:
    r"""Profile interval of the time to a ``fraction`` p of a step change.

    One pool: :math:`\tau_p = -\ln(1-p)/k` (+ lag); several pools and the chain: the root of
    :math:`1 - F(\tau) = 1 - p` (:func:`isoturnover.quantities.time_to`). Search limits: a
    factor 1e4 either side of the estimate and of the sampling span.
    """
    _check_fit(fit, "time_to_profile", joint=True)
    try:
        p = float(fraction)
    except (TypeError, ValueError):
        raise ValueError(f"'fraction' must be between 0 and 1 (0.95 = 95 %); got "
                         f"{fraction!r}") from None
    if not 0 < p < 1:
        raise ValueError(f"'fraction' must be between 0 and 1 (0.95 = 95 %); got {fraction!r}")
    kin = fit.kinetics
    ttp = _fit_time_to(fit, p)
    est = ttp(fit.state.theta)
    first, span = _design_span(fit)
    grad = None
    if kin.structure == "parallel":
        def grad(th):
            return quantities.time_to_grad(kin, p, ttp(th), th)
    limits = (min(est, first) * 1e-4, max(est, span) * 1e4)
    return profile_derived(fit, ttp, level,
                           name=f"time_to_{round(100 * p):d}" if abs(100 * p - round(100 * p))
                           < 1e-9 else f"time_to_{p:g}", positive=True, grad=grad,
                           limits=limits)


def mean_residence_time_profile(fit, level=0.95) -> ProfileInterval:
    r"""Profile interval of the mean residence time :math:`\sum_i f_i/k_i` (+ lag)."""
    _check_fit(fit, "mean_residence_time_profile", joint=True)
    kin = fit.kinetics
    mrt = _fit_mrt(fit)
    est = mrt(fit.state.theta)
    first, span = _design_span(fit)
    closed_form = kin.growth_kind not in ("curve", "curve_params")
    return profile_derived(fit, mrt, level, name="mean_residence_time", positive=True,
                           grad=((lambda th: quantities.mean_residence_time_grad(kin, th))
                                 if closed_form else None),
                           limits=(min(est, first) * 1e-4, max(est, span) * 1e4))


def half_life_ratio_profile(fit, i, j, level=0.95) -> ProfileInterval:
    r"""Profile interval of the ratio of two half-lives :math:`t_{1/2,i}/t_{1/2,j} = k_j/k_i`.

    Pools (or chain steps) are numbered from 1, fastest first, so for ``i > j`` the ratio
    exceeds 1 (natural range (1, inf), an open lower bound is reported as 1) and for
    ``i < j`` it lies in (0, 1).
    """
    _check_fit(fit, "half_life_ratio_profile", joint=True)
    kin = fit.kinetics
    n = len(kin.rate_index)
    for nm, v in (("i", i), ("j", j)):
        if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or not 1 <= v <= n:
            raise ValueError(f"'{nm}' must be a pool number from 1 to {n}; got {v!r}")
    if i == j:
        raise ValueError(f"'i' and 'j' must name different pools; got {i} and {j}")
    ki, kj = kin.rate_index[i - 1], kin.rate_index[j - 1]

    def fn(th):
        return th[kj] / th[ki]

    def grad(th):
        g = np.zeros(th.size)
        g[kj] = 1.0 / th[ki]
        g[ki] = -th[kj] / th[ki] ** 2
        return g

    natural = (1.0, math.inf) if i > j else (0.0, 1.0)  # rates ordered by construction
    return profile_derived(fit, fn, level, name=f"half_life_ratio_{i}_{j}", grad=grad,
                           natural=natural)


# ----------------------------------------------------------------------------------------
# Replicate refits (bootstrap, jackknife)
# ----------------------------------------------------------------------------------------
_OK, _BOUNDARY, _FAILED = 0, 1, 2
_STATUS_NAMES = {_OK: "ok", _BOUNDARY: "boundary", _FAILED: "failed"}


class _Refitter:
    """Everything a worker needs to refit replicates; picklable, small."""

    def __init__(self, fit, kind, leverage=True, multi_start="auto"):
        self.kin = fit.kinetics
        self.engine = fit.state.engine
        self.coords = fit.state.coords
        self.fixed = dict(fit.fixed)
        self.z_hat = np.array(fit.state.z, dtype=float)
        self.theta_hat = np.array(fit.state.theta, dtype=float)
        self.t = fit.t.copy()
        self.y = fit.y.copy()
        self.sigma = None if fit.sigma is None else fit.sigma.copy()
        self.scale = np.ones_like(self.t) if fit.sigma is None else fit.sigma.copy()
        self.fitted = fit.best_fit
        self.loss = fit.loss
        self.f_scale = fit.f_scale
        self.kind = kind
        self.multi_start = multi_start
        self.first, self.span = _design_span(fit)
        self.gap_coords = [c for c, lab in enumerate(self.coords.labels)
                           if lab.startswith("log_gap")]
        self.dimensionless = np.array([lab.startswith(("log_", "logit_", "stick_"))
                                       for lab in self.coords.labels], dtype=bool)
        n = self.t.size
        self.sd_unit = 1.0 if fit.absolute_sigma else math.sqrt(fit.s2)
        if kind == "residual":
            r = (self.y - self.fitted) / self.scale  # weighted residuals
            h = _leverages(fit) if leverage else np.zeros(n)
            den = np.sqrt(np.clip(1.0 - h, 0.0, None))
            e = np.where(den > 1e-6, r / np.where(den > 1e-6, den, 1.0), r)
            self.pool = e - e.mean()
        self.strata = None
        if kind == "subjects":
            self.strata = _time_strata(self.t)

    # data of one replicate
    def draw(self, rng):
        n = self.t.size
        if self.kind == "residual":
            idx = rng.integers(0, n, n)
            return self.t, self.fitted + self.scale * self.pool[idx], self.sigma
        if self.kind == "parametric":
            return self.t, self.fitted + self.scale * self.sd_unit * rng.standard_normal(n), \
                self.sigma
        idx = np.arange(n)
        for s in self.strata:
            idx[s] = s[rng.integers(0, s.size, s.size)]
        return self.t[idx], self.y[idx], None if self.sigma is None else self.sigma[idx]

    def at_edge(self, theta, z, loose=False):
        """The solution lies at the edge of the parameter space. ``loose`` (for a solve
        that did not converge and is still crawling outward) widens every threshold 10-fold
        (rate x span < 0.01, rate x first time > 3, fraction < 1e-5, log-gap > 3.5)."""
        kin = self.kin
        f = 10.0 if loose else 1.0
        k = theta[kin.rate_index]
        if np.any(k * self.span < _EDGE_SLOW * f) or np.any(k * self.first > _EDGE_FAST / f):
            return True
        if kin.fraction_index and len(kin.fraction_index) > 1 \
                and np.any(theta[kin.fraction_index] < _EDGE_FRACTION * f):
            return True
        gap = _EDGE_GAP - (0.49 if loose else 0.0)
        return bool(self.gap_coords) and bool(np.any(z[self.gap_coords] > gap))

    def edge_of(self, sol):
        """Edge test matched to the solve's convergence."""
        return self.at_edge(sol.theta, sol.z, loose=not sol.success)

    def _extrapolate(self, th0, th1, dist):
        """Internal coordinates ``dist`` units further along th0 -> th1 in the natural
        log-rates and log fraction ratios (None when the run hardly moved)."""
        kin = self.kin
        ki, fi = kin.rate_index, kin.fraction_index
        with np.errstate(all="ignore"):
            a0, a1 = [np.log(th0[ki])], [np.log(th1[ki])]
            if len(fi) > 1:
                f0 = np.clip(th0[fi], 1e-300, None)
                f1 = np.clip(th1[fi], 1e-300, None)
                a0.append(np.log(f0[:-1] / f0[-1]))
                a1.append(np.log(f1[:-1] / f1[-1]))
            a0, a1 = np.concatenate(a0), np.concatenate(a1)
        d = a1 - a0
        if not np.all(np.isfinite(d)):
            return None
        m = float(np.max(np.abs(d)))
        if m < 0.5:
            return None
        a = a1 + d * (dist / m)
        th = th1.copy()
        nk = len(ki)
        th[ki] = np.exp(np.clip(a[:nk], -700, 700))
        if len(fi) > 1:
            e = np.exp(np.concatenate([a[nk:], [0.0]]) - max(0.0, float(np.max(a[nk:]))))
            th[fi] = e / e.sum()
        for nm, v in self.fixed.items():
            th[kin.param_names.index(nm)] = v
        with np.errstate(all="ignore"):
            z = self.coords.z_from_theta(th)
        return z if np.all(np.isfinite(z)) else None

    def _warm_solve(self, prob):
        """Warm-started solve. A refit that runs toward the edge of the parameter space (a
        rate to 0 or infinity, a pool to nothing) would take hundreds of ever smaller
        steps: it stops once the edge is reached, and after a short run short of it the
        run's direction in the natural log-rates and log fraction ratios is extrapolated by
        5 units, the other coordinates (levels) re-solved by a Gauss–Newton step, and the
        solve resumed from there; if that does not lower the cost, the first run is
        continued with the full budget."""
        return self._solve_from(prob, self.z_hat, self.theta_hat)

    def _solve_from(self, prob, z0, th0):
        p = self.coords.size
        budget = 15 * (p + 1)
        s1 = prob.solve(self.coords, z0, tol=1e-10, max_nfev=budget)
        if s1.success or not np.isfinite(s1.cost) or self.edge_of(s1):
            return s1
        zj = self._extrapolate(th0, s1.theta, 5.0)
        if zj is not None:
            lin = ~self.dimensionless
            if np.any(lin):
                with np.errstate(all="ignore"):
                    th, A = self.coords.theta(zj, jac=True)
                    yy, Jm = self.kin.evaluate(prob.t, th, jacobian=True)
                    J = prob.w[:, None] * (Jm @ A)[:, lin]
                    r = prob.w * (prob.y - yy)
                if np.all(np.isfinite(J)) and np.all(np.isfinite(r)):
                    zj[lin] += np.linalg.lstsq(J, r, rcond=None)[0]
            s3 = prob.solve(self.coords, zj, tol=1e-10, max_nfev=budget)
            if np.isfinite(s3.cost) and s3.cost <= s1.cost * (1 + 1e-9) \
                    and (s3.success or self.edge_of(s3)):
                return s3
        s2 = prob.solve(self.coords, s1.z, tol=1e-10)  # slow convergence: full budget
        return s2 if np.isfinite(s2.cost) and s2.cost <= s1.cost else s1

    def refit(self, t, y, sigma):
        """(theta, z, cost, status) of one replicate data set."""
        w = np.ones_like(t) if sigma is None else 1.0 / sigma
        same_design = t is self.t
        prob = Problem(self.kin, t, y, w, loss="linear")
        best = self._warm_solve(prob)
        finite = bool(np.isfinite(best.cost))
        edge = finite and self.edge_of(best)
        if self.multi_start is True:
            need_multi = True
        elif self.multi_start is False:
            need_multi = False
        else:
            # automatic starts when the warm start failed, or when a model of several pools
            # (or the chain) landed on an edge: look for an interior solution
            need_multi = (not finite or (not best.success and not edge)
                          or (edge and (self.kin.pools > 1 or self.kin.structure == "chain")))
        if need_multi:
            # the automatic starting values of the replicate's data, each solved as above
            eng = self.engine.with_y(y) if same_design else self.engine.with_data(t, y, sigma)
            n_keep = 1 if self.kin.pools == 1 and self.kin.structure != "chain" else 3
            try:
                with np.errstate(all="ignore"):
                    starts = eng.start_thetas(self.fixed, None, n_keep)
            except (ValueError, ArithmeticError, np.linalg.LinAlgError):
                starts = []
            for th0 in starts:
                with np.errstate(all="ignore"):
                    alt = self._solve_from(prob, self.coords.z_from_theta(th0), th0)
                if np.isfinite(alt.cost) and (
                        not np.isfinite(best.cost) or alt.cost < best.cost * (1 - 1e-9)
                        or (alt.success and not best.success and alt.cost <= best.cost)):
                    best = alt
        if self.loss != "linear" and np.isfinite(best.cost):
            rob = Problem(self.kin, t, y, w, loss=self.loss, f_scale=self.f_scale)
            best = rob.solve(self.coords, best.z, tol=1e-10)
        if not np.isfinite(best.cost):
            return None, None, math.inf, _FAILED
        if self.edge_of(best):
            return best.theta, best.z, best.cost, _BOUNDARY
        if not best.success:
            return None, None, best.cost, _FAILED
        return best.theta, best.z, best.cost, _OK


def _leverages(fit):
    """Diagonal of the hat matrix of the weighted Jacobian at the solution (tangent plane)."""
    th, A = fit.state.coords.theta(fit.state.z, jac=True)
    w = np.ones_like(fit.t) if fit.sigma is None else 1.0 / fit.sigma
    _, Jm = fit.kinetics.evaluate(fit.t, th, jacobian=True)
    J = w[:, None] * (Jm @ A)
    if J.shape[1] == 0:
        return np.zeros(fit.t.size)
    u, sv, _ = np.linalg.svd(J, full_matrices=False)
    keep = sv > sv[0] * 1e-10 if sv.size and sv[0] > 0 else np.zeros(sv.size, dtype=bool)
    return np.sum(u[:, keep] ** 2, axis=1)


def _time_strata(t):
    """Index groups for whole-animal resampling of a destructive design.

    Animals sampled at the same time form a stratum and are resampled within it. Animals
    alone at their time are pooled into one stratum and resampled together (pairs
    bootstrap over those animals, Efron & Tibshirani 1993 §9.5), so their sampling times
    move with them; a single such animal is kept as it is.
    """
    _, inv, counts = np.unique(t, return_inverse=True, return_counts=True)
    strata = [np.flatnonzero(inv == g) for g in np.flatnonzero(counts > 1)]
    single = np.flatnonzero(counts[inv] == 1)
    if single.size > 1:
        strata.append(single)
    return strata


def _run_chunk(refitter, seeds):
    """Refit the replicates of one chunk; returns (thetas, zs, costs, status)."""
    n_par = refitter.kin.n_params
    p = refitter.coords.size
    m = len(seeds)
    thetas = np.full((m, n_par), np.nan)
    zs = np.full((m, p), np.nan)
    costs = np.full(m, np.nan)
    status = np.full(m, _FAILED, dtype=np.int8)
    for b, ss in enumerate(seeds):
        rng = np.random.default_rng(ss)
        t, y, sig = refitter.draw(rng)
        with np.errstate(all="ignore"):
            th, z, cost, st = refitter.refit(t, y, sig)
        status[b] = st
        costs[b] = cost
        if th is not None:
            thetas[b] = th
            zs[b] = z
    return thetas, zs, costs, status


class _Progress:
    """tqdm when installed, a light text counter on stderr otherwise, or nothing."""

    def __init__(self, total, desc, progress):
        show = progress
        if progress is None:
            isatty = getattr(sys.stderr, "isatty", None)
            show = bool(isatty and isatty()) and total >= 200
        self.bar = None
        self.text = False
        self.total, self.done, self.desc = total, 0, desc
        self._next = 0
        if show:
            if HAS_TQDM:
                self.bar = _tqdm(total=total, desc=desc, leave=False)
            else:  # pragma: no cover - depends on the environment
                self.text = True

    def update(self, k):
        self.done += k
        if self.bar is not None:
            self.bar.update(k)
        elif self.text and (self.done >= self._next or self.done == self.total):
            sys.stderr.write(f"\r{self.desc}: {self.done}/{self.total}")
            sys.stderr.flush()
            self._next = self.done + max(1, self.total // 20)

    def close(self):
        if self.bar is not None:
            self.bar.close()
        elif self.text:
            sys.stderr.write("\n")


def _root_seed(rng):
    if isinstance(rng, np.random.SeedSequence):
        return rng
    g = np.random.default_rng(rng)
    return np.random.SeedSequence(g.integers(0, 2**63 - 1, size=4).tolist())


def _n_workers(n_jobs):
    if isinstance(n_jobs, bool) or not isinstance(n_jobs, (int, np.integer)) or n_jobs == 0 \
            or n_jobs < -1:
        raise ValueError(f"'n_jobs' must be a positive integer or -1 (all cores); got "
                         f"{n_jobs!r}")
    return int(n_jobs)


# ----------------------------------------------------------------------------------------
# Bootstrap
# ----------------------------------------------------------------------------------------
@dataclass
class BootstrapResult:
    """Replicate estimates of a bootstrap of one fit (see :func:`bootstrap`).

    Attributes
    ----------
    replicates : DataFrame
        One row per replicate, in replicate order, failed ones included (values NaN):
        every natural parameter, ``half_life_i``, ``time_to_95``, ``mean_residence_time``,
        the user's quantities, ``rss`` (weighted RSS of the refit) and ``status``
        (``"ok"``, ``"boundary"``: the refit ran to the edge of the parameter space — a
        rate to 0 or infinity, a pool to nothing — its values are kept; ``"failed"``: the
        refit's cost is not finite or the optimizer did not converge away from any edge).
    kind : str
    n : int
        Replicates asked for.
    n_failed, n_boundary : int
    estimates : dict
        The fit's values of every column (the centre of BCa and the ``estimate`` column).
    fixed : tuple of str
        Quantities fixed in the fit.
    """

    replicates: pd.DataFrame
    kind: str
    n: int
    n_failed: int
    n_boundary: int
    estimates: dict
    fixed: tuple
    seed: object = field(repr=False, default=None)
    _fit: object = field(repr=False, default=None)
    _refitter: object = field(repr=False, default=None)
    _functions: dict = field(repr=False, default_factory=dict)
    _jackknife: object = field(repr=False, default=None)

    @property
    def quantities(self) -> list:
        return [c for c in self.replicates.columns if c not in ("rss", "status")]

    @property
    def usable(self) -> pd.DataFrame:
        """Replicates whose refit succeeded (status ok or boundary)."""
        return self.replicates[self.replicates["status"] != "failed"]

    def __repr__(self):
        return (f"<BootstrapResult {self.kind}: {self.n} replicates, {self.n_failed} failed, "
                f"{self.n_boundary} at the edge of the parameter space>")

    # -- intervals ----------------------------------------------------------------------------
    def intervals(self, level=0.95, method="percentile") -> pd.DataFrame:
        r"""Bootstrap intervals of every quantity (the table shape of ``conf_int``).

        ``percentile``: the :math:`(1\mp\text{level})/2` quantiles of the replicate values
        (linear interpolation between order statistics). ``bca``: bias-corrected and
        accelerated (Efron 1987; Efron & Tibshirani 1993, §14.3),

        .. math::

            \alpha_{1,2} = \Phi\Big(\hat z_0 + \frac{\hat z_0 + z_{\alpha}}
            {1 - \hat a(\hat z_0 + z_{\alpha})}\Big),\quad
            \hat z_0 = \Phi^{-1}\Big(\frac{\#\{\hat\theta^*_b < \hat\theta\}
            + \tfrac12\#\{\hat\theta^*_b = \hat\theta\}}{B}\Big),\quad
            \hat a = \frac{\sum_i (\bar\theta_{(\cdot)} - \hat\theta_{(i)})^3}
            {6\,[\sum_i (\bar\theta_{(\cdot)} - \hat\theta_{(i)})^2]^{3/2}}

        with :math:`\hat\theta_{(i)}` the jackknife estimates (one data point — one animal in
        a destructive design — left out; computed on first use, n refits).

        Failed replicates are left out (B counts the others; ``n_failed`` says how many);
        a value that could not be computed for a replicate (NaN, e.g. a user quantity that
        raised) is left out of that quantity's interval, counted in
        ``attrs["n_not_computable"]`` and announced with a warning.
        A bound that falls on a replicate that ran to the edge of the parameter space and
        lies beyond every ordinary replicate's value is ``open``: reported as the end of
        the quantity's natural range (±inf, 0 for positive quantities, 0 or 1 for
        fractions).

        Columns: parameter, estimate, stderr (sd of the replicates), lower, upper, level,
        method, lower_status, upper_status; ``attrs`` hold n_boot, n_failed, kind.
        """
        level = _check_level(level)
        method = _choice("method", method, INTERVAL_METHODS)
        use = self.usable
        B = len(use)
        kin = self._fit.kinetics if self._fit is not None else None
        jack = self._jackknife_values() if method == "bca" and B else None
        status = use["status"].to_numpy()
        edge = status == "boundary"
        rows = []
        unranked = {}
        alpha = (1 - level) / 2
        for q in self.quantities:
            est = self.estimates.get(q, math.nan)
            mname = f"bootstrap_{method}"
            if q in self.fixed:
                rows.append({"parameter": q, "estimate": est, "stderr": 0.0, "lower": est,
                             "upper": est, "level": level, "method": "fixed",
                             "lower_status": "fixed", "upper_status": "fixed"})
                continue
            v = use[q].to_numpy(dtype=float)
            finite = ~np.isnan(v)  # ±inf ranks as an extreme value; NaN cannot be ranked
            if not finite.all():
                unranked[q] = int((~finite).sum())
            lo_nat, hi_nat = (_natural_range(kin, q) if kin is not None
                              else (-math.inf, math.inf))
            if q not in self._functions.get("_standard", ()) and kin is not None \
                    and q not in kin.param_names:
                lo_nat, hi_nat = -math.inf, math.inf
            with np.errstate(over="ignore", invalid="ignore"):
                # edge replicates can be huge (a half-life as a rate runs to 0): sd may be inf
                sd = float(np.std(v[finite], ddof=1)) if finite.sum() > 1 else math.nan
            if not math.isfinite(sd):
                sd = math.inf if finite.sum() > 1 else math.nan
            if finite.sum() < 2 or not math.isfinite(est):
                rows.append({"parameter": q, "estimate": est, "stderr": sd, "lower": math.nan,
                             "upper": math.nan, "level": level, "method": mname,
                             "lower_status": "failed", "upper_status": "failed"})
                continue
            vv, ee = v[finite], edge[finite]
            if method == "percentile":
                probs = (alpha, 1 - alpha)
            else:
                probs = _bca_probs(vv, est, None if jack is None else jack.get(q), alpha)
            out = []
            regular = vv[~ee]
            for side, pr in zip((-1, 1), probs):
                if not math.isfinite(pr):
                    out.append((math.nan, "failed"))
                    continue
                val, idx = _order_quantile(vv, pr)
                st = "ok"
                if np.any(ee[idx]):
                    beyond = (regular.size == 0 or (side < 0 and val < regular.min())
                              or (side > 0 and val > regular.max()))
                    if beyond:
                        val, st = (lo_nat if side < 0 else hi_nat), "open"
                out.append((val, st))
            rows.append({"parameter": q, "estimate": est, "stderr": sd, "lower": out[0][0],
                         "upper": out[1][0], "level": level, "method": mname,
                         "lower_status": out[0][1], "upper_status": out[1][1]})
        df = pd.DataFrame(rows, columns=INTERVAL_COLUMNS)
        df.attrs.update({"n_boot": self.n, "n_used": B, "n_failed": self.n_failed,
                         "kind": self.kind, "n_not_computable": unranked})
        if unranked:
            warnings.warn(
                "some replicate values could not be computed and are left out of those "
                "quantities' intervals: " + ", ".join(f"{k} ({v})" for k, v in unranked.items()),
                ConvergenceWarning, stacklevel=2)
        return df

    def _jackknife_values(self):
        """Leave-one-out estimates of every quantity (cached): dict name -> ndarray (n,)."""
        if self._jackknife is not None:
            return self._jackknife
        fit, rf = self._fit, self._refitter
        n = fit.nobs
        if n - 1 < fit.nvarys + 1:
            self._jackknife = {}
            return self._jackknife
        thetas = np.full((n, fit.kinetics.n_params), np.nan)
        for i in range(n):
            keep = np.arange(n) != i
            t, y = fit.t[keep], fit.y[keep]
            sig = None if fit.sigma is None else fit.sigma[keep]
            with np.errstate(all="ignore"):
                th, _, _, st = rf.refit(t, y, sig)
            if th is not None and st != _FAILED:
                thetas[i] = th
        self._jackknife = _quantity_values(fit, thetas, self._functions)
        return self._jackknife


def _order_quantile(v, prob):
    """Quantile by linear interpolation of the order statistics (numpy's default) and the
    indices (into v) of the order statistics it used."""
    order = np.argsort(v, kind="stable")
    pos = prob * (v.size - 1)
    lo = int(math.floor(pos))
    hi = min(lo + 1, v.size - 1)
    frac = pos - lo
    vs = v[order]
    val = vs[lo] + (vs[hi] - vs[lo]) * frac if frac > 0 and vs[hi] != vs[lo] else vs[lo]
    used = order[[lo, hi]] if frac > 0 else order[[lo]]
    return float(val), used


def _bca_probs(v, est, jack, alpha):
    """BCa percentile levels (Efron & Tibshirani 1993, eq. 14.9–14.15)."""
    if jack is None:
        return math.nan, math.nan
    jack = np.asarray(jack, dtype=float)
    if jack.size == 0 or not np.all(np.isfinite(jack)):
        return math.nan, math.nan
    prop = (np.sum(v < est) + 0.5 * np.sum(v == est)) / v.size
    if not 0 < prop < 1:
        return math.nan, math.nan
    z0 = stats.norm.ppf(prop)
    d = jack.mean() - jack
    den = 6.0 * float(np.sum(d**2)) ** 1.5
    a = float(np.sum(d**3)) / den if den > 0 else 0.0
    out = []
    for zq in (stats.norm.ppf(alpha), stats.norm.ppf(1 - alpha)):
        den2 = 1 - a * (z0 + zq)
        out.append(float(stats.norm.cdf(z0 + (z0 + zq) / den2)) if den2 > 0 else math.nan)
    return tuple(out)


def _quantity_values(fit, thetas, functions):
    """Every reported quantity of each row of ``thetas`` (NaN rows stay NaN)."""
    kin = fit.kinetics
    out = {nm: thetas[:, j].copy() for j, nm in enumerate(kin.param_names)}
    ok = np.all(np.isfinite(thetas), axis=1)
    for nm, fn in functions.items():
        if nm == "_standard":
            continue
        vals = np.full(thetas.shape[0], np.nan)
        for b in np.flatnonzero(ok):
            try:
                with np.errstate(all="ignore"):
                    vals[b] = float(fn(thetas[b]))
            except (ValueError, ArithmeticError, RuntimeError, OverflowError):
                vals[b] = math.nan
        out[nm] = vals
    return out


def _user_quantities(quantities, fit, reserved):
    if quantities is None:
        return {}
    if not isinstance(quantities, dict):
        raise TypeError(f"'quantities' must be a dict of name -> function of theta; got "
                        f"{type(quantities).__name__}")
    out = {}
    for nm, fn in quantities.items():
        if not isinstance(nm, str) or not nm:
            raise ValueError(f"'quantities' keys must be non-empty strings; got {nm!r}")
        if nm in reserved:
            raise ValueError(f"'quantities' name {nm!r} is already a reported quantity; choose "
                             "another name")
        if not callable(fn):
            raise TypeError(f"'quantities[{nm!r}]' must be a function of theta; got "
                            f"{type(fn).__name__}")
        try:
            v = float(fn(fit.state.theta))
        except Exception as e:  # a user's function may raise anything: report it clearly
            raise ValueError(f"'quantities[{nm!r}]' fails at the fitted parameters: {e}") from e
        if not math.isfinite(v):
            raise ValueError(f"'quantities[{nm!r}]' is not finite at the fitted parameters "
                             f"(got {v!r})")
        out[nm] = fn
    return out


def bootstrap(fit, n=1000, kind="residual", rng=None, n_jobs=1, progress=None,
              quantities=None, *, leverage=True, multi_start="auto",
              chunk_size=None) -> BootstrapResult:
    r"""Bootstrap a fit: refit ``n`` resampled data sets, warm-started from the fit.

    Kinds
    -----
    ``"residual"``
        :math:`y^*_i = \hat y_i + \sigma_i e^*_i`, with :math:`e^*` drawn with replacement
        from the weighted residuals :math:`r_i = (y_i - \hat y_i)/\sigma_i` (σ_i = 1 without
        weights), leverage-adjusted :math:`r_i/\sqrt{1 - h_{ii}}` (tangent-plane leverages
        of the weighted Jacobian; Davison & Hinkley 1997, eq. 6.9 — from memory) and
        centred. ``leverage=False`` uses the raw centred residuals.
    ``"parametric"``
        :math:`y^*_i = \hat y_i + \varepsilon_i`, :math:`\varepsilon_i \sim N(0, s^2
        \sigma_i^2)` (σ estimated; :math:`N(0, \sigma_i^2)` with σ known).
    ``"subjects"``
        Whole-animal resampling of a destructive design (one animal per sample): animals
        sampled at the same time are resampled with replacement within that time; animals
        alone at their time are pooled and resampled together (pairs bootstrap), and a
        lone one is kept. Needs a fit with ``fit.data_info["design"] == "destructive"``; for
        repeated measures of several animals resample animals over
        :func:`~isoturnover.fit_each` results instead.

    Refits start from the fitted internal coordinates (pools are ordered by construction,
    so labels cannot switch). ``multi_start="auto"`` adds the automatic starts only when
    the warm start fails, or (several pools, chain) lands on the edge of the parameter
    space; ``True`` always, ``False`` never.

    Parameters
    ----------
    fit : TurnoverFit
    n : int, default=1000
        Number of replicates (Efron & Tibshirani 1993 advise ≥ 1000 for percentile and BCa
        intervals).
    kind : {"residual", "parametric", "subjects"}, default="residual"
    rng : int, numpy.random.Generator or SeedSequence, optional
        Seed. Each replicate draws from its own child of one
        :class:`numpy.random.SeedSequence`, so results are identical for any ``n_jobs``.
    n_jobs : int, default=1
        Parallel workers through joblib (``-1``: all cores). Replicates are sent in chunks.
        Under ``with joblib.parallel_backend("dask"):`` the chunks go to a Dask cluster.
    progress : bool, optional
        Progress bar (tqdm if installed, a text counter otherwise). Default: shown only on
        an interactive terminal for runs of 200 replicates or more.
    quantities : dict, optional
        Extra quantities ``{name: fn(theta)}`` computed for every replicate.
    leverage : bool, default=True
        Leverage-adjust residuals (``kind="residual"``).
    multi_start : {"auto", True, False}, default="auto"
    chunk_size : int, optional
        Replicates per job (default: about 4 chunks per worker, at most 250).

    Returns
    -------
    BootstrapResult
        Failed replicates are kept (NaN values, status ``failed``), counted in ``n_failed``
        and announced with a :class:`~isoturnover.ConvergenceWarning`.
    """
    _check_fit(fit, "bootstrap")
    n = _positive_int("n", n)
    kind = _choice("kind", kind, BOOTSTRAP_KINDS)
    workers = _n_workers(n_jobs)
    if multi_start not in ("auto", True, False):
        raise ValueError(f"'multi_start' must be 'auto', True or False; got {multi_start!r}")
    if progress not in (None, True, False):
        raise ValueError(f"'progress' must be True, False or None; got {progress!r}")
    if kind == "subjects":
        design = fit.data_info.get("design")
        if design != "destructive":
            raise ValueError(
                "kind='subjects' resamples whole animals and needs a destructive-sampling fit "
                f"(one animal per sample, fitted from a samples frame); this fit's design is "
                f"{design!r}. For repeated measures of several animals fit each animal "
                "(iso.fit_each) and resample animals from those fits; for one animal use "
                "kind='residual' or 'parametric'"
            )
    elif fit.dof <= 0:
        raise ValueError(f"kind={kind!r} needs residual degrees of freedom; this fit has "
                         f"{fit.nobs} points for {fit.nvarys} free parameters")
    if fit.nvarys == 0:
        raise ValueError("the fit has no free parameters: nothing to bootstrap")
    std = _standard_quantities(fit)
    reserved = set(fit.kinetics.param_names) | set(std) | {"rss", "status"}
    user = _user_quantities(quantities, fit, reserved)
    functions = dict(std)
    functions.update(user)
    functions["_standard"] = tuple(std)
    refitter = _Refitter(fit, kind, leverage=leverage, multi_start=multi_start)
    root = _root_seed(rng)
    seeds = root.spawn(n)
    if workers != 1 and not HAS_JOBLIB:  # pragma: no cover - depends on the environment
        raise ImportError("n_jobs != 1 needs joblib: pip install 'isoturnover[fast]' (or pip "
                          "install joblib)")
    n_eff = 1 if workers == 1 else (_joblib.effective_n_jobs(workers))
    if chunk_size is None:
        chunk_size = max(1, min(250, math.ceil(n / (4 * n_eff))))
        if n_eff == 1:
            chunk_size = max(1, min(chunk_size, 50))
    chunk_size = _positive_int("chunk_size", chunk_size)
    chunks = [seeds[i:i + chunk_size] for i in range(0, n, chunk_size)]
    bar = _Progress(n, f"bootstrap ({kind})", progress)
    parts = []
    try:
        if workers == 1:
            for ch in chunks:
                parts.append(_run_chunk(refitter, ch))
                bar.update(len(ch))
        else:
            par = _joblib.Parallel(n_jobs=workers, return_as="generator")
            for ch, res in zip(chunks, par(_joblib.delayed(_run_chunk)(refitter, ch)
                                           for ch in chunks)):
                parts.append(res)
                bar.update(len(ch))
    finally:
        bar.close()
    thetas = np.concatenate([p[0] for p in parts])
    costs = np.concatenate([p[2] for p in parts])
    status = np.concatenate([p[3] for p in parts])
    vals = _quantity_values(fit, thetas, functions)
    df = pd.DataFrame(vals)
    df["rss"] = np.where(status == _FAILED, np.nan, costs)
    df["status"] = [_STATUS_NAMES[int(s)] for s in status]
    est_vals = _quantity_values(fit, fit.state.theta[None, :], functions)
    estimates = {k: float(v[0]) for k, v in est_vals.items()}
    fixed = tuple(nm for nm in fit.kinetics.param_names if nm in fit.fixed)
    if len(fit.kinetics.fraction_names) == 1:
        fixed = fixed + (fit.kinetics.fraction_names[0],)
    n_failed = int(np.sum(status == _FAILED))
    n_boundary = int(np.sum(status == _BOUNDARY))
    if n_failed:
        warnings.warn(f"{n_failed} of {n} bootstrap refits failed (cost not finite or not "
                      "converged); they are kept as NaN rows with status 'failed' and left "
                      "out of the intervals", ConvergenceWarning, stacklevel=2)
    return BootstrapResult(df, kind, n, n_failed, n_boundary, estimates, fixed, seed=root,
                           _fit=fit, _refitter=refitter, _functions=functions)


# ----------------------------------------------------------------------------------------
# MCMC
# ----------------------------------------------------------------------------------------
def _prior_box(fit):
    """Bounds of the default uniform prior on the internal coordinates, with descriptions."""
    coords = fit.state.coords
    first, span = _design_span(fit)
    z = fit.state.z
    yr = max(float(np.ptp(fit.y)), 1.0)
    lo = np.empty(coords.size)
    hi = np.empty(coords.size)
    desc = []
    for c, lab in enumerate(coords.labels):
        if lab.startswith("log_gap"):
            lo[c], hi[c] = -7.0, 4.0
            desc.append(f"{lab}: uniform on [-7, 4] (log of the log-rate gap; rate ratios "
                        "from 1.001 to e^54.6)")
        elif lab.startswith("log_"):
            a = min(math.log(1e-3 / span), z[c] - 1.0)
            b = max(math.log(1e3 / first), z[c] + 1.0)
            lo[c], hi[c] = a, b
            desc.append(f"{lab}: uniform on [{a:.4g}, {b:.4g}] — log-uniform rate between "
                        f"{math.exp(a):.3g} and {math.exp(b):.3g} per {fit.time_unit}")
        elif lab.startswith(("logit_", "stick_")):
            lo[c], hi[c] = -30.0, 30.0
            desc.append(f"{lab}: uniform on [-30, 30] (logit-uniform fraction: density "
                        "proportional to 1/(f(1-f)))")
        elif lab == "lag":
            lo[c], hi[c] = 0.0, max(span, z[c] * 2)
            desc.append(f"lag: uniform on [0, {hi[c]:.4g}] {fit.time_unit}")
        elif lab == "k_growth":
            w = 10.0 / span
            lo[c], hi[c] = z[c] - w, z[c] + w
            desc.append(f"k_growth: uniform on [{lo[c]:.4g}, {hi[c]:.4g}] per {fit.time_unit}")
        else:
            w = 100.0 * yr
            lo[c], hi[c] = z[c] - w, z[c] + w
            desc.append(f"{lab}: uniform on the estimate ± {w:.4g} (100 × the data range)")
    return lo, hi, desc


@dataclass
class MCMCResult:
    """Posterior draws of :func:`sample`.

    Attributes
    ----------
    draws : DataFrame
        One row per kept draw (after burn-in and thinning, walkers concatenated): every
        natural parameter, ``half_life_i``, and ``s`` (the residual-sd scale, drawn from
        its conditional posterior :math:`\\sigma^2 \\mid \\theta \\sim \\mathrm{rss}(\\theta)/
        \\chi^2_n`) when σ is estimated.
    tau : ndarray
        Integrated autocorrelation time of each internal coordinate (steps).
    acceptance : float
        Mean acceptance fraction of the walkers.
    n_walkers, n_steps, burn, thin : int
    sigma : {"known", "estimated"}
    prior : list of str
        The priors used, stated.
    """

    draws: pd.DataFrame
    tau: np.ndarray
    acceptance: float
    n_walkers: int
    n_steps: int
    burn: int
    thin: int
    sigma: str
    prior: list
    estimates: dict
    fixed: tuple
    _edge: np.ndarray = field(repr=False, default=None)
    _kin: object = field(repr=False, default=None)

    def intervals(self, level=0.95) -> pd.DataFrame:
        """Equal-tailed posterior intervals (the table shape of ``conf_int``).

        ``estimate`` is the least-squares estimate, ``stderr`` the posterior sd. A bound
        whose tail is made mostly (> half) of draws in the outer 1 % of the default prior
        box is set by the prior, not the data: reported ``open`` (the end of the natural
        range).
        """
        level = _check_level(level)
        alpha = (1 - level) / 2
        rows = []
        for q in self.draws.columns:
            est = self.estimates.get(q, math.nan)
            if q in self.fixed:
                rows.append({"parameter": q, "estimate": est, "stderr": 0.0, "lower": est,
                             "upper": est, "level": level, "method": "fixed",
                             "lower_status": "fixed", "upper_status": "fixed"})
                continue
            v = self.draws[q].to_numpy(dtype=float)
            lo, hi = np.quantile(v, [alpha, 1 - alpha])
            lo_nat, hi_nat = (_natural_range(self._kin, q) if q != "s"
                              else (0.0, math.inf))
            out = []
            for side, val in ((-1, lo), (1, hi)):
                tail = v <= val if side < 0 else v >= val
                st = "ok"
                if self._edge is not None and tail.any() and \
                        np.mean(self._edge[tail]) > 0.5:
                    val, st = (lo_nat if side < 0 else hi_nat), "open"
                out.append((float(val), st))
            rows.append({"parameter": q, "estimate": est, "stderr": float(np.std(v, ddof=1)),
                         "lower": out[0][0], "upper": out[1][0], "level": level,
                         "method": "mcmc", "lower_status": out[0][1],
                         "upper_status": out[1][1]})
        return pd.DataFrame(rows, columns=INTERVAL_COLUMNS)


def sample(fit, n_walkers=None, n_steps=2000, burn=None, thin=1, rng=None, sigma=None,
           priors=None, progress=False) -> MCMCResult:
    r"""Posterior sample of the parameters with emcee, started from the converged fit.

    Likelihood (Gaussian errors, weights :math:`w_i = 1/\sigma_i`):

    * ``sigma="known"`` — :math:`\ln L = -\tfrac12 \sum_i w_i^2 (y_i - \hat y_i)^2`;
    * ``sigma="estimated"`` — the residual sd scale is integrated out under the Jeffreys
      prior :math:`p(s) \propto 1/s`, leaving the marginal likelihood
      :math:`L \propto \mathrm{rss}(\theta)^{-n/2}` (no extra sampled parameter); ``s`` is
      then drawn for each kept draw from :math:`s^2 \mid \theta \sim \mathrm{rss}/\chi^2_n`.

    Priors. Default: uniform on the internal coordinates within wide stated bounds
    (:attr:`MCMCResult.prior`): for rates that is log-uniform on the anchor rate and on the
    log of the log-rate gaps, for fractions logit-uniform, levels uniform on the estimate ±
    100 × the data range. With ``priors={name: logpdf}`` the prior is a density on the
    natural parameters: the product of the given log-densities (e.g.
    ``{"k1": lambda k: scipy.stats.lognorm(0.5, scale=0.03).logpdf(k)}``) and a flat density
    on every other free natural parameter, all within the same box; the sampler works in
    the internal coordinates and adds :math:`\ln|\det \partial\theta/\partial z|` (the
    last pool fraction is determined by the others and gets no density).

    Walkers start in a small ball around the fit (0.05 × the covariance's Cholesky factor).
    The integrated autocorrelation time τ (emcee's ``get_autocorr_time``) is compared with
    the chain length: a :class:`~isoturnover.ConvergenceWarning` is issued when
    ``n_steps < 50 τ`` (emcee's documented rule of thumb).

    Parameters
    ----------
    fit : TurnoverFit
    n_walkers : int, optional
        Default ``max(16, 4 × dimensions)``; at least 2 × dimensions.
    n_steps : int, default=2000
    burn : int, optional
        Steps dropped from each walker; default ``min(n_steps // 2, ceil(5 max τ))``.
    thin : int, default=1
    rng : int or Generator, optional
        Seed: walkers' start and the sampler's random state.
    sigma : {"known", "estimated"}, optional
        Default: ``"known"`` when the fit has ``absolute_sigma``, else ``"estimated"``.
    priors : dict, optional
        ``{natural parameter name: log-density function}``.
    progress : bool, default=False
        emcee's progress bar.

    Returns
    -------
    MCMCResult
    """
    if not HAS_EMCEE:
        raise ImportError("sample() needs emcee: pip install 'isoturnover[mcmc]' (or pip "
                          "install emcee)")
    _check_fit(fit, "sample")
    if fit.loss != "linear":
        raise ValueError(f"sample() uses the Gaussian likelihood; this fit used loss="
                         f"{fit.loss!r}")
    if sigma is None:
        sigma = "known" if fit.absolute_sigma else "estimated"
    sigma = _choice("sigma", sigma, ("known", "estimated"))
    if sigma == "known" and fit.sigma is None:
        raise ValueError("sigma='known' needs the fit's analytic sd (fit with sigma=..., "
                         "absolute_sigma=True); this fit has no sigma")
    coords = fit.state.coords
    kin = fit.kinetics
    ndim = coords.size
    if ndim == 0:
        raise ValueError("the fit has no free parameters: nothing to sample")
    n_steps = _positive_int("n_steps", n_steps, 2)
    thin = _positive_int("thin", thin)
    if n_walkers is None:
        n_walkers = max(16, 4 * ndim)
    n_walkers = _positive_int("n_walkers", n_walkers, 2 * ndim)
    if burn is not None:
        burn = _positive_int("burn", burn, 0)
        if burn >= n_steps:
            raise ValueError(f"'burn' must be smaller than n_steps ({n_steps}); got {burn}")
    free_names = _free_names(fit)
    prior_fns = {}
    if priors is not None:
        if not isinstance(priors, dict):
            raise TypeError(f"'priors' must be a dict of parameter name -> log-density; got "
                            f"{type(priors).__name__}")
        for nm, fn in priors.items():
            if nm not in free_names:
                raise ValueError(f"'priors' has {nm!r}, which is not a free parameter of this "
                                 f"fit; free parameters: {', '.join(free_names)}")
            if not callable(fn):
                raise TypeError(f"'priors[{nm!r}]' must be a log-density function; got "
                                f"{type(fn).__name__}")
            prior_fns[nm] = fn
    lo, hi, desc = _prior_box(fit)
    if priors is not None:
        desc = ([f"{nm}: user log-density" for nm in prior_fns]
                + [f"{nm}: flat" for nm in free_names if nm not in prior_fns]
                + ["within the box of the internal coordinates: " + "; ".join(desc)])
    log_prior = _make_log_prior(fit, prior_fns, lo, hi, priors is not None)
    t, y = fit.t, fit.y
    w = np.ones_like(t) if fit.sigma is None else 1.0 / fit.sigma
    n = t.size
    known = sigma == "known"

    def log_prob(z):
        lp = log_prior(z)
        if not np.isfinite(lp):
            return -np.inf, np.nan
        with np.errstate(all="ignore"):
            th = coords.theta(z)
            r = w * (y - kin.evaluate(t, th))
            rss = float(r @ r)
        if not math.isfinite(rss):
            return -np.inf, np.nan
        ll = -0.5 * rss if known else -0.5 * n * math.log(rss) if rss > 0 else math.inf
        return lp + ll, rss

    g = np.random.default_rng(rng)
    z_hat = np.array(fit.state.z, dtype=float)
    if fit.state.cov_ok:
        cov = fit.state.cov_z0.copy()
        dead = np.diag(cov) <= 0
        cov[dead, dead] = 1e-6  # a small spread for coordinates the data ignore
        try:
            L = np.linalg.cholesky(cov + 1e-14 * np.diag(np.diag(cov)).max() * np.eye(ndim))
        except np.linalg.LinAlgError:
            L = np.diag(np.sqrt(np.clip(np.diag(cov), 1e-12, None)))
    else:
        L = np.diag(1e-3 * np.maximum(1.0, np.abs(z_hat)))
    if not math.isfinite(log_prob(z_hat)[0]):
        raise ValueError("the fitted parameters lie outside the prior (log-prior not finite "
                         "at the estimate); check 'priors'")
    p0 = np.empty((n_walkers, ndim))
    for k in range(n_walkers):
        for _ in range(1000):
            cand = z_hat + 0.05 * (L @ g.standard_normal(ndim))
            if math.isfinite(log_prob(cand)[0]):
                p0[k] = cand
                break
        else:  # pragma: no cover - only with a pathological prior
            raise ValueError("could not place the walkers around the fit inside the prior")
    sampler = _emcee.EnsembleSampler(n_walkers, ndim, log_prob)
    sampler.random_state = np.random.RandomState(int(g.integers(0, 2**32 - 1))).get_state()
    with np.errstate(all="ignore"):
        sampler.run_mcmc(p0, n_steps, progress=bool(progress))
    tau = np.asarray(sampler.get_autocorr_time(quiet=True, tol=0), dtype=float)
    tmax = float(np.nanmax(tau)) if np.any(np.isfinite(tau)) else math.nan
    if not math.isfinite(tmax) or n_steps < 50 * tmax:
        warnings.warn(
            f"MCMC chain of {n_steps} steps is short for an integrated autocorrelation time "
            f"of {tmax:.3g} steps (emcee advises at least 50 τ): intervals may be unreliable; "
            "run more steps", ConvergenceWarning, stacklevel=2)
    if burn is None:
        burn = min(n_steps // 2, int(math.ceil(5 * tmax))) if math.isfinite(tmax) \
            else n_steps // 2
    chain = sampler.get_chain(discard=burn, thin=thin, flat=True)
    blobs = sampler.get_blobs(discard=burn, thin=thin, flat=True)
    thetas = np.array([coords.theta(z) for z in chain])
    cols = {nm: thetas[:, j] for j, nm in enumerate(kin.param_names)}
    for i, j in enumerate(kin.rate_index):
        cols[f"half_life_{i + 1}"] = LN2 / thetas[:, j]
    est = {nm: float(fit.state.theta[j]) for j, nm in enumerate(kin.param_names)}
    for i, j in enumerate(kin.rate_index):
        est[f"half_life_{i + 1}"] = LN2 / float(fit.state.theta[j])
    if not known:
        rss = np.asarray(blobs, dtype=float)
        cols["s"] = np.sqrt(rss / g.chisquare(n, size=rss.size))
        est["s"] = math.sqrt(fit.s2)
    width = hi - lo
    edge = np.any((chain - lo < 0.01 * width) | (hi - chain < 0.01 * width), axis=1)
    fixed = tuple(nm for nm in kin.param_names if nm in fit.fixed)
    if len(kin.fraction_names) == 1:
        fixed = fixed + (kin.fraction_names[0],)
    return MCMCResult(pd.DataFrame(cols), tau, float(np.mean(sampler.acceptance_fraction)),
                      n_walkers, n_steps, int(burn), thin, sigma, desc, est, fixed,
                      _edge=edge, _kin=kin)


def _free_names(fit):
    """Natural parameters that the internal coordinates move one-to-one: the free ones,
    without the pool fraction that the others determine (they sum to 1)."""
    kin, coords = fit.kinetics, fit.state.coords
    names = kin.param_names
    frac = set(kin.fraction_names)
    out = [nm for nm in names if nm not in fit.fixed and nm not in frac]
    if kin.fraction_index and not coords.fractions_fixed:
        order = coords.stick_order
        for pos in range(len(order) - 1):
            nm = names[kin.fraction_index[order[pos]]]
            if nm not in fit.fixed:
                out.append(nm)
    return [nm for nm in names if nm in out]


def _make_log_prior(fit, prior_fns, lo, hi, natural):
    """log prior density in the internal coordinates."""
    coords = fit.state.coords
    kin = fit.kinetics
    if not natural:
        def lp(z):
            if np.any(z < lo) or np.any(z > hi):
                return -np.inf
            return 0.0
        return lp
    names = kin.param_names
    rows = [names.index(nm) for nm in _free_names(fit)]
    items = [(names.index(nm), fn) for nm, fn in prior_fns.items()]

    def lp(z):
        if np.any(z < lo) or np.any(z > hi):
            return -np.inf
        th, A = coords.theta(z, jac=True)
        sub = A[rows]
        if sub.shape[0] != sub.shape[1]:  # pragma: no cover - guarded by construction
            return -np.inf
        sign, logdet = np.linalg.slogdet(sub)
        if sign == 0:
            return -np.inf
        total = logdet
        for j, fn in items:
            try:
                v = float(fn(th[j]))
            except (ValueError, ArithmeticError):
                return -np.inf
            if not math.isfinite(v):
                return -np.inf
            total += v
        return total
    return lp


# ----------------------------------------------------------------------------------------
# Bands
# ----------------------------------------------------------------------------------------
def _new_sigma(fit, sigma, nt):
    if sigma is None:
        if fit.sigma is None:
            return np.ones(nt)
        return np.full(nt, math.sqrt(float(np.mean(fit.sigma**2))))
    try:
        s = np.asarray(sigma, dtype=float)
    except (TypeError, ValueError):
        raise ValueError(f"'sigma' must be a number or an array of the times' length; got "
                         f"{sigma!r:.60}") from None
    if s.ndim == 0:
        s = np.full(nt, float(s))
    if s.shape != (nt,) or not np.all(np.isfinite(s)) or np.any(s <= 0):
        raise ValueError(f"'sigma' must be positive and finite, one value or one per time "
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

    Returns
    -------
    DataFrame
        Columns time, fitted, se (delta method; NaN for bootstrap), lower, upper, level,
        kind, method.
    """
    _check_fit(fit, "band", joint=True)
    level = _check_level(level)
    kind = _choice("kind", kind, BAND_KINDS)
    method = _choice("method", method, BAND_METHODS)
    try:
        tt = np.atleast_1d(np.asarray(t, dtype=float))
    except (TypeError, ValueError):
        raise ValueError(f"'t' must be numeric; got {t!r:.60}") from None
    if tt.ndim != 1 or tt.size == 0 or not np.all(np.isfinite(tt)):
        raise ValueError("'t' must be a non-empty one-dimensional array of finite times")
    kin = fit.kinetics
    fitted = fit.predict(tt)
    s_new = _new_sigma(fit, sigma, tt.size)
    s2 = 1.0 if fit.absolute_sigma else fit.s2
    if getattr(fit, "block_scale", None) is not None:
        s2 = float(fit.block_scale[0]) ** 2  # joint fit: the δ block's residual variance
    se = np.full(tt.size, np.nan)
    if method == "delta":
        if boot is not None:
            raise ValueError("'boot' is used with method='bootstrap' only")
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
            raise ValueError("method='bootstrap' needs boot=, a BootstrapResult of this fit "
                             "(iso.uncertainty.bootstrap(fit, ...))")
        if boot._fit is not fit and (boot._fit is None or boot._fit.data_fingerprint
                                     != fit.data_fingerprint):
            raise ValueError("'boot' was made from a different fit (other data); bootstrap "
                             "this fit")
        use = boot.usable
        thetas = use[list(kin.param_names)].to_numpy(dtype=float)
        if thetas.shape[0] < 2:
            raise ValueError(f"'boot' has {thetas.shape[0]} usable replicates; at least 2 are "
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
