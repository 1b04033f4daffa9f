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
import html

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
    assert any(e.startswith("Age:") and "130" in e and "120" in e for e in app.errors)  # the form's label
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
    # said in the unit typed: 0.1-20 mg/dL is 9-1768 umol/L (x 88.4)
    assert app.errors and app.errors[0] == "Creatinine: 2500 µmol/L is out of range; allowed: 9–1768 µmol/L"
    assert app.patient.errors["creatinine"].value


def test_text_that_is_not_a_number_is_reported(app):
    app.patient.weight_kg.value = "heavy"
    assert app.decision is None
    assert app.patient.errors["weight_kg"].value.startswith("Weight: ")  # the form's label, not the path


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


def test_egfr_plot_lines_follow_the_exams_agents(app):
    # CT: the iodinated policy lines (default profile: hydrate and hold metformin at 30, ACR-NKF 2020 / ACR
    # Manual; consider prophylaxis at 45); MRI: only the gadolinium NSF line at 30 (ACR Manual), no metformin
    p = app.patient
    p.age_years.value = "60"
    p.sex.value = "male"
    p.creatinine_value.value = "1.4"

    def notes():
        fig = app.egfr_out.outputs[0]["data"]["application/vnd.plotly.v1+json"]
        return [a["text"] for a in fig["layout"]["annotations"]]

    assert notes() == ["<b>30</b> hydrate (IV), hold metformin", "<b>45</b> consider prophylaxis"]
    app.exam.select.value = "mr-brain-contrast"
    assert notes() == ["<b>30</b> gadolinium: NSF risk"]


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


# ---- the plan on top (issue 10) -------------------------------------------------------------------
def test_summary_hooks_copy_text_and_what_changed(app):
    assert "ca-summary" in app.summary.body._dom_classes
    buttons = app.summary.buttons.value
    assert 'class="ca-copy-summary' in buttons and 'class="ca-copy-link' in buttons
    assert app.summary.text.startswith("Plan: CT abdomen and pelvis")
    assert f'data-ca-copy-link="{html.escape(app.query)}"' in buttons
    assert app.summary.changes.value == ""  # nothing to compare on the first view
    app.exam.select.value = "fluoro-esophagram"
    app.patient.perforation_suspected.value = True
    changes = app.summary.changes.value
    assert "ca-changes" in changes
    # barium-perforation (common practice): barium is contraindicated when a leak is suspected
    assert "Thin barium sulfate suspension (oral): suitable → contraindicated" in html.unescape(changes)
    app.patient.weight_kg.value = "70"  # no dose for a swallow: the plan does not change, and it says so
    assert "nothing in the plan" in app.summary.changes.value
    app.patient.pregnant.value = True  # a new caution is a change
    assert "new caution: Pregnant" in app.summary.changes.value


def test_only_the_plots_that_apply_are_shown(app):
    # CT abdomen and pelvis has an intravenous role: the kidney plots apply
    assert app.plot_boxes["egfr"].layout.display is None and app.plot_boxes["whatif"].layout.display is None
    app.exam.select.value = "fluoro-esophagram"  # oral only: no renal exposure, no dose, no timed action
    assert all(box.layout.display == "none" for box in app.plot_boxes.values())
    assert app.plots_box.layout.display == "none"


def test_other_agents_possible_by_the_route_are_folded_apart(app):
    app.patient.age_years.value = "60"
    oral = app.panel.roles_box.children[1].ruled.value  # CT abdomen and pelvis, oral role
    assert "Other agents possible by this route" in oral and "<details class='ca-other'>" in oral
    assert "protocol order 1" in app.option_cards()[0] and "rank" not in app.option_cards()[0]


def test_stale_creatinine_is_flagged_at_the_egfr_readout():
    # the default policy accepts a creatinine up to 30 days old for an outpatient
    # (creatinine_max_age_days_outpatient, ACR Manual on Contrast Media)
    app = ContrastAidApp(query="exam=ct-abdomen-pelvis&at=2026-03-11T09:00&asof=2026-03-10T14:00&creatinine=1.0"
                               "&unit=mg/dL&measured=2026-01-01&age=70&sex=male")
    readout = app.patient.egfr_readout.value
    assert "Creatinine too old" in readout and "2 months ago" in readout  # 69 days and "last 30 days" in readout


def test_short_note_and_copy_button(app):
    text = app.note.text
    assert 0 < len(text.splitlines()) <= 12
    assert 'class="ca-copy-note' in app.note.short.value
    assert html.escape(text) in app.note.short.value


def test_creatinine_in_the_wrong_unit_says_so(app):
    app.patient.creatinine_value.value = "99"  # mg/dL chosen
    assert app.decision is None
    assert "did you mean µmol/L?" in app.patient.errors["creatinine"].value
    assert "ca-invalid" in app.patient.creatinine_value._dom_classes


def test_an_edited_link_applied_to_the_page_says_what_changed(app):
    app.open_link("http://127.0.0.1:8866/?exam=fluoro-esophagram&age=50")
    assert app.decision.exam == "fluoro-esophagram" and app.patient.age_years.value == "50"
    first = app.query
    app.open_link("?" + first + "&perforation=1")  # the same link, edited
    assert app.patient.perforation_suspected.value is True and app.patient.age_years.value == "50"
    assert "suitable → contraindicated" in html.unescape(app.summary.changes.value)
    app.open_link("exam=fluoro-esophagram")  # a link without the age: the form is cleared first
    assert app.patient.age_years.value == "" and app.patient.perforation_suspected.value is False
