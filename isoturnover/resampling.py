r"""Bootstrap of a turnover fit: replicate refits, percentile and BCa intervals, jackknife
(DESIGN §3 "Intervals").

Every function takes a :class:`~isoturnover.results.TurnoverFit` and leaves it unchanged.

Kinds of resampling
    Residual (modified residuals :math:`r_i/\sqrt{1-h_{ii}}`, centred; Davison & Hinkley
    1997, *Bootstrap Methods and their Application*, §6.2.3 — from memory for the section),
    parametric (normal errors) and whole-animal resampling for destructive designs.

Intervals
    Percentile and BCa (Efron 1987, J. Am. Stat. Assoc. 82:171–185; Efron & Tibshirani
    1993, *An Introduction to the Bootstrap*, ch. 14); the BCa acceleration comes from the
    leave-one-out jackknife (one data point — one animal in a destructive design — left out).

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

from .conventions import check_choice as _choice
from .conventions import check_level as _check_level
from .conventions import check_positive_int as _positive_int
from .derived import (
    INTERVAL_COLUMNS,
    LN2,
    check_fit,
    design_span,
    fit_mrt,
    fit_time_to,
    natural_range,
)
from .engine import Problem
from .errors import ConvergenceWarning, DataError
from .lazystats import stats

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
    "BootstrapResult",
    "bootstrap",
    "BOOTSTRAP_KINDS",
    "INTERVAL_METHODS",
    "HAS_JOBLIB",
    "HAS_TQDM",
]

#: Kinds of resampling of :func:`bootstrap`.
BOOTSTRAP_KINDS = ("residual", "parametric", "subjects")
#: Interval methods of :meth:`BootstrapResult.intervals`.
INTERVAL_METHODS = ("percentile", "bca")

# A replicate whose fit runs to the edge of the parameter space (a rate to 0 or infinity, a
# pool fraction to 0, two pools' gap to the cap of the coordinate map) is a least-squares
# estimate at the boundary, not a failure. Thresholds (library rule):
_EDGE_SLOW = 1e-3      # k * (last sampling time after the switch) below this: rate -> 0
_EDGE_FAST = 30.0      # k * (first sampling time after the switch) above this: rate -> inf
_EDGE_FRACTION = 1e-6  # pool fraction below this: the pool has vanished
_EDGE_GAP = 3.99       # log-gap coordinate at the cap (4) of the coordinate map


def _standard_quantities(fit):
    """name -> function of theta of the quantities every method reports."""
    kin = fit.kinetics
    out = {}
    for i, j in enumerate(kin.rate_index):
        out[f"half_life_{i + 1}"] = (lambda th, j=j: LN2 / th[j])
    out["time_to_95"] = fit_time_to(fit, 0.95)
    out["mean_residence_time"] = fit_mrt(fit)
    return out


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
        self.first, self.span = design_span(fit)
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
        raise DataError(f"'n_jobs' must be a positive integer or -1 (all cores); got "
                        f"{n_jobs!r}")
    return int(n_jobs)


# ----------------------------------------------------------------------------------------
# Bootstrap result
# ----------------------------------------------------------------------------------------
@dataclass
class BootstrapResult:
    """Replicate estimates of a bootstrap of one fit (made by :func:`bootstrap`).

    Parameters
    ----------
    replicates : DataFrame
        One row per replicate, in replicate order, failed ones included (values NaN):
        every natural parameter, ``half_life_i``, ``time_to_95``, ``mean_residence_time``,
        the user's quantities, ``rss`` (weighted RSS of the refit) and ``status``
        (``"ok"``, ``"boundary"``: the refit ran to the edge of the parameter space — a
        rate to 0 or infinity, a pool to nothing — its values are kept; ``"failed"``: the
        refit's cost is not finite or the optimizer did not converge away from any edge).
    kind : {"residual", "parametric", "subjects"}
        Kind of resampling (see :func:`bootstrap`).
    n : int
        Replicates asked for.
    n_failed, n_boundary : int
        Replicates whose refit failed, and that ran to the edge of the parameter space.
    estimates : dict
        The fit's values of every column (the centre of BCa and the ``estimate`` column).
    fixed : tuple of str
        Quantities fixed in the fit.
    seed : numpy.random.SeedSequence, optional
        Root seed; replicate b drew from its b-th spawned child.
    _fit : TurnoverFit, optional
        Internal: the fit that was bootstrapped (read it as :attr:`fit`).
    _refitter : object, optional
        Internal: the replicate refitter, reused by the jackknife of BCa intervals.
    _functions : dict, optional
        Internal: name -> function of θ of every reported quantity.
    _jackknife : dict, optional
        Internal: cache of the leave-one-out values (computed on first BCa use).
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
        """Names of the quantities with replicate values.

        Returns
        -------
        list of str
            Every column of :attr:`replicates` except ``rss`` and ``status``.
        """
        return [c for c in self.replicates.columns if c not in ("rss", "status")]

    @property
    def usable(self) -> pd.DataFrame:
        """Replicates whose refit succeeded.

        Returns
        -------
        DataFrame
            The rows of :attr:`replicates` with status ``ok`` or ``boundary``.
        """
        return self.replicates[self.replicates["status"] != "failed"]

    @property
    def fit(self):
        """The fit that was bootstrapped.

        Returns
        -------
        TurnoverFit or None
            None for a result built without one.
        """
        return self._fit

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

        Parameters
        ----------
        level : float, default=0.95
            Confidence level, in (0, 1).
        method : {"percentile", "bca"}, default="percentile"
            Percentile or bias-corrected and accelerated interval.

        Returns
        -------
        DataFrame
            Columns parameter, estimate, stderr (sd of the replicates), lower, upper,
            level, method (``bootstrap_percentile``, ``bootstrap_bca`` or ``fixed``),
            lower_status, upper_status; ``attrs`` hold n_boot, n_used, n_failed, kind and
            n_not_computable.
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
            lo_nat, hi_nat = (natural_range(kin, q) if kin is not None
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
        if self._jackknife is None:
            self._jackknife = _jackknife(self._fit, self._refitter, self._functions)
        return self._jackknife


# ----------------------------------------------------------------------------------------
# Jackknife and the BCa machinery
# ----------------------------------------------------------------------------------------
def _jackknife(fit, refitter, functions):
    """Leave-one-out estimates of every quantity: dict name -> ndarray (n,).

    Point i left out (one animal in a destructive design), the rest refitted with the
    bootstrap's refitter (warm start from the fit); a failed refit gives NaN (Efron &
    Tibshirani 1993, ch. 11 — from memory for the chapter). Empty when fewer than p + 1
    points would remain (library rule: each refit keeps a residual degree of freedom).
    """
    n = fit.nobs
    if n - 1 < fit.nvarys + 1:
        return {}
    thetas = np.full((n, fit.kinetics.n_params), np.nan)
    for i in range(n):
        keep = np.arange(n) != i
        t, y = fit.t[keep], fit.y[keep]
        sig = None if fit.sigma is None else fit.sigma[keep]
        with np.errstate(all="ignore"):
            th, _, _, st = refitter.refit(t, y, sig)
        if th is not None and st != _FAILED:
            thetas[i] = th
    return _quantity_values(fit, thetas, functions)


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


# ----------------------------------------------------------------------------------------
# The bootstrap run
# ----------------------------------------------------------------------------------------
def _user_quantities(quantities, fit, reserved):
    if quantities is None:
        return {}
    if not isinstance(quantities, dict):
        raise DataError(f"'quantities' must be a dict of name -> function of theta; got "
                        f"{type(quantities).__name__}")
    out = {}
    for nm, fn in quantities.items():
        if not isinstance(nm, str) or not nm:
            raise DataError(f"'quantities' keys must be non-empty strings; got {nm!r}")
        if nm in reserved:
            raise DataError(f"'quantities' name {nm!r} is already a reported quantity; choose "
                            "another name")
        if not callable(fn):
            raise DataError(f"'quantities[{nm!r}]' must be a function of theta; got "
                            f"{type(fn).__name__}")
        try:
            v = float(fn(fit.state.theta))
        except Exception as e:  # a user's function may raise anything: report it clearly
            raise DataError(f"'quantities[{nm!r}]' fails at the fitted parameters: {e}") from e
        if not math.isfinite(v):
            raise DataError(f"'quantities[{nm!r}]' is not finite at the fitted parameters "
                            f"(got {v!r})")
        out[nm] = fn
    return out


def bootstrap(fit, n=1000, kind="residual", rng=None, n_jobs=1, progress=None,
              quantities=None, *, leverage=True, multi_start="auto",
              chunk_size=None) -> BootstrapResult:
    r"""Bootstrap a fit: refit ``n`` resampled data sets, warm-started from the fit.

    The kinds of resampling:

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
        The fit to bootstrap (not a joint fit with body masses or a propagated growth
        curve); left unchanged.
    n : int, default=1000
        Number of replicates (Efron & Tibshirani 1993 advise ≥ 1000 for percentile and BCa
        intervals).
    kind : {"residual", "parametric", "subjects"}, default="residual"
        Kind of resampling (above).
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
        When to add the automatic starting values to the warm start (above).
    chunk_size : int, optional
        Replicates per job (default: about 4 chunks per worker, at most 250).

    Returns
    -------
    BootstrapResult
        Failed replicates are kept (NaN values, status ``failed``), counted in ``n_failed``
        and announced with a :class:`~isoturnover.ConvergenceWarning`.
    """
    check_fit(fit, "bootstrap")
    n = _positive_int("n", n)
    kind = _choice("kind", kind, BOOTSTRAP_KINDS)
    workers = _n_workers(n_jobs)
    if multi_start not in ("auto", True, False):
        raise DataError(f"'multi_start' must be 'auto', True or False; got {multi_start!r}")
    if progress not in (None, True, False):
        raise DataError(f"'progress' must be True, False or None; got {progress!r}")
    if kind == "subjects":
        design = fit.data_info.get("design")
        if design != "destructive":
            raise DataError(
                "kind='subjects' resamples whole animals and needs a destructive-sampling fit "
                f"(one animal per sample, fitted from a samples frame); this fit's design is "
                f"{design!r}. For repeated measures of several animals fit each animal "
                "(iso.fit_each) and resample animals from those fits; for one animal use "
                "kind='residual' or 'parametric'"
            )
    elif fit.dof <= 0:
        raise DataError(f"kind={kind!r} needs residual degrees of freedom; 'fit' has "
                        f"{fit.nobs} points for {fit.nvarys} free parameters")
    if fit.nvarys == 0:
        raise DataError("'fit' has no free parameters: nothing to bootstrap")
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


