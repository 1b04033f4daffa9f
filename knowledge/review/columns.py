"""Worklist columns, generated from the case model (``knowledge.tables.models.Case`` and ``Patient``).

One row per order. The columns are the case's fields, flattened:

- ``order_id`` (required, the department's own key; passed through) and ``exam`` (required: an exam id
  or a local procedure code of the department overlay);
- every other field of ``Case`` by its name (``scheduled_at``, …), except ``agent``, which is the column
  ``planned_agent``, and ``as_of``, which is the review's ``--as-of`` for the whole list;
- every field of ``Patient`` by its name; a nested record is flattened as ``<field>`` for its ``value``
  and ``<field>_<part>`` for its other parts (``creatinine``, ``creatinine_unit``,
  ``creatinine_measured_on``; ``iv_access_gauge``, ``iv_access_site``); a list of records is one cell,
  records separated by ``;`` and their parts by ``:`` in the model's order, trailing optional parts left
  out (``prior_reactions``: ``family:kind:severity[:agent];…``).

A field added to the model appears here without an edit. Cells are text; an empty cell is "not given".
"""

from __future__ import annotations

import typing
from dataclasses import dataclass
from typing import Any

from pydantic import BaseModel, ValidationError

from ..decision.engine import check_case_times
from ..tables import models as m
from ..tables.validation import clean_loc, dotted, first_error_parts, line_from_parts

REQUIRED = ("order_id", "exam")
RENAMED = {"agent": "planned_agent"}
SKIPPED = {"as_of", "patient", "exam"}


@dataclass(frozen=True)
class Column:
    name: str
    path: tuple[str, ...]  # where the value goes in the case dict
    kind: str  # "scalar" or "records"
    description: str
    parts: tuple[str, ...] = ()  # for "records": the record's field names in order


def _model_of(annotation: Any) -> type[BaseModel] | None:
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return annotation
    for arg in typing.get_args(annotation):
        found = _model_of(arg)
        if found is not None:
            return found
    return None


def _is_list(annotation: Any) -> bool:
    return typing.get_origin(annotation) is list


def _columns_of(model: type[BaseModel], prefix: tuple[str, ...], skip: set[str]) -> list[Column]:
    out = []
    for name, f in model.model_fields.items():
        if name in skip:
            continue
        inner = _model_of(f.annotation)
        desc = f.description or ""
        column = RENAMED.get(name, name) if not prefix else name
        if inner is not None and _is_list(f.annotation):
            parts = tuple(inner.model_fields)
            out.append(Column(column, prefix + (name,), "records", f"{desc} ({':'.join(parts)};…)", parts))
        elif inner is not None:
            for sub, sf in inner.model_fields.items():
                col = column if sub == "value" else f"{column}_{sub}"
                out.append(Column(col, prefix + (name, sub), "scalar", f"{desc}: {sf.description or sub}"))
        else:
            out.append(Column(column, prefix + (name,), "scalar", desc))
    return out


def case_columns() -> list[Column]:
    """Every column a worklist may have, in order (``order_id`` and ``exam`` first)."""
    head = [Column("order_id", (), "scalar", "The department's order key (passed through)"),
            Column("exam", ("exam",), "scalar", "Exam id, or a local procedure code of the department overlay")]
    return head + _columns_of(m.Case, (), SKIPPED) + _columns_of(m.Patient, ("patient",), set())


class RowError(Exception):
    """A row that cannot be reviewed: the message names the column and the value."""


def _put(target: dict, path: tuple[str, ...], value: Any) -> None:
    for part in path[:-1]:
        target = target.setdefault(part, {})
    target[path[-1]] = value


def _records(col: Column, text: str) -> list[dict]:
    out = []
    for chunk in [c.strip() for c in text.split(";") if c.strip()]:
        values = [v.strip() for v in chunk.split(":")]
        if len(values) > len(col.parts):
            raise RowError(f"column {col.name}: {chunk!r} has {len(values)} parts; allowed: at most "
                           f"{len(col.parts)} ({':'.join(col.parts)})")
        out.append({p: v for p, v in zip(col.parts, values) if v != ""})
    return out


class CaseBuilder:
    """Turns a worklist row (column -> text) into a case dict; keeps the column index."""

    def __init__(self) -> None:
        self.columns = case_columns()
        self.by_name = {c.name: c for c in self.columns}
        self.by_path = {c.path: c for c in self.columns if c.kind == "scalar"}
        self.records = {c.path: c for c in self.columns if c.kind == "records"}

    def known(self, header: list[str]) -> tuple[list[str], list[str]]:
        """(columns used, columns passed through unread)."""
        used = [h for h in header if h in self.by_name]
        return used, [h for h in header if h not in self.by_name]

    def case_dict(self, row: dict[str, str], exam: str) -> dict:
        case: dict[str, Any] = {"exam": exam, "patient": {}}
        for name, text in row.items():
            col = self.by_name.get(name)
            if col is None or name in REQUIRED or text == "":
                continue
            _put(case, col.path, _records(col, text) if col.kind == "records" else text)
        return case

    def column_for(self, loc: tuple) -> str:
        """The column a validation error location points at."""
        parts = tuple(p for p in clean_loc(loc) if not isinstance(p, int))
        while parts:
            if parts in self.by_path:
                return self.by_path[parts].name
            if parts in self.records:
                return self.records[parts].name
            parts = parts[:-1]
        return dotted(clean_loc(loc))

    def validate(self, case: dict) -> m.Case:
        """A case from the cells' text (lax, as the dashboard form reads typed text), with the same
        checks of its date-times against its as_of as every case (``check_case_times``)."""
        try:
            case_obj = m.Case.model_validate(case)
            check_case_times(case_obj)
            return case_obj
        except ValidationError as exc:
            err = exc.errors(include_url=False)[0]
            column = self.column_for(err["loc"])
            raise RowError(line_from_parts(first_error_parts(exc, m.Case), f"column {column}")) from None
