"""Posterior predictive check of the bivariate-normal model: does data replicated from the fit look like the data?

Method: posterior predictive p-values (Rubin 1984, *Annals of Statistics* 12(4); Gelman, Meng & Stern 1996,
*Statistica Sinica* 6(4)). For each of a set of posterior draws a data set of the observed size is replicated
from the model and a statistic of it is compared with the observed one; the two-sided tail probability is
``min(1, 2 min(P(rep >= obs), P(rep <= obs)))``.

Two statistics are used, both location-scale invariant, so under the normal model their replicated
distributions need no draws of the means or SDs:

* the sample correlation ``r``, whose distribution depends on ``rho`` only. It is drawn in O(1) per replicate,
  whatever the number of rows: the centred scatter matrix of n bivariate-normal rows is Wishart with ``n - 1``
  degrees of freedom, and by Bartlett's decomposition (Bartlett 1933, *Proc. R. Soc. Edinb.* 53) with
  ``c1^2 ~ chi2(n - 1)``, ``c2^2 ~ chi2(n - 2)``, ``z ~ N(0, 1)`` independent and ``t = rho c1 + sqrt(1 - rho^2) z``,
  the sample correlation is ``t / sqrt(t^2 + (1 - rho^2) c2^2)``;
* each margin's sample skewness ``g1 = m3 / m2^1.5`` (scipy.stats.skew with bias=True), whose distribution
  under normality depends on nothing but n. Up to ``SIMULATED_SKEW_MAX_N`` rows it is simulated from standard
  normal samples (one reference set serves both margins, as their replicated distributions are the same).
  Above that the reference is D'Agostino's transformation of g1 to a standard normal deviate (D'Agostino 1970,
  *Biometrika* 57(3); D'Agostino, Belanger & D'Agostino 1990, *The American Statistician* 44(4); the z of
  scipy.stats.skewtest), built on g1's exact variance ``6(n - 2) / ((n + 1)(n + 3))`` and kurtosis under
  normality (Pearson 1930, *Biometrika* 22; Fisher 1930, *Proc. R. Soc. A* 130). Its tail probabilities agree
  with simulations of 40,000 to 100,000 replicates within their sampling error from n = 50 (measured at
  n = 50, 200, 500 and 1000), so above the switch it is more accurate than ``replicates`` simulated samples
  would be, and costs nothing per row: simulating would cost n x replicates normal values per pair.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

SIMULATED_SKEW_MAX_N = 200  # above this many rows the skewness reference is D'Agostino's transformation
_VALUES_PER_BLOCK = 2_000_000  # simulated normal values held in memory at once (16 MB)


@dataclass(frozen=True)
class PredictiveCheck:
    """Observed statistics and their two-sided posterior predictive tail probabilities."""

    observed_r: float
    observed_skew_x: float
    observed_skew_y: float
    p_r: float  # two-sided posterior predictive tail probability: min(1, 2*min(P(rep >= obs), P(rep <= obs)))
    p_skew_x: float
    p_skew_y: float
    replicates: int


def replicated_correlations(rho: np.ndarray, n: int, rng: np.random.Generator) -> np.ndarray:
    """One replicated sample correlation of ``n`` bivariate-normal rows per value of ``rho``.

    Drawn through the Bartlett decomposition of the Wishart(n - 1) scatter matrix (see the module docstring),
    so the cost does not depend on ``n``.
    """
    rho = np.asarray(rho, dtype=float)
    if n < 3:
        raise ValueError(f"a replicated correlation needs at least 3 rows, got n = {n}")
    # the three draws are made in a fixed order, so a seed fixes the result
    c1 = np.sqrt(rng.chisquare(n - 1, size=rho.shape))
    c2 = np.sqrt(rng.chisquare(n - 2, size=rho.shape))
    z = rng.standard_normal(size=rho.shape)
    s = np.sqrt(np.clip(1.0 - rho * rho, 0.0, None))
    t = rho * c1 + s * z
    return t / np.sqrt(t * t + (s * c2) ** 2)


def normal_skewness_variance(n: int) -> float:
    """Exact variance of the sample skewness g1 of n normal values: 6(n - 2) / ((n + 1)(n + 3)) (Pearson 1930)."""
    return 6.0 * (n - 2) / ((n + 1.0) * (n + 3.0))


def dagostino_skewness_z(g1: float, n: int) -> float:
    """D'Agostino's (1970) standard normal deviate for the sample skewness g1 of n values (n >= 8).

    ``y = g1 / sd(g1)``; with ``beta2`` the kurtosis of g1 under normality,
    ``W^2 = sqrt(2 (beta2 - 1)) - 1``, ``delta = 1 / sqrt(ln W)`` and ``alpha = sqrt(2 / (W^2 - 1))``,
    ``z = delta asinh(y / alpha)`` is close to standard normal under normality.
    """
    if n < 8:
        raise ValueError(f"D'Agostino's transformation needs at least 8 rows, got n = {n}")
    y = g1 / np.sqrt(normal_skewness_variance(n))
    beta2 = (3.0 * (n * n + 27.0 * n - 70.0) * (n + 1.0) * (n + 3.0)
             / ((n - 2.0) * (n + 5.0) * (n + 7.0) * (n + 9.0)))
    w_squared = np.sqrt(2.0 * (beta2 - 1.0)) - 1.0
    delta = 1.0 / np.sqrt(0.5 * np.log(w_squared))
    alpha = np.sqrt(2.0 / (w_squared - 1.0))
    return float(delta * np.arcsinh(y / alpha))


def simulated_skewness(n: int, replicates: int, rng: np.random.Generator) -> np.ndarray:
    """Sample skewness (bias=True) of ``replicates`` standard normal samples of size ``n``, in memory-sized blocks."""
    rows_per_block = max(1, _VALUES_PER_BLOCK // n)
    out = np.empty(replicates)
    for start in range(0, replicates, rows_per_block):
        stop = min(replicates, start + rows_per_block)
        out[start:stop] = stats.skew(rng.standard_normal((stop - start, n)), axis=1, bias=True)
    return out


def tail_probability(replicated: np.ndarray, observed: float) -> float:
    """Two-sided tail probability of ``observed`` among ``replicated``; nan when the observed value is nan."""
    if not np.isfinite(observed):
        return float("nan")
    upper = float(np.mean(replicated >= observed))
    lower = float(np.mean(replicated <= observed))
    return min(1.0, 2.0 * min(upper, lower))


def _sample_correlation(x: np.ndarray, y: np.ndarray) -> float:
    dx, dy = x - x.mean(), y - y.mean()
    sxx, syy = float(dx @ dx), float(dy @ dy)
    if sxx <= 0.0 or syy <= 0.0:
        return float("nan")
    return float(np.clip(float(dx @ dy) / np.sqrt(sxx * syy), -1.0, 1.0))


def _sample_skewness(values: np.ndarray) -> float:
    """g1 = m3 / m2^1.5 (scipy.stats.skew with bias=True, without its per-call overhead); nan for a column
    whose spread is lost in rounding against its mean, as scipy gives."""
    # a constant column has no skewness; scipy would warn and return nan or a rounding artefact
    if np.ptp(values) == 0.0:
        return float("nan")
    mean = float(np.mean(values))
    deviations = values - mean
    squares = deviations * deviations
    m2 = float(np.mean(squares))
    if m2 <= (np.finfo(float).eps * mean) ** 2:
        return float("nan")
    return float(np.mean(squares * deviations)) / m2**1.5


def _evenly_spaced(draws: np.ndarray, count: int) -> np.ndarray:
    """``count`` draws picked at evenly spaced positions (across chains when the draws are (chain, draw))."""
    flat = np.ravel(np.asarray(draws, dtype=float))
    flat = flat[np.isfinite(flat)]
    if flat.size == 0:
        raise ValueError("rho_draws holds no finite draw")
    positions = np.round(np.linspace(0, flat.size - 1, count)).astype(int)
    return np.clip(flat[positions], -1.0, 1.0)


def predictive_check(
    rho_draws: np.ndarray, x: np.ndarray, y: np.ndarray, seed: int, replicates: int = 1000
) -> PredictiveCheck:
    """Posterior predictive tail probabilities of the sample correlation and of each margin's skewness.

    ``rho_draws``: posterior draws of rho under the normal model, any shape; ``x``, ``y``: the pair's complete
    rows. The same ``seed`` gives the same result.
    """
    x = np.asarray(x, dtype=float).ravel()
    y = np.asarray(y, dtype=float).ravel()
    if x.size != y.size:
        raise ValueError(f"x and y must have the same number of rows, got {x.size} and {y.size}")
    if replicates < 1:
        raise ValueError(f"replicates must be at least 1, got {replicates}")
    n = x.size
    rng = np.random.Generator(np.random.PCG64(seed))
    observed_r = _sample_correlation(x, y)
    replicated_r = replicated_correlations(_evenly_spaced(rho_draws, replicates), n, rng)
    skew_x, skew_y = _sample_skewness(x), _sample_skewness(y)
    if n <= SIMULATED_SKEW_MAX_N:
        reference = simulated_skewness(n, replicates, rng)
        p_skew_x, p_skew_y = tail_probability(reference, skew_x), tail_probability(reference, skew_y)
    else:  # the transformed skewness is symmetric about 0, so the two-sided tail is 2 P(Z >= |z|)
        p_skew_x, p_skew_y = (float(2.0 * stats.norm.sf(abs(dagostino_skewness_z(g, n)))) if np.isfinite(g)
                              else float("nan") for g in (skew_x, skew_y))
    return PredictiveCheck(
        observed_r=observed_r,
        observed_skew_x=skew_x,
        observed_skew_y=skew_y,
        p_r=tail_probability(replicated_r, observed_r),
        p_skew_x=p_skew_x,
        p_skew_y=p_skew_y,
        replicates=replicates,
    )
