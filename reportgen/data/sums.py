"""The sufficient statistics of a pair: n, the two means and the centred sums of squares and products.

The bivariate-normal likelihood needs nothing else, so every fit costs the same whatever the number
of rows. The sums are taken after centring on a pivot, so that large common offsets keep their digits.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["PERFECT_CORRELATION", "PERFECT_CORRELATION_COMPLEMENT", "SufficientStats", "centred", "sufficient_stats",
           "sums_of_centred"]

# 1 - |r| this small means one column is an exact linear function of the other. The test reads the
# complement computed from the residuals (SufficientStats.one_minus_abs_r), not the rounded r; the
# exact engine honours every complement down to exact.MIN_ONE_MINUS_ABS_R, far below this bound.
PERFECT_CORRELATION_COMPLEMENT = 1e-12
PERFECT_CORRELATION = 1.0 - PERFECT_CORRELATION_COMPLEMENT  # the same bound on |r|

@dataclass(frozen=True)
class SufficientStats:
    """What the bivariate-normal likelihood needs from the rows of one pair."""

    n: int
    mean_x: float
    mean_y: float
    sxx: float  # sum of (x - mean_x)^2
    syy: float
    sxy: float  # sum of (x - mean_x)(y - mean_y)
    # sum of squared residuals of y on x, sum (dy - (sxy/sxx) dx)^2, so that 1 - r^2 = rss / syy keeps its
    # digits when |r| is within rounding of 1; None when unknown (statistics built without the rows)
    rss: float | None = None

    @property
    def sd_x(self) -> float:
        return float(np.sqrt(self.sxx / (self.n - 1)))

    @property
    def sd_y(self) -> float:
        return float(np.sqrt(self.syy / (self.n - 1)))

    @property
    def sample_r(self) -> float:
        return float(self.sxy / np.sqrt(self.sxx * self.syy))

    @property
    def one_minus_abs_r(self) -> float:
        """``1 - |r|`` without the cancellation of forming it from r: ``(1 - r^2) / (1 + |r|)`` with
        ``1 - r^2 = rss / syy``; ``1 - |r|`` itself when the residual sum is unknown."""
        abs_r = abs(self.sample_r)
        if self.rss is None:
            return 1.0 - abs_r
        return float(self.rss / self.syy / (1.0 + abs_r))


def centred(values: np.ndarray) -> tuple[float, np.ndarray]:
    """The mean and the deviations from it, taken after subtracting a pivot (the median).

    Summing values with a large common offset (1e15 + u) rounds the sum to the offset's float
    spacing, and that error in the mean then enters every square. Near the pivot the differences
    are exact (Sterbenz: two floats within a factor 2 of each other subtract exactly), so the mean
    of the differences, and the deviations from it, keep the digits of u.
    """
    pivot = float(np.median(values))
    shifted = values - pivot
    shift_mean = float(np.mean(shifted))
    return pivot + shift_mean, shifted - shift_mean


def sufficient_stats(x: np.ndarray, y: np.ndarray) -> SufficientStats:
    """Pivot-centred two-pass sums, which stay accurate when the means are large, plus the residual
    sum of squares of y on x from a further pass, so that ``1 - |r|`` keeps its digits near 1."""
    mean_x, dx = centred(x)
    mean_y, dy = centred(y)
    return sums_of_centred(mean_x, dx, mean_y, dy)


def sums_of_centred(mean_x: float, dx: np.ndarray, mean_y: float, dy: np.ndarray, *, sxx: float | None = None,
                    syy: float | None = None) -> SufficientStats:
    """``sufficient_stats`` from columns already centred by ``centred``; ``sxx`` and ``syy`` may be given
    when known (``dx @ dx``, ``dy @ dy``), so a column shared by many pairs is centred and squared once."""
    sxx = float(dx @ dx) if sxx is None else sxx
    sxy = float(dx @ dy)
    residual = dy - (sxy / sxx) * dx if sxx > 0.0 else dy
    return SufficientStats(
        n=int(dx.size),
        mean_x=mean_x,
        mean_y=mean_y,
        sxx=sxx,
        syy=float(dy @ dy) if syy is None else syy,
        sxy=sxy,
        rss=float(residual @ residual),
    )


