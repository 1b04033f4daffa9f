"""The rule engine: ``decide(case) -> Decision``, pure and deterministic.

For each role of the exam every catalogue agent that could physically be given by the role's route
(``routes.yaml``) is tested against every agent-scope rule. An agent's verdict is the most restrictive
verdict its fired rules give (``suitable`` when none gives one); options are ranked by verdict, then by
the exam's order of preference. The chosen option of a role (the requested agent, else the top-ranked)
raises the decision-level flags of its rules: hydration, premedication, metformin, reaction readiness.
"""

from __future__ import annotations

import difflib
from typing import Any

from pydantic import ValidationError

from ..tables import models as m
from ..calculators import kidney
from ..errors import CaseError, ContrastAidError
from ..tables.loader import Knowledge, exam_facts
from .plans import add_plans
from ..tables.validation import describe

DECISION_SUPPORT = (
    "Decision support only: the supervising radiologist, local policy and licensed practice decide."
)
READINESS = (
    "Wherever iodinated contrast is given, trained staff, a reaction kit and epinephrine must be at hand "
    "(common practice)."
)
_SYSTEMIC = m.INTRAVASCULAR | {m.Route.intrathecal}
_SEVERITY = {"none": 0, "mild": 1, "moderate": 2, "severe": 3}
_SEVERITY_NAME = {v: k for k, v in _SEVERITY.items()}


def parse_case(data: Any) -> m.Case:
    """Validate a case given as a dict (or return a Case unchanged). Raises :class:`CaseError`."""
    if isinstance(data, m.Case):
        return data
    if not isinstance(data, dict):
        raise CaseError(f"case: must be a JSON object with 'exam' and 'patient'; got {type(data).__name__}")
    try:
        return m.Case.model_validate(data)
    except ValidationError as exc:
        raise CaseError(describe(exc, m.Case)) from None


def renal_block(patient: m.Patient) -> tuple[float | None, str | None, str | None, str | None]:
    """eGFR, equation, KDIGO category and a note, from the patient's data."""
    if patient.egfr is not None:
        egfr = float(patient.egfr)
        return egfr, "entered", kidney.kdigo_category(egfr), "eGFR as entered"
    cr = patient.creatinine
    if cr is None:
        return None, None, None, "No creatinine or eGFR given: kidney function unknown"
    scr = kidney.creatinine_to_mg_dl(cr.value, cr.unit)
    age = patient.age_years
    if age is None:
        return None, None, None, "Age is needed to estimate eGFR from creatinine"
    if age >= 18:
        if patient.sex is None:
            return None, None, None, "Sex is needed for the CKD-EPI 2021 equation"
        if patient.cystatin_c_mg_l is not None:
            egfr = kidney.egfr_ckd_epi_2021_cystatin(scr, patient.cystatin_c_mg_l, age, patient.sex)
            return egfr, "ckd_epi_2021_cystatin", kidney.kdigo_category(egfr), "CKD-EPI 2021 creatinine–cystatin C"
        egfr = kidney.egfr_ckd_epi_2021(scr, age, patient.sex)
        return egfr, "ckd_epi_2021", kidney.kdigo_category(egfr), "CKD-EPI 2021 creatinine"
    if age < kidney.CHILD_AGE_RANGE[0]:
        return None, None, None, "The bedside Schwartz equation is for children of 1 year and older"
    if patient.height_cm is None:
        return None, None, None, "Height is needed for the bedside Schwartz equation (age under 18)"
    egfr = kidney.egfr_bedside_schwartz(patient.height_cm, scr)
    return egfr, "bedside_schwartz", kidney.kdigo_category(egfr), "Bedside Schwartz (age under 18)"


def _worst(reactions: list[m.PriorReaction], kind: str, family: str | None = None) -> str:
    worst = 0
    for r in reactions:
        if r.kind.value == kind and (family is None or r.agent_family.value == family):
            worst = max(worst, _SEVERITY[r.severity])
    return _SEVERITY_NAME[worst]


def case_facts(case: m.Case, egfr: float | None, category: str | None) -> dict[str, Any]:
    """The patient facts of a case (exam, role and agent facts are indexed at load: loader.static_facts)."""
    p = case.patient
    facts: dict[str, Any] = {}
    for name in m.Patient.model_fields:
        if name in ("creatinine", "prior_reactions", "iv_access"):
            continue
        value = getattr(p, name)
        facts[f"patient.{name}"] = value.value if hasattr(value, "value") else value
    facts["renal.egfr"] = egfr
    facts["renal.category"] = category
    facts["history.allergic_like_worst"] = _worst(p.prior_reactions, "allergic_like")
    facts["history.physiologic_worst"] = _worst(p.prior_reactions, "physiologic")
    facts["history.allergic_like_same_family"] = "none"
    facts["history.physiologic_same_family"] = "none"
    facts["history.culprit_agent"] = False
    return facts


def _history_facts(reactions: list[m.PriorReaction], agent: m.Agent) -> dict[str, Any]:
    return {
        "history.allergic_like_same_family": _worst(reactions, "allergic_like", agent.family.value),
        "history.physiologic_same_family": _worst(reactions, "physiologic", agent.family.value),
        "history.culprit_agent": any(r.agent == agent.id for r in reactions),
    }


def decide(case: Any, knowledge: Knowledge) -> m.Decision:
    """Decide the contrast options for ``case`` (a dict or :class:`Case`). Raises ContrastAidError."""
    k = knowledge
    case = parse_case(case)
    exam = k.exams.get(case.exam)
    if exam is None:
        near = difflib.get_close_matches(case.exam, list(k.exams), n=3, cutoff=0.5)
        hint = f" (did you mean {', '.join(near)}?)" if near else ""
        raise CaseError(f"exam: {case.exam!r} is not a known exam{hint}; allowed: the ids of `contrast-aid exams`",
                        field="exam")
    if case.agent is not None and case.agent not in k.agents:
        raise CaseError(f"agent: {case.agent!r} is not a known agent; allowed: the ids of `contrast-aid agents`",
                        field="agent")
    if case.agent is not None:
        possible = sorted({a.id for role in exam.roles for a in k.compatible[role.route]})
        if case.agent not in possible:
            allowed = ", ".join(possible) if possible else "none (this exam uses no contrast)"
            raise CaseError(f"agent: {case.agent!r} cannot be given in any role of {exam.id}; allowed: {allowed}",
                            field="agent")
    for i, r in enumerate(case.patient.prior_reactions):
        if r.agent is not None and r.agent not in k.agents:
            raise CaseError(
                f"patient.prior_reactions[{i}].agent: {r.agent!r} is not a known agent; allowed: the ids of `contrast-aid agents`",
                field=f"patient.prior_reactions[{i}].agent")
        if r.agent is not None and k.agents[r.agent].family is not r.agent_family:
            raise CaseError(
                f"patient.prior_reactions[{i}].agent: {r.agent} is {k.agents[r.agent].family.value}, "
                f"not {r.agent_family.value}; allowed: an agent of the family given",
                field=f"patient.prior_reactions[{i}].agent")
    try:
        egfr, equation, category, note = renal_block(case.patient)
    except ContrastAidError as exc:
        raise CaseError(f"patient.{exc.message}", field=f"patient.{exc.field}") from None

    base = case_facts(case, egfr, category)
    reactions = case.patient.prior_reactions
    flags: set[m.Flag] = set()
    cautions: list[str] = [DECISION_SUPPORT]
    roles: list[m.RoleDecision] = []
    systemic_iodinated = False

    for index, role in enumerate(exam.roles):
        pref = {aid: i for i, aid in enumerate(role.agents)}
        scored = []
        for agent, static, candidate_rules in k.candidates[(exam.id, index)]:
            facts = {**base, **static}
            if reactions:
                facts.update(_history_facts(reactions, agent))
            reasons, actions, rule_flags, lifted = [], [], set(), []
            verdict = m.Verdict.suitable
            for cr in candidate_rules:
                if not cr.test(facts):
                    continue
                rule = cr.rule
                eff = rule.effect
                if eff.verdict is not None and eff.verdict.severity > verdict.severity:
                    verdict = eff.verdict
                reasons.append(m.Reason.model_construct(rule=rule.id, text=cr.text, verdict=eff.verdict,
                                        source=cr.source_text, certainty=rule.certainty))
                for act in cr.actions:
                    if act not in actions:
                        actions.append(act)
                rule_flags.update(eff.flags)
                if eff.caution:
                    lifted.append(cr.text)
            order = (verdict.severity, pref.get(agent.id, len(pref)))
            scored.append((order, agent, verdict, reasons, actions, rule_flags, lifted))
        scored.sort(key=lambda s: s[0])
        chosen_id = case.agent if case.agent in {s[1].id for s in scored} else scored[0][1].id
        options = []
        for rank, (_, agent, verdict, reasons, actions, rule_flags, lifted) in enumerate(scored, start=1):
            chosen = agent.id == chosen_id
            # With no agent requested, every usual agent still open to the radiologist (suitable, with or
            # without precautions) raises its flags too, so choosing carbon dioxide first never hides the
            # hydration an iodinated alternative would need. A requested agent raises only its own.
            in_plan = chosen or (case.agent is None and agent.id in pref
                                 and verdict.severity <= m.Verdict.suitable_with_precautions.severity)
            if in_plan:
                flags |= rule_flags
                systemic_iodinated |= agent.family is m.Family.iodinated and role.route in _SYSTEMIC
                for text in lifted:
                    if text not in cautions:
                        cautions.append(text)
            options.append(m.Option.model_construct(
                agent=agent.id, name=agent.name, agent_class=agent.agent_class, family=agent.family,
                osmolality_class=agent.osmolality_class, verdict=verdict, rank=rank, chosen=chosen,
                reasons=reasons, actions=actions))
        roles.append(m.RoleDecision(route=role.route, purpose=role.purpose, required=role.required,
                                    options=options))

    case_level = {**base, **exam_facts(exam, k.policy)}
    for cr in k.case_rules:
        if cr.test(case_level):
            if cr.text not in cautions:
                cautions.append(cr.text)
            flags.update(cr.rule.effect.flags)
    if m.Flag.reaction_readiness in flags or systemic_iodinated:
        cautions.append(READINESS)

    pol = k.policy
    hydrate = m.Flag.hydration_indicated in flags
    premed = m.Flag.premedication_indicated in flags
    metformin_hold = m.Flag.metformin_hold in flags and case.patient.takes_metformin
    if case.patient.takes_metformin:
        advice = ("Withhold metformin from the time of contrast for 48 h; restart only after kidney function "
                  "is re-checked" if metformin_hold else "Continue metformin")
    else:
        advice = None
    decision = m.Decision(
        exam=exam.id,
        exam_name=exam.name,
        contrast_needed=any(r.required for r in exam.roles),
        contrast=exam.contrast,
        roles=roles,
        renal=m.RenalBlock(
            egfr=round(egfr, 1) if egfr is not None else None,
            equation=equation,
            category=category,
            hydration_indicated=hydrate,
            hydration_regimen=pol.hydration_regimen if hydrate else None,
            note=note,
        ),
        premedication=m.PremedicationBlock(indicated=premed, regimen=pol.premedication_regimen if premed else None),
        metformin=m.MetforminBlock(hold=metformin_hold, takes_metformin=case.patient.takes_metformin, advice=advice),
        cautions=cautions,
        policy=pol.id,
        knowledge_version=k.version,
        as_of=case.as_of,
    )
    # numbers and clock times for the precautions: dose, renal limits, premedication, metformin (plans.py)
    return add_plans(case, k, decision)
