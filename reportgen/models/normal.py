"""The bivariate-normal model, written from sufficient statistics (five parameters).

Its cost does not depend on the number of rows: the likelihood needs only n,
the two means and the three centred sums of squares and products.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np

from reportgen.data import PairData, SufficientStats
from reportgen.models.base import ModelInputs, nuisance_priors, prior_values, rho_prior
from reportgen.spec import Priors

NAME = "normal"
PARAMETERS = ("mu_x", "mu_y", "sigma_x", "sigma_y", "rho")
LOG_2PI = math.log(2.0 * math.pi)


def suffstat_loglik(
    stats: tuple[Any, Any, Any, Any, Any, Any],
    mu_x: Any,
    mu_y: Any,
    sigma_x: Any,
    sigma_y: Any,
    rho: Any,
    *,
    log: Callable[[Any], Any] = np.log,
    log1p: Callable[[Any], Any] = np.log1p,
) -> Any:
    """Bivariate-normal log-likelihood of n rows from their sufficient statistics.

    ``stats`` is ``(n, mean_x, mean_y, sxx, syy, sxy)`` with centred sums. The
    same expression serves NumPy and PyTensor (pass ``log``/``log1p`` of the
    backend), so the tested formula is the one that is sampled.
    Sum over rows of log N2((x_i, y_i) | mu, Sigma) (common practice: expand
    the quadratic form around the sample means).
    """
    n, mean_x, mean_y, sxx, syy, sxy = stats
    dx = mean_x - mu_x
    dy = mean_y - mu_y
    qxx = (sxx + n * dx * dx) / (sigma_x * sigma_x)
    qyy = (syy + n * dy * dy) / (sigma_y * sigma_y)
    qxy = (sxy + n * dx * dy) / (sigma_x * sigma_y)
    one_minus_rho2 = 1.0 - rho * rho
    quadratic = (qxx - 2.0 * rho * qxy + qyy) / one_minus_rho2
    return (
        -n * LOG_2PI
        - n * log(sigma_x)
        - n * log(sigma_y)
        - 0.5 * n * log1p(-rho * rho)
        - 0.5 * quadratic
    )


def standardised_stats(stats: SufficientStats) -> tuple[float, ...]:
    n = float(stats.n)
    return (n, 0.0, 0.0, n - 1.0, n - 1.0, (n - 1.0) * stats.sample_r)


def model_inputs(stats: SufficientStats, priors: Priors) -> ModelInputs:
    """Standardised sufficient statistics and prior parameters for one pair."""
    structure, values = prior_values(stats, priors)
    return ModelInputs(structure=structure, values={"suff": np.array(standardised_stats(stats)), **values})


def inputs_for(pair: PairData) -> ModelInputs:
    return model_inputs(pair.stats, pair.pair.priors)


def build_model(inputs: ModelInputs) -> Any:
    """The PyMC model for one structure, with every per-pair value as ``pm.Data``."""
    import pymc as pm
    import pytensor.tensor as pt

    with pm.Model() as model:
        data = {name: pm.Data(name, value) for name, value in inputs.values.items()}
        mu, sigma = nuisance_priors(data, inputs.structure)
        rho = rho_prior(data)
        suff = data["suff"]
        stats = (suff[0], suff[1], suff[2], suff[3], suff[4], suff[5])
        loglik = suffstat_loglik(stats, mu[0], mu[1], sigma[0], sigma[1], rho,
                                 log=pt.log, log1p=pt.log1p)
        pm.Potential("loglik", loglik)
    return model
