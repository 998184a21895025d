"""A pair's correlation group by group: each group alone, partially pooled, compared, and Simpson's warning.

Each group's own posterior is the exact one (Jeffreys' priors on the group's means and SDs, the pair's prior
on rho): it needs only the group's sums, so it costs nothing, and no sampler is run for groups. The
within-group correlation (one rho shared by every group, each group with its own means) is the exact
posterior from the pooled within-group sums with ``n - (G - 1)`` rows: each group's mean costs one degree of
freedom, as in the analysis of covariance (common practice). Under ``groups = "partial"`` the groups'
correlations are also fitted as draws from one normal distribution on Fisher's z scale
(``models.hierarchical``), and the groups are compared from their own (separate) posteriors, which are
independent because the groups share no rows.

Simpson's warning fires when the pooled correlation and the within-group one (or, when partially pooled,
the groups' mean) have opposite signs, each with probability at least ``SIMPSON_PROBABILITY``.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

from reportgen.data import GroupData, SufficientStats
from reportgen.data.groups import LeftOutGroup
from reportgen.difference import RhoDifference, posterior_from_stats, rho_difference
from reportgen.models.hierarchical import GroupInput, PartialPooling, partial_pooling, spread_sentence
from reportgen.results.rho import RhoSummary, exact_posterior_of, from_exact, from_grid
from reportgen.spec import Spec

__all__ = ["GroupAnalysis", "GroupComparison", "GroupFit", "group_analysis"]

SIMPSON_PROBABILITY = 0.95
MAX_AUTOMATIC_COMPARISONS = 5
# a gap between the pooled and the within-group medians larger than this is said in words
MATERIAL_GAP = 0.1  # up to this many groups, every two are compared unless [compare] groups says


@dataclass(frozen=True)
class GroupFit:
    label: str
    n: int
    sample_r: float
    alone: RhoSummary  # from this group's rows only
    pooled: RhoSummary | None  # partially pooled; None under groups = "separate"


@dataclass(frozen=True)
class GroupComparison:
    first: str
    second: str
    difference: RhoDifference  # rho(second) - rho(first)
    sentence: str


@dataclass(frozen=True)
class GroupAnalysis:
    column: str
    model: str  # "separate" or "partial"
    groups: tuple[GroupFit, ...]
    left_out: tuple[LeftOutGroup, ...]
    n_unlabelled: int
    within: RhoSummary  # one correlation shared by all groups, each with its own means and SDs
    within_n: int
    pooling: PartialPooling | None
    mean: RhoSummary | None  # the partially pooled groups' mean correlation (tanh of the mean on z)
    comparisons: tuple[GroupComparison, ...]
    comparisons_note: str  # why no comparison is shown, when none is
    simpson: bool
    simpson_sentence: str
    summary_sentence: str
    left_out_sentence: str
    spread_sentence: str

    @property
    def spread_median(self) -> float:
        return self.pooling.spread.median if self.pooling is not None else float("nan")


def within_stats(groups: tuple[SufficientStats, ...]) -> SufficientStats:
    """The pooled within-group sums: every group centred on its own means, with n - (G - 1) rows."""
    sxx = sum(g.sxx for g in groups)
    syy = sum(g.syy for g in groups)
    sxy = sum(g.sxy for g in groups)
    n = sum(g.n for g in groups) - (len(groups) - 1)
    rss = syy - sxy * sxy / sxx  # loses digits only when |r| is within rounding of 1, refused per group
    return SufficientStats(n=n, mean_x=0.0, mean_y=0.0, sxx=sxx, syy=syy, sxy=sxy, rss=max(rss, 0.0) or None)


def _compared_labels(spec: Spec, labels: tuple[str, ...]) -> tuple[tuple[str, ...], str]:
    asked = spec.document.compare.groups
    if asked:
        chosen = tuple(label for label in labels if label in asked)
        note = "" if len(chosen) >= 2 else ("Fewer than two of the groups listed in [compare] groups were fitted "
                                            "for this pair, so no two are compared.")
        return chosen, note
    if len(labels) <= MAX_AUTOMATIC_COMPARISONS:
        return labels, ""
    return (), (f"With {len(labels)} groups the {len(labels) * (len(labels) - 1) // 2} comparisons of two are not "
                "shown; list the groups to compare in [compare] groups.")


def _signed(value: float) -> str:
    """A difference with its sign, written with a true minus sign as the report's tables are."""
    return f"{value:+.2f}".replace("-", "\u2212")


def _comparison_sentence(first: str, second: str, difference: RhoDifference) -> str:
    return (f"\u03c1 is higher in {second} than in {first} with probability {difference.p_rose:.2f}; the two "
            f"differ by more than {difference.margin:g} with probability {difference.p_moved:.2f} (difference "
            f"{_signed(difference.median)}, {difference.credible_mass:.0%} interval {_signed(difference.lower)} to "
            f"{_signed(difference.upper)}).")


def _simpson(pooled_p_positive: float, reference: RhoSummary) -> bool:
    level = SIMPSON_PROBABILITY
    return ((pooled_p_positive >= level and 1.0 - reference.p_positive >= level)
            or (1.0 - pooled_p_positive >= level and reference.p_positive >= level))


def _direction(p_positive: float) -> str:
    return "positive" if p_positive >= 0.5 else "negative"


def group_analysis(spec: Spec, groups: GroupData, model: str, rho_shapes: tuple[float, float],
                   pooled_p_positive: float, pooled_median: float, noun: str) -> GroupAnalysis:
    """Every grouped number of one pair; ``rho_shapes`` is the pair's prior on rho, ``pooled_*`` describe the
    pair's fit to all rows together and ``noun`` names the grouping column in sentences."""
    a, b = rho_shapes
    noun = noun.lower()
    fits = []
    sums = {}  # each group's sums, from which the comparisons take its posterior
    for group in groups.groups:
        posterior = exact_posterior_of(group.stats, a, b)
        sums[group.label] = group.stats
        fits.append(GroupFit(label=group.label, n=group.stats.n, sample_r=group.stats.sample_r,
                             alone=from_exact(posterior, spec), pooled=None))
    pooled_within = within_stats(tuple(g.stats for g in groups.groups))
    within = from_exact(exact_posterior_of(pooled_within, a, b), spec)
    pooling = mean = None
    pooling_failure = ""
    if model == "partial" and len(groups.groups) >= 2:
        try:
            pooling = partial_pooling([GroupInput(g.label, g.stats.n, g.stats.sample_r, g.stats.one_minus_abs_r)
                                       for g in groups.groups], spec.document.summary.credible_mass)
        except ValueError as exc:  # groups too unlike for one grid (a correlation within 1e-10 of 1, say)
            pooling_failure = f"The groups could not be partially pooled ({exc}); each is shown alone."
    if pooling is not None:
        fits = [GroupFit(label=fit.label, n=fit.n, sample_r=fit.sample_r, alone=fit.alone,
                         pooled=from_grid(shrunk.grid, shrunk.density, spec))
                for fit, shrunk in zip(fits, pooling.groups, strict=True)]
        m = pooling.mean_rho
        mean = RhoSummary(median=m.median, lower=m.lower, upper=m.upper, mean=m.mean, sd=float("nan"),
                          p_positive=pooling.p_mean_positive, p_rope=float("nan"), interval_kind="central",
                          rules=())
    labels, note = _compared_labels(spec, tuple(f.label for f in fits))
    margin, mass = spec.document.compare.margin, spec.document.summary.credible_mass
    comparisons = []
    for first, second in itertools.combinations(labels, 2):
        difference = rho_difference(posterior_from_stats(sums[first], a, b),
                                    posterior_from_stats(sums[second], a, b), margin, mass,
                                    names=(first, second))
        comparisons.append(GroupComparison(first, second, difference,
                                           _comparison_sentence(first, second, difference)))
    reference = mean if mean is not None else within
    simpson = _simpson(pooled_p_positive, reference)
    what = "the groups' mean correlation (partially pooled)" if mean is not None else "the within-group correlation"
    simpson_sentence = ""
    if simpson:
        simpson_sentence = (
            f"Simpson's paradox: over all rows together the correlation is {_direction(pooled_p_positive)} "
            f"(median {_signed(pooled_median)}), but {what} is {_direction(reference.p_positive)} (median "
            f"{_signed(reference.median)}), each with probability at least {SIMPSON_PROBABILITY:.2f}. The pooled "
            f"number mixes differences between the groups (by {noun}) with the relation inside each; read the "
            "grouped result, and ask which of the two the decision needs.")
    left_out_sentence = ""
    if groups.left_out:
        listed = "; ".join(f"{g.label} ({g.reason})" for g in groups.left_out)
        left_out_sentence = f"Left out of the grouped fits: {listed}."
    if groups.n_unlabelled:
        left_out_sentence += (f" {groups.n_unlabelled} row{'s' if groups.n_unlabelled != 1 else ''} with no "
                              f"{noun} value {'are' if groups.n_unlabelled != 1 else 'is'} left out of the grouped "
                              "fits.")
    shown = np.array([f.alone.median for f in fits])
    summary_sentence = (
        f"Within the {len(fits)} groups by {noun} the correlation ranges from {_signed(shown.min())} to "
        f"{_signed(shown.max())} "
        f"(medians, each group alone); one correlation shared by all groups, each with its own means and SDs, "
        f"has median {_signed(within.median)} ({_signed(within.lower)} to {_signed(within.upper)}).")
    if not simpson and abs(pooled_median - within.median) > MATERIAL_GAP:
        stronger = abs(pooled_median) > abs(within.median)
        summary_sentence += (
            f" Over all rows together the correlation is {'stronger' if stronger else 'weaker'} (median "
            f"{_signed(pooled_median)}): {'part of it comes from' if stronger else 'it is diluted by'} differences "
            "between the groups rather than from the relation inside each.")
    return GroupAnalysis(
        column=groups.column, model=model, groups=tuple(fits), left_out=groups.left_out,
        n_unlabelled=groups.n_unlabelled, within=within, within_n=pooled_within.n, pooling=pooling, mean=mean,
        comparisons=tuple(comparisons), comparisons_note=note if not comparisons else "",
        simpson=simpson, simpson_sentence=simpson_sentence, summary_sentence=summary_sentence.strip(),
        left_out_sentence=left_out_sentence.strip(),
        spread_sentence=spread_sentence(pooling, "groups") if pooling is not None else pooling_failure)
