"""Leave-one-out influence of each row on the posterior median of rho and on the rules' verdicts.

For every row, the posterior of rho is recomputed as if that row were absent, with the exact
marginal posterior under Jeffreys' priors for the means and SDs and a stretched Beta prior on rho
(Jeffreys 1961; Ly, Marsman & Wagenmakers 2018; see ``reportgen/exact.py``). That posterior depends
on the data only through ``(n, r)``, so the work per row is finding its leave-one-out ``r``.

The leave-one-out centred sums come from the full ones by exact downdating (removing a point with
deviation ``d`` from the full mean lowers the centred sum of squares by ``n/(n - 1) d^2``; Chan, Golub
& LeVeque 1983, *The American Statistician* 37(3), the reverse of Welford's 1962 update), so all rows
cost O(n) in total. Where downdating would cancel badly (the row holds almost all of a column's
spread) that row's sums are recomputed from the remaining rows.

This is the case-deletion idea of Cook's distance (Cook 1977, *Technometrics* 19(1)) applied to the
quantity the report states: the posterior median of rho, and each rule's met / not met verdict.

For many rows the exact engine is not called once per row: the median and each rule probability are
smooth, monotone-friendly functions of ``atanh(r)`` for a fixed number of rows, so they are computed on
a grid spanning the leave-one-out ``r`` values (its nodes a small share of the posterior SD apart, so
with many rows, where one row moves r little, a handful suffice) and interpolated with a shape-preserving
cubic (Fritsch & Carlson 1980, *SIAM J. Numer. Anal.* 17(2); scipy's ``PchipInterpolator``). Probabilities are
interpolated on the probit scale, where they are nearly linear. Rows whose interpolated probability
lies within ``RECHECK_MARGIN`` of a rule's cut-off are computed directly, so borderline verdicts never
rest on interpolation.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.interpolate import PchipInterpolator
from scipy.special import ndtr, ndtri

from reportgen import exact
from reportgen.checks import pair_rows
from reportgen.crosscheck import exact_rule_probability
from reportgen.data import sufficient_stats
from reportgen.spec import Rule

DIRECT_MAX_N = 60  # up to this many rows every leave-one-out posterior is computed directly
GRID_POINTS = 41  # at most this many grid nodes in atanh(r) when interpolating
MIN_GRID_POINTS = 5  # at least this many
# Nodes are at most this many posterior SDs of atanh(rho) apart (that SD is about 1/sqrt(n - 3), Fisher
# 1921). Measured against direct exact posteriors at n = 200, 1,000 and 10,000, rho 0.3 and 0.9, one row
# moved 6 SDs out: interpolated medians within 1.1e-6 at half an SD, within 1e-7 at a quarter, with
# probabilities within 2e-7, an order of magnitude inside RECHECK_MARGIN; 5 to 19 nodes in those cases.
NODE_SPACING_SDS = 0.25
NARROW_WIDTH = 1e-6  # a leave-one-out range narrower than this (in atanh(r)) needs only 3 nodes
R_CLIP = 1.0 - 1e-12  # largest |r| of a leave-one-out subsample handed to the exact engine (the data stage's bound)
DOWNDATE_MIN_SHARE = 1e-2  # recompute a row's sums when downdating leaves less than this share of a sum
RECHECK_MARGIN = 1e-5  # interpolated probabilities this close to a cut-off are computed directly
MAX_RECHECKS = 200  # at most this many distinct r values are recomputed that way
_PROBIT_FLOOR = 1e-300  # probabilities are clipped to [floor, 1 - ceiling] before the probit
_PROBIT_CEILING = 1e-16


@dataclass(frozen=True)
class Influence:
    """How much leaving out each single row moves the posterior median of rho and the verdicts."""

    applies: bool  # False when n - 1 < 4 (the exact engine needs >= 4 rows); then arrays are empty
    shifts: np.ndarray  # per row: median without that row minus the median with all rows (nan: r undefined)
    max_shift: float  # max |shift| over rows with a defined shift (nan when not applies)
    threshold: float
    flagged_positions: np.ndarray  # indices into x/y of flagged rows, largest |shift| first (nan first)
    flagged_rows: tuple[int, ...]  # the same rows as input row numbers
    flips: tuple[tuple[int, str], ...]  # (input row number, rule name) per verdict that flips without the row
    median_full: float
    sd_full: float  # posterior SD of rho with all rows (nan when n < 4)


def _centred_sums(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, float, float, float]:
    """Deviations from the means and the centred sums (two passes, for accuracy)."""
    dx = x - np.mean(x)
    dy = y - np.mean(y)
    return dx, dy, float(dx @ dx), float(dy @ dy), float(dx @ dy)


def _correlation_or_nan(sxx: float, syy: float, sxy: float) -> float:
    if sxx <= 0.0 or syy <= 0.0:
        return float("nan")
    return float(np.clip(sxy / np.sqrt(sxx * syy), -1.0, 1.0))


def leave_one_out_r(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Pearson r of the data without row i, for every i; nan where the rest has a constant column."""
    return _full_and_loo_r(np.asarray(x, dtype=float), np.asarray(y, dtype=float))[1]


def _full_and_loo_r(x: np.ndarray, y: np.ndarray) -> tuple[float, np.ndarray]:
    """Pearson r of all rows (nan if a column is constant) and of all rows but each one."""
    n = x.size
    dx, dy, sxx, syy, sxy = _centred_sums(x, y)
    r_full = _correlation_or_nan(sxx, syy, sxy)
    if not np.isfinite(r_full):
        return r_full, np.full(n, np.nan)
    factor = n / (n - 1.0)
    sxx_loo = np.maximum(sxx - factor * dx * dx, 0.0)
    syy_loo = np.maximum(syy - factor * dy * dy, 0.0)
    sxy_loo = sxy - factor * dx * dy
    with np.errstate(divide="ignore", invalid="ignore"):
        r_loo = np.clip(sxy_loo / np.sqrt(sxx_loo * syy_loo), -1.0, 1.0)
    # Cancellation: a row holding nearly all of a column's spread leaves a small difference of
    # large numbers. At most one row per column can do so (n >= 3), so recomputing is cheap.
    fragile = np.flatnonzero((sxx_loo < DOWNDATE_MIN_SHARE * sxx) | (syy_loo < DOWNDATE_MIN_SHARE * syy))
    for i in fragile:
        keep = np.ones(n, dtype=bool)
        keep[i] = False
        _, _, sxx_i, syy_i, sxy_i = _centred_sums(x[keep], y[keep])
        r_loo[i] = _correlation_or_nan(sxx_i, syy_i, sxy_i)
    return r_full, r_loo


def _direct(n: int, r_values: np.ndarray, a: float, b: float,
            rules: Sequence[Rule]) -> tuple[np.ndarray, np.ndarray]:
    """Posterior median and rule probabilities for each r, one exact posterior per value."""
    medians = np.empty(r_values.size)
    probs = np.empty((r_values.size, len(rules)))
    for k, r in enumerate(r_values):
        posterior = exact.exact_posterior(n, float(r), a, b)
        medians[k] = posterior.median
        probs[k] = [exact_rule_probability(posterior, rule) for rule in rules]
    return medians, probs


def _node_count(n: int, width: float) -> int:
    """Grid nodes for a leave-one-out range of ``width`` in atanh(r): few when it is narrow against the
    posterior's spread, which at many rows is most of the time (each row moves r by about 1/n)."""
    if width <= NARROW_WIDTH:
        return 3
    spacing = NODE_SPACING_SDS / np.sqrt(max(n - 3, 1))
    return int(np.clip(np.ceil(width / spacing) + 1, MIN_GRID_POINTS, GRID_POINTS))


def _interpolated(n: int, r_values: np.ndarray, a: float, b: float,
                  rules: Sequence[Rule]) -> tuple[np.ndarray, np.ndarray]:
    """Median and rule probabilities on a grid in atanh(r), interpolated to every r."""
    z = np.arctanh(r_values)
    lo, hi = float(z.min()), float(z.max())
    if hi == lo:
        medians, probs = _direct(n, r_values[:1], a, b, rules)
        return np.full(r_values.size, medians[0]), np.repeat(probs, r_values.size, axis=0)
    nodes = np.linspace(lo, hi, _node_count(n, hi - lo))
    node_r = np.tanh(nodes)
    node_r[0], node_r[-1] = r_values.min(), r_values.max()  # the exact end points
    node_medians, node_probs = _direct(n, node_r, a, b, rules)
    medians = PchipInterpolator(nodes, node_medians)(z)
    probs = np.empty((r_values.size, len(rules)))
    for j in range(len(rules)):
        probit = ndtri(np.clip(node_probs[:, j], _PROBIT_FLOOR, 1.0 - _PROBIT_CEILING))
        probs[:, j] = ndtr(PchipInterpolator(nodes, probit)(z))
    return medians, probs


def _recheck_borderline(n: int, r_values: np.ndarray, medians: np.ndarray, probs: np.ndarray, a: float,
                        b: float, rules: Sequence[Rule]) -> None:
    """Compute directly (in place) the rows whose interpolated probability is near a cut-off."""
    if not rules:
        return
    required = np.array([rule.required_probability for rule in rules])
    closeness = np.min(np.abs(probs - required), axis=1)
    near = np.flatnonzero(closeness < RECHECK_MARGIN)
    if near.size == 0:
        return
    by_closeness = r_values[near[np.argsort(closeness[near], kind="stable")]]
    _, first_seen = np.unique(by_closeness, return_index=True)
    distinct = np.sort(by_closeness[np.sort(first_seen)[:MAX_RECHECKS]])  # the values closest to a cut-off
    exact_medians, exact_probs = _direct(n, distinct, a, b, rules)
    where = np.searchsorted(distinct, r_values[near])
    hit = (where < distinct.size) & (distinct[np.minimum(where, distinct.size - 1)] == r_values[near])
    medians[near[hit]] = exact_medians[where[hit]]
    probs[near[hit]] = exact_probs[where[hit]]


def leave_one_out(x: np.ndarray, y: np.ndarray, row_numbers: np.ndarray, prior_a: float, prior_b: float,
                  rules: Sequence[Rule], threshold: float = 0.1) -> Influence:
    """Shift of rho's posterior median, and verdict flips, when each row alone is left out.

    A row is flagged when ``|shift| > threshold``, when leaving it out flips any rule's verdict (a rule
    is met when its probability is at least ``rule.required_probability``), or when without it one
    column is constant (the correlation then exists only through that row; its shift is nan).
    """
    x, y, row_numbers = pair_rows(x, y, row_numbers)
    if not (np.isfinite(threshold) and threshold > 0.0):
        raise ValueError(f"threshold must be a positive number, got {threshold!r}")
    n = x.size
    if n >= exact.MIN_PAIRS:
        r_full, r_loo = _full_and_loo_r(x, y)
        if not np.isfinite(r_full):
            raise ValueError("x or y is constant: the correlation is undefined")
        stats = sufficient_stats(x, y)
        full = exact.exact_posterior(n, stats.sample_r, prior_a, prior_b, one_minus_abs_r=stats.one_minus_abs_r)
        median_full, sd_full = float(full.median), float(full.sd)
    else:
        median_full = sd_full = float("nan")
    if n - 1 < exact.MIN_PAIRS:
        return Influence(applies=False, shifts=np.empty(0), max_shift=float("nan"), threshold=float(threshold),
                         flagged_positions=np.empty(0, dtype=np.intp), flagged_rows=(), flips=(),
                         median_full=median_full, sd_full=sd_full)

    required = np.array([rule.required_probability for rule in rules])
    met_full = np.array([exact_rule_probability(full, rule) for rule in rules]) >= required

    defined = np.isfinite(r_loo)
    # Leaving out one row can leave a perfect line (|r| = 1), where the exact posterior is a point
    # mass the engine cannot represent; just inside it the posterior is already a spike at r, so the
    # clipped value gives the shift to well within 1e-6.
    r_engine = np.clip(r_loo[defined], -R_CLIP, R_CLIP)
    if n <= DIRECT_MAX_N:
        medians, probs = _direct(n - 1, r_engine, prior_a, prior_b, rules)
    else:
        medians, probs = _interpolated(n - 1, r_engine, prior_a, prior_b, rules)
        _recheck_borderline(n - 1, r_engine, medians, probs, prior_a, prior_b, rules)

    shifts = np.full(n, np.nan)
    shifts[defined] = medians - median_full
    flipped = np.zeros((n, len(rules)), dtype=bool)
    flipped[defined] = (probs >= required) != met_full
    abs_shift = np.abs(shifts)
    flagged = ~defined | flipped.any(axis=1)
    flagged[defined] |= abs_shift[defined] > threshold
    candidates = np.flatnonzero(flagged)
    sort_key = np.where(defined[candidates], abs_shift[candidates], np.inf)
    positions = candidates[np.argsort(-sort_key, kind="stable")]
    flips = tuple((int(row_numbers[p]), rule.name)
                  for p in positions for j, rule in enumerate(rules) if flipped[p, j])
    return Influence(
        applies=True,
        shifts=shifts,
        max_shift=float(np.max(abs_shift[defined])) if defined.any() else float("nan"),
        threshold=float(threshold),
        flagged_positions=positions,
        flagged_rows=tuple(int(row_numbers[p]) for p in positions),
        flips=flips,
        median_full=median_full,
        sd_full=sd_full,
    )
