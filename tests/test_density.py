"""The binned kernel density of reportgen.summaries against scipy.stats.gaussian_kde summed directly."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

from reportgen import summaries
from reportgen.summaries import bounded_density, scott_bandwidth

PEAK_TOLERANCE = 1e-4  # allowed max |binned - direct| as a share of the direct density's peak (measured 1e-6 to 2e-5)


def scipy_reflected_density(draws: np.ndarray, grid: np.ndarray, lower: float | None,
                            upper: float | None) -> np.ndarray:
    """The reference: scipy.stats.gaussian_kde (Scott's rule) evaluated at the grid, plus its value at the
    grid mirrored in each bound (reflection; Silverman 1986, Density Estimation, sec. 2.10)."""
    kde = stats.gaussian_kde(draws, bw_method="scott")
    density = kde(grid)
    for bound in (lower, upper):
        if bound is not None:
            density += kde(2.0 * bound - grid)
    return density


def _draws(kind: str) -> tuple[np.ndarray, float | None, float | None]:
    rng = np.random.default_rng(42)
    if kind == "normal":
        return 0.4 + 0.05 * rng.standard_normal(4000), None, None
    if kind == "skewed":  # a lognormal scale parameter, bounded below at 0
        return rng.lognormal(0.0, 0.8, 4000), 0.0, None
    if kind == "near_one":  # rho piled up against its upper bound
        return 1.0 - rng.exponential(0.02, 4000), -1.0, 1.0
    if kind == "two_modes":
        return np.concatenate([rng.standard_normal(2000), 40.0 + rng.standard_normal(2000)]), None, None
    if kind == "few":
        return rng.standard_normal(12), None, None
    raise AssertionError(kind)


@pytest.mark.parametrize("kind", ["normal", "skewed", "near_one", "two_modes", "few"])
def test_binned_density_matches_scipy_gaussian_kde(kind: str) -> None:
    draws, lower, upper = _draws(kind)
    grid, density = bounded_density(draws, lower, upper)
    reference = scipy_reflected_density(draws, grid, lower, upper)
    assert np.max(np.abs(density - reference)) < PEAK_TOLERANCE * reference.max()
    assert np.all(density >= 0.0)


def test_bandwidth_is_scipy_scott_factor_times_the_sample_sd() -> None:
    """scipy.stats.gaussian_kde: covariance = Scott's factor^2 times the sample covariance (ddof = 1)."""
    draws, _, _ = _draws("skewed")
    kde = stats.gaussian_kde(draws, bw_method="scott")
    assert scott_bandwidth(draws) == pytest.approx(float(np.sqrt(kde.covariance[0, 0])), rel=1e-12)


def test_reflected_density_keeps_its_mass_inside_both_bounds() -> None:
    """Draws near both ends of (-1, 1): reflection at each bound keeps the integral at 1 (Silverman 1986)."""
    rng = np.random.default_rng(3)
    draws = np.clip(np.concatenate([-1.0 + rng.exponential(0.05, 2000), 1.0 - rng.exponential(0.05, 2000)]),
                    -1.0, 1.0)
    grid, density = bounded_density(draws, -1.0, 1.0)
    assert grid[0] == -1.0 and grid[-1] == 1.0
    assert integrate.trapezoid(density, grid) == pytest.approx(1.0, abs=0.01)
    reference = scipy_reflected_density(draws, grid, -1.0, 1.0)
    assert np.max(np.abs(density - reference)) < PEAK_TOLERANCE * reference.max()


def test_too_fine_a_grid_falls_back_to_the_direct_sum(monkeypatch: pytest.MonkeyPatch) -> None:
    """When the fine grid would be too large, the density is scipy's direct sum (to rounding)."""
    draws, lower, upper = _draws("near_one")
    monkeypatch.setattr(summaries, "MAX_BINS", 10)
    grid, density = bounded_density(draws, lower, upper)
    np.testing.assert_allclose(density, scipy_reflected_density(draws, grid, lower, upper), rtol=1e-12, atol=0.0)
