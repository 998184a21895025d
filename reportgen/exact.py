"""Exact marginal posterior of a Pearson correlation for bivariate-normal data.

The data enter only through ``(n, r)``: the number of complete pairs and the
sample Pearson correlation (with, near ``|r| = 1``, the complement ``1 - |r|``
computed from the residuals, because the rounded ``r`` has lost it). The means
get flat priors, each standard deviation either Jeffreys' reference prior
``1/sigma`` (the default) or a flat one, and the correlation ``rho`` a Beta(a, b)
distribution stretched to [-1, 1].

Integrating the two means and the two standard deviations out of the
bivariate-normal likelihood leaves the marginal likelihood kernel (Jeffreys
1961, *Theory of Probability*, ch. 5; Ly, Marsman & Wagenmakers 2018,
*Statistica Neerlandica* 72(1))::

    h(rho | n, r) = (1 - rho^2)^(m - (n - 1)/2) * I_m(rho * r),
    I_m(x) = integral_0^inf (cosh w - x)^(-m) dw
           = sqrt(pi/2) * Gamma(m) / Gamma(m + 1/2) * (1 - x)^(-(m - 1/2))
             * 2F1(1/2, 1/2; m + 1/2; (1 + x)/2),

with ``m = n - 1`` for Jeffreys' priors on the standard deviations (exponent
``(n - 1)/2``) and ``m = n - 2`` for flat ones (exponent ``(n - 3)/2``).

Derivation, for the prior ``(sigma1 sigma2)^(-k)`` (``k = 1`` Jeffreys',
``k = 0`` flat). With ``S`` the matrix of centred sums of squares and products
(``Sxx``, ``Sxy``, ``Syy``), integrating the means against a flat prior gives
the Gaussian integral ``2 pi |Sigma|^(1/2) / n``, so::

    p(data | Sigma) = (2 pi)^(-(n-1)) n^(-1) |Sigma|^(-(n-1)/2) exp(-tr(Sigma^-1 S) / 2),
    |Sigma| = sigma1^2 sigma2^2 (1 - rho^2),
    tr(Sigma^-1 S) = (Sxx/sigma1^2 - 2 rho Sxy/(sigma1 sigma2) + Syy/sigma2^2) / (1 - rho^2).

Substituting ``u = sqrt(Sxx)/sigma1`` and ``v = sqrt(Syy)/sigma2`` turns
``(sigma1 sigma2)^(-(n-1)-k) d sigma1 d sigma2`` into
``(Sxx Syy)^(-(p+1)/2) (u v)^p du dv`` with ``p = n - 3 + k``, and the exponent
into ``-(u^2 - 2 rho r u v + v^2) / (2 (1 - rho^2))``. Then ``u = sqrt(l) e^(w/2)``,
``v = sqrt(l) e^(-w/2)`` (``du dv = dl dw / 2``, ``u v = l``, ``u^2 + v^2 = 2 l cosh w``)
and the Gamma integral over ``l`` give::

    integral integral (u v)^p exp(...) du dv = Gamma(p + 1) (1 - rho^2)^(p + 1) I_(p+1)(rho r),

so with ``m = p + 1 = n - 2 + k``::

    p(data | rho) = (2 pi)^(-(n-1)) Gamma(m) / n * (Sxx Syy)^(-m/2)
                    * (1 - rho^2)^(m - (n-1)/2) * I_m(rho r).

The ``u, v`` integral converges for ``p > -1``, that is ``n >= 3`` with flat
priors; the closed form below is used for ``m >= 2``, so both priors need
``n >= 4`` here. The factor in front does not depend on ``rho`` and cancels
from the posterior and from ``BF10 = integral prior(rho) h(rho) drho / h(0)``
(H0: ``rho = 0`` with the same priors on the rest).

Numerical route
---------------
Everything is done in log space. ``2F1(1/2, 1/2; m + 1/2; z)`` lies between 1
and about ``1 + 1/(4m)``, so only its logarithm needs care:

* its Gauss series has positive terms only and converges quickly when
  ``z <= 3/4`` or ``m >= 15``; it is summed until a rigorous bound on the
  remaining tail is below ``1e-17`` of the sum;
* for ``m <= 14`` and ``z > 3/4`` (slow convergence near ``z = 1``) the
  connection formula ``z -> 1 - z`` (Abramowitz & Stegun 15.3.6, simplified
  with Euler's transformation 15.3.3 and ``Gamma(1/2 + m) Gamma(1/2 - m) =
  (-1)^m pi``) is used instead, so every series runs in an argument ``<= 1/4``.

The posterior itself is integrated in ``zeta = atanh(rho)``, where the
integrand (prior times kernel times the Jacobian ``1 - rho^2``) is smooth on
the whole real line with exponentially decaying tails, also when the prior
density is infinite at ``rho = -1`` or ``rho = 1``. On such integrands the
trapezoidal rule on a uniform grid converges geometrically. The grid is
placed adaptively where the log density is within 50 units of its maximum,
starting from ``atanh(r) +/- 60 / sqrt(n - 3)``, so it follows the posterior
from ``n = 4`` (where it covers most of (-1, 1)) to ``n = 10**7`` (where the
posterior standard deviation is about ``(1 - r^2) / sqrt(n)``). On the grid
the O(n)-sized power terms ``(m - (n-1)/2) log(1 - rho^2) - (m - 1/2) log(1 - rho r)``
are evaluated as differences from their value at ``atanh(r)``, formed
directly from ``atanh(rho) - atanh(r)``, so the normalised density keeps
full relative precision even at ``n = 10**7``.

Near ``|r| = 1`` everything that depends on the closeness of ``r`` to -+1 is
formed from ``c = 1 - |r|`` as given by the caller: ``atanh(r) =
sign(r) log1p(2 |r| / c) / 2`` and ``1 -/+ rho r = c + |r| (1 -/+ rho)`` (the
sign chosen with ``r``'s), never from ``1 - |r|`` of a rounded ``r``. The grid
may then sit far out in ``zeta`` (``atanh(r)`` is about 115 at ``c = 1e-100``),
which it is allowed up to ``|zeta| = 200``. Tail and interval probabilities add
per-interval integrals of a 6th-order rule; the mean and the Bayes factor use
the trapezoidal rule on the whole grid.

Summaries are read off that one grid: the cumulative and survival curves are
cubic Hermite interpolants of the summed intervals (the density as slopes),
quantiles are their crossings found by a safeguarded Newton iteration on all
requested probabilities at once, quantiles of ``rho^2`` are crossings of
``P(|zeta| <= u)`` formed from the same curve, and the HDI solves its two
equations (mass inside, equal end densities) by Newton's method on both ends.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable
from dataclasses import dataclass
from functools import cached_property

import numpy as np
from numpy.typing import ArrayLike
from scipy import interpolate, optimize, special, stats

from reportgen.piecewise import GridCubic

__all__ = [
    "MIN_ONE_MINUS_ABS_R",
    "MIN_PAIRS",
    "SD_PRIORS",
    "ExactPosterior",
    "exact_posterior",
    "fisher_z_interval",
    "log_bayes_factor_10",
    "log_likelihood_kernel",
    "log_stretched_beta_pdf",
]

MIN_PAIRS = 4
"""Smallest number of complete pairs accepted."""

SD_PRIORS = ("jeffreys", "flat")
"""Priors on the two standard deviations: ``1/sigma`` each (Jeffreys') or flat."""

MIN_ONE_MINUS_ABS_R = 1e-100
"""Smallest ``1 - |r|`` honoured (given as ``one_minus_abs_r``); the grid then reaches ``|atanh(rho)|``
of about 170, inside ``_Z_MAX``."""

_SERIES_TOL = 1e-17  # bound on the neglected tail of a series, relative to its sum
_SERIES_MAX_TERMS = 100_000
_REFLECT_MAX_M = 14  # use the z -> 1 - z connection formula only for m <= this ...
_REFLECT_MIN_Z = 0.75  # ... and only for arguments above this
_LOG_DROP = 50.0  # the grid covers the region where log density > max - _LOG_DROP
_INITIAL_HALF_WIDTH = 60.0  # first grid: atanh(r) +/- this many 1/sqrt(n - 3)
_Z_LIMIT = 30.0  # the first grid stays within |atanh(rho)| <= this ...
_Z_MARGIN = 20.0  # ... or within this of atanh(r), whichever reaches further
_Z_MAX = 200.0  # never place grid points beyond |atanh(rho)| = this (1 - |rho| ~ 4e-174)
_COMPLEMENT_TOL = 1e-9  # one_minus_abs_r must agree with 1 - |r| to this (absolute)
_SD_PRIOR_K = {"jeffreys": 1, "flat": 0}  # the prior on each sd is sigma^-k
_MAX_GRID_PASSES = 16
_MIN_GRID_SIZE = 101
_GRID_CACHE_SIZE = 16  # kernel terms kept for this many grids (about 200 kB each at 4001 points)
_ABS_Z_TABLE_POINTS = 129  # brackets for the quantiles of rho^2 (Newton's method then needs a few steps)
_POSTERIOR_CACHE_SIZE = 8  # posteriors kept (about 1 MB each at 4001 points, with their summaries' curves)


# --------------------------------------------------------------------------- validation


def _check_n(n: int) -> int:
    if isinstance(n, (bool, np.bool_)):
        raise ValueError(f"n must be a whole number of complete pairs, got {n!r}")
    try:
        value = float(n)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"n must be a whole number of complete pairs, got {n!r}") from exc
    if not math.isfinite(value) or value != math.floor(value):
        raise ValueError(f"n must be a whole number of complete pairs, got {n!r}")
    if value < MIN_PAIRS:
        raise ValueError(
            f"n must be at least {MIN_PAIRS} complete pairs for the exact posterior, got {n!r}"
        )
    return int(value)


def _check_r(r: float) -> float:
    try:
        value = float(r)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"r must be a number strictly between -1 and 1, got {r!r}") from exc
    if not (-1.0 < value < 1.0):
        raise ValueError(f"r must be strictly between -1 and 1, got {r!r}")
    return value


@dataclass(frozen=True)
class _Case:
    """What the kernel needs from the data and the sd prior, checked.

    ``h(rho) = (1 - rho^2)^power * I_order(rho r)``; ``complement`` is ``1 - |r|`` (carrying the
    digits that a rounded ``r`` near +-1 has lost) and ``centre`` is ``atanh(r)``.
    """

    n: int
    r: float
    complement: float
    order: int
    power: float
    centre: float


def _check_case(n: int, r: float, one_minus_abs_r: float | None, sd_prior: str) -> _Case:
    n = _check_n(n)
    if sd_prior not in SD_PRIORS:
        raise ValueError(f"sd_prior must be one of {', '.join(repr(p) for p in SD_PRIORS)}, got {sd_prior!r}")
    if one_minus_abs_r is None:
        r = _check_r(r)
        complement = 1.0 - abs(r)  # exact for |r| >= 1/2 (Sterbenz), accurate to rounding below
        centre = math.atanh(r)
    else:
        try:
            r = float(r)
            complement = float(one_minus_abs_r)
        except (TypeError, ValueError) as exc:
            raise ValueError(f"r and one_minus_abs_r must be numbers, got {r!r} and {one_minus_abs_r!r}") from exc
        if not -1.0 <= r <= 1.0:
            raise ValueError(f"r must lie between -1 and 1 (either end allowed with one_minus_abs_r), got {r!r}")
        if not MIN_ONE_MINUS_ABS_R <= complement <= 1.0:
            raise ValueError(f"one_minus_abs_r must lie between {MIN_ONE_MINUS_ABS_R:g} and 1, got {complement!r}")
        if abs((1.0 - abs(r)) - complement) > _COMPLEMENT_TOL:
            raise ValueError(f"one_minus_abs_r = {complement!r} must agree with 1 - |r| = {1.0 - abs(r)!r} "
                             f"to {_COMPLEMENT_TOL:g}")
        # atanh|r| = log((1 + |r|) / (1 - |r|)) / 2 = log1p(2 |r| / (1 - |r|)) / 2, accurate at both ends
        centre = math.copysign(0.5 * math.log1p(2.0 * abs(r) / complement), r)
    k = _SD_PRIOR_K[sd_prior]
    order = n - 2 + k
    return _Case(n=n, r=r, complement=complement, order=order, power=order - 0.5 * (n - 1), centre=centre)


def _check_shape(value: float, name: str) -> float:
    try:
        out = float(value)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name} must be a positive number, got {value!r}") from exc
    if not (math.isfinite(out) and out > 0.0):
        raise ValueError(f"{name} must be a positive finite number, got {value!r}")
    return out


def _check_mass(mass: float) -> float:
    try:
        out = float(mass)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"mass must be a number strictly between 0 and 1, got {mass!r}") from exc
    if not (0.0 < out < 1.0):
        raise ValueError(f"mass must be strictly between 0 and 1, got {mass!r}")
    return out


def _as_output(values: np.ndarray, scalar: bool) -> float | np.ndarray:
    return float(values.reshape(-1)[0]) if scalar else values


# --------------------------------------------------------------------------- special functions


def _hyp2f1_half_series(z: np.ndarray, w: np.ndarray, c: float) -> np.ndarray:
    """Sum the Gauss series of 2F1(1/2, 1/2; c; z) for ``c > 2`` and ``0 <= z < 1``.

    ``w`` must hold ``1 - z`` (computed without cancellation by the caller).
    All terms are positive. With ``t_k`` the last term added, the ratio of
    consecutive terms is at most ``z * (j + 1) / (j + c) <= z``, so the tail is
    at most ``t_k * min(z / (1 - z), (k + 1) / (c - 2))``; the second bound is
    ``2F1(1, k + 1; k + c; 1) - 1``. Summation stops when that bound is below
    ``_SERIES_TOL`` times the partial sum.
    """
    total = np.ones_like(z)
    term = np.ones_like(z)
    if z.size == 0:
        return total
    with np.errstate(divide="ignore"):
        geometric = z / w
    for k in range(_SERIES_MAX_TERMS):
        term = term * ((k + 0.5) ** 2 / ((c + k) * (k + 1.0))) * z
        total += term
        bound = term * np.minimum(geometric, (k + 2.0) / (c - 2.0))
        if np.all(bound <= _SERIES_TOL * total):
            return total
    raise RuntimeError("hypergeometric series did not converge")  # pragma: no cover


def _connection_series(w: np.ndarray, m: int) -> np.ndarray:
    """Sum the series of 2F1(1/2, 1/2; 3/2 - m; w) for integer ``m >= 2`` and ``0 <= w <= 1/4``.

    The lower parameter is a negative half-integer, so no denominator vanishes.
    From index ``k >= m`` on, all terms have one sign and their ratio decreases
    towards ``w``, so the tail is at most ``|t_k| q / (1 - q)`` with ``q`` the
    next ratio.
    """
    total = np.ones_like(w)
    term = np.ones_like(w)
    if w.size == 0:
        return total
    lower = 1.5 - m
    for k in range(_SERIES_MAX_TERMS):
        term = term * ((k + 0.5) ** 2 / ((lower + k) * (k + 1.0))) * w
        total += term
        index = k + 1
        if index >= m:
            ratio = (index + 0.5) ** 2 / ((lower + index) * (index + 1.0)) * w
            if np.all(ratio < 1.0):
                bound = np.abs(term) * ratio / (1.0 - ratio)
                if np.all(bound <= _SERIES_TOL * np.abs(total)):
                    return total
    raise RuntimeError("hypergeometric series did not converge")  # pragma: no cover


def _log_hyp2f1_half(z: np.ndarray, w: np.ndarray, m: int) -> np.ndarray:
    """Return log 2F1(1/2, 1/2; m + 1/2; z) for integer ``m >= 3`` and ``0 <= z < 1``.

    ``w`` must hold ``1 - z`` computed without cancellation. For ``m <= 14``
    and ``z > 3/4`` the connection formula is used::

        F(z) = A_m * 2F1(1/2, 1/2; 3/2 - m; 1 - z) + (-1)^m ((1 - z) / z)^(m - 1/2) F(1 - z),
        A_m = Gamma(m + 1/2) Gamma(m - 1/2) / Gamma(m)^2,

    otherwise the Gauss series.
    """
    c = m + 0.5
    out = np.empty_like(z)
    if m <= _REFLECT_MAX_M:
        reflect = z > _REFLECT_MIN_Z
    else:
        reflect = np.zeros(z.shape, dtype=bool)
    direct = ~reflect
    out[direct] = np.log(_hyp2f1_half_series(z[direct], w[direct], c))
    if np.any(reflect):
        zr = z[reflect]
        wr = w[reflect]
        log_a = special.gammaln(m + 0.5) + special.gammaln(m - 0.5) - 2.0 * special.gammaln(m)
        first = math.exp(log_a) * _connection_series(wr, m)
        second = np.exp((m - 0.5) * np.log(wr / zr)) * _hyp2f1_half_series(wr, zr, c)
        sign = -1.0 if m % 2 else 1.0
        out[reflect] = np.log(first + sign * second)
    return out


def _log_gamma_ratio_half(m: int) -> float:
    """``log(Gamma(m + 1/2) / Gamma(m))`` without the cancellation of two large gammaln values.

    For ``m >= 100`` the Stirling-type series
    ``log(m)/2 - 1/(8m) + 1/(192 m^3) - 1/(640 m^5) + 17/(14336 m^7)`` is used,
    obtained from the Bernoulli-polynomial form of the asymptotic expansion of
    ``log Gamma(x + a)`` (cf. DLMF 5.11.8); its truncation error is below 1e-19
    there. The coefficients were re-derived and checked against exact rational
    values of ``Gamma(m + 1/2) / Gamma(m)``.
    """
    if m < 100:
        return float(special.gammaln(m + 0.5) - special.gammaln(m))
    x = float(m)
    inv = 1.0 / x
    inv2 = inv * inv
    series = inv * (-1 / 8 + inv2 * (1 / 192 + inv2 * (-1 / 640 + inv2 * 17 / 14336)))
    return 0.5 * math.log(x) + series


def _one_minus_plus_x(
    one_minus_rho: np.ndarray, one_plus_rho: np.ndarray, r: float, complement: float
) -> tuple[np.ndarray, np.ndarray]:
    """``1 - rho r`` and ``1 + rho r`` as sums of non-negative terms (no cancellation).

    ``complement`` is ``1 - |r|``; near ``|r| = 1`` it must come from the caller, as the rounded
    ``r`` no longer holds it.
    """
    abs_r = abs(r)
    if r >= 0.0:
        return complement + abs_r * one_minus_rho, complement + abs_r * one_plus_rho
    return complement + abs_r * one_plus_rho, complement + abs_r * one_minus_rho


def _log_kernel_remainder(one_minus_x: np.ndarray, one_plus_x: np.ndarray, m: int) -> np.ndarray:
    """The O(1) part of log h: ``log[sqrt(pi/2) Gamma(m)/Gamma(m+1/2)] + log 2F1(...)``."""
    log_const = 0.5 * math.log(math.pi / 2.0) - _log_gamma_ratio_half(m)
    return log_const + _log_hyp2f1_half(0.5 * one_plus_x, 0.5 * one_minus_x, m)


def _log_kernel_from_parts(one_minus_rho: np.ndarray, one_plus_rho: np.ndarray, case: _Case) -> np.ndarray:
    """log h(rho) from accurately computed ``1 - rho`` and ``1 + rho`` (1-D arrays)."""
    m = case.order
    one_minus_x, one_plus_x = _one_minus_plus_x(one_minus_rho, one_plus_rho, case.r, case.complement)
    with np.errstate(divide="ignore"):
        log_one_minus_rho2 = np.log(one_minus_rho) + np.log(one_plus_rho)
    powers = case.power * log_one_minus_rho2 - (m - 0.5) * np.log(one_minus_x)
    return powers + _log_kernel_remainder(one_minus_x, one_plus_x, m)


# --------------------------------------------------------------------------- public functions


def log_likelihood_kernel(
    rho: ArrayLike,
    n: int,
    r: float,
    *,
    one_minus_abs_r: float | None = None,
    sd_prior: str = "jeffreys",
) -> np.ndarray:
    """Log of the marginal likelihood kernel ``h(rho | n, r)`` of a correlation.

    With Jeffreys' priors on the standard deviations (``sd_prior="jeffreys"``)
    ``h(rho | n, r) = (1 - rho^2)^((n-1)/2) * integral_0^inf (cosh w - rho r)^(-(n-1)) dw``;
    with flat priors on them (``sd_prior="flat"``)
    ``h(rho | n, r) = (1 - rho^2)^((n-3)/2) * integral_0^inf (cosh w - rho r)^(-(n-2)) dw``
    (see the module docstring). Both are evaluated through the closed form with
    the Gauss hypergeometric function.

    The value returned is ``log h`` itself, with the factor
    ``sqrt(pi/2) Gamma(m) / Gamma(m - 1/2)`` of the closed form included
    (``m = n - 1`` for Jeffreys' priors, ``n - 2`` for flat ones). It differs
    from the log marginal likelihood ``log p(data | rho)`` (means integrated
    against a flat prior, standard deviations against the sd prior) by the
    additive constant ``log[(2 pi)^-(n-1) Gamma(m) / n * (Sxx Syy)^(-m/2)]``,
    where ``Sxx`` and ``Syy`` are the centred sums of squares. That constant
    does not depend on ``rho``, so it cancels from posteriors and Bayes factors.

    Parameters
    ----------
    rho : array_like
        Correlation values in [-1, 1]. ``rho = -1`` and ``rho = 1`` give ``-inf``.
    n : int
        Number of complete pairs, at least 4.
    r : float
        Sample Pearson correlation, strictly between -1 and 1 (or in [-1, 1]
        when ``one_minus_abs_r`` is given).
    one_minus_abs_r : float, optional
        ``1 - |r|`` computed without cancellation (for example
        ``SufficientStats.one_minus_abs_r``), between ``MIN_ONE_MINUS_ABS_R``
        and 1 and within 1e-9 of ``1 - |r|``. Default: ``1 - |r|`` from ``r``.
    sd_prior : {"jeffreys", "flat"}, default "jeffreys"
        Prior on each standard deviation: ``1/sigma`` or flat.

    Returns
    -------
    numpy.ndarray
        ``log h(rho | n, r)``, same shape as ``rho``.

    Raises
    ------
    ValueError
        If ``n < 4`` or not whole, ``r`` or ``one_minus_abs_r`` is out of range or
        the two disagree, ``sd_prior`` is unknown, or any ``rho`` is outside [-1, 1].
    """
    case = _check_case(n, r, one_minus_abs_r, sd_prior)
    values = np.asarray(rho, dtype=float)
    if not np.all(np.isfinite(values)) or np.any(np.abs(values) > 1.0):
        raise ValueError("rho must lie in [-1, 1]")
    flat = values.reshape(-1)
    # 1 - rho and 1 + rho are exact in floating point where they are small (Sterbenz).
    out = _log_kernel_from_parts(1.0 - flat, 1.0 + flat, case)
    return out.reshape(values.shape)


def log_stretched_beta_pdf(rho: ArrayLike, a: float, b: float) -> np.ndarray:
    """Log density of a Beta(a, b) distribution stretched from [0, 1] to [-1, 1].

    If ``u ~ Beta(a, b)`` then ``rho = 2u - 1``, so ``a`` weighs ``rho`` near
    +1 and ``b`` near -1 through ``u = (1 + rho)/2``. The density is
    ``((1 + rho)/2)^(a-1) ((1 - rho)/2)^(b-1) / (2 B(a, b))``; ``a = b = 1`` is
    Uniform(-1, 1) with density 1/2.

    Parameters
    ----------
    rho : array_like
        Points at which to evaluate. Points outside [-1, 1] give ``-inf``.
    a, b : float
        Positive shape parameters.

    Returns
    -------
    numpy.ndarray
        Log density, same shape as ``rho`` (``+inf`` at an end where the shape
        parameter is below 1).

    Raises
    ------
    ValueError
        If ``a <= 0`` or ``b <= 0``.
    """
    a = _check_shape(a, "prior shape a")
    b = _check_shape(b, "prior shape b")
    values = np.asarray(rho, dtype=float)
    return _log_stretched_beta_from_parts(1.0 - values, 1.0 + values, a, b)


def _log_stretched_beta_from_parts(
    one_minus_rho: np.ndarray, one_plus_rho: np.ndarray, a: float, b: float
) -> np.ndarray:
    inside = (one_minus_rho >= 0.0) & (one_plus_rho >= 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        # a shape of 1 contributes xlogy(0, .) = 0 exactly: left out, the sum is the same
        upper_end = special.xlogy(a - 1.0, 0.5 * one_plus_rho) if a != 1.0 else 0.0
        lower_end = special.xlogy(b - 1.0, 0.5 * one_minus_rho) if b != 1.0 else 0.0
        log_pdf = upper_end + lower_end - math.log(2.0) - special.betaln(a, b)
    return np.where(inside, log_pdf, -np.inf)


def fisher_z_interval(
    n: int, r: float, mass: float, *, one_minus_abs_r: float | None = None
) -> tuple[float, float]:
    """Large-sample interval for rho from Fisher's z transformation.

    ``tanh(atanh(r) -/+ q / sqrt(n - 3))`` with ``q`` the ``(1 + mass)/2``
    quantile of the standard normal (Fisher 1921, *Metron* 1).

    Parameters
    ----------
    n : int
        Number of complete pairs, at least 4.
    r : float
        Sample Pearson correlation, strictly between -1 and 1 (or in [-1, 1]
        when ``one_minus_abs_r`` is given).
    mass : float
        Central probability, strictly between 0 and 1.
    one_minus_abs_r : float, optional
        ``1 - |r|`` computed without cancellation, as for :func:`exact_posterior`.

    Returns
    -------
    tuple of float
        ``(lower, upper)``.
    """
    case = _check_case(n, r, one_minus_abs_r, "jeffreys")
    mass = _check_mass(mass)
    half = float(stats.norm.ppf(0.5 * (1.0 + mass))) / math.sqrt(case.n - 3)
    return math.tanh(case.centre - half), math.tanh(case.centre + half)


# --------------------------------------------------------------------------- posterior


def _one_minus_plus_tanh(zeta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``1 - tanh(zeta)`` and ``1 + tanh(zeta)`` without cancellation."""
    return 2.0 / (1.0 + np.exp(2.0 * zeta)), 2.0 / (1.0 + np.exp(-2.0 * zeta))


@dataclass(frozen=True, eq=False)
class _GridTerms:
    """The log integrand's terms on one grid that do not depend on the prior on rho.

    ``kernel`` is log h(rho) at rho = tanh(zeta) minus its power terms at atanh(r) (see
    :func:`_grid_terms`); ``log_one_minus`` and ``log_one_plus`` are the logs of ``1 -/+ rho``,
    whose sum is the Jacobian ``log(1 - rho^2)``.
    """

    zeta: np.ndarray
    kernel: np.ndarray
    one_minus: np.ndarray
    one_plus: np.ndarray
    log_one_minus: np.ndarray
    log_one_plus: np.ndarray

    def log_integrand(self, a: float, b: float) -> np.ndarray:
        """log[prior(rho) h(rho) (1 - rho^2)] with a stretched Beta(a, b) prior, minus the power terms at atanh(r)."""
        return (self.kernel + _log_stretched_beta_from_parts(self.one_minus, self.one_plus, a, b)
                + self.log_one_minus + self.log_one_plus)


@functools.lru_cache(maxsize=_GRID_CACHE_SIZE)
def _grid_terms(case: _Case, lo: float, hi: float, grid_size: int) -> _GridTerms:
    """The kernel terms on ``grid_size`` points from ``lo`` to ``hi``, minus the power terms at ``atanh(r)``.

    The power terms ``power * log(1 - rho^2) - (m - 1/2) log(1 - rho r)`` are O(n) in
    size; their difference from the value at ``zeta_ref = atanh(r)`` is formed directly from
    ``d = zeta - zeta_ref``, using ``cosh(zeta)/cosh(zeta_ref) = cosh d + rho_ref sinh d``
    and ``rho - rho_ref = sinh d (1 - rho_ref^2) / (cosh d + rho_ref sinh d)``, so the
    result keeps full relative precision on narrow grids at large n. Where ``|d| > 1``
    the difference is O(1) or larger and is taken between the logs themselves, formed
    from ``1 - rho``, ``1 + rho`` and ``1 - rho r``: there the ``d`` form can cancel
    (``2 sinh^2(d/2) + rho_ref sinh d`` when ``rho_ref`` is near -+1 and ``d`` has the
    other sign). The subtracted constant is returned by :func:`_log_powers_at`.

    Kept for the last few grids: the prior sensitivity check asks for the same data under
    several priors on rho, whose grids start alike and often end alike.
    """
    zeta = np.linspace(lo, hi, grid_size)
    zeta_ref = case.centre
    m = case.order
    one_minus, one_plus = _one_minus_plus_tanh(zeta)
    log_one_minus, log_one_plus = np.log(one_minus), np.log(one_plus)
    one_minus_x, one_plus_x = _one_minus_plus_x(one_minus, one_plus, case.r, case.complement)
    ref_minus, ref_plus = _one_minus_plus_tanh(np.array([zeta_ref]))
    ref_minus_x, _ = _one_minus_plus_x(ref_minus, ref_plus, case.r, case.complement)
    rho_ref = math.tanh(zeta_ref)
    d = zeta - zeta_ref
    near = np.abs(d) <= 1.0
    dn = d[near]
    sinh_d = np.sinh(dn)
    cosh_ratio_m1 = 2.0 * np.sinh(0.5 * dn) ** 2 + rho_ref * sinh_d
    rho_diff = sinh_d * (ref_minus[0] * ref_plus[0]) / (1.0 + cosh_ratio_m1)
    powers = np.empty_like(zeta)
    powers[near] = (-2.0 * case.power * np.log1p(cosh_ratio_m1)
                    - (m - 0.5) * np.log1p(-case.r * rho_diff / ref_minus_x[0]))
    far = ~near
    log_rho2_ratio = log_one_minus[far] + log_one_plus[far] - math.log(ref_minus[0]) - math.log(ref_plus[0])
    powers[far] = case.power * log_rho2_ratio - (m - 0.5) * (np.log(one_minus_x[far]) - math.log(ref_minus_x[0]))
    terms = _GridTerms(zeta=zeta, kernel=powers + _log_kernel_remainder(one_minus_x, one_plus_x, m),
                       one_minus=one_minus, one_plus=one_plus, log_one_minus=log_one_minus,
                       log_one_plus=log_one_plus)
    for values in (terms.zeta, terms.kernel, terms.one_minus, terms.one_plus, terms.log_one_minus,
                   terms.log_one_plus):
        values.setflags(write=False)
    return terms


def _log_powers_at(zeta_ref: float, case: _Case) -> float:
    """``power * log(1 - rho^2) - (m - 1/2) log(1 - rho r)`` at rho = tanh(zeta_ref)."""
    ref_minus, ref_plus = _one_minus_plus_tanh(np.array([zeta_ref]))
    ref_minus_x, _ = _one_minus_plus_x(ref_minus, ref_plus, case.r, case.complement)
    log_one_minus_rho2 = math.log(ref_minus[0]) + math.log(ref_plus[0])
    return case.power * log_one_minus_rho2 - (case.order - 0.5) * math.log(ref_minus_x[0])


def _adaptive_grid(case: _Case, a: float, b: float, grid_size: int) -> tuple[_GridTerms, np.ndarray]:
    """Uniform grid in zeta covering where the log integrand is within _LOG_DROP of its max.

    The first grid spans ``atanh(r) +/- 60 / sqrt(n - 3)``, cut at ``+/-_Z_LIMIT`` or
    ``_Z_MARGIN`` beyond ``atanh(r)``, whichever is further out; later grids may grow up
    to ``+/-_Z_MAX``, which only heavy tails (flat sd priors at the smallest n) or
    ``|r|`` within about 1e-8 of 1 need. Returns the terms on the grid and the log integrand
    on it, offset by ``-_log_powers_at(atanh(r), case)``.
    """
    scale = 1.0 / math.sqrt(case.n - 3)
    centre = case.centre
    lo = max(centre - _INITIAL_HALF_WIDTH * scale, min(-_Z_LIMIT, centre - _Z_MARGIN))
    hi = min(centre + _INITIAL_HALF_WIDTH * scale, max(_Z_LIMIT, centre + _Z_MARGIN))
    for _ in range(_MAX_GRID_PASSES):
        terms = _grid_terms(case, lo, hi, grid_size)
        grid = terms.zeta
        log_f = terms.log_integrand(a, b)
        kept = np.flatnonzero(log_f >= log_f.max() - _LOG_DROP)
        first, last = int(kept[0]), int(kept[-1])
        grow_lo = first == 0 and lo > -_Z_MAX
        grow_hi = last == grid_size - 1 and hi < _Z_MAX
        if grow_lo or grow_hi:
            width = hi - lo
            if grow_lo:
                lo = max(lo - width, -_Z_MAX)
            if grow_hi:
                hi = min(hi + width, _Z_MAX)
            continue
        if last - first >= grid_size // 2:
            break
        lo = float(grid[max(first - 1, 0)])
        hi = float(grid[min(last + 1, grid_size - 1)])
    return terms, log_f


def _roots_in_brackets(value_and_slope: Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]], a: np.ndarray,
                       b: np.ndarray, f_a: np.ndarray, f_b: np.ndarray, goal: np.ndarray) -> np.ndarray:
    """Where a smooth monotone function takes the values ``goal``, each inside its bracket [a, b].

    ``value_and_slope(x)`` gives the function and its derivative; ``f_a`` and ``f_b``, of opposite signs,
    are the function minus ``goal`` at the ends. Starting from the secant through the ends, Newton's method
    runs on all brackets together, falling back to bisection for any step that would leave its bracket (a
    safeguarded Newton iteration, common practice), until the next step would be below a scalar
    root-finder's tolerance of 1e-15 (absolute and relative), even where rounding puts it just outside the
    bracket.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        x = a - f_a * ((b - a) / (f_b - f_a))
        x = np.where((x > a) & (x < b), x, 0.5 * (a + b))
        for _ in range(100):
            value, derivative = value_and_slope(x)
            f_x = value - goal
            same_side = np.sign(f_x) == np.sign(f_a)
            a, f_a = np.where(same_side, x, a), np.where(same_side, f_x, f_a)
            b = np.where(same_side, b, x)
            newton = x - f_x / derivative
            done = (f_x == 0.0) | (np.abs(newton - x) <= 1e-15 * (1.0 + np.abs(x)))
            if done.all():
                break
            inside = np.isfinite(newton) & (newton > a) & (newton < b)
            x = np.where(done, x, np.where(inside, newton, 0.5 * (a + b)))
    return x


def _root_in_bracket(value_and_slope: Callable[[float], tuple[float, float]], a: float, b: float, f_a: float,
                     f_b: float, goal: float) -> float:
    """:func:`_roots_in_brackets` for one bracket, step for step in Python floats (a single median or
    quantile costs a few microseconds this way, against a few hundred through small arrays)."""
    x = a - f_a * ((b - a) / (f_b - f_a))
    if not a < x < b:
        x = 0.5 * (a + b)
    for _ in range(100):
        value, derivative = value_and_slope(x)
        f_x = value - goal
        if (f_x > 0.0) - (f_x < 0.0) == (f_a > 0.0) - (f_a < 0.0):
            a, f_a = x, f_x
        else:
            b = x
        newton = x - f_x / derivative if derivative != 0.0 else math.nan
        if f_x == 0.0 or abs(newton - x) <= 1e-15 * (1.0 + abs(x)):
            break
        x = newton if math.isfinite(newton) and a < newton < b else 0.5 * (a + b)
    return x


@dataclass(frozen=True, eq=False)
class ExactPosterior:
    """Exact marginal posterior of rho on a grid, with summaries.

    Build it with :func:`exact_posterior`. The grid is uniform in
    ``zeta = atanh(rho)`` and covers the region where the posterior density is
    within a factor ``exp(-50)`` of its maximum, so probabilities below about
    ``1e-20`` are reported as 0.

    Attributes
    ----------
    n : int
        Number of complete pairs.
    r : float
        Sample Pearson correlation.
    prior_a, prior_b : float
        Shapes of the stretched Beta prior on rho.
    z : numpy.ndarray
        Uniform grid of ``atanh(rho)`` values.
    rho : numpy.ndarray
        ``tanh(z)``, increasing (values within 1e-16 of +/-1 may round to +/-1).
    density : numpy.ndarray
        Normalised posterior density of rho at ``rho``.
    z_density : numpy.ndarray
        Normalised posterior density of ``atanh(rho)`` at ``z``
        (``density * (1 - rho^2)``).
    log_bf10 : float
        Natural log of the Bayes factor of H1 (rho ~ prior) against H0 (rho = 0).
    one_minus_abs_r : float
        ``1 - |r|`` as the posterior used it (given by the caller, or from ``r``);
        near ``|r| = 1`` it holds the digits that ``r`` has lost.
    sd_prior : str
        Prior on the standard deviations: ``"jeffreys"`` or ``"flat"``.
    """

    n: int
    r: float
    prior_a: float
    prior_b: float
    z: np.ndarray
    rho: np.ndarray
    density: np.ndarray
    z_density: np.ndarray
    log_bf10: float
    one_minus_abs_r: float = math.nan
    sd_prior: str = "jeffreys"

    # ------------------------------------------------------------------ internals

    @property
    def _step(self) -> float:
        return float(self.z[1] - self.z[0])

    def _trapezoid(self, values: np.ndarray) -> float:
        return self._step * float(np.sum(values) - 0.5 * (values[0] + values[-1]))

    @cached_property
    def _pieces(self) -> np.ndarray:
        """Integral of the zeta density over each grid interval.

        Interior intervals use the quintic through the six nearest points,
        ``h (11 f[i-2] - 93 f[i-1] + 802 f[i] + 802 f[i+1] - 93 f[i+2] + 11 f[i+3]) / 1440``
        (6th order: on wide grids, at the smallest n, the 4th-order rule left
        relative errors near 1e-7 in tail probabilities); the two intervals at
        each end, where the density is below exp(-50) of its maximum, use the
        cubic through four points.
        """
        f = self.z_density
        h = self._step
        pieces = np.empty(f.size - 1)
        pieces[1:-1] = h / 24.0 * (-f[:-3] + 13.0 * f[1:-2] + 13.0 * f[2:-1] - f[3:])
        pieces[2:-2] = h / 1440.0 * (
            11.0 * (f[:-5] + f[5:]) - 93.0 * (f[1:-4] + f[4:-1]) + 802.0 * (f[2:-3] + f[3:-2])
        )
        pieces[0] = h / 12.0 * (5.0 * f[0] + 8.0 * f[1] - f[2])
        pieces[-1] = h / 12.0 * (-f[-3] + 8.0 * f[-2] + 5.0 * f[-1])
        trapezoid = 0.5 * h * (f[:-1] + f[1:])
        return np.where(pieces > 0.0, pieces, trapezoid)

    @cached_property
    def _tail_cubics(self) -> GridCubic:
        """The cumulative curve's pieces followed by the survival curve's, each the cubic Hermite interpolant
        of the summed pieces with the density as its slopes; the survival curve is summed from the upper end,
        so that tiny upper tails keep their digits."""
        pieces = self._pieces
        total = float(np.sum(pieces))
        cumulative = np.concatenate(([0.0], np.cumsum(pieces))) / total
        survival = np.concatenate((np.cumsum(pieces[::-1])[::-1], [0.0])) / total
        slopes = self.z_density / total
        return GridCubic.hermite(self.z, np.stack((cumulative, survival)), np.stack((slopes, -slopes)))

    @cached_property
    def _cdf_cubic(self) -> GridCubic:
        """P(zeta <= x)."""
        return self._tail_cubics.curve(0)

    @cached_property
    def _sf_cubic(self) -> GridCubic:
        """P(zeta > x)."""
        return self._tail_cubics.curve(1)

    @cached_property
    def _log_z_density_cubic(self) -> GridCubic:
        """The log density of zeta between the knots: scipy's not-a-knot cubic spline through the grid."""
        return GridCubic.from_coefficients(self.z, interpolate.CubicSpline(self.z, np.log(self.z_density)).c)

    def _z_of(self, x: np.ndarray) -> np.ndarray:
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.arctanh(np.clip(x, -1.0, 1.0))

    def _quantile_z(self, probs: np.ndarray) -> np.ndarray:
        """zeta-quantiles for 0 <= q <= 1, limited to the grid (its ends for q = 0 and 1), all at once.

        Each q is bracketed by the grid interval where the cumulative curve (below 0.5) or the survival
        curve (above, so tiny upper tails keep their digits) crosses it; the crossings are then found for
        all brackets together by :func:`_roots_in_brackets` on those intervals' cubics.
        """
        lower_half = probs <= 0.5
        goal = np.where(lower_half, np.minimum(np.maximum(probs, 0.0), 0.5),
                        1.0 - np.minimum(np.maximum(probs, 0.5), 1.0))
        cdf_knots, falling_knots = self._bracket_knots
        pieces = self.z.size - 1
        index = np.where(lower_half, np.searchsorted(cdf_knots, goal, side="right"),
                         np.searchsorted(falling_knots, -goal, side="right"))
        lo, hi = self.z[index], self.z[index + 1]
        # the survival curve's pieces follow the cumulative curve's in _tail_cubics
        stacked = np.where(lower_half, index, index + pieces)
        tails = self._tail_cubics
        f_lo = tails.on_piece(stacked, lo) - goal
        f_hi = tails.on_piece(np.where(index + 1 < pieces, stacked + 1, stacked), hi) - goal
        # no sign change within the bracket (rounding at a knot): the nearer end, as a root-finder would give
        out = np.where(np.abs(f_hi) <= np.abs(f_lo), hi, lo)
        out = np.where(f_lo == 0.0, lo, np.where(f_hi == 0.0, hi, out))
        # q = 0 and q = 1 are the grid's ends whatever the curves do there
        bracketed = (f_lo * f_hi < 0.0) & (probs > 0.0) & (probs < 1.0)
        if bracketed.any():
            chosen = stacked[bracketed]

            def value_and_slope(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
                return tails.value_and_slope_on_piece(chosen, x)

            out[bracketed] = _roots_in_brackets(value_and_slope, lo[bracketed], hi[bracketed], f_lo[bracketed],
                                                f_hi[bracketed], goal[bracketed])
        return np.where(probs <= 0.0, self.z[0], np.where(probs >= 1.0, self.z[-1], out))

    @cached_property
    def _bracket_knots(self) -> tuple[np.ndarray, np.ndarray]:
        """The cumulative curve's values at the knots after the first, and the survival curve's negated
        (increasing): searched for the grid interval holding a quantile."""
        return self._cdf_cubic.c[3][1:], -self._sf_cubic.c[3][1:]

    def _one_quantile_z(self, q: float) -> float:
        """:meth:`_quantile_z` for one probability strictly between 0 and 1, step for step in Python floats."""
        tails = self._tail_cubics
        pieces = self.z.size - 1
        if q <= 0.5:
            goal = min(max(q, 0.0), 0.5)
            index = int(np.searchsorted(self._bracket_knots[0], goal, side="right"))
            stacked = index
        else:
            goal = 1.0 - min(max(q, 0.5), 1.0)
            index = int(np.searchsorted(self._bracket_knots[1], -goal, side="right"))
            stacked = index + pieces
        lo, hi = float(self.z[index]), float(self.z[index + 1])
        f_lo = tails.at_piece(stacked, lo)[0] - goal
        f_hi = tails.at_piece(stacked + 1 if index + 1 < pieces else stacked, hi)[0] - goal
        if f_lo == 0.0:
            return lo
        if f_hi == 0.0:
            return hi
        if f_lo * f_hi < 0.0:
            return _root_in_bracket(lambda x: tails.at_piece(stacked, x), lo, hi, f_lo, f_hi, goal)
        return hi if abs(f_hi) <= abs(f_lo) else lo

    def _clipped_cdf_z(self, zeta: np.ndarray) -> np.ndarray:
        """P(atanh(rho) <= zeta) as :meth:`cdf` gives it: 0 below the grid, 1 above it."""
        first, last = self.z[0], self.z[-1]
        inside = np.minimum(np.maximum(self._cdf_cubic(np.minimum(np.maximum(zeta, first), last)), 0.0), 1.0)
        return np.where(zeta <= first, 0.0, np.where(zeta >= last, 1.0, inside))

    def _abs_z_cdf(self, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """P(|atanh(rho)| <= u) for u >= 0, and its derivative in u."""
        first, last = self.z[0], self.z[-1]
        cdf = self._clipped_cdf_z(u) - self._clipped_cdf_z(-u)
        slope = self._cdf_cubic.slope
        up = np.where((u > first) & (u < last), slope(np.minimum(np.maximum(u, first), last)), 0.0)
        down = np.where((-u > first) & (-u < last), slope(np.minimum(np.maximum(-u, first), last)), 0.0)
        return cdf, up + down

    @cached_property
    def _abs_z_table(self) -> tuple[np.ndarray, np.ndarray]:
        """Points from 0 to the grid's largest ``|z|``, with P(|atanh(rho)| <= u) at each (made non-decreasing),
        to bracket the quantiles of rho^2."""
        points = np.linspace(0.0, max(-float(self.z[0]), float(self.z[-1])), _ABS_Z_TABLE_POINTS)
        return points, np.maximum.accumulate(self._abs_z_cdf(points)[0])

    def _log_rho_density_at_z(self, zeta: np.ndarray) -> np.ndarray:
        one_minus, one_plus = _one_minus_plus_tanh(zeta)
        return self._log_z_density_cubic(zeta) - np.log(one_minus) - np.log(one_plus)

    def _equal_density_ends(self, mass: float, start: np.ndarray) -> np.ndarray | None:
        """The ends (in zeta) of the interval holding ``mass`` whose end densities of rho are equal, by
        Newton's method on both ends at once from ``start``; None if it does not settle inside the grid.

        The two equations are ``C(lo) + S(hi) = 1 - mass`` (C the cumulative curve, S the survival curve)
        and ``L(lo) = L(hi)`` (L the log density of rho, ``log f_zeta(z) - log(1 - tanh^2 z)``, whose
        derivative is ``(log f_zeta)'(z) + 2 tanh z``). A step is halved until the next Newton step, taken
        with the same derivatives, is shorter than it (Deuflhard's natural monotonicity test, which does
        not depend on how the two equations are scaled).
        """
        spare = 1.0 - mass
        first, last = float(self.z[0]), float(self.z[-1])
        cdf, sf, log_density = self._cdf_cubic, self._sf_cubic, self._log_z_density_cubic

        def log_rho_density(zeta: float) -> tuple[float, float]:
            """L and its derivative; ``1 -/+ tanh(zeta)`` formed as in ``_one_minus_plus_tanh``."""
            value, slope = log_density.at(zeta)
            one_minus, one_plus = 2.0 / (1.0 + math.exp(2.0 * zeta)), 2.0 / (1.0 + math.exp(-2.0 * zeta))
            return value - math.log(one_minus) - math.log(one_plus), slope + 2.0 * math.tanh(zeta)

        def equations(lo: float, hi: float) -> tuple[float, float, tuple[float, float, float, float]]:
            """The two residuals and their derivatives in (lo, hi), row by row."""
            below, below_slope = cdf.at(lo)
            above, above_slope = sf.at(hi)
            level_lo, slope_lo = log_rho_density(lo)
            level_hi, slope_hi = log_rho_density(hi)
            return below + above - spare, level_lo - level_hi, (below_slope, above_slope, slope_lo, -slope_hi)

        def solve(jacobian: tuple[float, float, float, float], f: float, g: float) -> tuple[float, float]:
            """The step (d_lo, d_hi) with jacobian @ step = -(f, g), by Cramer's rule."""
            a, b, c, d = jacobian
            determinant = a * d - b * c
            return (-f * d + b * g) / determinant, (-a * g + c * f) / determinant

        lo, hi = float(start[0]), float(start[1])
        f, g, jacobian = equations(lo, hi)
        for _ in range(60):
            try:
                step_lo, step_hi = solve(jacobian, f, g)
            except ZeroDivisionError:
                return None
            if not (math.isfinite(step_lo) and math.isfinite(step_hi)):
                return None
            if abs(step_lo) <= 1e-15 * (1.0 + abs(lo)) and abs(step_hi) <= 1e-15 * (1.0 + abs(hi)):
                return np.array([lo, hi])
            length = max(abs(step_lo), abs(step_hi))
            for _ in range(40):
                trial_lo, trial_hi = lo + step_lo, hi + step_hi
                if first < trial_lo < trial_hi < last:
                    trial = equations(trial_lo, trial_hi)
                    following = solve(jacobian, trial[0], trial[1])
                    if max(abs(following[0]), abs(following[1])) < length:
                        break
                step_lo, step_hi = 0.5 * step_lo, 0.5 * step_hi
            else:
                return None
            lo, hi = trial_lo, trial_hi
            f, g, jacobian = trial
        return None

    # ------------------------------------------------------------------ summaries

    @cached_property
    def mean(self) -> float:
        """Posterior mean of rho."""
        return self._trapezoid(self.rho * self.z_density)

    @cached_property
    def sd(self) -> float:
        """Posterior standard deviation of rho."""
        centred = self.rho - self.mean
        return math.sqrt(self._trapezoid(centred * centred * self.z_density))

    @cached_property
    def median(self) -> float:
        """Posterior median of rho."""
        return float(self.quantile(0.5))

    def cdf(self, x: ArrayLike) -> float | np.ndarray:
        """Posterior probability that rho <= x.

        Parameters
        ----------
        x : float or array_like
            Points; values below -1 give 0 and above 1 give 1.

        Returns
        -------
        float or numpy.ndarray
            A float for scalar input, otherwise an array of the same shape.
        """
        values = np.asarray(x, dtype=float)
        zeta = self._z_of(values)
        out = np.clip(self._cdf_cubic(np.clip(zeta, self.z[0], self.z[-1])), 0.0, 1.0)
        out = np.where(zeta <= self.z[0], 0.0, np.where(zeta >= self.z[-1], 1.0, out))
        out = np.where(np.isnan(values), np.nan, out)
        return _as_output(np.asarray(out, dtype=float), values.ndim == 0)

    def sf(self, x: ArrayLike) -> float | np.ndarray:
        """Posterior probability that rho > x, accurate also when it is tiny.

        Parameters
        ----------
        x : float or array_like
            Points; values below -1 give 1 and above 1 give 0.

        Returns
        -------
        float or numpy.ndarray
            A float for scalar input, otherwise an array of the same shape.
        """
        values = np.asarray(x, dtype=float)
        zeta = self._z_of(values)
        out = np.clip(self._sf_cubic(np.clip(zeta, self.z[0], self.z[-1])), 0.0, 1.0)
        out = np.where(zeta <= self.z[0], 1.0, np.where(zeta >= self.z[-1], 0.0, out))
        out = np.where(np.isnan(values), np.nan, out)
        return _as_output(np.asarray(out, dtype=float), values.ndim == 0)

    def quantile(self, q: ArrayLike) -> float | np.ndarray:
        """Posterior quantile of rho.

        Parameters
        ----------
        q : float or array_like
            Probabilities in [0, 1]; 0 gives -1 and 1 gives 1.

        Returns
        -------
        float or numpy.ndarray
            A float for scalar input, otherwise an array of the same shape.

        Raises
        ------
        ValueError
            If any ``q`` is outside [0, 1] or not a number.
        """
        probs = np.asarray(q, dtype=float)
        if not np.all((probs >= 0.0) & (probs <= 1.0)):
            raise ValueError("quantile probabilities must lie in [0, 1]")
        if probs.ndim == 0:  # the same few (the median, the interval's ends) are asked for again and again
            key = float(probs)
            if key not in self._quantiles_asked:
                self._quantiles_asked[key] = (float(np.tanh(self._one_quantile_z(key))) if 0.0 < key < 1.0
                                              else -1.0 if key == 0.0 else 1.0)
            return self._quantiles_asked[key]
        return self._rho_quantiles(probs.reshape(-1)).reshape(probs.shape)

    @cached_property
    def _quantiles_asked(self) -> dict[float, float]:
        return {}

    def _rho_quantiles(self, flat: np.ndarray) -> np.ndarray:
        out = np.where(flat == 0.0, -1.0, 1.0)
        inside = (flat > 0.0) & (flat < 1.0)
        if inside.any():
            out[inside] = np.tanh(self._quantile_z(flat[inside]))
        return out

    def squared_quantile(self, q: ArrayLike) -> float | np.ndarray:
        """Posterior quantile of rho^2.

        ``P(rho^2 <= t) = cdf(sqrt t) - cdf(-sqrt t)``, which in ``u = atanh(sqrt t)`` is
        ``P(|atanh(rho)| <= u) = C(u) - C(-u)`` with ``C`` the cumulative curve of ``atanh(rho)``.
        Each q is bracketed between two points of a table of that probability, and the crossing found
        as for :meth:`quantile`, with the derivative ``C'(u) + C'(-u)``. The quantile is the smallest ``t`` with
        ``P(rho^2 <= t) >= q``: 0 for q = 0, also when the posterior keeps away from 0.

        Parameters
        ----------
        q : float or array_like
            Probabilities in [0, 1].

        Returns
        -------
        float or numpy.ndarray
            A float for scalar input, otherwise an array of the same shape.

        Raises
        ------
        ValueError
            If any ``q`` is outside [0, 1] or not a number.
        """
        probs = np.asarray(q, dtype=float)
        if not np.all((probs >= 0.0) & (probs <= 1.0)):
            raise ValueError("quantile probabilities must lie in [0, 1]")
        flat = probs.reshape(-1)
        points, table = self._abs_z_table
        above = np.searchsorted(table, flat, side="left")  # the first point where the probability reaches q
        # q = 0 gives 0; q beyond the table (1, up to rounding) gives 1
        out = np.where(above == 0, 0.0, 1.0)
        inside = (above > 0) & (above < points.size)
        if inside.any():
            upper = points[above[inside]]
            lower = points[above[inside] - 1]
            goal = flat[inside]
            f_lower = self._abs_z_cdf(lower)[0] - goal
            f_upper = self._abs_z_cdf(upper)[0] - goal
            found = np.where(f_upper <= 0.0, upper, lower)
            bracketed = (f_lower < 0.0) & (f_upper > 0.0)
            if bracketed.any():
                found[bracketed] = _roots_in_brackets(self._abs_z_cdf, lower[bracketed], upper[bracketed],
                                                      f_lower[bracketed], f_upper[bracketed], goal[bracketed])
            squared = np.tanh(found) ** 2
            # q reached exactly at a point (1 where the cumulative curve rounds to 1): the first t reaching it
            reached = (f_lower < 0.0) & (f_upper == 0.0)
            if reached.any():
                squared[reached] = self._first_squared_reaching(np.tanh(lower[reached]) ** 2,
                                                                np.tanh(upper[reached]) ** 2, goal[reached])
            out[inside] = squared
        return _as_output(out.reshape(probs.shape), probs.ndim == 0)

    def _first_squared_reaching(self, low: np.ndarray, high: np.ndarray, goal: np.ndarray) -> np.ndarray:
        """The smallest t in [low, high] with P(rho^2 <= t) >= goal, by bisection: where that probability is
        flat at its goal (rounded to 1) Newton's method has no crossing to find."""
        for _ in range(60):
            middle = 0.5 * (low + high)
            below = self._abs_z_cdf(self._z_of(np.sqrt(middle)))[0] < goal
            low, high = np.where(below, middle, low), np.where(below, high, middle)
        return 0.5 * (low + high)

    def prob_below(self, t: float) -> float:
        """Posterior probability that rho < t (equal to ``cdf(t)``)."""
        return float(self.cdf(float(t)))

    def prob_above(self, t: float) -> float:
        """Posterior probability that rho > t (equal to ``sf(t)``)."""
        return float(self.sf(float(t)))

    def prob_between(self, lower: float, upper: float) -> float:
        """Posterior probability that ``lower < rho < upper``.

        Raises
        ------
        ValueError
            If ``lower > upper``.
        """
        lower, upper = float(lower), float(upper)
        if lower > upper:
            raise ValueError(f"lower ({lower}) must not exceed upper ({upper})")
        below_lower = float(self.cdf(lower))
        if below_lower <= 0.5:
            value = float(self.cdf(upper)) - below_lower
        else:
            value = float(self.sf(lower)) - float(self.sf(upper))
        return max(value, 0.0)

    def hdi(self, mass: float = 0.95) -> tuple[float, float]:
        """Highest-density interval of rho.

        The shortest interval holding ``mass`` of the posterior, found as the
        interval whose end points have equal density (exact for a unimodal
        posterior): by Newton's method on both ends from the equal-tailed
        interval, or, should that not settle, by Brent's method on the mass
        below the interval. If no such pair exists (the density is highest at
        an end of the grid), the shortest interval is searched for directly.

        Parameters
        ----------
        mass : float, default 0.95
            Probability inside the interval, strictly between 0 and 1.

        Returns
        -------
        tuple of float
            ``(lower, upper)``.
        """
        mass = _check_mass(mass)
        spare = 1.0 - mass

        def ends(alpha: float) -> tuple[float, float]:
            lo, hi = self._quantile_z(np.array([alpha, alpha + mass]))
            return float(lo), float(hi)

        def density_gap(alpha: float) -> float:
            lower, upper = self._log_rho_density_at_z(self._quantile_z(np.array([alpha, alpha + mass])))
            return float(lower - upper)

        # the intervals starting at the lower end and ending at the upper end, and the equal-tailed one
        quantiles = self._quantile_z(np.array([0.0, mass, spare, 1.0, 0.5 * spare, 1.0 - 0.5 * spare]))
        levels = self._log_rho_density_at_z(quantiles[:4])
        g_lo, g_hi = float(levels[0] - levels[1]), float(levels[2] - levels[3])
        if g_lo < 0.0 < g_hi:
            found = self._equal_density_ends(mass, quantiles[4:])
            if found is not None:
                return math.tanh(found[0]), math.tanh(found[1])
            alpha = optimize.brentq(density_gap, 0.0, spare, xtol=1e-15, rtol=1e-14)
        else:

            def width(alpha: float) -> float:
                lo, hi = ends(alpha)
                return math.tanh(hi) - math.tanh(lo)

            alpha = optimize.minimize_scalar(
                width, bounds=(0.0, spare), method="bounded", options={"xatol": 1e-12}
            ).x
        lo, hi = ends(float(alpha))
        return math.tanh(lo), math.tanh(hi)

    def density_at(self, x: ArrayLike) -> float | np.ndarray:
        """Posterior density of rho, interpolated from the grid.

        The log density of ``atanh(rho)`` is interpolated with a cubic spline
        and converted to the density of rho. Points off the grid (where the
        density is below ``exp(-50)`` times its maximum) and outside (-1, 1)
        give 0.

        Parameters
        ----------
        x : float or array_like
            Points.

        Returns
        -------
        float or numpy.ndarray
            A float for scalar input, otherwise an array of the same shape.
        """
        values = np.asarray(x, dtype=float)
        flat = values.reshape(-1)
        out = np.zeros_like(flat)
        with np.errstate(divide="ignore", invalid="ignore"):
            zeta = np.arctanh(flat)
        ok = (np.abs(flat) < 1.0) & (zeta >= self.z[0]) & (zeta <= self.z[-1])
        if np.any(ok):
            xs = flat[ok]
            out[ok] = np.exp(self._log_z_density_cubic(zeta[ok]) - np.log1p(-xs) - np.log1p(xs))
        out[np.isnan(flat)] = np.nan
        return _as_output(out.reshape(values.shape), values.ndim == 0)


def exact_posterior(
    n: int,
    r: float,
    prior_a: float = 1.0,
    prior_b: float = 1.0,
    grid_size: int = 4001,
    *,
    one_minus_abs_r: float | None = None,
    sd_prior: str = "jeffreys",
) -> ExactPosterior:
    """Exact marginal posterior of a correlation for bivariate-normal data.

    The posterior is ``prior(rho) h(rho | n, r)`` normalised by quadrature,
    with ``h`` from :func:`log_likelihood_kernel` and the prior a stretched
    Beta(prior_a, prior_b) on [-1, 1]. The means have flat priors; the standard
    deviations Jeffreys' ``1/sigma`` (default) or flat ones. The integration
    runs in ``zeta = atanh(rho)`` on a uniform grid placed adaptively where the
    mass is, using the trapezoidal rule (geometrically convergent here because
    the integrand is smooth with exponentially decaying tails).

    Parameters
    ----------
    n : int
        Number of complete pairs, at least 4 (also for flat sd priors, whose
        kernel needs ``n >= 3``; the closed form here needs ``m = n - 2 >= 2``).
    r : float
        Sample Pearson correlation, strictly between -1 and 1 (or in [-1, 1]
        when ``one_minus_abs_r`` is given).
    prior_a : float, default 1.0
        First shape of the stretched Beta prior (weight towards rho = +1).
    prior_b : float, default 1.0
        Second shape (weight towards rho = -1). ``prior_a = prior_b = 1`` is
        Uniform(-1, 1). Shapes below 1 (density infinite at an end) are fine.
    grid_size : int, default 4001
        Number of grid points, at least 101.
    one_minus_abs_r : float, optional
        ``1 - |r|`` computed without cancellation (for example
        ``SufficientStats.one_minus_abs_r``). Near ``|r| = 1`` the rounded ``r``
        has lost these digits, and the posterior depends on them: it is used
        wherever the closeness of ``r`` to -+1 matters (``atanh(r)``,
        ``1 -/+ rho r``). Must lie between ``MIN_ONE_MINUS_ABS_R`` (1e-100) and
        1 and agree with ``1 - |r|`` to 1e-9. Default: ``1 - |r|`` from ``r``.
    sd_prior : {"jeffreys", "flat"}, default "jeffreys"
        Prior on each standard deviation: ``1/sigma`` or flat.

    Returns
    -------
    ExactPosterior
        Immutable. The last few are kept and handed out again for equal
        arguments (one pair's report asks for its posterior in several
        places), and the kernel terms of the last few grids are reused for
        other priors on rho of the same data: the numbers are those of a
        posterior computed afresh.

    Raises
    ------
    ValueError
        For ``n < 4``, ``r`` or ``one_minus_abs_r`` out of range or disagreeing,
        an unknown ``sd_prior``, a non-positive shape or ``grid_size < 101``.
    """
    case = _check_case(n, r, one_minus_abs_r, sd_prior)
    a = _check_shape(prior_a, "prior_a")
    b = _check_shape(prior_b, "prior_b")
    if isinstance(grid_size, bool) or int(grid_size) != grid_size or grid_size < _MIN_GRID_SIZE:
        raise ValueError(f"grid_size must be an integer of at least {_MIN_GRID_SIZE}")
    grid_size = int(grid_size)

    return _posterior(case, a, b, grid_size, sd_prior)


@functools.lru_cache(maxsize=_GRID_CACHE_SIZE)
def _log_kernel_at_zero(case: _Case) -> float:
    """log h(0), the Bayes factor's denominator: the same for every prior on rho."""
    return float(_log_kernel_from_parts(np.ones(1), np.ones(1), case)[0])


@functools.lru_cache(maxsize=_POSTERIOR_CACHE_SIZE)
def _posterior(case: _Case, a: float, b: float, grid_size: int, sd_prior: str) -> ExactPosterior:
    """The posterior for checked arguments; the last few are kept, as one pair's report asks for its
    posterior in several places (its numbers, the predictive check, the influence and sensitivity checks)."""
    terms, log_f = _adaptive_grid(case, a, b, grid_size)
    zeta = terms.zeta
    step = float(zeta[1] - zeta[0])
    peak = float(log_f.max())
    scaled = np.exp(log_f - peak)
    log_norm_rel = peak + math.log(step * (float(np.sum(scaled)) - 0.5 * (scaled[0] + scaled[-1])))
    log_norm = log_norm_rel + _log_powers_at(case.centre, case)
    log_h0 = _log_kernel_at_zero(case)

    log_z_density = log_f - log_norm_rel
    log_density = log_z_density - terms.log_one_minus - terms.log_one_plus
    arrays = {
        "z": zeta,
        "rho": np.tanh(zeta),
        "density": np.exp(log_density),
        "z_density": np.exp(log_z_density),
    }
    for values in arrays.values():
        values.setflags(write=False)
    return ExactPosterior(
        n=case.n,
        r=case.r,
        prior_a=a,
        prior_b=b,
        log_bf10=log_norm - log_h0,
        one_minus_abs_r=case.complement,
        sd_prior=sd_prior,
        **arrays,
    )


def log_bayes_factor_10(
    n: int,
    r: float,
    prior_a: float = 1.0,
    prior_b: float = 1.0,
    *,
    one_minus_abs_r: float | None = None,
    sd_prior: str = "jeffreys",
) -> float:
    """Natural log of the Bayes factor BF10 for a correlation.

    H1: rho ~ stretched Beta(prior_a, prior_b) on [-1, 1]; H0: rho = 0; the
    nuisance parameters have the same priors under both (flat means, and
    ``sd_prior`` on the standard deviations). Computed as
    ``log(integral prior(rho) h(rho) drho) - log h(0)`` with the integral done
    in log space, so it stays accurate when BF10 is astronomically large.

    Parameters
    ----------
    n : int
        Number of complete pairs, at least 4.
    r : float
        Sample Pearson correlation, strictly between -1 and 1 (or in [-1, 1]
        when ``one_minus_abs_r`` is given).
    prior_a : float, default 1.0
        First shape of the stretched Beta prior.
    prior_b : float, default 1.0
        Second shape of the stretched Beta prior.
    one_minus_abs_r : float, optional
        ``1 - |r|`` computed without cancellation, as for :func:`exact_posterior`.
    sd_prior : {"jeffreys", "flat"}, default "jeffreys"
        Prior on each standard deviation: ``1/sigma`` or flat.

    Returns
    -------
    float
        ``log BF10``; positive values favour H1.
    """
    return exact_posterior(n, r, prior_a, prior_b, one_minus_abs_r=one_minus_abs_r, sd_prior=sd_prior).log_bf10
