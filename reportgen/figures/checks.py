"""Figures of the model checks: the chi-square Q-Q plot of squared Mahalanobis distances.

Under a bivariate normal model the squared Mahalanobis distances of the rows from the mean follow,
approximately, a chi-square distribution with 2 degrees of freedom; plotting the sorted distances against
chi-square quantiles shows heavy tails and single outlying rows (Healy 1968, "Multivariate normal
plotting", Applied Statistics 17: 157-161; Gnanadesikan and Kettenring 1972, Biometrics 28: 81-124;
references from memory).  The distances, reference quantiles and flag limit are computed by
:mod:`reportgen.checks`; this module only draws them.

Also home of :func:`_place_labels`, the small label placer shared with the scatter plot's marked rows.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator
from matplotlib.transforms import blended_transform_factory

from reportgen.figures.style import (
    _BROWN,
    AMBER,
    FULL_WIDTH,
    INK,
    MIST,
    RASTER_THRESHOLD,
    SLATE,
    FigureError,
    _label,
    _styled,
    _text_width_pt,
    _to_svg,
    _vector,
    row_positions,
)

__all__ = ["mahalanobis_qq"]

QQ_WIDTH = FULL_WIDTH / 3.0  # sits beside a column of text
QQ_HEIGHT = 2.2
_QQ_AXES_PT = (QQ_WIDTH * 72.0 - 42.0, QQ_HEIGHT * 72.0 - 36.0)  # rough axes size, for label placement
_LARGEST_AS_VECTORS = 50  # the upper tail is what a reader inspects: never rasterised or thinned
_THIN_ABOVE = 2000  # more points than this are thinned along the curve
_THIN_STEP = 0.002  # in axes fractions: about 0.3 pt on this figure, far below a marker's size
MAX_LABELS = 12  # more labels crowd a small panel; the rest keep their colour or ring only


# --------------------------------------------------------------------------
# Label placement (shared with the scatter plot)
# --------------------------------------------------------------------------

# offsets in points from the marked point, nearest first; beyond 8 pt a thin leader line is drawn
_OFFSETS = [(dx, dy) for dy in (3.0, -3.0, 11.0, -11.0, 19.0, -19.0, 27.0, -27.0) for dx in (5.0, -5.0)]


def _overlap(box: np.ndarray, boxes: np.ndarray) -> float:
    """Total overlap area of *box* (x0, y0, x1, y1) with each row of *boxes*."""
    if boxes.size == 0:
        return 0.0
    w = np.clip(np.minimum(box[2], boxes[:, 2]) - np.maximum(box[0], boxes[:, 0]), 0.0, None)
    h = np.clip(np.minimum(box[3], boxes[:, 3]) - np.maximum(box[1], boxes[:, 1]), 0.0, None)
    return float((w * h).sum())


def _place_labels(ax: Any, xs: np.ndarray, ys: np.ndarray, texts: Sequence[str], *, axes_pt: tuple[float, float],
                  fontsize: float, gid_prefix: str, obstacle_pt: float = 3.5) -> None:
    """Label points with the first placement that overlaps no other label, marker or the axes edge.

    Positions are estimated from the current axis limits and a rough axes size *axes_pt* (points) before
    layout, which is close enough to keep small labels apart.  Every point in *texts* gets its label: when
    no candidate is free, the one with the least overlap is used.  Call after the limits are set.
    """
    (x_lo, x_hi), (y_lo, y_hi) = ax.get_xlim(), ax.get_ylim()
    width_pt, height_pt = axes_pt
    px = (np.asarray(xs, dtype=float) - x_lo) / (x_hi - x_lo) * width_pt
    py = (np.asarray(ys, dtype=float) - y_lo) / (y_hi - y_lo) * height_pt
    r = obstacle_pt
    markers = np.column_stack([px - r, py - r, px + r, py + r])
    placed: list[np.ndarray] = []
    height = 1.15 * fontsize
    for k, text in enumerate(texts):
        width = _text_width_pt(text.replace("\\$", "$"), fontsize)
        toward_centre = -1.0 if px[k] > 0.5 * width_pt else 1.0
        candidates = sorted(_OFFSETS, key=lambda o: (abs(o[1]), o[0] != 5.0 * toward_centre))
        best: tuple[float, float, float] | None = None
        for dx, dy in candidates:
            x0 = px[k] + dx - (width if dx < 0 else 0.0)
            y0 = py[k] + dy - (height if dy < 0 else 0.0)
            box = np.array([x0, y0, x0 + width, y0 + height])
            outside = (max(0.0, -box[0]) + max(0.0, box[2] - width_pt)) * height + (
                max(0.0, -box[1]) + max(0.0, box[3] - height_pt)) * width
            others = np.delete(markers, k, axis=0)
            score = _overlap(box, np.array(placed)) + _overlap(box, others) + outside
            if best is None or score < best[0]:
                best = (score, dx, dy)
            if score == 0.0:
                break
        assert best is not None
        _, dx, dy = best
        x0 = px[k] + dx - (width if dx < 0 else 0.0)
        y0 = py[k] + dy - (height if dy < 0 else 0.0)
        placed.append(np.array([x0, y0, x0 + width, y0 + height]))
        leader = {"arrowstyle": "-", "color": SLATE, "linewidth": 0.5, "shrinkA": 0.0, "shrinkB": r}
        ax.annotate(text, (float(xs[k]), float(ys[k])), xytext=(dx, dy), textcoords="offset points",
                    ha="right" if dx < 0 else "left", va="top" if dy < 0 else "bottom", fontsize=fontsize,
                    color=_BROWN, zorder=6, gid=f"{gid_prefix}{k}",
                    arrowprops=leader if abs(dy) > 8.0 else None)


# --------------------------------------------------------------------------
# Q-Q plot of squared Mahalanobis distances
# --------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class _QQLayers:
    """Points of :func:`mahalanobis_qq`, split into the layers that are drawn differently."""

    dense_x: np.ndarray  # the bulk: thinned when large, rasterised when more than RASTER_THRESHOLD
    dense_y: np.ndarray
    largest_x: np.ndarray  # the largest distances (up to 50), always vectors
    largest_y: np.ndarray
    flagged_x: np.ndarray  # flagged rows in the order given, always vectors
    flagged_y: np.ndarray
    x_max: float  # axis limits (both axes start at 0)
    y_max: float


def _qq_layers(distances_sq: np.ndarray, expected_sq: np.ndarray, cutoff: float, flagged: np.ndarray) -> _QQLayers:
    """Sort, place the flagged rows on the curve and thin the bulk of a large sample.

    Thinning walks the curve (monotone in both axes) in axes fractions and keeps the first point of every
    step of length :data:`_THIN_STEP`, so every point left out lies within one step of a drawn one.
    """
    n = distances_sq.size
    order = np.argsort(distances_sq, kind="stable")
    observed = distances_sq[order]
    rank = np.empty(n, dtype=np.intp)
    rank[order] = np.arange(n)
    x_max = 1.05 * float(expected_sq[-1]) if expected_sq[-1] > 0 else 1.0
    y_top = max(1.05 * float(observed[-1]), 1.15 * cutoff)
    y_max = y_top if y_top > 0 else 1.0

    dense = np.ones(n, dtype=bool)
    dense[max(0, n - _LARGEST_AS_VECTORS):] = False
    dense[rank[flagged]] = False
    if n > _THIN_ABOVE:
        step = np.hypot(np.diff(expected_sq) / x_max, np.diff(observed) / y_max)
        cell = np.floor(np.concatenate([[0.0], np.cumsum(step)]) / _THIN_STEP)
        dense &= np.concatenate([[True], cell[1:] != cell[:-1]])
    top = slice(max(0, n - _LARGEST_AS_VECTORS), n)
    return _QQLayers(dense_x=expected_sq[dense], dense_y=observed[dense],
                     largest_x=expected_sq[top], largest_y=observed[top],
                     flagged_x=expected_sq[rank[flagged]], flagged_y=distances_sq[flagged],
                     x_max=x_max, y_max=y_max)


@_styled
def mahalanobis_qq(distances_sq: np.ndarray, expected_sq: np.ndarray, cutoff: float, flagged: np.ndarray,
                   labels: Sequence[str]) -> str:
    """Chi-square Q-Q plot of squared Mahalanobis distances, with the flag limit and flagged rows.

    Sorted distances (y) against the reference quantiles (x), the identity line, a dashed amber line at
    *cutoff* labelled "flag limit", and the flagged rows in amber, the first 12 labelled.  The 50 largest
    distances and the flagged rows are always vectors (SVG groups ``qq-largest`` and ``qq-flagged``; labels
    ``qq-label-0``, ``-1``, ...); the rest (``qq-points``) is thinned along the curve above 2,000 points and
    rasterised above :data:`RASTER_THRESHOLD`.  A third of the page width, 2.27 x 2.2 in.

    Degenerate pairs (:mod:`reportgen.checks` then gives only NaN distances and a NaN cutoff) get empty
    axes with the note "not computed" (group ``qq-not-computed``); a non-finite *cutoff* draws no limit.

    Parameters
    ----------
    distances_sq : numpy.ndarray
        Squared distance of every row, in row order; finite and non-negative, or all NaN.
    expected_sq : numpy.ndarray
        Reference quantiles (chi-square, 2 df), ascending, as many as *distances_sq*.
    cutoff : float
        Squared distance beyond which a row is flagged; NaN for none.
    flagged : numpy.ndarray of int
        Positions in *distances_sq* (not in sorted order) of the flagged rows.
    labels : sequence of str
        One label per flagged row, e.g. "row 14" (untrusted text).

    Returns
    -------
    str
        The SVG document.
    """
    distances = _vector("distances_sq", distances_sq)
    n = distances.size
    if n == 0:
        raise FigureError("mahalanobis_qq needs at least one distance")
    expected = _vector("expected_sq", expected_sq, n)
    if not (np.all(np.isfinite(expected)) and np.all(np.diff(expected) >= 0.0)):
        raise FigureError("expected_sq must be finite and ascending")
    degenerate = bool(np.all(np.isnan(distances)))
    if not degenerate and not (np.all(np.isfinite(distances)) and np.all(distances >= 0.0)):
        raise FigureError("distances_sq must be finite and non-negative (or all NaN for a degenerate pair)")
    limit = float(cutoff)
    positions = row_positions(flagged, n, "flagged")
    texts = [str(t) for t in labels]
    if len(texts) != positions.size:
        raise FigureError(f"labels has {len(texts)} values for {positions.size} flagged rows")
    if degenerate and positions.size:
        raise FigureError("flagged rows need finite distances")

    fig = Figure(figsize=(QQ_WIDTH, QQ_HEIGHT), layout="constrained")
    ax = fig.add_subplot()
    ax.grid(True, color=MIST, linewidth=0.5)
    ax.xaxis.set_major_locator(MaxNLocator(4))
    ax.yaxis.set_major_locator(MaxNLocator(4))
    ax.tick_params(labelsize=6.5)
    ax.set_xlabel("expected (chi-square, 2 df)", fontsize=7.0)
    ax.set_ylabel("observed squared distance", fontsize=7.0)
    if degenerate:
        ax.set_xlim(0.0, 1.05 * float(expected[-1]) if expected[-1] > 0 else 1.0)
        ax.text(0.5, 0.5, "not computed", transform=ax.transAxes, ha="center", va="center", fontsize=7.0,
                color=SLATE, gid="qq-not-computed")
        return _to_svg(fig)

    layers = _qq_layers(distances, expected, limit if np.isfinite(limit) else 0.0, positions)
    ax.set_xlim(0.0, layers.x_max)
    ax.set_ylim(0.0, layers.y_max)
    edge = max(layers.x_max, layers.y_max)
    ax.plot([0.0, edge], [0.0, edge], color=INK, linewidth=0.7, zorder=1, gid="qq-identity")
    if np.isfinite(limit):
        ax.axhline(limit, color=AMBER, linewidth=1.0, linestyle=(0, (4, 2.5)), zorder=1, gid="qq-flag-limit")
        ax.text(0.03, limit, "flag limit", transform=blended_transform_factory(ax.transAxes, ax.transData),
                ha="left", va="bottom", fontsize=6.5, color=_BROWN, gid="qq-flag-limit-label")

    size = 10.0 if n <= 100 else 6.0 if n <= 1000 else 4.0
    # solid colour, no transparency: a thinned layer would otherwise look lighter than a full one
    ax.scatter(layers.dense_x, layers.dense_y, s=size, color=SLATE, linewidths=0, zorder=2,
               rasterized=layers.dense_x.size > RASTER_THRESHOLD, gid="qq-points")
    ax.scatter(layers.largest_x, layers.largest_y, s=size, color=SLATE, linewidths=0, zorder=3,
               gid="qq-largest")
    if positions.size:
        ax.scatter(layers.flagged_x, layers.flagged_y, s=size + 14.0, color=AMBER, edgecolors="white",
                   linewidths=0.4, zorder=4, gid="qq-flagged")
        shown = [_label(t, 55.0, 6.0, max_lines=1) for t in texts[:MAX_LABELS]]
        _place_labels(ax, layers.flagged_x, layers.flagged_y, shown, axes_pt=_QQ_AXES_PT, fontsize=6.0,
                      gid_prefix="qq-label-")
    return _to_svg(fig)
