"""Intravenous iodinated contrast in children: weight-based volume with caps, flow set by the cannula.

Source key ``acr-manual`` (ACR Manual on Contrast Media, contrast media in children; figures from memory,
clinical notes "Children, IV iodinated dose"): usually 1.5–2 mL/kg of a 300 mg I/mL agent, rarely above
3 mL/kg, never more than the adult dose; the flow is set by the cannula and the child's size — 24-gauge
about 1–1.5 mL/s, 22-gauge about 2–3 mL/s; hand injection through very small or central neonatal lines.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from .ranges import WEIGHT_KG_RANGE, check

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
