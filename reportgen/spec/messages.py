"""Stage 1, the messages: pydantic's validation errors as one line that names the key path and the fix."""

from __future__ import annotations

import difflib
import re
import typing
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ValidationError

from reportgen.spec.schema import RULE_NAME_PATTERN, SAMPLER_MINIMUM_REASONS, WRONG_TOML_TYPE, SpecDocument


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
    elif kind == WRONG_TOML_TYPE:
        detail = str(problem["msg"])
        got_text = ""
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
    elif kind == WRONG_TOML_TYPE:  # "`sampler.draws` = "1000" is text; write a number without quotes: 1000"
        ctx = first.get("ctx") or {}
        message = f"`{path}{ctx.get('suffix', '')}` = {first['msg']}"
    elif not location:
        message = describe_problem(first, location)
    elif location[-1] == "[key]":  # a [variables] key (a column name): quoting it whole could fill the screen
        message = f"`{format_location(location[:-2])}`: a column name {describe_problem(first, location)}"
    else:
        message = f"`{path}`: {describe_problem(first, location)}"
    more = len(problems) - 1
    suffix = f" (and {more} more problem{'s' if more > 1 else ''})" if more else ""
    return f"{source}: {message}{suffix}"
