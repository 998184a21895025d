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

A CSV file larger than ``STREAM_THRESHOLD`` is not held: it is read row by
row and only the columns the pairs need are kept, parsed to floats as they are
read (``Table.parsed``), with the same rules, results and messages. A Parquet
file is read for the needed columns only.
"""

from __future__ import annotations

import codecs
import csv
import difflib
import errno
import hashlib
import io
import operator
import re
import stat
import unicodedata
import warnings
import zipfile
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, BinaryIO

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
# CSV files larger than this are streamed: only the needed columns are kept, parsed to floats as they are
# read, so memory is 8 bytes per needed cell (plus one line number per row) instead of a string per cell.
STREAM_THRESHOLD = 256 * 1024 * 1024
# Text cells are parsed in blocks of this many rows, on both paths, so both give the same floats.
CHUNK_ROWS = 1 << 16
BLOCK_BYTES = 1 << 20


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
    # each complete row's number in the input file as a reader sees it (CSV: line number with the
    # header on line 1; Excel: sheet row; Parquet: 1, 2, ...); empty when the pair was built by hand
    rows: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))

    @property
    def row_numbers(self) -> np.ndarray:
        """Input row numbers of the complete rows (1, 2, ... when the pair was built without a file)."""
        if self.rows.size == self.x.size:
            return self.rows
        return np.arange(1, self.x.size + 1, dtype=np.int64)


@dataclass(frozen=True)
class ParsedColumn:
    """A column already parsed to floats while the file was streamed, with what was wrong in it.

    The problems are kept, not raised, so that they surface where and when the
    text path reports them (``pair_data``), with the same message.
    """

    values: np.ndarray  # float64, NaN where a cell is missing
    bad: tuple[tuple[int, str], ...] = ()  # the first three non-numeric cells: (line, cell as written)
    n_bad: int = 0
    infinite: tuple[int, str] | None = None  # the first infinite or out-of-range cell
    tiny: tuple[int, str] | None = None  # the first nonzero number that would be stored as 0


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


def _bom_encoding(data: bytes) -> str:
    """The encoding a UTF-32 or UTF-16 byte-order mark announces, or "" without one. UTF-32's little-endian
    mark begins with UTF-16's, so it is looked for first."""
    if data.startswith((codecs.BOM_UTF32_LE, codecs.BOM_UTF32_BE)):
        return "utf-32"
    if data.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        return "utf-16"
    return ""


def _unicode_error(path: Path, encoding: str) -> DataError:
    name = encoding.upper()
    return DataError(f"{path}: starts like {name} text but is not valid {name}; re-save the file as UTF-8")


def _nul_error(path: Path) -> DataError:
    return DataError(f"{path}: does not look like a CSV text file (it holds NUL bytes); if it is an Excel "
                     "or Parquet file give it a .xlsx or .parquet name, or set data.format in the spec")


def _mixed_error(path: Path, line: int, byte: int) -> DataError:
    return DataError(f"{path}: the file mixes text encodings: it is UTF-8 up to line {line}, which has the "
                     f"byte 0x{byte:02X} that is not UTF-8; re-save the whole file as UTF-8")


def _decode(path: Path, data: bytes) -> tuple[str, str]:
    """The encoding that decodes the whole file, and the text (without a byte-order mark).

    UTF-8 first (with or without a BOM), UTF-32 or UTF-16 when it starts with
    their BOM (UTF-16 is Excel's "Unicode text"), then cp1252 and latin-1 for files that have
    no UTF-8 at all. A file that is UTF-8 in one place and not in another is
    refused rather than guessed at. ``_stream_encoding`` makes the same choice
    block by block.
    """
    announced = _bom_encoding(data)
    if announced:
        try:
            return announced, data.decode(announced)
        except UnicodeDecodeError:
            raise _unicode_error(path, announced) from None
    if b"\x00" in data[:65536]:
        raise _nul_error(path)
    encoding = "utf-8-sig" if data.startswith(codecs.BOM_UTF8) else "utf-8"
    try:
        return encoding, data.decode(encoding)
    except UnicodeDecodeError as exc:
        start = exc.start + (len(codecs.BOM_UTF8) if encoding == "utf-8-sig" else 0)  # offsets skip the BOM
        if encoding == "utf-8-sig" or not data[:start].isascii():
            raise _mixed_error(path, _line_of(data, start), data[start]) from None
    for fallback in CSV_ENCODINGS[1:]:
        try:
            return fallback, data.decode(fallback)
        except UnicodeDecodeError:
            continue
    raise DataError(f"{path}: could not decode the text (tried {', '.join(CSV_ENCODINGS)}); "
                    "re-save the file as UTF-8")  # pragma: no cover - latin-1 decodes every byte


def _utf8_failure(blocks: Iterator[bytes]) -> tuple[int, int, bool] | None:
    """Where the concatenated blocks stop being UTF-8: (line, byte, any non-ASCII byte before it), or None."""
    carry = b""  # the start of a character cut by a block boundary
    lines, high = 0, False
    for block in blocks:
        buffer = carry + block
        try:
            buffer.decode("utf-8")
            valid, carry = len(buffer), b""
        except UnicodeDecodeError as exc:
            if exc.end != len(buffer) or exc.reason != "unexpected end of data":
                head = buffer[: exc.start]
                return lines + head.count(b"\n") + 1, buffer[exc.start], high or not head.isascii()
            valid, carry = exc.start, buffer[exc.start:]
        lines += buffer.count(b"\n", 0, valid)
        high = high or not buffer[:valid].isascii()
    return (lines + 1, carry[0], high) if carry else None  # the file ends inside a character


def _blocks(handle: BinaryIO, first: bytes) -> Iterator[bytes]:
    yield first
    yield from iter(lambda: handle.read(BLOCK_BYTES), b"")


def _stream_encoding(path: Path) -> str:
    """The encoding ``_decode`` would choose, found block by block, with its errors, without holding the file."""
    try:
        with path.open("rb") as handle:
            first = handle.read(max(BLOCK_BYTES, 65536))  # the NUL check looks at 64 KiB
            announced = _bom_encoding(first)
            if announced:
                decoder = codecs.getincrementaldecoder(announced)()
                try:
                    for block in _blocks(handle, first):
                        decoder.decode(block)
                    decoder.decode(b"", final=True)
                except UnicodeDecodeError:
                    raise _unicode_error(path, announced) from None
                return announced
            if b"\x00" in first[:65536]:
                raise _nul_error(path)
            signed = first.startswith(codecs.BOM_UTF8)
            failure = _utf8_failure(_blocks(handle, first))
            if failure is None:
                return "utf-8-sig" if signed else "utf-8"
            line, byte, high = failure
            if signed or high:
                raise _mixed_error(path, line, byte)
            handle.seek(0)
            try:
                for block in _blocks(handle, b""):
                    block.decode(CSV_ENCODINGS[1])
            except UnicodeDecodeError:
                return CSV_ENCODINGS[2]  # latin-1 decodes every byte
            return CSV_ENCODINGS[1]
    except OSError as exc:
        raise _unreadable(path, exc) from None


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


def _nfc(name: str) -> str:
    return unicodedata.normalize("NFC", name)


def _nfc_lookup(names: Iterable[str]) -> dict[str, str]:
    """Each name by its NFC form; header names are unique in that form, so nothing is lost."""
    return {_nfc(name): name for name in names}


def _header_names(cells: list[object], where: str, path: Path) -> list[str]:
    """Column names from a header row: stripped, no repeats (also none that differ only in Unicode form), a
    blank cell named `Unnamed: <position from 0>` like pandas does, or `Unnamed: 0.1` when the header already
    has a column called `Unnamed: 0` (a file saved twice with its row index)."""
    texts = []
    for cell in cells:
        text = "" if cell is None or (isinstance(cell, float) and np.isnan(cell)) else str(cell)
        texts.append(text.strip().lstrip("\ufeff").strip())
    taken = {_nfc(text) for text in texts if text}
    names = []
    for index, text in enumerate(texts):
        if not text:
            text, copy = f"Unnamed: {index}", 0
            while text in taken:
                copy += 1
                text = f"Unnamed: {index}.{copy}"
            taken.add(text)
        names.append(text)
    first_seen: dict[str, int] = {}
    for index, name in enumerate(names):
        earlier = first_seen.get(_nfc(name))
        if earlier is not None and names[earlier] == name:
            raise DataError(f"{path}: the column name `{name}` appears more than once in the header ({where}, "
                            f"columns {earlier + 1} and {index + 1}); rename one")
        if earlier is not None:
            raise DataError(f"{path}: columns {earlier + 1} and {index + 1} of the header ({where}) are both named "
                            f"`{name}`, written with different Unicode characters (an accent stored as part of "
                            "its letter in one, as a separate mark in the other); rename one")
        first_seen[_nfc(name)] = index
    return names


def _unreadable(path: Path, exc: OSError) -> DataError:
    return DataError(f"{path}: the data file cannot be read ({exc.strerror or type(exc).__name__}); "
                     "check its permissions")


def _read_bytes(path: Path) -> bytes:
    try:
        return path.read_bytes()
    except OSError as exc:
        raise _unreadable(path, exc) from None


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


def _csv_rows(path: Path, lines: Iterable[str], delimiter: str) -> Iterator[tuple[int, list[str]]]:
    """The header (its line number and the column names), then each data row, fitted to the header's width,
    with the line it starts on (header = line 1, a quoted value spanning lines counts from its first line).
    Yields nothing when every line is blank."""
    reader = csv.reader(lines, delimiter=delimiter)
    width = -1  # fields per row, once the header is read
    named = 0  # fields up to the header's last named column: a shorter row is refused
    header_at = previous = 0
    try:
        for row in reader:
            start, previous = previous + 1, reader.line_num  # a quoted value may span lines
            if len(row) == width:
                yield start, row
            elif _is_blank(row):
                continue
            elif width < 0:
                names = _header_names(list(row), f"line {start}", path)
                width = len(names)
                named = max(i + 1 for i, cell in enumerate(row) if cell.strip() or i == 0)
                header_at = start
                yield start, names
            else:
                yield start, _fit_row(path, row, start, width, named, header_at, delimiter)
    except csv.Error as exc:
        raise DataError(f"{path}: line {reader.line_num} cannot be read as CSV ({exc}); check its quotes "
                        "and characters") from None


def _no_rows(path: Path) -> DataError:
    return DataError(f"{path}: the table has a header but no data rows; add the data below the header")


def _empty(path: Path) -> DataError:
    return DataError(f"{path}: the file is empty; it needs a header row and data rows")


def _read_csv(path: Path) -> tuple[pd.DataFrame, str, str]:
    """The table as text cells indexed by line number, with the encoding and delimiter used."""
    data = _read_bytes(path)
    encoding, text = _decode(path, data)
    if not text.strip():
        raise _empty(path)
    delimiter = _delimiter(text)
    records = _csv_rows(path, io.StringIO(text, newline=""), delimiter)
    names = next(records, (0, []))[1]
    lines: list[int] = []
    rows: list[list[str]] = []
    for line, row in records:
        lines.append(line)
        rows.append(row)
    if not rows:
        raise _no_rows(path)
    frame = pd.DataFrame(rows, columns=names, index=pd.Index(lines, name="line"), dtype=object)
    return frame, encoding, delimiter


class _ColumnParser:
    """Collects one column's parsed blocks and the first of its problems, for a streamed file."""

    def __init__(self) -> None:
        self.blocks: list[np.ndarray] = []
        self.bad: list[tuple[int, str]] = []
        self.n_bad = 0
        self.infinite: tuple[int, str] | None = None
        self.tiny: tuple[int, str] | None = None

    def add(self, cells: list[str], lines: list[int]) -> None:
        values, bad_mask, tiny_mask = _parse_cells(pd.Series(cells, dtype=object))
        self.blocks.append(values)
        bad = np.flatnonzero(bad_mask)
        self.n_bad += bad.size
        self.bad.extend((lines[p], cells[p]) for p in bad[: max(0, 3 - len(self.bad))])
        infinite = np.flatnonzero(np.isinf(values))
        if self.infinite is None and infinite.size:
            self.infinite = (lines[infinite[0]], cells[infinite[0]])
        tiny = np.flatnonzero(tiny_mask)
        if self.tiny is None and tiny.size:
            self.tiny = (lines[tiny[0]], cells[tiny[0]])

    def result(self) -> ParsedColumn:
        values = np.concatenate(self.blocks)
        self.blocks.clear()
        return ParsedColumn(values=values, bad=tuple(self.bad), n_bad=self.n_bad, infinite=self.infinite,
                            tiny=self.tiny)


def _stream_csv(path: Path, wanted: tuple[str, ...]) -> tuple[pd.DataFrame, list[str], dict[str, ParsedColumn],
                                                             str, str]:
    """A large CSV file read row by row: the line numbers, the column names, the wanted columns parsed to
    floats (those the header has), the encoding and the delimiter. Refuses what ``_read_csv`` refuses, with
    the same messages; problems in a column's cells are kept for ``pair_data`` to report, as it does for text
    cells."""
    encoding = _stream_encoding(path)
    try:
        with path.open(encoding=encoding, newline="") as handle:
            delimiter = _delimiter(handle.read(65537))  # what _delimiter reads of the whole text
        with path.open(encoding=encoding, newline="") as handle:
            records = _csv_rows(path, handle, delimiter)
            header = next(records, None)
            if header is None:  # only blank rows: whitespace only, or blank quoted values
                handle.seek(0)
                if not any(block.strip() for block in iter(lambda: handle.read(BLOCK_BYTES), "")):
                    raise _empty(path)
                raise _no_rows(path)
            names = header[1]
            lookup = _nfc_lookup(names)
            kept = list(dict.fromkeys(lookup[_nfc(name)] for name in wanted if _nfc(name) in lookup))
            getter = operator.itemgetter(*(names.index(name) for name in kept)) if kept else None
            parsers = {name: _ColumnParser() for name in kept}
            line_blocks: list[np.ndarray] = []
            lines: list[int] = []
            cells: list = []  # the kept cells of each row: a tuple, or one cell when one column is kept

            def flush() -> None:
                columns = [cells] if len(kept) == 1 else list(zip(*cells, strict=True))
                for name, column in zip(kept, columns, strict=True):
                    parsers[name].add(list(column), lines)
                line_blocks.append(np.array(lines, dtype=np.int64))
                lines.clear()
                cells.clear()

            for line, row in records:
                lines.append(line)
                if getter is not None:
                    cells.append(getter(row))
                if len(lines) == CHUNK_ROWS:
                    flush()
            if lines:
                flush()
    except OSError as exc:
        raise _unreadable(path, exc) from None
    if not line_blocks:
        raise _no_rows(path)
    frame = pd.DataFrame(index=pd.Index(np.concatenate(line_blocks), name="line"))
    return frame, names, {name: parser.result() for name, parser in parsers.items()}, encoding, delimiter


# ------------------------------------------------------------------ Excel, Parquet


OLD_EXCEL_SIGNATURE = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"  # the container of old-style .xls workbooks


@dataclass(frozen=True)
class SheetProblem:
    """A sheet cell that is not blank but holds no number to read: a formula's error (``#DIV/0!``), or a
    formula whose value was never saved (a file written by a program that does not calculate). It stays in
    the frame, so the column's check refuses it with its address, as a CSV column's text is refused."""

    address: str  # e.g. "B5"
    text: str  # the error as the sheet shows it, or the formula
    kind: str  # "error" or "formula"

    def __str__(self) -> str:
        return self.text

    def describe(self) -> str:
        if self.kind == "error":
            return f"{self.address} (the error {self.text[:20]})"
        return f"{self.address} (the formula {self.text[:20]!r}, whose value was never saved)"


def _load_workbook(handle: BinaryIO, data_only: bool) -> Any:  # an openpyxl Workbook
    import openpyxl

    handle.seek(0)  # a handle, not the path: openpyxl would refuse a data.format = "excel" file by its suffix
    return openpyxl.load_workbook(handle, read_only=True, data_only=data_only, keep_links=False)


def _charts_only(path: Path) -> DataError:
    return DataError(f"{path}: the workbook holds only chart sheets, no worksheet with a table; point "
                     "data.path at the workbook (or a CSV export) that holds the data")


def _unreadable_workbook(path: Path, handle: BinaryIO, exc: Exception) -> DataError:
    """Why opening failed, as far as the file's parts tell: openpyxl fails on a chart sheet without a chart."""
    try:
        handle.seek(0)
        with zipfile.ZipFile(handle) as archive:
            parts = archive.namelist()
    except Exception:  # not a zip archive at all
        parts = []
    if any(n.startswith("xl/chartsheets/") for n in parts) and not any(n.startswith("xl/worksheets/") for n in parts):
        return _charts_only(path)
    return DataError(f"{path}: not a readable Excel workbook ({type(exc).__name__}); re-save it from a "
                     "spreadsheet program as .xlsx, or set data.format if it is not Excel")


def _choose_sheet(path: Path, book: Any, sheet: str) -> str:
    """The worksheet to read: the one data.sheet names, or the only one; chart sheets hold no table."""
    sheets = [str(ws.title) for ws in book.worksheets]
    charts = [str(cs.title) for cs in book.chartsheets]
    if not sheets:
        raise _charts_only(path)
    listed = ", ".join(f"`{name}`" for name in sheets)
    if sheet in charts:
        raise DataError(f"{path}: sheet `{sheet}` (data.sheet) is a chart sheet, which holds no table; the "
                        f"worksheets are: {listed}")
    if sheet:
        if sheet not in sheets:
            close = difflib.get_close_matches(sheet, sheets, n=1, cutoff=0.5)
            hint = f" Did you mean `{close[0]}`?" if close else ""
            raise DataError(f"{path}: no sheet named `{sheet}` (data.sheet); the sheets are: {listed}.{hint}")
        return sheet
    if len(sheets) == 1:
        return sheets[0]
    raise DataError(f"{path}: the workbook has {len(sheets)} sheets ({listed}); name the one to use "
                    "with data.sheet in the spec, e.g. sheet = " + repr(sheets[0]).replace("'", '"'))


def _sheet_values(sheet: Any) -> tuple[list[list[object]], set[tuple[int, int]]]:
    """Each sheet row's cell values (saved formula values, errors as ``SheetProblem``), and the cells that
    are present but empty, which is how a formula without a saved value reads. A formula's saved empty text
    (type "str") is a blank cell, not one of those."""
    from openpyxl.cell.read_only import EMPTY_CELL
    from openpyxl.utils import get_column_letter

    sheet.reset_dimensions()  # declared dimensions can be wrong
    rows: list[list[object]] = []
    empty: set[tuple[int, int]] = set()
    for row, cells in enumerate(sheet.iter_rows(), start=1):
        values: list[object] = []
        for column, cell in enumerate(cells, start=1):
            value = cell.value
            if value is None and cell is not EMPTY_CELL and cell.data_type != "str":
                empty.add((row, column))
            elif cell.data_type == "e":
                value = SheetProblem(f"{get_column_letter(column)}{row}", str(value), "error")
            values.append(value)
        rows.append(values)
    return rows, empty


def _mark_unsaved_formulas(sheet: Any, rows: list[list[object]], empty: set[tuple[int, int]]) -> None:
    """Replace the empty cells that hold a formula (read with formulas, not values) by a ``SheetProblem``."""
    from openpyxl.utils import get_column_letter

    last = max(row for row, _ in empty)
    sheet.reset_dimensions()
    for row, cells in enumerate(sheet.iter_rows(), start=1):
        if row > last:
            break
        for column, cell in enumerate(cells, start=1):
            if cell.data_type == "f" and (row, column) in empty:
                formula = str(getattr(cell.value, "text", cell.value))  # array formulas keep theirs in .text
                rows[row - 1][column - 1] = SheetProblem(f"{get_column_letter(column)}{row}", formula, "formula")


def _excel_rows(path: Path, handle: BinaryIO, sheet: str) -> tuple[list[list[object]], str]:
    try:
        book = _load_workbook(handle, data_only=True)
    except Exception as exc:  # openpyxl raises many types for a broken workbook
        raise _unreadable_workbook(path, handle, exc) from None
    try:
        chosen = _choose_sheet(path, book, sheet)
        try:
            rows, empty = _sheet_values(book[chosen])
            if empty:  # only then can a formula lack its value; finding one needs a second reading
                formulas = _load_workbook(handle, data_only=False)
                try:
                    _mark_unsaved_formulas(formulas[chosen], rows, empty)
                finally:
                    formulas.close()
        except Exception as exc:  # a damaged sheet
            raise DataError(f"{path}: sheet `{chosen}` cannot be read as a table ({type(exc).__name__}); "
                            "re-save the workbook from a spreadsheet program, or choose another sheet") from None
    finally:
        book.close()
    return rows, chosen


def _read_excel(path: Path, sheet: str) -> tuple[pd.DataFrame, str]:
    """The chosen sheet with its first non-empty row as the header, indexed by sheet row number."""
    try:
        with path.open("rb") as handle:
            if handle.read(len(OLD_EXCEL_SIGNATURE)) == OLD_EXCEL_SIGNATURE:
                raise DataError(f"{path}: old-style .xls workbooks cannot be read; open it in Excel and save it "
                                "as .xlsx (or export the sheet as CSV)")
            with warnings.catch_warnings():  # openpyxl's notes on unsupported features are not the user's
                warnings.simplefilter("ignore")
                rows, chosen = _excel_rows(path, handle, sheet)
    except OSError as exc:
        raise _unreadable(path, exc) from None
    width = max((len(row) for row in rows), default=0)
    raw = pd.DataFrame([row + [None] * (width - len(row)) for row in rows], dtype=object)
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


def _read_parquet(path: Path, wanted: tuple[str, ...]) -> tuple[pd.DataFrame, list[str]]:
    """The wanted columns that the file has (only those are read), and the names of all its columns."""
    import pyarrow.parquet as pq

    def unreadable(exc: Exception) -> DataError:
        return DataError(f"{path}: not a readable Parquet file ({type(exc).__name__}); export it again, or set "
                         "data.format if it is not Parquet")

    try:
        schema = pq.read_schema(path)
        stored_index = (schema.pandas_metadata or {}).get("index_columns", [])
    except Exception as exc:  # pyarrow raises its own types for a broken file
        raise unreadable(exc) from None
    stored = [name for name in schema.names if name not in stored_index]
    names = _header_names(stored, "the Parquet schema", path)  # repeated names are refused here, by name
    keys = {_nfc(name) for name in wanted}
    chosen = [index for index, name in enumerate(names) if _nfc(name) in keys]
    try:
        frame = pd.read_parquet(path, columns=[stored[index] for index in chosen])
    except Exception as exc:
        raise unreadable(exc) from None
    frame = frame.reset_index(drop=True)
    frame.columns = [names[index] for index in chosen]
    frame.index = pd.RangeIndex(1, len(frame) + 1, name="row")
    return frame, names


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
    if column in available or _nfc(column) in _nfc_lookup(available):
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
    return _nfc_lookup(names).get(_nfc(column), column)


def load_table(spec: Spec) -> Table:
    """Read the spec's data file as text cells; numeric parsing happens per column. A CSV file larger than
    ``STREAM_THRESHOLD`` bytes is streamed instead, keeping only the needed columns, already as floats."""
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
    if kind == "csv" and path.stat().st_size > STREAM_THRESHOLD:
        frame, available, parsed, encoding, delimiter = _stream_csv(path, wanted)
    elif kind == "csv":
        frame, encoding, delimiter = _read_csv(path)
        available = list(frame.columns)
    elif kind == "excel":
        frame, sheet = _read_excel(path, source.sheet)
        available = list(frame.columns)
    else:
        frame, available = _read_parquet(path, wanted)
    if len(frame) == 0:
        raise _no_rows(path)
    for column in spec.document.variables:
        _require_column(path, available, column, f"variables.{column}")
    kept = available
    if source.columns:
        for column in source.columns:
            _require_column(path, available, column, "data.columns")
        kept = list(source.columns)
    lookup = _nfc_lookup(frame.columns)
    frame = frame.loc[:, list(dict.fromkeys(lookup[_nfc(c)] for c in kept if _nfc(c) in lookup))]
    for column in wanted:
        _require_column(path, kept, column, _key_paths(spec, column), bool(source.columns))
    return Table(path=path, sha256=file_sha256(path), frame=frame, encoding=encoding, sheet=sheet,
                 delimiter=delimiter, parsed=parsed)


def _cells(cells: Iterable[tuple[object, object]]) -> str:
    return ", ".join(f"row {row} ({str(cell)[:20]!r})" for row, cell in cells)


def _parse_cells(raw: pd.Series) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Cells as floats (NaN where missing), where a cell is not a number, and where a nonzero number was
    read as 0 because it is below the smallest subnormal double (``1e-400``).

    Parsed in blocks of ``CHUNK_ROWS`` rows: pandas parses integers apart from
    other numbers, so the blocks keep a streamed file's floats equal to these.
    """
    values, bad, tiny = [np.empty(0)], [np.zeros(0, dtype=bool)], [np.zeros(0, dtype=bool)]
    for start in range(0, len(raw), CHUNK_ROWS):
        text = raw.iloc[start:start + CHUNK_ROWS].astype("string").str.strip()
        missing = (text.isna() | text.str.lower().isin(MISSING_TOKENS)).to_numpy(dtype=bool)
        parsed = pd.to_numeric(text.mask(missing), errors="coerce").to_numpy(dtype=float, na_value=np.nan)
        values.append(parsed)
        bad.append(~missing & np.isnan(parsed))
        zero = parsed == 0
        underflow = np.zeros(parsed.size, dtype=bool)
        if zero.any():  # a zero whose digits before the exponent are not all 0 was written as a nonzero number
            mantissa = text[zero].str.replace(r"[eE].*$", "", regex=True)
            underflow[zero] = mantissa.str.contains("[1-9]", regex=True).to_numpy(dtype=bool, na_value=False)
        tiny.append(underflow)
    return np.concatenate(values), np.concatenate(bad), np.concatenate(tiny)


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
            values, bad_mask, tiny_mask = _parse_cells(raw)
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


def pair_data(table: Table, pair: PairSpec, missing_policy: str) -> PairData:
    """Complete rows of one pair, checked for what cannot be fitted."""
    x_all = _numeric_column(table, pair.x)
    y_all = _numeric_column(table, pair.y)
    where = f"{table.path}: pair (`{pair.x}`, `{pair.y}`)"
    if _data_column(table, pair.x) == _data_column(table, pair.y):
        raise DataError(f"{where} names one column of the data twice, spelled with different Unicode characters "
                        "(an accent stored as part of its letter or as a separate mark); pair two columns")
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
    rows = np.asarray(table.frame.index, dtype=np.int64)[complete]
    return PairData(pair=pair, x=x, y=y, n_rows=table.n_rows, n_dropped=n_dropped, stats=stats, rows=rows)


def load_pairs(spec: Spec, table: Table) -> tuple[PairData, ...]:
    """Every pair of the spec, validated before anything is fitted."""
    policy = spec.document.data.missing
    return tuple(pair_data(table, pair, policy) for pair in spec.pairs)
