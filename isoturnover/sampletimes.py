r"""Times since the diet switch: a time column, or dates with switch dates.

:func:`time_column` turns the time column of a table into numbers, or -- when the table holds
dates -- the dates into times since the diet switch,

.. math::

    t = (\mathrm{date} - \mathrm{switch\ date}) / (1\ \mathrm{unit}),

with one switch date for the whole table (``switch_date=``) or one per group or subject
(``switch_dates=``: a mapping, a frame keyed by ``group`` and/or ``subject``, or a column of
the table). Bad cells go to the table's :class:`~isoturnover.tables.Issues` collector, so they
are reported with file, row and column like every other bad cell. :mod:`isoturnover.data`
calls it for the samples, diets and masses tables; the generic reading of cells lives in
:mod:`isoturnover.tables`.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping

import numpy as np
import pandas as pd

from .errors import DataError
from .tables import Issues, Table, cell_text, missing_column, number_column, show_value

__all__ = ["time_column"]

_ONE_UNIT = {"d": pd.Timedelta(days=1), "h": pd.Timedelta(hours=1), "w": pd.Timedelta(weeks=1)}


def _dates(table: Table, issues: Issues, name: str, *, required: bool = True) -> pd.Series:
    """Parse a date column (datetime64); unparseable cells are recorded as bad."""
    col = table.frame[name]
    if pd.api.types.is_datetime64_any_dtype(col.dtype):
        out = pd.Series(col.to_numpy(), index=col.index)
        blank = out.isna().to_numpy()
        if required:
            issues.add(blank, name, lambda i: "is blank; a date is required")
        return out
    text, blank = cell_text(col, table.clean)
    obj = col.astype(object).where(~blank)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)   # pandas' "could not infer format"
        try:
            out = pd.to_datetime(obj, errors="coerce")
        except (TypeError, ValueError):
            out = pd.to_datetime(obj, errors="coerce", format="mixed")
    bad = out.isna().to_numpy() & ~blank
    issues.add(bad, name, lambda i: f"{show_value(col.iat[i])} cannot be read as a date (use ISO "
                                    "dates such as 2024-03-31)")
    if required:
        issues.add(blank, name, lambda i: "is blank; a date is required")
    return out


def _timestamp(value, what: str) -> pd.Timestamp:
    """One date given as an argument (``what`` names it in messages)."""
    try:
        ts = pd.Timestamp(value)
    except (TypeError, ValueError):
        raise DataError(f"{what}: cannot read {value!r} as a date (use e.g. '2024-03-31')"
                        ) from None
    if pd.isna(ts):
        raise DataError(f"{what}: a date is required, got {value!r}")
    return ts


def _switch_times(table: Table, issues: Issues, dates: pd.Series, unit: str, *,
                  switch_date, switch_dates, keys: dict[str, pd.Series],
                  date_name: str) -> tuple[np.ndarray, dict]:
    """Times since the switch, in ``unit``, for each row's date; and attrs to record."""
    n = len(table)
    meta: dict = {}
    if switch_date is not None:
        sw = pd.Series([_timestamp(switch_date, "switch_date")] * n, index=dates.index)
        meta["switch_date"] = sw.iat[0].isoformat()
    elif isinstance(switch_dates, str):
        if switch_dates not in table.frame.columns:
            raise DataError(
                f"switch_dates={switch_dates!r}: {table.label} has no such column; columns "
                f"are {list(table.frame.columns)}"
            )
        sw = _dates(table, issues, switch_dates)
        meta["switch_dates"] = f"column {switch_dates!r}"
    elif isinstance(switch_dates, pd.DataFrame):
        by = [c for c in ("group", "subject") if c in switch_dates.columns]
        if "switch_date" not in switch_dates.columns or not by:
            raise DataError(
                "switch_dates as a frame needs a 'switch_date' column and a 'group' and/or "
                f"'subject' column; got columns {list(switch_dates.columns)}"
            )
        missing = [c for c in by if c not in keys]
        if missing:
            raise DataError(
                f"switch_dates is keyed by {by}, but {table.label} has no column "
                f"{missing[0]!r}"
            )
        right = pd.DataFrame({c: cell_text(switch_dates[c])[0].to_numpy() for c in by})
        right["_sw"] = [_timestamp(v, f"switch_dates row {i}")
                        for i, v in enumerate(switch_dates["switch_date"])]
        if right.duplicated(subset=by).any():
            dup = right[right.duplicated(subset=by, keep=False)][by].drop_duplicates()
            raise DataError(
                f"switch_dates has more than one switch date for {dup.to_dict('records')}"
            )
        left = pd.DataFrame({c: keys[c].fillna("").to_numpy() for c in by})
        sw = pd.Series(left.merge(right, on=by, how="left")["_sw"].to_numpy(),
                       index=dates.index)
        lacking = sw.isna().to_numpy()
        issues.add(lacking, by[0], lambda i: (
            "no switch date in switch_dates for "
            + ", ".join(f"{c}={left[c].iat[i]!r}" for c in by)))
        meta["switch_dates"] = {
            " / ".join(str(r[c]) for c in by): r["_sw"].isoformat()
            for r in right.to_dict("records")}
    elif isinstance(switch_dates, Mapping):
        by = "group" if "group" in keys else "subject"
        mapping = {str(k).strip(): _timestamp(v, f"switch_dates[{k!r}]")
                   for k, v in switch_dates.items()}
        key = keys[by]
        sw = pd.Series(pd.to_datetime(key.map(mapping).astype(object)).to_numpy(),
                       index=dates.index)
        lacking = sw.isna().to_numpy()
        known = ", ".join(repr(k) for k in mapping)

        def why(i):
            if pd.isna(key.iat[i]):
                return f"is blank, so switch_dates (keyed by {by!r}) gives no switch date"
            return (f"no switch date for {by} {key.iat[i]!r} in switch_dates (it has {known}); "
                    f"switch_dates is keyed by {by!r}"
                    + (" because the table has a 'group' column" if by == "group" else ""))
        issues.add(lacking, by, why)
        meta["switch_dates"] = {k: v.isoformat() for k, v in mapping.items()}
        meta["switch_dates_by"] = by
    else:
        raise DataError(
            "switch_dates must be a mapping {group (or subject): date}, a frame with a "
            "'switch_date' column, or the name of a column holding each row's switch date; "
            f"got {type(switch_dates).__name__}"
        )
    try:
        delta = dates.to_numpy() - sw.to_numpy()
    except TypeError as exc:
        raise DataError(
            f"{table.label}, column {table.col(date_name)}: dates and switch date(s) cannot "
            f"be subtracted ({exc}); give both with or both without a time zone"
        ) from None
    times = (pd.to_timedelta(delta) / _ONE_UNIT[unit]).to_numpy(dtype=float, na_value=np.nan)
    return times, meta


def time_column(table: Table, issues: Issues, *, what: str, time_col: str,
                switch_date, switch_dates, unit: str, keys: dict[str, pd.Series],
                date_col: str = "date"):
    r"""Times since the diet switch: a time column, or dates with switch dates.

    From dates, :math:`t = (\mathrm{date} - \mathrm{switch\ date}) / (1\ \mathrm{unit})`.

    Parameters
    ----------
    table : Table
        The table.
    issues : Issues
        Collector of bad cells.
    what : str
        The table in messages (``"samples"``).
    time_col : str
        Name of the time column (``"time"``; ``"start"`` for diets).
    switch_date, switch_dates : optional
        One switch date for all rows, or one per group or subject (a mapping, a frame with
        ``switch_date`` and ``group``/``subject`` columns, or a column name), as in
        :func:`isoturnover.data.read_samples`.
    unit : {"d", "h", "w"}
        Time unit of the result.
    keys : dict of str to pandas.Series
        The parsed ``group`` and/or ``subject`` columns, to look switch dates up by.
    date_col : str, default "date"
        Name of the date column; when it equals ``time_col`` the column holds times, or dates
        when a switch date is given.

    Returns
    -------
    times : numpy.ndarray of float, shape (n_rows,)
        Times since the switch in ``unit``; NaN where a cell is bad.
    dates : pandas.Series of datetime64 or None
        The dates converted (None for times).
    meta : dict
        The switch dates used, for ``attrs``.

    Raises
    ------
    DataError
        Switch dates given twice, with a time column, or missing for a date column; neither
        column; a malformed ``switch_dates``; dates that cannot be subtracted (time zones).
    """
    cols = table.frame.columns
    given = switch_date is not None or switch_dates is not None
    if switch_date is not None and switch_dates is not None:
        raise DataError("give switch_date= (one date) or switch_dates= (one per group or "
                        "subject), not both")
    if time_col == date_col:          # diets: 'start' holds times, or dates when a switch given
        if time_col not in cols:
            raise missing_column(table, time_col, what)
        if not given:
            return number_column(table, issues, time_col, required=True), None, {}
        dates = _dates(table, issues, time_col)
        times, meta = _switch_times(table, issues, dates, unit, switch_date=switch_date,
                                    switch_dates=switch_dates, keys=keys,
                                    date_name=time_col)
        return times, dates, meta
    if time_col in cols:
        if given:
            raise DataError(
                f"{table.label} has a {time_col!r} column, so switch_date=/switch_dates= "
                f"have nothing to convert; drop them, or map the date column to 'date' and "
                f"remove {time_col!r}"
            )
        return number_column(table, issues, time_col, required=True), None, {}
    if date_col in cols:
        if not given:
            raise DataError(
                f"{table.label}: column {table.col(date_col)} holds dates; pass "
                "switch_date= (one date) or switch_dates= (one per group or subject) to turn "
                f"them into times since the switch, or give a {time_col!r} column"
            )
        dates = _dates(table, issues, date_col)
        times, meta = _switch_times(table, issues, dates, unit, switch_date=switch_date,
                                    switch_dates=switch_dates, keys=keys,
                                    date_name=date_col)
        return times, dates, meta
    raise missing_column(table, time_col, what,
                         extra=f" (or {date_col!r} with switch_date=/switch_dates=)")
