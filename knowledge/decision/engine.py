"""The rule engine: ``decide(case, knowledge) -> Decision``, pure and deterministic.

For each role of the exam every catalogue agent that could physically be given by the role's route
(``routes.yaml``) is tested against every agent-scope rule. An agent's verdict is the most restrictive
verdict its fired rules give (``suitable`` when none gives one); options are ranked by verdict, then by
the exam's order of preference. The chosen option of a role (the requested agent, else the top-ranked)
raises the decision-level flags of its rules: hydration, premedication, metformin, reaction readiness.
"""

from __future__ import annotations

import datetime as dt
import json
from dataclasses import dataclass, field
from enum import Enum
from typing import Any

from pydantic import BaseModel, ValidationError

from ..tables import models as m
from ..calculators import kidney
from ..errors import NO_VALUE, CaseError, ContrastAidError, suggest
from ..tables.constants import METFORMIN_HOLD_HOURS, SEVERITY_ORDER, SEVERITY_RANK
from ..tables.loader import Knowledge, exam_facts
from .plans import add_plans
from ..tables.validation import error_from
from . import department

DECISION_SUPPORT = (
    "Decision support only: the supervising radiologist, local policy and licensed practice decide."
)
READINESS = (
    "Wherever iodinated or gadolinium contrast is given, trained staff, a reaction kit and epinephrine must be "
    "at hand (common practice)."
)
_SYSTEMIC = m.INTRAVASCULAR | {m.Route.intrathecal}
#: An exam may be planned at most this many years after the case's "now" (the plans work in hours).
MAX_YEARS_AHEAD = 5
_SEVERITY = SEVERITY_RANK
_SEVERITY_NAME = dict(enumerate(SEVERITY_ORDER))


def _json_default(value: Any) -> Any:
    if isinstance(value, (dt.date, dt.datetime)):
        return value.isoformat()
    if isinstance(value, Enum):
        return value.value
    if isinstance(value, BaseModel):
        return value.model_dump(mode="json", exclude_unset=True)
    raise TypeError(type(value).__name__)
#: families whose systemic use always shows the readiness caution (gadolinium: issue 13, ACR Manual)
_READINESS_FAMILIES = (m.Family.iodinated, m.Family.oil, m.Family.gadolinium)


def parse_case(data: Any) -> m.Case:
    """Validate a case exactly as written (JSON types, strictly), or return a Case unchanged.

    ``"age_years": true``, ``"71"``, ``"yes"`` or an epoch number for a date are refused, never coerced;
    date-times are local without offset. Only the dashboard form parses strings: see
    :func:`parse_form_case`. Raises :class:`CaseError` naming the field."""
    if isinstance(data, m.Case):
        return data
    _must_be_object(data)
    try:
        text = json.dumps(data, default=_json_default, allow_nan=False)
    except (TypeError, ValueError, RecursionError) as exc:
        raise CaseError(field="case", value=NO_VALUE, problem=f"holds a value that is not JSON ({exc})"[:120],
                        allowed="JSON numbers, strings, true/false, null, lists and objects") from None
    try:
        case = m.Case.model_validate_json(text, strict=True)
    except ValidationError as exc:
        raise error_from(exc, m.Case, CaseError) from None
    check_case_times(case)
    return case


def _must_be_object(data: Any) -> None:
    if not isinstance(data, dict):
        raise CaseError(f"case: must be a JSON object with 'exam' and 'patient'; got {type(data).__name__}",
                        field="case", value=data, allowed="an object with 'exam' and 'patient'")


def parse_form_case(data: Any) -> m.Case:
    """Validate a case from the dashboard form or a shared link: like :func:`parse_case`, but the values
    may be strings as typed ("71", "2026-12-02 09:00"), which pydantic's lax mode converts."""
    if isinstance(data, m.Case):
        return data
    _must_be_object(data)
    try:
        case = m.Case.model_validate(data)
    except ValidationError as exc:
        raise error_from(exc, m.Case, CaseError) from None
    check_case_times(case)
    return case


def case_time_problems(case: m.Case) -> list[CaseError]:
    """Date-times that contradict the case's own "now" (``as_of``; the core never reads a clock): an exam
    already past, an exam more than MAX_YEARS_AHEAD years ahead, a creatinine taken after "now"."""
    out: list[CaseError] = []
    now, when = case.as_of, case.scheduled_at
    if now is None:
        return out
    if when is not None and when < now:
        out.append(CaseError(field="scheduled_at", value=when.isoformat(), problem="is before as_of "
                             f"{now.isoformat()} (the exam is already past)", allowed="a time at or after as_of"))
    elif when is not None and when > now + dt.timedelta(days=366 * MAX_YEARS_AHEAD):
        out.append(CaseError(field="scheduled_at", value=when.isoformat(), problem="is too far ahead",
                             allowed=f"at most {MAX_YEARS_AHEAD} years after as_of {now.isoformat()}"))
    cr = case.patient.creatinine
    if cr is not None and cr.measured_on is not None:
        taken = cr.measured_on if isinstance(cr.measured_on, dt.datetime) else \
            dt.datetime.combine(cr.measured_on, dt.time())
        if taken > now:
            out.append(CaseError(field="patient.creatinine.measured_on", value=cr.measured_on.isoformat(),
                                 problem=f"is after as_of {now.isoformat()}", allowed="a date at or before as_of"))
    return out


def check_case_times(case: m.Case) -> None:
    problems = case_time_problems(case)
    if problems:
        raise problems[0]


def renal_block(patient: m.Patient) -> tuple[float | None, str | None, str | None, str | None]:
    """eGFR, equation, KDIGO category and a note, from the patient's data."""
    if patient.egfr is not None:
        egfr = round(float(patient.egfr), 1)
        return egfr, "entered", kidney.kdigo_category(egfr), "eGFR as entered"
    egfr, equation, _, note = computed_egfr(patient)
    if egfr is None:
        return None, None, None, note
    return egfr, equation, kidney.kdigo_category(egfr), note


def computed_egfr(patient: m.Patient) -> tuple[float | None, str | None, str | None, str | None]:
    """eGFR from the creatinine (whatever eGFR was entered), rounded to the one decimal shown, so the KDIGO
    band and every threshold rule classify the value the user sees (29.97 is 30.0, G3b, not "below 30")."""
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
            egfr = round(kidney.egfr_ckd_epi_2021_cystatin(scr, patient.cystatin_c_mg_l, age, patient.sex), 1)
            return egfr, "ckd_epi_2021_cystatin", kidney.kdigo_category(egfr), "CKD-EPI 2021 creatinine–cystatin C"
        egfr = round(kidney.egfr_ckd_epi_2021(scr, age, patient.sex), 1)
        return egfr, "ckd_epi_2021", kidney.kdigo_category(egfr), "CKD-EPI 2021 creatinine"
    if age < kidney.CHILD_AGE_RANGE[0]:
        return None, None, None, (
            "Under 1 year: no creatinine equation is validated (bedside Schwartz was derived for ages 1-16); "
            "enter a measured GFR as the eGFR or follow local policy")
    if patient.height_cm is None:
        return None, None, None, "Height is needed for the bedside Schwartz equation (age under 18)"
    egfr = round(kidney.egfr_bedside_schwartz(patient.height_cm, scr), 1)
    return egfr, "bedside_schwartz", kidney.kdigo_category(egfr), "Bedside Schwartz (age under 18)"


def _reaction_family(family: m.Family) -> str:
    """Ethiodized oil is iodinated for reaction history: an iodinated reaction counts for it, and back."""
    return "iodinated" if family in (m.Family.iodinated, m.Family.oil) else family.value


def _worst(reactions: list[m.PriorReaction], kind: str | tuple, family: str | None = None) -> str:
    kinds = (kind,) if isinstance(kind, str) else kind
    worst = 0
    for r in reactions:
        if r.kind.value in kinds and (family is None or _reaction_family(r.agent_family) == family):
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
    facts["history.delayed_worst"] = _worst(p.prior_reactions, "delayed")
    facts["case.urgency"] = case.urgency.value
    facts.update(_NO_HISTORY)
    return facts


_NO_HISTORY = {
    "history.allergic_like_same_family": "none", "history.physiologic_same_family": "none",
    "history.delayed_same_family": "none", "history.breakthrough_same_family": False,
    "history.culprit_agent": False, "history.culprit_severity": "none", "history.culprit_allergic_severity": "none",
}


def _history_facts(reactions: list[m.PriorReaction], agent: m.Agent) -> dict[str, Any]:
    fam = _reaction_family(agent.family)
    culprit = [r for r in reactions if r.agent == agent.id]
    return {
        "history.allergic_like_same_family": _worst(reactions, "allergic_like", fam),
        "history.physiologic_same_family": _worst(reactions, "physiologic", fam),
        "history.delayed_same_family": _worst(reactions, "delayed", fam),
        "history.breakthrough_same_family": any(
            r.despite_premedication and r.kind is m.ReactionKind.allergic_like
            and _reaction_family(r.agent_family) == fam for r in reactions),
        "history.culprit_agent": bool(culprit),
        "history.culprit_severity": _worst(culprit, ("allergic_like", "physiologic", "delayed")),
        "history.culprit_allergic_severity": _worst(culprit, ("allergic_like", "delayed")),
    }


@dataclass
class _Raised:
    """What the options in the plan raise for the whole decision (flags, cautions, alerts)."""

    flags: set = field(default_factory=set)
    cautions: list = field(default_factory=lambda: [DECISION_SUPPORT])
    systemic_iodinated: bool = False
    alerts: list = field(default_factory=list)
    cannot: list = field(default_factory=list)

    def caution(self, text: str) -> None:
        if text not in self.cautions:
            self.cautions.append(text)

    def alert(self, level: str, text: str, rule: str, source: str) -> None:
        if all(a.text != text for a in self.alerts):
            self.alerts.append(m.Alert(level=level, text=text, rule=rule, source=source))


@dataclass(frozen=True)
class _Scored:
    order: tuple
    agent: m.Agent
    verdict: m.Verdict
    reasons: list
    actions: list
    flags: set
    lifted: list
    culprit: bool = False
    alerts: tuple = ()


_option = m.constructor(m.Option)  # Option.model_construct, without its per-call work (13 options a role)
#: rules whose contraindication the case's ``override_culprit`` may set aside (and nothing else may)
CULPRIT_RULES = frozenset({"reaction-culprit-agent", "reaction-culprit-agent-moderate-severe"})
_CULPRIT_SOURCE = ("Consensus of the American College of Radiology and the American Academy of Allergy, Asthma "
                   "and Immunology on patients with prior reactions, 2025; ESUR Guidelines on Contrast Agents v10")


def decide(case: Any, knowledge: Knowledge) -> m.Decision:
    """Decide the contrast options for ``case`` (a dict or :class:`Case`). Raises ContrastAidError.

    The pipeline: check references → kidney → facts → score each role → raise flags → case rules →
    assemble → plans (``knowledge.decision.plans``). Each stage is a function below.
    """
    k = knowledge
    case = parse_case(case)
    exam = check_references(case, k)
    raised = _Raised()
    kidney_function = kidney_stage(case.patient, k.policy, raised)
    base = case_facts(case, kidney_function[0], kidney_function[2])
    targets = request_targets(case, k, exam)
    roles = [score_role(case if index in targets else case.model_copy(update={"agent": None}), k, exam, index,
                        role, base, raised, requested_elsewhere=case.agent is not None and index not in targets)
             for index, role in enumerate(exam.roles)]
    apply_case_rules(k, exam, base, raised)
    decision = assemble(case, k, exam, roles, kidney_function, raised)
    return department.department_stage(case, k, add_plans(case, k, decision))


def request_targets(case: m.Case, k: Knowledge, exam: m.Exam) -> set[int]:
    """The roles a requested agent is planned in: those that list it as a usual agent, else every role whose
    route could take it (so asking for iohexol in a CT with IV and oral roles plans the IV role only)."""
    if case.agent is None:
        return set()
    usual = {i for i, r in enumerate(exam.roles) if case.agent in r.agents}
    if usual:
        return usual
    return {i for i, r in enumerate(exam.roles) if any(a.id == case.agent for a in k.compatible[r.route])}


def check_references(case: m.Case, k: Knowledge) -> m.Exam:
    """The exam, the requested agent and every culprit agent must exist and fit; returns the exam."""
    exam = k.exams.get(case.exam)
    if exam is None:
        raise CaseError(field="exam", value=case.exam, problem="is not a known exam",
                        suggestion=suggest(case.exam, k.exams), allowed="the ids of `contrast-aid exams`")
    if case.agent is not None and case.agent not in k.agents:
        raise CaseError(field="agent", value=case.agent, problem="is not a known agent",
                        suggestion=suggest(case.agent, k.agents), allowed="the ids of `contrast-aid agents`")
    if case.agent is not None:
        possible = sorted({a.id for i in range(len(exam.roles)) for a, _, _ in k.candidates[(exam.id, i)]})
        if case.agent not in possible:
            allowed = ", ".join(possible) if possible else "none (this exam uses no contrast)"
            raise CaseError(field="agent", value=case.agent, problem=f"cannot be given in any role of {exam.id}",
                            allowed=allowed)
    for i, r in enumerate(case.patient.prior_reactions):
        where = f"patient.prior_reactions[{i}].agent"
        if r.agent is not None and r.agent not in k.agents:
            raise CaseError(field=where, value=r.agent, problem="is not a known agent",
                            suggestion=suggest(r.agent, k.agents), allowed="the ids of `contrast-aid agents`")
        if r.agent is not None and _reaction_family(k.agents[r.agent].family) != _reaction_family(r.agent_family):
            raise CaseError(field=where, value=r.agent,
                            problem=f"is {k.agents[r.agent].family.value}, not {r.agent_family.value}",
                            allowed="an agent of the family given")
    return exam


def kidney_stage(patient: m.Patient, policy: m.Policy | None = None, raised: _Raised | None = None
                 ) -> tuple[float | None, str | None, str | None, str | None, float | None]:
    """eGFR, equation, KDIGO category, note and the computed eGFR when one was also entered
    (:func:`renal_block`), errors named by the case field.

    An entered eGFR that differs from the one computed from the creatinine by more than the policy's
    ``egfr_discordance_percent`` of the lower raises an alert, and the lower is used (common practice). With
    acute kidney injury no CKD G category is given (KDIGO categories describe chronic disease)."""
    try:
        egfr, equation, category, note = renal_block(patient)
        computed = None
        if patient.egfr is not None and patient.creatinine is not None:
            computed = computed_egfr(patient)[0]
    except ContrastAidError as exc:
        raise exc.at("patient") from None
    if computed is not None and policy is not None and egfr is not None:
        margin = policy.egfr_discordance_percent
        low, high = sorted((egfr, computed))
        if high - low > low * margin / 100.0:
            text = (f"The entered eGFR {egfr:g} and the eGFR {computed:g} computed from the creatinine differ by "
                    f"more than {margin:g}% of the lower: the lower ({low:g}) is used until the two are reconciled")
            if raised is not None:
                raised.alert("warn", text, "egfr-discordant", "common practice")
            note = f"lower of the entered eGFR and the creatinine estimate ({'entered' if low == egfr else 'computed'})"
            if low != egfr:
                egfr, equation = low, computed_egfr(patient)[1]
            category = kidney.kdigo_category(egfr)
    if patient.acute_kidney_injury and egfr is not None:
        category = None
        note = f"{note}; acute kidney injury: the eGFR is unreliable while creatinine changes, no CKD G category"
    return egfr, equation, category, note, computed


def score_agent(k: Knowledge, agent: m.Agent, facts: dict[str, Any], rules: list, pref: dict) -> _Scored:
    """Test every candidate rule for one agent: its verdict (most restrictive wins), reasons, actions, flags."""
    reasons, actions, flags, lifted, alerts = [], [], set(), [], []
    verdict = m.Verdict.suitable
    for cr in rules:
        if not cr.test(facts):
            continue
        eff = cr.rule.effect
        if eff.verdict is not None and eff.verdict.severity > verdict.severity:
            verdict = eff.verdict
        reasons.append(cr.reason if cr.reason is not None else m.Reason.model_construct(
            rule=cr.rule.id, text=cr.text, verdict=eff.verdict, source=cr.source_text, certainty=cr.rule.certainty))
        actions.extend(a for a in cr.actions if a not in actions)
        flags.update(eff.flags)
        if eff.caution:
            lifted.append(cr.text)
        if eff.alert:
            alerts.append((eff.alert, cr.text, cr.rule.id, cr.source_text))
    culprit = bool(facts.get("history.culprit_agent"))
    # the agent that caused an earlier reaction ranks below every other agent of the same verdict
    order = (verdict.severity, culprit, pref.get(agent.id, len(pref)))
    return _Scored(order, agent, verdict, reasons, actions, flags, lifted, culprit, tuple(alerts))


def _role_words(role: m.ExamRole) -> str:
    return f"{role.route.value.replace('_', '-')} role ({role.purpose})"


def _why(s: _Scored, level: m.Verdict) -> tuple[str, str, str]:
    """The texts, rule ids and sources of the reasons that gave ``s`` its verdict ``level``."""
    rs = [r for r in s.reasons if r.verdict is level] or s.reasons
    return ("; ".join(r.text for r in rs), ", ".join(r.rule for r in rs),
            "; ".join(dict.fromkeys(r.source for r in rs)))


def choose(case: m.Case, role: m.ExamRole, scored: list[_Scored], raised: _Raised) -> str | None:
    """The agent the plan uses for a role, or None (with the alert saying why).

    A requested agent is used unless it is ``contraindicated`` (then no agent: a stop alert), except that the
    case's explicit ``override_culprit`` lets a culprit agent be planned when only the culprit rules rule it
    out (a stop alert stays). A ``not_advised`` request is used with a warn alert. With no request, the best
    ranked agent the exam lists for the role that is neither contraindicated nor the culprit of an earlier
    reaction."""
    ids = {s.agent.id: s for s in scored}
    if case.agent in ids:
        return _choose_requested(case, role, ids[case.agent], scored, raised)
    # the default is one of the agents the exam lists for the role (never water in a gas-distension role)
    cx = m.Verdict.contraindicated
    best = next((o for o in scored if o.verdict is not cx and not o.culprit and o.agent.id in role.agents), None)
    if best is None:
        if scored:
            _no_agent_for(role, scored, raised)
        return None
    if best.verdict is m.Verdict.not_advised and case.agent is None:
        text, rules, source = _why(best, m.Verdict.not_advised)
        raised.alert("warn", f"The best available agent for the {_role_words(role)}, {best.agent.name}, is not "
                     f"advised: {text}", rules, source)
    return best.agent.id


def _choose_requested(case: m.Case, role: m.ExamRole, s: _Scored, scored: list[_Scored],
                      raised: _Raised) -> str | None:
    """A requested agent: planned unless contraindicated (stop alert; the culprit override excepted);
    a not-advised request is planned with a warn alert."""
    cx = m.Verdict.contraindicated
    if s.verdict is cx:
        blocking = {r.rule for r in s.reasons if r.verdict is cx}
        text, rules, source = _why(s, cx)
        if case.override_culprit and s.culprit and blocking <= CULPRIT_RULES:
            raised.alert("stop", f"Override in force: {s.agent.name} is planned for the {_role_words(role)} "
                         f"although {text[0].lower() + text[1:]} The override was asked for explicitly; the "
                         "supervising radiologist must confirm it, with reaction treatment ready.",
                         "override-culprit", source or _CULPRIT_SOURCE)
            return s.agent.id
        alt = next((o for o in scored if o.verdict is not cx and not o.culprit and o.agent.id in role.agents), None)
        tail = (f" The best alternative is {alt.agent.name} ({alt.verdict.value.replace('_', ' ')})."
                if alt else " No agent of this role can be used.")
        raised.alert("stop", f"{s.agent.name} was requested for the {_role_words(role)} but is contraindicated: "
                     f"{text} No dose is planned for it.{tail}", rules, source)
        return None
    if s.verdict is m.Verdict.not_advised:
        text, rules, source = _why(s, m.Verdict.not_advised)
        raised.alert("warn", f"{s.agent.name} was requested for the {_role_words(role)} but is not advised: "
                     f"{text}", rules, source)
    return s.agent.id


def _no_agent_for(role: m.ExamRole, scored: list[_Scored], raised: _Raised) -> None:
    """No agent can serve the role: a required role stops the exam as requested, an optional one warns."""
    cx = m.Verdict.contraindicated
    rs = [r for o in scored if o.agent.id in role.agents for r in o.reasons
          if r.verdict is cx] or [r for o in scored for r in o.reasons if r.verdict is cx]
    why = "; ".join(dict.fromkeys(r.text for r in rs)) or "every usable agent caused an earlier reaction"
    source = "; ".join(dict.fromkeys(r.source for r in rs)) or _CULPRIT_SOURCE
    rules = ", ".join(dict.fromkeys(r.rule for r in rs)) or "reaction-culprit-agent"
    if role.required:
        reason = f"No agent can be used for the {_role_words(role)}: {why}"
        raised.cannot.append(reason)
        raised.alert("stop", f"The exam as requested cannot be done with contrast. {reason}", rules, source)
    else:
        raised.alert("warn", f"No agent can be used for the optional {_role_words(role)}: {why}", rules, source)


def score_role(case: m.Case, k: Knowledge, exam: m.Exam, index: int, role: m.ExamRole,
               base: dict[str, Any], raised: _Raised, requested_elsewhere: bool = False) -> m.RoleDecision:
    """Score and rank every agent the role's route allows; the options in the plan raise their flags.
    ``requested_elsewhere``: an agent was requested for another role; this one raises only its chosen
    option's flags, as a requested agent does."""
    pref = {aid: i for i, aid in enumerate(role.agents)}
    reactions = case.patient.prior_reactions
    scored = []
    for agent, static, candidate_rules in k.candidates[(exam.id, index)]:
        facts = {**base, **static}
        if reactions:
            facts.update(_history_facts(reactions, agent))
        scored.append(score_agent(k, agent, facts, candidate_rules, pref))
    scored = department.rank_options(k, exam, role, scored)  # verdict, then formulary and preferred agent
    requested = case.agent in {s.agent.id for s in scored}
    chosen_id = department.stocked_choice(k, case, role, scored, choose(case, role, scored, raised))
    refused = requested and chosen_id is None
    options = []
    for rank, s in enumerate(scored, start=1):
        chosen = s.agent.id == chosen_id
        # With no agent requested (or the requested one refused), every usual agent still open to the
        # radiologist (suitable, with or without precautions) raises its flags too, so choosing carbon dioxide
        # first never hides the hydration an iodinated alternative would need. A requested agent raises only
        # its own.
        if chosen or ((case.agent is None and not requested_elsewhere or refused) and s.agent.id in pref
                      and not s.culprit
                      and s.verdict.severity <= m.Verdict.suitable_with_precautions.severity):
            raise_flags(raised, s, role)
        if chosen:
            for level, text, rule, source in s.alerts:
                raised.alert(level, text, rule, source)
        a = s.agent
        options.append(_option(
            agent=a.id, name=a.name, agent_class=a.agent_class, family=a.family,
            osmolality_class=a.osmolality_class, verdict=s.verdict, rank=rank, chosen=chosen,
            reasons=s.reasons, actions=s.actions))
    return m.RoleDecision(route=role.route, purpose=role.purpose, required=role.required, options=options)


def raise_flags(raised: _Raised, s: _Scored, role: m.ExamRole) -> None:
    """An option in the plan raises its rules' flags and cautions for the whole decision."""
    raised.flags |= s.flags
    raised.systemic_iodinated |= s.agent.family in _READINESS_FAMILIES and role.route in _SYSTEMIC
    for text in s.lifted:
        raised.caution(text)


def apply_case_rules(k: Knowledge, exam: m.Exam, base: dict[str, Any], raised: _Raised) -> None:
    """Case-scope rules add cautions, flags and alerts once per decision; readiness closes the list."""
    case_level = {**base, **exam_facts(exam, k.policy)}
    for cr in k.case_rules:
        if cr.test(case_level):
            raised.caution(cr.text)
            raised.flags.update(cr.rule.effect.flags)
            if cr.rule.effect.alert:
                raised.alert(cr.rule.effect.alert, cr.text, cr.rule.id, cr.source_text)
    if m.Flag.reaction_readiness in raised.flags or raised.systemic_iodinated:
        raised.cautions.append(READINESS)


_ACR_METFORMIN = "ACR Manual on Contrast Media, American College of Radiology, metformin"


def _metformin_advice(case: m.Case, egfr: float | None, hold: bool, iodinated_intravascular: bool,
                      raised: _Raised) -> str | None:
    """Metformin advice (ACR Manual): never "continue" while the eGFR is unknown before intravascular contrast."""
    p = case.patient
    if not p.takes_metformin:
        return None
    if p.dialysis is not m.Dialysis.none:
        return ("On dialysis: metformin is contraindicated in any case - check the medication list with the "
                "prescriber; contrast does not change it")
    if hold:
        return (f"Withhold metformin from the time of contrast for {METFORMIN_HOLD_HOURS:g} h; restart only after "
                "kidney function is re-checked")
    if iodinated_intravascular and egfr is None and not p.acute_kidney_injury:
        # also when carbon dioxide is planned: an iodinated top-up may follow
        raised.alert("warn", "Takes metformin and no eGFR is known: obtain an eGFR before intravascular iodinated "
                     "contrast - whether metformin is withheld depends on it", "metformin-egfr-unknown",
                     _ACR_METFORMIN)
        return "Obtain an eGFR first: metformin is withheld if it is below the policy level or there is AKI"
    if not iodinated_intravascular:
        return "Continue metformin (no intravascular iodinated contrast is planned)"
    return "Continue metformin"


def assemble(case: m.Case, k: Knowledge, exam: m.Exam, roles: list[m.RoleDecision],
             kidney_function: tuple, raised: _Raised) -> m.Decision:
    """The decision before plans: roles, the renal, premedication and metformin blocks, cautions, alerts."""
    egfr, equation, category, note, computed = kidney_function
    pol = k.policy
    hydrate = m.Flag.hydration_indicated in raised.flags
    premed = m.Flag.premedication_indicated in raised.flags
    takes = case.patient.takes_metformin
    iv_iodinated = any(o.chosen and o.family is m.Family.iodinated for r in roles if r.route in m.INTRAVASCULAR
                       for o in r.options)
    hold = m.Flag.metformin_hold in raised.flags and takes and case.patient.dialysis is m.Dialysis.none
    intravascular_exam = any(r.route in m.INTRAVASCULAR for r in exam.roles)
    advice = _metformin_advice(case, egfr, hold, iv_iodinated or intravascular_exam, raised)
    alerts = sorted(raised.alerts, key=lambda a: a.level != "stop")
    return m.Decision(
        exam=exam.id, exam_name=exam.name, contrast_needed=any(r.required for r in exam.roles),
        contrast=exam.contrast, roles=roles, alerts=alerts,
        cannot_proceed_reason=" ".join(raised.cannot) or None, exam_notes=exam.notes, urgency=case.urgency,
        renal=m.RenalBlock(egfr=round(egfr, 1) if egfr is not None else None, equation=equation,
                           category=category, hydration_indicated=hydrate,
                           hydration_regimen=pol.hydration_regimen if hydrate else None, note=note,
                           egfr_computed=computed),
        premedication=m.PremedicationBlock(indicated=premed, regimen=pol.premedication_regimen if premed else None),
        metformin=m.MetforminBlock(hold=hold, takes_metformin=takes, advice=advice),
        cautions=raised.cautions, policy=pol.id, knowledge_version=k.version, as_of=case.as_of)
