"""A finished run folder read back: its record and, on demand, a pair's posterior of rho."""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from pathlib import Path
from typing import Any


@dataclass(frozen=True)
class RunSnapshot:
    folder: Path
    record: dict[str, Any]  # record.json as written by the run

    @property
    def reproducible(self) -> dict[str, Any]:
        return self.record["reproducible"]

    @property
    def report_date(self) -> dt.date:
        ...

    @property
    def label(self) -> str:
        """How the run is named in tables and figures: its report date, e.g. "2026-11-30"."""
        ...

    @property
    def pairs(self) -> dict[str, dict[str, Any]]:
        """The record's pair entries by pair key, in the run's order."""
        ...
