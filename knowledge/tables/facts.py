"""The fact catalogue: every name a rule condition may test, with its type and allowed values.

Rules are validated against this catalogue at load, so a misspelt fact or value fails
``contrast-aid knowledge check`` instead of silently never matching.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from . import models as m


@dataclass(frozen=True)
class FactSpec:
    name: str
    kind: str  # "bool", "number", "enum", "text", "list"
    description: str
    values: tuple[str, ...] = ()
    scope: str = "case"  # "case" facts are known once; "agent" facts per role and agent


def _enum(e: type) -> tuple[str, ...]:
    return tuple(x.value for x in e)


SEVERITIES = _enum(m.Severity)

FACTS: dict[str, FactSpec] = {}


def _add(name: str, kind: str, description: str, values: tuple[str, ...] = (), scope: str = "case") -> None:
    FACTS[name] = FactSpec(name, kind, description, values, scope)


# patient fields, straight from the case
for _name, _field in m.Patient.model_fields.items():
    if _name in {"creatinine", "prior_reactions", "iv_access"}:
        continue
    _ann = _field.annotation
    if _ann is bool:
        _add(f"patient.{_name}", "bool", _field.description or _name)
    elif _name == "dialysis":
        _add("patient.dialysis", "enum", _field.description or "", _enum(m.Dialysis))
    elif _name == "obstruction":
        _add("patient.obstruction", "enum", _field.description or "", _enum(m.Obstruction))
    elif _name == "sex":
        _add("patient.sex", "enum", _field.description or "", ("female", "male"))
    else:
        _add(f"patient.{_name}", "number", _field.description or _name)

_add("case.urgency", "enum", "elective, urgent or emergency", _enum(m.Urgency))
_add("history.delayed_worst", "enum", "Worst earlier delayed (mostly skin) reaction to any agent", SEVERITIES)
_add("renal.egfr", "number", "eGFR in use, mL/min/1.73 m² (unknown if it cannot be worked out)")
_add("renal.category", "enum", "KDIGO 2012 G category", ("G1", "G2", "G3a", "G3b", "G4", "G5"))
_add("history.allergic_like_worst", "enum", "Worst earlier allergic-like reaction to any agent", SEVERITIES)
_add("history.physiologic_worst", "enum", "Worst earlier physiologic reaction to any agent", SEVERITIES)
_add("policy.metformin_hold_first_pass", "bool", "Policy: withhold metformin for first-pass arterial studies")
_add("exam.id", "text", "Exam id")
_add("exam.modality", "enum", "Exam modality", _enum(m.Modality))
_add("exam.contrast", "enum", "Whether the exam uses contrast", _enum(m.ContrastUse))
_add("exam.tags", "list", "Exam tags")
_add("exam.has_intravascular_role", "bool", "The exam gives contrast intravenously or intra-arterially")

# per role and agent
_add("role.route", "enum", "Route of the role", _enum(m.Route), "agent")
_add("role.intravascular", "bool", "Route is intravenous or intra-arterial", scope="agent")
_add("role.renal_exposure", "enum", "Renal exposure of the dose", _enum(m.RenalExposure), "agent")
_add("role.territory", "enum", "Vascular territory", _enum(m.Territory), "agent")
_add("role.catheter_study", "bool", "Catheter study", scope="agent")
_add("agent.id", "text", "Agent id", scope="agent")
_add("agent.family", "enum", "Agent family", _enum(m.Family), "agent")
_add("agent.class", "enum", "Agent class", _enum(m.AgentClass), "agent")
_add("agent.form", "enum", "Physical form", _enum(m.Form), "agent")
_add("agent.osmolality_class", "enum", "Osmolality class (iodinated only)", _enum(m.OsmolalityClass), "agent")
_add("agent.ionicity", "enum", "Ionic or non-ionic (iodinated only)", _enum(m.Ionicity), "agent")
_add("agent.labelled_for_route", "bool", "The agent's routes include the role's route", scope="agent")
_add("agent.usual_for_role", "bool", "The exam lists the agent for this role", scope="agent")
_add("history.allergic_like_same_family", "enum", "Worst allergic-like reaction to this agent's family",
     SEVERITIES, "agent")
_add("history.physiologic_same_family", "enum", "Worst physiologic reaction to this agent's family",
     SEVERITIES, "agent")
_add("history.culprit_agent", "bool", "This very agent caused an earlier reaction", scope="agent")
_add("history.culprit_severity", "enum", "Worst earlier reaction (any kind) this very agent caused",
     SEVERITIES, "agent")
_add("history.culprit_allergic_severity", "enum",
     "Worst earlier allergic-like or delayed reaction this very agent caused", SEVERITIES, "agent")
_add("history.delayed_same_family", "enum", "Worst delayed (mostly skin) reaction to this agent's family",
     SEVERITIES, "agent")
_add("history.breakthrough_same_family", "bool",
     "An allergic-like reaction to this agent's family happened despite premedication", scope="agent")

# ---- MRI and ultrasound (issue 13) ----
_add("policy.gbca_group_ii_egfr_screening", "bool", "Policy: ask for an eGFR before group II gadolinium agents")
_add("policy.gbca_low_egfr_precautions", "bool", "Policy: group II/III gadolinium with low eGFR as a precaution")
_add("policy.gbca_linear_iv_restricted", "bool", "Policy: EMA 2017 restriction of intravenous linear gadolinium agents")
_add("agent.gbca_group", "enum", "ACR Manual NSF group of a gadolinium agent (I, II, III)", _enum(m.GbcaGroup), "agent")
_add("agent.gbca_structure", "enum", "Gadolinium chelate structure", _enum(m.GbcaStructure), "agent")
_add("agent.hepatobiliary", "enum", "Hepatobiliary uptake of a gadolinium agent", _enum(m.Hepatobiliary), "agent")
_add("agent.mri_signal", "enum", "Effect of a luminal MRI agent on signal", _enum(m.MriSignal), "agent")
_add("agent.excipients", "list", "Excipients that matter for hypersensitivity (e.g. polyethylene glycol)",
     scope="agent")


def catalogue_rows() -> list[dict[str, Any]]:
    """The catalogue as rows, for documentation and the knowledge browser."""
    return [
        {"fact": f.name, "kind": f.kind, "scope": f.scope, "values": ", ".join(f.values), "description": f.description}
        for f in FACTS.values()
    ]
