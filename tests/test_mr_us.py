"""MRI and ultrasound (issue 13): tables, rules, the dose stage, the note and the dose plot.

Sources named beside the checks: the gadolinium agent labels (dose in mmol/kg and mL/kg), the perflutren
lipid microsphere label (10 microlitres/kg), the ACR Manual (NSF groups), the EMA 2017 decision.
"""

from __future__ import annotations

import shutil

import pytest
import yaml

from knowledge.calculators import gadolinium as gd
from knowledge.decision.engine import decide
from knowledge.errors import KnowledgeError, RangeError
from knowledge.present.report import agent_dose_lines, protocol_note_markdown
from knowledge.tables import models as m
from knowledge.tables.loader import DATA_DIR, DEFAULT_POLICY, load_knowledge
from tests.scenarios import check, load_vectors
from widgets.plots import dose_figure

HEADER = "# ---- MRI and ultrasound (issue 13) ----"


@pytest.fixture(scope="module")
def k():
    return load_knowledge()


def _issue13_rule_ids() -> list[str]:
    text = (DATA_DIR / "rules.yaml").read_text(encoding="utf-8")
    tail = text.split(HEADER, 1)[1]
    return [r["id"] for r in yaml.safe_load(tail)]


def _copy_data(tmp_path):
    d = tmp_path / "data"
    shutil.copytree(DATA_DIR, d)
    return d


# ---------------------------------------------------------------- every new rule fails first
@pytest.mark.parametrize("rule_id", _issue13_rule_ids())
def test_each_issue13_rule_has_a_vector_that_fails_without_it(rule_id, tmp_path):
    """Remove the rule; some vector naming it must then fail on more than 'the rule did not fire'
    (a verdict, an action, a caution or a block changes)."""
    d = _copy_data(tmp_path)
    rows = yaml.safe_load((d / "rules.yaml").read_text(encoding="utf-8"))
    (d / "rules.yaml").write_text(yaml.safe_dump([r for r in rows if r["id"] != rule_id]), encoding="utf-8")
    cache = {}

    def knowledge(stem):
        if stem not in cache:
            pol = DEFAULT_POLICY if stem is None else d / "policies" / f"{stem}.yaml"
            cache[stem] = load_knowledge(d, policy=pol)
        return cache[stem]

    naming = [v for v in load_vectors() if rule_id in yaml.safe_dump(v["expect"])]
    assert naming, f"no scenario vector names {rule_id}"
    substantive = []
    for v in naming:
        problems = check(decide(v["case"], knowledge(v.get("policy"))), v["expect"])
        substantive += [p for p in problems if f"rule {rule_id} did not fire" not in p]
    assert substantive, f"without {rule_id} its vectors only miss the rule id itself"


def test_pregnancy_radiation_caution_stays_for_x_ray_exams(k):
    # the pregnancy-justify rule now skips MRI and ultrasound (no ionising radiation), not CT
    assert any("ionising radiation" in c for c in decide({"exam": "ct-abdomen-pelvis",
                                                          "patient": {"pregnant": True}}, k).cautions)
    assert not any("ionising radiation" in c for c in decide({"exam": "mr-brain-contrast",
                                                              "patient": {"pregnant": True}}, k).cautions)


# ---------------------------------------------------------------- tables and loader checks
def test_the_issue_exams_and_agents_are_in_the_tables(k):
    for exam in ("mr-brain-contrast", "mr-angiography-contrast", "mr-liver-extracellular", "mr-liver-hepatobiliary",
                 "mr-enterography", "mr-arthrography-direct", "mr-urography", "mr-breast", "mr-prostate",
                 "mr-cardiac-late-enhancement", "mr-spine-contrast", "us-liver-ceus", "us-voiding-urosonography",
                 "us-echocardiography-contrast"):
        assert exam in k.exams
    groups = {a: k.agents[a].gbca_group.value for a in ("gadobutrol", "gadoterate-meglumine", "gadoteridol",
                                                         "gadopiclenol", "gadobenate-dimeglumine",
                                                         "gadoxetate-disodium", "gadodiamide",
                                                         "gadopentetate-dimeglumine")}
    # ACR Manual grouping: gadodiamide and gadopentetate group I; gadoxetate the only group III agent
    assert groups["gadodiamide"] == groups["gadopentetate-dimeglumine"] == "I"
    assert groups["gadoxetate-disodium"] == "III"
    assert {a for a, g in groups.items() if g == "II"} == {"gadobutrol", "gadoterate-meglumine", "gadoteridol",
                                                           "gadopiclenol", "gadobenate-dimeglumine"}
    # EMA 2017: the macrocyclic agents named there
    assert {a.id for a in k.agents.values() if a.gbca_structure is m.GbcaStructure.macrocyclic} == {
        "gadobutrol", "gadoterate-meglumine", "gadoteridol", "gadopiclenol"}
    assert m.Route.intravesical in k.agents["sulfur-hexafluoride-microbubbles"].routes
    assert m.Route.intra_articular in k.agents["gadopentetate-dimeglumine"].routes


def test_modalities_keep_families_apart(k):
    # an MRI role is not offered iodinated agents, a CT role no gadolinium (agents image in their modality)
    mr = decide({"exam": "mr-brain-contrast"}, k).roles[0]
    ct = decide({"exam": "ct-abdomen-pelvis"}, k).roles[0]
    assert {o.family for o in mr.options} == {m.Family.gadolinium}
    assert m.Family.gadolinium not in {o.family for o in ct.options}
    assert m.Family.microbubble not in {o.family for o in ct.options}


def _broken_agents(tmp_path, change):
    d = _copy_data(tmp_path)
    rows = yaml.safe_load((d / "agents.yaml").read_text(encoding="utf-8"))
    change(rows)
    (d / "agents.yaml").write_text(yaml.safe_dump(rows), encoding="utf-8")
    return d


def _agent(rows, aid):
    return next(r for r in rows if r["id"] == aid)


def test_gadolinium_dose_must_match_its_strength(tmp_path):
    # gadoterate meglumine label: 0.1 mmol/kg = 0.2 mL/kg of 0.5 mmol/mL; 0.1 mL/kg would be a wrong row
    d = _broken_agents(tmp_path, lambda rows: _agent(rows, "gadoterate-meglumine").update(standard_dose_ml_kg=0.1))
    with pytest.raises(KnowledgeError, match=r"gadoterate-meglumine: standard_dose_ml_kg 0.1 does not match "
                                             r"0.1 mmol/kg at 0.5 mmol/mL \(0.2 mL/kg\)"):
        load_knowledge(d)


def test_mmol_strengths_are_for_gadolinium_only(tmp_path):
    d = _broken_agents(tmp_path, lambda rows: _agent(rows, "barium-thin")["concentrations"].append(
        {"value": 0.5, "unit": "mmol_per_ml"}))
    with pytest.raises(KnowledgeError, match="barium-thin: strengths in mmol_per_ml are for gadolinium agents"):
        load_knowledge(d)


def test_intravenous_gadolinium_agent_needs_its_nsf_group(tmp_path):
    d = _broken_agents(tmp_path, lambda rows: _agent(rows, "gadobutrol").pop("gbca_group"))
    with pytest.raises(KnowledgeError, match="intravenous gadolinium agents need gbca_group"):
        load_knowledge(d)


def test_an_mri_exam_cannot_list_an_iodinated_agent(tmp_path):
    d = _copy_data(tmp_path)
    rows = yaml.safe_load((d / "exams.yaml").read_text(encoding="utf-8"))
    next(r for r in rows if r["id"] == "mr-brain-contrast")["roles"][0]["agents"].append("iohexol")
    (d / "exams.yaml").write_text(yaml.safe_dump(rows), encoding="utf-8")
    with pytest.raises(KnowledgeError, match="agent iohexol does not image in mri"):
        load_knowledge(d)


def test_an_older_policy_file_without_the_mri_settings_still_loads(tmp_path):
    text = DEFAULT_POLICY.read_text(encoding="utf-8").split(HEADER)[0]
    p = tmp_path / "old.yaml"
    p.write_text(text, encoding="utf-8")
    k = load_knowledge(policy=p)
    assert (k.policy.gbca_nsf_egfr_below, k.policy.gbca_linear_iv_restricted) == (30, False)


# ---------------------------------------------------------------- calculators and plans
def test_gadolinium_calculator_values_and_range():
    # gadobutrol label 0.1 mmol/kg = 0.1 mL/kg; gadoxetate 0.025 mmol/kg = 0.1 mL/kg; perflutren 10 uL/kg
    assert gd.gadolinium_dose(70, 0.1, 1.0) == gd.GadoliniumDose(7.0, 7.0, 0.1)
    assert gd.gadolinium_dose(80, 0.025, 0.25).volume_ml == 8.0
    assert gd.volume_by_weight(80, 0.01) == 0.8
    with pytest.raises(RangeError, match="dose_mmol_kg: 0.5 is out of range; allowed: from 0.01 to 0.3 mmol/kg"):
        gd.gadolinium_dose(70, 0.5, 1.0)


def test_iodinated_and_gadolinium_plan_stages_do_not_cross(k):
    mr = decide({"exam": "mr-brain-contrast", "patient": {"weight_kg": 70, "egfr": 20}}, k)
    assert mr.roles[0].dose is None and mr.roles[0].agent_dose.volume_ml == 7.0
    assert mr.renal.dose_limits is None and mr.renal.hydration_plan is None
    ct = decide({"exam": "ct-abdomen-pelvis", "patient": {"weight_kg": 70}}, k)
    assert ct.roles[0].dose is not None and ct.roles[0].agent_dose is None


def test_microbubble_protocol_is_for_its_agent_only(k):
    # the echo protocol is the perflutren label dose; sulfur hexafluoride gets no worked volume from it
    d = decide({"exam": "us-echocardiography-contrast", "agent": "sulfur-hexafluoride-microbubbles",
                "patient": {"weight_kg": 80}}, k)
    block = d.roles[0].agent_dose
    assert block.volume_ml is None and "perflutren-lipid-microspheres" in block.basis


def test_note_and_dose_plot_cover_mri(k):
    d = decide({"exam": "mr-brain-contrast", "patient": {"weight_kg": 70}}, k)
    text = protocol_note_markdown(d, k)
    assert "7 mmol gadolinium = 7 mL of 1 mmol/mL (0.1 mmol/kg, 0.1 mL/kg), 2 mL/s" in text
    fig, words = dose_figure(d, k)
    bars = dict(zip(fig["data"][0]["x"], fig["data"][0]["y"]))
    # same 7 mmol: 7 mL of the 1.0 mmol/mL agent, 14 mL of a 0.5 mmol/mL one; gadopiclenol half dose, 7 mL
    assert bars["Gadobutrol"] == 7.0 and bars["Gadoterate meglumine"] == 14.0 and bars["Gadopiclenol"] == 7.0
    assert words.startswith("Gadobutrol: 7 mmol (0.1 mmol/kg), 7 mL at 2 mL/s")


def test_note_and_dose_plot_cover_ultrasound(k):
    d = decide({"exam": "us-echocardiography-contrast", "patient": {}}, k)
    fig, words = dose_figure(d, k)
    assert fig is None and "Weight is needed" in words
    lines = agent_dose_lines(d.roles[0].agent_dose)
    assert lines[0] == "Dose: 0.01 mL/kg (10 microlitres/kg (verified); verified)"
    # every agent ruled out (PEG hypersensitivity): no dose to draw, and the words say so (was a TypeError on the
    # protocol's missing flow)
    d = decide({"exam": "us-echocardiography-contrast", "patient": {"peg_allergy": True}}, k)
    fig, words = dose_figure(d, k)
    assert fig is None and words.startswith("Dose plan: not worked out") and words.endswith(
        "Exam protocol: 0.01 mL/kg, at most 150 mL, hand bolus, no set flow.")


def test_egfr_lines_name_the_settings_of_the_exams_agents(k):
    from knowledge.present.whatif import egfr_lines

    # default profile (ACR-NKF 2020, ACR Manual): iodinated at 30 and 45; first-pass only with a first-pass role
    assert egfr_lines(k, "ct-abdomen-pelvis") == [(30.0, "hydrate (IV), hold metformin"), (45.0, "consider prophylaxis")]
    assert egfr_lines(k, "angio-visceral-renal")[0] == (30.0, "hydrate (IV), hydrate (first pass), hold metformin")
    assert egfr_lines(k, "mr-brain-contrast") == [(30.0, "gadolinium: NSF risk")]  # ACR Manual: NSF below 30
    assert egfr_lines(k, "us-echocardiography-contrast") == [] and egfr_lines(k, "fluoro-esophagram") == []
