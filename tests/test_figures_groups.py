"""Tests for the forest plot of rho by group (each group alone, partially pooled, all rows)."""

from __future__ import annotations

import functools
import math
import xml.etree.ElementTree as ET
from collections.abc import Callable

import pytest
from matplotlib.figure import Figure

from reportgen import figures as F
from reportgen.figures.groups import MAX_GROUPS, GroupRow, group_forest
from reportgen.figures.style import _style, _to_svg

SVG_NS = "{http://www.w3.org/2000/svg}"
XLINK_HREF = "{http://www.w3.org/1999/xlink}href"
HOSTILE = "<script>alert('x')</script> $x^2$ --> \x00\x07\x1b[31m\u202e " + "long" * 125  # 500+ characters

OVERALL = (0.31, 0.27, 0.35)
MEAN = (0.30, 0.18, 0.41)


def parse_svg(svg: str) -> ET.Element:
    assert isinstance(svg, str)
    root = ET.fromstring(svg)
    assert root.tag.endswith("svg")
    return root


def drawn_strings(element: ET.Element) -> list[str]:
    """The strings a figure draws: matplotlib writes each line of text as one SVG text element."""
    return ["".join(e.itertext()).strip() for e in element.iter(f"{SVG_NS}text")]


def group(root: ET.Element, gid: str) -> ET.Element | None:
    return root.find(f".//{SVG_NS}g[@id='{gid}']")


def marker_xy(root: ET.Element, gid: str) -> tuple[float, float]:
    """Centre of the single marker a one-point scatter with this gid draws (a <use> of its marker path)."""
    g = group(root, gid)
    assert g is not None, f"no group {gid}"
    uses = list(g.iter(f"{SVG_NS}use"))
    assert len(uses) == 1
    return float(uses[0].get("x", "nan")), float(uses[0].get("y", "nan"))


def axes_x_range(root: ET.Element) -> tuple[float, float]:
    """Left and right edge of the axes background (matplotlib's second patch), in SVG points."""
    g = group(root, "patch_2")
    assert g is not None
    path = g.find(f"{SVG_NS}path")
    assert path is not None
    numbers = [float(t) for t in path.get("d", "").replace("M", " ").replace("L", " ").replace("z", " ").split()]
    xs = numbers[0::2]
    return min(xs), max(xs)


def height_in(root: ET.Element) -> float:
    value = root.get("height")
    assert value is not None and value.endswith("pt")
    return float(value[:-2]) / 72.0


def make_rows(k: int, *, pooled: bool) -> list[GroupRow]:
    """k groups whose pooled medians lie a third of the way towards 0.3 (a typical shrinkage picture)."""
    rows = []
    for i in range(k):
        median = -0.6 + 1.2 * i / max(1, k - 1)
        low, high = max(-1.0, median - 0.15), min(1.0, median + 0.15)
        extra = {}
        if pooled:
            shrunk = median + (0.3 - median) / 3.0
            extra = {"pooled_median": shrunk, "pooled_lower": shrunk - 0.1, "pooled_upper": shrunk + 0.1}
        rows.append(GroupRow(f"Clinic {i}", 100 + 1000 * i, median, low, high, **extra))
    return rows


def build(rows: list[GroupRow] | None = None, **kwargs: object) -> str:
    options: dict[str, object] = {"overall": OVERALL, "overall_label": "All rows pooled", "mass": 0.95}
    options.update(kwargs)
    return group_forest(make_rows(4, pooled=True) if rows is None else rows, **options)  # type: ignore[arg-type]


@functools.cache
def pooled_svg() -> str:
    return build(mean=MEAN, mean_label="Population mean", group_noun="clinic")


@functools.cache
def separate_svg() -> str:
    return build(make_rows(4, pooled=False))


# --------------------------------------------------------------------------
# Properties every report figure has (as in tests/test_figures.py)
# --------------------------------------------------------------------------


@pytest.mark.parametrize("make", [pooled_svg, separate_svg])
def test_returns_full_width_svg_with_text_in_the_report_face(make: Callable[[], str]) -> None:
    root = parse_svg(make())
    assert float(root.get("width", "0pt")[:-2]) / 72.0 == pytest.approx(F.FULL_WIDTH)
    assert root.find(f".//{SVG_NS}path") is not None
    texts = list(root.iter(f"{SVG_NS}text"))
    assert texts and all("font-family: 'Report Sans', 'DejaVu Sans', sans-serif" in t.get("style", "") for t in texts)
    assert "<dc:date>" not in make() and "Matplotlib v" not in make()


def test_same_inputs_give_same_bytes() -> None:
    assert build(mean=MEAN, mean_label="Population mean", group_noun="clinic") == pooled_svg()
    assert build(make_rows(4, pooled=False)) == separate_svg()


def test_reexported_from_the_package() -> None:
    assert F.group_forest is group_forest and F.GroupRow is GroupRow


# --------------------------------------------------------------------------
# What is drawn
# --------------------------------------------------------------------------


def test_medians_sit_at_their_value_on_the_fixed_axis() -> None:
    """A linear axis from -1 to 1 puts rho at the fraction (rho + 1) / 2 of the axes width (definition)."""
    root = parse_svg(pooled_svg())
    left, right = axes_x_range(root)
    rows = make_rows(4, pooled=True)
    for i, row in enumerate(rows):
        x_alone, y_alone = marker_xy(root, f"group-{i}-alone-median")
        x_pooled, y_pooled = marker_xy(root, f"group-{i}-pooled-median")
        assert (x_alone - left) / (right - left) == pytest.approx((row.median + 1) / 2, abs=1e-4)
        assert (x_pooled - left) / (right - left) == pytest.approx((row.pooled_median + 1) / 2, abs=1e-4)
        assert y_pooled > y_alone  # SVG y grows downwards: the pooled interval is just below
    x_overall, _ = marker_xy(root, "overall-median")
    assert (x_overall - left) / (right - left) == pytest.approx((OVERALL[0] + 1) / 2, abs=1e-4)


def test_rows_top_to_bottom_then_separated_bottom_section() -> None:
    root = parse_svg(pooled_svg())
    ys = [marker_xy(root, f"group-{i}-alone-median")[1] for i in range(4)]
    assert ys == sorted(ys)
    rule = group(root, "section-rule")
    assert rule is not None
    rule_path = rule.find(f"{SVG_NS}path")
    assert rule_path is not None
    rule_y = float(rule_path.get("d", "").split()[2])
    last_pooled_y = marker_xy(root, "group-3-pooled-median")[1]
    overall_y = marker_xy(root, "overall-median")[1]
    mean_y = marker_xy(root, "pooled-mean-median")[1]
    assert last_pooled_y < rule_y < overall_y < mean_y
    assert group(root, "zero-line") is not None


def test_labels_show_group_size_with_thousands_separators_and_numbers() -> None:
    rows = [GroupRow("North", 1234567, 0.2, 0.1, 0.3), GroupRow("South", 12, -0.05, -0.4, 0.3)]
    texts = drawn_strings(parse_svg(build(rows)))
    # English thousands separators and the typographic minus U+2212 (common practice)
    assert "n = 1,234,567" in texts and "n = 12" in texts
    assert "−0.05  [−0.40, 0.30]" in texts
    assert "0.31  [0.27, 0.35]" in texts  # the overall row
    assert "All rows pooled" in texts
    assert any("95% credible interval" in t for t in texts)  # mass in the axis label


def test_pooled_legend_only_when_pooled_values_are_given() -> None:
    with_pooled = parse_svg(pooled_svg())
    legend = group(with_pooled, "group-legend")
    assert legend is not None
    assert drawn_strings(legend) == ["This clinic alone", "Partially pooled"]
    without = parse_svg(separate_svg())
    assert group(without, "group-legend") is None
    assert not any("Partially pooled" in t for t in drawn_strings(without))
    assert not any(e.get("id", "").endswith("-pooled-median") for e in without.iter())


def test_pooled_interval_drawn_only_for_rows_that_have_one() -> None:
    rows = make_rows(3, pooled=True)
    rows[1] = GroupRow(rows[1].label, rows[1].n, rows[1].median, rows[1].lower, rows[1].upper)
    root = parse_svg(build(rows))
    assert group(root, "group-0-pooled-median") is not None
    assert group(root, "group-1-pooled-median") is None
    assert group(root, "group-2-pooled-median") is not None
    assert group(root, "group-legend") is not None


def test_mean_row_is_optional_and_gets_a_default_label() -> None:
    assert group(parse_svg(separate_svg()), "pooled-mean-median") is None
    texts = drawn_strings(parse_svg(build(mean=MEAN)))
    assert "Partially pooled mean" in texts


def test_height_grows_with_rows_up_to_the_cap() -> None:
    heights = [height_in(parse_svg(build(make_rows(k, pooled=True)))) for k in (2, 12, MAX_GROUPS)]
    assert heights[0] < heights[1] < heights[2] <= 10.0 + 1e-6


# --------------------------------------------------------------------------
# Untrusted labels
# --------------------------------------------------------------------------


def test_hostile_labels_are_plain_shortened_text() -> None:
    rows = [GroupRow(HOSTILE, 5, 0.1, -0.2, 0.4, 0.05, -0.1, 0.2)]
    svg = build(rows, overall_label=HOSTILE, mean=MEAN, mean_label=HOSTILE, group_noun=HOSTILE)
    root = parse_svg(svg)  # control characters would make the XML invalid
    assert "<script" not in svg
    assert "-->" not in svg.replace(" -->\n", "")  # only the ends of matplotlib's own comments
    texts = drawn_strings(root)
    assert sum("script" in t for t in texts) == 4  # group, overall and mean labels, legend noun
    # the 500 characters were cut: each of those four ends in an ellipsis, no run of "long" is left
    assert sum(t.endswith("…") or t.endswith("… alone") for t in texts) == 4
    assert not any("long" * 5 in t for t in texts)
    # mathtext would set the x of "$x^2$" in the oblique face, as a separate tspan; drawn literally neither is there
    assert "font-style: oblique" not in svg and "<tspan" not in svg


def test_mathtext_would_be_visible_in_the_svg() -> None:
    """Control for the test above: the oblique face does show up when mathtext is used."""
    with _style():
        fig = Figure(figsize=(2, 1))
        fig.text(0.5, 0.5, "$x^2$")
        svg = _to_svg(fig)
        assert "font-style: oblique" in svg and "<tspan" in svg


# --------------------------------------------------------------------------
# Refused inputs
# --------------------------------------------------------------------------

GOOD = GroupRow("a", 10, 0.1, 0.0, 0.2)


@pytest.mark.parametrize(
    ("rows", "kwargs"),
    [
        ([], {}),
        ([GroupRow("a", 10, 0.1, 0.15, 0.2)], {}),  # lower > median
        ([GroupRow("a", 10, 0.3, 0.0, 0.2)], {}),  # median > upper
        ([GroupRow("a", 10, math.nan, 0.0, 0.2)], {}),
        ([GroupRow("a", 10, 0.1, -math.inf, 0.2)], {}),
        ([GroupRow("a", 10, 0.9, 0.5, 1.2)], {}),  # outside [-1, 1]
        ([GroupRow("a", -1, 0.1, 0.0, 0.2)], {}),
        ([GroupRow("a", True, 0.1, 0.0, 0.2)], {}),  # type: ignore[arg-type]
        ([GroupRow("a", 10, 0.1, 0.0, 0.2, pooled_median=0.1)], {}),  # pooled partly missing
        ([GroupRow("a", 10, 0.1, 0.0, 0.2, 0.1, 0.15, 0.2)], {}),  # pooled lower > median
        ([GOOD] * (MAX_GROUPS + 1), {}),
        ([GOOD], {"mass": 1.0}),
        ([GOOD], {"mass": 0.0}),
        ([GOOD], {"mass": math.nan}),
        ([GOOD], {"overall": (0.1, 0.2, 0.3)}),
        ([GOOD], {"overall": (0.1, 0.0)}),
        ([GOOD], {"mean": (math.nan, 0.0, 0.2)}),
    ],
)
def test_bad_inputs_raise_figure_error(rows: list[GroupRow], kwargs: dict[str, object]) -> None:
    with pytest.raises(F.FigureError):
        build(rows, **kwargs)


def test_forty_groups_and_edge_values_are_accepted() -> None:
    rows = make_rows(MAX_GROUPS, pooled=True)
    rows[0] = GroupRow("edge", 0, -1.0, -1.0, 1.0, 1.0, 1.0, 1.0)
    parse_svg(build(rows))
