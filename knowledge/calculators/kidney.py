"""Kidney function: creatinine units, eGFR equations and KDIGO GFR categories.

Source keys (see ``knowledge/data/sources.yaml``):
- ``ckd-epi-2021``: New Creatinine- and Cystatin C-Based Equations to Estimate GFR without Race,
  N Engl J Med, 2021.
- ``schwartz-2009``: New Equations to Estimate GFR in Children with CKD (bedside Schwartz),
  J Am Soc Nephrol, 2009.
- ``kdigo-2012``: KDIGO 2012 Clinical Practice Guideline for the Evaluation and Management of CKD,
  Kidney Int Suppl, 2013, Table 5.
"""

from __future__ import annotations

from ..errors import RangeError, out_of_range
from .ranges import HEIGHT_CM_RANGE, check

#: µmol/L per mg/dL of creatinine (molar mass 113.12 g/mol). Source: clinical notes, "Creatinine units".
UMOL_PER_MG_DL = 88.4

#: Serum creatinine accepted by the equations, mg/dL (0.1–20). Outside this a value is far more likely a
#: typing or unit error than a real result (common practice bound, not from a guideline).
CREATININE_MG_DL_RANGE = (0.1, 20.0)
CYSTATIN_C_MG_L_RANGE = (0.2, 10.0)  # common practice plausibility bound
ADULT_AGE_RANGE = (18.0, 120.0)
CHILD_AGE_RANGE = (1.0, 18.0)


def creatinine_to_mg_dl(value: float, unit: str) -> float:
    """Convert a serum creatinine to mg/dL.

    Formula: mg/dL = µmol/L / 88.4. Units accepted: ``mg/dL``, ``umol/L``.

    Worked example (clinical notes, creatinine units: 1 mg/dL = 88.4 µmol/L):

    >>> creatinine_to_mg_dl(88.4, "umol/L")
    1.0
    """
    if unit == "mg/dL":
        return float(value)
    if unit == "umol/L":
        return float(value) / UMOL_PER_MG_DL
    raise RangeError(field="creatinine.unit", value=unit, problem="is not allowed", allowed="'mg/dL', 'umol/L'")


def creatinine_from_mg_dl(value_mg_dl: float, unit: str) -> float:
    """Convert a serum creatinine given in mg/dL to ``unit`` (``mg/dL`` or ``umol/L``).

    Worked example (1 mg/dL = 88.4 µmol/L):

    >>> creatinine_from_mg_dl(1.0, "umol/L")
    88.4
    """
    if unit == "mg/dL":
        return float(value_mg_dl)
    if unit == "umol/L":
        return float(value_mg_dl) * UMOL_PER_MG_DL
    raise RangeError(field="creatinine.unit", value=unit, problem="is not allowed", allowed="'mg/dL', 'umol/L'")


def egfr_ckd_epi_2021(scr_mg_dl: float, age_years: float, sex: str) -> float:
    """eGFR by the race-free CKD-EPI 2021 creatinine equation, mL/min/1.73 m².

    Formula (source ``ckd-epi-2021``)::

        eGFR = 142 · min(Scr/κ, 1)^α · max(Scr/κ, 1)^−1.200 · 0.9938^age · 1.012 [if female]
        κ = 0.7 (female), 0.9 (male);  α = −0.241 (female), −0.302 (male)

    Valid for adults 18–120 years, IDMS-traceable creatinine 0.1–20 mg/dL.

    Worked examples (N Engl J Med 2021 equation; values computed and matching a public reference
    implementation, clinical notes): man, 60 years, 1.4 mg/dL → 57.54; woman, 40 years, 0.6 mg/dL → 116.3.

    >>> round(egfr_ckd_epi_2021(1.4, 60, "male"), 2)
    57.54
    >>> round(egfr_ckd_epi_2021(0.6, 40, "female"), 1)
    116.3
    """
    check("age_years", age_years, ADULT_AGE_RANGE, "years (CKD-EPI 2021 is for adults)")
    check("creatinine", scr_mg_dl, CREATININE_MG_DL_RANGE, "mg/dL")
    if sex == "female":
        kappa, alpha, factor = 0.7, -0.241, 1.012
    elif sex == "male":
        kappa, alpha, factor = 0.9, -0.302, 1.0
    else:
        raise RangeError(field="sex", value=sex, problem="is not allowed", allowed="'female', 'male'")
    ratio = scr_mg_dl / kappa
    return 142.0 * min(ratio, 1.0) ** alpha * max(ratio, 1.0) ** -1.200 * 0.9938**age_years * factor


def egfr_ckd_epi_2021_cystatin(scr_mg_dl: float, scys_mg_l: float, age_years: float, sex: str) -> float:
    """eGFR by the race-free CKD-EPI 2021 creatinine–cystatin C equation, mL/min/1.73 m².

    Formula (source ``ckd-epi-2021``)::

        eGFR = 135 · min(Scr/κ,1)^α · max(Scr/κ,1)^−0.544 · min(Scys/0.8,1)^−0.323
               · max(Scys/0.8,1)^−0.778 · 0.9961^age · 0.963 [if female]
        κ = 0.7 (female), 0.9 (male);  α = −0.219 (female), −0.144 (male)

    Valid for adults 18–120 years; creatinine 0.1–20 mg/dL; cystatin C 0.2–10 mg/L.

    Worked example (same paper; clinical notes): man, 60 years, creatinine 1.4 mg/dL, cystatin C
    0.8 mg/L → 83.97.

    >>> round(egfr_ckd_epi_2021_cystatin(1.4, 0.8, 60, "male"), 2)
    83.97
    """
    check("age_years", age_years, ADULT_AGE_RANGE, "years (CKD-EPI 2021 is for adults)")
    check("creatinine", scr_mg_dl, CREATININE_MG_DL_RANGE, "mg/dL")
    check("cystatin_c_mg_l", scys_mg_l, CYSTATIN_C_MG_L_RANGE, "mg/L")
    if sex == "female":
        kappa, alpha, factor = 0.7, -0.219, 0.963
    elif sex == "male":
        kappa, alpha, factor = 0.9, -0.144, 1.0
    else:
        raise RangeError(field="sex", value=sex, problem="is not allowed", allowed="'female', 'male'")
    r = scr_mg_dl / kappa
    c = scys_mg_l / 0.8
    return (
        135.0
        * min(r, 1.0) ** alpha
        * max(r, 1.0) ** -0.544
        * min(c, 1.0) ** -0.323
        * max(c, 1.0) ** -0.778
        * 0.9961**age_years
        * factor
    )


def egfr_bedside_schwartz(height_cm: float, scr_mg_dl: float) -> float:
    """eGFR in children by the bedside Schwartz equation, mL/min/1.73 m².

    Formula (source ``schwartz-2009``): eGFR = 0.413 · height (cm) / Scr (mg/dL).
    Valid for children 1–17 years (age is checked by the caller), height 30–250 cm,
    creatinine 0.1–20 mg/dL (enzymatic, IDMS-traceable).

    Worked example (J Am Soc Nephrol 2009 equation; clinical notes): 120 cm, 0.6 mg/dL → 82.6.

    >>> round(egfr_bedside_schwartz(120, 0.6), 1)
    82.6
    """
    check("height_cm", height_cm, HEIGHT_CM_RANGE, "cm")
    check("creatinine", scr_mg_dl, CREATININE_MG_DL_RANGE, "mg/dL")
    return 0.413 * height_cm / scr_mg_dl


#: KDIGO 2012 GFR categories (source ``kdigo-2012``, Table 5): (category, lower bound inclusive).
KDIGO_CATEGORIES: tuple[tuple[str, float], ...] = (
    ("G1", 90.0),
    ("G2", 60.0),
    ("G3a", 45.0),
    ("G3b", 30.0),
    ("G4", 15.0),
    ("G5", 0.0),
)


def kdigo_category(egfr: float) -> str:
    """KDIGO 2012 GFR category for an eGFR in mL/min/1.73 m² (source ``kdigo-2012``, Table 5).

    G1 ≥90, G2 60–89, G3a 45–59, G3b 30–44, G4 15–29, G5 <15.

    Table 5 bands, at and either side of a bound:

    >>> [kdigo_category(x) for x in (90, 89.9, 60, 59.9, 45, 44.9, 30, 29.9, 15, 14.9)]
    ['G1', 'G2', 'G2', 'G3a', 'G3a', 'G3b', 'G3b', 'G4', 'G4', 'G5']
    """
    if egfr < 0:
        raise out_of_range("egfr", egfr, 0, None, "mL/min/1.73 m²")
    for name, low in KDIGO_CATEGORIES:
        if egfr >= low:
            return name
    return "G5"  # unreachable: the last bound is 0
