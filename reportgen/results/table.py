"""The rows of results.csv: fixed columns first, then further columns, then p_<rule> and p_<rule>_mcse per rule."""

from __future__ import annotations

import numpy as np

from reportgen.results.pair import PairResult, RunResults

CSV_COLUMNS = (
    "pair", "x", "y", "n", "n_dropped", "sample_r", "rho_mean", "rho_median", "rho_sd",
    "rho_lower", "rho_upper", "rhat_max", "ess_bulk_min", "ess_tail_min", "divergences", "status",
)


MODEL_CHECK_COLUMNS = (
    "model", "nu_median", "robust_rho_median", "robust_rho_lower", "robust_rho_upper", "influence_max",
    "influential_rows", "normality_p", "ppc_p_r", "prior_sensitive", "model_warnings",
)


def _number(value: float) -> str:
    return repr(float(value)) if np.isfinite(value) else ""


def _ln(value: float) -> str:
    """The natural log of a positive ratio; empty where there is none."""
    return repr(float(np.log(value))) if np.isfinite(value) and value > 0 else ""


def model_check_cells(pair: PairResult) -> list[str]:
    """The model, the robust fit and the checks of one pair, in MODEL_CHECK_COLUMNS order."""
    robust = pair.choice.robust if pair.choice is not None else None
    nu = pair.parameters.get("nu")
    nu_median = nu.median if nu is not None else robust.nu_median if robust is not None else float("nan")
    checks = pair.checks
    return [
        pair.model,
        _number(nu_median),
        *((_number(robust.median), _number(robust.lower), _number(robust.upper)) if robust else ("", "", "")),
        _number(checks.influence.max_shift) if checks else "",
        ";".join(str(row) for row in checks.influence.flagged_rows) if checks else "",
        _number(checks.shape.normality_p) if checks else "",
        _number(checks.predictive.p_r) if checks else "",
        ("true" if pair.sensitivity.prior_sensitive else "false") if pair.sensitivity else "",
        ";".join(checks.codes) if checks else "",
    ]


def results_rows(results: RunResults) -> tuple[list[str], list[list[object]]]:
    """The rows of results.csv: the fixed columns, then extras, then p_<rule> and its Monte Carlo error."""
    rule_names = results.rule_names
    # every Bayes factor on one scale, the natural log, named by it
    header = [*CSV_COLUMNS, "p_positive", "p_rope", "rope_decision", "interval_kind", "interval_mass",
              "fisher_lower", "fisher_upper", "p_value", "seed", "status_reasons",
              "exact_mean", "exact_sd", "exact_mean_gap", "ln_bf10", "ln_bf10_savage_dickey", "engine",
              *MODEL_CHECK_COLUMNS, "borderline_rules",
              *[column for name in rule_names for column in (f"p_{name}", f"p_{name}_mcse")]]
    rows: list[list[object]] = []
    for pair in results.pairs:
        rho = pair.rho
        d = pair.diagnosis
        rows.append([
            pair.key, pair.x, pair.y, pair.n, pair.n_dropped, repr(pair.reference.r),
            repr(rho.mean), repr(rho.median), repr(rho.sd), repr(rho.lower), repr(rho.upper),
            *(("", "", "") if pair.engine == "exact" else
              (f"{d.rhat_max:.4f}", f"{d.ess_bulk_min:.0f}", f"{d.ess_tail_min:.0f}")), d.divergences,
            pair.status, repr(pair.p_positive), repr(pair.rope_probability), pair.rope_decision,
            results.interval_kind, f"{results.credible_mass:g}",
            repr(pair.reference.ci_lower), repr(pair.reference.ci_upper),
            repr(pair.reference.p_value), "" if pair.seed is None else pair.seed, "; ".join(d.reasons),
            _number(pair.crosscheck.exact_mean), _number(pair.crosscheck.exact_sd),
            _number(pair.crosscheck.mean_gap), _number(pair.crosscheck.log_bf10),
            _ln(pair.crosscheck.savage_dickey_bf10), pair.engine,
            *model_check_cells(pair), ";".join(rule.name for rule in pair.rules if rule.borderline),
            *[cell for rule in pair.rules for cell in (repr(rule.probability), repr(rule.mcse))],
        ])
    return header, rows


