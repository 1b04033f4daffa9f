"""Plan stage for gadolinium and microbubble roles (issue 13): ``RoleDecision.agent_dose``.

The iodinated stages of :mod:`knowledge.decision.plans` (dose in g iodine, renal dose limits, creatinine
freshness, hydration) run only for iodinated choices; this stage runs only for gadolinium and microbubble
choices, so neither family's numbers ever reach the other's roles.

- Intravenous gadolinium: the protocol's ``gadolinium_mmol_per_kg``, else the chosen agent's labelled
  standard dose (``agents.yaml``), times the weight: mmol, and mL at the agent's intravenous strength
  (:func:`knowledge.calculators.gadolinium.gadolinium_dose`); the injection rate and the IV access check.
- Intra-articular gadolinium: the dilute strength; the volume is set by the joint, so none is worked out.
- Microbubbles: the protocol's fixed volume or mL/kg, for the agent it names (``for_agent``) only.
"""

from __future__ import annotations

from typing import Any

from ..calculators import access as access_calc
from ..calculators import gadolinium as gd_calc
from ..tables import models as m

_PLANNED = (m.Family.gadolinium, m.Family.microbubble)


def plan_agent_doses(case: m.Case, k: Any, exam: m.Exam, roles: list[m.RoleDecision]) -> list[m.RoleDecision]:
    """Return ``roles`` with ``agent_dose`` filled in for every gadolinium or microbubble choice."""
    out = []
    for role, rd in zip(exam.roles, roles):
        chosen = next((o for o in rd.options if o.chosen), None)
        block = None
        if chosen is not None and chosen.family in _PLANNED:
            agent = k.agents[chosen.agent]
            if agent.family is m.Family.gadolinium:
                block = gadolinium_block(agent, role, case.patient, k.cite)
            else:
                block = microbubble_block(agent, role, case.patient, k.cite)
        out.append(rd.model_copy(update={"agent_dose": block}) if block is not None else rd)
    return out


def access_check(route: m.Route, flow: float | None, iv_access: m.IVAccess | None,
                 warnings: list[str]) -> tuple[bool | None, str | None]:
    """Whether the IV catheter fits the flow (ACR Manual wording); arterial catheters are not checked."""
    if route is m.Route.intra_arterial:
        return None, "Arterial catheter: peripheral IV access rules do not apply"
    if route is not m.Route.intravenous or flow is None:
        return None, None
    if iv_access is None:
        return None, "No IV access given: not checked"
    chk = access_calc.check_access(iv_access.gauge, iv_access.site, flow)
    if not chk.ok:
        warnings.append(f"IV access not fit: {chk.message}")
    return chk.ok, chk.message


def gadolinium_block(agent: m.Agent, role: m.ExamRole, p: m.Patient, cite: Any) -> m.AgentDoseBlock | None:
    """Dose of a gadolinium agent for one role (intravenous or intra-articular); None for other routes."""
    strengths = sorted(c.value for c in agent.concentrations if c.unit is m.Unit.mmol_per_ml)
    prot = role.protocol
    warnings: list[str] = []
    if role.route is m.Route.intra_articular:
        dilute = [v for v in strengths if v < 0.1]
        return m.AgentDoseBlock(
            agent=agent.id, family=agent.family, concentration_mmol_ml=dilute[0] if dilute else None,
            volume_ml=None, basis="dilute intra-articular solution, injected until the joint capsule distends "
                                  "(the volume depends on the joint; common practice)",
            certainty=m.Certainty.from_memory if not dilute else next(
                c.certainty for c in agent.concentrations if c.value == dilute[0]),
            warnings=[] if dilute else [f"{agent.name} has no dilute strength in the catalogue: use the "
                                        "intra-articular formulation or the local dilution protocol"])
    if role.route is not m.Route.intravenous or agent.standard_dose_mmol_kg is None:
        return None
    conc = max(v for v in strengths if v >= 0.1)
    per_kg = prot.gadolinium_mmol_per_kg if prot and prot.gadolinium_mmol_per_kg else agent.standard_dose_mmol_kg
    from_protocol = bool(prot and prot.gadolinium_mmol_per_kg)
    if per_kg > agent.standard_dose_mmol_kg:
        warnings.append(f"{per_kg:g} mmol/kg is above the labelled standard dose of {agent.name} "
                        f"({agent.standard_dose_mmol_kg:g} mmol/kg)")
    basis = (f"{per_kg:g} mmol/kg ({'exam protocol' if from_protocol else 'labelled standard dose'}) at "
             f"{conc:g} mmol/mL = {per_kg / conc:.3g} mL/kg")
    flow = prot.flow_ml_s if prot else None
    mmol = vol = dur = None
    if p.weight_kg is None:
        warnings.append(f"Weight is needed for the volume: {per_kg:g} mmol/kg = {per_kg / conc:.3g} mL/kg")
    else:
        d = gd_calc.gadolinium_dose(p.weight_kg, per_kg, conc)
        mmol, vol = d.dose_mmol, d.volume_ml
        if flow is not None and vol >= 0.1:
            dur = gd_calc.bolus_duration(vol, flow)
    ok, msg = access_check(role.route, flow, p.iv_access, warnings)
    certainty = (prot.certainty if from_protocol else agent.dose_certainty) or m.Certainty.from_memory
    src_ref = prot.source if from_protocol and prot else agent.dose_source
    source = cite([src_ref], certainty) if src_ref is not None else (
        "common practice" if certainty is m.Certainty.common_practice else "from memory")
    return m.AgentDoseBlock(
        agent=agent.id, family=agent.family, concentration_mmol_ml=conc, dose_mmol_kg=per_kg,
        dose_mmol=None if mmol is None else round(mmol, 2), volume_ml=None if vol is None else round(vol, 1),
        volume_ml_per_kg=round(per_kg / conc, 3), basis=basis, flow_ml_s=flow,
        duration_s=None if dur is None else round(dur, 1), access_ok=ok, access_message=msg,
        certainty=certainty, source=source, warnings=warnings)


def microbubble_block(agent: m.Agent, role: m.ExamRole, p: m.Patient, cite: Any) -> m.AgentDoseBlock | None:
    """Volume of a microbubble agent for one role, from the exam protocol for that agent."""
    prot = role.protocol
    if prot is None:
        return None
    warnings: list[str] = []
    certainty = prot.certainty
    source = cite([prot.source], certainty) if prot.source else (
        "common practice" if certainty is m.Certainty.common_practice else "from memory")
    vol = per_kg = None
    if prot.for_agent is not None and prot.for_agent != agent.id:
        basis = f"the exam protocol is for {prot.for_agent}; for {agent.name} use the dose of its label"
        warnings.append(basis)
    elif prot.fixed_volume_ml is not None:
        vol, basis = prot.fixed_volume_ml, f"fixed volume of the exam protocol ({certainty.value.replace('_', ' ')})"
    elif prot.volume_ml_per_kg is not None:
        per_kg = prot.volume_ml_per_kg
        basis = f"{per_kg * 1000:g} microlitres/kg ({certainty.value.replace('_', ' ')})"
        if p.weight_kg is None:
            warnings.append(f"Weight is needed for the volume: {per_kg * 1000:g} microlitres/kg")
        else:
            vol = gd_calc.volume_by_weight(p.weight_kg, per_kg)
    else:
        basis = "no volume in the exam protocol: see the label"
    ok, msg = access_check(role.route, prot.flow_ml_s, p.iv_access, warnings)
    return m.AgentDoseBlock(
        agent=agent.id, family=agent.family, volume_ml=None if vol is None else round(vol, 2),
        volume_ml_per_kg=per_kg, basis=basis, flow_ml_s=prot.flow_ml_s, access_ok=ok, access_message=msg,
        certainty=certainty, source=source, warnings=warnings)
