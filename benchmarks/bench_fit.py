"""Measure what a fit costs, side by side in one run, and print the ratios.

Three ways to fit the same bivariate-normal model to several pairs:

  textbook     raw rows in a PyMC MvNormal, pm.sample per pair (recompiles every call)
  suffstat     sufficient-statistic likelihood, one PyMC NUTS step built once and reused
               across pm.set_data calls
  compiled     reportgen's way: the sufficient-statistic model compiled once by nutpie,
               each pair fed with with_data

and, for the compiled path, the cost per pair at 100 rows and at 1,000,000 rows (it
should be flat: the rows are reduced to sufficient statistics first).

Run: .venv/bin/python benchmarks/bench_fit.py [--pairs 3] [--draws 1000] [--tune 1000] [--chains 4]
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np

warnings.filterwarnings("ignore")


def simulate(n: int, rho: float, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    a = rng.normal(size=n)
    b = rho * a + np.sqrt(1 - rho**2) * rng.normal(size=n)
    return 5.0 + 2.0 * a, -1.0 + 0.5 * b


def bench_textbook(datasets: list, draws: int, tune: int, chains: int) -> list[float]:
    import pymc as pm

    times = []
    for x, y in datasets:
        started = time.perf_counter()
        with pm.Model():
            mu = pm.Normal("mu", 0, 10, shape=2)
            sigma = pm.HalfNormal("sigma", 10, shape=2)
            rho = 2 * pm.Beta("rho_unit", 1, 1) - 1
            cov = pm.math.stack([[sigma[0] ** 2, rho * sigma[0] * sigma[1]],
                                 [rho * sigma[0] * sigma[1], sigma[1] ** 2]])
            pm.MvNormal("obs", mu=mu, cov=cov, observed=np.column_stack([x, y]))
            pm.sample(draws=draws, tune=tune, chains=chains, cores=1, random_seed=1,
                      progressbar=False, compute_convergence_checks=False)
        times.append(time.perf_counter() - started)
    return times


def bench_suffstat_step(datasets: list, draws: int, tune: int, chains: int) -> tuple[float, list[float]]:
    import pymc as pm

    from reportgen.data import sufficient_stats
    from reportgen.models.normal import build_model, model_inputs
    from reportgen.spec import Priors

    first = model_inputs(sufficient_stats(*datasets[0]), Priors())
    started = time.perf_counter()
    model = build_model(first)
    with model:
        step = pm.NUTS()
        # warm-up sample: PyMC's first call compiles what the step did not
        pm.sample(draws=draws, tune=tune, chains=chains, cores=1, step=step, random_seed=1,
                  progressbar=False, compute_convergence_checks=False)
    build = time.perf_counter() - started
    times = []
    for x, y in datasets:
        inputs = model_inputs(sufficient_stats(x, y), Priors())
        started = time.perf_counter()
        with model:
            pm.set_data(inputs.values)
            pm.sample(draws=draws, tune=tune, chains=chains, cores=1, step=step, random_seed=1,
                      progressbar=False, compute_convergence_checks=False)
        times.append(time.perf_counter() - started)
    return build, times


def bench_compiled(datasets: list, draws: int, tune: int, chains: int) -> tuple[float, list[float]]:
    from reportgen.data import PairData, sufficient_stats
    from reportgen.fit import Fitter
    from reportgen.spec import PairSpec, Priors, Sampler

    fitter = Fitter(Sampler(draws=draws, tune=tune, chains=chains, seed=1))
    times = []
    compile_seconds = 0.0
    # one warm-up pair (compile plus first-call set-up), not counted in the per-pair time
    x0, y0 = datasets[0]
    warm = PairData(pair=PairSpec(x="warm", y="up", label="", priors=Priors()), x=x0, y=y0,
                    n_rows=x0.size, n_dropped=0, stats=sufficient_stats(x0, y0))
    started = time.perf_counter()
    fitter.fit(warm, 1)
    compile_seconds = time.perf_counter() - started
    for index, (x, y) in enumerate(datasets):
        started = time.perf_counter()
        pair = PairData(pair=PairSpec(x=f"x{index}", y="y", label="", priors=Priors()), x=x, y=y,
                        n_rows=x.size, n_dropped=0, stats=sufficient_stats(x, y))
        fitter.fit(pair, 1)
        times.append(time.perf_counter() - started)
    return compile_seconds, times


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--pairs", type=int, default=3)
    parser.add_argument("--draws", type=int, default=1000)
    parser.add_argument("--tune", type=int, default=1000)
    parser.add_argument("--chains", type=int, default=4)
    parser.add_argument("--skip-textbook", action="store_true", help="the slowest path; skip it for a quick look")
    args = parser.parse_args()
    settings = (args.draws, args.tune, args.chains)
    datasets = [simulate(60, rho, seed) for seed, rho in enumerate(np.linspace(-0.6, 0.8, args.pairs))]
    print(f"{args.pairs} pairs, n = 60, {args.chains} chains x {args.draws} draws + {args.tune} tuning\n")

    compile_s, compiled = bench_compiled(datasets, *settings)
    build_s, stepped = bench_suffstat_step(datasets, *settings)
    rows = [("compiled (nutpie, with_data)", compile_s, compiled), ("suffstat (PyMC step reused)", build_s, stepped)]
    if not args.skip_textbook:
        textbook = bench_textbook(datasets, *settings)
        rows.append(("textbook (MvNormal, raw rows)", 0.0, textbook))
    base = float(np.mean(compiled))
    print(f"{'method':32} {'one-off s':>16} {'s per pair':>11} {'vs compiled':>12}")
    for name, one_off, times in rows:
        print(f"{name:32} {one_off:16.2f} {np.mean(times):11.3f} {np.mean(times) / base:11.1f}x")

    small = [simulate(100, 0.5, 10 + i) for i in range(args.pairs)]
    large = [simulate(1_000_000, 0.5, 20 + i) for i in range(args.pairs)]
    _, small_times = bench_compiled(small, *settings)
    _, large_times = bench_compiled(large, *settings)
    ratio = np.mean(large_times) / np.mean(small_times)
    print(f"\nrows per pair: 100 -> {np.mean(small_times):.3f} s a pair; "
          f"1,000,000 -> {np.mean(large_times):.3f} s a pair (ratio {ratio:.2f}x, "
          "including the reduction to sufficient statistics)")


if __name__ == "__main__":
    main()
