"""Shareable links: a case as a URL query string and back, with no patient identifiers.

The dashboard is opened with a query such as
``exam=ct-abdomen-pelvis&creatinine=1.4&unit=mg/dL&age=60&sex=male`` and prefills the case from it.
The codec is generated from the case model (:func:`knowledge.present.form.case_specs`): every field of
:class:`~knowledge.tables.models.Case` and :class:`~knowledge.tables.models.Patient` has a key, so a new
model field travels in links without further edits. Keys are the field name unless :data:`LINK_KEYS` gives
a short one; a nested model's fields are ``FIELD_SUB`` unless named there; a list of models is one
repeatable key with its fields joined by ``:`` in model order (``reaction=FAMILY:KIND:SEVERITY[:AGENT]``);
a list of choices is a repeatable key. Booleans are ``1``. The case model has no field for a name, a record
number or a date of birth, and unknown keys (for example those Voila adds) are ignored.

Values are passed on as given (strings); :func:`knowledge.decision.engine.parse_form_case` (after the
form's :func:`~knowledge.present.form.typed_case`) validates them and names the field of any bad value, so
a link can never crash the dashboard.
"""

from __future__ import annotations

from typing import Any
from urllib.parse import parse_qsl, urlencode

from ..tables import models as m
from .form import FieldSpec, case_specs

#: short keys of the links made so far (case path -> key); other fields use their own name
LINK_KEYS: dict[str, str] = {
    "scheduled_at": "at", "as_of": "asof",
    "patient.age_years": "age", "patient.weight_kg": "weight", "patient.height_cm": "height",
    "patient.cystatin_c_mg_l": "cystatin",
    "patient.creatinine.value": "creatinine", "patient.creatinine.unit": "unit",
    "patient.creatinine.measured_on": "measured",
    "patient.acute_kidney_injury": "aki", "patient.perforation_suspected": "perforation",
    "patient.aspiration_risk": "aspiration", "patient.tracheoesophageal_fistula_suspected": "te_fistula",
    "patient.takes_metformin": "metformin", "patient.hyperthyroidism": "hyperthyroid",
    "patient.radioiodine_planned": "radioiodine", "patient.shellfish_or_iodine_allergy": "seafood_allergy",
    "patient.myasthenia_gravis": "myasthenia", "patient.kidney_disease_history": "kidney_disease",
    "patient.iv_access.gauge": "iv_gauge", "patient.iv_access.site": "iv_site",
    "patient.prior_reactions": "reaction",
    "override_culprit": "override",
    "patient.manifest_hyperthyroidism": "manifest_hyperthyroid", "patient.pheochromocytoma": "pheo",
    "patient.colitis_or_diverticulitis": "colitis", "patient.toxic_megacolon": "megacolon",
    "patient.recent_deep_biopsy": "deep_biopsy", "patient.bowel_fistula_suspected": "bowel_fistula",
    "patient.obstruction_high_grade": "high_grade", "patient.unstable_cardiopulmonary": "cardiopulmonary",
}
#: how a flag inside a repeated key is written (path -> word); other flags in a list item are written 1
ITEM_FLAG_WORDS: dict[str, str] = {"patient.prior_reactions.despite_premedication": "breakthrough"}
#: values written in other spellings in links (unit names), read back to the model's
_ALIASES = {"umol/l": "umol/L", "µmol/l": "umol/L", "mg/dl": "mg/dL"}
_TRUE = {"1", "true", "yes", "on", "y"}
_FALSE = {"0", "false", "no", "off", "n", ""}


def key_of(spec: FieldSpec) -> str:
    """The query key of a field: LINK_KEYS, else the path below ``patient.`` with '_' for '.'."""
    if spec.path in LINK_KEYS:
        return LINK_KEYS[spec.path]
    path = spec.path[len("patient."):] if spec.path.startswith("patient.") else spec.path
    return path.replace(".", "_")


def link_keys() -> dict[str, str]:
    """Every leaf case path -> its query key (lists of models: the list's path)."""
    out: dict[str, str] = {}

    def walk(specs):
        for s in specs:
            if s.kind == "model":
                walk(s.children)
            else:
                out[s.path] = key_of(s)

    walk(case_specs())
    return out


def _flag(value: str) -> bool | str:
    low = value.strip().lower()
    if low in _TRUE:
        return True
    if low in _FALSE:
        return False
    return value  # left for parse_form_case to reject, naming the field


def case_from_query(query: str) -> dict[str, Any]:
    """A case dict (for ``parse_form_case``) from a URL query string; unknown keys are ignored.

    Keys: see the module docstring and :func:`link_keys` (``exam``, ``agent``, ``at``, ``asof``,
    ``creatinine`` with ``unit`` (default ``mg/dL``) and ``measured``, ``age``, ``sex``, ..., ``iv_gauge``
    with ``iv_site``, ``reaction=FAMILY:KIND:SEVERITY[:AGENT]`` (repeatable))."""
    values: dict[str, str] = {}
    repeated: dict[str, list[str]] = {}
    for key, value in parse_qsl((query or "").lstrip("?"), keep_blank_values=True):
        key = key.strip().lower()
        values[key] = value  # the last one wins, as in a form
        repeated.setdefault(key, []).append(value)
    specs = case_specs()
    case = _read_fields(specs, values, repeated)
    patient = _read_fields(next(s for s in specs if s.name == "patient").children, values, repeated)
    if patient:
        case["patient"] = patient
    return case


_NOTHING = object()  # a field the query does not set


def _read_fields(specs: tuple[FieldSpec, ...], values: dict[str, str],
                 repeated: dict[str, list[str]]) -> dict[str, Any]:
    """The fields of ``specs`` the query sets (``patient`` is read on its own)."""
    out: dict[str, Any] = {}
    for s in specs:
        if s.name == "patient":
            continue
        value = _read_field(s, values, repeated)
        if value is not _NOTHING:
            out[s.name] = value
    return out


def _read_field(s: FieldSpec, values: dict[str, str], repeated: dict[str, list[str]]) -> Any:
    """One field's value from the query, or ``_NOTHING``: a nested model, repeated rows, a list, a flag
    or the text as typed (with its alias)."""
    key = key_of(s)
    if s.kind == "model":
        sub = _read_fields(s.children, values, repeated)
        if not sub:
            return _NOTHING
        if s.path == "patient.creatinine" and "value" in sub:
            sub.setdefault("unit", "mg/dL")  # links made by hand often leave the unit out
        elif s.path == "patient.creatinine":
            return _NOTHING  # a unit or date without a value is no creatinine
        return sub
    if s.kind == "list" and s.children:
        rows = [row for row in (_read_row(s, text) for text in repeated.get(key, [])) if row]
        return rows or _NOTHING
    if s.kind == "list":
        return [v.strip() for v in repeated.get(key, []) if v.strip()] or _NOTHING
    if s.kind == "bool":
        flag = _flag(values[key]) if key in values else False
        return _NOTHING if flag is False else flag
    if values.get(key, "").strip():
        text = values[key].strip()
        return _ALIASES.get(text.lower(), text)
    return _NOTHING


def _read_row(s: FieldSpec, text: str) -> dict[str, Any]:
    """One repeated key's ``:``-separated row (e.g. a prior reaction); empty parts are left out."""
    parts = [p.strip() for p in text.split(":")]
    return {c.name: _item_value(c, p) for c, p in zip(s.children, parts) if p}


def _item_value(spec: FieldSpec, part: str) -> Any:
    """One ``:``-part of a repeated key (a flag may be written as its word, e.g. 'breakthrough')."""
    if spec.kind == "bool":
        word = ITEM_FLAG_WORDS.get(spec.path)
        return True if word is not None and part.lower() == word else _flag(part)
    return part


def _item_text(spec: FieldSpec, value: Any) -> str:
    if value is None or value is False or value == spec.default:
        return ""
    if spec.kind == "bool":
        return ITEM_FLAG_WORDS.get(spec.path, "1")
    return _text(value)


def _text(value: Any) -> str:
    value = getattr(value, "value", value)
    if isinstance(value, bool):
        return "1" if value else "0"
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value)


def _when(spec: FieldSpec, value: Any) -> str:
    text = _text(value)
    if spec.kind == "datetime":
        return text[:16]
    if spec.kind == "date":
        return text[:10]
    return text


def query_from_case(case: m.Case | dict[str, Any]) -> str:
    """The query string of a case (a :class:`Case` or a case dict): the inverse of :func:`case_from_query`.

    Only fields that differ from the defaults are written, in the model's order (exam first), so equal
    cases give equal links."""
    if isinstance(case, m.Case):
        case = case.model_dump(mode="json", exclude_defaults=True)
    pairs: list[tuple[str, str]] = []

    def write(specs: tuple[FieldSpec, ...], data: dict[str, Any]) -> None:
        for s in specs:
            value = data.get(s.name)
            if s.name == "patient" or value is None or value == s.default:
                continue
            if s.kind == "model" and isinstance(value, dict):
                write(s.children, value)
            elif s.kind == "list" and s.children:
                for row in value:
                    parts = [_item_text(c, row.get(c.name)) for c in s.children]
                    while parts and parts[-1] == "":
                        parts.pop()
                    pairs.append((key_of(s), ":".join(parts)))
            elif s.kind == "list":
                pairs.extend((key_of(s), _text(v)) for v in value)
            elif s.kind == "bool":
                if value is True:
                    pairs.append((key_of(s), "1"))
            elif _text(value) not in ("", "none"):
                pairs.append((key_of(s), _when(s, value)))

    specs = case_specs()
    write(specs, case)
    write(next(s for s in specs if s.name == "patient").children, case.get("patient") or {})
    return urlencode(pairs, safe="/:")
