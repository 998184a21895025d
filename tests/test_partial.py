"""The partial-correlation model: the sums it reads, its likelihood, its exact reference and a sampler fit.

Sampler fits share one module-scoped Fitter with short chains; the first fit compiles the model for two
controls and Jeffreys' SD priors, and the second reuses it.
"""

from __future__ import annotations

import dataclasses

import arviz as az
import numpy as np
import pytest
import statsmodels.api as sm
from scipy import integrate, stats

from reportgen.data import PairData
from reportgen.data.controls import ControlData, control_data
from reportgen.errors import DataError
from reportgen.exact import exact_posterior
from reportgen.fit import Fitter
from reportgen.models import SAMPLED, partial
from reportgen.models.normal import suffstat_loglik
from reportgen.spec import PairSpec, Priors, RhoPrior, Sampler, SdPrior

HAS_ADJUSTMENT = "adjustment" in {field.name for field in dataclasses.fields(PairData)}
needs_adjustment = pytest.mark.skipif(not HAS_ADJUSTMENT, reason="PairData has no `adjustment` field yet: the "
                                      "partial model reads the control sums from it")
JEFFREYS = Priors(sds=SdPrior(family="jeffreys"))


def random_columns(n: int, k: int, seed: int, control_correlation: float | None = None,
                   ) -> tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]:
    """x and y that depend on k correlated controls (randomly mixed, or equicorrelated when
    ``control_correlation`` is given), with correlated residuals; offsets and scales differ."""
    rng = np.random.default_rng(seed)
    if control_correlation is None:
        z = rng.normal(size=(n, k)) @ (np.eye(k) + 0.5 * rng.normal(size=(k, k)))
    else:
        z = rng.multivariate_normal(np.zeros(k), np.full((k, k), control_correlation)
                                    + (1.0 - control_correlation) * np.eye(k), size=n)
    noise = rng.multivariate_normal([0.0, 0.0], [[1.0, 0.4], [0.4, 1.0]], size=n)
    x = 10.0 + z @ rng.normal(size=k) + 2.0 * noise[:, 0]
    y = -3.0 + z @ rng.normal(size=k) + 0.5 * noise[:, 1]
    return x, y, {f"c{j + 1}": 5.0 * j + (j + 1.0) * z[:, j] for j in range(k)}


def adjusted(x: np.ndarray, y: np.ndarray, controls: dict[str, np.ndarray]) -> ControlData:
    return control_data(x, y, controls, where="test.csv: x vs y")


def adjusted_pair(x: np.ndarray, y: np.ndarray, controls: dict[str, np.ndarray], priors: Priors,
                  name: str) -> PairData:
    """The pair as the fit stage receives it: the sums of x and y over the complete rows, and the controls."""
    adjustment = adjusted(x, y, controls)
    spec = PairSpec(x=name, y="y", label="", priors=priors, controls=tuple(controls))
    pair = PairData(pair=spec, x=x, y=y, n_rows=x.size, n_dropped=0, stats=adjustment.stats)
    return dataclasses.replace(pair, adjustment=adjustment)


# ----------------------------------------------------------------------------- the sums


@pytest.mark.parametrize("k", [1, 2, 3])
def test_partial_r_is_the_correlation_of_ols_residuals(k: int) -> None:
    """Reference: statsmodels OLS (with add_constant) of x on the controls and of y on the controls; the
    partial correlation is the correlation of the two residual series (common practice)."""
    x, y, controls = random_columns(80, k, seed=10 + k)
    design = sm.add_constant(np.column_stack(list(controls.values())))
    residual_x = sm.OLS(x, design).fit().resid
    residual_y = sm.OLS(y, design).fit().resid
    adjustment = adjusted(x, y, controls)
    assert adjustment.partial_r == pytest.approx(np.corrcoef(residual_x, residual_y)[0, 1], abs=1e-10)
    assert adjustment.residual.n == 80 - k and adjustment.k == k


def test_one_control_matches_yules_formula() -> None:
    """Reference: r_xy.z = (r_xy - r_xz r_yz) / sqrt((1 - r_xz^2)(1 - r_yz^2)) (Yule 1897; common practice),
    with the simple correlations from numpy.corrcoef."""
    x, y, controls = random_columns(60, 1, seed=3)
    r = np.corrcoef(np.column_stack([x, y, controls["c1"]]), rowvar=False)
    yule = (r[0, 1] - r[0, 2] * r[1, 2]) / np.sqrt((1 - r[0, 2] ** 2) * (1 - r[1, 2] ** 2))
    assert adjusted(x, y, controls).partial_r == pytest.approx(yule, abs=1e-12)


# ----------------------------------------------------------------------------- the likelihood


def standardised_rows(x: np.ndarray, y: np.ndarray, controls: dict[str, np.ndarray]) -> np.ndarray:
    columns = np.column_stack([x, y, *controls.values()])
    return (columns - columns.mean(axis=0)) / columns.std(axis=0, ddof=1)


def scipy_loglik(rows: np.ndarray, mu: np.ndarray, slopes: np.ndarray, sigma: np.ndarray, rho: float) -> float:
    """Sum over rows of scipy.stats.multivariate_normal.logpdf of (x, y) - mu - B z (the outside reference)."""
    covariance = np.array([[sigma[0] ** 2, rho * sigma[0] * sigma[1]], [rho * sigma[0] * sigma[1], sigma[1] ** 2]])
    errors = rows[:, :2] - mu - rows[:, 2:] @ slopes.T
    return float(np.sum(stats.multivariate_normal(mean=np.zeros(2), cov=covariance).logpdf(errors)))


def test_sum_loglik_equals_row_by_row_scipy_sum() -> None:
    """The log-likelihood from the standardised cross-products, suffstat_loglik of (n, 0, 0, C(B)), equals
    the row-by-row scipy.stats.multivariate_normal sum at random parameter values, k = 2, to 1e-8 relative.
    The cross-products are also numpy's: (n - 1) numpy.corrcoef."""
    x, y, controls = random_columns(50, 2, seed=7)
    adjustment = adjusted(x, y, controls)
    rows = standardised_rows(x, y, controls)
    cross = partial.standardised_cross(adjustment)
    assert cross == pytest.approx(49.0 * np.corrcoef(rows, rowvar=False), abs=1e-10)
    rng = np.random.default_rng(17)
    for _ in range(6):
        mu, slopes = rng.normal(scale=0.5, size=2), rng.normal(size=(2, 2))
        sigma, rho = rng.uniform(0.3, 2.0, size=2), rng.uniform(-0.95, 0.95)
        c = partial.residual_cross(cross, slopes)
        ours = suffstat_loglik((50, 0.0, 0.0, c[0, 0], c[1, 1], c[0, 1]), mu[0], mu[1], sigma[0], sigma[1], rho)
        assert ours == pytest.approx(scipy_loglik(rows, mu, slopes, sigma, rho), rel=1e-8)


def test_compiled_model_log_density_is_the_row_by_row_likelihood_plus_rho_prior() -> None:
    """PyMC's compile_logp (no Jacobian) of the built model at a point equals the scipy row-by-row sum plus
    scipy.stats.beta.logpdf of (rho + 1)/2 (Beta(2, 3) prior); intercepts, slopes and log SDs are flat
    (Jeffreys' SDs), so they add nothing. The sampler moves the whitened slopes A = B L, S_zz = L L'."""
    x, y, controls = random_columns(40, 2, seed=21)
    priors = Priors(sds=SdPrior(family="jeffreys"), rho=RhoPrior(family="beta", a=2.0, b=3.0))
    adjustment = adjusted(x, y, controls)
    inputs = partial.model_inputs(adjustment, priors)
    assert inputs.structure == "partial2+flat+jeffreys"
    logp = partial.build_model(inputs).compile_logp(jacobian=False)
    rows = standardised_rows(x, y, controls)
    chol = np.linalg.cholesky(partial.standardised_cross(adjustment)[2:, 2:])
    mu, slopes, sigma, rho = np.array([0.1, -0.2]), np.array([[0.4, -0.3], [0.2, 0.6]]), np.array([0.8, 1.2]), 0.35
    unit = (rho + 1.0) / 2.0
    point = {"mu_z": mu, "log_sigma_z": np.log(sigma), "slopes_whitened": slopes @ chol,
             "rho_unit_logodds__": np.log(unit / (1.0 - unit))}
    expected = scipy_loglik(rows, mu, slopes, sigma, rho) + stats.beta.logpdf(unit, 2.0, 3.0)
    assert float(logp(point)) == pytest.approx(expected, rel=1e-9)


# ----------------------------------------------------------------------------- the exact reference


def test_reference_under_scaled_sd_priors_matches_quadrature() -> None:
    """With half-normal SD priors in scaled units (read against the raw SDs, as the sampler reads them), the
    posterior mean of rho from reference_inputs matches a direct scipy.integrate.trapezoid over rho and the
    two log SDs of the kernel left once intercepts and slopes are integrated out (Gaussian integrals,
    derivation in models/partial.py): |Sigma|^(-(n-k-1)/2) exp(-tr(Sigma^-1 C^)/2) times scipy.stats.halfnorm
    priors. Reading the prior against the residual SDs instead moves the mean by far more than the tolerance."""
    rng = np.random.default_rng(5)
    n, z = 25, rng.normal(size=25)
    x = 3.0 * z + 0.8 * rng.normal(size=n)
    y = 0.3 * z + rng.normal(size=n) + 0.5 * x
    adjustment = adjusted(x, y, {"c1": z})
    scale = 0.4
    priors = Priors(sds=SdPrior(family="half_normal", scale=scale))
    c = partial.residual_cross(partial.standardised_cross(adjustment), adjustment.correlation[:2, 2:] @
                               np.linalg.inv(adjustment.correlation[2:, 2:]))
    power = n - 1 - 1  # n - k - 1
    zeta = np.linspace(-3.0, 3.0, 601)
    u1 = np.log(np.sqrt(c[0, 0] / power)) + np.linspace(-4.0, 4.0, 241)
    u2 = np.log(np.sqrt(c[1, 1] / power)) + np.linspace(-4.0, 4.0, 241)
    s1, s2 = np.exp(u1)[:, None], np.exp(u2)[None, :]
    log_prior_sd = stats.halfnorm.logpdf(s1, scale=scale) + stats.halfnorm.logpdf(s2, scale=scale) + np.log(s1 * s2)
    log_marginal = []
    for rho in np.tanh(zeta):
        one_minus = 1.0 - rho * rho
        trace = (c[0, 0] / s1**2 - 2.0 * rho * c[0, 1] / (s1 * s2) + c[1, 1] / s2**2) / one_minus
        log_f = -0.5 * power * np.log(s1**2 * s2**2 * one_minus) - 0.5 * trace + log_prior_sd
        peak = log_f.max()
        inner = integrate.trapezoid(integrate.trapezoid(np.exp(log_f - peak), u2, axis=1), u1)
        log_marginal.append(peak + np.log(inner) + np.log(one_minus))  # uniform prior on rho, d rho / d zeta
    density = np.exp(np.array(log_marginal) - max(log_marginal))
    quadrature_mean = integrate.trapezoid(np.tanh(zeta) * density, zeta) / integrate.trapezoid(density, zeta)
    assert partial.reference_partial_posterior(adjustment, priors).mean == pytest.approx(quadrature_mean, abs=1e-5)
    from reportgen.models.normal_reference import reference_posterior
    naive = reference_posterior(adjustment.residual, partial.flat_means(priors)).mean
    assert abs(naive - quadrature_mean) > 1e-3


def test_reference_under_jeffreys_priors_is_the_exact_partial_posterior() -> None:
    """Under Jeffreys' SD priors the reference_inputs route and exact_partial_posterior agree (both Jeffreys
    1961, the first by quadrature, the second in closed form), and the latter is exact_posterior of n - k rows."""
    x, y, controls = random_columns(40, 2, seed=8)
    adjustment = adjusted(x, y, controls)
    exact = partial.exact_partial_posterior(adjustment, 2.0, 2.0)
    assert exact.mean == pytest.approx(exact_posterior(38, adjustment.partial_r, 2.0, 2.0).mean, abs=1e-12)
    priors = Priors(sds=SdPrior(family="jeffreys"), rho=RhoPrior(family="beta", a=2.0, b=2.0))
    assert partial.reference_partial_posterior(adjustment, priors).mean == pytest.approx(exact.mean, abs=1e-6)


# ----------------------------------------------------------------------------- sampler fits


@pytest.fixture(scope="module")
def fitter() -> Fitter:
    return Fitter(Sampler(draws=1000, tune=600, chains=2, seed=11), cores=2)


def rho_mean_and_mcse(draws: np.ndarray) -> tuple[float, float]:
    """Posterior mean and its Monte Carlo standard error (arviz.mcse, method "mean")."""
    mcse = float(az.mcse(az.convert_to_dataset({"rho": draws}), method="mean")["rho"])
    return float(np.mean(draws)), mcse


@pytest.mark.slow
@needs_adjustment
def test_sampler_agrees_with_the_exact_partial_posterior(fitter: Fitter) -> None:
    """Reference: Jeffreys' exact posterior of a correlation (Jeffreys 1961) with n - k rows and the partial r,
    which is the marginal posterior of rho under flat intercepts and slopes and 1/sigma SD priors (derivation
    in models/partial.py); the sampler's mean within 4 Monte Carlo standard errors. The residual SDs come back
    in x's and y's units: near the SDs of the OLS residuals (statsmodels), within 10%. The controls correlate
    at about 0.9, so their slopes are strongly correlated a posteriori (the model samples them whitened)."""
    assert SAMPLED["partial"] is partial
    x, y, controls = random_columns(300, 2, seed=42, control_correlation=0.9)
    pair = adjusted_pair(x, y, controls, JEFFREYS, "x")
    fit = fitter.fit(pair, 5, model="partial")
    mean, mcse = rho_mean_and_mcse(fit.draws["rho"])
    exact = partial.exact_partial_posterior(pair.adjustment)
    assert abs(mean - exact.mean) < 4.0 * mcse
    design = sm.add_constant(np.column_stack(list(controls.values())))
    residual_sd = np.std(sm.OLS(x, design).fit().resid, ddof=3)
    assert np.mean(fit.draws["sigma_x"]) == pytest.approx(residual_sd, rel=0.1)


@pytest.mark.slow
@needs_adjustment
def test_controls_that_explain_the_correlation_take_it_away(fitter: Fitter) -> None:
    """x and y each follow the sum of two controls and nothing else: raw r near 0.6, partial r near 0. The
    partial model's mean sits within 4 MCSE (arviz) of the exact partial posterior (Jeffreys 1961) and far from
    the exact posterior of the simple correlation over the same rows."""
    rng = np.random.default_rng(9)
    z = rng.normal(size=(300, 2)) / np.sqrt(2.0)
    common = z.sum(axis=1)
    x = common + np.sqrt(2.0 / 3.0) * rng.normal(size=300)
    y = common + np.sqrt(2.0 / 3.0) * rng.normal(size=300)
    pair = adjusted_pair(x, y, {"c1": z[:, 0], "c2": z[:, 1]}, JEFFREYS, "explained")
    assert 0.5 < pair.stats.sample_r < 0.7 and abs(pair.adjustment.partial_r) < 0.15
    mean, mcse = rho_mean_and_mcse(fitter.fit(pair, 5, model="partial").draws["rho"])
    assert abs(mean - partial.exact_partial_posterior(pair.adjustment).mean) < 4.0 * mcse
    simple = exact_posterior(pair.stats.n, pair.stats.sample_r)
    assert simple.mean - mean > 0.4


# ----------------------------------------------------------------------------- refused controls


def test_refused_controls_name_the_column() -> None:
    """A constant control, a control that is a linear function of the others, and too few complete rows are
    DataErrors whose message names the column (what the user must change)."""
    x, y, controls = random_columns(30, 2, seed=2)
    with pytest.raises(DataError, match="`steady`.*constant"):
        adjusted(x, y, {**controls, "steady": np.full(30, 4.0)})
    with pytest.raises(DataError, match="`c1`.*linear function of the other controls"):
        adjusted(x, y, {**controls, "c3": 2.0 * controls["c1"] - controls["c2"] + 7.0})
    sparse = np.where(np.arange(30) < 25, np.nan, controls["c1"])
    with pytest.raises(DataError, match="only 5 rows have `x`, `y`.*\\(sparse, c2\\)"):
        adjusted(x, y, {"sparse": sparse, "c2": controls["c2"]})
