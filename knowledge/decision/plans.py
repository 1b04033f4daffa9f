"""Plans: turn "suitable with precautions" into numbers and clock times for this patient and this exam.

``add_plans(case, knowledge, decision)`` is called at the end of :func:`knowledge.decision.engine.decide`. From the
case, the chosen option of each role and the policy it fills in:

- ``roles[i].dose`` — for every intravascular role whose chosen agent is iodinated: strength, volume,
  grams of iodine, flow, iodine delivery rate, duration, IV access check, viscosity at 20/37 °C. The
  case's ``planned_volume_ml`` / ``planned_flow_ml_s`` / ``planned_concentration_mg_i_ml`` apply to the
  exam's first intravascular role. A role with no protocol (hand-injected catheter studies) gets a dose
  block only when the case gives ``planned_volume_ml``.
- ``renal`` — body surface area (policy ``bsa_formula``), absolute GFR, creatinine age and whether a
  recent creatinine is required, the renal dose limits (g iodine / GFR, Cigarroa for catheter studies,
  first-pass caps) and, when hydration is indicated, a weight-based hydration plan.
- ``premedication`` — the regimen as clock times from ``scheduled_at``, switching to the accelerated
  regimen (with warnings) when there is not enough time for the elective one.
- ``metformin`` — hold from the exam time, re-check kidney function 48 h later before restarting.

It is pure: "now" is the case's ``as_of`` and nothing else (the command line and the dashboard set it at
their edge); with no ``as_of`` the time left before the exam is not checked, and says so.
"""

from __future__ import annotations

import datetime as dt
import math
from typing import Any

from ..tables import models as m
from ..calculators import access as access_calc
from ..calculators import body, dose as dose_calc, freshness, hydration, kidney, limits, timeline
from ..errors import CaseError, ContrastAidError, RangeError

#: Hours after contrast at which kidney function is re-checked before metformin is restarted.
METFORMIN_RECHECK_HOURS = timeline.METFORMIN_RECHECK_HOURS


def _r(value: float | None, nd: int = 1) -> float | None:
    return None if value is None else round(value, nd)


_OWN_PREFIXES = ("patient.", "scheduled_at", "as_of", "planned_", "agent", "exam")


def _as_case_field(exc: ContrastAidError) -> ContrastAidError:
    """A calculator's error re-raised with the case's field path (``weight_kg`` -> ``patient.weight_kg``)."""
    field = exc.field or ""
    if field.startswith(_OWN_PREFIXES):
        return exc
    return type(exc)(f"patient.{exc.message}", field=f"patient.{field}")


# --------------------------------------------------------------------------------------------------
# Dose of one role
# --------------------------------------------------------------------------------------------------
def mg_i_strengths(agent: m.Agent) -> list[m.Concentration]:
    """The agent's strengths in mg I/mL that lie in the dose calculators' range."""
    lo, hi = dose_calc.CONCENTRATION_RANGE
    return [c for c in agent.concentrations if c.unit is m.Unit.mg_i_per_ml and lo <= c.value <= hi]


def dose_block(agent: m.Agent, protocol: m.DoseProtocol | None, route: m.Route, *, weight_kg: float | None,
               planned_volume_ml: float | None = None, planned_flow_ml_s: float | None = None,
               concentration_mg_i_ml: float | None = None, iv_access: m.IVAccess | None = None,
               cite: Any = None, concentration_field: str = "planned_concentration_mg_i_ml") -> m.DoseBlock | None:
    """The dose block of one role for ``agent``; None when neither a protocol nor a planned volume exists
    or the agent has no strength in mg I/mL.

    Strength: ``concentration_mg_i_ml`` if given (it must be one of the agent's strengths), else the
    agent's highest strength at or below the protocol's ``concentration_mg_i_ml`` (default 300 mg I/mL),
    else its lowest (:func:`knowledge.calculators.dose.choose_concentration`).
    """
    strengths = mg_i_strengths(agent)
    if not strengths or (protocol is None and planned_volume_ml is None):
        return None
    values = [c.value for c in strengths]
    if concentration_mg_i_ml is not None:
        if concentration_mg_i_ml not in values:
            raise RangeError(
                f"{concentration_field}: {concentration_mg_i_ml:g} is not a strength of {agent.id}; allowed: "
                f"{', '.join(f'{v:g}' for v in values)}", field=concentration_field)
        conc, choice = float(concentration_mg_i_ml), f"{concentration_mg_i_ml:g} mg I/mL: as requested"
    else:
        conc, choice = dose_calc.choose_concentration(values, protocol.concentration_mg_i_ml if protocol else None)
    flow = planned_flow_ml_s if planned_flow_ml_s is not None else (protocol.flow_ml_s if protocol else None)
    plan = dose_calc.plan_dose(
        concentration_mg_i_ml=conc,
        flow_ml_s=flow,
        weight_kg=weight_kg,
        iodine_g_per_kg=protocol.iodine_g_per_kg if protocol else None,
        fixed_volume_ml=protocol.fixed_volume_ml if protocol else None,
        max_volume_ml=protocol.max_volume_ml if protocol else dose_calc.VOLUME_RANGE[1],
        scan_duration_s=protocol.scan_duration_s if protocol else None,
        duration_offset_s=protocol.duration_offset_s if protocol else 0.0,
        planned_volume_ml=planned_volume_ml,
        concentration_choice=choice,
    )
    warnings = list(plan.warnings)
    access_ok = access_msg = None
    if route is m.Route.intravenous and flow is not None:
        if iv_access is None:
            access_msg = "No IV access given: not checked"
        else:
            chk = access_calc.check_access(iv_access.gauge, iv_access.site, flow)
            access_ok, access_msg = chk.ok, chk.message
            if not chk.ok:
                warnings.append(f"IV access not fit: {chk.message}")
    elif route is m.Route.intra_arterial:
        access_msg = "Arterial catheter: peripheral IV access rules do not apply"
    rec = next(c for c in strengths if c.value == conc)
    visc = None
    if rec.viscosity_mpas_20c is not None or rec.viscosity_mpas_37c is not None:
        ratio = None
        if rec.viscosity_mpas_20c is not None and rec.viscosity_mpas_37c is not None:
            from ..calculators import viscosity

            ratio = round(viscosity.pressure_ratio(rec.viscosity_mpas_20c, rec.viscosity_mpas_37c), 2)
        src = None
        if rec.source is not None and cite is not None:
            src = cite([rec.source], rec.certainty)
        elif rec.certainty is not m.Certainty.verified:
            src = "from memory" if rec.certainty is m.Certainty.from_memory else "common practice"
        visc = m.Viscosity(at_20c=rec.viscosity_mpas_20c, at_37c=rec.viscosity_mpas_37c,
                           warming_pressure_ratio=ratio, certainty=rec.certainty, source=src)
        if ratio is not None and rec.viscosity_mpas_37c is not None and rec.viscosity_mpas_37c >= 8 and \
                flow is not None and flow >= 3:
            warnings.append(
                f"Viscous strength ({rec.viscosity_mpas_37c:g} mPa·s at 37 °C): warm to body temperature; the "
                f"same flow then needs about {ratio:.0%} of the room-temperature pressure (Hagen-Poiseuille)")
    return m.DoseBlock(
        agent=agent.id, concentration_mg_i_ml=conc, concentration_choice=plan.concentration_choice,
        volume_ml=_r(plan.volume_ml), volume_basis=plan.volume_basis, iodine_g=_r(plan.iodine_g),
        flow_ml_s=plan.flow_ml_s, iodine_delivery_rate_g_s=_r(plan.iodine_delivery_rate_g_s, 2),
        duration_s=_r(plan.duration_s), access_ok=access_ok, access_message=access_msg,
        viscosity_mpas=visc, warnings=warnings)


# --------------------------------------------------------------------------------------------------
# The whole plan
# --------------------------------------------------------------------------------------------------
def add_plans(case: m.Case, knowledge: Any, decision: m.Decision) -> m.Decision:
    """Return ``decision`` with the dose, renal, premedication and metformin plans filled in."""
    try:
        return _add_plans(case, knowledge, decision)
    except CaseError as exc:
        raise _as_case_field(exc) from None


def _add_plans(case: m.Case, k: Any, decision: m.Decision) -> m.Decision:
    pol: m.Policy = k.policy
    p = case.patient
    exam = k.exams[decision.exam]
    now = case.as_of
    exam_at = case.scheduled_at
    at = exam_at or now

    # ---- dose per role --------------------------------------------------------------------------
    new_roles: list[m.RoleDecision] = []
    doses: list[tuple[m.ExamRole, m.DoseBlock]] = []
    iodinated_intravascular = False
    first_intravascular = True
    for role, rd in zip(exam.roles, decision.roles):
        chosen = next((o for o in rd.options if o.chosen), None)
        block = None
        if chosen is not None and role.route in m.INTRAVASCULAR and chosen.family is m.Family.iodinated:
            iodinated_intravascular = True
            overrides = first_intravascular
            block = dose_block(
                k.agents[chosen.agent], role.protocol, role.route, weight_kg=p.weight_kg,
                planned_volume_ml=case.planned_volume_ml if overrides else None,
                planned_flow_ml_s=case.planned_flow_ml_s if overrides else None,
                concentration_mg_i_ml=case.planned_concentration_mg_i_ml if overrides else None,
                iv_access=p.iv_access, cite=k.cite)
            if block is not None:
                doses.append((role, block))
        if role.route in m.INTRAVASCULAR:
            first_intravascular = False
        new_roles.append(rd.model_copy(update={"dose": block}) if block is not None else rd)

    # ---- renal ----------------------------------------------------------------------------------
    r = decision.renal
    warnings: list[str] = []
    bsa = agfr = None
    if p.weight_kg is not None and p.height_cm is not None:
        bsa = body.bsa(p.weight_kg, p.height_cm, pol.bsa_formula)
        if r.egfr is not None:
            agfr = body.absolute_gfr(min(r.egfr, body.EGFR_RANGE[1]), bsa)

    cr_age = cr_max = stale = None
    if p.creatinine is not None and p.creatinine.measured_on is not None:
        cr_age = freshness.creatinine_age_days(p.creatinine.measured_on, at)
    cr_max = freshness.creatinine_max_age_days(p.inpatient, p.acute_kidney_injury,
                                               pol.creatinine_max_age_days_outpatient,
                                               pol.creatinine_max_age_days_inpatient)
    if cr_age is not None:
        stale = cr_age > cr_max
    because = freshness.creatinine_risk_factors(
        age_years=p.age_years, kidney_disease_history=p.kidney_disease_history, dialysis=p.dialysis.value,
        diabetes=p.diabetes, takes_metformin=p.takes_metformin, acute_kidney_injury=p.acute_kidney_injury,
        egfr_known=p.egfr, egfr_low_below=pol.egfr_prophylaxis_consider_below)
    required = iodinated_intravascular and bool(because)
    if required:
        why = ", ".join(because)
        if p.creatinine is None and p.egfr is None:
            warnings.append(f"A recent creatinine is required before intravascular iodinated contrast ({why}); "
                            "none given")
        elif p.creatinine is None:
            warnings.append(f"A recent creatinine is required ({why}): the eGFR was entered without its "
                            "creatinine or date - check it is recent")
        elif cr_age is None:
            warnings.append(f"A recent creatinine is required ({why}): its date is not given")
        elif stale:
            warnings.append(f"Creatinine is {cr_age:.1f} days old at the exam time; the policy accepts at most "
                            f"{cr_max:g} days for this patient: repeat it ({why})")
    elif stale and iodinated_intravascular:
        warnings.append(f"Creatinine is {cr_age:.1f} days old at the exam time (policy: at most {cr_max:g} days)")

    dose_limits = _dose_limits(doses, p, pol, agfr) if iodinated_intravascular else None

    plan = None
    if r.hydration_indicated:
        if p.weight_kg is None:
            warnings.append("Weight is needed to work out the hydration rate; policy regimen: "
                            f"{pol.hydration_regimen}")
        else:
            hp = hydration.weight_based_plan(p.weight_kg, pol.hydration_ml_kg_h, pol.hydration_hours_before,
                                             pol.hydration_hours_after, contrast_at=exam_at,
                                             heart_failure=p.heart_failure)
            plan = m.HydrationPlanBlock(
                fluid=hp.fluid, rate_ml_h=round(hp.rate_ml_h), rate_ml_kg_h=pol.hydration_ml_kg_h,
                start_at=hp.start_at, stop_at=hp.stop_at, volume_before_ml=round(hp.volume_before_ml),
                volume_after_ml=round(hp.volume_after_ml), total_ml=round(hp.total_ml), warnings=hp.warnings)

    renal = r.model_copy(update=dict(
        bsa_m2=_r(bsa, 2), bsa_formula=pol.bsa_formula if bsa is not None else None,
        absolute_gfr_ml_min=_r(agfr), creatinine_age_days=_r(cr_age), creatinine_max_age_days=cr_max,
        creatinine_stale=stale, creatinine_required=required, creatinine_required_because=because,
        dose_limits=dose_limits, hydration_plan=plan, warnings=warnings))

    # ---- premedication --------------------------------------------------------------------------
    premed = decision.premedication
    if premed.indicated:
        sched = timeline.premedication_schedule(k.regimens[pol.premedication_regimen],
                                                k.regimens[pol.premedication_accelerated_regimen], exam_at, now)
        premed = premed.model_copy(update=dict(
            regimen=sched.regimen.id, regimen_name=sched.regimen.name, lead_hours=_r(sched.lead_hours),
            schedule=[m.ScheduleItem(at=d.at, hours_before=None if math.isnan(d.hours_before) else
                                     round(d.hours_before, 2), drug=d.drug, dose=d.dose, route=d.route,
                                     optional=d.optional) for d in sched.doses],
            warnings=sched.warnings))

    # ---- metformin ------------------------------------------------------------------------------
    met = decision.metformin
    if met.hold:
        hold_from, recheck_at = timeline.metformin_timeline(exam_at)
        met = met.model_copy(update=dict(hold_from=hold_from, recheck_after_hours=METFORMIN_RECHECK_HOURS,
                                         recheck_at=recheck_at))

    return decision.model_copy(update=dict(roles=new_roles, renal=renal, premedication=premed, metformin=met))


def _dose_limits(doses: list[tuple[m.ExamRole, m.DoseBlock]], p: m.Patient, pol: m.Policy,
                 agfr: float | None) -> m.DoseLimits:
    msgs: list[str] = []
    grams = [d.iodine_g for _, d in doses if d.iodine_g is not None]
    iodine = sum(grams) if grams else None
    ratio = exceeded = vol_ratio = None
    if iodine is not None and agfr is not None:
        ratio = limits.iodine_gfr_ratio(iodine, max(agfr, limits.GFR_ML_MIN_RANGE[0]))
        exceeded = ratio >= pol.iodine_g_per_gfr_max
        if exceeded:
            msgs.append(f"Iodine {iodine:.1f} g for an absolute GFR of {agfr:.0f} mL/min: ratio {ratio:.2f} reaches "
                        f"the policy level {pol.iodine_g_per_gfr_max:g} - consider a smaller dose")
    elif iodine is not None:
        msgs.append("g iodine / GFR not worked out: needs eGFR, weight and height")
    first = [(role, d) for role, d in doses if role.renal_exposure is m.RenalExposure.first_pass]
    if first and agfr is not None:
        fp_iodine = sum(d.iodine_g or 0 for _, d in first)
        fp_volume = sum(d.volume_ml or 0 for _, d in first)
        vol_ratio = round(limits.volume_gfr_ratio(fp_volume, max(agfr, limits.GFR_ML_MIN_RANGE[0])), 2)
        cap = pol.first_pass_iodine_g_per_gfr_max
        if cap is not None:
            fp_ratio = limits.iodine_gfr_ratio(fp_iodine, max(agfr, limits.GFR_ML_MIN_RANGE[0]))
            if fp_ratio >= cap:
                exceeded = True
                msgs.append(f"First-pass dose: {fp_ratio:.2f} g iodine per mL/min GFR reaches the policy cap {cap:g} "
                            "(ESUR)")
    cig = cat_vol = cig_exceeded = None
    catheter = [d for role, d in doses if role.catheter_study]
    if catheter:
        vols = [d.volume_ml for d in catheter if d.volume_ml is not None]
        cat_vol = sum(vols) if vols else None
        if p.weight_kg is not None and p.creatinine is not None:
            scr = kidney.creatinine_to_mg_dl(p.creatinine.value, p.creatinine.unit)
            cig = round(limits.cigarroa_max_volume_ml(p.weight_kg, scr))
            if cat_vol is not None:
                cig_exceeded = cat_vol > cig
                if cig_exceeded:
                    msgs.append(f"Planned {cat_vol:g} mL is above the Cigarroa maximum of {cig:g} mL "
                                f"(5 mL × {p.weight_kg:g} kg / creatinine {scr:.2f} mg/dL, at most 300 mL): "
                                "reduce the volume")
        else:
            msgs.append("Cigarroa limit not worked out: needs weight and serum creatinine")
    return m.DoseLimits(
        iodine_g=_r(iodine), iodine_g_per_gfr=_r(ratio, 2), iodine_g_per_gfr_max=pol.iodine_g_per_gfr_max,
        iodine_g_per_gfr_exceeded=exceeded, first_pass_iodine_g_per_gfr_max=pol.first_pass_iodine_g_per_gfr_max,
        volume_ml_per_gfr=vol_ratio, cigarroa_max_ml=cig, catheter_volume_ml=_r(cat_vol),
        cigarroa_exceeded=cig_exceeded, messages=msgs)
