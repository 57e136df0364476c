r"""Forest plot of a population estimate: every animal, the pooled value and a new animal.

:func:`plot_population` draws one row per animal of a :class:`~isoturnover.PopulationEstimate`
(or a :class:`~isoturnover.RandomEffects`): its estimate as a square whose area is its weight
in the pooled mean, its interval as a line. A bound the data do not close is an arrow at the
edge of the axis, never a number; animals left out of the pooling are drawn hollow and grey
and named, with the reason, in a note under the axis. Below the animals the pooled estimate
is a diamond spanning its confidence interval, and the prediction interval for a new animal
(Higgins, Thompson & Spiegelhalter 2009) is a shaded bar of its own; :math:`\tau^2` (on the
analysis scale) and :math:`I^2` (Higgins & Thompson 2002) stand in a note in the lower right
corner, on a row of its own (clear of the data and of a title).

Half-lives are pooled on the log scale, so the x-axis is logarithmic by default. Like
:mod:`isoturnover.plotting`, matplotlib is imported inside the function and no global style
is changed; colours are the Okabe–Ito palette (:mod:`isoturnover.plotkit`).
"""

from __future__ import annotations

import math
import textwrap

import numpy as np

from .errors import DataError
from .plotkit import (
    GREY,
    LABEL_PT,
    LEGEND_PT,
    OKABE_ITO,
    SINGLE,
    TICK_PT,
    new_axes,
    series_title,
    time_unit_word,
)

__all__ = ["plot_population"]

_ANIMAL = OKABE_ITO["blue"]
_POOLED = OKABE_ITO["black"]
_PREDICT = OKABE_ITO["orange"]
_LEFT_OUT = "#999999"
_OPEN_LOWER = ("lower bound open", "both bounds open")
_OPEN_UPPER = ("upper bound open", "both bounds open")


def _name_labels(names):
    """Tick labels of the animals: the parts of tuple names that differ between animals."""
    names = list(names)
    if names and all(isinstance(n, tuple) for n in names) \
            and len({len(n) for n in names}) == 1 and len(names[0]) > 1:
        vary = [j for j in range(len(names[0])) if len({n[j] for n in names}) > 1]
        vary = vary or list(range(len(names[0])))
        return [series_title(" ".join(str(n[j]) for j in vary)) for n in names]
    return [series_title(n) for n in names]


def _rows(pop):
    """The animals and the pooled numbers of a PopulationEstimate or RandomEffects."""
    from .population import PopulationEstimate, RandomEffects

    if isinstance(pop, PopulationEstimate):
        a = pop.animals()
        m = pop.model
        rows = {"name": list(a["name"]), "value": a["value"].to_numpy(float),
                "lower": a["lower"].to_numpy(float), "upper": a["upper"].to_numpy(float),
                "weight": a["weight"].to_numpy(float), "used": a["used"].to_numpy(bool),
                "reason": [str(r) for r in a["reason"]]}
        quantity = pop.quantity
        scale = pop.scale
    elif isinstance(pop, RandomEffects):
        a = pop.animals()
        m = pop
        k = len(a)
        rows = {"name": list(a["name"]), "value": a["estimate"].to_numpy(float),
                "lower": a["lower"].to_numpy(float), "upper": a["upper"].to_numpy(float),
                "weight": a["weight"].to_numpy(float), "used": np.ones(k, bool),
                "reason": [""] * k}
        quantity = "estimate"
        scale = None
    else:
        raise DataError(f"plot_population: 'pop' must be a PopulationEstimate or a "
                        f"RandomEffects; got {type(pop).__name__}")
    if m.coefficients is not None or not math.isfinite(pop.estimate):
        raise DataError("plot_population: 'pop' is a meta-regression (moderators): it has no "
                        "single pooled value to draw; use its predict(covariates)")
    pooled = {"estimate": float(pop.estimate), "lower": float(pop.lower),
              "upper": float(pop.upper), "pi_lower": float(pop.pi_lower),
              "pi_upper": float(pop.pi_upper), "level": float(m.level), "tau2": float(m.tau2),
              "i2": float(m.i2), "k": int(m.k), "method": m.method}
    return rows, pooled, quantity, scale


def _limits(values, log):
    """x-axis limits around the finite values, padded (in log space on a log axis)."""
    v = np.asarray([x for x in values if math.isfinite(x) and (x > 0 or not log)], float)
    if log:
        lo, hi = math.log10(v.min()), math.log10(v.max())
        pad = 0.08 * max(hi - lo, 0.2)
        return 10 ** (lo - pad), 10 ** (hi + pad)
    lo, hi = float(v.min()), float(v.max())
    pad = 0.08 * (hi - lo if hi > lo else max(abs(hi), 1.0))
    return lo - pad, hi + pad


def _xlabel(quantity, time_unit):
    words = {"half_life": "Half-life", "estimate": "Estimate"}
    text = words.get(quantity, str(quantity).replace("_", " "))
    text = text[:1].upper() + text[1:]
    return f"{text} ({time_unit_word(time_unit)})" if time_unit else text


def plot_population(pop, ax=None, *, sort=True, log=True, time_unit=None):
    r"""Forest plot of a population estimate: animals, pooled value, a new animal.

    Parameters
    ----------
    pop : PopulationEstimate or RandomEffects
        From :func:`~isoturnover.population_estimate`, :meth:`FitSet.population
        <isoturnover.FitSet.population>` or :func:`~isoturnover.random_effects` (without
        moderators: a meta-regression has no single pooled value). A
        :class:`~isoturnover.PopulationEstimate` is drawn on its own scale (half-lives, not
        their logs) with each animal's interval as given (profile intervals); a
        :class:`~isoturnover.RandomEffects` on the scale of its estimates, with each
        animal's normal interval :math:`y_i \pm z\,s_i`.
    ax : matplotlib Axes, optional
        Where to draw; by default a new one-column figure (3.5 in wide, about 0.2 in per
        row).
    sort : bool, default=True
        Animals ordered by their estimate, smallest at the top; False keeps the order
        given.
    log : bool, default=True
        Logarithmic x-axis (half-lives and rates are pooled on the log scale, where their
        intervals are near symmetric). Needs every drawn value to be > 0.
    time_unit : str, optional
        Time unit of the values (``"d"``, ``"h"``, ...), named in the x label
        (``"Half-life (days)"``). A population estimate does not carry it: give the data's
        (``samples.attrs["time_unit"]``); None leaves the unit out of the label.

    Returns
    -------
    matplotlib Axes
        The Axes drawn on. Its artists carry ``gid`` names: ``"animals"`` (markers of the
        pooled animals, area proportional to the weight :math:`w_i/\sum w`,
        :math:`w_i = 1/(s_i^2 + \hat\tau^2)`), ``"left-out"`` (hollow markers of the
        animals left out), ``"intervals"`` (one line per closed or half-closed interval),
        ``"open-lower"`` and ``"open-upper"`` (arrowheads at the axis edge, x in axes
        coordinates), ``"pooled"`` (the diamond: lower, estimate, upper of the pooled
        value), ``"prediction"`` (the bar from ``pi_lower`` to ``pi_upper``), ``"note"``
        (:math:`\tau^2`, :math:`I^2`, k) and ``"left-out-note"`` (the animals left out and
        why).

    Raises
    ------
    DataError
        When ``pop`` is not a population estimate or random-effects result, is a
        meta-regression, when ``sort`` or ``log`` is not a bool, when ``time_unit`` is not
        a string, or when ``log`` is True and a value to draw is ≤ 0.

    Notes
    -----
    The pooled value is :math:`\hat\mu` (with ``scale="log"`` its back-transform
    :math:`e^{\hat\mu}`, the population median), the diamond its confidence interval; the
    bar is :math:`\hat\mu \pm t_{k-2}\sqrt{\hat\tau^2 + SE(\hat\mu)^2}` (back-transformed),
    the range a new animal's value falls in with the stated probability: it is wider than
    the confidence interval by the between-animal spread :math:`\tau`. With fewer than 3
    animals there is no prediction interval and the note says so.
    """
    import matplotlib.pyplot as plt
    from matplotlib.collections import LineCollection
    from matplotlib.patches import Polygon, Rectangle
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter
    from matplotlib.transforms import blended_transform_factory

    for name, flag in (("sort", sort), ("log", log)):
        if not isinstance(flag, (bool, np.bool_)):
            raise DataError(f"plot_population: '{name}' must be True or False; got {flag!r}")
    if time_unit is not None and not isinstance(time_unit, str):
        raise DataError(f"plot_population: 'time_unit' must be a string such as 'd'; got "
                        f"{time_unit!r}")
    if ax is not None:
        ax = new_axes(ax)  # checks it is an Axes
    rows, pooled, quantity, scale = _rows(pop)
    labels = _name_labels(rows["name"])
    shown = [i for i in range(len(labels)) if math.isfinite(rows["value"][i])]
    if sort:
        shown.sort(key=lambda i: rows["value"][i])
    lo_open = [(not rows["used"][i] and rows["reason"][i] in _OPEN_LOWER)
               or not math.isfinite(rows["lower"][i]) or (log and rows["lower"][i] <= 0)
               for i in range(len(labels))]
    hi_open = [(not rows["used"][i] and rows["reason"][i] in _OPEN_UPPER)
               or not math.isfinite(rows["upper"][i]) for i in range(len(labels))]
    drawn = [rows["value"][i] for i in shown]
    drawn += [rows["lower"][i] for i in shown if not lo_open[i]]
    drawn += [rows["upper"][i] for i in shown if not hi_open[i]]
    drawn += [pooled[c] for c in ("estimate", "lower", "upper", "pi_lower", "pi_upper")]
    if log:
        bad = [x for x in drawn if math.isfinite(x) and x <= 0]
        if bad:
            raise DataError(f"plot_population: 'log' is True but a value to draw is "
                            f"{bad[0]:g} (≤ 0); use log=False (a RandomEffects of log values "
                            "is drawn on a linear axis)")
    left_out = [i for i in range(len(labels)) if not rows["used"][i]]
    n = len(shown)
    y_pooled, y_pred = n + 0.6, n + 1.6
    note_lines = 0
    if left_out:
        note_text = "Left out of the pooling: " + "; ".join(
            f"{labels[i]} ({rows['reason'][i]})" for i in left_out) + "."
        if any(i in shown for i in left_out):
            note_text += " Hollow markers: animals left out."
    own = ax is None
    if left_out:  # about 17 characters of 6.5 pt text per inch
        width = SINGLE[0] if own else ax.figure.get_figwidth() * ax.get_position().width
        note_text = textwrap.fill(note_text, max(30, int(17 * width)))
        note_lines = note_text.count("\n") + 1
    ax = new_axes(ax, size=(SINGLE[0], 1.05 + 0.2 * (n + 3) + 0.13 * note_lines))
    try:
        x_lo, x_hi = _limits(drawn, log)
        edge = blended_transform_factory(ax.transAxes, ax.transData)
        segs, seg_colors = [], []
        arrows = {"open-lower": ([], [], "<"), "open-upper": ([], [], ">")}
        used_pts, out_pts, sizes = [], [], []
        w_max = max([rows["weight"][i] for i in shown if rows["used"][i]] or [1.0])
        for y, i in enumerate(shown):
            v = rows["value"][i]
            color = _ANIMAL if rows["used"][i] else _LEFT_OUT
            for side, open_, b, lim in (("open-lower", lo_open[i], rows["lower"][i], x_lo),
                                        ("open-upper", hi_open[i], rows["upper"][i], x_hi)):
                if open_:
                    segs.append([(v, y), (lim, y)])
                    arrows[side][0].append(0.0 if side == "open-lower" else 1.0)
                    arrows[side][1].append(y)
                else:
                    segs.append([(v, y), (b, y)])
                seg_colors.append(color)
            if rows["used"][i]:
                used_pts.append((v, y))
                sizes.append(10.0 + 40.0 * rows["weight"][i] / w_max)
            else:
                out_pts.append((v, y))
        ax.add_collection(LineCollection(segs, colors=seg_colors, linewidths=0.9,
                                         gid="intervals", zorder=2))
        if used_pts:
            xs, ys = zip(*used_pts)
            ax.scatter(xs, ys, s=sizes, marker="s", color=_ANIMAL, edgecolors="white",
                       linewidths=0.3, zorder=3, gid="animals")
        if out_pts:
            xs, ys = zip(*out_pts)
            ax.scatter(xs, ys, s=18, marker="o", facecolors="white", edgecolors=_LEFT_OUT,
                       linewidths=0.9, zorder=3, gid="left-out")
        for gid, (xs, ys, mk) in arrows.items():
            if xs:
                color = [_ANIMAL if rows["used"][shown[int(y)]] else _LEFT_OUT for y in ys]
                ax.scatter(xs, ys, s=18, marker=mk, c=color, transform=edge, clip_on=False,
                           zorder=3, linewidths=0, gid=gid)
        est, lo, hi = pooled["estimate"], pooled["lower"], pooled["upper"]
        ax.add_patch(Polygon([(lo, y_pooled), (est, y_pooled - 0.3), (hi, y_pooled),
                              (est, y_pooled + 0.3)], closed=True, facecolor=_POOLED,
                             edgecolor=_POOLED, linewidth=0.6, zorder=3, gid="pooled"))
        ax.plot([est, est], [-0.7, y_pred + 0.5], color=GREY, linewidth=0.6,
                linestyle=(0, (2, 2)), zorder=1)
        pct = f"{100 * pooled['level']:g} %"
        has_pi = math.isfinite(pooled["pi_lower"]) and math.isfinite(pooled["pi_upper"])
        if has_pi:
            pl, pu = pooled["pi_lower"], pooled["pi_upper"]
            ax.add_patch(Rectangle((pl, y_pred - 0.17), pu - pl, 0.34, facecolor=_PREDICT,
                                   alpha=0.45, edgecolor=_PREDICT, linewidth=0.8, zorder=2,
                                   gid="prediction"))
            ax.plot([est], [y_pred], marker="|", markersize=6, color=_POOLED, zorder=3)
        ax.axhline(n - 0.2, color="#cccccc", linewidth=0.5, zorder=0)
        ticks = list(range(n)) + [y_pooled, y_pred]
        ticklabels = [labels[i] for i in shown] + [f"Pooled ({pct} CI)",
                                                   f"New animal ({pct} PI)"]
        ax.set_yticks(ticks)
        ax.set_yticklabels(ticklabels, fontsize=TICK_PT)
        for lab, i in zip(ax.get_yticklabels()[:n], shown):
            if not rows["used"][i]:
                lab.set_color(_LEFT_OUT)
        for lab in ax.get_yticklabels()[n:]:
            lab.set_fontweight("bold")
        ax.set_ylim(y_pred + 1.3, -0.7)
        ax.tick_params(axis="y", length=0)
        ax.tick_params(axis="x", labelsize=TICK_PT)
        if log:
            ax.set_xscale("log")
            decades = math.log10(x_hi / x_lo)
            subs = (tuple(range(1, 10)) if decades < 1 else (1.0, 2.0, 5.0) if decades <= 2.5
                    else (1.0, 3.0) if decades <= 4 else (1.0,))
            ax.xaxis.set_major_locator(LogLocator(base=10, subs=subs))
            ax.xaxis.set_major_formatter(FuncFormatter(lambda x, _: f"{x:g}"))
            ax.xaxis.set_minor_formatter(NullFormatter())
        ax.set_xlim(x_lo, x_hi)
        ax.set_xlabel(_xlabel(quantity, time_unit), fontsize=LABEL_PT)
        ax.grid(axis="x", which="major", color="#e5e5e5", linewidth=0.5)
        ax.set_axisbelow(True)
        for side in ("top", "right", "left"):
            ax.spines[side].set_visible(False)
        on = " (log scale)" if scale == "log" else ""
        corner = [f"τ² = {pooled['tau2']:.3g}{on}", f"I² = {100 * pooled['i2']:.0f} %",
                  f"k = {pooled['k']} animals"]
        if not has_pi:
            corner.append("no PI (k < 3)")
        # the lower right corner, on a row of its own under the prediction bar
        ax.text(1.0, y_pred + 0.85, ",  ".join(corner), transform=edge, ha="right",
                va="center", fontsize=LEGEND_PT, color="#333333", gid="note",
                bbox={"facecolor": "white", "edgecolor": "none", "pad": 1.0}, zorder=4)
        if left_out:
            # under the x label; on a figure made here from its left edge
            where = ("figure fraction", "axes fraction") if own else "axes fraction"
            ax.annotate(note_text, xy=(0.02 if own else 0.0, 0.0), xycoords=where,
                        xytext=(0, -(TICK_PT + LABEL_PT + 16)), textcoords="offset points",
                        ha="left", va="top", fontsize=LEGEND_PT - 0.5, color="#444444",
                        annotation_clip=False, gid="left-out-note")
    except BaseException:
        if own:
            plt.close(ax.figure)
        raise
    return ax
