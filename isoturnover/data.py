r"""Tidy data tables: readers, validation, dates to times, value units.

Three tables, one row per measurement (DESIGN §5):

* **samples** -- ``subject``, ``tissue``, ``isotope``, ``time`` (or ``date`` with a switch
  date), ``value`` (δ in ‰); optional ``sd``, ``group``, ``replicate``,
  ``segment_start``/``segment_end``;
* **diets** -- ``group`` and/or ``subject``, ``isotope``, ``start``, ``value`` (blank when the
  diet's value is unknown);
* **masses** -- ``subject``, ``time`` (or ``date``), ``mass``; optional ``group``.

Every reader takes a path to a CSV file (or an Excel workbook, when openpyxl is installed) or a
:class:`pandas.DataFrame`, maps other column names through ``columns=`` and returns a **new**
validated frame; an input frame is never changed. Cells are read as text so that a blank cell,
a word where a number belongs and a missing-value marker can be told apart, and every bad cell
is reported with the file, the row number as a spreadsheet shows it (the header is row 1, the
first data row is row 2; for a frame, the index label), the column and the value. Nothing is
dropped silently: a bad row is an error, or -- with ``on_bad_rows="drop"`` -- dropped with one
:class:`~isoturnover.errors.DataWarning` listing every dropped row. Fully blank lines carry no
measurement and are skipped (row numbers still count them). The generic reading of files and
cells (CSV/Excel, column mapping, blank cells, the collector of bad cells) lives in
:mod:`isoturnover.tables`; this module knows what each table holds.

Time runs from the diet switch in the unit ``time_unit`` (``"d"``, ``"h"`` or ``"w"``), which
travels with the frame in ``frame.attrs["time_unit"]``; ``frame.attrs["source"]`` names the
file (or ``"<frame>"``). A ``date`` column becomes ``time`` with a switch date,

.. math::

    t = (\mathrm{date} - \mathrm{switch\ date}) / (1\ \mathrm{unit}),

one for the whole table (``switch_date=``) or one per group or subject (``switch_dates=``).

Analytic replicates (several rows of one subject, tissue, isotope and time) are kept and
marked in the boolean column ``is_replicate_group``; :func:`average_replicates` makes one row
of each, so that they are never counted as independent time points in a fit.

Collecting samples from animals needs the approval of the local animal-care authority (human
samples: a human-research ethics board); this module only reads the measurements.
"""

from __future__ import annotations

import difflib
import math
import re
from collections.abc import Mapping

import numpy as np
import pandas as pd

from .conventions import check_choice
from .errors import DataError
from .sampletimes import check_date_format, time_column
from .tables import (
    MAX_LISTED,
    Issues,
    Table,
    apply_columns,
    cell_text,
    extra_columns,
    load_table,
    missing_column,
    number_column,
    text_column,
    warn_duplicate_rows,
    warn_partly_blank,
)

__all__ = [
    "ISOTOPE_CODES",
    "TIME_UNITS",
    "VALUE_UNITS",
    "SAMPLE_COLUMNS",
    "DIET_COLUMNS",
    "MASS_COLUMNS",
    "read_samples",
    "read_diets",
    "read_masses",
    "average_replicates",
    "series",
]

#: Isotope codes the library knows (δ13C, δ15N, δ34S, δ2H, δ18O).
ISOTOPE_CODES = ("d13C", "d15N", "d34S", "d2H", "d18O")

#: Canonical time units: days, hours, weeks.
TIME_UNITS = ("d", "h", "w")
_TIME_ALIASES = {
    "d": "d", "day": "d", "days": "d",
    "h": "h", "hour": "h", "hours": "h",
    "w": "w", "week": "w", "weeks": "w",
}

#: Units of the ``value`` column that :func:`read_samples` accepts.
VALUE_UNITS = ("delta", "atom_percent", "atom_percent_excess")

_ON_BAD_ROWS = ("raise", "drop")

#: Canonical column names of each table (targets allowed in ``columns=``).
SAMPLE_COLUMNS = ("subject", "tissue", "isotope", "time", "date", "value", "sd", "group",
                  "replicate", "segment_start", "segment_end")
DIET_COLUMNS = ("group", "subject", "isotope", "start", "value")
MASS_COLUMNS = ("subject", "group", "time", "date", "mass")


# ------------------------------------------------------------------------------------------
# argument checks and isotope codes
# ------------------------------------------------------------------------------------------
def _time_unit(unit) -> str:
    """Canonical time unit code for ``unit`` (``"days"`` → ``"d"`` etc.)."""
    if isinstance(unit, str) and unit.strip() in _TIME_ALIASES:
        return _TIME_ALIASES[unit.strip()]
    hint = ""
    if isinstance(unit, str) and unit.strip().lower() in _TIME_ALIASES:
        hint = f" (did you mean {_TIME_ALIASES[unit.strip().lower()]!r}?)"
    raise DataError(
        "time_unit must be one of 'd', 'h', 'w' (or 'days', 'hours', 'weeks', 'day', 'hour', "
        f"'week'); got {unit!r}{hint}"
    )


def _isotope_suggestion(code: str) -> str | None:
    """The known isotope code ``code`` most probably means, or None."""
    s = code.strip().lower().replace("δ", "d")
    s = re.sub(r"[^0-9a-z]", "", s)
    if s.startswith("delta"):
        s = s[5:]
    if s in ("dd", "deuterium"):
        return "d2H"
    if re.fullmatch(r"d\d+[a-z]+", s):
        s = s[1:]
    m = re.fullmatch(r"(\d+)([a-z]+)", s) or re.fullmatch(r"([a-z]+)(\d+)", s)
    if m:
        a, b = m.groups()
        mass, elem = (a, b) if a.isdigit() else (b, a)
        cand = f"d{mass}{elem.capitalize()}"
        if cand in ISOTOPE_CODES:
            return cand
    close = difflib.get_close_matches(code.strip(), ISOTOPE_CODES, n=1, cutoff=0.6)
    return close[0] if close else None


def _unknown_isotope_text(code) -> str:
    sug = _isotope_suggestion(str(code))
    did = f"; did you mean {sug!r}?" if sug else ""
    return (f"unknown isotope code {code!r}{did} (allowed: "
            f"{', '.join(ISOTOPE_CODES)})")


def _isotopes(table: Table, issues: Issues) -> pd.Series:
    """The ``isotope`` column: required text among :data:`ISOTOPE_CODES` (bad cells recorded)."""
    codes = text_column(table, issues, "isotope", required=True)
    present = codes.notna().to_numpy()
    unknown = present & ~codes.isin(ISOTOPE_CODES).to_numpy()
    issues.add(unknown, "isotope", lambda i: _unknown_isotope_text(codes.iat[i]))
    return codes


# ------------------------------------------------------------------------------------------
# the frames the readers return
# ------------------------------------------------------------------------------------------
def _finish(out: pd.DataFrame, table: Table, keep: np.ndarray, attrs: dict) -> pd.DataFrame:
    out.index = table.labels[keep] if not table.from_file else pd.RangeIndex(int(keep.sum()))
    out.attrs = attrs
    return out


def _base_attrs(table: Table, what: str, unit: str) -> dict:
    attrs = {"table": what, "source": table.source, "time_unit": unit}
    if table.sheet is not None:
        attrs["sheet"] = table.sheet
    return attrs


def _take(col, keep: np.ndarray):
    """The kept rows of a column (a Series keeps its dtype, with a fresh RangeIndex)."""
    if isinstance(col, pd.Series):
        return col.iloc[np.flatnonzero(keep)].reset_index(drop=True)
    return np.asarray(col)[keep]


# ------------------------------------------------------------------------------------------
# value units
# ------------------------------------------------------------------------------------------
def _baseline_for(baseline, code: str) -> float:
    """The baseline δ (‰) for one isotope from a number or a mapping."""
    if isinstance(baseline, Mapping):
        if code not in baseline:
            raise DataError(
                f"baseline= has no value for {code!r} (it has "
                f"{', '.join(map(repr, baseline))}); unit='atom_percent_excess' needs the δ "
                "(‰) of unenriched material for every isotope in the table"
            )
        b = baseline[code]
    else:
        b = baseline
    try:
        b = float(b)
    except (TypeError, ValueError):
        raise DataError(f"baseline for {code!r} must be a δ value in ‰, got {b!r}") from None
    if not math.isfinite(b):
        raise DataError(f"baseline for {code!r} must be finite, got {b!r}")
    return b


def _convert_units(values, sd, codes: pd.Series, ok: np.ndarray, unit: str, baseline,
                   table: Table, issues: Issues):
    """δ (‰) from atom % or atom % excess, and the sd propagated to first order.

    The sd is propagated through the derivative of the conversion, taken by a central
    difference of the same conversion: ``sd_δ = |dδ/dx| · sd_x``.
    """
    from . import isotopes  # imported here: the conversions live in isotopes.py

    delta = np.full(values.shape, np.nan)
    sd_delta = None if sd is None else np.full(values.shape, np.nan)
    tried = np.zeros(values.shape, dtype=bool)
    if unit == "atom_percent":
        rng = ok & ((values <= 0) | (values >= 100))
        issues.add(rng, "value", lambda i: (f"atom % must lie strictly between 0 and 100, got "
                                            f"{values[i]:g}"))
        ok = ok & ~rng
    for code in pd.unique(codes[ok]):
        sel = ok & (codes == code).to_numpy()
        if unit == "atom_percent":
            def conv(v, code=code):
                return np.asarray(isotopes.atom_percent_to_delta(v, code), dtype=float)
        else:
            b = _baseline_for(baseline, code)
            try:
                ap_base = float(isotopes.delta_to_atom_percent(b, code))
            except Exception as exc:  # noqa: BLE001 - DataError/ScaleError from isotopes
                raise DataError(f"baseline for {code!r}: {exc}") from exc
            total = ap_base + values
            rng = sel & ((total <= 0) | (total >= 100))
            issues.add(rng, "value", lambda i, ap_base=ap_base: (
                f"atom % excess {values[i]:g} on a baseline of {ap_base:.6g} atom % gives "
                f"{ap_base + values[i]:.6g} atom %, outside (0, 100)"))
            sel = sel & ~rng

            def conv(v, code=code, b=b):
                return np.asarray(isotopes.atom_percent_excess_to_delta(v, code, b),
                                  dtype=float)
        if not sel.any():
            continue
        x = values[sel]
        try:
            d = conv(x)
        except Exception as exc:  # noqa: BLE001 - e.g. ScaleError for O and S
            raise DataError(
                f"{table.label}: unit={unit!r} cannot be converted to δ for isotope "
                f"{code!r}: {exc}"
            ) from exc
        delta[sel] = d
        tried |= sel
        if sd_delta is not None:
            h = 1e-6 * np.maximum(np.abs(x), 1.0)
            deriv = (conv(x + h) - conv(x - h)) / (2.0 * h)
            sd_delta[sel] = np.abs(deriv) * sd[sel]
    notfin = tried & ~np.isfinite(delta)
    issues.add(notfin, "value", lambda i: f"{values[i]:g} ({unit}) gives no finite δ value")
    return delta, sd_delta


# ------------------------------------------------------------------------------------------
# readers
# ------------------------------------------------------------------------------------------
def read_samples(path_or_frame, *, columns=None, time_unit="d", switch_date=None,
                 switch_dates=None, unit="delta", baseline=None, on_bad_rows="raise",
                 sheet=None, date_format=None) -> pd.DataFrame:
    r"""Read and validate a samples table (one row per measurement).

    Parameters
    ----------
    path_or_frame : str, path-like or pandas.DataFrame
        A CSV file (comma-, semicolon- or tab-separated, UTF-8; a header with ``;`` and no
        ``,`` is read as semicolon-separated with decimal commas), an Excel workbook
        (``.xlsx``/``.xlsm`` with openpyxl, ``.xls`` with xlrd) or a frame. A frame is never
        changed.
    columns : mapping, optional
        Your column names to canonical ones, e.g. ``{"Animal": "subject", "Day": "time"}``.
        Targets must be among :data:`SAMPLE_COLUMNS`.
    time_unit : {"d", "h", "w"}, default "d"
        Unit of ``time`` (or of the times computed from dates). ``"days"``, ``"hours"``,
        ``"weeks"`` (and singular forms) are accepted and stored as the short code in
        ``attrs["time_unit"]``.
    switch_date : date-like, optional
        The diet-switch date of every row when the table has a ``date`` column instead of
        ``time``: :math:`t = (\mathrm{date} - \mathrm{switch\_date})/(1\ \mathrm{unit})`.
    switch_dates : mapping, DataFrame or str, optional
        One switch date per group: a mapping keyed by the ``group`` column (by ``subject``
        when the table has no ``group`` column); a frame with a ``switch_date`` column and a
        ``group`` and/or ``subject`` column; or the name of a column that holds each row's
        switch date.
    date_format : str, optional
        How text dates that are not ISO 8601 are written, as a strptime format: ``"%d/%m/%Y"``
        (day first), ``"%m/%d/%Y"`` (month first), ``"%d.%m.%y"``... Used for the ``date``
        cells and the switch dates. Without it only ISO 8601 text (``2024-03-31``, optionally
        ``2024-03-31T08:30``) and date cells of a workbook are read; a date such as
        ``03/04/2025`` is refused (a DataError naming the file, row and column), since the
        day and the month cannot be told apart. A cell that does not match the format is a
        bad cell.
    unit : {"delta", "atom_percent", "atom_percent_excess"}, default "delta"
        Unit of ``value``: δ in ‰ against the isotope's international standard, atom % or
        atom % excess. Atom values are converted to δ by
        :func:`isoturnover.isotopes.atom_percent_to_delta` or
        :func:`~isoturnover.isotopes.atom_percent_excess_to_delta`; the original numbers are
        kept in ``value_original`` (and ``sd_original``), the unit in
        ``attrs["value_original_unit"]``. A given ``sd`` is in the same unit as ``value`` and
        is propagated to first order, :math:`s_\delta = |d\delta/dx|\, s_x`.
    baseline : float or mapping, optional
        For ``unit="atom_percent_excess"``: δ (‰) of the unenriched material, one number or a
        mapping isotope code → δ.
    on_bad_rows : {"raise", "drop"}, default "raise"
        ``"raise"``: the first bad row is an error naming file, row, column and value (with
        the count of further bad rows). ``"drop"``: bad rows are dropped and one
        :class:`~isoturnover.errors.DataWarning` lists every dropped row and why.
    sheet : str or int, optional
        Excel sheet name or 0-based index (default: the first sheet).

    Returns
    -------
    pandas.DataFrame
        A new frame with columns ``subject``, ``tissue``, ``isotope`` (text), ``group``
        (when given), ``time`` (float, in ``time_unit``), ``date`` (when converted), ``value``
        (float, δ ‰), the optional ``sd`` (float > 0, NaN where blank), ``replicate``,
        ``segment_start``, ``segment_end``, then the other columns as they came (numeric-looking
        columns of a file as numbers), ``value_original``/``sd_original`` (when converted) and
        ``is_replicate_group`` (True for rows sharing subject, tissue, isotope, time -- and the
        segment, when segments are given). Text values are stripped of surrounding blanks.
        Rows read from a file get a fresh RangeIndex; rows of a frame keep its index labels.
        ``attrs`` holds ``table``, ``source``, ``time_unit``, ``value_unit`` (always
        ``"delta"``) and the switch dates or unit conversion used.

    Raises
    ------
    DataError
        Missing or unreadable file, empty table, missing or duplicate columns, bad cells
        (blank, non-numeric, not finite, unknown isotope code, ``sd`` ≤ 0, unreadable date,
        a number in a date column), day/month dates without ``date_format``, bad arguments.

    Warns
    -----
    DataWarning
        Exact duplicate rows (kept: a fit averages them as analytic replicates of one
        sample); an ``sd`` column blank on some rows but not all (a fit of such a series
        cannot weight its points: :meth:`TurnoverModel.fit` and :func:`series` refuse it);
        rows dropped with ``on_bad_rows="drop"``.

    Examples
    --------
    Invented values:

    >>> import pandas as pd
    >>> raw = pd.DataFrame({"Animal": ["a1", "a1"], "tissue": ["plasma", "plasma"],
    ...                     "isotope": ["d13C", "d13C"], "Day": [0, 7],
    ...                     "value": [-24.1, -18.2]})
    >>> s = read_samples(raw, columns={"Animal": "subject", "Day": "time"})
    >>> s[["subject", "time", "value"]].to_dict("list")
    {'subject': ['a1', 'a1'], 'time': [0.0, 7.0], 'value': [-24.1, -18.2]}
    >>> s.attrs["time_unit"]
    'd'
    """
    check_choice("on_bad_rows", on_bad_rows, _ON_BAD_ROWS)
    tu = _time_unit(time_unit)
    date_format = check_date_format(date_format)
    check_choice("unit", unit, VALUE_UNITS)
    if unit == "atom_percent_excess" and baseline is None:
        raise DataError("unit='atom_percent_excess' needs baseline= (δ in ‰ of the unenriched "
                        "material: a number, or a mapping isotope code -> δ)")
    if unit != "atom_percent_excess" and baseline is not None:
        raise DataError(f"baseline= applies only with unit='atom_percent_excess'; got "
                        f"unit={unit!r}")
    table = load_table(path_or_frame, sheet)
    apply_columns(table, columns, SAMPLE_COLUMNS, "samples")
    cols = table.frame.columns
    for name in ("subject", "tissue", "isotope"):
        if name not in cols:
            raise missing_column(table, name, "samples")
    if "value" not in cols:
        raise missing_column(table, "value", "samples")
    if "time" not in cols and "date" not in cols:
        raise missing_column(table, "time", "samples",
                             extra=" (or 'date' with switch_date=/switch_dates=)")

    issues = Issues(table)
    data: dict[str, object] = {}
    data["subject"] = text_column(table, issues, "subject", required=True)
    data["tissue"] = text_column(table, issues, "tissue", required=True)
    codes = _isotopes(table, issues)
    data["isotope"] = codes
    if "group" in cols:
        data["group"] = text_column(table, issues, "group", required=False)
    keys = {k: data[k] for k in ("group", "subject") if k in data}
    times, dates, meta = time_column(table, issues, what="samples", time_col="time",
                                     switch_date=switch_date, switch_dates=switch_dates,
                                     unit=tu, keys=keys, date_format=date_format)
    data["time"] = times
    if dates is not None:
        data["date"] = dates.to_numpy()
    values = number_column(table, issues, "value", required=True)
    sd = number_column(table, issues, "sd", required=False, positive=True) if "sd" in cols else None
    for name in ("segment_start", "segment_end"):
        if name in cols:
            data[name] = number_column(table, issues, name, required=False)
    if "segment_start" in data and "segment_end" in data:
        a, b = data["segment_start"], data["segment_end"]
        rev = np.isfinite(a) & np.isfinite(b) & (b <= a)
        issues.add(rev, "segment_end", lambda i: (f"segment_end {b[i]:g} must be greater than "
                                                  f"segment_start {a[i]:g}"))
    attrs = _base_attrs(table, "samples", tu)
    attrs["value_unit"] = "delta"
    attrs.update(meta)
    original = None
    if unit != "delta":
        ok = np.isfinite(values) & codes.isin(ISOTOPE_CODES).to_numpy()
        delta, sd_delta = _convert_units(values, sd, codes, ok, unit, baseline, table, issues)
        original = (values, sd)
        values, sd = delta, sd_delta
        attrs["value_original_unit"] = unit
        if baseline is not None:
            attrs["baseline"] = (dict(baseline) if isinstance(baseline, Mapping)
                                 else float(baseline))
    keep = issues.resolve(on_bad_rows)

    out = {}
    order = ["subject", "tissue", "isotope", "group", "time", "date"]
    for name in order:
        if name in data:
            out[name] = _take(data[name], keep)
    out["value"] = values[keep]
    if sd is not None:
        out["sd"] = sd[keep]
    if "replicate" in cols:
        out["replicate"] = _replicate_ids(table.frame["replicate"], table.clean)[keep]
    for name in ("segment_start", "segment_end"):
        if name in data:
            out[name] = data[name][keep]
    for c, col in extra_columns(table, SAMPLE_COLUMNS).items():
        out[c] = _take(col, keep)
    if original is not None:
        out["value_original"] = original[0][keep]
        if original[1] is not None:
            out["sd_original"] = original[1][keep]
    frame = pd.DataFrame(out)
    kept = table.subset(keep)
    warn_duplicate_rows(frame, kept, (
        "they are kept, and a fit averages them as analytic replicates of one sample (with "
        "an sd, that point then weighs as two measurements)"))
    if "sd" in frame.columns:
        warn_partly_blank(frame["sd"].to_numpy(), kept, "sd", (
            "while other rows have an sd. A fit weights a series only when every point of "
            "it has an sd: TurnoverModel.fit and series() refuse a series with some sd "
            "blank, and fit_each fits it without weights (every sd of that series unused). "
            "Give an sd for every row, or leave it blank for every row of a series"))
    rep_key = ["subject", "tissue", "isotope", "time"] + [
        c for c in ("segment_start", "segment_end") if c in frame.columns]
    frame["is_replicate_group"] = frame.duplicated(subset=rep_key, keep=False).to_numpy()
    return _finish(frame, table, keep, attrs)


def _replicate_ids(col: pd.Series, clean: bool = False) -> np.ndarray:
    """Replicate ids: numbers when every given id is a number, else text (missing if blank)."""
    if pd.api.types.is_numeric_dtype(col.dtype):
        return col.to_numpy()
    text, blank = cell_text(col, clean)
    num = pd.to_numeric(text.where(~blank), errors="coerce")
    if (num.notna().to_numpy() | blank).all() and not blank.all():
        return num.to_numpy(dtype=float, na_value=np.nan)
    return text.where(~blank).to_numpy()


def read_diets(path_or_frame, *, columns=None, time_unit="d", switch_date=None,
               switch_dates=None, on_bad_rows="raise", sheet=None,
               date_format=None) -> pd.DataFrame:
    r"""Read and validate a diets table: which diet each group (or subject) ate from when.

    Parameters
    ----------
    path_or_frame : str, path-like or pandas.DataFrame
        CSV file, Excel workbook or frame (never changed); see :func:`read_samples`.
    columns : mapping, optional
        Your column names to canonical ones (targets among :data:`DIET_COLUMNS`).
    time_unit : {"d", "h", "w"}, default "d"
        Unit of ``start``.
    switch_date, switch_dates : optional
        When given, ``start`` holds dates and becomes the time since the switch date (one for
        all rows, or one per group/subject as in :func:`read_samples`); the dates are kept in
        ``start_date``.
    on_bad_rows : {"raise", "drop"}, default "raise"
        What to do with rows holding bad cells (see :func:`read_samples`). Repeated or
        unsorted start times are always an error: which row to drop cannot be guessed.
    sheet : str or int, optional
        Excel sheet name or 0-based index.
    date_format : str, optional
        How text dates that are not ISO 8601 are written (``"%d/%m/%Y"``); see
        :func:`read_samples`.

    Returns
    -------
    pandas.DataFrame
        A new frame with ``group`` and/or ``subject``, ``isotope``, ``start`` (float, in
        ``time_unit``), ``start_date`` (when converted), ``value`` (δ ‰ of the diet; NaN where
        blank, meaning unknown: its tissue plateau is then fitted), then the other columns.

    Raises
    ------
    DataError
        As :func:`read_samples`; also when the start times of one group (or subject) and
        isotope repeat or are not in increasing order. Rows must be sorted by start within
        each group and isotope: the message names both rows.
    """
    check_choice("on_bad_rows", on_bad_rows, _ON_BAD_ROWS)
    tu = _time_unit(time_unit)
    date_format = check_date_format(date_format)
    table = load_table(path_or_frame, sheet)
    apply_columns(table, columns, DIET_COLUMNS, "diets")
    cols = table.frame.columns
    by = [c for c in ("group", "subject") if c in cols]
    if not by:
        raise missing_column(table, "group", "diets", extra=" (or 'subject')")
    if "isotope" not in cols:
        raise missing_column(table, "isotope", "diets")
    if "value" not in cols:
        raise missing_column(table, "value", "diets")
    issues = Issues(table)
    data: dict[str, object] = {c: text_column(table, issues, c, required=True) for c in by}
    codes = _isotopes(table, issues)
    data["isotope"] = codes
    starts, dates, meta = time_column(table, issues, what="diets", time_col="start",
                                      date_col="start", switch_date=switch_date,
                                      switch_dates=switch_dates, unit=tu,
                                      keys={c: data[c] for c in by},
                                      date_format=date_format)
    data["start"] = starts
    if dates is not None:
        data["start_date"] = dates.to_numpy()
    data["value"] = number_column(table, issues, "value", required=False)
    keep = issues.resolve(on_bad_rows)
    out = {k: _take(v, keep) for k, v in data.items()}
    for c, col in extra_columns(table, DIET_COLUMNS).items():
        out[c] = _take(col, keep)
    frame = pd.DataFrame(out)
    kept = table.subset(keep)
    _check_diet_order(frame, kept, by)
    warn_duplicate_rows(frame, kept, "they are kept")
    attrs = _base_attrs(table, "diets", tu)
    attrs["value_unit"] = "delta"
    attrs.update(meta)
    return _finish(frame, table, keep, attrs)


def _check_diet_order(frame: pd.DataFrame, table: Table, by: list[str]) -> None:
    """Start times must increase strictly within each group/subject and isotope."""
    keys = by + ["isotope"]
    gid = frame.groupby(keys, sort=False, dropna=False).ngroup().to_numpy()
    pos = np.arange(len(frame))
    order = np.lexsort((pos, gid))                    # file order within each series
    g, p = gid[order], pos[order]
    start = frame["start"].to_numpy()[order]
    same = g[1:] == g[:-1]
    rep = same & (start[1:] == start[:-1])
    uns = same & (start[1:] < start[:-1])
    bad = rep | uns
    if not bad.any():
        return
    k = int(np.argmax(bad))
    prev, cur = int(p[k]), int(p[k + 1])
    who = ", ".join(f"{c} {frame[c].iat[cur]!r}" for c in keys)
    first = table.rows_text([prev, cur])
    further = int(bad.sum()) - 1
    more = (f"; {further} further problem{'s' if further > 1 else ''} of this kind"
            if further else "")
    if rep[k]:
        raise DataError(
            f"{table.label}, {first}, column {table.col('start')}: start time "
            f"{start[k + 1]:g} is repeated for {who}; each diet needs its own start time"
            f"{more}"
        )
    raise DataError(
        f"{table.label}, {first}, column {table.col('start')}: start times are not sorted "
        f"for {who} ({start[k + 1]:g} on {table.row_name(cur)} comes after {start[k]:g} on "
        f"{table.row_name(prev)}); sort the rows of each group and isotope by start time"
        f"{more}"
    )


def read_masses(path_or_frame, *, columns=None, time_unit="d", switch_date=None,
                switch_dates=None, on_bad_rows="raise", sheet=None,
                date_format=None, mass_unit=None) -> pd.DataFrame:
    """Read and validate a body-mass table: ``subject``, ``time`` (or ``date``), ``mass``.

    Parameters
    ----------
    path_or_frame : str, path-like or pandas.DataFrame
        CSV file, Excel workbook or frame (never changed); see :func:`read_samples`.
    columns : mapping, optional
        Your column names to canonical ones (targets among :data:`MASS_COLUMNS`).
    time_unit : {"d", "h", "w"}, default "d"
        Unit of ``time``.
    switch_date, switch_dates : optional
        Turn a ``date`` column into times since the switch (see :func:`read_samples`).
    on_bad_rows : {"raise", "drop"}, default "raise"
        What to do with bad rows (see :func:`read_samples`).
    sheet : str or int, optional
        Excel sheet name or 0-based index.
    date_format : str, optional
        How text dates that are not ISO 8601 are written (``"%d/%m/%Y"``); see
        :func:`read_samples`.
    mass_unit : str, optional
        Unit of ``mass`` (``"kg"``, ``"g"``), a label for tables and figures; kept in
        ``attrs["mass_unit"]`` (a frame's own ``attrs["mass_unit"]`` when not given).

    Returns
    -------
    pandas.DataFrame
        A new frame with ``subject``, ``group`` (when given), ``time`` (float, in
        ``time_unit``), ``date`` (when converted), ``mass`` (float > 0, in the user's mass
        unit), then the other columns.

    Raises
    ------
    DataError
        As :func:`read_samples`; a mass that is not > 0 is a bad cell.
    """
    check_choice("on_bad_rows", on_bad_rows, _ON_BAD_ROWS)
    tu = _time_unit(time_unit)
    date_format = check_date_format(date_format)
    if mass_unit is None and isinstance(path_or_frame, pd.DataFrame):
        mass_unit = (path_or_frame.attrs or {}).get("mass_unit")
    if mass_unit is not None and (not isinstance(mass_unit, str) or not mass_unit.strip()):
        raise DataError(f"'mass_unit' must be a unit such as 'kg' or 'g'; got {mass_unit!r}")
    table = load_table(path_or_frame, sheet)
    apply_columns(table, columns, MASS_COLUMNS, "masses")
    cols = table.frame.columns
    if "subject" not in cols:
        raise missing_column(table, "subject", "masses")
    if "mass" not in cols:
        raise missing_column(table, "mass", "masses")
    issues = Issues(table)
    data: dict[str, object] = {"subject": text_column(table, issues, "subject", required=True)}
    if "group" in cols:
        data["group"] = text_column(table, issues, "group", required=False)
    keys = {k: data[k] for k in ("group", "subject") if k in data}
    times, dates, meta = time_column(table, issues, what="masses", time_col="time",
                                     switch_date=switch_date, switch_dates=switch_dates,
                                     unit=tu, keys=keys, date_format=date_format)
    data["time"] = times
    if dates is not None:
        data["date"] = dates.to_numpy()
    data["mass"] = number_column(table, issues, "mass", required=True, positive=True)
    keep = issues.resolve(on_bad_rows)
    out = {k: _take(v, keep) for k, v in data.items()}
    for c, col in extra_columns(table, MASS_COLUMNS).items():
        out[c] = _take(col, keep)
    frame = pd.DataFrame(out)
    warn_duplicate_rows(frame, table.subset(keep),
                        "they are kept and count as separate measurements")
    attrs = _base_attrs(table, "masses", tu)
    attrs.update(meta)
    if mass_unit is not None:
        attrs["mass_unit"] = mass_unit.strip()
    return _finish(frame, table, keep, attrs)


# ------------------------------------------------------------------------------------------
# replicates and series
# ------------------------------------------------------------------------------------------
_SERIES_KEYS = ("subject", "tissue", "isotope")
_DROP_ON_AVERAGE = ("replicate", "is_replicate_group", "value_original", "sd_original")


def _require_columns(frame, needed, what: str) -> None:
    if not isinstance(frame, pd.DataFrame):
        raise DataError(f"{what}: samples must be a DataFrame (from read_samples); got "
                        f"{type(frame).__name__}")
    missing = [c for c in needed if c not in frame.columns]
    if missing:
        raise DataError(
            f"{what}: samples need columns {list(needed)}; missing {missing} (got "
            f"{list(frame.columns)}); read the table with read_samples()"
        )


def average_replicates(samples: pd.DataFrame) -> pd.DataFrame:
    r"""One row per subject, tissue, isotope and time: analytic replicates averaged.

    Replicates are rows with the same ``subject``, ``tissue``, ``isotope`` and ``time`` (and
    ``segment_start``/``segment_end`` where given: segments of one hair are different samples,
    not replicates). For a set of :math:`n` replicates with values :math:`y_j`:

    * ``value`` is the mean :math:`\bar y`;
    * ``n_replicates`` is :math:`n`;
    * ``sd_replicates`` is the between-replicate standard error
      :math:`s_b/\sqrt{n}`, with :math:`s_b` the sample sd (ddof = 1); NaN when
      :math:`n = 1`;
    * ``sd`` (only when the input has an ``sd`` column) is the sd of the mean. For
      :math:`n \ge 2` it is the larger of :math:`s_b/\sqrt{n}` and
      :math:`\bar\sigma/\sqrt{n}`, where :math:`\bar\sigma` is the mean stated analytic sd
      of the replicates: both estimate the same analytic error, but :math:`s_b` from two or
      three numbers can come out near zero by chance, so the stated sd is a floor
      (common practice). A single row keeps its own sd. Without an ``sd`` column no ``sd``
      is made: the between-replicate error alone exists only for replicated points and
      would give a series with weights for some points and none for others.

    Other columns are kept when they are constant within every set (``group``, ``date``,
    covariates); columns that vary within a set are left out and named in
    ``attrs["columns_not_averaged"]``, as are ``replicate``, ``value_original`` and
    ``sd_original``. ``is_replicate_group`` is not carried over.

    Parameters
    ----------
    samples : pandas.DataFrame
        A samples table (as from :func:`read_samples`); not changed.

    Returns
    -------
    pandas.DataFrame
        A new frame sorted by subject, tissue, isotope and time (and segment), with a
        RangeIndex and the input's attrs (plus ``attrs["replicates_averaged"] = True``).
        Columns, in the input's order: ``subject``, ``tissue``, ``isotope``, ``time`` (in
        ``attrs["time_unit"]``), ``segment_start``/``segment_end`` (when given), ``value``
        (mean δ, ‰), ``sd`` (‰, when the input has one), the constant other columns, then
        ``n_replicates`` (int) and ``sd_replicates`` (‰, NaN for a single row).

    Raises
    ------
    DataError
        When ``samples`` is not a frame, lacks ``subject``, ``tissue``, ``isotope``,
        ``time`` or ``value``, has a value that is not finite, or has no rows.

    Examples
    --------
    Invented values:

    >>> import pandas as pd
    >>> s = pd.DataFrame({"subject": "a", "tissue": "plasma", "isotope": "d13C",
    ...                   "time": [1.0, 1.0, 2.0], "value": [-20.0, -21.0, -19.0],
    ...                   "sd": [0.1, 0.1, 0.2]})
    >>> a = average_replicates(s)
    >>> a[["time", "value", "n_replicates"]].to_dict("list")
    {'time': [1.0, 2.0], 'value': [-20.5, -19.0], 'n_replicates': [2, 1]}
    >>> round(float(a["sd"].iloc[0]), 4)   # s_b = 0.7071, / sqrt(2) = 0.5
    0.5
    """
    needed = (*_SERIES_KEYS, "time", "value")
    _require_columns(samples, needed, "average_replicates")
    key = list(needed[:-1]) + [c for c in ("segment_start", "segment_end")
                               if c in samples.columns]
    v = pd.to_numeric(samples["value"], errors="coerce").to_numpy(dtype=float,
                                                                  na_value=np.nan)
    if not np.isfinite(v).all():
        pos = int(np.argmax(~np.isfinite(v)))
        raise DataError(
            f"average_replicates: 'value' must be finite; row at index {samples.index[pos]!r} "
            f"holds {samples['value'].iloc[pos]!r}; read the table with read_samples()"
        )
    if len(samples) == 0:
        raise DataError("average_replicates: the samples table has no rows")
    codes = samples.groupby(key, sort=True, dropna=False).ngroup().to_numpy()
    ng = int(codes.max()) + 1
    n = np.bincount(codes, minlength=ng)
    mean = np.bincount(codes, weights=v, minlength=ng) / n
    ss = np.bincount(codes, weights=(v - mean[codes]) ** 2, minlength=ng)
    with np.errstate(invalid="ignore", divide="ignore"):
        s_between = np.where(n >= 2, np.sqrt(ss / np.maximum(n - 1, 1)), np.nan)
        se_between = s_between / np.sqrt(n)
    _, first = np.unique(codes, return_index=True)

    skip = set(key) | {"value", "sd"} | set(_DROP_ON_AVERAGE)
    others = [c for c in samples.columns if c not in skip]
    varying = []
    if others:
        nun = samples[others].groupby(codes, sort=True).nunique(dropna=False)
        constant = (nun <= 1).all(axis=0)
        varying = [c for c in others if not constant[c]]
    dropped = varying + [c for c in _DROP_ON_AVERAGE if c in samples.columns
                         and c != "is_replicate_group"]
    out = samples.iloc[first][[c for c in samples.columns
                               if c in set(key) or (c in others and c not in varying)]]
    out = out.reset_index(drop=True).copy()
    out["value"] = mean
    if "sd" in samples.columns:
        s = pd.to_numeric(samples["sd"], errors="coerce").to_numpy(dtype=float,
                                                                   na_value=np.nan)
        given = np.isfinite(s)
        n_sd = np.bincount(codes, weights=given.astype(float), minlength=ng)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean_sd = np.bincount(codes, weights=np.where(given, s, 0.0), minlength=ng) / n_sd
            se_analytic = mean_sd / np.sqrt(n)
        out["sd"] = np.where(n >= 2, np.fmax(se_between, se_analytic), mean_sd)
    out["n_replicates"] = n
    out["sd_replicates"] = se_between
    cols = [c for c in samples.columns if c in out.columns]
    cols += [c for c in out.columns if c not in cols]
    out = out[cols]
    out.attrs = dict(samples.attrs)
    out.attrs["replicates_averaged"] = True
    out.attrs["columns_not_averaged"] = dropped
    return out


def _describe_series(frame: pd.DataFrame, limit: int = 20) -> str:
    combos = frame[list(_SERIES_KEYS)].drop_duplicates()
    items = [f"({r[0]}, {r[1]}, {r[2]})" for r in combos.itertuples(index=False)]
    more = f", ... ({len(items)} in all)" if len(items) > limit else ""
    return ", ".join(items[:limit]) + more


def series(samples: pd.DataFrame, subject=None, tissue=None, isotope=None, average=True):
    """Arrays ``(t, y, sd)`` of one series (one subject, tissue and isotope), sorted by time.

    A selection of one tissue and isotope that holds several subjects is one series when
    every subject was sampled at a single time: a destructive design (one animal per
    sample), as :meth:`TurnoverModel.fit` and :func:`~isoturnover.fit_each` take it. Its
    arrays hold one point per animal (an animal's analytic replicates averaged), so a time
    repeats when several animals were sampled at it. Fitting the selected rows as a frame
    (``model.fit(frame)``) gives the same fit and records the design; fitting these arrays
    warns about the repeated times, which arrays cannot tell from analytic replicates.

    Parameters
    ----------
    samples : pandas.DataFrame
        A samples table (as from :func:`read_samples`); not changed.
    subject, tissue, isotope : optional
        Select the series; a selector may be left out when the rest of the selection leaves
        only one value for it. Values are compared as text (``subject=3`` matches ``"3"``).
    average : bool, default True
        Average analytic replicates first (:func:`average_replicates`), so they are not
        counted as separate time points.

    Returns
    -------
    t, y : numpy.ndarray of float, shape (n,)
        Times (in ``samples.attrs["time_unit"]``) and δ values (‰), sorted by time (stable).
    sd : numpy.ndarray of float, shape (n,), or None
        1σ analytic sd of each point (of the mean, after averaging), or None when the table
        has no ``sd`` column or the series has no sd at all.

    Raises
    ------
    DataError
        When the selection is empty or holds several series (the message lists those that
        exist; several subjects of one tissue and isotope are one series only when each
        was sampled at a single time), or when some but not all points of the series have an
        sd.
    """
    _require_columns(samples, (*_SERIES_KEYS, "time", "value"), "series")
    chosen = {"subject": subject, "tissue": tissue, "isotope": isotope}
    mask = np.ones(len(samples), dtype=bool)
    for k, val in chosen.items():
        if val is not None:
            mask &= (samples[k].astype(str).str.strip() == str(val).strip()).to_numpy()
    given = ", ".join(f"{k}={v!r}" for k, v in chosen.items() if v is not None) or "(none)"
    if not mask.any():
        hint = ""
        if isotope is not None and str(isotope) not in ISOTOPE_CODES:
            hint = f" ({_unknown_isotope_text(isotope)})"
        raise DataError(
            f"series(): no rows match {given}{hint}; series in the table (subject, tissue, "
            f"isotope): {_describe_series(samples)}"
        )
    sel = samples[mask]
    n_series = len(sel[list(_SERIES_KEYS)].drop_duplicates())
    if n_series > 1:
        open_keys = [k for k in _SERIES_KEYS if sel[k].nunique(dropna=False) > 1]
        why = ""
        if open_keys == ["subject"]:
            # several animals of one tissue and isotope: a destructive design when each one
            # was sampled at a single time (replicates of one animal share their time)
            per = sel.groupby(sel["subject"].astype(str), sort=True)["time"].nunique()
            if int(per.max()) == 1:
                n_series = 1
            else:
                many = per[per > 1]
                shown = ", ".join(f"{k} is sampled at {int(v)} times"
                                  for k, v in many.iloc[:MAX_LISTED].items())
                why = (f" (several subjects are one series only in a destructive design, one "
                       f"sampling time per animal; here {shown})")
        if n_series > 1:
            raise DataError(
                f"series(): the selection {given} holds {n_series} series; choose one with "
                f"{', '.join(k + '=' for k in open_keys)}: {_describe_series(sel)}{why}"
            )
    if average:
        sel = average_replicates(sel)
    t = pd.to_numeric(sel["time"], errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    y = pd.to_numeric(sel["value"], errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    order = np.argsort(t, kind="stable")
    t, y = t[order], y[order]
    sd = None
    if "sd" in sel.columns:
        s = pd.to_numeric(sel["sd"], errors="coerce").to_numpy(dtype=float,
                                                               na_value=np.nan)[order]
        have = np.isfinite(s)
        if have.all():
            sd = s
        elif have.any():
            raise DataError(
                f"series(): {given}: {int((~have).sum())} of {s.size} points have no sd "
                f"(at times {t[~have][:MAX_LISTED].tolist()}); give an sd for every point "
                "or drop the 'sd' column"
            )
    return t, y, sd
