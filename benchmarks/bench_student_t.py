"""Measure what a Student-t fit costs next to the normal model, side by side in one run.

The normal model reduces the rows to sufficient statistics, so its cost per pair is flat in n;
the Student-t likelihood (Lange, Little & Taylor 1989) sums over every row, so each gradient
costs O(n). Printed: the compile time of each model, then seconds per pair at n = 100, 10,000
and 1,000,000 with the default sampler settings (4 chains x 1000 draws + 1000 tuning) and the
ratio Student-t / normal.

At 1,000,000 rows a default Student-t fit takes far longer than a few minutes, so it is run with
fewer draws; the measured cost per draw is printed, and the time at default settings is
extrapolated two ways, labelled as such.

Run: .venv/bin/python benchmarks/bench_student_t.py [--pairs 2] [--large-draws 25]
"""

from __future__ import annotations

import argparse
import ctypes
import time
import warnings

import numpy as np

warnings.filterwarnings("ignore")

SIZES = (100, 10_000, 1_000_000)
DEFAULT_ITERATIONS = 1000 + 1000  # draws + tuning per chain at the default settings
DEFAULT_CHAINS = 4


def simulate(n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Bivariate t rows (nu = 5, rho = 0.5), the kind of data the Student-t model is for."""
    rng = np.random.default_rng(seed)
    a = rng.normal(size=n)
    b = 0.5 * a + np.sqrt(0.75) * rng.normal(size=n)
    mixing = np.sqrt(rng.chisquare(5.0, size=n) / 5.0)
    return 5.0 + 2.0 * a / mixing, -1.0 + 0.5 * b / mixing


def make_pair(x: np.ndarray, y: np.ndarray, name: str):  # type: ignore[no-untyped-def]
    from reportgen.data import PairData, sufficient_stats
    from reportgen.spec import PairSpec, Priors

    spec = PairSpec(x=name, y="y", label="", priors=Priors())
    return PairData(pair=spec, x=x, y=y, n_rows=x.size, n_dropped=0, stats=sufficient_stats(x, y))


def seconds_per_pair(fitter, model: str, n: int, pairs: int) -> float:  # type: ignore[no-untyped-def]
    """Mean wall time of a fit (standardising the rows or reducing them, feeding, sampling)."""
    times = []
    for index in range(pairs):
        pair = make_pair(*simulate(n, 100 + index), f"{model}{n}_{index}")
        started = time.perf_counter()
        fitter.fit(pair, 1, model=model)
        times.append(time.perf_counter() - started)
    return float(np.mean(times))


def gradient_seconds(n: int, evaluations: int) -> float:
    """Time of one log density + gradient evaluation of the compiled Student-t model at n rows.

    Calls the same compiled callback that nutpie's sampler calls (an internal of nutpie's
    compiled PyMC model, so this may need updating with nutpie).
    """
    from reportgen import fit
    from reportgen.models import student_t

    inputs = student_t.inputs_for(make_pair(*simulate(n, 7), "gradient"))
    compiled = fit._COMPILED[inputs.structure].with_data(**inputs.values)
    dim = compiled.n_dim
    point, gradient, logp = np.full(dim, 0.1), np.zeros(dim), np.zeros(())
    pointer = ctypes.POINTER(ctypes.c_double)
    args = (ctypes.c_uint64(dim), point.ctypes.data_as(pointer), gradient.ctypes.data_as(pointer),
            logp.ctypes.data_as(pointer), ctypes.c_void_p(compiled.user_data.ctypes.data))
    function = compiled.compiled_logp_func.ctypes
    if function(*args) != 0:
        raise RuntimeError("the compiled log density failed at the benchmark point")
    started = time.perf_counter()
    for _ in range(evaluations):
        function(*args)
    return (time.perf_counter() - started) / evaluations


def main() -> None:
    from reportgen.fit import Fitter
    from reportgen.spec import Sampler

    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--pairs", type=int, default=2, help="pairs timed per model and size")
    parser.add_argument("--large-draws", type=int, default=25,
                        help="draws and tuning per chain of the reduced Student-t fit at 1,000,000 rows")
    args = parser.parse_args()
    fitter = Fitter(Sampler())  # defaults: 4 chains x 1000 draws + 1000 tuning
    print(f"default settings: {fitter.sampler.chains} chains x {fitter.sampler.draws} draws + "
          f"{fitter.sampler.tune} tuning, {fitter.cores} cores; {args.pairs} pairs per cell\n")

    compile_seconds = {}
    for model in ("student_t", "normal"):  # the Student-t first: it is the one measured here
        started = time.perf_counter()
        first = fitter.fit(make_pair(*simulate(100, 1), f"warm_{model}"), 1, model=model)
        compile_seconds[model] = (first.compile_seconds, time.perf_counter() - started)
    for model, (compiling, whole) in compile_seconds.items():
        print(f"compile {model:10} {compiling:6.1f} s  (first fit in all {whole:5.1f} s)")
    print("(the first compile in a process also pays numba's start-up)\n")

    measured = {}
    for n in SIZES:
        measured["normal", n] = seconds_per_pair(fitter, "normal", n, args.pairs)
    for n in SIZES[:-1]:
        measured["student_t", n] = seconds_per_pair(fitter, "student_t", n, args.pairs)

    large = SIZES[-1]
    reduced = Fitter(Sampler(draws=args.large_draws, tune=args.large_draws, chains=max(2, fitter.cores)))
    pair = make_pair(*simulate(large, 100), "reduced")
    started = time.perf_counter()
    reduced.fit(pair, 1, model="student_t")
    reduced_wall = time.perf_counter() - started
    # chains run side by side, one per core, so wall time / iterations is the cost of one draw of one chain
    per_draw = reduced_wall / (2 * args.large_draws)
    by_draws = per_draw * DEFAULT_ITERATIONS * DEFAULT_CHAINS / fitter.cores
    gradient = {n: gradient_seconds(n, 20 if n == large else 2000) for n in SIZES[1:]}
    by_gradient = measured["student_t", SIZES[1]] * gradient[large] / gradient[SIZES[1]]

    print(f"{'rows':>10} {'student_t s/pair':>18} {'normal s/pair':>14} {'ratio':>9}")
    for n in SIZES[:-1]:
        t_seconds, normal_seconds = measured["student_t", n], measured["normal", n]
        print(f"{n:>10,} {t_seconds:18.3f} {normal_seconds:14.3f} {t_seconds / normal_seconds:8.1f}x")
    normal_large = measured["normal", large]
    print(f"{large:>10,} {by_gradient:15.0f} (E) {normal_large:14.3f} {by_gradient / normal_large:8.0f}x (E)")
    print("(E) extrapolated, not measured: see below\n")

    print(f"Student-t at {large:,} rows, measured with {reduced.sampler.chains} chains x "
          f"{args.large_draws} draws + {args.large_draws} tuning:")
    print(f"  wall {reduced_wall:.1f} s, {per_draw:.2f} s per draw per chain "
          f"(about {per_draw / gradient[large]:.0f} gradient evaluations a draw)")
    print(f"  one log density + gradient: {gradient[large] * 1e3:.1f} ms at {large:,} rows, "
          f"{gradient[SIZES[1]] * 1e3:.3f} ms at {SIZES[1]:,} ({gradient[large] / gradient[SIZES[1]]:.0f}x)")
    print(f"  EXTRAPOLATED default fit, from per-draw cost x {DEFAULT_ITERATIONS} x {DEFAULT_CHAINS} chains / "
          f"{fitter.cores} cores: {by_draws:.0f} s ({by_draws / 60:.0f} min; assumes draws cost as in this short fit)")
    print(f"  EXTRAPOLATED default fit, from the {SIZES[1]:,}-row fit x gradient-cost ratio: "
          f"{by_gradient:.0f} s ({by_gradient / 60:.0f} min; assumes the same number of gradients)")


if __name__ == "__main__":
    main()
