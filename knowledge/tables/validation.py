"""Turn pydantic validation errors into one-line messages naming the field, the value and what is allowed."""

from __future__ import annotations

import typing
from typing import Any

from pydantic import BaseModel, ValidationError

from ..errors import NO_VALUE, ContrastAidError, clip, line, suggest


def _model_at(model: type[BaseModel], loc: tuple) -> type[BaseModel] | None:
    """The model class that owns the last element of ``loc``, if it can be found."""
    current: Any = model
    for part in loc[:-1]:
        if isinstance(part, int):
            continue
        fields = getattr(current, "model_fields", None)
        if not fields or part not in fields:
            return None
        current = _inner_model(fields[part].annotation)
        if current is None:
            return None
    return current if isinstance(current, type) and issubclass(current, BaseModel) else None


def _inner_model(annotation: Any) -> type[BaseModel] | None:
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return annotation
    for arg in typing.get_args(annotation):
        found = _inner_model(arg)
        if found is not None:
            return found
    return None


def dotted(loc: tuple) -> str:
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += ("." if out else "") + str(part)
    return out or "(top level)"


def clean_loc(loc: tuple) -> tuple:
    """``loc`` without the member names unions add to it ("function-after[...]", "Test", ...)."""
    return tuple(p for p in loc if isinstance(p, int) or ("[" not in p and not p[:1].isupper()
                                                          and p not in _UNION_TAGS))


#: Names pydantic adds to a location for the member of a union of plain types (``date | datetime``)
_UNION_TAGS = frozenset({"date", "datetime", "float", "int", "str", "bool", "list", "dict", "none"})


def _one(model: type[BaseModel], err: dict, prefix: str) -> dict[str, Any]:
    """The structured parts (field, value, problem, allowed) of one pydantic error."""
    loc = clean_loc(err["loc"])
    field = (prefix + "." if prefix else "") + dotted(loc) if loc else prefix
    etype, ctx, given = err["type"], err.get("ctx") or {}, err.get("input")
    parts: dict[str, Any] = {"field": field or None, "value": given}
    if etype == "extra_forbidden":
        owner = _model_at(model, loc)
        allowed = ", ".join(owner.model_fields) if owner else "see `contrast-aid knowledge schema`"
        near = suggest(loc[-1], owner.model_fields) if owner and loc and isinstance(loc[-1], str) else None
        return {**parts, "value": NO_VALUE, "problem": "unknown field", "allowed": allowed, "suggestion": near}
    if etype == "missing":
        return {**parts, "value": NO_VALUE, "problem": "required field is missing"}
    if etype in ("literal_error", "enum"):
        return {**parts, "problem": "is not allowed", "allowed": ctx.get("expected", "")}
    bounds = {"greater_than": "more than", "greater_than_equal": "at least", "less_than": "less than",
              "less_than_equal": "at most"}
    if etype in bounds:
        limit = next(iter(ctx.values()))
        limit = f"{limit:g}" if isinstance(limit, float) else limit
        return {**parts, "problem": "is out of range", "allowed": f"{bounds[etype]} {limit}"}
    if etype == "finite_number":
        return {**parts, "problem": "is not a finite number", "allowed": "a finite number"}
    if etype in ("float_parsing", "int_parsing", "float_type", "int_type", "int_from_float"):
        kind = "a whole number" if etype.startswith("int") else "a number"
        return {**parts, "problem": "is not a number" if kind == "a number" else "is not a whole number",
                "allowed": kind + " (not text, not true/false)"}
    if etype in ("dict_type", "model_type", "model_attributes_type"):
        return {**parts, "problem": "is not an object", "allowed": f"an object with the fields of {field or 'the case'}"}
    if etype == "list_type":
        return {**parts, "problem": "is not a list", "allowed": "a list"}
    if etype in ("bool_parsing", "bool_type"):
        return {**parts, "problem": "is not true or false", "allowed": "true, false"}
    if etype in ("string_type", "str_type"):
        return {**parts, "problem": "is not text", "allowed": "a string"}
    if etype in ("datetime_parsing", "datetime_from_date_parsing", "date_parsing", "date_from_datetime_parsing",
                 "datetime_type", "date_type", "date_from_datetime_inexact"):
        return {**parts, "problem": "is not a date",
                "allowed": "an ISO 8601 date such as 2026-12-01 or local date-time 2026-12-01T09:00 (no UTC offset)"}
    if etype == "value_error":
        error = ctx.get("error")
        text = str(error if error is not None else err["msg"])
        return {"field": field or None, "problem": text, "message": f"{field}: {text}" if field else text}
    return {**parts, "problem": f"is not valid ({err['msg'].lower()})"}


def _line(parts: dict[str, Any], note: str | None = None) -> str:
    if "message" in parts:
        return clip(parts["message"] + (f" {note}" if note else ""))
    return line(parts.get("field"), parts["problem"], parts.get("value", NO_VALUE), parts.get("allowed"),
                parts.get("suggestion"), note)


def _more(count: int) -> str | None:
    return f"(and {count} more problem{'s' if count > 1 else ''})" if count else None


def error_from(exc: ValidationError, model: type[BaseModel], cls: type[ContrastAidError], prefix: str = "",
               where: str | None = None) -> ContrastAidError:
    """The first error of ``exc`` as a structured ``cls`` error (with a count of the others).

    ``where`` (a file or record name) is put before the field in the message only."""
    errors = exc.errors(include_url=False)
    parts = _one(model, errors[0], prefix)
    note = _more(len(errors) - 1)
    text = _line(parts, note)
    if where:
        text = clip(f"{where}: {text}")
    return cls(text, field=parts.get("field"), value=parts.get("value", NO_VALUE), allowed=parts.get("allowed"),
               suggestion=parts.get("suggestion"))


def first_error_parts(exc: ValidationError, model: type[BaseModel]) -> dict[str, Any]:
    """The structured parts (field, value, problem, allowed, suggestion) of the first error of ``exc``."""
    return _one(model, exc.errors(include_url=False)[0], "")


def line_from_parts(parts: dict[str, Any], field: str | None) -> str:
    """The one-line message of ``parts`` under another field name (e.g. a worklist column)."""
    if "message" in parts:
        return _line(parts)
    return line(field, parts["problem"], parts.get("value", NO_VALUE), parts.get("allowed"), parts.get("suggestion"))


def problems(exc: ValidationError, model: type[BaseModel]) -> list[tuple[str, str]]:
    """Every error of ``exc`` as (dotted field, one-line message)."""
    return [(dotted(clean_loc(err["loc"])), _line(_one(model, err, ""))) for err in exc.errors(include_url=False)]


def describe(exc: ValidationError, model: type[BaseModel], prefix: str = "") -> str:
    """One line for the first error of ``exc`` (with a count of the others)."""
    errors = exc.errors(include_url=False)
    return _line(_one(model, errors[0], prefix), _more(len(errors) - 1))
