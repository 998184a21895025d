"""Stage 2: read the data table and reduce each pair to what the model needs.

The model needs only sufficient statistics (n, two means, the centred sums of
squares and cross-products), so the cost of a fit does not grow with the
number of rows. The complete rows are kept only for the scatter plot.

Every problem a user's file can have is a ``DataError`` whose one-line
message names the file, the column and the row as the user sees them: the
frame's index holds each row's line number in the CSV file (header = line 1,
so a quoted value spanning lines counts from its first line), its row number
on the Excel sheet, or its position (from 1) in a Parquet file.
"""

from __future__ import annotations

import codecs
import csv
import difflib
import hashlib
import io
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from reportgen.errors import DataError
from reportgen.spec import PairSpec, Spec

MIN_COMPLETE_ROWS = 4
CSV_ENCODINGS = ("utf-8", "cp1252", "latin-1")
CSV_DELIMITERS = (",", ";", "\t", "|")
DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "bar"}
EXCEL_SUFFIXES = {".xlsx", ".xlsm", ".xls"}
PARQUET_SUFFIXES = {".parquet", ".pq"}
# Cells read as missing, compared case-insensitively after stripping spaces.
MISSING_TOKENS = frozenset({"", "na", "n/a", "nan", "null", "-"})
# |r| this close to 1 means one column is an exact linear function of the other.
PERFECT_CORRELATION = 1.0 - 1e-12
DECIMAL_COMMA = re.compile(r"^[+-]?\d{1,3}(,\d+)+$|^[+-]?\d+,\d+$")


@dataclass(frozen=True)
class SufficientStats:
    """What the bivariate-normal likelihood needs from the rows of one pair."""

    n: int
    mean_x: float
    mean_y: float
    sxx: float  # sum of (x - mean_x)^2
    syy: float
    sxy: float  # sum of (x - mean_x)(y - mean_y)

    @property
    def sd_x(self) -> float:
        return float(np.sqrt(self.sxx / (self.n - 1)))

    @property
    def sd_y(self) -> float:
        return float(np.sqrt(self.syy / (self.n - 1)))

    @property
    def sample_r(self) -> float:
        return float(self.sxy / np.sqrt(self.sxx * self.syy))


@dataclass(frozen=True)
class PairData:
    pair: PairSpec
    x: np.ndarray
    y: np.ndarray
    n_rows: int
    n_dropped: int
    stats: SufficientStats


@dataclass(frozen=True)
class Table:
    path: Path
    sha256: str
    frame: pd.DataFrame
    encoding: str
    sheet: str
    delimiter: str = ""

    @property
    def n_rows(self) -> int:
        return len(self.frame)


def file_sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def sufficient_stats(x: np.ndarray, y: np.ndarray) -> SufficientStats:
    """Two-pass (centred) sums, which stay accurate when the means are large."""
    mean_x = float(np.mean(x))
    mean_y = float(np.mean(y))
    dx = x - mean_x
    dy = y - mean_y
    return SufficientStats(
        n=int(x.size),
        mean_x=mean_x,
        mean_y=mean_y,
        sxx=float(dx @ dx),
        syy=float(dy @ dy),
        sxy=float(dx @ dy),
    )


def _detect_format(path: Path, declared: str) -> str:
    if declared != "auto":
        return declared
    suffix = path.suffix.lower()
    if suffix in EXCEL_SUFFIXES:
        return "excel"
    if suffix in PARQUET_SUFFIXES:
        return "parquet"
    return "csv"


# ---------------------------------------------------------------------------- CSV


def _line_of(data: bytes, offset: int) -> int:
    return data[:offset].count(b"\n") + 1


def _decode(path: Path, data: bytes) -> tuple[str, str]:
    """The encoding that decodes the whole file, and the text (without a byte-order mark).

    UTF-8 first (with or without a BOM), UTF-16 when it starts with a UTF-16
    BOM (Excel's "Unicode text"), then cp1252 and latin-1 for files that have
    no UTF-8 at all. A file that is UTF-8 in one place and not in another is
    refused rather than guessed at.
    """
    if data.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        try:
            return "utf-16", data.decode("utf-16")
        except UnicodeDecodeError:
            raise DataError(f"{path}: starts like UTF-16 text but is not valid UTF-16; "
                            "re-save the file as UTF-8") from None
    if b"\x00" in data[:65536]:
        raise DataError(f"{path}: does not look like a CSV text file (it holds NUL bytes); if it is an Excel "
                        "or Parquet file give it a .xlsx or .parquet name, or set data.format in the spec")
    encoding = "utf-8-sig" if data.startswith(codecs.BOM_UTF8) else "utf-8"
    try:
        return encoding, data.decode(encoding)
    except UnicodeDecodeError as exc:
        if encoding == "utf-8-sig" or any(byte >= 0x80 for byte in data[: exc.start]):
            raise DataError(f"{path}: the file mixes text encodings: it is UTF-8 up to line "
                            f"{_line_of(data, exc.start)}, which has the byte 0x{data[exc.start]:02X} that is "
                            "not UTF-8; re-save the whole file as UTF-8") from None
    for fallback in CSV_ENCODINGS[1:]:
        try:
            return fallback, data.decode(fallback)
        except UnicodeDecodeError:
            continue
    raise DataError(f"{path}: could not decode the text (tried {', '.join(CSV_ENCODINGS)}); "
                    "re-save the file as UTF-8")  # pragma: no cover - latin-1 decodes every byte


def _header_delimiter(header: str) -> str:
    """The common delimiter used most often in the header line outside double quotes; comma if none is."""
    counts = dict.fromkeys(CSV_DELIMITERS, 0)
    quoted = False
    for char in header:
        if char == '"':
            quoted = not quoted
        elif not quoted and char in counts:
            counts[char] += 1
    best = max(CSV_DELIMITERS, key=lambda d: counts[d])  # ties go to the earlier, more common one
    return best if counts[best] > 0 else ","


def _width_if_consistent(sample: str, delimiter: str, truncated: bool) -> int:
    """Fields per row when the first rows all split into the same number of fields; 0 when they do not."""
    try:
        rows = [r for r in csv.reader(io.StringIO(sample, newline=""), delimiter=delimiter) if not _is_blank(r)]
    except csv.Error:
        return 0
    rows = rows[:-1] if truncated and len(rows) > 1 else rows  # the sample may end inside a row
    rows = rows[:50]
    width = len(rows[0]) if rows else 0
    for row in rows[1:]:
        if len(row) != width and not (len(row) > width and not any(c.strip() for c in row[width:])):
            return 0
    return width


def _delimiter(text: str) -> str:
    """The delimiter that splits the header and the first rows into the same number (> 1) of fields.

    A header alone can mislead: ``b<TAB>x, mm`` holds one tab and one comma.
    When no delimiter fits every row (a ragged file), the header decides,
    so the error about the ragged row names the likely delimiter.
    """
    sample = text[:65536]
    widths = {d: _width_if_consistent(sample, d, len(text) > len(sample)) for d in CSV_DELIMITERS}
    fitting = [d for d in CSV_DELIMITERS if widths[d] > 1]
    if fitting:
        return max(fitting, key=lambda d: widths[d])  # ties go to the earlier, more common one
    header = next((line for line in io.StringIO(sample, newline="") if line.strip()), "")
    return _header_delimiter(header)


def _is_blank(row: list[str]) -> bool:
    return not row or (len(row) == 1 and not row[0].strip())


def _header_names(cells: list[object], where: str, path: Path) -> list[str]:
    """Column names from a header row: stripped, unnamed cells named like pandas does, no repeats."""
    names = []
    for index, cell in enumerate(cells):
        text = "" if cell is None or (isinstance(cell, float) and np.isnan(cell)) else str(cell)
        text = text.strip().lstrip("\ufeff").strip()
        names.append(text or f"Unnamed: {index}")
    first_seen: dict[str, int] = {}
    for index, name in enumerate(names):
        if name in first_seen:
            raise DataError(f"{path}: the column name `{name}` appears more than once in the header ({where}, "
                            f"columns {first_seen[name] + 1} and {index + 1}); rename one")
        first_seen[name] = index
    return names


def _read_bytes(path: Path) -> bytes:
    try:
        return path.read_bytes()
    except OSError as exc:
        raise DataError(f"{path}: the data file cannot be read ({exc.strerror or type(exc).__name__}); "
                        "check its permissions") from None


def _fit_row(path: Path, row: list[str], line: int, width: int, named: int, header_at: int,
             delimiter: str) -> list[str]:
    """A row whose field count differs from the header's: trailing delimiters are dropped, fields missing
    under unnamed trailing columns are blank, anything else is an error that names the line."""
    if len(row) > width and not any(cell.strip() for cell in row[width:]):
        return row[:width]
    if named <= len(row) < width:
        return row + [""] * (width - len(row))
    if len(row) < named and any("\n" in cell or "\r" in cell for cell in row):
        raise DataError(f"{path}: line {line} opens a double quote that is never closed, so the rest "
                        "of the file reads as one value; close the quote or remove it")
    name = DELIMITER_NAMES[delimiter]
    raise DataError(f"{path}: line {line} has {len(row)} {name}-separated field{'' if len(row) == 1 else 's'} "
                    f"but the header (line {header_at}) has {width}; give every row the same number of fields, "
                    f"and put double quotes around any value that contains a {name}")


def _read_csv(path: Path) -> tuple[pd.DataFrame, str, str]:
    """The table as text cells indexed by line number, with the encoding and delimiter used."""
    data = _read_bytes(path)
    encoding, text = _decode(path, data)
    if not text.strip():
        raise DataError(f"{path}: the file is empty; it needs a header row and data rows")
    delimiter = _delimiter(text)
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter)
    names: list[str] = []
    width = -1  # fields per row, once the header is read
    named = 0  # fields up to the header's last named column: a shorter row is refused
    header_at = previous = 0
    rows: list[list[str]] = []
    lines: list[int] = []
    try:
        for row in reader:
            start, previous = previous + 1, reader.line_num  # a quoted value may span lines
            if len(row) == width:
                rows.append(row)
                lines.append(start)
            elif _is_blank(row):
                continue
            elif not names:
                names = _header_names(list(row), f"line {start}", path)
                width = len(names)
                named = max(i + 1 for i, cell in enumerate(row) if cell.strip() or i == 0)
                header_at = start
            else:
                rows.append(_fit_row(path, row, start, width, named, header_at, delimiter))
                lines.append(start)
    except csv.Error as exc:
        raise DataError(f"{path}: line {reader.line_num} cannot be read as CSV ({exc}); check its quotes "
                        "and characters") from None
    if not rows:
        raise DataError(f"{path}: the table has a header but no data rows; add the data below the header")
    frame = pd.DataFrame(rows, columns=names, index=pd.Index(lines, name="line"), dtype=object)
    return frame, encoding, delimiter


# ------------------------------------------------------------------ Excel, Parquet


def _read_excel(path: Path, sheet: str) -> tuple[pd.DataFrame, str]:
    """The chosen sheet with its first non-empty row as the header, indexed by sheet row number."""
    try:
        book = pd.ExcelFile(path)
    except ImportError:
        raise DataError(f"{path}: old-style .xls workbooks cannot be read; open it in Excel and save it as "
                        ".xlsx (or export the sheet as CSV)") from None
    except Exception as exc:  # openpyxl raises many types for a broken workbook
        raise DataError(f"{path}: not a readable Excel workbook ({type(exc).__name__}); re-save it from a "
                        "spreadsheet program as .xlsx, or set data.format if it is not Excel") from None
    with book:
        sheets = [str(name) for name in book.sheet_names]
        listed = ", ".join(f"`{name}`" for name in sheets)
        if sheet:
            if sheet not in sheets:
                close = difflib.get_close_matches(sheet, sheets, n=1, cutoff=0.5)
                hint = f" Did you mean `{close[0]}`?" if close else ""
                raise DataError(f"{path}: no sheet named `{sheet}` (data.sheet); the sheets are: {listed}.{hint}")
            chosen = sheet
        elif len(sheets) == 1:
            chosen = sheets[0]
        else:
            raise DataError(f"{path}: the workbook has {len(sheets)} sheets ({listed}); name the one to use "
                            "with data.sheet in the spec, e.g. sheet = " + repr(sheets[0]).replace("'", '"'))
        try:
            raw = pd.read_excel(book, sheet_name=chosen, header=None, dtype=object)
        except Exception as exc:  # a chart sheet or a damaged sheet
            raise DataError(f"{path}: sheet `{chosen}` cannot be read as a table ({type(exc).__name__}); "
                            "choose a worksheet that holds the data") from None
    raw = raw.dropna(axis=0, how="all").dropna(axis=1, how="all")
    if raw.empty:
        raise DataError(f"{path}: sheet `{chosen}` is empty; put a header row and data rows on it, "
                        "or name another sheet with data.sheet")
    header_row = int(raw.index[0]) + 1
    names = _header_names(list(raw.iloc[0]), f"row {header_row} of sheet `{chosen}`", path)
    frame = raw.iloc[1:].copy()
    frame.columns = names
    frame.index = pd.Index([int(i) + 1 for i in frame.index], name="row")
    return frame, chosen


def _read_parquet(path: Path) -> pd.DataFrame:
    try:
        frame = pd.read_parquet(path)
    except Exception as exc:  # pyarrow raises its own types for a broken file
        raise DataError(f"{path}: not a readable Parquet file ({type(exc).__name__}); export it again, or set "
                        "data.format if it is not Parquet") from None
    frame = frame.reset_index(drop=True)
    names = [str(c) for c in frame.columns]
    _header_names(names, "the Parquet schema", path)
    frame.columns = names
    frame.index = pd.RangeIndex(1, len(frame) + 1, name="row")
    return frame


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
    return "pairs"


def _column_list(available: list[str]) -> str:
    shown = ", ".join(available[:12])
    return f"{shown} ... ({len(available)} in all)" if len(available) > 12 else shown


def _require_column(path: Path, available: list[str], column: str, where: str, restricted: bool = False) -> None:
    if column in available:
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


def load_table(spec: Spec) -> Table:
    """Read the spec's data file as text cells; numeric parsing happens per column."""
    source = spec.document.data
    try:
        path = spec.data_path
        exists, is_file = path.exists(), path.is_file()
    except (OSError, ValueError) as exc:
        shown = source.path if len(source.path) <= 60 else source.path[:57] + "..."
        reason = getattr(exc, "strerror", None) or str(exc)
        raise DataError(f"{spec.source_path}: data.path = {shown!r} cannot be used as a file path "
                        f"({reason}); correct it") from None
    if not exists:
        raise DataError(f"{path}: data file not found (data.path = {source.path!r} in the spec, "
                        "relative to the spec's folder); correct data.path")
    if not is_file:
        raise DataError(f"{path}: is a folder; data.path must name a CSV, Excel or Parquet file")
    kind = _detect_format(path, source.format)
    encoding = delimiter = ""
    sheet = source.sheet
    if source.sheet and kind != "excel":
        raise DataError(f"{path}: data.sheet = {source.sheet!r} is set but the file is read as {kind}; "
                        "remove data.sheet or point data.path at the workbook")
    if kind == "csv":
        frame, encoding, delimiter = _read_csv(path)
    elif kind == "excel":
        frame, sheet = _read_excel(path, source.sheet)
    else:
        frame = _read_parquet(path)
    if len(frame) == 0:
        raise DataError(f"{path}: the table has a header but no data rows; add the data below the header")
    available = list(frame.columns)
    for column in spec.document.variables:
        _require_column(path, available, column, f"variables.{column}")
    if source.columns:
        for column in source.columns:
            _require_column(path, available, column, "data.columns")
        frame = frame.loc[:, list(source.columns)]
    for column in spec.columns_needed:
        _require_column(path, list(frame.columns), column, _key_paths(spec, column), bool(source.columns))
    return Table(path=path, sha256=file_sha256(path), frame=frame, encoding=encoding, sheet=sheet,
                 delimiter=delimiter)


def _cells(raw: pd.Series, positions: np.ndarray) -> str:
    return ", ".join(f"row {raw.index[p]} ({str(raw.iloc[p])[:20]!r})" for p in positions[:3])


def _numeric_column(path: Path, frame: pd.DataFrame, column: str) -> np.ndarray:
    """The column as floats, NaN where a cell is missing; a cell that is not a number is an error."""
    raw = frame[column]
    if pd.api.types.is_numeric_dtype(raw) and not pd.api.types.is_complex_dtype(raw):
        values = raw.to_numpy(dtype=float, na_value=np.nan).copy()
        bad_mask = np.zeros(len(values), dtype=bool)
    else:
        text = raw.astype("string").str.strip()
        missing = (text.isna() | text.str.lower().isin(MISSING_TOKENS)).to_numpy(dtype=bool)
        parsed = pd.to_numeric(text.mask(missing), errors="coerce")
        values = parsed.to_numpy(dtype=float, na_value=np.nan).copy()
        bad_mask = ~missing & np.isnan(values)
    if bad_mask.any():
        bad = np.flatnonzero(bad_mask)
        more = f" and {bad.size - 3} more" if bad.size > 3 else ""
        commas = all(DECIMAL_COMMA.match(str(raw.iloc[p]).strip()) for p in bad[:3])
        fix = ("these look like numbers written with a comma; use a decimal point and no thousands separators"
               if commas else "fix or blank those cells")
        raise DataError(f"{path}: column `{column}` has non-numeric values at {_cells(raw, bad)}{more}; {fix}")
    infinite = np.flatnonzero(np.isinf(values))
    if infinite.size:
        raise DataError(f"{path}: column `{column}` has an infinite or out-of-range value at "
                        f"{_cells(raw, infinite[:1])}; replace it with a finite number or leave it blank")
    return values


def pair_data(table: Table, pair: PairSpec, missing_policy: str) -> PairData:
    """Complete rows of one pair, checked for what cannot be fitted."""
    x_all = _numeric_column(table.path, table.frame, pair.x)
    y_all = _numeric_column(table.path, table.frame, pair.y)
    where = f"{table.path}: pair (`{pair.x}`, `{pair.y}`)"
    present = {}
    for name, values in ((pair.x, x_all), (pair.y, y_all)):
        present[name] = int((~np.isnan(values)).sum())
        if present[name] == 0:
            raise DataError(f"{table.path}: column `{name}` is empty: all {values.size} of its cells are blank "
                            "or missing; fill it in or pair another column")
    complete = ~(np.isnan(x_all) | np.isnan(y_all))
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
    with np.errstate(all="ignore"):
        stats = sufficient_stats(x, y)
    for name, values, mean, ss in ((pair.x, x, stats.mean_x, stats.sxx), (pair.y, y, stats.mean_y, stats.syy)):
        if not (np.isfinite(mean) and np.isfinite(ss)):
            raise DataError(f"{where}: column `{name}` has values too large to square (up to "
                            f"{np.max(np.abs(values)):.3g}); rescale it, e.g. to thousands or millions")
        if ss == 0:
            raise DataError(f"{where}: column `{name}` varies too little (by {np.ptp(values):.3g}) to compute a "
                            "correlation; rescale it, e.g. to thousandths or millionths")
    with np.errstate(all="ignore"):
        r = stats.sample_r
    if not np.isfinite(r) or abs(r) >= PERFECT_CORRELATION:
        raise DataError(f"{where}: the columns are perfectly correlated (sample r = {r:+.6f}): one is an exact "
                        "linear function of the other, so there is nothing to estimate; pair other columns")
    return PairData(pair=pair, x=x, y=y, n_rows=table.n_rows, n_dropped=n_dropped, stats=stats)


def load_pairs(spec: Spec, table: Table) -> tuple[PairData, ...]:
    """Every pair of the spec, validated before anything is fitted."""
    policy = spec.document.data.missing
    return tuple(pair_data(table, pair, policy) for pair in spec.pairs)
