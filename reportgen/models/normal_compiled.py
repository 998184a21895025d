"""The normal model's log-density and gradient written by hand for numba, compiled once per machine.

Building the normal model through PyMC costs every new process about 11 s: nutpie
compiles wrappers around PyTensor's functions that numba cannot keep on disk. The
same density, written here as two plain C callbacks with ``cache=True``, is
compiled once and then loaded from numba's cache by every later process (in well
under a second), and it serves every prior family: the families travel in the
per-pair data as codes, so one compiled function covers all structures.

The sampler works on the same unconstrained coordinates as the PyMC model (the
means; log sigma; the log-odds of rho's position on (0, 1)) with the same
Jacobian terms, so the two densities differ only by a constant; tests check the
values and gradients against PyMC's compiled model for every prior family.

Layout of the per-pair data, one float64 vector (``pack``):
``n, mean_x, mean_y, sxx, syy, sxy`` (standardised sufficient statistics), the mean
family code, two locations, two scales, the SD family code, two scales, nu, and the
two shapes of rho's stretched beta prior.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable

import numba
import numpy as np
import pandas as pd
from numba import types
from nutpie.compile_pymc import CompiledPyMCModel

from reportgen.models.base import ModelInputs

N_DIM = 5  # mu_z (2), log sigma_z (2), log-odds of rho_unit
N_EXPANDED = 5  # mu_z (2), sigma_z (2), rho
DATA_SIZE = 17
MEAN_FAMILIES = {"normal": 0.0, "flat": 1.0}
SD_FAMILIES = {"half_normal": 0.0, "half_student_t": 1.0, "jeffreys": 2.0}
# nutpie's callback return codes: 0 is a good evaluation; 3 and 4 say the gradient or the density was not
# finite, which the sampler treats as a divergent point rather than a crash
OK, NOT_FINITE_GRADIENT, NOT_FINITE_DENSITY = 0, 3, 4
# the unconstrained coordinates named as the PyMC model names them, so a posterior reads the same
UNCONSTRAINED_NAMES = ("mu_z_0", "mu_z_1", "log_sigma_z_0", "log_sigma_z_1", "rho_unit_logodds_")


def pack(inputs: ModelInputs) -> np.ndarray:
    """One pair's ``ModelInputs`` of the normal model as the vector the compiled callbacks read."""
    mean_family, sd_family = inputs.structure.split("+")[-2:]
    values = inputs.values
    data = np.zeros(DATA_SIZE)
    data[0:6] = values["suff"]
    data[6] = MEAN_FAMILIES[mean_family]
    if mean_family == "normal":
        data[7:9] = values["mean_loc"]
        data[9:11] = values["mean_scale"]
    data[11] = SD_FAMILIES[sd_family]
    if sd_family != "jeffreys":
        data[12:14] = values["sd_scale"]
    if sd_family == "half_student_t":
        data[14] = float(values["sd_nu"])
    data[15] = float(values["rho_a"])
    data[16] = float(values["rho_b"])
    return data


@numba.njit(cache=True)
def _softplus(value: float) -> float:
    """log(1 + e^value) without overflow."""
    if value > 0.0:
        return value + math.log1p(math.exp(-value))
    return math.log1p(math.exp(value))


@numba.njit(cache=True)
def log_density(theta: np.ndarray, data: np.ndarray, grad: np.ndarray) -> float:
    """The log posterior density at ``theta`` (up to a constant); writes its gradient into ``grad``.

    Likelihood from sufficient statistics (the bivariate normal's quadratic form expanded around the sample
    means, common practice), with D = 1 - rho^2 = 4 u (1 - u) for u = rho_unit, formed from log u and
    log(1 - u) so it keeps its digits when rho is near -1 or 1.
    """
    n, mean_x, mean_y, sxx, syy, sxy = data[0], data[1], data[2], data[3], data[4], data[5]
    log_sx, log_sy, t = theta[2], theta[3], theta[4]
    sx, sy = math.exp(log_sx), math.exp(log_sy)
    log_u, log_1mu = -_softplus(-t), -_softplus(t)
    u = math.exp(log_u)
    rho = 2.0 * u - 1.0
    log_d = math.log(4.0) + log_u + log_1mu
    d = math.exp(log_d)
    dx, dy = mean_x - theta[0], mean_y - theta[1]
    qxx = (sxx + n * dx * dx) / (sx * sx)
    qyy = (syy + n * dy * dy) / (sy * sy)
    qxy = (sxy + n * dx * dy) / (sx * sy)
    quadratic = qxx - 2.0 * rho * qxy + qyy
    logp = -n * log_sx - n * log_sy - 0.5 * n * log_d - 0.5 * quadratic / d
    grad[0] = n / d * (dx / (sx * sx) - rho * dy / (sx * sy))
    grad[1] = n / d * (dy / (sy * sy) - rho * dx / (sx * sy))
    grad[2] = -n + (qxx - rho * qxy) / d
    grad[3] = -n + (qyy - rho * qxy) / d
    # d rho / d t = 2 u (1 - u) = D / 2
    grad[4] = 0.5 * (n * rho + qxy - rho * quadratic / d)

    if data[6] == 0.0:  # normal priors on the means
        for i in range(2):
            z = (theta[i] - data[7 + i]) / data[9 + i]
            logp -= 0.5 * z * z
            grad[i] -= z / data[9 + i]
    sd_family = data[11]
    for i in range(2):
        sigma = sx if i == 0 else sy
        if sd_family == 0.0:  # half-normal on sigma, plus the Jacobian of sigma = exp(log sigma)
            ratio = sigma * sigma / (data[12 + i] * data[12 + i])
            logp += -0.5 * ratio + theta[2 + i]
            grad[2 + i] += -ratio + 1.0
        elif sd_family == 1.0:  # half-Student-t on sigma, plus the same Jacobian
            nu = data[14]
            ratio = sigma * sigma / (nu * data[12 + i] * data[12 + i])
            logp += -0.5 * (nu + 1.0) * math.log1p(ratio) + theta[2 + i]
            grad[2 + i] += -(nu + 1.0) * ratio / (1.0 + ratio) + 1.0
        # Jeffreys' prior, 1 / sigma, is flat on log sigma: nothing to add
    # Beta(a, b) on rho_unit with the log-odds Jacobian u (1 - u): a log u + b log(1 - u)
    a, b = data[15], data[16]
    logp += a * log_u + b * log_1mu
    grad[4] += a * (1.0 - u) - b * u
    return logp


@numba.njit(cache=True)
def expand(theta: np.ndarray, out: np.ndarray) -> None:
    """The values kept for each draw: mu_z, sigma_z and rho."""
    out[0] = theta[0]
    out[1] = theta[1]
    out[2] = math.exp(theta[2])
    out[3] = math.exp(theta[3])
    out[4] = 2.0 / (1.0 + math.exp(-theta[4])) - 1.0


def initial_point(data: np.ndarray, seed: int) -> np.ndarray:
    """A chain's starting point: the standardised sample means and SDs, and the sample r, each moved by a
    uniform jitter in (-1, 1) (as PyMC's default initialisation jitters), so chains start apart."""
    n, sxx, syy, sxy = data[0], data[3], data[4], data[5]
    r = min(max(sxy / math.sqrt(sxx * syy), -0.9), 0.9)
    centre = np.array([data[1], data[2], 0.5 * math.log(sxx / (n - 1.0)), 0.5 * math.log(syy / (n - 1.0)),
                       math.log((1.0 + r) / (1.0 - r))])
    return centre + np.random.default_rng(seed).uniform(-1.0, 1.0, N_DIM)


_LOGP_SIGNATURE = types.int64(types.uint64, types.CPointer(types.double), types.CPointer(types.double),
                              types.CPointer(types.double), types.voidptr)
_EXPAND_SIGNATURE = types.int64(types.uint64, types.uint64, types.CPointer(types.double),
                                types.CPointer(types.double), types.voidptr)


# The two C callbacks nutpie calls: compiled when this module is first imported on a machine, loaded from
# numba's on-disk cache (keyed by this file and the numba version) by every later process.
@numba.cfunc(_LOGP_SIGNATURE, cache=True)
def _logp_callback(dim, x_, grad_, logp_, data_):  # type: ignore[no-untyped-def]
    if dim != N_DIM:
        return -1
    theta = numba.carray(x_, (N_DIM,))
    grad = numba.carray(grad_, (N_DIM,))
    data = numba.carray(data_, (DATA_SIZE,), np.float64)
    value = log_density(theta, data, grad)
    logp_[0] = value
    for i in range(N_DIM):
        if not np.isfinite(grad[i]):
            return NOT_FINITE_GRADIENT
    if not np.isfinite(value):
        return NOT_FINITE_DENSITY
    return OK


@numba.cfunc(_EXPAND_SIGNATURE, cache=True)
def _expand_callback(dim, expanded, x_, out_, data_):  # type: ignore[no-untyped-def]
    if dim != N_DIM or expanded != N_EXPANDED:
        return -1
    expand(numba.carray(x_, (N_DIM,)), numba.carray(out_, (N_EXPANDED,)))
    return OK


@dataclasses.dataclass(frozen=True)
class NormalModel(CompiledPyMCModel):
    """nutpie's compiled-model record pointing at the callbacks above; its data are one packed vector."""

    def for_inputs(self, inputs: ModelInputs) -> NormalModel:
        """This model fed one pair (the counterpart of ``with_data``, which names PyTensor's shared data)."""
        data = pack(inputs)
        return dataclasses.replace(self, user_data=data, initial_point_func=_seeded(data))


def compiled_model(inputs: ModelInputs) -> NormalModel:
    """A nutpie model of the normal likelihood, for any prior family, fed ``inputs``."""
    data = pack(inputs)
    names = ["mu_z", "sigma_z", "rho"]
    shapes = [np.array([2]), np.array([2]), np.array([], dtype=int)]
    return NormalModel(
        dims={}, compiled_logp_func=_logp_callback, compiled_expand_func=_expand_callback,
        initial_point_func=_seeded(data), shared_data={}, user_data=data, n_expanded=N_EXPANDED,
        shape_info=(names, [slice(0, 2), slice(2, 4), slice(4, 5)], shapes), logp_func=None, expand_func=None,
        _n_dim=N_DIM, _shapes={"mu_z": (2,), "sigma_z": (2,), "rho": ()},
        _coords={"unconstrained_parameter": pd.Index(list(UNCONSTRAINED_NAMES))})


def _seeded(data: np.ndarray) -> Callable[[int], np.ndarray]:
    def starting_point(seed: int) -> np.ndarray:
        return initial_point(data, seed)

    return starting_point
