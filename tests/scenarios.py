"""Run the clinical scenario vectors of tests/vectors/scenarios.yaml against the engine.

A vector: ``id``, ``source`` (the published source of the expectation, or "common practice"/"from memory"),
``case`` and ``expect`` with any of:
- ``contrast_needed``: bool
- ``verdicts``: {ROLE: {agent: verdict}} (ROLE is the route, ``route#2`` for the second role of that route)
- ``top``: {ROLE: agent} — the top-ranked option
- ``top_verdict``: {ROLE: verdict}
- ``rules``: {ROLE: {agent: [rule ids that must have fired]}}
- ``not_rules``: {ROLE: {agent: [rule ids that must not have fired]}}
- ``actions_contain``: {ROLE: {agent: [substrings of its actions]}}
- ``blocks``: {"renal.hydration_indicated": true, "premedication.indicated": false, "metformin.hold": true, ...}
  (a number in the path indexes a list: ``roles.0.agent_dose.volume_ml``)
- beside ``case``: ``policy``, the stem of a file in knowledge/data/policies/ (default: default.yaml)
- ``cautions_contain``: [substrings]; ``cautions_lack``: [substrings]
- ``blocks_contain``: {"renal.note": substring, "premedication.warnings": substring, ...} (lists are joined)
- ``alerts_contain``: ["stop: substring", "warn: substring", "substring"]; ``alerts_lack``: [substrings];
  ``no_alerts``: true
- ``chosen``: {ROLE: agent} — the option the plan uses; ``no_chosen``: [ROLE] — no option is chosen
- ``cannot_proceed``: substring of ``cannot_proceed_reason`` (or null: there is none)
- ``dose``: {ROLE: {field: value}} — fields of the role's dose block (numbers within 0.05; null allowed);
  ``dose_contain``: {ROLE: {field: substring}} (lists joined); ``no_dose``: [ROLE]
- ``exam_notes_contain``: [substrings]
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import yaml

VECTORS = Path(__file__).parent / "vectors" / "scenarios.yaml"


def load_vectors() -> list[dict[str, Any]]:
    return yaml.safe_load(VECTORS.read_text(encoding="utf-8"))


def roles_by_key(decision) -> dict[str, Any]:
    out, seen = {}, {}
    for role in decision.roles:
        n = seen[role.route.value] = seen.get(role.route.value, 0) + 1
        out[role.route.value if n == 1 else f"{role.route.value}#{n}"] = role
    return out


def options(role) -> dict[str, Any]:
    return {o.agent: o for o in role.options}


def block_value(decision, dotted: str) -> Any:
    value: Any = decision
    for part in dotted.split("."):
        value = value[int(part)] if part.isdigit() else getattr(value, part)  # roles.0.agent_dose (issue 13)
    return value.value if hasattr(value, "value") else value


def check(decision, expect: dict[str, Any]) -> list[str]:
    """Every way the decision differs from the expectation, in words (empty when it matches)."""
    problems: list[str] = []
    roles = roles_by_key(decision)

    def role(key):
        if key not in roles:
            problems.append(f"no role {key!r}; roles are {sorted(roles)}")
            return None
        return roles[key]

    if "contrast_needed" in expect and decision.contrast_needed != expect["contrast_needed"]:
        problems.append(f"contrast_needed {decision.contrast_needed}, expected {expect['contrast_needed']}")
    for key, wanted in expect.get("verdicts", {}).items():
        r = role(key)
        if r is None:
            continue
        opts = options(r)
        for agent, verdict in wanted.items():
            if agent not in opts:
                problems.append(f"{key}: {agent} not among the options")
            elif opts[agent].verdict.value != verdict:
                fired = [x.rule for x in opts[agent].reasons]
                problems.append(f"{key}: {agent} is {opts[agent].verdict.value}, expected {verdict} (rules {fired})")
    for key, agent in expect.get("top", {}).items():
        r = role(key)
        if r is not None and r.options[0].agent != agent:
            problems.append(f"{key}: top option is {r.options[0].agent}, expected {agent}")
    for key, verdict in expect.get("top_verdict", {}).items():
        r = role(key)
        if r is not None and r.options[0].verdict.value != verdict:
            problems.append(f"{key}: top verdict is {r.options[0].verdict.value}, expected {verdict}")
    for field, negate in (("rules", False), ("not_rules", True)):
        for key, per_agent in expect.get(field, {}).items():
            r = role(key)
            if r is None:
                continue
            opts = options(r)
            for agent, rule_ids in per_agent.items():
                fired = {x.rule for x in opts[agent].reasons} if agent in opts else set()
                for rid in rule_ids:
                    if (rid in fired) == negate:
                        problems.append(f"{key}: {agent}: rule {rid} {'fired' if negate else 'did not fire'}")
    for key, per_agent in expect.get("actions_contain", {}).items():
        r = role(key)
        if r is None:
            continue
        opts = options(r)
        for agent, parts in per_agent.items():
            text = " | ".join(opts[agent].actions) if agent in opts else ""
            for part in parts:
                if part.lower() not in text.lower():
                    problems.append(f"{key}: {agent}: no action containing {part!r} (actions: {text!r})")
    for dotted, wanted in expect.get("blocks", {}).items():
        got = block_value(decision, dotted)
        if isinstance(wanted, float):
            ok = got is not None and abs(got - wanted) <= 0.05
        else:
            ok = got == wanted
        if not ok:
            problems.append(f"{dotted} is {got!r}, expected {wanted!r}")
    for dotted, part in expect.get("blocks_contain", {}).items():
        got = block_value(decision, dotted)
        text = " | ".join(got) if isinstance(got, list) else str(got)
        if part.lower() not in text.lower():
            problems.append(f"{dotted} ({text!r}) does not contain {part!r}")
    alerts = [(a.level, a.text.lower()) for a in decision.alerts]
    for want in expect.get("alerts_contain", []):
        level, _, part = want.partition(": ") if want.split(": ", 1)[0] in ("stop", "warn") else ("", "", want)
        if not any((not level or lv == level) and part.lower() in text for lv, text in alerts):
            problems.append(f"no {level or 'any'} alert containing {part!r} (alerts: {alerts!r})")
    for part in expect.get("alerts_lack", []):
        if any(part.lower() in text for _, text in alerts):
            problems.append(f"an alert contains {part!r}")
    if expect.get("no_alerts") and alerts:
        problems.append(f"alerts raised: {alerts!r}")
    for key, agent in expect.get("chosen", {}).items():
        r = role(key)
        if r is not None:
            got = [o.agent for o in r.options if o.chosen]
            if got != [agent]:
                problems.append(f"{key}: chosen {got}, expected {agent}")
    for key in expect.get("no_chosen", []):
        r = role(key)
        if r is not None and any(o.chosen for o in r.options):
            problems.append(f"{key}: {[o.agent for o in r.options if o.chosen]} chosen, expected none")
    if "cannot_proceed" in expect:
        want, got = expect["cannot_proceed"], decision.cannot_proceed_reason
        if want is None and got is not None:
            problems.append(f"cannot_proceed_reason is {got!r}, expected none")
        elif want is not None and (got is None or want.lower() not in got.lower()):
            problems.append(f"cannot_proceed_reason is {got!r}, expected one containing {want!r}")
    for key, fields in expect.get("dose", {}).items():
        r = role(key)
        if r is None:
            continue
        if r.dose is None:
            problems.append(f"{key}: no dose block")
            continue
        for name, wanted in fields.items():
            got = getattr(r.dose, name)
            ok = (got is None and wanted is None) or (
                isinstance(wanted, (int, float)) and not isinstance(wanted, bool) and got is not None
                and abs(got - wanted) <= 0.05) or got == wanted
            if not ok:
                problems.append(f"{key}: dose.{name} is {got!r}, expected {wanted!r}")
    for key, fields in expect.get("dose_contain", {}).items():
        r = role(key)
        if r is None or r.dose is None:
            problems.append(f"{key}: no dose block")
            continue
        for name, part in fields.items():
            got = getattr(r.dose, name)
            text = " | ".join(got) if isinstance(got, list) else str(got)
            if part.lower() not in text.lower():
                problems.append(f"{key}: dose.{name} ({text!r}) does not contain {part!r}")
    for key in expect.get("no_dose", []):
        r = role(key)
        if r is not None and r.dose is not None:
            problems.append(f"{key}: a dose is planned ({r.dose.agent}), expected none")
    for part in expect.get("exam_notes_contain", []):
        if part.lower() not in decision.exam_notes.lower():
            problems.append(f"exam notes lack {part!r}")
    joined = " | ".join(decision.cautions).lower()
    for part in expect.get("cautions_contain", []):
        if part.lower() not in joined:
            problems.append(f"no caution containing {part!r}")
    for part in expect.get("cautions_lack", []):
        if part.lower() in joined:
            problems.append(f"a caution contains {part!r}")
    return problems
