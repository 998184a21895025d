"""Plain-language readings of the numbers. Every sentence in a report is built
here, in tested functions; the templates only lay them out.
"""

from __future__ import annotations

import math

from reportgen.spec import Rope, Rule

# Cohen (1988), Statistical Power Analysis for the Behavioral Sciences, 2nd ed.,
# sec. 3.2: r = 0.1 small, 0.3 medium, 0.5 large. Benchmarks, not laws of nature.
STRENGTH_BANDS = ((0.1, "negligible"), (0.3, "weak"), (0.5, "moderate"), (1.01, "strong"))


def strength_word(rho: float) -> str:
    size = abs(rho)
    for bound, word in STRENGTH_BANDS:
        if size < bound:
            return word
    return "strong"


def direction_word(rho: float) -> str:
    return "positive" if rho > 0 else "negative" if rho < 0 else "no"


def format_probability(p: float) -> str:
    """Probabilities from draws are never shown as exactly 0 or 1."""
    if p >= 0.9995:
        return "> 0.999"
    if p <= 0.0005:
        return "< 0.001"
    return f"{p:.3f}"


def format_number(value: float, digits: int = 3) -> str:
    """Significant-figure formatting that keeps small and large values readable."""
    if value != value:  # NaN
        return "n/a"
    if value == 0:
        return "0"
    magnitude = abs(value)
    if 1e-3 <= magnitude < 1e6:
        decimals = max(0, digits - 1 - int(_floor_log10(magnitude)))
        return f"{value:,.{decimals}f}".replace("-", "\u2212")
    return f"{value:.{digits - 1}e}".replace("-", "\u2212")


def _floor_log10(value: float) -> int:
    return math.floor(math.log10(value))


def format_threshold(value: float) -> str:
    """A threshold the client chose, shown as written (0.125 stays 0.125), with a true minus sign."""
    text = f"{abs(value):.6g}"
    text = text if "." in text or "e" in text else text + ".0"
    return f"\u2212{text}" if value < 0 else text


def format_required(value: float) -> str:
    """A required probability as chosen (0.999 stays 0.999)."""
    return f"{value:.6g}"


def format_rho(value: float) -> str:
    """Two decimals with a true minus sign, as correlations are printed in the report."""
    text = f"{abs(value):.2f}"
    return f"\u2212{text}" if value < 0 and text != "0.00" else text


def rule_statement(rule: Rule) -> str:
    """The rule as a short statement about rho, e.g. "ρ > 0.50"."""
    if rule.statement == "above":
        return f"\u03c1 > {format_threshold(rule.threshold or 0.0)}"
    if rule.statement == "below":
        return f"\u03c1 < {format_threshold(rule.threshold or 0.0)}"
    return f"{format_threshold(rule.lower or 0.0)} < \u03c1 < {format_threshold(rule.upper or 0.0)}"


def rule_verdict(probability: float, required: float) -> str:
    return "met" if probability >= required else "not met"


def rule_sentence(rule: Rule, probability: float) -> str:
    verdict = rule_verdict(probability, rule.required_probability)
    name = rule.description or rule.name.replace("_", " ")
    shown = format_probability(probability)
    base = (f"The posterior probability that {rule_statement(rule)} is {shown}; "
            f"the rule \u201c{name}\u201d asks for at least {format_required(rule.required_probability)}, ")
    if verdict == "met":
        return base + "so it is met."
    if probability <= 1.0 - rule.required_probability:
        return base + "so it is not met, and the data point the other way."
    return base + "so it is not met: the data do not settle it either way."


def rope_sentence(rope: Rope, probability: float, decision: str, mass: float,
                  hdi: tuple[float, float] = (float("nan"), float("nan"))) -> str:
    """Kruschke's (2018) HDI + ROPE reading; the HDI is named with its limits, since it can differ
    from the equal-tailed interval shown elsewhere."""
    band = f"{format_threshold(rope.lower)} to {format_threshold(rope.upper)}"
    start = (f"The probability that \u03c1 lies in the band treated as practically zero ({band}) "
             f"is {format_probability(probability)}. ")
    hdi_text = f"The {mass:.0%} highest-density interval ({format_rho(hdi[0])} to {format_rho(hdi[1])})"
    if decision == "practically_zero":
        return start + f"{hdi_text} lies inside the band: the correlation is practically zero."
    if decision == "not_zero":
        return start + f"{hdi_text} lies outside the band: the correlation is not practically zero."
    return start + f"{hdi_text} overlaps the band's edge, so the data do not decide the question."


def pair_paragraph(
    *,
    x_label: str,
    y_label: str,
    n: int,
    n_dropped: int,
    median: float,
    lower: float,
    upper: float,
    mass: float,
    interval_name: str,
    p_positive: float,
    r2_median: float,
) -> str:
    """The opening reading of one pair's result, in plain words."""
    dropped = (f" ({n_dropped} row{'s' if n_dropped != 1 else ''} with a missing value "
               "left out)" if n_dropped else "")
    strength = strength_word(median)
    direction = direction_word(median)
    parts = [
        f"Across {n:,} complete pairs of {x_label} and {y_label}{dropped}, the posterior median "
        f"correlation is {format_rho(median)}, with a {mass:.0%} {interval_name} from "
        f"{format_rho(lower)} to {format_rho(upper)}.",
    ]
    if lower > 0 or upper < 0:
        parts.append(f"The interval lies wholly on the {'positive' if lower > 0 else 'negative'} side of zero: "
                     f"a {strength} {direction} association by common benchmarks.")
    else:
        parts.append(f"The interval includes zero: the data are consistent with no linear association, "
                     f"and equally with values from {describe(lower)} to {describe(upper)}.")
    parts.append(f"The probability that the correlation is positive is {format_probability(p_positive)}.")
    share = r2_median * 100
    parts.append(f"A straight line in {x_label} would account for about {share:.0f}% of the variation "
                 f"in {y_label} (posterior median of \u03c1\u00b2).")
    return " ".join(parts)


def describe(rho: float) -> str:
    """A value of rho in words, e.g. "a moderate negative correlation (−0.42)"."""
    if abs(rho) < 0.1:
        return f"a negligible correlation ({format_rho(rho)})"
    return f"a {strength_word(rho)} {direction_word(rho)} correlation ({format_rho(rho)})"


def diagnostics_sentence(status: str, reasons: tuple[str, ...]) -> str:
    if status == "pass":
        return "The sampler converged: every convergence check passed its threshold."
    joined = "; ".join(reasons)
    if status == "warn":
        return f"The sampler converged, with a caution: {joined}."
    return (f"The sampler did not meet the convergence thresholds ({joined}); "
            "treat this pair's numbers as unreliable until it is re-run with more draws.")


def prior_text_rho(a: float, b: float) -> str:
    if a == 1.0 and b == 1.0:
        return "\u03c1 ~ Uniform(\u22121, 1)"
    return f"(\u03c1 + 1)/2 ~ Beta({a:g}, {b:g})"


def prior_text_means(units: str, location: float, scale: float, family: str = "normal") -> str:
    if family == "flat":
        return "p(\u03bc\u2c7c) \u221d 1 (flat, improper)"
    if units == "scaled":
        return f"\u03bc\u2c7c ~ Normal(sample mean, {scale:g} \u00d7 sample SD)"
    return f"\u03bc\u2c7c ~ Normal({location:g}, {scale:g}) in the data's units"


def prior_text_sds(family: str, units: str, scale: float, nu: float) -> str:
    scale_text = f"{scale:g} \u00d7 sample SD" if units == "scaled" else f"{scale:g}, data units"
    if family == "jeffreys":
        return "p(\u03c3\u2c7c) \u221d 1/\u03c3\u2c7c (Jeffreys, improper)"
    if family == "half_student_t":
        return f"\u03c3\u2c7c ~ Half-Student-t(\u03bd = {nu:g}, scale {scale_text})"
    return f"\u03c3\u2c7c ~ Half-normal(scale {scale_text})"


# Jeffreys (1961), Theory of Probability, 3rd ed., Appendix B: grades of evidence at
# Bayes factors of about 3, 10, 30 and 100 (the words are ours).
EVIDENCE_GRADES = ((3.0, "weak"), (10.0, "moderate"), (30.0, "strong"), (100.0, "very strong"))


SUPERSCRIPT = str.maketrans("0123456789-.", "\u2070\u00b9\u00b2\u00b3\u2074\u2075\u2076\u2077\u2078\u2079\u207b\u00b7")


def format_bayes_factor(log_bf10: float) -> str:
    """Plain below 1000 (and above 1/1000), else a power of ten with superscript digits; a dash when unknown."""
    if not math.isfinite(log_bf10):
        return "\u2014"
    log10 = log_bf10 / math.log(10.0)
    if abs(log10) < 3:
        return f"{math.exp(log_bf10):.3g}"
    return "10" + f"{round(log10):d}".translate(SUPERSCRIPT)


def signed(value: float, digits: int = 4) -> str:
    """A signed number with a true minus sign."""
    return f"{value:+.{digits}f}".replace("-", "\u2212")


def evidence_sentence(log_bf10: float, model: str = "normal") -> str:
    """Plain reading of BF10 (a correlation under the spec's prior against rho = 0)."""
    if not math.isfinite(log_bf10):
        return ("No exact Bayes factor is available for the robust (Student-t) model: the exact one belongs to "
                "the normal model.")
    size = abs(log_bf10)
    favoured = "a correlation" if log_bf10 > 0 else "no correlation (\u03c1 = 0)"
    other = "no correlation" if log_bf10 > 0 else "a correlation"
    grade = "extreme"
    for bound, word in EVIDENCE_GRADES:
        if size < math.log(bound):
            grade = word
            break
    factor = format_bayes_factor(size)
    basis = ("from the normal approximation to Kendall's statistic (van Doorn et al. 2018)" if model == "rank"
             else "with Jeffreys' priors for the means and SDs")
    return (f"The Bayes factor BF\u2081\u2080 is {format_bayes_factor(log_bf10)}: the data are {factor} times as "
            f"likely under {favoured} as under {other}, {grade} evidence on Jeffreys' grades ({basis}).")


def crosscheck_sentence(*, applies: bool, reference_priors: bool, mean_gap: float, mean_allowed: float,
                        rule_name: str | None, rule_gap: float, rule_allowed: float, within: bool) -> str:
    if not applies:
        return ("The exact reference is not compared here: this pair's priors on the means or SDs are "
                "informative, so the two answers are not expected to agree.")
    basis = ("The spec uses the reference priors, so the two should agree within Monte Carlo error"
             if reference_priors else
             "The spec's vague priors differ slightly from the reference priors, so the allowance adds the "
             "effect of shifting the posterior by a quarter of its SD to the Monte Carlo error")
    parts = [f"The sampler's posterior mean of \u03c1 differs from the exact reference by {signed(mean_gap)} "
             f"(allowed {mean_allowed:.4f})"]
    if rule_name is not None:
        parts.append(f"the largest gap in a rule probability is {signed(rule_gap)} for \u201c{rule_name}\u201d "
                     f"(allowed {rule_allowed:.4f})")
    verdict = "Both are within the allowance." if within else (
        "This is beyond the allowance: the sampler's answer for this pair should be checked.")
    return "; ".join(parts) + f". {basis}. {verdict}"


def exact_engine_sentence() -> str:
    return ("These numbers come from the exact engine: the marginal posterior of \u03c1 under Jeffreys' "
            "priors for the means and SDs, computed by quadrature with no sampling, so they carry no Monte "
            "Carlo error. Only \u03c1 has a posterior here; the ellipses use the sample means and SDs.")


def rank_model_sentence() -> str:
    return ("These numbers come from the rank model: the posterior of Kendall's τ (van Doorn, Ly, Marsman & "
            "Wagenmakers 2018), computed by quadrature with no sampling, and shown on Pearson's scale as "
            "ρ = sin(πτ/2). Ranks ignore how far apart the values are, so single extreme rows "
            "and monotone curves matter little; the ellipses use the sample means and SDs.")


def no_reference_sentence() -> str:
    return ("Here \u03c1 is the correlation of the bivariate t distribution's scale matrix, which is Pearson's "
            "correlation whenever \u03bd > 2. The robust model has no exact reference to compare with: the exact "
            "posterior is the normal model's, so these numbers rest on the sampler's convergence checks alone.")


def tails_sentence(nu_median: float, nu_lower: float, nu_upper: float) -> str:
    """What the posterior of the Student-t degrees of freedom says about the tails, in words."""
    span = f"(median {nu_median:.1f}; interval {nu_lower:.1f} to {nu_upper:.1f})"
    if nu_upper < 10:
        return (f"The degrees of freedom are small {span}: the data have clearly heavier tails than a normal "
                "distribution, so rows far from the rest are common and the normal model would overweight them.")
    if nu_lower >= 10:
        return (f"The degrees of freedom are large {span}: the tails look close to those of a normal distribution, "
                "so the robust and the normal model should agree.")
    if nu_median < 20:
        return (f"The degrees of freedom are moderate {span}: the tails look somewhat heavier than normal, "
                "though the data cannot rule out near-normal tails.")
    return (f"The data cannot tell heavier tails from normal ones {span}: the interval still spans both, so "
            "this part of the estimate leans on the prior.")


def joined(parts: list[str]) -> str:
    """"a", "a and b", "a, b and c"."""
    if len(parts) <= 1:
        return "".join(parts)
    return ", ".join(parts[:-1]) + " and " + parts[-1]
