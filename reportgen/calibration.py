"""Simulation-based calibration of the fitted model (Talts, Betancourt, Simpson, Vehtari &
Gelman 2018, arXiv:1804.06788).

Draw parameters from the prior, simulate a data set, fit it, and record the rank of the
true rho among thinned posterior draws. If the model and sampler are right, the ranks are
uniform on 0..L. Used by the CI-sized tests and by ``benchmarks/sbc.py``.

Either sampled model can be calibrated (``model="normal"`` or ``"student_t"``). The
priors are proper and in the data's units, so the simulation draws from exactly the
prior that is fitted: the fit standardises by the sample mean and SD, and turns those
priors into the equivalent priors on the standardised scale (``models.base``), which
leaves the posterior in the data's units unchanged.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from reportgen.data import PairData, sufficient_stats
from reportgen.fit import Fitter
from reportgen.models import student_t
from reportgen.spec import MeanPrior, PairSpec, Priors, Sampler, SdPrior

# Proper priors in the data's units, so the simulation draws from exactly the fitted prior.
SBC_PRIORS = Priors(means=MeanPrior(units="data", location=0.0, scale=1.0),
                    sds=SdPrior(units="data", scale=1.0))


@dataclass(frozen=True)
class CalibrationResult:
    ranks: np.ndarray
    max_rank: int
    bins: int
    counts: np.ndarray
    chi2_p_value: float


def simulate_from_prior(
    rng: np.random.Generator, n: int, model: str = "normal",
) -> tuple[float, np.ndarray, np.ndarray]:
    """True rho and n rows drawn from the model's prior predictive distribution."""
    rho = rng.uniform(-1.0, 1.0)
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
) -> CalibrationResult:
    """Ranks of the true rho under ``model``; chi-square test of uniformity over ``bins`` equal bins."""
    sampler = sampler or Sampler(draws=500, tune=400, chains=2, seed=seed)
    fitter = Fitter(sampler)
    rng = np.random.default_rng(seed)
    ranks = []
    for index in range(replications):
        true_rho, x, y = simulate_from_prior(rng, n, model)
        spec = PairSpec(x=f"sbc{index}", y="y", label="", priors=SBC_PRIORS, model=model)
        pair = PairData(pair=spec, x=x, y=y, n_rows=n, n_dropped=0, stats=sufficient_stats(x, y))
        draws = np.ravel(fitter.fit(pair, seed + index, model=model).draws["rho"])
        # thin evenly to reduce autocorrelation before ranking (Talts et al. 2018, sec. 4.1)
        chosen = draws[np.linspace(0, draws.size - 1, thinned_draws).astype(int)]
        ranks.append(int(np.sum(chosen < true_rho)))
    rank_array = np.array(ranks)
    counts = np.histogram(rank_array, bins=bins, range=(0, thinned_draws + 1))[0]
    p_value = float(stats.chisquare(counts).pvalue)
    return CalibrationResult(rank_array, thinned_draws, bins, counts, p_value)
