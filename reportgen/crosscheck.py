"""The exact reference beside the sampler: overlay, gaps, and the Bayes factors.

Each sampler run of the bivariate-normal model is compared with the exact
marginal posterior of rho under the priors the run actually used, computed by
quadrature (``models.normal_reference``: the means integrated in closed form,
the SDs and rho numerically). The two then differ by Monte Carlo error alone,
so the allowance is that error and nothing else: ``MCSE_MULTIPLE`` standard
errors for the posterior mean and for each rule probability. Where no
reference can be computed for the priors (the quadrature reports that it could
not honour them), nothing is compared, and the report says so.

The headline Bayes factor stays the exact one under Jeffreys' priors on the
means and SDs (``reportgen.exact``); the Savage–Dickey ratio of the draws
estimates the Bayes factor under the spec's priors, which the quadrature gives
exactly, so that pair is a second Monte Carlo test.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from reportgen import exact
from reportgen.data import SufficientStats
from reportgen.models.normal_reference import reference_posterior
from reportgen.spec import Priors, Rule

MCSE_MULTIPLE = 4.0
# Roughness of the Gaussian kernel, R(K) = integral K^2 = 1 / (2 sqrt(pi)) (Silverman 1986, sec. 3.3).
_GAUSSIAN_ROUGHNESS = 1.0 / (2.0 * math.sqrt(math.pi))


@dataclass(frozen=True)
class RuleGap:
    name: str
    sampled: float
    exact: float
    allowed: float


@dataclass(frozen=True)
class CrossCheck:
    """How the sampler's rho compares with the exact reference for one pair."""

    applies: bool  # an exact posterior under the run's own priors exists, and was compared
    reference_priors: bool  # those priors are Jeffreys' (flat means, 1/sigma SDs)
    exact_mean: float
    exact_sd: float
    exact_lower: float
    exact_upper: float
    mean_gap: float
    mean_allowed: float
    rule_gaps: tuple[RuleGap, ...]
    log_bf10: float  # exact, under Jeffreys' priors on the means and SDs (the report's headline)
    savage_dickey_bf10: float  # NaN when the posterior has no usable mass at 0
    grid: np.ndarray
    density: np.ndarray
    reference_log_bf10: float = float("nan")  # exact, under the run's own priors (what Savage-Dickey estimates)
    savage_dickey_relative_mcse: float = float("nan")

    @property
    def largest_rule_gap(self) -> RuleGap | None:
        return max(self.rule_gaps, key=lambda g: abs(g.sampled - g.exact), default=None)

    @property
    def within_error(self) -> bool:
        if abs(self.mean_gap) > self.mean_allowed:
            return False
        return all(abs(g.sampled - g.exact) <= g.allowed for g in self.rule_gaps)


def exact_rule_probability(posterior: exact.ExactPosterior, rule: Rule) -> float:
    if rule.statement == "above":
        return float(posterior.prob_above(float(rule.threshold)))
    if rule.statement == "below":
        return float(posterior.prob_below(float(rule.threshold)))
    return float(posterior.prob_between(float(rule.lower), float(rule.upper)))


def _kde_at_zero(values: np.ndarray) -> tuple[float, float]:
    """The Gaussian kernel estimate of the density at 0, and its bandwidth."""
    from scipy import stats

    kde = stats.gaussian_kde(values)
    return float(kde(0.0)[0]), float(math.sqrt(kde.covariance[0, 0]))


# The Savage-Dickey ratio is estimated only where 0 lies within this central share of the draws. Further out
# a kernel estimate is biased upwards by smoothing (bias about h^2 f''(0) / 2, Silverman 1986, sec. 3.3),
# growing with the tail's curvature (at the 0.5% point with 4,000 draws: 8%, tests/test_crosscheck.py), and
# its Monte Carlo error, which rests on the few draws near 0, is larger than the bulk ESS says: on real data
# (51 rows, 0 at the 0.5% point) the ratio was 3.3 against 4.9 by quadrature, with an error stated as 15%.
SAVAGE_DICKEY_CENTRAL = 0.90


def _zero_in_the_bulk(values: np.ndarray) -> bool:
    tail = (1.0 - SAVAGE_DICKEY_CENTRAL) / 2.0
    return bool(np.quantile(values, tail) < 0.0 < np.quantile(values, 1.0 - tail))


def savage_dickey_bf10(rho_draws: np.ndarray, prior_density_at_zero: float) -> float:
    """BF10 = prior(0) / posterior(0) (Dickey 1971), the posterior density at 0 from a kernel
    estimate of the draws. NaN when 0 lies outside the central ``SAVAGE_DICKEY_CENTRAL`` of the
    draws, where the kernel's smoothing bias would outgrow its Monte Carlo error."""
    values = np.ravel(rho_draws)
    if not _zero_in_the_bulk(values):
        return float("nan")
    density, _ = _kde_at_zero(values)
    return prior_density_at_zero / density if density > 0 else float("nan")


def savage_dickey_relative_mcse(rho_draws: np.ndarray, ess: float) -> float:
    """Relative Monte Carlo error of the Savage-Dickey ratio: that of the kernel estimate f(0).

    For a kernel estimate from N independent draws, Var f(0) is about f(0) R(K) / (N h) (Silverman
    1986, sec. 3.3); with correlated draws N becomes the effective sample size. The ratio's relative
    error equals the density's. The kernel's smoothing bias is not Monte Carlo error (a rerun repeats it);
    it stays below that error because the ratio is estimated only where 0 is in the bulk of the draws.
    """
    values = np.ravel(rho_draws)
    if not _zero_in_the_bulk(values) or not ess > 0:
        return float("nan")
    density, bandwidth = _kde_at_zero(values)
    if not density > 0:
        return float("nan")
    return math.sqrt(_GAUSSIAN_ROUGHNESS / (min(ess, values.size) * bandwidth * density))


def _probability_mcse(p: float, total: int, ess: float) -> float:
    """sqrt(p (1 - p) / ESS), never 0 (common practice)."""
    return math.sqrt(max(p * (1.0 - p), 1.0 / total) / max(ess, 1.0))


def cross_check(
    rho_draws: np.ndarray,
    mcse_mean: float,
    ess: float,
    stats: SufficientStats,
    priors: Priors,
    rules: tuple[Rule, ...],
    mass: float,
    probabilities: dict[str, float],
    rule_mcses: dict[str, float] | None = None,
) -> CrossCheck:
    """Compare a normal-model sampler run with the exact posterior under its own priors.

    ``rule_mcses`` are the rule probabilities' Monte Carlo errors from their indicator draws
    (``results.decisions``); without them sqrt(p (1 - p) / ESS) with rho's ESS stands in.
    """
    a, b = priors.rho.shapes
    values = np.ravel(rho_draws)
    jeffreys = exact.exact_posterior(stats.n, stats.sample_r, a, b, one_minus_abs_r=stats.one_minus_abs_r)
    prior_zero = float(np.exp(exact.log_stretched_beta_pdf(np.array([0.0]), a, b))[0])
    nan = float("nan")
    try:
        reference = reference_posterior(stats, priors)
    except ValueError:  # priors so far from the data that the quadrature cannot place its grid
        reference = None
    if reference is not None and not reference.reliable:
        reference = None
    savage_dickey = savage_dickey_bf10(values, prior_zero)
    relative_mcse = savage_dickey_relative_mcse(values, ess)
    if reference is None:
        return CrossCheck(
            applies=False, reference_priors=priors.is_reference, exact_mean=nan, exact_sd=nan, exact_lower=nan,
            exact_upper=nan, mean_gap=nan, mean_allowed=nan, rule_gaps=(), log_bf10=float(jeffreys.log_bf10),
            savage_dickey_bf10=savage_dickey, grid=np.zeros(0), density=np.zeros(0),
            savage_dickey_relative_mcse=relative_mcse)
    gaps = []
    for rule in rules:
        p_exact = exact_rule_probability(reference, rule)
        mcse_p = (rule_mcses or {}).get(rule.name) or _probability_mcse(p_exact, values.size, ess)
        gaps.append(RuleGap(rule.name, probabilities[rule.name], p_exact, MCSE_MULTIPLE * mcse_p))
    tail = (1 - mass) / 2
    lower, upper = (float(v) for v in reference.quantile(np.array([tail, 1 - tail])))
    return CrossCheck(
        applies=True,
        reference_priors=priors.is_reference,
        exact_mean=float(reference.mean),
        exact_sd=float(reference.sd),
        exact_lower=lower,
        exact_upper=upper,
        mean_gap=float(np.mean(values) - reference.mean),
        mean_allowed=MCSE_MULTIPLE * mcse_mean,
        rule_gaps=tuple(gaps),
        log_bf10=float(jeffreys.log_bf10),
        savage_dickey_bf10=savage_dickey,
        grid=np.asarray(reference.rho),
        density=np.asarray(reference.density),
        reference_log_bf10=float(reference.log_bf10),
        savage_dickey_relative_mcse=relative_mcse,
    )


def exact_only_check(posterior: exact.ExactPosterior, mass: float) -> CrossCheck:
    """The exact engine's own numbers in the cross-check's shape (nothing to compare)."""
    tail = (1 - mass) / 2
    return CrossCheck(
        applies=False, reference_priors=True, exact_mean=float(posterior.mean), exact_sd=float(posterior.sd),
        exact_lower=float(posterior.quantile(tail)), exact_upper=float(posterior.quantile(1 - tail)),
        mean_gap=0.0, mean_allowed=0.0, rule_gaps=(), log_bf10=float(posterior.log_bf10),
        savage_dickey_bf10=float("nan"), grid=np.asarray(posterior.rho), density=np.asarray(posterior.density),
    )
