"""The model diagram: priors, parameters and observed data as a dependency graph."""

from __future__ import annotations

from typing import Any

from matplotlib.figure import Figure
from matplotlib.patches import FancyArrowPatch, FancyBboxPatch

from reportgen.figures.style import (
    AMBER,
    FULL_WIDTH,
    INK,
    MIST,
    SLATE,
    TEAL,
    _fit_text,
    _styled,
    _to_svg,
)

__all__ = ["model_diagram"]

# --------------------------------------------------------------------------
# Model diagram
# --------------------------------------------------------------------------


_DIAGRAM_HEIGHT = 2.6
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
