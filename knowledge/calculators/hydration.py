"""Intravenous hydration plans from body weight.

Source keys (see ``knowledge/data/sources.yaml``):
- ``acr-nkf-2020``: IV isotonic saline unless contraindicated (e.g. heart failure); typical regimens:
  500 mL before and 500 mL after, or 1–3 mL/kg/h starting about 1 h before and continuing 3–12 h after.
- ``esur-pc-aki-2018``: 0.9% saline 1 mL/kg/h for 3–4 h before and 4–6 h after, or 1.4% sodium
  bicarbonate 3 mL/kg/h for 1 h before (table wording from memory).
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field

from ..errors import out_of_range

WEIGHT_KG_RANGE = (0.5, 350.0)
RATE_ML_KG_H_RANGE = (0.5, 3.0)  # ACR-NKF 2020: 1-3 mL/kg/h; ESUR bicarbonate 3 mL/kg/h; 0.5 for caution
HOURS_BEFORE_RANGE = (0.0, 12.0)
HOURS_AFTER_RANGE = (0.0, 12.0)
HEART_FAILURE_CAUTION = (
    "Heart failure: IV fluid may cause volume overload - the ACR-NKF 2020 consensus gives saline unless "
    "contraindicated (e.g. heart failure); agree the volume with the referring clinician")


@dataclass
class HydrationPlan:
    fluid: str
    rate_ml_h: float
    hours_before: float
    hours_after: float
    volume_before_ml: float
    volume_after_ml: float
    start_at: dt.datetime | None
    stop_at: dt.datetime | None
    warnings: list[str] = field(default_factory=list)

    @property
    def total_ml(self) -> float:
        return self.volume_before_ml + self.volume_after_ml


def _check(name: str, value: float, bounds: tuple[float, float], unit: str) -> None:
    if not (bounds[0] <= value <= bounds[1]):
        raise out_of_range(name, value, bounds[0], bounds[1], unit)


def weight_based_plan(weight_kg: float, rate_ml_kg_h: float, hours_before: float, hours_after: float, *,
                      fluid: str = "0.9% sodium chloride", contrast_at: dt.datetime | None = None,
                      heart_failure: bool = False) -> HydrationPlan:
    """A weight-based IV hydration plan (sources ``acr-nkf-2020``, ``esur-pc-aki-2018``).

    Formula: rate (mL/h) = rate (mL/kg/h) · weight (kg); volume before = rate · hours before; volume after =
    rate · hours after. Starts ``hours_before`` before contrast and stops ``hours_after`` after it.
    Valid range: 0.5–350 kg, 0.5–3 mL/kg/h, 0–12 h before and after. Heart failure adds the caution.
    """
    _check("weight_kg", weight_kg, WEIGHT_KG_RANGE, "kg")
    _check("hydration_ml_kg_h", rate_ml_kg_h, RATE_ML_KG_H_RANGE, "mL/kg/h")
    _check("hydration_hours_before", hours_before, HOURS_BEFORE_RANGE, "h")
    _check("hydration_hours_after", hours_after, HOURS_AFTER_RANGE, "h")
    rate = rate_ml_kg_h * weight_kg
    start = contrast_at - dt.timedelta(hours=hours_before) if contrast_at is not None else None
    stop = contrast_at + dt.timedelta(hours=hours_after) if contrast_at is not None else None
    warnings = [HEART_FAILURE_CAUTION] if heart_failure else []
    return HydrationPlan(fluid, rate, hours_before, hours_after, rate * hours_before, rate * hours_after,
                         start, stop, warnings)
