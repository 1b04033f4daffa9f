"""The case form: the exam picker and the patient panel (grouped), with a prior-reaction editor.

These widgets only collect input. ``case_data()`` returns the raw values as a case dict (strings for
numbers, as typed); validation and its words come from ``knowledge`` (``case_problems``, CaseError).
"""

from __future__ import annotations

import datetime as dt
from typing import Any

import ipywidgets as w
import traitlets

from knowledge.tables import constants, models as m
from knowledge.present.form import NUMBERS, creatinine_hint, hint
from knowledge.tables.loader import Knowledge

MODALITY_LABEL = {m.Modality.fluoroscopy: "Fluoro", m.Modality.angiography: "Angio", m.Modality.ct: "CT",
                  m.Modality.mri: "MRI", m.Modality.ultrasound: "US"}
MODALITY_ORDER = {m.Modality.fluoroscopy: 0, m.Modality.angiography: 1, m.Modality.ct: 2,
                  m.Modality.mri: 3, m.Modality.ultrasound: 4}
_WIDE = w.Layout(width="230px")
_DESC = {"description_width": "initial"}


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


class ExamPicker(w.VBox):
    """A filter box and a list of exams grouped by modality, with the purpose of the one picked."""

    exam_id = traitlets.Unicode("")
    revision = traitlets.Int(0)

    def __init__(self, knowledge: Knowledge, clock, **kwargs: Any):
        super().__init__(**kwargs)
        self._knowledge = knowledge
        self._all = sorted(knowledge.exams.values(), key=lambda e: (MODALITY_ORDER[e.modality], e.name.lower()))
        self.filter = w.Text(placeholder="filter: name, region, purpose or modality", description="Find exam",
                             style=_DESC, layout=w.Layout(width="100%"))
        self.filter.add_class("ca-exam-filter")
        self.select = w.Select(options=self._options(self._all), rows=9, layout=w.Layout(width="100%"))
        self.select.add_class("ca-exam")
        self.purpose = w.HTML("")
        self.purpose.add_class("ca-exam-purpose")
        self.agent = w.Dropdown(description="Plan with", options=[("top-ranked option", "")], style=_DESC,
                                layout=w.Layout(width="100%"))
        self.agent.add_class("ca-agent")
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
        self.error = _error_label()
        self.urgency = w.Dropdown(description="Urgency", options=[(u.value, u.value) for u in m.Urgency],
                                  style=_DESC, layout=w.Layout(width="260px"))
        self.urgency.add_class("ca-urgency")
        self.override_culprit = w.Checkbox(
            description="Override: plan the requested agent even though it caused an earlier reaction",
            indent=False, layout=w.Layout(width="auto"))
        self.override_culprit.add_class("ca-override-culprit")
        head = w.HTML('<div class="ca-group-head">Exam</div>')
        self.children = [head, self.filter, self.select, self.purpose, self.agent, self.override_culprit,
                         self.urgency, self.scheduled,
                         self.scheduled_error, w.HBox([self.as_of, self.as_of_now]), self.as_of_source,
                         self.as_of_error, self.error]
        self.filter.observe(self._on_filter, "value")
        self.select.observe(self._on_select, "value")
        self.agent.observe(self._on_agent, "value")
        self.urgency.observe(self._on_agent, "value")
        self.override_culprit.observe(self._on_agent, "value")
        self.scheduled.observe(self._on_agent, "value")
        self.as_of.observe(self._on_as_of, "value")
        self.as_of_now.on_click(lambda b: self.set_as_of(None))
        self._clock = clock
        if self._all:
            default = knowledge.exams.get("ct-abdomen-pelvis") or next((e for e in self._all if e.roles), self._all[0])
            self.select.value = default.id

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
        self.revision += 1

    def _on_agent(self, change: dict) -> None:
        self.revision += 1

    def _on_as_of(self, change: dict) -> None:
        if not self._setting_as_of:
            self.as_of_source.value = "<span class='ca-hint'>'now' as typed here</span>"
        self.revision += 1

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
        return out

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
        self.family = w.Dropdown(options=[(f.value, f.value) for f in m.Family], value="iodinated",
                                 layout=small("95px"))
        self.kind = w.Dropdown(options=[("allergic-like", "allergic_like"), ("physiologic", "physiologic"),
                                        ("delayed (skin, hours-days)", "delayed")],
                               layout=small("110px"))
        self.severity = w.Dropdown(options=["mild", "moderate", "severe"], layout=small("90px"))
        self.agent = w.Dropdown(options=self._agents("iodinated"), layout=small("120px"))
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
    """Several prior contrast reactions; rows are added and removed."""

    revision = traitlets.Int(0)

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
            self.revision += 1
        return row

    def clear(self) -> None:
        self.rows = []
        self._layout_rows()

    def _on_remove(self, row: ReactionRow) -> None:
        self.rows = [r for r in self.rows if r is not row]
        self._layout_rows()
        self.revision += 1

    def _on_row_change(self) -> None:
        self.revision += 1

    def data(self) -> list[dict[str, Any]]:
        return [r.data() for r in self.rows]


#: the boolean patient factors, by group (Patient field names)
GROUP_FLAGS = {
    "kidney": ["acute_kidney_injury", "kidney_disease_history", "diabetes"],
    "gut": ["perforation_suspected", "aspiration_risk", "tracheoesophageal_fistula_suspected",
            "colitis_or_diverticulitis", "toxic_megacolon", "recent_deep_biopsy", "bowel_fistula_suspected",
            "obstruction_high_grade"],
    "other": ["takes_metformin", "hyperthyroidism", "radioiodine_planned", "pregnant", "breastfeeding",
              "shellfish_or_iodine_allergy", "heart_failure", "myasthenia_gravis", "inpatient",
              "manifest_hyperthyroidism", "pheochromocytoma",
              "peg_allergy", "unstable_cardiopulmonary"],  # the last two: MRI and ultrasound (issue 13)
}
FLAG_LABEL = {
    "acute_kidney_injury": "Acute kidney injury now",
    "kidney_disease_history": "Kidney disease, kidney surgery or a single kidney",
    "diabetes": "Diabetes",
    "perforation_suspected": "Perforation or leak suspected",
    "aspiration_risk": "Swallowing difficulty or aspiration risk",
    "tracheoesophageal_fistula_suspected": "Tracheo-oesophageal fistula suspected",
    "takes_metformin": "Takes metformin",
    "hyperthyroidism": "Nodular goitre, latent hyperthyroidism or latent Graves' disease",
    "radioiodine_planned": "Radioiodine therapy or scan planned",
    "pregnant": "Pregnant",
    "breastfeeding": "Breastfeeding",
    "shellfish_or_iodine_allergy": "Reports seafood or povidone-iodine allergy",
    "heart_failure": "Heart failure that limits IV fluids",
    "myasthenia_gravis": "Myasthenia gravis",
    "inpatient": "Inpatient or acutely ill",
    "colitis_or_diverticulitis": "Acute colitis or diverticulitis",
    "toxic_megacolon": "Toxic megacolon",
    "recent_deep_biopsy": "Deep biopsy, polypectomy or colonic surgery in the last days",
    "bowel_fistula_suspected": "Bowel fistula suspected",
    "obstruction_high_grade": "Obstruction is high-grade",
    "manifest_hyperthyroidism": "Manifest (overt) hyperthyroidism now",
    "pheochromocytoma": "Pheochromocytoma or paraganglioma",
    "peg_allergy": "Polyethylene glycol (PEG) hypersensitivity",
    "unstable_cardiopulmonary": "Pulmonary hypertension or unstable cardiopulmonary condition",
}
IV_SITES = list(constants.IV_SITES)


class PatientPanel(w.VBox):
    """Patient factors in groups: kidney; gut and swallowing; reaction history; other conditions; size and IV.

    Controls are attributes named after the Patient fields (``age_years``, ``perforation_suspected``, ...)
    plus ``creatinine_value``, ``creatinine_unit``, ``creatinine_date``, ``iv_gauge``, ``iv_site`` and
    ``reactions`` (a :class:`ReactionEditor`).
    """

    revision = traitlets.Int(0)

    def __init__(self, knowledge: Knowledge, **kwargs: Any):
        super().__init__(**kwargs)
        self._knowledge = knowledge
        self._holding = False
        self.errors: dict[str, w.HTML] = {}

        def number(name: str) -> w.VBox:
            label, unit = NUMBERS[name]
            box = w.Text(description=label, placeholder=hint(name), style=_DESC, layout=_WIDE,
                         continuous_update=True)
            setattr(self, name, box)
            err = self.errors[name] = _error_label()
            return w.VBox([w.HBox([box, w.HTML(f"<span class='ca-hint'>{hint(name)}</span>")]), err])

        def flag(name: str) -> w.Checkbox:
            box = w.Checkbox(description=FLAG_LABEL[name], indent=False, layout=w.Layout(width="auto"))
            setattr(self, name, box)
            return box

        def head(text: str) -> w.HTML:
            return w.HTML(f'<div class="ca-group-head">{text}</div>')

        # kidney
        self.creatinine_value = w.Text(description="Creatinine", placeholder="serum creatinine", style=_DESC,
                                       layout=w.Layout(width="180px"))
        self.creatinine_unit = w.Dropdown(options=[("mg/dL", "mg/dL"), ("µmol/L", "umol/L")],
                                          layout=w.Layout(width="90px"))
        self.creatinine_hint = w.HTML(f"<span class='ca-hint'>{creatinine_hint('mg/dL')}</span>")
        self.creatinine_date = w.DatePicker(description="measured on", style=_DESC, value=None,
                                            layout=w.Layout(width="230px"))
        self.errors["creatinine"] = _error_label()
        self.sex = w.Dropdown(description="Sex", options=[("not given", ""), ("female", "female"), ("male", "male")],
                              style=_DESC, layout=w.Layout(width="180px"))
        self.errors["sex"] = _error_label()
        self.dialysis = w.Dropdown(description="Dialysis", style=_DESC, layout=w.Layout(width="300px"),
                                   options=[("none", "none"), ("dialysis, anuric", "dialysis_anuric"),
                                            ("dialysis, residual function", "dialysis_residual_function")])
        self.egfr_readout = w.HTML("")
        self.egfr_readout.add_class("ca-egfr")
        kidney = w.VBox([
            head("Kidney"), number("age_years"), w.VBox([self.sex, self.errors["sex"]]),
            w.HBox([self.creatinine_value, self.creatinine_unit, self.creatinine_hint]),
            self.creatinine_date, self.errors["creatinine"], number("cystatin_c_mg_l"), number("egfr"),
            w.HTML("<span class='ca-hint'>An entered eGFR is used instead of the creatinine estimate.</span>"),
            flag("acute_kidney_injury"), flag("kidney_disease_history"), flag("diabetes"), self.dialysis,
            self.egfr_readout])
        # gut and swallowing
        self.obstruction = w.Dropdown(description="Bowel obstruction", style=_DESC, layout=w.Layout(width="300px"),
                                      options=[("none", "none"), ("small bowel", "small_bowel"),
                                               ("large bowel", "large_bowel")])
        gut = w.VBox([head("Gut and swallowing")] + [flag(n) for n in GROUP_FLAGS["gut"]] + [self.obstruction])
        # reactions
        self.reactions = ReactionEditor(knowledge)
        history = w.VBox([head("Earlier contrast reactions"), self.reactions])
        # other
        other = w.VBox([head("Other conditions and medicines")] + [flag(n) for n in GROUP_FLAGS["other"]])
        # size and access
        self.iv_gauge = w.Dropdown(description="IV catheter", style=_DESC, layout=w.Layout(width="170px"),
                                   options=[("none given", "")] + [(f"{g} G", str(g)) for g in range(14, 25)])
        self.iv_site = w.Dropdown(options=[("site", "")] + [(s.replace("_", " "), s) for s in IV_SITES],
                                  layout=w.Layout(width="190px"))
        self.errors["iv_access"] = _error_label()
        size = w.VBox([head("Size and IV access"), number("weight_kg"), number("height_cm"),
                       w.HTML("<span class='ca-hint'>Height is used for the children's eGFR (bedside Schwartz).</span>"),
                       w.HBox([self.iv_gauge, self.iv_site]), self.errors["iv_access"]])
        self.general_error = _error_label()
        self.children = [kidney, gut, history, other, size, self.general_error]

        self._controls = ([getattr(self, n) for n in NUMBERS]
                          + [getattr(self, n) for g in GROUP_FLAGS.values() for n in g]
                          + [self.creatinine_value, self.creatinine_unit, self.creatinine_date, self.sex,
                             self.dialysis, self.obstruction, self.iv_gauge, self.iv_site])
        for c in self._controls:
            c.observe(self._on_change, "value")
        self.creatinine_unit.observe(self._on_unit, "value")
        self.reactions.observe(self._on_change, "revision")

    # ---- events
    def _on_change(self, change: dict) -> None:
        if not self._holding:
            self.revision += 1

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
        return p

    def set_patient(self, p: dict[str, Any]) -> list[str]:
        """Fill the form from a patient dict (e.g. from a link); returns messages for values it cannot hold."""
        notes: list[str] = []
        self._holding = True
        try:
            for name in NUMBERS:
                if name in p:
                    getattr(self, name).value = str(p[name])
            cr = p.get("creatinine")
            if isinstance(cr, dict):
                self.creatinine_value.value = str(cr.get("value", ""))
                self._choose(self.creatinine_unit, str(cr.get("unit", "mg/dL")), "patient.creatinine.unit", notes)
                if cr.get("measured_on"):
                    try:
                        self.creatinine_date.value = dt.date.fromisoformat(str(cr["measured_on"])[:10])
                    except ValueError:
                        notes.append(f"patient.creatinine.measured_on: {cr['measured_on']!r} from the link is not "
                                     "a date; allowed: YYYY-MM-DD")
            for group in GROUP_FLAGS.values():
                for name in group:
                    if name in p:
                        if isinstance(p[name], bool):
                            getattr(self, name).value = p[name]
                        else:
                            notes.append(f"patient.{name}: {p[name]!r} from the link is not allowed; allowed: 1 or 0")
            for name in ("sex", "dialysis", "obstruction"):
                if name in p:
                    self._choose(getattr(self, name), str(p[name]), f"patient.{name}", notes)
            iv = p.get("iv_access")
            if isinstance(iv, dict):
                self._choose(self.iv_gauge, str(iv.get("gauge", "")), "patient.iv_access.gauge", notes)
                self._choose(self.iv_site, str(iv.get("site", "")), "patient.iv_access.site", notes)
            self.reactions.clear()
            for r in p.get("prior_reactions") or []:
                row = self.reactions.add_row(notify=False)
                for attr, key in (("family", "agent_family"), ("kind", "kind"), ("severity", "severity")):
                    if key in r:
                        self._choose(getattr(row, attr), str(r[key]), f"patient.prior_reactions.{key}", notes)
                if r.get("agent"):
                    self._choose(row.agent, str(r["agent"]), "patient.prior_reactions.agent", notes)
                if r.get("despite_premedication") is True:
                    row.breakthrough.value = True
        finally:
            self._holding = False
        self.revision += 1
        return notes

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
        _set_error(self.reactions.error, problems.get("prior_reactions", []))
        used.add("prior_reactions")
        rest = [msg for key, msgs in problems.items() if key not in used for msg in msgs]
        _set_error(self.general_error, rest)

    def set_egfr_readout(self, html_text: str) -> None:
        if self.egfr_readout.value != html_text:
            self.egfr_readout.value = html_text
