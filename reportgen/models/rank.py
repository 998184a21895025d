"""Bayesian rank correlation from Kendall's tau (van Doorn, Ly, Marsman & Wagenmakers 2018).

Following van Doorn, Ly, Marsman & Wagenmakers (2018, "Bayesian inference for Kendall's rank
correlation coefficient", *The American Statistician* 72(4)), the data enter only through the
standardised statistic ``T* = S / sqrt(Var0(S))``, where ``S`` is the number of concordant minus
discordant pairs and ``Var0(S)`` its variance when the two columns are independent. ``T*`` is taken
to be normal with unit variance and mean ``tau * (n(n-1)/2) / sqrt(Var0(S))``, and the posterior of
tau is ``prior(tau) N(T* | mean(tau), 1)`` normalised by 1-D quadrature on [-1, 1].

Ties. ``Var0(S)`` is the tie-corrected null variance of Kendall (1970, *Rank Correlation Methods*,
ch. 4), so ordinal data with heavy ties work. Without ties the mean is
``3 tau sqrt(n(n-1) / (2(2n+5))) ~ (3/2) tau sqrt(n)``, the paper's approximation. With ties we use
the multiplier ``sqrt((n0 - n1)(n0 - n2)) / sqrt(Var0(S))`` (n0 = n(n-1)/2, n1 and n2 the tied pairs
of each column), so the posterior centres on tau-b, the tie-adjusted coefficient: our tie-aware
reading of their approximation. (Centred on S / n0, tau-a, heavy ties would pull the posterior far
below tau-b: measured 0.26 against 0.38 on 5 x 3 rating scales.)

Scale. The headline correlation is on Pearson's scale, ``rho = sin(pi tau / 2)`` (Greiner's
relation, exact for bivariate-normal and normal-copula data; Kruskal 1958, *JASA* 53). The prior is
a Beta(a, b) stretched to [-1, 1] on rho; on tau it becomes, with ``phi = pi (1 + tau) / 4``,
``(pi/2) sin(phi)^(2a-1) cos(phi)^(2b-1) / B(a, b)`` (the Jacobian ``(pi/2) cos(pi tau/2)``).

Quadrature. The integral runs in ``w = atanh(tau)`` on a uniform grid placed where the log integrand
is within 50 units of its maximum. In ``w`` the integrand behaves like ``exp(4a w)`` as ``w -> -inf``
and ``exp(-4b w)`` as ``w -> +inf``, so it is smooth and finite on the real line even when the prior
density is infinite at an end (a or b below 1/2 on tau, below 1 on rho), and the trapezoidal rule
converges geometrically. Measured against scipy's quad (n = 6 to 200, shapes 0.05 to 3): log BF10
and the mean agree to about 1e-12; probabilities (4th-order rule per interval) to about 1e-7, 1e-5 at worst.
Everything is computed from ``log((1 -/+ tau)/2)`` (log-expit of ``-/+2w``), never from ``1 - tau``.
The grid stops at ``|w| = 120`` (``1 - |rho|`` near 1e-208); prior mass lost beyond that is below
``exp(-480 min(a, b))``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np
from numpy.typing import ArrayLike
from scipy import interpolate, optimize, special, stats

__all__ = ["KendallScore", "RankPosterior", "kendall_score", "log_tau_prior", "posterior_from_score", "rank_posterior"]

MIN_PAIRS = 4
_LOG_DROP = 50.0  # the grid covers where the log integrand is above its max minus this
_INITIAL_HALF_WIDTH = 60.0  # first grid: this many likelihood SDs of tau either side of S / (n(n-1)/2)
_W_LIMIT = 120.0  # never place grid points beyond |atanh(tau)| = this
_MAX_GRID_PASSES = 24


@dataclass(frozen=True)
class KendallScore:
    """Kendall's score of a sample: ``S`` and its tie-corrected null variance (Kendall 1970)."""

    n: int
    score: int  # concordant minus discordant pairs
    null_variance: float
    tau_b: float
    # sqrt((n0 - n1)(n0 - n2)): S divided by this is tau-b (n0 = n(n-1)/2; n1, n2 tied pairs in x, y)
    untied_pairs: float = float("nan")

    @property
    def statistic(self) -> float:
        """``T* = S / sqrt(Var0(S))``, approximately standard normal under independence."""
        return self.score / math.sqrt(self.null_variance)

    @property
    def slope(self) -> float:
        """``E[T* | tau] / tau = sqrt((n0 - n1)(n0 - n2)) / sqrt(Var0(S))``: the likelihood centres on tau-b.

        Without ties this is ``(n(n-1)/2) / sqrt(Var0(S))``, the paper's multiplier.
        """
        pairs = self.untied_pairs if math.isfinite(self.untied_pairs) else 0.5 * self.n * (self.n - 1)
        return pairs / math.sqrt(self.null_variance)


def _tie_sums(values: np.ndarray) -> tuple[float, float, float]:
    """``sum t(t-1)``, ``sum t(t-1)(t-2)`` and ``sum t(t-1)(2t+5)`` over groups of t tied values."""
    counts = np.unique(values, return_counts=True)[1]
    t = counts[counts > 1].astype(float)  # float: t^3 would overflow int64 beyond n ~ 2e6
    pairs = t * (t - 1.0)
    return float(pairs.sum()), float((pairs * (t - 2.0)).sum()), float((pairs * (2.0 * t + 5.0)).sum())


def kendall_score(x: ArrayLike, y: ArrayLike) -> KendallScore:
    """Kendall's S, its null variance with ties and tau-b, in O(n log n).

    tau-b comes from ``scipy.stats.kendalltau``; S is recovered exactly from it as
    ``tau_b sqrt((n0 - n1)(n0 - n2))`` rounded to an integer (``n0 = n(n-1)/2``, ``n1``, ``n2`` the
    tied pairs in x and y). ``Var0(S)`` is Kendall's (1970) formula with ties in both rankings.

    Raises
    ------
    ValueError
        For arrays of different lengths, non-finite values, fewer than 4 pairs or a constant column.
    """
    xs, ys = np.asarray(x, dtype=float).ravel(), np.asarray(y, dtype=float).ravel()
    if xs.size != ys.size:
        raise ValueError(f"x and y must have the same length, got {xs.size} and {ys.size}")
    if xs.size < MIN_PAIRS:
        raise ValueError(f"a rank correlation needs at least {MIN_PAIRS} pairs, got {xs.size}")
    if not (np.all(np.isfinite(xs)) and np.all(np.isfinite(ys))):
        raise ValueError("x and y must be finite numbers (drop incomplete pairs first)")
    if np.all(xs == xs[0]) or np.all(ys == ys[0]):
        raise ValueError("a rank correlation needs two or more distinct values in each column")
    n = xs.size
    x_pairs, x_triples, x_var = _tie_sums(xs)
    y_pairs, y_triples, y_var = _tie_sums(ys)
    all_pairs = 0.5 * n * (n - 1.0)
    tau_b = float(stats.kendalltau(xs, ys, method="asymptotic").statistic)
    untied = math.sqrt(all_pairs - 0.5 * x_pairs) * math.sqrt(all_pairs - 0.5 * y_pairs)
    score = round(tau_b * untied)
    null_variance = (
        (n * (n - 1.0) * (2.0 * n + 5.0) - x_var - y_var) / 18.0
        + x_triples * y_triples / (9.0 * n * (n - 1.0) * (n - 2.0))
        + x_pairs * y_pairs / (2.0 * n * (n - 1.0))
    )
    return KendallScore(n=n, score=int(score), null_variance=null_variance, tau_b=tau_b, untied_pairs=untied)


def _log_sin_quarter_pi(log_half_gap: np.ndarray) -> np.ndarray:
    """``log sin(pi g / 4)`` for ``g = 1 -/+ tau`` in [0, 2], from ``log(g / 2)`` (no underflow)."""
    return math.log(math.pi / 2.0) + log_half_gap + np.log(np.sinc(0.5 * np.exp(log_half_gap)))


def _log_prior_parts(log_half_plus: np.ndarray, log_half_minus: np.ndarray, a: float, b: float) -> np.ndarray:
    """Log prior density of tau from ``log((1 + tau)/2)`` and ``log((1 - tau)/2)``."""
    return (
        math.log(math.pi / 2.0)
        - special.betaln(a, b)
        + (2.0 * a - 1.0) * _log_sin_quarter_pi(log_half_plus)
        + (2.0 * b - 1.0) * _log_sin_quarter_pi(log_half_minus)
    )


def _check_shape(value: float, name: str) -> float:
    out = float(value)
    if not (math.isfinite(out) and out > 0.0):
        raise ValueError(f"{name} must be a positive finite number, got {value!r}")
    return out


def log_tau_prior(tau: ArrayLike, a: float, b: float) -> np.ndarray:
    """Log density of tau when ``rho = sin(pi tau / 2)`` has a stretched Beta(a, b) prior on [-1, 1]."""
    values = np.asarray(tau, dtype=float)
    with np.errstate(divide="ignore"):
        parts = _log_prior_parts(np.log1p(values) - math.log(2.0), np.log1p(-values) - math.log(2.0),
                                 _check_shape(a, "a"), _check_shape(b, "b"))
    return np.where(np.abs(values) <= 1.0, parts, -np.inf)


def _log_ends(w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``log((1 + tau)/2)`` and ``log((1 - tau)/2)`` at ``tau = tanh(w)``."""
    return special.log_expit(2.0 * w), special.log_expit(-2.0 * w)


def _log_drho_dw(w: np.ndarray) -> np.ndarray:
    """``log(d rho / d w) = log[(pi/2) cos(pi tau/2) (1 - tau^2)]``, with ``cos(pi tau/2) = 2 sin(phi) cos(phi)``."""
    plus, minus = _log_ends(w)
    return (math.log(math.pi) + 2.0 * math.log(2.0) + plus + minus
            + _log_sin_quarter_pi(plus) + _log_sin_quarter_pi(minus))


def _log_integrand(w: np.ndarray, score: KendallScore, a: float, b: float) -> np.ndarray:
    """log[prior(tau) N(T* | c tau, 1) / N(T* | 0, 1) (1 - tau^2)] at tau = tanh(w)."""
    plus, minus = _log_ends(w)
    tau = np.tanh(w)
    c = score.slope
    log_likelihood_ratio = c * tau * (score.statistic - 0.5 * c * tau)
    return _log_prior_parts(plus, minus, a, b) + log_likelihood_ratio + 2.0 * math.log(2.0) + plus + minus


def _adaptive_grid(score: KendallScore, a: float, b: float, size: int) -> tuple[np.ndarray, np.ndarray]:
    """Uniform grid in w over the region where the log integrand is within _LOG_DROP of its maximum."""
    centre_tau = float(np.clip(score.statistic / score.slope, -1.0 + 1e-12, 1.0 - 1e-12))
    half = _INITIAL_HALF_WIDTH / (score.slope * (1.0 - centre_tau**2))
    centre = math.atanh(centre_tau)
    lo, hi = max(centre - half, -_W_LIMIT), min(centre + half, _W_LIMIT)
    for _ in range(_MAX_GRID_PASSES):
        grid = np.linspace(lo, hi, size)
        log_f = _log_integrand(grid, score, a, b)
        kept = np.flatnonzero(log_f >= log_f.max() - _LOG_DROP)
        first, last = int(kept[0]), int(kept[-1])
        grow_lo, grow_hi = first == 0 and lo > -_W_LIMIT, last == size - 1 and hi < _W_LIMIT
        if grow_lo or grow_hi:
            width = hi - lo
            lo = max(lo - width, -_W_LIMIT) if grow_lo else lo
            hi = min(hi + width, _W_LIMIT) if grow_hi else hi
            continue
        if last - first >= size // 2:
            break
        lo, hi = float(grid[max(first - 1, 0)]), float(grid[min(last + 1, size - 1)])
    return grid, log_f


@dataclass(frozen=True, eq=False)
class RankPosterior:
    """Posterior of a rank correlation, reported on Pearson's scale ``rho = sin(pi tau / 2)``.

    Usable wherever an ``exact.ExactPosterior`` is (same summary methods). ``w`` is the uniform grid of
    ``atanh(tau)`` the quadrature runs on; ``rho`` is increasing (values within 1e-16 of +/-1 round to
    +/-1) and ``density`` is the normalised posterior density of rho there.
    """

    n: int
    tau_hat: float  # Kendall's tau-b of the data
    statistic: float  # T* = S / sqrt(Var0(S))
    prior_a: float
    prior_b: float
    w: np.ndarray
    tau: np.ndarray
    rho: np.ndarray
    density: np.ndarray
    w_density: np.ndarray
    log_bf10: float  # log BF of the prior model against tau = 0 (marginal likelihoods of T*)

    def _integral(self, values: np.ndarray) -> float:
        return float(self.w[1] - self.w[0]) * float(np.sum(values) - 0.5 * (values[0] + values[-1]))

    @cached_property
    def _splines(self) -> tuple[interpolate.CubicHermiteSpline, interpolate.CubicHermiteSpline]:
        """Left and right cumulative probabilities in w, from a 4th-order rule on each interval."""
        f, h = self.w_density, float(self.w[1] - self.w[0])
        pieces = np.empty(f.size - 1)
        pieces[1:-1] = h / 24.0 * (-f[:-3] + 13.0 * f[1:-2] + 13.0 * f[2:-1] - f[3:])
        pieces[0] = h / 12.0 * (5.0 * f[0] + 8.0 * f[1] - f[2])
        pieces[-1] = h / 12.0 * (-f[-3] + 8.0 * f[-2] + 5.0 * f[-1])
        pieces = np.where(pieces > 0.0, pieces, 0.5 * h * (f[:-1] + f[1:]))
        total = float(pieces.sum())
        left = np.concatenate(([0.0], np.cumsum(pieces))) / total
        right = np.concatenate((np.cumsum(pieces[::-1])[::-1], [0.0])) / total
        return (interpolate.CubicHermiteSpline(self.w, left, f / total),
                interpolate.CubicHermiteSpline(self.w, right, -f / total))

    @cached_property
    def _log_w_density_spline(self) -> interpolate.CubicSpline:
        return interpolate.CubicSpline(self.w, np.log(np.maximum(self.w_density, np.finfo(float).tiny)))

    def _probability(self, x: ArrayLike, right: bool) -> float | np.ndarray:
        values = np.asarray(x, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            w = np.arctanh(2.0 / math.pi * np.arcsin(np.clip(values, -1.0, 1.0)))
        w = np.where(values >= 1.0, np.inf, np.where(values <= -1.0, -np.inf, w))  # arcsin(1) may round below
        inside = self._splines[int(right)](np.clip(w, self.w[0], self.w[-1]))
        below, above = (1.0, 0.0) if right else (0.0, 1.0)
        out = np.where(w <= self.w[0], below, np.where(w >= self.w[-1], above, np.clip(inside, 0.0, 1.0)))
        out = np.where(np.isnan(values), np.nan, out)
        return float(out) if values.ndim == 0 else out

    def _quantile_w(self, q: float) -> float:
        """w-quantile for 0 < q < 1, searched in the cumulative spline of the nearer tail."""
        right = q > 0.5
        spline, target = self._splines[int(right)], (1.0 - q if right else q)
        knots = -spline.c[-1] if right else spline.c[-1]
        i = int(np.clip(np.searchsorted(knots, -target if right else target, side="right") - 1, 0, self.w.size - 2))
        lo, hi = float(self.w[i]), float(self.w[i + 1])
        f_lo, f_hi = float(spline(lo)) - target, float(spline(hi)) - target
        if f_lo * f_hi >= 0.0:
            return lo if abs(f_lo) <= abs(f_hi) else hi
        return float(optimize.brentq(lambda t: float(spline(t)) - target, lo, hi, xtol=1e-15, rtol=1e-15))

    def _rho_of_w(self, w: float) -> float:
        return math.sin(0.5 * math.pi * math.tanh(w))

    @property
    def mean(self) -> float:
        """Posterior mean of rho."""
        return self._integral(self.rho * self.w_density)

    @property
    def sd(self) -> float:
        """Posterior standard deviation of rho."""
        return math.sqrt(self._integral((self.rho - self.mean) ** 2 * self.w_density))

    @property
    def median(self) -> float:
        """Posterior median of rho."""
        return self.quantile(0.5)

    @property
    def tau_median(self) -> float:
        """Posterior median of Kendall's tau."""
        return self.tau_quantile(0.5)

    def cdf(self, x: ArrayLike) -> float | np.ndarray:
        """Posterior probability that rho <= x (float for scalar input)."""
        return self._probability(x, right=False)

    def sf(self, x: ArrayLike) -> float | np.ndarray:
        """Posterior probability that rho > x, accurate also when it is tiny."""
        return self._probability(x, right=True)

    def _check_probability(self, q: float) -> float:
        p = float(q)
        if not 0.0 <= p <= 1.0:
            raise ValueError(f"quantile probabilities must lie in [0, 1], got {q!r}")
        return p

    def quantile(self, q: float) -> float:
        """Posterior quantile of rho; 0 gives -1 and 1 gives 1."""
        p = self._check_probability(q)
        return -1.0 if p == 0.0 else 1.0 if p == 1.0 else self._rho_of_w(self._quantile_w(p))

    def tau_quantile(self, q: float) -> float:
        """Posterior quantile of Kendall's tau; 0 gives -1 and 1 gives 1."""
        p = self._check_probability(q)
        return -1.0 if p == 0.0 else 1.0 if p == 1.0 else math.tanh(self._quantile_w(p))

    def prob_below(self, t: float) -> float:
        """Posterior probability that rho < t."""
        return float(self.cdf(float(t)))

    def prob_above(self, t: float) -> float:
        """Posterior probability that rho > t."""
        return float(self.sf(float(t)))

    def prob_between(self, lower: float, upper: float) -> float:
        """Posterior probability that ``lower < rho < upper``."""
        lower, upper = float(lower), float(upper)
        if lower > upper:
            raise ValueError(f"lower ({lower}) must not exceed upper ({upper})")
        below_lower = self.prob_below(lower)
        if below_lower <= 0.5:
            return max(self.prob_below(upper) - below_lower, 0.0)
        return max(self.prob_above(lower) - self.prob_above(upper), 0.0)

    def hdi(self, mass: float = 0.95) -> tuple[float, float]:
        """Shortest interval of rho holding ``mass``: equal-density ends, else a direct search."""
        mass = float(mass)
        if not 0.0 < mass < 1.0:
            raise ValueError(f"mass must be strictly between 0 and 1, got {mass!r}")
        spare = 1.0 - mass

        def ends(alpha: float) -> tuple[float, float]:
            lo = float(self.w[0]) if alpha <= 0.0 else self._quantile_w(alpha)
            hi = float(self.w[-1]) if alpha + mass >= 1.0 else self._quantile_w(alpha + mass)
            return lo, hi

        def log_rho_density(w: float) -> float:
            return float(self._log_w_density_spline(w) - _log_drho_dw(np.array([w]))[0])

        def density_gap(alpha: float) -> float:
            lo, hi = ends(alpha)
            return log_rho_density(lo) - log_rho_density(hi)

        if density_gap(0.0) < 0.0 < density_gap(spare):
            alpha = optimize.brentq(density_gap, 0.0, spare, xtol=1e-15, rtol=1e-14)
        else:  # an end of [-1, 1] is inside the interval (e.g. a prior shape below 1)
            def width(alpha: float) -> float:
                lo, hi = ends(alpha)
                return self._rho_of_w(hi) - self._rho_of_w(lo)

            alpha = optimize.minimize_scalar(width, bounds=(0.0, spare), method="bounded", options={"xatol": 1e-12}).x
        lo, hi = ends(float(alpha))
        return self._rho_of_w(lo), self._rho_of_w(hi)


def posterior_from_score(score: KendallScore, prior_a: float = 1.0, prior_b: float = 1.0,
                         grid_size: int = 4001) -> RankPosterior:
    """Posterior of tau (reported on rho's scale) given Kendall's score, by quadrature in atanh(tau)."""
    a, b = _check_shape(prior_a, "prior_a"), _check_shape(prior_b, "prior_b")
    if int(grid_size) != grid_size or grid_size < 101:
        raise ValueError("grid_size must be an integer of at least 101")
    w, log_f = _adaptive_grid(score, a, b, int(grid_size))
    peak = float(log_f.max())
    scaled = np.exp(log_f - peak)
    log_norm_rel = math.log(float(w[1] - w[0]) * (float(np.sum(scaled)) - 0.5 * (scaled[0] + scaled[-1])))
    log_w_density = log_f - peak - log_norm_rel
    arrays = {
        "w": w,
        "tau": np.tanh(w),
        "rho": np.sin(0.5 * math.pi * np.tanh(w)),
        "density": np.exp(log_w_density - _log_drho_dw(w)),
        "w_density": np.exp(log_w_density),
    }
    for values in arrays.values():
        values.setflags(write=False)
    return RankPosterior(n=score.n, tau_hat=score.tau_b, statistic=score.statistic, prior_a=a, prior_b=b,
                         log_bf10=peak + log_norm_rel, **arrays)


def rank_posterior(x: np.ndarray, y: np.ndarray, prior_a: float = 1.0, prior_b: float = 1.0) -> RankPosterior:
    """Posterior of the rank correlation of ``x`` and ``y`` (van Doorn et al. 2018) on Pearson's scale.

    ``prior_a``, ``prior_b`` are the shapes of the stretched Beta prior on ``rho = sin(pi tau / 2)``
    (``a`` weighs rho near +1); shapes below 1 are fine. See the module docstring for the method.
    """
    return posterior_from_score(kendall_score(x, y), prior_a, prior_b)
