"""The exact engine at its edges: near-perfect correlations, flat priors on the standard
deviations, U-shaped Beta priors at small n, and sums of data with large offsets.

References used below, all outside the module under test:

* mpmath (arbitrary precision, 50 to 150 digits): the 1-D integral over zeta = atanh(rho) of
  prior times the closed-form kernel, with mpmath's own Gauss hypergeometric function, and the
  integral form of I_m by mpmath.quad to confirm that closed form.
* scipy.integrate.cubature: brute-force 2-D integration of the bivariate-normal likelihood over
  the two standard deviations (in t = log sigma), means integrated out against a flat prior with
  the closed Gaussian integral 2 pi sqrt(det Sigma) / n (common practice; checked numerically in
  tests/test_exact.py::test_mean_integration_is_the_gaussian_integral).
* scipy.integrate.quad with rho = cos(theta), which turns the Beta(1/2, 1/2) prior into a
  uniform one in theta, and scipy.special.hyp2f1 for the kernel.
* numpy.corrcoef and math.fsum on data whose offset is removed exactly.

The closed form of the kernel (Jeffreys 1961, *Theory of Probability*, ch. 5; Ly, Marsman &
Wagenmakers 2018, *Statistica Neerlandica* 72(1)) generalised to the prior (sigma1 sigma2)^-k::

    h(rho) = (1 - rho^2)^(m - (n-1)/2) I_m(rho r),  m = n - 2 + k,
    I_m(x) = integral_0^inf (cosh w - x)^-m dw
           = sqrt(pi/2) Gamma(m) / Gamma(m + 1/2) (1 - x)^-(m - 1/2) 2F1(1/2, 1/2; m + 1/2; (1 + x)/2).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from functools import cache
from pathlib import Path

import mpmath as mp
import numpy as np
import pandas as pd
import pytest
from scipy import integrate, optimize, special

from reportgen import exact
from reportgen.data import PERFECT_CORRELATION_COMPLEMENT, SufficientStats, load_pairs, load_table, sufficient_stats
from reportgen.errors import DataError
from reportgen.exact import exact_posterior, log_bayes_factor_10, log_likelihood_kernel
from reportgen.spec import load_spec
from tests.conftest import write_spec

K_OF = {"jeffreys": 1, "flat": 0}  # the prior on each sd is sigma^-k


# --------------------------------------------------------------------------- mpmath reference


def exact_sums(x: np.ndarray, y: np.ndarray, dps: int = 60) -> tuple[int, mp.mpf, mp.mpf]:
    """(n, r, 1 - |r|) of the given floats, summed exactly enough in mpmath at ``dps`` digits."""
    with mp.workdps(dps):
        xs = [mp.mpf(float(v)) for v in x]
        ys = [mp.mpf(float(v)) for v in y]
        n = len(xs)
        mx, my = mp.fsum(xs) / n, mp.fsum(ys) / n
        sxx = mp.fsum((v - mx) ** 2 for v in xs)
        syy = mp.fsum((v - my) ** 2 for v in ys)
        sxy = mp.fsum((u - mx) * (v - my) for u, v in zip(xs, ys, strict=True))
        r = sxy / mp.sqrt(sxx * syy)
        return n, +r, 1 - abs(r)


def mp_reference(n: int, sign: int, c: float | mp.mpf, a: float, b: float, sd_prior: str,
                 dps: int = 50) -> tuple[float, float, float]:
    """(log BF10, posterior mean, posterior E[1 - sign rho]) for r = sign (1 - c), in mpmath.

    The posterior is prior(rho) h(rho) normalised over rho; it is integrated in zeta = atanh(rho)
    with mpmath.quad (tanh-sinh, to 25 digits; the integrand at ``dps`` digits) on (-inf, inf), split
    around atanh(r) and every 5 units between 0 and atanh(r) (at small n the posterior can be spread
    over all of that). 1 - rho and 1 + rho are
    2 / (1 + exp(+-2 zeta)) and 1 - rho r is formed as (1 - |rho|) + |rho| c on the side of r, so
    nothing cancels. BF10 = integral prior h / h(0) (Jeffreys 1961 ch. 5; Dickey 1971).
    """
    with mp.workdps(dps):
        c = mp.mpf(c)
        m = n - 2 + K_OF[sd_prior]
        e = mp.mpf(m) - mp.mpf(n - 1) / 2
        half = mp.mpf(1) / 2
        log_const = mp.log(mp.sqrt(mp.pi / 2)) + mp.loggamma(m) - mp.loggamma(m + half)
        log_prior_const = -mp.log(2) - mp.log(mp.beta(a, b))

        def log_kernel(om: mp.mpf, op: mp.mpf, rho: mp.mpf) -> mp.mpf:
            if rho * sign > 0:
                omx = (om if rho > 0 else op) + abs(rho) * c
            else:
                omx = 1 + abs(rho) * (1 - c)
            return (e * mp.log(om * op) + log_const - (m - half) * mp.log(omx)
                    + mp.log(mp.hyp2f1(half, half, m + half, 1 - omx / 2)))

        @cache
        def log_g(zeta: mp.mpf) -> tuple[mp.mpf, mp.mpf]:
            om, op = 2 / (1 + mp.exp(2 * zeta)), 2 / (1 + mp.exp(-2 * zeta))
            log_prior = (a - 1) * mp.log(op / 2) + (b - 1) * mp.log(om / 2) + log_prior_const
            return log_prior + log_kernel(om, op, mp.tanh(zeta)) + mp.log(om * op), (om if sign > 0 else op)

        centre = sign * mp.log((2 - c) / c) / 2
        scale = 1 / mp.sqrt(n - 3)
        peak = log_g(centre)[0]
        inner = {centre + t * scale for t in (-30, -10, -3, -1, 0, 1, 3, 10, 30)}
        inner |= {mp.mpf(sign * t) for t in range(0, int(abs(centre)), 5)}
        points = [-mp.inf, *sorted(inner), mp.inf]

        def weighted(t: mp.mpf, which: int) -> mp.mpf:
            with mp.workdps(dps):  # the integrand at full precision, the quadrature at 25 digits
                log_value, gap_t = log_g(t)
                return mp.exp(log_value - peak) * (1, mp.tanh(t), gap_t)[which]

        with mp.workdps(25):
            total, first, gap = (mp.quad(lambda t, w=w: weighted(t, w), points) for w in range(3))
        log_bf = mp.log(total) + peak - log_kernel(mp.mpf(1), mp.mpf(1), mp.mpf(0))
        return float(log_bf), float(first / total), float(gap / total)


def test_closed_form_of_i_m_matches_its_integral_form_in_mpmath() -> None:
    """The closed form used by mp_reference, for the orders the flat prior needs too (m = 2, 3) and a
    large one, against mpmath.quad of integral_0^inf (cosh w - x)^-m dw (30 digits)."""
    with mp.workdps(30):
        for m in (2, 3, 7, 40):
            for x in (mp.mpf("-0.9"), mp.mpf(0), mp.mpf("0.5"), 1 - mp.mpf("1e-8")):
                closed = (mp.sqrt(mp.pi / 2) * mp.gamma(m) / mp.gamma(m + mp.mpf(1) / 2)
                          * (1 - x) ** (-(m - mp.mpf(1) / 2))
                          * mp.hyp2f1(mp.mpf(1) / 2, mp.mpf(1) / 2, m + mp.mpf(1) / 2, (1 + x) / 2))
                width = mp.sqrt(2 * (1 - x) / m)  # where the integrand falls off
                integral = mp.quad(lambda w, x=x, m=m: (mp.cosh(w) - x) ** (-m),
                                   [0, width, 10 * width, 100 * width, mp.inf])
                assert abs(closed / integral - 1) < mp.mpf("1e-20")


# --------------------------------------------------------------------------- 1. near-perfect correlations


def alternating(n: int, slope: float, wiggle: float) -> tuple[np.ndarray, np.ndarray]:
    x = np.arange(1, n + 1, dtype=float)
    return x, slope * x + wiggle * (-1.0) ** np.arange(1, n + 1)


NEAR_PERFECT_DATA = [
    pytest.param(1.0, 0.004, id="r=+(1-9.6e-11)"),  # the reproduction: y = x + 0.004 (-1)^i
    pytest.param(-0.5, 0.001, id="r=-(1-2.4e-11)"),
    pytest.param(1.0, 0.0006, id="r=+(1-2.2e-12), near the data stage's bound"),
]


@pytest.mark.parametrize(("slope", "wiggle"), NEAR_PERFECT_DATA)
def test_complement_of_r_from_the_data_is_accurate(slope: float, wiggle: float) -> None:
    """sufficient_stats' 1 - |r| vs the same floats summed in mpmath at 60 digits (rel 1e-9)."""
    x, y = alternating(1000, slope, wiggle)
    _, r, c = exact_sums(x, y)
    stats = sufficient_stats(x, y)
    assert stats.one_minus_abs_r == pytest.approx(float(c), rel=1e-9)
    assert math.copysign(1.0, stats.sample_r) == math.copysign(1.0, float(r))
    assert stats.one_minus_abs_r > PERFECT_CORRELATION_COMPLEMENT  # the data stage accepts all three


@pytest.mark.parametrize(("slope", "wiggle"), NEAR_PERFECT_DATA)
def test_near_perfect_posterior_matches_mpmath(slope: float, wiggle: float) -> None:
    """Mean to 1e-12 absolute and log BF10 to 1e-6 relative against mp_reference (uniform prior,
    Jeffreys' priors on the sds). For the reproduction the reference gives mean 0.99999999990332
    and log BF10 11138.793; clipping r at 1 - 1e-9 gave 0.9999999989930 and 9971.8."""
    x, y = alternating(1000, slope, wiggle)
    n, r, c = exact_sums(x, y)
    log_bf, mean, _ = mp_reference(n, 1 if r > 0 else -1, c, 1.0, 1.0, "jeffreys")
    stats = sufficient_stats(x, y)
    post = exact_posterior(n, stats.sample_r, one_minus_abs_r=stats.one_minus_abs_r)
    assert post.mean == pytest.approx(mean, rel=0, abs=1e-12)
    assert post.log_bf10 == pytest.approx(log_bf, rel=1e-6)
    assert post.one_minus_abs_r == stats.one_minus_abs_r
    bf = log_bayes_factor_10(n, stats.sample_r, one_minus_abs_r=stats.one_minus_abs_r)
    assert bf == pytest.approx(log_bf, rel=1e-6)


@pytest.mark.parametrize(("n", "sign", "c", "a", "b", "sd_prior", "dps"), [
    (4, -1, 1.5e-12, 0.5, 0.5, "flat", 50),
    (1000, 1, 1.5e-12, 1.0, 1.0, "flat", 50),
    (60, -1, 1e-60, 2.0, 1.0, "jeffreys", 110),
    (8, 1, 1e-100, 1.0, 3.0, "flat", 120),
])
def test_complements_far_below_rounding_of_r_match_mpmath(n: int, sign: int, c: float, a: float, b: float,
                                                          sd_prior: str, dps: int) -> None:
    """Direct calls with 1 - |r| given, down to the engine's floor, against mp_reference: log BF10 to
    1e-6 relative, mean to 1e-12 absolute and E[1 - sign(r) rho] to 1e-6 relative (from the grid)."""
    assert c >= exact.MIN_ONE_MINUS_ABS_R
    r = sign * (1.0 - c)  # rounds to +-1 for the last two
    log_bf, mean, gap = mp_reference(n, sign, c, a, b, sd_prior, dps)
    post = exact_posterior(n, r, a, b, one_minus_abs_r=c, sd_prior=sd_prior)
    assert post.mean == pytest.approx(mean, rel=0, abs=1e-12)
    assert post.log_bf10 == pytest.approx(log_bf, rel=1e-6)
    # 1 - sign(r) rho = 2 / (1 + exp(2 sign(r) zeta)) on the engine's grid, by the trapezoidal rule
    gap_grid = float(np.trapezoid(2.0 / (1.0 + np.exp(2.0 * sign * post.z)) * post.z_density, post.z))
    assert gap_grid == pytest.approx(gap, rel=1e-6)


def test_given_complement_changes_nothing_where_r_carries_the_digits() -> None:
    """For moderate r, passing 1 - |r| (what r itself gives) reproduces the default call (rel 1e-12)."""
    for n, r in [(5, 0.3), (40, -0.8), (2000, 0.99)]:
        plain = exact_posterior(n, r)
        given = exact_posterior(n, r, one_minus_abs_r=1.0 - abs(r))
        assert given.mean == pytest.approx(plain.mean, rel=1e-12)
        assert given.log_bf10 == pytest.approx(plain.log_bf10, rel=1e-12, abs=1e-12)
        assert given.quantile(0.9) == pytest.approx(plain.quantile(0.9), rel=1e-12)
        assert plain.one_minus_abs_r == 1.0 - abs(r)


@pytest.mark.parametrize(("kwargs", "message"), [
    ({"r": 1.0}, "strictly between"),  # without the complement r = 1 stays refused
    ({"r": 0.5, "one_minus_abs_r": 0.4}, "agree"),
    ({"r": 1.0, "one_minus_abs_r": 0.0}, "one_minus_abs_r"),
    ({"r": 1.0, "one_minus_abs_r": 1e-101}, "one_minus_abs_r"),
    ({"r": -1.0, "one_minus_abs_r": float("nan")}, "one_minus_abs_r"),
    ({"r": 1.5, "one_minus_abs_r": 1e-20}, "between -1 and 1"),
    ({"r": 0.5, "sd_prior": "uniform"}, "jeffreys"),
])
def test_bad_complement_or_sd_prior_is_refused(kwargs: dict, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        exact_posterior(10, **kwargs)


def test_data_stage_accepts_no_correlation_the_engine_refuses() -> None:
    """The data stage refuses 1 - |r| at or below its bound; everything above it the engine takes."""
    assert PERFECT_CORRELATION_COMPLEMENT >= exact.MIN_ONE_MINUS_ABS_R
    post = exact_posterior(4, 1.0, 0.5, 0.5, one_minus_abs_r=1.0001 * PERFECT_CORRELATION_COMPLEMENT,
                           sd_prior="flat")
    assert 0.0 < post.mean < 1.0


def test_pair_data_keeps_near_perfect_pairs_and_refuses_exact_lines(tmp_path: Path) -> None:
    x, y = alternating(1000, 1.0, 0.004)
    pd.DataFrame({"a": x, "b": y}).to_csv(tmp_path / "data.csv", index=False)
    spec = load_spec(write_spec(tmp_path, '[[pairs]]\nx = "a"\ny = "b"\n'))
    (pair,) = load_pairs(spec, load_table(spec))
    assert pair.stats.one_minus_abs_r == pytest.approx(9.59998e-11, rel=1e-5)  # mpmath value, above
    # y = 0.1 x + 0.3: a line up to the rounding of each value, so 1 - |r| is at rounding level
    pd.DataFrame({"a": x, "b": 0.1 * x + 0.3}).to_csv(tmp_path / "data.csv", index=False)
    with pytest.raises(DataError, match="perfectly correlated"):
        load_pairs(spec, load_table(spec))


def test_stats_without_residual_sum_fall_back_to_r() -> None:
    """Positional and keyword constructors written before the field keep working."""
    old = SufficientStats(10, 0.0, 0.0, 4.0, 9.0, 3.0)
    assert old.rss is None
    assert old.one_minus_abs_r == pytest.approx(0.5, rel=1e-15)
    keyword = SufficientStats(n=10, mean_x=0.0, mean_y=0.0, sxx=4.0, syy=9.0, sxy=-3.0)
    assert keyword.one_minus_abs_r == pytest.approx(0.5, rel=1e-15)
    # with the residual sum: 1 - r^2 = rss / syy, so 1 - |r| = (rss / syy) / (1 + |r|)
    full = SufficientStats(n=10, mean_x=0.0, mean_y=0.0, sxx=4.0, syy=9.0, sxy=3.0, rss=6.75)
    assert full.one_minus_abs_r == pytest.approx(0.5, rel=1e-15)


# --------------------------------------------------------------------------- 2. flat priors on the sds


def brute_force_log_marginal(data: np.ndarray, rhos: np.ndarray, k: int) -> np.ndarray:
    """log p(data | rho) at each rho: bivariate-normal likelihood (common practice), means integrated
    analytically against a flat prior, sds against (sigma1 sigma2)^-k by scipy cubature in
    t = log sigma (d sigma = sigma dt, so the integrand gains exp((1 - k)(t1 + t2))).

    Each rho's integrand is scaled by its own maximum on a coarse mesh so that cubature's
    element-wise relative tolerance applies to O(1) values.
    """
    n = data.shape[0]
    resid = data - data.mean(axis=0)
    sxx, syy = float(resid[:, 0] @ resid[:, 0]), float(resid[:, 1] @ resid[:, 1])
    sxy = float(resid[:, 0] @ resid[:, 1])
    one_minus = 1.0 - rhos * rhos

    def log_integrand(t: np.ndarray) -> np.ndarray:
        t1, t2 = t[:, :1], t[:, 1:]
        e1, e2 = np.exp(-t1), np.exp(-t2)
        quad_form = (sxx * e1 * e1 - 2.0 * rhos * sxy * e1 * e2 + syy * e2 * e2) / one_minus
        log_det = 2.0 * t1 + 2.0 * t2 + np.log(one_minus)
        log_lik = -n * math.log(2.0 * math.pi) - 0.5 * n * log_det - 0.5 * quad_form
        log_mean_integral = math.log(2.0 * math.pi) + 0.5 * log_det - math.log(n)
        return log_lik + log_mean_integral + (1 - k) * (t1 + t2)

    m = n - 2 + k  # the integrand decays like exp(-m t) towards large sigma
    tx, ty = 0.5 * math.log(sxx / n), 0.5 * math.log(syy / n)
    lower = np.array([tx - 6.0, ty - 6.0])
    upper = np.array([tx + 8.0 + 60.0 / m, ty + 8.0 + 60.0 / m])
    g1, g2 = np.meshgrid(np.linspace(lower[0], upper[0], 161), np.linspace(lower[1], upper[1], 161))
    ref = log_integrand(np.column_stack([g1.ravel(), g2.ravel()])).max(axis=0)
    result = integrate.cubature(lambda t: np.exp(log_integrand(t) - ref), lower, upper, rtol=1e-11, atol=0.0)
    assert result.status == "converged"
    return np.log(result.estimate) + ref


@pytest.mark.parametrize(("n", "seed"), [(5, 21), (8, 22), (30, 23)])
@pytest.mark.parametrize("sd_prior", ["flat", "jeffreys"])
def test_kernel_matches_brute_force_integration_over_both_sds(n: int, seed: int, sd_prior: str) -> None:
    """Normalised densities of rho (uniform prior) from the engine vs brute force, 1e-6 relative.

    Brute force: brute_force_log_marginal on 40 Gauss-Legendre nodes in rho, which also normalise
    it. The Jeffreys case validates the harness. Also checks the derived constant:
    log p(data | rho) - log h(rho) = -(n-1) log(2 pi) + log Gamma(m) - log n - (m/2) log(Sxx Syy).
    """
    rng = np.random.default_rng(seed)
    data = rng.multivariate_normal([1.0, -2.0], [[4.0, 0.5], [0.5, 0.25]], size=n)
    r = float(np.corrcoef(data.T)[0, 1])
    k = K_OF[sd_prior]
    nodes, weights = np.polynomial.legendre.leggauss(40)
    log_marg = brute_force_log_marginal(data, nodes, k)
    g = np.exp(log_marg - log_marg.max())
    density = g / float(np.sum(weights * g))

    post = exact_posterior(n, r, sd_prior=sd_prior)
    got = post.density_at(nodes)
    # the engine reports 0 where the density is below exp(-50) of its maximum (off its grid)
    shown = density > 1e-20 * density.max()
    np.testing.assert_allclose(got[shown], density[shown], rtol=1e-6, atol=0)
    assert np.all(got[~shown] <= 1e-20 * density.max())
    assert post.mean == pytest.approx(float(np.sum(weights * nodes * density)), rel=1e-8, abs=1e-10)

    resid = data - data.mean(axis=0)
    m = n - 2 + k
    constant = (-(n - 1) * math.log(2 * math.pi) + special.gammaln(m) - math.log(n)
                - 0.5 * m * math.log(float(resid[:, 0] @ resid[:, 0]) * float(resid[:, 1] @ resid[:, 1])))
    kernel = log_likelihood_kernel(nodes, n, r, sd_prior=sd_prior)
    np.testing.assert_allclose(log_marg - kernel, constant, rtol=0, atol=1e-8)


@pytest.mark.parametrize(("n", "r", "a", "b"), [(4, 0.7, 1.0, 1.0), (9, -0.4, 2.0, 0.5), (300, 0.2, 1.0, 1.0)])
def test_flat_sd_bayes_factor_matches_mpmath(n: int, r: float, a: float, b: float) -> None:
    """log BF10 and mean with flat priors on the sds vs mp_reference (abs 1e-9 and 1e-12)."""
    log_bf, mean, _ = mp_reference(n, 1 if r > 0 else -1, 1 - mp.mpf(abs(r)), a, b, "flat", dps=30)
    assert log_bayes_factor_10(n, r, a, b, sd_prior="flat") == pytest.approx(log_bf, rel=0, abs=1e-9)
    assert exact_posterior(n, r, a, b, sd_prior="flat").mean == pytest.approx(mean, rel=0, abs=1e-12)


def test_flat_and_jeffreys_differ_as_the_kernels_say() -> None:
    """Flat sds at n equal Jeffreys' at n - 1 only in the order m, not the exponent: the flat kernel
    is Jeffreys' at n - 1 divided by (1 - rho^2)^(1/2) (from the two closed forms above)."""
    rho = np.linspace(-0.95, 0.95, 11)
    flat = log_likelihood_kernel(rho, 12, 0.4, sd_prior="flat")
    jeffreys_one_less = log_likelihood_kernel(rho, 11, 0.4)
    np.testing.assert_allclose(flat - jeffreys_one_less, -0.5 * np.log1p(-rho * rho), rtol=0, atol=1e-12)


# --------------------------------------------------------------------------- 3. U-shaped prior, small n


class ThetaReference:
    """Posterior of rho under the Beta(1/2, 1/2) prior stretched to [-1, 1], by scipy quad.

    With rho = cos(theta) the prior rho-density 1 / (pi sqrt(1 - rho^2)) times d rho is d theta / pi,
    so the integrand over theta in (0, pi) is the kernel alone, smooth at both ends. The kernel uses
    the closed form with scipy.special.hyp2f1 (checked against its integral form above).
    """

    def __init__(self, n: int, r: float, sd_prior: str) -> None:
        self.n, self.r = n, r
        self.m = n - 2 + K_OF[sd_prior]
        self.e = self.m - (n - 1) / 2
        self.peak = max(self.log_kernel(math.cos(t)) for t in np.linspace(0.01, math.pi - 0.01, 200))
        self.total = self.integral(0.0, math.pi)

    def log_kernel(self, rho: float) -> float:
        m, x = self.m, rho * self.r
        return (self.e * math.log1p(-rho * rho) + 0.5 * math.log(math.pi / 2) + special.gammaln(m)
                - special.gammaln(m + 0.5) - (m - 0.5) * math.log1p(-x)
                + math.log(special.hyp2f1(0.5, 0.5, m + 0.5, 0.5 * (1 + x))))

    def weight(self, theta: float) -> float:
        rho = math.cos(theta)
        return 0.0 if abs(rho) >= 1.0 else math.exp(self.log_kernel(rho) - self.peak)

    def integral(self, lo: float, hi: float, f: Callable[[float], float] | None = None, epsabs: float = 0.0) -> float:
        g = self.weight if f is None else (lambda t: f(math.cos(t)) * self.weight(t))
        value, _ = integrate.quad(g, lo, hi, epsabs=epsabs, epsrel=1e-12, limit=200)
        return value

    def cdf(self, x: float, epsabs: float = 0.0) -> float:
        return self.integral(math.acos(x), math.pi, epsabs=epsabs) / self.total

    def sf(self, x: float) -> float:
        return self.integral(0.0, math.acos(x)) / self.total

    def density(self, x: float) -> float:
        return math.exp(self.log_kernel(x) - self.peak) / (math.pi * math.sqrt(1 - x * x)) / (self.total / math.pi)

    def quantile(self, q: float) -> float:
        # probabilities below 1e-16 do not move a quantile: an absolute tolerance keeps quad quiet near the ends
        return optimize.brentq(lambda x: self.cdf(x, 1e-16 * self.total) - q, -1.0 + 1e-12, 1.0 - 1e-12,
                               xtol=1e-14, rtol=1e-14)


@pytest.mark.parametrize("sd_prior", ["jeffreys", "flat"])
@pytest.mark.parametrize("n", [5, 6])
@pytest.mark.parametrize("r", [0.3, 0.9, -0.95])
def test_u_shaped_prior_at_small_n_matches_quadrature(n: int, r: float, sd_prior: str) -> None:
    """Beta(1/2, 1/2) prior (infinite density at both ends): summaries vs ThetaReference."""
    ref = ThetaReference(n, r, sd_prior)
    post = exact_posterior(n, r, 0.5, 0.5, sd_prior=sd_prior)
    mean = ref.integral(0.0, math.pi, lambda x: x) / ref.total
    # measured worst errors over the 12 cases: mean 1e-13, quantiles 6e-10, cdf and sf 1e-8 relative
    # (flat sds at n = 5, whose heavy tails widen the grid), density 2e-10, HDI 1e-10
    assert post.mean == pytest.approx(mean, rel=0, abs=1e-11)
    for q in (0.01, 0.25, 0.5, 0.9, 0.999):
        assert post.quantile(q) == pytest.approx(ref.quantile(q), rel=0, abs=2e-9)
    for x in (-0.99, -0.5, 0.0, 0.6, 0.97):
        assert post.cdf(x) == pytest.approx(ref.cdf(x), rel=3e-8, abs=1e-14)
        assert post.sf(x) == pytest.approx(ref.sf(x), rel=3e-8, abs=1e-14)
        assert post.density_at(x) == pytest.approx(ref.density(x), rel=1e-9)
    lo, hi = post.hdi(0.95)
    # the highest-density interval holds 95% and has equal density at its ends (unimodal here)
    assert ref.cdf(hi) - ref.cdf(lo) == pytest.approx(0.95, rel=0, abs=1e-9)
    assert ref.density(lo) == pytest.approx(ref.density(hi), rel=1e-9)
    assert post.density_at(np.array([-1.0, 1.0])).tolist() == [0.0, 0.0]


def test_posterior_density_infinite_at_the_ends_flat_n4() -> None:
    """Flat sds at n = 4 with Beta(0.3, 0.3): the posterior density ~ (1 - rho^2)^(-0.2) is infinite at
    both ends. Quantiles and cdf still agree with quad in theta (the theta integrand
    h(cos theta) (sin theta)^(2a - 1) has an integrable singularity that quad handles)."""
    n, r, a = 4, 0.3, 0.3
    m = n - 2
    e = m - (n - 1) / 2

    def weight(theta: float) -> float:
        rho, s = math.cos(theta), math.sin(theta)
        if s <= 0.0:
            return 0.0
        x = rho * r
        log_h = (e * math.log(s * s) - (m - 0.5) * math.log1p(-x)
                 + math.log(special.hyp2f1(0.5, 0.5, m + 0.5, 0.5 * (1 + x))))
        return math.exp(log_h) * s ** (2 * a - 1)  # prior (1 - rho^2)^(a - 1) times d rho = sin dtheta

    def cdf(x: float) -> float:
        part, _ = integrate.quad(weight, math.acos(x), math.pi, epsabs=0.0, epsrel=1e-12, limit=200)
        return part / total

    total, _ = integrate.quad(weight, 0.0, math.pi, epsabs=0.0, epsrel=1e-12, limit=200)
    post = exact_posterior(n, r, a, a, sd_prior="flat")
    for x in (-0.999, -0.3, 0.2, 0.99):
        assert post.cdf(x) == pytest.approx(cdf(x), rel=1e-8)
    for q in (0.02, 0.5, 0.97):
        expected = optimize.brentq(lambda x, q=q: cdf(x) - q, -1 + 1e-12, 1 - 1e-12, xtol=1e-13)
        assert post.quantile(q) == pytest.approx(expected, abs=1e-9)
    assert np.isfinite(post.density).all() and np.isfinite(post.hdi(0.9)).all()


# --------------------------------------------------------------------------- 4. sums with large offsets


def offset_data(offset_x: float, spread_x: float, offset_y: float, spread_y: float,
                seed: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """x = offset_x + u, y = offset_y + v with u, v on the float grid of x and y, so x - offset_x
    recovers u exactly (Sterbenz: both lie within a factor 2 of each other)."""
    rng = np.random.default_rng(seed)
    z = rng.normal(size=(2, 500))
    x = offset_x + spread_x * z[0]
    y = offset_y + spread_y * (0.6 * z[0] + 0.8 * z[1])
    u, v = x - offset_x, y - offset_y
    assert np.array_equal(offset_x + u, x) and np.array_equal(offset_y + v, y)
    return x, y, u, v


@pytest.mark.parametrize(("offset_x", "spread_x", "offset_y", "spread_y"), [
    (1e15, 100.0, 1e15, 100.0),  # u, v multiples of 0.125 (the spacing of floats near 1e15)
    (1e9, 1e-3, -2e12, 0.03),
])
def test_sums_of_offset_data_match_the_offset_free_floats(offset_x: float, spread_x: float,
                                                          offset_y: float, spread_y: float) -> None:
    """Against numpy.corrcoef and math.fsum on u and v (the same floats minus an exact offset)."""
    x, y, u, v = offset_data(offset_x, spread_x, offset_y, spread_y, seed=5)
    if offset_x == 1e15:
        assert np.all(u * 8 == np.round(u * 8)) and np.all(v * 8 == np.round(v * 8))
    stats = sufficient_stats(x, y)
    n = u.size
    mu, mv = math.fsum(u) / n, math.fsum(v) / n
    sxx = math.fsum((u - mu) ** 2)
    syy = math.fsum((v - mv) ** 2)
    sxy = math.fsum((u - mu) * (v - mv))
    assert stats.sample_r == pytest.approx(float(np.corrcoef(u, v)[0, 1]), rel=1e-13)
    assert stats.sxx == pytest.approx(sxx, rel=1e-13)
    assert stats.syy == pytest.approx(syy, rel=1e-13)
    assert stats.sxy == pytest.approx(sxy, rel=1e-13)
    # the means themselves are stored rounded to the float grid near the offset: one spacing apart at most
    assert abs(stats.mean_x - (offset_x + mu)) <= np.spacing(abs(offset_x))
    assert abs(stats.mean_y - (offset_y + mv)) <= np.spacing(abs(offset_y))
    rss = math.fsum((v - mv - sxy / sxx * (u - mu)) ** 2)
    assert stats.rss == pytest.approx(rss, rel=1e-12)
