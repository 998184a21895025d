"""Shared style of the report figures: palette, sizes, rendering and text helpers.

Everything the figure modules have in common lives here: the colours and page
widths (public, re-exported by :mod:`reportgen.figures`), the private
``rc_context`` that makes output deterministic (:func:`_style`,
:func:`_styled`, :func:`_to_svg`), the cleaning, wrapping and measuring of
untrusted label text, number formatting and the argument checks.
"""

from __future__ import annotations

import functools
import io
import math
import unicodedata
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from typing import Any, ParamSpec

import matplotlib as mpl
import numpy as np
from matplotlib.figure import Figure
from matplotlib.font_manager import FontProperties
from matplotlib.textpath import text_to_path
from numpy.typing import ArrayLike

from reportgen.assets import REPORT_FACE
from reportgen.figures.flatten import flattened

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
    "FigureError",
    "plain_text",
]



class FigureError(ValueError):
    """Inputs a figure cannot be drawn from (wrong shape, not finite, not increasing, ...).

    A subclass of :class:`ValueError`, so callers that expect plain argument
    errors keep working; the report catches this type per figure and shows a
    placeholder instead, so one figure that cannot be drawn never stops a run.
    The message is one short sentence that can be shown to a reader.
    """


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

_SHADE_ALPHA = 0.3  # credible-interval fill: clearly darker than the MIST band
_FONT = "DejaVu Sans"
_MATPLOTLIB_FAMILY = f"font-family: '{_FONT}'"
_REPORT_FAMILIES = f"font-family: '{REPORT_FACE}', '{_FONT}', sans-serif"

_RC: dict[str, Any] = {
    "svg.hashsalt": "reportgen",
    "svg.fonttype": "none",
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
    buf = io.BytesIO()
    fig.savefig(buf, format="svg", dpi=RASTER_DPI, metadata=_SVG_METADATA)
    return _with_report_face(flattened(buf.getvalue().decode("utf-8")))


def _with_report_face(svg: str) -> str:
    """Name the report's own face first in every text style, the system's DejaVu Sans after it.

    matplotlib names the face it measured with (DejaVu Sans, its bundled copy). The PDF renderer knows the
    same files as the report face, so the figures' text is embedded from the bytes the body text uses; a
    browser showing the HTML falls back to an installed DejaVu Sans, then to its own sans-serif. Each
    string is placed by its anchor (start, middle, end), so a fallback face shifts no alignment.
    """
    return svg.replace(_MATPLOTLIB_FAMILY, _REPORT_FAMILIES)


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


def _display_offset(values: np.ndarray) -> float:
    """A round number to draw *values* relative to; 0 when absolute ticks read well.

    Values whose median is more than 1000 times their range share four or more
    leading digits, where tick labels stop being readable (matplotlib's own
    offset threshold, common practice).  The offset is the median rounded to
    one power of ten above the range, so the relative ticks stay small.
    """
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return 0.0
    centre, spread = float(np.median(finite)), float(np.ptp(finite))
    if spread <= 0.0 or abs(centre) <= 1e3 * spread:
        return 0.0
    return float(round(centre, -math.ceil(math.log10(spread))))


def _offset_suffix(offset: float) -> str:
    """The label suffix " − 1,000,000,000" of an axis drawn relative to *offset* (shortest exact digits)."""
    digits = format(abs(offset), ",")
    if digits.endswith(".0"):
        digits = digits[:-2]
    sign = "\u2212" if offset > 0 else "+"
    return f" {sign} {digits}"


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
        raise FigureError(f"{name} must be one-dimensional, got shape {arr.shape}")
    if n is not None and arr.size != n:
        raise FigureError(f"{name} has {arr.size} values, expected {n}")
    return arr


def _check_mass(mass: float, name: str = "mass") -> float:
    m = float(mass)
    if not 0.0 < m < 1.0:
        raise FigureError(f"{name} must lie strictly between 0 and 1, got {mass!r}")
    return m


def _check_thresholds(thresholds: Sequence[float]) -> list[float]:
    out = [float(t) for t in thresholds]
    if not all(math.isfinite(t) for t in out):
        raise FigureError("thresholds must be finite numbers")
    return sorted(set(out))


def _check_rope(rope: tuple[float, float] | None) -> tuple[float, float] | None:
    if rope is None:
        return None
    lo, hi = (float(v) for v in rope)
    if not (math.isfinite(lo) and math.isfinite(hi)) or lo >= hi:
        raise FigureError(f"rope must be a finite (low, high) pair with low < high, got {rope!r}")
    return lo, hi


def _check_interval(interval: tuple[float, float], name: str = "interval") -> tuple[float, float]:
    lo, hi = (float(v) for v in interval)
    if not (math.isfinite(lo) and math.isfinite(hi)) or lo > hi:
        raise FigureError(f"{name} must be a finite (low, high) pair with low <= high")
    return lo, hi


def _check_density(name: str, grid: np.ndarray, values: ArrayLike, *, allow_inf: bool = False) -> np.ndarray:
    """Densities on *grid*; with *allow_inf*, ``+inf`` marks an integrable singularity (drawn off the top)."""
    arr = _vector(name, values, grid.size)
    usable = ~np.isnan(arr) & (arr != -np.inf) if allow_inf else np.isfinite(arr)
    if not np.all(usable) or np.any(arr < 0):
        rule = "non-negative densities (+inf allowed)" if allow_inf else "finite, non-negative densities"
        raise FigureError(f"{name} must contain {rule}")
    return arr


def _check_grid(grid: ArrayLike) -> np.ndarray:
    g = _vector("grid", grid)
    if g.size < 2 or not np.all(np.isfinite(g)) or np.any(np.diff(g) <= 0):
        raise FigureError("grid must hold at least two finite, strictly increasing values")
    return g


def row_positions(values: ArrayLike | None, n: int, name: str) -> np.ndarray:
    """Validated integer positions of rows to mark (indices into arrays of length ``n``)."""
    if values is None:
        return np.empty(0, dtype=np.intp)
    raw = np.asarray(values)
    if raw.size == 0:
        return np.empty(0, dtype=np.intp)
    if raw.ndim != 1 or not np.issubdtype(raw.dtype, np.integer):
        raise FigureError(f"{name} must be a one-dimensional array of integer positions")
    if raw.min() < 0 or raw.max() >= n:
        raise FigureError(f"{name} positions must lie in [0, {n - 1}]")
    return raw.astype(np.intp)
