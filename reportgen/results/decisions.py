"""Verdicts under Monte Carlo error, and many verdicts read together.

A rule's probability from posterior draws is a share of draws, so it carries a
Monte Carlo standard error. Its size follows from the effective sample size of
the indicator draws themselves (whether each draw satisfies the rule), not from
the ESS of rho: the indicator mixes differently from rho, more slowly when the
threshold sits in a tail. A verdict whose probability lies within
``BORDERLINE_MCSE`` standard errors of the required probability could turn over
on a rerun with another seed, so it is called borderline.

With many verdicts, the report also states how many of the rules called "met"
one should expect to be wrong under the model and priors: the sum of
``1 - p`` over the met verdicts, the posterior expected number of false
discoveries (Newton, Noueiry, Sarkar & Ahlquist 2004, Biostatistics 5(2);
Mueller, Parmigiani & Rice 2006, in Bayesian Statistics 8). Divided by the number
of met verdicts it is the posterior expected false discovery rate.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

BORDERLINE_MCSE = 2.0  # within this many Monte Carlo standard errors of the requirement: borderline


def indicator_mcse(indicator: np.ndarray, fallback_ess: float) -> float:
    """Monte Carlo standard error of the share of draws where ``indicator`` holds.

    ``indicator`` is shaped (chain, draw). MCSE = sqrt(p (1 - p) / ESS), with the ESS
    of the indicator draws (the usual "mean" ESS of Vehtari et al. 2021, which is what
    a mean of draws needs). When every draw agrees the ESS of the indicator says
    nothing and p (1 - p) is 0, which would claim no error at all: then p is taken
    half a draw from the end and the ESS is ``fallback_ess`` (rho's bulk ESS), so the
    error stays an honest upper bound of the right size instead of 0.
    """
    import arviz as az

    values = np.asarray(indicator, dtype=float)
    if values.ndim == 1:
        values = values[np.newaxis, :]
    total = values.size
    p = float(values.mean())
    if 0.0 < p < 1.0:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ess = float(az.ess(values, method="mean"))
        if not math.isfinite(ess) or ess <= 0.0:
            ess = fallback_ess
    else:
        ess = fallback_ess
        p = min(max(p, 0.5 / total), 1.0 - 0.5 / total)
    ess = max(min(ess, float(total)) if math.isfinite(ess) else float(total), 1.0)
    return math.sqrt(p * (1.0 - p) / ess)


def is_borderline(probability: float, required: float, mcse: float) -> bool:
    """Whether the verdict could turn over within ``BORDERLINE_MCSE`` Monte Carlo standard errors."""
    return mcse > 0.0 and abs(probability - required) < BORDERLINE_MCSE * mcse


def borderline_sentence(probability: float, required: float, mcse: float) -> str:
    """What a borderline verdict means and what to do, in one sentence."""
    return (f"This verdict is borderline: the probability's Monte Carlo error is {mcse:.3f}, and its distance "
            f"from the required {required:.6g} is {abs(probability - required):.3f}, less than "
            f"{BORDERLINE_MCSE:g} times that error, so a rerun with another seed could turn it over; "
            "run more draws (the error falls with the square root of the number of draws) before relying on it.")


@dataclass(frozen=True)
class ManyDecisions:
    """The met verdicts of a run, read together."""

    verdicts: int  # every (pair, rule) verdict
    met: int
    expected_wrong: float  # sum of 1 - p over the met verdicts

    @property
    def expected_false_share(self) -> float:
        return self.expected_wrong / self.met if self.met else 0.0


def many_decisions(probabilities: list[tuple[float, bool]]) -> ManyDecisions:
    """From (probability, met) for every verdict of a run."""
    met = [p for p, is_met in probabilities if is_met]
    return ManyDecisions(verdicts=len(probabilities), met=len(met), expected_wrong=float(sum(1.0 - p for p in met)))


def many_decisions_sentence(summary: ManyDecisions) -> str:
    """Page one's reading of all verdicts together; empty when there is at most one verdict."""
    if summary.verdicts < 2:
        return ""
    if summary.met == 0:
        return (f"None of the {summary.verdicts} verdicts is met, so none can be a false alarm; a rule not met may "
                "still hold, as its probability says.")
    wrong = summary.expected_wrong
    shown = "less than 0.01" if wrong < 0.01 else f"{wrong:.2f}"
    if summary.met == 1:
        return (f"Read together: 1 of the {summary.verdicts} verdicts is met. If the model and priors are right, "
                f"the chance that it is wrong is {shown}, one minus its probability; with more rules and pairs "
                "examined, the expected number of wrong met verdicts is the sum of these (Newton et al. 2004).")
    return (f"Read together: {summary.met} of the {summary.verdicts} verdicts are met. If the model and priors are "
            f"right, the expected number of wrong ones among them is {shown} (the sum of one minus each met "
            f"verdict's probability; an expected false discovery rate of {summary.expected_false_share:.1%}; "
            "Newton et al. 2004). Unlike a per-rule requirement, this grows with the number of rules and pairs "
            "examined.")
