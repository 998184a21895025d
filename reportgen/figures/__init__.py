"""Static report figures rendered to SVG text.

Every public function here takes plain numbers or NumPy arrays and returns a
complete SVG document as a ``str``.  The functions are pure: they build a
:class:`matplotlib.figure.Figure` through the object-oriented API (pyplot is
never imported, so nothing is registered globally and batch runs do not leak
figures), render it and let it be garbage collected.

Layout of the package
---------------------
* :mod:`reportgen.figures.style` — palette, page widths, the rc settings and
  rendering helpers, text cleaning/wrapping/measuring and argument checks;
* :mod:`reportgen.figures.summary` — :func:`forest_plot`,
  :func:`correlation_matrix` and its :func:`correlation_cmap`;
* :mod:`reportgen.figures.pair` — :func:`scatter_with_ellipses`,
  :func:`ellipse_geometry`, :func:`rho_density`, :func:`parameter_densities`
  and :class:`DensityPanel`;
* :mod:`reportgen.figures.diagram` — :func:`model_diagram`;
* :mod:`reportgen.figures.checks` — :func:`mahalanobis_qq` (model checks);
* :mod:`reportgen.figures.groups` — :func:`group_forest` and its :class:`GroupRow`
  (rho of one pair by group, alone and partially pooled);
* :mod:`reportgen.figures.placeholder` — :func:`unavailable_figure`, the
  stand-in for a figure whose inputs were refused.

Inputs a figure cannot be drawn from raise :class:`FigureError` (a
``ValueError``), never anything broader, so that a caller can put a
placeholder in its place and carry on.

The public names are re-exported here; import them from ``reportgen.figures``.

Rendering rules shared by all figures
-------------------------------------
* Output is byte-for-byte deterministic for equal inputs: the matplotlib
  defaults are reset inside a private ``rc_context`` (a user's matplotlibrc
  cannot change the look), SVG ids are derived from the fixed hash salt
  ``"reportgen"`` and the date/creator metadata are omitted.
* Text stays text (``svg.fonttype = "none"``), measured in DejaVu Sans, the font
  that ships with matplotlib, and asking for the report face first: the PDF
  embeds the same DejaVu files for it, so the figures' words can be selected
  and searched, and the renderer draws a string instead of parsing its glyph
  outlines (on 21 pair pages the PDF took about 17% less CPU, and the SVGs
  were about half the size). A browser falls back to an installed DejaVu Sans.
* Labels may come from untrusted input.  They are drawn as plain text: ``$`` is
  escaped so mathtext is never triggered, control characters are dropped, and
  long labels are wrapped or shortened with an ellipsis.  Markup such as
  ``<script>`` cannot reach the SVG as markup: text appears only as the content
  of text elements, which matplotlib escapes.
* Dense scatter layers are rasterised (at :data:`RASTER_DPI`) once they have
  more than :data:`RASTER_THRESHOLD` points so that PDF rendering stays fast.
* Widths suit an A4 page with 18 mm margins: :data:`FULL_WIDTH` for full-width
  figures and :data:`HALF_WIDTH` for figures shown side by side.

The package changes ``matplotlib.rcParams`` only temporarily and is therefore,
like matplotlib itself, not safe to call from several threads at once.
"""

from __future__ import annotations

from reportgen.figures.checks import mahalanobis_qq
from reportgen.figures.diagram import model_diagram
from reportgen.figures.groups import GroupRow, group_forest
from reportgen.figures.pair import (
    DensityPanel,
    ellipse_geometry,
    parameter_densities,
    rho_density,
    scatter_with_ellipses,
)
from reportgen.figures.placeholder import unavailable_figure
from reportgen.figures.style import (
    ALERT,
    AMBER,
    FULL_WIDTH,
    HALF_WIDTH,
    INK,
    MIST,
    OK,
    RASTER_DPI,
    RASTER_THRESHOLD,
    SLATE,
    TEAL,
    FigureError,
    plain_text,
)
from reportgen.figures.summary import (
    MATRIX_VALUES_MAX,
    correlation_cmap,
    correlation_matrix,
    forest_plot,
    matrix_shows_values,
)

__all__ = [
    "ALERT",
    "AMBER",
    "FULL_WIDTH",
    "HALF_WIDTH",
    "INK",
    "MATRIX_VALUES_MAX",
    "MIST",
    "OK",
    "RASTER_DPI",
    "RASTER_THRESHOLD",
    "SLATE",
    "TEAL",
    "DensityPanel",
    "FigureError",
    "GroupRow",
    "correlation_cmap",
    "correlation_matrix",
    "ellipse_geometry",
    "forest_plot",
    "group_forest",
    "mahalanobis_qq",
    "matrix_shows_values",
    "model_diagram",
    "parameter_densities",
    "plain_text",
    "rho_density",
    "scatter_with_ellipses",
    "unavailable_figure",
]
