"""Clock times: premedication schedules and the metformin hold.

Source keys (see ``knowledge/data/sources.yaml``):
- ``acr-manual``: premedication regimens (elective: prednisone 50 mg orally 13, 7 and 1 h before, or
  methylprednisolone 32 mg orally 12 and 2 h before, each with optional diphenhydramine 50 mg 1 h before;
  accelerated: methylprednisolone 40 mg or hydrocortisone 200 mg IV now and every 4 h until contrast,
  with diphenhydramine 50 mg IV 1 h before). The regimens themselves live in the policy (``regimens``).
- ``acr-manual`` / ``esur-pc-aki-2018``: metformin withheld from the time of contrast; kidney function
  re-checked 48 h after before it is restarted.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from typing import Any

from .freshness import align_times

#: Hours after contrast before kidney function is re-checked and metformin restarted (ACR Manual, ESUR v10).
from ..tables.constants import METFORMIN_HOLD_HOURS as METFORMIN_RECHECK_HOURS


@dataclass
class Dose:
    at: dt.datetime | None
    hours_before: float
    drug: str
    dose: str
    route: str
    optional: bool = False


@dataclass
class Schedule:
    regimen: Any  # the policy's Regimen
    lead_hours: float | None
    doses: list[Dose] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)


def hours_between(start: dt.datetime, end: dt.datetime) -> float:
    """Hours from ``start`` to ``end`` (negative if ``end`` is earlier).

    Example: 15:00 to 09:00 the next day is 18 h.

    >>> hours_between(dt.datetime(2026, 12, 1, 15, 0), dt.datetime(2026, 12, 2, 9, 0))
    18.0
    """
    s, e = align_times(start, end)
    return (e - s).total_seconds() / 3600.0


def lay_out(regimen: Any, exam_at: dt.datetime | None, now: dt.datetime | None) -> list[Dose]:
    """The doses of ``regimen`` as clock times before ``exam_at``.

    A step with ``hours_before`` is given at exam − hours (``at`` is None when there is no exam time). A
    step with ``hours_before: null`` means "now" and repeats every ``repeat_every_hours`` while the next
    dose still falls before the exam (ACR Manual accelerated regimen). Doses are sorted by time.
    """
    out: list[Dose] = []
    lead = hours_between(now, exam_at) if (exam_at is not None and now is not None) else None
    for step in regimen.steps:
        if step.hours_before is not None:
            at = exam_at - dt.timedelta(hours=step.hours_before) if exam_at is not None else None
            out.append(Dose(at, float(step.hours_before), step.drug, step.dose, step.route, step.optional))
            continue
        if lead is None:
            out.append(Dose(None, float("nan"), step.drug, step.dose, step.route, step.optional))
            continue
        t = 0.0
        while True:
            at, _ = align_times(now + dt.timedelta(hours=t), exam_at)
            out.append(Dose(at, round(lead - t, 4), step.drug, step.dose, step.route, step.optional))
            if not step.repeat_every_hours:
                break
            t += step.repeat_every_hours
            if t >= lead:
                break
    out.sort(key=lambda d: -d.hours_before if d.hours_before == d.hours_before else float("-inf"))
    return out


def premedication_schedule(elective: Any, accelerated: Any, exam_at: dt.datetime | None,
                           now: dt.datetime | None, urgency: str = "elective") -> Schedule:
    """Choose and lay out a premedication regimen (policy ``regimens``; source ``acr-manual``).

    ``elective`` is one regimen or a list tried in order: the first whose ``minimum_lead_hours`` fit the time
    left before the exam is laid out (with 12 h 45 min left a 12 h regimen fits where a 13 h one does not);
    when none fits, the accelerated one, with a warning (and a second warning when even that one's minimum is
    not left — then the doses that still fit are shown). Only an ``elective`` exam is advised to move; an
    ``urgent`` one is told to give what fits and switch agent; an ``emergency`` is never delayed for
    premedication (the accelerated regimen, or what fits in the time left; a different agent; the
    resuscitation team ready — ACR Manual, from memory). With no exam time, the first elective regimen is
    shown as hours before the exam (the accelerated one in an emergency); with an exam time already past, it
    is laid out against it with a warning (never an error, so old cases can be re-opened). With no ``now``
    (the case gave no as-of time) it is laid out against the exam time, with a warning.
    """
    electives = list(elective) if isinstance(elective, (list, tuple)) else [elective]
    first = accelerated if urgency == "emergency" else electives[0]
    early = _schedule_without_lead(first, exam_at, now, urgency)
    if early is not None:
        return early
    lead = hours_between(now, exam_at)
    regimen, warnings = _regimen_for_lead(electives, accelerated, lead, urgency)
    if regimen is accelerated and lead < accelerated.minimum_lead_hours:
        warnings.append(_short_of_accelerated(accelerated, lead, exam_at, urgency))
    doses = lay_out(regimen, exam_at, now)
    warnings += _give_overdue_now(doses, now)
    return Schedule(regimen, lead, doses, warnings)


_EMERGENCY_NOTE = ("Emergency: the exam is not delayed for premedication - give what fits in the time left, "
                   "use a different agent from any culprit, resuscitation team ready")


def _schedule_without_lead(first: Any, exam_at: dt.datetime | None, now: dt.datetime | None,
                           urgency: str) -> Schedule | None:
    """The schedule when the time left cannot be used: no exam time, no 'now', or an exam time already
    past (laid out against the exam time, with a warning); None when there is time left to plan with."""
    if exam_at is None:
        w = ["No scheduled exam time: doses are given as hours before the exam"]
        if urgency == "emergency":
            w.append(_EMERGENCY_NOTE)
        return Schedule(first, None, lay_out(first, None, None), w)
    if now is None:
        return Schedule(first, None, lay_out(first, exam_at, None),
                        ["No as-of time given: the time left before the exam was not checked; the "
                         f"{first.name.lower()} is laid out against the exam time"])
    lead = hours_between(now, exam_at)
    if lead < 0:
        return Schedule(first, lead, lay_out(first, exam_at, None),
                        [f"The scheduled time {exam_at.isoformat()} is before as_of {now.isoformat()}: "
                         "the doses are shown as they would have been given; check the exam time"])
    return None


def _regimen_for_lead(electives: list[Any], accelerated: Any, lead: float, urgency: str) -> tuple[Any, list[str]]:
    """The first elective regimen that fits the ``lead`` hours left (not in an emergency), else the
    accelerated one; with the warnings that say why."""
    fitting = [r for r in electives if lead >= r.minimum_lead_hours] if urgency != "emergency" else []
    if fitting:
        regimen = fitting[0]
        if regimen is electives[0]:
            return regimen, []
        return regimen, [f"{lead:.1f} h left before the exam: not enough for the {electives[0].name.lower()} "
                         f"(needs {electives[0].minimum_lead_hours:g} h); the {regimen.name.lower()} fits"]
    if urgency == "emergency":
        return accelerated, [_EMERGENCY_NOTE]
    names = " or the ".join(f"{r.name.lower()} (needs {r.minimum_lead_hours:g} h)" for r in electives)
    return accelerated, [f"Only {lead:.1f} h left before the exam: not enough for the {names}; the accelerated "
                         "regimen is offered instead"]


def _short_of_accelerated(accelerated: Any, lead: float, exam_at: dt.datetime, urgency: str) -> str:
    """Less than even the accelerated regimen's minimum is left: move an elective exam; otherwise give what
    fits and do not delay."""
    if urgency == "elective":
        later = exam_at + dt.timedelta(hours=accelerated.minimum_lead_hours - lead)
        return (f"Even the accelerated regimen needs at least {accelerated.minimum_lead_hours:g} h (ACR Manual: "
                f"4-5 h): consider moving the exam to {later.strftime('%Y-%m-%d %H:%M')} or later, or an "
                "alternative that needs no iodinated contrast")
    return (f"Less than the accelerated regimen's {accelerated.minimum_lead_hours:g} h is left: give the "
            "doses that fit, use a different agent, resuscitation team ready; do not delay an "
            f"{urgency} exam for it")


def _give_overdue_now(doses: list[Dose], now: dt.datetime) -> list[str]:
    """A dose whose time has already passed is moved to ``now``; one warning each."""
    warnings = []
    for d in doses:
        if d.at is not None and hours_between(now, d.at) < 0:
            d.at = now
            warnings.append(f"{d.drug} {d.dose} ({d.route}) was due {d.hours_before:g} h before: give it now")
    return warnings


def metformin_timeline(contrast_at: dt.datetime | None,
                       recheck_after_hours: float = METFORMIN_RECHECK_HOURS) -> tuple[dt.datetime | None,
                                                                                      dt.datetime | None]:
    """When to stop metformin and when kidney function is re-checked before restarting it.

    Sources ``acr-manual`` and ``esur-pc-aki-2018``: stop at (or before) the time of contrast; withhold
    48 h; restart only after kidney function is re-evaluated. Returns (hold_from, recheck_at); both None
    without an exam time.

    Example (ACR Manual: withhold 48 h): contrast at 09:00 on 2 December → re-check from 09:00 on
    4 December.

    >>> hold, recheck = metformin_timeline(dt.datetime(2026, 12, 2, 9, 0))
    >>> recheck.isoformat()
    '2026-12-04T09:00:00'
    """
    if not (0 < recheck_after_hours <= 168):
        from ..errors import out_of_range

        raise out_of_range("recheck_after_hours", recheck_after_hours, 0, 168, "h")
    if contrast_at is None:
        return None, None
    return contrast_at, contrast_at + dt.timedelta(hours=recheck_after_hours)
