r"""Figures of turnover fits for papers and notebooks (matplotlib).

Every function takes ``ax=None`` and returns the Axes it drew on; without an Axes it makes a
figure of print size (3.5 × 2.6 in, a single journal column; :func:`plot_overview` 7 × 2.6 in,
two columns). matplotlib is imported inside the functions, and no function changes global
style: there are no ``rcParams`` writes and no ``plt.style.use``; colours and font sizes are
set on each artist (axis labels 8 pt, tick labels and legends 7 pt, legible at print size).

Colours come from the Okabe–Ito palette, chosen to stay distinguishable under the common
colour-vision deficiencies (Okabe & Ito 2008, *Color Universal Design (CUD): how to make
figures and presentations that are friendly to colorblind people*). Flagged points use a
different marker as well as a different colour, so they do not depend on colour alone.

Axes carry δ notation with the scale of the isotope ("δ¹³C (‰, VPDB)"; δ as defined by
Coplen 2011) and the time unit of the data ("Time since diet switch (days)"); titles and
series labels write isotope codes the same way ("G01 / δ¹³C: 1 pool"), and a title that
names the model is not repeated in the legends. The palette, sizes, labels and legend
placement the panels share live in :mod:`isoturnover.plotkit`; :data:`OKABE_ITO` and
:func:`delta_label` are re-exported here.

Legends are kept off the data without drawing the figure: on a figure made here the
placement is done when the figure is laid out for saving or showing, so a saved figure is
drawn once (:func:`isoturnover.plotkit.placing_layout`).
"""

from __future__ import annotations

import math
import re
import warnings

import numpy as np

from .errors import DataError, IsoturnoverWarning
from .plotkit import (
    DOUBLE,
    FLAG,
    GREY,
    LABEL_PT,
    LEGEND_PT,
    OKABE_ITO,
    SINGLE,
    TICK_PT,
    check_fit,
    compact_number,
    delta_label,
    fine_grid,
    finite_points,
    keep_clear,
    model_name,
    new_axes,
    place_legend,
    placing_layout,
    series_color,
    series_title,
    style_axes,
    time_label,
    time_unit_word,
    tissue_label,
)

__all__ = [
    "OKABE_ITO",
    "delta_label",
    "plot_fit",
    "plot_residuals",
    "plot_progress",
    "plot_pools",
    "plot_growth",
    "plot_weights",
    "plot_overview",
]


# ----------------------------------------------------------------------------------------
# plot_fit
# ----------------------------------------------------------------------------------------
def _check_bool(value, name):
    if not isinstance(value, (bool, np.bool_)):
        raise DataError(f"'{name}' must be True or False; got {value!r}")
    return bool(value)


def plot_fit(fit, ax=None, *, band=True, level=0.95, show_switches=True, show_flagged=True,
             color=None, label=None, show_model=True):
    """Data, fitted curve and confidence band of one turnover fit.

    Parameters
    ----------
    fit : TurnoverFit
        A fit from :meth:`~isoturnover.TurnoverModel.fit`.
    ax : matplotlib Axes, optional
        Drawn on when given; else a new 3.5 × 2.6 in figure.
    band : bool, default=True
        Draw the pointwise confidence band of the fitted curve
        (:func:`isoturnover.uncertainty.band`, delta method).
    level : float, default=0.95
        Confidence level of the band.
    show_switches : bool, default=True
        Vertical dashed lines at the diet switches (t = 0 for a step-switch fit).
    show_flagged : bool, default=True
        Mark points that :meth:`TurnoverFit.influence` flags (absolute studentised residual
        > 3 or Cook's distance > 1); they are kept in the fit and drawn, never hidden.
    color : str, optional
        Colour of the curve and band (and of the data when given, for overlays); default
        Okabe–Ito blue, data black.
    label : str, optional
        Name of the series in the legend.
    show_model : bool, default=True
        Name the model in the curve's legend entry (``"fitted (2 pools)"``); ``False`` when
        a title already names it.

    Returns
    -------
    matplotlib Axes
        The Axes drawn on: time in the data's unit against δ (‰).

    Raises
    ------
    DataError
        When ``fit`` is not a TurnoverFit, ``ax`` not an Axes or ``level`` not in (0, 1).

    Notes
    -----
    Error bars are the analytic 1σ (``sigma``) of each point when the fit has them.
    """
    from .conventions import check_level as _check_level

    fit = check_fit(fit, "plot_fit")
    level = _check_level(level)
    show_model = _check_bool(show_model, "show_model")
    ax = new_axes(ax, measured=True)
    curve_c = color or OKABE_ITO["blue"]
    data_c = color or OKABE_ITO["black"]
    t, y = fit.t, fit.y
    sw = np.asarray(fit.kinetics.switch_times, dtype=float)
    lo = float(min(t.min(), sw.min()))
    hi = float(t.max())
    grid = fine_grid(fit, lo, hi)
    fitted = fit.predict(grid)
    name = None if label is None else str(label)
    if band:
        from .bands import band as _band

        b = _band(fit, grid, level=level, kind="confidence")
        lower = np.asarray(b["lower"], dtype=float)
        upper = np.asarray(b["upper"], dtype=float)
        if np.any(np.isfinite(lower) & np.isfinite(upper)):
            ax.fill_between(grid, lower, upper, color=curve_c, alpha=0.22, linewidth=0,
                            label=f"{level * 100:g} % confidence band")
        else:
            ax.plot([], [], linestyle="none",
                    label="confidence band not available (covariance singular)")
    # a segment fit's curve is the precursor's point response (its points are segment means)
    what = "precursor (point response)" if getattr(fit.model, "record", "points") == \
        "segments" else "fitted"
    ax.plot(grid, fitted, color=curve_c, linewidth=1.3,
            label=f"{name}: {what}" if name else
            (f"{what} ({model_name(fit)})" if show_model else what))
    ekw = dict(fmt="o", markersize=3.5, color=data_c, markerfacecolor=data_c,
               markeredgewidth=0.5, elinewidth=0.8, capsize=1.5, label=name or "data",
               zorder=4)
    if fit.sigma is not None:
        ax.errorbar(t, y, yerr=fit.sigma, **ekw)
    else:
        ax.errorbar(t, y, **ekw)
    if show_flagged:
        infl = fit.influence()
        fl = infl["flagged"].to_numpy(dtype=bool)
        if fl.any():
            ax.scatter(t[fl], y[fl], s=60, facecolors="none", edgecolors=FLAG,
                       linewidths=1.2, marker="s", zorder=5,
                       label=f"flagged, kept in fit (n = {int(fl.sum())})")
    if show_switches:
        for i, s in enumerate(sw):
            ax.axvline(s, color=GREY, linestyle="--", linewidth=0.8,
                       label="diet switch" if i == 0 else None)
    style_axes(ax, time_label(fit), tissue_label(fit))
    sig = fit.sigma if fit.sigma is not None else 0.0
    keep = finite_points((t, y), (t, y + sig), (t, y - sig), (grid[::8], fitted[::8]))
    place_legend(ax, first=(name or "data",), keep=keep)
    return ax


# ----------------------------------------------------------------------------------------
# plot_residuals
# ----------------------------------------------------------------------------------------
def plot_residuals(fit, ax=None, studentized=True):
    r"""Residuals against time, with a zero line and ±2 / ±3 guides.

    Parameters
    ----------
    fit : TurnoverFit
        A fit from :meth:`~isoturnover.TurnoverModel.fit`.
    ax : matplotlib Axes, optional
        Drawn on when given; else a new 3.5 × 2.6 in figure.
    studentized : bool, default=True
        Internally studentised residuals :math:`r_i/(s\sqrt{1-h_{ii}})` (dimensionless;
        guides at ±2 and ±3). ``False``: raw residuals y − ŷ in ‰ with guides at
        :math:`\pm 2\hat s w_i^{-1}` and :math:`\pm 3\hat s w_i^{-1}`, where ŝ is the residual
        sd and :math:`w_i^{-1}` the point's σ (1 without ``sigma``).

    Returns
    -------
    matplotlib Axes
        The Axes drawn on. Flagged points (see :func:`plot_fit`) are ringed.

    Raises
    ------
    DataError
        When ``fit`` is not a TurnoverFit, ``ax`` not an Axes or ``studentized`` not a
        bool.
    """
    fit = check_fit(fit, "plot_residuals")
    if not isinstance(studentized, (bool, np.bool_)):
        raise DataError(f"'studentized' must be True or False; got {studentized!r}")
    ax = new_axes(ax, measured=True)
    infl = fit.influence()
    t = fit.t
    fl = infl["flagged"].to_numpy(dtype=bool)
    order = np.argsort(t, kind="stable")
    if studentized:
        r = infl["studentized"].to_numpy(dtype=float)
        ylabel = "Studentized residual"
        if not np.any(np.isfinite(r)):
            # leverage unavailable (singular covariance): standardised residuals r/s instead
            s = math.sqrt(fit.rss / fit.dof) if fit.dof > 0 else math.nan
            w = 1.0 / fit.sigma if fit.sigma is not None else 1.0
            r = w * fit.residuals / s
            ylabel = "Standardized residual (leverage not available)"
        for g, ls in ((2, ":"), (3, "--")):
            for sign in (-1, 1):
                ax.axhline(sign * g, color=GREY, linestyle=ls, linewidth=0.7,
                           label=f"±{g}" if sign > 0 else None)
    else:
        r = fit.residuals
        ylabel = "Residual (‰)"
        s = math.sqrt(fit.s2) if fit.s2 > 0 else math.nan
        scale = s * (fit.sigma if fit.sigma is not None else np.ones_like(t))
        for g, ls in ((2, ":"), (3, "--")):
            for sign in (-1, 1):
                ax.plot(t[order], sign * g * scale[order], color=GREY, linestyle=ls,
                        linewidth=0.7, label=f"±{g} ŝ" if sign > 0 else None)
    ax.axhline(0.0, color=OKABE_ITO["black"], linewidth=0.8)
    ax.plot(t, r, "o", markersize=3.5, color=OKABE_ITO["blue"], linestyle="none",
            label="residual")
    if fl.any():
        ax.scatter(t[fl], r[fl], s=60, facecolors="none", edgecolors=FLAG, linewidths=1.2,
                   marker="s", zorder=5, label=f"flagged (n = {int(fl.sum())})")
    finite = r[np.isfinite(r)]
    top = max(3.6 if studentized else 0.0, float(np.max(np.abs(finite))) * 1.15
              if finite.size else 1.0)
    if studentized:
        ax.set_ylim(-top, top)
    style_axes(ax, time_label(fit), ylabel)
    place_legend(ax, first=("residual",), ncol=3, columnspacing=1.0, handlelength=1.5,
            keep=finite_points((t, r)))
    return ax


# ----------------------------------------------------------------------------------------
# plot_progress
# ----------------------------------------------------------------------------------------
def _progress_window(fit):
    """(start, end, old level, new level) of the first switch: end is the second switch."""
    kin = fit.kinetics
    v = fit.values
    sw = np.asarray(kin.switch_times, dtype=float)
    if fit.model.diet is None:
        return float(sw[0]), math.inf, float(v["delta0"]), float(v["delta_eq"])
    L = kin.levels(np.array([v[n] for n in kin.param_names]))
    end = float(sw[1]) if sw.size > 1 else math.inf
    return float(sw[0]), end, float(L[0]), float(L[1])


def plot_progress(fit, ax=None, *, show_model=True):
    r"""Reaction progress plot: :math:`\ln(1 - F)` against time since the switch.

    :math:`1 - F = (\delta(t) - \delta_{eq})/(\delta_0 - \delta_{eq})` (Cerling et al. 2007,
    Oecologia 151:175–189), with δ0 and δ_eq taken from the fit: ``delta0``/``delta_eq`` of a
    step-switch fit, or the tissue levels of the first diet and the second
    (:meth:`TurnoverKinetics.levels`) for a diet-history fit, whose points are then restricted
    to the first switch's period (up to the second switch). The fitted curve is
    :math:`\ln[(\hat\delta(t) - \delta_{eq})/(\delta_0 - \delta_{eq})]` from the model's
    prediction, i.e. :math:`\ln\sum_i f_i e^{-k_i \tau}` for parallel pools (one pool: a
    straight line of slope −k), and the chain or growth response otherwise.

    Points whose :math:`\ln(1 - F)` is undefined (F ≥ 1: past the fitted plateau; F ≤ 0:
    at or beyond the start value) are not dropped: they are drawn at the lower or upper edge
    of the plot with their own marker, and the legend says how many there are.

    The y range follows the points that still tell about :math:`\ln(1 - F)`: those whose
    change still to come, :math:`|\delta - \delta_{eq}|`, exceeds their measurement sd
    (the point's ``sigma``, else the fit's residual sd), so that the sd of their
    :math:`\ln(1 - F)` is below 1 (delta method). Near the plateau
    :math:`\ln(1 - F)` is dominated by noise and runs towards −∞; such points below the
    range are drawn as open marks at the lower edge, counted in the legend ("below the
    axis (n = …)"). The fitted curve stops where it leaves the range.

    Parameters
    ----------
    fit : TurnoverFit
        A fit from :meth:`~isoturnover.TurnoverModel.fit`.
    ax : matplotlib Axes, optional
        Drawn on when given; else a new 3.5 × 2.6 in figure.
    show_model : bool, default=True
        Name the model in the curve's legend entry (``"fit, 2 pools"``); ``False`` when a
        title already names it.

    Returns
    -------
    matplotlib Axes
        The Axes drawn on: time since the switch against :math:`\ln(1 - F)`.

    Raises
    ------
    DataError
        When no sample lies in the first switch's period, or ``fit``/``ax`` are of the
        wrong kind.
    """
    import matplotlib.transforms as mtransforms

    from .progress import reaction_progress

    fit = check_fit(fit, "plot_progress")
    show_model = _check_bool(show_model, "show_model")
    s0, s1, d0, deq = _progress_window(fit)
    t = fit.t
    inside = (t >= s0) & (t <= s1)  # a sample on the switch day reflects the old diet
    n_before = int(np.sum(t < s0))
    n_after = int(np.sum(t > s1))
    if not inside.any():
        end = f"the second switch (t = {s1:g})" if np.isfinite(s1) else "the last sample"
        raise DataError(f"plot_progress: no sample between the first switch (t = {s0:g}) and "
                        f"{end}; the reaction progress plot needs samples after a switch")
    ax = new_axes(ax, measured=True)
    tt, yy = t[inside], fit.y[inside]
    sd = None if fit.sigma is None else fit.sigma[inside]
    tab = reaction_progress(tt, yy, delta0=d0, delta_eq=deq, sd=sd)
    tau = tt - s0
    logv = tab["log_one_minus_F"].to_numpy(dtype=float)
    sdl = tab["sd_log"].to_numpy(dtype=float)
    flag = tab["flag"].to_numpy(dtype=str)
    ok = flag == "ok"
    # A point tells about ln(1 - F) while the change still to come, |δ - δ_eq|, exceeds its
    # measurement sd (the point's sigma, else the residual sd of the fit): the sd of its
    # ln(1 - F) is then below 1. Nearer the plateau ln(1 - F) is noise that runs to -∞. The
    # y range follows the telling points (and 0 at the switch); points below it are drawn
    # as marks at the lower edge.
    s_pt = sd if sd is not None else np.full(tt.size, math.sqrt(max(fit.s2, 0.0)))
    telling = ok & (np.abs(yy - deq) > s_pt)
    ref = logv[telling] if telling.any() else logv[ok]
    lo_y = min(float(np.min(ref)) if ref.size else -1.0, 0.0)
    hi_y = max(float(np.max(logv[ok])) if ok.any() else 0.0, 0.0)
    pad = 0.12 * max(hi_y - lo_y, 0.5)
    bottom, top = lo_y - pad, hi_y + pad
    below = ok & (logv < bottom)
    inrange = ok & ~below
    # fitted curve on the window, drawn while it stays inside the y range
    hi = float(tt.max())
    grid = fine_grid(fit, s0, hi) if hi > s0 else np.array([s0])
    cx, cy = _progress_curve(fit, grid, d0, deq, bottom)
    fit_lab = f"fit, {model_name(fit)}" if show_model else "fit"
    ax.plot(cx - s0, cy, color=OKABE_ITO["blue"], linewidth=1.3, label=fit_lab)
    ekw = dict(fmt="o", markersize=3.5, color=OKABE_ITO["black"], elinewidth=0.8, capsize=1.5,
               label="data")
    if np.all(np.isfinite(sdl[inrange])) and inrange.any() and sd is not None:
        ax.errorbar(tau[inrange], logv[inrange], yerr=sdl[inrange], **ekw)
    else:
        ax.errorbar(tau[inrange], logv[inrange], **ekw)
    ax.set_ylim(bottom, top)
    trans = mtransforms.blended_transform_factory(ax.transData, ax.transAxes)
    past = flag == "F>=1"
    before = flag == "F<=0"
    edge = []  # (x, y in axes fraction) of the marks, kept clear of the boxes
    if past.any():
        ax.plot(tau[past], np.full(past.sum(), 0.03), marker="v", linestyle="none",
                markersize=5, color=FLAG, transform=trans, clip_on=False,
                label=f"F ≥ 1, no ln(1 − F) (n = {int(past.sum())})")
        edge.append((tau[past], 0.03))
    if below.any():
        ax.plot(tau[below], np.full(below.sum(), 0.03), marker="v", linestyle="none",
                markersize=5, markerfacecolor="white", markeredgecolor=OKABE_ITO["black"],
                markeredgewidth=0.8, transform=trans, clip_on=False,
                label=f"below the axis (n = {int(below.sum())})")
        edge.append((tau[below], 0.03))
    if before.any():
        ax.plot(tau[before], np.full(before.sum(), 0.97), marker="^", linestyle="none",
                markersize=5, color=OKABE_ITO["reddish_purple"], transform=trans,
                clip_on=False, label=f"F ≤ 0, no ln(1 − F) (n = {int(before.sum())})")
        edge.append((tau[before], 0.97))
    notes = []
    if n_before:
        notes.append(f"{n_before} point{'s' if n_before > 1 else ''} before the switch")
    if n_after:
        notes.append(f"{n_after} point{'s' if n_after > 1 else ''} after the 2nd switch")
    style_axes(ax, f"Time since diet switch ({time_unit_word(fit)})", "ln(1 − F)")
    if fit.model.diet is None:
        tag0 = "fixed" if "delta0" in fit.fixed else "fitted"
        tag1 = "fixed" if "delta_eq" in fit.fixed else "fitted"
    else:
        tag0 = tag1 = "from the fit"
    e0 = f"δ$_0$ = {d0:.2f} ‰".replace("-", "−")
    e1 = f"δ$_\\mathrm{{eq}}$ = {deq:.2f} ‰".replace("-", "−")
    ends = f"{e0}, {e1} ({tag0})" if tag0 == tag1 else f"{e0} ({tag0}), {e1} ({tag1})"
    if notes:
        ends += "\nnot shown: " + "; ".join(notes)
    # the end values above the panel, right: off the data whatever their shape
    ax.set_title(ends, loc="right", fontsize=LEGEND_PT, color="#333333")
    span = top - bottom
    bars = []
    if sd is not None and inrange.any():
        for sign in (-1.0, 1.0):
            yb = logv[inrange] + sign * sdl[inrange]
            fine = np.isfinite(yb) & (yb >= bottom) & (yb <= top + 0.5 * span)
            bars.append((tau[inrange][fine], yb[fine]))
    keep = finite_points((tau[inrange], logv[inrange]), ((cx - s0)[::8], cy[::8]),
                         ((cx - s0)[-1:], cy[-1:]), *bars)
    # the edge marks: x in data, y in axes coordinates
    marks = np.concatenate([np.column_stack([x, np.full(x.size, f)]) for x, f in edge]) \
        if edge else None
    leg = place_legend(ax, first=("data",), loc="upper right")
    keep_clear(ax, [leg], keep, fixed=marks)
    return ax


def _progress_curve(fit, grid, d0, deq, bottom):
    r"""Times and :math:`\ln[(\hat\delta - \delta_{eq})/(\delta_0 - \delta_{eq})]` of the fitted
    curve, cut where it leaves the y range (below ``bottom`` or undefined).

    The curve ends at the time where it reaches ``bottom`` (found by linear interpolation
    of the grid, then evaluated there); where it comes back, a NaN breaks the line.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        u = (fit.predict(grid) - deq) / (d0 - deq)
        lc = np.where(u > 0, np.log(np.where(u > 0, u, 1.0)), -np.inf)
    inside = np.isfinite(lc) & (lc >= bottom)
    if inside.all():
        return grid, lc
    xs, ys = [], []
    for i in range(grid.size):
        if inside[i]:
            if i > 0 and not inside[i - 1] and xs:
                xs.append(math.nan)  # the curve comes back into the range: break the line
                ys.append(math.nan)
            xs.append(grid[i])
            ys.append(lc[i])
        elif i > 0 and inside[i - 1]:
            # leaves the range between grid[i-1] and grid[i]: end at the crossing
            a, b = lc[i - 1], lc[i] if np.isfinite(lc[i]) else bottom - 1.0
            x = grid[i - 1] + (grid[i] - grid[i - 1]) * (a - bottom) / (a - b)
            with np.errstate(divide="ignore", invalid="ignore"):
                ux = (float(fit.predict(np.array([x]))[0]) - deq) / (d0 - deq)
            if ux > 0:
                xs.append(x)
                ys.append(math.log(ux))
    return np.asarray(xs, dtype=float), np.asarray(ys, dtype=float)


# ----------------------------------------------------------------------------------------
# plot_pools
# ----------------------------------------------------------------------------------------
def plot_pools(fit, ax=None, *, t_max=None):
    r"""Contribution of each pool to the change still to come after a step switch.

    Pool i contributes :math:`f_i e^{-k_i \tau}` to
    :math:`1 - F(\tau) = \sum_i f_i e^{-k_i \tau}`; with growth dilution each term is
    multiplied by :math:`W(s)/W(s + \tau)` (s the first switch; :math:`e^{-k_g\tau}` for
    exponential growth) and :math:`k_i` are catabolic rates. The legend gives each pool's
    fraction and half-life :math:`\ln 2/k_i` (incorporation or catabolic, as the fit's
    ``rate_kind``).
    For the precursor–product chain, which has no pools, its single response
    :math:`(k_1 e^{-k_2\tau} - k_2 e^{-k_1\tau})/(k_1 - k_2)` is drawn with both step
    half-lives.

    The curves are the response to one step switch at τ = 0, without the lag of a fit that
    has one. Pool fractions describe the shape of the curve; they need not be physical
    compartments.

    Parameters
    ----------
    fit : TurnoverFit
        A fit from :meth:`~isoturnover.TurnoverModel.fit`.
    ax : matplotlib Axes, optional
        Drawn on when given; else a new 3.5 × 2.6 in figure.
    t_max : float, optional
        End of the time axis, in the data's time unit (time since the switch; default the
        last sample's).

    Returns
    -------
    matplotlib Axes
        The Axes drawn on: time since the switch against the share of the change to come
        (0–1).

    Raises
    ------
    DataError
        When ``t_max`` is not a positive number, or ``fit``/``ax`` are of the wrong kind.
    """
    fit = check_fit(fit, "plot_pools")
    ax = new_axes(ax, measured=True)
    kin = fit.kinetics
    v = fit.values
    s0 = float(kin.switch_times[0])
    span = float(fit.t.max() - s0)
    if t_max is None:
        t_max = span if span > 0 else 1.0
    try:
        t_max = float(t_max)
    except (TypeError, ValueError):
        raise DataError(f"'t_max' must be a positive number; got {t_max!r}") from None
    if not (math.isfinite(t_max) and t_max > 0):
        raise DataError(f"'t_max' must be a positive number; got {t_max!r}")
    tau = np.linspace(0.0, t_max, 400)
    unit = time_unit_word(fit)
    theta = np.array([v[n] for n in kin.param_names])
    rk = "catabolic" if fit.rate_kind == "catabolic" else "incorporation"
    if kin.structure == "chain":
        total = kin.remaining(tau, theta)
        hl = [math.log(2) / v[n] for n in kin.rate_names]
        ax.plot(tau, total, color=OKABE_ITO["black"], linewidth=1.4,
                label=f"chain: t½ {compact_number(hl[0])} and {compact_number(hl[1])} {unit}")
    else:
        ks = np.array([v[n] for n in kin.rate_names])
        fs = np.array([v[n] for n in kin.fraction_names])
        factor = np.ones_like(tau)
        if kin.growth_kind is not None:
            # growth dilution W(s)/W(s + tau) (exp(-k_g tau) for exponential growth)
            lw = np.asarray(kin.log_mass(np.concatenate([[s0], s0 + tau]), theta), dtype=float)
            factor = np.exp(lw[0] - lw[1:])
        parts = fs[:, None] * np.exp(-ks[:, None] * tau[None, :]) * factor[None, :]
        for i in range(ks.size):
            hl = math.log(2) / ks[i]
            ax.plot(tau, parts[i], color=series_color(i), linewidth=1.2,
                    linestyle=("-", "--", "-.", ":")[i % 4],
                    label=f"pool {i + 1}: f = {fs[i]:.2f}, t½ = {compact_number(hl)} {unit}")
        if ks.size > 1:
            ax.plot(tau, parts.sum(axis=0), color=OKABE_ITO["black"], linewidth=1.5,
                    label="sum, 1 − F")
    ax.set_ylim(0.0, 1.05)
    ax.set_xlim(0.0, t_max)
    style_axes(ax, f"Time since diet switch ({unit})", "Share of change to come, 1 − F")
    lines = [(ln.get_xdata()[::8], ln.get_ydata()[::8]) for ln in ax.get_lines()]
    place_legend(ax, title=f"{rk} half-lives", keep=finite_points(*lines))
    return ax


# ----------------------------------------------------------------------------------------
# plot_growth
# ----------------------------------------------------------------------------------------
def _share_values(obj, n):
    import pandas as pd

    if isinstance(obj, pd.DataFrame):
        for col in ("growth_share", "share"):
            if col in obj.columns:
                return np.asarray(obj[col], dtype=float)
        raise DataError("plot_growth: 'turnover_fit'.growth_share_curve(t) returned a table "
                        "without a 'growth_share' or 'share' column (columns: "
                        f"{', '.join(map(str, obj.columns))})")
    a = np.asarray(obj, dtype=float).ravel()
    if a.size != n:
        raise DataError(f"plot_growth: 'turnover_fit'.growth_share_curve(t) returned {a.size} "
                        f"values for {n} times")
    return a


def plot_growth(growth_fit, ax=None, *, turnover_fit=None, mass_unit=None, time_unit=None):
    """Body masses, the fitted growth curve and the instantaneous growth share.

    Parameters
    ----------
    growth_fit : GrowthFit
        From :func:`isoturnover.fit_growth` (needs ``t``, ``mass`` and ``predict(t)``).
    ax : matplotlib Axes, optional
        Drawn on when given; else a new 3.5 × 2.6 in figure.
    turnover_fit : TurnoverFit, optional
        A turnover fit with growth dilution. When it offers ``growth_share_curve(t)`` (the
        part of the change up to t that growth alone would have produced, divided by the
        whole change) that curve is drawn on a second y axis (0–1).
    mass_unit : str, optional
        Unit of the masses for the axis label (e.g. ``"kg"`` gives "Body mass (kg)").
        Default: the growth fit's ``mass_unit`` attribute, or ``"mass_unit"`` in its
        ``attrs``/``data_info`` mapping, when it carries one; without any the label says
        "Body mass (unit not given)".
    time_unit : str, optional
        Time unit (default the turnover fit's, else ``"d"``).

    Returns
    -------
    matplotlib Axes
        The mass axis (the share axis, when drawn, is its twin: ``ax.right_ax``, labelled
        and coloured as its dashed curve). The legend (masses and curve) is kept off the
        points and both curves.

    Raises
    ------
    DataError
        When ``growth_fit`` lacks ``t``, ``mass`` or ``predict``, ``mass_unit`` is not a
        non-empty string, ``turnover_fit`` is not a TurnoverFit with growth dilution, or
        its share curve has the wrong length.
    """
    for attr in ("t", "mass", "predict"):
        if not hasattr(growth_fit, attr):
            raise DataError(f"plot_growth: 'growth_fit' must be a GrowthFit (from fit_growth) "
                            f"with t, mass and predict(); got {type(growth_fit).__name__}, "
                            f"which lacks {attr!r}")
    if turnover_fit is not None:
        check_fit(turnover_fit, "plot_growth")
        if turnover_fit.rate_kind != "catabolic":
            raise DataError("plot_growth: 'turnover_fit' has no growth model (its rates are "
                            "incorporation rates); pass a fit made with growth=…")
    unit_code = time_unit or (turnover_fit.time_unit if turnover_fit is not None else "d")
    mass_unit = _mass_unit(growth_fit, mass_unit)
    ax = new_axes(ax, measured=True)
    t = np.asarray(growth_fit.t, dtype=float)
    m = np.asarray(growth_fit.mass, dtype=float)
    grid = np.linspace(float(t.min()), float(t.max()), 300)
    ax.plot(t, m, "o", markersize=3.5, color=OKABE_ITO["black"], linestyle="none",
            label="mass")
    curve = getattr(growth_fit, "curve", "growth")
    mass_curve = np.asarray(growth_fit.predict(grid), dtype=float)
    ax.plot(grid, mass_curve, color=OKABE_ITO["blue"], linewidth=1.3,
            label=f"fitted {str(curve).replace('_', ' ')} curve")
    xlabel = (f"Time since diet switch ({time_unit_word(unit_code)})" if turnover_fit is not None
              else f"Time ({time_unit_word(unit_code)})")
    style_axes(ax, xlabel, f"Body mass ({mass_unit})" if mass_unit
               else "Body mass (unit not given)")
    keep = [(t, m), (grid[::8], mass_curve[::8])]
    if turnover_fit is not None:
        if hasattr(turnover_fit, "growth_share_curve"):
            share = _share_values(turnover_fit.growth_share_curve(grid), grid.size)
            ax2 = ax.twinx()
            c = OKABE_ITO["vermillion"]
            ax2.plot(grid, share, color=c, linewidth=1.2, linestyle="--",
                     label="growth share of the rate of change")
            ax2.set_ylim(0.0, 1.05)  # a share of 1 stays visible
            # the right axis is named in the curve's colour: no legend entry needed
            ax2.set_ylabel("Growth share of the\nrate of change (dashed)", fontsize=LABEL_PT,
                           color=c)
            ax2.tick_params(labelsize=TICK_PT, colors=c, axis="y")
            ax.right_ax = ax2
            # the share curve in the mass axis' coordinates, so the legend stays off it
            ax.autoscale_view()
            y0, y1 = ax.get_ylim()
            keep.append((grid[::8], y0 + (y1 - y0) * share[::8] / 1.05))
        else:
            warnings.warn("plot_growth: 'turnover_fit' offers no growth_share_curve(t); the "
                          "growth share is not drawn", IsoturnoverWarning, stacklevel=2)
    place_legend(ax, first=("mass",), keep=finite_points(*keep))
    return ax


def _mass_unit(growth_fit, mass_unit):
    """The unit of the masses: the argument, else what the growth fit carries, else None."""
    if mass_unit is None:
        mass_unit = getattr(growth_fit, "mass_unit", None)
        for name in ("attrs", "data_info"):
            info = getattr(growth_fit, name, None)
            if mass_unit is None and isinstance(info, dict):
                mass_unit = info.get("mass_unit")
        if mass_unit is None:
            return None
    if not isinstance(mass_unit, str) or not mass_unit.strip():
        raise DataError(f"plot_growth: 'mass_unit' must be a non-empty string such as 'kg'; "
                        f"got {mass_unit!r}")
    return mass_unit.strip()


# ----------------------------------------------------------------------------------------
# plot_weights
# ----------------------------------------------------------------------------------------
_CRIT = {"aicc": "AICc", "aic": "AIC", "bic": "BIC"}


def plot_weights(fitset, ax=None):
    """Akaike weights of the candidate models of every series (stacked horizontal bars).

    One bar per series, labelled by its key; the parts of the key that every series shares
    are named once, in the y label (``"Subject / tissue (δ¹³C)"``), and isotope codes are
    written in δ notation. Each candidate has its colour (Okabe–Ito), in the same place on
    every bar. A series that could not be fitted is an empty, dashed bar
    with its status written in it. Weights :math:`w_i = e^{-\\Delta_i/2}/\\sum_j
    e^{-\\Delta_j/2}` of the FitSet's criterion (Burnham & Anderson 2002); a candidate that
    failed in an otherwise fitted series has weight 0.

    Parameters
    ----------
    fitset : FitSet
        From :func:`isoturnover.fit_each`.
    ax : matplotlib Axes, optional
        Default: a 3.5 in wide figure, 0.25 in per series.

    Returns
    -------
    matplotlib Axes
        The Axes drawn on: one horizontal bar per series, weights 0–1 along x.

    Raises
    ------
    DataError
        When ``fitset`` is not a FitSet or holds no series.
    """
    from .groups import FitSet

    if not isinstance(fitset, FitSet):
        raise DataError(f"plot_weights: 'fitset' must be a FitSet (from fit_each); got "
                        f"{type(fitset).__name__}")
    if len(fitset) == 0:
        raise DataError("plot_weights: 'fitset' holds no series")
    n = len(fitset)
    keys = [tuple(k) for k in fitset]
    by = tuple(getattr(fitset, "by", ()))
    # key parts shared by every series go once into the y label, not on every bar
    width_k = max(len(k) for k in keys)
    same = [i for i in range(width_k)
            if n > 1 and all(len(k) == width_k for k in keys)
            and len({k[i] for k in keys}) == 1]
    vary = [i for i in range(width_k) if i not in same]
    ylabels = [series_title(" / ".join(str(k[i]) for i in vary if i < len(k))) for k in keys]
    names = [str(by[i]).replace("_", " ") if i < len(by) else "" for i in vary]
    ylabel = " / ".join(x for x in names if x)
    ylabel = ylabel[:1].upper() + ylabel[1:]
    if same:
        common = series_title(", ".join(str(keys[0][i]) for i in same))
        ylabel = f"{ylabel} ({common})" if ylabel else common
    cands = []
    for r in fitset.values():
        for lab in list(r.reasons) + list(r.fits):
            if lab not in cands:
                cands.append(lab)
    # print size: one column unless the labels need two; the legend of the candidates above
    # the bars, in as many columns as fit over the bars (7 pt text: about 0.055 in a char)
    char = 0.055
    longest = max(len(x) for x in ylabels)
    width = SINGLE[0] if longest <= 22 else DOUBLE[0]
    room = width - 0.45 - char * longest  # the bars' width
    col_w = [0.4 + char * len(str(c)) for c in cands] or [1.0]
    ncol = len(col_w)
    while ncol > 1 and ncol * max(col_w) > room:
        ncol -= 1
    rows = -(-len(cands) // ncol) if cands else 0
    ax = new_axes(ax, size=(width, 0.95 + 0.25 * n + 0.15 * rows), measured=True)
    colors = {c: series_color(i) for i, c in enumerate(cands)}
    drawn = set()
    for yi, r in enumerate(fitset.values()):
        if r.status != "ok" or r.comparison is None:
            ax.barh(yi, 1.0, height=0.7, fill=False, edgecolor=GREY, linestyle="--",
                    linewidth=0.8)
            ax.text(0.5, yi, f"not fitted: {str(r.status).replace('_', ' ')}", ha="center",
                    va="center", fontsize=LEGEND_PT - 0.5, color="#444444")
            continue
        w = dict(zip(r.comparison["label"].astype(str), r.comparison["weight"].astype(float)))
        left = 0.0
        for c in cands:
            wi = float(w.get(c, 0.0))
            if not wi > 0:
                continue
            ax.barh(yi, wi, left=left, height=0.7, color=colors[c], edgecolor="white",
                    linewidth=0.5, label=c if c not in drawn else None)
            drawn.add(c)
            left += wi
    ax.set_yticks(range(n))
    ax.set_yticklabels(ylabels)
    ax.set_ylim(n - 0.5, -0.5)
    ax.set_xlim(0.0, 1.0)
    crit = _CRIT.get(fitset.criterion, str(fitset.criterion))
    style_axes(ax, f"{'Akaike' if crit != 'BIC' else 'Model'} weight ({crit})", ylabel)
    from matplotlib.patches import Patch

    # every candidate in the legend, also those with weight ~0 everywhere
    handles = [Patch(facecolor=colors[c], edgecolor="white") for c in cands]
    if handles:
        ax.legend(handles, list(cands), loc="lower left", bbox_to_anchor=(0.0, 1.01),
                  ncol=ncol, frameon=False, fontsize=LEGEND_PT, borderaxespad=0.0,
                  handlelength=1.2, columnspacing=1.0)
    return ax


# ----------------------------------------------------------------------------------------
# plot_overview
# ----------------------------------------------------------------------------------------
def plot_overview(fit, *, level=0.95):
    """Three panels for a report: (a) fit with band, (b) residuals, (c) reaction progress.

    Parameters
    ----------
    fit : TurnoverFit
        A fit from :meth:`~isoturnover.TurnoverModel.fit`.
    level : float, default=0.95
        Level of the confidence band in panel (a).

    Returns
    -------
    matplotlib Figure
        7 × 5 in (two journal columns): the fit across the top, residuals and reaction
        progress below; margins measured from the text
        (:func:`isoturnover.plotkit.measured_margins`). The fit's label is the title, with
        isotope codes in δ notation as on the axes
        (:func:`isoturnover.plotkit.series_title`); when it names the model, the legends do
        not repeat it. Legends are placed when the figure
        is drawn (once, on saving: :func:`isoturnover.plotkit.placing_layout`).
    """
    import matplotlib.pyplot as plt

    fit = check_fit(fit, "plot_overview")
    fig = plt.figure(figsize=(DOUBLE[0], 5.0), layout=placing_layout(measured=True))
    try:
        # a guess near the measured margins (plotkit.measured_margins): one measurement
        gs = fig.add_gridspec(2, 2, left=0.09, right=0.99, bottom=0.085, top=0.91,
                              wspace=0.16, hspace=0.34)
        axes = [fig.add_subplot(gs[0, :]), fig.add_subplot(gs[1, 0]),
                fig.add_subplot(gs[1, 1])]
        title = series_title(fit.label) if fit.label else ""
        # the title names the model ("…: 2 pools"): the legends need not say it again
        named = bool(re.search(rf"\b{re.escape(model_name(fit))}\b", title))
        plot_fit(fit, axes[0], level=level, show_model=not named)
        plot_residuals(fit, axes[1])
        plot_progress(fit, axes[2], show_model=not named)
        for a, letter in zip(axes, "abc"):
            a.set_title(letter, loc="left", fontsize=LABEL_PT + 1, fontweight="bold")
        if title:
            fig.suptitle(title, fontsize=LABEL_PT)
    except BaseException:
        plt.close(fig)
        raise
    return fig
