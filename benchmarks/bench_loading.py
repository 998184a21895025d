"""Loading 4,950 pairs (all pairs of 100 columns, 1,000 rows, exact engine) before the first fit, in CPU seconds.

Times ``spec.load_spec``, ``data.load_table``, ``data.load_pairs`` and the whole of ``runner.prepare`` in this
process (best of a few repeats of ``time.process_time``: the machine may be shared, so CPU seconds, not wall
seconds). Side by side in the same run, the pairs are loaded the way they were before the columns were
shared: each pair on its own (``pair_data`` without a ``TableColumns``), parsing and centring its two columns
again, as 99 pairs of each column did; the ratio of the two is printed. A spec listing the same 4,950 pairs
as [[pairs]] tables is loaded too, since each of its tables is validated on its own.

Run: .venv/bin/python benchmarks/bench_loading.py [--repeats 3] [--columns 100] [--rows 1000]
"""

from __future__ import annotations

import argparse
import itertools
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

from synthetic import write_project

from reportgen import runner
from reportgen.data import load_pairs, load_table, pair_data
from reportgen.spec import load_spec

TARGET_SECONDS = 5.0  # "a few seconds" of a run whose whole budget is 2 minutes


def cpu_seconds(work: Callable[[], object], repeats: int) -> float:
    """The least CPU time of ``repeats`` calls."""
    best = float("inf")
    for _ in range(repeats):
        started = time.process_time()
        work()
        best = min(best, time.process_time() - started)
    return best


def listed_spec(spec_path: Path, columns: int) -> Path:
    """The same spec with every pair written as its own [[pairs]] table instead of one pair set."""
    names = [f"v{i:03d}" for i in range(columns)]
    tables = "".join(f'[[pairs]]\nx = "{x}"\ny = "{y}"\n' for x, y in itertools.combinations(names, 2))
    path = spec_path.with_name("listed.toml")
    path.write_text(spec_path.read_text(encoding="utf-8").split("[[pair_sets]]")[0] + tables, encoding="utf-8")
    return path


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--columns", type=int, default=100)
    parser.add_argument("--rows", type=int, default=1000)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        spec_path = write_project(Path(tmp), args.columns, args.rows, top='engine = "exact"', name_width=3)
        spec = load_spec(spec_path)
        table = load_table(spec)
        policy = spec.document.data.missing
        count = len(spec.pairs)
        timings = {
            "load_spec": cpu_seconds(lambda: load_spec(spec_path), args.repeats),
            "load_table": cpu_seconds(lambda: load_table(spec), args.repeats),
            "load_pairs": cpu_seconds(lambda: load_pairs(spec, table), args.repeats),
            "runner.prepare (table and pairs)": cpu_seconds(lambda: runner.prepare(spec), args.repeats),
        }
        listed = listed_spec(spec_path, args.columns)
        timings[f"load_spec, {count:,} [[pairs]] tables"] = cpu_seconds(lambda: load_spec(listed), args.repeats)
        # the path before: each pair parses and centres its own two columns (timed once: it is slow)
        alone = cpu_seconds(lambda: [pair_data(table, pair, policy) for pair in spec.pairs], 1)
    print(f"Loading {count:,} pairs ({args.columns} columns, all pairs), n = {args.rows:,}, exact engine; "
          f"CPU seconds, best of {args.repeats}")
    for name, seconds in timings.items():
        print(f"  {name:<38} {seconds:8.3f} s")
    total = timings["load_spec"] + timings["runner.prepare (table and pairs)"]
    verdict = "met" if total < TARGET_SECONDS else "NOT met"
    print(f"  {'loading in all (spec, then prepare)':<38} {total:8.3f} s  (target under {TARGET_SECONDS:.0f} s: "
          f"{verdict}); {1e6 * timings['load_pairs'] / count:.0f} us a pair")
    print(f"  {'each pair parsing its own columns':<38} {alone:8.3f} s  (the path before; load_pairs is "
          f"{alone / timings['load_pairs']:.0f} times faster)")


if __name__ == "__main__":
    main()
