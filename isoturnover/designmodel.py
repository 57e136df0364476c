r"""The model as a sampling design sees it: free parameters, values, Jacobian, target.

:func:`model_spec` reduces a :class:`~isoturnover.TurnoverModel` (or a user function that
returns its values and Jacobian) at a guess of the parameters to what
:mod:`isoturnover.design` needs: the free parameters (fixed ones left out; the pool
fractions through all but one of the free fractions, as they sum to 1), the model's values
and exact Jacobian at any times, and the target of a c-optimal design (a half-life, or the
time to a fraction of the change through :func:`isoturnover.quantities.time_to`).
:func:`prior_points` spreads the rates over a log-normal prior for averaged
("pseudo-Bayesian") designs: a Gauss–Hermite product rule with 5 nodes per rate for one or
two free rates, 64 seeded Monte Carlo draws for more.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from .errors import DataError
from .model import TurnoverModel
from .quantities import time_to, time_to_grad

__all__ = ["ModelSpec", "model_spec", "prior_points", "LN2"]

LN2 = math.log(2.0)
_N_HERMITE = 5
_N_MONTE_CARLO = 64


# ----------------------------------------------------------------------------------------
# The model as the design sees it: free parameters, values and Jacobian, the target
# ----------------------------------------------------------------------------------------
class ModelSpec:
    r"""A model reduced to what a design needs: free coordinates, Jacobian and target.

    Built by :func:`model_spec`; holds the natural parameter vector at the guess, the
    linear map :math:`\theta = \theta_0 + A\phi` from the free coordinates φ, and the
    target quantity with its gradient.

    Parameters
    ----------
    names : sequence of str
        Natural parameter names.
    theta : array-like
        Natural parameters at the guess.
    A : ndarray of shape (n_params, n_free)
        The map from free coordinates to natural parameters.
    rate_index : sequence of int
        Positions of the free rates, the slowest last.
    switch : float
        Time of the first switch (time unit).
    fixed : dict
        Fixed parameters by name.
    evaluate : callable
        ``evaluate(t, theta) -> (y, J)`` in natural parameters.
    kin : TurnoverKinetics, optional
        The kinetics of a turnover model (None for a user model).
    fraction_index : sequence of int, default=()
        Positions of the pool fractions.
    description : str, default=""
        One line naming the model.

    Attributes
    ----------
    names : tuple of str
        Natural parameter names.
    free_names : tuple of str
        Names of the free coordinates φ (fixed parameters and the last free fraction left
        out).
    theta : ndarray
        Natural parameters at the guess.
    A : ndarray of shape (n_params, n_free)
        :math:`\partial\theta/\partial\phi`.
    rate_index : list of int
        Positions of the rates that the prior perturbs.
    switch : float
        Time of the (first) switch: baseline samples are taken there.
    fixed : dict
        Parameters held fixed in the fit, by name.
    """

    def __init__(self, *, names, theta, A, rate_index, switch, fixed, evaluate, kin=None,
                 fraction_index=(), description=""):
        self.names = tuple(names)
        self.theta = np.asarray(theta, dtype=float)
        self.A = A
        self.free_names = tuple(names[int(np.flatnonzero(A[:, j] == 1.0)[0])]
                                for j in range(A.shape[1]))
        self.rate_index = list(rate_index)
        self.fraction_index = list(fraction_index)
        self.switch = float(switch)
        self.fixed = dict(fixed)
        self.kin = kin
        self.description = description
        self._evaluate = evaluate

    def values(self, t, theta=None):
        """Model values at ``t`` (‰ for a turnover model) for natural parameters ``theta``.

        Parameters
        ----------
        t : array-like
            Times, in the model's time unit.
        theta : ndarray, optional
            Natural parameters (default: the guess).

        Returns
        -------
        ndarray
        """
        th = self.theta if theta is None else theta
        return self._evaluate(np.asarray(t, dtype=float), th)[0]

    def jacobian(self, t, theta=None):
        r"""Jacobian of the values in the free coordinates, :math:`J_\theta A`.

        Parameters
        ----------
        t : array-like
            Times, in the model's time unit.
        theta : ndarray, optional
            Natural parameters (default: the guess).

        Returns
        -------
        ndarray of shape (n_times, n_free)
        """
        th = self.theta if theta is None else theta
        return self._evaluate(np.asarray(t, dtype=float), th)[1] @ self.A

    def target(self, theta, criterion, pool=None, fraction=0.95):
        r"""The target quantity and its gradient in the free coordinates.

        ``"half_life"``: :math:`\ln 2/k` of the chosen pool (gradient
        :math:`-\ln 2/k^2`, by hand); ``"time_to"``: :func:`~isoturnover.quantities.time_to`
        with :func:`~isoturnover.quantities.time_to_grad` (parallel pools) or central
        differences (chain, growth curve); ``"D"`` reports the slowest pool's half-life.

        Parameters
        ----------
        theta : ndarray
            Natural parameters.
        criterion : {"D", "half_life", "time_to"}
        pool : int, optional
            Position in :attr:`rate_index` of the pool whose half-life is the target.
        fraction : float, default=0.95
            Fraction of the change for ``"time_to"``.

        Returns
        -------
        (float, ndarray of shape (n_free,)) or (None, None)
            None when the model has no rate to report (a user model without rates).
        """
        if criterion == "time_to":
            kin = self.kin
            tau = time_to(kin, fraction, theta)
            if kin.structure == "parallel" and kin.growth_kind in (None, "exponential"):
                g = time_to_grad(kin, fraction, tau, theta)
            else:  # central differences with relative steps
                g = np.zeros(theta.size)
                for j in range(theta.size):
                    h = 1e-6 * max(abs(theta[j]), 1e-6)
                    tp, tm = theta.copy(), theta.copy()
                    tp[j] += h
                    tm[j] -= h
                    g[j] = (time_to(kin, fraction, tp) - time_to(kin, fraction, tm)) / (2 * h)
            return float(tau), g @ self.A
        if not self.rate_index:
            return None, None
        i = self.rate_index[-1 if pool is None else pool]
        k = float(theta[i])
        g = np.zeros(theta.size)
        g[i] = -LN2 / k**2
        return LN2 / k, g @ self.A


def _user_evaluate(fn, n_params):
    def evaluate(t, theta):
        out = fn(t, theta)
        if not (isinstance(out, tuple) and len(out) == 2):
            raise DataError("'model': a user model must return (y, J), the values and the "
                            f"Jacobian; got {type(out).__name__}")
        y = np.asarray(out[0], dtype=float).reshape(-1)
        J = np.asarray(out[1], dtype=float)
        if y.shape != t.shape or J.shape != (t.size, n_params):
            raise DataError(f"'model': a user model must return y of shape {t.shape} and J of "
                            f"shape ({t.size}, {n_params}); got {y.shape} and {J.shape}")
        return y, J
    return evaluate


def _selector(names, free, fractions=()):
    """A for free plain parameters and free fractions (all but the last free one)."""
    free_fr = [nm for nm in fractions if nm in free]
    dep = free_fr[-1] if free_fr else None
    cols = []
    for nm in names:
        if nm not in free or nm == dep:
            continue
        c = np.zeros(len(names))
        c[names.index(nm)] = 1.0
        if nm in free_fr:
            c[names.index(dep)] = -1.0
        cols.append(c)
    return np.array(cols).T.reshape(len(names), len(cols))


def _fixed_names(fixed, names, truth):
    if fixed is None:
        return {}
    if isinstance(fixed, Mapping):
        out = {}
        for k, v in fixed.items():
            if k not in names:
                raise DataError(f"'fixed' names {k!r}, which is not a parameter of the model; "
                                f"its parameters are {', '.join(names)}")
            try:
                out[k] = float(v)
            except (TypeError, ValueError):
                raise DataError(f"'fixed[{k!r}]' must be a number; got {v!r}") from None
            if not math.isfinite(out[k]):
                raise DataError(f"'fixed[{k!r}]' must be finite; got {v!r}")
        return out
    if isinstance(fixed, str):
        fixed = [fixed]
    out = {}
    for k in fixed:
        if k not in names:
            raise DataError(f"'fixed' names {k!r}, which is not a parameter of the model; "
                            f"its parameters are {', '.join(names)}")
        out[k] = truth.get(k, math.nan)
    return out


def model_spec(model, truth, *, fixed=None, param_names=None, rate_names=None):
    r"""Reduce a model and a guess of its parameters to a :class:`ModelSpec`.

    Parameters
    ----------
    model : TurnoverModel or callable
        A :class:`~isoturnover.TurnoverModel`, or a function ``model(t, theta) -> (y, J)``
        returning the values (shape (n,)) and the Jacobian (shape (n, n_params)) at times
        ``t`` for the parameter vector ``theta`` in the order of ``param_names``.
    truth : dict
        Guessed parameter values by name (every parameter; the last pool fraction may be
        left out and is then ``1 −`` the others). For a turnover model the levels carry
        the size of the isotopic change (``delta0``, ``delta_eq`` in ‰).
    fixed : dict or sequence of str, optional
        Parameters held fixed in the fit (not in the information matrix); a sequence takes
        their values from ``truth``.
    param_names : sequence of str, optional
        Parameter names of a user model (required with a callable).
    rate_names : sequence of str, optional
        The rates of a user model (for the half-life target and the prior).

    Returns
    -------
    ModelSpec

    Raises
    ------
    DataError
        When ``truth`` misses a parameter or names an unknown one, a value is not finite,
        pool fractions do not sum to 1, a user model lacks ``param_names``, exponential
        growth has no fixed ``k_growth``, or no parameter is free.
    """
    if not isinstance(truth, Mapping):
        raise DataError(f"'truth' must be a dict of parameter values by name; got "
                        f"{type(truth).__name__}")
    if isinstance(model, TurnoverModel):
        if param_names is not None or rate_names is not None:
            raise DataError("'param_names' and 'rate_names' are for a user model function; a "
                            "TurnoverModel names its own parameters")
        kin = model.kinetics
        names = list(kin.param_names)
        frac = [names[i] for i in kin.fraction_index]
        rates = [names[i] for i in kin.rate_index]
        evaluate = kin.evaluate

        def ev(t, theta):
            return evaluate(t, theta, jacobian=True)
        switch = float(kin.switch_times[0])
        description = model.describe()
    elif callable(model):
        if param_names is None:
            raise DataError("'param_names' is required with a user model function: the names "
                            "of theta's entries, in order")
        names = [str(n) for n in param_names]
        if len(set(names)) != len(names) or not names:
            raise DataError(f"'param_names' must be distinct names; got {param_names!r}")
        frac = []
        rates = list(rate_names or [])
        bad = [r for r in rates if r not in names]
        if bad:
            raise DataError(f"'rate_names' names {bad[0]!r}, not in param_names {names}")
        ev = _user_evaluate(model, len(names))
        kin = None
        switch = 0.0
        description = f"user model ({', '.join(names)})"
    else:
        raise DataError("'model' must be a TurnoverModel or a function model(t, theta) -> "
                        f"(y, J); got {type(model).__name__}")
    unknown = [k for k in truth if k not in names]
    if unknown:
        raise DataError(f"'truth' names {unknown[0]!r}, which is not a parameter of the "
                        f"model; its parameters are {', '.join(names)}")
    fixed = _fixed_names(fixed, names, truth)
    vals = {**truth, **fixed}
    if frac and frac[-1] not in vals and all(f in vals for f in frac[:-1]):
        vals[frac[-1]] = 1.0 - sum(float(vals[f]) for f in frac[:-1])
    if kin is not None:
        for nm in names:
            if nm.startswith("growth_") and nm not in vals:
                g = model.growth  # a fitted growth curve: its values are the guess
                vals[nm] = float(dict(zip(g.param_names, g.values))[nm[len("growth_"):]])
    missing = [n for n in names if n not in vals]
    if missing:
        raise DataError(f"'truth' must give every parameter of the model; missing "
                        f"{', '.join(missing)} (parameters: {', '.join(names)})")
    theta = np.empty(len(names))
    for i, n in enumerate(names):
        try:
            theta[i] = float(vals[n])
        except (TypeError, ValueError):
            raise DataError(f"'truth[{n!r}]' must be a number; got {vals[n]!r}") from None
        if not math.isfinite(theta[i]):
            raise DataError(f"'truth[{n!r}]' must be finite; got {vals[n]!r}")
    if frac and abs(sum(theta[names.index(f)] for f in frac) - 1.0) > 1e-9:
        raise DataError(f"'truth': the pool fractions {', '.join(frac)} must sum to 1; got "
                        f"{sum(theta[names.index(f)] for f in frac):g}")
    for r in rates:
        if r not in fixed and not theta[names.index(r)] > 0:
            raise DataError(f"'truth[{r!r}]' must be a positive rate; got "
                            f"{theta[names.index(r)]:g}")
    if kin is not None:
        if kin.growth_kind == "exponential" and "k_growth" not in fixed:
            raise DataError("growth='exponential': fix 'k_growth' (fixed=['k_growth']) for a "
                            "design; the δ series alone cannot tell growth from turnover")
        for nm in names:  # a fitted growth curve is taken as known in a design
            if nm.startswith("growth_"):
                fixed.setdefault(nm, float(theta[names.index(nm)]))
    free = [n for n in names if n not in fixed]
    A = _selector(names, free, frac)
    if A.shape[1] == 0:
        raise DataError("every parameter is fixed: there is nothing for a design to estimate")
    rate_index = [names.index(r) for r in rates if r not in fixed]
    if kin is None:  # a user model's rates, fastest first (the last is the slowest)
        rate_index.sort(key=lambda i: -theta[i])
    return ModelSpec(names=names, theta=theta, A=A, rate_index=rate_index, switch=switch,
                     fixed=fixed, evaluate=ev, kin=kin,
                     fraction_index=[names.index(f) for f in frac], description=description)


# ----------------------------------------------------------------------------------------
# Prior on the rates
# ----------------------------------------------------------------------------------------
def prior_points(spec, prior_cv, rng=0):
    r"""Parameter vectors and weights of the log-normal prior on the free rates.

    Each free rate becomes :math:`k\,e^{\sigma z}`, :math:`\sigma^2 = \ln(1 + cv^2)`
    (log-normal with median ``k`` and coefficient of variation ``prior_cv``). For one or
    two rates z runs over the product of 5-node Gauss–Hermite rules (probabilists'
    Hermite polynomials, ``numpy.polynomial.hermite_e.hermegauss``; exact for polynomials
    of degree 9 in z); for more, 64 standard normal draws from ``numpy.random.default_rng
    (rng)`` with equal weights. Parallel pools are put back in order, fastest first, with
    their fractions. Without a prior: the guess alone.

    Parameters
    ----------
    spec : ModelSpec
        The model (:func:`model_spec`).
    prior_cv : float or None
        Coefficient of variation of each rate (> 0), or None.
    rng : int, default=0
        Seed of the Monte Carlo draws.

    Returns
    -------
    (ndarray of shape (S, n_params), ndarray of shape (S,))
        Parameter vectors and weights summing to 1.
    """
    th0 = spec.theta
    if prior_cv is None or not spec.rate_index:
        return th0[None, :].copy(), np.ones(1)
    s = math.sqrt(math.log1p(float(prior_cv) ** 2))
    r = len(spec.rate_index)
    if r <= 2:
        x, w = np.polynomial.hermite_e.hermegauss(_N_HERMITE)
        w = w / w.sum()
        grids = np.meshgrid(*([x] * r), indexing="ij")
        z = np.stack([g.ravel() for g in grids], axis=1)
        wts = np.prod(np.meshgrid(*([w] * r), indexing="ij"), axis=0).ravel()
    else:
        z = np.random.default_rng(rng).standard_normal((_N_MONTE_CARLO, r))
        wts = np.full(_N_MONTE_CARLO, 1.0 / _N_MONTE_CARLO)
    thetas = np.repeat(th0[None, :], z.shape[0], axis=0)
    idx = np.array(spec.rate_index)
    thetas[:, idx] = th0[idx] * np.exp(s * z)
    kin = spec.kin
    if kin is not None and kin.structure == "parallel" and len(kin.rate_index) > 1:
        ki, fi = np.array(kin.rate_index), np.array(kin.fraction_index)
        for row in thetas:
            order = np.argsort(-row[ki], kind="stable")
            row[ki], row[fi] = row[ki][order], row[fi][order]
    return thetas, wts


# ----------------------------------------------------------------------------------------
# Criteria on stacks of information matrices
# ----------------------------------------------------------------------------------------
