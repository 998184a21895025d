"""The report's context for a pair's groups and its partial correlation: figures, tables and sentences.

Everything here is formatted for the templates, which only place it.
"""

from __future__ import annotations

from typing import Any

from reportgen import figures, interpret
from reportgen.report.render import drawn_figure
from reportgen.results import PairResult
from reportgen.results.adjustment import Adjustment
from reportgen.results.groups import GroupAnalysis
from reportgen.results.rho import RhoSummary

__all__ = ["adjustment_context", "groups_context", "page_one_notes", "summary_row_note"]


def _interval(summary: RhoSummary) -> str:
    return f"{interpret.format_rho(summary.lower)} to {interpret.format_rho(summary.upper)}"


def _summary_cells(summary: RhoSummary) -> dict[str, str]:
    return {"median": interpret.format_rho(summary.median), "interval": _interval(summary),
            "p_positive": interpret.format_probability(summary.p_positive)}


def groups_context(result: PairResult, noun: str, mass: float) -> dict[str, Any] | None:
    """The pair's section on its groups, or None when the pair is not grouped."""
    groups = result.groups
    if groups is None:
        return None
    notes: list[str] = []
    pooled = groups.model == "partial"
    rows = [{"label": fit.label, "n": f"{fit.n:,}", "r": interpret.format_rho(fit.sample_r),
             "alone": _summary_cells(fit.alone), "pooled": _summary_cells(fit.pooled) if fit.pooled else None}
            for fit in groups.groups]
    return {
        "noun": noun,
        "noun_title": noun[:1].upper() + noun[1:],  # only the first letter: a label's own capitals stay
        "pooled": pooled,
        "simpson": groups.simpson,
        "simpson_sentence": groups.simpson_sentence,
        "summary_sentence": groups.summary_sentence,
        "spread_sentence": groups.spread_sentence,
        "left_out_sentence": groups.left_out_sentence,
        "within": {**_summary_cells(groups.within), "n": f"{groups.within_n:,}"},
        "mean": _summary_cells(groups.mean) if groups.mean is not None else None,
        "rows": rows,
        "comparisons": [c.sentence for c in groups.comparisons],
        "comparison_method": ("Each comparison uses the two groups' own posteriors (each group alone), which are "
                              "independent because the groups share no rows; the difference is found by numerical "
                              "convolution of the two, not by pairing draws." if groups.comparisons else ""),
        "comparisons_note": groups.comparisons_note,
        "figure": _forest_figure(result, groups, notes, mass, noun),
        "figure_notes": notes,
        "method": _method_sentence(groups),
    }


def _method_sentence(groups: GroupAnalysis) -> str:
    text = ("Each group alone: the exact posterior of its correlation from its own rows (Jeffreys' priors on the "
            "group's means and SDs, the pair's prior on \u03c1), by quadrature; no sampler runs for groups.")
    pooling = groups.pooling
    if pooling is not None:
        text += (" Partially pooled: the groups' correlations on Fisher's z scale are drawn from one normal "
                 f"distribution whose mean (prior normal, SD {pooling.mu_prior_sd:g}) and spread (prior half-normal, "
                 f"scale {pooling.tau_prior_scale:g}) are estimated with them, by quadrature on a grid; a small "
                 "group's estimate is drawn towards the others as far as the data say the groups are alike.")
    return text


def _sampler_sentence(adjustment: Adjustment) -> str:
    """The partial fit's sampler checks in one sentence, or why there were none."""
    d = adjustment.diagnosis
    if adjustment.engine != "mcmc":
        return "; ".join(d.reasons) + "." if d.reasons else "No sampler was run: computed by quadrature."
    verdict = "passed" if d.status == "pass" else "; ".join(d.reasons) or d.status
    return (f"Sampler checks: {verdict} (R-hat up to {d.rhat_max:.3f}, bulk ESS at least {d.ess_bulk_min:,.0f}; "
            f"seed {adjustment.seed}).")


def _forest_figure(result: PairResult, groups: GroupAnalysis, notes: list[str], mass: float, noun: str) -> str:
    rows = [figures.GroupRow(
        label=fit.label, n=fit.n, median=fit.alone.median, lower=fit.alone.lower, upper=fit.alone.upper,
        pooled_median=fit.pooled.median if fit.pooled else float("nan"),
        pooled_lower=fit.pooled.lower if fit.pooled else float("nan"),
        pooled_upper=fit.pooled.upper if fit.pooled else float("nan")) for fit in groups.groups]
    rho = result.rho
    mean = groups.mean

    def draw() -> str:
        return figures.group_forest(
            rows, overall=(rho.median, rho.lower, rho.upper), overall_label="All rows together",
            mean=(mean.median, mean.lower, mean.upper) if mean is not None else None,
            mean_label="Mean of the groups (partially pooled)", mass=mass,
            group_noun=noun.lower())

    return drawn_figure(draw, "The forest plot of the groups", notes, width=figures.FULL_WIDTH,
                        height=min(1.2 + 0.32 * len(rows), 9.0))


def _reference_sentence(adjustment: Adjustment) -> str:
    reference = adjustment.reference
    p_value = interpret.format_p_value(reference.p_value)
    rows = adjustment.n - len(adjustment.controls)
    return (f"Frequentist reference: sample partial r = {interpret.format_rho(adjustment.partial_r)}; Fisher-z "
            f"interval {interpret.format_rho(reference.ci_lower)} to {interpret.format_rho(reference.ci_upper)} "
            f"(on {rows:,} rows, one less per control); two-sided p-value for \u03c1 = 0: {p_value}.")


def adjustment_context(result: PairResult) -> dict[str, Any] | None:
    """The pair's section on its partial correlation, or None when it has no controls."""
    adjustment = result.adjustment
    if adjustment is None:
        return None
    names = ", ".join(adjustment.control_labels)
    return {
        "controls": names,
        "n": f"{adjustment.n:,}",
        "n_dropped": adjustment.n_dropped,
        "rows": [
            {"what": "Simple correlation", "r": interpret.format_rho(adjustment.simple_r),
             **_summary_cells(adjustment.simple)},
            {"what": f"Partial correlation, given {names}", "r": interpret.format_rho(adjustment.partial_r),
             **_summary_cells(adjustment.partial)},
        ],
        "sentence": adjustment.sentence,
        "method": adjustment.method_sentence,
        "reference": _reference_sentence(adjustment),
        "status": adjustment.status,
        "diagnostics": _sampler_sentence(adjustment),
    }


def page_one_notes(results: tuple[PairResult, ...], anchor: Any) -> dict[str, list[dict[str, str]]]:
    """Simpson's warnings and the adjusted correlations, for page one."""
    simpson = [{"key": r.key, "anchor": anchor(r.key), "title": r.title, "sentence": r.groups.simpson_sentence}
               for r in results if r.groups is not None and r.groups.simpson]
    adjusted = [{"key": r.key, "anchor": anchor(r.key), "title": r.title, "sentence": r.adjustment.sentence}
                for r in results if r.adjustment is not None]
    return {"simpson": simpson, "adjusted": adjusted}


def summary_row_note(result: PairResult, noun: str) -> str:
    """The summary table's line under a grouped or adjusted pair: what else its page shows."""
    parts = []
    if result.groups is not None:
        groups = result.groups
        what = "Simpson's warning: the groups pull the other way" if groups.simpson else (
            f"within-group median {interpret.format_rho(groups.within.median)}")
        parts.append(f"by {noun.lower()}, {len(groups.groups)} groups; {what}")
    if result.adjustment is not None:
        adjustment = result.adjustment
        parts.append(f"given {', '.join(adjustment.control_labels)}: median "
                     f"{interpret.format_rho(adjustment.partial.median)} "
                     f"({_interval(adjustment.partial)})")
    return "; ".join(parts)
