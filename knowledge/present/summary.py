"""The plan at a glance: the summary shown on top of the decision, what changed since the last decision,
the protocol order of the options, and times written for people. Pure functions (no widgets, no clock).

- :func:`plan_summary` -- the chosen agent per role with strength, volume and rate, the verdict in words,
  the alerts and the actions with their clock times; "nothing can be given" first when that is so.
- :func:`decision_changes` -- "thin barium sulfate suspension: suitable → contraindicated", "oral agent
  chosen: … → …": what differs between two decisions.
- :func:`split_options` -- the options a role's exam uses (clinical verdicts) and the "other agents
  possible by this route", whose verdict is the clinical one, without the "not usual here" rule.
- :func:`human_duration`, :func:`human_ago` -- "12 h 46 min", "2 years ago".
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from typing import Any

from ..tables import models as m

#: the rule that marks an agent as merely not one this exam uses for the role (knowledge/data/rules.yaml)
NOT_USUAL_RULE = "not-usual-for-role"


# --------------------------------------------------------------------------------------------------
# times for people
# --------------------------------------------------------------------------------------------------
def human_duration(hours: float) -> str:
    """12.766 -> '12 h 46 min'; 0.5 -> '30 min'; 48 -> '2 days'; 50 -> '2 days 2 h'."""
    minutes = int(round(abs(hours) * 60))
    if minutes < 60:
        return f"{minutes} min"
    h, mins = divmod(minutes, 60)
    if h >= 48 and mins == 0:
        d, h = divmod(h, 24)
        return f"{d} days" + (f" {h} h" if h else "")
    return f"{h} h" + (f" {mins} min" if mins else "")


def human_ago(days: float) -> str:
    """Age of a measurement: 0 -> 'today', 1 -> 'yesterday', 9 -> '9 days ago', 800 -> '2 years ago'."""
    d = int(abs(days) // 1)
    if d == 0:
        return "today"
    if d == 1:
        return "yesterday"
    if d < 14:
        return f"{d} days ago"
    if d < 61:
        return f"{d // 7} weeks ago"
    if d < 730:
        return f"{d // 30} months ago"
    return f"{d // 365} years ago"


def clock(at: dt.datetime | None, ref: dt.datetime | None = None) -> str:
    """'08:00' on the day of ``ref`` (the exam), '20:00 the day before', else 'Fri 04 Dec 09:00'."""
    if at is None:
        return ""
    if ref is not None and at.date() == ref.date():
        return at.strftime("%H:%M")
    if ref is not None and at.date() == ref.date() - dt.timedelta(days=1):
        return at.strftime("%H:%M the day before")
    return at.strftime("%a %d %b %H:%M")


# --------------------------------------------------------------------------------------------------
# options: the ones the exam uses, and the others possible by the route
# --------------------------------------------------------------------------------------------------
def clinical_verdict(opt: m.Option) -> m.Verdict:
    """The option's verdict from its clinical reasons only (without the 'not usual for this role' rule)."""
    verdict = m.Verdict.suitable
    for r in opt.reasons:
        if r.rule != NOT_USUAL_RULE and r.verdict is not None and r.verdict.severity > verdict.severity:
            verdict = r.verdict
    return verdict


def is_other(opt: m.Option) -> bool:
    """True when the option is only possible by the route, not an agent the exam uses for the role."""
    return any(r.rule == NOT_USUAL_RULE for r in opt.reasons)


def split_options(role: m.RoleDecision) -> tuple[list[m.Option], list[m.Option]]:
    """(the options the exam uses for this role, the other agents possible by this route)."""
    usual = [o for o in role.options if not is_other(o) or o.chosen]
    other = [o for o in role.options if is_other(o) and not o.chosen]
    return usual, other


# --------------------------------------------------------------------------------------------------
# the summary
# --------------------------------------------------------------------------------------------------
def verdict_words(verdict: m.Verdict) -> str:
    return verdict.value.replace("_", " ")


def route_words(route: m.Route) -> str:
    return route.value.replace("_", "-")


@dataclass
class Summary:
    """The plan at a glance. ``first`` is said before anything else (e.g. nothing can be given)."""

    exam: str
    first: list[str] = field(default_factory=list)
    agents: list[str] = field(default_factory=list)
    alerts: list[tuple[str, str]] = field(default_factory=list)  # (level: stop | warn, text)
    actions: list[str] = field(default_factory=list)
    as_of: str = ""

    def lines(self) -> list[str]:
        out = [f"Plan: {self.exam}"] + self.first + self.agents
        out += [f"{'STOP' if level == 'stop' else 'Warning'}: {text}" for level, text in self.alerts]
        out += self.actions
        if self.as_of:
            out.append(self.as_of)
        return out

    def text(self) -> str:
        return "\n".join(self.lines())


def dose_words(dose: Any) -> str:
    """'300 mg I/mL, 113 mL at 3 mL/s' from a role's dose block, '7 mmol, 7 mL at 2 mL/s' from a gadolinium
    or microbubble dose block ('' without one)."""
    if dose is None:
        return ""
    if not hasattr(dose, "concentration_mg_i_ml"):  # AgentDoseBlock (MRI, ultrasound)
        parts = [f"{dose.dose_mmol:g} mmol"] if getattr(dose, "dose_mmol", None) is not None else []
        if getattr(dose, "volume_ml", None) is not None:
            parts.append(f"{dose.volume_ml:g} mL" + (f" at {dose.flow_ml_s:g} mL/s" if dose.flow_ml_s else ""))
        return ", ".join(parts)
    parts = [f"{dose.concentration_mg_i_ml:g} mg I/mL"]
    if isinstance(dose.volume_ml, (int, float)):
        parts.append(f"{dose.volume_ml:.0f} mL" + (f" at {dose.flow_ml_s:g} mL/s"
                                                    if isinstance(dose.flow_ml_s, (int, float)) else ""))
    return ", ".join(parts)


def _agent_line(role: m.RoleDecision) -> tuple[str, bool]:
    """'Intravenous: iopamidol 300 mg I/mL, 113 mL at 3 mL/s (suitable with precautions)'; False when no
    agent can be given for the role."""
    chosen = next((o for o in role.options if o.chosen), None)
    head = route_words(role.route).capitalize() + ("" if role.required else " (optional)")
    if chosen is None or chosen.verdict.severity >= m.Verdict.not_advised.severity:
        usable = [o.name for o in role.options if o.verdict.severity <= 1 and not is_other(o)]
        if usable:  # none planned (e.g. the requested agent is contraindicated), but others could be
            return f"{head}: no agent planned (usable: {', '.join(usable[:3])})", True
        return f"{head}: no agent planned - every agent is advised against or contraindicated here", False
    dose = dose_words(getattr(role, "dose", None) or getattr(role, "agent_dose", None))
    return f"{head}: {chosen.name}" + (f" {dose}" if dose else "") + f" ({verdict_words(chosen.verdict)})", True


def alerts_of(decision: m.Decision) -> list[tuple[str, str]]:
    """(level, text) of the decision's alerts (``Decision.alerts`` when the engine gives them)."""
    out = []
    for a in getattr(decision, "alerts", None) or []:
        level = getattr(a, "level", None) or (a.get("level") if isinstance(a, dict) else "warn")
        text = getattr(a, "text", None) or (a.get("text") if isinstance(a, dict) else str(a))
        out.append((str(getattr(level, "value", level)), str(text)))
    return out


def action_lines(decision: m.Decision, scheduled_at: dt.datetime | None = None) -> list[str]:
    """Hydration, premedication, metformin and creatinine in words with clock times."""
    out: list[str] = []
    r = decision.renal
    plan = r.hydration_plan
    if r.hydration_indicated:
        if plan is not None and plan.start_at and plan.stop_at:
            out.append(f"Hydration: {plan.fluid} {plan.rate_ml_h:g} mL/h from {clock(plan.start_at, scheduled_at)} "
                       f"to {clock(plan.stop_at, scheduled_at)} ({plan.total_ml:g} mL)")
        elif plan is not None:
            out.append(f"Hydration: {plan.fluid} {plan.rate_ml_h:g} mL/h, {plan.volume_before_ml:g} mL before and "
                       f"{plan.volume_after_ml:g} mL after the contrast")
        else:
            out.append(f"Hydration: {r.hydration_regimen or 'indicated'}")
        out += [f"Hydration: {w}" for w in (plan.warnings if plan is not None else [])]
    pre = decision.premedication
    if pre.indicated:
        if pre.schedule and all(s.at is not None for s in pre.schedule):
            times: dict[str, list[str]] = {}
            for s in pre.schedule:
                key = f"{s.drug} {s.dose}" + (" (optional)" if s.optional else "")
                times.setdefault(key, []).append(clock(s.at, scheduled_at))
            out.append("Premedication: " + "; ".join(f"{k} at {', '.join(v)}" for k, v in times.items()))
        else:
            out.append(f"Premedication: {pre.regimen_name or pre.regimen or 'indicated'}"
                       + (" (enter the exam time for clock times)" if scheduled_at is None else ""))
        out += [f"Premedication: {w}" for w in pre.warnings]
    elif any(o.chosen and o.family is m.Family.iodinated and role.route in m.INTRAVASCULAR
             for role in decision.roles for o in role.options):
        out.append("Premedication: none needed")
    met = decision.metformin
    if met.hold:
        until = f" until kidney function is re-checked ({clock(met.recheck_at, scheduled_at)})" if met.recheck_at else \
            " until kidney function is re-checked"
        start = f" from {clock(met.hold_from, scheduled_at)}" if met.hold_from else " from the contrast"
        out.append(f"Metformin: hold{start}{until}")
    elif met.takes_metformin:
        out.append("Metformin: continue")
    out += [f"Kidney: {w}" for w in r.warnings]
    return out


def plan_summary(decision: m.Decision, scheduled_at: dt.datetime | None = None) -> Summary:
    """The plan at a glance (see the module docstring)."""
    urgency = getattr(decision, "urgency", None)
    urgent = urgency is not None and getattr(urgency, "value", urgency) != "elective"
    s = Summary(exam=decision.exam_name + (f" ({getattr(urgency, 'value', urgency)})" if urgent else ""))
    reason = getattr(decision, "cannot_proceed_reason", None)
    if reason:
        s.first.append(f"The exam as requested cannot be done with contrast: {reason}")
    if decision.contrast is m.ContrastUse.none:
        s.first.append("No contrast is used for this exam.")
    blocked = []
    for role in decision.roles:
        line, ok = _agent_line(role)
        s.agents.append(line)
        if not ok:
            blocked.append(role)
    if blocked and len(blocked) == len(decision.roles):
        s.first.append("Nothing can be given: no agent is usable for any role of this exam for this patient.")
    elif any(r.required for r in blocked):
        s.first.append("Nothing can be given for a required role: "
                       + "; ".join(route_words(r.route) for r in blocked if r.required) + ".")
    s.alerts = alerts_of(decision)
    s.actions = action_lines(decision, scheduled_at)
    if decision.as_of is not None:
        s.as_of = f"Times as of {decision.as_of.strftime('%a %d %b %Y %H:%M')}"
    return s


# --------------------------------------------------------------------------------------------------
# what changed
# --------------------------------------------------------------------------------------------------
def decision_changes(old: m.Decision | None, new: m.Decision) -> list[str]:
    """What differs from ``old`` to ``new``: the chosen agents, verdicts, actions and alerts, in words."""
    if old is None:
        return []
    if old.exam != new.exam:
        return [f"exam: {old.exam_name} → {new.exam_name}"]
    out: list[str] = []
    for ro, rn in zip(old.roles, new.roles):
        where = route_words(rn.route)
        co = next((o for o in ro.options if o.chosen), None)
        cn = next((o for o in rn.options if o.chosen), None)
        if co and cn and co.agent != cn.agent:
            out.append(f"{where} agent chosen: {co.name} → {cn.name}")
        before = {o.agent: o for o in ro.options}
        for o in rn.options:
            b = before.get(o.agent)
            if b is not None and b.verdict is not o.verdict and not (is_other(o) and is_other(b)):
                out.append(f"{o.name} ({where}): {verdict_words(b.verdict)} → {verdict_words(o.verdict)}")
        if co and cn and co.agent == cn.agent:  # the same agent, for other reasons
            rules_before = {x.rule for x in co.reasons}
            rules_after = {x.rule for x in cn.reasons}
            out += [f"{cn.name}: new reason: {x.text}" for x in cn.reasons if x.rule not in rules_before]
            out += [f"{cn.name}: no longer: {x.text}" for x in co.reasons if x.rule not in rules_after]
        do = dose_words(getattr(ro, "dose", None) or getattr(ro, "agent_dose", None))
        dn = dose_words(getattr(rn, "dose", None) or getattr(rn, "agent_dose", None))
        if do != dn and (do or dn):
            out.append(f"{where} dose: {do or 'none'} → {dn or 'none'}")
    so, sn = plan_summary(old, None), plan_summary(new, None)
    for label, a, b in (("alert", so.alerts, sn.alerts), ("action", so.actions, sn.actions)):
        gone = [x for x in a if x not in b]
        came = [x for x in b if x not in a]
        out += [f"new {label}: {x[1] if isinstance(x, tuple) else x}" for x in came]
        out += [f"no longer: {x[1] if isinstance(x, tuple) else x}" for x in gone]
    out += [f"new caution: {c}" for c in new.cautions if c not in old.cautions]
    out += [f"no longer: {c}" for c in old.cautions if c not in new.cautions]
    ro_, rn_ = old.renal, new.renal
    if ro_.egfr != rn_.egfr:
        out.append(f"eGFR: {_num(ro_.egfr)} → {_num(rn_.egfr)}")
    return out


def _num(x: float | None) -> str:
    return "unknown" if x is None else f"{x:g}"


def protocol_order_words(opt: m.Option) -> str:
    """'protocol order 2' as shown on an option card (the engine's rank: verdict, then the exam's order)."""
    return f"protocol order {opt.rank}"


__all__ = ["Summary", "plan_summary", "decision_changes", "split_options", "clinical_verdict", "is_other",
           "human_duration", "human_ago", "clock", "action_lines", "dose_words", "alerts_of", "NOT_USUAL_RULE"]
