"""A finished run folder read back: its record and, on demand, a pair's posterior of rho."""

from __future__ import annotations

import datetime as dt
import json
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from pydantic import ValidationError

from reportgen.data import SufficientStats, TableColumns, load_table, pair_data, sufficient_stats
from reportgen.difference import Posterior, posterior_from_draws, posterior_from_stats
from reportgen.errors import OutputError, ReportgenError
from reportgen.exact import MIN_PAIRS
from reportgen.models.rank import rank_posterior
from reportgen.spec import Spec, SpecDocument, expand_pairs

RECORD_FILE = "record.json"
# what compare and history read from a record; a record without them is of another shape
REQUIRED_REPRODUCIBLE = ("report_date", "resolved_spec", "data_sha256", "data_rows", "pairs")
REQUIRED_PAIR = ("pair", "x", "y", "rows_used", "sufficient_statistics", "rho", "rules", "model", "status")
DRAWS_KEYS = {"normal": "draws_file", "student_t": "robust_draws_file"}
MODEL_WORDS = {"normal": "normal model", "student_t": "Student-t model"}


@dataclass(frozen=True)
class RunSnapshot:
    folder: Path
    record: dict[str, Any]  # record.json as written by the run

    @property
    def reproducible(self) -> dict[str, Any]:
        return self.record["reproducible"]

    @property
    def report_date(self) -> dt.date:
        return dt.date.fromisoformat(self.reproducible["report_date"])

    @property
    def label(self) -> str:
        """How the run is named in tables and figures: its report date, e.g. "2026-11-30"."""
        return self.report_date.isoformat()

    @property
    def pairs(self) -> dict[str, dict[str, Any]]:
        """The record's pair entries by pair key, in the run's order."""
        return {entry["pair"]: entry for entry in self.reproducible["pairs"]}

    @property
    def resolved_spec(self) -> dict[str, Any]:
        return self.reproducible["resolved_spec"]

    @property
    def credible_mass(self) -> float:
        return float((self.resolved_spec.get("summary") or {}).get("credible_mass", 0.95))


def _refuse(folder: Path, what: str) -> OutputError:
    return OutputError(f"{folder}: {what}; point at a folder written by `reportgen run`")


def load_run(folder: Path) -> RunSnapshot:
    """Read a run folder's record.json, refusing (one line naming the folder) what compare and history
    cannot use: no folder, no or unreadable record, or a record of another tool or shape."""
    folder = Path(folder)
    if not folder.is_dir():
        raise _refuse(folder, "is not a folder" if folder.exists() else "folder not found")
    path = folder / RECORD_FILE
    try:
        record = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise _refuse(folder, f"has no {RECORD_FILE}") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise _refuse(folder, f"{RECORD_FILE} cannot be read ({getattr(exc, 'strerror', None) or exc})") from None
    reproducible = record.get("reproducible") if isinstance(record, dict) else None
    if not isinstance(reproducible, dict) or reproducible.get("tool") != "reportgen":
        raise _refuse(folder, f"{RECORD_FILE} was not written by reportgen (no reproducible.tool = \"reportgen\")")
    missing = [key for key in REQUIRED_REPRODUCIBLE if reproducible.get(key) is None]
    if missing:
        version = reproducible.get("tool_version", "an unknown version")
        raise _refuse(folder, f"{RECORD_FILE} (reportgen {version}) lacks {', '.join(missing)}; rerun it with "
                              "this version")
    for entry in reproducible["pairs"]:
        lacking = [key for key in REQUIRED_PAIR if key not in entry]
        if lacking:
            raise _refuse(folder, f"{RECORD_FILE}: pair {entry.get('pair', '?')!r} lacks {', '.join(lacking)}; "
                                  "rerun it with this version")
    try:
        dt.date.fromisoformat(reproducible["report_date"])
    except (TypeError, ValueError):
        raise _refuse(folder, f"{RECORD_FILE}: report_date {reproducible['report_date']!r} is not a date") from None
    return RunSnapshot(folder=folder, record=record)


def stats_of(entry: dict[str, Any]) -> SufficientStats:
    """A record pair's sufficient statistics as the data stage's type."""
    values = entry["sufficient_statistics"]
    return SufficientStats(n=int(values["n"]), mean_x=float(values["mean_x"]), mean_y=float(values["mean_y"]),
                           sxx=float(values["sxx"]), syy=float(values["syy"]), sxy=float(values["sxy"]),
                           rss=float(values["rss"]) if "rss" in values else None)


def rho_prior_shapes(snapshot: RunSnapshot, key: str) -> tuple[float, float]:
    """The pair's stretched-Beta shapes on rho in that run (its own override, its pair set's, or the
    spec-wide prior), from the resolved spec."""
    resolved = snapshot.resolved_spec
    try:
        document = SpecDocument.model_validate(resolved)
        for pair in expand_pairs(document):
            if pair.key == key:
                return pair.priors.rho.shapes
        return document.priors.rho.shapes
    except (ValidationError, ReportgenError, ValueError, TypeError):
        # a record from a slightly different schema: the spec-wide prior is the best reading of it
        rho = (resolved.get("priors") or {}).get("rho") or {}
        if rho.get("family", "uniform") == "uniform":
            return 1.0, 1.0
        return float(rho.get("a", 1.0)), float(rho.get("b", 1.0))


def _read_draws(path: Path) -> Any:
    import xarray as xr  # only runs with draws need it; loading it costs a second

    with xr.open_dataset(path, group="posterior", engine="h5netcdf") as posterior:
        return posterior["rho"].to_numpy()


def rho_posterior(snapshot: RunSnapshot, key: str) -> Posterior:
    """The posterior of rho the run reported for a pair: the leading model's draws when the folder holds
    them, otherwise the exact posterior from the pair's sufficient statistics (Jeffreys' priors on the
    nuisance parameters, the pair's own prior on rho), which is what the exact engine reports."""
    entry = snapshot.pairs[key]
    model = entry.get("model", "normal")
    relative = entry.get(DRAWS_KEYS.get(model, ""))
    path = snapshot.folder / relative if relative else None
    if path is not None and path.is_file():
        try:
            draws = _read_draws(path)
        except (OSError, KeyError, ValueError) as exc:
            raise OutputError(f"{path}: the draws of pair {key!r} cannot be read ({exc}); rerun the run "
                              "or remove the file") from None
        return posterior_from_draws(draws, f"draws of the {MODEL_WORDS.get(model, model)} ({draws.size:,})")
    stats = stats_of(entry)
    if relative:
        why = f"its draws file {relative} is missing"
    elif model in DRAWS_KEYS:
        why = "the run used the exact engine"
    else:
        why = f"the leading model ({model}) keeps no draws of rho"
    a, b = rho_prior_shapes(snapshot, key)
    return posterior_from_stats(stats, a, b,
                                source=f"exact posterior from the sufficient statistics (Jeffreys' priors, "
                                       f"n = {stats.n:,}), because {why}")


# ----------------------------------------------------------------------------- settings and periods


def _text(value: Any) -> str:
    return value if isinstance(value, str) else json.dumps(value, ensure_ascii=False)


def _list_key(item: Any) -> str | None:
    """Lists whose entries have a name are keyed by it, so inserting one entry does not renumber the rest."""
    if not isinstance(item, dict):
        return None
    if isinstance(item.get("name"), str):
        return item["name"]
    if isinstance(item.get("x"), str) and isinstance(item.get("y"), str):
        return f"{item['x']} vs {item['y']}"
    return None


def flatten(value: Any, prefix: str = "") -> Iterator[tuple[str, str]]:
    """(key path, value as text) for every leaf: nested tables joined with dots, named list entries as
    ``rules[name]`` or ``pairs[x vs y]``, others by position; a list of plain values is one leaf."""
    if isinstance(value, dict):
        for key, item in value.items():
            yield from flatten(item, f"{prefix}.{key}" if prefix else str(key))
    elif isinstance(value, list) and any(isinstance(item, (dict, list)) for item in value):
        keys = [_list_key(item) for item in value]
        named = all(keys) and len(set(keys)) == len(keys)
        for index, item in enumerate(value):
            yield from flatten(item, f"{prefix}[{keys[index] if named else index}]")
    else:
        yield prefix, _text(value)


def period_posteriors(new: RunSnapshot, new_data: Path, old_rows: int) -> dict[str, tuple[Posterior, Posterior]]:
    """Per pair of the run, the exact posteriors (Jeffreys' priors, normal model, the pair's prior on rho)
    of the data file's first ``old_rows`` rows and of the rows after them.

    The rows are read again with the data stage's own reader and the newer run's resolved spec, rather
    than derived from the two records' statistics: subtracting pooled sums loses precision when few rows
    are added, and it would silently mix two reading rules if the spec's data settings changed. A pair
    whose added (or earlier) rows cannot give a posterior is left out and compared as independent runs.
    """
    try:
        document = SpecDocument.model_validate(new.resolved_spec)
        data = document.data.model_copy(update={"path": str(Path(new_data).resolve()),
                                                "confine_to_spec_folder": False})
        document = document.model_copy(update={"data": data})
        spec_path = Path(new.record.get("run", {}).get("spec_path") or Path(new_data).parent / "spec.toml")
        spec = Spec(document=document, source_path=spec_path, source_sha256=new.reproducible.get("spec_sha256", ""),
                    source_text="", pairs=expand_pairs(document))
        table = load_table(spec)
    except (ReportgenError, ValueError):
        return {}
    if old_rows >= table.n_rows:
        return {}
    first_added = int(table.frame.index[old_rows])  # rows carry their line (or row) number in the file
    out = {}
    columns = TableColumns(table)  # each column parsed once, however many pairs name it
    for pair in spec.pairs:
        if pair.key not in new.pairs:
            continue
        try:
            rows = pair_data(table, pair, document.data.missing, columns)
        except ReportgenError:
            continue
        earlier = rows.row_numbers < first_added
        sides = []
        for mask, which in ((earlier, "earlier"), (~earlier, "added")):
            if int(mask.sum()) < MIN_PAIRS or min(np.ptp(rows.x[mask]), np.ptp(rows.y[mask])) == 0:
                break
            a, b = pair.priors.rho.shapes
            if new.pairs[pair.key].get("model", "normal") == "normal":
                stats = sufficient_stats(rows.x[mask], rows.y[mask])
                sides.append(posterior_from_stats(stats, a, b, source=f"exact posterior of the {stats.n:,} "
                                                                      f"{which} rows (Jeffreys' priors, normal model)"))
            else:
                sides.append(robust_period_posterior(rows.x[mask], rows.y[mask], a, b, which))
        if len(sides) == 2:
            out[pair.key] = (sides[0], sides[1])
    return out


def robust_period_posterior(x: np.ndarray, y: np.ndarray, prior_a: float, prior_b: float, which: str) -> Posterior:
    """A period's posterior for a pair whose robust fit leads: the rank model's (Kendall's tau, van Doorn et
    al. 2018, on Pearson's scale), which needs no sampler. Setting the normal model's rho of each period
    against a robust fit's headline would let the very rows that made the robust fit lead (outliers)
    decide the change."""
    posterior = rank_posterior(x, y, prior_a, prior_b)
    grid, density = np.asarray(posterior.rho, dtype=float), np.asarray(posterior.density, dtype=float)
    keep = np.concatenate(([True], np.diff(grid) > 0))  # ends rounded to +/-1 repeat: keep an increasing grid
    return Posterior(source=f"rank-based posterior of the {x.size:,} {which} rows (Kendall's tau, "
                            "van Doorn et al. 2018, on Pearson's scale)", grid=grid[keep], density=density[keep])
