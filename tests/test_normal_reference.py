"""Tests for reportgen.models.normal_reference against references outside the module.

References used below:

* Jeffreys (1961), *Theory of Probability*, 3rd ed., ch. 5, and Ly, Marsman &
  Wagenmakers (2018), *Statistica Neerlandica* 72(1): under flat means and 1/sigma
  standard deviations the marginal likelihood of rho is
  ``(1 - rho^2)^((n-1)/2) * integral_0^inf (cosh t - rho r)^-(n-1) dt``; the integral by
  scipy quad, and the whole posterior through ``reportgen.exact`` (itself tested against
  scipy in tests/test_exact.py).
* The Gaussian integral over the means (convolution of two normal densities, common
  practice), checked against scipy.integrate.cubature over the means with
  scipy.stats.multivariate_normal densities of the rows.
* Brute-force 3-D integration (scipy.integrate.cubature over atanh(rho) and both
  log-sigmas, in the data's units, priors from scipy.stats) for the spec's priors.
* Dickey (1971), *Annals of Mathematical Statistics* 42(1): for a point null nested in
  H1 with the same nuisance priors, BF10 = prior(0) / posterior(0) (Savage-Dickey).
* Bernstein-von Mises (common practice): at large n proper vague priors on the
  nuisance parameters leave the posterior of rho as under the reference priors.
"""

from __future__ import annotations

import dataclasses
import math
import time

import mpmath
import numpy as np
import pytest
from scipy import integrate, stats

from reportgen import exact
from reportgen.data import SufficientStats
from reportgen.models import normal_reference as nr
from reportgen.spec import Priors

REFERENCE_PRIORS = Priors.model_validate({"means": {"family": "flat"}, "sds": {"family": "jeffreys"}})


def standard_stats(n: int, r: float) -> SufficientStats:
    """Sufficient statistics of n rows with unit sample SDs, zero means and correlation r."""
    k = float(n - 1)
    return SufficientStats(n=n, mean_x=0.0, mean_y=0.0, sxx=k, syy=k, sxy=k * r)


def jeffreys_posterior(st: SufficientStats, a: float = 1.0, b: float = 1.0) -> exact.ExactPosterior:
    """reportgen.exact on the same inputs: near |r| = 1, (k r)/k rounds, and 1 - |r| with it."""
    return exact.exact_posterior(st.n, st.sample_r, a, b, one_minus_abs_r=st.one_minus_abs_r)


def stats_of(x: np.ndarray, y: np.ndarray) -> SufficientStats:
    dx, dy = x - x.mean(), y - y.mean()
    return SufficientStats(n=x.size, mean_x=float(x.mean()), mean_y=float(y.mean()),
                           sxx=float(dx @ dx), syy=float(dy @ dy), sxy=float(dx @ dy))


# --------------------------------------------------------------------------- reference priors


@pytest.mark.parametrize("n", [4, 8, 30, 1000, 10**6])
@pytest.mark.parametrize("r", [0.0, 0.5, -0.9, 0.999])
def test_reference_priors_reproduce_jeffreys_posterior(n: int, r: float) -> None:
    """Flat means and 1/sigma SDs: the 2-D quadrature over the SDs gives Jeffreys' posterior (reportgen.exact)."""
    st = standard_stats(n, r)
    ours = nr.reference_posterior(st, REFERENCE_PRIORS)
    theirs = jeffreys_posterior(st)
    probs = np.array([0.025, 0.25, 0.5, 0.75, 0.975])
    assert ours.mean == pytest.approx(theirs.mean, abs=1e-6)
    assert ours.sd == pytest.approx(theirs.sd, abs=1e-6)
    np.testing.assert_allclose(ours.quantile(probs), theirs.quantile(probs), rtol=0, atol=1e-6)
    assert ours.log_bf10 == pytest.approx(theirs.log_bf10, abs=1e-6)
    assert ours.structure == "flat+jeffreys"
    assert ours.reliable
    # tighter than the brief's 1e-6 where the posterior is narrow: a small share of its SD
    assert abs(ours.mean - theirs.mean) <= 1e-4 * theirs.sd


def z_moments(posterior) -> tuple[float, float]:  # noqa: ANN001 - either posterior class
    """Mean and SD of atanh(rho) by the trapezoidal rule on the posterior's own grid (common practice)."""
    z, f = np.asarray(posterior.z), np.asarray(posterior.z_density)
    mean = float(integrate.trapezoid(z * f, z) / integrate.trapezoid(f, z))
    return mean, math.sqrt(float(integrate.trapezoid((z - mean) ** 2 * f, z) / integrate.trapezoid(f, z)))


@pytest.mark.parametrize(("n", "r"), [(4, 1 - 1e-9), (10**7, 1 - 1e-9), (10**7, -0.3), (5, -(1 - 1e-9))])
def test_reference_priors_at_the_extremes(n: int, r: float) -> None:
    """The ends of the range (n = 4 to 10**7, |r| to 1 - 1e-9) against reportgen.exact.

    Compared in atanh(rho), which keeps its digits where rho is within 1e-12 of +/-1 (there the
    mean of rho itself is good to about 1e-15 only, in either module).
    """
    st = standard_stats(n, r)
    ours = nr.reference_posterior(st, REFERENCE_PRIORS)
    theirs = jeffreys_posterior(st)
    (our_mean, our_sd), (their_mean, their_sd) = z_moments(ours), z_moments(theirs)
    assert abs(our_mean - their_mean) <= 1e-5 * their_sd
    assert our_sd == pytest.approx(their_sd, rel=1e-5)
    for t in np.tanh(their_mean + their_sd * np.array([-2.0, 0.0, 1.0])):
        assert ours.prob_above(t) == pytest.approx(theirs.prob_above(t), abs=1e-6)
    assert ours.log_bf10 == pytest.approx(theirs.log_bf10, rel=1e-12, abs=1e-6)
    assert ours.truncation < 1e-14


def log_jeffreys_sd_integral(n: int, r: float, zeta: float) -> float:
    """log of the scaled double integral over the SDs under 1/sigma priors, from Jeffreys' kernel.

    Integrating vt gives Gamma(k) / (2 (k C)^k) with C = (cosh 2w - rho r)/(1 - rho r), so the
    integral over (u1, u2) is e^k Gamma(k) k^-k (1 - rho r)^k I_k(rho r) with
    I_k(x) = integral_0^inf (cosh t - x)^-k dt; the module's scaled coordinates divide it by
    2 s_v s_w = 2 / (2 sqrt k) * sqrt((1 - rho r)/(4k)). I_k is summed by scipy quad after
    writing cosh t - x = (1 - x)(1 + 2 sinh^2(t/2)/(1 - x)) and rescaling t by its width;
    1 - rho r comes from mpmath at 40 digits.
    """
    mpmath.mp.dps = 40
    k = n - 1
    one_minus_x = float(1 - mpmath.tanh(mpmath.mpf(zeta)) * mpmath.mpf(r))
    width = math.sqrt(2.0 * one_minus_x / k)

    def scaled(u: float) -> float:
        t = u * width
        return 0.0 if t > 600.0 else math.exp(-k * math.log1p(2.0 * math.sinh(0.5 * t) ** 2 / one_minus_x))

    pieces = [0.0, 1.0, 4.0, 16.0, 64.0, math.inf]
    total = sum(integrate.quad(scaled, a, b, epsabs=0.0, epsrel=1e-13, limit=400)[0]
                for a, b in zip(pieces[:-1], pieces[1:], strict=True))
    # (1 - x)^k cancels against the (1 - x)^-k of I_k; k + log Gamma(k) - k log k by mpmath, whose
    # terms are each about 1e8 at k = 10**7
    log_gamma_part = float(k + mpmath.loggamma(k) - k * mpmath.log(k))
    log_uu = log_gamma_part + math.log(width * total)
    log_scale = math.log(2.0 / (2.0 * math.sqrt(k)) * math.sqrt(one_minus_x / (4.0 * k)))
    return log_uu - log_scale


@pytest.mark.parametrize("n", [4, 5, 30, 10**4, 10**7])
@pytest.mark.parametrize("r", [0.3, -0.9, 1 - 1e-9])
def test_sd_quadrature_matches_closed_form(n: int, r: float) -> None:
    """The quadrature over the two SDs at single values of rho, against Jeffreys' closed form."""
    setup = nr._setup(standard_stats(n, r), REFERENCE_PRIORS)
    centre = math.atanh(r)
    zeta = np.array([0.0, centre, centre + 3.0 / math.sqrt(n), centre - 1.0, centre + 2.0])
    values, truncation = nr._log_sd_integral(zeta, setup)
    expected = [log_jeffreys_sd_integral(n, r, z) for z in zeta]
    np.testing.assert_allclose(values, expected, rtol=0, atol=1e-9)
    assert truncation < 1e-14


# --------------------------------------------------------------------------- the spec's priors


def log_means_integrated(s1: np.ndarray, s2: np.ndarray, rho: np.ndarray, st: SufficientStats,
                         m0: np.ndarray, d: np.ndarray) -> np.ndarray:
    """log p(rows | Sigma) with mu ~ N2(m0, diag(d^2)) integrated out (the derivation's closed form)."""
    n = st.n
    one_m = 1.0 - rho * rho
    log_det = 2.0 * np.log(s1) + 2.0 * np.log(s2) + np.log(one_m)
    trace = (st.sxx / s1**2 - 2.0 * rho * st.sxy / (s1 * s2) + st.syy / s2**2) / one_m
    m11, m22, m12 = s1**2 / n + d[0] ** 2, s2**2 / n + d[1] ** 2, rho * s1 * s2 / n
    det = m11 * m22 - m12 * m12
    e1, e2 = st.mean_x - m0[0], st.mean_y - m0[1]
    quad = (m22 * e1 * e1 - 2.0 * m12 * e1 * e2 + m11 * e2 * e2) / det
    log_mean = -math.log(2.0 * math.pi) - 0.5 * np.log(det) - 0.5 * quad
    return -(n - 1) * math.log(2.0 * math.pi) - math.log(n) - 0.5 * (n - 1) * log_det - 0.5 * trace + log_mean


def test_gaussian_integral_over_the_means() -> None:
    """The closed form used below against numerical integration over both means (scipy)."""
    rng = np.random.default_rng(11)
    rows = rng.normal(size=(6, 2)) * [2.0, 0.5] + [1.0, -3.0]
    st = stats_of(rows[:, 0], rows[:, 1])
    s1, s2, rho = 1.7, 0.6, -0.4
    cov = np.array([[s1 * s1, rho * s1 * s2], [rho * s1 * s2, s2 * s2]])
    m0, d = np.array([0.5, -2.0]), np.array([3.0, 1.5])
    rows_given_mu = stats.multivariate_normal(mean=[0.0, 0.0], cov=cov)
    mu_prior = stats.multivariate_normal(mean=m0, cov=np.diag(d * d))
    # a fixed offset keeps the integrand near 1 where the mass is
    offset = float(np.sum(rows_given_mu.logpdf(rows - rows.mean(axis=0))))

    def integrand(mu: np.ndarray) -> np.ndarray:
        residuals = rows[None, :, :] - mu[:, None, :]
        return np.exp(rows_given_mu.logpdf(residuals).sum(axis=1) + mu_prior.logpdf(mu) - offset)

    centre, half = rows.mean(axis=0), 12.0 * np.sqrt(np.diag(cov) / rows.shape[0])
    result = integrate.cubature(integrand, centre - half, centre + half, rtol=1e-11, atol=0.0)
    expected = log_means_integrated(np.array(s1), np.array(s2), np.array(rho), st, m0, d)
    assert result.status == "converged"
    assert math.log(result.estimate) + offset == pytest.approx(float(expected), abs=1e-8)


def brute_force(st: SufficientStats, m0: np.ndarray, d: np.ndarray, log_sd_prior, threshold: float
                ) -> tuple[float, float, float]:
    """Posterior mean of rho, P(rho > threshold) and log BF10 by 3-D cubature (uniform prior on rho)."""
    sd = np.array([math.sqrt(st.sxx / (st.n - 1)), math.sqrt(st.syy / (st.n - 1))])
    lo_u, hi_u = np.log(sd) - 4.0, np.log(sd) + math.log(10.0) + 3.0
    offset = float(log_means_integrated(sd[0], sd[1], st.sample_r, st, m0, d))

    def log_sigma_part(u1: np.ndarray, u2: np.ndarray, rho: np.ndarray) -> np.ndarray:
        s1, s2 = np.exp(u1), np.exp(u2)
        # d sigma = sigma du: the log-sigma Jacobian
        return (log_means_integrated(s1, s2, rho, st, m0, d) + log_sd_prior(s1, 0) + log_sd_prior(s2, 1)
                + u1 + u2 - offset)

    def joint(p: np.ndarray) -> np.ndarray:
        rho = np.tanh(p[:, 0])
        value = np.exp(log_sigma_part(p[:, 1], p[:, 2], rho)) * 0.5 * (1.0 - rho * rho)
        return np.stack([value, rho * value], axis=1)

    z_t = math.atanh(threshold)
    below = integrate.cubature(joint, [-7.0, *lo_u], [z_t, *hi_u], rtol=1e-9, atol=0.0)
    above = integrate.cubature(joint, [z_t, *lo_u], [7.0, *hi_u], rtol=1e-9, atol=0.0)
    at_zero = integrate.cubature(lambda p: np.exp(log_sigma_part(p[:, 0], p[:, 1], np.zeros(len(p)))),
                                 lo_u, hi_u, rtol=1e-10, atol=0.0)
    assert {below.status, above.status, at_zero.status} == {"converged"}
    total = below.estimate + above.estimate
    return total[1] / total[0], above.estimate[0] / total[0], math.log(total[0] / at_zero.estimate)


@pytest.mark.parametrize(("n", "seed"), [(5, 5), (12, 6)])
def test_default_priors_against_brute_force(n: int, seed: int) -> None:
    """Default priors (means ~ N(mean, (10 SD)^2), SDs ~ half-normal(10 SD)) in the data's units."""
    rng = np.random.default_rng(seed)
    xy = rng.multivariate_normal([3.0, -1.0], [[4.0, 1.5], [1.5, 1.0]], size=n)
    st = stats_of(xy[:, 0], xy[:, 1])
    sd = np.array([st.sd_x, st.sd_y])
    # the schema's "scaled" units: centred on the sample mean, scales in sample SDs
    m0, d, s = np.array([st.mean_x, st.mean_y]), 10.0 * sd, 10.0 * sd

    def log_sd_prior(sigma: np.ndarray, j: int) -> np.ndarray:
        return stats.halfnorm.logpdf(sigma, scale=s[j])

    mean, tail, log_bf = brute_force(st, m0, d, log_sd_prior, 0.5)
    ours = nr.reference_posterior(st, Priors())
    assert ours.mean == pytest.approx(mean, abs=1e-5)
    assert ours.prob_above(0.5) == pytest.approx(tail, abs=1e-5)
    assert ours.log_bf10 == pytest.approx(log_bf, abs=1e-5)
    assert ours.reliable
    # the proper priors do move the posterior away from Jeffreys' at this n
    assert abs(ours.mean - jeffreys_posterior(st).mean) > 1e-4


def test_half_t_sds_and_means_in_data_units_against_brute_force() -> None:
    """Half-Student-t SDs and normal means given in the data's units (a different prior per variable)."""
    rng = np.random.default_rng(9)
    xy = rng.multivariate_normal([2.0, 10.0], [[1.0, -0.6], [-0.6, 4.0]], size=8)
    st = stats_of(xy[:, 0], xy[:, 1])
    priors = Priors.model_validate({
        "means": {"units": "data", "location": 1.0, "scale": 4.0},
        "sds": {"family": "half_student_t", "nu": 3.0, "scale": 2.0},
    })
    sd = np.array([st.sd_x, st.sd_y])
    m0, d, s = np.array([1.0, 1.0]), np.array([4.0, 4.0]), 2.0 * sd

    def log_sd_prior(sigma: np.ndarray, j: int) -> np.ndarray:
        # half-t: twice the Student-t density on sigma > 0 (common practice)
        return math.log(2.0) + stats.t.logpdf(sigma, df=3.0, scale=s[j])

    mean, tail, log_bf = brute_force(st, m0, d, log_sd_prior, -0.2)
    ours = nr.reference_posterior(st, priors)
    assert ours.structure == "normal+half_student_t"
    assert ours.mean == pytest.approx(mean, abs=1e-5)
    assert ours.prob_above(-0.2) == pytest.approx(tail, abs=1e-5)
    assert ours.log_bf10 == pytest.approx(log_bf, abs=1e-5)


@pytest.mark.parametrize(("n", "r"), [(12, 0.3), (30, -0.2), (200, 0.1)])
def test_bayes_factor_is_the_savage_dickey_ratio(n: int, r: float) -> None:
    """Dickey (1971): BF10 = prior density of rho at 0 / posterior density at 0."""
    priors = Priors.model_validate({"rho": {"family": "beta", "a": 2.0, "b": 3.0}})
    ours = nr.reference_posterior(standard_stats(n, r), priors)
    # stretched Beta(2, 3) at 0 is Beta(2, 3) at 1/2, halved (scipy.stats.beta)
    prior_at_zero = 0.5 * stats.beta.pdf(0.5, 2.0, 3.0)
    assert ours.log_bf10 == pytest.approx(math.log(prior_at_zero / ours.density_at(0.0)), abs=1e-6)


@pytest.mark.parametrize("r", [0.3, 1 - 1e-9])
def test_vague_priors_vanish_at_large_n(r: float) -> None:
    """Bernstein-von Mises: at n = 10**7 the default priors leave Jeffreys' posterior (reportgen.exact)."""
    n = 10**7
    st = standard_stats(n, r)
    ours = nr.reference_posterior(st, Priors())
    theirs = jeffreys_posterior(st)
    assert abs(ours.mean - theirs.mean) < 0.01 * theirs.sd
    assert ours.sd == pytest.approx(theirs.sd, rel=1e-3)
    assert ours.truncation < 1e-14


def test_uses_the_complement_the_statistics_carry() -> None:
    """Near |r| = 1 the digits of 1 - |r| come from the statistics (reportgen.exact given the same complement)."""
    n, complement = 1000, 3.3e-11
    base = standard_stats(n, 1.0 - complement)
    # rss = (1 - r^2) syy, so that one_minus_abs_r = rss / syy / (1 + |r|) is the exact complement
    stats_with = dataclasses.replace(base, rss=complement * (2.0 - complement) * base.syy)
    assert stats_with.one_minus_abs_r == pytest.approx(complement, rel=1e-12)
    ours = nr.reference_posterior(stats_with, REFERENCE_PRIORS)
    theirs = exact.exact_posterior(n, stats_with.sample_r, one_minus_abs_r=complement)
    assert ours.one_minus_abs_r == pytest.approx(complement, rel=1e-12)
    for t in (1.0 - 2.0 * complement, 1.0 - complement, 1.0 - 0.5 * complement):
        assert ours.prob_above(t) == pytest.approx(theirs.prob_above(t), abs=1e-6)


def test_rejects_what_it_cannot_compute() -> None:
    with pytest.raises(ValueError, match="at least 4"):
        nr.reference_posterior(standard_stats(3, 0.2), Priors())
    with pytest.raises(ValueError, match="strictly between"):
        nr.reference_posterior(standard_stats(10, 1.0), Priors())
    with pytest.raises(ValueError, match="grid_size"):
        nr.reference_posterior(standard_stats(10, 0.2), Priors(), grid_size=50)


def test_prints_cost_per_pair() -> None:
    """Cost at the default priors and grid (printed, not asserted: run with -s to see it)."""
    nr.reference_posterior(standard_stats(30, 0.2), Priors())
    for n in (4, 12, 30, 1000, 10**7):
        for r in (0.3, -0.9, 1 - 1e-9):
            start = time.perf_counter()
            posterior = nr.reference_posterior(standard_stats(n, r), Priors())
            elapsed = time.perf_counter() - start
            print(f"reference_posterior n={n} r={r:+.9f}: {1e3 * elapsed:.1f} ms")
            assert math.isfinite(posterior.mean)
