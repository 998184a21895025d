"""Orchestration of the run-to-run commands: ``compare`` (what changed between two runs) and ``history``
(rho across runs). Each reads finished run folders, builds its plain result with ``runs``, lays it out
with ``report`` and publishes one output folder in one step, as ``run`` does."""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from reportgen import report
from reportgen.report import changes as change_pages
from reportgen.runner import changes_csv, table_csv
from reportgen.runs.compare import Comparison, compare_runs
from reportgen.runs.history import History, build_history, find_runs, history_rows
from reportgen.runs.publish import publishing, resolve_out
from reportgen.runs.snapshot import RunSnapshot, load_run

DEFAULT_MARGIN = 0.1


@dataclass(frozen=True)
class ComparisonOutcome:
    out_dir: Path
    comparison: Comparison


@dataclass(frozen=True)
class HistoryOutcome:
    out_dir: Path
    history: History


def report_meta(snapshot: RunSnapshot, title: str) -> dict[str, Any]:
    """The title block of a change or history report: the latest run's client, author and wording."""
    recorded = snapshot.reproducible["resolved_spec"]["report"]
    date = snapshot.report_date
    return {
        "title": title,
        "subtitle": recorded.get("title", ""),
        "client": recorded.get("client", ""),
        "author": recorded.get("author", ""),
        "date": date.isoformat(),
        "date_long": f"{date.day} {date.strftime('%B %Y')}",
        "confidentiality": recorded.get("confidentiality", ""),
        "logo": "",
    }


def comparison_margin(snapshot: RunSnapshot) -> float:
    recorded = snapshot.reproducible["resolved_spec"].get("compare") or {}
    return float(recorded.get("margin", DEFAULT_MARGIN))


def new_data_file(snapshot: RunSnapshot) -> Path | None:
    """The newer run's data file, when it is still where the run read it and unchanged (then the compare
    can tell whether the older rows are a prefix of it)."""
    recorded = snapshot.record.get("run", {}).get("data_path")
    return Path(recorded) if recorded and Path(recorded).is_file() else None


def publish_document(stem: str, context: dict[str, Any], date: dt.date, csv_text: str, out: Path) -> Path:
    """Render ``<stem>.html.j2`` as HTML and PDF and publish both with ``<stem>.csv`` into ``out`` in one step."""
    html = report.render_document(f"{stem}.html.j2", context)
    pdf, _ = report.render_pdf(html, date.isoformat())
    out_dir = resolve_out(out, date)
    with publishing(out_dir, frozenset({f"{stem}.html", f"{stem}.pdf", f"{stem}.csv"})) as publication:
        (publication.staging / f"{stem}.html").write_text(html, encoding="utf-8")
        (publication.staging / f"{stem}.pdf").write_bytes(pdf)
        (publication.staging / f"{stem}.csv").write_text(csv_text, encoding="utf-8")
        publication.commit()
    return out_dir


def compare(old_dir: Path, new_dir: Path, out: Path) -> ComparisonOutcome:
    old = load_run(old_dir)
    new = load_run(new_dir)
    comparison = compare_runs(old, new, comparison_margin(new), new_data_file(new))
    meta = report_meta(new, f"Changes from {old.label} to {new.label}")
    out_dir = publish_document("changes", change_pages.changes_context(comparison, meta), new.report_date,
                               changes_csv(comparison), out)
    return ComparisonOutcome(out_dir=out_dir, comparison=comparison)


def history(paths: Sequence[Path], out: Path) -> HistoryOutcome:
    snapshots = [load_run(folder) for folder in find_runs(paths)]
    built = build_history(snapshots)
    latest = max(snapshots, key=lambda s: s.report_date)
    meta = report_meta(latest, f"History of {len(snapshots)} runs, {built.labels[0]} to {built.labels[-1]}")
    out_dir = publish_document("history", change_pages.history_context(built, meta), latest.report_date,
                               table_csv(*history_rows(built)), out)
    return HistoryOutcome(out_dir=out_dir, history=built)
