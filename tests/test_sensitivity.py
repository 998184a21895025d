"""Prior sensitivity of rho's interval and the rules' verdicts (reportgen/checks/sensitivity.py)."""

from __future__ import annotations

import math

import arviz as az
import numpy as np
import pytest
from scipy import optimize

from reportgen import exact
from reportgen.checks.sensitivity import (
    PriorVariant,
    default_variants,
    sensitivity_from_draws,
    sensitivity_from_posterior,
    weighted_hdi,
    weighted_quantile,
)
from reportgen.spec import MeanPrior, Priors, Rule, SdPrior

REFERENCE_PRIORS = Priors(means=MeanPrior(family="flat"), sds=SdPrior(family="jeffreys"))
ABOVE_ZERO = Rule(name="positive", statement="above", threshold=0.0, required_probability=0.95)


def _exact_draws(n: int, r: float, shape: tuple[int, int], seed: int, *, sd_x: float = 1.0, sd_y: float = 1.0,
                 mean_x: float = 0.0, mean_y: float = 0.0) -> dict[str, np.ndarray]:
    """rho drawn exactly from Jeffreys' exact posterior (uniform prior) by inverse cdf at random u; the means
    and SDs drawn around the sample values with their large-sample spreads (they only need plausible values)."""
    rng = np.random.default_rng(seed)
    posterior = exact.exact_posterior(n, r)
    rho = np.asarray(posterior.quantile(rng.uniform(size=shape)))
    spread = np.sqrt(rng.chisquare(n - 1, size=(2, *shape)) / (n - 1))
    return {
        "rho": rho,
        "mu_x": mean_x + sd_x / math.sqrt(n) * rng.standard_normal(shape),
        "mu_y": mean_y + sd_y / math.sqrt(n) * rng.standard_normal(shape),
        "sigma_x": sd_x * spread[0],
        "sigma_y": sd_y * spread[1],
    }


def _by_label(sensitivity, label):  # type: ignore[no-untyped-def]
    return next(o for o in sensitivity.outcomes if o.variant.label == label)


def test_default_variants_drop_the_specs_own_prior() -> None:
    """Plain bookkeeping: the spec's prior first, no repeat of it, widths 0.5 and 2 on the spec's rho prior."""
    uniform = default_variants(1.0, 1.0)
    assert uniform[0] == PriorVariant("as specified", 1.0, 1.0)
    assert [(v.rho_a, v.rho_b, v.width) for v in uniform[1:]] == [
        (2.0, 2.0, 1.0), (5.0, 5.0, 1.0), (1.0, 1.0, 0.5), (1.0, 1.0, 2.0)]
    assert len(default_variants(3.0, 3.0)) == 6
    assert len(default_variants(2.0, 2.0)) == 5


@pytest.mark.parametrize("interval", ["central", "hdi"])
def test_own_prior_by_quadrature_equals_the_exact_posterior(interval: str) -> None:
    """Against exact_posterior itself (Jeffreys' exact posterior; Ly, Marsman & Wagenmakers 2018)."""
    n, r, mass = 25, 0.45, 0.9
    result = sensitivity_from_posterior(lambda a, b: exact.exact_posterior(n, r, a, b), default_variants(1.0, 1.0),
                                        (ABOVE_ZERO,), mass, interval)
    direct = exact.exact_posterior(n, r)
    own = result.outcomes[0]
    expected = direct.hdi(mass) if interval == "hdi" else (direct.quantile(0.05), direct.quantile(0.95))
    assert own.method == "exact" and own.applies
    assert own.median == pytest.approx(direct.median, abs=1e-12)
    assert (own.lower, own.upper) == pytest.approx(expected, abs=1e-12)
    assert own.probabilities[0][1] == pytest.approx(direct.prob_above(0.0), abs=1e-12)
    widths = [o for o in result.outcomes if o.variant.width != 1.0]
    assert widths and all(not o.applies and math.isnan(o.median) and "Jeffreys" in o.note for o in widths)


def test_reweighting_to_beta_2_2_reproduces_the_exact_posterior() -> None:
    """Draws from the exact posterior under a uniform prior, reweighted (PSIS) to a stretched Beta(2, 2), give
    the median of exact_posterior(n, r, 2, 2) within 4 Monte Carlo SEs (outside reference: Jeffreys' exact
    posterior, Ly et al. 2018; SE of a median = sqrt(1/4 / ESS) / density, common practice)."""
    n, r = 12, 0.5
    draws = _exact_draws(n, r, (4, 1000), seed=2)
    variant = PriorVariant("sceptical", 2.0, 2.0)
    result = sensitivity_from_draws(draws, REFERENCE_PRIORS, 0.0, 0.0, 1.0, 1.0, (PriorVariant("own", 1.0, 1.0),
                                    variant), (ABOVE_ZERO,), 0.95, "central")
    outcome = result.outcomes[1]
    target = exact.exact_posterior(n, r, 2.0, 2.0)
    raw = np.ravel(1.0 - draws["rho"] ** 2)  # Beta(2, 2) over uniform, up to a constant
    ess = raw.sum() ** 2 / np.sum(raw**2)  # Kish's effective sample size
    se = math.sqrt(0.25 / ess) / float(target.density_at(target.median))
    assert outcome.applies and outcome.method == "reweighted" and outcome.pareto_k < 0.5
    assert abs(outcome.median - target.median) < 4.0 * se
    assert abs(exact.exact_posterior(n, r).median - target.median) > 8.0 * se  # the prior does move it
    assert outcome.probabilities[0][1] == pytest.approx(target.prob_above(0.0), abs=0.02)
    assert (outcome.lower, outcome.upper) == pytest.approx((target.quantile(0.025), target.quantile(0.975)),
                                                           abs=0.04)


def test_width_variant_of_vague_priors_moves_nothing_at_n_200() -> None:
    """With n = 200 and the default vague priors (normal means and half-normal SDs, 10 sample SDs wide), half
    and twice the width leave rho's summaries where they are and the weights nearly equal (small Pareto k;
    Vehtari et al. 2024). Data far from 0 in large units, so prior units placed wrongly would show."""
    n, r = 200, 0.3
    draws = _exact_draws(n, r, (4, 1000), seed=5, mean_x=300.0, mean_y=-40.0, sd_x=50.0, sd_y=0.2)
    priors = Priors()
    assert priors.means.family == "normal" and priors.sds.family == "half_normal"
    result = sensitivity_from_draws(draws, priors, 300.0, -40.0, 50.0, 0.2, default_variants(1.0, 1.0),
                                    (ABOVE_ZERO,), 0.95, "hdi")
    own = result.outcomes[0]
    for label in ("nuisance priors half as wide", "nuisance priors twice as wide"):
        outcome = _by_label(result, label)
        assert outcome.applies and outcome.method == "reweighted" and outcome.pareto_k < 0.5
        assert abs(outcome.median - own.median) < 0.003
        assert abs(outcome.lower - own.lower) < 0.01 and abs(outcome.upper - own.upper) < 0.01
    assert result.changed_rules == ()


def _near_requirement_r(n: int, rule: Rule, target: float) -> float:
    """The r at which the rule's probability under a uniform prior is ``target`` (by root finding)."""
    return optimize.brentq(lambda r: exact.exact_posterior(n, r).prob_above(rule.threshold) - target, 0.0, 0.9)


def test_verdict_near_its_requirement_flips_under_beta_5_5() -> None:
    """A rule met with probability 0.96 (requirement 0.95) under a uniform prior is not met under the
    sceptical stretched Beta(5, 5) (exact posterior, Ly et al. 2018), by recomputation and by reweighting."""
    n = 50
    strong = Rule(name="strong", statement="above", threshold=0.3, required_probability=0.95)
    rules = (strong, ABOVE_ZERO)
    r = _near_requirement_r(n, strong, 0.96)
    assert exact.exact_posterior(n, r, 5.0, 5.0).prob_above(0.3) < 0.93  # the flip is real, not marginal
    by_quadrature = sensitivity_from_posterior(lambda a, b: exact.exact_posterior(n, r, a, b),
                                               default_variants(1.0, 1.0), rules, 0.95, "central")
    by_draws = sensitivity_from_draws(_exact_draws(n, r, (4, 1000), seed=9), REFERENCE_PRIORS, 0.0, 0.0, 1.0, 1.0,
                                      default_variants(1.0, 1.0), rules, 0.95, "central")
    for result in (by_quadrature, by_draws):
        assert dict(result.outcomes[0].verdicts) == {"strong": True, "positive": True}
        assert dict(_by_label(result, "strongly sceptical ρ: stretched Beta(5, 5)").verdicts)["strong"] is False
        assert result.changed_rules == ("strong",)
        assert result.prior_sensitive


def test_flat_priors_make_width_variants_not_apply() -> None:
    """Flat means and 1/sigma SDs have no width; with half-normal SDs only the SDs' prior is rescaled."""
    draws = _exact_draws(40, 0.2, (2, 500), seed=3)
    result = sensitivity_from_draws(draws, REFERENCE_PRIORS, 0.0, 0.0, 1.0, 1.0, default_variants(1.0, 1.0),
                                    (ABOVE_ZERO,), 0.95, "central")
    widths = [o for o in result.outcomes if o.variant.width != 1.0]
    assert len(widths) == 2
    assert all(not o.applies and math.isnan(o.median) and math.isnan(o.lower) and "flat" in o.note
               for o in widths)
    assert result.outcomes[0].method == "sampled" and result.outcomes[0].applies
    mixed = Priors(means=MeanPrior(family="flat"), sds=SdPrior(family="half_normal", scale=10.0))
    mixed_result = sensitivity_from_draws(draws, mixed, 0.0, 0.0, 1.0, 1.0, default_variants(1.0, 1.0),
                                          (ABOVE_ZERO,), 0.95, "central")
    assert all(o.applies and "flat" in o.note for o in mixed_result.outcomes if o.variant.width != 1.0)


def test_unreliable_reweighting_is_reported_not_used() -> None:
    """A prior far from the posterior gives heavy-tailed weights: Pareto k above 0.7 (Vehtari et al. 2024)."""
    draws = _exact_draws(12, 0.5, (4, 1000), seed=4)
    far = PriorVariant("far", 1.0, 60.0)  # nearly all prior mass close to rho = -1
    result = sensitivity_from_draws(draws, REFERENCE_PRIORS, 0.0, 0.0, 1.0, 1.0,
                                    (PriorVariant("own", 1.0, 1.0), far), (ABOVE_ZERO,), 0.95, "central")
    outcome = result.outcomes[1]
    assert not outcome.applies and outcome.pareto_k > 0.7 and "Pareto k" in outcome.note
    assert math.isnan(outcome.median) and result.changed_rules == ()


def test_weighted_summaries_with_equal_weights_match_unweighted_ones() -> None:
    """Equal weights: the weighted HDI is ArviZ's az.hdi and the weighted median is numpy's median (Hazen
    plotting positions, common practice)."""
    values = np.random.default_rng(6).gamma(3.0, size=2001)
    weights = np.ones_like(values)
    assert weighted_hdi(values, weights, 0.9) == pytest.approx(tuple(az.hdi(values, hdi_prob=0.9)), abs=1e-12)
    assert float(weighted_quantile(values, weights, 0.5)) == pytest.approx(float(np.median(values)), abs=1e-12)
    doubled = weighted_quantile(values, np.where(values > np.median(values), 3.0, 1.0), 0.5)
    # 3:1 weights above the median: weighted cdf 1/4 + 3/4 (F - 1/2) / (1/2) reaches 1/2 at F = 2/3
    assert doubled == pytest.approx(np.quantile(values, 2.0 / 3.0), abs=0.02)
