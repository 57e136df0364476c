r"""The finished fit's state: solution, covariance and information criteria.

:class:`FitState` is built once from an :class:`~isoturnover.engine.Engine` and its
:class:`~isoturnover.engine.Solution`; every later step (intervals, resampling,
diagnostics, tables) reads it and none changes it.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special

__all__ = ["FitState"]


# ----------------------------------------------------------------------------------------
class FitState:
    r"""What one finished fit holds: data, solution, covariance and information criteria.

    Built once from an :class:`Engine` and its :class:`Solution`; every later step
    (intervals, resampling, diagnostics, tables) reads it and none changes it (its arrays
    are read-only).

    Error model (DESIGN §3). The weighted residuals are :math:`r_i = w_i (y_i - \hat y_i)`
    with :math:`w_i = 1/\sigma_i` when ``sigma`` is given and 1 otherwise; ``rss`` is
    :math:`\sum r_i^2`. Unless ``absolute_sigma`` the residual variance is estimated,
    :math:`s^2 = \mathrm{rss}/(n - p)`, and the covariance is :math:`s^2 (J^T J)^{-1}`; with
    ``absolute_sigma`` it is :math:`(J^T J)^{-1}`.

    Information criteria (Gaussian likelihood, constants dropped; ``k`` counts the free
    parameters plus the residual variance when it is estimated):
    :math:`\mathrm{AIC} = n\ln(\mathrm{rss}/n) + 2k`,
    :math:`\mathrm{AICc} = \mathrm{AIC} + 2k(k+1)/(n-k-1)`,
    :math:`\mathrm{BIC} = n\ln(\mathrm{rss}/n) + k\ln n`; with known σ
    :math:`\mathrm{AIC} = \chi^2 + 2k`.

    Attributes
    ----------
    kinetics : TurnoverKinetics
    engine : Engine
    coords : Coordinates
        The coordinate map the solution lives in.
    z, theta : ndarray
        Solution in internal coordinates and in natural parameters.
    jac_z : ndarray of shape (n_residuals, n_coordinates) or None
        Jacobian of the weighted residuals in internal coordinates at the solution.
    cov_z : ndarray
        Covariance in internal coordinates (NaN for coordinates the data do not touch);
        ``cov_z0`` is the same with those set to 0 (no first-order effect).
    covar : ndarray
        Covariance of the natural parameters.
    cov_ok : bool
        The covariance could be computed.
    dead : ndarray of bool
        Coordinates whose Jacobian column vanishes (a rate run to 0, a fraction at 0).
    rss, s2, dof, redchi : float
    aic, aicc, bic : float
    n_criteria_params : int
    converged, optimizer_ok : bool
    memo : dict
        Results computed from this state and kept (profile intervals of parameters, by
        :func:`~isoturnover.profiles.parameter_interval`): the state itself never changes,
        so each is computed once whoever asks.
    """

    def __init__(self, engine, sol, fixed):
        # attributes go straight into the instance's dict (the read-only guard of
        # __setattr__ would cost a Python call for each of some forty of them)
        st = self.__dict__
        kin = engine.kin
        st["kinetics"] = kin
        st["engine"] = engine
        st["solution"] = sol
        st["coords"] = sol.extra["coords"]
        st["fixed"] = dict(fixed)
        st["z"] = np.array(sol.z, dtype=float)
        st["theta"] = np.array(sol.theta, dtype=float)
        st["jac_z"] = None if sol.jac_z is None else np.array(sol.jac_z, dtype=float)
        st["t"] = engine.t.copy()
        st["y"] = engine.y.copy()
        st["sigma"] = None if engine.sigma is None else engine.sigma.copy()
        st["w"] = engine.w.copy()
        st["absolute_sigma"] = engine.absolute_sigma
        st["loss"] = engine.loss
        st["f_scale"] = engine.f_scale
        st["optimizer_ok"] = bool(sol.success)
        n = self.t.size
        p = self.coords.size
        jac_z = self.jac_z
        st["joint"] = engine.mass_block is not None
        # residuals and dθ/dz the solver already computed at this very z (no extra block)
        done = sol.extra.get("evaluated")
        if done is not None and not (done[0] is sol.z and not self.joint
                                     and done[1].size == n):
            done = None
        st["nobs"] = n
        st["nvarys"] = p
        st["s2_robust"] = None
        if self.joint:
            mb = engine.mass_block
            rd = self.weighted_residuals()
            rm = mb(self.theta)[0]
            st["rss"] = float(rd @ rd + rm @ rm)
            st["n_mass"] = mb.size if mb.kind == "masses" else 0
            # masses: the intercept ln W0 is profiled out of the mass block
            st["dof"] = n + mb.size - (1 if mb.kind == "masses" else 0) - p
            st["s2"] = 1.0  # each block scaled by its own residual sd
            st["block_scale"] = engine.block_scale
        else:
            st["n_mass"] = 0
            st["block_scale"] = None
            r = done[1] if done is not None else self.weighted_residuals()
            st["rss"] = float(r @ r)
            st["dof"] = n - p
            st["s2"] = (self.rss / self.dof if self.dof > 0 else math.nan)
            if self.absolute_sigma:
                st["s2"] = 1.0
        # covariance in internal coordinates, then natural
        cov_ok = False
        cov_z = np.full((p, p), np.nan)
        # coordinates the data do not touch at all (a rate run to 0, a fraction at 0): their
        # Jacobian column vanishes; the covariance is computed for the others and the
        # parameters that depend on them get NaN
        dead = np.zeros(p, dtype=bool)
        if p and jac_z is not None and self.dof > 0 and np.isfinite(jac_z).all():
            norms = np.sqrt(np.einsum("ij,ij->j", jac_z, jac_z))
            dead = norms <= 1e-12 * max(float(norms.max()), 1e-300)
            alive = ~dead
            if alive.any():
                all_alive = not dead.any()
                Ja = jac_z if all_alive else jac_z[:, alive]
                _, sv, vt = np.linalg.svd(Ja, full_matrices=False)
                if sv.size and sv[-1] > sv[0] * 1e-10:
                    sub = (vt.T / sv**2) @ vt * self.s2
                    if all_alive:
                        cov_z = sub
                    else:
                        cov_z[np.ix_(alive, alive)] = sub
                    cov_ok = bool(np.isfinite(sub).all())
        if cov_ok and self.loss != "linear" and not self.joint:
            alive = ~dead
            sub = self._robust_cov(jac_z[:, alive], int(alive.sum()))
            cov_z = np.full((p, p), np.nan)
            cov_z[np.ix_(alive, alive)] = sub
            cov_ok = bool(np.all(np.isfinite(sub)))
        st["cov_ok"] = cov_ok
        st["dead"] = dead
        st["cov_z"] = cov_z
        # dead coordinates: no first-order effect
        st["cov_z0"] = np.where(np.isnan(cov_z), 0.0, cov_z) if dead.any() or not cov_ok \
            else cov_z.copy()
        A = (np.array(done[2], dtype=float) if done is not None
             else self.coords.theta(self.z, jac=True)[1])
        st["A"] = A
        if p and not dead.any():
            covar = A @ cov_z @ A.T
        elif p:
            alive = ~dead
            Aa = A[:, alive]
            covar = Aa @ cov_z[np.ix_(alive, alive)] @ Aa.T
            touched = np.any(np.abs(A[:, dead]) > 0, axis=1)
            covar[touched, :] = np.nan
            covar[:, touched] = np.nan
        else:
            covar = np.zeros((kin.n_params, kin.n_params))
        if p and not cov_ok:
            covar = np.full((kin.n_params, kin.n_params), np.nan)
        for j, nm in enumerate(kin.param_names):
            if nm in self.fixed:
                covar[j, :] = 0.0
                covar[:, j] = 0.0
        st["covar"] = covar
        st["converged"] = bool(self.optimizer_ok and (cov_ok or p == 0))
        k = p + (0 if self.absolute_sigma else 1)
        n_ic = n
        if self.joint and engine.mass_block.kind == "prior":
            # information criteria from the isotope data alone; the growth parameters are
            # constrained by the growth fit, not by these data
            sd_ = self.block_scale[0]
            rd_raw = self.weighted_residuals() * sd_
            base = n * math.log(max(float(rd_raw @ rd_raw), 1e-300) / n)
            k = p - engine.mass_block.size + 1
        elif self.joint:
            # Gaussian likelihood of both blocks, each with its own variance; k counts the
            # free parameters, ln W0 and the two variances
            sd_, sm_ = self.block_scale
            rd_raw = self.weighted_residuals() * sd_
            rm_raw = engine.mass_block.raw_residuals(self.theta)
            nm = engine.mass_block.size
            base = (n * math.log(max(float(rd_raw @ rd_raw), 1e-300) / n)
                    + nm * math.log(max(float(rm_raw @ rm_raw), 1e-300) / nm))
            k = p + 3
            n_ic = n + nm
        elif self.absolute_sigma:
            base = self.rss
        else:
            base = n * math.log(self.rss / n) if self.rss > 0 else -math.inf
        st["n_criteria_params"] = k
        st["aic"] = base + 2 * k
        st["aicc"] = self.aic + (2 * k * (k + 1) / (n_ic - k - 1) if n_ic - k - 1 > 0
                                else math.nan)
        st["bic"] = base + k * math.log(n_ic)
        st["redchi"] = self.rss / self.dof if self.dof > 0 else math.nan
        st["chisqr_pvalue"] = (float(special.chdtrc(self.dof, self.rss))
                              if self.absolute_sigma and self.dof > 0 else None)
        for a in (self.z, self.theta, self.jac_z, self.t, self.y, self.sigma, self.w,
                  self.cov_z, self.cov_z0, self.A, self.covar, self.dead):
            if a is not None:
                a.setflags(write=False)
        st["memo"] = {}
        st["_frozen"] = True

    _frozen = False  # set at the end of __init__

    def __setattr__(self, name, value):
        if self._frozen:
            raise AttributeError(f"a FitState is read-only; cannot set {name!r}")
        object.__setattr__(self, name, value)

    def _robust_cov(self, J, p):
        r"""Covariance of an M-estimate (robust loss), from the loss weights.

        With :math:`z_i = (r_i/c)^2` and loss weights :math:`w_i = \rho'(z_i)`
        (soft_l1: :math:`1/\sqrt{1+z}`; huber: 1 inside, :math:`1/\sqrt z` outside), the
        covariance is :math:`s_r^2 (J^T W J)^{-1}` (the iteratively reweighted
        least-squares form, in which an outlier carries the weight the fit gave it; Huber
        1981, *Robust Statistics*, ch. 7) with the robust scale
        :math:`s_r = 1.4826\,\mathrm{MAD}(r)\sqrt{n/(n-p)}` (common practice), which the
        outliers do not inflate.
        """
        r = self.weighted_residuals()
        z = (r / self.f_scale) ** 2
        if self.loss == "soft_l1":
            wl = 1.0 / np.sqrt(1.0 + z)
        else:  # huber
            wl = np.where(z <= 1.0, 1.0, 1.0 / np.sqrt(np.maximum(z, 1e-300)))
        Jw = J * np.sqrt(wl)[:, None]
        mad = 1.4826 * float(np.median(np.abs(r - np.median(r))))
        s2w = mad**2 * self.nobs / max(self.dof, 1)
        if self.absolute_sigma:
            s2w = 1.0
        u, sv, vt = np.linalg.svd(Jw, full_matrices=False)
        if not (sv.size and sv[-1] > sv[0] * 1e-10):
            return np.full((p, p), np.nan)
        self.s2_robust = s2w
        return (vt.T / sv**2) @ vt * s2w

    # -- what later steps read ------------------------------------------------------------
    def weighted_residuals(self, theta=None) -> np.ndarray:
        """Weighted δ residuals w (y − ŷ) (joint fits: including the δ block's scale)."""
        th = self.theta if theta is None else theta
        return self.w * (self.y - self.kinetics.evaluate(self.t, th))

    def profile_dof(self) -> int:
        """Degrees of freedom of the residual variance that profile statistics divide by.

        Joint fits: the δ block's variance is estimated from its own residuals, so its
        degrees of freedom (not the blocks' total) set the reference distribution.
        """
        if self.joint:
            mb = self.engine.mass_block
            p_other = mb.size if mb.kind == "prior" else 1
            return self.nobs - (self.nvarys - p_other)
        return self.dof

    def critical_value(self, level: float) -> float:
        r"""Cut-off of the profile statistic at ``level``.

        :math:`\chi^2_1(\text{level})` with σ known; :math:`F_{1,\nu}(\text{level})` with
        the residual variance estimated (ν = :meth:`profile_dof`). ``scipy.special``'s
        ``chdtri``/``fdtri`` are the inverse survival functions of these laws.
        """
        if self.absolute_sigma and not self.joint:
            return float(special.chdtri(1, 1.0 - level))
        return float(special.fdtri(1, max(self.profile_dof(), 1), level))

    def normal_quantile(self, level: float) -> float:
        """Two-sided quantile of asymptotic intervals: normal with σ known, else Student t."""
        if self.absolute_sigma:
            return float(special.ndtri(0.5 + level / 2))
        return float(special.stdtrit(max(self.dof, 1), 0.5 + level / 2))

    def design_span(self) -> tuple[float, float]:
        """(first, last) sampling time after the first switch (a tenth of the span and the
        span when no sample follows the switch)."""
        tau = self.t - float(self.kinetics.switch_times[0])
        pos = np.sort(tau[tau > 0])
        if pos.size == 0:
            span = max(float(np.ptp(self.t)), 1.0)
            return span / 10, span
        return float(pos[0]), float(pos[-1])
