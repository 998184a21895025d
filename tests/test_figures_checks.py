"""Tests for the model-check figures: the Mahalanobis Q-Q plot and the scatter plot's marked rows."""

from __future__ import annotations

import functools
import time
import xml.etree.ElementTree as ET

import numpy as np
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.text import Text
from scipy.spatial import cKDTree
from scipy.stats import chi2, rankdata

from reportgen import figures as F
from reportgen.figures.checks import _THIN_STEP, _place_labels, _qq_layers
from reportgen.figures.pair import _subsample

SVG_NS = "{http://www.w3.org/2000/svg}"
HOSTILE = "$x^2$ <script>alert('x')</script> --> & \\frac{$"


def parse_svg(svg: str) -> ET.Element:
    root = ET.fromstring(svg)
    assert root.tag.endswith("svg")
    return root


def group(root: ET.Element, gid: str) -> ET.Element | None:
    return root.find(f".//{SVG_NS}g[@id='{gid}']")


def marker_count(root: ET.Element, gid: str) -> int:
    """Markers drawn by the collection with this gid: one <use> each, or one <path> each when few."""
    g = group(root, gid)
    assert g is not None, f"no group {gid}"
    uses = list(g.iter(f"{SVG_NS}use"))
    if uses:
        return len(uses)
    defs = {id(p) for d in g.iter(f"{SVG_NS}defs") for p in d.iter(f"{SVG_NS}path")}
    return sum(1 for p in g.iter(f"{SVG_NS}path") if id(p) not in defs)


def ids_starting(root: ET.Element, prefix: str) -> list[str]:
    return [e.get("id", "") for e in root.iter() if e.get("id", "").startswith(prefix)]


def qq_inputs(n: int, seed: int = 5) -> tuple[np.ndarray, np.ndarray, float, np.ndarray]:
    """Squared distances of standard normal pairs with a few planted outliers, chi-square(2) plotting positions."""
    rng = np.random.default_rng(seed)
    z = rng.standard_normal((n, 2))
    z[[3, 10, 11]] = [[7.0, 7.0], [-8.0, 6.0], [6.0, -9.0]]  # squared distances near 100, beyond any cutoff here
    distances = (z**2).sum(axis=1)
    expected = chi2.ppf((np.arange(1, n + 1) - 0.5) / n, df=2)
    cutoff = float(chi2.ppf(1.0 - 0.05 / n, df=2))
    flagged = np.flatnonzero(distances > cutoff)
    return distances, expected, cutoff, flagged[np.argsort(-distances[flagged])]


def build_qq(label_prefix: str = "row ", n: int = 300) -> str:
    d, e, cutoff, flagged = qq_inputs(n)
    return F.mahalanobis_qq(d, e, cutoff, flagged, [f"{label_prefix}{i + 2}" for i in flagged])


@functools.cache
def default_qq() -> str:
    return build_qq()


def scatter_data(n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(3)
    cov = np.array([[4.0, 2.4], [2.4, 9.0]])
    xy = rng.multivariate_normal([70.0, 120.0], cov, size=n)
    return xy[:, 0], xy[:, 1], cov


# --------------------------------------------------------------------------
# Q-Q plot
# --------------------------------------------------------------------------


def test_qq_is_small_well_formed_svg_with_text_in_the_report_face() -> None:
    root = parse_svg(default_qq())
    assert float(root.get("width", "0pt")[:-2]) / 72.0 == pytest.approx(F.FULL_WIDTH / 3.0)
    texts = list(root.iter(f"{SVG_NS}text"))  # labels stay text, as in every report figure
    assert texts and all(t.get("style", "").count("'Report Sans'") == 1 for t in texts)
    assert group(root, "qq-flag-limit-label") is not None
    assert "<dc:date>" not in default_qq() and "Matplotlib v" not in default_qq()


def test_qq_deterministic_bytes() -> None:
    assert build_qq() == default_qq()


def test_qq_hostile_labels_stay_plain() -> None:
    svg = build_qq(HOSTILE)
    parse_svg(svg)
    assert "<script" not in svg


def test_qq_draws_every_flagged_row_and_labels_at_most_twelve() -> None:
    d, e, _, _ = qq_inputs(300)
    many = np.argsort(-d)[:20]
    root = parse_svg(F.mahalanobis_qq(d, e, 3.0, many, [f"row {i}" for i in many]))
    assert marker_count(root, "qq-flagged") == 20
    assert len(ids_starting(root, "qq-label-")) == 12
    assert marker_count(root, "qq-largest") == 50
    _, _, _, flagged = qq_inputs(300)
    assert {3, 10, 11} <= set(flagged.tolist())  # the planted outliers
    assert marker_count(parse_svg(default_qq()), "qq-flagged") == flagged.size


def test_qq_layers_place_flagged_rows_by_rank() -> None:
    """Flagged row i sits at (expected[rank of d_i], d_i); reference: scipy.stats.rankdata (ordinal ranks)."""
    d, e, cutoff, _ = qq_inputs(500)
    d[7] = d[8]  # a tie: each tied row keeps its own slot
    flagged = np.array([11, 3, 7, 8, 40])
    layers = _qq_layers(d, e, cutoff, flagged)
    ranks = rankdata(d, method="ordinal").astype(int) - 1
    assert np.array_equal(layers.flagged_y, d[flagged])
    assert np.array_equal(layers.flagged_x, e[ranks[flagged]])
    assert layers.flagged_x[2] != layers.flagged_x[3]
    assert np.array_equal(layers.largest_y, np.sort(d)[-50:])
    # no point is lost or drawn twice below the thinning size
    assert layers.dense_x.size + 50 + np.setdiff1d(ranks[flagged], np.arange(450, 500)).size == 500


def test_qq_thinning_leaves_no_point_far_from_a_drawn_one() -> None:
    """Every point left out lies within one thinning step (axes fractions) of a drawn point."""
    d, e, cutoff, flagged = qq_inputs(200_000)
    layers = _qq_layers(d, e, cutoff, flagged)
    assert layers.dense_x.size < 3000
    scale = np.array([layers.x_max, layers.y_max])
    drawn = np.column_stack([np.concatenate([layers.dense_x, layers.largest_x, layers.flagged_x]),
                             np.concatenate([layers.dense_y, layers.largest_y, layers.flagged_y])]) / scale
    everything = np.column_stack([e, np.sort(d)]) / scale
    gap, _ = cKDTree(drawn).query(everything)
    assert gap.max() <= _THIN_STEP


def test_qq_million_points_stay_cheap(capsys: pytest.CaptureFixture[str]) -> None:
    d, e, cutoff, flagged = qq_inputs(1_000_000)
    labels = [f"row {i + 2}" for i in flagged]
    start = time.perf_counter()
    svg = F.mahalanobis_qq(d, e, cutoff, flagged, labels)
    elapsed = time.perf_counter() - start
    with capsys.disabled():
        print(f"\nmahalanobis_qq, 1,000,000 distances: {elapsed:.2f} s, {len(svg):,} characters")
    assert len(svg) < 400_000
    root = parse_svg(svg)
    # the bulk is a bitmap (a rasterised artist leaves no group of its own)
    assert root.find(f".//{SVG_NS}image") is not None and group(root, "qq-points") is None
    assert marker_count(root, "qq-largest") == 50
    assert marker_count(root, "qq-flagged") == flagged.size >= 3
    assert group(root, "qq-flagged").find(f".//{SVG_NS}image") is None


@pytest.mark.parametrize("change", ["length", "unsorted", "nan", "negative", "flag_range", "flag_float",
                                    "labels", "some_nan"])
def test_qq_rejects_bad_inputs(change: str) -> None:
    d, e, cutoff, flagged = qq_inputs(50)
    labels = [f"row {i}" for i in flagged]
    if change == "length":
        e = e[:-1]
    elif change == "unsorted":
        e = e[::-1].copy()
    elif change == "nan":
        d[4] = np.nan
    elif change == "negative":
        d[4] = -1.0
    elif change == "flag_range":
        flagged = np.array([50])
        labels = ["row 52"]
    elif change == "flag_float":
        flagged = flagged.astype(float)
    elif change == "labels":
        labels = labels + ["extra"]
    else:
        d[:10] = np.nan
    with pytest.raises(ValueError):
        F.mahalanobis_qq(d, e, cutoff, flagged, labels)


def test_qq_degenerate_pair_gets_an_empty_panel() -> None:
    _, e, _, _ = qq_inputs(50)
    root = parse_svg(F.mahalanobis_qq(np.full(50, np.nan), e, float("nan"), np.empty(0, dtype=int), []))
    assert group(root, "qq-not-computed") is not None
    assert group(root, "qq-flag-limit") is None and group(root, "qq-flagged") is None
    d, e, _, _ = qq_inputs(50)
    root = parse_svg(F.mahalanobis_qq(d, e, float("nan"), np.empty(0, dtype=int), []))
    assert group(root, "qq-flag-limit") is None and group(root, "qq-identity") is not None


# --------------------------------------------------------------------------
# Scatter plot: marked rows and the rank-model variant
# --------------------------------------------------------------------------


def test_scatter_defaults_are_unchanged_by_the_new_arguments() -> None:
    x, y, cov = scatter_data(500)
    common = {"mean": (70.0, 120.0), "cov": cov, "x_label": "Weight", "y_label": "Height"}
    plain = F.scatter_with_ellipses(x, y, **common)
    assert plain == F.scatter_with_ellipses(x, y, **common, highlight=None, highlight_labels=(), ellipses=True)
    assert plain == F.scatter_with_ellipses(x, y, **common, highlight=np.array([], dtype=int))
    assert "highlight" not in plain


def test_scatter_highlights_survive_the_subsample() -> None:
    x, y, cov = scatter_data(50_000)
    shown = set(_subsample(50_000, 4000, seed=0).tolist())
    marked = np.array([i for i in range(0, 50_000, 997) if i not in shown][:30])
    assert marked.size == 30
    svg = F.scatter_with_ellipses(x, y, mean=(70.0, 120.0), cov=cov, x_label="Weight", y_label="Height",
                                  highlight=marked, highlight_labels=[f"row {i + 2}" for i in marked])
    root = parse_svg(svg)
    assert marker_count(root, "highlight-rings") == 30
    assert marker_count(root, "highlight-points") == 30
    assert len(ids_starting(root, "highlight-label-")) == 12
    assert group(root, "highlight-rings").find(f".//{SVG_NS}image") is None  # vectors, not the bitmap
    labels = ["".join(t.itertext()) for t in group(root, "highlight-label-0").iter(f"{SVG_NS}text")]
    assert labels and labels[0].startswith("row ")  # the labels are drawn as text


def test_scatter_highlight_skips_non_finite_rows_and_repeats() -> None:
    x = np.array([1.0, 2.0, np.nan, 4.0, 5.0, 3.0])
    y = np.array([1.0, 2.5, 3.0, 4.5, 4.0, 2.0])
    svg = F.scatter_with_ellipses(x, y, mean=(3.0, 3.0), cov=np.eye(2), x_label="x", y_label="y",
                                  highlight=np.array([2, 3, 3, 5]), highlight_labels=["row 4", "row 5", "again"])
    root = parse_svg(svg)
    assert marker_count(root, "highlight-rings") == 2
    assert len(ids_starting(root, "highlight-label-")) == 1  # row 4 is dropped, the repeat loses its label


def test_scatter_without_ellipses_needs_no_fit() -> None:
    x, y, cov = scatter_data(200)
    svg = F.scatter_with_ellipses(x, y, x_label="Rank of weight", y_label="Rank of height", ellipses=False,
                                  highlight=np.array([4]), highlight_labels=["row 6"])
    parse_svg(svg)
    assert F.TEAL not in svg  # the ellipses and the mean are the scatter's only teal marks
    assert F.TEAL in F.scatter_with_ellipses(x, y, mean=(70.0, 120.0), cov=cov, x_label="a", y_label="b")
    with pytest.raises(ValueError):
        F.scatter_with_ellipses(x, y, x_label="a", y_label="b")


@pytest.mark.parametrize("highlight, labels", [(np.array([1.0]), ()), (np.array([200]), ()),
                                               (np.array([-1]), ()), (np.array([1]), ("a", "b"))])
def test_scatter_rejects_bad_highlights(highlight: np.ndarray, labels: tuple[str, ...]) -> None:
    x, y, cov = scatter_data(200)
    with pytest.raises(ValueError):
        F.scatter_with_ellipses(x, y, mean=(70.0, 120.0), cov=cov, x_label="a", y_label="b",
                                highlight=highlight, highlight_labels=labels)


def test_labels_of_a_tight_cluster_do_not_overlap() -> None:
    """Measured after layout with the Agg renderer: no two label boxes intersect."""
    fig = Figure(figsize=(F.HALF_WIDTH, 3.0), layout="constrained")
    ax = fig.add_subplot()
    xs = np.array([0.50, 0.51, 0.52, 0.50, 0.53, 0.51])
    ys = np.array([0.50, 0.51, 0.49, 0.52, 0.50, 0.48])
    ax.scatter(xs, ys)
    ax.set_xlim(0.0, 1.0)
    ax.set_ylim(0.0, 1.0)
    _place_labels(ax, xs, ys, [f"row {i}" for i in range(6)], axes_pt=(188.0, 141.0), fontsize=6.5,
                  gid_prefix="t-")
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    # the text alone (an annotation's own extent also covers its leader line)
    boxes = [Text.get_window_extent(t, canvas.get_renderer()) for t in ax.texts]
    assert len(boxes) == 6
    for i in range(6):
        for j in range(i + 1, 6):
            assert not boxes[i].overlaps(boxes[j]), (i, j)
