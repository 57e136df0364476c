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
measurement and are skipped (row numbers still count them).

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
import io
import math
import os
import re
import warnings
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import DataError, DataWarning

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
_ONE_UNIT = {"d": pd.Timedelta(days=1), "h": pd.Timedelta(hours=1), "w": pd.Timedelta(weeks=1)}

#: Units of the ``value`` column that :func:`read_samples` accepts.
VALUE_UNITS = ("delta", "atom_percent", "atom_percent_excess")

_ON_BAD_ROWS = ("raise", "drop")

#: Canonical column names of each table (targets allowed in ``columns=``).
SAMPLE_COLUMNS = ("subject", "tissue", "isotope", "time", "date", "value", "sd", "group",
                  "replicate", "segment_start", "segment_end")
DIET_COLUMNS = ("group", "subject", "isotope", "start", "value")
MASS_COLUMNS = ("subject", "group", "time", "date", "mass")

# Column names users often give to a canonical column (our own short list, common practice);
# used only to suggest a ``columns=`` mapping, never applied silently.
_SYNONYMS = {
    "subject": ("animal", "animal_id", "id", "individual", "fish", "bird", "specimen"),
    "time": ("day", "days", "hour", "hours", "week", "weeks", "t", "elapsed"),
    "value": ("delta", "d13c", "d15n", "d34s", "d2h", "d18o", "value_permil"),
    "sd": ("sigma", "stdev", "std", "sd_permil"),
    "mass": ("weight", "body_mass", "bodymass", "mass_g", "weight_g"),
    "start": ("start_time", "from", "begin", "time", "day"),
    "date": ("sampling_date", "sample_date"),
}

# Text that stands for "no value" in spreadsheets and exports (common practice).
_NA_MARKERS = ("nan", "na", "n/a", "#n/a", "null", "none", "<na>", "nat", "missing")
_NA_SPELLINGS = tuple(sorted({f(m) for m in _NA_MARKERS
                              for f in (str.lower, str.upper, str.capitalize)}
                             | {"NaN", "NaT", "N/a", "#N/A", "<NA>"}))

_MAX_LISTED = 10  # further bad rows named in an error message


# ------------------------------------------------------------------------------------------
# argument checks
# ------------------------------------------------------------------------------------------
def _check_choice(value, name: str, allowed) -> str:
    if not isinstance(value, str) or value not in allowed:
        raise DataError(
            f"{name} must be one of {', '.join(repr(a) for a in allowed)}; got {value!r}"
        )
    return value


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


# ------------------------------------------------------------------------------------------
# the raw table
# ------------------------------------------------------------------------------------------
class _Table:
    """Cells of one table with the names and row numbers needed for messages.

    ``frame`` has the stripped header names as columns; from a file every cell is text (or,
    from Excel, the cell's Python value), from a frame the cells are as given. ``rows`` holds
    the spreadsheet row number of each row (files) and ``labels`` the index labels (frames).
    """

    def __init__(self, frame: pd.DataFrame, label: str, source: str, rows, from_file: bool,
                 decimal_comma: bool = False, sheet: str | None = None):
        self.frame = frame
        self.label = label          # "samples.csv" or "book.xlsx, sheet 'Data'" or "<frame>"
        self.source = source        # for attrs["source"]
        self.rows = rows            # np.ndarray of int (files) or None
        self.labels = frame.index   # original index labels
        self.from_file = from_file
        self.decimal_comma = decimal_comma
        self.sheet = sheet
        self.original: dict[str, str] = {}   # canonical -> the user's column name
        self.clean = False          # True when every cell is already stripped text (CSV)

    def __len__(self) -> int:
        return len(self.frame)

    def row_name(self, pos: int) -> str:
        if self.from_file:
            return f"row {int(self.rows[pos])}"
        lab = self.labels[pos]
        return f"index {lab!r}" if isinstance(lab, str) else f"index {lab}"

    def rows_text(self, positions) -> str:
        """'rows 3, 5, 9' or 'index 0, 4'."""
        positions = list(positions)
        if self.from_file:
            nums = ", ".join(str(int(self.rows[p])) for p in positions)
            return ("row " if len(positions) == 1 else "rows ") + nums
        return "index " + ", ".join(self.row_name(p)[6:] for p in positions)

    def where(self, pos: int) -> str:
        return f"{self.label}, {self.row_name(pos)}"

    def col(self, name: str) -> str:
        """How a column is named in messages: the user's name, with the canonical one."""
        orig = self.original.get(name)
        return f"{orig!r} (mapped to {name!r})" if orig is not None else repr(name)

    def subset(self, keep: np.ndarray) -> _Table:
        t = _Table(self.frame[keep], self.label, self.source,
                   None if self.rows is None else self.rows[keep], self.from_file,
                   self.decimal_comma, self.sheet)
        t.original = dict(self.original)
        t.clean = self.clean
        return t


def _blank_cells(col: pd.Series) -> np.ndarray:
    """Blank cells of one column: missing, or text of only whitespace."""
    missing = col.isna().to_numpy()
    text = col.astype(object).where(~missing, "").astype(str).str.strip()
    return missing | (text == "").to_numpy()


def _excel_column_letter(j: int) -> str:
    s = ""
    j += 1
    while j:
        j, r = divmod(j - 1, 26)
        s = chr(65 + r) + s
    return s


def _from_grid(grid: pd.DataFrame, label: str, source: str, *, decimal_comma: bool = False,
               sheet: str | None = None) -> _Table:
    """A table from a grid of cells whose first non-blank row is the header."""
    grid = grid.reset_index(drop=True)
    grid.columns = range(grid.shape[1])
    if grid.shape[1] == 0 or grid.shape[0] == 0:
        raise DataError(f"{label} is empty: expected a header row and data rows")
    texts, blanks, clean = [], [], True
    for j in grid.columns:
        c = grid[j]
        if pd.api.types.is_string_dtype(c) and not c.isna().any():   # CSV text cells
            c = c.str.strip()
            texts.append(c)
            blanks.append((c == "").to_numpy())
        else:                                                              # Excel values
            texts.append(c)
            blanks.append(_blank_cells(c))
            clean = False
    grid = pd.concat(texts, axis=1, keys=list(grid.columns))
    blank = np.column_stack(blanks)
    row_blank = blank.all(axis=1)
    if row_blank.all():
        raise DataError(f"{label} is empty: it holds only blank rows")
    h = int(np.argmax(~row_blank))
    names = ["" if blank[h, j] else str(grid.iat[h, j]).strip() for j in range(grid.shape[1])]
    body = grid.iloc[h + 1:]
    rows = np.arange(h + 2, h + 2 + len(body))
    keep = ~row_blank[h + 1:]
    body, rows, body_blank = body[keep], rows[keep], blank[h + 1:][keep]
    if len(body) == 0:
        raise DataError(
            f"{label} has a header row (row {h + 1}) but no data rows below it"
        )
    use = []
    for j, nm in enumerate(names):
        if nm:
            use.append(j)
        elif not body_blank[:, j].all():
            first = rows[np.argmax(~body_blank[:, j])]
            raise DataError(
                f"{label}: column {j + 1} ({_excel_column_letter(j)}) has data (first on "
                f"row {first}) but no name in the header row {h + 1}; give it a name"
            )
    names = [names[j] for j in use]
    _check_duplicate_names(names, label, header_row=h + 1)
    body = body[use]
    body.columns = names
    body = body.reset_index(drop=True)
    table = _Table(body, label, source, rows, True, decimal_comma, sheet)
    table.clean = clean
    return table


def _check_duplicate_names(names, label: str, header_row: int | None = None) -> None:
    seen: dict[str, list[int]] = {}
    for j, nm in enumerate(names):
        seen.setdefault(nm, []).append(j + 1)
    dups = {nm: pos for nm, pos in seen.items() if len(pos) > 1}
    if dups:
        where = f" in the header row {header_row}" if header_row else ""
        desc = "; ".join(
            f"{nm!r} (columns {', '.join(map(str, pos))})" for nm, pos in dups.items()
        )
        raise DataError(
            f"{label}: duplicate column name(s){where}: {desc}; every column needs its own name"
        )


def _read_csv(path: Path, label: str) -> _Table:
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise DataError(f"cannot read file {label}: {exc.strerror or exc}") from None
    if not data:
        raise DataError(f"{label} is empty (0 bytes): expected a header row and data rows")
    nul = data.find(b"\x00")
    if nul >= 0:
        line = data[:nul].count(b"\n") + 1
        raise DataError(
            f"{label} is not UTF-8 text: it contains a NUL byte (byte {nul}, line {line}), so "
            "it is a binary file (an Excel workbook saved under a .csv name?) or UTF-16 text; "
            "save it as 'CSV UTF-8' (or pass an .xlsx file)"
        )
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[:exc.start].count(b"\n") + 1
        raise DataError(
            f"{label} is not UTF-8 text: byte 0x{data[exc.start]:02x} on line {line} is not "
            "valid UTF-8. If the file was saved as Latin-1/Windows-1252 (common for "
            "spreadsheet exports), save it again as 'CSV UTF-8', or read it with "
            "pandas.read_csv(path, encoding='latin-1') and pass the frame"
        ) from None
    if not text.strip():
        raise DataError(f"{label} is empty: it holds only blank lines")
    header = text.lstrip("\r\n\t ").split("\n", 1)[0]
    sep, decimal_comma = ",", False
    if ";" in header and "," not in header:
        sep, decimal_comma = ";", True
    elif "\t" in header and "," not in header and ";" not in header:
        sep = "\t"
    try:
        grid = pd.read_csv(io.StringIO(text), sep=sep, header=None, dtype=str,
                           keep_default_na=False, skip_blank_lines=False, index_col=False)
    except pd.errors.ParserError as exc:
        msg = str(exc).replace("Error tokenizing data. C error: ", "").strip()
        raise DataError(
            f"{label}: {msg} -- a row has more fields than the header row (delimiter "
            f"{sep!r}); quote fields that contain the delimiter (a decimal comma such as "
            "-21,3 in a comma-separated file splits a number in two)"
        ) from None
    return _from_grid(grid, label, str(path), decimal_comma=decimal_comma)


def _read_excel(path: Path, label: str, sheet) -> _Table:
    suffix = path.suffix.lower()
    if suffix == ".xls":
        try:
            book = pd.read_excel(path, sheet_name=None, header=None, dtype=object)
        except ImportError:
            raise DataError(
                f"{label}: reading old-style .xls workbooks needs the package xlrd "
                "(pip install xlrd); or save the sheet as .xlsx or 'CSV UTF-8'"
            ) from None
        except Exception as exc:  # noqa: BLE001 - any reader failure becomes a clear error
            raise DataError(f"{label} cannot be read as an Excel workbook: {exc}") from None
        names = list(book)
        name = _pick_sheet(names, sheet, label)
        return _from_grid(book[name], f"{label}, sheet {name!r}", str(path), sheet=name)
    try:
        import openpyxl
    except ImportError:
        raise DataError(
            f"{label}: reading Excel workbooks needs the package openpyxl "
            "(pip install openpyxl, or pip install 'isoturnover[excel]'); or save the sheet "
            "as 'CSV UTF-8'"
        ) from None
    try:
        wb = openpyxl.load_workbook(path, read_only=True, data_only=True)
    except Exception as exc:  # noqa: BLE001 - zip, xml or format errors all mean the same
        raise DataError(
            f"{label} cannot be read as an Excel workbook ({type(exc).__name__}: {exc})"
        ) from None
    try:
        name = _pick_sheet(wb.sheetnames, sheet, label)
        ws = wb[name]
        cells = list(ws.iter_rows(min_row=1, min_col=1, values_only=True))
    finally:
        wb.close()
    grid = pd.DataFrame(cells, dtype=object)
    return _from_grid(grid, f"{label}, sheet {name!r}", str(path), sheet=name)


def _pick_sheet(names, sheet, label: str) -> str:
    if sheet is None:
        return names[0]
    if isinstance(sheet, (int, np.integer)) and not isinstance(sheet, bool):
        if 0 <= sheet < len(names):
            return names[int(sheet)]
        raise DataError(
            f"{label}: sheet={sheet} is out of range; the workbook has {len(names)} sheet(s) "
            f"(0-based index): {names}"
        )
    if isinstance(sheet, str) and sheet in names:
        return sheet
    raise DataError(
        f"{label}: no sheet {sheet!r}; sheets are {names} (pass a name or a 0-based index)"
    )


def _load(path_or_frame, sheet) -> _Table:
    if isinstance(path_or_frame, pd.DataFrame):
        if sheet is not None:
            raise DataError("sheet= applies to Excel files only; a DataFrame was given")
        df = path_or_frame.copy()
        names = [str(c).strip() for c in df.columns]
        _check_duplicate_names(names, "<frame>")
        df.columns = names
        if len(df) == 0:
            raise DataError("<frame> has no rows")
        return _Table(df, "<frame>", "<frame>", None, False)
    if not isinstance(path_or_frame, (str, os.PathLike)):
        raise DataError(
            "path_or_frame must be a path to a CSV or Excel file or a pandas DataFrame; got "
            f"{type(path_or_frame).__name__}"
        )
    path = Path(path_or_frame)
    label = str(path_or_frame)
    if not path.exists():
        raise DataError(f"file not found: {label}")
    if path.is_dir():
        raise DataError(f"{label} is a directory, not a data file")
    if path.suffix.lower() in (".xlsx", ".xlsm", ".xls"):
        return _read_excel(path, label, sheet)
    if sheet is not None:
        raise DataError(f"sheet= applies to Excel files only; {label} is read as CSV text")
    return _read_csv(path, label)


def _suggest_column(name: str, available) -> str | None:
    avail = list(available)
    lower = {a.lower(): a for a in avail}
    if name.lower() in lower:
        return lower[name.lower()]
    for syn in _SYNONYMS.get(name, ()):
        if syn in lower:
            return lower[syn]
    close = difflib.get_close_matches(name.lower(), list(lower), n=1, cutoff=0.6)
    return lower[close[0]] if close else None


def _apply_columns(table: _Table, columns, allowed, what: str) -> None:
    """Rename the user's columns to canonical names in place (on the table's own copy)."""
    if columns is None:
        return
    if not isinstance(columns, Mapping):
        raise DataError(
            "columns must be a mapping {your column name: canonical name}, e.g. "
            f"{{'Animal': 'subject'}}; got {type(columns).__name__}"
        )
    have = list(table.frame.columns)
    targets: dict[str, str] = {}
    for src, dst in columns.items():
        if not isinstance(dst, str) or dst not in allowed:
            close = difflib.get_close_matches(str(dst), allowed, n=1, cutoff=0.6)
            did = f" (did you mean {close[0]!r}?)" if close else ""
            raise DataError(
                f"columns={{{src!r}: {dst!r}}}: {dst!r} is not a column of the {what} table"
                f"{did}; allowed targets: {', '.join(allowed)}"
            )
        if src not in have:
            sug = _suggest_column(str(src), have)
            did = f" (did you mean {sug!r}?)" if sug else ""
            raise DataError(
                f"columns={{{src!r}: {dst!r}}}: {table.label} has no column {src!r}{did}; "
                f"its columns are {have}"
            )
        if dst in targets:
            raise DataError(
                f"columns= maps both {targets[dst]!r} and {src!r} to {dst!r}; map one column "
                "to each name"
            )
        targets[dst] = src
    renamed = {src: dst for dst, src in targets.items()}
    for dst, src in targets.items():
        if dst in have and dst not in renamed and dst != src:
            raise DataError(
                f"columns= maps {src!r} to {dst!r}, but {table.label} already has a column "
                f"{dst!r}; rename or drop one of them"
            )
    table.frame = table.frame.rename(columns=renamed)
    for dst, src in targets.items():
        if src != dst:
            table.original[dst] = src


def _missing_column(table: _Table, name: str, what: str, extra: str = "") -> DataError:
    have = list(table.frame.columns)
    sug = _suggest_column(name, [c for c in have if c not in table.original])
    did = (f"; did you mean {sug!r}? (rename it or pass columns={{{sug!r}: {name!r}}})"
           if sug else f"; pass columns={{'your name': {name!r}}} to map another column")
    return DataError(
        f"{table.label}: missing required column {name!r}{extra} of the {what} table{did}; "
        f"columns are {have}"
    )


# ------------------------------------------------------------------------------------------
# row-level validation (vectorised: one boolean mask per check)
# ------------------------------------------------------------------------------------------
class _Issues:
    """Bad cells found by vectorised checks: one mask per (column, reason)."""

    def __init__(self, table: _Table):
        self.table = table
        self.checks: list[tuple[np.ndarray, str, object]] = []

    def add(self, mask, column: str, reason) -> None:
        """Record the rows where ``mask`` is True; ``reason(pos)`` describes one of them."""
        mask = np.asarray(mask, dtype=bool)
        if mask.any():
            self.checks.append((mask, column, reason))

    def bad(self) -> np.ndarray:
        out = np.zeros(len(self.table), dtype=bool)
        for mask, _, _ in self.checks:
            out |= mask
        return out

    def resolve(self, on_bad_rows: str) -> np.ndarray:
        """Raise on the first bad row, or drop bad rows with one warning; the rows kept."""
        bad = self.bad()
        if not bad.any():
            return ~bad
        t = self.table
        if on_bad_rows == "raise":
            first = int(np.argmax(bad))
            mask, column, reason = next(c for c in self.checks if c[0][first])
            further = np.flatnonzero(bad)[1:]
            msg = f"{t.where(first)}, column {t.col(column)}: {reason(first)}"
            if further.size:
                shown = t.rows_text(further[:_MAX_LISTED])
                more = ", ..." if further.size > _MAX_LISTED else ""
                msg += (f". {further.size} further bad row{'s' if further.size > 1 else ''}"
                        f" ({shown}{more})")
            msg += ("; correct the data, or pass on_bad_rows='drop' to drop bad rows with a "
                    "warning")
            raise DataError(msg)
        if bad.all():
            first = 0
            mask, column, reason = next(c for c in self.checks if c[0][first])
            raise DataError(
                f"{t.label}: every row is bad, so dropping them would leave no data (first: "
                f"{t.row_name(first)}, column {t.col(column)}: {reason(first)})"
            )
        positions = np.flatnonzero(bad)
        per_row: dict[int, list[str]] = {int(p): [] for p in positions}
        for mask, column, reason in self.checks:
            for p in np.flatnonzero(mask):
                per_row[int(p)].append(f"column {t.col(column)}: {reason(int(p))}")
        listing = "; ".join(f"{t.row_name(p)} ({'; '.join(r)})" for p, r in per_row.items())
        warnings.warn(
            f"{t.label}: dropped {positions.size} of {len(t)} rows as asked "
            f"(on_bad_rows='drop'): {listing}",
            DataWarning, stacklevel=3,
        )
        return ~bad


def _text(col: pd.Series, clean: bool = False) -> tuple[pd.Series, np.ndarray]:
    """Stripped text of each cell ('' where blank) and the blank mask.

    ``clean=True`` says the cells are already stripped text without missing values (a CSV
    read by :func:`_from_grid`), which saves a second pass over every cell.
    """
    if clean:
        return col, (col == "").to_numpy()
    missing = col.isna().to_numpy()
    src = col
    if pd.api.types.is_float_dtype(col.dtype):
        v = col.to_numpy(dtype=float, na_value=np.nan)
        fin = v[np.isfinite(v)]
        if fin.size and np.all(fin == np.round(fin)) and np.all(np.abs(fin) < 2.0**53):
            src = col.astype("Int64")           # 1.0 -> "1" for ids read as floats
    text = src.astype(object).where(~missing, "").astype(str).str.strip()
    text.index = col.index
    blank = missing | (text == "").to_numpy()
    return text, blank


def _strings(table: _Table, issues: _Issues, name: str, *, required: bool) -> pd.Series:
    """A text column (stripped); missing where blank. Blank is an error if required."""
    text, blank = _text(table.frame[name], table.clean)
    marker = ~blank & text.isin(_NA_SPELLINGS).to_numpy()
    if required:
        issues.add(blank, name, lambda i: "is blank; a value is required")
        issues.add(marker, name,
                   lambda i: f"{text.iat[i]!r} is a missing-value marker; a value is required")
    return text.where(~(blank | marker))


def _show(v) -> str:
    """repr of a cell value without numpy's type wrapper (np.float64(1.0) -> 1.0)."""
    if isinstance(v, np.generic):
        v = v.item()
    return repr(v)


def _number_reason(raw) -> str:
    s = str(raw).strip()
    if re.fullmatch(r"[-+−]?\d*,\d+", s):
        return (f"{_show(raw)} is not a number: it looks like a decimal comma; use '.' for "
                "decimals in a comma-separated file (a file separated by ';' is read with "
                "decimal commas)")
    if "−" in s:
        return f"{_show(raw)} is not a number: it holds a Unicode minus sign '−'; use '-'"
    return f"{_show(raw)} is not a number"


def _numbers(table: _Table, issues: _Issues, name: str, *, required: bool,
             positive: bool = False) -> np.ndarray:
    """A numeric column as floats (NaN where blank or bad), with its checks recorded."""
    col = table.frame[name]
    if pd.api.types.is_numeric_dtype(col.dtype) and not pd.api.types.is_bool_dtype(col.dtype):
        vals = col.to_numpy(dtype=float, na_value=np.nan).copy()
        blank = np.isnan(vals)
        bad_text = np.zeros(len(vals), dtype=bool)
        marker = bad_text
        raw = col
    else:
        text, blank = _text(col, table.clean)
        conv = text.str.replace(",", ".", regex=False) if table.decimal_comma else text
        vals = pd.to_numeric(conv.where(~blank), errors="coerce").to_numpy(
            dtype=float, na_value=np.nan).copy()
        nan = np.isnan(vals)
        marker = nan & ~blank & text.isin(_NA_SPELLINGS).to_numpy()
        bad_text = nan & ~blank & ~marker
        raw = col
        issues.add(bad_text, name, lambda i: _number_reason(raw.iat[i]))
        if not required:
            blank = blank | marker
    if required:
        issues.add(blank, name, lambda i: "is blank (or NaN); a number is required")
        issues.add(marker, name,
                   lambda i: f"{_show(raw.iat[i])} is a missing-value marker; a number is required")
    inf = np.isinf(vals)
    issues.add(inf, name, lambda i: f"{_show(raw.iat[i])} is not finite; a finite number is needed")
    if positive:
        nonpos = np.isfinite(vals) & (vals <= 0)
        issues.add(nonpos, name, lambda i: f"must be > 0, got {vals[i]:g}")
    vals[inf | bad_text] = np.nan
    return vals


def _isotopes(table: _Table, issues: _Issues) -> pd.Series:
    codes = _strings(table, issues, "isotope", required=True)
    present = codes.notna().to_numpy()
    unknown = present & ~codes.isin(ISOTOPE_CODES).to_numpy()
    issues.add(unknown, "isotope", lambda i: _unknown_isotope_text(codes.iat[i]))
    return codes


def _dates(table: _Table, issues: _Issues, name: str, *, required: bool = True) -> pd.Series:
    """Parse a date column (datetime64); unparseable cells are recorded as bad."""
    col = table.frame[name]
    if pd.api.types.is_datetime64_any_dtype(col.dtype):
        out = pd.Series(col.to_numpy(), index=col.index)
        blank = out.isna().to_numpy()
        if required:
            issues.add(blank, name, lambda i: "is blank; a date is required")
        return out
    text, blank = _text(col, table.clean)
    obj = col.astype(object).where(~blank)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)   # pandas' "could not infer format"
        try:
            out = pd.to_datetime(obj, errors="coerce")
        except (TypeError, ValueError):
            out = pd.to_datetime(obj, errors="coerce", format="mixed")
    bad = out.isna().to_numpy() & ~blank
    issues.add(bad, name, lambda i: f"{_show(col.iat[i])} cannot be read as a date (use ISO "
                                    "dates such as 2024-03-31)")
    if required:
        issues.add(blank, name, lambda i: "is blank; a date is required")
    return out


def _timestamp(value, what: str) -> pd.Timestamp:
    try:
        ts = pd.Timestamp(value)
    except (TypeError, ValueError):
        raise DataError(f"{what}: cannot read {value!r} as a date (use e.g. '2024-03-31')"
                        ) from None
    if pd.isna(ts):
        raise DataError(f"{what}: a date is required, got {value!r}")
    return ts


def _switch_times(table: _Table, issues: _Issues, dates: pd.Series, unit: str, *,
                  switch_date, switch_dates, keys: dict[str, pd.Series],
                  date_column: str) -> tuple[np.ndarray, dict]:
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
        right = pd.DataFrame({c: _text(switch_dates[c])[0].to_numpy() for c in by})
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
            f"{table.label}, column {table.col(date_column)}: dates and switch date(s) cannot "
            f"be subtracted ({exc}); give both with or both without a time zone"
        ) from None
    times = (pd.to_timedelta(delta) / _ONE_UNIT[unit]).to_numpy(dtype=float, na_value=np.nan)
    return times, meta


def _time_column(table: _Table, issues: _Issues, *, what: str, time_col: str,
                 switch_date, switch_dates, unit: str, keys: dict[str, pd.Series],
                 date_col: str = "date"):
    """(times, dates or None, attrs) from a time column or a date column with switch dates."""
    cols = table.frame.columns
    given = switch_date is not None or switch_dates is not None
    if switch_date is not None and switch_dates is not None:
        raise DataError("give switch_date= (one date) or switch_dates= (one per group or "
                        "subject), not both")
    if time_col == date_col:          # diets: 'start' holds times, or dates when a switch given
        if time_col not in cols:
            raise _missing_column(table, time_col, what)
        if not given:
            return _numbers(table, issues, time_col, required=True), None, {}
        dates = _dates(table, issues, time_col)
        times, meta = _switch_times(table, issues, dates, unit, switch_date=switch_date,
                                    switch_dates=switch_dates, keys=keys,
                                    date_column=time_col)
        return times, dates, meta
    if time_col in cols:
        if given:
            raise DataError(
                f"{table.label} has a {time_col!r} column, so switch_date=/switch_dates= "
                f"have nothing to convert; drop them, or map the date column to 'date' and "
                f"remove {time_col!r}"
            )
        return _numbers(table, issues, time_col, required=True), None, {}
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
                                    date_column=date_col)
        return times, dates, meta
    raise _missing_column(table, time_col, what,
                          extra=f" (or {date_col!r} with switch_date=/switch_dates=)")


def _warn_duplicates(out: pd.DataFrame, table: _Table, ignore=()) -> None:
    cols = [c for c in out.columns if c not in ignore]
    dup = out.duplicated(subset=cols, keep=False).to_numpy()
    if dup.any():
        pos = np.flatnonzero(dup)
        warnings.warn(
            f"{table.label}: {pos.size} rows are exact duplicates of another row "
            f"({table.rows_text(pos)}); they are kept, not merged -- check for a double "
            "entry (analytic replicates are best told apart by a 'replicate' column)",
            DataWarning, stacklevel=3,
        )


def _extras(table: _Table, canonical) -> dict[str, pd.Series]:
    """Columns that are not canonical, kept; from files, numeric-looking ones become numbers."""
    out = {}
    for c in table.frame.columns:
        if c in canonical:
            continue
        col = table.frame[c]
        if table.from_file:
            text, blank = _text(col, table.clean)
            conv = text.str.replace(",", ".", regex=False) if table.decimal_comma else text
            num = pd.to_numeric(conv.where(~blank), errors="coerce")
            if (num.notna().to_numpy() | blank).all() and not blank.all():
                col = num.astype(float)
            else:
                col = col.where(~blank)
        out[c] = col
    return out


def _finish(out: pd.DataFrame, table: _Table, keep: np.ndarray, attrs: dict) -> pd.DataFrame:
    out.index = table.labels[keep] if not table.from_file else pd.RangeIndex(int(keep.sum()))
    out.attrs = attrs
    return out


def _base_attrs(table: _Table, what: str, unit: str) -> dict:
    attrs = {"table": what, "source": table.source, "time_unit": unit}
    if table.sheet is not None:
        attrs["sheet"] = table.sheet
    return attrs


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
                   table: _Table, issues: _Issues):
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
                 sheet=None) -> pd.DataFrame:
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
        (blank, non-numeric, not finite, unknown isotope code, ``sd`` ≤ 0, unreadable date),
        bad arguments.

    Warns
    -----
    DataWarning
        Exact duplicate rows (kept, not merged); rows dropped with ``on_bad_rows="drop"``.

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
    _check_choice(on_bad_rows, "on_bad_rows", _ON_BAD_ROWS)
    tu = _time_unit(time_unit)
    _check_choice(unit, "unit", VALUE_UNITS)
    if unit == "atom_percent_excess" and baseline is None:
        raise DataError("unit='atom_percent_excess' needs baseline= (δ in ‰ of the unenriched "
                        "material: a number, or a mapping isotope code -> δ)")
    if unit != "atom_percent_excess" and baseline is not None:
        raise DataError(f"baseline= applies only with unit='atom_percent_excess'; got "
                        f"unit={unit!r}")
    table = _load(path_or_frame, sheet)
    _apply_columns(table, columns, SAMPLE_COLUMNS, "samples")
    cols = table.frame.columns
    for name in ("subject", "tissue", "isotope"):
        if name not in cols:
            raise _missing_column(table, name, "samples")
    if "value" not in cols:
        raise _missing_column(table, "value", "samples")
    if "time" not in cols and "date" not in cols:
        raise _missing_column(table, "time", "samples",
                              extra=" (or 'date' with switch_date=/switch_dates=)")

    issues = _Issues(table)
    data: dict[str, object] = {}
    data["subject"] = _strings(table, issues, "subject", required=True)
    data["tissue"] = _strings(table, issues, "tissue", required=True)
    codes = _isotopes(table, issues)
    data["isotope"] = codes
    if "group" in cols:
        data["group"] = _strings(table, issues, "group", required=False)
    keys = {k: data[k] for k in ("group", "subject") if k in data}
    times, dates, meta = _time_column(table, issues, what="samples", time_col="time",
                                      switch_date=switch_date, switch_dates=switch_dates,
                                      unit=tu, keys=keys)
    data["time"] = times
    if dates is not None:
        data["date"] = dates.to_numpy()
    values = _numbers(table, issues, "value", required=True)
    sd = _numbers(table, issues, "sd", required=False, positive=True) if "sd" in cols else None
    for name in ("segment_start", "segment_end"):
        if name in cols:
            data[name] = _numbers(table, issues, name, required=False)
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
    for c, col in _extras(table, SAMPLE_COLUMNS).items():
        out[c] = _take(col, keep)
    if original is not None:
        out["value_original"] = original[0][keep]
        if original[1] is not None:
            out["sd_original"] = original[1][keep]
    frame = pd.DataFrame(out)
    kept = table.subset(keep)
    _warn_duplicates(frame, kept)
    rep_key = ["subject", "tissue", "isotope", "time"] + [
        c for c in ("segment_start", "segment_end") if c in frame.columns]
    frame["is_replicate_group"] = frame.duplicated(subset=rep_key, keep=False).to_numpy()
    return _finish(frame, table, keep, attrs)


def _take(col, keep: np.ndarray):
    """The kept rows of a column (a Series keeps its dtype, with a fresh RangeIndex)."""
    if isinstance(col, pd.Series):
        return col.iloc[np.flatnonzero(keep)].reset_index(drop=True)
    return np.asarray(col)[keep]


def _replicate_ids(col: pd.Series, clean: bool = False) -> np.ndarray:
    """Replicate ids: numbers when every given id is a number, else text (missing if blank)."""
    if pd.api.types.is_numeric_dtype(col.dtype):
        return col.to_numpy()
    text, blank = _text(col, clean)
    num = pd.to_numeric(text.where(~blank), errors="coerce")
    if (num.notna().to_numpy() | blank).all() and not blank.all():
        return num.to_numpy(dtype=float, na_value=np.nan)
    return text.where(~blank).to_numpy()


def read_diets(path_or_frame, *, columns=None, time_unit="d", switch_date=None,
               switch_dates=None, on_bad_rows="raise", sheet=None) -> pd.DataFrame:
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
    _check_choice(on_bad_rows, "on_bad_rows", _ON_BAD_ROWS)
    tu = _time_unit(time_unit)
    table = _load(path_or_frame, sheet)
    _apply_columns(table, columns, DIET_COLUMNS, "diets")
    cols = table.frame.columns
    by = [c for c in ("group", "subject") if c in cols]
    if not by:
        raise _missing_column(table, "group", "diets", extra=" (or 'subject')")
    if "isotope" not in cols:
        raise _missing_column(table, "isotope", "diets")
    if "value" not in cols:
        raise _missing_column(table, "value", "diets")
    issues = _Issues(table)
    data: dict[str, object] = {c: _strings(table, issues, c, required=True) for c in by}
    codes = _isotopes(table, issues)
    data["isotope"] = codes
    starts, dates, meta = _time_column(table, issues, what="diets", time_col="start",
                                       date_col="start", switch_date=switch_date,
                                       switch_dates=switch_dates, unit=tu,
                                       keys={c: data[c] for c in by})
    data["start"] = starts
    if dates is not None:
        data["start_date"] = dates.to_numpy()
    data["value"] = _numbers(table, issues, "value", required=False)
    keep = issues.resolve(on_bad_rows)
    out = {k: _take(v, keep) for k, v in data.items()}
    for c, col in _extras(table, DIET_COLUMNS).items():
        out[c] = _take(col, keep)
    frame = pd.DataFrame(out)
    kept = table.subset(keep)
    _check_diet_order(frame, kept, by)
    _warn_duplicates(frame, kept)
    attrs = _base_attrs(table, "diets", tu)
    attrs["value_unit"] = "delta"
    attrs.update(meta)
    return _finish(frame, table, keep, attrs)


def _check_diet_order(frame: pd.DataFrame, table: _Table, by: list[str]) -> None:
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
                switch_dates=None, on_bad_rows="raise", sheet=None) -> pd.DataFrame:
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
    _check_choice(on_bad_rows, "on_bad_rows", _ON_BAD_ROWS)
    tu = _time_unit(time_unit)
    table = _load(path_or_frame, sheet)
    _apply_columns(table, columns, MASS_COLUMNS, "masses")
    cols = table.frame.columns
    if "subject" not in cols:
        raise _missing_column(table, "subject", "masses")
    if "mass" not in cols:
        raise _missing_column(table, "mass", "masses")
    issues = _Issues(table)
    data: dict[str, object] = {"subject": _strings(table, issues, "subject", required=True)}
    if "group" in cols:
        data["group"] = _strings(table, issues, "group", required=False)
    keys = {k: data[k] for k in ("group", "subject") if k in data}
    times, dates, meta = _time_column(table, issues, what="masses", time_col="time",
                                      switch_date=switch_date, switch_dates=switch_dates,
                                      unit=tu, keys=keys)
    data["time"] = times
    if dates is not None:
        data["date"] = dates.to_numpy()
    data["mass"] = _numbers(table, issues, "mass", required=True, positive=True)
    keep = issues.resolve(on_bad_rows)
    out = {k: _take(v, keep) for k, v in data.items()}
    for c, col in _extras(table, MASS_COLUMNS).items():
        out[c] = _take(col, keep)
    frame = pd.DataFrame(out)
    _warn_duplicates(frame, table.subset(keep))
    attrs = _base_attrs(table, "masses", tu)
    attrs.update(meta)
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
        A new frame sorted by subject, tissue, isotope and time, with a RangeIndex and the
        input's attrs (plus ``attrs["replicates_averaged"] = True``).

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
        exist), or when some but not all points of the series have an sd.
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
        raise DataError(
            f"series(): the selection {given} holds {n_series} series; choose one with "
            f"{', '.join(k + '=' for k in open_keys)}: {_describe_series(sel)}"
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
                f"(at times {t[~have][:_MAX_LISTED].tolist()}); give an sd for every point "
                "or drop the 'sd' column"
            )
    return t, y, sd
