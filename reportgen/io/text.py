"""The text encoding of a CSV file: UTF-8 (with or without a byte-order mark), UTF-32 or UTF-16 when their
byte-order mark says so, then cp1252 and latin-1; a file that mixes encodings is refused, not guessed at.

``decode`` decides for a file held in memory; ``stream_encoding`` makes the same choice, with the same
messages, reading ``BLOCK_BYTES`` at a time (the incremental decoders of Python's ``codecs`` module).
"""

from __future__ import annotations

import codecs
from collections.abc import Iterator
from pathlib import Path
from typing import BinaryIO, TextIO

from reportgen.errors import DataError
from reportgen.io.common import unreadable

CSV_ENCODINGS = ("utf-8", "cp1252", "latin-1")
# A streamed file is read this many bytes at a time.
BLOCK_BYTES = 1 << 20


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


def decode(path: Path, data: bytes) -> tuple[str, str]:
    """The encoding that decodes the whole file, and the text (without a byte-order mark).

    UTF-8 first (with or without a BOM), UTF-32 or UTF-16 when it starts with
    their BOM (UTF-16 is Excel's "Unicode text"), then cp1252 and latin-1 for files that have
    no UTF-8 at all. A file that is UTF-8 in one place and not in another is
    refused rather than guessed at. ``stream_encoding`` makes the same choice
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


def stream_encoding(path: Path) -> str:
    """The encoding ``decode`` would choose, found block by block, with its errors, without holding the file."""
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
        raise unreadable(path, exc) from None



def has_text(handle: TextIO) -> bool:
    """Whether a text file holds anything but whitespace, read ``BLOCK_BYTES`` characters at a time."""
    return any(block.strip() for block in iter(lambda: handle.read(BLOCK_BYTES), ""))
