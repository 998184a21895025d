"""The report's context: every figure, number and sentence the templates place, already formatted.

User text (titles, labels, column names) is passed as plain strings; Jinja
escapes it when the templates are rendered.
"""

from __future__ import annotations

import datetime as dt
import gc
import hashlib
import json
import multiprocessing
import signal
from concurrent.futures import ProcessPoolExecutor
from typing import TYPE_CHECKING, Any

import numpy as np

from reportgen import figures, interpret, narrative
from reportgen.data import PairData
from reportgen.execution.executors import stop_processes, terminate_pool
from reportgen.report import selection
from reportgen.report.changes import long_date, since_previous_context
from reportgen.report.checks import checks_context, highlighted_rows, run_checks_context
from reportgen.report.groups import adjustment_context, groups_context, page_one_notes, summary_row_note
from reportgen.report.render import drawn_figure as _drawn
from reportgen.report.render import logo_data_uri, svg_data_uri
from reportgen.results import PairResult, RunResults, decisions
from reportgen.results.choice import MODEL_SHORT_NAMES
from reportgen.spec import Spec

if TYPE_CHECKING:
    from reportgen.runs.compare import Comparison

PARAMETER_TITLES = {
    "mu_x": ("\u03bc\u2081", "mean of {x}"),
    "mu_y": ("\u03bc\u2082", "mean of {y}"),
    "sigma_x": ("\u03c3\u2081", "SD of {x}"),
    "sigma_y": ("\u03c3\u2082", "SD of {y}"),
    "rho": ("\u03c1", "correlation"),
    "nu": ("\u03bd", "degrees of freedom (tails)"),
    "tau": ("\u03c4", "Kendall's rank correlation"),
}


def parameter_title(name: str, model: str) -> tuple[str, str]:
    """Symbol and meaning; under the Student-t model sigma is a scale, not the SD (that is sigma sqrt(nu/(nu-2)))."""
    symbol, meaning = PARAMETER_TITLES[name]
    if model == "student_t" and name.startswith("sigma"):
        meaning = meaning.replace("SD of", "scale of")
    return symbol, meaning


def _unit_suffix(unit: str) -> str:
    return f" ({unit})" if unit else ""


def pair_figures(result: PairResult, data: PairData, spec: Spec) -> dict[str, Any]:
    """The pair's figures as data URIs, and under "figure_notes" why any of them is a placeholder.

    A figure whose inputs its function refuses is replaced by a placeholder of the same size that
    says so and why, so one unusual pair never stops the report; "figure_notes" lists those
    reasons (empty when every figure was drawn).
    """
    document = spec.document
    thresholds = sorted({t for rule in document.rules for t in rule.thresholds})
    rope = (document.rope.lower, document.rope.upper)
    rho = result.rho
    highlight, highlight_labels = highlighted_rows(result)
    notes: list[str] = []

    def scatter() -> str:
        return figures.scatter_with_ellipses(
            data.x, data.y, mean=result.mean_vector, cov=result.covariance,
            x_label=result.x_label + _unit_suffix(result.x_unit),
            y_label=result.y_label + _unit_suffix(result.y_unit),
            seed=result.seed if result.seed is not None else 0,  # only picks which points a large scatter shows
            highlight=highlight if highlight.size else None, highlight_labels=highlight_labels,
            ellipses=result.model != "rank",  # rank correlation says nothing about an ellipse's shape
        )

    def density() -> str:
        values = rho.grid + rho.offset
        # a prior with a shape below 1 is +inf at rho = +-1: the figure draws that part off the top
        prior_on_grid = np.interp(values, result.prior_grid, result.prior_density)
        check = result.crosscheck
        overlay = check.applies and result.engine == "mcmc"
        reference = np.interp(values, check.grid, check.density, left=0.0, right=0.0) if overlay else None
        return figures.rho_density(
            values, rho.density, prior=prior_on_grid, interval=(rho.lower, rho.upper),
            mass=document.summary.credible_mass, thresholds=thresholds, rope=rope,
            reference=reference, reference_label="Exact (same priors)",
        )

    def parameters() -> str:
        panels = []
        for name, summary in result.parameters.items():
            symbol, meaning = parameter_title(name, result.model)
            unit = {"mu_x": result.x_unit, "sigma_x": result.x_unit,
                    "mu_y": result.y_unit, "sigma_y": result.y_unit}.get(name, "")
            title = f"{symbol}: {meaning.format(x=result.x_label, y=result.y_label)}"
            panels.append(figures.DensityPanel(title=title, grid=summary.grid, density=summary.density,
                                               interval=(summary.lower, summary.upper), unit=unit,
                                               offset=summary.offset, symbol=symbol))
        return figures.parameter_densities(panels)

    half = {"width": figures.HALF_WIDTH, "height": 3.0}
    return {
        "scatter": _drawn(scatter, "The scatter plot", notes, **half),
        "rho_density": _drawn(density, "The density of \u03c1", notes, **half),
        "parameters": _drawn(parameters, "The parameter densities", notes,
                             width=figures.FULL_WIDTH, height=1.9) if len(result.parameters) > 1 else "",
        "figure_notes": notes,
    }


def page_context(result: PairResult, data: PairData, spec: Spec, compact: bool) -> dict[str, Any]:
    """One pair's page: its figures drawn and everything else formatted."""
    mass = spec.document.summary.credible_mass
    return pair_context(result, pair_figures(result, data, spec), mass, spec, compact=compact)


# The inputs of the pages being drawn by forked processes: a child inherits them with the parent's memory,
# so nothing but a page's index is sent to it (pickling a pair's data and the spec cost as much as its figures).
_FORKED_INPUTS: tuple[list[PairResult], dict[str, PairData], Spec, bool] | None = None
MIN_FORKED_PAGES = 4  # below this, starting processes costs about what they save (benchmarks/bench_report.py)


def _forked_page(index: int) -> dict[str, Any]:
    assert _FORKED_INPUTS is not None, "called only in a process forked by pages_for"
    results, pair_data, spec, compact = _FORKED_INPUTS
    return page_context(results[index], pair_data[results[index].key], spec, compact)


def pages_for(results: list[PairResult], pair_data: dict[str, PairData], spec: Spec,
              compact: bool, processes: int = 1) -> list[dict[str, Any]]:
    """The paged pairs' pages, in the order of ``results``, drawn in up to ``processes`` processes.

    Extra processes are forked from this one, not spawned: spawned ones each spent about a second importing
    matplotlib, more than they saved at 21 pages on 2 cores; a forked child starts with everything imported
    and the inputs in its memory. It only draws figures and formats text (no sampler, whose threads would
    not survive a fork). Each page is the same function of the same inputs wherever it is drawn, and
    figures carry no random ids (``svg.hashsalt``), so the pages are the same bytes as drawn here.
    """
    global _FORKED_INPUTS
    if processes <= 1 or len(results) < MIN_FORKED_PAGES or "fork" not in multiprocessing.get_all_start_methods():
        return [page_context(result, pair_data[result.key], spec, compact) for result in results]
    _FORKED_INPUTS = (results, pair_data, spec, compact)
    # frozen objects are left out of the children's garbage collections, which would otherwise write to
    # every object this process holds and so copy its memory page by page (the gc module's advice for fork)
    gc.freeze()
    earlier = set(multiprocessing.active_children())
    try:
        pool = ProcessPoolExecutor(max_workers=min(processes, len(results)),
                                   mp_context=multiprocessing.get_context("fork"), initializer=_leave_signals_to_parent)
        try:
            pages = list(pool.map(_forked_page, range(len(results))))
        except BaseException:  # Ctrl-C, SIGTERM or a bug: the children are stopped, not waited for
            terminate_pool(pool)
            # a child being forked when the interrupt came is not yet in the pool's own list
            stop_processes(set(multiprocessing.active_children()) - earlier)
            raise
        pool.shutdown(wait=True)
        return pages
    finally:
        gc.unfreeze()
        _FORKED_INPUTS = None


def _leave_signals_to_parent() -> None:
    """A forked child inherits this process's handlers: Ctrl-C (sent to the whole process group) is left to
    the run, which stops the children itself, and SIGTERM from it ends a child at once."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)


def matrix_figures(results: RunResults, spec: Spec) -> list[dict[str, str]]:
    out = []
    shown = {pair.key: pair.pair_sets for pair in spec.pairs}  # a listed pair can also stand in a set's matrix
    for pair_set in spec.document.pair_sets:
        columns = list(pair_set.columns)
        k = len(columns)
        medians = np.full((k, k), np.nan)
        excludes = np.zeros((k, k), dtype=bool)
        for result in results.pairs:
            if result.pair_set != pair_set.name and pair_set.name not in shown.get(result.key, ()):
                continue
            i, j = columns.index(result.x), columns.index(result.y)
            i, j = max(i, j), min(i, j)
            medians[i, j] = result.rho.median
            excludes[i, j] = result.interval_excludes_zero
        labels = [spec.display_name(c) for c in columns]
        svg = figures.correlation_matrix(labels, medians, excludes)
        marks = "Outlined cells" if figures.matrix_shows_values(k) else "Cells with a dot"
        out.append({"name": pair_set.name, "figure": svg_data_uri(svg), "marks": marks,
                    "dense": not figures.matrix_shows_values(k)})
    return out


def _fmt(value: float, digits: int = 3) -> str:
    return interpret.format_number(value, digits)


def _rho(value: float) -> str:
    return interpret.format_rho(value)


def pair_context(result: PairResult, figs: dict[str, str], mass: float, spec: Spec | None = None, *,
                 compact: bool = False) -> dict[str, Any]:
    rows = []
    diagnostics = {p.name: p for p in result.diagnosis.parameters}
    for name, summary in result.parameters.items():
        symbol, meaning = parameter_title(name, result.model)
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
            # four decimals, so that a value just over the 1.01 limit (1.0103) shows why it failed
            "rhat": f"{d.rhat:.4f}" if d else "\u2014",
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
        "rules": rule_cells(result),
        "parameter_rows": rows,
        "reference": {
            "r": f"{ref.r:.3f}".replace("-", "\u2212"),
            "interval": f"{_rho(ref.ci_lower)} to {_rho(ref.ci_upper)}",
            "p_value": interpret.format_p_value(ref.p_value),
            "mass": f"{mass:.0%}",
        },
        "status": result.status,
        "sampler_checks": sampler_checks(result),
        "sampled": result.engine == "mcmc" and result.model != "rank",
        "bf10": interpret.bayes_factor_cell(result.crosscheck.log_bf10),
        "bf_parts": interpret.bayes_factor_parts(result.crosscheck.log_bf10),
        "evidence_sentence": result.evidence_sentence,
        "savage_dickey": interpret.savage_dickey_sentence(
            savage_dickey_bf10=result.crosscheck.savage_dickey_bf10,
            relative_mcse=result.crosscheck.savage_dickey_relative_mcse,
            reference_log_bf10=result.crosscheck.reference_log_bf10,
            jeffreys_log_bf10=result.crosscheck.log_bf10 if result.model == "normal" else float("nan"),
        ) if result.engine == "mcmc" else "",
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
        "model": result.model,
        "checks": checks_context(result, with_figure=not compact),
        "groups": groups_context(result, spec.display_name(result.groups.column) if spec and result.groups
                                 else "group", mass),
        "adjustment": adjustment_context(result),
    }


# A failed fit's probabilities are shown, but no verdict is read from them.
NOT_JUDGED = "not judged: sampler failed"
SAMPLER_LABELS = {"pass": "passed", "warn": "warn", "fail": "failed"}


def sampler_checks(result: PairResult) -> dict[str, str]:
    """The pair's sampler-check badge: its CSS class and its word; "not run" where no sampler ran.

    The badge is about the computation, not the client's question, so it never reads like a verdict; a pair
    computed by quadrature (exact engine or rank model) shows "not run" rather than a pass it never earned.
    """
    sampled = result.engine == "mcmc" and result.model != "rank"
    if not sampled and result.status == "pass":
        return {"css": "none", "label": "not run"}
    return {"css": result.status, "label": SAMPLER_LABELS.get(result.status, result.status)}


def rule_cells(result: PairResult) -> list[dict[str, Any]]:
    """Each rule's probability and verdict as shown; a failed fit's verdicts are greyed and not judged."""
    failed = result.status == "fail"
    cells = []
    for rule in result.rules:
        if failed:
            verdict, css = NOT_JUDGED, "verdict-void"
        else:
            verdict, css = rule.verdict, "verdict-met" if rule.verdict == "met" else "verdict-not-met"
        cells.append({
            "name": rule.name,
            "statement": rule.statement,
            "probability": interpret.format_probability(rule.probability),
            "required": interpret.format_required(rule.required),
            "verdict": verdict,
            "verdict_class": css,
            "judged": not failed,
            "sentence": rule.sentence,
            "mcse": "" if rule.mcse == 0.0 else f"{rule.mcse:.2g}",
            "borderline": rule.borderline and not failed,
        })
    return cells


def _without_trailing_comment(line: str) -> str:
    """``line`` without a ``#`` comment that follows its value; a ``#`` inside a quoted string stays.

    Basic ("...", with backslash escapes) and literal ('...') strings are followed; a line that opens or
    closes a multi-line string (three quotes) is kept whole, since its quotes span lines.
    """
    if '"""' in line or "'''" in line:
        return line
    quote = ""
    escaped = False
    for index, char in enumerate(line):
        if quote:
            if escaped:
                escaped = False
            elif char == "\\" and quote == '"':
                escaped = True
            elif char == quote:
                quote = ""
        elif char in "\"'":
            quote = char
        elif char == "#":
            return line[:index].rstrip()
    return line


def spec_without_comments(text: str) -> str:
    """The spec as the client should read it: comments (the starter's notes) and the blank lines they
    leave in runs are dropped; every setting stays exactly as written.

    Parsing the result gives the same settings as the file (tests check this with the standard library's
    TOML reader), so the appendix still shows what the run read.
    """
    kept: list[str] = []
    inside = ""  # the quotes of a multi-line string the current line lies in, kept whole
    for raw in text.splitlines():
        if inside or '"""' in raw or "'''" in raw:
            for quotes in ('"""', "'''"):
                if raw.count(quotes) % 2 and inside in ("", quotes):
                    inside = "" if inside else quotes
            kept.append(raw)
            continue
        line = "" if raw.lstrip().startswith("#") else _without_trailing_comment(raw)
        if not line.strip() and raw.strip():
            continue  # a comment line: dropped, not turned into a blank line
        if not line.strip() and (not kept or not kept[-1].strip()):
            continue
        kept.append(line)
    while kept and not kept[-1].strip():
        kept.pop()
    return "\n".join(kept) + "\n" if kept else ""


def _shared_rho_prior(spec: Spec) -> str:
    """The prior on rho by name when every pair shares it, else a pointer to each pair's own."""
    shapes = {pair.priors.rho.shapes for pair in spec.pairs}
    if len(shapes) == 1:
        return interpret.rho_prior_name(*shapes.pop())
    return "each pair's own prior (see its page)"


def contents_entries(results: RunResults, pairs: list[dict[str, Any]], compared: bool) -> list[dict[str, Any]]:
    """The printed table of contents: the report's sections in order, each pair under its own title."""
    entries = [{"title": "Summary of results", "anchor": "summary", "level": 1}]
    if compared:
        entries.append({"title": "Since the previous run", "anchor": "since-previous", "level": 1})
    entries += [{"title": p["title"], "anchor": p["anchor"], "level": 2} for p in pairs]
    entries += [{"title": title, "anchor": anchor, "level": 1} for title, anchor in
                (("Methods", "methods"), ("Cautions", "cautions"), ("Appendix: run record", "appendix"))]
    return entries


def _anchor(key: str) -> str:
    """A link target unique per pair: a readable part plus a short hash of the exact key."""
    safe = "".join(ch if ch.isalnum() else "-" for ch in key.lower()).strip("-")[:50]
    return f"pair-{safe}-{hashlib.sha256(key.encode()).hexdigest()[:8]}"


def document_meta(spec: Spec) -> dict[str, str]:
    """The title block of every document made from this spec: title, client, author, date, notice, logo."""
    meta = spec.document.report
    report_date = meta.date or dt.date.today()
    return {
        "title": meta.title,
        "subtitle": meta.subtitle,
        "client": meta.client,
        "author": meta.author,
        "date": report_date.isoformat(),
        "date_long": long_date(report_date),
        "confidentiality": meta.confidentiality,
        "logo": logo_data_uri(spec),
    }


def summary_row(result: PairResult, spec: Spec) -> dict[str, Any]:
    """One row of page one's table, from the pair's results alone (no figure is drawn for it)."""
    bf_kind, bf_value = interpret.bayes_factor_parts(result.crosscheck.log_bf10)
    return {
        "anchor": _anchor(result.key), "title": result.title, "n": f"{result.n:,}",
        "median": _rho(result.rho.median), "interval": f"{_rho(result.rho.lower)} to {_rho(result.rho.upper)}",
        "p_positive": interpret.format_probability(result.p_positive), "rules": rule_cells(result),
        "status": result.status, "sampler_checks": sampler_checks(result),
        "bf10": interpret.bayes_factor_cell(result.crosscheck.log_bf10),
        # the value above its kind (BF10 or BF01), so that a narrow column holds both
        "bf_kind": bf_kind, "bf_value": bf_value,
        "model": MODEL_SHORT_NAMES[result.model],
        "grouped": summary_row_note(result, spec.display_name(result.groups.column) if result.groups else ""),
        "simpson": bool(result.groups and result.groups.simpson),
    }


def _strongest_in_order(results: list[PairResult], limit: int) -> list[PairResult]:
    """At most ``limit`` of ``results``: the strongest, kept in the run's order."""
    if len(results) <= limit:
        return results
    kept = {id(result) for result in selection.ranked_by_strength(results)[:limit]}
    return [result for result in results if id(result) in kept]


def page_one_lists(results: RunResults, paged: frozenset[str]) -> dict[str, Any]:
    """Page one's lists of pairs (model warnings, borderline verdicts, Simpson's warnings, adjusted pairs),
    each cut to ``selection.MAX_LISTED`` items with a line saying how many more there are."""
    where = "results.csv and results.parquet list every pair"
    warnings, more_warnings = selection.capped(run_checks_context(results, _anchor), paged)
    borderline = [{"key": result.key, "anchor": _anchor(result.key), "title": result.title, "rule": rule.name,
                   "probability": interpret.format_probability(rule.probability),
                   "required": interpret.format_required(rule.required), "mcse": f"{rule.mcse:.3f}"}
                  for result in results.pairs for rule in result.rules if rule.borderline and result.status != "fail"]
    borderline, more_borderline = selection.capped(borderline, paged)
    notes = page_one_notes(results.pairs, _anchor)
    simpson, more_simpson = selection.capped(notes["simpson"], paged)
    adjusted, more_adjusted = selection.capped(notes["adjusted"], paged)
    return {
        "model_warnings": warnings,
        "model_warnings_total": len(warnings) + more_warnings,
        "model_warnings_more": selection.more_sentence(more_warnings, "are flagged",
                                                       "see the column model_warnings of results.csv"),
        "borderline": borderline,
        "borderline_more": selection.more_sentence(more_borderline, "have a borderline verdict",
                                                   "see the column borderline_rules of results.csv"),
        "grouped": {"simpson": simpson, "adjusted": adjusted,
                    "simpson_more": selection.more_sentence(more_simpson, "have Simpson's warning", where),
                    "adjusted_more": selection.more_sentence(more_adjusted, "are adjusted", where)},
    }


def build_context(
    spec: Spec,
    results: RunResults,
    pair_data: dict[str, PairData],
    record: dict[str, Any],
    comparison: Comparison | None = None,
    *,
    processes: int = 1,
) -> dict[str, Any]:
    """The run report's context, the paged pairs' pages drawn in up to ``processes`` processes; with
    ``comparison`` (against the previous run) it also holds ``since_previous``: the flips for page one and
    the section after the summary (None without).

    Only the pairs ``[report] pair_pages`` selects get a page and its figures (see ``report.selection``);
    page one's tables and lists are capped so that it stays short at thousands of pairs.
    """
    document = spec.document
    mass = document.summary.credible_mass
    compact = getattr(document.report, "layout", "full") == "compact"
    chosen = selection.select_pair_pages(results.pairs, getattr(document.report, "pair_pages", None))
    paged = frozenset(chosen.keys)
    paged_results = [result for result in results.pairs if result.key in paged]
    pairs = pages_for(paged_results, pair_data, spec, compact, processes)
    thresholds = sorted({t for rule in document.rules for t in rule.thresholds})
    in_table = _strongest_in_order(paged_results, selection.MAX_SUMMARY_ROWS)
    in_forest = _strongest_in_order(in_table, selection.MAX_FOREST_ROWS)
    forest = figures.forest_plot(
        [p.title for p in in_forest],
        [p.rho.median for p in in_forest],
        [p.rho.lower for p in in_forest],
        [p.rho.upper for p in in_forest],
        statuses=[p.status for p in in_forest],
        sample_r=[p.reference.r for p in in_forest],
        thresholds=thresholds,
        rope=(document.rope.lower, document.rope.upper),
        mass=mass,
    ) if in_forest else ""
    methods = narrative.methods_context(spec, results)
    failed = results.failed
    warned = [p for p in results.pairs if p.status == "warn"]
    titles = {result.key: (result.title, _anchor(result.key) if result.key in paged else "")
              for result in results.pairs}
    draft = bool(getattr(document.report, "draft", False))
    ranked, meeting = selection.ranked_rule_rows(results.pairs, paged, _anchor)
    record_pairs = [{**row, "pair": titles.get(row["pair"], (row["pair"], ""))[0]}
                    for row in narrative.record_pair_rows(record["reproducible"]) if row["pair"] in paged]
    record_shown = record_pairs[:selection.MAX_RECORD_ROWS]
    return {
        "meta": document_meta(spec),
        "draft": draft,
        "draft_text": narrative.draft_banner(
            document.sampler.draws, document.sampler.chains, document.diagnostics.ess_min,
            quick=("quick", "true") in spec.overrides, engine=document.engine,
            rhat_max=document.diagnostics.rhat_max) if draft else "",
        "footer": document.report.client or document.report.title,
        "contents": contents_entries(results, pairs, comparison is not None),
        "compact": compact,
        "banner": narrative.status_banner(len(results.pairs), [p.title for p in failed],
                                          [p.title for p in warned], engine=document.engine),
        "status": results.status,
        "pages_sentence": selection.selection_sentence(chosen),
        "mass": f"{mass:.0%}",
        "interval_name": "highest-density interval" if document.summary.interval == "hdi"
        else "equal-tailed credible interval",
        "table_note": narrative.summary_table_note(
            mass=f"{mass:.0%}",
            interval_name="highest-density" if document.summary.interval == "hdi" else "equal-tailed",
            rho_prior=_shared_rho_prior(spec), any_sampled=any(p["sampled"] for p in pairs),
            any_failed=bool(failed), any_rank=any(p.model == "rank" for p in results.pairs)),
        "rules": [{
            "name": rule.name,
            "statement": interpret.rule_statement(rule),
            "required": interpret.format_required(rule.required_probability),
            "description": rule.description or rule.name.replace("_", " "),
        } for rule in document.rules],
        "rope": " to ".join(interpret.format_threshold(v) for v in (document.rope.lower, document.rope.upper)),
        "summary_rows": [summary_row(result, spec) for result in in_table],
        "summary_more": "" if len(in_table) == len(paged_results) else (
            f"The table shows the {len(in_table):,} strongest of the {len(paged_results):,} pairs with a page; "
            "each page is listed in the contents."),
        "forest_note": "" if len(in_forest) == len(in_table) else (
            f"The {len(in_forest):,} strongest pairs of the table."),
        "ranked": ranked,
        "ranked_note": selection.ranked_note(len(ranked), meeting, len(results.pairs)),
        **page_one_lists(results, paged),
        "prior_sensitive": [p.title for p in results.pairs if p.sensitivity and p.sensitivity.prior_sensitive],
        # a failed fit's verdicts are not judged, so they do not count among the decisions read together
        "many_decisions": decisions.many_decisions_sentence(decisions.many_decisions(
            [(rule.probability, rule.verdict == "met") for result in results.pairs if result.status != "fail"
             for rule in result.rules])),
        "forest": svg_data_uri(forest) if forest else "",
        "matrices": matrix_figures(results, spec),
        "pairs": pairs,
        "methods": methods,
        "diagram": svg_data_uri(figures.model_diagram(
            **methods["diagram_priors"],
            likelihood="(x\u1d62, y\u1d62) ~ bivariate normal",
            observed="n observed pairs (x\u1d62, y\u1d62)",
        )),
        "cautions": narrative.cautions(),
        "record_rows": narrative.record_rows(record["reproducible"]),
        "record_pairs": record_shown,
        "record_pairs_note": "" if len(record_shown) == len(results.pairs) else (
            f"This table lists {len(record_shown):,} of the {len(results.pairs):,} pairs (pairs with a page"
            f"{'' if len(record_shown) == len(record_pairs) else ', in the order of the contents'}); record.json "
            f"beside this report holds the entries of all {len(results.pairs):,}."),
        "versions": record["reproducible"]["versions"],
        "spec_text": spec_without_comments(spec.source_text),
        "spec_note": ("The spec file with its comment lines left out; its SHA-256 above is that of the file as "
                      "written. Command-line overrides, if any, are listed in the table above and replace these "
                      "values."),
        "record_json": json.dumps(record["reproducible"], indent=2, ensure_ascii=False),
        "since_previous": None if comparison is None else capped_changes(since_previous_context(comparison, titles)),
    }


def capped_changes(block: dict[str, Any]) -> dict[str, Any]:
    """The section on the previous run with at most ``selection.MAX_CHANGE_ROWS`` rows (flips and changed
    checks come first), and a line saying how many more are in changes.csv."""
    rows = block["rows"]
    left_out = max(0, len(rows) - selection.MAX_CHANGE_ROWS)
    return {**block, "rows": rows[:selection.MAX_CHANGE_ROWS],
            "rows_left_out": selection.more_sentence(left_out, "are compared",
                                                     "changes.csv beside this report has every pair")}
