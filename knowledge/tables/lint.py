"""Lint the loaded knowledge: what can never happen, what is never used, and what each exam considers.

``lint(knowledge)`` reports
- rules that can never fire: no exam role and agent lets their exam/role/agent/policy tests pass, or no
  patient makes their condition true there. The patient side is decided exactly, not sampled: every
  comparison in the condition language is against a constant, so trying each patient fact at every
  constant it is compared with (and just below and above it, and unknown) covers every case;
- sources never cited by a rule, an agent, a strength, a dose protocol, the policy or a regimen;
- agents never offered in any role of any exam (no route lets them through);
- the coverage matrix: for each exam and each patient factor, the rules that consider it there.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, field
from typing import Any

from . import models as m
from .conditions import STATIC_PREFIXES, compile_partial, facts_used
from .facts import FACTS
from .loader import Knowledge, exam_facts

#: Most patient-fact combinations tried per rule and static setting before the check gives up ("unknown").
MAX_COMBINATIONS = 200_000


@dataclass
class LintReport:
    never_fire: list[str] = field(default_factory=list)
    undecided: list[str] = field(default_factory=list)  # too many combinations to decide
    sources_never_cited: list[str] = field(default_factory=list)
    agents_never_offered: list[str] = field(default_factory=list)
    #: exam id -> patient factor -> rule ids that test it for that exam
    coverage: dict[str, dict[str, list[str]]] = field(default_factory=dict)

    @property
    def clean(self) -> bool:
        return not (self.never_fire or self.sources_never_cited or self.agents_never_offered)

    def as_dict(self) -> dict[str, Any]:
        return {"never_fire": self.never_fire, "undecided": self.undecided,
                "sources_never_cited": self.sources_never_cited, "agents_never_offered": self.agents_never_offered,
                "coverage": self.coverage}


def _is_patient_fact(name: str) -> bool:
    return not name.startswith(STATIC_PREFIXES)


def _constants(cond: m.Condition, policy: m.Policy, out: dict[str, set]) -> None:
    """Every constant each fact is compared with, policy settings resolved."""
    if isinstance(cond, m.All):
        for c in cond.all:
            _constants(c, policy, out)
    elif isinstance(cond, m.AnyOf):
        for c in cond.any:
            _constants(c, policy, out)
    elif isinstance(cond, m.Not):
        _constants(cond.not_, policy, out)
    else:
        value = cond.operand
        values = value if isinstance(value, list) else [value]
        for v in values:
            if isinstance(v, m.PolicyValue):
                v = policy.number(v.policy)
            out.setdefault(cond.fact, set()).add(v)


def _domain(name: str, constants: set) -> list[Any]:
    """Values that stand for every case of a patient fact, given the constants it is compared with."""
    spec = FACTS[name]
    if spec.kind == "bool":
        return [True, False]
    if spec.kind == "enum":
        return [*spec.values, None]
    if spec.kind == "number":
        probes: set[Any] = {None, 0.0}
        for c in constants:
            if isinstance(c, (int, float)) and not isinstance(c, bool):
                probes |= {c - 0.5, float(c), c + 0.5}
        return sorted(probes, key=lambda x: (x is not None, x or 0))
    return [None, *sorted(str(c) for c in constants if c is not None)]


def _can_fire(cr, statics: list[dict[str, Any]], policy: m.Policy) -> bool | None:
    """True if some patient makes the rule fire for one of ``statics``; None when too many to try."""
    used = facts_used(cr.rule.when)
    patient = sorted(f for f in used if _is_patient_fact(f))
    consts: dict[str, set] = {}
    _constants(cr.rule.when, policy, consts)
    domains = [_domain(f, consts.get(f, set())) for f in patient]
    size = 1
    for d in domains:
        size *= len(d)
    seen: set = set()
    for static in statics:
        key = tuple(sorted((k, repr(v)) for k, v in static.items() if k in used))
        if key in seen:
            continue
        seen.add(key)
        if size > MAX_COMBINATIONS:
            return None
        for combo in itertools.product(*domains):
            if cr.test({**static, **dict(zip(patient, combo))}):
                return True
    return False


def _cited(k: Knowledge) -> set[str]:
    refs: list[m.SourceRef] = []
    for r in k.tables.rules:
        refs += r.sources
    for a in k.tables.agents:
        refs += a.sources
        refs += [c.source for c in a.concentrations if c.source]
    for e in k.tables.exams:
        refs += [role.protocol.source for role in e.roles if role.protocol and role.protocol.source]
    refs += k.policy.based_on
    refs += [reg.source for reg in k.policy.regimens]
    return {ref.source for ref in refs}


def lint(k: Knowledge) -> LintReport:
    report = LintReport()
    # where each agent rule is a candidate: (exam id, static facts)
    where: dict[str, list[tuple[str, dict[str, Any]]]] = {cr.rule.id: [] for cr in k.agent_rules}
    offered: set[str] = set()
    for (exam_id, _), rows in k.candidates.items():
        for agent, static, rules in rows:
            offered.add(agent.id)
            for cr in rules:
                where[cr.rule.id].append((exam_id, static))
    case_where: dict[str, list[tuple[str, dict[str, Any]]]] = {}
    for cr in k.case_rules:
        partial = compile_partial(cr.rule.when, k.policy)
        case_where[cr.rule.id] = [(e.id, exam_facts(e, k.policy)) for e in k.tables.exams
                                  if partial(exam_facts(e, k.policy)) is not False]

    for cr in [*k.agent_rules, *k.case_rules]:
        places = (where if cr.rule.scope is m.Scope.agent else case_where)[cr.rule.id]
        fires = _can_fire(cr, [s for _, s in places], k.policy) if places else False
        if fires is False:
            report.never_fire.append(cr.rule.id)
        elif fires is None:
            report.undecided.append(cr.rule.id)
        if fires is False:
            continue
        patient = sorted(f for f in facts_used(cr.rule.when) if _is_patient_fact(f))
        for exam_id in sorted({e for e, _ in places}):
            row = report.coverage.setdefault(exam_id, {})
            for fact in patient:
                row.setdefault(fact, [])
                if cr.rule.id not in row[fact]:
                    row[fact].append(cr.rule.id)
    for e in k.tables.exams:
        report.coverage.setdefault(e.id, {})
    report.coverage = {e.id: dict(sorted(report.coverage[e.id].items())) for e in k.tables.exams}
    cited = _cited(k)
    report.sources_never_cited = [s.id for s in k.tables.sources if s.id not in cited]
    report.agents_never_offered = [a.id for a in k.tables.agents if a.id not in offered]
    return report


def patient_factors() -> list[str]:
    """Every patient-side fact a rule may test (the columns of the coverage matrix)."""
    return [name for name in FACTS if _is_patient_fact(name)]
