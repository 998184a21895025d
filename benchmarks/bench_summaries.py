"""What summarising one fitted pair costs, before and after the faster density, skewness reference and
influence grid, side by side in one run, and against the sampling of the same pair.

Each changed function is timed with its previous implementation, kept below as a ``baseline_*`` function,
at n = 1,000 and 10,000 rows (4 chains x 1000 draws for the densities). Then one pair is sampled with the
normal model and its whole summary (``pair_outcome``: numbers, diagnostics, checks, prior sensitivity) is
timed with the baselines patched in and without, beside the sampling time.

Run: .venv/bin/python benchmarks/bench_summaries.py [--repeats 3]
"""

from __future__ import annotations

import argparse
import contextlib
import tempfile
import time
import warnings
from collections.abc import Callable, Iterator
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats

warnings.filterwarnings("ignore")

ROWS = (1_000, 10_000)
PARAMETER_BOUNDS = {"rho": (-1.0, 1.0), "sigma_x": (0.0, None), "sigma_y": (0.0, None), "mu_x": (None, None),
                    "mu_y": (None, None)}


# ----------------------------------------------------------------------------------- the previous versions

def baseline_bounded_density(draws: np.ndarray, lower: float | None = None, upper: float | None = None,
                             grid_size: int = 256, offset: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """The previous density: scipy.stats.gaussian_kde summed at every grid point and its mirror images."""
    values = np.ravel(draws).astype(float) - offset
    low_bound = None if lower is None else lower - offset
    high_bound = None if upper is None else upper - offset
    spread = float(np.std(values))
    margin = 0.5 * spread if spread > 0.0 else 1e-3 * max(1.0, abs(float(values[0])))
    low = float(np.min(values)) - margin
    high = float(np.max(values)) + margin
    if low_bound is not None:
        low = max(low, low_bound)
    if high_bound is not None:
        high = min(high, high_bound)
    grid = np.linspace(low, high, grid_size)
    if spread == 0.0:
        density = np.zeros_like(grid)
        density[np.argmin(np.abs(grid - values[0]))] = 1.0
        return grid, density
    kde = stats.gaussian_kde(values, bw_method="scott")
    density = kde(grid)
    if low_bound is not None:
        density += kde(2.0 * low_bound - grid)
    if high_bound is not None:
        density += kde(2.0 * high_bound - grid)
    return grid, density


BASELINE_SIMULATED_SKEW_MAX_N = 20_000  # the previous switch to the normal approximation


def baseline_predictive_check(rho_draws: np.ndarray, x: np.ndarray, y: np.ndarray, seed: int,
                              replicates: int = 1000) -> object:
    """The previous check: skewness reference simulated from the pair's seed up to 20,000 rows."""
    from reportgen.checks import ppc

    x = np.asarray(x, dtype=float).ravel()
    y = np.asarray(y, dtype=float).ravel()
    n = x.size
    rng = np.random.Generator(np.random.PCG64(seed))
    observed_r = ppc._sample_correlation(x, y)
    replicated_r = ppc.replicated_correlations(ppc._evenly_spaced(rho_draws, replicates), n, rng)
    skew_x, skew_y = ppc._sample_skewness(x), ppc._sample_skewness(y)
    if n <= BASELINE_SIMULATED_SKEW_MAX_N:
        reference = ppc.simulated_skewness(n, replicates, rng)
        p_skew_x, p_skew_y = ppc.tail_probability(reference, skew_x), ppc.tail_probability(reference, skew_y)
    else:
        sd = np.sqrt(ppc.normal_skewness_variance(n))
        p_skew_x, p_skew_y = (float(2.0 * stats.norm.sf(abs(g) / sd)) for g in (skew_x, skew_y))
    return ppc.PredictiveCheck(observed_r=observed_r, observed_skew_x=skew_x, observed_skew_y=skew_y,
                               p_r=ppc.tail_probability(replicated_r, observed_r), p_skew_x=p_skew_x,
                               p_skew_y=p_skew_y, replicates=replicates)


def baseline_node_count(n: int, width: float) -> int:
    """The previous influence grid: always 41 nodes (3 for a nearly empty range)."""
    from reportgen.checks import influence

    return influence.GRID_POINTS if width > influence.NARROW_WIDTH else 3


def baseline_strong_influence(influence: object, threshold: float, x: np.ndarray, y: np.ndarray,
                              rho_prior: tuple[float, float]) -> bool:
    """The previous test of strong influence: it computed the full posterior's SD once more."""
    from reportgen import exact
    from reportgen.data import sufficient_stats

    if not influence.applies or not np.isfinite(influence.max_shift):
        return bool(influence.applies and influence.flagged_rows and not np.isfinite(influence.max_shift))
    s = sufficient_stats(x, y)
    sd = float(exact.exact_posterior(s.n, s.sample_r, *rho_prior, one_minus_abs_r=s.one_minus_abs_r).sd)
    return bool(influence.max_shift > max(threshold, sd))


@contextlib.contextmanager
def baselines_patched(x: np.ndarray, y: np.ndarray, rho_prior: tuple[float, float]) -> Iterator[None]:
    """Swap the previous implementations in where the pipeline calls them."""
    from reportgen import summaries
    from reportgen.checks import influence, summary

    saved = (summaries.bounded_density, summary.predictive_check, influence._node_count, summary._strong_influence)
    summaries.bounded_density = baseline_bounded_density
    summary.predictive_check = baseline_predictive_check
    influence._node_count = baseline_node_count
    summary._strong_influence = lambda found, threshold: baseline_strong_influence(found, threshold, x, y, rho_prior)
    try:
        yield
    finally:
        (summaries.bounded_density, summary.predictive_check, influence._node_count,
         summary._strong_influence) = saved


# ----------------------------------------------------------------------------------------------- timing

def best_of(repeats: int, work: Callable[[], object]) -> float:
    times = []
    for _ in range(repeats):
        started = time.perf_counter()
        work()
        times.append(time.perf_counter() - started)
    return min(times)


def simulated_pair(n: int, seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    a = rng.standard_normal(n)
    b = 0.3 * a + np.sqrt(1.0 - 0.09) * rng.standard_normal(n)
    return 5.0 + 2.0 * a, -1.0 + 0.5 * b


def posterior_like_draws(n: int, seed: int = 1) -> dict[str, np.ndarray]:
    """4 chains x 1000 draws shaped like a normal-model posterior of ``n`` rows."""
    rng = np.random.default_rng(seed)
    spread = 1.0 / np.sqrt(n)
    z = rng.standard_normal((5, 4, 1000))
    return {"rho": np.tanh(np.arctanh(0.3) + spread * z[0]), "sigma_x": 2.0 * np.exp(spread * z[1] / np.sqrt(2.0)),
            "sigma_y": 0.5 * np.exp(spread * z[2] / np.sqrt(2.0)), "mu_x": 5.0 + 2.0 * spread * z[3],
            "mu_y": -1.0 + 0.5 * spread * z[4]}


def function_rows_at(n: int, repeats: int) -> list[tuple[str, int, float, float]]:
    from reportgen import summaries
    from reportgen.checks import influence, ppc
    from reportgen.spec import Rule

    rules = [Rule(name="positive", statement="above", threshold=0.0, required_probability=0.95)]
    x, y = simulated_pair(n)
    draws = posterior_like_draws(n)
    rho = draws["rho"]

    def densities(function: Callable[..., object]) -> None:
        for name, (lower, upper) in PARAMETER_BOUNDS.items():
            function(draws[name], lower, upper)

    def influence_with(node_count: Callable[[int, float], int]) -> float:
        current = influence._node_count
        influence._node_count = node_count
        try:
            return best_of(repeats, lambda: influence.leave_one_out(x, y, np.arange(n), 1.0, 1.0, rules))
        finally:
            influence._node_count = current

    return [
        ("bounded_density x 5 parameters", n, best_of(repeats, lambda: densities(baseline_bounded_density)),
         best_of(repeats, lambda: densities(summaries.bounded_density))),
        ("predictive_check", n, best_of(repeats, lambda: baseline_predictive_check(rho, x, y, 7)),
         best_of(repeats, lambda: ppc.predictive_check(rho, x, y, 7))),
        ("leave_one_out", n, influence_with(baseline_node_count), influence_with(influence._node_count)),
    ]


def pair_row_at(n: int, folder: Path, repeats: int) -> tuple[int, float, float, float]:
    """Sampling seconds of one pair, and its summary's seconds with the baselines and with the current code."""
    from reportgen import runner
    from reportgen.fit import Fitter
    from reportgen.results.outcome import pair_outcome
    from reportgen.spec import load_spec

    folder.mkdir()
    x, y = simulated_pair(n, seed=n)
    pd.DataFrame({"x": x, "y": y}).to_csv(folder / "data.csv", index=False)
    (folder / "spec.toml").write_text(
        '[report]\ntitle = "Benchmark"\ndate = 2026-01-01\n[data]\npath = "data.csv"\n'
        '[[pairs]]\nx = "x"\ny = "y"\n[sampler]\ndraws = 1000\ntune = 1000\nchains = 4\n',
        encoding="utf-8")
    prepared = runner.prepare(load_spec(folder / "spec.toml"))
    spec, data = prepared.spec, prepared.pairs[0]
    fitter = Fitter(spec.document.sampler)
    fitter.fit(data, spec.document.sampler.seed)  # the first fit of a process also compiles
    fit = fitter.fit(data, spec.document.sampler.seed)
    fits = {"normal": fit}
    with baselines_patched(data.x, data.y, data.pair.priors.rho.shapes):
        old = best_of(repeats, lambda: pair_outcome(spec, data, fits, {}))
    new = best_of(repeats, lambda: pair_outcome(spec, data, fits, {}))
    return n, fit.seconds, old, new


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeats", type=int, default=3, help="timings per figure; the fastest is shown")
    args = parser.parse_args()
    print("Changed functions, previous (baseline_*) against current, fastest of", args.repeats, "runs:")
    print(f"{'function':34} {'n':>7} {'before s':>9} {'after s':>9} {'ratio':>7}")
    for name, n, old, new in (row for rows in ROWS for row in function_rows_at(rows, args.repeats)):
        print(f"{name:34} {n:7d} {old:9.4f} {new:9.4f} {old / new:7.1f}")
    print()
    print("One pair, normal model, 4 chains x 1000 draws: summarising (pair_outcome) against sampling")
    print(f"{'n':>7} {'sampling s':>11} {'summary before s':>17} {'summary after s':>16} {'after / sampling':>17}")
    with tempfile.TemporaryDirectory() as tmp:
        measured = [pair_row_at(n, Path(tmp, f"n{n}"), args.repeats) for n in ROWS]
    for n, sampling, old, new in measured:
        print(f"{n:7d} {sampling:11.3f} {old:17.3f} {new:16.3f} {new / sampling:17.2f}")


if __name__ == "__main__":
    main()
