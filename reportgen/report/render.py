"""Rendering: the context into HTML with Jinja, and the HTML into a PDF with WeasyPrint.

The templates only place what the context holds. User text (titles, labels, column
names) is untrusted: Jinja autoescapes it, it is never used as a template, and
the PDF renderer is given a URL fetcher that serves only inline images and the
report's own font files, so no data or label can make it read a file or reach
the network.

Templates themselves may come from someone else (``report.templates``), so every
template, shipped or not, renders in Jinja's immutable sandbox with no global
helpers, and the loader serves only plain files inside the template folders,
reached without a symbolic link. The logo is decoded with Pillow and its pixel
count bounded before it is inlined.
"""

from __future__ import annotations

import base64
import datetime as dt
import io
import logging
import os
import stat
import traceback
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from jinja2 import (
    Environment,
    FileSystemLoader,
    StrictUndefined,
    TemplateError,
    TemplateNotFound,
    TemplateSyntaxError,
    UndefinedError,
    nodes,
    select_autoescape,
)
from jinja2.exceptions import SecurityError
from jinja2.sandbox import ImmutableSandboxedEnvironment

from reportgen import figures
from reportgen.assets import REPORT_FACE, font_files, shipped_templates
from reportgen.errors import ReportAssetError
from reportgen.spec import Spec

LOGGER = logging.getLogger(__name__)
MAX_LOGO_BYTES = 2 * 1024 * 1024
# A logo is shown 16 mm high; 25 million pixels is far beyond any real one and bounds the decoded size (~100 MB).
MAX_LOGO_PIXELS = 25_000_000
IMAGE_SIGNATURES = {
    b"\x89PNG\r\n\x1a\n": "image/png",
    b"\xff\xd8\xff": "image/jpeg",
}
# The only decoders Pillow may try; what it decoded, by Pillow's name (its JPEG decoder reports the
# multi-picture JPEG many cameras write as MPO).
LOGO_DECODERS = ("PNG", "JPEG")
LOGO_FORMATS = {"PNG": "image/png", "JPEG": "image/jpeg", "MPO": "image/jpeg"}
TEMPLATE_SUFFIXES = (".j2", ".css")
MAX_TEMPLATE_BYTES = 1024 * 1024
MAX_CHECKED_TEMPLATES = 500  # report.templates naming a huge folder must not make the early check walk it all
# Attribute names the sandbox refuses on some objects (besides every name starting with "_"); refused early.
INTERNAL_ATTRIBUTES = frozenset({"mro", "gi_frame", "gi_code", "gi_yieldfrom", "cr_frame", "cr_code", "cr_await",
                                 "ag_frame", "ag_code", "ag_await", "tb_frame", "tb_next", "f_back", "f_builtins",
                                 "f_code", "f_globals", "f_locals"})


class TemplateRefused(TemplateError):
    """The loader will not serve this name: a link, a path leaving the folders, or not a plain text file.

    A ``TemplateError`` but not ``TemplateNotFound``, so the search stops here instead of
    quietly falling back to the shipped template of the same name.
    """

    def __init__(self, name: str, reason: str) -> None:
        super().__init__(f"{name!r} {reason}")
        self.name = name
        self.reason = reason


class ConfinedLoader(FileSystemLoader):
    """Serves only regular UTF-8 files inside its folders, reached without a symbolic link on the way."""

    def get_source(self, environment: Environment, template: str) -> tuple[str, str, Callable[[], bool]]:
        pieces = template.replace("\\", "/").split("/")
        if not template.isprintable() or template.startswith(("/", "\\")) or ".." in pieces:
            raise TemplateRefused(template, "is not a plain name relative to the template folders")
        pieces = [piece for piece in pieces if piece not in ("", ".")]
        for folder in self.searchpath:
            path = _confined_file(folder, pieces, template)
            if path is not None:
                # Every render builds a fresh environment, so a template read once stays as read.
                return _read_template(path, template), path, lambda: True
        raise TemplateNotFound(template)


def _confined_file(folder: str, pieces: list[str], name: str) -> str | None:
    """``folder/pieces`` when it is a regular file there, None when absent; refused when a link is on the way."""
    path, mode = folder, 0
    for piece in pieces:
        path = os.path.join(path, piece)
        try:
            mode = os.lstat(path).st_mode
        except (FileNotFoundError, NotADirectoryError):
            return None
        except OSError as exc:
            raise TemplateRefused(name, f"cannot be read ({exc.strerror})") from None
        if stat.S_ISLNK(mode):
            raise TemplateRefused(name, "is, or lies in, a symbolic link")
    if not stat.S_ISREG(mode):
        raise TemplateRefused(name, "is not a regular file")
    root = os.path.realpath(folder)
    if os.path.commonpath([root, os.path.realpath(path)]) != root:  # belt and braces after the link check
        raise TemplateRefused(name, "resolves outside the template folders")
    return path


def _read_template(path: str, name: str) -> str:
    # O_NOFOLLOW: a file swapped for a link after the check above is still not followed.
    try:
        with os.fdopen(os.open(path, os.O_RDONLY | os.O_NOFOLLOW | os.O_NONBLOCK), "rb") as handle:
            regular = stat.S_ISREG(os.fstat(handle.fileno()).st_mode)
            data = handle.read(MAX_TEMPLATE_BYTES + 1) if regular else b""
    except OSError as exc:
        raise TemplateRefused(name, f"cannot be read ({exc.strerror})") from None
    if not regular or len(data) > MAX_TEMPLATE_BYTES:
        raise TemplateRefused(name, "is not a regular file" if not regular else "is larger than 1 MB")
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError:
        raise TemplateRefused(name, "is not UTF-8 text") from None


class ReportSandbox(ImmutableSandboxedEnvironment):
    """Jinja's sandbox, where a refused attribute is an error at once.

    The stock sandbox returns an undefined value, which ``{% set x = obj.__init__ %}``
    could hold without complaint; raising names the attribute and the template line.
    """

    # Powers and products are checked before they are computed: 9 ** 999999999 or 'x' * 10 ** 12 would
    # otherwise hang the run or exhaust memory from inside a template.
    intercepted_binops = frozenset({"**", "*"})
    MAX_EXPONENT = 1000
    MAX_REPEAT = 1_000_000

    def unsafe_undefined(self, obj: Any, attribute: str) -> Any:
        raise SecurityError(f"attribute {attribute!r} of a value of type {type(obj).__name__!r}")

    def call_binop(self, context: Any, operator: str, left: Any, right: Any) -> Any:
        if operator == "**" and isinstance(right, int) and abs(right) > self.MAX_EXPONENT:
            raise SecurityError(f"a power with the exponent {right}, above {self.MAX_EXPONENT}")
        if operator == "*":
            for value, count in ((left, right), (right, left)):
                if isinstance(value, str | list | tuple) and isinstance(count, int) and (
                        count * max(len(value), 1) > self.MAX_REPEAT):
                    raise SecurityError(f"a repetition to more than {self.MAX_REPEAT:,} items")
        return super().call_binop(context, operator, left, right)


def template_folders(user_folder: Path | None) -> list[Path]:
    """The user's template folder (if any) first, then the shipped templates."""
    folders = [shipped_templates()]
    if user_folder is not None:
        if not user_folder.is_dir():
            raise ReportAssetError(f"{user_folder}: report.templates must name a folder of templates")
        folders.insert(0, user_folder)
    return folders


def environment(user_folder: Path | None = None) -> Environment:
    """One sandboxed environment for the user's templates and the shipped ones."""
    env = ReportSandbox(
        loader=ConfinedLoader([str(folder) for folder in template_folders(user_folder)]),
        autoescape=select_autoescape(["html", "j2", "htm"], default_for_string=True, default=True),
        undefined=StrictUndefined,
        keep_trailing_newline=True,
    )
    # range, dict, lipsum, cycler, joiner, namespace: no shipped template uses them, and their
    # functions' globals were the way out of an unsandboxed environment.
    env.globals.clear()
    return env


def check_templates(user_folder: Path) -> None:
    """Refuse, before any fit, a user template that is a link, does not parse, spells out an attribute
    templates may not reach, or includes a template the loader will not serve."""
    env = environment(user_folder)
    for name in _user_template_names(user_folder):
        try:
            source, filename, _ = env.loader.get_source(env, name)  # type: ignore[union-attr]
            tree = env.parse(source, name, filename)
        except TemplateRefused as exc:
            raise ReportAssetError(f"{user_folder / name}: this template {exc.reason}; report.templates may hold "
                                   "only plain UTF-8 files of up to 1 MB, so fix or remove it") from None
        except TemplateSyntaxError as exc:
            raise template_error(exc, user_folder) from None
        for node, attribute in _attribute_names(tree):
            if attribute.startswith("_") or attribute in INTERNAL_ATTRIBUTES:
                raise template_error(SecurityError(f"attribute {attribute!r}"), user_folder, (filename, node.lineno))
        for node in tree.find_all((nodes.Include, nodes.Import, nodes.FromImport, nodes.Extends)):
            if not isinstance(node.template, nodes.Const) or not isinstance(node.template.value, str):
                continue  # a computed name is checked by the loader when the report is rendered
            try:
                env.get_template(node.template.value)
            except TemplateNotFound as exc:
                if not getattr(node, "ignore_missing", False):
                    raise template_error(exc, user_folder, (filename, node.lineno)) from None
            except TemplateError as exc:
                raise template_error(exc, user_folder, (filename, node.lineno)) from None


def _user_template_names(folder: Path) -> list[str]:
    """Template names in ``folder`` and its real subfolders; a template that is a link or not a file is refused."""
    names: list[str] = []
    for root, subfolders, files in os.walk(folder):  # does not enter linked subfolders
        subfolders.sort()
        for file in sorted(file for file in files if file.endswith(TEMPLATE_SUFFIXES)):
            path = Path(root, file)
            kind = "a symbolic link" if path.is_symlink() else "" if path.is_file() else "not a regular file"
            if kind:
                raise ReportAssetError(f"{path}: is {kind}; report.templates may hold only plain files inside "
                                       "its folder, so put the template itself there")
            names.append(path.relative_to(folder).as_posix())
            if len(names) >= MAX_CHECKED_TEMPLATES:
                return names
    return names


def _attribute_names(tree: nodes.Template) -> list[tuple[nodes.Node, str]]:
    """Every attribute name the template spells out: ``a.b``, ``a['b']``, ``|attr('b')``, ``attribute='b.c'``."""
    found: list[tuple[nodes.Node, str]] = []
    for node in tree.find_all((nodes.Getattr, nodes.Getitem, nodes.Filter)):
        spelled: list[Any] = []
        if isinstance(node, nodes.Getattr):
            spelled.append(node.attr)
        elif isinstance(node, nodes.Getitem) and isinstance(node.arg, nodes.Const):
            spelled.append(node.arg.value)
        elif isinstance(node, nodes.Filter):
            if node.name == "attr" and node.args and isinstance(node.args[0], nodes.Const):
                spelled.append(node.args[0].value)
            spelled += [kw.value.value for kw in node.kwargs
                        if kw.key == "attribute" and isinstance(kw.value, nodes.Const)]
        found += [(node, piece) for text in spelled if isinstance(text, str) for piece in text.split(".")]
    return found


def _location(exc: BaseException, folders: list[Path]) -> tuple[str, int] | None:
    """The template file and line an error came from: Jinja puts template lines into the traceback."""
    if isinstance(exc, TemplateSyntaxError) and exc.filename:
        return exc.filename, exc.lineno
    roots = tuple(os.path.realpath(folder) + os.sep for folder in folders)
    inside = [(frame.filename, frame.lineno or 0) for frame in traceback.extract_tb(exc.__traceback__)
              if not frame.filename.endswith(".py") and os.path.realpath(frame.filename).startswith(roots)]
    return inside[-1] if inside else None


def _is_users(exc: BaseException, user_folder: Path) -> bool:
    """Whether a user template caused ``exc``: any template error, or a Python error raised in one of theirs."""
    return isinstance(exc, TemplateError | RecursionError) or _location(exc, [user_folder]) is not None


def template_error(exc: BaseException, user_folder: Path, place: tuple[str, int] | None = None) -> ReportAssetError:
    """The one-line message for an error a user template caused, naming the template file and line."""
    place = place or _location(exc, template_folders(user_folder))
    where = f"{place[0]}, line {place[1]}" if place else f"{user_folder} (report.templates)"
    detail = " ".join(str(getattr(exc, "message", None) or exc).split())[:160] or type(exc).__name__
    if isinstance(exc, SecurityError):
        return ReportAssetError(f"{where}: the template tries to reach {detail}, which templates may not; "
                                "use only the report's values, as the shipped templates do")
    if isinstance(exc, TemplateRefused):
        return ReportAssetError(f"{where}: the template includes {exc.name!r}, which {exc.reason}; templates "
                                "may not read links or files outside the template folders, so put the file "
                                f"itself in {user_folder}")
    if isinstance(exc, TemplateNotFound):
        return ReportAssetError(f"{where}: the template includes {exc.name!r}, which is neither in "
                                f"{user_folder} nor among the shipped templates; fix the name")
    if isinstance(exc, UndefinedError):
        return ReportAssetError(f"{where}: the template asks for something the report does not give it "
                                f"({detail}); templates may not reach anything but the report's values, "
                                "so fix the name or remove the template")
    if isinstance(exc, TemplateSyntaxError):
        return ReportAssetError(f"{where}: the template does not parse ({detail}); "
                                "fix it or remove it to use the shipped one")
    if isinstance(exc, RecursionError):
        return ReportAssetError(f"{where}: the template includes or calls itself without end; fix it")
    return ReportAssetError(f"{where}: a template in report.templates failed ({type(exc).__name__}: {detail}); "
                            "fix it or remove it to use the shipped one")


def svg_data_uri(svg: str) -> str:
    return "data:image/svg+xml;base64," + base64.b64encode(svg.encode("utf-8")).decode("ascii")


def logo_data_uri(spec: Spec) -> str:
    """The logo, decoded and checked, inlined as its original bytes: the renderer never opens the path itself."""
    if not spec.document.report.logo:
        return ""
    try:
        path = spec.resolve_input(spec.document.report.logo, "report.logo")
    except (RuntimeError, OSError, ValueError) as exc:  # Python 3.11's Path.resolve: RuntimeError on a link loop
        what = "is a loop of symbolic links" if isinstance(exc, RuntimeError) else "cannot be followed"
        raise ReportAssetError(f"{spec.base_dir / spec.document.report.logo} (report.logo): the path {what}; "
                               "point report.logo at the image file itself") from None
    where = f"{path} (report.logo)"
    if not path.is_file():
        raise ReportAssetError(f"{where}: logo file not found; fix the path or remove report.logo")
    size = path.stat().st_size
    if size > MAX_LOGO_BYTES:
        raise ReportAssetError(f"{where}: logo is {size / 1e6:.1f} MB; use an image under 2 MB")
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise ReportAssetError(f"{where}: the logo cannot be read ({exc.strerror}); check its permissions") from None
    return f"data:{_logo_type(data, where)};base64," + base64.b64encode(data).decode("ascii")


def _logo_type(data: bytes, where: str) -> str:
    """The MIME type of a logo that Pillow decodes whole as the PNG or JPEG its first bytes say it is."""
    from PIL import Image

    claimed = next((mime for signature, mime in IMAGE_SIGNATURES.items() if data.startswith(signature)), None)
    if claimed is None:
        raise ReportAssetError(f"{where}: not a PNG or JPEG image; convert the logo to PNG")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", Image.DecompressionBombWarning)
            with Image.open(io.BytesIO(data), formats=LOGO_DECODERS) as image:  # reads the header only
                decoded, (width, height) = image.format, image.size
                if width * height <= MAX_LOGO_PIXELS:
                    image.verify()  # structure and checksums; decoding needs the image opened again
            if width * height <= MAX_LOGO_PIXELS:
                with Image.open(io.BytesIO(data), formats=LOGO_DECODERS) as image:
                    image.load()
    except (Image.DecompressionBombError, Image.DecompressionBombWarning):  # Pillow's own, larger bound
        decoded, width, height = claimed, MAX_LOGO_PIXELS, 2
    except Image.UnidentifiedImageError:
        raise ReportAssetError(f"{where}: not a PNG or JPEG image (its first bytes say so, the rest does not); "
                               "export the logo again as PNG") from None
    except Exception as exc:  # Pillow raises many kinds (OSError, SyntaxError, ValueError, EOFError, zlib.error)
        detail = " ".join(str(exc).split())[:100] or type(exc).__name__
        raise ReportAssetError(f"{where}: not a PNG or JPEG image that decodes ({detail}); "
                               "export the logo again as PNG") from None
    if width * height > MAX_LOGO_PIXELS:
        raise ReportAssetError(f"{where}: the logo has more than {MAX_LOGO_PIXELS // 1_000_000} million pixels; "
                               "use a smaller image")
    if LOGO_FORMATS.get(decoded or "") != claimed:
        raise ReportAssetError(f"{where}: not a PNG or JPEG image (its contents are {decoded}); "
                               "convert the logo to PNG")
    return claimed


@dataclass(frozen=True)
class RenderedReport:
    html: str
    pdf: bytes
    refused_urls: tuple[str, ...] = field(default=())


def render_html(context: dict[str, Any], user_templates: Path | None = None) -> str:
    """The report's HTML; an error a user template causes is the user's, reported in one line."""
    return render_document("report.html.j2", context, user_templates)


def render_document(template: str, context: dict[str, Any], user_templates: Path | None = None) -> str:
    """Any of the shipped documents (run, change or history report) as HTML, from its template's name.

    The same sandbox, loader and error wording as the run report, so a user's template folder can
    restyle every document and a fault in one of its templates is reported in one line.
    """
    env = environment(user_templates)
    try:
        return env.get_template(template).render(**context)
    except Exception as exc:
        if user_templates is None or not _is_users(exc, user_templates):
            raise  # an error in the shipped templates alone is a bug in reportgen
        raise template_error(exc, user_templates) from None


def _font_css() -> tuple[str, dict[str, Path]]:
    allowed: dict[str, Path] = {}
    rules = []
    for style, path in font_files().items():
        url = path.as_uri()
        allowed[url] = path
        weight = "bold" if style == "bold" else "normal"
        font_style = "italic" if style == "italic" else "normal"
        rules.append(f'@font-face {{ font-family: "{REPORT_FACE}"; src: url("{url}"); '
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


def drawn_figure(draw: Callable[[], str], what: str, notes: list[str], *, width: float, height: float) -> str:
    """The figure *draw* makes, as a data URI; a placeholder of its size (and a note) when it cannot be drawn.

    Only the figures' own error is caught: anything else is a bug, and must not be hidden.
    """
    try:
        return svg_data_uri(draw())
    except figures.FigureError as exc:
        reason = f"{what} could not be drawn: {exc}"
        notes.append(reason)
        return svg_data_uri(figures.unavailable_figure(reason, width=width, height=height))
