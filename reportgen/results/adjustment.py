"""A pair's partial correlation: x and y once the control columns are allowed for, beside the simple one.

With the sampler the "partial" model (``models.partial``) is fitted and checked against its exact
reference; with the exact engine the exact posterior is used directly (Jeffreys' priors; see
``data.controls`` for why the exact posterior of a simple correlation from ``n - k`` rows applies).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from reportgen import interpret, summaries
from reportgen.crosscheck import CrossCheck, cross_check, exact_only_check
from reportgen.data import ControlData, PairData
from reportgen.diagnostics import NOT_SAMPLED, Diagnosis, diagnose
from reportgen.fit import PairFit
from reportgen.models.partial import exact_partial_posterior, reference_inputs
from reportgen.results.rho import RhoSummary, exact_posterior_of, from_draws, from_exact
from reportgen.spec import Spec

__all__ = ["Adjustment", "adjustment_result", "change_sentence"]

# a change of the median smaller than this is "little changed" (the report's usual resolution of rho)
LITTLE_CHANGE = 0.1


@dataclass(frozen=True)
class Adjustment:
    controls: tuple[str, ...]
    control_labels: tuple[str, ...]
    n: int  # rows with x, y and every control
    n_dropped: int
    simple_r: float  # sample r of x and y over those rows
    simple: RhoSummary  # the simple correlation over those rows (exact posterior, normal model)
    partial_r: float
    partial: RhoSummary
    reference: summaries.PearsonReference  # Fisher's interval and the t test, on n - k rows
    engine: str  # "mcmc" or "exact"
    seed: int | None
    diagnosis: Diagnosis
    crosscheck: CrossCheck
    sentence: str  # what the adjustment changed, in words
    method_sentence: str

    @property
    def status(self) -> str:
        return self.diagnosis.status


def _listing(labels: tuple[str, ...]) -> str:
    return labels[0] if len(labels) == 1 else ", ".join(labels[:-1]) + " and " + labels[-1]


def change_sentence(simple: RhoSummary, partial: RhoSummary, controls: str) -> str:
    """What allowing for the controls did to the correlation, in one or two sentences."""
    before, after = simple.median, partial.median
    moved = f"from {interpret.format_rho(before)} to {interpret.format_rho(after)} (medians)"
    if simple.excludes_zero and not partial.excludes_zero:
        verdict = (f"Allowing for {controls}, the correlation goes {moved} and is no longer clearly different from "
                   f"zero: most of the raw association runs through {controls}.")
    elif simple.excludes_zero and partial.excludes_zero and np.sign(before) != np.sign(after):
        verdict = f"Allowing for {controls}, the correlation reverses, {moved}."
    elif abs(after) < abs(before) - LITTLE_CHANGE:
        verdict = f"Allowing for {controls}, the correlation weakens, {moved}."
    elif abs(after) > abs(before) + LITTLE_CHANGE:
        verdict = f"Allowing for {controls}, the correlation strengthens, {moved}."
    else:
        verdict = f"Allowing for {controls} changes the correlation little, {moved}."
    return (verdict + " The adjustment removes only straight-line relations with the listed columns; anything "
            "not measured stays in.")


def adjustment_result(spec: Spec, data: PairData, fit: PairFit | None) -> Adjustment:
    """The partial correlation of one pair, beside the simple one over the same rows (the exact posterior of
    the normal model, so that the two differ only by the adjustment); ``fit`` is the sampler's fit of the
    partial model (None with the exact engine)."""
    adjustment: ControlData = data.adjustment  # type: ignore[assignment]
    document = spec.document
    mass = document.summary.credible_mass
    a, b = data.pair.priors.rho.shapes
    labels = tuple(spec.display_name(c) for c in adjustment.controls)
    posterior = exact_partial_posterior(adjustment, a, b)
    simple = from_exact(exact_posterior_of(adjustment.stats, a, b), spec)
    seed = None
    if fit is None:
        partial = from_exact(posterior, spec)
        diagnosis, check, engine = NOT_SAMPLED, exact_only_check(posterior, mass), "exact"
        method = ("Partial correlation by the exact engine: Jeffreys' exact posterior of a correlation from the "
                  f"residual sums, with {adjustment.residual.n:,} rows ({adjustment.n:,} less one per control), "
                  "flat priors on the intercepts and slopes.")
    else:
        diagnosis = diagnose(fit.draws, fit.diverging, fit.energy, document.diagnostics)
        rho_diagnostics = next(p for p in diagnosis.parameters if p.name == "rho")
        partial = from_draws(fit.draws["rho"], spec, rho_diagnostics.ess_bulk)
        check = cross_check(np.ravel(fit.draws["rho"]), rho_diagnostics.mcse_mean, rho_diagnostics.ess_bulk,
                            *reference_inputs(adjustment, data.pair.priors), document.rules, mass,
                            {name: p for name, p, _ in partial.rules},
                            rule_mcses={name: e for name, _, e in partial.rules})
        if check.applies and not check.within_error:
            diagnosis = dataclasses.replace(diagnosis, reasons=(
                *diagnosis.reasons, "the sampler and the exact reference for the partial \u03c1 differ by more "
                                    "than the allowance"), status="fail" if diagnosis.status == "fail" else "warn")
        engine, seed = "mcmc", fit.seed
        method = ("Partial correlation by the sampler: x and y given the controls are bivariate normal around a "
                  "straight-line function of the controls, fitted from the sums of squares and products; flat "
                  "priors on the intercepts and slopes, the spec's priors on the SDs and on \u03c1. "
                  + interpret.crosscheck_sentence(
                      applies=check.applies, reference_priors=check.reference_priors, mean_gap=check.mean_gap,
                      mean_allowed=check.mean_allowed, rule_name=None, rule_gap=0.0, rule_allowed=0.0,
                      within=check.within_error))
    return Adjustment(
        controls=adjustment.controls, control_labels=labels, n=adjustment.n, n_dropped=adjustment.n_dropped,
        simple_r=adjustment.stats.sample_r, simple=simple, partial_r=adjustment.partial_r, partial=partial,
        reference=summaries.pearson_reference(adjustment.residual.n, adjustment.partial_r, mass),
        engine=engine, seed=seed, diagnosis=diagnosis, crosscheck=check,
        sentence=change_sentence(simple, partial, _listing(labels)), method_sentence=method)
