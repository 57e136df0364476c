r"""The fitting engine: the least-squares problem, extra data blocks, the fit of one series
and the finished fit's state.

Everything that fits — :class:`~isoturnover.TurnoverModel`, profiles, bootstraps,
simulations, shared fits — runs through this module; it knows nothing of files, tables or
lmfit (the model layer above wraps the parameters in :class:`lmfit.Parameters`).

The internal coordinates and ties live in :mod:`isoturnover.coordinates`, the starting
values in :mod:`isoturnover.starts`, the variable-projection fit of sums of exponentials in
:mod:`isoturnover.projection`.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import least_squares, leastsq

from .coordinates import Coordinates, Ties
from .errors import DataError, DataWarning, FitError
from .inputs import as_1d, check_growth_coverage, check_names, prepare_data
from .kinetics import TurnoverKinetics
from .projection import DRIFT_LIMIT, level_constraints, project_exponentials
from .starts import general_starts, projected_rate_starts, step_linear_starts
from .state import FitState

__all__ = [
    "LOSSES",
    "SIGMA_RANGE",
    "relative_sigma",
    "sigma_scale_message",
    "Coordinates",
    "Ties",
    "Solution",
    "Problem",
    "Engine",
    "FitState",
    "MassBlock",
    "GrowthPriorBlock",
    "prepare_data",
    "check_names",
    "check_growth_coverage",
    "as_1d",
]

LOSSES = ("linear", "soft_l1", "huber")

#: Standard deviations inside this range keep the weights 1/σ², the weighted sums of
#: squares, their gradients and the squares of those well inside double precision
#: (about 1e±308); σ outside it are rescaled (relative weights) or refused (absolute).
SIGMA_RANGE = (1e-50, 1e50)


def relative_sigma(sigma, absolute_sigma: bool, name: str = "sigma"):
    r"""The standard deviations a least-squares fit works with, and the factor applied.

    With relative weights (``absolute_sigma=False``) only the ratios of the σ matter: for
    any :math:`c > 0`, :math:`\sum (r_i / c\sigma_i)^2 = c^{-2} \sum (r_i/\sigma_i)^2`,
    so the minimiser and :math:`s^2 (J^T J)^{-1}` are unchanged. When some σ lie outside
    :data:`SIGMA_RANGE`, they are divided by their geometric mean
    :math:`g = \exp(\overline{\ln \sigma})` so that the sums of squares stay
    representable; the fit's RSS and information criteria then refer to the rescaled σ.
    Known σ (``absolute_sigma=True``) set the scale of the covariance and are never
    rescaled: outside the range they are refused.

    Parameters
    ----------
    sigma : ndarray of shape (n,) or None
        Standard deviations (> 0, finite; unit of the values).
    absolute_sigma : bool
        Whether σ are the known sd (True) or relative weights (False).
    name : str, optional
        Argument name used in error messages.

    Returns
    -------
    (ndarray or None, float)
        The σ to fit with and the factor g they were divided by (1.0 when unchanged).

    Raises
    ------
    DataError
        Known σ outside :data:`SIGMA_RANGE`; relative σ whose largest is more than 1e50
        times the smallest (rescaling cannot bring both into range), or with subnormal
        values (below 2.2e-308: too few significant digits for exact ratios).
    """
    if sigma is None:
        return None, 1.0
    s = np.asarray(sigma, dtype=float)
    lo, hi = SIGMA_RANGE
    s_min, s_max = float(np.min(s)), float(np.max(s))
    if lo <= s_min and s_max <= hi:
        return s, 1.0
    given = f"got values from {s_min:.3g} to {s_max:.3g}"
    if absolute_sigma:
        raise DataError(
            f"'{name}' with absolute_sigma=True must lie between {lo:g} and {hi:g} (the "
            f"weights 1/σ² and the χ² must stay within double precision); {given}; check that "
            "the sd are in the unit of the values, or use absolute_sigma=False")
    if s_min < np.finfo(float).tiny:
        raise DataError(
            f"'{name}' holds values below {np.finfo(float).tiny:.3g} (subnormal numbers, "
            f"with too few significant digits for the ratios that set the weights); {given}")
    if s_max / s_min > hi:
        raise DataError(
            f"'{name}' spans {s_min:.3g} to {s_max:.3g}, a ratio beyond {hi:g}: the weights "
            "1/σ² of the smallest and the largest cannot both be held in double precision; "
            "check the sd values")
    g = math.exp(float(np.mean(np.log(s))))
    return s / g, g


def sigma_scale_message(name: str, g: float) -> str:
    """The warning that a fit's relative σ were divided by their geometric mean ``g``."""
    return (f"'{name}': the standard deviations lie outside {SIGMA_RANGE[0]:g} to "
            f"{SIGMA_RANGE[1]:g}; with relative weights only their ratios matter, so they were "
            f"divided by their geometric mean {g:.3g}: the fit's sigma, RSS and information "
            "criteria refer to the rescaled values (estimates and intervals are unchanged)")


# ----------------------------------------------------------------------------------------
# The least-squares problem
# ----------------------------------------------------------------------------------------
@dataclass
class _LMResult:
    """The parts of a MINPACK result the engine uses (status as in least_squares)."""

    x: np.ndarray
    ier: int
    nfev: int
    message: str

    @property
    def status(self) -> int:
        # leastsq: 1-4 converged; 5 = maxfev reached; 6-8 tolerances too small
        return self.ier if self.ier in (1, 2, 3, 4) else (0 if self.ier == 5 else -1)


@dataclass
class Solution:
    z: np.ndarray
    theta: np.ndarray
    cost: float  # sum of squared weighted residuals (linear loss) at the solution
    status: int
    nfev: int
    message: str
    success: bool
    jac_z: np.ndarray | None = None
    extra: dict = field(default_factory=dict)


class Problem:
    """Residuals r = w (y − model) of one data series for a given coordinate map."""

    def __init__(self, kin: TurnoverKinetics, t, y, w, loss="linear", f_scale=1.0,
                 extra=None):
        self.kin = kin
        self.t = np.asarray(t, dtype=float)
        self.y = np.asarray(y, dtype=float)
        self.w = np.asarray(w, dtype=float)
        self.loss = loss
        self.f_scale = f_scale
        # extra residual block: callable theta -> (r, dr/dtheta), e.g. body masses
        self.extra = extra
        self._level_map = None  # the levels' affine map, read on first use

    def evaluate(self, coords: Coordinates, z):
        """Weighted residuals r(z) and their Jacobian dr/dz in internal coordinates."""
        return self.evaluate_parts(coords, z)[:2]

    def evaluate_parts(self, coords: Coordinates, z):
        r"""Residuals, their Jacobian and the parameters they were computed from.

        Parameters
        ----------
        coords : Coordinates
            The coordinate map.
        z : ndarray
            Internal coordinates.

        Returns
        -------
        tuple of ndarray
            ``(r, dr/dz, θ, dθ/dz)``: :math:`r = w (y - \hat y(\theta(z)))` (with the extra
            block appended) and :math:`dr/dz = -w\, J_\theta\, d\theta/dz`.
        """
        th, A = coords.theta(z, jac=True)
        yy, J = self.kin.evaluate(self.t, th, jacobian=True)
        w = self.w
        r = w * (self.y - yy)
        Jz = J @ A
        Jz *= -w[:, None]
        if self.extra is not None:
            r2, J2 = self.extra(th)
            r = np.concatenate([r, r2])
            Jz = np.vstack([Jz, J2 @ A])
        return r, Jz, th, A

    def cached_evaluate(self, coords: Coordinates):
        """``f(z) -> {"r": residuals, "J": Jacobian}``, evaluated once per distinct z (solvers
        ask for the residuals and the Jacobian at the same point separately)."""
        cache = {}

        def f(z):
            key = z.tobytes()
            if cache.get("key") != key:
                cache["r"], cache["J"] = self.evaluate(coords, z)
                cache["key"] = key
            return cache

        return f

    # -- variable projection (one switch) -------------------------------------------------
    def projectable(self, coords) -> bool:
        """Whether this problem can be solved by variable projection
        (:mod:`isoturnover.projection`).

        Parameters
        ----------
        coords : Coordinates
            The coordinate map.

        Returns
        -------
        bool
            One diet switch (a step, or a diet table with two diets), parallel pools on
            the δ scale, no growth, lag, extra residual block, tied parameter, bound or
            robust loss, and more points than parameters.
        """
        kin = self.kin
        return (kin.structure == "parallel" and kin.growth_kind is None and not kin.lag
                and kin.scale == "delta" and kin.n_levels == 2 and kin.lead_in is None
                and kin.switch_times.size == 1 and self.loss == "linear"
                and self.extra is None and coords.ties is None and not coords.has_bounds
                and self.t.size > 2 * kin.pools + 1)

    def level_map(self):
        r"""The levels as an affine map of the parameters: :math:`L = c + M\theta`.

        From :attr:`~isoturnover.kinetics.TurnoverKinetics.level_map` (the map is affine for
        every separation form).

        Returns
        -------
        tuple of (ndarray, ndarray, list of int)
            ``c``, ``M`` and the parameters the levels use.
        """
        if self._level_map is None:
            c, M = self.kin.level_map
            cols = np.flatnonzero(np.any(M != 0, axis=0)).tolist()
            self._level_map = (c, M, cols)
        return self._level_map

    def solve_projected(self, coords, rates0):
        r"""Variable projection from starting rates (a fresh fit: nothing fixed).

        After one switch at :math:`s`, :math:`\delta = L_1 + (L_0 - L_1)\sum_i f_i
        e^{-k_i (t-s)^+}`: with :math:`a = L_1` and :math:`b_i = (L_0 - L_1) f_i` a sum of
        exponentials whose linear parameters obey linear constraints:
        :math:`(L_1, L_0) = (a, a + \sum_i b_i)` must lie in the image of the level
        parameters (one separation shared by both diets fixes :math:`\sum_i b_i`).

        Parameters
        ----------
        coords : Coordinates
            The coordinate map (nothing fixed).
        rates0 : array-like
            Starting rates, fastest first.

        Returns
        -------
        Solution or None
            None when the projection does not apply, does not converge or leaves the
            model's domain (a non-positive fraction, merged rates, levels not determined).
        """
        kin = self.kin
        n = kin.pools
        if coords.fixed:
            return None
        memo = kin.memo
        if "level_constraints" not in memo:  # from the kinetics alone: once per kinetics
            memo["level_constraints"] = level_constraints(*self.level_map(), n)
        setup = memo["level_constraints"]
        if setup is None:
            return None  # the level parameters are not determined by (L1, L0)
        c0, P, cols, C, d = setup
        k0 = [float(v) for v in rates0]
        if not all(0.0 < v < math.inf for v in k0):
            return None
        tau = self.t - float(kin.switch_times[0])
        pf = project_exponentials(tau, self.y, self.w, k0, C=C, d=d)
        if pf is None or not (pf.converged or pf.drift):
            return None
        # the constraints involve only Σ b: pools may change places, sort by rate (plain
        # floats: a handful of numbers)
        rates, lin = pf.rates.tolist(), pf.linear.tolist()
        order = sorted(range(n), key=lambda i: -rates[i])
        k = [rates[i] for i in order]
        a, b = lin[0], [lin[1 + i] for i in order]
        total = sum(b)
        if not (total != 0 and all(v / total > 0 for v in b)
                and all(0 < v < math.inf for v in k)
                and all(k[i + 1] < k[i] * (1 - 1e-9) for i in range(n - 1))):
            return None
        th = np.zeros(kin.n_params)
        r1, r2 = a - float(c0[1]), a + total - float(c0[0])
        if len(cols) == 1:
            p1, p2 = float(P[0, 0]), float(P[1, 0])
            th[cols[0]] = (p1 * r1 + p2 * r2) / (p1 * p1 + p2 * p2)
        elif len(cols) == 2:  # 2 × 2, invertible (checked by level_constraints)
            (a11, a12), (a21, a22) = P.tolist()
            det = a11 * a22 - a12 * a21
            th[cols] = [(a22 * r1 - a12 * r2) / det, (a11 * r2 - a21 * r1) / det]
        else:
            th[cols] = np.linalg.lstsq(P, np.array([r1, r2]), rcond=None)[0]
        th[kin.rate_index] = k
        th[kin.fraction_index] = [v / total for v in b]
        z = coords.z_from_theta(th)
        r, J, th_z, A = self.evaluate_parts(coords, z)
        cost = float(r @ r)
        # the model must reproduce the projected fit (same sum of squares), and the full
        # problem's gradient must vanish there; at a drift the pool amplitudes are large
        # (about the change over kτ_max) and the reduced φ = y·y − c·h loses digits to
        # cancellation, so only gross disagreement is refused and the cost is the full
        # problem's
        rel = 1e-4 if pf.drift else 1e-7
        if not (math.isfinite(cost) and abs(cost - pf.rss) <= rel * cost + 1e-12
                * float(self.w @ self.w)):
            return None
        if pf.drift:
            # stopped where the slowest rate heads to 0 (projection.DRIFT_LIMIT): returned
            # flagged and not converged, at the drift's limit; no search continues from it
            k_tau = k[-1] * float(tau.max())
            name = kin.rate_names[-1]
            sol = Solution(z, th_z, cost, 0, pf.n_eval,
                           f"stopped: the slowest rate runs to 0 ({name}·τ_max = {k_tau:.2g} "
                           f"< {DRIFT_LIMIT:g}), a linear drift rather than a pool", False, J)
            sol.extra["drift"] = {"rate": name, "k_tau": k_tau, "limit": DRIFT_LIMIT}
            sol.extra["evaluated"] = (z, r, A)
            return sol
        tol = 1e-12 * max(cost, 1e-300)
        if not all(g * g <= tol * s + 1e-300 for g, s in zip((r @ J).tolist(),
                                                             (J * J).sum(axis=0).tolist())):
            return None
        sol = Solution(z, th_z, cost, 1, pf.n_eval,
                       "variable projection converged (Newton, exact Hessian)", True, J)
        # what the fit's state would compute again at this z (see FitState)
        sol.extra["evaluated"] = (z, r, A)
        return sol

    def solve(self, coords: Coordinates, z0, *, tol=1e-14, max_nfev=None) -> Solution:
        """Least-squares solution from ``z0`` in the internal coordinates.

        MINPACK ``lmder`` without bounds, scipy's trust-region reflective method with
        bounds or a robust loss. (Warm-started refits — profiles, bootstraps — converge in a
        few evaluations here; measured, variable projection does not pay for them.)

        Parameters
        ----------
        coords : Coordinates
            The coordinate map.
        z0 : ndarray
            Starting coordinates.
        tol : float, optional
            Tolerances (xtol, ftol, gtol) of the solver in the coordinates.
        max_nfev : int, optional
            Evaluation budget (default ``100 (p + 1)``).

        Returns
        -------
        Solution
        """
        t = self.t
        extra = self.extra
        _eval = self.cached_evaluate(coords)

        def fun(z):
            return _eval(z)["r"]

        def jac(z):
            return _eval(z)["J"]

        z0 = np.asarray(z0, dtype=float)
        if coords.size == 0:
            r = fun(z0)
            th = coords.theta(z0)
            return Solution(z0, th, float(r @ r), 1, 1, "nothing to fit", True,
                             np.zeros((t.size, 0)))
        n_res = t.size + (0 if extra is None else extra.size)
        use_lm = (not coords.has_bounds) and self.loss == "linear" and n_res >= coords.size
        if max_nfev is None:
            max_nfev = 100 * (coords.size + 1)
        with np.errstate(over="ignore", under="ignore", invalid="ignore", divide="ignore"):
            try:
                if use_lm:
                    # MINPACK lmder directly (what least_squares(method="lm") calls, without
                    # its per-call overhead); diag scaling from the Jacobian's columns
                    x, _, info, msg, ier = leastsq(fun, z0, Dfun=jac, full_output=True,
                                                   xtol=tol, ftol=tol, gtol=tol,
                                                   maxfev=max_nfev)
                    res = _LMResult(x, ier, info["nfev"], msg)
                else:
                    bounds = (coords.lower, coords.upper)
                    z0b = np.clip(z0, coords.lower + 1e-12 * np.isfinite(coords.lower),
                                  coords.upper - 1e-12 * np.isfinite(coords.upper))
                    res = least_squares(fun, z0b, jac=jac, method="trf", bounds=bounds,
                                        xtol=max(tol, 1e-15), ftol=max(tol, 1e-15),
                                        gtol=max(tol, 1e-15), max_nfev=max_nfev,
                                        loss=self.loss, f_scale=self.f_scale, x_scale="jac")
            except (ValueError, FloatingPointError, np.linalg.LinAlgError) as e:
                return Solution(z0, coords.theta(z0), math.inf, -1, 0, f"solver error: {e}",
                                 False)
        z = coords.clamp(np.asarray(res.x, dtype=float))
        r = fun(z)
        cost = float(r @ r)
        ok = bool(res.status > 0) and np.isfinite(cost)
        return Solution(z, coords.theta(z), cost, int(res.status), int(res.nfev),
                         str(res.message), ok, jac(z).copy())

    def solve_lmfit(self, coords: Coordinates, z0, *, tol=1e-12, max_nfev=None) -> Solution:
        """The same problem solved by :class:`lmfit.Minimizer` in the internal coordinates.

        ``least_squares`` with this problem's analytic Jacobian passed as ``jac=`` (lmfit
        hands it the current :class:`lmfit.Parameters`), bounds passed to scipy as they are
        (no lmfit bound transform), the problem's loss. The lmfit result is kept in
        ``solution.extra["lmfit"]``.
        """
        import lmfit

        labels = list(coords.labels)
        z0 = np.asarray(z0, dtype=float)
        if coords.size == 0:
            return self.solve(coords, z0)
        pars = lmfit.Parameters()
        for c, lab in enumerate(labels):
            lo, hi = float(coords.lower[c]), float(coords.upper[c])
            pars.add(lab, value=float(min(max(z0[c], lo), hi)), min=lo, max=hi)
        _eval = self.cached_evaluate(coords)

        def ev(p):
            return _eval(np.array([p[lab].value for lab in labels], dtype=float))

        def resid(p):
            return ev(p)["r"]

        def jac(p, *args, **kwargs):
            return ev(p)["J"]

        if max_nfev is None:
            max_nfev = 100 * (coords.size + 1)
        mini = lmfit.Minimizer(resid, pars, nan_policy="raise")
        try:
            with np.errstate(over="ignore", under="ignore", invalid="ignore",
                             divide="ignore"):
                res = mini.minimize(method="least_squares", jac=jac, xtol=max(tol, 1e-15),
                                    ftol=max(tol, 1e-15), gtol=max(tol, 1e-15),
                                    max_nfev=max_nfev, loss=self.loss, f_scale=self.f_scale,
                                    x_scale="jac")
        except (ValueError, FloatingPointError, np.linalg.LinAlgError) as e:
            return Solution(z0, coords.theta(z0), math.inf, -1, 0, f"solver error: {e}",
                            False)
        z = coords.clamp(np.array([res.params[lab].value for lab in labels], dtype=float))
        r, J = self.evaluate(coords, z)
        cost = float(r @ r)
        ok = bool(res.success) and np.isfinite(cost)
        sol = Solution(z, coords.theta(z), cost, 1 if res.success else 0, int(res.nfev),
                       str(res.message), ok, J.copy())
        sol.extra["lmfit"] = res
        return sol


class MassBlock:
    r"""Body masses in a joint fit with ``growth="exponential"``.

    :math:`\ln W = \ln W_0 + k_g t`; the intercept :math:`\ln W_0` enters linearly and is
    profiled out exactly (centred data), so the block's residuals are
    :math:`(c(\ln W) - k_g\, c(t))/s_m` with :math:`c` the centring and :math:`s_m` the
    block's residual sd.
    """

    def __init__(self, kin, masses):
        try:
            tm, wm = masses
        except (TypeError, ValueError):
            raise DataError("'masses' must be a pair (t_mass, mass) of arrays") from None
        tm = as_1d("masses time", tm)
        wm = as_1d("masses mass", wm, tm.size)
        if np.any(wm <= 0):
            i = int(np.argmax(wm <= 0))
            raise DataError(f"body masses must be > 0; got {wm[i]!r} at position {i}")
        if tm.size < 3:
            raise DataError(f"a joint growth fit needs at least 3 body masses; got {tm.size}")
        self.kin = kin
        self.t = tm
        self.mass = wm
        self.lnw = np.log(wm)
        self.ct = tm - tm.mean()
        self.cy = self.lnw - self.lnw.mean()
        self.size = tm.size
        self.scale = 1.0
        self.j = kin.growth_rate_index
        self.coverage = (float(tm.min()), float(tm.max()))
        self.kind = "masses"

    def n_free_params(self, coords):
        return 1  # k_growth (ln W0 is profiled out analytically)

    def raw_residuals(self, theta):
        return self.cy - theta[self.j] * self.ct

    def log_mass0(self, theta):
        return float(self.lnw.mean() - theta[self.j] * self.t.mean())

    def __call__(self, theta):
        r = self.raw_residuals(theta) / self.scale
        J = np.zeros((self.size, theta.size))
        J[:, self.j] = -self.ct / self.scale
        return r, J


class GrowthPriorBlock:
    r"""The growth fit's information about its parameters, as extra residuals.

    Two-stage growth dilution: the growth curve is fitted first; its parameters then enter
    the turnover fit as parameters with the Gaussian penalty
    :math:`(v - \hat v)^T C^{-1} (v - \hat v)` from the growth fit's estimate and
    covariance, written as the whitened residuals :math:`L^{-1}(v - \hat v)` with
    :math:`C = L L^T`. Profiles then run over the growth parameters as well, so the growth
    curve's uncertainty reaches the catabolic rates (a quadratic approximation of the
    masses' likelihood).
    """

    def __init__(self, kin):
        g = kin.growth
        cov = g.covariance
        names = list(cov.index)
        self.kin = kin
        self.kind = "prior"
        allnames = list(g.param_names)
        self.free_idx = [kin.growth_param_index[allnames.index(n)] for n in names]
        self.fixed_names = {f"growth_{n}": float(v) for n, v in zip(allnames, g.values)
                            if n not in names}
        self.vhat = np.array([float(g.values[allnames.index(n)]) for n in names])
        C = cov.to_numpy(dtype=float)
        if not np.all(np.isfinite(C)):
            raise FitError("the growth fit has no covariance (see its warnings); refit the "
                           "growth curve, or pass propagate_growth=False to use it as known")
        Lc = np.linalg.cholesky(C)
        self.Linv = np.linalg.inv(Lc)
        self.size = len(names)
        self.coverage = (float(np.min(g.t)), float(np.max(g.t)))
        self.scale = 1.0

    def n_free_params(self, coords):
        return self.size

    def raw_residuals(self, theta):
        return self.Linv @ (theta[self.free_idx] - self.vhat)

    def __call__(self, theta):
        r = self.raw_residuals(theta)
        J = np.zeros((self.size, theta.size))
        J[:, self.free_idx] = self.Linv
        return r, J


class Engine:
    """Fits one data series; also used by profiles, bootstraps and simulations."""

    def __init__(self, kin, data, *, absolute_sigma=False, loss="linear", masses=None,
                 ties=None, bounds=None):
        self.kin = kin
        # relative σ far from 1 are divided by their geometric mean (see relative_sigma)
        sigma, self.sigma_scale = relative_sigma(data["sigma"], absolute_sigma)
        if self.sigma_scale != 1.0:
            data = {**data, "sigma": sigma}
        self.data = data
        self.ties = ties
        self.bounds = dict(bounds or {})
        self.t, self.y, self.sigma = data["t"], data["y"], data["sigma"]
        self.w = np.ones_like(self.t) if self.sigma is None else 1.0 / self.sigma
        self.absolute_sigma = bool(absolute_sigma)
        self.loss = loss
        self.f_scale = 1.0
        self.masses = masses
        self._coords_cache = {}
        self.mass_block = None
        if masses is not None:
            self.mass_block = MassBlock(kin, masses)
        elif kin.growth_kind == "curve_params":
            self.mass_block = GrowthPriorBlock(kin)
        self.problem = Problem(kin, self.t, self.y, self.w, loss="linear",
                                extra=self.mass_block)
        self.block_scale = None  # (s_delta, s_mass) of the joint fit

    def coords(self, fixed, rate_anchor=None, fraction_anchor=None):
        """The :class:`Coordinates` for ``fixed`` (name -> value) and the anchor pools: built
        once per engine and fixed names; the plain map (nothing fixed, tied or bounded)
        once per kinetics, shared by its engines (it holds nothing that changes)."""
        key = (tuple(sorted(fixed)), rate_anchor, fraction_anchor)
        c = self._coords_cache.get(key)
        if c is None:
            plain = (not fixed and rate_anchor is None and fraction_anchor is None
                     and self.ties is None and not self.bounds)
            if plain:
                c = self.kin.memo.get("plain_coordinates")
            if c is None:
                c = Coordinates(self.kin, fixed, rate_anchor, fraction_anchor,
                                ties=self.ties, bounds=self.bounds)
                if plain:
                    self.kin.memo["plain_coordinates"] = c
            self._coords_cache[key] = c
        else:
            c.set_fixed_values(fixed)
        return c

    def start_thetas(self, fixed, init, n_keep):
        kin = self.kin
        if kin.diet is None and kin.structure == "parallel" and kin.growth_kind is None \
                and not kin.lag and kin.scale == "delta" and not any(
                    kin.param_names[j] in fixed for j in kin.fraction_index):
            starts = step_linear_starts(self.t, self.y, self.w, kin, fixed, n_keep)
        else:
            fx = dict(fixed)
            if kin.growth_kind == "curve_params":
                for j, v in zip(kin.growth_param_index, kin.growth.values):
                    fx.setdefault(kin.param_names[j], float(v))
            if isinstance(self.mass_block, MassBlock) and "k_growth" not in fx:
                mb = self.mass_block
                fx["k_growth"] = float(mb.ct @ mb.cy / (mb.ct @ mb.ct)) if np.any(mb.ct) else 0.0
            starts = general_starts(self.t, self.y, self.w, kin, fx, n_keep)
            if kin.growth_rate_index is not None and "k_growth" in fx:
                kg = fx["k_growth"]
                for th in starts:  # keep every start inside k_d + k_growth > 0
                    k = th[kin.rate_index]
                    if np.min(k) + kg <= 0:
                        th[kin.rate_index] = k + (abs(kg) - np.min(k)) + 1e-3
        if kin.lag_index is not None and "lag" not in fixed:
            for th in starts:
                th[kin.lag_index] = 0.0
        if init:
            base = starts[0].copy() if starts else np.zeros(kin.n_params)
            for nm, v in init.items():
                base[kin.param_names.index(nm)] = v
            if kin.fraction_index:
                f = base[kin.fraction_index]
                if np.all(f > 0) and abs(f.sum() - 1) > 1e-9:
                    base[kin.fraction_index] = f / f.sum()
            starts = [base] + starts
        return starts

    def fit_best(self, fixed, init, use_lmfit=False):
        """Best fit from the automatic starts (and ``init``): every start on a modest budget,
        the best polished to tight tolerances — by :meth:`Problem.solve_lmfit` (lmfit's
        Minimizer) when ``use_lmfit``. Returns (solution, number of starts tried).

        A series whose values do not change at all is refused (:class:`FitError`): no rate
        can be estimated from it (free levels match it at any rate, known levels send the
        rate to 0), as ``fit_each`` reports it ``no_change``."""
        kin = self.kin
        if self.y.size > 1 and float(self.y.max()) == float(self.y.min()):
            unit = " ‰" if kin.scale == "delta" else ""
            raise FitError(
                f"the values do not change: all {self.y.size} equal {float(self.y[0]):g}{unit}; "
                "a turnover curve cannot be fitted to a series without change (fit_each "
                "reports such a series as 'no_change')")
        if self.sigma_scale != 1.0:
            warnings.warn(sigma_scale_message("sigma", self.sigma_scale), DataWarning,
                          stacklevel=3)
        coords = self.coords(fixed)
        n_keep = 1 if kin.pools == 1 else 4
        if kin.structure == "chain":
            n_keep = 4
        best = None
        if not init and self.projectable(coords):
            best, tried = self.fit_projected(coords)
        if best is None:
            best, tried = self._fit_multistart(coords, fixed, init, n_keep)
        if self.loss != "linear" and coords.size:
            # robust refit, scale from the linear fit's residuals (MAD)
            r = self.problem.w * (self.y - kin.evaluate(self.t, best.theta))
            mad = 1.4826 * float(np.median(np.abs(r - np.median(r))))
            self.f_scale = mad if mad > 0 else 1.0
            rob = Problem(kin, self.t, self.y, self.w, loss=self.loss, f_scale=self.f_scale)
            sol = rob.solve(coords, best.z)
            # the cost reported is the plain weighted RSS at the robust solution
            sol.extra["robust"] = True
            best = sol
        if self.mass_block is not None:
            best, more = self._joint_block_weights(coords, best)
            tried += more
        if use_lmfit and coords.size:
            prob = self.problem if self.loss == "linear" else Problem(
                kin, self.t, self.y, self.w, loss=self.loss, f_scale=self.f_scale)
            lm = prob.solve_lmfit(coords, best.z)
            if np.isfinite(lm.cost) and (lm.success or not best.success) and \
                    lm.cost <= best.cost * (1 + 1e-9) + 1e-300:
                lm.extra.update({k: v for k, v in best.extra.items() if k != "lmfit"})
                best = lm
            else:
                best.extra["lmfit"] = lm.extra.get("lmfit")
        best.extra["coords"] = coords
        return best, tried

    def _fit_multistart(self, coords, fixed, init, n_keep):
        """Every automatic start on a modest budget, the best polished to tight tolerances."""
        starts = self.start_thetas(fixed, init, n_keep)
        if not starts:
            raise FitError("no usable starting values could be found for this series")
        best = None
        tried = 0
        budget = None if len(starts) == 1 else 60 * (coords.size + 1)
        for th in starts:
            z0 = coords.z_from_theta(th)
            sol = self.problem.solve(coords, z0, tol=1e-10 if budget else 1e-14,
                                     max_nfev=budget)
            tried += 1
            if best is None or (np.isfinite(sol.cost) and not sol.cost >= best.cost):
                best = sol
        if budget is not None and coords.size:
            pol = self.problem.solve(coords, best.z)
            if np.isfinite(pol.cost) and pol.cost <= best.cost * (1 + 1e-12) + 1e-300:
                best = pol
        return best, tried

    def projectable(self, coords) -> bool:
        """Whether a fresh fit can run by variable projection (see
        :meth:`Problem.projectable`; nothing may be fixed).

        Parameters
        ----------
        coords : Coordinates
            The coordinate map of the fit.

        Returns
        -------
        bool
        """
        return (self.loss == "linear" and not coords.fixed
                and self.problem.projectable(coords))

    def fit_projected(self, coords):
        r"""Fit by variable projection from the best grid start.

        Returns ``(solution, starts tried)``, or ``(None, 0)`` when the projected fit
        leaves the model's domain (a non-positive pool fraction, merged rates, no change),
        the level parameters cannot be recovered, or it does not converge; the caller then
        fits in the internal coordinates. The best grid start is used, and the next
        distinct one only when the first does not converge to a point inside the model's
        domain (over 200 seeded two- and three-pool series the second start never found a
        lower minimum).

        When the slowest rate runs to 0 from every start tried (a linear drift; see
        :data:`~isoturnover.projection.DRIFT_LIMIT`), the search stops there: the solution
        where the iteration stopped (lowest sum of squares) is returned unconverged, with
        ``extra["drift"]`` (the rate, :math:`k\tau_{max}` and the limit), instead of the
        multi-start search in the coordinates, which would only creep towards :math:`k = 0`
        until its evaluation limit. Its sum of squares (hence its information criteria) is
        that of the stopping point, within a relative :math:`O(k\tau_{max})` of the limit.

        Parameters
        ----------
        coords : Coordinates
            The coordinate map (nothing fixed).

        Returns
        -------
        tuple of (Solution or None, int)
        """
        n = self.kin.pools
        tau = self.t - float(self.kin.switch_times[0])
        starts = projected_rate_starts(tau, self.y, self.w, n, 1 if n == 1 else 2)
        drift = None
        for tried, k0 in enumerate(starts, 1):
            sol = self.problem.solve_projected(coords, k0)
            if sol is not None and "drift" not in sol.extra:
                return sol, tried
            if sol is not None and (drift is None or sol.cost < drift[0].cost):
                drift = (sol, tried)
        if drift is not None:
            return drift[0], len(starts)
        return None, 0

    def _joint_block_weights(self, coords, sol):
        """Iterate the block weights of a joint δ + mass fit to their residual variances.

        Each block is weighted by its own residual sd (δ in ‰, ln mass dimensionless), so
        neither unit dominates; the weights are re-estimated from the joint fit's residuals
        until they settle (at most 8 rounds).
        """
        mb = self.mass_block
        base = np.ones_like(self.t) if self.sigma is None else 1.0 / self.sigma
        n_d, n_m = self.t.size, mb.size
        p_total = coords.size
        p_m = mb.n_free_params(coords)
        p_d = max(p_total - p_m, 1)
        if mb.kind == "prior":
            # the growth-prior block is already in units of its own sd
            s_d = 1.0
            for _ in range(4):
                rd = base * (self.y - self.kin.evaluate(self.t, sol.theta))
                new_d = math.sqrt(max(float(rd @ rd), 1e-300) / max(n_d - p_d, 1))
                done = abs(new_d / s_d - 1) < 1e-6
                s_d = new_d
                self.set_block_scale(s_d, 1.0)
                if done:
                    break
                sol = self.problem.solve(coords, sol.z)
            return sol, 1
        s_d, s_m = 1.0, 1.0
        rounds = 0
        for _ in range(8):
            rd = base * (self.y - self.kin.evaluate(self.t, sol.theta))
            rm = mb.raw_residuals(sol.theta)
            new_d = math.sqrt(max(float(rd @ rd), 1e-300) / max(n_d - p_d, 1))
            new_m = math.sqrt(max(float(rm @ rm), 1e-300) / max(n_m - 1 - p_m, 1))
            done = abs(new_d / s_d - 1) < 1e-6 and abs(new_m / s_m - 1) < 1e-6
            s_d, s_m = new_d, new_m
            self.set_block_scale(s_d, s_m)
            if done and rounds:
                break
            sol = self.problem.solve(coords, sol.z)
            rounds += 1
        return sol, rounds

    def with_y(self, y):
        """The same problem with new observations (bootstrap and simulation replicates)."""
        data = dict(self.data)
        data["y"] = np.asarray(y, dtype=float)
        new = Engine(self.kin, data, absolute_sigma=self.absolute_sigma, loss=self.loss,
                     masses=self.masses, ties=self.ties, bounds=self.bounds)
        if self.mass_block is not None and new.mass_block is not None:
            new.mass_block = self.mass_block
        new._coords_cache = self._coords_cache
        if self.block_scale is not None:
            new.set_block_scale(*self.block_scale)
        return new

    def with_data(self, t, y, sigma):
        """The same model on other data (whole-animal resampling, jackknife); the coordinate
        maps already built are shared."""
        data = dict(self.data)
        data["t"] = np.asarray(t, dtype=float)
        data["y"] = np.asarray(y, dtype=float)
        data["sigma"] = None if sigma is None else np.asarray(sigma, dtype=float)
        new = Engine(self.kin, data, absolute_sigma=self.absolute_sigma, loss=self.loss,
                     masses=self.masses, ties=self.ties, bounds=self.bounds)
        new._coords_cache = self._coords_cache
        return new

    def set_block_scale(self, s_delta, s_mass):
        """Weight the δ and mass blocks of a joint fit by their own residual sd."""
        self.block_scale = (float(s_delta), float(s_mass))
        base = np.ones_like(self.t) if self.sigma is None else 1.0 / self.sigma
        self.w = base / s_delta
        self.mass_block.scale = s_mass
        self.problem = Problem(self.kin, self.t, self.y, self.w, loss="linear",
                                extra=self.mass_block)

    def quick_fit(self, fixed, z_warm=None, multi_start=True, tol=1e-10):
        """Best solution from a warm start and (optionally) the automatic starts.

        Candidates run on a small evaluation budget; the best is then polished. A solution
        counts as failed only when its cost is not finite (the optimizer's own status is in
        ``success``).
        """
        coords = self.coords(fixed)
        cands = []
        budget = 40 * (coords.size + 1)
        if z_warm is not None:
            cands.append(self.problem.solve(coords, z_warm, tol=tol, max_nfev=budget))
        if multi_start or not cands or not cands[0].success:
            n_keep = 1 if self.kin.pools == 1 else 3
            for th in self.start_thetas(fixed, None, n_keep):
                cands.append(self.problem.solve(coords, coords.z_from_theta(th), tol=tol,
                                                max_nfev=budget))
        finite = [c for c in cands if np.isfinite(c.cost)]
        if not finite:
            best = cands[0]
        else:
            best = min(finite, key=lambda c: c.cost)
            if not best.success:
                pol = self.problem.solve(coords, best.z, tol=tol)
                if np.isfinite(pol.cost) and pol.cost <= best.cost:
                    best = pol
        best.extra["coords"] = coords
        return best

    def refit(self, fixed, z0, coords=None, tol=1e-12):
        """A warm-started fit with some parameters fixed (profiles, bootstraps)."""
        if coords is None:
            coords = self.coords(fixed)
        return self.problem.solve(coords, z0, tol=tol)
