"""Intravenous (and catheter) iodinated contrast dose: volume, grams of iodine, iodine delivery rate and
injection duration.

Source keys (see ``knowledge/data/sources.yaml``):
- ``liver-dose-2013``: weight-based iodine dose (about 0.5–0.6 g I/kg total body weight for
  portal-venous liver enhancement).
- Iodine delivery rate (g I/s) = concentration (mg I/mL) · flow (mL/s) / 1000 — a unit identity; the
  1.5–2.0 g I/s figure used for CT angiography in the literature is from memory.
- Angiographic CT volume = flow · (scan duration + offset): bolus geometry, common practice.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from ..errors import out_of_range
from .ranges import FLOW_RANGE, IODINE_G_PER_KG_RANGE, VOLUME_RANGE, WEIGHT_KG_RANGE, check

#: Strength of an iodinated agent for intravascular use, mg I/mL (the catalogue's vascular strengths lie
#: in 140–400; 100–480 is the plausibility bound, common practice).
CONCENTRATION_RANGE = (100.0, 480.0)
SCAN_DURATION_RANGE = (0.5, 120.0)  # s
OFFSET_RANGE = (0.0, 30.0)  # s

#: Strength aimed at when a protocol names none: 300 mg I/mL, the strength most departments stock for
#: routine intravenous CT (common practice; the catalogue records no "most common strength").
DEFAULT_CONCENTRATION_MG_I_ML = 300.0


def iodine_grams(volume_ml: float, concentration_mg_i_ml: float) -> float:
    """Grams of iodine in a volume: g I = volume (mL) · concentration (mg I/mL) / 1000.

    Valid range: volume 0.1–300 mL, concentration 100–480 mg I/mL.

    Example: 100 mL of a 350 mg I/mL agent carry 35 g of iodine.

    >>> iodine_grams(100, 350)
    35.0
    """
    check("volume_ml", volume_ml, VOLUME_RANGE, "mL")
    check("concentration_mg_i_ml", concentration_mg_i_ml, CONCENTRATION_RANGE, "mg I/mL")
    return volume_ml * concentration_mg_i_ml / 1000.0


def iodine_delivery_rate(concentration_mg_i_ml: float, flow_ml_s: float) -> float:
    """Iodine delivery rate, g I/s: IDR = concentration (mg I/mL) · flow (mL/s) / 1000.

    Valid range: concentration 100–480 mg I/mL, flow 0.1–10 mL/s.

    Example (formula in the clinical notes: g I/s = mg I/mL · mL/s / 1000): 370 mg I/mL at 5 mL/s.

    >>> iodine_delivery_rate(370, 5)
    1.85
    """
    check("concentration_mg_i_ml", concentration_mg_i_ml, CONCENTRATION_RANGE, "mg I/mL")
    check("flow_ml_s", flow_ml_s, FLOW_RANGE, "mL/s")
    return concentration_mg_i_ml * flow_ml_s / 1000.0


def volume_for_iodine_dose(iodine_g_per_kg: float, weight_kg: float, concentration_mg_i_ml: float) -> float:
    """Volume that gives a weight-based iodine dose, mL (source ``liver-dose-2013`` for the g/kg dose).

    Formula: volume = g I/kg · weight (kg) · 1000 / concentration (mg I/mL). Not capped here; the caller
    caps it at the protocol maximum. Valid range: 0.05–1.5 g I/kg, 0.5–350 kg, 100–480 mg I/mL.

    Example (0.5 g I/kg, Acad Radiol 2013): 70 kg at 350 mg I/mL → 35 g → 100 mL.

    >>> volume_for_iodine_dose(0.5, 70, 350)
    100.0
    """
    check("iodine_g_per_kg", iodine_g_per_kg, IODINE_G_PER_KG_RANGE, "g I/kg")
    check("weight_kg", weight_kg, WEIGHT_KG_RANGE, "kg")
    check("concentration_mg_i_ml", concentration_mg_i_ml, CONCENTRATION_RANGE, "mg I/mL")
    return iodine_g_per_kg * weight_kg * 1000.0 / concentration_mg_i_ml


def volume_for_scan(flow_ml_s: float, scan_duration_s: float, offset_s: float = 0.0) -> float:
    """Angiographic CT bolus volume, mL: volume = flow (mL/s) · (scan duration + offset) (s).

    Common practice (injection lasts as long as the scan plus an offset). Valid range: flow 0.1–10 mL/s,
    scan 0.5–120 s, offset 0–30 s.

    Example: 5 mL/s for a 10 s scan plus 5 s → 75 mL.

    >>> volume_for_scan(5, 10, 5)
    75
    """
    check("flow_ml_s", flow_ml_s, FLOW_RANGE, "mL/s")
    check("scan_duration_s", scan_duration_s, SCAN_DURATION_RANGE, "s")
    check("duration_offset_s", offset_s, OFFSET_RANGE, "s")
    return flow_ml_s * (scan_duration_s + offset_s)


def injection_duration(volume_ml: float, flow_ml_s: float) -> float:
    """Injection duration, s: duration = volume (mL) / flow (mL/s). Valid range: 0.1–300 mL, 0.1–10 mL/s.

    Example: 100 mL at 4 mL/s take 25 s.

    >>> injection_duration(100, 4)
    25.0
    """
    check("volume_ml", volume_ml, VOLUME_RANGE, "mL")
    check("flow_ml_s", flow_ml_s, FLOW_RANGE, "mL/s")
    return volume_ml / flow_ml_s


def choose_concentration(available: list[float], wanted: float | None) -> tuple[float, str]:
    """Pick the strength to use from an agent's ``available`` strengths (mg I/mL).

    The highest strength at or below ``wanted`` (the protocol's ``concentration_mg_i_ml``, else
    :data:`DEFAULT_CONCENTRATION_MG_I_ML`); when every strength is above it, the lowest one. Returns the
    value and a sentence saying how it was chosen.
    """
    if not available:
        raise out_of_range("concentrations", "none", 1, None, "strength in mg I/mL in the catalogue")
    target = DEFAULT_CONCENTRATION_MG_I_ML if wanted is None else float(wanted)
    what = "the protocol's" if wanted is not None else "the default"
    strengths = sorted(set(float(v) for v in available))
    below = [v for v in strengths if v <= target]
    if below:
        value = below[-1]
        how = ("exactly " if value == target else "the highest strength below ") + f"{what} {target:g} mg I/mL"
    else:
        value = strengths[0]
        how = f"the lowest strength (all are above {what} {target:g} mg I/mL)"
    return value, f"{value:g} mg I/mL: {how}"


def choose_concentration_for_idr(available: list[float], flow_ml_s: float, target_g_s: float) -> tuple[float, str]:
    """The strength whose iodine delivery rate at ``flow_ml_s`` is nearest to ``target_g_s`` (ties: the
    higher strength, so the target is reached). IDR = strength (mg I/mL) · flow (mL/s) / 1000.

    Example: target 1.4 g I/s at 4 mL/s with 200/300/370 mg I/mL: 370 gives 1.48 g I/s, 300 gives 1.20,
    so 370 is nearest (the old "highest strength below 350" rule picked 300).

    >>> choose_concentration_for_idr([200, 300, 370], 4, 1.4)[0]
    370.0
    """
    if not available:
        raise out_of_range("concentrations", "none", 1, None, "strength in mg I/mL in the catalogue")
    strengths = sorted(set(float(v) for v in available))
    value = min(strengths, key=lambda v: (abs(v * flow_ml_s / 1000.0 - target_g_s), -v))
    idr = value * flow_ml_s / 1000.0
    return value, (f"{value:g} mg I/mL: nearest to the protocol's iodine delivery rate target {target_g_s:g} g I/s "
                   f"at {flow_ml_s:g} mL/s ({idr:.2f} g I/s)")


@dataclass
class DosePlan:
    """A worked dose plan (numbers rounded only when shown)."""

    concentration_mg_i_ml: float
    concentration_choice: str
    flow_ml_s: float | None
    volume_ml: float | None
    volume_basis: str
    iodine_g: float | None
    iodine_delivery_rate_g_s: float | None
    duration_s: float | None
    capped: bool = False
    warnings: list[str] = field(default_factory=list)


def plan_dose(*, concentration_mg_i_ml: float, flow_ml_s: float | None, weight_kg: float | None = None,
              iodine_g_per_kg: float | None = None, fixed_volume_ml: float | None = None,
              max_volume_ml: float = 150.0, scan_duration_s: float | None = None, duration_offset_s: float = 0.0,
              planned_volume_ml: float | None = None, concentration_choice: str = "") -> DosePlan:
    """Work out a dose plan. The volume comes from, in order: a planned volume; the scan duration and flow
    (angiographic CT); a weight-based iodine dose; a fixed protocol volume. A computed volume is capped at
    ``max_volume_ml`` (flagged); a planned volume above the cap is kept and flagged, never changed.
    Without a flow (hand injection in a catheter study) the rate, delivery rate and duration are None."""
    check("max_volume_ml", max_volume_ml, VOLUME_RANGE, "mL")
    check("concentration_mg_i_ml", concentration_mg_i_ml, CONCENTRATION_RANGE, "mg I/mL")
    idr = iodine_delivery_rate(concentration_mg_i_ml, flow_ml_s) if flow_ml_s is not None else None
    warnings: list[str] = []
    capped = False
    volume: float | None
    if planned_volume_ml is not None:
        check("planned_volume_ml", planned_volume_ml, VOLUME_RANGE, "mL")
        volume, basis = float(planned_volume_ml), "planned volume"
        if volume > max_volume_ml:
            warnings.append(f"Planned volume {volume:g} mL is above the protocol maximum {max_volume_ml:g} mL")
    else:
        if scan_duration_s is not None and flow_ml_s is not None:
            volume = volume_for_scan(flow_ml_s, scan_duration_s, duration_offset_s)
            basis = f"flow {flow_ml_s:g} mL/s × (scan {scan_duration_s:g} s + {duration_offset_s:g} s)"
        elif iodine_g_per_kg is not None and weight_kg is not None:
            volume = volume_for_iodine_dose(iodine_g_per_kg, weight_kg, concentration_mg_i_ml)
            basis = f"{iodine_g_per_kg:g} g I/kg × {weight_kg:g} kg at {concentration_mg_i_ml:g} mg I/mL"
        elif fixed_volume_ml is not None:
            volume, basis = float(fixed_volume_ml), "fixed protocol volume"
        else:
            volume, basis = None, "not worked out: the protocol is weight-based and no weight was given"
            if iodine_g_per_kg is not None:
                warnings.append("Weight is needed for the weight-based dose")
        if volume is not None and volume > max_volume_ml:
            warnings.append(f"Volume {volume:.0f} mL capped at the protocol maximum {max_volume_ml:g} mL")
            volume, capped = float(max_volume_ml), True
    iodine = iodine_grams(volume, concentration_mg_i_ml) if volume is not None else None
    duration = injection_duration(volume, flow_ml_s) if (volume is not None and flow_ml_s is not None) else None
    return DosePlan(concentration_mg_i_ml=concentration_mg_i_ml, concentration_choice=concentration_choice,
                    flow_ml_s=float(flow_ml_s) if flow_ml_s is not None else None, volume_ml=volume, volume_basis=basis, iodine_g=iodine,
                    iodine_delivery_rate_g_s=idr, duration_s=duration, capped=capped, warnings=warnings)
