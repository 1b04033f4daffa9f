"""Creatinine freshness and the risk factors that make a creatinine required before intravascular iodinated
contrast.

Source keys (see ``knowledge/data/sources.yaml``):
- ``acr-manual``: ACR Manual on Contrast Media, kidney chapter, screening questions for patients due to
  receive intravascular iodinated contrast. The list kept here (age over 60; history of kidney disease —
  dialysis, kidney transplant, single kidney, kidney cancer or kidney surgery; diabetes mellitus;
  metformin) is **from memory**, not checked against the current edition.
- How old a creatinine may be (outpatient / inpatient or acute illness) is a department policy setting
  (``creatinine_max_age_days_outpatient`` / ``_inpatient``); the defaults are common practice.
"""

from __future__ import annotations

import datetime as dt

from ..errors import RangeError, out_of_range

#: Age above which the ACR Manual screening questions ask for a creatinine (from memory).
RISK_AGE_YEARS = 60.0

#: Certainty of the risk-factor list in this module.
RISK_FACTORS_CERTAINTY = "from_memory"


def align_times(a: dt.datetime, b: dt.datetime) -> tuple[dt.datetime, dt.datetime]:
    """Make two date-times comparable: a naive one is read in the other's time zone."""
    if (a.tzinfo is None) != (b.tzinfo is None):
        if a.tzinfo is None:
            a = a.replace(tzinfo=b.tzinfo)
        else:
            b = b.replace(tzinfo=a.tzinfo)
    return a, b


def creatinine_age_days(measured_on: dt.date | dt.datetime, at: dt.datetime) -> float:
    """How old a creatinine is at ``at`` (usually the exam time), days.

    Formula: age = (at − measured_on) in days. A date without a time counts whole calendar days
    (sample taken on the 1st, exam on the 3rd → 2 days). A sample taken after ``at`` is an error.

    Example: a sample of 28 November is 4 days old for an exam on 2 December.

    >>> import datetime as dt
    >>> creatinine_age_days(dt.date(2026, 11, 28), dt.datetime(2026, 12, 2, 9, 0))
    4.0
    """
    if isinstance(measured_on, dt.datetime):
        a, b = align_times(at, measured_on)
        days = (a - b).total_seconds() / 86400.0
    elif isinstance(measured_on, dt.date):
        days = float((at.date() - measured_on).days)
    else:
        raise RangeError(
            f"creatinine.measured_on: {measured_on!r} is not a date; allowed: an ISO 8601 date or date-time",
            field="creatinine.measured_on",
        )
    if days < 0:
        raise RangeError(
            f"creatinine.measured_on: {measured_on.isoformat()} is after the exam time {at.isoformat()}; "
            "allowed: a sample taken before the exam",
            field="creatinine.measured_on",
        )
    return days


def creatinine_max_age_days(inpatient: bool, acute_kidney_injury: bool, outpatient_days: float,
                            inpatient_days: float) -> float:
    """The oldest acceptable creatinine, days: the policy's inpatient limit for an inpatient, an acutely
    ill patient or acute kidney injury, else its outpatient limit (policy settings, common practice)."""
    for name, value in (("creatinine_max_age_days_outpatient", outpatient_days),
                        ("creatinine_max_age_days_inpatient", inpatient_days)):
        if not value > 0:
            raise out_of_range(name, value, 0, None, "days (more than)")
    return float(inpatient_days if (inpatient or acute_kidney_injury) else outpatient_days)


def creatinine_risk_factors(*, age_years: float | None, kidney_disease_history: bool, dialysis: str,
                            diabetes: bool, takes_metformin: bool, acute_kidney_injury: bool,
                            egfr_known: float | None = None, egfr_low_below: float | None = None) -> list[str]:
    """The risk factors that make a recent creatinine required before intravascular iodinated contrast.

    Source ``acr-manual`` (kidney screening questions; from memory): age over 60 years; history of kidney
    disease (dialysis, kidney transplant, single kidney, kidney cancer, kidney surgery); diabetes mellitus;
    metformin. Added here: acute kidney injury, and an earlier eGFR known to be below ``egfr_low_below``
    (the policy's prophylaxis threshold) — both common practice. Returns short labels, empty when none.
    """
    found: list[str] = []
    if age_years is not None and age_years > RISK_AGE_YEARS:
        found.append(f"age over {RISK_AGE_YEARS:g}")
    if kidney_disease_history:
        found.append("history of kidney disease or kidney surgery")
    if dialysis not in (None, "none"):
        found.append("dialysis")
    if diabetes:
        found.append("diabetes mellitus")
    if takes_metformin:
        found.append("metformin")
    if acute_kidney_injury:
        found.append("acute kidney injury")
    if egfr_known is not None and egfr_low_below is not None and egfr_known < egfr_low_below:
        found.append(f"earlier eGFR below {egfr_low_below:g}")
    return found
