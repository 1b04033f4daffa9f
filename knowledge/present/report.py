"""The protocol note, the timeline of timed actions and the knowledge tables as rows: pure functions.

``protocol_note_markdown`` / ``protocol_note_html`` summarise a decision for pasting into a request or a
report: exam, chosen agent and route, dose, precautions, actions with times, sources and knowledge
version. The case carries no patient identifiers, so neither does the note.

Blocks that the decision may gain later (``premedication.schedule``, ``metformin.hold_from`` /
``hold_until``, ``dose``) are read with ``getattr`` and used when present.
"""

from __future__ import annotations

import base64
import datetime as dt
import html
from dataclasses import dataclass
from enum import Enum
from typing import Any

from ..tables import models as m
from ..decision.engine import DECISION_SUPPORT
from ..tables.loader import Knowledge
from .form import FieldSpec, case_specs, label_of
from .summary import human_ago, human_duration, plan_summary, split_options

from ..tables.constants import METFORMIN_HOLD_HOURS  # ACR Manual on Contrast Media, metformin

VERDICT_WORDS = {v: v.value.replace("_", " ") for v in m.Verdict}
ROUTE_WORDS = {r: r.value.replace("_", "-") for r in m.Route}


def verdict_words(verdict: m.Verdict | str) -> str:
    return m.Verdict(verdict).value.replace("_", " ")


def agent_kind(agent: m.Agent) -> str:
    """'positive · iodinated · low-osmolar non-ionic' as shown on an option."""
    parts = [agent.agent_class.value, agent.family.value]
    if agent.osmolality_class is not None:
        osm = f"{agent.osmolality_class.value}-osmolar"
        if agent.ionicity is not None:
            osm += " " + agent.ionicity.value.replace("_", "-")
        parts.append(osm)
    parts += _mr_us_kind(agent)
    return " · ".join(parts)


def _mr_us_kind(agent: m.Agent) -> list[str]:
    """'macrocyclic non-ionic, ACR group II' for gadolinium agents; the MRI signal of luminal agents (issue 13)."""
    parts = []
    if agent.gbca_structure is not None:
        ion = f" {agent.ionicity.value.replace('_', '-')}" if agent.ionicity else ""
        parts.append(agent.gbca_structure.value + ion)
    if agent.gbca_group is not None:
        parts.append(f"ACR group {agent.gbca_group.value}")
    if agent.hepatobiliary is not None and agent.hepatobiliary is not m.Hepatobiliary.none:
        parts.append(f"hepatobiliary ({agent.hepatobiliary.value})")
    if agent.mri_signal is not None:
        parts.append(f"MRI {agent.mri_signal.value}")
    return parts


def _hours(h: float) -> str:
    return human_duration(h)


def _clock(at: dt.datetime | None, hours_from_contrast: float) -> str:
    if at is None:
        return ""
    t = at + dt.timedelta(hours=hours_from_contrast)
    return t.strftime(" (%a %d %b %H:%M)")


# --------------------------------------------------------------------------------------------------
# timeline
# --------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class TimelineItem:
    """One block (start < end) or moment (start == end), in hours from the contrast (0)."""

    kind: str  # "contrast", "premedication", "metformin", "hydration"
    label: str
    start_h: float
    end_h: float
    detail: str = ""


def _rel_hours(when: Any, scheduled: dt.datetime | None) -> float | None:
    if isinstance(when, (int, float)):
        return float(when)
    if isinstance(when, dt.datetime) and scheduled is not None:
        return (when - scheduled).total_seconds() / 3600.0
    return None


def timeline(decision: m.Decision, knowledge: Knowledge, scheduled_at: dt.datetime | None = None) -> list[TimelineItem]:
    """The timed actions of a decision, in hours from the contrast dose (negative = before)."""
    items = [TimelineItem("contrast", "contrast", 0.0, 0.0, "contrast given")]
    items += _premedication_items(decision, knowledge, scheduled_at)
    if decision.metformin.hold:
        items.append(_metformin_item(decision.metformin, scheduled_at))
    if decision.renal.hydration_indicated:
        items.append(_hydration_item(decision.renal, scheduled_at))
    items.sort(key=lambda i: (i.start_h, i.kind))
    return items


def _premedication_items(decision: m.Decision, knowledge: Knowledge,
                         scheduled_at: dt.datetime | None) -> list[TimelineItem]:
    """The premedication doses: the decision's laid-out schedule, else the regimen's steps."""
    pre = decision.premedication
    schedule = getattr(pre, "schedule", None)
    items: list[TimelineItem] = []
    if schedule:
        for step in schedule:
            h = getattr(step, "hours_before", None)
            rel = -float(h) if isinstance(h, (int, float)) else _rel_hours(getattr(step, "at", None), scheduled_at)
            if rel is None:
                continue
            label = " ".join(str(x) for x in (getattr(step, "drug", ""), getattr(step, "dose", "")) if x)
            items.append(TimelineItem("premedication", label or "premedication", rel, rel,
                                      str(getattr(step, "route", "") or "")))
    elif pre.indicated and pre.regimen in knowledge.regimens:
        reg = knowledge.regimens[pre.regimen]
        for step in reg.steps:
            label = f"{step.drug} {step.dose} {step.route}" + (" (optional)" if step.optional else "")
            if step.hours_before is not None:
                items.append(TimelineItem("premedication", label, -step.hours_before, -step.hours_before, reg.name))
            elif step.repeat_every_hours:
                h = reg.minimum_lead_hours
                while h > 0:
                    items.append(TimelineItem("premedication", label, -h, -h, reg.name))
                    h -= step.repeat_every_hours
    return items


def _metformin_item(met: Any, scheduled_at: dt.datetime | None) -> TimelineItem:
    """Metformin withheld from the contrast until kidney function is re-checked."""
    start = _rel_hours(getattr(met, "hold_from", None), scheduled_at)
    start = 0.0 if start is None else start
    until = _rel_hours(getattr(met, "hold_until", None), scheduled_at)
    recheck = getattr(met, "recheck_after_hours", None)
    if until is not None:
        end = until
    elif isinstance(recheck, (int, float)):
        end = start + float(recheck)
    else:
        end = start + METFORMIN_HOLD_HOURS
    return TimelineItem("metformin", "metformin withheld", start, end, met.advice or "")


def _hydration_item(renal: Any, scheduled_at: dt.datetime | None) -> TimelineItem:
    """IV hydration: from its start to its stop when the plan has clock times, else around the contrast."""
    plan = getattr(renal, "hydration_plan", None)
    start = _rel_hours(getattr(plan, "start_at", None), scheduled_at) if plan else None
    stop = _rel_hours(getattr(plan, "stop_at", None), scheduled_at) if plan else None
    if plan is not None:
        detail = (f"{plan.fluid} {plan.rate_ml_h:g} mL/h ({plan.rate_ml_kg_h:g} mL/kg/h): "
                  f"{plan.volume_before_ml:g} mL before, {plan.volume_after_ml:g} mL after, {plan.total_ml:g} mL in all")
    else:
        detail = renal.hydration_regimen or ""
    if start is not None and stop is not None and stop > start:
        return TimelineItem("hydration", "IV hydration", start, stop, detail)
    return TimelineItem("hydration", "IV hydration around the contrast", 0.0, 0.0, detail)


# --------------------------------------------------------------------------------------------------
# protocol note
# --------------------------------------------------------------------------------------------------
def dose_lines(decision: m.Decision, role_index: int, exam: m.Exam) -> list[str]:
    """The dose plan of a role in words (dose, IV access, cautions), or its exam protocol."""
    agent_dose = getattr(decision.roles[role_index], "agent_dose", None)
    if agent_dose is not None:
        return agent_dose_lines(agent_dose)
    dose = getattr(decision.roles[role_index], "dose", None)
    if dose is not None:
        fields = (("volume_ml", "{:g} mL"), ("concentration_mg_i_ml", "{:g} mg I/mL"), ("iodine_g", "{:g} g I"),
                  ("flow_ml_s", "{:g} mL/s"), ("iodine_delivery_rate_g_s", "{:.2f} g I/s"), ("duration_s", "{:.0f} s"))
        parts = [fmt.format(getattr(dose, f)) for f, fmt in fields
                 if isinstance(getattr(dose, f, None), (int, float))]
        basis = getattr(dose, "volume_basis", None)
        lines = ["Dose: " + ", ".join(parts) + (f" ({basis})" if basis else "")] if parts else []
        if getattr(dose, "hand_injection", False):
            lines.append("Injection: by hand (small cannula or line not rated for power injection)")
        if getattr(dose, "concentration_choice", None):
            lines.append(f"Strength: {dose.concentration_choice}")
        if getattr(dose, "access_message", None):
            fit = "" if getattr(dose, "access_ok", True) is not False else "NOT FIT - "
            lines.append(f"IV access: {fit}{dose.access_message}")
        lines += [f"Dose caution: {x}" for x in getattr(dose, "warnings", []) or []
                  if not x.startswith("IV access not fit")]  # said on the IV access line
        if lines:
            return lines
    role = exam.roles[role_index]
    p = role.protocol
    if p is None:
        return []
    parts = []
    if p.iodine_g_per_kg:
        parts.append(f"{p.iodine_g_per_kg:g} g I/kg")
    if p.fixed_volume_ml:
        parts.append(f"{p.fixed_volume_ml:g} mL fixed")
    parts.append(f"at most {p.max_volume_ml:g} mL")
    if p.flow_ml_s is not None:
        parts.append(f"{p.flow_ml_s:g} mL/s")
    if p.concentration_mg_i_ml:
        parts.append(f"{p.concentration_mg_i_ml:g} mg I/mL")
    return ["Exam protocol: " + ", ".join(parts) + f" ({p.certainty.value.replace('_', ' ')})"]


def agent_dose_lines(d: m.AgentDoseBlock) -> list[str]:
    """A gadolinium or microbubble dose in words: mmol and mL, rate, access, cautions (issue 13).

    >>> d = m.AgentDoseBlock(agent="gadobutrol", family=m.Family.gadolinium, concentration_mmol_ml=1.0,
    ...     dose_mmol_kg=0.1, dose_mmol=7.0, volume_ml=7.0, volume_ml_per_kg=0.1, flow_ml_s=2.0, duration_s=3.5,
    ...     basis="0.1 mmol/kg (labelled standard dose)", certainty=m.Certainty.verified)
    >>> agent_dose_lines(d)[0]
    'Dose: 7 mmol gadolinium = 7 mL of 1 mmol/mL (0.1 mmol/kg, 0.1 mL/kg), 2 mL/s, 4 s (0.1 mmol/kg (labelled standard dose); verified)'
    """
    parts = []
    if d.dose_mmol is not None:
        parts.append(f"{d.dose_mmol:g} mmol gadolinium")
    if d.volume_ml is not None:
        vol = f"{d.volume_ml:g} mL"
        if d.concentration_mmol_ml is not None:
            vol += f" of {d.concentration_mmol_ml:g} mmol/mL"
        parts.append(("= " if parts else "") + vol)
    elif d.concentration_mmol_ml is not None:
        parts.append(f"{d.concentration_mmol_ml:g} mmol/mL")
    per = [f"{d.dose_mmol_kg:g} mmol/kg" if d.dose_mmol_kg is not None else None,
           f"{d.volume_ml_per_kg:g} mL/kg" if d.volume_ml_per_kg is not None else None]
    per = [x for x in per if x]
    head = " ".join(parts) + (f" ({', '.join(per)})" if per and parts else ", ".join(per) if per else "")
    extra = [f"{d.flow_ml_s:g} mL/s" if d.flow_ml_s is not None else None,
             f"{d.duration_s:.0f} s" if d.duration_s is not None else None]
    head = ", ".join([x for x in [head.strip()] + extra if x])
    lines = [f"Dose: {head} ({d.basis}; {d.certainty.value.replace('_', ' ')})" if head else
             f"Dose: {d.basis} ({d.certainty.value.replace('_', ' ')})"]
    if d.access_message:
        lines.append(f"IV access: {'' if d.access_ok is not False else 'NOT FIT - '}{d.access_message}")
    lines += [f"Dose caution: {w}" for w in d.warnings if not w.startswith("IV access not fit")]
    return lines


def regimen_line(decision: m.Decision, knowledge: Knowledge) -> str | None:
    """The premedication regimen laid out, with its lead time and source (None if not indicated)."""
    if not decision.premedication.indicated or decision.premedication.regimen not in knowledge.regimens:
        return None
    reg = knowledge.regimens[decision.premedication.regimen]
    return (f"{reg.name} (needs at least {_hours(reg.minimum_lead_hours)}; "
            f"{knowledge.cite([reg.source], m.Certainty.verified)})")


def timed_lines(decision: m.Decision, knowledge: Knowledge, scheduled_at: dt.datetime | None = None) -> list[str]:
    """The decision-level precautions in words, with clock times where the exam time is known:
    premedication, metformin, hydration, creatinine and dose-limit warnings."""
    timed: list[str] = []
    for item in timeline(decision, knowledge, scheduled_at):
        if item.kind == "contrast":
            continue
        if item.kind == "metformin":
            timed.append(f"Metformin: withhold from the contrast{_clock(scheduled_at, item.start_h)} for "
                         f"{_hours(item.end_h - item.start_h)}; restart only after kidney function is re-checked"
                         f"{_clock(scheduled_at, item.end_h)}")
        elif item.kind == "hydration":
            timed.append(f"Hydration: {item.detail}")
        else:
            timed.append(f"{_hours(-item.start_h)} before contrast{_clock(scheduled_at, item.start_h)}: {item.label}")
    if decision.metformin.takes_metformin and not decision.metformin.hold and decision.metformin.advice:
        timed.append(f"Metformin: {decision.metformin.advice}")
    timed += [f"Premedication: {w}" for w in decision.premedication.warnings]
    timed += [f"Kidney: {w}" for w in decision.renal.warnings]
    limits = decision.renal.dose_limits
    timed += [f"Dose limits: {w}" for w in (limits.messages if limits else [])]
    return timed


ALERT_MARK = {"stop": "✖ STOP", "warn": "⚠ WARNING"}


def alert_lines(decision: m.Decision) -> list[str]:
    """The decision's alerts in words, most severe first ('✖ STOP: ...', '⚠ WARNING: ...'), with sources."""
    lines = [f"{ALERT_MARK[a.level]}: {a.text} [{a.source}]" for a in getattr(decision, "alerts", []) or []]
    reason = getattr(decision, "cannot_proceed_reason", None)
    if reason and not lines:
        lines.append(f"{ALERT_MARK['stop']}: The exam as requested cannot be done with contrast. {reason}")
    return lines


def note_sections(decision: m.Decision, knowledge: Knowledge, scheduled_at: dt.datetime | None = None,
                  case: m.Case | None = None) -> tuple[str, list[tuple[str, list[str]]]]:
    """The note as a title and (heading, lines) sections; both renderings are built from this. Alerts come
    first, then the exam (with its own notes)."""
    exam = knowledge.exams[decision.exam]
    title = f"Contrast protocol note: {decision.exam_name}"
    sections: list[tuple[str, list[str]]] = []
    alerts = alert_lines(decision)
    if alerts:
        sections.append(("Alerts", alerts))
    sections.append(("Exam", _exam_lines(decision, exam, scheduled_at)))
    if case is not None:
        sections.append(("Inputs used", case_input_lines(case)))
    sources: list[str] = []  # numbered in the order first cited
    for i in range(len(decision.roles)):
        sections.append(_role_section(decision, i, exam, knowledge, sources))
    timed = timed_lines(decision, knowledge, scheduled_at)
    regimen = regimen_line(decision, knowledge)
    if regimen:
        timed.insert(0, f"Premedication: {regimen}")
    if timed:
        sections.append(("Precautions and timed actions", timed))
    sections.append(("Cautions", list(decision.cautions)))
    return title, sections + _closing_sections(decision, knowledge, sources)


def _exam_lines(decision: m.Decision, exam: m.Exam, scheduled_at: dt.datetime | None) -> list[str]:
    """The note's "Exam" section: exam, time, kidney function, urgency, exam notes, creatinine age."""
    head = [f"Exam: {decision.exam_name} ({exam.modality.value}); contrast {decision.contrast.value}"]
    if scheduled_at is not None:
        head.append(f"Scheduled: {scheduled_at.strftime('%a %d %b %Y %H:%M')}")
    r = decision.renal
    if r.egfr is not None:
        cat = f"KDIGO {r.category}" if r.category else "no CKD category"
        head.append(f"Kidney: eGFR {r.egfr:g} mL/min/1.73 m², {cat} ({r.note})")
    else:
        head.append(f"Kidney: {r.note}")
    urgency = getattr(decision, "urgency", None)
    if urgency is not None and urgency is not m.Urgency.elective:
        head.append(f"Urgency: {urgency.value}")
    if getattr(decision, "exam_notes", ""):
        head.append(f"Exam notes: {decision.exam_notes}")
    if r.creatinine_age_days is not None:
        head.append(f"Creatinine sample: {human_ago(r.creatinine_age_days)} at the exam time"
                    + (" - older than the policy allows; repeat it" if r.creatinine_stale else ""))
    return head


def _role_section(decision: m.Decision, i: int, exam: m.Exam, knowledge: Knowledge,
                  sources: list[str]) -> tuple[str, list[str]]:
    """One role's section: the planned agent, its dose, why (numbered into ``sources``), what to do, and
    the other usual agents; or that none is planned."""
    role = decision.roles[i]
    req = "" if role.required else " (optional)"
    heading = f"{ROUTE_WORDS[role.route].capitalize()}{req}: {role.purpose}"
    chosen = next((o for o in role.options if o.chosen), None)
    if chosen is None:
        usable = [o.name for o in role.options if o.verdict.severity <= 1]
        return heading, ["Agent: none planned" + (f" (usable: {', '.join(usable)})" if usable else
                                                  " - no agent of this role can be used")]
    agent = knowledge.agents[chosen.agent]
    lines = [f"Agent: {chosen.name} ({agent_kind(agent)}): {verdict_words(chosen.verdict)}"]
    lines += dose_lines(decision, i, exam)
    for reason in chosen.reasons:
        if reason.source not in sources:
            sources.append(reason.source)
        lines.append(f"Why: {reason.text} [{sources.index(reason.source) + 1}]")
    lines += [f"Do: {act}" for act in chosen.actions]
    return heading, lines + _other_agent_lines(role)


def _other_agent_lines(role: m.RoleDecision) -> list[str]:
    """The role's other usual agents: those also usable, and those ruled out (at most three named)."""
    usual, _ = split_options(role)
    lines = []
    usable = [o.name for o in usual if not o.chosen and o.verdict.severity <= 1]
    if usable:
        lines.append("Also usable: " + ", ".join(usable))
    ruled = [f"{o.name} ({verdict_words(o.verdict)})" for o in usual if o.verdict.severity >= 2]
    if len(ruled) > 4:
        lines.append(f"Ruled out: {len(ruled)} agents (" + ", ".join(ruled[:3]) + ", ...)")
    elif ruled:
        lines.append("Ruled out: " + ", ".join(ruled))
    return lines


def _closing_sections(decision: m.Decision, knowledge: Knowledge,
                      sources: list[str]) -> list[tuple[str, list[str]]]:
    """The numbered sources (the policy's own after the rules') and the knowledge and policy versions."""
    pol = knowledge.policy
    for ref in pol.based_on:
        text = knowledge.cite([ref], m.Certainty.verified)
        if text not in sources:
            sources.append(text)
    return [("Sources", [f"[{i}] {text}" for i, text in enumerate(sources, start=1)]),
            ("Knowledge", [
                f"Knowledge version {decision.knowledge_version}; policy {pol.name} ({decision.policy}, "
                f"{knowledge.policy_version})",
                "No patient identifiers are recorded in this note.",
            ])]


def _value_words(spec: FieldSpec, value: Any) -> str:
    value = getattr(value, "value", value)
    if spec.kind in ("number", "integer"):
        return f"{value:g}" + (f" {spec.unit}" if spec.unit else "")
    if spec.kind == "datetime" and isinstance(value, dt.datetime):
        return value.strftime("%a %d %b %Y %H:%M")
    if spec.kind == "choice":
        return dict((v, w) for w, v in spec.choices).get(str(value), str(value))
    return str(value)


def case_input_lines(case: m.Case) -> list[str]:
    """One line per case field that is set (not at its default), in the form's words, generated from the
    case model: a field added to the model appears here without further edits."""
    data = case.model_dump(exclude_defaults=True)
    lines: list[str] = []

    def walk(specs: tuple[FieldSpec, ...], raw: dict[str, Any]) -> None:
        for sp in specs:
            if sp.name not in raw or raw[sp.name] is None or sp.name == "patient":
                continue
            value = raw[sp.name]
            if sp.kind == "bool":
                if value:
                    lines.append(f"{sp.label}: yes")
            elif sp.kind == "model":
                parts = [_value_words(c, value[c.name]) for c in sp.children if value.get(c.name) is not None]
                lines.append(f"{sp.label}: " + ", ".join(parts))
            elif sp.kind == "list" and sp.children:
                for item in value:
                    parts = [_value_words(c, item[c.name]) for c in sp.children if item.get(c.name) is not None]
                    lines.append(f"{sp.label}: " + ", ".join(parts))
            elif sp.kind == "list":
                lines.append(f"{sp.label}: " + ", ".join(_value_words(sp, v) for v in value))
            else:
                lines.append(f"{sp.label}: {_value_words(sp, value)}")

    specs = case_specs()
    walk(specs, data)
    walk(next(sp for sp in specs if sp.name == "patient").children, data.get("patient") or {})
    return lines


#: the most lines the short note has (it is pasted into a request or a report)
SHORT_NOTE_MAX_LINES = 12


def _inputs_line(case: m.Case) -> str:
    p = case.patient
    parts = []
    if p.age_years is not None:
        parts.append(f"{p.age_years:g} years")
    if p.sex:
        parts.append(p.sex)
    if p.weight_kg is not None:
        parts.append(f"{p.weight_kg:g} kg")
    return ", ".join(parts) or "age and sex not given"


def _history_words(case: m.Case) -> list[str]:
    """The patient factors that are set, in the form's words (bool flags true, choices not 'none')."""
    p = case.patient
    out = []
    for name, f in m.Patient.model_fields.items():
        value = getattr(p, name)
        if f.annotation is bool and value:
            out.append(label_of(name).lower())
        elif isinstance(value, Enum) and value.value != "none" and name != "sex":
            out.append(f"{label_of(name).lower()}: {value.value.replace('_', ' ')}")
    for r in p.prior_reactions:
        out.append(f"earlier {r.kind.value.replace('_', '-')} reaction ({r.severity}) to "
                   + (r.agent or f"an {r.agent_family.value} agent"))
    return out


def short_note(decision: m.Decision, knowledge: Knowledge, case: m.Case) -> str:
    """The note to paste: at most :data:`SHORT_NOTE_MAX_LINES` lines of plain text. Exam and time, the inputs
    used (age, sex, creatinine with value, unit and date, eGFR with its equation, the relevant history),
    the chosen agent and dose per role, alerts, actions with times, policy, knowledge version and the
    time it was made for (the case's as_of)."""
    at = case.scheduled_at
    s = plan_summary(decision, at)
    lines = [f"Contrast plan: {decision.exam_name}" + (f", exam {at.strftime('%a %d %b %Y %H:%M')}" if at else "")]
    p, r = case.patient, decision.renal
    kidney = ""
    if p.creatinine is not None:
        unit = "µmol/L" if p.creatinine.unit == "umol/L" else p.creatinine.unit
        kidney = f"creatinine {p.creatinine.value:g} {unit}"
        if p.creatinine.measured_on is not None:
            kidney += f" ({str(p.creatinine.measured_on)[:10]}"
            kidney += f", {human_ago(r.creatinine_age_days)})" if r.creatinine_age_days is not None else ")"
        if r.creatinine_stale:
            kidney += " STALE"
    if r.egfr is not None:
        kidney += ("; " if kidney else "") + f"eGFR {r.egfr:g} ({r.note or r.equation}, KDIGO {r.category})"
    lines.append(f"Patient: {_inputs_line(case)}" + (f"; {kidney}" if kidney else ""))
    history = _history_words(case)
    lines.append("History: " + ("; ".join(history) if history else "none recorded"))
    lines += s.first + s.agents
    if s.alerts:
        lines.append("Alerts: " + "; ".join(f"{'STOP ' if lv == 'stop' else ''}{t}" for lv, t in s.alerts))
    room = SHORT_NOTE_MAX_LINES - len(lines) - 2
    actions = list(s.actions)
    if len(actions) > room:
        actions = actions[:max(room - 1, 0)] + ["; ".join(actions[max(room - 1, 0):])]
    lines += actions
    made = f"; made for {case.as_of.strftime('%a %d %b %Y %H:%M')}" if case.as_of else ""
    lines.append(f"Policy {knowledge.policy.id}; knowledge {decision.knowledge_version}{made}")
    lines.append("Decision support only: the supervising radiologist and local policy decide.")
    return "\n".join(lines[:SHORT_NOTE_MAX_LINES])


def protocol_note_markdown(decision: m.Decision, knowledge: Knowledge,
                           scheduled_at: dt.datetime | None = None, case: m.Case | None = None) -> str:
    title, sections = note_sections(decision, knowledge, scheduled_at, case)
    out = [f"# {title}", "", f"_{DECISION_SUPPORT}_", ""]
    for heading, lines in sections:
        out.append(f"## {heading}")
        out += [f"- {line}" for line in lines]
        out.append("")
    return "\n".join(out)


def protocol_note_html(decision: m.Decision, knowledge: Knowledge,
                       scheduled_at: dt.datetime | None = None, case: m.Case | None = None) -> str:
    title, sections = note_sections(decision, knowledge, scheduled_at, case)
    e = html.escape
    body = [f"<h1>{e(title)}</h1>", f"<p><em>{e(DECISION_SUPPORT)}</em></p>"]
    for heading, lines in sections:
        body.append(f"<h2>{e(heading)}</h2><ul>" + "".join(f"<li>{e(x)}</li>" for x in lines) + "</ul>")
    return ("<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>"
            f"{e(title)}</title></head><body>" + "".join(body) + "</body></html>")


def volumes_by_strength(iodine_g: float, agent: m.Agent) -> list[tuple[float, float]]:
    """(strength mg I/mL, volume mL) that deliver ``iodine_g`` grams of iodine: volume = g · 1000 / strength."""
    return [(c.value, iodine_g * 1000.0 / c.value) for c in agent.concentrations if c.unit is m.Unit.mg_i_per_ml]


def data_uri(text: str, mime: str) -> str:
    """A ``data:`` URI (base64, UTF-8) for a download link."""
    return f"data:{mime};charset=utf-8;base64," + base64.b64encode(text.encode("utf-8")).decode("ascii")


# --------------------------------------------------------------------------------------------------
# knowledge browser rows
# --------------------------------------------------------------------------------------------------
def knowledge_tables(knowledge: Knowledge) -> dict[str, list[dict[str, Any]]]:
    """The tables as rows of plain values, for a filterable view."""
    k = knowledge
    exams = [{
        "id": e.id, "name": e.name, "modality": e.modality.value, "region": e.region, "purpose": e.purpose,
        "contrast": e.contrast.value,
        "roles": "; ".join(f"{r.route.value}: {', '.join(r.agents)}" for r in e.roles),
    } for e in k.tables.exams]
    agents = [{
        "id": a.id, "name": a.name, "kind": agent_kind(a), "form": a.form.value,
        "strengths": ", ".join(f"{c.value:g} {c.unit.value.replace('_', ' ')}" for c in a.concentrations),
        "routes": ", ".join(r.value for r in a.routes), "notes": a.notes,
        "certainty": a.certainty.value.replace("_", " "),
    } for a in k.tables.agents]
    rules = [{
        "id": r.id, "scope": r.scope.value,
        "verdict": verdict_words(r.effect.verdict) if r.effect.verdict else "",
        "text": r.text, "actions": " | ".join(r.effect.actions),
        "flags": ", ".join(f.value for f in r.effect.flags),
        "source": k.cite(r.sources, r.certainty),
    } for r in k.tables.rules]
    sources = [{
        "id": s.id, "title": s.title, "issuer": s.issuer, "year": s.year or "", "kind": s.kind,
        "details": s.details, "certainty": s.certainty.value.replace("_", " "),
    } for s in k.tables.sources]
    pol = k.policy
    policy = []
    for name, field in m.Policy.model_fields.items():
        if name in ("regimens", "based_on"):
            continue
        policy.append({"setting": name, "value": getattr(pol, name), "meaning": field.description or ""})
    for reg in pol.regimens:
        steps = "; ".join(
            (f"{s.hours_before:g} h before" if s.hours_before is not None else f"now, every {s.repeat_every_hours:g} h")
            + f": {s.drug} {s.dose} {s.route}" + (" (optional)" if s.optional else "") for s in reg.steps)
        policy.append({"setting": f"regimen {reg.id}", "value": reg.name, "meaning": steps})
    return {"exams": exams, "agents": agents, "rules": rules, "sources": sources, "policy": policy}
