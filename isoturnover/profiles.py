r"""One root finder for every profile-likelihood bound.

A profile bound is a one-dimensional root: the value :math:`u` (a parameter or a derived
quantity, on a scale where it is unbounded — log for rates and positive quantities, logit
for fractions) where the scaled profile deviance

.. math::

    D(u) = \frac{\mathrm{rss}(u) - \mathrm{rss}(\hat u)}{s^2}

reaches the critical value (:math:`F_{1,\nu}` or :math:`\chi^2_1` quantile). The driver
works on the signed root :math:`\tau(u) = \operatorname{sign}(u - \hat u)\sqrt{D(u)}`, the
profile-t statistic of Bates & Watts (1988, *Nonlinear Regression Analysis and Its
Applications*, §6.1 — from memory for the section), which is close to linear in a
well-chosen scale, so Newton's method on :math:`\tau(u) = \pm\sqrt{\text{crit}}` converges
in two or three constrained refits. Its derivative costs nothing extra: by the envelope
theorem, :math:`d\,\mathrm{rss}/du` at the constrained optimum is the partial derivative of
the residual sum of squares with respect to the constrained coordinate (or the Lagrange
multiplier of the constraint), which the caller computes from the refit's residuals and
Jacobian. Newton steps are safeguarded: they are kept inside the bracket once the root is
bracketed (bisection otherwise), outward steps grow at most fourfold, a failed refit halves
the step back toward the last good point, and a profile that stays below the critical value
up to the search limit gives an ``open`` bound.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["BoundSearch", "find_bound"]


@dataclass
class BoundSearch:
    """Outcome of one side's search.

    Attributes
    ----------
    u : float
        The bound on the search scale (NaN when ``status`` is ``failed``; the last value
        reached for ``at_bound``; the limit for ``open``).
    status : {"ok", "open", "at_bound", "failed"}
    refits : int
        Number of constrained refits spent.
    """

    u: float
    status: str
    refits: int


def find_bound(evaluate, u_hat, direction, step, limit, crit, *, tol=1e-6, newton_tol=1e-4,
               max_refits=40, stop_on_unreachable=True):
    r"""Find the profile bound on one side of the estimate.

    Parameters
    ----------
    evaluate : callable
        ``evaluate(u) -> (D, dD_du, ok, reason)``: the scaled deviance at ``u``, its
        derivative (envelope theorem; NaN if unknown), whether the constrained refit
        succeeded, and a reason (``"unreachable"`` when the model cannot reach ``u``). The
        callable keeps its own warm starts.
    u_hat : float
        The estimate (D = 0).
    direction : {-1, +1}
    step : float
        First step (> 0), normally :math:`\sqrt{\text{crit}}` standard errors.
    limit : float
        Search limit on this side.
    crit : float
        Critical value of D.
    tol : float
        Relative tolerance on D at the bound (|D − crit| ≤ tol·crit), or (times 10) on the
        bracket width relative to the distance from the estimate.
    newton_tol : float
        Stop when the next Newton correction is below this fraction of the distance from
        the estimate; the corrected value is returned.

    Returns
    -------
    BoundSearch
    """
    target = math.sqrt(crit)
    u_in, tau_in = u_hat, 0.0  # inside the interval
    u_out, tau_out = None, None  # outside (once bracketed)
    u_last_good = u_hat
    u = u_hat + direction * step
    refits = fails = unreachable = stalled = 0
    err_prev = math.inf
    verified = None
    while refits < max_refits:
        at_limit = (u - limit) * direction >= 0
        if at_limit:
            u = limit
        D, dD, ok, reason = evaluate(u)
        refits += 1
        if not ok or not math.isfinite(D):
            fails += 1
            unreachable += reason == "unreachable"
            if fails >= 6:
                if stop_on_unreachable and unreachable == fails:
                    return BoundSearch(u_last_good, "at_bound", refits)
                return BoundSearch(math.nan, "failed", refits)
            # back toward the last good point
            u = u_in + 0.5 * (u - u_in) if u_out is None else 0.5 * (u_in + u_out)
            continue
        fails = unreachable = 0
        u_last_good = u
        D = max(D, 0.0)
        tau = math.sqrt(D)
        err = abs(D - crit)
        if err <= tol * crit:
            return BoundSearch(u, "ok", refits)
        # Newton should at least halve the error each step once bracketed (as in rtsafe)
        stalled = stalled + 1 if (u_out is not None and err > 0.5 * err_prev) else 0
        err_prev = err
        # dtau/du from the envelope derivative (oriented outward)
        slope = dD * direction / (2.0 * tau) if tau > 0 and math.isfinite(dD) else math.nan
        if math.isfinite(slope) and slope > 0:
            du = (target - tau) / slope
            # close to the cut and the next Newton correction negligible: quadratic
            # convergence makes the corrected value exact to far below the reported digits
            if abs(D - crit) <= 0.01 * crit and \
                    abs(du) <= newton_tol * max(abs(u - u_hat), step) and \
                    (u + direction * du - limit) * direction < 0:
                return BoundSearch(u + direction * du, "ok", refits)
        if D < crit:
            u_in, tau_in = u, tau
            if at_limit:
                return BoundSearch(limit, "open", refits)
        else:
            u_out, tau_out = u, tau
        dist = abs(u - u_hat)
        if u_out is not None:
            width = abs(u_out - u_in)
            if tau_out - tau_in > 0.5 * target and width < 0.1 * max(abs(u_out - u_hat), step) \
                    and u_out != verified:
                # a big jump across a narrow bracket: the outside refit may sit in another
                # basin; redo it warm-started from the nearby inside point before trusting it
                verified = u_out
                u = u_out
                u_out, tau_out = None, None
                continue
            if width <= 10 * tol * max(abs(u_out - u_hat), 1e-300):
                if tau_out - tau_in > 0.1 * target:
                    # the profile jumps across a vanishing bracket: the refits on the two
                    # sides found different minima; no trustworthy crossing
                    return BoundSearch(math.nan, "failed", refits)
                # bracket closed: interpolate tau linearly
                w = (target - tau_in) / (tau_out - tau_in) if tau_out > tau_in else 0.5
                return BoundSearch(u_in + w * (u_out - u_in), "ok", refits)
            cand = math.nan
            if math.isfinite(slope) and slope > 0:
                cand = u + direction * (target - tau) / slope
            lo, hi = sorted((u_in, u_out))
            if not (math.isfinite(cand) and lo < cand < hi) or stalled >= 2:
                # secant on tau between the bracket ends; bisection when Newton stalls
                w = (target - tau_in) / (tau_out - tau_in) if tau_out > tau_in else 0.5
                if stalled >= 2:
                    w, stalled = 0.5, 0
                cand = u_in + min(max(w, 0.01), 0.99) * (u_out - u_in)
            u = cand
        else:
            # still inside: Newton outward, at most doubling the distance from the estimate
            # (a continuation: each refit starts near the last inside solution)
            if math.isfinite(slope) and slope > 0:
                d = (target - tau) / slope
                d = min(max(d, 0.1 * max(dist, step)), max(dist, step))
            else:
                d = max(dist, step)  # flat profile: double the distance
            u = u + direction * d
    return BoundSearch(math.nan, "failed", refits)
