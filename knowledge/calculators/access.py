"""Intravenous access versus the planned injection rate.

Source key ``acr-manual`` (ACR Manual on Contrast Media, injection of contrast media / extravasation;
wording as in the clinical notes): a 20-gauge or larger catheter is preferable for flow rates of 3 mL/s
or more; a 22-gauge catheter may tolerate up to 5 mL/s; hand or wrist veins at most 1.5 mL/s; only
power-injectable central lines may be used for power injection. Catheters smaller than 22-gauge are not
covered by that wording: here they are not accepted at 3 mL/s or more (common practice).
"""

from __future__ import annotations

from dataclasses import dataclass, field

from ..errors import RangeError, out_of_range
from .ranges import FLOW_RANGE, GAUGE_RANGE

from ..tables.constants import IV_SITES as SITES

PREFERRED_GAUGE_AT_3 = 20  # 20-gauge or larger (smaller number) preferable at ≥3 mL/s
HIGH_FLOW_ML_S = 3.0
GAUGE_22_MAX_FLOW = 5.0
HAND_WRIST_MAX_FLOW = 1.5


@dataclass
class AccessCheck:
    ok: bool
    messages: list[str] = field(default_factory=list)

    @property
    def message(self) -> str:
        return "; ".join(self.messages)


def _check_inputs(gauge: int, site: str, flow_ml_s: float) -> None:
    """Gauge, site and flow in their valid ranges, else a RangeError naming the field."""
    if not (GAUGE_RANGE[0] <= gauge <= GAUGE_RANGE[1]):
        raise out_of_range("iv_access.gauge", gauge, GAUGE_RANGE[0], GAUGE_RANGE[1], "gauge")
    if site not in SITES:
        raise RangeError(field="iv_access.site", value=site, problem="is not allowed", allowed=", ".join(SITES))
    if not (FLOW_RANGE[0] <= flow_ml_s <= FLOW_RANGE[1]):
        raise out_of_range("flow_ml_s", flow_ml_s, FLOW_RANGE[0], FLOW_RANGE[1], "mL/s")


def check_access(gauge: int, site: str, flow_ml_s: float) -> AccessCheck:
    """Is catheter ``gauge`` at ``site`` fit for ``flow_ml_s`` by power injection? (source ``acr-manual``)

    Valid range: gauge 14–24, flow 0.1–10 mL/s, site one of :data:`SITES`.

    Examples (ACR Manual, IV access): a hand or wrist vein is limited to 1.5 mL/s; a 20-gauge
    antecubital catheter suits 4 mL/s.

    >>> check_access(22, "hand_or_wrist", 3.0).ok
    False
    >>> check_access(20, "antecubital", 4.0).ok
    True
    """
    _check_inputs(gauge, site, flow_ml_s)
    ok = True
    msgs: list[str] = []
    if site == "central_not_power_rated":
        return AccessCheck(False, ["Central line not rated for power injection: do not power-inject through it "
                                   "(ACR Manual); place a peripheral catheter"])
    if site == "central_power_injectable":
        msgs.append("Power-injectable central line: keep within its labelled maximum flow rate and pressure")
    if site == "hand_or_wrist" and flow_ml_s > HAND_WRIST_MAX_FLOW:
        ok = False
        msgs.append(f"Hand or wrist vein: at most {HAND_WRIST_MAX_FLOW:g} mL/s (ACR Manual); "
                    f"{flow_ml_s:g} mL/s planned — use an antecubital or forearm vein")
    if gauge > 22 and flow_ml_s >= HIGH_FLOW_ML_S:
        ok = False
        msgs.append(f"{gauge}-gauge is smaller than 22-gauge: not fit for {flow_ml_s:g} mL/s "
                    "(20-gauge or larger preferable at 3 mL/s or more, ACR Manual)")
    elif gauge == 22 and flow_ml_s > GAUGE_22_MAX_FLOW:
        ok = False
        msgs.append(f"22-gauge may tolerate up to {GAUGE_22_MAX_FLOW:g} mL/s (ACR Manual); "
                    f"{flow_ml_s:g} mL/s planned — place 20-gauge or larger")
    elif gauge == 22 and flow_ml_s >= HIGH_FLOW_ML_S:
        msgs.append(f"22-gauge may tolerate up to {GAUGE_22_MAX_FLOW:g} mL/s, but 20-gauge or larger is "
                    "preferable at 3 mL/s or more (ACR Manual)")
    elif gauge > 22:
        msgs.append(f"{gauge}-gauge is smaller than 22-gauge: the ACR Manual wording does not cover it; "
                    "follow local policy")
    if ok and not msgs:
        msgs.append(f"{gauge}-gauge {site.replace('_', ' ')} catheter is fit for {flow_ml_s:g} mL/s (ACR Manual)")
    return AccessCheck(ok, msgs)
