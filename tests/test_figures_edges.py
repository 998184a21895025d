"""Figures at the edges of what the numbers allow: singular priors, huge offsets, posteriors pressed
against rho = +-1, and a figure that cannot be drawn (it becomes a placeholder, never a failed run)."""

from __future__ import annotations

import math
import re
import textwrap
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from scipy import stats

from reportgen import figures as F
from reportgen.exact import exact_posterior
from reportgen.figures.pair import _distance_density, _near_end, _panel_offset_label, _visible_top
from reportgen.results import pair_result_exact, summarise_parameter
from reportgen.results.pair import plotting_grid
from reportgen.summaries import bounded_density

GRID = np.linspace(-1.0, 1.0, 401)


def svg_texts(svg: str) -> list[str]:
    """The drawn strings: matplotlib writes each line of text as one SVG text element."""
    root = ET.fromstring(svg)  # the document parses
    return ["".join(e.itertext()) for e in root.iter("{http://www.w3.org/2000/svg}text")]


def beta_half_prior(rho: np.ndarray) -> np.ndarray:
    # Beta(0.5, 0.5) stretched to [-1, 1], from scipy (loc/scale form): +inf at both ends
    with np.errstate(divide="ignore"):
        return stats.beta(0.5, 0.5, loc=-1.0, scale=2.0).pdf(rho)


# --------------------------------------------------------------------------
# The figures' own error type
# --------------------------------------------------------------------------


def test_figure_error_is_a_value_error_and_raised_by_the_checks() -> None:
    assert issubclass(F.FigureError, ValueError)
    with pytest.raises(F.FigureError, match="grid must hold"):
        F.DensityPanel("μ₁", np.array([1.0, 1.0]), np.array([1.0, 1.0]), (1.0, 1.0))


# --------------------------------------------------------------------------
# 1. A prior with integrable singularities at rho = +-1
# --------------------------------------------------------------------------


def test_rho_density_draws_a_prior_that_is_infinite_at_the_ends() -> None:
    grid = np.linspace(0.6, 1.0, 500)  # a posterior reaching rho = 1, as a kernel density clipped at the bound does
    posterior = stats.norm.pdf(grid, 0.93, 0.03)
    prior = np.interp(grid, GRID, beta_half_prior(GRID))
    assert np.isinf(prior[-1])  # what the report hands the figure when the grid reaches the bound
    texts = svg_texts(F.rho_density(grid, posterior, prior=prior, interval=(0.87, 0.98), mass=0.95))
    assert "Prior" in texts


def test_infinite_prior_values_do_not_set_the_axis_top() -> None:
    post = stats.norm.pdf(GRID, 0.3, 0.2)
    prior = beta_half_prior(GRID)
    top = _visible_top([post, prior, None], np.ones(GRID.size, dtype=bool))
    finite_prior = prior[np.isfinite(prior)]
    assert math.isfinite(top)
    assert top == pytest.approx(max(post.max(), finite_prior.max()))


def test_prior_must_still_be_a_density() -> None:
    post = stats.norm.pdf(GRID, 0.3, 0.2)
    for bad in (np.full(GRID.size, np.nan), -np.ones(GRID.size), np.full(GRID.size, -np.inf)):
        with pytest.raises(F.FigureError):
            F.rho_density(GRID, post, prior=bad, interval=(0.0, 0.6), mass=0.95)
    with pytest.raises(F.FigureError):  # the posterior itself may not be infinite
        F.rho_density(GRID, beta_half_prior(GRID), prior=post, interval=(0.0, 0.6), mass=0.95)


# --------------------------------------------------------------------------
# 2. Huge constant offsets: the density grid is relative to a round pivot
# --------------------------------------------------------------------------


def huge_draws(centre: float, sd: float, seed: int = 0) -> np.ndarray:
    return centre + sd * np.random.default_rng(seed).standard_normal(4000)


def test_bounded_density_relative_to_an_offset_matches_scipy() -> None:
    draws = huge_draws(1e9, 1.6e-4)
    grid, density = bounded_density(draws, offset=1e9)
    assert np.all(np.diff(grid) > 0) and grid.size == 256
    # reference: scipy's Gaussian KDE (Scott's rule) of the same draws shifted by the same offset
    reference = stats.gaussian_kde(draws - 1e9, bw_method="scott")(grid)
    # the density is binned (reportgen.summaries.bounded_density): within 1e-4 of the peak of the direct sum
    np.testing.assert_allclose(density, reference, rtol=0.0, atol=1e-4 * reference.max())
    assert np.trapezoid(density, grid) == pytest.approx(1.0, abs=5e-3)  # a density integrates to 1


def test_bounded_density_offset_shifts_the_bounds_too() -> None:
    draws = 1e6 + np.random.default_rng(1).exponential(0.01, 3000)  # bounded below at 1e6
    grid, density = bounded_density(draws, lower=1e6, offset=1e6)
    assert grid[0] == 0.0  # the bound, relative to the offset
    # reflection keeps all the mass above the bound (Silverman 1986, sec. 2.10; common practice)
    assert np.trapezoid(density, grid) == pytest.approx(1.0, abs=1e-2)


@pytest.mark.parametrize(("centre", "sd", "offset"), [(1e9, 1.6e-4, 1e9), (-2e12, 5e-3, -2e12)])
def test_summary_of_huge_means_carries_a_round_offset(centre: float, sd: float, offset: float) -> None:
    draws = huge_draws(centre, sd)
    summary = summarise_parameter("mu_x", draws, 0.95, "central")
    assert summary.offset == offset
    assert np.all(np.diff(summary.grid) > 0)
    # grid and density are relative to the offset; the summary's numbers stay absolute (numpy's own)
    assert summary.grid[0] + offset <= np.median(draws) <= summary.grid[-1] + offset
    assert summary.median == np.median(draws)
    assert summary.mean == np.mean(draws)
    assert (summary.lower, summary.upper) == tuple(np.quantile(draws, [0.025, 0.975]))
    # the curve is the density of the draws: its mode sits at their centre (normal draws)
    mode = summary.grid[np.argmax(summary.density)] + offset
    assert abs(mode - centre) < 0.3 * sd


def test_ordinary_and_bounded_parameters_keep_no_offset() -> None:
    rng = np.random.default_rng(2)
    assert summarise_parameter("mu_x", 5.0 + rng.standard_normal(2000), 0.95, "central").offset == 0.0
    # bounded parameters are tabulated against their bounds, which are absolute
    assert summarise_parameter("sigma_x", 1e9 + rng.random(2000) * 1e-3, 0.95, "central").offset == 0.0
    assert summarise_parameter("rho", np.tanh(rng.normal(0.5, 0.1, 2000)), 0.95, "hdi").offset == 0.0


def test_panel_with_an_offset_says_so_on_its_axis() -> None:
    summary = summarise_parameter("mu_x", huge_draws(1e9, 1.6e-4), 0.95, "central")
    panel = F.DensityPanel("μ₁: mean of x", summary.grid, summary.density, (summary.lower, summary.upper),
                           unit="m", offset=summary.offset, symbol="μ₁")
    low = F.DensityPanel("μ₂: mean of y", summary.grid, summary.density,
                         (summary.lower - 3e12, summary.upper - 3e12), offset=-3e12, symbol="μ₂")
    texts = svg_texts(F.parameter_densities([panel, low]))
    assert "μ₁ − 1,000,000,000 (m)" in texts
    assert "μ₂ + 3,000,000,000,000" in texts
    # the interval printed above the panel is on the axis' scale, signed as a difference
    spans = [t for t in texts if t.startswith("[")]
    assert len(spans) == 2 and all(("+" in s or "\u2212" in s) for s in spans)


def test_scatter_of_huge_values_is_drawn_relative_to_round_numbers() -> None:
    rng = np.random.default_rng(4)
    z = rng.multivariate_normal([0.0, 0.0], [[1.0, 0.6], [0.6, 1.0]], size=40)
    x, y = 1e9 + 1e-3 * z[:, 0], -2e12 + 0.03 * z[:, 1]
    cov = np.cov(x, y)
    texts = svg_texts(F.scatter_with_ellipses(x, y, mean=(float(np.mean(x)), float(np.mean(y))), cov=cov,
                                              x_label="x (m)", y_label="y"))
    assert "x (m) − 1,000,000,000" in texts and "y + 2,000,000,000,000" in texts
    assert not any("e+09" in t or "1e9" in t or "e12" in t for t in texts)  # no corner offset text


def test_relative_panel_ticks_fit_their_panel() -> None:
    from reportgen.figures.style import _text_width_pt

    summary = summarise_parameter("mu_x", huge_draws(1e9, 1.6e-4), 0.95, "central")
    panel = F.DensityPanel("μ₁", summary.grid, summary.density, (summary.lower, summary.upper),
                           offset=summary.offset, symbol="μ₁")
    texts = svg_texts(F.parameter_densities([panel] * 5))
    first_label = next(i for i, t in enumerate(texts) if not re.fullmatch("[\u2212+]?[0-9.]+", t))
    ticks = texts[:first_label]  # the first panel's tick labels come first, then its axis label
    assert len(ticks) >= 2
    # five panels on a 6.8 in page: each label row must fit about 84 pt (the panel's title width)
    assert sum(_text_width_pt(t, 7.5) for t in ticks) + 8.0 * (len(ticks) - 1) <= F.FULL_WIDTH * 72.0 / 5 - 14.0


def test_offset_label_keeps_the_offsets_digits() -> None:
    assert _panel_offset_label("μ₁", 1000000000.01, "kg") == "μ₁ − 1,000,000,000.01 (kg)"
    assert _panel_offset_label("", -2.5e6, "") == "value + 2,500,000"


# --------------------------------------------------------------------------
# 3. A posterior pressed against rho = 1
# --------------------------------------------------------------------------


def collapsed_posterior() -> tuple[np.ndarray, np.ndarray]:
    """A density of rho whose peak lies closer to 1 than float64 can tell apart from 1.

    zeta = atanh(rho) ~ N(23, 0.5), tabulated in zeta like the exact engine; density of rho =
    density of zeta / (1 - rho^2), with 1 - rho^2 = 1 / cosh(zeta)^2 (closed form, no cancellation).
    The density of rho peaks near zeta = 23.5 (mode + 2 sd^2), where tanh rounds to exactly 1, and
    is more than 1e12 times larger there than anywhere float64 can still tell rho from 1.
    """
    zeta = np.linspace(16.0, 26.0, 4001)
    density = stats.norm.pdf(zeta, 23.0, 0.5) * np.cosh(zeta) ** 2
    return np.tanh(zeta), density


def test_plotting_grid_draws_what_float64_can_hold() -> None:
    rho, density = collapsed_posterior()
    assert np.sum(rho == 1.0) > 1000  # the grid really collapses onto 1
    grid, kept = plotting_grid(rho, density)
    # the old floor, set by the points at exactly 1, left a single point; now the tail float64 holds
    # (1 - rho a few multiples of 1.1e-16, the spacing of float64 just below 1) is kept
    assert grid.size >= 5 and np.all(np.diff(grid) > 0) and np.all(np.abs(grid) < 1.0)
    # every point drawn is a point of the input, unchanged
    pairs = set(zip(rho.tolist(), density.tolist(), strict=True))
    assert all(pair in pairs for pair in zip(grid.tolist(), kept.tolist(), strict=True))


def test_collapsed_posterior_is_drawn_against_distance_from_the_end() -> None:
    grid, density = plotting_grid(*collapsed_posterior())
    assert _near_end(grid, density) == 1.0
    texts = svg_texts(F.rho_density(grid, density, prior=np.full(grid.size, 0.5),
                                    interval=(float(grid[0]), 1.0), mass=0.95, thresholds=(0.3,),
                                    rope=(-0.1, 0.1)))
    assert any("1 \u2212 \u03c1" in t for t in texts)
    assert any("threshold 0.30" in t for t in texts)  # out of view: listed at the edge


def test_near_degenerate_exact_posterior_uses_the_distance_axis() -> None:
    # n = 6 and r = 1 - 1e-9 (the closest the results stage lets r come to 1)
    posterior = exact_posterior(6, 1.0 - 1e-9)
    grid, density = plotting_grid(np.asarray(posterior.rho), np.asarray(posterior.density))
    assert _near_end(grid, density) == 1.0
    assert _near_end(-grid[::-1], density[::-1]) == -1.0  # the mirror image, at rho = -1
    svg = F.rho_density(grid, density, prior=np.full(grid.size, 0.5), interval=(0.99999999, 1.0), mass=0.95)
    assert any("1 \u2212 \u03c1" in t for t in svg_texts(svg))


def test_a_posterior_wholly_at_the_end_is_refused_with_the_figures_error() -> None:
    grid = np.array([1.0 - 2.0 ** -53, 1.0])  # the largest float below 1, and 1: one distance left to draw
    with pytest.raises(F.FigureError, match="closer to"):
        F.rho_density(grid, np.array([1.0, 1.0]), prior=np.full(2, 0.5), interval=(1.0, 1.0), mass=0.95)


def test_distance_density_keeps_the_probability() -> None:
    """Change of variables u = log10(1 - rho): p(u) = p(rho) (1 - rho) ln 10, so the area is unchanged."""
    posterior = exact_posterior(6, 1.0 - 1e-9)
    grid, density = plotting_grid(np.asarray(posterior.rho), np.asarray(posterior.density))
    distance, per_decade = _distance_density(grid, density, 1.0)
    assert np.all(np.diff(distance) > 0)
    area = np.trapezoid(per_decade, np.log10(distance))
    # reference: the exact engine's own normalisation (its density integrates to 1 over rho)
    assert area == pytest.approx(1.0, abs=2e-3)


@pytest.mark.parametrize(("centre", "sd"), [(0.45, 0.12), (0.9995, 1e-5), (-0.2, 0.3), (-0.99, 2e-3)])
def test_ordinary_posteriors_stay_on_the_rho_axis(centre: float, sd: float) -> None:
    grid = np.linspace(max(-1.0, centre - 8 * sd), min(1.0, centre + 8 * sd), 801)
    assert _near_end(grid, stats.norm.pdf(grid, centre, sd)) == 0.0


# --------------------------------------------------------------------------
# A figure that cannot be drawn becomes a placeholder
# --------------------------------------------------------------------------


def test_unavailable_figure_is_a_small_svg_with_the_reason() -> None:
    hostile = "grid <script>alert(1)</script> $x^2$ " + "very long reason " * 30
    svg = F.unavailable_figure(hostile)
    root = ET.fromstring(svg)
    assert float(root.get("width", "0pt")[:-2]) / 72.0 == pytest.approx(F.HALF_WIDTH)
    texts = " ".join(svg_texts(svg))
    assert "could not be drawn" in texts and "<script>" not in svg
    wide = ET.fromstring(F.unavailable_figure("why", width=F.FULL_WIDTH, height=1.9))
    assert float(wide.get("height", "0pt")[:-2]) / 72.0 == pytest.approx(1.9)


SPEC = """
    engine = "exact"
    [report]
    title = "Edges"
    date = 2026-01-15
    [data]
    path = "data.csv"
    [priors.rho]
    family = "beta"
    a = 0.5
    b = 0.5
    [[pairs]]
    x = "a"
    y = "b"
    [[pairs]]
    x = "a"
    y = "c"
"""


def edge_project(folder: Path) -> Path:
    """n = 8: (a, b) with r about 0.99 under a Beta(0.5, 0.5) prior; (a, c) near-degenerate."""
    rng = np.random.default_rng(2)
    a = rng.normal(size=8)
    frame = pd.DataFrame({"a": a, "b": 0.9 * a + 0.3 * rng.normal(size=8), "c": a + 2e-5 * rng.normal(size=8)})
    frame.to_csv(folder / "data.csv", index=False, float_format="%.17g")
    (folder / "spec.toml").write_text(textwrap.dedent(SPEC), encoding="utf-8")
    return folder / "spec.toml"


def exact_result(folder: Path) -> tuple[object, object, object]:
    from reportgen.data import load_pairs, load_table
    from reportgen.spec import load_spec

    spec = load_spec(edge_project(folder))
    data = load_pairs(spec, load_table(spec))[0]
    return pair_result_exact(spec, data), data, spec


def test_pair_figures_turn_a_failed_figure_into_a_placeholder(tmp_path: Path,
                                                              monkeypatch: pytest.MonkeyPatch) -> None:
    from reportgen.report import context

    result, data, spec = exact_result(tmp_path)
    figs = context.pair_figures(result, data, spec)  # type: ignore[arg-type]
    assert figs["figure_notes"] == []
    assert figs["rho_density"].startswith("data:image/svg+xml")

    def refuse(*args: object, **kwargs: object) -> str:
        raise F.FigureError("grid must hold at least two finite, strictly increasing values")

    monkeypatch.setattr(context.figures, "rho_density", refuse)
    figs = context.pair_figures(result, data, spec)  # type: ignore[arg-type]
    assert len(figs["figure_notes"]) == 1
    assert "density of \u03c1" in figs["figure_notes"][0] and "strictly increasing" in figs["figure_notes"][0]
    assert figs["rho_density"].startswith("data:image/svg+xml") and figs["scatter"].startswith("data:image/svg+xml")


def test_pair_figures_do_not_hide_bugs(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from reportgen.report import context

    result, data, spec = exact_result(tmp_path)

    def broken(*args: object, **kwargs: object) -> str:
        raise RuntimeError("a bug, not a figure that cannot be drawn")

    monkeypatch.setattr(context.figures, "scatter_with_ellipses", broken)
    with pytest.raises(RuntimeError):
        context.pair_figures(result, data, spec)  # type: ignore[arg-type]


def test_edge_cases_run_end_to_end_with_the_exact_engine(tmp_path: Path) -> None:
    from reportgen.cli import main

    spec = edge_project(tmp_path)
    outcome = CliRunner().invoke(main, ["run", str(spec), "--out", str(tmp_path / "out")])
    assert outcome.exit_code == 0, outcome.output
    assert (tmp_path / "out" / "report.pdf").stat().st_size > 0
