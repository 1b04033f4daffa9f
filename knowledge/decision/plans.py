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

import math
from typing import Any

from ..tables import models as m
from ..calculators import body, dose as dose_calc, freshness, hydration, kidney, limits, timeline, viscosity
from ..calculators import paediatric
from ..calculators.ranges import FLOW_RANGE
from ..errors import CaseError, ContrastAidError, RangeError
from ..tables.constants import METFORMIN_HOLD_HOURS, VISCOUS_FLOW_ML_S, VISCOUS_MPAS_37C
from .agent_doses import access_check, plan_agent_doses  # gadolinium and microbubble doses (issue 13)



def _r(value: float | None, nd: int = 1) -> float | None:
    return None if value is None else round(value, nd)


_OWN_PREFIXES = ("patient.", "scheduled_at", "as_of", "planned_", "agent", "exam")


def _as_case_field(exc: ContrastAidError) -> ContrastAidError:
    """A calculator's error re-raised with the case's field path (``weight_kg`` -> ``patient.weight_kg``)."""
    field = exc.field or ""
    if field.startswith(_OWN_PREFIXES):
        return exc
    return exc.at("patient")


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
    flow = planned_flow_ml_s if planned_flow_ml_s is not None else (protocol.flow_ml_s if protocol else None)
    conc, choice = pick_strength(agent, strengths, protocol, concentration_mg_i_ml, concentration_field, flow)
    plan = dose_calc.plan_dose(
        concentration_mg_i_ml=conc, flow_ml_s=flow, weight_kg=weight_kg,
        iodine_g_per_kg=protocol.iodine_g_per_kg if protocol else None,
        fixed_volume_ml=protocol.fixed_volume_ml if protocol else None,
        max_volume_ml=protocol.max_volume_ml if protocol else dose_calc.VOLUME_RANGE[1],
        scan_duration_s=protocol.scan_duration_s if protocol else None,
        duration_offset_s=protocol.duration_offset_s if protocol else 0.0,
        planned_volume_ml=planned_volume_ml, concentration_choice=choice)
    warnings = list(plan.warnings)
    access_ok, access_msg = access_check(route, flow, iv_access, warnings)
    rec = next(c for c in strengths if c.value == conc)
    visc = viscosity_block(rec, flow, cite, warnings)
    return m.DoseBlock(
        agent=agent.id, concentration_mg_i_ml=conc, concentration_choice=plan.concentration_choice,
        volume_ml=_r(plan.volume_ml), volume_basis=plan.volume_basis, iodine_g=_r(plan.iodine_g),
        flow_ml_s=plan.flow_ml_s, iodine_delivery_rate_g_s=_r(plan.iodine_delivery_rate_g_s, 2),
        duration_s=_r(plan.duration_s), access_ok=access_ok, access_message=access_msg,
        viscosity_mpas=visc, warnings=warnings,
        iodine_delivery_rate_target_g_s=protocol.iodine_delivery_rate_g_s if protocol else None)


def _child_volume(pp: m.PaediatricProtocol, adult_max: float, conc: float, weight_kg: float | None,
                  planned_volume_ml: float | None, warnings: list[str]) -> tuple[float | None, str]:
    """A child's volume: mL/kg of the protocol strength, capped per kg and at the adult maximum."""
    volume = cap = None
    if weight_kg is None:
        basis = "not worked out: a child's dose is per kg and no weight was given"
        warnings.append("Weight is needed for a child's dose (mL/kg)")
    else:
        volume, cap = paediatric.child_volume(weight_kg, pp.ml_per_kg, pp.max_ml_per_kg, adult_max,
                                              pp.concentration_mg_i_ml, conc)
        volume = round(volume, 1)
        basis = (f"{pp.ml_per_kg:g} mL/kg × {weight_kg:g} kg (at {pp.concentration_mg_i_ml:g} mg I/mL), "
                 f"at most {cap:.0f} mL")
    if planned_volume_ml is not None:
        volume, basis = float(planned_volume_ml), "planned volume"
        if cap is not None and volume > cap:
            warnings.append(f"Planned {volume:g} mL is above the child's maximum of {cap:.0f} mL")
    return volume, basis


def _protocol_injection_s(protocol: m.DoseProtocol) -> float | None:
    """How long the adult protocol injects, s: the scan time plus offset (CT angiography), else the fixed
    volume over the flow; None for weight-based or hand-bolus protocols."""
    if protocol.scan_duration_s is not None:
        return protocol.scan_duration_s + protocol.duration_offset_s
    if protocol.fixed_volume_ml is not None and protocol.flow_ml_s is not None:
        return protocol.fixed_volume_ml / protocol.flow_ml_s
    return None


def _child_flow_for(protocol: m.DoseProtocol, volume: float | None, iv_access: m.IVAccess | None,
                    planned_flow_ml_s: float | None) -> tuple[float | None, bool, str]:
    """(flow, hand injection, why) for a child: the cannula's limit (ACR Manual), then the child's size - the
    child's volume over the protocol's injection time (common practice); a planned flow overrides both."""
    gauge = iv_access.gauge if iv_access else None
    site = iv_access.site if iv_access else None
    flow, hand, why = paediatric.child_flow(protocol.flow_ml_s, gauge, site)
    if hand:
        return flow, hand, why
    if planned_flow_ml_s is not None:
        return planned_flow_ml_s, False, "planned flow"
    injection_s = _protocol_injection_s(protocol)
    if flow is None or volume is None or injection_s is None:
        return flow, hand, why
    size_flow = paediatric.size_limited_flow(volume, injection_s)
    if size_flow < FLOW_RANGE[0]:
        return None, True, (f"{volume:g} mL is too little to power-inject over the protocol's {injection_s:g} s: "
                            "inject by hand (common practice)")
    if size_flow < flow:
        return size_flow, False, (f"{size_flow:g} mL/s for the child's size: {volume:g} mL over the protocol's "
                                  f"{injection_s:g} s injection (common practice); protocol and cannula allow {flow:g} mL/s")
    return flow, hand, why


def child_dose_block(agent: m.Agent, protocol: m.DoseProtocol, *, weight_kg: float | None,
                     planned_volume_ml: float | None, planned_flow_ml_s: float | None,
                     concentration_mg_i_ml: float | None, iv_access: m.IVAccess | None, cite: Any,
                     concentration_field: str = "planned_concentration_mg_i_ml") -> m.DoseBlock | None:
    """The intravenous dose of a patient under 18: the paediatric protocol (mL/kg with a per-kg and an absolute
    cap; flow set by the cannula; hand injection for small cannulas) replaces the adult volume and flow."""
    strengths = mg_i_strengths(agent)
    if not strengths:
        return None
    pp = protocol.paediatric or m.PaediatricProtocol()
    values = [c.value for c in strengths]
    if concentration_mg_i_ml is None:
        conc, choice = dose_calc.choose_concentration(values, pp.concentration_mg_i_ml)
    else:
        conc, choice = pick_strength(agent, strengths, None, concentration_mg_i_ml, concentration_field)
    adult_max = pp.max_volume_ml or protocol.max_volume_ml
    warnings = [f"Patient under {paediatric.ADULT_AGE_YEARS:g}: paediatric protocol ({pp.ml_per_kg:g} mL/kg of "
                f"{pp.concentration_mg_i_ml:g} mg I/mL, at most {pp.max_ml_per_kg:g} mL/kg and never above the adult "
                f"{adult_max:g} mL; ACR Manual, {pp.certainty.value.replace('_', ' ')}) instead of the adult protocol"]
    volume, basis = _child_volume(pp, adult_max, conc, weight_kg, planned_volume_ml, warnings)
    flow, hand, why = _child_flow_for(protocol, volume, iv_access, planned_flow_ml_s)
    warnings.append(f"Flow: {why}")
    iodine = dose_calc.iodine_grams(volume, conc) if volume is not None else None
    idr = dose_calc.iodine_delivery_rate(conc, flow) if flow is not None else None
    duration = dose_calc.injection_duration(volume, flow) if (volume is not None and flow is not None) else None
    access_ok = access_msg = None
    if not hand:
        access_ok, access_msg = access_check(m.Route.intravenous, flow, iv_access, warnings)
    else:
        access_msg = "Hand injection: no power injector through this cannula or line"
    rec = next(c for c in strengths if c.value == conc)
    visc = viscosity_block(rec, flow, cite, warnings)
    return m.DoseBlock(
        agent=agent.id, concentration_mg_i_ml=conc, concentration_choice=choice, volume_ml=_r(volume),
        volume_basis=basis, iodine_g=_r(iodine), flow_ml_s=flow, iodine_delivery_rate_g_s=_r(idr, 2),
        duration_s=_r(duration), access_ok=access_ok, access_message=access_msg, viscosity_mpas=visc,
        warnings=warnings, paediatric=True, hand_injection=hand)


def intrathecal_block(agent: m.Agent, pol: m.Policy, planned_volume_ml: float | None,
                      concentration_mg_i_ml: float | None,
                      concentration_field: str = "planned_concentration_mg_i_ml") -> m.DoseBlock | None:
    """An intrathecal dose: a strength labelled for intrathecal use only, and the total-iodine maximum."""
    labelled = sorted(agent.intrathecal_strengths)
    if not labelled:
        return None
    if concentration_mg_i_ml is None:
        conc, choice = dose_calc.choose_concentration(labelled, dose_calc.DEFAULT_CONCENTRATION_MG_I_ML)
        choice += " (strengths labelled for intrathecal use only)"
    else:
        if concentration_mg_i_ml not in labelled:
            raise RangeError(f"{concentration_field}: {concentration_mg_i_ml:g} is not a strength of {agent.id} "
                             f"labelled for intrathecal use; allowed: {', '.join(f'{v:g}' for v in labelled)}",
                             field=concentration_field)
        conc, choice = float(concentration_mg_i_ml), f"{concentration_mg_i_ml:g} mg I/mL: as requested"
    cap_g = pol.intrathecal_max_iodine_g
    cap_ml = cap_g * 1000.0 / conc
    warnings = [f"Intrathecal: at most {cap_g:g} g iodine in all (adult; product labels, from memory) = "
                f"{cap_ml:.0f} mL of {conc:g} mg I/mL"]
    volume = planned_volume_ml
    iodine = volume * conc / 1000.0 if volume is not None else None
    if iodine is not None and iodine > cap_g:
        warnings.append(f"Planned {volume:g} mL holds {iodine:.1f} g iodine: above the intrathecal maximum of "
                        f"{cap_g:g} g - reduce it")
    basis = "planned volume" if volume is not None else f"set by the radiologist, at most {cap_ml:.0f} mL"
    return m.DoseBlock(
        agent=agent.id, concentration_mg_i_ml=conc, concentration_choice=choice, volume_ml=_r(volume),
        volume_basis=basis, iodine_g=_r(iodine), flow_ml_s=None, iodine_delivery_rate_g_s=None, duration_s=None,
        access_ok=None, access_message=None, viscosity_mpas=None, warnings=warnings)


def pick_strength(agent: m.Agent, strengths: list[m.Concentration], protocol: m.DoseProtocol | None,
                  requested: float | None, field: str, flow: float | None = None) -> tuple[float, str]:
    """The strength to plan with and how it was picked (a requested one must be one of the agent's). With an
    iodine delivery rate target and a flow, the strength nearest to the target (not the nearest below)."""
    values = [c.value for c in strengths]
    if requested is None:
        if protocol is not None and protocol.iodine_delivery_rate_g_s is not None and flow is not None:
            return dose_calc.choose_concentration_for_idr(values, flow, protocol.iodine_delivery_rate_g_s)
        return dose_calc.choose_concentration(values, protocol.concentration_mg_i_ml if protocol else None)
    if requested not in values:
        raise RangeError(f"{field}: {requested:g} is not a strength of {agent.id}; allowed: "
                         f"{', '.join(f'{v:g}' for v in values)}", field=field)
    return float(requested), f"{requested:g} mg I/mL: as requested"


def viscosity_block(rec: m.Concentration, flow: float | None, cite: Any, warnings: list[str]) -> m.Viscosity | None:
    """Catalogue viscosity at 20 and 37 °C, the warming pressure ratio, and a warning for viscous fast doses."""
    if rec.viscosity_mpas_20c is None and rec.viscosity_mpas_37c is None:
        return None
    ratio = None
    if rec.viscosity_mpas_20c is not None and rec.viscosity_mpas_37c is not None:
        ratio = round(viscosity.pressure_ratio(rec.viscosity_mpas_20c, rec.viscosity_mpas_37c), 2)
    src = None
    if rec.source is not None and cite is not None:
        src = cite([rec.source], rec.certainty)
    elif rec.certainty is not m.Certainty.verified:
        src = "from memory" if rec.certainty is m.Certainty.from_memory else "common practice"
    if ratio is not None and rec.viscosity_mpas_37c >= VISCOUS_MPAS_37C and flow is not None \
            and flow >= VISCOUS_FLOW_ML_S:
        warnings.append(
            f"Viscous strength ({rec.viscosity_mpas_37c:g} mPa·s at 37 °C): warm to body temperature; the "
            f"same flow then needs about {ratio:.0%} of the room-temperature pressure (Hagen-Poiseuille)")
    return m.Viscosity(at_20c=rec.viscosity_mpas_20c, at_37c=rec.viscosity_mpas_37c,
                       warming_pressure_ratio=ratio, certainty=rec.certainty, source=src)


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
    exam = k.exams[decision.exam]
    roles, doses, iodinated_intravascular = plan_doses(case, k, exam, decision)
    roles = plan_agent_doses(case, k, exam, roles)
    catheter = has_catheter_study(exam)
    renal = plan_renal(case, k, decision.renal, doses, iodinated_intravascular, catheter)
    premed = plan_premedication(case, k, decision.premedication)
    met = plan_metformin(case, decision.metformin)
    return decision.model_copy(update=dict(roles=roles, renal=renal, premedication=premed, metformin=met))


def plan_doses(case: m.Case, k: Any, exam: m.Exam, decision: m.Decision):
    """Dose blocks for every intravascular role with an iodinated choice: (roles, doses, any such role).

    The case's planned volume, flow and strength apply to the exam's first intravascular role."""
    p = case.patient
    new_roles: list[m.RoleDecision] = []
    doses: list[tuple[m.ExamRole, m.DoseBlock]] = []
    iodinated_intravascular = False
    first_intravascular = True
    child = p.age_years is not None and p.age_years < paediatric.ADULT_AGE_YEARS
    for role, rd in zip(exam.roles, decision.roles):
        chosen = next((o for o in rd.options if o.chosen), None)
        block = None
        overrides = first_intravascular
        if chosen is not None and role.route in m.INTRAVASCULAR and chosen.family is m.Family.iodinated:
            iodinated_intravascular = True
            planned = dict(planned_volume_ml=case.planned_volume_ml if overrides else None,
                           planned_flow_ml_s=case.planned_flow_ml_s if overrides else None,
                           concentration_mg_i_ml=case.planned_concentration_mg_i_ml if overrides else None)
            if child and role.route is m.Route.intravenous and role.protocol is not None:
                block = child_dose_block(k.agents[chosen.agent], role.protocol, weight_kg=p.weight_kg,
                                         iv_access=p.iv_access, cite=k.cite, **planned)
            else:
                block = dose_block(k.agents[chosen.agent], role.protocol, role.route, weight_kg=p.weight_kg,
                                   iv_access=p.iv_access, cite=k.cite, **planned)
                if block is not None and child:
                    block = block.model_copy(update={"paediatric": True, "warnings": block.warnings + [
                        "Patient under 18: a catheter study's volume is set per kg by the radiologist; the adult "
                        "figures above are not a child's dose"]})
            if block is not None:
                doses.append((role, block))
        elif chosen is not None and role.route is m.Route.intrathecal and chosen.family is m.Family.iodinated:
            block = intrathecal_block(k.agents[chosen.agent], k.policy,
                                      case.planned_volume_ml if overrides else None,
                                      case.planned_concentration_mg_i_ml if overrides else None)
        if role.route in m.INTRAVASCULAR or role.route is m.Route.intrathecal:
            first_intravascular = False
        new_roles.append(rd.model_copy(update={"dose": block}) if block is not None else rd)
    return new_roles, doses, iodinated_intravascular


def has_catheter_study(exam: m.Exam) -> bool:
    """Whether the exam has an intravascular catheter study (the dose limits are then always worked out)."""
    return any(r.catheter_study and r.route in m.INTRAVASCULAR for r in exam.roles)


def body_gfr(p: m.Patient, egfr: float | None, pol: m.Policy) -> tuple[float | None, float | None]:
    """Body surface area (policy ``bsa_formula``) and absolute GFR (mL/min, one decimal) from weight, height
    and the eGFR used; None where an input is missing."""
    bsa = agfr = None
    if p.weight_kg is not None and p.height_cm is not None:
        bsa = body.bsa(p.weight_kg, p.height_cm, pol.bsa_formula)
        if egfr is not None:
            agfr = body.absolute_gfr(min(egfr, body.EGFR_RANGE[1]), bsa)
    return bsa, _r(agfr)


def plan_renal(case: m.Case, k: Any, r: m.RenalBlock, doses: list, iodinated_intravascular: bool,
               catheter_study: bool = False) -> m.RenalBlock:
    """Body surface area, absolute GFR, creatinine freshness, dose limits and the hydration plan.

    The dose limits are worked out for every catheter study (Cigarroa from weight and creatinine before any
    volume is planned; a carbon dioxide study may be topped up with iodinated contrast) and for every
    intravascular iodinated dose. The hydration regimen shown is the plan's own, so the two never differ."""
    pol: m.Policy = k.policy
    p = case.patient
    bsa, agfr = body_gfr(p, r.egfr, pol)
    fresh, warnings = creatinine_freshness(case, pol, iodinated_intravascular or catheter_study)
    dose_limits = (_dose_limits(doses, p, pol, agfr, catheter_study)
                   if iodinated_intravascular or catheter_study else None)
    plan = hydration_plan(case, pol, warnings) if r.hydration_indicated else None
    regimen = r.hydration_regimen
    if plan is not None:
        regimen = hydration_words(plan, pol)
    return r.model_copy(update=dict(hydration_regimen=regimen,
        bsa_m2=_r(bsa, 2), bsa_formula=pol.bsa_formula if bsa is not None else None,
        absolute_gfr_ml_min=_r(agfr), dose_limits=dose_limits, hydration_plan=plan, warnings=warnings, **fresh))


def creatinine_freshness(case: m.Case, pol: m.Policy, iodinated_intravascular: bool) -> tuple[dict, list[str]]:
    """The creatinine's age at the exam (or as-of) time, the policy's limit, and whether one is required."""
    p = case.patient
    at = case.scheduled_at or case.as_of
    cr_age = stale = None
    if p.creatinine is not None and p.creatinine.measured_on is not None and at is not None:
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
    warnings: list[str] = []
    if iodinated_intravascular and not because and case.urgency is m.Urgency.emergency and p.creatinine is None \
            and p.egfr is None:
        warnings.append("Emergency exam and no kidney risk factor: do not wait for a creatinine (ACR Manual, from "
                        "memory); send one with the cannula")
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
    return dict(creatinine_age_days=_r(cr_age), creatinine_max_age_days=cr_max, creatinine_stale=stale,
                creatinine_required=required, creatinine_required_because=because), warnings


def hydration_plan(case: m.Case, pol: m.Policy, warnings: list[str]) -> m.HydrationPlanBlock | None:
    """The weight-based hydration plan of the policy, as clock times from the exam time."""
    p = case.patient
    if p.weight_kg is None:
        warnings.append("Weight is needed to work out the hydration rate; policy regimen: "
                        f"{pol.hydration_regimen}")
        return None
    hp = hydration.weight_based_plan(p.weight_kg, pol.hydration_ml_kg_h, pol.hydration_hours_before,
                                     pol.hydration_hours_after, contrast_at=case.scheduled_at,
                                     heart_failure=p.heart_failure)
    return m.HydrationPlanBlock(
        fluid=hp.fluid, rate_ml_h=round(hp.rate_ml_h), rate_ml_kg_h=pol.hydration_ml_kg_h,
        start_at=hp.start_at, stop_at=hp.stop_at, volume_before_ml=round(hp.volume_before_ml),
        volume_after_ml=round(hp.volume_after_ml), total_ml=round(hp.total_ml), warnings=hp.warnings)


def hydration_words(plan: m.HydrationPlanBlock, pol: m.Policy) -> str:
    """The hydration regimen in words, from the plan itself (same rate, volumes and timing)."""
    when = ""
    if plan.start_at is not None and plan.stop_at is not None:
        when = f", {plan.start_at.strftime('%Y-%m-%d %H:%M')} to {plan.stop_at.strftime('%Y-%m-%d %H:%M')}"
    return (f"{plan.fluid} IV {plan.rate_ml_h:g} mL/h ({plan.rate_ml_kg_h:g} mL/kg/h) from "
            f"{pol.hydration_hours_before:g} h before to {pol.hydration_hours_after:g} h after the contrast{when}: "
            f"{plan.volume_before_ml:g} mL before, {plan.volume_after_ml:g} mL after, {plan.total_ml:g} mL in all "
            f"(policy: {pol.name})")


def elective_regimens(k: Any) -> list[m.Regimen]:
    """The policy's elective regimens in the order they are tried (``elective_regimens``, else the default
    regimen then every other regimen but the accelerated one, in file order)."""
    pol = k.policy
    if pol.elective_regimens:
        ids = list(pol.elective_regimens)
    else:
        ids = [pol.premedication_regimen] + [r.id for r in pol.regimens if r.id not in
                                             (pol.premedication_regimen, pol.premedication_accelerated_regimen)]
    return [k.regimens[i] for i in ids]


def plan_premedication(case: m.Case, k: Any, premed: m.PremedicationBlock) -> m.PremedicationBlock:
    """The regimen as clock times from the exam time and the as-of time: the first elective regimen that fits
    the time left, else the accelerated one. An emergency is never delayed for premedication (the accelerated
    regimen, or what fits; ACR Manual); only an elective exam is advised to move."""
    if not premed.indicated:
        return premed
    pol = k.policy
    sched = timeline.premedication_schedule(elective_regimens(k),
                                            k.regimens[pol.premedication_accelerated_regimen],
                                            case.scheduled_at, case.as_of, urgency=case.urgency.value)
    warnings = list(sched.warnings)
    schedule = [m.ScheduleItem(at=d.at, hours_before=None if math.isnan(d.hours_before) else
                               round(d.hours_before, 2), drug=d.drug, dose=d.dose, route=d.route,
                               optional=d.optional) for d in sched.doses]
    age = case.patient.age_years
    if age is not None and age < paediatric.ADULT_AGE_YEARS:
        schedule = child_premedication(schedule, sched.regimen, case.patient.weight_kg, warnings)
    return premed.model_copy(update=dict(
        regimen=sched.regimen.id, regimen_name=sched.regimen.name, lead_hours=_r(sched.lead_hours),
        schedule=schedule, warnings=warnings))


def child_premedication(schedule: list[m.ScheduleItem], regimen: m.Regimen, weight_kg: float | None,
                        warnings: list[str]) -> list[m.ScheduleItem]:
    """A child's doses of the regimen: mg/kg with a maximum per dose where the policy gives a child's dose
    (default profile: ACR Manual, contrast media in children, from memory); where it gives none, or no weight
    is known, the adult dose stays and a warning says so - never an adult dose for a child silently."""
    steps = {(st.drug, st.route, st.dose): st for st in regimen.steps}
    out, adult = [], set()
    for item in schedule:
        st = steps.get((item.drug, item.route, item.dose))
        if st is None or st.child_mg_per_kg is None or weight_kg is None:
            adult.add(item.drug)
            out.append(item)
            continue
        mg = paediatric.child_drug_dose(weight_kg, st.child_mg_per_kg, st.child_max_mg)
        per_kg = "-".join(f"{v:g}" for v in st.child_mg_per_kg)
        out.append(item.model_copy(update={"dose": f"{'-'.join(f'{v:g}' for v in mg)} mg ({per_kg} mg/kg × "
                                                  f"{weight_kg:g} kg, at most {st.child_max_mg:g} mg)"}))
    if adult:
        why = "no weight was given" if weight_kg is None else "the policy gives no child's dose for them"
        warnings.append(f"Patient under 18: {', '.join(sorted(adult))} shown at the adult dose because {why}; a "
                        "child's premedication dose is per kg - set it with the paediatric team")
    else:
        warnings.append("Patient under 18: premedication doses are per kg of body weight (policy figures); "
                        "check them with the paediatric team")
    return out


def plan_metformin(case: m.Case, met: m.MetforminBlock) -> m.MetforminBlock:
    """Hold from the exam time; re-check kidney function 48 h later before restarting."""
    if not met.hold:
        return met
    hold_from, recheck_at = timeline.metformin_timeline(case.scheduled_at)
    return met.model_copy(update=dict(hold_from=hold_from, recheck_after_hours=METFORMIN_HOLD_HOURS,
                                      recheck_at=recheck_at))


def _dose_limits(doses: list[tuple[m.ExamRole, m.DoseBlock]], p: m.Patient, pol: m.Policy,
                 agfr: float | None, catheter_study: bool = False) -> m.DoseLimits:
    """The renal dose limits of the planned doses: g iodine / GFR, the first-pass caps, Cigarroa."""
    return m.DoseLimits(**dose_limit_fields(doses, p, pol, agfr, catheter_study))


def dose_limit_fields(doses: list[tuple[m.ExamRole, m.DoseBlock]], p: m.Patient, pol: m.Policy,
                      agfr: float | None, catheter_study: bool = False) -> dict[str, Any]:
    """The fields of :func:`_dose_limits`'s block, unvalidated (the worklist review reads a few of them)."""
    grams = [d.iodine_g for _, d in doses if d.iodine_g is not None]
    iodine = sum(grams) if grams else None
    if p.dialysis is m.Dialysis.dialysis_anuric:
        # no kidney function to protect (ACR-NKF 2020): no g iodine / GFR, Cigarroa or "reduce the dose" advice
        return dict(iodine_g=_r(iodine), iodine_g_per_gfr_max=pol.iodine_g_per_gfr_max,
                    first_pass_iodine_g_per_gfr_max=pol.first_pass_iodine_g_per_gfr_max,
                    messages=["Anuric on dialysis: no kidney function to protect - the kidney dose limits "
                              "(g iodine / GFR, Cigarroa) do not apply"])
    msgs: list[str] = []
    iodine_max = _r(pol.iodine_g_per_gfr_max * max(agfr, limits.GFR_ML_MIN_RANGE[0])) if agfr is not None else None
    ratio, exceeded = _gfr_ratio_limit(iodine, agfr, pol, msgs)
    vol_ratio, first_pass_exceeded = _first_pass_limits(doses, agfr, pol, msgs)
    exceeded = True if first_pass_exceeded else exceeded
    cig, cat_vol, cig_exceeded = _cigarroa_limit(doses, p, pol, iodine_max, catheter_study, msgs)
    return dict(
        iodine_g=_r(iodine), iodine_g_per_gfr=_r(ratio, 2), iodine_g_per_gfr_max=pol.iodine_g_per_gfr_max,
        iodine_g_per_gfr_exceeded=exceeded, first_pass_iodine_g_per_gfr_max=pol.first_pass_iodine_g_per_gfr_max,
        volume_ml_per_gfr=vol_ratio, cigarroa_max_ml=cig, catheter_volume_ml=_r(cat_vol), iodine_g_max=iodine_max,
        cigarroa_exceeded=cig_exceeded, messages=msgs)


def _gfr_ratio_limit(iodine: float | None, agfr: float | None, pol: m.Policy,
                     msgs: list[str]) -> tuple[float | None, bool | None]:
    """g iodine / absolute GFR against the policy level (rounded first: the ratio shown is the one compared)."""
    if iodine is None:
        return None, None
    if agfr is None:
        msgs.append("g iodine / GFR not worked out: needs eGFR, weight and height")
        return None, None
    ratio = round(limits.iodine_gfr_ratio(iodine, max(agfr, limits.GFR_ML_MIN_RANGE[0])), 2)
    exceeded = ratio >= pol.iodine_g_per_gfr_max
    if exceeded:
        msgs.append(f"Iodine {iodine:g} g for an absolute GFR of {agfr:g} mL/min: ratio {ratio:.2f} reaches "
                    f"the policy level {pol.iodine_g_per_gfr_max:g} - consider a smaller dose")
    return ratio, exceeded


def _first_pass_limits(doses: list, agfr: float | None, pol: m.Policy,
                       msgs: list[str]) -> tuple[float | None, bool]:
    """mL / GFR of the first-pass doses, and the policy's first-pass g iodine / GFR cap (ESUR), if set."""
    first = [(role, d) for role, d in doses if role.renal_exposure is m.RenalExposure.first_pass]
    if not first or agfr is None:
        return None, False
    gfr = max(agfr, limits.GFR_ML_MIN_RANGE[0])
    fp_iodine = sum(d.iodine_g or 0 for _, d in first)
    vol_ratio = round(limits.volume_gfr_ratio(sum(d.volume_ml or 0 for _, d in first), gfr), 2)
    cap = pol.first_pass_iodine_g_per_gfr_max
    if cap is None:
        return vol_ratio, False
    fp_ratio = round(limits.iodine_gfr_ratio(fp_iodine, gfr), 2)
    if fp_ratio < cap:
        return vol_ratio, False
    msgs.append(f"First-pass dose: {fp_ratio:.2f} g iodine per mL/min GFR reaches the policy cap {cap:g} (ESUR)")
    return vol_ratio, True


def _cigarroa_limit(doses: list, p: m.Patient, pol: m.Policy, iodine_max: float | None, catheter_study: bool,
                    msgs: list[str]) -> tuple[float | None, float | None, bool | None]:
    """The Cigarroa maximum for every catheter study (before any volume is planned), and the planned volume."""
    catheter = [d for role, d in doses if role.catheter_study]
    if not catheter and not catheter_study:
        return None, None, None
    if p.weight_kg is None or p.creatinine is None:
        msgs.append("Cigarroa limit not worked out: needs weight and serum creatinine")
        vols = [d.volume_ml for d in catheter if d.volume_ml is not None]
        return None, (sum(vols) if vols else None), None
    scr = kidney.creatinine_to_mg_dl(p.creatinine.value, p.creatinine.unit)
    cig = round(limits.cigarroa_max_volume_ml(p.weight_kg, scr))
    if not catheter:
        top = f" and at most {iodine_max:g} g iodine (g iodine / GFR {pol.iodine_g_per_gfr_max:g})" if iodine_max else ""
        msgs.append(f"Catheter study: any iodinated contrast (including a top-up of a carbon dioxide study) "
                    f"stays within the Cigarroa maximum of {cig:g} mL{top}")
        return cig, None, None
    vols = [d.volume_ml for d in catheter if d.volume_ml is not None]
    cat_vol = sum(vols) if vols else None
    exceeded = None if cat_vol is None else cat_vol > cig
    if exceeded:
        msgs.append(f"Planned {cat_vol:g} mL is above the Cigarroa maximum of {cig:g} mL "
                    f"(5 mL × {p.weight_kg:g} kg / creatinine {scr:.2f} mg/dL, at most 300 mL): reduce the volume")
    return cig, cat_vol, exceeded
