"""What a run writes stays safe with hostile inputs and surroundings (issue 8, items 2, 5, 8, 9, 15, 17).

results.csv opened in a spreadsheet runs no formula; inputs kept inside the output folder are never
deleted; ``init`` names the options the user typed and leaves no temporary file; a closed or full
stdout changes neither the outputs nor the exit code; a folder that cannot be written is refused
before the first fit. Runs use the exact engine, which fits nothing and takes about a second.
"""

from __future__ import annotations

import csv
import errno
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from PIL import Image

from reportgen import runner
from reportgen.runner import TEXT_COLUMNS, spreadsheet_cell
from tests.test_bad_input import GOOD, PAIR_ALPHA_B, invoke, project, refused

REPORTGEN = Path(sys.executable).with_name("reportgen")
FORMULA_NAMES = ('=HYPERLINK("http://x","y")', "+SUM(1+1)", "-2+3", "@SUM(A1)")


def _exact_run(spec: Path, out: Path) -> None:
    result = invoke("run", spec, "--out", out, "--engine", "exact")
    assert result.exit_code == 0, result.output


def _results(out: Path) -> list[dict[str, str]]:
    with (out / "results.csv").open(encoding="utf-8", newline="") as handle:
        return list(csv.DictReader(handle))


# ------------------------------------------------------------- 2: formulas in results.csv


def test_results_csv_neutralises_formula_column_names(tmp_path: Path) -> None:
    """Column names a spreadsheet would run as formulas get a leading apostrophe (common practice: OWASP
    "CSV Injection"); numbers, negative ones included, stay numbers in every other column."""
    rng = np.random.default_rng(3)
    x = rng.normal(size=30)
    frame = pd.DataFrame({FORMULA_NAMES[0]: x, FORMULA_NAMES[1]: -x + 0.3 * rng.normal(size=30),
                          FORMULA_NAMES[2]: rng.normal(size=30), FORMULA_NAMES[3]: rng.normal(size=30)})
    pairs = "".join(f"[[pairs]]\nx = {json.dumps(a)}\ny = {json.dumps(b)}\n"
                    for a, b in (FORMULA_NAMES[:2], FORMULA_NAMES[2:]))
    spec = project(tmp_path, pairs, data=frame)
    _exact_run(spec, tmp_path / "out")
    rows = _results(tmp_path / "out")
    assert [(r["x"], r["y"]) for r in rows] == [("'" + a, "'" + b) for a, b in (FORMULA_NAMES[:2], FORMULA_NAMES[2:])]
    assert rows[1]["x"] == "'-2+3"
    assert rows[0]["pair"] == "'" + f"{FORMULA_NAMES[0]} vs {FORMULA_NAMES[1]}"
    assert float(rows[0]["rho_median"]) < -0.5 and rows[0]["rho_median"].startswith("-")
    for row in rows:
        for column, cell in row.items():
            if column not in TEXT_COLUMNS and cell:
                float(cell)  # every other column holds numbers: a new text column must join TEXT_COLUMNS
            assert not cell.startswith(("=", "+", "-", "@", "\t", "\r")) or column not in TEXT_COLUMNS


@pytest.mark.parametrize(("column", "value", "written"), [
    ("x", "\tx", "'\tx"), ("x", "\rx", "'\rx"), ("pair", "=1+1 vs b", "'=1+1 vs b"), ("y", "@A1", "'@A1"),
    ("x", "-0.5", "'-0.5"),  # a text column: a column named -0.5 is a name, not our number
    ("rho_mean", "-0.5", "-0.5"), ("rho_lower", "-1e-05", "-1e-05"), ("n", 20, 20), ("seed", -3, -3),
    ("p_value", "=1+1", "'=1+1"), ("rho_mean", "-inf", "'-inf"), ("x", "plain name", "plain name"),
], ids=["tab", "carriage-return", "equals", "at", "text-that-looks-numeric", "negative", "exponent", "int",
        "negative-int", "text-in-a-number-column", "minus-inf", "plain"])
def test_spreadsheet_cell_goes_by_the_cell_type(column: str, value: object, written: object) -> None:
    """Tab and carriage return cannot reach a column name (the readers strip names), so they are tested here."""
    assert spreadsheet_cell(column, value) == written


# ----------------------------------------------------- 5: inputs inside the output folder


def _png(path: Path) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    Image.new("RGB", (8, 8), (20, 90, 160)).save(path)


def _with_report_key(spec: Path, line: str) -> None:
    text = spec.read_text(encoding="utf-8").replace('title = "Test report"', f'title = "Test report"\n{line}')
    spec.write_text(text, encoding="utf-8")


def _logo_in_draws(tmp_path: Path, spec: Path) -> Path:
    _png(tmp_path / "out" / "draws" / "logo.png")
    _with_report_key(spec, 'logo = "out/draws/logo.png"')
    return tmp_path / "out" / "draws" / "logo.png"


def _templates_in_draws(tmp_path: Path, spec: Path) -> Path:
    folder = tmp_path / "out" / "draws" / "tpl"
    folder.mkdir(parents=True)
    (folder / "notes.txt").write_text("my template notes", encoding="utf-8")
    _with_report_key(spec, 'templates = "out/draws/tpl"')
    return folder / "notes.txt"


def _linked_logo_in_draws(tmp_path: Path, spec: Path) -> Path:
    _png(tmp_path / "logo.png")
    (tmp_path / "out" / "draws").mkdir(parents=True)
    (tmp_path / "out" / "draws" / "link.png").symlink_to(tmp_path / "logo.png")
    _with_report_key(spec, 'logo = "out/draws/link.png"')
    return tmp_path / "out" / "draws" / "link.png"


@pytest.mark.parametrize(("place", "expected"), [
    (_logo_in_draws, "holds an input (report.logo"),
    (_templates_in_draws, "holds an input (report.templates"),
    (_linked_logo_in_draws, "holds an input (report.logo"),
], ids=["logo", "templates", "logo-link"])
def test_inputs_inside_the_output_folder_are_refused(tmp_path: Path, place: object, expected: str) -> None:
    spec = project(tmp_path)
    kept = place(tmp_path, spec)  # type: ignore[operator]
    before = kept.read_bytes()
    message = refused("run", spec, "--out", tmp_path / "out", "--engine", "exact")
    assert expected in message and "choose another --out folder" in message
    assert kept.read_bytes() == before


def test_a_folder_of_the_users_inside_out_is_refused_and_kept(tmp_path: Path) -> None:
    """The run replaces the whole output folder, so a file reportgen did not write (here in a folder named
    like a leftover of ours) is refused by name, before any fit, and left exactly as it was."""
    spec = project(tmp_path)
    out = tmp_path / "out"
    (out / "draws").mkdir(parents=True)
    (out / "draws" / "old-pair.nc").write_bytes(b"last run")
    (out / ".draws.old").mkdir()
    (out / ".draws.old" / "keep.txt").write_text("mine", encoding="utf-8")
    result = invoke("run", spec, "--out", out, "--engine", "exact")
    assert result.exit_code == 2, result.output
    assert "keep.txt" in result.output
    assert (out / ".draws.old" / "keep.txt").read_text(encoding="utf-8") == "mine"
    assert (out / "draws" / "old-pair.nc").read_bytes() == b"last run"


# ------------------------------------------------------------------------ 8 and 15: init


def _init_refused(tmp_path: Path, *args: str | Path) -> str:
    GOOD.to_csv(tmp_path / "data.csv", index=False)
    before = sorted(os.listdir(tmp_path))
    message = refused("init", tmp_path / "data.csv", *args)
    assert ".tmp" not in message
    assert sorted(os.listdir(tmp_path)) == before, "init left a file behind"
    return message


def test_init_onto_an_existing_folder_is_refused(tmp_path: Path) -> None:
    (tmp_path / "somedir").mkdir()
    message = _init_refused(tmp_path, "--pair", "alpha", "b", "-o", tmp_path / "somedir", "--force")
    assert message.startswith(f"{tmp_path / 'somedir'}: is a folder") and "spec.toml" in message
    assert list((tmp_path / "somedir").iterdir()) == []


@pytest.mark.parametrize(("args", "expected", "unwanted"), [
    (("--pair", "alpha", "zz"), "column `zz` (named in --pair alpha zz) is not in the data", "variables"),
    (("--pair", "alpha", "alpha"), "same.toml: `--pair alpha alpha`: a pair needs two different columns",
     "pairs[0]"),
    (("--pair", "alpha", "b", "--pair", "b", "alpha"), "`--pair b alpha`: the pair (b, alpha) is already listed "
     "at `--pair alpha b`", "pairs["),
    (("--pair", "alpha", "b", "--title", "t" * 201), "--title: should have at most 200 characters, got 201",
     "report.title"),
], ids=["missing-column", "same-column", "repeated-pair", "long-title"])
def test_init_messages_name_the_options_typed(tmp_path: Path, args: tuple[str, ...], expected: str,
                                              unwanted: str) -> None:
    message = _init_refused(tmp_path, *args, "-o", tmp_path / "same.toml")
    assert expected in message and unwanted not in message


def test_init_still_writes_a_spec_that_checks(tmp_path: Path) -> None:
    GOOD.to_csv(tmp_path / "data.csv", index=False)
    result = invoke("init", tmp_path / "data.csv", "--pair", "alpha", "b", "-o", tmp_path / "new" / "spec.toml")
    assert result.exit_code == 0, result.output
    assert sorted(os.listdir(tmp_path / "new")) == ["spec.toml"]
    assert invoke("check", tmp_path / "new" / "spec.toml").exit_code == 0


# ------------------------------------------------------------------ 9: stdout closed or full


@pytest.mark.parametrize("shell", ['"$0" run "$1" --out "$2" --engine exact > /dev/full',
                                   '"$0" run "$1" --out "$2" --engine exact | true'], ids=["full", "closed"])
def test_a_stdout_that_fails_keeps_the_exit_code_and_the_outputs(tmp_path: Path, shell: str) -> None:
    spec = project(tmp_path)
    out = tmp_path / "out"
    done = subprocess.run(["bash", "-o", "pipefail", "-c", shell, str(REPORTGEN), str(spec), str(out)],
                          capture_output=True, text=True, timeout=120, check=False)
    assert done.returncode == 0, done.stderr
    assert "Traceback" not in done.stderr and len(done.stderr.splitlines()) <= 1, done.stderr
    assert sorted(p.name for p in out.iterdir()) == sorted(runner.OUTPUT_FILES)
    assert [row["status"] for row in _results(out)] == ["pass"]


# ------------------------------------------------- 17: a folder that cannot be written


@pytest.fixture
def no_fitting(monkeypatch: pytest.MonkeyPatch) -> None:
    def fit_all(*args: object, **kwargs: object) -> None:
        raise AssertionError("the output folder was checked only after the fits")

    monkeypatch.setattr(runner, "fit_all", fit_all)


def _read_only(monkeypatch: pytest.MonkeyPatch, folder: Path) -> None:
    """Make ``folder`` refuse new files. chmod does not stop root, and the tests may run as root, so a
    real mode change is used only for other users; for root the probe is told what a read-only mount says."""
    if os.geteuid() != 0:
        folder.chmod(0o555)
        return
    original = tempfile.mkstemp

    def mkstemp(*args: object, **kwargs: object) -> tuple[int, str]:
        if Path(str(kwargs.get("dir"))).resolve() == folder.resolve():
            raise OSError(errno.EROFS, os.strerror(errno.EROFS))
        return original(*args, **kwargs)  # type: ignore[call-overload, no-any-return]

    monkeypatch.setattr(tempfile, "mkstemp", mkstemp)


@pytest.mark.parametrize("which", ["existing-out", "parent-of-new-out"])
def test_a_read_only_output_folder_is_refused_before_the_first_fit(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                                   no_fitting: None, which: str) -> None:
    spec = project(tmp_path, PAIR_ALPHA_B)
    locked = tmp_path / "locked"
    locked.mkdir()
    out = locked if which == "existing-out" else locked / "report"
    _read_only(monkeypatch, locked)
    try:
        message = refused("run", spec, "--out", out)
    finally:
        locked.chmod(0o755)
    assert message.startswith(f"{locked}: cannot write there (")
    assert "choose another --out folder or fix its permissions" in message
    assert sorted(os.listdir(locked)) == []


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes into a chmod 0o555 folder; the probe is simulated above")
def test_a_chmod_read_only_folder_is_refused(tmp_path: Path, no_fitting: None) -> None:
    spec = project(tmp_path, PAIR_ALPHA_B)
    (tmp_path / "locked").mkdir()
    (tmp_path / "locked").chmod(0o555)
    try:
        message = refused("run", spec, "--out", tmp_path / "locked")
    finally:
        (tmp_path / "locked").chmod(0o755)
    assert "cannot write there (Permission denied)" in message
