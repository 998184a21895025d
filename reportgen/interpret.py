"""Plain-language readings of the numbers. Every sentence in a report is built
here, in tested functions; the templates only lay them out.
"""

from __future__ import annotations

import math

from reportgen.spec import Rope, Rule

# Cohen (1988), Statistical Power Analysis for the Behavioral Sciences, 2nd ed.,
# sec. 3.2: r = 0.1 small, 0.3 medium, 0.5 large. Benchmarks, not laws of nature.
# Cohen's own words are used, so that they never share a word with the evidence grades of a Bayes factor.
STRENGTH_BANDS = ((0.1, "negligible"), (0.3, "small"), (0.5, "medium"), (1.01, "large"))


def printed_size(rho: float) -> float:
    """|rho| rounded to the two decimals the report prints, so a word never contradicts its number
    (-0.4979 is printed as -0.50 and must be read at 0.50)."""
    return abs(float(f"{rho:.2f}"))


def strength_word(rho: float) -> str:
    """Cohen's (1988) word for the band of the printed value: small, medium or large, and negligible
    below his small benchmark."""
    size = printed_size(rho)
    for bound, word in STRENGTH_BANDS:
        if size < bound:
            return word
    return "large"


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


def format_p_value(p: float) -> str:
    """A frequentist p-value with four decimals, and very small ones as a bound."""
    return "< 0.0001" if p < 1e-4 else f"{p:.4f}"


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
    """The rule's verdict, worded after both sides: the probability that the statement holds and the
    probability that it does not. Bands (ours): met at the required probability; below 0.25 the data point
    the other way (firmly when the opposite reaches the required probability); 0.25 to 0.75 they do not
    settle it; from 0.75 up to the requirement they lean towards it."""
    required = rule.required_probability
    name = rule.description or rule.name.replace("_", " ")
    base = (f"The posterior probability that {rule_statement(rule)} is {format_probability(probability)}; "
            f"the rule \u201c{name}\u201d asks for at least {format_required(required)}, ")
    if rule_verdict(probability, required) == "met":
        return base + "so it is met."
    against = f"the probability that it does not hold is {format_probability(1.0 - probability)}"
    if 1.0 - probability >= required:
        return base + f"so it is not met, and the data point firmly the other way: {against}."
    if probability < 0.25:
        return base + f"so it is not met, and the data point the other way: {against}."
    if probability < 0.75:
        return base + f"so it is not met: the data do not settle it ({against})."
    return (base + "so it is not met: the data lean towards it but fall short of the required "
            f"{format_required(required)}.")


def rope_sentence(rope: Rope, probability: float, decision: str, mass: float,
                  hdi: tuple[float, float] = (float("nan"), float("nan"))) -> str:
    """Kruschke's (2018) HDI + ROPE reading; the HDI is named with its limits, since it can differ
    from the equal-tailed interval shown elsewhere."""
    band = f"{format_threshold(rope.lower)} to {format_threshold(rope.upper)}"
    start = (f"The probability that \u03c1 lies in the region of practical equivalence (ROPE, {band}), the values "
             "treated as practically zero, "
             f"is {format_probability(probability)}. ")
    hdi_text = f"The {mass:.0%} highest-density interval ({format_rho(hdi[0])} to {format_rho(hdi[1])})"
    if decision == "practically_zero":
        return start + f"{hdi_text} lies inside the ROPE: the correlation is practically zero."
    if decision == "not_zero":
        return start + f"{hdi_text} lies outside the ROPE: the correlation is not practically zero."
    return start + f"{hdi_text} overlaps the edge of the ROPE, so the data do not decide the question."


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
    r2_lower: float = float("nan"),
    r2_upper: float = float("nan"),
) -> str:
    """The opening reading of one pair's result, in plain words.

    ``r2_lower`` and ``r2_upper`` bound the interval of rho squared (the same kind and mass as rho's);
    NaN (the default) leaves that interval out.
    """
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
        parts.append(f"The interval lies wholly on the {'positive' if lower > 0 else 'negative'} side of zero. "
                     f"Its median is a {strength} {direction} association on Cohen's (1988) benchmarks for the "
                     "behavioural sciences (0.1, 0.3 and 0.5 mark small, medium and large"
                     + ("; negligible is our word for below Cohen's small" if strength == "negligible" else "")
                     + "), a reading of the median alone; how large is large enough depends on the application.")
    else:
        # A posterior is not flat over its interval: say that the values inside are not equally supported.
        parts.append(f"The interval includes zero: the data leave room for no linear association, and also for "
                     f"anything from {describe(lower)} to {describe(upper)}, though the posterior does not weigh "
                     f"them equally: it is densest around its median ({format_rho(median)}) and thins out "
                     "towards the interval's ends.")
    parts.append(f"The probability that the correlation is positive is {format_probability(p_positive)}.")
    share = _percent(r2_median)
    share = share if share.startswith("under") else "about " + share
    spread = (f"; {mass:.0%} {interval_name} from {_percent(r2_lower)} to {_percent(r2_upper)}"
              if math.isfinite(r2_lower) and math.isfinite(r2_upper) else "")
    parts.append(f"A straight line in {x_label} would account for {share} of the variance in {y_label} "
                 f"(posterior median of \u03c1\u00b2{spread}).")
    return " ".join(parts)


def _percent(share: float) -> str:
    """A share of variance as a whole percentage; below 1% it says so rather than print 0%."""
    percent = 100.0 * share
    return "under 1%" if percent < 1.0 else f"{percent:.0f}%"


def describe(rho: float) -> str:
    """A value of rho in words, e.g. "a medium negative correlation (−0.42)"."""
    if printed_size(rho) < 0.1:
        return f"a negligible correlation ({format_rho(rho)})"
    return f"a {strength_word(rho)} {direction_word(rho)} correlation ({format_rho(rho)})"


def diagnostics_sentence(status: str, reasons: tuple[str, ...], *,
                         attempts: tuple[tuple[float, int], ...] = (), broken: tuple[str, ...] = ()) -> str:
    """The convergence checks in words, with the remedy that fits what failed.

    ``attempts`` are the sampling runs as (target acceptance, divergent transitions), first to last (the
    draws are the last one's); more than one says the sampler was re-run after divergences. ``broken``
    holds the codes of the broken checks (``Diagnosis.broken``); without them a failure gets the general
    advice of more draws.
    """
    def transitions(count: int) -> str:
        return "none" if count == 0 else f"{count} divergent transition{'s' if count != 1 else ''}"

    retry = ""
    if len(attempts) > 1:
        (first, first_count), later = attempts[0], attempts[1:]
        reruns = " and then at ".join(f"{target:g} ({transitions(count)})" for target, count in later)
        retry = (f"After {transitions(first_count)} at target acceptance {first:g}, the sampler was re-run "
                 f"at {reruns}; the numbers shown come from the run at {later[-1][0]:g}. ")
    if status == "pass":
        return retry + "The sampler converged: every convergence check passed its threshold."
    joined = "; ".join(reasons)
    if status == "warn":
        return retry + f"The sampler converged, with a caution: {joined}."
    mixing = [name for name, codes in (("R-hat", ("rhat",)), ("effective sample size", ("ess_bulk", "ess_tail")))
              if any(code in broken for code in codes)]
    if "divergences" not in broken:
        return retry + (f"The sampler did not meet the convergence thresholds ({joined}); "
                        "treat this pair's numbers as unreliable until it is re-run with more draws.")
    final = f" even at target acceptance {attempts[-1][0]:g}" if attempts else ""
    advice = ("Divergent transitions are not cured by more draws: the posterior has a region the sampler "
              f"cannot explore at its step size{final}. The remedies are the exact engine for this pair "
              "(engine = \"exact\", no sampling) or narrower priors on the SDs (a smaller priors.sds.scale).")
    if mixing:
        advice += f" For the {' and the '.join(mixing)}, on the other hand, more draws do help."
    return retry + (f"The sampler did not meet the convergence thresholds ({joined}); treat this pair's "
                    f"numbers as unreliable. {advice}")


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


# Jeffreys (1961), Theory of Probability, 3rd ed., Appendix B: grades of evidence against the null by its
# odds K, at powers of 10^(1/2); his words (from memory) are "not worth more than a bare mention" (grade 1),
# "substantial" (2), "strong" (3), "very strong" (4) and "decisive" (5); his grade 0 (K > 1) only says the
# null is supported. Here the same cutoffs grade the larger of BF10 and BF01 = 1/BF10, so one scale reads
# evidence for either side; the sentence says when it is applied to BF01.
EVIDENCE_GRADES = ((10 ** 0.5, "not worth more than a bare mention"), (10.0, "substantial"),
                   (10 ** 1.5, "strong"), (100.0, "very strong"))
DECISIVE = "decisive"


def evidence_grade(log_bf10: float) -> tuple[int, str]:
    """Jeffreys' (1961) grade (1 to 5) and his word for the evidence, for whichever side the data favour."""
    size = abs(log_bf10)
    for grade, (bound, word) in enumerate(EVIDENCE_GRADES, start=1):
        if size < math.log(bound):
            return grade, word
    return 5, DECISIVE


SUPERSCRIPT = str.maketrans("0123456789-.", "\u2070\u00b9\u00b2\u00b3\u2074\u2075\u2076\u2077\u2078\u2079\u207b\u00b7")


def format_bayes_factor(log_bf10: float) -> str:
    """A Bayes factor from its natural log; a dash when unknown.

    Between 1/1000 and 1000 it is plain, to three significant figures with trailing zeros dropped
    (1.85, 0.25, 123). Outside, two significant figures times a power of ten with a superscript exponent
    and a true minus sign (4.5 x 10^11): mantissa and exponent come from the log, so values far beyond a
    float's range (log BF10 in the thousands) print too.
    """
    if not math.isfinite(log_bf10):
        return "\u2014"
    log10 = log_bf10 / math.log(10.0)
    if abs(log10) < 3:
        plain = f"{math.exp(log_bf10):.3g}"
        if "e" not in plain:  # 999.7 rounds to 1e+03: print it like the values beyond 1000
            return plain
    exponent = math.floor(log10)
    mantissa = 10.0 ** (log10 - exponent)
    if round(mantissa, 1) >= 10.0:  # 9.96 x 10^4 is 1.0 x 10^5
        exponent += 1
        mantissa /= 10.0
    return f"{mantissa:.1f} \u00d7 10" + f"{exponent:d}".translate(SUPERSCRIPT)


def signed(value: float, digits: int = 4) -> str:
    """A signed number with a true minus sign."""
    return f"{value:+.{digits}f}".replace("-", "\u2212")


def rho_prior_name(a: float, b: float) -> str:
    """The prior on rho by name: uniform, or the stretched Beta(a, b) on (-1, 1)."""
    if a == 1.0 and b == 1.0:
        return "the uniform prior"
    return f"the stretched Beta({a:g}, {b:g}) prior"


def evidence_sentence(log_bf10: float, model: str = "normal", *, rho_a: float = 1.0, rho_b: float = 1.0) -> str:
    """Plain reading of BF10: rho = 0 against the alternative that spreads rho as the prior with shapes
    ``rho_a``, ``rho_b`` does (uniform by default). The number depends on that prior, so it is named."""
    if not math.isfinite(log_bf10):
        return ("No exact Bayes factor is available for the robust (Student-t) model: the exact one belongs to "
                "the normal model.")
    size = abs(log_bf10)
    parameter = "Kendall's \u03c4" if model == "rank" else "\u03c1"
    alternative = (f"the alternative that spreads {parameter} as {rho_prior_name(rho_a, rho_b)} does over "
                   "(\u22121, 1)")
    null = f"no correlation ({parameter} = 0)"
    for_null = log_bf10 < 0
    favoured, other = (null, alternative) if for_null else (alternative, null)
    grade, word = evidence_grade(log_bf10)
    factor = format_bayes_factor(size)
    basis = ("from the normal approximation to Kendall's statistic (van Doorn et al. 2018)" if model == "rank"
             else "with Jeffreys' priors for the means and SDs")
    named = (f"BF\u2080\u2081 = 1/BF\u2081\u2080 is {factor}, the evidence for no correlation" if for_null
             else f"The Bayes factor BF\u2081\u2080 is {factor}")
    reading = (f"Jeffreys' (1961, Appendix B) scale grades evidence against {parameter} = 0; applied in the same "
               f"way to BF\u2080\u2081, this is grade {grade} of 5, evidence for no correlation of the size he "
               f"calls \u201c{word}\u201d." if for_null else
               f"On Jeffreys' (1961, Appendix B) scale this is grade {grade} of 5, evidence against no correlation "
               f"that he calls \u201c{word}\u201d.")
    return (f"{named[0].upper()}{named[1:]}: the data are {factor} times as likely under {favoured} as under "
            f"{other}, {basis}. {reading}")


def bayes_factor_cell(log_bf10: float) -> str:
    """Page one's Bayes factor: BF10 when the data favour a correlation, else BF01 = 1/BF10, so the number
    shown is at least 1 and says which side it favours; a dash when there is none."""
    kind, value = bayes_factor_parts(log_bf10)
    return f"{kind} {value}" if kind else value


def bayes_factor_parts(log_bf10: float) -> tuple[str, str]:
    """The kind (BF10 or BF01, "" when unknown) and the value of :func:`bayes_factor_cell`, apart."""
    if not math.isfinite(log_bf10):
        return "", "\u2014"
    if log_bf10 < 0:
        return "BF\u2080\u2081", format_bayes_factor(-log_bf10)
    return "BF\u2081\u2080", format_bayes_factor(log_bf10)


def crosscheck_sentence(*, applies: bool, reference_priors: bool, mean_gap: float, mean_allowed: float,
                        rule_name: str | None, rule_gap: float, rule_allowed: float, within: bool) -> str:
    """The sampler against the exact posterior under the same (the spec's) priors: any gap beyond the
    allowance, which is Monte Carlo error alone, is a computational problem."""
    if not applies:
        return ("The sampler is not compared with an exact posterior for this pair: none was computed under "
                "its priors.")
    basis = ("The exact posterior uses the spec's own priors" + (" (Jeffreys' here)" if reference_priors else "")
             + ", so the two should differ by Monte Carlo error alone")
    parts = [f"The sampler's posterior mean of \u03c1 differs from the exact reference by {signed(mean_gap)} "
             f"(allowed {mean_allowed:.4f})"]
    if rule_name is not None:
        parts.append(f"the largest gap in a rule probability is {signed(rule_gap)} for \u201c{rule_name}\u201d "
                     f"(allowed {rule_allowed:.4f})")
    verdict = "Both are within the allowance." if within else (
        "This is beyond the allowance: the sampler's answer for this pair should be checked.")
    return "; ".join(parts) + f". {basis}. {verdict}"


# Agreement of the Savage-Dickey estimate with the quadrature value: within this many of its own relative
# Monte Carlo standard errors. An estimate's error is roughly normal, so 3 standard errors cover about 99.7%
# of honest runs (common practice); a wider gap points to the sampler, not to chance.
SAVAGE_DICKEY_MCSE_MULTIPLE = 3.0
# Below this relative change the nuisance priors are said to leave BF10 unchanged (the printed factor
# would read 1 at three significant figures).
UNCHANGED_FACTOR = 1.005


def _percent_error(relative: float) -> str:
    percent = 100.0 * relative
    return f"{percent:.0f}%" if percent >= 10 else f"{percent:.2g}%"


def savage_dickey_sentence(*, savage_dickey_bf10: float, relative_mcse: float, reference_log_bf10: float,
                           jeffreys_log_bf10: float) -> str:
    """What the Savage-Dickey ratio of the draws (Dickey 1971) estimates, and how it compares.

    ``savage_dickey_bf10``: the ratio itself (BF10, not its log), an estimate of the Bayes factor under the
    spec's own priors; ``relative_mcse``: its Monte Carlo standard error over the estimate (0.08 for
    +-8%); ``reference_log_bf10``: the log Bayes factor under the spec's priors by quadrature;
    ``jeffreys_log_bf10``: the exact log Bayes factor under Jeffreys' priors for the means and SDs. Any of
    them may be NaN (not available): the sentence then says less.
    """
    estimate = math.isfinite(savage_dickey_bf10) and savage_dickey_bf10 > 0
    error = math.isfinite(relative_mcse) and relative_mcse > 0
    reference = math.isfinite(reference_log_bf10)
    jeffreys = math.isfinite(jeffreys_log_bf10)
    parts = []
    if estimate:
        log_estimate = math.log(savage_dickey_bf10)
        text = ("The Savage\u2013Dickey density ratio of the draws (Dickey 1971) estimates BF\u2081\u2080 under "
                f"the spec's own priors at {format_bayes_factor(log_estimate)}")
        parts.append(text + (f", with a Monte Carlo uncertainty of about \u00b1{_percent_error(relative_mcse)}."
                             if error else "."))
        if reference:
            text = f"By quadrature under the same priors it is {format_bayes_factor(reference_log_bf10)}"
            if error:
                # relative gap |exact - estimate| / estimate, from the logs so that huge factors cannot overflow
                shift = reference_log_bf10 - log_estimate
                gap = abs(math.expm1(shift)) if abs(shift) < 50 else math.inf
                if gap <= SAVAGE_DICKEY_MCSE_MULTIPLE * relative_mcse:
                    text += ": the two agree within three times the estimate's Monte Carlo uncertainty."
                else:
                    text += (": the two differ by more than three times the estimate's Monte Carlo uncertainty, "
                             "so the sampler's answer for this pair should be checked.")
            else:
                text += "; without the estimate's Monte Carlo uncertainty their agreement cannot be judged."
            parts.append(text)
    else:
        parts.append("The Savage\u2013Dickey density ratio cannot be estimated from the draws for this pair "
                     "(it is estimated only when \u03c1 = 0 lies within the central 90% of the draws, where a "
                     "kernel estimate of the density there is trustworthy).")
        if reference:
            parts.append(f"By quadrature under the spec's own priors BF\u2081\u2080 is "
                         f"{format_bayes_factor(reference_log_bf10)}.")
    if jeffreys and reference:
        shift = reference_log_bf10 - jeffreys_log_bf10
        if abs(shift) < math.log(UNCHANGED_FACTOR):
            effect = "leave it unchanged to within 0.5%"
        else:
            effect = f"{'raise' if shift > 0 else 'lower'} it by a factor of {format_bayes_factor(abs(shift))}"
        parts.append(f"Under Jeffreys' priors for the means and SDs the exact BF\u2081\u2080 is "
                     f"{format_bayes_factor(jeffreys_log_bf10)}, so the spec's priors on the means and SDs "
                     f"{effect}.")
        parts.append(bayes_factors_reading(reference_log_bf10, jeffreys_log_bf10))
    elif jeffreys and estimate:
        parts.append(f"Under Jeffreys' priors for the means and SDs the exact BF\u2081\u2080 is "
                     f"{format_bayes_factor(jeffreys_log_bf10)}; the difference from the estimate reflects the "
                     "spec's priors on the means and SDs as well as Monte Carlo error.")
        parts.append(bayes_factors_reading(log_estimate, jeffreys_log_bf10))
    return " ".join(parts)


def bayes_factors_reading(spec_log_bf10: float, jeffreys_log_bf10: float) -> str:
    """Whether the two Bayes factors of one pair, under the spec's priors and under Jeffreys' priors for the
    means and SDs, read alike. They may differ because a Bayes factor depends on every prior, not only on
    that of rho; the difference matters only when it moves the grade on Jeffreys' (1961) scale or the side
    of 1."""
    spec_grade, spec_word = evidence_grade(spec_log_bf10)
    jeffreys_grade, jeffreys_word = evidence_grade(jeffreys_log_bf10)
    same_side = (spec_log_bf10 >= 0) == (jeffreys_log_bf10 >= 0)
    why = ("The Bayes factor under the spec's priors and the one under Jeffreys' may differ because a Bayes "
           "factor depends on every prior, not only on that of \u03c1: the first uses the spec's priors on the "
           "means and SDs, the second Jeffreys' priors for them")
    if same_side and spec_grade == jeffreys_grade:
        side = "against" if spec_log_bf10 >= 0 else "for"
        return (f"{why}; both fall in grade {spec_grade} of Jeffreys' scale (\u201c{spec_word}\u201d), on the "
                f"same side of 1 (evidence {side} no correlation), so the difference does not change the reading.")
    if not same_side:
        how = "they fall on opposite sides of 1, one favouring a correlation and the other none"
    else:
        how = (f"they fall in different grades of Jeffreys' scale, {spec_grade} (\u201c{spec_word}\u201d) and "
               f"{jeffreys_grade} (\u201c{jeffreys_word}\u201d)")
    return (f"{why}; here {how}, so the difference changes the reading: it rests on the priors on the means "
            "and SDs, and the value under the spec's priors is the one that goes with the posterior shown.")


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
