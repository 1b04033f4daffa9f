"""Calculators against published worked values, table values, invariants and pinned range errors.

Each check names its source beside it. "computed" means the value was worked out by hand from the
formula as printed in the source (no published worked example is known to us for that formula).
"""

from __future__ import annotations

import datetime as dt
import math

import pytest

from knowledge.calculators import access, body, dose, freshness, hydration, kidney, limits, timeline, viscosity
from knowledge.errors import RangeError


# --------------------------------------------------------------------------------------------------
# eGFR (kidney.py)
# --------------------------------------------------------------------------------------------------
def test_ckd_epi_2021_creatinine_worked_values():
    # CKD-EPI 2021 paper (N Engl J Med 2021;385:1737-49), equation as printed; values per clinical notes
    assert kidney.egfr_ckd_epi_2021(1.4, 60, "male") == pytest.approx(57.54, abs=0.01)
    assert kidney.egfr_ckd_epi_2021(0.6, 40, "female") == pytest.approx(116.3, abs=0.05)


def test_ckd_epi_2021_cystatin_worked_value():
    # CKD-EPI 2021 paper, creatinine-cystatin C equation: male 60 y, Scr 1.4, Scys 0.8 -> 83.97
    assert kidney.egfr_ckd_epi_2021_cystatin(1.4, 0.8, 60, "male") == pytest.approx(83.97, abs=0.01)


def test_ckd_epi_2021_female_factor_invariant():
    # CKD-EPI 2021 paper: at Scr = kappa (0.7 F, 0.9 M) the Scr terms are 1, leaving 142 * 0.9938^age * sex factor
    assert kidney.egfr_ckd_epi_2021(0.7, 50, "female") == pytest.approx(142 * 0.9938**50 * 1.012)
    assert kidney.egfr_ckd_epi_2021(0.9, 50, "male") == pytest.approx(142 * 0.9938**50)


def test_bedside_schwartz_worked_value():
    # Bedside Schwartz paper (J Am Soc Nephrol 2009;20:629-37): 0.413 * 120 cm / 0.6 mg/dL = 82.6
    assert kidney.egfr_bedside_schwartz(120, 0.6) == pytest.approx(82.6, abs=0.01)


@pytest.mark.parametrize("egfr,category", [
    # KDIGO 2012 CKD guideline, Kidney Int Suppl 2013;3, Table 5: band edges
    (90, "G1"), (89.9, "G2"), (60, "G2"), (59.9, "G3a"), (45, "G3a"), (44.9, "G3b"),
    (30, "G3b"), (29.9, "G4"), (15, "G4"), (14.9, "G5"), (0, "G5"),
])
def test_kdigo_table_5_band_edges(egfr, category):
    assert kidney.kdigo_category(egfr) == category


def test_creatinine_unit_round_trips():
    # Creatinine units: 1 mg/dL = 88.4 umol/L (molar mass 113.12 g/mol)
    assert kidney.creatinine_to_mg_dl(88.4, "umol/L") == pytest.approx(1.0)
    assert kidney.creatinine_from_mg_dl(1.0, "umol/L") == pytest.approx(88.4)
    for v in (0.3, 1.13, 4.7):
        assert kidney.creatinine_to_mg_dl(kidney.creatinine_from_mg_dl(v, "umol/L"), "umol/L") == pytest.approx(v)
        assert kidney.creatinine_from_mg_dl(kidney.creatinine_to_mg_dl(v * 88.4, "umol/L"), "umol/L") == \
            pytest.approx(v * 88.4)


def test_kidney_range_errors_pinned():
    with pytest.raises(RangeError) as e:
        kidney.egfr_ckd_epi_2021(1.0, 17, "male")
    assert str(e.value) == "age_years: 17 is out of range; allowed: from 18 to 120 years (CKD-EPI 2021 is for adults)"
    with pytest.raises(RangeError) as e:
        kidney.egfr_bedside_schwartz(120, 25)
    assert str(e.value) == "creatinine: 25 is out of range; allowed: from 0.1 to 20 mg/dL"
    with pytest.raises(RangeError) as e:
        kidney.creatinine_to_mg_dl(1, "mmol/L")
    assert str(e.value) == "creatinine.unit: 'mmol/L' is not allowed; allowed: 'mg/dL', 'umol/L'"


# --------------------------------------------------------------------------------------------------
# Body surface area and absolute GFR (body.py)
# --------------------------------------------------------------------------------------------------
def test_bsa_du_bois_computed():
    # Du Bois formula (Arch Intern Med 1916): 0.007184 * 70^0.425 * 170^0.725 = 1.8097 m² (computed)
    assert body.bsa_du_bois(70, 170) == pytest.approx(1.8097, abs=1e-4)


def test_bsa_mosteller_computed():
    # Mosteller formula (N Engl J Med 1987): sqrt(170 * 70 / 3600) = sqrt(3.30556) = 1.8181 m² (computed)
    assert body.bsa_mosteller(70, 170) == pytest.approx(1.8181, abs=1e-4)
    # invariant: H * W = 3600 gives exactly 1 m²
    assert body.bsa_mosteller(36, 100) == pytest.approx(1.0)


def test_bsa_formulas_agree_for_an_average_adult():
    # invariant: the two formulas differ by well under 2% for ordinary adult builds
    for w, h in ((60, 160), (70, 175), (90, 185)):
        assert body.bsa_du_bois(w, h) == pytest.approx(body.bsa_mosteller(w, h), rel=0.02)


def test_absolute_gfr():
    # eGFR is indexed to 1.73 m² (CKD-EPI 2021 / KDIGO 2012): at BSA 1.73 absolute = indexed
    assert body.absolute_gfr(60, 1.73) == pytest.approx(60)
    assert body.absolute_gfr(60, 2.0) == pytest.approx(69.36, abs=0.01)  # 60 * 2.0 / 1.73 (computed)


def test_body_range_errors_pinned():
    with pytest.raises(RangeError) as e:
        body.bsa_du_bois(400, 170)
    assert str(e.value) == "weight_kg: 400 is out of range; allowed: from 0.5 to 350 kg"
    with pytest.raises(RangeError) as e:
        body.bsa(70, 170, "haycock")
    assert str(e.value) == "bsa_formula: 'haycock' is not allowed; allowed: 'du_bois', 'mosteller'"
    with pytest.raises(RangeError) as e:
        body.absolute_gfr(60, 6)
    assert str(e.value) == "bsa_m2: 6 is out of range; allowed: from 0.05 to 4.5 m²"


# --------------------------------------------------------------------------------------------------
# Renal dose limits (limits.py)
# --------------------------------------------------------------------------------------------------
def test_cigarroa_formula():
    # Cigarroa paper (Am J Med 1989;86:649): max = 5 mL * kg / Scr (mg/dL), at most 300 mL
    assert limits.cigarroa_max_volume_ml(70, 2.0) == pytest.approx(175.0)
    assert limits.cigarroa_max_volume_ml(80, 2.5) == pytest.approx(160.0)
    assert limits.cigarroa_max_volume_ml(100, 0.5) == 300.0  # 1000 mL capped at 300 mL


def test_iodine_gfr_ratio():
    # g iodine / absolute GFR (Acta Radiol 2008, from memory): 60 g for 60 mL/min -> 1.0 (the flag level)
    assert limits.iodine_gfr_ratio(60, 60) == pytest.approx(1.0)
    assert limits.volume_gfr_ratio(150, 50) == pytest.approx(3.0)  # ESUR first-pass mL/GFR cap 3.0


def test_limits_range_errors_pinned():
    with pytest.raises(RangeError) as e:
        limits.cigarroa_max_volume_ml(70, 0)
    assert str(e.value) == "creatinine: 0 is out of range; allowed: from 0.1 to 20 mg/dL"
    with pytest.raises(RangeError) as e:
        limits.iodine_gfr_ratio(30, 0)
    assert str(e.value) == "absolute_gfr_ml_min: 0 is out of range; allowed: from 0.5 to 400 mL/min"


# --------------------------------------------------------------------------------------------------
# Dose (dose.py)
# --------------------------------------------------------------------------------------------------
def test_iodine_delivery_rate_identity():
    # clinical notes, Dose: IDR (g I/s) = mg I/mL * mL/s / 1000
    assert dose.iodine_delivery_rate(350, 5) == pytest.approx(1.75)
    assert dose.iodine_delivery_rate(370, 4) == pytest.approx(1.48)


def test_weight_based_volume():
    # Acad Radiol 2013 (liver-dose-2013): 0.5 g I/kg; 80 kg at 300 mg I/mL -> 40 g -> 133.3 mL (computed)
    v = dose.volume_for_iodine_dose(0.5, 80, 300)
    assert v == pytest.approx(133.33, abs=0.01)
    assert dose.iodine_grams(v, 300) == pytest.approx(40.0)
    assert dose.injection_duration(v, 3) == pytest.approx(44.44, abs=0.01)


def test_scan_volume_and_cap():
    # angiographic CT, common practice: 5 mL/s * (6 s + 8 s) = 70 mL
    assert dose.volume_for_scan(5, 6, 8) == pytest.approx(70)
    plan = dose.plan_dose(concentration_mg_i_ml=350, flow_ml_s=4, scan_duration_s=25, duration_offset_s=10,
                          max_volume_ml=120)
    assert plan.volume_ml == 120 and plan.capped  # 140 mL capped at 120 mL
    assert plan.warnings == ["Volume 140 mL capped at the protocol maximum 120 mL"]
    planned = dose.plan_dose(concentration_mg_i_ml=350, flow_ml_s=4, planned_volume_ml=130, max_volume_ml=120)
    assert planned.volume_ml == 130 and not planned.capped  # a planned volume is kept, only flagged
    assert planned.warnings == ["Planned volume 130 mL is above the protocol maximum 120 mL"]


def test_choose_concentration():
    assert dose.choose_concentration([200, 300, 370], 350) == (300.0, "300 mg I/mL: the highest strength below "
                                                                      "the protocol's 350 mg I/mL")
    assert dose.choose_concentration([270, 320], None)[0] == 270.0  # default 300 -> highest at or below
    assert dose.choose_concentration([350, 400], 300)[0] == 350.0  # all above -> the lowest


def test_dose_range_errors_pinned():
    with pytest.raises(RangeError) as e:
        dose.iodine_delivery_rate(350, 12)
    assert str(e.value) == "flow_ml_s: 12 is out of range; allowed: from 0.1 to 10 mL/s"
    with pytest.raises(RangeError) as e:
        dose.volume_for_iodine_dose(2, 80, 300)
    assert str(e.value) == "iodine_g_per_kg: 2 is out of range; allowed: from 0.05 to 1.5 g I/kg"


# --------------------------------------------------------------------------------------------------
# IV access (access.py) — ACR Manual wording in the clinical notes
# --------------------------------------------------------------------------------------------------
def test_access_acr_manual_wording():
    assert access.check_access(20, "antecubital", 5).ok  # 20-gauge or larger preferable for >= 3 mL/s
    c22 = access.check_access(22, "antecubital", 5)  # 22-gauge may tolerate up to 5 mL/s
    assert c22.ok and "20-gauge or larger is preferable" in c22.message
    assert not access.check_access(22, "antecubital", 6).ok
    hand = access.check_access(20, "hand_or_wrist", 2)  # hand/wrist at most 1.5 mL/s
    assert not hand.ok and hand.messages[0].startswith("Hand or wrist vein: at most 1.5 mL/s")
    assert access.check_access(20, "hand_or_wrist", 1.5).ok
    assert not access.check_access(18, "central_not_power_rated", 2).ok  # power-injectable lines only
    assert access.check_access(18, "central_power_injectable", 4).ok
    assert not access.check_access(24, "forearm", 3).ok  # smaller than 22-gauge at 3 mL/s (common practice)


def test_access_range_errors_pinned():
    with pytest.raises(RangeError) as e:
        access.check_access(26, "forearm", 2)
    assert str(e.value) == "iv_access.gauge: 26 is out of range; allowed: from 14 to 24 gauge"
    with pytest.raises(RangeError) as e:
        access.check_access(20, "femoral", 2)
    assert str(e.value).startswith("iv_access.site: 'femoral' is not allowed; allowed: antecubital, forearm")


# --------------------------------------------------------------------------------------------------
# Viscosity (viscosity.py)
# --------------------------------------------------------------------------------------------------
def test_andrade_reproduces_tabulated_points():
    # iopamidol 370 in agents.yaml: 8.6 mPa·s at 37 °C (J Nucl Med Technol table), 20.9 at 20 °C (from memory)
    assert viscosity.viscosity_at(20, 20.9, 8.6) == pytest.approx(20.9)
    assert viscosity.viscosity_at(37, 20.9, 8.6) == pytest.approx(8.6)


def test_andrade_midpoint_in_reciprocal_temperature_is_geometric_mean():
    # Andrade relation ln eta = A + B/T is linear in 1/T, so at 1/T = mean(1/T1, 1/T2) eta = sqrt(eta1 * eta2)
    t_mid = 2 / (1 / 293.15 + 1 / 310.15) - 273.15
    assert viscosity.viscosity_at(t_mid, 20.9, 8.6) == pytest.approx(math.sqrt(20.9 * 8.6))
    assert 8.6 < viscosity.viscosity_at(30, 20.9, 8.6) < 20.9


def test_warming_pressure_ratio_370():
    # Hagen-Poiseuille: at fixed flow and catheter, pressure is proportional to viscosity;
    # iopamidol 370: 8.6 / 20.9 = 0.41 -> warming to 37 °C cuts the pressure by about 59%
    assert viscosity.pressure_ratio(20.9, 8.6) == pytest.approx(0.4115, abs=1e-4)


def test_poiseuille_pressure_computed():
    # Hagen-Poiseuille: 8 * 8.6e-3 Pa·s * 0.032 m * 5e-6 m³/s / (pi * (0.3e-3 m)^4) = 432.6 kPa (computed)
    assert viscosity.poiseuille_pressure_kpa(8.6, 5, 32, 0.6) == pytest.approx(432.6, abs=0.1)


def test_viscosity_range_errors_pinned():
    with pytest.raises(RangeError) as e:
        viscosity.viscosity_at(40, 20.9, 8.6)
    assert str(e.value) == "temperature_c: 40 is out of range; allowed: from 20 to 37 °C"
    with pytest.raises(RangeError) as e:
        viscosity.pressure_ratio(0, 8.6)
    assert str(e.value) == "viscosity_mpas: 0 is out of range; allowed: from 0.3 to 100 mPa·s"


# --------------------------------------------------------------------------------------------------
# Creatinine freshness (freshness.py)
# --------------------------------------------------------------------------------------------------
def test_creatinine_age():
    exam = dt.datetime(2025, 3, 11, 9, 0)
    assert freshness.creatinine_age_days(dt.date(2025, 3, 1), exam) == 10.0  # calendar days for a date
    assert freshness.creatinine_age_days(dt.datetime(2025, 3, 10, 21, 0), exam) == pytest.approx(0.5)
    with pytest.raises(RangeError) as e:
        freshness.creatinine_age_days(dt.date(2025, 3, 12), exam)
    assert str(e.value) == ("creatinine.measured_on: 2025-03-12 is after the exam time 2025-03-11T09:00:00; "
                            "allowed: a sample taken before the exam")


def test_creatinine_max_age_and_risk_factors():
    # policy settings (default 30 days outpatient, 2 days inpatient/acute; common practice)
    assert freshness.creatinine_max_age_days(False, False, 30, 2) == 30
    assert freshness.creatinine_max_age_days(True, False, 30, 2) == 2
    assert freshness.creatinine_max_age_days(False, True, 30, 2) == 2
    # ACR Manual kidney screening questions (from memory)
    f = freshness.creatinine_risk_factors(age_years=61, kidney_disease_history=True, dialysis="none",
                                          diabetes=True, takes_metformin=True, acute_kidney_injury=False)
    assert f == ["age over 60", "history of kidney disease or kidney surgery", "diabetes mellitus", "metformin"]
    assert freshness.creatinine_risk_factors(age_years=60, kidney_disease_history=False, dialysis="none",
                                             diabetes=False, takes_metformin=False, acute_kidney_injury=False) == []


# --------------------------------------------------------------------------------------------------
# Hydration (hydration.py)
# --------------------------------------------------------------------------------------------------
def test_hydration_weight_based():
    # ACR-NKF 2020: 1-3 mL/kg/h from about 1 h before, 3-12 h after; 80 kg at 1 mL/kg/h, 1 h + 6 h
    at = dt.datetime(2025, 3, 10, 10, 0)
    hp = hydration.weight_based_plan(80, 1.0, 1, 6, contrast_at=at, heart_failure=True)
    assert (hp.rate_ml_h, hp.volume_before_ml, hp.volume_after_ml, hp.total_ml) == (80, 80, 480, 560)
    assert hp.start_at == dt.datetime(2025, 3, 10, 9, 0) and hp.stop_at == dt.datetime(2025, 3, 10, 16, 0)
    assert hp.warnings == [hydration.HEART_FAILURE_CAUTION]
    # ESUR v10 saline regimen (from memory: 1 mL/kg/h for 3-4 h before and 4-6 h after): 4 h and 6 h for
    # 70 kg -> 280 + 420 mL (computed)
    esur = hydration.weight_based_plan(70, 1.0, 4, 6)
    assert (esur.volume_before_ml, esur.volume_after_ml) == (280, 420)
    with pytest.raises(RangeError) as e:
        hydration.weight_based_plan(70, 5, 1, 6)
    assert str(e.value) == "hydration_ml_kg_h: 5 is out of range; allowed: from 0.5 to 3 mL/kg/h"


# --------------------------------------------------------------------------------------------------
# Timelines (timeline.py)
# --------------------------------------------------------------------------------------------------
def test_metformin_timeline():
    # ACR Manual / ESUR v10: stop at the time of contrast, re-check kidney function after 48 h
    at = dt.datetime(2025, 3, 10, 10, 0)
    assert timeline.metformin_timeline(at) == (at, dt.datetime(2025, 3, 12, 10, 0))
    assert timeline.metformin_timeline(None) == (None, None)


def test_every_formula_carries_a_worked_example_as_a_doctest():
    # MetPy-style calculators: each public formula's docstring shows a worked example that pytest runs
    # (pyproject: --doctest-modules over knowledge/calculators). Plumbing helpers are listed as such.
    import ast
    from pathlib import Path

    plumbing = {"align_times", "choose_concentration", "plan_dose", "creatinine_max_age_days",
                "creatinine_risk_factors", "bsa", "lay_out", "premedication_schedule", "andrade_coefficients",
                "viscosity_at", "poiseuille_pressure_kpa", "field_range", "check"}
    missing = []
    for path in sorted((Path(__file__).resolve().parents[1] / "knowledge" / "calculators").glob("*.py")):
        for node in ast.parse(path.read_text(encoding="utf-8")).body:
            if isinstance(node, ast.FunctionDef) and not node.name.startswith("_") and node.name not in plumbing:
                if ">>>" not in (ast.get_docstring(node) or ""):
                    missing.append(f"{path.name}:{node.name}")
    assert missing == []
