"""A department overlay: one reviewed file that starts from a bundled policy profile and says what the
department does differently.

An overlay names its ``base`` profile (``default``: North American consensus, or ``esur-v10``: the
European example), then optionally: threshold overrides, creatinine freshness windows, the premedication
regimens in use, a formulary (agents stocked, with local display labels and the strengths held), a
preferred agent per exam role, local procedure codes mapped to exam ids and an on-call contact line.

``merge_policy`` turns base + overlay into an ordinary :class:`~knowledge.tables.models.Policy` (the
thresholds rules read); ``check_overlay`` checks the overlay's agent, exam and route references against
the loaded tables. Both are pure; the loader reads the files.
"""

from __future__ import annotations

from typing import Any, Literal

from pydantic import Field, PrivateAttr, StrictFloat, ValidationError, field_validator, model_validator

from . import models as m
from ..errors import KnowledgeError
from .validation import describe

#: the bundled profiles an overlay may start from (file stems of knowledge/data/policies/)
BASES = ("default", "esur-v10")

#: Policy settings that are numbers and may be overridden under ``thresholds``
THRESHOLDS = tuple(
    name for name, f in m.Policy.model_fields.items()
    if f.annotation in (float, float | None) and not name.startswith("creatinine_max_age")
)


class Formulary(m.Strict):
    """One agent the department stocks."""

    agent: str = Field(description="Agent id from the agents table (`contrast-aid agents`)")
    label: str = Field(description="The department's display label (a generic name and strength, never a brand)",
                       min_length=1, max_length=80)
    concentrations: list[StrictFloat] = Field(
        default_factory=list,
        description="Strengths held (mg I/mL for iodinated agents, else the catalogue's unit); empty: all strengths")


class Preferred(m.Strict):
    """The agent a department uses first for one exam role, among agents of equal verdict."""

    route: m.Route = Field(description="The role's route")
    agent: str = Field(description="Agent id preferred for that route")
    exam: str | None = Field(None, description="Exam id; omitted: every exam with a role by this route")


class Premedication(m.Strict):
    """The premedication regimens the department uses (a subset of its base profile's regimens)."""

    elective: list[str] = Field(
        description="Ids of the elective regimens in the order they are tried (regimens of the base profile); "
                    "one id is a list of one", min_length=1)
    accelerated: str = Field(description="Id of the accelerated regimen (a regimen of the base profile)")

    @field_validator("elective", mode="before")
    @classmethod
    def _one_or_many(cls, value: Any) -> Any:
        return [value] if isinstance(value, str) else value


class Freshness(m.Strict):
    """How old a creatinine may be at the exam time."""

    outpatient_days: StrictFloat = Field(description="Stable outpatient, days", gt=0, le=365)
    inpatient_days: StrictFloat = Field(description="Inpatient or acute illness, days", gt=0, le=30)


class Overlay(m.Strict):
    """A department overlay on a bundled policy profile."""

    id: str = Field(description="Stable key of the department policy", pattern=r"^[a-z0-9][a-z0-9-]*$")
    name: str = Field(description="Name shown to users", min_length=1)
    base: Literal["default", "esur-v10"] = Field(
        description="Bundled profile it starts from: default (North American consensus) or esur-v10 (European)")
    # strict numbers (as in a plain policy file): YAML's yes/no or "5" are not numbers
    thresholds: dict[str, StrictFloat] = Field(
        default_factory=dict, description=f"Numeric policy settings to override; allowed: {', '.join(THRESHOLDS)}")
    creatinine_freshness: Freshness | None = Field(None, description="Creatinine freshness windows")
    premedication: Premedication | None = Field(None, description="Premedication regimens in use")
    formulary: list[Formulary] | None = Field(
        None, description="Agents stocked; omitted: every catalogue agent counts as stocked")
    preferred: list[Preferred] = Field(default_factory=list, description="Preferred agent per exam role")
    procedure_codes: dict[str, str] = Field(
        default_factory=dict, description="Local procedure code -> exam id")
    on_call: str | None = Field(None, description="Contact line for the on-call radiologist, shown on every decision",
                                max_length=200)
    _items: dict = PrivateAttr(default_factory=dict)  # agent id -> formulary item, built once

    def model_post_init(self, _context: Any) -> None:
        self._items.update({f.agent: f for f in self.formulary or []})

    @model_validator(mode="after")
    def _shape(self) -> "Overlay":
        for name in self.thresholds:
            if name not in THRESHOLDS:
                raise ValueError(f"thresholds.{name}: not a numeric policy setting; allowed: {', '.join(THRESHOLDS)}")
        seen: set[str] = set()
        for item in self.formulary or []:
            if item.agent in seen:
                raise ValueError(f"formulary: agent {item.agent} is listed twice")
            seen.add(item.agent)
        keys = [(p.exam, p.route) for p in self.preferred]
        for key in keys:
            if keys.count(key) > 1:
                where = key[0] or "every exam"
                raise ValueError(f"preferred: two preferred agents for {where}, route {key[1].value}")
        return self

    def stocked(self, agent_id: str) -> bool:
        return self.formulary is None or agent_id in self._items

    def item(self, agent_id: str) -> Formulary | None:
        return self._items.get(agent_id)

    def preferred_for(self, exam_id: str, route: m.Route) -> str | None:
        exact = next((p.agent for p in self.preferred if p.exam == exam_id and p.route is route), None)
        return exact or next((p.agent for p in self.preferred if p.exam is None and p.route is route), None)


def is_overlay(raw: Any) -> bool:
    """A policy file is an overlay when it names a ``base`` profile."""
    return isinstance(raw, dict) and "base" in raw


def parse_overlay(raw: Any, filename: str) -> Overlay:
    try:
        return Overlay.model_validate(raw)
    except ValidationError as exc:
        line = describe(exc, Overlay, "overlay")
        if line.startswith("overlay: ") and line[9:].split(":")[0].split(".")[0].split("[")[0] in Overlay.model_fields:
            line = "overlay." + line[9:]  # a whole-overlay check names its own field
        raise KnowledgeError(f"{filename}: {line}") from None


def merge_policy(base: m.Policy, ov: Overlay, filename: str) -> m.Policy:
    """The base profile with the overlay's settings applied, validated as a whole policy."""
    data = base.model_dump()
    data.update(id=ov.id, name=ov.name)
    data.update(ov.thresholds)
    if ov.creatinine_freshness is not None:
        data["creatinine_max_age_days_outpatient"] = ov.creatinine_freshness.outpatient_days
        data["creatinine_max_age_days_inpatient"] = ov.creatinine_freshness.inpatient_days
    if ov.premedication is not None:
        known = [r["id"] for r in data["regimens"]]
        pm = ov.premedication
        for key, rid in [("elective", e) for e in pm.elective] + [("accelerated", pm.accelerated)]:
            if rid not in known:
                raise KnowledgeError(f"{filename}: overlay.premedication.{key}: {rid!r} is not a regimen of base "
                                     f"{ov.base}; allowed: {', '.join(known)}")
        used = [*pm.elective, pm.accelerated]
        data["regimens"] = [r for r in data["regimens"] if r["id"] in used]
        data["premedication_regimen"], data["premedication_accelerated_regimen"] = pm.elective[0], pm.accelerated
        if "elective_regimens" in data:  # tried in this order before the accelerated one
            data["elective_regimens"] = list(pm.elective)
    try:  # strict, as a plain policy file is: YAML's yes/no or "5" are not numbers
        return m.Policy.model_validate(data, strict=True)
    except ValidationError as exc:
        line = describe(exc, m.Policy)
        for name in ov.thresholds:  # name the overlay's own field
            if line.startswith(name + ":"):
                line = "thresholds." + line
        raise KnowledgeError(f"{filename}: overlay.{line}") from None


def check_overlay(ov: Overlay, agents: dict[str, m.Agent], exams: dict[str, m.Exam], filename: str) -> None:
    """The overlay's agents, strengths, exams and routes must exist in the tables."""
    def agent_ok(aid: str, where: str) -> m.Agent:
        if aid not in agents:
            raise KnowledgeError(f"{filename}: {where}: {aid!r} is not a known agent; allowed: the ids of "
                                 "`contrast-aid agents`")
        return agents[aid]

    for i, item in enumerate(ov.formulary or []):
        agent = agent_ok(item.agent, f"overlay.formulary[{i}].agent")
        held = {c.value for c in agent.concentrations}
        for value in item.concentrations:
            if value not in held:
                allowed = ", ".join(f"{v:g}" for v in sorted(held)) or "none (the catalogue lists no strengths)"
                raise KnowledgeError(f"{filename}: overlay.formulary[{i}].concentrations: {value:g} is not a "
                                     f"strength of {agent.id}; allowed: {allowed}")
    for i, pref in enumerate(ov.preferred):
        where = f"overlay.preferred[{i}]"
        agent_ok(pref.agent, where + ".agent")
        if pref.exam is not None and pref.exam not in exams:
            raise KnowledgeError(f"{filename}: {where}.exam: {pref.exam!r} is not a known exam; allowed: the ids of "
                                 "`contrast-aid exams`")
        scope = [exams[pref.exam]] if pref.exam else list(exams.values())
        if not any(r.route is pref.route and pref.agent in r.agents for e in scope for r in e.roles):
            what = pref.exam or "any exam"
            raise KnowledgeError(f"{filename}: {where}: {pref.agent} is not a usual agent of a {pref.route.value} "
                                 f"role of {what}; allowed: an agent the exam's role lists")
        if not ov.stocked(pref.agent):
            raise KnowledgeError(f"{filename}: {where}.agent: {pref.agent} is preferred but not in the formulary")
    for code, exam_id in ov.procedure_codes.items():
        if exam_id not in exams:
            raise KnowledgeError(f"{filename}: overlay.procedure_codes.{code}: {exam_id!r} is not a known exam; "
                                 "allowed: the ids of `contrast-aid exams`")


def held_strengths(ov: Overlay, agent: m.Agent) -> m.Agent:
    """The agent with only the strengths the department holds (unchanged when it lists none)."""
    item = ov.item(agent.id)
    if item is None or not item.concentrations:
        return agent
    update: dict[str, Any] = {"concentrations": [c for c in agent.concentrations if c.value in item.concentrations]}
    if getattr(agent, "intrathecal_strengths", None):  # only the held ones can be planned intrathecally
        update["intrathecal_strengths"] = [v for v in agent.intrathecal_strengths if v in item.concentrations]
    return agent.model_copy(update=update)


def changes(base: m.Policy, merged: m.Policy, ov: Overlay) -> list[str]:
    """What the overlay changes from its base, one line each (for ``policy check``)."""
    lines = []
    b, o = base.model_dump(), merged.model_dump()
    for name in m.Policy.model_fields:
        if name in ("id", "name", "regimens", "based_on"):
            continue
        if b[name] != o[name]:
            lines.append(f"{name}: {b[name]} -> {o[name]}")
    dropped = [r["id"] for r in b["regimens"] if r["id"] not in {x["id"] for x in o["regimens"]}]
    if dropped:
        lines.append(f"regimens not in use: {', '.join(dropped)}")
    if ov.formulary is not None:
        for f in ov.formulary:
            held = ", ".join(f"{v:g}" for v in f.concentrations) or "all strengths"
            lines.append(f"stocked: {f.agent} as {f.label!r} ({held})")
        lines.append("every other agent: not stocked here (shown with its verdict, never chosen by default)")
    for p in ov.preferred:
        lines.append(f"preferred: {p.agent} for {p.route.value} roles of {p.exam or 'every exam'}")
    for code, exam_id in ov.procedure_codes.items():
        lines.append(f"procedure code {code} -> {exam_id}")
    if ov.on_call:
        lines.append(f"on-call contact: {ov.on_call}")
    return lines
