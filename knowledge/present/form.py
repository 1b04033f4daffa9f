"""What the case form shows beside each input: the unit and the valid range, read from the models.

The ranges come from the field constraints of :class:`knowledge.tables.models.Patient` and from the
calculators' validity ranges, so the form and the validation can never disagree.
"""

from __future__ import annotations

from pydantic import BaseModel

from ..tables import models as m
from ..calculators import kidney
from ..calculators.ranges import field_range


def _g(x: float) -> str:
    return f"{x:g}"


def range_text(low: float | None, high: float | None, unit: str = "") -> str:
    """'0–120 years', 'more than 0 mg/L', ... as shown beside an input."""
    u = f" {unit}" if unit else ""
    if low is not None and high is not None:
        return f"{_g(low)}–{_g(high)}{u}"
    if low is not None:
        return f"from {_g(low)}{u}" if low > 0 else f"more than 0{u}"
    if high is not None:
        return f"up to {_g(high)}{u}"
    return unit


def creatinine_range(unit: str) -> tuple[float, float]:
    """Creatinine the eGFR equations accept, in ``unit`` (kidney.CREATININE_MG_DL_RANGE, 0.1–20 mg/dL)."""
    lo, hi = kidney.CREATININE_MG_DL_RANGE
    return kidney.creatinine_from_mg_dl(lo, unit), kidney.creatinine_from_mg_dl(hi, unit)


def creatinine_hint(unit: str) -> str:
    lo, hi = creatinine_range(unit)
    shown = "µmol/L" if unit == "umol/L" else unit
    if unit == "umol/L":
        return f"{lo:.0f}–{hi:.0f} {shown}"
    return f"{lo:g}–{hi:g} {shown}"


#: Patient numeric field -> (label, unit) shown on the form
NUMBERS: dict[str, tuple[str, str]] = {
    "age_years": ("Age", "years"),
    "weight_kg": ("Weight", "kg"),
    "height_cm": ("Height", "cm"),
    "cystatin_c_mg_l": ("Cystatin C", "mg/L"),
    "egfr": ("eGFR, if known", "mL/min/1.73 m²"),
}


def hint(name: str) -> str:
    """Unit and range of a numeric Patient field, e.g. 'years, 0–120'."""
    label, unit = NUMBERS[name]
    low, high = field_range(m.Patient, name)
    if name == "cystatin_c_mg_l":
        low, high = kidney.CYSTATIN_C_MG_L_RANGE
    return range_text(low, high, unit)


def case_problems(data: dict) -> list[tuple[str, str]]:
    """Every validation problem of a case dict as (field, one-line message), for showing beside each input.

    The messages are those of :func:`knowledge.decision.engine.parse_case` (same wording), but all of them, not
    just the first. An empty list means the case is well formed (the engine may still find, say, an
    unknown exam or a creatinine outside the equation's range; it raises CaseError naming the field).
    """
    from pydantic import ValidationError

    from ..tables.validation import problems

    from ..decision.engine import case_time_problems

    try:
        case = m.Case.model_validate(data)
    except ValidationError as exc:
        return problems(exc, m.Case)
    return [(e.field or "", e.message) for e in case_time_problems(case)]


# ==================================================================================================
# The case form, generated from the models (knowledge/tables/models.py: Case, Patient and the nested
# Creatinine, PriorReaction, IVAccess). A new model field appears in the form, the link and the note
# without further edits: its label is its Field(description=...) unless LABELS has a shorter one, its
# group comes from GROUPS (else "Other conditions and medicines"), its range from its ge/gt/le/lt.
# ==================================================================================================
import datetime as _dt
import enum as _enum
import types as _types
import typing as _typing
from dataclasses import dataclass as _dataclass

#: the ONE table of groups: heading -> Patient fields, in the order shown (unlisted fields go to "other")
GROUPS: dict[str, tuple[str, ...]] = {
    "kidney": ("age_years", "sex", "creatinine", "cystatin_c_mg_l", "egfr", "acute_kidney_injury",
               "kidney_disease_history", "diabetes", "dialysis"),
    "gut": ("perforation_suspected", "obstruction", "obstruction_high_grade", "aspiration_risk",
            "tracheoesophageal_fistula_suspected", "colitis_or_diverticulitis", "toxic_megacolon",
            "recent_deep_biopsy", "bowel_fistula_suspected"),
    "history": ("prior_reactions",),
    "other": ("takes_metformin", "hyperthyroidism", "radioiodine_planned", "pregnant", "breastfeeding",
              "shellfish_or_iodine_allergy", "heart_failure", "myasthenia_gravis", "inpatient",
              "manifest_hyperthyroidism", "pheochromocytoma", "peg_allergy", "unstable_cardiopulmonary",
              "infant_thyroid_risk"),
    "size": ("weight_kg", "height_cm", "iv_access"),
}
GROUP_TITLES = {"kidney": "Kidney", "gut": "Gut and swallowing", "history": "Earlier contrast reactions",
                "other": "Other conditions and medicines", "size": "Size and IV access"}
DEFAULT_GROUP = "other"

#: short labels where the model's description is long or technical (path -> label)
LABELS: dict[str, str] = {
    "exam": "Exam", "agent": "Plan with", "scheduled_at": "Exam time", "as_of": "Times as of",
    "planned_flow_ml_s": "Flow", "planned_volume_ml": "Volume", "planned_concentration_mg_i_ml": "Strength",
    "patient.age_years": "Age", "patient.sex": "Sex", "patient.weight_kg": "Weight", "patient.height_cm": "Height",
    "patient.creatinine": "Creatinine", "patient.creatinine.value": "Creatinine",
    "patient.creatinine.unit": "Creatinine unit", "patient.creatinine.measured_on": "Creatinine measured on",
    "patient.cystatin_c_mg_l": "Cystatin C", "patient.egfr": "eGFR, if known",
    "patient.dialysis": "Dialysis", "patient.obstruction": "Bowel obstruction",
    "patient.prior_reactions": "Earlier reaction", "patient.prior_reactions.agent_family": "Reaction: agent family",
    "patient.prior_reactions.kind": "Reaction: kind", "patient.prior_reactions.severity": "Reaction: severity",
    "patient.prior_reactions.agent": "Reaction: culprit agent",
    "patient.iv_access": "IV catheter", "patient.iv_access.gauge": "IV catheter gauge",
    "patient.iv_access.site": "IV catheter site",
    "patient.kidney_disease_history": "Kidney disease, kidney surgery or a single kidney",
    "patient.diabetes": "Diabetes",
    "patient.tracheoesophageal_fistula_suspected": "Tracheo-oesophageal fistula suspected",
    "patient.perforation_suspected": "Perforation or leak suspected",
    "patient.hyperthyroidism": "Nodular goitre, latent hyperthyroidism or latent Graves' disease",
    "patient.recent_deep_biopsy": "Deep biopsy, polypectomy or colonic surgery in the last days",
    "patient.bowel_fistula_suspected": "Bowel fistula suspected",
    "patient.obstruction_high_grade": "Obstruction is high-grade",
    "patient.pheochromocytoma": "Pheochromocytoma or paraganglioma",
    "patient.infant_thyroid_risk": "Child under 3: born preterm or small, or heart disease",
    "patient.peg_allergy": "Polyethylene glycol (PEG) hypersensitivity",
    "patient.unstable_cardiopulmonary": "Pulmonary hypertension or unstable cardiopulmonary condition",
    "patient.prior_reactions.despite_premedication": "Reaction: despite premedication",
    "urgency": "Urgency", "override_culprit": "Override: plan the requested agent even though it caused an "
                                             "earlier reaction",
}
#: units shown beside numbers (path -> unit); otherwise read from the description's ", unit" tail
UNITS: dict[str, str] = {"patient.age_years": "years", "patient.egfr": "mL/min/1.73 m²",
                         "patient.cystatin_c_mg_l": "mg/L"}
#: words shown for choice values (value -> words); otherwise the value with spaces
CHOICE_WORDS: dict[str, str] = {"umol/L": "µmol/L", "dialysis_anuric": "dialysis, anuric",
                                "dialysis_residual_function": "dialysis, residual function",
                                "allergic_like": "allergic-like", "delayed": "delayed (skin, hours-days)"}


@_dataclass(frozen=True)
class FieldSpec:
    """One input of the case form, read from a model field.

    ``kind``: bool, number, integer, choice, date, datetime, text, model (``children``) or list (of models,
    ``children``, or of choices). ``path`` is the dotted case path (``patient.creatinine.unit``).
    """

    path: str
    name: str
    kind: str
    label: str
    description: str
    unit: str = ""
    low: float | None = None
    high: float | None = None
    choices: tuple[tuple[str, str], ...] = ()
    optional: bool = True
    default: _typing.Any = None
    children: tuple["FieldSpec", ...] = ()
    group: str = ""

    def hint(self) -> str:
        if self.kind in ("number", "integer"):
            return range_text(self.low, self.high, self.unit)
        return ""


def _strip_none(ann: _typing.Any) -> tuple[_typing.Any, bool]:
    args = _typing.get_args(ann)
    if _typing.get_origin(ann) in (_typing.Union, _types.UnionType) and type(None) in args:
        rest = [a for a in args if a is not type(None)]
        return (rest[0] if len(rest) == 1 else _typing.Union[tuple(rest)]), True
    return ann, False


def _choices(ann: _typing.Any) -> tuple[tuple[str, str], ...] | None:
    if isinstance(ann, type) and issubclass(ann, _enum.Enum):
        values = [str(x.value) for x in ann]
    elif _typing.get_origin(ann) is _typing.Literal:
        values = [str(x) for x in _typing.get_args(ann)]
    else:
        return None
    return tuple((CHOICE_WORDS.get(v, v.replace("_", " ")), v) for v in values)


def _unit_of(path: str, description: str) -> str:
    if path in UNITS:
        return UNITS[path]
    tail = description.rsplit(", ", 1)
    return tail[1] if len(tail) == 2 and len(tail[1]) <= 16 else ""


def label_of(name_or_path: str) -> str:
    """The form's label of a case field ('age_years' or 'patient.age_years' -> 'Age')."""
    path = name_or_path if "." in name_or_path or name_or_path in m.Case.model_fields else f"patient.{name_or_path}"
    path = path.split("[")[0] if "[" not in path else _no_index(path)
    if path in LABELS:
        return LABELS[path]
    spec = _find(path)
    return spec.label if spec else name_or_path


def _no_index(path: str) -> str:
    import re

    return re.sub(r"\[\d+\]", "", path)


def _spec(model: type[BaseModel], name: str, prefix: str) -> FieldSpec:
    f = model.model_fields[name]
    path = f"{prefix}{name}"
    desc = f.description or name.replace("_", " ")
    ann, optional = _strip_none(f.annotation)
    if _typing.get_origin(ann) is _typing.Annotated:  # e.g. the local date-time types of the case model
        ann = _typing.get_args(ann)[0]
    label = LABELS.get(path, desc)
    default = None if f.is_required() else f.get_default(call_default_factory=True)
    common = dict(path=path, name=name, label=label, description=desc, optional=optional or not f.is_required(),
                  default=default)
    choices = _choices(ann)
    if ann is bool:
        return FieldSpec(kind="bool", **common)
    if choices is not None:
        return FieldSpec(kind="choice", choices=choices, **common)
    if _typing.get_origin(ann) is list:
        (item,) = _typing.get_args(ann)
        if isinstance(item, type) and issubclass(item, BaseModel):
            return FieldSpec(kind="list", children=_model_specs(item, path + "."), **common)
        return FieldSpec(kind="list", choices=_choices(item) or (), **common)
    if isinstance(ann, type) and issubclass(ann, BaseModel):
        return FieldSpec(kind="model", children=_model_specs(ann, path + "."), **common)
    if ann in (int, float):
        low, high = field_range(model, name)
        return FieldSpec(kind="integer" if ann is int else "number", unit=_unit_of(path, desc), low=low, high=high,
                         **common)
    if ann is _dt.datetime:
        return FieldSpec(kind="datetime", **common)
    if ann is _dt.date or _typing.get_origin(ann) in (_typing.Union, _types.UnionType):
        return FieldSpec(kind="date", **common)  # date | datetime: a sample's date
    return FieldSpec(kind="text", **common)


def _model_specs(model: type[BaseModel], prefix: str) -> tuple[FieldSpec, ...]:
    return tuple(_spec(model, name, prefix) for name in model.model_fields)


def case_specs() -> tuple[FieldSpec, ...]:
    """Every Case field as a FieldSpec (``patient`` with its children, each with its group)."""
    out = []
    for spec in _model_specs(m.Case, ""):
        if spec.name == "patient":
            kids = tuple(FieldSpec(**{**s.__dict__, "group": group_of(s.name)}) for s in spec.children)
            spec = FieldSpec(**{**spec.__dict__, "children": kids})
        out.append(spec)
    return tuple(out)


def group_of(name: str) -> str:
    for group, names in GROUPS.items():
        if name in names:
            return group
    return DEFAULT_GROUP


def patient_specs() -> dict[str, list[FieldSpec]]:
    """The patient fields by group, in the order of GROUPS then the model (new fields last in 'other')."""
    specs = {s.name: s for s in next(s for s in case_specs() if s.name == "patient").children}
    out: dict[str, list[FieldSpec]] = {g: [] for g in GROUPS}
    for group, names in GROUPS.items():
        out[group] += [specs[n] for n in names if n in specs]
    listed = {n for names in GROUPS.values() for n in names}
    out[DEFAULT_GROUP] += [s for n, s in specs.items() if n not in listed]
    return out


def _find(path: str) -> FieldSpec | None:
    def walk(specs):
        for s in specs:
            if s.path == path:
                return s
            hit = walk(s.children)
            if hit:
                return hit
        return None

    return walk(case_specs())


def all_paths() -> list[str]:
    """Every leaf path of the case (``patient.creatinine.value``, ``patient.prior_reactions.kind``, ...)."""
    out: list[str] = []

    def walk(specs):
        for s in specs:
            if s.children:
                walk(s.children)
            else:
                out.append(s.path)

    walk(case_specs())
    return out


# ---- typed strings -> JSON values (the one place the form parses what was typed) ------------------
_TRUE_WORDS = {"1", "true", "yes", "on", "y"}
_FALSE_WORDS = {"0", "false", "no", "off", "n"}


def typed_value(spec: FieldSpec, value: _typing.Any) -> _typing.Any:
    """A typed string as the JSON value of its field ('60' -> 60.0, '1' -> True, '' -> None); text that
    cannot be read is returned unchanged, so validation names the field and the value as typed."""
    if not isinstance(value, str):
        return value
    text = value.strip()
    if spec.kind in ("number", "integer"):
        t = text.replace(",", ".")
        if t == "":
            return None
        try:
            x = float(t)
        except ValueError:
            return value
        return int(x) if spec.kind == "integer" and x.is_integer() else x
    if spec.kind == "bool":
        low = text.lower()
        return True if low in _TRUE_WORDS else False if low in _FALSE_WORDS or low == "" else value
    if text == "" and spec.optional:
        return None
    return text


def typed_case(data: dict) -> dict:
    """The case dict with every typed string turned into its field's JSON value (see :func:`typed_value`);
    empty optional values are dropped. Used by the dashboard and the links before ``parse_case``."""

    def walk(specs: tuple[FieldSpec, ...], raw: dict) -> dict:
        by = {s.name: s for s in specs}
        out = {}
        for key, value in raw.items():
            s = by.get(key)
            if s is None:
                out[key] = value  # unknown: left for validation to name
            elif s.kind == "model" and isinstance(value, dict):
                out[key] = walk(s.children, value)
            elif s.kind == "list" and isinstance(value, list):
                out[key] = [walk(s.children, v) if s.children and isinstance(v, dict) else v for v in value]
            else:
                v = typed_value(s, value)
                if v is not None:
                    out[key] = v
        return out

    return walk(case_specs(), data or {})


# ---- messages in the form's words -----------------------------------------------------------------
def field_message(field: str, message: str, typed: str | None = None) -> str:
    """A validation message with the form's label instead of the code path
    ('patient.age_years: ...' -> 'Age: ...'), and a creatinine that looks like the other unit said so."""
    path = _no_index(field)
    label = label_of(path) if path else ""
    head, sep, rest = message.partition(": ")
    text = f"{label}: {rest}" if sep and head.strip() == field and label else message
    return text


def creatinine_unit_check(value: float, unit: str) -> str | None:
    """'99 mg/dL looks like µmol/L — did you mean µmol/L?' when the value fits the other unit's range
    and not its own (ranges: knowledge.calculators.kidney.CREATININE_MG_DL_RANGE in each unit)."""
    lo, hi = creatinine_range(unit)
    other = "umol/L" if unit == "mg/dL" else "mg/dL"
    olo, ohi = creatinine_range(other)
    if lo <= value <= hi or not (olo <= value <= ohi):
        return None
    shown = {"umol/L": "µmol/L"}.get(unit, unit)
    oshown = {"umol/L": "µmol/L"}.get(other, other)
    return f"Creatinine: {value:g} {shown} is outside {creatinine_hint(unit)} — did you mean {oshown}?"


def creatinine_message(value: float, unit: str) -> str | None:
    """The message for a creatinine outside the equations' range, in the unit the user typed
    ('Creatinine: 2500 µmol/L is out of range; allowed: 9–1768 µmol/L'), or the unit check's
    'did you mean' when the value fits the other unit. None when the value is in range."""
    lo, hi = creatinine_range(unit)
    if lo <= value <= hi:
        return None
    shown = {"umol/L": "µmol/L"}.get(unit, unit)
    return creatinine_unit_check(value, unit) or (
        f"Creatinine: {value:g} {shown} is out of range; allowed: {creatinine_hint(unit)}")
