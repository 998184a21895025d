"""Leave-one-out influence of single rows on rho's posterior median and on the rules' verdicts."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from reportgen.checks.influence import DIRECT_MAX_N, GRID_POINTS, _node_count, leave_one_out, leave_one_out_r
from reportgen.crosscheck import exact_rule_probability
from reportgen.exact import exact_posterior
from reportgen.spec import Rule

# Anscombe (1973), "Graphs in statistical analysis", The American Statistician 27(1), Table 1,
# typed from memory of the published table.
ANSCOMBE_X = np.array([10, 8, 13, 9, 11, 14, 6, 4, 12, 7, 5], dtype=float)
ANSCOMBE_Y1 = np.array([8.04, 6.95, 7.58, 8.81, 8.33, 9.96, 7.24, 4.26, 10.84, 4.82, 5.68])
ANSCOMBE_Y3 = np.array([7.46, 6.77, 12.74, 7.11, 7.81, 8.84, 6.08, 5.39, 8.15, 6.42, 5.73])
ROWS_11 = np.arange(2, 13)  # input row numbers as a file with a header line would give them

POSITIVE = Rule(name="positive", statement="above", threshold=0.0, required_probability=0.95)
STRONG = Rule(name="strong", statement="above", threshold=0.9, required_probability=0.95)
MODEST = Rule(name="modest", statement="between", lower=0.1, upper=0.5, required_probability=0.6)


def correlated(n: int, rho: float, seed: int, offset: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    v = rng.multivariate_normal([offset, -offset], [[1.0, rho], [rho, 1.0]], size=n)
    return v[:, 0], v[:, 1]


@pytest.mark.parametrize("offset", [0.0, 1e6])
def test_downdated_r_equals_pearson_on_the_data_without_the_row(offset: float) -> None:
    """scipy.stats.pearsonr on the data with row i deleted, for every i; data far from zero
    (offset 1e6) checks the two-pass centring, and one row holding nearly all of x's spread checks
    the recomputation where downdating would cancel."""
    x, y = correlated(40, 0.4, seed=3, offset=offset)
    x[7] = offset + 1e4  # leaving this row out removes more than 99.99% of x's centred sum of squares
    loo = leave_one_out_r(x, y)
    for i in range(x.size):
        expected = stats.pearsonr(np.delete(x, i), np.delete(y, i)).statistic
        assert loo[i] == pytest.approx(expected, abs=1e-12), i


def test_interpolated_leave_one_out_matches_direct_exact_posteriors_at_n_200() -> None:
    """For n = 200 (interpolation path) each row's shift and verdicts equal those from calling
    reportgen.exact.exact_posterior(n - 1, r_i) directly; measured median error 1.0e-7 with nodes a quarter
    of a posterior SD apart, allowed 1e-6 (the report shows shifts to 0.001; verdict flips, checked exactly
    below, are computed directly near a cut-off)."""
    n = 200
    x, y = correlated(n, 0.3, seed=5)
    rules = [POSITIVE, MODEST]
    r_loo = leave_one_out_r(x, y)
    # A 'modest' cut-off between the leave-one-out probabilities, so several rows flip it.
    direct = [exact_posterior(n - 1, float(r)) for r in r_loo]
    p_modest = np.array([exact_rule_probability(p, MODEST) for p in direct])
    rules[1] = MODEST.model_copy(update={"required_probability": float(np.median(p_modest))})
    result = leave_one_out(x, y, np.arange(n), 1.0, 1.0, rules, threshold=0.01)
    assert n > DIRECT_MAX_N
    full = exact_posterior(n, float(stats.pearsonr(x, y).statistic))
    assert result.median_full == pytest.approx(full.median, abs=1e-12)
    direct_shifts = np.array([p.median for p in direct]) - full.median
    assert np.max(np.abs(result.shifts - direct_shifts)) < 1e-6
    expected_flips = set()
    for i, posterior in enumerate(direct):
        for rule in rules:
            met = exact_rule_probability(posterior, rule) >= rule.required_probability
            if met != (exact_rule_probability(full, rule) >= rule.required_probability):
                expected_flips.add((i, rule.name))
    assert len(expected_flips) > 10
    assert set(result.flips) == expected_flips
    flagged = {i for i in range(n) if abs(direct_shifts[i]) > 0.01} | {i for i, _ in expected_flips}
    assert set(result.flagged_rows) == flagged
    order = np.abs(result.shifts[result.flagged_positions])
    assert np.all(np.diff(order) <= 0)


def test_anscombe_set_iii_flags_exactly_its_outlier() -> None:
    """Anscombe (1973) set III: ten points on a line and one off it (x = 13, y = 12.74). Without
    it r is 0.99999, so the median moves from about 0.74 to near 1 (measured shift 0.263)."""
    result = leave_one_out(ANSCOMBE_X, ANSCOMBE_Y3, ROWS_11, 1.0, 1.0, [POSITIVE])
    outlier = int(np.flatnonzero(ANSCOMBE_Y3 == 12.74)[0])
    assert ANSCOMBE_X[outlier] == 13
    assert result.applies
    assert result.flagged_positions.tolist() == [outlier]
    assert result.flagged_rows == (int(ROWS_11[outlier]),)
    assert result.shifts[outlier] > 0.2
    assert result.max_shift == pytest.approx(abs(result.shifts[outlier]))
    others = np.delete(np.abs(result.shifts), outlier)
    assert np.max(others) < 0.05


def test_anscombe_set_i_has_no_influential_row_at_the_default_threshold() -> None:
    """Anscombe (1973) set I, well-behaved linear data: no single row moves the median by more than
    0.1 (measured largest shift 0.086, the row with x = 4) and the 'positive' verdict never flips."""
    result = leave_one_out(ANSCOMBE_X, ANSCOMBE_Y1, ROWS_11, 1.0, 1.0, [POSITIVE])
    assert result.flagged_rows == ()
    assert result.flips == ()
    assert 0.05 < result.max_shift < 0.1
    assert result.threshold == 0.1


def test_leaving_out_the_outlier_of_set_iii_flips_a_strong_correlation_rule() -> None:
    """Constructed flip: with all rows P(rho > 0.9) is small; without Anscombe III's outlier the
    rest lie on a line, so the 'strong' rule becomes met (exact posterior, reportgen.exact)."""
    full = exact_posterior(11, float(stats.pearsonr(ANSCOMBE_X, ANSCOMBE_Y3).statistic))
    assert exact_rule_probability(full, STRONG) < 0.5
    result = leave_one_out(ANSCOMBE_X, ANSCOMBE_Y3, ROWS_11, 1.0, 1.0, [POSITIVE, STRONG])
    assert result.flips == ((int(ROWS_11[2]), "strong"),)


def test_a_planted_point_flips_a_rule_on_the_interpolation_path() -> None:
    """n = 300 uncorrelated rows plus one far point that alone makes r clearly positive: the
    'positive' rule is met with it and not without it (exact posterior at r near 0)."""
    rng = np.random.default_rng(8)
    x = np.append(rng.standard_normal(300), 12.0)
    y = np.append(rng.standard_normal(300), 12.0)
    rows = np.arange(1, 302)
    result = leave_one_out(x, y, rows, 1.0, 1.0, [POSITIVE])
    assert result.flips == ((301, "positive"),)
    assert result.flagged_rows[0] == 301
    r_without = stats.pearsonr(x[:-1], y[:-1]).statistic
    assert result.shifts[-1] == pytest.approx(exact_posterior(300, r_without).median - result.median_full, abs=1e-8)


def test_four_rows_do_not_apply_and_five_do() -> None:
    """Common practice: the exact engine needs at least four rows, so n = 4 cannot leave one out."""
    x, y = correlated(5, 0.5, seed=1)
    small = leave_one_out(x[:4], y[:4], np.arange(4), 1.0, 1.0, [POSITIVE])
    assert not small.applies
    assert small.shifts.size == 0 and small.flagged_positions.size == 0
    assert small.flagged_rows == () and small.flips == ()
    assert np.isnan(small.max_shift)
    assert np.isfinite(small.median_full)
    assert leave_one_out(x, y, np.arange(5), 1.0, 1.0, [POSITIVE]).applies


def test_a_row_whose_removal_leaves_a_perfect_line_gets_a_finite_shift() -> None:
    """Without the last row the points lie exactly on y = x (r = 1): r is clipped to 1 - 1e-9 for
    the exact engine, whose median is then within 1e-6 of 1 (a posterior concentrated at r)."""
    x = np.array([1.0, 2.0, 3.0, 4.0, 5.0, 6.0])
    y = np.array([1.0, 2.0, 3.0, 4.0, 5.0, 0.0])
    result = leave_one_out(x, y, np.arange(6), 1.0, 1.0, [POSITIVE])
    assert result.median_full + result.shifts[5] == pytest.approx(1.0, abs=1e-6)
    assert result.flagged_positions[0] == 5


def test_a_row_whose_removal_leaves_a_constant_column_is_flagged_with_no_shift() -> None:
    """x = (0, 0, 0, 0, 0, 1): without the last row x is constant and r is undefined."""
    x = np.array([0.0, 0.0, 0.0, 0.0, 0.0, 1.0])
    y = np.array([0.3, -1.2, 0.8, 0.1, -0.4, 2.0])
    result = leave_one_out(x, y, np.arange(10, 16), 1.0, 1.0, [POSITIVE])
    assert np.isnan(result.shifts[5])
    assert np.all(np.isfinite(result.shifts[:5]))
    assert result.flagged_rows[0] == 15
    assert np.isfinite(result.max_shift)


def test_few_nodes_at_many_rows_still_match_direct_exact_posteriors() -> None:
    """n = 5,000: one row moves r little, so the grid has few nodes (fewer than GRID_POINTS); the shifts of
    the most and least correlated leave-one-out subsamples and of 40 others still equal
    reportgen.exact.exact_posterior(n - 1, r_i) called directly, within 1e-9."""
    n = 5000
    x, y = correlated(n, 0.4, seed=11)
    r_loo = leave_one_out_r(x, y)
    z = np.arctanh(r_loo)
    assert _node_count(n - 1, float(z.max() - z.min())) < GRID_POINTS
    result = leave_one_out(x, y, np.arange(n), 1.0, 1.0, [POSITIVE], threshold=0.01)
    order = np.argsort(r_loo)
    rows = np.unique(np.r_[order[:5], order[-5:], np.random.default_rng(1).choice(n, 40, replace=False)])
    direct = np.array([exact_posterior(n - 1, float(r_loo[i])).median for i in rows]) - result.median_full
    assert np.max(np.abs(result.shifts[rows] - direct)) < 1e-9
    assert result.flips == ()  # P(rho > 0) is 1 to rounding with or without any one row
