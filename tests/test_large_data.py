"""Large CSV files are streamed: only the needed columns are kept, as floats, with the same results.

The reference for every check here is the ordinary (whole-file, text-cell)
path of ``reportgen.data`` itself: the streamed path must give the same
numbers bit for bit and the same error messages; the large-file test compares
with ``numpy.corrcoef`` (common practice).
"""

from __future__ import annotations

import codecs
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from reportgen.data import load_pairs, load_table
from reportgen.errors import DataError
from reportgen.io import csv as csv_reader
from reportgen.io import text as text_reader
from reportgen.spec import load_spec
from tests.conftest import write_spec

BAD = Path(__file__).parent / "bad_inputs"
PAIR_AB = """
[[pairs]]
x = "a"
y = "b"
"""
THREE_PAIRS = PAIR_AB + """
[[pairs]]
x = "a"
y = "c"

[[pairs]]
x = "b"
y = "c"
"""


def outcome(spec_path: Path, monkeypatch: pytest.MonkeyPatch, *, streamed: bool) -> tuple:
    """Everything the data stage hands on, or its error message."""
    monkeypatch.setattr(csv_reader, "STREAM_THRESHOLD", -1 if streamed else 1 << 62)
    spec = load_spec(spec_path)
    try:
        table = load_table(spec)
        assert (table.parsed is not None) == streamed
        pairs = load_pairs(spec, table)
    except DataError as error:
        return ("refused", str(error))
    return ("read", table.n_rows, table.encoding, table.delimiter, table.sha256, list(table.frame.index),
            [(p.pair, p.stats, p.stats.sample_r, p.x.tobytes(), p.y.tobytes(), p.n_rows, p.n_dropped)
             for p in pairs])


def same_both_ways(spec_path: Path, monkeypatch: pytest.MonkeyPatch) -> tuple:
    text = outcome(spec_path, monkeypatch, streamed=False)
    streamed = outcome(spec_path, monkeypatch, streamed=True)
    assert streamed == text
    return text


def write(folder: Path, content: str | bytes, body: str = PAIR_AB, name: str = "data.csv") -> Path:
    target = folder / name
    if isinstance(content, bytes):
        target.write_bytes(content)
    else:
        target.write_text(content, encoding="utf-8", newline="")
    return write_spec(folder, body, data_name=name)


@pytest.mark.parametrize("name", sorted(p.name for p in BAD.iterdir()
                                        if p.suffix in {".csv", ".tsv", ".txt"}))
def test_bad_inputs_read_the_same_streamed(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, name: str) -> None:
    """Each stored broken (or awkward: BOM, cp1252, UTF-16, semicolons, tabs) file: same numbers or message."""
    shutil.copyfile(BAD / name, tmp_path / name)
    same_both_ways(write_spec(tmp_path, PAIR_AB, data_name=name), monkeypatch)


CASES = {
    "missing cells": "a,b,c\n1.5,2,3\nNA,1,2\n2.5, ,1\n3.25,n/a,0\n4,5,-\n5,4,null\n6,7,NaN\n7,6.5,1e-3\n",
    "bom": "\ufeffa;b;c\n1,2,3\n2,1,4\n3,4,1\n4,3,5\n",
    "semicolon": "a;b;c\n1.5;2;3\n2.5;1;4\n3;4.25;1\n4;3;5\n-1e3;2e-2;0\n",
    "bad cell": "a,b,c\n1,2,3\n2,x1,4\n3,4,1\n4,3,5\n",
    "many bad cells": "a,b,c\n" + "".join(f"{i},{'?' if i % 3 else i * 0.5},1\n" for i in range(40)),
    "decimal commas": 'a,b,c\n1,"2,5",3\n2,"1,5",4\n3,"4,25",1\n4,3,5\n',
    "infinity": "a,b,c\n1,2,3\n2,-Infinity,4\n3,1e999,1\n4,3,5\n",
    "ragged row": "a,b,c\n1,2,3\n2,1,4\n3,4\n4,3,5\n",
    "ragged row after a bad cell": "a,b,c\n1,2,3\n2,x,4\n3,4,1,9\n4,3,5\n",
    "quoted line breaks": 'a,b,c\n1,2,"x\ny"\n"2",1,"\n"\n3,4,1\n4,3,5\n5,7,1\n',
    "trailing delimiters": "a,b,c,,\n1,2,3,,\n2,1,4,\n3,4,1\n4,3,5,,,\n",
    "blank lines": "\n\na,b,c\n\n1,2,3\n\n2,1,4\n3,4,1\n\n4,3,5\n\n",
    "unclosed quote": 'a,b,c\n1,2,3\n2,"1,4\n3,4,1\n4,3,5\n',
    "missing column": "a,x,c\n1,2,3\n2,1,4\n3,4,1\n4,3,5\n",
    "big integers": "a,b,c\n" + "".join(f"{2**60 + 7 * i},{i * i},{i % 5}\n" for i in range(30)),
    "only blank quotes": '""\n""\n',
    "whitespace only": "  \n\n \n",
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_streamed_csv_is_read_the_same(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, case: str) -> None:
    """Small files with the threshold lowered: identical stats, rows, line numbers and messages."""
    same_both_ways(write(tmp_path, CASES[case], THREE_PAIRS), monkeypatch)


@pytest.mark.parametrize("case", ["missing cells", "many bad cells", "big integers", "infinity"])
def test_chunk_boundaries_do_not_matter(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, case: str) -> None:
    """Cells parsed in blocks of a few rows, as a large file is: still the same."""
    monkeypatch.setattr(csv_reader, "CHUNK_ROWS", 3)
    same_both_ways(write(tmp_path, CASES[case], THREE_PAIRS), monkeypatch)


def test_missing_policy_fail_and_data_columns(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """The first incomplete row's line number, and data.columns, work on the streamed table too."""
    spec = write(tmp_path, CASES["missing cells"], PAIR_AB)
    spec.write_text(spec.read_text().replace('[data]\n', '[data]\nmissing = "fail"\n'))
    assert "first at row 3" in same_both_ways(spec, monkeypatch)[1]
    spec = write(tmp_path, CASES["missing cells"], PAIR_AB)
    spec.write_text(spec.read_text().replace('[data]\n', '[data]\ncolumns = ["a", "c"]\n'))
    assert "not among data.columns" in same_both_ways(spec, monkeypatch)[1]
    spec.write_text(spec.read_text().replace('["a", "c"]', '["b", "a"]'))
    assert same_both_ways(spec, monkeypatch)[0] == "read"


@pytest.mark.parametrize("encoding", ["cp1252", "latin-1", "utf-16", "utf-8-sig"])
def test_encodings_found_block_by_block(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, encoding: str) -> None:
    """The only non-ASCII character comes last, far past the first block: the whole file decides."""
    monkeypatch.setattr(text_reader, "BLOCK_BYTES", 7)
    rows = "".join(f"{i},{(i * 7) % 11},{i % 3}\n" for i in range(3000))
    last = {"cp1252": "\u20ac", "latin-1": "\x81"}.get(encoding, "\u00e9")  # 0x81 is not cp1252
    content = ("a,b,c\n" + rows + f"9,1,{last}\n").encode(encoding)
    result = same_both_ways(write(tmp_path, content, PAIR_AB), monkeypatch)
    assert result[2] == encoding


@pytest.mark.parametrize("offset", range(6))
def test_mixed_encoding_found_across_blocks(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, offset: int) -> None:
    """UTF-8 characters cut by block boundaries are fine; a cp1252 byte later is refused with its line."""
    monkeypatch.setattr(text_reader, "BLOCK_BYTES", 5)
    head = "a,b,c\n" + "x" * offset
    content = (head + "\n1,2,\u00e9\u20ac\n2,1,x\n3,4,x\n4,3,x\n").encode() + "5,5,\u00e9\n".encode("cp1252")
    for prefix in (b"", codecs.BOM_UTF8):
        message = same_both_ways(write(tmp_path, prefix + content), monkeypatch)[1]
        assert "UTF-8 up to line 7, which has the byte 0xE9" in message


def test_nul_bytes_and_unreadable_utf16(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    assert "NUL bytes" in same_both_ways(write(tmp_path, b"a,b\n" * 2000 + b"1,\x00\n"), monkeypatch)[1]
    content = codecs.BOM_UTF16_LE + "a,b\n1,2\n".encode("utf-16-le") + b"\x00\xd8"
    assert "not valid UTF-16" in same_both_ways(write(tmp_path, content), monkeypatch)[1]


def test_parquet_reads_only_the_needed_columns(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    frame = pd.DataFrame({"a": [1.0, 2, 3, 4.5], "b": [2.0, 1, 4, 3], "c": ["x", "y", "z", "w"]},
                         index=[7, 8, 9, 10])
    frame.to_parquet(tmp_path / "data.parquet")
    spec = load_spec(write_spec(tmp_path, PAIR_AB + '\n[variables.c]\nlabel = "C"\n', data_name="data.parquet"))
    table = load_table(spec)
    assert list(table.frame.columns) == ["a", "b"] and list(table.frame.index) == [1, 2, 3, 4]
    (pair,) = load_pairs(spec, table)
    assert pair.stats.n == 4 and pair.x.tolist() == [1.0, 2, 3, 4.5]
    spec = load_spec(write_spec(tmp_path, PAIR_AB.replace('"b"', '"bb"'), data_name="data.parquet"))
    with pytest.raises(DataError, match=r"column `bb` .* is not in the data; close matches: b"):
        load_table(spec)


def write_large_csv(path: Path, rows: int, seed: int) -> np.ndarray:
    """``rows`` x 3 correlated columns, written in chunks with numpy; returns the values as written."""
    rng = np.random.default_rng(seed)
    cov = np.array([[1.0, 0.5, -0.2], [0.5, 2.0, 0.3], [-0.2, 0.3, 1.5]])
    parts = []
    with path.open("w", encoding="ascii", newline="") as handle:
        handle.write("a,b,c\n")
        for start in range(0, rows, 500_000):
            block = np.round(rng.multivariate_normal([5.0, -2.0, 100.0], cov, size=min(500_000, rows - start)), 6)
            np.savetxt(handle, block, fmt="%.6f", delimiter=",")
            parts.append(block)
    return np.concatenate(parts)


MEASURE = """
import json, resource, sys, time
from reportgen import data
from reportgen.io import csv as csv_reader
from reportgen.spec import load_spec
csv_reader.STREAM_THRESHOLD = int(sys.argv[2])
spec = load_spec(sys.argv[1])
before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
started = time.perf_counter()
table = data.load_table(spec)
pairs = data.load_pairs(spec, table)
elapsed = time.perf_counter() - started
after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
print(json.dumps({"streamed": table.parsed is not None, "rows": table.n_rows, "seconds": elapsed,
                  "peak_kib": after - before, "n": [p.stats.n for p in pairs],
                  "r": [p.stats.sample_r for p in pairs]}))
"""


@pytest.mark.slow
def test_large_csv_is_streamed_in_little_memory(tmp_path: Path) -> None:
    """3 million rows x 3 columns (about 90 MB): text cells would need well over 1 GB (a Python string per
    cell); the streamed floats need 8 bytes a cell. Measured in a fresh interpreter as the growth of its peak
    resident memory (tracemalloc would slow the row loop tenfold). Reference: numpy.corrcoef."""
    path = tmp_path / "data.csv"
    values = write_large_csv(path, 3_000_000, seed=3)
    size = path.stat().st_size
    assert 80e6 < size < 120e6
    spec = write_spec(tmp_path, THREE_PAIRS)
    root = Path(__file__).resolve().parents[1]
    done = subprocess.run([sys.executable, "-c", MEASURE, str(spec), str(size // 2)], cwd=root, check=True,
                          capture_output=True, text=True, env={**os.environ, "PYTHONPATH": str(root)})
    result = json.loads(done.stdout.splitlines()[-1])
    print(f"streamed {size / 1e6:.0f} MB in {result['seconds']:.1f} s, "
          f"peak memory +{result['peak_kib'] / 1024:.0f} MiB")
    assert result["streamed"] and result["rows"] == 3_000_000 and result["n"] == [3_000_000] * 3
    assert result["peak_kib"] * 1024 < 400e6
    for r, (i, j) in zip(result["r"], [(0, 1), (0, 2), (1, 2)], strict=True):
        assert r == pytest.approx(np.corrcoef(values[:, i], values[:, j])[0, 1], abs=1e-12)
