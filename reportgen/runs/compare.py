"""What changed between two runs: data, spec, versions, and per pair rho, verdicts and diagnostics."""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

from reportgen.difference import RhoDifference


@dataclass(frozen=True)
class SettingChange:
    key: str  # a readable key path, e.g. "priors.rho.a" or "versions.numpy"
    old: str  # "(not set)" when absent
    new: str


@dataclass(frozen=True)
class DataChange:
    old_file: str
    new_file: str
    old_sha256: str
    new_sha256: str
    old_rows: int
    new_rows: int
    relation: str  # "same" (identical bytes), "appended" (old file is a prefix of the new) or "different"
    added_rows: int  # rows only in the new file when appended; 0 otherwise
    sentence: str  # e.g. "The new data file holds the 84 earlier rows and 21 added rows; ..."


@dataclass(frozen=True)
class RuleChange:
    rule: str
    old_verdict: str  # "met" / "not met" / "" when the rule did not exist in that run
    new_verdict: str
    old_probability: float  # NaN when absent
    new_probability: float

    @property
    def flipped(self) -> bool:
        return bool(self.old_verdict and self.new_verdict and self.old_verdict != self.new_verdict)


@dataclass(frozen=True)
class RhoSummary:
    median: float
    lower: float
    upper: float
    n: int


@dataclass(frozen=True)
class PairChange:
    key: str
    x: str
    y: str
    old: RhoSummary  # as each run reported it
    new: RhoSummary
    difference: RhoDifference  # new minus old; basis says which data each side holds
    basis: str  # "added_rows": earlier rows against the added rows only; "independent": the two runs' posteriors
    rules: tuple[RuleChange, ...]
    old_status: str
    new_status: str
    sentence: str  # the pair's change in words

    @property
    def flips(self) -> tuple[RuleChange, ...]:
        return tuple(rule for rule in self.rules if rule.flipped)

    @property
    def status_changed(self) -> bool:
        return self.old_status != self.new_status


@dataclass(frozen=True)
class Comparison:
    old_label: str
    new_label: str
    old_date: dt.date
    new_date: dt.date
    margin: float
    data: DataChange
    spec_changes: tuple[SettingChange, ...]
    version_changes: tuple[SettingChange, ...]  # package versions and environment (renderer, fonts, CPU)
    pairs: tuple[PairChange, ...]  # pairs with a flipped verdict first, then changed diagnostics, then the rest
    added: tuple[str, ...]  # pair keys only in the new run
    removed: tuple[str, ...]  # pair keys only in the old run
    basis_sentence: str  # independence in words: added rows only, or two independent samples
    method_sentence: str  # how the difference was computed, naming the method

    @property
    def flipped(self) -> tuple[PairChange, ...]:
        return tuple(p for p in self.pairs if p.flips)

    @property
    def status_changes(self) -> tuple[PairChange, ...]:
        return tuple(p for p in self.pairs if p.status_changed)
