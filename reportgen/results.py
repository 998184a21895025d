"""Stage 5: turn draws into the numbers, verdicts and sentences a report shows."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from reportgen import interpret, summaries
from reportgen.crosscheck import CrossCheck, cross_check
from reportgen.data import PairData
from reportgen.diagnostics import STATUS_ORDER, Diagnosis, diagnose
from reportgen.fit import PARAMETERS, PairFit
from reportgen.spec import Spec

PARAMETER_BOUNDS = {"rho": (-1.0, 1.0), "sigma_x": (0.0, None), "sigma_y": (0.0, None)}


@dataclass(frozen=True)
class ParameterSummary:
    name: str
    mean: float
    sd: float
    median: float
    lower: float
    upper: float
    grid: np.ndarray
    density: np.ndarray


@dataclass(frozen=True)
class RuleOutcome:
    name: str
    statement: str
    probability: float
    required: float
    verdict: str
    sentence: str


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
    seed: int
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
    grid, density = summaries.bounded_density(draws, lower_bound, upper_bound)
    lower, upper = summaries.interval(draws, mass, kind)
    values = np.ravel(draws)
    return ParameterSummary(
        name=name,
        mean=float(np.mean(values)),
        sd=float(np.std(values, ddof=1)),
        median=float(np.median(values)),
        lower=lower,
        upper=upper,
        grid=grid,
        density=density,
    )


def _posterior_covariance(draws: dict[str, np.ndarray]) -> np.ndarray:
    sx = float(np.mean(draws["sigma_x"]))
    sy = float(np.mean(draws["sigma_y"]))
    rho = float(np.mean(draws["rho"]))
    return np.array([[sx * sx, rho * sx * sy], [rho * sx * sy, sy * sy]])


def pair_result(spec: Spec, data: PairData, fit: PairFit) -> PairResult:
    document = spec.document
    mass = document.summary.credible_mass
    kind = document.summary.interval
    pair = data.pair
    parameters = {name: summarise_parameter(name, fit.draws[name], mass, kind) for name in PARAMETERS}
    rho_draws = np.ravel(fit.draws["rho"])
    rho = parameters["rho"]
    hdi = summaries.hdi_interval(rho_draws, mass)
    rope_probability = summaries.rope_probability(rho_draws, document.rope)
    rope_decision = summaries.rope_decision(hdi, document.rope)
    outcomes = []
    for rule in document.rules:
        probability = summaries.rule_probability(rho_draws, rule)
        outcomes.append(RuleOutcome(
            name=rule.name,
            statement=interpret.rule_statement(rule),
            probability=probability,
            required=rule.required_probability,
            verdict=interpret.rule_verdict(probability, rule.required_probability),
            sentence=interpret.rule_sentence(rule, probability),
        ))
    diagnosis = diagnose(fit.draws, fit.diverging, fit.energy, document.diagnostics)
    rho_diagnostics = next(p for p in diagnosis.parameters if p.name == "rho")
    check = cross_check(
        rho_draws, rho_diagnostics.mcse_mean, rho_diagnostics.ess_bulk, data.stats.n, data.stats.sample_r,
        pair.priors, document.rules, mass, {o.name: o.probability for o in outcomes},
    )
    largest = check.largest_rule_gap
    if check.applies and not check.within_error:
        reason = "the sampler and the exact reference for \u03c1 differ by more than the allowance"
        diagnosis = dataclasses.replace(
            diagnosis, reasons=(*diagnosis.reasons, reason),
            status="fail" if diagnosis.status == "fail" else "warn")
    x_label, y_label = spec.display_name(pair.x), spec.display_name(pair.y)
    p_positive = float(np.mean(rho_draws > 0))
    r2_median = float(np.median(rho_draws ** 2))
    interval_name = "highest-density interval" if kind == "hdi" else "credible interval"
    a, b = pair.priors.rho.shapes
    prior_grid = np.linspace(-1.0, 1.0, 401)
    return PairResult(
        key=pair.key,
        x=pair.x,
        y=pair.y,
        title=pair.label or f"{x_label} and {y_label}",
        x_label=x_label,
        y_label=y_label,
        x_unit=spec.variable(pair.x).unit,
        y_unit=spec.variable(pair.y).unit,
        pair_set=pair.pair_set,
        n=data.stats.n,
        n_dropped=data.n_dropped,
        seed=fit.seed,
        seconds=fit.seconds,
        reference=summaries.pearson_reference(data.stats.n, data.stats.sample_r, mass),
        parameters=parameters,
        hdi=hdi,
        p_positive=p_positive,
        r2_median=r2_median,
        rope_probability=rope_probability,
        rope_decision=rope_decision,
        rope_sentence=interpret.rope_sentence(document.rope, rope_probability, rope_decision, mass),
        rules=tuple(outcomes),
        diagnosis=diagnosis,
        paragraph=interpret.pair_paragraph(
            x_label=x_label, y_label=y_label, n=data.stats.n, n_dropped=data.n_dropped,
            median=rho.median, lower=rho.lower, upper=rho.upper, mass=mass,
            interval_name=interval_name, p_positive=p_positive, r2_median=r2_median,
        ),
        diagnostics_sentence=interpret.diagnostics_sentence(diagnosis.status, diagnosis.reasons),
        prior_grid=prior_grid,
        prior_density=summaries.stretched_beta_pdf(prior_grid, a, b),
        covariance=_posterior_covariance(fit.draws),
        mean_vector=(float(np.mean(fit.draws["mu_x"])), float(np.mean(fit.draws["mu_y"]))),
        crosscheck=check,
        evidence_sentence=interpret.evidence_sentence(check.log_bf10),
        crosscheck_sentence=interpret.crosscheck_sentence(
            applies=check.applies, reference_priors=check.reference_priors, mean_gap=check.mean_gap,
            mean_allowed=check.mean_allowed, rule_name=largest.name if largest else None,
            rule_gap=(largest.sampled - largest.exact) if largest else 0.0,
            rule_allowed=largest.allowed if largest else 0.0, within=check.within_error),
    )


CSV_COLUMNS = (
    "pair", "x", "y", "n", "n_dropped", "sample_r", "rho_mean", "rho_median", "rho_sd",
    "rho_lower", "rho_upper", "rhat_max", "ess_bulk_min", "ess_tail_min", "divergences", "status",
)


def results_rows(results: RunResults) -> tuple[list[str], list[list[object]]]:
    """The rows of results.csv: the fixed columns, then extras, then one p_<rule> per rule."""
    rule_names = results.rule_names
    interval_text = f"{results.interval_kind} {results.credible_mass:g}"
    header = [*CSV_COLUMNS, "p_positive", "p_rope", "rope_decision", "interval",
              "fisher_lower", "fisher_upper", "p_value", "seed", "status_reasons",
              "exact_mean", "exact_sd", "exact_mean_gap", "log_bf10", "savage_dickey_bf10",
              *[f"p_{name}" for name in rule_names]]
    rows: list[list[object]] = []
    for pair in results.pairs:
        rho = pair.rho
        d = pair.diagnosis
        rows.append([
            pair.key, pair.x, pair.y, pair.n, pair.n_dropped, repr(pair.reference.r),
            repr(rho.mean), repr(rho.median), repr(rho.sd), repr(rho.lower), repr(rho.upper),
            f"{d.rhat_max:.4f}", f"{d.ess_bulk_min:.0f}", f"{d.ess_tail_min:.0f}", d.divergences,
            pair.status, repr(pair.p_positive), repr(pair.rope_probability), pair.rope_decision,
            interval_text, repr(pair.reference.ci_lower), repr(pair.reference.ci_upper),
            repr(pair.reference.p_value), pair.seed, "; ".join(d.reasons),
            repr(pair.crosscheck.exact_mean), repr(pair.crosscheck.exact_sd), repr(pair.crosscheck.mean_gap),
            repr(pair.crosscheck.log_bf10), repr(pair.crosscheck.savage_dickey_bf10),
            *[repr(rule.probability) for rule in pair.rules],
        ])
    return header, rows


def run_results(spec: Spec, pairs: tuple[PairResult, ...]) -> RunResults:
    summary = spec.document.summary
    return RunResults(
        pairs=pairs,
        credible_mass=summary.credible_mass,
        interval_kind=summary.interval,
        rule_names=tuple(rule.name for rule in spec.document.rules),
    )
