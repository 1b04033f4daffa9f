"""Shareable links: a case as a URL query string and back, with no patient identifiers.

The dashboard is opened with a query such as
``exam=ct-abdomen-pelvis&creatinine=1.4&unit=mg/dL&age=60&sex=male`` and prefills the case from it.
Only the clinical factors of :class:`knowledge.tables.models.Patient` travel; the case model has no field for a
name, a record number or a date of birth, and unknown keys (for example those Voila adds) are ignored.

Values are passed on as given (strings); :func:`knowledge.decision.engine.parse_form_case` validates them and names
the field of any bad value, so a link can never crash the dashboard.
"""

from __future__ import annotations

from typing import Any
from urllib.parse import parse_qsl, urlencode

from ..tables import models as m

#: short query key -> Patient field, for the scalar (number or choice) fields
SCALARS: dict[str, str] = {
    "age": "age_years",
    "sex": "sex",
    "weight": "weight_kg",
    "height": "height_cm",
    "cystatin": "cystatin_c_mg_l",
    "egfr": "egfr",
    "dialysis": "dialysis",
    "obstruction": "obstruction",
}

#: short query key -> boolean Patient field
FLAGS: dict[str, str] = {
    "aki": "acute_kidney_injury",
    "perforation": "perforation_suspected",
    "aspiration": "aspiration_risk",
    "te_fistula": "tracheoesophageal_fistula_suspected",
    "metformin": "takes_metformin",
    "hyperthyroid": "hyperthyroidism",
    "radioiodine": "radioiodine_planned",
    "pregnant": "pregnant",
    "breastfeeding": "breastfeeding",
    "seafood_allergy": "shellfish_or_iodine_allergy",
    "heart_failure": "heart_failure",
    "myasthenia": "myasthenia_gravis",
    "inpatient": "inpatient",
    "kidney_disease": "kidney_disease_history",
    "diabetes": "diabetes",
    "manifest_hyperthyroid": "manifest_hyperthyroidism",
    "pheo": "pheochromocytoma",
    "colitis": "colitis_or_diverticulitis",
    "megacolon": "toxic_megacolon",
    "deep_biopsy": "recent_deep_biopsy",
    "bowel_fistula": "bowel_fistula_suspected",
    "high_grade": "obstruction_high_grade",
    "peg_allergy": "peg_allergy",  # issue 13
    "cardiopulmonary": "unstable_cardiopulmonary",  # issue 13
}

#: the value of a reaction's fifth part that marks a breakthrough reaction (despite premedication)
BREAKTHROUGH = "breakthrough"

_TRUE = {"1", "true", "yes", "on", "y"}
_FALSE = {"0", "false", "no", "off", "n", ""}


def _flag(value: str) -> bool | str:
    low = value.strip().lower()
    if low in _TRUE:
        return True
    if low in _FALSE:
        return False
    return value  # left for parse_form_case to reject, naming the field


def case_from_query(query: str) -> dict[str, Any]:
    """A case dict (for ``parse_form_case``) from a URL query string; unknown keys are ignored.

    Keys: ``exam``, ``agent``, ``at`` (the exam's date-time), ``asof`` (the "now" the link was made for),
    ``creatinine`` with ``unit`` (``mg/dL``
    default, or ``umol/L``) and ``measured`` (the sample's date),
    the short keys of :data:`SCALARS` and :data:`FLAGS`, ``iv_gauge`` with ``iv_site``, and
    ``reaction=FAMILY:KIND:SEVERITY[:AGENT[:breakthrough]]`` (repeatable) for prior reactions, ``urgency``
    and ``override=1`` (the explicit culprit override).
    """
    pairs = parse_qsl((query or "").lstrip("?"), keep_blank_values=True)
    case: dict[str, Any] = {}
    patient: dict[str, Any] = {}
    values: dict[str, str] = {}
    reactions: list[dict[str, Any]] = []
    for key, value in pairs:
        key = key.strip().lower()
        if key == "reaction":
            parts = [p.strip() for p in value.split(":")]
            row: dict[str, Any] = {}
            for name, part in zip(("agent_family", "kind", "severity", "agent"), parts):
                if part:
                    row[name] = part
            if len(parts) > 4 and parts[4]:
                row["despite_premedication"] = True if parts[4].lower() == BREAKTHROUGH else parts[4]
            if row:
                reactions.append(row)
        else:
            values[key] = value  # the last one wins, as in a form
    if values.get("exam"):
        case["exam"] = values["exam"].strip()
    if values.get("agent"):
        case["agent"] = values["agent"].strip()
    if values.get("at", "").strip():  # the exam's date-time: not an identifier
        case["scheduled_at"] = values["at"].strip()
    if values.get("asof", "").strip():  # the "now" the link was made for
        case["as_of"] = values["asof"].strip()
    if values.get("urgency", "").strip():
        case["urgency"] = values["urgency"].strip()
    if "override" in values:
        flag = _flag(values["override"])
        if flag is not False:
            case["override_culprit"] = flag
    if values.get("creatinine", "").strip():
        unit = values.get("unit", "mg/dL").strip() or "mg/dL"
        unit = {"umol/l": "umol/L", "µmol/l": "umol/L", "mg/dl": "mg/dL"}.get(unit.lower(), unit)
        patient["creatinine"] = {"value": values["creatinine"].strip(), "unit": unit}
        if values.get("measured", "").strip():
            patient["creatinine"]["measured_on"] = values["measured"].strip()
    for key, field in SCALARS.items():
        if values.get(key, "").strip():
            patient[field] = values[key].strip()
    for key, field in FLAGS.items():
        if key in values:
            flag = _flag(values[key])
            if flag is not False:
                patient[field] = flag
    if values.get("iv_gauge", "").strip() or values.get("iv_site", "").strip():
        patient["iv_access"] = {"gauge": values.get("iv_gauge", "").strip(), "site": values.get("iv_site", "").strip()}
    if reactions:
        patient["prior_reactions"] = reactions
    if patient:
        case["patient"] = patient
    return case


def _text(value: Any) -> str:
    value = getattr(value, "value", value)
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value)


def query_from_case(case: m.Case | dict[str, Any]) -> str:
    """The query string of a case (a :class:`Case` or a case dict): the inverse of :func:`case_from_query`.

    Only fields that differ from the defaults are written, in a fixed order, so equal cases give equal links.
    """
    if isinstance(case, m.Case):
        case = case.model_dump(mode="json", exclude_defaults=True)
    pairs: list[tuple[str, str]] = []
    if case.get("exam"):
        pairs.append(("exam", str(case["exam"])))
    if case.get("agent"):
        pairs.append(("agent", str(case["agent"])))
    if case.get("scheduled_at"):
        pairs.append(("at", str(case["scheduled_at"])[:16]))
    if case.get("as_of"):
        pairs.append(("asof", str(case["as_of"])[:16]))
    if case.get("urgency") and _text(case["urgency"]) != "elective":
        pairs.append(("urgency", _text(case["urgency"])))
    if case.get("override_culprit") is True:
        pairs.append(("override", "1"))
    p = case.get("patient") or {}
    cr = p.get("creatinine")
    if cr:
        pairs.append(("creatinine", _text(cr["value"])))
        pairs.append(("unit", _text(cr["unit"])))
        if cr.get("measured_on"):
            pairs.append(("measured", str(cr["measured_on"])[:10]))
    for key, field in SCALARS.items():
        value = p.get(field)
        if value is None or _text(value) in ("", "none"):
            continue
        pairs.append((key, _text(value)))
    for key, field in FLAGS.items():
        if p.get(field) is True:
            pairs.append((key, "1"))
    iv = p.get("iv_access")
    if iv:
        pairs.append(("iv_gauge", _text(iv["gauge"])))
        pairs.append(("iv_site", _text(iv["site"])))
    for r in p.get("prior_reactions") or []:
        parts = [_text(r["agent_family"]), _text(r["kind"]), _text(r["severity"])]
        if r.get("agent") or r.get("despite_premedication") is True:
            parts.append(str(r.get("agent") or ""))
        if r.get("despite_premedication") is True:
            parts.append(BREAKTHROUGH)
        pairs.append(("reaction", ":".join(parts)))
    return urlencode(pairs, safe="/:")
