r"""Shared fits: several series fitted at once, some parameters common to all of them.

A study holds several animals (and often several tissues or isotopes). :func:`fit_shared`
fits every series (a *block*: one animal, or one animal's tissue and isotope) with its own
turnover model, while the parameters named in ``shared`` take one value for all blocks
(``shared=("k1",)``) or one value per level of a column (``shared={"k1": "group"}``: one
rate per diet group, say). The others (plateaus, the other pools …) stay per block and are
named with the block's label (``delta_eq_G01``).

The joint problem is a weighted least-squares problem in internal coordinates: log-rates,
stick-breaking logits for pool fractions (fractions are shared together or not at all),
the other parameters as themselves (``lag >= 0``). Its Jacobian is exact (each block's
kinetics, :meth:`~isoturnover.kinetics.TurnoverKinetics.evaluate`, times the coordinate
map) and block-sparse — a block's residuals depend only on its own and the shared
coordinates — so with many blocks it is passed to :func:`scipy.optimize.least_squares` as a
sparse matrix (trust-region reflective with LSMR); small problems use the dense exact
trust-region solver.

Residual variances. With ``variance="per_block"`` each block has its own residual variance
:math:`s_b^2`, estimated by maximum likelihood together with the parameters (alternating
weighted fits and :math:`s_b^2 = \mathrm{RSS}_b/n_b` until the weights settle; the
alternation is the coordinate ascent of the Gaussian likelihood). With ``"common"`` one
variance for all. ``"auto"`` takes per-block variances when every block has at least two
points more than its own parameters.

Intervals. Shared parameters get profile-likelihood intervals with the project's one root
finder (:func:`~isoturnover.profiles.find_bound`): the weights fixed at their estimates,
:math:`D(u) = (\mathrm{RSS}_w(u) - \mathrm{RSS}_w)/s^2` against :math:`F_{1,N-P}` (the
feasible-GLS convention: estimated weights treated as known, slightly optimistic when
blocks hold few points). Per-block parameters get asymptotic (Wald) intervals. A
whole-animal bootstrap (:meth:`SharedFit.bootstrap`) resamples blocks with replacement.

Comparison. :meth:`SharedFit.compare_sharing` sets the shared fit against the blocks fitted
alone, by AICc on the Gaussian likelihood with the same variance structure (Burnham &
Anderson 2002, *Model Selection and Multimodel Inference*, §2.4 — from memory for the
section); :func:`compare_groups` tests whether a rate differs between groups (likelihood
ratio, or its F form with a common variance) and gives the ratio of the groups'
half-lives with its profile interval.
"""

from __future__ import annotations

import math
import re
import warnings

import numpy as np
import pandas as pd
from scipy import sparse, special

from .conventions import check_choice, check_level, check_method, check_positive_int
from .data import read_samples
from .errors import DataError, FitError
from .groups import parallel_workers
from .jointproblem import (
    MODEL_OPTIONS,
    Block,
    Joint,
    Layout,
    bootstrap_refits,
    check_models,
    diet_of,
    key_label,
    loglik,
    natural_bound,
    parse_shared,
    read_study,
    safe_label,
    start_coordinates,
)
from .lazystats import stats
from .model import TurnoverModel

try:  # optional (the "fast" extra): parallel bootstrap refits
    import joblib as _joblib
except ImportError:  # pragma: no cover - exercised only without joblib
    _joblib = None

__all__ = ["fit_shared", "SharedFit", "compare_groups"]

_LN2 = math.log(2.0)


# ----------------------------------------------------------------------------------------
# blocks and the joint layout
# ----------------------------------------------------------------------------------------
# ----------------------------------------------------------------------------------------
# reading the study
# ----------------------------------------------------------------------------------------
# ----------------------------------------------------------------------------------------
# public entry points
# ----------------------------------------------------------------------------------------
def fit_shared(samples, *, pools=1, shared=("k1",), by="subject", diets=None,
               variance="auto", models=None, model_by="tissue", **options):
    r"""Fit several series at once with some parameters common to all (or to groups).

    Parameters
    ----------
    samples : path or DataFrame
        Samples table (:func:`~isoturnover.read_samples`); analytic replicates are averaged.
    pools : int, default=1
        Parallel pools of every series' model (or 2 with ``structure="chain"``).
    shared : sequence of str or dict, default=("k1",)
        Parameters common to every series (``("k1",)``), or a dict name → column for one
        value per level of that column (``{"k1": "group"}``) or → None (all). Pool
        fractions are shared together (naming one shares all).
    by : str or sequence of str, default="subject"
        Columns that make a series (a block); each block must hold one tissue and one
        isotope (add ``"tissue"``, ``"isotope"`` to ``by`` otherwise).
    diets : DietHistory, dict, DataFrame or path, optional
        Diet history of every block, a dict block key (tuple, single value or label)
        → DietHistory, or a diets table (:func:`~isoturnover.read_diets`) matched to each
        block by subject, else group, and isotope, as :func:`~isoturnover.fit_each` does.
        None: one step switch at time 0 (``delta0`` → ``delta_eq``).
    variance : {"auto", "per_block", "common"}, default="auto"
        Residual variance per block (estimated by maximum likelihood with the parameters)
        or one for all; ``"auto"``: per block when every block has at least two points
        more than its own parameters.
    models : dict, optional
        A model per level of ``model_by``: level → options of
        :class:`~isoturnover.TurnoverModel` (``pools`` and those below) that replace the
        common ones for the series of that level. A measured precursor and its product:
        ``models={"plasma": {"pools": 1}, "red_cells": {"structure": "chain"}}`` with
        ``shared=("k1",)`` makes the chain's first step the plasma's own rate, so the
        chain's two rates (which the product alone cannot tell apart: its response is
        symmetric in them) become identifiable.
    model_by : str, default="tissue"
        Column whose levels ``models`` names.
    **options
        Options of :class:`~isoturnover.TurnoverModel`: ``structure``, ``lag``,
        ``separation``, ``scale``, ``isotope``, ``initial``, ``per_diet_separation``.

    Returns
    -------
    SharedFit

    Raises
    ------
    DataError
        For an unknown column, parameter or option, a block with several tissues or
        isotopes, or a block with fewer points than its own parameters.
    FitError
        When the joint fit does not reach finite residuals.
    """
    unknown = sorted(set(options) - set(MODEL_OPTIONS))
    if unknown:
        raise DataError(f"fit_shared: unknown option(s) {', '.join(unknown)}; allowed: "
                        f"{', '.join(MODEL_OPTIONS)}")
    variance = check_choice("variance", variance, ("auto", "per_block", "common"))
    frame, by, unit = read_study(samples, by)
    groups = list(frame.groupby(list(by), sort=True))
    if len(groups) < 2:
        raise DataError(f"fit_shared needs at least two series (blocks by {', '.join(by)}); "
                        f"got {len(groups)}")
    model_options = dict(options)
    per_level = check_models(models, model_by, frame)
    built = []  # (key, sub, model)
    for key, sub in groups:
        key = key if isinstance(key, tuple) else (key,)
        for col in ("tissue", "isotope"):
            if col in sub.columns and sub[col].astype(str).nunique() > 1:
                raise DataError(f"the series {key!r} holds several {col}s; add {col!r} to 'by'")
        opts = dict(model_options)
        if per_level:
            lev = sub[model_by].astype(str).unique()
            if len(lev) != 1:
                raise DataError(f"'model_by': column {model_by!r} must be constant within each "
                                f"series; series {key!r} has {', '.join(lev)}")
            opts.update(per_level.get(lev[0], {}))
        n_pools = opts.pop("pools", pools)
        m = TurnoverModel(n_pools, diet=diet_of(diets, key, sub), **opts)
        if m.kinetics.growth_kind is not None:
            raise DataError("fit_shared does not fit growth dilution")
        built.append((key, sub.sort_values("time", kind="stable"), m))
    names = []
    for _, _, m in built:
        names += [nm for nm in m.kinetics.param_names if nm not in names]
    scopes = parse_shared(shared, tuple(names), frame, by)
    scope_cols = sorted({c for c in scopes.values() if c is not None})
    blocks, models = [], []
    for key, sub, m in built:
        levels = {}
        for col in scope_cols:
            vals = sub[col].astype(str).unique()
            if len(vals) != 1:
                raise DataError(f"'shared': column {col!r} must be constant within each "
                                f"series; series {key!r} has {', '.join(vals)}")
            levels[col] = vals[0]
        sd = None
        if "sd" in sub.columns and sub["sd"].notna().all():
            sd = sub["sd"].to_numpy(float)
        blocks.append(Block(key, key_label(key), m.kinetics, sub["time"].to_numpy(float),
                            sub["value"].to_numpy(float), sd, levels))
        models.append(m)
    labels = [b.label for b in blocks]
    if len(set(labels)) != len(labels):
        raise DataError("two series have the same label after cleaning their keys "
                        f"({', '.join(labels)})")
    return _fit(blocks, models, scopes, by, unit, variance, pools, model_options)


def _fit(blocks, models, scopes, by, unit, variance, pools, model_options, contrast=(),
         start=None):
    layout = Layout(blocks, scopes, contrast)
    own = [sum(1 for r in rows if len(r) == 1 and not _is_shared(layout, r[0]))
           for rows in layout.rows]
    for b, o in zip(blocks, own):
        if b.n < o:
            raise DataError(f"the series {b.key!r} has {b.n} points for {o} parameters of its "
                            "own; share more parameters or drop it")
    if variance == "auto":
        variance = "per_block" if all(b.n >= o + 2 for b, o in zip(blocks, own)) else "common"
    problem = Joint(layout)
    separate = [None] * len(blocks)
    if start is None:
        start, separate = start_coordinates(problem, models)
    z, converged, n_iter = problem.fit(start, variance == "per_block")
    r = problem.residuals(z)
    if not np.all(np.isfinite(r)):
        raise FitError("the shared fit did not reach finite residuals")
    return SharedFit(problem, z, converged, variance, by, unit, scopes, pools, model_options,
                     separate, n_iter, contrast)


def _is_shared(layout, j):
    return "@" not in layout.labels[j] or "=" in layout.labels[j]


# ----------------------------------------------------------------------------------------
# the result
# ----------------------------------------------------------------------------------------
class SharedFit:
    """A joint fit of several series with shared parameters (from :func:`fit_shared`).

    Made by :func:`fit_shared` and :func:`compare_groups`; not meant to be built by hand.

    Parameters
    ----------
    problem : jointproblem.Joint
        The joint problem (blocks, layout, variance scales at the optimum).
    z : ndarray
        Joint coordinates at the optimum.
    converged : bool
        Whether the fit converged.
    variance : {"per_block", "common"}
        Residual-variance structure.
    by : tuple of str
        Columns that make a block.
    unit : str
        Time unit.
    scopes : dict
        Shared parameter → None (all blocks) or the column whose levels it follows
        (``"f"`` stands for the pool fractions).
    pools : int
        Pools of each block's model.
    model_options : dict
        Options of the blocks' :class:`~isoturnover.TurnoverModel`.
    separate : list
        Each block's fit alone (:class:`~isoturnover.TurnoverFit` or None).
    n_iter : int
        Rounds of the variance iteration.
    contrast : tuple of str
        Columns whose per-level parameters are coded as reference + difference.

    Attributes
    ----------
    by : tuple of str
        Columns that make a block.
    subjects : list of tuple
        Block keys, in the order of the tables.
    variance : {"per_block", "common"}
        Residual-variance structure used.
    converged : bool
        The joint fit (and the variance iteration) converged.
    warnings : list of str
        Trust notes (blocks that could not be fitted alone, pools whose order differs
        between blocks, a variance iteration that did not settle, …).
    time_unit : str
        Time unit of the rates and half-lives.
    """

    def __init__(self, problem, z, converged, variance, by, unit, scopes, pools,
                 model_options, separate, n_iter, contrast):
        self._p = problem
        self._L = problem.L
        self.z = z
        self.converged = bool(converged)
        self.variance = variance
        self.by = by
        self.time_unit = unit
        self.scopes = dict(scopes)
        self.pools = pools
        self.model_options = dict(model_options)
        self._separate = separate
        self._contrast = tuple(contrast)
        self.subjects = [b.key for b in problem.blocks]
        r = problem.residuals(z)
        self.residuals = r
        self.rss = float(r @ r)
        self.nobs = problem.N
        self.nvarys = self._L.size
        self.dof = self.nobs - self.nvarys
        self._profiles = {}
        self.warnings = []
        if not converged:
            self.warnings.append(f"the joint fit did not converge (after {n_iter} rounds of "
                                 "the variance iteration)")
        failed = [b.label for b, f in zip(problem.blocks, separate) if f is None]
        if failed and any(f is not None for f in separate):
            self.warnings.append("fitted alone, these series gave no start (the median of the "
                                 f"others was used): {', '.join(failed)}")
        if self.dof <= 0:
            self.warnings.append("no residual degrees of freedom: intervals are not available")
        self._check_order()
        J = problem.jacobian(z)
        J = J.toarray() if sparse.issparse(J) else J
        s2 = self.rss / self.dof if self.dof > 0 else math.nan
        try:
            self.cov_z = np.linalg.pinv(J.T @ J) * s2
        except np.linalg.LinAlgError:
            self.cov_z = np.full((self.nvarys, self.nvarys), math.nan)
        self.s2 = s2

    # -- basic quantities -----------------------------------------------------------------
    def _check_order(self):
        bad = []
        for k, b in enumerate(self._p.blocks):
            sh = self._L.shapes[k]
            idx = [j for _, kind, j in sh.local if kind == "log"]
            if len(idx) >= 2 and not sh.chain and \
                    np.any(np.diff(self._p.block_theta(self.z, k)[idx]) > 0):
                bad.append(b.label)
        if bad:
            self.warnings.append("in these series the pools are not ordered fastest first "
                                 f"(a shared rate sits between their own): {', '.join(bad)}")

    @property
    def loglik(self) -> float:
        r"""Gaussian log-likelihood with the fitted variance structure.

        Per block: :math:`-\tfrac{n_b}{2}[\ln(2\pi\,\mathrm{RSS}_b/n_b) + 1] -
        \sum \ln\sigma_i` (relative σ); common: the same with the pooled RSS.

        Returns
        -------
        float
        """
        return loglik(self._p, self.z, self.variance)

    @property
    def n_params(self) -> int:
        """Free coordinates plus the variance parameters (one per block, or one).

        Returns
        -------
        int
        """
        return self.nvarys + (len(self._p.blocks) if self.variance == "per_block" else 1)

    @property
    def aic(self) -> float:
        """Akaike's criterion :math:`2k - 2\\ln L` with ``k = n_params``.

        Returns
        -------
        float
        """
        return 2 * self.n_params - 2 * self.loglik

    @property
    def aicc(self) -> float:
        """AIC with the small-sample correction :math:`2k(k+1)/(N-k-1)` (Hurvich & Tsai 1989).

        Returns
        -------
        float
            ``inf`` when :math:`N \\le k + 1`.
        """
        k, n = self.n_params, self.nobs
        return self.aic + 2 * k * (k + 1) / (n - k - 1) if n > k + 1 else math.inf

    @property
    def bic(self) -> float:
        """Schwarz's criterion :math:`k\\ln N - 2\\ln L`.

        Returns
        -------
        float
        """
        return self.n_params * math.log(self.nobs) - 2 * self.loglik

    # -- parameters -----------------------------------------------------------------------
    def _param_entries(self):
        """(name, scope label, block index of a representative, natural index)."""
        out, seen = [], set()
        for k, b in enumerate(self._p.blocks):
            sh = self._L.shapes[k]
            for j, nm in enumerate(sh.names):
                if j in sh.frac_idx and len(sh.frac_idx) == 1:
                    continue  # one pool: f1 = 1, not a parameter
                if j in sh.frac_idx:
                    scope = self.scopes.get("f", False)
                else:
                    scope = self.scopes.get(nm, False)
                if scope is False:
                    lab = b.label
                elif scope is None:
                    lab = "all"
                else:
                    lab = f"{scope}={b.levels[scope]}"
                if (nm, lab) in seen:
                    continue
                seen.add((nm, lab))
                out.append((nm, lab, k, j))
        return out

    def _grad(self, k, j):
        th, D = self._p.block_theta(self.z, k, jac=True)
        g = np.zeros(self.nvarys)
        g[self._L.cols[k]] = D[j] @ self._L.A[k]
        return th[j], g

    def _param_name(self, nm, lab):
        return nm if lab == "all" else f"{nm}_{safe_label(lab)}"

    @property
    def params(self):
        """lmfit Parameters: natural names, per-block ones suffixed with the block label.

        Returns
        -------
        lmfit.Parameters
            Values and standard errors (delta method from the joint covariance).
        """
        import lmfit

        ps = lmfit.Parameters()
        for nm, lab, k, j in self._param_entries():
            v, g = self._grad(k, j)
            name = self._param_name(nm, lab)
            ps.add(name, value=float(v), vary=bool(np.any(g != 0)))
            se = float(math.sqrt(max(g @ self.cov_z @ g, 0.0)))
            ps[name].stderr = se if math.isfinite(se) else None
        return ps

    def conf_int(self, level=0.95, method="profile") -> pd.DataFrame:
        """Intervals of every parameter.

        Shared parameters (one value for all blocks, or per level of a column) get the
        chosen method; per-block parameters always the asymptotic (Wald) interval.

        Parameters
        ----------
        level : float, default=0.95
            Confidence level in (0, 1).
        method : {"profile", "asymptotic"}, default="profile"

        Returns
        -------
        DataFrame
            Columns ``parameter``, ``scope`` (``"all"``, ``"column=level"`` or the block
            label), then estimate, lower, upper, level, method, lower_status,
            upper_status.
        """
        level = check_level(level)
        method = check_method(method, ("profile", "asymptotic"))
        rows = []
        for nm, lab, k, j in self._param_entries():
            iv = self._interval(nm, lab, k, j, level, method if lab != self._subject_scope(k)
                                else "asymptotic")
            rows.append({"parameter": nm, "scope": lab, **iv})
        return pd.DataFrame(rows)

    def _subject_scope(self, k):
        return self._p.blocks[k].label

    def _single_coordinate(self, k, j):
        """The joint coordinate that alone sets natural parameter j (or None)."""
        sh = self._L.shapes[k]
        nm = sh.names[j]
        if j in sh.frac_idx:
            if len(sh.frac_idx) != 2 or sh.frac_idx.index(j) != 0:
                return None
            i = next(i for i, (_, kind, _x) in enumerate(sh.local) if kind == "stick")
        else:
            i = next(i for i, (n2, _k, _x) in enumerate(sh.local) if n2 == nm)
        rows = self._L.rows[k][i]
        return (rows[0], sh.local[i][1]) if len(rows) == 1 else None

    def _interval(self, nm, lab, k, j, level, method):
        key = (nm, lab, level, method)
        if key in self._profiles:
            return self._profiles[key]
        v, g = self._grad(k, j)
        se = math.sqrt(max(g @ self.cov_z @ g, 0.0))
        out = None
        if method == "profile" and self.dof > 0:
            single = self._single_coordinate(k, j)
            if single is not None:
                out = self._profile(single[0], single[1], level, v)
        if out is None:
            method = "asymptotic"
            q = stats.t.ppf(0.5 + level / 2, self.dof) if self.dof > 0 else math.nan
            lo, hi = v - q * se, v + q * se
            ok = "ok" if math.isfinite(se) and self.dof > 0 else "failed"
            out = {"estimate": v, "lower": lo, "upper": hi, "level": level,
                   "method": "asymptotic", "lower_status": ok, "upper_status": ok}
        self._profiles[key] = out
        return out

    def _profile(self, i, kind, level, value):
        """Profile-likelihood interval of joint coordinate ``i`` (natural scale)."""
        crit = float(special.fdtri(1, self.dof, level))
        se_u = math.sqrt(max(self.cov_z[i, i], 0.0))
        if not math.isfinite(se_u) or se_u <= 0:
            return None
        lo, hi = self._p.profile_bounds(self.z, i, kind, crit, self.s2, self.rss, se_u)
        (lv, ls), (uv, us) = natural_bound(lo, kind, -1), natural_bound(hi, kind, 1)
        return {"estimate": value, "lower": lv, "upper": uv, "level": level,
                "method": "profile", "lower_status": ls, "upper_status": us}

    def half_lives(self, level=0.95, method="profile") -> pd.DataFrame:
        """Half-lives ln 2 / k of every rate, with intervals (profile for shared rates).

        Parameters
        ----------
        level : float, default=0.95
        method : {"profile", "asymptotic"}, default="profile"

        Returns
        -------
        DataFrame
            Columns ``pool``, ``scope``, ``rate``, ``half_life``, lower, upper, level,
            method, lower_status, upper_status (bounds of the half-life, in
            :attr:`time_unit`).
        """
        ci = self.conf_int(level, method)
        rows = []
        for _, r in ci[ci["parameter"].isin(self._L.rate_names)].iterrows():
            k = r["estimate"]
            rows.append({"pool": int(r["parameter"][1:]), "scope": r["scope"], "rate": k,
                         "half_life": _LN2 / k, "estimate": _LN2 / k,
                         "lower": _LN2 / r["upper"] if r["upper"] > 0 else math.inf,
                         "upper": _LN2 / r["lower"] if r["lower"] > 0 else math.inf,
                         "level": r["level"], "method": r["method"],
                         "lower_status": r["upper_status"], "upper_status": r["lower_status"]})
        return pd.DataFrame(rows)

    def table(self) -> pd.DataFrame:
        """One row per block: its key, every natural parameter's value, n, RSS and s_b.

        Returns
        -------
        DataFrame
            Key columns (``by``), then the natural parameters (shared ones repeat),
            ``n``, ``rss`` (sum of squared residuals over the relative σ: ‰² without an
            ``sd`` column) and ``residual_sd`` (‰, unweighted: the root mean square of the
            block's residuals, or of all residuals with one common variance).
        """
        rows = []
        raw = [self._p.raw(self.z, k) * b.sd for k, b in enumerate(self._p.blocks)]
        all_sd = math.sqrt(sum(float(r @ r) for r in raw) / self.nobs)
        rb = self._p.block_rss(self.z)
        for k, b in enumerate(self._p.blocks):
            th = self._p.block_theta(self.z, k)
            row = dict(zip(self.by, b.key))
            sh = self._L.shapes[k]
            row.update({nm: float(v) for j, (nm, v) in enumerate(zip(sh.names, th))
                        if not (j in sh.frac_idx and len(sh.frac_idx) == 1)})
            row.update({"n": b.n, "rss": rb[k],
                        "residual_sd": math.sqrt(float(raw[k] @ raw[k]) / max(b.n, 1))
                        if self.variance == "per_block" else all_sd})
            rows.append(row)
        return pd.DataFrame(rows)

    def predict(self, t, subject) -> np.ndarray:
        """Fitted δ (‰) of one block at times ``t``.

        Parameters
        ----------
        t : array-like
            Times in :attr:`time_unit`.
        subject : tuple, scalar or str
            The block's key (a value when ``by`` has one column) or its label.

        Returns
        -------
        ndarray
        """
        k = self._block_index(subject)
        b = self._p.blocks[k]
        return b.kin.predict(np.atleast_1d(np.asarray(t, float)), self._p.block_theta(self.z, k))

    def _block_index(self, subject):
        for k, b in enumerate(self._p.blocks):
            if subject == b.key or (len(b.key) == 1 and subject == b.key[0]) or \
                    str(subject) == b.label:
                return k
        raise DataError(f"'subject': no series {subject!r}; known: "
                        f"{', '.join(b.label for b in self._p.blocks)}")

    # -- comparison -----------------------------------------------------------------------
    def compare_sharing(self) -> pd.DataFrame:
        """AICc of the shared fit against every block fitted alone.

        The blocks fitted alone use the same variance structure (their own variance per
        block, or one pooled variance) so the two likelihoods are comparable.

        Returns
        -------
        DataFrame
            Rows ``shared`` and ``separate``: n_params, loglik, aic, aicc, bic,
            delta_aicc, weight (Akaike weights).

        Raises
        ------
        FitError
            When a block could not be fitted alone.
        """
        if any(f is None for f in self._separate):
            raise FitError("a series could not be fitted alone; the separate model is not "
                           "available")
        short = [b.label for k, b in enumerate(self._p.blocks)
                 if b.n <= len(self._L.shapes[k].local) + 1]
        if self.variance == "per_block" and short:
            raise FitError("fitted alone with a variance of their own, these series have no "
                           f"residual degrees of freedom: {', '.join(short)}")
        scopes = {}
        sep = _fit(self._p.blocks, [None] * len(self._p.blocks), scopes, self.by,
                   self.time_unit, self.variance, self.pools, self.model_options,
                   start=self._separate_start())
        rows = []
        for name, f in (("shared", self), ("separate", sep)):
            rows.append({"model": name, "n_params": f.n_params, "loglik": f.loglik,
                         "aic": f.aic, "aicc": f.aicc, "bic": f.bic})
        out = pd.DataFrame(rows).set_index("model")
        out["delta_aicc"] = out["aicc"] - out["aicc"].min()
        w = np.exp(-0.5 * out["delta_aicc"])
        out["weight"] = w / w.sum()
        return out

    def _separate_start(self):
        L = Layout(self._p.blocks, {})
        z = np.zeros(L.size)
        for k, f in enumerate(self._separate):
            sh = L.shapes[k]
            th = np.array([f.params[nm].value for nm in sh.names])
            c = sh.local_from_theta(th)
            for i, rows in enumerate(L.rows[k]):
                z[rows[0]] = c[i]
        return np.maximum(z, L.lower)

    # -- bootstrap ------------------------------------------------------------------------
    def bootstrap(self, n=999, rng=0, level=0.95, n_jobs=1) -> pd.DataFrame:
        """Whole-animal bootstrap of the shared parameters and their half-lives.

        Blocks are drawn with replacement (within the levels of the columns that scope
        shared parameters), the joint model refitted from the estimate, and percentile
        intervals reported.

        Replicate ``r`` draws its blocks from its own child of one
        :class:`numpy.random.SeedSequence` (seeded from ``rng``), so the draws, and the
        table, are the same whatever ``n_jobs`` and however the replicates are shared out.
        The refits run through joblib: under ``with joblib.parallel_backend("dask"):`` (and
        a ``dask.distributed.Client``) they run on the cluster with no other change.

        Parameters
        ----------
        n : int, default=999
            Replicates.
        rng : int, numpy Generator or None, default=0
            Seed or generator of the draws (a generator is advanced by one draw).
        level : float, default=0.95
        n_jobs : int, default=1
            Parallel workers for the refits (joblib; ``-1`` all cores, or the workers of
            the active joblib backend). Without joblib a warning is given and the refits
            run serially. The result does not depend on it.

        Returns
        -------
        DataFrame
            Columns ``parameter``, ``scope``, estimate, lower, upper, level, method
            (``"bootstrap"``), lower_status, upper_status, ``n_failed``.
        """
        n = check_positive_int("n", n)
        level = check_level(level)
        workers = parallel_workers(n_jobs)
        gen = np.random.default_rng(rng)
        root = np.random.SeedSequence([int(v) for v in gen.integers(0, 2**32, size=4)])
        blocks = self._p.blocks
        cols = sorted({c for c in self.scopes.values() if c is not None})
        strata = {}
        for k, b in enumerate(blocks):
            strata.setdefault(tuple(b.levels[c] for c in cols), []).append(k)
        picks = []
        for child in root.spawn(n):
            g = np.random.default_rng(child)
            picks.append(np.concatenate([g.choice(idx, size=len(idx), replace=True)
                                         for idx in strata.values()]))
        entries = [(nm, lab, k, j) for nm, lab, k, j in self._param_entries()
                   if lab == "all" or "=" in lab]
        # what every replicate needs, and no more: the blocks' data and kinetics, each
        # block's starting local coordinates, the sharing; not the fit and its caches
        starts = [self._L.A[k] @ self.z[self._L.cols[k]] for k in range(len(blocks))]
        setup = (blocks, starts, self.scopes, self._contrast, self.variance == "per_block",
                 [(lab, j) for _nm, lab, _k, j in entries])
        if workers == 1 or n < 2:
            parts = [bootstrap_refits(setup, picks)]
        else:
            # a few batches per worker: the blocks travel once per batch, not per replicate
            size = max(1, -(-n // (4 * max(1, _joblib.effective_n_jobs(workers)))))
            batches = [picks[i:i + size] for i in range(0, n, size)]
            parts = _joblib.Parallel(n_jobs=workers)(
                _joblib.delayed(bootstrap_refits)(setup, b) for b in batches)
        draws = np.vstack([d for d, _, _ in parts])
        failed = sum(f for _, f, _ in parts)
        for _d, _f, caught in parts:
            for message, category in caught:
                warnings.warn(message, category, stacklevel=2)
        rows = []
        a = (1 - level) / 2
        for e, (nm, lab, k, j) in enumerate(entries):
            d = draws[:, e]
            d = d[np.isfinite(d)]
            v, _ = self._grad(k, j)
            lo, hi = (np.quantile(d, [a, 1 - a]) if d.size >= 2 else (math.nan, math.nan))
            st = "ok" if d.size >= 2 else "failed"
            rows.append({"parameter": nm, "scope": lab, "estimate": v, "lower": float(lo),
                         "upper": float(hi), "level": level, "method": "bootstrap",
                         "lower_status": st, "upper_status": st, "n_failed": failed})
        return pd.DataFrame(rows)

    def summary(self, level=0.95) -> str:
        """Text summary: blocks, variance structure, shared parameters with intervals.

        Parameters
        ----------
        level : float, default=0.95

        Returns
        -------
        str
        """
        lines = [f"Shared fit of {len(self.subjects)} series (by {', '.join(self.by)}), "
                 f"{self.nobs} points, {self.nvarys} free parameters; residual variance "
                 f"{'per series' if self.variance == 'per_block' else 'common'}."]
        shared = ", ".join(f"{k} (per {v})" if v else k for k, v in self.scopes.items())
        lines.append(f"Shared: {shared or 'nothing'}.")
        ci = self.conf_int(level)
        for _, r in ci[(ci["scope"] == "all") | ci["scope"].str.contains("=")].iterrows():
            lines.append(f"  {r['parameter']} [{r['scope']}]: {r['estimate']:.5g} "
                         f"({r['lower']:.5g} to {r['upper']:.5g}, {level:.0%} {r['method']}; "
                         f"{r['lower_status']}/{r['upper_status']})")
        hl = self.half_lives(level)
        for _, r in hl[(hl["scope"] == "all") | hl["scope"].str.contains("=")].iterrows():
            lines.append(f"  half-life of pool {r['pool']} [{r['scope']}]: "
                         f"{r['half_life']:.4g} {self.time_unit} ({r['lower']:.4g} to "
                         f"{r['upper']:.4g})")
        lines.append(f"AICc {self.aicc:.2f}; converged: {self.converged}.")
        for w in self.warnings:
            lines.append(f"Note: {w}")
        return "\n".join(lines)

    def __repr__(self):
        return (f"SharedFit({len(self.subjects)} series, shared="
                f"{dict(self.scopes)!r}, variance={self.variance!r})")


def compare_groups(samples, *, group="group", parameter="k1", pools=1, by="subject",
                   shared=(), diets=None, variance="auto", level=0.95, **options):
    r"""Does a rate differ between groups? F (and likelihood-ratio) test, half-life ratios.

    Fits the series twice: with ``parameter`` common to all series (H0) and with one value
    per level of ``group`` (H1, coded as the reference level's value and each other
    level's difference on the log scale); both share the parameters in ``shared``. The test
    is the F test :math:`F = [(\mathrm{RSS}_0 - \mathrm{RSS}_1)/q] / [\mathrm{RSS}_1/(N - P_1)]`
    on the weighted problem of the by-group fit (with variances per series, those of the
    by-group fit held fixed, the convention of its profile intervals), so that the test and
    the interval of the ratio agree; the likelihood-ratio test with the variances
    re-estimated, :math:`2(\ln L_1 - \ln L_0) \sim \chi^2_q` (Wilks 1938), is reported
    beside it. For a rate the ratio of each level's half-life to the reference level's,
    :math:`e^{-d}`, gets the profile interval of the difference ``d``.

    Parameters
    ----------
    samples : path or DataFrame
    group : str, default="group"
        Column whose levels are compared (constant within each series).
    parameter : str, default="k1"
        The parameter compared.
    pools, by, diets, variance, **options
        As for :func:`fit_shared`.
    shared : sequence of str, default=()
        Other parameters common to all series in both fits.
    level : float, default=0.95

    Returns
    -------
    dict
        ``test`` (DataFrame: kind ``"F"``, statistic, df, df_resid, p_value, lr_statistic,
        lr_p_value, loglik and AICc of both fits),
        ``ratios`` (DataFrame: level, reference, ratio of half-lives (or of the parameter
        for a non-rate: the difference), lower, upper, statuses), ``common`` and
        ``by_group`` (the two :class:`SharedFit`).
    """
    level = check_level(level)
    if isinstance(shared, str):
        shared = (shared,)
    base = {nm: None for nm in shared if nm != parameter}
    if not isinstance(samples, pd.DataFrame):
        samples = read_samples(samples)  # read (and checked) once for both fits
    h0 = fit_shared(samples, pools=pools, shared={**base, parameter: None}, by=by,
                    diets=diets, variance=variance, **options)
    frame, by_t, unit = read_study(samples, by)
    if group not in frame.columns:
        raise DataError(f"'group': column {group!r} is not in the samples table")
    models = [TurnoverModel(pools, diet=b.kin.diet, **options)
              for b in h0._p.blocks]
    blocks = []
    for b in h0._p.blocks:
        sub = frame
        for col, v in zip(by_t, b.key):
            sub = sub[sub[col] == v]
        levs = sub[group].astype(str).unique()
        if len(levs) != 1:
            raise DataError(f"'group': column {group!r} must be constant within each series; "
                            f"series {b.key!r} has {', '.join(levs)}")
        blocks.append(Block(b.key, b.label, b.kin, b.t, b.y, b.sd if b.has_sd else None,
                             {**b.levels, group: levs[0]}))
    levels = sorted({b.levels[group] for b in blocks})
    if len(levels) < 2:
        raise DataError(f"'group': column {group!r} has one level ({levels[0]}); nothing to "
                        "compare")
    scopes = {**base, ("f" if re.fullmatch(r"f\d+", parameter) else parameter): group}
    h1 = _fit(blocks, models, scopes, h0.by, unit, h0.variance, pools, dict(options),
              contrast=(group,))
    q = len(levels) - 1
    # the F test of the differences, on the weighted problem of the by-group fit (its
    # variances held fixed, as its profile intervals hold them): the common fit is that
    # problem with every difference at 0, so the test and the ratio's interval agree
    diffs = [h1._L.index[f"{parameter}@{group}={lev}-{levels[0]}"] for lev in levels[1:]
             if f"{parameter}@{group}={lev}-{levels[0]}" in h1._L.index]
    _, rss0, ok0, _ = h1._p.solve(h1.z, fixed={i: 0.0 for i in diffs})
    if not ok0:
        rss0 = h0.rss * h1.s2 / h0.s2 if h0.variance == "common" else math.nan
    stat = ((rss0 - h1.rss) / q) / (h1.rss / h1.dof) if h1.dof > 0 else math.nan
    p = float(stats.f.sf(max(stat, 0.0), q, h1.dof)) if math.isfinite(stat) else math.nan
    lr = 2 * (h1.loglik - h0.loglik)
    test = pd.DataFrame([{"parameter": parameter, "group": group, "kind": "F",
                          "statistic": float(stat), "df": q, "df_resid": h1.dof,
                          "p_value": p, "lr_statistic": float(lr),
                          "lr_p_value": float(stats.chi2.sf(max(lr, 0.0), q)),
                          "loglik_common": h0.loglik, "loglik_by_group": h1.loglik,
                          "aicc_common": h0.aicc, "aicc_by_group": h1.aicc}])
    rows = []
    is_rate = parameter in h1._L.rate_names
    for lev in levels[1:]:
        i = h1._L.index.get(f"{parameter}@{group}={lev}-{levels[0]}")
        if i is None:
            continue
        d = float(h1.z[i])
        iv = h1._profile(i, "id", level, d) if h1.dof > 0 else None
        if iv is None:
            se = math.sqrt(max(h1.cov_z[i, i], 0))
            qq = stats.t.ppf(0.5 + level / 2, max(h1.dof, 1))
            iv = {"lower": d - qq * se, "upper": d + qq * se, "method": "asymptotic",
                  "lower_status": "ok", "upper_status": "ok"}
        if is_rate:  # ratio of half-lives = k_ref / k_level = exp(-d)
            est, lo, hi = math.exp(-d), math.exp(-iv["upper"]), math.exp(-iv["lower"])
            ls, us = iv["upper_status"], iv["lower_status"]
            what = "half-life ratio"
        else:
            est, lo, hi = d, iv["lower"], iv["upper"]
            ls, us = iv["lower_status"], iv["upper_status"]
            what = "difference"
        rows.append({"level": lev, "reference": levels[0], "quantity": what, "estimate": est,
                     "lower": lo, "upper": hi, "level_ci": level, "method": iv["method"],
                     "lower_status": ls, "upper_status": us})
    return {"test": test, "ratios": pd.DataFrame(rows), "common": h0, "by_group": h1}
