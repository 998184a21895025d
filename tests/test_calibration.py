"""CI-sized simulation-based calibration of rho (Talts, Betancourt, Simpson, Vehtari & Gelman 2018,
arXiv:1804.06788), for the exact engine and for the sampler. The full grid is benchmarks/sbc.py.

Every uniformity check in this file belongs to one family held at the level ``FAMILY_LEVEL`` by
Bonferroni's inequality: each of the ``CHECKS`` tests (chi-square and Kolmogorov-Smirnov for each
exact setting, chi-square for each sampler setting) is run at ``FAMILY_LEVEL / CHECKS``. The seeds
are fixed, so the outcome repeats; the level is what a real bias must beat, and the tests marked
"caught" show that deliberate biases, at the same sizes and through the same checks, do fail.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import stats

from reportgen.calibration import (
    NEAR_MINUS_ONE,
    NEAR_PLUS_ONE,
    PRIOR_SETTINGS,
    UNIFORM,
    bonferroni_level,
    calibrate,
    calibrate_exact,
    correlated_rows,
    draw_rho,
    sample_correlations,
)
from reportgen.exact import exact_posterior
from reportgen.spec import RhoPrior, Sampler

# (n, prior on rho, replications): the exact engine costs about 4 ms a replication at n = 5 and
# 1 to 2 ms above (measured on 2 shared cores), hence fewer replications at n = 5.
EXACT_SETTINGS = [
    (5, "uniform", 1000), (5, "near+1", 1000),
    (20, "uniform", 1500), (20, "near+1", 1500), (20, "near-1", 1500),
    (200, "uniform", 2000), (200, "near+1", 2000),
]
# The sampler costs about 0.05 s a fit after the first compile (measured), so 100 fits a setting.
SAMPLER_SETTINGS = [(5, "near+1", 100), (20, "uniform", 100), (200, "near-1", 100)]
SBC_SAMPLER = Sampler(draws=200, tune=200, chains=2, seed=2018)

FAMILY_LEVEL = 0.01
CHECKS = 2 * len(EXACT_SETTINGS) + len(SAMPLER_SETTINGS)
LEVEL = bonferroni_level(FAMILY_LEVEL, CHECKS)


def _seed(n: int, prior: str) -> int:
    """A different fixed seed for each setting, so that settings do not share simulated data."""
    return 1000 * n + list(PRIOR_SETTINGS).index(prior)


def _exact(n: int, prior: str, replications: int, **kwargs):  # type: ignore[no-untyped-def]
    return calibrate_exact(replications, n=n, rho_prior=PRIOR_SETTINGS[prior], seed=_seed(n, prior), **kwargs)


def _sampled(n: int, prior: str, replications: int, **kwargs):  # type: ignore[no-untyped-def]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return calibrate(replications, n=n, rho_prior=PRIOR_SETTINGS[prior], sampler=SBC_SAMPLER,
                         seed=_seed(n, prior), **kwargs)


def test_bonferroni_level() -> None:
    # Bonferroni's inequality: P(any of k rejects) <= k * (alpha / k) (common practice)
    assert bonferroni_level(0.01, 17) == pytest.approx(0.01 / 17)
    assert LEVEL == pytest.approx(FAMILY_LEVEL / 17)
    with pytest.raises(ValueError):
        bonferroni_level(0.01, 0)


@pytest.mark.parametrize("prior", [NEAR_PLUS_ONE, NEAR_MINUS_ONE, RhoPrior(family="beta", a=2.0, b=5.0)])
def test_rho_is_drawn_from_the_stretched_beta_prior(prior: RhoPrior) -> None:
    draws = draw_rho(np.random.default_rng(3), prior, size=4000)
    # scipy's Beta(a, b) moved to [-1, 1] (loc = -1, scale = 2) is the stretched prior by definition
    reference = stats.beta(prior.a, prior.b, loc=-1.0, scale=2.0)
    assert stats.kstest(draws, reference.cdf).pvalue > 0.01


def test_simulated_r_has_the_null_law_of_pearsons_r() -> None:
    """With rho = 0, (1 + r) / 2 ~ Beta(n/2 - 1, n/2 - 1) for n normal rows, whatever the means and SDs
    (Fisher 1915; the exact null law that scipy.stats.pearsonr's documentation states, from memory)."""
    n = 12
    r = sample_correlations(*correlated_rows(np.random.default_rng(4), np.zeros(4000), n))
    reference = stats.beta(n / 2 - 1, n / 2 - 1, loc=-1.0, scale=2.0)
    assert stats.kstest(r, reference.cdf).pvalue > 0.01
    # and the sums agree with numpy's own correlation (a different route to the same number)
    x, y = correlated_rows(np.random.default_rng(5), np.array([0.9, -0.99]), n)
    assert sample_correlations(x, y) == pytest.approx([np.corrcoef(x[i], y[i])[0, 1] for i in range(2)])


@pytest.mark.parametrize(("n", "prior", "replications"), EXACT_SETTINGS)
def test_exact_engine_is_calibrated(n: int, prior: str, replications: int) -> None:
    result = _exact(n, prior, replications)
    assert result.replications == replications
    assert np.all((result.quantiles >= 0.0) & (result.quantiles <= 1.0))
    # the simulation used the prior: the mean of a stretched Beta(a, b) is 2a/(a + b) - 1 (Beta mean, a formula)
    a, b = PRIOR_SETTINGS[prior].shapes
    standard_error = 2.0 * np.sqrt(a * b / ((a + b) ** 2 * (a + b + 1))) / np.sqrt(replications)
    assert abs(result.true_rho.mean() - (2 * a / (a + b) - 1)) < 4 * standard_error
    # chi-square over 20 equal bins and scipy.stats.kstest against Uniform(0, 1), each at LEVEL
    assert result.is_uniform(LEVEL), (result.chi2_p_value, result.ks_p_value, result.counts)


def test_exact_calibration_catches_a_wrong_prior() -> None:
    """Caught: rho drawn near +1 but the posterior computed under the uniform prior (same size as above)."""
    result = _exact(5, "near+1", 1000, fit_rho_prior=UNIFORM)
    assert not result.is_uniform(LEVEL), (result.chi2_p_value, result.ks_p_value)


def test_exact_calibration_catches_an_overconfident_posterior() -> None:
    """Caught at n = 200, where the prior hardly matters: a posterior computed as if from 1.5 n pairs
    (its SD about 18% too small), through the same check at the same size as above."""

    def overconfident(n: int, r: float, a: float, b: float):  # type: ignore[no-untyped-def]
        return exact_posterior(round(1.5 * n), r, a, b)

    result = _exact(200, "uniform", 2000, engine=overconfident)
    assert not result.is_uniform(LEVEL), (result.chi2_p_value, result.ks_p_value)


@pytest.mark.usefixtures("draws_without_netcdf")  # the ranks need the draws of rho, not the draws file
@pytest.mark.parametrize(("n", "prior", "replications"), SAMPLER_SETTINGS)
def test_sampler_ranks_of_true_rho_are_uniform(n: int, prior: str, replications: int) -> None:
    result = _sampled(n, prior, replications)
    assert result.ranks.min() >= 0 and result.ranks.max() <= result.max_rank
    # chi-square test of uniform ranks over 10 bins (Talts et al. 2018, sec. 4), at LEVEL
    assert result.is_uniform(LEVEL), result.counts


@pytest.mark.usefixtures("draws_without_netcdf")
def test_sampler_calibration_catches_a_wrong_prior() -> None:
    """Caught: rho drawn near +1 at n = 5 but fitted under the uniform prior (same size as above)."""
    result = _sampled(5, "near+1", 100, fit_rho_prior=UNIFORM)
    assert not result.is_uniform(LEVEL), result.counts
