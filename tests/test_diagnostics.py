"""Convergence diagnostics: thresholds turn ArviZ's numbers into pass / warn / fail."""

from __future__ import annotations

import numpy as np

from reportgen.diagnostics import diagnose
from reportgen.spec import Diagnostics


def chains(shift: float = 0.0, seed: int = 0, n: int = 1000) -> np.ndarray:
    rng = np.random.default_rng(seed)
    draws = rng.normal(size=(4, n))
    draws[0] += shift
    return draws


def test_well_mixed_chains_pass() -> None:
    draws = {"rho": chains(), "mu_x": chains(seed=1)}
    energy = np.random.default_rng(2).normal(size=(4, 1000))
    result = diagnose(draws, np.zeros((4, 1000), bool), energy, Diagnostics())
    assert result.status == "pass", result.reasons


def test_a_stuck_chain_fails_on_rhat() -> None:
    """One chain shifted by 2 SD: split R-hat far above 1.01 (Vehtari et al. 2021, sec. 4)."""
    draws = {"rho": chains(shift=2.0)}
    result = diagnose(draws, np.zeros((4, 1000), bool), np.random.default_rng(3).normal(size=(4, 1000)),
                      Diagnostics())
    assert result.status == "fail"
    assert any("R-hat of \u03c1" in reason for reason in result.reasons)


def test_too_few_draws_for_the_ess_threshold_say_so() -> None:
    rng = np.random.default_rng(6)
    draws = {"rho": rng.normal(size=(2, 200))}  # 400 draws cannot give an ESS of 400 with any margin
    result = diagnose(draws, np.zeros((2, 200), bool), rng.normal(size=(2, 200)), Diagnostics())
    ess = [reason for reason in result.reasons if "ESS" in reason]
    assert ess and all("--quick" in reason for reason in ess)


def test_autocorrelated_draws_fail_on_ess() -> None:
    rng = np.random.default_rng(4)
    walk = np.cumsum(rng.normal(size=(4, 1000)), axis=1) * 0.05 + rng.normal(size=(4, 1)) * 0.01
    result = diagnose({"rho": walk}, np.zeros((4, 1000), bool), rng.normal(size=(4, 1000)), Diagnostics())
    assert any("ESS" in reason for reason in result.reasons)


def test_divergences_fail_and_low_bfmi_warns() -> None:
    diverging = np.zeros((4, 1000), bool)
    diverging[0, :3] = True
    rng = np.random.default_rng(5)
    result = diagnose({"rho": chains()}, diverging, rng.normal(size=(4, 1000)), Diagnostics())
    assert result.status == "fail" and result.divergences == 3
    # A random walk in energy has E-BFMI near 0 (Betancourt 2016: below 0.3 is a warning sign).
    sticky_energy = np.cumsum(rng.normal(size=(4, 1000)), axis=1)
    result = diagnose({"rho": chains()}, np.zeros((4, 1000), bool), sticky_energy, Diagnostics())
    assert result.status == "warn"
    assert result.bfmi_min < 0.3
