"""Trust signals: the reasons to be careful with a fit (DESIGN §3 "Trust signals").

:func:`trust_notes` reads a finished fit (its public attributes and its
:class:`~isoturnover.engine.FitState`) and returns :class:`TrustNote` objects: parameter at a
bound, pools too close to separate, tiny pool, |correlation| near 1, too few points after the
switch, plateau not reached, optimizer not converged, χ²/dof far above 1 with known σ, and
the growth-dilution signals. Each becomes a warning of the fit and a numbered note of its
summary.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from . import quantities
from .conventions import unit_word
from .errors import (
    BoundWarning,
    ConvergenceWarning,
    DesignWarning,
    GoodnessOfFitWarning,
    IdentifiabilityWarning,
)

__all__ = ["TrustNote", "trust_notes", "slowest_rate"]

LN2 = math.log(2.0)


@dataclass(frozen=True)
class TrustNote:
    """A reason to be careful with a fit: a short code, a warning category, a message.

    Parameters
    ----------
    code : str
        Short name of the signal (``"at_bound"``, ``"pools_close"``, ``"tiny_pool"``,
        ``"correlation"``, ``"few_points"``, ``"plateau_not_reached"``, ``"not_converged"``,
        ``"singular"``, ``"growth_dominates"``, ``"mass_coverage"``, ``"chi2_high"``).
    category : type
        The warning class it is issued as (a subclass of
        :class:`~isoturnover.errors.IsoturnoverWarning`).
    message : str
        What the user reads, with the numbers that triggered it.
    """

    code: str
    category: type
    message: str

    def to_dict(self):
        """Describe the note as JSON-safe data.

        Returns
        -------
        dict
            Keys ``code``, ``category`` (the warning class's name) and ``message``.
        """
        return {"code": self.code, "category": self.category.__name__, "message": self.message}


def trust_notes(fit) -> list:
    """List the trust signals of a fit (DESIGN §3 "Trust signals").

    The fit's warnings and the numbered notes of its summary. Reads only the fit's public
    attributes and its state. The thresholds are rules of thumb (the design card's list,
    not published cut-offs): a rate with :math:`k t_{first} > 20` (complete before the
    first sample) or :math:`k \\cdot span < 0.01` (barely moving), rates within a factor
    1.5, a fraction below 0.02, |correlation| above 0.99, fewer than ``nvarys + 2`` samples
    after the switch, a last sample before two half-lives of the slowest pool, a growth
    share above 0.9 (the share of the isotopic change up to the last sample carried by the
    growth flux, :func:`isoturnover.quantities.growth_share_at`; :math:`k_g/(k_g + k_d)`
    for one pool with exponential growth; common practice), masses covering less than the
    samples' span minus 10 % at either end, and χ²/dof above 4 with σ known.

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit (:meth:`TurnoverModel.fit <isoturnover.TurnoverModel.fit>`).

    Returns
    -------
    list of TrustNote
        The signals that fire, in a fixed order (convergence and covariance first); empty
        for a clean fit.
    """
    kin = fit.kinetics
    notes = []
    v = fit.values
    names = kin.param_names
    n_pools = len(kin.rate_names)
    tau = fit.t - float(kin.switch_times[0])
    pos = np.sort(tau[tau > 0])
    span = float(pos[-1]) if pos.size else 0.0
    if not fit.state.optimizer_ok:
        notes.append(TrustNote("not_converged", ConvergenceWarning,
                               f"the optimizer did not converge ({fit.message})"))
    elif fit.nvarys and fit.state.cov_ok and fit.state.dead.any():
        def plain(lab):
            if lab.startswith("log_gap_"):
                a, b = lab[len("log_gap_"):].split("_")
                return f"the ratio k{a}/k{b}"
            if lab.startswith("log_"):
                return lab[4:]
            if lab.startswith("logit_"):
                return lab[6:]
            if lab.startswith("stick_"):
                return "the split of the pool fractions"
            return lab

        names_dead = [plain(fit.state.coords.labels[i]) for i in np.flatnonzero(fit.state.dead)]
        notes.append(TrustNote(
            "singular", IdentifiabilityWarning,
            "the covariance matrix is singular: the data do not determine "
            + ", ".join(names_dead) + " (run to the edge of the range, e.g. a rate or a "
            "pool fraction to 0); standard errors that depend on it are not available"))
    elif fit.nvarys and not fit.state.cov_ok:
        notes.append(TrustNote(
            "singular", IdentifiabilityWarning,
            "the covariance matrix is singular: some parameters are not determined by "
            "these data (standard errors not available)"))
    # at bounds
    if "lag" in v and "lag" not in fit.fixed and v["lag"] <= 1e-9 * max(span, 1.0):
        notes.append(TrustNote("at_bound", BoundWarning,
                               "lag is at its lower bound 0: the data show no delay; "
                               "consider a model without lag"))
    for nm, (b_lo, b_hi) in fit.bounds.items():
        if nm in fit.fixed:
            continue
        scale = max(abs(v[nm]), abs(b_lo) if np.isfinite(b_lo) else 0.0,
                    abs(b_hi) if np.isfinite(b_hi) else 0.0, 1.0)
        for b, side in ((b_lo, "lower"), (b_hi, "upper")):
            if np.isfinite(b) and abs(v[nm] - b) <= 1e-7 * scale:
                notes.append(TrustNote(
                    "at_bound", BoundWarning,
                    f"{nm} = {v[nm]:.6g} is at its {side} bound ({b:g}, set in params): "
                    "the data would put it beyond; its interval stops at the bound"))
    first = float(pos[0]) if pos.size else math.nan
    for nm in kin.rate_names:
        if nm in fit.fixed:
            continue
        k = v[nm]
        if pos.size and k * first > 20:
            notes.append(TrustNote(
                "at_bound", BoundWarning,
                f"{nm} = {k:.4g} per {fit.time_unit}: the pool is complete before the first "
                f"sample after the switch (t = {first:g}); its rate is only a lower limit"))
        if span > 0 and k * span < 0.01:
            notes.append(TrustNote(
                "at_bound", BoundWarning,
                f"{nm} = {k:.4g} per {fit.time_unit}: the pool barely moves within the "
                "sampling period; its rate is not determined"))
    if kin.structure == "parallel" and n_pools > 1:
        k = np.array([v[nm] for nm in kin.rate_names])
        for i in range(n_pools - 1):
            if k[i] / k[i + 1] < 1.5:
                notes.append(TrustNote(
                    "pools_close", IdentifiabilityWarning,
                    f"pools {i + 1} and {i + 2} have rates within a factor 1.5 "
                    f"({k[i]:.4g} and {k[i + 1]:.4g}): too close to separate; fewer pools "
                    "describe these data as well"))
        for nm in kin.fraction_names:
            if v[nm] < 0.02 and nm not in fit.fixed:
                notes.append(TrustNote(
                    "tiny_pool", IdentifiabilityWarning,
                    f"{nm} = {v[nm]:.3g} (< 0.02): a pool this small is not supported by "
                    "the data; fewer pools describe them as well"))
    if fit.state.cov_ok and fit.nvarys > 1:
        c = fit.covar
        d = np.sqrt(np.diag(c))
        free = [j for j, nm in enumerate(names) if nm not in fit.fixed and d[j] > 0]
        # the last fraction is determined by the others; its correlation is by construction
        skip = set()
        if kin.fraction_index and n_pools > 1:
            skip.add(kin.fraction_index[-1])
        # parameters set by an expression are correlated with their sources by design
        skip.update(names.index(nm) for nm in fit.tied)
        worst = None
        for a in free:
            for b in free:
                if b <= a or a in skip or b in skip:
                    continue
                r = c[a, b] / (d[a] * d[b])
                if abs(r) > 0.99 and (worst is None or abs(r) > abs(worst[2])):
                    worst = (names[a], names[b], r)
        if worst:
            notes.append(TrustNote(
                "correlation", IdentifiabilityWarning,
                f"{worst[0]} and {worst[1]} are correlated at {worst[2]:+.3f}: the data "
                "hardly separate them"))
    n_after = int(np.sum(tau > 0))
    if n_after < fit.nvarys + 2:
        notes.append(TrustNote(
            "few_points", DesignWarning,
            f"only {n_after} sample(s) after the switch for {fit.nvarys} free parameters "
            f"(at least {fit.nvarys + 2} advised)"))
    if span > 0:
        slow = slowest_rate(fit)
        if slow > 0 and span < 2 * LN2 / slow:
            notes.append(TrustNote(
                "plateau_not_reached", DesignWarning,
                f"the last sample ({span:.4g} {unit_word(fit.time_unit)} after the first "
                f"switch) comes before two half-lives of the slowest pool "
                f"({2 * LN2 / slow:.4g} {unit_word(fit.time_unit)}): the new plateau is "
                "extrapolated and the slow half-life is poorly bounded"))
    if kin.growth_kind is not None and span > 0:
        t_end = float(fit.t.max())
        try:
            share_end = quantities.growth_share_at(kin, t_end, fit.state.theta)
        except (ValueError, ZeroDivisionError, OverflowError):
            share_end = math.nan
        # the growth flux's share of the isotopic change (Hesslein et al. 1993 for one
        # pool: k_g/(k_g + k_d)); above 0.9 the catabolic part is a small difference of
        # two large ones (threshold: common practice, no published cut-off)
        if np.isfinite(share_end) and share_end > 0.9:
            notes.append(TrustNote(
                "growth_dominates", IdentifiabilityWarning,
                f"growth explains nearly all of the change: the growth flux carries "
                f"{100 * share_end:.3g} % of the isotopic change up to t = {t_end:g} (above 90 %); "
                "the catabolic rate is poorly identified (its interval may be open "
                "towards 0)"))
        mb = fit.state.engine.mass_block
        cov = mb.coverage if mb is not None else None
        if cov is None and hasattr(kin.growth, "t"):
            gt = np.asarray(kin.growth.t, dtype=float)
            cov = (float(gt.min()), float(gt.max())) if gt.size else None
        if cov is not None:
            t_lo = min(float(fit.t.min()), float(kin.switch_times[0]))
            t_hi = float(fit.t.max())
            margin = 0.1 * (t_hi - t_lo)
            if cov[0] > t_lo + margin or cov[1] < t_hi - margin:
                notes.append(TrustNote(
                    "mass_coverage", DesignWarning,
                    f"body masses cover t = {cov[0]:g} to {cov[1]:g} but the isotope "
                    f"samples run from {t_lo:g} to {t_hi:g}: growth is extrapolated"))
    if fit.absolute_sigma and fit.dof > 0 and fit.redchi > 4:
        notes.append(TrustNote(
            "chi2_high", GoodnessOfFitWarning,
            f"χ²/dof = {fit.redchi:.3g} with σ treated as known: the scatter between time "
            "points is far above the analytic sd (usual for living animals); the "
            "intervals are too narrow — refit with absolute_sigma=False"))
    return notes


def slowest_rate(fit) -> float:
    """Give the rate that sets how long the tissue takes to settle after a switch.

    The smallest pool rate (incorporation rates :math:`k_i + k_g` with exponential growth);
    for the chain :math:`1/(1/k_1 + 1/k_2)`, since it needs about as long as its two
    half-lives together.

    Parameters
    ----------
    fit : TurnoverFit
        A finished fit.

    Returns
    -------
    float
        The rate, per time unit of the fit (/d for days).
    """
    v = fit.values
    kin = fit.kinetics
    ks = [v[nm] for nm in kin.rate_names]
    if kin.structure == "chain":
        # the chain needs about as long as its two half-lives together
        return 1.0 / (1.0 / ks[0] + 1.0 / ks[1])
    if kin.growth_rate_index is not None:
        ks = [k + v["k_growth"] for k in ks]
    return float(min(ks))
