"""Stage 1: read and validate the TOML spec into frozen, typed objects.

The spec is validated as a whole before any data is read or any model is
fitted. Unknown keys are errors (with a suggestion), because a misspelt key
that is silently ignored changes a report without anyone noticing.
"""

from __future__ import annotations

import datetime as dt
import difflib
import errno
import hashlib
import itertools
import os
import re
import stat
import tomllib
import typing
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, ValidationInfo, field_validator, model_validator

from reportgen.errors import SpecError

RULE_NAME_PATTERN = r"^[a-z][a-z0-9_]{0,39}$"
MAX_DRAWS = 200_000
MAX_CHAINS = 64

# The fewest settings with which the convergence checks (reportgen.diagnostics) run and mean something.
# Measured on 12- and 30-row pairs (normal, Student-t and auto models, several seeds): 1 kept draw makes
# E-BFMI divide by zero; ArviZ's split R-hat and ESS need 2 chains of 4 draws (nan below that); R-hat of
# one chain is unknown, and one untuned chain often never moves, which broke the density estimate. Of 48
# chains of 20 draws, 46 never moved at tune = 1, 15 to 19 at tune = 2 and 5, none at tune = 10; 20 keeps a margin.
MIN_DRAWS = 20
MIN_TUNE = 20
MIN_CHAINS = 2
SAMPLER_MINIMUM_REASONS = {
    "draws": "the convergence checks (R-hat, ESS, Monte Carlo error) are estimated from each chain's kept draws "
             "and fail or mean nothing with fewer",
    "tune": "with fewer tuning draws the sampler's step size is not adapted and chains often never move",
    "chains": "R-hat compares chains, so one chain cannot show that the sampler converged",
}

# Longest text each kind of field takes. Long unbroken words wrap in the report (templates/report.css),
# but the layout time grows faster than the text (measured: a 20,000-character subtitle took 9 s).
MAX_LINE_TEXT = 200  # a title, label, name or sheet: one line of a heading or a table cell
MAX_SUBTITLE_TEXT = 300
MAX_UNIT_TEXT = 50
MAX_PARAGRAPH_TEXT = 1000  # a rule's description, the confidentiality note
MAX_COLUMN_NAME = 1000  # names from the data's header, which can be a whole survey question
MAX_PATH_TEXT = 4096  # PATH_MAX on Linux
LineText = Annotated[str, Field(max_length=MAX_LINE_TEXT)]
ColumnName = Annotated[str, Field(min_length=1, max_length=MAX_COLUMN_NAME)]
PathText = Annotated[str, Field(max_length=MAX_PATH_TEXT)]

# The fixed columns of results.csv that start with "p_" (reportgen.results.table.results_rows). Rule
# columns are p_<rule> (and p_<rule>_mcse), so these rule names would repeat a header. The list is kept
# here because spec is upstream of results; tests/test_spec_limits.py checks it against the real header.
FIXED_P_COLUMNS = ("p_positive", "p_rope", "p_value")
MCSE_SUFFIX = "_mcse"
RESERVED_RULE_NAMES = frozenset(
    {column.removeprefix("p_") for column in FIXED_P_COLUMNS}
    | {column.removeprefix("p_").removesuffix(MCSE_SUFFIX) for column in FIXED_P_COLUMNS
       if column.endswith(MCSE_SUFFIX)})


CONTROL_CHARACTERS = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]")


def _types_in(annotation: Any) -> set[Any]:
    """Every type named in a field's annotation (``int | None`` gives int and NoneType)."""
    found = {annotation}
    for arg in typing.get_args(annotation):
        found |= _types_in(arg)
    return found


class _Frozen(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class _Strict(_Frozen):
    """A table of the spec as the user writes it: no unknown keys, no nan/inf, no true/false as a number."""

    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)

    @field_validator("*", mode="before")
    @classmethod
    def _plain_values(cls, value: Any, info: ValidationInfo) -> Any:
        field = cls.model_fields.get(info.field_name or "")
        types = _types_in(field.annotation) if field is not None else set()
        if isinstance(value, bool) and types & {int, float} and bool not in types:
            raise ValueError(f"should be a number, not {str(value).lower()}")
        if isinstance(value, str) and str in types:
            control = CONTROL_CHARACTERS.search(value)
            if control:
                raise ValueError(f"contains the control character U+{ord(control.group()):04X}; remove it")
        return value


class ReportMeta(_Strict):
    title: Annotated[str, Field(min_length=1, max_length=MAX_LINE_TEXT)]
    subtitle: Annotated[str, Field(max_length=MAX_SUBTITLE_TEXT)] = ""
    client: LineText = ""
    author: LineText = ""
    date: dt.date | None = None
    confidentiality: Annotated[str, Field(max_length=MAX_PARAGRAPH_TEXT)] = (
        "Confidential: prepared for the named client only.")
    logo: PathText = ""
    templates: PathText = ""


class DataSource(_Strict):
    path: Annotated[str, Field(min_length=1, max_length=MAX_PATH_TEXT)]
    format: Literal["auto", "csv", "excel", "parquet"] = "auto"
    sheet: LineText = ""
    columns: tuple[ColumnName, ...] = ()
    missing: Literal["listwise", "fail"] = "listwise"
    # When true, data.path, report.logo and report.templates must lie inside the spec's folder:
    # for specs that arrive from elsewhere and must not read files beside or above it.
    confine_to_spec_folder: bool = False

    @field_validator("columns")
    @classmethod
    def _columns_once(cls, columns: tuple[str, ...]) -> tuple[str, ...]:
        repeated = sorted({c for c in columns if columns.count(c) > 1})
        if repeated:
            raise ValueError(f"lists `{repeated[0]}` more than once; list each column once")
        return columns


class Variable(_Strict):
    label: LineText = ""
    unit: Annotated[str, Field(max_length=MAX_UNIT_TEXT)] = ""


class RhoPrior(_Strict):
    family: Literal["uniform", "beta"] = "uniform"
    a: Annotated[float, Field(gt=0, le=1e4)] = 1.0
    b: Annotated[float, Field(gt=0, le=1e4)] = 1.0

    @model_validator(mode="after")
    def _uniform_has_unit_shapes(self) -> RhoPrior:
        if self.family == "uniform" and (self.a != 1.0 or self.b != 1.0):
            raise ValueError("a uniform prior takes no `a` or `b`; use family = \"beta\"")
        return self

    @property
    def shapes(self) -> tuple[float, float]:
        return (1.0, 1.0) if self.family == "uniform" else (self.a, self.b)


class MeanPrior(_Strict):
    family: Literal["normal", "flat"] = "normal"
    units: Literal["scaled", "data"] = "scaled"
    location: float = 0.0
    scale: Annotated[float, Field(gt=0, le=1e12)] = 10.0

    @model_validator(mode="after")
    def _scaled_is_centred(self) -> MeanPrior:
        if self.units == "scaled" and self.location != 0.0:
            raise ValueError(
                "with units = \"scaled\" the prior is centred on the sample mean; "
                "set units = \"data\" to give a `location` in the data's units"
            )
        return self


class SdPrior(_Strict):
    family: Literal["half_normal", "half_student_t", "jeffreys"] = "half_normal"
    units: Literal["scaled", "data"] = "scaled"
    scale: Annotated[float, Field(gt=0, le=1e12)] = 10.0
    nu: Annotated[float, Field(gt=0, le=1e4)] = 3.0


class Priors(_Strict):
    rho: RhoPrior = RhoPrior()
    means: MeanPrior = MeanPrior()
    sds: SdPrior = SdPrior()

    @property
    def is_reference(self) -> bool:
        """Flat means and 1/sigma SDs: the priors of the exact marginal of rho (Jeffreys 1961)."""
        return self.means.family == "flat" and self.sds.family == "jeffreys"


class PriorOverrides(_Strict):
    rho: RhoPrior | None = None
    means: MeanPrior | None = None
    sds: SdPrior | None = None


ModelName = Literal["normal", "student_t", "rank", "auto"]


class PairEntry(_Strict):
    x: ColumnName
    y: ColumnName
    label: LineText = ""
    model: ModelName | None = None  # None: the spec-wide `model`
    priors: PriorOverrides = PriorOverrides()


class PairSet(_Strict):
    name: Annotated[str, Field(min_length=1, max_length=MAX_LINE_TEXT)]
    columns: Annotated[tuple[ColumnName, ...], Field(min_length=2, max_length=40)]
    model: ModelName | None = None
    priors: PriorOverrides = PriorOverrides()


class Checks(_Strict):
    """How the data-driven checks of the model judge a pair."""

    # a row whose removal alone moves rho's posterior median by more than this is flagged
    influence_shift: Annotated[float, Field(gt=0, le=2)] = 0.1
    # family-wise level of the Mahalanobis outlier test and of the normality test
    outlier_level: Annotated[float, Field(gt=0, lt=1)] = 0.05
    normality_level: Annotated[float, Field(gt=0, lt=1)] = 0.01
    # a column with this many distinct values or fewer, or with this share of its pairs of rows tied,
    # is called discrete (coarse)
    discrete_max_distinct: Annotated[int, Field(ge=2, le=1000)] = 10
    discrete_tied_share: Annotated[float, Field(gt=0, le=1)] = 0.1
    # posterior predictive tail probability below which a statistic is called poorly reproduced
    predictive_level: Annotated[float, Field(gt=0, lt=1)] = 0.01
    # model = "auto": above this many rows the rank model is the robust fit instead of the Student-t one,
    # whose likelihood needs every row (measured: about 6 s a pair at 10,000 rows, half an hour at 1,000,000)
    student_t_max_rows: Annotated[int, Field(ge=4)] = 20_000


class Sensitivity(_Strict):
    """The alternative priors a pair's verdicts are tried under; empty lists keep the standard set."""

    rho_priors: tuple[RhoPrior, ...] = ()
    nuisance_widths: tuple[Annotated[float, Field(gt=0, le=100)], ...] = (0.5, 2.0)


class Rule(_Strict):
    name: Annotated[str, Field(pattern=RULE_NAME_PATTERN)]
    statement: Literal["above", "below", "between"]
    threshold: Annotated[float, Field(ge=-1, le=1)] | None = None
    lower: Annotated[float, Field(ge=-1, le=1)] | None = None
    upper: Annotated[float, Field(ge=-1, le=1)] | None = None
    required_probability: Annotated[float, Field(gt=0, lt=1)] = 0.95
    description: Annotated[str, Field(max_length=MAX_PARAGRAPH_TEXT)] = ""

    @model_validator(mode="after")
    def _bounds_match_statement(self) -> Rule:
        if self.statement in ("above", "below"):
            if self.threshold is None:
                raise ValueError(f"a rule with statement = \"{self.statement}\" needs `threshold`")
            if self.lower is not None or self.upper is not None:
                raise ValueError("`lower`/`upper` belong to statement = \"between\"; use `threshold`")
        else:
            if self.lower is None or self.upper is None:
                raise ValueError("a rule with statement = \"between\" needs `lower` and `upper`")
            if self.threshold is not None:
                raise ValueError("statement = \"between\" takes `lower` and `upper`, not `threshold`")
            if self.lower >= self.upper:
                raise ValueError(f"`lower` ({self.lower}) must be below `upper` ({self.upper})")
        return self

    @property
    def thresholds(self) -> tuple[float, ...]:
        if self.threshold is not None:
            return (self.threshold,)
        assert self.lower is not None and self.upper is not None
        return (self.lower, self.upper)


class Rope(_Strict):
    lower: Annotated[float, Field(ge=-1, le=0)] = -0.1
    upper: Annotated[float, Field(ge=0, le=1)] = 0.1

    @model_validator(mode="after")
    def _non_empty(self) -> Rope:
        if self.lower >= self.upper:
            raise ValueError("the ROPE needs `lower` < `upper`")
        return self


class Summary(_Strict):
    credible_mass: Annotated[float, Field(gt=0, lt=1)] = 0.95
    interval: Literal["central", "hdi"] = "central"


class Sampler(_Strict):
    draws: Annotated[int, Field(ge=MIN_DRAWS, le=MAX_DRAWS)] = 1000
    tune: Annotated[int, Field(ge=MIN_TUNE, le=MAX_DRAWS)] = 1000
    chains: Annotated[int, Field(ge=MIN_CHAINS, le=MAX_CHAINS)] = 4
    target_accept: Annotated[float, Field(ge=0.5, lt=1)] = 0.8
    seed: Annotated[int, Field(ge=0, lt=2**63)] = 20261201


class Diagnostics(_Strict):
    rhat_max: Annotated[float, Field(gt=1, le=2)] = 1.01
    ess_min: Annotated[float, Field(ge=1)] = 400.0
    max_divergences: Annotated[int, Field(ge=0)] = 0
    bfmi_min: Annotated[float, Field(ge=0, le=1)] = 0.3


class SpecDocument(_Strict):
    """The spec exactly as written (after defaults)."""

    engine: Literal["mcmc", "exact"] = "mcmc"
    model: ModelName = "normal"
    report: ReportMeta
    data: DataSource
    variables: dict[ColumnName, Variable] = {}
    pairs: tuple[PairEntry, ...] = ()
    pair_sets: tuple[PairSet, ...] = ()
    priors: Priors = Priors()
    rules: tuple[Rule, ...] = ()
    rope: Rope = Rope()
    summary: Summary = Summary()
    sampler: Sampler = Sampler()
    diagnostics: Diagnostics = Diagnostics()
    checks: Checks = Checks()
    sensitivity: Sensitivity = Sensitivity()

    @model_validator(mode="after")
    def _has_pairs(self) -> SpecDocument:
        if not self.pairs and not self.pair_sets:
            raise ValueError("the spec lists no pairs: add a [[pairs]] table with x and y, "
                             "or a [[pair_sets]] table with columns")
        names = [rule.name for rule in self.rules]
        duplicated = sorted({n for n in names if names.count(n) > 1})
        if duplicated:
            raise ValueError(f"rule names must be unique; repeated: {', '.join(duplicated)}")
        for index, name in enumerate(names):
            _check_rule_column(index, name)
        return self


def _check_rule_column(index: int, name: str) -> None:
    """A rule's results.csv columns (p_<rule>, p_<rule>_mcse) must not repeat a fixed or another rule's column.

    Checked on the document, not on ``Rule``, so that code building rules for its own use is not limited.
    """
    where = f"`rules[{index}].name` = \"{name}\""
    if name in RESERVED_RULE_NAMES:
        raise ValueError(f"{where} is reserved: results.csv already has a fixed column p_{name}, and the rule's "
                         f"column would repeat it; rename the rule, for example to \"{name}_rule\"")
    if name.endswith(MCSE_SUFFIX):
        raise ValueError(f"{where} ends in {MCSE_SUFFIX}, which is kept for the Monte Carlo error columns "
                         f"(p_<rule>{MCSE_SUFFIX}) of results.csv; rename the rule, for example to "
                         f"\"{name.removesuffix(MCSE_SUFFIX)}_check\"")


class PairSpec(_Frozen):
    """One pair to fit, with its priors resolved."""

    x: str
    y: str
    label: str
    priors: Priors
    pair_set: str = ""
    model: ModelName = "normal"

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
        return tuple(seen)

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
    """Explicit pairs first, then every pair among each pair set's columns."""
    pairs: list[PairSpec] = []
    seen: dict[frozenset[str], str] = {}
    # the key names the pair's results row, draws file, report section and seed record: it must be unique
    keys: dict[str, tuple[str, str, str]] = {}
    prefix = f"{source}: " if source is not None else ""

    def add(x: str, y: str, label: str, overrides: PriorOverrides, where: str, pair_set: str,
            model: str | None) -> None:
        if x == y:
            raise SpecError(f"{prefix}`{where}`: a pair needs two different columns, got `{x}` as both "
                            "x and y; change one of them")
        identity = frozenset((x, y))
        if identity in seen:
            raise SpecError(f"{prefix}`{where}`: the pair ({x}, {y}) is already listed at `{seen[identity]}`; "
                            "remove one of them")
        seen[identity] = where
        merged = _merge_priors(document.priors, overrides)
        pair = PairSpec(x=x, y=y, label=label, priors=merged, pair_set=pair_set, model=model or document.model)
        if pair.key in keys:
            other_x, other_y, other_where = keys[pair.key]
            raise SpecError(f"{prefix}`{where}`: the pair ({x}, {y}) would be named \"{pair.key}\", like the pair "
                            f"({other_x}, {other_y}) at `{other_where}`, and each pair needs its own name for its "
                            "results row and draws file; rename a column whose name contains \" vs \" in the "
                            "data, or remove one of the two pairs")
        keys[pair.key] = (x, y, where)
        pairs.append(pair)

    for index, entry in enumerate(document.pairs):
        add(entry.x, entry.y, entry.label, entry.priors, f"pairs[{index}]", "", entry.model)
    for index, pair_set in enumerate(document.pair_sets):
        repeated = sorted({c for c in pair_set.columns if pair_set.columns.count(c) > 1})
        if repeated:
            raise SpecError(f"{prefix}`pair_sets[{index}].columns`: `{repeated[0]}` is listed more than once; "
                            "list each column once")
        for x, y in itertools.combinations(pair_set.columns, 2):
            add(x, y, "", pair_set.priors, f"pair_sets[{index}] ({pair_set.name})", pair_set.name,
                pair_set.model)
    return tuple(pairs)


def _as_model(annotation: Any) -> type[BaseModel] | None:
    """The spec table type inside ``annotation`` (``X``, ``X | None``, ``tuple[X, ...]``, ``dict[str, X]``)."""
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return annotation
    for arg in typing.get_args(annotation):
        found = _as_model(arg)
        if found is not None:
            return found
    return None


def _walk(location: tuple[Any, ...]) -> tuple[type[BaseModel] | None, Any]:
    """The table type at ``location`` and the field that leads to it (None where the path leaves the schema).

    List positions (ints) and the user's own mapping keys (the column in
    ``variables.<column>``) are stepped over.
    """
    model: type[BaseModel] | None = SpecDocument
    field: Any = None
    skip_key = False
    for part in location:
        if isinstance(part, int):
            continue
        if skip_key:
            skip_key = False
            continue
        if model is None:
            return None, None
        field = model.model_fields.get(str(part))
        if field is None:
            return None, None
        skip_key = typing.get_origin(field.annotation) is dict
        model = _as_model(field.annotation)
    return model, field


def _fields_at(location: tuple[Any, ...]) -> list[str]:
    """The valid keys of the table at ``location`` inside the spec, for suggestions."""
    model, _ = _walk(location)
    return list(model.model_fields) if model is not None else []


def _field_at(location: tuple[Any, ...]) -> Any:
    """The pydantic field (with its constraints) that ``location`` names, if any."""
    return _walk(location)[1] if location else None


def _bounds(field: Any) -> str:
    """The allowed range of a numeric field, in words: "greater than 0 and at most 10000"."""
    if field is None:
        return ""
    items: list[Any] = list(field.metadata)
    for arg in typing.get_args(field.annotation):
        for meta in getattr(arg, "__metadata__", ()):
            items.extend(getattr(meta, "metadata", [meta]))
    def number(value: Any) -> str:
        return f"{value:g}" if isinstance(value, float) else str(value)

    lower = upper = ""
    for item in items:
        for name, words in (("gt", "greater than"), ("ge", "at least")):
            if getattr(item, name, None) is not None:
                lower = f"{words} {number(getattr(item, name))}"
        for name, words in (("lt", "less than"), ("le", "at most")):
            if getattr(item, name, None) is not None:
                upper = f"{words} {number(getattr(item, name))}"
    return " and ".join(part for part in (lower, upper) if part)


BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")


def format_location(location: tuple[Any, ...]) -> str:
    """A key path as the user would write it: ``pairs[0].priors.rho.a``, ``variables."temp (C)".unit``."""
    text = ""
    for part in location:
        if isinstance(part, int):
            text += f"[{part}]"
        else:
            key = str(part)
            if not BARE_KEY.match(key):
                key = '"' + key.replace("\\", "\\\\").replace('"', '\\"') + '"'
            text += ("." if text else "") + key
    return text or "(top level)"


def _short_repr(value: Any, limit: int = 60) -> str:
    text = repr(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."


RANGE_ERRORS = {"greater_than", "greater_than_equal", "less_than", "less_than_equal"}


def describe_problem(problem: Any, location: tuple[Any, ...]) -> str:
    """One pydantic problem as a phrase that says what the value should be, e.g. "should be a number, got 'x'"."""
    kind = problem["type"]
    ctx = problem.get("ctx") or {}
    got = problem.get("input")
    got_text = "" if isinstance(got, dict | list | tuple) else f", got {_short_repr(got)}"
    reason = ""
    if kind in RANGE_ERRORS:
        bounds = _bounds(_field_at(location))
        detail = f"should be {bounds}" if bounds else str(problem["msg"]).replace("Input should", "should")
        if kind == "greater_than_equal" and len(location) == 2 and location[0] == "sampler":
            why = SAMPLER_MINIMUM_REASONS.get(str(location[1]), "")  # a minimum set by the diagnostics: say why
            reason = f": {why}" if why else ""
    elif kind in ("model_type", "model_attributes_type", "dict_type"):
        detail = "should be a table of keys (a [section] or {key = value})"
    elif kind in ("tuple_type", "list_type"):
        detail = 'should be a list in square brackets, like ["a", "b"]'
    elif kind == "string_type":
        detail = "should be text in double quotes"
    elif kind in ("int_type", "int_parsing"):
        detail = "should be a whole number"
    elif kind == "int_from_float":
        detail = "should be a whole number, without a decimal point"
    elif kind in ("float_type", "float_parsing"):
        detail = "should be a number"
    elif kind == "finite_number":
        detail = "should be a finite number, not nan or inf"
    elif kind == "too_short":
        detail = f"should list at least {ctx.get('min_length')} items"
        got_text = f", got {ctx.get('actual_length')}"
    elif kind == "too_long":
        detail = f"should list at most {ctx.get('max_length')} items"
        got_text = f", got {ctx.get('actual_length')}"
    elif kind == "string_too_short":
        detail = "must not be empty" if ctx.get("min_length") == 1 else (
            f"should have at least {ctx.get('min_length')} characters")
    elif kind == "string_too_long":
        detail = f"should have at most {ctx.get('max_length')} characters"
        got_text = f", got {len(got)}" if isinstance(got, str) else ""
    elif kind == "string_pattern_mismatch" and ctx.get("pattern") == RULE_NAME_PATTERN:
        detail = ("should be a short name of lower-case letters, digits and _ that starts with a letter "
                  "(it becomes a results column), like \"material\"")
    elif kind == "literal_error":
        options = re.findall(r"'([^']*)'", str(ctx.get("expected", "")))
        close = difflib.get_close_matches(str(got).lower(), options, n=1, cutoff=0.5) if options else []
        hint = f"; did you mean {close[0]!r}?" if close else ""
        detail = f"should be one of {ctx.get('expected')}{got_text}{hint}"
        got_text = ""
    else:
        detail = str(problem["msg"]).removeprefix("Value error, ").replace("Input should", "should")
        if kind == "value_error":  # our own validators' messages already say what was wrong
            got_text = ""
    return f"{detail}{got_text}{reason}"


def describe_validation_error(error: ValidationError, source: Path) -> str:
    """Turn pydantic's report into one line that names the key path and the fix."""
    problems = error.errors(include_url=False)
    first = problems[0]
    location = tuple(p for p in first["loc"] if not str(p).startswith("function-after"))
    path = format_location(location)
    kind = first["type"]
    if kind == "extra_forbidden":
        key = str(location[-1])
        valid = _fields_at(location[:-1])
        close = difflib.get_close_matches(key, valid, n=1, cutoff=0.6)
        hint = f"; did you mean `{close[0]}`?" if close else ""
        listed = ", ".join(valid)
        if not valid:
            valid_text = "; remove it"
        elif hint:
            valid_text = f" Valid keys here: {listed}."
        else:
            valid_text = f"; valid keys here: {listed}."
        message = f"unknown key `{path}`{hint}{valid_text}"
    elif kind == "missing":
        table = _as_model(getattr(_field_at(location), "annotation", None))
        message = (f"the [{path}] table is required but missing; add it" if table is not None
                   else f"`{path}` is required but missing; add it")
    elif not location:
        message = describe_problem(first, location)
    elif location[-1] == "[key]":  # a [variables] key (a column name): quoting it whole could fill the screen
        message = f"`{format_location(location[:-2])}`: a column name {describe_problem(first, location)}"
    else:
        message = f"`{path}`: {describe_problem(first, location)}"
    more = len(problems) - 1
    suffix = f" (and {more} more problem{'s' if more > 1 else ''})" if more else ""
    return f"{source}: {message}{suffix}"


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
