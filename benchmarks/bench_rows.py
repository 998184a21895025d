"""Fit time of one pair at n = 100 and n = 10,000,000 rows, side by side in one run.

The normal model is fitted from sufficient statistics (``reportgen.data.sums``), so its fit should not
grow with n; the target is "within 1.5 times". Printed per n, each the median of a few repeats: summarising
the pair (``load_pairs``: the columns parsed, the rows checked, the sums taken), the fit
(``Fitter.fit``, normal model, default sampler settings), and assembling the pair's result
(``pair_outcome``), with the parts of its model checks that read every row timed on their own. A
throwaway pair is fitted first so that the compiled model is warm.

Run: .venv/bin/python benchmarks/bench_rows.py [--large 10000000] [--repeats 3]
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
import time
import warnings
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd

warnings.filterwarnings("ignore")

TARGET = 1.5
SPEC = """
[report]
title = "Rows benchmark"
date = 2026-01-01
[data]
path = "data.csv"
[[pairs]]
x = "a"
y = "b"
"""


def frame(n: int, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    a = rng.standard_normal(n)
    return pd.DataFrame({"a": 10.0 + 2.0 * a, "b": -3.0 + 0.4 * a + np.sqrt(0.84) * rng.standard_normal(n)},
                        index=pd.Index(np.arange(2, n + 2), name="line"))


def median_seconds(action: Callable[[], object], repeats: int) -> tuple[float, object]:
    times, result = [], None
    for _ in range(repeats):
        started = time.perf_counter()
        result = action()
        times.append(time.perf_counter() - started)
    return statistics.median(times), result


def measure(spec, fitter, table, repeats: int) -> dict[str, float]:  # type: ignore[no-untyped-def]
    """Seconds of each part for one table's pair."""
    from reportgen.checks.influence import leave_one_out
    from reportgen.checks.ppc import predictive_check
    from reportgen.checks.shape import discreteness, shape_checks
    from reportgen.data import load_pairs
    from reportgen.results import pair_outcome

    document = spec.document
    seconds: dict[str, float] = {}
    seconds["summarise (load_pairs)"], pairs = median_seconds(lambda: load_pairs(spec, table), repeats)
    pair = pairs[0]
    seconds["fit (normal)"], fit = median_seconds(lambda: fitter.fit(pair, 1, "normal"), repeats)
    stats = fit.inference_data.sample_stats
    if "n_steps" in stats:  # leapfrog steps a draw: the sampler's work, apart from the cost of one step
        seconds["steps"] = float(stats["n_steps"].mean())
    seconds["result (pair_outcome)"], _ = median_seconds(lambda: pair_outcome(spec, pair, {"normal": fit}, {}), 1)
    x, y, numbers = pair.x, pair.y, pair.row_numbers
    prior = pair.pair.priors.rho.shapes
    seconds["  influence (leave-one-out)"], _ = median_seconds(
        lambda: leave_one_out(x, y, numbers, prior[0], prior[1], document.rules,
                              threshold=document.checks.influence_shift), 1)
    seconds["  shape (outliers, normality)"], _ = median_seconds(lambda: shape_checks(x, y, numbers), 1)
    seconds["  discreteness (both columns)"], _ = median_seconds(lambda: (discreteness(x), discreteness(y)), 1)
    seconds["  predictive check"], _ = median_seconds(lambda: predictive_check(fit.draws["rho"], x, y, 7), 1)
    return seconds


def main() -> None:
    from reportgen.data import Table, load_pairs
    from reportgen.fit import Fitter
    from reportgen.spec import load_spec

    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--large", type=int, default=10_000_000)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        (Path(folder) / "spec.toml").write_text(SPEC, encoding="utf-8")
        (Path(folder) / "data.csv").write_text("a,b\n", encoding="utf-8")  # never read: the tables are built here
        spec = load_spec(Path(folder) / "spec.toml")
    document = spec.document
    fitter = Fitter(document.sampler, max_divergences=document.diagnostics.max_divergences)

    def table(n: int, seed: int) -> Table:
        return Table(path=Path("data.csv"), sha256="", frame=frame(n, seed), encoding="utf-8", sheet="")

    started = time.perf_counter()
    fitter.fit(load_pairs(spec, table(100, 99))[0], 1, "normal")  # throwaway: compiles the model
    print(f"warm-up fit (compiles the normal model): {time.perf_counter() - started:.1f} s")
    print(f"sampler: {document.sampler.chains} chains x {document.sampler.draws} draws + {document.sampler.tune} "
          f"tuning, {fitter.cores} cores; median of {args.repeats} repeats\n")

    rows = {n: measure(spec, fitter, table(n, 1), args.repeats) for n in (100, args.large)}

    small, large = rows[100], rows[args.large]
    print(f"{'part':32} {'n = 100':>10} {f'n = {args.large:,}':>16} {'ratio':>8}")
    for part in small:
        if part == "steps":
            continue
        print(f"{part:32} {small[part]:9.3f}s {large[part]:15.3f}s {large[part] / small[part]:7.1f}x")
    if "steps" in small:
        print(f"{'leapfrog steps per draw (fit)':32} {small['steps']:10.2f} {large['steps']:16.2f} "
              f"{large['steps'] / small['steps']:7.2f}x")
    ratio = large["fit (normal)"] / small["fit (normal)"]
    verdict = "met" if ratio <= TARGET else "NOT met"
    print(f"\nfit time at n = {args.large:,} / at n = 100: {ratio:.2f}x (target: within {TARGET} times: {verdict})")
    print("(the model checks' parts run inside pair_outcome; timed again on their own, once each)")


if __name__ == "__main__":
    main()
