"""The pyarrow fast path for clean CSV files gives what the Python reader gives, and declines the rest.

The reference for equality is the Python reader of ``reportgen.io.csv`` itself (``FAST_PATH = False``):
every file here, clean or messy, held whole or streamed, must give the same frame (cells, dtypes, line
numbers), the same floats bit for bit, the same encoding and delimiter, or the same error message. On clean
files the numbers are also compared with ``pandas.read_csv`` as an outside reference.
"""

from __future__ import annotations

import codecs
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from reportgen.data import load_pairs, load_table
from reportgen.errors import DataError
from reportgen.io import csv as csv_reader
from reportgen.io.csv_fast import read_clean_csv
from reportgen.spec import load_spec
from tests.conftest import write_spec

BAD = Path(__file__).parent / "bad_inputs"
WANTED = ("a", "b", "c")
PAIR_AB = """
[[pairs]]
x = "a"
y = "b"
"""

# Files the fast path takes: (name, content).
CLEAN = [
    ("plain", "a,b,c\n1,2,3\n4,5.5,6\n7,8,9e3\n-1.25,0,11\n"),
    ("crlf", "a,b,c\r\n1,2,3\r\n4,5,6\r\n7,8,9\r\n10,11,13\r\n"),
    ("no final newline", "a,b,c\n1,2,3\n4,5,6\n7,8,9\n10,11,12"),
    ("utf-8 bom", "\ufeffa,b,c\n1,2,3\n4,5,6\n7,8,9\n10,11,12\n"),
    ("semicolons", "a;b;c\n1;2;3\n4;5;6\n7;8;9\n10;11;12\n"),
    ("tabs", "a\tb\tc\n1\t2\t3\n4\t5\t6\n7\t8\t9\n10\t11\t12\n"),
    ("quoted header", '"a","b","c"\n1,2,3\n4,5,6\n7,8,9\n10,11,12\n'),
    ("missing tokens", "a,b,c\n1,NA,3\n,5,n/a\n7,NaN,null\n10,-,NULL\n11,12,13\n14,15,16\n17,18,19\n"),
    ("signs and forms", "a,b,c\n+1,.5,5.\n-.5,1E+05,1.e5\n007,-0.0,0e5\n1e-320,2.5e300,3\n"),
    ("long digits", "a,b,c\n0.12345678901234567,1.2345678901234567e-05,123456789012345678901234\n"
                    "1.000000000000000000001,2,3\n4,5,6\n7,8,9\n"),
    ("text column", "a,b,c,label\n1,2,3,north\n4,5,6,east\n7,8,9,south\n10,11,12,é\n"),
    ("unicode header", "a,b,c,Größe\n1,2,3,4\n4,5,6,7\n7,8,9,1\n10,11,12,2\n"),
    ("blank header cell", "a,b,c,\n1,2,3,4\n4,5,6,7\n7,8,9,1\n10,11,12,2\n"),
    ("spaces in text", "a,b,c,d\n1,2,3, x \n4,5,6,y\n7,8,9,z\n10,11,12,w\n"),
    ("negative zero among decimals", "a,b,c\n-0.0,1.5,2\n1,2.5,3\n3,4,5\n6,7,8\n"),
    ("line-like characters in text", "a,b,c,d\n1,2,3,x\x0by\n4,5,6,x\x0cy\n7,8,9,x\x1cy\n10,11,12,x\x85y\n"
                                     "13,14,16,x\u2028y\n"),
]

# Files the fast path must decline: (name, content as text or bytes).
MESSY = [
    ("blank line", "a,b,c\n1,2,3\n\n4,5,6\n7,8,9\n10,11,12\n"),
    ("trailing blank lines", "a,b,c\n1,2,3\n4,5,6\n7,8,9\n10,11,12\n\n\n"),
    ("whitespace line", "a,b,c\n1,2,3\n   \n4,5,6\n7,8,9\n10,11,12\n"),
    ("blank line above header", "\na,b,c\n1,2,3\n4,5,6\n7,8,9\n10,11,12\n"),
    ("quoted value", 'a,b,c\n1,"2",3\n4,5,6\n7,8,9\n10,11,12\n'),
    ("quoted comma", 'a,b,c\n1,"2,5",3\n4,5,6\n7,8,9\n10,11,12\n'),
    ("quote spanning lines", 'a,b,c\n1,"2\n5",3\n4,5,6\n7,8,9\n10,11,12\n'),
    ("unclosed quote", 'a,b,c\n1,"2,3\n4,5,6\n7,8,9\n10,11,12\n'),
    ("header over two lines", '"a\nx",b,c\n1,2,3\n4,5,6\n7,8,9\n10,11,12\n'),
    ("lone cr", "a,b,c\r1,2,3\r4,5,6\r7,8,9\r10,11,12\r"),
    ("mixed cr", "a,b,c\n1,2,3\r4,5,6\n7,8,9\n10,11,12\n"),
    ("ragged", "a,b,c\n1,2,3\n4,5\n7,8,9\n10,11,12\n"),
    ("trailing delimiter", "a,b,c\n1,2,3,\n4,5,6,\n7,8,9\n10,11,12\n"),
    ("short row under blank header", "a,b,c,\n1,2,3\n4,5,6,1\n7,8,9,1\n10,11,12,1\n"),
    ("one column", "a\n1\n \n2\n3\n"),
    ("header only", "a,b,c\n"),
    ("empty", ""),
    ("spaces around numbers", "a,b,c\n 1,2,3\n4,5 ,6\n7,8,9\n10,11,12\n"),
    ("text in numbers", "a,b,c\n1,2,3\n4,five,6\n7,8,9\n10,11,12\n"),
    ("decimal commas", "a;b;c\n1,5;2;3\n4;5;6\n7;8;9\n10;11;12\n"),
    ("infinity", "a,b,c\n1,2,3\ninf,5,6\n7,8,9\n10,11,12\n"),
    ("out of range", "a,b,c\n1,2,3\n1e400,5,6\n7,8,9\n10,11,12\n"),
    ("too small to store", "a,b,c\n1,2,3\n1e-400,5,6\n7,8,9\n10,11,12\n"),
    ("signed nan", "a,b,c\n1,2,3\n-nan,5,6\n7,8,9\n10,11,12\n"),
    ("negative zero among integers", "a,b,c\n-0,1,2\n1,2,3\n3,4,5\n6,7,8\n"),
    ("duplicate header", "a,b,a\n1,2,3\n4,5,6\n7,8,9\n10,11,12\n"),
    ("nul byte", b"a,b,c\n1,2,3\n4,5,6\x00\n7,8,9\n10,11,12\n"),
    ("cp1252", "a,b,c,d\n1,2,3,caf\xe9\n4,5,6,x\n7,8,9,y\n10,11,12,z\n".encode("cp1252")),
    ("utf-16", codecs.BOM_UTF16_LE + "a,b,c\n1,2,3\n4,5,6\n7,8,9\n10,11,12\n".encode("utf-16-le")),
    ("mixed encoding", "a,b,c,d\n1,2,3,é\n4,5,6,x\n".encode() + b"7,8,9,caf\xe9\n10,11,12,z\n"),
    ("header longer than the delimiter sample", "a,b,c," + ",".join(f"column{i}" for i in range(9000)) + "\n"
     + "\n".join(",".join(["1"] * 9003) for _ in range(4)) + "\n"),
    ("field over the size limit", "a,b,c,d\n1,2,3," + "x" * 140_000 + "\n4,5,6,y\n7,8,9,z\n10,11,12,w\n"),
]


def write_file(folder: Path, content: str | bytes, name: str = "data.csv") -> Path:
    path = folder / name
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content, encoding="utf-8", newline="")
    return path


def read_table(path: Path, monkeypatch: pytest.MonkeyPatch, *, fast: bool, streamed: bool
               ) -> tuple[tuple, pd.DataFrame | None]:
    """``read_csv_table``'s result as comparable values (or its error message), and the frame."""
    monkeypatch.setattr(csv_reader, "FAST_PATH", fast)
    monkeypatch.setattr(csv_reader, "STREAM_THRESHOLD", -1 if streamed else 1 << 62)
    try:
        frame, names, parsed, encoding, delimiter = csv_reader.read_csv_table(path, WANTED)
    except DataError as error:
        return ("refused", str(error)), None
    columns = {name: (frame[name].dtype, frame[name].tolist()) for name in frame.columns}
    floats = None if parsed is None else {
        name: (column.values.dtype, column.values.tobytes(), column.bad, column.n_bad, column.infinite, column.tiny)
        for name, column in parsed.items()}
    return ("read", names, list(frame.columns), frame.columns.dtype, frame.index.dtype, frame.index.name,
            list(frame.index), columns, floats, encoding, delimiter), frame


def assert_same_both_ways(path: Path, monkeypatch: pytest.MonkeyPatch, streamed: bool) -> tuple:
    python, python_frame = read_table(path, monkeypatch, fast=False, streamed=streamed)
    fast, fast_frame = read_table(path, monkeypatch, fast=True, streamed=streamed)
    assert fast == python
    if python_frame is not None:
        pd.testing.assert_frame_equal(fast_frame, python_frame, check_exact=True)
    return python


@pytest.mark.parametrize("streamed", [False, True], ids=["whole", "streamed"])
@pytest.mark.parametrize(("name", "content"), CLEAN, ids=[name for name, _ in CLEAN])
def test_clean_files_take_the_fast_path_and_read_the_same(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                           name: str, content: str, streamed: bool) -> None:
    path = write_file(tmp_path, content)
    assert read_clean_csv(path, WANTED, streamed) is not None
    assert assert_same_both_ways(path, monkeypatch, streamed)[0] == "read"


@pytest.mark.parametrize("streamed", [False, True], ids=["whole", "streamed"])
@pytest.mark.parametrize(("name", "content"), MESSY, ids=[name for name, _ in MESSY])
def test_messy_files_fall_back_with_the_same_result_or_message(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                               name: str, content: str | bytes,
                                                               streamed: bool) -> None:
    path = write_file(tmp_path, content)
    declined = read_clean_csv(path, WANTED, streamed) is None
    # Held whole, every cell stays text, so numbers that are refused later are still read the fast way.
    text_only = not streamed and name in {"spaces around numbers", "text in numbers", "decimal commas", "infinity",
                                          "out of range", "too small to store", "signed nan",
                                          "negative zero among integers"}
    assert declined != text_only
    assert_same_both_ways(path, monkeypatch, streamed)


@pytest.mark.parametrize("streamed", [False, True], ids=["whole", "streamed"])
@pytest.mark.parametrize("name", sorted(p.name for p in BAD.iterdir() if p.suffix in {".csv", ".tsv", ".txt"}))
def test_bad_input_files_read_the_same(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, name: str,
                                       streamed: bool) -> None:
    assert_same_both_ways(BAD / name, monkeypatch, streamed)


def loader_outcome(spec_path: Path, monkeypatch: pytest.MonkeyPatch, *, fast: bool, streamed: bool) -> tuple:
    """What the public data stage hands on, or its error message."""
    monkeypatch.setattr(csv_reader, "FAST_PATH", fast)
    monkeypatch.setattr(csv_reader, "STREAM_THRESHOLD", -1 if streamed else 1 << 62)
    spec = load_spec(spec_path)
    try:
        table = load_table(spec)
        pairs = load_pairs(spec, table)
    except DataError as error:
        return ("refused", str(error))
    return ("read", table.n_rows, table.encoding, table.delimiter, list(table.frame.index),
            list(table.frame.columns), [str(t) for t in table.frame.dtypes],
            [(p.pair, p.stats, p.x.tobytes(), p.y.tobytes(), p.rows.tobytes(), p.n_dropped) for p in pairs])


@pytest.mark.parametrize("missing", ["listwise", "fail"])
@pytest.mark.parametrize("streamed", [False, True], ids=["whole", "streamed"])
@pytest.mark.parametrize(("name", "content"), CLEAN + MESSY, ids=[name for name, _ in CLEAN + MESSY])
def test_public_loader_gives_the_same_with_and_without_the_fast_path(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch, name: str, content: str | bytes, streamed: bool,
        missing: str) -> None:
    write_file(tmp_path, content)
    spec_path = write_spec(tmp_path, PAIR_AB)
    spec_path.write_text(spec_path.read_text(encoding="utf-8").replace(
        'path = "data.csv"', f'path = "data.csv"\nmissing = "{missing}"'), encoding="utf-8")
    python = loader_outcome(spec_path, monkeypatch, fast=False, streamed=streamed)
    assert loader_outcome(spec_path, monkeypatch, fast=True, streamed=streamed) == python


def number_spellings(rng: np.random.Generator, n: int) -> list[str]:
    """Numbers as programs write them: shortest repr, %.18e, rounded, integers, tiny and huge exponents."""
    values = rng.standard_normal(n) * 10.0 ** rng.integers(-320, 300, n)
    kinds = rng.integers(0, 5, n)
    cells = []
    for value, kind in zip(values, kinds, strict=True):
        if kind == 0:
            cells.append(repr(float(value)))
        elif kind == 1:
            cells.append(f"{value:.18e}")
        elif kind == 2:
            cells.append(f"{value / 10.0 ** np.floor(np.log10(abs(value))):.6f}")
        elif kind == 3:
            cells.append(str(int(rng.integers(-10**18, 10**18))))
        else:
            cells.append(f"{value:.15g}".replace("e", "E"))
    return cells


@pytest.mark.parametrize("streamed", [False, True], ids=["whole", "streamed"])
def test_many_number_spellings_give_the_same_floats(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                    streamed: bool) -> None:
    rng = np.random.default_rng(11)
    n = 70_000  # more than one parsing block (CHUNK_ROWS) of the Python reader
    frame = pd.DataFrame({"a": number_spellings(rng, n), "b": number_spellings(rng, n),
                          "c": np.round(rng.standard_normal(n), 3).astype(str)})
    frame["c"] = frame["c"].str.replace("-0.0", "0.0", regex=False)
    frame.loc[rng.integers(0, n, 50), "b"] = "NA"
    path = tmp_path / "data.csv"
    frame.to_csv(path, index=False)
    assert read_clean_csv(path, WANTED, streamed) is not None
    assert assert_same_both_ways(path, monkeypatch, streamed)[0] == "read"


def test_clean_file_matches_pandas_read_csv(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Outside reference: ``pandas.read_csv`` (C engine, default float parsing) on a clean file gives the
    same floats as the fast path, streamed, and the same cells as text, held whole."""
    rng = np.random.default_rng(5)
    n = 5_000
    frame = pd.DataFrame({"a": rng.standard_normal(n), "b": rng.integers(-1000, 1000, n).astype(float),
                          "c": rng.standard_normal(n) * 1e-300})
    frame.loc[[3, 10, 400], "a"] = np.nan
    path = tmp_path / "data.csv"
    frame.to_csv(path, index=False, na_rep="NA")
    reference = pd.read_csv(path)
    monkeypatch.setattr(csv_reader, "STREAM_THRESHOLD", -1)
    assert read_clean_csv(path, WANTED, True) is not None
    _, names, parsed, encoding, delimiter = csv_reader.read_csv_table(path, WANTED)
    assert names == list(reference.columns) and (encoding, delimiter) == ("utf-8", ",")
    for name in WANTED:
        np.testing.assert_array_equal(parsed[name].values, reference[name].to_numpy(dtype=float))
    monkeypatch.setattr(csv_reader, "STREAM_THRESHOLD", 1 << 62)
    held, *_ = csv_reader.read_csv_table(path, WANTED)
    text = pd.read_csv(path, dtype=str, keep_default_na=False)
    assert held.to_numpy().tolist() == text.to_numpy().tolist()
    assert list(held.index) == list(range(2, n + 2))
