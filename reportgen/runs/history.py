"""rho across runs: one line of points per pair, by report date, with each rule's verdicts and a drift note."""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass


@dataclass(frozen=True)
class HistoryPoint:
    label: str  # the run's label (its report date)
    date: dt.date
    folder: str
    median: float
    lower: float
    upper: float
    n: int
    status: str
    verdicts: tuple[tuple[str, str], ...]  # (rule name, "met" / "not met")


@dataclass(frozen=True)
class RuleMark:
    """A rule drawn on the history figure: a threshold line (above/below) or a band (between)."""

    name: str
    statement: str  # "above", "below" or "between"
    lower: float  # the threshold for above/below; the band's ends for between
    upper: float


@dataclass(frozen=True)
class PairHistory:
    key: str
    x: str
    y: str
    points: tuple[HistoryPoint, ...]  # oldest first
    rules: tuple[RuleMark, ...]
    drift: bool  # the latest interval lies outside the range of the earlier ones
    sentence: str  # drift note, or the steadiness in words


@dataclass(frozen=True)
class History:
    labels: tuple[str, ...]  # every run, oldest first
    pairs: tuple[PairHistory, ...]
    credible_mass: float
