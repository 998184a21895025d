"""The difference of two correlations, from their two posteriors.

One function serves every comparison of two rhos (one run against the previous one, one group against
another): P(rho_b > rho_a), P(|rho_b - rho_a| > margin) and the median and interval of rho_b - rho_a, for
two posteriors that are independent (separate data). Each posterior is given either as a density on a grid
(the exact engine) or as draws (the sampler).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Posterior:
    """A posterior of rho: draws (``grid`` empty) or a density on an increasing grid (``draws`` empty)."""

    source: str  # in words, e.g. "draws of the normal model (4,000)" or "exact posterior (Jeffreys' priors)"
    draws: np.ndarray = np.empty(0)
    grid: np.ndarray = np.empty(0)
    density: np.ndarray = np.empty(0)


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
