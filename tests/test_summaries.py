"""Intervals, probabilities and the frequentist reference against outside references."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import integrate, stats

from reportgen.exact import log_stretched_beta_pdf
from reportgen.spec import Rope, Rule
from reportgen.summaries import (
    bounded_density,
    central_interval,
    hdi_interval,
    pearson_reference,
    rope_decision,
    rule_probability,
)


@pytest.mark.parametrize(("n", "rho", "seed"), [(10, 0.3, 1), (50, -0.8, 2), (400, 0.05, 3), (25, 0.97, 4)])
def test_pearson_reference_matches_scipy(n: int, rho: float, seed: int) -> None:
    """scipy.stats.pearsonr: r, two-sided p-value, and the Fisher-z confidence interval."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    y = rho * x + np.sqrt(1 - rho**2) * rng.normal(size=n)
    ref = stats.pearsonr(x, y)
    ci = ref.confidence_interval(confidence_level=0.95)
    ours = pearson_reference(n, float(ref.statistic), 0.95)
    assert ours.p_value == pytest.approx(ref.pvalue, rel=1e-10, abs=1e-300)
    assert ours.ci_lower == pytest.approx(ci.low, abs=1e-10)
    assert ours.ci_upper == pytest.approx(ci.high, abs=1e-10)


def test_r_squared_is_the_ols_r_squared_and_the_residual_identity_holds() -> None:
    """statsmodels OLS of y on x: R^2 = r^2, and Var(y - a x - b) = Var(y)(1 - r^2)
    for the fitted line (common practice; exact for sample moments)."""
    rng = np.random.default_rng(11)
    x = rng.normal(size=300)
    y = 0.6 * x + rng.normal(size=300)
    r = stats.pearsonr(x, y).statistic
    fit = sm.OLS(y, sm.add_constant(x)).fit()
    assert fit.rsquared == pytest.approx(r**2, rel=1e-10)
    residual = y - fit.params[1] * x - fit.params[0]
    assert np.var(residual) == pytest.approx(np.var(y) * (1 - r**2), rel=1e-10)


def test_central_interval_is_the_quantile_pair() -> None:
    draws = np.random.default_rng(5).normal(size=20_000)
    lower, upper = central_interval(draws, 0.9)
    assert (lower, upper) == pytest.approx(tuple(np.quantile(draws, [0.05, 0.95])))


def test_hdi_finds_the_true_highest_density_interval_of_a_skewed_density() -> None:
    """Gamma(2, 1): the exact 90% HDI [a, b] solves pdf(a) = pdf(b) and cdf(b) - cdf(a) = 0.9
    (definition of an HDI, e.g. Kruschke 2015, sec. 4.3.4), computed with scipy."""
    from scipy import optimize

    dist = stats.gamma(2.0)

    def upper_for(a: float) -> float:
        return float(dist.ppf(dist.cdf(a) + 0.9))

    a = optimize.brentq(lambda a: dist.pdf(a) - dist.pdf(upper_for(a)), 1e-6, dist.ppf(0.0999))
    exact = (a, upper_for(a))
    draws = np.random.default_rng(6).gamma(2.0, size=200_000)
    ours = hdi_interval(draws, 0.9)
    assert ours == pytest.approx(exact, abs=0.03)
    central = central_interval(draws, 0.9)
    assert ours[1] - ours[0] < central[1] - central[0]


def test_rule_probabilities_are_shares_of_draws() -> None:
    rho = np.array([-0.5, -0.1, 0.05, 0.2, 0.35, 0.9])
    above = Rule(name="a", statement="above", threshold=0.3)
    between = Rule(name="b", statement="between", lower=-0.2, upper=0.3)
    assert rule_probability(rho, above) == pytest.approx(2 / 6)
    assert rule_probability(rho, between) == pytest.approx(3 / 6)


def test_rope_decision_follows_the_hdi_rule() -> None:
    """Kruschke (2018): inside -> practically zero; outside -> not zero; else undecided."""
    rope = Rope(lower=-0.1, upper=0.1)
    assert rope_decision((-0.05, 0.08), rope) == "practically_zero"
    assert rope_decision((0.2, 0.6), rope) == "not_zero"
    assert rope_decision((0.05, 0.4), rope) == "undecided"


def stretched_beta_pdf(rho: object, a: float, b: float) -> object:
    values = np.exp(log_stretched_beta_pdf(rho, a, b))
    return float(values) if np.ndim(values) == 0 else values


def test_stretched_beta_is_a_density_and_uniform_by_default() -> None:
    total, _ = integrate.quad(lambda r: stretched_beta_pdf(r, 2.5, 1.5), -1, 1)
    assert total == pytest.approx(1.0, rel=1e-10)
    assert stretched_beta_pdf(np.array([-0.7, 0.2]), 1.0, 1.0) == pytest.approx([0.5, 0.5])


def test_bounded_density_integrates_to_one_near_a_bound() -> None:
    """Reflection at the bound keeps the mass inside (Silverman 1986, sec. 2.10)."""
    draws = 1.0 - np.random.default_rng(7).exponential(0.02, size=5000)
    grid, density = bounded_density(draws, -1.0, 1.0)
    assert grid.max() <= 1.0
    assert integrate.trapezoid(density, grid) == pytest.approx(1.0, abs=0.02)
