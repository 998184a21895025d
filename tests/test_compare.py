"""Comparing two runs (reportgen.runs.compare) on run folders written by the exact engine, and reading run
folders back (reportgen.runs.snapshot)."""

from __future__ import annotations

import hashlib
import json
import textwrap
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest

from reportgen.data import sufficient_stats
from reportgen.errors import OutputError
from reportgen.runner import run
from reportgen.runs.compare import changes_rows, compare_runs, data_change, summary_lines
from reportgen.runs.snapshot import RunSnapshot, load_run, rho_posterior
from reportgen.spec import load_spec
from tests.conftest import correlated_frame, pages_not_drawn
from tests.test_difference import STEP, convolved, reference_density, reference_summary

MARGIN = 0.1
RHO = np.arange(-1.0 + STEP / 2, 1.0, STEP)


def spec_text(prior_a: float, pairs: list[tuple[str, str]], date: str) -> str:
    entries = "".join(f'\n[[pairs]]\nx = "{x}"\ny = "{y}"\n' for x, y in pairs)
    return textwrap.dedent(f"""
        engine = "exact"

        [report]
        title = "Monthly check"
        date = {date}

        [data]
        path = "data.csv"

        [priors.rho]
        family = "beta"
        a = {prior_a}
        b = 2.0

        [[rules]]
        name = "strong"
        statement = "above"
        threshold = 0.3

        [[rules]]
        name = "above_zero"
        statement = "above"
        threshold = 0.0
        required_probability = 0.9
    """) + entries


def block(n: int, rho_ab: float, rho_ac: float, seed: int) -> pd.DataFrame:
    """Rows with corr(a, b) near rho_ab, corr(a, c) near rho_ac (c = rho a_std + sqrt(1 - rho^2) noise), d noise."""
    frame = correlated_frame(n, rho_ab, seed=seed)
    rng = np.random.default_rng(seed + 100)
    a_std = (frame["a"] - frame["a"].mean()) / frame["a"].std()
    frame["c"] = rho_ac * a_std + np.sqrt(1 - rho_ac**2) * rng.normal(size=n)
    frame["d"] = rng.normal(size=n)
    return frame


def make_run(folder: Path, data: bytes, prior_a: float, pairs: list[tuple[str, str]], date: str) -> RunSnapshot:
    """An exact-engine run folder; record.json gets the data file's size when the record does not hold it."""
    project = folder / "project"
    project.mkdir(parents=True)
    (project / "data.csv").write_bytes(data)
    (project / "spec.toml").write_text(spec_text(prior_a, pairs, date), encoding="utf-8")
    out = folder / "out"
    run(load_spec(project / "spec.toml"), out, command_line=["test"])
    record_path = out / "record.json"
    record = json.loads(record_path.read_text(encoding="utf-8"))
    record["reproducible"].setdefault("data_bytes", len(data))
    record_path.write_text(json.dumps(record), encoding="utf-8")
    return load_run(out)


OLD_ROWS = block(60, 0.6, 0.25, seed=1)
ADDED_ROWS = block(60, 0.6, 0.85, seed=2)


def csv_bytes(frame: pd.DataFrame) -> bytes:
    return frame.to_csv(index=False, lineterminator="\n").encode()


@pytest.fixture(scope="module")
def runs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, RunSnapshot]:
    """October: pairs (a, b), (a, c) on 60 rows. November: 60 rows appended, prior a 2 -> 3, pair (a, d)
    added. A second November run reads the same rows with one earlier cell edited."""
    base = tmp_path_factory.mktemp("runs")
    old_bytes = csv_bytes(OLD_ROWS)
    new_bytes = old_bytes + csv_bytes(ADDED_ROWS).split(b"\n", 1)[1]
    edited = OLD_ROWS.copy()
    edited.loc[3, "d"] = 5.0
    edited_bytes = csv_bytes(pd.concat([edited, ADDED_ROWS], ignore_index=True))
    pairs = [("a", "b"), ("a", "c")]
    with pages_not_drawn():  # the comparison reads the records and results, no page of a report
        return {"old": make_run(base / "old", old_bytes, 2.0, pairs, "2026-10-31"),
                "new": make_run(base / "new", new_bytes, 3.0, pairs + [("a", "d")], "2026-11-30"),
                "edited": make_run(base / "edited", edited_bytes, 3.0, pairs + [("a", "d")], "2026-11-30")}


def data_file(snapshot: RunSnapshot) -> Path:
    return Path(snapshot.record["run"]["data_path"])


def test_the_comparison_lists_exactly_the_changes_made(runs: dict[str, RunSnapshot]) -> None:
    old, new = runs["old"], runs["new"]
    verdicts = {key: {r["name"]: r["verdict"] for r in e["rules"]} for key, e in new.pairs.items()}
    assert verdicts["a vs c"]["strong"] == "met"  # the fixture does flip it
    c = compare_runs(old, new, MARGIN, data_file(new))
    assert [(p.key, [(r.rule, r.old_verdict, r.new_verdict) for r in p.flips]) for p in c.flipped] == \
        [("a vs c", [("strong", "not met", "met")])]
    assert [p.key for p in c.pairs] == ["a vs c", "a vs b"]  # flipped first
    assert c.added == ("a vs d",) and c.removed == ()
    assert {s.key: (s.old, s.new) for s in c.spec_changes} == {"priors.rho.a": ("2.0", "3.0"),
                                                               "pairs[a vs d]": ("(not set)", "x = a; y = d")}
    assert c.version_changes == ()
    assert c.status_changes == ()
    assert (c.old_label, c.new_label, c.margin) == ("2026-10-31", "2026-11-30", MARGIN)


def test_appended_rows_are_compared_on_their_own(runs: dict[str, RunSnapshot]) -> None:
    """P(rose) on the added rows only, against scipy.signal.fftconvolve of the two exact posteriors (the
    published formula of tests/test_difference.py, times the stretched Beta(3, 2) prior of the new spec)."""
    c = compare_runs(runs["old"], runs["new"], MARGIN, data_file(runs["new"]))
    assert (c.data.relation, c.data.added_rows, c.data.old_rows, c.data.new_rows) == ("appended", 60, 60, 120)
    assert "60 added rows" in c.data.sentence and "added rows only" in c.basis_sentence
    prior = ((1 + RHO) / 2) ** 2 * ((1 - RHO) / 2)  # Beta(3, 2) stretched to [-1, 1], unnormalised
    for change in c.pairs:
        assert change.basis == "added_rows"
        x, y = change.x, change.y
        sides = []
        for frame in (OLD_ROWS, ADDED_ROWS):
            s = sufficient_stats(frame[x].to_numpy(), frame[y].to_numpy())
            density = reference_density(s.n, s.sample_r) * prior
            sides.append(density / (density.sum() * STEP))
        want = reference_summary(*convolved(*sides))
        assert change.difference.p_rose == pytest.approx(want["p_rose"], abs=1e-4)
        assert change.difference.p_moved == pytest.approx(want["p_moved"], abs=1e-4)
        assert change.difference.median == pytest.approx(want["median"], abs=1e-3)
        assert change.old.n == 60 and change.new.n == 120
    assert c.pairs[0].difference.p_rose > 0.99  # a vs c: 0.25 before, 0.85 in the added rows


def test_edited_earlier_rows_make_the_data_different(runs: dict[str, RunSnapshot]) -> None:
    """One earlier cell edited: no longer a prefix, so the runs are independent samples, and P(rose) is the
    convolution of the two runs' whole posteriors (scipy, as above)."""
    old, edited = runs["old"], runs["edited"]
    c = compare_runs(old, edited, MARGIN, data_file(edited))
    assert c.data.relation == "different" and c.data.added_rows == 0
    assert "independent" in c.basis_sentence
    change = next(p for p in c.pairs if p.key == "a vs b")
    assert change.basis == "independent"
    sides = []
    for snapshot, a in ((old, 2.0), (edited, 3.0)):
        s = snapshot.pairs["a vs b"]["sufficient_statistics"]
        density = reference_density(int(s["n"]), s["sxy"] / np.sqrt(s["sxx"] * s["syy"]))
        density *= ((1 + RHO) / 2) ** (a - 1) * ((1 - RHO) / 2)
        sides.append(density / (density.sum() * STEP))
    want = reference_summary(*convolved(*sides))
    assert change.difference.p_rose == pytest.approx(want["p_rose"], abs=1e-4)
    assert "independent" in c.method_sentence and "convolution" in c.method_sentence


def test_same_data_and_unknown_sizes(runs: dict[str, RunSnapshot]) -> None:
    old, new = runs["old"], runs["new"]
    assert data_change(old, old, data_file(old)).relation == "same"
    without_size = RunSnapshot(old.folder, json.loads(json.dumps(old.record)))
    del without_size.record["reproducible"]["data_bytes"]
    change = data_change(without_size, new, data_file(new))
    assert change.relation == "different" and "size" in change.sentence
    assert data_change(old, new, None).relation == "different"


def test_a_prefix_must_end_at_a_line_break(tmp_path: Path, runs: dict[str, RunSnapshot]) -> None:
    """The old file's bytes are a prefix of the new, but its last row was extended ("1.5" -> "1.53")."""
    old, new = runs["old"], runs["new"]
    path = tmp_path / "data.csv"
    path.write_bytes(b"a,b\n1,2\n1.5")
    extended = path.read_bytes() + b"3\n4,5\n"
    records = []
    for content, rows in ((path.read_bytes(), 2), (extended, 3)):
        record = json.loads(json.dumps(new.record))
        record["reproducible"].update(data_sha256=hashlib.sha256(content).hexdigest(), data_rows=rows,
                                      data_bytes=len(content))
        records.append(RunSnapshot(old.folder, record))
    path.write_bytes(extended)
    assert data_change(records[0], records[1], path).relation == "different"
    clean = b"a,b\n1,2\n"
    records[0].record["reproducible"].update(data_sha256=hashlib.sha256(clean).hexdigest(), data_bytes=len(clean))
    path.write_bytes(clean + b"3,4\n")
    records[1].record["reproducible"]["data_sha256"] = hashlib.sha256(clean + b"3,4\n").hexdigest()
    assert data_change(records[0], records[1], path).relation == "appended"


def test_changes_rows_and_summary(runs: dict[str, RunSnapshot]) -> None:
    c = compare_runs(runs["old"], runs["new"], MARGIN, data_file(runs["new"]))
    header, rows = changes_rows(c)
    assert header == ["pair", "change", "old_median", "old_lower", "old_upper", "new_median", "new_lower",
                      "new_upper", "difference_median", "difference_lower", "difference_upper", "p_rose",
                      "p_moved", "margin", "basis", "flipped_rules", "old_status", "new_status"]
    assert all(len(row) == len(header) for row in rows)
    table = {row[0]: dict(zip(header, row, strict=True)) for row in rows}
    assert [row[0] for row in rows] == ["a vs c", "a vs b", "a vs d"]
    assert table["a vs c"]["change"] == "flipped" and table["a vs c"]["flipped_rules"] == "strong: not met -> met"
    assert table["a vs b"]["change"] == "kept" and table["a vs b"]["basis"] == "added_rows"
    added = table["a vs d"]
    assert added["change"] == "added" and added["old_median"] == "" and added["new_status"] == "pass"
    assert added["new_median"] == pytest.approx(runs["new"].pairs["a vs d"]["rho"]["median"], abs=1e-6)
    lines = summary_lines(c)
    assert "Flipped: a vs c: rule strong not met -> met" in "\n".join(lines)
    assert any(line.startswith("Spec: ") and "priors.rho.a 2.0 -> 3.0" in line for line in lines)
    assert lines[-1] == "Added: a vs d"


def test_load_run_refuses_what_it_cannot_use(tmp_path: Path, runs: dict[str, RunSnapshot]) -> None:
    with pytest.raises(OutputError, match=r"folder not found"):
        load_run(tmp_path / "missing")
    with pytest.raises(OutputError, match=r"has no record\.json"):
        load_run(tmp_path)
    (tmp_path / "record.json").write_text("{not json", encoding="utf-8")
    with pytest.raises(OutputError, match=r"record\.json cannot be read"):
        load_run(tmp_path)
    (tmp_path / "record.json").write_text(json.dumps({"reproducible": {"tool": "other"}}), encoding="utf-8")
    with pytest.raises(OutputError, match="not written by reportgen"):
        load_run(tmp_path)
    old: dict[str, Any] = json.loads(json.dumps(runs["old"].record))
    del old["reproducible"]["resolved_spec"]
    (tmp_path / "record.json").write_text(json.dumps(old), encoding="utf-8")
    with pytest.raises(OutputError, match="lacks resolved_spec") as caught:
        load_run(tmp_path)
    assert str(tmp_path) in str(caught.value) and "\n" not in str(caught.value)


def test_rho_posterior_reads_draws_or_falls_back_to_the_exact_posterior(tmp_path: Path,
                                                                        runs: dict[str, RunSnapshot]) -> None:
    import arviz as az

    snapshot = runs["old"]
    exact_side = rho_posterior(snapshot, "a vs b")
    assert exact_side.grid.size and "exact engine" in exact_side.source
    # the posterior median of the grid is the one the run reported
    cdf = np.cumsum(exact_side.density * np.gradient(exact_side.grid))
    assert np.interp(0.5, cdf / cdf[-1], exact_side.grid) == pytest.approx(
        snapshot.pairs["a vs b"]["rho"]["median"], abs=2e-3)
    record = json.loads(json.dumps(snapshot.record))
    entry = record["reproducible"]["pairs"][0]
    entry["draws_file"] = "draws/a.nc"
    (tmp_path / "draws").mkdir()
    rho = np.random.default_rng(0).uniform(0.2, 0.4, size=(2, 50))
    az.from_dict(posterior={"rho": rho}).to_netcdf(str(tmp_path / "draws" / "a.nc"), engine="h5netcdf")
    with_draws = rho_posterior(RunSnapshot(tmp_path, record), entry["pair"])
    assert np.array_equal(with_draws.draws, rho.reshape(-1)) and "normal model (100)" in with_draws.source
    missing = rho_posterior(RunSnapshot(tmp_path / "elsewhere", record), entry["pair"])
    assert missing.grid.size and "missing" in missing.source
