"""Which model leads, and the sentences that say why: built from the exact engine and the rank model (no sampler)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from reportgen import interpret
from reportgen.checks.summary import model_checks, rows_text
from reportgen.data import load_pairs, load_table
from reportgen.results import pair_outcome, pair_result_exact, pair_result_rank
from reportgen.results.choice import choose
from reportgen.results.outcome import prior_variants
from reportgen.spec import load_spec
from tests.conftest import write_spec


def _spec(folder: Path, frame: pd.DataFrame, extra: str = "", top: str = "") -> tuple:
    frame.to_csv(folder / "data.csv", index=False)
    path = write_spec(folder, """
        [[pairs]]
        x = "a"
        y = "b"

        [[rules]]
        name = "strong"
        statement = "above"
        threshold = 0.5
        required_probability = 0.9
    """ + extra)
    path.write_text(top + path.read_text(encoding="utf-8"), encoding="utf-8")
    spec = load_spec(path)
    return spec, load_pairs(spec, load_table(spec))[0]


def _checks(spec, data):  # type: ignore[no-untyped-def]
    return model_checks(data.x, data.y, data.row_numbers, x_label="a", y_label="b", rho_prior=(1.0, 1.0),
                        rules=spec.document.rules, settings=spec.document.checks,
                        normal_rho_draws=np.linspace(0.2, 0.8, 400), seed=1)


@pytest.fixture
def outlier_data(tmp_path: Path) -> tuple:
    rng = np.random.default_rng(4)
    frame = pd.DataFrame({"a": rng.normal(size=30), "b": rng.normal(size=30)})
    frame.loc[30] = [8.0, 8.0]
    return _spec(tmp_path, frame, top='engine = "exact"\nmodel = "auto"\n')


def test_auto_with_a_flag_leads_with_the_robust_fit_and_says_why(outlier_data: tuple) -> None:
    """One planted row on the diagonal: flagged as influential (the exact leave-one-out posterior of Jeffreys
    1961 moves by far more than 0.1), so the rank fit leads and the sentence quotes the normal model's numbers."""
    spec, data = outlier_data
    normal, rank = pair_result_exact(spec, data), pair_result_rank(spec, data)
    checks = _checks(spec, data)
    assert "influential_rows" in checks.codes and checks.flags_normal
    leading, choice = choose("auto", normal, None, rank, checks, agreement=0.1)
    assert leading is rank and choice.leading == "rank"
    assert choice.sentence.startswith("The rank (Kendall's \u03c4) fit leads because a single row moves")
    assert f"median {interpret.format_rho(normal.rho.median)}" in choice.sentence
    assert choice.robust is not None and choice.robust.model == "rank" and not choice.agrees


def test_normal_model_requested_with_flags_suggests_a_robust_fit(outlier_data: tuple) -> None:
    spec, data = outlier_data
    normal = pair_result_exact(spec, data)
    leading, choice = choose("normal", normal, None, None, _checks(spec, data), agreement=0.1)
    assert leading is normal and choice.others == () and choice.robust is None
    assert 'consider model = "auto" or "student_t"' in choice.sentence


def test_auto_without_flags_keeps_the_normal_fit_and_reports_agreement(tmp_path: Path) -> None:
    """Well-behaved bivariate-normal data (numpy's generator, fixed seed): nothing flagged, normal leads."""
    rng = np.random.default_rng(8)
    values = rng.multivariate_normal([0, 0], [[1, 0.6], [0.6, 1]], size=80)
    spec, data = _spec(tmp_path, pd.DataFrame({"a": values[:, 0], "b": values[:, 1]}),
                       top='engine = "exact"\nmodel = "auto"\n')
    result = pair_outcome(spec, data, {}, {})
    assert result.checks is not None and not result.checks.flags_normal, result.checks.codes
    assert result.model == "normal"
    assert result.choice.sentence.startswith("The normal fit leads")
    assert "fit agrees" in result.choice.sentence


def test_influence_sentence_names_the_input_row(outlier_data: tuple) -> None:
    """Row numbers are CSV line numbers (header = line 1): the 31st data row is line 32."""
    spec, data = outlier_data
    warning = next(w for w in _checks(spec, data).warnings if w.code == "influential_rows")
    assert "row 32" in warning.sentence


def test_rows_text() -> None:
    assert rows_text([4]) == "row 4"
    assert rows_text([4, 9]) == "rows 4 and 9"
    assert rows_text(list(range(1, 12))) == "rows 1, 2, 3, 4, 5, 6, 7, 8 and 3 more"


def test_prior_variants_follow_the_spec(tmp_path: Path) -> None:
    """The spec's own prior comes first (the reference the verdicts are compared with), then its list."""
    frame = pd.DataFrame({"a": np.arange(10.0), "b": np.arange(10.0) ** 1.5})
    spec, data = _spec(tmp_path, frame, extra="""
        [sensitivity]
        rho_priors = [{family = "beta", a = 3, b = 3}, {family = "uniform"}]
        nuisance_widths = [0.25]
    """)
    variants = prior_variants(spec, data)
    assert [(v.rho_a, v.rho_b, v.width) for v in variants] == [(1, 1, 1), (3, 3, 1), (1, 1, 0.25)]
    assert variants[0].label == "as specified"


def test_tails_sentence_bands() -> None:
    """Small nu means heavy tails; nu above about 30 is close to normal (common practice)."""
    assert "clearly heavier tails" in interpret.tails_sentence(3.0, 1.8, 6.0)
    assert "somewhat heavier" in interpret.tails_sentence(12.0, 4.0, 40.0)
    assert "close to those of a normal" in interpret.tails_sentence(35.0, 12.0, 120.0)
    # a wide posterior that is mostly the prior (n = 30) is not read as near-normal tails
    assert "cannot tell" in interpret.tails_sentence(24.6, 4.3, 106.0)


def test_auto_uses_the_rank_model_above_the_row_limit() -> None:
    """The Student-t likelihood needs every row (benchmarks/bench_student_t.py: about 6 s a pair at 10,000 rows),
    so above checks.student_t_max_rows the rank model is the robust fit (common practice: bound the cost)."""
    from reportgen.results.outcome import rank_is_robust_fit, sampled_models

    assert sampled_models("mcmc", "auto", 500, 20_000) == ("normal", "student_t")
    assert sampled_models("mcmc", "auto", 50_000, 20_000) == ("normal",)
    assert rank_is_robust_fit("mcmc", "auto", 50_000, 20_000)
    assert sampled_models("mcmc", "student_t", 50_000, 20_000) == ("normal", "student_t")  # asked for: honoured
    assert sampled_models("exact", "auto", 500, 20_000) == () and rank_is_robust_fit("exact", "auto", 500, 20_000)


def test_clean_small_data_do_not_make_the_robust_fit_lead(tmp_path: Path) -> None:
    """Clean bivariate-normal rows at n = 30 (numpy's generator): a leave-one-out shift of 0.1 is ordinary there,
    so it is listed but does not switch the lead; the switch needs a shift beyond the posterior SD too
    (the exact posterior's SD: Jeffreys 1961)."""
    switched = 0
    for seed in range(12):
        rng = np.random.default_rng(100 + seed)
        values = rng.multivariate_normal([0, 0], [[1, 0.3], [0.3, 1]], size=30)
        folder = tmp_path / str(seed)
        folder.mkdir()
        spec, data = _spec(folder, pd.DataFrame({"a": values[:, 0], "b": values[:, 1]}))
        checks = _checks(spec, data)
        switched += "influential_rows" in checks.flagging_codes
    assert switched <= 2


def test_a_failed_robust_fit_is_said_plainly(outlier_data: tuple) -> None:
    spec, data = outlier_data
    normal = pair_result_exact(spec, data)
    _, choice = choose("auto", normal, None, None, _checks(spec, data), agreement=0.1, robust_failed=True)
    assert choice.sentence.startswith("The robust (Student-t) fit failed")
    assert "consider model" not in choice.sentence


def test_few_distinct_values_count_as_coarse_only_where_values_repeat() -> None:
    """Ten rows with ten different values are not coarse (common practice: coarseness means ties)."""
    from reportgen.checks.shape import discreteness

    assert not discreteness(np.arange(6.0)).discrete
    assert discreteness(np.array([1.0, 1, 2, 2, 3, 3, 4, 4])).discrete
