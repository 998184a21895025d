"""CSV files: the delimiter, the rows fitted to the header's width, and the table read whole or, above
``STREAM_THRESHOLD`` bytes, streamed with only the needed columns kept as floats. Clean files take a faster
path through pyarrow (``io.csv_fast``) that gives the same table; this module's reader takes the rest.

The rows are read by Python's ``csv`` module (RFC 4180 quoting). Each row is indexed by the line it starts on
(header = line 1). Cells are parsed to floats in blocks of ``CHUNK_ROWS`` rows on both paths (``parse_cells``),
so a streamed file gives the same floats, and the same messages, as one read whole.
"""

from __future__ import annotations

import csv
import io
import operator
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from reportgen.errors import DataError
from reportgen.io.common import empty_file, header_names, nfc, nfc_lookup, no_rows, read_bytes, unreadable
from reportgen.io.text import decode, has_text, stream_encoding

CSV_DELIMITERS = (",", ";", "\t", "|")
DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "bar"}
# Cells read as missing, compared case-insensitively after stripping spaces.
MISSING_TOKENS = frozenset({"", "na", "n/a", "nan", "null", "-"})
# CSV files larger than this are streamed: only the needed columns are kept, parsed to floats as they are
# read, so memory is 8 bytes per needed cell (plus one line number per row) instead of a string per cell.
STREAM_THRESHOLD = 256 * 1024 * 1024
# Text cells are parsed in blocks of this many rows, on both paths, so both give the same floats.
CHUNK_ROWS = 1 << 16
# Clean files are read by pyarrow (``io.csv_fast``), with the same results; False reads every file here.
FAST_PATH = True


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
                names = header_names(list(row), f"line {start}", path)
                width = len(names)
                named = max(i + 1 for i, cell in enumerate(row) if cell.strip() or i == 0)
                header_at = start
                yield start, names
            else:
                yield start, _fit_row(path, row, start, width, named, header_at, delimiter)
    except csv.Error as exc:
        raise DataError(f"{path}: line {reader.line_num} cannot be read as CSV ({exc}); check its quotes "
                        "and characters") from None



def read_csv(path: Path) -> tuple[pd.DataFrame, str, str]:
    """The table as text cells indexed by line number, with the encoding and delimiter used."""
    data = read_bytes(path)
    encoding, text = decode(path, data)
    if not text.strip():
        raise empty_file(path)
    delimiter = _delimiter(text)
    records = _csv_rows(path, io.StringIO(text, newline=""), delimiter)
    names = next(records, (0, []))[1]
    lines: list[int] = []
    rows: list[list[str]] = []
    for line, row in records:
        lines.append(line)
        rows.append(row)
    if not rows:
        raise no_rows(path)
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
        values, bad_mask, tiny_mask = parse_cells(pd.Series(cells, dtype=object))
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


def stream_csv(path: Path, wanted: tuple[str, ...]) -> tuple[pd.DataFrame, list[str], dict[str, ParsedColumn],
                                                             str, str]:
    """A large CSV file read row by row: the line numbers, the column names, the wanted columns parsed to
    floats (those the header has), the encoding and the delimiter. Refuses what ``read_csv`` refuses, with
    the same messages; problems in a column's cells are kept for ``pair_data`` to report, as it does for text
    cells."""
    encoding = stream_encoding(path)
    try:
        with path.open(encoding=encoding, newline="") as handle:
            delimiter = _delimiter(handle.read(65537))  # what _delimiter reads of the whole text
        with path.open(encoding=encoding, newline="") as handle:
            records = _csv_rows(path, handle, delimiter)
            header = next(records, None)
            if header is None:  # only blank rows: whitespace only, or blank quoted values
                handle.seek(0)
                if not has_text(handle):
                    raise empty_file(path)
                raise no_rows(path)
            names = header[1]
            lookup = nfc_lookup(names)
            kept = list(dict.fromkeys(lookup[nfc(name)] for name in wanted if nfc(name) in lookup))
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
        raise unreadable(path, exc) from None
    if not line_blocks:
        raise no_rows(path)
    frame = pd.DataFrame(index=pd.Index(np.concatenate(line_blocks), name="line"))
    return frame, names, {name: parser.result() for name, parser in parsers.items()}, encoding, delimiter



def parse_cells(raw: pd.Series) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
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


def read_csv_table(path: Path, wanted: tuple[str, ...]) -> tuple[pd.DataFrame, list[str],
                                                                 dict[str, ParsedColumn] | None, str, str]:
    """The frame, its column names, the parsed columns (None unless streamed), the encoding and the delimiter:
    read whole, or streamed when the file is larger than ``STREAM_THRESHOLD`` bytes. A clean file is read by
    pyarrow's multi-threaded reader when ``FAST_PATH`` is set; every other file, and every error, by the
    Python reader here."""
    streamed = path.stat().st_size > STREAM_THRESHOLD
    if FAST_PATH:
        from reportgen.io.csv_fast import read_clean_csv  # builds on this module; loads pyarrow only for CSV

        fast = read_clean_csv(path, wanted, streamed)
        if fast is not None:
            return fast
    if streamed:
        return stream_csv(path, wanted)
    frame, encoding, delimiter = read_csv(path)
    return frame, list(frame.columns), None, encoding, delimiter
