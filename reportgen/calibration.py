"""Simulation-based calibration of rho (Talts, Betancourt, Simpson, Vehtari & Gelman 2018,
arXiv:1804.06788), for the sampled models and for the exact engine.

Draw rho from its prior, simulate a data set, compute the posterior, and record where the
true rho falls in it. If the model and the computation are right, that position is uniform.
Used by the CI-sized tests and by ``benchmarks/sbc.py``.

Sampled models (``calibrate``): either model (``model="normal"`` or ``"student_t"``) is fitted
with proper priors in the data's units, so the simulation draws from exactly the prior that
is fitted: the fit standardises by the sample mean and SD, and turns those priors into the
equivalent priors on the standardised scale (``models.base``), which leaves the posterior in
the data's units unchanged. The position of the true rho is its rank among thinned draws,
uniform on 0..L.

Exact engine (``calibrate_exact``): Jeffreys' priors on the means and SDs are improper, so
they cannot be simulated from. They need not be: the exact posterior of rho depends on the
data only through (n, r), it is proportional to prior(rho) times the sampling density of r
given rho (Fisher 1915, *Biometrika* 10), and that density does not depend on the means and
SDs. So rho is drawn from its prior and the rows from a bivariate normal with any fixed means
and SDs, and the posterior CDF at the true rho must be Uniform(0, 1).

Every setting can be simulated from one prior on rho and fitted with another
(``fit_rho_prior``): a deliberately wrong prior is how the tests show that the uniformity
tests can fail.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Protocol

import numpy as np
from scipy import stats

from reportgen.data import PairData, sufficient_stats
from reportgen.exact import exact_posterior
from reportgen.fit import Fitter
from reportgen.models import student_t
from reportgen.spec import MeanPrior, PairSpec, Priors, RhoPrior, Sampler, SdPrior

# Proper priors in the data's units, so the simulation draws from exactly the fitted prior.
SBC_PRIORS = Priors(means=MeanPrior(units="data", location=0.0, scale=1.0),
                    sds=SdPrior(units="data", scale=1.0))

# Priors on rho for the calibration grid. Beta(50, 1) stretched to [-1, 1] puts rho = 1 - 2v
# with v ~ Beta(1, 50): mean 1 - 2/51 (about 0.96), and one draw in ten above 0.9958. Its
# density is largest at the end itself, the hardest case for a sampler working in logit space.
UNIFORM = RhoPrior()
NEAR_PLUS_ONE = RhoPrior(family="beta", a=50.0, b=1.0)
NEAR_MINUS_ONE = RhoPrior(family="beta", a=1.0, b=50.0)
PRIOR_SETTINGS: dict[str, RhoPrior] = {"uniform": UNIFORM, "near+1": NEAR_PLUS_ONE, "near-1": NEAR_MINUS_ONE}

# Any fixed means and SDs do for the exact engine (r's law given rho is free of them); these
# are far from 0 and 1 so that a mistake that leaked them into the posterior would show.
EXACT_MEANS = (3.0, -2.0)
EXACT_SDS = (2.0, 0.5)


class HasCdf(Protocol):
    """What ``calibrate_exact`` needs of a posterior: ``cdf(x)``, the probability that rho <= x."""

    def cdf(self, x: float) -> float | np.ndarray: ...


# (n, r, a, b) -> posterior of rho; the exact engine, or a deliberately wrong one in the tests
ExactEngine = Callable[[int, float, float, float], HasCdf]


@dataclass(frozen=True)
class CalibrationResult:
    """Ranks of the true rho among thinned posterior draws of a sampled model."""

    ranks: np.ndarray
    max_rank: int
    bins: int
    counts: np.ndarray
    chi2_p_value: float
    divergent_fits: int  # fits with at least one divergent transition

    @property
    def replications(self) -> int:
        return int(self.ranks.size)

    @property
    def min_p_value(self) -> float:
        return self.chi2_p_value

    def is_uniform(self, level: float) -> bool:
        """Whether the chi-square test of uniform ranks does not reject at ``level``."""
        return self.chi2_p_value > level


@dataclass(frozen=True)
class ExactCalibrationResult:
    """Posterior CDF of the exact engine at the true rho, one value per replication."""

    true_rho: np.ndarray
    sample_r: np.ndarray
    quantiles: np.ndarray
    bins: int
    counts: np.ndarray
    chi2_p_value: float
    ks_p_value: float

    @property
    def replications(self) -> int:
        return int(self.quantiles.size)

    @property
    def min_p_value(self) -> float:
        return min(self.chi2_p_value, self.ks_p_value)

    def is_uniform(self, level: float) -> bool:
        """Whether neither the chi-square nor the Kolmogorov-Smirnov test rejects at ``level``.

        ``level`` applies to each test: count both when splitting a family-wise level.
        """
        return self.min_p_value > level


def bonferroni_level(family_level: float, tests: int) -> float:
    """Level of each of ``tests`` tests so that any rejection has probability <= ``family_level``
    when all null hypotheses hold (Bonferroni's inequality; common practice)."""
    if not 0.0 < family_level < 1.0 or tests < 1:
        raise ValueError(f"need 0 < family_level < 1 and tests >= 1, got {family_level}, {tests}")
    return family_level / tests


def draw_rho(rng: np.random.Generator, prior: RhoPrior, size: int | None = None) -> float | np.ndarray:
    """rho from a stretched-beta prior: 2u - 1 with u ~ Beta(a, b)."""
    if prior.family == "uniform":
        # the uniform case keeps the generator's stream it always had, so older seeded runs repeat
        return rng.uniform(-1.0, 1.0, size=size)
    a, b = prior.shapes
    return 2.0 * rng.beta(a, b, size=size) - 1.0


def simulate_from_prior(
    rng: np.random.Generator, n: int, model: str = "normal", rho_prior: RhoPrior = UNIFORM,
) -> tuple[float, np.ndarray, np.ndarray]:
    """True rho and n rows drawn from the model's prior predictive distribution."""
    rho = float(draw_rho(rng, rho_prior))
    mu = rng.normal(0.0, 1.0, size=2)
    sigma = np.abs(rng.normal(0.0, 1.0, size=2))
    cov = np.array([[sigma[0] ** 2, rho * sigma[0] * sigma[1]], [rho * sigma[0] * sigma[1], sigma[1] ** 2]])
    if model == "normal":
        rows = rng.multivariate_normal(mu, cov, size=n)
    elif model == student_t.NAME:
        # nu - 1 ~ Exponential(rate NU_RATE), as in the model; a bivariate t row is a normal row
        # divided by sqrt(W / nu) with W ~ chi-square(nu) (common practice; Kotz & Nadarajah 2004, ch. 1)
        nu = 1.0 + rng.exponential(1.0 / student_t.NU_RATE)
        normal_rows = rng.multivariate_normal(np.zeros(2), cov, size=n)
        mixing = np.sqrt(rng.chisquare(nu, size=n) / nu)
        rows = mu + normal_rows / mixing[:, None]
    else:
        raise ValueError(f"no prior simulation for model {model!r}")
    return rho, rows[:, 0], rows[:, 1]


def calibrate(
    replications: int,
    *,
    n: int = 20,
    thinned_draws: int = 99,
    bins: int = 10,
    sampler: Sampler | None = None,
    seed: int = 2018,
    model: str = "normal",
    rho_prior: RhoPrior = UNIFORM,
    fit_rho_prior: RhoPrior | None = None,
) -> CalibrationResult:
    """Ranks of the true rho under ``model``; chi-square test of uniformity over ``bins`` equal bins.

    rho is drawn from ``rho_prior`` and fitted with ``fit_rho_prior`` (the same prior when None).
    """
    sampler = sampler or Sampler(draws=500, tune=400, chains=2, seed=seed)
    fit_priors = SBC_PRIORS.model_copy(update={"rho": fit_rho_prior or rho_prior})
    fitter = Fitter(sampler)
    rng = np.random.default_rng(seed)
    ranks = []
    divergent_fits = 0
    for index in range(replications):
        true_rho, x, y = simulate_from_prior(rng, n, model, rho_prior)
        spec = PairSpec(x=f"sbc{index}", y="y", label="", priors=fit_priors, model=model)
        pair = PairData(pair=spec, x=x, y=y, n_rows=n, n_dropped=0, stats=sufficient_stats(x, y))
        fit = fitter.fit(pair, seed + index, model=model)
        divergent_fits += int(np.any(fit.diverging))
        draws = np.ravel(fit.draws["rho"])
        # thin evenly to reduce autocorrelation before ranking (Talts et al. 2018, sec. 4.1)
        chosen = draws[np.linspace(0, draws.size - 1, thinned_draws).astype(int)]
        ranks.append(int(np.sum(chosen < true_rho)))
    rank_array = np.array(ranks)
    counts = np.histogram(rank_array, bins=bins, range=(0, thinned_draws + 1))[0]
    p_value = float(stats.chisquare(counts).pvalue)
    return CalibrationResult(rank_array, thinned_draws, bins, counts, p_value, divergent_fits)


def correlated_rows(
    rng: np.random.Generator, rho: np.ndarray, n: int,
) -> tuple[np.ndarray, np.ndarray]:
    """n bivariate-normal rows for each rho, with means ``EXACT_MEANS`` and SDs ``EXACT_SDS``.

    y is built as ``rho z1 + sqrt(1 - rho^2) z2`` from independent standard normals (common
    practice), with ``1 - rho^2`` formed as ``(1 - rho)(1 + rho)`` to keep its precision near
    |rho| = 1. Returns x and y shaped (len(rho), n).
    """
    z = rng.standard_normal((rho.size, n, 2))
    column = rho[:, None]
    x = EXACT_MEANS[0] + EXACT_SDS[0] * z[:, :, 0]
    y = EXACT_MEANS[1] + EXACT_SDS[1] * (column * z[:, :, 0]
                                         + np.sqrt((1.0 - column) * (1.0 + column)) * z[:, :, 1])
    return x, y


def sample_correlations(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Pearson's r of each row of x against the same row of y (centred sums, two passes)."""
    dx = x - x.mean(axis=1, keepdims=True)
    dy = y - y.mean(axis=1, keepdims=True)
    return np.sum(dx * dy, axis=1) / np.sqrt(np.sum(dx * dx, axis=1) * np.sum(dy * dy, axis=1))


def simulate_exact(
    rng: np.random.Generator, replications: int, n: int, rho_prior: RhoPrior = UNIFORM,
) -> tuple[np.ndarray, np.ndarray]:
    """True rho from ``rho_prior`` and the sample correlation r of n rows, for each replication."""
    true_rho = np.asarray(draw_rho(rng, rho_prior, size=replications), dtype=float)
    return true_rho, sample_correlations(*correlated_rows(rng, true_rho, n))


def calibrate_exact(
    replications: int,
    *,
    n: int = 20,
    rho_prior: RhoPrior = UNIFORM,
    fit_rho_prior: RhoPrior | None = None,
    bins: int = 20,
    seed: int = 1961,
    engine: ExactEngine = exact_posterior,
) -> ExactCalibrationResult:
    """Posterior CDF at the true rho for simulated (n, r); chi-square and Kolmogorov-Smirnov tests.

    ``engine(n, r, a, b)`` computes the posterior (the exact engine by default); rho is drawn
    from ``rho_prior`` and the engine is given the shapes of ``fit_rho_prior`` (the same
    prior when None).
    """
    if n < 4:
        raise ValueError(f"the exact engine needs n >= 4, got {n}")
    rng = np.random.default_rng(seed)
    true_rho, r = simulate_exact(rng, replications, n, rho_prior)
    a, b = (fit_rho_prior or rho_prior).shapes
    quantiles = np.array([float(engine(n, float(r_i), a, b).cdf(float(rho_i)))
                          for rho_i, r_i in zip(true_rho, r, strict=True)])
    counts = np.histogram(quantiles, bins=bins, range=(0.0, 1.0))[0]
    chi2_p = float(stats.chisquare(counts).pvalue)
    ks_p = float(stats.kstest(quantiles, "uniform").pvalue)
    return ExactCalibrationResult(true_rho, r, quantiles, bins, counts, chi2_p, ks_p)


def describe_prior(prior: RhoPrior) -> str:
    """A short label: ``uniform`` or ``beta(50, 1)``."""
    if prior.family == "uniform":
        return "uniform"
    a, b = prior.shapes
    return f"beta({_short(a)}, {_short(b)})"


def _short(value: float) -> str:
    return str(int(value)) if math.isclose(value, round(value)) else f"{value:g}"
