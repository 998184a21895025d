"""Partial pooling of correlations over groups (reportgen.models.hierarchical), against outside references."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, optimize, stats

from reportgen.exact import exact_posterior, log_likelihood_kernel
from reportgen.models.hierarchical import (
    MU_PRIOR_SD,
    SMALL_SPREAD,
    TAU_PRIOR_SCALE,
    GroupInput,
    partial_pooling,
    spread_sentence,
    spread_words,
)


def _group(label: str, n: int, r: float) -> GroupInput:
    return GroupInput(label, n, r, 1.0 - abs(r))


def _sample_group(rng: np.random.Generator, label: str, n: int, rho: float) -> GroupInput:
    """n rows of a standard bivariate normal with correlation rho, reduced to (n, r)."""
    x = rng.standard_normal(n)
    y = rho * x + math.sqrt(1.0 - rho * rho) * rng.standard_normal(n)
    return _group(label, n, float(np.corrcoef(x, y)[0, 1]))


def _cdf_at(grid: np.ndarray, density: np.ndarray, value: float) -> float:
    """P(X <= value) from a density on a grid, by the trapezoid rule."""
    cdf = np.concatenate(([0.0], np.cumsum(0.5 * np.diff(grid) * (density[1:] + density[:-1]))))
    return float(np.interp(value, grid, cdf / cdf[-1]))


def test_intervals_cover_at_their_level_under_the_prior() -> None:
    # Posteriors computed right are calibrated under their own prior: 90% intervals cover parameters drawn
    # from the prior 90% of the time, and the posterior CDF at the drawn value is Uniform(0, 1) (Cook, Gelman
    # & Rubin 2006, J. Comput. Graph. Stat. 15(3); Talts et al. 2018, arXiv:1804.06788). Replications are
    # independent, so each count of covering intervals is Binomial(R, 0.9); the uniformity is checked with
    # scipy's Kolmogorov-Smirnov test (tried: it fails when the model's tau prior scale is off by a factor of 2).
    rng = np.random.default_rng(20240611)
    replications, group_count, mass = 200, 8, 0.9
    spread_hits = group_hits = 0
    spread_pit, group_pit = [], []
    for index in range(replications):
        mu = rng.normal(0.0, MU_PRIOR_SD)
        tau = abs(rng.normal(0.0, TAU_PRIOR_SCALE))
        zs = rng.normal(mu, tau, group_count)
        sizes = rng.integers(30, 201, group_count)
        groups = [_sample_group(rng, f"g{g}", int(sizes[g]), math.tanh(zs[g])) for g in range(group_count)]
        pooling = partial_pooling(groups, mass)
        spread_hits += pooling.spread.lower <= tau <= pooling.spread.upper
        spread_pit.append(_cdf_at(pooling.spread_grid, pooling.spread_density, tau))
        # groups in one replication share (mu, tau), so their hits are dependent: count one group each time
        chosen = pooling.groups[index % group_count]
        true_rho = math.tanh(zs[index % group_count])
        group_hits += chosen.rho.lower <= true_rho <= chosen.rho.upper
        group_pit.append(_cdf_at(chosen.grid, chosen.density, true_rho))
    low, high = stats.binom.interval(0.99, replications, mass)
    assert low <= spread_hits <= high
    assert low <= group_hits <= high
    assert stats.kstest(spread_pit, "uniform").pvalue > 1e-3
    assert stats.kstest(group_pit, "uniform").pvalue > 1e-3


def test_spread_words_for_a_shared_and_for_separated_correlations() -> None:
    # Known truth by construction: one rho for every group (tau = 0) and rhos -0.6, 0, 0.6 (a spread of
    # about 0.69 on the z scale, atanh(0.6) = 0.693).
    rng = np.random.default_rng(5)
    shared = [_sample_group(rng, f"g{g}", 3000, 0.4) for g in range(6)]
    assert partial_pooling(shared, 0.95).spread_words == "differ little"
    separated = [_group("a", 1000, -0.6), _group("b", 1000, 0.0), _group("c", 1000, 0.6)]
    pooling = partial_pooling(separated, 0.95)
    assert pooling.spread_words == "differ clearly"
    assert pooling.spread.lower < 0.69 < pooling.spread.upper


def test_a_small_extreme_group_is_shrunk_towards_the_others() -> None:
    # Shrinkage of a noisy group towards the population (Efron & Morris 1975, JASA 70; Gelman et al.,
    # Bayesian Data Analysis, 3rd ed., ch. 5); the separate interval is Jeffreys' exact posterior
    # (reportgen.exact, itself checked against quadrature in test_exact.py).
    others = [_group(f"g{g}", 300, r) for g, r in enumerate((0.28, 0.31, 0.30, 0.32, 0.29))]
    small = _group("small", 12, 0.85)
    pooling = partial_pooling([*others, small], 0.95)
    shrunk = pooling.groups[-1].rho
    assert 0.30 < shrunk.median < 0.85
    alone_lower, alone_upper = exact_posterior(12, 0.85).quantile([0.025, 0.975])
    assert shrunk.upper - shrunk.lower < alone_upper - alone_lower


def test_complete_pooling_limit_matches_one_shared_correlation() -> None:
    # With tau forced to ~0 every group shares z = mu ~ N(0, 1): the posterior of z is the N(0, 1) density
    # times the product of the groups' kernels, integrated here independently with scipy's quad (the
    # prior is on z and so is the integral: no Jacobian).
    groups = [_group("a", 40, 0.2), _group("b", 60, 0.35), _group("c", 25, 0.1)]
    pooling = partial_pooling(groups, 0.9, tau_prior_scale=1e-4)

    def log_kernels(z: float) -> float:
        return sum(float(log_likelihood_kernel(math.tanh(z), g.n, g.r)) for g in groups)

    anchor = 0.25  # near the mode; every quantile is reached from here over a short interval
    peak = log_kernels(anchor)

    def density(z: float) -> float:
        return math.exp(log_kernels(z) - peak) * stats.norm.pdf(z)

    def integral(lo: float, hi: float) -> float:
        return integrate.quad(density, lo, hi, epsabs=0.0, epsrel=1e-10)[0]

    below_anchor, above_anchor = integral(-5.0, anchor), integral(anchor, 5.0)
    total = below_anchor + above_anchor

    def cdf(m: float) -> float:
        return (below_anchor + integral(anchor, m)) / total

    def z_quantile(q: float) -> float:
        return optimize.brentq(lambda m: cdf(m) - q, -1.0, 1.5, xtol=1e-9)

    median, lower, upper = (math.tanh(z_quantile(q)) for q in (0.5, 0.05, 0.95))
    assert pooling.mean_rho.median == pytest.approx(median, abs=1e-4)
    assert pooling.mean_rho.lower == pytest.approx(lower, abs=2e-4)
    assert pooling.mean_rho.upper == pytest.approx(upper, abs=2e-4)
    assert pooling.p_mean_positive == pytest.approx(1.0 - cdf(0.0), abs=1e-4)
    for shrunk in pooling.groups:  # each group's rho is the shared one
        assert shrunk.rho.median == pytest.approx(median, abs=1e-4)


def test_densities_are_proper_and_near_perfect_small_groups_work() -> None:
    # A density on the rho scale integrates to 1 (trapezoid rule on its own grid, as reportgen.results reads it).
    groups = [GroupInput("tight", 4, 0.999999, 1e-6), _group("b", 4, 0.2), _group("c", 5, -0.5)]
    pooling = partial_pooling(groups, 0.95)
    for shrunk in pooling.groups:
        assert np.all(np.diff(shrunk.grid) > 0) and np.all(np.abs(shrunk.grid) < 1)
        assert np.trapezoid(shrunk.density, shrunk.grid) == pytest.approx(1.0, abs=1e-12)
        assert -1 < shrunk.rho.lower <= shrunk.rho.median <= shrunk.rho.upper < 1
        assert 0 <= shrunk.p_positive <= 1
    assert np.trapezoid(pooling.spread_density, pooling.spread_grid) == pytest.approx(1.0, abs=1e-12)
    assert pooling.spread.lower >= 0


def test_spread_words_follow_the_documented_rule() -> None:
    # The rule of the module docstring: the 90% interval of tau against SMALL_SPREAD.
    assert spread_words(SMALL_SPREAD * 0.9, 0.0) == "differ little"
    assert spread_words(0.5, SMALL_SPREAD * 1.1) == "differ clearly"
    assert spread_words(0.3, 0.05) == "cannot tell"
    with pytest.raises(ValueError):
        spread_words(0.1, 0.2)


def test_spread_sentence_names_the_groups_and_the_verdict() -> None:
    separated = [_group("a", 1000, -0.6), _group("b", 1000, 0.0), _group("c", 1000, 0.6)]
    sentence = spread_sentence(partial_pooling(separated, 0.95), noun="<sites>")
    assert sentence.startswith("The <sites> differ clearly: ") and "above 0.1 with 90% probability" in sentence
    unclear = spread_sentence(partial_pooling([_group("a", 10, 0.1), _group("b", 10, 0.5)], 0.95))
    assert unclear.startswith("The data cannot tell whether the groups differ: ")


@pytest.mark.parametrize(
    ("groups", "mass"),
    [
        ([_group("only", 50, 0.3)], 0.95),
        ([_group("a", 3, 0.3), _group("b", 50, 0.3)], 0.95),
        ([GroupInput("a", 4.5, 0.3, 0.7), _group("b", 50, 0.3)], 0.95),  # type: ignore[arg-type]
        ([GroupInput("a", 50, 1.0, 0.0), _group("b", 50, 0.3)], 0.95),
        ([GroupInput("a", 50, -1.0, 0.0), _group("b", 50, 0.3)], 0.95),
        ([GroupInput("a", 50, 1.2, 0.2), _group("b", 50, 0.3)], 0.95),
        ([_group("a", 50, 0.3), _group("b", 50, 0.3)], 1.0),
        ([_group("a", 50, 0.3), _group("b", 50, 0.3)], 0.0),
    ],
)
def test_bad_inputs_raise_value_error(groups: list[GroupInput], mass: float) -> None:
    with pytest.raises(ValueError):
        partial_pooling(groups, mass)


@pytest.mark.parametrize("prior", [{"mu_prior_sd": 0.0}, {"tau_prior_scale": -1.0}, {"tau_prior_scale": math.inf}])
def test_bad_prior_scales_raise_value_error(prior: dict[str, float]) -> None:
    with pytest.raises(ValueError):
        partial_pooling([_group("a", 50, 0.3), _group("b", 50, 0.1)], 0.95, **prior)
