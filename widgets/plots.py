"""Plotly figures shown in ``widgets.Output``: eGFR on the KDIGO bands, the eGFR what-if strip, the timeline
of timed actions and the dose plan.

Figures are plain plotly figure dicts shown through the ``application/vnd.plotly.v1+json`` mimetype (what
plotly's default ``plotly_mimetype`` renderer emits; plotly.js is served by the local JupyterLab extension,
nothing from a CDN), with a text/plain description as fallback. The Python ``plotly`` package is not imported
in the kernel: its import pulls in nbformat and jsonschema and cost about 1.1 s of every page's start.
An Output is only redrawn when what it shows has changed.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

import html
import ipywidgets as w

from knowledge.tables import models as m
from knowledge.calculators.kidney import KDIGO_CATEGORIES
from knowledge.tables.loader import Knowledge
from knowledge.present.report import TimelineItem, volumes_by_strength
from knowledge.present.whatif import WhatIf

from .style import BAND_COLOUR, BAND_TEXT, TIMELINE_COLOUR, VERDICT_MARK

WIDTH = 640
EGFR_MAX = 130.0
PLOTLY_MIME = "application/vnd.plotly.v1+json"
# No logo link and nothing that sends the data off the server (cloud upload, "edit in chart studio").
CONFIG = {"displaylogo": False, "responsive": False, "showSendToCloud": False, "showEditInChartStudio": False,
          "showLink": False,
          "modeBarButtonsToRemove": ["select2d", "lasso2d", "autoScale2d", "sendDataToCloud", "editInChartStudio"]}


def plot_output() -> w.Output:
    """An Output as wide as its column (plots resize with the page); its height follows the figure."""
    return w.Output(layout=w.Layout(width="100%", max_width=f"{WIDTH + 10}px", overflow="hidden"))


def show_figure(out: w.Output, fig: dict | None, text: str) -> None:
    """Replace what ``out`` shows by the figure dict ``fig`` (or by ``text`` alone when None)."""
    data: dict[str, Any] = {"text/plain": text}
    if fig is not None:
        data[PLOTLY_MIME] = {"data": fig["data"], "layout": fig["layout"], "config": {**CONFIG, **_FLUID}}
        out.layout.min_height = f"{fig['layout'].get('height', 100)}px"
    else:
        data["text/html"] = f"<div class='ca-hint'>{html.escape(text)}</div>"
        out.layout.min_height = None
    out.outputs = ({"output_type": "display_data", "data": data, "metadata": {}},)


#: plots follow their column's width (a phone is narrower than WIDTH)
_FLUID = {"responsive": True}


def _base_layout(height: int, **kw: Any) -> dict[str, Any]:
    return dict(autosize=True, height=height, margin=dict(l=90, r=20, t=30, b=58), showlegend=False,
                plot_bgcolor="#ffffff", paper_bgcolor="#ffffff", font=dict(size=12), **kw)


# ---- eGFR on the KDIGO bands --------------------------------------------------------------------
def egfr_figure(lines: list[tuple[float, str]]) -> dict:
    """The bands and the policy lines (``knowledge.present.whatif.egfr_lines``: the settings that concern the
    exam's agents) as a figure dict, built once per set of lines; the last trace is the patient marker, on a
    row of its own under the bands so it never covers a band's name."""
    data: list[dict[str, Any]] = []
    bounds = list(KDIGO_CATEGORIES)  # high to low
    highs = [EGFR_MAX] + [low for _, low in bounds[:-1]]
    for (name, low), high in zip(bounds, highs):
        span = f"{low:g}–{high:g}" if high < EGFR_MAX else f"{low:g} and above"
        data.append(dict(type="bar", x=[high - low], base=[low], y=["bands"], orientation="h", name=name,
                         marker=dict(color=BAND_COLOUR[name], line=dict(color="#ffffff", width=1)),
                         text=[name], textposition="inside", insidetextanchor="middle",
                         textfont=dict(color=BAND_TEXT[name]), hoverinfo="text", hovertext=[f"{name}: {span}"]))
    shapes, notes = [], []
    for i, (x, label) in enumerate(lines):
        shapes.append(_vline(x, "#5b2a86", 2, "dash"))
        notes.append(dict(x=x, y=1.02 + 0.17 * (i % 2), yref="paper", text=f"<b>{x:g}</b> {label}",
                          showarrow=False, xanchor="left", xshift=2, yanchor="bottom",
                          font=dict(size=10, color="#5b2a86")))
    data.append(dict(type="scatter", x=[], y=[], mode="markers+text", name="patient", textposition="middle right",
                     marker=dict(symbol="diamond", size=14, color="#000000", line=dict(color="#ffffff", width=2)),
                     cliponaxis=False, hoverinfo="text"))
    layout = _base_layout(188, barmode="overlay")
    layout["margin"] = dict(l=70, r=20, t=48, b=58)
    layout.update(xaxis=dict(range=[0, EGFR_MAX], title=dict(text="eGFR, mL/min/1.73 m²<br>(KDIGO 2012 G categories)")),
                  yaxis=dict(categoryorder="array", categoryarray=["patient", "bands"], tickfont=dict(size=11)),
                  shapes=shapes, annotations=notes, bargap=0.15)
    return dict(data=data, layout=layout)


def set_egfr(fig: dict, egfr: float | None, category: str | None) -> str:
    """Move the patient marker of the figure dict from ``egfr_figure``; returns the text description."""
    marker = fig["data"][-1]
    if egfr is None:
        marker["x"], marker["y"], marker["text"] = [], [], []
        return "eGFR unknown"
    x = min(float(egfr), EGFR_MAX)
    cat = category or "AKI: no CKD category"
    marker["x"], marker["y"], marker["text"] = [x], ["patient"], [f" {egfr:g} ({cat})"]
    marker["hovertext"] = [f"this patient: eGFR {egfr:g}, {cat}"]
    return f"eGFR {egfr:g} mL/min/1.73 m², " + (f"KDIGO {category}" if category else cat)


# ---- what-if strip (plain figure dicts: no graph_objects validation on the hot path) ---------------
def _vline(x: Any, colour: str, width: int = 2, dash: str = "solid") -> dict[str, Any]:
    return dict(type="line", xref="x", yref="paper", x0=x, x1=x, y0=0, y1=1,
                line=dict(color=colour, width=width, dash=dash))


#: eGFR span below which a what-if segment shows its glyph only (its words would be too small to read)
_MIN_LABELLED_WIDTH = 35.0


def whatif_figure(whatif: WhatIf, egfr: float | None) -> tuple[dict | None, str]:
    if not whatif.segments:
        return None, whatif.note
    agents = {s.agent for s in whatif.segments}
    data, descr = [], []
    for s in whatif.segments:
        glyph, colour, words = VERDICT_MARK[s.verdict]
        label = f"{glyph} {words}" + (" + hydrate" if s.hydration else "")
        if len(agents) > 1:
            label += f" · {s.agent_name}"
        dark_text = s.verdict is m.Verdict.suitable_with_precautions
        data.append(dict(type="bar", x=[s.high - s.low], base=[s.low], y=["plan"], orientation="h",
                         marker=dict(color=colour, line=dict(color="#ffffff", width=2),
                                     pattern=dict(shape="/" if s.hydration else "", fillmode="overlay", fgcolor="#1f2d3d",
                                                  fgopacity=0.35, size=8)),
                         text=[label if s.high - s.low >= _MIN_LABELLED_WIDTH
                               else glyph + (" + hydrate" if s.hydration and s.high - s.low >= 20 else "")],
                         textposition="inside", insidetextanchor="middle", constraintext="none",
                         textfont=dict(color="#1f2d3d" if dark_text else "#ffffff", size=11), hoverinfo="text",
                         hovertext=[f"eGFR {s.low:g}–{s.high:g}: {s.agent_name}, {words}"
                                    + (", hydration indicated" if s.hydration else "")]))
        descr.append(f"{s.low:g}–{s.high:g}: {s.agent_name} {words}" + (" (hydration)" if s.hydration else ""))
    route = whatif.route.value.replace("_", "-") if whatif.route else ""
    fig = dict(data=data, layout=dict(**_base_layout(158, barmode="overlay"),
               xaxis=dict(range=[whatif.segments[0].low, whatif.segments[-1].high],
                          title=dict(text=f"if eGFR were …<br>(planned {route} agent, all else as entered)")),
               yaxis=dict(showticklabels=False), shapes=[], annotations=[]))
    set_whatif_egfr(fig, whatif, egfr)
    return fig, "What-if over eGFR: " + "; ".join(descr)


def set_whatif_egfr(fig: dict, whatif: WhatIf, egfr: float | None) -> None:
    """Move the 'this patient' line of a what-if figure dict."""
    lay = fig["layout"]
    if egfr is None:
        lay["shapes"], lay["annotations"] = [], []
        return
    x = max(min(float(egfr), whatif.segments[-1].high), whatif.segments[0].low)
    lay["shapes"] = [_vline(x, "#000000", 3)]
    lay["annotations"] = [dict(x=x, y=1.12, yref="paper", text=f"this patient {egfr:g}", showarrow=False,
                               font=dict(size=11))]


# ---- timeline -----------------------------------------------------------------------------------
ROWS = ["metformin", "hydration", "contrast", "premedication"]


def timeline_figure(items: list[TimelineItem], scheduled_at: dt.datetime | None) -> tuple[dict | None, str]:
    timed = [i for i in items if i.kind != "contrast"]
    if not timed:
        return None, "No timed actions for this plan (no premedication, no metformin hold, no hydration)."

    def at(h: float):
        return (scheduled_at + dt.timedelta(hours=h)).isoformat() if scheduled_at else h

    data, lines = [], []
    for item in items:
        colour = TIMELINE_COLOUR[item.kind]
        if item.end_h > item.start_h:
            width = (item.end_h - item.start_h) * (3600 * 1000 if scheduled_at else 1)  # ms on a date axis
            data.append(dict(type="bar", x=[width], base=[at(item.start_h)], y=[item.kind], orientation="h",
                             marker=dict(color=colour, pattern=dict(shape="x", fillmode="overlay", fgcolor="#ffffff",
                                                                 fgopacity=0.5)),
                             text=[item.label], textposition="inside", hoverinfo="text",
                             hovertext=[f"{item.label}: {item.start_h:+g} h to {item.end_h:+g} h"]))
        else:
            symbol = "star" if item.kind == "contrast" else "circle"
            data.append(dict(type="scatter", x=[at(item.start_h)], y=[item.kind], mode="markers+text",
                             marker=dict(symbol=symbol, size=13, color=colour),
                             text=[f"{item.start_h:+g} h" if item.kind == "premedication" else item.label],
                             textposition="top center", hoverinfo="text",
                             hovertext=[f"{item.label} at {item.start_h:+g} h"], cliponaxis=False))
        lines.append(f"{item.start_h:+g} h: {item.label}")
    lo = min(i.start_h for i in items) - 2
    hi = max(i.end_h for i in items) + 2
    if scheduled_at:
        xaxis = dict(type="date", range=[at(lo), at(hi)], title=dict(text="clock time (exam at the star)"),
                     tickformat="%a %H:%M")
    else:
        xaxis = dict(range=[lo, hi], zeroline=True,
                     title=dict(text="hours from the contrast<br>(enter an exam time for clock times)"))
    rows = [r for r in ROWS if any(i.kind == r for i in items)]
    fig = dict(data=data, layout=dict(**_base_layout(78 + 45 * len(rows), barmode="overlay"), xaxis=xaxis,
                                      yaxis=dict(categoryorder="array", categoryarray=rows)))
    return fig, "Timeline: " + "; ".join(lines)


# ---- dose plan ----------------------------------------------------------------------------------
def dose_figure(decision: m.Decision, knowledge: Knowledge) -> tuple[dict | None, str]:
    """The first intravascular role's dose block (``RoleDecision.dose``) against the agent's strengths;
    for MRI and ultrasound the gadolinium or microbubble dose (``RoleDecision.agent_dose``)."""
    if not any(getattr(r, "dose", None) is not None for r in decision.roles) and any(
            getattr(r, "agent_dose", None) is not None for r in decision.roles):
        return agent_dose_figure(decision, knowledge)
    role = next((r for r in decision.roles if getattr(r, "dose", None) is not None), None)
    dose = getattr(role, "dose", None)
    exam = knowledge.exams[decision.exam]
    prot = next((r.protocol for r in exam.roles if r.protocol), None)
    iodine = getattr(dose, "iodine_g", None)
    agent = knowledge.agents.get(getattr(dose, "agent", None) or "")
    if dose is None or agent is None or not isinstance(iodine, (int, float)):
        return None, _dose_not_worked_out(dose, prot)
    pairs = volumes_by_strength(float(iodine), agent)
    cap = prot.max_volume_ml if prot else None
    data = [_strength_bars(pairs, getattr(dose, "concentration_mg_i_ml", None), iodine)]
    shapes, notes = _cap_line(cap)
    title = _dose_title(agent, iodine, dose)
    top = max([v for _, v in pairs] + [cap or 0]) * 1.25
    layout = _base_layout(248)
    layout.update(title=dict(text=title, font=dict(size=12)), shapes=shapes, annotations=notes,
                  yaxis=dict(title=dict(text="volume for this iodine dose, mL"), range=[0, top]),
                  xaxis=dict(title=dict(text="strengths of the agent")))
    fig = dict(data=data, layout=layout)
    return fig, title + ". Volume by strength: " + ", ".join(f"{c:g} mg I/mL → {v:.0f} mL" for c, v in pairs)


def _dose_not_worked_out(dose: Any, prot: Any) -> str:
    """Words for a dose plan with no iodine dose to draw: why, and the exam protocol."""
    if prot is None:
        return "No intravascular dose protocol for this exam."
    why = " ".join(getattr(dose, "warnings", []) or []) if dose is not None else ""
    parts = [f"{prot.iodine_g_per_kg:g} g I/kg" if prot.iodine_g_per_kg else None,
             f"{prot.volume_ml_per_kg:g} mL/kg" if prot.volume_ml_per_kg else None,
             f"{prot.fixed_volume_ml:g} mL" if prot.fixed_volume_ml else None,
             f"at most {prot.max_volume_ml:g} mL",
             f"{prot.flow_ml_s:g} mL/s" if prot.flow_ml_s is not None else "hand bolus, no set flow"]
    return (f"Dose plan: not worked out ({why or 'enter the weight for a weight-based dose'}). Exam protocol: "
            + ", ".join(p for p in parts if p) + ".")


def _strength_bars(pairs: list[tuple[float, float]], chosen_c: Any, iodine: float) -> dict:
    """One bar per strength: the volume that gives this iodine dose; the planned strength solid, the others
    dotted (never colour alone)."""
    return dict(
        type="bar", x=[f"{c:g} mg I/mL" for c, _ in pairs], y=[v for _, v in pairs],
        marker=dict(color=["#0072B2" if c == chosen_c else "#98b6d8" for c, _ in pairs],
                    pattern=dict(shape=["" if c == chosen_c else "." for c, _ in pairs], fillmode="overlay",
                                 fgcolor="#ffffff", fgopacity=0.6)),
        text=[f"{v:.0f} mL" + (" (planned)" if c == chosen_c else "") for c, v in pairs],
        textposition="outside", cliponaxis=False, hoverinfo="text",
        hovertext=[f"{c:g} mg I/mL: {v:.0f} mL for {iodine:.1f} g I" for c, v in pairs])


def _cap_line(cap: float | None) -> tuple[list[dict], list[dict]]:
    """The exam's volume cap as a dashed line and its label (none without a cap)."""
    if cap is None:
        return [], []
    return ([dict(type="line", xref="paper", yref="y", x0=0, x1=1, y0=cap, y1=cap,
                  line=dict(color="#5b2a86", dash="dash", width=2))],
            [dict(xref="paper", x=1, y=cap, yref="y", text=f"exam cap {cap:g} mL", showarrow=False,
                  xanchor="right", yanchor="bottom", font=dict(size=10, color="#5b2a86"))])


def _dose_title(agent: Any, iodine: float, dose: Any) -> str:
    flow = getattr(dose, "flow_ml_s", None)
    idr = getattr(dose, "iodine_delivery_rate_g_s", None)
    return (f"{agent.name}: {iodine:.1f} g I"
            + (f", {dose.volume_ml:.0f} mL" if isinstance(dose.volume_ml, (int, float)) else "")
            + (f" at {flow:g} mL/s" if isinstance(flow, (int, float)) else "")
            + (f" = {idr:.2f} g I/s" if isinstance(idr, (int, float)) else ""))


# ---- gadolinium and microbubble doses (issue 13) -------------------------------------------------
def agent_dose_figure(decision: m.Decision, knowledge: Knowledge) -> tuple[dict | None, str]:
    """Volume for this patient of each usable agent of the role at its labelled standard dose (gadolinium:
    the mmol are the same, the mL differ with the strength), the chosen one marked; a microbubble dose as
    one bar. Returns (None, words) when the volume cannot be worked out (no weight)."""
    rd = next(r for r in decision.roles if getattr(r, "agent_dose", None) is not None)
    d = rd.agent_dose
    chosen = knowledge.agents[d.agent]
    if d.volume_ml is None:
        return None, f"Dose plan ({chosen.name}): {d.basis}. " + " ".join(d.warnings)
    rows: list[tuple[str, float, str]] = []
    if d.family is m.Family.gadolinium and d.dose_mmol and d.dose_mmol_kg:
        weight = d.dose_mmol / d.dose_mmol_kg
        for o in rd.options:
            a = knowledge.agents[o.agent]
            if o.agent == d.agent:
                rows.append((a.name, d.volume_ml, f"{d.volume_ml:g} mL = {d.dose_mmol:g} mmol (planned)"))
            elif o.verdict.severity <= 1 and a.standard_dose_ml_kg and a.standard_dose_mmol_kg:
                vol = round(a.standard_dose_ml_kg * weight, 1)
                rows.append((a.name, vol, f"{vol:g} mL = {a.standard_dose_mmol_kg * weight:.2g} mmol"))
    else:
        rows.append((chosen.name, d.volume_ml, f"{d.volume_ml:g} mL (planned)"))
    names = [r[0] for r in rows]
    data = [dict(
        type="bar", x=names, y=[r[1] for r in rows],
        marker=dict(color=["#0072B2" if n == chosen.name else "#98b6d8" for n in names],
                    pattern=dict(shape=["" if n == chosen.name else "." for n in names], fillmode="overlay",
                                 fgcolor="#ffffff", fgopacity=0.6)),
        text=[r[2] for r in rows], textposition="outside", cliponaxis=False, hoverinfo="text",
        hovertext=[r[2] for r in rows])]
    amount = f"{d.dose_mmol:g} mmol ({d.dose_mmol_kg:g} mmol/kg), " if d.dose_mmol is not None else ""
    title = (f"{chosen.name}: {amount}{d.volume_ml:g} mL"
             + (f" at {d.flow_ml_s:g} mL/s" if d.flow_ml_s is not None else ""))
    layout = _base_layout(230)
    layout.update(title=dict(text=title, font=dict(size=12)),
                  yaxis=dict(title=dict(text="volume for this patient, mL"),
                             range=[0, max(r[1] for r in rows) * 1.3]),
                  xaxis=dict(title=dict(text="usable agents at their labelled standard dose"
                                        if d.family is m.Family.gadolinium else "agent")))
    return dict(data=data, layout=layout), title + ". " + "; ".join(f"{r[0]}: {r[2]}" for r in rows)
