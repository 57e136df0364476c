r"""The study at a glance: half-lives with intervals of every series in one forest plot.

:func:`plot_study` draws one row per series (grouped by part, tissue and isotope, with a
bold header row per group), each pool's half-life as a marker and its interval as a line,
on a logarithmic time axis. A bound the data do not close (status ``open``) is drawn as an
arrow running to the edge of the axis, never as a number. Series timed in different units
(days, hours) are drawn in separate panels, each axis naming its unit: no axis mixes them.
With many series the rows are split into side-by-side panels of at most ``max_rows`` rows
and the row height and font shrink, so 200 series fit one page.

Like :mod:`isoturnover.plotting`, matplotlib is imported inside the function and no global
style is changed; colours are the Okabe–Ito palette (Okabe & Ito 2008, *Color Universal
Design*), and pools differ by marker shape as well as by position, not by colour alone.
"""

from __future__ import annotations

import math
import re

import numpy as np
import pandas as pd

from .errors import DataError
from .plotkit import DOUBLE, GREY, LABEL_PT, LEGEND_PT, TICK_PT, series_color, time_unit_word

__all__ = ["plot_study", "STUDY_COLUMNS", "pretty_isotopes"]

#: Columns :func:`plot_study` reads (one row per series and pool).
STUDY_COLUMNS = ("group", "label", "pool", "half_life", "lower", "upper", "lower_status",
                 "upper_status", "time_unit")

_MARKERS = ("o", "s", "^", "D")
_SUP = str.maketrans("0123456789", "⁰¹²³⁴⁵⁶⁷⁸⁹")
_CODE = re.compile(r"(?<![A-Za-z0-9])d(\d{1,2})([A-Z][a-z]?)(?![A-Za-z0-9])")  # d13C
_MAX_PANELS = 4
_MAX_HEIGHT = 9.0  # in: one page with a caption


def pretty_isotopes(text) -> str:
    """Isotope codes in a label written in δ notation: ``"goats d13C"`` → ``"goats δ¹³C"``.

    Parameters
    ----------
    text : str
        A label; the codes of the known isotope systems standing as words (``d13C``,
        ``d15N``, ``d2H``, ...: :data:`isoturnover.isotopes.ISOTOPES`) are rewritten with a
        δ and a superscript mass number; the rest is kept.

    Returns
    -------
    str
        The label for display.
    """
    from .isotopes import ISOTOPES

    def pretty(m):
        if m.group(0) not in ISOTOPES:  # only the isotope systems the package knows
            return m.group(0)
        return "δ" + m.group(1).translate(_SUP) + m.group(2)

    return _CODE.sub(pretty, str(text))


def _check_table(table):
    if not isinstance(table, pd.DataFrame):
        raise DataError(f"plot_study: 'table' must be a DataFrame with columns "
                        f"{', '.join(STUDY_COLUMNS)}; got {type(table).__name__}")
    missing = [c for c in STUDY_COLUMNS if c not in table.columns]
    if missing:
        raise DataError(f"plot_study: 'table' lacks the column(s) {', '.join(missing)}")
    if table.empty:
        raise DataError("plot_study: 'table' holds no series")


def _lines(tab):
    """Rows of one time unit: ("group", text) headers and ("series", label, pools frame)."""
    out = []
    for group, g in tab.groupby("group", sort=False):
        out.append(("group", str(group), None))
        for label, s in g.groupby("label", sort=False):
            out.append(("series", str(label), s))
    return out


def _chunks(lines, max_rows):
    """Split rows into panels of at most ``max_rows``; a panel starting inside a group
    repeats the group's header, marked "(cont.)"."""
    panels, cur, group = [], [], None
    for ln in lines:
        if ln[0] == "group":
            group = ln[1]
            if len(cur) >= max_rows - 1:  # no header alone at the foot of a panel
                panels.append(cur)
                cur = []
        elif len(cur) >= max_rows:
            panels.append(cur)
            cur = [("group", f"{group} (cont.)", None)]
        cur.append(ln)
    if cur:
        panels.append(cur)
    return panels


def _limits(tab):
    vals = []
    for col, st in (("half_life", None), ("lower", "lower_status"), ("upper", "upper_status")):
        v = pd.to_numeric(tab[col], errors="coerce").to_numpy(float)
        ok = np.isfinite(v) & (v > 0)
        if st is not None:
            ok &= tab[st].astype(str).isin(("ok", "at_bound")).to_numpy()
        vals.append(v[ok])
    v = np.concatenate(vals)
    if v.size == 0:
        return 0.1, 10.0
    lo, hi = float(v.min()), float(v.max())
    span = max(math.log10(hi / lo), 0.3)
    pad = 10 ** (0.08 * span + 0.05)
    return lo / pad, hi * pad


def plot_study(table, *, level=0.95, max_rows=60, title=None):
    r"""Forest plot of the half-lives of every series, with their intervals (log time axis).

    Parameters
    ----------
    table : DataFrame
        One row per series and pool, columns :data:`STUDY_COLUMNS`: ``group`` (the header
        the series is listed under, e.g. part, tissue and isotope), ``label`` (the series'
        row label, e.g. the subject), ``pool`` (1, 2, ...), ``half_life``, ``lower`` and
        ``upper`` (in the series' time unit), ``lower_status`` and ``upper_status``
        (``ok``, ``at_bound``, ``open``, ``failed``, ...), ``time_unit`` (``"d"``, ``"h"``,
        ...). Rows are drawn in the order given. Isotope codes in groups and labels are
        shown in δ notation (:func:`pretty_isotopes`).
    level : float, default=0.95
        Confidence level of the intervals (for the legend).
    max_rows : int, default=60
        Most rows (series and group headers) in one panel; more rows are split into panels
        side by side (at most four per figure; beyond that the panels hold more rows).
    title : str, optional
        Figure title.

    Returns
    -------
    matplotlib Figure
        7 in wide (two journal columns), about 0.16 in per row (less for many rows, at most
        9 in tall); one panel per time unit (and per ``max_rows`` rows), constrained layout.

    Raises
    ------
    DataError
        When ``table`` is not a DataFrame with the columns above, or is empty, or
        ``max_rows`` is not an integer of at least 5.

    Notes
    -----
    A marker is the half-life :math:`t_{1/2} = \ln 2 / k` of a pool; its line spans the
    interval. A bound with status ``open`` (the data do not close it) is a line with an
    arrowhead at the axis edge; a bound that is ``failed`` or missing draws no line on its
    side. Panels of one time unit share their x-axis limits.
    """
    import matplotlib.pyplot as plt
    from matplotlib.collections import LineCollection
    from matplotlib.lines import Line2D
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter
    from matplotlib.transforms import blended_transform_factory

    _check_table(table)
    if isinstance(max_rows, bool) or not isinstance(max_rows, (int, np.integer)) \
            or max_rows < 5:
        raise DataError(f"plot_study: 'max_rows' must be an integer of at least 5; got "
                        f"{max_rows!r}")
    tab = table.copy()
    tab["pool"] = pd.to_numeric(tab["pool"], errors="coerce").fillna(1).astype(int)
    units = list(dict.fromkeys(tab["time_unit"].astype(str)))
    per_unit = {u: _lines(tab[tab["time_unit"].astype(str) == u]) for u in units}
    total = sum(len(v) for v in per_unit.values())
    rows = int(max_rows)
    while True:
        panels = [(u, p) for u in units for p in _chunks(per_unit[u], rows)]
        if len(panels) <= _MAX_PANELS or rows >= total:
            break
        rows = int(math.ceil(rows * 1.25))
    # all rows in one column: one panel per unit stacked, heights as their rows; otherwise
    # panels side by side, each as tall as the longest
    stacked = len(panels) > 1 and total <= rows
    n_rows = total if stacked else max(len(p) for _, p in panels)
    row_h = 0.16 if n_rows <= 30 else 0.13
    row_h = min(row_h, (_MAX_HEIGHT - 1.3 - 0.45 * stacked * (len(panels) - 1)) / n_rows)
    font = TICK_PT if row_h >= 0.13 else max(4.5, 72 * row_h * 0.72)
    height = max(2.4, 1.3 + row_h * n_rows + 0.45 * stacked * (len(panels) - 1))
    n_pools = int(tab["pool"].max())
    if stacked:
        fig, axes = plt.subplots(len(panels), 1, figsize=(DOUBLE[0], height),
                                 layout="constrained", squeeze=False,
                                 height_ratios=[len(p) + 1.5 for _, p in panels])
        axes = axes[:, 0]
    else:
        fig, axes = plt.subplots(1, len(panels), figsize=(DOUBLE[0], height),
                                 layout="constrained", squeeze=False)
        axes = axes[0]
    try:
        colors, limits = {}, {u: _limits(tab[tab["time_unit"].astype(str) == u])
                              for u in units}
        any_open = False
        for ax, (u, lines) in zip(axes, panels):
            lo_lim, hi_lim = limits[u]
            edge = blended_transform_factory(ax.transAxes, ax.transData)
            segs, seg_colors, marks = [], [], {}
            arrows = {"<": ([], [], []), ">": ([], [], [])}
            ticks, labels, bold = [], [], []
            for y, (kind, text, s) in enumerate(lines):
                ticks.append(y)
                # tissue names are words on a figure ("red_cells" → "red cells")
                labels.append(pretty_isotopes(text.replace("_", " ") if kind == "group"
                                              else text))
                bold.append(kind == "group")
                if kind == "group":
                    base = text[:-8] if text.endswith(" (cont.)") else text
                    colors.setdefault(base, series_color(len(colors)))
                    current = colors[base]
                    continue
                n = len(s)
                for j, (_, r) in enumerate(s.iterrows()):
                    yy = y + (j - (n - 1) / 2) * (0.5 / max(n, 2))
                    est = float(r["half_life"]) if pd.notna(r["half_life"]) else math.nan
                    if not (math.isfinite(est) and est > 0):
                        continue
                    for col, st_col, arrow, lim in (("lower", "lower_status", "<", lo_lim),
                                                    ("upper", "upper_status", ">", hi_lim)):
                        st = str(r[st_col])
                        b = float(r[col]) if pd.notna(r[col]) else math.nan
                        if st == "open":
                            segs.append([(est, yy), (lim, yy)])
                            seg_colors.append(current)
                            xs, ys, cs = arrows[arrow]
                            xs.append(0.0 if arrow == "<" else 1.0)
                            ys.append(yy)
                            cs.append(current)
                            any_open = True
                        elif st in ("ok", "at_bound") and math.isfinite(b) and b > 0:
                            segs.append([(est, yy), (min(max(b, lo_lim), hi_lim), yy)])
                            seg_colors.append(current)
                    mk = _MARKERS[(int(r["pool"]) - 1) % len(_MARKERS)]
                    xs, ys, cs = marks.setdefault(mk, ([], [], []))
                    xs.append(est)
                    ys.append(yy)
                    cs.append(current)
            ax.add_collection(LineCollection(segs, colors=seg_colors, linewidths=1.0))
            for mk, (xs, ys, cs) in marks.items():
                ax.scatter(xs, ys, s=14 if row_h >= 0.13 else 9, marker=mk, c=cs,
                           edgecolors="white", linewidths=0.4, zorder=3)
            for arrow, (xs, ys, cs) in arrows.items():
                if xs:
                    ax.scatter(xs, ys, s=16, marker=arrow, c=cs, transform=edge,
                               clip_on=False, zorder=3, linewidths=0)
            ax.set_xscale("log")
            ax.set_xlim(lo_lim, hi_lim)
            decades = math.log10(hi_lim / lo_lim)
            subs = (1.0, 2.0, 5.0) if decades <= 2.5 else (1.0, 3.0) if decades <= 4 else (1.0,)
            ax.xaxis.set_major_locator(LogLocator(base=10, subs=subs))
            ax.xaxis.set_major_formatter(FuncFormatter(lambda x, _: f"{x:g}"))
            ax.xaxis.set_minor_formatter(NullFormatter())
            ax.set_ylim((len(lines) if stacked else n_rows) - 0.5, -0.5)
            ax.set_yticks(ticks)
            ax.set_yticklabels(labels, fontsize=font)
            for lab, b in zip(ax.get_yticklabels(), bold):
                if b:
                    lab.set_fontweight("bold")
            ax.tick_params(axis="y", length=0)
            ax.tick_params(axis="x", labelsize=TICK_PT)
            for y, b in enumerate(bold):
                if b:
                    ax.axhline(y, color=GREY, linewidth=0.3, alpha=0.5, zorder=0)
            ax.grid(axis="x", which="major", color="#dddddd", linewidth=0.5)
            ax.set_axisbelow(True)
            for side in ("top", "right"):
                ax.spines[side].set_visible(False)
            ax.set_xlabel(f"Half-life ({time_unit_word(u)})", fontsize=LABEL_PT)
        handles, names = [], []
        if n_pools > 1:
            for p in range(1, n_pools + 1):
                handles.append(Line2D([], [], linestyle="none", color="#333333",
                                      marker=_MARKERS[(p - 1) % len(_MARKERS)], markersize=4))
                names.append(f"pool {p}")
        handles.append(Line2D([], [], color="#333333", linewidth=1.0))
        names.append(f"{level * 100:g} % interval")
        if any_open:
            handles.append(Line2D([], [], color="#333333", linewidth=1.0, marker=">",
                                  markersize=4))
            names.append("open bound (arrow to the edge)")
        fig.legend(handles, names, loc="outside upper center", ncol=len(handles),
                   frameon=False, fontsize=LEGEND_PT, handlelength=1.6, columnspacing=1.2)
        if title:
            fig.suptitle(str(title), fontsize=LABEL_PT)
    except BaseException:
        plt.close(fig)
        raise
    return fig
