"""Stage 3: the bivariate-normal model, written from sufficient statistics.

The model is fitted on standardised data (each column centred on its sample
mean and divided by its sample SD). That keeps the sampler's geometry the same
for every pair, so one compiled model serves all pairs, and it turns every
prior "in the data's units" into an exactly equivalent prior on the
standardised scale (a linear change of variables). The draws are mapped back
to the data's units after sampling; rho is unchanged by the mapping.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from reportgen.data import SufficientStats
from reportgen.spec import Priors

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


@dataclass(frozen=True)
class Standardisation:
    """How the data were standardised, to map draws back to data units."""

    mean_x: float
    mean_y: float
    sd_x: float
    sd_y: float

    @classmethod
    def of(cls, stats: SufficientStats) -> Standardisation:
        return cls(stats.mean_x, stats.mean_y, stats.sd_x, stats.sd_y)


@dataclass(frozen=True)
class ModelInputs:
    """Everything that changes from pair to pair: fed to one compiled model."""

    structure: str  # which compiled model: the mean and SD prior families
    values: dict[str, np.ndarray]


def standardised_stats(stats: SufficientStats) -> tuple[float, ...]:
    n = float(stats.n)
    return (n, 0.0, 0.0, n - 1.0, n - 1.0, (n - 1.0) * stats.sample_r)


def model_inputs(stats: SufficientStats, priors: Priors) -> ModelInputs:
    """Standardised sufficient statistics and prior parameters for one pair."""
    scale = Standardisation.of(stats)
    sds = np.array([scale.sd_x, scale.sd_y])
    centres = np.array([scale.mean_x, scale.mean_y])
    if priors.means.units == "scaled":
        mean_loc = np.zeros(2)
        mean_scale = np.full(2, priors.means.scale)
    else:
        mean_loc = (priors.means.location - centres) / sds
        mean_scale = priors.means.scale / sds
    if priors.sds.units == "scaled":
        sd_scale = np.full(2, priors.sds.scale)
    else:
        sd_scale = priors.sds.scale / sds
    rho_a, rho_b = priors.rho.shapes
    values = {
        "suff": np.array(standardised_stats(stats)),
        "mean_loc": mean_loc,
        "mean_scale": mean_scale,
        "sd_scale": sd_scale,
        "rho_a": np.array(rho_a),
        "rho_b": np.array(rho_b),
    }
    if priors.sds.family == "half_student_t":
        values["sd_nu"] = np.array(priors.sds.nu)
    if priors.means.family == "flat":
        del values["mean_loc"], values["mean_scale"]
    if priors.sds.family == "jeffreys":
        del values["sd_scale"]
    return ModelInputs(structure=f"{priors.means.family}+{priors.sds.family}", values=values)


def build_model(inputs: ModelInputs) -> Any:
    """The PyMC model for one structure, with every per-pair value as ``pm.Data``."""
    import pymc as pm
    import pytensor.tensor as pt

    with pm.Model() as model:
        data = {name: pm.Data(name, value) for name, value in inputs.values.items()}
        mean_family, sd_family = inputs.structure.split("+")
        if mean_family == "flat":
            mu = pm.Flat("mu_z", shape=2)
        else:
            mu = pm.Normal("mu_z", mu=data["mean_loc"], sigma=data["mean_scale"], shape=2)
        if sd_family == "jeffreys":
            # p(sigma) proportional to 1/sigma is flat on log(sigma)
            log_sigma = pm.Flat("log_sigma_z", shape=2)
            sigma = pm.Deterministic("sigma_z", pt.exp(log_sigma))
        elif sd_family == "half_student_t":
            sigma = pm.HalfStudentT("sigma_z", nu=data["sd_nu"], sigma=data["sd_scale"], shape=2)
        else:
            sigma = pm.HalfNormal("sigma_z", sigma=data["sd_scale"], shape=2)
        rho_unit = pm.Beta("rho_unit", alpha=data["rho_a"], beta=data["rho_b"])
        rho = pm.Deterministic("rho", 2.0 * rho_unit - 1.0)
        suff = data["suff"]
        stats = (suff[0], suff[1], suff[2], suff[3], suff[4], suff[5])
        loglik = suffstat_loglik(stats, mu[0], mu[1], sigma[0], sigma[1], rho,
                                 log=pt.log, log1p=pt.log1p)
        pm.Potential("loglik", loglik)
    return model


def to_data_units(mu_z: np.ndarray, sigma_z: np.ndarray, scale: Standardisation) -> dict[str, np.ndarray]:
    """Map standardised draws (..., 2) back to the data's units."""
    return {
        "mu_x": scale.mean_x + scale.sd_x * mu_z[..., 0],
        "mu_y": scale.mean_y + scale.sd_y * mu_z[..., 1],
        "sigma_x": scale.sd_x * sigma_z[..., 0],
        "sigma_y": scale.sd_y * sigma_z[..., 1],
    }
