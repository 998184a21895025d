"""Figures across runs: rho of one pair by report date, and the old and new intervals of every pair.

Both take plain numbers, dates and strings (never the comparison or history types), so they stay
testable without run folders, and both return SVG text rendered in the report style (fixed hash salt,
no dates in the file).
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Sequence
from typing import Any

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import FixedLocator, MultipleLocator
from matplotlib.transforms import blended_transform_factory
from numpy.typing import ArrayLike

from reportgen.figures.style import (
    ALERT,
    AMBER,
    FULL_WIDTH,
    INK,
    MIST,
    OK,
    SLATE,
    TEAL,
    FigureError,
    _check_mass,
    _check_thresholds,
    _label,
    _pct,
    _styled,
    _to_svg,
    _vector,
)

__all__ = ["change_intervals", "rho_history"]

_DASH = (0, (4, 2.5))
_BAND_ALPHA = 0.14
_MAX_TICK_LABELS = 12  # more report dates than this and only every k-th date (and the latest) is named
# Verdict marks differ in shape as well as colour, so they read in grey print and for colour-blind readers.
_VERDICT_STYLE = {"met": (OK, "o", 30.0), "not met": (SLATE, "X", 26.0)}  # colour, marker, area


def _threshold(value: float) -> str:
    """A threshold as the client wrote it (0.125 stays 0.125, 0.5 is not padded), with a true minus."""
    text = f"{abs(value):.6g}"
    text = text if "." in text or "e" in text else text + ".0"
    return f"\u2212{text}" if value < 0 else text


def _rule_text(statement: str, lower: float, upper: float) -> str:
    if statement == "above":
        return f"ρ > {_threshold(lower)}"
    if statement == "below":
        return f"ρ < {_threshold(lower)}"
    return f"{_threshold(lower)} < ρ < {_threshold(upper)}"


def _check_rules(rules: Sequence[tuple[str, str, float, float]]) -> list[tuple[str, str, float, float]]:
    out = []
    for name, statement, lower, upper in rules:
        if statement not in ("above", "below", "between"):
            raise FigureError(f"rule statement must be above, below or between, got {statement!r}")
        lo, hi = float(lower), float(upper)
        if not math.isfinite(lo) or (statement == "between" and not (math.isfinite(hi) and lo < hi)):
            raise FigureError(f"rule {name!r} needs finite thresholds (lower < upper for a band)")
        out.append((str(name), statement, lo, hi))
    return out


@_styled
def rho_history(
    dates: Sequence[dt.date],
    labels: Sequence[str],
    medians: ArrayLike,
    lowers: ArrayLike,
    uppers: ArrayLike,
    *,
    rules: Sequence[tuple[str, str, float, float]] = (),
    verdicts: Sequence[Sequence[str]] = (),
    mass: float,
    drift: bool = False,
) -> str:
    """rho of one pair by report date: median and interval per run, rule thresholds and verdict marks.

    The x axis is the report date (spaced by days, labelled with ``labels``). Each rule is a dashed
    amber line at its threshold ("above"/"below") or a shaded amber band ("between"), named at the
    right. Below the main panel one row per rule marks each run's verdict: a filled green circle for
    "met", a grey cross for "not met", nothing when the rule was absent from that run. With ``drift``
    the latest run's interval is drawn in the alert colour.

    Parameters
    ----------
    dates, labels : sequences of the same length
        Report date and label per run, oldest first.
    medians, lowers, uppers : array_like
        Posterior median and interval bounds of rho per run (NaN: not estimated, left out).
    rules : sequence of (name, statement, lower, upper), default ()
        ``statement`` is "above", "below" or "between"; ``upper`` is used only by "between".
    verdicts : sequence of sequences of str, default ()
        Per rule (same order as ``rules``), the verdict per run: "met", "not met" or "".
    mass : float
        Credible mass of the intervals (for the legend).
    drift : bool, default False
        Whether the latest interval lies outside the range of the earlier ones.

    Returns
    -------
    str
        The SVG document.
    """
    n = len(dates)
    if n == 0 or len(labels) != n:
        raise FigureError("rho_history needs one label per date and at least one date")
    med, low, upp = (_vector(name, v, n) for name, v in (("medians", medians), ("lowers", lowers),
                                                          ("uppers", uppers)))
    rules_ = _check_rules(rules)
    if len(verdicts) != len(rules_) or any(len(row) != n for row in verdicts):
        raise FigureError("verdicts needs one row per rule and one verdict per date")
    mass = _check_mass(mass)
    x = np.array([(d - dates[0]).days for d in dates], dtype=float)

    strip = 0.16 + 0.2 * len(rules_) if rules_ else 0.0
    fig = Figure(figsize=(FULL_WIDTH, 2.5 + strip), layout="constrained")
    if rules_:
        ax, ax_v = fig.subplots(2, 1, sharex=True, height_ratios=[2.2, strip])
    else:
        ax, ax_v = fig.add_subplot(), None

    trans = blended_transform_factory(ax.transAxes, ax.transData)
    handles: list[Any] = [Line2D([], [], color=TEAL, marker="o", markersize=5, markeredgecolor="white",
                                 linewidth=2.2)]
    names = [f"Posterior median, {_pct(mass)} interval"]
    for index, (name, statement, lo, hi) in enumerate(rules_):
        text = _label(f"{name}: {_rule_text(statement, lo, hi)}", 120.0, 7.0, max_lines=2)
        # fixed ids: the SVG names each rule's line or band, so a test (or a reader's tool) can find it
        if statement == "between":
            ax.axhspan(lo, hi, color=AMBER, alpha=_BAND_ALPHA, linewidth=0, zorder=0, gid=f"rule-band-{index}")
            centre = (lo + hi) / 2
        else:
            ax.axhline(lo, color=AMBER, linewidth=1.0, linestyle=_DASH, zorder=1, gid=f"rule-threshold-{index}")
            centre = lo
        ax.text(1.01, centre, text, transform=trans, ha="left", va="center", fontsize=7, color=INK)
    if any(r[1] != "between" for r in rules_):
        handles.append(Line2D([], [], color=AMBER, linewidth=1.0, linestyle=_DASH))
        names.append("Rule threshold")
    if any(r[1] == "between" for r in rules_):
        handles.append(Patch(facecolor=AMBER, alpha=_BAND_ALPHA, edgecolor="none"))
        names.append("Rule band")

    ok = np.isfinite(med) & np.isfinite(low) & np.isfinite(upp)
    colours = np.array([TEAL] * n, dtype=object)
    if drift and ok[-1]:
        colours[-1] = ALERT
    ax.plot(x[ok], med[ok], color=TEAL, linewidth=0.8, alpha=0.5, zorder=2)
    ax.vlines(x[ok], low[ok], upp[ok], colors=list(colours[ok]), linewidth=2.2, zorder=3)
    ax.scatter(x[ok], med[ok], s=30, c=list(colours[ok]), edgecolors="white", linewidths=0.8, zorder=4)
    if drift and ok[-1]:
        handles.append(Line2D([], [], color=ALERT, marker="o", markersize=5, markeredgecolor="white",
                              linewidth=2.2))
        names.append("Latest interval, outside the earlier ones")

    spots = [v for v in (*low[ok], *upp[ok]) if math.isfinite(v)]
    spots += [v for r in rules_ for v in (r[2], r[3] if r[1] == "between" else r[2])]
    bottom, top = (min(spots), max(spots)) if spots else (-1.0, 1.0)
    pad = max(0.05, 0.08 * (top - bottom))
    ax.set_ylim(max(-1.0, bottom - pad), min(1.0, top + pad))
    ax.grid(axis="y", color=MIST, linewidth=0.5, zorder=0)
    ax.set_ylabel("Correlation ρ")
    span = x[-1] - x[0]
    ax.set_xlim(x[0] - max(10.0, 0.04 * span), x[-1] + max(10.0, 0.04 * span))

    step = max(1, math.ceil(n / _MAX_TICK_LABELS))
    shown = sorted({*range(0, n, step), n - 1})
    if len(shown) > 2 and n - 1 - shown[-2] < step:
        shown.pop(-2)  # keep the latest label readable rather than crowded by its neighbour
    bottom_ax = ax_v if ax_v is not None else ax
    bottom_ax.xaxis.set_major_locator(FixedLocator(x[shown]))
    bottom_ax.set_xticklabels([_label(labels[i], 60.0, 7.0, max_lines=1) for i in shown],
                              rotation=30 if len(shown) > 6 else 0, ha="right" if len(shown) > 6 else "center")
    bottom_ax.set_xlabel("Report date")

    if ax_v is not None:
        for row, per_run in enumerate(verdicts):
            for verdict, (colour, marker, area) in _VERDICT_STYLE.items():
                idx = [i for i, v in enumerate(per_run) if v == verdict]
                if idx:
                    ax_v.scatter(x[idx], [row] * len(idx), s=area, marker=marker,
                                 linewidths=0.5, facecolors=colour, edgecolors=colour,
                                 zorder=3, gid=f"verdict-{verdict.replace(' ', '-')}-{row}")
        ax_v.set_ylim(len(rules_) - 0.5, -0.5)
        ax_v.set_yticks(range(len(rules_)), [_label(r[0], 110.0, 7.0, max_lines=1) for r in rules_])
        ax_v.tick_params(axis="y", length=0, labelsize=7)
        ax_v.spines["left"].set_visible(False)
        ax_v.tick_params(axis="x", which="both", labelbottom=True)
        ax.tick_params(axis="x", which="both", labelbottom=False)
        for verdict, (colour, marker, area) in _VERDICT_STYLE.items():
            handles.append(Line2D([], [], linestyle="none", marker=marker, markersize=area ** 0.5,
                                  markerfacecolor=colour, markeredgecolor=colour))
            names.append(f"Verdict: {verdict}")
    fig.legend(handles, names, loc="outside upper center", ncols=min(len(names), 4))
    return _to_svg(fig)


@_styled
def change_intervals(
    labels: Sequence[str],
    old: tuple[ArrayLike, ArrayLike, ArrayLike],
    new: tuple[ArrayLike, ArrayLike, ArrayLike],
    *,
    old_label: str,
    new_label: str,
    mass: float,
    thresholds: Sequence[float] = (),
) -> str:
    """The earlier and the latest run's rho for every pair, side by side on one axis from -1 to 1.

    Each pair is one row holding two lines: the earlier run's interval in grey with a hollow median
    just above, the latest run's in teal with a filled median just below. Dashed amber lines mark the
    rule thresholds.

    Parameters
    ----------
    labels : sequence of str
        Row labels (untrusted text; wrapped to two lines, then shortened).
    old, new : (medians, lowers, uppers)
        Per pair, each run's posterior median and interval bounds of rho; NaN leaves that line out.
    old_label, new_label : str
        How the two runs are named in the legend (their report dates).
    mass : float
        Credible mass of the intervals (for the axis label).
    thresholds : sequence of float, default ()
        Rule thresholds on rho.

    Returns
    -------
    str
        The SVG document.
    """
    n = len(labels)
    if n == 0:
        raise FigureError("change_intervals needs at least one pair")
    runs = [tuple(_vector(name, v, n) for name, v in zip(("medians", "lowers", "uppers"), side, strict=True))
            for side in (old, new)]
    thr = _check_thresholds(thresholds)
    mass = _check_mass(mass)
    per_row = 0.34 if n <= 10 else max(0.22, 0.34 - 0.006 * (n - 10))
    fig = Figure(figsize=(FULL_WIDTH, min(10.0, max(1.6, 0.9 + per_row * n))), layout="constrained")
    ax = fig.add_subplot()
    y = np.arange(n, dtype=float)
    ax.grid(axis="x", which="major", color=MIST, linewidth=0.5, zorder=0)
    ax.axvline(0.0, color=SLATE, linewidth=0.8, zorder=1)
    for t in thr:
        if -1.0 <= t <= 1.0:
            ax.axvline(t, color=AMBER, linewidth=1.0, linestyle=_DASH, zorder=1)
    for (med, low, upp), offset, colour, face in ((runs[0], -0.17, SLATE, "white"), (runs[1], 0.17, TEAL, TEAL)):
        ok = np.isfinite(med) & np.isfinite(low) & np.isfinite(upp)
        ax.hlines(y[ok] + offset, np.clip(low[ok], -1, 1), np.clip(upp[ok], -1, 1), color=colour,
                  linewidth=2.0, zorder=2)
        ax.scatter(np.clip(med[ok], -1, 1), y[ok] + offset, s=24, facecolors=face,
                   edgecolors=colour if face == "white" else "white", linewidths=0.9, zorder=3, clip_on=False)
    ax.set_xlim(-1.0, 1.0)
    ax.set_ylim(n - 0.5, -0.5)
    ax.xaxis.set_major_locator(FixedLocator([-1.0, -0.5, 0.0, 0.5, 1.0]))
    ax.xaxis.set_minor_locator(MultipleLocator(0.25))
    label_size = 8.0 if n <= 25 else 7.0
    ax.set_yticks(y, [_label(s, 150.0, label_size) for s in labels])
    ax.tick_params(axis="y", length=0, labelsize=label_size, pad=6)
    ax.spines["left"].set_visible(False)
    ax.set_xlabel(f"Correlation ρ (posterior median and {_pct(mass)} credible interval)")
    handles: list[Any] = [
        Line2D([], [], color=SLATE, marker="o", markersize=5, markerfacecolor="white", linewidth=2.0),
        Line2D([], [], color=TEAL, marker="o", markersize=5, markeredgecolor="white", linewidth=2.0),
    ]
    names = [_label(f"Earlier run ({old_label})", 200.0, 7.5, max_lines=1),
             _label(f"Latest run ({new_label})", 200.0, 7.5, max_lines=1)]
    if thr:
        handles.append(Line2D([], [], color=AMBER, linewidth=1.0, linestyle=_DASH))
        names.append("Rule threshold")
    fig.legend(handles, names, loc="outside upper center", ncols=len(names))
    return _to_svg(fig)
