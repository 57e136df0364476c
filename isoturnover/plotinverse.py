r"""The figure of a reconstructed diet history.

:func:`plot_reconstruction` draws a :class:`~isoturnover.inverse.DietReconstruction` in two
panels sharing the time axis: above, the diet history as steps on the grid with its band
(the diet before the grid as a short dotted step left of the first edge), the switch times
as dashed vertical lines with their times, and, with ``sources``, a right axis reading the
fraction of source B (the end members drawn as grey lines); below, the samples (with their
sd) and the tissue curve the reconstructed diet implies
(:meth:`~isoturnover.inverse.DietReconstruction.tissue`).
Samples that average the tissue over a window (segments of hair, whiskers, feathers) are
drawn as bars over their formation intervals with the window averages the diet implies; for
a segment profile sampled once, a top axis reads the distance along the tissue
(:meth:`~isoturnover.inverse.SegmentGeometry.position`, the segments' geometry read
backwards), so a switch time can be read as a place to cut.
matplotlib is imported inside the function and no global style is changed; colours are the
Okabe–Ito palette (:mod:`isoturnover.plotkit`).
"""

from __future__ import annotations

import numpy as np

from .errors import DataError
from .inverse import DietReconstruction
from .plotkit import (
    GREY,
    LEGEND_PT,
    OKABE_ITO,
    TICK_PT,
    compact_number,
    finite_points,
    place_legend,
    placing_layout,
    style_axes,
    time_unit_word,
)

__all__ = ["plot_reconstruction"]

_DIET = OKABE_ITO["blue"]
_SWITCH = OKABE_ITO["vermillion"]
_TISSUE = OKABE_ITO["black"]
_DATA = OKABE_ITO["orange"]
_RULES = {"gcv": "GCV", "gcv_linearised": "GCV, pieces as df", "given": "given"}


def plot_reconstruction(result, axes=None, *, ylabel="δ (‰)", length_unit=None):
    """Reconstructed diet history with its band and switch times, and the tissue record.

    Parameters
    ----------
    result : DietReconstruction
        From :func:`isoturnover.reconstruct_diet`.
    axes : sequence of two matplotlib Axes, optional
        Axes for the diet and the tissue panels; a new two-panel figure (7 × 4.6 in) when
        None.
    ylabel : str, default="δ (‰)"
        Label of both δ axes (e.g. ``"δ¹³C (‰, VPDB)"``).
    length_unit : str, optional
        Unit of the segment distances (e.g. ``"mm"``), for the position axis of a segment
        profile.

    Returns
    -------
    tuple of matplotlib Axes
        (diet panel, tissue panel).

    Raises
    ------
    DataError
        When ``result`` is not a DietReconstruction or ``axes`` is not two Axes.
    """
    if not isinstance(result, DietReconstruction):
        raise DataError(f"'result' must be a DietReconstruction; got {type(result).__name__}")
    if axes is None:
        import matplotlib.pyplot as plt

        fig, axes = plt.subplots(2, 1, figsize=(7.0, 4.6), sharex=True,
                                 height_ratios=(3, 2), layout=placing_layout())
    else:
        axes = tuple(axes) if isinstance(axes, (list, tuple, np.ndarray)) else (axes,)
        if len(axes) != 2 or not all(hasattr(a, "plot") for a in axes):
            raise DataError("'axes' must be two matplotlib Axes (diet, tissue) or None; got "
                            f"{len(axes)} object(s)")
    ax_d, ax_t = axes
    e = result.edges
    step0 = e[1] - e[0]
    unit = time_unit_word(result.time_unit)

    # -- the diet ----------------------------------------------------------------------
    x = np.r_[e[0] - step0, e]                        # the diet before the grid leads
    est = np.r_[result.estimate, result.estimate[-1]]
    if np.all(np.isfinite(result.lower)):
        lo = np.r_[result.lower, result.lower[-1]]
        hi = np.r_[result.upper, result.upper[-1]]
        what = "data and kinetics" if result.kinetics_included else "data"
        ax_d.fill_between(x, lo, hi, step="post", color=_DIET, alpha=0.22, lw=0,
                          label=f"{result.level:.0%} band ({what})")
    ax_d.step(x[1:], est[1:], where="post", color=_DIET, lw=1.6, label="reconstructed diet")
    ax_d.step(x[:2], est[:2], where="post", color=_DIET, lw=1.2, ls=":",
              label="diet before the grid")
    if result.status == "ill_posed":
        ax_d.text(0.5, 0.5, f"ill-posed without regularisation\n(condition number "
                  f"{result.condition_number:.3g})", transform=ax_d.transAxes, ha="center",
                  va="center", fontsize=LEGEND_PT + 1, color=_SWITCH)
    for i, s in enumerate(result.switch_times):
        for ax in (ax_d, ax_t):
            ax.axvline(s, color=_SWITCH, ls="--", lw=0.9,
                       label="switch time" if (i == 0 and ax is ax_d) else None)
        ax_d.annotate(compact_number(s), (s, 1.0), xycoords=("data", "axes fraction"),
                      xytext=(2, -2), textcoords="offset points", ha="left", va="top",
                      fontsize=TICK_PT, color=_SWITCH)
    if result.sources is not None:
        a, b = result.sources
        for i, v in enumerate((a, b)):   # named in the legend: labels on the lines collide
            ax_d.axhline(v, color=GREY, lw=0.6, ls="-", alpha=0.6,
                         label=None if i else f"end members A = {compact_number(a)}, "
                                              f"B = {compact_number(b)}")
        sec = ax_d.secondary_yaxis("right", functions=(lambda d: (d - a) / (b - a),
                                                       lambda f: a + f * (b - a)))
        sec.set_ylabel("fraction of source B", fontsize=TICK_PT + 1)
        sec.tick_params(labelsize=TICK_PT)
    style_axes(ax_d, "", f"diet {ylabel}")
    ax_d.set_title(f"{result.penalty.replace('_', ' ')} reconstruction, strength "
                   f"{compact_number(result.strength)} "
                   f"({_RULES.get(result.strength_rule, result.strength_rule)})",
                   fontsize=TICK_PT + 1, loc="left")
    mid = np.r_[e[0] - step0 / 2, (e[:-1] + e[1:]) / 2]
    keep = finite_points((mid, result.estimate), (mid, result.lower), (mid, result.upper))
    place_legend(ax_d, first=("reconstructed", "diet before", "95", "switch", "end"),
                 keep=keep)

    # -- the tissue ----------------------------------------------------------------------
    sd = result.sigma
    wa, wb = result.windows
    wide = wb - wa > 0
    name = "segments" if result.profile is not None else "samples"
    if np.any(wide):
        ax_t.hlines(result.y[wide], wa[wide], wb[wide], color=_DATA, lw=3.2, alpha=0.6,
                    label=f"{name} over their formation time")
    if np.all(np.isfinite(sd)):
        ax_t.errorbar(result.t, result.y, yerr=sd, fmt="o", ms=3, color=_DATA, ecolor=_DATA,
                      elinewidth=0.7, capsize=0,
                      label=None if np.any(wide) else f"{name} (± sd)")
    else:
        ax_t.plot(result.t, result.y, "o", ms=3, color=_DATA,
                  label=None if np.any(wide) else name)
    if result.status != "ill_posed":
        tt = np.linspace(min(e[0], float(np.min(result.t))), e[-1], 600)
        point = ("formed at each instant (implied)" if np.any(wide)
                 else "tissue implied by the diet")
        ax_t.plot(tt, result.tissue(tt), color=GREY if np.any(wide) else _TISSUE,
                  lw=1.0 if np.any(wide) else 1.2, label=point)
        if np.any(wide):
            ax_t.hlines(result.fitted[wide], wa[wide], wb[wide], color=_TISSUE, lw=1.2,
                        label="segment means implied by the diet")
    style_axes(ax_t, f"time ({unit})", f"{'segment' if result.profile is not None else 'tissue'} "
                                       f"{ylabel}")
    keep = finite_points((result.t, result.y), (wa, result.y), (wb, result.y),
                         (result.t, result.fitted))
    place_legend(ax_t, first=("segments", "samples", "segment means", "tissue", "formed"),
                 keep=keep)
    ax_d.set_xlim(x[0], e[-1])
    geom = result.profile
    if geom is not None and geom.single_sampling:
        where = "base" if geom.origin == "base" else "tip"
        top = ax_d.secondary_xaxis("top", functions=(geom.position, geom.time_at))
        top.set_xlabel(f"distance from the {where} of the tissue"
                       + (f" ({length_unit})" if length_unit else ""), fontsize=TICK_PT + 1)
        top.tick_params(labelsize=TICK_PT)
    for ax in (ax_d, ax_t):
        ax.spines[["top"]].set_visible(geom is not None and ax is ax_d
                                       and geom.single_sampling)
        if result.sources is None:
            ax.spines[["right"]].set_visible(False)
    return ax_d, ax_t
