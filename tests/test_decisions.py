"""Monte Carlo error of rule probabilities, borderline verdicts, and many verdicts read together."""

from __future__ import annotations

import math

import numpy as np
import pytest

from reportgen.results import decisions


def _ar1_chains(rng: np.random.Generator, chains: int, draws: int, phi: float) -> np.ndarray:
    """Stationary AR(1) chains with unit marginal variance."""
    out = np.empty((chains, draws))
    out[:, 0] = rng.normal(size=chains)
    noise = rng.normal(size=(chains, draws)) * math.sqrt(1.0 - phi * phi)
    for t in range(1, draws):
        out[:, t] = phi * out[:, t - 1] + noise[:, t]
    return out


def test_independent_draws_give_the_binomial_standard_error() -> None:
    # Independent Bernoulli(p) draws: the standard error of their mean is sqrt(p (1 - p) / N) (common practice).
    rng = np.random.default_rng(7)
    indicator = rng.random((4, 1000)) < 0.3
    p = indicator.mean()
    binomial = math.sqrt(p * (1 - p) / indicator.size)
    assert decisions.indicator_mcse(indicator, fallback_ess=4000.0) == pytest.approx(binomial, rel=0.1)


def test_correlated_draws_match_the_spread_over_replicate_runs() -> None:
    # The outside reference is brute force: the standard deviation, over 300 independent replicate runs of
    # 4 autocorrelated chains, of the share of draws above the threshold. The MCSE estimated from one run
    # must match it on average; rho's own ESS (of the AR(1) values) would not, as the last assert shows.
    rng = np.random.default_rng(11)
    threshold, phi = 1.2, 0.9
    shares, estimates, value_based = [], [], []
    for _ in range(300):
        chains = _ar1_chains(rng, 4, 500, phi)
        indicator = chains > threshold
        shares.append(indicator.mean())
        estimates.append(decisions.indicator_mcse(indicator, fallback_ess=100.0))
        import arviz as az

        ess_values = float(az.ess(chains, method="mean"))
        p = indicator.mean()
        value_based.append(math.sqrt(p * (1 - p) / ess_values))
    spread = float(np.std(shares, ddof=1))
    assert float(np.mean(estimates)) == pytest.approx(spread, rel=0.15)
    # the indicator of a tail event mixes faster than the values themselves here, so rho's ESS overstates
    # the error by more than the tolerance above (measured: about 30% on this setting)
    assert abs(float(np.mean(value_based)) / spread - 1.0) > 0.15


def test_every_draw_on_one_side_still_has_an_error() -> None:
    indicator = np.ones((4, 1000), dtype=bool)
    mcse = decisions.indicator_mcse(indicator, fallback_ess=1000.0)
    # half a draw from the end, at ESS 1000: sqrt(p (1 - p) / 1000) with p = 1 - 1/8000
    assert mcse == pytest.approx(math.sqrt((1 / 8000) * (1 - 1 / 8000) / 1000.0))
    assert mcse > 0.0


@pytest.mark.parametrize(("probability", "mcse", "expected"), [
    (0.951, 0.004, True),    # 0.001 from the requirement, less than 2 x 0.004
    (0.957, 0.004, True),    # 0.007 above it
    (0.9585, 0.004, False),  # 0.0085 above: outside 2 x 0.004
    (0.940, 0.004, False),   # 0.010 below: clearly not met
    (0.951, 0.0, False),     # quadrature: no Monte Carlo error, never borderline
])
def test_borderline_is_within_two_mcse(probability: float, mcse: float, expected: bool) -> None:
    assert decisions.is_borderline(probability, 0.95, mcse) is expected


def test_borderline_sentence_gives_the_numbers_and_the_remedy() -> None:
    text = decisions.borderline_sentence(0.951, 0.95, 0.004)
    assert "0.004" in text and "0.001" in text and "more draws" in text


def test_expected_false_discoveries_is_the_sum_of_one_minus_p() -> None:
    # Newton et al. (2004): the posterior expected number of false discoveries among the rejections
    # (here: met verdicts) is the sum of their posterior probabilities of the null (1 - p).
    summary = decisions.many_decisions([(0.96, True), (0.99, True), (0.40, False), (0.97, True)])
    assert summary.met == 3 and summary.verdicts == 4
    assert summary.expected_wrong == pytest.approx(0.04 + 0.01 + 0.03)
    assert summary.expected_false_share == pytest.approx(0.08 / 3)
    sentence = decisions.many_decisions_sentence(summary)
    assert "3 of the 4" in sentence and "0.08" in sentence and "Newton" in sentence


def test_no_reading_for_a_single_verdict() -> None:
    assert decisions.many_decisions_sentence(decisions.many_decisions([(0.99, True)])) == ""


def test_one_met_verdict_reads_in_the_singular() -> None:
    sentence = decisions.many_decisions_sentence(decisions.many_decisions([(0.96, True), (0.40, False)]))
    assert "1 of the 2 verdicts is met" in sentence and "0.04" in sentence
