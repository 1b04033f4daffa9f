"""What the case form shows beside each input: the unit and the valid range, read from the models.

The ranges come from the field constraints of :class:`knowledge.tables.models.Patient` and from the
calculators' validity ranges, so the form and the validation can never disagree.
"""

from __future__ import annotations

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
