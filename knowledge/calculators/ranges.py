"""The one range checker every calculator uses, and the ranges read from the case and policy models.

A calculator checks each input against the range its formula is valid for and raises
:class:`~knowledge.errors.RangeError` naming the field, the value and what is allowed. Where the case
or the policy model already bounds a field (``Patient.weight_kg``, ``IVAccess.gauge``,
``Policy.hydration_ml_kg_h`` …) the calculator's range is read from that model field, so the form, the
validation and the calculators can never disagree.

>>> field_range(m.Patient, "weight_kg")
(0.5, 350.0)
>>> check("weight_kg", 80, WEIGHT_KG_RANGE, "kg")
>>> check("weight_kg", 400, WEIGHT_KG_RANGE, "kg")
Traceback (most recent call last):
...
knowledge.errors.RangeError: weight_kg: 400 is out of range; allowed: from 0.5 to 350 kg
"""

from __future__ import annotations

import annotated_types as at
from pydantic import BaseModel

from ..errors import out_of_range
from ..tables import models as m


def field_range(model: type[BaseModel], name: str) -> tuple[float | None, float | None]:
    """(low, high) bounds of a numeric model field, from its ge/gt/le/lt constraints (None where open)."""
    low = high = None
    for c in model.model_fields[name].metadata:
        if isinstance(c, (at.Ge, at.Gt)):
            low = float(getattr(c, "ge", getattr(c, "gt", None)))
        elif isinstance(c, (at.Le, at.Lt)):
            high = float(getattr(c, "le", getattr(c, "lt", None)))
    return low, high


def _closed(model: type[BaseModel], name: str) -> tuple[float, float]:
    low, high = field_range(model, name)
    if low is None or high is None:
        raise AssertionError(f"{model.__name__}.{name} has no closed range")
    return low, high


def check(field: str, value: float, bounds: tuple[float, float], unit: str) -> None:
    """Raise RangeError unless ``bounds[0] <= value <= bounds[1]``."""
    if not (bounds[0] <= value <= bounds[1]):
        raise out_of_range(field, value, bounds[0], bounds[1], unit)


#: Body weight and height, from ``Patient.weight_kg`` / ``Patient.height_cm``.
WEIGHT_KG_RANGE = _closed(m.Patient, "weight_kg")
HEIGHT_CM_RANGE = _closed(m.Patient, "height_cm")
#: IV catheter gauge, from ``IVAccess.gauge``.
GAUGE_RANGE = _closed(m.IVAccess, "gauge")
#: Hydration rate and hours, from the policy model (ACR-NKF 2020: 1-3 mL/kg/h; 0.5 for caution).
RATE_ML_KG_H_RANGE = _closed(m.Policy, "hydration_ml_kg_h")
HOURS_BEFORE_RANGE = _closed(m.Policy, "hydration_hours_before")
HOURS_AFTER_RANGE = _closed(m.Policy, "hydration_hours_after")
#: Injected volume, mL: more than 0.1 mL, at most the case model's planned volume cap.
VOLUME_RANGE = (0.1, _closed(m.Case, "planned_volume_ml")[1])
#: Injection rate, mL/s: at least 0.1, at most the case model's planned flow cap (power injectors ~10 mL/s).
FLOW_RANGE = (0.1, _closed(m.Case, "planned_flow_ml_s")[1])
#: Weight-based iodine dose, g I/kg: 0.05 up to the protocol model's cap.
IODINE_G_PER_KG_RANGE = (0.05, _closed(m.DoseProtocol, "iodine_g_per_kg")[1])
#: Injection time, s: a bound on the input only (1 s to 10 min), not a clinical figure.
INJECTION_S_RANGE = (1.0, 600.0)
