"""Static report figures rendered to SVG text.

Every public function here takes plain numbers or NumPy arrays and returns a
complete SVG document as a ``str``.  The functions are pure: they build a
:class:`matplotlib.figure.Figure` through the object-oriented API (pyplot is
never imported, so nothing is registered globally and batch runs do not leak
figures), render it and let it be garbage collected.

Rendering rules shared by all figures
-------------------------------------
* Output is byte-for-byte deterministic for equal inputs: the matplotlib
  defaults are reset inside a private ``rc_context`` (a user's matplotlibrc
  cannot change the look), SVG ids are derived from the fixed hash salt
  ``"reportgen"`` and the date/creator metadata are omitted.
* Text is stored as paths (``svg.fonttype = "path"``) in DejaVu Sans, the font
  that ships with matplotlib, so viewers and PDF converters need no fonts.
* Labels may come from untrusted input.  They are drawn as plain text: ``$`` is
  escaped so mathtext is never triggered, control characters are dropped, and
  long labels are wrapped or shortened with an ellipsis.  Markup such as
  ``<script>`` cannot reach the SVG as markup; text only appears as paths and in
  XML comments, which matplotlib escapes.
* Dense scatter layers are rasterised (at :data:`RASTER_DPI`) once they have
  more than :data:`RASTER_THRESHOLD` points so that PDF rendering stays fast.
* Widths suit an A4 page with 18 mm margins: :data:`FULL_WIDTH` for full-width
  figures and :data:`HALF_WIDTH` for figures shown side by side.

The module changes ``matplotlib.rcParams`` only temporarily and is therefore,
like matplotlib itself, not safe to call from several threads at once.
"""

from __future__ import annotations

import functools
import io
import math
import unicodedata
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any, ParamSpec

import matplotlib as mpl
import numpy as np
from matplotlib.backends.backend_svg import FigureCanvasSVG
from matplotlib.colors import LinearSegmentedColormap
from matplotlib.figure import Figure
from matplotlib.font_manager import FontProperties
from matplotlib.lines import Line2D
from matplotlib.patches import Ellipse, FancyArrowPatch, FancyBboxPatch, Patch, Rectangle
from matplotlib.textpath import text_to_path
from matplotlib.ticker import FixedLocator, MaxNLocator, MultipleLocator
from matplotlib.transforms import blended_transform_factory
from numpy.typing import ArrayLike
from scipy.stats import chi2

__all__ = [
    "ALERT",
    "AMBER",
    "FULL_WIDTH",
    "HALF_WIDTH",
    "INK",
    "MIST",
    "OK",
    "RASTER_DPI",
    "RASTER_THRESHOLD",
    "SLATE",
    "TEAL",
    "DensityPanel",
    "correlation_cmap",
    "correlation_matrix",
    "ellipse_geometry",
    "forest_plot",
    "model_diagram",
    "parameter_densities",
    "plain_text",
    "rho_density",
    "scatter_with_ellipses",
]

# --------------------------------------------------------------------------
# Palette and page geometry
# --------------------------------------------------------------------------

INK = "#1d2b36"
"""Text, axes and neutral outlines."""
TEAL = "#2a6f77"
"""Posterior quantities."""
AMBER = "#d08c3a"
"""Prior quantities and decision thresholds."""
SLATE = "#8a99a6"
"""Secondary elements: data points, ticks, notes."""
MIST = "#dfe6ea"
"""Bands (region of practical equivalence) and fills."""
ALERT = "#b3413a"
"""Status "fail"."""
OK = "#3c7d4f"
"""Status "pass"."""

_TEAL_LIGHT = "#6fa3a9"  # same lightness as AMBER, for the diverging map
_BROWN = "#8a5a24"  # same lightness as TEAL, negative end of the diverging map

FULL_WIDTH = 6.8
"""Width in inches of a full-width figure (A4 minus 2 x 18 mm is 6.85 in)."""
HALF_WIDTH = 3.3
"""Width in inches of a half-width figure (two side by side with a gutter)."""
RASTER_DPI = 150
"""Resolution of rasterised layers embedded in the SVG."""
RASTER_THRESHOLD = 300
"""Scatter layers with more points than this are rasterised."""

_DIAGRAM_HEIGHT = 2.6
_SHADE_ALPHA = 0.3  # credible-interval fill: clearly darker than the MIST band
_FONT = "DejaVu Sans"

_RC: dict[str, Any] = {
    "svg.hashsalt": "reportgen",
    "svg.fonttype": "path",
    "svg.image_inline": True,
    "font.family": [_FONT],
    "font.size": 8.0,
    "text.usetex": False,
    "text.color": INK,
    "axes.titlesize": 8.5,
    "axes.titlelocation": "left",
    "axes.titlepad": 4.0,
    "axes.labelsize": 8.0,
    "axes.labelcolor": INK,
    "axes.edgecolor": SLATE,
    "axes.linewidth": 0.7,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": False,
    "axes.axisbelow": True,
    "axes.unicode_minus": True,
    "axes.formatter.use_mathtext": False,
    "grid.color": MIST,
    "grid.linewidth": 0.6,
    "grid.linestyle": "-",
    "xtick.labelsize": 7.5,
    "ytick.labelsize": 7.5,
    "xtick.color": SLATE,
    "ytick.color": SLATE,
    "xtick.labelcolor": INK,
    "ytick.labelcolor": INK,
    "xtick.major.size": 3.0,
    "ytick.major.size": 3.0,
    "xtick.minor.size": 1.8,
    "ytick.minor.size": 1.8,
    "xtick.major.width": 0.7,
    "ytick.major.width": 0.7,
    "xtick.minor.width": 0.6,
    "ytick.minor.width": 0.6,
    "legend.fontsize": 7.5,
    "legend.frameon": False,
    "legend.handlelength": 1.8,
    "legend.handletextpad": 0.5,
    "legend.columnspacing": 1.3,
    "legend.borderaxespad": 0.2,
    "legend.borderpad": 0.2,
    "figure.facecolor": "white",
    "savefig.facecolor": "white",
    "figure.constrained_layout.h_pad": 0.04,
    "figure.constrained_layout.w_pad": 0.04,
    "lines.solid_capstyle": "butt",
    "lines.dash_capstyle": "butt",
}

_SVG_METADATA = {"Date": None, "Creator": None}
_MAX_CHARS = 300  # longer labels are cut before wrapping (keeps text fitting fast)

_P = ParamSpec("_P")


@contextmanager
def _style() -> Iterator[None]:
    """Temporarily reset matplotlib to its defaults plus the report style."""
    with mpl.rc_context():
        mpl.rcdefaults()
        mpl.rcParams.update(_RC)
        yield


def _styled(func: Callable[_P, str]) -> Callable[_P, str]:
    """Run a figure function inside :func:`_style`."""

    @functools.wraps(func)
    def wrapper(*args: _P.args, **kwargs: _P.kwargs) -> str:
        with _style():
            return func(*args, **kwargs)

    return wrapper


def _to_svg(fig: Figure) -> str:
    """Render *fig* to an SVG document (call inside :func:`_style`)."""
    FigureCanvasSVG(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="svg", dpi=RASTER_DPI, metadata=_SVG_METADATA)
    return buf.getvalue().decode("utf-8")


# --------------------------------------------------------------------------
# Text helpers
# --------------------------------------------------------------------------


def _clean(text: object) -> str:
    """Return *text* single-spaced, without control characters, shortened."""
    s = str(text).replace("\r\n", "\n").replace("\r", "\n").replace("\t", " ")
    s = "".join(ch for ch in s if ch == "\n" or unicodedata.category(ch)[0] != "C")
    s = "\n".join(" ".join(line.split()) for line in s.split("\n")).strip()
    return s if len(s) <= _MAX_CHARS else s[: _MAX_CHARS - 1].rstrip() + "…"


def _escape(text: str) -> str:
    """Escape ``$`` so matplotlib never switches to mathtext."""
    return text.replace("$", r"\$")


def plain_text(text: object) -> str:
    """Prepare an untrusted label for matplotlib.

    Control and format characters (including bidirectional overrides) are
    removed, runs of whitespace collapsed, text beyond 300 characters cut off
    with an ellipsis and every ``$`` escaped, so the result is always drawn
    literally (never parsed as mathtext, which could fail or change the
    meaning of the label).

    Parameters
    ----------
    text : object
        Any value; it is converted with ``str``.

    Returns
    -------
    str
        Text safe to pass to matplotlib as a label.
    """
    return _escape(_clean(text))


@functools.lru_cache(maxsize=16384)
def _unit_width(text: str, weight: str) -> float:
    """Width of one line of plain *text* set at 1 pt (widths scale linearly)."""
    prop = FontProperties(family=_FONT, size=100.0, weight=weight)
    width, _, _ = text_to_path.get_text_width_height_descent(text, prop, ismath=False)
    return float(width) / 100.0


def _text_width_pt(text: str, size: float, weight: str = "normal") -> float:
    """Width of one line of plain text in points."""
    return _unit_width(text, weight) * size if text else 0.0


def _ellipsize(line: str, max_pt: float, size: float, weight: str = "normal") -> str:
    """Shorten *line* with an ellipsis until it is at most *max_pt* wide."""
    if _text_width_pt(line, size, weight) <= max_pt:
        return line
    cut = len(line)
    while cut > 1 and _text_width_pt(line[:cut].rstrip() + "…", size, weight) > max_pt:
        cut -= 1
    return line[:cut].rstrip() + "…"


def _wrap_pt(text: str, max_pt: float, size: float, weight: str = "normal") -> list[str]:
    """Greedy word wrap of clean *text* to lines at most *max_pt* wide.

    Line widths are summed from cached word widths (DejaVu Sans applies no
    kerning across spaces), so wrapping long texts stays fast.  A 5% margin
    covers the slightly wider hinted advances of bitmap (Agg) rendering.
    """
    limit = 0.95 * max_pt / size  # in widths at 1 pt
    space = _unit_width(" ", weight)
    lines: list[str] = []
    for paragraph in text.split("\n"):
        current, used = "", 0.0
        for word in paragraph.split(" "):
            width = _unit_width(word, weight) if word else 0.0
            if current and used + space + width <= limit:
                current, used = f"{current} {word}", used + space + width
                continue
            if current:
                lines.append(current)
            if width <= limit:
                current, used = word, width
                continue
            # a single word that is too long is broken by characters
            current, used = "", 0.0
            for ch in word:
                ch_width = _unit_width(ch, weight)
                if current and used + ch_width > limit:
                    lines.append(current)
                    current, used = "", 0.0
                current, used = current + ch, used + ch_width
        lines.append(current)
    return lines


def _label(text: object, max_pt: float, size: float, max_lines: int = 2) -> str:
    """Clean, wrap (at most *max_lines*) and escape a label for drawing."""
    lines = _wrap_pt(_clean(text), max_pt, size)
    if len(lines) > max_lines:
        lines = lines[:max_lines]
        lines[-1] = _ellipsize(lines[-1] + "…", max_pt, size)
    return _escape("\n".join(lines))


def _fit_text(
    text: object,
    width_in: float,
    height_in: float,
    *,
    max_size: float = 8.5,
    min_size: float = 6.0,
    weight: str = "normal",
    linespacing: float = 1.2,
) -> tuple[str, float]:
    """Wrap and size *text* so that it fits a box of the given size.

    The largest font size from *max_size* down to *min_size* (steps of 0.5 pt)
    at which the word-wrapped text fits is used; if even *min_size* does not
    fit, the last fitting line ends with an ellipsis.  Returns the escaped text
    with newlines and the font size in points.
    """
    clean = _clean(text)
    max_pt, max_h = width_in * 72.0, height_in * 72.0
    size = max_size
    while True:
        lines = _wrap_pt(clean, max_pt, size, weight)
        if len(lines) * size * linespacing <= max_h or size <= min_size:
            break
        size = max(min_size, size - 0.5)
    keep = max(1, int(max_h // (size * linespacing)))
    if len(lines) > keep:
        lines = lines[:keep]
        lines[-1] = _ellipsize(lines[-1] + "…", max_pt, size, weight)
    return _escape("\n".join(lines)), size


def _num(value: float, decimals: int = 2) -> str:
    """Format a number with a typographic minus sign."""
    if not math.isfinite(value):
        return "n/a"
    s = f"{value:.{decimals}f}"
    if float(s) == 0.0:
        s = s.lstrip("-")
    return s.replace("-", "\u2212")


def _pct(mass: float) -> str:
    """Format a probability as a percentage (one decimal only when needed)."""
    p = mass * 100.0
    return f"{p:.0f}%" if abs(p - round(p)) < 1e-9 else f"{p:.1f}%"


def _decimals(span: float) -> int:
    """Decimals that show about two significant digits of *span*."""
    if not math.isfinite(span) or span <= 0:
        return 2
    return int(min(6, max(0, 1 - math.floor(math.log10(span)))))


# --------------------------------------------------------------------------
# Validation helpers
# --------------------------------------------------------------------------


def _vector(name: str, values: ArrayLike, n: int | None = None) -> np.ndarray:
    arr = np.asarray(values, dtype=float)
    if arr.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {arr.shape}")
    if n is not None and arr.size != n:
        raise ValueError(f"{name} has {arr.size} values, expected {n}")
    return arr


def _check_mass(mass: float, name: str = "mass") -> float:
    m = float(mass)
    if not 0.0 < m < 1.0:
        raise ValueError(f"{name} must lie strictly between 0 and 1, got {mass!r}")
    return m


def _check_thresholds(thresholds: Sequence[float]) -> list[float]:
    out = [float(t) for t in thresholds]
    if not all(math.isfinite(t) for t in out):
        raise ValueError("thresholds must be finite numbers")
    return sorted(set(out))


def _check_rope(rope: tuple[float, float] | None) -> tuple[float, float] | None:
    if rope is None:
        return None
    lo, hi = (float(v) for v in rope)
    if not (math.isfinite(lo) and math.isfinite(hi)) or lo >= hi:
        raise ValueError(f"rope must be a finite (low, high) pair with low < high, got {rope!r}")
    return lo, hi


def _check_interval(interval: tuple[float, float], name: str = "interval") -> tuple[float, float]:
    lo, hi = (float(v) for v in interval)
    if not (math.isfinite(lo) and math.isfinite(hi)) or lo > hi:
        raise ValueError(f"{name} must be a finite (low, high) pair with low <= high")
    return lo, hi


def _check_density(name: str, grid: np.ndarray, values: ArrayLike) -> np.ndarray:
    arr = _vector(name, values, grid.size)
    if not np.all(np.isfinite(arr)) or np.any(arr < 0):
        raise ValueError(f"{name} must contain finite, non-negative densities")
    return arr


def _check_grid(grid: ArrayLike) -> np.ndarray:
    g = _vector("grid", grid)
    if g.size < 2 or not np.all(np.isfinite(g)) or np.any(np.diff(g) <= 0):
        raise ValueError("grid must hold at least two finite, strictly increasing values")
    return g


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


def _shade_interval(ax: Any, grid: np.ndarray, density: np.ndarray,
                    interval: tuple[float, float], **kwargs: Any) -> None:
    """Fill the area under *density* between the interval end points."""
    lo, hi = max(interval[0], grid[0]), min(interval[1], grid[-1])
    if hi <= lo:
        return
    inner = grid[(grid > lo) & (grid < hi)]
    xs = np.concatenate([[lo], inner, [hi]])
    ax.fill_between(xs, 0.0, np.interp(xs, grid, density), linewidth=0, **kwargs)


# --------------------------------------------------------------------------
# 1. Forest plot
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
        raise ValueError("forest_plot needs at least one pair")
    med = _vector("medians", medians, n)
    low = _vector("lowers", lowers, n)
    upp = _vector("uppers", uppers, n)
    if len(statuses) != n:
        raise ValueError(f"statuses has {len(statuses)} values, expected {n}")
    status = [str(s).strip().lower() for s in statuses]
    sr = None if sample_r is None else _vector("sample_r", sample_r, n)
    thr = _check_thresholds(thresholds)
    rope_ = _check_rope(rope)
    mass = _check_mass(mass)
    both = np.isfinite(low) & np.isfinite(upp)
    if np.any(low[both] > upp[both]):
        raise ValueError("every lower bound must be <= its upper bound")

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
# 2. Scatter plot with probability ellipses
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
        raise ValueError("cov must be a finite 2 x 2 matrix")
    if not np.isclose(c[0, 1], c[1, 0], rtol=1e-8, atol=1e-12 * max(1.0, np.abs(c).max())):
        raise ValueError("cov must be symmetric")
    c = 0.5 * (c + c.T)
    mass = _check_mass(mass)
    values, vectors = np.linalg.eigh(c)
    if values[0] <= 0:
        raise ValueError("cov must be positive definite")
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


@_styled
def scatter_with_ellipses(
    x: ArrayLike,
    y: ArrayLike,
    *,
    mean: tuple[float, float],
    cov: ArrayLike,
    x_label: str,
    y_label: str,
    max_points: int = 4000,
    seed: int = 0,
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

    Parameters
    ----------
    x, y : array_like
        Observations, equal length.
    mean : (float, float)
        Mean of the fitted bivariate normal.
    cov : array_like, shape (2, 2)
        Covariance of the fitted bivariate normal.
    x_label, y_label : str
        Axis labels (untrusted text).
    max_points : int, default 4000
        Largest number of points drawn.
    seed : int, default 0
        Seed of the subsample.

    Returns
    -------
    str
        The SVG document.
    """
    xa = _vector("x", x)
    ya = _vector("y", y, xa.size)
    if max_points < 1:
        raise ValueError("max_points must be at least 1")
    mu = _vector("mean", mean, 2)
    if not np.all(np.isfinite(mu)):
        raise ValueError("mean must be finite")
    geoms = [(m, ellipse_geometry(cov, m)) for m in (0.5, 0.95)]
    c = np.asarray(cov, dtype=float)

    keep = np.isfinite(xa) & np.isfinite(ya)
    xa, ya = xa[keep], ya[keep]
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
    handles = []
    for m, (w, h, angle) in geoms:
        patch = Ellipse((mu[0], mu[1]), w, h, angle=angle, fill=False, edgecolor=TEAL,
                        zorder=3, **styles[m])
        ax.add_patch(patch)
        handles.append(Line2D([], [], color=TEAL, **styles[m]))
    ax.plot([mu[0]], [mu[1]], marker="+", color=TEAL, markersize=6, markeredgewidth=1.2,
            zorder=3)

    # limits: all data (not just the drawn subset) and the whole 95% ellipse
    q95 = float(chi2.ppf(0.95, df=2))
    ext = np.sqrt(q95 * np.diag(c))
    for axis_set, data, centre, half in ((ax.set_xlim, xa, mu[0], ext[0]),
                                         (ax.set_ylim, ya, mu[1], ext[1])):
        lo, hi = centre - half, centre + half
        if data.size:
            lo, hi = min(lo, float(data.min())), max(hi, float(data.max()))
        pad = 0.05 * (hi - lo) if hi > lo else 1.0
        axis_set(lo - pad, hi + pad)
    ax.xaxis.set_major_locator(MaxNLocator(5))
    ax.yaxis.set_major_locator(MaxNLocator(5))

    ax.set_xlabel(_label(x_label, 200.0, 8.0))
    ax.set_ylabel(_label(y_label, 180.0, 8.0))
    note = f"{drawn:,} of {total:,} points shown" if drawn < total else None
    legend = ax.legend(handles, ["50% ellipse", "95% ellipse"], loc="lower left",
                       bbox_to_anchor=(0.0, 1.0), ncols=2, title=note, alignment="left",
                       title_fontproperties={"size": 6.5})
    legend.get_title().set_color(SLATE)
    return _to_svg(fig)


# --------------------------------------------------------------------------
# 3. Posterior density of rho
# --------------------------------------------------------------------------


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

    Parameters
    ----------
    grid : array_like
        Strictly increasing rho values at which the densities are tabulated.
    posterior : array_like
        Posterior density on *grid*.
    prior : array_like
        Prior density on *grid*.
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
    pri = _check_density("prior", g, prior)
    ref = None if reference is None else _check_density("reference", g, reference)
    ival = _check_interval(interval)
    mass = _check_mass(mass)
    thr = _check_thresholds(thresholds)
    rope_ = _check_rope(rope)

    lo, hi = _rho_view(g, post, pri, ival)
    view = (g >= lo) & (g <= hi)

    fig = Figure(figsize=(HALF_WIDTH, 3.0), layout="constrained")
    ax = fig.add_subplot()
    handles: list[Any] = []
    names: list[str] = []

    rope_visible = rope_ is not None and rope_[1] > lo and rope_[0] < hi
    if rope_visible:
        ax.axvspan(*rope_, color=MIST, linewidth=0, zorder=0)
    _shade_interval(ax, g, post, ival, color=TEAL, alpha=_SHADE_ALPHA, zorder=1)
    ax.plot(g, post, color=TEAL, linewidth=1.6, zorder=4)
    handles += [Line2D([], [], color=TEAL, linewidth=1.6),
                Patch(facecolor=TEAL, alpha=_SHADE_ALPHA, edgecolor="none")]
    names += ["Posterior", f"{_pct(mass)} credible interval"]
    prior_style = {"color": AMBER, "linewidth": 1.3, "linestyle": (0, (4, 2))}
    ax.plot(g, pri, zorder=3, **prior_style)
    handles.append(Line2D([], [], **prior_style))
    names.append("Prior")
    if ref is not None:
        ref_style = {"color": INK, "linewidth": 1.3, "linestyle": (0, (1, 1.6))}
        ax.plot(g, ref, zorder=5, **ref_style)
        handles.append(Line2D([], [], **ref_style))
        names.append(_label(reference_label, 75.0, 7.0, max_lines=2))

    # elements outside the (possibly zoomed) view are listed at the edge
    notes: dict[str, list[str]] = {"left": [], "right": []}
    thr_style = {"color": AMBER, "linewidth": 0.9, "linestyle": (0, (2.5, 2))}
    hidden = [t for t in thr if not lo <= t <= hi]
    for t in thr:
        if lo <= t <= hi:
            ax.axvline(t, zorder=2, **thr_style)
    if len(hidden) < len(thr):
        handles.append(Line2D([], [], **thr_style))
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

    ymax = max(float(post[view].max(initial=0.0)), float(pri[view].max(initial=0.0)),
               0.0 if ref is None else float(ref[view].max(initial=0.0)))
    headroom = 1.18 if notes["left"] or notes["right"] else 1.08
    ax.set_xlim(lo, hi)
    ax.set_ylim(0.0, headroom * ymax if ymax > 0 else 1.0)
    ax.xaxis.set_major_locator(MaxNLocator(5, steps=[1, 2, 2.5, 5, 10]))
    ax.yaxis.set_major_locator(MaxNLocator(4))
    ax.set_xlabel("Correlation ρ")
    ax.set_ylabel("Density")

    if notes["left"]:
        ax.text(0.01, 0.98, "\u2190 " + "\n".join(notes["left"]), transform=ax.transAxes,
                ha="left", va="top", fontsize=6.5, color=_BROWN, linespacing=1.25)
    if notes["right"]:
        ax.text(0.99, 0.98, "\n".join(notes["right"]) + " \u2192", transform=ax.transAxes,
                ha="right", va="top", fontsize=6.5, color=_BROWN, linespacing=1.25)

    ax.legend(handles, names, loc="lower left", bbox_to_anchor=(0.0, 1.0), ncols=2,
              fontsize=7)
    return _to_svg(fig)


# --------------------------------------------------------------------------
# 4. Small multiples of parameter densities
# --------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class DensityPanel:
    """One panel of :func:`parameter_densities`.

    Parameters
    ----------
    title : str
        Panel title, e.g. "σ₁ (weight)" (untrusted text).
    grid : numpy.ndarray
        Strictly increasing parameter values.
    density : numpy.ndarray
        Posterior density on *grid*.
    interval : (float, float)
        Credible interval, shaded under the curve and printed under the title.
    unit : str, default ""
        Unit shown as the x-axis label; empty for none.

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

    def __post_init__(self) -> None:
        grid = _check_grid(self.grid)
        object.__setattr__(self, "grid", grid)
        object.__setattr__(self, "density", _check_density("density", grid, self.density))
        object.__setattr__(self, "interval", _check_interval(self.interval))


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
        raise ValueError("parameter_densities needs at least one panel")
    n = len(panels)
    ncols = n if n <= 5 else 3
    nrows = math.ceil(n / ncols)
    height = 1.9 if nrows == 1 else 1.75 * nrows
    fig = Figure(figsize=(FULL_WIDTH, height), layout="constrained")
    axes = fig.subplots(nrows, ncols, squeeze=False).ravel()
    title_pt = FULL_WIDTH * 72.0 / ncols - 14.0

    for ax, panel in zip(axes, panels, strict=False):
        g, d = panel.grid, panel.density
        lo, hi = _mass_span(g, d, 0.999)
        lo, hi = min(lo, panel.interval[0]), max(hi, panel.interval[1])
        pad = 0.15 * (hi - lo) if hi > lo else 0.5 * (g[-1] - g[0])
        lo, hi = max(lo - pad, float(g[0])), min(hi + pad, float(g[-1]))
        view = (g >= lo) & (g <= hi)

        _shade_interval(ax, g, d, panel.interval, color=TEAL, alpha=_SHADE_ALPHA, zorder=1)
        ax.plot(g, d, color=TEAL, linewidth=1.4, zorder=2)
        ax.set_xlim(lo, hi)
        top = float(d[view].max(initial=0.0))
        ax.set_ylim(0.0, 1.1 * top if top > 0 else 1.0)
        ax.yaxis.set_visible(False)
        ax.spines["left"].set_visible(False)
        ax.xaxis.set_major_locator(MaxNLocator(3, min_n_ticks=2))

        decimals = _decimals(panel.interval[1] - panel.interval[0])
        span = f"[{_num(panel.interval[0], decimals)}, {_num(panel.interval[1], decimals)}]"
        ax.set_title(_label(panel.title, title_pt, 8.5, max_lines=2), fontsize=8.5,
                     fontweight="bold", pad=13)
        ax.text(0.0, 1.02, span, transform=ax.transAxes, ha="left", va="bottom",
                fontsize=7, color=SLATE)
        if _clean(panel.unit):
            ax.set_xlabel(_label(panel.unit, title_pt, 7.5, max_lines=1), fontsize=7.5,
                          color=SLATE)
    for ax in axes[n:]:
        ax.set_visible(False)
    return _to_svg(fig)


# --------------------------------------------------------------------------
# 5. Correlation matrix
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
    The diagonal is not drawn.  Square-ish, at most 6.8 in wide.

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
        raise ValueError("correlation_matrix needs at least two variables")
    med = np.asarray(medians, dtype=float)
    exc = np.asarray(excludes_zero, dtype=bool)
    if med.shape != (k, k) or exc.shape != (k, k):
        raise ValueError(f"medians and excludes_zero must have shape ({k}, {k})")

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
    lower = np.tril(np.ones((m, m), dtype=bool))

    label_size = 7.5 if m <= 10 else 6.5
    label_pt = 95.0
    col_labels = [_label(s, label_pt, label_size, max_lines=1) for s in labels[:-1]]
    row_labels = [_label(s, label_pt, label_size, max_lines=1) for s in labels[1:]]

    # Size the figure from the measured label extents so that the cells come
    # out (nearly) square without a fixed aspect ratio, which constrained
    # layout handles poorly.
    def longest(texts: list[str]) -> float:
        return max(_text_width_pt(t.replace("\\$", "$"), label_size) for t in texts) / 72.0

    left = longest(row_labels) + 0.2
    bottom = longest(col_labels) * math.sin(math.radians(40)) + 0.35
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


# --------------------------------------------------------------------------
# 6. Model diagram
# --------------------------------------------------------------------------


_BOX_PAD_X, _BOX_PAD_Y = 0.16, 0.1


def _box(ax: Any, centre: tuple[float, float], size: tuple[float, float], text: object, *,
         edge: str, face: str = "white", weight: str = "normal", max_size: float = 8.5
         ) -> None:
    """Draw a rounded box with *text* fitted inside (coordinates in inches)."""
    (cx, cy), (w, h) = centre, size
    ax.add_patch(FancyBboxPatch((cx - w / 2, cy - h / 2), w, h,
                                boxstyle="round,pad=0,rounding_size=0.06",
                                facecolor=face, edgecolor=edge, linewidth=1.0, zorder=2))
    fitted, fs = _fit_text(text, w - _BOX_PAD_X, h - _BOX_PAD_Y, max_size=max_size,
                           weight=weight)
    ax.text(cx, cy, fitted, ha="center", va="center", fontsize=fs, fontweight=weight,
            multialignment="center", linespacing=1.2, color=INK, zorder=3)


def _arrow(ax: Any, start: tuple[float, float], end: tuple[float, float]) -> None:
    ax.add_patch(FancyArrowPatch(start, end, arrowstyle="-|>", mutation_scale=9,
                                 color=SLATE, linewidth=1.0, shrinkA=0, shrinkB=1,
                                 zorder=1))


@_styled
def model_diagram(
    *,
    rho_prior: str,
    mean_prior: str,
    sd_prior: str,
    likelihood: str = "(x_i, y_i) ~ bivariate normal",
    parameters: str = "(μ₁, μ₂, σ₁, σ₂, ρ)",
    observed: str = "n pairs (x_i, y_i)",
) -> str:
    """Dependency graph of the bivariate normal model.

    Three prior boxes (amber outline) at the top feed, through arrows, a
    parameter box (teal outline), which feeds the shaded observed-data box;
    the likelihood is written beside that last arrow.  Tier names are printed
    in the left margin.  All texts are word-wrapped and, if necessary, set in
    a smaller font (8.5 pt down to 6 pt) to fit their boxes; text that does not
    fit even then ends with an ellipsis.  Full width, 6.8 x 2.6 in.

    Parameters
    ----------
    rho_prior : str
        Prior of rho, e.g. "ρ ~ Uniform(−1, 1)".
    mean_prior : str
        Prior of the means, e.g. "μ₁, μ₂ ~ Normal(0, 10)".
    sd_prior : str
        Prior of the standard deviations, e.g. "σ₁, σ₂ ~ Half-normal(5)".
    likelihood : str, default "(x_i, y_i) ~ bivariate normal"
        Likelihood text beside the arrow to the data.
    parameters : str, default "(μ₁, μ₂, σ₁, σ₂, ρ)"
        Text of the parameter box.
    observed : str, default "n pairs (x_i, y_i)"
        Text of the observed-data box.

    Returns
    -------
    str
        The SVG document.
    """
    w_in, h_in = FULL_WIDTH, _DIAGRAM_HEIGHT
    fig = Figure(figsize=(w_in, h_in))
    ax = fig.add_axes((0.0, 0.0, 1.0, 1.0))
    ax.set_xlim(0.0, w_in)
    ax.set_ylim(0.0, h_in)
    ax.set_axis_off()

    margin = 1.0  # left column with tier names
    prior_w, prior_h, gap = 1.8, 0.56, 0.12
    centre_x = margin + (w_in - margin - 0.05) / 2
    prior_y, param_y, data_y = 2.18, 1.3, 0.36
    param_w, param_h = 2.3, 0.42
    data_w, data_h = 2.3, 0.44

    priors = [mean_prior, sd_prior, rho_prior]
    xs = [centre_x + k * (prior_w + gap) for k in (-1, 0, 1)]
    # the three prior boxes share one font size, the largest at which all fit
    prior_size = min(_fit_text(t, prior_w - _BOX_PAD_X, prior_h - _BOX_PAD_Y)[1]
                     for t in priors)
    for x, text in zip(xs, priors, strict=True):
        _box(ax, (x, prior_y), (prior_w, prior_h), text, edge=AMBER, max_size=prior_size)
    _box(ax, (centre_x, param_y), (param_w, param_h), parameters, edge=TEAL,
         weight="bold")
    _box(ax, (centre_x, data_y), (data_w, data_h), observed, edge=INK, face=MIST)

    top_of_param = param_y + param_h / 2
    for k, x in enumerate(xs):
        end_x = centre_x + (k - 1) * 0.55
        _arrow(ax, (x, prior_y - prior_h / 2), (end_x, top_of_param))
    _arrow(ax, (centre_x, param_y - param_h / 2), (centre_x, data_y + data_h / 2))

    text_left = centre_x + 0.14
    gap_h = (param_y - param_h / 2) - (data_y + data_h / 2)
    fitted, fs = _fit_text(likelihood, w_in - text_left - 0.1, gap_h, max_size=8.0)
    ax.text(text_left, (param_y - param_h / 2 + data_y + data_h / 2) / 2, fitted,
            ha="left", va="center", fontsize=fs, color=INK,
            linespacing=1.2)

    for y, name in ((prior_y, "Priors"), (param_y, "Parameters"), (data_y, "Observed data")):
        ax.text(0.08, y, name, ha="left", va="center", fontsize=7.5, color=SLATE)
    return _to_svg(fig)
