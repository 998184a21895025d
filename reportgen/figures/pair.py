"""Figures of one pair: data scatter with ellipses, density of rho, parameter densities."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Ellipse, Patch
from matplotlib.ticker import FixedFormatter, FixedLocator, LogLocator, MaxNLocator
from numpy.typing import ArrayLike
from scipy.stats import chi2

from reportgen.figures.checks import MAX_LABELS, _place_labels
from reportgen.figures.style import (
    _BROWN,
    _SHADE_ALPHA,
    AMBER,
    FULL_WIDTH,
    HALF_WIDTH,
    INK,
    MIST,
    RASTER_THRESHOLD,
    SLATE,
    TEAL,
    FigureError,
    _check_density,
    _check_grid,
    _check_interval,
    _check_mass,
    _check_rope,
    _check_thresholds,
    _clean,
    _decimals,
    _display_offset,
    _label,
    _num,
    _offset_suffix,
    _pct,
    _styled,
    _text_width_pt,
    _to_svg,
    _vector,
    row_positions,
)

__all__ = [
    "DensityPanel",
    "ellipse_geometry",
    "parameter_densities",
    "rho_density",
    "scatter_with_ellipses",
]

# --------------------------------------------------------------------------
# Density helpers
# --------------------------------------------------------------------------


def _mass_span(grid: np.ndarray, density: np.ndarray, mass: float) -> tuple[float, float]:
    """Central interval holding *mass* of a density tabulated on *grid*."""
    steps = 0.5 * (density[1:] + density[:-1]) * np.diff(grid)
    cdf = np.concatenate([[0.0], np.cumsum(steps)])
    total = cdf[-1]
    if not math.isfinite(total) or total <= 0:
        return float(grid[0]), float(grid[-1])
    cdf /= total
    tail = (1.0 - mass) / 2.0
    lo = float(np.interp(tail, cdf, grid))
    hi = float(np.interp(1.0 - tail, cdf, grid))
    return lo, hi


_SHADE_POINTS = 300  # most vertices along the top of a shaded interval: under 0.3 pt apart on a half-width figure


def _shade_interval(ax: Any, grid: np.ndarray, density: np.ndarray,
                    interval: tuple[float, float], **kwargs: Any) -> None:
    """Fill the area under *density* between the interval end points."""
    lo, hi = max(interval[0], grid[0]), min(interval[1], grid[-1])
    if hi <= lo:
        return
    inner = grid[(grid > lo) & (grid < hi)]
    if inner.size > _SHADE_POINTS:
        # a fine grid gives the fill thousands of vertices no eye can tell apart, each one a cost to every
        # renderer of the SVG; every few of the grid's own points (spaced as the grid is, on a log axis too)
        # draw the same shape
        inner = inner[np.unique(np.linspace(0, inner.size - 1, _SHADE_POINTS).round().astype(int))]
    xs = np.concatenate([[lo], inner, [hi]])
    # one polygon: the curve over the interval, closed along the axis by its two end points
    ax.fill(np.concatenate([xs, [hi, lo]]), np.concatenate([np.interp(xs, grid, density), [0.0, 0.0]]),
            linewidth=0, **kwargs)


# --------------------------------------------------------------------------
# Scatter plot with probability ellipses
# --------------------------------------------------------------------------


def ellipse_geometry(cov: ArrayLike, mass: float) -> tuple[float, float, float]:
    """Shape of a bivariate normal's central probability ellipse.

    The ellipse ``{z : (z - mu)' cov^-1 (z - mu) <= q}`` with ``q`` the *mass*
    quantile of the chi-square distribution with 2 degrees of freedom contains
    probability *mass*.

    Parameters
    ----------
    cov : array_like, shape (2, 2)
        Symmetric positive-definite covariance matrix.
    mass : float
        Probability inside the ellipse, strictly between 0 and 1.

    Returns
    -------
    width, height, angle_deg : float
        Full length of the major and the minor axis, and the counter-clockwise
        angle of the major axis from the x axis in degrees, in (-90, 90] —
        the arguments of :class:`matplotlib.patches.Ellipse`.
    """
    c = np.asarray(cov, dtype=float)
    if c.shape != (2, 2) or not np.all(np.isfinite(c)):
        raise FigureError("cov must be a finite 2 x 2 matrix")
    if not np.isclose(c[0, 1], c[1, 0], rtol=1e-8, atol=1e-12 * max(1.0, np.abs(c).max())):
        raise FigureError("cov must be symmetric")
    c = 0.5 * (c + c.T)
    mass = _check_mass(mass)
    values, vectors = np.linalg.eigh(c)
    if values[0] <= 0:
        raise FigureError("cov must be positive definite")
    q = float(chi2.ppf(mass, df=2))
    width = 2.0 * math.sqrt(q * values[1])
    height = 2.0 * math.sqrt(q * values[0])
    angle = math.degrees(math.atan2(vectors[1, 1], vectors[0, 1]))
    if angle <= -90.0:
        angle += 180.0
    elif angle > 90.0:
        angle -= 180.0
    return width, height, angle


def _subsample(n: int, max_points: int, seed: int) -> np.ndarray:
    """Indices of at most *max_points* of *n* points, seeded, in original order."""
    if n <= max_points:
        return np.arange(n)
    rng = np.random.default_rng(seed)
    return np.sort(rng.choice(n, size=max_points, replace=False))


_SCATTER_AXES_PT = (HALF_WIDTH * 72.0 - 50.0, 3.0 * 72.0 - 75.0)  # rough axes size, for label placement


def _first_occurrences(positions: np.ndarray, labels: list[str]) -> tuple[np.ndarray, list[str]]:
    """Drop repeated positions (a row marked twice keeps its first label)."""
    _, first = np.unique(positions, return_index=True)
    keep = np.sort(first)
    return positions[keep], [labels[i] for i in keep if i < len(labels)]


def _draw_highlights(ax: Any, xa: np.ndarray, ya: np.ndarray, positions: np.ndarray,
                     labels: Sequence[str], dot_size: float) -> None:
    """Ring the marked rows (vector, on top of any subsample) and label the first few."""
    xs, ys = xa[positions], ya[positions]
    # the rows themselves, in case the subsample left them out
    ax.scatter(xs, ys, s=dot_size, color=SLATE, linewidths=0, zorder=4, gid="highlight-points")
    ax.scatter(xs, ys, s=48.0, facecolors="none", edgecolors=AMBER, linewidths=1.1, zorder=5,
               gid="highlight-rings")
    shown = [_label(t, 60.0, 6.5, max_lines=1) for t in labels[:MAX_LABELS]]
    _place_labels(ax, xs, ys, shown, axes_pt=_SCATTER_AXES_PT, fontsize=6.5, gid_prefix="highlight-label-")


@_styled
def scatter_with_ellipses(
    x: ArrayLike,
    y: ArrayLike,
    *,
    mean: tuple[float, float] | None = None,
    cov: ArrayLike | None = None,
    x_label: str,
    y_label: str,
    max_points: int = 4000,
    seed: int = 0,
    highlight: np.ndarray | None = None,
    highlight_labels: Sequence[str] = (),
    ellipses: bool = True,
) -> str:
    """Scatter plot of the data with the fitted 50% and 95% ellipses.

    The ellipses are the central 50% and 95% probability regions of the
    bivariate normal with the given mean and covariance (radius from the
    chi-square quantile with 2 degrees of freedom, see
    :func:`ellipse_geometry`).  Pairs with a non-finite coordinate are dropped.
    When more than *max_points* pairs remain, a seeded random subset of
    *max_points* pairs (``numpy.random.default_rng(seed)``) is drawn and a note
    "n of N points shown" is added; axis limits still cover all pairs.  More
    than :data:`RASTER_THRESHOLD` drawn points are rasterised at
    :data:`RASTER_DPI`.  Half width, 3.3 x 3.0 in.

    Rows in *highlight* are always drawn as vectors, whether or not the
    subsample holds them, with an open amber ring (SVG group
    ``highlight-rings``); the first 12 carry their label from
    *highlight_labels* (groups ``highlight-label-0``, ``-1``, ...), the rest are
    ringed only.  A highlighted row with a non-finite coordinate is skipped.

    Parameters
    ----------
    x, y : array_like
        Observations, equal length.
    mean : (float, float) or None
        Mean of the fitted bivariate normal; required when *ellipses* is true,
        ignored otherwise.
    cov : array_like, shape (2, 2), or None
        Covariance of the fitted bivariate normal; required when *ellipses* is
        true, ignored otherwise.
    x_label, y_label : str
        Axis labels (untrusted text).
    max_points : int, default 4000
        Largest number of points drawn (highlighted rows come on top).
    seed : int, default 0
        Seed of the subsample.
    highlight : numpy.ndarray of int or None, default None
        Positions in *x* and *y* of rows to mark.
    highlight_labels : sequence of str, default ()
        Labels of the highlighted rows in the same order, e.g. "row 14"
        (untrusted text); may be shorter than *highlight*.
    ellipses : bool, default True
        Draw the ellipses and the mean; false for models without a normal fit
        (such as the rank model), where the limits cover the data only.

    Returns
    -------
    str
        The SVG document.
    """
    xa = _vector("x", x)
    ya = _vector("y", y, xa.size)
    if max_points < 1:
        raise FigureError("max_points must be at least 1")
    marked = row_positions(highlight, xa.size, "highlight")
    labels = [str(t) for t in highlight_labels]
    if len(labels) > marked.size:
        raise FigureError(f"highlight_labels has {len(labels)} labels for {marked.size} highlighted rows")
    marked, labels = _first_occurrences(marked, labels)
    if ellipses:
        if mean is None or cov is None:
            raise FigureError("mean and cov are required when ellipses are drawn")
        mu = _vector("mean", mean, 2)
        if not np.all(np.isfinite(mu)):
            raise FigureError("mean must be finite")
        geoms = [(m, ellipse_geometry(cov, m)) for m in (0.5, 0.95)]
        c = np.asarray(cov, dtype=float)

    keep = np.isfinite(xa) & np.isfinite(ya)
    if marked.size:
        # positions refer to the rows as given: map them past the dropped pairs
        finite_marked = keep[marked]
        labels = [t for t, ok in zip(labels, finite_marked[: len(labels)], strict=True) if ok]
        marked = (np.cumsum(keep) - 1)[marked[finite_marked]]
    xa, ya = xa[keep], ya[keep]
    # data far from zero compared with its spread is drawn relative to a round number, said in the label
    x_off, y_off = _display_offset(xa), _display_offset(ya)
    xa, ya = xa - x_off, ya - y_off
    if ellipses:
        mu = mu - np.array([x_off, y_off])
    total = xa.size
    idx = _subsample(total, int(max_points), int(seed))
    xs, ys = xa[idx], ya[idx]
    drawn = xs.size

    fig = Figure(figsize=(HALF_WIDTH, 3.0), layout="constrained")
    ax = fig.add_subplot()
    ax.grid(True, color=MIST, linewidth=0.5)

    size = 14.0 if drawn <= 100 else 9.0 if drawn <= 1000 else 4.0
    alpha = 0.75 if drawn <= RASTER_THRESHOLD else 0.5 if drawn <= 2000 else 0.35
    if drawn:
        ax.scatter(xs, ys, s=size, color=SLATE, alpha=alpha, linewidths=0, zorder=2,
                   rasterized=drawn > RASTER_THRESHOLD)

    styles = {0.5: {"linewidth": 1.6, "linestyle": "-"},
              0.95: {"linewidth": 1.2, "linestyle": (0, (5, 2.5))}}
    handles: list[Any] = []
    names: list[str] = []
    if ellipses:
        for m, (w, h, angle) in geoms:
            patch = Ellipse((mu[0], mu[1]), w, h, angle=angle, fill=False, edgecolor=TEAL,
                            zorder=3, **styles[m])
            ax.add_patch(patch)
            handles.append(Line2D([], [], color=TEAL, **styles[m]))
        names += ["50% ellipse", "95% ellipse"]
        ax.plot([mu[0]], [mu[1]], marker="+", color=TEAL, markersize=6, markeredgewidth=1.2,
                zorder=3)

    # limits: all data (not just the drawn subset) and the whole 95% ellipse
    if ellipses:
        q95 = float(chi2.ppf(0.95, df=2))
        ext = np.sqrt(q95 * np.diag(c))
        spans = ((mu[0] - ext[0], mu[0] + ext[0]), (mu[1] - ext[1], mu[1] + ext[1]))
    else:
        spans = ((math.inf, -math.inf), (math.inf, -math.inf))
    for axis_set, data, (lo, hi) in ((ax.set_xlim, xa, spans[0]), (ax.set_ylim, ya, spans[1])):
        if data.size:
            lo, hi = min(lo, float(data.min())), max(hi, float(data.max()))
        if not lo <= hi:  # no ellipse and no data
            lo, hi = 0.0, 1.0
        pad = 0.05 * (hi - lo) if hi > lo else 1.0
        axis_set(lo - pad, hi + pad)
    ax.xaxis.set_major_locator(MaxNLocator(5))
    ax.yaxis.set_major_locator(MaxNLocator(5))

    if marked.size:
        _draw_highlights(ax, xa, ya, marked, labels, size)
        handles.append(Line2D([], [], linestyle="none", marker="o", markersize=6.9,
                              markerfacecolor="none", markeredgecolor=AMBER, markeredgewidth=1.1))
        names.append("flagged row")
        drawn = int(np.union1d(idx, marked).size)

    for axis, offset in ((ax.xaxis, x_off), (ax.yaxis, y_off)):
        if offset:
            axis.get_major_formatter().set_useOffset(False)
    ax.set_xlabel(_label(_clean(x_label) + (_offset_suffix(x_off) if x_off else ""), 200.0, 8.0))
    ax.set_ylabel(_label(_clean(y_label) + (_offset_suffix(y_off) if y_off else ""), 180.0, 8.0))
    note = f"{drawn:,} of {total:,} points shown" if drawn < total else None
    if handles or note:
        legend = ax.legend(handles, names, loc="lower left",
                           bbox_to_anchor=(0.0, 1.0), ncols=2, title=note, alignment="left",
                           title_fontproperties={"size": 6.5})
        legend.get_title().set_color(SLATE)
    return _to_svg(fig)


# --------------------------------------------------------------------------
# Posterior density of rho
# --------------------------------------------------------------------------

_PRIOR_STYLE: dict[str, Any] = {"color": AMBER, "linewidth": 1.3, "linestyle": (0, (4, 2))}
_REF_STYLE: dict[str, Any] = {"color": INK, "linewidth": 1.3, "linestyle": (0, (1, 1.6))}
_THR_STYLE: dict[str, Any] = {"color": AMBER, "linewidth": 0.9, "linestyle": (0, (2.5, 2))}
_END_CLOSE = 1e-3  # a posterior whose bulk lies this close to rho = +-1 ...
_END_DECADES = 1.0  # ... and spreads over more than this many decades of distance from it is drawn on a log axis
_END_TICKS = 1e-6  # as is one lying wholly this close to the end: rho ticks would need more than six decimals


@dataclass(frozen=True, eq=False)
class _RhoCurves:
    """The checked curves of :func:`rho_density` and the reference's legend text."""

    posterior: np.ndarray
    prior: np.ndarray  # may hold +inf at an integrable singularity
    reference: np.ndarray | None
    reference_label: str


def _visible_top(curves: Sequence[np.ndarray | None], view: np.ndarray) -> float:
    """Largest finite value of the curves inside *view* (0 when there is none)."""
    top = 0.0
    for curve in curves:
        if curve is not None:
            shown = curve[view]
            top = max(top, float(shown[np.isfinite(shown)].max(initial=0.0)))
    return top


def _near_end(grid: np.ndarray, posterior: np.ndarray) -> float:
    """``1.0`` or ``-1.0`` when the posterior is best drawn against distance from that end, else ``0.0``.

    That is when the central 99.9% of the posterior lies within :data:`_END_CLOSE` of the end and
    spreads over more than :data:`_END_DECADES` decades of distance from it (a rho axis then shows
    only a spike), or lies wholly within :data:`_END_TICKS` of it (rho ticks could not tell its
    values apart).
    """
    lo, hi = _mass_span(grid, posterior, 0.999)
    if lo > 1.0 - _END_CLOSE:
        near, far, end = 1.0 - hi, 1.0 - lo, 1.0
    elif hi < -1.0 + _END_CLOSE:
        near, far, end = 1.0 + lo, 1.0 + hi, -1.0
    else:
        return 0.0
    return end if near <= 0.0 or far < _END_TICKS or math.log10(far / near) > _END_DECADES else 0.0


def _distance_density(grid: np.ndarray, density: np.ndarray, end: float) -> tuple[np.ndarray, np.ndarray]:
    """Distance ``|end - rho|`` (increasing, positive) and the density per decade of it.

    With ``u = log10(d)``, ``p(u) = p(rho) d ln 10``.  ``1 - rho`` is exact for rho near 1 (Sterbenz),
    so the distances keep the precision the grid has; points at distance 0 cannot be placed on a log
    axis and are left out.
    """
    d = np.abs(end - grid)
    order = np.argsort(d, kind="stable")
    d, values = d[order], density[order]
    keep = d > 0.0
    return d[keep], values[keep] * d[keep] * math.log(10.0)


def _legend_entries(handles: list[Any], names: list[str], mass: float, curves: _RhoCurves) -> None:
    """Legend entries of the posterior, its interval, the prior and the reference."""
    handles += [Line2D([], [], color=TEAL, linewidth=1.6),
                Patch(facecolor=TEAL, alpha=_SHADE_ALPHA, edgecolor="none"), Line2D([], [], **_PRIOR_STYLE)]
    names += ["Posterior", f"{_pct(mass)} credible interval", "Prior"]
    if curves.reference is not None:
        handles.append(Line2D([], [], **_REF_STYLE))
        names.append(curves.reference_label)


def _edge_notes(thr: list[float], rope_: tuple[float, float] | None, lo: float, hi: float,
                handles: list[Any], names: list[str], rope_visible: bool) -> dict[str, list[str]]:
    """Legend entries of the visible thresholds and ROPE; notes naming those outside [lo, hi] by side."""
    notes: dict[str, list[str]] = {"left": [], "right": []}
    hidden = [t for t in thr if not lo <= t <= hi]
    if len(hidden) < len(thr):
        handles.append(Line2D([], [], **_THR_STYLE))
        names.append("Threshold")
    for side, values in (("left", [t for t in hidden if t < lo]),
                         ("right", [t for t in hidden if t > hi])):
        if values:
            word = "threshold" if len(values) == 1 else "thresholds"
            notes[side].append(f"{word} {', '.join(_num(t) for t in values)}")
    if rope_ is not None:
        if rope_visible:
            handles.append(Patch(facecolor=MIST, edgecolor="none"))
            names.append("ROPE")
        else:
            side = "left" if rope_[1] <= lo else "right"
            notes[side].append(f"ROPE [{_num(rope_[0])}, {_num(rope_[1])}]")
    return notes


def _finish_rho_axes(ax: Any, handles: list[Any], names: list[str], notes: dict[str, list[str]]) -> None:
    """Edge notes (arrows point to where the hidden elements lie) and the legend above the axes."""
    if notes["left"]:
        ax.text(0.01, 0.98, "\u2190 " + "\n".join(notes["left"]), transform=ax.transAxes,
                ha="left", va="top", fontsize=6.5, color=_BROWN, linespacing=1.25)
    if notes["right"]:
        ax.text(0.99, 0.98, "\n".join(notes["right"]) + " \u2192", transform=ax.transAxes,
                ha="right", va="top", fontsize=6.5, color=_BROWN, linespacing=1.25)
    ax.legend(handles, names, loc="lower left", bbox_to_anchor=(0.0, 1.0), ncols=2, fontsize=7)



def _rho_view(grid: np.ndarray, posterior: np.ndarray, prior: np.ndarray,
              interval: tuple[float, float]) -> tuple[float, float]:
    """x range of :func:`rho_density`: where the posterior or prior matters."""
    plo, phi = _mass_span(grid, posterior, 0.999)
    plo, phi = min(plo, interval[0]), max(phi, interval[1])
    qlo, qhi = _mass_span(grid, prior, 0.99)
    ulo, uhi = min(plo, qlo), max(phi, qhi)
    width = phi - plo
    if width < 0.3 * (uhi - ulo):
        # narrow posterior: zoom on it; the prior shows as a near-flat line
        pad = max(0.6 * width, 0.05)
        lo, hi = plo - pad, phi + pad
    else:
        pad = 0.04 * (uhi - ulo)
        lo, hi = ulo - pad, uhi + pad
    lo = max(lo, -1.0, float(grid[0]))
    hi = min(hi, 1.0, float(grid[-1]))
    if hi <= lo:
        lo, hi = max(-1.0, float(grid[0])), min(1.0, float(grid[-1]))
    return lo, hi


@_styled
def rho_density(
    grid: ArrayLike,
    posterior: ArrayLike,
    *,
    prior: ArrayLike,
    interval: tuple[float, float],
    mass: float,
    thresholds: Sequence[float] = (),
    rope: tuple[float, float] | None = None,
    reference: ArrayLike | None = None,
    reference_label: str = "Exact reference",
) -> str:
    """Posterior and prior density of the correlation rho.

    Posterior as a teal line with the credible interval shaded beneath it,
    prior as an amber dashed line, an optional reference density (for example
    an exact or numerically integrated posterior) as an ink dotted line,
    thresholds as dashed amber lines and the ROPE as a shaded band.  The x
    range covers where the posterior or the prior has mass, clipped to
    [-1, 1]; when the posterior is much narrower than the prior the view
    zooms on the posterior, and thresholds or a ROPE outside the view are
    listed in a small note at that edge instead of being drawn.  Half width, 3.3 x 3.0 in.

    A posterior pressed against rho = 1 or -1 (its central 99.9% within 0.001
    of the end and spread over more than a decade of distance from it) is
    drawn against the distance ``1 - rho`` (or ``1 + rho``) on a log axis,
    with every density per decade of that distance, so that its shape shows
    instead of a spike at the end.

    Parameters
    ----------
    grid : array_like
        Strictly increasing rho values at which the densities are tabulated.
    posterior : array_like
        Posterior density on *grid*.
    prior : array_like
        Prior density on *grid*; ``+inf`` is allowed where the prior has an
        integrable singularity (a Beta shape below 1 at rho = +-1): the
        curve runs off the top there and the axis is scaled to finite values.
    interval : (float, float)
        Credible interval of rho.
    mass : float
        Probability mass of *interval*.
    thresholds : sequence of float, default ()
        Decision thresholds on rho.
    rope : (float, float) or None, default None
        Region of practical equivalence.
    reference : array_like or None, default None
        Reference density on *grid*.
    reference_label : str, default "Exact reference"
        Legend text of the reference curve (untrusted text).

    Returns
    -------
    str
        The SVG document.
    """
    g = _check_grid(grid)
    post = _check_density("posterior", g, posterior)
    pri = _check_density("prior", g, prior, allow_inf=True)
    ref = None if reference is None else _check_density("reference", g, reference)
    ival = _check_interval(interval)
    mass = _check_mass(mass)
    thr = _check_thresholds(thresholds)
    rope_ = _check_rope(rope)
    curves = _RhoCurves(post, pri, ref, _label(reference_label, 75.0, 7.0, max_lines=2))

    end = _near_end(g, post)
    if end:
        return _rho_density_near_end(end, g, curves, ival, mass, thr, rope_)

    # an integrable singularity of the prior (+inf at rho = +-1) neither sets the view nor the axis top
    lo, hi = _rho_view(g, post, np.where(np.isfinite(pri), pri, 0.0), ival)
    view = (g >= lo) & (g <= hi)
    top = _visible_top([post, pri, ref], view)

    fig = Figure(figsize=(HALF_WIDTH, 3.0), layout="constrained")
    ax = fig.add_subplot()
    handles: list[Any] = []
    names: list[str] = []

    rope_visible = rope_ is not None and rope_[1] > lo and rope_[0] < hi
    if rope_visible:
        ax.axvspan(*rope_, color=MIST, linewidth=0, zorder=0)
    _shade_interval(ax, g, post, ival, color=TEAL, alpha=_SHADE_ALPHA, zorder=1)
    ax.plot(g, post, color=TEAL, linewidth=1.6, zorder=4)
    # infinite prior values run off the top of the axes (clipped there), as the curve does
    ax.plot(g, np.where(np.isinf(pri), 4.0 * max(top, 1.0), pri), zorder=3, **_PRIOR_STYLE)
    if ref is not None:
        ax.plot(g, ref, zorder=5, **_REF_STYLE)
    _legend_entries(handles, names, mass, curves)

    thr_visible = [t for t in thr if lo <= t <= hi]
    for t in thr_visible:
        ax.axvline(t, zorder=2, **_THR_STYLE)
    notes = _edge_notes(thr, rope_, lo, hi, handles, names, rope_visible)

    headroom = 1.18 if notes["left"] or notes["right"] else 1.08
    ax.set_xlim(lo, hi)
    ax.set_ylim(0.0, headroom * top if top > 0 else 1.0)
    ax.xaxis.set_major_locator(MaxNLocator(5, steps=[1, 2, 2.5, 5, 10]))
    ax.yaxis.set_major_locator(MaxNLocator(4))
    ax.set_xlabel("Correlation ρ")
    ax.set_ylabel("Density")
    _finish_rho_axes(ax, handles, names, notes)
    return _to_svg(fig)


def _rho_density_near_end(end: float, g: np.ndarray, curves: _RhoCurves, ival: tuple[float, float],
                          mass: float, thr: list[float], rope_: tuple[float, float] | None) -> str:
    """:func:`rho_density` for a posterior pressed against rho = *end*: against distance from it, log scale.

    On a rho axis such a posterior is a spike at the end whose shape no tick can resolve; against
    ``log10(1 - |rho|)`` the same curve spreads over its decades.  The densities are per decade of the
    distance (``p(rho) d ln 10``), so areas are still probabilities.
    """
    d, post = _distance_density(g, curves.posterior, end)
    if d.size < 2:
        raise FigureError(f"the posterior lies closer to \u03c1 = {_num(end, 0)} than floating point can draw")
    _, pri = _distance_density(g, np.where(np.isfinite(curves.prior), curves.prior, np.nan), end)
    ref = None if curves.reference is None else _distance_density(g, curves.reference, end)[1]
    log_d = np.log10(d)
    ival_d = sorted(max(abs(end - v), float(d[0])) for v in ival)
    ulo, uhi = _mass_span(log_d, post, 0.999)
    ulo, uhi = min(ulo, math.log10(ival_d[0])), max(uhi, math.log10(ival_d[1]))
    pad = max(0.15 * (uhi - ulo), 0.3)
    ulo, uhi = max(ulo - pad, float(log_d[0])), min(uhi + pad, float(log_d[-1]))
    d_lo, d_hi = 10.0 ** ulo, 10.0 ** uhi
    view = (d >= d_lo) & (d <= d_hi)
    top = _visible_top([post, pri, ref], view)
    # the view in rho, for the thresholds and the ROPE: rho = end -+ distance
    lo, hi = sorted((end - math.copysign(d_lo, end), end - math.copysign(d_hi, end)))

    fig = Figure(figsize=(HALF_WIDTH, 3.0), layout="constrained")
    ax = fig.add_subplot()
    handles: list[Any] = []
    names: list[str] = []
    rope_visible = rope_ is not None and rope_[1] > lo and rope_[0] < hi
    if rope_ is not None and rope_visible:
        band = sorted(min(max(abs(end - v), d_lo), d_hi) for v in rope_)
        ax.axvspan(*band, color=MIST, linewidth=0, zorder=0)
    _shade_interval(ax, d, post, (ival_d[0], ival_d[1]), color=TEAL, alpha=_SHADE_ALPHA, zorder=1)
    ax.plot(d, post, color=TEAL, linewidth=1.6, zorder=4)
    ax.plot(d, pri, zorder=3, **_PRIOR_STYLE)
    if ref is not None:
        ax.plot(d, ref, zorder=5, **_REF_STYLE)
    _legend_entries(handles, names, mass, curves)
    for t in thr:
        if lo <= t <= hi:
            ax.axvline(abs(end - t), zorder=2, **_THR_STYLE)
    notes = _edge_notes(thr, rope_, lo, hi, handles, names, rope_visible)

    ax.set_xscale("log")
    # rho grows to the right: distance from +1 shrinks to the right, distance from -1 grows
    ax.set_xlim((d_hi, d_lo) if end > 0 else (d_lo, d_hi))
    headroom = 1.18 if notes["left"] or notes["right"] else 1.08
    ax.set_ylim(0.0, headroom * top if top > 0 else 1.0)
    ax.xaxis.set_major_locator(LogLocator(numticks=6))
    ax.yaxis.set_major_locator(MaxNLocator(4))
    distance = "1 \u2212 \u03c1" if end > 0 else "1 + \u03c1"
    ax.set_xlabel(f"Distance {distance} from \u03c1 = {_num(end, 0)} (log scale)")
    ax.set_ylabel(f"Density per decade of {distance}")
    _finish_rho_axes(ax, handles, names, notes)
    return _to_svg(fig)


# --------------------------------------------------------------------------
# Small multiples of parameter densities
# --------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class DensityPanel:
    """One panel of :func:`parameter_densities`.

    Parameters
    ----------
    title : str
        Panel title, e.g. "σ₁ (weight)" (untrusted text).
    grid : numpy.ndarray
        Strictly increasing parameter values, relative to *offset*.
    density : numpy.ndarray
        Posterior density on *grid*.
    interval : (float, float)
        Credible interval (absolute values), shaded under the curve and
        printed under the title.
    unit : str, default ""
        Unit shown as the x-axis label; empty for none.
    offset : float, default 0.0
        What *grid* is relative to.  When non-zero the axis shows values
        relative to it, its label says so ("μ₁ − 1,000,000,000 (kg)") and the
        interval under the title is printed on the same relative scale, with
        signs ("[+0.0012, +0.0043]").
    symbol : str, default ""
        Symbol of the parameter for that axis label, e.g. "μ₁"; "value" when
        empty (untrusted text).

    Notes
    -----
    Instances are immutable; equality is identity (arrays have no single
    truth value).
    """

    title: str
    grid: np.ndarray
    density: np.ndarray
    interval: tuple[float, float]
    unit: str = ""
    offset: float = 0.0
    symbol: str = ""

    def __post_init__(self) -> None:
        grid = _check_grid(self.grid)
        object.__setattr__(self, "grid", grid)
        object.__setattr__(self, "density", _check_density("density", grid, self.density))
        object.__setattr__(self, "interval", _check_interval(self.interval))
        if not math.isfinite(float(self.offset)):
            raise FigureError("offset must be a finite number")
        object.__setattr__(self, "offset", float(self.offset))


def _panel_offset_label(symbol: str, offset: float, unit: str) -> str:
    """Axis label of a panel drawn relative to *offset*: "μ₁ − 1,000,000,000 (kg)" (clean, not escaped).

    The offset is written with its shortest exact digits (Python's float repr) and thousands separators,
    so a reader can add it back to any tick.
    """
    unit_text = _clean(unit)
    return f"{_clean(symbol) or 'value'}{_offset_suffix(offset)}" + (f" ({unit_text})" if unit_text else "")


def _fit_ticks(ax: Any, lo: float, hi: float, max_pt: float, size: float = 7.5) -> None:
    """Two or three round x ticks on [lo, hi] whose labels fit in *max_pt* side by side.

    Labels are ours (typographic minus, the decimals the step needs), so their width is known before
    drawing; small relative values such as "\u22120.0004" are wide for a fifth of a page.  The finest
    step of 1, 2, 2.5 or 5 times a power of ten that fits is used, else the last (widest spaced) one.
    """
    base = 10.0 ** math.floor(math.log10((hi - lo) / 3.0))
    candidates: list[list[float]] = []
    for mult in (1.0, 2.0, 2.5, 5.0, 10.0, 20.0, 25.0, 50.0):
        step = base * mult
        first, last = math.ceil(lo / step - 1e-9), math.floor(hi / step + 1e-9)
        ticks = [k * step for k in range(first, last + 1)]
        # every other round tick is still round: it gives two ticks where three do not fit
        candidates += [t for t in (ticks, ticks[::2]) if 2 <= len(t) <= 3]
    chosen: tuple[list[float], list[str]] | None = None
    for ticks in candidates:
        spacing = ticks[1] - ticks[0]
        decimals = next((k for k in range(12) if all(abs(round(t, k) - t) <= 1e-6 * spacing for t in ticks)), 12)
        chosen = (ticks, [_num(t, decimals) for t in ticks])
        if sum(_text_width_pt(t, size) for t in chosen[1]) + 8.0 * (len(ticks) - 1) <= max_pt:
            break
    if chosen is None:  # no two round ticks fit the range: one at its middle
        middle = 0.5 * (lo + hi)
        chosen = ([middle], [_num(middle, _decimals(hi - lo))])
    ax.xaxis.set_major_locator(FixedLocator(chosen[0]))
    ax.xaxis.set_major_formatter(FixedFormatter(chosen[1]))


def _signed(value: float, decimals: int) -> str:
    """A difference from the offset, with its sign always shown."""
    text = _num(value, decimals)
    return text if text.startswith("\u2212") else "+" + text


@_styled
def parameter_densities(panels: Sequence[DensityPanel]) -> str:
    """Small multiples of marginal posterior densities, one panel each.

    Up to five panels share one row; more panels use rows of three.  Each panel
    shows the density (teal), its credible interval shaded and printed as
    "[lower, upper]" under the title, and the unit as x-axis label.  The y axis
    is hidden because density heights are not comparable across parameters.
    Full width; 1.9 in tall for one row, 1.75 in per row otherwise.

    Parameters
    ----------
    panels : sequence of DensityPanel
        Panels in reading order (typically μ₁, μ₂, σ₁, σ₂, ρ).

    Returns
    -------
    str
        The SVG document.
    """
    panels = list(panels)
    if not panels:
        raise FigureError("parameter_densities needs at least one panel")
    n = len(panels)
    ncols = n if n <= 5 else 3
    nrows = math.ceil(n / ncols)
    height = 1.9 if nrows == 1 else 1.75 * nrows
    fig = Figure(figsize=(FULL_WIDTH, height), layout="constrained")
    axes = fig.subplots(nrows, ncols, squeeze=False).ravel()
    title_pt = FULL_WIDTH * 72.0 / ncols - 14.0

    for ax, panel in zip(axes, panels, strict=False):
        g, d = panel.grid, panel.density
        # the interval on the grid's (relative) scale
        interval = (panel.interval[0] - panel.offset, panel.interval[1] - panel.offset)
        lo, hi = _mass_span(g, d, 0.999)
        lo, hi = min(lo, interval[0]), max(hi, interval[1])
        pad = 0.15 * (hi - lo) if hi > lo else 0.5 * (g[-1] - g[0])
        lo, hi = max(lo - pad, float(g[0])), min(hi + pad, float(g[-1]))
        view = (g >= lo) & (g <= hi)

        _shade_interval(ax, g, d, interval, color=TEAL, alpha=_SHADE_ALPHA, zorder=1)
        ax.plot(g, d, color=TEAL, linewidth=1.4, zorder=2)
        ax.set_xlim(lo, hi)
        top = float(d[view].max(initial=0.0))
        ax.set_ylim(0.0, 1.1 * top if top > 0 else 1.0)
        ax.yaxis.set_visible(False)
        ax.spines["left"].set_visible(False)
        ax.xaxis.set_major_locator(MaxNLocator(3, min_n_ticks=2))

        decimals = _decimals(interval[1] - interval[0])
        if panel.offset:
            span = f"[{_signed(interval[0], decimals)}, {_signed(interval[1], decimals)}]"
            # our own ticks and offset label, instead of matplotlib's corner offset text
            _fit_ticks(ax, lo, hi, title_pt)
        else:
            span = f"[{_num(interval[0], decimals)}, {_num(interval[1], decimals)}]"
        ax.set_title(_label(panel.title, title_pt, 8.5, max_lines=2), fontsize=8.5,
                     fontweight="bold", pad=13)
        ax.text(0.0, 1.02, span, transform=ax.transAxes, ha="left", va="bottom",
                fontsize=7, color=SLATE)
        if panel.offset:
            ax.set_xlabel(_label(_panel_offset_label(panel.symbol, panel.offset, panel.unit), title_pt, 7.5),
                          fontsize=7.5, color=SLATE)
        elif _clean(panel.unit):
            ax.set_xlabel(_label(panel.unit, title_pt, 7.5, max_lines=1), fontsize=7.5,
                          color=SLATE)
    for ax in axes[n:]:
        ax.set_visible(False)
    return _to_svg(fig)
