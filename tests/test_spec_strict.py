"""The spec takes each value as the TOML type its field wants: no text turned into a number, no number into
a boolean, no 1000.0 into a whole number; a beta prior names its shapes; an Excel hint names a data sheet;
a pair set may hold a listed pair.

The TOML types are those of the TOML 1.0 specification (integer, float, boolean, string, date, array,
table), read here with Python's tomllib; what pydantic would otherwise convert ("1000" to 1000, 1 to true)
is pydantic 2's documented lax-mode conversion table.
"""

from __future__ import annotations

import datetime as dt
import typing
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
from pydantic import BaseModel

from reportgen.errors import DataError, SpecError
from reportgen.spec import (
    SpecDocument,
    _types_in,
    expand_pairs,
    load_spec,
    parse_spec_text,
    with_sampler_overrides,
)

MINIMAL = '[report]\ntitle = "T"\n[data]\npath = "d.csv"\n[[pairs]]\nx = "a"\ny = "b"\n'

# A valid item for each list of tables, so that one wrong value inside it is the only problem.
VALID_ITEMS: dict[str, dict[str, Any]] = {
    "pairs": {"x": "a", "y": "b"},
    "pair_sets": {"name": "g", "columns": ["c", "d"]},
    "rules": {"name": "r", "statement": "above", "threshold": 0.5},
    "rho_priors": {"family": "uniform"},
}


def _toml_value(value: Any) -> str:
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, str):
        return '"' + value + '"'
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    return repr(value)


def _toml(table: dict[str, Any], prefix: str = "") -> str:
    """A small TOML writer (inline tables), enough for the specs built here."""
    def inline(value: Any) -> str:
        if isinstance(value, dict):
            return "{" + ", ".join(f'"{k}" = {inline(v)}' for k, v in value.items()) + "}"
        if isinstance(value, list):
            return "[" + ", ".join(inline(v) for v in value) + "]"
        return _toml_value(value)
    return "".join(f'"{key}" = {inline(value)}\n' for key, value in table.items())


def _leaf_fields(model: type[BaseModel], path: tuple[str, ...] = ()) -> list[tuple[tuple[str, ...], Any]]:
    """Every scalar field of the schema, with its key path; a list of tables steps into one item ("[0]")."""
    leaves = []
    for name, field in model.model_fields.items():
        inner = None
        for candidate in _types_in(field.annotation):
            if isinstance(candidate, type) and issubclass(candidate, BaseModel):
                inner = candidate
        here = (*path, name)
        if inner is not None:
            origin = typing.get_origin(field.annotation)
            if origin is dict:
                leaves += _leaf_fields(inner, (*here, "alpha"))
            elif origin is tuple:
                leaves += _leaf_fields(inner, (*here, "0"))
            else:
                leaves += _leaf_fields(inner, here)
        else:
            leaves.append((here, field.annotation))
    return leaves


def _spec_with(path: tuple[str, ...], value: Any) -> str:
    """The minimal spec with ``value`` at ``path`` (inside a valid item where the path crosses a list)."""
    raw: dict[str, Any] = {"report": {"title": "T"}, "data": {"path": "d.csv"}, "pairs": [{"x": "a", "y": "b"}]}
    node: Any = raw
    for index, key in enumerate(path[:-1]):
        following = path[index + 1]
        if following == "0":
            node[key] = [dict(VALID_ITEMS[key])]
            continue
        if key == "0":
            node = node[path[index - 1]][0]
            continue
        node = node.setdefault(key, {})
    node[path[-1]] = value
    return _toml(raw)


def _wanted(annotation: Any) -> set[str]:
    types = _types_in(annotation)
    wanted = set()
    if bool in types:
        wanted.add("boolean")
    if int in types or float in types:
        wanted.add("number")
    if str in types or any(isinstance(t, str) for t in types):
        wanted.add("text")
    return wanted


def _location(path: tuple[str, ...]) -> str:
    text = ""
    for part in path:
        text += f"[{part}]" if part == "0" else ("." if text else "") + part
    return text


LEAVES = _leaf_fields(SpecDocument)


def test_the_walk_reaches_every_kind_of_table() -> None:
    """A guard on the walk itself: it must see fields inside lists, maps and nested tables."""
    paths = {_location(p) for p, _ in LEAVES}
    for expected in ("sampler.draws", "pairs[0].priors.rho.a", "variables.alpha.label", "rules[0].threshold",
                     "sensitivity.rho_priors[0].b", "data.confine_to_spec_folder", "pair_sets[0].columns"):
        assert expected in paths


@pytest.mark.parametrize(("path", "annotation"), [(p, a) for p, a in LEAVES if "number" in _wanted(a)
                                                  and "text" not in _wanted(a)],
                         ids=lambda v: _location(v) if isinstance(v, tuple) else "")
def test_every_number_field_refuses_a_number_written_as_text(path: tuple[str, ...], annotation: Any) -> None:
    """TOML 1.0: "1" in quotes is a string, not an integer; pydantic's lax mode would take it as 1."""
    is_list = typing.get_origin(annotation) is tuple
    value: Any = ["1"] if is_list else "1"
    where = _location(path) + ("[0]" if is_list else "")
    with pytest.raises(SpecError) as info:
        parse_spec_text(_spec_with(path, value), Path("s.toml"))
    assert f'`{where}` = "1" is text; write a number without quotes: 1' in str(info.value)


@pytest.mark.parametrize(("path", "annotation"), [(p, a) for p, a in LEAVES if _wanted(a) == {"boolean"}],
                         ids=lambda v: _location(v) if isinstance(v, tuple) else "")
@pytest.mark.parametrize(("value", "found"), [(1, "1 is a number"), ("true", '"true" is text')])
def test_every_boolean_field_refuses_numbers_and_text(path: tuple[str, ...], annotation: Any, value: Any,
                                                       found: str) -> None:
    """TOML 1.0 booleans are the bare words true and false; pydantic's lax mode takes 1 and "true" too."""
    with pytest.raises(SpecError) as info:
        parse_spec_text(_spec_with(path, value), Path("s.toml"))
    assert f"`{_location(path)}` = {found}; write true or false" in str(info.value)


def test_the_walk_found_boolean_fields() -> None:
    assert any(_wanted(a) == {"boolean"} for _, a in LEAVES)


@pytest.mark.parametrize(("path", "annotation"), [(p, a) for p, a in LEAVES if "text" in _wanted(a)
                                                  and typing.get_origin(a) is not tuple
                                                  and int not in _types_in(a)],  # "all" or 30: both taken
                         ids=lambda v: _location(v) if isinstance(v, tuple) else "")
def test_every_text_field_refuses_a_number(path: tuple[str, ...], annotation: Any) -> None:
    """pydantic 2 never turns a number into text, even in lax mode; this keeps it so for new fields."""
    with pytest.raises(SpecError) as info:
        parse_spec_text(_spec_with(path, 7), Path("s.toml"))
    assert f"`{_location(path)}`" in str(info.value)


@pytest.mark.parametrize(("path", "annotation"), [(p, a) for p, a in LEAVES if int in _types_in(a)
                                                  and float not in _types_in(a) and bool not in _types_in(a)],
                         ids=lambda v: _location(v) if isinstance(v, tuple) else "")
def test_every_whole_number_field_refuses_a_decimal_point(path: tuple[str, ...], annotation: Any) -> None:
    """Decided: a TOML float is refused for a whole-number field even when whole (1000.0), as 1000.5 is."""
    with pytest.raises(SpecError) as info:
        parse_spec_text(_spec_with(path, 1000.0), Path("s.toml"))
    assert (f"`{_location(path)}` = 1000.0 is a number with a decimal point; write a whole number without the "
            "decimal point: 1000") in str(info.value)


def test_whole_numbers_for_number_fields_and_dates_stay_accepted() -> None:
    """TOML integers where a float is wanted (``ess_min = 400``) are numbers; a TOML date is a date."""
    doc = parse_spec_text(MINIMAL.replace('title = "T"', 'title = "T"\ndate = 2026-11-30')
                          + "[diagnostics]\ness_min = 400\n[sensitivity]\nnuisance_widths = [1, 2]\n", Path("s"))
    assert doc.diagnostics.ess_min == 400.0 and doc.sensitivity.nuisance_widths == (1.0, 2.0)
    assert doc.report.date == dt.date(2026, 11, 30)


def test_text_that_is_not_a_number_keeps_the_plain_message() -> None:
    with pytest.raises(SpecError, match=r"`sampler\.draws`: should be a whole number, got 'many'"):
        parse_spec_text(MINIMAL + '[sampler]\ndraws = "many"\n', Path("s.toml"))


def test_command_line_overrides_are_integers_and_still_apply(tmp_path: Path) -> None:
    spec_path = tmp_path / "spec.toml"
    spec_path.write_text(MINIMAL, encoding="utf-8")
    spec = with_sampler_overrides(load_spec(spec_path), draws=60, tune=40, chains=2, seed=5)
    sampler = spec.document.sampler
    assert (sampler.draws, sampler.tune, sampler.chains, sampler.seed) == (60, 40, 2, 5)


# ------------------------------------------------------------------ beta prior without its shapes


@pytest.mark.parametrize(("table", "where", "missing"), [
    ('[priors.rho]\nfamily = "beta"\n', "`priors.rho`", "`a` and `b` are not given"),
    ('[priors.rho]\nfamily = "beta"\na = 2\n', "`priors.rho`", "`b` is not given"),
    ('[pairs.priors.rho]\nfamily = "beta"\nb = 3\n', "`pairs[0].priors.rho`", "`a` is not given"),
    ('[[sensitivity.rho_priors]]\nfamily = "beta"\n', "`sensitivity.rho_priors[0]`", "are not given"),
])
def test_a_beta_prior_needs_both_shapes(table: str, where: str, missing: str) -> None:
    """Beta(a, b) has two shape parameters (common practice: no default stands for a choice of prior)."""
    with pytest.raises(SpecError) as info:
        parse_spec_text(MINIMAL + table, Path("s.toml"))
    message = str(info.value)
    assert where in message and missing in message and "e.g. a = 2 and b = 2" in message


def test_a_beta_prior_with_both_shapes_is_kept() -> None:
    doc = parse_spec_text(MINIMAL + '[priors.rho]\nfamily = "beta"\na = 1\nb = 1\n', Path("s.toml"))
    assert doc.priors.rho.shapes == (1.0, 1.0)


# ------------------------------------------------------------------ the Excel sheet hint


def _book(tmp_path: Path, sheets: dict[str, pd.DataFrame]) -> Path:
    path = tmp_path / "book.xlsx"
    with pd.ExcelWriter(path) as writer:
        for name, frame in sheets.items():
            frame.to_excel(writer, sheet_name=name, index=False)
    return path


NOTES = pd.DataFrame({"About this workbook": ["collected in 2026", "by the river team"]})
DATA = pd.DataFrame({"a": [1.0, 2.0, 3.5], "b": [2.0, 1.0, 4.0]})


def test_the_sheet_hint_names_the_first_sheet_with_numbers(tmp_path: Path) -> None:
    from reportgen.io.excel import read_excel

    path = _book(tmp_path, {"Notes": NOTES, "Survey": DATA, "Old": DATA})
    with pytest.raises(DataError) as info:
        read_excel(path, "")
    message = str(info.value)
    assert "`Notes`, `Survey`, `Old`" in message
    assert 'the first with a column of numbers is `Survey`: sheet = "Survey"' in message
    assert 'sheet = "Notes"' not in message


def test_the_sheet_hint_says_when_no_sheet_has_numbers(tmp_path: Path) -> None:
    from reportgen.io.excel import read_excel

    path = _book(tmp_path, {"Notes": NOTES, "More notes": NOTES})
    with pytest.raises(DataError, match="none of them has a column of numbers"):
        read_excel(path, "")


# ------------------------------------------------------------------ a pair set holding a listed pair


SET_WITH_LISTED = (MINIMAL.replace('y = "b"', 'y = "b"\nlabel = "Own label"\nmodel = "rank"')
                   + '[[pair_sets]]\nname = "trio"\ncolumns = ["c", "b", "a"]\n'
                   + '[pair_sets.priors.rho]\nfamily = "beta"\na = 3\nb = 3\n')


def test_a_pair_set_may_hold_a_listed_pair_which_keeps_its_settings() -> None:
    pairs = expand_pairs(parse_spec_text(SET_WITH_LISTED, Path("s.toml")))
    # 3 columns give 3 pairs (3 choose 2); (a, b) is among them and is fitted once, as listed
    assert len(pairs) == 3
    assert len({frozenset((p.x, p.y)) for p in pairs}) == 3
    listed = pairs[0]
    assert (listed.x, listed.y, listed.label, listed.model) == ("a", "b", "Own label", "rank")
    assert listed.priors.rho.shapes == (1.0, 1.0)  # the spec-wide prior, not the set's Beta(3, 3)
    assert listed.pair_set == "" and listed.pair_sets == ("trio",)
    assert all(p.pair_sets == ("trio",) and p.priors.rho.shapes == (3.0, 3.0) for p in pairs[1:])


def test_a_listed_pair_in_two_pair_sets_is_shown_in_both() -> None:
    text = SET_WITH_LISTED + '[[pair_sets]]\nname = "duo"\ncolumns = ["b", "a"]\n'
    pairs = expand_pairs(parse_spec_text(text, Path("s.toml")))
    assert len(pairs) == 3 and pairs[0].pair_sets == ("trio", "duo")


@pytest.mark.parametrize("extra", [
    '[[pairs]]\nx = "b"\ny = "a"\n',
    '[[pair_sets]]\nname = "g1"\ncolumns = ["c", "d"]\n[[pair_sets]]\nname = "g2"\ncolumns = ["d", "c"]\n',
], ids=["two-listed-pairs", "two-pair-sets"])
def test_true_duplicates_are_still_refused(extra: str) -> None:
    with pytest.raises(SpecError, match="already listed"):
        expand_pairs(parse_spec_text(MINIMAL + extra, Path("s.toml")))


def test_a_run_records_json_dump_of_the_spec_still_validates() -> None:
    """A run record keeps the resolved spec as JSON (Python's json module: dates become text, tuples lists);
    the stricter types must still take it back, which is why a quoted date stays accepted."""
    import json

    from reportgen.spec.loading import spec_from_resolved

    spec = load_spec(Path(__file__).parent.parent / "reportgen" / "demo" / "quillmere_spec.toml")
    dumped = json.loads(json.dumps(spec.document.model_dump(mode="json")))
    again = spec_from_resolved(dumped, spec.source_path, source_sha256="", source_text="")
    assert again.document == spec.document and again.pairs == spec.pairs
