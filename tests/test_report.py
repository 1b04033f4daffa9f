"""Pure knowledge helpers behind the dashboard: links, the eGFR what-if, the protocol note, input hints.

Thresholds come from the default policy (ACR-NKF 2020 consensus, Radiology 2020: IV hydration below
eGFR 30, prophylaxis considered 30-44) and the KDIGO 2012 G-category bounds (Kidney Int Suppl 2013,
Table 5); the worked eGFR is CKD-EPI 2021 (N Engl J Med 2021).
"""

from __future__ import annotations

import base64

import pytest

from knowledge.tables import models as m
from knowledge.decision.engine import parse_case, parse_form_case
from knowledge.present.form import case_problems, creatinine_hint, field_range, hint
from knowledge.present.links import case_from_query, query_from_case
from knowledge.tables.loader import load_knowledge
from knowledge.decision.engine import decide
from knowledge.present.report import (data_uri, knowledge_tables, protocol_note_html, protocol_note_markdown, timeline,
                              volumes_by_strength)
from knowledge.present.whatif import breakpoints, egfr_sweep, verdict_at


@pytest.fixture(scope="module")
def k():
    return load_knowledge()


CT = {"exam": "ct-abdomen-pelvis", "patient": {"age_years": 60, "sex": "male",
                                               "creatinine": {"value": 1.4, "unit": "mg/dL"}}}


def test_case_from_query_and_back():
    q = ("exam=ct-abdomen-pelvis&creatinine=1.4&unit=mg/dL&age=60&sex=male&metformin=1"
         "&reaction=iodinated:allergic_like:moderate:iohexol")
    data = case_from_query(q)
    case = parse_form_case(data)  # a link is the form path: values are strings
    assert case.patient.creatinine.value == 1.4 and case.patient.age_years == 60
    assert case.patient.takes_metformin
    assert case.patient.prior_reactions[0].agent == "iohexol"
    # the same keys and values (links are written in the model's field order)
    assert sorted(query_from_case(case).split("&")) == sorted(q.split("&"))
    assert query_from_case(parse_form_case(case_from_query(query_from_case(case)))) == query_from_case(case)
    assert parse_form_case(case_from_query(query_from_case(case))) == case


def test_exam_time_and_sample_date_travel_in_the_link():
    q = "exam=ct-angiography-aorta&at=2026-12-02T09:00&creatinine=1.9&unit=mg/dL&measured=2026-11-30&diabetes=1"
    case = parse_form_case(case_from_query(q))
    assert case.scheduled_at.isoformat() == "2026-12-02T09:00:00"
    assert str(case.patient.creatinine.measured_on) == "2026-11-30" and case.patient.diabetes
    # the same keys and values (links are written in the model's field order)
    assert sorted(query_from_case(case).split("&")) == sorted(q.split("&"))
    assert query_from_case(parse_form_case(case_from_query(query_from_case(case)))) == query_from_case(case)


def test_query_ignores_unknown_keys_and_maps_units():
    data = case_from_query("?exam=fluoro-esophagram&name=someone&creatinine=120&unit=umol/l&voila-token=x")
    assert data == {"exam": "fluoro-esophagram", "patient": {"creatinine": {"value": "120", "unit": "umol/L"}}}


def test_bad_query_value_is_left_for_validation():
    problems = case_problems(case_from_query("exam=ct-abdomen-pelvis&age=abc&perforation=maybe"))
    fields = [f for f, _ in problems]
    assert "patient.age_years" in fields and "patient.perforation_suspected" in fields


def test_breakpoints_include_policy_and_kdigo_bounds(k):
    cuts = breakpoints(k)
    for x in (15, 30, 45, 60, 90):  # KDIGO 2012 Table 5 bounds
        assert x in cuts
    assert k.policy.egfr_hydration_below in cuts


def test_egfr_sweep_changes_at_policy_thresholds(k):
    w = egfr_sweep(CT, k)
    assert w.route is m.Route.intravenous
    assert w.segments[0].low == 5 and w.segments[-1].high == 120
    low = verdict_at(w, 20)
    assert low.hydration and low.verdict is m.Verdict.suitable_with_precautions
    assert not verdict_at(w, 35).hydration  # ACR-NKF 2020: 30-44 hydration not routinely indicated
    assert verdict_at(w, 35).verdict is m.Verdict.suitable_with_precautions
    assert verdict_at(w, 80).verdict is m.Verdict.suitable
    edges = [s.low for s in w.segments[1:]]
    assert 30 in edges and 45 in edges


def test_egfr_sweep_without_intravascular_role(k):
    w = egfr_sweep({"exam": "fluoro-esophagram"}, k)
    assert w.segments == () and "no intravascular" in w.note


def test_protocol_note_names_exam_agent_sources_and_version(k):
    d = decide(CT, k)
    md = protocol_note_markdown(d, k)
    assert md.startswith("# Contrast protocol note: CT abdomen and pelvis")
    assert "Decision support only" in md
    chosen = next(o for o in d.roles[0].options if o.chosen)
    assert f"Agent: {chosen.name}" in md
    assert "eGFR 57.5" in md and "G3a" in md
    assert k.version in md and k.policy.id in md
    html = protocol_note_html(d, k)
    assert html.startswith("<!DOCTYPE html>") and "<h1>" in html and "Contrast protocol note" in html


def test_note_escapes_html(k):
    # Text that reaches the note (exam name, cautions, reasons) is escaped: a hostile string put into the
    # decision comes out as entities, never as markup. Without html.escape this fails.
    d = decide({"exam": "ct-abdomen-pelvis", "patient": {"takes_metformin": True}}, k)
    hostile = '<script>alert("x")</script><img src=x onerror=alert(1)>'
    first = d.roles[0].options[0]
    reason = first.reasons[0] if first.reasons else m.Reason(rule="r", text="t", source="s",
                                                             certainty=m.Certainty.common_practice)
    d = d.model_copy(update={
        "exam_name": hostile, "cautions": [hostile, *d.cautions],
        "roles": [d.roles[0].model_copy(update={"options": [first.model_copy(update={
            "name": hostile, "reasons": [reason.model_copy(update={"text": hostile})]})]})]})
    page = protocol_note_html(d, k)
    assert "<script" not in page.lower() and "<img src=x" not in page.lower()
    assert "&lt;script&gt;" in page and "&lt;img src=x onerror=alert(1)&gt;" in page


def test_timeline_premedication_metformin(k):
    case = parse_case({"exam": "ct-abdomen-pelvis", "patient": {
        "age_years": 60, "sex": "male", "creatinine": {"value": 3.4, "unit": "mg/dL"}, "takes_metformin": True,
        "prior_reactions": [{"agent_family": "iodinated", "kind": "allergic_like", "severity": "moderate"}]}})
    d = decide(case, k)
    items = timeline(d, k)
    pre = [i for i in items if i.kind == "premedication"]
    assert pre and min(i.start_h for i in pre) == -13  # prednisone 13 h regimen (ACR Manual)
    met = next(i for i in items if i.kind == "metformin")
    assert met.start_h == 0 and met.end_h == 48  # ACR Manual: withhold 48 h


def test_volumes_by_strength(k):
    # 40 g I at 300 mg I/mL is 133.3 mL; at 350, 114.3 mL (volume = g * 1000 / strength)
    pairs = dict(volumes_by_strength(40, k.agents["iohexol"]))
    assert pairs[300] == pytest.approx(133.33, abs=0.01) and pairs[350] == pytest.approx(114.29, abs=0.01)


def test_data_uri_round_trip():
    uri = data_uri("µmol/L note", "text/markdown")
    assert base64.b64decode(uri.split(",", 1)[1]).decode("utf-8") == "µmol/L note"


def test_input_hints_from_models():
    assert field_range(m.Patient, "age_years") == (0, 120)
    assert hint("age_years") == "0–120 years"
    assert creatinine_hint("mg/dL") == "0.1–20 mg/dL"
    assert creatinine_hint("umol/L") == "9–1768 µmol/L"  # 0.1 and 20 mg/dL x 88.4


def test_knowledge_tables(k):
    t = knowledge_tables(k)
    assert len(t["exams"]) == len(k.exams) and len(t["rules"]) == len(k.rules)
    assert any(r["setting"] == "egfr_hydration_below" and r["value"] == 30 for r in t["policy"])
