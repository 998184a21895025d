"""Report wording a statistician can sign: what the Bayes factor compares, how big numbers are printed, how
intervals, strength words and shares of variance are read, which priors the methods say were used, and what
the Savage-Dickey cross-check of the Bayes factor estimates.

References named beside each check; the wide-prior rule and the 3-MCSE agreement rule are ours (stated in
reportgen/narrative.py and reportgen/interpret.py with their reasons)."""

from __future__ import annotations

import itertools
import math
import re
from html import unescape
from pathlib import Path
from types import SimpleNamespace

import mpmath
import pytest

from reportgen import interpret, narrative
from reportgen.report import environment
from reportgen.spec import load_spec
from tests.conftest import write_spec

NAN = float("nan")
MINUS = "\u2212"
# Unicode superscript digits and the superscript minus (U+207B), written out here rather than taken from
# the code under test.
SUPER = {"0": "\u2070", "1": "\u00b9", "2": "\u00b2", "3": "\u00b3", "4": "\u2074", "5": "\u2075",
         "6": "\u2076", "7": "\u2077", "8": "\u2078", "9": "\u2079", "-": "\u207b"}


def _power(mantissa: str, exponent: int) -> str:
    return f"{mantissa} \u00d7 10" + "".join(SUPER[c] for c in str(exponent))


def _no_nan(text: str) -> bool:
    return re.search(r"\bnan\b|\bn/a\b|\binf\b", text, flags=re.IGNORECASE) is None


# ----------------------------------------------------------------------------- item 1: what BF10 compares


def test_evidence_sentence_names_the_alternative_and_its_prior() -> None:
    """The Bayes factor compares rho = 0 with rho spread as the prior spreads it (Jeffreys 1961, ch. 5:
    BF10 = integral of prior(rho) x likelihood over rho, divided by the likelihood at 0), so the sentence
    must name that prior."""
    uniform = interpret.evidence_sentence(-math.log(1.85))
    assert "1.85 times as likely under no correlation" in uniform
    assert "as under the alternative that spreads \u03c1 as the uniform prior does over (\u22121, 1)" in uniform
    stretched = interpret.evidence_sentence(math.log(7.0), rho_a=2.0, rho_b=2.0)
    assert "under the alternative that spreads \u03c1 as the stretched Beta(2, 2) prior does" in stretched
    assert stretched.index("alternative") < stretched.index("as under no correlation")
    # Jeffreys (1961), Appendix B (from memory): 7 lies between 10^(1/2) and 10, his grade 2, "substantial"
    assert "grade 2 of 5" in stretched and "\u201csubstantial\u201d" in stretched


def test_evidence_sentence_for_the_rank_model_speaks_of_kendalls_tau() -> None:
    """The rank model's Bayes factor is about Kendall's tau (van Doorn et al. 2018)."""
    text = interpret.evidence_sentence(math.log(3.5), "rank", rho_a=5.0, rho_b=5.0)
    assert "spreads Kendall's \u03c4 as the stretched Beta(5, 5) prior does" in text


def test_evidence_sentence_survives_an_astronomical_bayes_factor() -> None:
    """log BF10 = 11138.8 is far beyond a double's range (exp overflows above about 709.78: IEEE 754)."""
    text = interpret.evidence_sentence(11138.8)
    assert "\u201cdecisive\u201d" in text and "10" in text and _no_nan(text)


# ----------------------------------------------------------------------------- item 2: printing BF10


@pytest.mark.parametrize(("bf", "expected"), [
    (4.5e11, _power("4.5", 11)),   # the nearest power of ten would be 10^12: off by 2.2 times
    (1e35, _power("1.0", 35)),
    (99_960.0, _power("1.0", 5)),  # the mantissa rounds up to 10.0: carry into the exponent
    (1.0 / 4.5e11, _power("2.2", -12)),
    (0.000_347, _power("3.5", -4)),
    (1000.0, _power("1.0", 3)),
    (999.7, _power("1.0", 3)),     # three significant figures would print 1000: outside the plain band
])
def test_large_and_small_bayes_factors_keep_two_significant_figures(bf: float, expected: str) -> None:
    """Arithmetic by hand: 1/4.5e11 = 2.22e-12; 99,960 = 9.996e4 -> 1.0e5."""
    assert interpret.format_bayes_factor(math.log(bf)) == expected


def test_bayes_factor_from_a_huge_log_is_printed_without_overflow() -> None:
    """Mantissa and exponent of exp(11138.8) from mpmath at 40 digits (independent arbitrary precision)."""
    mpmath.mp.dps = 40
    value = mpmath.exp(mpmath.mpf("11138.8"))
    exponent = int(mpmath.floor(mpmath.log10(value)))
    mantissa = float(value / mpmath.power(10, exponent))
    assert interpret.format_bayes_factor(11138.8) == _power(f"{mantissa:.1f}", exponent)
    assert interpret.format_bayes_factor(-11138.8).startswith(
        f"{float(mpmath.power(10, exponent + 1) / value):.1f} \u00d7 10\u207b")


@pytest.mark.parametrize(("bf", "expected"), [
    (1.85, "1.85"), (0.25, "0.25"), (12.34, "12.3"), (123.4, "123"), (0.001_234, "0.00123"), (2.0, "2"),
    (998.0, "998"),
])
def test_bayes_factors_between_a_thousandth_and_a_thousand_stay_plain(bf: float, expected: str) -> None:
    """Three significant figures, trailing zeros dropped (as C's %g does)."""
    assert interpret.format_bayes_factor(math.log(bf)) == expected


# ----------------------------------------------------------------------------- items 3 to 5: the paragraph


def _paragraph(**changes: float) -> str:
    values: dict[str, float] = dict(median=0.12, lower=-0.50, upper=0.79, p_positive=0.62, r2_median=0.09)
    values.update(changes)
    return interpret.pair_paragraph(x_label="Dose", y_label="Response", n=8, n_dropped=0, mass=0.95,
                                    interval_name="credible interval", **values)  # type: ignore[arg-type]


def test_zero_straddling_interval_does_not_claim_equal_support() -> None:
    """A posterior density is not flat over its interval (the posterior of rho is unimodal: Jeffreys 1961,
    ch. 5), so the values inside it are not supported equally."""
    text = _paragraph()
    assert "and equally with" not in text
    assert "does not weigh them equally" in text and "median (0.12)" in text
    assert "\u22120.50" in text and "0.79" in text


def test_strength_words_are_cohens_and_say_so() -> None:
    """Cohen (1988), Statistical Power Analysis for the Behavioral Sciences, sec. 3.2: 0.1 small,
    0.3 medium, 0.5 large for the behavioural sciences."""
    text = _paragraph(median=0.62, lower=0.2, upper=0.9)
    assert "large positive association" in text and "common benchmarks" not in text
    # Cohen's own words; none of the strength words is also one of Jeffreys' evidence words
    assert not {word for _, word in interpret.STRENGTH_BANDS} & {w for _, w in interpret.EVIDENCE_GRADES}
    assert "Cohen's (1988) benchmarks for the behavioural sciences" in text
    assert "the median alone" in text
    # below 0.1 Cohen gives no word: the report says whose word "negligible" is
    tiny = _paragraph(median=0.06, lower=0.01, upper=0.11)
    assert "negligible positive association" in tiny and "below Cohen's small" in tiny
    assert "depends on the application" in text


def test_strength_word_classifies_the_printed_value() -> None:
    """-0.4979 is printed as -0.50, which is at Cohen's (1988) 'large' benchmark of 0.5."""
    assert interpret.format_rho(-0.4979) == "\u22120.50"
    assert interpret.strength_word(-0.4979) == "large"
    assert interpret.describe(-0.4979) == "a large negative correlation (\u22120.50)"
    assert interpret.describe(0.0951) == "a small positive correlation (0.10)"
    assert "large negative association" in _paragraph(median=-0.4979, lower=-0.8, upper=-0.1)
    # the word always matches the printed two decimals, checked against the bands read off the text
    for value in (i / 10_000 for i in range(-10_000, 10_001, 7)):
        printed = abs(float(interpret.format_rho(value).replace(MINUS, "-")))
        expected = ("negligible" if printed < 0.1 else "small" if printed < 0.3
                    else "medium" if printed < 0.5 else "large")
        assert interpret.strength_word(value) == expected


def test_variance_share_gives_its_interval() -> None:
    """rho^2 is the share of the variance the best line explains (Var(y - a x - b) = Var(y)(1 - rho^2):
    common practice); at n = 8 its interval runs from about 0 to 0.6."""
    text = _paragraph(r2_lower=0.0004, r2_upper=0.6)
    assert "about 9% of the variance in Response" in text and "variation" not in text
    assert "95% credible interval from under 1% to 60%" in text
    bare = _paragraph()
    assert "of the variance" in bare and "to 60%" not in bare and _no_nan(bare)


# ----------------------------------------------------------------------------- item 8: Savage-Dickey


def test_savage_dickey_sentence_agreement_within_three_mcse() -> None:
    """Savage-Dickey: BF10 = prior density at 0 / posterior density at 0 (Dickey 1971). Agreement rule
    (ours, common practice for Monte Carlo checks): |exact - estimate| <= 3 x relative MCSE x estimate.
    2.1 against 2.0 is a 5% gap, inside 3 x 8% = 24%; 3.0 against 2.0 is 50%, beyond 3 x 5% = 15%."""
    agree = interpret.savage_dickey_sentence(savage_dickey_bf10=2.0, relative_mcse=0.08,
                                             reference_log_bf10=math.log(2.1), jeffreys_log_bf10=math.log(1.4))
    assert "under the spec's own priors" in agree and "\u00b18%" in agree and "2.1" in agree
    assert "agree within" in agree
    # 2.1 / 1.4 = 1.5 by hand: the spec's nuisance priors raise BF10 by that factor
    assert "raise it by a factor of 1.5" in agree and "Jeffreys'" in agree
    differ = interpret.savage_dickey_sentence(savage_dickey_bf10=2.0, relative_mcse=0.05,
                                              reference_log_bf10=math.log(3.0), jeffreys_log_bf10=math.log(6.0))
    assert "agree within" not in differ and "more than three times" in differ
    assert "lower it by a factor of 2" in differ


def test_savage_dickey_sentence_says_less_when_numbers_are_missing() -> None:
    """Every combination of unavailable inputs gives a sentence without 'nan'."""
    present = {"savage_dickey_bf10": 2.0, "relative_mcse": 0.08, "reference_log_bf10": math.log(2.1),
               "jeffreys_log_bf10": math.log(1.4)}
    for missing in itertools.product((False, True), repeat=4):
        arguments = {k: (NAN if gone else v) for (k, v), gone in zip(present.items(), missing, strict=True)}
        text = interpret.savage_dickey_sentence(**arguments)
        assert text and _no_nan(text), arguments
    unknown_error = interpret.savage_dickey_sentence(savage_dickey_bf10=2.0, relative_mcse=NAN,
                                                     reference_log_bf10=math.log(2.1), jeffreys_log_bf10=NAN)
    assert "agree within" not in unknown_error and "cannot be judged" in unknown_error
    none = interpret.savage_dickey_sentence(savage_dickey_bf10=NAN, relative_mcse=NAN, reference_log_bf10=NAN,
                                            jeffreys_log_bf10=NAN)
    assert "cannot be estimated" in none


# ----------------------------------------------------------------------------- items 6 and 7: the methods


def _spec(folder: Path, body: str, engine: str = "mcmc") -> object:
    path = write_spec(folder, body + '\n[[pairs]]\nx = "a"\ny = "b"\n')
    # top-level keys must come before the first table
    path.write_text(f'engine = "{engine}"\n' + path.read_text(encoding="utf-8"), encoding="utf-8")
    return load_spec(path)


def _results(mean_a: float, sd_a: float, mean_b: float, sd_b: float, n: int = 20) -> SimpleNamespace:
    """A stand-in for RunResults holding what the methods read: sufficient statistics (sxx = (n-1) sd^2)."""
    pair = SimpleNamespace(key="a vs b", x="a", y="b", x_label="a", y_label="b", title="a and b",
                           model="normal", sufficient=(("n", float(n)), ("mean_x", mean_a), ("mean_y", mean_b),
                                                       ("sxx", (n - 1) * sd_a ** 2), ("syy", (n - 1) * sd_b ** 2),
                                                       ("sxy", 0.0)))
    return SimpleNamespace(pairs=(pair,))


def test_scaled_priors_print_their_scales_and_are_called_wide_only_when_wide(tmp_path: Path) -> None:
    """Default scaled priors: 10 x sample SD (spec defaults), wide by our rule (>= 5 x sample SD)."""
    spec = _spec(tmp_path, "")
    methods = narrative.methods_context(spec, _results(10.0, 2.0, -3.0, 1.0))  # type: ignore[arg-type]
    note = methods["scaled_note"]
    assert "wide relative to the data's spread" not in note and "fixed before the data" not in note
    assert "as stated in the specification" in note and "5 times the sample SD" in note
    assert "every prior here is wide" in note
    rows = {row["variable"]: row for row in methods["prior_scales"]}
    # a: mean 10, SD 2 -> Normal(10, 20) and Half-normal(20), by hand
    assert rows["a"]["mean_prior"] == "Normal(10.0, 20.0)" and rows["a"]["sd_prior"] == "Half-normal(20.0)"
    assert rows["a"]["sd"] == "2.00" and rows["a"]["wide"] == "yes"
    assert "prior_allowance" not in methods


def test_narrow_data_unit_priors_are_not_called_wide(tmp_path: Path) -> None:
    """Normal(0, 100) on a mean of 1,000 with SD 2: the centre is 10 scales away (arithmetic), not wide;
    Half-normal(5) against SD 2 is 2.5 x the SD, below 5, not wide."""
    body = ('[priors.means]\nunits = "data"\nlocation = 0\nscale = 100\n'
            '[priors.sds]\nunits = "data"\nscale = 5\n')
    methods = narrative.methods_context(_spec(tmp_path, body), _results(1000.0, 2.0, 0.0, 0.5))  # type: ignore[arg-type]
    rows = {row["variable"]: row for row in methods["prior_scales"]}
    assert rows["a"]["wide"] == "no (mean and SD)"
    assert rows["b"]["wide"] == "yes"  # 100 >= 5 x 0.5, centre 0 at the mean; 5 >= 5 x 0.5 (arithmetic)
    assert "not wide for a" in methods["scaled_note"] and "every prior here is wide" not in methods["scaled_note"]


_SAMPLING_WORDS = re.compile(r"\bdraws?\b|\bdrawn\b|sampler|\bsampling\b|\bESS\b|Monte Carlo|Savage|R-hat|"
                             r"divergen|\bchains?\b|\bMCSE\b|effective sample", re.IGNORECASE)


def _rendered_methods(methods: dict[str, object]) -> str:
    html = environment().get_template("_methods.html.j2").render(methods=methods, diagram="data:,")
    return re.sub(r"\s+", " ", unescape(re.sub(r"<[^>]+>", " ", html)))


def test_exact_engine_methods_show_the_priors_used_and_no_sampling(tmp_path: Path) -> None:
    """The exact engine integrates the means and SDs out under flat and 1/sigma priors (Jeffreys 1961,
    ch. 5): the methods must show those, say the spec's were replaced, and speak of no sampling."""
    spec = _spec(tmp_path, "[priors.rho]\nfamily = \"beta\"\na = 2\nb = 2\n", engine="exact")
    methods = narrative.methods_context(spec, _results(10.0, 2.0, -3.0, 1.0))  # type: ignore[arg-type]
    assert methods["priors"] == ["(\u03c1 + 1)/2 ~ Beta(2, 2)", "p(\u03bc\u2c7c) \u221d 1 (flat, improper)",
                                 "p(\u03c3\u2c7c) \u221d 1/\u03c3\u2c7c (Jeffreys, improper)"]
    assert "replace" in methods["scaled_note"] and "Normal(sample mean" in methods["scaled_note"]
    assert methods["prior_scales"] == []
    text = _rendered_methods(methods)
    assert not _SAMPLING_WORDS.search(text), _SAMPLING_WORDS.findall(text)
    assert "stretched Beta(2, 2)" in text
    for sentence in narrative.model_check_lines(spec):
        assert not _SAMPLING_WORDS.search(sentence[1])
    banner = narrative.status_banner(1, [], [], engine="exact")
    # the banner says plainly that no sampler ran and its checks do not apply, and never claims a pass
    assert "No sampler ran" in banner["text"] and "do not apply" in banner["text"]
    assert "passed" not in banner["text"] and "convergence" not in banner["text"]


def test_sampled_methods_describe_the_crosscheck_by_monte_carlo_error_alone(tmp_path: Path) -> None:
    """The cross-check compares with the exact posterior under the spec's own priors, so the allowance is
    Monte Carlo error alone (4 MCSE: common practice for a check of a Monte Carlo estimate)."""
    methods = narrative.methods_context(_spec(tmp_path, ""), _results(10.0, 2.0, -3.0, 1.0))  # type: ignore[arg-type]
    text = _rendered_methods(methods)
    assert "quarter" not in text and "of its SD, for the difference in priors" not in text
    assert "under the spec's own priors" in text and "4 Monte Carlo standard errors" in text
    assert "Savage" in text and "spreads \u03c1 as the uniform prior does" in text
    assert "Jeffreys'" in text and "Jeffrey's" not in text and "Jeffreys's" not in text


def test_crosscheck_sentence_speaks_of_monte_carlo_error_alone() -> None:
    """Sampler and exact posterior share the spec's priors, so only Monte Carlo error separates them."""
    text = interpret.crosscheck_sentence(applies=True, reference_priors=False, mean_gap=0.004, mean_allowed=0.01,
                                         rule_name="material", rule_gap=-0.01, rule_allowed=0.02, within=True)
    assert "quarter" not in text and "Monte Carlo error alone" in text and "spec's own priors" in text
    assert "\u22120.0100" in text  # a true minus sign (common typographic practice)


# ----------------------------------------------------------------------------- Jeffreys' grades and BF01

# Jeffreys (1961), Theory of Probability, 3rd ed., Appendix B (from memory): grades of K at powers of
# 10^(1/2), in his words. The cutoffs are written out here by hand: 10^0.5 = 3.16228, 10^1.5 = 31.6228.
JEFFREYS = ((3.16228, 1, "not worth more than a bare mention"), (10.0, 2, "substantial"),
            (31.6228, 3, "strong"), (100.0, 4, "very strong"))


@pytest.mark.parametrize(("bound", "grade", "word"), JEFFREYS)
def test_evidence_grades_change_at_powers_of_root_ten(bound: float, grade: int, word: str) -> None:
    """Just below each cutoff is that grade; just above is the next one (grade 5, "decisive", beyond 100)."""
    assert interpret.evidence_grade(math.log(bound * 0.999)) == (grade, word)
    above = interpret.evidence_grade(math.log(bound * 1.001))
    assert above[0] == grade + 1
    # the same cutoffs read BF01 = 1/BF10 (evidence for rho = 0)
    assert interpret.evidence_grade(-math.log(bound * 0.999)) == (grade, word)
    assert interpret.evidence_grade(math.log(1e6)) == (5, "decisive")


def test_evidence_sentence_quotes_jeffreys_and_says_when_his_scale_is_read_for_the_null() -> None:
    """Jeffreys' scale is stated for evidence against the null (his K is the odds for it, Appendix B); read for
    BF01 the sentence must say so, and it prints BF01 = 1/BF10 (1/0.08 = 12.5 by hand) rather than 0.08."""
    against = interpret.evidence_sentence(math.log(20.0))
    assert "grade 3 of 5" in against and "\u201cstrong\u201d" in against and "BF\u2081\u2080 is 20" in against
    assert "Jeffreys's" not in against and "Jeffrey's" not in against
    for_null = interpret.evidence_sentence(math.log(0.08))
    assert for_null.startswith("BF\u2080\u2081 = 1/BF\u2081\u2080 is 12.5")
    assert "applied in the same way to BF\u2080\u2081" in for_null and "grade 3 of 5" in for_null
    assert "0.08" not in for_null
    # cohen's strength words no longer share a word with the evidence grades
    assert not {word for _, word in interpret.STRENGTH_BANDS} & {word for _, _, word in JEFFREYS}


@pytest.mark.parametrize(("bf10", "expected"), [
    (1.0 / 3.2, "BF\u2080\u2081 3.2"),              # 1/BF10 = 3.2
    (0.25, "BF\u2080\u2081 4"),                     # 1/0.25 = 4
    (2.2e-12, "BF\u2080\u2081 " + _power("4.5", 11)),  # 1/2.2e-12 = 4.545e11, by hand
    (4.5e11, "BF\u2081\u2080 " + _power("4.5", 11)),
    (1.85, "BF\u2081\u2080 1.85"),
    (1.0, "BF\u2081\u2080 1"),
])
def test_bayes_factor_cell_shows_bf01_below_one(bf10: float, expected: str) -> None:
    """Page one shows the factor that is at least 1 and names it; BF01 = 1/BF10 (definition: Kass &
    Raftery 1995, sec. 3)."""
    assert interpret.bayes_factor_cell(math.log(bf10)) == expected


def test_bayes_factor_cell_never_overflows_and_dashes_the_unknown() -> None:
    """exp(-11138.8) underflows a double (IEEE 754); BF01 = exp(11138.8) from mpmath at 40 digits."""
    mpmath.mp.dps = 40
    value = mpmath.exp(mpmath.mpf("11138.8"))
    exponent = int(mpmath.floor(mpmath.log10(value)))
    mantissa = float(value / mpmath.power(10, exponent))
    assert interpret.bayes_factor_cell(-11138.8) == "BF\u2080\u2081 " + _power(f"{mantissa:.1f}", exponent)
    for unknown in (NAN, math.inf, -math.inf):
        assert interpret.bayes_factor_cell(unknown) == "\u2014"


# ----------------------------------------------------------------------------- rule verdicts, both sides


def _rule(required: float = 0.95) -> object:
    from reportgen.spec import Rule

    return Rule(name="material", statement="above", threshold=0.5, required_probability=required)


def test_rule_sentence_at_0126_points_the_other_way() -> None:
    """P(rho > 0.5) = 0.126 means P(rho <= 0.5) = 1 - 0.126 = 0.874 (complement rule): the data lean against
    the statement, so the sentence must not say they do not settle it either way."""
    text = interpret.rule_sentence(_rule(), 0.126)  # type: ignore[arg-type]
    assert "the other way" in text and "the probability that it does not hold is 0.874" in text
    assert "either way" not in text and "settle" not in text and "so it is not met" in text


@pytest.mark.parametrize("required", [0.8, 0.9, 0.95, 0.99])
def test_rule_sentence_follows_both_probabilities(required: float) -> None:
    """Bands (ours, stated in interpret.rule_sentence): met at the requirement; the other way below 0.25 or
    when the complement reaches it; undecided only between 0.25 and 0.75; leaning towards it above that."""
    for step in range(1, 1000):
        p = step / 1000
        text = interpret.rule_sentence(_rule(required), p)  # type: ignore[arg-type]
        assert "either way" not in text
        assert text.endswith("so it is met.") == (p >= required)
        if p >= required:
            continue
        assert ("the other way" in text) == (p < 0.25 or 1.0 - p >= required), (p, text)
        assert ("do not settle it" in text) == (0.25 <= p < 0.75 and 1.0 - p < required), (p, text)
        assert ("lean towards it" in text) == (p >= 0.75), (p, text)
        assert ("firmly" in text) == (1.0 - p >= required), (p, text)


# ----------------------------------------------------------------------------- two Bayes factors, one reading


def test_two_bayes_factors_in_one_grade_do_not_change_the_reading() -> None:
    """5 and 8 both lie between 10^(1/2) and 10 (Jeffreys 1961, Appendix B, from memory: grade 2)."""
    text = interpret.savage_dickey_sentence(savage_dickey_bf10=5.1, relative_mcse=0.05,
                                            reference_log_bf10=math.log(5.0), jeffreys_log_bf10=math.log(8.0))
    assert "spec's priors on the means and SDs" in text and "Jeffreys' priors for them" in text
    assert "grade 2" in text and "does not change the reading" in text


def test_two_bayes_factors_across_a_grade_or_across_one_change_the_reading() -> None:
    """8 is grade 2 and 40 grade 4 (cutoffs 10 and 31.6: Jeffreys 1961, Appendix B, from memory); 0.7 and 1.6
    lie on opposite sides of 1."""
    grades = interpret.savage_dickey_sentence(savage_dickey_bf10=8.2, relative_mcse=0.05,
                                              reference_log_bf10=math.log(8.0), jeffreys_log_bf10=math.log(40.0))
    assert "grades of Jeffreys' scale, 2" in grades and "changes the reading" in grades
    assert "does not change" not in grades
    sides = interpret.bayes_factors_reading(math.log(0.7), math.log(1.6))
    assert "opposite sides of 1" in sides and "changes the reading" in sides and "does not change" not in sides
    # without the quadrature value the estimate itself is compared with Jeffreys' factor
    estimate_only = interpret.savage_dickey_sentence(savage_dickey_bf10=0.7, relative_mcse=0.05,
                                                     reference_log_bf10=NAN, jeffreys_log_bf10=math.log(1.6))
    assert "opposite sides of 1" in estimate_only


# ----------------------------------------------------------------------------- diagnostics in the report's symbols


def test_reasons_use_the_reports_symbols_and_four_decimals_of_r_hat() -> None:
    """Reasons name parameters as the report's tables do (sigma of x is sigma-1, the mean of y mu-2) and give
    R-hat to four decimals, so that a value just above the limit 1.01 is seen to be above it. The R-hat and
    ESS compared with are ArviZ's own rank-normalised values (Vehtari et al. 2021)."""
    import arviz as az
    import numpy as np

    from reportgen.diagnostics import diagnose, symbol
    from reportgen.spec import Diagnostics

    assert symbol("sigma_x") == "\u03c3\u2081" and symbol("mu_y") == "\u03bc\u2082"
    assert symbol("rho") == "\u03c1" and symbol("nu") == "\u03bd"
    rng = np.random.default_rng(5)
    # two of four chains shifted by 0.26 SD: R-hat just above 1.01 with this seed
    draws = rng.normal(size=(4, 1000)) + np.array([[0.0], [0.0], [0.26], [0.26]])
    reference = float(az.rhat(draws, method="rank"))
    assert 1.01 < reference < 1.0105  # three decimals would print 1.010, seemingly at the limit
    result = diagnose({"sigma_x": draws}, np.zeros((4, 1000), bool), rng.normal(size=(4, 1000)), Diagnostics())
    assert f"R-hat of \u03c3\u2081 is {reference:.4f} (must be below 1.01)" in result.reasons
    walk = np.cumsum(np.random.default_rng(4).normal(size=(4, 1000)), axis=1) * 0.05
    result = diagnose({"mu_y": walk}, np.zeros((4, 1000), bool), rng.normal(size=(4, 1000)), Diagnostics())
    bulk = [reason for reason in result.reasons if reason.startswith("bulk ESS")]
    assert bulk == [f"bulk ESS of \u03bc\u2082 is {round(float(az.ess(walk, method='bulk')))} "
                    "(needs at least 400)"]
