"""A CI-sized simulation-based calibration (Talts et al. 2018): ranks of the true rho
among posterior draws must look uniform. The full-size run is benchmarks/sbc.py."""

from __future__ import annotations

import numpy as np

from reportgen.calibration import calibrate


def test_ranks_of_true_rho_are_uniform() -> None:
    result = calibrate(120, n=20)
    assert result.ranks.min() >= 0 and result.ranks.max() <= result.max_rank
    # chi-square test of uniformity over 10 bins (Talts et al. 2018, sec. 4); a fixed seed makes it repeatable
    assert result.chi2_p_value > 0.01, result.counts
    # and not degenerate: ranks spread over the whole range
    assert np.count_nonzero(result.counts) == result.bins
