"""Hostile data files (issue 8, second round): each gets our own one-line error, or is read correctly.

Special files as data.path (a link loop, a named pipe, a device), spreadsheet cells that hold no number
(formula errors, formulas whose value was never saved), numbers too close to zero to store, UTF-32
text, Parquet files with repeated names, workbooks of chart sheets, names in two Unicode normal forms
and blank header cells next to `Unnamed: 0`. Every message is checked through ``reportgen check`` with
the helpers of ``tests/test_bad_input.py``; the CSV cases are also read with the streamed reader, which
must give the same numbers and messages (as ``tests/test_large_data.py`` does for its cases).
"""

from __future__ import annotations

import codecs
import os
import threading
import unicodedata
import zipfile
from collections.abc import Callable
from pathlib import Path

import openpyxl
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from openpyxl.chart import BarChart, Reference

from reportgen.data import load_pairs, load_table
from reportgen.errors import DataError
from reportgen.io import csv as csv_reader
from reportgen.spec import load_spec
from tests.conftest import write_spec
from tests.test_bad_input import PAIR_AB, accepted, check_refuses, refused, run_refuses

A = [1.2, 2.4, 3.1, 4.8, 5.0, 6.3]
B = [2.0, 1.1, 3.9, 3.2, 6.1, 5.5]
CSV_AB = "a,b\n" + "".join(f"{a},{b}\n" for a, b in zip(A, B, strict=True))
NFC_NAME = unicodedata.normalize("NFC", "café")
NFD_NAME = unicodedata.normalize("NFD", "café")


def both_ways(spec_path: Path, monkeypatch: pytest.MonkeyPatch) -> tuple:
    """The data stage's outcome read whole and streamed (the threshold lowered): they must agree."""
    outcomes = []
    for threshold in (1 << 62, -1):
        monkeypatch.setattr(csv_reader, "STREAM_THRESHOLD", threshold)
        spec = load_spec(spec_path)
        try:
            table = load_table(spec)
            pairs = load_pairs(spec, table)
        except DataError as error:
            outcomes.append(("refused", str(error)))
            continue
        outcomes.append(("read", table.encoding, [(p.x.tolist(), p.y.tolist(), p.rows.tolist()) for p in pairs]))
    assert outcomes[0] == outcomes[1]
    return outcomes[0]


def csv_project(folder: Path, content: str | bytes, body: str = PAIR_AB) -> Path:
    target = folder / "data.csv"
    target.write_bytes(content if isinstance(content, bytes) else content.encode("utf-8"))
    return write_spec(folder, body)


# ------------------------------------------------------- data.path that is not a file


@pytest.mark.parametrize("links", [1, 2], ids=["to-itself", "two-links"])
@pytest.mark.parametrize("confined", [False, True], ids=["free", "confined"])
def test_data_path_that_is_a_link_loop(tmp_path: Path, links: int, confined: bool) -> None:
    """Python 3.11's Path.resolve raised "Symlink loop" as a RuntimeError traceback."""
    if links == 1:
        os.symlink("data.csv", tmp_path / "data.csv")
    else:
        os.symlink("other.csv", tmp_path / "data.csv")
        os.symlink("data.csv", tmp_path / "other.csv")
    body = ("confine_to_spec_folder = true\n" if confined else "") + PAIR_AB
    check_refuses(write_spec(tmp_path, body), "data.csv: is a symbolic link that leads, through links, back to "
                  "itself", "point data.path at the data file itself")


def test_data_path_that_is_a_named_pipe_is_refused_without_waiting(tmp_path: Path) -> None:
    """Opening a FIFO blocks until a writer comes; it was also called "a folder". Nothing may open it."""
    os.mkfifo(tmp_path / "data.csv")
    spec = write_spec(tmp_path, PAIR_AB)
    messages: list[str] = []
    worker = threading.Thread(target=lambda: messages.append(check_refuses(spec)), daemon=True)
    worker.start()
    worker.join(timeout=30)
    assert not worker.is_alive(), "reportgen check waited on the named pipe"
    assert messages and "data.csv: is a named pipe (FIFO), not a file that can be read as a table" in messages[0]
    assert "data.path must name a CSV, Excel or Parquet file" in messages[0]
    run_refuses(spec, "is a named pipe (FIFO)")


@pytest.mark.parametrize("device", ["/dev/null", "/dev/zero"])
def test_data_path_that_is_a_device(tmp_path: Path, device: str) -> None:
    """Both were called "a folder"; /dev/zero would never end if it were read."""
    message = refused("check", write_spec(tmp_path, PAIR_AB, data_name=device))
    assert message.startswith(f"{device}: is a device (like /dev/null or /dev/zero), not a file that can be read")


# ------------------------------------------------------------- Excel cells without a number


def workbook(path: Path, edit: Callable[[openpyxl.worksheet.worksheet.Worksheet], None] | None = None) -> Path:
    """Columns a, b and c (c all text) on one sheet, header in row 1; ``edit`` changes cells before saving."""
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.append(["a", "b", "c"])
    for a, b in zip(A, B, strict=True):
        sheet.append([a, b, "note"])
    if edit:
        edit(sheet)
    book.save(path)
    return path


def error_cell(address: str, text: str) -> Callable:
    def edit(sheet: openpyxl.worksheet.worksheet.Worksheet) -> None:
        sheet[address].value = text
        sheet[address].data_type = "e"  # how openpyxl itself marks an error value it reads
    return edit


def excel_project(folder: Path, edit: Callable | None = None, body: str = PAIR_AB) -> Path:
    workbook(folder / "book.xlsx", edit)
    return write_spec(folder, body, data_name="book.xlsx")


def rewrite_sheet(path: Path, old: str, new: str) -> None:
    """Replace XML text in the first worksheet: how a spreadsheet program stores a formula's value."""
    with zipfile.ZipFile(path) as source:
        parts = {name: source.read(name) for name in source.namelist()}
    xml = parts["xl/worksheets/sheet1.xml"].decode("utf-8")
    assert old in xml, xml
    parts["xl/worksheets/sheet1.xml"] = xml.replace(old, new).encode("utf-8")
    with zipfile.ZipFile(path, "w") as target:
        for name, content in parts.items():
            target.writestr(name, content)


@pytest.mark.parametrize("error", ["#DIV/0!", "#N/A", "#VALUE!", "#REF!"])
def test_excel_error_cells_are_refused_with_their_address(tmp_path: Path, error: str) -> None:
    """They were read as missing, and the row dropped, while the same text in a CSV file is refused."""
    check_refuses(excel_project(tmp_path, error_cell("B5", error)), "book.xlsx: column `b` (sheet `Sheet`) has "
                  f"cells without a number: B5 (the error {error})", "correct the formulas that give errors")


def test_excel_formula_without_a_saved_value_is_refused(tmp_path: Path) -> None:
    """openpyxl writes formulas without values; the cell was read as missing."""
    def edit(sheet: openpyxl.worksheet.worksheet.Worksheet) -> None:
        sheet["B4"] = "=A4*2"

    check_refuses(excel_project(tmp_path, edit), "column `b` (sheet `Sheet`) has cells without a number: "
                  "B4 (the formula '=A4*2', whose value was never saved)",
                  "open the workbook in a spreadsheet program and save it")


def test_excel_many_problem_cells_list_the_first_three_and_both_fixes(tmp_path: Path) -> None:
    def edit(sheet: openpyxl.worksheet.worksheet.Worksheet) -> None:
        for row in (2, 3, 4):
            sheet[f"A{row}"] = f"=B{row}+1"
        for row in (6, 7):
            error_cell(f"A{row}", "#NUM!")(sheet)

    check_refuses(excel_project(tmp_path, edit), "column `a` (sheet `Sheet`) has cells without a number: A2 (the "
                  "formula '=B2+1', whose value was never saved), A3 (", "A4 (", "and 2 more",
                  "correct the formulas that give errors, or blank those cells; open the workbook")


def test_excel_problem_cells_in_columns_not_used_are_ignored(tmp_path: Path) -> None:
    """As in a CSV file, only the paired columns are read as numbers."""
    def edit(sheet: openpyxl.worksheet.worksheet.Worksheet) -> None:
        sheet["C3"] = "=1/0"
        error_cell("C4", "#DIV/0!")(sheet)

    assert "a vs b: n = 6" in accepted(excel_project(tmp_path, edit))


@pytest.mark.parametrize(("cell", "expected"), [
    ('<c r="B4"><f>A4*2</f><v>6.2</v></c>', 6.2),
    ('<c r="B4" t="str"><f>IF(A4&gt;9,A4,"")</f><v></v></c>', None),
], ids=["number", "empty-text"])
def test_excel_formula_with_a_saved_value_reads_that_value(tmp_path: Path, cell: str, expected: float | None) -> None:
    """A spreadsheet program stores each formula's value; an empty text result is a blank cell."""
    spec_path = excel_project(tmp_path, lambda sheet: sheet.__setitem__("B4", "=A4*2"))
    rewrite_sheet(tmp_path / "book.xlsx", '<c r="B4"><f>A4*2</f><v /></c>', cell)
    spec = load_spec(spec_path)
    (pair,) = load_pairs(spec, load_table(spec))
    values = dict(zip(pair.row_numbers.tolist(), pair.y.tolist(), strict=True))
    assert values.get(4) == expected and pair.n_dropped == (expected is None)


# ------------------------------------------------------------ numbers too close to zero


@pytest.mark.parametrize("cell", ["1e-400", "-2.5E-330", "0." + "0" * 400 + "1", "2e-324"],
                         ids=["1e-400", "-2.5E-330", "400-zeros-then-1", "2e-324"])
def test_nonzero_numbers_stored_as_zero_are_refused(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                     cell: str) -> None:
    """``1e400`` is refused as out of range; ``1e-400`` was silently read as 0. Both readers refuse it."""
    content = CSV_AB.replace("3.9", cell)
    spec = csv_project(tmp_path, content)
    message = check_refuses(spec, "data.csv: column `b` has a number too close to zero to store at row 4 ("
                            f"{cell[:20]!r}): it would be read as 0", "write 0 if that is meant")
    assert both_ways(spec, monkeypatch) == ("refused", message)


@pytest.mark.parametrize("cell", ["0", "-0", "0.000", "0e-400", "5e-324", "1e-320", "2.2250738585072014e-308"])
def test_zeros_and_subnormal_numbers_are_read(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, cell: str) -> None:
    """Zero written any way is zero; subnormal doubles are nonzero and kept as Python's float() reads them."""
    outcome = both_ways(csv_project(tmp_path, CSV_AB.replace("3.9", cell)), monkeypatch)
    assert outcome[0] == "read"
    assert outcome[2][0][1][2] == float(cell)


# ----------------------------------------------------------------------- UTF-32 text


@pytest.mark.parametrize("encode", [lambda t: t.encode("utf-32"), lambda t: t.encode("utf-32-le"),
                                    lambda t: codecs.BOM_UTF32_BE + t.encode("utf-32-be")],
                         ids=["native-bom", "no-bom", "big-endian"])
def test_utf32_text(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, encode: Callable[[str], bytes]) -> None:
    """UTF-32's byte-order mark begins like UTF-16's; the file was decoded as UTF-16 ("line 7 has 1 field")."""
    spec = csv_project(tmp_path, encode(CSV_AB))
    if encode(CSV_AB).startswith((codecs.BOM_UTF32_LE, codecs.BOM_UTF32_BE)):
        output = accepted(spec)
        assert "read as utf-32" in output and "a vs b: n = 6" in output
        assert both_ways(spec, monkeypatch)[1] == "utf-32"
    else:  # without a mark it is binary-looking text, as UTF-16 without one is
        assert "holds NUL bytes" in check_refuses(spec, "does not look like a CSV text file")


def test_utf32_that_is_not_valid(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    spec = csv_project(tmp_path, CSV_AB.encode("utf-32") + b"\x00\x00\x11\x00")  # beyond U+10FFFF
    message = check_refuses(spec, "starts like UTF-32 text but is not valid UTF-32", "re-save the file as UTF-8")
    assert both_ways(spec, monkeypatch) == ("refused", message)


# ------------------------------------------------------------ Parquet and chart sheets


def test_parquet_with_a_repeated_column_name(tmp_path: Path) -> None:
    """pyarrow could not read the columns and the message said "not a readable Parquet file; export it again"."""
    table = pa.table([pa.array(A), pa.array(B), pa.array(A[::-1])], names=["a", "b", "a"])
    pq.write_table(table, tmp_path / "data.parquet")
    check_refuses(write_spec(tmp_path, PAIR_AB, data_name="data.parquet"), "data.parquet: the column name `a` "
                  "appears more than once", "(the Parquet schema, columns 1 and 3); rename one")


def chart_book(path: Path, *, with_chart: bool, with_data: bool) -> None:
    book = openpyxl.load_workbook(workbook(path))
    sheet = book.active
    chart_sheet = book.create_chartsheet("Chart")
    if with_chart:
        chart = BarChart()
        chart.add_data(Reference(sheet, min_col=1, min_row=1, max_row=7), titles_from_data=True)
        chart_sheet.add_chart(chart)
    if not with_data:
        book.remove(sheet)
    book.save(path)


@pytest.mark.parametrize("with_chart", [False, True], ids=["empty-chart", "chart"])
def test_workbook_with_only_a_chart_sheet(tmp_path: Path, with_chart: bool) -> None:
    """openpyxl fails on a chart sheet without a chart: "not readable (AttributeError)"."""
    chart_book(tmp_path / "book.xlsx", with_chart=with_chart, with_data=False)
    check_refuses(write_spec(tmp_path, PAIR_AB, data_name="book.xlsx"), "book.xlsx: the workbook holds only chart "
                  "sheets, no worksheet with a table")


def test_chart_sheets_beside_one_worksheet(tmp_path: Path) -> None:
    """The one worksheet is the table; data.sheet naming the chart sheet is told what it is."""
    chart_book(tmp_path / "book.xlsx", with_chart=True, with_data=True)
    assert "a vs b: n = 6" in accepted(write_spec(tmp_path, PAIR_AB, data_name="book.xlsx"))
    spec = write_spec(tmp_path, 'sheet = "Chart"\n' + PAIR_AB, data_name="book.xlsx")
    check_refuses(spec, "sheet `Chart` (data.sheet) is a chart sheet, which holds no table; the worksheets are: "
                  "`Sheet`")


# ------------------------------------------------------------------- Unicode normal forms


def pair_body(x: str, y: str = "b") -> str:
    return f'[[pairs]]\nx = "{x}"\ny = "{y}"\n'


@pytest.mark.parametrize(("in_spec", "in_data"), [(NFC_NAME, NFD_NAME), (NFD_NAME, NFC_NAME)],
                         ids=["spec-nfc", "spec-nfd"])
def test_names_in_another_normal_form_match(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, in_spec: str,
                                            in_data: str) -> None:
    """"not in the data; close matches: café" was said of what looks like the same name (UAX #15: NFC)."""
    spec = csv_project(tmp_path, CSV_AB.replace("a,b", f"{in_data},b", 1), pair_body(in_spec))
    assert f"{in_spec} vs b: n = 6" in accepted(spec)
    assert both_ways(spec, monkeypatch)[2][0][0] == A


@pytest.mark.parametrize("kind", ["xlsx", "parquet", "data.columns"])
def test_names_in_another_normal_form_match_in_every_reader(tmp_path: Path, kind: str) -> None:
    frame = pd.DataFrame({NFD_NAME: A, "b": B})
    body = pair_body(NFC_NAME)
    name = {"xlsx": "data.xlsx", "parquet": "data.parquet"}.get(kind, "data.csv")
    if kind == "xlsx":
        frame.to_excel(tmp_path / name, index=False)
    elif kind == "parquet":
        frame.to_parquet(tmp_path / name)
    else:
        frame.to_csv(tmp_path / name, index=False)
        body = f'columns = ["{NFC_NAME}", "b"]\n' + body
    spec = load_spec(write_spec(tmp_path, body, data_name=name))
    (pair,) = load_pairs(spec, load_table(spec))
    assert pair.x.tolist() == A and pair.y.tolist() == B


def test_a_missing_name_keeps_the_spellings_of_each_side(tmp_path: Path) -> None:
    message = check_refuses(csv_project(tmp_path, CSV_AB.replace("a,b", f"{NFD_NAME},b", 1),
                                        pair_body(NFC_NAME + "s")), f"column `{NFC_NAME}s`", "close matches: "
                            f"{NFD_NAME}", f"Columns are: {NFD_NAME}, b")
    assert NFD_NAME + "s" not in message


def test_a_header_holding_both_forms_is_refused(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    content = f"{NFC_NAME},b,{NFD_NAME}\n" + "".join(f"{a},{b},1\n" for a, b in zip(A, B, strict=True))
    spec = csv_project(tmp_path, content, pair_body(NFC_NAME))
    message = check_refuses(spec, "columns 1 and 3 of the header (line 1) are both named", "written with "
                            "different Unicode characters", "rename one")
    assert both_ways(spec, monkeypatch) == ("refused", message)


def test_a_pair_naming_one_column_in_both_forms_is_refused(tmp_path: Path) -> None:
    spec = csv_project(tmp_path, CSV_AB.replace("a,b", f"{NFC_NAME},b", 1), pair_body(NFC_NAME, NFD_NAME))
    check_refuses(spec, "names one column of the data twice, spelled with different Unicode characters",
                  "pair two columns")


# ------------------------------------------------------------------------ blank headers


def test_a_blank_header_next_to_unnamed_0_is_read(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """A file saved twice with its row index: `,Unnamed: 0,a,b`. It blamed "`Unnamed: 0` appears twice"."""
    rows = enumerate(zip(A, B, strict=True))
    content = ",Unnamed: 0,a,b\n" + "".join(f"{i},{i * 3 % 5},{a},{b}\n" for i, (a, b) in rows)
    spec = csv_project(tmp_path, content, pair_body("Unnamed: 0", "a"))
    outcome = both_ways(spec, monkeypatch)
    assert outcome[0] == "read" and outcome[2][0][0] == [i * 3 % 5 for i in range(6)]
    spec = csv_project(tmp_path, content, pair_body("zz", "a"))
    check_refuses(spec, "column `zz`", "Columns are: Unnamed: 0.1, Unnamed: 0, a, b")


def test_blank_header_names_never_collide(tmp_path: Path) -> None:
    """Every name taken (`Unnamed: 0`, `Unnamed: 0.1`): the blank gets the next free one."""
    content = ",Unnamed: 0,Unnamed: 0.1,a,b\n" + "".join(f"1,2,3,{a},{b}\n" for a, b in zip(A, B, strict=True))
    check_refuses(csv_project(tmp_path, content, pair_body("zz", "a")),
                  "Columns are: Unnamed: 0.2, Unnamed: 0, Unnamed: 0.1, a, b")
