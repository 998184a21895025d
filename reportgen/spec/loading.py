"""Stage 1, the loading: read a spec file, validate it and expand its pairs into frozen objects."""

from __future__ import annotations

import errno
import hashlib
import itertools
import os
import stat
import tomllib
from collections.abc import Iterable
from pathlib import Path
from typing import Any

from pydantic import ValidationError

from reportgen.errors import SpecError
from reportgen.spec.messages import describe_problem, describe_validation_error, format_location
from reportgen.spec.schema import (
    GroupsModel,
    ModelName,
    PairEntry,
    PairSet,
    PriorOverrides,
    Priors,
    Sampler,
    SpecDocument,
    Variable,
    _Frozen,
)


class PairSpec(_Frozen):
    """One pair to fit, with its priors resolved."""

    x: str
    y: str
    label: str
    priors: Priors
    pair_set: str = ""  # the pair set this pair came from; "" for a listed pair
    model: ModelName = "normal"
    # Every pair set whose matrix shows this pair: its own, and for a listed pair each set that holds both
    # its columns (the listed pair is fitted once, with its own settings, and drawn in those matrices too).
    pair_sets: tuple[str, ...] = ()
    group_by: str = ""  # the grouping column; "" for none
    groups: GroupsModel = "separate"  # how the groups are fitted: each alone, or partially pooled as well
    controls: tuple[str, ...] = ()  # the columns the partial correlation adjusts for

    @property
    def key(self) -> str:
        """Stable identity of the pair, used in tables, file names and seeds."""
        return f"{self.x} vs {self.y}"


class Spec(_Frozen):
    """The validated spec, with pairs expanded and paths resolved."""

    document: SpecDocument
    source_path: Path
    source_sha256: str
    source_text: str
    pairs: tuple[PairSpec, ...]
    overrides: tuple[tuple[str, str], ...] = ()  # command-line settings that replace the file's

    @property
    def base_dir(self) -> Path:
        return self.source_path.parent

    @property
    def data_path(self) -> Path:
        return self.resolve_input(self.document.data.path, "data.path")

    def resolve_input(self, relative: str, key: str) -> Path:
        """An input path from the spec, resolved against the spec's folder.

        Raises SpecError when ``data.confine_to_spec_folder`` is set and the path
        (after following ``..`` and links) leaves that folder.
        """
        written = self.base_dir / relative
        try:
            path = written.resolve()
        except RuntimeError:  # Python 3.11's Path.resolve raises this for a link loop
            target = "the data file" if key == "data.path" else "the file or folder"
            raise SpecError(f"{written}: is a symbolic link that leads, through links, back to itself; "
                            f"point {key} at {target} itself") from None
        if self.document.data.confine_to_spec_folder:
            folder = self.base_dir.resolve()
            if path != folder and folder not in path.parents:
                raise SpecError(f"{self.source_path}: `{key}` = {relative!r} leads outside the spec's folder, "
                                "which data.confine_to_spec_folder = true forbids; move the file into "
                                f"{folder} or set the option to false")
        return path

    @property
    def columns_needed(self) -> tuple[str, ...]:
        seen: dict[str, None] = {}
        for pair in self.pairs:
            seen.setdefault(pair.x)
            seen.setdefault(pair.y)
            for column in pair.controls:
                seen.setdefault(column)
        return tuple(seen)

    @property
    def group_columns(self) -> tuple[str, ...]:
        """The grouping columns the pairs name, read as labels rather than numbers."""
        return tuple(dict.fromkeys(pair.group_by for pair in self.pairs if pair.group_by))

    def variable(self, column: str) -> Variable:
        return self.document.variables.get(column, Variable())

    def display_name(self, column: str) -> str:
        return self.variable(column).label or column


def _merge_priors(base: Priors, overrides: PriorOverrides) -> Priors:
    return Priors(
        rho=overrides.rho or base.rho,
        means=overrides.means or base.means,
        sds=overrides.sds or base.sds,
    )


def expand_pairs(document: SpecDocument, source: Path | None = None) -> tuple[PairSpec, ...]:
    """Explicit pairs first, then every pair among each pair set's columns.

    A pair set may hold a listed pair: that pair is fitted once, as listed (label, model, priors), and
    named in ``pair_sets`` so the set's matrix still shows it. The same pair listed twice, or in two pair
    sets, is refused: which settings it should have would be a guess.
    """
    pairs: list[PairSpec] = []
    seen: dict[frozenset[str], str] = {}
    listed: dict[frozenset[str], int] = {}  # a listed pair's position in ``pairs``
    # the key names the pair's results row, draws file, report section and seed record: it must be unique
    keys: dict[str, tuple[str, str, str]] = {}
    prefix = f"{source}: " if source is not None else ""

    def add(x: str, y: str, label: str, priors: Priors, where: str, pair_set: str,
            model: str | None, entry: PairEntry | PairSet | None) -> None:
        if x == y:
            raise SpecError(f"{prefix}`{where}`: a pair needs two different columns, got `{x}` as both "
                            "x and y; change one of them")
        group_by, groups, controls = _grouping(document, entry, x, y, f"{prefix}`{where}`")
        identity = frozenset((x, y))
        if pair_set and identity in listed:
            index = listed[identity]
            shown = pairs[index]
            if pair_set not in shown.pair_sets:
                pairs[index] = shown.model_copy(update={"pair_sets": (*shown.pair_sets, pair_set)})
            return
        if identity in seen:
            raise SpecError(f"{prefix}`{where}`: the pair ({x}, {y}) is already listed at `{seen[identity]}`; "
                            "remove one of them")
        seen[identity] = where
        pair = PairSpec(x=x, y=y, label=label, priors=priors, pair_set=pair_set, model=model or document.model,
                        pair_sets=(pair_set,) if pair_set else (), group_by=group_by, groups=groups,
                        controls=controls)
        if pair.key in keys:
            other_x, other_y, other_where = keys[pair.key]
            raise SpecError(f"{prefix}`{where}`: the pair ({x}, {y}) would be named \"{pair.key}\", like the pair "
                            f"({other_x}, {other_y}) at `{other_where}`, and each pair needs its own name for its "
                            "results row and draws file; rename a column whose name contains \" vs \" in the "
                            "data, or remove one of the two pairs")
        keys[pair.key] = (x, y, where)
        if not pair_set:
            listed[identity] = len(pairs)
        pairs.append(pair)

    for index, entry in enumerate(document.pairs):
        add(entry.x, entry.y, entry.label, _merge_priors(document.priors, entry.priors), f"pairs[{index}]", "",
            entry.model, entry)
    for index, pair_set in enumerate(document.pair_sets):
        repeated = sorted({c for c in pair_set.columns if pair_set.columns.count(c) > 1})
        if repeated:
            raise SpecError(f"{prefix}`pair_sets[{index}].columns`: `{repeated[0]}` is listed more than once; "
                            "list each column once")
        # every pair of the set has the same priors: merged (and validated) once, not once a pair
        priors = _merge_priors(document.priors, pair_set.priors)
        where = f"pair_sets[{index}] ({pair_set.name})"
        for x, y in itertools.combinations(pair_set.columns, 2):
            add(x, y, "", priors, where, pair_set.name, pair_set.model, pair_set)
    return tuple(pairs)


def _grouping(document: SpecDocument, entry: PairEntry | PairSet | None, x: str, y: str,
              where: str) -> tuple[str, GroupsModel, tuple[str, ...]]:
    """A pair's grouping column, groups model and control columns: its own where set, else the spec-wide ones.

    The grouping and control columns must differ from the pair's own columns and from each other: a column
    cannot both be correlated and adjusted for, or split the rows it is measured on.
    """
    group_by = entry.group_by if entry is not None and entry.group_by is not None else document.group_by
    groups = entry.groups if entry is not None and entry.groups is not None else document.groups
    controls = entry.controls if entry is not None and entry.controls is not None else document.controls
    if group_by in (x, y):
        raise SpecError(f"{where}: group_by = \"{group_by}\" is one of the pair's own columns; group by "
                        "another column, or set group_by = \"\" for this pair")
    for column in controls:
        if column in (x, y):
            raise SpecError(f"{where}: controls names `{column}`, one of the pair's own columns; a column cannot "
                            "be adjusted for in its own correlation, so remove it from controls")
        if column == group_by:
            raise SpecError(f"{where}: `{column}` is both the grouping column and a control; keep it in one")
    repeated = sorted({c for c in controls if controls.count(c) > 1})
    if repeated:
        raise SpecError(f"{where}: controls lists `{repeated[0]}` more than once; list each column once")
    return group_by, groups, tuple(controls)


MAX_NESTING = 32  # a spec needs about 5 levels ([[pairs]] -> priors -> rho -> value)


def _nesting_depth(value: Any) -> int:
    """How deeply lists and tables nest inside ``value``, counted without recursion."""
    deepest = 0
    stack: list[tuple[Any, int]] = [(value, 0)]
    while stack:
        item, depth = stack.pop()
        deepest = max(deepest, depth)
        if deepest > MAX_NESTING:
            break
        if isinstance(item, dict):
            stack.extend((child, depth + 1) for child in item.values())
        elif isinstance(item, list):
            stack.extend((child, depth + 1) for child in item)
    return deepest


def parse_spec_text(text: str, source: Path) -> SpecDocument:
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(f"{source}: not valid TOML ({exc}); check quotes, brackets and '=' signs") from None
    except RecursionError:
        raise SpecError(f"{source}: not valid TOML for a spec (arrays or tables nested too deeply); "
                        "check the brackets") from None
    if _nesting_depth(raw) > MAX_NESTING:
        # Whether the TOML reader itself runs out of stack depends on the process's recursion limit
        # (importing PyMC raises it), so deep nesting is refused here by measure, the same way every time.
        raise SpecError(f"{source}: not valid TOML for a spec (arrays or tables nested too deeply); "
                        "check the brackets")
    try:
        return SpecDocument.model_validate(raw)
    except ValidationError as exc:
        raise SpecError(describe_validation_error(exc, source)) from None
    except ValueError as exc:  # validators raising outside a field
        raise SpecError(f"{source}: {exc}") from None


def _decode_spec(raw_bytes: bytes, source: Path) -> str:
    try:
        return raw_bytes.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw_bytes[: exc.start].count(b"\n") + 1
        byte = raw_bytes[exc.start]
        raise SpecError(f"{source}: the spec must be UTF-8 text, and line {line} has the byte 0x{byte:02X}, "
                        "which is not UTF-8; re-save the file as UTF-8") from None


def _not_a_file(source: Path, mode: int) -> SpecError:
    """The error for a spec path that exists but is not a regular file, saying what it is instead."""
    if stat.S_ISDIR(mode):
        what = "is a folder, not a spec file"
    elif stat.S_ISFIFO(mode):
        what = "is a named pipe (FIFO), not a file"
    elif stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        what = "is a device, not a file"
    elif stat.S_ISSOCK(mode):
        what = "is a socket, not a file"
    else:
        what = "is not a regular file"
    return SpecError(f"{source}: {what}; give the path of the .toml file")


def _read_spec_bytes(source: Path) -> bytes:
    """The spec file's bytes; a folder, pipe, device or link loop is named as such, and a pipe never blocks."""
    try:
        mode = os.stat(source).st_mode
        if not stat.S_ISREG(mode):
            raise _not_a_file(source, mode)
        # Opened without blocking and checked again through the open file: a path swapped for a pipe
        # after the first check must not hang the run.
        descriptor = os.open(source, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_BINARY", 0))
        with os.fdopen(descriptor, "rb") as handle:
            mode = os.fstat(handle.fileno()).st_mode
            if not stat.S_ISREG(mode):
                raise _not_a_file(source, mode)
            return handle.read()
    except FileNotFoundError:
        dangling = os.path.islink(source)
        raise SpecError(f"{source}: {'is a symbolic link to a missing file' if dangling else 'spec file not found'}"
                        "; check the path") from None
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            raise SpecError(f"{source}: is a symbolic link loop (its links lead back to themselves); "
                            "point the link at the spec file or give the file's own path") from None
        raise SpecError(f"{source}: the spec file cannot be read ({exc.strerror or type(exc).__name__}); "
                        "check the path and its permissions") from None


def load_spec(path: str | Path) -> Spec:
    """Read, validate and resolve a spec file.

    Raises
    ------
    SpecError
        For a missing or unreadable file, invalid TOML, or any rule broken.
    """
    source = Path(path)
    raw_bytes = _read_spec_bytes(source)
    text = _decode_spec(raw_bytes, source)
    document = parse_spec_text(text, source)
    pairs = expand_pairs(document, source)
    return Spec(
        document=document,
        source_path=source.resolve(),
        source_sha256=hashlib.sha256(raw_bytes).hexdigest(),
        source_text=text,
        pairs=pairs,
    )


def with_engine(spec: Spec, engine: str | None) -> Spec:
    """A copy of ``spec`` using ``engine`` ("mcmc" or "exact") when one is given."""
    if engine is None or engine == spec.document.engine:
        return spec
    return spec.model_copy(update={"document": spec.document.model_copy(update={"engine": engine}),
                                   "overrides": (*spec.overrides, ("engine", engine))})


def check_engine_models(spec: Spec) -> None:
    """The exact engine computes only the normal model's rho: a Student-t fit needs the sampler."""
    if spec.document.engine != "exact":
        return
    for pair in spec.pairs:
        if pair.model == "student_t":
            raise SpecError(f"{spec.source_path}: pair ({pair.x}, {pair.y}) asks for model = \"student_t\", "
                            "which needs the sampler, but engine = \"exact\"; set engine = \"mcmc\", or "
                            "model = \"auto\" (with the exact engine its robust fit is the rank model)")


def with_model(spec: Spec, model: str | None) -> Spec:
    """A copy of ``spec`` fitting every pair with ``model`` (the command line's ``--model``)."""
    if model is None:
        return spec
    document = spec.document.model_copy(update={"model": model})
    pairs = tuple(pair.model_copy(update={"model": model}) for pair in spec.pairs)
    return spec.model_copy(update={"document": document, "pairs": pairs,
                                   "overrides": (*spec.overrides, ("model", model))})


def with_sampler_overrides(spec: Spec, **overrides: int | None) -> Spec:
    """A copy of ``spec`` with command-line sampler settings applied and re-validated."""
    chosen = {k: v for k, v in overrides.items() if v is not None}
    if not chosen:
        return spec
    merged = spec.document.sampler.model_dump() | chosen
    try:
        sampler = Sampler.model_validate(merged)
    except ValidationError as exc:
        first = exc.errors(include_url=False)[0]
        location = tuple(first["loc"])
        problem = describe_problem(first, ("sampler", *location))
        raise SpecError(f"--{format_location(location)}: {problem}") from None
    document = spec.document.model_copy(update={"sampler": sampler})
    noted = tuple((f"sampler.{key}", str(value)) for key, value in chosen.items())
    return spec.model_copy(update={"document": document, "overrides": (*spec.overrides, *noted)})


# A quick look: few draws, judged against what those draws can give. The effective sample size a short run
# can reach is a share of its draws (a quarter here); R-hat from two short chains is noisier, so its limit
# widens to 1.05 (a common limit for exploratory runs). The report is marked as a draft on every page.
QUICK_SAMPLER = {"draws": 200, "tune": 200, "chains": 2}
QUICK_ESS_SHARE = 0.25
QUICK_RHAT_MAX = 1.05


def with_quick(spec: Spec, given: Iterable[str] = ()) -> Spec:
    """A copy of ``spec`` for a quick draft: short chains (except the settings in ``given``, which the user
    set on the command line), thresholds they can reach, and the report marked as a draft."""
    given = set(given)
    document = spec.document
    sampler = document.sampler.model_copy(update={k: v for k, v in QUICK_SAMPLER.items() if k not in given})
    reach = QUICK_ESS_SHARE * sampler.chains * sampler.draws
    diagnostics = document.diagnostics.model_copy(update={
        "ess_min": min(document.diagnostics.ess_min, reach),
        "rhat_max": max(document.diagnostics.rhat_max, QUICK_RHAT_MAX)})
    report = document.report.model_copy(update={"draft": True})
    document = document.model_copy(update={"sampler": sampler, "diagnostics": diagnostics, "report": report})
    noted = (("quick", "true"), ("diagnostics.ess_min", f"{diagnostics.ess_min:g}"),
             ("diagnostics.rhat_max", f"{diagnostics.rhat_max:g}"),
             *((f"sampler.{k}", str(getattr(sampler, k))) for k in QUICK_SAMPLER if k not in given))
    return spec.model_copy(update={"document": document, "overrides": (*spec.overrides, *noted)})


def replaced_priors(spec: Spec) -> tuple[str, ...]:
    """The spec's priors on the means and SDs that the exact engine replaces by Jeffreys' (flat means,
    1/sigma SDs), named as "normal means" or "half-normal SDs"; empty under the sampler.

    The exact engine integrates the means and SDs out in closed form only under those priors, so any
    other family the spec gives them is not used. Rank pairs are left out: their likelihood has no means
    or SDs, so nothing is replaced there.
    """
    if spec.document.engine != "exact":
        return ()
    names: set[str] = set()
    for pair in spec.pairs:
        if pair.model == "rank":
            continue
        if pair.priors.means.family != "flat":
            names.add(f"{pair.priors.means.family.replace('_', '-')} means")
        if pair.priors.sds.family != "jeffreys":
            names.add(f"{pair.priors.sds.family.replace('_', '-')} SDs")
    # means before SDs, then by name: the console line reads "normal means and half-normal SDs"
    return tuple(sorted(names, key=lambda name: (name.endswith("SDs"), name)))


def spec_from_resolved(
    resolved: dict[str, Any],
    source_path: Path,
    *,
    source_sha256: str,
    source_text: str,
    overrides: tuple[tuple[str, str], ...] = (),
    data_path: Path | None = None,
    where: Path | None = None,
) -> Spec:
    """A Spec rebuilt from a resolved spec (a SpecDocument dump, as a run record keeps it), validated again.

    ``source_path`` is where the spec file was, so relative data, logo and template paths resolve as they
    did; ``data_path`` replaces the data path (a data file that has moved). ``where`` names the file the
    dump came from in messages.

    Raises
    ------
    SpecError
        When the dump no longer passes the rules (a record from a version with other rules).
    """
    where = where or source_path
    if not isinstance(resolved, dict):
        raise SpecError(f"{where}: the resolved spec is not a table; it was not written by reportgen")
    raw = {**resolved}
    if data_path is not None:
        raw["data"] = {**(raw.get("data") or {}), "path": str(Path(os.path.abspath(data_path)))}
    try:
        document = SpecDocument.model_validate(raw)
    except ValidationError as exc:
        raise SpecError(describe_validation_error(exc, where)) from None
    except ValueError as exc:
        raise SpecError(f"{where}: {exc}") from None
    return Spec(document=document, source_path=Path(os.path.abspath(source_path)), source_sha256=source_sha256,
                source_text=source_text, pairs=expand_pairs(document, where), overrides=overrides)
