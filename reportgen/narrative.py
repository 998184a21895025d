"""Report-level wording: the status banner, the methods, the cautions and the
run record in readable form. Pair-level sentences live in ``interpret``.
"""

from __future__ import annotations

from typing import Any

from reportgen import interpret
from reportgen.crosscheck import MCSE_MULTIPLE, VAGUE_PRIOR_ALLOWANCE_SD
from reportgen.results import RunResults
from reportgen.spec import Priors, Spec


def status_banner(total: int, failed: list[str], warned: list[str]) -> dict[str, str]:
    """The line on page one that says whether every fit can be relied on."""
    if failed:
        names = "; ".join(failed)
        return {"level": "fail", "text": (
            f"{len(failed)} of {total} pair{'s' if total != 1 else ''} did not pass the convergence "
            f"checks ({names}). Their numbers are shown but must not be relied on until re-run.")}
    if warned:
        names = "; ".join(warned)
        return {"level": "warn", "text": (
            f"All {total} fits converged; {len(warned)} carr{'ies' if len(warned) == 1 else 'y'} a caution "
            f"({names}): see the diagnostics of {'that pair' if len(warned) == 1 else 'those pairs'}.")}
    return {"level": "pass", "text": (
        f"All {total} fit{'s' if total != 1 else ''} passed every convergence check "
        "(R-hat, effective sample size, divergences, E-BFMI).")}


def prior_lines(priors: Priors) -> list[str]:
    return [
        interpret.prior_text_rho(*priors.rho.shapes),
        interpret.prior_text_means(priors.means.units, priors.means.location, priors.means.scale,
                                   priors.means.family),
        interpret.prior_text_sds(priors.sds.family, priors.sds.units, priors.sds.scale, priors.sds.nu),
    ]


def methods_context(spec: Spec, results: RunResults) -> dict[str, Any]:
    document = spec.document
    sampler = document.sampler
    thresholds = document.diagnostics
    overrides = []
    for pair in spec.pairs:
        if pair.priors != document.priors:
            overrides.append({"pair": pair.key, "lines": prior_lines(pair.priors)})
    scaled = document.priors.means.units == "scaled" or document.priors.sds.units == "scaled"
    return {
        "priors": prior_lines(document.priors),
        "overrides": overrides,
        "scaled_note": (
            "Priors marked \u201csample mean\u201d or \u201csample SD\u201d are scaled to each pair's "
            "data: they are wide relative to the data's spread, so they let the data dominate, "
            "but they are set after seeing the data (common practice for weakly informative "
            "defaults). Priors in the data's units are used exactly as stated."
        ) if scaled else "All priors are stated in the data's units and were fixed before the data were seen.",
        "sampler": [
            ("Algorithm", "No-U-Turn Sampler (Hoffman & Gelman 2014), adaptive step size and mass matrix"),
            ("Chains", f"{sampler.chains}"),
            ("Tuning draws per chain", f"{sampler.tune:,} (discarded)"),
            ("Kept draws per chain", f"{sampler.draws:,}"),
            ("Target acceptance", f"{sampler.target_accept:g}"),
            ("Master seed", f"{sampler.seed}"),
        ],
        "thresholds": [
            ("R-hat (rank-normalised, split)", f"below {thresholds.rhat_max:g}", "fail"),
            ("Bulk and tail ESS", f"at least {thresholds.ess_min:g}", "fail"),
            ("Divergent transitions", "none allowed" if thresholds.max_divergences == 0
             else f"at most {thresholds.max_divergences}", "fail"),
            ("E-BFMI (lowest chain)", f"at least {thresholds.bfmi_min:g}", "warn"),
        ],
        "interval": (
            f"Intervals hold {document.summary.credible_mass:.0%} of the posterior probability; "
            + ("they are highest-density intervals (the shortest such interval)."
               if document.summary.interval == "hdi"
               else "they are equal-tailed, cutting off equal probability in each tail.")
        ),
        "n_pairs": len(results.pairs),
        "models": sorted({pair.model for pair in spec.pairs}),
        "checks": model_check_lines(spec),
        "engine": document.engine,
        "mcse_multiple": f"{MCSE_MULTIPLE:g}",
        "prior_allowance": f"{VAGUE_PRIOR_ALLOWANCE_SD:g}",
        "probability_note": (
            "Probabilities come from the exact posterior by quadrature; values beyond 0.999 or below 0.001 "
            "are shown as such." if document.engine == "exact" else
            "Probabilities are shares of the posterior draws, so values beyond 0.999 or below 0.001 are shown "
            "as such."),
    }


def model_check_lines(spec: Spec) -> list[tuple[str, str]]:
    """The settings of the model checks, as label and value, for the methods section."""
    checks = spec.document.checks
    widths = spec.document.sensitivity.nuisance_widths
    return [
        ("Influential row", f"leaving it out alone moves the median of \u03c1 by more than {checks.influence_shift:g}, "
                            "or changes a rule's verdict"),
        ("Outlying row", f"squared Mahalanobis distance beyond the {checks.outlier_level:g} family-wise limit"),
        ("Not bivariate normal", f"Mardia's skewness or kurtosis test below {checks.normality_level:g} "
                                 "(Bonferroni-combined)"),
        ("Coarse values", f"at most {checks.discrete_max_distinct} distinct values, or at least "
                          f"{checks.discrete_tied_share:.0%} of all pairs of rows tied"),
        ("Poorly reproduced", f"posterior predictive tail probability below {checks.predictive_level:g}"),
        ("Nuisance prior widths tried", ", ".join(f"\u00d7{w:g}" for w in widths) or "none"),
    ]


def cautions() -> list[dict[str, str]]:
    """The cautions every report carries, whatever the data."""
    return [
        {"title": "Association is not causation",
         "text": "A correlation says how closely two measurements move together in these data. It does "
                 "not show that one causes the other: both may follow a third factor, the direction may "
                 "run either way, or the link may come from how the samples were chosen."},
        {"title": "Only straight-line association is measured",
         "text": "\u03c1 measures linear association. A strong curved or threshold relationship can give a "
                 "small \u03c1, and a \u03c1 near zero does not mean the variables are unrelated. Look at "
                 "each scatter plot before reading the number."},
        {"title": "The models assume independent rows from one population",
         "text": "Each pair is modelled as independent draws from one distribution: a bivariate normal, a "
                 "bivariate t for the robust model, and for the rank model any distribution with a monotone "
                 "link. Clusters (sites, batches, periods), repeated measures on the same unit or serial "
                 "dependence over time break that assumption, which no model here repairs, and can make "
                 "intervals too narrow."},
        {"title": "Outliers and restricted ranges",
         "text": "A few extreme points can create or hide a correlation, and a sample that covers only "
                 "part of the range of a variable understates the correlation that a wider range would "
                 "show. Each pair's page lists the rows that alone move the result and the rows further out "
                 "than the model allows. Leaving out one row at a time can miss a group of outlying rows that "
                 "hide each other, and no check can see a range that was never sampled."},
        {"title": "Decision thresholds are the client's choice",
         "text": "The thresholds, required probabilities and the band treated as practically zero were set "
                 "in the specification by the client or analyst, not by the method. A different choice can "
                 "change a verdict; the probabilities themselves are reported so readers can apply their own."},
        {"title": "This report supports, and does not replace, qualified review",
         "text": "The results should be reviewed by a qualified statistician and read together with the "
                 "rules, standards and guidance that govern the client's field before any decision that "
                 "affects health, safety, money or compliance is taken."},
    ]


def record_rows(reproducible: dict[str, Any]) -> list[tuple[str, str]]:
    """The run record as label/value rows for the appendix (no clock times: see record.json)."""
    sampler = reproducible["sampler"]
    platform = reproducible["platform"]
    return [
        ("Tool", f"{reproducible['tool']} {reproducible['tool_version']}"),
        ("Spec file", reproducible["spec_file"]),
        ("Spec SHA-256", reproducible["spec_sha256"]),
        ("Data file", reproducible["data_file"]),
        ("Data SHA-256", reproducible["data_sha256"]),
        ("Data rows", f"{reproducible['data_rows']:,}"),
        ("Engine", reproducible["engine"]),
        ("Sampler", f"{sampler['chains']} chains \u00d7 {sampler['draws']:,} draws after {sampler['tune']:,} "
                    f"tuning; target acceptance {sampler['target_accept']}"),
        ("Command-line overrides", ", ".join(f"{k} = {v}" for k, v in reproducible["command_line_overrides"].items())
         or "none (the spec file below was run as written)"),
        ("Master seed", str(reproducible["master_seed"])),
        ("Pair seeds", reproducible["seed_derivation"]),
        ("Platform", f"{platform['system']} {platform['machine']}, {platform['python_implementation']}, "
                     f"BLAS: {platform['numpy_blas']}"),
        ("Overall status", reproducible["overall_status"]),
    ]


def record_pair_rows(reproducible: dict[str, Any]) -> list[dict[str, str]]:
    return [{
        "pair": row["pair"],
        "rows_used": f"{row['rows_used']:,}",
        "rows_dropped": f"{row['rows_dropped']:,}",
        "seed": "\u2014" if row["seed"] is None else str(row["seed"]),
        "rhat_max": "\u2014" if row["rhat_max"] is None else f"{row['rhat_max']:.3f}",
        "ess_bulk_min": "\u2014" if row["ess_bulk_min"] is None else f"{row['ess_bulk_min']:,.0f}",
        "ess_tail_min": "\u2014" if row["ess_tail_min"] is None else f"{row['ess_tail_min']:,.0f}",
        "status": row["status"],
        "draws_sha256": "\u2014" if row["draws_sha256"] is None else row["draws_sha256"][:16] + "\u2026",
    } for row in reproducible["pairs"]]
