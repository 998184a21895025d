"""The run record: everything a reviewer needs to trace and re-run a report.

The record has two parts. ``reproducible`` holds only what the inputs and the
software determine (hashes, resolved spec, seeds, versions, platform,
diagnostics), so it is identical when a run is repeated and is what the
report's appendix shows. ``run`` holds what changes every time (clock times,
wall times, the command line) and where the inputs were on this machine.
``environment`` holds what else decides the bytes (native libraries, fonts,
threads, CPU; see ``runs.environment``): outside the reproducible part,
because that part is printed in the report and a CPU name must not change it.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import importlib.metadata
import platform
import sys
import time
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from reportgen import __version__
from reportgen.data import Table
from reportgen.fit import PairFit
from reportgen.results import RunResults
from reportgen.runs.environment import (
    environment_fingerprint,
    folder_sha256,
    logo_file,
    optional_sha256,
    templates_folder,
)
from reportgen.spec import Spec
from reportgen.spec.loading import replaced_priors

SCIENTIFIC_PACKAGES = (
    "numpy", "scipy", "pandas", "pymc", "pytensor", "arviz", "nutpie", "numba", "xarray",
    "h5netcdf", "matplotlib", "jinja2", "weasyprint", "pydantic", "click", "openpyxl", "pyarrow",
)


def package_versions() -> dict[str, str]:
    versions = {"python": platform.python_version()}
    for name in SCIENTIFIC_PACKAGES:
        try:
            versions[name] = importlib.metadata.version(name)
        except importlib.metadata.PackageNotFoundError:
            versions[name] = "not installed"
    return versions


def platform_fingerprint() -> dict[str, str]:
    """Same seed gives the same draws only on the same platform and BLAS (see PITFALLS)."""
    blas = "unknown"
    try:
        config = np.show_config(mode="dicts")
        blas_info = config.get("Build Dependencies", {}).get("blas", {})
        blas = f"{blas_info.get('name', '?')} {blas_info.get('version', '')}".strip()
    except Exception:  # numpy's config reporting differs across builds; the record must not fail
        pass
    return {
        "system": platform.system(),
        "release": platform.release(),
        "machine": platform.machine(),
        "python_implementation": platform.python_implementation(),
        "numpy_blas": blas,
        "byteorder": sys.byteorder,
    }


def safe_file_stem(key: str) -> str:
    """A file name unique per pair: columns "a b" and "a_b" must not share a draws file."""
    cleaned = "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in key).strip("_")[:100] or "pair"
    return f"{cleaned}-{hashlib.sha256(key.encode()).hexdigest()[:8]}"


def draws_file(key: str, model: str) -> str:
    """Where a pair's draws of one model are kept, relative to the output folder."""
    return f"draws/{safe_file_stem(key)}{'' if model == 'normal' else '-' + model}.nc"


def draws_sha256(fit: PairFit) -> str:
    """Hash of the draws' bytes: netCDF files carry timestamps, the arrays do not."""
    digest = hashlib.sha256()
    for name in sorted(fit.draws):
        digest.update(name.encode())
        digest.update(np.ascontiguousarray(fit.draws[name], dtype="<f8").tobytes())
    return digest.hexdigest()


ENGINE_TEXT = {
    "mcmc": "mcmc (NUTS via nutpie; the model is compiled once per prior structure)",
    "exact": "exact (marginal posterior of rho under Jeffreys' priors, by quadrature; no sampling)",
}


def _finite(value: float, digits: int) -> float | None:
    return round(value, digits) if np.isfinite(value) else None


@dataclass
class RunClock:
    started: dt.datetime = field(default_factory=lambda: dt.datetime.now(dt.UTC))
    pair_seconds: dict[str, float] = field(default_factory=dict)
    compile_seconds: dict[str, float] = field(default_factory=dict)
    # wall seconds of each stage of the run, in order (see ``lap``)
    stage_wall: dict[str, float] = field(default_factory=dict)

    def lap(self, name: str, since: float) -> float:
        """Record the wall time of stage ``name`` since ``since`` (a ``time.perf_counter`` value); returns now."""
        now = time.perf_counter()
        self.stage_wall[name] = now - since
        return now

    def stages(self, fits: dict[str, tuple[PairFit, ...]]) -> dict[str, float]:
        """Where the run's time went: each stage's wall seconds, and the fitting stage split into compiling,
        sampling and summarising, summed over pairs (with worker processes these sums are seconds of work,
        which may exceed the stage's wall time)."""
        sampling = sum(fit.seconds for pair_fits in fits.values() for fit in pair_fits)
        compiling = sum(self.compile_seconds.values())
        work = sum(self.pair_seconds.values())
        split = {"compiling (work)": compiling, "sampling (work)": sampling,
                 "summarising (work)": max(work - sampling - compiling, 0.0)}
        return {name: round(seconds, 3) for name, seconds in {**self.stage_wall, **split}.items()}


def build_record(
    spec: Spec,
    table: Table,
    results: RunResults,
    fits: dict[str, tuple[PairFit, ...]],
    clock: RunClock,
    command_line: list[str],
    cores: int,
) -> dict[str, Any]:
    document = spec.document
    pairs = []
    for pair in results.pairs:
        by_model = {fit.model: fit for fit in fits.get(pair.key, ())}
        fit = by_model.get("normal")
        robust = by_model.get("student_t")
        d = pair.diagnosis
        pairs.append({
            "pair": pair.key,
            "x": pair.x,
            "y": pair.y,
            "rows_used": pair.n,
            "rows_dropped": pair.n_dropped,
            "sufficient_statistics": dict(pair.sufficient),
            "seed": fit.seed if fit else pair.seed,
            "draws_sha256": draws_sha256(fit) if fit else None,
            "draws_file": draws_file(pair.key, "normal") if fit else None,
            "rho": {"mean": pair.rho.mean, "sd": pair.rho.sd, "median": pair.rho.median,
                    "lower": pair.rho.lower, "upper": pair.rho.upper},
            "rules": [{"name": rule.name, "statement": rule.statement, "probability": rule.probability,
                       "required": rule.required, "verdict": rule.verdict, "mcse": rule.mcse,
                       "borderline": rule.borderline} for rule in pair.rules],
            "model": pair.model,
            "model_requested": pair.choice.requested if pair.choice is not None else pair.model,
            "model_warnings": list(pair.checks.codes) if pair.checks is not None else [],
            "influential_rows": ([int(r) for r in pair.checks.influence.flagged_rows]
                                 if pair.checks is not None else []),
            "prior_sensitive_rules": list(pair.sensitivity.changed_rules) if pair.sensitivity is not None else [],
            "robust_seed": robust.seed if robust else None,
            "robust_draws_sha256": draws_sha256(robust) if robust else None,
            "robust_draws_file": draws_file(pair.key, "student_t") if robust else None,
            "status": d.status,
            "status_reasons": list(d.reasons),
            "rhat_max": _finite(d.rhat_max, 6),
            "ess_bulk_min": _finite(d.ess_bulk_min, 3),
            "ess_tail_min": _finite(d.ess_tail_min, 3),
            "divergences": d.divergences,
            "bfmi_min": _finite(d.bfmi_min, 6),
            "engine": pair.engine,
            "log_bf10": round(pair.crosscheck.log_bf10, 9),
            # every sampling run (a fit with too many divergences is re-run at a higher target acceptance);
            # the wall times stay out: this part of the record must be identical when the run is repeated
            "target_accept": fit.target_accept if fit and fit.attempts else None,
            "sampling_attempts": [{"target_accept": a.target_accept, "divergences": a.divergences}
                                  for a in (fit.attempts if fit else ())],
            "robust_target_accept": robust.target_accept if robust and robust.attempts else None,
            "robust_sampling_attempts": [{"target_accept": a.target_accept, "divergences": a.divergences}
                                         for a in (robust.attempts if robust else ())],
        })
    finished = dt.datetime.now(dt.UTC)
    return {
        "reproducible": {
            "tool": "reportgen",
            "tool_version": __version__,
            "report_date": document.report.date.isoformat() if document.report.date else None,
            "spec_file": spec.source_path.name,
            "spec_sha256": spec.source_sha256,
            "resolved_spec": document.model_dump(mode="json"),
            "command_line_overrides": dict(spec.overrides),
            "data_file": table.path.name,
            "data_sha256": table.sha256,
            "data_bytes": spec.data_path.stat().st_size,
            "data_rows": table.n_rows,
            "data_encoding": table.encoding or None,
            "engine": ENGINE_TEXT[document.engine],
            # the spec's priors on the means and SDs that the exact engine did not use (it integrates them
            # out under Jeffreys' priors); empty when every prior the spec gives was used
            "priors_replaced": list(replaced_priors(spec)),
            "sampler": document.sampler.model_dump(mode="json") | {"cores": cores},
            "master_seed": document.sampler.seed,
            "templates_sha256": folder_sha256(templates_folder(spec)),
            "logo_sha256": optional_sha256(logo_file(spec)),
            "seed_derivation": ("numpy SeedSequence(master seed, spawn key from the SHA-256 of the two column "
                                "names); the same pair always gets the same seed"),
            "pairs": pairs,
            "overall_status": results.status,
            "versions": package_versions(),
            "platform": platform_fingerprint(),
        },
        "run": {
            "started_utc": clock.started.isoformat(timespec="seconds"),
            "finished_utc": finished.isoformat(timespec="seconds"),
            "wall_seconds_total": round((finished - clock.started).total_seconds(), 3),
            "wall_seconds_per_pair": {k: round(v, 3) for k, v in clock.pair_seconds.items()},
            "compile_seconds": {k: round(v, 3) for k, v in clock.compile_seconds.items()},
            "command_line": command_line,
            # where the inputs were on this machine: verify looks there (paths differ between machines,
            # so they stay out of the reproducible part)
            "spec_path": str(spec.source_path.resolve()),
            "data_path": str(spec.data_path.resolve()),
            # the spec as written: the report prints it, so verify needs it when the file has moved
            "spec_text": spec.source_text,
        },
        "environment": environment_fingerprint(spec),
    }
