"""The decision panel: one section per role, one card per agent, ruled-out agents collapsed with why.

Cards are HTML widgets (class ``ca-option``) kept in a pool and refilled on each decision, so a change of
input updates values instead of rebuilding widgets.
"""

from __future__ import annotations

import html
from typing import Any

import ipywidgets as w

from knowledge import models as m
from knowledge.loader import Knowledge
from knowledge.report import agent_kind

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


def card_html(opt: m.Option, agent: m.Agent, ruled_out: bool) -> str:
    chosen = " ca-chosen" if opt.chosen else ""
    planned = " · <b>planned</b>" if opt.chosen else ""
    head = (f"<div><b>{e(opt.name)}</b> {verdict_badge(opt.verdict)}</div>"
            f"<div class='ca-meta'>{e(agent_kind(agent))} · rank {opt.rank}{planned}</div>")
    actions = ("<div><b>Do</b><ul>" + "".join(f"<li>{e(a)}</li>" for a in opt.actions) + "</ul></div>"
               if opt.actions else "")
    body = _reasons(opt) + actions
    if ruled_out:
        body = f"<details><summary>why it is {VERDICT_MARK[opt.verdict][2]}</summary>{body}</details>"
    return f"<div class='ca-card ca-v-{opt.verdict.value}{chosen}'>{head}{body}</div>"


class RoleSection(w.VBox):
    def __init__(self, **kwargs: Any):
        super().__init__(**kwargs)
        self.head = w.HTML("")
        self.usable = w.Box(layout=w.Layout(display="flex", flex_flow="row wrap", grid_gap="6px"))
        self.ruled_head = w.HTML("")
        self.ruled = w.Box(layout=w.Layout(display="flex", flex_flow="row wrap", grid_gap="4px"))
        self.ruled.add_class("ca-ruled")
        self.children = [self.head, self.usable, self.ruled_head, self.ruled]
        self.add_class("ca-role")


def _set_children(box: w.Box, children: list) -> None:
    if tuple(box.children) != tuple(children):
        box.children = children


class DecisionPanel(w.VBox):
    """Shows a decision. ``show(decision)`` fills it; ``set_stale(True)`` greys it out with a banner."""

    def __init__(self, knowledge: Knowledge, **kwargs: Any):
        super().__init__(**kwargs)
        self._knowledge = knowledge
        self.add_class("ca-decision")
        self.banner = w.HTML("", layout=w.Layout(display="none"))
        self.banner.add_class("ca-stale-banner")
        self.summary = w.HTML("")
        self.roles_box = w.VBox()
        self.blocks = w.HTML("")
        self._cards: list[w.HTML] = []
        self._sections: list[RoleSection] = []
        self.body = w.VBox([self.summary, self.roles_box, self.blocks])
        self.children = [self.banner, self.body]
        self.stale = False

    def _card(self, i: int) -> w.HTML:
        while len(self._cards) <= i:
            card = w.HTML("", layout=w.Layout(width="310px"))
            card.add_class("ca-option")
            self._cards.append(card)
        return self._cards[i]

    def cards(self) -> list[w.HTML]:
        """The cards showing now, in order."""
        return [c for s in self.roles_box.children for box in (s.usable, s.ruled) for c in box.children]

    def set_stale(self, stale: bool, messages: list[str] | None = None) -> None:
        self.stale = stale
        if stale:
            self.body.add_class("ca-stale")
            lines = "".join(f"<li>{e(x)}</li>" for x in (messages or []))
            self.banner.value = ("<b>Not updated.</b> The plan below belongs to earlier inputs and is not valid "
                                 f"for the values now entered. Correct these first:<ul>{lines}</ul>")
            self.banner.layout.display = None
        else:
            self.body.remove_class("ca-stale")
            self.banner.layout.display = "none"

    def show(self, d: m.Decision) -> None:
        k = self._knowledge
        if d.contrast is m.ContrastUse.none:
            need = "No contrast is used for this exam."
        elif d.contrast_needed:
            need = "Contrast is required for this exam."
        else:
            need = "Contrast is optional for this exam: the clinical question decides."
        self.summary.value = f"<h3>{e(d.exam_name)}</h3><div>{e(need)}</div>"
        n = 0
        sections = []
        for i, role in enumerate(d.roles):
            while len(self._sections) <= i:
                self._sections.append(RoleSection())
            sec = self._sections[i]
            req = "" if role.required else " (optional)"
            sec.head.value = (f"<h4>{e(role.route.value.replace('_', '-').capitalize())}{req}: "
                              f"{e(role.purpose)}</h4>")
            usable, ruled = [], []
            for opt in role.options:
                out = opt.verdict.severity >= m.Verdict.not_advised.severity
                card = self._card(n)
                n += 1
                text = card_html(opt, k.agents[opt.agent], out)
                if card.value != text:
                    card.value = text
                (ruled if out else usable).append(card)
            if not usable:
                usable_note = w.HTML("<div class='ca-hint'>No agent is usable for this role for this patient.</div>")
                usable = [usable_note]
            _set_children(sec.usable, usable)
            sec.ruled_head.value = (f"<div class='ca-hint'>Ruled out here ({len(ruled)}); open one to see why.</div>"
                                    if ruled else "")
            _set_children(sec.ruled, ruled)
            sections.append(sec)
        _set_children(self.roles_box, sections)
        self.blocks.value = self._blocks(d)

    def _blocks(self, d: m.Decision) -> str:
        k = self._knowledge
        parts = []
        r = d.renal
        if r.hydration_indicated:
            parts.append(f"<li><b>Hydration indicated</b>: {e(r.hydration_regimen or '')}</li>")
        if d.premedication.indicated:
            reg = k.regimens.get(d.premedication.regimen or "")
            name = reg.name if reg else (d.premedication.regimen or "")
            parts.append(f"<li><b>Premedication indicated</b>: {e(name)} (policy regimen; see timeline)</li>")
        for name, block in (("Kidney", r), ("Premedication", d.premedication)):
            for warning in getattr(block, "warnings", []) or []:
                parts.append(f"<li><b>{name}</b>: {e(warning)}</li>")
        limits = getattr(r, "dose_limits", None)
        for msg in getattr(limits, "messages", []) or []:
            parts.append(f"<li><b>Dose limits</b>: {e(msg)}</li>")
        if d.metformin.advice:
            parts.append(f"<li><b>Metformin</b>: {e(d.metformin.advice)}</li>")
        cautions = "".join(f"<li>{e(c)}</li>" for c in d.cautions)
        plan = f"<div><b>For the planned agents</b><ul>{''.join(parts)}</ul></div>" if parts else ""
        return plan + f"<div><b>Cautions</b><ul>{cautions}</ul></div>"
