"""Verifying a past run: are its inputs still the recorded ones, and how does a rerun compare with it?

Plain functions on run folders and records; the rerun itself is made by ``reportgen.audit``. A rerun
agrees with the original at one of three levels: the same bytes; the same numbers up to Monte Carlo error
(sampled columns within a few Monte Carlo standard errors, everything else within a tight numerical
tolerance, the same verdicts), which is what a different BLAS, CPU or renderer gives; or not at all.
"""

from __future__ import annotations

import csv
import dataclasses
import json
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from scipy import stats

from reportgen.errors import DataError, OutputError, ReportAssetError, SpecError
from reportgen.runs.environment import file_sha256, folder_sha256, logo_file, templates_folder
from reportgen.spec import Spec
from reportgen.spec.loading import spec_from_resolved

BYTE_FOR_BYTE = "reproduced byte for byte"
WITHIN_ERROR = "reproduced within Monte Carlo error"
NOT_REPRODUCED = "not reproduced"
COMPARED_OUTPUTS = ("results.csv", "report.html", "report.pdf")
DRAWS_KEYS = {"normal": "draws_sha256", "student_t": "robust_draws_sha256"}
# Numbers no sampler touches (and every number of the exact engine) must agree to the last few digits:
# quadrature and sums give the same result up to rounding whatever the BLAS kernel.
RELATIVE_TOLERANCE = 1e-9
ABSOLUTE_TOLERANCE = 1e-12
# Two runs with diverging draws are two independent estimates, each with its Monte Carlo standard error;
# their difference has standard error sqrt(2) MCSE, and 4 of those is the allowance (a false alarm about
# once in 16,000 columns for normal errors).
ALLOWED_MCSE = 4.0 * math.sqrt(2.0)
DATA_COLUMNS = frozenset({"n", "n_dropped", "sample_r", "fisher_lower", "fisher_upper", "p_value", "seed",
                          "exact_mean", "exact_sd", "ln_bf10", "influence_max", "normality_p"})
# How the sampler went, not what it estimated: listed when they differ, never a reason to refuse.
SAMPLER_COLUMNS = frozenset({"rhat_max", "ess_bulk_min", "ess_tail_min", "divergences", "nu_median",
                             "ln_bf10_savage_dickey", "status_reasons"})
MEAN_COLUMNS = frozenset({"rho_mean", "exact_mean_gap"})
MEDIAN_COLUMNS = frozenset({"rho_median", "robust_rho_median"})
BOUND_COLUMNS = frozenset({"rho_lower", "rho_upper", "robust_rho_lower", "robust_rho_upper"})
NOT_RECORDED = "(not recorded)"


@dataclass(frozen=True)
class OutputCheck:
    name: str
    identical: bool
    original_sha256: str | None  # None: the file is missing
    rerun_sha256: str | None


@dataclass(frozen=True)
class DrawsCheck:
    pair: str
    model: str
    identical: bool
    original_sha256: str | None
    rerun_sha256: str | None


@dataclass(frozen=True)
class Change:
    """One setting of the environment or the spec, by its key path, in the original and the rerun."""

    key: str
    original: str
    rerun: str


@dataclass(frozen=True)
class Difference:
    """One value of a pair that differs between the original and the rerun.

    ``kind`` says how it is judged: "numerical" (tolerance), "monte carlo" (``allowed`` = ALLOWED_MCSE
    times ``mcse``), "sampler" (listed only) or "text" (must be equal).
    """

    pair: str
    column: str
    original: str
    rerun: str
    kind: str
    within: bool
    difference: float | None = None
    allowed: float | None = None
    mcse: float | None = None


@dataclass(frozen=True)
class PairAgreement:
    pair: str
    engine: str
    mcse: float | None  # of rho's posterior mean; None for the exact engine
    largest: Difference | None  # the judged difference closest to its allowance
    within: bool


@dataclass(frozen=True)
class Verification:
    verdict: str
    original: str
    rerun: str | None
    outputs: tuple[OutputCheck, ...]
    draws: tuple[DrawsCheck, ...]
    environment: tuple[Change, ...]
    settings: tuple[Change, ...]
    pairs: tuple[PairAgreement, ...]
    differences: tuple[Difference, ...]
    notes: tuple[str, ...] = ()

    @property
    def exit_code(self) -> int:
        return 1 if self.verdict == NOT_REPRODUCED else 0


# ------------------------------------------------------------------------------------ before any fit


def recorded_spec(record: dict[str, Any], data_override: Path | None = None, *,
                  where: Path | None = None) -> Spec:
    """The spec the record names: its resolved spec, placed where the spec file was, so relative paths
    resolve as they did; ``data_override`` replaces the data path."""
    where = where or Path("record.json")
    reproducible, run = record.get("reproducible") or {}, record.get("run") or {}
    if not run.get("spec_path") or "resolved_spec" not in reproducible:
        raise OutputError(f"{where}: lacks run.spec_path or reproducible.resolved_spec, so the run cannot be "
                          "re-made; verify a folder written by this version of `reportgen run`")
    source = Path(run["spec_path"])
    text = run.get("spec_text")
    if text is None and source.is_file() and file_sha256(source) == reproducible.get("spec_sha256"):
        text = source.read_text(encoding="utf-8-sig")  # an older record: the unchanged file has it
    overrides = tuple((str(k), str(v)) for k, v in (reproducible.get("command_line_overrides") or {}).items())
    return spec_from_resolved(reproducible["resolved_spec"], source, source_sha256=reproducible.get("spec_sha256", ""),
                              source_text=text or "", overrides=overrides, data_path=data_override, where=where)


def _hash(path: Path, what: str, error: type[Exception]) -> str:
    try:
        return folder_sha256(path) if path.is_dir() else file_sha256(path)
    except OSError as exc:
        raise error(f"{path}: the {what} cannot be read ({exc.strerror or type(exc).__name__}), so it cannot be "
                    "checked against the record; fix its permissions") from None


def _mismatch(error: type[Exception], path: Path, what: str, found: str, recorded: str, fix: str) -> Exception:
    return error(f"{path}: the {what} has SHA-256 {found}, but the run recorded {recorded}; {fix}")


def check_inputs(record: dict[str, Any], data_override: Path | None = None, *,
                 where: Path | None = None) -> tuple[str, ...]:
    """Refuse, before any fit, inputs that are not the recorded ones (data file, spec file, template
    folder, logo), with one line naming the file and both hashes. Returns notes: a spec file that is gone
    is not refused, since the resolved spec in the record is what is rerun."""
    reproducible = record.get("reproducible") or {}
    spec = recorded_spec(record, data_override, where=where)
    notes: list[str] = []
    data = spec.data_path
    if not data.is_file():
        raise DataError(f"{data}: the recorded run's data file is not there; give its new place with --data PATH")
    found = _hash(data, "data file", DataError)
    if found != reproducible.get("data_sha256"):
        raise _mismatch(DataError, data, "data file", found, str(reproducible.get("data_sha256")),
                        "the data changed since the run; give the original file with --data PATH")
    if spec.source_path.is_file():
        found = _hash(spec.source_path, "spec file", SpecError)
        if found != reproducible.get("spec_sha256"):
            raise _mismatch(SpecError, spec.source_path, "spec file", found, str(reproducible.get("spec_sha256")),
                            "the spec was edited since the run; restore the recorded version or move it away "
                            "(the resolved spec in record.json is what is rerun)")
    else:
        notes.append(f"{spec.source_path}: the spec file is gone; the resolved spec in record.json is rerun")
    folder = templates_folder(spec)
    if "templates_sha256" in reproducible and folder is not None:
        if not folder.is_dir():
            raise ReportAssetError(f"{folder}: the recorded run's template folder (report.templates) is not there; "
                                   "restore it")
        found = _hash(folder, "template folder", ReportAssetError)
        if found != reproducible["templates_sha256"]:
            raise _mismatch(ReportAssetError, folder, "template folder", found, reproducible["templates_sha256"],
                            "the templates changed since the run; restore the recorded versions")
    logo = logo_file(spec)
    if "logo_sha256" in reproducible and logo is not None:
        if not logo.is_file():
            raise ReportAssetError(f"{logo}: the recorded run's logo (report.logo) is not there; restore it")
        found = _hash(logo, "logo", ReportAssetError)
        if found != reproducible["logo_sha256"]:
            raise _mismatch(ReportAssetError, logo, "logo", found, reproducible["logo_sha256"],
                            "the logo changed since the run; restore the recorded file")
    earlier = previous_folder(record)
    if earlier is not None:
        recorded = str((reproducible.get("previous_run") or {}).get("record_sha256"))
        if not (earlier / "record.json").is_file():
            raise OutputError(f"{earlier}: the run this one was compared against (--previous) is not there "
                              "any more; restore that folder to verify")
        found = _hash(earlier / "record.json", "previous run's record.json", OutputError)
        if found != recorded:
            raise _mismatch(OutputError, earlier / "record.json", "previous run's record", found, recorded,
                            "the run compared against was replaced since; restore that folder")
    return tuple(notes)


def previous_folder(record: dict[str, Any]) -> Path | None:
    """The earlier run this run was compared against (``--previous``), when it was."""
    path = (record.get("run") or {}).get("previous_path")
    return Path(path) if path and (record.get("reproducible") or {}).get("previous_run") else None


# --------------------------------------------------------------------------------------- after the rerun


def _sha256_or_none(path: Path) -> str | None:
    return file_sha256(path) if path.is_file() else None


def _flatten(value: Any, prefix: str) -> dict[str, str]:
    """Nested tables and lists as readable key paths ("pdf_renderer.pango") to shown values."""
    if isinstance(value, dict):
        flat: dict[str, str] = {}
        for key, item in value.items():
            flat |= _flatten(item, f"{prefix}.{key}" if prefix else str(key))
        return flat
    if isinstance(value, list) and any(isinstance(item, dict | list) for item in value):
        return {k: v for index, item in enumerate(value) for k, v in _flatten(item, f"{prefix}[{index}]").items()}
    return {prefix: value if isinstance(value, str) else json.dumps(value)}


def _changes(original: dict[str, Any], rerun: dict[str, Any]) -> tuple[Change, ...]:
    old, new = _flatten(original, ""), _flatten(rerun, "")
    return tuple(Change(key, old.get(key, NOT_RECORDED), new.get(key, NOT_RECORDED))
                 for key in sorted(old.keys() | new.keys()) if old.get(key) != new.get(key))


def environment_changes(original: dict[str, Any], rerun: dict[str, Any]) -> tuple[Change, ...]:
    """The environment parts and the package versions and platform of two records, where they differ. A
    record written before the environment part existed is compared on versions and platform only (every
    fingerprint key would otherwise show as a difference that explains nothing)."""
    both = "environment" in original and "environment" in rerun

    def part(record: dict[str, Any]) -> dict[str, Any]:
        reproducible = record.get("reproducible") or {}
        return {"versions": reproducible.get("versions") or {}, "platform": reproducible.get("platform") or {},
                **(record.get("environment") or {} if both else {})}
    return _changes(part(original), part(rerun))


def upgraded_row(row: dict[str, str]) -> dict[str, str]:
    """A results.csv row under today's column names; an older version's row (log_bf10, a plain
    savage_dickey_bf10, one "central 0.95" interval column) is mapped onto them, so that a run made before
    the renames can still be verified."""
    row = dict(row)
    if "log_bf10" in row and "ln_bf10" not in row:
        row["ln_bf10"] = row.pop("log_bf10")
    if "savage_dickey_bf10" in row and "ln_bf10_savage_dickey" not in row:
        ratio = _number(row.pop("savage_dickey_bf10"))
        row["ln_bf10_savage_dickey"] = repr(math.log(ratio)) if ratio is not None and ratio > 0 else ""
    if "interval" in row and "interval_kind" not in row:
        kind, _, mass = row.pop("interval").partition(" ")
        row["interval_kind"], row["interval_mass"] = kind, mass
    return row


def row_key(row: dict[str, str]) -> str:
    """A results.csv row's identity: the pair's key for its own row; with the group or the controls for a
    grouped pair's group rows and a partial correlation's row, which share the pair's key."""
    if row.get("group"):
        return f"{row['pair']} [group {row['group']}]"
    if row.get("controls"):
        return f"{row['pair']} [given {row['controls']}]"
    return row["pair"]


def _read_results(path: Path) -> dict[str, dict[str, str]]:
    if not path.is_file():
        return {}
    with path.open(encoding="utf-8", newline="") as handle:
        return {row_key(row): upgraded_row(row) for row in csv.DictReader(handle)}


def _number(text: str) -> float | None:
    try:
        value = float(text)
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def column_mcse(column: str, row: dict[str, str], entry: dict[str, Any], mass: float) -> float | None:
    """The Monte Carlo standard error of one sampled column of a pair, from the record's posterior SD and
    effective sample sizes (normal approximations, from memory: the median's MCSE is sqrt(pi/2) times the
    mean's, the SD's is 1/sqrt(2) times the SD over sqrt(ESS), a quantile's is sqrt(a(1-a))/phi(z_a) times
    the SD over sqrt(tail ESS), a probability's sqrt(p(1-p)/ESS)). None when the record has no ESS."""
    if f"{column}_mcse" in row and (given := _number(row[f"{column}_mcse"])) is not None:
        return given
    ess_bulk, ess_tail = entry.get("ess_bulk_min"), entry.get("ess_tail_min")
    sd = (entry.get("rho") or {}).get("sd")
    if not ess_bulk or not ess_tail or sd is None:
        return None
    tail = (1.0 - mass) / 2.0
    z = float(stats.norm.ppf(1.0 - tail))
    if column.startswith("robust_"):
        lower, upper = _number(row.get("robust_rho_lower", "")), _number(row.get("robust_rho_upper", ""))
        sd = (upper - lower) / (2.0 * z) if lower is not None and upper is not None else sd
    if column in MEAN_COLUMNS:
        return sd / math.sqrt(ess_bulk)
    if column in MEDIAN_COLUMNS:
        return math.sqrt(math.pi / 2.0) * sd / math.sqrt(ess_bulk)
    if column == "rho_sd":
        return sd / math.sqrt(2.0 * ess_bulk)
    if column in BOUND_COLUMNS:
        return math.sqrt(tail * (1.0 - tail)) / float(stats.norm.pdf(z)) * sd / math.sqrt(ess_tail)
    recorded = _number(row.get(f"{column}_mcse", ""))
    if column.startswith("p_") and recorded is not None and recorded > 0.0:
        return recorded  # a rule's own error, from the ESS of its indicator draws
    if column.startswith("p_") or column == "ppc_p_r":
        p = _number(row.get(column, ""))
        return math.sqrt(max(p * (1.0 - p) if p is not None else 0.25, 1.0 / ess_bulk) / ess_bulk)
    return None


def judge_value(pair: str, column: str, old: str, new: str, entry: dict[str, Any], row: dict[str, str],
                mass: float) -> Difference | None:
    """How one results.csv cell of a pair compares; None when it is the same text."""
    if old == new:
        return None
    a, b = _number(old), _number(new)
    if a is None or b is None:
        return Difference(pair, column, old, new, "text", column in SAMPLER_COLUMNS)
    difference = b - a
    sampled = entry.get("engine") == "mcmc" and column not in DATA_COLUMNS
    if sampled and column in SAMPLER_COLUMNS | {c for c in row if c.endswith("_mcse")}:
        return Difference(pair, column, old, new, "sampler", True, difference)
    mcse = column_mcse(column, row, entry, mass) if sampled else None
    if mcse is not None:
        allowed = ALLOWED_MCSE * mcse
        return Difference(pair, column, old, new, "monte carlo", abs(difference) <= allowed, difference, allowed,
                          mcse)
    allowed = RELATIVE_TOLERANCE * max(abs(a), abs(b)) + ABSOLUTE_TOLERANCE
    return Difference(pair, column, old, new, "numerical", abs(difference) <= allowed, difference, allowed)


def _closeness(difference: Difference) -> float:
    if difference.difference is None or not difference.allowed:
        return math.inf if not difference.within else 0.0
    return abs(difference.difference) / difference.allowed


def compare_pairs(original: dict[str, Any], rerun: dict[str, Any], old_rows: dict[str, dict[str, str]],
                  new_rows: dict[str, dict[str, str]]) -> tuple[tuple[PairAgreement, ...], tuple[Difference, ...]]:
    """Every pair's results.csv row and rule verdicts, judged value by value."""
    old_pairs = {e["pair"]: e for e in (original.get("reproducible") or {}).get("pairs", [])}
    new_pairs = {e["pair"]: e for e in (rerun.get("reproducible") or {}).get("pairs", [])}
    summary = (original.get("reproducible") or {}).get("resolved_spec", {}).get("summary") or {}
    mass = float(summary.get("credible_mass", 0.95))
    agreements, differences = [], []
    for key in dict.fromkeys([*old_pairs, *new_pairs, *old_rows, *new_rows]):
        row, new_row = old_rows.get(key), new_rows.get(key)
        # a group's or a partial correlation's row is judged with its pair's record (seed, engine, ESS)
        base = (row or new_row or {}).get("pair", key)
        entry = old_pairs.get(base, {})
        found: list[Difference] = []
        if row is None or new_row is None or base not in old_pairs or base not in new_pairs:
            shown = ("in the original" if row is not None else "absent", "in the rerun" if new_row else "absent")
            found.append(Difference(key, "(pair)", *shown, "text", False))
        else:
            for column in dict.fromkeys([*row, *new_row]):
                judged = judge_value(key, column, row.get(column, ""), new_row.get(column, ""), entry, row, mass)
                found += [judged] if judged is not None else []
            own_row = base == key
            old_rules = {r["name"]: r["verdict"] for r in entry.get("rules", [])} if own_row else {}
            new_rules = {r["name"]: r["verdict"] for r in new_pairs[key].get("rules", [])} if own_row else {}
            for name in dict.fromkeys([*old_rules, *new_rules]):
                if old_rules.get(name) != new_rules.get(name):
                    found.append(Difference(key, f"rule {name} verdict", str(old_rules.get(name)),
                                            str(new_rules.get(name)), "text", False))
        judged = [d for d in found if d.kind != "sampler"]
        sd, ess = (entry.get("rho") or {}).get("sd"), entry.get("ess_bulk_min")
        mcse = sd / math.sqrt(ess) if entry.get("engine") == "mcmc" and sd is not None and ess else None
        agreements.append(PairAgreement(key, str(entry.get("engine", "?")), mcse,
                                        max(judged, key=_closeness) if judged else None,
                                        all(d.within for d in found)))
        differences += found
    return tuple(agreements), tuple(differences)


def judge(original: Path, rerun: Path) -> Verification:
    """Compare a run folder with its rerun: output bytes, draws by content hash, the environment, and
    every pair's numbers against their Monte Carlo error."""
    records = [json.loads((folder / "record.json").read_text(encoding="utf-8")) for folder in (original, rerun)]
    outputs = []
    for name in COMPARED_OUTPUTS:
        old, new = _sha256_or_none(original / name), _sha256_or_none(rerun / name)
        outputs.append(OutputCheck(name, old is not None and old == new, old, new))
    old_pairs = {e["pair"]: e for e in records[0]["reproducible"].get("pairs", [])}
    new_pairs = {e["pair"]: e for e in records[1]["reproducible"].get("pairs", [])}
    draws = []
    for key in old_pairs.keys() & new_pairs.keys():
        for model, field in DRAWS_KEYS.items():
            old, new = old_pairs[key].get(field), new_pairs[key].get(field)
            if old is not None or new is not None:
                draws.append(DrawsCheck(key, model, old == new, old, new))
    pairs, differences = compare_pairs(records[0], records[1], _read_results(original / "results.csv"),
                                       _read_results(rerun / "results.csv"))
    missing = [Difference("(run)", check.name, "present" if check.original_sha256 else "missing",
                          "present" if check.rerun_sha256 else "missing", "text", False)
               for check in outputs if check.original_sha256 is None or check.rerun_sha256 is None]
    differences = (*missing, *differences)
    settings = _changes({"spec": records[0]["reproducible"].get("resolved_spec") or {}},
                        {"spec": records[1]["reproducible"].get("resolved_spec") or {}})
    notes = () if "environment" in records[0] else (
        "the original record has no environment part (an older version wrote it), so its environment is unknown",)
    same_bytes = all(check.identical for check in outputs) and all(check.identical for check in draws)
    if any(not d.within for d in differences):
        verdict = NOT_REPRODUCED
    else:
        verdict = BYTE_FOR_BYTE if same_bytes else WITHIN_ERROR
    draws.sort(key=lambda check: (check.pair, check.model))
    return Verification(verdict, str(original), str(rerun), tuple(outputs), tuple(draws),
                        environment_changes(records[0], records[1]), settings, pairs, differences, notes)


# ------------------------------------------------------------------------------------------ presenting


def _finite_or_none(value: Any) -> Any:
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _finite_or_none(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_finite_or_none(v) for v in value]
    return value


def verification_json(v: Verification) -> dict[str, Any]:
    """verification.json: the whole comparison, with the exit code it led to."""
    return _finite_or_none({"verdict": v.verdict, "exit_code": v.exit_code, **dataclasses.asdict(v)})


def _shown(text: str, width: int = 60) -> str:
    return text if len(text) <= width else text[: width - 1] + "…"


def _agreement_line(agreement: PairAgreement) -> str:
    largest = agreement.largest
    if largest is None:
        return f"  {agreement.pair}: no value differs"
    if largest.kind == "monte carlo" and largest.mcse:
        return (f"  {agreement.pair}: largest difference {largest.column} {largest.difference:+.3g} = "
                f"{abs(largest.difference or 0.0) / largest.mcse:.2f} MCSE (allowed {ALLOWED_MCSE:.2f}; "
                f"MCSE of rho's mean {agreement.mcse:.2g})")
    if largest.kind == "numerical" and largest.difference is not None:
        scale = max(abs(_number(largest.original) or 0.0), abs(_number(largest.rerun) or 0.0)) or 1.0
        return (f"  {agreement.pair}: largest difference {largest.column} {largest.difference:+.3g} "
                f"(relative {abs(largest.difference) / scale:.2g}; tolerance {RELATIVE_TOLERANCE:g}, no Monte "
                "Carlo error: computed, not sampled)")
    return (f"  {agreement.pair}: {largest.column} differs "
            f"({_shown(largest.original, 30)} -> {_shown(largest.rerun, 30)})")


def difference_table(differences: tuple[Difference, ...]) -> list[str]:
    """What differs beyond its allowance, as an aligned text table."""
    header = ("pair", "what", "original", "rerun", "difference", "allowed")
    rows = [(d.pair, d.column, _shown(d.original, 24), _shown(d.rerun, 24),
             "" if d.difference is None else f"{d.difference:+.3g}",
             "equal" if d.allowed is None else f"{d.allowed:.3g}" + (" (4 x sqrt 2 MCSE)" if d.mcse else ""))
            for d in differences if not d.within]
    widths = [max(len(row[i]) for row in (header, *rows)) for i in range(len(header))]
    return ["  " + "  ".join(cell.ljust(width) for cell, width in zip(row, widths, strict=True)).rstrip()
            for row in (header, *rows)]


def summary_lines(v: Verification) -> list[str]:
    """What the console shows: the verdict, the outputs, and why the bytes or numbers differ."""
    lines = [f"{v.verdict}: {v.original}"]
    lines += [f"note: {note}" for note in v.notes]
    lines += [f"  {check.name}: {'identical' if check.identical else 'differs'}" for check in v.outputs]
    if v.draws:
        same = sum(check.identical for check in v.draws)
        lines.append(f"  draws: {same} of {len(v.draws)} identical by content hash")
    environment_title = {BYTE_FOR_BYTE: "environment differences (they did not change a byte):",
                         WITHIN_ERROR: "environment differences that explain the bytes:"}
    for title, changes in ((environment_title.get(v.verdict, "environment differences:"), v.environment),
                           ("settings that differ from the original run's:", v.settings)):
        if changes:
            lines.append(title)
            lines += [f"  {c.key}: {_shown(c.original, 40)} -> {_shown(c.rerun, 40)}" for c in changes[:30]]
            lines += [f"  and {len(changes) - 30} more (see verification.json)"] if len(changes) > 30 else []
    if v.verdict == BYTE_FOR_BYTE:
        return lines
    if not v.environment:
        lines.append("no recorded environment difference explains the changed bytes")
    if v.verdict == WITHIN_ERROR:
        lines.append("per pair, the largest difference against its allowance:")
        lines += [_agreement_line(agreement) for agreement in v.pairs]
    else:
        lines.append("what differs beyond its allowance:")
        lines += difference_table(v.differences)
    return lines
