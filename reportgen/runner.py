"""Orchestration: spec -> data -> fits -> results -> record -> report -> files.

Everything the run can refuse (spec, data, assets, output folder) is checked
before the first fit. The output folder is locked before the first fit, every
output (run.log and SHA256SUMS included) is written into a staging folder, and
the whole folder is replaced in one step at the end (``runs.publish``), so a
failed, interrupted or killed run leaves the previous outputs as they were.
"""

from __future__ import annotations

import contextlib
import csv
import datetime as dt
import hashlib
import io
import json
import logging
import math
import os
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from reportgen import report
from reportgen.data import PairData, Table, load_pairs, load_table
from reportgen.errors import OutputError
from reportgen.execution.executors import ExecutorChoice, Plan, drawing_processes, pair_works, plan_for
from reportgen.execution.work import LogEvent
from reportgen.fit import Fitter, PairFit
from reportgen.results import RunResults, results_rows, run_results
from reportgen.runs import publish, signals
from reportgen.runs.compare import Comparison, changes_rows, compare_runs
from reportgen.runs.record import RunClock, build_record, draws_file
from reportgen.runs.snapshot import RunSnapshot, load_run
from reportgen.spec import Spec, check_engine_models

LOGGER = logging.getLogger(__name__)
OUTPUT_FILES = ("report.html", "report.pdf", "results.csv", "results.parquet", "record.json", publish.RUN_LOG,
                publish.SUMS)
PREVIOUS_OUTPUTS = ("changes.csv",)  # written only by a run with --previous
DRAWS_FOLDER = "draws"

ProgressCallback = Callable[[str, int, int], None]


@dataclass(frozen=True)
class Prepared:
    spec: Spec
    table: Table
    pairs: tuple[PairData, ...]


@dataclass(frozen=True)
class RunOutcome:
    out_dir: Path
    results: RunResults
    refused_urls: tuple[str, ...]

    @property
    def exit_code(self) -> int:
        return 1 if self.results.status == "fail" else 0


class RunLog:
    """run.log: one JSON object a line (time, level, pair, event, and the event's own keys), written as
    the run goes, so a run that stops early still says how far it got while it is being staged."""

    def __init__(self, path: Path | None) -> None:
        self.path = path

    def event(self, event: str, *, pair: str | None = None, level: str = "info", **details: object) -> None:
        self.write(LogEvent(event, pair, level, details))

    def write(self, event: LogEvent) -> None:
        """One event, with the time it happened (a worker's events are written when its pair comes back)."""
        if self.path is None:
            return
        line = {"time": event.time, "level": event.level, "pair": event.pair, "event": event.event,
                **event.details}
        with self.path.open("a", encoding="utf-8") as handle:
            handle.write(json.dumps(line, ensure_ascii=False, default=str) + "\n")


def with_report_date(spec: Spec, today: dt.date | None = None) -> Spec:
    """The spec with its report date filled in (today when the spec leaves it out), so the resolved spec in
    the record names the date the report carries and a rerun of the record prints the same date."""
    meta = spec.document.report
    if meta.date is not None:
        return spec
    report_meta = meta.model_copy(update={"date": today or dt.date.today()})
    return spec.model_copy(update={"document": spec.document.model_copy(update={"report": report_meta})})


def prepare(spec: Spec) -> Prepared:
    """Validate the data against the spec; raises our own errors, fits nothing."""
    spec = with_report_date(spec)
    check_engine_models(spec)
    table = load_table(spec)
    pairs = load_pairs(spec, table)
    report.logo_data_uri(spec)  # a bad logo is refused now, not after the fits
    if spec.document.report.templates:
        # parsed now, so a broken or hostile template is refused before the first fit
        report.render.check_templates(spec.resolve_input(spec.document.report.templates, "report.templates"))
    return Prepared(spec=spec, table=table, pairs=pairs)


def _resolved(path: Path) -> Path:
    try:
        return path.resolve()
    except (OSError, RuntimeError):  # a link loop: prepare() refuses those; compare the path as written
        return Path(os.path.abspath(path))


def input_locations(spec: Spec) -> dict[Path, str]:
    """Every input (spec, data, logo, template folder) by spec key, both as named and as resolved: deleting
    a link in the output folder that points elsewhere would break the next run, so the link counts too."""
    named = {"data.path": spec.document.data.path, "report.logo": spec.document.report.logo,
             "report.templates": spec.document.report.templates}
    locations = {spec.source_path: "the spec file"}
    for key, relative in named.items():
        if relative:
            written = Path(os.path.abspath(spec.base_dir / relative))
            locations |= {_resolved(written.parent) / written.name: key, _resolved(written): key}
    return locations


def check_output_folder(out_dir: Path, prepared: Prepared) -> None:
    """Refuse, before any fit, an output folder the run would damage (an input in it) or cannot write."""
    publish.refuse_dangling_links(out_dir)  # before any probe, so nothing is created where it points
    inputs = input_locations(prepared.spec)
    if out_dir.exists() and not out_dir.is_dir():
        raise OutputError(f"{out_dir}: --out must be a folder, and this is a file")
    folder = _resolved(out_dir)
    for name in OUTPUT_FILES:
        target = folder / name
        key = inputs.get(target) or inputs.get(_resolved(target))
        if key:
            raise OutputError(f"{out_dir}: writing {name} there would overwrite an input file ({key}); "
                              "choose another --out folder")
        if target.is_dir():
            raise OutputError(f"{out_dir / name}: is a folder, so the report's {name} cannot be written there; "
                              "move it or choose another --out folder")
    draws = folder / DRAWS_FOLDER
    if draws.exists() and not draws.is_dir():
        raise OutputError(f"{out_dir / DRAWS_FOLDER}: is a file, but reportgen writes a {DRAWS_FOLDER}/ folder "
                          "there; move it or choose another --out folder")
    for path, key in inputs.items():
        if path == draws or draws in path.parents:  # the run deletes the previous draws/ folder whole
            raise OutputError(f"{out_dir}: the {DRAWS_FOLDER}/ folder that the run replaces holds an input "
                              f"({key}: {path}); move that input out of it or choose another --out folder")
    check_writable(out_dir)


def check_writable(out_dir: Path) -> None:
    """Create and remove a probe file wherever the run will write, so a read-only place is refused now:
    beside ``out_dir`` (staging and the lock; the nearest existing folder up) unless it is a mount point,
    which is staged inside, in it, and in a real draws/."""
    folder = _resolved(out_dir)
    places = []
    if not (folder.is_dir() and publish.is_mount_point(folder)):
        places.append(next((p for p in folder.parents if p.is_dir()), Path(folder.anchor)))
    if folder.is_dir():
        places.append(folder)
        draws = folder / DRAWS_FOLDER
        if draws.is_dir() and not draws.is_symlink():
            places.append(draws)
    for place in places:
        try:
            handle, probe = tempfile.mkstemp(prefix=".reportgen-probe-", dir=place)
            os.close(handle)
            os.unlink(probe)
        except OSError as exc:
            raise OutputError(f"{place}: cannot write there ({exc.strerror or type(exc).__name__}), so the "
                              f"outputs of --out {out_dir} could not be saved; choose another --out folder or "
                              "fix its permissions") from None


def fit_all(
    prepared: Prepared,
    fitter: Fitter,
    clock: RunClock,
    progress: ProgressCallback | None = None,
    log: RunLog | None = None,
    executor: ExecutorChoice | Plan | None = None,
) -> tuple[RunResults, dict[str, tuple[PairFit, ...]]]:
    """Fit every pair with the models it needs; the second value holds each pair's fits by pair key.

    ``executor`` says where (default None: in this process; see ``execution.executors``). The results,
    the run.log events and the progress come in pair order whatever the executor. Ctrl-C or SIGTERM
    during a fit in this process is not seen as an exception (the sampler catches it and returns
    NaN-padded draws), so the recorded signal is checked after each fit and after each pair; the worker
    processes are stopped before the interrupt goes on.
    """
    log = log or RunLog(None)
    spec = prepared.spec
    plan = executor if isinstance(executor, Plan) else plan_run(executor, prepared, fitter)
    if plan.why:
        log.event("executor", why=plan.why, **plan.describe())
    fits: dict[str, tuple[PairFit, ...]] = {}
    results = []
    total = len(prepared.pairs)

    def write(event: LogEvent) -> None:
        if event.event == "fit" and event.details.get("status") == "failed":
            LOGGER.warning("sampler (%s model) failed for %s: %s", event.details.get("model"), event.pair,
                           event.details.get("reason"))
        log.write(event)

    works = pair_works(plan, spec, prepared.pairs, fitter, emit=write, check_interrupt=signals.raise_if_interrupted)
    with contextlib.closing(works):  # an interrupt or an error stops the workers
        for index, pair in enumerate(prepared.pairs):
            if progress:
                progress(pair.pair.key, index, total)
            work = next(works)
            signals.raise_if_interrupted()
            if plan.name != "serial":  # a worker's events, written now, in pair order
                for event in work.events:
                    write(event)
            if work.fits:
                fits[work.key] = work.fits
            results.append(work.result)
            clock.pair_seconds[work.key] = work.seconds
            for structure, seconds in work.compile_seconds.items():
                clock.compile_seconds[structure] = max(seconds, clock.compile_seconds.get(structure, 0.0))
            log.event("pair done", pair=work.key, status=work.result.status, engine=work.result.engine,
                      model=work.result.model, seconds=round(work.seconds, 3))
    return run_results(spec, tuple(results)), fits


def plan_run(executor: ExecutorChoice | None, prepared: Prepared, fitter: Fitter) -> Plan:
    """Where this run's pairs are worked on (see ``execution.executors.plan_for``)."""
    document = prepared.spec.document
    return plan_for(executor, len(prepared.pairs), document.engine, document.sampler.chains, fitter.cores)


# A cell starting with one of these is read by spreadsheet programs as a formula (tab and carriage
# return can hide one); the usual remedy (common practice, OWASP "CSV Injection") is a leading apostrophe.
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
# Columns of results.csv that hold text; every other column holds numbers that reportgen formatted.
TEXT_COLUMNS = frozenset({"pair", "x", "y", "status", "rope_decision", "interval_kind", "status_reasons", "engine",
                          "model", "influential_rows", "prior_sensitive", "model_warnings", "borderline_rules",
                          "group", "groups_model", "simpson_warning", "controls"})


def neutralised(text: str) -> str:
    """``text`` safe to open in a spreadsheet: a leading apostrophe if it could start a formula."""
    return "'" + text if text.startswith(FORMULA_STARTS) else text


def _is_our_number(text: str) -> bool:
    try:
        return math.isfinite(float(text)) and text == text.strip()
    except ValueError:
        return False


def spreadsheet_cell(column: str, value: object) -> object:
    """One results.csv cell: text neutralised, our numbers left as numbers (``-0.5`` stays ``-0.5``).
    A text column is text whatever it looks like (a column named ``-2``); a numeric column's cell that is
    not a finite number is neutralised too, so a text column added later cannot slip through."""
    if not isinstance(value, str) or (column not in TEXT_COLUMNS and _is_our_number(value)):
        return value
    return neutralised(value)


def results_csv(results: RunResults) -> str:
    header, rows = results_rows(results)
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow([neutralised(name) for name in header])
    writer.writerows([spreadsheet_cell(column, cell) for column, cell in zip(header, row, strict=True)]
                     for row in rows)
    return buffer.getvalue()


def results_frame(results: RunResults) -> pd.DataFrame:
    """results.csv's rows as a DataFrame: the same columns; numbers as floats (NaN where the file has an
    empty cell), text as written, without the apostrophe that keeps a spreadsheet from reading formulas."""
    header, rows = results_rows(results)
    frame = pd.DataFrame(rows, columns=header, dtype=object)
    for column in header:
        cells = frame[column]
        if column not in TEXT_COLUMNS:
            try:
                frame[column] = pd.to_numeric(cells.replace("", np.nan)).astype(float)
                continue
            except (TypeError, ValueError):  # a text column this list does not know yet stays text
                pass
        frame[column] = cells.astype(str)
    return frame


def results_parquet(results: RunResults) -> bytes:
    """results.csv's rows as Parquet: the same columns and rows, numbers as float64, text as written.

    Written with fixed settings (Parquet stores no write time), so the same results give the same bytes, as
    the record's hash of it expects.
    """
    import pyarrow as pa
    import pyarrow.parquet as pq

    buffer = io.BytesIO()
    pq.write_table(pa.Table.from_pandas(results_frame(results), preserve_index=False), buffer,
                   compression="zstd")
    return buffer.getvalue()


def table_csv(header: list[str], rows: list[list[object]]) -> str:
    """A table of our own as CSV, safe in a spreadsheet: every text cell that could start a formula gets
    a leading apostrophe; numbers are written by us and left as they are."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow([neutralised(name) for name in header])
    writer.writerows([neutralised(cell) if isinstance(cell, str) else cell for cell in row] for row in rows)
    return buffer.getvalue()


def changes_csv(comparison: Comparison) -> str:
    header, rows = changes_rows(comparison)
    return table_csv(header, rows)


def run(
    spec: Spec,
    out_dir: Path,
    *,
    command_line: list[str] | None = None,
    progress: ProgressCallback | None = None,
    fitter: Fitter | None = None,
    previous: Path | None = None,
    on_start: Callable[[Spec], None] | None = None,
    executor: ExecutorChoice | None = None,
) -> RunOutcome:
    """Fit, render and publish into ``out_dir`` (``{date}`` and ``{period}`` filled from the report date).
    The folder is locked from before the first fit until its new contents are published. With
    ``previous`` (an earlier run's output folder), the report gains a section on what changed since it.
    ``on_start`` is called with the checked spec once every check has passed, before the first fit: a run
    that is refused says nothing else. ``executor`` says where the pairs are worked on (default None: in
    this process); the outputs are the same bytes whichever it is, and record.json's run part names it."""
    clock = RunClock()
    stage = time.perf_counter()
    prepared = prepare(spec)
    earlier = load_run(previous) if previous is not None else None  # a bad folder is refused before any fit
    loaded = dt.datetime.now(dt.UTC)
    spec = prepared.spec
    out_dir = publish.resolve_out(out_dir, spec.document.report.date or dt.date.today())
    check_output_folder(out_dir, prepared)
    if on_start is not None:
        on_start(spec)
    # the spec's divergence limit decides when a fit is re-run at a higher target acceptance; a fitter made
    # elsewhere (cli, audit) is rebuilt when it differs (the compiled models are shared, so this is cheap)
    max_divergences = spec.document.diagnostics.max_divergences
    fitter = fitter or Fitter(spec.document.sampler, max_divergences=max_divergences)
    if fitter.sampler != spec.document.sampler or fitter.max_divergences != max_divergences:
        fitter = Fitter(spec.document.sampler, cores=fitter.cores, max_divergences=max_divergences)
    with publish.publishing(out_dir, frozenset(OUTPUT_FILES + PREVIOUS_OUTPUTS)) as publication:
        staging = publication.staging
        log = RunLog(staging / publish.RUN_LOG)
        log.event("start", spec=str(spec.source_path), out=str(out_dir), engine=spec.document.engine,
                  seed=spec.document.sampler.seed, pid=os.getpid())
        log.event("data loaded", data=str(spec.data_path), rows=prepared.table.n_rows,
                  pairs=len(prepared.pairs), at=loaded.isoformat(timespec="milliseconds"))
        plan = plan_run(executor, prepared, fitter)
        stage = clock.lap("loading", stage)
        results, fits = fit_all(prepared, fitter, clock, progress, log, plan)
        stage = clock.lap("fitting and summarising", stage)
        # the fitter's core count, whichever executor: the draws do not depend on it, and the record's
        # reproducible part (printed in the report) must not change with where the pairs were fitted
        record = build_record(spec, prepared.table, results, fits, clock,
                              command_line if command_line is not None else sys.argv, fitter.cores)
        record["run"]["executor"] = plan.describe()
        write_draws(staging, fits)
        comparison = None
        if earlier is not None:
            record["reproducible"]["previous_run"] = previous_run_entry(earlier)
            record["run"]["previous_path"] = str(earlier.folder.resolve())
            comparison = compare_runs(earlier, RunSnapshot(folder=staging, record=record),
                                      spec.document.compare.margin, spec.data_path)
            log.event("compared", previous=str(earlier.folder), flipped=len(comparison.flipped))
        pair_data = {p.pair.key: p for p in prepared.pairs}
        if progress:
            progress("rendering the report", len(prepared.pairs), len(prepared.pairs))
        log.event("rendering", status=results.status)
        stage = clock.lap("record, draws and comparison", stage)
        context = report.build_context(spec, results, pair_data, record, comparison,
                                       processes=drawing_processes(executor))
        stage = clock.lap("figures and report sections", stage)
        user_templates = (spec.resolve_input(spec.document.report.templates, "report.templates")
                          if spec.document.report.templates else None)
        html = report.render_html(context, user_templates)
        stage = clock.lap("HTML", stage)
        pdf, refused = report.render_pdf(html, context["meta"]["date"])
        stage = clock.lap("PDF", stage)
        record["run"]["stage_seconds"] = clock.stages(fits)
        log.event("timings", **record["run"]["stage_seconds"])
        for url in refused:
            log.event("refused url", level="warning", url=url)
        try:
            write_outputs(staging, html, pdf, results, record, comparison)
        except OSError as exc:
            raise OutputError(f"{out_dir}: could not write the outputs ({exc.strerror or exc}); "
                              "check free space") from None
        log.event("outputs written", files=sorted(p.name for p in staging.iterdir()))
        publication.commit()
    if progress:
        progress("done", len(prepared.pairs), len(prepared.pairs))
    return RunOutcome(out_dir=out_dir, results=results, refused_urls=refused)


def previous_run_entry(earlier: RunSnapshot) -> dict[str, Any]:
    """What the record says of the run compared against: enough to find it and tell if it changed."""
    return {"label": earlier.label, "report_date": earlier.report_date.isoformat(),
            "record_sha256": hashlib.sha256((earlier.folder / "record.json").read_bytes()).hexdigest(),
            "data_sha256": earlier.reproducible.get("data_sha256")}


def write_draws(staging: Path, fits: dict[str, tuple[PairFit, ...]]) -> None:
    if not fits:
        return
    (staging / DRAWS_FOLDER).mkdir()
    for key, pair_fits in fits.items():
        for fit in pair_fits:
            (staging / draws_file(key, fit.model)).write_bytes(fit.netcdf)


def write_outputs(staging: Path, html: str, pdf: bytes, results: RunResults, record: dict[str, Any],
                  comparison: Comparison | None = None) -> None:
    """Write every output but the draws into ``staging``; record.json also gets the SHA-256 of the others."""
    csv_text = results_csv(results)
    files = {"report.html": html.encode("utf-8"), "report.pdf": pdf, "results.csv": csv_text.encode("utf-8"),
             "results.parquet": results_parquet(results)}
    if comparison is not None:
        files["changes.csv"] = changes_csv(comparison).encode("utf-8")
    record["reproducible"]["outputs_sha256"] = {name: hashlib.sha256(data).hexdigest() for name, data in files.items()}
    for name, data in files.items():
        (staging / name).write_bytes(data)
    (staging / "record.json").write_text(json.dumps(record, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")
