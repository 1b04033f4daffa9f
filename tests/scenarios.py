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
- ``cautions_contain``: [substrings]; ``cautions_lack``: [substrings]
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
        value = getattr(value, part)
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
    joined = " | ".join(decision.cautions).lower()
    for part in expect.get("cautions_contain", []):
        if part.lower() not in joined:
            problems.append(f"no caution containing {part!r}")
    for part in expect.get("cautions_lack", []):
        if part.lower() in joined:
            problems.append(f"a caution contains {part!r}")
    return problems
