"""The difference of two correlations (reportgen.difference) against computations that share none of its
code: a convolution of two exact posteriors built from scipy's hypergeometric function, closed-form
answers for two normal posteriors, and Monte Carlo agreement between draws and grids."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal, special, stats

from reportgen import exact
from reportgen.data import SufficientStats, sufficient_stats
from reportgen.difference import Posterior, posterior_from_draws, posterior_from_stats, rho_difference

MASS = 0.95
MARGIN = 0.1
STEP = 2e-4  # the reference grid in rho: fine enough for 1e-4 accuracy in the probabilities
RHO = np.arange(-1.0 + STEP / 2, 1.0, STEP)


def stats_of(n: int, r: float) -> SufficientStats:
    return SufficientStats(n=n, mean_x=0.0, mean_y=0.0, sxx=1.0, syy=1.0, sxy=r)


def reference_density(n: int, r: float) -> np.ndarray:
    """The exact posterior of rho under Jeffreys' priors and a uniform prior on rho, on the uniform grid RHO.

    Published formula (Jeffreys 1961, ch. 5; Ly, Marsman & Wagenmakers 2018, eq. for the unknown-means
    case): p(rho) ~ (1 - rho^2)^((n-1)/2) (1 - rho r)^(-(n - 3/2)) 2F1(1/2, 1/2; n - 1/2; (1 + rho r)/2),
    with scipy.special.hyp2f1; normalised by a plain sum here, independently of reportgen.exact.
    """
    log_p = (0.5 * (n - 1) * np.log1p(-RHO**2) - (n - 1.5) * np.log1p(-RHO * r)
             + np.log(special.hyp2f1(0.5, 0.5, n - 0.5, 0.5 * (1.0 + RHO * r))))
    p = np.exp(log_p - log_p.max())
    return p / (p.sum() * STEP)


def convolved(pa: np.ndarray, pb: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Density of rho_b - rho_a for independent a and b (scipy.signal.fftconvolve) and its grid of d."""
    density = signal.fftconvolve(pb, pa[::-1]) * STEP
    d = (np.arange(density.size) - (RHO.size - 1)) * STEP
    return d, density


def reference_summary(d: np.ndarray, density: np.ndarray) -> dict[str, float]:
    """P(rose), P(moved) and quantiles from the convolved density: its running sum is the distribution
    function at the right end of each grid cell (a midpoint rule)."""
    cdf = np.cumsum(density) * STEP
    ends = d + STEP / 2

    def below(x: float) -> float:
        return float(np.interp(x, ends, cdf))

    tail = (1 - MASS) / 2
    return {"p_rose": 1 - below(0.0),
            "p_moved": 1 - below(MARGIN) + below(-MARGIN),
            "median": float(np.interp(0.5, cdf, ends)),
            "lower": float(np.interp(tail, cdf, ends)),
            "upper": float(np.interp(1 - tail, cdf, ends))}


@pytest.mark.parametrize(("first", "second"), [((40, 0.3), (60, 0.5)), ((25, 0.6), (30, 0.55)),
                                               ((200, -0.1), (12, 0.2))])
def test_exact_grids_agree_with_a_numerical_convolution(first: tuple[int, float], second: tuple[int, float]) -> None:
    """Against scipy.signal.fftconvolve of two exact posteriors computed from the published formula."""
    got = rho_difference(posterior_from_stats(stats_of(*first)), posterior_from_stats(stats_of(*second)),
                         MARGIN, MASS)
    want = reference_summary(*convolved(reference_density(*first), reference_density(*second)))
    # measured agreement: about 2e-6 in the probabilities and 5e-6 in the quantiles
    assert got.p_rose == pytest.approx(want["p_rose"], abs=2e-5)
    assert got.p_moved == pytest.approx(want["p_moved"], abs=2e-5)
    for name in ("median", "lower", "upper"):
        assert getattr(got, name) == pytest.approx(want[name], abs=1e-4), name
    assert (got.credible_mass, got.margin) == (MASS, MARGIN)


def normal_grid(mean: float, sd: float) -> Posterior:
    grid = np.linspace(mean - 12 * sd, mean + 12 * sd, 3001)
    return Posterior(source="normal", grid=grid, density=stats.norm.pdf(grid, mean, sd))


def normal_answer(mean: float, sd: float) -> dict[str, float]:
    """rho_b - rho_a ~ N(mean, sd) for independent normal posteriors (common practice; scipy.stats.norm)."""
    z = stats.norm.ppf(1 - (1 - MASS) / 2)
    return {"p_rose": float(stats.norm.sf(0, mean, sd)),
            "p_moved": float(stats.norm.sf(MARGIN, mean, sd) + stats.norm.cdf(-MARGIN, mean, sd)),
            "median": mean, "lower": mean - z * sd, "upper": mean + z * sd}


def test_two_normal_posteriors_give_the_closed_form_answer() -> None:
    """Phi((mu_b - mu_a) / sqrt(sd_a^2 + sd_b^2)) and the normal quantiles (scipy.stats.norm)."""
    got = rho_difference(normal_grid(0.20, 0.05), normal_grid(0.31, 0.04), MARGIN, MASS)
    want = normal_answer(0.11, float(np.hypot(0.05, 0.04)))
    for name, value in want.items():
        assert getattr(got, name) == pytest.approx(value, abs=2e-5), name


def test_normal_draws_agree_with_the_closed_form_within_monte_carlo_error() -> None:
    """Draws of two normals against scipy.stats.norm: within 4 Monte Carlo standard errors (common practice)."""
    rng = np.random.default_rng(11)
    m = 10_000
    a = posterior_from_draws(rng.normal(0.40, 0.06, size=m), "a")
    b = posterior_from_draws(rng.normal(0.35, 0.05, size=m), "b")
    got = rho_difference(a, b, MARGIN, MASS)
    sd = float(np.hypot(0.06, 0.05))
    want = normal_answer(-0.05, sd)
    for name in ("p_rose", "p_moved"):
        p = want[name]
        assert getattr(got, name) == pytest.approx(p, abs=4 * np.sqrt(p * (1 - p) / m))
    assert got.median == pytest.approx(-0.05, abs=4 * 1.25 * sd / np.sqrt(m))


@pytest.mark.parametrize("kinds", [("draws", "grid"), ("grid", "draws"), ("draws", "draws")])
def test_draws_and_grids_agree_within_monte_carlo_error(kinds: tuple[str, str]) -> None:
    """Draws from the exact posteriors (inverse CDF) against the grids: within 4 Monte Carlo standard errors
    of a proportion from M draws (common practice)."""
    rng = np.random.default_rng(5)
    m = 4_000
    specs = ((50, 0.35), (70, 0.5))
    grids = [posterior_from_stats(stats_of(n, r)) for n, r in specs]
    draws = [posterior_from_draws(np.asarray(exact.exact_posterior(n, r).quantile(rng.uniform(size=m))), f"{n}")
             for n, r in specs]
    chosen = [draws[i] if kind == "draws" else grids[i] for i, kind in enumerate(kinds)]
    got = rho_difference(*chosen, MARGIN, MASS)
    want = rho_difference(*grids, MARGIN, MASS)
    for name in ("p_rose", "p_moved"):
        p = getattr(want, name)
        assert getattr(got, name) == pytest.approx(p, abs=4 * np.sqrt(p * (1 - p) / m)), name
    assert got.median == pytest.approx(want.median, abs=0.02)
    assert ("draws" in got.method) and ("exact density" in got.method) == ("grid" in kinds)


def test_the_result_is_deterministic_and_antisymmetric() -> None:
    """Swapping a and b negates the difference and turns P(rose) into 1 - P(rose) (follows from the definition)."""
    rng = np.random.default_rng(3)
    a = posterior_from_draws(rng.normal(0.3, 0.1, size=3000), "a")
    b = posterior_from_stats(stats_of(80, 0.45))
    first, again, swapped = rho_difference(a, b, MARGIN, MASS), rho_difference(a, b, MARGIN, MASS), \
        rho_difference(b, a, MARGIN, MASS)
    assert first == again
    assert swapped.p_rose == pytest.approx(1 - first.p_rose, abs=1e-3)
    assert swapped.p_moved == pytest.approx(first.p_moved, abs=1e-3)
    assert swapped.median == pytest.approx(-first.median, abs=2e-3)
    assert swapped.lower == pytest.approx(-first.upper, abs=2e-3)


def test_identical_posteriors_give_an_even_chance_of_rising() -> None:
    """For two independent copies of one posterior, P(b > a) = 1/2 by symmetry (common practice)."""
    one = posterior_from_stats(stats_of(30, 0.7))
    got = rho_difference(one, one, MARGIN, MASS)
    assert got.p_rose == pytest.approx(0.5, abs=1e-6)
    assert got.median == pytest.approx(0.0, abs=1e-3)


def test_posterior_from_stats_is_the_exact_posterior_of_the_data() -> None:
    """The grid's mean equals reportgen.exact's mean, and the statistics enter only through n and r
    (Jeffreys 1961: the marginal posterior of rho depends on the data through n and r only)."""
    rng = np.random.default_rng(8)
    x = rng.normal(size=45)
    y = 0.5 * x + rng.normal(size=45)
    stats_xy = sufficient_stats(x, y)
    posterior = posterior_from_stats(stats_xy, 2.0, 1.5)
    mean = np.trapezoid(posterior.grid * posterior.density, posterior.grid)
    assert mean == pytest.approx(exact.exact_posterior(45, stats_xy.sample_r, 2.0, 1.5).mean, abs=1e-6)
    assert "exact posterior" in posterior.source
    scaled = sufficient_stats(3 * x + 7, y - 2)
    assert np.allclose(posterior_from_stats(scaled, 2.0, 1.5).density, posterior.density)


def test_bad_arguments_are_refused() -> None:
    grid = posterior_from_stats(stats_of(20, 0.1))
    draws = posterior_from_draws(np.array([[0.1, 0.2], [0.3, 0.4]]), "two chains")
    assert draws.draws.shape == (4,)
    with pytest.raises(ValueError, match="margin"):
        rho_difference(grid, draws, 0.0, MASS)
    with pytest.raises(ValueError, match="credible_mass"):
        rho_difference(grid, draws, MARGIN, 1.0)
    with pytest.raises(ValueError, match="both"):
        rho_difference(Posterior("x", draws=draws.draws, grid=grid.grid, density=grid.density), draws, MARGIN, MASS)
    with pytest.raises(ValueError, match="neither"):
        rho_difference(Posterior("x"), draws, MARGIN, MASS)
    with pytest.raises(ValueError, match="finite"):
        posterior_from_draws(np.array([0.1, np.nan]), "bad")
