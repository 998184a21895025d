"""The CSV reader with and without its pyarrow fast path, side by side in one run.

Writes a clean CSV file once (10,000,000 rows of four numeric columns, about 300 MB, so above
``io.csv.STREAM_THRESHOLD``: it is streamed, and the needed columns come back as floats) in the temporary
folder, and reuses it when present. Each reading runs in a fresh process, imports done before the clock
starts; printed are the median seconds of a few repeats and the peak resident memory of each reader
(``ru_maxrss`` of the child process), then the ratio against the target "at least 3 times faster".
A second file of 1,000,000 rows (about 30 MB, held whole as text cells) is timed the same way.

Run: .venv/bin/python benchmarks/bench_csv.py [--rows 10000000] [--repeats 3]
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

TARGET = 3.0
WANTED = ("x", "y")
CHILD = """
import json, resource, sys, time
from pathlib import Path
from reportgen.io import csv as csv_reader
import reportgen.io.csv_fast  # noqa: F401 - imported before the clock, as by a run that reads Parquet
csv_reader.FAST_PATH = sys.argv[2] == "fast"
started = time.perf_counter()
frame, names, parsed, encoding, delimiter = csv_reader.read_csv_table(Path(sys.argv[1]), tuple(sys.argv[3:]))
seconds = time.perf_counter() - started
print(json.dumps({"seconds": seconds, "rows": len(frame), "streamed": parsed is not None,
                  "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
"""


def clean_csv(rows: int) -> Path:
    """A clean file of ``rows`` rows: an integer id, two correlated decimals, a count; written once."""
    import pyarrow as pa
    import pyarrow.csv as pa_csv

    path = Path(tempfile.gettempdir()) / "reportgen-bench" / f"clean_{rows}.csv"
    if path.exists():
        return path
    path.parent.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(7)
    x = rng.standard_normal(rows)
    y = 0.4 * x + np.sqrt(0.84) * rng.standard_normal(rows)
    # + 0.0 turns the -0.0 that rounding gives into 0.0: "-0" is one of the cells left to the Python reader
    table = pa.table({"id": np.arange(1, rows + 1), "x": np.round(x, 6) + 0.0, "y": np.round(10 * y + 50, 4) + 0.0,
                      "count": rng.poisson(2.0, rows)})
    partial = path.with_suffix(".partial")
    with partial.open("wb") as handle:
        handle.write(b"id,x,y,count\n")
        pa_csv.write_csv(table, handle, pa_csv.WriteOptions(include_header=False, quoting_style="none"))
    partial.replace(path)
    return path


def read_once(path: Path, reader: str) -> dict:
    done = subprocess.run([sys.executable, "-c", CHILD, str(path), reader, *WANTED], check=True,
                          capture_output=True, text=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def compare(path: Path, repeats: int) -> float:
    results = {reader: [read_once(path, reader) for _ in range(repeats)] for reader in ("python", "fast")}
    first = results["python"][0]
    how = "streamed, needed columns as floats" if first["streamed"] else "held whole as text cells"
    print(f"{path.name}: {first['rows']:,} rows, {path.stat().st_size / 1e6:.0f} MB, {how}")
    medians = {}
    for reader, runs in results.items():
        medians[reader] = statistics.median(run["seconds"] for run in runs)
        peak = max(run["peak_mib"] for run in runs)
        print(f"  {reader:7} reader: {medians[reader]:7.2f} s (median of {len(runs)}), peak memory {peak:6.0f} MiB")
    return medians["python"] / medians["fast"]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--rows", type=int, default=10_000_000)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    ratio = compare(clean_csv(args.rows), args.repeats)
    verdict = "met" if ratio >= TARGET else "NOT met"
    print(f"  fast path {ratio:.1f}x faster (target: at least {TARGET:g} times: {verdict})")
    small = compare(clean_csv(args.rows // 10), args.repeats)
    print(f"  fast path {small:.1f}x faster")


if __name__ == "__main__":
    main()
