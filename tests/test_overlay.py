"""Department overlays: validation (pinned messages), the merge onto the base profile, formulary and
preferred-agent effects, procedure codes, the on-call line and the policy hash; `policy check` and
`policy diff` on invented overlays (an invented department).

Clinical expectations come from the bundled tables and policies: the default profile's thresholds
(ACR-NKF 2020 consensus statements, ACR Manual regimens), the exam preference orders of exams.yaml.
"""

from __future__ import annotations

import json
import textwrap
from pathlib import Path

import pytest

from knowledge.cli.main import main
from knowledge.decision.engine import decide
from knowledge.errors import KnowledgeError
from knowledge.tables.loader import load_knowledge
from knowledge.tables.overlay import THRESHOLDS

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "examples" / "department-overlay.yaml"
AS_OF = "2026-12-01T15:00"

MINIMAL = """\
id: northbay-radiology
name: Northbay radiology (invented)
base: default
"""


def write(tmp_path: Path, text: str, name: str = "overlay.yaml") -> Path:
    p = tmp_path / name
    p.write_text(textwrap.dedent(text), encoding="utf-8")
    return p


def option(decision, route: str, agent: str):
    role = next(r for r in decision.roles if r.route.value == route)
    return next(o for o in role.options if o.agent == agent)


def chosen(decision, route: str):
    role = next(r for r in decision.roles if r.route.value == route)
    return next(o for o in role.options if o.chosen)


CT_CASE = {"exam": "ct-abdomen-pelvis", "as_of": AS_OF, "scheduled_at": "2026-12-02T09:00",
           "patient": {"age_years": 50, "sex": "female", "weight_kg": 70, "height_cm": 165, "egfr": 80}}


# ----------------------------------------------------------------------------- valid overlays
def test_example_overlay_loads_and_merges_onto_its_base():
    k = load_knowledge(policy=EXAMPLE)
    assert k.policy.id == "harbourside-radiology"
    assert k.overlay.base == "default" and k.base_policy.id == "north-american-default"
    # overrides applied, other settings kept from the default profile (ACR-NKF 2020: hydrate below 30)
    assert k.policy.egfr_first_pass_hydration_below == 45
    assert k.policy.hydration_hours_after == 4
    assert k.policy.egfr_hydration_below == 30
    assert (k.policy.creatinine_max_age_days_outpatient, k.policy.creatinine_max_age_days_inpatient) == (60, 1)
    assert k.policy.premedication_regimen == "methylprednisolone-12h"
    assert [r.id for r in k.policy.regimens] == ["methylprednisolone-12h", "accelerated-iv"]


def test_minimal_overlay_decides_like_its_base(tmp_path):
    """An overlay with nothing but its base gives the base's verdicts and choices (no formulary: all stocked)."""
    k_ov = load_knowledge(policy=write(tmp_path, MINIMAL))
    k_base = load_knowledge()
    a, b = decide(CT_CASE, k_base), decide(CT_CASE, k_ov)
    assert [(o.agent, o.verdict, o.chosen) for r in a.roles for o in r.options] == \
           [(o.agent, o.verdict, o.chosen) for r in b.roles for o in r.options]
    assert b.policy == "northbay-radiology" and a.policy == "north-american-default"
    assert all(o.stocked is None for r in b.roles for o in r.options)


def test_every_decision_carries_policy_id_and_hash(tmp_path):
    path = write(tmp_path, MINIMAL)
    k = load_knowledge(policy=path)
    d = decide(CT_CASE, k)
    assert d.policy == "northbay-radiology" and d.policy_version == k.policy_version and len(d.policy_version) == 12
    assert d.knowledge_version == k.version
    # a one-character edit of the overlay changes the hash; the base profile's hash is different again
    k2 = load_knowledge(policy=write(tmp_path, MINIMAL.replace("(invented)", "(invented!)"), "b.yaml"))
    assert k2.policy_version != k.policy_version
    assert decide(CT_CASE, load_knowledge()).policy_version == load_knowledge().policy_version


# ----------------------------------------------------------------------------- invalid overlays
@pytest.mark.parametrize("extra, message", [
    ("colour: blue\n", "overlay.yaml: overlay.colour: unknown field; allowed: id, name, base, thresholds, "
                       "creatinine_freshness, premedication, formulary, preferred, procedure_codes, on_call"),
    ("thresholds: {egfr_hydration_below: 300}\n",
     "overlay.yaml: overlay.thresholds.egfr_hydration_below: 300 is out of range; allowed: at most 120"),
    ("thresholds: {bsa_formula: 1}\n", "overlay.yaml: overlay.thresholds.bsa_formula: not a numeric policy setting; "
                                       "allowed: " + ", ".join(THRESHOLDS)),
    ("creatinine_freshness: {outpatient_days: 0, inpatient_days: 1}\n",
     "overlay.yaml: overlay.creatinine_freshness.outpatient_days: 0 is out of range; allowed: more than 0"),
    ("premedication: {elective: prednisone-13h, accelerated: hydrocortisone-now}\n",
     "overlay.yaml: overlay.premedication.accelerated: 'hydrocortisone-now' is not a regimen of base default; "
     "allowed: prednisone-13h, methylprednisolone-12h, accelerated-iv"),
    ("formulary: [{agent: iohexal, label: Iohexol}]\n",
     "overlay.yaml: overlay.formulary[0].agent: 'iohexal' is not a known agent; allowed: the ids of `contrast-aid agents`"),
    ("formulary: [{agent: iohexol, label: Iohexol 320, concentrations: [320]}]\n",
     "overlay.yaml: overlay.formulary[0].concentrations: 320 is not a strength of iohexol; allowed: 180, 240, 300, 350"),
    ("formulary: [{agent: iohexol, label: A}, {agent: iohexol, label: B}]\n",
     "overlay.yaml: overlay.formulary: agent iohexol is listed twice"),
    ("preferred: [{route: intravenous, agent: barium-thin}]\n",
     "overlay.yaml: overlay.preferred[0]: barium-thin is not a usual agent of a intravenous role of any exam; "
     "allowed: an agent the exam's role lists"),
    ("formulary: [{agent: iohexol, label: Iohexol}]\npreferred: [{route: intravenous, agent: iopamidol}]\n",
     "overlay.yaml: overlay.preferred[0].agent: iopamidol is preferred but not in the formulary"),
    ("procedure_codes: {NB-CT1: ct-abdomen}\n",
     "overlay.yaml: overlay.procedure_codes.NB-CT1: 'ct-abdomen' is not a known exam; allowed: the ids of "
     "`contrast-aid exams`"),
])
def test_invalid_overlays_have_pinned_messages(tmp_path, extra, message):
    assert {"egfr_hydration_below", "hydration_hours_after"} <= set(THRESHOLDS) and "bsa_formula" not in THRESHOLDS
    path = write(tmp_path, MINIMAL + extra)
    with pytest.raises(KnowledgeError) as err:
        load_knowledge(policy=path)
    assert str(err.value) == message


def test_unknown_base_is_named(tmp_path):
    path = write(tmp_path, MINIMAL.replace("base: default", "base: nice-2020"))
    with pytest.raises(KnowledgeError) as err:
        load_knowledge(policy=path)
    assert str(err.value) == "overlay.yaml: overlay.base: 'nice-2020' is not allowed; allowed: 'default' or 'esur-v10'"


# ----------------------------------------------------------------------------- formulary effects
FORMULARY = MINIMAL + """\
formulary:
  - {agent: iopamidol, label: "Iopamidol 300 (main store)", concentrations: [300]}
  - {agent: water, label: "Water"}
on_call: "Northbay on-call radiologist: extension 5100 (invented)"
"""


def test_not_stocked_agent_keeps_its_verdict_and_is_never_chosen_by_default(tmp_path):
    k = load_knowledge(policy=write(tmp_path, FORMULARY))
    d = decide(CT_CASE, k)
    base = decide(CT_CASE, load_knowledge())
    # the base profile chooses iohexol first (exams.yaml preference order for ct-abdomen-pelvis)
    assert chosen(base, "intravenous").agent == "iohexol"
    iohexol = option(d, "intravenous", "iohexol")
    assert iohexol.stocked is False and not iohexol.chosen
    assert iohexol.verdict == option(base, "intravenous", "iohexol").verdict
    assert any(r.rule == "department-formulary" and r.text.startswith("Not stocked here") for r in iohexol.reasons)
    pick = chosen(d, "intravenous")
    assert pick.agent == "iopamidol" and pick.stocked and pick.local_label == "Iopamidol 300 (main store)"
    assert pick.actions[0] == "Stocked here as 'Iopamidol 300 (main store)' (strengths held: 300 mg I/mL)"
    assert chosen(d, "oral").agent == "water"


def test_dose_plan_uses_only_the_strengths_held(tmp_path):
    """Iopamidol's catalogue strengths are 200, 300 and 370 mg I/mL (agents.yaml); only 300 is held."""
    k = load_knowledge(policy=write(tmp_path, FORMULARY))
    case = {**CT_CASE, "exam": "ct-angiography-aorta"}
    d = decide(case, k)
    assert chosen(d, "intravenous").agent == "iopamidol"
    assert d.roles[0].dose.concentration_mg_i_ml == 300
    assert {c.value for c in k.agents["iopamidol"].concentrations} == {300}


def test_requested_agent_not_stocked_is_kept_and_said(tmp_path):
    k = load_knowledge(policy=write(tmp_path, FORMULARY))
    d = decide({**CT_CASE, "agent": "iohexol"}, k)
    assert chosen(d, "intravenous").agent == "iohexol"
    assert "Iohexol (intravenous) is not stocked here (requested)" in d.cautions


def test_on_call_line_on_every_decision_and_note(tmp_path):
    from knowledge.present.report import note_sections

    k = load_knowledge(policy=write(tmp_path, FORMULARY))
    for exam in ("ct-abdomen-pelvis", "fluoro-esophagram", "ct-head-noncontrast"):
        d = decide({**CT_CASE, "exam": exam}, k)
        assert d.on_call == "Northbay on-call radiologist: extension 5100 (invented)"
        assert d.cautions[-1] == "On call: Northbay on-call radiologist: extension 5100 (invented)"
        _title, sections = note_sections(d, k)
        assert any("extension 5100" in line for _h, lines in sections for line in lines)
        assert any(k.policy_version in line for _h, lines in sections for line in lines)


def test_preferred_agent_breaks_ties_within_a_verdict(tmp_path):
    """Default ranking follows exams.yaml (iohexol first); the department prefers iodixanol for IV roles.
    A preference never lifts an agent above a better verdict."""
    k = load_knowledge(policy=write(tmp_path, MINIMAL + "preferred: [{route: intravenous, agent: iodixanol}]\n"))
    d = decide(CT_CASE, k)
    assert chosen(d, "intravenous").agent == "iodixanol"
    # with a culprit reaction to iodixanol it is not_advised (rule reaction-culprit-agent) and loses its place
    case = {**CT_CASE, "patient": {**CT_CASE["patient"], "prior_reactions": [
        {"agent_family": "iodinated", "kind": "allergic_like", "severity": "mild", "agent": "iodixanol"}]}}
    d2 = decide(case, k)
    assert option(d2, "intravenous", "iodixanol").verdict.value == "not_advised"
    assert chosen(d2, "intravenous").agent != "iodixanol"


def test_thresholds_change_verdict_blocks(tmp_path):
    """Default profile: first-pass hydration below eGFR 30 (ACR-NKF 2020 does not separate first pass);
    the overlay adopts ESUR v10's 45 for first-pass intra-arterial contrast."""
    case = {"exam": "angio-visceral-renal", "as_of": AS_OF,
            "patient": {"age_years": 70, "sex": "male", "weight_kg": 80, "height_cm": 175, "egfr": 40}}
    assert decide(case, load_knowledge()).renal.hydration_indicated is False
    k = load_knowledge(policy=write(tmp_path, MINIMAL + "thresholds: {egfr_first_pass_hydration_below: 45}\n"))
    assert decide(case, k).renal.hydration_indicated is True


def test_procedure_code_mapping_on_decide(tmp_path, capsys):
    path = write(tmp_path, MINIMAL + "procedure_codes: {NB-CTAP: ct-abdomen-pelvis}\n")
    case = write(tmp_path, json.dumps({**CT_CASE, "exam": "NB-CTAP"}), "case.json")
    assert main(["decide", str(case), "--policy", str(path)]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["exam"] == "ct-abdomen-pelvis" and out["policy"] == "northbay-radiology"
    # without the overlay the code is not an exam
    assert main(["decide", str(case)]) == 2
    assert "'NB-CTAP' is not a known exam" in capsys.readouterr().err


# ----------------------------------------------------------------------------- policy check / diff
def test_policy_check_prints_what_changes(tmp_path, capsys):
    path = write(tmp_path, FORMULARY + "thresholds: {hydration_hours_after: 4}\n")
    assert main(["policy", "check", str(path)]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0].startswith("overlay ok: northbay-radiology (Northbay radiology (invented)) on base default "
                             "(north-american-default)")
    assert "  hydration_hours_after: 6.0 -> 4.0" in out
    assert "  stocked: iopamidol as 'Iopamidol 300 (main store)' (300)" in out
    assert "  on-call contact: Northbay on-call radiologist: extension 5100 (invented)" in out


def test_policy_check_bad_overlay_exits_2(tmp_path, capsys):
    path = write(tmp_path, MINIMAL + "thresholds: {egfr_hydration_below: -1}\n")
    assert main(["policy", "check", str(path)]) == 2
    assert capsys.readouterr().err == ("contrast-aid: overlay.yaml: overlay.thresholds.egfr_hydration_below: -1 is "
                                       "out of range; allowed: at least 0\n")


def test_policy_diff_on_the_scenario_bank(tmp_path, capsys):
    path = write(tmp_path, MINIMAL + "thresholds: {egfr_first_pass_hydration_below: 45}\n")
    assert main(["policy", "diff", str(path)]) == 0
    out = capsys.readouterr().out
    # the scenario with first-pass exposure and an eGFR between 30 and 45 (tests/vectors/scenarios.yaml):
    # hydration becomes indicated (ACR-NKF 2020 threshold 30 -> the ESUR v10 first-pass threshold 45)
    block = out.split("- visceral-angio-first-pass-default-policy (angio-visceral-renal):\n")[1].split("\n- ")[0]
    assert "    hydration: False -> True" in block.splitlines()
    changed = [line for line in out.splitlines() if line.startswith("- ")]
    total = int(out.splitlines()[0].split("; ")[-1].split()[0])
    assert out.splitlines()[-1] == f"{len(changed)} of {total} changed, {total - len(changed)} unchanged"
    # only cases with first-pass or intra-arterial exposure can change
    assert all("angio-" in line for line in changed)


def test_policy_diff_of_a_formulary_names_chosen_agent_changes(tmp_path, capsys):
    path = write(tmp_path, FORMULARY)
    path = write(tmp_path, FORMULARY + "procedure_codes: {NB-CTAP: ct-abdomen-pelvis}\n")
    wl = write(tmp_path, "order_id,exam,age_years,sex,egfr\nN-1,NB-CTAP,50,female,80\n"
                         "N-2,ct-head-noncontrast,50,female,80\n", "list.csv")
    assert main(["policy", "diff", str(path), "--cases", str(wl), "--as-of", AS_OF]) == 0
    out = capsys.readouterr().out
    assert "- N-1 (ct-abdomen-pelvis):\n    intravenous: chosen agent iohexol -> iopamidol\n" in out
    assert "N-2" not in out
    assert out.splitlines()[-1] == "1 of 2 changed, 1 unchanged"


def test_policy_diff_skips_an_unreadable_order_with_the_reviews_reason(tmp_path, capsys):
    # a creatinine dated after the as-of time is refused (as `review` refuses it); the reason names that
    # field, not a misleading "'50' is not a number" from re-reading the row's text strictly
    path = write(tmp_path, FORMULARY)
    wl = write(tmp_path, "order_id,exam,age_years,sex,creatinine,creatinine_unit,creatinine_measured_on\n"
                         "N-1,ct-abdomen-pelvis,50,female,0.9,mg/dL,2026-12-20\n", "list.csv")
    assert main(["policy", "diff", str(path), "--cases", str(wl), "--as-of", AS_OF]) == 0
    out = capsys.readouterr().out
    assert ("- N-1: skipped (patient.creatinine.measured_on: '2026-12-20' is after as_of 2026-12-01T15:00:00; "
            "allowed: a date at or before as_of)\n") in out
    assert out.splitlines()[-1] == "0 of 1 changed, 0 unchanged, 1 skipped"


def test_policy_diff_needs_an_overlay(capsys):
    assert main(["policy", "diff", str(ROOT / "knowledge/data/policies/esur-v10.yaml")]) == 2
    assert "not an overlay" in capsys.readouterr().err


def test_serve_accepts_an_overlay(tmp_path):
    from widgets.serve import check_policy

    assert check_policy(EXAMPLE) is None
    bad = write(tmp_path, MINIMAL + "formulary: [{agent: iohexal, label: X}]\n")
    assert check_policy(bad).startswith("overlay.yaml: overlay.formulary[0].agent: 'iohexal' is not a known agent")


def test_dose_and_knowledge_check_carry_the_overlay_hash(capsys):
    k = load_knowledge(policy=EXAMPLE)
    assert main(["dose", "--agent", "iohexol", "--exam", "ct-angiography-aorta", "--concentration", "350",
                 "--policy", str(EXAMPLE)]) == 0
    out = json.loads(capsys.readouterr().out)
    assert (out["policy"], out["policy_version"], out["knowledge_version"]) == (
        "harbourside-radiology", k.policy_version, k.version)
    assert main(["knowledge", "check", "--policy", str(EXAMPLE)]) == 0
    assert f"policy harbourside-radiology ({k.policy_version})" in capsys.readouterr().out


def test_role_with_nothing_suitable_stocked_keeps_the_clinical_first_choice_and_says_so(tmp_path):
    """This formulary stocks iopamidol and water only. An oesophagram's contrast role lists thin barium
    first (exams.yaml) and iopamidol is not one of its usual agents, so no stocked usual agent suits the
    role: the clinical first choice stays chosen, marked not stocked, with a caution; the stocked
    iopamidol (not advised by mouth) is not chosen just because it is stocked."""
    k = load_knowledge(policy=write(tmp_path, FORMULARY))
    d = decide({**CT_CASE, "exam": "fluoro-esophagram"}, k)
    first = d.roles[0]
    pick = next(o for o in first.options if o.chosen)
    assert pick.agent == "barium-thin" and pick.rank == 1 and pick.stocked is False
    assert next(o for o in first.options if o.agent == "iopamidol").chosen is False
    assert any(c.startswith("No stocked usual agent suits this role (oral") and "Thin barium" in c
               for c in d.cautions)


def test_formulary_labels_any_catalogue_unit(tmp_path):
    """Every strength unit of the catalogue (models.Unit) has words in the 'Stocked here as' line."""
    from knowledge.decision.department import _strengths
    from knowledge.tables import models as mm

    k = load_knowledge()
    for agent in k.agents.values():
        text = _strengths(agent)
        for c in agent.concentrations:
            assert c.unit.value not in text, (agent.id, text)  # shown in words, not as the enum key
    assert {u.value for u in mm.Unit} <= {"mg_i_per_ml", "percent_w_v", "percent_w_w", "mmol_per_ml"}
