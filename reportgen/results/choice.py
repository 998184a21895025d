"""Which model's numbers lead a pair, and what the other fits say beside them.

Under ``model = "auto"`` the normal fit leads unless the checks flag it; then
the robust fit leads (the Student-t model with the sampler, the rank model
with the exact engine). Either way the other fit is shown beside it, and the
reader is told in one sentence why this one leads and whether the two agree.
"""

from __future__ import annotations

import numpy as np

from reportgen import interpret
from reportgen.checks.summary import ModelChecks
from reportgen.results.pair import FitSummary, ModelChoice, PairResult

MODEL_SHORT_NAMES = {"normal": "normal", "student_t": "robust t", "rank": "rank"}
MODEL_NAMES = {
    "normal": "normal",
    "student_t": "robust (Student-t)",
    "rank": "rank (Kendall's \u03c4)",
}


def fit_summary(result: PairResult) -> FitSummary:
    """One fit's rho for a pair, as shown beside the leading fit."""
    nu = result.parameters.get("nu")
    return FitSummary(model=result.model, name=MODEL_NAMES[result.model], median=result.rho.median,
                      lower=result.rho.lower, upper=result.rho.upper, status=result.status, engine=result.engine,
                      verdicts=tuple((rule.name, rule.verdict) for rule in result.rules),
                      nu_median=nu.median if nu is not None else float("nan"))


def _interval(fit: FitSummary) -> str:
    return (f"median {interpret.format_rho(fit.median)}, interval {interpret.format_rho(fit.lower)} to "
            f"{interpret.format_rho(fit.upper)}")


def _verdict_change(leading: PairResult, other: FitSummary) -> str:
    changed = [name for (name, verdict), rule in zip(other.verdicts, leading.rules, strict=True)
               if verdict != rule.verdict]
    if not changed:
        return ""
    names = ", ".join(f"\u201c{n}\u201d" for n in changed)
    return f" The verdict on {names} differs between the two fits."


def choose(
    requested: str, normal: PairResult, robust: PairResult | None, rank: PairResult | None,
    checks: ModelChecks, *, agreement: float, robust_failed: bool = False,
) -> tuple[PairResult, ModelChoice]:
    """The leading result and the choice that explains it.

    ``agreement``: the largest gap between the robust and the normal medians still called agreement
    (the spec's influence threshold, so "agrees" means what "influential" means).
    """
    alternative = robust if robust is not None else rank
    agrees = alternative is None or abs(alternative.rho.median - normal.rho.median) <= agreement
    reasons = interpret.joined([CHECK_PHRASES[code] for code in checks.flagging_codes])
    if requested == "auto" and alternative is not None and checks.flags_normal:
        leading, other = alternative, normal
        sentence = (f"The {MODEL_NAMES[alternative.model]} fit leads because {reasons}; the normal model gives "
                    f"{_interval(fit_summary(normal))}.")
    elif requested == "auto" and alternative is not None:
        leading, other = normal, alternative
        word = "agrees" if agrees else "differs"
        found = ("no row that alone moves \u03c1 beyond its uncertainty, no outlying row" if checks.influence.applies
                 else "no outlying row (leave-one-out influence needs more rows)")
        sentence = (f"The normal fit leads: the checks found {found} and no clear departure from its shape. "
                    f"The {MODEL_NAMES[alternative.model]} fit {word} ({_interval(fit_summary(alternative))}).")
    elif requested in ("student_t", "auto") and alternative is None and robust_failed:
        leading, other = normal, None
        sentence = ("The robust (Student-t) fit failed, so the normal fit is shown; the rank model "
                    "(model = \"rank\") needs no sampler and is the other robust choice.")
    elif requested in ("student_t", "rank") and alternative is not None:
        leading, other = alternative, normal
        basis = "the exact engine" if normal.engine == "exact" else "the sampler"
        sentence = (f"The spec asks for the {MODEL_NAMES[alternative.model]} model; the normal model "
                    f"(by {basis}) gives {_interval(fit_summary(normal))}.")
    else:
        leading, other = normal, None
        sentence = ""
        if checks.flags_normal:
            sentence = (f"The checks flag the normal model ({reasons}): consider model = \"auto\" or "
                        "\"student_t\", which would show a robust fit beside this one.")
    others = (fit_summary(other),) if other is not None else ()
    if other is not None:
        sentence += _verdict_change(leading, others[0])
    if leading.model == "student_t" and "nu" in leading.parameters:
        nu = leading.parameters["nu"]
        sentence += " " + interpret.tails_sentence(nu.median, nu.lower, nu.upper)
    elif robust is not None and "nu" in robust.parameters and leading is normal:
        nu = robust.parameters["nu"]
        sentence += " " + interpret.tails_sentence(nu.median, nu.lower, nu.upper)
    choice = ModelChoice(
        leading=leading.model, requested=requested, sentence=sentence.strip(), others=others,
        robust=fit_summary(alternative) if alternative is not None else None, agrees=agrees)
    return leading, choice


CHECK_PHRASES = {
    "influential_rows": "a single row moves the normal model's \u03c1 by more than the threshold and its own "
                        "uncertainty",
    "outliers": "some rows lie further out than a bivariate normal distribution allows",
    "not_normal": "Mardia's tests reject a bivariate normal shape",
    "ppc_skew": "the normal model does not reproduce the skewed margins",
    "heavy_tails": "the robust fit finds clearly heavier tails than normal",
}


def nu_is_heavy(robust: PairResult | None) -> bool:
    """The robust fit's nu is clearly small: its upper interval end below 10."""
    if robust is None or "nu" not in robust.parameters:
        return False
    return bool(np.isfinite(robust.parameters["nu"].upper) and robust.parameters["nu"].upper < 10)
