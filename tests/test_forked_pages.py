"""The paged pairs drawn in forked processes: the same bytes as drawn in one process, errors not hidden.

What these check is reportgen's own promise (outputs do not depend on where they were made), so the
reference is the one-process report itself, not an outside source.
"""

from __future__ import annotations

import gc
import os
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from reportgen.execution.executors import drawing_processes, executor_choice
from reportgen.fit import Fitter
from reportgen.report import context as report_context
from reportgen.report.render import render_html
from reportgen.runner import fit_all, prepare
from reportgen.runs.record import RunClock, build_record
from reportgen.spec import load_spec, with_engine
from tests.conftest import correlated_frame, write_spec

FIVE_PAIRS = """
[[pair_sets]]
name = "all"
columns = ["a", "b", "c"]
[[pairs]]
x = "a"
y = "d"
[[pairs]]
x = "b"
y = "d"
"""


@pytest.fixture(scope="module")
def five_pairs(tmp_path_factory: pytest.TempPathFactory) -> tuple[Any, ...]:
    folder = tmp_path_factory.mktemp("five_pairs")
    frame = correlated_frame(60, 0.6, seed=21)
    rng = np.random.default_rng(22)
    frame["c"] = frame["a"] * 0.4 + rng.normal(size=60)
    frame["d"] = rng.normal(size=60)
    frame.to_csv(folder / "data.csv", index=False)
    prepared = prepare(with_engine(load_spec(write_spec(folder, FIVE_PAIRS)), "exact"))
    fitter = Fitter(prepared.spec.document.sampler)
    clock = RunClock()
    results, fits = fit_all(prepared, fitter, clock, None)
    record = build_record(prepared.spec, prepared.table, results, fits, clock, ["test"], fitter.cores)
    assert len(results.pairs) == 5 >= report_context.MIN_FORKED_PAGES
    return prepared.spec, results, {p.pair.key: p for p in prepared.pairs}, record


def test_pages_drawn_in_forked_processes_are_the_same_bytes(five_pairs: tuple[Any, ...]) -> None:
    here = render_html(report_context.build_context(*five_pairs, processes=1))
    forked = render_html(report_context.build_context(*five_pairs, processes=2))
    assert forked == here
    assert gc.get_freeze_count() == 0  # this process's objects are left collectable again


def test_pages_are_drawn_in_other_processes_in_pair_order(five_pairs: tuple[Any, ...],
                                                          monkeypatch: pytest.MonkeyPatch) -> None:
    drawn = report_context.page_context

    def with_pid(*args: Any, **kwargs: Any) -> dict[str, Any]:
        return drawn(*args, **kwargs) | {"drawn_by": os.getpid()}

    monkeypatch.setattr(report_context, "page_context", with_pid)  # a forked child inherits the patch
    spec, results, pair_data, _ = five_pairs
    pages = report_context.pages_for(list(results.pairs), pair_data, spec, False, processes=2)
    assert os.getpid() not in {page["drawn_by"] for page in pages}
    assert [page["title"] for page in pages] == [result.title for result in results.pairs]
    one = report_context.pages_for(list(results.pairs)[:3], pair_data, spec, False, processes=2)
    assert {page["drawn_by"] for page in one} == {os.getpid()}  # too few pages to gain from processes


def test_a_bug_while_drawing_in_a_child_is_raised_here(five_pairs: tuple[Any, ...],
                                                       monkeypatch: pytest.MonkeyPatch) -> None:
    def broken(*args: Any, **kwargs: Any) -> dict[str, Any]:
        raise ZeroDivisionError("a bug in a page")

    monkeypatch.setattr(report_context, "page_context", broken)
    with pytest.raises(ZeroDivisionError, match="a bug in a page"):
        report_context.build_context(*five_pairs, processes=2)
    assert gc.get_freeze_count() == 0


def test_an_interrupt_while_children_draw_stops_them_at_once(five_pairs: tuple[Any, ...],
                                                              monkeypatch: pytest.MonkeyPatch) -> None:
    """Ctrl-C or SIGTERM reaches the run (here SIGALRM's handler raises in its place) while the children are
    busy: the run raises within seconds and no child is left, instead of waiting for every page."""
    import multiprocessing
    import signal
    import time

    def slow(*args: Any, **kwargs: Any) -> dict[str, Any]:
        time.sleep(60)
        return {}

    def interrupt(signum: int, frame: object) -> None:
        raise KeyboardInterrupt

    monkeypatch.setattr(report_context, "page_context", slow)
    previous = signal.signal(signal.SIGALRM, interrupt)
    spec, results, pair_data, _ = five_pairs
    started = time.perf_counter()
    try:
        signal.alarm(1)
        with pytest.raises(KeyboardInterrupt):
            report_context.pages_for(list(results.pairs), pair_data, spec, False, processes=2)
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)
    assert time.perf_counter() - started < 20
    # a child that was being forked when the interrupt came may take a moment to be reaped; one left
    # drawing would sleep for a minute
    deadline = time.perf_counter() + 10
    while multiprocessing.active_children() and time.perf_counter() < deadline:
        time.sleep(0.1)
    assert multiprocessing.active_children() == []
    assert gc.get_freeze_count() == 0


def test_drawing_stays_in_this_process_when_the_run_is_asked_to() -> None:
    assert drawing_processes(None, cpus=8) == 1
    assert drawing_processes(executor_choice("serial"), cpus=8) == 1
    assert drawing_processes(executor_choice(workers=1), cpus=8) == 1
    assert drawing_processes(executor_choice(), cpus=2) == 2
    assert drawing_processes(executor_choice(), cpus=64) == 8
    assert drawing_processes(executor_choice(workers=3), cpus=8) == 3
    assert drawing_processes(executor_choice(workers=6), cpus=2) == 2
    assert drawing_processes(executor_choice("dask", scheduler="tcp://h:8786"), cpus=2) == 2


def test_a_run_with_the_default_executor_draws_pages_in_processes(tmp_path: Path,
                                                                  monkeypatch: pytest.MonkeyPatch) -> None:
    seen: list[int] = []

    def counted(*args: Any, **kwargs: Any) -> list[dict[str, Any]]:
        seen.append(kwargs.get("processes", args[4] if len(args) > 4 else 1))
        return pages(*args, **kwargs)

    pages = report_context.pages_for
    monkeypatch.setattr(report_context, "pages_for", counted)
    monkeypatch.setattr("reportgen.execution.executors.available_cpus", lambda: 2)
    from reportgen import runner

    frame = correlated_frame(30, 0.5, seed=3)
    frame.to_csv(tmp_path / "data.csv", index=False)
    spec = with_engine(load_spec(write_spec(tmp_path, '[[pairs]]\nx = "a"\ny = "b"\n')), "exact")
    from tests.conftest import pages_not_drawn

    with pages_not_drawn():
        runner.run(spec, tmp_path / "out", command_line=[], executor=executor_choice())
        runner.run(spec, tmp_path / "out_here", command_line=[], executor=executor_choice(workers=1))
    assert seen == [2, 1]
