"""What runs inside a worker (a local worker process or a dask worker): its cache folder, and one fitter
kept for all the pairs it is given, so each model structure is compiled once per worker process.

Imported by name when a worker unpickles its task, so this module imports the sampler stack only inside
the functions: a worker claims its cache folder before numba or PyTensor are loaded.
"""

from __future__ import annotations

import fcntl
import os
import signal
import socket
import sys
import threading
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from reportgen.data import PairData
    from reportgen.execution.work import PairWork
    from reportgen.fit import Fitter
    from reportgen.spec import Sampler, Spec

CACHE_ENV = "REPORTGEN_CACHE_DIR"  # where workers keep their compiled models; default: the user's cache folder
MAX_SLOTS = 256  # more worker processes than this on one host share the last folders' names with a pid


@dataclass(frozen=True)
class FitterSettings:
    """How a worker builds its fitter: the spec's sampler, the threads each fit's chains get, the
    divergence limit that triggers a retry. The draws do not depend on ``cores`` (one seed per chain)."""

    sampler: Sampler
    cores: int | None
    max_divergences: int | None

    def cache_key(self) -> tuple[str, int | None, int | None]:
        return self.sampler.model_dump_json(), self.cores, self.max_divergences


_FITTERS: dict[tuple[str, int | None, int | None], Fitter] = {}
_CACHE_FOLDER: list[Path] = []  # the folder this process claimed, once claimed
_CLAIM_LOCK = threading.Lock()
# A dask worker may run several tasks at once on threads, but PyTensor's compiler is not thread-safe and
# nutpie starts threads of its own: one pair at a time per worker process.
_WORK_LOCK = threading.Lock()
_RUN_SPEC: list[Spec] = []  # the spec a local worker process was started with


def cache_root() -> Path:
    """``$REPORTGEN_CACHE_DIR``, else ``$XDG_CACHE_HOME/reportgen``, else ``~/.cache/reportgen``."""
    chosen = os.environ.get(CACHE_ENV)
    if chosen:
        return Path(chosen)
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return Path(base) / "reportgen"


def claim_cache_folder(root: Path | None = None) -> Path | None:
    """Give this process a compile-cache folder of its own, ``ROOT/workers/HOST/slot-N``, and point the
    compiler there (``fit.use_cache_folder``). A slot is held by a lock on ``slot-N.lock`` for the life of
    the process, so two workers, or two runs at once, never write the same folder, and a later run's
    worker takes over a folder that is already filled. Returns None when no folder can be written: the
    worker then compiles in memory only, as a first run does."""
    with _CLAIM_LOCK:
        if _CACHE_FOLDER:
            return _CACHE_FOLDER[0]
        from reportgen.fit import use_cache_folder

        host_folder = (root or cache_root()) / "workers" / (socket.gethostname() or "host")
        try:
            host_folder.mkdir(parents=True, exist_ok=True)
            for slot in range(MAX_SLOTS):
                handle = open(host_folder / f"slot-{slot}.lock", "a")  # held open until the process ends
                try:
                    fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
                except OSError:
                    handle.close()
                    continue
                folder = host_folder / f"slot-{slot}"
                break
            else:
                handle = None
                folder = host_folder / f"pid-{os.getpid()}"
            folder.mkdir(exist_ok=True)
        except OSError:
            return None
        _LOCK_HANDLES.append(handle)
        use_cache_folder(folder)
        _CACHE_FOLDER.append(folder)
        return folder


_LOCK_HANDLES: list[Any] = []  # open lock files: closing one would free the slot


THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


def limit_threads(threads: int) -> None:
    """Keep this worker's numerical libraries to its share of the CPUs: several workers each starting a
    thread per CPU slow one another down. Set before NumPy loads its BLAS, and applied to it if it has."""
    for name in THREAD_VARIABLES:
        os.environ[name] = str(threads)
    if "numpy" in sys.modules:
        from threadpoolctl import threadpool_limits

        threadpool_limits(threads)


def start_process_worker(root: str | None, threads: int, setup: Callable[[], None] | None = None,
                         spec: Spec | None = None) -> None:
    """Initialiser of a local worker process, given the run's spec once for all its pairs. Ctrl-C at a
    terminal reaches every process of the group: the worker ignores it and the runner, which sees it too,
    stops the workers itself."""
    _RUN_SPEC[:] = [spec] if spec is not None else []
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    limit_threads(threads)
    claim_cache_folder(Path(root) if root else None)
    if setup is not None:
        setup()


def worker_fitter(settings: FitterSettings) -> Fitter:
    """This process's fitter for ``settings``, built on first use and kept (with its compiled models)."""
    key = settings.cache_key()
    if key not in _FITTERS:
        from reportgen.fit import Fitter

        _FITTERS[key] = Fitter(settings.sampler, cores=settings.cores, max_divergences=settings.max_divergences)
    return _FITTERS[key]


def worker_name() -> str:
    return f"{socket.gethostname()}:{os.getpid()}"


def fit_in_process(settings: FitterSettings, pair: PairData, marker: str | None = None,
                   spec: Spec | None = None) -> PairWork:
    """One pair's work in a local worker process, under ``spec`` or else the spec the worker started with.
    ``marker`` is a file that exists while the pair is being fitted: if the process dies, the runner knows
    which pair it was working on."""
    from reportgen.execution.work import work_on_pair

    spec = spec if spec is not None else _RUN_SPEC[0]

    if marker is None:
        return work_on_pair(spec, pair, worker_fitter(settings))
    Path(marker).touch()
    try:
        return work_on_pair(spec, pair, worker_fitter(settings))
    finally:
        Path(marker).unlink(missing_ok=True)


def fit_on_dask_worker(settings: FitterSettings, cores_by_host: dict[str, int], spec: Spec,
                       pair: PairData) -> PairWork:
    """One pair's work on a dask worker: one pair at a time per worker process, each fit's chains on as
    many threads as the host's cores allow for the worker processes it runs (``cores_by_host``)."""
    from reportgen.execution.work import work_on_pair

    claim_cache_folder()
    cores = cores_by_host.get(socket.gethostname()) or settings.cores
    chosen = FitterSettings(settings.sampler, cores, settings.max_divergences)
    with _WORK_LOCK:
        return work_on_pair(spec, pair, worker_fitter(chosen))


def worker_versions() -> dict[str, Any]:
    """What must be the same on every worker as where the run is started, for the same bytes."""
    from reportgen import __version__
    from reportgen.runs.record import package_versions, platform_fingerprint

    platform = platform_fingerprint()
    return {"reportgen": __version__, **package_versions(), "machine": platform["machine"],
            "numpy_blas": platform["numpy_blas"], "host": socket.gethostname(),
            "cpus": len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1}
