r"""The figure of a sampling schedule: expected curve, its bands and the sampling times.

:func:`plot_design` draws what a :class:`~isoturnover.design.Design` plans: the model's
expected curve at the guessed parameters over the sampling span, the times at which the
tissue is sampled (baseline, fixed and optimised times in different markers; the animal
of each sample numbered when the schedule needs several), and two bands:

* the **range of one sample**, :math:`\hat\delta(t) \pm z\,sd` with
  :math:`z = \Phi^{-1}(1/2 + \text{level}/2)`: where a single measurement at time t is
  expected to fall (``sd`` the design's total residual sd);
* the **confidence band of the fitted curve** that a fit of this schedule would give,
  by the delta method :math:`\hat\delta(t) \pm z\sqrt{g(t)^\top M^{-1} g(t)}`, with
  :math:`g(t) = \partial\delta(t)/\partial\phi` the model's exact Jacobian in the free
  parameters at t and :math:`M = J^\top J/sd^2` the design's Fisher information at its
  sampling times (the matrix :mod:`isoturnover.design` optimises).

Like the figures of :mod:`isoturnover.plotting` it takes ``ax=None`` and returns the Axes,
imports matplotlib inside the function, sets fonts and colours on each artist (no global
style) and takes its palette, sizes and legend placement from :mod:`isoturnover.plotkit`.
The title names the criterion and the expected relative precision of the target. A plan
is a proposal to put before the local animal-care authority (:data:`~isoturnover.design.
PLAN_CAUTION`); the figure carries no caution of its own, the plan's summary does.
"""

from __future__ import annotations

import math
from statistics import NormalDist

import numpy as np

from .conventions import check_level, unit_word
from .design import Design
from .errors import DataError
from .plotkit import (
    DOUBLE,
    GREY,
    LABEL_PT,
    LEGEND_PT,
    OKABE_ITO,
    delta_label,
    finite_points,
    new_axes,
    place_legend,
    style_axes,
)

__all__ = ["plot_design", "curve_band", "BANDS", "PLAN_SIZE"]

#: What ``band=`` may ask for (True is ``"both"``, False is ``"none"``).
BANDS = ("both", "curve", "sample", "none")
#: Size of a new figure (in): two journal columns wide, a little taller for the title.
PLAN_SIZE = (DOUBLE[0], 3.0)

# marker of each role: (marker, face, edge, size, legend label)
_ROLE_STYLE = {
    "baseline": ("s", "white", OKABE_ITO["black"], 5.0, "baseline, before the switch"),
    "fixed": ("D", OKABE_ITO["orange"], OKABE_ITO["black"], 5.0, "fixed time"),
    "optimised": ("o", OKABE_ITO["vermillion"], OKABE_ITO["black"], 5.0, "optimised time"),
    "given": ("o", OKABE_ITO["black"], OKABE_ITO["black"], 4.5, "sampling time"),
}
_CRITERION = {"D": "D-optimal", "half_life": "c-optimal (half-life)",
              "time_to": "c-optimal (time to {fraction:g})"}


def _check_band(band):
    if band is True:
        return "both"
    if band is False or band is None:
        return "none"
    if isinstance(band, str) and band in BANDS:
        return band
    raise DataError(f"'band' must be True, False or one of {', '.join(map(repr, BANDS))}; "
                    f"got {band!r}")


def curve_band(design, t):
    r"""Standard error of the curve a fit of ``design`` would give, at times ``t``.

    :math:`se(t) = \sqrt{g(t)^\top M^{-1} g(t)}`, the delta method with
    :math:`g(t) = \partial\delta(t)/\partial\phi` (the model's exact Jacobian in the free
    parameters at the guess) and :math:`M = J^\top J/sd^2` the Fisher information of the
    design's sampling times (as in :mod:`isoturnover.design`). ``M`` is inverted in its
    correlation form :math:`D M D`, :math:`D = \mathrm{diag}(M)^{-1/2}` (scale-free).

    Parameters
    ----------
    design : Design
        A schedule from :func:`~isoturnover.design_schedule` or
        :func:`~isoturnover.evaluate_design`.
    t : array-like
        Times, in the design's time unit.

    Returns
    -------
    ndarray or None
        The standard errors (‰ for a turnover model), or None when the information matrix
        is singular (some free parameter not estimable from these times).
    """
    spec = design.spec
    J = spec.jacobian(design.times) / design.sd
    M = J.T @ J
    d = np.diag(M)
    if not np.all(d > 0):
        return None
    s = 1.0 / np.sqrt(d)
    C = M * s[:, None] * s[None, :]
    sign, logdet = np.linalg.slogdet(C)
    if sign <= 0 or logdet < math.log(1e-12):
        return None
    G = spec.jacobian(np.asarray(t, dtype=float)) * s  # g(t) in the scaled coordinates
    X = np.linalg.solve(C, G.T)
    return np.sqrt(np.maximum(np.einsum("ij,ji->i", G, X), 0.0))


def _grid(design, lo, hi, n=400):
    """An even grid over [lo, hi] with the switch, the switch + lag and the times added."""
    spec = design.spec
    extra = [spec.switch]
    if "lag" in spec.names:
        extra.append(spec.switch + float(design.truth["lag"]))
    g = np.union1d(np.linspace(lo, hi, n), np.concatenate([extra, design.times]))
    return g[(g >= lo) & (g <= hi)]


def _title(design):
    crit = _CRITERION.get(design.criterion, design.criterion).format(
        fraction=getattr(design, "fraction", 0.95))
    if all(r == "given" for r in design.roles):
        crit = "Given schedule"
    elif design.prior_cv is not None:
        crit += f", prior-averaged (cv {design.prior_cv:g})"
    n, a = design.times.size, design.n_animals
    head = f"{crit}: {n} sample{'s' * (n != 1)}"
    head += (" (destructive: one animal each)" if design.destructive else
             f" on {a} animal{'s' * (a != 1)}")
    if design.target == "none" or not math.isfinite(design.se):
        return head
    unit = unit_word(design.time_unit)
    return (f"{head}\nexpected {design.target}: {design.target_value:.3g} ± "
            f"{design.se:.2g} {unit} (se; relative {100 * design.rel_precision:.1f} %)")


def plot_design(design, ax=None, *, band=True, level=0.95, isotope=None,
                number_animals=None):
    r"""Expected curve of a sampling schedule with its band and the sampling times marked.

    The curve is the design's model at the guessed parameters over the sampling span (from
    a little before the switch, so the baseline shows); each sample sits on the curve at
    its time, styled by its role, and the title names the criterion and the expected
    standard error and relative precision of the target (:class:`Design` ``se``,
    ``rel_precision``).

    Parameters
    ----------
    design : Design
        A schedule from :func:`~isoturnover.design_schedule` or
        :func:`~isoturnover.evaluate_design`.
    ax : matplotlib Axes, optional
        Drawn on when given; else a new 7 × 3 in figure (:data:`PLAN_SIZE`).
    band : bool or {"both", "curve", "sample", "none"}, default=True
        Which bands to draw (True: both). ``"sample"``: the range of one sample,
        :math:`\hat\delta(t) \pm z\,sd`; ``"curve"``: the pointwise confidence band of the
        fitted curve this schedule would give,
        :math:`\hat\delta(t) \pm z\sqrt{g(t)^\top M^{-1} g(t)}` (:func:`curve_band`), with
        :math:`z = \Phi^{-1}(1/2 + \text{level}/2)`. The legend names each band.
    level : float, default=0.95
        Level of the bands.
    isotope : str, optional
        Isotope code (``"d13C"``…) for the y label in δ notation with its scale; default
        the generic ``"δ (‰)"`` (``"model value"`` for a user model).
    number_animals : bool, optional
        Write the animal number beside each sampling time; default when the schedule
        spreads over several animals and is not destructive. Samples at one time are
        written together (``"1,2"``), or as ``"×k"`` without numbers.

    Returns
    -------
    matplotlib Axes
        The Axes drawn on: time since the switch in the design's time unit against δ (‰).

    Raises
    ------
    DataError
        When ``design`` is not a Design, ``ax`` not an Axes, ``band`` or ``level`` not
        valid, or ``isotope`` unknown.

    Notes
    -----
    The curve and bands are those of the guessed parameters: a design is only as good as
    its guess (see ``prior_cv`` of :func:`~isoturnover.design_schedule`, and
    :func:`~isoturnover.simulate_design` to check it by simulation).
    """
    if not isinstance(design, Design):
        raise DataError(f"'design' must be a Design (from design_schedule or "
                        f"evaluate_design); got {type(design).__name__}")
    kind = _check_band(band)
    level = check_level(level)
    if number_animals is not None and not isinstance(number_animals, (bool, np.bool_)):
        raise DataError(f"'number_animals' must be True, False or None; got "
                        f"{number_animals!r}")
    spec = design.spec
    ylabel = delta_label(isotope) if spec.kin is not None else \
        ("model value" if isotope is None else delta_label(isotope))
    ax = new_axes(ax, size=PLAN_SIZE)
    z = NormalDist().inv_cdf(0.5 + level / 2)
    pct = f"{100 * level:g} %"
    t = design.times
    lo = float(min(t.min(), spec.switch))
    hi = float(max(t.max(), spec.switch + design.duration))
    span = hi - lo if hi > lo else 1.0
    grid = _grid(design, lo - 0.04 * span, hi)
    mu = spec.values(grid)
    blue = OKABE_ITO["blue"]
    keep = [(grid[::6], mu[::6])]
    if kind in ("both", "sample"):
        w = z * design.sd
        ax.fill_between(grid, mu - w, mu + w, color=OKABE_ITO["sky_blue"], alpha=0.22,
                        linewidth=0, label=f"{pct} range of one sample (± {z:.2f} sd, "
                        f"sd {design.sd:g} ‰)")
        keep += [(grid[::6], (mu - w)[::6]), (grid[::6], (mu + w)[::6])]
    if kind in ("both", "curve"):
        se = curve_band(design, grid)
        if se is None:
            ax.plot([], [], linestyle="none",
                    label="curve band not available (information singular)")
        else:
            ax.fill_between(grid, mu - z * se, mu + z * se, color=blue, alpha=0.35,
                            linewidth=0, label=f"{pct} confidence band of the fitted curve")
    ax.plot(grid, mu, color=blue, linewidth=1.3, label="expected curve at the guess",
            zorder=3)
    ax.axvline(spec.switch, color=GREY, linestyle="--", linewidth=0.8, label="diet switch",
               zorder=1)
    y = design.expected()
    roles = np.asarray(design.roles)
    for role in ("baseline", "fixed", "optimised", "given"):
        sel = roles == role
        if not sel.any():
            continue
        marker, face, edge, size, label = _ROLE_STYLE[role]
        ax.plot(t[sel], y[sel], linestyle="none", marker=marker, markersize=size,
                markerfacecolor=face, markeredgecolor=edge, markeredgewidth=0.8, zorder=5,
                label=f"{label} (n = {int(sel.sum())})")
    keep.append((t, y))
    if number_animals is None:
        number_animals = design.n_animals > 1 and not design.destructive
    rising = spec.values(np.array([hi]))[0] >= spec.values(np.array([lo]))[0]
    times_r = np.round(t, 9)
    for tv in np.unique(times_r):
        at = times_r == tv
        if number_animals:
            text = ",".join(str(a) for a in design.animals[at])
        elif at.sum() > 1:
            text = f"×{int(at.sum())}"
        else:
            continue
        yv = float(y[at][0])
        # above-left of a rising curve and below-left of a falling one is empty space
        ax.annotate(text, (float(t[at][0]), yv), xytext=(-3, 5 if rising else -5),
                    textcoords="offset points", ha="right", va="bottom" if rising else "top",
                    fontsize=LEGEND_PT - 1, color=OKABE_ITO["black"], zorder=6)
    if number_animals:
        ax.plot([], [], linestyle="none", label=f"numbers: animal (of {design.n_animals})")
    unit = unit_word(design.time_unit)
    xlabel = f"Time since diet switch ({unit})" if spec.switch == 0.0 else f"Time ({unit})"
    style_axes(ax, xlabel, ylabel)
    ax.set_xlim(lo - 0.04 * span, hi + 0.02 * span)
    ax.set_title(_title(design), fontsize=LABEL_PT, loc="left")
    place_legend(ax, first=("expected",), keep=finite_points(*keep))
    return ax
