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
* Labels in titles and on ticks write isotope codes in the same δ notation
  (:func:`delta_name`, :func:`series_title`).
* Legends and text boxes are kept off the data points (:func:`keep_clear`) without drawing
  the figure: box sizes come from text metrics and points go through ``ax.transData``; on a
  figure made here (:func:`placing_layout`) this happens once the layout is fixed, when the
  figure is saved or shown, so each figure is drawn once.
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
    "tissue_label", "time_label", "fine_grid", "model_name", "delta_name", "series_title",
    "placing_layout", "measured_margins", "MARGIN_PAD",
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


def new_axes(ax, size=SINGLE, measured=False):
    """The Axes to draw on: ``ax`` itself, or a new figure of print size.

    Parameters
    ----------
    ax : matplotlib Axes or None
        Returned as given when not ``None``.
    size : tuple of float, default=SINGLE
        Figure width and height in inches for a new figure (a layout that places the
        legends when the figure is drawn: :func:`placing_layout`).
    measured : bool, default=False
        Margins of a new figure measured from its text (:func:`measured_margins`) instead
        of matplotlib's constrained layout.

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

    # measured margins start from a guess near the usual ones (inches: left 0.45, right
    # 0.06, bottom 0.42, top 0.06), so one measurement usually fixes them
    kw = {}
    if measured:
        kw["gridspec_kw"] = dict(left=0.45 / size[0], right=1 - 0.06 / size[0],
                                 bottom=0.42 / size[1], top=1 - 0.06 / size[1])
    _, ax = plt.subplots(figsize=size, layout=placing_layout(measured), **kw)
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


def _root_figure(ax):
    fig = ax.figure
    get = getattr(fig, "get_figure", None)
    root = get(root=True) if get is not None else None
    return root if root is not None else fig


_ENGINE = []  # the engine class, made on first use (matplotlib is imported late)


def _engine_class():
    if _ENGINE:
        return _ENGINE[0]
    from matplotlib.layout_engine import ConstrainedLayoutEngine

    class PlacingLayoutEngine(ConstrainedLayoutEngine):
        """Constrained or measured-margin layout, then the placements of :func:`keep_clear`."""

        def __init__(self, *, measured=False, **kw):
            super().__init__(**kw)
            self.pending = []
            self.measured = bool(measured)
            self._laid_out = False

        def _lay_out(self, fig):
            if self.measured and measured_margins(fig):
                return None
            return super().execute(fig)

        def execute(self, fig):
            """Lay out ``fig``, then place its legends and text boxes.

            Parameters
            ----------
            fig : matplotlib Figure
                The figure being drawn.
            """
            # savefig draws twice (once to lay out, once to render); a figure that has not
            # changed since it was last laid out and drawn keeps its layout
            if self._laid_out and not fig.stale and not self.pending:
                return None
            self._laid_out = True
            out = self._lay_out(fig)
            if self.pending:
                todo, self.pending = self.pending, []
                moved = False
                for ax, boxes, xy, tries, fixed in todo:
                    moved |= _place(ax, boxes, xy, tries, fixed)
                if moved:  # a wider y range or an outside legend changes the margins
                    out = self._lay_out(fig)
            return out

    PlacingLayoutEngine.__module__ = __name__
    PlacingLayoutEngine.__qualname__ = "PlacingLayoutEngine"
    _ENGINE.append(PlacingLayoutEngine)
    return PlacingLayoutEngine


def __getattr__(name):
    # the engine class by name, for pickled figures (made on first use)
    if name == "PlacingLayoutEngine":
        return _engine_class()
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def placing_layout(measured=False):
    """Layout engine that also places the legends and text boxes of its figure.

    :func:`keep_clear` on a figure with this layout engine only records its request; the
    engine carries it out when the figure is laid out for drawing (``savefig``, ``show``,
    ``draw_without_rendering``), after the axes are placed, so the figure is drawn once.
    When a placement widens a y range or moves a legend outside the axes, the layout is
    computed again (not the drawing). A figure that has not changed since it was last laid
    out and drawn (``fig.stale`` false) keeps its layout: ``savefig``, which draws once to
    lay out and once to render, computes the layout once.

    Parameters
    ----------
    measured : bool, default=False
        ``False``: matplotlib's constrained layout places the axes. ``True``: margins
        measured once from the text around each axes (:func:`measured_margins`), several
        times cheaper than the constrained layout, which walks every artist of the figure
        four times; figures whose axes are not all on one grid fall back to the
        constrained layout.

    Returns
    -------
    matplotlib.layout_engine.ConstrainedLayoutEngine
        A new engine (of the subclass ``PlacingLayoutEngine``), for
        ``plt.figure(layout=placing_layout())``.
    """
    return _engine_class()(measured=measured)


#: Space (inches) between the text of an axes and the figure's edge or the next axes.
MARGIN_PAD = 4.0 / 72.0


def _grid_of(fig):
    """The one grid (GridSpec) every axes of ``fig`` sits on, or None."""
    grid = None
    for ax in fig.axes:
        ss = ax.get_subplotspec() if hasattr(ax, "get_subplotspec") else None
        if ss is None or ss.get_topmost_subplotspec() is not ss:
            return None
        g = ss.get_gridspec()
        if grid is None:
            grid = g
        elif g is not grid:
            return None
    return grid


def _axes_text_sides(ax):
    """Inches of text (tick labels, axis labels, titles, legend) beyond each side of ``ax``.

    Returns (left, right, bottom, top): tick labels and axis labels from the axes'
    own extents (``Axis.get_tightbbox`` for layout, which ignores the length of an axis
    label), titles only upwards, a legend in every direction.
    """
    dpi = _root_figure(ax).dpi
    ab = ax.get_window_extent()
    xs0, xs1, ys0, ys1 = [ab.x0], [ab.x1], [ab.y0], [ab.y1]
    for axis in (ax.xaxis, ax.yaxis):
        bb = axis.get_tightbbox(for_layout_only=True)
        if bb is not None and np.all(np.isfinite(bb.extents)):
            xs0.append(bb.x0)
            xs1.append(bb.x1)
            ys0.append(bb.y0)
            ys1.append(bb.y1)
    from matplotlib.text import Text

    texts = set(map(id, ax.texts))
    for child in ax.get_children():  # the three titles (not the texts in the data)
        if isinstance(child, Text) and id(child) not in texts and child.get_visible() \
                and child.get_text():
            ys1.append(child.get_window_extent().y1)
    leg = ax.get_legend()
    if leg is not None and leg.get_visible():
        bb = leg.get_window_extent()
        xs0.append(bb.x0)
        xs1.append(bb.x1)
        ys0.append(bb.y0)
        ys1.append(bb.y1)
    return ((ab.x0 - min(xs0)) / dpi, (max(xs1) - ab.x1) / dpi,
            (ab.y0 - min(ys0)) / dpi, (max(ys1) - ab.y1) / dpi)


def _tick_locations(fig):
    """The major tick locations of every axis of ``fig`` (they follow the axes' size)."""
    return [tuple(np.round(axis.get_majorticklocs(), 12)) for ax in fig.axes
            for axis in (ax.xaxis, ax.yaxis)]


def _solve_margins(fig, grid):
    """Set ``grid``'s margins and spacing from the text around its axes; False if no room."""
    nrows, ncols = grid.get_geometry()
    width, height = fig.get_size_inches()
    dpi = fig.dpi
    left, right = [0.0] * (ncols + 1), [0.0] * (ncols + 1)  # text left of col j / right
    below, above = [0.0] * (nrows + 1), [0.0] * (nrows + 1)
    for ax in fig.axes:
        if not ax.get_visible():
            continue
        ss = ax.get_subplotspec()
        lt, rt, bt, tp = _axes_text_sides(ax)
        rows, cols = ss.rowspan, ss.colspan
        left[cols.start] = max(left[cols.start], lt)
        right[cols.stop] = max(right[cols.stop], rt)
        above[rows.start] = max(above[rows.start], tp)
        below[rows.stop] = max(below[rows.stop], bt)
    # text of the figure itself (the suptitle): above or below the grid
    top_text = bottom_text = 0.0
    for t in fig.texts:
        if not (t.get_visible() and t.get_text()):
            continue
        bb = t.get_window_extent()
        if (bb.y0 + bb.y1) / 2 > 0.5 * height * dpi:
            top_text = max(top_text, height - bb.y0 / dpi)
        else:
            bottom_text = max(bottom_text, bb.y1 / dpi)
    pad = MARGIN_PAD
    lm = left[0] + pad
    rm = right[ncols] + pad
    tm = above[0] + pad + top_text
    bm = below[nrows] + pad + bottom_text
    wsep = max([right[j] + left[j] + pad for j in range(1, ncols)], default=0.0)
    hsep = max([below[i] + above[i] + pad for i in range(1, nrows)], default=0.0)
    cell_w = (width - lm - rm - (ncols - 1) * wsep) / ncols
    cell_h = (height - tm - bm - (nrows - 1) * hsep) / nrows
    if cell_w < 0.25 * width / ncols or cell_h < 0.25 * height / nrows:
        return False  # too little room: the constrained layout decides
    grid.update(left=lm / width, right=1.0 - rm / width, bottom=bm / height,
                top=1.0 - tm / height, wspace=wsep / cell_w, hspace=hsep / cell_h)
    for ax in fig.axes:
        ax.set_subplotspec(ax.get_subplotspec())  # the axes take their new place
    return True


def measured_margins(fig, rounds=3):
    """Place the axes of ``fig`` on their grid with margins measured from their text.

    Each axes' tick labels, axis labels, titles and legend are measured from the text
    metrics of the figure's renderer (nothing is drawn); the grid's outer margins and the
    space between its rows and columns are set so that this text fits, with
    :data:`MARGIN_PAD` to spare, and the suptitle above. Tick positions depend on the axes'
    size, so this is done again (up to ``rounds`` times) while the new sizes change the
    ticks of any axis.

    Parameters
    ----------
    fig : matplotlib Figure
        A figure whose axes all sit on one GridSpec (subplots, ``add_gridspec``, twins).
    rounds : int, default=3
        Measurements at most.

    Returns
    -------
    bool
        True when the axes were placed; False (nothing changed) when they are not all on
        one grid or the text leaves too little room for them.
    """
    grid = _grid_of(fig)
    if grid is None or not fig.axes:
        return False
    for i in range(rounds):
        ticks = _tick_locations(fig)
        if not _solve_margins(fig, grid):
            return i > 0
        # the axes' new size keeps the ticks that were measured: done
        if _tick_locations(fig) == ticks:
            break
    return True


def keep_clear(ax, boxes, xy, tries=4, *, fixed=None):
    """Keep legends and text boxes inside the axes off the points ``xy`` (data coordinates).

    A legend that covers points moves to the first free place among the usual positions;
    when there is none, the y range is widened on the side that needs least room, just
    enough for the box to sit beyond the points, and the legend is pinned there. A text box
    stays where it is and the y range widens on its side. A legend taller than 60 % of the
    axes goes outside, to the right.

    Nothing is drawn to find the places: box sizes come from the text metrics of the
    figure's renderer and points go to display coordinates through ``ax.transData``. On a
    figure made by this package (:func:`placing_layout`) the placement waits until the
    figure is laid out for drawing, so a figure is drawn once, when it is saved or shown;
    on another figure it happens at once, after one run of the figure's layout engine (if
    it has one).

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
        Rounds of moving at most.
    fixed : array_like, shape (m, 2), optional
        Marks at an edge of the axes: x in data coordinates, y in axes coordinates (0–1).
        Legends stay off them too; a wider y range does not move them.
    """
    xy = np.asarray(xy, dtype=float).reshape(-1, 2)
    fixed = np.empty((0, 2)) if fixed is None else \
        np.asarray(fixed, dtype=float).reshape(-1, 2)
    boxes = [b for b in boxes if b is not None]
    if xy.size == 0 or not boxes:
        return
    fig = _root_figure(ax)
    engine = fig.get_layout_engine()
    if hasattr(engine, "pending"):
        engine.pending.append((ax, boxes, xy, tries, fixed))
        return
    if engine is not None:
        engine.execute(fig)
    _place(ax, boxes, xy, tries, fixed)


def _legend_loc(box):
    """Location string of a legend placed inside its axes at a standard place, else None."""
    from matplotlib.legend import Legend

    code = getattr(box, "_loc", None)
    if getattr(box, "_bbox_to_anchor", None) is not None:
        return None
    for name, c in Legend.codes.items():
        if c == code and name in _LOCS:
            return name
    return None


def _place(ax, boxes, xy, tries, fixed):
    """Move ``boxes`` off ``xy`` (see :func:`keep_clear`); True when the layout changes."""
    fig = _root_figure(ax)
    ab = ax.get_window_extent()
    if ab.width <= 0 or ab.height <= 0:
        return False
    # sizes and places of the boxes, in display coordinates; a legend's place is computed
    # from its location (the legend itself is placed only at drawing)
    info = []
    for box in boxes:
        # sizes from the text metrics of the figure's renderer (matplotlib's own: nothing
        # is drawn)
        bb = box.get_window_extent()
        is_legend = hasattr(box, "set_loc")
        pad = (box.borderaxespad * box.prop.get_size_in_points() * fig.dpi / 72.0
               if is_legend else 0.0)
        loc = _legend_loc(box) if is_legend else None
        cur = (_box_at(loc, bb.width, bb.height, ab, pad) if loc is not None
               else (bb.x0, bb.y0, bb.x1, bb.y1))
        info.append({"box": box, "legend": is_legend, "w": bb.width, "h": bb.height,
                     "pad": pad, "cur": cur, "loc": loc})
    layout_changed = False
    if fixed.size:
        import matplotlib.transforms as mtransforms

        marks = mtransforms.blended_transform_factory(ax.transData, ax.transAxes) \
            .transform(fixed)
    else:
        marks = np.empty((0, 2))

    def covers(pts, bx, legend):
        return _hits(pts, bx)[1].any() or (legend and _hits(marks, bx)[1].any())

    for _ in range(tries):
        changed = False
        pts = ax.transData.transform(xy)
        for it in info:
            box = it["box"]
            if it.get("outside"):
                continue
            others = [o["cur"] for o in info if o is not it and not o.get("outside")] \
                if it["legend"] else []
            cur = it["cur"]
            if not covers(pts, cur, it["legend"]) and not any(_overlap(cur, o) for o in others):
                continue
            hfrac = (it["h"] + 9.0) / ab.height
            w, h, pad = it["w"], it["h"], it["pad"]
            if it["legend"] and hfrac > 0.6:
                box.set_loc("upper left")
                box.set_bbox_to_anchor((1.02, 1.0), transform=ax.transAxes)
                it["outside"] = True
                changed = layout_changed = True
                continue
            if it["legend"]:
                free = [loc for loc in _LOCS
                        if not covers(pts, _box_at(loc, w, h, ab, pad), True)
                        and not any(_overlap(_box_at(loc, w, h, ab, pad), o) for o in others)]
                if free:
                    box.set_loc(free[0])
                    it["loc"], it["cur"] = free[0], _box_at(free[0], w, h, ab, pad)
                    changed = True
                    continue
                options = [(loc, _box_at(loc, w, h, ab, pad)) for loc in _LOCS[:4]]
            else:
                top = (cur[1] + cur[3]) / 2 > (ab.y0 + ab.y1) / 2
                options = [("upper" if top else "lower", cur)]
            y0, y1 = ax.get_ylim()
            best = None
            for loc, bx in options:
                under_x, _ = _hits(pts, bx)
                ys = xy[under_x, 1]
                if ys.size == 0:  # blocked by another box only: no range helps
                    continue
                # the points under the box must end up beyond its edge (axes fraction),
                # with 4 px to spare
                if loc.startswith("upper"):
                    edge = max((bx[1] - 4.0 - ab.y0) / ab.height, 0.05)
                    new = (y0, y0 + (float(np.max(ys)) - y0) / edge)
                else:
                    edge = min((bx[3] + 4.0 - ab.y0) / ab.height, 0.95)
                    new = (y1 - (y1 - float(np.min(ys))) / (1.0 - edge), y1)
                if best is None or new[1] - new[0] < best[1][1] - best[1][0]:
                    best = (loc, new)
            if best is None:
                continue
            ax.set_ylim(*best[1])
            if it["legend"]:
                box.set_loc(best[0])
                it["loc"], it["cur"] = best[0], _box_at(best[0], w, h, ab, pad)
            changed = layout_changed = True
            break  # the points moved: look again at every box
        if not changed:
            break
    return layout_changed


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
    return f"{delta_name(code)} (‰, {ISOTOPES[code].scale})"


_CODE = re.compile(r"(?<![A-Za-z0-9])d(\d{1,2})([A-Z][a-z]?)(?![A-Za-z0-9])")


def delta_name(isotope) -> str:
    """δ name of an isotope code without unit or scale: ``"d13C"`` → ``"δ¹³C"``.

    Parameters
    ----------
    isotope : str
        Isotope code, ``d`` + mass number + element (``"d13C"``, ``"d15N"``, ``"d2H"``…).

    Returns
    -------
    str
        The δ symbol, the mass number as superscript and the element (Coplen 2011
        notation); a string that is not such a code is returned unchanged.

    Examples
    --------
    >>> delta_name("d15N")
    'δ¹⁵N'
    """
    code = str(isotope)
    m = _CODE.fullmatch(code)
    return f"δ{m.group(1).translate(_SUP)}{m.group(2)}" if m else code


def series_title(text) -> str:
    """A series name or fit label as shown in figures: δ names, spaces for underscores.

    ``"G01 / red_cells / d13C: 1 pool"`` → ``"G01 / red cells / δ¹³C: 1 pool"``, so titles,
    tick labels and axes use the same δ notation (:func:`delta_name`).

    Parameters
    ----------
    text : object
        The name or label (converted with ``str``).

    Returns
    -------
    str
        The text with each isotope code of :mod:`isoturnover.isotopes` written as a δ name
        and underscores as spaces.
    """
    from .isotopes import ISOTOPES

    def sub(m):
        return delta_name(m.group(0)) if m.group(0) in ISOTOPES else m.group(0)

    return _CODE.sub(sub, str(text)).replace("_", " ")


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
