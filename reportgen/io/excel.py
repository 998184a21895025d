"""Excel workbooks (.xlsx, .xlsm) read with openpyxl: one worksheet, its first non-empty row as the header,
indexed by sheet row number.

Cells are read as a CSV file's would be: a formula's saved value is read, and a formula error or a formula
whose value was never saved becomes a ``SheetProblem``, refused later with the cell's address.
"""

from __future__ import annotations

import difflib
import warnings
import zipfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any, BinaryIO

import pandas as pd

from reportgen.errors import DataError
from reportgen.io.common import header_names, unreadable

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
    # The hint once named the first sheet, often a notes or cover sheet: name the first that looks like data.
    likely = next((name for name in sheets if _has_numeric_column(book[name])), None)
    if likely is None:
        hint = ("none of them has a column of numbers under a header row; check that this is the "
                "workbook with the data")
    else:
        hint = ("the first with a column of numbers is " + f"`{likely}`: sheet = "
                + '"' + likely.replace("\\", "\\\\").replace('"', '\\"') + '"')
    raise DataError(f"{path}: the workbook has {len(sheets)} sheets ({listed}); name the one to use "
                    f"with data.sheet in the spec; {hint}")


SHEET_HINT_ROWS = 50  # rows looked at per sheet for the hint: enough to pass a header, cheap on big sheets


def _has_numeric_column(sheet: Any) -> bool:
    """Whether a number (not a boolean) stands in a row below the sheet's first non-empty row."""
    try:
        header_seen = False
        for count, row in enumerate(sheet.iter_rows(values_only=True)):
            if count >= SHEET_HINT_ROWS:
                break
            if not header_seen:
                header_seen = any(value is not None for value in row)
                continue
            if any(isinstance(value, int | float) and not isinstance(value, bool) for value in row):
                return True
    except Exception:  # a damaged sheet is no hint; reading it for real reports it
        return False
    return False


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


def read_excel(path: Path, sheet: str) -> tuple[pd.DataFrame, str]:
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
        raise unreadable(path, exc) from None
    width = max((len(row) for row in rows), default=0)
    raw = pd.DataFrame([row + [None] * (width - len(row)) for row in rows], dtype=object)
    raw = raw.dropna(axis=0, how="all").dropna(axis=1, how="all")
    if raw.empty:
        raise DataError(f"{path}: sheet `{chosen}` is empty; put a header row and data rows on it, "
                        "or name another sheet with data.sheet")
    header_row = int(raw.index[0]) + 1
    names = header_names(list(raw.iloc[0]), f"row {header_row} of sheet `{chosen}`", path)
    frame = raw.iloc[1:].copy()
    frame.columns = names
    frame.index = pd.Index([int(i) + 1 for i in frame.index], name="row")
    return frame, chosen

