"""The change report, the history report and the run report's "Since the previous run" block.

Comparisons and histories are built by hand here, so these tests check only the presentation: which
numbers and sentences the contexts hold, how the HTML lays them out and escapes them, the figures.
Expected strings follow the run report's own number formats (reportgen.interpret): rho with two
decimals and a true minus sign, probabilities with three decimals, never printed as exactly 0 or 1.
"""

from __future__ import annotations

import datetime as dt
import math
import re
from pathlib import Path

import pytest

from reportgen.difference import RhoDifference
from reportgen.figures.history import change_intervals, rho_history
from reportgen.report.changes import changes_context, history_context
from reportgen.report.render import render_document, render_html
from reportgen.runs.compare import (
    Comparison,
    DataChange,
    PairChange,
    RhoSummary,
    RuleChange,
    SettingChange,
)
from reportgen.runs.history import History, HistoryPoint, PairHistory, RuleMark
from tests.conftest import correlated_frame, write_spec

HOSTILE = "<script>alert(1)</script>" + "Averyveryverylongcolumnnamewithoutanyspace" * 4
META = {"title": "Monthly water quality", "client": "Trust & <Co>", "author": "reportgen tests",
        "confidentiality": "Internal"}
OLD_DATE, NEW_DATE = dt.date(2026, 10, 31), dt.date(2026, 11, 30)


def difference(median: float, lower: float, upper: float, p_rose: float, p_moved: float) -> RhoDifference:
    return RhoDifference(median=median, lower=lower, upper=upper, credible_mass=0.95, p_rose=p_rose,
                         p_moved=p_moved, margin=0.1, method="by numerical convolution of the two exact posteriors")


def pair_change(key: str, *, flip: bool = False, status: tuple[str, str] = ("pass", "pass"),
                old: tuple[float, float, float] = (0.42, 0.21, 0.58),
                new: tuple[float, float, float] = (0.55, 0.38, 0.68)) -> PairChange:
    x, y = key.split(" vs ")
    rules = (RuleChange("strong", "not met", "met" if flip else "not met", 0.62, 0.97 if flip else 0.71),
             RuleChange("negative", "not met", "not met", 0.0004, 0.0001))
    return PairChange(
        key=key, x=x, y=y, old=RhoSummary(*old, n=84), new=RhoSummary(*new, n=105),
        difference=difference(0.13, -0.0249, 0.2751, 0.9531, 0.6412), basis="added_rows", rules=rules,
        old_status=status[0], new_status=status[1], sentence=f"rho of {key} rose by about 0.13.")


def comparison(pairs: tuple[PairChange, ...] | None = None, **changes: object) -> Comparison:
    if pairs is None:  # deliberately not in the order the report shows them
        pairs = (pair_change("a vs c"), pair_change("a vs b", status=("pass", "warn")),
                 pair_change(f"{HOSTILE} vs b", flip=True))
    data = DataChange(old_file="/runs/2026-10/data.csv", new_file="/runs/2026-11/data.csv", old_sha256="ab" * 32,
                      new_sha256="cd" * 32, old_rows=84, new_rows=105, relation="appended", added_rows=21,
                      sentence="The new data file holds the 84 earlier rows and 21 added rows.")
    fields: dict[str, object] = dict(
        old_label="2026-10-31", new_label="2026-11-30", old_date=OLD_DATE, new_date=NEW_DATE, margin=0.1,
        data=data, spec_changes=(SettingChange("priors.rho.a", "1", "2"),),
        version_changes=(SettingChange("versions.numpy", "2.3.1", "2.3.2"),), pairs=pairs,
        added=("d vs e",), removed=(f"{HOSTILE} vs gone",),
        basis_sentence="The earlier rows are compared with the 21 added rows only.",
        method_sentence="The difference is computed by numerical convolution of the two exact posteriors.")
    fields.update(changes)
    return Comparison(**fields)  # type: ignore[arg-type]


def history(drift: bool = True) -> History:
    dates = (dt.date(2026, 9, 30), OLD_DATE, NEW_DATE)
    values = ((0.40, 0.20, 0.57), (0.42, 0.22, 0.58), (0.71, 0.62, 0.79) if drift else (0.45, 0.27, 0.60))
    points = tuple(HistoryPoint(label=d.isoformat(), date=d, folder=f"/runs/{d:%Y-%m}", median=m, lower=lo,
                                upper=hi, n=80 + 10 * i, status="pass",
                                verdicts=(("strong", "met" if i == 2 and drift else "not met"),)
                                + ((("band", "not met"),) if i else ()))
                   for i, (d, (m, lo, hi)) in enumerate(zip(dates, values, strict=True)))
    rules = (RuleMark("strong", "above", 0.5, math.nan), RuleMark("band", "between", -0.1, 0.1))
    pair = PairHistory(key=f"{HOSTILE} vs b", x=HOSTILE, y="b", points=points, rules=rules, drift=drift,
                       sentence="The latest interval lies above every earlier one." if drift
                       else "Every interval overlaps the earlier ones.")
    return History(labels=tuple(d.isoformat() for d in dates), pairs=(pair,), credible_mass=0.95)


def test_change_context_orders_flips_first_and_formats_every_number() -> None:
    context = changes_context(comparison(), META)
    rows = context["block"]["rows"]
    assert [row["key"] for row in rows] == [f"{HOSTILE} vs b", "a vs b", "a vs c"]  # flip, status, rest
    flipped = rows[0]
    assert (flipped["old_median"], flipped["old_interval"], flipped["old_n"]) == ("0.42", "0.21 to 0.58", "84")
    assert (flipped["new_median"], flipped["new_interval"], flipped["new_n"]) == ("0.55", "0.38 to 0.68", "105")
    # a change keeps its sign; a true minus sign as in the run report
    assert (flipped["diff_median"], flipped["diff_interval"]) == ("+0.13", "\u22120.02 to +0.28")
    assert (flipped["p_rose"], flipped["p_moved"]) == ("0.953", "0.641")
    assert flipped["flips"] == [{"rule": "strong", "old": "not met", "new": "met", "old_met": False,
                                 "new_met": True, "probabilities": "0.620 \u2192 0.970"}]
    assert rows[1]["flips"] == [] and rows[1]["status_changed"] and rows[1]["new_status_class"] == "warn"
    assert all(isinstance(value, str | bool | list) for row in rows for value in row.values())
    block = context["block"]
    assert block["margin"] == "0.1" and block["mass"] == "95%"
    assert block["lead"] == ("Since the run of 31 October 2026 (2026-10-31), 1 verdict flipped and "
                             "1 pair changed status.")
    assert block["membership"] == f"1 pair added (d vs e) and 1 pair removed ({HOSTILE} vs gone)."
    assert context["banner"]["level"] == "warn"
    assert context["meta"]["date_long"] == "30 November 2026" and context["meta"]["client"] == "Trust & <Co>"
    assert block["settings_sentence"] == ("Changed between the runs: 1 setting of the spec and "
                                          "1 version or environment entry.")
    assert context["spec_changes"] == [{"key": "priors.rho.a", "old": "1", "new": "2"}]
    assert [row["what"] for row in context["data_rows"]] == ["File", "SHA-256", "Rows", "Rows added"]


def test_nothing_flipped_is_one_sentence_and_missing_values_show_a_dash() -> None:
    quiet = pair_change("a vs b", old=(math.nan, math.nan, math.nan))
    context = changes_context(comparison((quiet,), added=(), removed=(), spec_changes=(), version_changes=()),
                              META)
    block = context["block"]
    assert block["lead"] == ("Since the run of 31 October 2026 (2026-10-31), no verdict flipped and "
                             "no pair changed status.")
    assert block["membership"] == "" and context["banner"]["level"] == "pass"
    assert block["rows"][0]["old_median"] == "\u2014" and block["rows"][0]["old_interval"] == "\u2014"
    assert block["settings_sentence"].startswith("No setting of the spec")
    empty = changes_context(comparison(()), META)
    assert empty["figure"] == "" and "No pair is in both runs." in render_document("changes.html.j2", empty)


def test_change_report_html_escapes_labels_and_holds_the_sentences() -> None:
    html = render_document("changes.html.j2", changes_context(comparison(), META))
    assert "<script>alert" not in html and "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert "Trust &amp; &lt;Co&gt;" in html
    for text in ("What changed", "The earlier rows are compared with the 21 added rows only.",
                 "numerical convolution of the two exact posteriors", "priors.rho.a", "versions.numpy",
                 "P(moved<br>&gt; 0.1)", "\u22120.02 to +0.28", "Rows added", "data:image/svg+xml;base64,"):
        assert text in html, text
    # flipped pair first in the table, before the pair whose checks changed
    table = html[html.index('<table class="data compact changes">'):]
    assert table.index("Averyvery") < table.index("a vs b") < table.index("a vs c")
    assert "tr.sentence" in html  # the change report's own style rules are included


def test_history_context_and_html() -> None:
    context = history_context(history(), META)
    pair = context["pairs"][0]
    assert [row["label"] for row in pair["rows"]] == ["2026-11-30", "2026-10-31", "2026-09-30"]  # newest first
    assert pair["rows"][0]["median"] == "0.71" and pair["rows"][0]["interval"] == "0.62 to 0.79"
    assert pair["rules"] == [{"name": "strong", "statement": "\u03c1 > 0.5"},
                             {"name": "band", "statement": "\u22120.1 < \u03c1 < 0.1"}]
    assert [cell["verdict"] for cell in pair["rows"][-1]["verdicts"]] == ["not met", "\u2014"]  # band not yet set
    assert context["banner"]["level"] == "warn" and "drifted" in context["banner"]["text"]
    assert context["meta"]["date"] == "2026-11-30"
    steady = history_context(history(drift=False), META)
    assert steady["banner"]["level"] == "pass" and not steady["pairs"][0]["drift"]
    html = render_document("history.html.j2", context)
    assert "<script>alert" not in html and "&lt;script&gt;" in html and "Drift." in html


def _first_path(svg: str, gid: str) -> list[float]:
    group = svg[svg.index(f'<g id="{gid}">'):]
    path = re.search(r'<path d="([^"]+)"', group)
    assert path is not None
    return [float(v) for v in re.findall(r"-?\d+(?:\.\d+)?", path.group(1))]


def test_history_figure_is_deterministic_and_draws_the_threshold_line() -> None:
    pair = history().pairs[0]
    args = ([p.date for p in pair.points], [p.label for p in pair.points], [p.median for p in pair.points],
            [p.lower for p in pair.points], [p.upper for p in pair.points])
    kwargs = dict(rules=[("strong", "above", 0.5, math.nan)], verdicts=[["not met", "not met", "met"]],
                  mass=0.95, drift=True)
    svg = rho_history(*args, **kwargs)  # type: ignore[arg-type]
    assert svg == rho_history(*args, **kwargs)  # type: ignore[arg-type]
    x1, y1, x2, y2 = _first_path(svg, "rule-threshold-0")[:4]
    assert y1 == y2 and x2 > x1  # a horizontal line across the panel
    assert 'id="verdict-met-0"' in svg and 'id="verdict-not-met-0"' in svg
    assert "2026-" not in svg.split("<svg", 1)[0] and "<dc:date>" not in svg  # no dates in the metadata
    band = rho_history(*args, rules=[("band", "between", -0.1, 0.1)], verdicts=[["", "", ""]], mass=0.95)
    assert 'id="rule-band-0"' in band and "rule-threshold" not in band
    two = change_intervals(["a vs b", HOSTILE], ([0.4, 0.1], [0.2, -0.1], [0.6, 0.3]),
                           ([0.5, 0.2], [0.3, 0.0], [0.7, 0.4]), old_label="2026-10-31", new_label="2026-11-30",
                           mass=0.95)
    assert "<script" not in two


def _exact_run(tmp_path: Path) -> tuple[object, object, dict, dict]:
    from reportgen.fit import Fitter
    from reportgen.runner import RunClock, build_record, fit_all, prepare
    from reportgen.spec import load_spec, with_engine

    frame = correlated_frame(60, 0.5, seed=3)
    frame["c"] = correlated_frame(60, 0.2, seed=4)["a"]
    frame.to_csv(tmp_path / "data.csv", index=False)
    spec = with_engine(load_spec(write_spec(tmp_path, """
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
    """)), "exact")
    prepared = prepare(spec)
    fitter = Fitter(prepared.spec.document.sampler)
    clock = RunClock()
    results, fits = fit_all(prepared, fitter, clock, None)
    record = build_record(prepared.spec, prepared.table, results, fits, clock, ["test"], fitter.cores)
    return prepared, results, record, {p.pair.key: p for p in prepared.pairs}


def test_run_report_since_previous_block(tmp_path: Path) -> None:
    from reportgen.report.context import build_context

    prepared, results, record, pair_data = _exact_run(tmp_path)
    plain = build_context(prepared.spec, results, pair_data, record)  # type: ignore[attr-defined]
    assert plain["since_previous"] is None
    plain_html = render_html(plain)
    assert "Since the previous run" not in plain_html and "tr.sentence" not in plain_html
    assert "<h2>Summary of results</h2>\n  <table" in plain_html  # no trace of the block in the layout
    changed = comparison((pair_change("a vs b", flip=True), pair_change("a vs c")), added=(), removed=())
    context = build_context(prepared.spec, results, pair_data, record, changed)  # type: ignore[attr-defined]
    block = context["since_previous"]
    assert block["flips"][0]["rule"] == "strong" and block["flips"][0]["anchor"].startswith("pair-a-vs-b-")
    assert block["rows"][0]["anchor"] == block["flips"][0]["anchor"]
    html = render_html(context)
    summary, section = html.index("Summary of results"), html.index("<h2>Since the previous run</h2>")
    flips = html.index("<strong>Since the previous run.</strong>")
    assert summary < flips < html.index('<table class="data">') < section < html.index('class="pair"')


@pytest.mark.filterwarnings("ignore::DeprecationWarning")
def test_change_and_history_reports_render_as_pdf() -> None:
    from reportgen.report.render import render_pdf

    for template, context in (("changes.html.j2", changes_context(comparison(), META)),
                              ("history.html.j2", history_context(history(), META))):
        pdf, refused = render_pdf(render_document(template, context), context["meta"]["date"])
        assert pdf.startswith(b"%PDF") and refused == ()
