"""Compiling across runs: how much of a fresh process's first fit is spent compiling the model.

Each run below is a new Python process (as a scheduled rerun is) fitting a pair twice with the default
sampler settings, with the normal model (the default), the Student-t model and the partial model (two
controls), each a density written for numba and kept in numba's on-disk cache. It prints,
per process, the seconds spent importing, compiling or loading the compiled model (as the fitter records
it), the rest of the first fit (the sampler's own first-use costs) and a later fit, and the compile share of
the process's wall time. The first process may fill the caches; the later ones show what a rerun pays.
Run: .venv/bin/python benchmarks/bench_compile.py [--processes 3]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time

CHILD = r"""
import json, sys, time, warnings
started = time.perf_counter()
warnings.filterwarnings("ignore")
import dataclasses
import numpy as np
from reportgen.data import PairData, control_data, sufficient_stats
from reportgen.fit import Fitter
from reportgen.spec import PairSpec, Priors, Sampler
imported = time.perf_counter()
model = sys.argv[1]
rng = np.random.default_rng(7)
z = rng.normal(size=(500, 2))
x = rng.normal(size=500) + z[:, 0]
y = 0.4 * x + rng.normal(size=500) + z[:, 1]
controls = {"c1": z[:, 0], "c2": z[:, 1]} if model == "partial" else {}
pair = PairData(pair=PairSpec(x="x", y="y", label="", priors=Priors(), controls=tuple(controls)), x=x, y=y,
                n_rows=500, n_dropped=0, stats=sufficient_stats(x, y))
if controls:
    pair = dataclasses.replace(pair, adjustment=control_data(x, y, controls, where="bench"))
fitter = Fitter(Sampler())
first_started = time.perf_counter()
fitter.fit(pair, 1, model)
first = time.perf_counter() - first_started
second_started = time.perf_counter()
fitter.fit(pair, 2, model)
second = time.perf_counter() - second_started
print(json.dumps({"imports": imported - started, "compile": sum(fitter.compile_seconds.values()),
                  "first": first, "second": second, "wall": time.perf_counter() - started}))
"""


def one_process(model: str) -> dict[str, float]:
    started = time.perf_counter()
    output = subprocess.run([sys.executable, "-c", CHILD, model], check=True, capture_output=True,
                            text=True).stdout
    timings = json.loads(output.strip().splitlines()[-1])
    timings["process"] = time.perf_counter() - started
    return timings


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--processes", type=int, default=3)
    args = parser.parse_args()
    print(f"{'model':>10} {'process':>8} {'imports s':>10} {'compile s':>10} {'rest of 1st fit s':>18} "
          f"{'a fit s':>8} {'wall s':>8} {'compile share':>14}")
    for model in ("normal", "student_t", "partial"):
        for index in range(args.processes):
            timings = one_process(model)
            share = timings["compile"] / timings["process"]
            print(f"{model:>10} {index + 1:>8} {timings['imports']:>10.2f} {timings['compile']:>10.2f} "
                  f"{timings['first'] - timings['compile']:>18.2f} {timings['second']:>8.2f} "
                  f"{timings['process']:>8.2f} {share:>13.0%}")
    print("target: a rerun (process 2 onwards) spends under 10% of its wall time compiling")

if __name__ == "__main__":
    main()
