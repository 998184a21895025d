"""The report's cost per pair: figures, HTML and PDF timed apart, against a target of 0.3 s a pair.

Runs of the exact engine on n = 1,000 rows, each twice side by side: the paged pairs drawn in this process,
and in forked processes (one a CPU) as a run with the default executor draws them:

* a pair set of 7 columns (21 pairs, every pair with its own page), through ``runner.run`` as a user runs
  it, with the three report stages timed where the run calls them;
* a pair set of 100 columns (4,950 pairs; by default the 30 strongest get a page). Fitting 4,950 pairs
  would take most of an hour, so the results of the 21 real fits are repeated under the 4,950 pairs' names
  (a pair's figures then draw one pair's data with another's fit: the same work); the report is built from
  them as ``runner.run`` builds it.

"pages" is the time spent on the paged pairs' pages (their figures, mostly); the rest of ``build_context``
(page one's figures and tables) is shown as "context"; "s/page" is the pages' time per paged pair. Each run
is shown in wall-clock seconds and in CPU seconds of this process (the figure to trust on a shared
machine when one process draws; forked processes' CPU is not in it); "/target" is seconds per pair over
the 0.3 s target.
Run: .venv/bin/python benchmarks/bench_report.py [--rows 1000]
[--columns 100] [--pair-pages N]
"""

from __future__ import annotations

import argparse
import copy
import dataclasses
import os
import tempfile
import time
import warnings
from collections.abc import Callable
from pathlib import Path
from typing import Any

from synthetic import write_project

warnings.filterwarnings("ignore")

TARGET_SECONDS_PER_PAIR = 0.3


RULES = """[[rules]]
name = "clearly_positive"
statement = "above"
threshold = 0.1
[[rules]]
name = "clearly_negative"
statement = "below"
threshold = -0.1
"""


def make_project(folder: Path, columns: int, rows: int, pair_pages: str) -> Path:
    return write_project(folder, columns, rows, top='engine = "exact"', report=pair_pages, tail=RULES, noise=2.0,
                         name_width=3)


class StageClock:
    """Wraps the report's three stages and the drawing of the paged pairs' figures, adding up their times."""

    def __init__(self) -> None:
        self.seconds: dict[str, float] = {"pages": 0.0, "context": 0.0, "html": 0.0, "pdf": 0.0}
        self.cpu: dict[str, float] = dict(self.seconds)
        self.captured: tuple[Any, ...] = ()

    def timed(self, name: str, function: Callable[..., Any], capture: bool = False) -> Callable[..., Any]:
        def wrapper(*args: Any, **kwargs: Any) -> Any:
            if capture:
                self.captured = args
            started, cpu = time.perf_counter(), time.process_time()
            try:
                return function(*args, **kwargs)
            finally:
                self.seconds[name] += time.perf_counter() - started
                self.cpu[name] += time.process_time() - cpu
        return wrapper

    def install(self) -> Callable[[], None]:
        from reportgen import report
        from reportgen.report import context

        saved = (report.build_context, report.render_html, report.render_pdf, context.pages_for)
        report.build_context = self.timed("context", saved[0], capture=True)
        report.render_html = self.timed("html", saved[1])
        report.render_pdf = self.timed("pdf", saved[2])
        context.pages_for = self.timed("pages", saved[3])

        def restore() -> None:
            report.build_context, report.render_html, report.render_pdf, context.pages_for = saved
        return restore

    def stages(self, cpu: bool = False) -> dict[str, float]:
        """The paged pairs' pages apart from the rest of the context, which includes them."""
        seconds = self.cpu if cpu else self.seconds
        return {**seconds, "context": seconds["context"] - seconds["pages"]}


def real_run(folder: Path, rows: int, pair_pages: str,
             processes: bool = False) -> tuple[StageClock, int, int, tuple[Any, ...]]:
    from reportgen import runner
    from reportgen.execution.executors import executor_choice
    from reportgen.spec import load_spec

    spec = load_spec(make_project(folder, 7, rows, pair_pages))
    clock = StageClock()
    restore = clock.install()
    try:  # the default executor: too few pairs for worker processes, but the pages drawn in forked ones
        runner.run(spec, folder / ("out_processes" if processes else "out"), command_line=[],
                   executor=executor_choice("processes") if processes else None)
    finally:
        restore()
    pages = len(clock.captured[1].pairs)
    return clock, len(spec.pairs), pages, clock.captured


def repeated_results(template: tuple[Any, ...], folder: Path, columns: int, rows: int,
                     pair_pages: str) -> tuple[Any, ...]:
    """The report's inputs for ``columns`` columns: real spec and data, the 21 fits' results repeated."""
    from reportgen import runner
    from reportgen.spec import load_spec

    spec = load_spec(make_project(folder, columns, rows, pair_pages))
    prepared = runner.prepare(spec)
    _, fitted, _, record, _ = template
    pairs = []
    record = copy.deepcopy(record)
    entries = record["reproducible"]["pairs"]
    repeated_entries = []
    for index, data in enumerate(prepared.pairs):
        source = fitted.pairs[index % len(fitted.pairs)]
        pair = data.pair
        pairs.append(dataclasses.replace(source, key=pair.key, x=pair.x, y=pair.y, title=f"{pair.x} and {pair.y}",
                                         x_label=pair.x, y_label=pair.y, pair_set=pair.pair_set))
        repeated_entries.append({**entries[index % len(entries)], "pair": pair.key})
    record["reproducible"]["pairs"] = repeated_entries
    results = dataclasses.replace(fitted, pairs=tuple(pairs))
    return prepared.spec, results, {p.pair.key: p for p in prepared.pairs}, record, None


def timed_report(inputs: tuple[Any, ...], processes: int = 1) -> tuple[StageClock, int]:
    from reportgen import report

    clock = StageClock()
    restore = clock.install()
    try:
        context = report.build_context(*inputs, processes=processes)
        html = report.render_html(context, None)
        report.render_pdf(html, context["meta"]["date"])
    finally:
        restore()
    return clock, len(context["pairs"])


def print_row(name: str, pairs: int, pages: int, clock: StageClock) -> None:
    for kind in ("wall", "cpu"):
        stages = clock.stages(cpu=kind == "cpu")
        total = sum(stages.values())
        per_pair = total / pairs
        print(f"{name:26} {kind:4} {pairs:6,} {pages:6,} "
              + " ".join(f"{stages[s]:8.1f}" for s in ("pages", "context", "html", "pdf"))
              + f" {total:8.1f} {per_pair:9.3f} {per_pair / TARGET_SECONDS_PER_PAIR:7.2f}"
              + f" {stages['pages'] / max(pages, 1):9.3f}")


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=1000)
    parser.add_argument("--columns", type=int, default=100)
    parser.add_argument("--pair-pages", default="", help='a value for [report] pair_pages, e.g. 30 or "rules_met"')
    args = parser.parse_args()
    setting = f"pair_pages = {args.pair_pages}" if args.pair_pages else ""
    from reportgen.execution.executors import drawing_processes, executor_choice

    drawing = drawing_processes(executor_choice("processes"))
    with tempfile.TemporaryDirectory() as tmp:
        small = Path(tmp, "small")
        large = Path(tmp, "large")
        small.mkdir()
        large.mkdir()
        clock, pairs, pages, inputs = real_run(small, args.rows, "")
        rows = [("7 columns, one process", pairs, pages, clock)]
        clock, pairs, pages, _ = real_run(small, args.rows, "", processes=True)
        rows.append((f"7 columns, {drawing} processes", pairs, pages, clock))
        repeated = repeated_results(inputs, large, args.columns, args.rows, setting)
        for processes in (1, drawing):
            clock, pages = timed_report(repeated, processes)
            rows.append((f"{args.columns} columns, {processes} process(es)", args.columns * (args.columns - 1) // 2,
                         pages, clock))
    print(f"report of the exact engine, n = {args.rows:,} rows; target {TARGET_SECONDS_PER_PAIR} s a pair; wall "
          f"clock and this process's CPU seconds (load average at the end: {os.getloadavg()[0]:.1f} on "
          f"{os.cpu_count()} cores)")
    print(f"{'run':26} {'':4} {'pairs':>6} {'paged':>6} {'pages':>8} {'context':>8} {'html':>8} {'pdf':>8} "
          f"{'total':>8} {'s/pair':>9} {'/target':>7} {'s/page':>9}")
    for row in rows:
        print_row(*row)
    one, many = rows[0][3].stages(), rows[1][3].stages()
    print(f"pages drawn in {drawing} forked processes against one, side by side: {one['pages'] / many['pages']:.2f}x "
          f"faster (wall); the whole report {sum(one.values()) / sum(many.values()):.2f}x")


if __name__ == "__main__":
    main()
