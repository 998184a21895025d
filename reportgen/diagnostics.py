"""Convergence diagnostics as data, with the thresholds as explicit arguments.

Rank-normalised split R-hat and bulk/tail ESS follow Vehtari, Gelman, Simpson,
Carpenter & Buerkner (2021, Bayesian Analysis 16(2)); E-BFMI follows
Betancourt (2016, arXiv:1604.00695). ArviZ computes all of them.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from reportgen.spec import Diagnostics as Thresholds

STATUS_ORDER = {"pass": 0, "warn": 1, "fail": 2}

# Codes of the checks a diagnosis can break, so the advice can depend on which one failed: more draws cure
# a low ESS or a high R-hat, but not divergent transitions.
RHAT, ESS_BULK, ESS_TAIL, DIVERGENCES, BFMI = "rhat", "ess_bulk", "ess_tail", "divergences", "bfmi"


@dataclass(frozen=True)
class ParameterDiagnostics:
    name: str
    rhat: float
    ess_bulk: float
    ess_tail: float
    mcse_mean: float
    mcse_median: float


@dataclass(frozen=True)
class Diagnosis:
    parameters: tuple[ParameterDiagnostics, ...]
    divergences: int
    total_draws: int
    bfmi_min: float
    status: str  # "pass" | "warn" | "fail"
    reasons: tuple[str, ...]
    # the codes above of every broken threshold, hard and soft, in the order of ``reasons``
    broken: tuple[str, ...] = ()

    @property
    def rhat_max(self) -> float:
        return max((p.rhat for p in self.parameters), default=float("nan"))

    @property
    def ess_bulk_min(self) -> float:
        return min((p.ess_bulk for p in self.parameters), default=float("nan"))

    @property
    def ess_tail_min(self) -> float:
        return min((p.ess_tail for p in self.parameters), default=float("nan"))


NOT_SAMPLED = Diagnosis(parameters=(), divergences=0, total_draws=0, bfmi_min=float("nan"), status="pass",
                        reasons=())


def _nan_to(value: float, fallback: float) -> float:
    return fallback if not np.isfinite(value) else float(value)


def parameter_diagnostics(draws: dict[str, np.ndarray]) -> tuple[ParameterDiagnostics, ...]:
    """Diagnostics of each parameter's (chain, draw) array."""
    import arviz as az

    dataset = az.convert_to_dataset({name: np.asarray(values) for name, values in draws.items()})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        rhat = az.rhat(dataset, method="rank")
        ess_bulk = az.ess(dataset, method="bulk")
        ess_tail = az.ess(dataset, method="tail")
        mcse_mean = az.mcse(dataset, method="mean")
        mcse_median = az.mcse(dataset, method="quantile", prob=0.5)
    return tuple(
        ParameterDiagnostics(
            name=name,
            # a single chain has no between-chain R-hat: unknown (infinite), so it cannot pass
            rhat=_nan_to(float(rhat[name]), float("inf")),
            ess_bulk=_nan_to(float(ess_bulk[name]), 0.0),
            ess_tail=_nan_to(float(ess_tail[name]), 0.0),
            mcse_mean=_nan_to(float(mcse_mean[name]), float("inf")),
            mcse_median=_nan_to(float(mcse_median[name]), float("inf")),
        )
        for name in draws
    )


def bfmi(energy: np.ndarray) -> np.ndarray:
    """E-BFMI per chain (Betancourt 2016, eq. 3.3), from the (chain, draw) energies."""
    import arviz as az

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return np.asarray(az.bfmi(np.atleast_2d(energy)), dtype=float)


# The report's symbols for the parameters (1 is the pair's x, 2 its y), so that a reason reads as the tables do.
PARAMETER_SYMBOLS = {"mu_x": "\u03bc\u2081", "mu_y": "\u03bc\u2082", "sigma_x": "\u03c3\u2081",
                     "sigma_y": "\u03c3\u2082", "rho": "\u03c1", "nu": "\u03bd", "tau": "\u03c4"}


def symbol(name: str) -> str:
    return PARAMETER_SYMBOLS.get(name, name)


def diagnose(
    draws: dict[str, np.ndarray],
    diverging: np.ndarray,
    energy: np.ndarray,
    thresholds: Thresholds,
) -> Diagnosis:
    """Judge a fit: "fail" breaks a hard threshold, "warn" a soft one.

    Hard: R-hat >= ``rhat_max``, bulk or tail ESS < ``ess_min``, more than
    ``max_divergences`` divergent transitions. Soft: E-BFMI below ``bfmi_min``.
    """
    parameters = parameter_diagnostics(draws)
    divergences = int(np.sum(diverging))
    bfmi_values = bfmi(energy)
    bfmi_min = float(np.nanmin(bfmi_values)) if np.isfinite(bfmi_values).any() else float("nan")
    fails: list[tuple[str, str]] = []  # (code, reason)
    warns: list[tuple[str, str]] = []
    worst_rhat = max(parameters, key=lambda p: p.rhat)
    if not worst_rhat.rhat < thresholds.rhat_max:
        # four decimals, so that 1.0103 is seen to be above a limit of 1.01
        fails.append((RHAT, f"R-hat of {symbol(worst_rhat.name)} is {worst_rhat.rhat:.4f} "
                            f"(must be below {thresholds.rhat_max:g})"))
    for kind, code in (("bulk", ESS_BULK), ("tail", ESS_TAIL)):
        worst = min(parameters, key=lambda p, k=kind: getattr(p, f"ess_{k}"))
        value = getattr(worst, f"ess_{kind}")
        if value < thresholds.ess_min:
            total = int(np.size(diverging))
            # an ESS near the number of draws is the most a good run gives: say when the run is too short
            short = (f"; {total:,} draws in all cannot reach it: run more draws, or --quick for a draft"
                     if 0 < total < thresholds.ess_min * 1.5 else "")
            fails.append((code, f"{kind} ESS of {symbol(worst.name)} is {value:.0f} "
                                f"(needs at least {thresholds.ess_min:g}{short})"))
    if divergences > thresholds.max_divergences:
        fails.append((DIVERGENCES, f"{divergences} divergent transitions "
                                   f"(at most {thresholds.max_divergences} allowed)"))
    if np.isfinite(bfmi_min) and bfmi_min < thresholds.bfmi_min:
        warns.append((BFMI, f"E-BFMI is {bfmi_min:.2f} (below {thresholds.bfmi_min:g})"))
    status = "fail" if fails else "warn" if warns else "pass"
    return Diagnosis(
        parameters=parameters,
        divergences=divergences,
        total_draws=int(np.size(diverging)),
        bfmi_min=bfmi_min,
        status=status,
        reasons=tuple(reason for _, reason in fails + warns),
        broken=tuple(code for code, _ in fails + warns),
    )
