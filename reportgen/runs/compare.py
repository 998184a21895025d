"""What changed between two runs: data, spec, versions, and per pair rho, verdicts and diagnostics."""

from __future__ import annotations

import datetime as dt
import hashlib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from reportgen import interpret
from reportgen.data import file_sha256
from reportgen.difference import RhoDifference, rho_difference
from reportgen.runs.snapshot import RunSnapshot, flatten, period_posteriors, rho_posterior

NOT_SET = "(not set)"
IGNORED_SPEC_KEYS = frozenset({"report.date"})  # every run has its own date: not a change of settings
ENVIRONMENT_PARTS = ("versions", "platform", "environment")


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
class OneSide:
    """A pair found in one run only, as that run reported it."""

    key: str
    rho: RhoSummary
    status: str


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
    added_pairs: tuple[OneSide, ...] = ()  # the added pairs' rho and status in the new run
    removed_pairs: tuple[OneSide, ...] = ()  # the removed pairs' in the old run

    @property
    def flipped(self) -> tuple[PairChange, ...]:
        return tuple(p for p in self.pairs if p.flips)

    @property
    def status_changes(self) -> tuple[PairChange, ...]:
        return tuple(p for p in self.pairs if p.status_changed)


# ----------------------------------------------------------------------------- settings


def _lone_entry(key: str, other: dict[str, str]) -> str | None:
    """The named list entry (e.g. ``pairs[a vs d]``) holding ``key`` that the other side lacks entirely."""
    for end in (i for i, ch in enumerate(key) if ch == "]"):
        entry = key[:end + 1]
        if key[key.rindex("[", 0, end) + 1:end].isdigit():
            continue
        if not any(k == entry or k.startswith((entry + ".", entry + "[")) for k in other):
            return entry
    return None


def setting_changes(old: dict[str, Any], new: dict[str, Any], prefix: str = "",
                    ignored: frozenset[str] = frozenset()) -> tuple[SettingChange, ...]:
    """Key paths whose values differ, in the new settings' order, then those only in the old ones. A named
    entry only one side has (a pair or rule added or removed) is one change listing its values that are set."""
    before = dict(flatten(old, prefix))
    after = dict(flatten(new, prefix))
    changes: dict[str, SettingChange] = {}
    for key in list(after) + [key for key in before if key not in after]:
        if key in ignored or before.get(key) == after.get(key):
            continue
        side, other = (after, before) if key in after else (before, after)
        entry = _lone_entry(key, other)
        if entry is None:
            changes[key] = SettingChange(key, before.get(key, NOT_SET), after.get(key, NOT_SET))
        elif entry not in changes:
            values = "; ".join(f"{k[len(entry):].lstrip('.')} = {v}" for k, v in side.items()
                               if k.startswith(entry) and v not in ("null", "", "[]", "{}"))
            changes[entry] = SettingChange(entry, NOT_SET if side is after else values,
                                           values if side is after else NOT_SET)
    return tuple(changes.values())


def _environment(snapshot: RunSnapshot) -> dict[str, Any]:
    reproducible = snapshot.reproducible
    parts: dict[str, Any] = {"versions": {"reportgen": reproducible.get("tool_version")}}
    for name in ENVIRONMENT_PARTS:
        value = reproducible.get(name, snapshot.record.get(name))
        if isinstance(value, dict):
            parts[name] = {**parts.get(name, {}), **value}
    return parts


# ----------------------------------------------------------------------------- data


def _prefix_matches(path: Path, size: int, sha256: str) -> bool:
    """The file's first ``size`` bytes hash to ``sha256``, end with a line break and are not all of it."""
    digest = hashlib.sha256()
    last = b""
    with path.open("rb") as handle:
        remaining = size
        while remaining > 0:
            block = handle.read(min(remaining, 1 << 20))
            if not block:
                return False  # the file is shorter than the old one
            digest.update(block)
            last = block[-1:]
            remaining -= len(block)
        more = handle.read(1)
    return bool(more) and last == b"\n" and digest.hexdigest() == sha256


def data_change(old: RunSnapshot, new: RunSnapshot, new_data: Path | None) -> DataChange:
    before, after = old.reproducible, new.reproducible
    old_rows, new_rows = int(before["data_rows"]), int(after["data_rows"])
    # file names, not paths: the report must not change with the folder a run happened to sit in
    fields = dict(old_file=str(before.get("data_file", "")), new_file=str(after.get("data_file", "")),
                  old_sha256=before["data_sha256"], new_sha256=after["data_sha256"],
                  old_rows=old_rows, new_rows=new_rows)
    if before["data_sha256"] == after["data_sha256"]:
        return DataChange(**fields, relation="same", added_rows=0,
                          sentence=f"Both runs read the same data ({old_rows:,} rows, identical bytes).")
    old_bytes = before.get("data_bytes")
    why = ""
    if old_bytes is None:
        why = "the earlier run's record does not hold its data file's size"
    elif new_data is None or not Path(new_data).is_file():
        why = "the newer run's data file is not at hand"
    elif file_sha256(Path(new_data)) != after["data_sha256"]:
        why = f"{new_data} has changed since the newer run read it"
    elif _prefix_matches(Path(new_data), int(old_bytes), before["data_sha256"]):
        added = new_rows - old_rows
        return DataChange(**fields, relation="appended", added_rows=added,
                          sentence=f"The new data file holds the {old_rows:,} earlier rows unchanged, followed "
                                   f"by {added:,} added rows.")
    detail = f" ({why}, so shared rows cannot be recognised)" if why else ""
    return DataChange(**fields, relation="different", added_rows=0,
                      sentence=f"The data differ: the earlier file is not an unchanged start of the new one"
                               f"{detail}; {old_rows:,} rows before, {new_rows:,} now.")


# ----------------------------------------------------------------------------- pairs


def rho_summary(entry: dict[str, Any]) -> RhoSummary:
    rho = entry["rho"]
    return RhoSummary(median=float(rho["median"]), lower=float(rho["lower"]), upper=float(rho["upper"]),
                      n=int(entry["rows_used"]))


def rule_changes(old: dict[str, Any], new: dict[str, Any]) -> tuple[RuleChange, ...]:
    before = {rule["name"]: rule for rule in old.get("rules", [])}
    after = {rule["name"]: rule for rule in new.get("rules", [])}
    names = list(after) + [name for name in before if name not in after]
    nan = float("nan")
    return tuple(RuleChange(rule=name,
                            old_verdict=before.get(name, {}).get("verdict", ""),
                            new_verdict=after.get(name, {}).get("verdict", ""),
                            old_probability=float(before.get(name, {}).get("probability", nan)),
                            new_probability=float(after.get(name, {}).get("probability", nan)))
                 for name in names)


def signed_rho(value: float) -> str:
    text = interpret.format_rho(value)
    return "+" + text if value > 0 and text != "0.00" else text


def pair_sentence(key: str, old: RhoSummary, new: RhoSummary, diff: RhoDifference, basis: str,
                  flips: tuple[RuleChange, ...]) -> str:
    """The pair's change in words: the medians, the difference and its two probabilities, and any verdict
    that flipped. With added rows the difference is that of the added rows against the earlier ones, which
    is not the gap between the two runs' medians (the new run holds both), so the sentence says which."""
    rho = interpret.format_rho
    shown = f"{signed_rho(diff.median)} ({rho(diff.lower)} to {rho(diff.upper)})"
    if basis == "added_rows":
        middle = (f"over all rows; the added rows alone differ from the earlier rows by {shown}, so the "
                  "probability that \u03c1 rose")
    else:
        middle = f"a difference of {shown} with the two runs taken as independent; the probability that \u03c1 rose"
    # the sentence stands under the pair's own row, which names the pair by its labels
    text = (f"The median of \u03c1 went from {rho(old.median)} to {rho(new.median)} {middle} is "
            f"{interpret.format_probability(diff.p_rose)} and that it moved by more than "
            f"{interpret.format_threshold(diff.margin)} either way is {interpret.format_probability(diff.p_moved)}.")
    for change in flips:
        text += f" The verdict of rule {change.rule} flipped from {change.old_verdict} to {change.new_verdict}."
    return text


def compare_runs(old: RunSnapshot, new: RunSnapshot, margin: float, new_data: Path | None = None) -> Comparison:
    """Everything that changed from ``old`` to ``new``. ``new_data`` is the newer run's data file, used to
    recognise data that only gained rows at the end (then each pair compares the earlier rows with the
    added ones); without it the runs are compared as independent samples."""
    data = data_change(old, new, new_data)
    credible_mass = new.credible_mass
    added_sides = (period_posteriors(new, Path(new_data), data.old_rows)
                   if data.relation == "appended" and new_data is not None else {})
    old_pairs, new_pairs = old.pairs, new.pairs
    changes = []
    for key, entry in new_pairs.items():
        if key not in old_pairs:
            continue
        if key in added_sides:
            basis = "added_rows"
            earlier, later = added_sides[key]
        else:
            basis = "independent"
            earlier, later = rho_posterior(old, key), rho_posterior(new, key)
        diff = rho_difference(earlier, later, margin, credible_mass, names=("earlier", "later"))
        before, after = rho_summary(old_pairs[key]), rho_summary(entry)
        rules = rule_changes(old_pairs[key], entry)
        flips = tuple(rule for rule in rules if rule.flipped)
        changes.append(PairChange(key=key, x=entry["x"], y=entry["y"], old=before, new=after, difference=diff,
                                  basis=basis, rules=rules, old_status=old_pairs[key]["status"],
                                  new_status=entry["status"],
                                  sentence=pair_sentence(key, before, after, diff, basis, flips)))
    ordered = sorted(changes, key=lambda p: (not p.flips, not p.status_changed))  # sorted() is stable
    return Comparison(
        old_label=old.label, new_label=new.label, old_date=old.report_date, new_date=new.report_date,
        margin=float(margin), data=data,
        spec_changes=setting_changes(old.resolved_spec, new.resolved_spec, ignored=IGNORED_SPEC_KEYS),
        version_changes=setting_changes(_environment(old), _environment(new)),
        pairs=tuple(ordered),
        added=tuple(key for key in new_pairs if key not in old_pairs),
        removed=tuple(key for key in old_pairs if key not in new_pairs),
        basis_sentence=basis_sentence(data, changes),
        method_sentence=method_text(changes),
        added_pairs=tuple(OneSide(key, rho_summary(entry), entry["status"])
                          for key, entry in new_pairs.items() if key not in old_pairs),
        removed_pairs=tuple(OneSide(key, rho_summary(entry), entry["status"])
                            for key, entry in old_pairs.items() if key not in new_pairs),
    )


def basis_sentence(data: DataChange, changes: list[PairChange]) -> str:
    on_added = sum(change.basis == "added_rows" for change in changes)
    if on_added:
        rest = len(changes) - on_added
        verb = "is" if rest == 1 else "are"
        tail = (f"; {rest:,} pair{'' if rest == 1 else 's'} without enough usable added rows {verb} compared "
                "as two independent runs") if rest else ""
        return (f"The new data only add {data.added_rows:,} rows to the earlier {data.old_rows:,}, so each pair "
                f"compares the earlier rows with the added rows only: the two sides share no rows{tail}.")
    if data.relation == "same":
        return ("Both runs read the same data, so any change comes from the spec or the software; the two "
                "posteriors are still compared as independent samples, which overstates the spread of the "
                "difference.")
    return ("The two runs' data are treated as independent samples; if they share rows, the probabilities "
            "overstate how clearly rho changed.")


def method_text(changes: list[PairChange]) -> str:
    methods = list(dict.fromkeys(change.difference.method for change in changes))
    if len(methods) == 1:
        return methods[0]
    return ("The difference of the two correlations (later minus earlier) is computed by numerical convolution "
            "of the two posteriors, taken as independent, from exact densities on a grid or from draws where a "
            "run kept them; no draws are paired at random.")


# ----------------------------------------------------------------------------- tables and console

CHANGES_COLUMNS = ["pair", "change", "old_median", "old_lower", "old_upper", "new_median", "new_lower",
                   "new_upper", "difference_median", "difference_lower", "difference_upper", "p_rose", "p_moved",
                   "margin", "basis", "flipped_rules", "old_status", "new_status"]


def _number(value: float) -> object:
    return round(float(value), 6) if np.isfinite(value) else ""


def change_kind(change: PairChange) -> str:
    """The change column: "flipped" (a verdict flipped), "status" (diagnostics changed status) or "kept"."""
    return "flipped" if change.flips else "status" if change.status_changed else "kept"


def changes_rows(c: Comparison) -> tuple[list[str], list[list[object]]]:
    """changes.csv: one row per pair in the comparison's order, then the added and the removed pairs."""
    rows: list[list[object]] = []
    for change in c.pairs:
        old, new, diff = change.old, change.new, change.difference
        flipped = "; ".join(f"{rule.rule}: {rule.old_verdict} -> {rule.new_verdict}" for rule in change.flips)
        rows.append([change.key, change_kind(change), *map(_number, (old.median, old.lower, old.upper, new.median,
                     new.lower, new.upper, diff.median, diff.lower, diff.upper, diff.p_rose, diff.p_moved)),
                     c.margin, change.basis, flipped, change.old_status, change.new_status])
    known = {("added", side.key): side for side in c.added_pairs} | {("removed", side.key): side
                                                                      for side in c.removed_pairs}
    for kind, keys in (("added", c.added), ("removed", c.removed)):
        for key in keys:
            side = known.get((kind, key))
            values: list[object] = ([_number(side.rho.median), _number(side.rho.lower), _number(side.rho.upper)]
                                    if side else ["", "", ""])
            status = side.status if side else ""
            old_part, new_part = (["", "", ""], values) if kind == "added" else (values, ["", "", ""])
            rows.append([key, kind, *old_part, *new_part, "", "", "", "", "", c.margin, "", "",
                         status if kind == "removed" else "", status if kind == "added" else ""])
    return list(CHANGES_COLUMNS), rows


def summary_lines(c: Comparison) -> list[str]:
    """What the console prints after a compare: the data, settings and versions, then flips first."""
    rho = interpret.format_rho
    lines = [f"Compared the run of {c.old_label} with the run of {c.new_label}.", c.data.sentence, c.basis_sentence]
    for title, settings in (("Spec", c.spec_changes), ("Versions and environment", c.version_changes)):
        if settings:
            lines.append(f"{title}: " + "; ".join(f"{s.key} {s.old} -> {s.new}" for s in settings))
        else:
            lines.append(f"{title}: no change.")
    for change in c.flipped:
        for rule in change.flips:
            lines.append(f"Flipped: {change.key}: rule {rule.rule} {rule.old_verdict} -> {rule.new_verdict} "
                         f"(probability {interpret.format_probability(rule.old_probability)} -> "
                         f"{interpret.format_probability(rule.new_probability)})")
    for change in c.status_changes:
        lines.append(f"Status: {change.key}: {change.old_status} -> {change.new_status}")
    for change in c.pairs:
        diff = change.difference
        which = "added rows against earlier" if change.basis == "added_rows" else "difference"
        lines.append(f"{change.key}: rho {rho(change.old.median)} -> {rho(change.new.median)}, {which} "
                     f"{signed_rho(diff.median)} ({rho(diff.lower)} to {rho(diff.upper)}), P(rose) "
                     f"{interpret.format_probability(diff.p_rose)}, P(moved by more than "
                     f"{interpret.format_threshold(c.margin)}) {interpret.format_probability(diff.p_moved)}")
    if c.added:
        lines.append("Added: " + "; ".join(c.added))
    if c.removed:
        lines.append("Removed: " + "; ".join(c.removed))
    return lines
