"""The stand-in for a figure that could not be drawn: a framed note that says so, and why."""

from __future__ import annotations

import math

from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import FancyBboxPatch

from reportgen.figures.style import (
    HALF_WIDTH,
    INK,
    MIST,
    SLATE,
    FigureError,
    _fit_text,
    _styled,
    _to_svg,
)

__all__ = ["unavailable_figure"]

_FRAME = (0.03, 0.05, 0.94, 0.90)  # left, bottom, width, height in figure fractions


@_styled
def unavailable_figure(reason: str, *, width: float = HALF_WIDTH, height: float = 3.0) -> str:
    """A placeholder of the given size for a figure that could not be drawn.

    A dashed slate frame on a pale fill holds the heading "This figure could
    not be drawn" and, beneath it, *reason* (untrusted text: cleaned, wrapped
    and shortened with an ellipsis to fit the frame).  The report puts one in
    place of each figure whose inputs its function refused, so a single
    unusual pair never stops a run.

    Parameters
    ----------
    reason : str
        Why, in one or two sentences (e.g. "The density of ρ could not be
        drawn: grid must hold at least two finite, strictly increasing values").
    width, height : float, defaults HALF_WIDTH and 3.0
        Size in inches: that of the figure it stands in for.

    Returns
    -------
    str
        The SVG document.
    """
    if not (math.isfinite(width) and math.isfinite(height)) or width <= 0.5 or height <= 0.5:
        raise FigureError("width and height must be finite and more than 0.5 in")
    fig = Figure(figsize=(width, height))
    left, bottom, frame_w, frame_h = _FRAME
    fig.patches.append(FancyBboxPatch(
        (left, bottom), frame_w, frame_h, boxstyle="round,pad=0,rounding_size=0.015",
        transform=fig.transFigure, facecolor="#f5f8f9", edgecolor=SLATE, linewidth=0.8,
        linestyle=(0, (4, 2.5)), zorder=0))
    # the mist rule under the heading echoes the report's section rules
    heading_y = bottom + frame_h - 0.16 / height
    fig.text(left + 0.12 / width, heading_y, "This figure could not be drawn", ha="left", va="center",
             fontsize=8.5, fontweight="bold", color=INK)
    rule_y = heading_y - 0.16 / height
    fig.add_artist(Line2D([left + 0.12 / width, left + frame_w - 0.12 / width], [rule_y, rule_y],
                          transform=fig.transFigure, color=MIST, linewidth=1.0))
    text_w = frame_w * width - 0.24
    text_h = max(rule_y - bottom, 0.1) * height - 0.2
    text, size = _fit_text(reason, text_w, text_h, max_size=7.5, min_size=6.0)
    fig.text(left + 0.12 / width, rule_y - 0.1 / height, text, ha="left", va="top", fontsize=size,
             color=INK, linespacing=1.2)
    return _to_svg(fig)

