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


from .ranges import HOURS_AFTER_RANGE, HOURS_BEFORE_RANGE, RATE_ML_KG_H_RANGE, WEIGHT_KG_RANGE, check

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


def weight_based_plan(weight_kg: float, rate_ml_kg_h: float, hours_before: float, hours_after: float, *,
                      fluid: str = "0.9% sodium chloride", contrast_at: dt.datetime | None = None,
                      heart_failure: bool = False) -> HydrationPlan:
    """A weight-based IV hydration plan (sources ``acr-nkf-2020``, ``esur-pc-aki-2018``).

    Formula: rate (mL/h) = rate (mL/kg/h) · weight (kg); volume before = rate · hours before; volume after =
    rate · hours after. Starts ``hours_before`` before contrast and stops ``hours_after`` after it.
    Valid range: 0.5–350 kg, 0.5–3 mL/kg/h, 0–12 h before and after. Heart failure adds the caution.

    Example (ACR-NKF 2020: 1-3 mL/kg/h, about 1 h before and 3-12 h after): 70 kg at 1 mL/kg/h,
    1 h before and 6 h after → 70 mL/h, 70 mL before and 420 mL after.

    >>> p = weight_based_plan(70, 1.0, 1.0, 6.0)
    >>> (p.rate_ml_h, p.volume_before_ml, p.volume_after_ml)
    (70.0, 70.0, 420.0)
    """
    check("weight_kg", weight_kg, WEIGHT_KG_RANGE, "kg")
    check("hydration_ml_kg_h", rate_ml_kg_h, RATE_ML_KG_H_RANGE, "mL/kg/h")
    check("hydration_hours_before", hours_before, HOURS_BEFORE_RANGE, "h")
    check("hydration_hours_after", hours_after, HOURS_AFTER_RANGE, "h")
    rate = rate_ml_kg_h * weight_kg
    start = contrast_at - dt.timedelta(hours=hours_before) if contrast_at is not None else None
    stop = contrast_at + dt.timedelta(hours=hours_after) if contrast_at is not None else None
    warnings = [HEART_FAILURE_CAUTION] if heart_failure else []
    return HydrationPlan(fluid, rate, hours_before, hours_after, rate * hours_before, rate * hours_after,
                         start, stop, warnings)
