"""Stage 1, the schema: the spec's tables as frozen pydantic models, with their limits.

The spec is validated as a whole before any data is read or any model is
fitted. Unknown keys are errors (with a suggestion), because a misspelt key
that is silently ignored changes a report without anyone noticing.
"""

from __future__ import annotations

import datetime as dt
import difflib
import functools
import math
import re
import typing
from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationInfo, field_validator, model_validator
from pydantic_core import PydanticCustomError

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


# Cached: every value the spec gives is checked against its field's annotation (a spec listing 4,950 pairs
# gives about 10,000), and the annotations are a few dozen, fixed and hashable.
@functools.cache
def _types_in(annotation: Any) -> frozenset[Any]:
    """Every type named in a field's annotation (``int | None`` gives int and NoneType)."""
    found = {annotation}
    for arg in typing.get_args(annotation):
        found |= _types_in(arg)
    return frozenset(found)


class _Frozen(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


# A value of the wrong TOML type that pydantic would quietly convert ("1000" to 1000, 1 to true, 1000.0 to
# 1000) is refused with this error type; messages.describe_validation_error words it from its context.
WRONG_TOML_TYPE = "wrong_toml_type"


def _toml_literal(value: Any) -> str:
    """``value`` as it would be written in TOML, for messages."""
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    return repr(value)


def _as_number_text(text: str) -> str | None:
    """The number a text spells ("1000", " 2.5 "), written without quotes; None when it spells none."""
    try:
        number = float(text.strip().replace("_", ""))
    except ValueError:
        return None
    if not math.isfinite(number):
        return None  # "nan" and "inf" are left to pydantic, which refuses them as numbers anyway
    return text.strip().replace("_", "")


def _wrong_toml_type(value: Any, annotation: Any, suffix: str = "") -> PydanticCustomError | None:
    """The error for a TOML value that pydantic would convert to the field's type instead of refusing.

    Only conversions are caught here; a value pydantic refuses anyway ("many" for a number) keeps pydantic's
    message. Accepted on purpose: a whole number for a number field (``ess_min = 400``), and a date as text
    (a run record keeps its resolved spec as JSON, where dates are text). Refused: text for a number or a
    boolean, a number for a boolean, and a number with a decimal point for a whole-number field, even when
    it is whole (1000.0), so that an int field takes exactly what a TOML integer is.
    """
    if isinstance(value, list | tuple):
        element = next((_tuple_element(t) for t in _types_in(annotation) if _tuple_element(t) is not None), None)
        if element is None:
            return None
        for index, item in enumerate(value):
            problem = _wrong_toml_type(item, element, f"{suffix}[{index}]")
            if problem is not None:
                return problem
        return None
    types = _scalar_types(annotation)
    wants_bool = bool in types
    wants_float = float in types
    wants_int = int in types
    wants_text = str in types or any(isinstance(t, str) for t in types)  # str, or a Literal of words
    if isinstance(value, str) and not wants_text and (wants_bool or wants_int or wants_float):
        if wants_bool and value.strip().lower() in ("true", "false", "yes", "no", "on", "off", "0", "1",
                                                     "t", "f", "y", "n"):
            fix = "write true or false without quotes"
        else:
            number = _as_number_text(value)
            if number is None:
                return None
            fix = f"write a number without quotes: {number}"
        return PydanticCustomError(WRONG_TOML_TYPE, "{found} is text; {fix}",
                                   {"found": _toml_literal(value), "kind": "text", "fix": fix, "suffix": suffix})
    if isinstance(value, int | float) and not isinstance(value, bool) and wants_bool and not (
            wants_int or wants_float):
        return PydanticCustomError(WRONG_TOML_TYPE, "{found} is a number; {fix}",
                                   {"found": _toml_literal(value), "kind": "a number", "fix": "write true or false",
                                    "suffix": suffix})
    if isinstance(value, float) and wants_int and not wants_float and math.isfinite(value) and value.is_integer():
        return PydanticCustomError(WRONG_TOML_TYPE, "{found} is a number with a decimal point; {fix}",
                                   {"found": _toml_literal(value), "kind": "a number with a decimal point",
                                    "fix": f"write a whole number without the decimal point: {int(value)}",
                                    "suffix": suffix})
    return None


@functools.cache
def _scalar_types(annotation: Any) -> frozenset[Any]:
    """The types a field takes as a single value: those of ``_types_in`` not inside a tuple, list or dict."""
    if typing.get_origin(annotation) in (tuple, list, dict):
        return frozenset()
    found = {annotation}
    for arg in typing.get_args(annotation):
        found |= _scalar_types(arg)
    return frozenset(found)


def _tuple_element(annotation: Any) -> Any:
    """The element type of ``tuple[X, ...]`` (through Annotated), or None."""
    if typing.get_origin(annotation) is tuple:
        args = typing.get_args(annotation)
        if len(args) == 2 and args[1] is Ellipsis:
            return args[0]
    return None


class _Strict(_Frozen):
    """A table of the spec as the user writes it: no unknown keys, no nan/inf, no true/false as a number,
    and no value of another TOML type converted to the field's type ("1000" for a number)."""

    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)

    @field_validator("*", mode="before")
    @classmethod
    def _plain_values(cls, value: Any, info: ValidationInfo) -> Any:
        field = cls.model_fields.get(info.field_name or "")
        types = _types_in(field.annotation) if field is not None else frozenset()
        if isinstance(value, bool) and types & {int, float} and bool not in types:
            raise ValueError(f"should be a number, not {str(value).lower()}")
        if field is not None:
            problem = _wrong_toml_type(value, field.annotation)
            if problem is not None:
                raise problem
        if isinstance(value, str) and str in types:
            control = CONTROL_CHARACTERS.search(value)
            if control:
                raise ValueError(f"contains the control character U+{ord(control.group()):04X}; remove it")
        return value


# [report] pair_pages: the words it takes besides a whole number, and the number of pages a report has when
# the spec leaves it out (every pair up to this many pairs, else this many of the strongest).
PAIR_PAGES_WORDS = ("all", "rules_met")
DEFAULT_PAIR_PAGES = 30
PairPages = Literal["all", "rules_met"] | int


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
    # a draft (set by --quick, or by hand) says so on every page: its verdicts are provisional
    draft: bool = False
    # "full": every figure and table of each pair; "compact": each pair on about one page
    layout: Literal["full", "compact"] = "full"
    # which pairs get a page of their own: "all", "rules_met" (pairs that meet a decision rule) or N (the N
    # strongest by |posterior median rho|); left out: every pair up to DEFAULT_PAIR_PAGES pairs, else the
    # DEFAULT_PAIR_PAGES strongest. Every pair is in results.csv and results.parquet whatever this says.
    pair_pages: PairPages | None = None

    @field_validator("pair_pages", mode="before")
    @classmethod
    def _pair_pages_setting(cls, value: Any) -> Any:
        if value is None:
            return value
        if isinstance(value, str):
            if value in PAIR_PAGES_WORDS:
                return value
            close = difflib.get_close_matches(value.strip().lower(), PAIR_PAGES_WORDS, n=1, cutoff=0.5)
            hint = f"; did you mean \"{close[0]}\"?" if close else ""
            number = _as_number_text(value)
            fix = f"; write the number without quotes: {number}" if number is not None else hint
            raise ValueError(f"should be \"all\", \"rules_met\" or a whole number of pairs of at least 1, "
                             f"got {_toml_literal(value)}{fix}")
        if isinstance(value, float) and math.isfinite(value) and value.is_integer():
            return value  # refused by _Strict as every whole-number field refuses 1000.0, with the same words
        if isinstance(value, bool) or not isinstance(value, int):
            raise ValueError(f"should be \"all\", \"rules_met\" or a whole number of pairs of at least 1, "
                             f"got {_toml_literal(value)}")
        if value < 1:
            raise ValueError(f"should be at least 1 (the number of pairs that get a page of their own), got {value}; "
                             "use \"rules_met\" for only the pairs that meet a rule")
        return value


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
        if self.family == "beta":
            # Without this a beta prior missing its shapes silently became Beta(1, 1), the uniform prior.
            missing = [key for key in ("a", "b") if key not in self.model_fields_set]
            if missing:
                keys = " and ".join(f"`{key}`" for key in missing)
                absent = "is not given; add it" if len(missing) == 1 else "are not given; add them"
                raise ValueError(f"family = \"beta\" needs both shapes `a` and `b`, and {keys} {absent}, "
                                 "e.g. a = 2 and b = 2 (a = b = 1 is the uniform prior)")
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
GroupsModel = Literal["separate", "partial"]
# a grouping column's name, or "" on a pair to switch off the spec-wide group_by
GroupColumn = Annotated[str, Field(max_length=MAX_COLUMN_NAME)]
MAX_CONTROLS = 10
Controls = Annotated[tuple[ColumnName, ...], Field(max_length=MAX_CONTROLS)]


class PairEntry(_Strict):
    x: ColumnName
    y: ColumnName
    label: LineText = ""
    model: ModelName | None = None  # None: the spec-wide `model`
    priors: PriorOverrides = PriorOverrides()
    group_by: GroupColumn | None = None  # None: the spec-wide `group_by`
    groups: GroupsModel | None = None
    controls: Controls | None = None  # None: the spec-wide `controls`; [] for none


class PairSet(_Strict):
    name: Annotated[str, Field(min_length=1, max_length=MAX_LINE_TEXT)]
    # up to 100 columns (4,950 pairs): above 21 columns the matrix is drawn as a heat map without numbers
    columns: Annotated[tuple[ColumnName, ...], Field(min_length=2, max_length=100)]
    model: ModelName | None = None
    priors: PriorOverrides = PriorOverrides()
    group_by: GroupColumn | None = None
    groups: GroupsModel | None = None
    controls: Controls | None = None


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


class Compare(_Strict):
    """How runs are compared (``reportgen compare`` and ``run --previous``)."""

    # a move of rho larger than this counts as material; the posterior probability of such a move is reported
    margin: Annotated[float, Field(gt=0, le=2)] = 0.1
    # the groups whose correlations are compared two by two; empty: every two groups when there are few
    groups: Annotated[tuple[LineText, ...], Field(max_length=40)] = ()


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
    group_by: GroupColumn = ""  # "": no groups
    groups: GroupsModel = "separate"
    controls: Controls = ()
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
    compare: Compare = Compare()

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
