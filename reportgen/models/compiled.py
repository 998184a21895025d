"""The normal, Student-t and partial log-densities and gradients written by hand for numba, compiled once per
machine.

Building a model through PyMC costs every new process 11 s or more: nutpie compiles
wrappers around PyTensor's functions that numba cannot keep on disk. The same
densities, written here as plain C callbacks with ``cache=True``, are compiled once
and then loaded from numba's on-disk cache (keyed by this file and the numba
version; numba writes its cache files whole, so processes may share the folder) by
every later process in well under a second. The prior families travel in the
per-pair data as codes, so one compiled function serves every structure of a model.

The sampler works on the coordinates of the PyMC models (``normal.build_model``,
``student_t.build_model``, ``partial.build_model``): the means; log sigma; the
log-odds of rho's position on (0, 1); for the Student-t model log(nu - 1); for the
partial model the whitened slopes. The Jacobian terms are the same,
so each density differs from PyMC's only by a constant; tests check values and
gradients against PyMC's compiled models for every prior family.

The per-pair data are one float64 vector (``pack``): ``n, mean_x, mean_y, sxx,
syy, sxy`` (standardised sufficient statistics), the mean family code, two
locations, two scales, the SD family code, two scales, nu of a half-Student-t
prior, the two shapes of rho's stretched beta prior; the Student-t model then
has the standardised rows, all x then all y; the partial model its sums and
slopes' terms (``pack_partial``).
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

HEADER = 17
MEAN_FAMILIES = {"normal": 0.0, "flat": 1.0}
SD_FAMILIES = {"half_normal": 0.0, "half_student_t": 1.0, "jeffreys": 2.0}
# the Student-t model's prior nu - 1 ~ Exponential(rate 1/29) (see models/student_t.py)
NU_RATE = 1.0 / 29.0
# nutpie's callback return codes: 0 is a good evaluation; 3 and 4 say the gradient or the density was not
# finite, which the sampler treats as a divergent point rather than a crash. Every function is compiled with
# NumPy's error model: a division by zero (D = 1 - rho^2 underflows to 0 far out in rho's log-odds) gives an
# infinity that those codes report; under Python's model it raised an exception that a C callback cannot
# pass on, so numba printed it and the sampler read a density that had not been written.
OK, NOT_FINITE_GRADIENT, NOT_FINITE_DENSITY = 0, 3, 4


def pack(inputs: ModelInputs) -> np.ndarray:
    """One pair's ``ModelInputs`` (of the normal or the Student-t model) as the vector the callbacks read."""
    mean_family, sd_family = inputs.structure.split("+")[-2:]
    values = inputs.values
    rows = [np.asarray(values[name], dtype=float) for name in ("xz", "yz") if name in values]
    header = np.zeros(HEADER)
    header[0:6] = values["suff"] if "suff" in values else (rows[0].size, 0.0, 0.0, 0.0, 0.0, 0.0)
    header[6] = MEAN_FAMILIES[mean_family]
    if mean_family == "normal":
        header[7:9] = values["mean_loc"]
        header[9:11] = values["mean_scale"]
    header[11] = SD_FAMILIES[sd_family]
    if sd_family != "jeffreys":
        header[12:14] = values["sd_scale"]
    if sd_family == "half_student_t":
        header[14] = float(values["sd_nu"])
    header[15] = float(values["rho_a"])
    header[16] = float(values["rho_b"])
    return np.concatenate([header, *rows])


@numba.njit(cache=True, error_model="numpy")
def _softplus(value: float) -> float:
    """log(1 + e^value) without overflow."""
    if value > 0.0:
        return value + math.log1p(math.exp(-value))
    return math.log1p(math.exp(value))


@numba.njit(cache=True, error_model="numpy")
def _prior_terms(theta: np.ndarray, data: np.ndarray, grad: np.ndarray) -> float:
    """The priors on the means, the SDs and rho, with the Jacobians of their transforms; adds to ``grad``."""
    logp = 0.0
    if data[6] == 0.0:  # normal priors on the means
        for i in range(2):
            z = (theta[i] - data[7 + i]) / data[9 + i]
            logp -= 0.5 * z * z
            grad[i] -= z / data[9 + i]
    for i in range(2):
        sigma = math.exp(theta[2 + i])
        if data[11] == 0.0:  # half-normal on sigma, plus the Jacobian of sigma = exp(log sigma)
            ratio = sigma * sigma / (data[12 + i] * data[12 + i])
            logp += -0.5 * ratio + theta[2 + i]
            grad[2 + i] += -ratio + 1.0
        elif data[11] == 1.0:  # half-Student-t on sigma, plus the same Jacobian
            nu = data[14]
            ratio = sigma * sigma / (nu * data[12 + i] * data[12 + i])
            logp += -0.5 * (nu + 1.0) * math.log1p(ratio) + theta[2 + i]
            grad[2 + i] += -(nu + 1.0) * ratio / (1.0 + ratio) + 1.0
        # Jeffreys' prior, 1 / sigma, is flat on log sigma: nothing to add
    # Beta(a, b) on u = rho_unit with the log-odds Jacobian u (1 - u): a log u + b log(1 - u)
    t = theta[4]
    u = 1.0 / (1.0 + math.exp(-t))
    logp += -data[15] * _softplus(-t) - data[16] * _softplus(t)
    grad[4] += data[15] * (1.0 - u) - data[16] * u
    return logp


@numba.njit(cache=True, error_model="numpy")
def _rho_terms(t: float) -> tuple[float, float, float]:
    """rho, log D and D for D = 1 - rho^2 = 4 u (1 - u), u = rho_unit: formed from log u and log(1 - u), so D
    keeps its digits when rho is near -1 or 1."""
    log_u, log_1mu = -_softplus(-t), -_softplus(t)
    log_d = math.log(4.0) + log_u + log_1mu
    return 2.0 * math.exp(log_u) - 1.0, log_d, math.exp(log_d)


@numba.njit(cache=True, error_model="numpy")
def normal_log_density(theta: np.ndarray, data: np.ndarray, grad: np.ndarray) -> float:
    """The normal model's log posterior density at ``theta`` (up to a constant); writes its gradient.

    Likelihood from sufficient statistics: the bivariate normal's quadratic form expanded around the sample
    means (common practice), so the cost does not depend on n.
    """
    n, mean_x, mean_y, sxx, syy, sxy = data[0], data[1], data[2], data[3], data[4], data[5]
    log_sx, log_sy = theta[2], theta[3]
    sx, sy = math.exp(log_sx), math.exp(log_sy)
    rho, log_d, d = _rho_terms(theta[4])
    dx, dy = mean_x - theta[0], mean_y - theta[1]
    qxx = (sxx + n * dx * dx) / (sx * sx)
    qyy = (syy + n * dy * dy) / (sy * sy)
    qxy = (sxy + n * dx * dy) / (sx * sy)
    quadratic = qxx - 2.0 * rho * qxy + qyy
    grad[0] = n / d * (dx / (sx * sx) - rho * dy / (sx * sy))
    grad[1] = n / d * (dy / (sy * sy) - rho * dx / (sx * sy))
    grad[2] = -n + (qxx - rho * qxy) / d
    grad[3] = -n + (qyy - rho * qxy) / d
    # d rho / d t = 2 u (1 - u) = D / 2
    grad[4] = 0.5 * (n * rho + qxy - rho * quadratic / d)
    loglik = -n * log_sx - n * log_sy - 0.5 * n * log_d - 0.5 * quadratic / d
    return loglik + _prior_terms(theta, data, grad)


@numba.njit(cache=True, error_model="numpy")
def student_t_log_density(theta: np.ndarray, data: np.ndarray, grad: np.ndarray) -> float:
    """The Student-t model's log posterior density at ``theta`` (up to a constant); writes its gradient.

    Each row adds -log sigma_x - log sigma_y - log(D) / 2 - (nu + 2) / 2 log(1 + q / nu), q the row's
    Mahalanobis form (the formula of ``student_t.row_loglik``); theta[5] is log(nu - 1).
    """
    n = int(data[0])
    log_sx, log_sy = theta[2], theta[3]
    sx, sy = math.exp(log_sx), math.exp(log_sy)
    rho, log_d, d = _rho_terms(theta[4])
    nu_minus_one = math.exp(theta[5])
    nu = 1.0 + nu_minus_one
    loglik = -n * (log_sx + log_sy + 0.5 * log_d)
    g_mx = g_my = g_sx = g_sy = g_t = g_nu = 0.0
    for i in range(n):
        u = (data[HEADER + i] - theta[0]) / sx
        v = (data[HEADER + n + i] - theta[1]) / sy
        q = (u * u - 2.0 * rho * u * v + v * v) / d
        log_term = math.log1p(q / nu)
        loglik -= 0.5 * (nu + 2.0) * log_term
        # w = (nu + 2) / (nu + q): the row's weight, small for rows far out
        w = (nu + 2.0) / (nu + q)
        g_mx += w * (u - rho * v)
        g_my += w * (v - rho * u)
        g_sx += w * (u * u - rho * u * v)
        g_sy += w * (v * v - rho * u * v)
        g_t += w * (u * v - rho * q)
        g_nu += -0.5 * log_term + 0.5 * q / nu * w
    grad[0] = g_mx / (sx * d)
    grad[1] = g_my / (sy * d)
    grad[2] = -n + g_sx / d
    grad[3] = -n + g_sy / d
    grad[4] = 0.5 * (n * rho + g_t)
    # nu = 1 + exp(theta[5]); the prior on nu - 1 with the Jacobian of the log: -rate (nu - 1) + theta[5]
    grad[5] = g_nu * nu_minus_one - NU_RATE * nu_minus_one + 1.0
    return loglik - NU_RATE * nu_minus_one + theta[5] + _prior_terms(theta, data, grad)


@numba.njit(cache=True, error_model="numpy")
def expand(theta: np.ndarray, out: np.ndarray) -> None:
    """The values kept for each draw: mu_z, sigma_z, rho and (Student-t) nu."""
    out[0] = theta[0]
    out[1] = theta[1]
    out[2] = math.exp(theta[2])
    out[3] = math.exp(theta[3])
    out[4] = 2.0 / (1.0 + math.exp(-theta[4])) - 1.0
    if theta.size > 5:
        out[5] = 1.0 + math.exp(theta[5])



# ----------------------------------------------------------------------------- the partial model
# Its data follow the header: k; the standardised (x, y) sums s_xx, s_yy, s_xy; W = L^-1 S_zv (k x 2, row
# by row), with S_zz = L L'; and L^-1 (k x k), which turns the sampled whitened slopes A into the slopes
# B = A L^-1 kept with the draws. The header's sums are the residual ones at the least-squares slopes, so
# a chain starts where ``initial_point`` starts a simple pair's, at the partial r.
PARTIAL_START = HEADER + 4


def pack_partial(inputs: ModelInputs) -> np.ndarray:
    """One pair's ``ModelInputs`` of the partial model as the vector its callbacks read."""
    values = inputs.values
    cross = np.asarray(values["cross"], dtype=float)
    basis = np.asarray(values["slope_basis"], dtype=float)
    k = basis.shape[0]
    w = basis @ cross[2:, :2]  # L^-1 S_zv
    residual = cross[:2, :2] - w.T @ w  # C(B^): the sums left at the least-squares slopes
    header = pack(ModelInputs(structure=inputs.structure, values={
        "suff": np.array([float(values["n"]), 0.0, 0.0, residual[0, 0], residual[1, 1], residual[0, 1]]),
        **{name: value for name, value in values.items() if name not in ("cross", "slope_basis", "n")}}))
    return np.concatenate([header, [float(k), cross[0, 0], cross[1, 1], cross[0, 1]], w.ravel(), basis.ravel()])


@numba.njit(cache=True, error_model="numpy")
def partial_log_density(theta: np.ndarray, data: np.ndarray, grad: np.ndarray) -> float:
    """The partial model's log posterior density at ``theta`` (up to a constant); writes its gradient.

    theta is the normal model's five coordinates, then the whitened slopes A (2 x k, row by row), flat. The
    likelihood is the normal model's with means 0 and the residual sums C(A) = S_vv - A W - W'A' + A A'
    (models/partial.py); with G the gradient of the log-likelihood in C (symmetric), the slopes' gradient is
    2 G (A - W').
    """
    k = int(data[HEADER])
    w = data[PARTIAL_START:PARTIAL_START + 2 * k]
    aw00 = aw01 = aw10 = aw11 = aa00 = aa01 = aa11 = 0.0
    for j in range(k):
        a0, a1 = theta[5 + j], theta[5 + k + j]
        w0, w1 = w[2 * j], w[2 * j + 1]
        aw00 += a0 * w0
        aw01 += a0 * w1
        aw10 += a1 * w0
        aw11 += a1 * w1
        aa00 += a0 * a0
        aa01 += a0 * a1
        aa11 += a1 * a1
    local = data[:HEADER].copy()
    local[1] = 0.0
    local[2] = 0.0
    local[3] = data[HEADER + 1] - 2.0 * aw00 + aa00
    local[4] = data[HEADER + 2] - 2.0 * aw11 + aa11
    local[5] = data[HEADER + 3] - aw01 - aw10 + aa01
    value = normal_log_density(theta[:5], local, grad[:5])
    sx, sy = math.exp(theta[2]), math.exp(theta[3])
    rho, _, d = _rho_terms(theta[4])
    g00 = -0.5 / (d * sx * sx)
    g11 = -0.5 / (d * sy * sy)
    g01 = 0.5 * rho / (d * sx * sy)
    for j in range(k):
        e0 = theta[5 + j] - w[2 * j]  # (A - W')[0, j]
        e1 = theta[5 + k + j] - w[2 * j + 1]  # (A - W')[1, j]
        grad[5 + j] = 2.0 * (g00 * e0 + g01 * e1)
        grad[5 + k + j] = 2.0 * (g01 * e0 + g11 * e1)
    return value


@numba.njit(cache=True, error_model="numpy")
def expand_partial(theta: np.ndarray, data: np.ndarray, out: np.ndarray) -> None:
    """The values kept for each draw: mu_z, sigma_z, rho and the slopes B = A L^-1 (2 x k, row by row)."""
    expand(theta[:5], out[:5])
    k = int(data[HEADER])
    basis = data[PARTIAL_START + 2 * k:PARTIAL_START + 2 * k + k * k]
    for r in range(2):
        for c in range(k):
            total = 0.0
            for j in range(k):
                total += theta[5 + r * k + j] * basis[j * k + c]
            out[5 + r * k + c] = total


_LOGP_SIGNATURE = types.int64(types.uint64, types.CPointer(types.double), types.CPointer(types.double),
                              types.CPointer(types.double), types.voidptr)
_EXPAND_SIGNATURE = types.int64(types.uint64, types.uint64, types.CPointer(types.double),
                                types.CPointer(types.double), types.voidptr)


@numba.njit(cache=True, error_model="numpy")
def _checked(value: float, grad: np.ndarray) -> int:
    for i in range(grad.size):
        if not np.isfinite(grad[i]):
            return NOT_FINITE_GRADIENT
    return OK if np.isfinite(value) else NOT_FINITE_DENSITY


# The C callbacks nutpie calls: compiled when this module is first imported on a machine, loaded from the
# cache after that. Their dimensions are checked, since nutpie passes them with every call.
@numba.cfunc(_LOGP_SIGNATURE, cache=True, error_model="numpy")
def _normal_logp(dim, x_, grad_, logp_, data_):  # type: ignore[no-untyped-def]
    if dim != 5:
        return -1
    grad = numba.carray(grad_, (5,))
    value = normal_log_density(numba.carray(x_, (5,)), numba.carray(data_, (HEADER,), np.float64), grad)
    logp_[0] = value
    return _checked(value, grad)


@numba.cfunc(_LOGP_SIGNATURE, cache=True, error_model="numpy")
def _student_t_logp(dim, x_, grad_, logp_, data_):  # type: ignore[no-untyped-def]
    if dim != 6:
        return -1
    n = int(numba.carray(data_, (1,), np.float64)[0])
    grad = numba.carray(grad_, (6,))
    value = student_t_log_density(numba.carray(x_, (6,)), numba.carray(data_, (HEADER + 2 * n,), np.float64),
                                  grad)
    logp_[0] = value
    return _checked(value, grad)


@numba.cfunc(_EXPAND_SIGNATURE, cache=True, error_model="numpy")
def _expand(dim, expanded, x_, out_, data_):  # type: ignore[no-untyped-def]
    if expanded != dim or dim < 5 or dim > 6:
        return -1
    expand(numba.carray(x_, (dim,)), numba.carray(out_, (dim,)))
    return OK



@numba.cfunc(_LOGP_SIGNATURE, cache=True, error_model="numpy")
def _partial_logp(dim, x_, grad_, logp_, data_):  # type: ignore[no-untyped-def]
    n_dim = int(dim)
    if n_dim < 7 or (n_dim - 5) % 2 != 0:
        return -1
    data = numba.carray(data_, (PARTIAL_START + 2 * ((n_dim - 5) // 2) + ((n_dim - 5) // 2) ** 2,), np.float64)
    if int(data[HEADER]) != (n_dim - 5) // 2:
        return -1
    grad = numba.carray(grad_, (n_dim,))
    value = partial_log_density(numba.carray(x_, (n_dim,)), data, grad)
    logp_[0] = value
    return _checked(value, grad)


@numba.cfunc(_EXPAND_SIGNATURE, cache=True, error_model="numpy")
def _partial_expand(dim, expanded, x_, out_, data_):  # type: ignore[no-untyped-def]
    n_dim = int(dim)
    if int(expanded) != n_dim or n_dim < 7 or (n_dim - 5) % 2 != 0:
        return -1
    data = numba.carray(data_, (PARTIAL_START + 2 * ((n_dim - 5) // 2) + ((n_dim - 5) // 2) ** 2,), np.float64)
    expand_partial(numba.carray(x_, (n_dim,)), data, numba.carray(out_, (n_dim,)))
    return OK

@dataclasses.dataclass(frozen=True)
class HandWrittenModel(CompiledPyMCModel):
    """nutpie's compiled-model record pointing at the callbacks above; its data are one packed vector."""

    def for_inputs(self, inputs: ModelInputs) -> HandWrittenModel:
        """This model fed one pair (the counterpart of ``with_data``, which names PyTensor's shared data)."""
        data = packed(inputs)
        return dataclasses.replace(self, user_data=data, initial_point_func=_starting_points(data, self.n_dim))


# the coordinates and the kept values of each model, named as in the PyMC models
_UNCONSTRAINED = ["mu_z_0", "mu_z_1", "log_sigma_z_0", "log_sigma_z_1", "rho_unit_logodds_"]
_KEPT: dict[str, tuple[str, ...]] = {"normal": ("mu_z", "sigma_z", "rho"),
                                     "student_t": ("mu_z", "sigma_z", "rho", "nu"),
                                     "partial": ("mu_z", "sigma_z", "rho", "slopes_z")}


def packed(inputs: ModelInputs) -> np.ndarray:
    """The vector the callbacks of ``inputs``' model read."""
    return pack_partial(inputs) if inputs.structure.startswith("partial") else pack(inputs)


def controls_of(inputs: ModelInputs) -> int:
    """The number of control columns (0 but for the partial model)."""
    return int(np.asarray(inputs.values["slope_basis"]).shape[0]) if inputs.structure.startswith("partial") else 0


def compiled_model(model: str, inputs: ModelInputs) -> HandWrittenModel:
    """A nutpie model of ``model`` (``normal``, ``student_t`` or, for one number of controls, ``partial``)
    for any prior family, fed ``inputs``."""
    k = controls_of(inputs)
    n_dim = {"normal": 5, "student_t": 6, "partial": 5 + 2 * k}[model]
    names = list(_KEPT[model])
    shapes = {"mu_z": (2,), "sigma_z": (2,), "rho": (), "nu": (), "slopes_z": (2, k)}
    ends = np.cumsum([int(np.prod(shapes[name])) for name in names])
    slices = [slice(int(end - np.prod(shapes[name])), int(end)) for end, name in zip(ends, names, strict=True)]
    data = packed(inputs)
    coordinates = _UNCONSTRAINED + (["nu_minus_one_log_"] if model == "student_t" else
                                    [f"slopes_whitened_{r}_{j}" for r in range(2) for j in range(k)])
    logp, expanded = {"normal": (_normal_logp, _expand), "student_t": (_student_t_logp, _expand),
                      "partial": (_partial_logp, _partial_expand)}[model]
    return HandWrittenModel(
        dims={}, compiled_logp_func=logp, compiled_expand_func=expanded,
        initial_point_func=_starting_points(data, n_dim), shared_data={}, user_data=data, n_expanded=n_dim,
        shape_info=(names, slices, [np.array(shapes[name], dtype=int) for name in names]),
        logp_func=None, expand_func=None, _n_dim=n_dim, _shapes={name: shapes[name] for name in names},
        _coords={"unconstrained_parameter": pd.Index(coordinates)})


def initial_point(data: np.ndarray, n_dim: int, seed: int) -> np.ndarray:
    """A chain's starting point: the standardised sample means and SDs, the sample r, and the prior mean of
    nu - 1 (Student-t) or the least-squares slopes (partial; its header holds the residual sums, so r is the
    partial r), each moved by a uniform jitter in (-1, 1), as PyMC's default start is, so chains start apart."""
    n, sxx, syy, sxy = data[0], data[3], data[4], data[5]
    if sxx <= 0.0:  # the Student-t model's header has no sums: the rows are standardised
        sxx = syy = n - 1.0
        sxy = float(np.dot(data[HEADER:HEADER + int(n)], data[HEADER + int(n):HEADER + 2 * int(n)]))
    r = min(max(sxy / math.sqrt(sxx * syy), -0.9), 0.9)
    centre = [data[1], data[2], 0.5 * math.log(sxx / (n - 1.0)), 0.5 * math.log(syy / (n - 1.0)),
              math.log((1.0 + r) / (1.0 - r))]
    if n_dim == 6:  # the Student-t model: the prior mean of nu - 1
        centre.append(math.log(1.0 / NU_RATE))
    elif n_dim > 6:  # the partial model: the least-squares whitened slopes, W' (see pack_partial)
        k = (n_dim - 5) // 2
        centre.extend(data[PARTIAL_START:PARTIAL_START + 2 * k].reshape(k, 2).T.ravel())
    return np.array(centre) + np.random.default_rng(seed).uniform(-1.0, 1.0, n_dim)


def _starting_points(data: np.ndarray, n_dim: int) -> Callable[[int], np.ndarray]:
    def starting_point(seed: int) -> np.ndarray:
        return initial_point(data, n_dim, seed)

    return starting_point
