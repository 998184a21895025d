"""The rows of a pair split by the levels of a grouping column, reduced to each group's sums.

Each group's correlation needs only its own sufficient statistics, so a grouped fit costs the same
whatever the number of rows. A group that cannot be fitted (fewer than ``MIN_COMPLETE_ROWS`` complete
rows, a column constant within it, or the two columns exactly proportional) is listed with its reason
and left out of every grouped number, never dropped silently.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from reportgen.data.sums import PERFECT_CORRELATION_COMPLEMENT, SufficientStats, sufficient_stats
from reportgen.errors import DataError

__all__ = ["MAX_GROUPS", "GroupData", "GroupStats", "LeftOutGroup", "group_data", "group_labels"]

MAX_GROUPS = 50  # more levels than a page of group results can show; such a column is rarely a grouping
MAX_LABEL = 80  # characters of a group label that are kept
MIN_GROUP_ROWS = 4  # as for a whole pair: fewer rows leave nothing to estimate a correlation from


@dataclass(frozen=True)
class GroupStats:
    label: str
    stats: SufficientStats


@dataclass(frozen=True)
class LeftOutGroup:
    label: str
    n: int  # complete rows of the pair in this group
    reason: str  # in words, e.g. "only 3 complete rows (4 are needed)"


@dataclass(frozen=True)
class GroupData:
    column: str
    groups: tuple[GroupStats, ...]  # the groups that are fitted, in label order
    left_out: tuple[LeftOutGroup, ...]
    n_unlabelled: int  # complete rows of the pair with no group label, left out of the grouped fits

    @property
    def labels(self) -> tuple[str, ...]:
        return tuple(group.label for group in self.groups)


def _label(cell: object) -> str:
    """A group label as text: whole numbers without a trailing ".0", blanks and NaN as ""."""
    if cell is None:
        return ""
    if isinstance(cell, float):
        if math.isnan(cell):
            return ""
        if cell.is_integer():
            return str(int(cell))
    text = " ".join(str(cell).split())
    return text[:MAX_LABEL]


def _natural_key(label: str) -> tuple[tuple[int, float | str], ...]:
    """Order labels as people do: "site 2" before "site 10"."""
    return tuple((0, float(part)) if part.isdigit() else (1, part.casefold())
                 for part in re.split(r"(\d+)", label) if part)


def group_labels(cells: np.ndarray | list[object]) -> np.ndarray:
    """Each row's group label as text ("" where none)."""
    return np.array([_label(cell) for cell in cells], dtype=object)


def group_data(x: np.ndarray, y: np.ndarray, labels: np.ndarray, column: str, where: str) -> GroupData:
    """The per-group sums of one pair's complete rows; ``labels`` holds each complete row's group label."""
    present = labels != ""
    levels = sorted(set(labels[present].tolist()), key=_natural_key)
    if len(levels) > MAX_GROUPS:
        raise DataError(f"{where}: group_by = \"{column}\" has {len(levels)} different values among the pair's "
                        f"rows; at most {MAX_GROUPS} groups can be reported: group by a column with fewer levels")
    groups: list[GroupStats] = []
    left_out: list[LeftOutGroup] = []
    for level in levels:
        chosen = labels == level
        gx, gy = x[chosen], y[chosen]
        n = int(gx.size)
        reason = ""
        if n < MIN_GROUP_ROWS:
            reason = f"only {n} complete row{'' if n == 1 else 's'} ({MIN_GROUP_ROWS} are needed)"
        elif np.ptp(gx) == 0 or np.ptp(gy) == 0:
            reason = "one of the two columns has the same value in every row of the group"
        else:
            with np.errstate(all="ignore"):
                stats = sufficient_stats(gx, gy)
                complement = stats.one_minus_abs_r
            if not (stats.sxx > 0 and stats.syy > 0 and np.isfinite(complement)):
                reason = "one of the two columns varies too little within the group"
            elif complement <= PERFECT_CORRELATION_COMPLEMENT:
                reason = "the two columns are exactly proportional within the group"
        if reason:
            left_out.append(LeftOutGroup(label=level, n=n, reason=reason))
        else:
            groups.append(GroupStats(label=level, stats=stats))
    if not groups:
        raise DataError(f"{where}: no group of group_by = \"{column}\" has {MIN_GROUP_ROWS} or more usable rows, "
                        "so no group can be fitted; group by another column or set group_by = \"\" for this pair")
    return GroupData(column=column, groups=tuple(groups), left_out=tuple(left_out),
                     n_unlabelled=int((~present).sum()))
