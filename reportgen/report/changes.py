"""Contexts of the documents across runs: the change report, the history report, and the run report's
"Since the previous run" block.

Like the run report's context, each is a dict of already formatted strings (plus a few flags and
lists for layout); the templates only place them. Numbers are formatted as the run report formats
them (``reportgen.interpret``): rho with two decimals and a true minus sign, probabilities with three
decimals and never as exactly 0 or 1.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import math
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

from reportgen import interpret
from reportgen.figures.history import change_intervals, rho_history
from reportgen.report.render import svg_data_uri

if TYPE_CHECKING:  # types only: the run report must not need the comparison machinery to render
    from reportgen.runs.compare import Comparison, PairChange, SettingChange
    from reportgen.runs.history import History, PairHistory, RuleMark

DASH = "\u2014"
ARROW = "\u2192"
STATUSES = frozenset({"pass", "warn", "fail"})  # the only values that become a CSS class
TITLE_KEYS = ("title", "subtitle", "client", "author", "confidentiality", "logo")


def long_date(day: dt.date) -> str:
    """"30 November 2026", as the run report's title block writes its date."""
    return f"{day.day} {day.strftime('%B %Y')}"


def _plural(count: int, word: str, many: str = "") -> str:
    return f"{count:,} {word if count == 1 else many or word + 's'}"


def _rho(value: float) -> str:
    return interpret.format_rho(value) if math.isfinite(value) else DASH


def _signed(value: float) -> str:
    """A change in rho: two decimals with its sign, "0.00" without one."""
    if not math.isfinite(value):
        return DASH
    text = interpret.format_rho(value)
    return "+" + text if value > 0 and text != "0.00" else text


def _interval(lower: float, upper: float, fmt: Any = _rho) -> str:
    return f"{fmt(lower)} to {fmt(upper)}" if math.isfinite(lower) and math.isfinite(upper) else DASH


def _probability(value: float) -> str:
    return interpret.format_probability(value) if math.isfinite(value) else DASH


def _status_class(status: str) -> str:
    return status if status in STATUSES else ""


def _anchor(prefix: str, key: str) -> str:
    safe = "".join(ch if ch.isalnum() else "-" for ch in key.lower()).strip("-")[:50]
    return f"{prefix}-{safe}-{hashlib.sha256(key.encode()).hexdigest()[:8]}"


def _title_block(meta: Mapping[str, str], day: dt.date, subtitle: str) -> dict[str, str]:
    """The run report's title block: the spec's title, client, author and notice, with our own subtitle."""
    block = {key: str(meta.get(key, "")) for key in TITLE_KEYS}
    block.update(subtitle=subtitle, date=day.isoformat(), date_long=long_date(day))
    return block


def change_row(change: PairChange, title: str = "", anchor: str = "") -> dict[str, Any]:
    """One pair's row of the change table (shared by the change report and the run report)."""
    diff = change.difference
    notes = [f"rule {rule.rule} is new ({rule.new_verdict})" if not rule.old_verdict
             else f"rule {rule.rule} was dropped (was {rule.old_verdict})"
             for rule in change.rules if bool(rule.old_verdict) != bool(rule.new_verdict)]
    return {
        "title": title or change.key,
        "key": change.key,
        "anchor": anchor,
        "old_median": _rho(change.old.median),
        "old_interval": _interval(change.old.lower, change.old.upper),
        "old_n": f"{change.old.n:,}",
        "new_median": _rho(change.new.median),
        "new_interval": _interval(change.new.lower, change.new.upper),
        "new_n": f"{change.new.n:,}",
        "diff_median": _signed(diff.median),
        "diff_interval": _interval(diff.lower, diff.upper, _signed),
        "p_rose": _probability(diff.p_rose),
        "p_moved": _probability(diff.p_moved),
        "flips": [{"rule": rule.rule, "old": rule.old_verdict, "new": rule.new_verdict,
                   "old_met": rule.old_verdict == "met", "new_met": rule.new_verdict == "met",
                   "probabilities": f"{_probability(rule.old_probability)} {ARROW} "
                                    f"{_probability(rule.new_probability)}"}
                  for rule in change.flips],
        "rule_notes": notes,
        "old_status": change.old_status,
        "new_status": change.new_status,
        "old_status_class": _status_class(change.old_status),
        "new_status_class": _status_class(change.new_status),
        "status_changed": change.status_changed,
        "flagged": bool(change.flips) or change.status_changed,
        "sentence": change.sentence,
    }


def ordered_changes(comparison: Comparison) -> list[PairChange]:
    """Flipped verdicts first, then changed statuses, then the rest, each group in the run's order."""
    return sorted(comparison.pairs, key=lambda p: (not p.flips, not p.status_changed))


def flip_items(comparison: Comparison, titles: Mapping[str, tuple[str, str]] | None = None) -> dict[str, Any]:
    """The short list on page one: flipped verdicts and changed statuses, or one sentence saying none."""
    titles = titles or {}

    def named(key: str) -> dict[str, str]:
        title, anchor = titles.get(key, (key, ""))
        return {"pair": title or key, "anchor": anchor}

    flips = [{**named(p.key), "rule": rule.rule, "old": rule.old_verdict, "new": rule.new_verdict,
              "new_met": rule.new_verdict == "met"}
             for p in ordered_changes(comparison) for rule in p.flips]
    statuses = [{**named(p.key), "old": p.old_status, "new": p.new_status,
                 "old_class": _status_class(p.old_status), "new_class": _status_class(p.new_status)}
                for p in ordered_changes(comparison) if p.status_changed]
    since = f"the run of {long_date(comparison.old_date)} ({comparison.old_label})"
    if flips or statuses:
        lead = (f"Since {since}, {_plural(len(flips), 'verdict')} flipped and "
                f"{_plural(len(statuses), 'pair')} changed status.")
    else:
        lead = f"Since {since}, no verdict flipped and no pair changed status."
    return {"flips": flips, "status_changes": statuses, "lead": lead,
            "membership": membership_sentence(comparison.added, comparison.removed)}


def membership_sentence(added: tuple[str, ...], removed: tuple[str, ...]) -> str:
    parts = []
    if added:
        parts.append(f"{_plural(len(added), 'pair')} added ({'; '.join(added)})")
    if removed:
        parts.append(f"{_plural(len(removed), 'pair')} removed ({'; '.join(removed)})")
    text = interpret.joined(parts)
    return text[:1].upper() + text[1:] + "." if parts else ""


def _setting_rows(changes: tuple[SettingChange, ...]) -> list[dict[str, str]]:
    return [{"key": c.key, "old": c.old, "new": c.new} for c in changes]


def _data_rows(comparison: Comparison) -> list[dict[str, str]]:
    data = comparison.data
    rows = [{"what": "File", "old": data.old_file, "new": data.new_file, "mono": ""},
            {"what": "SHA-256", "old": data.old_sha256, "new": data.new_sha256, "mono": "mono"},
            {"what": "Rows", "old": f"{data.old_rows:,}", "new": f"{data.new_rows:,}", "mono": ""}]
    if data.relation == "appended":
        rows.append({"what": "Rows added", "old": "", "new": f"{data.added_rows:,}", "mono": ""})
    return rows


def _mass(comparison: Comparison) -> str:
    masses = {p.difference.credible_mass for p in comparison.pairs}
    return f"{masses.pop():.0%}" if len(masses) == 1 else "credible"


def comparison_block(comparison: Comparison, titles: Mapping[str, tuple[str, str]] | None = None) -> dict[str, Any]:
    """What both the change report and the run report's section show: the table, the words around it."""
    titles = titles or {}
    return {
        "old_label": comparison.old_label,
        "new_label": comparison.new_label,
        "old_date_long": long_date(comparison.old_date),
        "new_date_long": long_date(comparison.new_date),
        "mass": _mass(comparison),
        "margin": interpret.format_threshold(comparison.margin),
        "rows": [change_row(p, *titles.get(p.key, ("", ""))) for p in ordered_changes(comparison)],
        "added": list(comparison.added),
        "removed": list(comparison.removed),
        "membership": membership_sentence(comparison.added, comparison.removed),
        "data_sentence": comparison.data.sentence,
        "basis_sentence": comparison.basis_sentence,
        "method_sentence": comparison.method_sentence,
        "settings_sentence": settings_sentence(comparison),
        **difference_words(comparison),
    }


def difference_words(comparison: Comparison) -> dict[str, str]:
    """The change column's heading and note, which depend on what was compared: when the new data extend
    the old, the two runs share rows, so the added rows are set against the earlier ones instead."""
    bases = {p.basis for p in comparison.pairs}
    if bases == {"added_rows"}:
        return {"difference_heading": "Added rows against earlier",
                "difference_note": "Change: \u03c1 of the added rows alone minus \u03c1 of the earlier rows, each "
                                   "from its own posterior (the two runs share the earlier rows, so their reported "
                                   "\u03c1 are not set against each other). P(\u03c1 rose): posterior probability "
                                   "that \u03c1 is higher in the added rows than in the earlier ones"}
    note = ("Change: the latest run's \u03c1 minus the earlier run's, from the two posteriors taken as independent "
            "samples. P(\u03c1 rose): posterior probability that \u03c1 is higher now")
    if "added_rows" in bases:
        note += ("; for the pairs whose sentence says so, the added rows alone are set against the earlier rows "
                 "instead")
    return {"difference_heading": "Change in \u03c1", "difference_note": note}


def settings_sentence(comparison: Comparison) -> str:
    spec, versions = len(comparison.spec_changes), len(comparison.version_changes)
    if not spec and not versions:
        return "No setting of the spec, no package version and nothing in the recorded environment changed."
    said = [f"{_plural(spec, 'setting')} of the spec" if spec else "",
            f"{_plural(versions, 'version or environment entry', 'versions or environment entries')}"
            if versions else ""]
    return f"Changed between the runs: {interpret.joined([s for s in said if s])}."


def since_previous_context(comparison: Comparison, titles: Mapping[str, tuple[str, str]]) -> dict[str, Any]:
    """The run report's block: ``titles`` maps a pair key to its title and its section's link target."""
    return {**comparison_block(comparison, titles), **flip_items(comparison, titles)}


def changes_context(comparison: Comparison, meta: Mapping[str, str]) -> dict[str, Any]:
    """The change report's context. ``meta``: the newer run's title block (title, client, author,
    confidentiality, logo as a data URI; missing keys are empty); the date is the newer run's."""
    items = flip_items(comparison)
    flagged = bool(items["flips"] or items["status_changes"])
    rows = ordered_changes(comparison)
    figure = ""
    if rows:
        svg = change_intervals(
            [p.key for p in rows],
            ([p.old.median for p in rows], [p.old.lower for p in rows], [p.old.upper for p in rows]),
            ([p.new.median for p in rows], [p.new.lower for p in rows], [p.new.upper for p in rows]),
            old_label=comparison.old_label, new_label=comparison.new_label,
            mass=rows[0].difference.credible_mass)
        figure = svg_data_uri(svg)
    return {
        "document": "changes",
        "meta": _title_block(meta, comparison.new_date,
                             f"Change report: the run of {long_date(comparison.new_date)} against the run of "
                             f"{long_date(comparison.old_date)}"),
        "banner": {"level": "warn" if flagged else "pass",
                   "text": " ".join(s for s in (items["lead"], items["membership"]) if s)},
        "block": {**comparison_block(comparison), **items},
        "data_rows": _data_rows(comparison),
        "data_same": comparison.data.relation == "same",
        "spec_changes": _setting_rows(comparison.spec_changes),
        "version_changes": _setting_rows(comparison.version_changes),
        "figure": figure,
    }


def rule_statement(rule: RuleMark) -> str:
    """"ρ > 0.5", "ρ < −0.3" or "−0.1 < ρ < 0.1", as the run report writes a rule."""
    if rule.statement == "above":
        return f"\u03c1 > {interpret.format_threshold(rule.lower)}"
    if rule.statement == "below":
        return f"\u03c1 < {interpret.format_threshold(rule.lower)}"
    return f"{interpret.format_threshold(rule.lower)} < \u03c1 < {interpret.format_threshold(rule.upper)}"


def history_pair(pair: PairHistory, mass: float) -> dict[str, Any]:
    names = [rule.name for rule in pair.rules]
    points = pair.points
    svg = rho_history(
        [p.date for p in points], [p.label for p in points], [p.median for p in points],
        [p.lower for p in points], [p.upper for p in points],
        rules=[(r.name, r.statement, r.lower, r.upper) for r in pair.rules],
        verdicts=[[dict(p.verdicts).get(name, "") for p in points] for name in names],
        mass=mass, drift=pair.drift)
    return {
        "anchor": _anchor("history", pair.key),
        "title": pair.key,
        "figure": svg_data_uri(svg),
        "drift": pair.drift,
        "sentence": pair.sentence,
        "rules": [{"name": r.name, "statement": rule_statement(r)} for r in pair.rules],
        "rows": [{
            "label": p.label,
            "n": f"{p.n:,}",
            "median": _rho(p.median),
            "interval": _interval(p.lower, p.upper),
            "status": p.status,
            "status_class": _status_class(p.status),
            "verdicts": [{"verdict": dict(p.verdicts).get(name, "") or DASH,
                          "met": dict(p.verdicts).get(name) == "met"} for name in names],
        } for p in reversed(points)],  # newest first: the row a reader looks for
    }


def history_context(history: History, meta: Mapping[str, str]) -> dict[str, Any]:
    """The history report's context. ``meta`` as for :func:`changes_context`; the date is the latest run's."""
    latest = max((p.date for pair in history.pairs for p in pair.points), default=dt.date(1970, 1, 1))
    drifted = [pair.key for pair in history.pairs if pair.drift]
    runs = len(history.labels)
    span = f"{history.labels[0]} to {history.labels[-1]}" if runs > 1 else "".join(history.labels)
    if drifted:
        banner = {"level": "warn", "text": (
            f"{_plural(len(drifted), 'pair')} of {len(history.pairs):,} drifted: the latest interval lies "
            f"outside the range of the earlier ones ({'; '.join(drifted)}).")}
    else:
        banner = {"level": "pass", "text": (
            "No pair drifted: every latest interval lies within the range of the earlier runs' intervals."
            if runs > 1 else "Only one run: a history needs at least two to show a drift.")}
    return {
        "document": "history",
        "meta": _title_block(meta, latest, f"History of \u03c1 across {_plural(runs, 'run')} ({span})"),
        "banner": banner,
        "mass": f"{history.credible_mass:.0%}",
        "runs_sentence": (f"{_plural(runs, 'run')}, by report date: "
                          f"{', '.join(history.labels) if runs <= 6 else 'from ' + span}. Each pair's figure "
                          f"shows the posterior median and {history.credible_mass:.0%} interval of \u03c1 per run."),
        "pairs": [history_pair(pair, history.credible_mass) for pair in history.pairs],
    }
