"""The knowledge tables load, validate whole, and reject broken tables with pinned one-line messages."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest
import yaml

from knowledge.tables import models as m
from knowledge.errors import KnowledgeError
from knowledge.tables.loader import DATA_DIR, load_knowledge, load_policy
from knowledge.decision.engine import decide

REQUIRED_EXAMS = """fluoro-esophagram fluoro-upper-gi fluoro-small-bowel-follow-through fluoro-sbo-contrast-challenge
fluoro-contrast-enema fluoro-loopogram fluoro-fistulogram fluoro-tube-check fluoro-cystogram fluoro-urethrogram
fluoro-hysterosalpingogram fluoro-arthrogram fluoro-myelogram fluoro-cholangiogram fluoro-defecography
angio-aortoiliac-runoff angio-visceral-renal angio-cerebral angio-coronary angio-venography ct-head-noncontrast
ct-angiography-head-neck ct-chest ct-pulmonary-angiography ct-angiography-aorta ct-angiography-runoff
ct-coronary-angiography ct-abdomen-pelvis ct-abdomen-pelvis-leak ct-liver-multiphase ct-pancreas ct-urography
ct-kub-stone ct-enterography ct-colonography ct-cystography ct-trauma""".split()

REQUIRED_AGENTS = """room-air carbon-dioxide effervescent-granules water barium-low-density mannitol-sorbitol-solution
barium-thin barium-high-density barium-paste barium-dilute-ct diatrizoate iohexol iopamidol ioversol iopromide
iomeprol iodixanol iodinated-oral-dilute ethiodized-oil""".split()


@pytest.fixture(scope="module")
def k():
    return load_knowledge()


def test_bundled_tables_load_with_required_content(k):
    assert set(REQUIRED_EXAMS) <= set(k.exams)
    assert set(REQUIRED_AGENTS) <= set(k.agents)
    assert len(k.rules) >= 40
    assert len(k.version) == 12


def test_exam_contrast_use_matches_issue(k):
    assert k.exams["ct-head-noncontrast"].contrast is m.ContrastUse.none
    assert k.exams["ct-kub-stone"].contrast is m.ContrastUse.none
    for eid in ("ct-chest", "ct-abdomen-pelvis"):
        iv = [r for r in k.exams[eid].roles if r.route is m.Route.intravenous]
        assert iv and not iv[0].required


def test_agent_classes(k):
    # clinical notes, "Osmolality classes": HOCM (diatrizoate), LOCM (iohexol...), IOCM (iodixanol)
    assert (k.agents["diatrizoate"].osmolality_class, k.agents["diatrizoate"].ionicity) == (
        m.OsmolalityClass.high, m.Ionicity.ionic)
    assert k.agents["iodixanol"].osmolality_class is m.OsmolalityClass.iso
    for aid in ("iohexol", "iopamidol", "ioversol", "iopromide", "iomeprol"):
        assert k.agents[aid].osmolality_class is m.OsmolalityClass.low
        assert k.agents[aid].ionicity is m.Ionicity.non_ionic
    assert k.agents["room-air"].agent_class is m.AgentClass.negative
    assert k.agents["water"].agent_class is m.AgentClass.neutral
    assert m.Route.intrathecal not in k.agents["diatrizoate"].routes
    assert {m.Route.intra_arterial, m.Route.insufflation} <= set(k.agents["carbon-dioxide"].routes)


def test_viscosity_values_from_review_table(k):
    # clinical notes, J Nucl Med Technol review table: viscosity at 37 C, mPa.s
    got = {(a, c.value): c.viscosity_mpas_37c for a in ("iohexol", "iopamidol") for c in k.agents[a].concentrations}
    assert got[("iohexol", 240)] == 3.3 and got[("iohexol", 300)] == 6.1 and got[("iohexol", 350)] == 10.6
    assert got[("iopamidol", 200)] == 2.0 and got[("iopamidol", 300)] == 4.7 and got[("iopamidol", 370)] == 8.6


def test_every_exam_role_agent_is_route_compatible(k):
    for exam in k.tables.exams:
        for role in exam.roles:
            compat = {a.id for a in k.compatible[role.route]}
            assert set(role.agents) <= compat, exam.id


def test_rules_cite_known_sources_or_say_why_not(k):
    for rule in k.tables.rules:
        if rule.certainty is m.Certainty.verified:
            assert rule.sources, rule.id
        for ref in rule.sources:
            assert ref.source in k.sources and ref.section.strip(), rule.id


def test_rule_texts_take_thresholds_from_policy(k):
    text = {cr.rule.id: cr.text for cr in k.agent_rules}
    assert "below 30" in text["renal-hydrate-low-egfr"]
    assert "{" not in "".join(text.values())


def test_esur_policy_profile_moves_the_first_pass_verdict():
    # ESUR v10 (clinical notes, European guideline): first-pass arterial exposure at eGFR < 45 is at risk;
    # the North American default (ACR-NKF 2020) uses eGFR < 30 for every intravascular exposure.
    case = {"exam": "angio-visceral-renal", "patient": {"egfr": 40}}
    assert not decide(case, load_knowledge()).renal.hydration_indicated
    esur = load_knowledge(policy=DATA_DIR / "policies" / "esur-v10.yaml")
    d = decide(case, esur)
    assert d.renal.hydration_indicated and d.policy == "esur-v10-example"
    iohexol = next(o for o in d.roles[0].options if o.agent == "iohexol")
    assert "below 45" in next(r.text for r in iohexol.reasons if r.rule == "renal-hydrate-first-pass")
    assert "sodium bicarbonate" in d.renal.hydration_regimen


# ------------------------------------------------------------------ broken tables: pinned messages
def _broken(tmp_path: Path, name: str, edit) -> Path:
    target = tmp_path / "data"
    shutil.copytree(DATA_DIR, target)
    path = target / f"{name}.yaml"
    rows = yaml.safe_load(path.read_text())
    edit(rows)
    path.write_text(yaml.safe_dump(rows, sort_keys=False))
    return target


def _rule(rows, rid):
    return next(r for r in rows if r["id"] == rid)


def _error(data_dir) -> str:
    with pytest.raises(KnowledgeError) as exc:
        load_knowledge(data_dir)
    return str(exc.value)


def test_unknown_fact_is_rejected(tmp_path):
    d = _broken(tmp_path, "rules", lambda rows: _rule(rows, "barium-perforation")["when"]["all"][0].update(
        fact="patient.perfortion_suspected"))
    assert _error(d) == ("rules.yaml: rule barium-perforation: unknown fact 'patient.perfortion_suspected' "
                         "(did you mean patient.perforation_suspected?); "
                         "see `contrast-aid knowledge facts` for the catalogue")


def test_misspelt_enum_value_is_rejected(tmp_path):
    d = _broken(tmp_path, "rules", lambda rows: _rule(rows, "barium-perforation")["when"]["all"][1].update(
        **{"is": "barim"}))
    assert _error(d) == ("rules.yaml: rule barium-perforation: 'barim' is not a value of agent.family; "
                         "allowed: gas, water, barium, iodinated, oil, gadolinium, microbubble")


def test_unknown_source_is_rejected(tmp_path):
    d = _broken(tmp_path, "rules", lambda rows: _rule(rows, "renal-aki")["sources"][0].update(source="nkf-2099"))
    assert _error(d).startswith("rules.yaml: rule renal-aki: source 'nkf-2099' is not in sources.yaml; known: ")


def test_verified_rule_without_source_is_rejected(tmp_path):
    d = _broken(tmp_path, "rules", lambda rows: _rule(rows, "renal-aki").update(sources=[]))
    assert _error(d) == ("rules.yaml: record renal-aki: "
                         "rule renal-aki: certainty 'verified' needs at least one source")


def test_unknown_policy_setting_is_rejected(tmp_path):
    d = _broken(tmp_path, "rules", lambda rows: _rule(rows, "renal-hydrate-low-egfr")["when"]["all"][3].update(
        lt={"policy": "egfr_cutoff"}))
    assert _error(d).startswith("rules.yaml: rule renal-hydrate-low-egfr: policy setting 'egfr_cutoff' is not a "
                                "numeric setting; allowed: egfr_prophylaxis_consider_below")


def test_unknown_text_placeholder_is_rejected(tmp_path):
    d = _broken(tmp_path, "rules", lambda rows: _rule(rows, "renal-aki").update(text="eGFR {egfr_limit}"))
    assert _error(d).startswith("rules.yaml: rule renal-aki: text names {egfr_limit}, which is not a policy setting")


def test_case_rule_cannot_test_agent_facts(tmp_path):
    d = _broken(tmp_path, "rules", lambda rows: _rule(rows, "pregnancy-justify").update(
        when={"fact": "agent.family", "is": "barium"}))
    assert _error(d) == ("rules.yaml: rule pregnancy-justify: fact agent.family is per agent; "
                         "a case-scope rule cannot test it")


def test_test_with_two_operators_is_rejected(tmp_path):
    d = _broken(tmp_path, "rules", lambda rows: _rule(rows, "renal-aki")["when"]["all"][0].update(is_not=False))
    assert "rules.yaml: record renal-aki: when" in _error(d)


def test_unknown_agent_field_is_rejected(tmp_path):
    d = _broken(tmp_path, "agents", lambda rows: rows[0].update(brand="X"))
    assert _error(d).startswith("agents.yaml: record room-air: brand: unknown field; allowed: id, name, agent_class")


def test_duplicate_agent_id_is_rejected(tmp_path):
    d = _broken(tmp_path, "agents", lambda rows: rows.append(dict(rows[0])))
    assert _error(d) == "agents.yaml: duplicate id room-air"


def test_exam_role_with_unknown_agent_is_rejected(tmp_path):
    def edit(rows):
        next(e for e in rows if e["id"] == "fluoro-myelogram")["roles"][0]["agents"].append("iohexal")
    d = _broken(tmp_path, "exams", edit)
    assert _error(d) == ("exams.yaml: exam fluoro-myelogram, role 1 (intrathecal): unknown agent 'iohexal'; "
                         "see `contrast-aid agents`")


def test_exam_role_with_incompatible_agent_is_rejected(tmp_path):
    def edit(rows):
        next(e for e in rows if e["id"] == "fluoro-myelogram")["roles"][0]["agents"].append("barium-thin")
    d = _broken(tmp_path, "exams", edit)
    assert _error(d) == ("exams.yaml: exam fluoro-myelogram, role 1 (intrathecal): agent barium-thin cannot be "
                         "given by route intrathecal (routes.yaml)")


def test_malformed_yaml_is_reported_with_line(tmp_path):
    target = tmp_path / "data"
    shutil.copytree(DATA_DIR, target)
    (target / "sources.yaml").write_text("- id: a\n  title: [unclosed\n")
    assert _error(target).startswith("sources.yaml: not valid YAML at line 3")


def test_missing_table_file(tmp_path):
    target = tmp_path / "data"
    shutil.copytree(DATA_DIR, target)
    (target / "routes.yaml").unlink()
    assert _error(target).endswith("routes.yaml: file not found")


def test_policy_with_unknown_regimen(tmp_path):
    pol = yaml.safe_load((DATA_DIR / "policies" / "default.yaml").read_text())
    pol["premedication_regimen"] = "prednisone-99h"
    path = tmp_path / "p.yaml"
    path.write_text(yaml.safe_dump(pol))
    with pytest.raises(KnowledgeError) as exc:
        load_knowledge(policy=path)
    assert str(exc.value) == ("policy north-american-default: premedication_regimen 'prednisone-99h' is not one of "
                              "its regimens; allowed: prednisone-13h, methylprednisolone-12h, accelerated-iv")


def test_policy_out_of_range_setting(tmp_path):
    pol = yaml.safe_load((DATA_DIR / "policies" / "default.yaml").read_text())
    pol["egfr_hydration_below"] = 300
    path = tmp_path / "p.yaml"
    path.write_text(yaml.safe_dump(pol))
    with pytest.raises(KnowledgeError) as exc:
        load_policy(path)
    assert str(exc.value) == "p.yaml: policy.egfr_hydration_below: 300 is out of range; allowed: at most 120"


def test_every_operator_of_the_condition_format_has_a_compiler():
    # the condition compiler is one table (conditions.OPERATORS); an operator the model accepts but the
    # table lacks would only fail when a rule first used it
    from knowledge.tables.conditions import OPERATORS

    accepted = {f.alias or name for name, f in m.Test.model_fields.items() if name != "fact"}
    assert set(OPERATORS) == accepted == {"is", "is_not", "in", "not_in", "lt", "le", "gt", "ge", "has", "known"}
