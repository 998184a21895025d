"""The model checks, the other fits and the prior sensitivity of each pair, formatted for the templates."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

from reportgen import figures, interpret
from reportgen.checks.summary import rows_text
from reportgen.report.render import svg_data_uri
from reportgen.results import PairResult, RunResults
from reportgen.results.choice import MODEL_NAMES, MODEL_SHORT_NAMES

WARNING_TITLES = {
    "influential_rows": "influential rows",
    "outliers": "outlying rows",
    "not_normal": "not bivariate normal",
    "discrete_x": "coarse values in x",
    "discrete_y": "coarse values in y",
    "ppc_r": "correlation poorly reproduced",
    "ppc_skew": "skewness poorly reproduced",
    "heavy_tails": "heavy tails",
    "prior_sensitive": "verdict depends on the prior",
    "robust_differs": "robust and normal fits disagree",
}
MAX_LABELLED_ROWS = 12


def _p(value: float, resolution: float = 1e-4) -> str:
    if not np.isfinite(value):
        return "\u2014"
    if value < resolution:
        return f"< {resolution:.2g}"
    return "< 0.0001" if value < 1e-4 else f"{value:.4f}" if value < 0.01 else f"{value:.3f}"


def highlighted_rows(result: PairResult) -> tuple[np.ndarray, list[str]]:
    """Positions (into the pair's rows) of the influential and outlying rows, and their labels."""
    checks = result.checks
    if checks is None:
        return np.zeros(0, dtype=int), []
    positions: dict[int, int] = {}
    for position, row in zip(checks.influence.flagged_positions, checks.influence.flagged_rows, strict=True):
        positions.setdefault(int(position), int(row))
    for position, row in zip(checks.shape.outlier_positions, checks.shape.outlier_rows, strict=True):
        positions.setdefault(int(position), int(row))
    order = list(positions)
    return np.array(order, dtype=int), [f"row {positions[p]}" for p in order]


def distance_figure(result: PairResult) -> str:
    checks = result.checks
    if checks is None:
        return ""
    shape = checks.shape
    flagged = np.asarray(shape.outlier_positions, dtype=int)
    labels = [f"row {row}" for row in shape.outlier_rows]
    return svg_data_uri(figures.mahalanobis_qq(shape.mahalanobis_sq, shape.expected_sq, shape.outlier_cutoff,
                                               flagged, labels))


def check_rows(result: PairResult) -> list[dict[str, str]]:
    """The compact table of what each check measured, and whether it flagged the pair."""
    checks = result.checks
    if checks is None:
        return []
    codes = set(checks.codes)
    influence, shape, predictive = checks.influence, checks.shape, checks.predictive
    rows = []
    if influence.applies:
        top = (f"largest change {interpret.format_number(influence.max_shift, 2)}"
               + (f"; flagged: {rows_text(influence.flagged_rows)}" if influence.flagged_rows else ""))
    else:
        top = "not computed: too few rows to leave one out"
    rows.append({"check": "Leave one row out (change in the median of \u03c1)", "finding": top,
                 "flag": "influential_rows" in codes})
    rows.append({"check": "Distance from the centre (Mahalanobis)",
                 "finding": (f"{len(shape.outlier_rows)} beyond the limit: {rows_text(shape.outlier_rows)}"
                             if shape.outlier_rows else "no row beyond the limit"),
                 "flag": "outliers" in codes})
    rows.append({"check": "Bivariate normal shape (Mardia 1970)",
                 "finding": f"skewness p {_p(shape.skewness_p)}; kurtosis p {_p(shape.kurtosis_p)}",
                 "flag": "not_normal" in codes})
    rows.append({"check": "Distinct values (x; y)",
                 "finding": f"{checks.discrete_x.distinct:,}; {checks.discrete_y.distinct:,}",
                 "flag": "discrete_x" in codes or "discrete_y" in codes})
    rows.append({"check": "Replicated data from the normal fit: r; skewness of x; of y",
                 "finding": "p " + "; ".join(_p(value, 2.0 / predictive.replicates) for value in
                                             (predictive.p_r, predictive.p_skew_x, predictive.p_skew_y)),
                 "flag": "ppc_r" in codes or "ppc_skew" in codes})
    return rows


def sensitivity_rows(result: PairResult) -> list[dict[str, Any]]:
    sensitivity = result.sensitivity
    if sensitivity is None:
        return []
    base = dict(sensitivity.outcomes[0].verdicts) if sensitivity.outcomes else {}
    rows = []
    for outcome in sensitivity.outcomes:
        if not outcome.applies:
            rows.append({"prior": outcome.variant.label, "applies": False, "note": outcome.note,
                         "median": "", "interval": "", "rules": []})
            continue
        rules = []
        for (name, probability), (_, met) in zip(outcome.probabilities, outcome.verdicts, strict=True):
            rules.append({"probability": interpret.format_probability(probability),
                          "verdict": "met" if met else "not met", "changed": met != base.get(name, met)})
        rows.append({
            "prior": outcome.variant.label, "applies": True, "note": outcome.note,
            "median": interpret.format_rho(outcome.median),
            "interval": f"{interpret.format_rho(outcome.lower)} to {interpret.format_rho(outcome.upper)}",
            "rules": rules,
        })
    return rows


def checks_context(result: PairResult, *, with_figure: bool = True) -> dict[str, Any]:
    """Everything of one pair's model checks that its page shows; without ``with_figure`` (the compact layout,
    which does not show it) the distance figure is not drawn."""
    checks, choice, sensitivity = result.checks, result.choice, result.sensitivity
    others = []
    if choice is not None:
        for other in choice.others:
            others.append({
                "name": other.name,
                "median": interpret.format_rho(other.median),
                "interval": f"{interpret.format_rho(other.lower)} to {interpret.format_rho(other.upper)}",
                "status": other.status,
                "engine": "exact engine" if other.engine == "exact" else "sampler",
            })
    changed = sensitivity.changed_rules if sensitivity is not None else ()
    return {
        "model_name": MODEL_NAMES[result.model],
        "has_flagged_rows": bool(highlighted_rows(result)[0].size),
        "model_short": MODEL_SHORT_NAMES[result.model],
        "choice_sentence": choice.sentence if choice is not None else "",
        "others": others,
        "warnings": [{"title": WARNING_TITLES.get(w.code, w.code), "sentence": w.sentence}
                     for w in (checks.warnings if checks is not None else ())],
        "rows": check_rows(result),
        "distance_figure": distance_figure(result) if with_figure else "",
        "sensitivity_rows": sensitivity_rows(result),
        "sensitivity_sentence": (
            "The spec sets no decision rules, so the table shows how the median and interval of \u03c1 move."
            if not result.rules else
            "Under every alternative prior tried, each rule keeps its verdict." if not changed else
            "The verdict on " + interpret.joined([f"\u201c{name}\u201d" for name in changed])
            + " changes under at least one alternative prior (marked): it rests on the choice of prior as well "
            "as on the data."),
    }


def run_checks_context(results: RunResults, anchor_of: Callable[[str], str]) -> list[dict[str, str]]:
    """Page one's list: every pair with a model warning, and what it is."""
    listed = []
    for pair in results.pairs:
        if pair.checks is None or not pair.checks.warnings:
            continue
        titles = [WARNING_TITLES.get(code, code) for code in pair.checks.codes]
        lead = ""
        if pair.choice is not None and pair.choice.leading != "normal" and pair.choice.requested == "auto":
            lead = f"; the {MODEL_NAMES[pair.choice.leading]} fit leads"
        listed.append({"key": pair.key, "title": pair.title, "anchor": anchor_of(pair.key),
                       "warnings": interpret.joined(titles) + lead})
    return listed
