"""Many pairs in one run: where the time goes, per pair, for the sampler and the exact engine.

Builds a table with K columns (all K(K-1)/2 pairs via a pair set), runs the whole pipeline
in-process with both engines, and prints seconds per pair for fitting and for the report,
side by side.  Run: .venv/bin/python benchmarks/bench_pairs.py [--columns 12] [--rows 500]
"""

from __future__ import annotations

import argparse
import tempfile
import time
import warnings
from pathlib import Path

from synthetic import write_project

warnings.filterwarnings("ignore")


def make_project(folder: Path, columns: int, rows: int) -> Path:
    return write_project(folder, columns, rows, tail="[sampler]\ndraws = 1000\ntune = 1000\nchains = 4\n")


def timed_run(spec_path: Path, out: Path, engine: str) -> tuple[float, float, int]:
    from reportgen import runner
    from reportgen.spec import load_spec, with_engine

    spec = with_engine(load_spec(spec_path), engine)
    marks: dict[str, float] = {}

    def progress(key: str, done: int, total: int) -> None:
        marks.setdefault(key, time.perf_counter())

    started = time.perf_counter()
    runner.run(spec, out, command_line=[], progress=progress)
    finished = time.perf_counter()
    render_start = marks.get("rendering the report", finished)
    return render_start - started, finished - render_start, len(spec.pairs)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--columns", type=int, default=12)
    parser.add_argument("--rows", type=int, default=500)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        spec_path = make_project(Path(tmp), args.columns, args.rows)
        # warm-up: the first sampler run compiles the model (about 20 s), not counted below
        timed_run(spec_path, Path(tmp) / "warm", "mcmc")
        rows = []
        for engine in ("mcmc", "exact"):
            fit_s, report_s, pairs = timed_run(spec_path, Path(tmp) / engine, engine)
            rows.append((engine, pairs, fit_s / pairs, report_s / pairs, (fit_s + report_s)))
    print(f"{args.columns} columns -> {rows[0][1]} pairs, {args.rows} rows, 4 chains x 1000 draws")
    print(f"{'engine':8} {'fit s/pair':>11} {'report s/pair':>14} {'total s':>9}")
    for engine, _, fit, rep, total in rows:
        print(f"{engine:8} {fit:11.3f} {rep:14.3f} {total:9.1f}")
    print(f"sampler / exact, fit time per pair: {rows[0][2] / rows[1][2]:.0f}x; report time per pair: "
          f"{rows[0][3] / rows[1][3]:.2f}x (the sampler's pages add the five-parameter figure and table)")


if __name__ == "__main__":
    main()
