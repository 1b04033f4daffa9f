"""Clinical scenarios as data (tests/vectors/scenarios.yaml), each naming its source."""

from __future__ import annotations

import pytest

from knowledge.tables.loader import DATA_DIR, load_knowledge
from knowledge.decision.engine import decide
from tests.scenarios import check, load_vectors

VECTORS = load_vectors()


@pytest.fixture(scope="module")
def knowledge():
    return load_knowledge()


@pytest.fixture(scope="module")
def policies():
    """Knowledge per policy stem, for vectors that name a policy (issue 13: European profile rules)."""
    cache = {}

    def get(stem):
        if stem not in cache:
            cache[stem] = load_knowledge(policy=DATA_DIR / "policies" / f"{stem}.yaml")
        return cache[stem]
    return get


def test_enough_scenarios_each_with_a_source():
    assert len(VECTORS) >= 40
    ids = [v["id"] for v in VECTORS]
    assert len(ids) == len(set(ids)), "scenario ids must be unique"
    for v in VECTORS:
        assert v.get("source"), f"{v['id']} names no source"
        assert v.get("expect"), f"{v['id']} expects nothing"


@pytest.mark.parametrize("vector", VECTORS, ids=[v["id"] for v in VECTORS])
def test_scenario(vector, knowledge, policies):
    k = policies(vector["policy"]) if vector.get("policy") else knowledge
    decision = decide(vector["case"], k)
    problems = check(decision, vector["expect"])
    assert not problems, f"{vector['id']} ({vector['source']}):\n  " + "\n  ".join(problems)
