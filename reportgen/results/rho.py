"""One posterior of rho reduced to the numbers a table row shows, whatever computed it.

A group's own fit and the adjusted (partial) correlation come from the exact posterior, from a density on
a grid (the partially pooled groups) or from sampler draws; ``RhoSummary`` holds the same numbers for
each, so results.csv and the report treat them alike.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reportgen import exact, summaries
from reportgen.crosscheck import exact_rule_probability
from reportgen.data import SufficientStats
from reportgen.results import decisions
from reportgen.spec import Rule, Spec

__all__ = ["RhoSummary", "exact_posterior_of", "from_draws", "from_exact", "from_grid"]


def exact_posterior_of(stats: SufficientStats, a: float, b: float) -> exact.ExactPosterior:
    """The exact posterior of rho from a pair's sums, with 1 - |r| taken without cancellation."""
    return exact.exact_posterior(stats.n, stats.sample_r, a, b, one_minus_abs_r=stats.one_minus_abs_r)


@dataclass(frozen=True)
class RhoSummary:
    median: float
    lower: float
    upper: float
    mean: float
    sd: float
    p_positive: float
    p_rope: float
    interval_kind: str  # "central" or "hdi"
    # (rule name, probability, Monte Carlo error; 0 where computed by quadrature), in the spec's rule order
    rules: tuple[tuple[str, float, float], ...]

    @property
    def excludes_zero(self) -> bool:
        return self.lower > 0 or self.upper < 0


def from_exact(posterior: exact.ExactPosterior, spec: Spec) -> RhoSummary:
    document = spec.document
    mass, kind = document.summary.credible_mass, document.summary.interval
    tail = (1.0 - mass) / 2.0
    lower, upper = (posterior.hdi(mass) if kind == "hdi"
                    else (float(posterior.quantile(tail)), float(posterior.quantile(1.0 - tail))))
    return RhoSummary(
        median=float(posterior.median), lower=float(lower), upper=float(upper), mean=float(posterior.mean),
        sd=float(posterior.sd), p_positive=float(posterior.prob_above(0.0)),
        p_rope=float(posterior.prob_between(document.rope.lower, document.rope.upper)), interval_kind=kind,
        rules=tuple((rule.name, exact_rule_probability(posterior, rule), 0.0) for rule in document.rules))


def _grid_probability(grid: np.ndarray, cdf: np.ndarray, rule: Rule) -> float:
    def below(t: float) -> float:
        return float(np.interp(t, grid, cdf, left=0.0, right=1.0))

    if rule.statement == "above":
        return 1.0 - below(float(rule.threshold))
    if rule.statement == "below":
        return below(float(rule.threshold))
    return below(float(rule.upper)) - below(float(rule.lower))


def from_grid(grid: np.ndarray, density: np.ndarray, spec: Spec) -> RhoSummary:
    """From a density on an increasing grid of rho (the trapezoid rule); intervals are central."""
    document = spec.document
    mass = document.summary.credible_mass
    pieces = 0.5 * np.diff(grid) * (density[:-1] + density[1:])
    cdf = np.concatenate(([0.0], np.cumsum(pieces)))
    cdf /= cdf[-1]

    def quantile(q: float) -> float:
        return float(np.interp(q, cdf, grid))

    weights = np.zeros_like(density)
    weights[:-1] += 0.5 * np.diff(grid) * density[:-1]
    weights[1:] += 0.5 * np.diff(grid) * density[1:]
    weights /= weights.sum()
    mean = float(weights @ grid)
    sd = float(np.sqrt(max(weights @ (grid - mean) ** 2, 0.0)))
    rope = document.rope
    below = {t: float(np.interp(t, grid, cdf, left=0.0, right=1.0)) for t in (0.0, rope.lower, rope.upper)}
    tail = (1.0 - mass) / 2.0
    return RhoSummary(
        median=quantile(0.5), lower=quantile(tail), upper=quantile(1.0 - tail), mean=mean, sd=sd,
        p_positive=1.0 - below[0.0], p_rope=below[rope.upper] - below[rope.lower], interval_kind="central",
        rules=tuple((rule.name, _grid_probability(grid, cdf, rule), 0.0) for rule in document.rules))


def from_draws(draws: np.ndarray, spec: Spec, ess_bulk: float) -> RhoSummary:
    """From sampler draws shaped (chain, draw); each rule's probability carries its Monte Carlo error."""
    document = spec.document
    mass, kind = document.summary.credible_mass, document.summary.interval
    values = np.ravel(draws)
    lower, upper = summaries.interval(values, mass, kind)
    return RhoSummary(
        median=float(np.median(values)), lower=float(lower), upper=float(upper), mean=float(np.mean(values)),
        sd=float(np.std(values, ddof=1)), p_positive=float(np.mean(values > 0)),
        p_rope=summaries.rope_probability(values, document.rope), interval_kind=kind,
        rules=tuple((rule.name, summaries.rule_probability(values, rule),
                     decisions.indicator_mcse(summaries.rule_indicator(draws, rule), ess_bulk))
                    for rule in document.rules))
