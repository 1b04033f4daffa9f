"""Body surface area and absolute GFR.

Source keys (see ``knowledge/data/sources.yaml``):
- ``du-bois-1916``: A formula to estimate the approximate surface area if height and weight be known,
  Arch Intern Med, 1916.
- ``mosteller-1987``: Simplified calculation of body-surface area, N Engl J Med, 1987.
- ``ckd-epi-2021`` / ``kdigo-2012``: eGFR is indexed to 1.73 m² of body surface area; the absolute GFR
  (mL/min) that a dose is compared with is eGFR · BSA / 1.73.
"""

from __future__ import annotations

from ..errors import RangeError
from .ranges import HEIGHT_CM_RANGE, WEIGHT_KG_RANGE, check

#: eGFR accepted for de-indexing, mL/min/1.73 m² (the same bounds as ``Patient.egfr``, widened to 0).
EGFR_RANGE = (0.0, 200.0)
#: Body surface area accepted, m² (covers the weight and height bounds above with either formula).
BSA_M2_RANGE = (0.05, 4.5)
#: The body surface area eGFR is indexed to, m².
INDEX_BSA_M2 = 1.73

BSA_FORMULAS = ("du_bois", "mosteller")


def bsa_du_bois(weight_kg: float, height_cm: float) -> float:
    """Body surface area by the Du Bois formula, m².

    Formula (source ``du-bois-1916``): BSA = 0.007184 · W^0.425 · H^0.725, W in kg, H in cm.
    Valid range: weight 0.5–350 kg, height 30–250 cm (the case model's bounds; the formula was derived
    in adults and children of ordinary build).

    Example (no published worked example is known to us: the value is the formula as printed):
    70 kg, 170 cm → 0.007184 · 70^0.425 · 170^0.725 = 1.81 m².

    >>> round(bsa_du_bois(70, 170), 2)
    1.81
    """
    check("weight_kg", weight_kg, WEIGHT_KG_RANGE, "kg")
    check("height_cm", height_cm, HEIGHT_CM_RANGE, "cm")
    return 0.007184 * weight_kg**0.425 * height_cm**0.725


def bsa_mosteller(weight_kg: float, height_cm: float) -> float:
    """Body surface area by the Mosteller formula, m².

    Formula (source ``mosteller-1987``): BSA = √(H · W / 3600), W in kg, H in cm.
    Valid range: weight 0.5–350 kg, height 30–250 cm.

    Example (the formula as printed): 70 kg, 170 cm → √(170 · 70 / 3600) = 1.818 m².

    >>> round(bsa_mosteller(70, 170), 3)
    1.818
    """
    check("weight_kg", weight_kg, WEIGHT_KG_RANGE, "kg")
    check("height_cm", height_cm, HEIGHT_CM_RANGE, "cm")
    return (height_cm * weight_kg / 3600.0) ** 0.5


def bsa(weight_kg: float, height_cm: float, formula: str = "du_bois") -> float:
    """Body surface area, m², by ``formula`` (``du_bois`` or ``mosteller``)."""
    if formula == "du_bois":
        return bsa_du_bois(weight_kg, height_cm)
    if formula == "mosteller":
        return bsa_mosteller(weight_kg, height_cm)
    raise RangeError(field="bsa_formula", value=formula, problem="is not allowed", allowed="'du_bois', 'mosteller'")


def absolute_gfr(egfr: float, bsa_m2: float) -> float:
    """Absolute GFR, mL/min, from an eGFR indexed to 1.73 m².

    Formula (sources ``ckd-epi-2021``, ``kdigo-2012``): GFR = eGFR · BSA / 1.73.
    Valid range: eGFR 0–200 mL/min/1.73 m², BSA 0.05–4.5 m².

    Invariant: a body surface area of exactly 1.73 m² leaves the eGFR unchanged.

    >>> absolute_gfr(60, 1.73)
    60.0
    >>> round(absolute_gfr(57.5, 2.0), 1)
    66.5
    """
    check("egfr", egfr, EGFR_RANGE, "mL/min/1.73 m²")
    check("bsa_m2", bsa_m2, BSA_M2_RANGE, "m²")
    return egfr * bsa_m2 / INDEX_BSA_M2
