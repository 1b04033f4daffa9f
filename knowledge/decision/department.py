"""The department stages of ``decide``: formulary, preferred agent, on-call line and the policy hash.

Three hooks, no-ops without an overlay (``knowledge/tables/overlay.py``) except for the policy hash:

- :func:`rank_options` (after scoring a role): options are ranked by verdict (and the engine's own
  tie-breaks, e.g. an earlier reaction's culprit last), then stocked before not stocked, then the
  department's preferred agent, then the exam's order of preference.
- :func:`stocked_choice` (after the engine's ``choose``): the default choice is the first stocked usual
  agent of the role (exams.yaml) whose verdict is suitable, with or without precautions. An agent that is
  not stocked is chosen only when the case requests it, or when no stocked usual agent suits the role:
  then the engine's choice stands and a caution says it is not stocked here (a stocked agent that is not
  advised is never chosen just because it is stocked).
- :func:`department_stage` (after the plans): marks each option stocked or "not stocked here" with its
  local label, adds a caution when a better-rated agent is not stocked, the on-call contact line, and the
  policy hash (``Decision.policy_version``) beside the knowledge version.
"""

from __future__ import annotations

from typing import Any

from ..tables import models as m

NOT_STOCKED = "Not stocked here"
_reason = m.constructor(m.Reason)  # Reason.model_construct, without its per-call work


def resolve_exam(code: str, k: Any) -> str:
    """A local procedure code of the overlay mapped to its exam id (an exam id passes unchanged)."""
    ov = k.overlay
    if ov is not None and code not in k.exams and code in ov.procedure_codes:
        return ov.procedure_codes[code]
    return code


def rank_options(k: Any, exam: m.Exam, role: m.ExamRole, scored: list) -> list:
    """A role's scored options in rank order: verdict, then (with an overlay) stocked before not stocked
    and the preferred agent, then the exam's order of preference."""
    ov = k.overlay
    if ov is None:
        scored.sort(key=lambda s: s.order)
        return scored
    preferred = ov.preferred_for(exam.id, role.route)
    stock = formulary(ov)
    # the engine's order is (verdict, its tie-breaks…, exam preference): the department's keys go
    # just before the exam preference
    scored.sort(key=lambda s: (*s.order[:-1], not (stock is None or s.agent.id in stock), s.agent.id != preferred,
                               s.order[-1]))
    return scored


def formulary(ov: Any) -> dict[str, Any] | None:
    """The overlay's formulary by agent id, as ``Overlay.stocked`` and ``Overlay.item`` read it (None: no
    formulary, every agent counts as stocked). Built once per stage: the overlay's own index is a private
    attribute, slow to reach once per option."""
    return None if ov.formulary is None else {f.agent: f for f in ov.formulary}


def stocked_choice(k: Any, case: m.Case, role: m.ExamRole, scored: list, chosen_id: str | None) -> str | None:
    """The default choice under a formulary: the first stocked usual agent of the role that is suitable
    (with or without precautions) and not the culprit of an earlier reaction; else the engine's choice.
    A requested agent, or no choice at all, is left as it is."""
    ov = k.overlay
    if ov is None or ov.formulary is None or chosen_id is None or case.agent in {s.agent.id for s in scored}:
        return chosen_id
    usual = set(role.agents)
    limit = m.Verdict.suitable_with_precautions.severity
    stock = formulary(ov)
    best = next((s for s in scored if s.agent.id in stock and s.agent.id in usual
                 and s.verdict.severity <= limit and not getattr(s, "culprit", False)), None)
    return best.agent.id if best is not None else chosen_id


def _strengths(agent: m.Agent) -> str:
    unit = {"mg_i_per_ml": "mg I/mL", "percent_w_v": "% w/v", "percent_w_w": "% w/w", "mmol_per_ml": "mmol/mL"}
    return ", ".join(f"{c.value:g} {unit.get(c.unit.value, c.unit.value)}" for c in agent.concentrations)


def department_stage(case: m.Case, k: Any, decision: m.Decision) -> m.Decision:
    """The decision with the department's formulary marks, cautions, on-call line and policy hash."""
    ov = k.overlay
    if ov is None:
        return decision.model_copy(update={"policy_version": k.policy_version})
    cautions = list(decision.cautions)
    not_stocked = f"{NOT_STOCKED} ({k.policy.name})"
    source = f"local policy {k.policy.id}"
    stock = formulary(ov)
    for rd in decision.roles:
        options = rd.options
        for o in options:
            # The options were built by this decide call and are not shared yet, so they are marked in
            # place (a copy of each cost a fifth of decide's time: benchmarks/bench_review.py).
            stocked = o.agent in stock if stock is not None else None
            item = stock.get(o.agent) if stock else None
            label = item.label if item else None
            o.__dict__.update(stocked=stocked, local_label=label)
            if stocked is False:
                o.reasons.append(_reason(
                    rule="department-formulary", text=not_stocked, verdict=None, source=source,
                    certainty=m.Certainty.common_practice))
            elif label:
                held = _strengths(k.agents[o.agent])
                o.actions.insert(0, f"Stocked here as {label!r}" + (f" (strengths held: {held})" if held else ""))
        chosen = next((o for o in options if o.chosen), None)
        if chosen is not None and chosen.stocked is False:
            if case.agent == chosen.agent:
                cautions.append(f"{chosen.name} ({rd.route.value}) is not stocked here (requested)")
            else:
                cautions.append(f"No stocked usual agent suits this role ({rd.route.value}, {rd.purpose}): "
                                f"{chosen.name} is shown as the choice but is not stocked here; obtain it or "
                                "choose another approach")
        elif chosen is not None:
            better = [o for o in options if o.stocked is False and o.verdict.severity < chosen.verdict.severity]
            if better:
                b = better[0]
                cautions.append(f"{b.name} ({rd.route.value}) is rated {b.verdict.value} but not stocked here; the "
                                f"stocked choice {chosen.name} is {chosen.verdict.value}")
    if ov.on_call:
        cautions.append(f"On call: {ov.on_call}")
    return decision.model_copy(update=dict(cautions=cautions, policy_version=k.policy_version, on_call=ov.on_call))
