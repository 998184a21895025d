"""Plain functions on arrays: intervals, rule probabilities, densities, and the
frequentist reference. No PyMC, no templates: each is tested on its own.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats as sps

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


def bounded_density(
    draws: np.ndarray,
    lower: float | None = None,
    upper: float | None = None,
    grid_size: int = 256,
    offset: float = 0.0,
) -> tuple[np.ndarray, np.ndarray]:
    """Gaussian kernel density on a grid, reflected at known bounds.

    Reflection keeps the density from leaking past a bound such as rho = 1 or
    sigma = 0 (common practice; Silverman 1986, Density Estimation, sec. 2.10).

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
    kde = sps.gaussian_kde(values, bw_method="scott")
    density = kde(grid)
    if low_bound is not None:
        density += kde(2.0 * low_bound - grid)
    if high_bound is not None:
        density += kde(2.0 * high_bound - grid)
    return grid, density


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
