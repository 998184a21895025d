"""One pair's work, the same wherever it runs: fit the models the pair needs, then assemble its result.

The runner calls it in its own process; a worker process or a dask worker calls it with a fitter of its
own and hands the ``PairWork`` back, so that every executor gives the same results, byte for byte. Seeds
come from the pair's identity (``fit.derive_seed``), never from the order or the place of the work.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import time
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from reportgen.data import PairData
from reportgen.fit import Fitter, PairFit
from reportgen.results import PairResult, pair_outcome, sampled_models
from reportgen.spec import Spec


@dataclass(frozen=True)
class LogEvent:
    """One run.log line, stamped when it happened (a worker's events are written later, in pair order)."""

    event: str
    pair: str | None = None
    level: str = "info"
    details: dict[str, object] = field(default_factory=dict)
    time: str = field(default_factory=lambda: dt.datetime.now(dt.UTC).isoformat(timespec="milliseconds"))


@dataclass(frozen=True)
class PairWork:
    """What one pair's work hands back: its result, the fits that succeeded (for the record and the draws
    files), the run.log events of its fits, and its wall time."""

    key: str
    result: PairResult
    fits: tuple[PairFit, ...]
    events: tuple[LogEvent, ...]
    seconds: float
    compile_seconds: dict[str, float]


def _no_check() -> None:
    """A worker has no interrupt of its own to look for: the runner stops the workers."""


def work_on_pair(spec: Spec, pair: PairData, fitter: Fitter, *, emit: Callable[[LogEvent], None] | None = None,
                 check_interrupt: Callable[[], None] = _no_check) -> PairWork:
    """Fit ``pair`` with every model it needs, then build its result.

    A model whose sampler raises, or returns draws that are not finite, fails that model only: the pair's
    result says why. ``emit`` receives each run.log event as it happens (the runner writes them at once
    when it works in its own process); they are also returned in ``PairWork.events``.
    ``check_interrupt`` is called after each fit: Ctrl-C during a fit is caught by the sampler (it
    returns NaN-padded draws), so the recorded signal is what stops the run.
    """
    events: list[LogEvent] = []

    def log(event: LogEvent) -> None:
        events.append(event)
        if emit is not None:
            emit(event)

    key = pair.pair.key
    started = time.perf_counter()
    compiled_before = dict(fitter.compile_seconds)
    done: dict[str, PairFit] = {}
    failures: dict[str, str] = {}
    document = spec.document
    for model in sampled_models(document.engine, pair.pair.model, pair.stats.n, document.checks.student_t_max_rows,
                                adjusted=pair.adjustment is not None):
        fit_started = time.perf_counter()
        # the sampler's warnings go to run.log (the filters in force still decide which are kept)
        with warnings.catch_warnings(record=True) as caught:
            try:
                fit = fitter.fit(fitted_data(pair, model), document.sampler.seed, model)
            except Exception as exc:  # one pair's sampler crashing must not sink the other pairs
                failures[model] = one_line_reason(exc)
            else:
                failures.update({model: reason} if (reason := not_finite(fit)) else {})
                done.update({} if reason else {model: fit})
        check_interrupt()
        for warning in caught:
            log(LogEvent("sampler warning", key, "warning",
                         {"model": model, "message": " ".join(str(warning.message).split())[:300]}))
        log(LogEvent("fit", key, "warning" if model in failures else "info",
                     {"model": model, "status": "failed" if model in failures else "sampled",
                      "reason": failures.get(model), "seconds": round(time.perf_counter() - fit_started, 3)}))
    result = pair_outcome(spec, pair, done, failures)
    compiled = {name: seconds for name, seconds in fitter.compile_seconds.items() if name not in compiled_before}
    return PairWork(key=key, result=result, fits=tuple(done.values()), events=tuple(events),
                    seconds=time.perf_counter() - started, compile_seconds=compiled)


def failed_pair(spec: Spec, pair: PairData, reason: str) -> PairWork:
    """A pair whose worker stopped before handing its work back: every sampled model failed with ``reason``,
    so the pair is judged as one whose sampler crashed (the exact engine's numbers, marked failed)."""
    document = spec.document
    models = sampled_models(document.engine, pair.pair.model, pair.stats.n, document.checks.student_t_max_rows,
                            adjusted=pair.adjustment is not None)
    failures = dict.fromkeys(models, reason)
    events = tuple(LogEvent("fit", pair.pair.key, "warning", {"model": model, "status": "failed", "reason": reason,
                                                               "seconds": 0.0}) for model in models)
    return PairWork(key=pair.pair.key, result=pair_outcome(spec, pair, {}, failures), fits=(), events=events,
                    seconds=0.0, compile_seconds={})


def fitted_data(pair: PairData, model: str) -> PairData:
    """The data a model is fitted to: the partial model sees the rows complete on the controls too, so its
    draws are mapped back to the data's units with those rows' means and SDs."""
    if model == "partial" and pair.adjustment is not None:
        return dataclasses.replace(pair, stats=pair.adjustment.stats)
    return pair


def not_finite(fit: PairFit) -> str | None:
    """Why draws holding NaN or inf cannot be summarised (a sampler that stopped early pads with NaN)."""
    bad = [name for name, values in fit.draws.items() if not np.isfinite(values).all()]
    if not bad:
        return None
    return (f"the sampler returned draws that are not finite numbers (NaN or inf) for {', '.join(bad)}; "
            "the sampler stopped early or diverged badly")


def one_line_reason(exc: BaseException) -> str:
    text = " ".join(str(exc).split()) or type(exc).__name__
    return f"{type(exc).__name__}: {text}"[:200]
