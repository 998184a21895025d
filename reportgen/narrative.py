"""Report-level wording: the status banner, the methods, the cautions and the
run record in readable form. Pair-level sentences live in ``interpret``.
"""

from __future__ import annotations

import math
from typing import Any

from reportgen import interpret
from reportgen.crosscheck import MCSE_MULTIPLE
from reportgen.models.hierarchical import MU_PRIOR_SD, SMALL_SPREAD, TAU_PRIOR_SCALE, WORDS_MASS
from reportgen.results import RunResults
from reportgen.results.groups import SIMPSON_PROBABILITY
from reportgen.spec import MeanPrior, Priors, SdPrior, Spec

# A prior on a mean or SD is called wide when its scale is at least WIDE_SCALE_MULTIPLE sample SDs and, for
# a mean, the sample mean lies within WIDE_CENTRE_SCALES of its scales from the prior's centre. Why: under
# the normal approximation a prior whose log density has slope g at the estimate moves a posterior of
# variance v by about v * g (common practice). For a mean (posterior SD s/sqrt(n)) that slope is at most
# |centre - mean| / scale^2 <= 1/scale <= 1/(5 s), a shift of at most 1/(5 sqrt(n)) posterior SDs: a tenth
# at n = 4, less with more rows. For an SD under a half-normal or half-t prior of scale c >= 5 s the shift is
# smaller still (about s^2 / c^2 / sqrt(2 n) posterior SDs). So the data dominate these priors.
WIDE_SCALE_MULTIPLE = 5.0
WIDE_CENTRE_SCALES = 1.0

# The priors the exact engine integrates the means and SDs out under, whatever the spec says (Jeffreys 1961).
EXACT_MEANS = MeanPrior(family="flat")
EXACT_SDS = SdPrior(family="jeffreys")


def status_banner(total: int, failed: list[str], warned: list[str], *, engine: str = "mcmc") -> dict[str, str]:
    """The line on page one that says whether every fit can be relied on; ``engine`` is the spec's.

    The exact engine runs no sampler, so it never claims that sampler checks passed: they do not apply.
    """
    plural = "s" if total != 1 else ""
    if failed:
        names = "; ".join(failed)
        return {"level": "fail", "text": (
            f"{len(failed):,} of {total:,} pair{plural} failed the sampler checks ({names}). Their numbers are "
            "shown but their verdicts are not judged: do not rely on them until the pairs are re-run.")}
    if engine == "exact" and not warned:
        return {"level": "pass", "text": (
            f"{f'All {total:,} pairs were' if total != 1 else 'The pair was'} computed by quadrature with the "
            "exact engine. No sampler ran, so "
            "the sampler checks do not apply.")}
    if warned:
        names = "; ".join(warned)
        count = len(warned)
        return {"level": "warn", "text": (
            f"No pair failed; {count} of {total} pair{plural} carr{'ies' if count == 1 else 'y'} a warning "
            f"({names}): see the sampler checks on {'that pair' if count == 1 else 'those pairs'}' page"
            f"{'' if count == 1 else 's'}.")}
    return {"level": "pass", "text": (
        f"All {total} fit{plural} passed every sampler check "
        "(R-hat, effective sample size, divergences, E-BFMI).")}


def draft_banner(draws: int, chains: int, ess_min: float, *, quick: bool = True, engine: str = "mcmc",
                 rhat_max: float = 1.01) -> str:
    """What a draft is, for page one and the methods: a quick look has too few draws for a final report; a
    draft marked in the spec is provisional for the author's own reasons."""
    if not quick or engine == "exact":
        return ("Draft: this report is marked as a draft in its specification. Its verdicts are provisional "
                "and it is not for decisions until a final version is issued.")
    return (f"Draft: a quick look with {draws:,} draws in each of {chains} chain{'s' if chains != 1 else ''}, "
            f"judged against relaxed thresholds (effective sample size at least {ess_min:g}, R-hat below "
            f"{rhat_max:g}). Probabilities near a "
            "requirement are uncertain and the verdicts are provisional; re-run without --quick before any "
            "result is used.")


def used_priors(priors: Priors, engine: str) -> Priors:
    """The priors a fit actually uses: the exact engine keeps the prior on rho and replaces the others."""
    if engine == "exact":
        return Priors(rho=priors.rho, means=EXACT_MEANS, sds=EXACT_SDS)
    return priors


def prior_lines(priors: Priors, engine: str = "mcmc") -> list[str]:
    """The priors as used, one line each for rho, the means and the SDs."""
    priors = used_priors(priors, engine)
    return [
        interpret.prior_text_rho(*priors.rho.shapes),
        interpret.prior_text_means(priors.means.units, priors.means.location, priors.means.scale,
                                   priors.means.family),
        interpret.prior_text_sds(priors.sds.family, priors.sds.units, priors.sds.scale, priors.sds.nu),
    ]


def _mean_prior_used(prior: MeanPrior, mean: float, sd: float) -> tuple[str, bool]:
    """The prior on one mean in the data's units, and whether it is wide for this variable."""
    if prior.family == "flat":
        return "flat", True
    centre = mean if prior.units == "scaled" else prior.location
    scale = prior.scale * sd if prior.units == "scaled" else prior.scale
    wide = scale >= WIDE_SCALE_MULTIPLE * sd and abs(mean - centre) <= WIDE_CENTRE_SCALES * scale
    return f"Normal({interpret.format_number(centre)}, {interpret.format_number(scale)})", wide


def _sd_prior_used(prior: SdPrior, sd: float) -> tuple[str, bool]:
    """The prior on one SD in the data's units, and whether it is wide for this variable."""
    if prior.family == "jeffreys":
        return "1/\u03c3", True
    scale = prior.scale * sd if prior.units == "scaled" else prior.scale
    wide = scale >= WIDE_SCALE_MULTIPLE * sd
    if prior.family == "half_student_t":
        return f"Half-Student-t(\u03bd = {prior.nu:g}, {interpret.format_number(scale)})", wide
    return f"Half-normal({interpret.format_number(scale)})", wide


def prior_scale_rows(spec: Spec, results: RunResults) -> list[dict[str, str]]:
    """Each variable's sample mean and SD beside the priors on its mean and SD in the data's units.

    One row per variable; a variable whose pairs differ (other complete rows, or a pair's own priors) gets
    one row per distinct version, labelled with its pairs. Rank-model pairs have no means or SDs to model.
    """
    if spec.document.engine == "exact":
        return []
    priors_of = {pair.key: pair.priors for pair in spec.pairs}
    found: dict[tuple[str, ...], list[str]] = {}
    for result in results.pairs:
        if result.model == "rank" or result.key not in priors_of:
            continue
        priors = priors_of[result.key]
        stats = dict(result.sufficient)
        n = stats["n"]
        for label, mean, squares in ((result.x_label, stats["mean_x"], stats["sxx"]),
                                     (result.y_label, stats["mean_y"], stats["syy"])):
            sd = math.sqrt(squares / (n - 1))  # the n - 1 sample SD that scaled priors use
            mean_text, mean_wide = _mean_prior_used(priors.means, mean, sd)
            sd_text, sd_wide = _sd_prior_used(priors.sds, sd)
            narrow = [name for name, wide in (("mean", mean_wide), ("SD", sd_wide)) if not wide]
            row = (label, interpret.format_number(mean), interpret.format_number(sd), mean_text, sd_text,
                   "yes" if not narrow else f"no ({' and '.join(narrow)})")
            found.setdefault(row, []).append(result.title)
    versions: dict[str, int] = {}
    for row in found:
        versions[row[0]] = versions.get(row[0], 0) + 1
    rows = []
    for (label, mean, sd, mean_prior, sd_prior, wide), titles in found.items():
        if versions[label] > 1:  # say which pairs this version belongs to
            shown = ", ".join(titles[:3]) + (f" and {len(titles) - 3} more" if len(titles) > 3 else "")
            label = f"{label} (in {shown})"
        rows.append({"variable": label, "mean": mean, "sd": sd, "mean_prior": mean_prior, "sd_prior": sd_prior,
                     "wide": wide})
    return rows


def priors_note(spec: Spec, rows: list[dict[str, str]]) -> str:
    """How the priors on the means and SDs were used, in words, beside the table of their scales."""
    document = spec.document
    priors = document.priors
    if document.engine == "exact":
        replaced = "; ".join(prior_lines(priors)[1:])
        return ("The exact engine uses the spec's prior on \u03c1 as stated but replaces the spec's priors on "
                f"the means and SDs ({replaced}) by a flat prior on each mean and a 1/\u03c3 prior on each SD "
                "(Jeffreys' priors): only under those does the posterior of \u03c1 reduce to a one-dimensional "
                "integral, which depends on the data through n and the sample correlation alone and is "
                "computed by quadrature. Results under the spec's own priors on the means and SDs need "
                "engine = \u201cmcmc\u201d.")
    scaled = any(p.priors.means.units == "scaled" and p.priors.means.family != "flat"
                 or p.priors.sds.units == "scaled" and p.priors.sds.family != "jeffreys" for p in spec.pairs)
    parts = []
    if scaled:
        parts.append("Priors marked \u201csample mean\u201d or \u201csample SD\u201d are scaled to each pair's "
                     "data, so they are set after seeing the data (common practice for weakly informative "
                     "defaults).")
    parts.append("The table gives each prior on a mean or SD in the data's units, beside the sample mean and SD.")
    parts.append(f"A prior counts as wide here when its scale is at least {WIDE_SCALE_MULTIPLE:g} times the "
                 "sample SD and, for a mean, its centre lies within one scale of the sample mean: it then "
                 "moves the posterior of that mean or SD by at most about a tenth of its posterior SD (at "
                 "n = 4, less with more rows), so the data dominate.")
    narrow = list(dict.fromkeys(row["variable"] for row in rows if row["wide"] != "yes"))
    if rows and not narrow:
        parts.append("By that rule every prior here is wide.")
    elif narrow:
        parts.append(f"By that rule the priors are not wide for {interpret.joined(narrow)}: there they inform "
                     "the estimates of the means or SDs, and through them can move \u03c1.")
    parts.append("All priors are used as stated in the specification.")
    if any(p.model == "rank" for p in spec.pairs):
        parts.append("The rank model uses only the prior on \u03c1, carried over to Kendall's \u03c4.")
    return " ".join(parts)


def methods_context(spec: Spec, results: RunResults) -> dict[str, Any]:
    """The methods section's context.

    ``diagram_priors`` holds the prior texts as used (the exact engine's replace the spec's on the means
    and SDs), for the model diagram.
    """
    document = spec.document
    engine = document.engine
    sampler = document.sampler
    thresholds = document.diagnostics
    used = prior_lines(document.priors, engine)
    overrides = []
    for pair in spec.pairs:
        lines = prior_lines(pair.priors, engine)
        if lines != used:
            overrides.append({"pair": pair.key, "lines": lines})
    rows = prior_scale_rows(spec, results)
    return {
        "priors": used,
        "diagram_priors": {"rho_prior": used[0], "mean_prior": used[1], "sd_prior": used[2]},
        "rho_prior_name": interpret.rho_prior_name(*document.priors.rho.shapes),
        "overrides": overrides,
        "scaled_note": priors_note(spec, rows),
        "prior_scales": rows,
        "wide_multiple": f"{WIDE_SCALE_MULTIPLE:g}",
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
        "groups_paragraph": groups_paragraph(spec),
        "adjustment_paragraph": adjustment_paragraph(spec),
        "models": sorted({pair.model for pair in spec.pairs}),
        "checks": model_check_lines(spec),
        "engine": document.engine,
        "mcse_multiple": f"{MCSE_MULTIPLE:g}",
        "savage_dickey_multiple": f"{interpret.SAVAGE_DICKEY_MCSE_MULTIPLE:g}",
        "probability_note": (
            "Probabilities come from the exact posterior by quadrature; values beyond 0.999 or below 0.001 "
            "are shown as such." if document.engine == "exact" else
            "Probabilities are shares of the posterior draws, so values beyond 0.999 or below 0.001 are shown "
            "as such."),
    }


def groups_paragraph(spec: Spec) -> str:
    """How grouped pairs are fitted, for the methods section; empty when no pair is grouped."""
    grouped = [pair for pair in spec.pairs if pair.group_by]
    if not grouped:
        return ""
    text = ("Grouped pairs are also fitted within each group (each value of the grouping column with at least 4 "
            "complete rows; smaller groups are listed and left out). Each group alone has the exact posterior of "
            "its correlation from its own sums. The within-group correlation is one correlation shared by all "
            "groups, each with its own means and SDs: the exact posterior from the pooled within-group sums, with "
            "one row less per group beyond the first, as in the analysis of covariance. Two groups are compared "
            "through the posterior of the difference of their correlations, by numerical convolution of their "
            "independent posteriors. Simpson's warning is given when the correlation over all rows and the "
            "within-group one (or the partially pooled mean) have opposite signs, each with probability at least "
            f"{SIMPSON_PROBABILITY:g} (Simpson 1951).")
    if any(pair.groups == "partial" for pair in grouped):
        text += (" Partially pooled pairs treat the groups' correlations on Fisher's z scale as draws from one "
                 f"normal distribution with mean \u03bc ~ Normal(0, {MU_PRIOR_SD:g}) and spread \u03c4 ~ "
                 f"Half-normal({TAU_PRIOR_SCALE:g}), "
                 "estimated with them from each group's Jeffreys likelihood of \u03c1, by quadrature on a grid "
                 "(a hierarchical model; Gelman et al., Bayesian Data Analysis, ch. 5). A spread below "
                 f"{SMALL_SPREAD:g} on the z scale with {WORDS_MASS:.0%} probability reads \u201cthe groups differ "
                 "little\u201d, above it "
                 "\u201cdiffer clearly\u201d.")
    return text


def adjustment_paragraph(spec: Spec) -> str:
    """How partial correlations are computed, for the methods section; empty when no pair has controls."""
    if not any(pair.controls for pair in spec.pairs):
        return ""
    engine = ("with the exact engine it is used directly" if spec.document.engine == "exact" else
              "the sampler fits the model (flat priors on the intercepts and slopes, the spec's priors on the SDs "
              "and on \u03c1) and is checked against that exact posterior under the same priors")
    return ("A partial correlation is the correlation of x and y once each is regressed on the control columns: "
            "x and y given the controls are bivariate normal around a straight-line function of them, and the "
            "model is written from the (k + 2) \u00d7 (k + 2) sums of squares and products, so its cost does not "
            "grow with the rows. With flat priors on the intercepts and the k slopes and 1/\u03c3 priors on the "
            "SDs, the posterior of the partial correlation is Jeffreys' exact posterior of a simple correlation "
            "with n \u2212 k rows (the Bayesian counterpart of Fisher's 1924 result for its sampling distribution); "
            f"{engine}.")


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
        ("Nuisance prior widths tried",
         "none: the exact engine's flat and 1/\u03c3 priors have no width to change"
         if spec.document.engine == "exact" else ", ".join(f"\u00d7{w:g}" for w in widths) or "none"),
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
        ("Sampler", "not used: the exact engine computes each posterior by quadrature"
         if str(reproducible["engine"]).startswith("exact") else
         f"{sampler['chains']} chains \u00d7 {sampler['draws']:,} draws after {sampler['tune']:,} "
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
        "rhat_max": "\u2014" if row["rhat_max"] is None else f"{row['rhat_max']:.4f}",
        "ess_bulk_min": "\u2014" if row["ess_bulk_min"] is None else f"{row['ess_bulk_min']:,.0f}",
        "ess_tail_min": "\u2014" if row["ess_tail_min"] is None else f"{row['ess_tail_min']:,.0f}",
        "status": row["status"],
        "draws_sha256": "\u2014" if row["draws_sha256"] is None else row["draws_sha256"][:16] + "\u2026",
    } for row in reproducible["pairs"]]


def summary_table_note(*, mass: str, interval_name: str, rho_prior: str, any_sampled: bool, any_failed: bool,
                       any_rank: bool) -> str:
    """The note under page one's table: what each column holds, which priors the Bayes factor uses."""
    parts = [
        f"Credible interval: the {mass} {interval_name} interval of the posterior of \u03c1.",
        "Rule columns: the posterior probability that the statement holds, and whether it reaches the "
        "requirement; \u201cborderline\u201d: within two Monte Carlo standard errors of it.",
    ]
    if any_failed:
        parts.append("\u201cNot judged\u201d: the sampler failed for that pair, so no verdict is read from its "
                     "probabilities.")
    parts.append(
        "Bayes factor: BF\u2081\u2080, how many times more likely the data are with a correlation than without, "
        "or BF\u2080\u2081 = 1/BF\u2081\u2080 where the data favour no correlation; computed exactly with "
        f"Jeffreys' priors for the means and SDs and {rho_prior} for \u03c1"
        + ("; for rank pairs, from Kendall's \u03c4." if any_rank else "."))
    if any_sampled:
        parts.append("Sampler checks: convergence (R-hat, effective sample size, divergences, E-BFMI) and "
                     "agreement with the exact reference; they say whether the computation can be trusted, not "
                     "whether a rule is met. \u201cNot run\u201d: the posterior was computed by quadrature.")
    else:
        parts.append("Sampler checks: \u201cnot run\u201d, since every posterior was computed by quadrature and "
                     "no sampler ran.")
    return " ".join(parts)
