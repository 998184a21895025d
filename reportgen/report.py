"""Stage 6: lay the results out as a self-contained HTML page and a PDF.

Everything the templates show is computed here or earlier, as plain strings
and lists; the templates only place them. User text (titles, labels, column
names) is untrusted: Jinja autoescapes it, it is never used as a template, and
the PDF renderer is given a URL fetcher that serves only inline images and the
report's own font files, so no data or label can make it read a file or reach
the network.
"""

from __future__ import annotations

import base64
import datetime as dt
import json
import logging
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from jinja2 import ChoiceLoader, Environment, FileSystemLoader, StrictUndefined, select_autoescape

from reportgen import figures, interpret, narrative
from reportgen.data import PairData
from reportgen.errors import ReportAssetError
from reportgen.results import PairResult, RunResults
from reportgen.spec import Spec

LOGGER = logging.getLogger(__name__)
MAX_LOGO_BYTES = 2 * 1024 * 1024
IMAGE_SIGNATURES = {
    b"\x89PNG\r\n\x1a\n": "image/png",
    b"\xff\xd8\xff": "image/jpeg",
}
PARAMETER_TITLES = {
    "mu_x": ("\u03bc\u2081", "mean of {x}"),
    "mu_y": ("\u03bc\u2082", "mean of {y}"),
    "sigma_x": ("\u03c3\u2081", "SD of {x}"),
    "sigma_y": ("\u03c3\u2082", "SD of {y}"),
    "rho": ("\u03c1", "correlation"),
}
FONT_FILES = {
    "normal": "DejaVuSans.ttf",
    "bold": "DejaVuSans-Bold.ttf",
    "italic": "DejaVuSans-Oblique.ttf",
}


def template_folders(user_folder: Path | None) -> list[Path]:
    """The user's template folder (if any) first, then the shipped templates."""
    package_dir = Path(__file__).resolve().parent
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


def _unit_suffix(unit: str) -> str:
    return f" ({unit})" if unit else ""


def pair_figures(result: PairResult, data: PairData, spec: Spec) -> dict[str, str]:
    document = spec.document
    thresholds = sorted({t for rule in document.rules for t in rule.thresholds})
    rope = (document.rope.lower, document.rope.upper)
    rho = result.rho
    scatter = figures.scatter_with_ellipses(
        data.x, data.y, mean=result.mean_vector, cov=result.covariance,
        x_label=result.x_label + _unit_suffix(result.x_unit),
        y_label=result.y_label + _unit_suffix(result.y_unit),
        seed=result.seed if result.seed is not None else 0,  # only picks which points a large scatter shows
    )
    prior_on_grid = np.interp(rho.grid, result.prior_grid, result.prior_density)
    check = result.crosscheck
    overlay = check.applies and result.engine == "mcmc"
    reference = np.interp(rho.grid, check.grid, check.density, left=0.0, right=0.0) if overlay else None
    density = figures.rho_density(
        rho.grid, rho.density, prior=prior_on_grid, interval=(rho.lower, rho.upper),
        mass=document.summary.credible_mass, thresholds=thresholds, rope=rope,
        reference=reference, reference_label="Exact (Jeffreys priors)",
    )
    panels = []
    for name, summary in result.parameters.items():
        symbol, meaning = PARAMETER_TITLES[name]
        unit = {"mu_x": result.x_unit, "sigma_x": result.x_unit,
                "mu_y": result.y_unit, "sigma_y": result.y_unit}.get(name, "")
        title = f"{symbol}: {meaning.format(x=result.x_label, y=result.y_label)}"
        panels.append(figures.DensityPanel(title=title, grid=summary.grid, density=summary.density,
                                           interval=(summary.lower, summary.upper), unit=unit))
    return {
        "scatter": svg_data_uri(scatter),
        "rho_density": svg_data_uri(density),
        "parameters": svg_data_uri(figures.parameter_densities(panels)) if len(panels) > 1 else "",
    }


def matrix_figures(results: RunResults, spec: Spec) -> list[dict[str, str]]:
    out = []
    for pair_set in spec.document.pair_sets:
        columns = list(pair_set.columns)
        k = len(columns)
        medians = np.full((k, k), np.nan)
        excludes = np.zeros((k, k), dtype=bool)
        for result in results.pairs:
            if result.pair_set != pair_set.name:
                continue
            i, j = columns.index(result.x), columns.index(result.y)
            i, j = max(i, j), min(i, j)
            medians[i, j] = result.rho.median
            excludes[i, j] = result.interval_excludes_zero
        labels = [spec.display_name(c) for c in columns]
        svg = figures.correlation_matrix(labels, medians, excludes)
        out.append({"name": pair_set.name, "figure": svg_data_uri(svg)})
    return out


def _fmt(value: float, digits: int = 3) -> str:
    return interpret.format_number(value, digits)


def _rho(value: float) -> str:
    return interpret.format_rho(value)


def pair_context(result: PairResult, figs: dict[str, str], mass: float) -> dict[str, Any]:
    rows = []
    diagnostics = {p.name: p for p in result.diagnosis.parameters}
    for name, summary in result.parameters.items():
        symbol, meaning = PARAMETER_TITLES[name]
        unit = {"mu_x": result.x_unit, "sigma_x": result.x_unit,
                "mu_y": result.y_unit, "sigma_y": result.y_unit}.get(name, "")
        d = diagnostics.get(name)
        rows.append({
            "symbol": symbol,
            "meaning": meaning.format(x=result.x_label, y=result.y_label),
            "unit": unit,
            "mean": _fmt(summary.mean, 4),
            "sd": _fmt(summary.sd, 3),
            "median": _fmt(summary.median, 4),
            "interval": f"{_fmt(summary.lower, 4)} to {_fmt(summary.upper, 4)}",
            "rhat": f"{d.rhat:.3f}" if d else "\u2014",
            "ess_bulk": f"{d.ess_bulk:,.0f}" if d else "\u2014",
            "ess_tail": f"{d.ess_tail:,.0f}" if d else "\u2014",
            "mcse_mean": _fmt(d.mcse_mean, 2) if d else "0 (exact)",
        })
    ref = result.reference
    diag = result.diagnosis
    return {
        "anchor": _anchor(result.key),
        "title": result.title,
        "key": result.key,
        "engine": result.engine,
        "x_label": result.x_label,
        "y_label": result.y_label,
        "n": f"{result.n:,}",
        "n_dropped": f"{result.n_dropped:,}",
        "has_dropped": result.n_dropped > 0,
        "median": _rho(result.rho.median),
        "interval": f"{_rho(result.rho.lower)} to {_rho(result.rho.upper)}",
        "hdi": f"{_rho(result.hdi[0])} to {_rho(result.hdi[1])}",
        "p_positive": interpret.format_probability(result.p_positive),
        "rope_probability": interpret.format_probability(result.rope_probability),
        "paragraph": result.paragraph,
        "rope_sentence": result.rope_sentence,
        "rules": [{
            "name": rule.name,
            "statement": rule.statement,
            "probability": interpret.format_probability(rule.probability),
            "required": interpret.format_required(rule.required),
            "verdict": rule.verdict,
            "sentence": rule.sentence,
        } for rule in result.rules],
        "parameter_rows": rows,
        "reference": {
            "r": f"{ref.r:.3f}".replace("-", "\u2212"),
            "interval": f"{_rho(ref.ci_lower)} to {_rho(ref.ci_upper)}",
            "p_value": "< 0.0001" if ref.p_value < 1e-4 else f"{ref.p_value:.4f}",
            "mass": f"{mass:.0%}",
        },
        "status": result.status,
        "bf10": interpret.format_bayes_factor(result.crosscheck.log_bf10),
        "evidence_sentence": result.evidence_sentence,
        "savage_dickey": ("cannot be estimated here, because the posterior has almost no mass at \u03c1 = 0 "
                          "(or the spec's priors are not close to Jeffreys')"
                          if not np.isfinite(result.crosscheck.savage_dickey_bf10)
                          else "gives " + interpret.format_bayes_factor(
                              float(np.log(result.crosscheck.savage_dickey_bf10)))),
        "exact": {
            "applies": result.crosscheck.applies,
            "mean": _rho(result.crosscheck.exact_mean),
            "interval": f"{_rho(result.crosscheck.exact_lower)} to {_rho(result.crosscheck.exact_upper)}",
            "sentence": result.crosscheck_sentence,
        },
        "diagnostics_sentence": result.diagnostics_sentence,
        "divergences": f"{diag.divergences:,} of {diag.total_draws:,}",
        "bfmi": "n/a" if not np.isfinite(diag.bfmi_min) else f"{diag.bfmi_min:.2f}",
        "seed": "\u2014" if result.seed is None else str(result.seed),
        "figures": figs,
    }


def _anchor(key: str) -> str:
    """A link target unique per pair: a readable part plus a short hash of the exact key."""
    import hashlib

    safe = "".join(ch if ch.isalnum() else "-" for ch in key.lower()).strip("-")[:50]
    return f"pair-{safe}-{hashlib.sha256(key.encode()).hexdigest()[:8]}"


@dataclass(frozen=True)
class RenderedReport:
    html: str
    pdf: bytes
    refused_urls: tuple[str, ...] = field(default=())


def build_context(
    spec: Spec,
    results: RunResults,
    pair_data: dict[str, PairData],
    record: dict[str, Any],
) -> dict[str, Any]:
    document = spec.document
    meta = document.report
    mass = document.summary.credible_mass
    report_date = meta.date or dt.date.today()
    pairs = []
    for result in results.pairs:
        figs = pair_figures(result, pair_data[result.key], spec)
        pairs.append(pair_context(result, figs, mass))
    thresholds = sorted({t for rule in document.rules for t in rule.thresholds})
    forest = figures.forest_plot(
        [p.title for p in results.pairs],
        [p.rho.median for p in results.pairs],
        [p.rho.lower for p in results.pairs],
        [p.rho.upper for p in results.pairs],
        statuses=[p.status for p in results.pairs],
        sample_r=[p.reference.r for p in results.pairs],
        thresholds=thresholds,
        rope=(document.rope.lower, document.rope.upper),
        mass=mass,
    )
    priors = document.priors
    failed = results.failed
    warned = [p for p in results.pairs if p.status == "warn"]
    return {
        "meta": {
            "title": meta.title,
            "subtitle": meta.subtitle,
            "client": meta.client,
            "author": meta.author,
            "date": report_date.isoformat(),
            "date_long": f"{report_date.day} {report_date.strftime('%B %Y')}",
            "confidentiality": meta.confidentiality,
            "logo": logo_data_uri(spec),
        },
        "banner": narrative.status_banner(len(results.pairs), [p.title for p in failed],
                                          [p.title for p in warned]),
        "status": results.status,
        "mass": f"{mass:.0%}",
        "interval_name": "highest-density interval" if document.summary.interval == "hdi"
        else "equal-tailed credible interval",
        "rules": [{
            "name": rule.name,
            "statement": interpret.rule_statement(rule),
            "required": interpret.format_required(rule.required_probability),
            "description": rule.description or rule.name.replace("_", " "),
        } for rule in document.rules],
        "rope": " to ".join(interpret.format_threshold(v) for v in (document.rope.lower, document.rope.upper)),
        "summary_rows": [{
            "anchor": p["anchor"], "title": p["title"], "n": p["n"], "median": p["median"],
            "interval": p["interval"], "p_positive": p["p_positive"], "rules": p["rules"],
            "status": p["status"], "bf10": p["bf10"],
        } for p in pairs],
        "forest": svg_data_uri(forest),
        "matrices": matrix_figures(results, spec),
        "pairs": pairs,
        "methods": narrative.methods_context(spec, results),
        "diagram": svg_data_uri(figures.model_diagram(
            rho_prior=interpret.prior_text_rho(*priors.rho.shapes),
            mean_prior=interpret.prior_text_means(priors.means.units, priors.means.location,
                                                  priors.means.scale, priors.means.family),
            sd_prior=interpret.prior_text_sds(priors.sds.family, priors.sds.units, priors.sds.scale,
                                              priors.sds.nu),
            likelihood="(x\u1d62, y\u1d62) ~ bivariate normal",
            observed="n observed pairs (x\u1d62, y\u1d62)",
        )),
        "cautions": narrative.cautions(),
        "record_rows": narrative.record_rows(record["reproducible"]),
        "record_pairs": narrative.record_pair_rows(record["reproducible"]),
        "versions": record["reproducible"]["versions"],
        "spec_text": spec.source_text,
        "record_json": json.dumps(record["reproducible"], indent=2, ensure_ascii=False),
    }


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
