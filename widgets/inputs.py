"""The case form: the exam picker and the patient panel (grouped), with a prior-reaction editor.

These widgets only collect input. ``case_data()`` returns the raw values as a case dict (strings for
numbers, as typed); validation and its words come from ``knowledge`` (``case_problems``, CaseError).
"""

from __future__ import annotations

import datetime as dt
from typing import Any

import ipywidgets as w
import traitlets

from knowledge.tables import models as m
from knowledge.present.form import GROUP_TITLES, FieldSpec, case_specs, creatinine_hint, label_of, patient_specs
from knowledge.tables.loader import Knowledge

MODALITY_LABEL = {m.Modality.fluoroscopy: "Fluoro", m.Modality.angiography: "Angio", m.Modality.ct: "CT",
                  m.Modality.mri: "MRI", m.Modality.ultrasound: "US"}
MODALITY_ORDER = {m.Modality.fluoroscopy: 0, m.Modality.angiography: 1, m.Modality.ct: 2,
                  m.Modality.mri: 3, m.Modality.ultrasound: 4}
_WIDE = w.Layout(width="230px")
_DESC = {"description_width": "initial"}


def _sr(widget: w.Widget) -> w.Widget:
    """Keep the widget's description as its accessible name but show it to screen readers only."""
    widget.add_class("ca-sr-label")
    return widget


def _mark_invalid(widget: w.Widget, bad: bool) -> None:
    """Class ca-invalid (the page sets aria-invalid on its inputs)."""
    if bad and "ca-invalid" not in widget._dom_classes:
        widget.add_class("ca-invalid")
    elif not bad and "ca-invalid" in widget._dom_classes:
        widget.remove_class("ca-invalid")


def spec_control(spec: FieldSpec, width: str = "230px") -> w.ValueWidget:
    """A control for a model field the form has no dedicated control for: bool -> checkbox, choice ->
    dropdown, number -> text box with the unit and range as placeholder, list of choices -> multi-select."""
    if spec.kind == "bool":
        return w.Checkbox(description=spec.label, indent=False, layout=w.Layout(width="auto"))
    if spec.kind == "choice":
        options = ([("not given", "")] if spec.optional and spec.default is None else []) + list(spec.choices)
        box = w.Dropdown(description=spec.label, options=options, style=_DESC, layout=w.Layout(width="300px"))
        default = getattr(spec.default, "value", spec.default)
        if default is not None and default in [v for _, v in options]:
            box.value = default
        return box
    if spec.kind == "list" and spec.choices:
        return w.SelectMultiple(description=spec.label, options=list(spec.choices), rows=min(4, len(spec.choices)),
                                style=_DESC, layout=w.Layout(width="300px"))
    return w.Text(description=spec.label, placeholder=spec.hint(), style=_DESC, layout=w.Layout(width=width))


def _error_label() -> w.HTML:
    label = w.HTML("", layout=w.Layout(display="none"))
    label.add_class("ca-error")
    return label


def _set_error(label: w.HTML, messages: list[str]) -> None:
    import html

    text = "<br>".join(html.escape(x) for x in messages)
    if label.value != text:
        label.value = text
    display = None if messages else "none"
    if label.layout.display != display:
        label.layout.display = display


def _control_value(spec: FieldSpec, control: w.ValueWidget) -> Any:
    """The raw case value of a generic control (None when empty or at its default)."""
    v = control.value
    if spec.kind == "bool":
        return True if v else None
    if spec.kind == "list":
        return list(v) or None
    if isinstance(v, str):
        v = v.strip()
        default = getattr(spec.default, "value", spec.default)
        return None if v == "" or (spec.kind == "choice" and v == default) else v
    return v


def _set_control(spec: FieldSpec, control: w.ValueWidget, value: Any, notes: list[str]) -> None:
    """Put a value from a link into a generic control; a value it cannot hold becomes a note."""
    label = label_of(spec.path)
    if spec.kind == "bool":
        if isinstance(value, bool):
            control.value = value
        else:
            notes.append(f"{spec.path}: {value!r} from the link is not allowed; allowed: 1 or 0")
    elif spec.kind == "choice":
        allowed = [v for _, v in control.options]
        if str(value) in allowed:
            control.value = str(value)
        else:
            notes.append(f"{spec.path}: {value!r} from the link is not allowed ({label}); allowed: "
                         + ", ".join(repr(a) for a in allowed if a))
    elif spec.kind == "list":
        allowed = [v for _, v in control.options]
        items = [str(x) for x in (value if isinstance(value, list) else [value])]
        control.value = tuple(x for x in items if x in allowed)
        notes += [f"{spec.path}: {x!r} from the link is not allowed; allowed: " + ", ".join(allowed)
                  for x in items if x not in allowed]
    else:
        control.value = str(value)


class _CaseModelBase(traitlets.HasTraits):
    """The case as typed: one trait per Case field and per Patient field (flat: the two sets of names do
    not overlap). Numbers and times are the text as typed (the form's ``typed_case`` reads them), flags are
    Bool, choices Unicode, nested models Dict and lists List. The panels write it on every control change;
    the app observes it (and nothing else) to recompute."""

    case_names: tuple[str, ...] = ()
    patient_names: tuple[str, ...] = ()

    def empty(self, name: str) -> Any:
        return self.trait_defaults(name)

    def case_data(self) -> dict[str, Any]:
        """The case dict (empty and default values left out), as ``parse_case`` takes it after ``typed_case``."""

        def keep(name: str) -> bool:
            v = getattr(self, name)
            return v not in (None, "", False, {}, []) and v != self.empty(name)

        out: dict[str, Any] = {n: getattr(self, n) for n in self.case_names if keep(n)}
        out.setdefault("exam", self.exam or "")
        out["patient"] = {n: getattr(self, n) for n in self.patient_names if keep(n)}
        return out


def _trait_for(spec: FieldSpec) -> traitlets.TraitType:
    if spec.kind == "bool":
        return traitlets.Bool(False, help=spec.label)
    if spec.kind == "model":
        return traitlets.Dict(help=spec.label)
    if spec.kind == "list":
        return traitlets.List(help=spec.label)
    default = getattr(spec.default, "value", spec.default)
    return traitlets.Unicode("" if spec.kind != "choice" or default is None else str(default), allow_none=True,
                             help=spec.label)


def _case_model_class() -> type[_CaseModelBase]:
    traits: dict[str, Any] = {}
    case_names, patient_names = [], []
    for sp in case_specs():
        if sp.name == "patient":
            for c in sp.children:
                traits[c.name] = _trait_for(c)
                patient_names.append(c.name)
        else:
            traits[sp.name] = _trait_for(sp)
            case_names.append(sp.name)
    traits.update(case_names=tuple(case_names), patient_names=tuple(patient_names),
                  __doc__=_CaseModelBase.__doc__)
    return type("CaseModel", (_CaseModelBase,), traits)


#: the traitlets model of the case, generated from knowledge.tables.models.Case and Patient
CaseModel = _case_model_class()


def _push(model: _CaseModelBase, names: tuple[str, ...], data: dict[str, Any]) -> None:
    """Write ``data`` into the model's traits ``names`` (missing ones back to empty), notifying once each."""
    with model.hold_trait_notifications():
        for name in names:
            value = data.get(name, model.empty(name))
            if getattr(model, name) != value:
                setattr(model, name, value)


class ExamPicker(w.VBox):
    """A filter box and a list of exams grouped by modality, with the purpose of the one picked."""

    exam_id = traitlets.Unicode("")

    def __init__(self, knowledge: Knowledge, clock, model: _CaseModelBase | None = None, **kwargs: Any):
        super().__init__(**kwargs)
        self._knowledge = knowledge
        self.model = model if model is not None else CaseModel()
        self._all = sorted(knowledge.exams.values(), key=lambda e: (MODALITY_ORDER[e.modality], e.name.lower()))
        self._build_exam_controls()
        self._build_time_controls()
        self._build_request_controls()
        head = w.HTML('<h3 class="ca-group-head">Exam</h3>')
        extras = self._build_extras()
        self.children = [head, self.filter, self.select, self.purpose, self.agent, self.override_culprit,
                         self.urgency, self.scheduled,
                         self.scheduled_error, w.HBox([self.as_of, self.as_of_now]), self.as_of_source,
                         self.as_of_error, self.error, extras]
        self._observe_controls()
        self._clock = clock
        if self._all:
            default = knowledge.exams.get("ct-abdomen-pelvis") or next((e for e in self._all if e.roles), self._all[0])
            self.select.value = default.id

    def _build_exam_controls(self) -> None:
        """The filter box, the exam list, the exam's purpose and the requested agent."""
        self.filter = w.Text(placeholder="filter: name, region, purpose or modality", description="Find exam",
                             style=_DESC, layout=w.Layout(width="100%"))
        self.filter.add_class("ca-exam-filter")
        self.select = _sr(w.Select(options=self._options(self._all), rows=9, description="Exam",
                                   style=_DESC, layout=w.Layout(width="100%")))
        self.select.add_class("ca-exam")
        self.purpose = w.HTML("")
        self.purpose.add_class("ca-exam-purpose")
        self.agent = w.Dropdown(description="Plan with", options=[("top-ranked option", "")], style=_DESC,
                                layout=w.Layout(width="100%"))
        self.agent.add_class("ca-agent")

    def _build_time_controls(self) -> None:
        """The exam time and the 'Times as of' field with its 'now' button, each with its error line."""
        self.scheduled = w.Text(placeholder="YYYY-MM-DD HH:MM (optional)", description="Exam time", style=_DESC,
                                layout=w.Layout(width="100%"))
        self.scheduled_error = _error_label()
        self.as_of = w.Text(placeholder="YYYY-MM-DD HH:MM", description="Times as of", style=_DESC,
                            layout=w.Layout(width="260px"))
        self.as_of.add_class("ca-as-of")
        self.as_of_now = w.Button(description="now", tooltip="set 'as of' to this moment",
                                  layout=w.Layout(width="60px"))
        self.as_of_source = w.HTML("")
        self.as_of_source.add_class("ca-as-of-source")
        self.as_of_error = _error_label()

    def _build_request_controls(self) -> None:
        """The exam's error line, the urgency and the culprit override."""
        self.error = _error_label()
        self.urgency = w.Dropdown(description="Urgency", options=[(u.value, u.value) for u in m.Urgency],
                                  style=_DESC, layout=w.Layout(width="260px"))
        self.urgency.add_class("ca-urgency")
        self.override_culprit = w.Checkbox(
            description="Override: plan the requested agent even though it caused an earlier reaction",
            indent=False, layout=w.Layout(width="auto"))
        self.override_culprit.add_class("ca-override-culprit")

    def _build_extras(self) -> w.Accordion:
        """A generic control for every case field with no dedicated one above (planned flow, volume,
        strength, and any new one), folded away."""
        own = {"exam", "agent", "scheduled_at", "as_of", "patient", "urgency", "override_culprit"}
        self.extra_specs = [sp for sp in case_specs() if sp.name not in own]
        self.extras: dict[str, w.ValueWidget] = {sp.name: spec_control(sp) for sp in self.extra_specs}
        self.extra_errors = {name: _error_label() for name in self.extras}
        extras = w.Accordion(children=[w.VBox([x for n, c in self.extras.items() for x in (c, self.extra_errors[n])])],
                             selected_index=None)
        extras.set_title(0, "Planned injection (optional overrides)")
        return extras

    def _observe_controls(self) -> None:
        for c in self.extras.values():
            c.observe(self._on_agent, "value")
        self.filter.observe(self._on_filter, "value")
        self.select.observe(self._on_select, "value")
        self.agent.observe(self._on_agent, "value")
        self.urgency.observe(self._on_agent, "value")
        self.override_culprit.observe(self._on_agent, "value")
        self.scheduled.observe(self._on_agent, "value")
        self.as_of.observe(self._on_as_of, "value")
        self.as_of_now.on_click(lambda b: self.set_as_of(None))

    @staticmethod
    def _options(exams: list[m.Exam]) -> list[tuple[str, str]]:
        return [(f"{MODALITY_LABEL[e.modality]} · {e.name}", e.id) for e in exams]

    def _matches(self, text: str) -> list[m.Exam]:
        words = text.lower().split()
        if not words:
            return self._all
        out = []
        for e in self._all:
            hay = " ".join((e.id, e.name, e.region, e.purpose, e.modality.value, MODALITY_LABEL[e.modality])).lower()
            if all(word in hay for word in words):
                out.append(e)
        return out

    def _on_filter(self, change: dict) -> None:
        found = self._matches(change["new"])
        current = self.select.value
        if not found:
            _set_error(self.error, [f"No exam matches {change['new']!r}; clear the filter to see all exams"])
            return
        _set_error(self.error, [])
        with self.hold_trait_notifications():
            self.select.options = self._options(found)
            ids = [e.id for e in found]
            self.select.value = current if current in ids else ids[0]

    def _on_select(self, change: dict) -> None:
        exam = self._knowledge.exams.get(change["new"]) if change["new"] else None
        if exam is None:
            return
        _set_error(self.error, [])
        import html

        roles = "".join(
            f"<li>{html.escape(r.route.value.replace('_', '-'))}{'' if r.required else ' (optional)'}: "
            f"{html.escape(r.purpose)}</li>" for r in exam.roles)
        self.purpose.value = (
            f"<div><b>{html.escape(exam.name)}</b> · {html.escape(exam.region)}<br>"
            f"<span class='ca-hint'>Purpose:</span> {html.escape(exam.purpose)}<br>"
            f"<span class='ca-hint'>Contrast:</span> {exam.contrast.value}"
            + (f"<ul style='margin:2px 0 2px 18px;padding:0'>{roles}</ul>" if roles else "") + "</div>")
        agents = []
        for role in exam.roles:
            for aid in role.agents:
                if aid not in [a for _, a in agents]:
                    agents.append((self._knowledge.agents[aid].name, aid))
        keep = self.agent.value if self.agent.value in [a for _, a in agents] else ""
        self.agent.options = [("top-ranked option", "")] + agents
        self.agent.value = keep
        self.exam_id = exam.id
        self.push()

    def push(self) -> None:
        """Write this panel's part of the case into the model."""
        if getattr(self, "_clock", None) is not None:  # not while the controls are being built
            _push(self.model, self.model.case_names, self.case_part())

    def _on_agent(self, change: dict) -> None:
        self.push()

    def _on_as_of(self, change: dict) -> None:
        if not self._setting_as_of:
            self.as_of_source.value = "<span class='ca-hint'>'now' as typed here</span>"
        self.push()

    _setting_as_of = False

    def set_as_of(self, text: str | None, source: str = "") -> None:
        """Set the 'now' times are worked out for: ``text`` (from a link), or the page's clock when None."""
        if text is None:
            text, source = self._clock().strftime("%Y-%m-%d %H:%M"), "this page's clock"
        self._setting_as_of = True
        try:
            self.as_of.value = text.replace("T", " ")[:16]
        finally:
            self._setting_as_of = False
        self.as_of_source.value = (f"<span class='ca-hint'>Clock times and the time left are worked out for "
                                   f"this 'now' ({source}).</span>")

    def show_problems(self, problems: dict[str, list[str]]) -> None:
        _set_error(self.scheduled_error, problems.get("scheduled_at", []))
        _set_error(self.as_of_error, problems.get("as_of", []))
        _set_error(self.error, problems.get("exam", []) + problems.get("agent", []))
        _mark_invalid(self.scheduled, bool(problems.get("scheduled_at")))
        _mark_invalid(self.as_of, bool(problems.get("as_of")))
        _mark_invalid(self.select, bool(problems.get("exam")))
        for name, label in self.extra_errors.items():
            _set_error(label, problems.get(name, []))
            _mark_invalid(self.extras[name], bool(problems.get(name)))

    def case_part(self) -> dict[str, Any]:
        out: dict[str, Any] = {"exam": self.select.value or ""}
        if self.agent.value:
            out["agent"] = self.agent.value
        if self.override_culprit.value:
            out["override_culprit"] = True
        if self.urgency.value != m.Urgency.elective.value:
            out["urgency"] = self.urgency.value
        when = self.scheduled.value.strip()
        if when:
            out["scheduled_at"] = when.replace(" ", "T", 1) if len(when) > 10 else when
        now = self.as_of.value.strip()
        if now:
            out["as_of"] = now.replace(" ", "T", 1) if len(now) > 10 else now
        for sp in self.extra_specs:
            value = _control_value(sp, self.extras[sp.name])
            if value is not None:
                out[sp.name] = value
        return out

    def clear(self) -> None:
        """Requested agent, exam time and overrides back to empty (the exam and 'as of' stay)."""
        self.agent.value = ""
        self.scheduled.value = ""
        self.urgency.value = m.Urgency.elective.value
        self.override_culprit.value = False
        for sp in self.extra_specs:
            self.extras[sp.name].value = spec_control(sp).value

    def set_extras(self, data: dict[str, Any]) -> list[str]:
        notes: list[str] = []
        for sp in self.extra_specs:
            if sp.name in data:
                _set_control(sp, self.extras[sp.name], data[sp.name], notes)
        return notes

    def set_exam(self, exam_id: str) -> str | None:
        """Pick an exam by id; returns a message if it is not in the table."""
        if exam_id not in self._knowledge.exams:
            return f"exam: {exam_id!r} from the link is not a known exam; allowed: an exam of the list"
        if exam_id not in [v for _, v in self.select.options]:
            self.filter.value = ""
        self.select.value = exam_id
        return None


class ReactionRow(w.HBox):
    """One prior reaction: family, kind, severity, optional culprit agent, and a remove button."""

    def __init__(self, knowledge: Knowledge, on_remove, on_change, **kwargs: Any):
        super().__init__(**kwargs)
        self._knowledge = knowledge
        small = lambda px: w.Layout(width=px)  # noqa: E731
        self.add_class("ca-reaction-row")
        self.family = w.Dropdown(description="Reaction: agent family", options=[(f.value, f.value) for f in m.Family],
                                 value="iodinated",
                                 layout=small("95px"))
        self.kind = w.Dropdown(description="Reaction: kind",
                               options=[("allergic-like", "allergic_like"), ("physiologic", "physiologic"),
                                        ("delayed (skin, hours-days)", "delayed")],
                               layout=small("110px"))
        self.severity = w.Dropdown(description="Reaction: severity", options=["mild", "moderate", "severe"],
                                   layout=small("90px"))
        self.agent = w.Dropdown(description="Reaction: culprit agent", options=self._agents("iodinated"),
                                layout=small("120px"))
        for c in (self.family, self.kind, self.severity, self.agent):
            _sr(c)
        self.remove = w.Button(description="remove", tooltip="remove this reaction", layout=small("70px"))
        self.breakthrough = w.Checkbox(description="despite premedication", indent=False, layout=small("170px"))
        self.children = [self.family, self.kind, self.severity, self.agent, self.breakthrough, self.remove]
        self.family.observe(self._on_family, "value")
        for c in (self.kind, self.severity, self.agent, self.breakthrough):
            c.observe(lambda ch: on_change(), "value")
        self._on_change = on_change
        self.remove.on_click(lambda b: on_remove(self))

    def _agents(self, family: str) -> list[tuple[str, str]]:
        return [("culprit unknown", "")] + [(a.name, a.id) for a in self._knowledge.agents.values()
                                            if a.family.value == family]

    def _on_family(self, change: dict) -> None:
        self.agent.options = self._agents(change["new"])
        self.agent.value = ""
        self._on_change()

    def data(self) -> dict[str, Any]:
        out = {"agent_family": self.family.value, "kind": self.kind.value, "severity": self.severity.value}
        if self.agent.value:
            out["agent"] = self.agent.value
        if self.breakthrough.value:
            out["despite_premedication"] = True
        return out


class ReactionEditor(w.VBox):
    """Several prior contrast reactions; rows are added and removed. ``rows_data`` mirrors the rows."""

    rows_data = traitlets.List()

    def __init__(self, knowledge: Knowledge, **kwargs: Any):
        super().__init__(**kwargs)
        self._knowledge = knowledge
        self.rows: list[ReactionRow] = []
        self.add_button = w.Button(description="add a prior reaction", icon="plus", layout=w.Layout(width="200px"))
        self.add_button.on_click(lambda b: self.add_row())
        self.empty = w.HTML("<span class='ca-hint'>No earlier contrast reaction recorded.</span>")
        self.error = _error_label()
        self._layout_rows()

    def _layout_rows(self) -> None:
        self.children = ([self.empty] if not self.rows else []) + list(self.rows) + [self.error, self.add_button]

    def add_row(self, family: str = "iodinated", kind: str = "allergic_like", severity: str = "mild",
                agent: str | None = None, notify: bool = True) -> ReactionRow:
        row = ReactionRow(self._knowledge, self._on_remove, self._on_row_change)
        row.family.value = family
        row.kind.value = kind
        row.severity.value = severity
        if agent:
            row.agent.value = agent
        self.rows.append(row)
        self._layout_rows()
        if notify:
            self.rows_data = self.data()
        return row

    def clear(self) -> None:
        self.rows = []
        self._layout_rows()

    def _on_remove(self, row: ReactionRow) -> None:
        self.rows = [r for r in self.rows if r is not row]
        self._layout_rows()
        self.rows_data = self.data()

    def _on_row_change(self) -> None:
        self.rows_data = self.data()

    def data(self) -> list[dict[str, Any]]:
        return [r.data() for r in self.rows]


#: the patient fields by group, from the models and the one group table (knowledge/present/form.py)
SPECS: dict[str, list[FieldSpec]] = patient_specs()
#: the boolean patient factors, by group (Patient field names)
GROUP_FLAGS = {g: [sp.name for sp in specs if sp.kind == "bool"] for g, specs in SPECS.items()}
FLAG_LABEL = {sp.name: sp.label for specs in SPECS.values() for sp in specs if sp.kind == "bool"}
#: numeric patient fields (text boxes: the value as typed, parsed by the form's typed_case)
NUMBERS = [sp.name for specs in SPECS.values() for sp in specs if sp.kind in ("number", "integer")]
_SPEC = {sp.name: sp for specs in SPECS.values() for sp in specs}
#: patient fields with a control of their own below; every other field gets a generic one (spec_control)
DEDICATED = {"creatinine", "sex", "dialysis", "obstruction", "iv_access", "prior_reactions"}
IV_SITES = [v for _, v in _SPEC["iv_access"].children[1].choices]
GROUP_HINTS = {
    "egfr": "An entered eGFR is used instead of the creatinine estimate.",
    "height_cm": "Height is used for the children's eGFR (bedside Schwartz).",
}


def _group_head(text: str) -> w.HTML:
    return w.HTML(f'<h3 class="ca-group-head">{text}</h3>')


class PatientPanel(w.VBox):
    """Patient factors in groups (``GROUPS`` in knowledge/present/form.py), one control per Patient field.

    Controls are attributes named after the Patient fields (``age_years``, ``perforation_suspected``, ...)
    plus ``creatinine_value``, ``creatinine_unit``, ``creatinine_date``, ``iv_gauge``, ``iv_site`` and
    ``reactions`` (a :class:`ReactionEditor`). A field added to the model gets a generic control
    (:func:`spec_control`) in its group without edits here.
    """

    def __init__(self, knowledge: Knowledge, model: _CaseModelBase | None = None, **kwargs: Any):
        super().__init__(**kwargs)
        self._knowledge = knowledge
        self.model = model if model is not None else CaseModel()
        self._holding = False
        self.errors: dict[str, w.HTML] = {}
        self.generic: dict[str, w.ValueWidget] = {}
        self._build_dedicated(knowledge)
        dedicated = self._dedicated_items()
        groups = [self._group(group, specs, dedicated) for group, specs in SPECS.items()]
        self.general_error = _error_label()
        self.children = groups + [self.general_error]
        self._observe_controls()
        self.push()

    def _build_dedicated(self, knowledge: Knowledge) -> None:
        """The controls of the fields with a control of their own (DEDICATED) and the eGFR readout."""
        self.creatinine_value = w.Text(description="Creatinine", placeholder="serum creatinine", style=_DESC,
                                       layout=w.Layout(width="180px"))
        self.creatinine_unit = _sr(w.Dropdown(description="Creatinine unit",
                                              options=[("mg/dL", "mg/dL"), ("µmol/L", "umol/L")],
                                              style=_DESC, layout=w.Layout(width="90px")))
        self.creatinine_hint = w.HTML(f"<span class='ca-hint'>{creatinine_hint('mg/dL')}</span>")
        self.creatinine_date = w.DatePicker(description="measured on", style=_DESC, value=None,
                                            layout=w.Layout(width="230px"))
        self.errors["creatinine"] = _error_label()
        self.sex = w.Dropdown(description="Sex", options=[("not given", ""), ("female", "female"), ("male", "male")],
                              style=_DESC, layout=w.Layout(width="180px"))
        self.errors["sex"] = _error_label()
        self.dialysis = spec_control(_SPEC["dialysis"])
        self.obstruction = spec_control(_SPEC["obstruction"])
        self.egfr_readout = w.HTML("")
        self.egfr_readout.add_class("ca-egfr")
        self.egfr_readout.add_class("ca-live")
        self.reactions = ReactionEditor(knowledge)
        self.iv_gauge = w.Dropdown(description="IV catheter", style=_DESC, layout=w.Layout(width="170px"),
                                   options=[("none given", "")] + [(f"{g} G", str(g)) for g in range(14, 25)])
        self.iv_site = _sr(w.Dropdown(description="IV catheter site", style=_DESC,
                                      options=[("site", "")] + [(s.replace("_", " "), s) for s in IV_SITES],
                                      layout=w.Layout(width="190px")))
        self.errors["iv_access"] = _error_label()

    def _dedicated_items(self) -> dict[str, Any]:
        """Field name -> a function that lays out its dedicated controls (called once, in its group)."""
        return {
            "sex": lambda: [w.VBox([self.sex, self.errors["sex"]])],
            "creatinine": lambda: [w.HBox([self.creatinine_value, self.creatinine_unit, self.creatinine_hint],
                                          layout=w.Layout(flex_flow="row wrap")),
                                   self.creatinine_date, self.errors["creatinine"]],
            "dialysis": lambda: [self.dialysis],
            "obstruction": lambda: [self.obstruction],
            "prior_reactions": lambda: [self.reactions],
            "iv_access": lambda: [w.HBox([self.iv_gauge, self.iv_site], layout=w.Layout(flex_flow="row wrap")),
                                  self.errors["iv_access"]],
        }

    def _group(self, group: str, specs: list[FieldSpec], dedicated: dict[str, Any]) -> w.VBox:
        """One group of the form: its heading, a control per field (with its hint), the eGFR readout in
        the kidney group."""
        items: list[w.Widget] = [_group_head(GROUP_TITLES[group])]
        for sp in specs:
            if sp.name in dedicated:
                items += dedicated[sp.name]()
            elif sp.kind == "bool":
                items.append(self._flag(sp.name))
            elif sp.kind in ("number", "integer"):
                items.append(self._number(sp.name))
            else:  # a new choice or list field: a generic control
                ctl = self.generic[sp.name] = spec_control(sp)
                setattr(self, sp.name, ctl)
                self.errors[sp.name] = _error_label()
                items += [ctl, self.errors[sp.name]]
            if sp.name in GROUP_HINTS:
                items.append(w.HTML(f"<span class='ca-hint'>{GROUP_HINTS[sp.name]}</span>"))
        if group == "kidney":
            items.append(self.egfr_readout)
        return w.VBox(items)

    def _number(self, name: str) -> w.VBox:
        """A text box for a number (attribute ``name``), its unit and range beside it, and its error line."""
        sp = _SPEC[name]
        box = w.Text(description=sp.label, placeholder=sp.hint(), style=_DESC, layout=_WIDE,
                     continuous_update=True)
        setattr(self, name, box)
        err = self.errors[name] = _error_label()
        return w.VBox([w.HBox([box, w.HTML(f"<span class='ca-hint'>{sp.hint()}</span>")],
                              layout=w.Layout(flex_flow="row wrap")), err])

    def _flag(self, name: str) -> w.Checkbox:
        box = w.Checkbox(description=FLAG_LABEL[name], indent=False, layout=w.Layout(width="auto"))
        setattr(self, name, box)
        return box

    def _observe_controls(self) -> None:
        self._controls = ([getattr(self, n) for n in NUMBERS]
                          + [getattr(self, n) for g in GROUP_FLAGS.values() for n in g]
                          + [self.creatinine_value, self.creatinine_unit, self.creatinine_date, self.sex,
                             self.dialysis, self.obstruction, self.iv_gauge, self.iv_site]
                          + list(self.generic.values()))
        for c in self._controls:
            c.observe(self._on_change, "value")
        self.creatinine_unit.observe(self._on_unit, "value")
        self.reactions.observe(self._on_change, "rows_data")

    # ---- events
    def _on_change(self, change: dict) -> None:
        if not self._holding:
            self.push()

    def push(self) -> None:
        """Write the patient part of the case into the model."""
        _push(self.model, self.model.patient_names, self.patient_data())

    def _on_unit(self, change: dict) -> None:
        self.creatinine_hint.value = f"<span class='ca-hint'>{creatinine_hint(change['new'])}</span>"

    # ---- data
    def patient_data(self) -> dict[str, Any]:
        p: dict[str, Any] = {}
        for name in NUMBERS:
            text = getattr(self, name).value.strip().replace(",", ".")
            if text:
                p[name] = text
        if self.sex.value:
            p["sex"] = self.sex.value
        cr = self.creatinine_value.value.strip().replace(",", ".")
        if cr:
            p["creatinine"] = {"value": cr, "unit": self.creatinine_unit.value}
            if self.creatinine_date.value is not None:
                p["creatinine"]["measured_on"] = self.creatinine_date.value
        for group in GROUP_FLAGS.values():
            for name in group:
                if getattr(self, name).value:
                    p[name] = True
        if self.dialysis.value != "none":
            p["dialysis"] = self.dialysis.value
        if self.obstruction.value != "none":
            p["obstruction"] = self.obstruction.value
        if self.iv_gauge.value or self.iv_site.value:
            p["iv_access"] = {"gauge": self.iv_gauge.value, "site": self.iv_site.value}
        reactions = self.reactions.data()
        if reactions:
            p["prior_reactions"] = reactions
        for name, ctl in self.generic.items():
            value = _control_value(_SPEC[name], ctl)
            if value is not None:
                p[name] = value
        return p

    def clear(self) -> None:
        """Every control back to empty or its default (before a link is applied to a running page)."""
        self._holding = True
        try:
            for name in NUMBERS:
                getattr(self, name).value = ""
            for names in GROUP_FLAGS.values():
                for name in names:
                    getattr(self, name).value = False
            self.sex.value = ""
            self.dialysis.value = "none"
            self.obstruction.value = "none"
            self.creatinine_value.value = ""
            self.creatinine_unit.value = "mg/dL"
            self.creatinine_date.value = None
            self.iv_gauge.value = ""
            self.iv_site.value = ""
            self.reactions.clear()
            for name, ctl in self.generic.items():
                ctl.value = spec_control(_SPEC[name]).value
        finally:
            self._holding = False

    def set_patient(self, p: dict[str, Any]) -> list[str]:
        """Fill the form from a patient dict (e.g. from a link); returns messages for values it cannot hold."""
        notes: list[str] = []
        self._holding = True
        try:
            for name in NUMBERS:
                if name in p:
                    getattr(self, name).value = str(p[name])
            if isinstance(p.get("creatinine"), dict):
                self._set_creatinine(p["creatinine"], notes)
            self._set_flags(p, notes)
            for name in ("sex", "dialysis", "obstruction"):
                if name in p:
                    self._choose(getattr(self, name), str(p[name]), f"patient.{name}", notes)
            iv = p.get("iv_access")
            if isinstance(iv, dict):
                self._choose(self.iv_gauge, str(iv.get("gauge", "")), "patient.iv_access.gauge", notes)
                self._choose(self.iv_site, str(iv.get("site", "")), "patient.iv_access.site", notes)
            self._set_reactions(p.get("prior_reactions") or [], notes)
            for name, ctl in self.generic.items():
                if name in p:
                    _set_control(_SPEC[name], ctl, p[name], notes)
        finally:
            self._holding = False
        self.reactions.rows_data = self.reactions.data()
        self.push()
        return notes

    def _set_creatinine(self, cr: dict[str, Any], notes: list[str]) -> None:
        self.creatinine_value.value = str(cr.get("value", ""))
        self._choose(self.creatinine_unit, str(cr.get("unit", "mg/dL")), "patient.creatinine.unit", notes)
        if cr.get("measured_on"):
            try:
                self.creatinine_date.value = dt.date.fromisoformat(str(cr["measured_on"])[:10])
            except ValueError:
                notes.append(f"patient.creatinine.measured_on: {cr['measured_on']!r} from the link is not "
                             "a date; allowed: YYYY-MM-DD")

    def _set_flags(self, p: dict[str, Any], notes: list[str]) -> None:
        for group in GROUP_FLAGS.values():
            for name in group:
                if name in p:
                    if isinstance(p[name], bool):
                        getattr(self, name).value = p[name]
                    else:
                        notes.append(f"patient.{name}: {p[name]!r} from the link is not allowed; allowed: 1 or 0")

    def _set_reactions(self, reactions: list[dict[str, Any]], notes: list[str]) -> None:
        """One reaction row per prior reaction (the rows there before are removed)."""
        self.reactions.clear()
        for r in reactions:
            row = self.reactions.add_row(notify=False)
            for attr, key in (("family", "agent_family"), ("kind", "kind"), ("severity", "severity")):
                if key in r:
                    self._choose(getattr(row, attr), str(r[key]), f"patient.prior_reactions.{key}", notes)
            if r.get("agent"):
                self._choose(row.agent, str(r["agent"]), "patient.prior_reactions.agent", notes)
            if r.get("despite_premedication") is True:
                row.breakthrough.value = True

    @staticmethod
    def _choose(box: w.Dropdown, value: str, field: str, notes: list[str]) -> None:
        allowed = [v for _, v in box.options] if box.options and isinstance(box.options[0], tuple) else list(box.options)
        if value in allowed:
            box.value = value
        else:
            shown = ", ".join(repr(a) for a in allowed if a)
            notes.append(f"{field}: {value!r} from the link is not allowed; allowed: {shown}")

    def show_problems(self, problems: dict[str, list[str]]) -> None:
        """Show each message beside its field (keys are field names without 'patient.')."""
        used = set()
        for key, label in self.errors.items():
            msgs = problems.get(key, [])
            used.add(key)
            _set_error(label, msgs)
        controls = {"creatinine": [self.creatinine_value, self.creatinine_unit, self.creatinine_date],
                    "iv_access": [self.iv_gauge, self.iv_site]}
        for key in self.errors:
            for ctl in controls.get(key, [getattr(self, key, None)]):
                if isinstance(ctl, w.DOMWidget):
                    _mark_invalid(ctl, bool(problems.get(key)))
        _set_error(self.reactions.error, problems.get("prior_reactions", []))
        used.add("prior_reactions")
        rest = [msg for key, msgs in problems.items() if key not in used for msg in msgs]
        _set_error(self.general_error, rest)

    def set_egfr_readout(self, html_text: str) -> None:
        if self.egfr_readout.value != html_text:
            self.egfr_readout.value = html_text
