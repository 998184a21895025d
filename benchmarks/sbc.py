"""Simulation-based calibration of rho over the full grid, at a size too slow for CI.

Settings: each engine (the exact engine; the sampler with each chosen model), each n and each
prior on rho (uniform, and stretched Beta priors concentrated near +1 and near -1). Each setting
is simulated from its prior and fitted with the same prior (Talts et al. 2018). Prints one table:
setting, replications, p-values (chi-square on binned ranks or quantiles; for the exact engine also
Kolmogorov-Smirnov of the posterior CDF at the true rho), time, and whether the setting rejects at
the Bonferroni level that holds the whole table at ``--family-level``.

Run: .venv/bin/python benchmarks/sbc.py [--exact-replications 10000] [--sampler-replications 1000]
     [--n 5 20 200] [--priors uniform near+1 near-1] [--engines exact sampler] [--models normal]
The default grid takes about 20 minutes on 2 cores (measured: the exact grid about 3 minutes at 10,000
replications, each sampler setting 1 to 2.5 minutes per 1000 fits after a compile of about 10 s).
"""

from __future__ import annotations

import argparse
import time
import warnings

warnings.filterwarnings("ignore")


def main() -> None:
    from reportgen.calibration import (
        PRIOR_SETTINGS,
        bonferroni_level,
        calibrate,
        calibrate_exact,
        describe_prior,
    )
    from reportgen.spec import Sampler

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--exact-replications", type=int, default=10_000)
    parser.add_argument("--sampler-replications", type=int, default=1000)
    parser.add_argument("--n", type=int, nargs="+", default=[5, 20, 200])
    parser.add_argument("--priors", nargs="+", choices=list(PRIOR_SETTINGS), default=list(PRIOR_SETTINGS))
    parser.add_argument("--engines", nargs="+", choices=["exact", "sampler"], default=["exact", "sampler"])
    parser.add_argument("--models", nargs="+", choices=["normal", "student_t"], default=["normal"],
                        help="sampled models (student_t costs grow with n)")
    parser.add_argument("--draws", type=int, default=500, help="kept draws per chain for the sampler")
    parser.add_argument("--family-level", type=float, default=0.01)
    parser.add_argument("--seed", type=int, default=2018)
    args = parser.parse_args()

    exact_settings = [(n, p) for n in args.n for p in args.priors] if "exact" in args.engines else []
    sampler_settings = ([(m, n, p) for m in args.models for n in args.n for p in args.priors]
                        if "sampler" in args.engines else [])
    if any(n < 4 for n in args.n):
        parser.error("every n must be at least 4 (the exact engine's minimum)")
    # two tests per exact setting (chi-square and Kolmogorov-Smirnov), one per sampler setting
    tests = 2 * len(exact_settings) + len(sampler_settings)
    if tests == 0:
        parser.error("nothing to run")
    level = bonferroni_level(args.family_level, tests)
    sampler = Sampler(draws=args.draws, tune=400, chains=2, seed=args.seed)

    header = (f"{'engine':<18} {'n':>4}  {'prior on rho':<13} {'reps':>6}  {'chi2 p':>8}  {'KS p':>8}  "
              f"{'diverg.':>7}  {'time':>7}  verdict")
    print(header)
    print("-" * len(header))
    rejected = 0

    def row(engine: str, n: int, prior: str, reps: int, chi2: float, ks: float | None, divergent: int | None,
            seconds: float, uniform: bool) -> None:
        nonlocal rejected
        rejected += not uniform
        ks_text = f"{ks:8.3g}" if ks is not None else f"{'-':>8}"
        div_text = f"{divergent:7d}" if divergent is not None else f"{'-':>7}"
        print(f"{engine:<18} {n:>4}  {prior:<13} {reps:>6}  {chi2:8.3g}  {ks_text}  {div_text}  "
              f"{seconds:6.1f}s  {'uniform' if uniform else 'REJECTED'}", flush=True)

    for index, (n, name) in enumerate(exact_settings):
        prior = PRIOR_SETTINGS[name]
        started = time.perf_counter()
        result = calibrate_exact(args.exact_replications, n=n, rho_prior=prior, seed=args.seed + index)
        row("exact", n, describe_prior(prior), result.replications, result.chi2_p_value, result.ks_p_value,
            None, time.perf_counter() - started, result.is_uniform(level))

    warmed: set[str] = set()
    for index, (model, n, name) in enumerate(sampler_settings):
        prior = PRIOR_SETTINGS[name]
        if model not in warmed:
            # the first fit compiles the model; pay it outside the timed rows
            started = time.perf_counter()
            calibrate(1, n=n, sampler=sampler, model=model, seed=args.seed)
            print(f"(compiled the {model} model in {time.perf_counter() - started:.0f} s)", flush=True)
            warmed.add(model)
        started = time.perf_counter()
        result = calibrate(args.sampler_replications, n=n, sampler=sampler, model=model, rho_prior=prior,
                           seed=args.seed + 1000 * (index + 1))
        row(f"sampler {model}", n, describe_prior(prior), result.replications, result.chi2_p_value, None,
            result.divergent_fits, time.perf_counter() - started, result.is_uniform(level))

    print("-" * len(header))
    print(f"Bonferroni: family-wise level {args.family_level:g} over {tests} tests "
          f"({len(exact_settings)} exact settings x 2 tests, {len(sampler_settings)} sampler settings x 1), "
          f"so each test at {level:.3g}; {rejected} of {len(exact_settings) + len(sampler_settings)} "
          f"settings rejected.")
    print("chi-square: ranks of the true rho among 99 thinned draws (sampler, 10 bins) or posterior CDF at the "
          "true rho (exact, 20 bins); KS: that CDF against Uniform(0, 1); diverg.: fits with a divergence.")


if __name__ == "__main__":
    main()
