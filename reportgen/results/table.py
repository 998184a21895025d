"""The rows of results.csv: fixed columns first, then further columns, then p_<rule> and p_<rule>_mcse per rule."""

from __future__ import annotations

import numpy as np

from reportgen import summaries
from reportgen.results.pair import PairResult, RunResults
from reportgen.results.rho import RhoSummary

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


# the groups and the adjustment: a grouped pair has one more row per group, a pair with controls one more row
GROUP_COLUMNS = ("group", "groups_model", "group_spread_median", "simpson_warning", "controls")


def _group_cells(pair: PairResult) -> dict[str, object]:
    """The pair's own row's group columns."""
    groups = pair.groups
    return {
        "group": "", "groups_model": groups.model if groups else "",
        "group_spread_median": _number(groups.spread_median) if groups else "",
        "simpson_warning": "true" if groups and groups.simpson else "false", "controls": "",
    }


def _summary_cells(pair: PairResult, summary: RhoSummary, n: int, r: float, mass: float) -> dict[str, object]:
    """The columns a row of a group or of the partial correlation shares with the pair's own row."""
    reference = summaries.pearson_reference(n, r, mass)
    cells: dict[str, object] = {
        "pair": pair.key, "x": pair.x, "y": pair.y, "n": n, "sample_r": repr(r),
        "rho_mean": repr(summary.mean), "rho_median": repr(summary.median), "rho_sd": _number(summary.sd),
        "rho_lower": repr(summary.lower), "rho_upper": repr(summary.upper), "p_positive": repr(summary.p_positive),
        "p_rope": _number(summary.p_rope), "interval_kind": summary.interval_kind, "interval_mass": f"{mass:g}",
        "fisher_lower": repr(reference.ci_lower), "fisher_upper": repr(reference.ci_upper),
        "p_value": repr(reference.p_value),
    }
    for name, probability, mcse in summary.rules:
        cells[f"p_{name}"] = repr(probability)
        cells[f"p_{name}_mcse"] = repr(mcse)
    return cells


def extra_rows(pair: PairResult, mass: float) -> list[dict[str, object]]:
    """One row per fitted group (the partially pooled numbers when the groups are pooled), then the partial
    correlation's row."""
    rows: list[dict[str, object]] = []
    groups = pair.groups
    if groups is not None:
        shared = _group_cells(pair)
        for group in groups.groups:
            summary = group.pooled if group.pooled is not None else group.alone
            rows.append({**_summary_cells(pair, summary, group.n, group.sample_r, mass), **shared,
                         "group": group.label, "status": "pass", "engine": "exact",
                         "model": "partial_pooling" if group.pooled is not None else "normal"})
    adjustment = pair.adjustment
    if adjustment is not None:
        # the reference on n - k rows: Fisher's interval and the t test of a partial correlation (common practice)
        cells = _summary_cells(pair, adjustment.partial, adjustment.n - len(adjustment.controls),
                               adjustment.partial_r, mass)
        d = adjustment.diagnosis
        sampled = adjustment.engine == "mcmc"
        check = adjustment.crosscheck
        rows.append({
            **cells, "n": adjustment.n, "n_dropped": adjustment.n_dropped, "status": d.status,
            "status_reasons": "; ".join(d.reasons), "engine": adjustment.engine, "model": "partial",
            "rhat_max": f"{d.rhat_max:.4f}" if sampled else "", "ess_bulk_min": f"{d.ess_bulk_min:.0f}" if sampled
            else "", "ess_tail_min": f"{d.ess_tail_min:.0f}" if sampled else "", "divergences": d.divergences,
            "seed": "" if adjustment.seed is None else adjustment.seed, "exact_mean": _number(check.exact_mean),
            "exact_sd": _number(check.exact_sd), "exact_mean_gap": _number(check.mean_gap),
            **_group_cells(pair), "simpson_warning": "false", "controls": ";".join(adjustment.controls),
        })
    return rows


def results_rows(results: RunResults) -> tuple[list[str], list[list[object]]]:
    """The rows of results.csv: the fixed columns, then extras, then p_<rule> and its Monte Carlo error."""
    rule_names = results.rule_names
    # every Bayes factor on one scale, the natural log, named by it
    header = [*CSV_COLUMNS, "p_positive", "p_rope", "rope_decision", "interval_kind", "interval_mass",
              "fisher_lower", "fisher_upper", "p_value", "seed", "status_reasons",
              "exact_mean", "exact_sd", "exact_mean_gap", "ln_bf10", "ln_bf10_savage_dickey", "engine",
              *MODEL_CHECK_COLUMNS, "borderline_rules", *GROUP_COLUMNS,
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
            *_group_cells(pair).values(),
            *[cell for rule in pair.rules for cell in (repr(rule.probability), repr(rule.mcse))],
        ])
        rows.extend([row.get(column, "") for column in header] for row in extra_rows(pair, results.credible_mass))
    return header, rows


