"""rho across runs: one line of points per pair, by report date, with each rule's verdicts and a drift note."""

from __future__ import annotations

import datetime as dt
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from reportgen import interpret
from reportgen.errors import OutputError
from reportgen.runs.snapshot import RECORD_FILE, RunSnapshot

# A drift note needs a range to leave: with one earlier run the "range" is a single interval, and a latest
# interval outside it is what the comparison of two runs already reports (P(moved)); from two earlier runs
# on, the range says where rho has been, and leaving it wholly is news.
MIN_EARLIER_FOR_DRIFT = 2


@dataclass(frozen=True)
class HistoryPoint:
    label: str  # the run's label (its report date)
    date: dt.date
    folder: str
    median: float
    lower: float
    upper: float
    n: int
    status: str
    verdicts: tuple[tuple[str, str], ...]  # (rule name, "met" / "not met")


@dataclass(frozen=True)
class RuleMark:
    """A rule drawn on the history figure: a threshold line (above/below) or a band (between)."""

    name: str
    statement: str  # "above", "below" or "between"
    lower: float  # the threshold for above/below; the band's ends for between
    upper: float


@dataclass(frozen=True)
class PairHistory:
    key: str
    x: str
    y: str
    points: tuple[HistoryPoint, ...]  # oldest first
    rules: tuple[RuleMark, ...]
    drift: bool  # the latest interval lies outside the range of the earlier ones
    sentence: str  # drift note, or the steadiness in words


@dataclass(frozen=True)
class History:
    labels: tuple[str, ...]  # every run, oldest first
    pairs: tuple[PairHistory, ...]
    credible_mass: float


def find_runs(paths: Iterable[Path]) -> list[Path]:
    """Run folders from the command line: each path is a run folder (it holds record.json) or a parent
    folder whose subfolders are run folders. Each folder is listed once."""
    found: dict[Path, Path] = {}
    for path in map(Path, paths):
        if (path / RECORD_FILE).is_file():
            found.setdefault(path.resolve(), path)
            continue
        if not path.is_dir():
            raise OutputError(f"{path}: {'not a folder' if path.exists() else 'folder not found'}; give run "
                              "folders or a folder that holds them")
        children = sorted(child for child in path.iterdir() if (child / RECORD_FILE).is_file())
        if not children:
            raise OutputError(f"{path}: neither a run folder (no {RECORD_FILE}) nor a folder of run folders; give "
                              "folders written by `reportgen run`")
        for child in children:
            found.setdefault(child.resolve(), child)
    return list(found.values())


def rule_marks(snapshot: RunSnapshot) -> tuple[RuleMark, ...]:
    """The rules of the run's resolved spec as lines (above/below) or bands (between)."""
    marks = []
    for rule in snapshot.resolved_spec.get("rules") or []:
        if rule.get("statement") == "between":
            marks.append(RuleMark(rule["name"], "between", float(rule["lower"]), float(rule["upper"])))
        elif rule.get("threshold") is not None:
            threshold = float(rule["threshold"])
            marks.append(RuleMark(rule["name"], rule["statement"], threshold, threshold))
    return tuple(marks)


def _point(snapshot: RunSnapshot, entry: dict[str, Any]) -> HistoryPoint:
    rho = entry["rho"]
    return HistoryPoint(label=snapshot.label, date=snapshot.report_date, folder=snapshot.folder.name,
                        median=float(rho["median"]), lower=float(rho["lower"]), upper=float(rho["upper"]),
                        n=int(entry["rows_used"]), status=str(entry["status"]),
                        verdicts=tuple((rule["name"], rule["verdict"]) for rule in entry.get("rules", [])))


def drift_note(points: Sequence[HistoryPoint], latest_label: str) -> tuple[bool, str]:
    """Whether the latest interval lies wholly outside [lowest lower end, highest upper end] of the
    earlier runs' intervals, and the sentence saying so (or saying why it cannot be told)."""
    rho = interpret.format_rho
    if not points or points[-1].label != latest_label:
        last = points[-1].label if points else "never"
        return False, f"The pair is not in the latest run ({latest_label}); it was last reported on {last}."
    *earlier, latest = points
    if len(earlier) < MIN_EARLIER_FOR_DRIFT:
        return False, (f"With {len(earlier)} earlier run{'' if len(earlier) == 1 else 's'}, there is no range yet "
                       f"to judge drift against (it takes at least {MIN_EARLIER_FOR_DRIFT}).")
    low = min(point.lower for point in earlier)
    high = max(point.upper for point in earlier)
    span = f"the range of the {len(earlier)} earlier intervals ({rho(low)} to {rho(high)})"
    shown = f"The latest interval ({rho(latest.lower)} to {rho(latest.upper)})"
    if latest.lower > high:
        return True, f"{shown} lies wholly above {span}: rho has drifted upwards."
    if latest.upper < low:
        return True, f"{shown} lies wholly below {span}: rho has drifted downwards."
    return False, f"{shown} overlaps {span}: no drift."


def build_history(snapshots: Sequence[RunSnapshot]) -> History:
    """Each pair's rho by report date across the runs, oldest first; the rule marks come from the latest
    run's spec. Two runs with one report date are refused: the history could not order them."""
    if not snapshots:
        raise OutputError("no run folders given; give at least one folder written by `reportgen run`")
    by_date: dict[dt.date, RunSnapshot] = {}
    for snapshot in snapshots:
        other = by_date.setdefault(snapshot.report_date, snapshot)
        if other is not snapshot:
            raise OutputError(f"{snapshot.folder}: has the same report date ({snapshot.label}) as {other.folder}; "
                              "leave one of them out, or rerun one with its own report.date")
    ordered = [by_date[day] for day in sorted(by_date)]
    latest = ordered[-1]
    marks = rule_marks(latest)
    keys: dict[str, tuple[str, str]] = {key: (e["x"], e["y"]) for key, e in latest.pairs.items()}
    for snapshot in reversed(ordered[:-1]):  # pairs dropped since: after the latest run's, newest first
        for key, entry in snapshot.pairs.items():
            keys.setdefault(key, (entry["x"], entry["y"]))
    pairs = []
    for key, (x, y) in keys.items():
        points = tuple(_point(s, s.pairs[key]) for s in ordered if key in s.pairs)
        drift, sentence = drift_note(points, latest.label)
        pairs.append(PairHistory(key=key, x=x, y=y, points=points, rules=marks, drift=drift, sentence=sentence))
    return History(labels=tuple(s.label for s in ordered), pairs=tuple(pairs), credible_mass=latest.credible_mass)


def history_rows(h: History) -> tuple[list[str], list[list[object]]]:
    """history.csv: one row per pair and run, with one ``verdict_<rule>`` column per rule ("" when the rule
    was not in that run)."""
    rules: dict[str, None] = {}
    for pair in h.pairs:
        for mark in pair.rules:
            rules.setdefault(mark.name)
    for pair in h.pairs:  # rules that only older runs had still get their column
        for point in pair.points:
            for name, _ in point.verdicts:
                rules.setdefault(name)
    header = ["pair", "run", "date", "median", "lower", "upper", "n", "status", *(f"verdict_{r}" for r in rules)]
    rows: list[list[object]] = []
    for pair in h.pairs:
        for point in pair.points:
            verdicts = dict(point.verdicts)
            rows.append([pair.key, point.folder, point.date.isoformat(), round(point.median, 6),
                         round(point.lower, 6), round(point.upper, 6), point.n, point.status,
                         *(verdicts.get(rule, "") for rule in rules)])
    return header, rows
