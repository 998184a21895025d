"""A quick look (--quick) is possible and says what it is: short chains judged against what they can reach,
the report marked DRAFT on every page; the same short chains without --quick fail the default checks."""

from __future__ import annotations

import json
import re
import shlex
import shutil
import subprocess
from pathlib import Path

import pytest
from click.testing import CliRunner

from reportgen.api import _with_overrides
from reportgen.cli import main
from reportgen.spec import load_spec, with_engine, with_quick
from reportgen.spec.loading import replaced_priors
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
    # reportgen.run(..., quick=True) applies the same settings, keeping a draws= it is given
    from_python = _with_overrides(load_spec(project / "spec.toml"), None, None, True, draws=300)
    assert (from_python.document.sampler.draws, from_python.document.sampler.chains) == (300, 2)
    assert from_python.document.diagnostics.ess_min == 150 and from_python.document.report.draft


def test_the_readme_quick_look_passes_and_is_a_draft_on_every_page(project: Path) -> None:
    options = _readme_quick_options()
    assert options == ["--quick"]
    out = project / "quick"
    result = CliRunner().invoke(main, ["run", str(project / "spec.toml"), "--out", str(out), *options],
                                catch_exceptions=False)
    assert result.exit_code == 0, result.output
    # said at the start, before the summary of what was written: 2 chains of 200 draws judged against
    # ESS 100 (a quarter of the 400 draws)
    first = result.stdout.splitlines()[0]
    assert first.startswith("quick draft: 200 draws in each of 2 chains") and "ESS at least 100" in first
    assert "DRAFT" in first
    assert "cannot reach ESS" not in result.stderr
    if shutil.which("pdftotext"):  # poppler reads the PDF back, page by page
        text = subprocess.run(["pdftotext", str(out / "report.pdf"), "-"], capture_output=True, text=True,
                              check=True).stdout
        pages = text.split("\f")[:-1]
        assert pages and all("DRAFT" in page for page in pages)
        assert re.search(r"Draft: a quick look", pages[0])


@pytest.mark.usefixtures("placeholder_pdf")  # the console, the HTML and the record are read
def test_short_chains_without_quick_fail_the_default_checks(project: Path) -> None:
    out = project / "short"
    result = CliRunner().invoke(main, ["run", str(project / "spec.toml"), "--out", str(out),
                                       "--draws", "200", "--chains", "2"], catch_exceptions=False)
    assert result.exit_code == 1
    assert "DRAFT" not in (out / "report.html").read_text(encoding="utf-8")
    assert "quick draft" not in result.stdout
    # 400 draws in all against the default ESS threshold of 400: the failure line says what to do
    failure = next(line for line in result.stderr.splitlines() if "failed the convergence checks" in line)
    assert "cannot reach ESS 400" in failure and "--quick" in failure and "--draws" in failure


@pytest.mark.usefixtures("placeholder_pdf")  # the console, the HTML and the record are read
def test_the_exact_engine_says_which_priors_it_replaces(project: Path) -> None:
    """The spec's default priors (normal means, half-normal SDs) are not what the exact engine integrates
    under (Jeffreys' flat means and 1/sigma SDs): the console and the record say so."""
    out = project / "exact"
    result = CliRunner().invoke(main, ["run", str(project / "spec.toml"), "--out", str(out), "--engine", "exact"],
                                catch_exceptions=False)
    assert result.exit_code == 0, result.output
    lines = [line for line in result.stdout.splitlines() if line.startswith("exact engine:")]
    assert lines == [result.stdout.splitlines()[0]]
    assert "normal prior on the means and half-normal prior on the SDs are replaced by Jeffreys'" in lines[0]
    record = json.loads((out / "record.json").read_text(encoding="utf-8"))
    assert record["reproducible"]["priors_replaced"] == ["normal means", "half-normal SDs"]


def test_nothing_is_replaced_when_the_spec_has_jeffreys_priors_or_the_sampler_runs(project: Path,
                                                                                   tmp_path: Path) -> None:
    correlated_frame(20, 0.3, seed=5).to_csv(tmp_path / "data.csv", index=False)
    spec = write_spec(tmp_path, """
        [priors.means]
        family = "flat"

        [priors.sds]
        family = "jeffreys"

        [[pairs]]
        x = "a"
        y = "b"
    """)
    assert replaced_priors(with_engine(load_spec(spec), "exact")) == ()
    # the sampler uses the priors the spec gives, whatever they are
    default = load_spec(project / "spec.toml")
    assert replaced_priors(default) == ()
    assert replaced_priors(with_engine(default, "exact")) == ("normal means", "half-normal SDs")
