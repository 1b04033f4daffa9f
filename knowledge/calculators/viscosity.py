"""Viscosity of contrast agents between room and body temperature, and what warming buys in injection
pressure.

- The tabulated points are the catalogue's (``agents.yaml`` ``viscosity_mpas_20c`` / ``_37c``): the 37 °C
  values of iohexol and iopamidol are from the viscosity table of source ``viscosity-jnmt``; the 20 °C
  values and the other agents' values are from memory (product information) — see each strength's
  ``certainty``.
- Between them the Andrade relation ln η = A + B/T (T in kelvin) is fitted through the two points
  (source ``andrade-1930``) and used for interpolation only (20–37 °C): never extrapolated.
- Hagen–Poiseuille (source ``hagen-poiseuille``): ΔP = 8 η L Q / (π r⁴), so at a fixed flow through the same
  catheter the pressure is proportional to viscosity: ΔP₂/ΔP₁ = η₂/η₁.
"""

from __future__ import annotations

import math

from ..errors import RangeError
from .ranges import check

KELVIN = 273.15
ROOM_C = 20.0
BODY_C = 37.0
VISCOSITY_RANGE = (0.3, 100.0)  # mPa·s: water at 37 °C is about 0.7; the most viscous agents below 40
TEMPERATURE_RANGE = (ROOM_C, BODY_C)  # interpolation only
FLOW_RANGE = (0.01, 10.0)  # mL/s: slow hand injections included
LENGTH_MM_RANGE = (1.0, 2000.0)
DIAMETER_MM_RANGE = (0.1, 5.0)


def andrade_coefficients(t1_c: float, eta1: float, t2_c: float, eta2: float) -> tuple[float, float]:
    """A and B of ln η = A + B/T (T in K) through two points (source ``andrade-1930``).

    B = ln(η1/η2) / (1/T1 − 1/T2);  A = ln η1 − B/T1. Viscosities 0.3–100 mPa·s; T1 ≠ T2.
    """
    check("viscosity_mpas", eta1, VISCOSITY_RANGE, "mPa·s")
    check("viscosity_mpas", eta2, VISCOSITY_RANGE, "mPa·s")
    if t1_c == t2_c:
        raise RangeError(f"temperature_c: {t2_c!r} is the same as the first point; allowed: two different "
                         "temperatures", field="temperature_c")
    k1, k2 = t1_c + KELVIN, t2_c + KELVIN
    b = math.log(eta1 / eta2) / (1.0 / k1 - 1.0 / k2)
    a = math.log(eta1) - b / k1
    return a, b


def viscosity_at(temperature_c: float, eta_20c: float, eta_37c: float) -> float:
    """Viscosity at ``temperature_c`` (20–37 °C), mPa·s, by the Andrade relation through the tabulated
    20 °C and 37 °C values. Outside 20–37 °C it is an error, never an extrapolation."""
    check("temperature_c", temperature_c, TEMPERATURE_RANGE, "°C")
    a, b = andrade_coefficients(ROOM_C, eta_20c, BODY_C, eta_37c)
    return math.exp(a + b / (temperature_c + KELVIN))


def pressure_ratio(eta_from: float, eta_to: float) -> float:
    """Injection pressure after / before a viscosity change, same flow and catheter (source
    ``hagen-poiseuille``): ΔP_to / ΔP_from = η_to / η_from. Viscosities 0.3–100 mPa·s.

    Invariant (Hagen-Poiseuille): halving the viscosity halves the pressure at the same flow.

    >>> pressure_ratio(10.0, 5.0)
    0.5
    """
    check("viscosity_mpas", eta_from, VISCOSITY_RANGE, "mPa·s")
    check("viscosity_mpas", eta_to, VISCOSITY_RANGE, "mPa·s")
    return eta_to / eta_from


def poiseuille_pressure_kpa(viscosity_mpas: float, flow_ml_s: float, length_mm: float,
                            inner_diameter_mm: float) -> float:
    """Pressure drop along a straight catheter, kPa (source ``hagen-poiseuille``, laminar flow):
    ΔP = 8 η L Q / (π r⁴). Viscosity 0.3–100 mPa·s, flow 0.01–10 mL/s, length 1–2000 mm, inner diameter
    0.1–5 mm. A lower bound on the real pressure (connectors and turbulence add to it)."""
    check("viscosity_mpas", viscosity_mpas, VISCOSITY_RANGE, "mPa·s")
    check("flow_ml_s", flow_ml_s, FLOW_RANGE, "mL/s")
    check("length_mm", length_mm, LENGTH_MM_RANGE, "mm")
    check("inner_diameter_mm", inner_diameter_mm, DIAMETER_MM_RANGE, "mm")
    eta = viscosity_mpas * 1e-3  # Pa·s
    q = flow_ml_s * 1e-6  # m³/s
    length = length_mm * 1e-3
    r = inner_diameter_mm * 1e-3 / 2.0
    return 8.0 * eta * length * q / (math.pi * r**4) / 1000.0
