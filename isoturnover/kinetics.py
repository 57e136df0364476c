r"""Forward models of tissue isotope values and their exact Jacobians.

Pure numpy: no lmfit, no pandas. Everything the fitting, uncertainty and planning modules
evaluate comes through :class:`TurnoverKinetics`.

The science (see DESIGN §2). A tissue is a mixture of ``n`` pools with fractions :math:`f_i`,
each relaxing first-order toward the value set by the diet in force,

.. math::

    \frac{d\delta_i}{dt} = (k_i + g(t))\,(\delta_{in}(t) - \delta_i), \qquad
    \delta = \sum_i f_i \delta_i ,

where :math:`g = d\ln W/dt` is the specific growth rate when a growth curve is given
(growth dilution; Hesslein et al. 1993) and zero otherwise. The equation is linear in δ, so
the response to a piecewise-constant input is the superposition of its responses to the
steps at the switch times :math:`s_j`. For a unit step at :math:`s` the old material left in
pool i at :math:`t > s` is

.. math::

    \Phi_i(s, t) = \frac{W(s)}{W(t)}\, e^{-k_i (t - s)}

(:math:`e^{-(k_i + k_g)(t-s)}` for exponential growth, :math:`e^{-k_i(t-s)}` without growth),
so with tissue equilibrium values :math:`L_0, L_1, \dots, L_m` for the successive diets

.. math::

    \delta(t) = L_0 + \sum_{j=1}^{m} (L_j - L_{j-1})
                 \Big(1 - \sum_i f_i \Phi_i(s_j, t)\Big) H(t - s_j).

The precursor–product chain replaces :math:`\sum_i f_i\Phi_i` by the two-step response
:math:`\Phi_c(\tau) = (k_1 e^{-k_2\tau} - k_2 e^{-k_1\tau})/(k_1 - k_2)`, evaluated in the
stable form :math:`e^{-k_2\tau}\,(1 + k_2\tau\,\psi((k_1-k_2)\tau))` with
:math:`\psi(x) = (1 - e^{-x})/x`, exact through the removable singularity at
:math:`k_1 = k_2` (where it is :math:`e^{-k\tau}(1 + k\tau)`).

When the diet history knows when the first diet began and the diet eaten before it
(``DietHistory(..., start=s_0, previous=v)``), the tissue starts at equilibrium with that
earlier diet: its level :math:`L_{-1}` leads the sum, and the change at :math:`s_0` is one more
step, :math:`(L_0 - L_{-1})(1 - \sum_i f_i \Phi_i(s_0, t)) H(t - s_0)`. The switches the
rest of the library measures from (:attr:`TurnoverKinetics.switch_times`) stay the history's
changes.

A lag shifts every switch time by ``lag``. On the atom-fraction scale the pools mix in atom
fraction :math:`x = R/(1+R)` and the tissue value is returned as δ. The step responses, the
chain's stable form with its derivatives and the atom-fraction scale live in
:mod:`isoturnover.responses`; :func:`remaining_parallel` and :func:`remaining_chain` are
re-exported here.
"""

from __future__ import annotations

import math

import numpy as np

from .conventions import check_choice
from .diet import DietHistory
from .errors import DataError
from .responses import atom_scale, chain_terms, remaining_chain, remaining_parallel

__all__ = [
    "TurnoverKinetics",
    "remaining_parallel",
    "remaining_chain",
    "MAX_POOLS",
]

MAX_POOLS = 4
_STRUCTURES = ("parallel", "chain")
_SEPARATIONS = ("difference", "epsilon")
_SCALES = ("delta", "atom_fraction")
_INITIALS = ("equilibrium", "free")


# ----------------------------------------------------------------------------------------
# Growth hook
# ----------------------------------------------------------------------------------------
def _growth_log_mass(growth, t):
    if hasattr(growth, "log_mass"):
        return np.asarray(growth.log_mass(t), dtype=float)
    return np.log(np.asarray(growth.predict(t), dtype=float))


def _growth_rate(growth, t):
    if hasattr(growth, "rate"):
        return np.asarray(growth.rate(t), dtype=float)
    h = 1e-5 * max(1.0, float(np.max(np.abs(t))) if np.size(t) else 1.0)
    return (_growth_log_mass(growth, t + h) - _growth_log_mass(growth, t - h)) / (2 * h)


# ----------------------------------------------------------------------------------------
# The model
# ----------------------------------------------------------------------------------------
class TurnoverKinetics:
    """Tissue δ under a diet history, with its Jacobian in natural parameters.

    Parameters
    ----------
    pools : int, default=1
        Number of parallel pools (1–4). Ignored for the chain (two steps).
    structure : {"parallel", "chain"}
    diet : DietHistory or None
        ``None``: one step switch at t = 0 from ``delta0`` to ``delta_eq``. A history with
        ``start`` and a known ``previous`` diet is solved from equilibrium with that diet at
        ``start`` (with ``initial="equilibrium"``).
    separation : {"difference", "epsilon"}
        How a known diet value becomes the tissue's equilibrium value:
        ``diet + discrimination`` or ``(1000 + diet)(1 + epsilon/1000) − 1000``.
    per_diet_separation : bool, default=False
        One separation per distinct diet value instead of one shared by all diets.
    lag : bool, default=False
        Fit a pure delay between each diet switch and the tissue's response.
    initial : {"equilibrium", "free"}
        ``"equilibrium"``: the tissue starts at equilibrium with the first diet.
        ``"free"``: every pool holds ``delta0`` at the first switch (animals not at
        equilibrium when switched); before the first switch the model returns ``delta0``.
    scale : {"delta", "atom_fraction"}
        Mixing scale of the pools; results are always δ (‰).
    isotope : str, optional
        Isotope code; needed for ``scale="atom_fraction"``.
    growth : None, "exponential" or a growth curve
        ``"exponential"`` adds the parameter ``k_growth`` (W = W0 e^{k_growth t});
        an object with ``predict(t)`` (mass; ``log_mass(t)`` and ``rate(t)`` used when
        present) gives the dilution factor W(s)/W(t). Rates ``k1…kn`` are then catabolic.
    reference_ratio : float, optional
        Override of the isotope's reference ratio on the atom-fraction scale.
    growth_params : bool, default=False
        With a growth curve from :mod:`isoturnover.growth` (``fit_growth`` or
        ``GrowthCurve``): make the curve's parameters parameters of the model
        (``growth_<name>``), so a joint fit with the body masses estimates them.

    Attributes
    ----------
    param_names : tuple of str
        Names of the natural parameters, in the order of ``theta`` and of the Jacobian's
        columns.
    n_params : int
        Number of natural parameters.
    switch_times : ndarray
        Times of the diet switches (before any lag).
    lead_in : float or None
        Time the first diet began when the model starts from the diet before it
        (``diet.start`` with a known ``diet.previous`` and ``initial="equilibrium"``), else
        None.
    rate_index, fraction_index : list of int
        Positions of the rates ``k1…`` and fractions ``f1…`` in ``theta``.
    lag_index, growth_rate_index : int or None
        Position of ``lag`` and of ``k_growth`` in ``theta``, if present.
    growth_param_index : list of int
        Positions of the growth curve's parameters (``growth_params=True``).
    memo : dict
        Objects that higher layers derive from this kinetics alone and reuse across fits
        (the plain coordinate map, the variable projection's level constraints); the
        kinetics does not change after construction, so they stay valid.

    Raises
    ------
    DataError
        For an option outside its allowed values or of the wrong type (the message names
        the argument and what is expected), growth dilution with the chain, a diet
        history without a change, or, with ``scale="atom_fraction"``, a known diet value
        at or below −1000 ‰ (a negative isotope ratio).
    ScaleError
        For ``scale="atom_fraction"`` without a two-isotope ``isotope``.
    """

    def __init__(
        self,
        pools: int = 1,
        *,
        structure: str = "parallel",
        diet: DietHistory | None = None,
        separation: str = "difference",
        per_diet_separation: bool = False,
        lag: bool = False,
        initial: str = "equilibrium",
        scale: str = "delta",
        isotope: str | None = None,
        growth=None,
        reference_ratio: float | None = None,
        growth_params: bool = False,
    ):
        self.memo = {}
        self.structure = check_choice("structure", structure, _STRUCTURES)
        if self.structure == "chain":
            pools = 2
        if isinstance(pools, bool) or not isinstance(pools, (int, np.integer)) or not (
            1 <= pools <= MAX_POOLS
        ):
            kind = "" if isinstance(pools, (int, np.integer)) else f" ({type(pools).__name__})"
            raise DataError(
                f"'pools' must be an integer from 1 to {MAX_POOLS}; got {pools!r}{kind}")
        self.pools = int(pools)
        if diet is not None and not isinstance(diet, DietHistory):
            raise DataError("'diet' must be a DietHistory or None; "
                            f"got {type(diet).__name__}")
        self.diet = diet
        self.separation = check_choice("separation", separation, _SEPARATIONS)
        self.per_diet_separation = bool(per_diet_separation)
        self.lag = bool(lag)
        self.initial = check_choice("initial", initial, _INITIALS)
        self.scale = check_choice("scale", scale, _SCALES)
        self.isotope = isotope
        self._atom = (
            atom_scale(isotope, reference_ratio) if self.scale == "atom_fraction" else None
        )
        if self._atom is not None and diet is not None:
            named = [("previous", diet.previous)] if diet.start is not None else []
            named += [("initial", diet.initial)] + [
                (f"changes[{i}]", v) for i, v in enumerate(diet.values[1:])]
            for what, v in named:
                if v <= -1000.0:  # NaN (unknown) passes
                    raise DataError(
                        f"'diet' {what}: δ = {v:g} ‰ implies a negative isotope ratio; "
                        "scale='atom_fraction' needs diet values > -1000 ‰")
        if isinstance(growth, str):
            if growth != "exponential":
                raise DataError(
                    f"'growth' must be None, 'exponential' or a growth curve with predict(t); "
                    f"got {growth!r}"
                )
            self.growth_kind = "exponential"
        elif growth is None:
            self.growth_kind = None
        else:
            if not hasattr(growth, "predict"):
                raise DataError(
                    "'growth' must be None, 'exponential' or a growth curve with predict(t); "
                    f"got {type(growth).__name__}"
                )
            self.growth_kind = "curve"
            if growth_params:
                if not (hasattr(growth, "law") and hasattr(growth, "values")):
                    raise DataError("'growth_params'=True needs a growth curve from "
                                    "isoturnover.growth (fit_growth or GrowthCurve); got "
                                    f"{type(growth).__name__}")
                self.growth_kind = "curve_params"
        if self.growth_kind is not None and self.structure == "chain":
            # a DataError: a chain candidate beside body masses is one model that cannot be
            # fitted to that series, not a failure of the whole run (see fit_each)
            raise DataError("growth dilution is available for structure='parallel' only")
        self.growth = growth
        self._build()

    # -- parameter layout -------------------------------------------------------------------
    def _build(self):
        names: list[str] = []
        diet = self.diet
        self.lead_in = None
        if (diet is not None and diet.start is not None and math.isfinite(diet.previous)
                and self.initial == "equilibrium"):
            self.lead_in = float(diet.start)
        sep_name = "discrimination" if self.separation == "difference" else "epsilon"
        if diet is None:
            self.switch_times = np.array([0.0])
            names += ["delta0", "delta_eq"]
            self._level_spec = [("param", 0), ("param", 1)]
            self.n_levels = 2
        else:
            if diet.n_diets < 2:
                raise DataError("'diet': the diet history has no change; a turnover fit needs "
                                "at least one")
            self.switch_times = diet.switch_times
            vals = diet.values
            known = diet.known
            used = list(range(diet.n_diets)) if self.initial == "equilibrium" else list(
                range(1, diet.n_diets)
            )
            if self.lead_in is not None:
                # the diet before the first: a known diet of its own, level -1
                vals, known = np.append(vals, diet.previous), np.append(known, True)
                used = used + [diet.n_diets]
            spec: list = [None] * vals.size
            if self.initial == "free":
                names.append("delta0")
                spec[0] = ("param", 0)
            # plateau parameters for unknown diets
            for j in used:
                if not known[j]:
                    spec[j] = ("param", len(names))
                    names.append(f"plateau_{j}")
            # separation parameters for known diets
            known_used = [j for j in used if known[j]]
            if known_used:
                if self.per_diet_separation:
                    uniq: list[float] = []
                    for j in known_used:
                        if vals[j] not in uniq:
                            uniq.append(vals[j])
                    first = {v: len(names) + i for i, v in enumerate(uniq)}
                    names += [f"{sep_name}_{i}" for i in range(len(uniq))]
                    for j in known_used:
                        spec[j] = ("diet", float(vals[j]), first[vals[j]])
                else:
                    idx = len(names)
                    names.append(sep_name)
                    for j in known_used:
                        spec[j] = ("diet", float(vals[j]), idx)
            if self.lead_in is not None:
                spec = [spec[-1]] + spec[:-1]  # the level before the first diet leads
            self._level_spec = spec
            self.n_levels = diet.n_diets
        self.n_level_params = len(names)
        if self.structure == "chain":
            self.rate_index = [len(names), len(names) + 1]
            names += ["k1", "k2"]
            self.fraction_index = []
        else:
            self.rate_index = list(range(len(names), len(names) + self.pools))
            names += [f"k{i + 1}" for i in range(self.pools)]
            self.fraction_index = list(range(len(names), len(names) + self.pools))
            names += [f"f{i + 1}" for i in range(self.pools)]
        self.lag_index = None
        if self.lag:
            self.lag_index = len(names)
            names.append("lag")
        self.growth_rate_index = None
        if self.growth_kind == "exponential":
            self.growth_rate_index = len(names)
            names.append("k_growth")
        self.growth_param_index = []
        if self.growth_kind == "curve_params":
            self._gcurve = self.growth.law
            self.growth_param_index = list(range(len(names), len(names) + len(self._gcurve.params)))
            names += [f"growth_{p}" for p in self._gcurve.params]
        self.param_names = tuple(names)
        self.n_params = len(names)
        self._simple_step = (self.diet is None and self.structure == "parallel"
                             and not self.lag and self.growth_kind is None
                             and self._atom is None and self.initial == "equilibrium")
        # one switch, parallel pools on the δ scale, no growth curve: a closed form with few
        # array operations (the common diet-switch experiment)
        self._one_switch = (not self._simple_step and self.structure == "parallel"
                            and self.growth_kind in (None, "exponential")
                            and self._atom is None and self.switch_times.size == 1
                            and self.lead_in is None)
        # every step of the model: the history's switches, after the first diet's start
        # when the model starts from the diet before it (level -1, first in _level_spec)
        self._lead = int(self.lead_in is not None)
        self._step_times = (self.switch_times if self.lead_in is None
                            else np.r_[self.lead_in, self.switch_times])
        # the levels are affine in theta for both separation forms: L = c + M theta
        c = np.zeros(len(self._level_spec))
        M = np.zeros((len(self._level_spec), self.n_params))
        for j, sp in enumerate(self._level_spec):
            if sp[0] == "param":
                M[j, sp[1]] = 1.0
            else:
                _, v, idx = sp
                c[j] = v
                M[j, idx] = (1000.0 + v) / 1000.0 if self.separation == "epsilon" else 1.0
        self._level_c, self._level_M = c, M
        # contiguous blocks as slices (cheaper than fancy indexing in the inner loops)
        ki, fi = self.rate_index, self.fraction_index
        self._k_slice = slice(ki[0], ki[-1] + 1)
        self._f_slice = slice(fi[0], fi[-1] + 1) if fi else slice(0, 0)
        self._M0 = M[self._lead].copy()
        self._M1 = M[self._lead + 1].copy() if self.n_levels > 1 else None

    @property
    def separation_names(self) -> tuple[str, ...]:
        """Names of the separation parameters (``discrimination…`` or ``epsilon…``)."""
        return tuple(n for n in self.param_names if n.startswith(("discrimination", "epsilon")))

    # -- levels ---------------------------------------------------------------------------
    @property
    def level_map(self) -> tuple[np.ndarray, np.ndarray]:
        r"""The levels as an affine map of the parameters, :math:`L = c + M\theta`.

        Returns
        -------
        tuple of (ndarray of shape (n_levels,), ndarray of shape (n_levels, n_params))
            ``c`` and ``M`` (copies): a known diet gives ``diet + separation`` (difference
            form) or ``diet + ε (1000 + diet)/1000`` (ε form), both affine; an unknown diet
            or ``delta0`` its own parameter.
        """
        return self._level_c.copy(), self._level_M.copy()

    def levels(self, theta) -> np.ndarray:
        """Tissue equilibrium value of each diet period.

        A known diet gives ``diet + discrimination`` (difference form) or
        ``(1000 + diet)(1 + epsilon/1000) − 1000`` (ε form; Coplen 2011's definitions); an
        unknown diet its fitted ``plateau_j``. With ``initial="free"`` the first entry is
        ``delta0``, the state at the first switch.

        Parameters
        ----------
        theta : array-like of shape (n_params,)
            Natural parameters in the order of :attr:`param_names`.

        Returns
        -------
        ndarray of shape (n_levels,)
            δ (‰), one value per diet period, the initial diet first.
        """
        return self._levels(np.asarray(theta, dtype=float))[0][self._lead:]

    def _levels(self, theta):
        """Levels and their Jacobian d L_j / d theta, the level before the first diet first
        when the model starts from it (:attr:`lead_in`).

        Difference form ``diet + Δ`` and ε form ``(1000 + diet)(1 + ε/1000) − 1000 =
        diet + ε (1000 + diet)/1000`` are both affine in the parameters, so
        ``L = c + M θ`` with constant ``c`` and ``M`` built once.
        """
        return self._level_c + self._level_M @ theta, self._level_M

    # -- evaluation -----------------------------------------------------------------------
    def evaluate(self, t, theta, jacobian: bool = False):
        """Tissue δ at times ``t`` (and the Jacobian), without input checks.

        The superposition of step responses of the module docstring, vectorised over times
        and switches; the Jacobian is exact (analytic partial derivatives of the same
        formulas). :meth:`predict` is the checked version.

        Parameters
        ----------
        t : ndarray of shape (n,)
            Times, in the data's time unit (days by default), finite.
        theta : ndarray of shape (n_params,)
            Natural parameters in the order of :attr:`param_names` (rates per time unit,
            δ values and separations in ‰).
        jacobian : bool, default=False
            Also return d δ / d theta.

        Returns
        -------
        y : ndarray of shape (n,)
            Tissue δ (‰).
        J : ndarray of shape (n, n_params)
            d δ / d theta; returned (as ``(y, J)``) only with ``jacobian=True``.
        """
        t = np.asarray(t, dtype=float)
        theta = np.asarray(theta, dtype=float)
        if self._simple_step:
            return self._evaluate_step(t, theta, jacobian)
        if self._one_switch:
            return self._evaluate_one_switch(t, theta, jacobian)
        L, dL = self._levels(theta)
        lag = theta[self.lag_index] if self.lag_index is not None else 0.0
        s = self._step_times + lag  # (m,)
        tau = t[None, :] - s[:, None]  # (m, n)
        on = tau > 0
        taup = np.where(on, tau, 0.0)
        if self._atom is not None:
            Lw = self._atom.to_x(L)
            dLw = self._atom.dx_dd(L)[:, None] * dL
        else:
            Lw, dLw = L, dL
        step = np.diff(Lw)  # (m,) size of each step on the working scale
        k = theta[self.rate_index]
        want = jacobian
        if self.structure == "chain":
            phi, d_a, d_b, d_tau = chain_terms(taup, k[0], k[1])
            E = np.where(on, phi, 0.0)  # (m, n)
            R = on - E  # response to each step
            y = Lw[0] + step @ R
            if not want:
                return self._out(y, None)
            J = np.zeros((t.size, self.n_params))
            J[:, self.rate_index[0]] = -(step @ np.where(on, d_a, 0.0))
            J[:, self.rate_index[1]] = -(step @ np.where(on, d_b, 0.0))
            if self.lag_index is not None:
                # dE/ds = -dPhi/dtau
                J[:, self.lag_index] = step @ np.where(on, d_tau, 0.0)
        else:
            f = theta[self.fraction_index]
            kk = k.copy()
            G = None
            if self.growth_kind == "exponential":
                kk = kk + theta[self.growth_rate_index]
            elif self.growth_kind == "curve":
                lw_t = _growth_log_mass(self.growth, t)
                lw_s = _growth_log_mass(self.growth, s)
                G = np.exp(np.where(on, lw_s[:, None] - lw_t[None, :], 0.0))
            elif self.growth_kind == "curve_params":
                gv = theta[self.growth_param_index]
                lw_t = np.asarray(self._gcurve.log_mass(t, gv), dtype=float)
                lw_s = np.asarray(self._gcurve.log_mass(s, gv), dtype=float)
                G = np.exp(np.where(on, lw_s[:, None] - lw_t[None, :], 0.0))
            Ei = np.exp(-kk[:, None, None] * taup[None, :, :])  # (p, m, n), fresh array
            if G is not None:
                Ei = Ei * G[None]
            Ei *= on[None]
            p_, m_, n_ = Ei.shape
            # S_i = sum_j step_j E_ij  (p, n): the pools' responses to the diet history
            SE = (step @ Ei.transpose(1, 0, 2).reshape(m_, p_ * n_)).reshape(p_, n_)
            y = Lw[0] + step @ on - f @ SE
            if not want:
                return self._out(y, None)
            E = (f @ Ei.reshape(p_, m_ * n_)).reshape(m_, n_)
            R = on - E
            J = np.zeros((t.size, self.n_params))
            # d y / d f_i = - sum_j step_j E_ij
            J[:, self.fraction_index] = -SE.T
            # d y / d k_i = sum_j step_j f_i tau_j E_ij
            STE = (step @ (Ei * taup[None]).transpose(1, 0, 2).reshape(m_, p_ * n_)).reshape(
                p_, n_)
            J[:, self.rate_index] = (f[:, None] * STE).T
            if self.growth_rate_index is not None:
                J[:, self.growth_rate_index] = f @ STE
            if self.growth_param_index:
                # dE_ij/dv = E_ij (d lnW(s_j)/dv - d lnW(t)/dv)
                Ls = np.asarray(self._gcurve.log_jac(s, gv), dtype=float)  # (m, q)
                Lt = np.asarray(self._gcurve.log_jac(t, gv), dtype=float)  # (n, q)
                SEm = step[:, None] * E  # (m, n)
                J[:, self.growth_param_index] = -(SEm.T @ Ls) + Lt * (step @ E)[:, None]
            if self.lag_index is not None:
                g_s = kk.copy()[:, None] * np.ones((1, s.size))  # (p, m)
                if self.growth_kind == "curve":
                    g_s = g_s + _growth_rate(self.growth, s)[None, :]
                elif self.growth_kind == "curve_params":
                    g_s = g_s + np.asarray(self._gcurve.rate(s, gv), dtype=float)[None, :]
                # dE_ij/ds_j = (k_i + g(s_j)) E_ij ; dR/ds = -sum_i f_i dE_ij/ds_j
                dEds = np.einsum("i,ij,ijn->jn", f, g_s, Ei)
                J[:, self.lag_index] = -(step @ dEds)
        # level derivatives: y = Lw0 + sum_j (Lw_j - Lw_{j-1}) R_j
        m = step.size
        coef = np.empty((m + 1, t.size))
        coef[0] = 1.0 - R[0]
        if m > 1:
            coef[1:m] = R[: m - 1] - R[1:m]
        coef[m] = R[m - 1]
        J += coef.T @ dLw
        return self._out(y, J)

    def _evaluate_step(self, t, theta, jacobian):
        """Fast path: one step at t = 0, parallel pools, δ scale, no lag, no growth.

        δ = δ_eq + (δ0 − δ_eq) Σ f_i e^{−k_i t⁺} (same values as the general path).
        """
        d0, de = theta[0], theta[1]
        p = self.pools
        k = theta[2:2 + p]
        f = theta[2 + p:2 + 2 * p]
        tp = np.maximum(t, 0.0)
        E = np.exp(-np.outer(k, tp))  # (p, n)
        S = f @ E
        amp = d0 - de
        y = de + amp * S
        if not jacobian:
            return y
        J = np.empty((t.size, self.n_params))
        J[:, 0] = S
        J[:, 1] = 1.0 - S
        J[:, 2:2 + p] = (-amp * f[:, None] * tp[None, :] * E).T
        J[:, 2 + p:2 + 2 * p] = amp * E.T
        return y, J

    def _evaluate_one_switch(self, t, theta, jacobian):
        r"""Fast path: one switch at :math:`s` (plus the lag), parallel pools, δ scale, no
        growth curve (exponential growth adds :math:`k_g` to every rate).

        :math:`\delta = L_0 + (L_1 - L_0) R`, :math:`R = H(\tau)(1 - \sum_i f_i
        e^{-\kappa_i \tau})`, :math:`\tau = t - s`; the same values as the general path.
        """
        L0 = self._level_c[0] + self._M0 @ theta
        L1 = self._level_c[1] + self._M1 @ theta
        lag = theta[self.lag_index] if self.lag_index is not None else 0.0
        tp = t - (self.switch_times[0] + lag)
        on = tp > 0
        tp[~on] = 0.0
        k = theta[self._k_slice]
        if self.growth_rate_index is not None:
            k = k + theta[self.growth_rate_index]
        f = theta[self._f_slice]
        E = np.exp(-np.outer(k, tp))  # (p, n)
        R = on * (1.0 - f @ E)
        amp = L1 - L0
        y = L0 + amp * R
        if not jacobian:
            return y
        J = np.outer(1.0 - R, self._M0)
        J += np.outer(R, self._M1)
        onE = E * on  # (p, n)
        J[:, self._f_slice] -= amp * onE.T
        dk = amp * (f[:, None] * tp * onE)  # dy/dk_i, (p, n)
        J[:, self._k_slice] += dk.T
        if self.growth_rate_index is not None:
            J[:, self.growth_rate_index] += dk.sum(axis=0)
        if self.lag_index is not None:
            # dR/ds = -sum_i f_i kappa_i e^{-kappa_i tau} for tau > 0
            J[:, self.lag_index] -= amp * ((f * k) @ onE)
        return y, J

    def _out(self, y, J):
        if self._atom is None:
            return y if J is None else (y, J)
        d = self._atom.to_delta(y)
        if J is None:
            return d
        return d, J * self._atom.dd_dx(y)[:, None]

    # -- checked public evaluation ------------------------------------------------------------
    def check_theta(self, theta) -> np.ndarray:
        r"""Validate a natural parameter vector.

        Parameters
        ----------
        theta : array-like of shape (n_params,)
            Natural parameters in the order of :attr:`param_names`.

        Returns
        -------
        ndarray of shape (n_params,)
            ``theta`` as a float array.

        Raises
        ------
        DataError
            When ``theta`` has the wrong length or a non-finite value, a rate is not
            positive, fractions are negative or do not sum to 1 (to 1e-12), or
            ``k_growth`` makes the animal lose mass faster than the slowest pool turns
            over (:math:`k_d + k_g < 0`, where the pool model does not hold; DESIGN §2), or,
            with ``scale="atom_fraction"``, a tissue level at or below −1000 ‰ (a negative
            isotope ratio).
        """
        try:
            theta = np.asarray(theta, dtype=float)
        except (TypeError, ValueError):
            raise DataError(f"'theta' must be an array of {self.n_params} numbers "
                            f"({', '.join(self.param_names)}); got {theta!r:.80}") from None
        if theta.shape != (self.n_params,):
            raise DataError(
                f"'theta' must have {self.n_params} values ({', '.join(self.param_names)}); "
                f"got shape {theta.shape}"
            )
        if not np.all(np.isfinite(theta)):
            bad = [n for n, v in zip(self.param_names, theta) if not math.isfinite(v)]
            raise DataError(f"'theta': parameters must be finite; got non-finite "
                            f"{', '.join(bad)}")
        k = theta[self.rate_index]
        if np.any(k <= 0):
            raise DataError(f"'theta': rates must be positive; got "
                            f"{dict(zip(self.rate_names, k.tolist()))}")
        if self.growth_rate_index is not None:
            # DESIGN §2: mass loss only while k_d + d ln W/dt >= 0; here d ln W/dt = k_growth
            kg = float(theta[self.growth_rate_index])
            if float(np.min(k)) + kg < 0:
                raise DataError(
                    f"'theta': k_growth = {kg:.4g}: the animal loses mass faster than the "
                    f"slowest pool turns over (k_d + k_growth = {float(np.min(k)) + kg:.4g} "
                    "< 0); the pool model does not hold there"
                )
        if self._atom is not None:
            L = self._levels(theta)[0]
            if np.any(L <= -1000.0):
                j = int(np.argmax(L <= -1000.0)) - self._lead
                which = "before the first diet" if j < 0 else f"of diet period {j}"
                raise DataError(
                    f"'theta': on scale='atom_fraction' the tissue level {which} is "
                    f"{L[j + self._lead]:.6g} ‰, at or below -1000 ‰ (a negative isotope "
                    "ratio)")
        if self.fraction_index:
            f = theta[self.fraction_index]
            if np.any(f < 0) or abs(f.sum() - 1.0) > 1e-12:
                raise DataError(
                    f"'theta': pool fractions must be non-negative and sum to 1 (to 1e-12); "
                    f"got {f.tolist()} (sum {f.sum():.15g})"
                )
        return theta

    def check_values(self, y, name: str = "y") -> None:
        r"""Refuse observed δ values that the model's scale cannot hold.

        On the atom-fraction scale a δ at or below −1000 ‰ implies a ratio
        :math:`R = R_s(1 + \delta/1000) \le 0` (Coplen 2011's definitions), which no
        atom fraction represents; the δ scale has no such limit. NaN is left to the data
        checks.

        Parameters
        ----------
        y : array-like
            Observed δ values (‰).
        name : str, default="y"
            Name of the argument, for the message.

        Raises
        ------
        DataError
            With ``scale="atom_fraction"``, for a value at or below −1000 ‰; the message
            names the argument, the first such value and its position.
        """
        if self._atom is None:
            return
        v = np.asarray(y, dtype=float).ravel()
        bad = np.flatnonzero(v <= -1000.0)
        if bad.size:
            i = int(bad[0])
            raise DataError(
                f"'{name}' must be > -1000 ‰ on scale='atom_fraction' (δ ≤ -1000 ‰ is a "
                f"negative isotope ratio); got {v[i]:g} at position {i} ({bad.size} of "
                f"{v.size} values)")

    @property
    def rate_names(self) -> tuple[str, ...]:
        """Names of the rate parameters (``k1…kn``, fastest first)."""
        return tuple(self.param_names[i] for i in self.rate_index)

    @property
    def fraction_names(self) -> tuple[str, ...]:
        """Names of the pool fractions (``f1…fn``; empty for the chain)."""
        return tuple(self.param_names[i] for i in self.fraction_index)

    def predict(self, t, theta, jacobian: bool = False):
        """Tissue δ at times ``t`` (and the Jacobian), with the inputs checked.

        Checks ``t`` and ``theta`` (:meth:`check_theta`; with a growth curve also
        :meth:`check_mass_loss`), then calls :meth:`evaluate`.

        Parameters
        ----------
        t : float or array-like
            Times, in the data's time unit (days by default), finite; flattened to 1-D.
        theta : array-like, dict or lmfit.Parameters
            Natural parameters: an array in :attr:`param_names` order, or a mapping name →
            value (lmfit ``Parameters`` are read through ``valuesdict()``).
        jacobian : bool, default=False
            Also return d δ / d theta.

        Returns
        -------
        y : ndarray of shape (n,)
            Tissue δ (‰).
        J : ndarray of shape (n, n_params)
            d δ / d theta; returned (as ``(y, J)``) only with ``jacobian=True``.

        Raises
        ------
        DataError
            For a missing parameter, a bad ``theta`` (see :meth:`check_theta`), non-finite
            times, or mass loss faster than the slowest pool turns over.
        """
        if isinstance(theta, dict) or hasattr(theta, "valuesdict"):
            d = theta.valuesdict() if hasattr(theta, "valuesdict") else theta
            missing = [n for n in self.param_names if n not in d]
            if missing:
                raise DataError(f"'theta': parameters missing: {', '.join(missing)}")
            try:
                theta = np.array([float(d[n]) for n in self.param_names])
            except (TypeError, ValueError):
                raise DataError(f"'theta' values must be numbers; got "
                                f"{ {n: d[n] for n in self.param_names}!r:.120}") from None
        theta = self.check_theta(theta)
        try:
            t = np.asarray(t, dtype=float)
        except (TypeError, ValueError):
            raise DataError(f"'t' must be a number or an array of numbers; got {t!r:.80}") \
                from None
        if t.ndim != 1:
            t = np.atleast_1d(t).ravel()
        if not np.all(np.isfinite(t)):
            raise DataError(f"'t' must be finite; got {int((~np.isfinite(t)).sum())} "
                            "non-finite value(s)")
        if self.growth_kind in ("curve", "curve_params") and self.fraction_index and t.size:
            self.check_mass_loss(theta, t)
        return self.evaluate(t, theta, jacobian=jacobian)

    def check_mass_loss(self, theta, t):
        r"""Refuse a growth curve that loses mass faster than the slowest pool turns over.

        The pool model holds only while :math:`k_d + d\ln W/dt \ge 0` for every pool
        (DESIGN §2); checked on 201 points from the first switch (or the first diet's start
        when the model starts from the diet before it, or the earliest time) to the last
        time.

        Parameters
        ----------
        theta : array-like of shape (n_params,)
            Natural parameters in the order of :attr:`param_names`.
        t : array-like
            The times to be evaluated, in the data's time unit.

        Raises
        ------
        DataError
            When :math:`\min_i k_{d,i} + d\ln W/dt < 0` somewhere on that grid.
        """
        k_min = float(np.min(np.asarray(theta)[self.rate_index]))
        lo = min(float(np.min(t)), float(self._step_times[0]))
        hi = float(np.max(t))
        grid = np.linspace(lo, hi, 201)
        g = self.growth_rate(grid, theta)
        worst = float(np.min(k_min + g))
        if worst < -1e-12:
            at = float(grid[int(np.argmin(k_min + g))])
            raise DataError(
                f"'growth': the growth curve loses mass faster than the slowest pool turns over: "
                f"k_d + d ln W/dt = {worst:.4g} < 0 at t = {at:.4g}; the pool model does not "
                "hold there"
            )

    def growth_rate(self, t, theta):
        r"""Specific growth rate :math:`g(t) = d\ln W/dt` of the model's growth.

        ``k_growth`` for exponential growth, the curve's own rate (or a central difference
        of its log mass) for a growth curve, 0 without growth.

        Parameters
        ----------
        t : float or array-like
            Times, in the data's time unit (days by default).
        theta : array-like of shape (n_params,)
            Natural parameters in the order of :attr:`param_names`.

        Returns
        -------
        ndarray
            :math:`d\ln W/dt` (per time unit, /d for days), shaped like ``t``.
        """
        t = np.asarray(t, dtype=float)
        theta = np.asarray(theta, dtype=float)
        if self.growth_kind is None:
            return np.zeros_like(t)
        if self.growth_kind == "exponential":
            return np.full_like(t, theta[self.growth_rate_index])
        if self.growth_kind == "curve_params":
            return np.asarray(self._gcurve.rate(t, theta[self.growth_param_index]), dtype=float)
        return _growth_rate(self.growth, t)

    def log_mass(self, t, theta):
        r"""Log body mass :math:`\ln W(t)` under the model's growth.

        Exponential growth: :math:`k_g t` (up to the constant :math:`\ln W_0`, not a
        parameter); a growth curve: its log mass; no growth: 0. Only differences of it
        enter the model (the dilution factor :math:`W(s)/W(t)`).

        Parameters
        ----------
        t : float or array-like
            Times, in the data's time unit (days by default).
        theta : array-like of shape (n_params,)
            Natural parameters in the order of :attr:`param_names`.

        Returns
        -------
        ndarray
            :math:`\ln W` (mass in the masses' unit), shaped like ``t``.
        """
        t = np.asarray(t, dtype=float)
        theta = np.asarray(theta, dtype=float)
        if self.growth_kind == "exponential":
            return theta[self.growth_rate_index] * t
        if self.growth_kind == "curve_params":
            return np.asarray(self._gcurve.log_mass(t, theta[self.growth_param_index]), dtype=float)
        if self.growth_kind == "curve":
            return _growth_log_mass(self.growth, t)
        return np.zeros_like(t)

    def remaining(self, tau, theta):
        r"""Fraction of a single step change still to come, :math:`1 - F(\tau)`.

        :func:`remaining_parallel` with the incorporation rates :math:`k_i + k_g`
        (exponential growth), or :func:`remaining_chain`; a growth curve and the lag are not
        applied (see :func:`isoturnover.quantities.remaining_after_switch` for the curve).

        Parameters
        ----------
        tau : float or array-like
            Time since the switch, in the data's time unit (days by default).
        theta : array-like of shape (n_params,)
            Natural parameters in the order of :attr:`param_names`.

        Returns
        -------
        float or ndarray
            :math:`1 - F` (dimensionless), shaped like ``tau``.
        """
        theta = np.asarray(theta, dtype=float)
        k = theta[self.rate_index]
        if self.structure == "chain":
            return remaining_chain(tau, k[0], k[1])
        if self.growth_rate_index is not None:
            k = k + theta[self.growth_rate_index]
        return remaining_parallel(tau, k, theta[self.fraction_index])

    def __repr__(self):
        return (f"TurnoverKinetics(structure={self.structure!r}, pools={self.pools}, "
                f"params={self.param_names})")
