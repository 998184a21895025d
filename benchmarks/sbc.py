"""Simulation-based calibration of rho, at a size too slow for CI.

Prints the rank histogram and a chi-square test of uniformity (Talts et al. 2018).
Run: .venv/bin/python benchmarks/sbc.py [--replications 1000] [--n 20]
"""

from __future__ import annotations

import argparse
import time
import warnings

warnings.filterwarnings("ignore")


def main() -> None:
    from reportgen.calibration import calibrate

    parser = argparse.ArgumentParser()
    parser.add_argument("--replications", type=int, default=1000)
    parser.add_argument("--n", type=int, default=20)
    args = parser.parse_args()
    started = time.perf_counter()
    result = calibrate(args.replications, n=args.n)
    width = 50 / max(result.counts.max(), 1)
    expected = args.replications / result.bins
    print(f"SBC of rho: {args.replications} replications, n = {args.n}, ranks 0..{result.max_rank}")
    for index, count in enumerate(result.counts):
        low = index * (result.max_rank + 1) // result.bins
        print(f"  ranks {low:3d}+  {count:5d}  {'#' * int(count * width)}")
    print(f"expected per bin {expected:.1f}; chi-square uniformity p = {result.chi2_p_value:.3f}; "
          f"{time.perf_counter() - started:.0f} s")


if __name__ == "__main__":
    main()
