"""Plain functions on arrays: intervals, rule probabilities, densities, and the
frequentist reference. No PyMC, no templates: each is tested on its own.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats as sps
from scipy.signal import fftconvolve

from reportgen.exact import fisher_z_interval
from reportgen.spec import Rope, Rule


def central_interval(draws: np.ndarray, mass: float) -> tuple[float, float]:
    """Equal-tailed credible interval holding ``mass`` of the draws."""
    tail = (1.0 - mass) / 2.0
    lower, upper = np.quantile(np.ravel(draws), [tail, 1.0 - tail])
    return float(lower), float(upper)


def hdi_interval(draws: np.ndarray, mass: float) -> tuple[float, float]:
    """Shortest interval holding ``mass`` of the draws (ArviZ's HDI, unimodal case)."""
    import arviz as az

    lower, upper = az.hdi(np.ravel(draws), hdi_prob=mass)
    return float(lower), float(upper)


def interval(draws: np.ndarray, mass: float, kind: str) -> tuple[float, float]:
    return hdi_interval(draws, mass) if kind == "hdi" else central_interval(draws, mass)


def rule_indicator(rho: np.ndarray, rule: Rule) -> np.ndarray:
    """Whether each draw satisfies the rule's statement, in the draws' own shape."""
    values = np.asarray(rho)
    if rule.statement == "above":
        return values > rule.threshold
    if rule.statement == "below":
        return values < rule.threshold
    return (values > rule.lower) & (values < rule.upper)


def rule_probability(rho: np.ndarray, rule: Rule) -> float:
    """Posterior probability of the rule's statement, the share of draws where it holds."""
    return float(np.mean(rule_indicator(rho, rule)))


def rope_probability(rho: np.ndarray, rope: Rope) -> float:
    values = np.ravel(rho)
    return float(np.mean((values >= rope.lower) & (values <= rope.upper)))


def rope_decision(hdi: tuple[float, float], rope: Rope) -> str:
    """HDI + ROPE decision rule (Kruschke 2018, Adv. Methods Pract. Psychol. Sci. 1(2)).

    "practically_zero": the whole HDI lies inside the ROPE; "not_zero": the HDI
    lies wholly outside it; otherwise "undecided".
    """
    lower, upper = hdi
    if lower >= rope.lower and upper <= rope.upper:
        return "practically_zero"
    if upper < rope.lower or lower > rope.upper:
        return "not_zero"
    return "undecided"


# Binned kernel density (see ``bounded_density``): fine-grid points per bandwidth, the kernel's reach in
# bandwidths (beyond 9 the Gaussian is below 3e-18 of its peak), and the most fine-grid points allowed
# before the density is summed directly instead.
BIN_POINTS_PER_BANDWIDTH = 64
KERNEL_REACH = 9.0
MAX_BINS = 1 << 18


def scott_bandwidth(values: np.ndarray) -> float:
    """Scott's rule in one dimension: sample SD (ddof = 1) times n^(-1/5), as scipy.stats.gaussian_kde uses."""
    return float(np.std(values, ddof=1)) * values.size ** (-0.2)


def _binned_kde(values: np.ndarray, bandwidth: float, grid: np.ndarray) -> np.ndarray | None:
    """Gaussian kernel density of ``values`` at the evenly spaced ``grid``, by linear binning and FFT.

    The draws are spread onto a fine grid holding the output grid's points (each draw's unit weight is
    split between its two neighbouring fine points in proportion to closeness), and the binned weights
    are convolved with the sampled kernel (Silverman 1982, *Appl. Statist.* 31(1); Wand 1994, *J. Comput.
    Graph. Statist.* 3(4)). Draws more than ``KERNEL_REACH`` bandwidths outside the grid add nothing
    visible and are left out. None for a one-point grid or when the fine grid would need more than
    ``MAX_BINS`` points.
    """
    if grid.size < 2:
        return None
    step = float(grid[1] - grid[0])
    per_step = max(1, math.ceil(BIN_POINTS_PER_BANDWIDTH * step / bandwidth))
    fine_step = step / per_step
    pad = math.ceil(KERNEL_REACH * bandwidth / fine_step)
    size = (grid.size - 1) * per_step + 1 + 2 * pad
    if size > MAX_BINS:
        return None
    position = (values - (float(grid[0]) - pad * fine_step)) / fine_step
    inside = (position >= 0.0) & (position <= size - 1)
    position = position[inside]
    left = np.minimum(np.floor(position).astype(np.intp), size - 2)
    share_right = position - left
    weights = (np.bincount(left, weights=1.0 - share_right, minlength=size)
               + np.bincount(left + 1, weights=share_right, minlength=size))
    offsets = np.arange(-pad, pad + 1) * (fine_step / bandwidth)
    kernel = np.exp(-0.5 * offsets * offsets) / (math.sqrt(2.0 * math.pi) * bandwidth)
    smoothed = fftconvolve(weights, kernel, mode="same")
    # FFT rounding leaves values of order 1e-16 of the peak, of either sign, where the density is nil
    return np.maximum(smoothed[pad:size - pad:per_step], 0.0)


def bounded_density(
    draws: np.ndarray,
    lower: float | None = None,
    upper: float | None = None,
    grid_size: int = 256,
    offset: float = 0.0,
) -> tuple[np.ndarray, np.ndarray]:
    """Gaussian kernel density on a grid, reflected at known bounds.

    The kernel is Gaussian with Scott's bandwidth (Scott 1992, *Multivariate Density Estimation*),
    the density of scipy.stats.gaussian_kde. Reflection keeps the density from leaking past a
    bound such as rho = 1 or sigma = 0 (common practice; Silverman 1986, Density Estimation, sec. 2.10):
    each draw's mirror image in the bound is added as a draw, which is the same as adding the density
    at the mirrored grid.

    It is computed by linear binning onto a fine grid and an FFT convolution (``_binned_kde``), in
    O(draws + fine grid log fine grid) instead of O(draws x grid); with ``BIN_POINTS_PER_BANDWIDTH``
    fine points per bandwidth it agrees with the direct sum to within about 1e-5 of the peak (measured
    in tests/test_density.py). Where the bandwidth is so small against the grid's span that the fine
    grid would exceed ``MAX_BINS`` points, the density is summed directly (scipy.stats.gaussian_kde).

    The grid is relative to ``offset`` (the density of ``draws - offset``; the
    bounds are absolute and shifted the same way). Draws far from zero compared
    with their spread, such as means near 1e12 known to 0.01, need this: an
    absolute grid there would span only a few floating-point steps. Constant
    draws give a spike on a small grid around their value.
    """
    values = np.ravel(draws).astype(float) - offset
    low_bound = None if lower is None else lower - offset
    high_bound = None if upper is None else upper - offset
    spread = float(np.std(values))
    # constant draws: a small window around the value, so that the grid still increases
    margin = 0.5 * spread if spread > 0.0 else 1e-3 * max(1.0, abs(float(values[0])))
    low = float(np.min(values)) - margin
    high = float(np.max(values)) + margin
    if low_bound is not None:
        low = max(low, low_bound)
    if high_bound is not None:
        high = min(high, high_bound)
    grid = np.linspace(low, high, grid_size)
    if spread == 0.0:
        density = np.zeros_like(grid)
        density[np.argmin(np.abs(grid - values[0]))] = 1.0
        return grid, density
    bandwidth = scott_bandwidth(values)
    mirrored = [values]
    if low_bound is not None:
        mirrored.append(2.0 * low_bound - values)
    if high_bound is not None:
        mirrored.append(2.0 * high_bound - values)
    # every mirrored copy carries weight 1/n, like the original draws
    density = _binned_kde(np.concatenate(mirrored), bandwidth, grid)
    if density is None:
        kde = sps.gaussian_kde(values, bw_method="scott")
        density = kde(grid)
        for bound in (low_bound, high_bound):
            if bound is not None:
                density += kde(2.0 * bound - grid)
        return grid, density
    return grid, density / values.size


@dataclass(frozen=True)
class PearsonReference:
    """The frequentist reading beside the posterior."""

    r: float
    p_value: float
    ci_lower: float
    ci_upper: float
    mass: float


def pearson_reference(n: int, r: float, mass: float) -> PearsonReference:
    """Sample r, two-sided p-value (t test on n - 2 df) and Fisher-z interval.

    Fisher (1921): atanh(r) is approximately normal with sd 1/sqrt(n - 3).
    The p-value is the exact test of rho = 0 for bivariate-normal data
    (common practice; matches scipy.stats.pearsonr).
    """
    r = float(np.clip(r, -1.0, 1.0))
    if abs(r) == 1.0:
        p_value = 0.0
    else:
        t = r * math.sqrt((n - 2) / (1.0 - r * r))
        p_value = float(2.0 * sps.t.sf(abs(t), n - 2))
    if n > 3 and abs(r) < 1.0:
        lower, upper = fisher_z_interval(n, r, mass)
    else:
        lower, upper = -1.0, 1.0
    return PearsonReference(r=r, p_value=p_value, ci_lower=lower, ci_upper=upper, mass=mass)
