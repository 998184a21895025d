"""One pair's complete result: every fit that ran, the checks, the prior sensitivity and the leading model."""

from __future__ import annotations

import dataclasses

import numpy as np

from reportgen.checks.sensitivity import (
    PriorVariant,
    Sensitivity,
    default_variants,
    sensitivity_from_draws,
    sensitivity_from_posterior,
)
from reportgen.checks.summary import HEAVY_TAILS, PRIOR_SENSITIVE, ROBUST_DIFFERS, ModelWarning, model_checks
from reportgen.data import PairData
from reportgen.fit import PairFit, derive_seed
from reportgen.models.rank import rank_posterior
from reportgen.results.adjustment import adjustment_result
from reportgen.results.choice import choose, nu_is_heavy
from reportgen.results.groups import group_analysis
from reportgen.results.pair import (
    PairResult,
    exact_posterior_of,
    pair_result,
    pair_result_exact,
    pair_result_rank,
)
from reportgen.spec import Spec

PREDICTIVE_DRAWS = 1000


def sampled_models(engine: str, model: str, n: int = 0, student_t_max_rows: int = 20_000,
                   adjusted: bool = False) -> tuple[str, ...]:
    """The sampled models a pair needs: none with the exact engine, none but the partial model (for a pair
    with controls, ``adjusted``) with the rank model.

    Under ``auto`` a pair of more than ``student_t_max_rows`` rows gets the rank model as its robust fit.
    """
    if engine == "exact":
        return ()
    partial = ("partial",) if adjusted else ()
    if model == "rank":
        return partial
    if model == "student_t" or (model == "auto" and n <= student_t_max_rows):
        return ("normal", "student_t", *partial)
    return ("normal", *partial)


def rank_is_robust_fit(engine: str, model: str, n: int, student_t_max_rows: int) -> bool:
    """Under ``auto``, the rank model is the robust fit with the exact engine or above the row limit."""
    return model == "auto" and (engine == "exact" or n > student_t_max_rows)


def prior_variants(spec: Spec, data: PairData) -> tuple[PriorVariant, ...]:
    """The spec's prior first, then the alternatives on rho, then the nuisance priors narrower and wider."""
    a, b = data.pair.priors.rho.shapes
    settings = spec.document.sensitivity
    if settings.rho_priors:
        rho = [PriorVariant(label="as specified", rho_a=a, rho_b=b)]
        for prior in settings.rho_priors:
            pa, pb = prior.shapes
            if (pa, pb) != (a, b):
                label = "uniform \u03c1" if (pa, pb) == (1.0, 1.0) else f"stretched Beta({pa:g}, {pb:g}) on \u03c1"
                rho.append(PriorVariant(label=label, rho_a=pa, rho_b=pb))
    else:
        rho = [v for v in default_variants(a, b) if v.width == 1.0]
    widths = [PriorVariant(label=f"means' and SDs' priors {'half' if w == 0.5 else f'{w:g} times'} as wide",
                           rho_a=a, rho_b=b, width=w) for w in settings.nuisance_widths if w != 1.0]
    return (*rho, *widths)


def _normal_rho_draws(normal: PairResult, fit: PairFit | None, data: PairData) -> np.ndarray:
    """Draws of the normal model's rho: the sampler's, or evenly spaced quantiles of the exact posterior."""
    if fit is not None and fit.model == "normal":
        return np.ravel(fit.draws["rho"])
    a, b = data.pair.priors.rho.shapes
    posterior = exact_posterior_of(data.stats, a, b)
    return np.asarray(posterior.quantile((np.arange(PREDICTIVE_DRAWS) + 0.5) / PREDICTIVE_DRAWS), dtype=float)


def _sensitivity(spec: Spec, data: PairData, leading: PairResult, fit: PairFit | None) -> Sensitivity:
    document = spec.document
    variants = prior_variants(spec, data)
    mass, interval = document.summary.credible_mass, document.summary.interval
    if leading.model == "rank":  # ranks have no means or SDs, so only the prior on rho can change
        return sensitivity_from_posterior(lambda a, b: rank_posterior(data.x, data.y, a, b),
                                          tuple(v for v in variants if v.width == 1.0), document.rules, mass,
                                          interval)
    if fit is None:  # the exact engine (or its fallback)
        return sensitivity_from_posterior(lambda a, b: exact_posterior_of(data.stats, a, b), variants,
                                          document.rules, mass, interval)
    stats = data.stats
    return sensitivity_from_draws(fit.draws, data.pair.priors, stats.mean_x, stats.mean_y, stats.sd_x, stats.sd_y,
                                  variants, document.rules, mass, interval)


def pair_outcome(spec: Spec, data: PairData, fits: dict[str, PairFit], failures: dict[str, str]) -> PairResult:
    """Assemble one pair from its fits (by model name) and the sampler failures (by model name)."""
    document = spec.document
    requested = data.pair.model
    normal_fit = fits.get("normal")
    if normal_fit is not None:
        normal = pair_result(spec, data, normal_fit)
    else:
        normal = pair_result_exact(spec, data, sampler_failure=failures.get("normal", ""))
    robust: PairResult | None = None
    robust_failure = failures.get("student_t", "")
    if "student_t" in fits:
        robust = pair_result(spec, data, fits["student_t"])
    rank = pair_result_rank(spec, data) if requested == "rank" or rank_is_robust_fit(
        document.engine, requested, data.stats.n, document.checks.student_t_max_rows) else None
    checks = model_checks(
        data.x, data.y, data.row_numbers, x_label=spec.display_name(data.pair.x),
        y_label=spec.display_name(data.pair.y), rho_prior=data.pair.priors.rho.shapes, rules=document.rules,
        settings=document.checks, normal_rho_draws=_normal_rho_draws(normal, normal_fit, data),
        seed=derive_seed(document.sampler.seed, data.pair.x, data.pair.y, "checks"), rank_model=requested == "rank")
    if robust is not None and nu_is_heavy(robust):
        checks = checks.with_warning(ModelWarning(HEAVY_TAILS, (
            f"The robust fit finds heavy tails (degrees of freedom below {robust.parameters['nu'].upper:.1f} with "
            f"{document.summary.credible_mass:.0%} probability): rows far from the rest are more common than a "
            "normal distribution allows.")))
    leading, choice = choose(requested, normal, robust, rank, checks, agreement=document.checks.influence_shift,
                             robust_failed=bool(robust_failure))
    if choice.robust_differs and choice.robust is not None:
        checks = checks.with_warning(ModelWarning(ROBUST_DIFFERS, (
            f"The normal and the {choice.robust.name} fit disagree by more than "
            f"{document.checks.influence_shift:g} in the median of \u03c1: the estimate depends on the model.")))
    leading_fit = fits.get(leading.model) if leading.model in ("normal", "student_t") else None
    sensitivity = _sensitivity(spec, data, leading, leading_fit)
    if sensitivity.prior_sensitive:
        names = ", ".join(f"\u201c{name}\u201d" for name in sensitivity.changed_rules)
        checks = checks.with_warning(ModelWarning(PRIOR_SENSITIVE, (
            f"The verdict on {names} changes under at least one of the alternative priors: the data alone do "
            "not settle it; see the prior sensitivity table.")))
    if requested in ("student_t", "auto") and robust is None and robust_failure:
        leading = dataclasses.replace(leading, diagnosis=dataclasses.replace(
            leading.diagnosis, status="warn" if leading.diagnosis.status == "pass" else leading.diagnosis.status,
            reasons=(*leading.diagnosis.reasons, f"the robust fit failed ({robust_failure})")))
    groups = adjustment = None
    if data.groups is not None:
        groups = group_analysis(spec, data.groups, data.pair.groups, data.pair.priors.rho.shapes,
                                leading.p_positive, leading.rho.median, spec.display_name(data.pair.group_by))
    if data.adjustment is not None:
        adjustment = adjustment_result(spec, data, fits.get("partial"))
        if "partial" in failures:
            adjustment = dataclasses.replace(adjustment, diagnosis=dataclasses.replace(
                adjustment.diagnosis, status="fail", reasons=(f"the sampler failed ({failures['partial']}); the "
                                                              "partial correlation shown is the exact engine's",)))
        if adjustment.status != "pass":  # the pair's own status must show it: a scheduled run is loud about it
            leading = dataclasses.replace(leading, diagnosis=dataclasses.replace(
                leading.diagnosis, status="warn" if leading.diagnosis.status == "pass" else leading.diagnosis.status,
                reasons=(*leading.diagnosis.reasons, "the partial correlation's fit did not pass its checks ("
                         + "; ".join(adjustment.diagnosis.reasons) + ")")))
    return dataclasses.replace(leading, checks=checks, sensitivity=sensitivity, choice=choice, groups=groups,
                               adjustment=adjustment)
