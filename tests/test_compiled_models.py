"""The hand-written numba densities of the normal and Student-t models against PyMC's own compiled models,
scipy and finite differences; and their on-disk cache, which a second process loads instead of compiling.

The references outside this project: PyMC's ``compile_logp``/``compile_dlogp`` of the same models (their
transforms and Jacobians are PyMC's), ``scipy.stats.multivariate_normal`` and ``scipy.stats.multivariate_t``
for the likelihood of the rows, and ``scipy.optimize.approx_fprime`` for the gradients.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pytest
from scipy import optimize, stats

from reportgen.data import PairData, sufficient_stats
from reportgen.models import ModelInputs, compiled, normal, partial, student_t
from reportgen.spec import PairSpec, Priors

PRIOR_FAMILIES = [
    {},
    {"means": {"family": "flat"}},
    {"sds": {"family": "half_student_t", "nu": 3, "scale": 2.0}},
    {"sds": {"family": "jeffreys"}, "means": {"family": "flat"}},
    {"means": {"location": 10.0, "scale": 3.0, "units": "data"}, "rho": {"family": "beta", "a": 3.0, "b": 2.0}},
]


def rows(n: int = 40, seed: int = 3) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = rng.normal(10.0, 2.0, n)
    y = 0.6 * (x - 10.0) + rng.normal(0.0, 1.5, n)
    return x, y


MODELS = {"normal": (normal, compiled.normal_log_density, 5),
          "student_t": (student_t, compiled.student_t_log_density, 6)}


def inputs_for(prior: dict, model: str = "normal") -> ModelInputs:
    x, y = rows()
    if model == "student_t":
        spec = PairSpec(x="x", y="y", label="", priors=Priors.model_validate(prior))
        return student_t.inputs_for(PairData(pair=spec, x=x, y=y, n_rows=x.size, n_dropped=0,
                                             stats=sufficient_stats(x, y)))
    return normal.model_inputs(sufficient_stats(x, y), Priors.model_validate(prior))


def density(theta: np.ndarray, data: np.ndarray, model: str = "normal") -> tuple[float, np.ndarray]:
    grad = np.zeros(theta.size)
    return MODELS[model][1](theta, data, grad), grad


def points(count: int = 6, n_dim: int = 5) -> list[np.ndarray]:
    rng = np.random.default_rng(11)
    return [rng.normal(0.0, 0.6, n_dim) for _ in range(count)]


# every prior family with the normal model; the Student-t model shares the prior code, so two families
# (each PyMC model costs seconds to compile) check its likelihood and its nu
AGAINST_PYMC = [(prior, "normal") for prior in PRIOR_FAMILIES] + [(PRIOR_FAMILIES[0], "student_t"),
                                                                  (PRIOR_FAMILIES[3], "student_t")]


@pytest.mark.parametrize(("prior", "model"), AGAINST_PYMC,
                         ids=lambda v: v if isinstance(v, str) else "+".join(sorted(v)) or "defaults")
def test_density_and_gradient_equal_pymcs_compiled_model(prior: dict, model: str) -> None:
    """PyMC's model of the same structure, on the same unconstrained coordinates: the log densities differ by
    one constant (normalising terms PyMC keeps), and the gradients agree to rounding."""
    module, _, n_dim = MODELS[model]
    inputs = inputs_for(prior, model)
    pymc_model = module.build_model(inputs)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        logp, dlogp = pymc_model.compile_logp(), pymc_model.compile_dlogp()
    names = [v.name for v in pymc_model.value_vars]
    data = compiled.pack(inputs)
    offsets = []
    for theta in points(n_dim=n_dim):
        point = {names[0]: theta[0:2], names[1]: theta[2:4], **{name: theta[i] for i, name in enumerate(names[2:], 4)}}
        ours, grad = density(theta, data, model)
        offsets.append(ours - float(logp(point)))
        np.testing.assert_allclose(grad, dlogp(point), rtol=1e-9, atol=1e-9)
    assert np.ptp(offsets) < 1e-8


def test_likelihood_equals_scipys_bivariate_normal_of_the_rows() -> None:
    """Flat means, Jeffreys' SDs (flat on log sigma) and a uniform rho: what is left beside the likelihood is
    the log-odds Jacobian of rho's position, log u + log(1 - u); the rest is scipy's log density of the
    standardised rows, up to one constant."""
    x, y = rows()
    inputs = inputs_for({"sds": {"family": "jeffreys"}, "means": {"family": "flat"}})
    data = compiled.pack(inputs)
    zx, zy = (x - x.mean()) / x.std(ddof=1), (y - y.mean()) / y.std(ddof=1)
    gaps = []
    for theta in points():
        sx, sy = np.exp(theta[2:4])
        u = 1.0 / (1.0 + np.exp(-theta[4]))
        rho = 2.0 * u - 1.0
        cov = [[sx * sx, rho * sx * sy], [rho * sx * sy, sy * sy]]
        reference = stats.multivariate_normal(theta[0:2], cov).logpdf(np.column_stack([zx, zy])).sum()
        ours, _ = density(theta, data)
        gaps.append(ours - np.log(u) - np.log1p(-u) - reference)
    assert np.ptp(gaps) < 1e-8


def test_student_t_likelihood_equals_scipys_bivariate_t_of_the_rows() -> None:
    """The same for the Student-t model, against scipy.stats.multivariate_t with shape matrix S and df nu; the
    prior of nu - 1, Exponential(rate 1/29) on the log scale, -(nu - 1) / 29 + log(nu - 1), is removed too."""
    x, y = rows()
    inputs = inputs_for({"sds": {"family": "jeffreys"}, "means": {"family": "flat"}}, "student_t")
    data = compiled.pack(inputs)
    zx, zy = (x - x.mean()) / x.std(ddof=1), (y - y.mean()) / y.std(ddof=1)
    gaps = []
    for theta in points(n_dim=6):
        sx, sy = np.exp(theta[2:4])
        u = 1.0 / (1.0 + np.exp(-theta[4]))
        rho, nu = 2.0 * u - 1.0, 1.0 + np.exp(theta[5])
        shape = [[sx * sx, rho * sx * sy], [rho * sx * sy, sy * sy]]
        reference = stats.multivariate_t(theta[0:2], shape, df=nu).logpdf(np.column_stack([zx, zy])).sum()
        ours, _ = density(theta, data, "student_t")
        prior_nu = -(nu - 1.0) / 29.0 + theta[5]
        gaps.append(ours - np.log(u) - np.log1p(-u) - prior_nu - reference)
    assert np.ptp(gaps) < 1e-8


@pytest.mark.parametrize("model", sorted(MODELS))
@pytest.mark.parametrize("prior", PRIOR_FAMILIES[:4], ids=["defaults", "flat", "student_t", "jeffreys"])
def test_gradient_matches_finite_differences(prior: dict, model: str) -> None:
    data = compiled.pack(inputs_for(prior, model))
    for theta in points(3, MODELS[model][2]):
        _, grad = density(theta, data, model)
        numeric = optimize.approx_fprime(theta, lambda t: density(t, data, model)[0], 1e-7)
        np.testing.assert_allclose(grad, numeric, rtol=1e-4, atol=1e-3)


def test_density_stays_finite_near_rho_of_one() -> None:
    """rho_unit's log-odds of +-30 (rho within 1e-13 of +-1): D = 1 - rho^2 is formed from log u and
    log(1 - u), so the density is a finite number, very low, with a gradient pointing back inward."""
    data = compiled.pack(inputs_for({}))
    for t, inward in ((30.0, -1.0), (-30.0, 1.0)):
        value, grad = density(np.array([0.0, 0.0, 0.0, 0.0, t]), data)
        assert np.isfinite(value) and np.isfinite(grad).all()
        assert np.sign(grad[4]) == inward


@pytest.mark.parametrize("model", ["normal", "partial"])
def test_a_point_where_rho_is_one_in_floating_point_is_reported_not_finite(model: str) -> None:
    """Far out in rho's log-odds (800) D = 1 - rho^2 underflows to 0: the density is not finite and the C
    callback says so with nutpie's code for a non-finite density or gradient (the sampler then counts a
    divergence), instead of raising inside a callback, which cannot pass an exception on."""
    import ctypes

    if model == "normal":
        data, theta, logp = compiled.pack(inputs_for({})), np.array([0.0, 0.0, 0.0, 0.0, 800.0]), compiled._normal_logp
    else:
        data = compiled.packed(partial_inputs(1, PRIOR_FAMILIES[0]))
        theta, logp = np.array([0.0, 0.0, 0.0, 0.0, 800.0, 0.1, -0.1]), compiled._partial_logp
    grad, value = np.zeros(theta.size), np.full(1, 123.0)
    pointer = ctypes.POINTER(ctypes.c_double)
    code = logp.ctypes(theta.size, theta.ctypes.data_as(pointer), grad.ctypes.data_as(pointer),
                       value.ctypes.data_as(pointer), data.ctypes.data_as(ctypes.c_void_p))
    assert code in (compiled.NOT_FINITE_GRADIENT, compiled.NOT_FINITE_DENSITY)
    assert not (np.isfinite(value[0]) and np.isfinite(grad).all())


def test_expand_gives_the_constrained_values() -> None:
    out = np.zeros(6)
    compiled.expand(np.array([0.1, -0.2, np.log(2.0), np.log(0.5), np.log(3.0), np.log(4.0)]), out)
    # rho = 2 u - 1 with u = 3 / 4 (log-odds log 3); nu = 1 + exp(log 4)
    np.testing.assert_allclose(out, [0.1, -0.2, 2.0, 0.5, 0.5, 5.0])


# ----------------------------------------------------------------------------- the partial model


def partial_inputs(k: int, prior: dict) -> ModelInputs:
    from tests.test_partial import adjusted, random_columns

    x, y, controls = random_columns(50, k, seed=30 + k)
    return partial.model_inputs(adjusted(x, y, controls), Priors.model_validate(prior))


PARTIAL_CASES = [(1, PRIOR_FAMILIES[0]), (2, PRIOR_FAMILIES[3]), (3, PRIOR_FAMILIES[2])]


@pytest.mark.parametrize(("k", "prior"), PARTIAL_CASES, ids=["1-defaults", "2-jeffreys", "3-student_t"])
def test_partial_density_and_gradient_equal_pymcs_compiled_model(k: int, prior: dict) -> None:
    """PyMC's partial model (models/partial.py: flat intercepts and whitened slopes, the Potential of the
    residual sums) on the same coordinates, the slopes raveled row by row as PyMC ravels them: the densities
    differ by one constant and the gradients agree to rounding, for 1 to 3 controls."""
    inputs = partial_inputs(k, prior)
    pymc_model = partial.build_model(inputs)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        logp, dlogp = pymc_model.compile_logp(), pymc_model.compile_dlogp()
    names = [v.name for v in pymc_model.value_vars]
    assert names[-1] == "slopes_whitened"
    data = compiled.packed(inputs)
    offsets = []
    for theta in points(n_dim=5 + 2 * k):
        point = {names[0]: theta[0:2], names[1]: theta[2:4], names[2]: theta[4],
                 names[3]: theta[5:].reshape(2, k)}
        grad = np.zeros(theta.size)
        ours = compiled.partial_log_density(theta, data, grad)
        offsets.append(ours - float(logp(point)))
        np.testing.assert_allclose(grad, dlogp(point), rtol=1e-9, atol=1e-9)
    assert np.ptp(offsets) < 1e-8


def test_partial_gradient_matches_finite_differences() -> None:
    data = compiled.packed(partial_inputs(2, PRIOR_FAMILIES[1]))
    for theta in points(3, 9):
        grad = np.zeros(9)
        compiled.partial_log_density(theta, data, grad)
        numeric = optimize.approx_fprime(theta, lambda t: compiled.partial_log_density(t, data, np.zeros(9)), 1e-7)
        np.testing.assert_allclose(grad, numeric, rtol=1e-4, atol=1e-3)


def test_partial_expand_keeps_the_slopes_on_the_standardised_scale() -> None:
    """The kept slopes are B = A L^-1 with S_zz = L L' (models/partial.py), as the PyMC model's ``slopes_z``;
    at A = W' (the chains' centre) B is the least-squares slopes S_vz S_zz^-1 (common practice, the normal
    equations) of the standardised columns."""
    inputs = partial_inputs(3, PRIOR_FAMILIES[0])
    data = compiled.packed(inputs)
    cross = inputs.values["cross"]
    least_squares = cross[:2, 2:] @ np.linalg.inv(cross[2:, 2:])
    centre = compiled.initial_point(data, 11, seed=0) - np.random.default_rng(0).uniform(-1.0, 1.0, 11)
    out = np.zeros(11)
    compiled.expand_partial(centre, data, out)
    np.testing.assert_allclose(out[5:].reshape(2, 3), least_squares, rtol=1e-10, atol=1e-12)
    # the chains start at the partial r (the residual sums' correlation) and the residual SDs
    residual = compiled.packed(inputs)[3:6]
    r = residual[2] / np.sqrt(residual[0] * residual[1])
    assert 2.0 / (1.0 + np.exp(-centre[4])) - 1.0 == pytest.approx(np.clip(r, -0.9, 0.9), rel=1e-12)


CACHE_PROBE = """
import json
from reportgen.models import compiled as m
print(json.dumps({"hits": sum(f.cache_hits for f in (m._normal_logp, m._student_t_logp, m._expand, m._partial_logp,
                                                     m._partial_expand))}))
"""


def test_a_second_process_loads_the_compiled_density_from_the_cache(tmp_path: Path) -> None:
    """The first process in an empty cache folder compiles the callbacks and writes them; the next one loads
    all five from the folder (numba's own count of cache hits) instead of compiling them again."""
    env = {**os.environ, "NUMBA_CACHE_DIR": str(tmp_path / "cache")}

    def hits() -> int:
        done = subprocess.run([sys.executable, "-c", CACHE_PROBE], env=env, capture_output=True, text=True,
                              check=True)
        return json.loads(done.stdout.strip().splitlines()[-1])["hits"]

    assert hits() == 0
    assert any((tmp_path / "cache").rglob("*.nbi"))
    assert hits() == 5
