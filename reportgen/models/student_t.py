"""The bivariate Student-t model: the normal model's five parameters plus the degrees of freedom nu.

A few rows far from the rest cost a Student-t likelihood little, so they pull
rho much less than under the normal model (Lange, Little & Taylor 1989). Here
rho is the correlation of the scale matrix; when nu > 2 it is also Pearson's
correlation of the distribution, since the covariance is nu / (nu - 2) times
the scale matrix. The prior nu - 1 ~ Exponential(rate 1/29), mean 30, gives
equal weight to near-normal and heavy tails (Kruschke 2013, J. Exp. Psychol.
Gen. 142(2)). Unlike the normal model, the likelihood needs every row, so its
cost grows with n (benchmarks/bench_student_t.py measures it).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np

from reportgen.data import PairData
from reportgen.models.base import ModelInputs, Standardisation, nuisance_priors, prior_values, rho_prior

NAME = "student_t"
PARAMETERS = ("mu_x", "mu_y", "sigma_x", "sigma_y", "rho", "nu")
NU_RATE = 1.0 / 29.0
LOG_2PI = math.log(2.0 * math.pi)


def row_loglik(
    xz: Any, yz: Any, mu_x: Any, mu_y: Any, sigma_x: Any, sigma_y: Any, rho: Any, nu: Any,
    *, log: Callable[[Any], Any] = np.log, log1p: Callable[[Any], Any] = np.log1p,
) -> Any:
    """Log density of each row under a bivariate t with location mu, scales sigma, correlation rho.

    log t2(v | mu, S, nu) = log G((nu+2)/2) - log G(nu/2) - log(nu pi) - log|S|/2 - (nu+2)/2 log(1 + Q/nu),
    and G((nu+2)/2) / G(nu/2) = nu/2 leaves -log(2 pi) (common practice; scipy.stats.multivariate_t
    checks it in the tests). The same expression serves NumPy and PyTensor.
    """
    u = (xz - mu_x) / sigma_x
    v = (yz - mu_y) / sigma_y
    one_minus_rho2 = 1.0 - rho * rho
    quadratic = (u * u - 2.0 * rho * u * v + v * v) / one_minus_rho2
    return (-LOG_2PI - log(sigma_x) - log(sigma_y) - 0.5 * log1p(-rho * rho)
            - 0.5 * (nu + 2.0) * log1p(quadratic / nu))


def inputs_for(pair: PairData) -> ModelInputs:
    """The standardised rows and the priors' parameters of one pair."""
    scale = Standardisation.of(pair.stats)
    structure, values = prior_values(pair.stats, pair.pair.priors)
    xz = (np.asarray(pair.x, dtype=float) - scale.mean_x) / scale.sd_x
    yz = (np.asarray(pair.y, dtype=float) - scale.mean_y) / scale.sd_y
    return ModelInputs(structure=f"{NAME}+{structure}", values={"xz": xz, "yz": yz, **values})


def build_model(inputs: ModelInputs) -> Any:
    """The PyMC model for one structure; the rows are ``pm.Data`` so any n reuses the compiled model."""
    import pymc as pm
    import pytensor.tensor as pt

    with pm.Model() as model:
        data = {name: pm.Data(name, value) for name, value in inputs.values.items()}
        mu, sigma = nuisance_priors(data, inputs.structure)
        rho = rho_prior(data)
        nu_minus_one = pm.Exponential("nu_minus_one", lam=NU_RATE)
        nu = pm.Deterministic("nu", 1.0 + nu_minus_one)
        loglik = row_loglik(data["xz"], data["yz"], mu[0], mu[1], sigma[0], sigma[1], rho, nu,
                            log=pt.log, log1p=pt.log1p)
        pm.Potential("loglik", pt.sum(loglik))
    return model

