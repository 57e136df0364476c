r"""Times since the diet switch: a time column, or dates with switch dates.

:func:`time_column` turns the time column of a table into numbers, or -- when the table holds
dates -- the dates into times since the diet switch,

.. math::

    t = (\mathrm{date} - \mathrm{switch\ date}) / (1\ \mathrm{unit}),

with one switch date for the whole table (``switch_date=``) or one per group or subject
(``switch_dates=``: a mapping, a frame keyed by ``group`` and/or ``subject``, or a column of
the table). Bad cells go to the table's :class:`~isoturnover.tables.Issues` collector, so they
are reported with file, row and column like every other bad cell.

Dates are read without guessing: date cells of a workbook (or datetime values of a frame) as
they are, text in ISO 8601 (``2024-03-31``, optionally with a time such as
``2024-03-31T08:30``) as it is, and any other text only with ``date_format=`` (a strptime
format such as ``"%d/%m/%Y"``). A text date written with numbers in another order
(``03/04/2025``: the 3rd of April, or March 4?) without a format is refused for the whole
column, naming its first cell; a number in a date column is a bad cell (not a count of
nanoseconds or days). Switch dates given as arguments follow the same rules.
:mod:`isoturnover.data`
calls it for the samples, diets and masses tables; the generic reading of cells lives in
:mod:`isoturnover.tables`.
"""

from __future__ import annotations

import datetime as _dt
import re
import warnings
from collections.abc import Mapping

import numpy as np
import pandas as pd

from .errors import DataError
from .tables import (
    MAX_LISTED,
    Issues,
    Table,
    cell_text,
    missing_column,
    number_column,
    show_value,
)

__all__ = ["time_column", "check_date_format", "parse_date"]

_ONE_UNIT = {"d": pd.Timedelta(days=1), "h": pd.Timedelta(hours=1), "w": pd.Timedelta(weeks=1)}

# ISO 8601 calendar dates, with an optional time of day and offset (the forms read as is).
_ISO_DATE = re.compile(
    r"\d{4}-\d{2}-\d{2}(?:[T ]\d{2}:\d{2}(?::\d{2}(?:\.\d+)?)?(?:Z|[+-]\d{2}(?::?\d{2})?)?)?"
)
# Dates written with numbers only in another order (03/04/2025, 3.4.25, 2025/04/03...): day
# and month cannot be told apart without the writer's convention.
_NUMERIC_DATE = re.compile(r"(\d{1,4})([./-])(\d{1,2})\2(\d{1,4})(?:[T ,]+\d.*)?")


def check_date_format(date_format) -> str | None:
    """Check a ``date_format`` argument: None, or a :func:`~datetime.datetime.strptime` format.

    Parameters
    ----------
    date_format : str or None
        A format with ``%`` directives for the day, month and year, e.g. ``"%d/%m/%Y"`` (day
        first) or ``"%m/%d/%Y"`` (month first).

    Returns
    -------
    str or None
        ``date_format`` unchanged.

    Raises
    ------
    DataError
        When it is not a string with ``%`` directives.
    """
    if date_format is None:
        return None
    if not isinstance(date_format, str):
        raise DataError(
            "date_format must be a format such as '%d/%m/%Y' (day first) or '%m/%d/%Y' "
            f"(month first), or None; got {type(date_format).__name__}"
        )
    if "%" not in date_format:
        raise DataError(
            "date_format must be a format such as '%d/%m/%Y' (day first) or '%m/%d/%Y' "
            f"(month first) with strptime's % directives; got {date_format!r}"
        )
    return date_format


def _format_hint(text: str) -> str:
    """The ``date_format`` choices for a numeric date such as ``03/04/2025``."""
    m = _NUMERIC_DATE.fullmatch(text)
    if m is None:
        return "e.g. date_format='%d/%m/%Y' (day first) or '%m/%d/%Y' (month first)"
    a, sep, _, c = m.groups()
    if len(a) == 4:
        return f"e.g. date_format='%Y{sep}%m{sep}%d'"
    y = "%Y" if len(c) == 4 else "%y"
    return (f"date_format='%d{sep}%m{sep}{y}' (day first) or '%m{sep}%d{sep}{y}' "
            "(month first)")


def _ambiguous_text(value: str) -> str:
    return (f"{value!r} is not an ISO 8601 date (YYYY-MM-DD), and in dates written with "
            "numbers only day and month cannot be told apart (is 03/04 the 3rd of April or "
            f"March 4?); give {_format_hint(value)} (--date-format on the command line), or "
            "write the dates as YYYY-MM-DD")


def _is_date_object(v) -> bool:
    return isinstance(v, (_dt.date, np.datetime64)) and not pd.isna(v)


def parse_date(value, what: str, date_format=None) -> pd.Timestamp:
    """One date given as an argument: ISO 8601 as is, other text only with ``date_format``.

    Parameters
    ----------
    value : str, datetime.date, datetime.datetime, numpy.datetime64 or pandas.Timestamp
        The date.
    what : str
        The argument in messages (``"switch_date"``).
    date_format : str, optional
        Format of text dates that are not ISO 8601 (``"%d/%m/%Y"``).

    Returns
    -------
    pandas.Timestamp

    Raises
    ------
    DataError
        A number, text that is not a date, a day/month date without ``date_format`` or text
        that does not match it.
    """
    if isinstance(value, str):
        text = value.strip()
        if _ISO_DATE.fullmatch(text):
            try:
                return pd.Timestamp(text)
            except (TypeError, ValueError):
                raise DataError(f"{what}: {value!r} is not a valid date") from None
        if date_format is not None:
            try:
                return pd.Timestamp(pd.to_datetime(text, format=date_format))
            except (TypeError, ValueError):
                raise DataError(f"{what}: {value!r} does not match date_format="
                                f"{date_format!r}") from None
        if _NUMERIC_DATE.fullmatch(text):
            raise DataError(f"{what}: {_ambiguous_text(text)}")
        raise DataError(f"{what}: cannot read {value!r} as a date (use an ISO 8601 date such "
                        "as '2024-03-31', or give date_format=)")
    if _is_date_object(value):
        return pd.Timestamp(value)
    if value is None or (not isinstance(value, (str, bytes)) and pd.isna(value)):
        raise DataError(f"{what}: a date is required, got {value!r}")
    raise DataError(f"{what}: cannot read {value!r} as a date; give an ISO 8601 date such as "
                    "'2024-03-31' or a datetime")


def _dates(table: Table, issues: Issues, name: str, *, required: bool = True,
           date_format=None) -> pd.Series:
    """Parse a date column (datetime64); unparseable cells are recorded as bad.

    Date cells (Excel dates, datetime objects) are taken as they are; text in ISO 8601 is read
    as is; other text only with ``date_format``. Text dates written with numbers only in
    another order (``03/04/2025``) without a format are refused for the whole column (a
    :class:`~isoturnover.errors.DataError` naming the first cell): the day/month order is a
    property of the file, not of a row.
    """
    col = table.frame[name]
    if pd.api.types.is_datetime64_any_dtype(col.dtype):
        out = pd.Series(col.to_numpy(), index=col.index)
        blank = out.isna().to_numpy()
        if required:
            issues.add(blank, name, lambda i: "is blank; a date is required")
        return out
    text, blank = cell_text(col, table.clean)
    raw = col.to_numpy(dtype=object)
    n = len(col)
    if table.clean:
        is_text = ~blank
    else:
        is_text = ~blank & np.array([isinstance(v, str) for v in raw], dtype=bool)
    is_obj = ~blank & ~is_text & np.array([_is_date_object(v) for v in raw], dtype=bool)
    is_num = ~blank & ~is_text & ~is_obj
    iso = is_text & text.str.fullmatch(_ISO_DATE.pattern).to_numpy(dtype=bool)
    other = is_text & ~iso
    if date_format is None and other.any():
        numeric = other & text.str.fullmatch(_NUMERIC_DATE.pattern).to_numpy(dtype=bool)
        if numeric.any():
            pos = np.flatnonzero(numeric)
            first = int(pos[0])
            shown = table.rows_text(pos[:MAX_LISTED]) + (", ..." if pos.size > MAX_LISTED
                                                         else "")
            raise DataError(
                f"{table.label}, {table.row_name(first)}, column {table.col(name)}: "
                f"{_ambiguous_text(text.iat[first])}. {pos.size} cell"
                f"{'s' if pos.size > 1 else ''} of this column "
                f"{'are' if pos.size > 1 else 'is'} written this way ({shown})"
            )
    values = np.full(n, pd.NaT, dtype=object)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)   # pandas' "could not infer format"
        if iso.any():
            values[iso] = _to_datetimes(text[iso], "ISO8601")
        if other.any() and date_format is not None:
            values[other] = _to_datetimes(text[other], date_format)
    for i in np.flatnonzero(is_obj):
        values[i] = pd.Timestamp(raw[i])
    try:
        out = pd.Series(pd.to_datetime(pd.Series(values, index=col.index)), index=col.index)
    except (TypeError, ValueError):   # mixed time zones: kept as objects (refused later)
        out = pd.Series(values, index=col.index)
    parsed = ~pd.isna(out).to_numpy()
    bad_iso = iso & ~parsed
    issues.add(bad_iso, name, lambda i: f"{show_value(col.iat[i])} is not a valid date")
    if date_format is not None:
        issues.add(other & ~parsed, name, lambda i: (
            f"{show_value(col.iat[i])} does not match date_format={date_format!r}"))
    else:
        issues.add(other, name, lambda i: (
            f"{show_value(col.iat[i])} cannot be read as a date (use ISO dates such as "
            "2024-03-31, or give date_format=)"))
    issues.add(is_num, name, lambda i: _not_a_date(raw[i]))
    if required:
        issues.add(blank, name, lambda i: "is blank; a date is required")
    return out


def _not_a_date(v) -> str:
    if isinstance(v, (int, float, np.number)) and not isinstance(v, (bool, np.bool_)):
        return (f"{show_value(v)} is a number, not a date (a spreadsheet's day number? format "
                "the cells as dates, or write them as YYYY-MM-DD)")
    return f"{show_value(v)} cannot be read as a date (use ISO dates such as 2024-03-31)"


def _to_datetimes(text: pd.Series, fmt: str) -> np.ndarray:
    """Text to timestamps with one format (NaT where a cell does not match), as objects."""
    try:
        parsed = pd.to_datetime(text, format=fmt, errors="coerce")
        return parsed.astype(object).to_numpy()
    except (TypeError, ValueError):   # e.g. mixed UTC offsets: one cell at a time
        out = []
        for v in text:
            try:
                out.append(pd.to_datetime(v, format=fmt))
            except (TypeError, ValueError):
                out.append(pd.NaT)
        return np.array(out, dtype=object)


def _switch_times(table: Table, issues: Issues, dates: pd.Series, unit: str, *,
                  switch_date, switch_dates, keys: dict[str, pd.Series],
                  date_name: str, date_format=None) -> tuple[np.ndarray, dict]:
    """Times since the switch, in ``unit``, for each row's date; and attrs to record."""
    n = len(table)
    meta: dict = {}
    if switch_date is not None:
        sw = pd.Series([parse_date(switch_date, "switch_date", date_format)] * n, index=dates.index)
        meta["switch_date"] = sw.iat[0].isoformat()
    elif isinstance(switch_dates, str):
        if switch_dates not in table.frame.columns:
            raise DataError(
                f"switch_dates={switch_dates!r}: {table.label} has no such column; columns "
                f"are {list(table.frame.columns)}"
            )
        sw = _dates(table, issues, switch_dates, date_format=date_format)
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
        right["_sw"] = [parse_date(v, f"switch_dates row {i}", date_format)
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
        mapping = {str(k).strip(): parse_date(v, f"switch_dates[{k!r}]", date_format)
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
                date_col: str = "date", date_format=None):
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
    date_format : str, optional
        Format of text dates that are not ISO 8601, e.g. ``"%d/%m/%Y"`` (day first), for the
        date cells and the switch dates. ISO 8601 dates (``2024-03-31``, with an optional
        time) are read as they are; without a format, dates written with numbers in another
        order (``03/04/2025``) are refused: day and month cannot be told apart.

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
        column; a malformed ``switch_dates``; dates that cannot be subtracted (time zones);
        day/month dates without ``date_format``; a ``date_format`` that is not a format.
    """
    date_format = check_date_format(date_format)
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
        dates = _dates(table, issues, time_col, date_format=date_format)
        times, meta = _switch_times(table, issues, dates, unit, switch_date=switch_date,
                                    switch_dates=switch_dates, keys=keys,
                                    date_name=time_col, date_format=date_format)
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
        dates = _dates(table, issues, date_col, date_format=date_format)
        times, meta = _switch_times(table, issues, dates, unit, switch_date=switch_date,
                                    switch_dates=switch_dates, keys=keys,
                                    date_name=date_col, date_format=date_format)
        return times, dates, meta
    raise missing_column(table, time_col, what,
                         extra=f" (or {date_col!r} with switch_date=/switch_dates=)")
