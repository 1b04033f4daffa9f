"""Load the knowledge tables and a policy, validate them whole, and compile the rules.

The tables live in ``knowledge/data/*.yaml``; a policy is one YAML file (the default is
``knowledge/data/policies/default.yaml``). A broken table raises :class:`KnowledgeError` here, at load,
never in a live decision.
"""

from __future__ import annotations

import functools
import hashlib
import sys
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from pydantic import ValidationError

from . import cache
from . import models as m
from .conditions import Compiled, compile_condition, compile_partial
from . import overlay as ov_mod
from ..errors import KnowledgeError
from .validation import describe, error_from

DATA_DIR = Path(__file__).resolve().parent.parent / "data"
DEFAULT_POLICY = DATA_DIR / "policies" / "default.yaml"
TABLES = ("sources", "agents", "routes", "exams", "rules")


@dataclass(frozen=True)
class CompiledRule:
    rule: m.Rule
    test: Compiled
    source_text: str
    text: str  # the rule's text with {policy settings} filled in
    actions: tuple[str, ...]  # likewise for its actions
    reason: Any = None  # the m.Reason a firing shows (the same every time: built once at load)


@dataclass
class Knowledge:
    """Validated tables, a policy, indexes and compiled rules. Read-only once built."""

    tables: m.Tables
    policy: m.Policy
    version: str
    policy_version: str
    sources: dict[str, m.Source] = field(default_factory=dict)
    agents: dict[str, m.Agent] = field(default_factory=dict)
    exams: dict[str, m.Exam] = field(default_factory=dict)
    rules: dict[str, m.Rule] = field(default_factory=dict)
    #: (exam id, role index) -> [(agent, static facts, agent rules that can fire for it)]; a
    #: :class:`Candidates`, which builds each entry on first use
    candidates: dict[tuple[str, int], list[tuple[m.Agent, dict[str, Any], list["CompiledRule"]]]] = field(
        default_factory=dict)
    compatible: dict[m.Route, list[m.Agent]] = field(default_factory=dict)
    agent_rules: list[CompiledRule] = field(default_factory=list)
    case_rules: list[CompiledRule] = field(default_factory=list)
    regimens: dict[str, m.Regimen] = field(default_factory=dict)
    #: a department overlay (formulary, preferred agents, codes, on-call line), if the policy file is one
    overlay: ov_mod.Overlay | None = None
    #: the bundled profile the overlay starts from (its Policy), for ``policy check`` and ``policy diff``
    base_policy: m.Policy | None = None

    def cite(self, refs: list[m.SourceRef], certainty: m.Certainty) -> str:
        """Sources as shown to users: 'title, issuer year, section; ...' or the certainty words."""
        if not refs:
            return "common practice" if certainty is m.Certainty.common_practice else "from memory"
        parts = []
        for ref in refs:
            s = self.sources[ref.source]
            year = f" {s.year}" if s.year else ""
            parts.append(f"{s.title}, {s.issuer}{year}, {ref.section}")
        text = "; ".join(parts)
        if certainty is m.Certainty.from_memory:
            text += " (from memory, not verified)"
        elif certainty is m.Certainty.common_practice:
            text += " (common practice)"
        return text

    def counts(self) -> dict[str, int]:
        return {
            "exams": len(self.exams),
            "agents": len(self.agents),
            "rules": len(self.rules),
            "sources": len(self.sources),
        }


#: Largest table or policy file read (bytes); the bundled tables are well under 1 MB.
MAX_YAML_BYTES = 4_000_000
#: Most values (scalars, lists, mappings, counted through aliases) a YAML file may expand to: an
#: anchor/alias "bomb" of a few hundred bytes expands to billions and would take minutes and gigabytes.
MAX_YAML_NODES = 500_000


@functools.lru_cache(maxsize=None)
def _yaml_loader() -> type:
    """PyYAML's safe loader (libyaml's C loader when PyYAML was built with it: the same safe subset, several
    times faster), but a mapping with the same key twice is an error (the last no longer wins). Imported on
    first use: a process that finds every file it reads in the parse cache (``cache.py``) never imports yaml."""
    import yaml

    class UniqueKeyLoader(getattr(yaml, "CSafeLoader", yaml.SafeLoader)):  # type: ignore[misc]
        def construct_mapping(self, node, deep=False):  # type: ignore[override]
            seen: set = set()
            for key_node, _ in node.value:
                key = self.construct_object(key_node, deep=True)
                try:
                    duplicate = key in seen
                    seen.add(key)
                except TypeError:  # an unhashable key: the base class reports it
                    continue
                if duplicate:
                    raise yaml.constructor.ConstructorError(
                        None, None, f"duplicate key {str(key)[:60]!r} (each setting may appear once)",
                        key_node.start_mark)
            return super().construct_mapping(node, deep=deep)

    return UniqueKeyLoader


def _count_nodes(data: Any, budget: int) -> int:
    """Values in ``data`` counted through shared (aliased) objects, stopping once past ``budget``."""
    count, stack = 0, [data]
    while stack:
        item = stack.pop()
        count += 1
        if count > budget:
            return count
        if isinstance(item, dict):
            stack.extend(item.keys())
            stack.extend(item.values())
        elif isinstance(item, list):
            stack.extend(item)
    return count


def _read_text(path: Path, cls: type[KnowledgeError] = KnowledgeError, limit: int = MAX_YAML_BYTES) -> bytes:
    """The bytes of a regular file no bigger than ``limit``; a device, a pipe or a folder is refused
    before it is opened (opening a named pipe would block), and the file is opened non-blocking."""
    import os
    import stat

    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise cls(f"{path}: file not found", field=str(path)) from None
    except (OSError, ValueError) as exc:
        raise cls(f"{path}: cannot be read ({getattr(exc, 'strerror', None) or exc})", field=str(path)) from None
    if stat.S_ISDIR(st.st_mode):
        raise cls(f"{path}: is a folder, not a file", field=str(path))
    if not stat.S_ISREG(st.st_mode):
        raise cls(f"{path}: is not a regular file (a device or a pipe); allowed: a file", field=str(path))
    if st.st_size > limit:
        raise cls(f"{path}: {st.st_size} bytes is too big; allowed: at most {limit} bytes", field=str(path))
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
        with os.fdopen(fd, "rb") as fh:
            blob = fh.read(limit + 1)
    except OSError as exc:
        raise cls(f"{path}: cannot be read ({exc.strerror or exc})", field=str(path)) from None
    if len(blob) > limit:
        raise cls(f"{path}: too big; allowed: at most {limit} bytes", field=str(path))
    return blob


def _read_yaml(path: Path) -> Any:
    """(data, bytes) of a YAML file: from the parse cache when it holds these exact bytes, else parsed
    (and then stored in the cache, for the bundled files)."""
    blob = _read_text(path)
    data = cache.read(path, blob)
    if data is not cache.MISSING:
        return data, blob
    data = _parse_yaml(path, blob)
    if not sys.dont_write_bytecode:  # the cache is written when bytecode is (PYTHONDONTWRITEBYTECODE)
        cache.write(path, blob, data)
    return data, blob


def _parse_yaml(path: Path, blob: bytes) -> Any:
    import yaml

    try:
        text = blob.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise KnowledgeError(f"{path.name}: not UTF-8 text (byte {exc.start + 1}); allowed: a UTF-8 YAML file",
                             field=path.name) from None
    try:
        data = yaml.load(text, Loader=_yaml_loader())
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        at = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise KnowledgeError(f"{path.name}: not valid YAML{at}: {problem}", field=path.name) from None
    except RecursionError:
        raise KnowledgeError(f"{path.name}: nested too deeply; allowed: plain YAML records", field=path.name) from None
    if _count_nodes(data, MAX_YAML_NODES) > MAX_YAML_NODES:
        raise KnowledgeError(f"{path.name}: expands to more than {MAX_YAML_NODES} values (anchors and aliases?); "
                             "allowed: plain YAML records", field=path.name)
    return data


def write_parse_cache() -> int:
    """Parse every bundled table and policy and store it in the parse cache, whatever
    PYTHONDONTWRITEBYTECODE says (as ``compileall`` writes bytecode); ``contrast-aid serve`` runs this once
    at start. Returns the files stored (0 where the data folder is read-only)."""
    stored = 0
    for path in [DATA_DIR / f"{name}.yaml" for name in TABLES] + sorted((DATA_DIR / "policies").glob("*.yaml")):
        blob = _read_text(path)
        if cache.read(path, blob) is cache.MISSING:
            stored += cache.write(path, blob, _parse_yaml(path, blob))
    return stored


def _validate_list(model: type, rows: Any, name: str) -> list:
    if not isinstance(rows, list):
        raise KnowledgeError(f"{name}.yaml: the file must hold a list of records; got {type(rows).__name__}")
    out = []
    for i, row in enumerate(rows):
        ident = row.get("id") if isinstance(row, dict) else None
        ident = ident or (row.get("route") if isinstance(row, dict) else None) or f"#{i + 1}"
        try:
            out.append(model.model_validate(row))
        except ValidationError as exc:
            raise KnowledgeError(f"{name}.yaml: record {ident}: {describe(exc, model)}") from None
    return out


def _unique(rows: list, name: str, key: str = "id") -> None:
    dup = [k for k, n in Counter(getattr(r, key) for r in rows).items() if n > 1]
    if dup:
        raise KnowledgeError(f"{name}.yaml: duplicate {key} {', '.join(map(str, dup))}")


def load_policy(path: Path | str | None = None) -> tuple[m.Policy, bytes]:
    """A plain policy or a department overlay merged onto its base, and the bytes its hash is taken of."""
    pol, blob, _overlay, _base = load_policy_file(path)
    return pol, blob


def load_policy_file(path: Path | str | None = None) -> tuple[m.Policy, bytes, Any, m.Policy | None]:
    """(policy, bytes hashed, overlay or None, base policy or None). An overlay's hash covers its base."""
    p = Path(path) if path else DEFAULT_POLICY
    raw, blob = _read_yaml(p)
    if ov_mod.is_overlay(raw):
        overlay = ov_mod.parse_overlay(raw, p.name)
        base, base_blob = _plain_policy(DATA_DIR / "policies" / f"{overlay.base}.yaml")
        return ov_mod.merge_policy(base, overlay, p.name), blob + b"\0" + base_blob, overlay, base
    pol, blob = _plain_policy(p, raw, blob)
    return pol, blob, None, None


def _plain_policy(p: Path, raw: Any = None, blob: bytes | None = None) -> tuple[m.Policy, bytes]:
    if blob is None:
        raw, blob = _read_yaml(p)
    if not isinstance(raw, dict):
        raise KnowledgeError(f"{p.name}: a policy file must hold one mapping of settings")
    try:
        # strict: a number must be written as a number (YAML's yes/no or "5" are not numbers), finite
        return m.Policy.model_validate(raw, strict=True), blob
    except ValidationError as exc:
        raise error_from(exc, m.Policy, KnowledgeError, "policy", where=p.name) from None


def load_knowledge(data_dir: Path | str | None = None, policy: Path | str | m.Policy | None = None) -> Knowledge:
    """Read, validate and index every table and the policy. Raises :class:`KnowledgeError`."""
    raw, version = _read_tables(Path(data_dir) if data_dir else DATA_DIR)
    if isinstance(policy, m.Policy):  # an already validated policy object (tests sweep thresholds this way)
        pol, pol_blob, overlay, base_policy = policy, policy.model_dump_json().encode("utf-8"), None, None
    else:
        pol, pol_blob, overlay, base_policy = load_policy_file(policy)
    k = _indexed(_parse_tables(raw), pol, version, hashlib.sha256(pol_blob).hexdigest()[:12])
    if overlay is not None:  # department overlay: check its references, keep only the strengths held
        ov_mod.check_overlay(overlay, k.agents, k.exams, Path(policy).name)
        k.overlay, k.base_policy = overlay, base_policy
        k.agents = {aid: ov_mod.held_strengths(overlay, a) for aid, a in k.agents.items()}
    _check_references(k)
    _build_compatibility(k)
    _check_exam_roles(k)
    _compile_rules(k)
    _build_candidates(k)
    return k


def _read_tables(base: Path) -> tuple[dict[str, Any], str]:
    """Every table's YAML, and the knowledge version: the first 12 hex digits of their SHA-256."""
    raw: dict[str, Any] = {}
    digest = hashlib.sha256()
    for name in TABLES:
        data, blob = _read_yaml(base / f"{name}.yaml")
        raw[name] = data
        digest.update(name.encode() + b"\0" + blob + b"\0")
    return raw, digest.hexdigest()[:12]


#: the strict model of each table's records
_TABLE_MODELS: dict[str, type] = {
    "sources": m.Source,
    "agents": m.Agent,
    "routes": m.RouteCompatibility,
    "exams": m.Exam,
    "rules": m.Rule,
}


def _parse_tables(raw: dict[str, Any]) -> m.Tables:
    """Every record validated by its model; ids unique in each table (routes: one record per route)."""
    parsed = {name: _validate_list(_TABLE_MODELS[name], raw[name], name) for name in TABLES}
    for name in ("sources", "agents", "exams", "rules"):
        _unique(parsed[name], name)
    _unique(parsed["routes"], "routes", "route")
    return m.Tables(**parsed)


def _indexed(tables: m.Tables, pol: m.Policy, version: str, policy_version: str) -> Knowledge:
    """The Knowledge with its indexes by id (rules not compiled yet)."""
    k = Knowledge(tables=tables, policy=pol, version=version, policy_version=policy_version)
    k.sources = {s.id: s for s in tables.sources}
    k.agents = {a.id: a for a in tables.agents}
    k.exams = {e.id: e for e in tables.exams}
    k.rules = {r.id: r for r in tables.rules}
    k.regimens = {r.id: r for r in pol.regimens}
    return k


def _compile_rules(k: Knowledge) -> None:
    """Each rule's condition compiled, its text and actions filled from the policy, its reason built once."""
    pol = k.policy
    for rule in k.tables.rules:
        where = f"rules.yaml: rule {rule.id}"
        source_text, text = k.cite(rule.sources, rule.certainty), _fill(rule.text, pol, where)
        reason = m.Reason.model_construct(rule=rule.id, text=text, verdict=rule.effect.verdict, source=source_text,
                                          certainty=rule.certainty)
        compiled = CompiledRule(rule, compile_condition(rule.when, pol, where, rule.scope), source_text, text,
                                tuple(_fill(a, pol, where) for a in rule.effect.actions), reason)
        (k.agent_rules if rule.scope is m.Scope.agent else k.case_rules).append(compiled)


def exam_facts(exam: m.Exam, policy: m.Policy) -> dict[str, Any]:
    """The facts fixed by the exam and the policy (see knowledge/tables/facts.py)."""
    return {
        "exam.id": exam.id,
        "exam.modality": exam.modality.value,
        "exam.contrast": exam.contrast.value,
        "exam.tags": tuple(exam.tags),
        "exam.has_intravascular_role": any(r.route in m.INTRAVASCULAR for r in exam.roles),
        "policy.metformin_hold_first_pass": policy.metformin_hold_first_pass,
        "policy.gbca_group_ii_egfr_screening": policy.gbca_group_ii_egfr_screening,
        "policy.gbca_linear_iv_restricted": policy.gbca_linear_iv_restricted,
        "policy.gbca_low_egfr_precautions": policy.gbca_low_egfr_precautions,
    }


def static_facts(exam: m.Exam, role: m.ExamRole, agent: m.Agent, policy: m.Policy) -> dict[str, Any]:
    """The facts fixed by the exam, role, agent and policy (see knowledge/tables/facts.py)."""
    return {
        **exam_facts(exam, policy),
        "role.route": role.route.value,
        "role.intravascular": role.route in m.INTRAVASCULAR,
        "role.renal_exposure": role.renal_exposure.value,
        "role.territory": role.territory.value,
        "role.catheter_study": role.catheter_study,
        "agent.id": agent.id,
        "agent.family": agent.family.value,
        "agent.class": agent.agent_class.value,
        "agent.form": agent.form.value,
        "agent.osmolality_class": agent.osmolality_class.value if agent.osmolality_class else None,
        "agent.ionicity": agent.ionicity.value if agent.ionicity else None,
        "agent.labelled_for_route": role.route in agent.routes,
        "agent.usual_for_role": agent.id in role.agents,
        **_mr_us_agent_facts(agent),
    }


def _mr_us_agent_facts(agent: m.Agent) -> dict[str, Any]:
    """The gadolinium and microbubble agent facts (issue 13); None where they do not apply."""
    return {
        "agent.gbca_group": agent.gbca_group.value if agent.gbca_group else None,
        "agent.gbca_structure": agent.gbca_structure.value if agent.gbca_structure else None,
        "agent.hepatobiliary": agent.hepatobiliary.value if agent.hepatobiliary else None,
        "agent.mri_signal": agent.mri_signal.value if agent.mri_signal else None,
        "agent.excipients": tuple(agent.excipients),
    }


def exam_agents(k: "Knowledge", exam: m.Exam, role: m.ExamRole) -> list[m.Agent]:
    """The agents that could be given in a role: route-compatible (routes.yaml) and imaging in the exam's
    modality (an MRI exam is not offered iodinated agents, nor a CT exam gadolinium; issue 13)."""
    modality = exam.modality.value
    return [a for a in k.compatible[role.route] if modality in a.imaging_modalities()]


Candidate = tuple[m.Agent, dict[str, Any], list[CompiledRule]]


class Candidates(dict):
    """(exam id, role index) -> [(agent, static facts, agent rules that can fire for it)], built per exam
    role the first time it is asked for (a page that decides one exam does not index the other 150).

    An index only: every rule's full condition is still tested on every decision, and the rules were
    checked and compiled at load. Iterating (``items()``, ``len()``...) builds every entry first."""

    def __init__(self, k: Knowledge):
        super().__init__()
        self._k = k
        self._partial = [(cr, compile_partial(cr.rule.when, k.policy)) for cr in k.agent_rules]

    def __missing__(self, key: tuple[str, int]) -> list[Candidate]:
        exam = self._k.exams.get(key[0]) if isinstance(key, tuple) and len(key) == 2 else None
        if exam is None or not isinstance(key[1], int) or not 0 <= key[1] < len(exam.roles):
            raise KeyError(key)
        role = exam.roles[key[1]]
        rows = []
        for agent in exam_agents(self._k, exam, role):
            facts = static_facts(exam, role, agent, self._k.policy)
            rows.append((agent, facts, [cr for cr, test in self._partial if test(facts) is not False]))
        self[key] = rows
        return rows

    def get(self, key, default=None):
        try:
            return self[key]
        except KeyError:
            return default

    def __contains__(self, key) -> bool:
        return self.get(key) is not None

    def fill(self) -> "Candidates":
        for exam in self._k.tables.exams:
            for i in range(len(exam.roles)):
                self[(exam.id, i)]
        return self

    def keys(self):
        return dict.keys(self.fill())

    def values(self):
        return dict.values(self.fill())

    def items(self):
        return dict.items(self.fill())

    def __iter__(self):
        return dict.__iter__(self.fill())

    def __len__(self) -> int:
        return dict.__len__(self.fill())


def _build_candidates(k: Knowledge) -> None:
    """Index, per exam role and agent, the rules whose exam/role/agent/policy tests do not already fail
    (lazily, see :class:`Candidates`). A speed-up only: the full condition is still tested on every decision."""
    k.candidates = Candidates(k)


class _Settings(dict):
    def __missing__(self, key: str) -> str:
        raise KeyError(key)


def _fill(text: str, policy: m.Policy, where: str) -> str:
    """Fill ``{setting}`` placeholders of a rule text from the policy (whole numbers shown without .0)."""
    values = _Settings()
    for name in m.Policy.model_fields:
        v = getattr(policy, name)
        values[name] = f"{v:g}" if isinstance(v, float) else v
    try:
        return text.format_map(values)
    except KeyError as exc:
        raise KnowledgeError(
            f"{where}: text names {{{exc.args[0]}}}, which is not a policy setting; allowed: {', '.join(m.Policy.model_fields)}"
        ) from None
    except (ValueError, IndexError):
        raise KnowledgeError(f"{where}: text has a stray brace; write {{{{ or }}}} for a literal brace") from None


def _ref_ok(k: Knowledge, refs: list[m.SourceRef], where: str) -> None:
    for ref in refs:
        if ref.source not in k.sources:
            raise KnowledgeError(
                f"{where}: source {ref.source!r} is not in sources.yaml; known: {', '.join(sorted(k.sources))}"
            )


def _check_references(k: Knowledge) -> None:
    for a in k.tables.agents:
        _ref_ok(k, a.sources, f"agents.yaml: agent {a.id}")
        for c in a.concentrations:
            if c.source:
                _ref_ok(k, [c.source], f"agents.yaml: agent {a.id}")
        if a.family is m.Family.iodinated and any(c.unit is not m.Unit.mg_i_per_ml for c in a.concentrations):
            raise KnowledgeError(f"agents.yaml: agent {a.id}: iodinated strengths must be in mg_i_per_ml")
        gd = a.family is m.Family.gadolinium
        if any((c.unit is m.Unit.mmol_per_ml) != gd for c in a.concentrations):
            raise KnowledgeError(f"agents.yaml: agent {a.id}: strengths in mmol_per_ml are for gadolinium agents, "
                                 "and gadolinium strengths must be in mmol_per_ml")
        if a.dose_source:
            _ref_ok(k, [a.dose_source], f"agents.yaml: agent {a.id}")
    for r in k.tables.rules:
        _ref_ok(k, r.sources, f"rules.yaml: rule {r.id}")
    for e in k.tables.exams:
        for role in e.roles:
            if role.protocol and role.protocol.source:
                _ref_ok(k, [role.protocol.source], f"exams.yaml: exam {e.id}")
            if role.protocol and role.protocol.for_agent and role.protocol.for_agent not in role.agents:
                raise KnowledgeError(f"exams.yaml: exam {e.id}: protocol for_agent {role.protocol.for_agent!r} is "
                                     f"not one of the role's agents; allowed: {', '.join(role.agents)}")
    _ref_ok(k, k.policy.based_on, f"policy {k.policy.id}")
    for reg in k.policy.regimens:
        _ref_ok(k, [reg.source], f"policy {k.policy.id}: regimen {reg.id}")
    for rid in k.policy.elective_regimens or []:
        if rid not in k.regimens or rid == k.policy.premedication_accelerated_regimen:
            raise KnowledgeError(
                f"policy {k.policy.id}: elective_regimens {rid!r} is not one of its elective regimens; allowed: "
                f"{', '.join(r for r in k.regimens if r != k.policy.premedication_accelerated_regimen)}")
    for name in ("premedication_regimen", "premedication_accelerated_regimen"):
        rid = getattr(k.policy, name)
        if rid not in k.regimens:
            raise KnowledgeError(
                f"policy {k.policy.id}: {name} {rid!r} is not one of its regimens; allowed: {', '.join(k.regimens)}"
            )


def _build_compatibility(k: Knowledge) -> None:
    seen = {c.route for c in k.tables.routes}
    missing = [r.value for r in m.Route if r not in seen]
    if missing:
        raise KnowledgeError(f"routes.yaml: no compatibility record for route {', '.join(missing)}")
    for comp in k.tables.routes:
        for aid in comp.agents:
            if aid not in k.agents:
                raise KnowledgeError(f"routes.yaml: route {comp.route.value}: unknown agent {aid!r}")
        k.compatible[comp.route] = [
            a
            for a in k.tables.agents
            if a.id in comp.agents
            or (a.form in comp.forms and (not comp.families or a.family in comp.families))
        ]


def _check_exam_roles(k: Knowledge) -> None:
    for e in k.tables.exams:
        for i, role in enumerate(e.roles):
            where = f"exams.yaml: exam {e.id}, role {i + 1} ({role.route.value})"
            if not role.agents:
                raise KnowledgeError(f"{where}: agents must list at least one agent")
            compat = {a.id for a in k.compatible[role.route]}
            here = {a.id for a in exam_agents(k, e, role)}
            for aid in role.agents:
                if aid not in k.agents:
                    raise KnowledgeError(f"{where}: unknown agent {aid!r}; see `contrast-aid agents`")
                if aid not in compat:
                    raise KnowledgeError(
                        f"{where}: agent {aid} cannot be given by route {role.route.value} (routes.yaml)"
                    )
                if aid not in here:
                    raise KnowledgeError(
                        f"{where}: agent {aid} does not image in {e.modality.value}; it images in "
                        f"{', '.join(k.agents[aid].imaging_modalities())}")
