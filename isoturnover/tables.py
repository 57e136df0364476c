"""Generic reading of tables: files and frames to a located table, cells to values.

:func:`load_table` turns a CSV file, an Excel workbook or a frame into a :class:`Table`: the
cells, with the file, sheet and row number of every row as a spreadsheet shows it (header =
row 1; for a frame, the index label). :func:`apply_columns` maps the user's column names,
:func:`missing_column` suggests a mapping. Cells are read as text, so that a blank cell, a
word where a number belongs and a missing-value marker can be told apart;
:func:`text_column` and :func:`number_column` parse one column each and record every bad
cell in an :class:`Issues` collector, whose :meth:`Issues.resolve` raises on the first bad
row (naming file, row, column and value) or drops the bad rows with one
:class:`~isoturnover.errors.DataWarning`. Dates and switch dates become times in
:mod:`isoturnover.sampletimes`; :mod:`isoturnover.data` builds its readers on these pieces.
"""

from __future__ import annotations

import difflib
import io
import os
import re
import warnings
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import DataError, DataWarning

__all__ = [
    "MAX_LISTED",
    "Table",
    "Issues",
    "load_table",
    "apply_columns",
    "missing_column",
    "cell_text",
    "extra_columns",
    "missing_cells",
    "text_column",
    "number_column",
    "show_value",
    "warn_duplicate_rows",
    "warn_partly_blank",
]

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

#: How many further bad rows an error message names by their row numbers.
MAX_LISTED = 10


# ------------------------------------------------------------------------------------------
# the raw table
# ------------------------------------------------------------------------------------------
class Table:
    """Cells of one table with the names and row numbers needed for messages.

    Parameters
    ----------
    frame : pandas.DataFrame
        Cells with the stripped header names as columns: text from a CSV file, the cell
        values from Excel, as given from a frame.
    label : str
        The table in messages: ``"samples.csv"``, ``"book.xlsx, sheet 'Data'"``,
        ``"<frame>"``.
    source : str
        The path (or ``"<frame>"``) for ``attrs["source"]``.
    rows : numpy.ndarray of int or None
        Spreadsheet row number of each row (file); None for a frame (index labels).
    from_file : bool
        True when read from a file.
    decimal_comma : bool, default False
        Numbers use a decimal comma (a ``;``-separated CSV file).
    sheet : str, optional
        The Excel sheet read.

    Attributes
    ----------
    labels : pandas.Index
        The index labels of ``frame`` as given.
    original : dict of str to str
        Canonical name → the user's name of each column mapped by :func:`apply_columns`.
    clean : bool
        Every cell is stripped text without missing values (a CSV file).
    """

    def __init__(self, frame: pd.DataFrame, label: str, source: str, rows, from_file: bool,
                 decimal_comma: bool = False, sheet: str | None = None):
        self.frame = frame
        self.label = label
        self.source = source
        self.rows = rows
        self.labels = frame.index
        self.from_file = from_file
        self.decimal_comma = decimal_comma
        self.sheet = sheet
        self.original: dict[str, str] = {}
        self.clean = False

    def __len__(self) -> int:
        return len(self.frame)

    def row_name(self, pos: int) -> str:
        """How messages name the row at ``pos``.

        Parameters
        ----------
        pos : int
            0-based position of the row in ``frame``.

        Returns
        -------
        str
            ``"row 7"`` (file: spreadsheet row) or ``"index 'a'"`` (frame: index label).
        """
        if self.from_file:
            return f"row {int(self.rows[pos])}"
        lab = self.labels[pos]
        return f"index {lab!r}" if isinstance(lab, str) else f"index {lab}"

    def rows_text(self, positions) -> str:
        """How messages name several rows.

        Parameters
        ----------
        positions : iterable of int
            0-based positions of the rows in ``frame``.

        Returns
        -------
        str
            ``"row 3"``, ``"rows 3, 5, 9"`` (file) or ``"index 0, 4"`` (frame).
        """
        positions = list(positions)
        if self.from_file:
            nums = ", ".join(str(int(self.rows[p])) for p in positions)
            return ("row " if len(positions) == 1 else "rows ") + nums
        return "index " + ", ".join(self.row_name(p)[6:] for p in positions)

    def _where(self, pos: int) -> str:
        """The table and the row at ``pos`` (0-based): ``"samples.csv, row 7"``."""
        return f"{self.label}, {self.row_name(pos)}"

    def col(self, name: str) -> str:
        """How messages name a column.

        Parameters
        ----------
        name : str
            Canonical column name.

        Returns
        -------
        str
            ``"'Animal' (mapped to 'subject')"`` for a mapped column, else ``"'subject'"``.
        """
        orig = self.original.get(name)
        return f"{orig!r} (mapped to {name!r})" if orig is not None else repr(name)

    def subset(self, keep: np.ndarray) -> Table:
        """The table of the kept rows (row numbers and column mapping kept).

        Parameters
        ----------
        keep : numpy.ndarray of bool, shape (n_rows,)
            True for the rows to keep.

        Returns
        -------
        Table
            A new table; this one is not changed.
        """
        t = Table(self.frame[keep], self.label, self.source,
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
               sheet: str | None = None) -> Table:
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
    table = Table(body, label, source, rows, True, decimal_comma, sheet)
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


def _read_csv(path: Path, label: str) -> Table:
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


def _read_excel(path: Path, label: str, sheet) -> Table:
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


def load_table(path_or_frame, sheet) -> Table:
    """Read a CSV file, an Excel workbook or a frame into a :class:`Table`.

    A CSV file is UTF-8 text separated by ``,``, by ``;`` (with decimal commas) when its
    header has no ``,``, or by tabs; its first non-blank row is the header and blank rows
    are skipped (still counted in row numbers). ``.xlsx``/``.xlsm`` need openpyxl, ``.xls``
    needs xlrd.

    Parameters
    ----------
    path_or_frame : str, path-like or pandas.DataFrame
        The file, or a frame (copied, never changed).
    sheet : str or int or None
        Excel sheet name or 0-based index; None for the first sheet (Excel only).

    Returns
    -------
    Table
        The cells with their file, sheet and row numbers.

    Raises
    ------
    DataError
        Missing, unreadable, binary or non-UTF-8 file; no data rows; a column with data but
        no name; duplicate column names; a row longer than the header; a bad ``sheet``.
    """
    if isinstance(path_or_frame, pd.DataFrame):
        if sheet is not None:
            raise DataError("sheet= applies to Excel files only; a DataFrame was given")
        df = path_or_frame.copy()
        names = [str(c).strip() for c in df.columns]
        _check_duplicate_names(names, "<frame>")
        df.columns = names
        if len(df) == 0:
            raise DataError("<frame> has no rows")
        return Table(df, "<frame>", "<frame>", None, False)
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


def apply_columns(table: Table, columns, allowed, what: str) -> None:
    """Rename the user's columns to canonical names, in ``table`` (on its own copy).

    Parameters
    ----------
    table : Table
        The table; its ``frame`` and ``original`` are updated.
    columns : mapping of str to str or None
        The user's column name → canonical name; None changes nothing.
    allowed : sequence of str
        The canonical names (allowed targets).
    what : str
        The table in messages (``"samples"``).

    Raises
    ------
    DataError
        ``columns`` not a mapping; an unknown target or source (with a suggestion); two
        sources for one target; a target the table already has as another column.
    """
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


def missing_column(table: Table, name: str, what: str, extra: str = "") -> DataError:
    """The error for a missing required column, with a suggested ``columns=`` mapping.

    Parameters
    ----------
    table : Table
        The table.
    name : str
        Canonical name of the missing column.
    what : str
        The table in messages (``"samples"``).
    extra : str, optional
        Text after the column name, e.g. ``" (or 'subject')"``.

    Returns
    -------
    DataError
        Names the table, the column, a close or customary column name, and the columns.
    """
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
class Issues:
    """Bad cells found by vectorised checks: one row mask per (column, reason).

    Parameters
    ----------
    table : Table
        The table checked (its file, rows and column names are used in messages).
    """

    def __init__(self, table: Table):
        self.table = table
        self.checks: list[tuple[np.ndarray, str, object]] = []

    def add(self, mask, column: str, reason) -> None:
        """Record the rows where ``mask`` is True as bad in ``column``.

        Parameters
        ----------
        mask : array_like of bool, shape (n_rows,)
            True for the bad rows.
        column : str
            Canonical name of the column.
        reason : callable
            ``reason(pos) -> str`` describes the bad cell at row position ``pos``.
        """
        mask = np.asarray(mask, dtype=bool)
        if mask.any():
            self.checks.append((mask, column, reason))

    def _bad(self) -> np.ndarray:
        """Rows with at least one bad cell (boolean mask)."""
        out = np.zeros(len(self.table), dtype=bool)
        for mask, _, _ in self.checks:
            out |= mask
        return out

    def resolve(self, on_bad_rows: str) -> np.ndarray:
        """Raise on the first bad row, or drop the bad rows with one warning.

        Parameters
        ----------
        on_bad_rows : {"raise", "drop"}
            ``"raise"``: a DataError names the table, the first bad row, its column and value,
            and the further bad rows (up to :data:`MAX_LISTED`). ``"drop"``: one DataWarning
            lists every dropped row with its bad cells.

        Returns
        -------
        numpy.ndarray of bool, shape (n_rows,)
            True for the rows kept.

        Raises
        ------
        DataError
            With ``"raise"`` when a row is bad; with ``"drop"`` when every row is bad.
        """
        bad = self._bad()
        if not bad.any():
            return ~bad
        t = self.table
        if on_bad_rows == "raise":
            first = int(np.argmax(bad))
            mask, column, reason = next(c for c in self.checks if c[0][first])
            further = np.flatnonzero(bad)[1:]
            msg = f"{t._where(first)}, column {t.col(column)}: {reason(first)}"
            if further.size:
                shown = t.rows_text(further[:MAX_LISTED])
                more = ", ..." if further.size > MAX_LISTED else ""
                msg += (f". {further.size} further bad row{'s' if further.size > 1 else ''}"
                        f" ({shown}{more})")
            msg += ("; correct the data, or pass on_bad_rows='drop' (command line: "
                    "--drop-bad-rows) to drop bad rows with a warning")
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


def extra_columns(table: Table, canonical) -> dict[str, pd.Series]:
    """The columns that are not canonical, kept; from files, numeric-looking ones as numbers.

    Parameters
    ----------
    table : Table
        The table.
    canonical : collection of str
        The canonical column names of the table (left out).

    Returns
    -------
    dict of str to pandas.Series
        Each other column: as floats when read from a file and every non-blank cell is a
        number, else as given with blank cells missing.
    """
    out = {}
    for c in table.frame.columns:
        if c in canonical:
            continue
        col = table.frame[c]
        if table.from_file:
            text, blank = cell_text(col, table.clean)
            conv = text.str.replace(",", ".", regex=False) if table.decimal_comma else text
            num = pd.to_numeric(conv.where(~blank), errors="coerce")
            if (num.notna().to_numpy() | blank).all() and not blank.all():
                col = num.astype(float)
            else:
                col = col.where(~blank)
        out[c] = col
    return out


def _listed(table: Table, pos: np.ndarray) -> str:
    """Rows named in a message: the first :data:`MAX_LISTED`, then ``...``."""
    return table.rows_text(pos[:MAX_LISTED]) + (", ..." if pos.size > MAX_LISTED else "")


def warn_duplicate_rows(out: pd.DataFrame, table: Table, consequence: str) -> None:
    """Warn about rows equal in every column to another row, naming them.

    Parameters
    ----------
    out : pandas.DataFrame
        The parsed rows, one per row of ``table``.
    table : Table
        The table they came from (file and row numbers for the message).
    consequence : str
        What becomes of such rows, e.g. ``"they are kept"``.

    Warns
    -----
    DataWarning
        Naming the table and the duplicated rows.
    """
    dup = out.duplicated(keep=False).to_numpy()
    if dup.any():
        pos = np.flatnonzero(dup)
        warnings.warn(
            f"{table.label}: {pos.size} rows are exact duplicates of another row "
            f"({_listed(table, pos)}); {consequence} -- check for a double entry (analytic "
            "replicates are best told apart by a 'replicate' column)",
            DataWarning, stacklevel=3,
        )


def warn_partly_blank(values: np.ndarray, table: Table, column: str, consequence: str) -> None:
    """Warn when a column is blank (NaN) on some rows but not on all, naming those rows.

    Parameters
    ----------
    values : numpy.ndarray of float, shape (n_rows,)
        The parsed column of the rows of ``table``; NaN where blank.
    table : Table
        The table they came from (file and row numbers for the message).
    column : str
        Canonical name of the column.
    consequence : str
        The rest of the message, after "blank on k of n rows (rows ...)".

    Warns
    -----
    DataWarning
        Naming the table, the column and the blank rows.
    """
    blank = ~np.isfinite(values)
    if blank.any() and not blank.all():
        pos = np.flatnonzero(blank)
        warnings.warn(
            f"{table.label}: column {table.col(column)} is blank on {pos.size} of "
            f"{blank.size} rows ({_listed(table, pos)}) {consequence}",
            DataWarning, stacklevel=3,
        )


def cell_text(col: pd.Series, clean: bool = False) -> tuple[pd.Series, np.ndarray]:
    """Stripped text of each cell (``""`` where blank; whole floats as ``"1"``), blank mask.

    Parameters
    ----------
    col : pandas.Series
        One column of cells.
    clean : bool, default False
        The cells are already stripped text without missing values (:attr:`Table.clean`).

    Returns
    -------
    text : pandas.Series of str
        The stripped text, with the index of ``col``.
    blank : numpy.ndarray of bool
        True where the cell is missing or only whitespace.
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


def missing_cells(col: pd.Series, clean: bool = False) -> np.ndarray:
    """Cells that hold no value: missing, blank text, or a missing-value marker (``NA``...).

    Parameters
    ----------
    col : pandas.Series
        One column of cells.
    clean : bool, default False
        The cells are already stripped text without missing values (:attr:`Table.clean`).

    Returns
    -------
    numpy.ndarray of bool
        True where the cell holds no value.
    """
    text, blank = cell_text(col, clean)
    return blank | text.isin(_NA_SPELLINGS).to_numpy()


def text_column(table: Table, issues: Issues, name: str, *, required: bool) -> pd.Series:
    """A text column (stripped); blank cells and missing-value markers recorded if required.

    Parameters
    ----------
    table : Table
        The table.
    issues : Issues
        Collector of bad cells.
    name : str
        Canonical column name.
    required : bool
        A blank cell or a marker (``NA``, ``n/a``, ``null``...) is a bad cell.

    Returns
    -------
    pandas.Series
        Stripped text; NaN where blank or a missing-value marker.
    """
    text, blank = cell_text(table.frame[name], table.clean)
    marker = ~blank & text.isin(_NA_SPELLINGS).to_numpy()
    if required:
        issues.add(blank, name, lambda i: "is blank; a value is required")
        issues.add(marker, name,
                   lambda i: f"{text.iat[i]!r} is a missing-value marker; a value is required")
    return text.where(~(blank | marker))


def show_value(v) -> str:
    """How messages show a cell value: its repr without numpy's type wrapper.

    Parameters
    ----------
    v : object
        The cell value (text, a number, a numpy scalar, a timestamp...).

    Returns
    -------
    str
        ``repr(v)``, of the plain Python value for a numpy scalar (``np.float64(1.0)`` is
        shown as ``1.0``).
    """
    if isinstance(v, np.generic):
        v = v.item()
    return repr(v)


def _number_reason(raw) -> str:
    s = str(raw).strip()
    if re.fullmatch(r"[-+−]?\d*,\d+", s):
        return (f"{show_value(raw)} is not a number: it looks like a decimal comma; use '.' for "
                "decimals in a comma-separated file (a file separated by ';' is read with "
                "decimal commas)")
    if "−" in s:
        return f"{show_value(raw)} is not a number: it holds a Unicode minus sign '−'; use '-'"
    return f"{show_value(raw)} is not a number"


def number_column(table: Table, issues: Issues, name: str, *, required: bool,
                  positive: bool = False) -> np.ndarray:
    """A numeric column as floats, with its bad cells recorded.

    Text is parsed with a decimal comma when :attr:`Table.decimal_comma`; text that is not a
    number (the message points out a decimal comma or a Unicode minus), ±inf and, with
    ``positive``, a value ≤ 0 are bad cells.

    Parameters
    ----------
    table : Table
        The table.
    issues : Issues
        Collector of bad cells.
    name : str
        Canonical column name.
    required : bool
        A blank cell or a missing-value marker is a bad cell (else it gives NaN).
    positive : bool, default False
        A value ≤ 0 is a bad cell.

    Returns
    -------
    numpy.ndarray of float, shape (n_rows,)
        The values in the column's unit; NaN where blank or bad.
    """
    col = table.frame[name]
    if pd.api.types.is_numeric_dtype(col.dtype) and not pd.api.types.is_bool_dtype(col.dtype):
        vals = col.to_numpy(dtype=float, na_value=np.nan).copy()
        blank = np.isnan(vals)
        bad_text = np.zeros(len(vals), dtype=bool)
        marker = bad_text
        raw = col
    else:
        text, blank = cell_text(col, table.clean)
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
        issues.add(marker, name, lambda i: f"{show_value(raw.iat[i])} is a missing-value "
                                           "marker; a number is required")
    inf = np.isinf(vals)
    issues.add(inf, name, lambda i: f"{show_value(raw.iat[i])} is not finite; a finite "
                                    "number is needed")
    if positive:
        nonpos = np.isfinite(vals) & (vals <= 0)
        issues.add(nonpos, name, lambda i: f"must be > 0, got {vals[i]:g}")
    vals[inf | bad_text] = np.nan
    return vals
