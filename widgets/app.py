"""The dashboard: ``ContrastAidApp`` ties the case form to the decision, the plots and the note.

Each app builds its own :class:`knowledge.tables.loader.Knowledge` (no module-level cache), holds its state on
itself, and recomputes on every input change: validate (``knowledge.present.form.case_problems``), decide,
then update widget values in place.
"""

from __future__ import annotations

import datetime as dt
import html
import logging
import os
from typing import Any

import ipywidgets as w
import traitlets

from knowledge.tables import models as m
from knowledge.decision.engine import DECISION_SUPPORT, parse_form_case
from knowledge.decision.engine import decide
from knowledge.errors import ContrastAidError
from knowledge.present.form import case_problems, creatinine_message, field_message, typed_case
from knowledge.present.links import case_from_query, query_from_case
from knowledge.tables.loader import Knowledge, load_knowledge
from knowledge.present.report import protocol_note_html, protocol_note_markdown, short_note, timeline
from knowledge.present.summary import decision_changes, human_ago, plan_summary
from knowledge.present.whatif import WhatIf, egfr_lines, egfr_sweep

from . import plots
from .decision import DecisionPanel, SummaryPanel
from .inputs import CaseModel, ExamPicker, PatientPanel
from .panels import KnowledgeBrowser, ProtocolNote
from .style import CSS
from .worklist import worklist_section

_log = logging.getLogger(__name__)

CAUTION = ("Decision support only: local policy and the supervising radiologist decide; licensed practice "
           "applies. Check every suggestion against the patient and the local product information.")


def wall_clock() -> dt.datetime:
    """The server's local time to the minute: the page's "now" unless a link or the user sets one."""
    return dt.datetime.now().replace(second=0, microsecond=0)


def _field_key(field: str) -> str:
    """'patient.creatinine.value' -> 'creatinine'; 'patient.prior_reactions[0].agent' -> 'prior_reactions'."""
    if not field.startswith("patient."):
        return field.split(".")[0].split("[")[0]
    return field[len("patient."):].split(".")[0].split("[")[0]


class ContrastAidApp(w.VBox):
    """The whole dashboard. ``decision`` is the last valid decision (None while inputs are invalid)."""

    decision = traitlets.Instance(m.Decision, allow_none=True)
    errors = traitlets.List(traitlets.Unicode())
    stale = traitlets.Bool(False)
    query = traitlets.Unicode("")

    def __init__(self, policy_path: str | None = None, query: str = "", defer_plots: bool = False,
                 clock=wall_clock, **kwargs: Any):
        super().__init__(**kwargs)
        # Served pages draw their plotly figures once the browser has connected: loading plotly.js while
        # the page is first drawn cost about a second of time to interactive (benchmarks/bench_tti.py).
        self._plots_ready = not defer_plots
        self.add_class("ca-app")
        self.knowledge: Knowledge = load_knowledge(policy=policy_path)
        self.case: m.Case | None = None
        self.whatif: WhatIf | None = None
        self.link_notes: list[str] = []
        self._plot_keys: dict[str, Any] = {}
        self._whatif_key: Any = None
        self._whatif_fig: dict | None = None
        title = self._build_header()
        self._build_case_and_decision(clock)
        self._build_plots()
        self.note = ProtocolNote()
        browser_box = self._build_browser()
        self._build_link_opener()
        self.children = [w.HTML(CSS), title, self.caution, self._main_box(), browser_box]
        worklist_box = worklist_section(self)  # the worklist tab (widgets/worklist.py)
        worklist_box.add_class("ca-worklist-box")  # not printed
        self.children += (worklist_box,)

        if query:
            self.prefill(query)
        self.model.observe(self._on_input)
        self.recompute()
        self._say_changes = True  # from now on, each input change says what changed in the plan
        if defer_plots:
            self._draw_plots_when_connected()

    def _build_header(self) -> w.HTML:
        """The caution line (``self.caution``); returns the title with the knowledge and policy versions."""
        k = self.knowledge
        self.caution = w.HTML(f"<div>{html.escape(CAUTION)}</div>")
        self.caution.add_class("ca-caution")
        title = w.HTML(
            "<h1 class='ca-title'>contrast-aid · choosing a contrast agent</h1>"
            f"<div class='ca-hint'>Knowledge {k.version} · policy {html.escape(k.policy.name)} · "
            "no patient identifiers are asked for or kept</div>")
        title.add_class("ca-header")
        return title

    def _build_case_and_decision(self, clock) -> None:
        """The case model, the exam picker and patient panel that write it, the decision and summary panels."""
        k = self.knowledge
        self.model = CaseModel()  # the case as typed; the controls write it, recompute observes it
        self.exam = ExamPicker(k, clock, self.model)
        self.exam.set_as_of(None)
        self.patient = PatientPanel(k, self.model)
        self._batch = False
        self.panel = DecisionPanel(k)
        self.summary = SummaryPanel()
        self._last_decision: m.Decision | None = None

    def _build_plots(self) -> None:
        """One output per plot, each in a box hidden until its plot applies, under a "Plots" heading."""
        self.egfr_out = plots.plot_output()
        self.whatif_out = plots.plot_output()
        self.timeline_out = plots.plot_output()
        self.dose_out = plots.plot_output()
        self._egfr_figs: dict[tuple, dict] = {}  # one eGFR figure per set of policy lines (iodinated, gadolinium)

        def plot_box(title: str, out: w.Output) -> w.VBox:
            return w.VBox([w.HTML(f'<h3 class="ca-group-head">{title}</h3>'), out],
                          layout=w.Layout(display="none"))

        self.plot_boxes = {
            "egfr": plot_box("Where this eGFR sits (KDIGO bands, policy thresholds)", self.egfr_out),
            "whatif": plot_box("What if kidney function were different?", self.whatif_out),
            "timeline": plot_box("Timed actions", self.timeline_out),
            "dose": plot_box("Dose plan", self.dose_out)}
        self.plots_box = w.VBox([w.HTML('<h2 class="ca-section-head">Plots</h2>'), *self.plot_boxes.values()])
        self.plots_box.add_class("ca-plots")

    def _build_browser(self) -> w.Accordion:
        """The folded knowledge browser; its tables are built the first time it is opened."""
        self._browser: KnowledgeBrowser | None = None
        self._browser_slot = w.VBox([w.HTML("<div class='ca-hint'>Opening the tables…</div>")])
        browser_box = w.Accordion(children=[self._browser_slot], selected_index=None)
        browser_box.set_title(0, "Knowledge tables and policy in force")
        browser_box.observe(self._on_browser_open, "selected_index")
        browser_box.add_class("ca-browser-box")
        return browser_box

    def _build_link_opener(self) -> None:
        self.link_text = w.Text(description="Open a case link", placeholder="paste a shared link (or its ?query)",
                                style={"description_width": "initial"}, layout=w.Layout(width="100%"))
        self.link_text.add_class("ca-open-link")
        self.link_button = w.Button(description="open", tooltip="fill the form from the pasted link",
                                    layout=w.Layout(width="70px"))
        self.link_button.on_click(lambda b: self.open_link(self.link_text.value))

    def _main_box(self) -> w.Box:
        """The page's grid: the summary, the case form (with the link opener) and the details."""
        left = w.VBox([w.HTML('<h2 class="ca-section-head">The case</h2>'), self.exam, self.patient,
                       w.HTML('<h3 class="ca-group-head">Shared link</h3>'),
                       w.HBox([self.link_text, self.link_button], layout=w.Layout(width="100%"))])
        left.add_class("ca-inputs")
        right = w.VBox([self.panel, self.plots_box, self.note])
        right.add_class("ca-details")
        main = w.Box([self.summary, left, right])
        main.add_class("ca-main")
        return main

    @classmethod
    def from_environment(cls, clock=wall_clock) -> "ContrastAidApp":
        """Build the app from Voila's per-page QUERY_STRING and the CONTRAST_AID_POLICY setting."""
        return cls(policy_path=os.environ.get("CONTRAST_AID_POLICY") or None,
                   query=os.environ.get("QUERY_STRING", ""), defer_plots=True, clock=clock)

    def _draw_plots_when_connected(self, timeout_s: float = 20.0) -> None:
        """Draw the plots once a front end has opened the widget control channel (it does so when it has
        fetched the page's widgets), or after ``timeout_s``; checked on the kernel's event loop."""
        import asyncio
        import time

        from comm import get_comm_manager

        try:
            loop = asyncio.get_event_loop()
        except RuntimeError:
            loop = None
        if loop is None or not loop.is_running():  # no kernel loop (plain Python): draw now
            self._plots_ready = True
            self._show_plots_now()
            return
        deadline = time.monotonic() + timeout_s

        def check() -> None:
            comms = getattr(get_comm_manager(), "comms", {}) or {}
            connected = any(getattr(c, "target_name", "") == "jupyter.widget.control" for c in comms.values())
            if connected or time.monotonic() > deadline:
                self._plots_ready = True
                loop.call_later(0.2, self._show_plots_now)
            else:
                loop.call_later(0.05, check)

        loop.call_later(0.05, check)

    def _show_plots_now(self) -> None:
        if self.decision is not None and self.case is not None:
            self._show_plots(self.decision, self.case)

    @property
    def browser(self) -> KnowledgeBrowser:
        """The knowledge browser, built the first time it is opened (it needs pandas)."""
        if self._browser is None:
            self._browser = KnowledgeBrowser(self.knowledge)
            self._browser_slot.children = [self._browser]
        return self._browser

    def _on_browser_open(self, change: dict) -> None:
        if change["new"] is not None:
            self.browser

    # ---- input
    def prefill(self, query: str) -> None:
        """Fill the form from a URL query string (see knowledge.present.links.case_from_query)."""
        self._batch = True  # one recompute at the end, not one per field
        try:
            self._prefill(case_from_query(query))
        finally:
            self._batch = False
        if getattr(self, "_say_changes", False):  # a link applied to a running page
            self.recompute()

    def open_link(self, link: str) -> None:
        """Apply a shared link (or an edited one) to the running page: the form is cleared, filled from the
        link, and the summary says what changed against the plan shown before."""
        query = link.split("?", 1)[1] if "?" in link else link
        self._batch = True
        try:
            self.exam.clear()
            self.patient.clear()
        finally:
            self._batch = False
        self.prefill(query)

    def _prefill(self, data: dict[str, Any]) -> None:
        notes: list[str] = []
        if "exam" in data:
            msg = self.exam.set_exam(data["exam"])
            if msg:
                notes.append(msg)
        if data.get("agent"):
            if data["agent"] in [v for _, v in self.exam.agent.options]:
                self.exam.agent.value = data["agent"]
            else:
                notes.append(f"agent: {data['agent']!r} from the link is not an agent of this exam")
        if data.get("urgency"):
            if data["urgency"] in [v for _, v in self.exam.urgency.options]:
                self.exam.urgency.value = data["urgency"]
            else:
                notes.append(f"urgency: {data['urgency']!r} from the link is not allowed; allowed: elective, "
                             "urgent, emergency")
        if data.get("override_culprit") is True:
            self.exam.override_culprit.value = True
        if data.get("scheduled_at"):
            self.exam.scheduled.value = data["scheduled_at"].replace("T", " ")
        if data.get("as_of"):
            self.exam.set_as_of(data["as_of"], "the time in the link")
        notes += self.exam.set_extras(data)
        notes += self.patient.set_patient(data.get("patient", {}))
        self.link_notes = notes

    def case_data(self) -> dict[str, Any]:
        """The case as typed (strings for numbers), from the case model."""
        return self.model.case_data()

    def _on_input(self, change: dict) -> None:
        if self._batch:
            return
        self.link_notes = []
        self.recompute()

    # ---- compute and show
    def recompute(self) -> m.Decision | None:
        data = typed_case(self.case_data())
        case, decision, problems = self._decide(data)
        problems = [(f, self._in_form_words(f, msg, data)) for f, msg in problems]
        self._place_problems(problems)
        if decision is None:
            self._show_stale([msg for _, msg in problems])
            return None
        self._show_decision(case, decision)
        return decision

    def _decide(self, data: dict) -> tuple[m.Case | None, m.Decision | None, list[tuple[str, str]]]:
        """Validate the typed case, decide, and update the what-if sweep: (case, decision, problems)."""
        problems = case_problems(data) or self._unit_problems(data)
        if problems:
            return None, None, problems
        case = decision = None
        try:
            case = parse_form_case(data)
            decision = decide(case, self.knowledge)
            self._update_whatif(case)
        except ContrastAidError as exc:
            return case, decision, [(exc.field or "", exc.message)]
        except Exception as exc:  # never leave the last plan on screen as if it were current
            _log.error("recompute failed: %s (case values not logged)", type(exc).__name__)
            return None, None, [("", "Not updated: the plan could not be worked out for these inputs "
                                     f"(internal error {type(exc).__name__}); the plan shown is not current")]
        return case, decision, []

    def _place_problems(self, problems: list[tuple[str, str]]) -> None:
        """Each message beside its field (the link's notes too), and all of them in ``errors``."""
        by_field: dict[str, list[str]] = {}
        for field, message in problems:
            by_field.setdefault(_field_key(field), []).append(message)
        for note in self.link_notes:
            by_field.setdefault(_field_key(note.split(":")[0]), []).append(note)
        self.exam.show_problems(by_field)
        self.patient.show_problems(by_field)
        self.errors = [msg for _, msg in problems] + list(self.link_notes)

    def _show_stale(self, messages: list[str]) -> None:
        """No current plan: every panel greyed or cleared, saying why."""
        self.decision = None
        self.stale = True
        self.panel.set_stale(True, messages)
        self.plots_box.add_class("ca-stale")
        self.note.clear("the inputs have problems (see the marked fields)")
        self.summary.show_stale(messages + list(self.link_notes))
        self._show_applicable_plots(None)
        self.patient.set_egfr_readout("<span class='ca-hint'>eGFR: waiting for valid inputs</span>")

    def _show_decision(self, case: m.Case, decision: m.Decision) -> None:
        """The decision in every panel: cards, eGFR, plots, note, summary and what changed since the last one."""
        self.case = case
        self.decision = decision
        self.stale = False
        self.query = query_from_case(case)
        self.panel.set_stale(False)
        self.plots_box.remove_class("ca-stale")
        self.panel.show(decision, case.scheduled_at)
        self._show_egfr(decision)
        self._show_plots(decision, case)
        self.note.show(protocol_note_markdown(decision, self.knowledge, case.scheduled_at, case),
                       protocol_note_html(decision, self.knowledge, case.scheduled_at, case), self.query,
                       short_note(decision, self.knowledge, case))
        self.summary.show(plan_summary(decision, case.scheduled_at), self.query)
        compare = getattr(self, "_say_changes", False)
        self.summary.show_changes(decision_changes(self._last_decision, decision) if compare else None)
        self._last_decision = decision

    @staticmethod
    def _unit_problems(data: dict) -> list[tuple[str, str]]:
        """A creatinine outside the equations' range in the unit chosen (e.g. 99 mg/dL) is a problem even
        when no eGFR is worked out: it is most often the other unit."""
        cr = (data.get("patient") or {}).get("creatinine")
        if isinstance(cr, dict) and isinstance(cr.get("value"), float):
            msg = creatinine_message(cr["value"], str(cr.get("unit")))
            if msg:
                return [("patient.creatinine", msg)]
        return []

    @staticmethod
    def _in_form_words(field: str, message: str, data: dict) -> str:
        """The message with the form's label; a creatinine out of range that fits the other unit says so."""
        cr = (data.get("patient") or {}).get("creatinine")
        if field.startswith("patient.creatinine") and isinstance(cr, dict) and isinstance(cr.get("value"), float):
            hint = creatinine_message(cr["value"], str(cr.get("unit")))
            if hint:
                return hint
        return field_message(field, message)

    def _show_applicable_plots(self, d: m.Decision | None) -> None:
        """Only the plots that apply: the kidney plots for an exam with renal exposure, the timeline when
        there is a timed action, the dose plot when there is a dose plan."""
        exam = self.knowledge.exams.get(d.exam) if d is not None else None
        renal = exam is not None and any(r.route in m.INTRAVASCULAR for r in exam.roles)
        timed = d is not None and (d.premedication.indicated or d.metformin.hold or d.renal.hydration_indicated)
        dose = d is not None and any(getattr(r, "dose", None) is not None or getattr(r, "agent_dose", None)
                                     is not None for r in d.roles)
        show = {"egfr": renal, "whatif": renal, "timeline": timed, "dose": dose}
        for name, box in self.plot_boxes.items():
            display = None if show[name] else "none"
            if box.layout.display != display:
                box.layout.display = display
        display = None if any(show.values()) else "none"
        if self.plots_box.layout.display != display:
            self.plots_box.layout.display = display

    def _update_whatif(self, case: m.Case) -> None:
        # the sweep replaces kidney function, so it only depends on the rest of the case
        key = case.model_dump_json(exclude={"patient": {"creatinine", "cystatin_c_mg_l", "egfr"}})
        if key != self._whatif_key:
            self.whatif = egfr_sweep(case, self.knowledge)
            self._whatif_key = key
            self._whatif_fig = None

    def _show_egfr(self, d: m.Decision) -> None:
        r = d.renal
        if r.egfr is None:
            text = f"eGFR: not known. {html.escape(r.note or '')}"
        else:
            cat = f"KDIGO <b>{r.category}</b>" if r.category else "no CKD category (acute kidney injury)"
            text = (f"eGFR <b>{r.egfr:g}</b> mL/min/1.73 m² · {cat} · "
                    f"{html.escape(r.note or '')}")
        if r.creatinine_age_days is not None:
            age = html.escape(human_ago(r.creatinine_age_days))
            if r.creatinine_stale:
                text += (f"<div class='ca-stale-lab'><b>Creatinine too old:</b> taken {age} at the exam time; this "
                         f"patient needs one from the last {r.creatinine_max_age_days:g} days (policy). "
                         "Repeat it before relying on this eGFR.</div>")
            else:
                text += f" · creatinine taken {age} at the exam time"
        self.patient.set_egfr_readout(text)

    def _redraw(self, name: str, out: w.Output, key: Any, make) -> None:
        # a hidden plot is not drawn (plotly would size it without a container); it is when it shows
        if self._plot_keys.get(name) == key or self.plot_boxes[name].layout.display == "none":
            return
        fig, text = make()
        plots.show_figure(out, fig, text)
        self._plot_keys[name] = key

    def _show_plots(self, d: m.Decision, case: m.Case) -> None:
        self._show_applicable_plots(d)
        if not self._plots_ready:
            return
        k = self.knowledge
        r = d.renal

        lines = tuple(egfr_lines(k, d.exam))  # an MRI exam shows the gadolinium line, not the iodinated ones

        def egfr():
            fig = self._egfr_figs.get(lines)
            if fig is None:
                fig = self._egfr_figs[lines] = plots.egfr_figure(list(lines))
            return fig, plots.set_egfr(fig, r.egfr, r.category)

        self._redraw("egfr", self.egfr_out, (r.egfr, r.category, lines), egfr)
        wi = self.whatif

        def whatif():
            if self._whatif_fig is None:
                self._whatif_fig, self._whatif_text = plots.whatif_figure(wi, r.egfr)
            elif wi.segments:
                plots.set_whatif_egfr(self._whatif_fig, wi, r.egfr)
            return self._whatif_fig, self._whatif_text

        self._redraw("whatif", self.whatif_out, (self._whatif_key, r.egfr), whatif)
        items = timeline(d, k, case.scheduled_at)
        self._redraw("timeline", self.timeline_out, (tuple(items), case.scheduled_at),
                     lambda: plots.timeline_figure(items, case.scheduled_at))
        doses = tuple(repr((getattr(role, "dose", None), getattr(role, "agent_dose", None))) for role in d.roles)
        self._redraw("dose", self.dose_out, (d.exam, doses), lambda: plots.dose_figure(d, k))

    # ---- for tests and notebooks
    def option_cards(self) -> list[str]:
        """The HTML of the agent cards (class ca-option) now showing."""
        return self.panel.cards()


__all__ = ["ContrastAidApp", "CAUTION", "DECISION_SUPPORT"]
