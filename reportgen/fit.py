"""Stage 4: fit each pair's model, compiling each model structure only once.

PyMC's own ``pm.sample`` recompiles the log-density and its gradient on every
call, even when only ``pm.Data`` changes. Here each structure is compiled once
by nutpie and every pair is fed to the compiled model with ``with_data``, so a
pair costs a fraction of a second after the first compile (see
``benchmarks/bench_fit.py`` for the measured ratios).

A fit with more divergent transitions than the spec allows is sampled again at a
higher target acceptance, on the same compiled model and with the same seed: a
retry costs one more sampling run, never a compile, and reruns stay identical.
"""

from __future__ import annotations

import hashlib
import os
import sys
import time
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from reportgen.data import PairData
from reportgen.models import SAMPLED, ModelInputs, Standardisation, to_data_units
from reportgen.models import normal as normal_model
from reportgen.spec import Sampler

PARAMETERS = normal_model.PARAMETERS
# the models whose density and gradient are written by hand for numba (models/compiled.py), so their
# compiled code is kept on disk across processes; the partial model is still built through PyMC
HAND_WRITTEN = frozenset({"normal", "student_t", "partial"})

# Compiled models live for the whole process: every Fitter (every spec run in this
# process) reuses them. Keyed by model structure; the data are swapped per pair.
_COMPILED: dict[str, Any] = {}

# Target acceptances of the automatic retries after too many divergent transitions. A higher target
# makes the adapted step size smaller, so the sampler can follow the sharp curvature where it diverged
# (common practice with NUTS; Betancourt 2017, "A Conceptual Introduction to Hamiltonian Monte Carlo",
# on divergences). Each retry costs one sampling run on the compiled model.
RETRY_TARGETS = (0.95, 0.99)
MAX_RETRIES = 2


def compiled_key(inputs: ModelInputs, model: str) -> str:
    """Which compiled model serves ``inputs``: a hand-written density takes every prior family as data (the
    partial model's, one per number of controls: ``partial2``); a model built through PyMC compiles once
    per structure (model and prior families)."""
    if model == "partial":
        return inputs.structure.split("+")[0]
    return model if model in HAND_WRITTEN else inputs.structure


def use_cache_folder(folder: os.PathLike[str] | str) -> None:
    """Keep this process's compiled log-densities in ``folder`` (one per worker when workers share a disk).

    Call it before the first fit: the compiled model is loaded from, or written to, the folder that is set
    when it is first built. Numba reads the variable when it is imported; a numba already imported is told
    directly.
    """
    os.environ["NUMBA_CACHE_DIR"] = os.fspath(folder)
    if "numba" in sys.modules:
        sys.modules["numba"].config.CACHE_DIR = os.fspath(folder)


def derive_seed(master_seed: int, x: str, y: str, model: str = "normal") -> int:
    """A pair's seed from the master seed and the pair's identity alone.

    Adding, removing or reordering pairs never changes another pair's draws
    (numpy SeedSequence with a spawn key taken from the column names). A model
    other than the normal one adds its name, so a pair's two fits draw
    independently while the normal fit keeps the seed it always had.
    """
    identity = f"{x}\x1f{y}" if model == "normal" else f"{x}\x1f{y}\x1f{model}"
    digest = hashlib.sha256(identity.encode()).digest()
    spawn_key = tuple(int.from_bytes(digest[i:i + 4], "little") for i in range(0, 16, 4))
    sequence = np.random.SeedSequence(entropy=master_seed, spawn_key=spawn_key)
    return int(sequence.generate_state(1, dtype=np.uint32)[0])


def retry_targets(first: float) -> tuple[float, ...]:
    """The target acceptances tried after ``first``: only higher ones (never below the spec's own), at most two."""
    return tuple(target for target in RETRY_TARGETS if target > first)[:MAX_RETRIES]


@dataclass(frozen=True)
class SamplingAttempt:
    """One sampling run of a pair: its target acceptance, its divergent transitions, its wall time."""

    target_accept: float
    divergences: int
    seconds: float


@dataclass(frozen=True)
class PairFit:
    """Posterior draws of one pair in the data's units, shaped (chain, draw)."""

    key: str
    model: str
    seed: int
    draws: dict[str, np.ndarray]
    diverging: np.ndarray
    energy: np.ndarray
    netcdf: bytes = field(repr=False)  # the draws file's bytes, written where the pair was fitted
    seconds: float  # every attempt's sampling, plus swapping the data in
    compile_seconds: float
    # every sampling run in order; the draws are the last one's (empty for fits made elsewhere, as in tests)
    attempts: tuple[SamplingAttempt, ...] = ()

    @property
    def target_accept(self) -> float:
        """The target acceptance of the run whose draws these are (NaN when no attempt is recorded)."""
        return self.attempts[-1].target_accept if self.attempts else float("nan")

    @property
    def retried(self) -> bool:
        return len(self.attempts) > 1


def netcdf_bytes(idata: Any) -> bytes:
    """The draws file of one fit (every group of the sampler's output, in one netCDF-4 file), made in the
    process that fitted the pair: worker processes then hand back bytes, not the sampler's objects, and the
    run's own process only writes them down."""
    import dask
    import xarray as xr

    tree = xr.DataTree.from_dict({group: idata[group] for group in idata.groups()})
    # On a dask worker xarray would guard the write with a cluster-wide lock named after the target, which
    # for an in-memory file the scheduler cannot know; the file is this process's alone, so a local lock
    # (what xarray takes under the synchronous scheduler) is enough.
    with dask.config.set(scheduler="synchronous"):
        return bytes(tree.to_netcdf(None, engine="h5netcdf"))


class Fitter:
    """Holds compiled models, one per model structure, for reuse across pairs.

    With ``max_divergences`` (the spec's ``diagnostics.max_divergences``), a fit with more divergent
    transitions is sampled again at the targets of ``retry_targets``; ``None`` (the default) never retries.
    """

    def __init__(self, sampler: Sampler, cores: int | None = None, *, max_divergences: int | None = None) -> None:
        self.sampler = sampler
        self.cores = cores or max(1, min(sampler.chains, os.cpu_count() or 1))
        self.max_divergences = max_divergences
        self.compile_seconds: dict[str, float] = {}

    def _compiled_for(self, inputs: ModelInputs, model: str) -> tuple[Any, float]:
        key = compiled_key(inputs, model)
        if key in _COMPILED:
            return _COMPILED[key], 0.0
        started = time.perf_counter()
        if model in HAND_WRITTEN:
            # written for numba and kept in its on-disk cache: compiled once per machine, loaded after that
            from reportgen.models import compiled as hand_written

            compiled = hand_written.compiled_model(model, inputs)
        else:
            import nutpie

            with warnings.catch_warnings():
                warnings.simplefilter("ignore", UserWarning)
                compiled = nutpie.compile_pymc_model(SAMPLED[model].build_model(inputs))
        seconds = time.perf_counter() - started
        _COMPILED[key] = compiled
        self.compile_seconds[key] = seconds
        return compiled, seconds

    def fit(self, pair: PairData, master_seed: int, model: str = "normal") -> PairFit:
        """Sample one pair with one of the sampled models (``normal`` or ``student_t``)."""
        import nutpie

        definition = SAMPLED[model]
        inputs = definition.inputs_for(pair)
        compiled, compile_seconds = self._compiled_for(inputs, model)
        seed = derive_seed(master_seed, pair.pair.x, pair.pair.y, model)
        started = time.perf_counter()
        with_data = (compiled.for_inputs(inputs) if model in HAND_WRITTEN
                     else compiled.with_data(**inputs.values))
        retries = retry_targets(self.sampler.target_accept) if self.max_divergences is not None else ()
        attempts: list[SamplingAttempt] = []
        for target in (self.sampler.target_accept, *retries):
            attempt_started = time.perf_counter()
            # the same seed at every target: the retry is as deterministic as the first run
            idata = nutpie.sample(
                with_data,
                draws=self.sampler.draws,
                tune=self.sampler.tune,
                chains=self.sampler.chains,
                cores=self.cores,
                seed=seed,
                target_accept=target,
                progress_bar=False,
                save_warmup=False,
            )
            divergences = int(np.sum(idata.sample_stats["diverging"].values))
            attempts.append(SamplingAttempt(target_accept=target, divergences=divergences,
                                            seconds=time.perf_counter() - attempt_started))
            if not self._needs_retry(divergences, idata):
                break
        seconds = time.perf_counter() - started
        posterior = idata.posterior
        scale = Standardisation.of(pair.stats)
        draws = to_data_units(posterior["mu_z"].values, posterior["sigma_z"].values, scale)
        for name in definition.PARAMETERS:
            if name not in draws:
                draws[name] = posterior[name].values
        for name in definition.PARAMETERS:
            idata.posterior[name] = (("chain", "draw"), draws[name])
        stats = idata.sample_stats
        return PairFit(
            key=pair.pair.key,
            model=model,
            seed=seed,
            draws={name: np.asarray(draws[name], dtype=float) for name in definition.PARAMETERS},
            diverging=np.asarray(stats["diverging"].values, dtype=bool),
            energy=np.asarray(stats["energy"].values, dtype=float),
            netcdf=netcdf_bytes(idata),
            seconds=seconds,
            compile_seconds=compile_seconds,
            attempts=tuple(attempts),
        )

    def _needs_retry(self, divergences: int, idata: Any) -> bool:
        if self.max_divergences is None or divergences <= self.max_divergences:
            return False
        # non-finite draws mean the sampler stopped early (Ctrl-C is caught inside it and the draws padded):
        # another run would only delay the stop, and the runner refuses such draws anyway
        return all(bool(np.isfinite(values).all()) for values in idata.posterior.data_vars.values())
