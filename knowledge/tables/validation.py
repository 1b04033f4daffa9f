"""Turn pydantic validation errors into one-line messages naming the field, the value and what is allowed."""

from __future__ import annotations

import typing
from typing import Any

from pydantic import BaseModel, ValidationError

from ..errors import show


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
    return tuple(p for p in loc if isinstance(p, int) or ("[" not in p and not p[:1].isupper()))


def _one(model: type[BaseModel], err: dict, prefix: str) -> str:
    loc = clean_loc(err["loc"])
    field = (prefix + "." if prefix else "") + dotted(loc) if loc else prefix
    etype, ctx, given = err["type"], err.get("ctx") or {}, err.get("input")
    if etype == "extra_forbidden":
        owner = _model_at(model, loc)
        allowed = ", ".join(owner.model_fields) if owner else "see `contrast-aid knowledge schema`"
        return f"{field}: unknown field; allowed: {allowed}"
    if etype == "missing":
        return f"{field}: required field is missing"
    if etype in ("literal_error", "enum"):
        return f"{field}: {show(given)} is not allowed; allowed: {ctx.get('expected', '')}"
    bounds = {"greater_than": "more than", "greater_than_equal": "at least", "less_than": "less than",
              "less_than_equal": "at most"}
    if etype in bounds:
        limit = next(iter(ctx.values()))
        limit = f"{limit:g}" if isinstance(limit, float) else limit
        return f"{field}: {show(given)} is out of range; allowed: {bounds[etype]} {limit}"
    if etype in ("float_parsing", "int_parsing", "float_type", "int_type"):
        return f"{field}: {show(given)} is not a number; allowed: a number"
    if etype in ("dict_type", "model_type", "model_attributes_type"):
        return f"{field}: {show(given)} is not an object; allowed: an object with the fields of {field or 'the case'}"
    if etype == "list_type":
        return f"{field}: {show(given)} is not a list; allowed: a list"
    if etype in ("bool_parsing", "bool_type"):
        return f"{field}: {show(given)} is not true or false; allowed: true, false"
    if etype in ("datetime_parsing", "datetime_from_date_parsing", "date_parsing", "date_from_datetime_parsing"):
        return f"{field}: {show(given)} is not a date; allowed: an ISO 8601 date such as 2026-12-01 (or 2026-12-01T09:00)"
    if etype == "value_error":
        text = str(ctx.get("error", err["msg"]))
        return f"{field}: {text}" if field else text
    return f"{field}: {show(given)} is not valid ({err['msg'].lower()})"


def problems(exc: ValidationError, model: type[BaseModel]) -> list[tuple[str, str]]:
    """Every error of ``exc`` as (dotted field, one-line message)."""
    return [(dotted(clean_loc(err["loc"])), _one(model, err, "")) for err in exc.errors(include_url=False)]


def describe(exc: ValidationError, model: type[BaseModel], prefix: str = "") -> str:
    """One line for the first error of ``exc`` (with a count of the others)."""
    errors = exc.errors(include_url=False)
    line = _one(model, errors[0], prefix)
    if len(errors) > 1:
        line += f" (and {len(errors) - 1} more problem{'s' if len(errors) > 2 else ''})"
    return line
