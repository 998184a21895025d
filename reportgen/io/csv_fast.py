"""The fast path for clean CSV files: pyarrow's multi-threaded reader, taken only where it is sure to give
exactly what the Python reader in ``io.csv`` gives (the same cells, line numbers, floats, encoding and
delimiter). ``read_clean_csv`` returns None for every other file, and for any error, and the caller then
reads the file with the Python reader, which gives the results and the messages.

A file is clean when it is UTF-8 (a byte-order mark allowed) without NUL bytes; its first line is a header
of at least two columns, read by Python's ``csv`` module as the Python reader reads it; no double quote
follows the header; every line break is ``\\n`` or ``\\r\\n``; no line is empty, or long enough to reach the
``csv`` module's field size limit; and pyarrow, told not to skip empty lines, splits every following line
into exactly the header's number of fields. Each data row then starts on its own line, so the rows are
lines 2, 3, ...

Held whole, every column is read as text, as the Python reader keeps it. Streamed, the needed columns are
parsed to floats here, and taken only when every cell is a missing-value token written without spaces
or a number that pyarrow reads, with none infinite, not-a-number, negative zero, or a zero written with
nonzero digits (a number too small to store): both parsers round a decimal to the nearest double
(pandas 3 and pyarrow both use the fast_float library), so the floats are the same, and the cells the
Python reader would report are all left to it.
"""

from __future__ import annotations

import codecs
import csv
import io
import itertools
import os
import re
from collections.abc import Iterable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pa_csv

from reportgen.errors import DataError
from reportgen.io.common import header_names, nfc, nfc_lookup
from reportgen.io.csv import MISSING_TOKENS, ParsedColumn, _delimiter, _is_blank

# ``_delimiter`` looks at this many characters of the text; one more tells it whether the text is longer.
DELIMITER_CHARS = 65537
# Enough bytes for that many characters in UTF-8 (at most 4 bytes each), after a 3-byte byte-order mark.
HEAD_BYTES = 4 * DELIMITER_CHARS + len(codecs.BOM_UTF8)
# The file is checked in blocks of this many windows; every window must hold a line break (see _lines_short).
WINDOWS_PER_BLOCK = 16
# pyarrow parses blocks of this many bytes on separate threads.
ARROW_BLOCK_BYTES = 1 << 22
# A CR not followed by LF: a line break the Python reader counts as a line and this path does not take.
LONE_CR = re.compile(rb"\r(?!\n)")
EMPTY_LINES = (b"\n\n", b"\n\r\n")
# A cell read as zero whose digits before any exponent are all zero, so it was written as zero.
WRITTEN_ZERO = r"^[+-]?0*\.?0*([eE][+-]?[0-9]+)?$"
# A number written with a decimal point or an exponent, which pandas never reads as an integer.
NOT_INTEGER = r"[.eE]"


def _spellings(token: str) -> Iterable[str]:
    """Every upper/lower-case spelling of a token, as ``parse_cells`` matches tokens case-insensitively."""
    return ("".join(chars) for chars in itertools.product(*({c.lower(), c.upper()} for c in token)))


# The missing-value tokens as they may be written, without surrounding spaces (a cell with spaces is left to
# the Python reader).
MISSING_SPELLINGS = tuple(sorted({spelling for token in MISSING_TOKENS for spelling in _spellings(token)}))


@dataclass(frozen=True)
class CleanHeader:
    """What the first line of a clean file gives: the encoding, delimiter, column names, and where line 2 starts."""

    encoding: str
    delimiter: str
    names: list[str]
    data_start: int


def _header(path: Path, head: bytes, whole: bool) -> CleanHeader | None:
    """The header as the Python reader reads it, when it is the file's first line and names two columns or more."""
    encoding = "utf-8-sig" if head.startswith(codecs.BOM_UTF8) else "utf-8"
    end = head.find(b"\n")
    if end < 0:  # no data line in the first bytes: left to the Python reader
        return None
    text = codecs.getincrementaldecoder(encoding)().decode(head, final=whole)[:DELIMITER_CHARS]
    if "\n" not in text:  # a header longer than the text the delimiter is chosen from
        return None
    delimiter = _delimiter(text)
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter)
    row = next(reader, None)
    if row is None or reader.line_num != 1 or _is_blank(row):  # a header spanning lines, or a blank first line
        return None
    names = header_names(list(row), "line 1", path)
    if len(names) < 2:  # a one-column file's blank-looking lines are skipped by the Python reader
        return None
    return CleanHeader(encoding=encoding, delimiter=delimiter, names=names, data_start=end + 1)


def _fill(handle: BinaryIO, buffer: bytearray) -> int:
    """Bytes read into ``buffer``: all of it, unless the file ends first."""
    view, filled = memoryview(buffer), 0
    while filled < len(buffer):
        count = handle.readinto(view[filled:])
        if not count:
            break
        filled += count
    return filled


def _bytes_clean(handle: BinaryIO, data_start: int) -> bool:
    """Whether the whole file is valid UTF-8 without NUL bytes, has no double quote after the header, breaks
    lines only with LF or CR LF, has no empty line, and no line of ``csv.field_size_limit()`` bytes or more."""
    window = max(1, min(csv.field_size_limit() // 2, 1 << 16))
    buffer = bytearray(window * WINDOWS_PER_BLOCK)
    decoder = codecs.getincrementaldecoder("utf-8")()
    offset, cr_at_end, tail = 0, False, b""
    while count := _fill(handle, buffer):
        if buffer.find(b"\0", 0, count) >= 0 or buffer.find(b'"', max(0, data_start - offset), count) >= 0:
            return False
        if cr_at_end and buffer[0] != ord("\n"):
            return False
        # An empty line: the Python reader skips it, pyarrow would read it as a row of empty cells.
        if any(buffer.find(gap, 0, count) >= 0 or gap in tail + buffer[:2] for gap in EMPTY_LINES):
            return False
        tail = bytes(buffer[max(0, count - 2):count])
        lone = LONE_CR.search(buffer, 0, count) if buffer.find(b"\r", 0, count) >= 0 else None
        if lone is not None and lone.start() < count - 1:
            return False
        cr_at_end = lone is not None  # a CR ending the block: the next block must start with LF
        block = buffer if count == len(buffer) else buffer[:count]
        if decoder.getstate()[0] or not block.isascii():  # ASCII needs no decoding unless a character is cut
            decoder.decode(block)  # raises UnicodeDecodeError where the file is not UTF-8
        # Every whole window holds a line break, so no line is as long as two windows (the field size limit).
        if any(buffer.find(b"\n", start, start + window) < 0 for start in range(0, count - window + 1, window)):
            return False
        offset += count
    decoder.decode(b"", final=True)
    return not cr_at_end


def _arrow_table(path: Path, header: CleanHeader, columns: list[int]) -> pa.Table:
    """The data lines parsed by pyarrow, the given columns kept as text; raises where a line does not split into
    the header's number of fields."""
    internal = [f"column {index}" for index in range(len(header.names))]
    kept = [internal[index] for index in columns]
    read = pa_csv.ReadOptions(column_names=internal, block_size=ARROW_BLOCK_BYTES, use_threads=True)
    parse = pa_csv.ParseOptions(delimiter=header.delimiter, quote_char=False, double_quote=False,
                                escape_char=False, newlines_in_values=False, ignore_empty_lines=False)
    convert = pa_csv.ConvertOptions(column_types=dict.fromkeys(kept, pa.string()), include_columns=kept,
                                    strings_can_be_null=False, quoted_strings_can_be_null=False, check_utf8=True)
    with pa.OSFile(str(path)) as source:
        source.seek(header.data_start)
        return pa_csv.read_csv(source, read_options=read, parse_options=parse, convert_options=convert)


def _floats(cells: pa.Array) -> np.ndarray | None:
    """A block of cells as floats (NaN where missing), or None unless every cell is read as ``parse_cells``
    reads it and none is one that it reports."""
    missing = pc.is_in(cells, value_set=pa.array(MISSING_SPELLINGS, pa.string()))
    try:
        numbers = pc.cast(pc.if_else(missing, pa.scalar(None, pa.string()), cells), pa.float64())
    except pa.ArrowInvalid:  # a cell that is neither a number nor a missing token
        return None
    values = numbers.to_numpy(zero_copy_only=False)
    if not np.array_equal(np.isnan(values), missing.to_numpy(zero_copy_only=False)) or np.isinf(values).any():
        return None  # "-nan", "inf": reported, or read otherwise, by the Python reader
    zero = values == 0
    if zero.any():
        zeros = pc.filter(cells, pa.array(zero))
        if not pc.all(pc.match_substring_regex(zeros, WRITTEN_ZERO)).as_py():  # a nonzero number too small to store
            return None
        negative = np.signbit(values[zero])
        if negative.any() and not pc.all(pc.match_substring_regex(pc.filter(zeros, pa.array(negative)),
                                                                   NOT_INTEGER)).as_py():
            return None  # pandas reads "-0" as -0.0 among decimals, as 0 among integers
    return values


def _parsed_columns(table: pa.Table, names: list[str]) -> dict[str, ParsedColumn] | None:
    """Each column parsed to floats, blocks on separate threads (pyarrow's kernels release the GIL)."""
    jobs = [(name, chunk) for name, column in zip(names, table.columns, strict=True) for chunk in column.chunks]
    with ThreadPoolExecutor(max_workers=os.cpu_count() or 1) as pool:
        blocks = list(pool.map(lambda job: _floats(job[1]), jobs))
    if any(block is None for block in blocks):
        return None
    parsed = {}
    for name in names:
        values = [block for (owner, _), block in zip(jobs, blocks, strict=True) if owner == name]
        parsed[name] = ParsedColumn(values=np.concatenate(values) if values else np.empty(0))
    return parsed


def _line_index(n_rows: int) -> pd.Index:
    return pd.Index(np.arange(2, n_rows + 2, dtype=np.int64), name="line")


def read_clean_csv(path: Path, wanted: tuple[str, ...], streamed: bool
                   ) -> tuple[pd.DataFrame, list[str], dict[str, ParsedColumn] | None, str, str] | None:
    """What ``read_csv_table`` returns for the file, read by pyarrow; None when the file is not clean, when
    it holds something the Python reader would report, or when anything goes wrong."""
    try:
        with path.open("rb") as handle:
            head = handle.read(HEAD_BYTES)
            header = _header(path, head, len(head) < HEAD_BYTES)
            if header is None:
                return None
            handle.seek(0)
            if not _bytes_clean(handle, header.data_start):
                return None
        names = header.names
        if streamed:
            lookup = nfc_lookup(names)
            kept = list(dict.fromkeys(lookup[nfc(name)] for name in wanted if nfc(name) in lookup))
            if not kept:
                return None
            table = _arrow_table(path, header, [names.index(name) for name in kept])
            parsed = _parsed_columns(table, kept) if table.num_rows else None
            if parsed is None:
                return None
            return pd.DataFrame(index=_line_index(table.num_rows)), names, parsed, header.encoding, header.delimiter
        table = _arrow_table(path, header, list(range(len(names))))
        if not table.num_rows:
            return None
        cells = {name: column.to_numpy() for name, column in zip(names, table.columns, strict=True)}
        frame = pd.DataFrame(cells, index=_line_index(table.num_rows), columns=names, dtype=object)
        return frame, names, None, header.encoding, header.delimiter
    except (pa.ArrowException, ValueError, OSError, csv.Error, DataError):
        return None
