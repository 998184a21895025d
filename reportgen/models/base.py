"""What every sampled model shares: the inputs fed to a compiled model, and the standardisation.

Every model is fitted on standardised data (each column centred on its sample
mean and divided by its sample SD). That keeps the sampler's geometry the same
for every pair, so one compiled model serves all pairs, and it turns every
prior "in the data's units" into an exactly equivalent prior on the
standardised scale (a linear change of variables). Draws are mapped back to
the data's units after sampling; rho is unchanged by the mapping.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reportgen.data import SufficientStats
from reportgen.spec import Priors


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

    structure: str  # which compiled model: the model and its prior families
    values: dict[str, np.ndarray]


def prior_values(stats: SufficientStats, priors: Priors) -> tuple[str, dict[str, np.ndarray]]:
    """The priors' parameters on the standardised scale, and the prior families as a structure name."""
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
    return f"{priors.means.family}+{priors.sds.family}", values


def nuisance_priors(data: dict, structure: str):  # type: ignore[no-untyped-def]
    """The location and scale parameters with the spec's priors, inside a ``pm.Model`` context.

    Returns ``(mu_z, sigma_z)``, each of shape 2, on the standardised scale.
    """
    import pymc as pm
    import pytensor.tensor as pt

    mean_family, sd_family = structure.split("+")[-2:]
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
    return mu, sigma


def rho_prior(data: dict):  # type: ignore[no-untyped-def]
    """rho with the spec's stretched-beta prior, inside a ``pm.Model`` context."""
    import pymc as pm

    rho_unit = pm.Beta("rho_unit", alpha=data["rho_a"], beta=data["rho_b"])
    return pm.Deterministic("rho", 2.0 * rho_unit - 1.0)


def to_data_units(mu_z: np.ndarray, sigma_z: np.ndarray, scale: Standardisation) -> dict[str, np.ndarray]:
    """Map standardised draws (..., 2) back to the data's units."""
    return {
        "mu_x": scale.mean_x + scale.sd_x * mu_z[..., 0],
        "mu_y": scale.mean_y + scale.sd_y * mu_z[..., 1],
        "sigma_x": scale.sd_x * sigma_z[..., 0],
        "sigma_y": scale.sd_y * sigma_z[..., 1],
    }
