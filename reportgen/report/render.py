"""Rendering: the context into HTML with Jinja, and the HTML into a PDF with WeasyPrint.

The templates only place what the context holds. User text (titles, labels, column
names) is untrusted: Jinja autoescapes it, it is never used as a template, and
the PDF renderer is given a URL fetcher that serves only inline images and the
report's own font files, so no data or label can make it read a file or reach
the network.
"""

from __future__ import annotations

import base64
import datetime as dt
import logging
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from jinja2 import ChoiceLoader, Environment, FileSystemLoader, StrictUndefined, select_autoescape

from reportgen.errors import ReportAssetError
from reportgen.spec import Spec

LOGGER = logging.getLogger(__name__)
MAX_LOGO_BYTES = 2 * 1024 * 1024
IMAGE_SIGNATURES = {
    b"\x89PNG\r\n\x1a\n": "image/png",
    b"\xff\xd8\xff": "image/jpeg",
}
FONT_FILES = {
    "normal": "DejaVuSans.ttf",
    "bold": "DejaVuSans-Bold.ttf",
    "italic": "DejaVuSans-Oblique.ttf",
}


def template_folders(user_folder: Path | None) -> list[Path]:
    """The user's template folder (if any) first, then the shipped templates."""
    package_dir = Path(__file__).resolve().parent.parent
    shipped = package_dir / "templates"
    if not shipped.is_dir():  # running from a source checkout
        shipped = package_dir.parent / "templates"
    folders = [shipped]
    if user_folder is not None:
        if not user_folder.is_dir():
            raise ReportAssetError(f"{user_folder}: report.templates must name a folder of templates")
        folders.insert(0, user_folder)
    return folders


def environment(user_folder: Path | None = None) -> Environment:
    loaders = [FileSystemLoader(str(folder)) for folder in template_folders(user_folder)]
    env = Environment(
        loader=ChoiceLoader(loaders),
        autoescape=select_autoescape(["html", "j2", "htm"], default_for_string=True, default=True),
        undefined=StrictUndefined,
        keep_trailing_newline=True,
    )
    return env


def svg_data_uri(svg: str) -> str:
    return "data:image/svg+xml;base64," + base64.b64encode(svg.encode("utf-8")).decode("ascii")


def logo_data_uri(spec: Spec) -> str:
    """The logo, checked and inlined: the renderer never opens the user's path itself."""
    if not spec.document.report.logo:
        return ""
    path = spec.resolve_input(spec.document.report.logo, "report.logo")
    where = f"{path} (report.logo)"
    if not path.is_file():
        raise ReportAssetError(f"{where}: logo file not found; fix the path or remove report.logo")
    size = path.stat().st_size
    if size > MAX_LOGO_BYTES:
        raise ReportAssetError(f"{where}: logo is {size / 1e6:.1f} MB; use an image under 2 MB")
    head = path.read_bytes()[:16]
    for signature, mime in IMAGE_SIGNATURES.items():
        if head.startswith(signature):
            return f"data:{mime};base64," + base64.b64encode(path.read_bytes()).decode("ascii")
    raise ReportAssetError(f"{where}: not a PNG or JPEG image; convert the logo to PNG")


@dataclass(frozen=True)
class RenderedReport:
    html: str
    pdf: bytes
    refused_urls: tuple[str, ...] = field(default=())


def render_html(context: dict[str, Any], user_templates: Path | None = None) -> str:
    """The report's HTML; a broken user template is the user's error, reported in one line."""
    from jinja2 import TemplateError

    try:
        return environment(user_templates).get_template("report.html.j2").render(**context)
    except (TemplateError, RecursionError) as exc:
        if user_templates is None:
            raise
        detail = " ".join(str(exc).split())[:160] or type(exc).__name__
        raise ReportAssetError(f"{user_templates}: a template in report.templates failed ({detail}); "
                               "fix it or remove it to use the shipped one") from None


def _font_css() -> tuple[str, dict[str, Path]]:
    import matplotlib

    font_dir = Path(matplotlib.get_data_path()) / "fonts" / "ttf"
    allowed: dict[str, Path] = {}
    rules = []
    for style, filename in FONT_FILES.items():
        path = (font_dir / filename).resolve()
        url = path.as_uri()
        allowed[url] = path
        weight = "bold" if style == "bold" else "normal"
        font_style = "italic" if style == "italic" else "normal"
        rules.append(f'@font-face {{ font-family: "Report Sans"; src: url("{url}"); '
                     f"font-weight: {weight}; font-style: {font_style}; }}")
    return "\n".join(rules), allowed


def render_pdf(html: str, report_date: str) -> tuple[bytes, tuple[str, ...]]:
    """PDF bytes, and the URLs the renderer asked for and was refused."""
    import weasyprint
    from weasyprint.text.fonts import FontConfiguration

    font_css, allowed_files = _font_css()
    refused: list[str] = []

    class ReportOnlyFetcher(weasyprint.URLFetcher):
        """Serves inline images and the shipped fonts; refuses everything else."""

        def fetch(self, url: str, headers: Any = None) -> Any:
            if url.startswith(("data:image/svg+xml", "data:image/png", "data:image/jpeg")):
                return super().fetch(url, headers)
            if url in allowed_files:
                return weasyprint.urls.URLFetcherResponse(
                    url, body=allowed_files[url].read_bytes(), headers={"Content-Type": "font/ttf"})
            refused.append(url[:200])
            LOGGER.warning("refused a resource request from the report: %s", url[:200])
            raise ValueError(f"reportgen refuses to fetch {url[:80]}")

    fetcher = ReportOnlyFetcher(allowed_protocols=("data", "file"), allow_redirects=False, timeout=1)
    font_config = FontConfiguration()
    stylesheet = weasyprint.CSS(string=font_css, font_config=font_config, url_fetcher=fetcher)
    document = weasyprint.HTML(string=html, base_url=None, url_fetcher=fetcher)
    # Font subsets carry a "modified" timestamp; fontTools takes it from SOURCE_DATE_EPOCH when set,
    # so pinning it to the report's date makes the PDF bytes repeatable.
    epoch = dt.datetime.combine(dt.date.fromisoformat(report_date), dt.time(), dt.UTC).timestamp()
    saved = os.environ.get("SOURCE_DATE_EPOCH")
    os.environ["SOURCE_DATE_EPOCH"] = str(int(epoch))
    try:
        pdf = document.write_pdf(stylesheets=[stylesheet], font_config=font_config,
                                 pdf_identifier=b"reportgen-" + report_date.encode())
    finally:
        if saved is None:
            os.environ.pop("SOURCE_DATE_EPOCH", None)
        else:
            os.environ["SOURCE_DATE_EPOCH"] = saved
    return pdf, tuple(refused)
