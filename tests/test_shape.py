"""Outlying rows, Mardia's tests of bivariate normality, and discreteness of a column."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from scipy.spatial.distance import mahalanobis

from reportgen.checks.shape import discreteness, distance_cutoff, shape_checks

# Anscombe (1973), "Graphs in statistical analysis", The American Statistician 27(1), Table 1,
# typed from memory of the published table.
ANSCOMBE_X = np.array([10, 8, 13, 9, 11, 14, 6, 4, 12, 7, 5], dtype=float)
ANSCOMBE_Y1 = np.array([8.04, 6.95, 7.58, 8.81, 8.33, 9.96, 7.24, 4.26, 10.84, 4.82, 5.68])
ANSCOMBE_Y3 = np.array([7.46, 6.77, 12.74, 7.11, 7.81, 8.84, 6.08, 5.39, 8.15, 6.42, 5.73])
COVARIANCE = np.array([[2.0, 0.8], [0.8, 1.0]])


def normal_sets(count: int, n: int, seed: int) -> np.ndarray:
    """``count`` bivariate-normal data sets of ``n`` rows, shape (count, n, 2)."""
    rng = np.random.default_rng(seed)
    return rng.standard_normal((count, n, 2)) @ np.linalg.cholesky(COVARIANCE).T + np.array([1.0, -2.0])


def mardia_by_definition(v: np.ndarray) -> tuple[float, float]:
    """Mardia (1970), Biometrika 57(3), the definitions as written: z_i = S^(-1/2)(v_i - mean) with the
    symmetric inverse square root of the divisor-n covariance, b1 = sum_ij (z_i'z_j)^3 / n^2 (O(n^2)),
    b2 = sum_i (z_i'z_i)^2 / n."""
    centred = v - v.mean(axis=0)
    values, vectors = np.linalg.eigh(centred.T @ centred / v.shape[0])
    z = centred @ (vectors @ np.diag(values**-0.5) @ vectors.T)
    gram = z @ z.T
    return float(np.sum(gram**3) / v.shape[0] ** 2), float(np.mean(np.diag(gram) ** 2))


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_mardia_statistics_in_linear_time_equal_the_double_sum(seed: int) -> None:
    """The O(n) third-moment form of b1 (and b2) equals Mardia's (1970) O(n^2) definition, also on
    skewed data (exponential margins), where b1 is far from 0."""
    rng = np.random.default_rng(seed)
    v = np.column_stack([rng.exponential(size=25), rng.standard_normal(25)])
    v[:, 1] += 0.6 * v[:, 0]
    shape = shape_checks(v[:, 0], v[:, 1], np.arange(25))
    b1, b2 = mardia_by_definition(v)
    assert shape.skewness == pytest.approx(b1, rel=1e-10)
    assert shape.kurtosis == pytest.approx(b2, rel=1e-10)
    assert shape.skewness > 0.5


def test_distances_equal_scipy_mahalanobis_with_the_sample_covariance() -> None:
    """scipy.spatial.distance.mahalanobis with the inverse of numpy.cov (ddof = 1); the Q-Q
    reference equals scipy.stats.chi2(2).ppf((i - 0.5)/n)."""
    v = normal_sets(1, 30, seed=4)[0]
    shape = shape_checks(v[:, 0], v[:, 1], np.arange(30))
    inverse = np.linalg.inv(np.cov(v.T))
    expected = [mahalanobis(row, v.mean(axis=0), inverse) ** 2 for row in v]
    np.testing.assert_allclose(shape.mahalanobis_sq, expected, rtol=1e-12)
    np.testing.assert_allclose(shape.expected_sq, stats.chi2.ppf((np.arange(1, 31) - 0.5) / 30, 2), rtol=1e-12)


def test_mardia_tests_hold_their_level_on_normal_data() -> None:
    """Simulated null distribution (Mardia 1970): 400 bivariate-normal data sets of n = 100. Both
    tests reject at 5% in under 8% of sets (measured 3.5% and 3.25%), and the p-values spread over
    (0, 1) instead of piling up at an end."""
    sets = normal_sets(400, 100, seed=11)
    shapes = [shape_checks(v[:, 0], v[:, 1], np.arange(100)) for v in sets]
    for p in (np.array([s.skewness_p for s in shapes]), np.array([s.kurtosis_p for s in shapes])):
        assert 0.005 < np.mean(p < 0.05) < 0.08
        assert np.quantile(p, 0.1) < 0.3 and 0.3 < np.median(p) < 0.7 and np.quantile(p, 0.9) > 0.7
    combined = np.array([s.normality_p for s in shapes])
    assert np.mean(combined < 0.05) < 0.08


def test_mean_kurtosis_matches_mardias_exact_expectation() -> None:
    """Mardia (1970), exact mean under normality (formula from memory): E[b2] = p(p + 2)(n - 1)/(n + 1),
    7.484 at p = 2, n = 30, against 400 simulated sets; precise enough to tell it from the limit 8."""
    n = 30
    b2 = np.array([shape_checks(v[:, 0], v[:, 1], np.arange(n)).kurtosis for v in normal_sets(400, n, seed=12)])
    standard_error = b2.std(ddof=1) / np.sqrt(b2.size)
    exact = 8.0 * (n - 1) / (n + 1)
    assert abs(b2.mean() - exact) < 3 * standard_error
    assert abs(b2.mean() - 8.0) > 3 * standard_error


def test_heavy_tails_fail_the_normality_check() -> None:
    """Multivariate t with 3 degrees of freedom (scipy.stats.multivariate_t), n = 200: kurtosis far
    above 8, so the combined p-value is below 0.01."""
    v = stats.multivariate_t(loc=[0.0, 0.0], shape=COVARIANCE, df=3, seed=5).rvs(200)
    assert shape_checks(v[:, 0], v[:, 1], np.arange(200)).normality_p < 0.01


def test_scaled_distances_follow_the_beta_law() -> None:
    """n d^2/(n - 1)^2 ~ Beta(1, (n - 3)/2) exactly for normal rows (Wilks 1963; Gnanadesikan &
    Kettenring 1972), checked with scipy.stats.kstest on the first row of 4000 sets of n = 12; the
    same sample rejects the large-sample chi-square(2) law, so the check can tell them apart."""
    n = 12
    first_rows = np.array([shape_checks(v[:, 0], v[:, 1], np.arange(n)).mahalanobis_sq[0]
                           for v in normal_sets(4000, n, seed=13)])
    assert stats.kstest(n * first_rows / (n - 1) ** 2, stats.beta(1, (n - 3) / 2).cdf).pvalue > 0.01
    assert stats.kstest(first_rows, stats.chi2(2).cdf).pvalue < 0.01


@pytest.mark.parametrize("n", [4, 11, 1000, 10**7])
def test_cutoff_is_the_bonferroni_point_of_the_beta_law(n: int) -> None:
    """scipy.stats.beta(1, (n - 3)/2).isf(level/n), scaled by (n - 1)^2/n."""
    expected = (n - 1) ** 2 / n * stats.beta(1, (n - 3) / 2).isf(0.05 / n)
    assert distance_cutoff(n, 0.05) == pytest.approx(expected, rel=1e-10)


def test_anscombe_set_iii_outlier_is_flagged_and_set_i_is_clean() -> None:
    """Anscombe (1973): in set III the other ten points lie on a line, so the point (13, 12.74) has
    the largest squared distance any row can have, (n - 1)^2/n = 9.09 (the end of the Beta law's
    support, Wilks 1963), beyond the
    cut-off 6.73 at level 0.05 / 11; set I has no row beyond it (largest 4.14)."""
    rows = np.arange(2, 13)
    outlier = int(np.flatnonzero(ANSCOMBE_Y3 == 12.74)[0])
    three = shape_checks(ANSCOMBE_X, ANSCOMBE_Y3, rows)
    assert three.outlier_positions.tolist() == [outlier]
    assert three.outlier_rows == (int(rows[outlier]),)
    assert three.mahalanobis_sq[outlier] == pytest.approx(100 / 11, rel=1e-4)
    assert three.outlier_cutoff == pytest.approx(6.7304, abs=1e-4)
    one = shape_checks(ANSCOMBE_X, ANSCOMBE_Y1, rows)
    assert one.outlier_rows == ()
    assert one.mahalanobis_sq.max() < one.outlier_cutoff


def test_outliers_are_listed_largest_first() -> None:
    v = normal_sets(1, 200, seed=14)[0]
    v[17] = [30.0, -30.0]
    v[99] = [12.0, -12.0]
    shape = shape_checks(v[:, 0], v[:, 1], np.arange(1000, 1200))
    assert shape.outlier_rows[:2] == (1017, 1099)
    assert np.all(np.diff(shape.mahalanobis_sq[shape.outlier_positions]) <= 0)


def test_degenerate_columns_give_empty_checks_instead_of_errors() -> None:
    constant = shape_checks(np.ones(10), np.arange(10.0), np.arange(10))
    line = shape_checks(np.arange(10.0), 2 * np.arange(10.0) + 1, np.arange(10))
    for shape in (constant, line):
        assert np.all(np.isnan(shape.mahalanobis_sq)) and shape.outlier_rows == ()
        assert np.isnan(shape.normality_p) and np.isnan(shape.outlier_cutoff)


def test_an_ordinal_column_is_discrete_and_a_continuous_one_is_not() -> None:
    """Common practice: a five-point rating scale has few levels and nearly every row is tied."""
    rng = np.random.default_rng(15)
    ordinal = discreteness(rng.integers(1, 6, size=300).astype(float))
    # five equally likely levels: about 1/5 of all pairs of rows tie
    assert ordinal.distinct == 5 and ordinal.tied_share == pytest.approx(0.2, abs=0.02) and ordinal.discrete
    continuous = discreteness(rng.standard_normal(300))
    assert continuous.distinct == 300 and continuous.tied_share == 0.0 and not continuous.discrete
    rounded = discreteness(np.array([1.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0, 10.0, 11.0]))
    assert rounded.distinct == 11 and rounded.tied_share == pytest.approx(2 / (12 * 11)) and not rounded.discrete
    # a normal column rounded to a fine step ties in small groups: not coarse
    assert not discreteness(np.round(rng.normal(7.4, 0.25, 84), 2)).discrete
    zero_inflated = np.concatenate([np.zeros(150), rng.exponential(size=150)])
    assert discreteness(zero_inflated).discrete  # half the rows share one value
