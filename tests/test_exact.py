"""Tests for reportgen.exact against references outside the module.

References used below:

* Jeffreys (1961), *Theory of Probability*, 3rd ed., ch. 5 (eq. for the posterior
  of a correlation with unknown means and standard deviations), and Ly, Marsman &
  Wagenmakers (2018), *Statistica Neerlandica* 72(1), eq. for h(n, r | rho):
  the marginal likelihood kernel and its hypergeometric closed form.
* Fisher (1921), *Metron* 1: atanh(r) is approximately Normal(atanh(rho), 1/(n-3)).
* Dickey (1971), *Annals of Mathematical Statistics* 42(1): the Savage-Dickey
  density ratio, BF10 = prior(0) / posterior(0) for a point null nested in H1.
* Jeffreys (1961), Appendix B: Bayes factors above 100 are "decisive".
* scipy.integrate.quad / dblquad, scipy.special.hyp2f1 and scipy.stats.beta as
  independent numerical references.

Direct-quadrature references write (cosh w - x) = (1 - x)(1 + 2 sinh^2(w/2)/(1 - x))
and rescale w by sqrt(2(1 - x)/m) so that quad sees an O(1)-wide integrand
for any n; 1 - rho*r is formed in exact rational arithmetic.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from fractions import Fraction
from typing import Any

import numpy as np
import pytest
from scipy import integrate, optimize, special, stats

from reportgen.exact import (
    ExactPosterior,
    exact_posterior,
    fisher_z_interval,
    log_bayes_factor_10,
    log_likelihood_kernel,
    log_stretched_beta_pdf,
)

# --------------------------------------------------------------------------- references


def one_minus_product(rho: float, r: float) -> float:
    """1 - rho*r in exact rational arithmetic, rounded once (common practice)."""
    return float(1 - Fraction(rho) * Fraction(r))


def log_cosh_integral_by_quad(x_complement: float, m: int) -> float:
    """log of integral_0^inf (cosh w - x)^(-m) dw by scipy quad, given 1 - x."""
    scale = math.sqrt(2.0 * x_complement / m)

    def integrand(u: float) -> float:
        w = u * scale
        if w > 700.0:
            return 0.0
        s = math.sinh(0.5 * w)
        return math.exp(-m * math.log1p(2.0 * s * s / x_complement))

    value, _ = integrate.quad(integrand, 0.0, np.inf, epsabs=0.0, epsrel=1e-13, limit=400)
    return -m * math.log(x_complement) + math.log(scale * value)


def log_h_by_quad(rho: float, n: int, r: float) -> float:
    """Jeffreys' kernel in its integral form (Jeffreys 1961 ch. 5; Ly et al. 2018).

    h = (1 - rho^2)^((n-1)/2) * integral_0^inf (cosh w - rho r)^(-(n-1)) dw.
    """
    m = n - 1
    return 0.5 * m * (math.log1p(-rho) + math.log1p(rho)) + log_cosh_integral_by_quad(
        one_minus_product(rho, r), m
    )


def stretched_beta_pdf_scipy(rho: float, a: float, b: float) -> float:
    """Stretched Beta density from scipy.stats.beta with loc=-1, scale=2."""
    return float(stats.beta(a, b, loc=-1.0, scale=2.0).pdf(rho))


def posterior_moments_by_quad(n: int, r: float, a: float, b: float) -> tuple[float, float, float]:
    """(log BF10, mean, sd) by nested scipy quad of prior * h (integral form) over rho.

    BF10 = integral prior(rho) h(rho) drho / h(0) (Jeffreys 1961 ch. 5; Dickey 1971).
    For large n the outer integral is limited to r +/- 40 (1 - r^2)/sqrt(n), outside
    which the integrand is below exp(-700) of its peak.
    """
    log_peak = log_h_by_quad(r, n, r)
    half = 40.0 * (1.0 - r * r) / math.sqrt(n)
    lo, hi = max(-1.0, r - half), min(1.0, r + half)

    def weight(rho: float) -> float:
        if rho <= -1.0 or rho >= 1.0:
            return 0.0
        return stretched_beta_pdf_scipy(rho, a, b) * math.exp(log_h_by_quad(rho, n, r) - log_peak)

    opts = {"epsabs": 0.0, "epsrel": 1e-11, "limit": 200, "points": [r]}
    z0, _ = integrate.quad(weight, lo, hi, **opts)
    z1, _ = integrate.quad(lambda t: t * weight(t), lo, hi, **opts)
    mean = z1 / z0
    z2, _ = integrate.quad(lambda t: (t - mean) ** 2 * weight(t), lo, hi, **opts)
    log_bf = math.log(z0) + log_peak - log_h_by_quad(0.0, n, r)
    return log_bf, mean, math.sqrt(z2 / z0)


# --------------------------------------------------------------------------- 1. closed form


@pytest.mark.parametrize("n", [4, 5, 10, 15, 16, 30, 200, 1000])
def test_kernel_matches_quadrature_of_integral_form(n: int) -> None:
    """Closed form (Ly et al. 2018) vs quad of the integral (Jeffreys 1961 ch. 5), rel 1e-8."""
    for r in (-0.9999, -0.6, 0.0, 0.35, 0.9999):
        for rho in (-0.999, -0.4, 0.0, 0.7, 0.9999):
            expected = log_h_by_quad(rho, n, r)
            got = float(log_likelihood_kernel(rho, n, r))
            assert got == pytest.approx(expected, rel=0, abs=1e-8), (n, r, rho)


@pytest.mark.parametrize("n", [10**5, 10**7])
def test_kernel_matches_quadrature_at_large_n(n: int) -> None:
    """Same check at large n (Jeffreys 1961 ch. 5).

    log h is O(n) here, so besides 1e-8 absolute the comparison allows the
    rounding of O(n)-sized terms, 2e-15 of |log h|.
    """
    for r in (-0.9999, -0.3, 0.0, 0.5, 0.99, 0.9999):
        for rho in (-0.999, -0.3, 0.0, 0.5, 0.99, 0.9999):
            expected = log_h_by_quad(rho, n, r)
            got = float(log_likelihood_kernel(rho, n, r))
            assert abs(got - expected) <= 1e-8 + 2e-15 * abs(expected), (n, r, rho)


@pytest.mark.parametrize("n", [4, 6, 15, 16, 40, 200])
def test_kernel_matches_textbook_closed_form_with_scipy_hyp2f1(n: int) -> None:
    """Closed form of Ly et al. (2018) evaluated naively with scipy.special.hyp2f1.

    For these moderate n scipy's hyp2f1 and gammaln are accurate, so the
    textbook formula is a second reference for the series used in the module.
    """
    m = n - 1
    rho = np.linspace(-0.995, 0.995, 41)
    for r in (-0.98, -0.2, 0.0, 0.6, 0.98):
        x = rho * r
        expected = (
            0.5 * m * np.log1p(-(rho**2))
            + 0.5 * math.log(math.pi / 2)
            + special.gammaln(m)
            - special.gammaln(m + 0.5)
            - (m - 0.5) * np.log1p(-x)
            + np.log(special.hyp2f1(0.5, 0.5, m + 0.5, 0.5 * (1 + x)))
        )
        np.testing.assert_allclose(log_likelihood_kernel(rho, n, r), expected, rtol=0, atol=1e-11)


def test_kernel_is_minus_infinity_at_the_ends() -> None:
    """h contains (1 - rho^2)^((n-1)/2), so h(+/-1) = 0 (Jeffreys 1961 ch. 5)."""
    values = log_likelihood_kernel(np.array([-1.0, 1.0]), 10, 0.4)
    assert np.all(np.isneginf(values))


# --------------------------------------------------------------------------- 2. full posterior


def full_log_marginal(data: np.ndarray, rho: float) -> float:
    """log p(data | rho) from the full bivariate-normal likelihood, written from scratch.

    log L = -n log(2 pi) - n/2 log det(Sigma) - 1/2 sum_i d_i' Sigma^-1 d_i with
    d_i = (x_i - mu1, y_i - mu2) (common practice). The means get a flat prior and
    are integrated out ANALYTICALLY with the standard decomposition
    sum_i d_i' S^-1 d_i = sum_i e_i' S^-1 e_i + n (xbar - mu)' S^-1 (xbar - mu),
    e_i = data_i - xbar, whose Gaussian integral over mu is 2 pi sqrt(det Sigma) / n
    (checked numerically in test_mean_integration_is_the_gaussian_integral).
    The standard deviations get the prior 1/(sigma1 sigma2) and are integrated
    NUMERICALLY with scipy dblquad in t_i = log sigma_i (so d sigma / sigma = dt).
    """
    n = data.shape[0]
    resid = data - data.mean(axis=0)
    sxx = float(np.sum(resid[:, 0] ** 2))
    syy = float(np.sum(resid[:, 1] ** 2))
    sxy = float(np.sum(resid[:, 0] * resid[:, 1]))
    one_minus = 1.0 - rho * rho
    log_one_minus = math.log(one_minus)
    tx, ty = 0.5 * math.log(sxx / n), 0.5 * math.log(syy / n)

    def log_integrand(t2: Any, t1: Any, exp: Callable[[Any], Any] = np.exp) -> Any:
        e1, e2 = exp(-t1), exp(-t2)
        quad_form = (sxx * e1 * e1 - 2.0 * rho * sxy * e1 * e2 + syy * e2 * e2) / one_minus
        log_det = 2.0 * t1 + 2.0 * t2 + log_one_minus
        log_lik = -n * math.log(2.0 * math.pi) - 0.5 * n * log_det - 0.5 * quad_form
        log_mean_integral = math.log(2.0 * math.pi) + 0.5 * log_det - math.log(n)
        return log_lik + log_mean_integral

    upper = 6.0 + 40.0 / (n - 1)  # integrand below exp(-40) of its peak beyond this
    box = (tx - 4.0, tx + upper, ty - 4.0, ty + upper)
    grid1, grid2 = np.meshgrid(np.linspace(box[0], box[1], 121), np.linspace(box[2], box[3], 121))
    ref = float(np.max(log_integrand(grid2, grid1)))

    def integrand(t2: float, t1: float) -> float:
        return math.exp(log_integrand(t2, t1, math.exp) - ref)

    value, _ = integrate.dblquad(integrand, box[0], box[1], box[2], box[3], epsabs=0.0, epsrel=1e-9)
    return math.log(value) + ref


def simulated_pairs(n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    cov = np.array([[4.0, 0.5], [0.5, 0.25]])  # sds 2 and 0.5, rho = 0.5
    return rng.multivariate_normal([1.0, -2.0], cov, size=n)


def test_explicit_likelihood_matches_scipy_multivariate_normal() -> None:
    """The explicit formula used in full_log_marginal equals scipy's logpdf (common practice)."""
    data = simulated_pairs(7, seed=3)
    mu = np.array([0.7, -1.6])
    s1, s2, rho = 1.7, 0.6, -0.35
    cov = np.array([[s1 * s1, rho * s1 * s2], [rho * s1 * s2, s2 * s2]])
    expected = float(np.sum(stats.multivariate_normal(mu, cov).logpdf(data)))
    d = data - mu
    quad_form = np.sum(
        (d[:, 0] / s1) ** 2 - 2 * rho * d[:, 0] * d[:, 1] / (s1 * s2) + (d[:, 1] / s2) ** 2
    ) / (1 - rho * rho)
    got = -7 * math.log(2 * math.pi) - 3.5 * math.log(s1 * s1 * s2 * s2 * (1 - rho * rho))
    got -= 0.5 * quad_form
    assert got == pytest.approx(expected, rel=1e-13)


def test_mean_integration_is_the_gaussian_integral() -> None:
    """Integral over (mu1, mu2) of the likelihood, by dblquad, vs the closed Gaussian integral."""
    data = simulated_pairs(6, seed=4)
    s1, s2, rho = 1.9, 0.45, 0.3
    cov = np.array([[s1 * s1, rho * s1 * s2], [rho * s1 * s2, s2 * s2]])
    xbar = data.mean(axis=0)
    at_mean = float(np.sum(stats.multivariate_normal(xbar, cov).logpdf(data)))

    centred = stats.multivariate_normal(np.zeros(2), cov)

    def integrand(mu2: float, mu1: float) -> float:
        value = np.sum(centred.logpdf(data - np.array([mu1, mu2])))
        return math.exp(float(value) - at_mean)

    numeric, _ = integrate.dblquad(
        integrand,
        xbar[0] - 8 * s1,
        xbar[0] + 8 * s1,
        xbar[1] - 8 * s2,
        xbar[1] + 8 * s2,
        epsabs=0.0,
        epsrel=1e-9,
    )
    closed = 2 * math.pi * math.sqrt(np.linalg.det(cov)) / data.shape[0]
    assert numeric == pytest.approx(closed, rel=1e-7)


@pytest.mark.parametrize(("n", "seed"), [(5, 11), (10, 12), (20, 13)])
def test_exact_posterior_matches_full_bivariate_normal_integration(n: int, seed: int) -> None:
    """Normalised marginal density and mean of rho vs brute-force integration.

    Uniform prior on rho; the marginal likelihood comes from full_log_marginal
    (means analytic, sigmas by dblquad) on 24 Gauss-Legendre nodes in rho, which
    also normalise it. Also checks the constant documented in
    log_likelihood_kernel: log p(data | rho) - log h = -(n-1) log(2 pi) + log Gamma(n-1)
    - log n - (n-1)/2 log(Sxx Syy).
    """
    data = simulated_pairs(n, seed)
    r = float(np.corrcoef(data.T)[0, 1])
    nodes, weights = np.polynomial.legendre.leggauss(24)
    log_marg = np.array([full_log_marginal(data, float(x)) for x in nodes])
    g = np.exp(log_marg - log_marg.max())
    norm = float(np.sum(weights * g))
    density = g / norm
    mean = float(np.sum(weights * nodes * g)) / norm

    post = exact_posterior(n, r)
    got = post.density_at(nodes)
    assert np.max(np.abs(got - density)) <= 1e-7 * density.max()
    assert post.mean == pytest.approx(mean, rel=1e-7, abs=1e-9)

    resid = data - data.mean(axis=0)
    sxx, syy = float(np.sum(resid[:, 0] ** 2)), float(np.sum(resid[:, 1] ** 2))
    constant = (
        -(n - 1) * math.log(2 * math.pi)
        + special.gammaln(n - 1)
        - math.log(n)
        - 0.5 * (n - 1) * math.log(sxx * syy)
    )
    np.testing.assert_allclose(
        log_marg - log_likelihood_kernel(nodes, n, r), constant, rtol=0, atol=1e-8
    )


def test_posterior_moments_match_nested_quadrature_small_n() -> None:
    """Mean and sd vs nested quad of prior * h (integral form), including a U-shaped prior."""
    for n, r, a, b in [(4, 0.8, 1.0, 1.0), (6, -0.5, 0.5, 0.5), (12, 0.3, 3.0, 1.5)]:
        _, mean, sd = posterior_moments_by_quad(n, r, a, b)
        post = exact_posterior(n, r, a, b)
        assert post.mean == pytest.approx(mean, rel=1e-8, abs=1e-12)
        assert post.sd == pytest.approx(sd, rel=1e-8)


# --------------------------------------------------------------------------- 3. large n


def fisher_moments(n: int, r: float) -> tuple[float, float]:
    """Mean and sd of tanh(Z), Z ~ Normal(atanh r, 1/(n-3)) (Fisher 1921), by Gauss-Hermite."""
    nodes, weights = np.polynomial.hermite_e.hermegauss(80)
    weights = weights / weights.sum()
    values = np.tanh(math.atanh(r) + nodes / math.sqrt(n - 3))
    mean = float(np.sum(weights * values))
    return mean, math.sqrt(float(np.sum(weights * (values - mean) ** 2)))


@pytest.mark.parametrize("n", [10**5, 10**7])
@pytest.mark.parametrize("r", [0.0, 0.5, 0.99, -0.3, 0.9999])
def test_large_n_matches_fisher_normal_approximation(n: int, r: float) -> None:
    """At large n the posterior of atanh(rho) is close to N(atanh r, 1/(n-3)) (Fisher 1921)."""
    post = exact_posterior(n, r)
    for arr in (post.rho, post.density, post.z_density):
        assert np.all(np.isfinite(arr))
    assert math.isfinite(post.log_bf10)

    step = post.z[1] - post.z[0]
    z_mean = float(np.sum(post.z * post.z_density) * step)
    z_sd = math.sqrt(float(np.sum((post.z - z_mean) ** 2 * post.z_density) * step))
    fisher_sd = 1 / math.sqrt(n - 3)
    assert abs(z_mean - math.atanh(r)) <= 0.05 * fisher_sd
    assert z_sd == pytest.approx(fisher_sd, rel=0.03)

    mean, sd = fisher_moments(n, r)
    assert abs(post.mean - mean) <= 0.05 * sd
    assert post.sd == pytest.approx(sd, rel=0.03)
    assert post.sd == pytest.approx((1 - r * r) / math.sqrt(n), rel=0.03)

    lower, upper = post.hdi(0.95)
    f_lower, f_upper = fisher_z_interval(n, r, 0.95)
    assert abs(lower - f_lower) <= 0.05 * sd
    assert abs(upper - f_upper) <= 0.05 * sd
    q = post.quantile(np.array([0.025, 0.5, 0.975]))
    assert np.all(np.isfinite(q)) and np.all(np.diff(q) > 0)


def test_large_n_moments_match_nested_quadrature() -> None:
    """n = 10^5: log BF10, mean and sd vs nested quad of the integral form (Jeffreys 1961)."""
    log_bf, mean, sd = posterior_moments_by_quad(10**5, 0.5, 1.0, 1.0)
    post = exact_posterior(10**5, 0.5)
    assert post.mean == pytest.approx(mean, rel=1e-9)
    assert post.sd == pytest.approx(sd, rel=1e-7)
    assert post.log_bf10 == pytest.approx(log_bf, rel=0, abs=1e-6)
    assert log_bf > 14000  # BF10 about exp(14378): astronomically large


def test_no_nan_over_the_supported_range() -> None:
    """Finite, normalised output for n from 4 to 10^7 and |r| up to 0.9999 (common practice)."""
    for n in (4, 5, 15, 16, 100, 10**4, 10**7):
        for r in (-0.9999, -0.5, 0.0, 0.3, 0.9999):
            for a, b in ((1.0, 1.0), (0.5, 0.5), (2.0, 5.0)):
                post = exact_posterior(n, r, a, b)
                assert np.all(np.isfinite(post.density)) and np.all(post.density >= 0)
                step = post.z[1] - post.z[0]
                assert float(np.sum(post.z_density) * step) == pytest.approx(1.0, rel=1e-12)
                assert -1 < post.mean < 1 and 0 < post.sd < 1
                assert math.isfinite(post.log_bf10)
                lo, hi = post.hdi(0.9)
                assert -1 <= lo < hi <= 1


def test_grid_refinement_does_not_change_results() -> None:
    """Quadrature convergence: 4001 vs 16001 grid points agree (common practice)."""
    for n, r, a, b in [(4, 0.9999, 0.5, 0.5), (50, -0.7, 1.0, 1.0), (10**7, 0.99, 2.0, 2.0)]:
        coarse = exact_posterior(n, r, a, b)
        fine = exact_posterior(n, r, a, b, grid_size=16001)
        assert coarse.mean == pytest.approx(fine.mean, rel=1e-10, abs=1e-14)
        assert coarse.sd == pytest.approx(fine.sd, rel=1e-9)
        assert coarse.quantile(0.025) == pytest.approx(fine.quantile(0.025), rel=1e-9)
        assert coarse.log_bf10 == pytest.approx(fine.log_bf10, rel=1e-12, abs=1e-10)


# --------------------------------------------------------------------------- 4. Bayes factors


def test_bayes_factor_favours_null_for_near_zero_r() -> None:
    """n = 1000, r = 0.01: BF10 < 1.

    Jeffreys (1961, ch. 5): for r near 0 the evidence for H0 grows like sqrt(n)
    (the growth rate is from memory; the test only needs BF10 < 1).
    """
    assert log_bayes_factor_10(1000, 0.01) < 0.0


def test_bayes_factor_decisive_for_strong_r() -> None:
    """n = 100, r = 0.6: BF10 > 100, 'decisive' on Jeffreys' (1961, App. B) scale."""
    assert log_bayes_factor_10(100, 0.6) > math.log(100.0)


@pytest.mark.parametrize(
    ("n", "r", "a", "b"),
    [
        (10, 0.3, 1.0, 1.0),
        (10, -0.5, 2.0, 2.0),
        (30, 0.7, 1.0, 1.0),
        (30, 0.2, 0.5, 0.5),
        (30, -0.45, 3.0, 1.5),
    ],
)
def test_bayes_factor_matches_nested_quadrature(n: int, r: float, a: float, b: float) -> None:
    """log BF10 vs nested quad of prior * h / h(0) with h in integral form, BF rel 1e-6."""
    expected, _, _ = posterior_moments_by_quad(n, r, a, b)
    assert log_bayes_factor_10(n, r, a, b) == pytest.approx(expected, rel=0, abs=1e-6)


@pytest.mark.parametrize(
    ("n", "r", "a", "b"),
    [
        (20, -0.2, 1.0, 1.0),
        (50, 0.3, 1.0, 1.0),
        (100, 0.45, 2.0, 2.0),
        (8, 0.6, 0.5, 0.5),
        (40, 0.1, 3.0, 1.5),
    ],
)
def test_savage_dickey_density_ratio(n: int, r: float, a: float, b: float) -> None:
    """BF10 = prior(0) / posterior(0) (Dickey 1971), with the interpolated density.

    A consistency check of the interpolation and normalisation: both sides share one
    quadrature. The independent Bayes-factor checks are the nested-quad tests above."""
    post = exact_posterior(n, r, a, b)
    prior0 = stretched_beta_pdf_scipy(0.0, a, b)
    log_ratio = math.log(prior0) - math.log(post.density_at(0.0))
    assert log_bayes_factor_10(n, r, a, b) == pytest.approx(log_ratio, rel=0, abs=1e-8)


# --------------------------------------------------------------------------- 5. symmetry


@pytest.mark.parametrize("n", [7, 300, 10**6])
def test_posterior_for_negative_r_is_the_mirror_image(n: int) -> None:
    """p(rho | n, -r) = p(-rho | n, r) under a mirrored prior (common practice)."""
    for r, (a, b) in [(0.4, (1.0, 1.0)), (0.95, (0.5, 0.5)), (0.2, (3.0, 1.5))]:
        plus = exact_posterior(n, r, a, b)
        minus = exact_posterior(n, -r, b, a)
        x = np.linspace(plus.quantile(0.001), plus.quantile(0.999), 25)
        np.testing.assert_allclose(minus.density_at(-x), plus.density_at(x), rtol=1e-9)
        assert minus.mean == pytest.approx(-plus.mean, rel=1e-10)
        assert minus.sd == pytest.approx(plus.sd, rel=1e-10)
        q = np.array([0.01, 0.3, 0.5, 0.8])
        np.testing.assert_allclose(minus.quantile(q), -plus.quantile(1 - q), rtol=1e-9)
        lo, hi = plus.hdi(0.9)
        mlo, mhi = minus.hdi(0.9)
        assert (mlo, mhi) == pytest.approx((-hi, -lo), rel=1e-8)
        assert minus.log_bf10 == pytest.approx(plus.log_bf10, rel=1e-12, abs=1e-12)


# --------------------------------------------------------------------------- 6. scipy checks


@pytest.mark.parametrize(("a", "b"), [(1.0, 1.0), (0.5, 0.5), (2.0, 5.0), (0.3, 4.0)])
def test_log_stretched_beta_pdf_matches_scipy(a: float, b: float) -> None:
    """Stretched Beta on [-1, 1] equals scipy.stats.beta(a, b, loc=-1, scale=2)."""
    rho = np.linspace(-0.999, 0.999, 101)
    expected = stats.beta(a, b, loc=-1.0, scale=2.0).logpdf(rho)
    np.testing.assert_allclose(log_stretched_beta_pdf(rho, a, b), expected, rtol=1e-12)
    assert np.all(np.isneginf(log_stretched_beta_pdf(np.array([-1.5, 1.5]), a, b)))


def null_r_posterior(n: int, a: float, b: float) -> stats.rv_continuous:
    """At r = 0 the kernel's integral does not depend on rho (Jeffreys 1961 ch. 5), so
    h is proportional to (1 - rho^2)^((n-1)/2) and the posterior is a stretched
    Beta(a + (n-1)/2, b + (n-1)/2): an exact reference from scipy.stats.beta."""
    return stats.beta(a + 0.5 * (n - 1), b + 0.5 * (n - 1), loc=-1.0, scale=2.0)


def beta_hdi(dist: stats.rv_continuous, mass: float) -> tuple[float, float]:
    """HDI of a unimodal distribution by equal densities at its ends.

    Box & Tiao (1973), *Bayesian Inference in Statistical Analysis*, ch. 2 (section from memory).
    """

    def gap(alpha: float) -> float:
        return float(dist.logpdf(dist.ppf(alpha)) - dist.logpdf(dist.ppf(alpha + mass)))

    alpha = optimize.brentq(gap, 1e-14, 1 - mass - 1e-14, xtol=1e-15)
    return float(dist.ppf(alpha)), float(dist.ppf(alpha + mass))


@pytest.mark.parametrize(
    ("n", "a", "b"),
    [(4, 1.0, 1.0), (9, 0.5, 0.5), (25, 2.0, 5.0), (10**5, 1.0, 1.0), (10**7, 3.0, 1.0)],
)
def test_null_r_posterior_matches_scipy_beta(n: int, a: float, b: float) -> None:
    """mean, sd, cdf, quantiles, tails, HDI and density at r = 0 vs scipy.stats.beta."""
    ref = null_r_posterior(n, a, b)
    post = exact_posterior(n, 0.0, a, b)
    assert post.mean == pytest.approx(float(ref.mean()), rel=1e-8, abs=1e-12 * float(ref.std()))
    assert post.sd == pytest.approx(float(ref.std()), rel=1e-8)
    q = np.array([1e-6, 0.025, 0.25, 0.5, 0.75, 0.975, 1 - 1e-6])
    np.testing.assert_allclose(post.quantile(q), ref.ppf(q), rtol=1e-8, atol=1e-9 * ref.std())
    x = ref.ppf(np.array([1e-4, 0.1, 0.5, 0.9, 1 - 1e-4]))
    np.testing.assert_allclose(post.cdf(x), ref.cdf(x), rtol=1e-7, atol=1e-12)
    np.testing.assert_allclose(post.density_at(x), ref.pdf(x), rtol=1e-7)
    far = float(ref.isf(1e-12))
    assert post.prob_above(far) == pytest.approx(1e-12, rel=1e-5)
    near = float(ref.ppf(1e-12))
    assert post.prob_below(near) == pytest.approx(1e-12, rel=1e-5)
    lo, hi = post.hdi(0.95)
    ref_lo, ref_hi = beta_hdi(ref, 0.95)
    assert lo == pytest.approx(ref_lo, abs=1e-7 * ref.std())
    assert hi == pytest.approx(ref_hi, abs=1e-7 * ref.std())


@pytest.mark.parametrize(("n", "a", "b"), [(9, 1.0, 1.0), (30, 0.5, 0.5), (10**5, 1.0, 1.0)])
def test_squared_quantiles_at_null_r_match_scipy_beta(n: int, a: float, b: float) -> None:
    """At r = 0 with a symmetric prior rho is a stretched Beta symmetric about 0 (null_r_posterior), so
    P(rho^2 <= s^2) = 1 - 2 P(rho > s) and the q-quantile of rho^2 is scipy's isf((1 - q) / 2) squared."""
    ref = null_r_posterior(n, a, b)
    post = exact_posterior(n, 0.0, a, b)
    q = np.array([1e-6, 0.025, 0.5, 0.975, 1 - 1e-6])
    np.testing.assert_allclose(np.sqrt(post.squared_quantile(q)), ref.isf((1 - q) / 2), rtol=1e-8,
                               atol=1e-9 * ref.std())
    assert post.squared_quantile(0.0) == 0.0
    assert float(post.squared_quantile(1 - 1e-6)) <= float(post.squared_quantile(1.0)) <= 1.0


def test_squared_quantiles_of_a_skewed_posterior_match_scipy_beta_by_brentq() -> None:
    """Stretched Beta(2 + 12, 5 + 12) at r = 0, n = 25: the t with F(sqrt t) - F(-sqrt t) = q, F scipy's beta
    cdf, found by scipy's brentq."""
    n, a, b = 25, 2.0, 5.0
    ref = null_r_posterior(n, a, b)
    post = exact_posterior(n, 0.0, a, b)
    for q in (0.025, 0.3, 0.5, 0.975):
        expected = optimize.brentq(lambda t, q=q: ref.cdf(math.sqrt(t)) - ref.cdf(-math.sqrt(t)) - q, 0.0, 1.0,
                                   xtol=1e-16, rtol=1e-14)
        assert float(post.squared_quantile(q)) == pytest.approx(expected, rel=1e-7)


@pytest.mark.parametrize(("n", "r"), [(6, 0.95), (50, -0.9), (1000, 0.3), (10**6, 0.05)])
def test_squared_quantiles_invert_the_cdf_of_rho(n: int, r: float) -> None:
    """P(rho^2 <= t) = cdf(sqrt t) - cdf(-sqrt t) (common practice) at the quantiles found, posteriors
    far from and near to 0."""
    post = exact_posterior(n, r)
    q = np.linspace(0.001, 0.999, 23)
    root = np.sqrt(post.squared_quantile(q))
    np.testing.assert_allclose(post.cdf(root) - post.cdf(-root), q, rtol=0, atol=1e-10)
    with pytest.raises(ValueError, match="lie in"):
        post.squared_quantile(1.5)


@pytest.mark.parametrize(("n", "r", "a", "b"),
                         [(5, 0.9, 1.0, 1.0), (12, -0.85, 2.0, 5.0), (40, 0.6, 0.5, 0.5), (1000, 0.3, 1.0, 1.0),
                          (10**6, 0.99, 1.0, 1.0)])
def test_hdi_is_the_shortest_interval_found_by_scipy(n: int, r: float, a: float, b: float) -> None:
    """The HDI against the shortest of the intervals between the alpha and alpha + mass quantiles, searched
    over alpha by scipy's bounded minimize_scalar (the definition, Box & Tiao 1973, ch. 2)."""
    post = exact_posterior(n, r, a, b)
    mass = 0.9

    def width(alpha: float) -> float:
        lo, hi = post.quantile(np.array([alpha, alpha + mass]))
        return float(hi - lo)

    best = optimize.minimize_scalar(width, bounds=(1e-12, 1 - mass - 1e-12), method="bounded",
                                    options={"xatol": 1e-14}).x
    lo, hi = post.hdi(mass)
    expected = post.quantile(np.array([best, best + mass]))
    np.testing.assert_allclose((lo, hi), expected, rtol=0, atol=1e-6 * post.sd)
    assert hi - lo <= width(best) + 1e-12
    assert post.prob_between(lo, hi) == pytest.approx(mass, abs=1e-10)
    assert post.density_at(lo) == pytest.approx(post.density_at(hi), rel=1e-8)


def test_a_single_quantile_equals_the_same_quantile_among_many() -> None:
    """A scalar probability takes a path of its own (Python floats): it must give the array path's value."""
    for n, r in ((4, -0.3), (60, 0.8), (10**5, 0.999)):
        post = exact_posterior(n, r, 2.0, 1.0)
        q = np.array([1e-12, 1e-4, 0.025, 0.5, 0.7, 0.975, 1 - 1e-9])
        together = post.quantile(q)
        assert [post.quantile(float(p)) for p in q] == together.tolist()
        assert post.median == together[3]


def test_the_same_posterior_is_handed_out_and_reused_terms_change_nothing() -> None:
    """Equal arguments give the same immutable posterior; a posterior built after another prior on the same
    data (its kernel terms reused) equals one built from nothing, array for array."""
    from reportgen import exact

    first = exact_posterior(200, 0.41, 1.0, 1.0)
    assert exact_posterior(200, 0.41) is first
    assert not first.density.flags.writeable and not first.z.flags.writeable
    warm = exact_posterior(200, 0.41, 5.0, 5.0)
    exact._posterior.cache_clear()
    exact._grid_terms.cache_clear()
    cold = exact_posterior(200, 0.41, 5.0, 5.0)
    assert cold is not warm
    for name in ("z", "rho", "density", "z_density"):
        np.testing.assert_array_equal(getattr(warm, name), getattr(cold, name))
    assert warm.log_bf10 == cold.log_bf10


def test_hdi_is_shortest_interval_and_quantiles_round_trip() -> None:
    """For a skewed posterior the HDI holds the mass, has equal end densities and is no
    wider than the equal-tailed interval (Box & Tiao 1973, ch. 2; section from memory);
    cdf(quantile(q)) = q (common practice)."""
    post = exact_posterior(12, 0.85, 1.0, 1.0)
    lo, hi = post.hdi(0.9)
    assert post.prob_between(lo, hi) == pytest.approx(0.9, abs=1e-9)
    assert post.density_at(lo) == pytest.approx(post.density_at(hi), rel=1e-7)
    et_lo, et_hi = post.quantile(np.array([0.05, 0.95]))
    assert hi - lo < et_hi - et_lo
    q = np.linspace(0.001, 0.999, 37)
    np.testing.assert_allclose(post.cdf(post.quantile(q)), q, rtol=1e-10, atol=1e-12)
    assert post.prob_below(0.7) + post.prob_above(0.7) == pytest.approx(1.0, abs=1e-12)
    assert post.prob_between(0.5, 0.9) == pytest.approx(post.cdf(0.9) - post.cdf(0.5), abs=1e-12)
    assert post.median == pytest.approx(float(post.quantile(0.5)))
    assert post.quantile(0.0) == -1.0 and post.quantile(1.0) == 1.0
    assert post.cdf(-1.0) == 0.0 and post.cdf(1.0) == 1.0


def test_cdf_matches_quad_of_density() -> None:
    """cdf(x) vs scipy quad of prior * h (integral form) from -1 to x, U-shaped prior."""
    n, r, a, b = 6, 0.55, 0.5, 0.5

    def weight(rho: float) -> float:
        return stretched_beta_pdf_scipy(rho, a, b) * math.exp(log_h_by_quad(rho, n, r))

    total, _ = integrate.quad(weight, -1, 1, epsabs=0, epsrel=1e-12, limit=200)
    post = exact_posterior(n, r, a, b)
    for x in (-0.6, 0.0, 0.4, 0.9):
        part, _ = integrate.quad(weight, -1, x, epsabs=0, epsrel=1e-12, limit=200)
        assert post.cdf(x) == pytest.approx(part / total, rel=1e-8)


def test_fisher_interval_formula() -> None:
    """tanh(atanh r -/+ 1.959964/sqrt(n-3)) (Fisher 1921); 1.959964 is the 97.5% normal
    quantile (value from memory)."""
    lo, hi = fisher_z_interval(103, 0.5, 0.95)
    assert lo == pytest.approx(math.tanh(math.atanh(0.5) - 1.959964 / 10), abs=1e-6)
    assert hi == pytest.approx(math.tanh(math.atanh(0.5) + 1.959964 / 10), abs=1e-6)


def test_exact_posterior_is_frozen() -> None:
    post = exact_posterior(10, 0.3)
    assert isinstance(post, ExactPosterior)
    with pytest.raises(AttributeError):
        post.n = 11  # type: ignore[misc]
    with pytest.raises(ValueError):
        post.density[0] = 1.0


# --------------------------------------------------------------------------- 7. validation


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"n": 3, "r": 0.2}, "at least 4"),
        ({"n": 2, "r": 0.2}, "at least 4"),
        ({"n": 10.5, "r": 0.2}, "whole number"),
        ({"n": 10, "r": 1.0}, "strictly between -1 and 1"),
        ({"n": 10, "r": -1.0}, "strictly between -1 and 1"),
        ({"n": 10, "r": 1.3}, "strictly between -1 and 1"),
        ({"n": 10, "r": float("nan")}, "strictly between -1 and 1"),
        ({"n": 10, "r": 0.2, "prior_a": 0.0}, "prior_a"),
        ({"n": 10, "r": 0.2, "prior_b": -1.0}, "prior_b"),
        ({"n": 10, "r": 0.2, "grid_size": 10}, "grid_size"),
    ],
)
def test_exact_posterior_rejects_bad_input(kwargs: dict, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        exact_posterior(**kwargs)


def test_other_functions_reject_bad_input() -> None:
    with pytest.raises(ValueError, match="at least 4"):
        log_likelihood_kernel(0.1, 3, 0.5)
    with pytest.raises(ValueError, match="strictly between -1 and 1"):
        log_likelihood_kernel(0.1, 10, 1.0)
    with pytest.raises(ValueError, match=r"\[-1, 1\]"):
        log_likelihood_kernel(1.5, 10, 0.5)
    with pytest.raises(ValueError, match="prior shape a"):
        log_stretched_beta_pdf(0.0, 0.0, 1.0)
    with pytest.raises(ValueError, match="prior shape b"):
        log_stretched_beta_pdf(0.0, 1.0, -2.0)
    with pytest.raises(ValueError, match="at least 4"):
        log_bayes_factor_10(3, 0.5)
    with pytest.raises(ValueError, match="prior_a"):
        log_bayes_factor_10(10, 0.5, prior_a=0.0)
    for mass in (0.0, 1.0, 1.5, -0.2):
        with pytest.raises(ValueError, match="mass"):
            fisher_z_interval(10, 0.5, mass)
    post = exact_posterior(10, 0.5)
    for mass in (0.0, 1.0, 2.0):
        with pytest.raises(ValueError, match="mass"):
            post.hdi(mass)
    with pytest.raises(ValueError, match=r"\[0, 1\]"):
        post.quantile(1.5)
    with pytest.raises(ValueError, match=r"\[0, 1\]"):
        post.quantile(np.array([0.5, -0.1]))
    with pytest.raises(ValueError, match="must not exceed"):
        post.prob_between(0.5, 0.1)
