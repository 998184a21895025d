"""Command line: ``reportgen init | check | run | verify | compare | history | demo``.

Exit codes: 0 every pair passed its checks; 1 the report was written but at
least one pair failed its convergence checks; 2 the spec, data or output
folder was refused (one line on stderr says why); 3 an internal error (a bug;
one line names the file holding the traceback); 130 interrupted by Ctrl-C,
143 by SIGTERM (nothing changed, unless the line says the outputs were published).
"""

from __future__ import annotations

import datetime as dt
import logging
import os
import signal
import sys
import tempfile
import traceback
import warnings
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from functools import wraps
from pathlib import Path
from typing import Any, TypeVar

import click

from reportgen import __version__
from reportgen.errors import ReportgenError, SpecError, one_line
from reportgen.runs.publish import resolve_out
from reportgen.runs.signals import Interrupted, handling_signals

F = TypeVar("F", bound=Callable[..., Any])
DEMO_DIR = Path(__file__).resolve().parent / "demo"
DEMO_SPEC = DEMO_DIR / "quillmere_spec.toml"
# the demo's monthly reruns, oldest first: each spec differs from the next in its date and data file only
DEMO_MONTHS = ((DEMO_DIR / "quillmere_spec_2026-09.toml", "2026-09"),
               (DEMO_DIR / "quillmere_spec_2026-10.toml", "2026-10"),
               (DEMO_SPEC, "2026-11"))
OUT_KEY = "reportgen.out"  # the command's output folder, in click's context: the traceback file goes beside it


def _quiet_libraries() -> None:
    """Library chatter (refactor notices, BLAS probes) is not for report users."""
    warnings.filterwarnings("ignore", category=FutureWarning, module="arviz")
    warnings.filterwarnings("ignore", message=".*could not link to a BLAS.*")
    warnings.filterwarnings("ignore", category=UserWarning, module="pytensor")
    logging.getLogger("weasyprint").setLevel(logging.ERROR)
    logging.getLogger("fontTools").setLevel(logging.ERROR)
    os.environ.setdefault("PYTENSOR_FLAGS", "blas__ldflags=")


def user_errors(func: F) -> F:
    """Our errors become one line and exit 2; Ctrl-C exits 130 and SIGTERM 143, saying whether new
    outputs were published; any other exception is a bug: one line, exit 3, the traceback in a file."""

    @wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        context = click.get_current_context()
        debug = context.find_root().params.get("debug", False)
        with handling_signals() as signals:
            try:
                return func(*args, **kwargs)
            except ReportgenError as exc:
                if debug:
                    raise
                click.echo(f"reportgen: error: {exc}", err=True)
                sys.exit(exc.exit_code)
            except KeyboardInterrupt as exc:
                signum = exc.signum if isinstance(exc, Interrupted) else signal.SIGINT
                done = (f"after the new outputs were published to {', '.join(map(str, signals.published))}"
                        if signals.published else "no output was changed")
                how = "SIGTERM" if signum == signal.SIGTERM else "Ctrl-C"
                click.echo(f"reportgen: interrupted ({how}); {done}", err=True)
                sys.exit(128 + signum)
            except (click.exceptions.ClickException, click.exceptions.Abort, click.exceptions.Exit):
                raise  # click's own, handled by click (Abort and Exit are RuntimeErrors)
            except Exception as exc:
                if debug:
                    raise
                where = _write_traceback(context.meta.get(OUT_KEY))
                click.echo(f"reportgen: internal error ({one_line(type(exc).__name__ + ': ' + str(exc))[:200]}); "
                           f"this is a bug; the traceback is in {where}", err=True)
                sys.exit(3)

    return wrapper  # type: ignore[return-value]


def _write_traceback(out: Path | None) -> str:
    """The current exception's traceback in a new file. Beside the output folder when the command has
    one: that is where whoever schedules the run looks, and it outlives a reboot or a private temporary
    folder (a service manager's); the output folder itself is never touched. Else the temporary folder."""
    stamp = dt.datetime.now().strftime("%Y%m%d-%H%M%S")
    name = f"reportgen-error-{stamp}-{os.getpid()}.log"
    text = traceback.format_exc()
    places = ([out.resolve().parent] if out is not None else []) + [Path(tempfile.gettempdir())]
    for place in places:
        try:
            with open(place / name, "x", encoding="utf-8") as handle:
                handle.write(f"reportgen {__version__}, command: {' '.join(sys.argv)}\n{text}")
            return str(place / name)
        except OSError:
            continue
    return "nowhere (no writable folder; run again with --debug to see it)"


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="reportgen")
@click.option("--debug", is_flag=True, help="Show full tracebacks for errors.")
def main(debug: bool) -> None:
    """Bayesian correlation reports (HTML and PDF) from a spec and a data table."""
    _quiet_libraries()


def _stdout_to_devnull() -> None:
    """Point stdout at the null device, so that Python's flush at exit cannot fail again (exit 120)."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        os.close(devnull)
    except (OSError, ValueError):  # no file descriptor behind stdout (a test runner's capture)
        pass


@contextmanager
def _stdout_may_fail() -> Iterator[None]:
    """Printing the summary comes after the work is done: a stdout that is closed (``| head``) or full
    (``> /dev/full``) must change neither the outcome nor the exit code, and print no traceback."""
    try:
        yield
        sys.stdout.flush()
    except OSError:  # BrokenPipeError, or ENOSPC
        _stdout_to_devnull()
        try:
            click.echo("reportgen: stdout is closed or full, so the summary was not printed", err=True)
        except OSError:
            pass


def _progress_printer() -> Callable[[str, int, int], None] | None:
    if not sys.stderr.isatty():
        return None
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    bar = Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(),
                   TimeElapsedColumn(), transient=True)
    task = bar.add_task("fitting", total=None)

    def update(key: str, done: int, total: int) -> None:
        if not bar.live.is_started:
            bar.start()
        if key == "done":
            bar.update(task, completed=total, total=total)
            bar.stop()
            return
        if key == "rendering the report":
            bar.update(task, completed=total, total=total, description=key)
            return
        label = "compiling the model, then fitting" if done == 0 else f"fitting {key}"
        bar.update(task, completed=done, total=total, description=label[:60])

    return update


def _load(spec_path: Path, engine: str | None = None, model: str | None = None, quick: bool = False,
          **overrides: int | None) -> Any:
    from reportgen.spec import load_spec, with_engine, with_model, with_quick, with_sampler_overrides

    spec = with_sampler_overrides(load_spec(spec_path), **overrides)
    if quick:
        spec = with_quick(spec, given=[key for key, value in overrides.items() if value is not None])
    return with_model(with_engine(spec, engine), model)


def _say_settings(spec: Any) -> None:
    """A quick draft's settings, said before the first fit (every check of the input has passed by then)."""
    with _stdout_may_fail():
        if ("quick", "true") in spec.overrides and spec.document.engine == "exact":
            click.echo("quick draft: the exact engine draws nothing, so only the marking changes; the report "
                       "is marked DRAFT on every page")
        elif ("quick", "true") in spec.overrides:
            sampler, thresholds = spec.document.sampler, spec.document.diagnostics
            click.echo(f"quick draft: {sampler.draws} draws in each of {sampler.chains} chains, judged against "
                       f"ESS at least {thresholds.ess_min:g} and R-hat below {thresholds.rhat_max:g}; the report "
                       "is marked DRAFT on every page")


def _say_replaced_priors(spec: Any) -> None:
    """The spec's priors on the means and SDs that the exact engine replaced by Jeffreys'. Said with the
    outcome, so that a run refused before it finishes prints nothing but its error."""
    from reportgen.spec.loading import replaced_priors

    with _stdout_may_fail():
        replaced = [f"{family} prior on the {what}" for family, what in
                    (name.rsplit(" ", 1) for name in replaced_priors(spec))]
        if replaced:
            listed = ", ".join(replaced[:-1]) + " and " + replaced[-1] if len(replaced) > 1 else replaced[0]
            click.echo(f"exact engine: the spec's {listed} are replaced by Jeffreys' priors (flat means, "
                       "1/sigma SDs); the prior on rho is kept")


# A run whose draws in all number below this many times ESS's threshold cannot be expected to reach it
# (a well-mixed chain gives an ESS near its number of draws); the same margin as diagnostics.diagnose's hint.
SHORT_RUN_FACTOR = 1.5


def _short_run_hint(spec: Any, failed: Any) -> str:
    """Advice for a run whose pairs failed only because so few draws cannot reach the ESS threshold
    (R-hat may fail beside it: chains that short also mix poorly); empty for any other failure."""
    from reportgen.diagnostics import ESS_BULK, ESS_TAIL, RHAT

    sampler, ess_min = spec.document.sampler, spec.document.diagnostics.ess_min
    if not failed or sampler.draws * sampler.chains >= SHORT_RUN_FACTOR * ess_min:
        return ""
    for pair in failed:
        broken = set(pair.diagnosis.broken)
        if not broken & {ESS_BULK, ESS_TAIL} or not broken <= {ESS_BULK, ESS_TAIL, RHAT}:
            return ""
    return (f"; {sampler.chains} chains of {sampler.draws} draws cannot reach ESS {ess_min:g}: run more draws "
            "(--draws), or --quick for a draft judged against what short chains can reach")


def _report_outcome(outcome: Any, spec: Any) -> None:
    _say_replaced_priors(spec)
    results = outcome.results
    draws = ", draws/" if any(p.engine == "mcmc" for p in results.pairs) else ""
    changes = ", changes.csv" if (outcome.out_dir / "changes.csv").is_file() else ""
    with _stdout_may_fail():
        click.echo(f"wrote {outcome.out_dir}/report.html, report.pdf, results.csv, results.parquet, "
                   f"record.json, run.log, SHA256SUMS{changes}{draws}")
        for pair in results.pairs:
            click.echo(f"  {pair.status:4}  {pair.key}: median rho {pair.rho.median:+.3f} "
                       f"[{pair.rho.lower:+.3f}, {pair.rho.upper:+.3f}], n = {pair.n}")
    if results.status == "fail":
        names = ", ".join(p.key for p in results.failed)
        hint = _short_run_hint(spec, results.failed)
        click.echo(f"reportgen: {len(results.failed)} pair(s) failed the convergence checks: {names}{hint}",
                   err=True)


def _run_one(spec_path: Path, out: Path, engine: str | None, model: str | None, previous: Path | None = None,
             fitter: Any = None, say: bool = True, executor: Any = None, **overrides: int | None) -> Any:
    from reportgen.runner import run, with_report_date

    # the date is pinned here so that {date} in --out and the report carry the same day
    spec = with_report_date(_load(spec_path, engine, model, **overrides))
    out = resolve_out(out, spec.document.report.date)
    click.get_current_context().meta[OUT_KEY] = out
    outcome = run(spec, out, command_line=sys.argv, progress=_progress_printer(), previous=previous,
                  fitter=fitter, on_start=_say_settings if say else None, executor=executor)
    _report_outcome(outcome, spec)
    return outcome


def _run(spec_path: Path, out: Path, engine: str | None, model: str | None, previous: Path | None = None,
         executor: Any = None, **overrides: int | None) -> None:
    sys.exit(_run_one(spec_path, out, engine, model, previous, executor=executor, **overrides).exit_code)


sampler_options = [
    click.option("--seed", type=int, default=None, help="Override sampler.seed (the master seed)."),
    click.option("--draws", type=int, default=None, help="Override sampler.draws (kept draws per chain)."),
    click.option("--tune", type=int, default=None, help="Override sampler.tune (tuning draws per chain)."),
    click.option("--chains", type=int, default=None, help="Override sampler.chains."),
    click.option("--engine", type=click.Choice(["mcmc", "exact"]), default=None,
                 help="Override the spec's engine: mcmc (sampler) or exact (quadrature, rho only)."),
    click.option("--quick", "quick", is_flag=True, default=False,
                 help="A quick draft: 200 draws in each of 2 chains (unless --draws or --chains say otherwise), "
                      "judged against what so few draws can reach; every page is marked DRAFT."),
    click.option("--model", type=click.Choice(["normal", "student_t", "rank", "auto"]), default=None,
                 help="Fit every pair with this model: normal, student_t (robust to outlying rows), rank "
                      "(Kendall's tau, for ordinal or tied data) or auto (normal and robust; the checks "
                      "choose which leads)."),
]


def with_sampler_options(func: F) -> F:
    for option in reversed(sampler_options):
        func = option(func)
    return func


executor_options = [
    click.option("--executor", "executor", type=click.Choice(["processes", "dask"]), default=None,
                 help="Where the pairs are fitted: processes (default: a pool of local worker processes, used "
                      "when the run has enough pairs to gain from it) or dask (the cluster at --scheduler). "
                      "The outputs are the same bytes either way."),
    click.option("--scheduler", "scheduler", metavar="ADDRESS", default=None,
                 help="The dask scheduler's address (e.g. tcp://host:8786); only with --executor dask."),
    click.option("--workers", "workers", type=int, default=None,
                 help="Local worker processes for --executor processes (default: one per CPU, and none for "
                      "a run of few pairs); 1 fits every pair, and draws the report's pages, in this process."),
]


def with_executor_options(func: F) -> F:
    for option in reversed(executor_options):
        func = option(func)
    return func


def _executor(executor: str | None, scheduler: str | None, workers: int | None) -> Any:
    """The executor options, checked before anything is read (a wrong combination exits 2, one line)."""
    from reportgen.execution.executors import executor_choice

    return executor_choice(executor, scheduler, workers)


@main.command("run")
@click.argument("spec_path", metavar="SPEC", type=click.Path(path_type=Path))
@click.option("-o", "--out", "out", type=click.Path(path_type=Path), required=True,
              help="Output folder; {date} and {period} are filled from the report date (runs/{period}).")
@click.option("--previous", "previous", type=click.Path(path_type=Path), default=None,
              help="An earlier run's output folder: the report gains a section on what changed since it.")
@with_sampler_options
@with_executor_options
@user_errors
def run_command(spec_path: Path, out: Path, engine: str | None, model: str | None, previous: Path | None,
                executor: str | None, scheduler: str | None, workers: int | None, **overrides: int | None) -> None:
    """Fit every pair of SPEC and write the report, results and record to --out."""
    chosen = _executor(executor, scheduler, workers)
    _run(spec_path, out, engine, model, previous, executor=chosen, **overrides)


@main.command("check")
@click.argument("spec_path", metavar="SPEC", type=click.Path(path_type=Path))
@user_errors
def check_command(spec_path: Path) -> None:
    """Validate SPEC and its data without fitting anything."""
    from reportgen.runner import prepare

    prepared = prepare(_load(spec_path))
    encoding = f", read as {prepared.table.encoding}" if prepared.table.encoding else ""
    with _stdout_may_fail():
        click.echo(f"{spec_path}: spec and data are valid; {len(prepared.pairs)} pair(s) "
                   f"from {prepared.table.n_rows:,} rows of {prepared.table.path.name}{encoding}")
        for pair in prepared.pairs:
            dropped = f", {pair.n_dropped} dropped for missing values" if pair.n_dropped else ""
            click.echo(f"  {pair.pair.key}: n = {pair.stats.n}{dropped}")


@main.command("demo")
@click.option("-o", "--out", "out", type=click.Path(path_type=Path), default=Path("demo_output"),
              show_default=True, help="Output folder; {date} and {period} are filled from the report date.")
@with_sampler_options
@with_executor_options
@user_errors
def demo_command(out: Path, engine: str | None, model: str | None, executor: str | None, scheduler: str | None,
                 workers: int | None, **overrides: int | None) -> None:
    """Run the bundled demo (an invented river-monitoring survey) as three monthly reruns, each compared
    with the month before, then a change report of the last two months and a history of all three."""
    chosen = _executor(executor, scheduler, workers)
    from reportgen.fit import Fitter
    from reportgen.runner import with_report_date
    from reportgen.tracking import compare, history

    latest = with_report_date(_load(DEMO_SPEC, engine, model, **overrides))
    out = resolve_out(out, latest.document.report.date)  # one parent folder, named by the latest month
    folders: list[Path] = []
    fitter = Fitter(latest.document.sampler)  # compiled once for the three runs
    worst = 0
    for spec_path, period in DEMO_MONTHS:
        folder = out / period
        # said once, at the first month's start: the three months share their settings
        outcome = _run_one(spec_path, folder, engine, model, folders[-1] if folders else None, fitter,
                           say=not folders, executor=chosen, **overrides)
        folders.append(folder)
        worst = max(worst, outcome.exit_code)
    changed = compare(folders[-2], folders[-1], out / "changes")
    followed = history(folders, out / "history")
    with _stdout_may_fail():
        click.echo(f"wrote {changed.out_dir}/changes.html, changes.pdf, changes.csv "
                   f"({len(changed.comparison.flipped)} pair(s) with a flipped verdict)")
        click.echo(f"wrote {followed.out_dir}/history.html, history.pdf, history.csv")
    sys.exit(worst)


@main.command("verify")
@click.argument("run_dir", metavar="RUN_DIR", type=click.Path(path_type=Path))
@click.option("--data", "data", type=click.Path(path_type=Path), default=None,
              help="The data file, when it is no longer where the run read it.")
@click.option("--out", "out", type=click.Path(path_type=Path), default=None,
              help="Keep the rerun in this folder, with verification.json.")
@with_executor_options
@user_errors
def verify_command(run_dir: Path, data: Path | None, out: Path | None, executor: str | None, scheduler: str | None,
                   workers: int | None) -> None:
    """Re-run a past run from its record and say whether it reproduces (exit 0) or not (exit 1)."""
    chosen = _executor(executor, scheduler, workers)
    from reportgen.audit import verify_run
    from reportgen.runs.verify import summary_lines

    if out is not None:
        click.get_current_context().meta[OUT_KEY] = out
    verification = verify_run(run_dir, data, out, command_line=sys.argv, executor=chosen)
    with _stdout_may_fail():
        for line in summary_lines(verification):
            click.echo(line)
    sys.exit(verification.exit_code)


@main.command("compare")
@click.argument("old_dir", metavar="OLD_DIR", type=click.Path(path_type=Path))
@click.argument("new_dir", metavar="NEW_DIR", type=click.Path(path_type=Path))
@click.option("--out", "out", type=click.Path(path_type=Path), required=True,
              help="Folder for changes.html, changes.pdf and changes.csv.")
@user_errors
def compare_command(old_dir: Path, new_dir: Path, out: Path) -> None:
    """Say what changed between two runs' output folders: data, spec, versions, rho and verdicts."""
    from reportgen.runs.compare import summary_lines
    from reportgen.tracking import compare

    click.get_current_context().meta[OUT_KEY] = out
    outcome = compare(old_dir, new_dir, out)
    with _stdout_may_fail():
        click.echo(f"wrote {outcome.out_dir}/changes.html, changes.pdf, changes.csv")
        for line in summary_lines(outcome.comparison):
            click.echo(f"  {line}")


@main.command("history")
@click.argument("run_dirs", metavar="RUN_DIR...", nargs=-1, required=True, type=click.Path(path_type=Path))
@click.option("--out", "out", type=click.Path(path_type=Path), required=True,
              help="Folder for history.html, history.pdf and history.csv.")
@user_errors
def history_command(run_dirs: tuple[Path, ...], out: Path) -> None:
    """Follow rho across runs: give run folders, or one folder whose subfolders are runs."""
    from reportgen.tracking import history

    click.get_current_context().meta[OUT_KEY] = out
    outcome = history(list(run_dirs), out)
    with _stdout_may_fail():
        click.echo(f"wrote {outcome.out_dir}/history.html, history.pdf, history.csv "
                   f"({len(outcome.history.labels)} runs, {len(outcome.history.pairs)} pairs)")
        for pair in outcome.history.pairs:
            if pair.drift:
                click.echo(f"  drift: {pair.key}: {pair.sentence}")


@main.command("init")
@click.argument("data_path", metavar="DATA", type=click.Path(path_type=Path))
@click.option("--pair", "pairs", nargs=2, multiple=True, required=True, metavar="X Y",
              help="A pair of columns to analyse; repeat for more pairs.")
@click.option("-o", "--output", "output", type=click.Path(path_type=Path), required=True,
              help="Where to write the spec.")
@click.option("--title", default="Correlation report", show_default=True,
              help="The report title written into the spec.")
@click.option("--force", is_flag=True, help="Overwrite an existing spec file.")
@user_errors
def init_command(data_path: Path, pairs: tuple[tuple[str, str], ...], output: Path, title: str,
                 force: bool) -> None:
    """Write a commented starter spec for DATA with the given pairs."""
    from reportgen.runner import prepare
    from reportgen.starter import check_title, name_the_options, relative_data_path, starter_as_spec, starter_spec

    if output.is_dir():
        raise SpecError(f"{output}: is a folder; give -o the path of the spec file to write, "
                        f"e.g. {output / 'spec.toml'}")
    if output.exists() and not force:
        raise SpecError(f"{output}: already exists; choose another -o path or add --force")
    if not data_path.is_file():
        raise SpecError(f"{data_path}: data file not found; give the path to a CSV, Excel or Parquet file")
    check_title(title)
    chosen = [(x, y) for x, y in pairs]
    text = starter_spec(relative_data_path(data_path, output), chosen, title)
    try:
        prepare(starter_as_spec(text, output))  # checked in memory: a refused spec leaves no file behind
    except ReportgenError as exc:
        raise type(exc)(name_the_options(str(exc), chosen, output)) from None
    _write_atomically(output, text)
    with _stdout_may_fail():
        click.echo(f"wrote {output}; edit it, then run: reportgen run {output} --out REPORT_FOLDER")


def _write_atomically(output: Path, text: str) -> None:
    """Write ``text`` to ``output`` through a hidden temporary file beside it, removed if anything fails."""
    temporary = output.with_name(f".{output.name}.{os.getpid()}.tmp")
    try:
        output.parent.mkdir(parents=True, exist_ok=True)
        temporary.write_text(text, encoding="utf-8")
        os.replace(temporary, output)
    except OSError as exc:
        temporary.unlink(missing_ok=True)
        raise SpecError(f"{output}: the spec cannot be written there ({exc.strerror or type(exc).__name__}); "
                        "choose another -o path or check the folder's permissions") from None


if __name__ == "__main__":  # pragma: no cover
    main()
