"""The pairs on the workers of a dask.distributed cluster: imported only when ``--executor dask`` is used.

Before the first pair, every worker is asked for its versions: a worker whose reportgen, Python or
scientific packages differ from this machine's would draw other numbers under the same seeds, so the run
is refused naming the worker and the package. Each worker process builds one fitter and keeps it (and its
compiled models) for as long as the worker lives, across runs.
"""

from __future__ import annotations

import uuid
from collections import Counter
from collections.abc import Iterator, Sequence
from typing import Any

from reportgen.data import PairData
from reportgen.errors import ExecutorError
from reportgen.execution.work import PairWork, failed_pair
from reportgen.execution.workers import FitterSettings, fit_on_dask_worker, worker_versions
from reportgen.spec import Spec

CONNECT_SECONDS = 20
WORKER_WAIT_SECONDS = 60
KILLED = "the dask worker fitting this pair died every time the scheduler tried it (a crash, or lack of memory)"
# what a worker may differ in without changing a byte: where it runs and how many CPUs it has
MAY_DIFFER = frozenset({"host", "cpus"})


def _client(address: str) -> Any:
    try:
        from distributed import Client
    except ImportError:
        raise ExecutorError("--executor dask needs the distributed package: pip install 'distributed' "
                            "(reportgen's requirements include it)") from None
    try:
        client = Client(address, timeout=CONNECT_SECONDS, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise ExecutorError(f"--scheduler {address}: no dask scheduler answered within {CONNECT_SECONDS} s "
                            f"({type(exc).__name__}: {' '.join(str(exc).split())[:120]}); start one with "
                            "`dask scheduler` and give its address, e.g. tcp://host:8786") from None
    try:
        client.wait_for_workers(1, timeout=WORKER_WAIT_SECONDS)
    except (OSError, TimeoutError):
        client.close()
        raise ExecutorError(f"--scheduler {address}: the scheduler has no workers after {WORKER_WAIT_SECONDS} s; "
                            f"start some with `dask worker {address}` on hosts with reportgen installed") from None
    return client


def check_workers(versions: dict[str, dict[str, Any]], here: dict[str, Any]) -> None:
    """Refuse a cluster whose workers would not give this machine's bytes (``versions`` by worker address)."""
    for address, theirs in sorted(versions.items()):
        for name, value in here.items():
            if name not in MAY_DIFFER and theirs.get(name) != value:
                raise ExecutorError(f"dask worker {address} has {name} {theirs.get(name)}, but this machine has "
                                    f"{value}; install the same versions on every worker (pip install -c "
                                    "requirements.lock reportgen), or the draws would differ")


def cores_by_host(versions: dict[str, dict[str, Any]], chains: int) -> dict[str, int]:
    """Threads per fit on each host: its CPUs shared among the worker processes it runs, at most one a chain."""
    processes = Counter(str(v["host"]) for v in versions.values())
    cpus = {str(v["host"]): int(v["cpus"]) for v in versions.values()}
    return {host: max(1, min(chains, cpus[host] // count)) for host, count in processes.items()}


def dask_pair_works(address: str, spec: Spec, pairs: Sequence[PairData],
                    settings: FitterSettings) -> Iterator[PairWork]:
    """Each pair's work on the cluster at ``address``, in pair order; closing the iterator cancels the rest.
    The cluster is reached and its workers checked now, before the first pair is sent."""
    client = _client(address)
    try:
        versions = client.run(worker_versions)
        check_workers(versions, worker_versions())
    except BaseException:
        client.close()
        raise
    return _results(client, spec, pairs, settings, cores_by_host(versions, settings.sampler.chains))


def _results(client: Any, spec: Spec, pairs: Sequence[PairData], settings: FitterSettings,
             threads: dict[str, int]) -> Iterator[PairWork]:
    from distributed import KilledWorker

    futures: list[Any] = []
    try:
        run_id = uuid.uuid4().hex[:12]
        # sent to every worker once and kept there, not serialised again with each pair
        shared_spec = client.scatter(spec, broadcast=True, hash=False)
        futures = [client.submit(fit_on_dask_worker, settings, threads, shared_spec, pair, pure=False,
                                 key=f"reportgen-{run_id}-pair-{index}") for index, pair in enumerate(pairs)]
        for future, pair in zip(futures, pairs, strict=True):
            try:
                yield future.result()
            except KilledWorker:
                yield failed_pair(spec, pair, KILLED)
    finally:
        if futures:
            client.cancel(futures)
        client.close()
