"""Checking the model end to end: a planted outlier, Anscombe's quartet, the model-check columns of results.csv.

Anscombe's values are typed from memory of Anscombe (1973, The American Statistician 27(1), Table 1).
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from scipy import stats

from reportgen.cli import main
from reportgen.results.table import MODEL_CHECK_COLUMNS
from tests.conftest import pages_not_drawn, write_spec

ANSCOMBE_X = [10, 8, 13, 9, 11, 14, 6, 4, 12, 7, 5]
ANSCOMBE_Y1 = [8.04, 6.95, 7.58, 8.81, 8.33, 9.96, 7.24, 4.26, 10.84, 4.82, 5.68]
ANSCOMBE_Y3 = [7.46, 6.77, 12.74, 7.11, 7.81, 8.84, 6.08, 5.39, 8.15, 6.42, 5.73]

RULES = """
[[rules]]
name = "strong"
statement = "above"
threshold = 0.5
required_probability = 0.9
"""


def _prepend(spec: Path, lines: str) -> None:
    """Top-level keys must come before the spec's first table."""
    spec.write_text(lines + spec.read_text(encoding="utf-8"), encoding="utf-8")


def _rows(path: Path) -> list[dict[str, str]]:
    with path.open(newline="", encoding="utf-8") as handle:
        return list(csv.DictReader(handle))


@pytest.fixture(scope="module")
def planted(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, int]:
    """40 unrelated rows and one row far out on the diagonal, which alone makes r large."""
    folder = tmp_path_factory.mktemp("planted")
    rng = np.random.default_rng(17)
    frame = pd.DataFrame({"a": rng.normal(size=40), "b": rng.normal(size=40)})
    frame.loc[40] = [9.0, 9.0]
    frame.to_csv(folder / "data.csv", index=False)
    write_spec(folder, """
        [[pairs]]
        x = "a"
        y = "b"
    """ + RULES)
    _prepend(folder / "spec.toml", 'model = "auto"\n')
    # the planted row is the 41st data row: line 42 of the CSV (the header is line 1)
    return folder, 42


@pytest.fixture(scope="module")
def planted_run(planted: tuple[Path, int]) -> Path:
    folder, _ = planted
    with pages_not_drawn():  # these tests read results.csv and the record
        result = CliRunner().invoke(main, ["run", str(folder / "spec.toml"), "--out", str(folder / "out")])
    assert result.exit_code in (0, 1), result.output
    return folder / "out"


def test_auto_leads_with_the_robust_fit_and_lists_the_planted_row(planted: tuple[Path, int],
                                                                   planted_run: Path) -> None:
    """The sample r with the planted row is large (scipy.stats.pearsonr), without it near zero; under
    model = "auto" the Student-t fit (Lange, Little & Taylor 1989) leads, near zero, and the row is listed."""
    folder, line = planted
    frame = pd.read_csv(folder / "data.csv")
    with_row = stats.pearsonr(frame.a, frame.b).statistic
    without = stats.pearsonr(frame.a[:40], frame.b[:40]).statistic
    assert with_row > 0.5 and abs(without) < 0.3  # the data are what the test says
    row = _rows(planted_run / "results.csv")[0]
    assert row["model"] == "student_t"
    assert str(line) in row["influential_rows"].split(";")
    assert "influential_rows" in row["model_warnings"].split(";")
    assert abs(float(row["rho_median"])) < 0.3
    assert float(row["robust_rho_median"]) == pytest.approx(float(row["rho_median"]))
    assert float(row["nu_median"]) > 1.0
    assert float(row["influence_max"]) > 0.1
    text = (planted_run / "report.html").read_text(encoding="utf-8")
    assert "The robust (Student-t) fit leads because" in text
    assert f"row {line}" in text


def test_model_check_columns_sit_before_the_rule_columns(planted_run: Path) -> None:
    """Scripts rely on the names: README's table of the model-check columns (common practice: fixed headers)."""
    header = next(csv.reader((planted_run / "results.csv").open(encoding="utf-8")))
    start = header.index("model")
    assert tuple(header[start:start + len(MODEL_CHECK_COLUMNS)]) == MODEL_CHECK_COLUMNS
    assert header[-2:] == ["p_strong", "p_strong_mcse"]
    row = _rows(planted_run / "results.csv")[0]
    assert row["prior_sensitive"] in ("true", "false")
    assert 0.0 <= float(row["normality_p"]) <= 1.0 and 0.0 <= float(row["ppc_p_r"]) <= 1.0


def test_student_t_draws_are_written_and_recorded(planted_run: Path) -> None:
    import json

    names = sorted(p.name for p in (planted_run / "draws").iterdir())
    assert len(names) == 2 and any(name.endswith("-student_t.nc") for name in names)
    record = json.loads((planted_run / "record.json").read_text(encoding="utf-8"))
    pair = record["reproducible"]["pairs"][0]
    assert pair["model"] == "student_t" and pair["robust_draws_sha256"] and pair["robust_seed"] != pair["seed"]


def _anscombe_project(folder: Path, y: list[float], engine: str) -> Path:
    pd.DataFrame({"x": ANSCOMBE_X, "y": y}).to_csv(folder / "data.csv", index=False)
    write_spec(folder, """
        [[pairs]]
        x = "x"
        y = "y"
    """)
    _prepend(folder / "spec.toml", f'engine = "{engine}"\nmodel = "auto"\n')
    return folder / "spec.toml"


@pytest.mark.usefixtures("placeholder_pdf")  # results.csv is read
def test_anscombe_three_is_flagged_and_its_robust_rho_is_near_one(tmp_path: Path) -> None:
    """Anscombe (1973) set III: ten points on a line and one outlier (x = 13, y = 12.74, line 4 of the
    CSV); r = 0.816 with it (scipy.stats.pearsonr), 0.99999 without. The Student-t fit leads, near 1."""
    spec = _anscombe_project(tmp_path, ANSCOMBE_Y3, "mcmc")
    assert stats.pearsonr(ANSCOMBE_X, ANSCOMBE_Y3).statistic == pytest.approx(0.816, abs=0.001)
    result = CliRunner().invoke(main, ["run", str(spec), "--out", str(tmp_path / "out")])
    assert result.exit_code in (0, 1), result.output
    row = _rows(tmp_path / "out" / "results.csv")[0]
    assert row["influential_rows"] == "4"
    assert row["model"] == "student_t"
    assert float(row["rho_median"]) > 0.95


@pytest.mark.usefixtures("placeholder_pdf")  # results.csv is read
def test_anscombe_one_gets_no_flag_and_the_normal_fit_leads(tmp_path: Path) -> None:
    """Anscombe (1973) set I is the well-behaved one: no influential or outlying row, so under
    model = "auto" (exact engine: the rank model is the robust fit) the normal model leads."""
    spec = _anscombe_project(tmp_path, ANSCOMBE_Y1, "exact")
    result = CliRunner().invoke(main, ["run", str(spec), "--out", str(tmp_path / "out")])
    assert result.exit_code == 0, result.output
    row = _rows(tmp_path / "out" / "results.csv")[0]
    assert row["influential_rows"] == ""
    assert "influential_rows" not in row["model_warnings"] and "outliers" not in row["model_warnings"]
    assert row["model"] == "normal"
    assert row["robust_rho_median"] != ""


def test_student_t_with_the_exact_engine_is_refused(tmp_path: Path) -> None:
    """The exact posterior exists for the normal model only (Jeffreys 1961): one line, exit 2, nothing written."""
    spec = _anscombe_project(tmp_path, ANSCOMBE_Y1, "exact")
    result = CliRunner().invoke(main, ["run", str(spec), "--model", "student_t", "--out", str(tmp_path / "out")])
    assert result.exit_code == 2
    assert "needs the sampler" in result.output and "Traceback" not in result.output
    assert not (tmp_path / "out").exists()


@pytest.mark.usefixtures("placeholder_pdf")  # results.csv is read
def test_rank_model_per_pair_matches_kendall(tmp_path: Path) -> None:
    """A monotone curve: the rank model's rho on Pearson's scale is sin(pi tau / 2) of scipy.stats.kendalltau's
    tau-b (Greiner's relation; Kruskal 1958), well above the sample Pearson r."""
    rng = np.random.default_rng(3)
    x = rng.normal(size=60)
    y = np.exp(2.5 * x) + rng.normal(0, 0.05, 60)
    pd.DataFrame({"x": x, "y": y}).to_csv(tmp_path / "data.csv", index=False)
    write_spec(tmp_path, """
        [[pairs]]
        x = "x"
        y = "y"
        model = "rank"
    """)
    result = CliRunner().invoke(main, ["run", str(tmp_path / "spec.toml"), "--out", str(tmp_path / "out")])
    assert result.exit_code == 0, result.output
    row = _rows(tmp_path / "out" / "results.csv")[0]
    tau = stats.kendalltau(x, y).statistic
    assert row["model"] == "rank"
    assert float(row["rho_median"]) == pytest.approx(np.sin(np.pi * tau / 2), abs=0.05)
    assert float(row["rho_median"]) > float(row["sample_r"]) + 0.1
