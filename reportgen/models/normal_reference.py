"""Exact posterior of rho for the bivariate-normal model under the priors its sampler uses.

``reportgen.exact`` gives the marginal posterior of rho under Jeffreys' reference
priors. A sampler run of the normal model uses the spec's priors instead
(``models.base.prior_values``): means Normal(m0, d^2) or flat, standard
deviations half-normal(s), half-Student-t(nu, s) or ``1/sigma``, and rho a
stretched Beta(a, b). This module integrates the four nuisance parameters out
of the likelihood under exactly those priors, deterministically, so that a run
can be compared with it up to Monte Carlo error alone.

Everything is done on the standardised scale of the sampler (each column
centred and divided by its sample SD), where the centred sums are
``Sxx = Syy = n - 1``, ``Sxy = (n - 1) r`` and the sample means are 0. The
posterior of rho, and the Bayes factor (the change of units multiplies the
marginal likelihood by the same constant under both hypotheses), are the same
as in the data's units.

Derivation
----------
Write ``k = n - 1``, ``S`` for the centred cross-product matrix and ``xbar`` for
the mean vector. The likelihood of the rows is
``(2 pi)^-n |Sigma|^(-n/2) exp(-tr(Sigma^-1 S)/2 - n (xbar - mu)' Sigma^-1 (xbar - mu)/2)``,
and the last factor equals ``2 pi |Sigma|^(1/2) / n * N2(mu | xbar, Sigma/n)``.
Integrating ``mu`` against ``N2(mu | m0, D)``, ``D = diag(d1^2, d2^2)``, is then the
convolution of two normal densities::

    p(data | Sigma) = (2 pi)^-(n-1) / n * |Sigma|^(-(n-1)/2) exp(-tr(Sigma^-1 S)/2)
                      * N2(xbar | m0, Sigma/n + D),

and with flat means the last factor is 1. In ``u_j = log sigma_j`` and
``v = (u1 + u2)/2``, ``w = (u1 - u2)/2``, with ``|Sigma| = e^(4v) (1 - rho^2)`` and
``tr(Sigma^-1 S) = 2k e^(-2v) (cosh 2w - rho r) / (1 - rho^2)``, the power part is
``-2kv - (k/2) log(1 - rho^2) - k e^(-2v) (cosh 2w - rho r)/(1 - rho^2)``. Its
maximum over ``v`` for given ``rho`` (at ``w = 0``) is at ``e^(2 v*) = (1 - rho r)/(1 - rho^2)``;
with ``v = v* + vt`` it becomes ``P(rho) - k + J(vt, w)``::

    P(rho)   = (k/2) log(1 - rho^2) - k log(1 - rho r),
    J(vt, w) = -k (e^(-2 vt) - 1 + 2 vt) - 2k e^(-2 vt) sinh^2(w) / (1 - rho r)   (<= 0).

With the prior terms ``Pi = log p(sigma1) + log p(sigma2) + u1 + u2`` (the ``u_j``
from ``d sigma_j = sigma_j du_j``; zero for ``1/sigma``) and the mean factor, the
marginal likelihood of rho is, up to a constant common to every rho::

    m(rho) = e^P(rho) * 2 * s_v s_w(rho) * integral integral exp(G(x, y)) dx dy,
    G = J + Pi + log N2(xbar | m0, Sigma/n + D),

in the scaled coordinates ``vt = s_v x``, ``w = s_w y`` with ``s_v = 1/(2 sqrt k)``
and ``s_w = sqrt((1 - rho r)/(4k))``, where the curvature of ``J`` at its maximum
is -1 in both directions. Under reference priors the double integral is known in
closed form: integrating ``vt`` gives a Gamma function and leaves
``(1 - rho^2)^(k/2) * integral (cosh t - rho r)^-k dt``, Jeffreys' kernel
(``reportgen.exact``); the tests use this.

Numerical route
---------------
* For each rho on a set of nodes the maximum of ``G`` is found by Newton's
  method (finite differences), and ``e^G`` is summed with the trapezoidal rule
  on a box around it. Each axis is linear over 4 conditional SDs (from the
  curvature at the maximum) and stretched like ``sinh`` beyond, which keeps
  the point count small also where the tails in ``w`` look polynomial (small
  n with ``rho r`` near 1). The step is at most 0.8 conditional SDs, and
  ``0.17 sqrt(2k)`` at small n, where the integrand's strip of analyticity is
  narrower; the integrand is smooth with exponentially decaying tails, so the
  rule converges geometrically. The box starts from the extent of the
  reference-prior integrand (known in closed form) and of the Gaussian
  approximation, and is widened until ``G`` on its edges is below
  ``exp(-36)`` of its peak. With the same prior on both variables ``G`` is
  even in ``w`` and only ``w >= 0`` is summed.
* ``log`` of the double integral is an O(1), smooth function of
  ``zeta = atanh(rho)``; a cubic spline carries it from the nodes (spaced at
  most 0.12 in zeta, at least 33) to a uniform grid of ``grid_size`` points,
  where ``P`` (as a difference from its value at ``atanh(r)``, formed without
  cancellation near there), ``log s_w``, the prior of rho and the Jacobian
  ``1 - rho^2`` are added exactly. Under proper SD priors the spline may run
  through the integral minus ``G(0, 0)`` (the priors at the reference
  maximum), which takes most of the fast change in the tails. Its error is
  estimated from the spline through every other node; the node spacing is
  halved (up to twice) until that estimate, times the relative density, is
  below 2e-7. The zeta range is first placed with a few nodes where the log
  density is within 50 of its maximum, then computed with the full set.
* ``log_bf10`` is ``log integral prior(rho) m(rho) drho - log m(0)``, with
  ``m(0)`` from its own node at ``rho = 0``.
* ``truncation`` (largest integrand on the edge of any range, relative to its
  peak) and ``interpolation_error`` are kept; ``reliable`` is false only for
  priors in extreme conflict with the data.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike
from scipy import interpolate, special

from reportgen.data import SufficientStats
from reportgen.exact import ExactPosterior
from reportgen.models.base import prior_values
from reportgen.spec import Priors

__all__ = ["ReferencePosterior", "reference_posterior"]

MIN_PAIRS = 4
_LOG_DROP_RHO = 50.0  # the zeta grid covers where the log density is within this of its maximum
_LOG_DROP_SD = 36.0  # the box over the standard deviations: edge values below exp(-this) of the peak
_INITIAL_HALF_WIDTH = 60.0  # first zeta range: atanh(r) +/- this many 1/sqrt(n - 3)
_Z_LIMIT = 30.0
_MAX_NODE_SPACING = 0.12  # in zeta
_MIN_NODES = 33
_PLACEMENT_NODE_SPACING = 0.3  # the first, placing passes: fewer nodes and grid points
_PLACEMENT_MIN_NODES = 17
_PLACEMENT_GRID = 1001
_MAX_PLACEMENTS = 12
_UNAVAILABLE = "the exact reference posterior could not be computed: the priors are too far from the data"
_RELIABLE_TRUNCATION = 1e-8
_RELIABLE_INTERPOLATION = 1e-5
_INTERPOLATION_TOL = 2e-7  # estimated error of the interpolated log density, weighted by the density
_MAX_REFINEMENTS = 2
_STEP_GAUSSIAN = 0.8  # trapezoid step, in conditional SDs, for a near-Gaussian integrand
_STEP_STRIP = 0.17  # ... times sqrt(2k): the narrower analytic strip at small k
_MAX_BOX_PASSES = 12
_BOX_GROWTH = 1.6
_SINH_WIDTH = 4.0  # the box axes are linear over this many conditional SDs, then stretched
_CHUNK_POINTS = 1_500_000  # evaluate at most this many (node, x, y) points at once
_EXP_CAP = 300.0  # exponents are capped here: such points lie far outside every box's mass
_NEWTON_STEPS = 80
_FD_STEP = 1e-2  # finite-difference step in the scaled coordinates (curvature there is about -1)


@dataclass(frozen=True, eq=False)
class ReferencePosterior:
    """Exact marginal posterior of rho under the priors of a sampler run of the normal model.

    Build it with :func:`reference_posterior`. Its arrays and summaries have the
    names and meaning of those of :class:`reportgen.exact.ExactPosterior`, so
    either can be used where a posterior of rho is read; the summaries are
    computed by that class from this grid.

    Attributes
    ----------
    n : int
        Number of complete pairs.
    r : float
        Sample Pearson correlation.
    one_minus_abs_r : float
        ``1 - |r|`` as used (from the statistics when they carry it).
    prior_a, prior_b : float
        Shapes of the stretched Beta prior on rho.
    structure : str
        The nuisance prior families, ``"<means>+<sds>"`` as in ``models.base.prior_values``.
    z : numpy.ndarray
        Uniform grid of ``atanh(rho)`` covering where the density is within ``exp(-50)`` of its maximum.
    rho : numpy.ndarray
        ``tanh(z)``.
    density : numpy.ndarray
        Normalised posterior density of rho at ``rho``.
    z_density : numpy.ndarray
        Normalised posterior density of ``atanh(rho)`` at ``z``.
    log_bf10 : float
        Natural log of the Bayes factor of rho ~ prior against rho = 0, the
        nuisance parameters having the same priors under both.
    truncation : float
        Largest integrand value on the edge of any integration range, relative to
        that range's peak (about ``exp(-36)`` or less when all went well).
    interpolation_error : float
        Estimated largest error of the log density from interpolating the integral
        over the SDs between nodes, times the density relative to its peak.
    """

    n: int
    r: float
    one_minus_abs_r: float
    prior_a: float
    prior_b: float
    structure: str
    z: np.ndarray
    rho: np.ndarray
    density: np.ndarray
    z_density: np.ndarray
    log_bf10: float
    truncation: float
    interpolation_error: float
    _grid: ExactPosterior = field(repr=False)

    @property
    def reliable(self) -> bool:
        """Whether the integration ranges held the mass and the interpolation was smooth.

        False only for priors in extreme conflict with the data (say a mean prior thousands of
        its own SDs away from the sample mean at large n): then do not compare with the result.
        """
        return self.truncation <= _RELIABLE_TRUNCATION and self.interpolation_error <= _RELIABLE_INTERPOLATION

    @property
    def mean(self) -> float:
        """Posterior mean of rho."""
        return self._grid.mean

    @property
    def sd(self) -> float:
        """Posterior standard deviation of rho."""
        return self._grid.sd

    @property
    def median(self) -> float:
        """Posterior median of rho."""
        return self._grid.median

    def cdf(self, x: ArrayLike) -> float | np.ndarray:
        """Posterior probability that rho <= x (see ``ExactPosterior.cdf``)."""
        return self._grid.cdf(x)

    def sf(self, x: ArrayLike) -> float | np.ndarray:
        """Posterior probability that rho > x, accurate also when tiny (see ``ExactPosterior.sf``)."""
        return self._grid.sf(x)

    def quantile(self, q: ArrayLike) -> float | np.ndarray:
        """Posterior quantile of rho for probabilities in [0, 1] (see ``ExactPosterior.quantile``)."""
        return self._grid.quantile(q)

    def prob_below(self, t: float) -> float:
        """Posterior probability that rho < t."""
        return self._grid.prob_below(t)

    def prob_above(self, t: float) -> float:
        """Posterior probability that rho > t."""
        return self._grid.prob_above(t)

    def prob_between(self, lower: float, upper: float) -> float:
        """Posterior probability that ``lower < rho < upper`` (ValueError if ``lower > upper``)."""
        return self._grid.prob_between(lower, upper)

    def hdi(self, mass: float = 0.95) -> tuple[float, float]:
        """Highest-density interval of rho holding ``mass`` (default 0.95)."""
        return self._grid.hdi(mass)

    def density_at(self, x: ArrayLike) -> float | np.ndarray:
        """Posterior density of rho at ``x``, interpolated from the grid (0 off the grid)."""
        return self._grid.density_at(x)


@dataclass(frozen=True)
class _Setup:
    """The pair's numbers and priors on the standardised scale."""

    k: int
    r: float
    one_minus_abs_r: float
    sd_family: str
    log_sd_scale: np.ndarray  # (2,)
    sd_nu: float
    means_normal: bool
    mean_t: np.ndarray  # (2,) prior location / prior scale
    log_mean_scale: np.ndarray  # (2,)
    rho_a: float
    rho_b: float
    symmetric: bool  # the same prior on both variables: G is even in w
    zeta_ref: float  # atanh(r), limited to the grid's range: P is measured from its value here


@dataclass(frozen=True)
class _Nodes:
    """Per-rho quantities, each of shape (m,)."""

    one_minus_rho: np.ndarray
    one_plus_rho: np.ndarray
    one_minus_rho_r: np.ndarray
    v_star: np.ndarray
    s_w: np.ndarray

    def take(self, index: np.ndarray) -> _Nodes:
        return _Nodes(*(getattr(self, f)[index] for f in self.__dataclass_fields__))


# --------------------------------------------------------------------------- the pieces in rho


def _one_minus_plus(zeta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``1 - tanh(zeta)`` and ``1 + tanh(zeta)`` without cancellation."""
    return 2.0 / (1.0 + np.exp(2.0 * zeta)), 2.0 / (1.0 + np.exp(-2.0 * zeta))


def _nodes(zeta: np.ndarray, setup: _Setup) -> _Nodes:
    one_minus, one_plus = _one_minus_plus(zeta)
    abs_r = abs(setup.r)
    # 1 - rho r as a sum of non-negative terms, accurate when rho r is near 1
    same_sign_end = one_minus if setup.r >= 0.0 else one_plus
    one_minus_rho_r = setup.one_minus_abs_r + abs_r * same_sign_end
    log_1mrr = np.log(one_minus_rho_r)
    v_star = 0.5 * (log_1mrr - np.log(one_minus) - np.log(one_plus))
    s_w = np.sqrt(one_minus_rho_r / (4.0 * setup.k))
    return _Nodes(one_minus, one_plus, one_minus_rho_r, v_star, s_w)


def _powers(zeta: np.ndarray, setup: _Setup) -> np.ndarray:
    """``P(rho) - P(rho_ref)`` at ``rho = tanh(zeta)``, with ``zeta_ref = setup.zeta_ref``.

    ``P`` is O(n) while its changes over the posterior are O(1), so near the
    reference (``|zeta - zeta_ref| < 1/2``) the difference is formed from
    ``d = zeta - zeta_ref`` directly: ``(1 + e^(2 zeta))/(1 + e^(2 zeta_ref)) =
    1 + (1 + rho_ref)/2 expm1(2d)``, likewise for ``1 + rho`` with ``-d``, and
    ``rho - rho_ref = sinh(d) sqrt((1 - rho^2)(1 - rho_ref^2))``
    (``tanh a - tanh b = sinh(a - b) / (cosh a cosh b)``). Farther away the
    two values are subtracted (the density is negligible there at large n).
    """
    k = setup.k
    nd, ref = _nodes(zeta, setup), _nodes(np.array([setup.zeta_ref]), setup)

    def direct(part: _Nodes) -> np.ndarray:
        return 0.5 * k * (np.log(part.one_minus_rho) + np.log(part.one_plus_rho)) - k * np.log(part.one_minus_rho_r)

    out = direct(nd) - direct(ref)[0]
    d = zeta - setup.zeta_ref
    near = np.abs(d) < 0.5
    if np.any(near):
        dn = d[near]
        ref_minus, ref_plus, ref_minus_r = ref.one_minus_rho[0], ref.one_plus_rho[0], ref.one_minus_rho_r[0]
        log_minus = -np.log1p(0.5 * ref_plus * np.expm1(2.0 * dn))
        log_plus = -np.log1p(0.5 * ref_minus * np.expm1(-2.0 * dn))
        rho_diff = np.sinh(dn) * np.sqrt(nd.one_minus_rho[near] * nd.one_plus_rho[near] * ref_minus * ref_plus)
        log_minus_r = np.log1p(-setup.r * rho_diff / ref_minus_r)
        out[near] = 0.5 * k * (log_minus + log_plus) - k * log_minus_r
    return out


def _log_rho_part(zeta: np.ndarray, setup: _Setup) -> np.ndarray:
    """log[prior(rho) (1 - rho^2) e^(P(rho) - P(rho_ref)) s_w(rho)]: the exactly known part of the zeta density."""
    nd = _nodes(zeta, setup)
    log_1mr2 = np.log(nd.one_minus_rho) + np.log(nd.one_plus_rho)
    # stretched Beta(a, b) on [-1, 1]: u = (1 + rho)/2 ~ Beta(a, b), density halved (common practice)
    log_prior = (special.xlogy(setup.rho_a - 1.0, 0.5 * nd.one_plus_rho)
                 + special.xlogy(setup.rho_b - 1.0, 0.5 * nd.one_minus_rho)
                 - math.log(2.0) - special.betaln(setup.rho_a, setup.rho_b))
    return log_prior + log_1mr2 + _powers(zeta, setup) + np.log(nd.s_w)


# --------------------------------------------------------------------------- the integrand over the SDs


def _log_sd_prior(u: np.ndarray, setup: _Setup, j: int) -> np.ndarray:
    """log p(sigma_j) + u_j at sigma_j = e^u_j, normalised (the 1/sigma prior gives 0)."""
    if setup.sd_family == "jeffreys":
        return np.zeros_like(u)
    z = np.minimum(2.0 * (u - setup.log_sd_scale[j]), _EXP_CAP)  # log (sigma/s)^2
    if setup.sd_family == "half_normal":
        const = 0.5 * math.log(2.0 / math.pi) - setup.log_sd_scale[j]
        return const + u - 0.5 * np.exp(z)
    nu = setup.sd_nu
    const = (math.log(2.0) + special.gammaln(0.5 * (nu + 1.0)) - special.gammaln(0.5 * nu)
             - 0.5 * math.log(nu * math.pi) - setup.log_sd_scale[j])
    return const + u - 0.5 * (nu + 1.0) * np.logaddexp(0.0, z - math.log(nu))


def _log_mean_factor(u1: np.ndarray, u2: np.ndarray, rho_1m2: np.ndarray, rho: np.ndarray,
                     setup: _Setup) -> np.ndarray:
    """log N2(0 | m0, Sigma/n + D) with ``a_j = sigma_j^2 / (n d_j^2)`` and ``t_j = m0_j / d_j``.

    ``det(Sigma/n + D) = d1^2 d2^2 (1 + a1 + a2 + (1 - rho^2) a1 a2)`` (all terms
    positive), and the quadratic form is
    ``(t1^2 (1 + a2) + t2^2 (1 + a1) - 2 rho t1 t2 sqrt(a1 a2)) / (1 + a1 + a2 + (1 - rho^2) a1 a2)``.
    """
    log_n = math.log(setup.k + 1)
    log_a1 = np.minimum(2.0 * (u1 - setup.log_mean_scale[0]) - log_n, _EXP_CAP)
    log_a2 = np.minimum(2.0 * (u2 - setup.log_mean_scale[1]) - log_n, _EXP_CAP)
    a1, a2 = np.exp(log_a1), np.exp(log_a2)
    q = 1.0 + a1 + a2 + rho_1m2 * a1 * a2
    t1, t2 = setup.mean_t
    quad = (t1 * t1 * (1.0 + a2) + t2 * t2 * (1.0 + a1)
            - 2.0 * rho * t1 * t2 * np.exp(0.5 * (log_a1 + log_a2))) / q
    const = -math.log(2.0 * math.pi) - float(np.sum(setup.log_mean_scale))
    return const - 0.5 * np.log(q) - 0.5 * quad


def _log_integrand(x: np.ndarray, y: np.ndarray, nd: _Nodes, setup: _Setup) -> np.ndarray:
    """G(x, y) for each node; ``x`` and ``y`` have the nodes on their first axis."""
    shape = (-1,) + (1,) * (max(np.ndim(x), np.ndim(y)) - 1)
    s_w = nd.s_w.reshape(shape)
    k = setup.k
    vt = x / (2.0 * math.sqrt(k))
    w = y * s_w
    decay = np.exp(np.minimum(-2.0 * vt, _EXP_CAP))
    # 2k sinh^2(w) / (1 - rho r) = sinh^2(y s_w) / (2 s_w^2), which tends to y^2/2 without cancellation
    sinh_w = np.sinh(np.clip(w, -0.5 * _EXP_CAP, 0.5 * _EXP_CAP))
    g = -k * (np.expm1(np.minimum(-2.0 * vt, _EXP_CAP)) + 2.0 * vt) - decay * sinh_w * sinh_w / (2.0 * s_w * s_w)
    if setup.sd_family == "jeffreys" and not setup.means_normal:
        return g
    centre = nd.v_star.reshape(shape) + vt
    u1, u2 = centre + w, centre - w
    g = g + _log_sd_prior(u1, setup, 0) + _log_sd_prior(u2, setup, 1)
    if setup.means_normal:
        one_minus, one_plus = nd.one_minus_rho.reshape(shape), nd.one_plus_rho.reshape(shape)
        g = g + _log_mean_factor(u1, u2, one_minus * one_plus, 0.5 * (one_plus - one_minus), setup)
    return g


def _derivatives(x: np.ndarray, y: np.ndarray, nd: _Nodes, setup: _Setup, step: float
                 ) -> tuple[np.ndarray, ...]:
    """Value, gradient and Hessian of G by central differences (y fixed at 0 when symmetric)."""
    f = lambda dx, dy: _log_integrand(x + dx, y + dy, nd, setup)  # noqa: E731
    f0, fxp, fxm = f(0.0, 0.0), f(step, 0.0), f(-step, 0.0)
    gx = (fxp - fxm) / (2.0 * step)
    hxx = (fxp - 2.0 * f0 + fxm) / step**2
    if setup.symmetric:
        fyp = f(0.0, step)
        hyy = 2.0 * (fyp - f0) / step**2  # even in y
        return f0, gx, np.zeros_like(gx), hxx, np.zeros_like(hxx), hyy
    fyp, fym = f(0.0, step), f(0.0, -step)
    gy = (fyp - fym) / (2.0 * step)
    hyy = (fyp - 2.0 * f0 + fym) / step**2
    hxy = (f(step, step) - f(step, -step) - f(-step, step) + f(-step, -step)) / (4.0 * step**2)
    return f0, gx, gy, hxx, hxy, hyy


def _modes(nd: _Nodes, setup: _Setup) -> tuple[np.ndarray, ...]:
    """Maximum of G for each node by damped Newton steps from the reference-prior maximum (0, 0)."""
    m = nd.s_w.size
    x, y = np.zeros(m), np.zeros(m)
    active = np.ones(m, dtype=bool)
    for _ in range(_NEWTON_STEPS):
        idx = np.flatnonzero(active)
        if idx.size == 0:
            break
        sub = nd.take(idx)
        f0, gx, gy, hxx, hxy, hyy = _derivatives(x[idx], y[idx], sub, setup, _FD_STEP)
        det = hxx * hyy - hxy * hxy
        newton = (hxx < 0.0) & (det > 0.0)
        safe_det = np.where(newton, det, 1.0)
        # Newton where G is locally concave, else a gradient step of moderate length
        dx = np.where(newton, -(hyy * gx - hxy * gy) / safe_det, gx / np.maximum(np.abs(hxx), 1.0))
        dy = np.where(newton, -(hxx * gy - hxy * gx) / safe_det, gy / np.maximum(np.abs(hyy), 1.0))
        length = np.hypot(dx, dy)
        shrink = np.minimum(1.0, 50.0 / np.maximum(length, 1e-300))
        dx, dy = dx * shrink, dy * shrink
        # a predicted gain this small is rounding: the mode is found to well within the box's step
        done = 0.5 * np.abs(gx * dx + gy * dy) < 1e-10
        t = np.ones(idx.size)
        pending = ~done
        for _ in range(30):
            trial = _log_integrand(x[idx] + t * dx, y[idx] + t * dy, sub, setup)
            pending = pending & ~(trial >= f0)
            if not pending.any():
                break
            t = np.where(pending, 0.5 * t, t)
        t = np.where(pending, 0.0, t)
        x[idx] += t * dx
        y[idx] += t * dy
        active[idx] = (np.hypot(t * dx, t * dy) > 1e-6) & ~pending & ~done
    _, _, _, hxx, hxy, hyy = _derivatives(x, y, nd, setup, 0.1)
    return x, y, hxx, hxy, hyy


def _reference_extents(nd: _Nodes, setup: _Setup) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Where the reference-prior integrand J drops by _LOG_DROP_SD: x below and above 0, and |y|.

    Along ``w = 0``, ``J = -k (e^t - t - 1)`` with ``t = -2 vt``, and ``e^t - t - 1 = c``
    solves to ``t = -(1 + c) - W(-e^(-(1 + c)))`` on the two real branches of
    Lambert's W. The largest ``J`` at given ``w`` is ``-k log(1 + 2 sinh^2(w)/(1 - rho r))``.
    """
    c = _LOG_DROP_SD / setup.k
    arg = -math.exp(-(1.0 + c))
    t_left = -(1.0 + c) - float(np.real(special.lambertw(arg, -1)))  # t > 0: small sigma
    t_right = -(1.0 + c) - float(np.real(special.lambertw(arg, 0)))  # t < 0: large sigma
    root_k = math.sqrt(setup.k)
    w = np.arcsinh(np.sqrt(0.5 * nd.one_minus_rho_r * math.expm1(c)))
    return np.full(nd.s_w.size, abs(t_left) * root_k), np.full(nd.s_w.size, abs(t_right) * root_k), w / nd.s_w


def _box_sums(nd: _Nodes, setup: _Setup, centre: tuple[np.ndarray, np.ndarray],
              scales: tuple[np.ndarray, np.ndarray], box: np.ndarray, step: float
              ) -> tuple[np.ndarray, np.ndarray]:
    """Trapezoidal log integral of e^G over each node's box, and the largest edge value minus the peak.

    Each axis is ``x = x0 + c b sinh(t/b)`` with ``c`` the conditional SD and ``b = _SINH_WIDTH``:
    linear over the bulk, and exponentially stretched in the tails, so the polynomial-looking
    tails in ``w`` at small n when ``rho r`` is near 1 need tens of points, not thousands. ``box``
    is (m, 4): extents in ``t`` left, right, below, above (below unused when symmetric).
    """
    m = nd.s_w.size
    x0, y0 = centre
    scale_x, scale_y = scales
    left, right, below, above = box.T
    if setup.symmetric:
        below = np.zeros(m)
    nx = int(np.max(np.ceil((left + right) / step))) + 1
    ny = int(np.max(np.ceil((below + above) / step))) + 1
    unit_x, unit_y = np.linspace(0.0, 1.0, nx), np.linspace(0.0, 1.0, ny)
    b = _SINH_WIDTH
    log_total, edge = np.empty(m), np.empty(m)
    chunk = max(1, _CHUNK_POINTS // (nx * ny))
    for start in range(0, m, chunk):
        part = slice(start, min(start + chunk, m))
        sub = nd.take(np.arange(m)[part])
        tx = -left[part][:, None] + (left[part] + right[part])[:, None] * unit_x
        ty = -below[part][:, None] + (below[part] + above[part])[:, None] * unit_y
        xs = x0[part][:, None] + scale_x[part][:, None] * b * np.sinh(tx / b)
        ys = y0[part][:, None] + scale_y[part][:, None] * b * np.sinh(ty / b)
        # dx = c cosh(t/b) dt, times the trapezoid step in t
        wx = scale_x[part][:, None] * np.cosh(tx / b) * ((left[part] + right[part]) / (nx - 1))[:, None]
        wy = scale_y[part][:, None] * np.cosh(ty / b) * ((below[part] + above[part]) / (ny - 1))[:, None]
        if setup.symmetric:
            wy[:, 1:] *= 2.0  # the mirror image w < 0
        g = _log_integrand(xs[:, :, None], ys[:, None, :], sub, setup)
        peak = g.max(axis=(1, 2))
        summed = np.einsum("mij,mi,mj->m", np.exp(g - peak[:, None, None]), wx, wy)
        log_total[part] = peak + np.log(summed)
        edges = [g[:, 0, :].max(axis=1), g[:, -1, :].max(axis=1), g[:, :, -1].max(axis=1)]
        if not setup.symmetric:
            edges.append(g[:, :, 0].max(axis=1))
        edge[part] = np.max(edges, axis=0) - peak
    return log_total, edge


def _log_sd_integral(zeta: np.ndarray, setup: _Setup) -> tuple[np.ndarray, float]:
    """log of the double integral of e^G over the scaled SDs at each zeta, and the worst edge ratio."""
    nd = _nodes(zeta, setup)
    x0, y0, hxx, hxy, hyy = _modes(nd, setup)
    concave = (hxx < 0.0) & (hyy < 0.0) & (hxx * hyy - hxy * hxy > 0.0)
    hxx, hyy = np.where(concave, hxx, -1.0), np.where(concave, hyy, -1.0)
    hxy = np.where(concave, hxy, 0.0)
    det = hxx * hyy - hxy * hxy
    spread = math.sqrt(2.0 * _LOG_DROP_SD)
    gauss_x, gauss_y = spread * np.sqrt(-hyy / det), spread * np.sqrt(-hxx / det)
    ref_left, ref_right, ref_y = _reference_extents(nd, setup)
    scale_x, scale_y = 1.0 / np.sqrt(-hxx), 1.0 / np.sqrt(-hyy)
    # J alone has curvature -1 at its maximum; where the priors make G narrower (far from the data's
    # values of rho), its tails shrink about in proportion
    narrow_x, narrow_y = np.minimum(1.0, scale_x), np.minimum(1.0, scale_y)
    extents = np.stack([np.maximum(gauss_x, ref_left * narrow_x), np.maximum(gauss_x, ref_right * narrow_x),
                        np.maximum(gauss_y, ref_y * narrow_y), np.maximum(gauss_y, ref_y * narrow_y)], axis=1)
    in_sd = extents / np.stack([scale_x, scale_x, scale_y, scale_y], axis=1)
    box = 1.05 * _SINH_WIDTH * np.arcsinh(in_sd / _SINH_WIDTH)
    step = min(_STEP_GAUSSIAN, _STEP_STRIP * math.sqrt(2.0 * setup.k))
    log_total = np.empty(zeta.size)
    edge = np.empty(zeta.size)
    todo = np.arange(zeta.size)
    for _ in range(_MAX_BOX_PASSES):
        values, edges = _box_sums(nd.take(todo), setup, (x0[todo], y0[todo]), (scale_x[todo], scale_y[todo]),
                                  box[todo], step)
        log_total[todo], edge[todo] = values, edges
        failed = edges > -_LOG_DROP_SD
        if not failed.any():
            break
        todo = todo[failed]
        box[todo] *= _BOX_GROWTH  # widen every side of a failing box: cheap, and rarely needed twice
    return log_total, float(np.exp(np.max(edge)))


# --------------------------------------------------------------------------- interpolation in zeta


def _log_at_reference_mode(zeta: np.ndarray, setup: _Setup) -> np.ndarray:
    """G at the reference-prior maximum (x = y = 0): the prior terms there, known at any zeta cheaply."""
    nd = _nodes(zeta, setup)
    zero = np.zeros(zeta.size)
    return _log_integrand(zero, zero, nd, setup)


@dataclass(frozen=True)
class _Interpolant:
    """log of the double integral over the SDs as a function of zeta, from its values at nodes.

    A cubic spline runs through ``values - base`` at the nodes, where ``base`` is either 0 or
    :func:`_log_at_reference_mode` (added back exactly wherever it is evaluated), whichever is
    estimated to interpolate better: under proper SD priors most of the fast change of the
    integral in the tails of zeta is the prior at the reference maximum.
    """

    nodes: np.ndarray
    spline: interpolate.CubicSpline
    with_base: bool
    truncation: float
    error: float  # estimated largest interpolation error in log density, times density / peak density

    def __call__(self, zeta: np.ndarray, setup: _Setup) -> np.ndarray:
        out = self.spline(zeta)
        return out + _log_at_reference_mode(zeta, setup) if self.with_base else out


def _interpolation_error(nodes: np.ndarray, values: np.ndarray, weights: np.ndarray) -> float:
    """Error of the spline through ``values``, estimated as 1/16 of that of the spline through every
    other node at the nodes left out (the error of a cubic spline falls as the 4th power of the step)."""
    coarse = interpolate.CubicSpline(nodes[::2], values[::2])
    return float(np.max(np.abs(coarse(nodes[1::2]) - values[1::2]) * weights[1::2]) / 16.0)


def _no_false_peak(nodes: np.ndarray, fit: np.ndarray, setup: _Setup, log_f: np.ndarray) -> bool:
    """Whether the log density from the spline through ``fit`` plus the base stays near its node
    values between the nodes: a smooth log density overshoots its largest node value by far less
    than 1 at this node spacing, while a spline ringing in the far tails can make a false peak."""
    step = nodes[1] - nodes[0]
    between = (nodes[:-1, None] + step * np.array([0.25, 0.5, 0.75])).ravel()
    values = (interpolate.CubicSpline(nodes, fit)(between) + _log_at_reference_mode(between, setup)
              + _log_rho_part(between, setup))
    return bool(np.max(values) <= np.max(log_f) + 1.0)


def _log_sd_interpolant(lo: float, hi: float, setup: _Setup, *, final: bool) -> _Interpolant:
    """Nodes over [lo, hi] and the spline through the SD integrals there; refined where the final one is rough."""
    spacing, least = (_MAX_NODE_SPACING, _MIN_NODES) if final else (_PLACEMENT_NODE_SPACING, _PLACEMENT_MIN_NODES)
    count = max(least, math.ceil((hi - lo) / spacing) + 1)
    nodes = np.linspace(lo, hi, count + (count + 1) % 2)  # odd, so that every other node keeps both ends
    values, truncation = _log_sd_integral(nodes, setup)
    for refinement in range(_MAX_REFINEMENTS + 1):
        log_f = _log_rho_part(nodes, setup) + values
        weights = np.exp(log_f - log_f.max())
        base = _log_at_reference_mode(nodes, setup)
        errors = (_interpolation_error(nodes, values, weights), _interpolation_error(nodes, values - base, weights))
        # the base only over a placed range: over a first, wide one it varies by thousands and the
        # spline through the difference can ring into a false peak
        with_base = final and errors[1] < errors[0] and _no_false_peak(nodes, values - base, setup, log_f)
        error = errors[1] if with_base else errors[0]
        if not final or error <= _INTERPOLATION_TOL or refinement == _MAX_REFINEMENTS:
            break
        # halve the spacing: only the midpoints are new
        mids = 0.5 * (nodes[1:] + nodes[:-1])
        mid_values, mid_truncation = _log_sd_integral(mids, setup)
        merged = np.empty(2 * nodes.size - 1)
        merged[0::2], merged[1::2] = values, mid_values
        nodes = np.linspace(lo, hi, merged.size)
        values, truncation = merged, max(truncation, mid_truncation)
    fit = values - _log_at_reference_mode(nodes, setup) if with_base else values
    return _Interpolant(nodes, interpolate.CubicSpline(nodes, fit), with_base, truncation, error)


# --------------------------------------------------------------------------- the posterior


def _setup(stats: SufficientStats, priors: Priors) -> _Setup:
    n = int(stats.n)
    if n < MIN_PAIRS:
        raise ValueError(f"n must be at least {MIN_PAIRS} complete pairs for the reference posterior, got {n}")
    r = float(stats.sample_r)
    omar = getattr(stats, "one_minus_abs_r", None)
    one_minus_abs_r = float(omar) if omar is not None else 1.0 - abs(r)
    if not (math.isfinite(r) and abs(r) <= 1.0 and 0.0 < one_minus_abs_r <= 1.0):
        raise ValueError(f"the sample correlation must lie strictly between -1 and 1, got {r!r} "
                         f"(1 - |r| = {one_minus_abs_r!r})")
    _, values = prior_values(stats, priors)
    sd_family, means_normal = priors.sds.family, priors.means.family == "normal"
    sd_scale = np.asarray(values.get("sd_scale", np.ones(2)), dtype=float)
    mean_loc = np.asarray(values.get("mean_loc", np.zeros(2)), dtype=float)
    mean_scale = np.asarray(values.get("mean_scale", np.ones(2)), dtype=float)
    symmetric = bool(sd_scale[0] == sd_scale[1] and (not means_normal or (
        mean_scale[0] == mean_scale[1] and abs(mean_loc[0]) == abs(mean_loc[1]))))
    # atanh(r) from 1 - |r|, which keeps the digits a rounded r near +/-1 has lost
    zeta_ref = math.copysign(0.5 * (math.log1p(1.0 - one_minus_abs_r) - math.log(one_minus_abs_r)), r)
    return _Setup(
        zeta_ref=float(np.clip(zeta_ref, -_Z_LIMIT, _Z_LIMIT)), k=n - 1, r=r, one_minus_abs_r=one_minus_abs_r,
        sd_family=sd_family,
        log_sd_scale=np.log(sd_scale), sd_nu=float(values.get("sd_nu", 1.0)), means_normal=means_normal,
        mean_t=mean_loc / mean_scale, log_mean_scale=np.log(mean_scale),
        rho_a=float(values["rho_a"]), rho_b=float(values["rho_b"]), symmetric=symmetric,
    )


def _kept_range(log_f: np.ndarray) -> tuple[int, int]:
    if not np.all(np.isfinite(log_f)):
        raise ValueError(_UNAVAILABLE)
    kept = np.flatnonzero(log_f >= log_f.max() - _LOG_DROP_RHO)
    return int(kept[0]), int(kept[-1])


def _initial_range(setup: _Setup, size: int) -> tuple[float, float]:
    """Where the exactly known part alone (nearly the reference-prior posterior) has its mass."""
    centre = setup.zeta_ref
    half = _INITIAL_HALF_WIDTH / math.sqrt(setup.k - 2)
    lo, hi = max(centre - half, -_Z_LIMIT), min(centre + half, _Z_LIMIT)
    for _ in range(16):
        grid = np.linspace(lo, hi, size)
        first, last = _kept_range(_log_rho_part(grid, setup))
        if first == 0 and lo > -_Z_LIMIT or last == size - 1 and hi < _Z_LIMIT:
            width = hi - lo
            lo = max(lo - width, -_Z_LIMIT) if first == 0 else lo
            hi = min(hi + width, _Z_LIMIT) if last == size - 1 else hi
            continue
        new_lo, new_hi = float(grid[max(first - 1, 0)]), float(grid[min(last + 1, size - 1)])
        if (new_hi - new_lo) > 0.5 * (hi - lo):
            return new_lo, new_hi
        lo, hi = new_lo, new_hi
    return lo, hi


def reference_posterior(stats: SufficientStats, priors: Priors, grid_size: int = 4001) -> ReferencePosterior:
    """Exact marginal posterior of rho under the spec's priors for the bivariate-normal model.

    Parameters
    ----------
    stats : SufficientStats
        The pair's sufficient statistics (at least 4 complete pairs, ``|r| < 1``).
    priors : Priors
        The pair's priors, exactly as the sampler receives them.
    grid_size : int, default 4001
        Number of points of the uniform grid in ``atanh(rho)``.

    Returns
    -------
    ReferencePosterior

    Raises
    ------
    ValueError
        For fewer than 4 pairs, ``|r| >= 1`` or ``grid_size < 101``, and when priors in
        extreme conflict with the data leave no range to integrate over (see also
        ``ReferencePosterior.reliable``).
    """
    if isinstance(grid_size, bool) or int(grid_size) != grid_size or grid_size < 101:
        raise ValueError("grid_size must be an integer of at least 101")
    grid_size = int(grid_size)
    setup = _setup(stats, priors)
    lo, hi = _initial_range(setup, 1001)
    log_zero, zero_edge = _log_sd_integral(np.zeros(1), setup)
    coarse = True  # place the range with a few nodes first, then compute it with the full set
    for attempt in range(_MAX_PLACEMENTS):
        last_attempt = attempt == _MAX_PLACEMENTS - 1
        if not hi - lo > 1e-12 * max(1.0, abs(lo)):
            raise ValueError(_UNAVAILABLE)
        final = not coarse or last_attempt
        interpolant = _log_sd_interpolant(lo, hi, setup, final=final)
        size = grid_size if final else _PLACEMENT_GRID
        zeta = np.linspace(lo, hi, size)
        log_f = _log_rho_part(zeta, setup) + interpolant(zeta, setup)
        if last_attempt:
            break
        first, last = _kept_range(log_f)
        width = hi - lo
        grow_lo, grow_hi = first == 0 and lo > -_Z_LIMIT, last == size - 1 and hi < _Z_LIMIT
        if grow_lo or grow_hi:
            # priors far from the data can move the posterior well away from the data's values
            lo = max(lo - width, -_Z_LIMIT) if grow_lo else float(zeta[max(first - 1, 0)])
            hi = min(hi + width, _Z_LIMIT) if grow_hi else float(zeta[min(last + 1, size - 1)])
            continue
        new_lo, new_hi = float(zeta[max(first - 1, 0)]), float(zeta[min(last + 1, size - 1)])
        if new_hi - new_lo < 0.6 * width:
            lo, hi = new_lo, new_hi  # the priors narrowed the posterior: place the nodes again
            continue
        if not final:
            coarse = False
            continue
        break
    # the grid itself covers just the kept range (beyond it the density may underflow)
    first, last = _kept_range(log_f)
    zeta = np.linspace(float(zeta[max(first - 1, 0)]), float(zeta[min(last + 1, zeta.size - 1)]), grid_size)
    log_f = _log_rho_part(zeta, setup) + interpolant(zeta, setup)
    truncation = interpolant.truncation
    edge_ratio = math.exp(max(log_f[0], log_f[-1]) - log_f.max())
    step = float(zeta[1] - zeta[0])
    peak = float(log_f.max())
    scaled = np.exp(log_f - peak)
    log_mass = math.log(step * (float(np.sum(scaled)) - 0.5 * (scaled[0] + scaled[-1])))
    # log m(rho) = P(rho) + log s_w(rho) + log_sd(rho) (+ a constant), with P(0) = 0 and the
    # prior of rho left out; log_f holds P - P(rho_ref)
    ref = _nodes(np.array([setup.zeta_ref]), setup)
    powers_ref = float(0.5 * setup.k * (np.log(ref.one_minus_rho[0]) + np.log(ref.one_plus_rho[0]))
                       - setup.k * np.log(ref.one_minus_rho_r[0]))
    log_m0 = float(log_zero[0]) + 0.5 * math.log(1.0 / (4.0 * setup.k))
    log_bf10 = peak + log_mass + powers_ref - log_m0
    one_minus, one_plus = _one_minus_plus(zeta)
    log_z_density = (log_f - peak) - log_mass
    arrays = {
        "z": zeta,
        "rho": np.tanh(zeta),
        "density": np.exp(log_z_density - np.log(one_minus) - np.log(one_plus)),
        "z_density": np.exp(log_z_density),
    }
    for values in arrays.values():
        values.setflags(write=False)
    grid = ExactPosterior(n=setup.k + 1, r=setup.r, prior_a=setup.rho_a, prior_b=setup.rho_b,
                          log_bf10=log_bf10, **arrays)
    return ReferencePosterior(
        n=setup.k + 1, r=setup.r, one_minus_abs_r=setup.one_minus_abs_r, prior_a=setup.rho_a,
        prior_b=setup.rho_b, structure=f"{priors.means.family}+{priors.sds.family}",
        log_bf10=log_bf10, truncation=max(truncation, zero_edge, edge_ratio),
        interpolation_error=interpolant.error, _grid=grid, **arrays,
    )
