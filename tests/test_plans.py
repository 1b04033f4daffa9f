"""Scenario tests of the plans (knowledge/decision/plans.py): the blocks a decision gains, with real numbers and
clock times. Fixed ``as_of`` times only, never the wall clock.

Scenario sources: premedication regimens — ACR Manual on Contrast Media (policy ``regimens``); metformin —
ACR Manual / ESUR v10 (48 h); IV access — ACR Manual wording; viscosity — agents.yaml (37 °C values from the
J Nucl Med Technol table, 20 °C values from memory); Cigarroa — Am J Med 1989; hydration — ACR-NKF 2020.
"""

from __future__ import annotations

import argparse
import datetime as dt

import pytest

from knowledge.tables import models as m
from knowledge.calculators import timeline
from knowledge.errors import CaseError, RangeError
from knowledge.tables.loader import load_knowledge
from knowledge.decision.engine import decide
from knowledge.cli.dose import add_dose_parser, dose_plan
from knowledge.decision.plans import dose_block

T = dt.datetime


@pytest.fixture(scope="module")
def k():
    return load_knowledge()


def _case(**kw):
    base = {"as_of": "2025-03-10T14:00:00"}
    base.update(kw)
    return base


MODERATE_ALLERGIC = [{"agent_family": "iodinated", "kind": "allergic_like", "severity": "moderate"}]
ADULT = {"age_years": 50, "sex": "female", "weight_kg": 70, "height_cm": 165,
         "creatinine": {"value": 0.8, "unit": "mg/dL", "measured_on": "2025-03-01"}}


# --------------------------------------------------------------------------------------------------
# Premedication
# --------------------------------------------------------------------------------------------------
def test_premedication_exam_tomorrow_0900(k):
    # ACR Manual elective regimen: prednisone 50 mg PO 13, 7 and 1 h before (+ optional diphenhydramine 1 h)
    d = decide(_case(exam="ct-angiography-head-neck", scheduled_at="2025-03-11T09:00:00",
                       patient={**ADULT, "prior_reactions": MODERATE_ALLERGIC}), k)
    pm = d.premedication
    assert pm.indicated and pm.regimen == "prednisone-13h" and pm.lead_hours == 19.0
    assert [(s.at, s.drug, s.dose, s.route, s.optional) for s in pm.schedule] == [
        (T(2025, 3, 10, 20, 0), "prednisone", "50 mg", "oral", False),
        (T(2025, 3, 11, 2, 0), "prednisone", "50 mg", "oral", False),
        (T(2025, 3, 11, 8, 0), "prednisone", "50 mg", "oral", False),
        (T(2025, 3, 11, 8, 0), "diphenhydramine", "50 mg", "oral", True),
    ]
    assert pm.warnings == []


def test_premedication_exam_in_3_hours(k):
    # not enough time for 13 h: the accelerated IV regimen is offered (ACR Manual: >= 4-5 h), with warnings
    d = decide(_case(exam="ct-angiography-head-neck", as_of="2025-03-10T10:00:00",
                       scheduled_at="2025-03-10T13:00:00",
                       patient={**ADULT, "prior_reactions": MODERATE_ALLERGIC}), k)
    pm = d.premedication
    assert pm.indicated and pm.regimen == "accelerated-iv" and pm.lead_hours == 3.0
    assert [(s.at, s.drug.split()[0], s.dose, s.route) for s in pm.schedule] == [
        (T(2025, 3, 10, 10, 0), "methylprednisolone", "40 mg", "intravenous"),  # now; +4 h is after the exam
        (T(2025, 3, 10, 12, 0), "diphenhydramine", "50 mg", "intravenous"),  # 1 h before
    ]
    assert pm.warnings[0].startswith("Only 3.0 h left before the exam: not enough for the elective oral "
                                     "prednisone, 13 h (needs 13 h)")
    assert "consider moving the exam to 2025-03-10 14:00 or later" in pm.warnings[1]


def test_premedication_accelerated_repeats_every_4_hours(k):
    # ACR Manual accelerated regimen: now and every 4 h until contrast; exam in 9 h -> 08:00, 12:00, 16:00
    elective = k.regimens["prednisone-13h"]
    accel = k.regimens["accelerated-iv"]
    s = timeline.premedication_schedule(elective, accel, T(2025, 3, 10, 17, 0), T(2025, 3, 10, 8, 0))
    steroid = [d.at.hour for d in s.doses if d.drug.startswith("methylprednisolone")]
    assert steroid == [8, 12, 16] and len(s.warnings) == 1


def test_premedication_without_exam_time(k):
    s = timeline.premedication_schedule(k.regimens["prednisone-13h"], k.regimens["accelerated-iv"], None, None)
    assert [d.hours_before for d in s.doses] == [13, 7, 1, 1] and all(d.at is None for d in s.doses)
    assert s.warnings == ["No scheduled exam time: doses are given as hours before the exam"]


# --------------------------------------------------------------------------------------------------
# Metformin
# --------------------------------------------------------------------------------------------------
def test_metformin_egfr_25(k):
    # ACR Manual: eGFR < 30 -> stop at the time of contrast, withhold 48 h, re-check before restarting
    d = decide(_case(exam="ct-abdomen-pelvis", scheduled_at="2025-03-10T16:30:00",
                       patient={"age_years": 70, "sex": "male", "weight_kg": 80, "height_cm": 178, "egfr": 25,
                                "takes_metformin": True}), k)
    mb = d.metformin
    assert mb.hold and mb.hold_from == T(2025, 3, 10, 16, 30)
    assert mb.recheck_after_hours == 48 and mb.recheck_at == T(2025, 3, 12, 16, 30)
    # the same case needs hydration (ACR-NKF 2020: eGFR < 30) -> weight-based plan, 1 mL/kg/h, 1 h + 6 h
    r = d.renal
    assert r.hydration_indicated
    hp = r.hydration_plan
    assert (hp.rate_ml_h, hp.volume_before_ml, hp.volume_after_ml, hp.total_ml) == (80, 80, 480, 560)
    assert hp.start_at == T(2025, 3, 10, 15, 30) and hp.stop_at == T(2025, 3, 10, 22, 30)
    # BSA (Du Bois) 80 kg 178 cm = 1.98 m²; absolute GFR = 25 * 1.98 / 1.73 = 28.6 mL/min (computed)
    assert r.bsa_m2 == 1.98 and r.bsa_formula == "du_bois" and r.absolute_gfr_ml_min == 28.6
    assert r.creatinine_required and "metformin" in r.creatinine_required_because
    # 0.5 g I/kg * 80 kg = 40 g iodine; 40 / 28.6 = 1.40 >= 1 -> flagged
    assert r.dose_limits.iodine_g == 40.0 and r.dose_limits.iodine_g_per_gfr == 1.4
    assert r.dose_limits.iodine_g_per_gfr_exceeded is True


def test_hydration_heart_failure_caution(k):
    d = decide(_case(exam="ct-abdomen-pelvis", scheduled_at="2025-03-10T16:00:00",
                       patient={"age_years": 70, "weight_kg": 60, "egfr": 20, "heart_failure": True}), k)
    hp = d.renal.hydration_plan
    assert hp is not None and hp.rate_ml_h == 60
    assert hp.warnings and hp.warnings[0].startswith("Heart failure: IV fluid may cause volume overload")


# --------------------------------------------------------------------------------------------------
# Dose, access and viscosity
# --------------------------------------------------------------------------------------------------
def test_cta_5_ml_s_through_22_gauge_hand_vein(k):
    # ct-angiography-head-neck protocol: 5 mL/s, scan 6 s + 8 s, 350 mg I/mL (exams.yaml, common practice)
    d = decide(_case(exam="ct-angiography-head-neck", scheduled_at="2025-03-10T15:00:00",
                       patient={**ADULT, "iv_access": {"gauge": 22, "site": "hand_or_wrist"}}), k)
    dose = d.roles[0].dose
    assert dose.agent == "iohexol" and dose.concentration_mg_i_ml == 350
    assert dose.volume_ml == 70.0 and dose.iodine_g == 24.5  # 5 * (6 + 8) = 70 mL; 70 * 0.35 = 24.5 g
    assert dose.flow_ml_s == 5 and dose.iodine_delivery_rate_g_s == 1.75 and dose.duration_s == 14.0
    assert dose.access_ok is False  # ACR Manual: hand or wrist veins at most 1.5 mL/s
    assert dose.access_message.startswith("Hand or wrist vein: at most 1.5 mL/s (ACR Manual); 5 mL/s planned")
    assert "22-gauge may tolerate up to 5 mL/s" in dose.access_message
    # an antecubital 22-gauge at 5 mL/s is tolerated, with the 20-gauge preference stated
    d2 = decide(_case(exam="ct-angiography-head-neck",
                        patient={**ADULT, "iv_access": {"gauge": 22, "site": "antecubital"}}), k)
    assert d2.roles[0].dose.access_ok is True


def test_warming_a_370_agent(k):
    # iopamidol 370: 20.9 mPa·s at 20 °C (from memory), 8.6 at 37 °C (J Nucl Med Technol table);
    # Hagen-Poiseuille: same flow, same catheter -> pressure ratio 8.6 / 20.9 = 0.41
    d = decide(_case(exam="ct-angiography-aorta", agent="iopamidol", planned_concentration_mg_i_ml=370,
                       patient={**ADULT, "iv_access": {"gauge": 18, "site": "antecubital"}}), k)
    dose = d.roles[0].dose
    assert dose.agent == "iopamidol" and dose.concentration_mg_i_ml == 370
    assert dose.viscosity_mpas.at_20c == 20.9 and dose.viscosity_mpas.at_37c == 8.6
    assert dose.viscosity_mpas.warming_pressure_ratio == 0.41
    assert any(w.startswith("Viscous strength (8.6 mPa·s at 37 °C): warm to body temperature") for w in dose.warnings)
    # protocol 4 mL/s x (15 + 10) s = 100 mL; 100 mL * 0.37 = 37 g; IDR 1.48 g/s
    assert (dose.volume_ml, dose.iodine_g, dose.iodine_delivery_rate_g_s) == (100.0, 37.0, 1.48)


def test_strength_not_in_catalogue_is_an_error(k):
    with pytest.raises(RangeError) as e:
        decide(_case(exam="ct-angiography-aorta", agent="iopamidol", planned_concentration_mg_i_ml=350), k)
    assert str(e.value) == "planned_concentration_mg_i_ml: 350 is not a strength of iopamidol; allowed: 200, 300, 370"


def test_concentration_choice_nearest_to_the_iodine_delivery_rate_target(k):
    # issue 8 item 9 (the old "highest strength below 350" answer was wrong for CT angiography): the aorta
    # protocol's target is 1.4 g I/s at 4 mL/s; iopamidol 370 gives 1.48 g I/s, 300 gives 1.20 -> 370, the
    # nearest (IDR = mg I/mL x mL/s / 1000, a unit identity)
    role = k.exams["ct-angiography-aorta"].roles[0]
    b = dose_block(k.agents["iopamidol"], role.protocol, role.route, weight_kg=70)
    assert b.concentration_mg_i_ml == 370 and b.iodine_delivery_rate_g_s == 1.48
    assert "nearest to the protocol's iodine delivery rate target 1.4 g I/s" in b.concentration_choice
    assert b.iodine_delivery_rate_target_g_s == 1.4


def test_concentration_choice_highest_below_protocol_without_a_rate_target(k):
    # a portal-venous protocol has no rate target: the highest strength at or below the protocol's 350
    role = k.exams["ct-liver-multiphase"].roles[0]
    b = dose_block(k.agents["iopamidol"], role.protocol, role.route, weight_kg=70)
    assert b.concentration_mg_i_ml == 300 and "highest strength below the protocol's 350" in b.concentration_choice


def test_weight_based_dose_capped():
    # 0.5 g I/kg * 120 kg at 300 mg I/mL = 200 mL -> capped at 150 mL (protocol maximum)
    agent = m.Agent(id="x", name="X", agent_class="positive", family="iodinated", form="solution",
                    osmolality_class="low", ionicity="non_ionic", routes=["intravenous"],
                    concentrations=[{"value": 300, "unit": "mg_i_per_ml"}])
    prot = m.DoseProtocol(iodine_g_per_kg=0.5, max_volume_ml=150, flow_ml_s=3)
    b = dose_block(agent, prot, m.Route.intravenous, weight_kg=120)
    assert b.volume_ml == 150 and b.iodine_g == 45.0 and b.duration_s == 50.0
    assert b.warnings == ["Volume 200 mL capped at the protocol maximum 150 mL"]
    assert b.viscosity_mpas is None  # no figures in the catalogue record


# --------------------------------------------------------------------------------------------------
# Catheter study: Cigarroa
# --------------------------------------------------------------------------------------------------
def test_catheter_study_cigarroa_below_planned_volume(k):
    # Cigarroa (Am J Med 1989): 5 mL * 80 kg / 2.5 mg/dL = 160 mL < 200 mL planned
    d = decide(_case(exam="angio-coronary", scheduled_at="2025-03-11T08:00:00", planned_volume_ml=200,
                       patient={"age_years": 70, "sex": "male", "weight_kg": 80, "height_cm": 175,
                                "creatinine": {"value": 221, "unit": "umol/L", "measured_on": "2025-03-10"}}), k)
    lim = d.renal.dose_limits
    assert lim.cigarroa_max_ml == 160 and lim.catheter_volume_ml == 200 and lim.cigarroa_exceeded is True
    assert any(msg.startswith("Planned 200 mL is above the Cigarroa maximum of 160 mL") for msg in lim.messages)
    dose = d.roles[0].dose
    assert dose.volume_ml == 200 and dose.flow_ml_s is None and dose.access_ok is None
    assert d.renal.creatinine_age_days == 1.0 and d.renal.creatinine_stale is False


# --------------------------------------------------------------------------------------------------
# Creatinine freshness in the decision
# --------------------------------------------------------------------------------------------------
def test_stale_creatinine_outpatient_and_inpatient(k):
    pat = {"age_years": 65, "sex": "male", "weight_kg": 80, "height_cm": 178,
           "creatinine": {"value": 1.0, "unit": "mg/dL", "measured_on": "2025-03-05"}}
    out = decide(_case(exam="ct-abdomen-pelvis", scheduled_at="2025-03-10T15:00:00", patient=pat), k).renal
    assert out.creatinine_age_days == 5.0 and out.creatinine_max_age_days == 30 and out.creatinine_stale is False
    assert out.creatinine_required and out.creatinine_required_because == ["age over 60"]
    inp = decide(_case(exam="ct-abdomen-pelvis", scheduled_at="2025-03-10T15:00:00",
                         patient={**pat, "inpatient": True}), k).renal
    assert inp.creatinine_max_age_days == 2 and inp.creatinine_stale is True
    assert inp.warnings[0].startswith("Creatinine is 5.0 days old at the exam time; the policy accepts at most 2")


def test_no_creatinine_required_without_risk_factors(k):
    d = decide(_case(exam="ct-abdomen-pelvis", patient={"age_years": 40, "weight_kg": 70}), k)
    assert d.renal.creatinine_required is False and d.renal.warnings == []
    assert d.roles[0].dose.volume_ml == 116.7  # 0.5 g I/kg * 70 kg / 300 mg I/mL


def test_creatinine_after_exam_is_an_error(k):
    with pytest.raises(RangeError) as e:
        decide(_case(exam="ct-abdomen-pelvis", scheduled_at="2025-03-10T15:00:00", as_of=None,  # no "now":
                       patient={"age_years": 65, "sex": "male",  # a sample after "now" is refused first
                                "creatinine": {"value": 1.0, "unit": "mg/dL", "measured_on": "2025-03-11"}}), k)
    assert str(e.value) == ("patient.creatinine.measured_on: 2025-03-11 is after the exam time "
                            "2025-03-10T15:00:00; allowed: a sample taken before the exam")


# --------------------------------------------------------------------------------------------------
# `contrast-aid dose`
# --------------------------------------------------------------------------------------------------
def _dose_args(*argv):
    parser = argparse.ArgumentParser()
    add_dose_parser(parser.add_subparsers())
    return parser.parse_args(["dose", *argv])


def test_dose_command_cta(k):
    out = dose_plan(_dose_args("--agent", "iohexol", "--exam", "ct-angiography-head-neck", "--gauge", "20",
                               "--site", "antecubital", "--weight", "70", "--height", "165", "--egfr", "60"), k)
    assert out["dose"]["volume_ml"] == 70.0 and out["dose"]["iodine_delivery_rate_g_s"] == 1.75
    assert out["dose"]["access_ok"] is True
    # BSA Du Bois 70 kg 165 cm = 1.7710 m²; absolute GFR 60 * 1.7710 / 1.73 = 61.4 mL/min (computed)
    assert out["bsa_m2"] == 1.77 and out["absolute_gfr_ml_min"] == 61.4
    assert out["dose_limits"]["iodine_g_per_gfr"] == 0.4  # 24.5 g / 61.4 mL/min


def test_dose_command_errors_pinned(k):
    with pytest.raises(RangeError) as e:
        dose_plan(_dose_args("--agent", "iohexol", "--flow", "12", "--volume", "80"), k)
    assert str(e.value) == "--flow: 12 is out of range; allowed: from 0.1 to 10 mL/s"
    with pytest.raises(CaseError) as e:
        dose_plan(_dose_args("--agent", "iohexol", "--concentration", "320", "--flow", "3", "--volume", "50"), k)
    assert str(e.value) == "--concentration: 320 is not a strength of iohexol; allowed: 180, 240, 300, 350"
    with pytest.raises(CaseError) as e:
        dose_plan(_dose_args("--agent", "water", "--flow", "3", "--volume", "50"), k)
    assert str(e.value).startswith("--agent: 'water' is not an iodinated agent")


def test_premedication_exam_time_in_the_past_is_a_warning(k):
    s = timeline.premedication_schedule(k.regimens["prednisone-13h"], k.regimens["accelerated-iv"],
                                        T(2025, 3, 10, 9, 0), T(2025, 3, 10, 12, 0))
    assert s.regimen.id == "prednisone-13h" and s.lead_hours == -3.0
    assert s.doses[0].at == T(2025, 3, 9, 20, 0)
    assert s.warnings[0].startswith("The scheduled time 2025-03-10T09:00:00 is before as_of 2025-03-10T12:00:00")
