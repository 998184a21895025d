"""Shape checks on a pair's rows: outlying rows, bivariate normality, and discreteness of a column.

Outlying rows: the squared Mahalanobis distance of each row from the sample mean, with the sample
covariance. For bivariate-normal rows ``n d^2 / (n - 1)^2`` follows Beta(1, (n - 3)/2) exactly
(Wilks 1963, *Journal of the American Statistical Association* 58(301); Gnanadesikan & Kettenring
1972, *Biometrics* 28(1)); the cut-off is that law's upper ``level / n`` point (Bonferroni over rows).

Bivariate normality: Mardia's multivariate skewness ``b_{1,2}`` and kurtosis ``b_{2,2}`` with their
large-sample tests (Mardia 1970, *Biometrika* 57(3)): ``n b1 / 6 ~ chi2(4)`` and
``(b2 - 8) / sqrt(64 / n) ~ N(0, 1)`` for p = 2. The two p-values are combined by Bonferroni.

Skewness in O(n): with whitened rows ``z_i``, ``sum_ij (z_i'z_j)^3 = n^2 sum_abc m_abc^2`` where
``m_abc`` is the mean of ``z_a z_b z_c`` over rows (expand the cube and swap the sums). For two
coordinates the 8 index triples group into ``m30^2 + 3 m21^2 + 3 m12^2 + m03^2``. Both statistics are
invariant to the choice of whitening matrix (any two differ by a rotation), so the Cholesky factor is
used: ``z1 = u``, ``z2 = (w - r u) / sqrt(1 - r^2)`` with ``u``, ``w`` the standardised columns.

Discreteness: how many distinct values a column has and the share of rows whose value is tied with
another row's (common practice for spotting ordinal or rounded data).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from reportgen.checks import pair_rows

MIN_ROWS = 4  # the Beta law of the distances needs n > 3
DEGENERATE_ONE_MINUS_R2 = 1e-12  # below this 1 - r^2 the covariance is treated as singular


@dataclass(frozen=True)
class Shape:
    """Outlying rows and tests of bivariate normality for one pair (nan fields: degenerate data)."""

    mahalanobis_sq: np.ndarray  # squared distance of each row from the mean (sample covariance, ddof=1)
    expected_sq: np.ndarray  # chi-square(2) quantiles at (i - 0.5)/n, for a Q-Q plot of the sorted distances
    outlier_cutoff: float  # distance^2 beyond which a row is flagged
    outlier_positions: np.ndarray  # indices of flagged rows, largest distance first
    outlier_rows: tuple[int, ...]  # input row numbers of the same rows
    skewness: float  # Mardia's b_{1,2}
    skewness_p: float  # p-value of n*b1/6 against chi-square with 4 df
    kurtosis: float  # Mardia's b_{2,2}
    kurtosis_p: float  # two-sided p-value of (b2 - 8)/sqrt(64/n) against N(0, 1)
    normality_p: float  # min(1, 2*min(skewness_p, kurtosis_p)) (Bonferroni)


@dataclass(frozen=True)
class Discreteness:
    """Whether a column looks discrete (few levels or many ties)."""

    distinct: int
    tied_share: float  # share of rows whose value also occurs in another row
    discrete: bool  # distinct <= max_distinct or tied_share >= max_tied_share


def chi2_2_plotting_quantiles(n: int) -> np.ndarray:
    """Chi-square(2) quantiles at (i - 0.5)/n, i = 1..n: ``-2 log(1 - p)`` in closed form."""
    p = (np.arange(1, n + 1) - 0.5) / n
    return -2.0 * np.log1p(-p)


def distance_cutoff(n: int, level: float) -> float:
    """Squared distance exceeded by any of n bivariate-normal rows with probability at most ``level``.

    ``n d^2 / (n - 1)^2 ~ Beta(1, b)`` with ``b = (n - 3)/2`` has survival function ``(1 - t)^b``,
    so its upper ``q = level / n`` point is ``1 - q^(1/b)``, formed with ``expm1`` for accuracy.
    """
    if n < MIN_ROWS:
        return float("nan")
    b = (n - 3) / 2.0
    upper_point = -np.expm1(np.log(level / n) / b)
    return float((n - 1) ** 2 / n * upper_point)


def _whitened(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
    """Rows whitened with the divisor-n covariance (Cholesky factor); None when it is singular."""
    n = x.size
    dx = x - np.mean(x)
    dy = y - np.mean(y)
    sxx, syy, sxy = float(dx @ dx), float(dy @ dy), float(dx @ dy)
    if not (sxx > 0.0 and syy > 0.0):
        return None
    r = float(np.clip(sxy / np.sqrt(sxx * syy), -1.0, 1.0))
    one_minus_r2 = (1.0 - r) * (1.0 + r)
    if one_minus_r2 < DEGENERATE_ONE_MINUS_R2:
        return None
    u = dx * np.sqrt(n / sxx)
    w = dy * np.sqrt(n / syy)
    return u, (w - r * u) / np.sqrt(one_minus_r2)


def mardia_statistics(z1: np.ndarray, z2: np.ndarray) -> tuple[float, float]:
    """Mardia's b_{1,2} (from third-order moments, O(n)) and b_{2,2} for whitened rows."""
    z1_sq = z1 * z1
    z2_sq = z2 * z2
    m30 = float(np.mean(z1_sq * z1))
    m21 = float(np.mean(z1_sq * z2))
    m12 = float(np.mean(z1 * z2_sq))
    m03 = float(np.mean(z2_sq * z2))
    b1 = m30 * m30 + 3.0 * m21 * m21 + 3.0 * m12 * m12 + m03 * m03
    radius_sq = z1_sq + z2_sq
    b2 = float(np.mean(radius_sq * radius_sq))
    return b1, b2


def shape_checks(x: np.ndarray, y: np.ndarray, row_numbers: np.ndarray, level: float = 0.05) -> Shape:
    """Mahalanobis distances with a Bonferroni cut-off, and Mardia's tests of bivariate normality."""
    x, y, row_numbers = pair_rows(x, y, row_numbers)
    if not (0.0 < level < 1.0):
        raise ValueError(f"level must lie strictly between 0 and 1, got {level!r}")
    n = x.size
    expected = chi2_2_plotting_quantiles(n)
    whitened = _whitened(x, y) if n >= MIN_ROWS else None
    if whitened is None:
        nan = float("nan")
        return Shape(mahalanobis_sq=np.full(n, np.nan), expected_sq=expected, outlier_cutoff=nan,
                     outlier_positions=np.empty(0, dtype=np.intp), outlier_rows=(), skewness=nan,
                     skewness_p=nan, kurtosis=nan, kurtosis_p=nan, normality_p=nan)
    z1, z2 = whitened
    # z1^2 + z2^2 is the distance under the divisor-n covariance; the sample covariance is
    # n/(n - 1) times larger, so its distance is (n - 1)/n times smaller.
    distance_sq = (z1 * z1 + z2 * z2) * ((n - 1) / n)
    cutoff = distance_cutoff(n, level)
    beyond = np.flatnonzero(distance_sq > cutoff)
    positions = beyond[np.argsort(-distance_sq[beyond], kind="stable")]

    b1, b2 = mardia_statistics(z1, z2)
    skewness_p = float(stats.chi2.sf(n * b1 / 6.0, 4))
    kurtosis_z = (b2 - 8.0) / np.sqrt(64.0 / n)
    kurtosis_p = float(2.0 * stats.norm.sf(abs(kurtosis_z)))
    return Shape(
        mahalanobis_sq=distance_sq,
        expected_sq=expected,
        outlier_cutoff=cutoff,
        outlier_positions=positions,
        outlier_rows=tuple(int(row_numbers[p]) for p in positions),
        skewness=b1,
        skewness_p=skewness_p,
        kurtosis=b2,
        kurtosis_p=kurtosis_p,
        normality_p=min(1.0, 2.0 * min(skewness_p, kurtosis_p)),
    )


def discreteness(values: np.ndarray, *, max_distinct: int = 10, max_tied_share: float = 0.1) -> Discreteness:
    """Count distinct values and tied pairs of rows; discrete when there are few levels or many ties.

    The tied share is the share of all pairs of rows that hold the same value, sum t(t - 1) / (n(n - 1))
    over groups of t tied values: the ties Kendall's tau-b adjusts for (Kendall 1970). Values rounded to
    a fine step tie in small groups and keep it near zero; a five-point scale or a column that is zero
    in half its rows gives 0.2 or more.
    """
    flat = np.asarray(values).ravel()
    if flat.size < 2:
        return Discreteness(distinct=int(flat.size), tied_share=0.0, discrete=True)
    _, counts = np.unique(flat, return_counts=True)
    t = counts.astype(float)
    tied_share = float(np.sum(t * (t - 1.0)) / (flat.size * (flat.size - 1.0)))
    return Discreteness(
        distinct=int(counts.size),
        tied_share=tied_share,
        # few levels count only where values repeat: ten rows with ten different values are not coarse
        discrete=bool((counts.size <= max_distinct and counts.size < flat.size) or tied_share >= max_tied_share),
    )
