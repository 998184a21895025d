"""Partial pooling of one correlation over groups, on grids, from each group's n and r alone.

Model. Group g has ``n_g`` complete rows and sample correlation ``r_g`` (with ``1 - |r_g|`` supplied
without cancellation). Its correlation enters on Fisher's scale, ``z_g = atanh(rho_g)``, through Jeffreys'
marginal likelihood kernel ``h(tanh z_g | n_g, r_g)`` (Jeffreys 1961; Ly, Marsman & Wagenmakers 2018;
``reportgen.exact.log_likelihood_kernel`` with Jeffreys' ``1/sigma`` priors on the group's two SDs and flat
priors on its means). A likelihood is a function, not a density, so changing to z adds no Jacobian. The
``z_g`` are independent draws from ``Normal(mu, tau)``, with ``mu ~ Normal(0, MU_PRIOR_SD)`` and
``tau ~ HalfNormal(TAU_PRIOR_SCALE)``, both on the z scale. Only ``(n_g, r_g)`` enter, so the cost does not
grow with the number of rows.

Computation, without a sampler. z runs over one uniform grid holding every likelihood (``atanh r_g`` plus
or minus 10 standard errors ``1/sqrt(n_g - 3)``) and 3 prior SDs of ``mu`` either side of 0, widened while
the posterior of ``mu`` still reaches an end; its step, the smallest standard error over ``max(8, 2 sqrt(G))``,
resolves the narrowest likelihood and the mean of G of them. ``mu`` takes the grid's values; ``tau`` runs
over ``top * u^2`` for u uniform on [0, 1] (dense near 0, where a small spread piles up), with ``top`` moved
on 40 points until the posterior of ``tau`` drops below ``exp(-25)`` of its peak in the upper half of the
range, then 96 points. For each ``tau`` the marginal likelihood of group g at every ``mu``, the integral of
``h`` against ``Normal(z | mu, tau)``, is a convolution of the likelihood on the grid with normal weights
summing to one: the trapezoidal rule, geometrically convergent once ``tau`` exceeds the step, and at
``tau = 0`` the point mass at ``mu``, the exact limit (short kernels are summed term by term, long ones by
FFT). The posterior on ``(mu, tau)`` is the prior times the G marginals; group g's posterior mixes
``p(z_g | mu, tau, data_g)`` over it, a second convolution. Quantiles come from the cumulative Simpson
rule on the grid; those of z map to rho through tanh.

Limits. Likelihoods are scaled to peak at 1 and marginals floored at ``1e-290``. FFT rounding (about
1e-16) spoils marginals below 1e-14 (``_FFT_NOISE``); cells that small carry no weight unless the priors
force pooling on groups whose data deny it, and when they hold more than 1e-6 of the posterior the pass is
redone summing every kernel term by term. The grid stops at ``|z| = 13`` (``1 - |rho|`` about 1e-11), so
``|atanh r_g|`` may reach 12 (``1 - |r|`` about 8e-11); an n = 4 group that close to +-1 loses the part of
its likelihood beyond the grid's end. A large group whose likelihood is too narrow for 12 000 points
spanning the others raises ValueError.

Words. ``spread_words`` reads the 90% central interval of ``tau`` whatever the report's credible mass, so
that "differ little" means the same in every report. ``SMALL_SPREAD = 0.1`` on the z scale: near
``rho = 0.5`` (where ``d rho / dz = 0.75``) a z-spread of 0.1 moves rho by about +-0.075.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from scipy import fft, integrate, interpolate, special

from reportgen.exact import log_likelihood_kernel

__all__ = ["MU_PRIOR_SD", "SMALL_SPREAD", "TAU_PRIOR_SCALE", "GroupInput", "Interval", "PartialPooling",
           "PooledGroup", "partial_pooling", "spread_sentence", "spread_words"]

MU_PRIOR_SD = 1.0
TAU_PRIOR_SCALE = 0.5
SMALL_SPREAD = 0.1
WORDS_MASS = 0.9  # the central interval of tau the words read
MIN_GROUPS, MIN_ROWS = 2, 4  # Jeffreys' closed form needs n >= 4 (reportgen.exact)

_Z_LIMIT, _MAX_CENTRE = 13.0, 12.0  # the grid stays within |z| <= 13; |atanh r| may reach 12
_LIK_HALF_WIDTH = 10.0  # standard errors either side of atanh(r); log h has dropped by more than 25 there
_MAX_STEP, _MAX_NODES = 0.02, 12_000
_COARSE_TAUS, _FINE_TAUS, _MAX_PASSES = 40, 96, 12
_LOG_DROP = 25.0
_KERNEL_SDS = 9.0  # normal weights beyond this many tau are below exp(-40)
_DIRECT_MAX = 33  # marginals from kernels up to this length are summed term by term (no FFT rounding)
_FLOOR = 1e-290
_FFT_NOISE = 1e-14  # FFT marginals below this (likelihoods peak at 1) carry over 1% rounding


@dataclass(frozen=True)
class GroupInput:
    label: str
    n: int
    r: float
    one_minus_abs_r: float  # 1 - |r| without cancellation (SufficientStats.one_minus_abs_r)


@dataclass(frozen=True)
class Interval:  # a posterior summary of one quantity
    median: float
    lower: float
    upper: float  # lower and upper bound a central interval of the given mass
    mean: float


@dataclass(frozen=True)
class PooledGroup:
    label: str
    n: int
    rho: Interval  # partially pooled posterior of this group's rho
    p_positive: float  # P(rho_g > 0)
    grid: np.ndarray  # rho values, increasing, strictly inside (-1, 1)
    density: np.ndarray  # posterior density of rho_g on grid, integrating to 1 by the trapezoid rule


@dataclass(frozen=True)
class PartialPooling:
    groups: tuple[PooledGroup, ...]
    mean_rho: Interval  # tanh of the population mean mu
    p_mean_positive: float  # P(mu > 0)
    spread: Interval  # tau, on the z scale
    spread_grid: np.ndarray
    spread_density: np.ndarray
    spread_words: str  # "differ little" | "differ clearly" | "cannot tell"
    credible_mass: float
    mu_prior_sd: float
    tau_prior_scale: float


def _centres(groups: Sequence[GroupInput]) -> tuple[np.ndarray, np.ndarray]:
    """atanh(r_g), formed from 1 - |r_g| (exact near +-1), and the standard errors 1/sqrt(n_g - 3)."""
    if len(groups) < MIN_GROUPS:
        raise ValueError(f"partial pooling needs at least {MIN_GROUPS} groups, got {len(groups)}")
    for g in groups:
        if isinstance(g.n, bool) or int(g.n) != g.n or g.n < MIN_ROWS:
            raise ValueError(f"group {g.label!r}: n must be a whole number of at least {MIN_ROWS}, got {g.n!r}")
        if not (-1.0 < g.r < 1.0 and 0.0 < g.one_minus_abs_r <= 1.0):
            raise ValueError(f"group {g.label!r}: r must lie strictly between -1 and 1, got r = {g.r!r} "
                             f"with 1 - |r| = {g.one_minus_abs_r!r}")
    centres = np.array([math.copysign(0.5 * math.log1p(2.0 * abs(g.r) / g.one_minus_abs_r), g.r) for g in groups])
    if np.any(np.abs(centres) > _MAX_CENTRE):
        raise ValueError(f"a sample correlation is too close to +-1 for the grid (|atanh r| above {_MAX_CENTRE:g})")
    return centres, 1.0 / np.sqrt(np.array([g.n for g in groups], dtype=float) - 3.0)


def _z_grid(centres: np.ndarray, ses: np.ndarray, mu_prior_sd: float, widen: float) -> np.ndarray:
    lo = min(float(np.min(centres - _LIK_HALF_WIDTH * ses)), -3.0 * mu_prior_sd)
    hi = max(float(np.max(centres + _LIK_HALF_WIDTH * ses)), 3.0 * mu_prior_sd)
    middle, half = 0.5 * (lo + hi), 0.5 * (hi - lo) * widen
    lo, hi = max(middle - half, -_Z_LIMIT), min(middle + half, _Z_LIMIT)
    step = min(_MAX_STEP, float(np.min(ses)) / max(8.0, 2.0 * math.sqrt(centres.size)))
    count = min(math.ceil((hi - lo) / step) + 1, _MAX_NODES)
    if (hi - lo) / (count - 1) > 0.5 * float(np.min(ses)):
        raise ValueError("the groups' sizes and correlations differ too much for one grid: the largest group's "
                         "likelihood is too narrow for the range the others span")
    return np.linspace(lo, hi, count)


def _weights(tau: float, step: float, size: int) -> np.ndarray:
    """Normal(0, tau) weights at multiples of the step, summing to one (the point mass at tau = 0)."""
    reach = math.ceil(_KERNEL_SDS * tau / step)
    offsets = np.arange(-reach, reach + 1)
    weights = np.exp(-0.5 * (offsets * (step / max(tau, 1e-300))) ** 2)
    weights /= weights.sum()  # before trimming to the grid: the likelihoods are ~0 beyond it
    return weights[np.abs(offsets) < size]


def _direct(values: np.ndarray, weights: np.ndarray) -> np.ndarray:
    out, half, size = np.zeros_like(values), weights.size // 2, values.shape[1]
    for offset, weight in zip(range(-half, half + 1), weights, strict=True):
        out[:, max(offset, 0):size + min(offset, 0)] += weight * values[:, max(-offset, 0):size - max(offset, 0)]
    return out


def _trapezoid_weights(grid: np.ndarray) -> np.ndarray:
    return 0.5 * (np.diff(grid, prepend=grid[0]) + np.diff(grid, append=grid[-1]))


def _log_posterior(lik: np.ndarray, z: np.ndarray, taus: np.ndarray, priors: tuple[float, float], mix: bool,
                   exact: bool) -> tuple[np.ndarray, np.ndarray | None, np.ndarray]:
    """log p(mu, tau | data) + const on (z, taus); with ``mix``, each group's posterior masses on z (G x K).

    The mixture, the sum over cells of w(cell) Normal(z | cell) / marginal(cell), is accumulated in the same
    pass and rescaled whenever a cell beats the reference ``top``. Long kernels act through the FFT unless
    ``exact``; the cells where an FFT marginal sank into its rounding (below ``_FFT_NOISE``) are returned.
    """
    size, step = z.size, float(z[1] - z[0])
    length = fft.next_fast_len(2 * size, real=True)  # kernels reach at most size - 1: no wrap-around
    lik_spectrum = fft.rfft(lik, length, axis=1)
    log_post = -0.5 * (z[:, None] / priors[0]) ** 2 - 0.5 * (taus[None, :] / priors[1]) ** 2
    suspect = np.zeros(log_post.shape, dtype=bool)
    spectral, direct, top = np.zeros_like(lik_spectrum), np.zeros_like(lik), -np.inf
    tau_weights = _trapezoid_weights(taus)
    for j, tau in enumerate(taus):
        weights = _weights(float(tau), step, size)
        short = exact or weights.size <= _DIRECT_MAX
        if short:
            marginal = _direct(lik, weights)
        else:
            circular = np.zeros(length)
            circular[np.arange(-(weights.size // 2), weights.size // 2 + 1)] = weights
            kernel = fft.rfft(circular)
            marginal = fft.irfft(lik_spectrum * kernel, length, axis=1)[:, :size]
            suspect[:, j] = np.any(marginal < _FFT_NOISE, axis=0)
        log_marginal = np.log(np.maximum(marginal, _FLOOR))
        log_post[:, j] += log_marginal.sum(axis=0)
        if mix:
            if log_post[:, j].max() > top:
                rescale = math.exp(top - log_post[:, j].max()) if math.isfinite(top) else 0.0
                spectral, direct, top = spectral * rescale, direct * rescale, float(log_post[:, j].max())
            ratio = np.exp(np.minimum(log_post[:, j] - top - log_marginal, 600.0)) * tau_weights[j]
            if short:
                direct += _direct(ratio, weights)
            else:
                spectral += fft.rfft(ratio, length, axis=1) * kernel
    if not mix:
        return log_post, None, suspect
    masses = np.maximum((fft.irfft(spectral, length, axis=1)[:, :size] + direct) * lik, 0.0)
    return log_post, masses / masses.sum(axis=1, keepdims=True), suspect


def _fit(groups: Sequence[GroupInput], mu_prior_sd: float,
         tau_prior_scale: float) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Grids placed where the posterior is (see the module docstring), and the posterior on them."""
    centres, ses = _centres(groups)
    widen, top, count, z, lik = 1.0, 6.0 * tau_prior_scale + float(np.ptp(centres)), _COARSE_TAUS, None, None
    exact = False
    for _ in range(_MAX_PASSES):
        if z is None:
            z = _z_grid(centres, ses, mu_prior_sd, widen)
            log_lik = np.vstack([log_likelihood_kernel(np.tanh(z), g.n, g.r, one_minus_abs_r=g.one_minus_abs_r)
                                 for g in groups])
            lik = np.exp(log_lik - log_lik.max(axis=1, keepdims=True))
        taus = top * np.linspace(0.0, 1.0, count) ** 2
        log_post, masses, suspect = _log_posterior(lik, z, taus, (mu_prior_sd, tau_prior_scale),
                                                   mix=count == _FINE_TAUS, exact=exact)
        cells = np.exp(log_post - log_post.max())
        mu_side, tau_side = special.logsumexp(log_post, axis=1), special.logsumexp(log_post, axis=0)
        last = int(np.nonzero(tau_side > tau_side.max() - _LOG_DROP)[0][-1])
        if max(mu_side[0], mu_side[-1]) > mu_side.max() - _LOG_DROP and (z[0] > -_Z_LIMIT or z[-1] < _Z_LIMIT):
            widen, z = widen * 1.5, None
        elif last == count - 1:
            top *= 2.0
        elif taus[last + 1] < 0.5 * top:
            top = float(taus[last + 1])
        elif not exact and cells[suspect].sum() > 1e-6 * cells.sum():  # priors force pooling the data deny
            exact = True
        elif count == _COARSE_TAUS:
            count = _FINE_TAUS
        else:
            return z, taus, log_post, masses
    raise RuntimeError("partial pooling: the grids did not settle")  # pragma: no cover


def _cdf(grid: np.ndarray, density: np.ndarray) -> tuple[np.ndarray, float]:
    """The CDF at the nodes by the cumulative Simpson rule (fourth order on smooth densities), and the total."""
    running = np.maximum.accumulate(np.maximum(integrate.cumulative_simpson(density, x=grid, initial=0.0), 0.0))
    return running / running[-1], float(running[-1])


def _quantiles(grid: np.ndarray, density: np.ndarray, qs: Sequence[float]) -> np.ndarray:
    cdf, _ = _cdf(grid, density)
    rising = np.concatenate(([True], np.diff(cdf) > 1e-13))  # the inverse needs finite slopes
    return interpolate.PchipInterpolator(cdf[rising], grid[rising])(qs)


def _interval(grid: np.ndarray, density: np.ndarray, mass: float,
              scale: Callable[[np.ndarray], np.ndarray]) -> tuple[Interval, float]:
    """Summary of ``scale(x)`` for x with this density on the grid, and P(x > 0)."""
    median, lower, upper = scale(_quantiles(grid, density, [0.5, 0.5 * (1.0 - mass), 0.5 * (1.0 + mass)]))
    cdf, total = _cdf(grid, density)
    below = float(grid[-1] <= 0.0)
    if grid[0] < 0.0 < grid[-1]:
        below = float(np.clip(interpolate.CubicHermiteSpline(grid, cdf, density / total)(0.0), 0.0, 1.0))
    mean = integrate.simpson(scale(grid) * density, x=grid) / total
    return Interval(median=float(median), lower=float(lower), upper=float(upper), mean=float(mean)), 1.0 - below


def _pooled_group(group: GroupInput, z: np.ndarray, masses: np.ndarray, mass: float) -> PooledGroup:
    keep = np.nonzero(masses > masses.max() * 1e-15)[0]
    z, masses = z[keep[0]:keep[-1] + 1], masses[keep[0]:keep[-1] + 1]
    interval, p_positive = _interval(z, masses, mass, np.tanh)
    grid, density = np.tanh(z), masses * np.cosh(z) ** 2  # d rho = dz / cosh(z)^2
    increasing = np.concatenate(([True], np.diff(grid) > 0.0))  # guards the far ends, where tanh rounds
    grid, density = grid[increasing], density[increasing]
    return PooledGroup(label=group.label, n=int(group.n), rho=interval, p_positive=p_positive, grid=grid,
                       density=density / np.trapezoid(density, grid))


def partial_pooling(groups: Sequence[GroupInput], credible_mass: float, *, mu_prior_sd: float = MU_PRIOR_SD,
                    tau_prior_scale: float = TAU_PRIOR_SCALE) -> PartialPooling:
    """Partially pooled posteriors of the groups' correlations, of their mean and of their spread.

    See the module docstring for the model. Raises ValueError for fewer than 2 groups, a group with n < 4
    or |r| >= 1, a credible mass outside (0, 1) or a prior scale that is not positive and finite.
    """
    if not 0.0 < float(credible_mass) < 1.0:
        raise ValueError(f"credible_mass must lie strictly between 0 and 1, got {credible_mass!r}")
    for name, value in (("mu_prior_sd", mu_prior_sd), ("tau_prior_scale", tau_prior_scale)):
        if not (math.isfinite(value) and value > 0.0):
            raise ValueError(f"{name} must be a positive finite number, got {value!r}")
    z, taus, log_post, masses = _fit(groups, float(mu_prior_sd), float(tau_prior_scale))
    cells = np.exp(log_post - log_post.max())
    mean_rho, p_mean_positive = _interval(z, cells @ _trapezoid_weights(taus), credible_mass, np.tanh)
    density = cells.sum(axis=0) / np.trapezoid(cells.sum(axis=0), taus)
    spread, _ = _interval(taus, density, credible_mass, np.asarray)
    lower_90, upper_90 = _quantiles(taus, density, [0.5 * (1.0 - WORDS_MASS), 0.5 * (1.0 + WORDS_MASS)])
    return PartialPooling(
        groups=tuple(_pooled_group(g, z, m, credible_mass) for g, m in zip(groups, masses, strict=True)),
        mean_rho=mean_rho, p_mean_positive=p_mean_positive, spread=spread, spread_grid=taus,
        spread_density=density, spread_words=spread_words(float(upper_90), float(lower_90)),
        credible_mass=float(credible_mass), mu_prior_sd=float(mu_prior_sd), tau_prior_scale=float(tau_prior_scale))


def spread_words(upper_90: float, lower_90: float) -> str:
    """"differ little" when the 90% upper bound of tau is below SMALL_SPREAD, "differ clearly" when the 90%
    lower bound is above it, otherwise "cannot tell"."""
    if not (0.0 <= lower_90 <= upper_90 < math.inf):
        raise ValueError(f"need 0 <= lower_90 <= upper_90 < inf, got {lower_90!r} and {upper_90!r}")
    if upper_90 < SMALL_SPREAD:
        return "differ little"
    return "differ clearly" if lower_90 > SMALL_SPREAD else "cannot tell"


def spread_sentence(pooling: PartialPooling, noun: str = "groups") -> str:
    """One plain-text sentence on the spread of the groups' correlations (``noun`` is only interpolated)."""
    lower, median, upper = _quantiles(pooling.spread_grid, pooling.spread_density,
                                      [0.5 * (1.0 - WORDS_MASS), 0.5, 0.5 * (1.0 + WORDS_MASS)])
    spread = "the spread of their correlations on Fisher's z scale"
    words = spread_words(float(upper), float(lower))
    if words == "cannot tell":
        return (f"The data cannot tell whether the {noun} differ: {spread} lies between {lower:.2g} and "
                f"{upper:.2g} with {WORDS_MASS:.0%} probability (median {median:.2g}).")
    side = "below" if words == "differ little" else "above"
    return (f"The {noun} {words}: {spread} is {side} {SMALL_SPREAD:g} with {WORDS_MASS:.0%} probability "
            f"(median {median:.2g}).")
