r"""The shared pieces of the package's figures: palette, print sizes, labels, legend placement.

:mod:`isoturnover.plotting` draws the figures; this module holds what its panels share, so
each panel reads the same colours, font sizes and axis labels. Nothing here imports
matplotlib at module level, and nothing changes global style (no ``rcParams`` writes): fonts
and colours are set on each artist.

* Colours: the Okabe–Ito palette, distinguishable under the common colour-vision
  deficiencies (Okabe & Ito 2008, *Color Universal Design (CUD): how to make figures and
  presentations that are friendly to colorblind people*).
* Sizes: one journal column 3.5 × 2.6 in, two columns 7 × 2.6 in; axis labels 8 pt, tick
  labels and legends 7 pt.
* Labels: δ notation with the isotope's international scale (Coplen 2011, Rapid Commun.
  Mass Spectrom. 25:2538–2560) and the data's time unit.
* Legends and text boxes are kept off the data points (:func:`keep_clear`).
"""
from __future__ import annotations

import math
import re

import numpy as np

from .errors import DataError

__all__ = [
    "OKABE_ITO", "GREY", "FLAG", "SINGLE", "DOUBLE", "LABEL_PT", "TICK_PT", "LEGEND_PT",
    "compact_number", "series_color", "new_axes", "style_axes", "place_legend",
    "finite_points", "keep_clear", "check_fit", "time_unit_word", "delta_label",
    "tissue_label", "time_label", "fine_grid", "model_name",
]

#: Okabe–Ito colour-blind-safe palette (Okabe & Ito 2008), name → hex.
OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}
# order for series of categories (yellow last: weak on white)
_CYCLE = ("blue", "orange", "bluish_green", "reddish_purple", "sky_blue", "vermillion",
          "black", "yellow")
#: Grey of guide lines (diet switches, ±2/±3 residual guides).
GREY = "#777777"
#: Colour of flagged points (drawn with their own marker as well).
FLAG = OKABE_ITO["vermillion"]

SINGLE = (3.5, 2.6)  # in: one journal column
DOUBLE = (7.0, 2.6)  # in: two columns
LABEL_PT = 8  # pt: axis labels
TICK_PT = 7  # pt: tick labels
LEGEND_PT = 7  # pt: legends and text boxes
_SUP = str.maketrans("0123456789", "⁰¹²³⁴⁵⁶⁷⁸⁹")


def compact_number(x, digits=3):
    """Compact number for labels: ``digits`` significant digits, true minus sign.

    Parameters
    ----------
    x : float
        The number.
    digits : int, default=3
        Significant digits.

    Returns
    -------
    str
        From 10³ up to 10⁶ the rounded value with thousands separators (``"1,230"``), else
        the ``g`` format (with 3 digits: an exponent below 10⁻⁴ and from 10⁶ on); ``"−"``
        (U+2212) for minus; ``"∞"``/``"−∞"`` for infinities and ``"—"`` for NaN.
    """
    x = float(x)
    if not math.isfinite(x):
        return "∞" if x > 0 else ("−∞" if x < 0 else "—")
    r = round(x, digits - 1 - int(math.floor(math.log10(abs(x))))) if x != 0 else 0.0
    out = f"{r:,.0f}" if 1e3 <= abs(r) < 1e6 else f"{x:.{digits}g}"
    return out.replace("-", "−")


def series_color(i):
    """Okabe–Ito colour of the ``i``-th series (blue, orange, bluish green, …, yellow last).

    Parameters
    ----------
    i : int
        Index of the series; the eight colours repeat from the ninth on.

    Returns
    -------
    str
        Hex colour from :data:`OKABE_ITO`.
    """
    return OKABE_ITO[_CYCLE[i % len(_CYCLE)]]


def new_axes(ax, size=SINGLE):
    """The Axes to draw on: ``ax`` itself, or a new figure of print size.

    Parameters
    ----------
    ax : matplotlib Axes or None
        Returned as given when not ``None``.
    size : tuple of float, default=SINGLE
        Figure width and height in inches for a new figure (constrained layout).

    Returns
    -------
    matplotlib Axes
        ``ax``, or the Axes of a new figure.

    Raises
    ------
    DataError
        When ``ax`` is neither ``None`` nor an Axes (no ``plot`` or ``figure``).
    """
    if ax is not None:
        if not hasattr(ax, "plot") or not hasattr(ax, "figure"):
            raise DataError(f"'ax' must be a matplotlib Axes or None; got {type(ax).__name__}")
        return ax
    import matplotlib.pyplot as plt

    _, ax = plt.subplots(figsize=size, layout="constrained")
    return ax


def style_axes(ax, xlabel, ylabel):
    """Set the axis labels (:data:`LABEL_PT`) and tick-label size (:data:`TICK_PT`).

    Parameters
    ----------
    ax : matplotlib Axes
        The Axes to label.
    xlabel, ylabel : str
        Axis labels.
    """
    ax.set_xlabel(xlabel, fontsize=LABEL_PT)
    ax.set_ylabel(ylabel, fontsize=LABEL_PT)
    ax.tick_params(labelsize=TICK_PT)


def place_legend(ax, first=(), keep=None, **kw):
    """Legend at the emptiest place; entries whose label starts with one of ``first`` lead.

    Parameters
    ----------
    ax : matplotlib Axes
        The Axes whose labelled artists go in the legend.
    first : sequence of str, default=()
        Label prefixes whose entries come first, in this order; the rest keep their order.
    keep : array_like, shape (n, 2), optional
        Points (data coordinates) the legend must not cover; see :func:`keep_clear`.
    **kw
        Passed to ``ax.legend``; defaults: ``loc="best"``, :data:`LEGEND_PT` text, compact
        spacing.

    Returns
    -------
    matplotlib Legend or None
        The legend; ``None`` when no artist has a label.
    """
    handles, labels = ax.get_legend_handles_labels()
    if not handles:
        return None

    def rank(i):
        for j, p in enumerate(first):
            if labels[i].startswith(p):
                return (j, i)
        return (len(first), i)

    order = sorted(range(len(labels)), key=rank)
    handles = [handles[i] for i in order]
    labels = [labels[i] for i in order]
    kw.setdefault("loc", "best")
    kw.setdefault("framealpha", 0.85)
    kw.setdefault("fontsize", LEGEND_PT)
    kw.setdefault("title_fontsize", LEGEND_PT)
    kw.setdefault("labelspacing", 0.3)
    kw.setdefault("borderpad", 0.35)
    kw.setdefault("handlelength", 1.6)
    kw.setdefault("handletextpad", 0.5)
    leg = ax.legend(handles, labels, **kw)
    if keep is not None:
        keep_clear(ax, [leg], keep)
    return leg


def finite_points(*pairs):
    """Stack (x, y) pairs into finite points of shape (n, 2).

    Parameters
    ----------
    *pairs : tuple of array_like
        ``(x, y)`` pairs of equal size (flattened).

    Returns
    -------
    numpy.ndarray
        Shape (n, 2): every point of every pair with both coordinates finite.
    """
    parts = [np.column_stack([np.asarray(x, dtype=float).ravel(),
                              np.asarray(y, dtype=float).ravel()]) for x, y in pairs]
    xy = np.concatenate(parts) if parts else np.empty((0, 2))
    return xy[np.all(np.isfinite(xy), axis=1)]


_LOCS = ("upper right", "upper left", "lower left", "lower right", "center right",
         "center left", "upper center", "lower center")


def _box_at(loc, w, h, ab, pad):
    """Display box (x0, y0, x1, y1) of a w × h legend placed at ``loc`` inside ``ab``."""
    v, hz = loc.split()
    if hz == "left":
        x0 = ab.x0 + pad
    elif hz == "right":
        x0 = ab.x1 - pad - w
    else:
        x0 = (ab.x0 + ab.x1 - w) / 2
    if v == "upper":
        y0 = ab.y1 - pad - h
    elif v == "lower":
        y0 = ab.y0 + pad
    else:
        y0 = (ab.y0 + ab.y1 - h) / 2
    return x0, y0, x0 + w, y0 + h


def _hits(pts, box, pad=3.0):
    x0, y0, x1, y1 = box
    under_x = (pts[:, 0] >= x0 - pad) & (pts[:, 0] <= x1 + pad)
    return under_x, under_x & (pts[:, 1] >= y0 - pad) & (pts[:, 1] <= y1 + pad)


def _overlap(a, b, pad=3.0):
    """Do two display boxes (x0, y0, x1, y1) overlap (within ``pad`` pixels)?"""
    return a[0] < b[2] + pad and b[0] < a[2] + pad and a[1] < b[3] + pad and b[1] < a[3] + pad


def keep_clear(ax, boxes, xy, tries=4):
    """Keep legends and text boxes inside the axes off the points ``xy`` (data coordinates).

    The figure is laid out without rendering. A legend that covers points moves to the first
    free place among the usual positions; when there is none, the y range is widened on the
    side that needs least room, just enough for the box to sit beyond the points, and the
    legend is pinned there. A text box stays where it is and the y range widens on its side.
    A legend taller than 60 % of the axes goes outside, to the right.

    Parameters
    ----------
    ax : matplotlib Axes
        The Axes holding the boxes.
    boxes : sequence of matplotlib Legend or Text
        Boxes inside the axes (``None`` entries are skipped); a legend also stays off the
        other boxes.
    xy : array_like, shape (n, 2)
        Points in data coordinates.
    tries : int, default=4
        Rounds of layout and moving at most.
    """
    xy = np.asarray(xy, dtype=float).reshape(-1, 2)
    boxes = [b for b in boxes if b is not None]
    if xy.size == 0 or not boxes:
        return
    fig = ax.figure
    for _ in range(tries):
        fig.draw_without_rendering()
        changed = False
        for box in boxes:
            ab = ax.get_window_extent()
            pts = ax.transData.transform(xy)
            bb = box.get_window_extent()
            cur = (bb.x0, bb.y0, bb.x1, bb.y1)
            is_legend = hasattr(box, "set_loc")
            # a legend must not cover the other boxes (a text box) either
            others = [o.get_window_extent() for o in boxes if o is not box] if is_legend \
                else []
            others = [(o.x0, o.y0, o.x1, o.y1) for o in others]
            if not _hits(pts, cur)[1].any() and not any(_overlap(cur, o) for o in others):
                continue
            hfrac = (bb.height + 9.0) / ab.height
            if is_legend and hfrac > 0.6:
                box.set_loc("upper left")
                box.set_bbox_to_anchor((1.02, 1.0), transform=ax.transAxes)
                changed = True
                continue
            if is_legend:
                pad = box.borderaxespad * box.prop.get_size_in_points() * fig.dpi / 72.0
                free = [loc for loc in _LOCS
                        if not _hits(pts, _box_at(loc, bb.width, bb.height, ab, pad))[1].any()
                        and not any(_overlap(_box_at(loc, bb.width, bb.height, ab, pad), o)
                                    for o in others)]
                if free:
                    box.set_loc(free[0])
                    changed = True
                    continue
                options = [(loc, _box_at(loc, bb.width, bb.height, ab, pad))
                           for loc in _LOCS[:4]]
            else:
                top = (bb.y0 + bb.y1) / 2 > (ab.y0 + ab.y1) / 2
                options = [("upper" if top else "lower", cur)]
            y0, y1 = ax.get_ylim()
            best = None
            for loc, bx in options:
                under_x, _ = _hits(pts, bx)
                ys = xy[under_x, 1]
                if loc.startswith("upper"):
                    new = (y0, y0 + (float(np.max(ys)) - y0) / (1.0 - hfrac))
                else:
                    new = (y1 - (y1 - float(np.min(ys))) / (1.0 - hfrac), y1)
                if best is None or new[1] - new[0] < best[1][1] - best[1][0]:
                    best = (loc, new)
            ax.set_ylim(*best[1])
            if is_legend:
                box.set_loc(best[0])
            changed = True
        if not changed:
            return


def check_fit(fit, fname):
    """The fit itself when it is a TurnoverFit.

    Parameters
    ----------
    fit : object
        The argument to check.
    fname : str
        Name of the calling function, for the message.

    Returns
    -------
    TurnoverFit
        ``fit``.

    Raises
    ------
    DataError
        When ``fit`` is not a TurnoverFit.
    """
    from .results import TurnoverFit

    if not isinstance(fit, TurnoverFit):
        raise DataError(f"{fname}: 'fit' must be a TurnoverFit (from TurnoverModel.fit); got "
                        f"{type(fit).__name__}")
    return fit


def time_unit_word(fit_or_unit):
    """Word for a time unit (``"d"`` → ``"days"``), of a code or of a fit's ``time_unit``.

    Parameters
    ----------
    fit_or_unit : str or TurnoverFit
        A time-unit code, or a fit whose ``time_unit`` is used.

    Returns
    -------
    str
        :func:`isoturnover.conventions.unit_word` of the code.
    """
    from .conventions import unit_word as _unit_word

    u = fit_or_unit if isinstance(fit_or_unit, str) else fit_or_unit.time_unit
    return _unit_word(u)


def delta_label(isotope) -> str:
    """Axis label in δ notation with the isotope's scale, e.g. ``"δ¹³C (‰, VPDB)"``.

    Parameters
    ----------
    isotope : str or None
        Isotope code (``"d13C"``, ``"d15N"``, ``"d34S"``, ``"d2H"``, ``"d18O"``). ``None``
        gives the generic ``"δ (‰)"``.

    Returns
    -------
    str
        The δ symbol with the isotope as superscript mass number and element, then ‰ and
        the international scale of its reference ratio (VPDB, AIR, VCDT, VSMOW).

    Raises
    ------
    DataError
        When ``isotope`` is not a known isotope code.

    Examples
    --------
    >>> delta_label("d15N")
    'δ¹⁵N (‰, AIR)'
    >>> delta_label(None)
    'δ (‰)'
    """
    if isotope is None:
        return "δ (‰)"
    from .isotopes import ISOTOPES

    code = str(isotope)
    if code not in ISOTOPES:
        raise DataError(f"'isotope' must be one of {', '.join(map(repr, ISOTOPES))} or None; "
                        f"got {isotope!r}")
    m = re.fullmatch(r"d(\d+)([A-Z][a-z]?)", code)
    name = f"δ{m.group(1).translate(_SUP)}{m.group(2)}" if m else code
    return f"{name} (‰, {ISOTOPES[code].scale})"


def _isotope_of(fit):
    iso_ = getattr(fit.model, "isotope", None) or fit.data_info.get("isotope")
    if iso_ is None and fit.model.diet is not None:
        iso_ = getattr(fit.model.diet, "isotope", None)
    from .isotopes import ISOTOPES

    return iso_ if iso_ in ISOTOPES else None


def tissue_label(fit):
    """y-axis label of a fit: tissue and δ with scale, e.g. ``"Plasma δ¹³C (‰, VPDB)"``.

    Parameters
    ----------
    fit : TurnoverFit
        The isotope comes from the model, the data or the diet history (generic δ when
        none is known); the tissue from the data (``"Tissue"`` when none).

    Returns
    -------
    str
        The label (underscores of the tissue name as spaces, first letter capital).
    """
    lab = delta_label(_isotope_of(fit))
    tissue = fit.data_info.get("tissue")
    name = str(tissue).replace("_", " ")
    return f"{name[:1].upper() + name[1:]} {lab}" if tissue else f"Tissue {lab}"


def time_label(fit):
    """x-axis label of a fit: ``"Time since diet switch (days)"`` or ``"Time (days)"``.

    Parameters
    ----------
    fit : TurnoverFit
        "since (first) diet switch" when its first switch is at t = 0.

    Returns
    -------
    str
        The label with the word for the fit's time unit.
    """
    s = np.asarray(fit.kinetics.switch_times, dtype=float)
    unit = time_unit_word(fit)
    if s.size and s[0] == 0.0:
        what = "diet switch" if s.size == 1 else "first diet switch"
        return f"Time since {what} ({unit})"
    return f"Time ({unit})"


def fine_grid(fit, lo, hi, n=400):
    """Times for a smooth curve: an even grid plus the switch times (and switch + lag).

    Parameters
    ----------
    fit : TurnoverFit
        Supplies the switch times and the fitted ``lag`` (0 without one).
    lo, hi : float
        Ends of the grid, in the data's time unit.
    n : int, default=400
        Points of the even grid.

    Returns
    -------
    numpy.ndarray
        Sorted unique times: the grid with the kinks of the curve in [lo, hi] added.
    """
    g = np.linspace(lo, hi, n)
    kin = fit.kinetics
    lag = fit.values.get("lag", 0.0)
    extra = np.concatenate([kin.switch_times, kin.switch_times + lag])
    extra = extra[(extra >= lo) & (extra <= hi)]
    return np.union1d(g, extra)


def model_name(fit):
    """Short name of a fit's model for legends: ``"chain"``, ``"1 pool"``, ``"2 pools"``.

    Parameters
    ----------
    fit : TurnoverFit
        The fit whose kinetics are named.

    Returns
    -------
    str
        The name.
    """
    kin = fit.kinetics
    if kin.structure == "chain":
        return "chain"
    return f"{kin.pools} pool{'s' if kin.pools > 1 else ''}"
