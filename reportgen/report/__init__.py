"""Stage 6: lay the results out as a self-contained HTML page and a PDF.

``context`` computes everything the templates show (figures, numbers,
sentences) as plain strings and lists; ``selection`` chooses the pairs that
get a page of their own and ranks those that meet a rule; ``checks`` does so
for the model checks and the prior sensitivity; ``render`` turns the context into HTML with
Jinja and into a PDF with WeasyPrint, behind a URL fetcher that serves only
inline images and the shipped fonts.
"""

from reportgen.report.context import build_context
from reportgen.report.render import (
    RenderedReport,
    environment,
    logo_data_uri,
    render_document,
    render_html,
    render_pdf,
    svg_data_uri,
    template_folders,
)

__all__ = ["RenderedReport", "build_context", "environment", "logo_data_uri", "render_document", "render_html",
           "render_pdf", "svg_data_uri", "template_folders"]
