"""The posterior predictive check of the normal model (reportgen/checks/ppc.py)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from reportgen import exact
from reportgen.checks.ppc import (
    SIMULATED_SKEW_MAX_N,
    dagostino_skewness_z,
    normal_skewness_variance,
    predictive_check,
    replicated_correlations,
    simulated_skewness,
)


def _correlated_rows(n: int, rho: float, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    x = rng.standard_normal(n)
    y = rho * x + np.sqrt(1.0 - rho * rho) * rng.standard_normal(n)
    return 3.0 + 2.0 * x, -1.0 + 0.5 * y


def _posterior_draws(x: np.ndarray, y: np.ndarray, count: int = 1000) -> np.ndarray:
    """Evenly spaced quantiles of the exact posterior of rho (uniform prior)."""
    posterior = exact.exact_posterior(x.size, float(np.corrcoef(x, y)[0, 1]))
    return np.asarray(posterior.quantile((np.arange(count) + 0.5) / count))


def test_wishart_r_has_the_distribution_of_r_from_simulated_rows() -> None:
    """Two-sample Kolmogorov-Smirnov test (scipy.stats.ks_2samp) against r computed from simulated bivariate-normal
    rows (numpy's multivariate_normal); n = 30, rho = 0.5. Outside reference: scipy/numpy."""
    rng = np.random.default_rng(20261)
    n, rho, count = 30, 0.5, 4000
    from_wishart = replicated_correlations(np.full(count, rho), n, rng)
    rows = rng.multivariate_normal([0.0, 0.0], [[1.0, rho], [rho, 1.0]], size=(count, n))
    centred = rows - rows.mean(axis=1, keepdims=True)
    sxy = np.sum(centred[..., 0] * centred[..., 1], axis=1)
    from_rows = sxy / np.sqrt(np.sum(centred[..., 0] ** 2, axis=1) * np.sum(centred[..., 1] ** 2, axis=1))
    assert stats.ks_2samp(from_wishart, from_rows).pvalue > 0.01


def test_wishart_r_under_independence_follows_the_exact_null_distribution() -> None:
    """At rho = 0, (r + 1)/2 ~ Beta(n/2 - 1, n/2 - 1) (Fisher 1915, Biometrika 10; the exact null distribution
    scipy.stats.pearsonr uses). n = 5, so a wrong number of degrees of freedom would show."""
    rng = np.random.default_rng(5)
    r = replicated_correlations(np.zeros(20_000), 5, rng)
    assert stats.kstest(r, stats.beta(1.5, 1.5, loc=-1.0, scale=2.0).cdf).pvalue > 0.01
    wrong_df = stats.beta(2.0, 2.0, loc=-1.0, scale=2.0).cdf  # the null distribution for n = 6
    assert stats.kstest(r, wrong_df).pvalue < 1e-6


def test_wishart_r_moments_for_large_n_and_cost_independent_of_n() -> None:
    """Var(r) ~ (1 - rho^2)^2 / (n - 1) and E(r) ~ rho (Fisher 1915, Biometrika 10, large-n approximation),
    at n = 10,000 and n = 10 million (the latter costs the same: no rows are simulated)."""
    rng = np.random.default_rng(77)
    rho, count = 0.5, 20_000
    for n in (10_000, 10_000_000):
        r = replicated_correlations(np.full(count, rho), n, rng)
        expected_var = (1.0 - rho**2) ** 2 / (n - 1)
        # relative sampling error of a variance from 20,000 draws is about sqrt(2/20,000) = 1%
        assert abs(r.var() / expected_var - 1.0) < 0.05
        assert abs(r.mean() - rho) < 4.0 * np.sqrt(expected_var / count)


def test_p_r_is_not_extreme_for_normal_data_and_small_when_rho_is_wrong() -> None:
    """Posterior predictive p-values (Gelman, Meng & Stern 1996) of normal data under its own posterior are
    not extreme; against draws of rho far from the data's they are (common practice)."""
    x, y = _correlated_rows(200, 0.3, np.random.default_rng(8))
    draws = _posterior_draws(x, y)
    check = predictive_check(draws, x, y, seed=3)
    assert check.p_r > 0.05
    assert abs(check.observed_r - np.corrcoef(x, y)[0, 1]) < 1e-12
    assert predictive_check(draws - 0.4, x, y, seed=3).p_r < 0.01


def test_p_skew_is_small_for_exponential_margin() -> None:
    """An exponential margin has skewness 2 (textbook value); n = 200 normal samples almost never reach it
    (sd of g1 about 0.17, Pearson 1930), so p < 0.01, while the normal margin's p is not small."""
    rng = np.random.default_rng(21)
    x = rng.exponential(size=200)
    y = rng.standard_normal(200)
    check = predictive_check(_posterior_draws(x, y), x, y, seed=4)
    assert check.p_skew_x < 0.01
    assert check.p_skew_y > 0.05
    assert abs(check.observed_skew_x - stats.skew(x, bias=True)) < 1e-12  # scipy's g1


def test_skewness_variance_formula_matches_simulation_at_the_switch() -> None:
    """6(n - 2)/((n + 1)(n + 3)) (Pearson 1930, Biometrika 22; Fisher 1930) against the variance of
    scipy.stats.skew(bias=True) of simulated normal samples at n = 20,000, within 3 sampling SEs (~5%)."""
    count = 6000
    g1 = simulated_skewness(SIMULATED_SKEW_MAX_N, count, np.random.default_rng(11))
    assert abs(stats.skew(np.random.default_rng(1).standard_normal(100), bias=True)
               - simulated_skewness(100, 1, np.random.default_rng(1))[0]) < 1e-12
    simulated_var = float(np.mean(g1**2))  # the mean of g1 is 0 by symmetry
    assert abs(simulated_var / normal_skewness_variance(SIMULATED_SKEW_MAX_N) - 1.0) < 3.0 * np.sqrt(2.0 / count)


@pytest.mark.parametrize("n", [SIMULATED_SKEW_MAX_N + 1, 10_000, 1_000_000])
def test_above_the_switch_the_skewness_p_value_is_scipy_skewtest(n: int) -> None:
    """Above the switch the skewness p-value is D'Agostino's (1970) two-sided normal p; the reference is
    scipy.stats.skewtest (which computes g1 itself with bias=True), to 1e-10."""
    rng = np.random.default_rng(n)
    sd = np.sqrt(normal_skewness_variance(n))
    x = rng.standard_normal(n)
    x = x + 0.5 * sd * (x**2 - 1.0) / 2.0  # skewed by about 1.5 SDs of g1, give or take sampling noise
    y = rng.standard_normal(n)
    check = predictive_check(np.full(10, 0.0), x, y, seed=1)
    assert check.p_skew_x == pytest.approx(stats.skewtest(x).pvalue, rel=1e-10)
    assert check.p_skew_y == pytest.approx(stats.skewtest(y).pvalue, rel=1e-10)
    assert dagostino_skewness_z(float(stats.skew(x, bias=True)), n) == pytest.approx(
        stats.skewtest(x).statistic, rel=1e-10)


def test_skewness_p_value_just_above_the_switch_agrees_with_simulation() -> None:
    """Just above the switch, D'Agostino's p must agree with the simulated one (20,000 samples of n normal
    values, scipy.stats.skew) within 3 sampling SEs, for observed skewness of 1, 2 and 2.5 SDs of g1."""
    n, count = SIMULATED_SKEW_MAX_N + 1, 20_000
    reference = simulated_skewness(n, count, np.random.default_rng(2))
    for size in (1.0, 2.0, 2.5):
        g1 = size * np.sqrt(normal_skewness_variance(n))
        simulated_p = 2.0 * min(np.mean(reference >= g1), np.mean(reference <= g1))
        ours = 2.0 * stats.norm.sf(abs(dagostino_skewness_z(g1, n)))
        allowed = 3.0 * 2.0 * np.sqrt(simulated_p / 2.0 * (1.0 - simulated_p / 2.0) / count)
        assert abs(ours - simulated_p) < allowed, size


def test_dagostino_needs_eight_rows() -> None:
    with pytest.raises(ValueError, match="at least 8 rows"):
        dagostino_skewness_z(0.1, 7)


def test_deterministic_for_a_seed_and_constant_columns_give_nan() -> None:
    """Same seed, same numbers (common practice: numpy Generator streams are reproducible)."""
    x, y = _correlated_rows(50, 0.2, np.random.default_rng(9))
    draws = _posterior_draws(x, y, 400).reshape(2, 200)
    assert predictive_check(draws, x, y, seed=12) == predictive_check(draws, x, y, seed=12)
    assert predictive_check(draws, x, y, seed=12) != predictive_check(draws, x, y, seed=13)
    constant = predictive_check(draws, np.ones(50), y, seed=12)
    assert np.isnan(constant.observed_r) and np.isnan(constant.p_r) and np.isnan(constant.p_skew_x)
    assert not np.isnan(constant.p_skew_y)
