"""Compile and check rule conditions.

A condition is data (see :class:`knowledge.tables.models.Test`, ``All``, ``AnyOf``, ``Not``). At load it is
checked against the fact catalogue and the policy, then turned into a plain Python closure over a
dict of facts. Nothing is ever ``eval``'d.
"""

from __future__ import annotations

from typing import Any, Callable

from . import models as m
from ..errors import KnowledgeError, suggest
from .constants import SEVERITY_RANK
from .facts import FACTS

Facts = dict[str, Any]
Compiled = Callable[[Facts], bool]

_SEVERITY_RANK = SEVERITY_RANK


def facts_used(cond: m.Condition) -> set[str]:
    """Every fact name a condition tests."""
    if isinstance(cond, m.Test):
        return {cond.fact}
    if isinstance(cond, m.All):
        return set().union(*(facts_used(c) for c in cond.all))
    if isinstance(cond, m.AnyOf):
        return set().union(*(facts_used(c) for c in cond.any))
    return facts_used(cond.not_)


def _resolve(value: Any, policy: m.Policy, where: str) -> Any:
    if isinstance(value, m.PolicyValue):
        try:
            return policy.number(value.policy)
        except (KeyError, AttributeError):
            numeric = [n for n, f in m.Policy.model_fields.items() if f.annotation in (float, int, float | None)]
            raise KnowledgeError(
                f"{where}: policy setting {value.policy!r} is not a numeric setting; allowed: {', '.join(numeric)}"
            ) from None
    return value


def _check_value(spec, value: Any, where: str) -> None:
    if value is None:
        return
    if spec.kind == "bool" and not isinstance(value, bool):
        raise KnowledgeError(f"{where}: fact {spec.name} is true/false; got {value!r}")
    if spec.kind == "enum" and value not in spec.values:
        raise KnowledgeError(f"{where}: {value!r} is not a value of {spec.name}; allowed: {', '.join(spec.values)}")
    if spec.kind == "number" and (isinstance(value, bool) or not isinstance(value, (int, float))):
        raise KnowledgeError(f"{where}: fact {spec.name} is a number; got {value!r}")


#: Facts fixed by the exam, the role, the agent and the policy: known before any patient is seen.
STATIC_PREFIXES = ("exam.", "role.", "agent.", "policy.")


def _all(parts: list[Compiled]) -> Compiled:
    def test(f: Facts) -> bool:
        for p in parts:
            if not p(f):
                return False
        return True

    return test


def _any(parts: list[Compiled]) -> Compiled:
    def test(f: Facts) -> bool:
        for p in parts:
            if p(f):
                return True
        return False

    return test


def compile_partial(cond: m.Condition, policy: m.Policy) -> Callable[[Facts], bool | None]:
    """A three-valued closure over the static facts only: True, False, or None where it depends on the
    patient. Used at load to index which rules can possibly fire for an exam role and agent."""
    if isinstance(cond, (m.All, m.AnyOf)):
        parts = [compile_partial(c, policy) for c in (cond.all if isinstance(cond, m.All) else cond.any)]
        decisive = isinstance(cond, m.AnyOf)  # True decides an 'any', False decides an 'all'

        def test(f: Facts) -> bool | None:
            unknown = False
            for p in parts:
                v = p(f)
                if v is None:
                    unknown = True
                elif v is decisive:
                    return decisive
            return None if unknown else not decisive

        return test
    if isinstance(cond, m.Not):
        inner = compile_partial(cond.not_, policy)
        return lambda f: None if (v := inner(f)) is None else not v
    if not cond.fact.startswith(STATIC_PREFIXES):
        return lambda f: None
    full = compile_condition(cond, policy, "partial", m.Scope.agent)
    return lambda f: bool(full(f))


def compile_condition(cond: m.Condition, policy: m.Policy, where: str, scope: m.Scope) -> Compiled:
    """Check ``cond`` and return a closure ``facts -> bool``. ``where`` names the rule for messages."""
    if isinstance(cond, m.All):
        # patient tests first: they are usually false, so most rules stop at their first test
        ordered = sorted(cond.all, key=lambda c: all(f.startswith(STATIC_PREFIXES) for f in facts_used(c)))
        return _all([compile_condition(c, policy, where, scope) for c in ordered])
    if isinstance(cond, m.AnyOf):
        return _any([compile_condition(c, policy, where, scope) for c in cond.any])
    if isinstance(cond, m.Not):
        inner = compile_condition(cond.not_, policy, where, scope)
        return lambda f: not inner(f)

    spec = FACTS.get(cond.fact)
    if spec is None:
        near = suggest(cond.fact, FACTS)
        hint = f" (did you mean {near}?)" if near else ""
        raise KnowledgeError(f"{where}: unknown fact {cond.fact!r}{hint}; see `contrast-aid knowledge facts` for the "
                             "catalogue", field=where, value=cond.fact, suggestion=near,
                             allowed="the facts of `contrast-aid knowledge facts`")
    if scope is m.Scope.case and spec.scope == "agent":
        raise KnowledgeError(f"{where}: fact {cond.fact} is per agent; a case-scope rule cannot test it")
    op, raw = cond.operator, cond.operand
    key = cond.fact

    if op in ("lt", "le", "gt", "ge"):
        is_severity = spec.kind == "enum" and spec.values == tuple(_SEVERITY_RANK)
        if spec.kind != "number" and not is_severity:
            raise KnowledgeError(f"{where}: operator {op} needs a numeric fact or a severity; {key} is {spec.kind}")
        if is_severity:  # severity comparisons: none < mild < moderate < severe
            if raw not in _SEVERITY_RANK:
                raise KnowledgeError(f"{where}: {raw!r} is not a severity; allowed: {', '.join(SEVERITY_RANK)}")
            bound = _SEVERITY_RANK[raw]
            get = lambda f: _SEVERITY_RANK[f.get(key) or "none"]  # noqa: E731
        else:
            bound = _resolve(raw, policy, where)
            if isinstance(bound, bool) or not isinstance(bound, (int, float)):
                raise KnowledgeError(f"{where}: operator {op} needs a number; got {raw!r}")
            get = lambda f: f.get(key)  # noqa: E731
        if op == "lt":
            return lambda f: (v := get(f)) is not None and v < bound
        if op == "le":
            return lambda f: (v := get(f)) is not None and v <= bound
        if op == "gt":
            return lambda f: (v := get(f)) is not None and v > bound
        return lambda f: (v := get(f)) is not None and v >= bound

    if op == "known":
        want = bool(raw)
        return lambda f: (f.get(key) is not None) is want
    if op == "has":
        if spec.kind != "list":
            raise KnowledgeError(f"{where}: operator has needs a list fact; {key} is {spec.kind}")
        item = raw
        return lambda f: item in (f.get(key) or ())
    if op in ("in", "not_in"):
        values = list(raw or [])
        if not values:
            raise KnowledgeError(f"{where}: operator {op} needs a non-empty list")
        for v in values:
            _check_value(spec, v, where)
        allowed = frozenset(values)
        if op == "in":
            return lambda f: f.get(key) in allowed
        return lambda f: f.get(key) not in allowed
    # is / is_not
    value = _resolve(raw, policy, where)
    _check_value(spec, value, where)
    if op == "is":
        return lambda f: f.get(key) == value
    return lambda f: f.get(key) != value
