"""Strict pydantic models of the knowledge tables, the case and the decision.

Every model forbids unknown fields and documents each field; the JSON Schema printed by
``contrast-aid knowledge schema`` is generated from these classes.
"""

from __future__ import annotations

import datetime as dt
from enum import Enum
from typing import Annotated, Any, Literal, Union

from pydantic import AfterValidator, BaseModel, ConfigDict, Field, WithJsonSchema, model_validator

from .constants import HEIGHT_CM_RANGE, IV_SITES, SEVERITY_ORDER, WEIGHT_KG_RANGE


class Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, use_enum_values=False, allow_inf_nan=False)


# --------------------------------------------------------------------------------------------------
# Date-times: the time-zone rule
# --------------------------------------------------------------------------------------------------
#: Every date-time of a case and a decision is the department's local wall-clock time, written without a
#: UTC offset (``2026-12-02T09:00`` or ``2026-12-02 09:00``); a value with an offset (``+01:00``, ``Z``)
#: is refused rather than silently converted. The published JSON Schema says exactly this (a pattern,
#: not the ``date-time`` format, which requires an offset).
LOCAL_DATE_TIME_PATTERN = r"^\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(:\d{2}(\.\d{1,6})?)?$"
#: Years a date-time may fall in (the plans add and subtract hours and days; year 1 or 9999 overflows).
YEAR_RANGE = (1900, 2200)


def _local_time(value: dt.datetime) -> dt.datetime:
    if value.tzinfo is not None:
        raise ValueError("has a UTC offset; allowed: a local date-time without offset, such as 2026-12-02T09:00")
    if not YEAR_RANGE[0] <= value.year <= YEAR_RANGE[1]:
        raise ValueError(f"year {value.year} is out of range; allowed: years {YEAR_RANGE[0]} to {YEAR_RANGE[1]}")
    return value


def _local_date(value: dt.date) -> dt.date:
    if isinstance(value, dt.datetime):
        return _local_time(value)
    if not YEAR_RANGE[0] <= value.year <= YEAR_RANGE[1]:
        raise ValueError(f"year {value.year} is out of range; allowed: years {YEAR_RANGE[0]} to {YEAR_RANGE[1]}")
    return value


LocalDateTime = Annotated[dt.datetime, AfterValidator(_local_time), WithJsonSchema({
    "type": "string", "pattern": LOCAL_DATE_TIME_PATTERN,
    "description": "Local wall-clock date-time without UTC offset, e.g. 2026-12-02T09:00"})]
LocalDateOrTime = Annotated[Union[dt.date, dt.datetime], AfterValidator(_local_date), WithJsonSchema({
    "anyOf": [{"type": "string", "format": "date"}, {"type": "string", "pattern": LOCAL_DATE_TIME_PATTERN}],
    "description": "Local date (2026-11-28) or date-time without UTC offset (2026-11-28T07:30)"})]


# --------------------------------------------------------------------------------------------------
# Enumerations
# --------------------------------------------------------------------------------------------------
class AgentClass(str, Enum):
    negative = "negative"
    neutral = "neutral"
    positive = "positive"


class Family(str, Enum):
    gas = "gas"
    water = "water"
    barium = "barium"
    iodinated = "iodinated"
    oil = "oil"
    gadolinium = "gadolinium"  # MRI: gadolinium-based agents (issue 13)
    microbubble = "microbubble"  # ultrasound: gas microbubbles or microspheres (issue 13)


class Form(str, Enum):
    gas = "gas"
    granules = "granules"
    solution = "solution"
    oral_solution = "oral_solution"
    suspension = "suspension"
    paste = "paste"
    oil = "oil"
    microbubble_suspension = "microbubble_suspension"  # ultrasound agents, made up before use (issue 13)


class OsmolalityClass(str, Enum):
    high = "high"
    low = "low"
    iso = "iso"


class Ionicity(str, Enum):
    ionic = "ionic"
    non_ionic = "non_ionic"


class Route(str, Enum):
    intravenous = "intravenous"
    intra_arterial = "intra_arterial"
    intrathecal = "intrathecal"
    oral = "oral"
    rectal = "rectal"
    retrograde = "retrograde"
    intracavitary = "intracavitary"
    insufflation = "insufflation"
    intra_articular = "intra_articular"  # direct MR arthrography (issue 13)
    intravesical = "intravesical"  # contrast-enhanced voiding urosonography (issue 13)


INTRAVASCULAR = frozenset({Route.intravenous, Route.intra_arterial})


class Modality(str, Enum):
    fluoroscopy = "fluoroscopy"
    angiography = "angiography"
    ct = "ct"
    mri = "mri"  # issue 13
    ultrasound = "ultrasound"  # issue 13


class ContrastUse(str, Enum):
    required = "required"
    optional = "optional"
    none = "none"


class Verdict(str, Enum):
    suitable = "suitable"
    suitable_with_precautions = "suitable_with_precautions"
    not_advised = "not_advised"
    contraindicated = "contraindicated"

    @property
    def severity(self) -> int:
        return _VERDICT_ORDER[self]


_VERDICT_ORDER = {
    Verdict.suitable: 0,
    Verdict.suitable_with_precautions: 1,
    Verdict.not_advised: 2,
    Verdict.contraindicated: 3,
}


class Certainty(str, Enum):
    """How a fact is known. ``verified``: checked against the named published source."""

    verified = "verified"
    from_memory = "from_memory"
    common_practice = "common_practice"


class Unit(str, Enum):
    mg_i_per_ml = "mg_i_per_ml"
    percent_w_v = "percent_w_v"
    percent_w_w = "percent_w_w"
    mmol_per_ml = "mmol_per_ml"  # gadolinium agents (issue 13)


class RenalExposure(str, Enum):
    """How the kidneys meet an intravascular dose (ESUR v10 terms)."""

    first_pass = "first_pass"
    second_pass = "second_pass"
    none = "none"


class Territory(str, Enum):
    """Where an intravascular injection goes, for carbon dioxide's limits."""

    below_diaphragm = "below_diaphragm"
    above_diaphragm = "above_diaphragm"
    any = "any"


class Severity(str, Enum):
    none = "none"
    mild = "mild"
    moderate = "moderate"
    severe = "severe"


class ReactionKind(str, Enum):
    allergic_like = "allergic_like"
    physiologic = "physiologic"
    #: delayed (hours to days, mostly skin, T-cell mediated); severe = a severe cutaneous adverse reaction
    #: such as Stevens-Johnson syndrome / toxic epidermal necrolysis or DRESS (ACR-AAAAI 2025, from memory)
    delayed = "delayed"


class Urgency(str, Enum):
    """How soon the exam must be done (changes premedication, creatinine and rescheduling advice)."""

    elective = "elective"
    urgent = "urgent"
    emergency = "emergency"


class Dialysis(str, Enum):
    none = "none"
    dialysis_anuric = "dialysis_anuric"
    dialysis_residual_function = "dialysis_residual_function"


class Obstruction(str, Enum):
    none = "none"
    small_bowel = "small_bowel"
    large_bowel = "large_bowel"


class Flag(str, Enum):
    """Decision-level consequences a rule can raise when it fires on a chosen agent."""

    hydration_indicated = "hydration_indicated"
    premedication_indicated = "premedication_indicated"
    metformin_hold = "metformin_hold"
    reaction_readiness = "reaction_readiness"


class Scope(str, Enum):
    agent = "agent"
    case = "case"


# ---- MRI and ultrasound (issue 13) ----------------------------------------------------------------
class GbcaStructure(str, Enum):
    """Molecular structure of a gadolinium chelate (FDA 2017 class warning; EMA 2017 decision)."""

    macrocyclic = "macrocyclic"
    linear = "linear"


class GbcaGroup(str, Enum):
    """ACR Manual on Contrast Media grouping of gadolinium agents by nephrogenic systemic fibrosis risk."""

    I = "I"  # noqa: E741 - the ACR's own group name
    II = "II"
    III = "III"


class Hepatobiliary(str, Enum):
    """How much of a gadolinium agent the liver takes up and excretes into bile."""

    none = "none"
    minor = "minor"
    major = "major"


class MriSignal(str, Enum):
    """Effect of a luminal agent on MRI signal: dark on T1 and T2, bright on T1 and T2, or dark on T1 and
    bright on T2 (biphasic, the 'neutral' distending agents)."""

    negative = "negative"
    positive = "positive"
    biphasic = "biphasic"


#: Modalities an agent images in when its record names none: by family (issue 13).
XRAY_MODALITIES = ("fluoroscopy", "angiography", "ct")


# --------------------------------------------------------------------------------------------------
# Knowledge tables
# --------------------------------------------------------------------------------------------------
class Source(Strict):
    id: str = Field(description="Short stable key, e.g. 'acr-nkf-2020'", pattern=r"^[a-z0-9][a-z0-9-]*$")
    title: str = Field(description="Title of the guideline or paper")
    issuer: str = Field(description="Issuing body or journal")
    year: int | None = Field(description="Year of publication (null where it is not known)", ge=1900, le=2100)
    kind: Literal["guideline", "consensus", "manual", "paper", "review", "label"] = Field(
        description="What sort of publication it is"
    )
    details: str = Field("", description="Volume, pages or edition, where known")
    certainty: Certainty = Field(
        Certainty.verified, description="verified: the citation was checked; from_memory: parts of it were not"
    )


class SourceRef(Strict):
    source: str = Field(description="Id of a row of the sources table")
    section: str = Field(description="Section, table or page of the source that supports the statement")


class Concentration(Strict):
    value: float = Field(description="Amount per volume (or weight)", gt=0)
    unit: Unit = Field(description="mg_i_per_ml for iodinated agents, percent_w_v or percent_w_w otherwise")
    osmolality_mosm_kg: float | None = Field(None, description="Typical osmolality, mOsm/kg H2O", gt=0)
    viscosity_mpas_20c: float | None = Field(None, description="Viscosity at 20 °C, mPa·s", gt=0)
    viscosity_mpas_37c: float | None = Field(None, description="Viscosity at 37 °C, mPa·s", gt=0)
    certainty: Certainty = Field(
        Certainty.from_memory, description="How the osmolality and viscosity figures are known"
    )
    source: SourceRef | None = Field(None, description="Where the figures come from, if verified")


class Agent(Strict):
    id: str = Field(description="Stable key", pattern=r"^[a-z0-9][a-z0-9-]*$")
    name: str = Field(description="Generic name (never a brand name)")
    agent_class: AgentClass = Field(description="negative, neutral or positive contrast")
    family: Family = Field(description="Chemical family")
    form: Form = Field(description="Physical form, used by the route-compatibility table")
    osmolality_class: OsmolalityClass | None = Field(None, description="For iodinated agents: high, low or iso")
    ionicity: Ionicity | None = Field(None, description="For iodinated agents: ionic or non_ionic")
    concentrations: list[Concentration] = Field(default_factory=list, description="Available strengths")
    routes: list[Route] = Field(description="Routes the agent is labelled or established for")
    intrathecal_strengths: list[float] = Field(
        default_factory=list, description="Strengths (mg I/mL) labelled for intrathecal use; only these are planned "
                                          "intrathecally")
    notes: str = Field("", description="Short remarks shown in the knowledge browser")
    sources: list[SourceRef] = Field(default_factory=list, description="Where the route and class facts come from")
    certainty: Certainty = Field(Certainty.verified, description="How the agent facts are known")
    # ---- MRI and ultrasound (issue 13) ----
    modalities: list[Modality] | None = Field(
        None, description="Modalities the agent images in; default by family (gadolinium: mri; microbubble: "
                          "ultrasound; the others: fluoroscopy, angiography, ct)")
    gbca_structure: GbcaStructure | None = Field(None, description="For gadolinium agents: macrocyclic or linear")
    gbca_group: GbcaGroup | None = Field(
        None, description="For intravenous gadolinium agents: ACR Manual NSF group I, II or III")
    relaxivity: Literal["standard", "high"] | None = Field(
        None, description="For gadolinium agents: relaxivity class where it changes the dose")
    hepatobiliary: Hepatobiliary | None = Field(
        None, description="For gadolinium agents: hepatobiliary uptake (none, minor, major)")
    standard_dose_mmol_kg: float | None = Field(
        None, description="For intravenous gadolinium agents: standard single dose, mmol/kg", gt=0, le=0.3)
    standard_dose_ml_kg: float | None = Field(
        None, description="The same dose as volume, mL/kg (checked against the intravenous strength)", gt=0, le=1)
    dose_certainty: Certainty | None = Field(None, description="How the standard dose and strength are known")
    dose_source: SourceRef | None = Field(None, description="Where the standard dose comes from, if verified")
    mri_signal: MriSignal | None = Field(None, description="For luminal MRI agents: negative, positive or biphasic")
    excipients: list[str] = Field(
        default_factory=list, description="Excipients that matter for hypersensitivity, e.g. 'polyethylene glycol'")

    def imaging_modalities(self) -> tuple[str, ...]:
        """The modalities this agent images in (its ``modalities``, else by family)."""
        if self.modalities is not None:
            return tuple(x.value for x in self.modalities)
        if self.family is Family.gadolinium:
            return (Modality.mri.value,)
        if self.family is Family.microbubble:
            return (Modality.ultrasound.value,)
        return XRAY_MODALITIES

    @model_validator(mode="after")
    def _iodinated_fields(self) -> "Agent":
        if self.family is Family.iodinated:
            if self.osmolality_class is None or self.ionicity is None:
                raise ValueError(f"agent {self.id}: iodinated agents need osmolality_class and ionicity")
        elif self.osmolality_class is not None or (self.ionicity is not None and self.family is not Family.gadolinium):
            raise ValueError(f"agent {self.id}: osmolality_class is for iodinated agents only, ionicity for "
                             "iodinated and gadolinium agents")
        if not self.routes:
            raise ValueError(f"agent {self.id}: routes must list at least one route")
        if self.intrathecal_strengths:
            known = {c.value for c in self.concentrations}
            odd = [v for v in self.intrathecal_strengths if v not in known]
            if odd or Route.intrathecal not in self.routes:
                raise ValueError(f"agent {self.id}: intrathecal_strengths must be strengths of the agent and its "
                                 f"routes must include intrathecal; got {odd or self.intrathecal_strengths}")
        return self

    @model_validator(mode="after")
    def _gadolinium_fields(self) -> "Agent":
        """Gadolinium fields only on gadolinium agents; an intravenous one needs all of them, and its standard
        dose in mL/kg must equal the dose in mmol/kg over its intravenous strength (within 2 %)."""
        gd_only = ("gbca_structure", "gbca_group", "relaxivity", "hepatobiliary", "standard_dose_mmol_kg",
                   "standard_dose_ml_kg")
        if self.family is not Family.gadolinium:
            given = [f for f in gd_only if getattr(self, f) is not None]
            if given:
                raise ValueError(f"agent {self.id}: {', '.join(given)} are for gadolinium agents only")
            return self
        if Route.intravenous not in self.routes:
            return self
        missing = [f for f in ("gbca_structure", "gbca_group", "ionicity", "hepatobiliary", "standard_dose_mmol_kg",
                               "standard_dose_ml_kg") if getattr(self, f) is None]
        if missing:
            raise ValueError(f"agent {self.id}: intravenous gadolinium agents need {', '.join(missing)}")
        iv = [c for c in self.concentrations if c.unit is Unit.mmol_per_ml and c.value >= 0.1]
        if not iv:
            raise ValueError(f"agent {self.id}: intravenous gadolinium agents need a strength of at least "
                             "0.1 mmol_per_ml")
        implied = self.standard_dose_mmol_kg / max(c.value for c in iv)
        if abs(implied - self.standard_dose_ml_kg) > 0.02 * implied:
            raise ValueError(f"agent {self.id}: standard_dose_ml_kg {self.standard_dose_ml_kg:g} does not match "
                             f"{self.standard_dose_mmol_kg:g} mmol/kg at {max(c.value for c in iv):g} mmol/mL "
                             f"({implied:.3g} mL/kg)")
        return self


class RouteCompatibility(Strict):
    route: Route = Field(description="The route")
    forms: list[Form] = Field(default_factory=list, description="Physical forms that could be given this way")
    families: list[Family] = Field(
        default_factory=list, description="If given, only agents of these families (with the forms above)"
    )
    agents: list[str] = Field(default_factory=list, description="Extra agents by id, whatever their form")
    note: str = Field("", description="Why the list is what it is")


class PaediatricProtocol(Strict):
    """Intravenous iodinated dose for patients under 18: weight-based, capped per kg and absolutely; the flow
    is set by the cannula (ACR Manual, contrast media in children; figures from memory)."""

    ml_per_kg: float = Field(2.0, description="Volume per kg of a 300 mg I/mL agent (ACR Manual: usually 1.5-2 mL/kg)",
                             gt=0, le=4)
    max_ml_per_kg: float = Field(3.0, description="Cap per kg (ACR Manual: rarely above 3 mL/kg)", gt=0, le=5)
    max_volume_ml: float | None = Field(
        None, description="Absolute cap, mL (default: the adult protocol's maximum - never more than the adult dose)",
        gt=0, le=300)
    concentration_mg_i_ml: float = Field(300, description="Strength the per-kg volumes refer to, mg I/mL", gt=0)
    certainty: Certainty = Field(Certainty.from_memory, description="How the figures are known")


class DoseProtocol(Strict):
    """A role's default intravenous dose protocol (used by the dose calculators)."""

    iodine_g_per_kg: float | None = Field(None, description="Weight-based iodine dose, g I per kg", gt=0, le=1.5)
    fixed_volume_ml: float | None = Field(None, description="Fixed protocol volume, mL", gt=0, le=300)
    max_volume_ml: float = Field(150, description="Cap on the volume, mL", gt=0, le=300)
    flow_ml_s: float | None = Field(
        None, description="Planned injection rate, mL/s (null: hand bolus with no set rate)", gt=0, le=10)
    scan_duration_s: float | None = Field(
        None, description="For angiographic CT: scan duration, s (volume = flow · (duration + offset))", gt=0
    )
    duration_offset_s: float = Field(0, description="Seconds added to the scan duration for volume", ge=0)
    concentration_mg_i_ml: float | None = Field(None, description="Preferred strength, mg I/mL", gt=0)
    iodine_delivery_rate_g_s: float | None = Field(
        None, description="Iodine delivery rate target, g I/s (CT angiography): the strength whose rate at the planned "
                          "flow is nearest to it is chosen", gt=0, le=4)
    gadolinium_mmol_per_kg: float | None = Field(
        None, description="Gadolinium dose, mmol/kg (default: the agent's standard dose; issue 13)", gt=0, le=0.3)
    volume_ml_per_kg: float | None = Field(
        None, description="Weight-based volume for agents dosed by volume (microbubbles), mL/kg", gt=0, le=1)
    for_agent: str | None = Field(
        None, description="The agent the volume figures are for (microbubbles: each agent has its own label "
                          "dose); another chosen agent gets no worked volume")
    certainty: Certainty = Field(Certainty.common_practice, description="How the protocol figures are known")
    source: SourceRef | None = Field(None, description="Source of the protocol figures, if any")
    paediatric: PaediatricProtocol | None = Field(
        None, description="Protocol for patients under 18 (default: the ACR Manual figures, from memory)")


class ExamRole(Strict):
    route: Route = Field(description="How the contrast enters the body")
    purpose: str = Field(description="What the contrast does here, e.g. 'opacify arteries'")
    required: bool = Field(True, description="False where the role is optional (depends on the indication)")
    agents: list[str] = Field(description="Agents that usually serve this role, in order of preference")
    renal_exposure: RenalExposure = Field(RenalExposure.none, description="Renal exposure of an intravascular dose")
    territory: Territory = Field(Territory.any, description="Vascular territory, for intravascular roles")
    catheter_study: bool = Field(False, description="A catheter study (Cigarroa limit applies)")
    protocol: DoseProtocol | None = Field(None, description="Default dose protocol for intravenous roles")


class Exam(Strict):
    id: str = Field(description="Stable key", pattern=r"^(fluoro|angio|ct|mr|us)-[a-z0-9-]+$")
    name: str = Field(description="Name shown to users")
    modality: Modality = Field(description="fluoroscopy, angiography, ct, mri or ultrasound")
    region: str = Field(description="Body region")
    purpose: str = Field(description="What the exam answers")
    contrast: ContrastUse = Field(description="Whether contrast is required, optional or not used")
    tags: list[str] = Field(default_factory=list, description="Free keys rules may test, e.g. 'tube-or-drain'")
    roles: list[ExamRole] = Field(default_factory=list, description="The ways contrast enters in this exam")
    notes: str = Field("", description="Remarks shown with the exam")

    @model_validator(mode="after")
    def _roles_match_contrast(self) -> "Exam":
        if self.contrast is ContrastUse.none and self.roles:
            raise ValueError(f"exam {self.id}: contrast 'none' but roles are listed")
        if self.contrast is not ContrastUse.none and not self.roles:
            raise ValueError(f"exam {self.id}: contrast '{self.contrast.value}' needs at least one role")
        return self


# ---- rule conditions: a small structured format, validated, never eval'd -------------------------
class PolicyValue(Strict):
    policy: str = Field(description="Name of a numeric setting of the active policy")


Scalar = Union[bool, int, float, str, None]
Operand = Union[PolicyValue, Scalar]


class Test(Strict):
    """One comparison of a named fact. Exactly one operator is given."""

    fact: str = Field(description="A fact name from the fact catalogue (see knowledge/tables/facts.py)")
    is_: Scalar | PolicyValue = Field(None, alias="is", description="Equal to")
    is_not: Scalar | PolicyValue = Field(None, description="Not equal to")
    in_: list[Scalar] | None = Field(None, alias="in", description="One of")
    not_in: list[Scalar] | None = Field(None, description="None of")
    lt: float | str | PolicyValue | None = Field(
        None, description="Less than (a number, a severity or a policy setting; false when the fact is unknown)"
    )
    le: float | str | PolicyValue | None = Field(
        None, description="At most (a number, a severity or a policy setting; false when the fact is unknown)"
    )
    gt: float | str | PolicyValue | None = Field(
        None, description="Greater than (a number, a severity or a policy setting; false when the fact is unknown)"
    )
    ge: float | str | PolicyValue | None = Field(
        None, description="At least (a number, a severity or a policy setting; false when the fact is unknown)"
    )
    has: str | None = Field(None, description="A list-valued fact contains this item")
    known: bool | None = Field(None, description="The fact has a value (true) or is unknown (false)")

    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)

    @model_validator(mode="before")
    @classmethod
    def _one_operator(cls, data: Any) -> Any:
        if isinstance(data, dict):
            ops = [k for k in data if k != "fact"]
            if len(ops) != 1:
                raise ValueError(
                    f"a test needs 'fact' and exactly one operator (is, is_not, in, not_in, lt, le, gt, ge, has, known); got {sorted(ops)}"
                )
        return data

    @property
    def operator(self) -> str:
        for name in ("is", "is_not", "in", "not_in", "lt", "le", "gt", "ge", "has", "known"):
            attr = {"is": "is_", "in": "in_"}.get(name, name)
            if attr in self.model_fields_set:
                return name
        raise AssertionError("validated test without operator")

    @property
    def operand(self) -> Any:
        op = self.operator
        return getattr(self, {"is": "is_", "in": "in_"}.get(op, op))


class All(Strict):
    all: list["Condition"] = Field(description="Every condition holds", min_length=1)


class AnyOf(Strict):
    any: list["Condition"] = Field(description="At least one condition holds", min_length=1)


class Not(Strict):
    not_: "Condition" = Field(alias="not", description="The condition does not hold")
    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)


Condition = Union[Test, All, AnyOf, Not]
All.model_rebuild()
AnyOf.model_rebuild()
Not.model_rebuild()


class Effect(Strict):
    verdict: Verdict | None = Field(None, description="Verdict for the agent (agent-scope rules only)")
    alert: Literal["stop", "warn"] | None = Field(
        None, description="Also raise a decision-level alert of this level when the rule fires on a planned agent "
                          "(agent scope) or on the case (case scope)")
    actions: list[str] = Field(default_factory=list, description="Steps to take, shown under the agent")
    flags: list[Flag] = Field(default_factory=list, description="Decision-level consequences")
    caution: bool = Field(False, description="Also list the rule's text among the decision's cautions")


class Rule(Strict):
    id: str = Field(description="Stable key", pattern=r"^[a-z0-9][a-z0-9-]*$")
    description: str = Field(description="What the rule encodes, for reviewers")
    scope: Scope = Field(Scope.agent, description="agent: tested for each agent of each role; case: once")
    when: Condition = Field(description="Condition over the case, exam, role and agent facts")
    effect: Effect = Field(description="What follows when the condition holds")
    text: str = Field(description="The reason shown to the user")
    sources: list[SourceRef] = Field(default_factory=list, description="Published sources with section")
    certainty: Certainty = Field(description="verified (sources given), from_memory or common_practice")

    @model_validator(mode="after")
    def _sources_and_scope(self) -> "Rule":
        if self.certainty is Certainty.verified and not self.sources:
            raise ValueError(f"rule {self.id}: certainty 'verified' needs at least one source")
        if self.scope is Scope.case and self.effect.verdict is not None:
            raise ValueError(f"rule {self.id}: case-scope rules cannot give a verdict")
        return self


class Regimen(Strict):
    id: str = Field(description="Stable key")
    name: str = Field(description="Name shown to users")
    steps: list["RegimenStep"] = Field(description="Doses, each at hours before the exam")
    minimum_lead_hours: float = Field(description="Least time before the exam the regimen needs, h (0-48)", ge=0,
                                      le=48)
    source: SourceRef = Field(description="Where the regimen is published")


class RegimenStep(Strict):
    hours_before: float | None = Field(description="Hours before the exam (0-48); null for 'now'", ge=0, le=48)
    repeat_every_hours: float | None = Field(None, description="Repeat interval until the exam, hours (0.5-24)",
                                             ge=0.5, le=24)
    drug: str = Field(description="Generic drug name")
    dose: str = Field(description="Dose with unit, e.g. '50 mg'")
    route: Literal["oral", "intravenous"] = Field(description="oral or intravenous")
    optional: bool = Field(False, description="The step is optional in the source")
    child_mg_per_kg: list[float] | None = Field(
        None, description="A child's dose, mg/kg: one figure or a [low, high] range (0.01-10)", min_length=1,
        max_length=2)
    child_max_mg: float | None = Field(None, description="Most a child is given in one dose, mg", gt=0, le=1000)

    @model_validator(mode="after")
    def _child_dose_complete(self) -> "RegimenStep":
        if self.child_mg_per_kg is not None:
            if self.child_max_mg is None:
                raise ValueError("child_mg_per_kg needs child_max_mg (a child's dose never exceeds a set maximum)")
            if any(not (0.01 <= v <= 10) for v in self.child_mg_per_kg) or sorted(self.child_mg_per_kg) != \
                    list(self.child_mg_per_kg):
                raise ValueError("child_mg_per_kg: one figure or [low, high], each from 0.01 to 10 mg/kg")
        return self


Regimen.model_rebuild()


class Policy(Strict):
    """A department's thresholds and choices. Rules refer to these settings by name."""

    id: str = Field(description="Stable key", pattern=r"^[a-z0-9][a-z0-9-]*$")
    name: str = Field(description="Name shown to users")
    based_on: list[SourceRef] = Field(description="Guidelines the settings follow")
    egfr_prophylaxis_consider_below: float = Field(
        description="eGFR below which prophylaxis may be considered for high-risk patients (IV)", ge=0, le=120
    )
    egfr_hydration_below: float = Field(
        description="eGFR below which IV hydration is indicated for IV or second-pass intra-arterial contrast",
        ge=0,
        le=120,
    )
    egfr_first_pass_hydration_below: float = Field(
        description="eGFR below which hydration is indicated for first-pass intra-arterial contrast", ge=0, le=120
    )
    metformin_hold_egfr_below: float = Field(description="eGFR below which metformin is withheld", ge=0, le=120)
    metformin_hold_first_pass: bool = Field(
        description="Withhold metformin for arterial studies with first-pass renal exposure"
    )
    premedication_regimen: str = Field(description="Id of the default elective premedication regimen")
    premedication_accelerated_regimen: str = Field(description="Id of the accelerated regimen")
    elective_regimens: list[str] | None = Field(
        None, description="Elective regimens in the order they are tried (each is laid out if enough time is left) "
                          "before the accelerated one; default: premedication_regimen, then every other regimen "
                          "but the accelerated one, in file order")
    egfr_discordance_percent: float = Field(
        20, description="An entered eGFR and one computed from the creatinine that differ by more than this percent "
                        "of the lower raise an alert and the lower is used (common practice)", gt=0, le=100)
    intrathecal_max_iodine_g: float = Field(
        3.0, description="Total iodine per intrathecal procedure, adult, g (product labels, from memory)", gt=0, le=10)
    regimens: list[Regimen] = Field(description="Premedication regimens on offer")
    hydration_regimen: str = Field(description="Hydration regimen shown when hydration is indicated")
    radioiodine_delay_weeks: float = Field(
        description="Weeks to wait after iodinated contrast before radioiodine", ge=0, le=26
    )
    creatinine_max_age_days_outpatient: float = Field(
        30, description="Oldest acceptable creatinine for a stable outpatient, days (more than 0, at most 365)",
        gt=0, le=365
    )
    creatinine_max_age_days_inpatient: float = Field(
        2, description="Oldest acceptable creatinine for an inpatient or acute illness, days (more than 0, at most 30)",
        gt=0, le=30
    )
    iodine_g_per_gfr_max: float = Field(1.0, description="Flag when g iodine / absolute GFR reaches this (0.1-5)",
                                        ge=0.1, le=5)
    first_pass_iodine_g_per_gfr_max: float | None = Field(
        None, description="Optional first-pass intra-arterial cap, g iodine / absolute GFR (0.1-5)", ge=0.1, le=5
    )
    bsa_formula: Literal["du_bois", "mosteller"] = Field(
        "du_bois", description="Body surface area formula for the absolute GFR (du_bois 1916 or mosteller 1987)"
    )
    hydration_ml_kg_h: float = Field(
        1.0, description="Hydration rate for the weight-based plan, mL/kg/h (ACR-NKF 2020: 1-3)", ge=0.5, le=3
    )
    hydration_hours_before: float = Field(
        1.0, description="Hours of hydration before contrast (ACR-NKF 2020: start about 1 h before)", ge=0, le=12
    )
    hydration_hours_after: float = Field(
        6.0, description="Hours of hydration after contrast (ACR-NKF 2020: 3-12 h; 6 h is common practice)",
        ge=0, le=12
    )
    # ---- MRI and ultrasound (issue 13): defaults keep older policy files loading ----
    gbca_nsf_egfr_below: float = Field(
        30, description="eGFR below which a patient is at risk of NSF from gadolinium (ACR Manual; ESUR: 30)",
        ge=0, le=120)
    gbca_low_egfr_precautions: bool = Field(
        False, description="Treat group II and III gadolinium agents with eGFR below gbca_nsf_egfr_below, AKI or "
                           "dialysis as 'with precautions' (European wording, ESUR; North American: ACR-NKF 2021 "
                           "says withholding a needed dose is likely to harm more)")
    gbca_group_ii_egfr_screening: bool = Field(
        False, description="Ask for an eGFR before group II gadolinium agents (North American profile: not "
                           "required, ACR-NKF 2021; a European profile may screen every patient)")
    gbca_linear_iv_restricted: bool = Field(
        False, description="EMA 2017 decision: intravenous linear gadolinium agents suspended, except the "
                           "hepatobiliary ones for liver imaging")

    @model_validator(mode="after")
    def _thresholds_in_order(self) -> "Policy":
        """The renal rules read these thresholds as nested bands; a policy that orders them otherwise makes
        a lower eGFR less restrictive (issue 9), so it is refused. See POLICY_ORDER."""
        for low, high in POLICY_ORDER:
            if getattr(self, low) > getattr(self, high):
                raise ValueError(f"{low} ({getattr(self, low):g}) is above {high} ({getattr(self, high):g}); "
                                 f"allowed: {low} at most {high}")
        return self

    def number(self, name: str) -> float:
        value = getattr(self, name)
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise KeyError(name)
        return float(value)


#: Policy thresholds that must be ordered (first at most second). renal-hydrate-low-egfr acts below
#: egfr_hydration_below, renal-consider-prophylaxis between it and egfr_prophylaxis_consider_below, and
#: renal-hydrate-first-pass below egfr_first_pass_hydration_below for first-pass studies only: with the
#: hydration threshold above either of the others, an eGFR in the gap would lose its renal precautions
#: as it falls (tests/test_policy_strict.py sweeps every order).
POLICY_ORDER = (("egfr_hydration_below", "egfr_prophylaxis_consider_below"),
                ("egfr_hydration_below", "egfr_first_pass_hydration_below"))


class Tables(Strict):
    """All knowledge tables, validated together."""

    sources: list[Source]
    agents: list[Agent]
    routes: list[RouteCompatibility]
    exams: list[Exam]
    rules: list[Rule]


# --------------------------------------------------------------------------------------------------
# The case
# --------------------------------------------------------------------------------------------------
class Creatinine(Strict):
    value: float = Field(description="Serum creatinine", gt=0)
    unit: Literal["mg/dL", "umol/L"] = Field(description="mg/dL or umol/L")
    measured_on: LocalDateOrTime | None = Field(None, description="When the sample was taken (local date or date-time)")


class PriorReaction(Strict):
    agent_family: Family = Field(description="Family of the agent that caused it")
    kind: ReactionKind = Field(
        description="allergic_like or physiologic (immediate, within an hour), or delayed (hours to days, mostly "
                    "skin; severe = Stevens-Johnson syndrome / toxic epidermal necrolysis, DRESS or another severe "
                    "cutaneous adverse reaction)")
    severity: Literal[SEVERITY_ORDER[1:]] = Field(description="mild, moderate or severe")  # type: ignore[valid-type]
    agent: str | None = Field(None, description="The culprit agent's id, if known")
    despite_premedication: bool = Field(
        False, description="A breakthrough reaction: it happened although the patient had been premedicated")


class IVAccess(Strict):
    gauge: int = Field(description="Catheter gauge", ge=14, le=24)
    site: Literal[IV_SITES] = Field(description="Where the catheter is")  # type: ignore[valid-type]


class Patient(Strict):
    age_years: float | None = Field(None, description="Age in years", ge=0, le=120)
    sex: Literal["female", "male"] | None = Field(None, description="Sex used by the eGFR equations")
    weight_kg: float | None = Field(None, description="Body weight, kg", ge=WEIGHT_KG_RANGE[0], le=WEIGHT_KG_RANGE[1])
    height_cm: float | None = Field(None, description="Height, cm", ge=HEIGHT_CM_RANGE[0], le=HEIGHT_CM_RANGE[1])
    creatinine: Creatinine | None = Field(None, description="Serum creatinine")
    cystatin_c_mg_l: float | None = Field(None, description="Serum cystatin C, mg/L", gt=0)
    egfr: float | None = Field(None, description="eGFR entered directly, mL/min/1.73 m²", ge=1, le=200)
    acute_kidney_injury: bool = Field(False, description="Acute kidney injury now")
    dialysis: Dialysis = Field(Dialysis.none, description="none, dialysis_anuric or dialysis_residual_function")
    perforation_suspected: bool = Field(False, description="Suspected perforation or leak of a hollow organ")
    obstruction: Obstruction = Field(Obstruction.none, description="none, small_bowel or large_bowel")
    aspiration_risk: bool = Field(False, description="Swallowing difficulty or aspiration risk")
    tracheoesophageal_fistula_suspected: bool = Field(False, description="Suspected tracheo-oesophageal fistula")
    prior_reactions: list[PriorReaction] = Field(default_factory=list, description="Earlier contrast reactions")
    takes_metformin: bool = Field(False, description="Takes metformin")
    hyperthyroidism: bool = Field(
        False, description="Thyroid at risk: nodular goitre, latent (subclinical) hyperthyroidism or latent Graves' "
                           "disease (manifest hyperthyroidism is its own field)")
    manifest_hyperthyroidism: bool = Field(False, description="Manifest (overt) hyperthyroidism now")
    pheochromocytoma: bool = Field(False, description="Known or suspected pheochromocytoma or paraganglioma")
    infant_thyroid_risk: bool = Field(
        False, description="Child under 3 with a thyroid risk factor: born preterm or with low birth weight, "
                           "or heart disease")
    colitis_or_diverticulitis: bool = Field(False, description="Acute colitis or acute diverticulitis")
    toxic_megacolon: bool = Field(False, description="Toxic megacolon, known or suspected")
    recent_deep_biopsy: bool = Field(
        False, description="Deep colonic biopsy, polypectomy or colonic surgery in the days before the exam")
    bowel_fistula_suspected: bool = Field(False, description="Suspected fistula from the bowel (enteric fistula)")
    obstruction_high_grade: bool = Field(False, description="The bowel obstruction is high-grade (complete or near)")
    radioiodine_planned: bool = Field(False, description="Radioiodine therapy or scan planned")
    pregnant: bool = Field(False, description="Pregnant")
    breastfeeding: bool = Field(False, description="Breastfeeding")
    shellfish_or_iodine_allergy: bool = Field(False, description="Reports seafood or povidone-iodine allergy")
    heart_failure: bool = Field(False, description="Heart failure that limits IV fluids")
    myasthenia_gravis: bool = Field(False, description="Myasthenia gravis")
    inpatient: bool = Field(False, description="Inpatient or acutely ill")
    kidney_disease_history: bool = Field(
        False, description="History of kidney disease: kidney transplant, single kidney, kidney cancer or kidney surgery"
    )
    diabetes: bool = Field(False, description="Diabetes mellitus treated with insulin or other prescribed drugs")
    iv_access: IVAccess | None = Field(None, description="The planned IV catheter")
    # ---- MRI and ultrasound (issue 13) ----
    peg_allergy: bool = Field(False, description="Known hypersensitivity to polyethylene glycol (PEG, macrogol)")
    unstable_cardiopulmonary: bool = Field(
        False, description="Pulmonary hypertension or an unstable cardiopulmonary condition")


class Case(Strict):
    exam: str = Field(description="Exam id from the exams table")
    patient: Patient = Field(default_factory=Patient, description="Patient factors")
    scheduled_at: LocalDateTime | None = Field(None, description="Exam date-time (ISO 8601, local, no offset)")
    as_of: LocalDateTime | None = Field(
        None, description="The time the decision is made for ('now'), for the time left before the exam and the "
                          "creatinine's age; the command line and the dashboard fill it in, the core never reads a clock")
    agent: str | None = Field(None, description="A requested agent id to plan for")
    planned_flow_ml_s: float | None = Field(None, description="Override of the protocol flow, mL/s", gt=0, le=10)
    planned_volume_ml: float | None = Field(None, description="Override of the protocol volume, mL", gt=0, le=300)
    planned_concentration_mg_i_ml: float | None = Field(
        None, description="Requested strength of the chosen agent, mg I/mL (must be one of its strengths)", gt=0, le=480
    )
    urgency: Urgency = Field(
        Urgency.elective, description="elective, urgent or emergency: an emergency is never delayed for "
                                      "premedication or a creatinine; only elective exams are advised to move")
    override_culprit: bool = Field(
        False, description="Explicit, visible override: plan the requested agent although it caused an earlier "
                           "moderate or severe reaction (a stop alert stays on the decision)")


# --------------------------------------------------------------------------------------------------
# The decision
# --------------------------------------------------------------------------------------------------
class Reason(Strict):
    rule: str = Field(description="Id of the rule that fired")
    text: str = Field(description="What the rule says")
    verdict: Verdict | None = Field(None, description="Verdict the rule gave, if any")
    source: str = Field(description="Sources as 'title, issuer year, section', or 'common practice'/'from memory'")
    certainty: Certainty = Field(description="verified, from_memory or common_practice")


class Option(Strict):
    agent: str = Field(description="Agent id")
    name: str = Field(description="Agent name")
    agent_class: AgentClass
    family: Family
    osmolality_class: OsmolalityClass | None
    verdict: Verdict
    rank: int = Field(description="1 = best")
    chosen: bool = Field(
        description="The option the plan uses: the requested agent unless contraindicated (culprit override "
                    "aside), else the best-ranked usual agent that is neither contraindicated nor the culprit of an "
                    "earlier reaction; no option of the role is chosen when none qualifies (see the alerts)")
    reasons: list[Reason]
    actions: list[str]
    stocked: bool | None = Field(None, description="In the department formulary (null: no formulary in the policy)")
    local_label: str | None = Field(None, description="The department's display label of a stocked agent")


class Viscosity(Strict):
    """Viscosity of the chosen strength at room and body temperature (catalogue values)."""

    at_20c: float | None = Field(None, description="Viscosity at 20 °C, mPa·s (catalogue)")
    at_37c: float | None = Field(None, description="Viscosity at 37 °C, mPa·s (catalogue)")
    warming_pressure_ratio: float | None = Field(
        None, description="Injection pressure at 37 °C / at 20 °C for the same flow and catheter (Hagen-Poiseuille)"
    )
    certainty: Certainty | None = Field(None, description="How the catalogue figures are known")
    source: str | None = Field(None, description="Where the figures come from")


class DoseBlock(Strict):
    """The worked dose of an intravascular iodinated role (``knowledge/decision/plans.py``). Case overrides
    (``planned_volume_ml``, ``planned_flow_ml_s``) apply to the exam's first intravascular role."""

    agent: str = Field(description="Id of the chosen agent the dose is for")
    concentration_mg_i_ml: float = Field(description="Strength used, mg I/mL")
    concentration_choice: str = Field(description="How the strength was picked from the agent's strengths")
    volume_ml: float | None = Field(description="Volume to inject, mL (null when it cannot be worked out)")
    volume_basis: str = Field(description="What the volume comes from")
    iodine_g: float | None = Field(description="Grams of iodine in the volume")
    flow_ml_s: float | None = Field(description="Injection rate, mL/s (null for a hand injection with no rate)")
    iodine_delivery_rate_g_s: float | None = Field(description="Iodine delivery rate, g I/s")
    duration_s: float | None = Field(description="Injection duration, s")
    access_ok: bool | None = Field(None, description="The IV catheter fits the flow (null: no access given or arterial)")
    access_message: str | None = Field(None, description="Why the access is or is not fit (ACR Manual wording)")
    viscosity_mpas: Viscosity | None = Field(None, description="Viscosity of the strength at 20 and 37 °C")
    warnings: list[str] = Field(default_factory=list, description="Caps, missing data and other cautions")
    iodine_delivery_rate_target_g_s: float | None = Field(
        None, description="The protocol's iodine delivery rate target, g I/s (CT angiography)")
    paediatric: bool = Field(False, description="Worked out with the paediatric protocol (patient under 18)")
    hand_injection: bool = Field(False, description="Inject by hand (small cannula or line not rated for power)")


class AgentDoseBlock(Strict):
    """The worked dose of a gadolinium or microbubble role (``knowledge/decision/agent_doses.py``, issue 13)."""

    agent: str = Field(description="Id of the chosen agent the dose is for")
    family: Family = Field(description="gadolinium or microbubble")
    concentration_mmol_ml: float | None = Field(None, description="Strength used, mmol/mL (gadolinium)")
    dose_mmol_kg: float | None = Field(None, description="Dose, mmol/kg (gadolinium)")
    dose_mmol: float | None = Field(None, description="Amount of gadolinium, mmol")
    volume_ml: float | None = Field(description="Volume to give, mL (null when it cannot be worked out)")
    volume_ml_per_kg: float | None = Field(None, description="Volume per kg, mL/kg")
    basis: str = Field(description="Where the dose comes from")
    flow_ml_s: float | None = Field(None, description="Injection rate, mL/s (null: hand bolus, no set rate)")
    duration_s: float | None = Field(None, description="Injection duration, s")
    access_ok: bool | None = Field(None, description="The IV catheter fits the flow (null: not checked)")
    access_message: str | None = Field(None, description="Why the access is or is not fit")
    certainty: Certainty = Field(description="How the dose figures are known")
    source: str | None = Field(None, description="Where the dose figures come from")
    warnings: list[str] = Field(default_factory=list, description="Missing weight and other cautions")


class RoleDecision(Strict):
    route: Route
    purpose: str
    required: bool
    options: list[Option]
    dose: DoseBlock | None = Field(
        None, description="Worked dose of the chosen agent, for intravascular and intrathecal roles with an "
                          "iodinated choice (none when no agent is chosen)"
    )
    agent_dose: AgentDoseBlock | None = Field(
        None, description="Worked dose of the chosen agent, for gadolinium and microbubble roles (issue 13)")


class DoseLimits(Strict):
    """Renal dose limits of the planned intravascular iodine (sums over the exam's intravascular roles)."""

    iodine_g: float | None = Field(None, description="Total grams of iodine planned")
    iodine_g_per_gfr: float | None = Field(None, description="g iodine / absolute GFR (mL/min)")
    iodine_g_per_gfr_max: float = Field(description="Policy flag level for g iodine / absolute GFR")
    iodine_g_per_gfr_exceeded: bool | None = Field(None, description="The ratio reaches the policy level")
    first_pass_iodine_g_per_gfr_max: float | None = Field(
        None, description="Policy cap for first-pass intra-arterial doses (ESUR), if the policy sets one"
    )
    volume_ml_per_gfr: float | None = Field(None, description="mL contrast / absolute GFR (ESUR first-pass < 3.0)")
    iodine_g_max: float | None = Field(
        None, description="Most grams of iodine the policy's g iodine / GFR level allows for this patient (also for a "
                          "carbon dioxide study topped up with iodinated contrast)")
    cigarroa_max_ml: float | None = Field(None, description="Cigarroa maximum volume for catheter studies, mL")
    catheter_volume_ml: float | None = Field(None, description="Planned volume of the catheter study roles, mL")
    cigarroa_exceeded: bool | None = Field(None, description="The planned catheter volume is above the Cigarroa limit")
    messages: list[str] = Field(default_factory=list, description="What the limits mean for this plan")


class HydrationPlanBlock(Strict):
    fluid: str = Field(description="IV fluid")
    rate_ml_h: float = Field(description="Infusion rate, mL/h")
    rate_ml_kg_h: float = Field(description="Rate per kg, mL/kg/h (policy)")
    start_at: LocalDateTime | None = Field(None, description="Start time (exam time − hours before)")
    stop_at: LocalDateTime | None = Field(None, description="Stop time (exam time + hours after)")
    volume_before_ml: float = Field(description="Volume before contrast, mL")
    volume_after_ml: float = Field(description="Volume after contrast, mL")
    total_ml: float = Field(description="Total volume, mL")
    warnings: list[str] = Field(default_factory=list, description="Heart-failure caution and the like")


class RenalBlock(Strict):
    egfr: float | None = Field(description="eGFR used, mL/min/1.73 m² (one decimal)")
    equation: str | None = Field(description="ckd_epi_2021, ckd_epi_2021_cystatin, bedside_schwartz or entered")
    category: str | None = Field(description="KDIGO 2012 G category")
    hydration_indicated: bool
    hydration_regimen: str | None = Field(None, description="Hydration regimen of the policy, when indicated")
    note: str | None = Field(None, description="Why no eGFR could be worked out, or how it was")
    egfr_computed: float | None = Field(
        None, description="eGFR computed from the creatinine when an eGFR was also entered (one decimal)")
    bsa_m2: float | None = Field(None, description="Body surface area, m² (needs weight and height)")
    bsa_formula: str | None = Field(None, description="du_bois or mosteller (policy bsa_formula)")
    absolute_gfr_ml_min: float | None = Field(None, description="eGFR · BSA / 1.73, mL/min")
    creatinine_age_days: float | None = Field(None, description="Age of the creatinine at the exam time, days")
    creatinine_max_age_days: float | None = Field(
        None, description="Oldest acceptable creatinine for this patient, days (policy, outpatient or inpatient)"
    )
    creatinine_stale: bool | None = Field(None, description="The creatinine is older than the policy allows")
    creatinine_required: bool = Field(
        False, description="A recent creatinine is required (intravascular iodinated contrast and a risk factor)"
    )
    creatinine_required_because: list[str] = Field(default_factory=list, description="The risk factors found")
    dose_limits: DoseLimits | None = Field(None, description="Renal dose limits, for intravascular iodinated doses")
    hydration_plan: HydrationPlanBlock | None = Field(None, description="Weight-based plan, when hydration is indicated")
    warnings: list[str] = Field(default_factory=list, description="Missing or stale creatinine and similar")


class ScheduleItem(Strict):
    at: LocalDateTime | None = Field(description="Clock time of the dose (null without an exam time)")
    hours_before: float | None = Field(description="Hours before the exam")
    drug: str = Field(description="Generic drug name")
    dose: str = Field(description="Dose with unit")
    route: str = Field(description="oral or intravenous")
    optional: bool = Field(False, description="Optional in the source")


class PremedicationBlock(Strict):
    indicated: bool
    regimen: str | None = Field(None, description="Id of the regimen laid out (accelerated when time is short)")
    regimen_name: str | None = Field(None, description="Name of that regimen")
    lead_hours: float | None = Field(None, description="Hours from as_of to the exam")
    schedule: list[ScheduleItem] = Field(default_factory=list, description="Doses as clock times")
    warnings: list[str] = Field(default_factory=list, description="Not enough time, missing exam time, …")


class MetforminBlock(Strict):
    hold: bool
    takes_metformin: bool
    advice: str | None = Field(None, description="What to do about metformin")
    hold_from: LocalDateTime | None = Field(None, description="Stop metformin from this time (the exam time)")
    recheck_after_hours: float | None = Field(None, description="Hours after contrast to re-check kidney function")
    recheck_at: LocalDateTime | None = Field(None, description="When kidney function is re-checked before restarting")


class Alert(Strict):
    """A decision-level alert shown above everything else (dashboard and protocol note)."""

    level: Literal["stop", "warn"] = Field(
        description="stop: the plan as asked must not go ahead; warn: it may, with the named risk in mind")
    text: str = Field(description="What is wrong and what to do, in one or two sentences")
    rule: str = Field(description="Id of the rule or check that raised it")
    source: str = Field(description="Sources as 'title, issuer year, section', or 'common practice'/'from memory'")


class Decision(Strict):
    exam: str
    exam_name: str
    alerts: list[Alert] = Field(default_factory=list, description="Blocking (stop) and warning alerts, most severe first")
    cannot_proceed_reason: str | None = Field(
        None, description="Why the exam as requested cannot be done with contrast (every agent of a required role "
                          "is contraindicated); null otherwise")
    exam_notes: str = Field("", description="The exam's own safety and technique notes")
    urgency: Urgency = Field(Urgency.elective, description="The case's urgency the advice was given for")
    contrast_needed: bool = Field(description="True if any role is required")
    contrast: ContrastUse
    roles: list[RoleDecision]
    renal: RenalBlock
    premedication: PremedicationBlock
    metformin: MetforminBlock
    cautions: list[str]
    policy: str
    knowledge_version: str
    as_of: LocalDateTime | None = Field(None, description="The 'now' the times were worked out for (the case's as_of)")
    policy_version: str | None = Field(
        None, description="Hash of the policy file (of an overlay and its base profile), to reproduce the decision")
    on_call: str | None = Field(None, description="The department's on-call radiologist contact line, if any")


# --------------------------------------------------------------------------------------------------
# Building trusted records fast
# --------------------------------------------------------------------------------------------------
_CONSTANT_DEFAULTS = (type(None), bool, int, float, str, Enum)


def constructor(model: type[BaseModel]) -> Any:
    """``model.model_construct`` for trusted values, without its per-call walk over every field's aliases and
    defaults: the same object (the given fields and the defaults, in field order; the given names as the fields
    set). Only for a model without aliases, private attributes or post-init whose defaults are constants; any
    other model gets ``model.model_construct`` itself. The engine builds one option per agent and role with it."""
    fields = model.model_fields
    plain = (not model.__private_attributes__ and not model.__pydantic_post_init__
             and model.model_config.get("extra") != "allow"
             and all(f.alias is None and f.validation_alias is None and f.default_factory is None
                     and (f.is_required() or isinstance(f.default, _CONSTANT_DEFAULTS)) for f in fields.values()))
    if not plain:
        return model.model_construct
    order = tuple(fields)
    defaults = {name: f.default for name, f in fields.items() if not f.is_required()}
    new, put = object.__new__, object.__setattr__

    def make(**values: Any) -> BaseModel:
        obj = new(model)
        put(obj, "__dict__", {n: values[n] if n in values else defaults[n]
                              for n in order if n in values or n in defaults})
        put(obj, "__pydantic_fields_set__", {n for n in values if n in fields})
        put(obj, "__pydantic_extra__", None)
        put(obj, "__pydantic_private__", None)
        return obj

    return make
