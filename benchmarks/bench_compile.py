"""Compiling across runs: how much of a fresh process's first fit is spent compiling the model.

Each run below is a new Python process (as a scheduled rerun is) fitting the same pair twice with the
default sampler settings. It prints, per process, the seconds spent importing, compiling (the first fit
minus the second, which reuses the compiled model) and sampling, and the compile share of the process's
wall time. The first process may fill on-disk caches; the later ones show what a rerun pays.
Run: .venv/bin/python benchmarks/bench_compile.py [--processes 3]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time

CHILD = r"""
import json, time, warnings
started = time.perf_counter()
warnings.filterwarnings("ignore")
import numpy as np
from reportgen.api import fit_pair
imported = time.perf_counter()
rng = np.random.default_rng(7)
x = rng.normal(size=500)
y = 0.4 * x + rng.normal(size=500)
first_started = time.perf_counter()
fit_pair(x, y)
first = time.perf_counter() - first_started
second_started = time.perf_counter()
fit_pair(x, y + 0.5)
second = time.perf_counter() - second_started
print(json.dumps({"imports": imported - started, "first": first, "second": second,
                  "wall": time.perf_counter() - started}))
"""


def one_process() -> dict[str, float]:
    started = time.perf_counter()
    output = subprocess.run([sys.executable, "-c", CHILD], check=True, capture_output=True, text=True).stdout
    timings = json.loads(output.strip().splitlines()[-1])
    timings["process"] = time.perf_counter() - started
    return timings


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--processes", type=int, default=3)
    args = parser.parse_args()
    print(f"{'process':>8} {'imports s':>10} {'compile s':>10} {'sampling s':>11} {'wall s':>8} {'compile share':>14}")
    for index in range(args.processes):
        timings = one_process()
        compile_seconds = max(timings["first"] - timings["second"], 0.0)
        share = compile_seconds / timings["process"]
        print(f"{index + 1:>8} {timings['imports']:>10.2f} {compile_seconds:>10.2f} {timings['second']:>11.2f} "
              f"{timings['process']:>8.2f} {share:>13.0%}")
    print("target: a rerun (process 2 onwards) spends under 10% of its wall time compiling")


if __name__ == "__main__":
    main()
