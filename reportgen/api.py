"""Python entry points for notebooks and scripts: the same stages as the command line, without a shell.

``run`` does what ``reportgen run`` does (the same checks before the first fit, the same files in the
output folder, the same errors) and hands back results.csv as a pandas DataFrame of numbers. ``fit_pair``
fits one pair of columns with the same data checks and returns a small summary, writing nothing.

Errors are the ``ReportgenError`` family with the command line's one-line messages; a pair that fails its
convergence checks is not an error here (the command line exits 1): its ``status`` column says ``fail``.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import tempfile
from collections.abc import Iterable, Mapping, Sequence
from contextlib import ExitStack
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from reportgen import runner
from reportgen.data import Table, load_pairs
from reportgen.errors import DataError, ReportgenError, SpecError
from reportgen.execution.executors import executor_choice
from reportgen.fit import Fitter
from reportgen.results import PairResult
from reportgen.runs.publish import resolve_out
from reportgen.runs.record import RunClock
from reportgen.runs.signals import handling_signals
from reportgen.spec import (
    Priors,
    Rule,
    Sampler,
    Spec,
    check_engine_models,
    load_spec,
    with_engine,
    with_model,
    with_quick,
    with_sampler_overrides,
)
from reportgen.spec.loading import spec_from_resolved

__all__ = ["PairSummary", "RuleProbability", "fit_pair", "load_spec", "run"]

ENGINES = ("mcmc", "exact")
MODELS = ("normal", "student_t", "rank", "auto")
FRAME_FILE = "dataframe.csv"  # the name the record's data_file gives a DataFrame's table
# how messages name a DataFrame's table instead of the temporary file it is read from; its rows are
# numbered as that CSV file's lines (header = row 1), so the frame's first row is row 2
FRAME_NAME = "data (the DataFrame; its first row is row 2, after the header)"
# results.csv's text columns: the runner's list, plus the rule names of borderline_rules
TEXT_COLUMNS = runner.TEXT_COLUMNS
FIT_PAIR_NAME = "fit_pair"  # how fit_pair's messages name its input


def _choice(option: str, value: str | None, options: tuple[str, ...]) -> None:
    """The command line's choices, refused with the command line's kind of message."""
    if value is not None and value not in options:
        raise SpecError(f"{option} must be one of {', '.join(options)}; got {value!r}")


def _with_overrides(spec: Spec, engine: str | None, model: str | None, quick: bool = False,
                    **sampler: int | None) -> Spec:
    """The overrides in the command line's order (sampler, quick, engine, then model; see ``cli._load``)."""
    _choice("engine", engine, ENGINES)
    _choice("model", model, MODELS)
    spec = with_sampler_overrides(spec, **sampler)
    if quick:
        spec = with_quick(spec, given=[key for key, value in sampler.items() if value is not None])
    return with_model(with_engine(spec, engine), model)


def frame_csv(frame: pd.DataFrame) -> bytes:
    """The DataFrame as the CSV bytes it is read from and hashed as: header, then rows, without the index.

    pandas writes every float with the shortest text that reads back to the same float, so the round trip
    loses nothing (checked in tests/test_api.py against pandas' own reader).
    """
    if not isinstance(frame, pd.DataFrame):
        raise DataError(f"data must be a pandas DataFrame, got {type(frame).__name__}")
    if isinstance(frame.columns, pd.MultiIndex):
        raise DataError("data: the DataFrame has several header levels (MultiIndex columns); flatten them "
                        "to one name per column, e.g. with '_'.join")
    renamed = frame.set_axis([str(name) for name in frame.columns], axis=1)
    return renamed.to_csv(index=False, lineterminator="\n").encode("utf-8")


def _frame_spec(spec: Spec, frame: pd.DataFrame, folder: Path) -> tuple[Spec, Path]:
    """``spec`` reading ``frame`` (written to ``folder`` as CSV) instead of its [data] file.

    Format and sheet give way to CSV; columns and the missing-value policy stay, so the frame is checked as
    the file would be. The record's overrides say that the data came from a DataFrame.
    """
    content = frame_csv(frame)
    path = folder / FRAME_FILE
    path.write_bytes(content)
    source = spec.document.data.model_copy(update={"path": str(path), "format": "csv", "sheet": ""})
    note = (f"a pandas DataFrame ({len(frame)} rows, {frame.shape[1]} columns; "
            f"SHA-256 of its CSV {hashlib.sha256(content).hexdigest()[:16]}...)")
    return spec.model_copy(update={"document": spec.document.model_copy(update={"data": source}),
                                   "overrides": (*spec.overrides, ("data", note))}), path


results_frame = runner.results_frame


def run(
    spec: str | Path | Spec,
    out: str | Path,
    *,
    data: pd.DataFrame | None = None,
    seed: int | None = None,
    draws: int | None = None,
    tune: int | None = None,
    chains: int | None = None,
    engine: str | None = None,
    model: str | None = None,
    previous: str | Path | None = None,
    quick: bool = False,
    executor: str | None = None,
    scheduler: str | None = None,
    workers: int | None = None,
) -> pd.DataFrame:
    """Run a spec as ``reportgen run SPEC --out OUT`` does, and return its results table.

    Parameters
    ----------
    spec
        A spec file's path, or a spec from ``load_spec``.
    out
        The output folder; ``{date}`` and ``{period}`` are filled from the report date.
    data
        A DataFrame to use instead of the spec's [data] file (default None: the file). It is checked as a
        file would be; messages count its rows as a CSV file's lines (its first row is row 2). The record
        names the data ``dataframe.csv``, hashes the frame's CSV bytes and notes it among the overrides.
    seed, draws, tune, chains, engine, model
        The command line's overrides (default None: the spec's value).
    previous
        An earlier run's output folder, as ``--previous`` (default None).
    quick
        A quick draft, as ``--quick``: short chains, thresholds they can reach, every page marked DRAFT.
    executor, scheduler, workers
        Where the pairs are fitted, as ``--executor``, ``--scheduler`` and ``--workers``: ``"processes"``
        (default None means this: local worker processes when the run has enough pairs to gain from them),
        or ``"dask"`` with ``scheduler`` the address of a dask scheduler (``"tcp://host:8786"``). The
        report's pages are drawn in one process a CPU on this machine, unless ``workers=1``. The results
        are the same numbers and files whichever is used.

    Returns
    -------
    pandas.DataFrame
        One row per pair, results.csv's columns in its order; ``attrs`` holds ``out_dir`` and ``status``
        (``fail`` where the command line would exit 1).

    Raises
    ------
    ReportgenError
        SpecError, DataError, OutputError, ReportAssetError or ExecutorError with the command line's message.
    """
    chosen_executor = executor_choice(executor, scheduler, workers)
    loaded = spec if isinstance(spec, Spec) else load_spec(spec)
    chosen = _with_overrides(loaded, engine, model, quick, seed=seed, draws=draws, tune=tune, chains=chains)
    chosen = runner.with_report_date(chosen)  # pinned first, so {date} in out and the report agree
    folder_out = resolve_out(Path(out), chosen.document.report.date or dt.date.today())
    command = ["reportgen.run", str(chosen.source_path), "--out", str(folder_out),
               *[f"{key}={value}" for key, value in chosen.overrides]]
    with ExitStack() as stack:
        frame_path: Path | None = None
        if data is not None:
            # a spec confined to its folder may read only inside it, so the frame's CSV is written there
            place = chosen.base_dir if chosen.document.data.confine_to_spec_folder else None
            scratch = Path(stack.enter_context(tempfile.TemporaryDirectory(prefix=".reportgen-dataframe-",
                                                                           dir=place)))
            chosen, frame_path = _frame_spec(chosen, data, scratch)
            command.append("data=DataFrame")
        stack.enter_context(handling_signals())  # Ctrl-C stops the run as on the command line
        try:
            outcome = runner.run(chosen, folder_out, command_line=command,
                                 previous=Path(previous) if previous is not None else None,
                                 executor=chosen_executor)
        except ReportgenError as exc:
            if frame_path is None:
                raise
            raise type(exc)(str(exc).replace(str(frame_path), FRAME_NAME)) from None
    frame = results_frame(outcome.results)
    frame.attrs.update(out_dir=outcome.out_dir, status=outcome.results.status)
    return frame


# ------------------------------------------------------------------------------------------ one pair


@dataclass(frozen=True)
class RuleProbability:
    """One decision rule's probability for the pair; ``mcse`` is 0 when it was computed by quadrature."""

    name: str
    probability: float
    mcse: float
    required: float
    verdict: str  # "met" or "not met"


@dataclass(frozen=True)
class PairSummary:
    """rho for one pair: the leading model's summary, rule probabilities and the diagnostics' status."""

    n: int
    n_dropped: int
    sample_r: float
    engine: str  # "mcmc" or "exact"
    model: str  # the model whose numbers these are ("normal", "student_t" or "rank")
    mean: float
    median: float
    sd: float
    interval: tuple[float, float]
    interval_kind: str  # "central" or "hdi"
    mass: float
    p_positive: float
    rules: tuple[RuleProbability, ...]
    status: str  # "pass", "warn" or "fail"
    status_reasons: tuple[str, ...]
    result: PairResult  # everything the report shows of the pair, for those who need more

    def __repr__(self) -> str:  # the full result is long: keep the summary readable in a notebook
        rules = ", ".join(f"{r.name}={r.probability:.3f}" for r in self.rules)
        return (f"PairSummary(n={self.n}, model={self.model!r}, engine={self.engine!r}, median={self.median:+.3f}, "
                f"interval=({self.interval[0]:+.3f}, {self.interval[1]:+.3f}), status={self.status!r}"
                + (f", rules: {rules})" if rules else ")"))


def _column_names(x: object, y: object) -> tuple[str, str]:
    """A Series' own names when they are two different strings, else ``x`` and ``y``."""
    names = (getattr(x, "name", None), getattr(y, "name", None))
    if all(isinstance(name, str) and name for name in names) and names[0] != names[1]:
        return str(names[0]), str(names[1])
    return "x", "y"


def _as_column(values: object, name: str) -> np.ndarray:
    array = np.asarray(values.to_numpy() if isinstance(values, pd.Series) else list(values))
    if array.dtype.kind == "b":  # True/False are not numbers in a data file either: read them as text
        array = array.astype(object)
    if array.ndim != 1:
        raise DataError(f"{FIT_PAIR_NAME}: `{name}` must be one column of values, got an array of shape "
                        f"{array.shape}")
    return array


def _dump(value: Any) -> Any:
    """A spec table given as a spec object or as a dict, as the dict that validates again."""
    return value.model_dump(mode="json") if hasattr(value, "model_dump") else value


def fit_pair(
    x: Iterable[float] | pd.Series,
    y: Iterable[float] | pd.Series,
    *,
    priors: Priors | Mapping[str, Any] | None = None,
    engine: str = "mcmc",
    model: str = "normal",
    sampler: Sampler | Mapping[str, Any] | None = None,
    rules: Sequence[Rule | Mapping[str, Any]] = (),
    mass: float = 0.95,
) -> PairSummary:
    """Fit one pair of columns without a spec file or report, as ``run`` fits each pair of a spec.

    Parameters
    ----------
    x, y
        The two columns (lists, arrays or Series of the same length); NaN marks a missing value and its
        row is left out (``data.missing = "listwise"``).
    priors
        The spec's [priors] table, e.g. ``{"rho": {"family": "beta", "a": 2, "b": 2}}`` (default None:
        the spec's defaults).
    engine
        ``"mcmc"`` (default) or ``"exact"`` (quadrature; rho under Jeffreys' priors, no sampler).
    model
        ``"normal"`` (default), ``"student_t"``, ``"rank"`` or ``"auto"``.
    sampler
        The spec's [sampler] table, e.g. ``{"draws": 200, "tune": 200, "chains": 2}`` (default None:
        the spec's defaults).
    rules
        Decision rules as the spec's [[rules]], e.g. ``{"name": "strong", "statement": "above",
        "threshold": 0.5}`` (default none).
    mass
        Probability mass of the central credible interval (default 0.95).

    Raises
    ------
    ReportgenError
        SpecError for a setting the spec would refuse, DataError for data the command line would refuse
        (too few complete rows, a constant column, perfect correlation, infinite or non-numeric values).
    """
    _choice("engine", engine, ENGINES)
    _choice("model", model, MODELS)
    x_name, y_name = _column_names(x, y)
    x_values, y_values = _as_column(x, x_name), _as_column(y, y_name)
    if x_values.size != y_values.size:
        raise DataError(f"{FIT_PAIR_NAME}: `{x_name}` has {x_values.size} values and `{y_name}` "
                        f"{y_values.size}; give two columns of the same length")
    resolved: dict[str, Any] = {
        "engine": engine, "model": model, "report": {"title": FIT_PAIR_NAME},
        "data": {"path": FIT_PAIR_NAME}, "pairs": [{"x": x_name, "y": y_name}],
        "rules": [_dump(rule) for rule in rules], "summary": {"credible_mass": mass},
    }
    if priors is not None:
        resolved["priors"] = _dump(priors)
    if sampler is not None:
        resolved["sampler"] = _dump(sampler)
    where = Path(FIT_PAIR_NAME)
    spec = spec_from_resolved(resolved, Path.cwd() / FIT_PAIR_NAME, source_sha256="", source_text="", where=where)
    check_engine_models(spec)
    # rows numbered from 1, as a Parquet file's are, so a message's "row 3" is the third value
    frame = pd.DataFrame({x_name: x_values, y_name: y_values}, index=np.arange(1, x_values.size + 1))
    table = Table(path=where, sha256="", frame=frame, encoding="", sheet="")
    prepared = runner.Prepared(spec=spec, table=table, pairs=load_pairs(spec, table))
    fitter = Fitter(spec.document.sampler, max_divergences=spec.document.diagnostics.max_divergences)
    with handling_signals():
        results, _ = runner.fit_all(prepared, fitter, RunClock())
    return _summary(results.pairs[0], spec)


def _summary(pair: PairResult, spec: Spec) -> PairSummary:
    rho = pair.rho
    return PairSummary(
        n=pair.n, n_dropped=pair.n_dropped, sample_r=pair.reference.r, engine=pair.engine, model=pair.model,
        mean=rho.mean, median=rho.median, sd=rho.sd, interval=(rho.lower, rho.upper),
        interval_kind=spec.document.summary.interval, mass=spec.document.summary.credible_mass,
        p_positive=pair.p_positive,
        rules=tuple(RuleProbability(name=r.name, probability=r.probability, mcse=r.mcse, required=r.required,
                                    verdict=r.verdict) for r in pair.rules),
        status=pair.status, status_reasons=pair.diagnosis.reasons, result=pair,
    )
