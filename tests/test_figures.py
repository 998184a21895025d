"""Tests for reportgen.figures (SVG report figures)."""

from __future__ import annotations

import functools
import math
import subprocess
import sys
import time
import xml.etree.ElementTree as ET
from collections.abc import Callable
from pathlib import Path

import matplotlib as mpl
import numpy as np
import pytest
from matplotlib import cbook
from scipy.stats import norm

from reportgen import figures as F
from reportgen.figures.pair import _rho_view, _subsample
from reportgen.figures.style import _fit_text, _text_width_pt

SVG_NS = "{http://www.w3.org/2000/svg}"
HOSTILE = "$x^2$ <script>alert('x')</script> --> & \\frac{$"
PROJECT_ROOT = Path(__file__).resolve().parents[1]


def parse_svg(svg: str) -> ET.Element:
    assert isinstance(svg, str)
    root = ET.fromstring(svg)
    assert root.tag.endswith("svg")
    return root


def width_in(root: ET.Element) -> float:
    value = root.get("width")
    assert value is not None and value.endswith("pt")
    return float(value[:-2]) / 72.0


def height_in(root: ET.Element) -> float:
    value = root.get("height")
    assert value is not None and value.endswith("pt")
    return float(value[:-2]) / 72.0


# --------------------------------------------------------------------------
# Small builders with realistic inputs, shared by the generic tests
# --------------------------------------------------------------------------

GRID = np.linspace(-1.0, 1.0, 401)


def build_forest(label: str = "Height vs weight") -> str:
    return F.forest_plot(
        [label, "Age vs income", "Sleep vs reaction time"],
        [0.62, 0.05, -0.41],
        [0.48, -0.15, -0.58],
        [0.73, 0.25, -0.21],
        statuses=["pass", "warn", "FAIL"],
        sample_r=[0.60, 0.07, -0.44],
        thresholds=(-0.3, 0.3),
        rope=(-0.1, 0.1),
        mass=0.95,
    )


def build_scatter(label: str = "Weight (kg)", n: int = 200) -> str:
    rng = np.random.default_rng(3)
    cov = np.array([[4.0, 2.4], [2.4, 9.0]])
    xy = rng.multivariate_normal([70.0, 120.0], cov, size=n)
    return F.scatter_with_ellipses(xy[:, 0], xy[:, 1], mean=(70.0, 120.0), cov=cov,
                                   x_label=label, y_label=label)


def build_rho(label: str = "Exact reference") -> str:
    return F.rho_density(
        GRID,
        norm.pdf(GRID, 0.45, 0.12),
        prior=np.full_like(GRID, 0.5),
        interval=(0.21, 0.69),
        mass=0.95,
        thresholds=(0.3,),
        rope=(-0.1, 0.1),
        reference=norm.pdf(GRID, 0.44, 0.125),
        reference_label=label,
    )


def panels(title: str = "μ₁", unit: str = "kg") -> list[F.DensityPanel]:
    out = []
    for name, mu, sd in ((title, 72.0, 0.8), ("μ₂", 128.0, 1.3), ("σ₁", 11.0, 0.6),
                         ("σ₂", 15.8, 0.9)):
        g = np.linspace(mu - 6 * sd, mu + 6 * sd, 300)
        out.append(F.DensityPanel(name, g, norm.pdf(g, mu, sd),
                                  (mu - 1.96 * sd, mu + 1.96 * sd), unit))
    out.append(F.DensityPanel("ρ", GRID, norm.pdf(GRID, 0.45, 0.12), (0.21, 0.69)))
    return out


def build_params(label: str = "μ₁") -> str:
    return F.parameter_densities(panels(label, label))


def build_matrix(label: str = "Height") -> str:
    k = 4
    med = np.full((k, k), np.nan)
    med[np.tril_indices(k, -1)] = [0.8, -0.3, 0.1, -0.7, 0.45, np.nan]
    return F.correlation_matrix([label, "Weight", "Age", "Income"], med,
                                np.abs(np.nan_to_num(med)) > 0.4)


def build_diagram(label: str = "ρ ~ Uniform(−1, 1)") -> str:
    return F.model_diagram(rho_prior=label, mean_prior="μ₁, μ₂ ~ Normal(0, 10²)",
                           sd_prior="σ₁, σ₂ ~ Half-normal(10)")


BUILDERS: dict[str, Callable[..., str]] = {
    "forest": build_forest,
    "scatter": build_scatter,
    "rho": build_rho,
    "params": build_params,
    "matrix": build_matrix,
    "diagram": build_diagram,
}


@functools.cache
def default_svg(name: str) -> str:
    """Each figure with default inputs, rendered once per test session."""
    return BUILDERS[name]()


# --------------------------------------------------------------------------
# Properties every figure must have
# --------------------------------------------------------------------------


@pytest.mark.parametrize("name", BUILDERS)
def test_returns_parseable_svg(name: str) -> None:
    root = parse_svg(default_svg(name))
    assert width_in(root) <= F.FULL_WIDTH + 1e-6
    assert root.find(f".//{SVG_NS}path") is not None


@pytest.mark.parametrize("name", BUILDERS)
def test_deterministic_bytes(name: str) -> None:
    assert BUILDERS[name]() == default_svg(name)


@pytest.mark.parametrize("name", BUILDERS)
def test_no_date_or_creator_and_text_asks_for_the_report_face(name: str) -> None:
    svg = default_svg(name)
    assert "<dc:date>" not in svg
    assert "Matplotlib v" not in svg
    # text stays text (selectable in the PDF), in the face the PDF renderer embeds, with fallbacks for browsers
    texts = list(parse_svg(svg).iter(f"{SVG_NS}text"))
    assert texts and all("font-family: 'Report Sans', 'DejaVu Sans', sans-serif" in t.get("style", "") for t in texts)


@pytest.mark.parametrize("name", BUILDERS)
def test_hostile_labels_render_as_plain_text(name: str) -> None:
    svg = BUILDERS[name](HOSTILE)
    drawn = " ".join("".join(e.itertext()) for e in parse_svg(svg).iter(f"{SVG_NS}text"))
    assert "<script" not in svg
    assert "-->" not in svg.replace(" -->\n", "")  # only matplotlib's own comment ends
    assert "<script>" in drawn  # the label is drawn, escaped into text, not markup


def test_plain_text_disables_mathtext() -> None:
    for text in ("$x^2$", "cost in $ and $$", r"already \$ escaped $y$", HOSTILE):
        assert not cbook.is_math_text(F.plain_text(text))
    assert F.plain_text("a\tb\x00c\u202ed\n") == "a bcd"


def test_rc_params_are_restored() -> None:
    before = dict(mpl.rcParams)
    build_matrix()
    assert mpl.rcParams["svg.hashsalt"] == before["svg.hashsalt"]
    assert mpl.rcParams["svg.fonttype"] == before["svg.fonttype"]
    assert mpl.rcParams["font.size"] == before["font.size"]


def test_deterministic_across_processes_and_no_pyplot() -> None:
    code = (
        "import sys\n"
        "sys.path.insert(0, 'tests')\n"
        "import test_figures as t\n"
        "sys.stdout.write(t.build_scatter(n=400) + t.build_forest())\n"
        "assert 'matplotlib.pyplot' not in sys.modules\n"
    )
    out = subprocess.run([sys.executable, "-c", code], cwd=PROJECT_ROOT, check=True,
                         capture_output=True, text=True, timeout=60)
    assert out.stdout == build_scatter(n=400) + default_svg("forest")


# --------------------------------------------------------------------------
# Scatter and ellipse geometry
# --------------------------------------------------------------------------


def test_large_scatter_is_subsampled_and_rasterised() -> None:
    start = time.perf_counter()
    svg = build_scatter(n=50_000)
    elapsed = time.perf_counter() - start
    assert elapsed < 5.0
    assert len(svg.encode("utf-8")) < 1_500_000
    root = parse_svg(svg)
    assert root.find(f".//{SVG_NS}image") is not None  # dense layer is a bitmap


def test_small_scatter_stays_vector() -> None:
    root = parse_svg(build_scatter(n=100))
    assert root.find(f".//{SVG_NS}image") is None


def test_subsample_is_seeded_and_capped() -> None:
    a = _subsample(50_000, 4000, seed=0)
    assert a.size == 4000 and np.unique(a).size == 4000 and np.all(np.diff(a) > 0)
    assert np.array_equal(a, _subsample(50_000, 4000, seed=0))
    assert not np.array_equal(a, _subsample(50_000, 4000, seed=1))
    assert np.array_equal(_subsample(10, 4000, seed=0), np.arange(10))


def test_ellipse_geometry_closed_form_for_identity() -> None:
    # chi-square with 2 df is exponential with mean 2: q(p) = -2 ln(1 - p)
    for mass in (0.5, 0.95):
        w, h, _ = F.ellipse_geometry(np.eye(2), mass)
        radius = math.sqrt(-2.0 * math.log(1.0 - mass))
        assert w == pytest.approx(2 * radius)
        assert h == pytest.approx(2 * radius)


def test_ellipse_geometry_orientation() -> None:
    _, _, angle = F.ellipse_geometry([[1.0, 0.8], [0.8, 1.0]], 0.95)
    assert angle == pytest.approx(45.0)
    _, _, angle = F.ellipse_geometry([[1.0, -0.8], [-0.8, 1.0]], 0.95)
    assert angle == pytest.approx(-45.0)
    w, h, angle = F.ellipse_geometry([[1.0, 0.0], [0.0, 4.0]], 0.95)
    assert abs(angle) == pytest.approx(90.0) and w > h


@pytest.mark.parametrize("mass", [0.5, 0.95])
def test_ellipse_contains_its_probability_mass(mass: float) -> None:
    """Fraction of simulated bivariate-normal points inside the ellipse ≈ mass."""
    rng = np.random.default_rng(20240601)
    mean = np.array([3.0, -2.0])
    cov = np.array([[2.0, -1.1], [-1.1, 1.5]])
    z = rng.multivariate_normal(mean, cov, size=200_000)
    w, h, angle = F.ellipse_geometry(cov, mass)
    t = math.radians(angle)
    d = z - mean
    u = d[:, 0] * math.cos(t) + d[:, 1] * math.sin(t)  # along the major axis
    v = -d[:, 0] * math.sin(t) + d[:, 1] * math.cos(t)
    inside = (u / (w / 2)) ** 2 + (v / (h / 2)) ** 2 <= 1.0
    # binomial standard error is about 0.001; allow 4 of them
    assert inside.mean() == pytest.approx(mass, abs=0.005)


@pytest.mark.parametrize("cov", [[[1.0, 2.0], [2.0, 1.0]], [[1.0, 0.5], [0.4, 1.0]],
                                 [[1.0, 0.0, 0.0], [0.0, 1.0, 0.0]], [[np.nan, 0], [0, 1]]])
def test_ellipse_geometry_rejects_bad_covariance(cov: list[list[float]]) -> None:
    with pytest.raises(ValueError):
        F.ellipse_geometry(cov, 0.95)


def test_scatter_drops_non_finite_pairs() -> None:
    x = np.array([1.0, 2.0, np.nan, 4.0, 5.0])
    y = np.array([1.0, np.inf, 3.0, 4.5, 4.0])
    parse_svg(F.scatter_with_ellipses(x, y, mean=(3.0, 3.0), cov=np.eye(2),
                                      x_label="x", y_label="y"))


# --------------------------------------------------------------------------
# Figure-specific behaviour
# --------------------------------------------------------------------------


def test_forest_height_grows_with_rows() -> None:
    def forest(n: int) -> float:
        m = np.linspace(-0.8, 0.8, n)
        svg = F.forest_plot([f"pair {i}" for i in range(n)], m, m - 0.1, m + 0.1,
                            statuses=["pass"] * n, sample_r=None, mass=0.9)
        return height_in(parse_svg(svg))

    h3, h12, h30 = forest(3), forest(12), forest(30)
    assert h3 < h12 < h30 <= 10.0 + 1e-6


def test_forest_accepts_missing_estimates_and_validates() -> None:
    parse_svg(F.forest_plot(["a", "b"], [np.nan, 0.2], [np.nan, 0.1], [np.nan, 0.3],
                            statuses=["pass", "pass"], sample_r=[np.nan, 0.25], mass=0.95))
    with pytest.raises(ValueError):
        F.forest_plot(["a", "b"], [0.1], [0.0], [0.2], statuses=["pass"], sample_r=None,
                      mass=0.95)
    with pytest.raises(ValueError):
        F.forest_plot(["a"], [0.1], [0.3], [0.2], statuses=["pass"], sample_r=None,
                      mass=0.95)
    with pytest.raises(ValueError):
        F.forest_plot(["a"], [0.1], [0.0], [0.2], statuses=["pass"], sample_r=None, mass=95)


def test_figure_widths_match_page_layout() -> None:
    assert width_in(parse_svg(default_svg("forest"))) == pytest.approx(F.FULL_WIDTH)
    assert width_in(parse_svg(default_svg("params"))) == pytest.approx(F.FULL_WIDTH)
    assert width_in(parse_svg(default_svg("scatter"))) == pytest.approx(F.HALF_WIDTH)
    assert width_in(parse_svg(default_svg("rho"))) == pytest.approx(F.HALF_WIDTH)
    diagram = parse_svg(default_svg("diagram"))
    assert (width_in(diagram), height_in(diagram)) == pytest.approx((6.8, 2.6))


def test_rho_view_zooms_on_narrow_posterior() -> None:
    prior = np.full_like(GRID, 0.5)
    lo, hi = _rho_view(GRID, norm.pdf(GRID, 0.82, 0.015), prior, (0.79, 0.85))
    assert 0.6 < lo < 0.79 and 0.85 < hi <= 1.0
    lo, hi = _rho_view(GRID, norm.pdf(GRID, 0.3, 0.3), prior, (-0.28, 0.85))
    assert (lo, hi) == (-1.0, 1.0)


def test_rho_density_narrow_posterior_with_hidden_thresholds() -> None:
    parse_svg(F.rho_density(GRID, norm.pdf(GRID, 0.82, 0.015), prior=np.full_like(GRID, 0.5),
                            interval=(0.79, 0.85), mass=0.95, thresholds=(-0.3, 0.3, 0.9),
                            rope=(-0.1, 0.1)))


def test_rho_density_validates_inputs() -> None:
    with pytest.raises(ValueError):
        F.rho_density(GRID, GRID[:-1] * 0 + 1, prior=np.ones_like(GRID), interval=(0, 1),
                      mass=0.9)
    with pytest.raises(ValueError):
        F.rho_density(GRID[::-1], np.ones_like(GRID), prior=np.ones_like(GRID),
                      interval=(0, 1), mass=0.9)
    with pytest.raises(ValueError):
        F.rho_density(GRID, -np.ones_like(GRID), prior=np.ones_like(GRID), interval=(0, 1),
                      mass=0.9)


def test_density_panel_is_frozen_and_validated() -> None:
    panel = panels()[0]
    with pytest.raises(AttributeError):
        panel.title = "other"  # type: ignore[misc]
    with pytest.raises(ValueError):
        F.DensityPanel("bad", np.array([0.0, 1.0]), np.array([1.0]), (0.0, 1.0))


def test_parameter_densities_other_panel_counts() -> None:
    p = panels()
    parse_svg(F.parameter_densities(p[:1]))
    parse_svg(F.parameter_densities(p + p[:2]))
    with pytest.raises(ValueError):
        F.parameter_densities([])


def test_correlation_matrix_uses_either_triangle() -> None:
    upper = np.array([[np.nan, 0.5], [np.nan, np.nan]])
    lower = upper.T.copy()
    excl = np.array([[False, True], [True, False]])
    assert (F.correlation_matrix(["a", "b"], upper, excl)
            == F.correlation_matrix(["a", "b"], lower, excl))
    with pytest.raises(ValueError):
        F.correlation_matrix(["a"], np.ones((1, 1)), np.ones((1, 1), bool))


def test_correlation_cmap_is_diverging_teal_white_amber() -> None:
    cmap = F.correlation_cmap()
    to_rgb = mpl.colors.to_rgb
    assert np.allclose(cmap(1.0)[:3], to_rgb(F.TEAL))
    assert np.allclose(cmap(0.5)[:3], (1.0, 1.0, 1.0), atol=0.01)
    assert np.allclose(cmap(0.25)[:3], to_rgb(F.AMBER), atol=0.01)
    # negative end is darker than the positive midpoint: it diverges
    assert sum(cmap(0.0)[:3]) < sum(cmap(0.25)[:3])


def test_model_diagram_fits_very_long_texts() -> None:
    long = "ρ ~ " + " ".join(["a fairly long prior description"] * 30)
    svg = F.model_diagram(rho_prior=long, mean_prior=long, sd_prior="x" * 500,
                          likelihood=long)
    parse_svg(svg)


def test_fit_text_respects_box() -> None:
    text, size = _fit_text("μ₁, μ₂ ~ Normal(0, 10²) " * 4, 1.6, 0.45)
    assert 6.0 <= size <= 8.5
    lines = text.split("\n")
    assert len(lines) * size * 1.2 <= 0.45 * 72 + 1e-9
    assert all(_text_width_pt(line, size) <= 1.6 * 72 + 1e-6 for line in lines)
    text, size = _fit_text("short", 1.6, 0.45)
    assert (text, size) == ("short", 8.5)
