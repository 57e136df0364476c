r"""The joint least-squares problem of a shared fit (several series, common parameters).

Used by :mod:`isoturnover.sharedfit`. A *block* is one series (its kinetics and data); a
:class:`Layout` maps the joint coordinates to each block's local coordinates (log for
rates, stick-breaking logits for pool fractions, identity otherwise, ``lag >= 0``): a local
coordinate is one joint coordinate, or the sum of two with contrast coding (a reference
level's value plus a level's difference). :class:`Joint` evaluates the residuals and the
exact, block-sparse Jacobian (each block's kinetics times the coordinate map), solves the
weighted problem with :func:`scipy.optimize.least_squares`, and estimates per-block
residual variances by maximum likelihood.
"""

from __future__ import annotations

import math
import re
import warnings

import numpy as np
import pandas as pd
from scipy import optimize, sparse, special

from .diet import DietHistory
from .errors import DataError, DataWarning, FitError

__all__ = ["Block", "Shape", "Layout", "Joint", "loglik", "safe_label", "SPARSE_ABOVE",
           "read_study", "MODEL_OPTIONS", "check_models", "start_coordinates", "pooled_start",
           "bootstrap_refits", "in_scope", "natural_bound",
           "key_label", "parse_shared", "diet_of"]

#: Options of a TurnoverModel a shared fit passes on (besides ``pools``).
MODEL_OPTIONS = ("structure", "lag", "separation", "scale", "isotope", "initial",
                  "per_diet_separation")
SPARSE_ABOVE = 40  # joint coordinates from which the Jacobian is passed as sparse


class Block:
    """One series: its key, label, kinetics and data (t, y, relative σ)."""

    def __init__(self, key, label, kin, t, y, sd, levels):
        self.key, self.label, self.kin = key, label, kin
        self.t, self.y = t, y
        self.sd = np.ones_like(y) if sd is None else sd
        self.has_sd = sd is not None
        self.n = t.size
        self.levels = levels  # column -> level (text) of the scope columns


def safe_label(text):
    s = re.sub(r"[^0-9A-Za-z_]+", "_", str(text)).strip("_")
    return s or "x"


class Shape:
    """The local coordinates of one kind of block (its kinetics' parameter layout).

    Local coordinates (in this order): each non-fraction parameter (log for rates,
    ``lag >= 0`` as itself, identity otherwise), then the stick-breaking logits of the pool
    fractions (none for one pool or a chain).

    Parameters
    ----------
    kin : TurnoverKinetics
        The block's kinetics.
    """

    def __init__(self, kin):
        self.names = tuple(kin.param_names)
        self.rate_names = set(kin.rate_names)
        self.frac_idx = list(kin.fraction_index)
        self.chain = getattr(kin, "structure", "parallel") == "chain"
        self.local = []  # (name, kind, natural index or stick number)
        for j, nm in enumerate(self.names):
            if j in self.frac_idx:
                continue
            kind = "log" if nm in self.rate_names else ("lag" if nm == "lag" else "id")
            self.local.append((nm, kind, j))
        for i in range(max(len(self.frac_idx) - 1, 0)):
            self.local.append((f"stick{i + 1}", "stick", i))

    def theta(self, c, jac=False):
        """Natural parameters from local coordinates ``c`` (and dθ/dc with ``jac``).

        Parameters
        ----------
        c : ndarray
            Local coordinates.
        jac : bool, default=False
            Also return dθ/dc.

        Returns
        -------
        ndarray, or (ndarray, ndarray)
            θ in the kinetics' order (and dθ/dc).
        """
        p = len(self.names)
        th = np.empty(p)
        D = np.zeros((p, len(self.local))) if jac else None
        nf = len(self.frac_idx)
        sticks = []
        for i, (_, kind, j) in enumerate(self.local):
            if kind == "log":
                th[j] = math.exp(c[i])
                if jac:
                    D[j, i] = th[j]
            elif kind == "stick":
                sticks.append(i)
            else:
                th[j] = c[i]
                if jac:
                    D[j, i] = 1.0
        if nf:
            s = np.array([special.expit(c[i]) for i in sticks])
            rem = 1.0
            fr = np.empty(nf)
            for i in range(nf - 1):
                fr[i] = rem * s[i]
                rem *= 1.0 - s[i]
            fr[nf - 1] = rem
            th[self.frac_idx] = fr
            if jac:
                for a in range(nf):
                    for b_ in range(min(a + 1, nf - 1)):
                        d = -fr[a] * s[b_] if b_ < a else fr[a] * (1.0 - s[a])
                        D[self.frac_idx[a], sticks[b_]] = d
        return (th, D) if jac else th

    def local_from_theta(self, th):
        """Local coordinates from natural parameters (the inverse of :meth:`theta`).

        Parameters
        ----------
        th : array-like
            θ in the kinetics' order.

        Returns
        -------
        ndarray
        """
        c = np.empty(len(self.local))
        rem = 1.0
        for i, (_, kind, j) in enumerate(self.local):
            if kind == "log":
                c[i] = math.log(max(th[j], 1e-300))
            elif kind == "stick":
                f = th[self.frac_idx[j]]
                s = min(max(f / rem if rem > 0 else 0.5, 1e-9), 1 - 1e-9)
                c[i] = math.log(s / (1 - s))
                rem *= 1 - s
            else:
                c[i] = th[j]
        return c


class Layout:
    """Joint coordinates and, per block, how its local coordinates read them.

    Blocks may have different kinetics (a one-pool plasma beside a chain for red cells):
    each has its :class:`Shape`, and a shared name joins the parameters of that name in
    every block that has it. A local coordinate is the sum of one or two joint coordinates
    (two with contrast coding of a per-level parameter: reference level + difference).
    """

    def __init__(self, blocks, scopes, contrast=()):
        self.blocks = blocks
        self.scopes = scopes  # name -> None (all) or column
        shapes = {}
        self.shapes = []
        for b in blocks:
            key = (tuple(b.kin.param_names), tuple(b.kin.rate_names),
                   tuple(b.kin.fraction_index), getattr(b.kin, "structure", "parallel"))
            if key not in shapes:
                shapes[key] = Shape(b.kin)
            self.shapes.append(shapes[key])
        names = []
        for sh in self.shapes:
            names += [nm for nm in sh.names if nm not in names]
        self.names = tuple(names)  # every parameter name of any block, first seen first
        self.rate_names = set().union(*(sh.rate_names for sh in self.shapes))
        labels, index, lower = [], {}, []

        def joint(label, kind):
            if label not in index:
                index[label] = len(labels)
                labels.append(label)
                lower.append(0.0 if kind == "lag" else -np.inf)
            return index[label]

        self.rows = []  # per block: list of lists of joint indices (one list per local coord)
        for b, sh in zip(blocks, self.shapes):
            rows = []
            for nm, kind, _ in sh.local:
                pname = "f" if kind == "stick" else nm
                scope = scopes.get(pname, False)
                if scope is False:
                    rows.append([joint(f"{nm}@{b.label}", kind)])
                elif scope is None:
                    rows.append([joint(nm, kind)])
                else:
                    lev = b.levels[scope]
                    if scope in contrast:
                        ref = sorted(set(bb.levels[scope] for bb in blocks))[0]
                        base = joint(f"{nm}@{scope}={ref}", kind)
                        if lev == ref:
                            rows.append([base])
                        else:
                            rows.append([base, joint(f"{nm}@{scope}={lev}-{ref}", "id")])
                    else:
                        rows.append([joint(f"{nm}@{scope}={lev}", kind)])
            self.rows.append(rows)
        self.labels = labels
        self.index = index
        self.lower = np.array(lower)
        self.size = len(labels)
        # per block: the joint columns it uses and the local -> columns matrix
        self.cols, self.A = [], []
        for rows in self.rows:
            cols = sorted({c for r in rows for c in r})
            pos = {c: i for i, c in enumerate(cols)}
            A = np.zeros((len(rows), len(cols)))
            for i, r in enumerate(rows):
                for c in r:
                    A[i, pos[c]] = 1.0
            self.cols.append(np.array(cols, dtype=int))
            self.A.append(A)


class Joint:
    """The joint weighted least-squares problem of a layout."""

    def __init__(self, layout: Layout):
        self.L = layout
        self.blocks = layout.blocks
        self.N = sum(b.n for b in self.blocks)
        self.offsets = np.cumsum([0] + [b.n for b in self.blocks])
        self.scale = np.ones(len(self.blocks))  # s_b
        rr, cc = [], []
        for k, b in enumerate(self.blocks):
            r = np.arange(self.offsets[k], self.offsets[k + 1])
            rr.append(np.repeat(r, len(layout.cols[k])))
            cc.append(np.tile(layout.cols[k], b.n))
        self._rr = np.concatenate(rr)
        self._cc = np.concatenate(cc)
        self.sparse = layout.size > SPARSE_ABOVE

    def block_theta(self, z, k, jac=False):
        c = self.L.A[k] @ z[self.L.cols[k]]
        return self.L.shapes[k].theta(c, jac)

    def raw(self, z, k):
        """Model − data of block k divided by its relative σ (no variance scale)."""
        b = self.blocks[k]
        th = self.block_theta(z, k)
        return (b.kin.evaluate(b.t, th) - b.y) / b.sd

    def residuals(self, z):
        return np.concatenate([self.raw(z, k) / self.scale[k] for k in range(len(self.blocks))])

    def jac_blocks(self, z):
        out = []
        for k, b in enumerate(self.blocks):
            th, D = self.block_theta(z, k, jac=True)
            _, Jn = b.kin.evaluate(b.t, th, jacobian=True)
            Jc = (Jn @ D) @ self.L.A[k]
            out.append(Jc / (b.sd * self.scale[k])[:, None])
        return out

    def jacobian(self, z, free=None):
        blocks = self.jac_blocks(z)
        data = np.concatenate([Jb.ravel() for Jb in blocks])
        if self.sparse:
            J = sparse.csr_matrix((data, (self._rr, self._cc)), shape=(self.N, self.L.size))
            return J if free is None else J[:, free]
        J = np.zeros((self.N, self.L.size))
        J[self._rr, self._cc] = data
        return J if free is None else J[:, free]

    def solve(self, z0, fixed=None, tol=1e-12, max_nfev=None):
        """Least squares over the coordinates not in ``fixed`` (index -> value)."""
        z0 = np.asarray(z0, float).copy()
        free = np.arange(self.L.size)
        if fixed:
            for i, v in fixed.items():
                z0[i] = v
            free = np.array([i for i in free if i not in fixed], dtype=int)
        zf = z0.copy()

        def full(x):
            zf[free] = x
            return zf

        def fun(x):
            r = self.residuals(full(x))
            return np.where(np.isfinite(r), r, 1e150)

        def jac(x):
            return self.jacobian(full(x), free)

        lo = self.L.lower[free]
        x0 = np.maximum(z0[free], lo)
        kw = {"tr_solver": "lsmr"} if self.sparse else {"tr_solver": "exact"}
        bounds = (lo, np.full(free.size, np.inf)) if np.any(np.isfinite(lo)) else \
            (-np.inf, np.inf)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            res = optimize.least_squares(fun, x0, jac=jac, method="trf", bounds=bounds,
                                         x_scale="jac", xtol=tol, ftol=max(tol * 1e-2, 3e-16),
                                         gtol=tol,
                                         max_nfev=max_nfev or 200 * (free.size + 1), **kw)
        z = full(res.x).copy()
        r = self.residuals(z)
        ok = bool(res.status > 0 and np.all(np.isfinite(r)))
        return z, float(r @ r), ok, res

    def profile_bounds(self, z_hat, i, kind, crit, s2, rss_hat, se_u):
        """Both profile bounds of joint coordinate ``i`` (the other coordinates refitted).

        The deviance :math:`D(u) = (\\mathrm{RSS}(u) - \\mathrm{RSS})/s^2` (weights fixed) and
        its envelope-theorem derivative :math:`2 r^\top J_{:,i}/s^2` feed the project's one
        root finder (:func:`isoturnover.profiles.find_bound`), each refit warm-started from
        the last one on its side.

        Parameters
        ----------
        z_hat : ndarray
            Coordinates at the optimum.
        i : int
            The profiled coordinate.
        kind : {"log", "stick", "lag", "id"}
            Its scale (sets the search limits: ±40 on log and logit scales, ``lag >= 0``).
        crit : float
            Critical value of D.
        s2 : float
            Residual variance of the weighted problem.
        rss_hat : float
            Weighted RSS at the optimum.
        se_u : float
            Standard error of the coordinate (first step: √crit standard errors).

        Returns
        -------
        tuple of BoundSearch
            The lower and the upper search.
        """
        from .profiles import find_bound

        u_hat = float(z_hat[i])
        ends = []
        for direction in (-1, 1):
            warm = {"z": z_hat.copy()}

            def evaluate(u, warm=warm):
                z, rss, ok, _ = self.solve(warm["z"], fixed={i: u})
                if not ok:
                    return math.nan, math.nan, False, "refit"
                warm["z"] = z
                r = self.residuals(z)
                J = self.jacobian(z)
                col = J[:, [i]].toarray().ravel() if sparse.issparse(J) else J[:, i]
                return (rss - rss_hat) / s2, 2.0 * float(r @ col) / s2, True, ""

            span = 40.0 if kind in ("log", "stick") else 50.0 * se_u
            limit = u_hat + direction * max(span, 10 * se_u)
            if kind == "lag" and direction < 0:
                limit = 0.0
            ends.append(find_bound(evaluate, u_hat, direction, math.sqrt(crit) * se_u, limit,
                                   crit))
        return ends[0], ends[1]

    def block_rss(self, z):
        """Raw (unscaled) RSS of each block."""
        return np.array([float(np.sum(self.raw(z, k) ** 2)) for k in range(len(self.blocks))])

    def fit(self, z0, per_block, rounds=3):
        r"""Fit with per-block variances estimated by ML, or with one common scale.

        With per-block variances: a few rounds of the alternation (weighted fit, then
        :math:`s_b^2 = \mathrm{RSS}_b/n_b`), the coordinate ascent of the concentrated
        log-likelihood, bring the fit near the optimum; damped Newton steps on that
        likelihood (:meth:`newton_ml`) finish it.

        Parameters
        ----------
        z0 : ndarray
            Starting joint coordinates.
        per_block : bool
            Estimate a residual variance per block.
        rounds : int, default=3
            Rounds of the alternation before the Newton steps.

        Returns
        -------
        z : ndarray
            Joint coordinates at the optimum.
        ok : bool
            Converged.
        rounds : int
            Alternation rounds run.
        """
        z, rss, ok, res = self.solve(z0)
        if not per_block:
            return z, ok, 1
        n = np.array([b.n for b in self.blocks], float)
        done = 0
        for _ in range(rounds + 1):
            new, _ll = self._scales(z, n)
            change = float(np.max(np.abs(new / self.scale - 1.0)))
            self.scale = new
            if change < 1e-7:
                break
            z, rss, ok, res = self.solve(z)
            done += 1
        z, ok_ml = self.newton_ml(z, n)
        self.scale, _ = self._scales(z, n)
        return z, ok and ok_ml, done

    def _scales(self, z, n):
        rb = self.block_rss(z)
        s2 = np.maximum(rb / n, 1e-12 * max(np.median(rb / n), 1e-300))
        ll = float(-0.5 * np.sum(n * np.log(s2)))
        return np.sqrt(s2 / np.exp(np.mean(np.log(s2)))), ll  # relative scales, loglik

    def newton_ml(self, z, n, max_iter=60):
        r"""Minimise :math:`F(z) = \sum_b n_b \ln \mathrm{RSS}_b(z)` by damped Newton steps.

        The Hessian is the Gauss–Newton one of the concentrated likelihood,
        :math:`\sum_b \frac{n_b}{\mathrm{RSS}_b} 2J_b^TJ_b - \frac{n_b}{\mathrm{RSS}_b^2}
        g_b g_b^T` with :math:`g_b = 2J_b^T r_b` (raw residuals and Jacobians), assembled
        block-sparse (a block touches only its own and the shared coordinates) and solved
        with SuperLU; Levenberg–Marquardt damping keeps each step a descent step, and
        ``lag >= 0`` is kept by clipping.

        Parameters
        ----------
        z : ndarray
            Starting joint coordinates.
        n : ndarray
            Points per block.
        max_iter : int, default=60
            Newton steps at most.

        Returns
        -------
        z : ndarray
            Coordinates at the optimum.
        ok : bool
            Converged within ``max_iter`` steps.
        """
        from scipy.sparse.linalg import spsolve

        lam = 1e-6
        lo = self.L.lower
        size = self.L.size
        rr = np.concatenate([np.repeat(c, c.size) for c in self.L.cols])
        cc = np.concatenate([np.tile(c, c.size) for c in self.L.cols])

        def parts(z):
            rs = [self.raw(z, k) for k in range(len(self.blocks))]
            rb = np.array([float(r @ r) for r in rs])
            return rs, rb, float(np.sum(n * np.log(np.maximum(rb, 1e-300))))

        rs, rb, F = parts(z)
        for _ in range(max_iter):
            Js = self.jac_blocks(z)
            g = np.zeros(size)
            vals = []
            for k, (Jb, r) in enumerate(zip(Js, rs)):
                Jb = Jb * self.scale[k]  # raw Jacobian
                gb = 2.0 * (Jb.T @ r)
                w = n[k] / max(rb[k], 1e-300)
                g[self.L.cols[k]] += w * gb
                vals.append((w * 2.0 * (Jb.T @ Jb) - (w / max(rb[k], 1e-300))
                             * np.outer(gb, gb)).ravel())
            H = sparse.csc_matrix((np.concatenate(vals), (rr, cc)), shape=(size, size))
            d2 = np.maximum(H.diagonal(), 1e-300)
            for _try in range(30):
                A = (H + sparse.diags(lam * d2)).tocsc()
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    step = -spsolve(A, g)
                if not np.all(np.isfinite(step)):
                    lam *= 10
                    continue
                zn = np.maximum(z + step, lo)
                rs_n, rb_n, Fn = parts(zn)
                if np.isfinite(Fn) and Fn <= F + 1e-12 * abs(F):
                    break
                lam *= 10
            else:
                return z, False
            dec = F - Fn
            z, rs, rb, F = zn, rs_n, rb_n, Fn
            lam = max(lam / 10, 1e-12)
            if dec <= 1e-12 * max(abs(F), 1.0) and abs(g @ step) < 1e-10 * max(abs(F), 1.0):
                return z, True
        return z, False


def loglik(problem, z, variance):
    rb = problem.block_rss(z)
    n = np.array([b.n for b in problem.blocks], float)
    log_sd = sum(float(np.sum(np.log(b.sd))) for b in problem.blocks)
    if variance == "per_block":
        s2 = np.maximum(rb / n, 1e-300)
        return float(-0.5 * np.sum(n * (np.log(2 * np.pi * s2) + 1))) - log_sd
    N = n.sum()
    return float(-0.5 * N * (math.log(2 * math.pi * max(rb.sum() / N, 1e-300)) + 1)) - log_sd


# ----------------------------------------------------------------------------------------
# reading a study into blocks
# ----------------------------------------------------------------------------------------
def read_study(samples, by):
    from .data import average_replicates, read_samples

    s = read_samples(samples) if not isinstance(samples, pd.DataFrame) else \
        read_samples(samples, time_unit=(samples.attrs or {}).get("time_unit", "d"))
    unit = (s.attrs or {}).get("time_unit", "d")
    if isinstance(by, str):
        by = (by,)
    by = tuple(by)
    if not by or not all(isinstance(c, str) for c in by):
        raise DataError(f"'by' must name one or more columns of the samples; got {by!r}")
    missing = [c for c in by if c not in s.columns]
    if missing:
        raise DataError(f"'by': column(s) {', '.join(missing)} not in the samples table "
                        f"(columns: {', '.join(map(str, s.columns))})")
    avg = average_replicates(s)
    for col in ("group",):
        if col in s.columns and col not in avg.columns:
            first = s.groupby(["subject", "tissue", "isotope"], sort=False)[col].first()
            avg = avg.join(first, on=["subject", "tissue", "isotope"])
    return avg, by, unit


def key_label(key):
    return "_".join(safe_label(k) for k in key)


def parse_shared(shared, names, frame, by):
    if isinstance(shared, str):
        shared = (shared,)
    if isinstance(shared, dict):
        items = list(shared.items())
    else:
        try:
            items = [(nm, None) for nm in shared]
        except TypeError:
            raise DataError(f"'shared' must be parameter names or a dict name -> column; got "
                            f"{shared!r}") from None
    scopes = {}
    fr = set()
    for nm, col in items:
        if not isinstance(nm, str):
            raise DataError(f"'shared': parameter names are text; got {nm!r}")
        if nm not in names:
            raise DataError(f"'shared': {nm!r} is not a parameter of this model "
                            f"({', '.join(names)})")
        if col is not None:
            if not isinstance(col, str) or col not in frame.columns:
                raise DataError(f"'shared[{nm!r}]': column {col!r} is not in the samples "
                                "table")
        key = "f" if re.fullmatch(r"f\d+", nm) else nm
        if key == "f":
            fr.add(col)
        scopes[key] = col
    if len(fr) > 1:
        raise DataError("'shared': pool fractions are shared together, with one scope")
    return scopes


def diet_of(diets, key, sub=None):
    """The diet history of one block: ``diets`` as given (None or one DietHistory), looked
    up in a dict by the block's key, or matched in a diets table (a frame or a file, by the
    block's subject, else its group, and its isotope: :func:`~isoturnover.diet.diet_for_series`)
    from the block's rows ``sub``."""
    if diets is None or isinstance(diets, DietHistory):
        return diets
    if isinstance(diets, (pd.DataFrame, str)) or hasattr(diets, "__fspath__"):
        from .data import read_diets
        from .diet import diet_for_series

        table = read_diets(diets) if not isinstance(diets, pd.DataFrame) or \
            "isotope" not in diets.columns or "start" not in diets.columns else diets

        def first(col):
            return str(sub[col].iloc[0]) if sub is not None and col in sub.columns else None

        d, why = diet_for_series(table, first("subject"), first("group"), first("isotope"))
        if d is None:
            raise DataError(f"'diets': {why} (series {key!r})")
        return d
    if isinstance(diets, dict):
        for k in (key, key[0] if len(key) == 1 else None, key_label(key)):
            if k is not None and k in diets:
                d = diets[k]
                if not isinstance(d, DietHistory):
                    raise DataError(f"'diets[{k!r}]' must be a DietHistory")
                return d
        raise DataError(f"'diets' has no diet history for the series {key!r}")
    raise DataError("'diets' must be None, a DietHistory, a dict series key -> DietHistory "
                    f"or a diets table; got {type(diets).__name__}")


# ----------------------------------------------------------------------------------------
# starting values, models per level, bootstrap replicates
# ----------------------------------------------------------------------------------------
def check_models(models, model_by, frame):
    """``models`` checked: level (text) -> options of TurnoverModel (with ``pools``)."""
    if models is None:
        return {}
    if not isinstance(models, dict) or not models:
        raise DataError(f"'models' must be a dict level -> model options; got {models!r:.80}")
    if not isinstance(model_by, str) or model_by not in frame.columns:
        raise DataError(f"'model_by': column {model_by!r} is not in the samples table")
    known = set(frame[model_by].astype(str))
    out = {}
    for lev, opts in models.items():
        if str(lev) not in known:
            raise DataError(f"'models': {model_by} {lev!r} is not in the samples table "
                            f"({', '.join(sorted(known))})")
        if not isinstance(opts, dict):
            raise DataError(f"'models[{lev!r}]' must be a dict of model options")
        bad = sorted(set(opts) - set(MODEL_OPTIONS) - {"pools"})
        if bad:
            raise DataError(f"'models[{lev!r}]': unknown option(s) {', '.join(bad)}")
        out[str(lev)] = dict(opts)
    return out


def start_coordinates(problem, models):
    """Starting coordinates: each block fitted alone; a shared coordinate the mean of its
    blocks' values; a block that cannot be fitted alone takes the median of the blocks of
    its kind (or, when none can, one fit to their points pooled)."""
    L = problem.L
    local, separate = [], []
    for k, (b, m) in enumerate(zip(problem.blocks, models)):
        sh = L.shapes[k]
        try:
            f = m.fit(b.t, b.y, b.sd if b.has_sd else None, warn=False)
            th = np.array([f.params[nm].value for nm in sh.names])
            local.append(sh.local_from_theta(th))
            separate.append(f)
        except (DataError, FitError):
            local.append(None)
            separate.append(None)
    for k, c in enumerate(local):
        if c is not None:
            continue
        same = [j for j, sh in enumerate(L.shapes) if sh is L.shapes[k]]
        good = [local[j] for j in same if local[j] is not None]
        local[k] = np.median(np.array(good), axis=0) if good else \
            pooled_start(problem, models[k], same)
    sums = np.zeros(L.size)
    counts = np.zeros(L.size)
    for k, c in enumerate(local):
        for i, rows in enumerate(L.rows[k]):
            if len(rows) == 1:
                sums[rows[0]] += c[i]
                counts[rows[0]] += 1
    z = np.where(counts > 0, sums / np.maximum(counts, 1), 0.0)
    for k, c in enumerate(local):  # contrast coordinates: difference to the reference
        for i, rows in enumerate(L.rows[k]):
            if len(rows) == 2:
                z[rows[1]] = c[i] - z[rows[0]]
    return np.maximum(z, L.lower), separate


def pooled_start(problem, model, blocks):
    """Local coordinates of one fit to the points of ``blocks`` pooled (as one series)."""
    bl = [problem.blocks[k] for k in blocks]
    t = np.concatenate([b.t for b in bl])
    y = np.concatenate([b.y for b in bl])
    sd = np.concatenate([b.sd for b in bl])
    order = np.argsort(t, kind="stable")
    has_sd = all(b.has_sd for b in bl)
    try:
        with warnings.catch_warnings():  # repeated times are expected here (several blocks)
            warnings.simplefilter("ignore", DataWarning)
            f = model.fit(t[order], y[order], sd[order] if has_sd else None, warn=False)
    except (DataError, FitError):
        raise FitError("no series could be fitted alone, nor all of them pooled, to start "
                       "the shared fit") from None
    sh = problem.L.shapes[blocks[0]]
    th = np.array([f.params[nm].value for nm in sh.names])
    return sh.local_from_theta(th)


def bootstrap_refits(setup, picks):
    """Refit the joint model to each replicate's blocks (``picks``: block indices).

    Runs in the caller's process or in a joblib worker. Returns the shared parameters of
    each replicate (a row of NaN for a refit that failed), the number of failed refits and
    the warnings issued, as (message, category) pairs, for the caller to issue again under
    its own filters.
    """
    blocks, starts, scopes, contrast, per_block, entries = setup
    draws = np.full((len(picks), len(entries)), np.nan)
    failed = 0
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("default")
        for r, pick in enumerate(picks):
            new_blocks = []
            for m, k in enumerate(pick):
                b = blocks[k]
                new_blocks.append(Block((*b.key, m), f"{b.label}_{m}", b.kin, b.t, b.y,
                                        b.sd if b.has_sd else None, b.levels))
            L = Layout(new_blocks, scopes, contrast)
            z0 = np.zeros(L.size)
            for m, k in enumerate(pick):
                for i, rows in enumerate(L.rows[m]):
                    if len(rows) == 1:
                        z0[rows[0]] = starts[k][i]
            prob = Joint(L)
            try:
                z, ok, _ = prob.fit(z0, per_block)
            except (FloatingPointError, np.linalg.LinAlgError):
                ok = False
            if not ok:
                failed += 1
                continue
            for e, (lab, j) in enumerate(entries):
                m = next(mm for mm, kk in enumerate(pick) if in_scope(blocks[kk], lab))
                draws[r, e] = prob.block_theta(z, m)[j]
    return draws, failed, [(str(w.message), w.category) for w in caught]


def in_scope(block, lab):
    """Whether a block belongs to a scope label ("all" or "column=level")."""
    if lab == "all":
        return True
    col, _, lev = lab.partition("=")
    return block.levels.get(col) == lev


def natural_bound(res, kind, side):
    """A profile search's bound on the natural scale, with its status.

    Parameters
    ----------
    res : BoundSearch
        From :meth:`Joint.profile_bounds`.
    kind : {"log", "stick", "lag", "id"}
        Scale of the coordinate.
    side : {-1, 1}
        Lower or upper bound.

    Returns
    -------
    tuple
        ``(value, status)``: an open bound is 0 or inf for a rate, 0 or 1 for a fraction,
        ±inf otherwise; a lag stopped at 0 is ``at_bound``.
    """
    if res.status == "open":
        if kind == "log":
            return (0.0 if side < 0 else math.inf), "open"
        if kind == "stick":
            return (0.0 if side < 0 else 1.0), "open"
        return (-math.inf if side < 0 else math.inf), "open"
    if res.status == "at_bound" and kind == "lag":
        return 0.0, "at_bound"
    if not math.isfinite(res.u):
        return math.nan, res.status
    if kind == "log":
        return math.exp(res.u), res.status
    if kind == "stick":
        return float(special.expit(res.u)), res.status
    return res.u, res.status
