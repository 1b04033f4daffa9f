"""Intravenous iodinated contrast in children: weight-based volume with caps, flow set by the cannula.

Source key ``acr-manual`` (ACR Manual on Contrast Media, contrast media in children; figures from memory,
clinical notes "Children, IV iodinated dose"): usually 1.5–2 mL/kg of a 300 mg I/mL agent, rarely above
3 mL/kg, never more than the adult dose; the flow is set by the cannula and the child's size — 24-gauge
about 1–1.5 mL/s, 22-gauge about 2–3 mL/s; hand injection through very small or central neonatal lines.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from .ranges import INJECTION_S_RANGE, VOLUME_RANGE, WEIGHT_KG_RANGE, check

#: Adult age: patients younger than this get the paediatric protocol.
ADULT_AGE_YEARS = 18.0
#: Most flow by cannula gauge for a child, mL/s (ACR Manual, from memory: 22-gauge about 2-3 mL/s).
CHILD_MAX_FLOW_BY_GAUGE = {22: 3.0}
#: Cannulas this small (and central lines not rated for power) are injected by hand (from memory: the
#: ACR Manual gives 24-gauge about 1-1.5 mL/s and hand injection through very small lines).
HAND_INJECTION_GAUGE = 24


@dataclass
class ChildDose:
    volume_ml: float | None
    max_volume_ml: float | None
    basis: str
    flow_ml_s: float | None
    hand_injection: bool
    warnings: list[str] = field(default_factory=list)


def child_volume(weight_kg: float, ml_per_kg: float, max_ml_per_kg: float, adult_max_ml: float,
                 reference_mg_i_ml: float, concentration_mg_i_ml: float) -> tuple[float, float]:
    """(volume, cap) in mL for a child: volume = mL/kg · kg · reference strength / strength used, capped at
    the lower of max mL/kg · kg (same scaling) and the adult maximum. Valid: 0.5–350 kg (the case's bound).

    Example: 30 kg child, 2 mL/kg of 300 mg I/mL, at most 3 mL/kg and 120 mL: 60 mL, cap 90 mL; with a
    350 mg I/mL agent the same iodine is 51.4 mL.

    >>> child_volume(30, 2, 3, 120, 300, 300)
    (60.0, 90.0)
    >>> [round(v, 1) for v in child_volume(30, 2, 3, 120, 300, 350)]
    [51.4, 77.1]
    """
    check("weight_kg", weight_kg, WEIGHT_KG_RANGE, "kg")
    scale = reference_mg_i_ml / concentration_mg_i_ml
    cap = min(max_ml_per_kg * weight_kg * scale, adult_max_ml)
    return min(ml_per_kg * weight_kg * scale, cap), cap


def size_limited_flow(volume_ml: float, injection_s: float) -> float:
    """The flow that gives a child's (smaller) volume over the adult protocol's injection time, mL/s,
    rounded down to 0.1 mL/s: flow = volume / injection time. The ACR Manual (from memory) sets a child's
    flow by the cannula and the child's size; keeping the protocol's injection time, so that the bolus still
    lasts as long as the scan needs, is how this tool turns size into a flow (common practice). Valid:
    volume 0.1–300 mL, injection time 1–600 s.

    Example: a CT angiogram protocol injects for 20 s; a 20 kg child's 40 mL over 20 s runs at 2 mL/s.

    >>> size_limited_flow(40, 20)
    2.0
    >>> size_limited_flow(25, 16)
    1.5
    """
    check("volume_ml", volume_ml, VOLUME_RANGE, "mL")
    check("injection_s", injection_s, INJECTION_S_RANGE, "s")
    return math.floor(volume_ml / injection_s * 10 + 1e-9) / 10


def child_flow(adult_flow_ml_s: float | None, gauge: int | None, site: str | None) -> tuple[float | None, bool, str]:
    """(flow, hand injection, why) for a child from the adult protocol flow and the cannula.

    Example: a 4 mL/s protocol through a 22-gauge cannula runs at about 3 mL/s in a child; 24-gauge is
    injected by hand.

    >>> child_flow(4, 22, "antecubital")[:2]
    (3.0, False)
    >>> child_flow(4, 24, "hand_or_wrist")[:2]
    (None, True)
    """
    if gauge is None:
        return None, False, ("no cannula given: the flow is set by the cannula gauge and the child's size "
                             "(ACR Manual); enter the IV access")
    if site == "central_not_power_rated" or gauge >= HAND_INJECTION_GAUGE:
        return None, True, (f"{gauge}-gauge or a line not rated for power: inject by hand (ACR Manual, from memory)")
    cap = CHILD_MAX_FLOW_BY_GAUGE.get(gauge)
    if cap is not None and adult_flow_ml_s is not None and adult_flow_ml_s > cap:
        return cap, False, f"{gauge}-gauge in a child: at most about {cap:g} mL/s (ACR Manual, from memory)"
    return adult_flow_ml_s, False, "flow of the exam protocol; check it suits the child's vein"


def child_drug_dose(weight_kg: float, mg_per_kg: list[float], max_mg: float) -> tuple[float, ...]:
    """A child's premedication dose, mg: mg/kg · kg for each figure given (one, or a low and a high), each
    capped at the most given in one dose, rounded to 0.5 mg. Figures are the policy's (default profile: ACR
    Manual on Contrast Media, contrast media in children, from memory). Valid: 0.5–350 kg.

    Example: a 12 kg child, prednisone 0.5–0.7 mg/kg at most 50 mg: 6–8.5 mg; a 90 kg teenager gets 50 mg.

    >>> child_drug_dose(12, [0.5, 0.7], 50)
    (6.0, 8.5)
    >>> child_drug_dose(90, [0.5, 0.7], 50)
    (45.0, 50.0)
    >>> child_drug_dose(20, [1.25], 50)
    (25.0,)
    """
    check("weight_kg", weight_kg, WEIGHT_KG_RANGE, "kg")
    return tuple(min(round(v * weight_kg * 2) / 2, float(max_mg)) for v in mg_per_kg)
