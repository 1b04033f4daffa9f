"""The review columns of one decision, in two parts that one function, :func:`columns`, turns into cells.

- :class:`ChoicePart` is what the choice of agents fixes: the planned and the best agent and their verdicts,
  the flags of the rules that fired, the engine's stop / warn alerts, the formulary cautions and the
  provenance (:func:`choice_part`).
- :class:`PlanPart` is what the plans work out from the patient's numbers and the clock: the creatinine's
  freshness, the renal and premedication warnings, the dose limits, the hydration, premedication and
  metformin clock times (:func:`plan_part`).

:func:`summarise_decision` builds both from one decision. The fast path (``knowledge.review.fast``) builds the
first once for every order that shares it and the second for each order, and passes both through the same
:func:`columns`, so every cell is made by one piece of code on either path.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from typing import Any, Callable, NamedTuple

from ..tables import models as m


#: the columns review adds after the input's own, in order
RESULT_COLUMNS = (
    "status", "reason", "exam_id", "planned_agent_verdict", "best_agent", "best_agent_label", "best_agent_verdict",
    "flags", "alerts", "actions", "first_action_at", "premedication_start_at", "metformin_hold_from",
    "creatinine_needed_by", "policy", "policy_version", "knowledge_version", "as_of",
)


def fmt_time(t: dt.datetime | None) -> str:
    return t.strftime("%Y-%m-%d %H:%M") if t else ""


@dataclass(frozen=True)
class ChoicePart:
    """The columns and flags fixed by the agents chosen (the same for every order of the same class)."""

    exam_id: str
    planned_agent_verdict: str
    best_agent: str
    best_agent_label: str
    best_agent_verdict: str
    flags_head: tuple[str, ...]  # planned / best agent flags, hydration, premedication, metformin hold
    flags_tail: tuple[str, ...]  # one "stop" / "warning" per engine alert, then "cannot proceed"
    alerts_head: tuple[str, ...]  # the engine's alerts, most severe first
    alerts_tail: tuple[str, ...]  # the formulary's "not stocked here" cautions
    premedication: bool
    metformin_hold: bool
    provenance: tuple[tuple[str, str], ...]  # policy, policy_version, knowledge_version, as_of


class PlanPart(NamedTuple):
    """The cells worked out from the patient's numbers and clock times (one order's own; a tuple, so orders
    with the same plans find the same cells fast)."""

    creatinine_flag: str | None  # "creatinine needed", "creatinine stale" or None
    warnings: tuple[str, ...]  # renal warnings, then premedication warnings
    limit_messages: tuple[str, ...]  # the dose limits' messages when a limit is exceeded
    premedication_regimen: str | None
    premedication_start: dt.datetime | None
    hydration: tuple[float, dt.datetime] | None  # rate (mL/h) and start of a timed hydration plan
    metformin_hold_from: dt.datetime | None
    metformin_recheck_at: dt.datetime | None


def _agent_columns(d: m.Decision, agent: str | None) -> tuple[str, str, str, str, list[str]]:
    """(planned verdict, best agent, its local label, its verdict, flags) of the role the order is about."""
    planned_verdict = best = best_label = best_verdict = ""
    flags: list[str] = []
    roles = list(d.roles)
    if agent is not None:  # the role the planned agent is for comes first
        roles.sort(key=lambda rd: not any(o.agent == agent for o in rd.options))
    if roles:
        rd = roles[0]
        # the best agent: the department's default choice for the role (first stocked option by rank)
        first = next((o for o in rd.options if o.stocked is not False), rd.options[0] if rd.options else None)
        if first is not None:
            best, best_label, best_verdict = first.agent, first.local_label or "", first.verdict.value
        planned = next((o for o in rd.options if o.agent == agent), None) if agent else None
        if planned is not None:
            planned_verdict = planned.verdict.value
            if planned.verdict.severity > 0:
                flags.append(f"planned agent {planned.verdict.value}")
            if planned.stocked is False:
                flags.append("planned agent not stocked here")
            if first is not None and first.verdict.severity < planned.verdict.severity:
                flags.append(f"better agent: {first.agent}")
    if best_verdict and best_verdict != "suitable":
        flags.append(f"best agent {best_verdict}")
    return planned_verdict, best, best_label, best_verdict, flags


def choice_part(d: m.Decision, agent: str | None) -> ChoicePart:
    """The part of the review columns that the decision's agents, rules and alerts fix."""
    planned_verdict, best, best_label, best_verdict, flags = _agent_columns(d, agent)
    if d.renal.hydration_indicated:
        flags.append("hydration")
    if d.premedication.indicated:
        flags.append("premedication")
    if d.metformin.hold:
        flags.append("metformin hold")
    tail: list[str] = []
    alerts: list[str] = []
    for alert in getattr(d, "alerts", None) or []:  # the engine's stop / warn alerts, most severe first
        alerts.append(f"{alert.level.upper()}: {alert.text}")
        tail.append("stop" if alert.level == "stop" else "warning")
    if getattr(d, "cannot_proceed_reason", None):
        tail.append("cannot proceed as requested")
    provenance = (("policy", d.policy), ("policy_version", d.policy_version or ""),
                  ("knowledge_version", d.knowledge_version), ("as_of", fmt_time(d.as_of)))
    return ChoicePart(
        exam_id=d.exam, planned_agent_verdict=planned_verdict, best_agent=best, best_agent_label=best_label,
        best_agent_verdict=best_verdict, flags_head=tuple(flags), flags_tail=tuple(tail), alerts_head=tuple(alerts),
        alerts_tail=tuple(c for c in d.cautions if "not stocked here" in c), premedication=d.premedication.indicated,
        metformin_hold=d.metformin.hold, provenance=provenance)


def plan_part(renal: Any, premedication: Any, metformin: Any) -> PlanPart:
    """The part of the review columns the plans give, from a decision's ``renal``, ``premedication`` and
    ``metformin`` blocks."""
    r = renal
    return plan_part_of(r.creatinine_required, r.creatinine_stale, r.creatinine_age_days, r.warnings, r.dose_limits,
                        r.hydration_plan, premedication, metformin)


def plan_part_of(required: bool, stale: bool | None, age_days: float | None, warnings: list[str], limits: Any,
                 hydration: Any, premedication: Any, metformin: Any) -> PlanPart:
    """:func:`plan_part` from the renal block's fields (creatinine required, stale, its age; the renal warnings,
    dose limits and hydration plan) and the premedication and metformin blocks."""
    flag = None
    if required and (stale or age_days is None):
        flag = "creatinine needed"
    elif stale:
        flag = "creatinine stale"
    exceeded = limits and (limits.iodine_g_per_gfr_exceeded or limits.cigarroa_exceeded)  # not "not worked out"
    return PlanPart(
        creatinine_flag=flag, warnings=tuple(warnings) + tuple(premedication.warnings),
        limit_messages=tuple(limits.messages) if exceeded else (),
        premedication_regimen=premedication.regimen,
        premedication_start=premedication.schedule[0].at if premedication.schedule else None,
        hydration=(hydration.rate_ml_h, hydration.start_at) if hydration and hydration.start_at else None,
        metformin_hold_from=metformin.hold_from, metformin_recheck_at=metformin.recheck_at)


def _actions(c: ChoicePart, p: PlanPart, needed_by: dt.datetime | None, creatinine: bool,
             fmt_time: Callable[[dt.datetime | None], str]) -> tuple[list[str], list[dt.datetime]]:
    """The actions in words, and their clock times."""
    actions: list[str] = []
    times: list[dt.datetime] = []
    if c.premedication:
        actions.append(f"premedication ({p.premedication_regimen}) from "
                       f"{fmt_time(p.premedication_start) or 'exam time unknown'}")
        if p.premedication_start:
            times.append(p.premedication_start)
    if p.hydration is not None:
        rate, start = p.hydration
        actions.append(f"hydration {rate:g} mL/h from {fmt_time(start)}")
        times.append(start)
    if c.metformin_hold:
        actions.append(f"hold metformin from {fmt_time(p.metformin_hold_from) or 'the exam'}; re-check kidney "
                       f"function {fmt_time(p.metformin_recheck_at)}")
        if p.metformin_hold_from:
            times.append(p.metformin_hold_from)
    if creatinine:
        actions.append(f"creatinine needed by {fmt_time(needed_by) or 'the exam'}")
        if needed_by:
            times.append(needed_by)
    return actions, times


def columns(c: ChoicePart, p: PlanPart, scheduled_at: dt.datetime | None,
            fmt_time: Callable[[dt.datetime | None], str] = fmt_time) -> dict[str, Any]:
    """The result columns of one reviewed order (status ok or flagged); ``fmt_time`` writes a clock time (the
    fast path passes one that remembers what it wrote)."""
    flags = list(c.flags_head)
    if p.creatinine_flag:
        flags.append(p.creatinine_flag)
    flags += c.flags_tail
    alerts = list(c.alerts_head) + list(p.warnings) + list(p.limit_messages) + list(c.alerts_tail)
    creatinine = p.creatinine_flag is not None  # the only flag that says "creatinine needed" or "stale"
    needed_by = scheduled_at if creatinine else None
    actions, times = _actions(c, p, needed_by, creatinine, fmt_time)
    out = dict(
        exam_id=c.exam_id, planned_agent_verdict=c.planned_agent_verdict, best_agent=c.best_agent,
        best_agent_label=c.best_agent_label, best_agent_verdict=c.best_agent_verdict,
        flags="; ".join(dict.fromkeys(flags)), alerts=" | ".join(dict.fromkeys(alerts)), actions="; ".join(actions),
        first_action_at=fmt_time(min(times)) if times else "", premedication_start_at=fmt_time(p.premedication_start),
        metformin_hold_from=fmt_time(p.metformin_hold_from), creatinine_needed_by=fmt_time(needed_by),
        **dict(c.provenance))
    out["status"] = "flagged" if out["flags"] or out["alerts"] else "ok"
    out["reason"] = ""
    return out


def summarise_decision(d: m.Decision, case: m.Case) -> dict[str, Any]:
    """The review columns of one decision (status ok or flagged; reason empty)."""
    return columns(choice_part(d, case.agent), plan_part(d.renal, d.premedication, d.metformin), case.scheduled_at)
