"""The exact reference beside the sampler: overlay, gaps, and the Bayes factor.

Under flat priors on the means and 1/sigma priors on the SDs, the marginal
posterior of rho is known up to a 1-D integral (Jeffreys 1961; Ly, Marsman &
Wagenmakers 2018; see ``exact.py``). When the spec uses those priors, any gap
between the sampler and the exact answer beyond Monte Carlo error is a
computational problem. With vague proper priors the two differ slightly by
construction (about a tenth of a posterior SD at n = 10 to 50, measured), so
the allowance adds a stated share of the posterior SD.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from reportgen import exact
from reportgen.spec import Priors, Rule

MCSE_MULTIPLE = 4.0
VAGUE_PRIOR_ALLOWANCE_SD = 0.25
VAGUE_SCALE_MIN = 5.0



@dataclass(frozen=True)
class RuleGap:
    name: str
    sampled: float
    exact: float
    allowed: float


@dataclass(frozen=True)
class CrossCheck:
    """How the sampler's rho compares with the exact reference for one pair."""

    applies: bool  # priors are the reference ones or vague enough to compare
    reference_priors: bool
    exact_mean: float
    exact_sd: float
    exact_lower: float
    exact_upper: float
    mean_gap: float
    mean_allowed: float
    rule_gaps: tuple[RuleGap, ...]
    log_bf10: float
    savage_dickey_bf10: float  # NaN when the posterior has no usable mass at 0
    grid: np.ndarray
    density: np.ndarray

    @property
    def largest_rule_gap(self) -> RuleGap | None:
        return max(self.rule_gaps, key=lambda g: abs(g.sampled - g.exact), default=None)

    @property
    def within_error(self) -> bool:
        if abs(self.mean_gap) > self.mean_allowed:
            return False
        return all(abs(g.sampled - g.exact) <= g.allowed for g in self.rule_gaps)


def priors_near_reference(priors: Priors) -> bool:
    """Reference priors, or proper priors wide on the data's scale (the vague default)."""
    if priors.is_reference:
        return True
    means_vague = priors.means.family == "flat" or (
        priors.means.units == "scaled" and priors.means.scale >= VAGUE_SCALE_MIN)
    sds_vague = priors.sds.family == "jeffreys" or (
        priors.sds.units == "scaled" and priors.sds.scale >= VAGUE_SCALE_MIN)
    return means_vague and sds_vague


def exact_rule_probability(posterior: exact.ExactPosterior, rule: Rule) -> float:
    if rule.statement == "above":
        return float(posterior.prob_above(float(rule.threshold)))
    if rule.statement == "below":
        return float(posterior.prob_below(float(rule.threshold)))
    return float(posterior.prob_between(float(rule.lower), float(rule.upper)))


def savage_dickey_bf10(rho_draws: np.ndarray, prior_density_at_zero: float) -> float:
    """BF10 = prior(0) / posterior(0) (Dickey 1971), the posterior density at 0 from a kernel
    estimate of the draws. NaN when 0 lies outside the bulk of the draws (the estimate
    would be dominated by the kernel's tail)."""
    from scipy import stats

    values = np.ravel(rho_draws)
    if not (np.quantile(values, 0.001) < 0.0 < np.quantile(values, 0.999)):
        return float("nan")
    density = float(stats.gaussian_kde(values)(0.0)[0])
    return prior_density_at_zero / density if density > 0 else float("nan")


def cross_check(
    rho_draws: np.ndarray,
    mcse_mean: float,
    ess: float,
    n: int,
    r: float,
    priors: Priors,
    rules: tuple[Rule, ...],
    mass: float,
    probabilities: dict[str, float],
) -> CrossCheck:
    a, b = priors.rho.shapes
    posterior = exact.exact_posterior(n, float(np.clip(r, -1.0 + 1e-9, 1.0 - 1e-9)), a, b)
    values = np.ravel(rho_draws)
    sd = float(posterior.sd)
    allowance = 0.0 if priors.is_reference else VAGUE_PRIOR_ALLOWANCE_SD * sd
    gaps = []
    for rule in rules:
        p_exact = exact_rule_probability(posterior, rule)
        # MCSE of a probability estimated from draws: sqrt(p (1 - p) / ESS) (common practice)
        mcse_p = math.sqrt(max(p_exact * (1 - p_exact), 1.0 / values.size) / max(ess, 1.0))
        prior_room = 0.0 if priors.is_reference else posterior_probability_shift(posterior, rule, allowance)
        gaps.append(RuleGap(rule.name, probabilities[rule.name], p_exact, MCSE_MULTIPLE * mcse_p + prior_room))
    tail = (1 - mass) / 2
    lower, upper = (float(v) for v in posterior.quantile(np.array([tail, 1 - tail])))
    prior_zero = float(np.exp(exact.log_stretched_beta_pdf(np.array([0.0]), a, b))[0])
    grid = np.asarray(posterior.rho)
    return CrossCheck(
        applies=priors_near_reference(priors),
        reference_priors=priors.is_reference,
        exact_mean=float(posterior.mean),
        exact_sd=sd,
        exact_lower=lower,
        exact_upper=upper,
        mean_gap=float(np.mean(values) - posterior.mean),
        mean_allowed=MCSE_MULTIPLE * mcse_mean + allowance,
        rule_gaps=tuple(gaps),
        log_bf10=float(posterior.log_bf10),
        savage_dickey_bf10=savage_dickey_bf10(values, prior_zero) if priors_near_reference(priors) else float("nan"),
        grid=grid,
        density=np.asarray(posterior.density),
    )


def posterior_probability_shift(posterior: exact.ExactPosterior, rule: Rule, shift: float) -> float:
    """How much a rule's probability moves if the posterior moves by ``shift`` either way."""
    bounds = [t for t in rule.thresholds]
    moved = []
    for sign in (-1.0, 1.0):
        if rule.statement == "above":
            moved.append(float(posterior.prob_above(bounds[0] - sign * shift)))
        elif rule.statement == "below":
            moved.append(float(posterior.prob_below(bounds[0] - sign * shift)))
        else:
            moved.append(float(posterior.prob_between(bounds[0] - sign * shift, bounds[1] - sign * shift)))
    base = exact_rule_probability(posterior, rule)
    return max(abs(m - base) for m in moved)


def exact_only_check(posterior: exact.ExactPosterior, mass: float) -> CrossCheck:
    """The exact engine's own numbers in the cross-check's shape (nothing to compare)."""
    tail = (1 - mass) / 2
    return CrossCheck(
        applies=False, reference_priors=True, exact_mean=float(posterior.mean), exact_sd=float(posterior.sd),
        exact_lower=float(posterior.quantile(tail)), exact_upper=float(posterior.quantile(1 - tail)),
        mean_gap=0.0, mean_allowed=0.0, rule_gaps=(), log_bf10=float(posterior.log_bf10),
        savage_dickey_bf10=float("nan"), grid=np.asarray(posterior.rho), density=np.asarray(posterior.density),
    )
