"""results.csv as scripts read it: every column documented in the README, one scale per quantity, and an
older run's columns still understood when it is verified."""

from __future__ import annotations

import csv
import math
import re
import shutil
from pathlib import Path

import pandas as pd
import pytest

import reportgen
from reportgen.runs.verify import WITHIN_ERROR, judge, upgraded_row
from tests.conftest import correlated_frame, write_spec

README = Path(__file__).resolve().parents[1] / "README.md"


def _documented_columns() -> set[str]:
    """Every `name` in the first cell of a README table row."""
    names: set[str] = set()
    for line in README.read_text(encoding="utf-8").splitlines():
        if line.startswith("| `"):
            names.update(re.findall(r"`([a-z_<>0-9]+)`", line.split("|")[1]))
    return names


@pytest.fixture(scope="module")
def exact_run(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, pd.DataFrame]:
    """One pair by the exact engine (fast, and every number reproducible to rounding)."""
    folder = tmp_path_factory.mktemp("columns")
    correlated_frame(30, 0.5, seed=4).to_csv(folder / "data.csv", index=False)
    spec = write_spec(folder, """
        [[pairs]]
        x = "a"
        y = "b"

        [[rules]]
        name = "material"
        statement = "above"
        threshold = 0.2
    """, quick=False)
    frame = reportgen.run(spec, folder / "out", engine="exact")
    return folder / "out", frame


def _read(path: Path) -> tuple[list[str], list[list[str]]]:
    with path.open(encoding="utf-8", newline="") as handle:
        header, *rows = list(csv.reader(handle))
    return header, rows


def test_every_results_column_is_documented_and_logs_are_natural(exact_run: tuple[Path, pd.DataFrame]) -> None:
    out, frame = exact_run
    header, _ = _read(out / "results.csv")
    documented = _documented_columns()
    generic = {re.sub(r"^p_material", "p_<rule>", column) for column in header}
    assert generic <= documented, sorted(generic - documented)
    assert {"ln_bf10", "ln_bf10_savage_dickey", "interval_kind", "interval_mass"} <= set(header)
    assert not {"log_bf10", "savage_dickey_bf10", "interval"} & set(header)
    row = frame.iloc[0]
    assert row["interval_kind"] == "central" and row["interval_mass"] == 0.95
    # the exact BF10 of Jeffreys (1961) for n = 30: its log is the column; a positive r at n = 30 favours
    # a correlation, so ln BF10 > 0 (Ly, Marsman & Wagenmakers 2018, eq. for the uniform prior)
    assert math.isfinite(row["ln_bf10"]) and row["ln_bf10"] > 0


def test_the_readme_documents_the_three_statuses() -> None:
    row = next(line for line in README.read_text(encoding="utf-8").splitlines() if line.startswith("| `status` |"))
    assert all(f"`{status}`" in row for status in ("pass", "warn", "fail"))
    assert "caution" not in README.read_text(encoding="utf-8").lower()


def test_verify_reads_an_older_runs_results_under_the_old_names(exact_run: tuple[Path, pd.DataFrame],
                                                                tmp_path: Path) -> None:
    """A run folder whose results.csv has the columns an older version wrote is judged against today's
    rerun as the same numbers (the bytes differ, the values do not)."""
    out, _ = exact_run
    older = tmp_path / "older"
    shutil.copytree(out, older)
    header, rows = _read(out / "results.csv")
    index = {name: header.index(name) for name in ("ln_bf10", "ln_bf10_savage_dickey", "interval_kind",
                                                       "interval_mass")}
    renamed = ["log_bf10" if c == "ln_bf10" else "savage_dickey_bf10" if c == "ln_bf10_savage_dickey"
               else "interval" if c == "interval_kind" else c for c in header if c != "interval_mass"]
    old_rows = []
    for row in rows:
        cells = list(row)
        ln_sd = cells[index["ln_bf10_savage_dickey"]]
        cells[index["ln_bf10_savage_dickey"]] = repr(math.exp(float(ln_sd))) if ln_sd else ""
        cells[index["interval_kind"]] = f"{row[index['interval_kind']]} {row[index['interval_mass']]}"
        old_rows.append([cell for column, cell in zip(header, cells, strict=True) if column != "interval_mass"])
    with (older / "results.csv").open("w", encoding="utf-8", newline="") as handle:
        writer = csv.writer(handle, lineterminator="\n")
        writer.writerow(renamed)
        writer.writerows(old_rows)
    verdict = judge(older, out)
    assert verdict.differences == (), verdict.differences
    assert verdict.verdict == WITHIN_ERROR and verdict.exit_code == 0


def test_an_older_runs_columns_are_mapped_onto_todays() -> None:
    old = {"pair": "a vs b", "log_bf10": "2.5", "savage_dickey_bf10": "10.0", "interval": "hdi 0.9"}
    new = upgraded_row(old)
    assert new["ln_bf10"] == "2.5" and "log_bf10" not in new
    assert math.isclose(float(new["ln_bf10_savage_dickey"]), math.log(10.0), rel_tol=1e-15)
    assert (new["interval_kind"], new["interval_mass"]) == ("hdi", "0.9")
    assert upgraded_row({"pair": "x", "savage_dickey_bf10": ""})["ln_bf10_savage_dickey"] == ""
