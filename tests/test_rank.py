"""Tests for reportgen.models.rank against references outside the module.

References used below:

* scipy.stats.kendalltau (tau-b; its method="asymptotic" p-value uses Kendall's tie-corrected null
  variance of S), scipy.stats.spearmanr, scipy.stats.pearsonr and scipy.integrate.quad.
* Kendall (1970), *Rank Correlation Methods*, 4th ed., ch. 4: S = concordant minus discordant pairs
  and its null variance with ties in both rankings (formula typed from memory):
  Var0(S) = [n(n-1)(2n+5) - sum t(t-1)(2t+5) - sum u(u-1)(2u+5)] / 18
            + [sum t(t-1)(t-2)][sum u(u-1)(u-2)] / [9 n(n-1)(n-2)] + [sum t(t-1)][sum u(u-1)] / [2 n(n-1)].
* van Doorn, Ly, Marsman & Wagenmakers (2018), *The American Statistician* 72(4): T* = S / sqrt(Var0(S))
  is approximately N((3/2) tau sqrt(n), 1); the posterior of tau is prior x that normal likelihood.
* Greiner's relation rho = sin(pi tau / 2) and Pearson's (1907) rho = 2 sin(pi r_s / 6) for bivariate-normal
  data (Kruskal 1958, *JASA* 53).
"""

from __future__ import annotations

import math
from collections import Counter

import numpy as np
import pytest
from scipy import integrate, stats

from reportgen.crosscheck import exact_rule_probability
from reportgen.exact import exact_posterior, log_stretched_beta_pdf
from reportgen.models.rank import (
    KendallScore,
    RankPosterior,
    kendall_score,
    log_tau_prior,
    posterior_from_score,
    rank_posterior,
)
from reportgen.spec import Rule


def _normal_pairs(n: int, rho: float, seed: int) -> tuple[np.ndarray, np.ndarray]:
    values = np.random.default_rng(seed).multivariate_normal([0.0, 0.0], [[1.0, rho], [rho, 1.0]], size=n)
    return values[:, 0], values[:, 1]


def _ordinal_pairs(n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Five-point and three-point ratings of correlated normals: heavy ties in both columns."""
    x, y = _normal_pairs(n, 0.5, seed)
    return np.digitize(x, [-1.0, -0.3, 0.3, 1.0]).astype(float), np.digitize(y, [-0.5, 0.5]).astype(float)


def _quad_log_evidence(score: KendallScore, a: float, b: float) -> float:
    """log of the integral over tau in [-1, 1] of prior(tau) N(T* | c tau, 1) / N(T* | 0, 1), by quad."""
    c, t_star = score.slope, score.statistic

    def integrand(tau: float) -> float:
        return math.exp(float(log_tau_prior(tau, a, b)) + c * tau * (t_star - 0.5 * c * tau))

    return math.log(integrate.quad(integrand, -1.0, 1.0, epsabs=0.0, epsrel=1e-12, limit=500)[0])


def test_tau_hat_matches_scipy_on_continuous_and_tied_data() -> None:
    """Reference: scipy.stats.kendalltau (tau-b) on continuous and on tied ordinal data."""
    for x, y in (_normal_pairs(300, 0.4, seed=1), _ordinal_pairs(300, seed=2)):
        posterior = rank_posterior(x, y)
        assert posterior.tau_hat == pytest.approx(stats.kendalltau(x, y).statistic, abs=1e-12)


def test_score_and_null_variance_match_direct_count_and_kendall_formula() -> None:
    """Reference: an O(n^2) count of S and Kendall's (1970) tie-corrected Var0(S), from tie counts."""
    x, y = _ordinal_pairs(80, seed=3)
    n = x.size
    direct_s = int(sum(np.sign(x[i] - x[j]) * np.sign(y[i] - y[j]) for i in range(n) for j in range(i + 1, n)))
    tx, ty = [np.array([t for t in Counter(v.tolist()).values() if t > 1], dtype=float) for v in (x, y)]
    formula = (
        (n * (n - 1) * (2 * n + 5) - np.sum(tx * (tx - 1) * (2 * tx + 5)) - np.sum(ty * (ty - 1) * (2 * ty + 5))) / 18
        + np.sum(tx * (tx - 1) * (tx - 2)) * np.sum(ty * (ty - 1) * (ty - 2)) / (9 * n * (n - 1) * (n - 2))
        + np.sum(tx * (tx - 1)) * np.sum(ty * (ty - 1)) / (2 * n * (n - 1))
    )
    score = kendall_score(x, y)
    assert score.score == direct_s
    assert score.null_variance == pytest.approx(formula, rel=1e-12)
    assert formula < n * (n - 1) * (2 * n + 5) / 18  # ties shrink the variance: the correction is in play


def test_two_sided_p_value_of_statistic_matches_scipy_asymptotic() -> None:
    """Reference: scipy.stats.kendalltau(method="asymptotic") p-value = 2 sf(|S| / sqrt(Var0(S))) with ties."""
    for x, y in (_normal_pairs(150, 0.15, seed=4), _ordinal_pairs(150, seed=5)):
        posterior = rank_posterior(x, y)
        expected = stats.kendalltau(x, y, method="asymptotic").pvalue
        assert 2.0 * stats.norm.sf(abs(posterior.statistic)) == pytest.approx(expected, rel=1e-10)


def test_large_sample_posterior_covers_truth_and_agrees_with_point_estimates() -> None:
    """References: Greiner's sin(pi tau_b / 2) and Pearson's 2 sin(pi r_s / 6) from scipy's kendalltau and
    spearmanr (Kruskal 1958); the true rho = 0.6 of the simulation; the exact Pearson posterior (Jeffreys 1961)."""
    x, y = _normal_pairs(2000, 0.6, seed=6)
    posterior = rank_posterior(x, y)
    lower, upper = posterior.hdi(0.95)
    assert lower < 0.6 < upper
    assert posterior.median == pytest.approx(math.sin(math.pi * stats.kendalltau(x, y).statistic / 2), abs=2e-3)
    assert posterior.median == pytest.approx(2 * math.sin(math.pi * stats.spearmanr(x, y).statistic / 6), abs=0.01)
    assert posterior.tau_median == pytest.approx(stats.kendalltau(x, y).statistic, abs=2e-3)
    pearson = exact_posterior(x.size, float(stats.pearsonr(x, y).statistic))
    assert abs(posterior.median - pearson.median) < 0.5 * pearson.sd


@pytest.mark.parametrize(("a", "b"), [(1.0, 1.0), (0.5, 0.5), (3.0, 0.7), (0.2, 0.3)])
def test_density_is_normalised_and_cdf_inverts_quantile(a: float, b: float) -> None:
    """References: a density integrates to 1 (trapezoid on the rho grid); cdf and quantile are inverses
    (common practice); the posterior mean against scipy.integrate.quad in tau (consistency check)."""
    x, y = _normal_pairs(12, 0.5, seed=7)
    posterior = rank_posterior(x, y, a, b)
    assert np.all(np.isfinite(posterior.density)) and np.all(np.diff(posterior.rho) >= 0.0)
    assert np.trapezoid(posterior.density, posterior.rho) == pytest.approx(1.0, abs=1e-3)
    for q in (0.01, 0.2, 0.5, 0.8, 0.99):
        assert posterior.cdf(posterior.quantile(q)) == pytest.approx(q, abs=1e-9)
    for value in (-0.5, 0.0, 0.4, 0.9):
        assert posterior.quantile(posterior.cdf(value)) == pytest.approx(value, abs=1e-8)
    score = kendall_score(x, y)
    evidence = math.exp(_quad_log_evidence(score, a, b))
    c, t_star = score.slope, score.statistic

    def weighted(tau: float) -> float:
        log_weight = float(log_tau_prior(tau, a, b)) + c * tau * (t_star - c * tau / 2)
        return math.sin(math.pi * tau / 2) * math.exp(log_weight)

    mean = integrate.quad(weighted, -1.0, 1.0, epsabs=0.0, epsrel=1e-11, limit=500)[0] / evidence
    assert posterior.mean == pytest.approx(mean, abs=1e-8)
    assert math.isfinite(posterior.sd) and math.isfinite(posterior.log_bf10)
    assert all(-1.0 <= end <= 1.0 for end in posterior.hdi(0.95))


def test_tau_prior_is_the_stretched_beta_on_rho_with_jacobian() -> None:
    """Reference: change of variables rho = sin(pi tau / 2) applied to reportgen.exact.log_stretched_beta_pdf,
    Jacobian (pi/2) cos(pi tau / 2) (common practice), and quad: the tau prior integrates to 1."""
    tau = np.linspace(-0.99, 0.99, 41)
    for a, b in ((1.0, 1.0), (0.5, 0.5), (3.0, 0.7), (0.2, 0.3)):
        jacobian = np.log(0.5 * np.pi * np.cos(0.5 * np.pi * tau))
        expected = log_stretched_beta_pdf(np.sin(0.5 * np.pi * tau), a, b) + jacobian
        np.testing.assert_allclose(log_tau_prior(tau, a, b), expected, rtol=1e-12, atol=1e-12)
        total = integrate.quad(lambda t, a=a, b=b: math.exp(float(log_tau_prior(t, a, b))), -1.0, 1.0, limit=200)[0]
        assert total == pytest.approx(1.0, abs=1e-6)


def test_positive_data_put_most_mass_above_zero() -> None:
    """Reference: common practice (positively correlated data give P(rho > 0) above one half)."""
    x, y = _normal_pairs(40, 0.5, seed=8)
    assert rank_posterior(x, y).prob_above(0.0) > 0.5


@pytest.mark.parametrize(("a", "b"), [(1.0, 1.0), (0.5, 0.5), (3.0, 0.7)])
def test_log_bf10_matches_direct_quadrature(a: float, b: float) -> None:
    """Consistency check: log BF10 against scipy.integrate.quad of the same integrand (prior(tau) times the
    likelihood ratio N(T* | c tau, 1) / N(T* | 0, 1), van Doorn et al. 2018)."""
    for x, y in (_normal_pairs(30, 0.3, seed=9), _ordinal_pairs(60, seed=10)):
        score = kendall_score(x, y)
        assert posterior_from_score(score, a, b).log_bf10 == pytest.approx(_quad_log_evidence(score, a, b), abs=1e-9)


def test_bayes_factor_favours_independence_for_independent_data() -> None:
    """Reference: common practice (a Bayes factor from independent data, n = 200, favours the point null)."""
    rng = np.random.default_rng(20)
    posterior = rank_posterior(rng.normal(size=200), rng.normal(size=200))
    assert abs(posterior.statistic) < 1.96  # an unremarkable sample (not significant at the 5% level)
    assert posterior.log_bf10 < 0.0


def test_monotone_non_linear_relation_is_near_one_on_ranks_but_not_for_pearson() -> None:
    """Reference: scipy.stats.pearsonr on y = exp(3x) + small noise (n = 100), a monotone non-linear relation."""
    rng = np.random.default_rng(12)
    x = rng.normal(size=100)
    y = np.exp(3.0 * x) + rng.normal(scale=1e-3, size=100)
    posterior = rank_posterior(x, y)
    assert posterior.median > 0.95
    assert stats.pearsonr(x, y).statistic < 0.8


def test_exact_rule_probability_accepts_a_rank_posterior() -> None:
    """Reference: the posterior's own probabilities (duck typing for reportgen.crosscheck)."""
    posterior = rank_posterior(*_normal_pairs(60, 0.4, seed=13))
    above = Rule(name="above", statement="above", threshold=0.2)
    below = Rule(name="below", statement="below", threshold=0.2)
    between = Rule(name="between", statement="between", lower=0.1, upper=0.5)
    assert exact_rule_probability(posterior, above) == pytest.approx(posterior.prob_above(0.2), abs=0.0)
    assert exact_rule_probability(posterior, above) + exact_rule_probability(posterior, below) == pytest.approx(1.0)
    assert exact_rule_probability(posterior, between) == pytest.approx(posterior.cdf(0.5) - posterior.cdf(0.1))


def test_perfect_agreement_and_extreme_priors_stay_finite() -> None:
    """Reference: common practice (T* at its largest possible value; a prior shape far below 1)."""
    values = np.arange(20.0)
    for a, b in ((1.0, 1.0), (0.05, 0.05)):
        posterior = rank_posterior(values, values, a, b)
        assert np.all(np.isfinite(posterior.density)) and posterior.median > 0.9
        assert math.isfinite(posterior.log_bf10) and posterior.log_bf10 > 10.0


def test_one_million_pairs() -> None:
    """Reference: scipy.stats.kendalltau on the same data (runs in well under a few seconds; not timed)."""
    x, y = _normal_pairs(1_000_000, 0.3, seed=14)
    posterior = rank_posterior(x, y)
    assert isinstance(posterior, RankPosterior)
    assert posterior.tau_hat == pytest.approx(stats.kendalltau(x, y).statistic, abs=1e-12)
    assert posterior.hdi(0.95)[0] < 0.3 < posterior.hdi(0.95)[1]


@pytest.mark.parametrize(
    ("x", "y"),
    [([1.0, 2.0, 3.0], [1.0, 2.0, 3.0]), ([1.0, 2.0, 3.0, 4.0], [1.0, 1.0, 1.0, 1.0]),
     ([1.0, 2.0, np.nan, 4.0], [1.0, 2.0, 3.0, 4.0]), ([1.0, 2.0, 3.0, 4.0], [1.0, 2.0, 3.0])],
)
def test_unusable_input_is_refused(x: list[float], y: list[float]) -> None:
    with pytest.raises(ValueError):
        rank_posterior(np.array(x), np.array(y))


def test_bad_shapes_and_probabilities_are_refused() -> None:
    posterior = rank_posterior(*_normal_pairs(20, 0.3, seed=15))
    with pytest.raises(ValueError):
        rank_posterior(*_normal_pairs(20, 0.3, seed=15), prior_a=0.0)
    with pytest.raises(ValueError):
        posterior.quantile(1.5)
    with pytest.raises(ValueError):
        posterior.hdi(1.0)


def test_heavy_ties_centre_on_tau_b() -> None:
    """Ordinal 5 x 3 ratings with heavy ties: the posterior of tau centres on scipy.stats.kendalltau's tau-b
    (the tie-adjusted coefficient; Kendall 1970), not on the smaller tau-a = S / (n(n-1)/2)."""
    from scipy import stats as scipy_stats

    from reportgen.models.rank import rank_posterior

    rng = np.random.default_rng(11)
    latent = rng.multivariate_normal([0.0, 0.0], [[1.0, 0.5], [0.5, 1.0]], size=20_000)
    x = np.digitize(latent[:, 0], [-1.0, -0.3, 0.3, 1.0])
    y = np.digitize(latent[:, 1], [-0.5, 0.5])
    tau_b = scipy_stats.kendalltau(x, y).statistic
    n = x.size
    score = tau_b * np.sqrt(np.prod([n * (n - 1) / 2 - sum(c * (c - 1) / 2 for c in np.unique(v, return_counts=True)[1])
                                     for v in (x, y)]))
    tau_a = score / (n * (n - 1) / 2)
    posterior = rank_posterior(x, y)
    assert abs(posterior.tau_median - tau_b) < 0.01
    assert tau_a < tau_b - 0.05  # the ties matter here, so the test can tell the two apart
