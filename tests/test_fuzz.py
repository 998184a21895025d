"""Fuzz the two readers of user input: the only outcomes allowed are a valid result or our own error.

(a) Random TOML documents, built from the spec's real schema (every table and key,
    read from the pydantic models) mixed with junk keys and junk values, plus
    random raw text and mangled copies of a valid spec, go through
    ``parse_spec_text`` and ``expand_pairs``: a ``SpecDocument`` or a ``SpecError``.
(b) Random tables with junk cells (text, blanks, "nan", "inf", huge numbers,
    unicode, repeated header names, ragged rows, any delimiter and encoding)
    written as CSV with a matching spec go through ``load_table`` and
    ``load_pairs``: valid pairs or a ``DataError``.

Every error must be one non-empty line that starts with the file it is about.
Anything else escaping is a bug. The budget is fixed (derandomised, 150
examples per test) so the file runs in well under a minute.
"""

from __future__ import annotations

import csv
import datetime as dt
import functools
import io
import math
import tempfile
import typing
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from pydantic import BaseModel

from reportgen.data import MIN_COMPLETE_ROWS, PERFECT_CORRELATION, load_pairs, load_table
from reportgen.errors import DataError, SpecError
from reportgen.spec import SpecDocument, _as_model, expand_pairs, load_spec, parse_spec_text

FUZZ = settings(max_examples=150, deadline=None, derandomize=True, database=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
SOURCE = Path("fuzz.toml")


def assert_one_line(error: Exception, source: object) -> None:
    message = str(error)
    assert message.strip(), "empty error message"
    assert len(message.splitlines()) == 1 and "\n" not in message and "\r" not in message, message
    assert message.startswith(f"{source}:"), message


# ---------------------------------------------------------------- a tiny TOML writer


def toml_key(key: str) -> str:
    if key and all(ch.isascii() and (ch.isalnum() or ch in "_-") for ch in key):
        return key
    return toml_string(key)


def toml_string(text: str) -> str:
    out = []
    for ch in text:
        if ch == "\\":
            out.append("\\\\")
        elif ch == '"':
            out.append('\\"')
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04X}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def toml_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        text = repr(value)
        return text if any(ch in text for ch in ".e") else text + ".0"
    if isinstance(value, str):
        return toml_string(value)
    if isinstance(value, dt.date | dt.datetime):
        return value.isoformat()
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{toml_key(str(k))} = {toml_value(v)}" for k, v in value.items()) + "}"
    raise TypeError(type(value))


def to_toml(document: dict[str, Any]) -> str:
    """Scalars first, then each table as a [section] (arrays of tables as [[section]]), the rest inline."""
    def is_tables(value: Any) -> bool:
        return isinstance(value, list) and bool(value) and all(isinstance(v, dict) for v in value)

    lines = [f"{toml_key(k)} = {toml_value(v)}" for k, v in document.items()
             if not isinstance(v, dict) and not is_tables(v)]
    for key, value in document.items():
        if isinstance(value, dict):
            lines.append(f"\n[{toml_key(key)}]")
            lines.extend(f"{toml_key(str(k))} = {toml_value(v)}" for k, v in value.items())
        elif is_tables(value):
            for item in value:
                lines.append(f"\n[[{toml_key(key)}]]")
                lines.extend(f"{toml_key(str(k))} = {toml_value(v)}" for k, v in item.items())
    return "\n".join(lines) + "\n"


def test_the_toml_writer_round_trips() -> None:
    import tomllib

    document = {"a": 1, "t": {"k": "x\n\"y\"", "f": 1.5, "n": [1, 2], "d": {"in": True}},
                "arr": [{"x": "a"}, {"x": "b"}], "plain": ["u", "v"], "weird key": -0.0}
    assert tomllib.loads(to_toml(document)) == document


# ------------------------------------------------------------ random spec documents

JUNK_KEYS = st.sampled_from(["", "x", "colour", "credible_mas", "Title", "pairs ", "ä", "a.b", "priors", "1"])
COLUMN_NAMES = st.sampled_from(["a", "b", "c", "d", "a", "temp", "", " ", "A", "é", "x\ny", "tab\there"])
TEXT = st.text(st.characters(codec="utf-8", exclude_categories=["Cs"]), max_size=12)
NUMBERS = st.one_of(
    st.integers(min_value=-5, max_value=5),
    st.sampled_from([0, 1, 2, 3, 4, 64, 65, 1000, 200_000, 200_001, 2**63, -(2**63), 10**30]),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([-1.0, -0.5, 0.0, 0.1, 0.5, 0.95, 0.999, 1.0, 1.01, 1.5, 1e4, 1e12, 1e300, -1e-300]),
)
SCALARS = st.one_of(
    NUMBERS,
    st.booleans(),
    TEXT,
    COLUMN_NAMES,
    st.dates(min_value=dt.date(1, 1, 1), max_value=dt.date(9999, 12, 31)),
    st.sampled_from(["auto", "csv", "excel", "parquet", "beta", "uniform", "above", "below", "between",
                     "hdi", "central", "data", "scaled", "flat", "jeffreys", "half_normal", "listwise", "fail",
                     "mcmc", "exact", "d.csv", "material", "Bad Name", "\u0000", "2026-01-15"]),
)
JUNK = st.recursive(SCALARS, lambda inner: st.one_of(st.lists(inner, max_size=3),
                                                    st.dictionaries(JUNK_KEYS, inner, max_size=3)),
                    max_leaves=6)


def _literals(annotation: Any) -> list[Any]:
    if typing.get_origin(annotation) is typing.Literal:
        return list(typing.get_args(annotation))
    return [v for arg in typing.get_args(annotation) for v in _literals(arg)]


def _plain_types(annotation: Any) -> set[Any]:
    found = {annotation}
    for arg in typing.get_args(annotation):
        found |= _plain_types(arg)
    return found


def field_values(annotation: Any) -> st.SearchStrategy[Any]:
    """Values shaped like the field (most of the time) or junk of any shape."""
    model = _as_model(annotation)
    origin = typing.get_origin(annotation)
    types = _plain_types(annotation)
    if model is not None:
        table = tables(model)
        if origin is tuple or tuple in {typing.get_origin(a) for a in typing.get_args(annotation)}:
            shaped = st.lists(table, max_size=3)
        elif origin is dict:
            shaped = st.dictionaries(COLUMN_NAMES, table, max_size=3)
        else:
            shaped = table
    elif _literals(annotation):
        shaped = st.sampled_from(_literals(annotation))
    elif origin is tuple:
        shaped = st.lists(COLUMN_NAMES, max_size=4)
    elif int in types:
        shaped = st.one_of(st.integers(0, 5000), NUMBERS)
    elif float in types:
        shaped = st.one_of(st.floats(-1, 1), st.floats(0, 1), st.floats(1, 10), NUMBERS)
    elif dt.date in types:
        shaped = st.dates()
    elif str in types:
        shaped = st.one_of(COLUMN_NAMES, TEXT)
    else:
        shaped = SCALARS
    return st.one_of(shaped, shaped, shaped, shaped, shaped, JUNK)


@functools.cache
def tables(model: type[BaseModel]) -> st.SearchStrategy[dict[str, Any]]:
    """A table of ``model``'s keys (each present or not), sometimes with junk keys added."""
    keys = {name: field_values(field.annotation) for name, field in model.model_fields.items()}
    required = {name: keys.pop(name) for name in list(keys) if model.model_fields[name].is_required()}
    shaped = st.fixed_dictionaries(required, optional=keys)
    junk = st.dictionaries(JUNK_KEYS, JUNK, min_size=1, max_size=2)
    return st.one_of(shaped, shaped, shaped, shaped, st.tuples(shaped, junk).map(lambda t: {**t[1], **t[0]}))


def check_spec_text(text: str) -> None:
    try:
        document = parse_spec_text(text, SOURCE)
        assert isinstance(document, SpecDocument)
        expand_pairs(document, SOURCE)
    except SpecError as error:
        assert_one_line(error, SOURCE)


VALID_SPEC = """
[report]
title = "T"
date = 2026-01-15
[data]
path = "d.csv"
columns = ["a", "b", "c"]
[[pairs]]
x = "a"
y = "b"
[pairs.priors.rho]
family = "beta"
a = 2.0
b = 2.0
[[pair_sets]]
name = "s"
columns = ["b", "c"]
[[rules]]
name = "above_zero"
statement = "above"
threshold = 0.0
required_probability = 0.9
[sampler]
draws = 100
chains = 2
"""


def key_paths(model: type[BaseModel], prefix: tuple[Any, ...] = ()) -> list[tuple[tuple[Any, ...], Any]]:
    """Every key of the schema with its annotation; list items as index 0, mapping keys as column `a`."""
    found = []
    for name, field in model.model_fields.items():
        path = (*prefix, name)
        found.append((path, field.annotation))
        inner = _as_model(field.annotation)
        if inner is None:
            continue
        origin = typing.get_origin(field.annotation)
        if origin is dict:
            found.extend(key_paths(inner, (*path, "a")))
        elif origin is tuple or tuple in {typing.get_origin(a) for a in typing.get_args(field.annotation)}:
            found.extend(key_paths(inner, (*path, 0)))
        else:
            found.extend(key_paths(inner, path))
    return found


SCHEMA_PATHS = key_paths(SpecDocument)


def set_path(document: dict[str, Any], path: tuple[Any, ...], value: Any) -> None:
    """Put ``value`` at ``path``, making (or replacing) the tables and lists on the way."""
    node: Any = document
    for part, following in zip(path, path[1:], strict=False):
        wanted: Any = [] if isinstance(following, int) else {}
        if isinstance(part, int):
            if not node:
                node.append(wanted)
            if not isinstance(node[0], type(wanted)):
                node[0] = wanted
            node = node[0]
        else:
            if not isinstance(node.get(part), type(wanted)):
                node[part] = wanted
            node = node[part]
    last = path[-1]
    if isinstance(last, int):
        node[:1] = [value]
    else:
        node[last] = value


@st.composite
def mutated_documents(draw: st.DrawFn) -> dict[str, Any]:
    """The valid spec with one to three keys anywhere in the schema (or junk keys) set to random values."""
    import tomllib

    document = tomllib.loads(VALID_SPEC)
    for _ in range(draw(st.integers(1, 3))):
        path, annotation = draw(st.sampled_from(SCHEMA_PATHS))
        if draw(st.integers(0, 5)) == 0:
            path, annotation = (*path[:-1], draw(JUNK_KEYS)), Any
        set_path(document, path, draw(field_values(annotation)))
    return document


@FUZZ
@given(st.one_of(tables(SpecDocument), mutated_documents(), mutated_documents()))
def test_random_spec_documents_give_a_spec_or_a_spec_error(document: dict[str, Any]) -> None:
    check_spec_text(to_toml(document))


@st.composite
def mangled_specs(draw: st.DrawFn) -> str:
    """A valid spec with a few slices cut out, repeated or replaced by random text."""
    text = VALID_SPEC
    for _ in range(draw(st.integers(1, 4))):
        start = draw(st.integers(0, len(text)))
        end = draw(st.integers(start, min(len(text), start + 20)))
        text = text[:start] + draw(st.one_of(st.just(""), TEXT, st.just(text[start:end] * 2),
                                             st.sampled_from(["[", "]", "=", '"', "\n", "[[pairs]]\n", "nan",
                                                              "[" * 600, "{a = " * 400]))) + text[end:]
    return text


def test_the_valid_spec_is_valid() -> None:
    assert len(expand_pairs(parse_spec_text(VALID_SPEC, SOURCE))) == 2


@FUZZ
@given(st.one_of(st.text(max_size=200), mangled_specs(),
                 st.integers(1, 3000).map(lambda depth: "a = " + "[" * depth + "]" * depth)))
def test_random_text_gives_a_spec_or_a_spec_error(text: str) -> None:
    check_spec_text(text)


# --------------------------------------------------------------------- random tables

HEADER_NAMES = st.sampled_from(["a", "b", "c", "a", "b ", "temp (°C)", "x, mm", 'q"uote', "ü", "", "line\nbreak",
                                "nan", "1", "Unnamed: 0"])
NUMBER_CELLS = st.one_of(st.integers(-1000, 1000).map(str),
                         st.floats(-1e6, 1e6, allow_nan=False).map(lambda v: f"{v:.6g}"))
JUNK_CELLS = st.one_of(
    st.floats(allow_nan=False, allow_infinity=False, width=64).map(repr),
    st.sampled_from(["", " ", "nan", "NaN", "NA", "-", "null", "inf", "-inf", "Infinity", "1e400", "-1e400",
                     "1e308", "-1e308", "1e200", "1e-320", "9" * 40, "1,5", "1.000,5", "x", "é", "∞", "١٢",
                     "0x1F", "1_000", "True", '"', "a;b", "\t", "1e5", "+3", ".5", "5.", "3", "3", "7"]),
    TEXT,
)


EXTREME_CELLS = st.sampled_from(["1e200", "-1e200", "1e300", "1e308", "-1e308", "1e-320", "5e-324", "0", "1",
                                  "123456789012345678901234567890", "1e-200", "2e-200"])
CLEAN_NAMES = st.sampled_from(["a", "b", "c", "d", "x, mm", "temp (°C)", 'q"uote', "ü", "α β"])


@dataclass(frozen=True)
class CsvProject:
    data: bytes
    spec_body: str
    # for a well-formed file: the x and y columns as numbers (NaN = missing), to check the result against
    expected: tuple[np.ndarray, np.ndarray] | None = None
    missing: str = "listwise"


def _spec_body(draw: st.DrawFn, x: str, y: str, missing: str, odd: bool) -> str:
    path, extra = "data.csv", ""
    if odd:  # settings that do not fit the file
        path = draw(st.sampled_from(["data.csv", "data.csv", "nope.csv", ".", "data.csv/", "x" * 300, "\u0000"]))
        extra = draw(st.sampled_from(["", 'format = "excel"\n', 'format = "parquet"\n', 'sheet = "Sheet1"\n',
                                      f"columns = [{toml_string(x)}]\n", f"columns = [{toml_string(y)}, "
                                      f"{toml_string(y)}]\n"]))
    return (f'[report]\ntitle = "Fuzz"\n[data]\npath = {toml_string(path)}\nmissing = "{missing}"\n{extra}'
            f"[[pairs]]\nx = {toml_string(x)}\ny = {toml_string(y)}\n")


@st.composite
def clean_projects(draw: st.DrawFn) -> CsvProject:
    """A well-formed numeric CSV (any delimiter, encoding, line ending, trailing delimiters, quoted names)."""
    names = draw(st.lists(CLEAN_NAMES, min_size=2, max_size=4, unique=True))
    mode = draw(st.sampled_from(["numbers", "numbers", "numbers", "linear", "extreme", "constant"]))
    n_rows = draw(st.one_of(st.integers(0, 12), st.integers(5, 30)))
    cells = EXTREME_CELLS if mode == "extreme" else NUMBER_CELLS
    gap = st.integers(0, 19).flatmap(lambda k: st.sampled_from(["", " ", "NA", "nan", "-"]) if k == 0 else cells)
    rows = [draw(st.lists(gap, min_size=len(names), max_size=len(names))) for _ in range(n_rows)]
    for row in rows:
        if mode == "linear" and row[0].strip() not in {"", "NA", "nan", "-"}:
            row[1] = repr(2.0 * float(row[0]) + 1.0)
        elif mode == "constant":
            row[1] = "3"
    delimiter = draw(st.sampled_from([",", ";", "\t", "|"]))
    trailing = [""] if draw(st.integers(0, 4)) == 0 else []
    buffer = io.StringIO()
    writer = csv.writer(buffer, delimiter=delimiter, lineterminator=draw(st.sampled_from(["\n", "\r\n", "\r"])))
    writer.writerow(names)
    writer.writerows(row + trailing for row in rows)
    encoding = draw(st.sampled_from(["utf-8", "utf-8-sig", "cp1252", "utf-16"]))
    if encoding == "cp1252" and any(ch not in "°üαβ" and ord(ch) > 127 for ch in "".join(names)):
        encoding = "utf-8"
    try:
        data = buffer.getvalue().encode(encoding)
    except UnicodeEncodeError:
        data = buffer.getvalue().encode("utf-8")

    def number(cell: str) -> float:
        return math.nan if cell.strip().lower() in {"", "na", "nan", "-"} else float(cell)

    expected = (np.array([number(r[0]) for r in rows]), np.array([number(r[1]) for r in rows]))
    missing = draw(st.sampled_from(["listwise", "listwise", "listwise", "fail"]))
    return CsvProject(data, _spec_body(draw, names[0], names[1], missing, odd=False), expected, missing)


@st.composite
def junk_projects(draw: st.DrawFn) -> CsvProject:
    """CSV bytes with junk cells, repeated or odd header names, ragged rows, naive quoting, stray bytes."""
    if draw(st.integers(0, 3)):
        names = draw(st.lists(st.sampled_from(["a", "b", "c", "d"]), min_size=2, max_size=4, unique=True))
    else:
        names = draw(st.lists(HEADER_NAMES, min_size=1, max_size=4))
    junk_share = draw(st.sampled_from([0, 1, 2, 5]))  # out of 10 cells
    cells = st.integers(0, 9).flatmap(lambda k: JUNK_CELLS if k < junk_share else NUMBER_CELLS)
    ragged = draw(st.integers(0, 5)) == 0
    rows = []
    for _ in range(draw(st.integers(0, 12))):
        row = draw(st.lists(cells, min_size=len(names), max_size=len(names)))
        if ragged and draw(st.booleans()):
            row = row[: draw(st.integers(0, len(row)))] + draw(st.lists(cells, max_size=2))
        rows.append(row)
    delimiter = draw(st.sampled_from([",", ";", "\t", "|"]))
    buffer = io.StringIO()
    if draw(st.integers(0, 3)):
        csv.writer(buffer, delimiter=delimiter, lineterminator=draw(st.sampled_from(["\n", "\r\n"]))).writerows(
            [names, *rows])
    else:  # written naively: unquoted delimiters and quotes break the structure
        buffer.write("\n".join(delimiter.join(r) for r in [names, *rows]) + draw(st.sampled_from(["", "\n"])))
    encoding = draw(st.sampled_from(["utf-8", "utf-8", "utf-8", "utf-8-sig", "cp1252", "latin-1", "utf-16"]))
    data = buffer.getvalue().encode(encoding, errors="replace")
    if draw(st.integers(0, 9)) == 0:
        cut = draw(st.integers(0, len(data)))
        data = data[:cut] + draw(st.binary(max_size=4)) + data[cut:]
    usable = [n.strip() for n in names if n.strip()]
    x = usable[0] if usable else "a"
    y = next((n for n in usable if n != x), "zz")
    missing = draw(st.sampled_from(["listwise", "fail"]))
    return CsvProject(data, _spec_body(draw, x, y, missing, odd=draw(st.integers(0, 4)) == 0))


def well_conditioned(x: np.ndarray, y: np.ndarray, missing: str) -> bool:
    """Data that every sound reader must accept: enough complete rows, moderate and varying values, |r| < 1."""
    complete = ~(np.isnan(x) | np.isnan(y))
    if complete.sum() < MIN_COMPLETE_ROWS or (missing == "fail" and not complete.all()):
        return False
    x, y = x[complete], y[complete]
    if np.abs(np.concatenate([x, y])).max() > 1e100 or np.ptp(x) < 1e-100 or np.ptp(y) < 1e-100:
        return False
    return abs(np.corrcoef(x, y)[0, 1]) < 0.999999


@FUZZ
@given(st.one_of(junk_projects(), clean_projects()))
def test_random_tables_give_pairs_or_a_data_error(project: CsvProject) -> None:
    with tempfile.TemporaryDirectory() as folder:
        (Path(folder) / "data.csv").write_bytes(project.data)
        (Path(folder) / "spec.toml").write_text(project.spec_body, encoding="utf-8")
        try:
            spec = load_spec(Path(folder) / "spec.toml")
        except SpecError as error:  # a data setting the spec itself refuses (a NUL in data.path)
            assert_one_line(error, Path(folder) / "spec.toml")
            return
        try:
            pairs = load_pairs(spec, load_table(spec))
        except DataError as error:
            assert_one_line(error, spec.data_path if spec.data_path.name else spec.source_path)
            assert project.expected is None or not well_conditioned(*project.expected, project.missing), (
                f"a well-formed file was refused: {error}")
            return
    (pair,) = pairs
    stats = pair.stats
    assert stats.n >= MIN_COMPLETE_ROWS and stats.n == pair.x.size == pair.y.size
    assert np.isfinite([stats.mean_x, stats.mean_y, stats.sxx, stats.syy, stats.sxy]).all()
    assert stats.sxx > 0 and stats.syy > 0
    assert abs(stats.sample_r) < PERFECT_CORRELATION
    assert pair.n_dropped + stats.n == pair.n_rows
    if project.expected is not None:  # exactly the numbers that were written, minus incomplete rows
        x, y = project.expected
        complete = ~(np.isnan(x) | np.isnan(y))
        np.testing.assert_allclose(pair.x, x[complete], rtol=1e-15)
        np.testing.assert_allclose(pair.y, y[complete], rtol=1e-15)
        assert pair.n_rows == x.size
