"""Which pairs get a page of their own ([report] pair_pages), the ranked table of pairs that meet a rule,
and a matrix that stays a readable heat map at 100 columns."""

from __future__ import annotations

import csv
import re
import textwrap
import tomllib
import xml.etree.ElementTree as ET
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

import reportgen
from reportgen import figures
from reportgen.errors import SpecError
from reportgen.report import selection
from reportgen.spec import load_spec
from reportgen.spec.schema import DEFAULT_PAIR_PAGES
from tests.conftest import correlated_frame, write_spec


def _spec_with(folder: Path, setting: str) -> Path:
    correlated_frame(30, 0.5, seed=1).to_csv(folder / "data.csv", index=False)
    path = write_spec(folder, """
        [[pairs]]
        x = "a"
        y = "b"
    """)
    text = path.read_text(encoding="utf-8").replace('title = "Test report"', f'title = "Test report"\n{setting}')
    path.write_text(text, encoding="utf-8")
    return path


@pytest.mark.parametrize("setting, expected", [
    ('pair_pages = "all"', "all"), ('pair_pages = "rules_met"', "rules_met"), ("pair_pages = 12", 12), ("", None),
])
def test_pair_pages_takes_all_rules_met_or_a_whole_number(tmp_path: Path, setting: str, expected: object) -> None:
    assert load_spec(_spec_with(tmp_path, setting)).document.report.pair_pages == expected


@pytest.mark.parametrize("value, words", [
    ("0", "at least 1"), ("-2", "at least 1"), ('"some"', '"all", "rules_met" or a whole number'),
    ('"All"', 'did you mean "all"'), ('"30"', "without quotes: 30"), ("true", "got true"),
    ("2.0", "without the decimal point: 2"), ("2.5", "got 2.5"), ("[3]", "got [3]"),
])
def test_a_bad_pair_pages_is_refused_in_one_line_naming_the_key(tmp_path: Path, value: str, words: str) -> None:
    with pytest.raises(SpecError) as caught:
        load_spec(_spec_with(tmp_path, f"pair_pages = {value}"))
    message = str(caught.value)
    assert "`report.pair_pages`" in message and words in message and "\n" not in message


def _result(key: str, median: float, met: bool = False, status: str = "pass") -> SimpleNamespace:
    rule = SimpleNamespace(name="material", verdict="met" if met else "not met", probability=0.99 if met else 0.2)
    return SimpleNamespace(key=key, title=key, n=100, status=status, rules=(rule,),
                           rho=SimpleNamespace(median=median, lower=median - 0.1, upper=median + 0.1))


def test_left_out_every_pair_has_a_page_up_to_the_default() -> None:
    results = [_result(f"p{i}", 0.01 * i) for i in range(DEFAULT_PAIR_PAGES)]
    chosen = selection.select_pair_pages(results, None)
    assert chosen.keys == tuple(r.key for r in results) and chosen.basis == "all"


def test_left_out_above_the_default_the_strongest_get_pages_in_the_runs_order() -> None:
    """|median| decides, so a strong negative pair counts; equal strengths keep the run's order."""
    medians = [0.0] * (DEFAULT_PAIR_PAGES + 10)
    medians[3], medians[7] = -0.9, 0.8
    results = [_result(f"p{i:02d}", m) for i, m in enumerate(medians)]
    chosen = selection.select_pair_pages(results, None)
    assert len(chosen.keys) == DEFAULT_PAIR_PAGES and chosen.basis == "strongest"
    # the two strong pairs, then the first 28 of the tied ones, all in the run's order
    tied = [f"p{i:02d}" for i in range(len(medians)) if i not in (3, 7)][:DEFAULT_PAIR_PAGES - 2]
    assert chosen.keys == tuple(sorted(["p03", "p07", *tied]))


def test_a_number_picks_that_many_of_the_strongest_and_more_than_there_are_is_all() -> None:
    results = [_result("weak", 0.1), _result("strong", -0.7), _result("middle", 0.4), _result("nan", float("nan"))]
    assert selection.select_pair_pages(results, 2).keys == ("strong", "middle")
    every = selection.select_pair_pages(results, 10)
    assert len(every.keys) == 4 and every.basis == "all"


def test_rules_met_pages_only_pairs_that_meet_a_rule_and_never_a_failed_fit() -> None:
    results = [_result("met", 0.2, met=True), _result("not", 0.9), _result("failed", 0.9, met=True, status="fail")]
    chosen = selection.select_pair_pages(results, "rules_met")
    assert chosen.keys == ("met",)
    assert "1 pair of 3 meets at least one decision rule and has a page" in selection.selection_sentence(chosen)
    assert "none of the 1 pairs" in selection.selection_sentence(
        selection.select_pair_pages([_result("not", 0.9)], "rules_met"))


def test_the_page_sentence_says_every_pair_is_in_the_results_files() -> None:
    results = [_result(f"p{i}", 0.0) for i in range(50)]
    for setting in (None, 5, "all", "rules_met"):
        sentence = selection.selection_sentence(selection.select_pair_pages(results, setting))
        assert "results.csv and results.parquet" in sentence, setting


def test_the_ranked_table_is_strongest_first_capped_and_says_how_many_more() -> None:
    results = [_result(f"p{i}", m, met=True) for i, m in enumerate([0.3, -0.8, 0.5, 0.5])]
    results.append(_result("not_met", 0.95))
    rows, meeting = selection.ranked_rule_rows(results, {"p2"}, lambda key: f"#{key}", limit=3)
    assert meeting == 4
    assert [row["title"] for row in rows] == ["p1", "p2", "p3"]  # 0.5 and 0.5 tie: the run's order
    assert [row["anchor"] for row in rows] == ["", "#p2", ""]  # only a pair with a page is linked
    note = selection.ranked_note(len(rows), meeting, len(results))
    assert "4 pairs of 5" in note and "other 1 are in results.csv" in note


def _run_four_pairs(folder: Path, setting: str) -> Path:
    rng = np.random.default_rng(4)
    base = rng.normal(size=60)
    frame = pd.DataFrame({"a": base, "b": base + rng.normal(scale=0.3, size=60),
                          "c": rng.normal(size=60), "d": -base + rng.normal(scale=1.0, size=60)})
    frame.to_csv(folder / "data.csv", index=False)
    path = write_spec(folder, textwrap.dedent("""
        [[pair_sets]]
        name = "four"
        columns = ["a", "b", "c", "d"]

        [[rules]]
        name = "material"
        statement = "above"
        threshold = 0.3
    """))
    text = path.read_text(encoding="utf-8").replace('title = "Test report"', f'title = "Test report"\n{setting}')
    path.write_text(text, encoding="utf-8")
    reportgen.run(path, folder / "out", engine="exact")
    return folder / "out"


def test_a_pair_without_a_page_has_no_section_but_is_in_the_results(tmp_path: Path) -> None:
    out = _run_four_pairs(tmp_path, "pair_pages = 1")
    html = (out / "report.html").read_text(encoding="utf-8")
    with (out / "results.csv").open(encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    assert len(rows) == 6  # every pair of the four columns
    strongest = max(rows, key=lambda row: abs(float(row["rho_median"])))
    sections = re.findall(r'<section class="pair[^"]*" id="([^"]+)"', html)
    assert len(sections) == 1
    assert sections[0].startswith("pair-" + re.sub(r"[^a-z0-9]", "-", strongest["pair"].lower())[:20])
    assert "1 of the 6 pairs have a page of their own" in html
    assert "results.csv and results.parquet" in html
    # a link on page one points only at a page that exists
    assert set(re.findall(r'href="#(pair-[^"]+)"', html)) == set(sections)
    assert len(pd.read_parquet(out / "results.parquet")) == 6
    # the record still names the setting, so a rerun makes the same pages
    spec_text = (tmp_path / "spec.toml").read_text(encoding="utf-8")
    assert tomllib.loads(spec_text)["report"]["pair_pages"] == 1


def test_a_large_matrix_is_a_heat_map_without_numbers_and_a_small_one_keeps_them() -> None:
    """At 100 columns (4,950 cells) no cell prints its value: the drawn strings (one SVG text element per
    line in matplotlib's SVG writer) are the labels and the colour bar's, not thousands of numbers."""
    rng = np.random.default_rng(1)
    for k, values_shown in ((100, False), (8, True)):
        medians = np.tanh(rng.normal(scale=0.5, size=(k, k)))
        svg = figures.correlation_matrix([f"variable {i}" for i in range(k)], medians, np.abs(medians) > 0.3)
        drawn = ["".join(e.itertext()) for e in ET.fromstring(svg).iter("{http://www.w3.org/2000/svg}text")]
        numbers = [text for text in drawn if re.fullmatch(r"\u2212?\d\.\d\d", text)]
        assert figures.matrix_shows_values(k) is values_shown
        if values_shown:
            assert len(numbers) == k * (k - 1) // 2
        else:
            assert not numbers and "<image" in svg  # the colours are one picture
            assert len(drawn) < 2 * k + 20  # labels (some left out), colour bar and legend


def test_a_list_cut_short_says_how_many_more_and_links_only_paged_pairs() -> None:
    items = [{"key": f"p{i}", "anchor": f"#p{i}", "title": f"p{i}"} for i in range(25)]
    kept, left_out = selection.capped(items, {"p1"}, limit=20)
    assert len(kept) == 20 and left_out == 5
    assert [item["anchor"] for item in kept[:3]] == ["", "#p1", ""]
    assert selection.more_sentence(5, "are flagged", "see results.csv") == (
        "5 more pairs (not listed here) are flagged; see results.csv.")
    assert selection.more_sentence(1, "have a borderline verdict", "see results.csv") == (
        "1 more pair (not listed here) has a borderline verdict; see results.csv.")
    assert selection.more_sentence(0, "are flagged", "see results.csv") == ""
