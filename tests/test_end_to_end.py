"""`reportgen run` end to end on small sampler settings: files, numbers, PDF, HTML, exit codes."""

from __future__ import annotations

import csv
import hashlib
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from pypdf import PdfReader
from scipy import stats

from reportgen.cli import main
from tests.conftest import correlated_frame, write_spec

HOSTILE = '<script>alert(1)</script><img src="file:///etc/passwd">'

SPEC_BODY = f"""
[variables.a]
label = 'Alpha {HOSTILE}'
unit = "kg"

[[pairs]]
x = "a"
y = "b"

[[pairs]]
x = "a"
y = "c"
label = "Alpha against noise"

[[pair_sets]]
name = "Trio"
columns = ["b", "c", "d"]

[[rules]]
name = "above_zero"
statement = "above"
threshold = 0.0
required_probability = 0.9
"""


@pytest.fixture(scope="module")
def project(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("e2e")
    frame = correlated_frame(70, 0.7, seed=5)
    rng = np.random.default_rng(6)
    frame["c"] = rng.normal(size=70)
    frame["d"] = frame["b"] * 0.5 + rng.normal(size=70)
    frame.loc[[3, 10, 11], "c"] = np.nan
    frame.to_csv(folder / "data.csv", index=False)
    write_spec(folder, SPEC_BODY)
    return folder


@pytest.fixture(scope="module")
def two_pairs(project: Path) -> Path:
    """The project's spec without its pair set: the two explicit pairs, one of them with dropped rows (a run
    costs seconds of figures and PDF pages per pair)."""
    spec = project / "two_pairs.toml"
    set_table = '[[pair_sets]]\nname = "Trio"\ncolumns = ["b", "c", "d"]\n'
    text = (project / "spec.toml").read_text(encoding="utf-8")
    assert text.count(set_table) == 1
    spec.write_text(text.replace(set_table, ""), encoding="utf-8")
    return spec


def invoke(*args: str) -> object:
    return CliRunner().invoke(main, list(args), catch_exceptions=False)


@pytest.fixture(scope="module")
def finished_run(project: Path) -> Path:
    out = project / "out"
    result = invoke("run", str(project / "spec.toml"), "--out", str(out))
    assert result.exit_code == 0, result.output
    return out


def test_all_outputs_are_written(finished_run: Path) -> None:
    for name in ("report.html", "report.pdf", "results.csv", "results.parquet", "record.json"):
        assert (finished_run / name).is_file()
    assert len(list((finished_run / "draws").glob("*.nc"))) == 5  # 2 explicit pairs + 3 from the set


def test_results_csv_columns_and_sample_r_match_scipy(project: Path, finished_run: Path) -> None:
    """sample_r equals scipy.stats.pearsonr on the complete rows to 1e-12."""
    rows = list(csv.DictReader((finished_run / "results.csv").open(encoding="utf-8")))
    required = ["pair", "x", "y", "n", "n_dropped", "sample_r", "rho_mean", "rho_median", "rho_sd",
                "rho_lower", "rho_upper", "rhat_max", "ess_bulk_min", "ess_tail_min", "divergences", "status",
                "p_positive"]
    assert list(rows[0])[:16] == required[:16]
    assert "p_positive" in rows[0]
    data = pd.read_csv(project / "data.csv")
    for row in rows:
        complete = data[[row["x"], row["y"]]].dropna()
        expected = stats.pearsonr(complete[row["x"]], complete[row["y"]]).statistic
        assert float(row["sample_r"]) == pytest.approx(expected, abs=1e-12)
        assert int(row["n"]) == len(complete)
        assert int(row["n_dropped"]) == len(data) - len(complete)
        assert float(row["rho_lower"]) < float(row["rho_median"]) < float(row["rho_upper"])


def test_results_parquet_holds_the_rows_of_results_csv(finished_run: Path) -> None:
    """results.parquet, read by pyarrow through pandas, has results.csv's columns and rows: numbers equal to
    pandas' own reading of the CSV, text as written (the CSV's leading apostrophe aside)."""
    table = pd.read_parquet(finished_run / "results.parquet")
    csv_table = pd.read_csv(finished_run / "results.csv", keep_default_na=False, dtype=str)
    assert list(table.columns) == list(csv_table.columns)
    assert len(table) == len(csv_table) == 5
    for column in ("sample_r", "rho_median", "rho_lower", "rho_upper", "n"):
        assert table[column].dtype == float
        np.testing.assert_array_equal(table[column].to_numpy(), csv_table[column].astype(float).to_numpy())
    assert list(table["pair"]) == [cell.removeprefix("'") for cell in csv_table["pair"]]
    record = json.loads((finished_run / "record.json").read_text(encoding="utf-8"))
    assert record["reproducible"]["outputs_sha256"]["results.parquet"] == hashlib.sha256(
        (finished_run / "results.parquet").read_bytes()).hexdigest()


def test_record_traces_the_inputs(project: Path, finished_run: Path) -> None:
    record = json.loads((finished_run / "record.json").read_text(encoding="utf-8"))
    fixed = record["reproducible"]
    assert fixed["data_sha256"] == hashlib.sha256((project / "data.csv").read_bytes()).hexdigest()
    assert fixed["spec_sha256"] == hashlib.sha256((project / "spec.toml").read_bytes()).hexdigest()
    assert {"pymc", "arviz", "numpy", "scipy", "python"} <= set(fixed["versions"])
    assert len({p["seed"] for p in fixed["pairs"]}) == 5
    assert record["run"]["wall_seconds_per_pair"]


def test_pdf_has_every_pair_and_the_cautions(finished_run: Path) -> None:
    reader = PdfReader(str(finished_run / "report.pdf"))
    assert len(reader.pages) >= 8
    text = " ".join(page.extract_text() for page in reader.pages)
    for title in ("Alpha against noise", "Cautions", "Association is not causation", "Appendix: run record"):
        assert title in text
    assert reader.pages[1].extract_text().count("Page 2 of") == 1


def test_html_escapes_labels_and_is_self_contained(finished_run: Path) -> None:
    html = (finished_run / "report.html").read_text(encoding="utf-8")
    assert "<script>" not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert 'src="file:' not in html and "http://" not in html and "https://" not in html


def test_same_inputs_give_identical_report_bytes(project: Path, finished_run: Path) -> None:
    again = project / "again"
    result = invoke("run", str(project / "spec.toml"), "--out", str(again))
    assert result.exit_code == 0
    assert (again / "report.pdf").read_bytes() == (finished_run / "report.pdf").read_bytes()
    assert (again / "report.html").read_bytes() == (finished_run / "report.html").read_bytes()
    assert (again / "results.csv").read_bytes() == (finished_run / "results.csv").read_bytes()
    assert (again / "results.parquet").read_bytes() == (finished_run / "results.parquet").read_bytes()


def test_bad_spec_exits_2_with_one_line_and_touches_nothing(project: Path, finished_run: Path) -> None:
    before = (finished_run / "report.pdf").read_bytes()
    bad = project / "bad.toml"
    bad.write_text((project / "spec.toml").read_text().replace('x = "a"\ny = "c"', 'x = "a"\ny = "cc"'))
    result = CliRunner().invoke(main, ["run", str(bad), "--out", str(finished_run)])
    assert result.exit_code == 2
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and "column `cc`" in lines[0] and "Traceback" not in result.output
    assert (finished_run / "report.pdf").read_bytes() == before
    fresh = project / "never"
    result = CliRunner().invoke(main, ["run", str(bad), "--out", str(fresh)])
    assert result.exit_code == 2 and not fresh.exists()


def test_check_validates_without_fitting(project: Path) -> None:
    result = invoke("check", str(project / "spec.toml"))
    assert result.exit_code == 0
    assert "5 pair(s)" in result.output


# Pairs of the bundled demo that take the same path through fitting and the report as a pair kept: two more
# explicit pairs whose robust fit leads (as for turbidity), one whose normal fit leads (as for the nutrient
# pairs), and one column of the pair set (the set still makes a pair, with drop-outs and a borderline verdict).
# Each pair costs pages of figures in three monthly reports; the rank, grouped and controlled pairs all stay.
DEMO_REPEATS = (
    ('[[pairs]]\nx = "water_temp_c"\ny = "dissolved_oxygen_mg_l"\n\n', ""),
    ('[[pairs]]\nx = "ph"\ny = "conductivity_us_cm"\n\n', ""),
    ('[[pairs]]\nx = "rainfall_24h_mm"\ny = "e_coli_cfu_100ml"\nlabel = "Rainfall and bacterial load"\n\n', ""),
    ('columns = ["nitrate_mg_l", "phosphate_mg_l", "chlorophyll_ug_l"]',
     'columns = ["phosphate_mg_l", "chlorophyll_ug_l"]'),
)


def demo_without_repeats(folder: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """The bundled demo's three monthly specs and data in ``folder``, less ``DEMO_REPEATS``; the demo command
    then runs these."""
    from reportgen import cli

    folder.mkdir()
    months = []
    for spec_path, period in cli.DEMO_MONTHS:
        text = spec_path.read_text(encoding="utf-8")
        for repeated, kept in DEMO_REPEATS:
            assert text.count(repeated) == 1, (spec_path.name, repeated)
            text = text.replace(repeated, kept)
        (folder / spec_path.name).write_text(text, encoding="utf-8")
        months.append((folder / spec_path.name, period))
    for data in spec_path.parent.glob("*.csv"):
        (folder / data.name).write_bytes(data.read_bytes())
    monkeypatch.setattr(cli, "DEMO_MONTHS", tuple(months))
    monkeypatch.setattr(cli, "DEMO_SPEC", months[-1][0])


def test_failed_diagnostics_exit_1_and_say_so_on_page_one(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Too few draws for the demo's ESS >= 400 threshold: the reports are written and flag it. The demo is
    three monthly runs, each compared with the month before, then a change report and a history."""
    demo_without_repeats(tmp_path / "specs", monkeypatch)
    result = CliRunner().invoke(main, ["demo", "--out", str(tmp_path / "demo"), "--draws", "60",
                                       "--tune", "60", "--chains", "2"])
    assert result.exit_code == 1, result.output
    latest = tmp_path / "demo" / "2026-11"
    first_page = PdfReader(str(latest / "report.pdf")).pages[0].extract_text()
    assert "failed the sampler checks" in first_page
    assert "Since the previous run" in first_page
    assert (latest / "changes.csv").is_file() and not (tmp_path / "demo" / "2026-09" / "changes.csv").exists()
    for name in ("changes/changes.pdf", "changes/changes.csv", "history/history.pdf", "history/history.csv"):
        assert (tmp_path / "demo" / name).is_file(), name
    with (tmp_path / "demo" / "history" / "history.csv").open(encoding="utf-8", newline="") as handle:
        dates = {row["date"] for row in csv.DictReader(handle)}
    assert dates == {"2026-09-30", "2026-10-31", "2026-11-30"}


def test_init_writes_a_spec_that_check_accepts(project: Path) -> None:
    spec = project / "starter.toml"
    result = invoke("init", str(project / "data.csv"), "--pair", "a", "b", "--pair", "c", "d", "-o", str(spec))
    assert result.exit_code == 0, result.output
    assert invoke("check", str(spec)).exit_code == 0
    again = CliRunner().invoke(main, ["init", str(project / "data.csv"), "--pair", "a", "b", "-o", str(spec)])
    assert again.exit_code == 2


def test_pdf_renderer_refuses_files_and_network() -> None:
    """Crafted markup that asks for a local file and a network address gets neither."""
    from reportgen.report import render_pdf

    html = ('<html><head><link rel="stylesheet" href="http://127.0.0.1:9/x.css"></head><body>'
            '<img src="file:///etc/passwd"><p style="background: url(file:///etc/hostname)">x</p></body></html>')
    pdf, refused = render_pdf(html, "2026-01-01")
    assert pdf.startswith(b"%PDF")
    assert any("etc/passwd" in url for url in refused)
    assert any("127.0.0.1" in url for url in refused)
    assert b"root:" not in pdf


def test_exact_engine_reports_the_quadrature_numbers(project: Path, two_pairs: Path) -> None:
    """`--engine exact`: a consistency check that the CSV carries reportgen.exact's numbers, with no
    sampler and no draws folder (the engine itself is checked against independent integration in
    test_exact.py)."""
    from reportgen.exact import exact_posterior

    out = project / "exact"
    result = invoke("run", str(two_pairs), "--out", str(out), "--engine", "exact")
    assert result.exit_code == 0, result.output
    assert not (out / "draws").exists()
    rows = list(csv.DictReader((out / "results.csv").open(encoding="utf-8")))
    assert [row["pair"] for row in rows] == ["a vs b", "a vs c"] and rows[1]["n_dropped"] == "3"
    for row in rows:
        reference = exact_posterior(int(row["n"]), float(row["sample_r"]))
        assert float(row["rho_mean"]) == pytest.approx(reference.mean, abs=1e-12)
        assert float(row["rho_lower"]) == pytest.approx(reference.quantile(0.025), abs=1e-9)
        assert float(row["p_positive"]) == pytest.approx(reference.prob_above(0.0), abs=1e-12)
        assert row["engine"] == "exact" and row["rhat_max"] == ""
    record = json.loads((out / "record.json").read_text(encoding="utf-8"))
    assert record["reproducible"]["engine"].startswith("exact")
    text = " ".join(page.extract_text() for page in PdfReader(str(out / "report.pdf")).pages)
    assert "exact engine" in text


def test_a_crashing_sampler_fails_one_pair_not_the_run(project: Path, two_pairs: Path,
                                                       monkeypatch: pytest.MonkeyPatch) -> None:
    from reportgen.fit import Fitter

    original = Fitter.fit

    def flaky(self: Fitter, pair: object, master_seed: int, model: str = "normal") -> object:
        if pair.pair.key == "a vs c":  # type: ignore[attr-defined]
            raise RuntimeError("simulated sampler crash")
        return original(self, pair, master_seed, model)  # type: ignore[arg-type]

    monkeypatch.setattr(Fitter, "fit", flaky)
    out = project / "flaky"
    result = CliRunner().invoke(main, ["run", str(two_pairs), "--out", str(out)])
    assert result.exit_code == 1
    rows = {row["pair"]: row for row in csv.DictReader((out / "results.csv").open(encoding="utf-8"))}
    assert rows["a vs c"]["status"] == "fail" and "simulated sampler crash" in rows["a vs c"]["status_reasons"]
    assert rows["a vs b"]["status"] == "pass"
    first_page = PdfReader(str(out / "report.pdf")).pages[0].extract_text()
    assert "failed the sampler checks" in first_page and "not judged" in first_page


def test_ctrl_c_exits_130_and_changes_nothing(project: Path, finished_run: Path,
                                             monkeypatch: pytest.MonkeyPatch) -> None:
    from reportgen.fit import Fitter

    def interrupted(self: Fitter, pair: object, master_seed: int, model: str = "normal") -> object:
        raise KeyboardInterrupt

    monkeypatch.setattr(Fitter, "fit", interrupted)
    before = {p.name: p.read_bytes() for p in finished_run.iterdir() if p.is_file()}
    result = CliRunner().invoke(main, ["run", str(project / "spec.toml"), "--out", str(finished_run)])
    assert result.exit_code == 130
    assert "interrupted" in result.output
    assert {p.name: p.read_bytes() for p in finished_run.iterdir() if p.is_file()} == before
    assert not list(project.glob(".*staging*"))
