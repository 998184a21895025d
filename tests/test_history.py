"""rho across runs (reportgen.runs.history) on run records written by hand in the shape of runs/record.py."""

from __future__ import annotations

import datetime as dt
import json
from pathlib import Path
from typing import Any

import pytest

from reportgen.errors import OutputError
from reportgen.runs.history import RuleMark, build_history, find_runs, history_rows
from reportgen.runs.snapshot import RunSnapshot, load_run

RULES = [{"name": "strong", "statement": "above", "threshold": 0.5, "lower": None, "upper": None},
         {"name": "small", "statement": "between", "threshold": None, "lower": -0.1, "upper": 0.1}]


def entry(key: str, interval: tuple[float, float, float], verdicts: dict[str, str], n: int = 50,
          status: str = "pass") -> dict[str, Any]:
    x, y = key.split(" vs ")
    median, lower, upper = interval
    return {"pair": key, "x": x, "y": y, "rows_used": n,
            "sufficient_statistics": {"n": n, "mean_x": 0.0, "mean_y": 0.0, "sxx": 1.0, "syy": 1.0, "sxy": median},
            "rho": {"mean": median, "sd": 0.1, "median": median, "lower": lower, "upper": upper},
            "rules": [{"name": name, "statement": "", "probability": 0.5, "required": 0.95, "verdict": verdict}
                      for name, verdict in verdicts.items()],
            "model": "normal", "status": status, "draws_file": None, "robust_draws_file": None}


def record(date: str, pairs: list[dict[str, Any]], rules: list[dict[str, Any]] = RULES) -> dict[str, Any]:
    return {"reproducible": {"tool": "reportgen", "tool_version": "0.1.0", "report_date": date,
                             "resolved_spec": {"rules": rules, "summary": {"credible_mass": 0.9}},
                             "data_sha256": date, "data_rows": 50, "pairs": pairs}}


def snapshot(folder: str, date: str, pairs: list[dict[str, Any]], **kwargs: Any) -> RunSnapshot:
    return RunSnapshot(Path(folder), record(date, pairs, **kwargs))


MET = {"strong": "met", "small": "not met"}
NOT_MET = {"strong": "not met", "small": "not met"}


def runs(latest: tuple[float, float, float]) -> list[RunSnapshot]:
    """Three earlier runs of pair a vs b with intervals inside [0.20, 0.55], given out of date order."""
    return [snapshot("r11", "2026-11-30", [entry("a vs b", latest, MET, n=80)]),
            snapshot("r09", "2026-09-30", [entry("a vs b", (0.35, 0.20, 0.50), NOT_MET, n=60)]),
            snapshot("r08", "2026-08-31", [entry("a vs b", (0.40, 0.25, 0.55), NOT_MET, n=55)]),
            snapshot("r10", "2026-10-31", [entry("a vs b", (0.38, 0.30, 0.50), NOT_MET, n=70)])]


def test_points_are_ordered_by_report_date_with_the_latest_rules() -> None:
    history = build_history(runs((0.45, 0.30, 0.60)))
    assert history.labels == ("2026-08-31", "2026-09-30", "2026-10-31", "2026-11-30")
    assert history.credible_mass == 0.9
    (pair,) = history.pairs
    assert (pair.key, pair.x, pair.y) == ("a vs b", "a", "b")
    assert [p.folder for p in pair.points] == ["r08", "r09", "r10", "r11"]
    assert [p.n for p in pair.points] == [55, 60, 70, 80]
    assert pair.points[-1].date == dt.date(2026, 11, 30) and pair.points[-1].verdicts == tuple(MET.items())
    assert pair.rules == (RuleMark("strong", "above", 0.5, 0.5), RuleMark("small", "between", -0.1, 0.1))


@pytest.mark.parametrize(("latest", "drift", "words"), [
    ((0.70, 0.56, 0.82), True, "wholly above"),
    ((0.05, -0.10, 0.19), True, "wholly below"),
    ((0.60, 0.54, 0.70), False, "overlaps"),  # starts just below the highest upper end, 0.55
])
def test_drift_is_an_interval_wholly_outside_the_earlier_range(latest: tuple[float, float, float], drift: bool,
                                                               words: str) -> None:
    (pair,) = build_history(runs(latest)).pairs
    assert pair.drift is drift
    assert words in pair.sentence and "0.20 to 0.55" in pair.sentence


def test_one_earlier_run_is_too_few_to_judge_drift() -> None:
    latest, *_, earlier = runs((0.9, 0.85, 0.95))
    (pair,) = build_history([latest, earlier]).pairs
    assert not pair.drift and "no range yet" in pair.sentence
    (alone,) = build_history([latest]).pairs
    assert len(alone.points) == 1 and not alone.drift


def test_a_pair_dropped_from_the_latest_run_keeps_its_points() -> None:
    older = snapshot("r1", "2026-01-31", [entry("a vs b", (0.3, 0.1, 0.5), NOT_MET),
                                          entry("a vs c", (0.2, 0.0, 0.4), NOT_MET)])
    newer = snapshot("r2", "2026-02-28", [entry("a vs b", (0.3, 0.1, 0.5), NOT_MET)])
    history = build_history([newer, older])
    assert [p.key for p in history.pairs] == ["a vs b", "a vs c"]
    dropped = history.pairs[1]
    assert len(dropped.points) == 1 and not dropped.drift
    assert "not in the latest run" in dropped.sentence and "2026-01-31" in dropped.sentence


def test_two_runs_with_one_report_date_are_refused() -> None:
    first = snapshot("one", "2026-03-31", [])
    second = snapshot("two", "2026-03-31", [])
    with pytest.raises(OutputError, match="same report date") as caught:
        build_history([first, second])
    assert "one" in str(caught.value) and "two" in str(caught.value)
    with pytest.raises(OutputError, match="no run folders"):
        build_history([])


def test_history_rows_have_one_verdict_column_per_rule() -> None:
    older = snapshot("r1", "2026-01-31", [entry("a vs b", (0.3, 0.1, 0.5), {"strong": "not met", "old_rule": "met"})],
                     rules=RULES + [{"name": "old_rule", "statement": "above", "threshold": 0.0}])
    newer = snapshot("r2", "2026-02-28", [entry("a vs b", (0.31234567, 0.1, 0.5), {"strong": "met"}, status="warn")])
    header, rows = history_rows(build_history([older, newer]))
    assert header == ["pair", "run", "date", "median", "lower", "upper", "n", "status", "verdict_strong",
                      "verdict_small", "verdict_old_rule"]
    assert rows == [["a vs b", "r1", "2026-01-31", 0.3, 0.1, 0.5, 50, "pass", "not met", "", "met"],
                    ["a vs b", "r2", "2026-02-28", 0.312346, 0.1, 0.5, 50, "warn", "met", "", ""]]


def test_find_runs_takes_run_folders_or_their_parent(tmp_path: Path) -> None:
    parent = tmp_path / "monthly"
    for name, date in (("2026-10", "2026-10-31"), ("2026-09", "2026-09-30")):
        (parent / name).mkdir(parents=True)
        (parent / name / "record.json").write_text(json.dumps(record(date, [])), encoding="utf-8")
    (parent / "notes").mkdir()  # not a run folder: skipped
    assert find_runs([parent]) == [parent / "2026-09", parent / "2026-10"]
    assert find_runs([parent / "2026-10", parent]) == [parent / "2026-10", parent / "2026-09"]  # each once
    assert [load_run(p).label for p in find_runs([parent])] == ["2026-09-30", "2026-10-31"]
    with pytest.raises(OutputError, match="neither a run folder"):
        find_runs([parent / "notes"])
    with pytest.raises(OutputError, match="folder not found"):
        find_runs([tmp_path / "absent"])
