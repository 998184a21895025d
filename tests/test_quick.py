"""A quick look (--quick) is possible and says what it is: short chains judged against what they can reach,
the report marked DRAFT on every page; the same short chains without --quick fail the default checks."""

from __future__ import annotations

import re
import shlex
import shutil
import subprocess
from pathlib import Path

import pytest
from click.testing import CliRunner

from reportgen.cli import main
from reportgen.spec import load_spec, with_quick
from tests.conftest import correlated_frame, write_spec

README = Path(__file__).resolve().parents[1] / "README.md"


def _readme_quick_options() -> list[str]:
    """The options of the README's own quick-look command, after the output folder."""
    line = next(line for line in README.read_text(encoding="utf-8").splitlines() if "# a quick look" in line)
    words = shlex.split(line.split("#")[0])
    return words[words.index("--out") + 2:]


@pytest.fixture(scope="module")
def project(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("quick")
    correlated_frame(60, 0.6, seed=11).to_csv(folder / "data.csv", index=False)
    write_spec(folder, """
        [[pairs]]
        x = "a"
        y = "b"

        [[rules]]
        name = "any_link"
        statement = "above"
        threshold = 0.0
    """, quick=False)  # the default sampler settings and thresholds (ESS at least 400)
    return folder


def test_quick_settings_reach_their_own_thresholds(project: Path) -> None:
    spec = with_quick(load_spec(project / "spec.toml"))
    sampler, thresholds = spec.document.sampler, spec.document.diagnostics
    assert (sampler.draws, sampler.tune, sampler.chains) == (200, 200, 2)
    assert thresholds.ess_min <= sampler.draws * sampler.chains / 4 and spec.document.report.draft
    assert ("quick", "true") in spec.overrides
    kept = with_quick(load_spec(project / "spec.toml"), given=["draws"])
    assert kept.document.sampler.draws == 1000  # a setting the user gave stays


def test_the_readme_quick_look_passes_and_is_a_draft_on_every_page(project: Path) -> None:
    options = _readme_quick_options()
    assert options == ["--quick"]
    out = project / "quick"
    result = CliRunner().invoke(main, ["run", str(project / "spec.toml"), "--out", str(out), *options],
                                catch_exceptions=False)
    assert result.exit_code == 0, result.output
    assert "quick draft" in result.output
    if shutil.which("pdftotext"):  # poppler reads the PDF back, page by page
        text = subprocess.run(["pdftotext", str(out / "report.pdf"), "-"], capture_output=True, text=True,
                              check=True).stdout
        pages = text.split("\f")[:-1]
        assert pages and all("DRAFT" in page for page in pages)
        assert re.search(r"Draft: a quick look", pages[0])


def test_short_chains_without_quick_fail_the_default_checks(project: Path) -> None:
    out = project / "short"
    result = CliRunner().invoke(main, ["run", str(project / "spec.toml"), "--out", str(out),
                                       "--draws", "200", "--chains", "2"], catch_exceptions=False)
    assert result.exit_code == 1
    assert "DRAFT" not in (out / "report.html").read_text(encoding="utf-8")
