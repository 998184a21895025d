"""CPU seconds of one pair's work under the exact engine at n = 1,000 rows, before and after the summaries
were read off one grid, side by side in one run, and where today's time goes.

The pairs are those of the scale benchmark's 4,950-pair run (100 columns of invented data, n = 1,000,
``engine = "exact"``); each is worked on as a worker process does (``execution.work.work_on_pair``: the
exact posterior's numbers, the model checks, the prior sensitivity). "before" patches in the previous
implementations, kept below as ``baseline_*``: no posterior or kernel terms kept between calls, quantiles
by Newton's method through scipy's spline objects, the HDI by Brent's method over the mass below it, the
median and the interval of rho^2 each by 60 bisection steps, sample skewness by scipy.stats.skew (the
kernel terms on a grid are formed by today's code, only not kept). The two are timed in alternating rounds
(CPU seconds of this process: the machine is shared, so the fastest round of each is reported), and their
numbers compared.

Then today's time per pair is split by stage (each timed where ``pair_outcome`` and ``model_checks`` call
it) and the functions with the most time of their own are listed, from a profile of the same pairs.

Run: .venv/bin/python benchmarks/bench_exact_pair.py [--pairs 100] [--rounds 5]
"""

from __future__ import annotations

import argparse
import contextlib
import cProfile
import dataclasses
import functools
import gc
import math
import pstats
import tempfile
import time
import warnings
from collections.abc import Callable, Iterator
from functools import cached_property
from pathlib import Path
from typing import Any

import numpy as np
from scipy import interpolate, optimize, special, stats
from synthetic import write_project

warnings.filterwarnings("ignore")

TARGET_RATIO = 2.0  # the work per pair was to become at least this many times cheaper

# ----------------------------------------------------------------------------------- the previous versions


def baseline_posterior_class() -> type:
    """The exact posterior with its previous summaries: scipy spline objects, Brent's HDI, nothing kept."""
    from reportgen import exact

    class BaselineExactPosterior(exact.ExactPosterior):
        @cached_property
        def _cdf_spline(self) -> interpolate.CubicHermiteSpline:
            pieces = self._pieces
            total = float(np.sum(pieces))
            cumulative = np.concatenate(([0.0], np.cumsum(pieces))) / total
            return interpolate.CubicHermiteSpline(self.z, cumulative, self.z_density / total)

        @cached_property
        def _sf_spline(self) -> interpolate.CubicHermiteSpline:
            pieces = self._pieces
            total = float(np.sum(pieces))
            survival = np.concatenate((np.cumsum(pieces[::-1])[::-1], [0.0])) / total
            return interpolate.CubicHermiteSpline(self.z, survival, -self.z_density / total)

        @cached_property
        def _log_z_density_spline(self) -> interpolate.CubicSpline:
            return interpolate.CubicSpline(self.z, np.log(self.z_density))

        @cached_property
        def _cdf_slope(self) -> interpolate.PPoly:
            return self._cdf_spline.derivative()

        def _quantile_z(self, probs: np.ndarray) -> np.ndarray:
            lower_half = probs <= 0.5
            target = np.where(lower_half, np.clip(probs, 0.0, 0.5), 1.0 - np.clip(probs, 0.5, 1.0))
            cdf_knots, sf_knots = self._cdf_spline.c[-1], self._sf_spline.c[-1]
            last = self.z.size - 2
            index = np.where(lower_half,
                             np.clip(np.searchsorted(cdf_knots, target, side="right") - 1, 0, last),
                             np.clip(np.searchsorted(-sf_knots, -target, side="right") - 1, 0, last))

            def gap(zeta: np.ndarray, rising: np.ndarray, goal: np.ndarray) -> np.ndarray:
                return np.where(rising, self._cdf_spline(zeta), self._sf_spline(zeta)) - goal

            lo, hi = self.z[index], self.z[index + 1]
            f_lo, f_hi = gap(lo, lower_half, target), gap(hi, lower_half, target)
            out = np.where(np.abs(f_hi) <= np.abs(f_lo), hi, lo)
            out = np.where(f_lo == 0.0, lo, np.where(f_hi == 0.0, hi, out))
            bracketed = f_lo * f_hi < 0.0
            if bracketed.any():
                a, b, f_a = lo[bracketed], hi[bracketed], f_lo[bracketed]
                rising, goal = lower_half[bracketed], target[bracketed]
                x = 0.5 * (a + b)
                for _ in range(100):
                    f_x = gap(x, rising, goal)
                    derivative = np.where(rising, self._cdf_slope(x), -self._cdf_slope(x))
                    same_side = np.sign(f_x) == np.sign(f_a)
                    a, f_a = np.where(same_side, x, a), np.where(same_side, f_x, f_a)
                    b = np.where(same_side, b, x)
                    with np.errstate(divide="ignore", invalid="ignore"):
                        newton = x - f_x / derivative
                    done = (f_x == 0.0) | (np.abs(newton - x) <= 1e-15 * (1.0 + np.abs(x)))
                    if done.all():
                        break
                    inside = np.isfinite(newton) & (newton > a) & (newton < b)
                    x = np.where(done, x, np.where(inside, newton, 0.5 * (a + b)))
                out[bracketed] = x
            return np.where(probs <= 0.0, self.z[0], np.where(probs >= 1.0, self.z[-1], out))

        def _log_rho_density_one(self, zeta: float) -> float:
            one_minus, one_plus = 2.0 / (1.0 + np.exp(2.0 * zeta)), 2.0 / (1.0 + np.exp(-2.0 * zeta))
            return float(self._log_z_density_spline(zeta) - np.log(one_minus) - np.log(one_plus))

        @property
        def mean(self) -> float:
            return self._trapezoid(self.rho * self.z_density)

        @property
        def sd(self) -> float:
            centred = self.rho - self.mean
            return math.sqrt(self._trapezoid(centred * centred * self.z_density))

        @property
        def median(self) -> float:
            return float(self.quantile(0.5))

        def quantile(self, q: Any) -> Any:
            probs = np.asarray(q, dtype=float)
            flat = probs.reshape(-1)
            out = np.where(flat == 0.0, -1.0, 1.0)
            inside = (flat > 0.0) & (flat < 1.0)
            if inside.any():
                out[inside] = np.tanh(self._quantile_z(flat[inside]))
            return float(out[0]) if probs.ndim == 0 else out.reshape(probs.shape)

        def cdf(self, x: Any) -> Any:
            values = np.asarray(x, dtype=float)
            zeta = self._z_of(values)
            out = np.clip(self._cdf_spline(np.clip(zeta, self.z[0], self.z[-1])), 0.0, 1.0)
            out = np.where(zeta <= self.z[0], 0.0, np.where(zeta >= self.z[-1], 1.0, out))
            out = np.where(np.isnan(values), np.nan, out)
            return float(out.reshape(-1)[0]) if values.ndim == 0 else out

        def sf(self, x: Any) -> Any:
            values = np.asarray(x, dtype=float)
            zeta = self._z_of(values)
            out = np.clip(self._sf_spline(np.clip(zeta, self.z[0], self.z[-1])), 0.0, 1.0)
            out = np.where(zeta <= self.z[0], 1.0, np.where(zeta >= self.z[-1], 0.0, out))
            out = np.where(np.isnan(values), np.nan, out)
            return float(out.reshape(-1)[0]) if values.ndim == 0 else out

        def hdi(self, mass: float = 0.95) -> tuple[float, float]:
            spare = 1.0 - mass

            def ends(alpha: float) -> tuple[float, float]:
                lo, hi = self._quantile_z(np.array([alpha, alpha + mass]))
                return float(lo), float(hi)

            def density_gap(alpha: float) -> float:
                lo, hi = ends(alpha)
                return self._log_rho_density_one(lo) - self._log_rho_density_one(hi)

            g_lo, g_hi = density_gap(0.0), density_gap(spare)
            if g_lo < 0.0 < g_hi:
                alpha = optimize.brentq(density_gap, 0.0, spare, xtol=1e-15, rtol=1e-14)
            else:
                def width(alpha: float) -> float:
                    lo, hi = ends(alpha)
                    return math.tanh(hi) - math.tanh(lo)

                alpha = optimize.minimize_scalar(width, bounds=(0.0, spare), method="bounded",
                                                 options={"xatol": 1e-12}).x
            lo, hi = ends(float(alpha))
            return math.tanh(lo), math.tanh(hi)

    return BaselineExactPosterior


def baseline_squared_quantiles(posterior: Any, probabilities: np.ndarray) -> np.ndarray:
    """The previous quantiles of rho^2: 60 bisection steps, two evaluations of the cdf each."""
    low, high = np.zeros_like(probabilities), np.ones_like(probabilities)
    for _ in range(60):
        mid = 0.5 * (low + high)
        root = np.sqrt(mid)
        share = np.asarray(posterior.cdf(root), dtype=float) - np.asarray(posterior.cdf(-root), dtype=float)
        below = share < probabilities
        low, high = np.where(below, mid, low), np.where(below, high, mid)
    return 0.5 * (low + high)


def baseline_squared_summary(posterior: Any, mass: float, kind: str) -> tuple[float, tuple[float, float]]:
    """The previous median and interval of rho^2: the median, then the interval, each by its own bisection."""
    median = float(baseline_squared_quantiles(posterior, np.array([0.5]))[0])
    if kind != "hdi":
        lower, upper = baseline_squared_quantiles(posterior, np.array([(1 - mass) / 2, (1 + mass) / 2]))
        return median, (float(lower), float(upper))
    starts = np.linspace(0.0, 1.0 - mass, 401)
    ends = baseline_squared_quantiles(posterior, np.concatenate([starts, starts + mass]))
    lowers, uppers = ends[:starts.size], ends[starts.size:]
    best = int(np.argmin(uppers - lowers))
    return median, (float(lowers[best]), float(uppers[best]))


def baseline_log_stretched_beta_from_parts(one_minus_rho: np.ndarray, one_plus_rho: np.ndarray, a: float,
                                           b: float) -> np.ndarray:
    """The previous prior term: both xlogy terms evaluated, also for a shape of 1."""
    inside = (one_minus_rho >= 0.0) & (one_plus_rho >= 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_pdf = (special.xlogy(a - 1.0, 0.5 * one_plus_rho) + special.xlogy(b - 1.0, 0.5 * one_minus_rho)
                   - math.log(2.0) - special.betaln(a, b))
    return np.where(inside, log_pdf, -np.inf)


def baseline_sample_skewness(values: np.ndarray) -> float:
    """The previous sample skewness: scipy.stats.skew with bias=True."""
    if np.ptp(values) == 0.0:
        return float("nan")
    return float(stats.skew(values, bias=True))


@contextlib.contextmanager
def baseline() -> Iterator[None]:
    """The previous implementations patched in, and nothing kept between calls."""
    from reportgen import exact
    from reportgen.checks import ppc
    from reportgen.results import pair

    posterior_class = baseline_posterior_class()
    saved = (exact._posterior, exact._grid_terms, exact._log_kernel_at_zero, exact._log_stretched_beta_from_parts,
             pair._squared_summary, ppc._sample_skewness)

    def uncached_posterior(*args: Any) -> Any:
        today = saved[0].__wrapped__(*args)
        return posterior_class(**{f.name: getattr(today, f.name) for f in dataclasses.fields(today)})

    exact._posterior = uncached_posterior
    exact._grid_terms = saved[1].__wrapped__
    exact._log_kernel_at_zero = saved[2].__wrapped__
    exact._log_stretched_beta_from_parts = baseline_log_stretched_beta_from_parts
    pair._squared_summary = baseline_squared_summary
    ppc._sample_skewness = baseline_sample_skewness
    try:
        yield
    finally:
        (exact._posterior, exact._grid_terms, exact._log_kernel_at_zero, exact._log_stretched_beta_from_parts,
         pair._squared_summary, ppc._sample_skewness) = saved


# ----------------------------------------------------------------------------------- measuring


def clear_kept() -> None:
    from reportgen import exact

    for kept in (exact._posterior, exact._grid_terms, exact._log_kernel_at_zero):
        if hasattr(kept, "cache_clear"):  # not while the baseline is patched in
            kept.cache_clear()


def work_all(spec: Any, pairs: list[Any], fitter: Any, keep: bool = False) -> tuple[float, list[Any]]:
    """CPU seconds per pair of working on ``pairs`` from nothing kept, and the results if ``keep``."""
    from reportgen.execution.work import work_on_pair

    clear_kept()
    gc.collect()
    results = []
    started = time.process_time()
    for pair in pairs:
        result = work_on_pair(spec, pair, fitter).result
        if keep:
            results.append(result)
    return (time.process_time() - started) / len(pairs), results


def largest_gaps(before: list[Any], after: list[Any]) -> dict[str, float]:
    """The largest difference between the two implementations' numbers, over the pairs."""
    def difference(one: Any, other: Any) -> dict[str, float]:
        rho, rho_other = one.rho, other.rho
        sensitivity = [abs(a - b) for o, p in zip(one.sensitivity.outcomes, other.sensitivity.outcomes, strict=True)
                       if o.applies for a, b in ((o.median, p.median), (o.lower, p.lower), (o.upper, p.upper))]
        checks, checks_other = one.checks, other.checks
        return {"rho median, interval, mean, sd": max(abs(getattr(rho, k) - getattr(rho_other, k))
                                                      for k in ("median", "lower", "upper", "mean", "sd")),
                "HDI": max(abs(a - b) for a, b in zip(one.hdi, other.hdi, strict=True)),
                "rho^2 median and interval": max(abs(a - b) for a, b in zip(
                    (one.r2_median, *one.r2_interval), (other.r2_median, *other.r2_interval), strict=True)),
                "sensitivity medians and intervals": max(sensitivity),
                "influence shifts": float(np.nanmax(np.abs(checks.influence.shifts - checks_other.influence.shifts))),
                "predictive p-values": max(abs(checks.predictive.p_skew_x - checks_other.predictive.p_skew_x),
                                           abs(checks.predictive.p_skew_y - checks_other.predictive.p_skew_y),
                                           abs(checks.predictive.p_r - checks_other.predictive.p_r))}

    gaps: dict[str, float] = {}
    for one, other in zip(before, after, strict=True):
        for name, gap in difference(one, other).items():
            gaps[name] = max(gaps.get(name, 0.0), gap)
    same_words = all(o.rope_decision == p.rope_decision and o.paragraph == p.paragraph
                     and o.checks.codes == p.checks.codes and o.sensitivity.changed_rules == p.sensitivity.changed_rules
                     for o, p in zip(before, after, strict=True))
    gaps["sentences, decisions and warning codes differ"] = 0.0 if same_words else 1.0
    return gaps


STAGES = (
    ("numbers of the pair (pair_result_exact)", "reportgen.results.outcome", "pair_result_exact"),
    ("draws for the predictive check", "reportgen.results.outcome", "_normal_rho_draws"),
    ("influence of each row", "reportgen.checks.summary", "leave_one_out"),
    ("predictive check", "reportgen.checks.summary", "predictive_check"),
    ("shape checks", "reportgen.checks.summary", "shape_checks"),
    ("prior sensitivity", "reportgen.results.outcome", "_sensitivity"),
)


@contextlib.contextmanager
def stage_clock(seconds: dict[str, float]) -> Iterator[None]:
    """Each stage's function wrapped where ``pair_outcome`` and ``model_checks`` call it, adding CPU seconds."""
    import importlib

    saved = []
    for label, module_name, name in STAGES:
        module = importlib.import_module(module_name)
        function = getattr(module, name)
        saved.append((module, name, function))

        def timed(*args: Any, _function: Callable[..., Any] = function, _label: str = label, **kwargs: Any) -> Any:
            started = time.process_time()
            try:
                return _function(*args, **kwargs)
            finally:
                seconds[_label] = seconds.get(_label, 0.0) + time.process_time() - started

        setattr(module, name, functools.wraps(function)(timed))
    try:
        yield
    finally:
        for module, name, function in saved:
            setattr(module, name, function)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--pairs", type=int, default=100)
    parser.add_argument("--rounds", type=int, default=5)
    args = parser.parse_args()

    from reportgen import runner
    from reportgen.fit import Fitter
    from reportgen.spec import load_spec

    with tempfile.TemporaryDirectory() as folder:
        spec = load_spec(write_project(Path(folder), 100, 1_000, top='engine = "exact"', name_width=3))
        prepared = runner.prepare(spec)
    pairs = list(prepared.pairs[:args.pairs])
    fitter = Fitter(spec.document.sampler)
    work_all(prepared.spec, pairs[:2], fitter)  # imports and first-call costs out of the way
    with baseline():
        results = {"before": work_all(prepared.spec, pairs, fitter, keep=True)[1]}
    results["today"] = work_all(prepared.spec, pairs, fitter, keep=True)[1]
    gaps = largest_gaps(results["before"], results["today"])
    del results
    timings: dict[str, list[float]] = {"before": [], "today": []}
    for _ in range(args.rounds):
        with baseline():
            timings["before"].append(work_all(prepared.spec, pairs, fitter)[0])
        timings["today"].append(work_all(prepared.spec, pairs, fitter)[0])
    # the least disturbed round of each: on a shared machine other work only adds to a round's CPU seconds
    before, today = min(timings["before"]), min(timings["today"])
    ratio = before / today
    print(f"one pair's work, exact engine, n = 1,000 rows, {len(pairs)} pairs, the fastest of {args.rounds} "
          "alternating rounds (CPU seconds of this process)")
    print(f"  before   {before * 1e3:8.1f} ms a pair   (rounds: "
          + ", ".join(f"{s * 1e3:.1f}" for s in timings["before"]) + ")")
    print(f"  today    {today * 1e3:8.1f} ms a pair   (rounds: "
          + ", ".join(f"{s * 1e3:.1f}" for s in timings["today"]) + ")")
    print(f"  ratio    {ratio:8.2f} x cheaper   (target at least {TARGET_RATIO:.0f} x: "
          f"{'met' if ratio >= TARGET_RATIO else 'NOT met'}); 4,950 pairs: {before * 4950:.0f} s of work before, "
          f"{today * 4950:.0f} s today")
    print("largest difference between before and today over the pairs:")
    for name, gap in gaps.items():
        print(f"  {name:48} {gap:.2g}")

    seconds: dict[str, float] = {}
    clear_kept()
    started = time.process_time()
    with stage_clock(seconds):
        work_all(prepared.spec, pairs, fitter)
    total = (time.process_time() - started) / len(pairs)
    print(f"today's work per pair by stage ({total * 1e3:.1f} ms a pair, the stages timed where they are called):")
    for label, _, _ in STAGES:
        print(f"  {label:48} {seconds.get(label, 0.0) / len(pairs) * 1e3:8.2f} ms")
    rest = total - sum(seconds.values()) / len(pairs)
    print(f"  {'the rest (assembling the result, sentences)':48} {rest * 1e3:8.2f} ms")

    from reportgen.execution.work import work_on_pair

    clear_kept()
    gc.collect()
    profile = cProfile.Profile()
    profile.enable()
    for pair in pairs:
        work_on_pair(prepared.spec, pair, fitter)
    profile.disable()
    entries = pstats.Stats(profile).stats  # type: ignore[attr-defined]
    own = sorted(((value[2], key) for key, value in entries.items()), reverse=True)[:8]
    profiled = sum(value[2] for value in entries.values())
    print("functions with the most time of their own (share of the profiled time):")
    for seconds_own, (filename, line, name) in own:
        where = filename.split("/reportgen/")[-1] if "/reportgen/" in filename else Path(filename).name
        print(f"  {seconds_own / profiled:6.1%}  {name} ({where}:{line})")


if __name__ == "__main__":
    main()
