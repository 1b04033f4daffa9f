"""The rule engine: ``decide(case, knowledge) -> Decision``, pure and deterministic.

For each role of the exam every catalogue agent that could physically be given by the role's route
(``routes.yaml``) is tested against every agent-scope rule. An agent's verdict is the most restrictive
verdict its fired rules give (``suitable`` when none gives one); options are ranked by verdict, then by
the exam's order of preference. The chosen option of a role (the requested agent, else the top-ranked)
raises the decision-level flags of its rules: hydration, premedication, metformin, reaction readiness.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass, field
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


@dataclass
class _Raised:
    """What the options in the plan raise for the whole decision (flags, cautions)."""

    flags: set = field(default_factory=set)
    cautions: list = field(default_factory=lambda: [DECISION_SUPPORT])
    systemic_iodinated: bool = False

    def caution(self, text: str) -> None:
        if text not in self.cautions:
            self.cautions.append(text)


@dataclass(frozen=True)
class _Scored:
    order: tuple
    agent: m.Agent
    verdict: m.Verdict
    reasons: list
    actions: list
    flags: set
    lifted: list


def decide(case: Any, knowledge: Knowledge) -> m.Decision:
    """Decide the contrast options for ``case`` (a dict or :class:`Case`). Raises ContrastAidError.

    The pipeline: check references → kidney → facts → score each role → raise flags → case rules →
    assemble → plans (``knowledge.decision.plans``). Each stage is a function below.
    """
    k = knowledge
    case = parse_case(case)
    exam = check_references(case, k)
    kidney_function = kidney_stage(case.patient)
    base = case_facts(case, kidney_function[0], kidney_function[2])
    raised = _Raised()
    roles = [score_role(case, k, exam, index, role, base, raised) for index, role in enumerate(exam.roles)]
    apply_case_rules(k, exam, base, raised)
    decision = assemble(case, k, exam, roles, kidney_function, raised)
    return add_plans(case, k, decision)


def check_references(case: m.Case, k: Knowledge) -> m.Exam:
    """The exam, the requested agent and every culprit agent must exist and fit; returns the exam."""
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
        where = f"patient.prior_reactions[{i}].agent"
        if r.agent is not None and r.agent not in k.agents:
            raise CaseError(f"{where}: {r.agent!r} is not a known agent; allowed: the ids of `contrast-aid agents`",
                            field=where)
        if r.agent is not None and k.agents[r.agent].family is not r.agent_family:
            raise CaseError(f"{where}: {r.agent} is {k.agents[r.agent].family.value}, not "
                            f"{r.agent_family.value}; allowed: an agent of the family given", field=where)
    return exam


def kidney_stage(patient: m.Patient) -> tuple[float | None, str | None, str | None, str | None]:
    """eGFR, equation, KDIGO category and note (:func:`renal_block`), errors named by the case field."""
    try:
        return renal_block(patient)
    except ContrastAidError as exc:
        raise CaseError(f"patient.{exc.message}", field=f"patient.{exc.field}") from None


def score_agent(k: Knowledge, agent: m.Agent, facts: dict[str, Any], rules: list, pref: dict) -> _Scored:
    """Test every candidate rule for one agent: its verdict (most restrictive wins), reasons, actions, flags."""
    reasons, actions, flags, lifted = [], [], set(), []
    verdict = m.Verdict.suitable
    for cr in rules:
        if not cr.test(facts):
            continue
        eff = cr.rule.effect
        if eff.verdict is not None and eff.verdict.severity > verdict.severity:
            verdict = eff.verdict
        reasons.append(m.Reason.model_construct(rule=cr.rule.id, text=cr.text, verdict=eff.verdict,
                                                source=cr.source_text, certainty=cr.rule.certainty))
        actions.extend(a for a in cr.actions if a not in actions)
        flags.update(eff.flags)
        if eff.caution:
            lifted.append(cr.text)
    order = (verdict.severity, pref.get(agent.id, len(pref)))
    return _Scored(order, agent, verdict, reasons, actions, flags, lifted)


def score_role(case: m.Case, k: Knowledge, exam: m.Exam, index: int, role: m.ExamRole,
               base: dict[str, Any], raised: _Raised) -> m.RoleDecision:
    """Score and rank every agent the role's route allows; the options in the plan raise their flags."""
    pref = {aid: i for i, aid in enumerate(role.agents)}
    reactions = case.patient.prior_reactions
    scored = []
    for agent, static, candidate_rules in k.candidates[(exam.id, index)]:
        facts = {**base, **static}
        if reactions:
            facts.update(_history_facts(reactions, agent))
        scored.append(score_agent(k, agent, facts, candidate_rules, pref))
    scored.sort(key=lambda s: s.order)
    chosen_id = case.agent if case.agent in {s.agent.id for s in scored} else scored[0].agent.id
    options = []
    for rank, s in enumerate(scored, start=1):
        chosen = s.agent.id == chosen_id
        # With no agent requested, every usual agent still open to the radiologist (suitable, with or
        # without precautions) raises its flags too, so choosing carbon dioxide first never hides the
        # hydration an iodinated alternative would need. A requested agent raises only its own.
        if chosen or (case.agent is None and s.agent.id in pref
                      and s.verdict.severity <= m.Verdict.suitable_with_precautions.severity):
            raise_flags(raised, s, role)
        a = s.agent
        options.append(m.Option.model_construct(
            agent=a.id, name=a.name, agent_class=a.agent_class, family=a.family,
            osmolality_class=a.osmolality_class, verdict=s.verdict, rank=rank, chosen=chosen,
            reasons=s.reasons, actions=s.actions))
    return m.RoleDecision(route=role.route, purpose=role.purpose, required=role.required, options=options)


def raise_flags(raised: _Raised, s: _Scored, role: m.ExamRole) -> None:
    """An option in the plan raises its rules' flags and cautions for the whole decision."""
    raised.flags |= s.flags
    raised.systemic_iodinated |= s.agent.family is m.Family.iodinated and role.route in _SYSTEMIC
    for text in s.lifted:
        raised.caution(text)


def apply_case_rules(k: Knowledge, exam: m.Exam, base: dict[str, Any], raised: _Raised) -> None:
    """Case-scope rules add cautions and flags once per decision; readiness closes the list."""
    case_level = {**base, **exam_facts(exam, k.policy)}
    for cr in k.case_rules:
        if cr.test(case_level):
            raised.caution(cr.text)
            raised.flags.update(cr.rule.effect.flags)
    if m.Flag.reaction_readiness in raised.flags or raised.systemic_iodinated:
        raised.cautions.append(READINESS)


def assemble(case: m.Case, k: Knowledge, exam: m.Exam, roles: list[m.RoleDecision],
             kidney_function: tuple, raised: _Raised) -> m.Decision:
    """The decision before plans: roles, the renal, premedication and metformin blocks, cautions."""
    egfr, equation, category, note = kidney_function
    pol = k.policy
    hydrate = m.Flag.hydration_indicated in raised.flags
    premed = m.Flag.premedication_indicated in raised.flags
    takes = case.patient.takes_metformin
    hold = m.Flag.metformin_hold in raised.flags and takes
    advice = None
    if takes:
        advice = ("Withhold metformin from the time of contrast for 48 h; restart only after kidney function "
                  "is re-checked" if hold else "Continue metformin")
    return m.Decision(
        exam=exam.id, exam_name=exam.name, contrast_needed=any(r.required for r in exam.roles),
        contrast=exam.contrast, roles=roles,
        renal=m.RenalBlock(egfr=round(egfr, 1) if egfr is not None else None, equation=equation,
                           category=category, hydration_indicated=hydrate,
                           hydration_regimen=pol.hydration_regimen if hydrate else None, note=note),
        premedication=m.PremedicationBlock(indicated=premed, regimen=pol.premedication_regimen if premed else None),
        metformin=m.MetforminBlock(hold=hold, takes_metformin=takes, advice=advice),
        cautions=raised.cautions, policy=pol.id, knowledge_version=k.version, as_of=case.as_of)
