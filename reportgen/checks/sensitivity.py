"""Prior sensitivity: rho's interval and each rule's verdict under alternative priors.

Two routes, one per kind of posterior:

* a one-dimensional posterior computed by quadrature (the exact engine, the rank model) is simply recomputed
  under each alternative prior on rho;
* sampler draws are reweighted by importance sampling, ``w ∝ p_variant(θ) / p_spec(θ)``, with the weights
  Pareto-smoothed (PSIS; Vehtari, Simpson, Gelman, Yao & Gabry 2024, *JMLR* 25(72)). The fitted shape ``k`` of
  the weights' tail says whether the reweighting can be trusted: above ``min(1 - 1/log10(S), 0.7)`` for S draws
  (the paper's sample-size-dependent limit, 0.7 from about 2,200 draws on) the variant is reported as not
  applicable. This is the importance-sampling idea of power-scaling sensitivity analysis (Kallioinen,
  Paananen, Bürkner & Vehtari 2024, *Statistics and Computing* 34): for a normal or half-normal prior,
  multiplying its width by ``w`` is the same as raising its density to the power ``1 / w^2``.

A width change of a flat mean prior or of the 1/sigma SD prior changes nothing, so it does not apply.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import stats

from reportgen import summaries
from reportgen.crosscheck import exact_rule_probability
from reportgen.exact import log_stretched_beta_pdf
from reportgen.spec import MeanPrior, Priors, Rule, SdPrior

PARETO_K_MAX = 0.7  # Vehtari et al. (2024): above this, importance sampling estimates are unreliable
RHO_EDGE = 1e-12  # draws this close to -1 or 1 are moved inside, where every stretched-beta density is finite
NAN = float("nan")


@dataclass(frozen=True)
class PriorVariant:
    label: str  # short, e.g. "as specified", "uniform ρ", "sceptical ρ: stretched Beta(2, 2)"
    rho_a: float
    rho_b: float
    width: float = 1.0  # multiplies the scale of the means' and SDs' priors (1 = as specified)


@dataclass(frozen=True)
class VariantOutcome:
    variant: PriorVariant
    applies: bool  # False: e.g. width change of a flat prior, or reweighting unreliable; then numbers are nan
    note: str  # why not, or a remark on what was changed; "" when there is nothing to say
    median: float  # rho's posterior median under this prior
    lower: float  # rho's interval under this prior
    upper: float
    probabilities: tuple[tuple[str, float], ...]  # (rule name, P(rule)) in rule order; nan when not applies
    verdicts: tuple[tuple[str, bool], ...]  # (rule name, met?); empty when not applies
    pareto_k: float  # nan unless reweighted
    method: str  # "exact" (recomputed), "reweighted" (PSIS) or "sampled" (the draws as they are)


@dataclass(frozen=True)
class Sensitivity:
    outcomes: tuple[VariantOutcome, ...]  # first is the spec's own prior
    changed_rules: tuple[str, ...]  # rules whose verdict differs from the spec's under any applicable variant

    @property
    def prior_sensitive(self) -> bool:
        return bool(self.changed_rules)


def default_variants(spec_a: float, spec_b: float) -> tuple[PriorVariant, ...]:
    """The spec's prior, uniform, two sceptical stretched Betas, and the nuisance priors half and twice as wide."""
    spec = PriorVariant("as specified", spec_a, spec_b)
    alternatives = [
        PriorVariant("uniform ρ", 1.0, 1.0),
        PriorVariant("sceptical ρ: stretched Beta(2, 2)", 2.0, 2.0),
        PriorVariant("strongly sceptical ρ: stretched Beta(5, 5)", 5.0, 5.0),
    ]
    rho = [v for v in alternatives if not _same_rho(v.rho_a, v.rho_b, spec_a, spec_b)]
    widths = [PriorVariant("nuisance priors half as wide", spec_a, spec_b, 0.5),
              PriorVariant("nuisance priors twice as wide", spec_a, spec_b, 2.0)]
    return (spec, *rho, *widths)


def _same_rho(a: float, b: float, other_a: float, other_b: float) -> bool:
    return math.isclose(a, other_a) and math.isclose(b, other_b)


def _interval_bounds(posterior: Any, mass: float, interval: str) -> tuple[float, float]:
    if interval == "hdi":
        lower, upper = posterior.hdi(mass)
    else:
        tail = (1.0 - mass) / 2.0
        lower, upper = posterior.quantile(tail), posterior.quantile(1.0 - tail)
    return float(lower), float(upper)


def _outcome(variant: PriorVariant, rules: Sequence[Rule], median: float, bounds: tuple[float, float],
             probabilities: Sequence[float], *, method: str, pareto_k: float = NAN, note: str = "") -> VariantOutcome:
    return VariantOutcome(
        variant=variant, applies=True, note=note, median=float(median), lower=bounds[0], upper=bounds[1],
        probabilities=tuple((rule.name, float(p)) for rule, p in zip(rules, probabilities, strict=True)),
        verdicts=tuple((rule.name, bool(p >= rule.required_probability))
                       for rule, p in zip(rules, probabilities, strict=True)),
        pareto_k=pareto_k, method=method)


def _not_applying(variant: PriorVariant, rules: Sequence[Rule], note: str, *, method: str,
                  pareto_k: float = NAN) -> VariantOutcome:
    return VariantOutcome(variant=variant, applies=False, note=note, median=NAN, lower=NAN, upper=NAN,
                          probabilities=tuple((rule.name, NAN) for rule in rules), verdicts=(),
                          pareto_k=pareto_k, method=method)


def _sensitivity(outcomes: list[VariantOutcome], rules: Sequence[Rule]) -> Sensitivity:
    if not outcomes:
        raise ValueError("no prior variants given; pass the spec's own prior first")
    base = outcomes[0]
    changed: list[str] = []
    if base.applies:
        reference = dict(base.verdicts)
        for rule in rules:
            if any(o.applies and dict(o.verdicts)[rule.name] != reference[rule.name] for o in outcomes[1:]):
                changed.append(rule.name)
    return Sensitivity(outcomes=tuple(outcomes), changed_rules=tuple(changed))


def sensitivity_from_posterior(
    make_posterior: Callable[[float, float], Any],
    variants: Sequence[PriorVariant],
    rules: Sequence[Rule],
    mass: float,
    interval: str,
) -> Sensitivity:
    """Recompute a quadrature posterior of rho under each variant's prior on rho (the first is the reference).

    ``make_posterior(a, b)`` returns an object with ``.median``, ``.quantile(q)`` and ``.hdi(mass)`` that
    ``crosscheck.exact_rule_probability`` accepts, e.g. ``lambda a, b: exact.exact_posterior(n, r, a, b)``.
    """
    outcomes = []
    for variant in variants:
        if variant.width != 1.0:
            outcomes.append(_not_applying(variant, rules, (
                "does not apply: this posterior integrates the means and SDs out under Jeffreys' priors, "
                "which have no width to change"), method="exact"))
            continue
        posterior = make_posterior(variant.rho_a, variant.rho_b)
        probabilities = [exact_rule_probability(posterior, rule) for rule in rules]
        outcomes.append(_outcome(variant, rules, posterior.median, _interval_bounds(posterior, mass, interval),
                                 probabilities, method="exact"))
    return _sensitivity(outcomes, rules)


# --------------------------------------------------------------------------- reweighting sampler draws


def _mean_log_prior(prior: MeanPrior, mu: np.ndarray, sample_mean: float, sample_sd: float,
                    width: float) -> np.ndarray:
    """Log density of a normal mean prior in data units, its scale multiplied by ``width``."""
    if prior.units == "scaled":
        location, scale = sample_mean, prior.scale * sample_sd
    else:
        location, scale = prior.location, prior.scale
    return stats.norm.logpdf(mu, loc=location, scale=width * scale)


def _sd_log_prior(prior: SdPrior, sigma: np.ndarray, sample_sd: float, width: float) -> np.ndarray:
    """Log density of a half-normal or half-Student-t SD prior in data units, its scale multiplied by ``width``."""
    scale = width * (prior.scale * sample_sd if prior.units == "scaled" else prior.scale)
    if prior.family == "half_student_t":
        return math.log(2.0) + stats.t.logpdf(sigma, df=prior.nu, scale=scale)
    return stats.halfnorm.logpdf(sigma, scale=scale)


def _log_prior_ratio(variant: PriorVariant, priors: Priors, draws: dict[str, np.ndarray],
                     sample: dict[str, float]) -> tuple[np.ndarray, str]:
    """``log p_variant - log p_spec`` per draw, and a note naming a nuisance prior that has no width."""
    spec_a, spec_b = priors.rho.shapes
    rho = np.clip(draws["rho"], -1.0 + RHO_EDGE, 1.0 - RHO_EDGE)
    log_ratio = np.zeros_like(rho)
    if not _same_rho(variant.rho_a, variant.rho_b, spec_a, spec_b):
        log_ratio += log_stretched_beta_pdf(rho, variant.rho_a, variant.rho_b)
        log_ratio -= log_stretched_beta_pdf(rho, spec_a, spec_b)
    note = ""
    if variant.width != 1.0:
        kept = []
        if priors.means.family == "normal":
            for axis in ("x", "y"):
                mu = draws[f"mu_{axis}"]
                args = (sample[f"mean_{axis}"], sample[f"sd_{axis}"])
                log_ratio += _mean_log_prior(priors.means, mu, *args, variant.width)
                log_ratio -= _mean_log_prior(priors.means, mu, *args, 1.0)
        else:
            kept.append("the means' prior is flat")
        if priors.sds.family != "jeffreys":
            for axis in ("x", "y"):
                sigma, sd = draws[f"sigma_{axis}"], sample[f"sd_{axis}"]
                log_ratio += _sd_log_prior(priors.sds, sigma, sd, variant.width)
                log_ratio -= _sd_log_prior(priors.sds, sigma, sd, 1.0)
        else:
            kept.append("the SDs' prior is 1/σ")
        if kept:
            note = " and ".join(kept) + ", with no width to change"
    return log_ratio, note


def _relative_efficiency(weights: np.ndarray, shape: tuple[int, ...]) -> float:
    """ESS / S of the raw weights over the chains (PSIS's ``reff``); 1 for draws without chains."""
    if len(shape) != 2 or shape[1] < 4:
        return 1.0
    import arviz as az

    ess = float(az.ess(weights.reshape(shape), method="mean"))
    return float(np.clip(ess / weights.size, 1e-3, 1.0)) if math.isfinite(ess) else 1.0


def pareto_k_limit(draw_count: int) -> float:
    """Largest trustworthy Pareto k for S draws: min(1 - 1/log10(S), 0.7) (Vehtari et al. 2024, sec. 3)."""
    return min(1.0 - 1.0 / math.log10(max(draw_count, 11)), PARETO_K_MAX)


def weighted_quantile(values: np.ndarray, weights: np.ndarray, q: float | np.ndarray) -> np.ndarray:
    """Quantiles of a weighted sample, interpolating between the weighted mid-points of the sorted draws."""
    order = np.argsort(values)
    sorted_values, sorted_weights = values[order], weights[order] / np.sum(weights)
    midpoints = np.cumsum(sorted_weights) - 0.5 * sorted_weights
    return np.interp(q, midpoints, sorted_values)


def weighted_hdi(values: np.ndarray, weights: np.ndarray, mass: float) -> tuple[float, float]:
    """Shortest interval between two sorted draws that holds at least ``mass`` of the weight."""
    order = np.argsort(values)
    sorted_values = values[order]
    held_below = np.concatenate([[0.0], np.cumsum(weights[order] / np.sum(weights))])  # weight of draws [0, i)
    # for each first draw i, the first end e with weight of draws [i, e) >= mass; the interval ends at draw e - 1
    ends = np.searchsorted(held_below, held_below[:-1] + mass - 1e-12, side="left")
    starts = np.flatnonzero(ends <= values.size)
    widths = sorted_values[ends[starts] - 1] - sorted_values[starts]
    best = starts[int(np.argmin(widths))]
    return float(sorted_values[best]), float(sorted_values[ends[best] - 1])


def rule_holds(rho: np.ndarray, rule: Rule) -> np.ndarray:
    """Where the rule's statement holds, with the same strict inequalities as ``summaries.rule_probability``."""
    if rule.statement == "above":
        return rho > rule.threshold
    if rule.statement == "below":
        return rho < rule.threshold
    return (rho > rule.lower) & (rho < rule.upper)


def _sampled_outcome(variant: PriorVariant, rho: np.ndarray, rules: Sequence[Rule], mass: float,
                     interval: str) -> VariantOutcome:
    """The draws as they are, summarised exactly as the report summarises them."""
    probabilities = [summaries.rule_probability(rho, rule) for rule in rules]
    return _outcome(variant, rules, float(np.median(rho)), summaries.interval(rho, mass, interval), probabilities,
                    method="sampled")


def _reweighted_outcome(variant: PriorVariant, rho: np.ndarray, log_ratio: np.ndarray, shape: tuple[int, ...],
                        rules: Sequence[Rule], mass: float, interval: str, note: str) -> VariantOutcome:
    import arviz as az

    reff = _relative_efficiency(np.exp(log_ratio - np.max(log_ratio)), shape)
    log_weights, k = az.psislw(log_ratio, reff=reff)
    k = float(k)
    limit = pareto_k_limit(rho.size)
    if not k <= limit:  # also catches nan
        why = f"Pareto k {k:.2f} (above {limit:.2f}): reweighting unreliable"
        return _not_applying(variant, rules, f"{why}; {note}" if note else why, method="reweighted", pareto_k=k)
    weights = np.exp(log_weights - np.max(log_weights))
    weights /= np.sum(weights)
    if interval == "hdi":
        bounds = weighted_hdi(rho, weights, mass)
    else:
        tail = (1.0 - mass) / 2.0
        low, high = weighted_quantile(rho, weights, np.array([tail, 1.0 - tail]))
        bounds = (float(low), float(high))
    median = float(weighted_quantile(rho, weights, 0.5))
    probabilities = [float(np.sum(weights * rule_holds(rho, rule))) for rule in rules]
    return _outcome(variant, rules, median, bounds, probabilities, method="reweighted", pareto_k=k, note=note)


def sensitivity_from_draws(
    draws: dict[str, np.ndarray],
    priors: Priors,
    mean_x: float,
    mean_y: float,
    sd_x: float,
    sd_y: float,
    variants: Sequence[PriorVariant],
    rules: Sequence[Rule],
    mass: float,
    interval: str,
) -> Sensitivity:
    """Reweight sampler draws (data units; mu_x, mu_y, sigma_x, sigma_y, rho) to each variant's priors.

    ``priors`` are the priors the draws were sampled under; ``mean_*`` and ``sd_*`` the sample means and SDs
    that place priors given in ``units = "scaled"``. A variant equal to the spec's priors is summarised from
    the draws as they are (method "sampled"); the first variant is the reference for ``changed_rules``.
    """
    shape = np.shape(draws["rho"])
    flat = {name: np.ravel(np.asarray(draws[name], dtype=float))
            for name in ("mu_x", "mu_y", "sigma_x", "sigma_y", "rho")}
    sample = {"mean_x": mean_x, "mean_y": mean_y, "sd_x": sd_x, "sd_y": sd_y}
    spec_a, spec_b = priors.rho.shapes
    nuisance_have_width = priors.means.family == "normal" or priors.sds.family != "jeffreys"
    outcomes = []
    for variant in variants:
        if variant.width != 1.0 and not nuisance_have_width:
            outcomes.append(_not_applying(variant, rules, (
                "does not apply: the means' prior is flat and the SDs' prior is 1/σ; neither has a width to change"),
                method="reweighted"))
        elif variant.width == 1.0 and _same_rho(variant.rho_a, variant.rho_b, spec_a, spec_b):
            outcomes.append(_sampled_outcome(variant, flat["rho"], rules, mass, interval))
        else:
            log_ratio, note = _log_prior_ratio(variant, priors, flat, sample)
            if np.ptp(log_ratio) == 0.0:  # the variant's priors equal the spec's on these draws: weights all equal
                outcomes.append(_sampled_outcome(variant, flat["rho"], rules, mass, interval))
                continue
            outcomes.append(_reweighted_outcome(variant, flat["rho"], log_ratio, shape, rules, mass, interval, note))
    return _sensitivity(outcomes, rules)
