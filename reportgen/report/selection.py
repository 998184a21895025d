"""Which pairs a report shows in full, and the ranked list of the pairs that meet a decision rule.

A run of thousands of pairs cannot give each pair a page (the pages are where the report's time and memory
go), so ``[report] pair_pages`` chooses the pairs that get one; every pair stays in results.csv and
results.parquet. Strength is |posterior median of rho|; ties keep the pairs' order in the run.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

from reportgen import interpret
from reportgen.results import PairResult
from reportgen.spec.schema import DEFAULT_PAIR_PAGES, PairPages

__all__ = ["PageSelection", "capped", "meets_a_rule", "more_sentence", "ranked_by_strength", "ranked_note",
           "ranked_rule_rows", "select_pair_pages", "selection_sentence", "strength"]


@dataclass(frozen=True)
class PageSelection:
    """The pairs with a page of their own (keys, in the run's order) and how they were chosen."""

    keys: tuple[str, ...]
    total: int
    setting: PairPages | None  # as the spec says it; None when left out
    basis: str  # "all", "rules_met" or "strongest": what decided, once the default is resolved

    @property
    def every_pair(self) -> bool:
        return len(self.keys) == self.total


def strength(result: PairResult) -> float:
    """|posterior median of rho|; a pair without a median (a failed fit) is the weakest of all."""
    median = result.rho.median
    return abs(median) if math.isfinite(median) else -1.0


def meets_a_rule(result: PairResult) -> bool:
    """Whether the pair meets at least one decision rule; a failed fit's verdicts are not judged."""
    return result.status != "fail" and any(rule.verdict == "met" for rule in result.rules)


def ranked_by_strength(results: Sequence[PairResult]) -> list[PairResult]:
    """Strongest first; equal strengths keep the run's order (``sorted`` is stable)."""
    return sorted(results, key=lambda result: -strength(result))


def select_pair_pages(results: Sequence[PairResult], setting: PairPages | None) -> PageSelection:
    """The pairs that get a page: every pair ("all"), those that meet a rule ("rules_met"), the N strongest
    (a whole number), or when the spec says nothing every pair up to ``DEFAULT_PAIR_PAGES`` pairs and the
    ``DEFAULT_PAIR_PAGES`` strongest above that."""
    total = len(results)
    if setting == "all" or (setting is None and total <= DEFAULT_PAIR_PAGES):
        chosen = set(range(total))
        basis = "all"
    elif setting == "rules_met":
        chosen = {index for index, result in enumerate(results) if meets_a_rule(result)}
        basis = "rules_met"
    else:
        count = DEFAULT_PAIR_PAGES if setting is None else int(setting)
        order = sorted(range(total), key=lambda index: -strength(results[index]))
        chosen = set(order[:count])
        basis = "all" if len(chosen) == total else "strongest"
    keys = tuple(result.key for index, result in enumerate(results) if index in chosen)
    return PageSelection(keys=keys, total=total, setting=setting, basis=basis)


# Page one stays a few pages long at thousands of pairs: each list shows at most this many rows and says
# how many more there are and where they are.
MAX_RANKED_ROWS = 100
MAX_SUMMARY_ROWS = 60
MAX_FOREST_ROWS = 40
MAX_LISTED = 20
MAX_RECORD_ROWS = 60
MAX_CHANGE_ROWS = 60


def _pairs(count: int) -> str:
    return f"{count:,} pair" + ("" if count == 1 else "s")


def selection_sentence(selection: PageSelection) -> str:
    """Page one's sentence on which pairs have a page of their own, and where every pair's numbers are."""
    everywhere = ("Every pair's numbers, with or without a page, are in results.csv and results.parquet beside "
                  "this report.")
    shown, total = len(selection.keys), selection.total
    if selection.basis == "all":
        lead = ("The one pair has a page of its own." if total == 1 else
                f"Each of the {total:,} pairs has a page of its own.")
        return f"{lead} {everywhere}"
    if selection.basis == "rules_met":
        if not shown:
            return (f"No pair meets a decision rule, so none of the {total:,} pairs has a page of its own "
                    f"([report] pair_pages = \"rules_met\"). {everywhere}")
        verbs = "meets at least one decision rule and has a page of its own" if shown == 1 else (
            "meet at least one decision rule and have a page of their own")
        return (f"{_pairs(shown)} of {total:,} {verbs} "
                f"([report] pair_pages = \"rules_met\"). {everywhere}")
    how = ("as [report] pair_pages sets" if selection.setting is not None else
           f"the default above {DEFAULT_PAIR_PAGES} pairs; [report] pair_pages chooses others")
    return (f"{shown:,} of the {total:,} pairs have a page of their own: the {shown:,} strongest by "
            f"|posterior median \u03c1| ({how}). {everywhere}")


def more_sentence(left_out: int, what: str, where: str) -> str:
    """The line under a list cut short: how many more there are and where to find them; ``what`` is worded
    for many pairs ("are flagged", "have a borderline verdict", "carry ...")."""
    if left_out <= 0:
        return ""
    noun = "1 more pair" if left_out == 1 else f"{left_out:,} more pairs"
    verb = what.replace("are ", "is ", 1) if left_out == 1 and what.startswith("are ") else what
    if left_out == 1 and verb.startswith("have "):
        verb = "has " + verb.removeprefix("have ")
    return f"{noun} (not listed here) {verb}; {where}."


def capped(items: list[dict[str, str]], paged: frozenset[str] | set[str], limit: int = MAX_LISTED
           ) -> tuple[list[dict[str, str]], int]:
    """At most ``limit`` items, each linked only when its pair has a page; and how many were left out.

    Items carry the pair's key under "key" and its link under "anchor"; a pair without a page keeps its
    title but loses its link, which would point nowhere.
    """
    kept = [{**item, "anchor": item["anchor"] if item.get("key") in paged else ""} for item in items[:limit]]
    return kept, max(0, len(items) - limit)


def ranked_rule_rows(results: Sequence[PairResult], paged: frozenset[str] | set[str],
                     anchor_of: Callable[[str], str], limit: int = MAX_RANKED_ROWS) -> tuple[list[dict[str, Any]], int]:
    """The pairs that meet a decision rule, strongest first, at most ``limit`` of them; and how many meet one.

    One short row a pair: its rank, title (linked when it has a page), rows used, median and interval of rho,
    and each rule it meets with the probability that met it.
    """
    meeting = ranked_by_strength([result for result in results if meets_a_rule(result)])
    rows = []
    for rank, result in enumerate(meeting[:limit], start=1):
        rows.append({
            "rank": f"{rank:,}",
            "title": result.title,
            "anchor": anchor_of(result.key) if result.key in paged else "",
            "n": f"{result.n:,}",
            "median": interpret.format_rho(result.rho.median),
            "interval": f"{interpret.format_rho(result.rho.lower)} to {interpret.format_rho(result.rho.upper)}",
            "rules_met": [{"name": rule.name, "probability": interpret.format_probability(rule.probability)}
                          for rule in result.rules if rule.verdict == "met"],
        })
    return rows, len(meeting)


def ranked_note(shown: int, meeting: int, total: int) -> str:
    """The sentence under the ranked table: how many pairs meet a rule, and where the rest are."""
    if meeting == 0:
        return (f"None of the {total:,} pairs meets a decision rule; results.csv and results.parquet hold each "
                "pair's probabilities (columns p_<rule>).")
    lead = (f"{_pairs(meeting)} of {total:,} {'meets' if meeting == 1 else 'meet'} at least one decision rule; "
            "strongest (largest |median \u03c1|) first.")
    if shown < meeting:
        lead += (f" The {shown:,} strongest are listed; the other {meeting - shown:,} are in results.csv and "
                 "results.parquet (columns p_<rule> against each rule's requirement).")
    return lead
