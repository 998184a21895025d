"""The model stage: the sufficient-statistic likelihood against the textbook density."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from reportgen.data import sufficient_stats
from reportgen.models.base import to_data_units
from reportgen.models.normal import build_model, model_inputs, standardised_stats, suffstat_loglik
from reportgen.spec import MeanPrior, Priors, SdPrior


def textbook_loglik(x: np.ndarray, y: np.ndarray, mu: tuple[float, float], sd: tuple[float, float],
                    rho: float) -> float:
    """Sum over rows of scipy.stats.multivariate_normal.logpdf: the reference."""
    cov = np.array([[sd[0] ** 2, rho * sd[0] * sd[1]], [rho * sd[0] * sd[1], sd[1] ** 2]])
    return float(stats.multivariate_normal(mean=mu, cov=cov).logpdf(np.column_stack([x, y])).sum())


@pytest.mark.parametrize("n", [4, 60, 100_000])
@pytest.mark.parametrize("rho", [-0.95, 0.0, 0.3, 0.999])
def test_suffstat_likelihood_equals_multivariate_normal_logpdf(n: int, rho: float) -> None:
    rng = np.random.default_rng(n)
    x = rng.normal(50.0, 3.0, n)
    y = 0.5 * x + rng.normal(0.0, 2.0, n)
    s = sufficient_stats(x, y)
    stats_tuple = (s.n, s.mean_x, s.mean_y, s.sxx, s.syy, s.sxy)
    params = ((49.0, 26.0), (2.5, 3.5), rho)
    ours = suffstat_loglik(stats_tuple, params[0][0], params[0][1], params[1][0], params[1][1], rho)
    reference = textbook_loglik(x, y, *params)
    assert ours == pytest.approx(reference, rel=1e-8)


def test_pytensor_graph_evaluates_the_same_formula() -> None:
    """The compiled model's likelihood term equals the NumPy formula (and so scipy)."""
    import pymc as pm

    rng = np.random.default_rng(8)
    x = rng.normal(size=40)
    y = 0.4 * x + rng.normal(size=40)
    s = sufficient_stats(x, y)
    inputs = model_inputs(s, Priors())
    model = build_model(inputs)
    point = {"mu_z": np.array([0.1, -0.2]), "sigma_z_log__": np.log([0.9, 1.2]),
             "rho_unit_logodds__": np.array(0.4)}
    (term,) = model.replace_rvs_by_values([model.potentials[0]])
    potential = model.compile_fn(term, inputs=model.value_vars, on_unused_input="ignore")
    rho = 2.0 / (1.0 + np.exp(-0.4)) - 1.0
    expected = suffstat_loglik(tuple(standardised_stats(s)), 0.1, -0.2, 0.9, 1.2, rho)
    assert float(potential(point)) == pytest.approx(expected, rel=1e-10)
    assert isinstance(model, pm.Model)


def test_standardisation_keeps_the_likelihood_shape() -> None:
    """On standardised data the log-likelihood differs from the raw one by a constant
    (the Jacobian n log sd_x + n log sd_y; common practice: linear change of variables)."""
    rng = np.random.default_rng(9)
    x = rng.normal(100.0, 15.0, 30)
    y = rng.normal(-5.0, 0.2, 30) + 0.01 * x
    s = sufficient_stats(x, y)
    z_stats = standardised_stats(s)
    raw = (s.n, s.mean_x, s.mean_y, s.sxx, s.syy, s.sxy)
    offsets = []
    for mu_z, sd_z, rho in [((0.0, 0.0), (1.0, 1.0), 0.2), ((0.3, -0.1), (1.4, 0.7), -0.5)]:
        back = to_data_units(np.array(mu_z), np.array(sd_z), type("S", (), {
            "mean_x": s.mean_x, "mean_y": s.mean_y, "sd_x": s.sd_x, "sd_y": s.sd_y})())
        ll_raw = suffstat_loglik(raw, back["mu_x"], back["mu_y"], back["sigma_x"], back["sigma_y"], rho)
        ll_z = suffstat_loglik(tuple(z_stats), *mu_z, *sd_z, rho)
        offsets.append(ll_raw - ll_z)
    assert offsets[0] == pytest.approx(offsets[1], rel=1e-10)
    assert offsets[0] == pytest.approx(-s.n * np.log(s.sd_x * s.sd_y), rel=1e-10)


def test_priors_in_data_units_map_exactly_to_the_standardised_scale() -> None:
    """Normal(loc, scale) on mu is Normal((loc - mean)/sd, scale/sd) on (mu - mean)/sd."""
    s = sufficient_stats(np.array([1.0, 2.0, 4.0, 7.0]), np.array([3.0, 1.0, 2.0, 9.0]))
    priors = Priors(means=MeanPrior(units="data", location=5.0, scale=20.0),
                    sds=SdPrior(units="data", scale=8.0))
    values = model_inputs(s, priors).values
    assert values["mean_loc"][0] == pytest.approx((5.0 - s.mean_x) / s.sd_x)
    assert values["mean_scale"][1] == pytest.approx(20.0 / s.sd_y)
    assert values["sd_scale"][0] == pytest.approx(8.0 / s.sd_x)
    density_data = stats.norm(5.0, 20.0).pdf(3.3)
    density_z = stats.norm(values["mean_loc"][0], values["mean_scale"][0]).pdf((3.3 - s.mean_x) / s.sd_x)
    assert density_data == pytest.approx(density_z / s.sd_x)
