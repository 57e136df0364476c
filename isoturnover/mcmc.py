r"""Posterior sampling of a turnover fit with emcee (DESIGN §3 "Intervals").

emcee's affine-invariant ensemble sampler (Foreman-Mackey et al. 2013, PASP 125:306–312;
Goodman & Weare 2010, Commun. Appl. Math. Comput. Sci. 5:65–80 — from memory for the
pages), started from the converged fit, in the optimizer's internal coordinates, with
stated priors (:func:`sample`, :class:`MCMCResult`).

Every function takes a :class:`~isoturnover.results.TurnoverFit` and leaves it unchanged.
emcee is optional (``pip install 'isoturnover[mcmc]'``); :data:`HAS_EMCEE` says whether it
is installed.
"""

from __future__ import annotations

import importlib.util
import math
import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .conventions import check_choice as _choice
from .conventions import check_level as _check_level
from .conventions import check_positive_int as _positive_int
from .derived import INTERVAL_COLUMNS, LN2, check_fit, design_span, natural_range
from .errors import ConvergenceWarning, DataError

#: Whether the optional emcee is installed; it is imported when :func:`sample` first runs
#: (emcee imports scipy.stats, about 0.4 s, which most runs never need).
HAS_EMCEE = importlib.util.find_spec("emcee") is not None

__all__ = ["MCMCResult", "sample", "HAS_EMCEE"]


# ----------------------------------------------------------------------------------------
# Priors
# ----------------------------------------------------------------------------------------
def _prior_box(fit):
    """Bounds of the default uniform prior on the internal coordinates, with descriptions."""
    coords = fit.state.coords
    first, span = design_span(fit)
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

    Parameters
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
        Walkers, steps per walker, steps dropped from each walker, thinning interval.
    sigma : {"known", "estimated"}
        Whether the residual sd scale was known (analytic sd) or integrated out.
    prior : list of str
        The priors used, stated.
    estimates : dict
        Least-squares estimate of every column of :attr:`draws`.
    fixed : tuple of str
        Quantities fixed in the fit (the last pool fraction of several included).
    _edge : ndarray of bool, optional
        Internal: which kept draws lie in the outer 1 % of the default prior box.
    _kin : TurnoverKinetics, optional
        Internal: the fit's kinetics, for the natural range of each quantity.
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
        r"""Equal-tailed posterior intervals (the table shape of ``conf_int``).

        ``estimate`` is the least-squares estimate, ``stderr`` the posterior sd. A bound
        whose tail is made mostly (> half) of draws in the outer 1 % of the default prior
        box is set by the prior, not the data: reported ``open`` (the end of the natural
        range).

        Parameters
        ----------
        level : float, default=0.95
            Confidence level, in (0, 1): the bounds are the :math:`(1 \mp \text{level})/2`
            quantiles of the draws (numpy's linear interpolation).

        Returns
        -------
        DataFrame
            Columns parameter, estimate, stderr, lower, upper, level, method (``mcmc`` or
            ``fixed``), lower_status, upper_status.
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
            lo_nat, hi_nat = (natural_range(self._kin, q) if q != "s"
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
        A least-squares fit (``loss="linear"``, not a joint fit); left unchanged.
    n_walkers : int, optional
        Default ``max(16, 4 × dimensions)``; at least 2 × dimensions.
    n_steps : int, default=2000
        Steps of each walker, at least 2.
    burn : int, optional
        Steps dropped from each walker; default ``min(n_steps // 2, ceil(5 max τ))``.
    thin : int, default=1
        Keep every ``thin``-th step.
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
        The kept draws, autocorrelation times, acceptance and the priors stated.
    """
    if not HAS_EMCEE:
        raise ImportError("sample() needs emcee: pip install 'isoturnover[mcmc]' (or pip "
                          "install emcee)")
    check_fit(fit, "sample")
    if fit.loss != "linear":
        raise DataError(f"'fit': sample() uses the Gaussian likelihood; this fit used loss="
                        f"{fit.loss!r}")
    if sigma is None:
        sigma = "known" if fit.absolute_sigma else "estimated"
    sigma = _choice("sigma", sigma, ("known", "estimated"))
    if sigma == "known" and fit.sigma is None:
        raise DataError("sigma='known' needs the fit's analytic sd (fit with sigma=..., "
                        "absolute_sigma=True); this fit has no sigma")
    coords = fit.state.coords
    kin = fit.kinetics
    ndim = coords.size
    if ndim == 0:
        raise DataError("'fit' has no free parameters: nothing to sample")
    n_steps = _positive_int("n_steps", n_steps, 2)
    thin = _positive_int("thin", thin)
    if n_walkers is None:
        n_walkers = max(16, 4 * ndim)
    n_walkers = _positive_int("n_walkers", n_walkers, 2 * ndim)
    if burn is not None:
        burn = _positive_int("burn", burn, 0)
        if burn >= n_steps:
            raise DataError(f"'burn' must be smaller than n_steps ({n_steps}); got {burn}")
    free_names = _free_names(fit)
    prior_fns = {}
    if priors is not None:
        if not isinstance(priors, dict):
            raise DataError(f"'priors' must be a dict of parameter name -> log-density; got "
                            f"{type(priors).__name__}")
        for nm, fn in priors.items():
            if nm not in free_names:
                raise DataError(f"'priors' has {nm!r}, which is not a free parameter of this "
                                f"fit; free parameters: {', '.join(free_names)}")
            if not callable(fn):
                raise DataError(f"'priors[{nm!r}]' must be a log-density function; got "
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
        raise DataError("'priors': the fitted parameters lie outside the prior (log-prior "
                        "not finite at the estimate); check 'priors'")
    p0 = np.empty((n_walkers, ndim))
    for k in range(n_walkers):
        for _ in range(1000):
            cand = z_hat + 0.05 * (L @ g.standard_normal(ndim))
            if math.isfinite(log_prob(cand)[0]):
                p0[k] = cand
                break
        else:  # pragma: no cover - only with a pathological prior
            raise DataError("'priors': could not place the walkers around the fit inside "
                            "the prior")
    import emcee

    sampler = emcee.EnsembleSampler(n_walkers, ndim, log_prob)
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
