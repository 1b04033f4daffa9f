"""Widget logic in pure Python: build the app, set control values, assert on the decision it shows.

Clinical expectations come from the rules table (knowledge/data/rules.yaml) and its sources:
- barium-perforation: barium is contraindicated when perforation or leak is suspected (common practice:
  the clinical notes mark it checked, but name no source).
- renal-hydrate-low-egfr: eGFR below the policy's 30 without dialysis -> IV hydration indicated
  (ACR-NKF 2020 consensus statements, Radiology 2020).
- CKD-EPI 2021 creatinine equation (N Engl J Med 2021): 60-year-old man, creatinine 1.4 mg/dL -> 57.5.
"""

from __future__ import annotations


import datetime as dt

import pytest

from knowledge.tables import models as m
from widgets.app import ContrastAidApp as _App

#: every app in these tests runs on a fixed clock, never the wall clock
NOW = dt.datetime(2026, 3, 10, 14, 0)


def ContrastAidApp(**kwargs) -> _App:  # noqa: N802 - stands in for the class
    return _App(clock=lambda: NOW, **kwargs)


@pytest.fixture()
def app() -> _App:
    return ContrastAidApp()


def _cards(app: ContrastAidApp, role: int | None = None) -> list[str]:
    return list(app.option_cards())


def _option(decision: m.Decision, agent: str) -> m.Option:
    return next(o for r in decision.roles for o in r.options if o.agent == agent)


def test_app_is_a_vbox_with_test_hooks(app):
    import ipywidgets as w

    assert isinstance(app, w.VBox)
    assert "ca-exam" in app.exam.select._dom_classes
    assert "ca-decision" in app.panel._dom_classes
    assert "ca-egfr" in app.patient.egfr_readout._dom_classes
    assert app.option_cards() and all("class='ca-option" in c for c in app.option_cards())
    assert "local policy and the supervising radiologist decide" in app.caution.value
    assert app.decision is not None and app.errors == []


def test_exam_labels_are_grouped_by_modality_and_show_purpose(app):
    labels = [label for label, _ in app.exam.select.options]
    assert "CT · CT abdomen and pelvis" in labels
    order = [label.split(" · ")[0] for label in labels]
    assert order == sorted(order, key=["Fluoro", "Angio", "CT", "MRI", "US"].index)
    assert {"MRI", "US"} <= set(order)  # issue 13: the new modalities are grouped too
    app.exam.select.value = "fluoro-esophagram"
    assert app.knowledge.exams["fluoro-esophagram"].purpose in app.exam.purpose.value


def test_filter_narrows_and_selects_a_match(app):
    app.exam.filter.value = "esophagram"
    ids = [v for _, v in app.exam.select.options]
    assert "fluoro-esophagram" in ids and "ct-abdomen-pelvis" not in ids
    assert app.decision.exam == app.exam.select.value


def test_perforation_makes_barium_contraindicated(app):
    app.exam.select.value = "fluoro-esophagram"
    before = _option(app.decision, "barium-thin").verdict
    assert before is not m.Verdict.contraindicated
    app.patient.perforation_suspected.value = True
    assert _option(app.decision, "barium-thin").verdict is m.Verdict.contraindicated
    barium_cards = [c for c in _cards(app) if "Thin barium sulfate suspension" in c]
    assert barium_cards and "contraindicated" in barium_cards[0]
    assert "<details>" in barium_cards[0]  # ruled out: collapsed, with why
    assert "barium peritonitis" in barium_cards[0]
    chosen = next(o for o in app.decision.roles[0].options if o.chosen)
    assert chosen.family is m.Family.iodinated


def test_creatinine_gives_ckd_epi_egfr_and_low_egfr_needs_hydration(app):
    app.exam.select.value = "ct-abdomen-pelvis"
    p = app.patient
    p.age_years.value = "60"
    p.sex.value = "male"
    p.creatinine_value.value = "1.4"
    assert app.decision.renal.egfr == pytest.approx(57.5, abs=0.1)
    assert "57.5" in p.egfr_readout.value and "G3a" in p.egfr_readout.value
    assert not app.decision.renal.hydration_indicated
    p.creatinine_unit.value = "umol/L"
    p.creatinine_value.value = "300"  # 3.39 mg/dL -> eGFR about 20, G4
    assert app.decision.renal.category == "G4"
    assert app.decision.renal.hydration_indicated
    assert "Hydration indicated" in app.panel.blocks.value
    assert "hydration" in app.whatif_out.outputs[0]["data"]["text/plain"]


def test_out_of_range_value_is_named_and_decision_greyed(app):
    app.patient.age_years.value = "60"
    app.patient.sex.value = "female"
    app.patient.creatinine_value.value = "0.8"
    assert app.decision is not None
    app.patient.age_years.value = "130"
    assert app.decision is None and app.stale
    assert any("age_years" in e and "130" in e and "120" in e for e in app.errors)
    label = app.patient.errors["age_years"]
    assert "ca-error" in label._dom_classes and "130" in label.value and label.layout.display is None
    assert "ca-stale" in app.panel.body._dom_classes
    assert "Not updated" in app.panel.banner.value
    assert app.note.markdown == "" and "ca-download-md" not in app.note.links.value
    app.patient.age_years.value = "61"
    assert app.decision is not None and app.errors == [] and not app.stale
    assert label.layout.display == "none"
    assert "ca-stale" not in app.panel.body._dom_classes


def test_creatinine_outside_equation_range_is_an_error(app):
    p = app.patient
    p.age_years.value = "50"
    p.sex.value = "male"
    p.creatinine_unit.value = "umol/L"
    p.creatinine_value.value = "2500"  # 28 mg/dL: outside 0.1-20 mg/dL of CKD-EPI 2021
    assert app.decision is None
    assert app.errors and "creatinine" in app.errors[0]
    assert app.patient.errors["creatinine"].value


def test_text_that_is_not_a_number_is_reported(app):
    app.patient.weight_kg.value = "heavy"
    assert app.decision is None
    assert "weight_kg" in app.patient.errors["weight_kg"].value


def test_reaction_editor_add_and_remove(app):
    app.exam.select.value = "ct-abdomen-pelvis"
    ed = app.patient.reactions
    row = ed.add_row()
    row.severity.value = "moderate"
    assert app.decision.premedication.indicated
    second = ed.add_row(family="barium", kind="physiologic", severity="mild")
    assert len(app.case.patient.prior_reactions) == 2
    row.remove.click()
    assert len(app.case.patient.prior_reactions) == 1
    assert not app.decision.premedication.indicated
    second.remove.click()
    assert app.case.patient.prior_reactions == []


def test_query_prefill():
    app = ContrastAidApp(query="exam=ct-abdomen-pelvis&creatinine=1.4&unit=mg/dL&age=60&sex=male")
    assert app.exam.select.value == "ct-abdomen-pelvis"
    assert app.patient.creatinine_value.value == "1.4"
    assert app.decision.renal.egfr == pytest.approx(57.5, abs=0.1)
    assert "exam=ct-abdomen-pelvis" in app.query and "creatinine=1.4" in app.query


def test_query_with_bad_values_reports_them():
    app = ContrastAidApp(query="exam=no-such-exam&age=abc&sex=x")
    assert any("no-such-exam" in e for e in app.errors)
    assert any("sex" in e for e in app.errors)
    assert app.decision is None  # age 'abc' is invalid
    assert "abc" in app.patient.errors["age_years"].value


def test_from_environment(monkeypatch):
    monkeypatch.setenv("QUERY_STRING", "exam=fluoro-esophagram&perforation=1")
    monkeypatch.delenv("CONTRAST_AID_POLICY", raising=False)
    app = _App.from_environment(clock=lambda: NOW)
    assert app.decision.exam == "fluoro-esophagram"
    assert _option(app.decision, "barium-thin").verdict is m.Verdict.contraindicated


def test_each_app_has_its_own_knowledge():
    a, b = ContrastAidApp(), ContrastAidApp()
    assert a.knowledge is not b.knowledge
    a.patient.pregnant.value = True
    assert not b.patient.pregnant.value and not b.case.patient.pregnant


def test_plots_are_plotly_mimetype_outputs(app):
    p = app.patient
    p.age_years.value = "60"
    p.sex.value = "male"
    p.creatinine_value.value = "1.4"
    data = app.egfr_out.outputs[0]["data"]
    fig = data["application/vnd.plotly.v1+json"]
    marker = fig["data"][-1]
    assert marker["x"] == [57.5]
    assert "57.5" in data["text/plain"]
    strip = app.whatif_out.outputs[0]["data"]
    assert "application/vnd.plotly.v1+json" in strip and "45–120" in strip["text/plain"]


def test_timeline_shows_premedication_and_metformin(app):
    p = app.patient
    p.age_years.value = "60"
    p.sex.value = "male"
    p.creatinine_value.value = "3.4"
    p.takes_metformin.value = True
    p.reactions.add_row(severity="moderate")
    text = app.timeline_out.outputs[0]["data"]["text/plain"]
    assert "metformin" in text and "prednisone" in text
    assert "application/vnd.plotly.v1+json" in app.timeline_out.outputs[0]["data"]


def test_protocol_note_and_downloads(app):
    p = app.patient
    p.age_years.value = "60"
    p.sex.value = "male"
    p.creatinine_value.value = "1.4"
    md = app.note.markdown
    assert "CT abdomen and pelvis" in md and app.knowledge.version in md
    assert 'class="ca-download-md"' in app.note.links.value
    assert 'class="ca-download-html"' in app.note.links.value
    assert "data:text/markdown" in app.note.links.value


def test_knowledge_browser_filters(app):
    b = app.browser
    b.table.value = "agents"
    b.filter.value = "iodixanol"
    assert len(b.rows()) == 1 and "Iodixanol" in b.view.value
    b.table.value = "rules"
    b.filter.value = "barium-perforation"
    assert len(b.rows()) >= 1
    assert app.knowledge.version in b.header.value


def test_requested_agent_is_planned(app):
    app.exam.select.value = "ct-abdomen-pelvis"
    app.exam.agent.value = "iodixanol"
    chosen = next(o for o in app.decision.roles[0].options if o.chosen)
    assert chosen.agent == "iodixanol"
    assert "planned" in next(c for c in _cards(app) if "Iodixanol" in c)
