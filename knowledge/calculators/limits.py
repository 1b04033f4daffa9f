"""Renal dose limits for iodinated contrast.

Source keys (see ``knowledge/data/sources.yaml``):
- ``cigarroa-1989``: Dosing of contrast material to prevent contrast nephropathy in patients with renal
  disease, Am J Med, 1989 (maximum volume = 5 mL · kg / Scr mg/dL, at most 300 mL; derived in cardiac
  catheterisation).
- ``iodine-gfr-ratio``: grams of iodine / absolute GFR (mL/min) below 1 (journal details from memory).
- ``esur-pc-aki-2018``: first-pass intra-arterial caps, g iodine / absolute GFR < 1.1 and mL / GFR < 3.0.
"""

from __future__ import annotations

from .ranges import WEIGHT_KG_RANGE, check

#: Upper bound of the Cigarroa maximum volume, mL (source ``cigarroa-1989``).
CIGARROA_CAP_ML = 300.0
CIGARROA_ML_PER_KG = 5.0
CREATININE_MG_DL_RANGE = (0.1, 20.0)
IODINE_G_RANGE = (0.0, 200.0)
GFR_ML_MIN_RANGE = (0.5, 400.0)
TOTAL_VOLUME_ML_RANGE = (0.0, 1000.0)  # a whole study's contrast volume, mL


def cigarroa_max_volume_ml(weight_kg: float, scr_mg_dl: float) -> float:
    """Maximum contrast volume for a catheter study, mL (source ``cigarroa-1989``).

    Formula: max = 5 mL · weight (kg) / serum creatinine (mg/dL), at most 300 mL.
    Valid range: weight 0.5–350 kg, creatinine 0.1–20 mg/dL.

    Examples (Am J Med 1989 formula): 70 kg, creatinine 1.4 mg/dL → 5 · 70 / 1.4 = 250 mL; 90 kg,
    1.0 mg/dL → 450, capped at 300 mL.

    >>> round(cigarroa_max_volume_ml(70, 1.4))
    250
    >>> cigarroa_max_volume_ml(90, 1.0)
    300.0
    """
    check("weight_kg", weight_kg, WEIGHT_KG_RANGE, "kg")
    check("creatinine", scr_mg_dl, CREATININE_MG_DL_RANGE, "mg/dL")
    return min(CIGARROA_ML_PER_KG * weight_kg / scr_mg_dl, CIGARROA_CAP_ML)


def iodine_gfr_ratio(iodine_g: float, absolute_gfr_ml_min: float) -> float:
    """Grams of iodine per mL/min of absolute GFR (sources ``iodine-gfr-ratio``, ``esur-pc-aki-2018``).

    Formula: ratio = g I / GFR (mL/min); flag at ≥ 1 (policy ``iodine_g_per_gfr_max``), first-pass
    intra-arterial cap < 1.1 (policy ``first_pass_iodine_g_per_gfr_max``). Valid range: 0–200 g I,
    GFR 0.5–400 mL/min.

    Example: 35 g of iodine for an absolute GFR of 70 mL/min → 0.5 (below the ratio of 1).

    >>> iodine_gfr_ratio(35, 70)
    0.5
    """
    check("iodine_g", iodine_g, IODINE_G_RANGE, "g")
    check("absolute_gfr_ml_min", absolute_gfr_ml_min, GFR_ML_MIN_RANGE, "mL/min")
    return iodine_g / absolute_gfr_ml_min


def volume_gfr_ratio(volume_ml: float, absolute_gfr_ml_min: float) -> float:
    """Contrast volume per mL/min of absolute GFR (source ``esur-pc-aki-2018``: first-pass cap < 3.0).

    Formula: ratio = volume (mL) / GFR (mL/min). Valid range: 0–1000 mL, GFR 0.5–400 mL/min.

    Example: 100 mL for an absolute GFR of 50 mL/min → 2.0 (ESUR first-pass < 3.0).

    >>> volume_gfr_ratio(100, 50)
    2.0
    """
    check("volume_ml", volume_ml, TOTAL_VOLUME_ML_RANGE, "mL")
    check("absolute_gfr_ml_min", absolute_gfr_ml_min, GFR_ML_MIN_RANGE, "mL/min")
    return volume_ml / absolute_gfr_ml_min
