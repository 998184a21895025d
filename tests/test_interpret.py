"""Sentences and number formats: what the reader sees is built and tested here."""

from __future__ import annotations

from reportgen import interpret, narrative
from reportgen.spec import Rope, Rule


def test_strength_words_follow_cohens_benchmarks() -> None:
    """Cohen (1988), sec. 3.2: 0.1 small, 0.3 medium, 0.5 large."""
    assert [interpret.strength_word(v) for v in (0.05, -0.2, 0.35, -0.75)] == [
        "negligible", "small", "medium", "large"]


def test_probabilities_from_draws_are_never_shown_as_certain() -> None:
    assert interpret.format_probability(1.0) == "> 0.999"
    assert interpret.format_probability(0.0) == "< 0.001"
    assert interpret.format_probability(0.8234) == "0.823"


def test_negative_correlations_use_a_true_minus_sign() -> None:
    assert interpret.format_rho(-0.456) == "\u22120.46"
    assert interpret.format_rho(0.456) == "0.46"


def test_rule_sentence_states_probability_requirement_and_verdict() -> None:
    rule = Rule(name="material", statement="above", threshold=0.3, required_probability=0.9)
    met = interpret.rule_sentence(rule, 0.95)
    assert "ρ > 0.3 " in met and "0.950" in met and "at least 0.9," in met and met.endswith("so it is met.")
    unsettled = interpret.rule_sentence(rule, 0.6)
    assert "not met" in unsettled and "do not settle it" in unsettled
    opposite = interpret.rule_sentence(rule, 0.02)
    assert "the other way" in opposite
    # the wording follows both probabilities: 0.126 for is 0.874 against, which points the other way
    against = interpret.rule_sentence(Rule(name="r", statement="above", threshold=0.5), 0.126)
    assert "the other way" in against and "0.874" in against and "either way" not in against
    leaning = interpret.rule_sentence(rule, 0.85)
    assert "lean towards it" in leaning


def test_rope_sentence_reads_the_decision() -> None:
    rope = Rope(lower=-0.1, upper=0.1)
    assert "practically zero." in interpret.rope_sentence(rope, 0.97, "practically_zero", 0.95)
    assert "not practically zero" in interpret.rope_sentence(rope, 0.01, "not_zero", 0.95)
    assert "do not decide" in interpret.rope_sentence(rope, 0.4, "undecided", 0.95)


def test_pair_paragraph_mentions_dropped_rows_and_variance_share() -> None:
    text = interpret.pair_paragraph(x_label="Heat", y_label="Yield", n=120, n_dropped=3, median=-0.62,
                                    lower=-0.72, upper=-0.49, mass=0.95, interval_name="credible interval",
                                    p_positive=0.0, r2_median=0.384)
    assert "120 complete pairs" in text and "3 rows with a missing value" in text
    assert "large negative" in text and "about 38%" in text


def test_zero_straddling_interval_is_read_as_inconclusive() -> None:
    text = interpret.pair_paragraph(x_label="A", y_label="B", n=30, n_dropped=0, median=0.1, lower=-0.2,
                                    upper=0.4, mass=0.9, interval_name="credible interval",
                                    p_positive=0.7, r2_median=0.02)
    assert "includes zero" in text and "missing" not in text


def test_banner_names_failed_pairs() -> None:
    assert narrative.status_banner(3, [], [])["level"] == "pass"
    failed = narrative.status_banner(3, ["A and B"], [])
    assert failed["level"] == "fail" and "A and B" in failed["text"] and "1 of 3" in failed["text"]


def test_every_report_carries_the_standard_cautions() -> None:
    titles = " ".join(c["title"] for c in narrative.cautions()).lower()
    for phrase in ("causation", "straight-line", "independent rows", "outliers", "client's choice",
                   "qualified review"):
        assert phrase in titles


def test_the_clients_thresholds_are_printed_as_chosen() -> None:
    """A threshold of 0.125 or a requirement of 0.999 must not be rounded in the report."""
    rule = Rule(name="fine", statement="between", lower=-0.125, upper=0.125, required_probability=0.999)
    assert interpret.rule_statement(rule) == "\u22120.125 < ρ < 0.125"
    assert "at least 0.999," in interpret.rule_sentence(rule, 0.5)


def test_zero_straddling_interval_names_both_ends() -> None:
    text = interpret.pair_paragraph(x_label="A", y_label="B", n=30, n_dropped=0, median=0.4, lower=-0.05,
                                    upper=0.85, mass=0.95, interval_name="credible interval",
                                    p_positive=0.9, r2_median=0.16)
    assert "a negligible correlation (\u22120.05)" in text and "a large positive correlation (0.85)" in text


def test_bayes_factor_grades_follow_jeffreys() -> None:
    """Jeffreys (1961), Theory of Probability, Appendix B (from memory): grades at powers of 10^(1/2), in his
    words "not worth more than a bare mention", "substantial", "strong", "very strong", "decisive"."""
    import math

    assert "grade 1 of 5" in interpret.evidence_sentence(math.log(2.0))
    assert "\u201cnot worth more than a bare mention\u201d" in interpret.evidence_sentence(math.log(2.0))
    assert "\u201csubstantial\u201d" in interpret.evidence_sentence(math.log(5.0))
    assert "\u201cstrong\u201d" in interpret.evidence_sentence(math.log(20.0))
    assert "\u201cvery strong\u201d" in interpret.evidence_sentence(math.log(50.0))
    assert "\u201cdecisive\u201d" in interpret.evidence_sentence(math.log(500.0))
    # the boundaries are 10^(k/2): 3.1 is grade 1, 3.2 grade 2
    assert interpret.evidence_grade(math.log(3.1))[0] == 1 and interpret.evidence_grade(math.log(3.2))[0] == 2
    # below 1 the sentence gives BF01 = 1/BF10, the evidence for no correlation, graded on the same scale
    for_null = interpret.evidence_sentence(-math.log(12.0))
    assert "under no correlation" in for_null.split("as under")[0]
    assert for_null.startswith("BF\u2080\u2081 = 1/BF\u2081\u2080 is 12") and "grade 3" in for_null
    assert interpret.bayes_factor_cell(-math.log(3.2)) == "BF\u2080\u2081 3.2"
    assert interpret.bayes_factor_cell(math.log(1.2e14)) == "BF\u2081\u2080 1.2 \u00d7 10\u00b9\u2074"
    # two significant figures beyond 1000 (the bare power of ten was off by up to 3.2 times)
    assert interpret.format_bayes_factor(math.log(1e35)) == "1.0 \u00d7 10\u00b3\u2075"
    assert interpret.format_bayes_factor(math.log(0.25)) == "0.25"
