"""Where inputs may come from and where outputs may go."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
from click.testing import CliRunner

from reportgen.cli import main
from tests.conftest import write_spec

PAIR = '\n[[pairs]]\nx = "a"\ny = "b"\n'


def _data(folder: Path, name: str = "data.csv") -> None:
    folder.mkdir(parents=True, exist_ok=True)
    pd.DataFrame({"a": [1.0, 2.0, 3.5, 4.0, 5.5], "b": [2.0, 1.0, 4.0, 3.0, 6.0]}).to_csv(folder / name, index=False)


def test_confined_spec_cannot_read_data_above_its_folder(tmp_path: Path) -> None:
    _data(tmp_path)
    spec_folder = tmp_path / "specs"
    spec_folder.mkdir()
    spec = write_spec(spec_folder, PAIR.replace("[[pairs]]", "[[pairs]]"), data_name="../data.csv")
    assert CliRunner().invoke(main, ["check", str(spec)]).exit_code == 0  # allowed by default
    text = spec.read_text(encoding="utf-8").replace('path = "../data.csv"',
                                                     'path = "../data.csv"\nconfine_to_spec_folder = true')
    spec.write_text(text, encoding="utf-8")
    result = CliRunner().invoke(main, ["check", str(spec)])
    assert result.exit_code == 2
    assert "`data.path`" in result.output and "outside the spec's folder" in result.output


def test_confined_spec_cannot_point_the_logo_outside(tmp_path: Path) -> None:
    _data(tmp_path)
    spec = write_spec(tmp_path, PAIR)
    text = spec.read_text(encoding="utf-8")
    text = text.replace('title = "Test report"', 'title = "T"\nlogo = "/etc/passwd"')
    text = text.replace('path = "data.csv"', 'path = "data.csv"\nconfine_to_spec_folder = true')
    spec.write_text(text, encoding="utf-8")
    result = CliRunner().invoke(main, ["check", str(spec)])
    assert result.exit_code == 2 and "`report.logo`" in result.output


def test_output_that_would_overwrite_the_data_is_refused(tmp_path: Path) -> None:
    _data(tmp_path, "results.csv")
    spec = write_spec(tmp_path, PAIR, data_name="results.csv")
    before = (tmp_path / "results.csv").read_bytes()
    result = CliRunner().invoke(main, ["run", str(spec), "--out", str(tmp_path)])
    assert result.exit_code == 2 and "overwrite an input" in result.output
    assert (tmp_path / "results.csv").read_bytes() == before
