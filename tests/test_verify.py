"""`verify`: a past run re-made from its record, refused when an input changed, and judged against the
original (same bytes, within Monte Carlo error, or not reproduced)."""

from __future__ import annotations

import csv
import hashlib
import io
import json
import math
import shutil
from pathlib import Path

import numpy as np
import pytest
from conftest import QUICK_SAMPLER, correlated_frame
from PIL import Image

from reportgen import assets, audit, runner
from reportgen.errors import DataError, OutputError, ReportAssetError, SpecError
from reportgen.report import render
from reportgen.runs import environment, verify
from reportgen.spec import load_spec

SPEC = """\
engine = "{engine}"

[report]
title = "Verify test"
date = 2026-01-15
{report_extra}

[data]
path = "data.csv"

[[pairs]]
x = "a"
y = "b"

[[pairs]]
x = "a"
y = "c"

[[rules]]
name = "strong"
statement = "above"
threshold = 0.5
required_probability = 0.9
"""


def make_project(folder: Path, *, engine: str = "exact", assets: bool = True) -> Path:
    """data.csv (a, b, c), a spec, and (with ``assets``) a template folder and a logo."""
    folder.mkdir(parents=True, exist_ok=True)
    frame = correlated_frame(60, 0.5, seed=3)
    frame["c"] = np.random.default_rng(4).normal(size=60)
    frame.to_csv(folder / "data.csv", index=False)
    extra = ""
    if assets:
        (folder / "tpl").mkdir()
        shipped = render.template_folders(None)[0] / "report.css"
        (folder / "tpl" / "report.css").write_text(shipped.read_text(encoding="utf-8") + "\n/* house style */\n",
                                                   encoding="utf-8")
        Image.new("RGB", (8, 4), (20, 90, 160)).save(folder / "logo.png")
        extra = 'templates = "tpl"\nlogo = "logo.png"'
    text = SPEC.format(engine=engine, report_extra=extra) + (QUICK_SAMPLER if engine == "mcmc" else "")
    (folder / "spec.toml").write_text(text, encoding="utf-8")
    return folder / "spec.toml"


@pytest.fixture(scope="module")
def original(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    """One exact-engine run (project folder, run folder), never changed by a test: tests copy it."""
    root = tmp_path_factory.mktemp("verify")
    spec = make_project(root / "project")
    runner.run(load_spec(spec), root / "run", command_line=["reportgen", "run"])
    return root / "project", root / "run"


def relocated(original: tuple[Path, Path], tmp_path: Path) -> tuple[Path, Path]:
    """A copy of the project and the run folder, the copied record pointing at the copied project."""
    project, run = tmp_path / "project", tmp_path / "run"
    shutil.copytree(original[0], project)
    shutil.copytree(original[1], run)
    record = json.loads((run / "record.json").read_text(encoding="utf-8"))
    record["run"]["spec_path"] = str(project / "spec.toml")
    record["run"]["data_path"] = str(project / "data.csv")
    (run / "record.json").write_text(json.dumps(record, indent=2), encoding="utf-8")
    return project, run


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def edit_results(run: Path, column: str, shift: float) -> None:
    """Add ``shift`` to one number of the first pair in results.csv."""
    rows = list(csv.reader(io.StringIO((run / "results.csv").read_text(encoding="utf-8"))))
    index = rows[0].index(column)
    rows[1][index] = repr(float(rows[1][index]) + shift)
    buffer = io.StringIO()
    csv.writer(buffer, lineterminator="\n").writerows(rows)
    (run / "results.csv").write_text(buffer.getvalue(), encoding="utf-8")


@pytest.fixture(scope="module")
def verified(original: tuple[Path, Path], tmp_path_factory: pytest.TempPathFactory) -> tuple[verify.Verification, Path]:
    """verify of the untouched original with its rerun kept (``--out``), made once: tests read it, never change it."""
    out = tmp_path_factory.mktemp("verified") / "verified"
    return audit.verify_run(original[1], out=out), out


def test_untouched_run_reproduces_byte_for_byte(original: tuple[Path, Path],
                                                verified: tuple[verify.Verification, Path]) -> None:
    result, out = verified
    assert result.verdict == verify.BYTE_FOR_BYTE and result.exit_code == 0
    assert all(check.identical for check in result.outputs)
    assert [check.name for check in result.outputs] == ["results.csv", "report.html", "report.pdf"]
    assert result.environment == () and result.settings == () and result.differences == ()
    lines = verify.summary_lines(result)
    assert lines[0].startswith("reproduced byte for byte")
    written = json.loads((out / "verification.json").read_text(encoding="utf-8"))
    assert written["verdict"] == verify.BYTE_FOR_BYTE and written["exit_code"] == 0
    for name in ("report.pdf", "results.csv", "report.html"):
        assert sha256(out / name) == sha256(original[1] / name)
    # SHA256SUMS covers verification.json too, in the format `sha256sum -c` reads (GNU coreutils)
    sums = (out / "SHA256SUMS").read_text(encoding="utf-8")
    assert f"{sha256(out / 'verification.json')}  verification.json\n" in sums


def test_record_holds_what_decides_bytes(original: tuple[Path, Path]) -> None:
    record = json.loads((original[1] / "record.json").read_text(encoding="utf-8"))
    reproducible = record["reproducible"]
    project = original[0]
    assert reproducible["data_bytes"] == (project / "data.csv").stat().st_size
    assert reproducible["logo_sha256"] == sha256(project / "logo.png")
    assert reproducible["templates_sha256"] == record["environment"]["templates_sha256"] != ""
    assert "environment" not in reproducible and "cpu_model" in record["environment"]
    assert record["run"]["spec_text"] == (project / "spec.toml").read_text(encoding="utf-8")


def test_edited_data_cell_is_refused_naming_the_file_and_both_hashes(original: tuple[Path, Path],
                                                                      tmp_path: Path) -> None:
    project, run = relocated(original, tmp_path)
    data = project / "data.csv"
    recorded = sha256(data)
    lines = data.read_text(encoding="utf-8").splitlines()
    cells = lines[5].split(",")
    cells[0] = str(float(cells[0]) + 1.0)
    lines[5] = ",".join(cells)
    data.write_text("\n".join(lines) + "\n", encoding="utf-8")
    with pytest.raises(DataError) as caught:
        audit.verify_run(run)
    message = str(caught.value)
    assert "\n" not in message and str(data) in message
    assert recorded in message and sha256(data) in message
    assert caught.value.exit_code == 2


def test_missing_data_file_names_it_and_the_option(original: tuple[Path, Path], tmp_path: Path) -> None:
    project, run = relocated(original, tmp_path)
    moved = tmp_path / "elsewhere.csv"
    (project / "data.csv").rename(moved)
    with pytest.raises(DataError, match="--data") as caught:
        audit.verify_run(run)
    assert str(project / "data.csv") in str(caught.value)
    # given its new place, the same bytes rerun; only the data path in the printed record differs
    result = audit.verify_run(run, data=moved)
    assert result.verdict == verify.WITHIN_ERROR
    assert [change.key for change in result.settings] == ["spec.data.path"]
    assert next(c for c in result.outputs if c.name == "results.csv").identical


def test_edited_spec_value_is_refused_naming_the_spec(original: tuple[Path, Path], tmp_path: Path) -> None:
    project, run = relocated(original, tmp_path)
    spec = project / "spec.toml"
    recorded = sha256(spec)
    spec.write_text(spec.read_text(encoding="utf-8").replace("threshold = 0.5", "threshold = 0.4"),
                    encoding="utf-8")
    with pytest.raises(SpecError) as caught:
        audit.verify_run(run)
    message = str(caught.value)
    assert "\n" not in message and str(spec) in message and recorded in message and sha256(spec) in message


def test_removed_spec_file_is_a_note_and_the_record_reruns(original: tuple[Path, Path], tmp_path: Path) -> None:
    project, run = relocated(original, tmp_path)
    (project / "spec.toml").unlink()
    result = audit.verify_run(run)
    assert result.verdict == verify.BYTE_FOR_BYTE
    assert any("spec file is gone" in note for note in result.notes)


def test_edited_template_folder_is_refused_naming_it(original: tuple[Path, Path], tmp_path: Path) -> None:
    project, run = relocated(original, tmp_path)
    css = project / "tpl" / "report.css"
    css.write_text(css.read_text(encoding="utf-8") + "h1 { color: red; }\n", encoding="utf-8")
    with pytest.raises(ReportAssetError) as caught:
        audit.verify_run(run)
    message = str(caught.value)
    assert "\n" not in message and str(project / "tpl") in message and "template folder" in message


def test_edited_logo_is_refused_naming_it(original: tuple[Path, Path], tmp_path: Path) -> None:
    project, run = relocated(original, tmp_path)
    Image.new("RGB", (8, 4), (200, 10, 10)).save(project / "logo.png")
    with pytest.raises(ReportAssetError, match="logo") as caught:
        audit.verify_run(run)
    assert str(project / "logo.png") in str(caught.value)


def test_folder_without_record_is_one_line(tmp_path: Path) -> None:
    with pytest.raises(OutputError, match="has no record.json") as caught:
        audit.verify_run(tmp_path)
    assert "\n" not in str(caught.value)


def test_other_font_file_is_explained_by_the_environment(original: tuple[Path, Path], tmp_path: Path,
                                                         monkeypatch: pytest.MonkeyPatch) -> None:
    """A renderer given another file for the regular face (as after a system font update) writes another
    PDF from the same numbers; verify says so and names the font."""
    shipped = assets.font_files()
    substitute = tmp_path / "DejaVuSans.ttf"  # same name, other glyphs: the oblique face's bytes
    substitute.write_bytes(shipped["italic"].read_bytes())

    def other_regular_face() -> dict[str, Path]:
        return {**shipped, "normal": substitute}

    # the renderer and the record both take the font files from reportgen.assets
    monkeypatch.setattr(render, "font_files", other_regular_face)
    monkeypatch.setattr(environment, "font_files", other_regular_face)
    result = audit.verify_run(original[1])
    assert result.verdict == verify.WITHIN_ERROR and result.exit_code == 0
    assert {c.name: c.identical for c in result.outputs} == {"results.csv": True, "report.html": True,
                                                              "report.pdf": False}
    assert [change.key for change in result.environment] == ["fonts.DejaVuSans.ttf"]
    lines = verify.summary_lines(result)
    assert lines[0].startswith(verify.WITHIN_ERROR)
    assert any("fonts.DejaVuSans.ttf" in line for line in lines)
    assert sum("no value differs" in line for line in lines) == 2  # the exact engine: the same numbers


def test_changed_number_is_not_reproduced(original: tuple[Path, Path], verified: tuple[verify.Verification, Path],
                                         tmp_path: Path) -> None:
    """judge alone: a rerun kept with --out against an original whose results.csv was edited."""
    kept = verified[1]
    edited = tmp_path / "edited"
    shutil.copytree(original[1], edited)
    edit_results(edited, "rho_median", 0.01)
    result = verify.judge(edited, kept)
    assert result.verdict == verify.NOT_REPRODUCED and result.exit_code == 1
    [difference] = [d for d in result.differences if not d.within]
    assert (difference.pair, difference.column, difference.kind) == ("a vs b", "rho_median", "numerical")
    assert difference.difference == pytest.approx(-0.01, rel=1e-6)
    table = verify.summary_lines(result)
    assert any("rho_median" in line and "-0.01" in line for line in table)


def test_no_environment_difference_is_said(original: tuple[Path, Path], tmp_path: Path) -> None:
    """Bytes that differ with nothing recorded to explain them: said in words, not left out."""
    edited = tmp_path / "edited"
    shutil.copytree(original[1], edited)
    with (edited / "report.html").open("a", encoding="utf-8") as handle:
        handle.write("\n")
    result = verify.judge(edited, original[1])
    assert result.verdict == verify.WITHIN_ERROR
    assert "no recorded environment difference explains the changed bytes" in verify.summary_lines(result)


def test_column_mcse_follows_the_normal_approximations() -> None:
    """Asymptotic standard errors, from memory: median sqrt(pi/2) sd/sqrt(n); a 2.5 % quantile
    sqrt(a(1-a))/phi(z_a) sd/sqrt(n) = 0.156125 / 0.058445 = 2.6713 sd/sqrt(n); a proportion
    sqrt(p(1-p)/n)."""
    entry = {"ess_bulk_min": 400.0, "ess_tail_min": 100.0, "rho": {"sd": 0.2}, "engine": "mcmc"}
    row = {"p_strong": "0.2"}
    assert verify.column_mcse("rho_mean", row, entry, 0.95) == pytest.approx(0.01)
    assert verify.column_mcse("rho_median", row, entry, 0.95) == pytest.approx(0.01 * math.sqrt(math.pi / 2))
    assert verify.column_mcse("rho_lower", row, entry, 0.95) == pytest.approx(2.6713 * 0.02, rel=1e-4)
    assert verify.column_mcse("p_strong", row, entry, 0.95) == pytest.approx(0.02)
    assert verify.column_mcse("rho_mean", row, {**entry, "ess_bulk_min": None}, 0.95) is None


@pytest.mark.slow
def test_sampler_run_reproduces_and_is_judged_against_its_mcse(tmp_path: Path) -> None:
    """One sampled run: the same seed on the same machine gives the same draws and bytes; an original
    that differs by half an MCSE is within Monte Carlo error, by 50 MCSE it is not reproduced."""
    spec = make_project(tmp_path / "project", engine="mcmc", assets=False)
    # one pair: the second would double the sampling and the pages, and each pair's draws are checked alike
    second_pair = '[[pairs]]\nx = "a"\ny = "c"\n\n'
    assert spec.read_text(encoding="utf-8").count(second_pair) == 1
    spec.write_text(spec.read_text(encoding="utf-8").replace(second_pair, ""), encoding="utf-8")
    runner.run(load_spec(spec), tmp_path / "run", command_line=["reportgen", "run"])
    kept = tmp_path / "kept"
    result = audit.verify_run(tmp_path / "run", out=kept)
    assert result.verdict == verify.BYTE_FOR_BYTE
    assert result.draws and all(check.identical for check in result.draws)
    [agreement] = [a for a in result.pairs if a.pair == "a vs b"]
    assert agreement.mcse is not None and agreement.mcse > 0
    for shift, verdict in ((0.5, verify.WITHIN_ERROR), (50.0, verify.NOT_REPRODUCED)):
        edited = tmp_path / f"edited-{shift}"
        shutil.copytree(tmp_path / "run", edited)
        edit_results(edited, "rho_mean", shift * agreement.mcse)
        judged = verify.judge(edited, kept)
        assert judged.verdict == verdict
        [largest] = [a.largest for a in judged.pairs if a.pair == "a vs b"]
        assert largest is not None and largest.column == "rho_mean" and largest.kind == "monte carlo"
        assert abs(largest.difference or 0.0) / (largest.mcse or 1.0) == pytest.approx(shift, rel=1e-3)
    lines = verify.summary_lines(verify.judge(tmp_path / "edited-0.5", kept))
    assert any("a vs b" in line and "0.50 MCSE" in line for line in lines)


def test_run_compared_with_a_previous_one_reruns_with_it(original: tuple[Path, Path], tmp_path: Path) -> None:
    """A run made with --previous prints a section on that earlier run: verify reruns it with the same one,
    and refuses when that folder was replaced since."""
    project, _ = relocated(original, tmp_path)
    later = tmp_path / "later"
    runner.run(load_spec(project / "spec.toml"), later, command_line=["reportgen", "run"], previous=original[1])
    assert audit.verify_run(later).verdict == verify.BYTE_FOR_BYTE
    replaced = tmp_path / "replaced"
    shutil.copytree(original[1], replaced)
    with (replaced / "record.json").open("a", encoding="utf-8") as handle:
        handle.write("\n")
    record = json.loads((later / "record.json").read_text(encoding="utf-8"))
    record["run"]["previous_path"] = str(replaced)
    (later / "record.json").write_text(json.dumps(record), encoding="utf-8")
    with pytest.raises(OutputError, match="previous run's record") as caught:
        audit.verify_run(later)
    assert str(replaced / "record.json") in str(caught.value)


def test_record_without_environment_part_is_said_not_guessed(original: tuple[Path, Path], tmp_path: Path) -> None:
    older = tmp_path / "older"
    shutil.copytree(original[1], older)
    record = json.loads((older / "record.json").read_text(encoding="utf-8"))
    del record["environment"]
    (older / "record.json").write_text(json.dumps(record), encoding="utf-8")
    result = verify.judge(older, original[1])
    assert result.verdict == verify.BYTE_FOR_BYTE and result.environment == ()
    assert any("no environment part" in note for note in result.notes)
