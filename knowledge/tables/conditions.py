"""Compile and check rule conditions.

A condition is data (see :class:`knowledge.tables.models.Test`, ``All``, ``AnyOf``, ``Not``). At load it is
checked against the fact catalogue and the policy, then turned into a plain Python closure over a
dict of facts. Nothing is ever ``eval``'d.
"""

from __future__ import annotations

import operator
from typing import Any, Callable, NamedTuple

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
    test = _Operand(cond.operator, cond.fact, _fact_spec(cond, where, scope), cond.operand, policy, where)
    return OPERATORS[test.op](test)


class _Operand(NamedTuple):
    """One test being compiled: its operator, the fact's name and catalogue entry, the operand as written."""

    op: str
    key: str
    spec: Any
    raw: Any
    policy: m.Policy
    where: str


def _fact_spec(cond: m.Test, where: str, scope: m.Scope) -> Any:
    """The catalogue entry of the fact a test names; an unknown fact, or a per-agent fact in a case-scope
    rule, is a KnowledgeError."""
    spec = FACTS.get(cond.fact)
    if spec is None:
        near = suggest(cond.fact, FACTS)
        hint = f" (did you mean {near}?)" if near else ""
        raise KnowledgeError(f"{where}: unknown fact {cond.fact!r}{hint}; see `contrast-aid knowledge facts` for the "
                             "catalogue", field=where, value=cond.fact, suggestion=near,
                             allowed="the facts of `contrast-aid knowledge facts`")
    if scope is m.Scope.case and spec.scope == "agent":
        raise KnowledgeError(f"{where}: fact {cond.fact} is per agent; a case-scope rule cannot test it")
    return spec


#: the comparisons of the order operators (false when the fact is unknown)
_ORDER: dict[str, Callable[[Any, Any], bool]] = {"lt": operator.lt, "le": operator.le, "gt": operator.gt,
                                                  "ge": operator.ge}
#: the comparisons of the equality operators
_EQUALITY: dict[str, Callable[[Any, Any], bool]] = {"is": operator.eq, "is_not": operator.ne}


def _order_operand(t: _Operand) -> tuple[Callable[[Facts], Any], Any]:
    """How to read the fact and the bound it is compared with: a number (or a policy setting), or a
    severity (none < mild < moderate < severe)."""
    key = t.key
    is_severity = t.spec.kind == "enum" and t.spec.values == tuple(_SEVERITY_RANK)
    if t.spec.kind != "number" and not is_severity:
        raise KnowledgeError(f"{t.where}: operator {t.op} needs a numeric fact or a severity; {key} is {t.spec.kind}")
    if is_severity:
        if t.raw not in _SEVERITY_RANK:
            raise KnowledgeError(f"{t.where}: {t.raw!r} is not a severity; allowed: {', '.join(SEVERITY_RANK)}")
        return (lambda f: _SEVERITY_RANK[f.get(key) or "none"]), _SEVERITY_RANK[t.raw]
    bound = _resolve(t.raw, t.policy, t.where)
    if isinstance(bound, bool) or not isinstance(bound, (int, float)):
        raise KnowledgeError(f"{t.where}: operator {t.op} needs a number; got {t.raw!r}")
    return (lambda f: f.get(key)), bound


def _compile_order(t: _Operand) -> Compiled:
    get, bound = _order_operand(t)
    compare = _ORDER[t.op]
    return lambda f: (v := get(f)) is not None and compare(v, bound)


def _compile_known(t: _Operand) -> Compiled:
    key, want = t.key, bool(t.raw)
    return lambda f: (f.get(key) is not None) is want


def _compile_has(t: _Operand) -> Compiled:
    if t.spec.kind != "list":
        raise KnowledgeError(f"{t.where}: operator has needs a list fact; {t.key} is {t.spec.kind}")
    key, item = t.key, t.raw
    return lambda f: item in (f.get(key) or ())


def _compile_membership(t: _Operand) -> Compiled:
    values = list(t.raw or [])
    if not values:
        raise KnowledgeError(f"{t.where}: operator {t.op} needs a non-empty list")
    for v in values:
        _check_value(t.spec, v, t.where)
    key, allowed = t.key, frozenset(values)
    if t.op == "in":
        return lambda f: f.get(key) in allowed
    return lambda f: f.get(key) not in allowed


def _compile_equality(t: _Operand) -> Compiled:
    value = _resolve(t.raw, t.policy, t.where)
    _check_value(t.spec, value, t.where)
    key, compare = t.key, _EQUALITY[t.op]
    return lambda f: compare(f.get(key), value)


#: operator name -> its compiler (checks the operand against the fact, returns the closure)
OPERATORS: dict[str, Callable[[_Operand], Compiled]] = {
    "is": _compile_equality, "is_not": _compile_equality,
    "in": _compile_membership, "not_in": _compile_membership,
    "lt": _compile_order, "le": _compile_order, "gt": _compile_order, "ge": _compile_order,
    "has": _compile_has, "known": _compile_known,
}
