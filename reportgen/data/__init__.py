"""Stage 2: read the data table and reduce each pair to what the model needs.

The model needs only sufficient statistics (n, two means, the centred sums of
squares and cross-products), so the cost of a fit does not grow with the
number of rows. The complete rows are kept only for the scatter plot.

Every problem a user's file can have is a ``DataError`` whose one-line
message names the file, the column and the row as the user sees them: the
frame's index holds each row's line number in the CSV file (header = line 1,
so a quoted value spanning lines counts from its first line), its row number
on the Excel sheet, or its position (from 1) in a Parquet file.

Column names are matched in Unicode normal form C (NFC, Unicode Standard
Annex #15, Davis and Whistler): a spec typed with a composed "é" finds a
header saved with "e" plus a combining accent. Messages keep each side's own
spelling. Excel cells are read as a CSV file's would be: a formula's saved
value is read, and a formula error or a formula whose value was never saved is
refused with the cell's address, as text is. A nonzero number written so
small that it would be stored as 0 (``1e-400``) is refused like ``1e400``;
subnormal numbers (down to about 5e-324) are kept, because they are nonzero.

A CSV file larger than ``io.csv.STREAM_THRESHOLD`` is not held: it is read row by
row and only the columns the pairs need are kept, parsed to floats as they are
read (``Table.parsed``), with the same rules, results and messages. A Parquet
file is read for the needed columns only.
"""

from __future__ import annotations

import difflib
import errno
import hashlib
import re
import stat
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from reportgen.data.controls import ControlData, control_data
from reportgen.data.groups import GroupData, group_data, group_labels
from reportgen.data.sums import (
    PERFECT_CORRELATION,
    PERFECT_CORRELATION_COMPLEMENT,
    SufficientStats,
    centred,
    sufficient_stats,
    sums_of_centred,
)
from reportgen.errors import DataError
from reportgen.io.common import nfc, nfc_lookup, no_rows
from reportgen.io.csv import ParsedColumn, parse_cells, read_csv_table
from reportgen.io.excel import SheetProblem, read_excel
from reportgen.io.parquet import read_parquet
from reportgen.spec import PairSpec, Spec

__all__ = ["MIN_COMPLETE_ROWS", "ControlData", "GroupData",
           "PERFECT_CORRELATION", "PERFECT_CORRELATION_COMPLEMENT", "PairData", "ParsedColumn",
           "SheetProblem", "SufficientStats", "Table", "TableColumns", "file_sha256", "load_pairs", "load_table",
           "pair_data", "sufficient_stats"]

MIN_COMPLETE_ROWS = 4
EXCEL_SUFFIXES = {".xlsx", ".xlsm", ".xls"}
PARQUET_SUFFIXES = {".parquet", ".pq"}
DECIMAL_COMMA = re.compile(r"^[+-]?\d{1,3}(,\d+)+$|^[+-]?\d+,\d+$")


@dataclass(frozen=True)
class PairData:
    pair: PairSpec
    x: np.ndarray
    y: np.ndarray
    n_rows: int
    n_dropped: int
    stats: SufficientStats
    # each complete row's number in the input file as a reader sees it (CSV: line number with the
    # header on line 1; Excel: sheet row; Parquet: 1, 2, ...); empty when the pair was built by hand
    rows: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    groups: GroupData | None = None  # the pair's rows split by its grouping column, when it has one
    adjustment: ControlData | None = None  # x and y adjusted for the pair's control columns, when it has any

    @property
    def row_numbers(self) -> np.ndarray:
        """Input row numbers of the complete rows (1, 2, ... when the pair was built without a file)."""
        if self.rows.size == self.x.size:
            return self.rows
        return np.arange(1, self.x.size + 1, dtype=np.int64)


@dataclass(frozen=True)
class Table:
    """The data table. ``frame`` holds the cells, indexed by line or row number; for a streamed CSV
    file it has no columns (only the index) and ``parsed`` holds the needed columns as floats."""

    path: Path
    sha256: str
    frame: pd.DataFrame
    encoding: str
    sheet: str
    delimiter: str = ""
    parsed: dict[str, ParsedColumn] | None = None

    @property
    def n_rows(self) -> int:
        return len(self.frame)


def file_sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _detect_format(path: Path, declared: str) -> str:
    if declared != "auto":
        return declared
    suffix = path.suffix.lower()
    if suffix in EXCEL_SUFFIXES:
        return "excel"
    if suffix in PARQUET_SUFFIXES:
        return "parquet"
    return "csv"


# ------------------------------------------------------------------------ columns


def _key_paths(spec: Spec, column: str) -> str:
    """Where in the spec ``column`` is named, e.g. "pairs[0].x" or "pair_sets[1].columns"."""
    document = spec.document
    for index, entry in enumerate(document.pairs):
        for key in ("x", "y"):
            if getattr(entry, key) == column:
                return f"pairs[{index}].{key}"
    for index, pair_set in enumerate(document.pair_sets):
        if column in pair_set.columns:
            return f"pair_sets[{index}].columns"
    for key, entries in (("pairs", document.pairs), ("pair_sets", document.pair_sets)):
        for index, entry in enumerate(entries):
            if entry.group_by == column:
                return f"{key}[{index}].group_by"
            if entry.controls and column in entry.controls:
                return f"{key}[{index}].controls"
    if column == document.group_by:
        return "group_by"
    if column in document.controls:
        return "controls"
    return "pairs"


def _column_list(available: list[str]) -> str:
    shown = ", ".join(available[:12])
    return f"{shown} ... ({len(available)} in all)" if len(available) > 12 else shown


def _require_column(path: Path, available: list[str], column: str, where: str, restricted: bool = False) -> None:
    if column in available or nfc(column) in nfc_lookup(available):
        return
    close = difflib.get_close_matches(column, available, n=3, cutoff=0.5)
    hint = f"; close matches: {', '.join(close)}" if close else ""
    if restricted:
        raise DataError(f"{path}: column `{column}` (named in {where}) is not among data.columns{hint}; add it "
                        f"to data.columns. Listed there: {_column_list(available)}")
    unnamed = sum(name.startswith("Unnamed: ") for name in available)
    title = ("; the first non-empty row is read as the header, so remove any title rows above it"
             if len(available) > 1 and unnamed * 2 >= len(available) else "")
    raise DataError(f"{path}: column `{column}` (named in {where}) is not in the data{hint}{title}. "
                    f"Columns are: {_column_list(available)}")


# What a path that is not a regular file is, by the file type bits of its status (POSIX stat.h).
SPECIAL_FILES = ((stat.S_ISFIFO, "a named pipe (FIFO)"), (stat.S_ISCHR, "a device (like /dev/null or /dev/zero)"),
                 (stat.S_ISBLK, "a disk device"), (stat.S_ISSOCK, "a socket"))


def _data_file(spec: Spec) -> Path:
    """The data file's path, after checking that it names a regular file; nothing is opened, so a named
    pipe cannot make the reader wait."""
    source = spec.document.data
    written = spec.base_dir / source.path
    loop = DataError(f"{written}: is a symbolic link that leads, through links, back to itself; point "
                     "data.path at the data file itself")
    try:
        path = spec.data_path
        mode = path.stat().st_mode
    except RuntimeError:  # Python 3.11's Path.resolve raises this for a link loop
        raise loop from None
    except (FileNotFoundError, NotADirectoryError):
        raise DataError(f"{path}: data file not found (data.path = {source.path!r} in the spec, "
                        "relative to the spec's folder); correct data.path") from None
    except (OSError, ValueError) as exc:
        if getattr(exc, "errno", None) == errno.ELOOP:
            raise loop from None
        shown = source.path if len(source.path) <= 60 else source.path[:57] + "..."
        reason = getattr(exc, "strerror", None) or str(exc)
        raise DataError(f"{spec.source_path}: data.path = {shown!r} cannot be used as a file path "
                        f"({reason}); correct it") from None
    if stat.S_ISDIR(mode):
        raise DataError(f"{path}: is a folder; data.path must name a CSV, Excel or Parquet file")
    if not stat.S_ISREG(mode):
        what = next((name for test, name in SPECIAL_FILES if test(mode)), "not a regular file")
        raise DataError(f"{path}: is {what}, not a file that can be read as a table; data.path must name a "
                        "CSV, Excel or Parquet file")
    return path


def _data_column(table: Table, column: str) -> str:
    """The table's spelling of a column the spec names, which may be in another Unicode normal form."""
    names = table.parsed.keys() if table.parsed is not None else table.frame.columns
    if column in names:
        return column
    return nfc_lookup(names).get(nfc(column), column)


def load_table(spec: Spec) -> Table:
    """Read the spec's data file as text cells; numeric parsing happens per column. A CSV file larger than
    ``reportgen.io.csv.STREAM_THRESHOLD`` bytes is streamed instead, keeping only the needed columns, already
    as floats."""
    source = spec.document.data
    path = _data_file(spec)
    kind = _detect_format(path, source.format)
    encoding = delimiter = ""
    sheet = source.sheet
    if source.sheet and kind != "excel":
        raise DataError(f"{path}: data.sheet = {source.sheet!r} is set but the file is read as {kind}; "
                        "remove data.sheet or point data.path at the workbook")
    wanted = spec.columns_needed
    parsed = None
    if kind == "csv":
        frame, available, parsed, encoding, delimiter = read_csv_table(path, wanted)
    elif kind == "excel":
        frame, sheet = read_excel(path, source.sheet)
        available = list(frame.columns)
    else:
        frame, available = read_parquet(path, (*wanted, *spec.group_columns))
    if len(frame) == 0:
        raise no_rows(path)
    for column in spec.document.variables:
        _require_column(path, available, column, f"variables.{column}")
    kept = available
    if source.columns:
        for column in source.columns:
            _require_column(path, available, column, "data.columns")
        kept = list(source.columns)
    lookup = nfc_lookup(frame.columns)
    frame = frame.loc[:, list(dict.fromkeys(lookup[nfc(c)] for c in kept if nfc(c) in lookup))]
    for column in (*wanted, *spec.group_columns):
        _require_column(path, kept, column, _key_paths(spec, column), bool(source.columns))
    if parsed is not None and spec.group_columns:
        raise DataError(f"{path}: the file is too large to hold in memory, and grouping (group_by = "
                        f"\"{spec.group_columns[0]}\") needs its labels held; save the table as Parquet, whose "
                        "columns are read one by one, or set group_by = \"\"")
    return Table(path=path, sha256=file_sha256(path), frame=frame, encoding=encoding, sheet=sheet,
                 delimiter=delimiter, parsed=parsed)


def _cells(cells: Iterable[tuple[object, object]]) -> str:
    return ", ".join(f"row {row} ({str(cell)[:20]!r})" for row, cell in cells)




def _refuse_sheet_problems(table: Table, column: str, raw: pd.Series) -> None:
    """Formula errors and formulas without a saved value, refused with their cell addresses."""
    found = [cell for cell in raw if isinstance(cell, SheetProblem)]
    if not found:
        return
    more = f" and {len(found) - 3} more" if len(found) > 3 else ""
    fixes = []
    if any(cell.kind == "error" for cell in found):
        fixes.append("correct the formulas that give errors, or blank those cells")
    if any(cell.kind == "formula" for cell in found):
        fixes.append("open the workbook in a spreadsheet program and save it, so that the formulas' values "
                     "are stored")
    raise DataError(f"{table.path}: column `{column}` (sheet `{table.sheet}`) has cells without a number: "
                    f"{', '.join(cell.describe() for cell in found[:3])}{more}; {'; '.join(fixes)}")


def _numeric_column(table: Table, column: str) -> np.ndarray:
    """The column as floats, NaN where a cell is missing; a cell that is not a number is an error."""
    name = _data_column(table, column)
    if table.parsed is not None:
        parsed = table.parsed[name]
        values, bad, n_bad, infinite, tiny = parsed.values, parsed.bad, parsed.n_bad, parsed.infinite, parsed.tiny
    else:
        raw = table.frame[name]
        tiny_mask = np.zeros(len(raw), dtype=bool)
        if pd.api.types.is_numeric_dtype(raw) and not pd.api.types.is_complex_dtype(raw):
            values = raw.to_numpy(dtype=float, na_value=np.nan).copy()
            positions = np.zeros(0, dtype=int)
        else:
            if table.sheet:
                _refuse_sheet_problems(table, column, raw)
            values, bad_mask, tiny_mask = parse_cells(raw)
            positions = np.flatnonzero(bad_mask)
        bad = tuple((raw.index[p], raw.iloc[p]) for p in positions[:3])
        n_bad = positions.size
        first = np.flatnonzero(np.isinf(values))[:1]
        infinite = (raw.index[first[0]], raw.iloc[first[0]]) if first.size else None
        first = np.flatnonzero(tiny_mask)[:1]
        tiny = (raw.index[first[0]], raw.iloc[first[0]]) if first.size else None
    if n_bad:
        more = f" and {n_bad - 3} more" if n_bad > 3 else ""
        commas = all(DECIMAL_COMMA.match(str(cell).strip()) for _, cell in bad)
        fix = ("these look like numbers written with a comma; use a decimal point and no thousands separators"
               if commas else "fix or blank those cells")
        raise DataError(f"{table.path}: column `{column}` has non-numeric values at {_cells(bad)}{more}; {fix}")
    if infinite is not None:
        raise DataError(f"{table.path}: column `{column}` has an infinite or out-of-range value at "
                        f"{_cells([infinite])}; replace it with a finite number or leave it blank")
    if tiny is not None:
        raise DataError(f"{table.path}: column `{column}` has a number too close to zero to store at "
                        f"{_cells([tiny])}: it would be read as 0; write 0 if that is meant, or rescale the "
                        "column, e.g. to millionths")
    return values


@dataclass(frozen=True)
class CentredColumn:
    """A column's present values centred once (``sums.centred``), with their sum of squares, for every pair
    whose complete rows are all the column's present rows."""

    mean: float
    deviations: np.ndarray
    squares: float  # deviations @ deviations


class TableColumns:
    """The table's columns as one pair needs them, each parsed, checked and centred once however many pairs
    name it: in an all-pairs set of 100 columns each column is in 99 pairs, and parsing it again for each
    cost most of the loading. Errors are raised when a pair first needs the column, as without the cache."""

    def __init__(self, table: Table) -> None:
        self.table = table
        self._values: dict[str, np.ndarray] = {}
        self._missing: dict[str, np.ndarray] = {}
        self._present: dict[str, int] = {}
        self._centred: dict[str, CentredColumn] = {}
        self._labels: dict[str, np.ndarray] = {}
        self._rows: np.ndarray | None = None

    def values(self, column: str) -> np.ndarray:
        """The column (as the spec names it) as floats, NaN where a cell is missing; the arrays are shared
        between pairs, so they are read, never written."""
        if column not in self._values:
            self._values[column] = _numeric_column(self.table, column)
        return self._values[column]

    def missing(self, column: str) -> np.ndarray:
        if column not in self._missing:
            self._missing[column] = np.isnan(self.values(column))
        return self._missing[column]

    def present(self, column: str) -> int:
        """How many of the column's cells hold a number."""
        if column not in self._present:
            self._present[column] = int((~self.missing(column)).sum())
        return self._present[column]

    def centred(self, column: str) -> CentredColumn:
        """The column's present values centred as ``sufficient_stats`` centres them, so a pair that keeps all
        of them gets the same floats without centring again."""
        if column not in self._centred:
            with np.errstate(all="ignore"):
                mean, deviations = centred(self.values(column)[~self.missing(column)])
                squares = float(deviations @ deviations)
            self._centred[column] = CentredColumn(mean=mean, deviations=deviations, squares=squares)
        return self._centred[column]

    def labels(self, column: str) -> np.ndarray:
        """Each row's group label in a grouping column (``groups.group_labels``)."""
        if column not in self._labels:
            cells = self.table.frame[_data_column(self.table, column)].to_numpy(dtype=object)
            self._labels[column] = group_labels(cells)
        return self._labels[column]

    @property
    def rows(self) -> np.ndarray:
        """Every row's number in the input file."""
        if self._rows is None:
            self._rows = np.asarray(self.table.frame.index, dtype=np.int64)
        return self._rows


def _pair_sums(columns: TableColumns, pair: PairSpec, x: np.ndarray, y: np.ndarray) -> SufficientStats:
    """``sufficient_stats(x, y)``, taking the centred values of a column whose present rows the pair keeps
    whole from ``columns`` (the same floats: the same values centred by the same steps)."""
    with np.errstate(all="ignore"):
        sides = []
        for name, values in ((pair.x, x), (pair.y, y)):
            if values.size == columns.present(name):
                column = columns.centred(name)
                sides.append((column.mean, column.deviations, column.squares))
            else:
                mean, deviations = centred(values)
                sides.append((mean, deviations, None))
        (mean_x, dx, sxx), (mean_y, dy, syy) = sides
        return sums_of_centred(mean_x, dx, mean_y, dy, sxx=sxx, syy=syy)


def pair_data(table: Table, pair: PairSpec, missing_policy: str, columns: TableColumns | None = None) -> PairData:
    """Complete rows of one pair, checked for what cannot be fitted. ``columns`` (default None: a new one)
    holds the table's parsed columns, to be shared by every pair of one table."""
    columns = columns if columns is not None else TableColumns(table)
    x_all = columns.values(pair.x)
    y_all = columns.values(pair.y)
    where = f"{table.path}: pair (`{pair.x}`, `{pair.y}`)"
    if _data_column(table, pair.x) == _data_column(table, pair.y):
        raise DataError(f"{where} names one column of the data twice, spelled with different Unicode characters "
                        "(an accent stored as part of its letter or as a separate mark); pair two columns")
    present = {}
    for name, values in ((pair.x, x_all), (pair.y, y_all)):
        present[name] = columns.present(name)
        if present[name] == 0:
            raise DataError(f"{table.path}: column `{name}` is empty: all {values.size} of its cells are blank "
                            "or missing; fill it in or pair another column")
    complete = ~(columns.missing(pair.x) | columns.missing(pair.y))
    n_dropped = int((~complete).sum())
    if n_dropped and missing_policy == "fail":
        row = table.frame.index[int(np.flatnonzero(~complete)[0])]
        raise DataError(f"{where} has {n_dropped} row{'' if n_dropped == 1 else 's'} with a missing value "
                        f"(first at row {row}) "
                        "and data.missing = \"fail\"; fill them or set data.missing = \"listwise\"")
    x = x_all[complete]
    y = y_all[complete]
    if x.size < MIN_COMPLETE_ROWS:
        raise DataError(f"{where} has only {x.size} complete row{'' if x.size == 1 else 's'} (with both values; "
                        f"`{pair.x}` has {present[pair.x]} values and `{pair.y}` {present[pair.y]}); at least "
                        f"{MIN_COMPLETE_ROWS} are needed to estimate a correlation: add rows or fill the gaps")
    for name, values in ((pair.x, x), (pair.y, y)):
        if np.ptp(values) == 0:
            raise DataError(f"{where}: column `{name}` is constant ({values[0]:g} in every complete row), so its "
                            "correlation is undefined; choose another column")
    stats = _pair_sums(columns, pair, x, y)
    for name, values, mean, ss in ((pair.x, x, stats.mean_x, stats.sxx), (pair.y, y, stats.mean_y, stats.syy)):
        if not (np.isfinite(mean) and np.isfinite(ss)):
            raise DataError(f"{where}: column `{name}` has values too large to square (up to "
                            f"{np.max(np.abs(values)):.3g}); rescale it, e.g. to thousands or millions")
        if ss == 0:
            raise DataError(f"{where}: column `{name}` varies too little (by {np.ptp(values):.3g}) to compute a "
                            "correlation; rescale it, e.g. to thousandths or millionths")
    with np.errstate(all="ignore"):
        r = stats.sample_r
        complement = stats.one_minus_abs_r
    if not (np.isfinite(r) and complement > PERFECT_CORRELATION_COMPLEMENT) or abs(r) >= PERFECT_CORRELATION:
        raise DataError(f"{where}: the columns are perfectly correlated (sample r = {r:+.6f}): one is an exact "
                        "linear function of the other, so there is nothing to estimate; pair other columns")
    rows = columns.rows[complete]
    groups = None
    if pair.group_by:
        groups = group_data(x, y, columns.labels(pair.group_by)[complete], pair.group_by, where)
    adjustment = None
    if pair.controls:
        controls = {name: columns.values(name) for name in pair.controls}
        adjustment = control_data(x_all, y_all, controls, where, (pair.x, pair.y))
    return PairData(pair=pair, x=x, y=y, n_rows=table.n_rows, n_dropped=n_dropped, stats=stats, rows=rows,
                    groups=groups, adjustment=adjustment)


def load_pairs(spec: Spec, table: Table) -> tuple[PairData, ...]:
    """Every pair of the spec, validated before anything is fitted; each column is parsed once."""
    policy = spec.document.data.missing
    columns = TableColumns(table)
    pairs = tuple(pair_data(table, pair, policy, columns) for pair in spec.pairs)
    _check_compared_groups(spec, table, pairs)
    return pairs


def _check_compared_groups(spec: Spec, table: Table, pairs: tuple[PairData, ...]) -> None:
    """Every group that ``[compare] groups`` names must be a level of some pair's grouping column."""
    asked = spec.document.compare.groups
    if not asked:
        return
    found = {label for pair in pairs if pair.groups is not None
             for label in (*pair.groups.labels, *(g.label for g in pair.groups.left_out))}
    if not found:
        raise DataError(f"{spec.source_path}: [compare] groups lists groups, but no pair has group_by; set "
                        "group_by or remove [compare] groups")
    missing = [label for label in asked if label not in found]
    if missing:
        close = difflib.get_close_matches(missing[0], sorted(found), n=3, cutoff=0.5)
        hint = f"; close matches: {', '.join(close)}" if close else ""
        raise DataError(f"{table.path}: [compare] groups names \"{missing[0]}\", which is not a value of any "
                        f"grouping column in the data{hint}; correct it or remove it from [compare] groups")
