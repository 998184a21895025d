"""Correlation of one pair by group: each group alone, partially pooled, and all rows together.

A forest plot on a fixed [-1, 1] axis.  Every group has a row with the posterior of rho from that
group's rows alone; when a partially pooled model was fitted, the same group's pooled interval is
drawn just below it, thinner and in a second colour, so the pull towards the common mean
(shrinkage) can be read off row by row.  A separated bottom section shows the estimate from all
rows taken together and, when given, the pooled model's population mean.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from numbers import Integral
from typing import Any

import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import FixedLocator, MultipleLocator
from matplotlib.transforms import blended_transform_factory

from reportgen.figures.style import (
    _BROWN,
    FULL_WIDTH,
    INK,
    MIST,
    SLATE,
    TEAL,
    FigureError,
    _check_mass,
    _label,
    _num,
    _pct,
    _styled,
    _text_width_pt,
    _to_svg,
)

__all__ = ["GroupRow", "group_forest"]

MAX_GROUPS = 40
"""Most groups one figure shows; beyond this the rows become too thin to read."""

_POOLED = _BROWN  # differs from TEAL in hue, so the two intervals stay apart in colour-blind viewing
_SEPARATE_OFFSET = -0.19  # row offsets (the y axis points down) when both intervals share a row
_POOLED_OFFSET = 0.19
_LABEL_PT = 150.0  # width of the row-label column, as in the forest plot of all pairs
_NUMBER_GAP = 1.1  # least distance between two stacked number lines, in multiples of their font size
_MAX_HEIGHT = 10.0
_OVERHEAD_IN = 0.55  # x tick labels, axis label, the number header and padding (measured)
_LEGEND_IN = 0.23


@dataclass(frozen=True)
class GroupRow:
    """One group's posterior of rho, from its own rows and (optionally) from the pooled model.

    Attributes
    ----------
    label : str
        The group's label (untrusted text).
    n : int
        Number of rows in the group.
    median, lower, upper : float
        Posterior median and credible-interval bounds of rho from this group alone.
    pooled_median, pooled_lower, pooled_upper : float, default NaN
        The same for the group within the partially pooled model; all NaN when it was not fitted.
    """

    label: str
    n: int
    median: float
    lower: float
    upper: float
    pooled_median: float = float("nan")
    pooled_lower: float = float("nan")
    pooled_upper: float = float("nan")


def _interval(values: Sequence[object], what: str) -> tuple[float, float, float]:
    """(median, lower, upper) as floats with -1 <= lower <= median <= upper <= 1, else FigureError."""
    try:
        med, low, upp = (float(v) for v in values)  # type: ignore[arg-type]
    except (TypeError, ValueError) as exc:
        raise FigureError(f"{what} must be three numbers (median, lower, upper)") from exc
    if not all(math.isfinite(v) for v in (med, low, upp)):
        raise FigureError(f"{what} must be finite numbers")
    if not -1.0 <= low <= med <= upp <= 1.0:
        raise FigureError(f"{what} must satisfy -1 <= lower <= median <= upper <= 1")
    return med, low, upp


def _pooled(row: GroupRow, what: str) -> tuple[float, float, float] | None:
    """The row's pooled interval, ``None`` when all three values are NaN (model not fitted)."""
    values = (row.pooled_median, row.pooled_lower, row.pooled_upper)
    try:
        missing = [math.isnan(float(v)) for v in values]
    except (TypeError, ValueError) as exc:
        raise FigureError(f"{what} pooled values must be numbers") from exc
    if all(missing):
        return None
    if any(missing):
        raise FigureError(f"{what} pooled values must be all given or all NaN")
    return _interval(values, f"{what} pooled interval")


def _count(value: object, what: str) -> int:
    if isinstance(value, bool) or not isinstance(value, Integral) or int(value) < 0:
        raise FigureError(f"{what} n must be a non-negative whole number, got {value!r}")
    return int(value)


def _row_label(label: object, n: int | None, size: float, lines: int) -> str:
    """The label wrapped to the lines a row has room for, with "n = 1,234" last (never cut)."""
    if n is None:
        return _label(label, _LABEL_PT, size, max_lines=max(1, min(2, lines)))
    count = f"n = {n:,}"
    if lines >= 2:
        return _label(label, _LABEL_PT, size, max_lines=min(2, lines - 1)) + "\n" + count
    suffix = f"  ({count})"
    return _label(label, _LABEL_PT - _text_width_pt(suffix, size), size, max_lines=1) + suffix


def _draw_interval(ax: Axes, y: float, interval: tuple[float, float, float], *, colour: str,
                   width: float, marker: str, size: float, hollow: bool, gid: str) -> None:
    med, low, upp = interval
    ax.hlines([y], [low], [upp], color=colour, linewidth=width, zorder=2, gid=f"{gid}-interval")
    face, edge = ("white", colour) if hollow else (colour, "white")
    ax.scatter([med], [y], s=size, marker=marker, facecolors=face, edgecolors=edge,
               linewidths=0.9, zorder=4, clip_on=False, gid=f"{gid}-median")


@_styled
def group_forest(
    rows: Sequence[GroupRow],
    *,
    overall: tuple[float, float, float],
    overall_label: str,
    mean: tuple[float, float, float] | None = None,
    mean_label: str = "",
    mass: float,
    group_noun: str = "group",
) -> str:
    """Forest plot of rho by group for one pair of variables, showing the shrinkage of pooling.

    One row per group, top to bottom in the given order, on an x axis fixed to [-1, 1]: a teal
    line with a dot for the interval and median from the group alone and, when the row has pooled
    values, a thinner brown line with a hollow dot just below it for the partially pooled
    estimate.  A legend naming the two is shown only when some row has pooled values.  Below a
    rule, a bottom section holds the *overall* row (a filled ink diamond) and, if given, the
    *mean* row (a hollow brown diamond).  A thin vertical line marks zero; the numbers to the
    right repeat median and interval.  Row labels end with the group size ("n = 1,234").  The
    figure is full width, has no title and grows with the number of rows up to 10 in; when rows
    get thin the labels go on one line and the numbers get smaller.

    Parameters
    ----------
    rows : sequence of GroupRow
        One to 40 groups.  Separate medians and bounds must be finite with
        -1 <= lower <= median <= upper <= 1; pooled values all NaN or likewise valid.
    overall : (median, lower, upper)
        Posterior of rho from all rows together.
    overall_label : str
        Row label of *overall* (e.g. "All rows pooled"; untrusted text).
    mean : (median, lower, upper) or None, default None
        Posterior of the population mean of rho in the partially pooled model; ``None`` to omit.
    mean_label : str, default ""
        Row label of *mean*; "Partially pooled mean" when blank.
    mass : float
        Probability mass of the credible intervals, strictly between 0 and 1 (for the axis label).
    group_noun : str, default "group"
        What a group is called in the legend ("This group alone"); untrusted text.

    Returns
    -------
    str
        The SVG document.

    Raises
    ------
    FigureError
        If there are no rows or more than 40, or a value breaks the rules above.
    """
    n = len(rows)
    if n == 0:
        raise FigureError("group_forest needs at least one group")
    if n > MAX_GROUPS:
        raise FigureError(f"group_forest shows at most {MAX_GROUPS} groups, got {n}")
    mass = _check_mass(mass)
    separate = [_interval((r.median, r.lower, r.upper), f"group {i + 1}") for i, r in enumerate(rows)]
    pooled = [_pooled(r, f"group {i + 1}") for i, r in enumerate(rows)]
    counts = [_count(r.n, f"group {i + 1}") for i, r in enumerate(rows)]
    overall_ = _interval(overall, "overall")
    mean_ = None if mean is None else _interval(mean, "mean")
    has_pooled = any(p is not None for p in pooled)

    # Rows: groups at 0..n-1, a rule, then the bottom section (the y axis points down).
    rule_y = n - 0.05
    bottom_y = [n + 0.6] + ([n + 1.6] if mean_ is not None else [])
    span = bottom_y[-1] + 0.5 + 0.5  # from the top edge (-0.5) to below the last row
    per_row = (0.4 if n <= 10 else max(0.22, 0.4 - 0.009 * (n - 10))) if has_pooled else (
        0.3 if n <= 10 else max(0.2, 0.3 - 0.005 * (n - 10)))
    extra = _OVERHEAD_IN + (_LEGEND_IN if has_pooled else 0.0)
    height = min(_MAX_HEIGHT, max(1.8, extra + per_row * span))
    pitch_pt = (height - extra) * 72.0 / span  # about the height of one row on the page

    label_size = 8.0 if n <= 25 else 7.0
    label_lines = int(pitch_pt // (label_size * 1.2))
    number_size = 7.5
    if has_pooled:  # two stacked number lines per row must not touch
        gap_pt = (_POOLED_OFFSET - _SEPARATE_OFFSET) * pitch_pt
        number_size = max(5.5, min(7.5, gap_pt / _NUMBER_GAP))

    fig = Figure(figsize=(FULL_WIDTH, height), layout="constrained")
    ax = fig.add_subplot()
    ax.grid(axis="x", which="major", color=MIST, linewidth=0.5, zorder=0)
    ax.axvline(0.0, color=SLATE, linewidth=0.8, zorder=1, gid="zero-line")
    ax.axhline(rule_y, color=SLATE, linewidth=0.6, zorder=1, gid="section-rule")

    trans = blended_transform_factory(ax.transAxes, ax.transData)

    def numbers(y: float, interval: tuple[float, float, float], colour: str) -> None:
        med, low, upp = interval
        ax.text(1.03, y, f"{_num(med)}  [{_num(low)}, {_num(upp)}]", transform=trans, ha="left",
                va="center", fontsize=number_size, color=colour)

    for i in range(n):
        y_sep = i + (_SEPARATE_OFFSET if has_pooled else 0.0)
        _draw_interval(ax, y_sep, separate[i], colour=TEAL, width=2.2, marker="o", size=30.0,
                       hollow=False, gid=f"group-{i}-alone")
        numbers(y_sep, separate[i], INK)
        p = pooled[i]
        if p is not None:
            _draw_interval(ax, i + _POOLED_OFFSET, p, colour=_POOLED, width=1.2, marker="o",
                           size=18.0, hollow=True, gid=f"group-{i}-pooled")
            numbers(i + _POOLED_OFFSET, p, _POOLED)

    _draw_interval(ax, bottom_y[0], overall_, colour=INK, width=2.2, marker="D", size=34.0,
                   hollow=False, gid="overall")
    numbers(bottom_y[0], overall_, INK)
    if mean_ is not None:
        _draw_interval(ax, bottom_y[1], mean_, colour=_POOLED, width=1.2, marker="D", size=30.0,
                       hollow=True, gid="pooled-mean")
        numbers(bottom_y[1], mean_, _POOLED)

    ax.set_xlim(-1.0, 1.0)
    ax.set_ylim(bottom_y[-1] + 0.5, -0.5)
    ax.xaxis.set_major_locator(FixedLocator([-1.0, -0.5, 0.0, 0.5, 1.0]))
    ax.xaxis.set_minor_locator(MultipleLocator(0.25))
    tick_labels = [_row_label(r.label, counts[i], label_size, label_lines) for i, r in enumerate(rows)]
    tick_labels.append(_row_label(overall_label, None, label_size, label_lines))
    if mean_ is not None:
        tick_labels.append(_row_label(mean_label if str(mean_label).strip() else "Partially pooled mean",
                                      None, label_size, label_lines))
    ax.set_yticks(np.array([*range(n), *bottom_y], dtype=float), tick_labels)
    ax.tick_params(axis="y", length=0, labelsize=label_size, pad=6)
    ax.spines["left"].set_visible(False)
    ax.set_xlabel(f"Correlation ρ (posterior median and {_pct(mass)} credible interval)")
    ax.text(1.03, 1.0, f"median  [{_pct(mass)} CrI]", transform=ax.transAxes, ha="left",
            va="bottom", fontsize=7, color=SLATE)

    if has_pooled:
        noun = _label(group_noun, 120.0, 7.5, max_lines=1) or "group"
        handles: list[Any] = [
            Line2D([], [], color=TEAL, linewidth=2.2, marker="o", markersize=5.5, markeredgecolor="white"),
            Line2D([], [], color=_POOLED, linewidth=1.2, marker="o", markersize=4.2,
                   markerfacecolor="white", markeredgecolor=_POOLED, markeredgewidth=0.9),
        ]
        legend = fig.legend(handles, [f"This {noun} alone", "Partially pooled"],
                            loc="outside upper center", ncols=2)
        legend.set_gid("group-legend")
    return _to_svg(fig)
