"""Reviewing the distinct orders of a list: one full ``decide`` per class of orders, the numbers per order.

Orders of one list differ mostly in numbers (age, weight, height, creatinine and its date, exam time) and
agree in what the rules read (exam, planned agent, flags, reactions, kidney band). The plain path
(:func:`review_case`) decides every order in full. :class:`FastReview` gives the same cells with one full
``decide`` per *class*, and only the parts that depend on the numbers worked out for each order:

1. **The order's case.** The cells other than the six numeric ones (:data:`CONTINUOUS`) form a *template*,
   validated once by the model. A numeric cell is validated alone by the same model (pydantic validates each
   field on its own: the case and patient models have no cross-field validators), once per distinct text, and
   the order's case is the template's with those values put in; the order's date-times are checked against
   its as_of (``check_case_times``) as every case is.
2. **The class key.** Everything the engine reads before the plans, besides the numbers, is in the template
   (exam, planned agent, override, urgency, as_of, reactions, metformin, dialysis, acute kidney injury, and
   every patient and history fact a rule of the exam tests). The numbers reach the rules only through the
   facts :data:`DERIVED_FACTS` (the eGFR from ``kidney_stage``, its category, age, weight, height): the key
   holds the result of every test a rule of the exam makes on them, whether an eGFR is known (metformin
   advice) and the alerts ``kidney_stage`` raised. Orders with the same key have the same options, verdicts,
   choices, flags, alerts and cautions (:class:`~knowledge.review.summary.ChoicePart`): the first one is
   decided in full and gives the :class:`Record` of the class. An exam whose rules test a fact that is not
   sorted into one of the two kinds is not sped up (every order decided in full).
3. **The plans, per order**, by the plan stages themselves (``knowledge.decision.plans``), each called on
   the order's own case: creatinine freshness, body surface and absolute GFR, the dose limits, the hydration
   plan, the premedication schedule and the metformin hold. Stages whose inputs repeat are remembered by
   exactly the inputs they read (the doses: chosen agents, weight, child or not, IV access and planned
   volume, flow and strength; the schedule: exam time, as_of, urgency, child or not, weight).

An order whose cells the model refuses, or whose date-times contradict its as_of, is rejected with the
words the plain path gives (the same error, mapped by :func:`rejection`); an error in any other stage sends
the order to the plain path, which rejects it with the engine's own words. The cells of both paths come from
:func:`knowledge.review.summary.columns`; ``tests/test_review_fast.py`` checks the two paths agree, cell by
cell, on generated lists, on the scenario bank as rows and on neighbours that differ only where one stage
looks. A new fact worked out from a numeric cell belongs in :data:`DERIVED_FACTS` (a test fails until it is);
a plan stage that reads a new field of the case must be remembered by it here too.
"""

from __future__ import annotations

import datetime as dt
import operator
from collections import Counter
from dataclasses import dataclass
from typing import Any, Callable, NamedTuple

from pydantic import ValidationError

from ..calculators import paediatric
from ..decision import plans
from ..decision.agent_doses import plan_agent_doses
from ..decision.department import resolve_exam
from ..decision.engine import case_facts, case_time_problems, decide, kidney_stage
from ..errors import ContrastAidError
from ..tables import models as m
from ..tables.conditions import STATIC_PREFIXES, compile_condition, facts_used
from .columns import CaseBuilder, RowError
from .summary import (RESULT_COLUMNS, ChoicePart, choice_part, columns, fmt_time, plan_part_of,
                      summarise_decision)

#: the case fields that vary from order to order and are worked out per order
CONTINUOUS = (("patient", "age_years"), ("patient", "weight_kg"), ("patient", "height_cm"),
              ("patient", "creatinine", "value"), ("patient", "creatinine", "measured_on"), ("scheduled_at",))
#: the facts (``engine.case_facts``) that the continuous fields feed; every other fact is fixed by the template
DERIVED_FACTS = frozenset({"patient.age_years", "patient.weight_kg", "patient.height_cm", "renal.egfr",
                           "renal.category"})
_BAD = object()  # a cell the model refuses
_MISSING = object()
_setattr = object.__setattr__


# ----------------------------------------------------------------------------- the plain path
def rejected(reason: str, k: Any, as_of: Any) -> dict[str, Any]:
    """The result columns of a rejected order."""
    out = dict.fromkeys(RESULT_COLUMNS, "")
    out.update(policy=k.policy.id, policy_version=k.policy_version, knowledge_version=k.version,
               as_of=str(as_of or "").replace("T", " ")[:16], status="rejected", reason=reason)
    return out


def rejection(exc: Exception, k: Any, as_of: Any) -> dict[str, Any]:
    """The result columns of an order whose case the model or the engine refused with ``exc``."""
    if isinstance(exc, RowError):
        return rejected(str(exc), k, as_of)
    field = getattr(exc, "field", None) or ""  # named by the error's field, never by parsing its text
    column = ("planned_agent" if field == "agent" else "prior_reactions"
              if field.startswith("patient.prior_reactions") else field if field in ("exam", "scheduled_at",
                                                                                  "as_of") else None)
    return rejected(exc.at("", rename={field: f"column {column}"}).message if column else exc.message, k, as_of)


def outcome(case_dict: dict, k: Any, builder: CaseBuilder) -> tuple[dict[str, Any], Record | None]:
    """The review columns of one case dict (status ok/flagged, or rejected with the reason), and the
    :class:`Record` of its class when it was decided."""
    try:
        case = builder.validate(case_dict)
        d = decide(case, k)
    except (RowError, ContrastAidError) as exc:
        return rejection(_forget(exc), k, case_dict.get("as_of")), None
    return summarise_decision(d, case), Record.of(d, case)


def _forget(exc: BaseException) -> BaseException:
    """``exc`` without the frames it holds, nor those of the errors it was raised from. Some engine errors sit
    in a cycle with their own frame (``check_case_times`` raises the first of its list), and through the
    traceback every caller's frame, the reviewer's included, would live on until a full collection."""
    seen: BaseException | None = exc
    while seen is not None:
        seen.__traceback__ = None
        seen = seen.__context__
    return exc


def review_case(case_dict: dict, k: Any, builder: CaseBuilder) -> dict[str, Any]:
    """The review columns of one case dict, decided in full (the plain path)."""
    return outcome(case_dict, k, builder)[0]


@dataclass(frozen=True)
class Record:
    """What the first order of a class gives every order of it: the choice part of the cells and what the
    plan stages read from the decision (the roles' chosen agents, the blocks they fill in)."""

    choice: ChoicePart
    exam_id: str
    roles: list
    premedication: m.PremedicationBlock
    metformin: m.MetforminBlock
    hydration: bool
    chosen: tuple  # (exam, (agent, family) chosen per role): what the dose stages read from the decision

    @classmethod
    def of(cls, d: m.Decision, case: m.Case) -> Record:
        chosen = tuple(next(((o.agent, o.family) for o in rd.options if o.chosen), None) for rd in d.roles)
        return cls(choice=choice_part(d, case.agent), exam_id=d.exam, roles=list(d.roles),
                   premedication=d.premedication, metformin=d.metformin, hydration=d.renal.hydration_indicated,
                   chosen=(d.exam, chosen))


# ----------------------------------------------------------------------------- templates and classes
def _with(obj: Any, fields: dict) -> Any:
    """A copy of a (frozen) model holding ``fields`` (its own, some replaced): what the model would hold for
    those values."""
    new = object.__new__(type(obj))
    _setattr(new, "__dict__", fields)
    _setattr(new, "__pydantic_extra__", None)
    _setattr(new, "__pydantic_fields_set__", obj.__pydantic_fields_set__)  # never changed on a frozen model
    _setattr(new, "__pydantic_private__", None)
    return new


@dataclass(frozen=True)
class _Exam:
    """Per exam: the fixed facts its rules test, and its rules' tests on each derived fact."""

    fixed: tuple[str, ...]  # the patient fields behind the patient facts the rules test (not the numbers)
    #: (derived fact, the patient field it is, or None for the kidney's, its tests)
    tests: tuple[tuple[str, str | None, tuple[Callable[[dict], bool], ...]], ...]


@dataclass
class _Template:
    case: m.Case
    exam: _Exam
    key: int  # the class key's fixed part (numbered by FastReview._id)
    doses_key: int  # what the dose stages read besides the chosen agents, weight and age (numbered)
    #: the models to rebuild for an order, deepest first: (path, template's model, [(field, column)],
    #: [(field, path of the rebuilt child)])
    owners: tuple


def _shape(given: tuple[tuple[str, tuple], ...]) -> tuple:
    """How an order's case is rebuilt from its template's, for the numeric cells ``given`` (column, path):
    every model on the way to one of them, deepest first (the case itself last), as (path, [(field, column)],
    [(field, index of the rebuilt child in this list)])."""
    prefixes = sorted({path[:i] for _, path in given for i in range(len(path))}, key=len, reverse=True)
    out = []
    for prefix in prefixes:
        fields = [(path[-1], name) for name, path in given if path[:-1] == prefix]
        children = [(c[-1], i) for i, c in enumerate(prefixes) if len(c) == len(prefix) + 1 and c[:-1] == prefix]
        out.append((prefix, fields, children))
    return tuple(out)


def _owners(case: m.Case, shape: tuple, cells: dict[str, dict]) -> tuple:
    """The shape with the template's models and the columns' remembered values filled in."""
    out = []
    for prefix, fields, children in shape:
        obj = case
        for part in prefix:
            obj = getattr(obj, part)
        out.append((obj, [(field, name, cells[name]) for field, name in fields], children))
    return tuple(out)


@dataclass
class _Order:
    case: m.Case
    egfr: float | None  # as kidney_stage gives it
    key: tuple  # the class key
    tpl: _Template


class _Alerts(list):
    """Collects the alerts ``kidney_stage`` raises (level and text: what the decision shows)."""

    def alert(self, level: str, text: str, rule: str, source: str) -> None:
        self.append((level, text))


@dataclass(frozen=True)
class _Doses:
    doses: list  # (role, dose block) as plans.plan_doses gives them
    content: int  # what the dose limits read of them (each role's renal exposure and catheter study, each
    # dose's iodine and volume), numbered by FastReview._id
    catheter: bool  # a dose of a catheter study (the limits then read weight and creatinine: Cigarroa)


class _Limits(NamedTuple):
    """What the cells read of the dose limits (summary.plan_part_of): whether one is exceeded, and the messages."""

    iodine_g_per_gfr_exceeded: bool | None
    cigarroa_exceeded: bool | None
    messages: tuple[str, ...]


class _Roles:
    """The decision's roles, as the dose stages read them (``decision.roles``)."""

    def __init__(self, roles: list) -> None:
        self.roles = roles


def _remembering(fmt: Callable[[Any], str]) -> Callable[[Any], str]:
    """``fmt``, once per distinct value."""
    seen: dict[Any, str] = {}

    def remembered(value: Any) -> str:
        text = seen.get(value)
        if text is None:
            text = seen[value] = fmt(value)
        return text

    return remembered


def _getter(names: list[str]) -> Callable[[dict], tuple]:
    """The values of ``names`` in a row, as a tuple (whatever their number)."""
    if len(names) == 1:
        get = operator.itemgetter(names[0])
        return lambda row: (get(row),)
    return operator.itemgetter(*names) if names else (lambda row: ())


def _tests(cond: m.Condition):
    """Every single test of a condition tree."""
    if isinstance(cond, m.Test):
        yield cond
    elif isinstance(cond, m.All):
        for c in cond.all:
            yield from _tests(c)
    elif isinstance(cond, m.AnyOf):
        for c in cond.any:
            yield from _tests(c)
    else:
        yield from _tests(cond.not_)


def _fact(value: Any) -> Any:
    """A patient field as a fact (``engine.case_facts``: an enum by its value)."""
    return value.value if hasattr(value, "value") else value


def _hashable(value: Any) -> Any:
    return tuple(value) if isinstance(value, list) else value


_NOT_FAST = object()  # a template whose exam the fast path does not cover


class FastReview:
    """Reviews distinct worklist rows (column -> text) under one knowledge and one as_of; see the module doc.

    State lives on the object (one per review): templates, class records and the remembered stage results."""

    def __init__(self, k: Any, builder: CaseBuilder, read: list[str], as_of: dt.datetime) -> None:
        self.k, self.builder, self.read, self.stamp = k, builder, list(read), as_of.isoformat()
        paths = {builder.by_name[c].path: c for c in self.read if builder.by_name[c].kind == "scalar"}
        self.varying = [(paths[p], p) for p in CONTINUOUS if p in paths]
        varying = {name for name, _ in self.varying}
        fixed = [c for c in self.read if c not in varying]
        self._fixed_names = fixed
        self._varying_names = [name for name, _ in self.varying]
        self._fixed, self._varying = _getter(fixed), _getter(self._varying_names)
        self.fixed_facts = frozenset(case_facts(m.Case(exam="-"), None, None)) - DERIVED_FACTS
        self.templates: dict[tuple, Any] = {}
        self.records: dict[tuple, Record] = {}
        self.exams: dict[str, _Exam | None] = {}
        self.cells: dict[str, dict[str, Any]] = {name: {} for name, _ in self.varying}  # column -> text -> value
        self.catheter: dict[str, bool] = {}
        self.ids: dict[tuple, int] = {}
        self.chosen: dict[int, int] = {}  # id of a kept record -> its chosen agents, numbered
        self.shapes: dict[tuple, tuple] = {}
        self.cells_of: dict[tuple, dict] = {}  # (class choice, plan part, exam time) -> cells
        self.tested: dict[tuple, tuple] = {}  # (tests, fact value) -> results
        stages = ("doses", "limits", "hydration", "premedication", "metformin", "times")
        self.memo: dict[str, dict] = {n: {} for n in stages}
        self.stats: Counter = Counter()
        self._fmt = _remembering(fmt_time)

    # ------------------------------------------------------------------ the plain path
    def case_dict(self, row: dict[str, str]) -> dict:
        case = self.builder.case_dict({c: row.get(c, "") for c in self.read}, resolve_exam(row["exam"], self.k))
        case["as_of"] = self.stamp
        return case

    def plain(self, row: dict[str, str]) -> dict[str, Any]:
        self.stats["decided"] += 1
        return review_case(self.case_dict(row), self.k, self.builder)

    # ------------------------------------------------------------------ templates
    def _template_key(self, row: dict[str, str]) -> tuple:
        try:
            return self._fixed(row), tuple(map(operator.not_, self._varying(row)))
        except KeyError:  # a row without some columns (built by hand, not read from a file)
            return (tuple(row.get(c, "") for c in self._fixed_names),
                    tuple(not row.get(c, "") for c in self._varying_names))

    def exam(self, exam_id: str) -> _Exam | None:
        """The facts the exam's rules test (None: a fact of neither kind, so the exam is not sped up)."""
        if exam_id not in self.exams:
            self.exams[exam_id] = self._exam(exam_id)
        return self.exams[exam_id]

    def _exam(self, exam_id: str) -> _Exam | None:
        k = self.k
        exam = k.exams.get(exam_id)
        if exam is None:
            return None
        rules = [cr for i in range(len(exam.roles)) for _, _, crs in k.candidates[(exam_id, i)] for cr in crs]
        rules += list(k.case_rules)
        names = {f for cr in rules for f in facts_used(cr.rule.when) if not f.startswith(STATIC_PREFIXES)}
        fixed = sorted(names - DERIVED_FACTS)
        # history facts follow from the reactions and case.urgency from the urgency, both in the class key
        if not set(fixed) <= self.fixed_facts or not all(
                f.startswith(("patient.", "history.")) or f == "case.urgency" for f in fixed):
            return None
        tests: dict[str, dict[tuple, Callable[[dict], bool]]] = {}
        for cr in rules:
            for t in _tests(cr.rule.when):
                if t.fact in DERIVED_FACTS:
                    tests.setdefault(t.fact, {}).setdefault(
                        (t.operator, repr(t.operand)), compile_condition(t, k.policy, cr.rule.id, cr.rule.scope))
        return _Exam(tuple(f[8:] for f in fixed if f.startswith("patient.")),
                     tuple((f, None if f.startswith("renal.") else f[8:], tuple(t.values()))
                           for f, t in sorted(tests.items())))

    def _template(self, row: dict[str, str]) -> Any:
        """The template of a row's class of cells, or the row's cells when its case is refused (the next row of
        the class may be fine: nothing is kept)."""
        try:
            case = self.builder.validate(self.case_dict(row))
        except (RowError, ContrastAidError) as exc:
            return rejection(_forget(exc), self.k, self.stamp)
        info = self.exam(case.exam)
        if info is None:
            return _NOT_FAST
        p = case.patient
        facts = tuple(_hashable(_fact(getattr(p, name))) for name in info.fixed)  # as case_facts gives them
        key = (case.exam, case.agent, case.override_culprit, case.urgency, case.as_of, tuple(p.prior_reactions),
               p.takes_metformin, p.dialysis, p.acute_kidney_injury, facts)
        doses_key = (p.iv_access, case.planned_volume_ml, case.planned_flow_ml_s, case.planned_concentration_mg_i_ml)
        given = tuple((name, path) for name, path in self.varying if row.get(name, ""))
        shape = self.shapes.get(given)
        if shape is None:
            shape = self.shapes[given] = _shape(given)
        return _Template(case, info, self._id(key), self._id(doses_key), _owners(case, shape, self.cells))

    def _id(self, key: tuple) -> int:
        """A small number for a long key (keys are compared once, then hashed as numbers)."""
        return self.ids.setdefault(key, len(self.ids))

    # ------------------------------------------------------------------ one order
    @staticmethod
    def _cell(owner: Any, field: str, cells: dict[str, Any], text: str) -> Any:
        """A numeric cell's value, validated alone by the model that holds the field (once per text)."""
        try:
            value = getattr(type(owner).model_validate({**owner.__dict__, field: text}), field)
        except ValidationError:
            value = _BAD
        cells[text] = value
        return value

    def _case(self, tpl: _Template, row: dict[str, str]) -> m.Case | None:
        """The order's case: the template's, with the order's numeric cells (None: a cell the model refuses)."""
        built: list[Any] = []
        for obj, fields, children in tpl.owners:
            held = obj.__dict__.copy()
            for field, name, cells in fields:
                text = row[name]
                value = cells.get(text, _MISSING)
                if value is _MISSING:
                    value = self._cell(obj, field, cells, text)
                if value is _BAD:
                    return None
                held[field] = value
            for field, i in children:
                held[field] = built[i]
            built.append(_with(obj, held))
        return built[-1] if built else tpl.case

    def _tests(self, tpl: _Template, p: m.Patient, egfr: float | None, category: str | None) -> tuple:
        """The results of the exam's rules' tests on the order's derived facts (once per fact value): the eGFR
        and its category from ``kidney_stage``, the patient's numbers as ``case_facts`` gives them."""
        out = []
        for fact, field, tests in tpl.exam.tests:
            value = getattr(p, field) if field else egfr if fact == "renal.egfr" else category
            key = (id(tests), value)
            found = self.tested.get(key)
            if found is None:
                found = self.tested[key] = tuple(test({fact: value}) for test in tests)
            out.append(found)
        return tuple(out)

    def prepare(self, row: dict[str, str]) -> _Order | dict | None:
        """The order's case and class key; or its cells when its case is refused (rejected as the plain path
        rejects it); None: the order goes the plain path."""
        tkey = self._template_key(row)
        tpl = self.templates.get(tkey)
        if tpl is None:
            tpl = self._template(row)
            if isinstance(tpl, dict):
                return tpl
            self.templates[tkey] = tpl
        if tpl is _NOT_FAST:
            return None
        case = self._case(tpl, row)
        if case is None:
            return None
        problems = self._times(case)  # as CaseBuilder.validate checks them after the model
        if problems:
            return rejection(problems[0], self.k, self.stamp)
        alerts = _Alerts()
        try:
            egfr, _, category, _, _ = kidney_stage(case.patient, self.k.policy, alerts)
        except ContrastAidError as exc:
            _forget(exc)
            return None
        tests = self._tests(tpl, case.patient, egfr, category)
        return _Order(case, egfr, (tpl.key, tests, egfr is None, tuple(alerts)), tpl)

    def finish(self, order: _Order, rec: Record) -> dict[str, Any]:
        """The cells of an order of a decided class: the class's choice part, the order's own plans."""
        case, k = order.case, self.k
        p, pol = case.patient, k.policy
        exam = k.exams[rec.exam_id]
        doses, iodinated = self._doses(order, rec, exam)
        catheter = self.catheter.get(exam.id)
        if catheter is None:
            catheter = self.catheter[exam.id] = plans.has_catheter_study(exam)
        _, agfr = plans.body_gfr(p, round(order.egfr, 1) if order.egfr is not None else None, pol)
        fresh, warnings = plans.creatinine_freshness(case, pol, iodinated or catheter)
        limits = self._limits(doses, p, agfr, catheter) if iodinated or catheter else None
        hydration = None
        if rec.hydration:
            hydration, more = self._hydration(case)
            warnings = warnings + list(more)
        premedication = self._premedication(case, rec) if rec.choice.premedication else rec.premedication
        metformin = self._metformin(case, rec) if rec.choice.metformin_hold else rec.metformin
        part = plan_part_of(fresh["creatinine_required"], fresh["creatinine_stale"], fresh["creatinine_age_days"],
                            warnings, limits, hydration, premedication, metformin)
        # the exam time reaches the cells only as "creatinine needed by" (summary.columns)
        key = (id(rec.choice), part, case.scheduled_at if part.creatinine_flag else None)
        cells = self.cells_of.get(key)
        if cells is None:
            cells = self.cells_of[key] = columns(rec.choice, part, case.scheduled_at, self._fmt)
        return cells

    # ------------------------------------------------------------------ plan stages, remembered by their inputs
    def _doses(self, order: _Order, rec: Record, exam: m.Exam) -> tuple[_Doses, bool]:
        """``plan_doses`` (and ``plan_agent_doses``, whose errors reject an order too): they read the chosen
        agents, the weight, whether the patient is a child, the IV access and the planned volume, flow and
        strength."""
        case = order.case
        p = case.patient
        child = p.age_years is not None and p.age_years < paediatric.ADULT_AGE_YEARS  # as plans.plan_doses
        chosen = self.chosen.get(id(rec))
        if chosen is None:
            chosen = self.chosen[id(rec)] = self._id(rec.chosen)
        key = (chosen, child, p.weight_kg, order.tpl.doses_key)
        found = self.memo["doses"].get(key)
        if found is None:
            roles, doses, iodinated = plans.plan_doses(case, self.k, exam, _Roles(rec.roles))
            plan_agent_doses(case, self.k, exam, roles)
            # what the dose limits read of the doses (plans._dose_limits): orders with other doses share them
            content = tuple((role.renal_exposure, role.catheter_study, d.iodine_g, d.volume_ml) for role, d in doses)
            catheter_dose = any(c[1] for c in content)
            found = self.memo["doses"][key] = (_Doses(doses, self._id(content), catheter_dose), iodinated)
        return found

    def _limits(self, doses: _Doses, p: m.Patient, agfr: float | None, catheter: bool) -> Any:
        """The renal dose limits: they read the doses' iodine, volumes and roles, dialysis, the absolute GFR and,
        for a catheter study (Cigarroa), the weight and the creatinine."""
        cigarroa = (p.weight_kg, p.creatinine) if catheter or doses.catheter else None
        key = (doses.content, p.dialysis, agfr, catheter, cigarroa)
        found = self.memo["limits"].get(key)
        if found is None:
            limits = plans.dose_limit_fields(doses.doses, p, self.k.policy, agfr, catheter)
            found = self.memo["limits"][key] = _Limits(limits.get("iodine_g_per_gfr_exceeded"),
                                                       limits.get("cigarroa_exceeded"), tuple(limits["messages"]))
        return found

    def _times(self, case: m.Case) -> list:
        """``case_time_problems``: it reads as_of, the exam time and the creatinine's date."""
        cr = case.patient.creatinine
        key = (case.as_of, case.scheduled_at, cr.measured_on if cr is not None else None)
        found = self.memo["times"].get(key)
        if found is None:
            found = self.memo["times"][key] = case_time_problems(case)
        return found

    def _hydration(self, case: m.Case) -> tuple[Any, tuple[str, ...]]:
        """``hydration_plan``: it reads the weight, the exam time and heart failure."""
        p = case.patient
        key = (p.weight_kg, case.scheduled_at, p.heart_failure)
        found = self.memo["hydration"].get(key)
        if found is None:
            more: list[str] = []
            plan = plans.hydration_plan(case, self.k.policy, more)
            found = self.memo["hydration"][key] = (plan, tuple(more))
        return found

    def _premedication(self, case: m.Case, rec: Record) -> Any:
        """``plan_premedication``: it reads the exam time, as_of, urgency, whether the patient is a child and the
        weight (a child's doses are per kg)."""
        p = case.patient
        child = p.age_years is not None and p.age_years < paediatric.ADULT_AGE_YEARS
        key = (case.scheduled_at, case.as_of, case.urgency, child, p.weight_kg)
        found = self.memo["premedication"].get(key)
        if found is None:
            found = self.memo["premedication"][key] = plans.plan_premedication(case, self.k, rec.premedication)
        return found

    def _metformin(self, case: m.Case, rec: Record) -> Any:
        """``plan_metformin``: it reads the exam time."""
        found = self.memo["metformin"].get(case.scheduled_at)
        if found is None:
            found = self.memo["metformin"][case.scheduled_at] = plans.plan_metformin(case, rec.metformin)
        return found

    # ------------------------------------------------------------------ driving a list
    def one(self, row: dict[str, str], order: Any = _MISSING) -> dict[str, Any]:
        """The cells of one distinct row: decided in full when it is the first of its class."""
        if order is _MISSING:
            order = self.prepare(row)
        if order is None:
            return self.plain(row)
        if isinstance(order, dict):
            return order
        rec = self.records.get(order.key)
        if rec is None:
            self.stats["decided"] += 1
            result, rec = outcome(self.case_dict(row), self.k, self.builder)
            if rec is not None:
                self.records[order.key] = rec
            return result
        try:
            result = self.finish(order, rec)
        except ContrastAidError as exc:  # a plan stage refuses this order's numbers: the plain path says why
            _forget(exc)
            return self.plain(row)
        self.stats["fast"] += 1
        return result

    def review(self, rows: list[dict[str, str]], progress: Callable[[int], None] | None = None) -> list[dict[str, Any]]:
        """The cells of every distinct row, in order; ``progress(n)`` after every hundredth of them."""
        out = []
        step = max(1, len(rows) // 100)
        for i, row in enumerate(rows, start=1):
            out.append(self.one(row))
            if progress and i % step == 0:
                progress(step)
        return out
