"""Gadolinium and microbubble doses: amount (mmol) and volume (mL) from weight and strength (issue 13).

Source keys (see ``knowledge/data/sources.yaml``):
- ``label-gbca-us``, ``label-gadopiclenol-ch``: the labelled doses in mmol/kg and mL/kg (e.g. gadobutrol
  0.1 mmol/kg = 0.1 mL/kg of 1.0 mmol/mL; gadoxetate disodium 0.025 mmol/kg = 0.1 mL/kg of 0.25 mmol/mL;
  gadopiclenol 0.05 mmol/kg = 0.1 mL/kg of 0.5 mmol/mL).
- ``label-uca-us``: perflutren lipid microspheres, 10 microlitres/kg as a bolus.

The formulas are unit identities: mmol = mmol/kg · kg; mL = mmol / (mmol/mL).
"""

from __future__ import annotations

from dataclasses import dataclass

from ..tables import models as m
from .ranges import FLOW_RANGE, VOLUME_RANGE, WEIGHT_KG_RANGE, check, field_range

#: Gadolinium dose per kg, mmol/kg: from 0.01 up to the agent model's cap (0.3; triple dose).
DOSE_MMOL_KG_RANGE = (0.01, field_range(m.Agent, "standard_dose_mmol_kg")[1])
#: Gadolinium strength, mmol/mL: dilute intra-articular solutions (about 0.002) up to 1.0 mmol/mL.
CONCENTRATION_MMOL_ML_RANGE = (0.001, 1.0)
#: Weight-based volume, mL/kg (microbubbles are dosed in microlitres per kg).
VOLUME_ML_KG_RANGE = (0.001, field_range(m.DoseProtocol, "volume_ml_per_kg")[1])


@dataclass(frozen=True)
class GadoliniumDose:
    dose_mmol: float
    volume_ml: float
    volume_ml_per_kg: float


def gadolinium_dose(weight_kg: float, dose_mmol_kg: float, concentration_mmol_ml: float) -> GadoliniumDose:
    """Amount and volume of a weight-based gadolinium dose.

    mmol = dose (mmol/kg) · weight (kg); mL = mmol / strength (mmol/mL); mL/kg = dose / strength.
    Valid range: weight 0.5-350 kg, dose 0.01-0.3 mmol/kg, strength 0.001-1.0 mmol/mL.

    Example (gadobutrol label: 0.1 mmol/kg = 0.1 mL/kg of the 1.0 mmol/mL solution): 70 kg → 7 mmol in 7 mL;
    the same amount of a 0.5 mmol/mL agent (gadoterate meglumine, 0.2 mL/kg) is 14 mL; gadoxetate disodium
    (0.025 mmol/kg of 0.25 mmol/mL, label 0.1 mL/kg) for 80 kg is 2 mmol in 8 mL.

    >>> gadolinium_dose(70, 0.1, 1.0)
    GadoliniumDose(dose_mmol=7.0, volume_ml=7.0, volume_ml_per_kg=0.1)
    >>> gadolinium_dose(70, 0.1, 0.5).volume_ml
    14.0
    >>> gadolinium_dose(80, 0.025, 0.25)
    GadoliniumDose(dose_mmol=2.0, volume_ml=8.0, volume_ml_per_kg=0.1)
    """
    check("weight_kg", weight_kg, WEIGHT_KG_RANGE, "kg")
    check("dose_mmol_kg", dose_mmol_kg, DOSE_MMOL_KG_RANGE, "mmol/kg")
    check("concentration_mmol_ml", concentration_mmol_ml, CONCENTRATION_MMOL_ML_RANGE, "mmol/mL")
    mmol = dose_mmol_kg * weight_kg
    return GadoliniumDose(dose_mmol=round(mmol, 6), volume_ml=round(mmol / concentration_mmol_ml, 6),
                          volume_ml_per_kg=round(dose_mmol_kg / concentration_mmol_ml, 6))


def volume_by_weight(weight_kg: float, volume_ml_per_kg: float) -> float:
    """Volume of a dose given per kg, mL = mL/kg · kg. Valid range: 0.5-350 kg, 0.001-1 mL/kg.

    Example (perflutren lipid microspheres label: bolus of 10 microlitres/kg): 80 kg → 0.8 mL.

    >>> volume_by_weight(80, 0.01)
    0.8
    """
    check("weight_kg", weight_kg, WEIGHT_KG_RANGE, "kg")
    check("volume_ml_per_kg", volume_ml_per_kg, VOLUME_ML_KG_RANGE, "mL/kg")
    return round(volume_ml_per_kg * weight_kg, 6)


def bolus_duration(volume_ml: float, flow_ml_s: float) -> float:
    """Injection duration, s = mL / (mL/s). Valid range: volume 0.1-300 mL, flow 0.1-10 mL/s.

    Example: 14 mL at the labelled rate of about 2 mL/s takes 7 s.

    >>> bolus_duration(14, 2)
    7.0
    """
    check("volume_ml", volume_ml, VOLUME_RANGE, "mL")
    check("flow_ml_s", flow_ml_s, FLOW_RANGE, "mL/s")
    return volume_ml / flow_ml_s
