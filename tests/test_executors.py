"""Where the pairs are fitted: in this process, in local worker processes, on a dask cluster. Whatever the
executor, the outputs are the same bytes (compared by the SHA-256 that record.json keeps of each output,
and by the draws' hashes); a pair whose work fails in a worker fails alone; wrong options exit 2."""

from __future__ import annotations

import csv
import io
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from reportgen import runner
from reportgen.errors import ExecutorError
from reportgen.execution import on_dask
from reportgen.execution.executors import WORKER_DIED, Plan, executor_choice, plan_for
from reportgen.fit import Fitter, PairFit, derive_seed
from reportgen.results import RunResults, run_results
from reportgen.runs.record import RunClock, draws_sha256
from reportgen.spec import load_spec
from tests.conftest import correlated_frame, write_spec
from tests.test_bad_input import invoke, refused

ROOT = Path(__file__).resolve().parents[1]
THREE_PAIRS = """
[[pair_sets]]
name = "all"
columns = ["a", "b", "c"]
"""
SMALL_SAMPLER = """
[sampler]
draws = 150
tune = 150
chains = 2
seed = 11

[diagnostics]
ess_min = 20
rhat_max = 1.2
"""


@pytest.fixture(scope="module")
def three_pairs(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("three_pairs")
    frame = correlated_frame(40, 0.5, seed=5)
    frame["c"] = frame["a"] * 0.3 + np.random.default_rng(6).normal(size=40)
    frame.to_csv(folder / "data.csv", index=False)
    return write_spec(folder, THREE_PAIRS + SMALL_SAMPLER, quick=False)


@pytest.fixture(scope="module")
def cluster() -> object:
    """Two dask workers in processes of their own (threads would share PyTensor's compiler)."""
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=":0") as local:
        yield local


def _reproducible(out: Path) -> dict:
    return json.loads((out / "record.json").read_text(encoding="utf-8"))["reproducible"]


def test_exact_engine_outputs_are_the_same_bytes_on_every_executor(three_pairs: Path, tmp_path: Path,
                                                                   cluster: object) -> None:
    runs = {"serial": ("--workers", "1"), "processes": ("--workers", "2"),
            "dask": ("--executor", "dask", "--scheduler", cluster.scheduler_address)}  # type: ignore[attr-defined]
    records = {}
    for name, options in runs.items():
        result = invoke("run", three_pairs, "--out", tmp_path / name, "--engine", "exact", *options)
        assert result.exit_code == 0, result.output
        records[name] = _reproducible(tmp_path / name)
        executor = json.loads((tmp_path / name / "record.json").read_text(encoding="utf-8"))["run"]["executor"]
        assert executor["name"] == name
    hashes = records["serial"]["outputs_sha256"]
    assert set(hashes) >= {"results.csv", "results.parquet", "report.html", "report.pdf"}
    assert records["processes"] == records["serial"] and records["dask"] == records["serial"]
    for name in runs:
        assert (tmp_path / name / "results.csv").read_bytes() == (tmp_path / "serial" / "results.csv").read_bytes()


def _fit_everything(spec_path: Path, plan: Plan) -> tuple[str, bytes, dict[str, str]]:
    prepared = runner.prepare(load_spec(spec_path))
    fitter = Fitter(prepared.spec.document.sampler)
    results, fits = runner.fit_all(prepared, fitter, RunClock(), executor=plan)
    draws = {f"{key} {fit.model}": draws_sha256(fit) for key, pair_fits in fits.items() for fit in pair_fits}
    return runner.results_csv(results), runner.results_parquet(results), draws


@pytest.mark.slow
def test_sampled_draws_and_results_are_the_same_on_every_executor(three_pairs: Path, cluster: object) -> None:
    address = cluster.scheduler_address  # type: ignore[attr-defined]
    serial = _fit_everything(three_pairs, Plan("serial", 1, 2, ""))
    assert len(serial[2]) == 3  # every pair was sampled
    assert _fit_everything(three_pairs, Plan("processes", 2, 1, "")) == serial
    assert _fit_everything(three_pairs, Plan("dask", 0, 1, "", address)) == serial


# ------------------------------------------------------------------------------ a pair failing in a worker

REAL_FIT = Fitter.fit  # as a worker imports this module: before any test replaces it
BROKEN_PAIR = "a vs c"  # its sampler raises
DYING_PAIR = "b vs c"  # its worker process dies while fitting it


def _made_up_fit(self: Fitter, pair: object, master_seed: int, model: str = "normal") -> PairFit:
    """Finite draws from the pair's own seed, without compiling anything; two pairs break on purpose."""
    key = pair.pair.key  # type: ignore[attr-defined]
    if key == BROKEN_PAIR:
        raise RuntimeError("the sampler broke")
    if key == DYING_PAIR and os.environ.get("REPORTGEN_TEST_IN_WORKER"):
        os._exit(3)
    seed = derive_seed(master_seed, pair.pair.x, pair.pair.y, model)  # type: ignore[attr-defined]
    rng = np.random.default_rng(seed)
    draws = {name: rng.normal(0.2, 0.05, size=(2, 150)) for name in ("rho", "mu_x", "mu_y")}
    draws |= {name: np.exp(rng.normal(0.0, 0.05, size=(2, 150))) for name in ("sigma_x", "sigma_y")}
    return PairFit(key=key, model=model, seed=seed, draws=draws, diverging=np.zeros((2, 150), bool),
                   energy=rng.normal(size=(2, 150)), netcdf=b"", seconds=0.0, compile_seconds=0.0)


def made_up_sampler_in_worker() -> None:
    """Run in each worker process before its first pair."""
    os.environ["REPORTGEN_TEST_IN_WORKER"] = "1"
    Fitter.fit = _made_up_fit  # type: ignore[method-assign]


def test_a_pair_that_fails_in_a_worker_fails_alone(three_pairs: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from reportgen.execution.executors import ProcessPairs
    from reportgen.execution.workers import FitterSettings

    monkeypatch.setattr(Fitter, "fit", _made_up_fit)
    prepared = runner.prepare(load_spec(three_pairs))
    spec, fitter = prepared.spec, Fitter(prepared.spec.document.sampler)
    in_process = runner.fit_all(prepared, fitter, RunClock())[0]
    settings = FitterSettings(fitter.sampler, 1, fitter.max_divergences)
    works = list(ProcessPairs(2, spec, prepared.pairs, settings, made_up_sampler_in_worker).results())
    assert [work.key for work in works] == [p.pair.key for p in prepared.pairs]  # in pair order
    rows = _rows(run_results(spec, tuple(work.result for work in works)))
    expected = _rows(in_process)
    assert rows["a vs b"] == expected["a vs b"]  # the pair that nothing happened to
    assert rows[BROKEN_PAIR] == expected[BROKEN_PAIR]  # failed in the worker as it fails here
    assert rows[BROKEN_PAIR]["status"] == "fail" and "RuntimeError: the sampler broke" in str(rows[BROKEN_PAIR])
    assert rows[DYING_PAIR]["status"] == "fail" and WORKER_DIED in rows[DYING_PAIR]["status_reasons"]


def _rows(results: RunResults) -> dict[str, dict[str, str]]:
    lines = list(csv.DictReader(io.StringIO(runner.results_csv(results))))
    return {line["pair"]: line for line in lines}


def test_a_pair_that_fails_on_a_dask_worker_fails_alone(three_pairs: Path, cluster: object,
                                                        monkeypatch: pytest.MonkeyPatch) -> None:
    from distributed import Client

    address = cluster.scheduler_address  # type: ignore[attr-defined]
    monkeypatch.setattr(Fitter, "fit", _made_up_fit)
    prepared = runner.prepare(load_spec(three_pairs))
    fitter = Fitter(prepared.spec.document.sampler)
    in_process = runner.results_csv(runner.fit_all(prepared, fitter, RunClock())[0])
    with Client(address) as client:
        client.run(lambda: setattr(Fitter, "fit", _made_up_fit))
        try:
            on_cluster = runner.results_csv(runner.fit_all(prepared, fitter, RunClock(),
                                                           executor=Plan("dask", 0, 1, "", address))[0])
        finally:
            client.run(lambda: setattr(Fitter, "fit", REAL_FIT))
    assert on_cluster == in_process
    assert "RuntimeError: the sampler broke" in on_cluster


# ------------------------------------------------------------------------------------------ the options


@pytest.mark.parametrize(("options", "message"), [
    (("--executor", "dask"), "--executor dask needs --scheduler ADDRESS"),
    (("--scheduler", "tcp://127.0.0.1:8786"), "--scheduler is only for --executor dask"),
    (("--workers", "0"), "--workers must be a whole number of at least 1"),
    (("--executor", "dask", "--scheduler", "tcp://127.0.0.1:8786", "--workers", "2"),
     "--workers is only for --executor processes"),
])
def test_executor_options_that_do_not_fit_exit_2_with_one_line(three_pairs: Path, tmp_path: Path,
                                                               options: tuple[str, ...], message: str) -> None:
    assert refused("run", three_pairs, "--out", tmp_path / "out", *options).startswith(message)
    assert not (tmp_path / "out").exists()


def test_a_scheduler_that_does_not_answer_exits_2_with_one_line(three_pairs: Path, tmp_path: Path,
                                                                monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(on_dask, "CONNECT_SECONDS", 1)
    line = refused("run", three_pairs, "--out", tmp_path / "out", "--engine", "exact", "--executor", "dask",
                   "--scheduler", "tcp://127.0.0.1:9")
    assert line.startswith("--scheduler tcp://127.0.0.1:9: no dask scheduler answered within 1 s")
    assert not (tmp_path / "out").exists()


def test_workers_whose_versions_differ_are_refused() -> None:
    here = {"reportgen": "0.1.0", "numpy": "2.4.6", "host": "a", "cpus": 2}
    on_dask.check_workers({"tcp://w1": here | {"host": "b", "cpus": 8}}, here)  # place and size may differ
    with pytest.raises(ExecutorError, match="dask worker tcp://w2 has numpy 2.3.0, but this machine has 2.4.6"):
        on_dask.check_workers({"tcp://w1": here, "tcp://w2": here | {"numpy": "2.3.0"}}, here)


def test_small_runs_stay_in_this_process_and_large_ones_use_a_worker_per_cpu() -> None:
    choice = executor_choice()
    assert plan_for(choice, 1, "exact", 4, 2, cpus=8).name == "serial"
    assert plan_for(choice, 3, "mcmc", 4, 2, cpus=8).name == "serial"
    large = plan_for(choice, 200, "mcmc", 4, 2, cpus=8)
    assert (large.name, large.workers, large.cores_per_fit) == ("processes", 8, 1)
    two = plan_for(choice, 200, "mcmc", 4, 2, cpus=2)
    assert (two.workers, two.cores_per_fit) == (2, 1)
    asked = plan_for(executor_choice(workers=2), 3, "exact", 4, 2, cpus=8)
    assert (asked.name, asked.workers, asked.cores_per_fit) == ("processes", 2, 4)
    assert plan_for(executor_choice(workers=1), 300, "exact", 4, 2).name == "serial"
    assert plan_for(None, 300, "exact", 4, 2).name == "serial"


# ------------------------------------------------------------------------------------------ Ctrl-C

# Runs the command line with the collection of the first pair held until the test has seen the workers.
WAITING_WRAPPER = r'''
import os, sys, time
from pathlib import Path
from reportgen.execution import executors

collect = executors.ProcessPairs._collect

def held(self, index):
    if index == 0:
        Path(os.environ["REPORTGEN_TEST_READY"]).touch()
        time.sleep(120)
    return collect(self, index)

executors.ProcessPairs._collect = held
if __name__ == "__main__":
    from reportgen.cli import main
    main(sys.argv[1:], prog_name="reportgen")
'''


@pytest.mark.parametrize(("signum", "code", "name"), [(signal.SIGINT, 130, "Ctrl-C")])
def test_ctrl_c_stops_the_workers_and_publishes_nothing(three_pairs: Path, tmp_path: Path, signum: int, code: int,
                                                        name: str) -> None:
    psutil = pytest.importorskip("psutil")
    wrapper, ready, out = tmp_path / "wrapper.py", tmp_path / "ready", tmp_path / "out"
    wrapper.write_text(WAITING_WRAPPER, encoding="utf-8")
    environment = {**os.environ, "REPORTGEN_TEST_READY": str(ready), "PYTHONPATH": str(ROOT)}
    process = subprocess.Popen([sys.executable, str(wrapper), "run", str(three_pairs), "--out", str(out),
                                "--engine", "exact", "--workers", "2"], stdout=subprocess.PIPE,
                               stderr=subprocess.PIPE, text=True, env=environment)
    deadline = time.monotonic() + 120
    while not ready.exists() and process.poll() is None and time.monotonic() < deadline:
        time.sleep(0.1)
    assert ready.exists(), process.communicate()[1]
    workers = psutil.Process(process.pid).children(recursive=True)
    assert workers  # the pool was started
    process.send_signal(signum)
    _, stderr = process.communicate(timeout=60)
    assert process.returncode == code
    assert stderr.splitlines() == [f"reportgen: interrupted ({name}); no output was changed"]
    assert not out.exists() and [p.name for p in tmp_path.iterdir() if p.name.startswith(".out")] == []
    # the workers are terminated before the run exits; multiprocessing's resource tracker, a child too,
    # notices its parent is gone a moment later: each is given a few seconds
    _, alive = psutil.wait_procs(workers, timeout=10)
    assert not [w for w in alive if w.is_running() and w.status() != psutil.STATUS_ZOMBIE]
