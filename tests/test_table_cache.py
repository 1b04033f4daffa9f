"""The parse cache of the bundled tables (knowledge/tables/cache.py) and the per-exam candidate index
(knowledge/tables/loader.py ``Candidates``): both only make loading faster, so a load with them must give
exactly what a load without them gives."""

from __future__ import annotations

import datetime as dt
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from knowledge.decision.engine import decide
from knowledge.tables import cache, loader
from knowledge.tables.conditions import compile_partial

ROOT = Path(__file__).resolve().parents[1]
BUNDLED = [loader.DATA_DIR / f"{n}.yaml" for n in loader.TABLES] + sorted((loader.DATA_DIR / "policies").glob("*.yaml"))


def _no_cache(monkeypatch):
    monkeypatch.setattr(cache, "read", lambda path, blob: cache.MISSING)
    monkeypatch.setattr(cache, "write", lambda path, blob, data: 0)


def test_every_bundled_file_is_exact_json_and_its_entry_gives_the_parse():
    loader.write_parse_cache()
    for path in BUNDLED:
        blob = path.read_bytes()
        parsed = loader._parse_yaml(path, blob)
        assert cache.exact(parsed), path
        assert cache.read(path, blob) == parsed, path
        assert cache.entry_path(path, blob).name.startswith(path.stem + ".")


@pytest.mark.parametrize("policy", [None, "esur-v10"])
def test_a_cached_load_equals_a_parsed_load(monkeypatch, policy):
    loader.write_parse_cache()
    path = None if policy is None else loader.DATA_DIR / "policies" / f"{policy}.yaml"
    cached = loader.load_knowledge(policy=path)
    _no_cache(monkeypatch)
    parsed = loader.load_knowledge(policy=path)
    assert cached.tables == parsed.tables and cached.policy == parsed.policy
    assert (cached.version, cached.policy_version) == (parsed.version, parsed.policy_version)
    assert [r.text for r in cached.agent_rules + cached.case_rules] == [r.text for r in parsed.agent_rules +
                                                                        parsed.case_rules]


def test_a_cached_load_does_not_import_yaml():
    loader.write_parse_cache()
    code = "import sys; from knowledge.tables.loader import load_knowledge; load_knowledge(); print('yaml' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT, check=True)
    assert out.stdout.strip() == "False", out.stderr


def test_an_entry_is_used_only_for_the_exact_bytes(tmp_path):
    path = loader.DATA_DIR / "routes.yaml"
    blob = path.read_bytes()
    loader.write_parse_cache()
    assert cache.read(path, blob) is not cache.MISSING
    assert cache.read(path, blob + b"\n# edited\n") is cache.MISSING  # an edited table is parsed again
    where = cache.entry_path(path, blob)
    saved = where.read_bytes()
    try:
        where.write_text('{"sha256": "0", "data": []}', encoding="ascii")  # an entry for other bytes
        assert cache.read(path, blob) is cache.MISSING
        where.write_text('{"sha256": ', encoding="ascii")  # half an entry
        assert cache.read(path, blob) is cache.MISSING
    finally:
        where.write_bytes(saved)


def test_only_the_bundled_data_folder_is_cached(tmp_path):
    own = tmp_path / "default.yaml"
    shutil.copy(loader.DEFAULT_POLICY, own)
    blob = own.read_bytes()
    assert cache.entry_path(own, blob) is None
    assert cache.write(own, blob, {"id": "x"}) == 0
    loader.load_knowledge(policy=own)
    assert not (tmp_path / cache.FOLDER).exists()


@pytest.mark.parametrize("value", [dt.date(2026, 1, 2), float("nan"), {1: "a"}, {"k": (1, 2)}, b"x", {"k": [{2.5: 1}]}])
def test_data_json_would_change_is_not_stored(value):
    assert not cache.exact(value)
    assert not cache.exact({"outer": [value]})


def test_plain_data_is_exact():
    assert cache.exact({"id": "a", "n": 3, "x": 0.25, "ok": True, "none": None, "list": [1, "b", {"c": []}]})


def test_writing_is_atomic_and_replaces_the_older_entry(tmp_path, monkeypatch):
    monkeypatch.setattr(cache, "DATA_DIR", tmp_path)
    path = tmp_path / "rules.yaml"
    assert cache.write(path, b"a: 1\n", {"a": 1}) == 1
    assert cache.read(path, b"a: 1\n") == {"a": 1}
    assert cache.write(path, b"a: 2\n", {"a": 2}) == 1
    names = sorted(p.name for p in (tmp_path / cache.FOLDER).iterdir())
    assert names == [cache.entry_path(path, b"a: 2\n").name], names  # one entry, no temporary file left
    assert cache.entry_path(path, b"a: 2\n").stat().st_mode & 0o777 == 0o644
    assert cache.read(path, b"a: 1\n") is cache.MISSING


def test_a_folder_that_cannot_be_written_means_no_cache(tmp_path, monkeypatch):
    monkeypatch.setattr(cache, "DATA_DIR", tmp_path)
    (tmp_path / cache.FOLDER).write_text("not a folder", encoding="ascii")
    assert cache.write(tmp_path / "rules.yaml", b"a: 1\n", {"a": 1}) == 0
    assert cache.read(tmp_path / "rules.yaml", b"a: 1\n") is cache.MISSING


def test_the_loader_writes_entries_only_when_python_writes_bytecode(tmp_path, monkeypatch):
    data = tmp_path / "data"
    shutil.copytree(loader.DATA_DIR, data, ignore=shutil.ignore_patterns(cache.FOLDER))
    monkeypatch.setattr(cache, "DATA_DIR", data)
    monkeypatch.setattr(sys, "dont_write_bytecode", True)
    loader.load_knowledge(data_dir=data)
    assert not (data / cache.FOLDER).exists()
    monkeypatch.setattr(sys, "dont_write_bytecode", False)
    first = loader.load_knowledge(data_dir=data)
    assert sorted(p.name.split(".")[0] for p in (data / cache.FOLDER).glob("*.json")) == sorted(loader.TABLES)
    again = loader.load_knowledge(data_dir=data)
    assert again.tables == first.tables and again.version == first.version


# ------------------------------------------------------------------------- the per-exam candidate index
def _eager(k):
    """The index as the loader built it before it was lazy: every exam role, every agent."""
    partial = [(cr, compile_partial(cr.rule.when, k.policy)) for cr in k.agent_rules]
    out = {}
    for exam in k.tables.exams:
        for i, role in enumerate(exam.roles):
            rows = []
            for agent in loader.exam_agents(k, exam, role):
                facts = loader.static_facts(exam, role, agent, k.policy)
                rows.append((agent.id, facts, [cr.rule.id for cr, t in partial if t(facts) is not False]))
            out[(exam.id, i)] = rows
    return out


def test_candidates_are_built_per_exam_on_first_use_and_equal_the_eager_index():
    k = loader.load_knowledge()
    assert dict.__len__(k.candidates) == 0  # nothing built at load
    decide({"exam": "ct-abdomen-pelvis", "scheduled_at": "2026-12-02T09:00", "as_of": "2026-12-01T09:00",
            "patient": {"age_years": 60, "sex": "male", "weight_kg": 80}}, k)
    built = set(dict.keys(k.candidates))
    assert built and {e for e, _ in built} == {"ct-abdomen-pelvis"}
    eager = _eager(k)
    assert len(k.candidates) == len(eager) == sum(len(e.roles) for e in k.tables.exams)
    lazy = {key: [(a.id, f, [cr.rule.id for cr in rules]) for a, f, rules in rows] for key, rows in k.candidates.items()}
    assert lazy == eager


def test_an_unknown_exam_or_role_is_a_key_error():
    k = loader.load_knowledge()
    for key in [("no-such-exam", 0), ("ct-abdomen-pelvis", 99), ("ct-abdomen-pelvis", -1), "ct-abdomen-pelvis"]:
        with pytest.raises(KeyError):
            k.candidates[key]
        assert key not in k.candidates and k.candidates.get(key) is None
    assert ("ct-abdomen-pelvis", 0) in k.candidates
