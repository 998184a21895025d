"""The difference of two correlations, from their two posteriors.

One function serves every comparison of two rhos (one run against the previous one, one group against
another): P(rho_b > rho_a), P(|rho_b - rho_a| > margin) and the median and interval of rho_b - rho_a, for
two posteriors that are independent (separate data). Each posterior is given either as a density on a grid
(the exact engine) or as draws (the sampler).

The method is deterministic: for independent a and b,

    P(rho_b - rho_a <= d) = integral of F_b(r + d) p_a(r) dr,

with a's posterior as weighted points (draws weigh 1/M each; a grid gets the trapezoid rule's weights of
its density) and F_b, b's distribution function, taken from b's draws (their empirical distribution) or
from b's grid (the cumulative trapezoid rule, interpolated linearly). No draws are paired at random, so
the same two posteriors always give the same numbers.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from reportgen import exact
from reportgen.data import SufficientStats

# d runs over [-2, 2] (rho_b - rho_a cannot leave it); the points sit where the difference's mass is
DIFFERENCE_POINTS = 4001
_CHUNK = 1 << 22  # (a's points) x (values of d) evaluated at once: bounds the memory to tens of MB
_NEGLIGIBLE = 1e-16  # a's points with less weight than this, relative to the largest, are left out


@dataclass(frozen=True)
class Posterior:
    """A posterior of rho: draws (``grid`` empty) or a density on an increasing grid (``draws`` empty)."""

    source: str  # in words, e.g. "draws of the normal model (4,000)" or "exact posterior (Jeffreys' priors)"
    draws: np.ndarray = field(default_factory=lambda: np.empty(0))
    grid: np.ndarray = field(default_factory=lambda: np.empty(0))
    density: np.ndarray = field(default_factory=lambda: np.empty(0))

    @property
    def is_grid(self) -> bool:
        return self.grid.size > 0


@dataclass(frozen=True)
class RhoDifference:
    """rho_b - rho_a, for posteriors a (earlier / first) and b (later / second)."""

    median: float
    lower: float
    upper: float
    credible_mass: float
    p_rose: float  # P(rho_b > rho_a)
    p_moved: float  # P(|rho_b - rho_a| > margin)
    margin: float
    method: str  # one sentence naming how it was computed


def posterior_from_stats(stats: SufficientStats, prior_a: float = 1.0, prior_b: float = 1.0,
                         source: str = "") -> Posterior:
    """The exact posterior of rho (Jeffreys' priors on the means and SDs, a stretched Beta(prior_a, prior_b)
    on rho) from a pair's sufficient statistics, as a density on its grid."""
    posterior = exact.exact_posterior(int(stats.n), stats.sample_r, prior_a, prior_b,
                                      one_minus_abs_r=stats.one_minus_abs_r)
    return Posterior(source=source or f"exact posterior (Jeffreys' priors, n = {int(stats.n):,})",
                     grid=np.asarray(posterior.rho, dtype=float), density=np.asarray(posterior.density, dtype=float))


def posterior_from_draws(draws: np.ndarray, source: str) -> Posterior:
    """Draws of rho (any shape, e.g. chains x draws) as one flat posterior."""
    flat = np.asarray(draws, dtype=float).reshape(-1)
    if flat.size == 0 or not np.all(np.isfinite(flat)):
        raise ValueError(f"draws of rho must be finite and not empty ({source})")
    return Posterior(source=source, draws=flat)


def _check(posterior: Posterior, name: str) -> None:
    has_draws = posterior.draws.size > 0
    has_grid = posterior.grid.size > 0
    if has_draws == has_grid:
        raise ValueError(f"posterior {name} must hold either draws or a grid, not {'both' if has_draws else 'neither'}")
    if has_grid:
        if posterior.grid.shape != posterior.density.shape or posterior.grid.size < 2:
            raise ValueError(f"posterior {name}: grid and density must be arrays of one length >= 2")
        if np.any(np.diff(posterior.grid) < 0) or np.any(posterior.density < 0):
            raise ValueError(f"posterior {name}: the grid must increase and the density be >= 0")


def _trapezoid_weights(grid: np.ndarray, density: np.ndarray) -> np.ndarray:
    """Weights w with sum(w f) = trapezoid integral of density * f on the grid, normalised to sum 1."""
    widths = np.diff(grid)
    weights = np.zeros_like(density)
    weights[:-1] += 0.5 * widths * density[:-1]
    weights[1:] += 0.5 * widths * density[1:]
    return weights / weights.sum()


def _weighted_points(posterior: Posterior) -> tuple[np.ndarray, np.ndarray]:
    if posterior.is_grid:
        points, weights = posterior.grid, _trapezoid_weights(posterior.grid, posterior.density)
        kept = weights > _NEGLIGIBLE * weights.max()
        return points[kept], weights[kept] / weights[kept].sum()
    return posterior.draws, np.full(posterior.draws.size, 1.0 / posterior.draws.size)


class _Cdf:
    """The distribution function of one posterior, callable on arrays."""

    def __init__(self, posterior: Posterior) -> None:
        if posterior.is_grid:
            self.points = posterior.grid
            pieces = 0.5 * np.diff(posterior.grid) * (posterior.density[:-1] + posterior.density[1:])
            cumulative = np.concatenate(([0.0], np.cumsum(pieces)))
            self.values = cumulative / cumulative[-1]
            self.is_grid = True
        else:
            self.points = np.sort(posterior.draws)
            self.is_grid = False

    def __call__(self, x: np.ndarray) -> np.ndarray:
        if self.is_grid:  # 0 below the grid, 1 above: the grid covers all but a negligible tail
            return np.interp(x, self.points, self.values, left=0.0, right=1.0)
        return np.searchsorted(self.points, x, side="right") / self.points.size

    @property
    def support(self) -> tuple[float, float]:
        return float(self.points[0]), float(self.points[-1])


def _difference_cdf(points: np.ndarray, weights: np.ndarray, cdf_b: _Cdf, d: np.ndarray) -> np.ndarray:
    """P(rho_b - rho_a <= d) for each d: the sum over a's points of w_i F_b(a_i + d)."""
    out = np.empty(d.size)
    step = max(1, _CHUNK // max(points.size, 1))
    for start in range(0, d.size, step):
        block = d[start:start + step]
        out[start:start + step] = weights @ cdf_b(points[:, None] + block[None, :])
    return np.clip(out, 0.0, 1.0)


def _quantile(d: np.ndarray, cdf: np.ndarray, q: float) -> float:
    """The smallest d with G(d) >= q, interpolated linearly between the two grid values around it."""
    cdf = np.maximum.accumulate(cdf)  # rounding must not make G decrease
    index = int(np.searchsorted(cdf, q, side="left"))
    if index <= 0:
        return float(d[0])
    if index >= d.size:
        return float(d[-1])
    low, high = cdf[index - 1], cdf[index]
    share = 0.0 if high <= low else (q - low) / (high - low)
    return float(d[index - 1] + share * (d[index] - d[index - 1]))


def method_sentence(a: Posterior, b: Posterior, names: tuple[str, str] = ("first", "second")) -> str:
    """How the difference was computed, naming the method, in one sentence."""
    first = ("its exact density on a grid, weighted by the trapezoid rule" if a.is_grid
             else "its draws, each weighted equally")
    second = ("its exact density, integrated by the trapezoid rule" if b.is_grid
              else "the share of its draws")
    return (f"The difference of the two correlations ({names[1]} minus {names[0]}) is computed by numerical "
            f"convolution of the two posteriors, taken as independent: the {names[0]} posterior enters through "
            f"{first}, and the {names[1]} through its probability of exceeding each value, from {second}; no "
            "draws are paired at random.")


def rho_difference(a: Posterior, b: Posterior, margin: float, credible_mass: float,
                   names: tuple[str, str] = ("first", "second")) -> RhoDifference:
    """rho_b - rho_a for two independent posteriors: P(rho_b > rho_a), P(|rho_b - rho_a| > margin) and the
    median and central ``credible_mass`` interval of the difference.

    ``margin`` must be positive; ``credible_mass`` strictly between 0 and 1 (no default: it is always the
    spec's ``summary.credible_mass``). ``names`` (default "first", "second") name a and b in the method
    sentence, e.g. ("earlier", "later").
    """
    if not margin > 0:
        raise ValueError(f"margin must be positive, got {margin!r}")
    if not 0.0 < credible_mass < 1.0:
        raise ValueError(f"credible_mass must be strictly between 0 and 1, got {credible_mass!r}")
    _check(a, "a")
    _check(b, "b")
    points, weights = _weighted_points(a)
    cdf_b = _Cdf(b)
    at = _difference_cdf(points, weights, cdf_b, np.array([0.0, margin]))
    p_rose = 1.0 - at[0]
    # P(D < -margin): the distribution function just below -margin (draws make it a step function)
    below = _difference_cdf(points, weights, cdf_b, np.array([np.nextafter(-margin, -np.inf)]))[0]
    p_moved = (1.0 - at[1]) + below
    # d only where the difference can have mass: b's support minus a's, inside [-2, 2]
    b_low, b_high = cdf_b.support
    low = max(-2.0, b_low - float(points.max()))
    high = min(2.0, b_high - float(points.min()))
    d = np.linspace(low, high, DIFFERENCE_POINTS) if high > low else np.array([low, low + 1e-12])
    cdf = _difference_cdf(points, weights, cdf_b, d)
    tail = 0.5 * (1.0 - credible_mass)
    return RhoDifference(
        median=_quantile(d, cdf, 0.5),
        lower=_quantile(d, cdf, tail),
        upper=_quantile(d, cdf, 1.0 - tail),
        credible_mass=float(credible_mass),
        p_rose=float(np.clip(p_rose, 0.0, 1.0)),
        p_moved=float(np.clip(p_moved, 0.0, 1.0)),
        margin=float(margin),
        method=method_sentence(a, b, names),
    )
