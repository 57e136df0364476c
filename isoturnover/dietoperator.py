r"""The linear operator of diet-history reconstruction, and the kinetics it is built from.

The tissue's value is affine in a piecewise-constant diet, :math:`\delta = c + m A x`
(:mod:`isoturnover.inverse`, whose docstring gives the formulas): :func:`diet_operator` builds
:math:`A` over **observation windows** (point samples, or the formation intervals of
segments: exact window averages through :math:`C(\tau) = \int_0^\tau W`), for parallel
pools and the two-pool chain, vectorised over samples, edges and draws of the kinetics.
:func:`read_kinetics` reads the kinetics from a fit (its covariance as the draws), a
bootstrap of one (its replicates) or a dict of rates with optional standard errors, as a
:class:`PointKinetics`; :func:`read_windows` and :func:`read_edges` check the windows and
the grid.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.special import exprel

from .conventions import check_choice
from .errors import DataError
from .kinetics import TurnoverKinetics
from .resampling import BootstrapResult
from .responses import remaining_chain
from .results import TurnoverFit

__all__ = ["diet_operator", "window_operator", "PointKinetics", "read_kinetics",
           "read_windows", "read_edges", "as_number", "as_vector"]


@dataclass(frozen=True)
class PointKinetics:
    """Point kinetics and a way to draw from their uncertainty (arrays over draws).

    Made by :func:`read_kinetics`.

    Parameters
    ----------
    chain : bool
        The two-pool chain (else parallel pools).
    rates : ndarray of shape (P,)
        Rates (per time unit), exponential growth included.
    fractions : ndarray of shape (P,)
        Pool fractions (zeros for the chain).
    lag : float
        Delay of the response (time unit).
    separation : float
        Diet–tissue separation (‰).
    epsilon : bool
        The separation is an ε (else a difference Δ).
    time_unit : str or None
    source : str
        Where the kinetics (and their draws) came from.
    draws : callable or None
        ``draws(rng, n)`` -> (rates (n, P), fractions (n, P), lag (n,), separation (n,)).
    """

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
        """(rates, fractions, lag, separation) as arrays over one draw.

        Returns
        -------
        tuple of ndarray
            Shapes (1, P), (1, P), (1,), (1,).
        """
        return (self.rates[None], self.fractions[None], np.array([self.lag]),
                np.array([self.separation]))

    def affine(self, separation):
        r"""(c, m) of the separation: :math:`y = c + m\,(A x)`.

        :math:`c = \Delta, m = 1` (difference form) or :math:`c = \varepsilon, m = 1 +
        \varepsilon/1000` (ε form).

        Parameters
        ----------
        separation : float or ndarray
            Separation(s) (‰).

        Returns
        -------
        tuple of ndarray
            (c, m), shaped like ``separation``.
        """
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
    return PointKinetics(chain, k0[0], f0[0] if not chain else np.zeros(2), float(lag0[0]),
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
    k = as_vector("kinetics['rates']", spec["rates"])
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
        f = as_vector("kinetics['fractions']", fr)
        if f.shape != k.shape or np.any(f < 0) or abs(f.sum() - 1) > 1e-6:
            raise DataError(f"'kinetics['fractions']' must give one fraction >= 0 per rate, "
                            f"summing to 1; got {fr!r}")
    lag = as_number("kinetics['lag']", spec.get("lag", 0.0))
    if lag < 0:
        raise DataError(f"'kinetics['lag']' must be >= 0; got {lag!r}")
    sep = as_number("kinetics['separation']", spec.get("separation", 0.0))
    if separation is not None:
        sep = separation
    se = None
    if spec.get("stderr") is not None:
        se = as_vector("kinetics['stderr']", spec["stderr"])
        if se.shape != k.shape or np.any(se < 0):
            raise DataError(f"'kinetics['stderr']' must give one standard error >= 0 per rate; "
                            f"got {spec['stderr']!r}")
    sep_se = as_number("kinetics['separation_stderr']", spec.get("separation_stderr", 0.0))
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
    return PointKinetics(chain, k, f, lag, sep, form == "epsilon", spec.get("time_unit"),
                         source, draws), []


def read_kinetics(kinetics, separation):
    """The point kinetics of a fit, a bootstrap of one, or a dict, with their draws.

    Parameters
    ----------
    kinetics : TurnoverFit, BootstrapResult or dict
        As :func:`isoturnover.inverse.reconstruct_diet` takes it.
    separation : float or None
        Diet–tissue separation (‰) overriding the kinetics'.

    Returns
    -------
    tuple
        (:class:`PointKinetics`, list of notes for the result's warnings).

    Raises
    ------
    DataError
        For kinetics that cannot be read (each named).
    """
    if separation is not None:
        separation = as_number("'separation'", separation)
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


def as_number(what, v):
    """A finite float, or a :class:`DataError` naming ``what``.

    Parameters
    ----------
    what : str
        The argument's name as the message shows it.
    v : object
        The value.

    Returns
    -------
    float
    """
    try:
        x = float(v)
    except (TypeError, ValueError):
        raise DataError(f"{what} must be a number; got {v!r:.80}") from None
    if not math.isfinite(x):
        raise DataError(f"{what} must be finite; got {v!r:.80}")
    return x


def as_vector(what, v):
    """A non-empty 1-d array of finite floats, or a :class:`DataError` naming ``what``.

    Parameters
    ----------
    what : str
        The argument's name.
    v : array-like
        The values.

    Returns
    -------
    ndarray
    """
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
    (:mod:`isoturnover.inverse`)."""
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


def window_operator(starts, ends, edges, rates, fractions, lag, chain):
    """The operator for every draw of the kinetics (:func:`diet_operator`, unchecked).

    Parameters
    ----------
    starts, ends : ndarray of shape (n,)
        Observation windows (time unit); equal for point samples.
    edges : ndarray of shape (J + 1,)
        Grid edges (time unit).
    rates, fractions : ndarray of shape (B, P)
        Rates (per time unit) and fractions of each draw.
    lag : ndarray of shape (B,)
        Lag of each draw (time unit).
    chain : bool
        The two-pool chain.

    Returns
    -------
    ndarray of shape (B, n, J + 1)
        Columns the diet before ``edges[0]``, then each interval.
    """
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
    interval in observation :math:`i` (:mod:`isoturnover.inverse`): :math:`W(t - e_0)` and
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
    starts, ends = read_windows(windows)
    e = read_edges(edges, ends)
    return window_operator(starts, ends, e, *kin.arrays()[:3], kin.chain)[0]


def read_windows(windows):
    """Observation windows (start, end) from sampling times or a pair of arrays.

    Parameters
    ----------
    windows : array-like or tuple of two array-likes
        Times (point samples) or ``(start, end)``.

    Returns
    -------
    tuple of ndarray
        (start, end), each of shape (n,).
    """
    if isinstance(windows, tuple) and len(windows) == 2:
        a = as_vector("windows[0]", windows[0])
        b = as_vector("windows[1]", windows[1])
        if a.shape != b.shape:
            raise DataError(f"'windows': start and end must have one value per sample; got "
                            f"{a.size} and {b.size}")
        if np.any(b < a):
            raise DataError("'windows': every window must end at or after its start")
        return a, b
    t = as_vector("windows", windows)
    return t, t.copy()


def read_edges(grid, ends):
    """Checked grid edges: at least two, strictly increasing, reaching every window's end.

    Parameters
    ----------
    grid : array-like
        Edges (time unit).
    ends : ndarray
        Window ends (time unit).

    Returns
    -------
    ndarray
    """
    e = as_vector("grid", grid)
    if e.size < 2 or np.any(np.diff(e) <= 0):
        raise DataError(f"'grid' must be at least 2 strictly increasing edges (or a number of "
                        f"intervals); got {e.size} edge(s)")
    if np.max(ends) > e[-1] + 1e-9 * max(1.0, abs(e[-1])):
        raise DataError(f"'grid' must reach the last sample: its last edge {e[-1]:g} is "
                        f"before the sample at {np.max(ends):g}")
    return e


