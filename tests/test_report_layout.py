"""The printed report as a client reads it: text inside the margins, honest sampler-check badges, greyed
verdicts of a failed fit, a draft banner on every page, a table of contents, a footer of the report's own.

Page text and word positions are read back with poppler's ``pdftotext`` (an outside reader of the PDF),
so these tests check the document as printed, not our HTML.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

import reportgen
from reportgen.report.context import NOT_JUDGED, rule_cells, sampler_checks, spec_without_comments
from tests.conftest import correlated_frame, write_spec

pytestmark = pytest.mark.skipif(shutil.which("pdftotext") is None, reason="needs poppler's pdftotext")

MM = 72.0 / 25.4  # PDF points per millimetre
RIGHT_MARGIN_MM = 18.0  # the @page margin in report.css
A4_WIDTH_PT = 595.28  # ISO 216 A4, 210 mm

LONG_X = ("Share of single-parent households receiving the supplementary winter heating allowance in the "
          "reporting district")
LONG_Y = "Averageannualconcentrationofairbornefineparticulatematterbelowtwoandahalfmicrometres level"


def _pages(pdf: Path) -> list[str]:
    text = subprocess.run(["pdftotext", "-layout", str(pdf), "-"], check=True, capture_output=True,
                          text=True).stdout
    return text.split("\f")[:-1]


def _word_boxes(pdf: Path) -> list[tuple[int, float, str]]:
    """(page, right edge in points, word) for every word poppler finds."""
    html = subprocess.run(["pdftotext", "-bbox", str(pdf), "-"], check=True, capture_output=True,
                          text=True).stdout
    boxes, page = [], 0
    for line in html.splitlines():
        if "<page " in line:
            page += 1
        match = re.search(r'xMax="([0-9.]+)"[^>]*>(.*?)</word>', line)
        if match:
            boxes.append((page, float(match.group(1)), match.group(2)))
    return boxes


def _long_label_run(folder: Path, engine: str) -> Path:
    frame = correlated_frame(40, 0.5, seed=3, names=("hh", "pm"))
    frame.to_csv(folder / "data.csv", index=False)
    spec = write_spec(folder, f"""
        [variables.hh]
        label = "{LONG_X}"
        unit = "percentage points of all households"

        [variables.pm]
        label = "{LONG_Y}"
        unit = "micrograms per cubic metre"

        [[pairs]]
        x = "hh"
        y = "pm"

        [[rules]]
        name = "long_rule_name_for_table"
        description = "an association at least moderately positive by the standards that the client has agreed"
        statement = "above"
        threshold = 0.3
    """, quick=engine != "exact")
    text = spec.read_text(encoding="utf-8").replace(
        'title = "Test report"',
        'title = "Test report"\nclient = "Northfold District Council"\ndraft = true\n'
        "# a starter's note that the client must not read")
    spec.write_text(text, encoding="utf-8")
    reportgen.run(spec, folder / "out", engine=engine)
    return folder / "out" / "report.pdf"


@pytest.fixture(scope="module")
def long_label_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return _long_label_run(tmp_path_factory.mktemp("long"), "exact")


@pytest.fixture(scope="module")
def long_label_sampled_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The same spec sampled (short chains): its posterior table has the sampler's four extra columns."""
    return _long_label_run(tmp_path_factory.mktemp("long_sampled"), "mcmc")


@pytest.mark.parametrize("run", ["long_label_run", "long_label_sampled_run"])
def test_the_widest_labels_stay_inside_the_right_margin(run: str, request: pytest.FixtureRequest) -> None:
    """Every word on every page ends left of the text block's right edge (A4 less the 18 mm margin)."""
    pdf = request.getfixturevalue(run)
    limit = A4_WIDTH_PT - RIGHT_MARGIN_MM * MM + 1.0  # one point for glyph overhang
    outside = [(page, round(right, 1), word) for page, right, word in _word_boxes(pdf) if right > limit]
    assert not outside, outside[:10]
    if run == "long_label_sampled_run":
        assert "MCSE" in " ".join(word for _, _, word in _word_boxes(pdf))  # the widest table is there


def test_a_draft_says_so_on_every_page(long_label_run: Path) -> None:
    pages = _pages(long_label_run)
    assert len(pages) >= 4
    assert all("DRAFT" in page for page in pages), [i + 1 for i, p in enumerate(pages) if "DRAFT" not in p]
    assert "Draft: this report is marked as a draft" in pages[0]


def test_the_exact_engine_never_claims_a_sampler_check_passed(long_label_run: Path) -> None:
    text = " ".join(_pages(long_label_run))
    assert "not run" in text and "No sampler ran" in text
    assert not re.search(r"\bPASS\b|passed every|convergence check", text)


def test_contents_footer_and_appendix_read_as_the_clients_own(long_label_run: Path) -> None:
    pages = _pages(long_label_run)
    text = "\n".join(pages)
    assert "Contents" in text and re.search(r"Methods\s*\.[ .]*\d+", text)
    # the footer names the client on every page after the first, never a generic phrase
    assert all("Northfold District Council" in page for page in pages[1:])
    assert "Bayesian correlation report" not in text
    assert "starter's note" not in text  # comment lines of the spec are left out of the appendix


def test_spec_comments_are_left_out_and_settings_kept() -> None:
    text = "# note\n[report]\n  # indented note\ntitle = \"a # not a comment\"\n\n\n# more\n[data]\npath = \"d.csv\"\n"
    shown = spec_without_comments(text)
    assert shown == '[report]\ntitle = "a # not a comment"\n\n[data]\npath = "d.csv"\n'
    import tomllib  # the standard library's TOML reader: the shown text still means the same settings
    assert tomllib.loads(shown) == tomllib.loads(text)


def _rule(verdict: str) -> SimpleNamespace:
    return SimpleNamespace(name="r", statement="\u03c1 > 0.3", probability=0.99, required=0.95, verdict=verdict,
                           sentence="s", mcse=0.003, borderline=True)


def test_a_failed_fits_verdicts_are_greyed_and_not_judged() -> None:
    failed = SimpleNamespace(status="fail", rules=[_rule("met")], engine="mcmc", model="normal")
    cell = rule_cells(failed)[0]  # type: ignore[arg-type]
    assert cell["verdict"] == NOT_JUDGED and cell["verdict_class"] == "verdict-void"
    assert not cell["judged"] and not cell["borderline"]
    passed = SimpleNamespace(status="pass", rules=[_rule("met")], engine="mcmc", model="normal")
    assert rule_cells(passed)[0]["verdict_class"] == "verdict-met"  # type: ignore[arg-type]


@pytest.mark.parametrize(("engine", "model", "status", "label"), [
    ("exact", "normal", "pass", "not run"), ("mcmc", "rank", "pass", "not run"),
    ("mcmc", "normal", "pass", "passed"), ("mcmc", "normal", "warn", "warn"), ("mcmc", "normal", "fail", "failed"),
])
def test_sampler_check_badges(engine: str, model: str, status: str, label: str) -> None:
    result = SimpleNamespace(engine=engine, model=model, status=status)
    assert sampler_checks(result)["label"] == label  # type: ignore[arg-type]



def test_the_compact_layout_needs_fewer_pages(tmp_path: Path) -> None:
    """Three pairs: in the compact layout they follow one another, so the PDF is shorter than the full one."""
    frame = correlated_frame(40, 0.5, seed=5)
    frame["c"] = frame["a"] * 0.3 + np.random.default_rng(6).normal(size=40)
    frame.to_csv(tmp_path / "data.csv", index=False)
    body = """
        [[pairs]]
        x = "a"
        y = "b"

        [[pairs]]
        x = "a"
        y = "c"

        [[pairs]]
        x = "b"
        y = "c"
    """
    counts = {}
    for layout in ("full", "compact"):
        spec = write_spec(tmp_path, body, quick=False)
        spec.write_text(spec.read_text(encoding="utf-8").replace(
            'title = "Test report"', f'title = "Test report"\nlayout = "{layout}"'), encoding="utf-8")
        reportgen.run(spec, tmp_path / layout, engine="exact")
        counts[layout] = len(_pages(tmp_path / layout / "report.pdf"))
    assert counts["compact"] < counts["full"], counts


def test_trailing_comments_go_and_hashes_in_strings_stay() -> None:
    """The starter's notes after a value are dropped; a # inside a basic or literal string is part of the
    value. The standard library's TOML reader (tomllib) reads the same settings from both texts."""
    import tomllib

    text = ('[report]\ntitle = "Plant #4 \\"east\\" # not a note" # a note\nlogo = \'a#b.png\'  # path\n'
            'subtitle = """\nline # kept\n"""\n[data]\npath = "d.csv"   # relative to this file\n')
    shown = spec_without_comments(text)
    assert "# a note" not in shown and "# path" not in shown and "relative to" not in shown
    assert "# not a note" in shown and "a#b.png" in shown and "line # kept" in shown
    assert tomllib.loads(shown) == tomllib.loads(text)
