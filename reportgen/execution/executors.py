"""Where the pairs are worked on: in this process, in a pool of local worker processes, or on the workers
of a dask.distributed cluster.

Every executor hands the pairs' work back in pair order, and the work is the same function with the same
per-pair seeds wherever it runs, so the outputs are the same bytes as a run in this process. Worker
processes are started with ``spawn`` (never ``fork``: the sampler's threads and numba do not survive a
fork), build one fitter each and keep it, with its compiled models, for all their pairs.

A pair whose sampler raises fails that model only, in a worker as in this process. A local worker
process that dies (a crash, the out-of-memory killer) breaks the pool: the pairs it was fitting are each
tried once more alone, and one that kills its worker again fails with that reason; the other pairs go
on in a new pool. On dask the scheduler retries a task whose worker died and gives up after its limit
(``distributed.scheduler.allowed-failures``); that pair fails the same way.
"""

from __future__ import annotations

import multiprocessing
import os
import tempfile
from collections.abc import Callable, Iterable, Iterator, Sequence
from concurrent.futures import Future, ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass
from multiprocessing.process import BaseProcess
from pathlib import Path
from typing import Any

from reportgen.data import PairData
from reportgen.errors import ExecutorError
from reportgen.execution.work import LogEvent, PairWork, failed_pair, work_on_pair
from reportgen.execution.workers import FitterSettings, cache_root, fit_in_process, start_process_worker
from reportgen.fit import Fitter
from reportgen.spec import Spec

EXECUTORS = ("processes", "dask")  # what --executor offers; "serial" is what either falls back to
# Below these many pairs the work stays in this process (benchmarks/bench_executors.py; DEVELOPERS.md
# "Performance"): on 2 CPUs a worker process costs about 2 s to start and import the stack, and with the
# sampler about 11 s more to compile each model structure. The sampler's pair is about 0.5 s of work after
# the fit, which two workers share out; the exact engine's is about 12 ms, and two workers were measured
# slower than this process up to about 800 pairs (45 pairs: 0.7 s here against 2.6 s; 780: 9.3 against
# 10.6; 1,225: 15.4 against 13.8).
MIN_PAIRS = {"exact": 1000, "mcmc": 40}
MAX_AUTO_WORKERS = 8  # beyond this a local machine's memory, not its cores, is what runs out
WORKER_DIED = ("the worker process fitting this pair stopped abruptly (a crash, or killed for lack of memory), "
               "twice")


@dataclass(frozen=True)
class ExecutorChoice:
    """What the user asked for: ``processes`` (a local pool; ``workers`` None lets the run decide) or
    ``dask`` (the cluster whose scheduler is at ``scheduler``), or ``serial`` (this process only)."""

    name: str = "processes"
    workers: int | None = None
    scheduler: str | None = None


@dataclass(frozen=True)
class Plan:
    """How this run works on its pairs; ``why`` says so in run.log."""

    name: str  # "serial", "processes" or "dask"
    workers: int  # local processes (1 for serial; 0 for dask: the cluster decides)
    cores_per_fit: int  # threads each fit's chains run on (the draws do not depend on it)
    why: str
    scheduler: str | None = None

    def describe(self) -> dict[str, Any]:
        """The plan as record.json's run section and run.log keep it."""
        described: dict[str, Any] = {"name": self.name, "workers": self.workers, "cores_per_fit": self.cores_per_fit}
        return described | ({"scheduler": self.scheduler} if self.scheduler else {})


def executor_choice(name: str | None = None, scheduler: str | None = None,
                    workers: int | None = None) -> ExecutorChoice:
    """The command line's or the API's options, checked: ``dask`` needs ``scheduler``, nothing else takes it;
    ``workers`` is for ``processes`` and at least 1."""
    chosen = name or "processes"
    if chosen not in (*EXECUTORS, "serial"):
        raise ExecutorError(f"executor must be one of {', '.join(EXECUTORS)}; got {chosen!r}")
    if chosen == "dask" and not (scheduler or "").strip():
        raise ExecutorError("--executor dask needs --scheduler ADDRESS (e.g. tcp://host:8786, where "
                            "`dask scheduler` listens)")
    if chosen != "dask" and scheduler:
        raise ExecutorError(f"--scheduler is only for --executor dask; got --executor {chosen}: add "
                            "--executor dask or leave --scheduler out")
    if workers is not None and (chosen != "processes" or workers < 1):
        raise ExecutorError(f"--workers must be a whole number of at least 1, for --executor processes; got "
                            f"{workers} with --executor {chosen}" if chosen == "processes" else
                            f"--workers is only for --executor processes (a dask cluster has its own workers); "
                            f"got --executor {chosen}")
    return ExecutorChoice(chosen, workers, scheduler.strip() if scheduler else None)


def available_cpus() -> int:
    return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1


def plan_for(choice: ExecutorChoice | None, pairs: int, engine: str, chains: int, fitter_cores: int,
             cpus: int | None = None) -> Plan:
    """Decide where the pairs run. ``serial`` always, or with one pair, or one worker; with ``processes``
    and no ``workers`` given, serial below ``MIN_PAIRS`` pairs (starting workers costs more than it saves),
    else one worker a CPU (at most ``MAX_AUTO_WORKERS``), each fit's chains on its share of the CPUs."""
    cpus = cpus or available_cpus()
    serial = Plan("serial", 1, fitter_cores, "")
    if choice is None or choice.name == "serial":
        return serial
    if choice.name == "dask":
        return Plan("dask", 0, fitter_cores, f"on the dask cluster at {choice.scheduler}", choice.scheduler)
    if pairs <= 1:
        return Plan("serial", 1, fitter_cores, "one pair: worked on in this process")
    if choice.workers is None and pairs < MIN_PAIRS[engine]:
        return Plan("serial", 1, fitter_cores, f"{pairs} pairs, fewer than {MIN_PAIRS[engine]}: worker processes "
                    "would cost more to start than they save")
    workers = min(pairs, choice.workers if choice.workers is not None else min(cpus, MAX_AUTO_WORKERS))
    if workers <= 1:
        return Plan("serial", 1, fitter_cores, "one worker: worked on in this process")
    cores = max(1, min(chains, cpus // workers))
    given = "as asked" if choice.workers is not None else f"one per CPU of {cpus}"
    return Plan("processes", workers, cores, f"{workers} local worker processes ({given}), {cores} thread(s) per fit")


def drawing_processes(choice: ExecutorChoice | None, cpus: int | None = None) -> int:
    """How many local processes draw the report's paged pairs: one when the run is to stay in this process
    (no executor, ``serial``, or ``--workers 1``), else one a CPU, at most ``--workers`` and
    ``MAX_AUTO_WORKERS`` (the figures are drawn on this machine even when the pairs ran on a cluster)."""
    if choice is None or choice.name == "serial" or choice.workers == 1:
        return 1
    return min(cpus or available_cpus(), choice.workers or MAX_AUTO_WORKERS, MAX_AUTO_WORKERS)


def pair_works(plan: Plan, spec: Spec, pairs: Sequence[PairData], fitter: Fitter, *,
               emit: Callable[[LogEvent], None], check_interrupt: Callable[[], None],
               setup: Callable[[], None] | None = None) -> Iterator[PairWork]:
    """Each pair's work, in pair order. Serial work calls ``emit`` with each run.log event as it happens
    (the others' events come in their ``PairWork``). ``setup`` runs once in each local worker process
    before its first pair (for a test, or a profiler). Close the iterator to stop the workers."""
    settings = FitterSettings(fitter.sampler, plan.cores_per_fit, fitter.max_divergences)
    if plan.name == "serial":
        return (work_on_pair(spec, pair, fitter, emit=emit, check_interrupt=check_interrupt) for pair in pairs)
    if plan.name == "processes":
        return ProcessPairs(plan.workers, spec, pairs, settings, setup).results()
    from reportgen.execution.on_dask import dask_pair_works  # dask is imported only when it is used

    return dask_pair_works(plan.scheduler or "", spec, pairs, settings)


def terminate_pool(pool: ProcessPoolExecutor) -> None:
    """Stop a pool's workers now, running work included (a pool only waits for it to finish)."""
    processes = list((getattr(pool, "_processes", None) or {}).values())  # no public handle before 3.14
    pool.shutdown(wait=False, cancel_futures=True)
    stop_processes(processes)


def stop_processes(processes: Iterable[BaseProcess]) -> None:
    """SIGTERM to each live process, then SIGKILL to any still alive 5 s later."""
    processes = list(processes)
    for process in processes:
        if process.is_alive():
            process.terminate()
    for process in processes:
        process.join(timeout=5)
        if process.is_alive():
            process.kill()
            process.join(timeout=5)


def _finished(work: PairWork) -> Future[PairWork]:
    future: Future[PairWork] = Future()
    future.set_result(work)
    return future


class ProcessPairs:
    """The pairs on a pool of local worker processes, handed back in pair order."""

    def __init__(self, workers: int, spec: Spec, pairs: Sequence[PairData], settings: FitterSettings,
                 setup: Callable[[], None] | None = None) -> None:
        self.workers = workers
        self.spec = spec
        self.pairs = tuple(pairs)
        self.settings = settings
        self.setup = setup
        self.root = str(cache_root())
        self.markers = Path()
        self.futures: dict[int, Future[PairWork]] = {}

    def _pool(self, workers: int) -> ProcessPoolExecutor:
        return ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("spawn"),
                                   initializer=start_process_worker,
                                   initargs=(self.root, self.settings.cores or 1, self.setup, self.spec))

    def _submit(self, pool: ProcessPoolExecutor, index: int) -> Future[PairWork]:
        # the spec went to each worker once, when it started: sent with every pair, pickling it (hundreds of
        # kB with thousands of pairs) cost as much as the pair's own work
        marker = str(self.markers / f"pair-{index}")
        return pool.submit(fit_in_process, self.settings, self.pairs[index], marker)

    def results(self) -> Iterator[PairWork]:
        with tempfile.TemporaryDirectory(prefix="reportgen-workers-") as markers:
            self.markers = Path(markers)
            self.pool = self._pool(self.workers)
            finished = False
            try:
                self.futures = {index: self._submit(self.pool, index) for index in range(len(self.pairs))}
                for index in range(len(self.pairs)):
                    yield self._collect(index)
                finished = True
            finally:
                if finished:
                    self.pool.shutdown(wait=True)
                else:  # interrupted, or a bug in a pair's work: the other workers are stopped, not awaited
                    terminate_pool(self.pool)

    def _collect(self, index: int) -> PairWork:
        while True:
            try:
                return self.futures[index].result()
            except BrokenProcessPool:
                self._recover(index)

    def _recover(self, first: int) -> None:
        """A worker died. The pairs it was fitting (their marker files are still there) are each tried once
        more alone; the pairs not yet done go to a new pool."""
        terminate_pool(self.pool)
        waiting = [i for i in range(first, len(self.pairs))
                   if not (self.futures[i].done() and self.futures[i].exception() is None)]
        suspects = [i for i in waiting if (self.markers / f"pair-{i}").exists()]
        if not suspects:
            raise ExecutorError("the local worker processes stopped before they could fit a pair (out of memory, "
                                "or the Python environment cannot start them); run with --workers 1")
        for index in suspects:
            (self.markers / f"pair-{index}").unlink()
            self.futures[index] = _finished(self._alone(index))
        self.pool = self._pool(self.workers)
        for index in waiting:
            if index not in suspects:
                self.futures[index] = self._submit(self.pool, index)

    def _alone(self, index: int) -> PairWork:
        pool = self._pool(1)
        try:
            return self._submit(pool, index).result()
        except BrokenProcessPool:
            return failed_pair(self.spec, self.pairs[index], WORKER_DIED)
        finally:
            terminate_pool(pool)
