"""What every reader shares: column names matched in Unicode normal form C and the header's names checked,
and the errors for a file that cannot be read or holds no rows.

Names are compared in NFC (Unicode Standard Annex #15, Davis and Whistler), so a header saved with "e" plus a
combining accent matches a spec typed with a composed "é"; messages keep each side's own spelling.
"""

from __future__ import annotations

import unicodedata
from collections.abc import Iterable
from pathlib import Path

import numpy as np

from reportgen.errors import DataError


def nfc(name: str) -> str:
    return unicodedata.normalize("NFC", name)


def nfc_lookup(names: Iterable[str]) -> dict[str, str]:
    """Each name by its NFC form; header names are unique in that form, so nothing is lost."""
    return {nfc(name): name for name in names}


def header_names(cells: list[object], where: str, path: Path) -> list[str]:
    """Column names from a header row: stripped, no repeats (also none that differ only in Unicode form), a
    blank cell named `Unnamed: <position from 0>` like pandas does, or `Unnamed: 0.1` when the header already
    has a column called `Unnamed: 0` (a file saved twice with its row index)."""
    texts = []
    for cell in cells:
        text = "" if cell is None or (isinstance(cell, float) and np.isnan(cell)) else str(cell)
        texts.append(text.strip().lstrip("\ufeff").strip())
    taken = {nfc(text) for text in texts if text}
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
        earlier = first_seen.get(nfc(name))
        if earlier is not None and names[earlier] == name:
            raise DataError(f"{path}: the column name `{name}` appears more than once in the header ({where}, "
                            f"columns {earlier + 1} and {index + 1}); rename one")
        if earlier is not None:
            raise DataError(f"{path}: columns {earlier + 1} and {index + 1} of the header ({where}) are both named "
                            f"`{name}`, written with different Unicode characters (an accent stored as part of "
                            "its letter in one, as a separate mark in the other); rename one")
        first_seen[nfc(name)] = index
    return names


def unreadable(path: Path, exc: OSError) -> DataError:
    return DataError(f"{path}: the data file cannot be read ({exc.strerror or type(exc).__name__}); "
                     "check its permissions")


def read_bytes(path: Path) -> bytes:
    try:
        return path.read_bytes()
    except OSError as exc:
        raise unreadable(path, exc) from None



def no_rows(path: Path) -> DataError:
    return DataError(f"{path}: the table has a header but no data rows; add the data below the header")


def empty_file(path: Path) -> DataError:
    return DataError(f"{path}: the file is empty; it needs a header row and data rows")

