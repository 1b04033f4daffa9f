"""What-if over kidney function: how the chosen intravascular verdict changes across eGFR 5–120.

Every other factor of the case is kept; only the kidney function is replaced by an entered eGFR. The
verdicts are piecewise constant in eGFR: they can change only where a rule compares ``renal.egfr`` with a
number (a policy setting or a literal) or where the KDIGO 2012 G category changes (Table 5 bounds). So
the sweep decides the case at each such breakpoint and once inside every interval between them (plus a
coarse 10-unit grid as a safety net for facts that depend on eGFR indirectly), and merges equal neighbours
into segments.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from ..tables import models as m
from ..calculators.kidney import KDIGO_CATEGORIES
from ..decision.engine import parse_case
from ..decision.engine import decide
from ..tables.loader import Knowledge

EGFR_FACTS = ("renal.egfr", "patient.egfr")
SWEEP_RANGE = (5.0, 120.0)


@dataclass(frozen=True)
class Segment:
    """eGFR from ``low`` to ``high`` (mL/min/1.73 m²) gives ``verdict`` for ``agent`` in the role."""

    low: float
    high: float
    verdict: m.Verdict
    agent: str
    agent_name: str
    hydration: bool

    @property
    def label(self) -> str:
        return self.verdict.value.replace("_", " ")


@dataclass(frozen=True)
class WhatIf:
    route: m.Route | None
    purpose: str
    segments: tuple[Segment, ...]
    note: str = ""


def _numbers(cond: m.Condition, policy: m.Policy) -> set[float]:
    if isinstance(cond, m.Test):
        if cond.fact in EGFR_FACTS and cond.operator in ("lt", "le", "gt", "ge", "is", "is_not"):
            value = cond.operand
            if isinstance(value, m.PolicyValue):
                value = policy.number(value.policy)
            if isinstance(value, (int, float)) and not isinstance(value, bool):
                return {float(value)}
        return set()
    children = cond.all if isinstance(cond, m.All) else cond.any if isinstance(cond, m.AnyOf) else [cond.not_]
    out: set[float] = set()
    for c in children:
        out |= _numbers(c, policy)
    return out


def breakpoints(knowledge: Knowledge, low: float = SWEEP_RANGE[0], high: float = SWEEP_RANGE[1]) -> list[float]:
    """eGFR values where a verdict may change: rule thresholds and KDIGO G-category bounds within range."""
    points: set[float] = {b for _, b in KDIGO_CATEGORIES}
    for rule in knowledge.rules.values():
        points |= _numbers(rule.when, knowledge.policy)
    return sorted(p for p in points if low < p < high)


def _probe_points(knowledge: Knowledge, low: float, high: float) -> list[float]:
    # Verdicts depend on eGFR only through the rules' comparisons and the KDIGO category, so they are
    # constant between breakpoints: probing each breakpoint and one point between neighbours is enough.
    edges = sorted({low, high} | set(breakpoints(knowledge, low, high)))
    probes = set(edges)
    for a, b in zip(edges, edges[1:]):
        probes.add(round((a + b) / 2, 3))
    return sorted(probes)


def _role_index(exam: m.Exam) -> int | None:
    for want in (m.Route.intravenous, m.Route.intra_arterial):
        for i, role in enumerate(exam.roles):
            if role.route is want:
                return i
    return None


def egfr_sweep(case: m.Case | dict[str, Any], knowledge: Knowledge,
               low: float = SWEEP_RANGE[0], high: float = SWEEP_RANGE[1]) -> WhatIf:
    """Segments of the chosen option's verdict of the exam's intravenous (else intra-arterial) role.

    Raises :class:`knowledge.errors.CaseError` for an invalid case, like ``decide``.
    """
    case = parse_case(case)
    exam = knowledge.exams.get(case.exam)
    if exam is None:
        decide(case, knowledge)  # raises the usual CaseError naming the exam
    idx = _role_index(exam)
    if idx is None:
        return WhatIf(None, "", (), note=f"{exam.name} has no intravascular contrast, so eGFR does not change the choice")
    role = exam.roles[idx]
    base_patient = case.patient.model_dump(exclude={"creatinine", "cystatin_c_mg_l", "egfr"})
    samples: list[tuple[float, m.Option, bool]] = []
    for x in _probe_points(knowledge, low, high):
        patient = m.Patient.model_validate({**base_patient, "egfr": x})
        decision = decide(case.model_copy(update={"patient": patient}), knowledge)
        opt = next((o for o in decision.roles[idx].options if o.chosen), None)
        if opt is None:  # no agent can be planned for this role (the decision's alerts say why)
            return WhatIf(role.route, role.purpose, (), note="No agent is planned for this role (see the alerts), "
                                                             "so the eGFR sweep has nothing to show")
        samples.append((x, opt, decision.renal.hydration_indicated))
    cuts = breakpoints(knowledge, low, high)
    segments: list[Segment] = []
    prev_x = low
    for x, opt, hyd in samples:
        last = segments[-1] if segments else None
        if last and last.verdict is opt.verdict and last.agent == opt.agent and last.hydration == hyd:
            segments[-1] = Segment(last.low, x, last.verdict, last.agent, last.agent_name, hyd)
        else:
            if last:
                # the change lies between prev_x and x: at the breakpoint there if any (lt/le both change at it)
                inside = [c for c in cuts if prev_x <= c <= x]
                edge = inside[0] if inside else (prev_x + x) / 2
                segments[-1] = Segment(last.low, edge, last.verdict, last.agent, last.agent_name, last.hydration)
            else:
                edge = x
            segments.append(Segment(edge, x, opt.verdict, opt.agent, opt.name, hyd))
        prev_x = x
    return WhatIf(role.route, role.purpose, tuple(segments))

def verdict_at(whatif: WhatIf, egfr: float) -> Segment | None:
    """The segment an eGFR falls in (the upper segment at a boundary), or None outside the sweep."""
    for seg in reversed(whatif.segments):
        if seg.low <= egfr <= seg.high:
            return seg
    return None


#: The policy's eGFR settings drawn on the eGFR plot: setting -> (label, the agent families it is about, the
#: renal exposures it is about; None = any intravascular role). Iodinated thresholds: ACR-NKF 2020 / ESUR v10
#: via the policy; the gadolinium one: ACR Manual (NSF) via the policy.
EGFR_LINES: tuple[tuple[str, str, frozenset, frozenset | None], ...] = (
    ("egfr_hydration_below", "hydrate (IV)", frozenset({m.Family.iodinated, m.Family.oil}), None),
    ("egfr_prophylaxis_consider_below", "consider prophylaxis", frozenset({m.Family.iodinated, m.Family.oil}), None),
    ("egfr_first_pass_hydration_below", "hydrate (first pass)", frozenset({m.Family.iodinated, m.Family.oil}),
     frozenset({m.RenalExposure.first_pass})),
    ("metformin_hold_egfr_below", "hold metformin", frozenset({m.Family.iodinated, m.Family.oil}), None),
    ("gbca_nsf_egfr_below", "gadolinium: NSF risk", frozenset({m.Family.gadolinium}), None),
)


def egfr_lines(knowledge: Knowledge, exam_id: str | None = None) -> list[tuple[float, str]]:
    """The policy's eGFR settings that concern this exam's intravascular agents, merged where they share a value:
    [(eGFR, 'hydrate (IV), hold metformin'), ...]. With no exam, the iodinated settings (the X-ray exams).

    An MRI exam gets the gadolinium line, not the iodinated ones; an exam with no first-pass arterial role
    gets no first-pass line; an ultrasound exam gets none."""
    exam = knowledge.exams.get(exam_id) if exam_id else None
    if exam is None:
        pairs = {(m.Family.iodinated, m.RenalExposure.first_pass)}
    else:
        pairs = {(knowledge.agents[a].family, r.renal_exposure) for r in exam.roles if r.route in m.INTRAVASCULAR
                 for a in r.agents if a in knowledge.agents}
    merged: dict[float, list[str]] = {}
    for setting, label, families, exposures in EGFR_LINES:
        value = getattr(knowledge.policy, setting, None)
        if value is None or not any(f in families and (exposures is None or e in exposures) for f, e in pairs):
            continue
        merged.setdefault(float(value), []).append(label)
    return [(x, ", ".join(labels)) for x, labels in sorted(merged.items())]
