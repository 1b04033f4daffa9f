"""`contrast-aid knowledge lint`: rules that can never fire, sources never cited, agents never offered,
and the coverage matrix (issue 9, section 4). Synthetic table rows exercise each finding; the bundled
tables' own findings are checked against what the tables say."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from knowledge import load_knowledge
from knowledge.cli import main
from knowledge.tables.lint import lint
from knowledge.tables.loader import DATA_DIR

ESUR = DATA_DIR / "policies" / "esur-v10.yaml"


@pytest.fixture(scope="module")
def report():
    return lint(load_knowledge())


def test_bundled_default_policy_has_no_dead_rules_or_agents(report):
    # The three gadolinium rules the European profile switches on (ESUR wording, EMA 2017 linear-agent
    # restriction, group II screening: issue 13) cannot fire under the North American default, and only
    # those; each of them can fire under the European example profile.
    switched = ["gbca-nsf-low-egfr-european", "gbca-renal-unknown-group-ii-policy", "gbca-linear-ema-restricted"]
    assert report.never_fire == switched and report.undecided == []
    assert not set(switched) & set(lint(load_knowledge(policy=ESUR)).never_fire)
    assert report.agents_never_offered == []


def test_esur_profile_leaves_the_consider_band_empty():
    # esur-v10.yaml sets egfr_prophylaxis_consider_below = egfr_hydration_below = 30 (ESUR v10 has no
    # separate 'consider' band), so renal-consider-prophylaxis (30 <= eGFR < 30) can never fire there
    assert lint(load_knowledge(policy=ESUR)).never_fire == ["renal-consider-prophylaxis"]


def test_coverage_matrix_names_the_rules_that_consider_each_factor(report):
    ct = report.coverage["ct-abdomen-pelvis"]
    assert "renal-hydrate-low-egfr" in ct["renal.egfr"]  # ACR-NKF 2020: eGFR below 30
    assert "barium-perforation" in report.coverage["fluoro-esophagram"]["patient.perforation_suspected"]
    assert "renal.egfr" not in report.coverage["fluoro-esophagram"]  # no intravascular role, no renal rule
    assert set(report.coverage) == {e.id for e in load_knowledge().tables.exams}


def _data_copy(tmp_path: Path) -> Path:
    data = tmp_path / "data"
    shutil.copytree(DATA_DIR, data)
    return data


def test_synthetic_dead_rules_unused_source_and_unoffered_agent(tmp_path):
    data = _data_copy(tmp_path)
    with open(data / "rules.yaml", "a", encoding="utf-8") as fh:
        fh.write("""
- id: lint-contradictory-egfr
  description: test row - no eGFR is both below 20 and at least 40
  when:
    all:
      - {fact: agent.family, is: iodinated}
      - {fact: renal.egfr, lt: 20}
      - {fact: renal.egfr, ge: 40}
  effect: {verdict: not_advised}
  text: never
  certainty: common_practice
- id: lint-barium-intravenous
  description: test row - barium is never a candidate for an intravenous role
  when:
    all:
      - {fact: agent.family, is: barium}
      - {fact: role.route, is: intravenous}
  effect: {verdict: contraindicated}
  text: never
  certainty: common_practice
- id: lint-reachable
  description: test row - fires for pregnant patients given iodinated agents
  when:
    all:
      - {fact: agent.family, is: iodinated}
      - {fact: patient.pregnant, is: true}
      - not: {fact: renal.egfr, lt: 10}
  effect: {}
  text: fires
  certainty: common_practice
""")
    with open(data / "sources.yaml", "a", encoding="utf-8") as fh:
        fh.write("""
- id: lint-unused-source
  title: An uncited test source
  issuer: Test
  year: 2020
  kind: paper
  certainty: from_memory
""")
    with open(data / "agents.yaml", "a", encoding="utf-8") as fh:
        fh.write("""
- id: lint-oil-agent
  name: Test barium oil (no route takes it)
  agent_class: positive
  family: barium
  form: oil
  routes: [intrathecal]
  certainty: from_memory
""")
    routes = (data / "routes.yaml").read_text(encoding="utf-8")
    assert "  forms: [solution, oil]\n" in routes  # intracavitary: the only route that takes the oil form
    (data / "routes.yaml").write_text(routes.replace("  forms: [solution, oil]\n",
                                                     "  forms: [solution, oil]\n  families: [iodinated, oil]\n"))
    rep = lint(load_knowledge(data_dir=data))
    assert [r for r in rep.never_fire if r.startswith("lint-")] == ["lint-contradictory-egfr", "lint-barium-intravenous"]
    assert "lint-unused-source" in rep.sources_never_cited
    assert "lint-oil-agent" in rep.agents_never_offered
    assert "lint-reachable" in rep.coverage["ct-abdomen-pelvis"]["patient.pregnant"]


def test_cli_lint_prints_each_section(capsys):
    assert main(["knowledge", "check", "--lint"]) == 0
    out = capsys.readouterr().out
    for head in ("knowledge ok:", "agents never offered: none",
                 "coverage (exam x patient factor"):
        assert head in out
    assert "rules that can never fire: gbca-nsf-low-egfr-european" in out  # switched on by the European profile
    assert main(["knowledge", "lint", "--json", "--policy", str(ESUR)]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["never_fire"] == ["renal-consider-prophylaxis"]
