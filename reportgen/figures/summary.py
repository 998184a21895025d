"""Figures that summarise all pairs: the forest plot and the correlation matrix."""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
from matplotlib.cm import ScalarMappable
from matplotlib.colors import LinearSegmentedColormap, Normalize, to_rgba
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, Rectangle
from matplotlib.ticker import FixedLocator, MultipleLocator
from matplotlib.transforms import blended_transform_factory
from numpy.typing import ArrayLike

from reportgen.figures.style import (
    _BROWN,
    _TEAL_LIGHT,
    ALERT,
    AMBER,
    FULL_WIDTH,
    INK,
    MIST,
    SLATE,
    TEAL,
    FigureError,
    _check_mass,
    _check_rope,
    _check_thresholds,
    _label,
    _num,
    _pct,
    _styled,
    _text_width_pt,
    _to_svg,
    _vector,
)

__all__ = ["MATRIX_VALUES_MAX", "correlation_cmap", "correlation_matrix", "forest_plot", "matrix_shows_values"]


# --------------------------------------------------------------------------
# Forest plot
# --------------------------------------------------------------------------

_STATUS_STYLE = {
    "fail": (ALERT, "s", "Status: fail"),
    "warn": (AMBER, "D", "Status: warn"),
}


@_styled
def forest_plot(
    labels: Sequence[str],
    medians: ArrayLike,
    lowers: ArrayLike,
    uppers: ArrayLike,
    *,
    statuses: Sequence[str],
    sample_r: Sequence[float] | None,
    thresholds: Sequence[float] = (),
    rope: tuple[float, float] | None = None,
    mass: float,
    annotate: bool = True,
) -> str:
    """Forest plot of the posterior correlation of every pair.

    One row per pair, top to bottom in the given order, on an x axis fixed to
    [-1, 1]: a dot at the posterior median and a line for the credible
    interval.  A thin vertical line marks zero, dashed amber lines the
    decision thresholds and a shaded band the region of practical
    equivalence.  Numbers printed to the right repeat median and interval.
    The median marker of a pair with status ``"fail"`` is an
    alert-red square, with ``"warn"`` an amber diamond; other statuses keep the
    teal dot.  The figure is full width and grows by about 0.3 in per row
    (rows get slightly tighter beyond 10 pairs; the height is capped at 10 in).

    Parameters
    ----------
    labels : sequence of str
        Row labels (untrusted text; wrapped to two lines, then shortened).
    medians, lowers, uppers : array_like
        Posterior median and credible-interval bounds of rho per pair.  NaN
        is allowed; such a row is labelled "not estimated".
    statuses : sequence of str
        Status per pair, compared case-insensitively with "fail" and "warn".
    sample_r : sequence of float or None
        Sample Pearson r per pair, drawn as a small hollow circle just below
        the interval line; ``None`` to omit.
    thresholds : sequence of float, default ()
        Decision thresholds on rho, drawn as dashed amber lines.
    rope : (float, float) or None, default None
        Region of practical equivalence, drawn as a shaded band.
    mass : float
        Probability mass of the credible interval (for the axis label).
    annotate : bool, default True
        Print "median [lower, upper]" to the right of each row.

    Returns
    -------
    str
        The SVG document.
    """
    n = len(labels)
    if n == 0:
        raise FigureError("forest_plot needs at least one pair")
    med = _vector("medians", medians, n)
    low = _vector("lowers", lowers, n)
    upp = _vector("uppers", uppers, n)
    if len(statuses) != n:
        raise FigureError(f"statuses has {len(statuses)} values, expected {n}")
    status = [str(s).strip().lower() for s in statuses]
    sr = None if sample_r is None else _vector("sample_r", sample_r, n)
    thr = _check_thresholds(thresholds)
    rope_ = _check_rope(rope)
    mass = _check_mass(mass)
    both = np.isfinite(low) & np.isfinite(upp)
    if np.any(low[both] > upp[both]):
        raise FigureError("every lower bound must be <= its upper bound")

    per_row = 0.3 if n <= 10 else max(0.2, 0.3 - 0.005 * (n - 10))
    height = min(10.0, max(1.8, 1.0 + per_row * n))
    label_size = 8.0 if n <= 25 else 7.0

    fig = Figure(figsize=(FULL_WIDTH, height), layout="constrained")
    ax = fig.add_subplot()
    y = np.arange(n, dtype=float)

    if rope_ is not None:
        ax.axvspan(*rope_, color=MIST, linewidth=0, zorder=0)
    ax.grid(axis="x", which="major", color=MIST, linewidth=0.5, zorder=0)
    ax.axvline(0.0, color=SLATE, linewidth=0.8, zorder=1)
    for t in thr:
        if -1.0 <= t <= 1.0:
            ax.axvline(t, color=AMBER, linewidth=1.0, linestyle=(0, (4, 2.5)), zorder=1)

    lo_c, hi_c = np.clip(low, -1.0, 1.0), np.clip(upp, -1.0, 1.0)
    ax.hlines(y[both], lo_c[both], hi_c[both], color=TEAL, linewidth=2.2, zorder=2)

    # posterior medians, grouped by status so that each group is one artist
    groups: dict[str, list[int]] = {}
    for i, s in enumerate(status):
        if math.isfinite(med[i]):
            groups.setdefault(s if s in _STATUS_STYLE else "", []).append(i)
    for key in sorted(groups):
        idx = groups[key]
        colour, marker, _ = _STATUS_STYLE.get(key, (TEAL, "o", ""))
        ax.scatter(np.clip(med[idx], -1, 1), y[idx], s=34 if marker == "o" else 28,
                   marker=marker, color=colour, edgecolors="white", linewidths=0.8,
                   zorder=4, clip_on=False)
    if sr is not None:
        # just below the interval line so that it never hides the median
        ok = np.isfinite(sr)
        ax.scatter(np.clip(sr[ok], -1, 1), y[ok] + 0.3, s=12, marker="o", facecolors="white",
                   edgecolors=INK, linewidths=0.7, zorder=5, clip_on=False)

    for i in np.flatnonzero(~np.isfinite(med)):
        ax.text(-0.98, y[i], "not estimated", ha="left", va="center", color=SLATE,
                fontsize=7, zorder=6)

    ax.set_xlim(-1.0, 1.0)
    ax.set_ylim(n - 0.5, -0.5)
    ax.xaxis.set_major_locator(FixedLocator([-1.0, -0.5, 0.0, 0.5, 1.0]))
    ax.xaxis.set_minor_locator(MultipleLocator(0.25))
    ax.set_yticks(y, [_label(s, 150.0, label_size) for s in labels])
    ax.tick_params(axis="y", length=0, labelsize=label_size, pad=6)
    ax.spines["left"].set_visible(False)
    ax.set_xlabel(f"Correlation ρ (posterior median and {_pct(mass)} credible interval)")

    if annotate:
        trans = blended_transform_factory(ax.transAxes, ax.transData)
        for i in range(n):
            text = (f"{_num(med[i])}  [{_num(low[i])}, {_num(upp[i])}]"
                    if math.isfinite(med[i]) else "n/a")
            ax.text(1.03, y[i], text, transform=trans, ha="left", va="center",
                    fontsize=7.5, color=INK)
        ax.text(1.03, 1.0, f"median  [{_pct(mass)} CrI]", transform=ax.transAxes,
                ha="left", va="bottom", fontsize=7, color=SLATE)

    handles: list[Any] = [
        Line2D([], [], color=TEAL, marker="o", markersize=5.5, markeredgecolor="white",
               linewidth=2.2),
    ]
    names = [f"Posterior median, {_pct(mass)} interval"]
    if sr is not None:
        handles.append(Line2D([], [], linestyle="none", marker="o", markersize=3.6,
                              markerfacecolor="white", markeredgecolor=INK,
                              markeredgewidth=0.7))
        names.append("Sample r")
    if thr:
        handles.append(Line2D([], [], color=AMBER, linewidth=1.0, linestyle=(0, (4, 2.5))))
        names.append("Threshold")
    if rope_ is not None:
        handles.append(Patch(facecolor=MIST, edgecolor="none"))
        names.append("ROPE")
    for key, (colour, marker, name) in _STATUS_STYLE.items():
        if key in status:
            handles.append(Line2D([], [], linestyle="none", marker=marker, markersize=5,
                                  color=colour, markeredgecolor="white"))
            names.append(name)
    fig.legend(handles, names, loc="outside upper center", ncols=min(len(names), 4))
    return _to_svg(fig)



# --------------------------------------------------------------------------
# Correlation matrix
# --------------------------------------------------------------------------


def correlation_cmap() -> LinearSegmentedColormap:
    """Diverging map for rho in [-1, 1]: brown–amber, white at 0, teal.

    The two ends (and the two midpoints) have matching lightness so that
    positive and negative correlations of equal size look equally strong.
    """
    return LinearSegmentedColormap.from_list(
        "reportgen_rho",
        [(0.0, _BROWN), (0.25, AMBER), (0.5, "#ffffff"), (0.75, _TEAL_LIGHT), (1.0, TEAL)],
    )


MATRIX_VALUES_MAX = 20
"""Largest number of matrix rows (variables less one) whose cells print their value; above it the cells are
too small to read a number, so the matrix is a plain heat map and a dot marks an interval excluding zero."""
_MIN_LABEL_PT = 3.5  # smallest label of a dense matrix; beyond that only every few variables are named


def matrix_shows_values(k: int) -> bool:
    """Whether a matrix of ``k`` variables prints each cell's value (and outlines), or is a dense heat map."""
    return k - 1 <= MATRIX_VALUES_MAX


@_styled
def correlation_matrix(
    labels: Sequence[str],
    medians: ArrayLike,
    excludes_zero: ArrayLike,
) -> str:
    """Lower-triangle heat map of posterior median correlations.

    Cell (i, j) with i > j shows the median of rho for variables i and j on
    the diverging :func:`correlation_cmap` fixed to [-1, 1], with the value
    printed to two decimals.  Cells whose credible interval excludes zero are
    outlined and their value is bold.  Where ``medians[i, j]`` is NaN the
    transposed entry is used; a pair missing both ways is a grey "n/a" cell.
    The diagonal is not drawn.  Square-ish, at most 6.8 in wide.  Above
    :data:`MATRIX_VALUES_MAX` rows the cells are too small for numbers: the
    matrix becomes one image of colours, a dot marks a cell whose interval
    excludes zero, and the labels shrink (every few are left out when even
    3.5 pt would overlap).

    Parameters
    ----------
    labels : sequence of str
        Variable names, k >= 2 (untrusted text; shortened to fit).
    medians : array_like, shape (k, k)
        Posterior medians of rho, NaN where there is no pair.
    excludes_zero : array_like of bool, shape (k, k)
        Whether the credible interval of the pair excludes zero.

    Returns
    -------
    str
        The SVG document.
    """
    k = len(labels)
    if k < 2:
        raise FigureError("correlation_matrix needs at least two variables")
    med = np.asarray(medians, dtype=float)
    exc = np.asarray(excludes_zero, dtype=bool)
    if med.shape != (k, k) or exc.shape != (k, k):
        raise FigureError(f"medians and excludes_zero must have shape ({k}, {k})")

    m = k - 1  # rows are variables 1..k-1, columns variables 0..k-2
    values = np.full((m, m), np.nan)
    marked = np.zeros((m, m), dtype=bool)
    for r in range(m):
        i = r + 1
        for j in range(i):
            if math.isfinite(med[i, j]):
                values[r, j], marked[r, j] = med[i, j], exc[i, j]
            elif math.isfinite(med[j, i]):
                values[r, j], marked[r, j] = med[j, i], exc[j, i]
    values = np.clip(values, -1.0, 1.0)
    if m > MATRIX_VALUES_MAX:
        return _dense_matrix(labels, values, marked)
    lower = np.tril(np.ones((m, m), dtype=bool))

    label_size = 7.5 if m <= 10 else 6.5
    label_pt = 95.0
    # long names wrap onto up to three lines rather than being cut after a few words
    col_labels = [_label(s, label_pt, label_size, max_lines=3) for s in labels[:-1]]
    row_labels = [_label(s, label_pt, label_size, max_lines=3) for s in labels[1:]]

    # Size the figure from the measured label extents so that the cells come
    # out (nearly) square without a fixed aspect ratio, which constrained
    # layout handles poorly.
    def longest(texts: list[str]) -> float:
        return max(_text_width_pt(line.replace("\\$", "$"), label_size)
                   for t in texts for line in t.split("\n")) / 72.0

    def deepest(texts: list[str]) -> float:
        return max(t.count("\n") for t in texts) * label_size * 1.2 / 72.0

    left = longest(row_labels) + 0.2
    # a rotated label of several lines reaches further down by its extra lines' height
    bottom = longest(col_labels) * math.sin(math.radians(40)) + deepest(col_labels) + 0.35
    right = 0.95  # colourbar with ticks and label
    top = 0.1 if m >= 4 else 0.35  # small matrices put the note above
    cell = min(0.9, max(0.3, 4.4 / m))
    side = min(cell * m, FULL_WIDTH - left - right)
    cell = side / m
    width, height = left + side + right, bottom + side + top
    text_size = min(8.0, max(5.0, 8.0 * cell / 0.6))
    outline = 1.3 if cell >= 0.55 else 1.0

    fig = Figure(figsize=(width, height), layout="constrained")
    ax = fig.add_subplot()
    cmap = correlation_cmap()
    shown = np.ma.masked_where(~lower | ~np.isfinite(values), values)
    mesh = ax.pcolormesh(np.arange(m + 1), np.arange(m + 1), shown, cmap=cmap,
                         vmin=-1.0, vmax=1.0, edgecolors="white", linewidth=1.5)
    for r in range(m):
        for c in range(r + 1):
            v = values[r, c]
            if not math.isfinite(v):
                ax.add_patch(Rectangle((c, r), 1, 1, facecolor=MIST, edgecolor="white",
                                       linewidth=1.5))
                ax.text(c + 0.5, r + 0.5, "n/a", ha="center", va="center", color=SLATE,
                        fontsize=text_size * 0.9)
                continue
            bold = bool(marked[r, c])
            ax.text(c + 0.5, r + 0.5, _num(v), ha="center", va="center",
                    color="white" if abs(v) >= 0.6 else INK, fontsize=text_size,
                    fontweight="bold" if bold else "normal")
            if bold:
                ax.add_patch(Rectangle((c + 0.08, r + 0.08), 0.84, 0.84, fill=False,
                                       edgecolor=INK, linewidth=outline))

    ax.set_xlim(0, m)
    ax.set_ylim(m, 0)
    ax.set_xticks(np.arange(m) + 0.5, col_labels)
    ax.set_yticks(np.arange(m) + 0.5, row_labels)
    ax.tick_params(length=0, labelsize=label_size, pad=3)
    ax.tick_params(axis="x", labelrotation=40)
    for tick in ax.get_xticklabels():
        tick.set_ha("right")
        tick.set_rotation_mode("anchor")
    for spine in ax.spines.values():
        spine.set_visible(False)

    cbar = fig.colorbar(mesh, ax=ax, shrink=0.7, aspect=22, pad=0.03)
    cbar.set_ticks([-1.0, -0.5, 0.0, 0.5, 1.0])
    cbar.outline.set_visible(False)
    cbar.ax.tick_params(labelsize=7, length=2, color=SLATE)
    cbar.set_label("Posterior median ρ", fontsize=7.5)

    note = [Patch(facecolor="white", edgecolor=INK, linewidth=1.3)]
    if m >= 4:  # the empty upper triangle has room for the note
        ax.legend(note, ["outlined: interval excludes 0"], loc="upper right",
                  bbox_to_anchor=(1.0, 1.0), fontsize=7)
    else:
        ax.legend(note, ["outlined: interval excludes 0"], loc="lower left",
                  bbox_to_anchor=(0.0, 1.02), fontsize=7)
    return _to_svg(fig)


def _dense_matrix(labels: Sequence[str], values: np.ndarray, marked: np.ndarray) -> str:
    """The heat map of a large matrix: colours as one image, marks as one rasterised layer of dots.

    Thousands of cells drawn one by one as vector shapes (and thousands of numbers) would make the SVG slow
    to lay out and no easier to read; labels and the colour bar stay vector text.
    """
    m = values.shape[0]
    lower = np.tril(np.ones((m, m), dtype=bool))
    side = FULL_WIDTH - 1.9  # room for the row labels and the colour bar
    cell_pt = side * 72.0 / m
    label_size = min(6.5, max(_MIN_LABEL_PT, 0.8 * cell_pt))
    every = max(1, math.ceil(label_size / (0.8 * cell_pt))) if 0.8 * cell_pt < _MIN_LABEL_PT else 1
    names = [_label(s, 60.0, label_size, max_lines=1) for s in labels]
    cols = [names[j] if j % every == 0 else "" for j in range(m)]
    rows = [names[i + 1] if (i + 1) % every == 0 else "" for i in range(m)]
    norm = Normalize(vmin=-1.0, vmax=1.0)
    cmap = correlation_cmap()
    colours = cmap(norm(np.nan_to_num(values)))
    colours[lower & ~np.isfinite(values)] = to_rgba(MIST)
    colours[~lower] = (1.0, 1.0, 1.0, 0.0)

    fig = Figure(figsize=(FULL_WIDTH, side + 0.9), layout="constrained")
    ax = fig.add_subplot()
    ax.imshow(colours, interpolation="nearest", extent=(0, m, m, 0), aspect="equal")
    r, c = np.nonzero(marked & lower & np.isfinite(values))
    if r.size:
        dark = np.abs(values[r, c]) >= 0.6  # as the printed values of a small matrix: white on dark colours
        ax.scatter(c + 0.5, r + 0.5, s=max(0.5, (0.35 * cell_pt) ** 2), marker="o", linewidths=0, rasterized=True,
                   color=np.where(dark[:, None], to_rgba("white"), to_rgba(INK)))
    ax.set_xlim(0, m)
    ax.set_ylim(m, 0)
    ax.set_xticks(np.arange(m) + 0.5, cols)
    ax.set_yticks(np.arange(m) + 0.5, rows)
    ax.tick_params(length=0, labelsize=label_size, pad=1.5)
    ax.tick_params(axis="x", labelrotation=90)
    for spine in ax.spines.values():
        spine.set_visible(False)
    cbar = fig.colorbar(ScalarMappable(norm=norm, cmap=cmap), ax=ax, shrink=0.6, aspect=25, pad=0.02)
    cbar.set_ticks([-1.0, -0.5, 0.0, 0.5, 1.0])
    cbar.outline.set_visible(False)
    cbar.ax.tick_params(labelsize=7, length=2, color=SLATE)
    cbar.set_label("Posterior median ρ", fontsize=7.5)
    note = [Line2D([], [], linestyle="none", marker="o", markersize=3, color=INK)]
    ax.legend(note, ["dot: interval excludes 0"], loc="upper right", bbox_to_anchor=(1.0, 1.0), fontsize=7)
    return _to_svg(fig)
