"""Stage 5: turn draws into the numbers, verdicts and sentences a report shows."""

from __future__ import annotations

import dataclasses
import time
from dataclasses import dataclass
from typing import Any

import numpy as np

from reportgen import exact, interpret, summaries
from reportgen.checks.sensitivity import Sensitivity
from reportgen.checks.summary import ModelChecks
from reportgen.crosscheck import CrossCheck, cross_check, exact_only_check, exact_rule_probability
from reportgen.data import PairData
from reportgen.diagnostics import NOT_SAMPLED, STATUS_ORDER, Diagnosis, diagnose
from reportgen.fit import PairFit, derive_seed
from reportgen.models.rank import rank_posterior
from reportgen.results import decisions
from reportgen.results.adjustment import Adjustment
from reportgen.results.groups import GroupAnalysis
from reportgen.results.rho import exact_posterior_of
from reportgen.spec import Spec

# what results and the record keep of a pair's sums; rss (the residual sum of squares) carries 1 - |r|
SUFFICIENT_KEYS = ("n", "mean_x", "mean_y", "sxx", "syy", "sxy", "rss")
PARAMETER_BOUNDS = {"rho": (-1.0, 1.0), "tau": (-1.0, 1.0), "sigma_x": (0.0, None), "sigma_y": (0.0, None),
                    "nu": (1.0, None)}


@dataclass(frozen=True)
class ParameterSummary:
    """One parameter's numbers (absolute) and its density curve (relative to ``offset``).

    ``grid + offset`` are the parameter's values; ``offset`` is 0 except for an unbounded parameter
    whose draws sit far from zero compared with their spread (a mean near 1e12 known to 0.01), where
    an absolute grid would collapse onto a few floating-point values.
    """

    name: str
    mean: float
    sd: float
    median: float
    lower: float
    upper: float
    grid: np.ndarray
    density: np.ndarray
    offset: float = 0.0


@dataclass(frozen=True)
class RuleOutcome:
    name: str
    statement: str
    probability: float
    required: float
    verdict: str
    sentence: str
    mcse: float = 0.0  # Monte Carlo standard error of the probability; 0 when computed by quadrature
    borderline: bool = False  # within decisions.BORDERLINE_MCSE errors of the requirement


@dataclass(frozen=True)
class FitSummary:
    """One model's rho for a pair, as shown beside the leading fit."""

    model: str
    name: str  # in words, e.g. "robust (Student-t)"
    median: float
    lower: float
    upper: float
    status: str
    engine: str
    verdicts: tuple[tuple[str, str], ...]  # (rule name, "met"/"not met")
    nu_median: float = float("nan")  # the Student-t fit's degrees of freedom; NaN for other models


@dataclass(frozen=True)
class ModelChoice:
    leading: str  # the model whose numbers lead
    requested: str  # the spec's model for the pair: normal, student_t, rank or auto
    sentence: str
    others: tuple[FitSummary, ...]
    robust: FitSummary | None  # the robust fit when one ran (results.csv's robust_rho_* columns)
    agrees: bool  # the robust fit's median is within the influence threshold of the normal one's

    @property
    def robust_differs(self) -> bool:
        return self.robust is not None and not self.agrees


@dataclass(frozen=True)
class PairResult:
    key: str
    x: str
    y: str
    title: str
    x_label: str
    y_label: str
    x_unit: str
    y_unit: str
    pair_set: str
    n: int
    n_dropped: int
    seed: int | None  # None: no sampler was run (exact engine)
    seconds: float
    reference: summaries.PearsonReference
    parameters: dict[str, ParameterSummary]
    hdi: tuple[float, float]
    p_positive: float
    r2_median: float
    rope_probability: float
    rope_decision: str
    rope_sentence: str
    rules: tuple[RuleOutcome, ...]
    diagnosis: Diagnosis
    paragraph: str
    diagnostics_sentence: str
    prior_grid: np.ndarray
    prior_density: np.ndarray
    covariance: np.ndarray  # posterior-mean covariance matrix, data units
    mean_vector: tuple[float, float]
    crosscheck: CrossCheck
    evidence_sentence: str
    crosscheck_sentence: str
    engine: str  # "mcmc" or "exact"
    sufficient: tuple[tuple[str, float], ...]  # n, means, centred sums: every number derives from these
    interval_excludes_zero: bool
    model: str = "normal"  # the model these numbers come from: "normal", "student_t" or "rank"
    r2_interval: tuple[float, float] = (float("nan"), float("nan"))  # rho^2, same kind and mass as rho's
    # Filled in by results.outcome once every fit of the pair is in: what the checks found, how the
    # verdicts move under other priors, and which model leads and why.
    checks: ModelChecks | None = None
    sensitivity: Sensitivity | None = None
    choice: ModelChoice | None = None
    # The pair's rows group by group, and its partial correlation given the control columns, when the spec
    # asks for them (filled in by results.outcome).
    groups: GroupAnalysis | None = None
    adjustment: Adjustment | None = None

    @property
    def rho(self) -> ParameterSummary:
        return self.parameters["rho"]

    @property
    def status(self) -> str:
        return self.diagnosis.status


@dataclass(frozen=True)
class RunResults:
    pairs: tuple[PairResult, ...]
    credible_mass: float
    interval_kind: str
    rule_names: tuple[str, ...]

    @property
    def status(self) -> str:
        worst = max((STATUS_ORDER[p.status] for p in self.pairs), default=0)
        return {v: k for k, v in STATUS_ORDER.items()}[worst]

    @property
    def failed(self) -> tuple[PairResult, ...]:
        return tuple(p for p in self.pairs if p.status == "fail")


def summarise_parameter(name: str, draws: np.ndarray, mass: float, kind: str) -> ParameterSummary:
    lower_bound, upper_bound = PARAMETER_BOUNDS.get(name, (None, None))
    values = np.ravel(draws)
    offset = 0.0
    centre, spread = float(np.median(values)), float(np.ptp(values))
    # An unbounded parameter whose draws share four or more leading digits (the point where tick labels
    # stop being readable; matplotlib's own offset threshold, common practice) is tabulated relative to a
    # round number near its median: one power of ten above the draws' range, so the axis reads e.g.
    # "mu - 1,000,000,000" with small ticks. Bounded parameters keep absolute grids: their bounds are.
    # (The scatter plot applies the same rule to the data, in reportgen.figures.style._display_offset.)
    if lower_bound is None and upper_bound is None and spread > 0.0 and abs(centre) > 1e3 * spread:
        decimals = -int(np.ceil(np.log10(spread)))
        offset = float(round(centre, decimals))
    grid, density = summaries.bounded_density(draws, lower_bound, upper_bound, offset=offset)
    lower, upper = summaries.interval(draws, mass, kind)
    return ParameterSummary(
        name=name,
        mean=float(np.mean(values)),
        sd=float(np.std(values, ddof=1)),
        median=float(np.median(values)),
        lower=lower,
        upper=upper,
        grid=grid,
        density=density,
        offset=offset,
    )


def _posterior_covariance(draws: dict[str, np.ndarray]) -> np.ndarray:
    sx = float(np.mean(draws["sigma_x"]))
    sy = float(np.mean(draws["sigma_y"]))
    rho = float(np.mean(draws["rho"]))
    return np.array([[sx * sx, rho * sx * sy], [rho * sx * sy, sy * sy]])


def _rule_outcomes(spec: Spec, probabilities: dict[str, float],
                   mcses: dict[str, float] | None = None) -> tuple[RuleOutcome, ...]:
    """Each rule's verdict; with ``mcses`` (sampled probabilities) also its Monte Carlo error."""
    outcomes = []
    for rule in spec.document.rules:
        probability = probabilities[rule.name]
        mcse = (mcses or {}).get(rule.name, 0.0)
        borderline = decisions.is_borderline(probability, rule.required_probability, mcse)
        sentence = interpret.rule_sentence(rule, probability)
        if borderline:
            sentence += " " + decisions.borderline_sentence(probability, rule.required_probability, mcse)
        outcomes.append(RuleOutcome(
            name=rule.name, statement=interpret.rule_statement(rule), probability=probability,
            required=rule.required_probability,
            verdict=interpret.rule_verdict(probability, rule.required_probability),
            sentence=sentence, mcse=mcse, borderline=borderline))
    return tuple(outcomes)


def pair_result(spec: Spec, data: PairData, fit: PairFit) -> PairResult:
    """The result of one pair from the sampler's draws."""
    document = spec.document
    mass = document.summary.credible_mass
    kind = document.summary.interval
    parameters = {name: summarise_parameter(name, values, mass, kind) for name, values in fit.draws.items()}
    rho_draws = np.ravel(fit.draws["rho"])
    probabilities = {rule.name: summaries.rule_probability(rho_draws, rule) for rule in document.rules}
    diagnosis = diagnose(fit.draws, fit.diverging, fit.energy, document.diagnostics)
    rho_diagnostics = next(p for p in diagnosis.parameters if p.name == "rho")
    mcses = {rule.name: decisions.indicator_mcse(summaries.rule_indicator(fit.draws["rho"], rule),
                                                 rho_diagnostics.ess_bulk) for rule in document.rules}
    if fit.model == "normal":
        check = cross_check(
            rho_draws, rho_diagnostics.mcse_mean, rho_diagnostics.ess_bulk, data.stats,
            data.pair.priors, document.rules, mass, probabilities, rule_mcses=mcses,
        )
    else:  # the exact reference is the normal model's; another model has none to compare with
        check = no_reference_check(rho_draws, data.pair.priors.rho.shapes, mass, rho_diagnostics.ess_bulk)
    if check.applies and not check.within_error:
        reason = "the sampler and the exact reference for \u03c1 differ by more than the allowance"
        diagnosis = dataclasses.replace(
            diagnosis, reasons=(*diagnosis.reasons, reason),
            status="fail" if diagnosis.status == "fail" else "warn")
    return _assemble(
        spec, data, engine="mcmc", parameters=parameters,
        hdi=summaries.hdi_interval(rho_draws, mass),
        p_positive=float(np.mean(rho_draws > 0)),
        r2_median=float(np.median(rho_draws ** 2)),
        r2_interval=summaries.interval(rho_draws ** 2, mass, kind),
        rope_probability=summaries.rope_probability(rho_draws, document.rope),
        rules=_rule_outcomes(spec, probabilities, mcses), diagnosis=diagnosis, check=check,
        seed=fit.seed, seconds=fit.seconds,
        covariance=_posterior_covariance(fit.draws),
        mean_vector=(float(np.mean(fit.draws["mu_x"])), float(np.mean(fit.draws["mu_y"]))),
        model=fit.model, attempts=tuple((a.target_accept, a.divergences) for a in fit.attempts),
    )


def no_reference_check(rho_draws: np.ndarray, shapes: tuple[float, float], mass: float,
                       ess: float = float("nan")) -> CrossCheck:
    """For a model without an exact reference: nothing compared, no exact Bayes factor.

    The Savage-Dickey ratio of the draws still estimates this model's own Bayes factor for rho = 0.
    """
    from reportgen.crosscheck import savage_dickey_bf10, savage_dickey_relative_mcse

    values = np.ravel(rho_draws)
    prior_zero = float(np.exp(exact.log_stretched_beta_pdf(np.array([0.0]), *shapes))[0])
    nan = float("nan")
    return CrossCheck(
        applies=False, reference_priors=False, exact_mean=nan, exact_sd=nan, exact_lower=nan, exact_upper=nan,
        mean_gap=0.0, mean_allowed=0.0, rule_gaps=(), log_bf10=nan,
        savage_dickey_bf10=savage_dickey_bf10(values, prior_zero), grid=np.zeros(0), density=np.zeros(0),
        savage_dickey_relative_mcse=savage_dickey_relative_mcse(values, ess))


def pair_result_exact(spec: Spec, data: PairData, sampler_failure: str = "") -> PairResult:
    """The result of one pair from the exact marginal posterior of rho (no sampler).

    Under Jeffreys' priors for the means and SDs; only rho has a posterior here, and the
    scatter plot's ellipses use the sample means and SDs with the posterior mean of rho.
    With ``sampler_failure`` set, this is the fallback for a pair whose sampler failed:
    the pair is marked "fail" with that reason, and the numbers are labelled as exact.
    """
    started = time.perf_counter()
    a, b = data.pair.priors.rho.shapes
    posterior = exact_posterior_of(data.stats, a, b)
    diagnosis = NOT_SAMPLED
    if sampler_failure:
        diagnosis = dataclasses.replace(NOT_SAMPLED, status="fail",
                                        reasons=(f"the sampler failed ({sampler_failure})",))
    seed = derive_seed(spec.document.sampler.seed, data.pair.x, data.pair.y) if sampler_failure else None
    return _result_from_posterior(spec, data, posterior, {}, diagnosis, seed, started, "normal")


def pair_result_rank(spec: Spec, data: PairData) -> PairResult:
    """The result of one pair from the rank model (Kendall's tau, shown on Pearson's scale); no sampler."""
    started = time.perf_counter()
    a, b = data.pair.priors.rho.shapes
    posterior = rank_posterior(data.x, data.y, a, b)
    rho_grid, rho_density = plotting_grid(np.asarray(posterior.rho), np.asarray(posterior.density))
    tau_grid = 2.0 / np.pi * np.arcsin(np.clip(rho_grid, -1.0, 1.0))
    # density of tau = density of rho times d rho / d tau = (pi / 2) cos(pi tau / 2)
    tau_density = rho_density * (np.pi / 2.0) * np.cos(np.pi * tau_grid / 2.0)
    mass = spec.document.summary.credible_mass
    tail = (1.0 - mass) / 2.0
    tau_mean = float(np.trapezoid(tau_grid * tau_density, tau_grid))
    tau_sd = float(np.sqrt(max(np.trapezoid((tau_grid - tau_mean) ** 2 * tau_density, tau_grid), 0.0)))
    tau = ParameterSummary(
        name="tau", mean=tau_mean, sd=tau_sd,
        median=float(posterior.tau_median), lower=float(posterior.tau_quantile(tail)),
        upper=float(posterior.tau_quantile(1.0 - tail)), grid=tau_grid, density=tau_density)
    return _result_from_posterior(spec, data, posterior, {"tau": tau}, NOT_SAMPLED, None, started, "rank")


def plotting_grid(grid: np.ndarray, density: np.ndarray, floor: float = 1e-12) -> tuple[np.ndarray, np.ndarray]:
    """The part of a quadrature grid worth drawing: strictly increasing, where the density is not negligible.

    A grid laid out in atanh(rho) maps its far tails onto rho = -1 or 1 many times over (in floating point).
    Points that rounded to exactly -1 or 1 cannot be placed on any axis of rho, so they are left out
    before the floor is taken: otherwise, for a posterior pressed against an end, their huge densities
    would set the floor and leave nothing that can be drawn.
    """
    drawable = np.isfinite(grid) & (np.abs(grid) < 1.0) & np.isfinite(density)
    peak = float(np.max(density[drawable], initial=0.0))
    keep = drawable & (density >= floor * peak)
    grid, density = grid[keep], density[keep]
    increasing = np.concatenate([[True], np.diff(grid) > 0])
    return grid[increasing], density[increasing]


def _result_from_posterior(
    spec: Spec, data: PairData, posterior: Any, extra: dict[str, ParameterSummary], diagnosis: Diagnosis,
    seed: int | None, started: float, model: str,
) -> PairResult:
    """A pair's result from a one-dimensional posterior of rho computed by quadrature."""
    document = spec.document
    mass = document.summary.credible_mass
    tail = (1.0 - mass) / 2.0
    hdi = tuple(float(v) for v in posterior.hdi(mass))
    lower, upper = hdi if document.summary.interval == "hdi" else (
        float(posterior.quantile(tail)), float(posterior.quantile(1.0 - tail)))
    grid, density = plotting_grid(np.asarray(posterior.rho), np.asarray(posterior.density))
    rho = ParameterSummary(
        name="rho", mean=float(posterior.mean), sd=float(posterior.sd), median=float(posterior.median),
        lower=lower, upper=upper, grid=grid, density=density)
    probabilities = {rule.name: exact_rule_probability(posterior, rule) for rule in document.rules}
    check = exact_only_check(posterior, mass)
    if model == "rank":  # the rank model is not the exact reference: keep only its own Bayes factor
        nan = float("nan")
        check = dataclasses.replace(check, exact_mean=nan, exact_sd=nan, exact_lower=nan, exact_upper=nan,
                                    mean_gap=nan)
    r2_median, r2_interval = _squared_summary(posterior, mass, document.summary.interval)
    sx, sy = data.stats.sd_x, data.stats.sd_y
    covariance = np.array([[sx * sx, rho.mean * sx * sy], [rho.mean * sx * sy, sy * sy]])
    return _assemble(
        spec, data, engine="exact", parameters={"rho": rho, **extra}, hdi=(hdi[0], hdi[1]),
        p_positive=float(posterior.prob_above(0.0)), r2_median=r2_median, r2_interval=r2_interval,
        rope_probability=float(posterior.prob_between(document.rope.lower, document.rope.upper)),
        rules=_rule_outcomes(spec, probabilities), diagnosis=diagnosis, check=check,
        seed=seed, seconds=time.perf_counter() - started, covariance=covariance,
        mean_vector=(data.stats.mean_x, data.stats.mean_y), model=model,
    )


def _squared_quantiles(posterior: Any, probabilities: np.ndarray) -> np.ndarray:
    """Quantiles of rho^2 from a posterior of rho: P(rho^2 <= t) = cdf(sqrt t) - cdf(-sqrt t). The exact
    posterior inverts that on its own grid; another posterior of rho by bisection on all probabilities at
    once."""
    if isinstance(posterior, exact.ExactPosterior):
        return np.asarray(posterior.squared_quantile(probabilities), dtype=float)
    low, high = np.zeros_like(probabilities), np.ones_like(probabilities)
    for _ in range(60):
        mid = 0.5 * (low + high)
        root = np.sqrt(mid)
        share = np.asarray(posterior.cdf(root), dtype=float) - np.asarray(posterior.cdf(-root), dtype=float)
        below = share < probabilities
        low, high = np.where(below, mid, low), np.where(below, high, mid)
    return 0.5 * (low + high)


def _squared_summary(posterior: Any, mass: float, kind: str) -> tuple[float, tuple[float, float]]:
    """The median of rho^2 and its interval of the report's kind: equal-tailed, or the shortest of the
    intervals holding ``mass`` between two quantiles (the highest-density interval of a unimodal density, to
    1/400 in mass). All the quantiles are found in one call."""
    if kind != "hdi":
        median, lower, upper = _squared_quantiles(posterior, np.array([0.5, (1 - mass) / 2, (1 + mass) / 2]))
        return float(median), (float(lower), float(upper))
    starts = np.linspace(0.0, 1.0 - mass, 401)
    found = _squared_quantiles(posterior, np.concatenate([[0.5], starts, np.minimum(starts + mass, 1.0)]))
    lowers, uppers = found[1:starts.size + 1], found[starts.size + 1:]
    best = int(np.argmin(uppers - lowers))
    return float(found[0]), (float(lowers[best]), float(uppers[best]))


def _assemble(
    spec: Spec, data: PairData, *, engine: str, parameters: dict[str, ParameterSummary],
    hdi: tuple[float, float], p_positive: float, r2_median: float, r2_interval: tuple[float, float],
    rope_probability: float,
    rules: tuple[RuleOutcome, ...], diagnosis: Diagnosis, check: CrossCheck, seed: int | None, seconds: float,
    covariance: np.ndarray, mean_vector: tuple[float, float], model: str = "normal",
    attempts: tuple[tuple[float, int], ...] = (),
) -> PairResult:
    document = spec.document
    mass = document.summary.credible_mass
    pair = data.pair
    rho = parameters["rho"]
    rope_decision = summaries.rope_decision(hdi, document.rope)
    x_label, y_label = spec.display_name(pair.x), spec.display_name(pair.y)
    interval_name = "highest-density interval" if document.summary.interval == "hdi" else "credible interval"
    a, b = pair.priors.rho.shapes
    prior_grid = np.linspace(-1.0, 1.0, 401)
    largest = check.largest_rule_gap
    if engine == "exact" and diagnosis.status == "fail":
        check_sentence = interpret.exact_engine_sentence()
        diagnostics_sentence = (f"The sampler failed for this pair ({'; '.join(diagnosis.reasons)}); the numbers "
                                "shown are the exact engine's fallback, under Jeffreys' priors for the means "
                                "and SDs rather than the spec's.")
    elif model == "rank":
        check_sentence = interpret.rank_model_sentence()
        diagnostics_sentence = "No sampler was run: the rank model's posterior is computed by quadrature."
    elif engine == "exact":
        check_sentence = interpret.exact_engine_sentence()
        diagnostics_sentence = "No sampler was run: the exact engine computes the posterior by quadrature."
    elif model != "normal":
        check_sentence = interpret.no_reference_sentence()
        diagnostics_sentence = interpret.diagnostics_sentence(diagnosis.status, diagnosis.reasons, attempts=attempts,
                                                            broken=diagnosis.broken)
    else:
        check_sentence = interpret.crosscheck_sentence(
            applies=check.applies, reference_priors=check.reference_priors, mean_gap=check.mean_gap,
            mean_allowed=check.mean_allowed, rule_name=largest.name if largest else None,
            rule_gap=(largest.sampled - largest.exact) if largest else 0.0,
            rule_allowed=largest.allowed if largest else 0.0, within=check.within_error)
        diagnostics_sentence = interpret.diagnostics_sentence(diagnosis.status, diagnosis.reasons, attempts=attempts,
                                                            broken=diagnosis.broken)
    return PairResult(
        key=pair.key, x=pair.x, y=pair.y, title=pair.label or f"{x_label} and {y_label}",
        x_label=x_label, y_label=y_label,
        x_unit=spec.variable(pair.x).unit, y_unit=spec.variable(pair.y).unit,
        pair_set=pair.pair_set, n=data.stats.n, n_dropped=data.n_dropped, seed=seed, seconds=seconds,
        reference=summaries.pearson_reference(data.stats.n, data.stats.sample_r, mass),
        parameters=parameters, hdi=hdi, p_positive=p_positive, r2_median=r2_median,
        rope_probability=rope_probability, rope_decision=rope_decision,
        rope_sentence=interpret.rope_sentence(document.rope, rope_probability, rope_decision, mass, hdi),
        rules=rules, diagnosis=diagnosis,
        paragraph=interpret.pair_paragraph(
            x_label=x_label, y_label=y_label, n=data.stats.n, n_dropped=data.n_dropped,
            median=rho.median, lower=rho.lower, upper=rho.upper, mass=mass,
            interval_name=interval_name, p_positive=p_positive, r2_median=r2_median,
            r2_lower=r2_interval[0], r2_upper=r2_interval[1],
        ),
        diagnostics_sentence=diagnostics_sentence,
        prior_grid=prior_grid, prior_density=np.exp(exact.log_stretched_beta_pdf(prior_grid, a, b)),
        covariance=covariance, mean_vector=mean_vector, crosscheck=check,
        evidence_sentence=interpret.evidence_sentence(check.log_bf10, model, rho_a=a, rho_b=b),
        crosscheck_sentence=check_sentence, engine=engine,
        sufficient=tuple((k, float(getattr(data.stats, k))) for k in SUFFICIENT_KEYS
                         if getattr(data.stats, k) is not None),
        interval_excludes_zero=rho.lower > 0 or rho.upper < 0, model=model, r2_interval=r2_interval,
    )


def run_results(spec: Spec, pairs: tuple[PairResult, ...]) -> RunResults:
    summary = spec.document.summary
    return RunResults(
        pairs=pairs,
        credible_mass=summary.credible_mass,
        interval_kind=summary.interval,
        rule_names=tuple(rule.name for rule in spec.document.rules),
    )
