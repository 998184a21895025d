"""The sampler-against-exact comparison, on draws whose distribution is known."""

from __future__ import annotations

import math

import numpy as np
import pytest

from reportgen.crosscheck import cross_check, savage_dickey_bf10
from reportgen.exact import exact_posterior
from reportgen.spec import MeanPrior, Priors, Rule, SdPrior

REFERENCE = Priors(means=MeanPrior(family="flat"), sds=SdPrior(family="jeffreys"))
RULE = Rule(name="positive", statement="above", threshold=0.0, required_probability=0.9)


def exact_draws(n: int, r: float, size: int = 40_000, seed: int = 1) -> np.ndarray:
    """Independent draws from the exact posterior by inverse-CDF sampling (common practice)."""
    posterior = exact_posterior(n, r)
    return np.asarray(posterior.quantile(np.random.default_rng(seed).uniform(size=size)))


def test_savage_dickey_from_draws_recovers_the_quadrature_bayes_factor() -> None:
    """Dickey (1971): BF10 = prior(0) / posterior(0). Here the posterior density at 0 comes from a
    kernel estimate of draws, an independent route to the exact integral's Bayes factor."""
    for n, r in [(20, 0.3), (50, 0.1), (200, -0.12)]:
        bf_exact = math.exp(exact_posterior(n, r).log_bf10)
        bf_draws = savage_dickey_bf10(exact_draws(n, r), 0.5)
        assert bf_draws == pytest.approx(bf_exact, rel=0.1), (n, r)


def test_savage_dickey_refuses_when_zero_is_outside_the_draws() -> None:
    assert math.isnan(savage_dickey_bf10(exact_draws(100, 0.9), 0.5))


def test_draws_from_the_exact_posterior_are_within_the_allowance() -> None:
    draws = exact_draws(60, 0.4)
    mcse = float(np.std(draws) / np.sqrt(draws.size))
    p = float(np.mean(draws > 0))
    check = cross_check(draws, mcse, float(draws.size), 60, 0.4, REFERENCE, (RULE,), 0.95, {"positive": p})
    assert check.applies and check.reference_priors and check.within_error


def test_a_shifted_sampler_is_caught() -> None:
    draws = exact_draws(60, 0.4)
    sd = float(np.std(draws))
    shifted = np.clip(draws + 0.5 * sd, -1, 1)
    mcse = float(np.std(shifted) / np.sqrt(shifted.size))
    check = cross_check(shifted, mcse, float(shifted.size), 60, 0.4, REFERENCE, (RULE,), 0.95,
                        {"positive": float(np.mean(shifted > 0))})
    assert not check.within_error
    # vague priors get a wider allowance (a quarter of the SD), but half an SD is still too much
    vague = cross_check(shifted, mcse, float(shifted.size), 60, 0.4, Priors(), (RULE,), 0.95,
                        {"positive": float(np.mean(shifted > 0))})
    assert vague.applies and not vague.reference_priors and not vague.within_error


def test_informative_priors_are_not_compared() -> None:
    informative = Priors(sds=SdPrior(units="data", scale=0.1))
    draws = exact_draws(30, 0.2)
    check = cross_check(draws, 0.01, 1000.0, 30, 0.2, informative, (), 0.95, {})
    assert not check.applies
