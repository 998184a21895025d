"""Where the report's shipped assets live: the template folder and the font files. Both the renderer and
the run record (which hashes them) need the same answer, so it is given once, here."""

from __future__ import annotations

from pathlib import Path

REPORT_FACE = "Report Sans"
"""The family name the PDF renderer gives the files below; the figures' text asks for it first."""

# The report's own face, taken from matplotlib's bundled DejaVu files so every machine embeds the same bytes.
FONT_FILES = {
    "normal": "DejaVuSans.ttf",
    "bold": "DejaVuSans-Bold.ttf",
    "italic": "DejaVuSans-Oblique.ttf",
}


def shipped_templates() -> Path:
    package_dir = Path(__file__).resolve().parent
    shipped = package_dir / "templates"
    if not shipped.is_dir():  # running from a source checkout
        shipped = package_dir.parent / "templates"
    return shipped


def font_files() -> dict[str, Path]:
    """The shipped font files by style (normal, bold, italic)."""
    import matplotlib

    font_dir = Path(matplotlib.get_data_path()) / "fonts" / "ttf"
    return {style: (font_dir / filename).resolve() for style, filename in FONT_FILES.items()}
