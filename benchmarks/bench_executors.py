"""Pairs per second in this process, in 1 and 2 local worker processes, and on a local dask cluster of 1
and 2 workers, measured side by side in one run: the exact engine with many pairs, the sampler with a few.

Every configuration fits the same pairs through ``runner.fit_all``; the seconds include starting the
workers and, for the sampler, compiling the model in each new worker process (a dask cluster is kept
between its two rounds, so its second round shows a warm cluster). Each configuration's results.csv must
be the same text as the in-process one; the script says so.
Run: .venv/bin/python benchmarks/bench_executors.py [--exact-columns 10] [--mcmc-columns 5] [--rows 300]
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
    return write_project(folder, columns, rows)


def timed(spec_path: Path, engine: str, plan: object) -> tuple[float, str, int]:
    from reportgen import runner
    from reportgen.fit import Fitter
    from reportgen.runs.record import RunClock
    from reportgen.spec import load_spec, with_engine

    prepared = runner.prepare(with_engine(load_spec(spec_path), engine))
    document = prepared.spec.document
    fitter = Fitter(document.sampler, max_divergences=document.diagnostics.max_divergences)
    started = time.perf_counter()
    results, _ = runner.fit_all(prepared, fitter, RunClock(), executor=plan)  # type: ignore[arg-type]
    return time.perf_counter() - started, runner.results_csv(results), len(prepared.pairs)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--exact-columns", type=int, default=10)
    parser.add_argument("--mcmc-columns", type=int, default=5)
    parser.add_argument("--rows", type=int, default=300)
    args = parser.parse_args()
    from distributed import LocalCluster

    from reportgen.execution.executors import Plan, available_cpus

    cpus = available_cpus()
    chains = 4  # the spec's default
    with tempfile.TemporaryDirectory() as tmp:
        specs = {"exact": make_project(Path(tmp) / "exact", args.exact_columns, args.rows),
                 "mcmc": make_project(Path(tmp) / "mcmc", args.mcmc_columns, args.rows)}
        clusters = {n: LocalCluster(n_workers=n, threads_per_worker=1, processes=True, dashboard_address=":0")
                    for n in (1, 2)}
        try:
            for engine, spec_path in specs.items():
                rows = []
                configurations = [
                    ("this process", Plan("serial", 1, min(chains, cpus), "")),
                    ("1 process", Plan("processes", 1, min(chains, cpus), "")),
                    ("2 processes", Plan("processes", 2, max(1, cpus // 2), "")),
                ]
                for n, cluster in clusters.items():
                    for round_ in ("cold", "warm"):
                        configurations.append((f"dask {n} worker{'s' if n > 1 else ''} ({round_})",
                                               Plan("dask", 0, 1, "", cluster.scheduler_address)))
                if engine == "mcmc":  # the first in-process fit compiles; the in-process figure is warm
                    timed(spec_path, engine, configurations[0][1])
                reference = None
                for label, plan in configurations:
                    seconds, csv_text, pairs = timed(spec_path, engine, plan)
                    reference = reference or csv_text
                    rows.append((label, pairs, seconds, csv_text == reference))
                print(f"\n{engine}: {rows[0][1]} pairs of {args.rows} rows, {cpus} CPUs "
                      f"(seconds include starting workers{' and compiling' if engine == 'mcmc' else ''})")
                print(f"{'where':24} {'seconds':>8} {'pairs/s':>8} {'vs this process':>16} {'same results':>13}")
                base = rows[0][2]
                for label, pairs, seconds, same in rows:
                    print(f"{label:24} {seconds:8.1f} {pairs / seconds:8.2f} {base / seconds:15.2f}x "
                          f"{'yes' if same else 'NO':>13}")
                by_label = {label: seconds for label, _, seconds, _ in rows}
                print(f"scaling 1 -> 2 local processes: {by_label['1 process'] / by_label['2 processes']:.2f}x; "
                      f"1 -> 2 dask workers (warm): "
                      f"{by_label['dask 1 worker (warm)'] / by_label['dask 2 workers (warm)']:.2f}x")
        finally:
            for cluster in clusters.values():
                cluster.close()


if __name__ == "__main__":
    main()
