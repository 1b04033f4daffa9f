"""The plan at a glance (knowledge/present/summary.py) and the short note (report.short_note).

Clinical values are the default policy's and the tables' (knowledge/data), each source named beside it:
- CKD-EPI 2021 creatinine equation (NEJM 2021): woman, 71 years, 1.9 mg/dL -> eGFR 27.9, KDIGO 2012 G4.
- eGFR below 30 -> IV hydration (ACR-NKF 2020 consensus statements); weight-based plan 1 mL/kg/h from 1 h
  before to 6 h after the contrast (policy hydration_ml_kg_h, hydration_hours_before / _after).
- metformin withheld from the contrast when eGFR < 30 and restarted after a re-check at 48 h (ACR Manual).
- prior moderate allergic-like reaction -> elective 13-hour prednisone regimen: 50 mg at 13, 7 and 1 h
  before (ACR Manual on Contrast Media, premedication).
"""

from __future__ import annotations

import datetime as dt

import pytest

from knowledge.decision.engine import decide
from knowledge.decision.engine import parse_form_case as parse_case  # link text: the form path
from knowledge.present.links import case_from_query
from knowledge.present.report import SHORT_NOTE_MAX_LINES, protocol_note_markdown, short_note
from knowledge.present.summary import (clinical_verdict, clock, decision_changes, human_ago, human_duration,
                                       plan_summary, split_options)
from knowledge.tables import models as m
from knowledge.tables.loader import load_knowledge

CT = ("exam=ct-abdomen-pelvis&at=2026-12-02T09:00&asof=2026-12-01T15:00&creatinine=1.9&unit=mg/dL"
      "&measured=2026-11-28&age=71&sex=female&weight=68&height=162&metformin=1&iv_gauge=20&iv_site=antecubital"
      "&reaction=iodinated:allergic_like:moderate:iohexol")


@pytest.fixture(scope="module")
def k():
    return load_knowledge()


@pytest.fixture(scope="module")
def ct(k):
    case = parse_case(case_from_query(CT))
    return case, decide(case, k)


@pytest.mark.parametrize("hours,words", [(12.766, "12 h 46 min"), (0.5, "30 min"), (13, "13 h"), (48, "2 days"),
                                         (50, "2 days 2 h"), (1.999, "2 h")])
def test_human_duration(hours, words):
    assert human_duration(hours) == words


@pytest.mark.parametrize("days,words", [(0.4, "today"), (1, "yesterday"), (4, "4 days ago"), (20, "2 weeks ago"),
                                        (90, "3 months ago"), (800, "2 years ago")])
def test_human_ago(days, words):
    assert human_ago(days) == words


def test_clock_words():
    exam = dt.datetime(2026, 12, 2, 9, 0)
    assert clock(dt.datetime(2026, 12, 2, 8, 0), exam) == "08:00"
    assert clock(dt.datetime(2026, 12, 1, 20, 0), exam) == "20:00 the day before"
    assert clock(dt.datetime(2026, 12, 4, 9, 0), exam) == "Fri 04 Dec 09:00"


def test_summary_has_agent_dose_and_timed_actions(ct):
    case, d = ct
    s = plan_summary(d, case.scheduled_at)
    text = s.text()
    assert text.startswith("Plan: CT abdomen and pelvis")
    chosen = next(o for o in d.roles[0].options if o.chosen)
    # iohexol caused the earlier reaction: another low-osmolar agent is chosen
    assert chosen.agent != "iohexol" and f"Intravenous (optional): {chosen.name} 300 mg I/mL" in text
    assert "0.9% sodium chloride 68 mL/h from 08:00 to 15:00 (476 mL)" in text  # 68 kg x 1 mL/kg/h, 7 h
    assert "prednisone 50 mg at 20:00 the day before, 02:00, 08:00" in text  # 13, 7 and 1 h before 09:00
    assert "Metformin: hold from 09:00 until kidney function is re-checked (Fri 04 Dec 09:00)" in text  # 48 h
    assert s.first == []


def test_summary_says_first_when_nothing_can_be_given(ct):
    _, d = ct
    blocked = d.model_copy(update={"roles": [r.model_copy(update={"options": [
        o.model_copy(update={"verdict": m.Verdict.contraindicated}) for o in r.options]}) for r in d.roles]})
    s = plan_summary(blocked)
    assert s.first and s.first[0].startswith("Nothing can be given")
    assert s.lines()[1] == s.first[0]  # said before anything else


def test_alerts_are_shown_when_the_decision_has_them(ct):
    _, d = ct
    alert = {"level": "stop", "text": "Example stop", "rule": "r", "source": "s"}
    with_alerts = d.model_copy(update={"alerts": [alert]}) if "alerts" in m.Decision.model_fields else None
    if with_alerts is None:  # before the engine gives alerts: read with getattr, none shown
        assert plan_summary(d).alerts == []
    else:
        assert plan_summary(with_alerts).alerts == [("stop", "Example stop")]


def test_what_changed_names_verdicts_and_chosen_agents(k):
    before = decide({"exam": "fluoro-esophagram"}, k)
    after = decide({"exam": "fluoro-esophagram", "patient": {"perforation_suspected": True}}, k)
    changes = decision_changes(before, after)
    # barium is contraindicated when perforation or leak is suspected (rule barium-perforation, common practice)
    assert "Thin barium sulfate suspension (oral): suitable → contraindicated" in changes
    assert any(c.startswith("oral agent chosen: Thin barium sulfate suspension → ") for c in changes)
    assert decision_changes(after, after) == [] and decision_changes(None, after) == []


def test_other_agents_possible_by_the_route_keep_their_clinical_verdict(ct):
    _, d = ct
    usual, other = split_options(d.roles[1])  # oral role of CT abdomen and pelvis
    exam_agents = {"barium-dilute-ct", "water", "iodinated-oral-dilute"}
    assert {o.agent for o in usual} >= exam_agents
    assert other and all(o.agent not in exam_agents for o in other)
    # thin barium by mouth is possible, not a CT agent: not advised only for that reason; clinically suitable
    barium = next(o for o in other if o.agent == "barium-thin")
    assert barium.verdict is m.Verdict.not_advised and clinical_verdict(barium) is m.Verdict.suitable


def test_short_note_fits_twelve_lines_with_the_inputs_used(ct, k):
    case, d = ct
    note = short_note(d, k, case)
    lines = note.splitlines()
    assert len(lines) <= SHORT_NOTE_MAX_LINES
    assert lines[0] == "Contrast plan: CT abdomen and pelvis, exam Wed 02 Dec 2026 09:00"
    assert "71 years, female, 68 kg; creatinine 1.9 mg/dL (2026-11-28, 4 days ago); eGFR 27.9" in lines[1]
    assert "earlier allergic-like reaction (moderate) to iohexol" in note and "takes metformin" in note
    assert f"knowledge {d.knowledge_version}" in note and "made for Tue 01 Dec 2026 15:00" in note


def test_full_note_lists_each_source_once(ct, k):
    case, d = ct
    md = protocol_note_markdown(d, k, case.scheduled_at, case)
    sources = md.split("## Sources", 1)[1].split("## ", 1)[0]
    items = [line for line in sources.splitlines() if line.startswith("- [")]
    texts = [line.split("] ", 1)[1] for line in items]
    assert texts and len(texts) == len(set(texts))
    # the reasons cite them by number, not in full
    why = [line for line in md.splitlines() if line.startswith("- Why:")]
    assert why and all(line.rstrip().endswith("]") and "[" in line for line in why)
    assert "## Inputs used" in md and "- Age: 71 years" in md
    # people's times: no '13.0 h' style durations
    assert "for 2 days" in md and "for 48 h" not in md


def test_a_refused_request_says_no_agent_planned_and_the_stop_alert_first(k):
    # the culprit of an earlier moderate allergic-like reaction is not planned again by default
    # (ACR Manual on Contrast Media, allergic-like reactions; rule text in knowledge/data/rules.yaml)
    d = decide({"exam": "ct-abdomen-pelvis", "agent": "iohexol", "patient": {"prior_reactions": [
        {"agent_family": "iodinated", "kind": "allergic_like", "severity": "moderate", "agent": "iohexol"}]}}, k)
    lines = plan_summary(d).lines()
    assert lines[1].startswith("Intravenous (optional): no agent planned (usable: Iopamidol")
    stop = next(i for i, x in enumerate(lines) if x.startswith("STOP: Iohexol was requested"))
    assert stop < next(i for i, x in enumerate(lines) if x.startswith("Premedication"))
