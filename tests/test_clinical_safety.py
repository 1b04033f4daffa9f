"""Issue 8, clinical safety: invariants over every exam, and the results reaching the CLI, note and dashboard.

Sources of the expectations (see knowledge/data/sources.yaml):
- ACR-AAAAI consensus, Radiology 2025, and ESUR Guidelines on Contrast Agents v10: use a different agent from
  the one that caused an earlier reaction (the culprit).
- ACR-NKF consensus statements, Radiology 2020: they cover intravenous contrast only.
- ACR Manual on Contrast Media, premedication: elective prednisone 13 h or methylprednisolone 12 h, accelerated
  IV at least 4-5 h; contrast media in children (from memory): 1.5-2 mL/kg, at most 3 mL/kg, never above the
  adult dose.
- Product labels (from memory): iohexol intrathecal strengths 180, 240 and 300 mg I/mL.
- g iodine / GFR ratio (clinical notes): flag at the policy level 1.0; the ratio shown is the ratio compared.
"""

from __future__ import annotations

import datetime as dt
import json

import pytest

from knowledge.cli import main
from knowledge.decision import plans
from knowledge.decision.engine import decide
from knowledge.errors import CaseError
from knowledge.present.links import case_from_query, query_from_case
from knowledge.present.report import protocol_note_markdown
from knowledge.tables import models as m
from knowledge.tables.loader import load_knowledge

NOW = dt.datetime(2026, 3, 10, 14, 0)
ACR_NKF_TITLE = "Use of Intravenous Iodinated Contrast Media in Patients with Kidney Disease"

PROFILES = {
    "plain": {"age_years": 50, "sex": "female", "weight_kg": 70, "height_cm": 165},
    "low-egfr-aki-metformin": {"age_years": 70, "sex": "male", "weight_kg": 80, "height_cm": 175, "egfr": 22,
                               "acute_kidney_injury": True, "takes_metformin": True, "heart_failure": True},
    "culprit-severe": {"egfr": 80, "prior_reactions": [
        {"agent_family": "iodinated", "kind": "allergic_like", "severity": "severe", "agent": "iohexol"}]},
    "open-gut": {"perforation_suspected": True, "colitis_or_diverticulitis": True, "aspiration_risk": True,
                 "pregnant": True},
    "infant": {"age_years": 0.4, "weight_kg": 6},
    "child": {"age_years": 7, "weight_kg": 22, "height_cm": 120, "iv_access": {"gauge": 22, "site": "antecubital"}},
    "scar": {"prior_reactions": [{"agent_family": "iodinated", "kind": "delayed", "severity": "severe"}]},
}


@pytest.fixture(scope="module")
def k():
    return load_knowledge()


def _all_decisions(k):
    for exam in k.tables.exams:
        for name, patient in PROFILES.items():
            yield exam, name, decide({"exam": exam.id, "patient": patient}, k)


def test_the_plan_never_falls_on_a_contraindicated_or_culprit_agent(k):
    # ACR-AAAAI 2025 / ESUR v10: a different agent from the culprit; a contraindicated agent is never planned
    checked = 0
    for exam, name, d in _all_decisions(k):
        culprits = {r["agent"] for r in PROFILES[name].get("prior_reactions", []) if r.get("agent")}
        for role, exam_role in zip(d.roles, exam.roles):
            chosen = [o for o in role.options if o.chosen]
            assert len(chosen) <= 1
            for o in chosen:
                checked += 1
                assert o.verdict is not m.Verdict.contraindicated, (exam.id, name, o.agent)
                assert o.agent not in culprits, (exam.id, name, o.agent)
                assert o.agent in exam_role.agents, (exam.id, name, o.agent)
            if role.dose is not None:
                assert chosen and role.dose.agent == chosen[0].agent
            if not chosen and exam_role.required:
                assert d.cannot_proceed_reason and any(a.level == "stop" for a in d.alerts), (exam.id, name)
    assert checked > 100


def test_a_culprit_agent_ranks_below_every_agent_of_the_same_or_better_verdict(k):
    # ACR-AAAAI 2025: after a reaction use a different agent from the culprit
    for exam in k.tables.exams:
        for role in exam.roles:
            for agent in role.agents[:2]:
                if k.agents[agent].family is not m.Family.iodinated:
                    continue
                d = decide({"exam": exam.id, "patient": {"egfr": 80, "prior_reactions": [
                    {"agent_family": "iodinated", "kind": "physiologic", "severity": "mild", "agent": agent}]}}, k)
                for r in d.roles:
                    opts = r.options
                    mine = next((o for o in opts if o.agent == agent), None)
                    if mine is None:
                        continue
                    for o in opts:
                        if o.agent != agent and o.verdict.severity <= mine.verdict.severity:
                            assert o.rank < mine.rank, (exam.id, agent, o.agent)


def test_acr_nkf_is_cited_only_for_intravenous_roles(k):
    # the ACR-NKF 2020 consensus statements are about intravenous contrast
    for exam, name, d in _all_decisions(k):
        for role in d.roles:
            if role.route is m.Route.intravenous:
                continue
            for o in role.options:
                for reason in o.reasons:
                    assert ACR_NKF_TITLE not in reason.source, (exam.id, name, o.agent, reason.rule)


def test_a_child_never_gets_the_adult_volume(k):
    # ACR Manual, contrast media in children (from memory): at most 3 mL/kg of 300 mg I/mL, never above the adult
    p = PROFILES["child"]
    seen = 0
    for exam in k.tables.exams:
        d = decide({"exam": exam.id, "patient": p}, k)
        for role, exam_role in zip(d.roles, exam.roles):
            if role.dose is None or role.route is not m.Route.intravenous or exam_role.protocol is None:
                continue
            seen += 1
            dose = role.dose
            assert dose.paediatric is True
            limit = 3.0 * p["weight_kg"] * 300 / dose.concentration_mg_i_ml
            assert dose.volume_ml <= min(limit, exam_role.protocol.max_volume_ml) + 0.05, exam.id
            assert dose.flow_ml_s is None or dose.flow_ml_s <= 3.0  # 22-gauge in a child: about 2-3 mL/s
    assert seen >= 10


def test_ratio_shown_is_the_ratio_compared():
    # 30 g iodine / 30.1 mL/min = 0.9967 -> shown 1.00, so it must also count as reaching the level 1.0
    pol = load_knowledge().policy
    role = m.ExamRole(route="intravenous", purpose="x", agents=["iohexol"])
    dose = m.DoseBlock(agent="iohexol", concentration_mg_i_ml=300, concentration_choice="", volume_ml=100,
                       volume_basis="", iodine_g=30.0, flow_ml_s=3, iodine_delivery_rate_g_s=0.9, duration_s=33)
    lim = plans._dose_limits([(role, dose)], m.Patient(), pol, 30.1)
    assert lim.iodine_g_per_gfr == 1.0 and lim.iodine_g_per_gfr_exceeded is True
    assert lim.iodine_g_max == 30.1


def test_elective_regimens_tried_in_order_before_the_accelerated_one(k):
    # ACR Manual: prednisone 13 h, methylprednisolone 12 h, accelerated IV >= 4-5 h
    moderate = [{"agent_family": "iodinated", "kind": "allergic_like", "severity": "moderate"}]
    for hours, regimen in ((13.5, "prednisone-13h"), (12.75, "methylprednisolone-12h"), (6, "accelerated-iv")):
        d = decide({"exam": "ct-abdomen-pelvis", "as_of": NOW.isoformat(),
                    "scheduled_at": (NOW + dt.timedelta(hours=hours)).isoformat(),
                    "patient": {"egfr": 80, "prior_reactions": moderate}}, k)
        assert d.premedication.regimen == regimen, hours
    assert [r.id for r in plans.elective_regimens(k)] == ["prednisone-13h", "methylprednisolone-12h"]


def test_elective_exam_only_is_told_to_move(k):
    moderate = [{"agent_family": "iodinated", "kind": "allergic_like", "severity": "moderate"}]
    texts = {}
    for urgency in ("elective", "urgent", "emergency"):
        d = decide({"exam": "ct-abdomen-pelvis", "urgency": urgency, "as_of": NOW.isoformat(),
                    "scheduled_at": (NOW + dt.timedelta(hours=2)).isoformat(),
                    "patient": {"egfr": 80, "prior_reactions": moderate}}, k)
        texts[urgency] = " ".join(d.premedication.warnings)
    assert "moving the exam" in texts["elective"]
    assert "moving the exam" not in texts["urgent"] and "moving the exam" not in texts["emergency"]
    assert "not delayed for premedication" in texts["emergency"]


def test_intrathecal_strength_must_be_labelled_for_it(k):
    # product labels (from memory): iohexol intrathecal 180, 240, 300 mg I/mL - not 350
    with pytest.raises(CaseError) as exc:
        decide({"exam": "fluoro-myelogram", "planned_concentration_mg_i_ml": 350, "planned_volume_ml": 8,
                "patient": {}}, k)
    assert exc.value.field == "planned_concentration_mg_i_ml" and "labelled for intrathecal use" in exc.value.message
    d = decide({"exam": "fluoro-myelogram", "planned_concentration_mg_i_ml": 240, "planned_volume_ml": 10,
                "patient": {}}, k)
    assert d.roles[0].dose.iodine_g == 2.4 and not any("above" in w for w in d.roles[0].dose.warnings)


def test_cli_exams_and_decide_carry_the_exam_notes_and_alerts(capsys, tmp_path):
    assert main(["exams", "--json"], clock=lambda: NOW) == 0
    rows = {r["id"]: r for r in json.loads(capsys.readouterr().out)}
    assert "venous intravasation" in rows["fluoro-hysterosalpingogram"]["notes"]
    assert "can be fatal" in rows["fluoro-myelogram"]["notes"]
    assert "need not wait for a creatinine" in rows["ct-trauma"]["notes"]
    case = tmp_path / "case.json"
    case.write_text(json.dumps({"exam": "fluoro-hysterosalpingogram", "patient": {"pregnant": True}}))
    assert main(["decide", str(case)], clock=lambda: NOW) == 0
    d = json.loads(capsys.readouterr().out)
    assert "venous intravasation" in d["exam_notes"]
    assert d["alerts"][0]["level"] == "stop" and "cannot be done with contrast" in d["alerts"][0]["text"]
    assert "not done in pregnancy" in d["cannot_proceed_reason"]


def test_note_starts_with_the_alerts_and_shows_the_exam_notes(k):
    d = decide({"exam": "fluoro-hysterosalpingogram", "patient": {"pregnant": True}}, k)
    md = protocol_note_markdown(d, k)
    first = md.split("## ")[1]
    assert first.startswith("Alerts") and "✖ STOP: The exam as requested cannot be done with contrast" in first
    assert "Exam notes: Exclude pregnancy" in md and "Agent: none planned" in md


def test_links_carry_the_new_fields():
    case = {"exam": "ct-abdomen-pelvis", "urgency": "emergency", "override_culprit": True, "agent": "iohexol",
            "patient": {"pheochromocytoma": True, "manifest_hyperthyroidism": True, "toxic_megacolon": True,
                        "prior_reactions": [{"agent_family": "iodinated", "kind": "delayed", "severity": "mild",
                                             "despite_premedication": True}]}}
    q = query_from_case(m.Case.model_validate(case))
    back = m.Case.model_validate(case_from_query(q))
    assert back == m.Case.model_validate(case)
    assert "reaction=iodinated:delayed:mild::breakthrough" in q and "override=1" in q


def test_dashboard_shows_alerts_and_exposes_the_override():
    from widgets.app import ContrastAidApp

    app = ContrastAidApp(clock=lambda: NOW)
    app.exam.select.value = "ct-abdomen-pelvis"
    app.patient.reactions.add_row(kind="allergic_like", severity="moderate", agent="iohexol")
    app.patient.egfr.value = "80"
    app.exam.agent.value = "iohexol"
    d = app.decision
    assert not any(o.chosen for o in d.roles[0].options)
    assert "class='ca-alert ca-alert-stop'" in app.panel.alerts.value and "STOP" in app.panel.alerts.value
    app.exam.override_culprit.value = True
    d = app.decision
    assert [o.agent for o in d.roles[0].options if o.chosen] == ["iohexol"]
    assert "Override in force" in app.panel.alerts.value
    # the new patient fields have checkboxes
    for name in ("pheochromocytoma", "manifest_hyperthyroidism", "colitis_or_diverticulitis", "toxic_megacolon",
                 "recent_deep_biopsy", "bowel_fistula_suspected", "obstruction_high_grade"):
        assert hasattr(app.patient, name)
    app.exam.urgency.value = "emergency"
    assert app.decision.urgency is m.Urgency.emergency


def test_policy_elective_regimens_must_exist(tmp_path):
    import yaml

    from knowledge.errors import KnowledgeError
    from knowledge.tables.loader import DEFAULT_POLICY

    data = yaml.safe_load(DEFAULT_POLICY.read_text())
    data["elective_regimens"] = ["prednisone-13h", "accelerated-iv"]
    bad = tmp_path / "policy.yaml"
    bad.write_text(yaml.safe_dump(data))
    with pytest.raises(KnowledgeError) as exc:
        load_knowledge(policy=bad)
    assert "elective_regimens 'accelerated-iv' is not one of its elective regimens" in str(exc.value)
    del data["elective_regimens"]  # an older policy without the list still loads
    bad.write_text(yaml.safe_dump(data))
    assert [r.id for r in plans.elective_regimens(load_knowledge(policy=bad))] == [
        "prednisone-13h", "methylprednisolone-12h"]


def test_dashboard_prefills_urgency_override_and_breakthrough_from_a_link():
    from widgets.app import ContrastAidApp

    app = ContrastAidApp(clock=lambda: NOW, query="exam=ct-abdomen-pelvis&agent=iohexol&override=1&urgency=urgent"
                                                  "&egfr=80&reaction=iodinated:allergic_like:moderate:iohexol:breakthrough")
    assert app.exam.urgency.value == "urgent" and app.exam.override_culprit.value is True
    assert app.patient.reactions.rows[0].breakthrough.value is True
    d = app.decision
    assert d.urgency is m.Urgency.urgent
    assert [o.agent for o in d.roles[0].options if o.chosen] == ["iohexol"]
    assert any(a.rule == "override-culprit" for a in d.alerts)
