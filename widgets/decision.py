"""The decision panel: one section per role, one card per agent, ruled-out agents collapsed with why.

Each role section is three HTML widgets (its heading, the usable agents' cards, the ruled-out agents'
compact cards); each card is an element with class ``ca-option`` inside them. A change of input only
replaces those HTML values: a page with a hundred card widgets took a second longer to show.
"""

from __future__ import annotations

import html
from typing import Any

import ipywidgets as w

from knowledge.tables import models as m
from knowledge.tables.loader import Knowledge
from knowledge.present.report import ROUTE_WORDS, agent_kind, dose_lines, regimen_line, timed_lines
from knowledge.present.summary import Summary, clinical_verdict, protocol_order_words, split_options

from .style import VERDICT_MARK, verdict_badge

e = html.escape


def _reasons(opt: m.Option) -> str:
    if not opt.reasons:
        return "<div class='ca-hint'>No rule restricts this agent for this patient.</div>"
    items = []
    for r in opt.reasons:
        mark = f" ({VERDICT_MARK[r.verdict][2]})" if r.verdict else ""
        items.append(f"<li>{e(r.text)}{mark}<br><span class='ca-source'>Source: {e(r.source)}</span></li>")
    return "<div><b>Why</b><ul>" + "".join(items) + "</ul></div>"


def card_html(opt: m.Option, agent: m.Agent, ruled_out: bool, verdict: m.Verdict | None = None) -> str:
    """One agent card. ``verdict`` overrides the option's (the clinical verdict of an agent that is only
    possible by the route)."""
    if verdict is not None and verdict is not opt.verdict:
        opt = opt.model_copy(update={"verdict": verdict})
    chosen = " ca-chosen" if opt.chosen else ""
    planned = " · <b>planned</b>" if opt.chosen else ""
    actions = ("<div><b>Do</b><ul>" + "".join(f"<li>{e(a)}</li>" for a in opt.actions) + "</ul></div>"
               if opt.actions else "")
    body = _reasons(opt) + actions
    if ruled_out:  # one line: name, verdict, kind; the reasons fold out
        return (f"<div class='ca-option ca-card ca-compact ca-v-{opt.verdict.value}'>"
                f"<details><summary><b>{e(opt.name)}</b> {verdict_badge(opt.verdict)} "
                f"<span class='ca-meta'>{e(agent_kind(agent))} · why</span></summary>{body}</details></div>")
    head = (f"<div><b>{e(opt.name)}</b> {verdict_badge(opt.verdict)}</div>"
            f"<div class='ca-meta'>{e(agent_kind(agent))} · {protocol_order_words(opt)}{planned}</div>")
    if not opt.chosen and opt.reasons:  # the planned agent shows its reasons; the alternatives fold them
        n = len(opt.reasons)
        body = f"<details><summary>why and what to do ({n} rule{'s' if n > 1 else ''})</summary>{body}</details>"
    return f"<div class='ca-option ca-card ca-v-{opt.verdict.value}{chosen}'>{head}{body}</div>"


#: alert level -> (glyph, word, border colour): words and glyph first, colour (Okabe-Ito ramp) only a third cue
ALERT_LOOK = {"stop": ("✖", "STOP", "#3a3a3a"), "warn": ("⚠", "WARNING", "#CC79A7")}


def alerts_html(d: m.Decision) -> str:
    """The decision's alerts as banners (class ``ca-alert``, one per alert, most severe first)."""
    out = []
    for a in getattr(d, "alerts", []) or []:
        glyph, word, colour = ALERT_LOOK[a.level]
        out.append(f"<div class='ca-alert ca-alert-{a.level}' role='alert' style='border:2px solid {colour};"
                   f"border-left-width:8px;border-radius:4px;padding:6px 10px;margin:4px 0;background:#fff'>"
                   f"<b><span aria-hidden='true'>{glyph}</span> {word}</b> {e(a.text)}"
                   f"<br><span class='ca-source'>Source: {e(a.source)} · rule {e(a.rule)}</span></div>")
    return "".join(out)


def _set(widget: w.HTML, value: str) -> None:
    if widget.value != value:
        widget.value = value


class RoleSection(w.VBox):
    """One role: heading, the usable agents' cards, the ruled-out agents' compact cards."""

    def __init__(self, **kwargs: Any):
        super().__init__(**kwargs)
        self.head = w.HTML("")
        self.usable = w.HTML("")
        self.ruled = w.HTML("")
        self.ruled.add_class("ca-ruled")
        self.children = [self.head, self.usable, self.ruled]
        self.add_class("ca-role")
        self.cards: list[str] = []


class DecisionPanel(w.VBox):
    """Shows a decision. ``show(decision)`` fills it; ``set_stale(True)`` greys it out with a banner."""

    def __init__(self, knowledge: Knowledge, **kwargs: Any):
        super().__init__(**kwargs)
        self._knowledge = knowledge
        self.add_class("ca-decision")
        self.banner = w.HTML("", layout=w.Layout(display="none"))
        self.banner.add_class("ca-stale-banner")
        self.alerts = w.HTML("")
        self.alerts.add_class("ca-alerts")
        self.summary = w.HTML("")
        self.roles_box = w.VBox()
        self.blocks = w.HTML("")
        self._sections: list[RoleSection] = []
        self.body = w.VBox([self.alerts, self.summary, self.roles_box, self.blocks])
        self.children = [self.banner, self.body]
        self.stale = False

    def cards(self) -> list[str]:
        """The HTML of the agent cards showing now (each an element of class ca-option), in order."""
        return [c for s in self.roles_box.children for c in s.cards]

    def set_stale(self, stale: bool, messages: list[str] | None = None) -> None:
        self.stale = stale
        if stale:
            self.body.add_class("ca-stale")
            lines = "".join(f"<li>{e(x)}</li>" for x in (messages or []))
            self.banner.value = ("<b>Not updated.</b> The plan for the earlier inputs is hidden: it is not valid "
                                 f"for the values now entered. Correct these first:<ul>{lines}</ul>")
            self.banner.layout.display = None
        else:
            self.body.remove_class("ca-stale")
            self.banner.layout.display = "none"

    def show(self, d: m.Decision, scheduled_at=None) -> None:
        k = self._knowledge
        if d.contrast is m.ContrastUse.none:
            need = "No contrast is used for this exam."
        elif d.contrast_needed:
            need = "Contrast is required for this exam."
        else:
            need = "Contrast is optional for this exam: the clinical question decides."
        _set(self.alerts, alerts_html(d))
        notes = getattr(d, "exam_notes", "")
        urgency = getattr(d, "urgency", m.Urgency.elective)
        self.summary.value = (f"<h2>Decision: {e(d.exam_name)}</h2><div>{e(need)}"
                              + (f" Urgency: <b>{e(urgency.value)}</b>." if urgency is not m.Urgency.elective else "")
                              + "</div>"
                              + (f"<div class='ca-exam-notes'><b>Exam notes</b>: {e(notes)}</div>" if notes else ""))
        sections = []
        for i, role in enumerate(d.roles):
            while len(self._sections) <= i:
                self._sections.append(RoleSection())
            sec = self._sections[i]
            req = "" if role.required else " (optional)"
            _set(sec.head, f"<h3>{e(role.route.value.replace('_', '-').capitalize())}{req}: {e(role.purpose)}</h3>")
            usable, ruled, other = [], [], []
            usual_opts, other_opts = split_options(role)
            for opt in usual_opts:
                out = opt.verdict.severity >= m.Verdict.not_advised.severity
                (ruled if out else usable).append(card_html(opt, k.agents[opt.agent], out))
            for opt in other_opts:  # only possible by the route: their clinical verdict, folded away
                other.append(card_html(opt, k.agents[opt.agent], True, clinical_verdict(opt)))
            sec.cards = usable + ruled + other
            none = "" if any(o.chosen for o in role.options) or not usable else \
                "<div class='ca-hint'><b>No agent is planned for this role</b> (see the alert above).</div>"
            _set(sec.usable, none + "<div class='ca-cards'>" + "".join(usable) + "</div>" if usable else
                 "<div class='ca-hint'>No agent is usable for this role for this patient.</div>")
            ruled_html = (f"<div class='ca-hint'>Advised against here ({len(ruled)}); open one to see why.</div>"
                          "<div class='ca-ruled-list'>" + "".join(ruled) + "</div>") if ruled else ""
            other_html = (f"<details class='ca-other'><summary>Other agents possible by this route ({len(other)})"
                          "</summary><div class='ca-hint'>Not agents this exam uses for this purpose; each shows its "
                          "clinical verdict.</div><div class='ca-ruled-list'>" + "".join(other) + "</div></details>"
                          ) if other else ""
            _set(sec.ruled, ruled_html + other_html)
            sections.append(sec)
        if tuple(self.roles_box.children) != tuple(sections):
            self.roles_box.children = sections
        self.blocks.value = self._blocks(d, scheduled_at)

    def _blocks(self, d: m.Decision, scheduled_at=None) -> str:
        """The plan for the chosen agents: dose and access per role, hydration, premedication and metformin
        with clock times, creatinine and dose-limit warnings (the same words as the protocol note)."""
        k = self._knowledge
        exam = k.exams[d.exam]
        parts = []
        for i, role in enumerate(d.roles):
            if getattr(role, "dose", None) is None:
                continue
            lines = dose_lines(d, i, exam)
            if lines:
                parts.append(f"<li><b>{e(ROUTE_WORDS[role.route].capitalize())} dose</b><ul>"
                             + "".join(f"<li>{e(x)}</li>" for x in lines) + "</ul></li>")
        if d.renal.hydration_indicated:
            parts.append(f"<li><b>Hydration indicated</b>: {e(d.renal.hydration_regimen or '')}</li>")
        regimen = regimen_line(d, k)
        if regimen:
            parts.append(f"<li><b>Premedication indicated</b>: {e(regimen)}</li>")
        for line in timed_lines(d, k, scheduled_at):
            head, _, rest = line.partition(": ")
            parts.append(f"<li><b>{e(head)}</b>: {e(rest)}</li>" if rest else f"<li>{e(line)}</li>")
        cautions = "".join(f"<li>{e(c)}</li>" for c in d.cautions)
        plan = f"<div><b>For the planned agents</b><ul>{''.join(parts)}</ul></div>" if parts else ""
        return plan + f"<div><b>Cautions</b><ul>{cautions}</ul></div>"


class SummaryPanel(w.VBox):
    """The plan at a glance (class ``ca-summary``): what to give and do, the alerts, what changed since the
    last input (``ca-changes``) and two copy buttons (``ca-copy-summary``, ``ca-copy-link``). The buttons
    carry the text they copy in ``data-ca-copy``; the page template's script puts it on the clipboard."""

    def __init__(self, **kwargs: Any):
        super().__init__(**kwargs)
        self.add_class("ca-summary-box")
        self.body = w.HTML("")
        self.body.add_class("ca-summary")
        self.changes = w.HTML("")
        self.changes.add_class("ca-changes-box")
        self.changes.add_class("ca-live")
        self.buttons = w.HTML("")
        self.buttons.add_class("ca-copy")
        self.children = [self.body, self.changes, self.buttons]
        self.text = ""
        self.link = ""

    def show(self, summary: Summary, query: str) -> None:
        self.text = summary.text()
        first = "".join(f"<p class='ca-first'><b>{e(x)}</b></p>" for x in summary.first)
        agents = "".join(f"<li>{e(x)}</li>" for x in summary.agents)
        alerts = "".join(f"<li class='ca-plan-alert ca-plan-alert-{e(lv)}'><b><span aria-hidden='true'>"
                         f"{ALERT_LOOK.get(lv, ('⚠',))[0]}</span> {'Stop' if lv == 'stop' else 'Warning'}:</b> "
                         f"{e(t)}</li>" for lv, t in summary.alerts)
        actions = "".join(f"<li>{e(x)}</li>" for x in summary.actions)
        html_text = (f"<h2>Plan: {e(summary.exam)}</h2>{first}<ul class='ca-plan-agents'>{agents}</ul>"
                     + (f"<ul class='ca-plan-alerts'>{alerts}</ul>" if alerts else "")
                     + (f"<ul class='ca-plan-actions'>{actions}</ul>" if actions else "")
                     + (f"<div class='ca-hint'>{e(summary.as_of)}</div>" if summary.as_of else ""))
        _set(self.body, html_text)
        self.link = "?" + query
        _set(self.buttons,
             f'<button type="button" class="ca-copy-summary ca-button" data-ca-copy="{e(self.text)}">'
             "Copy plan summary</button> "
             f'<button type="button" class="ca-copy-link ca-button" data-ca-copy-link="{e(query)}">'
             "Copy link to this case</button> <span class='ca-copied' aria-live='polite'></span>")

    def show_changes(self, changes: list[str] | None) -> None:
        """``None``: first view, nothing to compare; [] : the input changed, the plan did not."""
        if changes is None:
            _set(self.changes, "")
        elif not changes:
            _set(self.changes, "<div class='ca-changes'><b>What changed:</b> nothing in the plan.</div>")
        else:
            items = "".join(f"<li>{e(x)}</li>" for x in changes[:8])
            more = f"<li>… and {len(changes) - 8} more</li>" if len(changes) > 8 else ""
            _set(self.changes, f"<div class='ca-changes'><b>What changed</b><ul>{items}{more}</ul></div>")

    def show_stale(self, messages: list[str]) -> None:
        items = "".join(f"<li>{e(x)}</li>" for x in messages)
        _set(self.body, f"<h2>Plan: not available</h2><p><b>Correct the inputs first:</b></p><ul>{items}</ul>")
        _set(self.changes, "")
        _set(self.buttons, "")
        self.text = ""
