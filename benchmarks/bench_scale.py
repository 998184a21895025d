"""Whole runs at scale, each in a new process as a user would run them, with where the time went.

Scenarios (targets in brackets):
- 45 pairs (all pairs of 10 columns), n = 10,000, default sampler settings, full HTML and PDF [under 60 s
  with a warm compile cache]; the same with the exact engine [under 15 s];
- 4,950 pairs (all pairs of 100 columns), n = 1,000, exact engine [under 2 minutes], with its peak memory.

Each scenario runs ``reportgen run`` in a fresh Python process after one warm-up run has filled the on-disk
compile cache. The split printed is record.json's ``stage_seconds`` (wall seconds of each stage; the fitting
stage's compiling, sampling and summarising are seconds of work summed over pairs, which with two worker
processes can exceed the stage's wall time). Peak memory is the largest resident set of the run's process
and of its worker processes.
Run: .venv/bin/python benchmarks/bench_scale.py [--only 45|4950] [--executor processes|serial]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from synthetic import write_project

CHILD = r"""
import json, resource, sys
from reportgen.cli import main
try:
    main(sys.argv[1:], standalone_mode=False)
except SystemExit:
    pass
own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
workers = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
print(json.dumps({"peak_mib": max(own, workers) / 1024.0}))
"""


def make_project(folder: Path, columns: int, rows: int, engine: str) -> Path:
    return write_project(folder, columns, rows, top=f'engine = "{engine}"', name_width=3)


def run_once(spec: Path, out: Path, executor: list[str]) -> dict:
    started = time.perf_counter()
    done = subprocess.run([sys.executable, "-c", CHILD, "run", str(spec), "--out", str(out), *executor],
                          capture_output=True, text=True)
    wall = time.perf_counter() - started
    lines = done.stdout.strip().splitlines()
    if not lines or not lines[-1].startswith("{"):
        raise SystemExit(f"run failed: {done.stderr[-2000:]}")
    if not (out / "record.json").is_file():
        raise SystemExit(f"the run wrote no outputs (exit {done.returncode}): {done.stderr.strip()[-2000:]}")
    record = json.loads((out / "record.json").read_text(encoding="utf-8"))
    from pypdf import PdfReader

    pages = len(PdfReader(out / "report.pdf").pages)
    return {"wall": wall, "peak_mib": json.loads(lines[-1])["peak_mib"], "stages": record["run"]["stage_seconds"],
            "pages": pages}


def report(name: str, target: float, timings: dict) -> None:
    verdict = "met" if timings["wall"] < target else "NOT met"
    print(f"\n{name}: {timings['wall']:.1f} s wall in a new process (target under {target:.0f} s: {verdict}); "
          f"peak memory {timings['peak_mib']:.0f} MiB; a PDF of {timings['pages']} pages")
    process_start = timings["wall"] - sum(v for k, v in timings["stages"].items() if "(work)" not in k)
    print(f"  {'starting Python and importing':<34} {process_start:>8.2f} s")
    for stage, seconds in timings["stages"].items():
        print(f"  {stage:<34} {seconds:>8.2f} s")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--only", choices=["45", "4950"])
    parser.add_argument("--executor", default="processes", choices=["processes", "serial"])
    args = parser.parse_args()
    executor = ["--executor", "processes"] + (["--workers", "1"] if args.executor == "serial" else [])
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        if args.only in (None, "45"):
            for engine, target in (("mcmc", 60.0), ("exact", 15.0)):
                spec = make_project(root / f"p45_{engine}", 10, 10_000, engine)
                if engine == "mcmc":  # fills the on-disk compile cache, as any earlier run would have
                    run_once(spec, root / "warm", executor)
                report(f"45 pairs, n = 10,000, {engine}", target, run_once(spec, root / f"out45_{engine}", executor))
        if args.only in (None, "4950"):
            spec = make_project(root / "p4950", 100, 1_000, "exact")
            report("4,950 pairs, n = 1,000, exact", 120.0, run_once(spec, root / "out4950", executor))


if __name__ == "__main__":
    main()
