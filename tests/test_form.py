"""One description of the case, used everywhere: the form, the link, the note and the facts all come from
the case models (knowledge/tables/models.py), so a new field cannot be silently dropped by one of them.

- every case field round-trips through the link codec and through the dashboard's form;
- guard: every Patient field has a form control, a link key, a fact (or a stated reason why not) and a
  line in the note;
- a field added to the model appears in the form description, the link and the note with no other edit.
"""

from __future__ import annotations

import datetime as dt
from typing import Any, Literal

import pytest
from pydantic import Field

from knowledge.decision.engine import parse_form_case as parse_case  # typed text: the form path
from knowledge.present import form
from knowledge.present.form import FieldSpec, case_specs, typed_case
from knowledge.present.links import case_from_query, link_keys, query_from_case
from knowledge.present.report import case_input_lines
from knowledge.tables import models as m
from knowledge.tables.facts import FACTS
from knowledge.tables.loader import load_knowledge

NOW = dt.datetime(2026, 3, 10, 14, 0)

#: values that must refer to the tables (an exam, an agent it uses, a culprit of the right family)
SEMANTIC = {"exam": "ct-abdomen-pelvis", "agent": "iohexol", "patient.prior_reactions.agent": "iohexol",
            "patient.prior_reactions.agent_family": "iodinated", "patient.creatinine.unit": "umol/L",
            "patient.creatinine.value": 150.0, "planned_concentration_mg_i_ml": 300.0}
#: Patient fields that no rule tests directly, with the fact they reach the rules through (or why none)
NOT_A_PATIENT_FACT = {
    "creatinine": "renal.egfr",  # through the eGFR equations
    "prior_reactions": "history.allergic_like_worst",  # through the reaction-history facts
    "iv_access": None,  # the dose plan's access check (knowledge/decision/plans.py), not a rule input
}


def _value(spec: FieldSpec) -> Any:
    """A valid value different from the field's default."""
    if spec.path in SEMANTIC:
        return SEMANTIC[spec.path]
    if spec.kind == "bool":
        return True
    if spec.kind == "choice":
        default = getattr(spec.default, "value", spec.default)
        return next(v for _, v in reversed(spec.choices) if v != default)
    if spec.kind in ("number", "integer"):
        low = spec.low if spec.low is not None else 0.0
        high = spec.high if spec.high is not None else low + 10.0
        x = round((low + high) / 2)
        return int(x) if spec.kind == "integer" else float(x)
    if spec.kind == "datetime":
        return dt.datetime(2026, 3, 11, 9, 30)
    if spec.kind == "date":
        return dt.date(2026, 3, 1)
    if spec.kind == "model":
        return {c.name: _value(c) for c in spec.children}
    if spec.kind == "list" and spec.children:
        return [{c.name: _value(c) for c in spec.children}]
    if spec.kind == "list":
        return [spec.choices[0][1]]
    return "x"


def full_case() -> m.Case:
    """A case with every field of Case and Patient set to a non-default value."""
    data: dict[str, Any] = {}
    for spec in case_specs():
        if spec.name == "patient":
            data["patient"] = {c.name: _value(c) for c in spec.children}
        else:
            data[spec.name] = _value(spec)
    return parse_case(data)


def _set_fields(case: m.Case) -> set[str]:
    """Every leaf path of the case that differs from its default."""
    out: set[str] = set()

    def walk(prefix: str, data: Any) -> None:
        if isinstance(data, dict):
            for k, v in data.items():
                walk(f"{prefix}.{k}" if prefix else k, v)
        elif isinstance(data, list) and data and isinstance(data[0], dict):
            for item in data:
                walk(prefix, item)
        else:
            out.add(prefix)

    walk("", case.model_dump(exclude_defaults=True))
    return out


def test_full_case_sets_every_field():
    # guards the generator below: if a field kept its default, the round trips would not test it
    assert _set_fields(full_case()) == set(form.all_paths())


def test_every_case_field_round_trips_through_the_link():
    case = full_case()
    query = query_from_case(case)
    assert parse_case(typed_case(case_from_query(query))) == case
    # every leaf path has its own key
    keys = link_keys()
    assert set(keys) >= set(form.all_paths()) - {p for p in form.all_paths() if p.startswith("patient.prior_reactions.")}
    flat = [k for p, k in keys.items()]
    assert len(flat) == len(set(flat)), "two fields share a link key"


def test_every_case_field_round_trips_through_the_form():
    from widgets.app import ContrastAidApp

    case = full_case()
    app = ContrastAidApp(clock=lambda: NOW, query=query_from_case(case))
    assert app.link_notes == []
    assert parse_case(typed_case(app.case_data())) == case
    # and the case model mirrors the form: every Patient field is a trait of it (one flat namespace, so a
    # Patient field may not share a Case field's name)
    assert not set(m.Case.model_fields) & set(m.Patient.model_fields)
    assert set(app.model.patient_names) == set(m.Patient.model_fields)
    assert set(app.model.case_names) == set(m.Case.model_fields) - {"patient"}


def test_guard_every_patient_field_has_a_control_a_link_key_a_fact_and_a_note_line():
    from widgets.inputs import PatientPanel

    k = load_knowledge()
    panel = PatientPanel(k)
    keys = link_keys()
    case = full_case()
    note = "\n".join(case_input_lines(case))
    for name, field in m.Patient.model_fields.items():
        spec = form._find(f"patient.{name}")
        assert spec is not None
        # a form control
        assert hasattr(panel, name) or name in {"creatinine", "iv_access", "prior_reactions"}, name
        # a link key
        assert any(p == f"patient.{name}" or p.startswith(f"patient.{name}.") for p in keys), name
        # a fact a rule can test (or the derived fact / reason stated above)
        assert f"patient.{name}" in FACTS or name in NOT_A_PATIENT_FACT, f"no fact for patient.{name}"
        if NOT_A_PATIENT_FACT.get(name):
            assert NOT_A_PATIENT_FACT[name] in FACTS
        # a line in the note, under the form's label
        assert f"{spec.label}:" in note, name


def test_a_new_patient_field_appears_in_form_link_and_note(monkeypatch):
    """Add two fields to the model (a flag and a choice) and nothing else: they are in the form
    description (in the default group), the link and the note."""

    class NewPatient(m.Patient):
        pheochromocytoma_suspected: bool = Field(False, description="Pheochromocytoma suspected")
        trimester: Literal["none", "first", "second", "third"] = Field("none", description="Trimester of pregnancy")

    class NewCase(m.Case):
        patient: NewPatient = Field(default_factory=NewPatient, description="Patient factors")

    monkeypatch.setattr(m, "Case", NewCase)
    monkeypatch.setattr(m, "Patient", NewPatient)
    groups = form.patient_specs()
    other = [s.name for s in groups[form.DEFAULT_GROUP]]
    assert "pheochromocytoma_suspected" in other and "trimester" in other
    case = NewCase.model_validate({"exam": "ct-abdomen-pelvis",
                                   "patient": {"pheochromocytoma_suspected": True, "trimester": "second"}})
    query = query_from_case(case)
    assert "pheochromocytoma_suspected=1" in query and "trimester=second" in query
    assert NewCase.model_validate(typed_case(case_from_query(query))) == case
    lines = case_input_lines(case)
    assert "Pheochromocytoma suspected: yes" in lines and "Trimester of pregnancy: second" in lines


@pytest.mark.parametrize("typed,expected", [("60", 60.0), ("1,4", 1.4), ("", None), ("abc", "abc")])
def test_typed_numbers_are_read_by_the_form(typed, expected):
    spec = form._find("patient.age_years")
    assert form.typed_value(spec, typed) == expected


def test_messages_use_the_form_labels():
    assert form.field_message("patient.age_years", "patient.age_years: 130 is out of range; allowed: at most 120") \
        == "Age: 130 is out of range; allowed: at most 120"
    assert form.field_message("patient.iv_access.gauge", "patient.iv_access.gauge: 30 is out of range") \
        == "IV catheter gauge: 30 is out of range"


def test_creatinine_in_the_other_unit_is_flagged():
    # 0.1-20 mg/dL is the equations' range (kidney.CREATININE_MG_DL_RANGE); 1 mg/dL = 88.4 umol/L
    assert form.creatinine_message(99, "mg/dL") == ("Creatinine: 99 mg/dL is outside 0.1–20 mg/dL — did you "
                                                    "mean µmol/L?")
    assert form.creatinine_message(1.1, "umol/L").endswith("did you mean mg/dL?")
    assert form.creatinine_message(1.1, "mg/dL") is None and form.creatinine_message(97, "umol/L") is None
    assert form.creatinine_message(2500, "umol/L") == "Creatinine: 2500 µmol/L is out of range; allowed: 9–1768 µmol/L"
